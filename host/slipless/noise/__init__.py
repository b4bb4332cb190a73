"""Noise of a run's streams and the sensitivity of its pulse fit.

    from slipless import noise
    result = noise.analyse(run)              # or analysis=run.pulses(...), prediction=...
    doc = noise.summary(result)              # JSON-ready dict (null for missing values)
    fig = noise.figure(result)               # matplotlib Figure: spectra, Allan deviations, reach

spans.py: gap-free spans of a ChannelStore; psd.py: Welch PSD over them and the
noise floor; allan.py: overlapping Allan deviation with chi-square intervals;
gyro.py: IEEE Std 952 terms (N, B, K) read off it; sensitivity.py: the smallest
resolvable d and b against pulses and run time; streams.py and analysis.py put
them together; document.py: the JSON; plot.py: the figure.
"""

from __future__ import annotations

from typing import Any

from slipless.noise.analysis import Noise, analyse
from slipless.noise.document import to_dict


def summary(result: Noise | Any, **options: Any) -> dict[str, Any]:
    """The JSON-ready dict of a noise analysis; given a Run, analyses it first
    (options as analyse()'s)."""
    return to_dict(result if isinstance(result, Noise) else analyse(result, **options))


def figure(result: Noise) -> Any:
    """The noise figure (matplotlib Figure; matplotlib loads on first use)."""
    from slipless.noise.plot import figure as draw

    return draw(result)


__all__ = ["Noise", "analyse", "figure", "summary"]
