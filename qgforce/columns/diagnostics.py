"""Parcel and layer diagnostics of every column of labelled temperature and humidity.

:func:`column_diagnostics`: for the surface-based parcel (the lowest valid level of each column)
and the most-unstable parcel (largest θe within the lowest 300 hPa above it): LCL, LFC,
equilibrium level, CAPE and CIN with the virtual-temperature correction; the depth of the moist
layer and the 850–500 hPa lapse rate.  Parcels follow pseudo-adiabats from their LCL, read from
the table of :mod:`qgforce.thermo.adiabats`.

References
----------
Bolton, D., 1980: The computation of equivalent potential temperature. *Mon. Wea. Rev.*, 108,
1046–1053.
Emanuel, K. A., 1994: *Atmospheric Convection*. Oxford University Press (§6.3 CAPE).
Doswell, C. A. and E. N. Rasmussen, 1994: The effect of neglecting the virtual temperature
correction on CAPE calculations. *Wea. Forecasting*, 9, 625–629.
Wallace, J. M. and P. V. Hobbs, 2006: *Atmospheric Science: An Introductory Survey*, 2nd ed.,
Academic Press (eq. 3.29).
"""

from __future__ import annotations

import xarray as xr

from .blocks import ColumnOutput, apply_columns, by_blocks, level_values, thermo_inputs
from .parcel import diagnose
from .profile import (
    DEFAULT_MOIST_THRESHOLD,
    DEFAULT_MOST_UNSTABLE_DEPTH,
    LEVEL,
    make_profile,
)

__all__ = ["COLUMN_OUTPUTS", "column_kernel", "column_diagnostics", "column_dataset"]


_HPA = "hPa"
COLUMN_OUTPUTS = (
    ColumnOutput("parcel_pressure", "parcel", {"units": _HPA, "long_name": "pressure where the parcel starts"}),
    ColumnOutput("lcl_pressure", "parcel", {"units": _HPA, "long_name": "pressure of the lifting condensation level"}),
    ColumnOutput("lcl_temperature", "parcel", {"units": "K", "long_name": "temperature at the lifting condensation level"}),
    ColumnOutput("lcl_height", "parcel", {"units": "m", "long_name": "height of the lifting condensation level above the lowest valid level"}),
    ColumnOutput("lfc_pressure", "parcel", {"units": _HPA, "long_name": "pressure of the level of free convection"}),
    ColumnOutput("el_pressure", "parcel", {"units": _HPA, "long_name": "pressure of the equilibrium level "
                                                             "(NaN: buoyant to the top of the data, or no LFC)"}),
    ColumnOutput("cape", "parcel", {"units": "J kg-1", "long_name": "convective available potential energy (virtual temperature)"}),
    ColumnOutput("cin", "parcel", {"units": "J kg-1", "long_name": "convective inhibition (negative; NaN without LFC)"}),
    ColumnOutput("lapse_rate_850_500", "column", {"units": "K km-1", "long_name": "850-500 hPa temperature lapse rate"}),
    ColumnOutput("moist_layer_depth", "column", {"units": _HPA, "long_name": "depth of the moist layer from the lowest valid level"}),
)


def column_kernel(t, q, *, levels, mu_depth, moist_threshold, warn=True, threads=1):
    return by_blocks(lambda tb, qb: diagnose(make_profile(levels, tb, qb, copy=False), mu_depth, moist_threshold),
                      t, q, warn=warn, threads=threads)


