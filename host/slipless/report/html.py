"""The run report's page: plain HTML and CSS, every figure embedded as a base64 PNG.

No scripts, no fonts, no external addresses: the file can be mailed and
opened anywhere. Figures are drawn with matplotlib (Agg).
"""

from __future__ import annotations

import base64
import html
import io
import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from slipless.errors import InputError

CSS = """
body { font: 15px/1.45 system-ui, sans-serif; color: #1d232b; background: #f4f1ea;
       margin: 0; }
main { max-width: 1080px; margin: 0 auto; padding: 18px 26px 40px; background: #fffdf8;
       border-left: 1px solid #ddd6c8; border-right: 1px solid #ddd6c8; }
header { border-bottom: 4px double #5b6f56; margin-bottom: 10px; }
h1 { font-size: 24px; margin: 8px 0 2px; letter-spacing: 0.02em; }
h2 { font-size: 18px; margin: 28px 0 8px; padding: 3px 8px; background: #e7ece3;
     border-left: 5px solid #5b6f56; }
h3 { font-size: 15px; margin: 16px 0 6px; }
.sub { color: #5d6670; margin: 0 0 10px; }
table { border-collapse: collapse; margin: 6px 0 12px; font-variant-numeric: tabular-nums; }
th, td { padding: 3px 9px; border-bottom: 1px solid #e2ddd2; text-align: right; }
th { background: #f1ede4; font-weight: 600; }
td:first-child, th:first-child, td.t { text-align: left; }
td:not(.t) { white-space: nowrap; }  /* a number (a p-value, 1.2e-05) never wraps */
img { max-width: 100%; border: 1px solid #e2ddd2; margin: 6px 0; }
.ok { color: #2f6b3a; font-weight: 600; }
.bad { color: #9a3324; font-weight: 600; }
.note { color: #5d6670; font-size: 13px; }
.safety { background: #fbf3df; border: 1px solid #e0c98e; padding: 4px 16px; }
nav a { margin-right: 12px; color: #38523a; }
footer { margin-top: 30px; color: #7b838c; font-size: 12px; }
"""


def esc(x: object) -> str:
    return html.escape(str(x))


def num(x: Any, digits: int = 4) -> str:
    if isinstance(x, bool) or x is None:
        return esc("" if x is None else x)
    if isinstance(x, int):
        return f"{x:,}"
    if isinstance(x, float):
        return "" if math.isnan(x) else f"{x:.{digits}g}"
    return esc(x)


def table(header: Sequence[str], rows: Sequence[Sequence[Any]], digits: int = 4) -> str:
    head = "".join(f"<th>{esc(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(_td(c, digits) for c in r) + "</tr>" for r in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def _td(c: Any, digits: int) -> str:
    words = isinstance(c, str) and any(ch.isalpha() for ch in c) and " " in c
    return f'<td class="t">{num(c, digits)}</td>' if words else f"<td>{num(c, digits)}</td>"


def png(fig: Any) -> str:
    """An <img> of a matplotlib figure (closed afterwards)."""
    import matplotlib.pyplot as plt

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90)
    plt.close(fig)
    return img_bytes(buf.getvalue(), "figure")


def img_bytes(data: bytes, alt: str) -> str:
    return f'<img alt="{esc(alt)}" src="data:image/png;base64,{base64.b64encode(data).decode()}">'


def page(title: str, subtitle: str, sections: Sequence[tuple[str, str, str]], footer: str) -> str:
    """sections: (id, heading, inner HTML)."""
    nav = "".join(f'<a href="#{sid}">{esc(h)}</a>' for sid, h, _ in sections)
    body = "".join(f'<section id="{sid}"><h2>{esc(h)}</h2>{inner}</section>'
                   for sid, h, inner in sections)
    return (f'<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">'
            f"<title>{esc(title)}</title><style>{CSS}</style></head><body><main>"
            f"<header><h1>{esc(title)}</h1><p class=\"sub\">{esc(subtitle)}</p>"
            f"<nav>{nav}</nav></header>{body}<footer>{esc(footer)}</footer></main></body></html>\n")


def write_file(out: Path, text: str) -> Path:
    """A page written to out; a folder that cannot take it is one line."""
    try:
        out.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise InputError(f"--out {out}: cannot write ({exc.strerror})") from exc
    return out
