"""The table of qgforce's output variables: one row per name, asked by every module that shows or sorts them.

Each row (:class:`OutputVariable`) says what a result name is: its group (``forcing``, ``omega``,
``solver``, ``lifting``, ``input``), the omega form it belongs to, CF ``units``, ``long_name`` and
``standard_name``, a short label for text, a panel title for figures, the display units and the
factor from SI to them, the vector pair drawn on its map, the input variables it needs, and the
sign that means ascent.  The jobs, the plots and the ω attribution look names up here instead of
matching name prefixes or substrings.

Names built by the inversion follow two rules, resolved by :func:`lookup`:

* ``omega_<term>``: ω forced by the right-hand-side term ``<term>`` (a ``forcing`` row with a
  ``form``); same units and standard name as ``omega_total``;
* ``<name>_<form>``: the copy of a form-shared output (``omega_total``, ``w_total``, the solver
  counts, ...) for the second omega form when both are computed (``omega_total_traditional``).

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11, and
the CF standard name table (version 84) for the ``standard_name`` values.
Holton, J. R. and G. J. Hakim, 2013: *An Introduction to Dynamic Meteorology*, 5th ed., §6.4 (the
forcing terms); Hoskins, Draghici and Davies (1978) (the Q-vector form); Keyser, Reeder and Reed
(1988) (the Q_n/Q_s partition); Petterssen (1936) (frontogenesis).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import xarray as xr

from .errors import OptionError, UnitsError

__all__ = ["OutputVariable", "TABLE", "FORMS_OF_OMEGA", "lookup", "find", "names", "label", "panel_title",
           "vector_pair", "is_motion", "form_shared", "form_independent", "to_display", "LIFTING_FIELDS"]

#: The two omega forms and their labels.
FORMS_OF_OMEGA = {"qvector": "Q-vector", "traditional": "traditional"}

_DYNAMIC = ("temperature", "geopotential")
_FULL_WIND = ("temperature", "geopotential", "u", "v")
_MOIST = ("temperature", "geopotential", "specific_humidity")
_FORCING_UNITS = "Pa-1 s-3"


@dataclass(frozen=True)
class OutputVariable:
    """One output variable of qgforce.

    Attributes
    ----------
    name : str
    group : {"forcing", "omega", "solver", "lifting", "input"}
    units : str
        CF units of the stored values (SI).
    long_name : str
    standard_name : str
        CF standard name, or ``""`` where the table has none.
    label : str
        Short text for messages and attribution lines.
    title : str
        Panel title of a figure (the colour bar carries the units).
    form : str or None
        ``"qvector"`` or ``"traditional"`` for a right-hand-side term of that form (and for the ω
        it forces), None otherwise.
    rhs_term : bool
        A right-hand-side term of the omega equation (ω by term exists for it).
    form_shared : bool
        An inversion output whose name does not say the form (a second form's copy is suffixed).
    display_units, display_scale : str, float
        Units of figures and the factor from ``units`` to them (1 and the same units when equal).
    vectors : tuple of str
        ``(x, y)`` names of the vectors drawn on its map, or ``()``.
    needs : tuple of str
        Input variables of the normalised dataset it is computed from.
    ascent_sign : int
        -1 when negative values mean ascent (ω), +1 when positive values force or are ascent,
        0 when the field has no sign meaning.
    """

    name: str
    group: str
    units: str
    long_name: str
    standard_name: str = ""
    label: str = ""
    title: str = ""
    form: str | None = None
    rhs_term: bool = False
    form_shared: bool = False
    display_units: str = ""
    display_scale: float = 1.0
    vectors: tuple = ()
    needs: tuple = _DYNAMIC
    ascent_sign: int = 0

    def __post_init__(self):
        if not self.label:
            object.__setattr__(self, "label", self.name.replace("_", " "))
        if not self.title:
            object.__setattr__(self, "title", self.label)
        if not self.display_units:
            object.__setattr__(self, "display_units", self.units)


def _rows(*rows: OutputVariable) -> dict:
    return {r.name: r for r in rows}


_V = OutputVariable
#: Frontogenesis display unit, K (100 km)-1 (3 h)-1 = SI value × 1e5 m × 10800 s (*common practice*).
_FRONTO = dict(display_units="K (100 km)-1 (3 h)-1", display_scale=1.08e9, needs=_FULL_WIND)

#: Every output name qgforce writes, in the order of the results.
TABLE: dict[str, OutputVariable] = _rows(
    _V("temperature_advection", "forcing", "K s-1", "horizontal temperature advection by the geostrophic wind",
       "tendency_of_air_temperature_due_to_advection", ascent_sign=1),
    _V("vorticity_advection", "forcing", "s-2", "advection of absolute geostrophic vorticity", ascent_sign=1),
    _V("differential_vorticity_advection", "forcing", _FORCING_UNITS, "differential vorticity advection term",
       form="traditional", rhs_term=True, ascent_sign=1),
    _V("layer_differential_vorticity_advection", "forcing", _FORCING_UNITS,
       "two-level differential vorticity advection, -f0 (A_eta(upper) - A_eta(lower)) / dp",
       label="layer differential vorticity advection", title="differential vorticity advection (two-level layer)",
       ascent_sign=1),
    _V("thermal_advection_term", "forcing", _FORCING_UNITS, "thermal advection term", label="thermal advection",
       title="thermal advection term", form="traditional", rhs_term=True, ascent_sign=1),
    _V("q_vector_x", "forcing", "m Pa-1 s-3", "eastward Q-vector"),
    _V("q_vector_y", "forcing", "m Pa-1 s-3", "northward Q-vector"),
    _V("q_vector_forcing", "forcing", _FORCING_UNITS, "Q-vector forcing", label="Q-vector convergence (-2 div Q)",
       title="Q-vector forcing −2∇·Q", form="qvector", rhs_term=True, vectors=("q_vector_x", "q_vector_y"),
       ascent_sign=1),
    _V("qn_x", "forcing", "m Pa-1 s-3", "eastward Q-vector component across the isentropes"),
    _V("qn_y", "forcing", "m Pa-1 s-3", "northward Q-vector component across the isentropes"),
    _V("qs_x", "forcing", "m Pa-1 s-3", "eastward Q-vector component along the isentropes"),
    _V("qs_y", "forcing", "m Pa-1 s-3", "northward Q-vector component along the isentropes"),
    _V("qn_forcing", "forcing", _FORCING_UNITS, "forcing by Q_n", label="Q_n (across isentropes)",
       title="Q_n forcing", form="qvector", vectors=("qn_x", "qn_y"), ascent_sign=1),
    _V("qs_forcing", "forcing", _FORCING_UNITS, "forcing by Q_s", label="Q_s (along isentropes)",
       title="Q_s forcing", form="qvector", vectors=("qs_x", "qs_y"), ascent_sign=1),
    _V("beta_term", "forcing", _FORCING_UNITS, "beta term of the Q-vector omega equation", form="qvector",
       rhs_term=True, ascent_sign=1),
    _V("frontogenesis", "forcing", "K m-1 s-1", "2-D frontogenesis function", ascent_sign=1, **_FRONTO),
    _V("frontogenesis_divergence", "forcing", "K m-1 s-1", "divergence part of frontogenesis", ascent_sign=1,
       **_FRONTO),
    _V("frontogenesis_deformation", "forcing", "K m-1 s-1", "deformation part of frontogenesis", ascent_sign=1,
       **_FRONTO),
    _V("isentrope_dilatation_angle", "forcing", "degree", "angle from the axis of dilatation to the isentropes",
       needs=_FULL_WIND),
    _V("potential_temperature_gradient", "forcing", "K m-1", "magnitude of the isobaric gradient of potential "
       "temperature", needs=_FULL_WIND),
    _V("u_geostrophic", "forcing", "m s-1", "eastward geostrophic wind", "geostrophic_eastward_wind"),
    _V("v_geostrophic", "forcing", "m s-1", "northward geostrophic wind", "geostrophic_northward_wind"),
    _V("geopotential", "input", "m2 s-2", "geopotential", "geopotential", needs=("geopotential",)),
    _V("omega_total", "omega", "Pa s-1", "QG omega (sum of all forcing terms)", "lagrangian_tendency_of_air_pressure",
       title="QG ω (all terms)", form_shared=True, ascent_sign=-1),
    _V("w_total", "omega", "m s-1", "QG vertical velocity (hydrostatic, from omega_total)", "upward_air_velocity",
       title="QG w (all terms)", form_shared=True, ascent_sign=1),
    _V("omega_boundary", "omega", "Pa s-1", "omega on the boundary of the inversion",
       "lagrangian_tendency_of_air_pressure", form_shared=True, ascent_sign=-1),
    _V("solver_residual", "solver", "1", "largest relative residual of the solves", form_shared=True),
    _V("solver_iterations", "solver", "1", "largest Krylov iteration count of the solves", form_shared=True),
    _V("sigma_floored_points", "solver", "1", "points where the static stability was floored", form_shared=True),
    _V("static_stability", "solver", "m2 Pa-2 s-2", "static stability used by the operator"),
    _V("hours_to_saturation", "lifting", "h", "hours of the ascent until the parcel saturates",
       title="hours of QG ascent to saturation", needs=_MOIST),
    _V("hours_to_initiation", "lifting", "h", "hours of the ascent until initiation potential",
       title="hours of QG ascent to initiation potential", needs=_MOIST),
    _V("parcel_pressure", "lifting", "hPa", "pressure where the tracked parcel starts", needs=_MOIST),
    _V("initial_cape", "lifting", "J kg-1", "CAPE of the tracked parcel before lifting", needs=_MOIST),
    _V("initial_cin", "lifting", "J kg-1", "CIN of the tracked parcel before lifting", needs=_MOIST),
)

#: The column-lifting outputs, in the order of the results.
LIFTING_FIELDS = tuple(n for n, v in TABLE.items() if v.group == "lifting")


def find(name: str) -> OutputVariable | None:
    """The row of ``name`` (including the ``omega_<term>`` and ``<name>_<form>`` rules), or None."""
    name = str(name)
    if name in TABLE:
        return TABLE[name]
    for form in FORMS_OF_OMEGA:
        base = name[: -len(form) - 1] if name.endswith(f"_{form}") else None
        if base in TABLE and TABLE[base].form_shared:
            return replace(TABLE[base], name=name, form=form)
    term = name[len("omega_"):] if name.startswith("omega_") else None
    row = TABLE.get(term) if term else None
    if row is not None and row.group == "forcing" and row.form is not None:
        total = TABLE["omega_total"]
        return replace(total, name=name, long_name=f"QG omega forced by {row.long_name}", label=row.label,
                       title=f"QG ω by {row.label}", form=row.form, form_shared=False, rhs_term=False,
                       needs=row.needs)
    return None


def lookup(name: str) -> OutputVariable:
    """The row of ``name``; :class:`~qgforce.errors.OptionError` listing the names when unknown."""
    row = find(name)
    if row is None:
        raise OptionError(f"{name!r} is not an output variable of qgforce; the names are: {', '.join(TABLE)} "
                          "(and omega_<term> for each omega forcing term)")
    return row


def names(group: str | None = None, *, form: str | None = None) -> tuple:
    """Table names, optionally of one group and one form."""
    return tuple(n for n, v in TABLE.items() if (group is None or v.group == group) and (form is None or v.form == form))


def label(name: str) -> str:
    """Short text for ``name`` (its own words for unknown names)."""
    row = find(name)
    return row.label if row is not None else str(name).replace("_", " ")


def panel_title(name: str) -> str:
    """Panel title of ``name`` in a figure."""
    row = find(name)
    return row.title if row is not None else str(name).replace("_", " ")


def vector_pair(name: str) -> tuple:
    """``(x, y)`` names of the vectors drawn on the map of ``name``, or ``()``."""
    row = find(name)
    return row.vectors if row is not None else ()


def is_motion(name: str) -> bool:
    """True for a vertical-motion output (ω of any term or form, w)."""
    row = find(name)
    return row is not None and row.group == "omega"


def form_shared(name: str) -> bool:
    """True for an inversion output whose name does not say the form (suffixed for a second form)."""
    row = TABLE.get(str(name))
    return row is not None and row.form_shared


def form_independent(name: str) -> bool:
    """True for an inversion output that does not depend on the form (the static stability)."""
    return str(name) == "static_stability"


def to_display(da: xr.DataArray) -> xr.DataArray:
    """``da`` in the display units of its table row (frontogenesis: K (100 km)-1 (3 h)-1).

    Raises
    ------
    UnitsError
        When ``da`` carries units other than the row's stored units.
    """
    row = find(str(da.name))
    if row is None or row.display_scale == 1.0:
        return da
    units = da.attrs.get("units", row.units)
    if units == row.display_units:
        return da
    if units != row.units:
        raise UnitsError(f"{da.name} is expected in {row.units!r} to be shown in {row.display_units!r}; found "
                         f"{units!r}")
    out = da * row.display_scale
    out.attrs = {**da.attrs, "units": row.display_units}
    out.name = da.name
    return out
