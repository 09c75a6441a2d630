"""Lifting columns by the diagnosed ascent, and the hours of ascent to initiation potential.

Large-scale ascent rarely starts convection itself; over hours it deepens the moist layer,
steepens the lapse rate and erodes the convective inhibition.  This module lifts every column by a
given vertical velocity — the QG ω of :func:`qgforce.omega.invert_omega` (``omega_total``) or a
model's own ω, or w — and reports how the column changes (:func:`lift_columns`) and how many
hours of that ascent bring a low-level parcel to saturation and to weak inhibition
(:func:`hours_to_initiation`).

.. caution::
   A kinematic estimate of the large-scale contribution only.  Mesoscale boundaries (fronts,
   outflows, sea breezes, orography), diabatic effects (latent heating feeding back on ω,
   radiation, evaporation) and surface heating and moistening are not in it, and horizontal
   advection is neglected: columns are lifted in place.

Method (one column at a time, vectorised over all columns):

* **Parcel paths.**  The air of every level is a parcel moving vertically with dp/dt = ω(p), ω
  held constant in time (or over each time step of a sequence) and interpolated *linearly in p*
  between the levels (constant beyond the lowest and highest valid levels).  In a layer where
  ω = ω_j + b (p − p_j) the path is exact: p(t) = p₀ + ω(p₀) t (e^{bt} − 1)/(bt), and the time to
  reach a pressure p₁ is t = ln(ω(p₁)/ω(p₀)) / b (infinite when ω changes sign in between: the air
  approaches the level of zero ω and stays).  Paths are followed layer by layer with these closed
  forms: no time-stepping error.  Linear-in-p rather than linear-in-ln p interpolation of ω is
  what makes the path closed-form; the two differ at second order in the layer depth.  The flow
  of dp/dt = ω(p) with ω Lipschitz in p preserves the order of the parcels, so parcels do not
  cross; a check counts any that would (round-off) and sorts them.
* **Thermodynamics.**  Dry-adiabatic (θ and mixing ratio conserved) until saturated, then
  pseudo-adiabatic (condensate removed, q = q_s), with the LCL and the pseudo-adiabats of
  :mod:`qgforce.thermo`; descending air warms dry-adiabatically.
* **Re-gridding.**  The displaced parcels are interpolated back onto the original levels,
  linearly in ln p.  Levels outside the span of the displaced parcels (below the lowest one when
  the lowest level rises, above the highest one when the top sinks) keep their original air: the
  air that converges there is taken to be like the air that was there, consistently with
  neglecting horizontal advection.
* **Diagnostics** of :func:`qgforce.moist.column_diagnostics` are recomputed on the lifted
  columns.

References
----------
Holton, J. R. and G. J. Hakim, 2013: *An Introduction to Dynamic Meteorology*, 5th ed., §3.5
(ω ≈ −ρ g w).
Emanuel, K. A., 1994: *Atmospheric Convection*, Oxford University Press, §6.3 (CAPE, CIN).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from . import constants as C
from ._units import parse_units, to_si
from .columns import (
    COLUMN_OUTPUTS,
    DEFAULT_MOIST_THRESHOLD,
    DEFAULT_MOST_UNSTABLE_DEPTH,
    LEVEL,
    PARCELS,
    ColumnOutput,
    apply_columns,
    ascend,
    by_blocks,
    compiled_kernels,
    diagnose,
    gather,
    level_values,
    make_profile,
    most_unstable_level,
    start_state,
    thermo_inputs,
)
from .errors import GridError, InputDataError, MissingVariableError, OptionError, UnitsError
from .thermo import formulas as F
from .thermo.adiabats import adiabat_table

__all__ = [
    "lift_columns",
    "hours_to_initiation",
    "DEFAULT_CIN_THRESHOLD",
    "DEFAULT_HORIZON_HOURS",
    "TIME_INTERPOLATIONS",
    "LOWEST_OMEGA",
    "close_lowest_omega",
]

#: CIN weaker than this [J kg-1] counts as "initiation potential" (common practice: inhibition of a
#: few tens of J kg-1 is overcome by ordinary boundary-layer and mesoscale lifting).
DEFAULT_CIN_THRESHOLD = 25.0

#: Default search horizon [h] of :func:`hours_to_initiation`.
DEFAULT_HORIZON_HOURS = 24.0

#: How ω varies between the times of a sequence: held over each step, or linear in time.
TIME_INTERPOLATIONS = ("step", "linear")

#: How ω is taken between the lowest valid level and the first interior level above it, when ω
#: is exactly 0 at the lowest level (the boundary value of the QG inversion): ``"carried"`` (the
#: first interior level's ω carried down), ``"as_given"`` (the 0 kept; the surface air then never
#: rises) or ``"auto"`` (carried for the output of :func:`qgforce.omega.invert_omega`, recognised
#: by its ``qgforce_terms`` attribute; as given otherwise).  See :func:`close_lowest_omega`.
LOWEST_OMEGA = ("auto", "carried", "as_given")

#: Sub-steps per interval of the "linear" interpolation (ω at the sub-step midpoints: a
#: second-order approximation of the linearly varying flow).
_LINEAR_SUBSTEPS = 4

_K = C.KAPPA
_CAUTION = ("kinematic estimate of the large-scale contribution; mesoscale boundaries, diabatic effects and surface "
            "heating are not in it; horizontal advection neglected")


# =============================================================================== parcel paths
@dataclass
class _Flow:
    """ω [Pa s-1] on the levels, (nz, N) per step, with the steps' start and end times [s]."""

    omega: list
    start: np.ndarray
    end: np.ndarray

    def columns(self, idx) -> "_Flow":
        return _Flow([om[:, idx] for om in self.omega], self.start, self.end)


