"""Importer: Barklem & Collet (2016) diatomic-molecule tables -> ``level_data/molecules/``.

Reads, from the source directory ``bc2016`` (``../shared/data/bc2016`` by default):

* ``table1.dat``           dissociation energies D0 [eV] and the two atomic species of the
                           dissociation process (columns 2-3; one of them may be an ion),
* ``table6.dat``           molecular partition functions on a 42-point temperature grid,
* ``table7_vNov2022.dat``  equilibrium constants log10(pK) on the same grid (the Nov 2022 version,
                           which carries the fix to the atomic partition functions),
* ``LICENSE``              the BSD-3 licence, whose text is kept in the output header.

and writes one text file, ``level_data/molecules/bc2016_diatomics.txt``, in the project's format
(described in ``docs/molecules.md``).  Numbers are copied as the exact text tokens of the source,
so the output can be checked against the source by eye and re-running the importer on the same
source reproduces the file byte for byte.  The equilibrium constants are kept in the source's unit
(Pa; established in docs/molecules.md and tests/test_molecule_units.py); the loader converts them.

Every source row is validated (fixed-width layout from the source ReadMe, numbers parse, the three
tables list the same molecules on the same grid, the components' elements and charges add up to
the molecule).  A malformed row raises :class:`~sahaboltz.errors.DataFormatError` naming the file
and line; the output is written to a temporary file first and moved into place with
:func:`os.replace`, so a failed run never leaves a half-written file.

Run as ``python -m sahaboltz.data.molecule_import [--source DIR] [--output DIR] [--check]``.
"""

from __future__ import annotations

import argparse
import hashlib
import math
import os
import re
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

from sahaboltz.constants import K_B_EV
from sahaboltz.data.elements import Z_OF
from sahaboltz.errors import DataFormatError, NoDataError, SahaboltzError

#: name of the output file inside the output directory
OUTPUT_NAME = "bc2016_diatomics.txt"
#: format tag written on the first line; the loader refuses other tags
FORMAT_TAG = "sahaboltz-molecules 1"
SOURCE_FILES = {"dissociation": "table1.dat", "partition": "table6.dat",
                "constants": "table7_vNov2022.dat", "licence": "LICENSE"}
SOURCE_CITATION = ("Barklem, P. S. & Collet, R. 2016, A&A 588, A96, 'Partition functions and "
                   "equilibrium constants for diatomic molecules and atoms of astrophysical "
                   "interest' (tables with the Nov 2022 update)")
N_TEMPERATURES = 42
#: tolerance for D0 recovered from the lowest-temperature constant vs the adopted table1 value;
#: at 1e-5 K log10 pK ~ -1e9 is printed to 6 digits, so agreement to ~1e-5 is all one can ask
D0_CONSISTENCY_RTOL = 1e-4

_NAME = re.compile(r"^((?:[A-Z][a-z]?(?:[1-9]\d*)?)+)([+-]?)$")
_PART = re.compile(r"([A-Z][a-z]?)(\d*)")
_FLOAT = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")


def default_source_dir() -> Path | None:
    """``<shared data>/bc2016`` when present, else None."""
    from sahaboltz.data.paths import shared_data_dir
    base = shared_data_dir()
    return base / "bc2016" if base is not None else None


def default_output_dir() -> Path:
    """``level_data/molecules`` of the source checkout."""
    from sahaboltz.data.paths import REPO_ROOT
    return Path(os.environ.get("SAHABOLTZ_LEVEL_DATA", REPO_ROOT / "level_data")) / "molecules"


# ------------------------------------------------------------------------------ parsing helpers
def parse_formula(name: str) -> tuple[dict[str, int], int]:
    """Elements and charge of a molecule or atom name: ``"CO+"`` -> ({"C": 1, "O": 1}, 1).

    Raises ValueError for a name that is not element symbols with counts and an optional sign.
    """
    m = _NAME.match(name)
    if not m:
        raise ValueError(f"{name!r} is not a formula such as 'CO', 'H2' or 'CO+'")
    counts: dict[str, int] = {}
    for sym, num in _PART.findall(m.group(1)):
        if sym not in Z_OF:
            raise ValueError(f"{name!r}: unknown element symbol {sym!r}")
        counts[sym] = counts.get(sym, 0) + (int(num) if num else 1)
    charge = {"": 0, "+": 1, "-": -1}[m.group(2)]
    return counts, charge


