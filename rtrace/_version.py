"""The package version, defined here only (``pyproject.toml`` reads it; so do the FITS headers and manifests)."""

__version__ = "0.1.0"