def _make_flow(omega, step_hours, interpolation) -> _Flow:
    """The flow from ω (nz, N) (steady) or (nt, nz, N) at times ``step_hours`` [h] from the start."""
    if omega.ndim == 2:
        return _Flow([omega], np.array([0.0]), np.array([np.inf]))
    times = np.asarray(step_hours, float) * C.SECONDS_PER_HOUR
    steps, start, end = [], [], []
    if interpolation == "linear" and times.size > 1:
        for i in range(times.size - 1):
            edges = np.linspace(times[i], times[i + 1], _LINEAR_SUBSTEPS + 1)
            for a, b in zip(edges[:-1], edges[1:]):
                w = (0.5 * (a + b) - times[i]) / (times[i + 1] - times[i])
                steps.append((1.0 - w) * omega[i] + w * omega[i + 1])
                start.append(a)
                end.append(b)
    else:
        for i in range(times.size - 1):
            steps.append(omega[i])
            start.append(times[i])
            end.append(times[i + 1])
    steps.append(omega[-1])
    start.append(times[-1])
    end.append(np.inf)
    return _Flow([np.ascontiguousarray(s) for s in steps], np.array(start), np.array(end))


def close_lowest_omega(omega, k0, k1, closure: str = "carried"):
    r"""ω between the surface and the first interior level: replace the inversion's boundary zero.

    The QG inversion (:func:`qgforce.omega.invert_omega`) imposes ω = 0 on the lowest data level,
    a closure of the elliptic problem rather than a diagnosis of ω there.  Taken literally it
    stalls the lifting: the air of the lowest level never rises, so a most-unstable parcel that
    starts there is never lifted.  With ``closure="carried"`` the ascent of the first interior
    level (the lowest level where ω is diagnosed) is carried down to the lowest valid level of
    every column where ω is exactly 0 there and the first interior level rises:

    .. math::

        \omega(p) = \omega_{k_0 + 1} \ \text{if} \ \omega_{k_0 + 1} < 0, \qquad
        p_{k_0 + 1} \le p \le p_{k_0},

    so the layer moves with the nearest diagnosed ascent (constant extrapolation, error
    O(Δp ∂ω/∂p) over the lowest layer; the paths stay closed form since ω stays linear in p
    between levels).  Over flat ground the true ω falls towards the surface (the kinematic lower
    boundary condition; Holton and Hakim 2013, ch. 3, from memory), so this is an upper
    bound of the lowest layer's ascent; the alternative, ω linear to zero at a surface pressure,
    needs a surface pressure the isobaric input does not have.  Descent is not carried: air
    sinking through the lowest data level would leave the column where there are no data to
    follow it, so there the boundary 0 stays (subsiding air slows to rest at the lowest level,
    as it does towards flat ground).  A model's own ω is exactly zero at a level almost never,
    so given ω is left alone in practice; ``closure="as_given"`` keeps every value.

    Parameters
    ----------
    omega : numpy.ndarray
        ω [Pa s-1], (nz, N) or (nt, nz, N), levels surface first.
    k0, k1 : numpy.ndarray of int
        (N,) valid block of every column (levels k0 … k1 − 1).
    closure : {"carried", "as_given"}
        (``"auto"`` is resolved by the public functions before this is called.)

    Returns
    -------
    numpy.ndarray
        ``omega`` itself when nothing changes, otherwise a copy with the boundary zeros replaced.

    Raises
    ------
    OptionError
        For an unknown ``closure``.

    Examples
    --------
    >>> import numpy as np
    >>> om = np.array([[0.0], [-0.4], [-0.8]])
    >>> close_lowest_omega(om, np.array([0]), np.array([3]))[:, 0]
    array([-0.4, -0.4, -0.8])
    """
    if closure not in LOWEST_OMEGA[1:]:
        raise OptionError(f"closure must be one of {LOWEST_OMEGA[1:]}; found {closure!r}")
    if closure == "as_given":
        return omega
    cols = np.flatnonzero(np.asarray(k1) - np.asarray(k0) >= 2)
    if cols.size == 0:
        return omega
    k = np.asarray(k0)[cols]
    low, above = omega[..., k, cols], omega[..., k + 1, cols]
    zero = (low == 0.0) & (above < 0.0)  # NaN above compares False: nothing to carry
    if not zero.any():
        return omega
    out = omega.copy()
    out[..., k, cols] = np.where(zero, above, low)
    return out


