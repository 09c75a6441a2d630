"""The thermodynamic formulas of qgforce, each written once, on plain numpy values.

Every other module (the labelled functions of :mod:`qgforce.thermo`, the column diagnostics of
:mod:`qgforce.columns`, the lifting of :mod:`qgforce.ascent`, the demo data of
:mod:`qgforce.scenario`) computes these quantities by calling the functions here.  They take and
return SI values (K, Pa, kg kg-1) and work elementwise on scalars, numpy arrays and (through
numpy's operator protocols) DataArrays; they check nothing.

==========================================  ===============================================
potential temperature, density              Poisson's equation, the ideal gas law
                                            (Holton & Hakim 2013, eq. 2.44; Wallace & Hobbs
                                            2006, eq. 3.16)
virtual temperature                         T (1 + q (1/ε − 1)), exact for specific humidity
                                            (Wallace & Hobbs 2006, eq. 3.59 with r = q/(1 − q))
saturation vapour pressure over water       Bolton (1980), eq. 10 (the one primary formula)
dew point                                   the exact inverse of Bolton eq. 10
vapour pressure, mixing ratio, q            definitions (Wallace & Hobbs 2006, §3.5)
lifting condensation level                  exact for the Bolton curve and a dry adiabat,
                                            Newton iteration seeded by Bolton eq. 21
equivalent potential temperature            Bolton (1980), eq. 39 with eqs. 22 and 24
latent heat of vaporisation                 Kirchhoff's law (Bolton 1980, eq. 2)
pseudo-adiabatic lapse rate                 the textbook form (Wallace & Hobbs 2006, §3.7;
                                            Emanuel 1994, §4.7), r_s from Bolton eq. 10
==========================================  ===============================================

Many formulas use x = ln(e / 6.112 hPa), the logarithm of the vapour pressure relative to
Bolton's e_s(0 °C): saturation is x = A(T) (:func:`saturation_exponent`), the relative
humidity is exp(x − A(T)), and the dew point follows from x in closed form.

References
----------
Bolton, D., 1980: The computation of equivalent potential temperature. *Mon. Wea. Rev.*, 108,
1046–1053.
Holton, J. R. and G. J. Hakim, 2013: *An Introduction to Dynamic Meteorology*, 5th ed.,
Academic Press.
Wallace, J. M. and P. V. Hobbs, 2006: *Atmospheric Science: An Introductory Survey*, 2nd ed.,
Academic Press (§3.5 moisture variables, §3.7 pseudo-adiabats).
Emanuel, K. A., 1994: *Atmospheric Convection*. Oxford University Press (§4.7).
"""

from __future__ import annotations

import math

import numpy as np

from .. import constants as C

__all__ = [
    "ES0",
    "potential_temperature",
    "density",
    "virtual_temperature",
    "saturation_exponent",
    "saturation_vapour_pressure",
    "vapour_pressure",
    "specific_humidity_from_vapour_pressure",
    "mixing_ratio",
    "specific_humidity_from_mixing_ratio",
    "saturation_mixing_ratio",
    "saturation_specific_humidity",
    "relative_humidity",
    "log_vapour_ratio",
    "dewpoint_from_log_vapour_ratio",
    "lcl_temperature",
    "lcl_log_pressure",
    "log_equivalent_potential_temperature",
    "latent_heat",
    "pseudo_adiabatic_slope",
]

# --- Bolton (1980) eq. 10: e_s = 6.112 hPa exp(17.67 T_c / (T_c + 243.5)), T_c in °C.
ES0 = 611.2  # Pa, e_s at 0 °C
_ES_A = 17.67  # 1
_ES_B = 243.5  # K
_ES_POLE = C.ZERO_CELSIUS - _ES_B  # 29.65 K: pole of the formula
#: Below this temperature [K] Bolton's formula (valid −35 … 35 °C) is evaluated at this value:
#: e_s(100 K) ≈ 1e-16 Pa, so the vapour is nil there, and the pole at 29.65 K is never reached.
_ES_COLD = 100.0

# --- Bolton (1980) eqs. 21, 22, 24 and 39 (coefficients of the published formulas).
_BOLTON_KAPPA = 0.2854  # Bolton's R/c_p of dry air, used inside his θe formulas

