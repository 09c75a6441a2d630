"""Moist thermodynamics and column diagnostics against published and analytic references.

References used (each check names its own beside it):
- Smithsonian Meteorological Tables (List 1951, 6th ed., saturation vapour pressure over water,
  Goff–Gratch values): 2.8627 hPa at −10 °C, 6.1078 at 0 °C, 12.272 at 10 °C, 23.373 at 20 °C,
  42.430 at 30 °C (*from memory*).
- Bolton, D., 1980, Mon. Wea. Rev. 108, 1046–1053: eqs. 15, 21, 22 (LCL temperature), 43 (θe),
  and his statement that eq. 10 is within 0.1 % of the tabulated values from −30 to 35 °C.
- Romps, D. M., 2017, J. Atmos. Sci. 74, 3891–3900: the exact LCL with the Lambert W function
  and his thermodynamic constants (*from memory*; the formula is checked against its own defining
  condition below).
- scipy.optimize.brentq (root of the defining condition of the LCL, and of θe conservation),
  scipy.integrate.solve_ivp (the pseudo-adiabatic ODE), scipy.integrate.quad, scipy.special.lambertw.
- sympy: the humidity identities and the integrals of an analytic buoyancy profile.
"""

import numpy as np
import pytest
import sympy as sp
import xarray as xr
from scipy.integrate import quad, solve_ivp
from scipy.optimize import brentq
from scipy.special import lambertw

from qgforce import constants as C
from qgforce import moist as M
from qgforce.columns import blocks as column_blocks
from qgforce.errors import DataQualityWarning, GridError, InputDataError, MissingVariableError

R, CP, G, EPS, KAPPA = C.DRY_AIR_GAS_CONSTANT, C.DRY_AIR_SPECIFIC_HEAT_P, C.GRAVITY, C.EPSILON, C.KAPPA
T0C = C.ZERO_CELSIUS


def column(values, levels, name, units):
    return xr.DataArray(np.asarray(values, float), coords={"level": np.asarray(levels, float)}, dims="level",
                        name=name, attrs={"units": units})


def diagnose(t, q, levels, **kw):
    """column_diagnostics of one column given as arrays; returns the Dataset."""
    return M.column_diagnostics(column(t, levels, "temperature", "K"), column(q, levels, "specific_humidity", "kg kg-1"), **kw)


def q_sat(t, p):
    return np.asarray(M.saturation_specific_humidity(t, p))


# ----------------------------------------------------------------------- saturation curve
@pytest.mark.parametrize("t_c, e_hpa", [(-10.0, 2.8627), (0.0, 6.1078), (10.0, 12.272), (20.0, 23.373), (30.0, 42.430)])
def test_saturation_vapour_pressure_against_table(t_c, e_hpa):
    # Smithsonian Meteorological Tables (from memory).  Bolton quotes eq. 10 within 0.1 % of
    # Wexler's values; with both numbers from memory the tolerance is 0.3 % (a wrong coefficient
    # of the formula would be off by far more)
    assert float(M.saturation_vapour_pressure(T0C + t_c)) / 100.0 == pytest.approx(e_hpa, rel=3e-3)


def test_dewpoint_inverts_the_saturation_curve_and_rh_is_one_at_saturation():
    t = np.linspace(230.0, 310.0, 41)
    # exact inverse (algebra of Bolton eq. 10)
    np.testing.assert_allclose(M.dewpoint(M.saturation_vapour_pressure(t)), t, rtol=0, atol=1e-9)
    p = np.full_like(t, 85000.0)
    np.testing.assert_allclose(M.relative_humidity(t, p, q_sat(t, p)), 1.0, rtol=1e-12)