def _advance(p, m, col, tau, om, plev, k0, k1, stop=None):
    """Move parcels exactly along the steady flow dp/dt = ω(p) for ``tau`` seconds each.

    Parameters
    ----------
    p, m, col, tau : (M,) arrays
        Pressure [Pa], index of the level at or below the parcel (p_m ≥ p ≥ p_{m+1}; k0 − 1 below
        the lowest valid level), column, duration [s].
    om : (nz, N) array
        ω on the levels [Pa s-1]; linear in p between levels, constant beyond the valid block.
    plev : (nz,) array
    k0, k1 : (N,) arrays
        Valid block of each column (levels k0 … k1 − 1).
    stop : (M,) array, optional
        Pressure where a rising parcel stops (its LCL).

    Returns
    -------
    p, m, tau_left, reached
        ``reached`` marks parcels stopped at ``stop``; ``tau_left`` their unused time.

    Notes
    -----
    Layer by layer with the closed forms of the module docstring (a parcel that does not leave
    its layer within the time left ends there; one that does crosses into the next after
    t = ln(ω(p₁)/ω(p₀))/b); parcel by parcel in :func:`qgforce._compiled.follow_parcels`.
    """
    f64 = np.ascontiguousarray
    stop = np.full(np.shape(p), np.nan) if stop is None else stop
    with np.errstate(all="ignore"):
        return compiled_kernels().follow_parcels(f64(p, float), f64(m, np.intp), f64(col, np.intp), f64(tau, float),
                                           f64(om, float), f64(plev, float), f64(k0, np.intp), f64(k1, np.intp),
                                           f64(stop, float))


def _move(p, m, col, dur, flow: _Flow, plev, k0, k1, stop=None):
    """Follow parcels through the steps of ``flow`` for ``dur`` seconds each.

    Returns the pressure and level index at the end and, with ``stop``, the time [s] at which
    each parcel reached it (NaN when it did not within ``dur``).
    """
    t_stop = np.full(p.size, np.nan)
    done = np.zeros(p.size, bool)
    for om, ta, tb in zip(flow.omega, flow.start, flow.end):
        d = np.clip(dur - ta, 0.0, tb - ta)
        d[done] = 0.0
        if not (d > 0).any():
            continue
        p, m, left, reached = _advance(p, m, col, d, om, plev, k0, k1, stop)
        if stop is not None:
            t_stop[reached] = ta + (d - left)[reached]
            done |= reached
    return p, m, t_stop


