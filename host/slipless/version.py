"""The release, in one place (pyproject.toml repeats it)."""

__version__ = "0.3.0"
