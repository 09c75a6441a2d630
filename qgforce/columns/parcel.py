"""Parcel and layer diagnostics of a :class:`~qgforce.columns.profile.Profile`.

:func:`ascend` lifts one parcel per column (dry adiabatic to its LCL, then pseudo-adiabatic) and
integrates its buoyancy (LCL, LFC, EL, CAPE, CIN); :func:`heights` and :func:`at_log_pressure`
integrate the hypsometric equation; :func:`moist_layer_depth` and :func:`most_unstable_level`
scan the levels; :func:`diagnose` assembles every diagnostic of
:func:`qgforce.columns.column_diagnostics` for both parcels.

References
----------
Emanuel, K. A., 1994: *Atmospheric Convection*. Oxford University Press (§6.3 CAPE).
Doswell, C. A. and E. N. Rasmussen, 1994: The effect of neglecting the virtual temperature
correction on CAPE calculations. *Wea. Forecasting*, 9, 625–629.
Wallace, J. M. and P. V. Hobbs, 2006: *Atmospheric Science: An Introductory Survey*, 2nd ed.,
Academic Press (eq. 3.29, the hypsometric equation).
"""

from __future__ import annotations

import functools
import math

import numpy as np

from .. import constants as C
from ..thermo import formulas as F
from ..thermo.adiabats import adiabat_table
from .profile import (
    DEFAULT_MOIST_THRESHOLD,
    DEFAULT_MOST_UNSTABLE_DEPTH,
    Profile,
    compiled_kernels,
    start_state,
)

__all__ = ["ascend", "heights", "at_log_pressure", "moist_layer_depth", "most_unstable_level", "diagnose"]

_R = C.DRY_AIR_GAS_CONSTANT
_K = C.KAPPA
_G = C.GRAVITY


def ascend(s, tv_env, k1, s0, t0, q0, kfirst, env=None):
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
        x0 = F.log_vapour_ratio(np.exp(s0), q0)
        t_lcl = F.lcl_temperature(t0, x0)
        s_lcl = np.where(np.isfinite(t_lcl), F.lcl_log_pressure(s0, t0, t_lcl), -np.inf)
    # an LCL exactly at the start or at a level is moved up by a negligible 1e-12 in ln p, so
    # that it always lies strictly inside a segment and is inserted there
    s_lcl = np.where(np.isin(s_lcl, s) | (s_lcl >= s0), np.minimum(s_lcl, s0) - 1e-12, s_lcl)
    s_lcl = np.where(np.isfinite(s0), s_lcl, np.nan)
    table = adiabat_table()
    has_lcl = np.isfinite(t_lcl)
    i_lab, w_lab = table.cell(table.label(np.where(has_lcl, t_lcl, 250.0), np.where(has_lcl, s_lcl, s[0])))
    fv = F.virtual_temperature(1.0, q0)
    # the LFC is sought at or above the LCL; air without vapour has no LCL and its free
    # convection, if any, is dry: it may start anywhere
    s_gate = np.where(has_lcl, s_lcl, np.inf)
    f64 = functools.partial(np.ascontiguousarray, dtype=np.float64)
    cin, net, cape_el, s_lfc, s_el, found, b_last = compiled_kernels().buoyancy_integrals(
        f64(s), f64(np.exp(_K * s)), f64(tv_env), np.ascontiguousarray(env, np.intp), table.level_rows(s), np.ascontiguousarray(k1, np.intp),
        np.ascontiguousarray(kfirst, np.intp), f64(s0), f64(t0 * fv), f64(s_lcl), f64(t_lcl * fv), f64(s_gate),
        f64(t0 * np.exp(-_K * s0) * fv), np.ascontiguousarray(i_lab, np.intp), f64(w_lab), 0.5 * _R)
    top_buoyant = found & (b_last > 0)
    cape = np.where(found, np.where(top_buoyant, net, cape_el), 0.0)
    return {
        "t_lcl": t_lcl,
        "s_lcl": np.where(has_lcl, F.lcl_log_pressure(s0, t0, t_lcl), np.nan),
        "s_lfc": np.where(found, s_lfc, np.nan),
        "s_el": np.where(found & ~top_buoyant, s_el, np.nan),
        "cape": np.where(np.isfinite(s0), np.maximum(cape, 0.0), np.nan),
        "cin": np.where(found, cin, np.nan),
    }


