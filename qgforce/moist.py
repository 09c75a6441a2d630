"""Moist thermodynamics and per-column parcel and layer diagnostics.

Two layers, as elsewhere in qgforce: raw numpy kernels working on columns laid out as
``(level, column)`` arrays, and public functions on DataArrays (through
:func:`xarray.apply_ufunc`, so that they stay lazy on dask input).

Moist thermodynamics (every function takes and returns SI values: K, Pa, kg kg-1):

==========================================  ===============================================
saturation vapour pressure over water       Bolton (1980), eq. 10 (the one primary formula)
dew point                                   the exact inverse of Bolton eq. 10
vapour pressure, mixing ratio, q            definitions (Wallace & Hobbs 2006, §3.5)
lifting condensation level                  exact for the Bolton curve and a dry adiabat,
                                            Newton iteration seeded by Bolton eq. 21
equivalent potential temperature            Bolton (1980), eq. 39 with eqs. 22 and 24
pseudo-adiabatic lapse rate                 the textbook form (Wallace & Hobbs 2006, §3.7;
                                            Emanuel 1994, §4.7), r_s from Bolton eq. 10,
                                            L_v(T) by Kirchhoff's law (Bolton eq. 2)
moist adiabat                               RK4 in ln p with fine sub-steps, vectorised
wet-bulb potential temperature              the pseudo-adiabat through the LCL, at 1000 hPa
==========================================  ===============================================

Column diagnostics (:func:`column_diagnostics`): for the surface-based parcel (the lowest valid
level of each column) and the most-unstable parcel (largest θe within the lowest 300 hPa above
it): LCL, LFC, equilibrium level, CAPE and CIN with the virtual-temperature correction; the depth
of the moist layer and the 850–500 hPa lapse rate.

Parcels follow pseudo-adiabats from their LCL.  For speed the column diagnostics read them from a
table of pseudo-adiabats (labelled by their wet-bulb potential temperature θw, integrated once
per process with the same RK4 integrator as :func:`moist_adiabat`, on steps of 0.01 in ln p and
0.25 K in θw, then interpolated bilinearly): the table agrees with the direct integration to a
few thousandths of a kelvin (tested).

References
----------
Bolton, D., 1980: The computation of equivalent potential temperature. *Mon. Wea. Rev.*, 108,
1046–1053.
Wallace, J. M. and P. V. Hobbs, 2006: *Atmospheric Science: An Introductory Survey*, 2nd ed.,
Academic Press (§3.5 moisture variables, §3.7 pseudo-adiabats).
Emanuel, K. A., 1994: *Atmospheric Convection*. Oxford University Press (§4.7 pseudo-adiabatic
processes; §6.3 CAPE).
Doswell, C. A. and E. N. Rasmussen, 1994: The effect of neglecting the virtual temperature
correction on CAPE calculations. *Wea. Forecasting*, 9, 625–629.
"""

from __future__ import annotations

import functools
import math
import warnings
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from . import constants as C
from ._workers import THREADS_ENV, default_workers
from .errors import DataQualityWarning, GridError, InputDataError, MissingVariableError

__all__ = [
    # moist thermodynamics (elementwise)
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
    # column diagnostics
    "column_diagnostics",
    "PARCELS",
    "DEFAULT_MOST_UNSTABLE_DEPTH",
    "DEFAULT_MOIST_THRESHOLD",
]

LEVEL = "level"
PARCEL = "parcel"

#: The parcels of :func:`column_diagnostics`, in the order of its ``parcel`` dimension.
PARCELS = ("surface_based", "most_unstable")

#: Depth [Pa] above the lowest valid level searched for the most-unstable parcel
#: (common practice: the lowest 300 hPa).
DEFAULT_MOST_UNSTABLE_DEPTH = 30000.0

#: Relative humidity [1] above which a level counts as moist in the moist-layer depth
#: (common practice: 80 %).
DEFAULT_MOIST_THRESHOLD = 0.8

# --- Bolton (1980) eq. 10: e_s = 6.112 hPa exp(17.67 T_c / (T_c + 243.5)), T_c in °C.
_ES0 = 611.2  # Pa
_ES_A = 17.67  # 1
_ES_B = 243.5  # K
_ES_POLE = C.ZERO_CELSIUS - _ES_B  # 29.65 K: pole of the formula
#: Below this temperature [K] Bolton's formula (valid −35 … 35 °C) is evaluated at this value:
#: e_s(100 K) ≈ 1e-16 Pa, so the vapour is nil there, and the pole at 29.65 K is never reached.
_ES_COLD = 100.0

# --- Bolton (1980) eqs. 21, 22, 24 and 39 (coefficients of the published formulas).
_BOLTON_KAPPA = 0.2854  # Bolton's R/c_p of dry air, used inside his θe formulas

_R = C.DRY_AIR_GAS_CONSTANT
_CP = C.DRY_AIR_SPECIFIC_HEAT_P
_K = C.KAPPA
_EPS = C.EPSILON
_LV = C.LATENT_HEAT_VAPORISATION
_G = C.GRAVITY


# =============================================================================== raw kernels
def _es_exponent(t):
    """A(T) = ln(e_s(T) / 6.112 hPa) = 17.67 (T − 273.15) / (T − 29.65) (Bolton 1980, eq. 10)."""
    t = np.maximum(t, _ES_COLD)
    return _ES_A * (t - C.ZERO_CELSIUS) / (t - _ES_POLE)


def _es(t):
    return _ES0 * np.exp(_es_exponent(t))


def _rs(t, p):
    """Saturation mixing ratio ε e_s / (p − e_s)."""
    es = _es(t)
    return _EPS * es / (p - es)


