"""Physical constants used throughout qgforce, in SI units.

Every value carries its source beside it.  Code never writes a physical constant
inline: it imports it from here, so that a change of convention happens in one place.
"""

from __future__ import annotations

#: Mean radius of the Earth [m].  IUGG mean radius R1 of the GRS 80 ellipsoid
#: (Moritz 1980, "Geodetic Reference System 1980", Bull. Géodésique 54), rounded to
#: the value most NWP models use; 6371008.8 m unrounded.
EARTH_RADIUS = 6.371e6

#: Angular velocity of the Earth's rotation [rad s-1] (sidereal day),
#: IERS Conventions 2010, Technical Note 36, Table 1.1.
EARTH_ANGULAR_VELOCITY = 7.292115e-5

#: Standard acceleration of gravity [m s-2].  CGPM 1901 conventional value, also
#: g0 of the US Standard Atmosphere 1976 (NOAA/NASA/USAF, Table 1 constants).
GRAVITY = 9.80665

#: Specific gas constant of dry air [J kg-1 K-1].  US Standard Atmosphere 1976:
#: R* / M0 = 8314.32 / 28.9644 = 287.053; the textbook value 287.04
#: (Wallace & Hobbs 2006, Atmospheric Science, 2nd ed., section 3.1.1) differs by 5e-5.
DRY_AIR_GAS_CONSTANT = 287.05

#: Specific heat of dry air at constant pressure [J kg-1 K-1]
#: (Wallace & Hobbs 2006, Atmospheric Science, 2nd ed., Table 3.1: 1004).
DRY_AIR_SPECIFIC_HEAT_P = 1004.0

#: Poisson exponent R_d / c_p [1] (derived from the two values above; ~0.2859).
KAPPA = DRY_AIR_GAS_CONSTANT / DRY_AIR_SPECIFIC_HEAT_P

#: Reference pressure of potential temperature [Pa] (common practice: 1000 hPa).
REFERENCE_PRESSURE = 100000.0

#: Specific gas constant of water vapour [J kg-1 K-1]
#: (Wallace & Hobbs 2006, Atmospheric Science, 2nd ed., section 3.1.1: 461.51).
WATER_VAPOUR_GAS_CONSTANT = 461.51

#: Ratio of the gas constants of dry air and water vapour, epsilon = R_d / R_v [1] (~0.622).
EPSILON = DRY_AIR_GAS_CONSTANT / WATER_VAPOUR_GAS_CONSTANT

#: Latent heat of vaporisation at 0 °C [J kg-1]
#: (Wallace & Hobbs 2006, Atmospheric Science, 2nd ed., section 3.7: 2.5e6).
LATENT_HEAT_VAPORISATION = 2.501e6

#: Specific heat of liquid water [J kg-1 K-1] (Bolton 1980, Mon. Wea. Rev. 108, 1046-1053: 4218 at 0 °C).
LIQUID_WATER_SPECIFIC_HEAT = 4218.0

#: Specific heat of water vapour at constant pressure [J kg-1 K-1] (Bolton 1980: 1885).
WATER_VAPOUR_SPECIFIC_HEAT_P = 1885.0

#: The Celsius zero, 0 °C = 273.15 K [K] (definition of the degree Celsius: BIPM, *The International
#: System of Units (SI)*, 9th ed., 2019, section 2.3.1).
ZERO_CELSIUS = 273.15

#: Seconds in an hour and a day (definitions).
SECONDS_PER_HOUR = 3600.0
SECONDS_PER_DAY = 86400.0

#: Latitude half-width [degrees] of the equatorial band where the geostrophic wind and the
#: QG omega equation are masked by default (common practice: QG scaling needs Rossby
#: number << 1, which fails within roughly 10-15 degrees of the equator).
DEFAULT_EQUATOR_MASK_DEGREES = 10.0

__all__ = [
    "EARTH_RADIUS",
    "EARTH_ANGULAR_VELOCITY",
    "GRAVITY",
    "DRY_AIR_GAS_CONSTANT",
    "DRY_AIR_SPECIFIC_HEAT_P",
    "KAPPA",
    "REFERENCE_PRESSURE",
    "WATER_VAPOUR_GAS_CONSTANT",
    "EPSILON",
    "LATENT_HEAT_VAPORISATION",
    "LIQUID_WATER_SPECIFIC_HEAT",
    "WATER_VAPOUR_SPECIFIC_HEAT_P",
    "ZERO_CELSIUS",
    "SECONDS_PER_HOUR",
    "SECONDS_PER_DAY",
    "DEFAULT_EQUATOR_MASK_DEGREES",
]
