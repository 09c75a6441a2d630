"""Analytic cases with exact answers, for the tests, the self-check and users checking their own code.

Each case builds a normalised dataset (the same structure :func:`qgforce.open_dataset` returns)
at a chosen resolution together with the exact values of the diagnostics, written in closed form
with numpy (the test-suite re-derives the nontrivial closed forms with sympy).  Export one with
``case.to_netcdf(path)`` to check another program against the same numbers, and read it back
with :meth:`AnalyticCase.from_netcdf`.  :func:`list_cases` and :func:`get_case` give every case by
name; :func:`qgforce.selfcheck.run_selfcheck` runs them all against the library.

Cases
-----
:func:`deformation_frontogenesis`
    A pure deformation flow on a linear θ field whose isentropes make an angle β with the axis
    of dilatation: F = ½|∇θ| D cos 2β (Petterssen 1936).  Exact on the grid (linear fields).
:func:`convergence_frontogenesis`
    A pure convergence on a linear θ field: F = −½|∇θ|δ.  Exact on the grid.
:func:`deformation_q_vector`
    Geostrophic pure deformation on a linear temperature field: the uniform Q-vector of
    Hoskins, Draghici & Davies (1978), its across- and along-isentrope parts, ∇·Q = 0.
    Exact on the grid (quadratic geopotential, linear temperature).
:func:`manufactured_omega_cartesian`
    Constant σ and f0, ω a product of sines (cosines) in x, y and p, the right-hand side in
    closed form: the inversion alone, converging at second order.
:func:`manufactured_omega_sphere`
    The same on a periodic latitude band of the sphere with the local f(φ) and the exact
    spherical Laplacian.
:func:`spherical_harmonic_laplacian`
    A spherical harmonic Y_l^m on a global grid with pole rows: ∇²Y = −l(l+1)Y/a².
:func:`baroclinic_wave`
    A single-mode wave on a β-plane channel in a uniformly sheared westerly flow with constant
    static stability: the two omega right-hand sides, their terms and the exact QG ω.

References
----------
Holton, J. R. and G. J. Hakim, 2013: *An Introduction to Dynamic Meteorology*, 5th ed., §6.4
(the traditional and Q-vector omega equations).
Hoskins, B. J., I. Draghici and H. C. Davies, 1978: A new look at the ω-equation. *QJRMS*, 104, 31–38.
Keyser, D., M. J. Reeder and R. J. Reed, 1988: A generalization of Petterssen's frontogenesis
function and its relation to the forcing of vertical motion. *Mon. Wea. Rev.*, 116, 762–780.
Petterssen, S., 1936: Contribution to the theory of frontogenesis. *Geofys. Publ.*, 11(6), 1–27.
Roache, P. J., 2002: Code verification by the method of manufactured solutions.
*J. Fluids Eng.*, 124, 4–10.
Arfken, G. B. and H. J. Weber, 2005: *Mathematical Methods for Physicists*, 6th ed., §12.6
(spherical harmonics are eigenfunctions of the Laplacian on the sphere).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from . import constants as C
from .errors import QGForceError

__all__ = [
    # the case object and dataset builders
    "AnalyticCase",
    "cartesian_dataset",
    "spherical_dataset",
    # frontogenesis and Q-vectors (exact on linear fields)
    "deformation_frontogenesis",
    "convergence_frontogenesis",
    "deformation_q_vector",
    # the omega inversion
    "manufactured_omega_cartesian",
    "manufactured_omega_sphere",
    "baroclinic_wave",
    # calculus on the sphere
    "spherical_harmonic_laplacian",
    # by name
    "list_cases",
    "get_case",
]

_LEVEL_ATTRS = {"units": "Pa", "standard_name": "air_pressure", "positive": "down"}
_UNITS = {"temperature": "K", "geopotential": "m2 s-2", "u": "m s-1", "v": "m s-1"}
_FRONT_LEVELS = (85000.0, 70000.0, 50000.0)


@dataclass
class AnalyticCase:
    """An analytic case: a normalised dataset and the exact values of some diagnostics.

    Attributes
    ----------
    name : str
    source : str
        Where the closed forms come from.
    ds : xarray.Dataset
        Normalised input dataset.
    exact : dict of str → xarray.DataArray
        Exact diagnostics on the same grid (names as in :mod:`qgforce.forcing` / :mod:`qgforce.omega`).
    options : dict
        The keyword options the diagnostics must be called with for the exact answers to hold.
    scales : dict of str → float
        The error scale of an exact field that may vanish identically (for example the
        divergence part of frontogenesis in a pure deformation); a field not listed is scaled by
        its own max |exact| (see :meth:`error_scale`).
    """

    name: str
    source: str
    ds: xr.Dataset
    exact: dict = field(default_factory=dict)
    options: dict = field(default_factory=dict)
    scales: dict = field(default_factory=dict)

    def error_scale(self, key: str) -> float:
        """The scale of the relative error of ``exact[key]``: ``scales[key]`` or max |exact[key]|.

        Raises
        ------
        QGForceError
            If ``key`` is not an exact field of the case, or its scale would be zero.
        """
        if key not in self.exact:
            raise QGForceError(f"case {self.name!r} has no exact field {key!r}; it has {', '.join(self.exact)}")
        scale = float(self.scales.get(key, np.nanmax(np.abs(self.exact[key].values))))
        if not scale > 0:
            raise QGForceError(f"case {self.name!r}: the exact {key!r} vanishes identically and no error scale is given")
        return scale

    def prescribed_rhs(self) -> xr.Dataset:
        """The exact right-hand side as the ``rhs`` argument of :func:`qgforce.omega.invert_omega`.

        One term, ``prescribed_forcing``, and the total ``rhs_total`` (both = ``exact["rhs_total"]``),
        with the attrs the inversion reads (``qgforce_terms``), so that
        ``invert_omega(case.ds, rhs=case.prescribed_rhs(), **case.options)["omega_total"]`` checks
        the inversion alone against ``exact["omega_total"]``.

        Returns
        -------
        xarray.Dataset

        Raises
        ------
        QGForceError
            If the case has no exact ``rhs_total``.
        """
        if "rhs_total" not in self.exact:
            raise QGForceError(
                f"case {self.name!r} has no exact right-hand side ('rhs_total'); the omega cases have one: "
                f"{', '.join(n for n in list_cases() if 'omega' in n or n == 'baroclinic_wave')}"
            )
        rhs = self.exact["rhs_total"].assign_attrs(units="Pa-1 s-3", long_name=f"exact right-hand side of the case {self.name}")
        return xr.Dataset({"prescribed_forcing": rhs.rename("prescribed_forcing"), "rhs_total": rhs.rename("rhs_total")},
                          attrs={"qgforce_terms": "prescribed_forcing", "qgforce_smoothing": "none"})

    def to_netcdf(self, path) -> None:
        """Write the inputs and the exact answers (prefixed ``exact_``) to one NetCDF file.

        The options go to the global attribute ``qgforce_case_options`` (JSON) and the error
        scales to ``qgforce_error_scale`` on their exact variables; :meth:`from_netcdf` reads
        the file back into an equal case.
        """
        out = self.ds.copy()
        for k, v in self.exact.items():
            out[f"exact_{k}"] = v.assign_attrs(qgforce_error_scale=float(self.scales[k])) if k in self.scales else v
        out.attrs.update(title=f"qgforce analytic case: {self.name}", source=self.source)
        out.attrs.update(qgforce_case_name=self.name, qgforce_case_options=json.dumps(self.options, sort_keys=True))
        out.to_netcdf(path)

    @classmethod
    def from_netcdf(cls, path) -> "AnalyticCase":
        """Read a case written by :meth:`to_netcdf`.

        Raises
        ------
        QGForceError
            If the file was not written by :meth:`to_netcdf` (no ``qgforce_case_name`` attribute).
        """
        with xr.open_dataset(path) as f:
            data = f.load()
        attrs = dict(data.attrs)
        if "qgforce_case_name" not in attrs:
            raise QGForceError(
                f"{path} is not a qgforce analytic case file (no 'qgforce_case_name' attribute); "
                f"write one with AnalyticCase.to_netcdf"
            )
        name = attrs.pop("qgforce_case_name")
        source = attrs.pop("source", "")
        options = json.loads(attrs.pop("qgforce_case_options", "{}"))
        attrs.pop("title", None)
        exact, scales = {}, {}
        for v in [v for v in data.data_vars if str(v).startswith("exact_")]:
            key = str(v)[len("exact_"):]
            da = data[v].rename(None)
            if "qgforce_error_scale" in da.attrs:
                scales[key] = float(da.attrs["qgforce_error_scale"])
                da.attrs = {a: b for a, b in da.attrs.items() if a != "qgforce_error_scale"}
            exact[key] = da
        ds = data.drop_vars([f"exact_{k}" for k in exact])
        ds.attrs = attrs
        return cls(name=name, source=source, ds=ds, exact=exact, options=options, scales=scales)


# ============================================================================ dataset builders
def cartesian_dataset(x, y, levels, fields: dict, latitude0: float = 45.0, radius: float = C.EARTH_RADIUS) -> xr.Dataset:
    """A normalised dataset on a Cartesian (f- or β-plane) grid.

    Dims (level, y, x); 2-D latitude = φ0 + y/a (degrees), longitude = x/(a cos φ0) (degrees),
    and a ``map_factor`` coordinate of ones, so :class:`qgforce.Grid` has hx = hy = 1 and the local
    f = 2Ω sin φ varies with y only (a β-plane with β = 2Ω cos φ / a).
    """
    X, Y = np.meshgrid(x, y)
    lat = latitude0 + np.rad2deg(Y / radius)
    lon = np.rad2deg(X / (radius * np.cos(np.deg2rad(latitude0))))
    coords = {
        "level": ("level", np.asarray(levels, dtype=float), {"units": "Pa", "standard_name": "air_pressure", "positive": "down"}),
        "y": ("y", np.asarray(y, dtype=float), {"units": "m", "standard_name": "projection_y_coordinate"}),
        "x": ("x", np.asarray(x, dtype=float), {"units": "m", "standard_name": "projection_x_coordinate"}),
        "latitude": (("y", "x"), lat, {"units": "degrees_north", "standard_name": "latitude"}),
        "longitude": (("y", "x"), lon, {"units": "degrees_east", "standard_name": "longitude"}),
        "map_factor": (("y", "x"), np.ones_like(lat), {"units": "1", "long_name": "map factor"}),
    }
    units = {"temperature": "K", "geopotential": "m2 s-2", "u": "m s-1", "v": "m s-1"}
    data = {k: (("level", "y", "x"), np.asarray(v, dtype=float), {"units": units.get(k, "1")}) for k, v in fields.items()}
    for k in ("u", "v"):
        if k in data:
            data[k][2]["wind_relative_to"] = "grid"
    return xr.Dataset(data, coords=coords, attrs={"qgforce_grid": "projected"})


def spherical_dataset(latitude, longitude, levels, fields: dict) -> xr.Dataset:
    """A normalised dataset on a latitude–longitude grid.

    Parameters
    ----------
    latitude, longitude : array_like
        Degrees north (strictly increasing) and east (strictly increasing, no duplicated wrap
        column: a grid spanning 360° with uniform spacing is periodic).
    levels : array_like
        Pressures [Pa], strictly decreasing.
    fields : dict of str → array_like
        Values broadcastable to (level, latitude, longitude); units from the variable name
        (``temperature`` K, ``geopotential`` m2 s-2, ``u``/``v`` m s-1, else ``"1"``).

    Returns
    -------
    xarray.Dataset
        Dims (level, latitude, longitude).
    """
    lat = np.asarray(latitude, dtype=float)
    lon = np.asarray(longitude, dtype=float)
    p = np.asarray(levels, dtype=float)
    coords = {
        "level": ("level", p, dict(_LEVEL_ATTRS)),
        "latitude": ("latitude", lat, {"units": "degrees_north", "standard_name": "latitude"}),
        "longitude": ("longitude", lon, {"units": "degrees_east", "standard_name": "longitude"}),
    }
    shape = (p.size, lat.size, lon.size)
    data = {k: (("level", "latitude", "longitude"), np.broadcast_to(np.asarray(v, dtype=float), shape).copy(),
                {"units": _UNITS.get(k, "1")}) for k, v in fields.items()}
    return xr.Dataset(data, coords=coords, attrs={"qgforce_grid": "latlon"})


def _exact_like(ds: xr.Dataset, values, units: str, long_name: str) -> xr.DataArray:
    """An exact field on the (level, horizontal) grid of ``ds``, broadcast from ``values``."""
    ref = ds[next(iter(ds.data_vars))]
    return xr.DataArray(np.broadcast_to(np.asarray(values, dtype=float), ref.shape).copy(), coords=ref.coords,
                        dims=ref.dims, attrs={"units": units, "long_name": long_name})


def _basic_state(P, sigma0: float, p_bottom: float, t_bottom: float = 288.0, surface: float | None = None):
    """T_b(p) and Φ_b(p) of a resting atmosphere of constant static stability σ0.

    T_b = c p^κ − σ0 p² / (R (2 − κ)) gives −(R T_b/(p θ_b)) ∂θ_b/∂p = σ0 exactly, and
    Φ_b = −R (c p^κ/κ − σ0 p² / (2R(2 − κ))) + const is hydrostatic (∂Φ_b/∂p = −R T_b/p); c is
    set by T_b(p_bottom) = t_bottom.  With ``surface`` [Pa] the constant makes Φ_b(surface) = 0
    (geopotential of the usual size; less round-off in its derivatives), else it is zero.
    """
    R, kappa = C.DRY_AIR_GAS_CONSTANT, C.KAPPA
    c = (t_bottom + sigma0 * p_bottom**2 / (R * (2 - kappa))) / p_bottom**kappa

    def phi(p):
        return -R * (c * p**kappa / kappa - sigma0 * p**2 / (2 * R * (2 - kappa)))

    Tb = c * P**kappa - sigma0 * P**2 / (R * (2 - kappa))
    Phib = phi(P) if surface is None else phi(P) - phi(float(surface))
    return Tb, Phib


def _levels(nlev, n, p_bottom, p_top) -> np.ndarray:
    """Uniform levels from p_bottom to p_top; ``nlev`` defaults to n/2 + 1 (refined with n)."""
    nlev = n // 2 + 1 if nlev is None else int(nlev)
    if nlev < 5:
        raise QGForceError(f"the omega cases need at least 5 levels (3 interior); found nlev={nlev}")
    return np.linspace(p_bottom, p_top, nlev)


def _deformation_wind(X, Y, deformation: float, axis: float):
    """Pure deformation D with its axis of dilatation at angle ``axis`` [rad] from x.

    u = (D/2)(x cos 2α + y sin 2α), v = (D/2)(x sin 2α − y cos 2α): E = D cos 2α, S = D sin 2α, δ = ζ = 0.
    """
    c2, s2 = np.cos(2 * axis), np.sin(2 * axis)
    return 0.5 * deformation * (X * c2 + Y * s2), 0.5 * deformation * (X * s2 - Y * c2)


def _wrap_half_turn(deg: float) -> float:
    """An orientation [degrees] in (−90, 90]."""
    b = float(np.mod(deg, 180.0))
    return b - 180.0 if b > 90.0 else b


# ============================================================================ frontogenesis
def _linear_front(n, *, deformation, divergence, axis_deg, isentrope_deg, theta_gradient, translation, levels,
                  half_width, latitude0, name, source):
    """A linear wind (deformation + divergence + translation) acting on a linear θ field.

    F = ½|∇θ| (D cos 2β − δ) exactly, with β = isentrope angle − dilatation-axis angle.
    """
    if n < 3:
        raise QGForceError(f"the frontogenesis cases need n >= 3 grid intervals; found n={n}")
    if deformation < 0:
        raise QGForceError(
            f"the total deformation D is non-negative; found {deformation}. Turn the axis of dilatation by 90° "
            f"(axis_deg) instead of changing the sign of D"
        )
    x = np.linspace(-half_width, half_width, n + 1)
    y = np.linspace(-half_width, half_width, n + 1)
    p = np.asarray(levels, dtype=float)
    P, Y, X = p[:, None, None], y[None, :, None], x[None, None, :]
    alpha, iso = np.deg2rad(axis_deg), np.deg2rad(isentrope_deg)
    ud, vd = _deformation_wind(X, Y, deformation, alpha)
    u = translation[0] + ud + 0.5 * divergence * X + 0 * P
    v = translation[1] + vd + 0.5 * divergence * Y + 0 * P
    G = theta_gradient
    theta = 290.0 + 30.0 * (1.0 - P / C.REFERENCE_PRESSURE) + G * (-X * np.sin(iso) + Y * np.cos(iso))
    temp = theta * (P / C.REFERENCE_PRESSURE) ** C.KAPPA
    ds = cartesian_dataset(x, y, p, {"temperature": temp, "u": u, "v": v}, latitude0)
    beta = np.deg2rad(isentrope_deg - axis_deg)
    f_def = 0.5 * G * deformation * np.cos(2 * beta)
    f_div = -0.5 * G * divergence
    unit = "K m-1 s-1"
    exact = {
        "frontogenesis": _exact_like(ds, f_def + f_div, unit, "exact 2-D frontogenesis, 1/2 |grad theta| (D cos 2 beta - div)"),
        "frontogenesis_deformation": _exact_like(ds, f_def, unit, "exact deformation part, 1/2 |grad theta| D cos 2 beta"),
        "frontogenesis_divergence": _exact_like(ds, f_div, unit, "exact divergence part, -1/2 |grad theta| div"),
        "potential_temperature_gradient": _exact_like(ds, G, "K m-1", "exact |grad theta|"),
    }
    scale = 0.5 * G * (abs(deformation) + abs(divergence))
    scales = {k: scale for k in ("frontogenesis", "frontogenesis_deformation", "frontogenesis_divergence")}
    angle = _wrap_half_turn(isentrope_deg - axis_deg)
    if deformation != 0 and abs(angle) < 89.999:  # at ±90° the (−90, 90] range wraps: no exact value to compare
        exact["isentrope_dilatation_angle"] = _exact_like(
            ds, angle, "degree", "exact angle from the dilatation axis to the isentropes")
        scales["isentrope_dilatation_angle"] = 90.0
    return AnalyticCase(name=name, source=source, ds=ds, exact=exact, options={"wind": "full"}, scales=scales)


def deformation_frontogenesis(
    n: int = 16,
    beta_deg: float = 30.0,
    *,
    axis_deg: float = 20.0,
    deformation: float = 1.0e-5,
    theta_gradient: float = 1.0e-5,
    translation: tuple = (8.0, -3.0),
    levels=_FRONT_LEVELS,
    half_width: float = 1.0e6,
    latitude0: float = 45.0,
) -> AnalyticCase:
    """Pure deformation acting on a linear potential-temperature field (Petterssen 1936).

    Parameters
    ----------
    n : int
        Grid intervals in x and in y (the grid has n + 1 points each way).
    beta_deg : float
        β, the angle [degrees] from the axis of dilatation to the isentropes (anticlockwise).
    axis_deg : float
        Angle of the axis of dilatation from the x-axis [degrees].
    deformation : float
        Total deformation D [s-1] (≥ 0).
    theta_gradient : float
        |∇θ| [K m-1], the same on every level.
    translation : (float, float)
        A uniform wind (u0, v0) [m s-1] added to the flow (frontogenesis is Galilean invariant).
    levels : sequence of float
        Pressures [Pa], decreasing (θ = T (p0/p)^κ uses the pressure of each level).
    half_width : float
        The domain is |x|, |y| ≤ half_width [m].
    latitude0 : float
        Centre latitude of the Cartesian grid.

    Returns
    -------
    AnalyticCase
        ``exact``: ``frontogenesis`` = ``frontogenesis_deformation`` = ½|∇θ| D cos 2β,
        ``frontogenesis_divergence`` = 0, ``isentrope_dilatation_angle`` = β wrapped to
        (−90, 90] (omitted at |β| = 90°), ``potential_temperature_gradient`` = |∇θ|; uniform.
        ``options``: ``{"wind": "full"}`` for :func:`qgforce.forcing.frontogenesis`.
        ``scales``: ½|∇θ|D for the frontogenesis fields (they vanish at β = 45°), 90° for the angle.

    Notes
    -----
    With α the dilatation-axis angle, u = u0 + (D/2)(x cos 2α + y sin 2α), v = v0 + (D/2)(x sin 2α −
    y cos 2α) (stretching E = D cos 2α, shearing S = D sin 2α, δ = ζ = 0), and
    θ = θ_b(p) + |∇θ| (−x sin(α + β) + y cos(α + β)), whose isentropes lie at α + β from x, with
    θ_b = 290 K + 30 K (1 − p/p0) and T = θ (p/p0)^κ.
    Petterssen's F = −(1/|∇θ|)[θx(ux θx + vx θy) + θy(uy θx + vy θy)] is then ½|∇θ| D cos 2β
    everywhere: frontogenetic for |β| < 45°.  Every field is linear in x and y, so the library's
    second-order differences are exact: the check is the error at round-off, not an order.
    """
    return _linear_front(n, deformation=deformation, divergence=0.0, axis_deg=axis_deg, isentrope_deg=axis_deg + beta_deg,
                         theta_gradient=theta_gradient, translation=translation, levels=levels, half_width=half_width,
                         latitude0=latitude0, name="deformation_frontogenesis",
                         source="Petterssen (1936): F = 1/2 |grad theta| D cos 2 beta; Keyser, Reeder & Reed (1988)")


def convergence_frontogenesis(
    n: int = 16,
    divergence: float = -1.0e-5,
    *,
    orientation_deg: float = 35.0,
    theta_gradient: float = 1.0e-5,
    translation: tuple = (8.0, -3.0),
    levels=_FRONT_LEVELS,
    half_width: float = 1.0e6,
    latitude0: float = 45.0,
) -> AnalyticCase:
    """Pure convergence (or divergence) acting on a linear potential-temperature field.

    Parameters
    ----------
    n : int
        Grid intervals in x and in y.
    divergence : float
        δ [s-1]; negative is convergence (frontogenetic).
    orientation_deg : float
        Angle of the isentropes from the x-axis [degrees] (F does not depend on it).
    theta_gradient, translation, levels, half_width, latitude0
        As in :func:`deformation_frontogenesis`.

    Returns
    -------
    AnalyticCase
        ``exact``: ``frontogenesis`` = ``frontogenesis_divergence`` = −½|∇θ|δ,
        ``frontogenesis_deformation`` = 0, ``potential_temperature_gradient`` = |∇θ|.  The
        dilatation angle is undefined (D = 0) and not compared.  ``options``: ``{"wind": "full"}``.

    Notes
    -----
    u = u0 + (δ/2) x, v = v0 + (δ/2) y (isotropic: E = S = 0), so F = ½|∇θ|(D cos 2β − δ) =
    −½|∇θ|δ for every orientation of the isentropes (Petterssen 1936).  Linear fields: exact
    on the grid.
    """
    return _linear_front(n, deformation=0.0, divergence=divergence, axis_deg=0.0, isentrope_deg=orientation_deg,
                         theta_gradient=theta_gradient, translation=translation, levels=levels, half_width=half_width,
                         latitude0=latitude0, name="convergence_frontogenesis",
                         source="Petterssen (1936): F = -1/2 |grad theta| div V")


# ============================================================================ Q-vectors
def deformation_q_vector(
    n: int = 16,
    beta_deg: float = 30.0,
    *,
    axis_deg: float = 20.0,
    deformation: float = 1.0e-5,
    temperature_gradient: float = 1.0e-5,
    levels=_FRONT_LEVELS,
    half_width: float = 1.0e6,
    latitude0: float = 45.0,
    sigma0: float = 2.0e-6,
) -> AnalyticCase:
    """Geostrophic pure deformation on a linear temperature field: the exact, uniform Q-vector.

    Parameters
    ----------
    n : int
        Grid intervals in x and in y.
    beta_deg : float
        Angle from the axis of dilatation to the isotherms [degrees].
    axis_deg : float
        Angle of the axis of dilatation from the x-axis [degrees].
    deformation : float
        D [s-1] of the geostrophic wind.
    temperature_gradient : float
        |∇T| [K m-1] on every level.
    levels, half_width, latitude0
        As in :func:`deformation_frontogenesis`.
    sigma0 : float
        Static stability of the resting basic state T_b(p) [m2 Pa-2 s-2].

    Returns
    -------
    AnalyticCase
        ``exact``: ``q_vector_x``, ``q_vector_y``, ``qn_x``, ``qn_y``, ``qs_x``, ``qs_y``
        [m Pa-1 s-3], ``q_vector_forcing`` = ``qn_forcing`` = ``qs_forcing`` = 0 [Pa-1 s-3].
        ``options``: ``{"coriolis": "f0", "f0_latitude": latitude0}`` for
        :func:`qgforce.forcing.q_vectors`.  ``scales``: |Q| at the top level for the components;
        |Q|/Δx for the forcings (they vanish: the divergence a one-grid-length change of Q gives).

    Notes
    -----
    Geopotential (hydrostatic, with f0 = 2Ω sin φ0):

        Φ = Φ_b(p) − R ln(p/p0) T′ + f0 (D/2) [½(x² − y²) sin 2α − x y cos 2α],
        T = T_b(p) + T′,  T′ = |∇T| (x cos ψ + y sin ψ),  ψ = α + β + 90°,

    so V_g = (1/f0) k × ∇Φ is the pure deformation of :func:`deformation_frontogenesis` plus a
    uniform thermal wind, ∂V_g/∂x = (D/2)(cos 2α, sin 2α), ∂V_g/∂y = (D/2)(sin 2α, −cos 2α), and
    Q = −(R/p)(∂V_g/∂x·∇T, ∂V_g/∂y·∇T) (Hoskins, Draghici & Davies 1978) is uniform on each level:

        Q = −(R/p)(D/2)|∇T| (cos(2α − ψ), sin(2α − ψ)),
        Q·n̂ = (R/p)(D/2)|∇T| cos 2β,  Q·ŝ = −(R/p)(D/2)|∇T| sin 2β,

    with n̂ = ∇T/|∇T| and ŝ = k × n̂ (Keyser, Reeder & Reed 1988).  For |β| < 45° Q_n points up
    the temperature gradient (toward the warm air: a thermally direct circulation), and
    Q·n̂ = (R/p)(p/p0)^κ F_g with F_g the geostrophic frontogenesis ½|∇θ| D cos 2β.  ∇·Q = 0.
    Φ is quadratic and T linear in x and y: exact on the grid (round-off check).  The round-off
    grows with n (V_g and its gradient are first and second differences of a Φ whose level value
    is about 100 times its deformation part), to about 1e-11 of |Q| at n = 32.
    """
    if n < 3:
        raise QGForceError(f"deformation_q_vector needs n >= 3 grid intervals; found n={n}")
    R = C.DRY_AIR_GAS_CONSTANT
    x = np.linspace(-half_width, half_width, n + 1)
    y = np.linspace(-half_width, half_width, n + 1)
    p = np.asarray(levels, dtype=float)
    P, Y, X = p[:, None, None], y[None, :, None], x[None, None, :]
    f0 = 2 * C.EARTH_ANGULAR_VELOCITY * np.sin(np.deg2rad(latitude0))
    alpha = np.deg2rad(axis_deg)
    psi = alpha + np.deg2rad(beta_deg) + 0.5 * np.pi
    G = temperature_gradient
    Tb, Phib = _basic_state(P, sigma0, float(p.max()), surface=C.REFERENCE_PRESSURE)
    tprime = G * (X * np.cos(psi) + Y * np.sin(psi))
    log_p = np.log(P / C.REFERENCE_PRESSURE)
    c2, s2 = np.cos(2 * alpha), np.sin(2 * alpha)
    phi = Phib - R * log_p * tprime + f0 * 0.5 * deformation * (0.5 * (X * X - Y * Y) * s2 - X * Y * c2)
    temp = Tb + tprime
    ud, vd = _deformation_wind(X, Y, deformation, alpha)
    u = ud + (R * log_p * G / f0) * np.sin(psi)  # -(1/f0) dPhi/dy
    v = vd - (R * log_p * G / f0) * np.cos(psi)  # (1/f0) dPhi/dx
    ds = cartesian_dataset(x, y, p, {"temperature": temp, "geopotential": phi, "u": u, "v": v}, latitude0)
    amp = -(R / P) * 0.5 * deformation * G
    qx, qy = amp * np.cos(2 * alpha - psi), amp * np.sin(2 * alpha - psi)
    nx, ny = np.cos(psi), np.sin(psi)
    qn, qs = qx * nx + qy * ny, -qx * ny + qy * nx  # Q·n̂, Q·ŝ with ŝ = (−sin ψ, cos ψ)
    qu = "m Pa-1 s-3"
    exact = {
        "q_vector_x": _exact_like(ds, qx, qu, "exact Q-vector, x"),
        "q_vector_y": _exact_like(ds, qy, qu, "exact Q-vector, y"),
        "qn_x": _exact_like(ds, qn * nx, qu, "exact (Q.n)n, x"),
        "qn_y": _exact_like(ds, qn * ny, qu, "exact (Q.n)n, y"),
        "qs_x": _exact_like(ds, -qs * ny, qu, "exact (Q.s)s, x"),
        "qs_y": _exact_like(ds, qs * nx, qu, "exact (Q.s)s, y"),
    }
    for k in ("q_vector_forcing", "qn_forcing", "qs_forcing"):
        exact[k] = _exact_like(ds, 0.0, "Pa-1 s-3", f"exact {k} (uniform Q: zero divergence)")
    qmax = float(np.abs(amp).max())
    scales = {k: qmax for k in ("q_vector_x", "q_vector_y", "qn_x", "qn_y", "qs_x", "qs_y")}
    dx = x[1] - x[0]
    scales.update({k: qmax / dx for k in ("q_vector_forcing", "qn_forcing", "qs_forcing")})
    return AnalyticCase(
        name="deformation_q_vector",
        source="Hoskins, Draghici & Davies (1978): Q of geostrophic deformation; partition of Keyser, Reeder & Reed (1988)",
        ds=ds,
        exact=exact,
        options={"coriolis": "f0", "f0_latitude": float(latitude0)},
        scales=scales,
    )


# ============================================================================ omega: manufactured solutions
def manufactured_omega_cartesian(
    n: int = 16,
    nlev: int | None = None,
    *,
    amplitude: float = -0.5,
    sigma0: float = 2.0e-6,
    length: float = 3.0e6,
    latitude0: float = 45.0,
    p_bottom: float = 100000.0,
    p_top: float = 20000.0,
) -> AnalyticCase:
    """A manufactured QG ω on a Cartesian grid with constant σ and f0.

    Parameters
    ----------
    n : int
        Grid intervals in x and in y.
    nlev : int, optional
        Number of uniform levels; default n/2 + 1, so the vertical grid is refined with n.
    amplitude : float
        W [Pa s-1], the central value of ω (negative: ascent).
    sigma0 : float
        The static stability of the dataset's basic state [m2 Pa-2 s-2].
    length : float
        The side L of the square domain |x|, |y| ≤ L/2 [m].
    latitude0 : float
        Latitude of f0 = 2Ω sin φ0 (and the grid centre).
    p_bottom, p_top : float
        Bottom and top pressures [Pa], where ω = 0.

    Returns
    -------
    AnalyticCase
        ``exact``: ``omega_total`` and ``rhs_total``.  ``options``: ``{"coriolis": "f0",
        "f0_latitude": latitude0, "sigma": "mean"}`` for :func:`qgforce.omega.invert_omega`,
        called with ``rhs=case.prescribed_rhs()``.

    Notes
    -----
    ω = W cos(πx/L) cos(πy/L) sin(π(p − p_t)/Δp) with Δp = p_b − p_t vanishes on every boundary,
    and σ0 ∇²ω + f0² ∂²ω/∂p² = −[2π²σ0/L² + f0²π²/Δp²] ω (the method of manufactured
    solutions, Roache 2002).  The temperature is the resting state of constant static stability
    σ0 (:func:`baroclinic_wave`), so the σ the inversion computes from it tends to σ0 at second order.
    """
    x = np.linspace(-0.5 * length, 0.5 * length, n + 1)
    y = x.copy()
    p = _levels(nlev, n, p_bottom, p_top)
    P, Y, X = p[:, None, None], y[None, :, None], x[None, None, :]
    f0 = 2 * C.EARTH_ANGULAR_VELOCITY * np.sin(np.deg2rad(latitude0))
    depth = p_bottom - p_top
    Tb, Phib = _basic_state(P, sigma0, p_bottom, surface=p_bottom)
    ds = cartesian_dataset(x, y, p, {"temperature": Tb + 0 * X * Y, "geopotential": Phib + 0 * X * Y}, latitude0)
    k = np.pi / length
    m = np.pi / depth
    omega = amplitude * np.cos(k * X) * np.cos(k * Y) * np.sin(m * (P - p_top))
    rhs = -(2 * k * k * sigma0 + f0 * f0 * m * m) * omega
    exact = {
        "omega_total": _exact_like(ds, omega, "Pa s-1", "manufactured QG omega"),
        "rhs_total": _exact_like(ds, rhs, "Pa-1 s-3", "right-hand side of the manufactured QG omega"),
    }
    return AnalyticCase(
        name="manufactured_omega_cartesian",
        source="manufactured solution (Roache 2002) of sigma lap(w) + f0^2 d2w/dp2 = RHS, constant sigma and f0",
        ds=ds,
        exact=exact,
        options={"coriolis": "f0", "f0_latitude": float(latitude0), "sigma": "mean"},
    )


def manufactured_omega_sphere(
    n: int = 16,
    nlev: int | None = None,
    *,
    nlon: int | None = None,
    zonal_wavenumber: int = 3,
    amplitude: float = -0.5,
    sigma0: float = 2.0e-6,
    lat_south: float = 25.0,
    lat_north: float = 65.0,
    p_bottom: float = 100000.0,
    p_top: float = 20000.0,
) -> AnalyticCase:
    """A manufactured QG ω on a periodic latitude band of the sphere, with the local f(φ).

    Parameters
    ----------
    n : int
        Latitude intervals (n + 1 rows from ``lat_south`` to ``lat_north``).
    nlev : int, optional
        Number of uniform levels; default n/2 + 1.
    nlon : int, optional
        Longitudes (uniform, periodic); default 2n.
    zonal_wavenumber : int
        m of cos(mλ).
    amplitude, sigma0, p_bottom, p_top
        As in :func:`manufactured_omega_cartesian`.
    lat_south, lat_north : float
        The band's edges [degrees], where ω = 0.

    Returns
    -------
    AnalyticCase
        ``exact``: ``omega_total`` and ``rhs_total``.  ``options``: ``{"coriolis": "local",
        "sigma": "mean"}`` (f = 2Ω sin φ in the operator) for :func:`qgforce.omega.invert_omega`
        with ``rhs=case.prescribed_rhs()``.

    Notes
    -----
    ω = W S(p) g(φ) cos mλ with S = sin(π(p − p_t)/Δp), g = sin(k(φ − φ_s)), k = π/(φ_n − φ_s)
    (radians).  With the spherical Laplacian ∇²ψ = (1/(a² cos²φ)) ψ_λλ + (1/(a² cos φ)) (cos φ ψ_φ)_φ:

        ∇²ω = (W S cos mλ / a²) [ −(m²/cos²φ + k²) g − k tan φ cos(k(φ − φ_s)) ],
        RHS = σ0 ∇²ω − f(φ)² (π/Δp)² ω,  f = 2Ω sin φ.

    (derived by hand; re-derived with sympy in the tests).  ω vanishes on the top, bottom and
    both edges of the band and is periodic in λ.
    """
    nlon = 2 * n if nlon is None else int(nlon)
    lat = np.linspace(lat_south, lat_north, n + 1)
    lon = np.arange(nlon) * (360.0 / nlon)
    p = _levels(nlev, n, p_bottom, p_top)
    P = p[:, None, None]
    phi = np.deg2rad(lat)[None, :, None]
    lam = np.deg2rad(lon)[None, None, :]
    a = C.EARTH_RADIUS
    m = int(zonal_wavenumber)
    k = np.pi / np.deg2rad(lat_north - lat_south)
    arg = k * (phi - np.deg2rad(lat_south))
    depth = p_bottom - p_top
    S = np.sin(np.pi * (P - p_top) / depth)
    zonal = np.cos(m * lam)
    g = np.sin(arg)
    omega = amplitude * S * g * zonal
    lap = (amplitude * S * zonal / a**2) * (-(m * m / np.cos(phi) ** 2 + k * k) * g - k * np.tan(phi) * np.cos(arg))
    f = 2 * C.EARTH_ANGULAR_VELOCITY * np.sin(phi)
    rhs = sigma0 * lap - f * f * (np.pi / depth) ** 2 * omega
    Tb, Phib = _basic_state(P, sigma0, p_bottom, surface=p_bottom)
    ds = spherical_dataset(lat, lon, p, {"temperature": Tb, "geopotential": Phib})
    exact = {
        "omega_total": _exact_like(ds, omega, "Pa s-1", "manufactured QG omega"),
        "rhs_total": _exact_like(ds, rhs, "Pa-1 s-3", "right-hand side of the manufactured QG omega"),
    }
    return AnalyticCase(
        name="manufactured_omega_sphere",
        source="manufactured solution (Roache 2002) on the sphere, spherical Laplacian and local f",
        ds=ds,
        exact=exact,
        options={"coriolis": "local", "sigma": "mean"},
    )


# ============================================================================ calculus
def spherical_harmonic_laplacian(
    n: int = 32,
    l: int = 4,  # noqa: E741 (the degree of the harmonic is l in every textbook)
    m: int = 2,
    *,
    amplitude: float = 1.0e4,
    offset: float = 5.5e4,
    level: float = 50000.0,
) -> AnalyticCase:
    """A spherical harmonic on a global grid: the exact Laplacian −l(l+1)Y/a².

    Parameters
    ----------
    n : int
        Latitude intervals from pole to pole (n + 1 rows, both pole rows included); 2n longitudes.
    l, m : int
        Degree and order of Y_l^m (0 ≤ m ≤ l); the real part, ∝ P_l^m(sin φ) cos mλ.
    amplitude : float
        Φ′ = amplitude × Re Y_l^m [m2 s-2] (Y orthonormal on the unit sphere).
    offset : float
        A constant added to the geopotential (its Laplacian is zero).
    level : float
        The single pressure level [Pa].

    Returns
    -------
    AnalyticCase
        ``ds["geopotential"]`` on one level; ``exact["laplacian_geopotential"]`` = −l(l+1)Φ′/a²,
        to compare with :func:`qgforce.calculus.laplacian` (no options).

    Notes
    -----
    Y from :func:`scipy.special.sph_harm_y` (colatitude 90° − φ, azimuth λ); the eigenfunction
    property ∇²Y_l^m = −l(l+1)Y_l^m/a² (Arfken & Weber 2005, §12.6).
    """
    from scipy.special import sph_harm_y  # scipy >= 1.15

    if not 0 <= m <= l:
        raise QGForceError(f"spherical_harmonic_laplacian needs 0 <= m <= l; found l={l}, m={m}")
    lat = np.linspace(-90.0, 90.0, n + 1)
    lon = np.arange(2 * n) * (180.0 / n)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    y = amplitude * sph_harm_y(l, m, np.deg2rad(90.0 - la), np.deg2rad(lo)).real
    ds = spherical_dataset(lat, lon, [level], {"geopotential": (offset + y)[None]})
    lap = -l * (l + 1) * y / C.EARTH_RADIUS**2
    exact = {"laplacian_geopotential": _exact_like(ds, lap[None], "s-2", "exact horizontal Laplacian of geopotential")}
    return AnalyticCase(
        name="spherical_harmonic_laplacian",
        source="eigenfunction property of Y_l^m (Arfken & Weber 2005, 12.6); Y from scipy.special.sph_harm_y",
        ds=ds,
        exact=exact,
        options={},
    )


def baroclinic_wave(
    n: int = 32,
    nlev: int = 9,
    amplitude: float = 800.0,
    shear: float = -3.75e-4,
    wavelength: float = 4.0e6,
    sigma0: float = 2.0e-6,
    latitude0: float = 45.0,
    p_bottom: float = 100000.0,
    p_top: float = 20000.0,
) -> AnalyticCase:
    """A baroclinic wave on a β-plane: exact forcing terms and exact QG ω.

    Parameters
    ----------
    n : int
        Grid intervals in x and in y (the grid has n + 1 points each way).
    nlev : int
        Number of levels, uniform from ``p_bottom`` to ``p_top``.
    amplitude : float
        A [m2 s-2] of the wave geopotential.
    shear : float
        Λ = dU/dp [m s-1 Pa-1] (negative: westerlies increasing with height).
    wavelength : float
        Of the wave in x and y [m]; the domain is half a wavelength each way.
    sigma0 : float
        The constant static stability [m2 Pa-2 s-2] of the basic state.
    latitude0, p_bottom, p_top : float
        Centre latitude; bottom and top pressures [Pa].

    Returns
    -------
    AnalyticCase

    Notes
    -----
    With k = l = 2π/wavelength, K² = k² + l², U(p) = U0 + Λ (p − p_m) and f0 = 2Ω sin φ0:

        Φ = Φ_b(p) − f0 U(p) y + A sin kx cos ly,   T = −(p/R) ∂Φ/∂p = T_b(p) + (f0 Λ p / R) y,
        T_b(p) = c p^κ − σ0 p² / (R (2 − κ))  (so that −(R T_b/(p θ_b)) ∂θ_b/∂p = σ0 exactly).

    The wave's self-advection vanishes (a single mode), so with V_g from f0:

        A_T = −(A k Λ p / R) cos kx cos ly,
        −f0 ∂A_η/∂p = −(R/p) ∇²A_T = −Λ K² A k cos kx cos ly   (each half of the total),
        RHS = −2 Λ K² A k cos kx cos ly = −2∇·Q,  f0 β ∂v_g/∂p = 0,

    and σ0 ∇²ω + f0² ∂²ω/∂p² = RHS with ω = 0 on every boundary (the domain |x|, |y| ≤ π/(2k)) gives

        ω = RHS · g(p),  g = −(1/(σ0 K²)) [1 − cosh(m (p − p_m)) / cosh(m D / 2)],  m = K √σ0 / f0,

    D = p_bottom − p_top.  Ascent (ω < 0) lies east of the trough for Λ < 0 (common practice).
    The mean static stability of the dataset tends to σ0 (the baroclinic part averages out on the
    symmetric domain).
    """
    R = C.DRY_AIR_GAS_CONSTANT
    k = l = 2 * np.pi / wavelength
    K2 = k * k + l * l
    half = np.pi / (2 * k)
    x = np.linspace(-half, half, n + 1)
    y = np.linspace(-half, half, n + 1)
    p = np.linspace(p_bottom, p_top, nlev)
    pm = 0.5 * (p_bottom + p_top)
    f0 = 2 * C.EARTH_ANGULAR_VELOCITY * np.sin(np.deg2rad(latitude0))
    U0 = 15.0
    P = p[:, None, None]
    Y = y[None, :, None]
    X = x[None, None, :]
    Tb, Phib = _basic_state(P, sigma0, p_bottom)
    U = U0 + shear * (P - pm)
    wave = np.sin(k * X) * np.cos(l * Y)
    phi = Phib - f0 * U * Y + amplitude * wave + 0 * X
    temp = Tb + f0 * shear * P * Y / R + 0 * X
    ug = U + (amplitude * l / f0) * np.sin(k * X) * np.sin(l * Y)
    vg = (amplitude * k / f0) * np.cos(k * X) * np.cos(l * Y) + 0 * P
    ds = cartesian_dataset(x, y, p, {"temperature": temp, "geopotential": phi, "u": ug, "v": vg}, latitude0)
    shape = np.cos(k * X) * np.cos(l * Y) + 0 * P
    half_rhs = -shear * K2 * amplitude * k * shape
    m = np.sqrt(K2 * sigma0) / f0
    D = p_bottom - p_top
    g = -(1.0 / (sigma0 * K2)) * (1.0 - np.cosh(m * (P - pm)) / np.cosh(m * D / 2))

    def da(values, units, long_name):
        return xr.DataArray(np.broadcast_to(values, (nlev, n + 1, n + 1)).copy(), coords=ds["temperature"].coords,
                            dims=("level", "y", "x"), attrs={"units": units, "long_name": long_name})

    exact = {
        "temperature_advection": da(-(amplitude * k * shear * P / R) * shape, "K s-1", "temperature advection"),
        "differential_vorticity_advection": da(half_rhs, "Pa-1 s-3", "differential vorticity advection term"),
        "thermal_advection_term": da(half_rhs, "Pa-1 s-3", "thermal advection term"),
        "q_vector_forcing": da(2 * half_rhs, "Pa-1 s-3", "-2 div Q"),
        "beta_term": da(0 * shape, "Pa-1 s-3", "beta term"),
        "rhs_total": da(2 * half_rhs, "Pa-1 s-3", "right-hand side of the QG omega equation"),
        "omega_total": da(2 * half_rhs * g, "Pa s-1", "exact QG omega"),
    }
    return AnalyticCase(
        name="baroclinic wave on a beta-plane",
        source="closed form (Holton & Hakim 2013 §6.4; Hoskins, Draghici & Davies 1978); verified with sympy in the tests",
        ds=ds,
        exact=exact,
        options={"coriolis": "f0", "f0_latitude": latitude0, "sigma": "mean"},
        scales={"beta_term": float(np.abs(exact["rhs_total"].values).max())},  # it vanishes: scaled by the RHS
    )


# ============================================================================ by name
_CASES = {
    "deformation_frontogenesis": deformation_frontogenesis,
    "convergence_frontogenesis": convergence_frontogenesis,
    "deformation_q_vector": deformation_q_vector,
    "manufactured_omega_cartesian": manufactured_omega_cartesian,
    "manufactured_omega_sphere": manufactured_omega_sphere,
    "spherical_harmonic_laplacian": spherical_harmonic_laplacian,
    "baroclinic_wave": baroclinic_wave,
}


def list_cases() -> list[str]:
    """The names of the analytic cases, for :func:`get_case`."""
    return list(_CASES)


def get_case(name: str, n: int | None = None, **kwargs) -> AnalyticCase:
    """Build an analytic case by name.

    Parameters
    ----------
    name : str
        One of :func:`list_cases`.
    n : int, optional
        The resolution (grid intervals along y); the case's default when omitted.
    **kwargs
        Other parameters of the case function (for example ``beta_deg=10`` or ``l=5, m=3``).

    Returns
    -------
    AnalyticCase

    Raises
    ------
    QGForceError
        For an unknown name.

    Examples
    --------
    >>> from qgforce.cases import get_case
    >>> case = get_case("deformation_frontogenesis", 8)
    >>> sorted(case.exact)[:2]
    ['frontogenesis', 'frontogenesis_deformation']
    """
    if name not in _CASES:
        raise QGForceError(f"unknown analytic case {name!r}; the cases are: {', '.join(_CASES)}")
    if n is not None:
        kwargs["n"] = int(n)
    return _CASES[name](**kwargs)