def _vapour(p, q):
    """Vapour pressure e = p q / (ε + (1 − ε) q) (from r = q/(1−q) and e = p r/(ε + r))."""
    return p * q / (_EPS + (1.0 - _EPS) * q)


def _q_from_e(e, p):
    return _EPS * e / (p - (1.0 - _EPS) * e)


def _tv(t, q):
    """Virtual temperature T (1 + q (1/ε − 1)), the same formula as qgforce.thermo.virtual_temperature."""
    return t * (1.0 + q * (1.0 / _EPS - 1.0))


def _log_rel_vapour(p, q):
    """x = ln(e / 6.112 hPa); −inf for dry air.  Saturation is x = A(T)."""
    with np.errstate(divide="ignore"):
        return np.log(_vapour(p, q) / _ES0)


def _dewpoint_from_x(x):
    with np.errstate(invalid="ignore"):
        return C.ZERO_CELSIUS + _ES_B * x / (_ES_A - x)


def _lcl_temperature(t, x, iterations=2):
    """LCL temperature [K] of air (T, x = ln(e/6.112 hPa)) lifted along a dry adiabat.

    Solves exactly, for the Bolton saturation curve, the defining condition of the LCL: with θ and
    the mixing ratio conserved the vapour pressure falls like p ∝ T^(1/κ), so at the LCL
    e_s(T_L) = e (T_L/T)^(1/κ), i.e. g(T_L) = A(T_L) − x − ln(T_L/T)/κ = 0.  g is increasing and
    concave on (30 K, T]; Newton's method is seeded by Bolton's eq. 21,
    T_L = 1 / (1/(T − 55) − ln(RH)/2840) + 55 (error about 0.1 K), and converges quadratically
    (about 1e-4 K after one step, round-off after two).  Dry air (x = −inf) gives NaN.
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ln_rh = np.minimum(x - _es_exponent(t), 0.0)
        tl = 1.0 / (1.0 / (t - 55.0) - ln_rh / 2840.0) + 55.0
        for _ in range(iterations):
            tc = np.maximum(tl, _ES_COLD)
            g = _es_exponent(tc) - x - np.log(tc / t) / _K
            dg = _ES_A * _ES_B / (tc - _ES_POLE) ** 2 - 1.0 / (_K * tc)
            tl = tc - g / dg
        tl = np.minimum(tl, t)
    return np.where(np.isfinite(x), tl, np.nan)


def _log_theta_e(t, p, q, x):
    """ln θe, Bolton (1980) eq. 39 with T_L from his eq. 22 and θ_DL from his eq. 24.

    θ_DL = T (1000 hPa / (p − e))^0.2854 (T / T_L)^(0.28e-3 r),
    θ_E  = θ_DL exp[(3.036 / T_L − 0.00178) r (1 + 0.448e-3 r)],
    T_L  = 2840 / (3.5 ln T − ln e − 4.805) + 55,  r in g kg-1, e and p in hPa.
    """
    r = 1000.0 * q / (1.0 - q)
    e_hpa = 0.01 * _vapour(p, q)
    ln_t = np.log(t)
    with np.errstate(divide="ignore"):
        tl = 2840.0 / (3.5 * ln_t - (x + math.log(_ES0 / 100.0)) - 4.805) + 55.0
    ln_dl = ln_t + _BOLTON_KAPPA * (math.log(1000.0) - np.log(0.01 * p - e_hpa)) + 0.28e-3 * r * (ln_t - np.log(tl))
    return ln_dl + (3.036 / tl - 0.00178) * r * (1.0 + 0.448e-3 * r)


def _latent_heat(t):
    """L_v(T) = L_v(0 °C) − (c_l − c_pv)(T − 273.15 K), Kirchhoff's law (Bolton 1980, eq. 2)."""
    return _LV - (C.LIQUID_WATER_SPECIFIC_HEAT - C.WATER_VAPOUR_SPECIFIC_HEAT_P) * (t - C.ZERO_CELSIUS)


def _lapse(t, s):
    """dT/d(ln p) on the pseudo-adiabat: (R_d T + L r_s) / (c_p + ε L² r_s / (R_d T²)), L = L_v(T)."""
    rs = _rs(t, np.exp(s))
    lv = _latent_heat(t)
    return (_R * t + lv * rs) / (_CP + _EPS * lv * lv * rs / (_R * t * t))


def _rk4_step(t, s, h):
    """One classical Runge–Kutta step of the pseudo-adiabatic lapse rate in s = ln p."""
    k1 = _lapse(t, s)
    k2 = _lapse(t + 0.5 * h * k1, s + 0.5 * h)
    k3 = _lapse(t + 0.5 * h * k2, s + 0.5 * h)
    k4 = _lapse(t + h * k3, s + h)
    return t + (h / 6.0) * (k1 + 2.0 * k2 + 2.0 * k3 + k4)


def _integrate_adiabat(t0, s0, s1, max_step):
    """RK4 from (T0, s0) to s1 on steps of at most ``max_step`` in ln p, element by element.

    Every element takes steps of exactly ``max_step`` and one last shorter step, so the result
    does not depend on which other elements are integrated with it (nor on dask chunking).
    """
    t, s, s1 = np.broadcast_arrays(np.asarray(t0, float), np.asarray(s0, float), np.asarray(s1, float))
    t, s = t.copy(), s.copy()
    span = np.abs(s1 - s)
    finite = np.isfinite(span)
    n = int(np.ceil(np.max(span[finite]) / max_step)) if finite.any() else 0
    for _ in range(n):
        h = np.clip(s1 - s, -max_step, max_step)
        h = np.where(finite, h, 0.0)
        t = _rk4_step(t, s, h)
        s = s + h
    return np.where(finite, t, np.nan)


