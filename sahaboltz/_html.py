"""Small HTML summaries for notebooks (``_repr_html_`` of states and tables)."""

from __future__ import annotations

import html
from typing import Iterable

import numpy as np


def span(values, unit: str = "", fmt: str = ".4g") -> str:
    """'5800 K' for one value, '3000 .. 1.2e+04 K (40 states)' for several, NaN-aware."""
    v = np.asarray(values, dtype=float).ravel()
    ok = v[np.isfinite(v)]
    tail = f" {unit}" if unit else ""
    if v.size == 1:
        return f"{v[0]:{fmt}}{tail}"
    if ok.size == 0:
        return "all NaN"
    return f"{ok.min():{fmt}} .. {ok.max():{fmt}}{tail} ({v.size} states)"


def html_table(title: str, rows: Iterable[tuple[str, str]], note: str = "") -> str:
    """A two-column table with a caption; every text is escaped."""
    body = "".join(f"<tr><th style='text-align:left'>{html.escape(str(k))}</th>"
                   f"<td style='text-align:left'>{html.escape(str(v))}</td></tr>"
                   for k, v in rows)
    foot = f"<p style='font-size:smaller'>{html.escape(note)}</p>" if note else ""
    return (f"<div><table><caption style='text-align:left'><b>{html.escape(title)}</b>"
            f"</caption>{body}</table>{foot}</div>")


__all__ = ["html_table", "span"]
