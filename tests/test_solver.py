"""The discrete QG omega operator and its solvers (qgforce.solver), against external references.

References used:
- the discrete identity L(solve(r)) = r: the direct method diagonalises the discrete operator
  exactly (Swarztrauber 1977, SIAM Review 19, 490-501: Fourier analysis + tridiagonal solves),
  so a random ω must be recovered to round-off;
- sympy: exact derivatives of analytic fields, with the Cartesian operator, the spherical
  Laplacian of science.md, and the orthogonal-coordinate Laplacian
  (1/(hx hy)) [∂ξ((hy/hx)∂ξψ) + ∂η((hx/hy)∂ηψ)] (Morse & Feshbach 1953, Methods of Theoretical
  Physics, ch. 1);
- pyproj (PROJ): the map factor (parallel scale) of a Lambert conformal conic projection;
- linearity of L⁻¹ (science.md, "The omega inversion").
"""

import numpy as np
import pyproj
import pytest
import sympy as sp

from qgforce.constants import EARTH_ANGULAR_VELOCITY as OMEGA
from qgforce.constants import EARTH_RADIUS as A
from qgforce.errors import ConvergenceError, GridError, InputDataError
from qgforce.solver import (
    METHODS,
    QGOperator,
    SeparableSolver,
    apply_operator,
    averaged_operator,
    floor_sigma,
    residual_norm,
    resolve_workers,
    solve,
)

F0 = 1e-4  # s-1, a mid-latitude Coriolis parameter (common practice)
SIGMA0 = 2e-6  # m2 Pa-2 s-2, mid-tropospheric static stability (science.md)


# ---------------------------------------------------------------------------- builders
def levels(nz, kind="uniform", bottom=1e5, top=1e4):
    s = np.linspace(0.0, 1.0, nz)
    if kind == "nonuniform":  # smoothly stretched: denser near the ground
        s = s + 0.15 * np.sin(np.pi * s)
    return bottom + (top - bottom) * s


def sigma_of(p):
    return SIGMA0 * (1e5 / p) ** 1.5  # stability increasing upward (an invented profile)


def geometry(kind, ny, nx):
    """(xi, eta, hx, hy, periodic, latitude [rad] or None) of a test grid."""
    if kind == "cartesian":
        x = np.linspace(0.0, 3e6, nx)
        y = np.linspace(0.0, 2.5e6, ny)
        return x, y, 1.0, 1.0, False, None
    if kind == "regional":  # a 25-65°N regional band, non-uniform latitudes
        t = np.linspace(0.0, 1.0, ny)
        lat = np.deg2rad(25.0 + 40.0 * (t + 0.05 * np.sin(2 * np.pi * t)))
        lon = np.deg2rad(np.linspace(-40.0, 30.0, nx))
        return lon, lat, (A * np.cos(lat))[:, None], A, False, lat
    if kind == "band":  # a periodic 20-80°N band
        lat = np.deg2rad(np.linspace(20.0, 80.0, ny))
        lon = np.arange(nx) * 2 * np.pi / nx
        return lon, lat, (A * np.cos(lat))[:, None], A, True, lat
    if kind == "global":  # pole rows as boundary rows
        lat = np.deg2rad(np.linspace(-90.0, 90.0, ny))
        lon = np.arange(nx) * 2 * np.pi / nx
        c = np.cos(lat)
        c[[0, -1]] = 0.0
        return lon, lat, (A * c)[:, None], A, True, lat
    raise ValueError(kind)


def make_op(kind="regional", lev="uniform", coriolis="f0", nz=9, ny=11, nx=16, sigma=None):
    xi, eta, hx, hy, periodic, lat = geometry(kind, ny, nx)
    p = levels(nz, lev)
    if coriolis == "f0":
        fsq = F0**2
    elif lat is None:  # β-plane: f = f0 + β y, f depending on η only
        fsq = (F0 + 1.6e-11 * (eta - eta.mean())) ** 2
    else:
        fsq = (2 * OMEGA * np.sin(lat)) ** 2
    return QGOperator(p, xi, eta, hx, hy, sigma_of(p) if sigma is None else sigma, fsq, periodic_x=periodic)


def random_interior(op, rng, scale=1.0):
    w = np.zeros(op.shape)
    w[op.interior] = scale * rng.standard_normal(op.interior_shape)
    return w


