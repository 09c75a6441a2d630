"""The version of qgforce, in one place (imported by the package root and by every module that records it)."""

__version__ = "0.1.0"
