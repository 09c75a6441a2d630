"""Streaming long records: open many files lazily, compute per time chunk, write NetCDF safely.

A record of thousands of time steps does not fit in memory, but every qgforce diagnostic works
on one time step at a time: the horizontal and vertical extent of a step is all a derivative or
a solve needs.  This module strings the library together so that memory depends on the chunk,
not on the length of the record:

* :func:`compute_record` opens the files lazily (one dask chunk per step or per few steps, the
  whole vertical and horizontal extent inside each chunk) and returns the forcing terms
  (:func:`qgforce.forcing.forcing_terms`) and the inverted ω (:func:`qgforce.omega.invert_omega`)
  as one lazy dataset: nothing is computed yet;
* :func:`write_results` writes such a dataset to NetCDF chunk by chunk through dask, with CF
  encoding and zlib compression, to a temporary file in the target directory that replaces the
  target only once everything has been written (a failed run leaves no partial file behind, and
  an existing file at the target stays as it was);
* :func:`client_from` gives a :mod:`dask.distributed` client for a scheduler address or a local
  cluster of N worker processes, so the same calls run on a cluster (the command line's options);
* :func:`synthetic_record` and :func:`write_synthetic_record` build a smooth, hydrostatically
  consistent invented record of any size and calendar, to check a set-up (and for the tests and
  benchmarks).

On a distributed cluster the workers read the input files and compute; one output file is
written by the calling process as the chunks arrive, while several output files
(``steps_per_file``) are each written by a worker.  On a multi-machine cluster the input files
(and, for several output files, the output directory) must sit on a file system every worker sees.

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11
(section 2.3 naming, 2.5.1 missing data, 4.4 time coordinates and calendars).
Rocklin, M., 2015: Dask: parallel computation with blocked algorithms and task scheduling.
*Proc. 14th Python in Science Conference*, 130-136.
"""

from __future__ import annotations

import contextlib
import datetime
import inspect
import os
import warnings
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import xarray as xr

from . import constants as C
from .errors import OptionError, QGForceError
from .io import open_dataset
from .output.netcdf import OUTPUT_DTYPES, PendingWrite, output_encoding, write_results  # noqa: F401 (public here)

__all__ = [
    "compute_record",
    "write_results",
    "output_encoding",
    "PendingWrite",
    "client_from",
    "synthetic_record",
    "write_synthetic_record",
    "OUTPUT_DTYPES",
]

_CORE_DIMS = ("level", "latitude", "longitude", "y", "x")
#: target size [bytes] of one float64 block of ``levels_per_chunk="auto"`` (a few levels of a
#: global 0.5-degree grid): the horizontal diagnostics of a step run level block by level block,
#: and their multi-field intermediates (Q and its parts, the velocity gradient) are those of one
#: block.  Measured on a 0.5-degree, 25-level step with the local workers' malloc settings: peak
#: memory of computing and writing one step 0.68 GB above the process's own, against 0.93-0.98 GB
#: with whole columns, at the same speed (benchmarks/bench_stream.py is the full-size check).
_LEVEL_BLOCK_BYTES = 12 * 2**20


