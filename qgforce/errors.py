"""The exceptions and warnings qgforce raises.

One base class, :class:`QGForceError`, so that callers (and the command line) can
catch every user-facing problem at once; a few precise subclasses say what kind of
problem it is.  Messages always say what was expected, what was found and how to fix it.
"""

from __future__ import annotations


class QGForceError(Exception):
    """Base class of every error qgforce raises for bad input or an impossible request.

    Parameters
    ----------
    *args
        The message (what was expected, what was found, how to fix it).
    hints : mapping, optional
        Library words of the message -> the words of another interface, e.g.
        ``{"overwrite=True": "--overwrite"}``: the command line shows the message with them
        replaced (:attr:`hints`), so the library keeps speaking Python.
    """

    def __init__(self, *args, hints=None):
        super().__init__(*args)
        self.hints = dict(hints or {})


class MissingVariableError(QGForceError, KeyError):
    """A variable or coordinate needed for a computation is not in the dataset."""

    def __str__(self) -> str:  # KeyError quotes its message; keep it readable
        return str(self.args[0]) if self.args else ""


class UnitsError(QGForceError, ValueError):
    """Units are missing, unknown, or not convertible to what the computation needs."""


class GridError(QGForceError, ValueError):
    """The grid cannot be used: coordinates duplicated, non-monotonic, too short, or not pressure."""


class InputDataError(QGForceError, ValueError):
    """Values are unusable (all NaN, NaN where a solve needs numbers, negative stability...)."""


class OptionError(QGForceError, ValueError):
    """An option has a value outside its allowed set or range (a method name, a count, a choice).

    The message names the option, the value found and the values allowed.
    """


class ConvergenceError(QGForceError, RuntimeError):
    """An iterative solver did not reach its tolerance.

    Attributes
    ----------
    residuals : list of float
        The relative residual after each iteration, for diagnosis.
    """

    def __init__(self, message: str, residuals=None):
        super().__init__(message)
        self.residuals = list(residuals or [])


class QGForceWarning(UserWarning):
    """Base class of qgforce's warnings."""


class EquatorialMaskWarning(QGForceWarning):
    """Points near the equator were masked because quasi-geostrophy does not hold there."""


class DataQualityWarning(QGForceWarning):
    """Input values were altered (clipped, floored, filled) to make a computation possible."""


class PoleRowWarning(QGForceWarning):
    """Values on a pole row were masked: the nested derivatives there use the extrapolated metric
    of the nearest rows and are not comparable with the rest of the grid."""


class OmittedTermWarning(QGForceWarning):
    """Some diagnostics could not be computed from the data given (too few levels, a missing
    variable) and were left out of the result; the message and an attribute list them and why."""


__all__ = [
    "QGForceError",
    "MissingVariableError",
    "UnitsError",
    "GridError",
    "InputDataError",
    "OptionError",
    "ConvergenceError",
    "QGForceWarning",
    "EquatorialMaskWarning",
    "DataQualityWarning",
    "OmittedTermWarning",
    "PoleRowWarning",
]