def _number(token: str, where: str, what: str, *, missing_ok: bool = False) -> str:
    """Check that a source token is a number (or '.' = no data when allowed); return it stripped."""
    token = token.strip()
    if missing_ok and token == ".":
        return token
    if not _FLOAT.match(token) or not math.isfinite(float(token)):
        raise DataFormatError(f"{where}: {what} is {token!r}, expected a finite number"
                              + (" or '.'" if missing_ok else ""))
    return token


def _read_lines(path: Path) -> list[str]:
    if not path.is_file():
        raise NoDataError(f"source file {path} not found: point --source at the bc2016 directory "
                          "of Barklem & Collet (2016)")
    text = path.read_text(encoding="ascii", errors="strict")
    return text.split("\n")


@dataclass(frozen=True)
class _Dissociation:
    name: str
    comp1: str
    comp2: str
    tokens: tuple[str, ...]   # HH, HHerr, Luo, Luoerr, G2, G2err, De, Deerr (verbatim)
    line: int


# table1 byte ranges (1-based inclusive, from the source ReadMe)
_T1_FIELDS = ((18, 27), (28, 37), (40, 49), (50, 59), (62, 71), (72, 81), (84, 93), (94, 103))


def read_table1(path: Path) -> list[_Dissociation]:
    """Rows of the dissociation-energy table, validated."""
    lines = _read_lines(path)
    m = re.match(r"^\s*Dissociation energies\s+(\d+)\s+molecules\s*$", lines[0] if lines else "")
    if not m:
        raise DataFormatError(f"{path}:1: expected the header 'Dissociation energies <N> "
                              f"molecules', got {lines[0][:60]!r}")
    n_expected = int(m.group(1))
    rows = []
    for i, line in enumerate(lines[4:], start=5):
        if not line.strip():
            continue
        where = f"{path}:{i}"
        if len(line) != 103:
            raise DataFormatError(f"{where}: row has {len(line)} characters, the fixed-width "
                                  "layout of table1 needs 103")
        name, c1, c2 = line[0:5].strip(), line[5:10].strip(), line[10:15].strip()
        if not (name and c1 and c2):
            raise DataFormatError(f"{where}: molecule or component label missing")
        tokens = tuple(_number(line[a - 1:b], where, f"column {a}-{b}", missing_ok=(k != 6))
                       for k, (a, b) in enumerate(_T1_FIELDS))
        if float(tokens[6]) <= 0:
            raise DataFormatError(f"{where}: adopted D0 {tokens[6]} eV is not positive")
        rows.append(_Dissociation(name, c1, c2, tokens, i))
    if len(rows) != n_expected:
        raise DataFormatError(f"{path}: header announces {n_expected} molecules, found "
                              f"{len(rows)} rows")
    return rows


def read_grid_table(path: Path, name_width: int = 5) -> tuple[list[str], list[tuple[str, list[str], int]]]:
    """Temperature grid and rows (name, 42 tokens, line number) of table6/table7-like files."""
    lines = _read_lines(path)
    width = name_width + 14 * N_TEMPERATURES
    try:
        n_expected = int(lines[1])
    except (IndexError, ValueError):
        raise DataFormatError(f"{path}:2: expected the number of molecules") from None

    def fields(line: str, where: str) -> list[str]:
        if len(line) != width:
            raise DataFormatError(f"{where}: row has {len(line)} characters, the fixed-width "
                                  f"layout needs {width} (a label and {N_TEMPERATURES} values)")
        return [_number(line[name_width + 14 * k: name_width + 14 * (k + 1)], where,
                        f"value {k + 1}") for k in range(N_TEMPERATURES)]

    if len(lines) < 3 or not lines[2].startswith("T [K]"):
        raise DataFormatError(f"{path}:3: expected the temperature grid line 'T [K] ...'")
    grid = fields(lines[2], f"{path}:3")
    rows = []
    for i, line in enumerate(lines[4:], start=5):
        if not line.strip():
            continue
        where = f"{path}:{i}"
        name = line[:name_width].strip()
        if not name:
            raise DataFormatError(f"{where}: molecule label missing")
        rows.append((name, fields(line, where), i))
    if len(rows) != n_expected:
        raise DataFormatError(f"{path}: header announces {n_expected} rows, found {len(rows)}")
    return grid, rows


# ------------------------------------------------------------------------------ building
@dataclass
class ImportResult:
    text: str
    n_read: int
    n_kept: int
    dropped: list[tuple[str, str]]


