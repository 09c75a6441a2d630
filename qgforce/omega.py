"""The public QG omega inversion: forcing terms in, ω per term and in total out, plus w and lift.

:func:`invert_omega` solves

    σ ∇²ω + f² ∂²ω/∂p² = RHS                                            (QG omega equation)

for each additive forcing term of the chosen form separately and for their sum, so that the
ascent can be attributed to its causes (the per-term ω sum to the total to round-off because
the discrete operator is linear).  The right-hand sides come from :func:`qgforce.forcing.omega_rhs`
(or are supplied); the operator and solvers from :mod:`qgforce.solver`.

Forms (science.md): ``"traditional"`` (Sutcliffe–Holton: differential vorticity advection and
the thermal-advection term) and ``"qvector"`` (Hoskins, Draghici & Davies 1978: −2∇·Q, its
across- and along-isentrope parts Q_n and Q_s (Keyser, Reeder & Reed 1988), and the β term).

Every extra dimension (time, member, …) is solved independently, one solve per step, lazily on
dask input.

References
----------
Holton, J. R. and G. J. Hakim, 2013: *An Introduction to Dynamic Meteorology*, 5th ed., §6.4.
Hoskins, B. J., I. Draghici and H. C. Davies, 1978: A new look at the ω-equation. *QJRMS*, 104, 31–38.
Keyser, D., M. J. Reeder and R. J. Reed, 1988: A generalization of Petterssen's frontogenesis
function and its relation to the forcing of vertical motion. *Mon. Wea. Rev.*, 116, 762–780.
"""

from __future__ import annotations

import warnings

import numpy as np
import xarray as xr

from . import constants as C
from .errors import EquatorialMaskWarning, GridError, InputDataError, MissingVariableError, OptionError
from .grid import Grid
from .kinematics import DEFAULT_CORIOLIS_RULE, default_coriolis, default_f0_latitude, resolve_coriolis
from .solver import QGOperator, solve
from .thermo import mean_static_stability, omega_to_w, static_stability

__all__ = ["invert_omega", "select_domain", "lift_over_time", "OMEGA_FORMS"]

OMEGA_FORMS = ("traditional", "qvector")
LEVEL = "level"
DEFAULT_SIGMA_FLOOR = 1e-7  # m2 Pa-2 s-2; about 1/20 of the mid-tropospheric mean (science.md magnitudes)


# ---------------------------------------------------------------------------- domain
#: rows kept between an automatic inversion domain and the equatorial band (see select_domain)
_BAND_MARGIN = 2


def _equator_rows(lat: np.ndarray, band: float) -> np.ndarray:
    return np.abs(lat) < band


def select_domain(ds: xr.Dataset, domain=None, equator_mask: float | None = C.DEFAULT_EQUATOR_MASK_DEGREES) -> xr.Dataset:
    """Restrict a normalised dataset to the inversion domain.

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset (or forcing dataset) on a lat–lon or projected grid.
    domain : None, tuple or mapping
        ``None``: the whole grid, except that on lat–lon grids reaching into the equatorial
        band the largest contiguous latitude band outside it is kept (with a warning).
        ``(lat_min, lat_max)``: a latitude band; ``(lat_min, lat_max, lon_min, lon_max)``: a box;
        a mapping ``{"latitude": (a, b), "longitude": (c, d)}`` or ``{"y": ..., "x": ...}``.
    equator_mask : float or None
        Half-width of the equatorial band [degrees].

    Returns
    -------
    xarray.Dataset

    Warns
    -----
    EquatorialMaskWarning
        When the selected domain reaches within the equatorial band.
    """
    band = float(equator_mask or 0.0)
    if domain is None:
        if "latitude" in ds.dims and band > 0:
            lat = ds["latitude"].values
            ok = ~_equator_rows(lat, band)
            if not ok.all():
                # the largest contiguous run of rows outside the band
                runs, start = [], None
                for j, good in enumerate(np.append(ok, False)):
                    if good and start is None:
                        start = j
                    elif not good and start is not None:
                        runs.append((start, j))
                        start = None
                if not runs:
                    raise GridError(f"every latitude lies within {band}° of the equator: QG omega cannot be inverted here")
                j0, j1 = max(runs, key=lambda r: r[1] - r[0])
                # the forcing is NaN on the first two rows outside the band as well (its stencils
                # read two rows into the band's NaN geostrophic wind): keep the domain that far off,
                # so that only its boundary rows, which the solver does not read, can touch them
                j0, j1 = j0 + (_BAND_MARGIN if j0 > 0 else 0), j1 - (_BAND_MARGIN if j1 < lat.size else 0)
                if j1 - j0 < 3:
                    raise GridError(f"the latitudes outside {band}° of the equator leave fewer than 3 rows: pass domain=...")
                warnings.warn(
                    f"the grid reaches within {band}° of the equator; the inversion domain is restricted to "
                    f"latitudes {lat[j0]:.2f}..{lat[j1 - 1]:.2f} (pass domain=... to choose)",
                    EquatorialMaskWarning,
                    stacklevel=2,
                )
                return ds.isel(latitude=slice(j0, j1))
        return ds
    if isinstance(domain, dict):
        sel = {k: slice(*sorted(v)) for k, v in domain.items()}
    else:
        domain = tuple(domain)
        ydim = "latitude" if "latitude" in ds.dims else "y"
        xdim = "longitude" if "longitude" in ds.dims else "x"
        if len(domain) == 2:
            sel = {ydim: slice(*sorted(domain))}
        elif len(domain) == 4:
            sel = {ydim: slice(*sorted(domain[:2])), xdim: slice(*sorted(domain[2:]))}
        else:
            raise GridError(f"domain must be (lat_min, lat_max) or (lat_min, lat_max, lon_min, lon_max); found {domain!r}")
    unknown = [k for k in sel if k not in ds.dims]
    if unknown:
        raise GridError(f"domain names dimension(s) {unknown} not in the data; dimensions are {tuple(ds.dims)}")
    out = ds.sel(sel)
    for k in sel:
        if out.sizes[k] < 3:
            raise GridError(f"the domain {domain!r} leaves {out.sizes[k]} point(s) along {k!r}; at least 3 are needed")
    if "latitude" in out.coords and band > 0 and np.any(_equator_rows(np.asarray(out["latitude"].values), band)):
        warnings.warn(
            f"the inversion domain reaches within {band}° of the equator, where QG does not hold",
            EquatorialMaskWarning,
            stacklevel=2,
        )
    return out