def test_humidity_identities_against_sympy():
    e, p, eps = sp.symbols("e p epsilon", positive=True)
    r = eps * e / (p - e)  # definition of the mixing ratio (Wallace & Hobbs 2006, §3.5)
    q = sp.simplify(r / (1 + r))  # specific humidity from the mixing ratio
    q_num = sp.lambdify((e, p), q.subs(eps, EPS))
    e_of_q = sp.solve(sp.Eq(sp.Symbol("qq"), q), e)[0]
    e_num = sp.lambdify((sp.Symbol("qq"), p), e_of_q.subs(eps, EPS))
    ev, pv = np.array([300.0, 1200.0, 3500.0]), np.array([50000.0, 85000.0, 100000.0])
    np.testing.assert_allclose(M.specific_humidity_from_vapour_pressure(ev, pv), q_num(ev, pv), rtol=1e-13)
    qv = np.asarray(M.specific_humidity_from_vapour_pressure(ev, pv))
    np.testing.assert_allclose(M.vapour_pressure(pv, qv), e_num(qv, pv), rtol=1e-13)
    np.testing.assert_allclose(M.specific_humidity_from_mixing_ratio(M.mixing_ratio(qv)), qv, rtol=1e-14)
    np.testing.assert_allclose(M.saturation_mixing_ratio(280.0, pv), M.mixing_ratio(M.saturation_specific_humidity(280.0, pv)),
                               rtol=1e-13)


# ----------------------------------------------------------------------------------- LCL
PAIRS = [(303.15, 293.15, 1e5), (293.15, 283.15, 9e4), (283.15, 263.15, 8e4), (300.15, 298.15, 1e5), (273.15, 253.15, 7e4)]


def air(t, td, p):
    """Specific humidity of air of dew point td at pressure p."""
    return float(M.specific_humidity_from_vapour_pressure(M.saturation_vapour_pressure(td), p))


@pytest.mark.parametrize("t, td, p", PAIRS)
def test_lcl_solves_its_defining_condition(t, td, p):
    q = air(t, td, p)
    tl, pl = (float(v) for v in M.lifting_condensation_level(t, p, q))
    r = q / (1 - q)
    # scipy brentq: the dry-adiabatic parcel temperature where r_s(T, p(T)) equals its mixing ratio
    root = brentq(lambda tt: float(M.saturation_mixing_ratio(tt, p * (tt / t) ** (1 / KAPPA))) - r, 150.0, t, xtol=1e-12)
    assert tl == pytest.approx(root, abs=1e-8)
    assert pl == pytest.approx(p * (root / t) ** (1 / KAPPA), rel=1e-10)


@pytest.mark.parametrize("t, td, p", PAIRS)
def test_lcl_against_bolton_closed_forms(t, td, p):
    tl = float(M.lifting_condensation_level(t, p, air(t, td, p))[0])
    e_hpa = float(M.saturation_vapour_pressure(td)) / 100.0
    rh = float(M.saturation_vapour_pressure(td) / M.saturation_vapour_pressure(t))
    eq15 = 1.0 / (1.0 / (td - 56.0) + np.log(t / td) / 800.0) + 56.0  # Bolton eq. 15
    eq21 = 1.0 / (1.0 / (t - 55.0) - np.log(rh) / 2840.0) + 55.0  # Bolton eq. 21
    eq22 = 2840.0 / (3.5 * np.log(t) - np.log(e_hpa) - 4.805) + 55.0  # Bolton eq. 22
    for approx in (eq15, eq21, eq22):
        assert abs(tl - approx) < 0.1  # Bolton: his closed forms are good to about 0.1 K (from memory)


def romps_lcl(p, t, rh):
    """Romps (2017) exact LCL, his constants (from memory); returns T_L, p_L and his e_s function."""
    ttrip, ptrip, e0v = 273.16, 611.65, 2.3740e6
    rgasa, rgasv, cva, cvv, cvl = 287.04, 461.0, 719.0, 1418.0, 4119.0
    cpa, cpv = cva + rgasa, cvv + rgasv

    def pvstar(tt):
        return ptrip * (tt / ttrip) ** ((cpv - cvl) / rgasv) * np.exp((e0v - (cvv - cvl) * ttrip) / rgasv * (1 / ttrip - 1 / tt))

    pv = rh * pvstar(t)
    qv = rgasa * pv / (rgasv * p + pv * (rgasa - rgasv))
    cpm, rm = (1 - qv) * cpa + qv * cpv, (1 - qv) * rgasa + qv * rgasv
    a = cpm / rm + (cvl - cpv) / rgasv
    b = -(e0v - (cvv - cvl) * ttrip) / (rgasv * t)
    c = b / a
    tl = c * (lambertw(rh ** (1 / a) * c * np.exp(c), k=-1).real) ** (-1) * t
    return tl, p * (tl / t) ** (cpm / rm), pvstar, pv