# ------------------------------------------------------------------------ pseudo-adiabat table
class _AdiabatTable:
    """Pseudo-adiabats T(θw, ln p) integrated once by RK4 and read by bilinear interpolation.

    Rows: s = ln p from ln(1 hPa) to ln(1150 hPa) on steps of 0.01 with ln(1000 hPa) a node;
    columns: θw (the temperature where the adiabat crosses 1000 hPa) from −100 °C to +60 °C on
    steps of 0.25 K.  Outside these ranges the look-ups clamp.  The inverse table (θw as a
    function of T on each row) gives a first guess of the label, refined by one Newton step on
    the forward interpolant so that T(label(T, s), s) == T to round-off.
    """

    S_STEP = 0.01
    LABEL_STEP = 0.25
    T_STEP = 1.0  # the inverse table only gives the first guess of the Newton step

    def __init__(self):
        h = self.S_STEP
        s_ref = math.log(C.REFERENCE_PRESSURE)
        n_up = int(math.ceil((s_ref - math.log(100.0)) / h))
        n_dn = int(math.ceil((math.log(115000.0) - s_ref) / h))
        self.s = s_ref + h * np.arange(-n_up, n_dn + 1)
        self.labels = C.ZERO_CELSIUS + np.arange(-100.0, 60.0 + 1e-9, self.LABEL_STEP)
        ns, nl = self.s.size, self.labels.size
        table = np.empty((ns, nl))
        table[n_up] = self.labels
        t = self.labels.copy()
        for j in range(n_up, 0, -1):
            t = _rk4_step(t, self.s[j], -h)
            table[j - 1] = t
        t = self.labels.copy()
        for j in range(n_up, ns - 1):
            t = _rk4_step(t, self.s[j], h)
            table[j + 1] = t
        self.T = table
        self._flat = table.ravel()
        t_lo = math.floor(table.min()) - 1.0
        t_hi = math.ceil(table.max()) + 1.0
        self.t_grid = np.arange(t_lo, t_hi + 1e-9, self.T_STEP)
        self.inverse = np.stack([np.interp(self.t_grid, row, self.labels) for row in table])
        self._inv_flat = self.inverse.ravel()
        self._level_rows: dict = {}

    def _row(self, s):
        u = (np.asarray(s, float) - self.s[0]) / self.S_STEP
        j = np.clip(np.floor(u), 0, self.s.size - 2).astype(np.intp)
        return j, np.clip(u - j, 0.0, 1.0)

    def cell(self, label):
        """Column index i and weight w of θw values: T = (1 − w) T[:, i] + w T[:, i+1]."""
        v = (np.asarray(label, float) - self.labels[0]) / self.LABEL_STEP
        v = np.where(np.isfinite(v), v, 0.0)
        i = np.clip(np.floor(v), 0, self.labels.size - 2).astype(np.intp)
        return i, np.clip(v - i, 0.0, 1.0)

    def _forward(self, label, s):
        j, ws = self._row(s)
        i, wl = self.cell(label)
        nl = self.labels.size
        a = j * nl + i
        t00, t01 = self._flat[a], self._flat[a + 1]
        t10, t11 = self._flat[a + nl], self._flat[a + nl + 1]
        lo = t00 + wl * (t01 - t00)
        hi = t10 + wl * (t11 - t10)
        slope = ((1.0 - ws) * (t01 - t00) + ws * (t11 - t10)) / self.LABEL_STEP
        return lo + ws * (hi - lo), slope

    def temperature(self, label, s):
        """Temperature [K] at s = ln p on the pseudo-adiabat labelled θw = ``label``."""
        return self._forward(label, s)[0]

    def label(self, t, s):
        """θw [K] of the pseudo-adiabat through (T, s = ln p)."""
        j, ws = self._row(s)
        u = (np.asarray(t, float) - self.t_grid[0]) / self.T_STEP
        u = np.where(np.isfinite(u), u, 0.0)
        m = np.clip(np.floor(u), 0, self.t_grid.size - 2).astype(np.intp)
        wt = np.clip(u - m, 0.0, 1.0)
        nt = self.t_grid.size
        a = j * nt + m
        inv = self._inv_flat
        lo = inv[a] + wt * (inv[a + 1] - inv[a])
        hi = inv[a + nt] + wt * (inv[a + nt + 1] - inv[a + nt])
        lab = lo + ws * (hi - lo)
        f, slope = self._forward(lab, s)
        lab = lab + (t - f) / slope
        return np.where(np.isfinite(t), lab, np.nan)

    def level_rows(self, s_levels):
        """Parcel virtual temperature on every adiabat at the given levels, shape (nz, n_labels)."""
        key = np.asarray(s_levels, float).tobytes()
        rows = self._level_rows.get(key)
        if rows is None:
            s_levels = np.asarray(s_levels, float)
            j, ws = self._row(s_levels)
            t = (1.0 - ws)[:, None] * self.T[j] + ws[:, None] * self.T[j + 1]
            q = _q_from_e(np.minimum(_es(t), 0.5 * np.exp(s_levels)[:, None]), np.exp(s_levels)[:, None])
            rows = _tv(t, q)
            if len(self._level_rows) > 8:
                self._level_rows.clear()
            self._level_rows[key] = rows
        return rows


@functools.lru_cache(maxsize=1)
def _adiabats() -> _AdiabatTable:
    return _AdiabatTable()


def _kernels():
    """The compiled column loops, :mod:`qgforce._compiled` (imported on first use: importing
    numba takes a fifth of a second, which ``import qgforce`` and the command line need not pay)."""
    from . import _compiled

    return _compiled


# ----------------------------------------------------------------------------- column profiles
@dataclass
class _Profile:
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

    def columns(self, idx) -> "_Profile":
        """The sub-profile of the columns ``idx``."""
        return _Profile(self.p, self.t[:, idx], self.q[:, idx], self.x[:, idx], self.tv[:, idx], self.k0[idx], self.k1[idx])