#: treatments of below-ground and missing points in the inversion
BELOW_GROUND_CHOICES = (None, "mask")

#: the advice of every error about NaN in the inversion (one wording; the command-line option is the
#: one the command line passes to ``below_ground``)
_NAN_ADVICE = ("choose levels above the ground or a smaller domain, or pass below_ground='mask' (command line: "
               "--below-ground mask) to zero the forcing there and report ω as NaN there; fill='zero' is "
               "deprecated (it reports ω at below-ground points)")


def _below_ground(sub: xr.Dataset, names: list, grid: Grid) -> xr.DataArray:
    """Points the inversion treats as below ground: a forcing term or T missing, or p > surface pressure.

    Surface pressure is read from a variable ``surface_pressure`` [Pa] when present (it flags the
    model's extrapolated values under the terrain, which are finite).
    """
    under = xr.zeros_like(sub["temperature"], dtype=bool)
    for n in [*names, "rhs_total", "temperature"]:
        under = under | sub[n].isnull()
    if "surface_pressure" in sub:
        under = under | (sub[LEVEL] > sub["surface_pressure"])
    return under.transpose(*sub["temperature"].dims)


# ---------------------------------------------------------------------------- both hemispheres
def _hemisphere_domains(ds: xr.Dataset, band: float) -> list:
    """The (lat_min, lat_max) of each hemisphere's extratropical band, when the grid has both.

    Each band starts ``_BAND_MARGIN`` rows poleward of the equatorial mask (the forcing's stencils
    read that far into the masked band).  Empty when the grid is not lat–lon with ascending
    latitude, has no mask, or has fewer than 3 usable rows on either side.
    """
    if "latitude" not in ds.dims or band <= 0:
        return []
    lat = np.asarray(ds["latitude"].values, dtype=np.float64)
    if lat.size < 2 or not np.all(np.diff(lat) > 0):
        return []
    north, south = lat[lat >= band], lat[lat <= -band]
    if north.size < 3 + _BAND_MARGIN or south.size < 3 + _BAND_MARGIN:
        return []
    return [(float(south[0]), float(south[-1 - _BAND_MARGIN])), (float(north[_BAND_MARGIN]), float(north[-1]))]


def _join_hemispheres(parts: list, ds: xr.Dataset) -> xr.Dataset:
    """One dataset on the whole latitude axis of ``ds`` from per-hemisphere inversions (NaN between).

    Fields on the latitude axis are placed on their rows; per-step solver statistics take the worse
    hemisphere (largest residual and iteration count, summed floored points); a static stability
    without a latitude dimension (the level mean of each hemisphere) is spread over its rows.
    """
    lat = ds["latitude"]
    joined = {}
    for name in parts[0].data_vars:
        pieces = [p[name] for p in parts]
        if "latitude" not in pieces[0].dims and name == "static_stability":
            pieces = [pc.broadcast_like(p["omega_total"].isel({d: 0 for d in p["omega_total"].dims
                                                              if d not in ("latitude", *pc.dims)}, drop=True))
                      for pc, p in zip(pieces, parts)]
        if "latitude" in pieces[0].dims:
            joined[name] = xr.concat(pieces, dim="latitude", coords="minimal", compat="override",
                                     combine_attrs="override").reindex(latitude=lat)
        elif name == "sigma_floored_points":
            joined[name] = sum(pieces[1:], pieces[0]).assign_attrs(pieces[0].attrs)
        else:
            joined[name] = xr.concat(pieces, dim="qgforce_hemisphere").max("qgforce_hemisphere").assign_attrs(pieces[0].attrs)
    out = xr.Dataset(joined)
    out.attrs = dict(parts[0].attrs)
    out.attrs["qgforce_coriolis"] = "per hemisphere: " + "; ".join(
        f"{side} {p.attrs['qgforce_coriolis']}" for side, p in zip(("south", "north"), parts))
    out.attrs["qgforce_hemispheres"] = (
        "solved separately on each hemisphere's extratropical band with its own f0 and joined; "
        "NaN in the equatorial band")
    return out


