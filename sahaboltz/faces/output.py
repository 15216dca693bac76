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
#: significant digits of the numbers in CSV and JSON: the solver's results are good to about
#: 1e-10 relative, so 15 digits keep all of it and drop the noise of the last binary digits
#: (1e5 written as 1e5, not 99999.99999999999)
DIGITS = 15


def add_format_option(parser) -> None:
    """Give a subcommand the shared ``--format`` option."""
    parser.add_argument("--format", choices=FORMATS, default="table",
                        help="output as a readable table (default), CSV or JSON")


def clean_number(value: Any) -> Any:
    """A float (or numpy number) rounded to :data:`DIGITS` significant digits; numpy booleans
    and integers as Python ones; anything else as it is."""
    if isinstance(value, bool):
        return value
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        try:
            value = value.item()
        except (ValueError, AttributeError):
            return value
    if isinstance(value, float) and math.isfinite(value):
        return float(f"{value:.{DIGITS}g}")
    return value


def _clean(doc: Any) -> Any:
    if isinstance(doc, dict):
        return {k: _clean(v) for k, v in doc.items()}
    if isinstance(doc, (list, tuple)):
        return [_clean(v) for v in doc]
    return clean_number(doc)


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
        json.dump(_clean(doc), stream, indent=2, default=_json_default)
        stream.write("\n")
    elif fmt == "csv":
        buf = io.StringIO()
        writer = csv.DictWriter(buf, fieldnames=columns, extrasaction="ignore", lineterminator="\n")
        writer.writeheader()
        writer.writerows({k: clean_number(v) for k, v in r.items()} for r in rows)
        stream.write(buf.getvalue())
    else:
        if title:
            stream.write(title + "\n")
        if meta:
            for k, v in meta.items():
                stream.write(f"  {k}: {_cell(v)}\n")
        stream.write(render_table(rows, columns))


def emit_summary(values: dict, fmt: str, *, title: str | None = None, stream=None) -> None:
    """Write one result as key/value pairs: a readable two-column list (keys padded to a
    common width, values left-aligned, long text wrapped under its value), a flat JSON
    object, or CSV rows ``quantity,value``."""
    stream = stream or sys.stdout
    if fmt == "json":
        doc = {"title": title, **values} if title else dict(values)
        json.dump(_clean(doc), stream, indent=2, default=_json_default)
        stream.write("\n")
        return
    if fmt == "csv":
        emit([{"quantity": k, "value": v} for k, v in values.items()], "csv", stream=stream)
        return
    import textwrap

    if title:
        stream.write(title + "\n")
    width = min(max((len(k) for k in values), default=0), 32)
    for k, v in values.items():
        text = _cell(v) if not isinstance(v, bool) else ("yes" if v else "no")
        lines = textwrap.wrap(text, width=max(30, 96 - width)) or [""]
        stream.write(f"  {k.ljust(width)}  {lines[0]}\n")
        for more in lines[1:]:
            stream.write(f"  {'':{width}}  {more}\n")


def _json_default(obj):
    try:
        return obj.item()  # numpy scalar
    except AttributeError:
        return str(obj)