def _valid_block(valid):
    nz, n = valid.shape
    if valid.all():
        return np.zeros(n, np.intp), np.full(n, nz, np.intp), valid
    idx = np.arange(nz)[:, None]
    k0 = np.where(valid.any(axis=0), valid.argmax(axis=0), nz)
    gap = ~valid & (idx > k0)
    k1 = np.where(gap.any(axis=0), gap.argmax(axis=0), nz)
    return k0.astype(np.intp), k1.astype(np.intp), (idx >= k0) & (idx < k1)


def _make_profile(p, t, q, valid=None, copy=True) -> _Profile:
    """Build a :class:`_Profile` from (nz, N) arrays; clip humidity to [0, q_s(T, p)].

    Negative humidity is set to 0 and supersaturation (over liquid water, Bolton eq. 10) to the
    saturation value; the numbers of points are kept in ``cache["clipped"]`` for
    :func:`_warn_clipped`.
    """
    p = np.asarray(p, float)
    t = np.array(t, dtype=float, copy=copy)
    q = np.array(q, dtype=float, copy=copy)
    ok = np.isfinite(t) & np.isfinite(q) & (t > 0)
    if valid is not None:
        ok &= valid
    k0, k1, _ = _valid_block(ok)
    # NaN outside the block, clipping, x and T_v level by level: qgforce._compiled.profile_levels
    x, tv, n_neg, n_sup = _kernels().profile_levels(p, t, q, k0, k1, _ES0, _ES_A, C.ZERO_CELSIUS, _ES_POLE, _ES_COLD,
                                                    _EPS)
    prof = _Profile(p, t, q, x, tv, k0, k1)
    prof.cache["clipped"] = (n_neg, n_sup)
    return prof


def _warn_clipped(n_neg: int, n_sup: int, what: str = "specific humidity") -> None:
    if n_neg or n_sup:
        warnings.warn(
            f"{what}: {n_neg} negative value(s) set to 0 and {n_sup} supersaturated value(s) "
            "(relative humidity over water above 100 %) set to saturation",
            DataQualityWarning,
            stacklevel=3,
        )


#: Columns processed together by the column kernels: small enough for the per-level working
#: arrays to stay in cache (a measured factor of about 4 against whole-grid arrays), and not a
#: power of two: the compiled loops walk down a column, a stride of one row, and rows 2^k × 8
#: bytes apart share cache sets (measured on 25 levels: the hypsometric loop 3.3 times slower at
#: 16384 columns than at 16376; the whole lifting 0.89 s at 16384, 0.77 to 0.85 s at 8000 to
#: 16000, one thread; 0.52 s at 12000 on two threads, 2026-12-02).
_BLOCK = 12000


def _block_threads() -> int:
    """Threads for the blocks of one in-memory call: the package's default thread count
    (``$QGFORCE_NUM_THREADS``, or the cores this process may use, at most 8; see
    :mod:`qgforce._workers`).

    The column loops run compiled without the GIL and numpy releases it in its loops, so blocks
    of columns run side by side (measured: about 1.6 times faster on 2 cores).  Dask input runs
    one block loop per chunk in dask's own threads instead (see :func:`_apply_columns`).
    """
    return default_workers()


def _by_blocks(fn, *arrays, block: int = _BLOCK, warn: bool = True, threads: int = 1):
    """Call ``fn(*blocks)`` on consecutive blocks of columns (the last axis) and join the results.

    ``fn`` returns a dict of arrays whose last axis is the column; a ``"clipped"`` entry (a pair of
    counts) is summed over the blocks and reported once with a :class:`DataQualityWarning`.
    With ``threads`` > 1 the blocks run on that many threads (``fn`` must be thread-safe).
    """
    n = arrays[0].shape[-1]
    out: dict = {}
    clipped = np.zeros(2, np.int64)

    def one(i):
        return i, fn(*[np.array(a[..., i:i + block], order="C", copy=True) for a in arrays])

    starts = range(0, max(n, 1), block)
    if threads > 1 and len(starts) > 1:
        pool = ThreadPoolExecutor(min(threads, len(starts)), thread_name_prefix="qgforce-columns")
        results = pool.map(one, starts)
    else:
        pool, results = None, map(one, starts)
    try:
        for i, res in results:
            clipped += np.asarray(res.pop("clipped", (0, 0)))
            for key, val in res.items():
                val = np.asarray(val)
                if key not in out:
                    out[key] = np.empty(val.shape[:-1] + (n,), val.dtype)
                out[key][..., i:i + val.shape[-1]] = val
    finally:
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
    if warn:
        _warn_clipped(int(clipped[0]), int(clipped[1]))
    return out


# --------------------------------------------------------------------------- parcel ascent
def _gather(a, k, n):
    """a[k[c], c] for every column c of a (nz, N) array (k clipped into range)."""
    k = np.clip(k, 0, a.shape[0] - 1)
    return a.ravel()[k * n + np.arange(n)]


