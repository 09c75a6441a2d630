"""One thread convention for every part of qgforce that runs work on several threads.

``workers`` (an argument) and ``QGFORCE_NUM_THREADS`` (an environment variable) mean the same
thing everywhere: a number of threads of this process.  The convention is the one of
:mod:`scipy.fft`'s ``workers`` argument (common practice in the scientific Python stack):

* ``None``: the default, ``$QGFORCE_NUM_THREADS`` when it is set, otherwise the cores this
  process may use, at most :data:`DEFAULT_CAP`;
* a positive count: that many threads;
* a negative count counts back from the CPU count: ``-1`` is every core, ``-2`` all but one;
* ``0`` (or anything that is not a whole number) is an :class:`~qgforce.errors.OptionError`.

The processes of a dask cluster (``client_from(workers=...)``) are not threads and are not
covered here.
"""

from __future__ import annotations

import numbers
import os

from .errors import InputDataError, OptionError

__all__ = ["THREADS_ENV", "DEFAULT_CAP", "available_cores", "default_workers", "resolve_workers"]

#: Environment variable that sets the default number of threads.
THREADS_ENV = "QGFORCE_NUM_THREADS"

#: Largest default thread count when the environment does not set one (the column and solver
#: loops stop gaining beyond about this many threads on the machines measured; common practice).
DEFAULT_CAP = 8


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity on Linux, else :func:`os.cpu_count`)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def default_workers() -> int:
    """The default thread count: ``$QGFORCE_NUM_THREADS`` or the available cores, at most 8.

    Raises
    ------
    InputDataError
        If ``QGFORCE_NUM_THREADS`` is set to something other than a whole number ≥ 1.
    """
    value = os.environ.get(THREADS_ENV, "").strip()
    if value:
        try:
            threads = int(value)
        except ValueError:
            threads = 0
        if threads < 1:
            raise InputDataError(f"{THREADS_ENV} must be a whole number of threads ≥ 1; found {value!r} "
                                 f"(unset it to use every core)")
        return threads
    return max(1, min(available_cores(), DEFAULT_CAP))


def resolve_workers(workers=None) -> int:
    """Turn a ``workers`` argument into a thread count (see the module's convention).

    Parameters
    ----------
    workers : int or None
        ``None``: :func:`default_workers`.  A positive count: that many threads.  A negative
        count counts back from :func:`os.cpu_count`: ``-1`` every core, ``-2`` all but one.

    Returns
    -------
    int
        A thread count ≥ 1.

    Raises
    ------
    OptionError
        For ``0``, a count below ``-os.cpu_count()`` or a value that is not a whole number.
    InputDataError
        If ``workers`` is None and ``QGFORCE_NUM_THREADS`` is malformed.

    Examples
    --------
    >>> from qgforce._workers import resolve_workers
    >>> resolve_workers(3)
    3
    >>> resolve_workers(-1) >= 1
    True
    """
    if workers is None:
        return default_workers()
    if isinstance(workers, bool) or not isinstance(workers, numbers.Integral):
        raise OptionError(f"workers must be a whole number of threads or None; found {workers!r}")
    workers = int(workers)
    ncpu = os.cpu_count() or 1
    if workers == 0:
        raise OptionError(
            "workers=0 is not a thread count: pass a positive number of threads, a negative count "
            f"back from the {ncpu} CPUs (-1 = all of them), or None for the default "
            f"(${THREADS_ENV} or the available cores)"
        )
    if workers < 0:
        resolved = ncpu + 1 + workers
        if resolved < 1:
            raise OptionError(
                f"workers={workers} counts back past the {ncpu} CPUs of this machine; "
                f"use a value between -{ncpu} and -1, a positive count, or None"
            )
        return resolved
    return workers
