"""Moist thermodynamics on DataArrays or numpy values: humidity variables, LCL, θe, θw, pseudo-adiabats.

Each function applies one formula of :mod:`qgforce.thermo.formulas` (or the pseudo-adiabats of
:mod:`qgforce.thermo.adiabats`) elementwise: to numpy values directly, to DataArrays through
:func:`xarray.apply_ufunc` (lazy on dask input) with CF names and units attached.  Every
function takes and returns SI values: K, Pa, kg kg-1.

References
----------
Bolton, D., 1980: The computation of equivalent potential temperature. *Mon. Wea. Rev.*, 108,
1046–1053.
Wallace, J. M. and P. V. Hobbs, 2006: *Atmospheric Science: An Introductory Survey*, 2nd ed.,
Academic Press (§3.5 moisture variables, §3.7 pseudo-adiabats).
Emanuel, K. A., 1994: *Atmospheric Convection*. Oxford University Press (§4.7 pseudo-adiabatic
processes).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from . import formulas as F
from .adiabats import adiabat_table, integrate_adiabat

__all__ = [
    "saturation_vapour_pressure",
    "dewpoint",
    "vapour_pressure",
    "specific_humidity_from_vapour_pressure",
    "mixing_ratio",
    "specific_humidity_from_mixing_ratio",
    "saturation_mixing_ratio",
    "saturation_specific_humidity",
    "relative_humidity",
    "lifting_condensation_level",
    "equivalent_potential_temperature",
    "wet_bulb_potential_temperature",
    "pseudo_adiabatic_lapse_rate",
    "moist_adiabat",
]


def _elementwise(kernel, *args, name, attrs, n_out=1):
    """Apply an elementwise kernel to numpy values or (lazily) to DataArrays."""
    if any(isinstance(a, xr.DataArray) for a in args):
        out = xr.apply_ufunc(
            kernel, *args, dask="parallelized", output_dtypes=[np.float64] * n_out, keep_attrs=False,
            output_core_dims=[[]] * n_out,
        )
        outs = out if n_out > 1 else (out,)
        names = name if n_out > 1 else (name,)
        attrs_ = attrs if n_out > 1 else (attrs,)
        for o, nm, at in zip(outs, names, attrs_):
            o.name = nm
            o.attrs = dict(at)
        return out
    with np.errstate(divide="ignore", invalid="ignore"):
        return kernel(*[np.asarray(a, dtype=np.float64) for a in args])


def saturation_vapour_pressure(temperature):
    """Saturation vapour pressure over liquid water [Pa] (Bolton 1980, eq. 10).

    Parameters
    ----------
    temperature : array_like or xarray.DataArray
        Temperature [K].

    Returns
    -------
    same type as the input
        e_s [Pa].

    Notes
    -----
    e_s = 611.2 Pa · exp(17.67 T_c / (T_c + 243.5)), T_c = T − 273.15 K: Bolton's fit to the
    Wexler (1976) values, within 0.1 % from −30 to +35 °C.  It is the one saturation formula of
    qgforce (also below 0 °C: over water, not ice).  Below 100 K the formula (with a pole at
    29.65 K) is evaluated at 100 K, where e_s ≈ 1e-16 Pa.

    References
    ----------
    Bolton, D., 1980: *Mon. Wea. Rev.*, 108, 1046–1053.

    Examples
    --------
    >>> round(float(saturation_vapour_pressure(273.15)), 1)
    611.2
    """
    return _elementwise(F.saturation_vapour_pressure, temperature, name="saturation_vapour_pressure",
                        attrs={"units": "Pa", "long_name": "saturation vapour pressure over water (Bolton 1980)"})


def dewpoint(vapour_pressure):
    """Dew point [K] from vapour pressure [Pa]: the exact inverse of Bolton (1980) eq. 10.

    Notes
    -----
    With x = ln(e / 611.2 Pa): T_d = 273.15 K + 243.5 K · x / (17.67 − x).  NaN for e ≤ 0.
    """

    def kernel(e):
        with np.errstate(divide="ignore", invalid="ignore"):
            x = np.log(e / F.ES0)
        return np.where(e > 0, F.dewpoint_from_log_vapour_ratio(x), np.nan)

    return _elementwise(kernel, vapour_pressure, name="dew_point_temperature",
                        attrs={"units": "K", "standard_name": "dew_point_temperature", "long_name": "dew point"})


def vapour_pressure(pressure, specific_humidity):
    """Water vapour partial pressure e = p q / (ε + (1 − ε) q) [Pa] (Wallace & Hobbs 2006, §3.5)."""
    return _elementwise(F.vapour_pressure, pressure, specific_humidity, name="water_vapor_partial_pressure_in_air",
                        attrs={"units": "Pa", "standard_name": "water_vapor_partial_pressure_in_air", "long_name": "vapour pressure"})


def specific_humidity_from_vapour_pressure(vapour_pressure, pressure):
    """Specific humidity q = ε e / (p − (1 − ε) e) [kg kg-1] (Wallace & Hobbs 2006, §3.5)."""
    return _elementwise(F.specific_humidity_from_vapour_pressure, vapour_pressure, pressure, name="specific_humidity",
                        attrs={"units": "kg kg-1", "standard_name": "specific_humidity", "long_name": "specific humidity"})


def mixing_ratio(specific_humidity):
    """Mixing ratio r = q / (1 − q) [kg kg-1] (definition; Wallace & Hobbs 2006, §3.5)."""
    return _elementwise(F.mixing_ratio, specific_humidity, name="humidity_mixing_ratio",
                        attrs={"units": "kg kg-1", "standard_name": "humidity_mixing_ratio", "long_name": "water vapour mixing ratio"})


def specific_humidity_from_mixing_ratio(mixing_ratio):
    """Specific humidity q = r / (1 + r) [kg kg-1] (definition)."""
    return _elementwise(F.specific_humidity_from_mixing_ratio, mixing_ratio, name="specific_humidity",
                        attrs={"units": "kg kg-1", "standard_name": "specific_humidity", "long_name": "specific humidity"})


def saturation_mixing_ratio(temperature, pressure):
    """Saturation mixing ratio r_s = ε e_s / (p − e_s) [kg kg-1], e_s from Bolton (1980) eq. 10."""
    return _elementwise(F.saturation_mixing_ratio, temperature, pressure, name="saturation_mixing_ratio",
                        attrs={"units": "kg kg-1", "long_name": "saturation mixing ratio over water"})


def saturation_specific_humidity(temperature, pressure):
    """Saturation specific humidity q_s = ε e_s / (p − (1 − ε) e_s) [kg kg-1] (Bolton 1980, eq. 10)."""
    return _elementwise(F.saturation_specific_humidity, temperature, pressure, name="saturation_specific_humidity",
                        attrs={"units": "kg kg-1", "long_name": "saturation specific humidity over water"})


def relative_humidity(temperature, pressure, specific_humidity):
    """Relative humidity over water e / e_s [1] (e_s from Bolton 1980, eq. 10)."""
    return _elementwise(F.relative_humidity, temperature, pressure, specific_humidity,
                        name="relative_humidity", attrs={"units": "1", "standard_name": "relative_humidity",
                                                         "long_name": "relative humidity over water"})


def lifting_condensation_level(temperature, pressure, specific_humidity):
    """Temperature [K] and pressure [Pa] of the lifting condensation level.

    Parameters
    ----------
    temperature, pressure, specific_humidity : array_like or xarray.DataArray
        The air before lifting [K, Pa, kg kg-1] (broadcast together).

    Returns
    -------
    (t_lcl, p_lcl)
        LCL temperature [K] and pressure [Pa]; NaN for dry air.  Saturated air is at its LCL.

    Notes
    -----
    Exact for the saturation curve of Bolton (1980) eq. 10 and a dry adiabat with constant
    κ = R_d/c_p and mixing ratio: the vapour pressure of the rising air falls like
    e ∝ p ∝ T^(1/κ), so the LCL solves e_s(T_L) = e (T_L/T)^(1/κ).  Newton's method, seeded by
    Bolton's eq. 21 (T_L = 1/(1/(T − 55) − ln(RH)/2840) + 55), converges to round-off in two
    steps.  Then p_L = p (T_L/T)^(1/κ).  Bolton's closed forms (eqs. 15, 21, 22) agree to about
    0.1 K (tested).

    References
    ----------
    Bolton, D., 1980: *Mon. Wea. Rev.*, 108, 1046–1053.
    """

    def kernel(t, p, q):
        tl = F.lcl_temperature(t, F.log_vapour_ratio(p, q))
        return tl, np.exp(F.lcl_log_pressure(np.log(p), t, tl))

    return _elementwise(kernel, temperature, pressure, specific_humidity, n_out=2,
                        name=("lcl_temperature", "lcl_pressure"),
                        attrs=({"units": "K", "long_name": "temperature at the lifting condensation level"},
                               {"units": "Pa", "long_name": "pressure of the lifting condensation level"}))


def equivalent_potential_temperature(temperature, pressure, specific_humidity):
    """Equivalent potential temperature θe [K], Bolton (1980) eq. 39.

    Notes
    -----
    θe = θ_DL exp[(3.036/T_L − 0.00178) r (1 + 0.448·10⁻³ r)] with
    θ_DL = T (1000 hPa/(p − e))^0.2854 (T/T_L)^(0.28·10⁻³ r) (eq. 24) and
    T_L = 2840/(3.5 ln T − ln e − 4.805) + 55 (eq. 22), r in g kg⁻¹, e and p in hPa.
    Bolton's formula is the pseudo-adiabatic θe; dry air gives the potential temperature with
    Bolton's κ = 0.2854.

    References
    ----------
    Bolton, D., 1980: *Mon. Wea. Rev.*, 108, 1046–1053.
    """

    def kernel(t, p, q):
        return np.exp(F.log_equivalent_potential_temperature(t, p, q, F.log_vapour_ratio(p, q)))

    return _elementwise(kernel, temperature, pressure, specific_humidity, name="equivalent_potential_temperature",
                        attrs={"units": "K", "standard_name": "equivalent_potential_temperature",
                               "long_name": "equivalent potential temperature (Bolton 1980, eq. 39)"})


def wet_bulb_potential_temperature(temperature, pressure, specific_humidity):
    """Wet-bulb potential temperature θw [K]: where the pseudo-adiabat through the LCL crosses 1000 hPa.

    Notes
    -----
    The air is lifted to its LCL (:func:`lifting_condensation_level`) and the pseudo-adiabat
    through it followed to 1000 hPa (Wallace & Hobbs 2006, §3.7): θw labels the pseudo-adiabats.
    Read from the table of pseudo-adiabats of :mod:`qgforce.thermo.adiabats` (RK4 of
    :func:`pseudo_adiabatic_lapse_rate`; agreement with direct integration to ~1e-3 K).
    NaN where any input is missing and where the air holds no vapour at all (it has no LCL).
    """

    def kernel(t, p, q):
        tl = F.lcl_temperature(t, F.log_vapour_ratio(p, q))
        sl = F.lcl_log_pressure(np.log(p), t, tl)
        return adiabat_table().label(tl, sl)

    return _elementwise(kernel, temperature, pressure, specific_humidity, name="wet_bulb_potential_temperature",
                        attrs={"units": "K", "standard_name": "wet_bulb_potential_temperature",
                               "long_name": "wet-bulb potential temperature (pseudo-adiabatic)"})


def pseudo_adiabatic_lapse_rate(temperature, pressure):
    """dT/d(ln p) [K] of saturated air on a pseudo-adiabat.

    Notes
    -----
    dT/d ln p = (R_d T + L_v r_s) / (c_p + ε L_v² r_s / (R_d T²)), the textbook form
    (Wallace & Hobbs 2006, §3.7; Emanuel 1994, §4.7; the pseudo-adiabatic lapse rate
    Γ_s = g (1 + L r_s/(R_d T)) / (c_p + ε L² r_s/(R_d T²)) written per ln p with the hydrostatic
    relation), with r_s from Bolton (1980) eq. 10 and the latent heat varying with temperature
    by Kirchhoff's law, L_v(T) = L_v(0 °C) − (c_l − c_pv)(T − 273.15 K) (Bolton 1980, eq. 2).
    It neglects the heat capacity of vapour and condensate in the parcel.  With L_v(T) the
    pseudo-adiabats conserve Bolton's θe (eq. 39) to about 0.15 K between 1000 and 300 hPa
    (tested; with a constant L_v the departure reaches 0.7 K for warm parcels).  Constants from
    :mod:`qgforce.constants`.
    """
    return _elementwise(lambda t, p: F.pseudo_adiabatic_slope(t, np.log(p)), temperature, pressure, name="pseudo_adiabatic_lapse_rate",
                        attrs={"units": "K", "long_name": "dT/dln(p) along the pseudo-adiabat"})


def moist_adiabat(temperature, pressure, target_pressure, max_step: float = 0.01):
    """Temperature [K] of saturated air taken pseudo-adiabatically from ``pressure`` to ``target_pressure``.

    Parameters
    ----------
    temperature, pressure : array_like or xarray.DataArray
        Start [K, Pa] (the air is saturated there, e.g. at its LCL).
    target_pressure : array_like or xarray.DataArray
        Where to stop [Pa], broadcast against the start (up or down).
    max_step : float
        Largest RK4 step in ln p (default 0.01, i.e. about 1 % of the pressure).

    Returns
    -------
    Temperature at ``target_pressure`` [K].

    Notes
    -----
    Classical fourth-order Runge–Kutta in s = ln p of :func:`pseudo_adiabatic_lapse_rate`,
    vectorised over every element at once; each element takes steps of ``max_step`` and one
    shorter last step.  Fourth order (tested against ``scipy.integrate.solve_ivp``); the
    default step gives errors near 1e-8 K.
    """

    def kernel(t, p, pt):
        with np.errstate(divide="ignore", invalid="ignore"):
            return integrate_adiabat(t, np.log(p), np.log(pt), max_step)

    return _elementwise(kernel, temperature, pressure, target_pressure, name="air_temperature",
                        attrs={"units": "K", "standard_name": "air_temperature",
                               "long_name": "temperature along the pseudo-adiabat"})
