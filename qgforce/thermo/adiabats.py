"""Pseudo-adiabats: the RK4 integrator of the pseudo-adiabatic lapse rate and the table of them.

Saturated air lifted with its condensate removed follows a pseudo-adiabat, the solution of
dT/d ln p = :func:`qgforce.thermo.formulas.pseudo_adiabatic_slope`.  :func:`integrate_adiabat`
integrates it with the classical fourth-order Runge–Kutta method in s = ln p, element by element;
:class:`PseudoAdiabatTable` holds the pseudo-adiabats integrated once per process, labelled by
their wet-bulb potential temperature θw (where they cross 1000 hPa), on steps of 0.01 in ln p and
0.25 K in θw, read by bilinear interpolation: it agrees with the direct integration to a few
thousandths of a kelvin (tested).  :func:`adiabat_table` returns the process's table.

References
----------
Wallace, J. M. and P. V. Hobbs, 2006: *Atmospheric Science: An Introductory Survey*, 2nd ed.,
Academic Press (§3.7 pseudo-adiabats).
Emanuel, K. A., 1994: *Atmospheric Convection*. Oxford University Press (§4.7).
"""

from __future__ import annotations

import functools
import math

import numpy as np

from .. import constants as C
from . import formulas as F

__all__ = ["rk4_step", "integrate_adiabat", "PseudoAdiabatTable", "adiabat_table"]


def rk4_step(t, s, h):
    """One classical Runge–Kutta step of the pseudo-adiabatic lapse rate in s = ln p."""
    k1 = F.pseudo_adiabatic_slope(t, s)
    k2 = F.pseudo_adiabatic_slope(t + 0.5 * h * k1, s + 0.5 * h)
    k3 = F.pseudo_adiabatic_slope(t + 0.5 * h * k2, s + 0.5 * h)
    k4 = F.pseudo_adiabatic_slope(t + h * k3, s + h)
    return t + (h / 6.0) * (k1 + 2.0 * k2 + 2.0 * k3 + k4)


def integrate_adiabat(t0, s0, s1, max_step):
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
        t = rk4_step(t, s, h)
        s = s + h
    return np.where(finite, t, np.nan)


# ------------------------------------------------------------------------ pseudo-adiabat table
class PseudoAdiabatTable:
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
            t = rk4_step(t, self.s[j], -h)
            table[j - 1] = t
        t = self.labels.copy()
        for j in range(n_up, ns - 1):
            t = rk4_step(t, self.s[j], h)
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
        bad = ~np.isfinite(u)  # a NaN (or infinite) ln p: row 0, weight NaN, so the result is NaN
        j = np.clip(np.floor(np.where(bad, 0.0, u)), 0, self.s.size - 2).astype(np.intp)
        return j, np.where(bad, np.nan, np.clip(u - j, 0.0, 1.0))

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
            q = F.specific_humidity_from_vapour_pressure(np.minimum(F.saturation_vapour_pressure(t), 0.5 * np.exp(s_levels)[:, None]),
                                                         np.exp(s_levels)[:, None])
            rows = F.virtual_temperature(t, q)
            if len(self._level_rows) > 8:
                self._level_rows.clear()
            self._level_rows[key] = rows
        return rows


@functools.lru_cache(maxsize=1)
def adiabat_table() -> PseudoAdiabatTable:
    """The table of pseudo-adiabats of this process (built on first use, then kept)."""
    return PseudoAdiabatTable()