# ---------------------------------------------------------------------------- one step
def _solve_step(rhs, sigma, boundary, *, op_kwargs, fsq, nterms, method, tol, maxiter, workers, fill, levels_hpa):
    """Solve every term of one step.  rhs: (nterms, nz, ny, nx); sigma: (nz,) or (nz, ny, nx)."""
    rhs = np.array(rhs, dtype=np.float64)
    bad = ~np.isfinite(rhs[:, 1:-1, 1:-1, 1:-1] if not op_kwargs["periodic_x"] else rhs[:, 1:-1, 1:-1, :])
    if bad.any():
        if fill == "zero":
            rhs = np.where(np.isfinite(rhs), rhs, 0.0)
        else:
            lev = np.flatnonzero(bad.any(axis=(0, 2, 3))) + 1
            raise InputDataError(
                f"the right-hand side has NaN on level(s) {', '.join(f'{levels_hpa[k]:g}' for k in lev)} hPa "
                f"(below ground or missing); {_NAN_ADVICE}"
            )
    op = QGOperator(sigma=np.asarray(sigma, dtype=np.float64), fsq=fsq, **op_kwargs)
    out = np.empty((nterms + 1,) + rhs.shape[1:])
    stats = np.empty((nterms + 1, 2))
    for t in range(nterms):
        out[t], info = solve(rhs[t], op, method=method, tol=tol, maxiter=maxiter, workers=workers)
        stats[t] = (info.residual, info.iterations)
    if boundary is not None and np.any(np.asarray(boundary) != 0):
        out[nterms], info = solve(np.zeros(rhs.shape[1:]), op, method=method, boundary=np.asarray(boundary, dtype=np.float64),
                                  tol=tol, maxiter=maxiter, workers=workers)
        stats[nterms] = (0.0, info.iterations)
    else:
        out[nterms] = 0.0
        stats[nterms] = (0.0, 0)
    return out, stats