@pytest.mark.parametrize("t, td, p", PAIRS)
def test_lcl_against_romps_exact_lambert_w(t, td, p):
    e = float(M.saturation_vapour_pressure(td))
    tl_r, pl_r, pvstar, pv = romps_lcl(p, t, e / romps_lcl(p, t, 1.0)[2](t))
    # the recalled formula solves its own defining condition: e_s(T_L) = e (p_L / p)
    assert pvstar(tl_r) == pytest.approx(pv * pl_r / p, rel=1e-9)
    tl, pl = (float(v) for v in M.lifting_condensation_level(t, p, air(t, td, p)))
    # same vapour pressure, other saturation curve and heat capacities: within 0.1 K and 2 hPa
    assert abs(tl - tl_r) < 0.1
    assert abs(pl - pl_r) < 200.0


def test_lcl_of_saturated_and_of_dry_air():
    p = 90000.0
    tl, pl = M.lifting_condensation_level(290.0, p, float(q_sat(290.0, p)))
    assert float(tl) == pytest.approx(290.0, abs=1e-9) and float(pl) == pytest.approx(p, rel=1e-9)  # at its LCL already
    tl, pl = M.lifting_condensation_level(290.0, p, 0.0)
    assert np.isnan(tl) and np.isnan(pl)  # dry air never saturates


# ----------------------------------------------------------------------------- θe, adiabat
@pytest.mark.parametrize("t, p, rh", [(303.15, 1e5, 0.8), (293.15, 9e4, 0.5), (283.15, 8e4, 0.9), (270.0, 6e4, 0.7)])
def test_theta_e_bolton_39_against_43(t, p, rh):
    q = rh * float(q_sat(t, p))
    r, e = 1000 * q / (1 - q), float(M.vapour_pressure(p, q)) / 100.0
    tl = 2840 / (3.5 * np.log(t) - np.log(e) - 4.805) + 55  # Bolton eq. 22
    eq43 = t * (1000 / (p / 100)) ** (0.2854 * (1 - 0.28e-3 * r)) * np.exp((3.376 / tl - 0.00254) * r * (1 + 0.81e-3 * r))
    assert float(M.equivalent_potential_temperature(t, p, q)) == pytest.approx(eq43, abs=0.1)  # Bolton: both good to ~0.1 K
    # dry air: θ with Bolton's κ = 0.2854 (eq. 39 with r = 0)
    assert float(M.equivalent_potential_temperature(t, p, 0.0)) == pytest.approx(t * (1e5 / p) ** 0.2854, rel=1e-14)


def test_moist_adiabat_rk4_against_solve_ivp_and_fourth_order():
    t0, p0, p1 = np.array([300.0, 290.0, 275.0]), 1e5, 2e4

    def rhs(s, y):
        return [float(M.pseudo_adiabatic_lapse_rate(y[0], np.exp(s)))]

    ref = np.array([solve_ivp(rhs, (np.log(p0), np.log(p1)), [t], rtol=1e-12, atol=1e-10, method="DOP853").y[0, -1]
                    for t in t0])  # scipy high-accuracy integration of the same ODE
    np.testing.assert_allclose(M.moist_adiabat(t0, p0, p1), ref, atol=1e-6)
    err = [np.abs(np.asarray(M.moist_adiabat(t0, p0, p1, max_step=h)) - ref).max() for h in (0.4, 0.2, 0.1)]
    orders = np.log2(np.array(err[:-1]) / np.array(err[1:]))
    assert np.all(orders > 3.6), orders  # classical RK4: fourth order


def test_moist_adiabat_conserves_theta_e_and_published_value():
    for t0 in (273.15, 283.15, 293.15, 298.15, 303.15):
        th = float(M.equivalent_potential_temperature(t0, 1e5, float(q_sat(t0, 1e5))))
        for p in (5e4, 3e4):
            t = float(M.moist_adiabat(t0, 1e5, p))
            # scipy brentq: the saturated temperature at p with Bolton's θe (eq. 39) of the start
            ref = brentq(lambda tt: float(M.equivalent_potential_temperature(tt, p, float(q_sat(tt, p)))) - th, 150.0, 320.0)
            assert abs(t - ref) < 0.15
    # pseudo-adiabat of θw = 20 °C at 500 hPa: about −9 °C on thermodynamic diagrams (from memory)
    assert float(M.moist_adiabat(293.15, 1e5, 5e4)) - T0C == pytest.approx(-9.0, abs=1.0)


