"""The public omega inversion: term attribution, exactness on analytic cases, lift, errors.

References used:
- the closed-form baroclinic wave of qgforce.cases (re-derived here with sympy);
- Holton & Hakim (2013) §6.4 and Hoskins, Draghici & Davies (1978): the traditional and Q-vector
  forms have equal right-hand sides on a β-plane with V_g from f0;
- US Standard Atmosphere 1976 (troposphere formula) for the depth from 1000 to 800 hPa.
"""

import dask
import numpy as np
import pytest
import sympy as sp
import xarray as xr

from qgforce import constants as C
from qgforce.cases import baroclinic_wave
from qgforce.errors import EquatorialMaskWarning, GridError, InputDataError, OptionError
from qgforce.omega import invert_omega, lift_over_time


def test_baroclinic_wave_closed_form_against_sympy():
    # sympy re-derivation of the case's closed forms: T from hydrostatic balance, sigma = sigma0,
    # the two traditional terms, and L(omega) = RHS for the exact omega.
    x, y, p = sp.symbols("x y p", real=True)
    A, Lam, k, f0, s0, R, kap, c, U0, pm, Db = sp.symbols("A Lambda k f0 sigma0 R kappa c U0 p_m D", real=True)
    l = k
    K2 = k**2 + l**2
    Tb = c * p**kap - s0 * p**2 / (R * (2 - kap))
    Phib = -R * (c * p**kap / kap - s0 * p**2 / (2 * R * (2 - kap)))
    U = U0 + Lam * (p - pm)
    Phi = Phib - f0 * U * y + A * sp.sin(k * x) * sp.cos(l * y)
    T = sp.simplify(-(p / R) * sp.diff(Phi, p))
    assert sp.simplify(T - (Tb + f0 * Lam * p * y / R)) == 0
    theta = T * (100000 / p) ** kap
    sigma_b = sp.simplify(-(R * Tb / (p * (Tb * (100000 / p) ** kap))) * sp.diff(Tb * (100000 / p) ** kap, p))
    assert sp.simplify(sigma_b - s0) == 0
    ug, vg = -sp.diff(Phi, y) / f0, sp.diff(Phi, x) / f0
    zeta = (sp.diff(Phi, x, 2) + sp.diff(Phi, y, 2)) / f0
    beta = sp.Function("beta")(y)
    fy = sp.Function("f")(y)
    AT = -(ug * sp.diff(T, x) + vg * sp.diff(T, y))
    Aeta = -(ug * sp.diff(zeta + fy, x) + vg * sp.diff(zeta + fy, y))
    dva = sp.simplify(-f0 * sp.diff(Aeta, p))
    tat = sp.simplify(-(R / p) * (sp.diff(AT, x, 2) + sp.diff(AT, y, 2)))
    shape = sp.cos(k * x) * sp.cos(l * y)
    assert sp.simplify(dva - (-Lam * K2 * A * k * shape)) == 0
    assert sp.simplify(tat - (-Lam * K2 * A * k * shape)) == 0
    m = sp.sqrt(K2 * s0) / f0
    g = -(1 / (s0 * K2)) * (1 - sp.cosh(m * (p - pm)) / sp.cosh(m * Db / 2))
    omega = -2 * Lam * K2 * A * k * shape * g
    L = s0 * (sp.diff(omega, x, 2) + sp.diff(omega, y, 2)) + f0**2 * sp.diff(omega, p, 2)
    assert sp.simplify(L - (dva + tat)) == 0
    assert sp.simplify(g.subs(p, pm + Db / 2)) == 0 and sp.simplify(g.subs(p, pm - Db / 2)) == 0


@pytest.mark.parametrize("form", ["qvector", "traditional"])
def test_pipeline_converges_to_exact_omega_second_order(form):
    errs = []
    for n, nlev in ((16, 9), (32, 17), (64, 33)):
        case = baroclinic_wave(n=n, nlev=nlev)
        res = invert_omega(case.ds, form=form, **case.options)
        exact = case.exact["omega_total"]
        errs.append(float(np.abs(res["omega_total"] - exact).max() / np.abs(exact).max()))
        assert float(res["solver_residual"]) < 1e-10
    orders = np.log2(np.array(errs[:-1]) / errs[1:])
    assert orders.min() >= 1.8, errs
    assert errs[-1] < 5e-3