#: Bolton's θe coefficient κ = 0.2854 (public for the compiled column kernels, which take it as an argument).
BOLTON_KAPPA = _BOLTON_KAPPA
#: The constants of :func:`saturation_exponent` in the order the compiled column kernels of
#: :mod:`qgforce._compiled` take them: (17.67, 273.15 K, the pole 29.65 K, the cold floor 100 K).
SATURATION_EXPONENT_CONSTANTS = (_ES_A, C.ZERO_CELSIUS, _ES_POLE, _ES_COLD)

_R = C.DRY_AIR_GAS_CONSTANT
_CP = C.DRY_AIR_SPECIFIC_HEAT_P
_K = C.KAPPA
_EPS = C.EPSILON
_LV = C.LATENT_HEAT_VAPORISATION


# ------------------------------------------------------------------------------ dry air
def potential_temperature(t, p):
    """θ = T (p0 / p)^κ [K], κ = R_d/c_p, p0 = 1000 hPa (Holton & Hakim 2013, eq. 2.44)."""
    return t * (C.REFERENCE_PRESSURE / p) ** C.KAPPA


def density(p, tv):
    """ρ = p / (R_d T_v) [kg m-3] from pressure and virtual temperature (ideal gas law)."""
    return p / (_R * tv)


def virtual_temperature(t, q):
    """T_v = T (1 + q (1/ε − 1)) [K] (Wallace & Hobbs 2006, eq. 3.59 with r = q/(1 − q); exact for q)."""
    return t * (1.0 + q * (1.0 / _EPS - 1.0))


# ------------------------------------------------------------------------------ moisture
def saturation_exponent(t):
    """A(T) = ln(e_s(T) / 6.112 hPa) = 17.67 (T − 273.15) / (T − 29.65) (Bolton 1980, eq. 10).

    Below 100 K it is evaluated at 100 K (e_s ≈ 1e-16 Pa), so the pole at 29.65 K is never met.
    """
    t = np.maximum(t, _ES_COLD)
    return _ES_A * (t - C.ZERO_CELSIUS) / (t - _ES_POLE)


def saturation_vapour_pressure(t):
    """e_s = 611.2 Pa exp(A(T)) over liquid water [Pa] (Bolton 1980, eq. 10)."""
    return ES0 * np.exp(saturation_exponent(t))


def vapour_pressure(p, q):
    """e = p q / (ε + (1 − ε) q) [Pa] (from r = q/(1−q) and e = p r/(ε + r); Wallace & Hobbs 2006, §3.5)."""
    return p * q / (_EPS + (1.0 - _EPS) * q)


def specific_humidity_from_vapour_pressure(e, p):
    """q = ε e / (p − (1 − ε) e) [kg kg-1] (Wallace & Hobbs 2006, §3.5)."""
    return _EPS * e / (p - (1.0 - _EPS) * e)


def mixing_ratio(q):
    """r = q / (1 − q) [kg kg-1] (definition)."""
    return q / (1.0 - q)


def specific_humidity_from_mixing_ratio(r):
    """q = r / (1 + r) [kg kg-1] (definition)."""
    return r / (1.0 + r)


def saturation_mixing_ratio(t, p):
    """r_s = ε e_s / (p − e_s) [kg kg-1], e_s from Bolton (1980) eq. 10."""
    es = saturation_vapour_pressure(t)
    return _EPS * es / (p - es)


def saturation_specific_humidity(t, p):
    """q_s = ε e_s / (p − (1 − ε) e_s) [kg kg-1], e_s from Bolton (1980) eq. 10."""
    return specific_humidity_from_vapour_pressure(saturation_vapour_pressure(t), p)


def relative_humidity(t, p, q):
    """e / e_s over liquid water [1]."""
    return vapour_pressure(p, q) / saturation_vapour_pressure(t)


def log_vapour_ratio(p, q):
    """x = ln(e / 6.112 hPa); −inf for dry air.  Saturation is x = A(T)."""
    with np.errstate(divide="ignore"):
        return np.log(vapour_pressure(p, q) / ES0)


def dewpoint_from_log_vapour_ratio(x):
    """T_d = 273.15 K + 243.5 K · x / (17.67 − x), the exact inverse of Bolton (1980) eq. 10."""
    with np.errstate(invalid="ignore"):
        return C.ZERO_CELSIUS + _ES_B * x / (_ES_A - x)