# ============================================================================ lifting columns
def _cache_level_lcl(prof):
    """Keep the pseudo-adiabat label of every level's parcel (reused by repeated liftings)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        tl = F.lcl_temperature(prof.t, prof.x)
        sl = F.lcl_log_pressure(prof.s[:, None], prof.t, tl)
    ok = np.isfinite(tl)
    lab = np.full(prof.t.shape, np.nan)
    lab[ok] = adiabat_table().label(tl[ok], sl[ok])
    prof.cache["level_lcl"] = (sl, lab)


def _lift_parcels(prof, flow: _Flow, dur):
    """Displace the parcel of every level of every column for ``dur`` [s] (per column).

    Returns the pressure [Pa], ln p, temperature, specific humidity at the end and the saturation
    flag, (nz, N) each, NaN outside the valid block.  The paths first (:func:`qgforce._compiled.follow_levels`
    for a steady flow, :func:`_move` through the steps of a sequence), then the dry-adiabatic
    thermodynamics of every parcel, then every parcel that saturated in one pass through its LCL
    and pseudo-adiabat.
    """
    nz, n = prof.t.shape
    plev = prof.p
    s = prof.s
    with np.errstate(all="ignore"):
        if len(flow.omega) == 1:
            pend = compiled_kernels().follow_levels(np.ascontiguousarray(flow.omega[0], float), plev, prof.k0, prof.k1,
                                              np.ascontiguousarray(dur, float))
        else:
            idx = np.arange(nz)[:, None]
            kk, cc = np.nonzero((idx >= prof.k0) & (idx < prof.k1))
            pend = np.full((nz, n), np.nan)
            pend[kk, cc] = _move(plev[kk], kk, cc, dur[cc], flow, plev, prof.k0, prof.k1)[0]
    # the dry-adiabatic end states (ln p, T, saturated), level by level: qgforce._compiled.dry_parcels
    sf, tf, sat_all = compiled_kernels().dry_parcels(pend, plev, s, prof.t, prof.x, _K, *F.SATURATION_EXPONENT_CONSTANTS)
    qf = prof.q.copy()
    # saturated parcels: from their LCL along their pseudo-adiabat (condensate removed)
    kk, cc = np.nonzero(sat_all)
    if kk.size:
        cached = prof.cache.get("level_lcl")
        if cached is not None:
            lab = cached[1][kk, cc]
        else:
            t0, x0 = prof.t[kk, cc], prof.x[kk, cc]
            tl = F.lcl_temperature(t0, x0)
            with np.errstate(divide="ignore", invalid="ignore"):
                sl = F.lcl_log_pressure(s[kk], t0, tl)
            lab = adiabat_table().label(tl, sl)
        tm = np.minimum(adiabat_table().temperature(lab, sf[kk, cc]), tf[kk, cc])
        tf[kk, cc] = tm
        qf[kk, cc] = F.saturation_specific_humidity(tm, np.exp(sf[kk, cc]))
    return pend, sf, tf, qf, sat_all


def _regrid(prof, sf, tf, qf):
    """Interpolate the displaced parcels onto the levels, linearly in ln p.

    The parcels of a column stay in order, so the parcel just below level m is the last of those
    with ln p ≥ ln p_m.  Levels outside the span of the parcels keep their original values.
    Returns T, q (nz, N) and the number of out-of-order parcels per column (0 in exact
    arithmetic), which are sorted first (in place); column by column in
    :func:`qgforce._compiled.regrid_parcels`.
    """
    with np.errstate(all="ignore"):
        return compiled_kernels().regrid_parcels(prof.s, sf, tf, qf, prof.t, prof.q, prof.k0, prof.k1)


def _lifted_profile(prof, flow, dur):
    """The lifted profile (a new _Profile) and the parcel end states."""
    pf, sf, tf, qf, sat = _lift_parcels(prof, flow, dur)
    t_new, q_new, crossed = _regrid(prof, sf, tf, qf)
    nz = prof.p.size
    idx = np.arange(nz)[:, None]
    block = (idx >= prof.k0) & (idx < prof.k1)
    new = make_profile(prof.p, t_new, q_new, valid=block, copy=False)
    return new, pf, tf, qf, sat, crossed


def _valid_flow(t, om):
    """Levels where ω is finite at every step (ω has shape (nz, N) or (nt, nz, N))."""
    return np.isfinite(om) if om.ndim == 2 else np.isfinite(om).all(axis=0)


def _lift_kernel(t, q, om, *, levels, step_hours, interpolation, hours, mu_depth, moist_threshold, unlifted,
                 lowest_omega, threads=1):
    def block(tb, qb, ob):
        flow_ok = _valid_flow(tb, ob)
        out = {}
        if unlifted:
            # the diagnostics of the unlifted columns from the same profile, when ω covers them
            ref = make_profile(levels, tb, qb, copy=False)
            prof = ref
            if not flow_ok.all():  # ω missing inside some valid block: lift only where it is given
                idx = np.arange(ref.p.size)[:, None]
                if not flow_ok[(idx >= ref.k0) & (idx < ref.k1)].all():
                    prof = make_profile(levels, ref.t, ref.q, valid=flow_ok)
            prof.cache["clipped"] = ref.cache["clipped"]
            diag = diagnose(ref, mu_depth, moist_threshold)
            out.update({f"unlifted_{name}": diag[name] for name, _, _ in _CHANGES})
        else:
            prof = make_profile(levels, tb, qb, valid=flow_ok, copy=False)
        flow = _make_flow(close_lowest_omega(ob, prof.k0, prof.k1, lowest_omega), step_hours, interpolation)
        dur = np.full(prof.n, hours * C.SECONDS_PER_HOUR)
        new, pf, tf, qf, sat, crossed = _lifted_profile(prof, flow, dur)
        out.update(diagnose(new, mu_depth, moist_threshold))
        out["clipped"] = prof.cache["clipped"]
        out.update(temperature=new.t, specific_humidity=new.q, displaced_pressure=pf / 100.0, saturated=sat,
                   crossed_parcels=crossed)
        return out

    return by_blocks(block, t, q, om, threads=threads)


# ======================================================================= hours to initiation
def _tracked_cin(prof, flow, kstart, dur, threshold):
    """f(D) = CIN + threshold of the tracked parcel after ``dur`` [s] of lifting (NaN without LFC)."""
    new, pf, tf, qf, _, _ = _lifted_profile(prof, flow, dur)
    n = prof.n
    p0, t0, q0 = (gather(a, kstart, n) for a in (pf, tf, qf))
    s0 = np.log(p0)
    kfirst = np.searchsorted(-prof.s, -s0, side="right")
    kfirst = np.maximum(kfirst, new.k0)
    return ascend(prof.s, new.tv, new.k1, s0, t0, q0, kfirst)["cin"] + threshold


def _search(f, cols, f0, horizon, tol, scan=(0.25, 0.5, 0.75), max_iter=40):
    """Earliest duration in [0, horizon] [s] with f ≥ 0, per column (NaN if f(horizon) < 0).

    f(D) is first evaluated at the horizon; columns where it is satisfied are bracketed by a coarse
    scan (the first of ``scan`` × horizon where it holds), then refined by the Illinois variant of
    regula falsi (bisection where a value is undefined), every column at once, until the bracket is
    narrower than ``tol``.  Assumes f changes sign once within the bracket found.
    """
    res = np.full(cols.size, np.nan)
    if cols.size == 0:
        return res
    fh = f(np.full(cols.size, horizon), np.arange(cols.size))
    ok = np.flatnonzero(fh >= 0)
    if ok.size == 0:
        return res
    a, b = np.zeros(ok.size), np.full(ok.size, float(horizon))
    fa, fb = f0[ok].copy(), fh[ok].copy()
    open_ = np.ones(ok.size, bool)
    for frac in scan:
        d = frac * horizon
        i = np.flatnonzero(open_)
        if i.size == 0:
            break
        fd = f(np.full(i.size, d), ok[i])
        good = fd >= 0
        b[i[good]], fb[i[good]] = d, fd[good]
        a[i[~good]], fa[i[~good]] = d, fd[~good]
        open_[i[good]] = False
    side = np.zeros(ok.size, np.int8)
    for _ in range(max_iter):
        i = np.flatnonzero(b - a > tol)
        if i.size == 0:
            break
        A, B, FA, FB = a[i], b[i], fa[i], fb[i]
        w = B - A
        sec = np.isfinite(FA) & np.isfinite(FB) & (FB > FA)
        with np.errstate(invalid="ignore", divide="ignore"):
            c = np.where(sec, B - FB * w / np.where(sec, FB - FA, 1.0), A + 0.5 * w)
        c = np.clip(c, A + 0.05 * w, B - 0.05 * w)
        fc = f(c, ok[i])
        good = fc >= 0
        gi, bi = i[good], i[~good]
        fa[gi[side[gi] == 1]] *= 0.5
        fb[bi[side[bi] == -1]] *= 0.5
        b[gi], fb[gi] = c[good], fc[good]
        a[bi], fa[bi] = c[~good], fc[~good]
        side[gi], side[bi] = 1, -1
    res[ok] = b
    return res


def _hours_kernel(t, q, om, *, levels, step_hours, interpolation, horizon, parcel, threshold, tol, mu_depth,
                  lowest_omega, threads=1):
    def block(tb, qb, ob):
        prof = make_profile(levels, tb, qb, valid=_valid_flow(tb, ob), copy=False)
        flow = _make_flow(close_lowest_omega(ob, prof.k0, prof.k1, lowest_omega), step_hours, interpolation)
        n = prof.n
        has = prof.k0 < prof.k1
        kstart = prof.k0 if parcel == "surface_based" else most_unstable_level(prof, mu_depth)
        s0, t0, q0 = start_state(prof, kstart)
        s0 = np.where(has, s0, np.nan)
        a0 = ascend(prof.s, prof.tv, prof.k1, s0, t0, q0, kstart + 1)
        horizon_s = horizon * C.SECONDS_PER_HOUR
        # hours to saturation: the parcel's own path to its LCL, in closed form layer by layer
        cols = np.flatnonzero(has)
        kc = kstart[cols]
        p_lcl = np.exp(a0["s_lcl"][cols])
        p_start = prof.p[kc]
        _, _, t_sat = _move(p_start.copy(), kc.copy(), cols, np.full(cols.size, horizon_s), flow, prof.p,
                            prof.k0, prof.k1, stop=p_lcl)
        t_sat = np.where(p_lcl >= p_start, 0.0, t_sat)
        hours_sat = np.full(n, np.nan)
        hours_sat[cols] = t_sat / C.SECONDS_PER_HOUR
        # hours to weak inhibition: bracketing search over the lifting duration, all columns at once
        _cache_level_lcl(prof)
        f0 = a0["cin"] + threshold
        hours_init = np.full(n, np.nan)
        now = has & (f0 >= 0)
        hours_init[now] = 0.0
        cand = np.flatnonzero(has & ~(f0 >= 0))
        sub = prof.columns(cand)
        sub.cache["level_lcl"] = tuple(a[:, cand] for a in prof.cache["level_lcl"])
        sub_flow = flow.columns(cand)
        ks = kstart[cand]

        def f(dur, which):
            pr = sub.columns(which)
            pr.cache["level_lcl"] = tuple(a[:, which] for a in sub.cache["level_lcl"])
            return _tracked_cin(pr, sub_flow.columns(which), ks[which], dur, threshold)

        found = _search(f, cand, f0[cand], horizon_s, tol * C.SECONDS_PER_HOUR)
        hours_init[cand] = found / C.SECONDS_PER_HOUR
        return {
            "hours_to_saturation": hours_sat,
            "hours_to_initiation": hours_init,
            "parcel_pressure": np.exp(s0) / 100.0,
            "initial_cape": a0["cape"],
            "initial_cin": a0["cin"],
            "clipped": prof.cache["clipped"],
        }

    return by_blocks(block, t, q, om, threads=threads)


# ============================================================================ labelled layer
def _step_hours(coord: xr.DataArray) -> np.ndarray:
    """Hours since the first time of a time coordinate (datetime, timedelta, cftime or numeric with units)."""
    v = coord.values
    if np.issubdtype(v.dtype, np.datetime64) or np.issubdtype(v.dtype, np.timedelta64):
        hours = (v - v[0]) / np.timedelta64(1, "h")
    elif v.dtype == object:
        hours = np.array([(x - v[0]).total_seconds() for x in v]) / C.SECONDS_PER_HOUR
    else:
        units = coord.attrs.get("units")
        if not units:
            raise UnitsError(f"time coordinate {coord.name!r} is numeric without units; give it datetimes or units such as 'hours'")
        try:
            factor = (1.0 * parse_units(str(units).split(" since ")[0])).to("hour").magnitude
        except Exception as exc:  # pint dimensionality errors
            raise UnitsError(f"time coordinate {coord.name!r} has units {units!r}, not a time") from exc
        hours = (v - v[0]) * factor
    hours = np.asarray(hours, float)
    if hours.size > 1 and not np.all(np.diff(hours) > 0):
        raise GridError(f"time coordinate {coord.name!r} must increase strictly; found {coord.values[:4]}...")
    return hours


def _omega_input(omega_or_w, t, q, time_dim):
    """ω [Pa s-1] from ω or w (by its units), checked against the temperature's levels."""
    if not isinstance(omega_or_w, xr.DataArray):
        raise InputDataError("the vertical velocity must be a DataArray with a 'units' attribute ('Pa s-1' or 'm s-1')")
    units = omega_or_w.attrs.get("units")
    if not units:
        raise UnitsError(
            f"{omega_or_w.name or 'the vertical velocity'!r} has no units; set attrs['units'] to 'Pa s-1' for omega "
            "(e.g. invert_omega(ds)['omega_total']) or 'm s-1' for w"
        )
    dim = parse_units(str(units)).dimensionality
    if dim == parse_units("Pa s-1").dimensionality:
        om = to_si(omega_or_w, "Pa s-1")
    elif dim == parse_units("m s-1").dimensionality:
        from .thermo import w_to_omega

        om = w_to_omega(to_si(omega_or_w, "m s-1"), t, q)
    else:
        raise UnitsError(f"the vertical velocity has units {units!r}; expected omega in 'Pa s-1' or w in 'm s-1'")
    if LEVEL not in om.dims or om.sizes[LEVEL] != t.sizes[LEVEL] or not np.allclose(om[LEVEL].values, t[LEVEL].values):
        raise GridError(f"the vertical velocity must be on the levels of temperature ({t.sizes[LEVEL]} levels in Pa)")
    if time_dim is not None and time_dim not in om.dims:
        raise GridError(f"time_dim={time_dim!r} is not a dimension of the vertical velocity (dims {om.dims})")
    return om


