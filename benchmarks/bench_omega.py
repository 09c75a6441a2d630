"""Benchmarks of the omega solver (:mod:`qgforce.solver`); figures under the prefix ``omega.``.

Figures (every ratio measured side by side in one run):

``omega.direct_vs_transform_ratio``
    time of :func:`qgforce.solver.solve` (separable direct method, validation and the final
    residual included) on a global 0.25° grid of (25, 721, 1440) points ÷ time of one
    ``scipy.fft.rfft2`` + ``irfft2`` of an array of the same shape, same ``workers``.  Target ≤ 2.5.
``omega.peak_memory_ratio``
    peak memory allocated during the solve (output included; tracemalloc, to which numpy
    reports its buffers) ÷ the bytes of one (nz, ny, nx) float64 field.  Target < 6.
    ``omega.peak_memory_ratio_rss`` cross-checks it by sampling the resident set size.
``omega.amg_speedup``
    (smoothed-aggregation AMG from pyamg as preconditioner of CG, setup + solve, to the residual
    of the direct solve) ÷ (direct solve), at about 1.6 M unknowns on a symmetric configuration
    (Cartesian grid, f0, constant σ, uniform levels: the interior matrix is then symmetric and
    −L is positive definite).  Target ≥ 50.
``omega.sor_speedup``
    a vectorised red-black SOR (optimal relaxation factor of the model problem, written here only)
    on the same system ÷ direct solve.  SOR is run for a capped number of iterations; the
    iterations still needed are extrapolated from the convergence factor observed over the last
    iterations, and the key ``omega.sor_extrapolated`` says whether extrapolation was used.
``omega.scaling``
    [unknowns, seconds] of the direct solve on global grids from 0.1 M to 26 M unknowns;
    ``omega.scaling_growth`` is (time per unknown, largest ÷ smallest) ÷ (log N, largest ÷ smallest):
    ≤ 1 means time per unknown grows no faster than log N.

Run ``python benchmarks/bench_omega.py [--quick]``.  The full sizes need about 2 GB of memory.
"""

from __future__ import annotations

import os
import subprocess
import sys
import threading
import time
import tracemalloc

import numpy as np
import scipy.fft as sfft
import scipy.sparse as sps

from qgforce.constants import EARTH_ANGULAR_VELOCITY, EARTH_RADIUS
from qgforce.solver import QGOperator, apply_operator, solve

__all__ = ["run", "main"]

WORKERS = -1  # every core, for the solver's FFTs and for the reference transform alike
SIGMA0 = 2e-6  # m2 Pa-2 s-2 (science.md)
F0 = 1e-4  # s-1


# ---------------------------------------------------------------------------- problems
def global_operator(nz: int, ny: int, nx: int) -> QGOperator:
    """A global lat–lon operator: poles as boundary rows, periodic longitudes, σ(p), f(φ)."""
    p = np.linspace(1e5, 1e4, nz)
    lat = np.deg2rad(np.linspace(-90.0, 90.0, ny))
    lon = np.arange(nx) * 2 * np.pi / nx
    c = np.cos(lat)
    c[[0, -1]] = 0.0
    return QGOperator(
        p, lon, lat, (EARTH_RADIUS * c)[:, None], EARTH_RADIUS, SIGMA0 * (1e5 / p) ** 1.5,
        (2 * EARTH_ANGULAR_VELOCITY * np.sin(lat)) ** 2, periodic_x=True,
    )


def cartesian_operator(nz: int, n: int) -> QGOperator:
    """The symmetric configuration: Cartesian n × n grid of 25 km, f0, constant σ, uniform levels."""
    p = np.linspace(1e5, 1e4, nz)
    x = np.arange(n) * 25e3
    return QGOperator(p, x, x, 1.0, 1.0, np.full(nz, SIGMA0), F0**2)


