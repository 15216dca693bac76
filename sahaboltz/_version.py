"""The package version, in one place (read by setup.cfg, the CLI and the file provenance)."""

__version__ = "0.1.0"