def rel_max(a, b):
    return float(np.max(np.abs(a - b)) / np.max(np.abs(b)))


def observed_orders(errors):
    e = np.asarray(errors)
    return np.log2(e[:-1] / e[1:])


# ---------------------------------------------------------------------------- discrete round trips
GEOMETRIES = ["cartesian", "regional", "band", "global"]


@pytest.mark.parametrize("kind", GEOMETRIES)
@pytest.mark.parametrize("lev", ["uniform", "nonuniform"])
@pytest.mark.parametrize("coriolis", ["f0", "f(y)"])
def test_round_trip_recovers_random_omega(kind, lev, coriolis):
    # source: discrete identity (Swarztrauber 1977) -- r = L ω for a random ω, then solve(r) = ω
    op = make_op(kind, lev, coriolis, ny=13 if kind == "global" else 11)
    assert op.separable
    rng = np.random.default_rng(7)
    w = random_interior(op, rng, 0.3)
    r = apply_operator(w, op)
    assert np.all(np.isnan(r[0])) and np.all(np.isfinite(r[op.interior]))  # documented: NaN on the boundary
    omega, info = solve(r, op)
    assert info.method == "separable" and info.iterations == 0
    assert rel_max(omega, w) <= 1e-10
    assert info.residual <= 1e-10
    res, ref = residual_norm(omega, r, op)
    assert res / ref == pytest.approx(info.residual, rel=1e-12, abs=1e-300)


@pytest.mark.parametrize("kind", GEOMETRIES)
def test_round_trip_with_nonzero_boundary(kind):
    # source: discrete identity -- ω random everywhere, its boundary values passed as `boundary`
    op = make_op(kind, "nonuniform", "f(y)", ny=13 if kind == "global" else 11)
    rng = np.random.default_rng(11)
    w = rng.standard_normal(op.shape)
    r = apply_operator(w, op)
    omega, info = solve(r, op, boundary=w)
    assert rel_max(omega, w) <= 1e-10
    assert info.residual <= 1e-10


def test_rhs_boundary_values_are_ignored():
    # source: the operator is defined on interior points only (Dirichlet boundaries)
    op = make_op("band", ny=11, nx=12)
    rng = np.random.default_rng(3)
    r = apply_operator(random_interior(op, rng), op)
    r_nan = r.copy()  # boundary points already NaN
    r_junk = np.where(np.isnan(r), 1e30, r)
    a, _ = solve(r_nan, op)
    b, _ = solve(r_junk, op)
    np.testing.assert_array_equal(a, b)
    assert np.all(a[0] == 0) and np.all(a[:, -1] == 0)


def test_workers_negative_and_default_agree():
    # source: scipy.fft workers semantics (negative counts back from os.cpu_count())
    op = make_op("band", ny=11, nx=16)
    r = apply_operator(random_interior(op, np.random.default_rng(5)), op)
    a, _ = solve(r, op, workers=None)
    b, _ = solve(r, op, workers=-1)
    np.testing.assert_allclose(b, a, rtol=0, atol=1e-14 * np.abs(a).max())
    assert resolve_workers(-1) >= 1 and resolve_workers(None) is None


# ---------------------------------------------------------------------------- continuous solutions
def _solve_error(op, omega_exact, rhs_exact):
    rhs = np.where(np.isfinite(rhs_exact), rhs_exact, 0.0)
    omega, info = solve(rhs, op)
    assert info.residual <= 1e-10
    inner = op.interior
    return float(np.max(np.abs(omega[inner] - omega_exact[inner])) / np.max(np.abs(omega_exact)))


def test_manufactured_cartesian_second_order():
    # source: sympy -- ω = sin(πx/Lx) sin(2πy/Ly) sin(π(p−pt)/(pb−pt)), constant σ and f0,
    # L ω = σ(ω_xx + ω_yy) + f0² ω_pp differentiated exactly
    x, y, p = sp.symbols("x y p", real=True)
    Lx, Ly, pb, pt = 3e6, 2.5e6, 1e5, 2e4
    w = sp.sin(sp.pi * x / Lx) * sp.sin(2 * sp.pi * y / Ly) * sp.sin(sp.pi * (p - pt) / (pb - pt))
    Lw = SIGMA0 * (sp.diff(w, x, 2) + sp.diff(w, y, 2)) + F0**2 * sp.diff(w, p, 2)
    fw, fL = sp.lambdify((p, y, x), w, "numpy"), sp.lambdify((p, y, x), Lw, "numpy")
    errors = []
    for r in range(4):
        n = 8 * 2**r + 1
        P, Y, X = np.linspace(pb, pt, n), np.linspace(0, Ly, n), np.linspace(0, Lx, n)
        op = QGOperator(P, X, Y, 1.0, 1.0, np.full(n, SIGMA0), F0**2)
        G = np.meshgrid(P, Y, X, indexing="ij")
        errors.append(_solve_error(op, fw(*G), fL(*G)))
    orders = observed_orders(errors)
    assert np.all(orders >= 1.9), (errors, orders)
    assert errors[-1] < 2e-3


