"""Rendering rows for the command line: a readable table, CSV or JSON.

Commands build a list of dicts (one per row, same keys) and hand it to :func:`emit`; the
``--format`` option chosen by the user decides the rendering.
"""

from __future__ import annotations

import csv
import io
import json
import math
import sys
from typing import Any, Iterable, Sequence

FORMATS = ("table", "csv", "json")


def add_format_option(parser) -> None:
    """Give a subcommand the shared ``--format`` option."""
    parser.add_argument("--format", choices=FORMATS, default="table",
                        help="output as a readable table (default), CSV or JSON")


def _cell(value: Any) -> str:
    if isinstance(value, float):
        if math.isnan(value):
            return "-"
        if value != 0 and (abs(value) >= 1e6 or abs(value) < 1e-3):
            return f"{value:.4e}"
        return f"{value:.6g}"
    return "" if value is None else str(value)


def render_table(rows: Sequence[dict], columns: Sequence[str] | None = None) -> str:
    if not rows:
        return "(no rows)\n"
    columns = list(columns or rows[0].keys())
    cells = [[_cell(r.get(c)) for c in columns] for r in rows]
    widths = [max(len(c), *(len(row[i]) for row in cells)) for i, c in enumerate(columns)]
    def line(vals):
        return "  ".join(v.rjust(w) if _numeric(v) else v.ljust(w) for v, w in zip(vals, widths)).rstrip()
    out = [line(columns), "  ".join("-" * w for w in widths)]
    out += [line(r) for r in cells]
    return "\n".join(out) + "\n"


def _numeric(text: str) -> bool:
    try:
        float(text)
        return True
    except ValueError:
        return False


def emit(rows: Sequence[dict], fmt: str, *, columns: Sequence[str] | None = None,
         title: str | None = None, meta: dict | None = None, stream=None) -> None:
    """Write ``rows`` to ``stream`` (stdout) as ``fmt`` ('table', 'csv' or 'json')."""
    stream = stream or sys.stdout
    columns = list(columns or (rows[0].keys() if rows else []))
    if fmt == "json":
        doc = {"rows": [{c: r.get(c) for c in columns} for r in rows]}
        if title:
            doc["title"] = title
        if meta:
            doc["meta"] = meta
        json.dump(doc, stream, indent=2, default=_json_default)
        stream.write("\n")
    elif fmt == "csv":
        buf = io.StringIO()
        writer = csv.DictWriter(buf, fieldnames=columns, extrasaction="ignore", lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
        stream.write(buf.getvalue())
    else:
        if title:
            stream.write(title + "\n")
        if meta:
            for k, v in meta.items():
                stream.write(f"  {k}: {_cell(v)}\n")
        stream.write(render_table(rows, columns))


def _json_default(obj):
    try:
        return obj.item()  # numpy scalar
    except AttributeError:
        return str(obj)
