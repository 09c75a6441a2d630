"""The smoothing asked for, checked against the grid it acts on (used by :func:`qgforce.smoothing.smooth`).

Every filter of :mod:`qgforce.smoothing` is, for the long waves that carry synoptic information,
a Gaussian of some effective standard deviation σ: its response to a sinusoid of wavelength λ is

.. math::  R(\\lambda) = \\exp\\left(-\\frac{2\\pi^2\\sigma^2}{\\lambda^2}\\right)

(Bracewell 2000: the Gaussian is its own Fourier transform).  For ``n`` passes of the five- and
nine-point smoothers with element ``w`` the small-wavenumber expansion of their response per axis,
``1 - (w/2)(1 - cos kΔ)`` and ``1 - w(1 - cos kΔ)`` (Haltiner and Williams 1980, ch. 11; Shapiro
1970), matches ``exp(-σ²k²/2)`` to second order with

.. math::  \\sigma^2 = n\\,w\\,\\Delta^2/2 \\quad\\text{(five-point)}, \\qquad \\sigma^2 = n\\,w\\,\\Delta^2 \\quad\\text{(nine-point)},

Δ the grid length (variances of repeated convolutions add).  Two rules follow:

* **refused**: when even a wave as long as the domain (its shorter extent) keeps less than
  :data:`KEPT_AT_DOMAIN_SCALE` of its amplitude, the smoothed field is its domain mean and every
  derivative of it, hence every forcing term, is zero; and more than :data:`MAX_POINT_PASSES`
  passes of a point smoother (each pass sweeps the whole grid: minutes of work for what one
  Gaussian of the same σ does in one sweep);
* **warned**: when the short end of the synoptic scale (:data:`SYNOPTIC_WAVELENGTH_KM`) keeps
  less than half its amplitude, or when a Gaussian is narrower than half the grid length (it
  then barely smooths at all).
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from .errors import OptionError, QGForceWarning

__all__ = ["KEPT_AT_DOMAIN_SCALE", "MAX_POINT_PASSES", "SYNOPTIC_WAVELENGTH_KM", "SmoothingWarning",
           "effective_sigma_km", "check_smoothing"]

#: Least amplitude a domain-long wave must keep for the smoothed field to carry any gradient.
KEPT_AT_DOMAIN_SCALE = 0.01

#: Most passes of a five- or nine-point smoother (a Gaussian does the same in one sweep).
MAX_POINT_PASSES = 500

#: Short end of the synoptic scale [km] (*common practice*: cyclones and troughs of 2000-4000 km).
SYNOPTIC_WAVELENGTH_KM = 2000.0


class SmoothingWarning(QGForceWarning):
    """The smoothing asked for removes much of the synoptic scale, or next to nothing."""


def _response(sigma_km: float, wavelength_km: float) -> float:
    return math.exp(-2.0 * math.pi ** 2 * (sigma_km / wavelength_km) ** 2)


def _grid_lengths_km(grid) -> tuple[float, float, float]:
    """(median grid length, shorter extent, the extent's axis name) of ``grid`` in km."""
    dx, dy = grid.spacing
    step = float(np.median(np.concatenate([np.abs(dx).ravel(), np.abs(dy).ravel()]))) / 1e3
    ny, nx = grid.shape
    extent_y = float(np.median(np.abs(dy).sum(axis=0) - 0.5 * (np.abs(dy[0]) + np.abs(dy[-1])))) / 1e3
    extent_x = float(np.median(np.abs(dx).sum(axis=1) - (0.0 if grid.periodic_x else
                                                         0.5 * (np.abs(dx[:, 0]) + np.abs(dx[:, -1]))))) / 1e3
    return (step, extent_y, grid.dims[0]) if extent_y <= extent_x else (step, extent_x, grid.dims[1])


def effective_sigma_km(method: str, kwargs: dict, step_km: float) -> float:
    """The standard deviation [km] of the Gaussian that the filter matches at long wavelengths."""
    if method == "gaussian":
        return float(kwargs["length_km"])
    repeat, element = int(kwargs.get("repeat", 1)), float(kwargs.get("element", 0.5))
    per_pass = element / 2.0 if method == "shuman_cross" else element
    return step_km * math.sqrt(repeat * per_pass)


def check_smoothing(spec: str, method: str, kwargs: dict, grid) -> None:
    """Refuse or warn about a smoothing that does not suit ``grid`` (see the module docstring).

    Parameters
    ----------
    spec : str
        The specification as given (quoted in the messages).
    method, kwargs
        The parsed method and its arguments (already range-checked).
    grid : qgforce.Grid

    Raises
    ------
    OptionError
        The smoothed field would be its domain mean (zero forcing), or too many passes.

    Warns
    -----
    SmoothingWarning
        Half or more of the amplitude of a :data:`SYNOPTIC_WAVELENGTH_KM` wave removed, or a
        Gaussian narrower than half the grid length.
    """
    if min(grid.shape) < 2:
        return
    step, extent, axis = _grid_lengths_km(grid)
    where = f"smoothing {spec!r}"
    repeat = int(kwargs.get("repeat", 1)) if method != "gaussian" else 1
    sigma = effective_sigma_km(method, kwargs, step)
    if repeat > MAX_POINT_PASSES:
        raise OptionError(
            f"{where}: {repeat} passes is more than the {MAX_POINT_PASSES} allowed (each pass sweeps the whole grid); "
            f"these passes smooth like gaussian:{sigma:.0f}km on this grid (grid length {step:.0f} km), which does it "
            "in one sweep")
    if _response(sigma, extent) < KEPT_AT_DOMAIN_SCALE:
        limit = extent * math.sqrt(math.log(1.0 / KEPT_AT_DOMAIN_SCALE) / (2.0 * math.pi ** 2))
        raise OptionError(
            f"{where}: a smoothing scale of {sigma:.0f} km leaves less than {KEPT_AT_DOMAIN_SCALE:.0%} of even the "
            f"longest wave the domain holds ({extent:.0f} km along {axis}): the fields would become their domain "
            f"mean and every forcing term zero; choose a scale below {limit:.0f} km (e.g. gaussian:150km)")
    if _response(sigma, SYNOPTIC_WAVELENGTH_KM) < 0.5:
        warnings.warn(
            f"{where} (scale {sigma:.0f} km) removes more than half the amplitude of {SYNOPTIC_WAVELENGTH_KM:.0f} km "
            "waves, the short end of the synoptic scale: the forcing will be much weaker than the flow's",
            SmoothingWarning, stacklevel=3)
    elif method == "gaussian" and sigma < 0.5 * step:
        warnings.warn(
            f"{where}: sigma {sigma:g} km is less than half the grid length ({step:.0f} km), so the filter "
            "barely changes the fields; use a few grid lengths or more", SmoothingWarning, stacklevel=3)