def test_manufactured_sphere_second_order():
    # source: sympy -- ω = sin(π(p−pt)/(pb−pt)) sin(π(φ−φ1)/(φ2−φ1)) cos(3λ) on a periodic 20-80°N
    # band, σ(p) varying, f = 2Ω sin φ, with the exact spherical Laplacian of science.md:
    # ∇²ψ = ψ_λλ/(a² cos²φ) + (1/(a² cos φ)) ∂φ(cos φ ψ_φ); stretched (non-uniform) levels
    lam, phi, p = sp.symbols("lam phi p", real=True)
    pb, pt = 1e5, 1e4
    phi1, phi2 = np.deg2rad(20.0), np.deg2rad(80.0)
    w = (
        sp.sin(sp.pi * (p - pt) / (pb - pt))
        * sp.sin(sp.pi * (phi - phi1) / (phi2 - phi1))
        * sp.cos(3 * lam)
    )
    sig = SIGMA0 * (1e5 / p) ** sp.Rational(3, 2)
    lap = sp.diff(w, lam, 2) / (A**2 * sp.cos(phi) ** 2) + sp.diff(sp.cos(phi) * sp.diff(w, phi), phi) / (
        A**2 * sp.cos(phi)
    )
    Lw = sig * lap + (2 * OMEGA * sp.sin(phi)) ** 2 * sp.diff(w, p, 2)
    fw, fL = sp.lambdify((p, phi, lam), w, "numpy"), sp.lambdify((p, phi, lam), Lw, "numpy")
    errors = []
    for r in range(4):
        n = 8 * 2**r
        P = levels(n + 1, "nonuniform", pb, pt)
        PHI = np.linspace(phi1, phi2, n + 1)
        LAM = np.arange(2 * n) * np.pi / n
        op = QGOperator(P, LAM, PHI, (A * np.cos(PHI))[:, None], A, sigma_of(P), (2 * OMEGA * np.sin(PHI)) ** 2,
                        periodic_x=True)
        G = np.meshgrid(P, PHI, LAM, indexing="ij")
        errors.append(_solve_error(op, fw(*G), fL(*G)))
    orders = observed_orders(errors)
    assert np.all(orders >= 1.9), (errors, orders)


def test_operator_nonseparable_stencil_second_order():
    # source: sympy -- the orthogonal-coordinate Laplacian (Morse & Feshbach 1953) with hx ≠ hy both varying
    # in ξ and η, σ(ξ, η, p), f²(ξ, η), non-uniform ξ: the stencil behind the Krylov path converges at
    # second order
    X, Y, p = sp.symbols("X Y p", real=True)
    hx = 1e6 * (1 + 0.3 * sp.sin(X + 0.5 * Y))
    hy = 1e6 * (1.5 + 0.2 * sp.cos(0.7 * X - Y))
    w = sp.sin(2 * X + 0.3) * sp.cos(1.5 * Y) * sp.sin(sp.pi * (p - 1e4) / 9e4)
    sig = SIGMA0 * (1 + 0.3 * sp.sin(X) * sp.cos(Y)) * (1e5 / p)
    fsq = F0**2 * (1 + 0.2 * sp.sin(X - Y))
    lap = (sp.diff(hy / hx * sp.diff(w, X), X) + sp.diff(hx / hy * sp.diff(w, Y), Y)) / (hx * hy)
    Lw = sig * lap + fsq * sp.diff(w, p, 2)
    f = {k: sp.lambdify((p, Y, X), e, "numpy") for k, e in dict(w=w, L=Lw, sig=sig).items()}
    fh = {k: sp.lambdify((Y, X), e, "numpy") for k, e in dict(hx=hx, hy=hy, fsq=fsq).items()}
    errors = []
    for r in range(4):
        n = 12 * 2**r + 1
        s = np.linspace(0.0, 1.0, n)
        xi = 2.0 * (s + 0.1 * np.sin(np.pi * s))  # non-uniform ξ
        eta = np.linspace(0.0, 1.5, n)
        P = levels(n, "nonuniform")
        Y2, X2 = np.meshgrid(eta, xi, indexing="ij")
        G = np.meshgrid(P, eta, xi, indexing="ij")
        op = QGOperator(P, xi, eta, fh["hx"](Y2, X2), fh["hy"](Y2, X2), f["sig"](*G), fh["fsq"](Y2, X2))
        assert not op.separable
        exact = f["L"](*G)
        got = apply_operator(f["w"](*G), op)
        inner = op.interior
        errors.append(float(np.max(np.abs(got[inner] - exact[inner])) / np.max(np.abs(exact[inner]))))
    orders = observed_orders(errors)
    assert np.all(orders >= 1.9), (errors, orders)


