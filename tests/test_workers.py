"""The one thread convention (qgforce._workers).

Source of the convention: scipy.fft's ``workers`` argument (negative counts back from
os.cpu_count(), -1 = every core; 0 is an error), checked here against os.cpu_count() itself.
"""

import os

import pytest

from qgforce import moist
from qgforce._workers import THREADS_ENV, available_cores, default_workers, resolve_workers
from qgforce.errors import InputDataError, OptionError, QGForceError
from qgforce.solver import resolve_workers as solver_workers


def test_positive_and_negative_counts(monkeypatch):
    ncpu = os.cpu_count() or 1
    assert resolve_workers(3) == 3
    assert resolve_workers(-1) == ncpu
    assert resolve_workers(-ncpu) == 1
    with pytest.raises(OptionError, match="counts back past"):
        resolve_workers(-ncpu - 1)


@pytest.mark.parametrize("bad", [0, 1.5, "2", True])
def test_bad_values_are_option_errors(bad):
    with pytest.raises(OptionError) as info:
        resolve_workers(bad)
    assert isinstance(info.value, QGForceError) and isinstance(info.value, ValueError)


def test_none_reads_the_environment_then_the_cores(monkeypatch):
    monkeypatch.setenv(THREADS_ENV, "5")
    assert resolve_workers(None) == default_workers() == 5
    assert moist._block_threads() == 5
    monkeypatch.delenv(THREADS_ENV)
    assert resolve_workers(None) == min(available_cores(), 8)
    monkeypatch.setenv(THREADS_ENV, "-2")
    with pytest.raises(InputDataError, match="QGFORCE_NUM_THREADS must be a whole number"):
        resolve_workers(None)


def test_solver_keeps_scipy_default_and_shares_the_errors():
    assert solver_workers(None) is None
    assert solver_workers(-1) == resolve_workers(-1)
    with pytest.raises(OptionError, match="workers=0"):
        solver_workers(0)
