"""Columns as arrays: the (level, column) profile every column kernel works on.

A :class:`Profile` holds columns on common isobaric levels laid out ``(level, column)``, with
the valid block of every column (levels below ground or missing are NaN and outside it), the
humidity clipped to [0, q_s] and the derived rows the kernels need (x = ln(e/6.112 hPa), T_v).
:func:`make_profile` builds one from raw arrays; :func:`gather` and :func:`start_state` pick one
level per column; :func:`compiled_kernels` loads the numba loops of :mod:`qgforce._compiled`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from .. import constants as C
from ..calculus import LEVEL
from ..errors import DataQualityWarning
from ..thermo import formulas as F

__all__ = [
    "LEVEL",
    "PARCEL",
    "PARCELS",
    "DEFAULT_MOST_UNSTABLE_DEPTH",
    "DEFAULT_MOIST_THRESHOLD",
    "compiled_kernels",
    "Profile",
    "valid_block",
    "make_profile",
    "warn_clipped",
    "gather",
    "start_state",
]

PARCEL = "parcel"

#: The parcels of :func:`qgforce.columns.column_diagnostics`, in the order of its ``parcel`` dimension.
PARCELS = ("surface_based", "most_unstable")

#: Depth [Pa] above the lowest valid level searched for the most-unstable parcel
#: (common practice: the lowest 300 hPa).
DEFAULT_MOST_UNSTABLE_DEPTH = 30000.0

#: Relative humidity [1] above which a level counts as moist in the moist-layer depth
#: (common practice: 80 %).
DEFAULT_MOIST_THRESHOLD = 0.8


def compiled_kernels():
    """The compiled column loops, :mod:`qgforce._compiled` (imported on first use: importing
    numba takes a fifth of a second, which ``import qgforce`` and the command line need not pay)."""
    from .. import _compiled

    return _compiled


# ----------------------------------------------------------------------------- column profiles
@dataclass
class Profile:
    """Columns on common isobaric levels, laid out (level, column); NaN outside the valid block.

    The valid block of a column runs from its lowest valid level ``k0`` up to (excluding) ``k1``,
    the first invalid level above it; levels below ground (NaN) are below ``k0``.
    """

    p: np.ndarray  # (nz,) Pa, decreasing
    t: np.ndarray  # (nz, N) K
    q: np.ndarray  # (nz, N) kg kg-1, clipped to [0, q_s]
    x: np.ndarray  # (nz, N) ln(e / 6.112 hPa)
    tv: np.ndarray  # (nz, N) K
    k0: np.ndarray  # (N,) intp
    k1: np.ndarray  # (N,) intp
    cache: dict = field(default_factory=dict)

    @property
    def s(self):
        return np.log(self.p)

    @property
    def n(self) -> int:
        return self.t.shape[1]

    def columns(self, idx) -> Profile:
        """The sub-profile of the columns ``idx``."""
        return Profile(self.p, self.t[:, idx], self.q[:, idx], self.x[:, idx], self.tv[:, idx], self.k0[idx], self.k1[idx])


def valid_block(valid):
    nz, n = valid.shape
    if valid.all():
        return np.zeros(n, np.intp), np.full(n, nz, np.intp), valid
    idx = np.arange(nz)[:, None]
    k0 = np.where(valid.any(axis=0), valid.argmax(axis=0), nz)
    gap = ~valid & (idx > k0)
    k1 = np.where(gap.any(axis=0), gap.argmax(axis=0), nz)
    return k0.astype(np.intp), k1.astype(np.intp), (idx >= k0) & (idx < k1)


def make_profile(p, t, q, valid=None, copy=True) -> Profile:
    """Build a :class:`Profile` from (nz, N) arrays; clip humidity to [0, q_s(T, p)].

    Negative humidity is set to 0 and supersaturation (over liquid water, Bolton eq. 10) to the
    saturation value; the numbers of points are kept in ``cache["clipped"]`` for
    :func:`warn_clipped`.
    """
    p = np.asarray(p, float)
    t = np.array(t, dtype=float, copy=copy)
    q = np.array(q, dtype=float, copy=copy)
    ok = np.isfinite(t) & np.isfinite(q) & (t > 0)
    if valid is not None:
        ok &= valid
    k0, k1, _ = valid_block(ok)
    # NaN outside the block, clipping, x and T_v level by level: qgforce._compiled.profile_levels
    # (mirrors the formulas of qgforce.thermo.formulas; tests/test_compiled_columns.py compares them)
    x, tv, n_neg, n_sup = compiled_kernels().profile_levels(p, t, q, k0, k1, F.ES0, *F.SATURATION_EXPONENT_CONSTANTS,
                                                            C.EPSILON)
    prof = Profile(p, t, q, x, tv, k0, k1)
    prof.cache["clipped"] = (n_neg, n_sup)
    return prof


def warn_clipped(n_neg: int, n_sup: int, what: str = "specific humidity") -> None:
    if n_neg or n_sup:
        warnings.warn(
            f"{what}: {n_neg} negative value(s) set to 0 and {n_sup} supersaturated value(s) "
            "(relative humidity over water above 100 %) set to saturation",
            DataQualityWarning,
            stacklevel=3,
        )


def gather(a, k, n):
    """a[k[c], c] for every column c of a (nz, N) array (k clipped into range)."""
    k = np.clip(k, 0, a.shape[0] - 1)
    return a.ravel()[k * n + np.arange(n)]


def start_state(prof: Profile, k):
    n = prof.n
    return np.log(prof.p[np.clip(k, 0, prof.p.size - 1)]), gather(prof.t, k, n), gather(prof.q, k, n)
