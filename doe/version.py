"""The package version (one place; doe.__version__ and the report read it)."""
__version__ = "0.1.0"
