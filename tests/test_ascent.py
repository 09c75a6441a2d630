"""Column lifting and hours to initiation potential against closed forms and derived expectations.

References used (each check names its own beside it):
- Closed-form parcel paths: with ω linear in p, dp/dt = ω(p) integrates to
  p(t) = p* + (p0 − p*) e^{bt} (p* the zero of ω); with uniform ω, Δp = ω t.
- Hypsometric heights of a constant-lapse-rate atmosphere, z(p) = (T0/Γ)(1 − (p/p0)^{RΓ/g})
  (Wallace & Hobbs 2006, eq. 3.29 integrated); of a dry adiabat with constant q,
  z = (c_p/g)(1 + c q)(T0 − T), c = 1/ε − 1.
- Lifting by uniform ω conserves θ along the parcels: the lifted profile is θ(p − ωt)(p/p0)^κ;
  its 850–500 hPa lapse rate follows from scipy.integrate.quad of the hypsometric equation.
- Bolton (1980) eq. 15 (LCL temperature from T and T_d); Espy's rule, about 125 m of LCL height
  per K of dew-point depression (*common practice*).
- "w of 10 cm/s for 6 h lifts air about 2.2 km" (*common practice*, science.md).
- hypothesis: random ω profiles for the order-preservation property.
- scipy.integrate.solve_ivp (DOP853, rtol 1e-12) of dp/dt = ω(p) for random ω profiles with
  stagnation levels, steady and in steps.
"""

import warnings

import dask
import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import quad, solve_ivp

from qgforce import ascent as A
from qgforce import constants as C
from qgforce import moist as M
from qgforce.errors import DataQualityWarning, GridError, InputDataError, MissingVariableError, UnitsError

R, CP, G, EPS, KAPPA = C.DRY_AIR_GAS_CONSTANT, C.DRY_AIR_SPECIFIC_HEAT_P, C.GRAVITY, C.EPSILON, C.KAPPA
HOUR = C.SECONDS_PER_HOUR


def da(values, levels, name, units, dims=("level",)):
    return xr.DataArray(np.asarray(values, float), coords={"level": np.asarray(levels, float)}, dims=dims, name=name,
                        attrs={"units": units})


def dry_stable(nz=81, gamma=6.5e-3, top=2e4):
    """A constant-lapse-rate (6.5 K/km) column with a trace of vapour."""
    p = np.linspace(1e5, top, nz)
    t = 288.15 * (p / 1e5) ** (R * gamma / G)
    return p, da(t, p, "temperature", "K"), da(np.full(nz, 1e-6), p, "specific_humidity", "kg kg-1")


def unstable(nz=46, top=1e4):
    """Conditionally unstable column: moist surface air under a warm capping layer near 880 hPa."""
    p = np.exp(np.linspace(np.log(1e5), np.log(top), nz))
    x = np.log(p / 1e5)
    t = 302.0 * np.exp(0.19 * x) + 1.5 * np.sin(3.0 * x) + 4.0 * np.exp(-((x + 0.12) / 0.06) ** 2)
    t = 0.5 * (t + 205.0) + 0.5 * np.sqrt((t - 205.0) ** 2 + 4.0)
    rh = 0.3 + 0.55 * np.exp(4.0 * x)
    q = M.specific_humidity_from_vapour_pressure(rh * M.saturation_vapour_pressure(t), p)
    return p, da(t, p, "temperature", "K"), da(q, p, "specific_humidity", "kg kg-1")


def omega_of(values, p):
    return da(values, p, "omega", "Pa s-1")


# ------------------------------------------------------------------------------ parcel paths
def test_uniform_omega_moves_every_parcel_by_omega_t():
    p, t, q = dry_stable()
    out = A.lift_columns(t, q, omega_of(np.full(p.size, -0.2), p), 6.0)
    # closed form: Δp = ω t for uniform ω
    np.testing.assert_allclose(out.displaced_pressure.values, (p - 0.2 * 6 * HOUR) / 100.0, rtol=1e-12)