# ------------------------------------------------------------------------ lifted air
def lcl_temperature(t, x, iterations=2):
    """LCL temperature [K] of air (T, x = ln(e/6.112 hPa)) lifted along a dry adiabat.

    Solves exactly, for the Bolton saturation curve, the defining condition of the LCL: with θ and
    the mixing ratio conserved the vapour pressure falls like p ∝ T^(1/κ), so at the LCL
    e_s(T_L) = e (T_L/T)^(1/κ), i.e. g(T_L) = A(T_L) − x − ln(T_L/T)/κ = 0.  g is increasing and
    concave on (30 K, T]; Newton's method is seeded by Bolton's eq. 21,
    T_L = 1 / (1/(T − 55) − ln(RH)/2840) + 55 (error about 0.1 K), and converges quadratically
    (about 1e-4 K after one step, round-off after two).  Dry air (x = −inf) gives NaN.
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ln_rh = np.minimum(x - saturation_exponent(t), 0.0)
        tl = 1.0 / (1.0 / (t - 55.0) - ln_rh / 2840.0) + 55.0
        for _ in range(iterations):
            tc = np.maximum(tl, _ES_COLD)
            g = saturation_exponent(tc) - x - np.log(tc / t) / _K
            dg = _ES_A * _ES_B / (tc - _ES_POLE) ** 2 - 1.0 / (_K * tc)
            tl = tc - g / dg
        tl = np.minimum(tl, t)
    return np.where(np.isfinite(x), tl, np.nan)


def lcl_log_pressure(s, t, tl):
    """ln p of the LCL, s + ln(T_L/T)/κ, for air at s = ln p and T with LCL temperature T_L (dry adiabat)."""
    return s + np.log(tl / t) / _K


def log_equivalent_potential_temperature(t, p, q, x):
    """ln θe, Bolton (1980) eq. 39 with T_L from his eq. 22 and θ_DL from his eq. 24.

    θ_DL = T (1000 hPa / (p − e))^0.2854 (T / T_L)^(0.28e-3 r),
    θ_E  = θ_DL exp[(3.036 / T_L − 0.00178) r (1 + 0.448e-3 r)],
    T_L  = 2840 / (3.5 ln T − ln e − 4.805) + 55,  r in g kg-1, e and p in hPa;
    x = ln(e / 6.112 hPa) (:func:`log_vapour_ratio`).
    """
    r = 1000.0 * q / (1.0 - q)  # g kg-1 (written out: the same rounding as Bolton's r)
    e_hpa = 0.01 * vapour_pressure(p, q)
    ln_t = np.log(t)
    with np.errstate(divide="ignore"):
        tl = 2840.0 / (3.5 * ln_t - (x + math.log(ES0 / 100.0)) - 4.805) + 55.0
    ln_dl = ln_t + _BOLTON_KAPPA * (math.log(1000.0) - np.log(0.01 * p - e_hpa)) + 0.28e-3 * r * (ln_t - np.log(tl))
    return ln_dl + (3.036 / tl - 0.00178) * r * (1.0 + 0.448e-3 * r)


def latent_heat(t):
    """L_v(T) = L_v(0 °C) − (c_l − c_pv)(T − 273.15 K) [J kg-1], Kirchhoff's law (Bolton 1980, eq. 2)."""
    return _LV - (C.LIQUID_WATER_SPECIFIC_HEAT - C.WATER_VAPOUR_SPECIFIC_HEAT_P) * (t - C.ZERO_CELSIUS)


def pseudo_adiabatic_slope(t, s):
    """dT/d(ln p) [K] on the pseudo-adiabat at s = ln p: (R_d T + L r_s) / (c_p + ε L² r_s / (R_d T²)), L = L_v(T).

    The textbook pseudo-adiabatic lapse rate (Wallace & Hobbs 2006, §3.7; Emanuel 1994, §4.7)
    written per ln p with the hydrostatic relation.
    """
    rs = saturation_mixing_ratio(t, np.exp(s))
    lv = latent_heat(t)
    return (_R * t + lv * rs) / (_CP + _EPS * lv * lv * rs / (_R * t * t))