def column_diagnostics(
    temperature,
    specific_humidity=None,
    *,
    most_unstable_depth: float = DEFAULT_MOST_UNSTABLE_DEPTH,
    moist_threshold: float = DEFAULT_MOIST_THRESHOLD,
) -> xr.Dataset:
    """Parcel and layer diagnostics of every column.

    Parameters
    ----------
    temperature : xarray.DataArray or xarray.Dataset
        Temperature [K] on isobaric levels (``level`` in Pa, strictly decreasing, surface
        first), any other dims; NaN below ground.  A normalised Dataset may be given instead, its
        ``temperature`` and ``specific_humidity`` are used.
    specific_humidity : xarray.DataArray
        Specific humidity [kg kg-1], same dims.
    most_unstable_depth : float
        Depth [Pa] above the lowest valid level searched for the most-unstable parcel (300 hPa).
    moist_threshold : float
        Relative humidity [1] of the moist layer (0.8).

    Returns
    -------
    xarray.Dataset
        With a ``parcel`` dimension (``"surface_based"``, ``"most_unstable"``):
        ``parcel_pressure``, ``lcl_pressure``, ``lfc_pressure``, ``el_pressure`` [hPa],
        ``lcl_temperature`` [K], ``lcl_height`` [m above the lowest valid level],
        ``cape``, ``cin`` [J kg-1]; per column: ``lapse_rate_850_500`` [K km-1] and
        ``moist_layer_depth`` [hPa].  Lazy on dask input.

    Raises
    ------
    MissingVariableError
        Without specific humidity.
    GridError
        When the levels are not pressures strictly decreasing.

    Warns
    -----
    DataQualityWarning
        When humidity is negative (set to 0) or supersaturated over water (set to saturation);
        the message counts the points (on dask input: when the chunk is computed).

    Notes
    -----
    *Parcels.*  Surface-based: the lowest valid level of the column (levels below ground are
    NaN).  Most unstable: the level of largest θe (Bolton 1980, eq. 39) within
    ``most_unstable_depth`` above it.  A parcel rises dry-adiabatically (θ and mixing ratio
    conserved) to its LCL, then pseudo-adiabatically (condensate removed).

    *Buoyancy integrals* (Emanuel 1994, §6.3; virtual temperature as Doswell & Rasmussen 1994):
    B = T_v,parcel − T_v,env, linear in ln p between the levels (and the LCL, inserted as a
    point); the energy of a layer is −R_d ∫ B d ln p.  LFC: the first upward zero crossing of B
    at or above the LCL, or the LCL itself when the parcel is buoyant there (air without any
    vapour has no LCL: its first upward crossing, dry convection).  EL: the highest
    downward crossing above the LFC.  CAPE = −R_d ∫_LFC^EL B d ln p (the net area; when the parcel
    is still buoyant at the top of the data, up to the top and the EL is NaN), 0 without LFC.
    CIN = −R_d ∫ min(B, 0) d ln p from the start to the LFC, **negative by convention**, NaN when
    there is no LFC (no free convection is possible).

    *Moist layer*: the depth [hPa] of the layer from the lowest valid level upward in which the
    relative humidity over water is at least ``moist_threshold`` (ln RH interpolated linearly in
    ln p to locate its top); 0 when the lowest level is drier.

    *Lapse rate*: −ΔT/Δz between 850 and 500 hPa [K km-1], T interpolated linearly in ln p and
    heights by hypsometric integration of T_v (Wallace & Hobbs 2006, eq. 3.29); NaN where
    850 hPa is below ground.  Heights above ground use the same integration from the lowest valid
    level.
    """
    t, q = thermo_inputs(temperature, specific_humidity, "column_diagnostics")
    return column_dataset(t, q, most_unstable_depth, moist_threshold)


def column_dataset(t, q, most_unstable_depth, moist_threshold, warn=True):
    """:func:`column_diagnostics` of checked inputs (``warn=False``: clipping already reported)."""
    levels = level_values(t)
    ds = apply_columns(
        column_kernel, [t, q], [[LEVEL], [LEVEL]], COLUMN_OUTPUTS,
        kwargs={"levels": levels, "mu_depth": float(most_unstable_depth), "moist_threshold": float(moist_threshold),
                "warn": warn},
    )
    ds.attrs = {
        "qgforce_most_unstable_depth_hPa": float(most_unstable_depth) / 100.0,
        "qgforce_moist_threshold": float(moist_threshold),
        "comment": "virtual-temperature CAPE/CIN; CIN negative by convention; pseudo-adiabatic ascent above the LCL",
    }
    return ds