def _ascend(s, tv_env, k1, s0, t0, q0, kfirst, env=None):
    """Lift one parcel per column from (s0 = ln p0, T0, q0) through an environment.

    Parameters
    ----------
    s : (nz,) array
        ln p of the levels (decreasing).
    tv_env : (nz, M) array
        Virtual temperature of the environment, valid below level ``k1`` of each column.
    k1 : (N,) array
        The end of the valid block of each parcel's environment.
    s0, t0, q0 : (N,) arrays
        The parcel at its start.
    kfirst : (N,) array
        The first level strictly above the start.  Between the start and that level the
        environment is interpolated linearly in ln p from the parcel itself (zero buoyancy at the
        start: the parcel is the air of its own level) to the level.
    env : (N,) array of int, optional
        The column of ``tv_env`` each parcel rises through (default: parcel c through column c).

    Returns
    -------
    dict of (N,) arrays: ``t_lcl``, ``s_lcl``, ``s_lfc``, ``s_el``, ``cape``, ``cin``.

    Notes
    -----
    Dry adiabatic (θ and r conserved) up to the LCL, pseudo-adiabatic above it (condensate
    removed).  The buoyancy B = T_v,parcel − T_v,env is linear in ln p between consecutive points:
    the start, the levels, and the LCL inserted between the two points around it.  On each
    segment its signed area −R_d ∫ B d ln p, positive part and zero crossing are exact.  Before
    the LFC every negative area adds to CIN; the LFC is the first upward crossing at or above the
    LCL, or the LCL itself when the parcel is buoyant there; after it the net area accumulates,
    and each downward crossing is a candidate EL with CAPE the net area up to it.  The EL is the
    last downward crossing above the LFC, and CAPE runs to the top of the data (EL undefined)
    when the parcel is still buoyant there.  The loop over levels runs column by column in
    :func:`qgforce._compiled.buoyancy_integrals`.
    """
    n = np.size(s0)
    env = np.arange(n) if env is None else env
    with np.errstate(invalid="ignore", divide="ignore"):
        x0 = _log_rel_vapour(np.exp(s0), q0)
        t_lcl = _lcl_temperature(t0, x0)
        s_lcl = np.where(np.isfinite(t_lcl), s0 + np.log(t_lcl / t0) / _K, -np.inf)
    # an LCL exactly at the start or at a level is moved up by a negligible 1e-12 in ln p, so
    # that it always lies strictly inside a segment and is inserted there
    s_lcl = np.where(np.isin(s_lcl, s) | (s_lcl >= s0), np.minimum(s_lcl, s0) - 1e-12, s_lcl)
    s_lcl = np.where(np.isfinite(s0), s_lcl, np.nan)
    table = _adiabats()
    has_lcl = np.isfinite(t_lcl)
    i_lab, w_lab = table.cell(table.label(np.where(has_lcl, t_lcl, 250.0), np.where(has_lcl, s_lcl, s[0])))
    fv = _tv(1.0, q0)
    # the LFC is sought at or above the LCL; air without vapour has no LCL and its free
    # convection, if any, is dry: it may start anywhere
    s_gate = np.where(has_lcl, s_lcl, np.inf)
    f64 = functools.partial(np.ascontiguousarray, dtype=np.float64)
    cin, net, cape_el, s_lfc, s_el, found, b_last = _kernels().buoyancy_integrals(
        f64(s), f64(np.exp(_K * s)), f64(tv_env), np.ascontiguousarray(env, np.intp), table.level_rows(s), np.ascontiguousarray(k1, np.intp),
        np.ascontiguousarray(kfirst, np.intp), f64(s0), f64(t0 * fv), f64(s_lcl), f64(t_lcl * fv), f64(s_gate),
        f64(t0 * np.exp(-_K * s0) * fv), np.ascontiguousarray(i_lab, np.intp), f64(w_lab), 0.5 * _R)
    top_buoyant = found & (b_last > 0)
    cape = np.where(found, np.where(top_buoyant, net, cape_el), 0.0)
    return {
        "t_lcl": t_lcl,
        "s_lcl": np.where(has_lcl, s0 + np.log(t_lcl / t0) / _K, np.nan),
        "s_lfc": np.where(found, s_lfc, np.nan),
        "s_el": np.where(found & ~top_buoyant, s_el, np.nan),
        "cape": np.where(np.isfinite(s0), np.maximum(cape, 0.0), np.nan),
        "cin": np.where(found, cin, np.nan),
    }


# ------------------------------------------------------------------------- layer diagnostics
def _heights(prof: _Profile):
    """Heights [m] above the lowest valid level, hypsometric: dz = (R_d/g) T_v d(−ln p), T_v linear in ln p."""
    return _kernels().heights(prof.s, prof.tv, prof.k0, prof.k1, 0.5 * _R / _G)


def _at_log_pressure(prof: _Profile, field, s_t):
    """A (nz, N) ``field`` (or None) and the height at s_t = ln p in each column (linear in ln p).

    Returns the field's value (None without a field) and the height [m above the lowest valid
    level]; NaN where s_t is outside the valid block of the column.  The height of the partial
    layer uses the trapezoid of T_v, exact for T_v linear in ln p.  ``s_t`` is one value for
    every column or one per column; :func:`qgforce._compiled.at_log_pressure` does the work.
    """
    z = prof.cache.get("z")
    if z is None:
        z = prof.cache["z"] = _heights(prof)
    s_t = np.ascontiguousarray(np.broadcast_to(np.asarray(s_t, float), (prof.n,)))
    f_t, z_t = _kernels().at_log_pressure(prof.s, prof.tv if field is None else field, prof.tv, z, prof.k0, prof.k1,
                                         s_t, 0.5 * _R / _G)
    return (None if field is None else f_t), z_t


def _moist_layer_depth(prof: _Profile, threshold):
    """Depth [Pa] of the layer from the lowest valid level upward where RH ≥ threshold.

    ln RH = x − A(T) is interpolated linearly in ln p to locate where it falls below the
    threshold; 0 when the lowest valid level itself is drier; up to the top of the data when the
    column stays moist.  Column by column in :func:`qgforce._compiled.moist_layer_depth`.
    """
    return _kernels().moist_layer_depth(prof.p, prof.s, prof.t, prof.x, prof.k0, prof.k1, math.log(threshold), _ES_A,
                                        C.ZERO_CELSIUS, _ES_POLE, _ES_COLD)


