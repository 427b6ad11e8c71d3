"""The package version (its own module, so that no module imports the package itself)."""

__version__ = "0.1.0"