# ---------------------------------------------------------------------------- public inversion
def invert_omega(
    ds: xr.Dataset,
    *,
    form: str = "qvector",
    rhs: xr.Dataset | None = None,
    sigma: str = "mean",
    sigma_floor: float = DEFAULT_SIGMA_FLOOR,
    coriolis: str | None = None,
    f0_latitude: float | None = None,
    smoothing=None,
    domain=None,
    boundary=None,
    fill: str | None = None,
    below_ground: str | None = None,
    method: str = "auto",
    tol: float = 1e-8,
    maxiter: int = 200,
    workers=None,
    equator_mask: float | None = C.DEFAULT_EQUATOR_MASK_DEGREES,
) -> xr.Dataset:
    """Invert the QG omega equation term by term.

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset (:func:`qgforce.open_dataset`) with ``temperature`` and
        ``geopotential`` (for the forcing and σ), optionally ``omega`` (for boundary values)
        and ``specific_humidity`` (for w).
    form : {"qvector", "traditional"}
        Which right-hand side: Q-vector terms (−2∇·Q, split into Q_n and Q_s, plus the β term)
        or traditional terms (differential vorticity advection, thermal-advection term).
    rhs : xarray.Dataset, optional
        Precomputed right-hand sides from :func:`qgforce.forcing.omega_rhs`; computed from
        ``ds`` when omitted.
    sigma : {"mean", "local"}
        ``"mean"``: the cos φ-weighted mean σ(p) of each level over the domain (textbook QG;
        separable, direct solver).  ``"local"``: σ(x, y, p) floored at ``sigma_floor``
        (Krylov solver; the count of floored points is reported in attrs).
    sigma_floor : float
        Minimum local σ [m2 Pa-2 s-2].
    coriolis : {None, "f0", "local"}
        f in the operator and in the forcing: one reference value (textbook) or f(φ).
        ``None`` (default): the rule of :func:`qgforce.kinematics.default_coriolis` applied to
        the inversion domain (f0 on one hemisphere spanning at most 60° of latitude, local f
        otherwise), recorded in the ``qgforce_coriolis_rule`` attribute.
    f0_latitude : float, optional
        Reference latitude; default the cos φ-weighted mean latitude of the inversion domain
        (44.1° on the demo domain; used for the forcing terms and the operator alike).
    smoothing : optional
        Smoothing of the inputs of the forcing terms (see :func:`qgforce.smoothing.smooth`).
    domain : optional
        See :func:`select_domain`.  With ``None`` on a lat–lon grid reaching into both
        hemispheres (and ``coriolis`` not ``"local"``, ``rhs`` not given), ω is solved on each
        hemisphere's extratropical band separately (poleward of the equatorial mask and its
        two-row margin), each with its own f0 (default: the cos φ-weighted mean latitude of that
        band, so of the right sign), and joined: NaN in the equatorial band, attrs
        ``qgforce_hemispheres`` and a per-hemisphere ``qgforce_coriolis``.
    boundary : None, "model" or xarray.DataArray
        ω on the domain edges (top, bottom, lateral): 0 by default; ``"model"`` takes
        ``ds["omega"]``; or a DataArray on the grid.  Its contribution is ``omega_boundary``.
    fill : None or "zero"
        Deprecated (use ``below_ground``): ``"zero"`` replaces NaN in the right-hand side by zero
        and reports ω at those points too.
    below_ground : None or "mask"
        Treatment of below-ground and missing points: ``None`` (default) refuses NaN in the
        right-hand side, naming the levels.  ``"mask"``: a point is below ground where a forcing
        term or the temperature is NaN, or where p exceeds ``ds["surface_pressure"]`` [Pa] when
        that variable is present (the model's extrapolated values are finite); the forcing is set
        to zero there (a source-free region, so ω there is the smooth continuation from above),
        σ is computed without those temperatures, and every ω and w output is NaN there.  An
        isolated missing value above ground gets the same treatment: forcing zero, ω NaN at that
        point only (the attribute ``qgforce_below_ground`` records the count).  Command line:
        ``--below-ground mask``.
    method : {"auto", "separable", "krylov"}
        Solver (see :func:`qgforce.solver.solve`).
    tol, maxiter : float, int
        Krylov tolerance (relative residual) and iteration cap.
    workers : int, optional
        FFT threads.
    equator_mask : float or None
        Equatorial band half-width [degrees].

    Returns
    -------
    xarray.Dataset
        ``omega_<term>`` for every term of the form (and its partition), ``omega_boundary``
        when boundary values are nonzero, ``omega_total`` [Pa s-1] (negative is ascent),
        ``w_total`` [m s-1], ``solver_residual`` and ``solver_iterations`` per step, and the
        ``static_stability`` used.  Attrs record every choice.

    Raises
    ------
    InputDataError
        NaN in the right-hand side without a fill policy; a level with non-positive mean σ.
    ConvergenceError
        When the Krylov solver does not converge.
    GridError
        Domain too small.
    OptionError
        An unknown ``form``, ``sigma``, ``fill``, ``below_ground`` or ``boundary`` choice.
    """
    if form not in OMEGA_FORMS:
        raise OptionError(f"form must be one of {OMEGA_FORMS}; found {form!r}")
    if sigma not in ("mean", "local"):
        raise OptionError(f"sigma must be 'mean' or 'local'; found {sigma!r}")
    if fill not in (None, "zero"):
        raise OptionError(f"fill must be None or 'zero'; found {fill!r}")
    if not (boundary is None or isinstance(boundary, xr.DataArray) or (isinstance(boundary, str) and boundary == "model")):
        found = repr(boundary) if isinstance(boundary, str) else f"a {type(boundary).__name__}"
        raise OptionError(f"boundary must be None, 'model' or a DataArray; found {found}")
    if below_ground not in BELOW_GROUND_CHOICES:
        raise OptionError(f"below_ground must be None (refuse NaN) or 'mask'; found {below_ground!r} "
                          f"(command line: --below-ground mask)")
    if fill == "zero":
        warnings.warn("fill='zero' is deprecated: it reports ω at below-ground points; use below_ground='mask', "
                      "which zeroes the forcing there and reports ω as NaN there", DeprecationWarning, stacklevel=2)
    if "temperature" not in ds:
        raise MissingVariableError(
            "the omega inversion needs temperature (for the static stability σ); pass names={'temperature': ...} to open_dataset"
        )
    from .forcing import omega_rhs

    hemispheres = _hemisphere_domains(ds, float(equator_mask or 0.0)) if (
        domain is None and rhs is None and coriolis != "local") else []
    if hemispheres:
        # a grid reaching into both hemispheres: one f0 of the right sign each (an f0 latitude of the
        # wrong sign for one of them is an OptionError from resolve_coriolis)
        options = dict(form=form, sigma=sigma, sigma_floor=sigma_floor, coriolis=coriolis or "f0", f0_latitude=f0_latitude,
                       smoothing=smoothing, boundary=boundary, fill=fill, below_ground=below_ground, method=method, tol=tol, maxiter=maxiter,
                       workers=workers, equator_mask=equator_mask)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", EquatorialMaskWarning)
            warnings.simplefilter("ignore", DeprecationWarning)  # warned once above
            parts = [invert_omega(ds, domain=d, **options) for d in hemispheres]
        warnings.warn(
            f"the grid reaches into both hemispheres: ω is solved on latitudes {hemispheres[0][0]:g}..{hemispheres[0][1]:g} "
            f"and {hemispheres[1][0]:g}..{hemispheres[1][1]:g} separately, each with its own f0, and is NaN in "
            f"between (pass domain=... for one region)", EquatorialMaskWarning, stacklevel=2)
        out = _join_hemispheres(parts, ds)
        if coriolis is None:
            out.attrs["qgforce_coriolis_rule"] = ("coriolis=None on a grid reaching into both hemispheres: f0 per "
                                                  "hemisphere at the cos(latitude)-weighted mean latitude of its band")
        return out

    rule = "requested"
    if f0_latitude is None or coriolis is None:
        # one Coriolis choice and reference latitude for the forcing and the operator, from the domain
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", EquatorialMaskWarning)
            dom_grid = Grid.from_dataset(select_domain(ds[["temperature"]], domain, equator_mask))
        if coriolis is None:
            coriolis, rule = default_coriolis(dom_grid), DEFAULT_CORIOLIS_RULE
        if f0_latitude is None:
            f0_latitude = default_f0_latitude(dom_grid)
    if rhs is None:
        rhs = omega_rhs(ds, form=form, coriolis=coriolis, f0_latitude=f0_latitude, smoothing=smoothing, equator_mask=equator_mask)
    sub = select_domain(xr.merge([ds, rhs], compat="override", join="inner"), domain, equator_mask)
    grid = Grid.from_dataset(sub)
    cor = resolve_coriolis(grid, coriolis, f0_latitude, equator_mask, warn=False)
    levels = np.asarray(sub[LEVEL].values, dtype=np.float64)
    if levels.size < 3:
        raise GridError(f"the omega inversion needs at least 3 levels (5 for 3 interior); found {levels.size}")

    terms = rhs.attrs.get("qgforce_terms", "").split()
    partition = rhs.attrs.get("qgforce_partition", "")
    sub_terms = partition.split("=")[1].split("+") if "=" in partition else []
    names = terms + sub_terms
    if not terms:
        raise MissingVariableError("the right-hand-side dataset lacks attrs['qgforce_terms']; build it with qgforce.forcing.omega_rhs")

    temperature = sub["temperature"]
    under = None
    if below_ground == "mask":
        under = _below_ground(sub, names, grid)
        temperature = temperature.where(~under)
    attrs_sigma = {}
    if sigma == "mean":
        sig = mean_static_stability(temperature, grid)
        attrs_sigma["qgforce_sigma"] = "cos(latitude)-weighted level mean" if grid.kind == "latlon" else "area-weighted level mean"
        sig_core = [LEVEL]
    else:
        raw = static_stability(temperature)
        # floored lazily; the count is part of the output
        sig = np.maximum(raw, sigma_floor)
        if under is not None:  # σ undefined where T is masked: the floor there (those points are masked in ω)
            sig = sig.fillna(sigma_floor)
        n_floored = (raw < sigma_floor).sum(dim=[LEVEL, *grid.dims])
        attrs_sigma["qgforce_sigma"] = f"local, floored at {sigma_floor:g} m2 Pa-2 s-2"
        sig_core = [LEVEL, *grid.dims]
    if cor.kind == "f0":
        fsq = cor.f0**2
    else:
        f2 = cor.f**2
        fsq = f2[:, 0] if grid.kind == "latlon" else f2

    # the total is solved on its own (not summed from the terms), so that the per-term sum
    # reproducing it is a check of linearity rather than an identity
    if "rhs_total" not in sub:
        raise MissingVariableError("the right-hand-side dataset lacks 'rhs_total'; build it with qgforce.forcing.omega_rhs")
    solved = names + ["rhs_total"]
    stack = xr.concat([sub[n] for n in solved], dim="qgforce_term").assign_coords(qgforce_term=solved)
    if under is not None:
        stack = stack.where(~under, 0.0)
    core = [LEVEL, *grid.dims]
    if isinstance(boundary, str) and boundary == "model":
        if "omega" not in sub:
            raise MissingVariableError("boundary='model' needs the model's omega in the dataset (variable 'omega')")
        bnd = sub["omega"]
        battrs = "model omega on the domain edges"
    elif isinstance(boundary, xr.DataArray):
        bnd = boundary.sel({d: sub[d] for d in core if d in boundary.dims})
        battrs = "supplied omega on the domain edges"
    else:  # None (the choice was checked on entry)
        bnd = xr.zeros_like(temperature)
        battrs = "omega = 0 on every edge"

    op_kwargs = dict(levels=levels, xi=grid.xi, eta=grid.eta, hx=grid.hx, hy=grid.hy, periodic_x=grid.periodic_x)
    levels_hpa = levels / 100.0
    nterms = len(solved)

    def step(r, s, b):
        return _solve_step(r, s, b, op_kwargs=op_kwargs, fsq=fsq, nterms=nterms, method=method, tol=tol,
                           maxiter=maxiter, workers=workers, fill=fill, levels_hpa=levels_hpa)

    if stack.chunks is not None:
        stack = stack.chunk({d: -1 for d in ["qgforce_term", *core]})
    bare = [a.reset_coords(drop=True) for a in (stack, sig, bnd)]  # coords re-attached below (no compare)
    sol, stats = xr.apply_ufunc(
        step,
        *bare,
        input_core_dims=[["qgforce_term", *core], sig_core, core],
        output_core_dims=[["qgforce_solution", *core], ["qgforce_solution", "qgforce_stat"]],
        vectorize=True,
        dask="parallelized",
        output_dtypes=[np.float64, np.float64],
        dask_gufunc_kwargs={"output_sizes": {"qgforce_solution": nterms + 1, "qgforce_stat": 2}, "allow_rechunk": True},
    )
    choice = {
        "qgforce_form": form,
        "qgforce_coriolis": cor.description,
        "qgforce_coriolis_rule": rule,
        "qgforce_smoothing": rhs.attrs.get("qgforce_smoothing", "none"),
        "qgforce_boundary": battrs,
        "qgforce_fill": fill or "refuse NaN",
        "qgforce_below_ground": "refuse NaN" if under is None else (
            "mask: forcing zero and omega NaN at below-ground or missing points"
            + (" (p > surface_pressure, or NaN)" if "surface_pressure" in sub else " (NaN)")),
        "qgforce_solver_request": method,
        "qgforce_solver_tolerance": tol,
        **attrs_sigma,
    }
    out = xr.Dataset(attrs={"title": "QG omega by forcing term", **choice})
    units = "Pa s-1"
    def solution(k):
        return sol.isel(qgforce_solution=k, drop=True).transpose(*temperature.dims).assign_coords(temperature.coords)

    for k, n in enumerate(names):
        out[f"omega_{n}"] = solution(k).assign_attrs(
            units=units, long_name=f"QG omega forced by {sub[n].attrs.get('long_name', n)}",
            standard_name="lagrangian_tendency_of_air_pressure")
    omb = solution(nterms)
    total = solution(nterms - 1)
    if boundary is not None:
        out["omega_boundary"] = omb.assign_attrs(units=units, long_name="QG omega from the boundary values")
        total = total + omb
    out["omega_total"] = total.assign_attrs(
        units=units, long_name="QG omega (sum of all forcing terms)", standard_name="lagrangian_tendency_of_air_pressure",
        qgforce_terms=" ".join(terms) + (" boundary" if boundary is not None else ""))
    if under is not None:
        for n in [v for v in out.data_vars if str(v).startswith("omega_")]:
            out[n] = out[n].where(~under)
    w = omega_to_w(out["omega_total"], temperature, sub.get("specific_humidity"))
    out["w_total"] = w.assign_attrs(long_name="QG vertical velocity (hydrostatic, from omega_total)")
    stats = stats.assign_coords({c: v for c, v in temperature.coords.items() if set(v.dims) <= set(stats.dims)})
    resid = stats.isel(qgforce_stat=0, qgforce_solution=slice(0, nterms)).max("qgforce_solution")
    iters = stats.isel(qgforce_stat=1).max("qgforce_solution")
    out["solver_residual"] = resid.assign_attrs(units="1", long_name="largest relative residual |L omega - RHS| / |RHS| of the solves")
    out["solver_iterations"] = iters.assign_attrs(units="1", long_name="largest Krylov iteration count of the solves (0: direct)")
    out["static_stability"] = sig.assign_attrs(units="m2 Pa-2 s-2", long_name="static stability used by the operator")
    if sigma == "local":
        out["sigma_floored_points"] = n_floored.assign_attrs(units="1", long_name=f"points where sigma was floored at {sigma_floor:g}")
    for c in ("qgforce_term", "qgforce_solution", "qgforce_stat"):
        if c in out.coords:
            out = out.drop_vars(c)
    return out