# ============================================================================ computing
def compute_record(
    sources,
    *,
    names: Mapping | None = None,
    engine: str | None = None,
    combine_dim: str | None = None,
    on_bad_file: str = "raise",
    steps_per_chunk: int = 1,
    levels_per_chunk="auto",
    forcing: bool | None = None,
    forcing_options: Mapping | None = None,
    omega_options: Mapping | None = None,
    **options,
) -> xr.Dataset:
    """The results of a compute job over a whole record, lazily, one time chunk at a time.

    The same job as :func:`qgforce.jobs.compute.compute_to_netcdf` (the ``compute`` command): the
    results are chosen with the same options (:func:`qgforce.jobs.compute.build_results`), read
    from many files and chunked so that memory depends on the chunk, not on the record length.

    Parameters
    ----------
    sources : str, os.PathLike, list of paths, or xarray.Dataset
        The record: a glob pattern, a list of NetCDF files (combined along time) or a Dataset
        (raw or normalised), as :func:`qgforce.open_dataset` takes it.
    names, engine, combine_dim, on_bad_file
        Passed to :func:`qgforce.open_dataset`.  With ``on_bad_file="skip"`` unreadable files
        are left out with a :class:`~qgforce.errors.DataQualityWarning` and listed, one per
        line, in ``attrs["qgforce_skipped_files"]`` of the result.
    steps_per_chunk : int
        Steps per dask chunk along the first extra dimension (usually time); 1 along any other
        extra dimension.  Peak memory grows with it; 1 (default) needs the least.
    levels_per_chunk : "auto", int or None
        Levels per dask chunk of the input.  The horizontal diagnostics then run block by block
        of levels; the vertical derivatives and the inversion gather whole columns as they need
        them.  ``"auto"`` (default): blocks of about 12 MiB in float64 (5 levels of a global
        0.5° grid; whole columns on small grids); ``None``: whole columns.
    **options
        The options of :func:`qgforce.jobs.compute.build_results`: ``fields`` (default every
        forcing term and ω by term, as the data allow), ``optional_fields``, ``levels``,
        ``times``, ``region``, ``form``, ``omega`` (False: forcing terms only), ``smoothing``,
        ``coriolis`` (``None``: the library's rule, :func:`qgforce.kinematics.default_coriolis`),
        ``f0_latitude``, ``equator_mask``, ``below_ground``.
    forcing, forcing_options, omega_options
        Deprecated (removed in the next release): the keywords of earlier versions, which passed
        keyword arguments to :func:`~qgforce.forcing.forcing_terms` and
        :func:`~qgforce.omega.invert_omega` directly.  Given, they warn and the results are built
        as before.  Use ``fields`` (e.g. the ω names only) in place of ``forcing=False``, and the
        options above (``levels``, ``region``, ``below_ground``, ...) in place of the mappings.

    Returns
    -------
    xarray.Dataset
        Lazy (dask-backed), one chunk per ``steps_per_chunk`` steps: the results of
        :func:`~qgforce.jobs.compute.build_results` with its attributes, plus ``Conventions``,
        ``title``, ``source`` (the input files), ``history``, ``qgforce_version``, and
        ``qgforce_skipped_files`` when files were skipped.

    Raises
    ------
    InputDataError, MissingVariableError, UnitsError, GridError, OptionError
        From opening the files (every bad file named), from the choices and from the
        diagnostics' checks, which look at coordinates only; errors that need the values (NaN in
        the right-hand side without ``below_ground="mask"``, a Krylov solve that does not
        converge) surface when the result is computed or written.
    OptionError
        If ``steps_per_chunk`` or ``levels_per_chunk`` is not a positive integer, or an option
        is not one of :func:`~qgforce.jobs.compute.build_results`.

    Notes
    -----
    The inversion builds its right-hand side with the same functions and arguments as the
    forcing terms, so dask sees identical task keys and computes each intermediate once.
    Written with :func:`write_results`, peak memory is one chunk's working set times the number
    of chunks in flight (the threads, or worker threads), independent of the record length;
    ``.compute()`` of the whole result holds the whole record instead.

    Examples
    --------
    >>> from qgforce.stream import compute_record, synthetic_record
    >>> out = compute_record(synthetic_record(steps=2), fields="omega_total,q_vector_forcing", levels=[500])
    >>> sorted(out.data_vars), out["omega_total"].chunks[0]
    (['omega_total', 'q_vector_forcing'], (1, 1))
    """
    from .jobs._common import _input_files
    from .jobs.compute import build_results, file_attrs

    legacy = {k: v for k, v in (("forcing", forcing), ("forcing_options", forcing_options),
                                ("omega_options", omega_options)) if v is not None}
    known = set(inspect.signature(build_results).parameters) - {"ds"}  # the compute job's options, one list
    unknown = sorted(set(options) - known)
    if unknown:
        raise OptionError(f"compute_record: unknown option(s) {unknown}; the options are those of "
                          f"qgforce.jobs.compute.build_results: {', '.join(sorted(known))}")
    if int(steps_per_chunk) != steps_per_chunk or steps_per_chunk < 1:
        raise OptionError(f"steps_per_chunk must be a positive integer; found {steps_per_chunk!r}")
    if levels_per_chunk not in ("auto", None) and (isinstance(levels_per_chunk, str) or int(levels_per_chunk) != levels_per_chunk
                                                   or levels_per_chunk < 1):
        raise OptionError(f"levels_per_chunk must be 'auto', None or a positive integer; found {levels_per_chunk!r}")
    if legacy:
        warnings.warn(
            f"compute_record: {', '.join(legacy)} {'is' if len(legacy) == 1 else 'are'} deprecated and will be "
            "removed in the next release; choose the results with the options of "
            "qgforce.jobs.compute.build_results (fields=, levels=, region=, omega=, form=, below_ground=, ...)",
            DeprecationWarning, stacklevel=2)
        if forcing is not None and not (forcing or options.get("omega", True)):
            raise QGForceError("compute_record: nothing to compute; set forcing=True, omega=True or both")
    ds = open_dataset(sources, names=names, chunks="auto", engine=engine, combine_dim=combine_dim,
                      on_bad_file=on_bad_file)
    first = ds["temperature"] if "temperature" in ds else next(iter(ds.data_vars.values()))
    extra = [d for d in first.dims if d not in _CORE_DIMS]
    if extra and steps_per_chunk > 1:
        ds = ds.chunk({extra[0]: int(steps_per_chunk)})
    block = _level_block(first, levels_per_chunk)
    if block is not None:
        ds = ds.chunk({"level": block})
    if legacy:
        out = _legacy_results(ds, forcing, forcing_options, omega_options, options)
    else:
        out = build_results(ds, **options)
    # every choice of the call in history (the defaults are recorded in the qgforce_* attributes)
    given = {**options, **legacy, **({"names": names} if names else {}),
             **({"combine_dim": combine_dim} if combine_dim else {}), "steps_per_chunk": steps_per_chunk,
             "levels_per_chunk": levels_per_chunk}
    out.attrs = file_attrs(out, command="qgforce.stream.compute_record", parameters=given,
                           sources=_input_files(ds) or [_describe_sources(sources)])
    if "qgforce_skipped_files" in ds.attrs:
        out.attrs["qgforce_skipped_files"] = ds.attrs["qgforce_skipped_files"]
    return out


