"""Shared test fixtures."""

import os
import sys
from pathlib import Path

import dask
import pytest


def _raising_scheduler(dsk, keys, **kwargs):
    raise RuntimeError("computed: a lazy operation triggered a dask computation")


@pytest.fixture
def no_compute():
    """Within the test, any dask computation raises: proves an operation stays lazy."""
    with dask.config.set(scheduler=_raising_scheduler):
        yield


@pytest.fixture
def browser(tmp_path):
    """Headless Chromium (tests/_chromium.py); skipped when absent unless QGFORCE_REQUIRE_BROWSER=1."""
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from _chromium import Browser, chromium_path

    exe = chromium_path()
    required = os.environ.get("QGFORCE_REQUIRE_BROWSER") == "1"
    if exe is None:
        if required:
            pytest.fail("QGFORCE_REQUIRE_BROWSER=1 but no chromium executable was found on PATH")
        pytest.skip("headless Chromium not found (apt-get install chromium); set QGFORCE_REQUIRE_BROWSER=1 to "
                    "make this a failure")
    try:
        b = Browser(exe, str(tmp_path / "profile"))
    except (OSError, RuntimeError, TimeoutError) as exc:
        if required:
            raise
        pytest.skip(f"headless Chromium did not start: {exc}")
    yield b
    b.close()