def test_linear_omega_path_is_the_exponential_closed_form():
    p, t, q = dry_stable()
    b, p_star, hours = -3e-5, 6e4, 6.0
    out = A.lift_columns(t, q, omega_of(b * (p - p_star), p), hours)
    # closed form of dp/dt = b (p − p*): the air converges on p* = 600 hPa and does not cross it
    exact = p_star + (p - p_star) * np.exp(b * hours * HOUR)
    np.testing.assert_allclose(out.displaced_pressure.values, exact / 100.0, rtol=1e-10)
    assert int(out.crossed_parcels) == 0
    assert np.all(np.diff(out.displaced_pressure.values) < 0)


def test_uniform_w_of_10_cm_s_for_6_h_lifts_about_2_2_km():
    p, t, q = dry_stable()
    w = da(np.full(p.size, 0.1), p, "w", "m s-1")
    out = A.lift_columns(t, q, w, 6.0)
    gamma = 6.5e-3

    def z(pp):  # hypsometric height of the constant-lapse-rate column (closed form)
        return 288.15 / gamma * (1 - (pp / 1e5) ** (R * gamma / G))

    pf = out.displaced_pressure.values * 100.0
    inside = pf > p[-1]
    dz = z(pf[inside]) - z(p[inside])
    # the air moves with w through the profile's own heights: Δz = w t = 2160 m (common practice: ~2.2 km)
    np.testing.assert_allclose(dz, 0.1 * 6 * HOUR, rtol=1e-4)


def test_uniform_omega_steepens_the_lapse_rate_as_derived():
    p, t, q = dry_stable(nz=141)
    om, hours = -0.3, 6.0
    out = A.lift_columns(t, q, omega_of(np.full(p.size, om), p), hours)
    dp = om * hours * HOUR
    gamma0 = 6.5e-3

    def t_lifted(pp):  # θ is carried by the air: T'(p) = θ(p − Δp) (p/p0)^κ
        p_from = pp - dp
        return 288.15 * (p_from / 1e5) ** (R * gamma0 / G) * (pp / p_from) ** KAPPA

    # scipy quad of the hypsometric equation of the lifted column (dry: T_v = T)
    dz = quad(lambda pp: R * t_lifted(pp) / (G * pp), 5e4, 8.5e4)[0]
    expected = 1000.0 * (t_lifted(8.5e4) - t_lifted(5e4)) / dz
    got = float(out.lapse_rate_850_500)
    assert got == pytest.approx(expected, rel=1e-4)
    # stretched in height as the density falls: the lapse rate moves toward the dry adiabat
    # (Γ_d − Γ' = (p'/p)(Γ_d − Γ) at each parcel, from θ conservation and hydrostatic balance)
    assert 6.5 < got < 1000 * G / CP
    before = M.column_diagnostics(t, q)
    assert float(out.lapse_rate_850_500_change) == pytest.approx(got - float(before.lapse_rate_850_500))
    # the unlifted diagnostics may be supplied instead of recomputed: same result
    xr.testing.assert_identical(A.lift_columns(t, q, omega_of(np.full(p.size, om), p), hours, reference=before), out)


def test_sequence_of_steps_matches_the_steady_cases():
    p, t, q = unstable()
    om1 = -0.6 * np.sin(np.pi * (1e5 - p) / (1e5 - p[-1])) - 0.1
    steady6 = A.lift_columns(t, q, omega_of(om1, p), 6.0)
    steady3 = A.lift_columns(t, q, omega_of(om1, p), 3.0)
    times = np.array(["2030-01-01T00", "2030-01-01T03"], dtype="datetime64[ns]")
    seq = xr.concat([omega_of(om1, p), omega_of(om1, p)], dim="time").assign_coords(time=times)
    xr.testing.assert_allclose(A.lift_columns(t, q, seq, 6.0, time_dim="time").drop_attrs(), steady6.drop_attrs(), rtol=1e-9)
    stop = xr.concat([omega_of(om1, p), omega_of(0 * om1, p)], dim="time").assign_coords(time=times)
    xr.testing.assert_allclose(A.lift_columns(t, q, stop, 6.0, time_dim="time").drop_attrs(), steady3.drop_attrs(), rtol=1e-9)


