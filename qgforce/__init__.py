"""qgforce: quasi-geostrophic forcing diagnostics."""
__version__ = "0.1.0"