def _most_unstable_level(prof: _Profile, depth):
    """Index of the level of largest θe within ``depth`` [Pa] above the lowest valid level."""
    return _kernels().most_unstable_level(prof.p, prof.t, prof.q, prof.x, prof.k0, prof.k1, float(depth), _ES0, _EPS,
                                          _BOLTON_KAPPA)[0]


def _start_state(prof: _Profile, k):
    n = prof.n
    return np.log(prof.p[np.clip(k, 0, prof.p.size - 1)]), _gather(prof.t, k, n), _gather(prof.q, k, n)


def _diagnose(prof: _Profile, mu_depth=DEFAULT_MOST_UNSTABLE_DEPTH, moist_threshold=DEFAULT_MOIST_THRESHOLD):
    """Every column diagnostic of a profile: a dict of (2, N) arrays per parcel and (N,) per column."""
    n = prof.n
    has = prof.k0 < prof.k1
    kmu = _most_unstable_level(prof, mu_depth)
    s0, t0, q0 = _start_state(prof, prof.k0)
    s0 = np.where(has, s0, np.nan)
    s = prof.s
    # one sweep for both parcels: the most-unstable parcels that differ from the surface-based
    # ones are appended as extra columns
    other = np.flatnonzero(has & (kmu != prof.k0))
    s1, t1, q1 = (a[other] for a in _start_state(prof, kmu))
    env = np.concatenate([np.arange(n), other])
    both = _ascend(s, prof.tv, prof.k1[env], np.concatenate([s0, s1]), np.concatenate([t0, t1]),
                   np.concatenate([q0, q1]), np.concatenate([prof.k0, kmu[other]]) + 1, env=env)
    sb = {key: val[:n] for key, val in both.items()}
    mu = {key: val[:n].copy() for key, val in both.items()}
    s_mu = s0.copy()
    s_mu[other] = s1
    for key, val in both.items():
        mu[key][other] = val[n:]
    res = {}
    for name, key in (("parcel_pressure", None), ("lcl_pressure", "s_lcl"), ("lfc_pressure", "s_lfc"),
                      ("el_pressure", "s_el")):
        res[name] = np.stack([np.exp(s0 if key is None else sb[key]), np.exp(s_mu if key is None else mu[key])]) / 100.0
    res["lcl_temperature"] = np.stack([sb["t_lcl"], mu["t_lcl"]])
    res["lcl_height"] = np.stack([_at_log_pressure(prof, None, a["s_lcl"])[1] for a in (sb, mu)])
    res["cape"] = np.stack([sb["cape"], mu["cape"]])
    res["cin"] = np.stack([sb["cin"], mu["cin"]])
    t850, z850 = _at_log_pressure(prof, prof.t, math.log(85000.0))
    t500, z500 = _at_log_pressure(prof, prof.t, math.log(50000.0))
    res["lapse_rate_850_500"] = 1000.0 * (t850 - t500) / (z500 - z850)
    res["moist_layer_depth"] = _moist_layer_depth(prof, moist_threshold) / 100.0
    res["clipped"] = prof.cache.get("clipped", (0, 0))
    return res


# =============================================================================== labelled layer
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
    return _elementwise(_es, temperature, name="saturation_vapour_pressure",
                        attrs={"units": "Pa", "long_name": "saturation vapour pressure over water (Bolton 1980)"})


def dewpoint(vapour_pressure):
    """Dew point [K] from vapour pressure [Pa]: the exact inverse of Bolton (1980) eq. 10.

    Notes
    -----
    With x = ln(e / 611.2 Pa): T_d = 273.15 K + 243.5 K · x / (17.67 − x).  NaN for e ≤ 0.
    """

    def kernel(e):
        with np.errstate(divide="ignore", invalid="ignore"):
            x = np.log(e / _ES0)
        return np.where(e > 0, _dewpoint_from_x(x), np.nan)

    return _elementwise(kernel, vapour_pressure, name="dew_point_temperature",
                        attrs={"units": "K", "standard_name": "dew_point_temperature", "long_name": "dew point"})


def vapour_pressure(pressure, specific_humidity):
    """Water vapour partial pressure e = p q / (ε + (1 − ε) q) [Pa] (Wallace & Hobbs 2006, §3.5)."""
    return _elementwise(_vapour, pressure, specific_humidity, name="water_vapor_partial_pressure_in_air",
                        attrs={"units": "Pa", "standard_name": "water_vapor_partial_pressure_in_air", "long_name": "vapour pressure"})


def specific_humidity_from_vapour_pressure(vapour_pressure, pressure):
    """Specific humidity q = ε e / (p − (1 − ε) e) [kg kg-1] (Wallace & Hobbs 2006, §3.5)."""
    return _elementwise(_q_from_e, vapour_pressure, pressure, name="specific_humidity",
                        attrs={"units": "kg kg-1", "standard_name": "specific_humidity", "long_name": "specific humidity"})


def mixing_ratio(specific_humidity):
    """Mixing ratio r = q / (1 − q) [kg kg-1] (definition; Wallace & Hobbs 2006, §3.5)."""
    return _elementwise(lambda q: q / (1.0 - q), specific_humidity, name="humidity_mixing_ratio",
                        attrs={"units": "kg kg-1", "standard_name": "humidity_mixing_ratio", "long_name": "water vapour mixing ratio"})


def specific_humidity_from_mixing_ratio(mixing_ratio):
    """Specific humidity q = r / (1 + r) [kg kg-1] (definition)."""
    return _elementwise(lambda r: r / (1.0 + r), mixing_ratio, name="specific_humidity",
                        attrs={"units": "kg kg-1", "standard_name": "specific_humidity", "long_name": "specific humidity"})