def test_terms_sum_to_total_and_forms_agree():
    case = baroclinic_wave(n=32, nlev=17)
    q = invert_omega(case.ds, form="qvector", **case.options)
    t = invert_omega(case.ds, form="traditional", **case.options)
    # linearity: the additive terms, each solved alone, sum to the separately solved total to round-off
    tot = q["omega_q_vector_forcing"] + q["omega_beta_term"]
    np.testing.assert_allclose(tot, q["omega_total"], rtol=0, atol=1e-11 * float(np.abs(q["omega_total"]).max()))
    parts = q["omega_qn_forcing"] + q["omega_qs_forcing"]
    np.testing.assert_allclose(parts, q["omega_q_vector_forcing"], rtol=0, atol=1e-10 * float(np.abs(q["omega_total"]).max()))
    tsum = t["omega_differential_vorticity_advection"] + t["omega_thermal_advection_term"]
    np.testing.assert_allclose(tsum, t["omega_total"], rtol=0, atol=1e-11 * float(np.abs(t["omega_total"]).max()))
    # the two forms agree to discretisation error (Hoskins et al. 1978) and each half is half the total here
    scale = float(np.abs(t["omega_total"]).max())
    assert float(np.abs(q["omega_total"] - t["omega_total"]).max()) < 5e-3 * scale
    assert t.attrs["qgforce_form"] == "traditional" and "f0" in t.attrs["qgforce_coriolis"]


def test_ascent_east_of_upper_trough():
    # common practice: ascent ahead (east) of the upper trough, where cyclonic vorticity advection increases with height
    case = baroclinic_wave(n=32, nlev=17)
    res = invert_omega(case.ds, **case.options)
    om = res["omega_total"].sel(level=60000.0, method="nearest")
    phi = case.ds["geopotential"].sel(level=30000.0, method="nearest")
    wave = phi - phi.mean("x")
    jmid = om.sizes["y"] // 2
    trough_x = float(wave.isel(y=jmid).idxmin("x"))
    ascent_x = float(om.isel(y=jmid).idxmin("x"))
    assert float(om.isel(y=jmid).min()) < 0
    assert ascent_x > trough_x
    assert float(res["w_total"].sel(level=60000.0, method="nearest").isel(y=jmid).max()) > 0


def test_time_dimension_lazy_and_independent(no_compute):
    case = baroclinic_wave(n=16, nlev=9)
    ds2 = xr.concat([case.ds, case.ds * 1.0], dim="time").assign_coords(time=[0, 6])
    ds2["temperature"] = ds2["temperature"].assign_attrs(units="K")
    lazy = ds2.copy()
    for v in lazy.data_vars:  # data lazy; the small 2-D geometry stays in memory as open_dataset leaves it
        lazy[v] = lazy[v].chunk({"time": 1})
    res = invert_omega(lazy, **case.options)
    assert isinstance(res["omega_total"].data, dask.array.Array)
    with dask.config.set(scheduler="sync"):
        a = res["omega_total"].isel(time=1).values
    single = invert_omega(case.ds, **case.options)["omega_total"].values
    np.testing.assert_allclose(a, single, rtol=1e-12, atol=1e-14)


def test_local_sigma_krylov_matches_direct_when_uniform():
    case = baroclinic_wave(n=16, nlev=9)
    d = invert_omega(case.ds, **case.options)
    opts = {**case.options, "sigma": "local"}
    k = invert_omega(case.ds, tol=1e-10, **opts)
    assert int(k["solver_iterations"]) > 0
    # local sigma varies with y here (the baroclinic basic state); the answers differ by that variation only
    assert float(np.abs(k["omega_total"] - d["omega_total"]).max()) < 0.1 * float(np.abs(d["omega_total"]).max())
    assert "floored" in k.attrs["qgforce_sigma"] and "sigma_floored_points" in k


