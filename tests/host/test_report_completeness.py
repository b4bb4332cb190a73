"""The report's completeness section when the loss account has nothing to
say: no gaps, and no worst angle sector (no loss, or no angle stream)."""

from __future__ import annotations

from typing import Any

import pytest

from slipless.report.page import ReportData, _completeness, _summary


def _run(**extra: Any) -> dict[str, Any]:
    return {"board": 1, "run": 2, "idle": False, "frames_expected": 100, "samples_expected": 800,
            "end_seen": True, "closes": True, "frames_received": 100,
            "frames_recovered_resend": 0, "frames_recovered_mirror": 0, "frames_lost": 0,
            "frames_dropped_board": 0, **extra}


@pytest.mark.parametrize("extra", [{"gaps": []}, {}, {"gaps": None},
                                   {"gaps": [], "angle": {"worst_deg": None}},
                                   {"gaps": [], "angle": {}}, {"gaps": [], "angle": None}])
def test_no_gaps_no_worst_sector(extra: dict[str, Any]) -> None:
    d = ReportData([], [], loss_doc={"runs": [_run(**extra)]})
    html = _completeness(d)
    assert "the account closes" in html and "No gaps in what arrived live." in html
    angle = extra.get("angle")
    assert ("no worst sector" in html) == bool(angle)  # an angle account that missed nothing
    assert "worst sector is around" not in html
    assert "<td>0</td>" in _summary(d)  # gaps: 0


def test_worst_sector_named() -> None:
    d = ReportData([], [], loss_doc={"runs": [_run(gaps=[], angle={"worst_deg": 93.4})]})
    assert "the worst sector is around 93 degrees" in _completeness(d)
