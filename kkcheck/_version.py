"""The kkcheck version, in one place (read by the package, the writers and the report)."""

__version__ = "0.1.0"
