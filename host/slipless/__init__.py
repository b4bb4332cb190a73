"""slipless: laptop side of the rotor telemetry tools (decode, tables, demo)."""

__version__ = "0.3.0"