def test_nan_rhs_refused_then_filled():
    case = baroclinic_wave(n=16, nlev=9)
    ds = case.ds.copy(deep=True)
    ds["temperature"][0:2, 3:6, 3:6] = np.nan  # below ground at the two lowest levels
    with pytest.raises(InputDataError, match="hPa"):
        invert_omega(ds, **case.options)
    res = invert_omega(ds, fill="zero", **case.options)
    assert np.isfinite(res["omega_total"].values).all()


def test_domain_selection_and_errors():
    case = baroclinic_wave(n=16, nlev=9)
    with pytest.raises(GridError, match="at least 3"):
        invert_omega(case.ds, domain={"x": (0.0, 1e5)}, **case.options)
    with pytest.raises(OptionError, match="form must be"):  # a choice: OptionError (was GridError)
        invert_omega(case.ds, form="sideways")


def test_lift_facts_of_the_trade():
    # common practice: 10 cm/s for 6 h ≈ 2.2 km; 1 m/s for 1 h = 3.6 km; 10 m/s for 15 min = 9 km
    w = xr.DataArray([0.1, 1.0, 10.0], dims="case", attrs={"units": "m s-1"})
    hours = np.array([6.0, 1.0, 0.25])
    got = [float(lift_over_time(w[i], hours[i])["lift_height"]) for i in range(3)]
    np.testing.assert_allclose(got, [2160.0, 3600.0, 9000.0])
    # US Standard Atmosphere 1976: surface (1013.25 hPa) to 800 hPa, z = (T0/L)(1 - (p/p0)^(R L/g0)) ≈ 1.95 km
    T0, P0, L76, R76, G0 = 288.15, 101325.0, 6.5e-3, 287.053, 9.80665
    z = lambda p: (T0 / L76) * (1 - (p / P0) ** (R76 * L76 / G0))  # noqa: E731
    depth = z(80000.0)
    assert depth == pytest.approx(1950.0, abs=15.0)
    assert got[0] == pytest.approx(depth, rel=0.15)
    # omega and w give consistent displacements with a temperature (hydrostatic)
    t = xr.DataArray([270.0], coords={"level": [70000.0]}, dims="level", attrs={"units": "K"})
    om = xr.DataArray([-1.0], coords={"level": [70000.0]}, dims="level", attrs={"units": "Pa s-1"})
    res = lift_over_time(om, 3.0, temperature=t)
    assert res["lift_pressure"].item() == pytest.approx(-108.0)
    rho = 70000.0 / (C.DRY_AIR_GAS_CONSTANT * 270.0)
    assert res["lift_height"].item() == pytest.approx(10800.0 / (rho * C.GRAVITY))
    with pytest.raises(InputDataError, match="positive"):
        lift_over_time(om, 0.0)


def test_reference_latitude_shared_by_forcing_and_operator():
    # with a sub-domain, the forcing and the operator must use the same f0 (the domain's mean latitude)
    case = baroclinic_wave(n=16, nlev=9)
    y = case.ds["y"].values
    dom = {"y": (y[2], y[-1])}
    res = invert_omega(case.ds, domain=dom, coriolis="f0")
    lat = case.ds["latitude"].sel(y=slice(y[2], y[-1])).values
    f0 = 2 * C.EARTH_ANGULAR_VELOCITY * np.sin(np.deg2rad(lat.mean()))
    assert f"{f0:.4e}" in res.attrs["qgforce_coriolis"]


@pytest.mark.parametrize("option, value, allowed", [
    ("form", "both", "form must be one of"),
    ("sigma", "bogus", "sigma must be 'mean' or 'local'; found 'bogus'"),
    ("fill", "nearest", "fill must be None or 'zero'; found 'nearest'"),
    ("below_ground", "drop", "below_ground must be None"),
    ("boundary", "edges", "boundary must be None, 'model' or a DataArray; found 'edges'"),
])
def test_bad_choices_are_option_errors(option, value, allowed):
    """A choice outside its set is an OptionError (a QGForceError and a ValueError) naming the
    option, what was found and what is allowed; nothing is solved."""
    case = baroclinic_wave(n=16, nlev=9)
    with pytest.raises(OptionError, match=allowed):
        invert_omega(case.ds, **{**case.options, option: value})
