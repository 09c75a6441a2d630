"""qgforce: quasi-geostrophic forcing diagnostics and the inverted QG omega equation.

The public API, grouped as the data flows: reading → grid → calculus → diagnostics → solver → outputs.
"""

__version__ = "0.1.0"

from .calculus import d2dp2, ddp, ddx, ddy, divergence, gradient, laplacian, vorticity
from .errors import (
    ConvergenceError,
    DataQualityWarning,
    EquatorialMaskWarning,
    GridError,
    InputDataError,
    MissingVariableError,
    QGForceError,
    QGForceWarning,
    UnitsError,
)
from .grid import Grid
from .kinematics import (
    absolute_vorticity,
    advection,
    beta_parameter,
    coriolis_parameter,
    deformation,
    geostrophic_vorticity,
    geostrophic_wind,
    grid_relative_wind,
    horizontal_divergence,
    relative_vorticity,
    velocity_gradient,
)
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
    "beta_parameter",
    "geostrophic_wind",
    "grid_relative_wind",
    "velocity_gradient",
    "relative_vorticity",
    "absolute_vorticity",
    "geostrophic_vorticity",
    "horizontal_divergence",
    "deformation",
    "advection",
    # errors and warnings
    "QGForceError",
    "MissingVariableError",
    "UnitsError",
    "GridError",
    "InputDataError",
    "ConvergenceError",
    "QGForceWarning",
    "EquatorialMaskWarning",
    "DataQualityWarning",
]