# ---------------------------------------------------------------------------- linearity
def test_linearity_to_round_off():
    # source: science.md -- ω(RHS₁ + RHS₂) = ω(RHS₁) + ω(RHS₂) (L is linear)
    op = make_op("band", "nonuniform", "f(y)", ny=15, nx=24)
    rng = np.random.default_rng(17)
    r1 = rng.standard_normal(op.shape) * 1e-16
    r2 = rng.standard_normal(op.shape) * 3e-17
    w1, _ = solve(r1, op)
    w2, _ = solve(r2, op)
    w12, _ = solve(r1 + r2, op)
    assert rel_max(w1 + w2, w12) <= 1e-12


# ---------------------------------------------------------------------------- Krylov path
def varying_sigma(op, amplitude=0.3):
    """σ(p) (1 + amplitude · pattern), pattern in [-1, 1]: a ±30 % horizontal variation."""
    nz, ny, nx = op.shape
    s1 = op.sigma if op.sigma.ndim == 1 else op.sigma[:, 0, 0]
    j, i = np.meshgrid(np.linspace(0, 1, ny), np.linspace(0, 1, nx), indexing="ij")
    pattern = np.sin(2 * np.pi * i + 1.0) * np.cos(3 * np.pi * j)
    tilt = np.cos(np.pi * np.arange(nz) / nz)[:, None, None]
    return s1[:, None, None] * (1 + amplitude * pattern[None] * tilt)


def test_krylov_reproduces_direct_for_uniform_sigma():
    # source: the preconditioner is the exact inverse when σ is horizontally uniform
    op1 = make_op("regional", "nonuniform", "f(y)", ny=13, nx=14)
    s3 = np.broadcast_to(op1.sigma[:, None, None], op1.shape).copy()
    op3 = QGOperator(op1.levels, op1.xi, op1.eta, op1.hx, op1.hy, s3, op1.fsq)
    r = np.random.default_rng(2).standard_normal(op1.shape) * 1e-16
    wd, infod = solve(r, op1, method="separable")
    wk, infok = solve(r, op3, method="krylov")
    assert infok.method == "krylov" and infok.iterations <= 1
    assert rel_max(wk, wd) <= 1e-9
    assert infok.residual <= 1e-8


def test_krylov_converges_for_local_sigma():
    # source: residual measured with the discrete operator (apply_operator); σ varies by ±30 % horizontally
    base = make_op("regional", "nonuniform", "f(y)", nz=11, ny=17, nx=20)
    sig = varying_sigma(base)
    op = QGOperator(base.levels, base.xi, base.eta, base.hx, base.hy, sig, base.fsq)
    assert not op.separable
    r = np.random.default_rng(4).standard_normal(op.shape) * 1e-16
    omega, info = solve(r, op, tol=1e-9)
    assert info.method == "krylov"
    assert 1 <= info.iterations <= 60 and len(info.residuals) == info.iterations
    assert info.residual <= 1e-9
    res, ref = residual_norm(omega, r, op)
    assert res / ref <= 1e-9
    # the preconditioner alone (per-level mean σ) is not the answer: the variation matters
    wsep, _ = solve(r, averaged_operator(op))
    assert rel_max(wsep, omega) > 1e-3