def test_lapse_rate_dry_limit():
    # no vapour at 120 K: the pseudo-adiabat is the dry adiabat, dT/dln p = κ T (Poisson's equation)
    assert float(M.pseudo_adiabatic_lapse_rate(120.0, 50000.0)) == pytest.approx(KAPPA * 120.0, rel=1e-12)


def test_adiabat_table_matches_direct_integration():
    rng = np.random.default_rng(3)
    lab, p = rng.uniform(250.0, 305.0, 400), rng.uniform(15000.0, 105000.0, 400)
    table = M._adiabats()
    direct = np.asarray(M.moist_adiabat(lab, 1e5, p))  # the RK4 integrator itself, from 1000 hPa
    assert np.abs(table.temperature(lab, np.log(p)) - direct).max() < 3e-3
    assert np.abs(table.label(direct, np.log(p)) - lab).max() < 3e-3
    # θw of saturated air at 1000 hPa is its temperature (definition)
    t = np.array([275.0, 290.0, 300.0])
    np.testing.assert_allclose(M.wet_bulb_potential_temperature(t, 1e5, q_sat(t, 1e5)), t, atol=2e-3)


def test_wet_bulb_potential_temperature_is_nan_where_it_is_undefined():
    # a missing input, or air with no vapour (no LCL), gives NaN beside the good values (it used to raise
    # IndexError from the adiabat table); the good value is unchanged by its neighbours
    t = np.array([290.0, np.nan, 280.0, 285.0])
    p = np.array([9e4, 9e4, 8e4, np.nan])
    q = np.array([0.01, 0.01, 0.0, 0.01])
    out = np.asarray(M.wet_bulb_potential_temperature(t, p, q))
    assert np.isnan(out[1:]).all()
    assert out[0] == np.asarray(M.wet_bulb_potential_temperature(t[:1], p[:1], q[:1]))[0]


# ----------------------------------------------------------------------- parcel diagnostics
def analytic_case(nz, x1=0.25, x2=1.2, amp=25.0, t0=300.0, p0=1e5):
    """Dry parcel, B(x) = amp·x(x + x1)(x + x2) with x = ln(p/p0): CIN below x = −x1, CAPE up to −x2."""
    p = p0 * np.exp(np.linspace(0.0, -1.6, nz))
    x = np.log(p / p0)
    t_env = t0 * np.exp(KAPPA * x) - amp * x * (x + x1) * (x + x2)
    return p, t_env


def test_cape_cin_of_analytic_profile_second_order():
    xs = sp.Symbol("x")
    b = 25.0 * xs * (xs + 0.25) * (xs + 1.2)
    cin_exact = float(R * sp.integrate(b, (xs, -0.25, 0)))  # sympy: −R_d ∫ B d ln p from the start to the LFC
    cape_exact = float(R * sp.integrate(b, (xs, -1.2, -0.25)))  # and from the LFC to the EL
    errs = []
    for nz in (41, 81, 161, 321):
        p, t = analytic_case(nz)
        sb = diagnose(t, np.zeros(nz), p).sel(parcel="surface_based")
        errs.append((abs(float(sb.cape) - cape_exact), abs(float(sb.cin) - cin_exact)))
        if nz == 321:
            assert float(sb.lfc_pressure) == pytest.approx(1e3 * np.exp(-0.25), rel=1e-4)
            assert float(sb.el_pressure) == pytest.approx(1e3 * np.exp(-1.2), rel=1e-4)
            assert np.isnan(float(sb.lcl_pressure))  # dry parcel: no LCL
    errs = np.array(errs)
    assert cin_exact < 0 < cape_exact  # CIN negative by convention
    assert errs[-1, 0] < 1e-3 * cape_exact and errs[-1, 1] < 1e-3 * abs(cin_exact)
    orders = np.log2(errs[:-1] / errs[1:])
    assert np.all(orders > 1.8), orders  # linear buoyancy between levels: second order


def smooth_moist_environment(p):
    """A conditionally unstable environment (analytic): a capping warm layer near 880 hPa, a smooth
    205 K tropopause, relative humidity 85 % at the surface falling to 30 %."""
    x = np.log(p / 1e5)
    t = 302.0 * np.exp(0.19 * x) + 1.5 * np.sin(3.0 * x) + 4.0 * np.exp(-((x + 0.12) / 0.06) ** 2)
    t = 0.5 * (t + 205.0) + 0.5 * np.sqrt((t - 205.0) ** 2 + 4.0)
    rh = 0.3 + 0.55 * np.exp(4.0 * x)
    return t, np.asarray(M.specific_humidity_from_vapour_pressure(rh * M.saturation_vapour_pressure(t), p))


def reference_moist_cape(p_top=1e4):
    """High-accuracy CAPE/CIN of the surface parcel of smooth_moist_environment (quad with the roots)."""
    t0, q0 = (v[0] for v in smooth_moist_environment(np.array([1e5])))
    tl, pl = (float(v) for v in M.lifting_condensation_level(t0, 1e5, q0))
    # the pseudo-adiabat above the LCL: scipy solve_ivp (DOP853) with dense output
    moist = solve_ivp(lambda s, y: [float(M.pseudo_adiabatic_lapse_rate(y[0], np.exp(s)))], (np.log(pl), np.log(p_top)),
                      [tl], method="DOP853", rtol=1e-11, atol=1e-9, dense_output=True).sol

    def buoy(s):
        p = np.exp(s)
        te, qe = smooth_moist_environment(np.array([p]))
        if p >= pl:
            tp, qp = t0 * (p / 1e5) ** KAPPA, q0
        else:
            tp = float(moist(s)[0])
            qp = float(q_sat(tp, p))
        return tp * (1 + qp * (1 / EPS - 1)) - te[0] * (1 + qe[0] * (1 / EPS - 1))

    s = np.linspace(np.log(1e5), np.log(p_top), 400)
    bs = np.array([buoy(v) for v in s])
    roots = [brentq(buoy, s[i], s[i + 1], xtol=1e-13) for i in range(len(s) - 1) if bs[i] * bs[i + 1] < 0]
    s_lfc, s_el = roots[0], roots[-1]
    opts = {"epsabs": 1e-9, "limit": 200, "points": [np.log(pl)]}
    cin = R * quad(buoy, s_lfc, np.log(1e5), **opts)[0] if s_lfc < np.log(pl) else None
    cape = -R * quad(buoy, s_lfc, s_el, limit=200, epsabs=1e-9)[0]
    return cape, cin, np.exp(s_lfc), np.exp(s_el)


def test_moist_parcel_cape_converges_to_high_accuracy_reference():
    cape_ref, cin_ref, p_lfc, p_el = reference_moist_cape()
    assert cape_ref > 500.0 and cin_ref < 0.0
    errs = []
    for nz in (21, 41, 81, 161):
        p = np.exp(np.linspace(np.log(1e5), np.log(1e4), nz))
        t, q = smooth_moist_environment(p)
        sb = diagnose(t, q, p).sel(parcel="surface_based")
        errs.append((abs(float(sb.cape) - cape_ref), abs(float(sb.cin) - cin_ref)))
    errs = np.array(errs)
    assert errs[-1, 0] < 2e-3 * cape_ref and errs[-1, 1] < 2e-2 * abs(cin_ref)
    assert float(sb.lfc_pressure) == pytest.approx(p_lfc / 100, rel=1e-3)
    assert float(sb.el_pressure) == pytest.approx(p_el / 100, rel=1e-3)
    orders = np.log2(errs[:-1, 0] / errs[1:, 0])
    assert np.all(orders > 1.6), orders  # scipy quad reference; second order in the level spacing


def test_stable_column_has_no_lfc():
    p = np.linspace(1e5, 2e4, 17)
    t = np.full_like(p, 260.0)  # isothermal: absolutely stable
    ds = diagnose(t, 0.5 * q_sat(t, p), p)
    assert np.all(ds.cape.values == 0.0)
    assert np.all(np.isnan(ds.cin.values)) and np.all(np.isnan(ds.lfc_pressure.values))


def test_most_unstable_parcel_is_the_elevated_moist_layer():
    p = np.linspace(1e5, 1e4, 37)
    t, q = smooth_moist_environment(p)
    q = 0.3 * q_sat(t, p)
    q[4:8] = 0.95 * q_sat(t[4:8], p[4:8])  # moist layer 900–825 hPa above dry surface air
    ds = diagnose(t, q, p)
    lte = np.log(np.asarray(M.equivalent_potential_temperature(t, p, q)))
    within = p >= p[0] - 30000.0
    assert float(ds.parcel_pressure.sel(parcel="most_unstable")) == pytest.approx(p[within][np.argmax(lte[within])] / 100)
    assert float(ds.cape.sel(parcel="most_unstable")) > float(ds.cape.sel(parcel="surface_based"))


def test_moist_layer_depth_exact_for_log_linear_humidity():
    p = np.linspace(1e5, 3e4, 15)
    t = 290.0 * (p / 1e5) ** 0.19
    ln_rh = np.log(0.95) + (np.log(0.5) - np.log(0.95)) * np.log(p / 1e5) / np.log(0.3)
    ds = diagnose(t, M.specific_humidity_from_vapour_pressure(np.exp(ln_rh) * M.saturation_vapour_pressure(t), p), p)
    # ln RH linear in ln p: reaches ln 0.8 at a ln p known in closed form (the interpolation is exact)
    s80 = np.log(1e5) + (np.log(0.8) - np.log(0.95)) / (np.log(0.5) - np.log(0.95)) * np.log(0.3)
    assert float(ds.moist_layer_depth) == pytest.approx((1e5 - np.exp(s80)) / 100, rel=1e-9)
    ds = diagnose(t, 0.5 * q_sat(t, p), p)
    assert float(ds.moist_layer_depth) == 0.0  # drier than 80 % at the lowest level


def test_lapse_rate_of_constant_lapse_atmosphere_second_order():
    gamma = 6.5e-3  # K m-1
    errs = []
    for nz in (15, 29, 57, 113):  # 850 and 500 hPa are levels of every grid
        p = np.linspace(1e5, 3e4, nz)
        t = 288.15 * (p / 1e5) ** (R * gamma / G)  # hydrostatic constant-lapse-rate atmosphere, dry
        errs.append(abs(float(diagnose(t, np.zeros(nz), p).lapse_rate_850_500) - 6.5))
    assert errs[-1] < 1e-3
    orders = np.log2(np.array(errs[:-1]) / np.array(errs[1:]))
    assert np.all(orders > 1.8), orders  # trapezoid of T_v in ln p: second order


def test_lcl_height_in_a_well_mixed_layer():
    p = np.linspace(1e5, 5e4, 201)
    theta, q0 = 300.0, 0.012
    t = theta * (p / 1e5) ** KAPPA
    t = np.where(p > 7e4, t, t[np.argmin(np.abs(p - 7e4))] * (p / 7e4) ** 0.12)  # stable above 700 hPa
    p_lcl = float(M.lifting_condensation_level(theta, 1e5, q0)[1])
    q = np.where(p >= p_lcl, q0, 0.5 * q_sat(t, p))  # well mixed up to the LCL
    sb = diagnose(t, q, p).sel(parcel="surface_based")
    tl = float(sb.lcl_temperature)
    # hypsometric height of a dry adiabat with constant q (T_v = T (1 + c q)): z = (c_p/g)(1 + c q)(T0 − T_L)
    z = CP / G * (1 + q0 * (1 / EPS - 1)) * (theta - tl)
    assert float(sb.lcl_height) == pytest.approx(z, rel=2e-4)


# ------------------------------------------------------------------------------- bad input
def test_missing_humidity_refused_clearly():
    p = np.linspace(1e5, 2e4, 9)
    t = column(280.0 * (p / 1e5) ** 0.19, p, "temperature", "K")
    with pytest.raises(MissingVariableError, match="specific humidity.*still run"):
        M.column_diagnostics(t)
    with pytest.raises(MissingVariableError, match="specific humidity"):
        M.column_diagnostics(xr.Dataset({"temperature": t}))


def test_negative_and_supersaturated_humidity_clipped_and_counted():
    p = np.linspace(1e5, 2e4, 9)
    t = 290.0 * (p / 1e5) ** 0.19
    q = 0.5 * q_sat(t, p)
    q[1], q[5] = -1e-4, -2e-5
    q[2], q[3], q[4] = 2 * q_sat(t[2:5], p[2:5])
    with pytest.warns(DataQualityWarning, match="2 negative.*3 supersaturated"):
        ds = diagnose(t, q, p)
    q_clip = q.copy()
    q_clip[[1, 5]] = 0.0
    q_clip[2:5] = q_sat(t[2:5], p[2:5])
    ref = diagnose(t, q_clip, p)
    xr.testing.assert_allclose(ds, ref, rtol=1e-12)


