"""Data files shipped with qgforce (see README.md in this folder for sources and licences)."""
