"""Small helpers shared by the jobs: text formatting, option lists, the input files recorded on a dataset."""

from __future__ import annotations

from .._timetext import stamp as _stamp  # noqa: F401  (re-exported for the jobs)
from .._timetext import time_dim as _time_dim  # noqa: F401
from .._timetext import time_text as _time_text  # noqa: F401

__all__ = ["CAUTION_TEXT"]

#: The caution printed at the end of the demo, compute and maps output (one short paragraph).
CAUTION_TEXT = (
    "Caution: these are diagnostics of a balanced (quasi-geostrophic) approximation. QG vertical "
    "motion is unreliable near the equator, in strongly diabatic or mesoscale flow (convection, "
    "the sharpest fronts, orography) and on unsmoothed fine grids, where noise dominates the "
    "forcing. Operational decisions rest with the responsible forecasting service."
)


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _hpa(pa: float) -> str:
    return f"{float(pa) / 100.0:g}"


def _as_list(value) -> list:
    if value is None:
        return []
    if isinstance(value, str):
        return [v.strip() for v in value.split(",") if v.strip()]
    return list(value)


def _input_files(ds) -> list[str]:
    """The input files recorded by :func:`open_inputs` (one per line, so names may hold blanks)."""
    return [f for f in str(ds.attrs.get("qgforce_input_files", "")).splitlines() if f]


def _reason(exc: BaseException) -> str:
    """The first part of a library message: what is missing, without the how-to-name-it advice."""
    text = _one_line(str(exc))
    for marker in ("; looked for", ". Open the file", "; pass names=", ". Supply more levels"):
        text = text.split(marker)[0]
    return text
