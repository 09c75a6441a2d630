"""Composite forcing terms at open lateral edges converge at second order.

Reference: the exact forcing of qgforce.cases.baroclinic_wave (closed forms, Holton & Hakim 2013
§6.4; Hoskins, Draghici & Davies 1978), at three resolutions.
"""

from __future__ import annotations

import numpy as np
import pytest

from qgforce import forcing as F
from qgforce.cases import baroclinic_wave


@pytest.mark.parametrize("name", ["differential_vorticity_advection", "thermal_advection_term", "q_vector_forcing"])
def test_edge_error_falls_at_second_order(name):
    errors = []
    for n in (16, 32, 64):
        case = baroclinic_wave(n=n, nlev=5)
        opts = {k: v for k, v in case.options.items() if k != "sigma"}
        got = F.omega_rhs(case.ds, form="traditional" if name != "q_vector_forcing" else "qvector", **opts)[name]
        err = np.abs(got - case.exact[name]).isel(level=slice(1, -1))
        edge = max(float(err.isel(x=slice(0, 3)).max()), float(err.isel(x=slice(-3, None)).max()),
                   float(err.isel(y=slice(0, 3)).max()), float(err.isel(y=slice(-3, None)).max()))
        errors.append(edge / case.error_scale(name))
    order = np.log2(np.array(errors[:-1]) / errors[1:])
    assert errors[-1] < 0.02, errors
    assert order.min() > 1.8, (errors, order)
