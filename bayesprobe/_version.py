"""The package version, in one place (imported without loading the package's heavy parts)."""
__version__ = "0.1.0"