def saturation_mixing_ratio(temperature, pressure):
    """Saturation mixing ratio r_s = ε e_s / (p − e_s) [kg kg-1], e_s from Bolton (1980) eq. 10."""
    return _elementwise(_rs, temperature, pressure, name="saturation_mixing_ratio",
                        attrs={"units": "kg kg-1", "long_name": "saturation mixing ratio over water"})


def saturation_specific_humidity(temperature, pressure):
    """Saturation specific humidity q_s = ε e_s / (p − (1 − ε) e_s) [kg kg-1] (Bolton 1980, eq. 10)."""
    return _elementwise(lambda t, p: _q_from_e(_es(t), p), temperature, pressure, name="saturation_specific_humidity",
                        attrs={"units": "kg kg-1", "long_name": "saturation specific humidity over water"})


def relative_humidity(temperature, pressure, specific_humidity):
    """Relative humidity over water e / e_s [1] (e_s from Bolton 1980, eq. 10)."""
    return _elementwise(lambda t, p, q: _vapour(p, q) / _es(t), temperature, pressure, specific_humidity,
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
        tl = _lcl_temperature(t, _log_rel_vapour(p, q))
        return tl, p * (tl / t) ** (1.0 / _K)

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
        return np.exp(_log_theta_e(t, p, q, _log_rel_vapour(p, q)))

    return _elementwise(kernel, temperature, pressure, specific_humidity, name="equivalent_potential_temperature",
                        attrs={"units": "K", "standard_name": "equivalent_potential_temperature",
                               "long_name": "equivalent potential temperature (Bolton 1980, eq. 39)"})


def wet_bulb_potential_temperature(temperature, pressure, specific_humidity):
    """Wet-bulb potential temperature θw [K]: where the pseudo-adiabat through the LCL crosses 1000 hPa.

    Notes
    -----
    The air is lifted to its LCL (:func:`lifting_condensation_level`) and the pseudo-adiabat
    through it followed to 1000 hPa (Wallace & Hobbs 2006, §3.7): θw labels the pseudo-adiabats.
    Read from the table of pseudo-adiabats of this module (RK4 of
    :func:`pseudo_adiabatic_lapse_rate`; agreement with direct integration to ~1e-3 K).
    """

    def kernel(t, p, q):
        tl = _lcl_temperature(t, _log_rel_vapour(p, q))
        sl = np.log(p) + np.log(tl / t) / _K
        return _adiabats().label(tl, sl)

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
    return _elementwise(lambda t, p: _lapse(t, np.log(p)), temperature, pressure, name="pseudo_adiabatic_lapse_rate",
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
            return _integrate_adiabat(t, np.log(p), np.log(pt), max_step)

    return _elementwise(kernel, temperature, pressure, target_pressure, name="air_temperature",
                        attrs={"units": "K", "standard_name": "air_temperature",
                               "long_name": "temperature along the pseudo-adiabat"})


# ------------------------------------------------------------------------------- columns
def _level_values(da: xr.DataArray) -> np.ndarray:
    if LEVEL not in da.dims:
        raise GridError(f"{da.name or 'field'!r} has no {LEVEL!r} dimension; column diagnostics need isobaric levels (Pa)")
    p = np.asarray(da[LEVEL].values, dtype=np.float64)
    if p.size < 2 or not np.all(np.diff(p) < 0):
        raise GridError(
            f"{LEVEL!r} must hold at least two pressures [Pa] strictly decreasing (surface first); found {p[:5]}... "
            "open the file with qgforce.open_dataset, which sorts the levels"
        )
    return p


def _whole_levels(da: xr.DataArray, dims=(LEVEL,)) -> xr.DataArray:
    if da.chunks is not None and any(len(da.chunksizes.get(d, (1,))) > 1 for d in dims):
        return da.chunk({d: -1 for d in dims})
    return da


def _thermo_inputs(temperature, specific_humidity=None, what: str = "the moist diagnostics"):
    """Check and return (temperature, specific_humidity) DataArrays in K and kg kg-1.

    ``temperature`` may be a normalised Dataset, whose ``temperature`` and ``specific_humidity``
    are then used.

    Raises
    ------
    MissingVariableError
        When there is no specific humidity.
    """
    from ._units import to_si

    if isinstance(temperature, xr.Dataset):
        ds = temperature
        if "temperature" not in ds:
            raise MissingVariableError("the dataset has no 'temperature' [K]; open it with qgforce.open_dataset")
        temperature = ds["temperature"]
        if specific_humidity is None:
            specific_humidity = ds.get("specific_humidity")
    if specific_humidity is None:
        raise MissingVariableError(
            f"{what} need specific humidity [kg kg-1] ('specific_humidity' in the normalised dataset), and none was "
            "given; the dry diagnostics (forcing terms, omega inversion, lift) do not need it and still run. "
            "Provide a humidity variable in the file (specific humidity, or convert relative humidity with "
            "qgforce.moist.saturation_specific_humidity)"
        )
    out = []
    for da, units in ((temperature, "K"), (specific_humidity, "kg kg-1")):
        if "units" in da.attrs:
            da = to_si(da, units)
        out.append(da)
    t, q = out
    _level_values(t)
    if LEVEL not in q.dims or q.sizes[LEVEL] != t.sizes[LEVEL]:
        raise GridError(
            f"specific humidity must share the {LEVEL!r} dimension of temperature ({t.sizes[LEVEL]} levels); "
            f"found dims {q.dims}"
        )
    return t, q


@dataclass(frozen=True)
class _Out:
    """One output of a column kernel: its name, kind ('column', 'parcel' or 'level'), attrs, dtype."""

    name: str
    kind: str
    attrs: dict
    dtype: type = np.float64


def _apply_columns(kernel, inputs, core_dims, outputs, kwargs=None):
    """Run ``kernel`` on every column of labelled inputs via :func:`xarray.apply_ufunc`.

    ``kernel(*arrays, threads=T, **kwargs)`` receives numpy arrays laid out (core dims..., column)
    — e.g. (level, N) or (time, level, N) — and the threads its blocks may use, and returns a dict with one array per output: (N,) for
    'column', (n_parcels, N) for 'parcel', (level, N) for 'level'.  Lazy on dask (one task per
    chunk; the core dims are made whole).
    """
    arrays = [_whole_levels(a, cd) for a, cd in zip(inputs, core_dims)]
    ncore = [len(cd) for cd in core_dims]
    # in memory: the blocks of columns on threads; on dask: one chunk per task, dask's threads
    threads = 1 if any(a.chunks is not None for a in arrays) else _block_threads()
    kinds = {"column": [], "parcel": [PARCEL], "level": [LEVEL]}

    def run(*xs):
        lead = np.broadcast_shapes(*[x.shape[: x.ndim - nc] for x, nc in zip(xs, ncore)])
        n = int(np.prod(lead, dtype=np.int64))
        cols = []
        for x, nc in zip(xs, ncore):
            core = x.shape[x.ndim - nc:]
            # core dims first: a free reshape when the data are stored that way (levels first);
            # the kernels' blocks (_by_blocks) are private copies, which they modify in place
            x = np.moveaxis(np.broadcast_to(x, lead + core), tuple(range(len(lead), x.ndim)), tuple(range(nc)))
            cols.append(np.asarray(x.reshape(core + (n,)), dtype=np.float64))
        res = kernel(*cols, threads=threads, **(kwargs or {}))
        outs = []
        for o in outputs:
            a = np.asarray(res[o.name])
            if o.kind == "column":
                outs.append(a.reshape(lead).astype(o.dtype, copy=False))
            else:  # (k, N) → a view laid out lead + (k,)
                outs.append(np.moveaxis(a.reshape(a.shape[:1] + lead), 0, -1).astype(o.dtype, copy=False))
        return tuple(outs)

    sizes = {PARCEL: len(PARCELS)} if any(o.kind == "parcel" for o in outputs) else {}
    res = xr.apply_ufunc(
        run, *arrays,
        input_core_dims=[list(cd) for cd in core_dims],
        output_core_dims=[kinds[o.kind] for o in outputs],
        dask="parallelized",
        output_dtypes=[o.dtype for o in outputs],
        dask_gufunc_kwargs={"output_sizes": sizes},
        keep_attrs=False,
    )
    if len(outputs) == 1:
        res = (res,)
    dims_t = inputs[0].dims
    variables = {}
    for o, da in zip(outputs, res):
        if o.kind == "parcel":
            da = da.transpose(PARCEL, ...)
        elif o.kind == "level":
            da = da.transpose(*[d for d in dims_t if d in da.dims], ...)
        variables[o.name] = da.assign_attrs(o.attrs)
    ds = xr.Dataset(variables)
    if any(o.kind == "parcel" for o in outputs):
        ds = ds.assign_coords({PARCEL: list(PARCELS)})
    return ds


_HPA = "hPa"
_COLUMN_OUTPUTS = (
    _Out("parcel_pressure", "parcel", {"units": _HPA, "long_name": "pressure where the parcel starts"}),
    _Out("lcl_pressure", "parcel", {"units": _HPA, "long_name": "pressure of the lifting condensation level"}),
    _Out("lcl_temperature", "parcel", {"units": "K", "long_name": "temperature at the lifting condensation level"}),
    _Out("lcl_height", "parcel", {"units": "m", "long_name": "height of the lifting condensation level above the lowest valid level"}),
    _Out("lfc_pressure", "parcel", {"units": _HPA, "long_name": "pressure of the level of free convection"}),
    _Out("el_pressure", "parcel", {"units": _HPA, "long_name": "pressure of the equilibrium level "
                                                             "(NaN: buoyant to the top of the data, or no LFC)"}),
    _Out("cape", "parcel", {"units": "J kg-1", "long_name": "convective available potential energy (virtual temperature)"}),
    _Out("cin", "parcel", {"units": "J kg-1", "long_name": "convective inhibition (negative; NaN without LFC)"}),
    _Out("lapse_rate_850_500", "column", {"units": "K km-1", "long_name": "850-500 hPa temperature lapse rate"}),
    _Out("moist_layer_depth", "column", {"units": _HPA, "long_name": "depth of the moist layer from the lowest valid level"}),
)


def _column_kernel(t, q, *, levels, mu_depth, moist_threshold, warn=True, threads=1):
    return _by_blocks(lambda tb, qb: _diagnose(_make_profile(levels, tb, qb, copy=False), mu_depth, moist_threshold),
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
    t, q = _thermo_inputs(temperature, specific_humidity, "column_diagnostics")
    return _column_dataset(t, q, most_unstable_depth, moist_threshold)


def _column_dataset(t, q, most_unstable_depth, moist_threshold, warn=True):
    """:func:`column_diagnostics` of checked inputs (``warn=False``: clipping already reported)."""
    levels = _level_values(t)
    ds = _apply_columns(
        _column_kernel, [t, q], [[LEVEL], [LEVEL]], _COLUMN_OUTPUTS,
        kwargs={"levels": levels, "mu_depth": float(most_unstable_depth), "moist_threshold": float(moist_threshold),
                "warn": warn},
    )
    ds.attrs = {
        "qgforce_most_unstable_depth_hPa": float(most_unstable_depth) / 100.0,
        "qgforce_moist_threshold": float(moist_threshold),
        "comment": "virtual-temperature CAPE/CIN; CIN negative by convention; pseudo-adiabatic ascent above the LCL",
    }
    return ds