def build(source: Path) -> ImportResult:
    """Read and cross-check the three tables; return the output text (nothing written)."""
    source = Path(source)
    paths = {k: source / v for k, v in SOURCE_FILES.items()}
    t1 = read_table1(paths["dissociation"])
    grid6, rows6 = read_grid_table(paths["partition"])
    grid7, rows7 = read_grid_table(paths["constants"])
    licence = _read_lines(paths["licence"])
    if grid6 != grid7:
        raise DataFormatError(f"{paths['partition']} and {paths['constants']} have different "
                              "temperature grids")
    temps = [float(t) for t in grid6]
    if any(b <= a for a, b in zip(temps, temps[1:])) or temps[0] <= 0:
        raise DataFormatError(f"{paths['partition']}:3: temperatures must be positive and "
                              "increasing")
    q_of = {}
    for table, rows in ((paths["partition"], rows6), (paths["constants"], rows7)):
        seen = {}
        for name, vals, line in rows:
            if name in seen:
                raise DataFormatError(f"{table}:{line}: molecule {name} repeats line {seen[name]}")
            seen[name] = line
        q_of[table] = {name: (vals, line) for name, vals, line in rows}

    kept, dropped = [], []
    for row in t1:
        where = f"{paths['dissociation']}:{row.line}"
        try:
            elements, charge = parse_formula(row.name)
            e1, q1 = parse_formula(row.comp1)
            e2, q2 = parse_formula(row.comp2)
        except ValueError as exc:
            raise DataFormatError(f"{where}: {exc}") from None
        summed = dict(e1)
        for k, v in e2.items():
            summed[k] = summed.get(k, 0) + v
        if summed != elements or q1 + q2 != charge or sum(elements.values()) != 2:
            raise DataFormatError(f"{where}: components {row.comp1} + {row.comp2} do not make "
                                  f"up the diatomic {row.name}")
        missing = [str(t) for t in (paths["partition"], paths["constants"]) if row.name not in q_of[t]]
        if missing:
            dropped.append((row.name, "no row in " + ", ".join(Path(m).name for m in missing)))
            continue
        q_vals, q_line = q_of[paths["partition"]][row.name]
        k_vals, k_line = q_of[paths["constants"]][row.name]
        for tok, line in ((q, q_line) for q in q_vals):
            if float(tok) <= 0:
                raise DataFormatError(f"{paths['partition']}:{line}: partition function of "
                                      f"{row.name} is {tok}, must be positive")
        # the constant at the lowest temperature is dominated by -D0/(kT ln 10): it must be the
        # adopted D0 of table1, which ties the row of table7 to the process of table1
        d0 = float(row.tokens[6])
        d0_fit = -float(k_vals[0]) * math.log(10) * K_B_EV * temps[0]
        if abs(d0_fit - d0) > D0_CONSISTENCY_RTOL * d0:
            raise DataFormatError(f"{paths['constants']}:{k_line}: the constant of {row.name} "
                                  f"at {temps[0]} K implies D0 = {d0_fit:.6f} eV, table1 "
                                  f"adopts {d0} eV")
        kept.append((row, charge, q_vals, k_vals))
    extra = sorted((set(q_of[paths["partition"]]) | set(q_of[paths["constants"]]))
                   - {r.name for r in t1})
    for name in extra:
        dropped.append((name, "no dissociation energy in table1"))

    out = _header(source, paths, licence, len(t1) + len(extra), len(kept), dropped)
    for row, charge, q_vals, k_vals in kept:
        out.append(f"molecule {row.name}")
        out.append(f"process {row.name} = {row.comp1} + {row.comp2}")
        out.append(f"charge {charge}")
        tk = [("none" if t == "." else t) for t in row.tokens]
        out.append(f"D0_eV {tk[6]} sigma {tk[7]}")
        out.append(f"D0_literature_eV HH {tk[0]} sigma {tk[1]} Luo {tk[2]} sigma {tk[3]} "
                   f"G2 {tk[4]} sigma {tk[5]}")
        out.append(f"source_lines table1 {row.line} table6 {q_of[paths['partition']][row.name][1]} "
                   f"table7 {q_of[paths['constants']][row.name][1]}")
        out.append("#          T_K   log10_Kp_Pa         U_AB")
        for t, k, q in zip(grid6, k_vals, q_vals):
            out.append(f"{t:>14s}{k:>14s}{q:>13s}")
        out.append("end")
    out.append("")
    return ImportResult("\n".join(out), len(t1) + len(extra), len(kept), dropped)


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _header(source: Path, paths: dict, licence: list[str], n_read: int, n_kept: int,
            dropped: list[tuple[str, str]]) -> list[str]:
    h = [f"# {FORMAT_TAG}",
         "# Diatomic molecules: dissociation energies, partition functions and equilibrium",
         "# constants. Format: docs/molecules.md. Do not edit by hand; regenerate with",
         "#   python -m sahaboltz.data.molecule_import",
         f"# source: {SOURCE_CITATION}",
         "# source files (sha256):"]
    for key in ("dissociation", "partition", "constants", "licence"):
        h.append(f"#   {paths[key].name}  {_sha256(paths[key])}")
    h += ["# licence: BSD-3-Clause (text of the source's licence below)",
          f"# molecules: {n_read} read, {n_kept} kept, {len(dropped)} dropped"]
    for name, why in dropped:
        h.append(f"#   dropped {name}: {why}")
    h += ["# checks made on import: fixed-width layout, numbers finite, U_AB > 0, same molecules",
          "#   and grid in table6/table7, components add up to the molecule (elements, charge),",
          f"#   D0 implied by the constant at the lowest T equals the adopted D0 (rtol {D0_CONSISTENCY_RTOL:g})",
          "# units: T_K [K]; D0_eV [eV] (adopted value of table1, 'sigma' its uncertainty, 'none' = no",
          "#   value); log10_Kp_Pa = log10 of K_p = p(A) p(B) / p(AB) in Pa for the process",
          "#   'AB = A + B' (table7; the loader converts to dyn cm^-2); U_AB dimensionless (table6,",
          "#   normalised like the atomic partition functions, nuclear spin divided out)",
          "# numbers are the source's own text tokens, unchanged",
          "# ---- licence of the source ----"]
    h += [("# " + line).rstrip() for line in licence]
    while h[-1] == "#":
        h.pop()
    h.append("# ---- end of licence ----")
    return h


