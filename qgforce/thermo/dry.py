"""Dry thermodynamics on isobaric levels: θ, static stability σ, density, ω ↔ w.

References
----------
Holton, J. R. and G. J. Hakim, 2013: *An Introduction to Dynamic Meteorology*, 5th ed.,
Academic Press (eq. 2.44 for θ; §6.4 for σ; §3.5 for ω ≈ −ρ g w).
Bluestein, H. B., 1992: *Synoptic-Dynamic Meteorology in Midlatitudes*, vol. I, Oxford
University Press (σ = −(R T / (p θ)) ∂θ/∂p).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .. import constants as C
from ..calculus import LEVEL, ddp
from ..errors import GridError
from ..grid import Grid
from . import formulas as F

__all__ = [
    "pressure",
    "potential_temperature",
    "static_stability",
    "mean_static_stability",
    "virtual_temperature",
    "density",
    "omega_to_w",
    "w_to_omega",
]


def pressure(da: xr.DataArray, dim: str = LEVEL) -> xr.DataArray:
    """The pressure [Pa] of every level of ``da`` as a DataArray along ``dim``."""
    if dim not in da.coords:
        raise GridError(f"{da.name!r} has no {dim!r} coordinate: isobaric levels in Pa are needed")
    p = da[dim].astype(np.float64)
    return p.assign_attrs(units="Pa", standard_name="air_pressure", long_name="pressure")


def potential_temperature(temperature: xr.DataArray) -> xr.DataArray:
    """Potential temperature θ = T (p0 / p)^κ [K].

    Parameters
    ----------
    temperature : xarray.DataArray
        Temperature [K] on isobaric levels (coordinate ``level`` in Pa).

    Returns
    -------
    xarray.DataArray
        θ [K], ``standard_name="air_potential_temperature"``.

    Notes
    -----
    κ = R_d / c_p, p0 = 1000 hPa (Holton & Hakim 2013, eq. 2.44).

    Examples
    --------
    >>> import xarray as xr
    >>> t = xr.DataArray([288.15], coords={"level": [100000.0]}, dims="level", attrs={"units": "K"})
    >>> float(potential_temperature(t)[0])
    288.15
    """
    theta = F.potential_temperature(temperature, pressure(temperature))
    theta.name = "potential_temperature"
    theta.attrs = {"units": "K", "standard_name": "air_potential_temperature", "long_name": "potential temperature"}
    return theta


def static_stability(temperature: xr.DataArray) -> xr.DataArray:
    """Local static stability σ = −(R_d T / (p θ)) ∂θ/∂p [m2 Pa-2 s-2].

    Notes
    -----
    Bluestein (1992), Holton & Hakim (2013, §6.4).  Mid-tropospheric values are about
    2–3 × 10⁻⁶ m² Pa⁻² s⁻²; in an atmosphere of constant lapse rate Γ it equals
    R_d² T (g/c_p − Γ) / (p² g).  ∂θ/∂p is second order on non-uniform levels.
    """
    theta = potential_temperature(temperature)
    sigma = -(C.DRY_AIR_GAS_CONSTANT * temperature / (pressure(temperature) * theta)) * ddp(theta)
    sigma.name = "static_stability"
    sigma.attrs = {"units": "m2 Pa-2 s-2", "long_name": "static stability (isobaric)"}
    return sigma


def mean_static_stability(temperature: xr.DataArray, grid: Grid | None = None) -> xr.DataArray:
    """Area-weighted (cos φ on lat–lon grids) horizontal mean of σ on each level.

    This is the σ(p) of textbook QG, for which the omega operator is separable.  NaN points
    (below ground) are left out of the mean.
    """
    grid = grid if grid is not None else Grid.from_dataset(temperature)
    sigma = static_stability(temperature)
    w = xr.DataArray(grid.cell_area, dims=grid.dims)
    mean = sigma.weighted(w).mean(dim=list(grid.dims), skipna=True)
    mean.name = "mean_static_stability"
    mean.attrs = {
        "units": "m2 Pa-2 s-2",
        "long_name": "area-weighted mean static stability",
        "qgforce_weighting": "cos(latitude) area weights" if grid.kind == "latlon" else "true cell area",
    }
    return mean


def virtual_temperature(temperature: xr.DataArray, specific_humidity: xr.DataArray | None = None) -> xr.DataArray:
    """Virtual temperature T_v = T (1 + q (1/ε − 1)) [K]; T itself when humidity is absent.

    Notes
    -----
    Exact for specific humidity q (Wallace & Hobbs 2006, *Atmospheric Science*, 2nd ed.,
    eq. 3.59 with r = q/(1 − q)).
    """
    if specific_humidity is None:
        tv = temperature.copy()
    else:
        tv = F.virtual_temperature(temperature, specific_humidity)
    tv.name = "virtual_temperature"
    tv.attrs = {"units": "K", "standard_name": "virtual_temperature", "long_name": "virtual temperature"}
    return tv


def density(temperature: xr.DataArray, specific_humidity: xr.DataArray | None = None) -> xr.DataArray:
    """Air density ρ = p / (R_d T_v) [kg m-3] (ideal gas law; Wallace & Hobbs 2006, eq. 3.16)."""
    rho = F.density(pressure(temperature), virtual_temperature(temperature, specific_humidity))
    rho.name = "air_density"
    rho.attrs = {"units": "kg m-3", "standard_name": "air_density", "long_name": "air density"}
    return rho


def omega_to_w(omega: xr.DataArray, temperature: xr.DataArray, specific_humidity=None) -> xr.DataArray:
    """Vertical velocity w = −ω / (ρ g) [m s-1] from ω [Pa s-1] (hydrostatic; Holton & Hakim 2013, §3.5)."""
    w = -omega / (density(temperature, specific_humidity) * C.GRAVITY)
    w.name = "upward_air_velocity"
    w.attrs = {"units": "m s-1", "standard_name": "upward_air_velocity", "long_name": "vertical velocity (hydrostatic, from omega)"}
    return w


def w_to_omega(w: xr.DataArray, temperature: xr.DataArray, specific_humidity=None) -> xr.DataArray:
    """ω = −ρ g w [Pa s-1] from w [m s-1] (hydrostatic)."""
    om = -w * density(temperature, specific_humidity) * C.GRAVITY
    om.name = "lagrangian_tendency_of_air_pressure"
    om.attrs = {"units": "Pa s-1", "standard_name": "lagrangian_tendency_of_air_pressure", "long_name": "omega"}
    return om
