"""The level_data text format: one file per element, one section per ionization stage.

The format is plain UTF-8 text, meant to be read by people and diffed by git::

    # sahaboltz level data, format 1
    # element: Fe (Z = 26)
    # ... (comment lines: sources, column meanings, flag letters)

    [Fe II]
    Z = 26
    charge = 1
    ionization_energy_eV = 16.19921
    ionization_energy_uncertainty_eV = 0.00005
    ionization_energy_note =
    ionization_energy_source = NIST ASD ionization energies (ionization_energies.csv)
    levels_source = NIST ASD energy levels (nistspectrum=Fe+II.webdump.dat)
    limits_cm-1 = 130655.4
    rows_read = 1063
    rows_dropped = limit_row:1 no_energy:2
    levels = 1060
    energy_cm-1	g	flags	J	configuration	term
    0.000	10	-	9/2	3d6.(5D).4s	a 6D
    ...

A section is a header of ``key = value`` lines, then the column line, then one tab-separated
line per level, sorted by energy.  ``flags`` is ``-`` or letters from
:data:`sahaboltz.data.species.FLAG_MEANINGS`.  Lines starting with ``#`` are comments.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from sahaboltz.data.species import FLAG_MEANINGS, LevelTable
from sahaboltz.errors import DataFormatError

FORMAT_LINE = "# sahaboltz level data, format 1"
COLUMNS = ["energy_cm-1", "g", "flags", "J", "configuration", "term"]
COLUMN_LINE = "\t".join(COLUMNS)


@dataclass
class Section:
    """One species as stored: header fields (strings) and level rows (strings)."""

    name: str
    header: dict[str, str]
    rows: list[tuple[str, ...]] = field(default_factory=list)
    #: the level rows as read from a file, unsplit (split lazily, for load speed)
    body: str | None = None

    def split_rows(self, path: str) -> list[list[str]]:
        """Level rows as lists of 6 fields (from ``rows`` or the raw ``body``)."""
        if self.body is None:
            return [list(r) for r in self.rows]
        rows = [r.split("\t") for r in self.body.split("\n") if r]
        for k, r in enumerate(rows):
            if len(r) != 6:
                raise DataFormatError(f"{path}: section [{self.name}], level row {k + 1}: "
                                      f"expected 6 tab-separated fields, got {len(r)}")
        return rows


def format_g(g: float) -> str:
    return str(int(g)) if float(g).is_integer() else f"{g:.6g}"


def render(symbol: str, z: int, sections: list[Section], comments: list[str]) -> str:
    """Text of one element file."""
    out = [FORMAT_LINE, f"# element: {symbol} (Z = {z})"]
    out += [f"# {c}" if c else "#" for c in comments]
    out.append("# columns: " + ", ".join(COLUMNS) + " (tab-separated)")
    out.append("# flags:")
    out += [f"#   {k}  {v}" for k, v in FLAG_MEANINGS.items()]
    for sec in sections:
        out.append("")
        out.append(f"[{sec.name}]")
        out += [f"{k} = {v}".rstrip() for k, v in sec.header.items()]
        out.append(COLUMN_LINE)
        if sec.body is not None:
            out += [sec.body] if sec.body else []
        else:
            out += ["\t".join(r) for r in sec.rows]
    return "\n".join(out) + "\n"


def parse(text: str, path: str) -> tuple[list[str], list[Section]]:
    """Split an element file into its comment lines and sections (all fields as strings).

    Works block-wise (a section's rows are split in one go) because the whole database is
    parsed at every start-up.
    """
    if not text.startswith(FORMAT_LINE + "\n"):
        raise DataFormatError(f"{path}, line 1: not a sahaboltz level data file "
                              f"(expected {FORMAT_LINE!r})")
    blocks = text.split("\n[")
    comments = [ln for ln in blocks[0].split("\n") if ln.startswith("#")]
    for ln_no, ln in enumerate(blocks[0].split("\n"), start=1):
        if ln and not ln.startswith("#"):
            raise DataFormatError(f"{path}, line {ln_no}: data before the first [section]")
    sections: list[Section] = []
    lineno = blocks[0].count("\n") + 1
    for block in blocks[1:]:
        head, sep, body = block.partition("\n" + COLUMN_LINE + "\n")
        head_lines = head.split("\n")
        name_line = head_lines[0]
        if not name_line.endswith("]"):
            raise DataFormatError(f"{path}, line {lineno + 1}: bad section line [{name_line!r}")
        sec = Section(name_line[:-1], {})
        for i, line in enumerate(head_lines[1:], start=lineno + 2):
            if not line or line[0] == "#":
                continue
            key, eq, value = line.partition(" =")
            if not eq:
                raise DataFormatError(f"{path}, line {i}: expected 'key = value', got {line!r}")
            sec.header[key.strip()] = value.strip()
        if not sep:
            raise DataFormatError(f"{path}: section [{sec.name}] has no column line "
                                  f"{COLUMN_LINE!r} (truncated file?)")
        sec.body = body.strip("\n")
        sections.append(sec)
        lineno += block.count("\n") + 1
    return comments, sections


def level_table(sec: Section, path: str) -> LevelTable:
    """Numeric level arrays of a section.

    The raw body is split once into a flat list of fields (much faster than row by row); a
    count that is not a multiple of six falls back to the row-wise split, which names the row.
    """
    expected = int(sec.header.get("levels", "-1"))
    if sec.body is not None:
        parts = sec.body.replace("\n", "\t").split("\t") if sec.body else []
        if len(parts) % 6:
            sec.split_rows(path)  # raises, naming the bad row
            raise DataFormatError(f"{path}: section [{sec.name}] has malformed level rows")
    else:
        parts = [f for r in sec.rows for f in r]
    n = len(parts) // 6
    if expected >= 0 and expected != n:
        raise DataFormatError(f"{path}: section [{sec.name}] says levels = {expected} but holds "
                              f"{n} rows (truncated or edited file?)")
    if n == 0:
        return LevelTable.empty()
    try:
        energy = np.array(parts[0::6], dtype=np.float64)
        g = np.array(parts[1::6], dtype=np.float64)
    except ValueError:
        raise DataFormatError(f"{path}: section [{sec.name}] has a non-numeric energy or g") from None
    obj = np.array(parts, dtype=object).reshape(n, 6)
    flags = obj[:, 2].copy()
    flags[flags == "-"] = ""
    return LevelTable(energy, g, flags, obj[:, 4], obj[:, 5], obj[:, 3])
