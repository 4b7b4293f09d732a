"""The package version (one place; chainplan.__version__ and every output read it)."""
__version__ = "0.1.0"