def _lowest_closure(choice, omega_or_w) -> str:
    """Resolve ``lowest_omega`` (see :data:`LOWEST_OMEGA`) for this vertical velocity."""
    if choice not in LOWEST_OMEGA:
        raise OptionError(f"lowest_omega must be one of {LOWEST_OMEGA}; found {choice!r}")
    if choice == "auto":
        from_inversion = isinstance(omega_or_w, xr.DataArray) and "qgforce_terms" in omega_or_w.attrs
        return "carried" if from_inversion else "as_given"
    return choice


def _prepare(temperature, specific_humidity, omega_or_w, time_dim, interpolation, what, lowest_omega):
    lowest_omega = _lowest_closure(lowest_omega, omega_or_w)
    if interpolation not in TIME_INTERPOLATIONS:
        raise InputDataError(f"time_interpolation must be one of {TIME_INTERPOLATIONS}; found {interpolation!r}")
    t, q = thermo_inputs(temperature, specific_humidity, what)
    if time_dim is not None:
        t = t.isel({time_dim: 0}, drop=True) if time_dim in t.dims else t
        q = q.isel({time_dim: 0}, drop=True) if time_dim in q.dims else q
    om = _omega_input(omega_or_w, t, q, time_dim)
    levels = level_values(t)
    step_hours = None
    core = [[LEVEL], [LEVEL], [LEVEL]]
    if time_dim is not None:
        step_hours = _step_hours(om[time_dim])
        om = om.transpose(..., time_dim, LEVEL)
        core[2] = [time_dim, LEVEL]
    return t, q, om, levels, step_hours, core, lowest_omega


