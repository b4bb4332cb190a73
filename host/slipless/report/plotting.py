"""matplotlib for the commands that draw: the file-only Agg back end (no
display needed), imported on first use so commands that draw nothing stay quick."""

from __future__ import annotations

from typing import Any


def pyplot() -> Any:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt
