"""QG forcing terms against exact answers.

References used (each check names its own beside it):
- Petterssen, S., 1936: Contribution to the theory of frontogenesis, Geofys. Publ. 11(6): the
  kinematic form F = ½|∇θ|(D cos 2β − δ) (science.md), exact on linear fields because
  second-order differences are exact on them;
- Hoskins, Draghici & Davies 1978, QJRMS 104, 31–38, and Holton & Hakim 2013, An Introduction to
  Dynamic Meteorology, 5th ed., §6.4: the Q-vector and the equality of the traditional and Q-vector
  right-hand sides on a β-plane with V_g from f0;
- Keyser, Reeder & Reed 1988, Mon. Wea. Rev. 116, 762–780: Q = Q_n + Q_s, Q_n ∥ ∇θ, Q_s ⊥ ∇θ;
- Wallace & Hobbs 2006, Atmospheric Science, 2nd ed., eq. 3.29: the hypsometric equation;
- sympy: exact fields of analytic baroclinic waves on a β-plane and on the sphere (spherical
  operators of science.md; velocity gradient with metric terms, Batchelor 1967, appendix 2).
Grids are small (≤ 97 × 97 × 9).
"""

import warnings

import dask.array as dsa
import numpy as np
import pytest
import sympy as sp
import xarray as xr

import qgforce.forcing as F
from qgforce.calculus import gradient
from qgforce.constants import DRY_AIR_GAS_CONSTANT as RD
from qgforce.constants import EARTH_ANGULAR_VELOCITY as OMEGA
from qgforce.constants import EARTH_RADIUS as A
from qgforce.constants import GRAVITY, KAPPA
from qgforce.constants import REFERENCE_PRESSURE as P0
from qgforce.errors import EquatorialMaskWarning, GridError, MissingVariableError, QGForceError, UnitsError
from qgforce.grid import Grid

F0_45 = 2 * OMEGA * np.sin(np.pi / 4)


# ============================================================================ dataset builders
def cartesian_ds(xs, ys, ps, fields, rotation_deg=0.0):
    """A Cartesian (map factor 1) grid: lat = 45° + y/a, lon = x/(a cos 45°) (degrees).

    ``fields`` maps names to arrays (level, y, x) or (time, level, y, x).  ``rotation_deg``
    turns the grid x-axis anticlockwise from east (for the rotated-grid beta check).
    """
    X, Y = np.meshgrid(xs, ys)
    r = np.deg2rad(rotation_deg)
    east, north = X * np.cos(r) - Y * np.sin(r), X * np.sin(r) + Y * np.cos(r)
    lat = 45.0 + np.rad2deg(north / A)
    lon = np.rad2deg(east / (A * np.cos(np.pi / 4)))
    units = {"temperature": "K", "geopotential": "m2 s-2", "u": "m s-1", "v": "m s-1"}
    data = {}
    for k, a in fields.items():
        dims = ("level", "y", "x") if a.ndim == 3 else ("time", "level", "y", "x")
        attrs = {"units": units[k]}
        if k in "uv":
            attrs["wind_relative_to"] = "grid"
        data[k] = (dims, a, attrs)
    coords = {"level": np.asarray(ps, float), "y": ys, "x": xs, "latitude": (("y", "x"), lat),
              "longitude": (("y", "x"), lon), "map_factor": (("y", "x"), np.ones_like(X))}
    if any(a.ndim == 4 for a in fields.values()):
        coords["time"] = np.arange(next(a for a in fields.values() if a.ndim == 4).shape[0])
    return xr.Dataset(data, coords=coords)


def latlon_ds(lat, lon, ps, fields):
    units = {"temperature": "K", "geopotential": "m2 s-2", "u": "m s-1", "v": "m s-1"}
    data = {k: (("level", "latitude", "longitude"), a, {"units": units[k]}) for k, a in fields.items()}
    return xr.Dataset(data, coords={"level": np.asarray(ps, float), "latitude": lat, "longitude": lon})


def orders(errors):
    e = np.asarray(errors)
    return np.log2(e[:-1] / e[1:])


def linear_level_fields(xs, ys, ps, theta_of_xy, u_of_xy, v_of_xy):
    """T from a θ field that is linear on every level; u, v given functions of (x, y)."""
    X, Y = np.meshgrid(xs, ys)
    shape = (len(ps), len(ys), len(xs))
    c = (np.asarray(ps)[:, None, None] / P0) ** KAPPA
    T = theta_of_xy(X, Y)[None] * c
    u = np.broadcast_to(u_of_xy(X, Y) * np.ones_like(X), shape).copy()
    v = np.broadcast_to(v_of_xy(X, Y) * np.ones_like(X), shape).copy()
    return {"temperature": T, "u": u, "v": v}


XS = np.linspace(-1.0e6, 1.0e6, 21)
YS = np.linspace(-1.0e6, 1.0e6, 21)
PS2 = [85000.0, 50000.0]
GRAD = 1.0e-5  # |∇θ| [K m-1], 1 K per 100 km
DEF = 2.0e-5  # total deformation [s-1]


# ============================================================================ Petterssen frontogenesis
@pytest.mark.parametrize("beta_deg", [0.0, 30.0, 45.0, 60.0, 90.0])
def test_frontogenesis_pure_deformation_exact(beta_deg):
    # Petterssen (1936), kinematic form (science.md): F = ½|∇θ| D cos 2β for pure deformation.
    alpha0 = np.deg2rad(20.0)  # axis of dilatation, anticlockwise from x
    chi = alpha0 + np.deg2rad(beta_deg)  # direction of the isentropes
    theta = lambda X, Y: 300.0 + GRAD * (-np.sin(chi) * X + np.cos(chi) * Y)  # noqa: E731
    u = lambda X, Y: 0.5 * DEF * (np.cos(2 * alpha0) * X + np.sin(2 * alpha0) * Y) + 7.0  # noqa: E731
    v = lambda X, Y: 0.5 * DEF * (np.sin(2 * alpha0) * X - np.cos(2 * alpha0) * Y) - 3.0  # noqa: E731
    ds = cartesian_ds(XS, YS, PS2, linear_level_fields(XS, YS, PS2, theta, u, v))
    out = F.frontogenesis(ds)
    scale = 0.5 * GRAD * DEF
    expected = scale * np.cos(2 * np.deg2rad(beta_deg))
    np.testing.assert_allclose(out.frontogenesis.values, expected, rtol=0, atol=1e-9 * scale)
    np.testing.assert_allclose(out.frontogenesis_deformation.values, expected, rtol=0, atol=1e-9 * scale)
    np.testing.assert_allclose(out.frontogenesis_divergence.values, 0.0, atol=1e-9 * scale)
    np.testing.assert_allclose(out.potential_temperature_gradient.values, GRAD, rtol=1e-9)
    # the angle from the dilatation axis to the isentropes, lines defined modulo 180°
    diff = (out.isentrope_dilatation_angle.values - beta_deg + 90.0) % 180.0 - 90.0
    np.testing.assert_allclose(diff, 0.0, atol=1e-6)


def test_frontogenesis_pure_convergence_exact():
    # Petterssen (1936): pure divergence δ gives F = −½|∇θ|δ (convergence δ < 0 is frontogenetic).
    delta = -1.5e-5
    chi = np.deg2rad(35.0)
    theta = lambda X, Y: 290.0 + GRAD * (-np.sin(chi) * X + np.cos(chi) * Y)  # noqa: E731
    ds = cartesian_ds(XS, YS, PS2, linear_level_fields(XS, YS, PS2, theta, lambda X, Y: 0.5 * delta * X,
                                                        lambda X, Y: 0.5 * delta * Y))
    out = F.frontogenesis(ds)
    expected = -0.5 * GRAD * delta
    assert expected > 0
    tol = 1e-9 * abs(expected)
    np.testing.assert_allclose(out.frontogenesis.values, expected, rtol=0, atol=tol)
    np.testing.assert_allclose(out.frontogenesis_divergence.values, expected, rtol=0, atol=tol)
    np.testing.assert_allclose(out.frontogenesis_deformation.values, 0.0, atol=tol)


@pytest.mark.parametrize("flow", ["rotation", "translation"])
def test_frontogenesis_rotation_and_translation_zero(flow):
    # Petterssen (1936): solid rotation and uniform translation neither tighten nor relax ∇θ.
    w = 3.0e-5
    u, v = {"rotation": (lambda X, Y: -w * Y, lambda X, Y: w * X),
            "translation": (lambda X, Y: 12.0 + 0 * X, lambda X, Y: -5.0 + 0 * X)}[flow]
    theta = lambda X, Y: 300.0 + GRAD * (0.6 * X - 0.8 * Y)  # noqa: E731
    ds = cartesian_ds(XS, YS, PS2, linear_level_fields(XS, YS, PS2, theta, u, v))
    out = F.frontogenesis(ds)
    scale = 0.5 * GRAD * w
    for name in ("frontogenesis", "frontogenesis_divergence", "frontogenesis_deformation"):
        assert np.abs(out[name].values).max() < 1e-9 * scale, name


def test_frontogenesis_display_units():
    # definition of the unit (common practice): 1 K m-1 s-1 = 1e5 K (100 km)-1 × 10800 (3 h)-1
    da = xr.DataArray([1.0e-9, -2.0e-10], dims="x", attrs={"units": "K m-1 s-1"}, name="frontogenesis")
    out = F.to_display_units(da)
    np.testing.assert_allclose(out.values, np.array([1.0e-9, -2.0e-10]) * 1.0e5 * 3 * 3600.0, rtol=1e-15)
    assert out.attrs["units"] == "K (100 km)-1 (3 h)-1"
    with pytest.raises(UnitsError, match="K m-1 s-1"):
        F.to_display_units(da.assign_attrs(units="K (100 km)-1 (3 h)-1"))


# ============================================================================ Q-vectors: exact cases
def geostrophic_ds(phi_of_xy, T_of_xy, ps=PS2, xs=XS, ys=YS):
    X, Y = np.meshgrid(xs, ys)
    nz = len(ps)
    phi = np.stack([phi_of_xy(X, Y) * np.ones_like(X)] * nz)
    T = np.stack([T_of_xy(X, Y) * np.ones_like(X)] * nz)
    return cartesian_ds(xs, ys, ps, {"geopotential": phi, "temperature": T})


def test_q_vectors_zero_for_uniform_geostrophic_wind():
    # Hoskins, Draghici & Davies (1978): Q involves only the gradient of V_g; Φ linear → V_g uniform → Q = 0.
    ds = geostrophic_ds(lambda X, Y: 5.0e4 + F0_45 * (8.0 * X - 15.0 * Y), lambda X, Y: 280 + GRAD * (X + 2 * Y))
    q = F.q_vectors(ds, f0_latitude=45.0)
    scale = RD / 50000.0 * 1.0e-5 * GRAD  # R/p × a typical synoptic velocity gradient × |∇T|
    for name in ("q_vector_x", "q_vector_y", "q_vector_forcing"):
        assert np.abs(q[name].values).max() < 1e-8 * scale, name


def test_q_vectors_geostrophic_deformation_exact():
    # Hoskins, Draghici & Davies (1978) / Holton & Hakim (2013) §6.4: Q = −(R/p)(∂V_g/∂x·∇T, ∂V_g/∂y·∇T);
    # exact value derived with sympy for Φ = Φ0 − f0 (D/2) x y (u_g = (D/2) x, v_g = −(D/2) y) and linear T.
    xs_, ys_, ps_ = sp.symbols("x y p", real=True)
    f0, D, a_, b_ = sp.Float(F0_45), sp.Float(DEF), sp.Float(1.0e-5), sp.Float(-0.6e-5)
    phi = 5.0e4 - f0 * D / 2 * xs_ * ys_
    T = 270 + a_ * xs_ + b_ * ys_
    ug, vg = -sp.diff(phi, ys_) / f0, sp.diff(phi, xs_) / f0
    qx = -(RD / ps_) * (sp.diff(ug, xs_) * sp.diff(T, xs_) + sp.diff(vg, xs_) * sp.diff(T, ys_))
    qy = -(RD / ps_) * (sp.diff(ug, ys_) * sp.diff(T, xs_) + sp.diff(vg, ys_) * sp.diff(T, ys_))
    ds = geostrophic_ds(sp.lambdify((xs_, ys_), phi), sp.lambdify((xs_, ys_), T))
    q = F.q_vectors(ds, f0_latitude=45.0)
    for lev, p in enumerate(PS2):
        ex, ey = float(qx.subs(ps_, p)), float(qy.subs(ps_, p))
        assert abs(ex) > 0 and abs(ey) > 0
        np.testing.assert_allclose(q.q_vector_x.values[lev], ex, rtol=1e-8)
        np.testing.assert_allclose(q.q_vector_y.values[lev], ey, rtol=1e-8)
    # uniform Q: no divergence (exact for linear fields)
    assert np.abs(q.q_vector_forcing.values).max() < 1e-8 * abs(ex) / 1e6


def wavy_fields(X, Y):
    """A nonlinear geopotential and temperature pair (not symmetric under rotation)."""
    L = 1.0e6
    phi = 5.0e4 + 900.0 * np.exp(-((X - 0.2 * L) ** 2 + (Y + 0.1 * L) ** 2) / (0.5 * L) ** 2) + F0_45 * 10.0 * (
        0.3 * X - Y) + 300.0 * np.sin(2.1 * X / L + 0.7) * np.cos(1.3 * Y / L)
    T = 275.0 + 4.0 * np.tanh((0.8 * X + 0.4 * Y) / (0.6 * L)) + 1.5 * np.cos(1.7 * Y / L - 0.3 * X / L)
    return phi, T


def test_q_vectors_rotate_with_the_grid():
    # Hoskins, Draghici & Davies (1978): Q is a vector; rotating the fields by 90° rotates Q by 90°.
    # Fields rotated anticlockwise: f'(x, y) = f(y, −x); then Q'(x, y) = R Q(y, −x), R(a, b) = (−b, a).
    # On a square grid symmetric about 0 the discrete operators are exactly equivariant (to round-off).
    X, Y = np.meshgrid(XS, YS)
    phi, T = wavy_fields(X, Y)
    rot = lambda a: a[::-1, :].T  # noqa: E731  (a'[j, i] = a[n-1-i, j])
    ds = cartesian_ds(XS, YS, PS2, {"geopotential": np.stack([phi] * 2), "temperature": np.stack([T] * 2)})
    ds_r = cartesian_ds(XS, YS, PS2, {"geopotential": np.stack([rot(phi)] * 2), "temperature": np.stack([rot(T)] * 2)})
    q = F.q_vectors(ds, f0_latitude=45.0)
    qr = F.q_vectors(ds_r, f0_latitude=45.0)
    for lev in range(2):
        qx, qy = q.q_vector_x.values[lev], q.q_vector_y.values[lev]
        scale = np.abs(np.hypot(qx, qy)).max()
        np.testing.assert_allclose(qr.q_vector_x.values[lev], -rot(qy), atol=1e-10 * scale)
        np.testing.assert_allclose(qr.q_vector_y.values[lev], rot(qx), atol=1e-10 * scale)
        s = np.abs(q.q_vector_forcing.values[lev]).max()
        np.testing.assert_allclose(qr.q_vector_forcing.values[lev], rot(q.q_vector_forcing.values[lev]), atol=1e-9 * s)


def test_q_partition_sums_and_orientation():
    # Keyser, Reeder & Reed (1988): Q = Q_n + Q_s, Q_n ∥ ∇θ, Q_s ⊥ ∇θ; forcings add up likewise.
    X, Y = np.meshgrid(XS, YS)
    phi, _ = wavy_fields(X, Y)
    # T even in x and in y about the grid point (10, 10) at x = y = 0 (XS, YS exactly symmetric): a warm core
    # where the centred differences of T vanish exactly, plus structure elsewhere
    L = 1.0e6
    T = 275.0 + 2.0 * np.exp(-(X**2 + Y**2) / (3.0e5) ** 2) + 1.5 * np.cos(1.7 * X / L) * np.cos(1.3 * Y / L) \
        + 0.5 * np.cos(2.5 * X * Y / L**2) - 3.0 * (Y / L) ** 2
    ds = cartesian_ds(XS, YS, PS2, {"geopotential": np.stack([phi] * 2), "temperature": np.stack([T] * 2)})
    q = F.q_vectors(ds, f0_latitude=45.0)
    qx, qy = q.q_vector_x.values, q.q_vector_y.values
    scale = np.hypot(qx, qy).max()
    np.testing.assert_allclose(q.qn_x.values + q.qs_x.values, qx, atol=1e-13 * scale)
    np.testing.assert_allclose(q.qn_y.values + q.qs_y.values, qy, atol=1e-13 * scale)
    tx = np.gradient(T, XS, axis=1, edge_order=2)  # the same second-order differences (numpy), for n̂
    ty = np.gradient(T, YS, axis=0, edge_order=2)
    g = np.hypot(tx, ty)
    nx, ny = np.where(g > 0, tx / np.where(g > 0, g, 1), 0), np.where(g > 0, ty / np.where(g > 0, g, 1), 0)
    for lev in range(2):
        cross = q.qn_x.values[lev] * ny - q.qn_y.values[lev] * nx  # Q_n × n̂ = 0
        dot = q.qs_x.values[lev] * nx + q.qs_y.values[lev] * ny  # Q_s · n̂ = 0
        assert np.abs(cross).max() < 1e-12 * scale
        assert np.abs(dot).max() < 1e-12 * scale
    s = np.abs(q.q_vector_forcing.values).max()
    np.testing.assert_allclose(q.qn_forcing.values + q.qs_forcing.values, q.q_vector_forcing.values, atol=1e-12 * s)
    # at the warm core's centre ∇T = 0 exactly (symmetric centred differences): the partition is zero, finite
    assert g[10, 10] == 0.0
    for name in ("qn_x", "qn_y", "qs_x", "qs_y"):
        assert q[name].values[:, 10, 10].tolist() == [0.0, 0.0], name
        assert np.all(np.isfinite(q[name].values)), name


# ============================================================================ sympy: β-plane baroclinic wave
xs_s, ys_s, ps_s = sp.symbols("x y p", real=True)
lam_s, phi_s = sp.symbols("lam phi", real=True)


def _frontogenesis_expr(theta, dx, dy, ux, vx, uy, vy):
    gx, gy = dx(theta), dy(theta)
    return -(gx * (ux * gx + vx * gy) + gy * (uy * gx + vy * gy)) / sp.sqrt(gx**2 + gy**2)


@pytest.fixture(scope="module")
def beta_plane_case():
    """Exact fields (sympy) of Φ = Φ0(p) − f0 U(p) y + A(p) sin(kx + θ(p)) cos(ly), T hydrostatic.

    V_g from f0 = f(45°); f = 2Ω sin(45° + y/a) inside η (a β-plane with β = ∂f/∂y); a full wind
    V_g + a divergent ageostrophic part for the full-wind frontogenesis.
    """
    x, y, p = xs_s, ys_s, ps_s
    phi0 = sp.pi / 4
    f0 = 2 * OMEGA * sp.sin(phi0)
    f = 2 * OMEGA * sp.sin(phi0 + y / A)
    s = 1 - p / P0
    k, l = 2 * sp.pi / 3.0e6, 2 * sp.pi / 4.0e6
    L = sp.log(P0 / p)
    PHI = RD * (288 * L - 3 * L**2) - f0 * (10 + 30 * s) * y + 1500 * (1 + s) * sp.sin(k * x + 0.8 * s) * sp.cos(l * y)
    T = -(p / RD) * sp.diff(PHI, p)  # hydrostatic: ∂Φ/∂p = −R T / p
    dx, dy = (lambda e: sp.diff(e, x)), (lambda e: sp.diff(e, y))
    ug, vg = -dy(PHI) / f0, dx(PHI) / f0
    eta = (dx(dx(PHI)) + dy(dy(PHI))) / f0 + f
    AT = -(ug * dx(T) + vg * dy(T))
    AE = -(ug * dx(eta) + vg * dy(eta))
    qx = -(RD / p) * (dx(ug) * dx(T) + dx(vg) * dy(T))
    qy = -(RD / p) * (dy(ug) * dx(T) + dy(vg) * dy(T))
    ua = 3.0 * sp.cos(k * x) * sp.sin(l * y) * (1 - s)  # divergent ageostrophic wind (full-wind case)
    va = -2.0 * sp.sin(k * x + 0.3) * sp.cos(l * y)
    theta = T * (P0 / p) ** KAPPA
    exprs = {
        "temperature_advection": AT,
        "vorticity_advection": AE,
        "differential_vorticity_advection": -f0 * sp.diff(AE, p),
        "thermal_advection_term": -(RD / p) * (dx(dx(AT)) + dy(dy(AT))),
        "q_vector_x": qx,
        "q_vector_y": qy,
        "q_vector_forcing": -2 * (dx(qx) + dy(qy)),
        "beta_term": f0 * dy(f) * sp.diff(vg, p),
        "frontogenesis_geostrophic": _frontogenesis_expr(theta, dx, dy, dx(ug), dx(vg), dy(ug), dy(vg)),
        "frontogenesis_full": _frontogenesis_expr(theta, dx, dy, dx(ug + ua), dx(vg + va), dy(ug + ua), dy(vg + va)),
    }
    fns = {kk: sp.lambdify((x, y, p), e, "numpy") for kk, e in exprs.items()}
    inputs = {kk: sp.lambdify((x, y, p), e, "numpy") for kk, e in
              {"geopotential": PHI, "temperature": T, "u": ug + ua, "v": vg + va}.items()}

    def build(n, nz):
        xs, ys, ps = np.linspace(0.0, 4.0e6, n), np.linspace(-1.5e6, 1.5e6, n), np.linspace(90000.0, 30000.0, nz)
        P, Y, X = np.meshgrid(ps, ys, xs, indexing="ij")
        ds = cartesian_ds(xs, ys, ps, {kk: fn(X, Y, P) * np.ones_like(X) for kk, fn in inputs.items()})
        return ds, (X, Y, P)

    # the identity of the two right-hand sides, checked on the exact fields (sympy, numerically at points)
    identity = sp.lambdify((x, y, p), exprs["differential_vorticity_advection"] + exprs["thermal_advection_term"]
                           - exprs["q_vector_forcing"] - exprs["beta_term"], "numpy")
    return fns, build, identity


# fixed physical interior box shared by all refinements: a margin of 4 coarse spacings on each side, so that
# the points next to the open edges (one-sided differences nested inside further differences) are left out
REFINE = ((25, 3), (49, 5), (97, 9))


def interior(coord, n_coarse=REFINE[0][0], margin=4):
    h = (coord[-1] - coord[0]) / (n_coarse - 1)
    return (coord >= coord[0] + margin * h - 1e-6 * h) & (coord <= coord[-1] - margin * h + 1e-6 * h)


COMMON_LEVELS = (90000.0, 60000.0, 30000.0)  # levels shared by the three vertical refinements


def _errors(got: dict, fns: dict, coords, ds, ydim, xdim):
    X, Y, P = coords
    box = np.ix_(np.isin(ds.level.values, COMMON_LEVELS), interior(ds[ydim].values), interior(ds[xdim].values))
    out = {}
    for k, da in got.items():
        exact = fns[k](X, Y, P) * np.ones_like(X)
        out[k] = np.abs(da.values[box] - exact[box]).max() / np.abs(exact[box]).max()
    return out


def test_beta_plane_wave_second_order_against_sympy(beta_plane_case):
    # sympy exact fields; observed order ≥ 1.8 over three grids (horizontal and vertical spacing halved),
    # compared on a fixed interior box at the common levels (including the top and bottom levels).
    fns, build, _ = beta_plane_case
    errs = {}
    for n, nz in REFINE:
        ds, coords = build(n, nz)
        ft = F.forcing_terms(ds, f0_latitude=45.0)
        fg = F.frontogenesis(ds, wind="geostrophic", f0_latitude=45.0)
        got = {k: ft[k] for k in fns if k in ft}
        got["frontogenesis_full"] = ft.frontogenesis
        got["frontogenesis_geostrophic"] = fg.frontogenesis
        for k, e in _errors(got, fns, coords, ds, "y", "x").items():
            errs.setdefault(k, []).append(e)
    assert set(errs) == set(fns)
    for k, e in errs.items():
        assert orders(e).min() >= 1.8, (k, e)
        assert e[-1] < 1e-2, (k, e)


def test_two_right_hand_sides_agree_on_beta_plane(beta_plane_case):
    # Hoskins, Draghici & Davies (1978); Holton & Hakim (2013) §6.4: with V_g from f0 on a β-plane,
    # −f0 ∂A_η/∂p − (R/p)∇²A_T = −2∇·Q + f0 β ∂v_g/∂p.  First on the exact fields (sympy) ...
    fns, build, identity = beta_plane_case
    rng = np.random.default_rng(3)
    X, Y, P = rng.uniform(0, 4e6, 50), rng.uniform(-1.5e6, 1.5e6, 50), rng.uniform(30000, 90000, 50)
    scale = np.abs(fns["q_vector_forcing"](X, Y, P)).max()
    assert np.abs(identity(X, Y, P)).max() < 1e-9 * scale
    # ... then discretely: the difference of the totals falls at second order (interior box, common levels)
    diffs = []
    for n, nz in REFINE:
        ds, (X, Y, P) = build(n, nz)
        t_form = F.omega_rhs(ds, "traditional", f0_latitude=45.0)
        q_form = F.omega_rhs(ds, "qvector", f0_latitude=45.0)
        box = np.ix_(np.isin(ds.level.values, COMMON_LEVELS), interior(ds.y.values), interior(ds.x.values))
        d = (t_form.rhs_total - q_form.rhs_total).values[box]
        diffs.append(np.abs(d).max() / np.abs(q_form.rhs_total.values[box]).max())
        # the totals are the sums of the additive terms named in the attrs
        for rhs in (t_form, q_form):
            terms = rhs.attrs["qgforce_terms"].split()
            np.testing.assert_allclose(sum(rhs[t] for t in terms).values, rhs.rhs_total.values, rtol=0,
                                       atol=1e-14 * np.abs(rhs.rhs_total.values).max())
    assert orders(diffs).min() >= 1.8, diffs
    assert diffs[-1] < 1e-2


# ============================================================================ sympy: the sphere
@pytest.fixture(scope="module")
def sphere_case():
    """Exact fields (sympy) on a lat–lon band, local f.

    Φ = Φ0(p) − Ω a U(p) sin²φ + A(p) sin(6λ + θ(p)) cos(3(φ − π/4)), T hydrostatic.

    Operators of science.md; velocity gradient with the metric terms (Batchelor 1967, app. 2):
    ux = u_λ/(a cos φ) − v tan φ/a, vx = v_λ/(a cos φ) + u tan φ/a, uy = u_φ/a, vy = v_φ/a.
    """
    lam, phi, p = lam_s, phi_s, ps_s
    s = 1 - p / P0
    L = sp.log(P0 / p)
    f = 2 * OMEGA * sp.sin(phi)
    PHI = RD * 288 * L - OMEGA * A * (8 + 25 * s) * sp.sin(phi) ** 2 \
        + 1200 * (1 + s) * sp.sin(6 * lam + 0.7 * s) * sp.cos(3 * (phi - sp.pi / 4))
    T = -(p / RD) * sp.diff(PHI, p)
    c = sp.cos(phi)
    dx, dy = (lambda e: sp.diff(e, lam) / (A * c)), (lambda e: sp.diff(e, phi) / A)
    ug, vg = -dy(PHI) / f, dx(PHI) / f
    div = lambda u, v: (sp.diff(u, lam) + sp.diff(v * c, phi)) / (A * c)  # noqa: E731
    curl = lambda u, v: (sp.diff(v, lam) - sp.diff(u * c, phi)) / (A * c)  # noqa: E731
    lap = lambda e: sp.diff(e, lam, 2) / (A * c) ** 2 + sp.diff(c * sp.diff(e, phi), phi) / (A**2 * c)  # noqa: E731

    def vgrad(u, v):
        t = sp.tan(phi) / A
        return dx(u) - v * t, dx(v) + u * t, dy(u), dy(v)

    eta = curl(ug, vg) + f
    AT = -(ug * dx(T) + vg * dy(T))
    AE = -(ug * dx(eta) + vg * dy(eta))
    ux, vx, uy, vy = vgrad(ug, vg)
    qx = -(RD / p) * (ux * dx(T) + vx * dy(T))
    qy = -(RD / p) * (uy * dx(T) + vy * dy(T))
    ua = 2.0 * sp.cos(6 * lam) * c
    va = 1.5 * sp.sin(6 * lam + 0.4) * sp.sin(2 * phi)
    theta = T * (P0 / p) ** KAPPA
    exprs = {
        "temperature_advection": AT,
        "vorticity_advection": AE,
        "differential_vorticity_advection": -f * sp.diff(AE, p),  # local f in front with coriolis="local"
        "thermal_advection_term": -(RD / p) * lap(AT),
        "q_vector_x": qx,
        "q_vector_y": qy,
        "q_vector_forcing": -2 * div(qx, qy),
        "beta_term": f * (2 * OMEGA * c / A) * sp.diff(vg, p),
        "frontogenesis_geostrophic": _frontogenesis_expr(theta, dx, dy, ux, vx, uy, vy),
        "frontogenesis_full": _frontogenesis_expr(theta, dx, dy, *vgrad(ug + ua, vg + va)),
    }
    fns = {kk: sp.lambdify((lam, phi, p), e, "numpy") for kk, e in exprs.items()}
    inputs = {kk: sp.lambdify((lam, phi, p), e, "numpy") for kk, e in
              {"geopotential": PHI, "temperature": T, "u": ug + ua, "v": vg + va}.items()}

    def build(n, nz):
        lat, lon, ps = np.linspace(30.0, 60.0, n), np.linspace(0.0, 60.0, n), np.linspace(90000.0, 30000.0, nz)
        P, PH, LA = np.meshgrid(ps, np.deg2rad(lat), np.deg2rad(lon), indexing="ij")
        ds = latlon_ds(lat, lon, ps, {kk: fn(LA, PH, P) * np.ones_like(LA) for kk, fn in inputs.items()})
        return ds, (LA, PH, P)

    return fns, build


def test_sphere_wave_second_order_against_sympy(sphere_case):
    # sympy exact fields with the spherical operators; local f; observed order ≥ 1.8 (interior box, common levels)
    fns, build = sphere_case
    errs = {}
    for n, nz in REFINE:
        ds, coords = build(n, nz)
        ft = F.forcing_terms(ds, coriolis="local")
        fg = F.frontogenesis(ds, wind="geostrophic", coriolis="local")
        got = {k: ft[k] for k in fns if k in ft}
        got["frontogenesis_full"] = ft.frontogenesis
        got["frontogenesis_geostrophic"] = fg.frontogenesis
        # Petterssen's parts add up to F (round-off) on these curved, nonlinear fields too
        for out in (ft, fg):
            s = np.abs(out.frontogenesis.values).max()
            np.testing.assert_allclose((out.frontogenesis_divergence + out.frontogenesis_deformation).values,
                                       out.frontogenesis.values, rtol=0, atol=1e-12 * s)
        for k, e in _errors(got, fns, coords, ds, "latitude", "longitude").items():
            errs.setdefault(k, []).append(e)
    assert set(errs) == set(fns)
    for k, e in errs.items():
        assert orders(e).min() >= 1.8, (k, e)
        assert e[-1] < 1e-2, (k, e)
    # the angle β against its definition, from independent pieces: the isentropes run at atan2(θy, θx) − 90°,
    # the dilatation axis at ½ atan2(S, E) (kinematics.deformation); lines, so modulo 180°; and the
    # deformation part is ½|∇θ| D cos 2β (Petterssen 1936)
    from qgforce.kinematics import deformation

    d = deformation(ds.u, ds.v)
    tx, ty = gradient(ds.temperature)
    chi = np.rad2deg(np.arctan2(ty.values, tx.values)) - 90.0
    diff = (ft.isentrope_dilatation_angle.values - (chi - d.dilatation_axis_angle.values) + 90.0) % 180.0 - 90.0
    assert np.abs(diff).max() < 1e-7
    g = ft.potential_temperature_gradient
    expected = 0.5 * g * d.total_deformation * np.cos(2 * np.deg2rad(ft.isentrope_dilatation_angle))
    np.testing.assert_allclose(ft.frontogenesis_deformation.values, expected.values, rtol=0,
                               atol=1e-9 * np.abs(expected.values).max())


# ============================================================================ sign sense
def test_warm_advection_is_positive():
    # common practice: wind blowing from warm toward cold air is warm advection, A_T > 0.
    X, Y = np.meshgrid(XS, YS)
    T = 290.0 - 1.0e-5 * Y  # warm to the south
    full = cartesian_ds(XS, YS, PS2, {"temperature": np.stack([T] * 2), "u": np.full((2, 21, 21), 3.0),
                                       "v": np.full((2, 21, 21), 10.0)})  # southerly wind
    at = F.temperature_advection(full, wind="full")
    np.testing.assert_allclose(at.values, 10.0 * 1.0e-5, rtol=1e-10)
    assert at.attrs["standard_name"] == "tendency_of_air_temperature_due_to_advection"
    assert at.attrs["units"] == "K s-1" and at.attrs["qgforce_wind"] == "full"
    # the same with a geostrophic southerly: Φ rising eastward (northern hemisphere)
    geo = cartesian_ds(XS, YS, PS2, {"temperature": np.stack([T] * 2),
                                      "geopotential": np.stack([5e4 + F0_45 * 10.0 * X] * 2)})
    at_g = F.temperature_advection(geo, f0_latitude=45.0)
    np.testing.assert_allclose(at_g.values, 10.0 * 1.0e-5, rtol=1e-8)
    assert at_g.attrs["qgforce_wind"] == "geostrophic"


def test_cyclonic_advection_increasing_with_height_forces_ascent():
    # common practice (science.md): cyclonic vorticity advection increasing with height gives a positive
    # differential-vorticity-advection term; a warm-advection maximum a positive thermal term.
    xs = np.linspace(0.0, 3.0e6, 61)
    ys = np.linspace(-1.0e6, 1.0e6, 41)
    ps = np.array([90000.0, 70000.0, 50000.0, 30000.0])
    k = 2 * np.pi / 3.0e6
    P, Y, X = np.meshgrid(ps, ys, xs, indexing="ij")
    U = 5.0 + 25.0 * (1 - P / P0)  # westerlies increasing with height
    phi = 5.0e4 - F0_45 * U * Y - 800.0 * np.sin(k * X)  # trough at kx = π/2 (x = 0.75e6 m), ridge at 3π/2
    T = 280.0 - 1e-5 * Y
    ds = cartesian_ds(xs, ys, ps, {"geopotential": phi, "temperature": T})
    av = F.vorticity_advection(ds, f0_latitude=45.0)
    dva = F.differential_vorticity_advection(ds, f0_latitude=45.0)
    # downstream of the trough, between it and the ridge east of it: kx = π
    i, j = 30, 20  # x = 1.5e6 m, y = 0
    col = av.values[:, j, i]
    assert np.all(col > 0) and np.all(np.diff(col) > 0)  # cyclonic advection, increasing upward
    assert np.all(dva.values[:, j, i] > 0)
    lay = F.layer_differential_vorticity_advection(ds, 700, 300, f0_latitude=45.0)
    assert lay.values[j, i] > 0
    # thermal term: a maximum of warm advection (warm air to the south, southerly geostrophic wind east of the trough)
    ta = F.thermal_advection_term(ds, f0_latitude=45.0)
    at = F.temperature_advection(ds, f0_latitude=45.0)
    jmax = np.unravel_index(np.argmax(at.values[1, 5:-5, 5:-5]), (31, 51))
    assert ta.values[1, 5 + jmax[0], 5 + jmax[1]] > 0


# ============================================================================ layer forms
def test_layer_temperature_advection_hypsometric():
    # Wallace & Hobbs (2006) eq. 3.29: for T(x, y) independent of p in the layer, T̄ = T, and −V̄·∇T̄ = −V·∇T
    # for a wind constant in the vertical.  Linear T: exact discretely.
    X, Y = np.meshgrid(XS, YS)
    ps = np.array([100000.0, 85000.0, 70000.0, 50000.0])
    T2 = 285.0 + 0.7e-5 * X - 1.2e-5 * Y
    phis = 1.0e3 + F0_45 * 5.0 * X  # a surface geopotential slope
    phi = np.stack([phis + RD * T2 * np.log(100000.0 / p) for p in ps])
    ds = cartesian_ds(XS, YS, ps, {"geopotential": phi, "temperature": np.stack([T2] * 4),
                                    "u": np.full((4, 21, 21), 8.0), "v": np.full((4, 21, 21), -6.0)})
    out = F.layer_temperature_advection(ds, 1000, 500, wind="full")
    np.testing.assert_allclose(out.layer_mean_temperature.values, T2, rtol=1e-12)
    expected = -(8.0 * 0.7e-5 - 6.0 * -1.2e-5)
    np.testing.assert_allclose(out.layer_mean_temperature_advection.values, expected, rtol=1e-9)
    np.testing.assert_allclose(out.thickness_advection.values, expected * RD * np.log(2.0) / GRAVITY, rtol=1e-9)
    assert out.thickness_advection.attrs["units"] == "m s-1"
    assert out.layer_mean_temperature_advection.attrs["units"] == "K s-1"
    assert out.attrs["qgforce_levels"] == "layer 1000-500 hPa"
    assert "level" not in out.thickness_advection.dims


def test_layer_geostrophic_thickness_advection_independent_of_average():
    # Holton & Hakim (2013) §3.4: the thermal wind V_g(top) − V_g(bottom) blows along the thickness contours,
    # so advection of thickness by any average of V_g(top) and V_g(bottom) is the same (linear operators:
    # exact to round-off discretely); here the layer mean against V_g(bottom) alone.
    X, Y = np.meshgrid(XS, YS)
    phi, T = wavy_fields(X, Y)
    ps = [100000.0, 50000.0]
    ds = cartesian_ds(XS, YS, ps, {"geopotential": np.stack([phi, phi + RD * T * np.log(2.0)]),
                                    "temperature": np.stack([T, T])})
    out = F.layer_temperature_advection(ds, 100000, 50000, f0_latitude=45.0)
    h = (ds.geopotential.sel(level=50000.0) - ds.geopotential.sel(level=100000.0)) / GRAVITY
    g = Grid.from_dataset(ds)
    from qgforce.kinematics import geostrophic_wind

    ub, vb = geostrophic_wind(ds.geopotential.sel(level=100000.0), g, "f0", 45.0)
    hx, hy = gradient(h, g)
    expected = -(ub * hx + vb * hy)
    np.testing.assert_allclose(out.thickness_advection.values, expected.values, rtol=0,
                               atol=1e-10 * np.abs(expected.values).max())


def test_layer_differential_vorticity_advection_is_the_two_level_difference(beta_plane_case):
    # definition (science.md, layer form): −f0 [A_η(upper) − A_η(lower)] / (p_upper − p_lower)
    _, build, _ = beta_plane_case
    ds, _ = build(25, 5)
    av = F.vorticity_advection(ds, f0_latitude=45.0)
    lay = F.layer_differential_vorticity_advection(ds, lower=75000, upper=45000, f0_latitude=45.0)
    expected = -F0_45 * (av.sel(level=45000.0) - av.sel(level=75000.0)) / (45000.0 - 75000.0)
    np.testing.assert_allclose(lay.values, expected.values, rtol=1e-13)
    assert lay.dims == ("y", "x") and lay.attrs["units"] == "Pa-1 s-3"
    with pytest.raises(GridError, match="larger pressure"):
        F.layer_differential_vorticity_advection(ds, lower=450, upper=750)


# ============================================================================ options, attrs, levels
def test_levels_select_in_pa_or_hpa_and_vertical_terms_use_the_whole_column(beta_plane_case):
    _, build, _ = beta_plane_case
    ds, _ = build(25, 5)  # levels 900, 750, 600, 450, 300 hPa
    full = F.differential_vorticity_advection(ds, f0_latitude=45.0)
    sub = F.differential_vorticity_advection(ds, f0_latitude=45.0, levels=[600, 45000.0])
    assert sub.level.values.tolist() == [60000.0, 45000.0]
    np.testing.assert_array_equal(sub.values, full.sel(level=[60000.0, 45000.0]).values)
    assert sub.attrs["qgforce_levels"] == "600 450 hPa"
    ta = F.temperature_advection(ds, f0_latitude=45.0, levels=900)
    assert ta.level.values.tolist() == [90000.0]
    rhs = F.omega_rhs(ds, "qvector", f0_latitude=45.0, levels=[750])
    assert rhs.rhs_total.level.values.tolist() == [75000.0]
    np.testing.assert_array_equal(rhs.beta_term.values, F.beta_term(ds, f0_latitude=45.0).sel(level=[75000.0]).values)


def test_attrs_record_the_choices(beta_plane_case):
    _, build, _ = beta_plane_case
    ds, _ = build(25, 3)
    ft = F.forcing_terms(ds, f0_latitude=45.0)
    units = {"temperature_advection": "K s-1", "vorticity_advection": "s-2", "differential_vorticity_advection":
             "Pa-1 s-3", "thermal_advection_term": "Pa-1 s-3", "q_vector_x": "m Pa-1 s-3", "q_vector_y": "m Pa-1 s-3",
             "q_vector_forcing": "Pa-1 s-3", "qn_x": "m Pa-1 s-3", "qn_y": "m Pa-1 s-3", "qs_x": "m Pa-1 s-3",
             "qs_y": "m Pa-1 s-3", "qn_forcing": "Pa-1 s-3", "qs_forcing": "Pa-1 s-3", "beta_term": "Pa-1 s-3",
             "frontogenesis": "K m-1 s-1", "frontogenesis_divergence": "K m-1 s-1",
             "frontogenesis_deformation": "K m-1 s-1", "isentrope_dilatation_angle": "degree",
             "potential_temperature_gradient": "K m-1", "u_geostrophic": "m s-1", "v_geostrophic": "m s-1",
             "geopotential": "m2 s-2"}
    assert set(ft.data_vars) == set(units)
    for name, u in units.items():
        a = ft[name].attrs
        assert a["units"] == u, name
        assert ft[name].dims == ("level", "y", "x"), name
        if name != "geopotential":
            for key in ("long_name", "qgforce_wind", "qgforce_coriolis", "qgforce_smoothing", "qgforce_levels",
                        "qgforce_equator_mask_degrees"):
                assert key in a, (name, key)
    assert ft.frontogenesis.attrs["qgforce_wind"] == "full"
    assert ft.frontogenesis.attrs["qgforce_coriolis"] == "not used (full wind)"
    assert ft.q_vector_x.attrs["qgforce_coriolis"].startswith("f0 = ")
    assert ft.differential_vorticity_advection.attrs["qgforce_prefactor"].startswith("f0 = ")
    local = F.differential_vorticity_advection(ds, coriolis="local")
    assert local.attrs["qgforce_prefactor"] == "local f = 2 Omega sin(latitude)"
    t_form, qv = F.omega_rhs(ds), F.omega_rhs(ds, form="qvector")
    assert t_form.attrs["qgforce_form"] == "traditional"
    assert t_form.attrs["qgforce_terms"] == "differential_vorticity_advection thermal_advection_term"
    assert qv.attrs["qgforce_terms"] == "q_vector_forcing beta_term"
    assert qv.attrs["qgforce_partition"] == "q_vector_forcing=qn_forcing+qs_forcing"
    assert set(qv.data_vars) == {"q_vector_forcing", "beta_term", "qn_forcing", "qs_forcing", "rhs_total"}
    with pytest.raises(QGForceError, match="form must be one of"):
        F.omega_rhs(ds, form="sideways")
    with pytest.raises(QGForceError, match="wind must be one of"):
        F.temperature_advection(ds, wind="thermal")


def test_beta_term_uses_the_northward_component_on_a_rotated_grid():
    # geometry (common practice): Φ = f0 c(p) X_east gives a geostrophic wind due north of speed c(p);
    # on a grid whose x-axis is turned 60° from east, the grid components are (c sin 60°, c cos 60°),
    # and the β term must still be f0 β ∂c/∂p (to the ~1e-4 by which the synthetic lat/lon of this
    # map-factor-1 grid departs from an exact rotation; without the rotation the error would be 50 %).
    xs = ys = np.linspace(-3.0e5, 3.0e5, 31)
    ps = np.array([90000.0, 70000.0, 50000.0])
    r = np.deg2rad(60.0)
    X, Y = np.meshgrid(xs, ys)
    east = X * np.cos(r) - Y * np.sin(r)
    c = 5.0 + 20.0 * (1 - ps / P0)
    phi = np.stack([5e4 + F0_45 * ci * east for ci in c])
    ds = cartesian_ds(xs, ys, ps, {"geopotential": phi}, rotation_deg=60.0)
    g = Grid.from_dataset(ds)
    assert abs(np.rad2deg(g.grid_x_angle).mean() - 60.0) < 2.0
    bt = F.beta_term(ds, f0_latitude=45.0)
    expected = F0_45 * g.beta() * (-20.0 / P0)
    np.testing.assert_allclose(bt.values, np.broadcast_to(expected, bt.shape), rtol=2e-3)


def test_smoothing_is_applied_to_the_inputs(beta_plane_case):
    # the diagnostic of smoothed inputs equals the diagnostic computed on inputs smoothed beforehand
    from qgforce.smoothing import smooth

    _, build, _ = beta_plane_case
    ds, _ = build(25, 3)
    spec = "shuman_box:2"
    out = F.q_vectors(ds, smoothing=spec, f0_latitude=45.0)
    pre = ds.copy()
    for k in ("temperature", "geopotential"):
        pre[k] = smooth(ds[k], spec)
    ref = F.q_vectors(pre, f0_latitude=45.0)
    np.testing.assert_allclose(out.q_vector_forcing.values, ref.q_vector_forcing.values, rtol=1e-13)
    assert out.q_vector_x.attrs["qgforce_smoothing"] == smooth(ds.temperature, spec, describe=True)[1] != "none"
    assert not np.allclose(out.q_vector_forcing.values, F.q_vectors(ds, f0_latitude=45.0).q_vector_forcing.values,
                           rtol=1e-3, atol=0)
    assert F.q_vectors(ds, f0_latitude=45.0).q_vector_x.attrs["qgforce_smoothing"] == "none"


# ============================================================================ laziness
PUBLIC_CALLS = {
    "temperature_advection": lambda ds: F.temperature_advection(ds, f0_latitude=45.0),
    "temperature_advection_full": lambda ds: F.temperature_advection(ds, wind="full"),
    "layer_temperature_advection": lambda ds: F.layer_temperature_advection(ds, 900, 300, f0_latitude=45.0),
    "layer_temperature_advection_full": lambda ds: F.layer_temperature_advection(ds, 900, 300, wind="full"),
    "vorticity_advection": lambda ds: F.vorticity_advection(ds, f0_latitude=45.0),
    "differential_vorticity_advection": lambda ds: F.differential_vorticity_advection(ds, coriolis="local"),
    "layer_differential_vorticity_advection": lambda ds: F.layer_differential_vorticity_advection(ds, 750, 450),
    "thermal_advection_term": lambda ds: F.thermal_advection_term(ds, f0_latitude=45.0),
    "q_vectors": lambda ds: F.q_vectors(ds, f0_latitude=45.0),
    "beta_term": lambda ds: F.beta_term(ds, f0_latitude=45.0),
    "frontogenesis": lambda ds: F.frontogenesis(ds),
    "frontogenesis_geostrophic": lambda ds: F.frontogenesis(ds, wind="geostrophic", coriolis="local"),
    "omega_rhs_traditional": lambda ds: F.omega_rhs(ds, f0_latitude=45.0, levels=[600, 450]),
    "omega_rhs_qvector": lambda ds: F.omega_rhs(ds, "qvector", f0_latitude=45.0),
    "forcing_terms": lambda ds: F.forcing_terms(ds, f0_latitude=45.0, smoothing="shuman_box:1"),
}