_LIFT_EXTRA = (
    ColumnOutput("temperature", "level", {"units": "K", "standard_name": "air_temperature", "long_name": "temperature of the lifted column"}),
    ColumnOutput("specific_humidity", "level", {"units": "kg kg-1", "standard_name": "specific_humidity",
                                          "long_name": "specific humidity of the lifted column"}),
    ColumnOutput("displaced_pressure", "level", {"units": "hPa", "long_name": "pressure reached by the air that started at this level"}),
    ColumnOutput("saturated", "level", {"units": "1", "long_name": "the air of this level reached saturation "
                                                          "(then rose pseudo-adiabatically)"}, bool),
    ColumnOutput("crossed_parcels", "column", {"units": "1", "long_name": "displaced parcels found out of order (sorted)"}, np.int64),
)

#: The changes reported by :func:`lift_columns`: (variable, its units, what a positive change means).
_CHANGES = (
    ("cape", "J kg-1", "more CAPE"),
    ("cin", "J kg-1", "weaker inhibition"),
    ("lapse_rate_850_500", "K km-1", "steeper lapse rate"),
    ("moist_layer_depth", "hPa", "deeper moist layer"),
)


def lift_columns(
    temperature,
    specific_humidity,
    omega_or_w: xr.DataArray,
    hours: float,
    *,
    time_dim: str | None = None,
    time_interpolation: str = "step",
    most_unstable_depth: float = DEFAULT_MOST_UNSTABLE_DEPTH,
    moist_threshold: float = DEFAULT_MOIST_THRESHOLD,
    reference: xr.Dataset | None = None,
    lowest_omega: str = "auto",
) -> xr.Dataset:
    """Lift every column by a vertical velocity for ``hours`` and diagnose the lifted column.

    Parameters
    ----------
    temperature : xarray.DataArray or xarray.Dataset
        Temperature [K] on isobaric levels (``level`` in Pa, strictly decreasing, surface first);
        NaN below ground.  A normalised Dataset may be given instead (its ``temperature`` and
        ``specific_humidity`` are used; pass ``specific_humidity=None``).
    specific_humidity : xarray.DataArray or None
        Specific humidity [kg kg-1].
    omega_or_w : xarray.DataArray
        ω [Pa s-1] (negative is ascent; e.g. ``invert_omega(ds)["omega_total"]`` or the model's
        ``omega``) or w [m s-1], recognised by its ``units``; w is converted with ω = −ρ g w
        (hydrostatic, ρ of the column).  Same levels as temperature.
    hours : float
        Duration of the lifting [h], ≥ 0.
    time_dim : str, optional
        When given, ω is a sequence along this dimension (times from its coordinate; the
        temperature and humidity are taken at its first time) and the parcels follow it: ω held
        over each step (``time_interpolation="step"``) or linear in time between the steps
        (``"linear"``, four sub-steps per interval at their midpoints); after the last time it
        is held.  Without it every extra dimension is an independent steady case.
    time_interpolation : {"step", "linear"}
    most_unstable_depth, moist_threshold : float
        As in :func:`qgforce.moist.column_diagnostics`.
    reference : xarray.Dataset, optional
        :func:`~qgforce.moist.column_diagnostics` of the same (unlifted) columns with the same
        options, when already computed (e.g. for the maps, or to lift for several durations);
        computed here otherwise.  The changes are taken against it.
    lowest_omega : {"auto", "carried", "as_given"}
        Where ω is exactly 0 at a column's lowest valid level (the boundary value of the QG
        inversion), ``"carried"`` moves the lowest layer with the first interior level's ω;
        ``"as_given"`` keeps the 0; ``"auto"`` (default) carries for the output of
        :func:`qgforce.omega.invert_omega` (it has a ``qgforce_terms`` attribute) and keeps any
        other ω as given.  See :func:`close_lowest_omega`.

    Returns
    -------
    xarray.Dataset
        The lifted column on the original levels (``temperature``, ``specific_humidity``),
        ``displaced_pressure`` [hPa] and ``saturated`` of the air of each level, every variable of
        :func:`~qgforce.moist.column_diagnostics` for the lifted column, and the changes
        ``cape_change``, ``cin_change`` (``parcel`` dim), ``lapse_rate_850_500_change``,
        ``moist_layer_depth_change``; ``crossed_parcels`` (0 in exact arithmetic).  Lazy on dask.

    Raises
    ------
    MissingVariableError
        Without specific humidity.
    UnitsError
        When the vertical velocity is neither a pressure nor a length per time.
    GridError, InputDataError
        Levels or options unusable.

    Warns
    -----
    DataQualityWarning
        Humidity negative or supersaturated (clipped, counted).

    Notes
    -----
    The method (closed-form parcel paths with ω linear in p between levels, dry then
    pseudo-adiabatic thermodynamics, re-gridding in ln p, levels outside the displaced span
    keeping their air) is described in :mod:`qgforce.ascent`.  Horizontal advection is
    neglected.  The surface-based parcel of the lifted column is the air then at its lowest valid
    level.  A CIN change is NaN where either CIN is undefined (no LFC).

    This is a kinematic estimate of the large-scale contribution: mesoscale boundaries, diabatic
    effects and surface heating are not in it.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> p = np.linspace(1e5, 2e4, 17)
    >>> t = xr.DataArray(288.0 * (p / 1e5) ** 0.19, coords={"level": p}, dims="level", attrs={"units": "K"})
    >>> q = (2e-3 * (t.level / 1e5) ** 3).assign_attrs(units="kg kg-1")
    >>> w = xr.full_like(t, 0.1).assign_attrs(units="m s-1")
    >>> out = lift_columns(t, q, w, 6.0)
    >>> bool((out["displaced_pressure"] < p / 100).all())
    True
    """
    if not np.isfinite(hours) or hours < 0:
        raise InputDataError(f"the duration must be a finite number of hours ≥ 0; found {hours}")
    t, q, om, levels, step_hours, core, lowest_omega = _prepare(
        temperature, specific_humidity, omega_or_w, time_dim, time_interpolation, "lift_columns", lowest_omega)
    outputs = COLUMN_OUTPUTS + _LIFT_EXTRA
    if reference is None:  # the unlifted diagnostics in the same pass over the columns
        by_name = {o.name: o for o in COLUMN_OUTPUTS}
        outputs += tuple(ColumnOutput(f"unlifted_{name}", by_name[name].kind, by_name[name].attrs) for name, _, _ in _CHANGES)
    ds = apply_columns(
        _lift_kernel, [t, q, om], core, outputs,
        kwargs={"levels": levels, "step_hours": step_hours, "interpolation": time_interpolation, "hours": float(hours),
                "mu_depth": float(most_unstable_depth), "moist_threshold": float(moist_threshold),
                "unlifted": reference is None, "lowest_omega": lowest_omega},
    )
    if reference is None:  # same kernel, same coordinates: no alignment needed
        names = [f"unlifted_{name}" for name, _, _ in _CHANGES]
        long_names = {name: by_name[name].attrs.get("long_name", name) for name, _, _ in _CHANGES}
        diffs = {}
        for name, _, _ in _CHANGES:
            diffs[name] = ds[name].copy(data=ds[name].data - ds[f"unlifted_{name}"].data)
            diffs[name].attrs = {}
        ds = ds.drop_vars(names)
    else:
        missing = [name for name, _, _ in _CHANGES if name not in reference]
        if missing:
            raise MissingVariableError(f"reference lacks {missing}; pass the output of qgforce.moist.column_diagnostics")
        long_names = {name: reference[name].attrs.get("long_name", name) for name, _, _ in _CHANGES}
        diffs = {name: ds[name] - reference[name] for name, _, _ in _CHANGES}
    ds = ds.assign({f"{name}_change": diffs[name].assign_attrs(
        units=units, long_name=f"change of {long_names[name]} by the lifting (positive: {meaning})")
        for name, units, meaning in _CHANGES})
    ds.attrs = {
        "qgforce_duration_hours": float(hours),
        "qgforce_time_dim": str(time_dim),
        "qgforce_time_interpolation": time_interpolation if time_dim else "steady",
        "qgforce_lowest_omega": lowest_omega,
        "comment": _CAUTION,
    }
    return ds