def smooth_rhs(op: QGOperator, seed: int = 0) -> np.ndarray:
    """A forcing field of synoptic size (random, smoothed by a few sines), scaled like a QG forcing."""
    rng = np.random.default_rng(seed)
    nz, ny, nx = op.shape
    k = np.linspace(0, np.pi, nz)[:, None, None]
    j = np.linspace(0, np.pi, ny)[None, :, None]
    i = np.linspace(0, 2 * np.pi, nx, endpoint=False)[None, None, :]
    r = np.sin(k) * np.sin(3 * j) * np.cos(4 * i) + 0.1 * rng.standard_normal((nz, ny, nx))
    return r * 1e-17


def interior_matrix(op: QGOperator) -> sps.csr_matrix:
    """The interior operator of a uniform Cartesian σ-constant ``op`` as a sparse matrix (Kronecker sums).

    Built independently of the solver from the 1-D second differences [1, −2, 1]/h²; checked
    against :func:`apply_operator` by the caller.
    """
    nzi, nyi, nxi = op.interior_shape

    def second_difference(n, h):
        return sps.diags([np.ones(n - 1), -2 * np.ones(n), np.ones(n - 1)], [-1, 0, 1]) / h**2

    hz = abs(op.levels[1] - op.levels[0])
    hy = op.eta[1] - op.eta[0]
    hx = op.xi[1] - op.xi[0]
    Iz, Iy, Ix = (sps.identity(n) for n in (nzi, nyi, nxi))
    sigma = float(op.sigma[1])
    fsq = float(op.fsq.ravel()[0])
    A = sigma * (sps.kron(sps.kron(Iz, Iy), second_difference(nxi, hx))
                 + sps.kron(sps.kron(Iz, second_difference(nyi, hy)), Ix))
    A = A + fsq * sps.kron(sps.kron(second_difference(nzi, hz), Iy), Ix)
    return sps.csr_matrix(A)