# ---------------------------------------------------------------------------- lift
def lift_over_time(field: xr.DataArray, hours: float, temperature: xr.DataArray | None = None,
                   specific_humidity: xr.DataArray | None = None) -> xr.Dataset:
    """Vertical displacement of air under a steady ω or w over a duration.

    Parameters
    ----------
    field : xarray.DataArray
        ω [Pa s-1] or w [m s-1] (recognised by its units).
    hours : float
        Duration [h].
    temperature, specific_humidity : xarray.DataArray, optional
        To convert between pressure and height displacement (hydrostatic, ρ = p/(R_d T_v));
        without temperature only the displacement in the field's own coordinate is returned.

    Returns
    -------
    xarray.Dataset
        ``lift_height`` [m] (positive upward) and ``lift_pressure`` [hPa] (negative upward: the
        pressure change of the air), as far as they can be computed.

    Notes
    -----
    A kinematic estimate: Δz = w Δt and Δp = ω Δt with the velocity held constant over the
    duration (common practice: 10 cm s⁻¹ for 6 h lifts air about 2.2 km).  Horizontal motion
    and the change of the velocity along the path are neglected.
    """
    if hours <= 0:
        raise InputDataError(f"the duration must be positive; found {hours} h")
    dt = float(hours) * C.SECONDS_PER_HOUR
    units = field.attrs.get("units", "")
    out = xr.Dataset(attrs={"qgforce_duration_hours": float(hours),
                            "comment": "kinematic: steady vertical velocity, horizontal motion neglected"})
    from .thermo import density

    if units in ("Pa s-1", "Pa/s"):
        out["lift_pressure"] = (field * dt / 100.0).assign_attrs(units="hPa", long_name=f"pressure change of air over {hours:g} h")
        if temperature is not None:
            rho = density(temperature, specific_humidity)
            out["lift_height"] = (-field / (rho * C.GRAVITY) * dt).assign_attrs(units="m", long_name=f"vertical displacement over {hours:g} h")
    elif units in ("m s-1", "m/s"):
        out["lift_height"] = (field * dt).assign_attrs(units="m", long_name=f"vertical displacement over {hours:g} h")
        if temperature is not None:
            rho = density(temperature, specific_humidity)
            out["lift_pressure"] = (-field * rho * C.GRAVITY * dt / 100.0).assign_attrs(units="hPa", long_name=f"pressure change of air over {hours:g} h")
    else:
        raise InputDataError(f"lift_over_time needs omega in 'Pa s-1' or w in 'm s-1'; found units {units!r}")
    return out