def test_linear_in_time_omega_integrates_exactly():
    p, t, q = dry_stable()
    w1, w2 = -0.1, -0.3
    seq = xr.concat([omega_of(np.full(p.size, w1), p), omega_of(np.full(p.size, w2), p)], dim="time")
    seq = seq.assign_coords(time=("time", [0.0, 3.0], {"units": "hours"}))
    out = A.lift_columns(t, q, seq, 6.0, time_dim="time", time_interpolation="linear")
    # ∫ω dt with ω linear in time over 3 h (trapezoid exact), then held for 3 h
    shift = (0.5 * (w1 + w2) * 3 + w2 * 3) * HOUR
    np.testing.assert_allclose(out.displaced_pressure.values, (p + shift) / 100.0, rtol=1e-12)


@settings(max_examples=15, deadline=None, derandomize=True)  # reproducible in CI
@given(st.lists(st.floats(-1.0, 1.0), min_size=3, max_size=3), st.floats(1.0, 24.0))
def test_parcels_stay_in_order(amps, hours):
    p, t, q = dry_stable(nz=41)
    x = (1e5 - p) / (1e5 - p[-1])
    om = sum(a * np.sin((i + 1) * np.pi * x + i) for i, a in enumerate(amps))
    out = A.lift_columns(t, q, omega_of(om, p), hours)
    # the flow of dp/dt = ω(p) preserves order (uniqueness of solutions of a 1-D autonomous ODE);
    # air converging on a level of zero ω may become equal to round-off, never out of order
    assert int(out.crossed_parcels) == 0
    assert np.all(np.diff(np.log(out.displaced_pressure.values)) <= 1e-12)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_paths_match_a_numerical_ode_solution(seed):
    p, t, q = dry_stable(nz=31)
    rng = np.random.default_rng(seed)
    x = (1e5 - p) / (1e5 - p[-1])
    # ω with several sign changes inside the column, vanishing at its ends as the QG inversion's does
    shapes = [np.sin(np.pi * x) * sum(a * np.sin((i + 1) * np.pi * x + i) for i, a in enumerate(rng.uniform(-1, 1, 4)))
              for _ in range(2)]
    times = np.array(["2030-01-01T00", "2030-01-01T04"], dtype="datetime64[ns]")
    seq = xr.concat([omega_of(s, p) for s in shapes], dim="time").assign_coords(time=times)

    # scipy solve_ivp (DOP853) of dp/dt = ω(p), ω linear in p between levels (agrees with LSODA and
    # Radau to 3e-5 Pa at these tolerances)
    def reference(hours, steps):
        def rhs(time_s, pp):
            om = steps[min(int(time_s // (4 * HOUR)), len(steps) - 1)]
            return np.interp(pp, p[::-1], om[::-1])

        edges = [0.0] + [4 * HOUR * i for i in range(1, len(steps)) if 4 * HOUR * i < hours * HOUR] + [hours * HOUR]
        state = p.copy()
        for a, b in zip(edges[:-1], edges[1:]):  # restarted at each step's start: ω jumps there
            state = solve_ivp(rhs, (a, b), state, method="DOP853", rtol=1e-12, atol=1e-8).y[:, -1]
        return state

    steady = A.lift_columns(t, q, omega_of(shapes[0], p), 9.0)
    np.testing.assert_allclose(steady.displaced_pressure.values * 100.0, reference(9.0, shapes[:1]), rtol=1e-9)
    stepped = A.lift_columns(t, q, seq, 9.0, time_dim="time")  # 1e-3 Pa: air converging on a stagnation level
    np.testing.assert_allclose(stepped.displaced_pressure.values * 100.0, reference(9.0, shapes), rtol=1e-8)


# ----------------------------------------------------------------- hours to initiation potential
def test_hours_to_saturation_is_lcl_height_over_w():
    p = np.linspace(1e5, 4e4, 121)
    theta, td0 = 300.0, 290.0
    q0 = float(M.specific_humidity_from_vapour_pressure(M.saturation_vapour_pressure(td0), 1e5))
    p_lcl = float(M.lifting_condensation_level(theta, 1e5, q0)[1])
    t = theta * (p / 1e5) ** KAPPA
    t = np.where(p >= 7.5e4, t, theta * 0.75**KAPPA * (p / 7.5e4) ** 0.15)  # well mixed to 750 hPa
    q = np.where(p >= p_lcl, q0, 0.5 * np.asarray(M.saturation_specific_humidity(t, p)))
    w = 0.1
    out = A.hours_to_initiation(da(t, p, "temperature", "K"), da(q, p, "specific_humidity", "kg kg-1"),
                                da(np.full(p.size, w), p, "w", "m s-1"), 24.0)
    tl = 1.0 / (1.0 / (td0 - 56.0) + np.log(theta / td0) / 800.0) + 56.0  # Bolton eq. 15
    z_lcl = CP / G * (1 + q0 * (1 / EPS - 1)) * (theta - tl)  # hypsometric height in the mixed layer
    assert float(out.hours_to_saturation) == pytest.approx(z_lcl / w / HOUR, rel=2e-3)
    assert float(out.hours_to_saturation) == pytest.approx(125.0 * (theta - td0) / w / HOUR, rel=0.05)  # Espy (common practice)


def test_descent_never_reaches_saturation_or_free_convection():
    p, t, q = unstable()
    om = omega_of(np.full(p.size, 0.5), p)
    out = A.hours_to_initiation(t, q, om, 24.0)
    assert np.isnan(float(out.hours_to_saturation)) and np.isnan(float(out.hours_to_initiation))
    lifted = A.lift_columns(t, q, om, 6.0)
    assert np.all(lifted.displaced_pressure.values > p / 100.0)  # every parcel sinks
    # uniform ω shifts θ in p: Γ_d − Γ' = (p'/p)(Γ_d − Γ) with p' > p, so subsidence stabilises
    assert float(lifted.lapse_rate_850_500_change) < 0.0


def test_hours_search_brackets_the_threshold():
    p, t, q = unstable()
    om = omega_of(-0.8 * np.sin(np.pi * (1e5 - p) / (1e5 - p[-1])), p)  # zero at the ground: surface air stays
    out = A.hours_to_initiation(t, q, om, 24.0, cin_threshold=25.0, tolerance_hours=0.05)
    h = float(out.hours_to_initiation)
    assert float(out.initial_cin) < -25.0 and 0.0 < h < 24.0
    assert np.isnan(float(out.hours_to_saturation))  # ω = 0 at the lowest level: surface air does not rise
    # the surface-based parcel of the lifted column is the same air: check the threshold either side
    cin_at = float(A.lift_columns(t, q, om, h).cin.sel(parcel="surface_based"))
    cin_before = float(A.lift_columns(t, q, om, h - 0.05 - 1e-6).cin.sel(parcel="surface_based"))
    assert cin_at >= -25.0 > cin_before


def test_already_weak_inhibition_is_zero_hours_and_most_unstable_option():
    p, t, q = unstable()
    om = omega_of(np.full(p.size, -0.3), p)
    out = A.hours_to_initiation(t, q, om, 24.0, cin_threshold=100.0)
    assert float(out.hours_to_initiation) == 0.0  # CIN of about −49 J/kg is already weaker than 100
    mu = A.hours_to_initiation(t, q, om, 24.0, parcel="most_unstable")
    diag = M.column_diagnostics(t, q)
    assert float(mu.parcel_pressure) == pytest.approx(float(diag.parcel_pressure.sel(parcel="most_unstable")))
    assert float(mu.initial_cape) == pytest.approx(float(diag.cape.sel(parcel="most_unstable")))
    assert "mesoscale boundaries" in mu.attrs["comment"] and "kinematic" in mu.attrs["comment"]


def test_with_the_inverted_qg_omega_of_the_demo():
    from qgforce.io import open_dataset
    from qgforce.omega import invert_omega
    from qgforce.scenario import build_demo_dataset

    ds = open_dataset(build_demo_dataset(resolution=2.5)).isel(time=slice(0, 2))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        om = invert_omega(ds)["omega_total"]
    lifted = A.lift_columns(ds.isel(time=0), None, om.isel(time=0), 6.0).compute()
    assert int(lifted.crossed_parcels.max()) == 0
    hours = A.hours_to_initiation(ds.isel(time=0), None, om, 12.0, time_dim="time",
                                  lowest_omega="as_given").compute()
    # the QG inversion has ω = 0 on the lowest level: taken as given, surface air is not lifted
    assert bool(hours.hours_to_saturation.isnull().all())
    assert hours.hours_to_initiation.dims == ("latitude", "longitude")
    # by default ("auto": the inversion's output is recognised) the first interior level's ω is
    # carried down, so surface air rises where ω < 0 there and some of it saturates
    carried = A.hours_to_initiation(ds.isel(time=0), None, om, 12.0, time_dim="time").compute()
    assert carried.attrs["qgforce_lowest_omega"] == "carried"
    assert int(carried.hours_to_saturation.notnull().sum()) > 0


# ------------------------------------------------------------------------------- bad input
def test_missing_humidity_and_bad_units_refused():
    p, t, q = unstable()
    om = omega_of(np.full(p.size, -0.1), p)
    with pytest.raises(MissingVariableError, match="specific humidity"):
        A.lift_columns(t, None, om, 6.0)
    with pytest.raises(UnitsError, match="Pa s-1"):
        A.hours_to_initiation(t, q, om.assign_attrs(units="K"), 12.0)
    with pytest.raises(UnitsError, match="no units"):
        A.lift_columns(t, q, om.assign_attrs(units=""), 6.0)
    with pytest.raises(GridError, match="levels"):
        A.lift_columns(t, q, om.assign_coords(level=p * 0.99), 6.0)
    with pytest.raises(InputDataError):
        A.lift_columns(t, q, om, -1.0)
    with pytest.raises(InputDataError, match="parcel"):
        A.hours_to_initiation(t, q, om, parcel="lowest")


def test_negative_humidity_clipped_with_a_count():
    p, t, q = unstable()
    q = q.copy()
    q[-3:] = -1e-6
    with pytest.warns(DataQualityWarning, match="3 negative") as record:
        A.lift_columns(t, q, omega_of(np.full(p.size, -0.1), p), 3.0)
    assert sum(issubclass(w.category, DataQualityWarning) for w in record) == 1  # reported once, not per pass


def test_nan_below_ground_lifts_from_the_lowest_valid_level():
    p, t, q = unstable()
    om = -0.5 * np.sin(np.pi * (1e5 - p) / (1e5 - p[-1])) - 0.2
    ref = A.lift_columns(t[3:], q[3:], omega_of(om[3:], p[3:]), 6.0)
    t_nan, q_nan = t.copy(), q.copy()
    t_nan[:3] = np.nan
    q_nan[:3] = np.nan
    got = A.lift_columns(t_nan, q_nan, omega_of(om, p), 6.0)
    assert np.isnan(got.temperature.values[:3]).all()
    xr.testing.assert_allclose(got.isel(level=slice(3, None)).drop_attrs(), ref.drop_attrs(), rtol=1e-10)
    hours_ref = A.hours_to_initiation(t[3:], q[3:], omega_of(om[3:], p[3:]), 12.0)
    hours_got = A.hours_to_initiation(t_nan, q_nan, omega_of(om, p), 12.0)
    xr.testing.assert_allclose(hours_got.drop_attrs(), hours_ref.drop_attrs(), rtol=1e-10)


def test_lazy_on_dask_and_equal_to_numpy(no_compute):
    p, t1, q1 = unstable(nz=24)
    shape = (3, 4)
    bump = np.arange(12.0).reshape(shape) * 0.2
    t = xr.DataArray(t1.values[:, None, None] + bump, coords={"level": p}, dims=("level", "y", "x"), attrs={"units": "K"})
    q = xr.DataArray(np.broadcast_to(q1.values[:, None, None], (p.size,) + shape).copy(), coords={"level": p},
                     dims=("level", "y", "x"), attrs={"units": "kg kg-1"})
    om = xr.DataArray(-0.5 * np.sin(np.pi * (1e5 - p) / (1e5 - p[-1]))[:, None, None] * (1 + bump / 3), coords={"level": p},
                      dims=("level", "y", "x"), attrs={"units": "Pa s-1"})
    chunk = {"x": 2, "level": 8}
    lifted = A.lift_columns(t.chunk(chunk), q.chunk(chunk), om.chunk(chunk), 6.0)
    hours = A.hours_to_initiation(t.chunk(chunk), q.chunk(chunk), om.chunk(chunk), 12.0)
    assert lifted.temperature.chunks is not None and hours.hours_to_initiation.chunks is not None
    assert lifted.temperature.dims == ("level", "y", "x") and lifted.cape.dims == ("parcel", "y", "x")
    with dask.config.set(scheduler="synchronous"):
        xr.testing.assert_allclose(lifted.compute(), A.lift_columns(t, q, om, 6.0))
        xr.testing.assert_allclose(hours.compute(), A.hours_to_initiation(t, q, om, 12.0))


def test_regrid_sorts_out_of_order_parcels_within_the_valid_block():
    # Round-off can leave two displaced parcels out of order; they are sorted (by ln p) before
    # interpolating, within the valid block of the column (here the two lowest levels are below
    # ground).  Reference: np.interp on the sorted parcels (linear in ln p).
    p = np.array([1e5, 9.5e4, 9e4, 8.5e4, 8e4, 7.5e4, 7e4])
    t = np.array([np.nan, np.nan, 290.0, 287.0, 284.0, 281.0, 278.0])[:, None]
    q = np.array([np.nan, np.nan, 8e-3, 7e-3, 6e-3, 5e-3, 4e-3])[:, None]
    prof = M._make_profile(p, t, q)
    assert (int(prof.k0[0]), int(prof.k1[0])) == (2, 7)
    s = np.log(p)
    sf = np.full((7, 1), np.nan)
    sf[2:, 0] = np.log([9.2e4, 8.3e4, 8.6e4, 7.8e4, 7.3e4])  # levels 3 and 4 swapped
    tf = np.full((7, 1), np.nan)
    tf[2:, 0] = [291.0, 285.0, 288.0, 282.0, 279.0]
    qf = np.full((7, 1), np.nan)
    qf[2:, 0] = [8e-3, 6e-3, 7e-3, 5e-3, 4e-3]
    t_new, q_new, crossed = A._regrid(prof, sf.copy(), tf.copy(), qf.copy())
    assert int(crossed[0]) == 1
    order = np.argsort(-sf[2:, 0])
    xs, ts, qs = -sf[2:, 0][order], tf[2:, 0][order], qf[2:, 0][order]
    inside = (s >= sf[2:, 0].min()) & (s <= sf[2:, 0].max())
    np.testing.assert_allclose(t_new[inside, 0], np.interp(-s[inside], xs, ts), rtol=1e-13)
    np.testing.assert_allclose(q_new[inside, 0], np.interp(-s[inside], xs, qs), rtol=1e-12)
    # levels outside the span of the parcels keep their air; below ground stays NaN
    assert np.all(np.isnan(t_new[:2, 0]))
    np.testing.assert_array_equal(t_new[2:][~inside[2:], 0], t[2:][~inside[2:], 0])