_HOURS_OUTPUTS = (
    ColumnOutput("hours_to_saturation", "column",
           {"units": "h", "long_name": "hours of the ascent until the parcel saturates (reaches its LCL)"}),
    ColumnOutput("hours_to_initiation", "column",
           {"units": "h", "long_name": "hours of the ascent until the parcel's CIN is weaker than the threshold "
                                       "(or it is at its LFC)"}),
    ColumnOutput("parcel_pressure", "column", {"units": "hPa", "long_name": "pressure where the tracked parcel starts"}),
    ColumnOutput("initial_cape", "column", {"units": "J kg-1", "long_name": "CAPE of the tracked parcel before lifting"}),
    ColumnOutput("initial_cin", "column", {"units": "J kg-1", "long_name": "CIN of the tracked parcel before lifting"}),
)


def hours_to_initiation(
    temperature,
    specific_humidity,
    omega_or_w: xr.DataArray,
    horizon_hours: float = DEFAULT_HORIZON_HOURS,
    *,
    parcel: str = "surface_based",
    cin_threshold: float = DEFAULT_CIN_THRESHOLD,
    time_dim: str | None = None,
    time_interpolation: str = "step",
    tolerance_hours: float = 0.1,
    most_unstable_depth: float = DEFAULT_MOST_UNSTABLE_DEPTH,
    lowest_omega: str = "auto",
) -> xr.Dataset:
    """Hours of the diagnosed ascent until a low-level parcel saturates, and until it could start convection.

    Parameters
    ----------
    temperature, specific_humidity, omega_or_w, time_dim, time_interpolation, lowest_omega
        As in :func:`lift_columns`.
    horizon_hours : float
        Longest duration searched [h] (24).
    parcel : {"surface_based", "most_unstable"}
        The air followed: that of the lowest valid level, or of the level of largest θe within
        ``most_unstable_depth`` above it.
    cin_threshold : float
        [J kg-1], positive: "initiation potential" once CIN > −threshold (default
        :data:`DEFAULT_CIN_THRESHOLD` = 25 J kg-1, common practice).
    tolerance_hours : float
        Width of the final bracket of the duration search [h].

    Returns
    -------
    xarray.Dataset
        ``hours_to_saturation`` — the duration after which the followed air reaches its LCL (0 if
        saturated already); ``hours_to_initiation`` — the duration after which its CIN (from
        where the air then is, in the lifted column) is weaker than the threshold, which includes
        its having reached its LFC (CIN 0); both NaN where descent or too weak ascent does not get
        there within the horizon, or where there is no LFC.  Also ``parcel_pressure``,
        ``initial_cape``, ``initial_cin`` of the followed air.  Lazy on dask.

    Raises
    ------
    MissingVariableError, UnitsError, GridError, InputDataError
        As :func:`lift_columns`.

    Notes
    -----
    *Saturation*: the followed air's path is computed in closed form layer by layer
    (:mod:`qgforce.ascent`) up to its LCL pressure, which stays fixed while it rises dry; the time
    at which it gets there is exact for that path (no search).

    *Inhibition*: f(D) = CIN(D) + threshold, where CIN(D) is that of the followed air after D
    hours of lifting of its whole column (the environment is lifted too).  f is evaluated at
    the horizon; where it is satisfied, a coarse scan at 1/4, 1/2 and 3/4 of the horizon
    brackets the earliest crossing and the Illinois variant of regula falsi refines it, every
    column at once, to ``tolerance_hours`` (the result is the upper end of the final bracket, a
    duration at which the condition holds).  A crossing within a quarter of the horizon that is
    undone before the next scan point would be missed.

    The tracked parcel is Lagrangian: the same air throughout.  The QG inversion's ω is 0 at the
    lowest level (its boundary condition); by default (``lowest_omega="auto"``) the first
    interior level's ω is carried down to it (:func:`close_lowest_omega`), so air that starts at
    the lowest level rises with the nearest diagnosed ascent.  With ``"as_given"`` that air does
    not rise, and its CIN falls only through the lifting and cooling of the air above it.

    This is a kinematic estimate of the large-scale contribution: mesoscale boundaries, diabatic
    effects and surface heating are not in it.
    """
    if parcel not in PARCELS:
        raise InputDataError(f"parcel must be one of {PARCELS}; found {parcel!r}")
    if not (np.isfinite(horizon_hours) and horizon_hours > 0):
        raise InputDataError(f"horizon_hours must be positive; found {horizon_hours}")
    if not (np.isfinite(cin_threshold) and cin_threshold >= 0):
        raise InputDataError(f"cin_threshold is a positive magnitude [J kg-1]; found {cin_threshold}")
    if not tolerance_hours > 0:
        raise InputDataError(f"tolerance_hours must be positive; found {tolerance_hours}")
    t, q, om, levels, step_hours, core, lowest_omega = _prepare(
        temperature, specific_humidity, omega_or_w, time_dim, time_interpolation, "hours_to_initiation",
        lowest_omega)
    ds = apply_columns(
        _hours_kernel, [t, q, om], core, _HOURS_OUTPUTS,
        kwargs={"levels": levels, "step_hours": step_hours, "interpolation": time_interpolation,
                "horizon": float(horizon_hours), "parcel": parcel, "threshold": float(cin_threshold),
                "tol": float(tolerance_hours), "mu_depth": float(most_unstable_depth), "lowest_omega": lowest_omega},
    )
    ds.attrs = {
        "qgforce_parcel": parcel,
        "qgforce_cin_threshold_J_kg": float(cin_threshold),
        "qgforce_horizon_hours": float(horizon_hours),
        "qgforce_tolerance_hours": float(tolerance_hours),
        "qgforce_time_dim": str(time_dim),
        "qgforce_time_interpolation": time_interpolation if time_dim else "steady",
        "qgforce_lowest_omega": lowest_omega,
        "comment": _CAUTION,
    }
    return ds
