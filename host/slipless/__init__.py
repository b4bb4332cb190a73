"""slipless: laptop side of the rotor telemetry tools.

    import slipless
    run = slipless.open(["run.slcap"], mirrors=["run.mirror"])   # decoded once
    run.loss(); run.align("aligned"); run.pulses(); run.report("report.html")

`open` and `Run` are loaded on first use, so `import slipless` stays quick.
"""

from __future__ import annotations

from typing import Any

from slipless.version import __version__

__all__ = ["Run", "__version__", "open"]


def __getattr__(name: str) -> Any:
    if name == "open":
        from slipless.run import open_run

        return open_run
    if name == "Run":
        from slipless.run import Run

        return Run
    raise AttributeError(f"module 'slipless' has no attribute {name!r}")
