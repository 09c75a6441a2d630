"""Column diagnostics: parcels, layers and the machinery that runs kernels over columns.

Layers, bottom up (each module imports only those above it in this list and
:mod:`qgforce.thermo`):

==========================  ==============================================================
:mod:`.profile`             :class:`Profile` — columns laid out (level, column) with their
                            valid blocks; :func:`make_profile`, :func:`gather`,
                            :func:`start_state`, :func:`compiled_kernels`
:mod:`.blocks`              :func:`by_blocks` (blocks of columns on threads),
                            :func:`apply_columns` and :class:`ColumnOutput` (the labelled
                            layer), :func:`thermo_inputs`, :func:`level_values`
:mod:`.parcel`              :func:`ascend` (parcel buoyancy integrals), heights,
                            :func:`most_unstable_level`, :func:`diagnose`
:mod:`.diagnostics`         :func:`column_diagnostics` (public; also in :mod:`qgforce.moist`)
==========================  ==============================================================

The names exported here are the internal API of :mod:`qgforce.ascent`, which lifts the same
profiles: build a :class:`Profile` with :func:`make_profile`, run a block kernel with
:func:`by_blocks` inside :func:`apply_columns`, and diagnose with :func:`diagnose` or
:func:`ascend`.  They work on plain arrays in SI units and check nothing (the public functions
check their inputs with :func:`thermo_inputs`).
"""

from .blocks import (
    BLOCK,
    ColumnOutput,
    apply_columns,
    block_threads,
    by_blocks,
    level_values,
    thermo_inputs,
)
from .diagnostics import COLUMN_OUTPUTS, column_diagnostics
from .parcel import ascend, diagnose, most_unstable_level
from .profile import (
    DEFAULT_MOIST_THRESHOLD,
    DEFAULT_MOST_UNSTABLE_DEPTH,
    LEVEL,
    PARCELS,
    Profile,
    compiled_kernels,
    gather,
    make_profile,
    start_state,
)

__all__ = [
    # public
    "column_diagnostics",
    "PARCELS",
    "DEFAULT_MOST_UNSTABLE_DEPTH",
    "DEFAULT_MOIST_THRESHOLD",
    # the internal API of qgforce.ascent
    "LEVEL",
    "Profile",
    "make_profile",
    "gather",
    "start_state",
    "compiled_kernels",
    "BLOCK",
    "block_threads",
    "by_blocks",
    "ColumnOutput",
    "apply_columns",
    "COLUMN_OUTPUTS",
    "thermo_inputs",
    "level_values",
    "ascend",
    "most_unstable_level",
    "diagnose",
]