# ============================================================================ attribution of ω
# Which forcing term drives the strongest ascent of an inversion (moved here from the jobs: it
# reads the inversion's own outputs).  Imports of this part are kept with it.
from dataclasses import dataclass  # noqa: E402

from . import _timetext  # noqa: E402
from . import variables as _variables  # noqa: E402

__all__ += ["Ascent", "strongest_ascent", "form_partition"]  # noqa: F405

@dataclass
class Ascent:
    """The strongest forced ascent of a result set and its attribution (see :func:`strongest_ascent`).

    Attributes
    ----------
    time : object or None
    level_pa, latitude, longitude : float
    omega : float
        ``omega_total`` there [Pa s-1] (negative: ascent).
    w : float or None
        ``w_total`` there [m s-1].
    form : str
        The form of ``omega_total``.
    terms : list of (name, omega, share)
        Additive terms of that form at the point, most negative first; share = omega_term / omega_total.
    parts : list of (name, omega, share)
        The sub-terms of the form (Q_n, Q_s in the Q-vector form), as shares of omega_total.
    other_form : tuple or None
        ``(form, omega_total, terms)`` of the second form at the point, when present.
    """

    time: object
    level_pa: float
    latitude: float
    longitude: float
    omega: float
    w: float | None
    form: str
    terms: list
    parts: list
    other_form: tuple | None = None

    def text(self) -> str:
        """A few lines for the printed summary."""
        lon = (self.longitude + 180.0) % 360.0 - 180.0
        where = (f"{abs(self.latitude):.1f}°{'N' if self.latitude >= 0 else 'S'} "
                 f"{abs(lon):.1f}°{'E' if lon >= 0 else 'W'}")
        when = f"{_timetext.time_text(self.time)}, " if self.time is not None else ""
        w = f" (w = {self.w * 100.0:+.1f} cm s-1)" if self.w is not None and np.isfinite(self.w) else ""
        lines = [f"strongest forced ascent (700-400 hPa): omega_total = {self.omega:.3f} Pa s-1{w} "
                 f"at {when}{self.level_pa / 100.0:g} hPa, {where}"]
        if self.terms:
            name, value, share = self.terms[0]
            parts = ", ".join(f"{_variables.label(n)} {s:.0%}" for n, _, s in self.parts)
            rest = ", ".join(f"{_variables.label(n)} {s:.0%}" for n, _, s in self.terms[1:])
            lines.append(f"  dominant term ({_form_label(self.form)} form): {_variables.label(name)}, {value:.3f} Pa s-1 = "
                         f"{share:.0%} of omega_total" + (f" (of which {parts})" if parts else "")
                         + (f"; also {rest}" if rest else ""))
        if self.other_form:
            form, total, terms = self.other_form
            lines.append(f"  {_form_label(form)} form there: omega_total = {total:.3f} Pa s-1, "
                         + ", ".join(f"{_variables.label(n)} {s:.0%}" for n, _, s in terms))
        return "\n".join(lines)


