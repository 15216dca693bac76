"""Importer: the Asplund et al. (2009) solar composition into the project's abundance format.

Run ``python -m sahaboltz.data.composition_import`` (options: ``--source`` raw CSV, ``--output``
target file).  It reads the raw table from the shared source data and writes
``level_data/abundances/asplund2009.txt``: one line per element with the adopted A(X), its
uncertainty and where it comes from:

* ``p``: the present-day solar photosphere (Table 1, photospheric column);
* ``m``: the CI-chondrite (meteoritic) value, used only where the table gives no photospheric
  value (As, Se, Br, Cd, Sb, Te, I, Cs, Ta, Re, Pt, Hg, Bi, U).

The file names its source and the raw file's sha256, so the provenance travels with the data.
"""

from __future__ import annotations

import argparse
import csv
import hashlib
import math
import os
import sys
import tempfile
from pathlib import Path

from sahaboltz._version import __version__
from sahaboltz.data.elements import SYMBOLS
from sahaboltz.errors import DataFormatError, NoDataError

FORMAT_LINE = "# sahaboltz abundance set, format 1"
COLUMNS = ("Z", "symbol", "A", "uncertainty", "origin")
ORIGINS = {"p": "solar photosphere", "m": "meteorites (CI chondrites), no photospheric value"}
REFERENCE = ("Asplund, Grevesse, Sauval & Scott (2009), ARA&A 47, 481, Table 1 "
             "(doi:10.1146/annurev.astro.46.060407.145222)")
RAW_NAME = "abundances/asplund2009.csv"
OUTPUT_NAME = "abundances/asplund2009.txt"


def _value(text: str, path: Path, lineno: int, column: str) -> float:
    text = text.strip()
    if text in ("", "-"):
        return math.nan
    try:
        return float(text)
    except ValueError:
        raise DataFormatError(f"{path}:{lineno}: column {column!r} is not a number: {text!r}") from None


def read_raw(path: Path) -> list[tuple[int, str, float, float, str]]:
    """Parse the raw Asplund (2009) CSV into (Z, symbol, A, uncertainty, origin) rows."""
    raw = path.read_text(encoding="utf-8")
    lines = [(n, line) for n, line in enumerate(raw.splitlines(), 1)
             if line.strip() and not line.startswith("#")]
    if not lines:
        raise DataFormatError(f"{path}: no data rows")
    header_no, header = lines[0]
    reader = csv.DictReader([header] + [line for _, line in lines[1:]])
    needed = {"Z", "element", "photosphere", "photosphere_err", "meteorites", "meteorites_err"}
    if not needed <= set(reader.fieldnames or ()):
        raise DataFormatError(f"{path}:{header_no}: expected columns {sorted(needed)}, "
                              f"got {reader.fieldnames}")
    rows = []
    for (lineno, _), rec in zip(lines[1:], reader):
        try:
            z = int(rec["Z"])
        except ValueError:
            raise DataFormatError(f"{path}:{lineno}: bad Z {rec['Z']!r}") from None
        sym = rec["element"].strip()
        if not 1 <= z < len(SYMBOLS) or SYMBOLS[z] != sym:
            raise DataFormatError(f"{path}:{lineno}: Z = {z} does not match element {sym!r}")
        phot = _value(rec["photosphere"], path, lineno, "photosphere")
        if math.isfinite(phot):
            rows.append((z, sym, phot, _value(rec["photosphere_err"], path, lineno,
                                              "photosphere_err"), "p"))
            continue
        met = _value(rec["meteorites"], path, lineno, "meteorites")
        if not math.isfinite(met):
            raise DataFormatError(f"{path}:{lineno}: {sym} has neither a photospheric nor a "
                                  "meteoritic value")
        rows.append((z, sym, met, _value(rec["meteorites_err"], path, lineno, "meteorites_err"),
                     "m"))
    return rows


def render(rows, source_sha256: str) -> str:
    """The abundance file's text."""
    out = [FORMAT_LINE,
           "# name = asplund2009",
           f"# reference = {REFERENCE}",
           f"# source_file = {RAW_NAME}",
           f"# source_sha256 = {source_sha256}",
           f"# importer = sahaboltz.data.composition_import (sahaboltz {__version__})",
           "# scale: A(X) = log10(N_X / N_H) + 12 (by number)",
           "# rule: the photospheric value where the table gives one, else the meteoritic value",
           "# uncertainty: as published [dex]; nan where none is given"]
    out += [f"# origin {k}: {v}" for k, v in ORIGINS.items()]
    out.append("\t".join(COLUMNS))
    for z, sym, a, err, origin in rows:
        out.append(f"{z}\t{sym}\t{a:.2f}\t{'nan' if math.isnan(err) else f'{err:.2f}'}\t{origin}")
    return "\n".join(out) + "\n"


def write_atomic(path: Path, text: str) -> None:
    """Write via a temporary file and os.replace, so a failure never leaves a half file."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=path.name, suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def import_asplund2009(source: Path | None = None, output: Path | None = None) -> Path:
    """Convert the raw Asplund (2009) table into ``level_data/abundances/asplund2009.txt``.

    Parameters
    ----------
    source : Path, optional
        The raw CSV; default ``<shared data>/abundances/asplund2009.csv``.
    output : Path, optional
        Target file; default ``<level_data>/abundances/asplund2009.txt``.

    Returns
    -------
    Path
        The file written.
    """
    from sahaboltz.data.paths import REPO_ROOT, shared_data_dir

    if source is None:
        shared = shared_data_dir()
        if shared is None:
            raise NoDataError("the raw source data (../shared/data) is not available: pass "
                              "--source PATH to the Asplund (2009) CSV")
        source = shared / RAW_NAME
    source = Path(source)
    if not source.is_file():
        raise NoDataError(f"{source} not found: pass --source PATH to the Asplund (2009) CSV")
    if output is None:
        env = os.environ.get("SAHABOLTZ_LEVEL_DATA")
        output = (Path(env) if env else REPO_ROOT / "level_data") / OUTPUT_NAME
    rows = read_raw(source)
    digest = hashlib.sha256(source.read_bytes()).hexdigest()
    write_atomic(Path(output), render(rows, digest))
    return Path(output)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m sahaboltz.data.composition_import",
        description="Convert the Asplund et al. (2009) solar composition into sahaboltz's "
                    "abundance format (level_data/abundances/asplund2009.txt).")
    parser.add_argument("--source", type=Path, help="raw CSV (default: shared source data)")
    parser.add_argument("--output", type=Path, help="file to write (default: level_data)")
    args = parser.parse_args(argv)
    try:
        path = import_asplund2009(args.source, args.output)
    except (NoDataError, DataFormatError) as exc:
        print(f"composition_import: error: {exc}", file=sys.stderr)
        return 2
    print(f"wrote {path}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
