"""The arrows of the in-plane circulation on a vertical section (used by :func:`qgforce.plot.cross_section`).

Drawing only: the along-section wind comes from :func:`qgforce.sections.along_line_wind`.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import InputDataError
from .plot import _reference_length, _round_number

__all__ = ["draw_circulation"]


def _section_fraction(section, log_pressure: bool):
    """Positions of a section's points as fractions of the axes (x from the start, y up from the
    highest pressure), and the scales that turn motion into fractions per second."""
    dist = np.asarray(section["distance"].values, float)
    p = np.asarray(section["level"].values, float)
    length_m = (dist[-1] - dist[0]) * 1000.0
    if log_pressure:
        span = math.log(p.max() / p.min())
        y = np.log(p.max() / p) / span
    else:
        span = p.max() - p.min()
        y = (p.max() - p) / span
    return (dist - dist[0]) * 1000.0 / length_m, y, length_m, span


def _exaggeration(horizontal, vertical) -> float:
    """The smallest of 1, 2, 5, 10, 20, ... that makes the 90th percentile of the vertical arrow
    components at least a quarter of the horizontal one (1 when either is zero)."""
    h = np.abs(horizontal[np.isfinite(horizontal)])
    z = np.abs(vertical[np.isfinite(vertical)])
    if not h.size or not z.size:
        return 1.0
    h90, z90 = float(np.percentile(h, 90)), float(np.percentile(z, 90))
    if h90 <= 0.0 or z90 <= 0.0:
        return 1.0
    steps = [m * 10.0**e for e in range(10) for m in (1.0, 2.0, 5.0)]
    return next((k for k in steps if z90 * k >= 0.25 * h90), steps[-1])


def draw_circulation(ax, section, along, omega, log_pressure: bool, vertical_exaggeration):
    """Arrows of the in-plane motion: the along-section wind and, where given and finite, −ω.

    Drawn on an overlay axes whose coordinates are the fractions of the section axes, so that an
    arrow points along the motion as it appears on the figure: d(x)/dt = u_s / L and, on a log-p
    axis, d(y)/dt = −(ω / p) / ln(p_max / p_min) (−ω / (p_max − p_min) on a linear axis), the
    vertical part multiplied by the exaggeration k.
    """
    x, y, length_m, span = _section_fraction(section, log_pressure)
    levels = section["level"].values
    us = np.asarray(along.reindex(level=levels).transpose("level", "distance").values, float)
    p = np.asarray(levels, float)[:, None]
    dx = us / length_m
    if omega is not None:
        om = np.asarray(omega.reindex(level=levels).transpose("level", "distance").values, float)
        dy = -om / (p * span) if log_pressure else -om / span
    else:
        dy = np.zeros_like(dx)
    k = _exaggeration(dx, dy) if vertical_exaggeration is None else float(vertical_exaggeration)
    if not (np.isfinite(k) and k > 0):
        raise InputDataError(f"vertical_exaggeration must be a positive number; found {vertical_exaggeration!r}")
    dy = dy * k
    columns = max(1, len(x) // 18)
    rows = max(1, len(p) // 14)
    sl = (slice(None, None, rows), slice(None, None, columns))
    xx, yy = np.meshgrid(x, y)
    xx, yy, dx, dy = xx[sl], yy[sl], dx[sl], dy[sl]
    ok = np.isfinite(dx) & np.isfinite(dy)
    if not ok.any():
        return None, None, k
    speed = np.hypot(dx, dy)[ok]
    p90 = float(np.percentile(speed, 90))
    spacing = 1.0 / max(2, int(np.ceil(len(x) / columns)))
    tau = 0.9 * spacing / p90 if p90 > 0 else 1.0  # seconds of motion an arrow shows
    over = ax.inset_axes([0.0, 0.0, 1.0, 1.0], zorder=3)
    over.set_xlim(0.0, 1.0)
    over.set_ylim(0.0, 1.0)
    over.set_axis_off()
    over.patch.set_alpha(0.0)
    q = over.quiver(xx[ok], yy[ok], tau * dx[ok], tau * dy[ok], angles="xy", scale_units="xy", scale=1.0,
                    width=0.0025, color="0.1")
    ref = _reference_length(np.abs(us[np.isfinite(us)]))
    kind = f"(−ω ×{k:g})" if omega is not None else "(no ω: horizontal only)"
    # the key sits under the axes at the left, on the line of the axis label, clear of the arrows
    key = over.quiverkey(q, X=0.015, Y=-0.068, U=tau * ref / length_m, coordinates="axes", labelpos="E",
                         label=f"{_round_number(ref)} m s⁻¹ {kind}", fontproperties={"size": 7}, zorder=5)
    key.text.set_bbox({"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1.5})
    return q, key, k