def test_krylov_converges_on_lambert_conformal_grid():
    # source: pyproj (PROJ) -- Lambert conformal conic, standard parallels 30° and 60°: the map factor m is
    # the parallel scale at each grid point; hx = hy = 1/m vary along x, so the operator is not separable
    proj = pyproj.Proj(proj="lcc", lat_1=30, lat_2=60, lat_0=45, lon_0=0)
    x = np.linspace(-3e6, 3e6, 25)
    y = np.linspace(-2.4e6, 2.4e6, 21)
    X, Y = np.meshgrid(x, y)
    lon, lat = proj(X, Y, inverse=True)
    m = proj.get_factors(lon, lat).parallel_scale
    assert 0.9 < m.min() < 1.0 < m.max() < 1.2  # from memory: LCC scale < 1 between the standard parallels
    p = levels(9, "nonuniform")
    op = QGOperator(p, x, y, 1 / m, 1 / m, sigma_of(p), (2 * OMEGA * np.sin(np.deg2rad(lat))) ** 2)
    assert not op.separable
    r = np.random.default_rng(6).standard_normal(op.shape) * 1e-16
    omega, info = solve(r, op, tol=1e-8)
    assert info.method == "krylov" and info.residual <= 1e-8
    res, ref = residual_norm(omega, r, op)
    assert res / ref <= 1e-8


def test_krylov_handles_nonuniform_xi():
    # source: residual with the discrete operator; the separable solver refuses a non-uniform ξ (its transform
    # needs uniform spacing) and the Krylov path takes it with a uniform-ξ preconditioner
    p = levels(9)
    s = np.linspace(0.0, 1.0, 18)
    x = 3e6 * (s + 0.08 * np.sin(2 * np.pi * s))
    y = np.linspace(0.0, 2e6, 12)
    op = QGOperator(p, x, y, 1.0, 1.0, sigma_of(p), F0**2)
    assert not op.xi_uniform and not op.separable
    r = np.random.default_rng(8).standard_normal(op.shape) * 1e-16
    with pytest.raises(GridError, match="uniform"):
        solve(r, op, method="separable")
    omega, info = solve(r, op)
    assert info.method == "krylov" and info.residual <= 1e-8


def test_averaged_operator_weights_and_value_based_separability():
    # source: definition of the preconditioner's coefficients (weighted horizontal mean of σ per level);
    # a 2-D f² that is constant along ξ (as a labelled grid hands it over) keeps the operator separable
    base = make_op("regional", "nonuniform", "f(y)", ny=13, nx=14)
    sig = varying_sigma(base)
    lat = base.eta
    weights = np.broadcast_to(np.cos(lat)[:, None], (lat.size, base.xi.size))
    op = QGOperator(base.levels, base.xi, base.eta, base.hx, base.hy, sig, base.fsq)
    avg = averaged_operator(op, weights)
    inner = sig[1:-1, 1:-1, 1:-1]
    w = weights[1:-1, 1:-1]
    expected = (inner * w).sum(axis=(1, 2)) / w.sum()
    np.testing.assert_allclose(avg.sigma[1:-1], expected, rtol=1e-14)
    assert avg.separable
    r = np.random.default_rng(12).standard_normal(op.shape) * 1e-16
    _, info = solve(r, op, weights=weights, tol=1e-9)
    assert info.residual <= 1e-9
    fsq2 = np.broadcast_to(base.fsq, base.shape[1:]).copy()
    op2 = QGOperator(base.levels, base.xi, base.eta, base.hx, base.hy, base.sigma, fsq2)
    assert op2.separable
    a, _ = solve(r, base)
    b, info2 = solve(r, op2)
    assert info2.method == "separable" and rel_max(b, a) <= 1e-13


def test_non_convergence_raises_with_history():
    # source: ConvergenceError contract (qgforce.errors)
    base = make_op("regional", nz=9, ny=13, nx=14)
    op = QGOperator(base.levels, base.xi, base.eta, base.hx, base.hy, varying_sigma(base), base.fsq)
    r = np.random.default_rng(9).standard_normal(op.shape) * 1e-16
    with pytest.raises(ConvergenceError, match="maxiter=1") as exc:
        solve(r, op, tol=1e-14, maxiter=1)
    assert len(exc.value.residuals) >= 1 and exc.value.residuals[-1] > 0