def _legacy_results(ds, forcing, forcing_options, omega_options, options) -> xr.Dataset:
    """The results as earlier versions built them (``forcing=``, ``forcing_options=``, ``omega_options=``)."""
    from .forcing import forcing_terms
    from .omega import invert_omega

    unused = sorted(set(options) - {"omega", "form", "coriolis", "f0_latitude", "equator_mask", "smoothing"})
    if unused:
        raise OptionError(f"compute_record: {unused} cannot be combined with the deprecated forcing=, "
                          "forcing_options= or omega_options=; use the new options alone")
    shared = dict(coriolis=options.get("coriolis"), f0_latitude=options.get("f0_latitude"),
                  equator_mask=options.get("equator_mask", C.DEFAULT_EQUATOR_MASK_DEGREES),
                  smoothing=options.get("smoothing"))
    parts = []
    if forcing is None or forcing:
        parts.append(forcing_terms(ds, **shared, **dict(forcing_options or {})))
    if options.get("omega", True):
        parts.append(invert_omega(ds, form=options.get("form", "qvector"), **shared, **dict(omega_options or {})))
    return xr.merge(parts, join="outer", compat="no_conflicts", combine_attrs="drop_conflicts")


def _level_block(field: xr.DataArray, levels_per_chunk) -> int | None:
    """Levels per chunk for :func:`compute_record` (None: leave whole columns)."""
    if levels_per_chunk is None or "level" not in field.dims:
        return None
    nz = field.sizes["level"]
    if levels_per_chunk != "auto":
        return min(int(levels_per_chunk), nz)
    per_level = 8 * int(np.prod([n for d, n in field.sizes.items() if d in _CORE_DIMS and d != "level"]))
    fit = max(1, _LEVEL_BLOCK_BYTES // max(per_level, 1))
    if fit >= nz:
        return None
    blocks = -(-nz // fit)
    return -(-nz // blocks)  # blocks of nearly equal size


def _describe_sources(sources) -> str:
    if isinstance(sources, xr.Dataset):
        return str(sources.attrs.get("source", "an in-memory dataset"))
    if isinstance(sources, (str, os.PathLike)):
        return os.fspath(sources)
    paths = [os.fspath(p) for p in sources]
    return paths[0] if len(paths) == 1 else f"{len(paths)} files: {paths[0]} ... {paths[-1]}"


# ============================================================================ writing
# ============================================================================ writing
# The chunked, atomic NetCDF writer lives in qgforce.output.netcdf (one writer for every job);
# its public names stay importable from here.

# ============================================================================ clusters
#: glibc malloc settings of local worker processes.  dask's nannies set MALLOC_TRIM_THRESHOLD_ to
#: 64 KiB, which also pins the mmap threshold at 128 KiB: every temporary of the blocked kernels
#: (a few hundred KiB) is then a fresh mapping, paid in page faults (measured: about 1.4 times the
#: CPU time of a 0.5-degree step).  Here arrays under 4 MiB come from the heap and are reused,
#: fields (tens of MB) are still mapped and given back when freed, and at most 64 MiB of free
#: heap is kept: resident memory stays low without the faults (glibc mallopt(3) manual).
_WORKER_MALLOC = {"MALLOC_MMAP_THRESHOLD_": 4 * 2**20, "MALLOC_TRIM_THRESHOLD_": 64 * 2**20}


@contextlib.contextmanager
def client_from(scheduler: str | None = None, workers: int | None = None, *, threads_per_worker: int = 1,
                processes: bool = True, memory_limit="auto", connect_timeout: float = 30.0):
    """A dask.distributed client for a scheduler address or a local cluster, or none.

    Parameters
    ----------
    scheduler : str, optional
        Address of a running scheduler (``"tcp://10.0.0.5:8786"``) or the path of a scheduler
        file (JSON, as batch-system launchers write it).
    workers : int, optional
        Start a :class:`distributed.LocalCluster` of this many worker processes (one thread
        each by default), closed again on exit.
    threads_per_worker : int
        Threads of each local worker.
    processes : bool
        Local workers as processes (default: no shared interpreter lock) or threads.
    memory_limit : str or int
        Per-worker memory limit of the local cluster (dask's ``"auto"``: the machine's memory
        divided among the workers).
    connect_timeout : float
        Seconds to wait for the scheduler at ``scheduler``.

    Yields
    ------
    distributed.Client or None
        ``None`` when neither argument is given: dask's default threaded scheduler is used.
        The client is the default scheduler inside the ``with`` block.

    Raises
    ------
    QGForceError
        Both arguments, a worker count below 1, a scheduler that cannot be reached, or
        dask.distributed not installed.

    Notes
    -----
    Local worker processes start with the glibc malloc settings of ``_WORKER_MALLOC`` (heap for
    arrays under 4 MiB), which avoid a page-fault cost dask's own setting incurs here.

    Examples
    --------
    >>> from qgforce.stream import client_from
    >>> with client_from() as client:
    ...     client is None
    True
    """
    if scheduler is not None and workers is not None:
        raise QGForceError("give a scheduler address or a number of local workers, not both")
    if scheduler is None and workers is None:
        yield None
        return
    try:
        from distributed import Client, LocalCluster
    except ImportError as exc:  # pragma: no cover - distributed is a test and bench dependency
        raise QGForceError("a cluster needs dask.distributed: pip install distributed") from exc
    if scheduler is not None:
        text = os.fspath(scheduler)
        kwargs = {"scheduler_file": text} if text.endswith(".json") and os.path.isfile(text) else {"address": text}
        try:
            client = Client(**kwargs, timeout=connect_timeout)
        except (OSError, TimeoutError, ValueError) as exc:
            raise QGForceError(
                f"cannot connect to the dask scheduler at {text!r} ({type(exc).__name__}: {exc}); check the "
                "address (tcp://host:port) or the scheduler file, and that the scheduler is running"
            ) from exc
        with client:
            yield client
        return
    if isinstance(workers, bool) or int(workers) != workers or workers < 1:
        raise OptionError(f"workers must be a positive number of worker processes; found {workers!r}")
    import dask

    environ = {**dask.config.get("distributed.nanny.pre-spawn-environ", {}), **_WORKER_MALLOC}
    with dask.config.set({"distributed.nanny.pre-spawn-environ": environ}):
        cluster = LocalCluster(n_workers=int(workers), threads_per_worker=int(threads_per_worker),
                               processes=processes, memory_limit=memory_limit, dashboard_address=None)
    with cluster, Client(cluster) as client:
        yield client


# ============================================================================ a synthetic record
def synthetic_record(
    *,
    steps: int = 4,
    first_step: int = 0,
    latitude=None,
    longitude=None,
    levels_hpa=None,
    hours_between: float = 6.0,
    start: str = "2101-01-01",
    calendar: str = "standard",
    seed: int = 0,
    waves: int = 3,
    dtype: str = "float32",
    surface_temperature: float = 288.0,
    lapse_rate: float = 0.0065,
    pole_to_equator: float = 40.0,
    wave_amplitude: float = 6.0,
) -> xr.Dataset:
    """A smooth, hydrostatically consistent, invented record on pressure levels (raw, CF-like).

    Parameters
    ----------
    steps, first_step : int
        Number of time steps, and the index of the first (to build a long record in pieces).
    latitude, longitude : array_like, optional
        Degrees; default 20..70 N every 2.5° and the whole globe every 5°.  The fields are
        smooth on the sphere, poles included, so any grid works.
    levels_hpa : array_like, optional
        Pressure levels [hPa]; default 10 levels from 1000 to 200 hPa.
    hours_between : float
        Time step [h].
    start : str
        Date of step 0 (an invented date), in ``calendar``.
    calendar : str
        CF calendar (``"standard"``, ``"noleap"``, ``"360_day"``, ``"julian"``, ...); other than
        standard the times are cftime objects.
    seed : int
        Seed of the random wave amplitudes, phases and speeds.
    waves : int
        Number of travelling zonal wavenumbers (2, 3, 4, ...).
    dtype : str
        Type of the data variables (float32 like most model output).
    surface_temperature, lapse_rate : float
        The basic state T_b(p) = T_s (p/p_s)^(R_d Γ/g) [K, K m-1], p_s = 1000 hPa.
    pole_to_equator, wave_amplitude : float
        Temperature contrasts [K] of the zonal-mean gradient and of the waves.

    Returns
    -------
    xarray.Dataset
        ``ta`` [K], ``zg`` [m], ``ua``, ``va`` [m s-1] on (time, plev, lat, lon), ``plev``
        in hPa, CF attributes; deterministic for a given seed.

    Notes
    -----
    With a horizontal field S(λ, φ, t) = −ΔT sin²φ + A Σ_m a_m cos^m φ sin φ cos(mλ − c_m t + ψ_m)
    (each term a polynomial in the Cartesian coordinates of the sphere, hence smooth at the
    poles), temperature T = T_b(p) + S and geopotential Φ = Φ_b(p) + R_d S ln(p_s/p) + Φ_s with
    Φ_b the constant-lapse-rate hypsometric profile (g T_s/Γ)(1 − (p/p_s)^(R_d Γ/g)) and Φ_s a
    pressure-independent wave pattern of the same form.  Then T = −(p/R_d) ∂Φ/∂p exactly
    (hydrostatic balance; Holton & Hakim 2013, eq. 3.27), and the static stability is that of
    the basic state, positive for Γ < g/c_p.  The wind is the non-divergent wind of the stream
    function (Φ − Φ_b)/f_r with f_r = 2Ω sin 45°: geostrophic with f_r, and finite everywhere.
    """
    rng = np.random.default_rng(seed)
    lat = np.asarray(np.arange(20.0, 70.0 + 1e-9, 2.5) if latitude is None else latitude, dtype=np.float64)
    lon = np.asarray(np.arange(0.0, 360.0, 5.0) if longitude is None else longitude, dtype=np.float64)
    lev = np.asarray([1000, 925, 850, 700, 600, 500, 400, 300, 250, 200] if levels_hpa is None else levels_hpa,
                     dtype=np.float64)
    if steps < 1 or waves < 1:
        raise OptionError(f"synthetic_record needs steps >= 1 and waves >= 1; found {steps}, {waves}")
    m = np.arange(2, 2 + waves)
    amp_t, amp_s = rng.uniform(0.5, 1.0, (2, waves))
    phase_t, phase_s = rng.uniform(0.0, 2 * np.pi, (2, waves))
    speed = rng.uniform(5.0, 15.0, waves) * np.pi / 180.0 / 24.0 * m  # 5-15 degrees of longitude per day
    hours = (first_step + np.arange(steps)) * float(hours_between)

    phi = np.deg2rad(lat)[:, None]
    lam = np.deg2rad(lon)[None, :]
    cos, sin = np.cos(phi), np.sin(phi)
    kappa_s = C.DRY_AIR_GAS_CONSTANT * lapse_rate / C.GRAVITY
    p = lev * 100.0
    ps = 1.0e5
    t_basic = surface_temperature * (p / ps) ** kappa_s
    phi_basic = C.GRAVITY * surface_temperature / lapse_rate * (1.0 - (p / ps) ** kappa_s)
    ln_p = np.log(ps / p)
    f_r = 2.0 * C.EARTH_ANGULAR_VELOCITY * np.sin(np.deg2rad(45.0))
    a = C.EARTH_RADIUS

    def pattern(amps, phases, t):
        """Σ a_m cos^m φ sin φ cos(mλ − c_m t + ψ_m) and its derivatives ∂/∂φ and (1/cos φ) ∂/∂λ."""
        val = np.zeros(np.broadcast_shapes(cos.shape, lam.shape))
        dphi, dlam_cos = np.zeros_like(val), np.zeros_like(val)
        for k in range(waves):
            arg = m[k] * lam - speed[k] * t + phases[k]
            c_m = cos ** m[k]
            val += amps[k] * c_m * sin * np.cos(arg)
            dphi += amps[k] * (c_m * cos - m[k] * cos ** (m[k] - 1) * sin * sin) * np.cos(arg)
            dlam_cos += -amps[k] * m[k] * cos ** (m[k] - 1) * sin * np.sin(arg)
        return val, dphi, dlam_cos

    shape = (steps, lev.size, lat.size, lon.size)
    out = {k: np.empty(shape, dtype=dtype) for k in ("ta", "zg", "ua", "va")}
    r = C.DRY_AIR_GAS_CONSTANT
    for i, t in enumerate(hours):
        w, w_phi, w_lam = pattern(amp_t, phase_t, t)
        s_val = -pole_to_equator * sin**2 + wave_amplitude * w
        s_phi = -pole_to_equator * 2.0 * sin * cos + wave_amplitude * w_phi
        s_lam = wave_amplitude * w_lam
        v_s, v_s_phi, v_s_lam = (600.0 * x for x in pattern(amp_s, phase_s, t))  # Φ_s: about 60 gpm
        out["ta"][i] = t_basic[:, None, None] + s_val
        geo = phi_basic[:, None, None] + r * ln_p[:, None, None] * s_val + v_s
        out["zg"][i] = geo / C.GRAVITY
        # ψ = (Φ − Φ_b)/f_r: u = −(1/a) ∂ψ/∂φ, v = (1/(a cos φ)) ∂ψ/∂λ
        out["ua"][i] = -(r * ln_p[:, None, None] * s_phi + v_s_phi) / (a * f_r)
        out["va"][i] = (r * ln_p[:, None, None] * s_lam + v_s_lam) / (a * f_r)

    if calendar in ("standard", "gregorian", "proleptic_gregorian"):
        time = np.datetime64(start, "ns") + (hours * 3600.0).astype("timedelta64[s]").astype("timedelta64[ns]")
    else:
        import cftime

        t0 = cftime.datetime.strptime(start, "%Y-%m-%d", calendar=calendar)
        time = np.array([t0 + datetime.timedelta(hours=float(h)) for h in hours], dtype=object)
    dims = ("time", "plev", "lat", "lon")
    attrs = {
        "ta": {"standard_name": "air_temperature", "units": "K", "long_name": "air temperature"},
        "zg": {"standard_name": "geopotential_height", "units": "m", "long_name": "geopotential height"},
        "ua": {"standard_name": "eastward_wind", "units": "m s-1", "long_name": "eastward wind"},
        "va": {"standard_name": "northward_wind", "units": "m s-1", "long_name": "northward wind"},
    }
    ds = xr.Dataset(
        {k: (dims, v, attrs[k]) for k, v in out.items()},
        coords={
            "time": ("time", time, {"standard_name": "time", "axis": "T"}),
            "plev": ("plev", lev, {"standard_name": "air_pressure", "units": "hPa", "positive": "down", "axis": "Z"}),
            "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north", "axis": "Y"}),
            "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east", "axis": "X"}),
        },
        attrs={"Conventions": "CF-1.8", "title": "qgforce synthetic record (invented, smooth, hydrostatic)",
               "source": f"qgforce.stream.synthetic_record(seed={seed}, waves={waves})"},
    )
    ds["time"].encoding.update({"units": f"hours since {start}", "calendar": calendar})
    return ds


