"""Thermodynamics: the formulas once, and the labelled functions built on them.

==========================  ==============================================================
:mod:`.formulas`            the raw numpy formulas (θ, ρ, T_v, Bolton's e_s and the humidity
                            variables, dew point, LCL, θe, latent heat, pseudo-adiabatic
                            lapse rate), each written once; every other module calls these
:mod:`.adiabats`            the RK4 integrator of the pseudo-adiabats and their table
:mod:`.dry`                 θ, σ, density, ω ↔ w on isobaric DataArrays
:mod:`.moist`               the moist variables on DataArrays or numpy values (also
                            importable from :mod:`qgforce.moist`)
==========================  ==============================================================

The dry functions are importable from here (``qgforce.thermo.potential_temperature``, ...).
"""

from . import adiabats, dry, formulas, moist  # noqa: F401  (the submodules, as attributes)
from .dry import *  # the dry functions, as before the split

__all__ = list(dry.__all__)