# ---------------------------------------------------------------------------- measurements
def _time(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def direct_vs_transform(shape, repeat: int = 3) -> dict:
    """Best-of-``repeat`` times of the direct solve and of rfft2 + irfft2, interleaved."""
    op = global_operator(*shape)
    rhs = smooth_rhs(op)
    t_solve, t_fft = [], []
    info = None
    for _ in range(repeat):
        def run_solve():
            nonlocal info
            _, info = solve(rhs, op, workers=WORKERS)

        t_solve.append(_time(run_solve))

        def run_fft():
            spec = sfft.rfft2(rhs, workers=WORKERS)
            sfft.irfft2(spec, s=rhs.shape[-2:], workers=WORKERS)

        t_fft.append(_time(run_fft))
    return dict(solve=min(t_solve), fft=min(t_fft), residual=info.residual, unknowns=int(np.prod(op.interior_shape)))


def peak_memory(shape) -> dict:
    """Peak extra memory of one solve ÷ one field: tracemalloc, and RSS sampled every millisecond."""
    op = global_operator(*shape)
    rhs = smooth_rhs(op)
    field_bytes = rhs.nbytes
    solve(rhs, op, workers=WORKERS)  # warm caches (coefficients are per-operator)
    tracemalloc.start()
    base = tracemalloc.get_traced_memory()[0]
    tracemalloc.reset_peak()
    omega, _ = solve(rhs, op, workers=WORKERS)
    peak = tracemalloc.get_traced_memory()[1] - base
    tracemalloc.stop()
    del omega
    rss_ratio = _rss_in_subprocess(shape)
    return dict(ratio=peak / field_bytes, rss_ratio=rss_ratio)


def _rss_child(shape) -> float:
    """In a fresh process: (peak RSS during one solve − RSS before it) ÷ one field's bytes."""
    import psutil

    op = global_operator(*shape)
    rhs = smooth_rhs(op)
    op.separable, op._stencil  # derive the per-operator coefficients before the baseline
    proc = psutil.Process()
    samples = []
    done = threading.Event()

    def sampler():
        while not done.is_set():
            samples.append(proc.memory_info().rss)
            time.sleep(0.001)

    base = proc.memory_info().rss
    thread = threading.Thread(target=sampler, daemon=True)
    thread.start()
    omega, _ = solve(rhs, op, workers=WORKERS)
    done.set()
    thread.join()
    return (max(samples + [proc.memory_info().rss]) - base) / rhs.nbytes


def _rss_in_subprocess(shape):
    """Run :func:`_rss_child` in a new interpreter (freed memory of this one would hide the peak)."""
    try:
        import psutil  # noqa: F401
    except ImportError:  # psutil is in the bench extra; tracemalloc is the reported figure
        return None
    cmd = [sys.executable, os.path.abspath(__file__), "--rss-child", *map(str, shape)]
    done = subprocess.run(cmd, capture_output=True, text=True, check=True)
    return float(done.stdout.strip().splitlines()[-1])


def amg_comparison(nz: int, n: int) -> dict:
    """Direct solve vs pyamg smoothed-aggregation CG on the symmetric Cartesian problem."""
    import pyamg

    op = cartesian_operator(nz, n)
    rhs = smooth_rhs(op, seed=1)
    t_direct = min(_time(lambda: solve(rhs, op, workers=WORKERS)) for _ in range(3))
    omega, info = solve(rhs, op, workers=WORKERS)
    A = interior_matrix(op)
    b = np.ascontiguousarray(rhs[op.interior]).ravel()
    check = A @ omega[op.interior].ravel()
    assert np.linalg.norm(check - b) <= 1e-10 * np.linalg.norm(b), "sparse matrix and operator disagree"
    # −A is symmetric positive definite; scale rows and columns by one constant for conditioning
    scale = 1.0 / abs(A.diagonal()[0])
    S = (-A * scale).tocsr()
    rhs_s = -b * scale
    target = max(info.residual, 1e-13)
    t0 = time.perf_counter()
    ml = pyamg.smoothed_aggregation_solver(S, symmetry="symmetric", max_coarse=500)
    t_setup = time.perf_counter() - t0
    residuals: list = []
    t0 = time.perf_counter()
    x = ml.solve(rhs_s, tol=target, accel="cg", maxiter=500, residuals=residuals)
    t_solve = time.perf_counter() - t0
    achieved = float(np.linalg.norm(A @ x - b) / np.linalg.norm(b))
    return dict(
        unknowns=A.shape[0], direct=t_direct, direct_residual=info.residual, amg_setup=t_setup, amg_solve=t_solve,
        amg_iterations=len(residuals) - 1, amg_residual=achieved, target=target,
        speedup=(t_setup + t_solve) / t_direct, matrix=A, rhs=b, op=op,
    )


def red_black_sor(op: QGOperator, rhs_interior: np.ndarray, target: float, cap: int) -> dict:
    """Red-black SOR on the uniform Cartesian operator with the optimal factor of the model problem.

    Notes
    -----
    Seven-point stencil L u = c_x(u_E + u_W) + c_y(u_N + u_S) + c_z(u_U + u_D) − d u, d = 2(c_x+c_y+c_z).
    The Jacobi spectral radius is ρ_J = Σ 2 c_a cos(π/(n_a+1)) / d, and the optimal factor of SOR for
    a consistently ordered matrix (red-black is) ω = 2/(1 + √(1 − ρ_J²)) (Young 1971, Iterative Solution
    of Large Linear Systems, Academic Press, ch. 6).  Each colour is swept as four strided sub-lattices
    (every other point along each axis), so an iteration costs about one stencil application; the
    residual is computed every 10 iterations.
    """
    nzi, nyi, nxi = op.interior_shape
    hz = abs(op.levels[1] - op.levels[0])
    hx = op.xi[1] - op.xi[0]
    hy = op.eta[1] - op.eta[0]
    sigma = float(op.sigma[1])
    fsq = float(op.fsq.ravel()[0])
    cx, cy, cz = sigma / hx**2, sigma / hy**2, fsq / hz**2
    d = 2 * (cx + cy + cz)
    rho = 2 * sum(c * np.cos(np.pi / (n + 1)) for c, n in ((cx, nxi), (cy, nyi), (cz, nzi))) / d
    w_opt = 2.0 / (1.0 + np.sqrt(1.0 - rho**2))
    u = np.zeros((nzi + 2, nyi + 2, nxi + 2))
    f = rhs_interior
    inner = (slice(1, -1),) * 3
    res = np.empty((nzi, nyi, nxi))
    fnorm = float(np.linalg.norm(f))
    sizes = (nzi, nyi, nxi)

    def lattice(parity):
        """Slices of one of the 8 sub-lattices (every other point along each axis) and its neighbours."""
        centre = tuple(slice(q + 1, n + 1, 2) for q, n in zip(parity, sizes))
        minus = tuple(slice(q, n, 2) for q, n in zip(parity, sizes))
        plus = tuple(slice(q + 2, n + 2, 2) for q, n in zip(parity, sizes))
        shifted = []
        for axis in range(3):
            for side in (minus, plus):
                sl = list(centre)
                sl[axis] = side[axis]
                shifted.append(tuple(sl))
        return centre, shifted, tuple(slice(q, None, 2) for q in parity)

    parities = [(a, b, c) for a in (0, 1) for b in (0, 1) for c in (0, 1)]
    colours = [[lattice(q) for q in parities if sum(q) % 2 == colour] for colour in (0, 1)]
    coef = (cz, cz, cy, cy, cx, cx)

    def sweep_colour(cells):
        for centre, shifted, fsl in cells:
            acc = coef[0] * u[shifted[0]]
            for c, sl in zip(coef[1:], shifted[1:]):
                acc += c * u[sl]
            acc -= f[fsl]
            acc *= w_opt / d
            uc = u[centre]
            uc *= 1.0 - w_opt
            uc += acc  # u_c ← (1 − ω) u_c + ω (Σ c_a u_a − f_c)/d

    def residual_into(out):
        np.add(u[2:, 1:-1, 1:-1], u[:-2, 1:-1, 1:-1], out=out)
        out *= cz
        out += cy * (u[1:-1, 2:, 1:-1] + u[1:-1, :-2, 1:-1])
        out += cx * (u[1:-1, 1:-1, 2:] + u[1:-1, 1:-1, :-2])
        out -= d * u[inner]
        np.subtract(f, out, out=out)  # r = f − L u
        return out

    history = []
    t0 = time.perf_counter()
    it = 0
    while it < cap:
        sweep_colour(colours[0])  # red, then black with the new red values
        sweep_colour(colours[1])
        it += 1
        if it % 10 == 0:
            history.append((it, float(np.linalg.norm(residual_into(res))) / fnorm))
            if history[-1][1] <= target:
                break
    elapsed = time.perf_counter() - t0
    per_iteration = elapsed / it
    final = history[-1][1]
    extrapolated = final > target
    if extrapolated:
        back = max(1, len(history) // 4)
        (i0, r0), (i1, r1) = history[-1 - back], history[-1]
        factor = (r1 / r0) ** (1.0 / (i1 - i0))
        needed = it + np.log(target / r1) / np.log(factor) if factor < 1 else np.inf
    else:
        factor = None
        needed = it
    return dict(
        iterations_run=it, seconds_run=elapsed, residual_run=final, omega=w_opt, observed_factor=factor,
        theory_factor=w_opt - 1.0, iterations_needed=float(needed), seconds=float(needed * per_iteration),
        extrapolated=bool(extrapolated),
    )


def scaling(shapes, known: dict | None = None) -> list:
    """[unknowns, seconds] (best of a few runs) of the direct solve on global grids."""
    out = []
    for shape in shapes:
        if known and tuple(shape) in known:
            out.append(known[tuple(shape)])
            continue
        op = global_operator(*shape)
        rhs = smooth_rhs(op)
        n = int(np.prod(op.interior_shape))
        repeat = 5 if n < 2e6 else 2
        t = min(_time(lambda: solve(rhs, op, workers=WORKERS)) for _ in range(repeat))
        out.append([n, t])
    return out


# ---------------------------------------------------------------------------- driver
def run(quick: bool = False) -> dict:
    """Run every omega benchmark and return the figures (keys ``omega.*``).

    Parameters
    ----------
    quick : bool
        Small sizes (well under a minute): (25, 181, 360) for the transform ratio and memory,
        about 0.1 M unknowns for AMG and SOR, scaling up to 1.6 M unknowns.
    """
    if quick:
        big = (25, 181, 360)
        amg_size = (27, 64)
        sor_cap = 150
        shapes = [(25, 46, 90), (25, 91, 180), (25, 181, 360)]
    else:
        big = (25, 721, 1440)
        amg_size = (27, 255)  # 25 × 253 × 253 = 1.6 M interior unknowns
        sor_cap = 300
        shapes = [(25, 46, 90), (25, 91, 180), (25, 181, 360), (25, 361, 720), (25, 721, 1440)]
    figures: dict = {}
    dt = direct_vs_transform(big)
    figures["omega.direct_vs_transform_ratio"] = dt["solve"] / dt["fft"]
    figures["omega.direct_seconds"] = dt["solve"]
    figures["omega.transform_seconds"] = dt["fft"]
    figures["omega.direct_residual"] = dt["residual"]
    mem = peak_memory(big)
    figures["omega.peak_memory_ratio"] = mem["ratio"]
    figures["omega.peak_memory_ratio_rss"] = mem["rss_ratio"]
    amg = amg_comparison(*amg_size)
    figures["omega.amg_speedup"] = amg["speedup"]
    figures["omega.amg_unknowns"] = amg["unknowns"]
    figures["omega.amg_seconds"] = amg["amg_setup"] + amg["amg_solve"]
    figures["omega.amg_setup_seconds"] = amg["amg_setup"]
    figures["omega.amg_iterations"] = amg["amg_iterations"]
    figures["omega.amg_residual"] = amg["amg_residual"]
    figures["omega.amg_target_residual"] = amg["target"]
    figures["omega.amg_direct_seconds"] = amg["direct"]
    sor = red_black_sor(amg["op"], amg["rhs"].reshape(amg["op"].interior_shape), amg["target"], sor_cap)
    figures["omega.sor_speedup"] = sor["seconds"] / amg["direct"]
    figures["omega.sor_extrapolated"] = sor["extrapolated"]
    figures["omega.sor_iterations_run"] = sor["iterations_run"]
    figures["omega.sor_residual_run"] = sor["residual_run"]
    figures["omega.sor_iterations_needed"] = sor["iterations_needed"]
    figures["omega.sor_factor_observed"] = sor["observed_factor"]
    figures["omega.sor_factor_theory"] = sor["theory_factor"]
    known = {tuple(big): [dt["unknowns"], dt["solve"]]}
    table = scaling(shapes, known)
    figures["omega.scaling"] = table
    (n0, t0), (n1, t1) = table[0], table[-1]
    figures["omega.scaling_growth"] = ((t1 / n1) / (t0 / n0)) / (np.log(n1) / np.log(n0))
    return figures


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if argv[:1] == ["--rss-child"]:
        print(_rss_child(tuple(int(a) for a in argv[1:4])))
        return 0
    figures = run(quick="--quick" in argv)
    width = max(map(len, figures))
    for key, value in figures.items():
        if key == "omega.scaling":
            print(f"{key:<{width}}  unknowns      seconds   ns/unknown")
            for n, t in value:
                print(f"{'':<{width}}  {n:>10,d}  {t:9.3f}  {1e9 * t / n:9.1f}")
        elif isinstance(value, float):
            print(f"{key:<{width}}  {value:.4g}")
        else:
            print(f"{key:<{width}}  {value}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