def strongest_ascent(results: xr.Dataset, layer_hpa=(700.0, 400.0), field_name: str = "omega_total") -> Ascent:
    """Where ``omega_total`` is most negative within a pressure layer, and which term forces it.

    Parameters
    ----------
    results : xarray.Dataset
        From :func:`build_results` with the omega outputs (computed or lazy).
    layer_hpa : (float, float)
        Pressures bounding the layer [hPa], inclusive.
    field_name : str
        The total ω to search.

    Returns
    -------
    Ascent

    Raises
    ------
    MissingVariableError
        Without ``field_name`` in the results.
    InputDataError
        No level in the layer, or no finite value there.

    Notes
    -----
    The terms are those listed in ``results[field_name].attrs["qgforce_terms"]`` (the additive
    right-hand-side terms of the form, :func:`qgforce.omega.invert_omega`); since the operator
    is linear their ω sum to ``omega_total``, so each share is ω_term / ω_total at the point.
    """
    if field_name not in results.data_vars:
        raise MissingVariableError(f"strongest_ascent needs {field_name!r} in the results (run the inversion)")
    total = results[field_name]
    lo, hi = sorted(float(v) * 100.0 for v in layer_hpa)
    layer = total.sel(level=total["level"][(total["level"] >= lo - 0.5) & (total["level"] <= hi + 0.5)])
    if layer.sizes["level"] == 0:
        raise InputDataError(f"no level of the results lies between {lo / 100:g} and {hi / 100:g} hPa")
    values = np.asarray(layer.values)
    if not np.isfinite(values).any():
        raise InputDataError(f"{field_name} has no finite value between {lo / 100:g} and {hi / 100:g} hPa")
    flat = int(np.nanargmin(values))
    index = dict(zip(layer.dims, np.unravel_index(flat, values.shape)))
    point = {d: layer[d].values[i] for d, i in index.items() if d in layer.coords}
    at = {d: int(i) for d, i in index.items()}

    def value(name):
        return float(results[name].sel(level=point["level"]).isel({d: i for d, i in at.items() if d != "level"}).values)

    lat = float(layer.isel(at)["latitude"].values)
    lon = float(layer.isel(at)["longitude"].values)
    om = float(values.flat[flat])
    form = str(total.attrs.get("qgforce_form", results.attrs.get("qgforce_form", "")))

    def attribution(form_name, total_name, total_value):
        terms_attr = str(results[total_name].attrs.get("qgforce_terms", "")).split()
        terms = [(t, value(f"omega_{t}")) for t in terms_attr if f"omega_{t}" in results.data_vars]
        terms = sorted(((t, v, v / total_value) for t, v in terms), key=lambda x: x[1])
        members = form_partition(results, form_name, terms_attr)
        parts = sorted(((t, value(f"omega_{t}"), value(f"omega_{t}") / total_value) for t in members),
                       key=lambda x: x[1])
        return terms, parts

    terms, parts = attribution(form, field_name, om)
    w_name = field_name.replace("omega_total", "w_total", 1)
    w = value(w_name) if w_name != field_name and w_name in results.data_vars else None
    other = None
    for other_form in _variables.FORMS_OF_OMEGA:
        name = f"omega_total_{other_form}"
        if other_form != form and name in results.data_vars:
            t_other = value(name)
            o_terms, _ = attribution(other_form, name, t_other)
            other = (other_form, t_other, o_terms)
    tdim = _timetext.time_dim(results)
    return Ascent(time=point.get(tdim) if tdim else None, level_pa=float(point["level"]),
                  latitude=lat, longitude=lon, omega=om, w=w, form=form, terms=terms, parts=parts, other_form=other)


def _form_label(form: str) -> str:
    return _variables.FORMS_OF_OMEGA.get(form, form)


def form_partition(results, form: str, terms) -> list:
    """The sub-terms of ``form`` inverted in ``results`` beyond its additive ``terms`` (Q_n, Q_s).

    Each is a right-hand-side term whose ``omega_<term>`` is in the results with
    ``qgforce_form == form`` (see :mod:`qgforce.variables`).
    """
    out = []
    for n in results.data_vars:
        row = _variables.find(n)
        if row is None or row.group != "omega" or row.form_shared or results[n].attrs.get("qgforce_form") != form:
            continue
        term = str(n)[len("omega_"):]
        if _variables.find(term) is not None and term not in terms:
            out.append(term)
    return out