# ---------------------------------------------------------------------------- floor_sigma
def test_floor_sigma_counts_and_floors():
    # source: definition (max(σ, floor), NaN kept)
    s = np.array([[3e-6, -1e-6], [5e-8, np.nan]])
    out, count = floor_sigma(s, 1e-7)
    assert count == 2
    np.testing.assert_array_equal(out[:1], [[3e-6, 1e-7]])
    assert out[1, 0] == 1e-7 and np.isnan(out[1, 1])
    assert s[0, 1] == -1e-6  # input untouched
    with pytest.raises(InputDataError, match="positive"):
        floor_sigma(s, 0.0)


# ---------------------------------------------------------------------------- error paths
def test_too_few_interior_points():
    # source: the brief's rule -- at least 3 interior points per axis
    p = levels(4)
    x = np.linspace(0, 1e6, 9)
    with pytest.raises(GridError, match="at least 3 interior points along the vertical"):
        QGOperator(p, x, x, 1.0, 1.0, sigma_of(p), F0**2)
    p = levels(9)
    with pytest.raises(GridError, match="along the x axis"):
        QGOperator(p, x[:4], x, 1.0, 1.0, sigma_of(p), F0**2)
    with pytest.raises(GridError, match="periodic"):
        QGOperator(p, np.arange(2) * np.pi, x, 1.0, 1.0, sigma_of(p), F0**2, periodic_x=True)


def test_negative_mean_sigma_names_the_level():
    p = np.array([1000.0, 850.0, 700.0, 500.0, 300.0, 200.0]) * 100
    s = sigma_of(p)
    s[3] = -1e-6
    x = np.linspace(0, 1e6, 9)
    with pytest.raises(InputDataError, match=r"<= 0 on level\(s\) 500 hPa"):
        QGOperator(p, x, x, 1.0, 1.0, s, F0**2)


def test_nan_in_rhs_names_the_level():
    p = np.array([1000.0, 850.0, 700.0, 500.0, 300.0, 200.0]) * 100
    x = np.linspace(0, 1e6, 9)
    op = QGOperator(p, x, x, 1.0, 1.0, sigma_of(p), F0**2)
    r = np.zeros(op.shape)
    r[2, 4, 4] = np.nan
    with pytest.raises(InputDataError, match=r"700 hPa.*(Fill|fill).*restrict"):
        solve(r, op)
    r = np.zeros(op.shape)
    r[0, 4, 4] = np.nan  # a boundary level: ignored
    solve(r, op)


def test_unknown_method_and_bad_workers():
    op = make_op("cartesian")
    r = np.zeros(op.shape)
    with pytest.raises(ValueError, match="'auto', 'separable', 'krylov'"):
        solve(r, op, method="multigrid")
    assert set(METHODS) == {"separable", "krylov"}
    with pytest.raises(ValueError, match="workers=0"):
        solve(r, op, workers=0)
    with pytest.raises(ValueError, match="counts back"):
        resolve_workers(-10_000)
    with pytest.raises(ValueError, match="tol"):
        solve(r, op, tol=0.0)


def test_other_input_errors():
    op = make_op("regional")
    with pytest.raises(InputDataError, match="shape"):
        solve(np.zeros((3, 3, 3)), op)
    bnd = np.zeros(op.shape)
    bnd[0, 0, 0] = np.nan
    with pytest.raises(InputDataError, match="boundary"):
        solve(np.zeros(op.shape), op, boundary=bnd)
    # separable solver refuses a horizontally varying σ, naming the way out
    opv = QGOperator(op.levels, op.xi, op.eta, op.hx, op.hy, varying_sigma(op), op.fsq)
    with pytest.raises(InputDataError, match="krylov"):
        SeparableSolver(opv)
    # a pole can only be a boundary row
    lat = np.deg2rad(np.linspace(-30.0, 90.0, 7))
    hx = A * np.cos(lat)
    hx[4] = 0.0
    with pytest.raises(GridError, match="pole"):
        QGOperator(op.levels, op.xi, lat, hx[:, None], A, op.sigma, F0**2)
    # periodic ξ must be uniform
    lon = np.sort(np.random.default_rng(0).uniform(0, 2 * np.pi, 12))
    with pytest.raises(GridError, match="uniform"):
        QGOperator(op.levels, lon, op.eta, op.hx, op.hy, op.sigma, F0**2, periodic_x=True)
    with pytest.raises(InputDataError, match="f squared"):
        QGOperator(op.levels, op.xi, op.eta, op.hx, op.hy, op.sigma, -F0**2)