def heights(prof: Profile):
    """Heights [m] above the lowest valid level, hypsometric: dz = (R_d/g) T_v d(−ln p), T_v linear in ln p."""
    return compiled_kernels().heights(prof.s, prof.tv, prof.k0, prof.k1, 0.5 * _R / _G)


def at_log_pressure(prof: Profile, field, s_t):
    """A (nz, N) ``field`` (or None) and the height at s_t = ln p in each column (linear in ln p).

    Returns the field's value (None without a field) and the height [m above the lowest valid
    level]; NaN where s_t is outside the valid block of the column.  The height of the partial
    layer uses the trapezoid of T_v, exact for T_v linear in ln p.  ``s_t`` is one value for
    every column or one per column; :func:`qgforce._compiled.at_log_pressure` does the work.
    """
    z = prof.cache.get("z")
    if z is None:
        z = prof.cache["z"] = heights(prof)
    s_t = np.ascontiguousarray(np.broadcast_to(np.asarray(s_t, float), (prof.n,)))
    f_t, z_t = compiled_kernels().at_log_pressure(prof.s, prof.tv if field is None else field, prof.tv, z, prof.k0, prof.k1,
                                         s_t, 0.5 * _R / _G)
    return (None if field is None else f_t), z_t


def moist_layer_depth(prof: Profile, threshold):
    """Depth [Pa] of the layer from the lowest valid level upward where RH ≥ threshold.

    ln RH = x − A(T) is interpolated linearly in ln p to locate where it falls below the
    threshold; 0 when the lowest valid level itself is drier; up to the top of the data when the
    column stays moist.  Column by column in :func:`qgforce._compiled.moist_layer_depth`.
    """
    return compiled_kernels().moist_layer_depth(prof.p, prof.s, prof.t, prof.x, prof.k0, prof.k1, math.log(threshold),
                                                *F.SATURATION_EXPONENT_CONSTANTS)


def most_unstable_level(prof: Profile, depth):
    """Index of the level of largest θe within ``depth`` [Pa] above the lowest valid level."""
    return compiled_kernels().most_unstable_level(prof.p, prof.t, prof.q, prof.x, prof.k0, prof.k1, float(depth), F.ES0,
                                                  C.EPSILON, F.BOLTON_KAPPA)[0]


def diagnose(prof: Profile, mu_depth=DEFAULT_MOST_UNSTABLE_DEPTH, moist_threshold=DEFAULT_MOIST_THRESHOLD):
    """Every column diagnostic of a profile: a dict of (2, N) arrays per parcel and (N,) per column."""
    n = prof.n
    has = prof.k0 < prof.k1
    kmu = most_unstable_level(prof, mu_depth)
    s0, t0, q0 = start_state(prof, prof.k0)
    s0 = np.where(has, s0, np.nan)
    s = prof.s
    # one sweep for both parcels: the most-unstable parcels that differ from the surface-based
    # ones are appended as extra columns
    other = np.flatnonzero(has & (kmu != prof.k0))
    s1, t1, q1 = (a[other] for a in start_state(prof, kmu))
    env = np.concatenate([np.arange(n), other])
    both = ascend(s, prof.tv, prof.k1[env], np.concatenate([s0, s1]), np.concatenate([t0, t1]),
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
    res["lcl_height"] = np.stack([at_log_pressure(prof, None, a["s_lcl"])[1] for a in (sb, mu)])
    res["cape"] = np.stack([sb["cape"], mu["cape"]])
    res["cin"] = np.stack([sb["cin"], mu["cin"]])
    t850, z850 = at_log_pressure(prof, prof.t, math.log(85000.0))
    t500, z500 = at_log_pressure(prof, prof.t, math.log(50000.0))
    res["lapse_rate_850_500"] = 1000.0 * (t850 - t500) / (z500 - z850)
    res["moist_layer_depth"] = moist_layer_depth(prof, moist_threshold) / 100.0
    res["clipped"] = prof.cache.get("clipped", (0, 0))
    return res
