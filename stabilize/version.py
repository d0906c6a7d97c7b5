"""The package version, on the ground floor so any module can stamp it into what it writes."""

__all__ = ["__version__"]

__version__ = "0.1.0"