def write_synthetic_record(directory, *, files: int = 2, steps: int = 4, prefix: str = "record",
                           netcdf_format: str = "NETCDF4", **options) -> list[Path]:
    """Write :func:`synthetic_record` split along time into ``files`` NetCDF files.

    Parameters
    ----------
    directory : str or os.PathLike
        Existing directory for the files ``<prefix>_000.nc``, ``<prefix>_001.nc``, ...
    files : int
        Number of files; the ``steps`` are shared out as evenly as possible.
    steps : int
        Total number of time steps.
    prefix : str
        File name prefix.
    netcdf_format : str
        ``"NETCDF4"`` (default, uncompressed) or a classic format such as ``"NETCDF3_64BIT"``.
    **options
        Other arguments of :func:`synthetic_record` (grid, calendar, seed, dtype, ...).

    Returns
    -------
    list of pathlib.Path
        The files, in time order.  Each file is built and written on its own, so memory holds
        one file's steps at a time.
    """
    directory = Path(directory)
    if not 1 <= files <= steps:
        raise OptionError(f"files must be between 1 and steps ({steps}); found {files}")
    bounds = np.linspace(0, steps, files + 1).round().astype(int)
    paths = []
    for i, (lo, hi) in enumerate(zip(bounds[:-1], bounds[1:])):
        path = directory / f"{prefix}_{i:03d}.nc"
        synthetic_record(steps=int(hi - lo), first_step=int(lo), **options).to_netcdf(path, format=netcdf_format)
        paths.append(path)
    return paths