# ------------------------------------------------------------------------------ writing
def write(result: ImportResult, output_dir: Path) -> Path:
    """Write atomically: a temporary file in the output directory, then :func:`os.replace`."""
    output_dir = Path(output_dir)
    output_dir.mkdir(parents=True, exist_ok=True)
    target = output_dir / OUTPUT_NAME
    fd, tmp = tempfile.mkstemp(prefix="." + OUTPUT_NAME + ".", suffix=".tmp", dir=output_dir)
    try:
        with os.fdopen(fd, "w", encoding="ascii", newline="\n") as fh:
            fh.write(result.text)
        os.chmod(tmp, 0o644)
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return target


def run(source: Path | None = None, output_dir: Path | None = None, *, check: bool = False) -> ImportResult:
    """Import (or with ``check`` compare against the existing file; DataFormatError if it differs)."""
    source = Path(source) if source is not None else default_source_dir()
    if source is None:
        raise NoDataError("raw source data not found (../shared/data/bc2016): pass --source DIR")
    output_dir = Path(output_dir) if output_dir is not None else default_output_dir()
    result = build(source)
    if check:
        target = output_dir / OUTPUT_NAME
        if not target.is_file() or target.read_text(encoding="ascii") != result.text:
            raise DataFormatError(f"{target} differs from a fresh import of {source}: re-run "
                                  "python -m sahaboltz.data.molecule_import")
    else:
        write(result, output_dir)
    return result


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m sahaboltz.data.molecule_import",
                                description="Import the Barklem & Collet (2016) diatomic tables.")
    p.add_argument("--source", type=Path, default=None,
                   help="directory with table1.dat, table6.dat, table7_vNov2022.dat, LICENSE")
    p.add_argument("--output", type=Path, default=None,
                   help="output directory (default: level_data/molecules of the checkout)")
    p.add_argument("--check", action="store_true",
                   help="do not write; fail if the existing file differs from a fresh import")
    args = p.parse_args(argv)
    try:
        res = run(args.source, args.output, check=args.check)
    except SahaboltzError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1
    verb = "matches" if args.check else "wrote"
    print(f"{verb} {OUTPUT_NAME}: {res.n_read} molecules read, {res.n_kept} kept, "
          f"{len(res.dropped)} dropped")
    return 0


if __name__ == "__main__":
    sys.exit(main())
