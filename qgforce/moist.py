"""Moist thermodynamics and per-column parcel and layer diagnostics (re-exported).

The code lives in two packages; this module keeps the names of earlier versions importable:

* :mod:`qgforce.thermo` — the formulas once (:mod:`qgforce.thermo.formulas`: Bolton's (1980)
  e_s, the humidity variables, dew point, LCL, θe, latent heat, pseudo-adiabatic lapse rate),
  the pseudo-adiabats (:mod:`qgforce.thermo.adiabats`) and the moist variables on DataArrays
  (:mod:`qgforce.thermo.moist`, every public function of which is re-exported here);
* :mod:`qgforce.columns` — :func:`column_diagnostics` (LCL, LFC, EL, CAPE, CIN of the
  surface-based and most-unstable parcels, moist-layer depth, 850–500 hPa lapse rate) and the
  machinery that runs kernels over columns.

References
----------
Bolton, D., 1980: The computation of equivalent potential temperature. *Mon. Wea. Rev.*, 108,
1046–1053.
"""

from ._workers import THREADS_ENV  # noqa: F401  (read by callers of earlier versions)
from .columns import (
    DEFAULT_MOIST_THRESHOLD,
    DEFAULT_MOST_UNSTABLE_DEPTH,
    LEVEL,  # noqa: F401
    PARCELS,
    column_diagnostics,
)
from .columns.blocks import BLOCK as _BLOCK  # noqa: F401  (a private name of earlier versions)
from .columns.blocks import block_threads as _block_threads  # noqa: F401  (idem)
from .columns.profile import make_profile as _make_profile  # noqa: F401  (idem)
from .thermo import moist as _moist_variables
from .thermo.adiabats import adiabat_table as _adiabats  # noqa: F401  (idem)
from .thermo.moist import *  # the moist variables on DataArrays

__all__ = _moist_variables.__all__ + [
    # column diagnostics
    "column_diagnostics",
    "PARCELS",
    "DEFAULT_MOST_UNSTABLE_DEPTH",
    "DEFAULT_MOIST_THRESHOLD",
]
