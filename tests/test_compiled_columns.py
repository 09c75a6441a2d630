"""The compiled profile kernels of :mod:`qgforce._compiled` against the Python formulas they mirror.

``profile_levels``, ``most_unstable_level`` and ``dry_parcels`` repeat formulas of
:mod:`qgforce.moist` (Bolton 1980, eqs. 10, 22, 24, 39; the humidity identities) in scalar form;
these tests hold them to the Python functions (themselves tested against published tables and
sympy in tests/test_moist.py), so that the two definitions cannot drift apart.  ``follow_levels``
is held to the parcel-by-parcel path of ``_follow`` (itself checked against scipy's solve_ivp in
tests/test_ascent.py), and ``moist_layer_depth`` to a column-by-column interpolation of ln RH.
"""

import numpy as np
import pytest

from qgforce import _compiled as K
from qgforce import constants as C
from qgforce import moist as M
from qgforce.columns.profile import valid_block
from qgforce.thermo import formulas as F

LEVELS = np.array([100000.0, 92500.0, 85000.0, 70000.0, 60000.0, 50000.0, 40000.0, 30000.0, 25000.0, 20000.0])
ES_ARGS = F.SATURATION_EXPONENT_CONSTANTS


def random_columns(n, seed):
    """(nz, n) temperature and humidity: moist, dry, supersaturated, negative, zero, missing, very cold."""
    rng = np.random.default_rng(seed)
    nz = LEVELS.size
    t = 300.0 - 60.0 * np.linspace(0, 1, nz)[:, None] + rng.normal(0, 8, (nz, n))
    rh = rng.uniform(0.05, 1.3, (nz, n))  # above 1: supersaturated
    q = np.asarray(F.specific_humidity_from_vapour_pressure(rh * F.saturation_vapour_pressure(t), LEVELS[:, None]))
    q[rng.random((nz, n)) < 0.05] *= -1.0
    q[rng.random((nz, n)) < 0.03] = 0.0
    t[:, : n // 10] = rng.uniform(40.0, 120.0, (nz, n // 10))  # below the cold limit of Bolton's formula
    t[rng.random((nz, n)) < 0.04] = np.nan  # missing points cut the valid block
    t[:2, n // 2: n // 2 + 20] = np.nan  # below ground
    return t, q


def test_profile_levels_equals_the_python_formulas():
    t, q = random_columns(400, 1)
    ok = np.isfinite(t) & np.isfinite(q) & (t > 0)
    k0, k1, block = valid_block(ok)
    tk, qk = t.copy(), q.copy()
    x, tv, n_neg, n_sup = K.profile_levels(LEVELS, tk, qk, k0, k1, F.ES0, *ES_ARGS, C.EPSILON)

    # the reference: the Python functions, on whole arrays
    p = LEVELS[:, None]
    t_ref, q_ref = np.where(block, t, np.nan), np.where(block, q, np.nan)
    assert n_neg == np.count_nonzero(q_ref < 0) > 0
    q_ref = np.where(q_ref < 0, 0.0, q_ref)
    with np.errstate(divide="ignore", invalid="ignore"):
        x_ref = F.log_vapour_ratio(p, q_ref)
        a = F.saturation_exponent(t_ref)
        sup = x_ref > a
        assert n_sup == np.count_nonzero(x_ref > a + 1e-9) > 0
        q_ref = np.where(sup, F.specific_humidity_from_vapour_pressure(F.saturation_vapour_pressure(t_ref), p), q_ref)
        x_ref = np.where(sup, a, x_ref)
        tv_ref = F.virtual_temperature(t_ref, q_ref)
    for got, want in ((tk, t_ref), (qk, q_ref), (x, x_ref), (tv, tv_ref)):
        np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
        np.testing.assert_allclose(got, want, rtol=1e-14, atol=0)
    assert np.isneginf(x).any() and np.isnan(tk).any()


@pytest.mark.parametrize("depth", [0.0, 15000.0, 30000.0, 1e6])
def test_most_unstable_level_equals_the_python_theta_e(depth):
    t, q = random_columns(300, 2)
    prof = M._make_profile(LEVELS, t, q)
    kbest, best = K.most_unstable_level(prof.p, prof.t, prof.q, prof.x, prof.k0, prof.k1, depth, F.ES0, C.EPSILON,
                                        F.BOLTON_KAPPA)
    nz = LEVELS.size
    idx = np.arange(nz)[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        lte = F.log_equivalent_potential_temperature(prof.t, LEVELS[:, None], prof.q, prof.x)
    p_base = LEVELS[np.clip(prof.k0, 0, nz - 1)]
    inside = (idx >= prof.k0) & (idx < prof.k1) & (LEVELS[:, None] >= p_base - depth)
    lte = np.where(inside, lte, -np.inf)
    has = inside.any(axis=0)
    np.testing.assert_array_equal(kbest[has], lte.argmax(axis=0)[has])
    np.testing.assert_array_equal(kbest[~has], prof.k0[~has])
    np.testing.assert_allclose(best[has], lte.max(axis=0)[has], rtol=1e-14, atol=0)
    assert np.isneginf(best[~has]).all()
    assert (kbest > prof.k0).any() == (depth > 0)


def test_dry_parcels_equal_the_python_formulas():
    t, q = random_columns(300, 3)
    prof = M._make_profile(LEVELS, t, q)
    rng = np.random.default_rng(4)
    pend = LEVELS[:, None] * np.exp(rng.normal(0.0, 0.2, prof.t.shape))
    pend[np.isnan(prof.t)] = np.nan
    pend[0, :5] = LEVELS[0]  # not moved
    sf, tf, sat = K.dry_parcels(pend, LEVELS, np.log(LEVELS), prof.t, prof.x, C.KAPPA, *ES_ARGS)
    with np.errstate(divide="ignore", invalid="ignore"):
        ds = np.log(pend / LEVELS[:, None])
        tf_ref = prof.t * np.exp(C.KAPPA * ds)
        sat_ref = (prof.x + ds) > F.saturation_exponent(tf_ref)
    np.testing.assert_allclose(sf, np.log(LEVELS)[:, None] + ds, rtol=1e-15, atol=0)
    np.testing.assert_allclose(tf, tf_ref, rtol=1e-15, atol=0)
    np.testing.assert_array_equal(sat, sat_ref)
    assert sat.any() and not sat.all()


def test_follow_levels_equals_parcel_by_parcel_paths():
    rng = np.random.default_rng(5)
    nz, n = LEVELS.size, 500
    om = rng.normal(0.0, 1.0, (nz, n)) + rng.normal(0.0, 1.0, n)
    om[:, :20] = 0.0  # calm columns
    om[3, 20:40] = 0.0  # a level of no motion: air converges on it
    k0 = rng.integers(0, 3, n).astype(np.intp)
    k1 = (nz - rng.integers(0, 3, n)).astype(np.intp)
    dur = rng.uniform(0.0, 4e5, n)
    dur[-10:] = 0.0
    got = K.follow_levels(om, LEVELS, k0, k1, dur)
    idx = np.arange(nz)[:, None]
    kk, cc = np.nonzero((idx >= k0) & (idx < k1))
    p, _, _, _ = K.follow_parcels(LEVELS[kk], kk.astype(np.intp), cc.astype(np.intp), dur[cc], om, LEVELS, k0, k1,
                                  np.full(kk.size, np.nan))
    want = np.full((nz, n), np.nan)
    want[kk, cc] = p
    np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
    np.testing.assert_allclose(got, want, rtol=1e-11, atol=0)
    assert (np.abs(got[kk, cc] / LEVELS[kk] - 1.0) > 0.05).mean() > 0.3  # the parcels do move


def test_moist_layer_depth_equals_a_column_by_column_reference():
    t, q = random_columns(400, 6)
    q[:, 300:340] = np.asarray(F.specific_humidity_from_vapour_pressure(0.97 * F.saturation_vapour_pressure(t[:, 300:340]), LEVELS[:, None]))  # moist to the top
    t[1:, 340:345] = np.nan  # one valid level
    prof = M._make_profile(LEVELS, t, q)
    threshold = 0.8
    got = K.moist_layer_depth(prof.p, prof.s, prof.t, prof.x, prof.k0, prof.k1, np.log(threshold), *ES_ARGS)
    with np.errstate(divide="ignore", invalid="ignore"):
        ln_rh = F.log_vapour_ratio(LEVELS[:, None], prof.q) - F.saturation_exponent(prof.t)
    s = np.log(LEVELS)
    want = np.full(prof.n, np.nan)
    for c in range(prof.n):
        a, e = prof.k0[c], prof.k1[c]
        if a >= e:
            continue
        r = ln_rh[a:e, c] - np.log(threshold)
        if not r[0] >= 0:
            want[c] = 0.0
            continue
        below = np.flatnonzero(r < 0)
        if below.size:  # the zero of r, linear in ln p, between the last moist level and the next
            j = a + below[0]
            s_top = s[j - 1] + r[below[0] - 1] / (r[below[0] - 1] - r[below[0]]) * (s[j] - s[j - 1])
        else:
            s_top = s[e - 1]
        want[c] = LEVELS[a] - np.exp(s_top)
    np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-9)
    moist = slice(300, 340)
    np.testing.assert_allclose(want[moist], LEVELS[prof.k0[moist]] - LEVELS[prof.k1[moist] - 1], rtol=1e-12, atol=1e-6)
    assert (want == 0).any() and (want[:300] > 0).any() and (np.abs(want[340:345]) < 1e-6).all()