def test_every_diagnostic_is_lazy_on_dask_and_matches_numpy(beta_plane_case, no_compute):
    _, build, _ = beta_plane_case
    ds, _ = build(25, 5)
    ds = xr.concat([ds, ds * 1.01], dim=xr.DataArray([0, 1], dims="time", name="time"))
    for k in ds.data_vars:
        ds[k].attrs = {"units": {"temperature": "K", "geopotential": "m2 s-2"}.get(k, "m s-1"),
                       **({"wind_relative_to": "grid"} if k in "uv" else {})}
    ds = ds.transpose("time", "level", "y", "x")
    lazy = ds.copy()
    for k in ds.data_vars:  # data variables only: coordinates stay numpy
        lazy[k] = ds[k].chunk({"time": 1})
    results = {}
    for name, call in PUBLIC_CALLS.items():
        out = call(lazy)  # the no_compute scheduler raises if anything computes here
        for v in ([out] if isinstance(out, xr.DataArray) else out.data_vars.values()):
            assert isinstance(v.data, dsa.Array), (name, v.name)
        results[name] = out
    for name, out in results.items():
        ref = PUBLIC_CALLS[name](ds)
        got = out.compute(scheduler="sync")  # an explicit scheduler: the test's own computation
        for v in ([ref] if isinstance(ref, xr.DataArray) else list(ref.data_vars.values())):
            g = got if isinstance(got, xr.DataArray) else got[v.name]
            np.testing.assert_allclose(g.values, v.values, rtol=1e-12, atol=0, equal_nan=True, err_msg=name)


# ============================================================================ error paths
def test_missing_temperature_for_q_vectors(beta_plane_case):
    _, build, _ = beta_plane_case
    ds, _ = build(25, 3)
    with pytest.raises(MissingVariableError,
                       match="Q-vectors need temperature .* and geopotential .* on at least one level"):
        F.q_vectors(ds.drop_vars("temperature"))
    with pytest.raises(MissingVariableError, match="missing: u, v"):
        F.frontogenesis(ds.drop_vars(["u", "v"]))


def test_vertical_terms_need_three_levels(beta_plane_case):
    _, build, _ = beta_plane_case
    ds, _ = build(25, 3)
    two = ds.isel(level=[0, 2])
    for fn in (F.differential_vorticity_advection, F.beta_term, F.omega_rhs):
        with pytest.raises(GridError, match="needs at least 3 pressure levels"):
            fn(two)
    F.layer_differential_vorticity_advection(two, 900, 300)  # the two-level form works
    # forcing_terms computes what two levels allow (tests/test_level_rules.py checks it in detail)


def test_level_not_in_data_lists_available(beta_plane_case):
    _, build, _ = beta_plane_case
    ds, _ = build(25, 3)
    with pytest.raises(GridError, match=r"level\(s\) 500 hPa not in the data; available levels: 900 600 300 hPa"):
        F.temperature_advection(ds, levels=[500])
    with pytest.raises(GridError, match="available levels"):
        F.differential_vorticity_advection(ds, levels=[85000.0])
    with pytest.raises(GridError, match="available levels"):
        F.layer_temperature_advection(ds, 1000, 500)


@pytest.mark.parametrize("coriolis,mask", [("local", 10.0), ("local", None), ("f0", 5.0)])
def test_equatorial_points_are_nan_with_a_warning_never_inf(coriolis, mask):
    lat = np.linspace(-20.0, 20.0, 41)  # includes the equator row
    lon = np.linspace(0.0, 40.0, 41)
    ps = np.array([90000.0, 70000.0, 50000.0])
    P, LA, LO = np.meshgrid(ps, np.deg2rad(lat), np.deg2rad(lon), indexing="ij")
    phi = 5e4 - 2e4 * (1 - P / P0) * np.cos(LA) ** 2 + 300 * np.sin(3 * LO) * np.cos(2 * LA)
    T = 280 + 10 * np.cos(LA) + 2 * np.sin(3 * LO + LA)
    ds = latlon_ds(lat, lon, ps, {"geopotential": phi, "temperature": T, "u": np.cos(LA) * 10 + 0 * P,
                                  "v": np.sin(2 * LO) + 0 * P})
    with pytest.warns(EquatorialMaskWarning, match="equator"):
        ft = F.forcing_terms(ds, coriolis=coriolis, equator_mask=mask, f0_latitude=45.0)
    band = np.abs(lat) < (mask or 0.0)
    if mask is None:
        band = lat == 0.0  # f = 0 exactly: always masked
    for name, v in ft.data_vars.items():
        assert not np.isinf(v.values).any(), name
        if name not in ("geopotential", "frontogenesis", "frontogenesis_divergence", "frontogenesis_deformation",
                        "isentrope_dilatation_angle", "potential_temperature_gradient"):
            assert np.isnan(v.values[:, band, :]).all(), name
    # full-wind frontogenesis does not use geostrophy: finite at the equator, and no warning
    assert np.isfinite(ft.frontogenesis.values[:, lat == 0.0, 1:-1]).all()
    with warnings.catch_warnings():
        warnings.simplefilter("error", EquatorialMaskWarning)
        F.frontogenesis(ds)
        F.temperature_advection(ds, wind="full")


def test_slab_evaluation_of_large_numpy_input_gives_the_same_numbers(beta_plane_case, monkeypatch):
    # large numpy inputs are evaluated a few levels at a time (bounded temporaries); force that path on a
    # small case (thresholds lowered) and compare with the whole-field evaluation of every diagnostic
    _, build, _ = beta_plane_case
    ds, _ = build(25, 5)
    ds = xr.concat([ds, ds * 1.01], dim=xr.DataArray([0, 1], dims="time", name="time"))
    for k in ds.data_vars:
        ds[k].attrs = {"units": {"temperature": "K", "geopotential": "m2 s-2"}.get(k, "m s-1"),
                       **({"wind_relative_to": "grid"} if k in "uv" else {})}
    ds = ds.transpose("time", "level", "y", "x")
    whole = {name: call(ds) for name, call in PUBLIC_CALLS.items()}
    per_level = 25 * 25 * 8
    monkeypatch.setattr(F, "_SLAB_THRESHOLD", 1)
    monkeypatch.setattr(F, "_SLAB_BYTES", 2 * per_level)  # slabs of 2 levels of one time: 6 slabs
    assert len(F._slab_indexers(ds.temperature, Grid.from_dataset(ds))) == 6
    for name, call in PUBLIC_CALLS.items():
        out, ref = call(ds), whole[name]
        if isinstance(ref, xr.DataArray):
            out, ref = out.to_dataset(name="v"), ref.to_dataset(name="v")
        assert list(out.data_vars) == list(ref.data_vars), name
        for k in ref.data_vars:
            assert out[k].dims == ref[k].dims and out[k].attrs == ref[k].attrs, (name, k)
            np.testing.assert_allclose(out[k].values, ref[k].values, rtol=1e-13, atol=0, equal_nan=True,
                                       err_msg=f"{name}.{k}")
