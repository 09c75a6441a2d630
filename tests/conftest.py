"""Shared test fixtures."""

import dask
import pytest


def _raising_scheduler(dsk, keys, **kwargs):
    raise RuntimeError("computed: a lazy operation triggered a dask computation")


@pytest.fixture
def no_compute():
    """Within the test, any dask computation raises: proves an operation stays lazy."""
    with dask.config.set(scheduler=_raising_scheduler):
        yield