def test_nan_below_ground_starts_at_the_lowest_valid_level():
    p = np.linspace(1e5, 2e4, 33)
    t, q = smooth_moist_environment(p)
    full = diagnose(t[3:], q[3:], p[3:])
    t_nan, q_nan = t.copy(), q.copy()
    t_nan[:3] = np.nan
    q_nan[:3] = np.nan
    below = diagnose(t_nan, q_nan, p)
    assert float(below.parcel_pressure.sel(parcel="surface_based")) == pytest.approx(p[3] / 100)
    for name in ("cape", "cin", "lcl_pressure", "lcl_height", "lfc_pressure", "moist_layer_depth"):
        np.testing.assert_allclose(below[name].values, full[name].values, rtol=1e-12, err_msg=name)


def test_levels_must_be_decreasing_pressures():
    p = np.linspace(2e4, 1e5, 9)
    with pytest.raises(GridError, match="strictly decreasing"):
        diagnose(np.full(9, 260.0), np.full(9, 1e-3), p)


def test_lazy_on_dask_and_equal_to_numpy(no_compute):
    p = np.linspace(1e5, 2e4, 17)
    t1, q1 = smooth_moist_environment(p)
    shape = (3, 4)
    t = xr.DataArray(np.broadcast_to(t1[:, None, None], (17,) + shape) + np.arange(12.0).reshape(shape) * 0.3,
                     coords={"level": p}, dims=("level", "y", "x"), attrs={"units": "K"})
    q = xr.DataArray(np.broadcast_to(q1[:, None, None], (17,) + shape).copy(), coords={"level": p}, dims=("level", "y", "x"),
                     attrs={"units": "kg kg-1"})
    lazy = M.column_diagnostics(t.chunk({"y": 2, "level": 5}), q.chunk({"y": 2, "level": 5}))
    assert lazy.cape.chunks is not None and lazy.cape.dims == ("parcel", "y", "x")
    theta_e = M.equivalent_potential_temperature(t.chunk({"y": 2}), t.level, q.chunk({"y": 2}))
    assert theta_e.chunks is not None
    import dask

    with dask.config.set(scheduler="synchronous"):
        xr.testing.assert_allclose(lazy.compute(), M.column_diagnostics(t, q))


def test_blocks_on_threads_equal_one_thread_and_count_clipping_once(monkeypatch):
    # The blocks of columns of an in-memory call run on threads; the result must not depend on
    # it (each block is independent) and the clipping warning must count every block once.
    p = np.linspace(1e5, 2e4, 17)
    t1, q1 = smooth_moist_environment(p)
    n = 2 * M._BLOCK + 7  # three blocks, the last partial
    rng = np.random.default_rng(3)
    t = t1[:, None] + rng.normal(0.0, 0.5, (17, n))
    q = q1[:, None] * rng.uniform(0.5, 1.2, (17, n))
    q[0, :5] = -1e-5
    dims = ("level", "column")
    tt = xr.DataArray(t, coords={"level": p}, dims=dims, attrs={"units": "K"})
    qq = xr.DataArray(q, coords={"level": p}, dims=dims, attrs={"units": "kg kg-1"})
    runs = {}
    for threads in (1, 2):
        monkeypatch.setattr(column_blocks, "block_threads", lambda threads=threads: threads)
        with pytest.warns(DataQualityWarning, match="5 negative") as rec:
            runs[threads] = M.column_diagnostics(tt, qq)
        assert len([w for w in rec if issubclass(w.category, DataQualityWarning)]) == 1
    xr.testing.assert_identical(runs[1], runs[2])
    # and the same as the columns one by one (no state shared between columns)
    for c in (5, M._BLOCK - 1, M._BLOCK, n - 1):
        one = M.column_diagnostics(tt.isel(column=[c]), qq.isel(column=[c]))
        xr.testing.assert_identical(one.isel(column=0), runs[2].isel(column=c))


def test_thread_count_from_the_environment(monkeypatch):
    monkeypatch.setenv(M.THREADS_ENV, "3")
    assert M._block_threads() == 3
    monkeypatch.delenv(M.THREADS_ENV)
    assert 1 <= M._block_threads() <= 8
    for bad in ("0", "two", "-1"):
        monkeypatch.setenv(M.THREADS_ENV, bad)
        with pytest.raises(InputDataError, match="QGFORCE_NUM_THREADS must be a whole number"):
            M._block_threads()
