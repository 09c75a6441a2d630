"""The lookup table of the variables and coordinates qgforce reads (:data:`TABLE`).

A declarative table, one entry per canonical name, read by discovery (:mod:`.discover`) and
normalisation (:mod:`.normalize`).  CF standard names from the CF standard name table
(Eaton et al., 2023, CF Conventions 1.11, section 3.3).
"""

from __future__ import annotations


#: Angle spellings accepted on latitude/longitude besides the CF ones that identify them.
_ANGLE_UNITS = ("degree", "degrees", "deg", "radian", "radians", "rad")

#: What qgforce knows about each canonical variable and coordinate.
#:
#: Keys of each entry: ``role`` ("data" or "coordinate"); ``units`` (the SI units of the
#: normalised dataset, also deciding by dimensionality whether a candidate fits: ``z`` in
#: ``m2 s-2`` is geopotential, in ``m`` geopotential height); ``standard_names`` (CF names that
#: identify it); ``names`` (common short names, matched case-insensitively, the canonical name
#: always included); for coordinates ``axis``, ``cf_units`` (unit spellings that identify it,
#: CF section 4), ``positive`` (a ``positive`` attribute identifies it), ``ndim`` (allowed
#: numbers of dimensions), ``pool`` ("coords" or "all" variables searched);
#: ``foreign_standard_names`` (recognised as this coordinate but refused: a vertical coordinate
#: that is not pressure); ``long_name`` (written when the input has none; the winds' is their
#: standard name, which says their frame); ``keep_unfit`` (return a candidate whose units do
#: not fit when there is no other, so that the caller can refuse it with a clear error);
#: ``assumed_units`` (used when a coordinate has no units).
TABLE: dict[str, dict] = {
    "temperature": {
        "role": "data",
        "units": "K",
        "standard_names": ("air_temperature",),
        "names": ("t", "ta", "temp", "air", "tmp", "tk"),
        "long_name": "air temperature",
    },
    "geopotential": {
        "role": "data",
        "units": "m2 s-2",
        "standard_names": ("geopotential",),
        "names": ("z", "phi", "geop", "fi"),
        "long_name": "geopotential",
    },
    "geopotential_height": {
        "role": "data",
        "units": "m",
        "standard_names": ("geopotential_height",),
        "names": ("z", "zg", "hgt", "gh", "height", "gph", "h"),
        "long_name": "geopotential height",
    },
    "u": {
        "role": "data",
        "units": "m s-1",
        "standard_names": ("eastward_wind", "grid_eastward_wind", "x_wind"),
        "names": ("ua", "uwnd", "ugrd", "u_wind", "uwind", "uu"),
    },
    "v": {
        "role": "data",
        "units": "m s-1",
        "standard_names": ("northward_wind", "grid_northward_wind", "y_wind"),
        "names": ("va", "vwnd", "vgrd", "v_wind", "vwind", "vv"),
    },
    "specific_humidity": {
        "role": "data",
        "units": "kg kg-1",
        "standard_names": ("specific_humidity",),
        "names": ("q", "hus", "shum", "spfh", "qv", "sphum"),
        "long_name": "specific humidity",
    },
    "omega": {
        "role": "data",
        "units": "Pa s-1",
        "standard_names": ("lagrangian_tendency_of_air_pressure",),
        "names": ("w", "wap", "vvel", "omg"),
        "long_name": "vertical velocity in pressure coordinates (omega)",
    },
    "level": {
        "role": "coordinate",
        "units": "Pa",
        "standard_names": ("air_pressure",),
        "foreign_standard_names": (
            "model_level_number",
            "atmosphere_hybrid_sigma_pressure_coordinate",
            "atmosphere_hybrid_height_coordinate",
            "atmosphere_sigma_coordinate",
            "atmosphere_ln_pressure_coordinate",
            "atmosphere_sleve_coordinate",
            "air_potential_temperature",
            "height",
            "altitude",
            "geopotential_height",
        ),
        "axis": "Z",
        "positive": True,
        "cf_units": "pressure",  # any unit of pressure identifies a vertical coordinate (CF 4.3)
        "names": ("lev", "plev", "pressure", "pres", "pressure_level", "isobaric", "isobaricinhpa"),
        "ndim": (0, 1),
        "pool": "coords",
        "keep_unfit": True,
        "long_name": "pressure",
    },
    "latitude": {
        "role": "coordinate",
        "units": "degrees_north",
        "standard_names": ("latitude",),
        "axis": "Y",
        "cf_units": ("degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"),
        "names": ("lat", "nav_lat", "xlat", "lats"),
        "ndim": (1, 2),
        "pool": "all",
        "assumed_units": "degrees_north",
        "long_name": "latitude",
    },
    "longitude": {
        "role": "coordinate",
        "units": "degrees_east",
        "standard_names": ("longitude",),
        "axis": "X",
        "cf_units": ("degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"),
        "names": ("lon", "long", "nav_lon", "xlong", "lons"),
        "ndim": (1, 2),
        "pool": "all",
        "assumed_units": "degrees_east",
        "long_name": "longitude",
    },
    "x": {
        "role": "coordinate",
        "units": "m",
        "standard_names": ("projection_x_coordinate",),
        "axis": "X",
        "names": ("xc", "west_east", "easting"),
        "ndim": (1,),
        "pool": "coords",
        "long_name": "x coordinate of projection",
    },
    "y": {
        "role": "coordinate",
        "units": "m",
        "standard_names": ("projection_y_coordinate",),
        "axis": "Y",
        "names": ("yc", "south_north", "northing"),
        "ndim": (1,),
        "pool": "coords",
        "long_name": "y coordinate of projection",
    },
}

_DATA_KEYS = tuple(k for k, s in TABLE.items() if s["role"] == "data")
_COORD_KEYS = tuple(k for k, s in TABLE.items() if s["role"] == "coordinate")
_WIND_FRAMES = ("grid", "earth")
#: Output CF standard names of the winds per frame (CF standard name table).
_WIND_STANDARD_NAMES = {
    ("u", "earth"): "eastward_wind",
    ("v", "earth"): "northward_wind",
    ("u", "grid"): "grid_eastward_wind",
    ("v", "grid"): "grid_northward_wind",
}
_EARTH_WIND_NAMES = ("eastward_wind", "northward_wind")
_GRID_WIND_NAMES = ("grid_eastward_wind", "grid_northward_wind", "x_wind", "y_wind")
#: Attributes that say where a variable sits among others, rewritten on output.
_LINK_ATTRS = ("grid_mapping", "coordinates", "bounds", "axis", "positive", "standard_name")
