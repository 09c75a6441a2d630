"""qgforce: quasi-geostrophic forcing diagnostics and the inverted QG omega equation.

The public API, grouped as the data flows: reading → grid → calculus → diagnostics → solver → outputs.

>>> import qgforce
>>> ds = qgforce.open_dataset(qgforce.scenario.demo_path())          # doctest: +SKIP
>>> terms = qgforce.forcing_terms(ds, smoothing="gaussian:100km")   # doctest: +SKIP
>>> omega = qgforce.invert_omega(ds, form="qvector")                 # doctest: +SKIP

Submodules not imported by name here: :mod:`qgforce.plot` (matplotlib, imported lazily),
:mod:`qgforce.solver` (the raw numerical solvers), :mod:`qgforce.scenario` (the demo data),
:mod:`qgforce.cases` and :mod:`qgforce.selfcheck` (analytic checks).
"""

from ._version import __version__

from . import cases, scenario, selfcheck, solver

from .calculus import d2dp2, ddp, ddx, ddy, divergence, gradient, laplacian, vorticity
from .errors import (
    ConvergenceError,
    DataQualityWarning,
    EquatorialMaskWarning,
    GridError,
    InputDataError,
    MissingVariableError,
    OmittedTermWarning,
    OptionError,
    PoleRowWarning,
    QGForceError,
    QGForceWarning,
    UnitsError,
)
from .forcing import (
    beta_term,
    differential_vorticity_advection,
    forcing_terms,
    frontogenesis,
    layer_differential_vorticity_advection,
    layer_temperature_advection,
    omega_rhs,
    q_vectors,
    temperature_advection,
    thermal_advection_term,
    to_display_units,
    vorticity_advection,
)
from .grid import Grid
from .io import check_values, forecast_axes, normalize, open_dataset, require, select_realisation
from .kinematics import (
    absolute_vorticity,
    advection,
    beta_parameter,
    coriolis_parameter,
    default_coriolis,
    deformation,
    geostrophic_vorticity,
    geostrophic_wind,
    earth_relative_wind,
    grid_relative_wind,
    horizontal_divergence,
    relative_vorticity,
    velocity_gradient,
)
from .ascent import hours_to_initiation, lift_columns
from .moist import column_diagnostics, equivalent_potential_temperature, lifting_condensation_level, saturation_vapour_pressure
from .omega import invert_omega, lift_over_time, select_domain
from .selfcheck import run_selfcheck
from .smoothing import five_point, gaussian, nine_point, shuman_box, shuman_cross, smooth
from .thermo import (
    density,
    mean_static_stability,
    omega_to_w,
    potential_temperature,
    static_stability,
    virtual_temperature,
    w_to_omega,
)

__all__ = [
    "__version__",
    # reading model output
    "open_dataset",
    "normalize",
    "require",
    "check_values",
    "select_realisation",
    "forecast_axes",
    # grid and calculus
    "Grid",
    "ddx",
    "ddy",
    "ddp",
    "d2dp2",
    "gradient",
    "divergence",
    "vorticity",
    "laplacian",
    # thermodynamics
    "potential_temperature",
    "static_stability",
    "mean_static_stability",
    "virtual_temperature",
    "density",
    "omega_to_w",
    "w_to_omega",
    # kinematics
    "coriolis_parameter",
    "default_coriolis",
    "beta_parameter",
    "geostrophic_wind",
    "grid_relative_wind",
    "earth_relative_wind",
    "velocity_gradient",
    "relative_vorticity",
    "absolute_vorticity",
    "geostrophic_vorticity",
    "horizontal_divergence",
    "deformation",
    "advection",
    # smoothing
    "smooth",
    "gaussian",
    "shuman_cross",
    "shuman_box",
    "five_point",
    "nine_point",
    # QG forcing terms
    "temperature_advection",
    "layer_temperature_advection",
    "vorticity_advection",
    "differential_vorticity_advection",
    "layer_differential_vorticity_advection",
    "thermal_advection_term",
    "q_vectors",
    "beta_term",
    "frontogenesis",
    "to_display_units",
    "omega_rhs",
    "forcing_terms",
    # the omega inversion
    "invert_omega",
    "select_domain",
    "lift_over_time",
    # moist thermodynamics and column lifting
    "saturation_vapour_pressure",
    "lifting_condensation_level",
    "equivalent_potential_temperature",
    "column_diagnostics",
    "lift_columns",
    "hours_to_initiation",
    # checks and data
    "run_selfcheck",
    "cases",
    "selfcheck",
    "scenario",
    "solver",
    # errors and warnings
    "QGForceError",
    "MissingVariableError",
    "UnitsError",
    "GridError",
    "InputDataError",
    "OptionError",
    "ConvergenceError",
    "QGForceWarning",
    "EquatorialMaskWarning",
    "DataQualityWarning",
    "OmittedTermWarning",
    "PoleRowWarning",
]
