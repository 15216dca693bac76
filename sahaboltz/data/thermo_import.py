"""Importer: NASA thermodynamic polynomials (McBride, Gordon & Reno 1993) -> ``level_data/molecules/``.

Reads, from the source directory ``nasa_tm4513`` (``../shared/data/nasa_tm4513`` by default):

* ``gas.tsv``        one row per temperature range of each gas species (molecules, molecular
                     ions, atoms, atomic ions, the electron),
* ``condensed.tsv``  the same for the condensed phases (crystals, liquids),
* ``README.md``, ``LICENSE-conversion.txt``  format description and the licence of the
                     plain-text conversion (its text is kept in the output headers),

and writes two text files in the project's format (``docs/molecules.md``, "Thermodynamic
polynomials"): ``nasa1993_gas.txt`` and ``nasa1993_condensed.txt``.  Numbers are the source's own
text tokens, unchanged, so re-running the importer reproduces both files byte for byte.

Normalisation (each step checked, a mismatch raises :class:`~sahaboltz.errors.DataFormatError`):

* element symbols of the source names: ``CL`` -> ``Cl``, ``AL`` -> ``Al`` (the only upper-case
  two-letter symbols of the source); the normalised formula, parsed with its parentheses
  (``Fe(OH)2``, ``(HCOOH)2``), must give exactly the elements and counts of the composition column;
* species names in our convention: the formula with proper element symbols and a ``+``/``-`` for
  the charge (``AlCl2-``); a source label after a comma (isomers: ``C2H2,vinylidene``) follows a
  slash: ``C2H2/vinylidene``; condensed phases keep their phase label: ``Al2O3(a)``, ``Fe(L)``;
* the charge is minus the electron count of the composition (``E:-1`` = one electron missing
  = charge +1) and must agree with the sign in the name;
* the temperature ranges are kept as given; they must be increasing and contiguous.

Dropped (counted in the header): species with deuterium (no isotopes in our element data), the
fuel mixture ``Jet-A`` (not a chemical species) and an ion whose composition lacks the electron
count (``Zn+``; its charge cannot be taken from the composition as the rule demands).

Run as ``python -m sahaboltz.data.thermo_import [--source DIR] [--output DIR] [--check]``.
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

from sahaboltz.data.elements import Z_OF
from sahaboltz.errors import DataFormatError, NoDataError, SahaboltzError

GAS_NAME = "nasa1993_gas.txt"
CONDENSED_NAME = "nasa1993_condensed.txt"
OUTPUT_NAMES = (GAS_NAME, CONDENSED_NAME)
#: format tag on the first line of both files; the loader refuses other tags
FORMAT_TAG = "sahaboltz-thermo 1"
SOURCE_FILES = {"gas": "gas.tsv", "condensed": "condensed.tsv", "readme": "README.md",
                "licence": "LICENSE-conversion.txt"}
SOURCE_CITATION = ("McBride, B. J., Gordon, S. & Reno, M. A. 1993, 'Coefficients for Calculating "
                   "Thermodynamic and Transport Properties of Individual Species', NASA "
                   "Technical Memorandum 4513 (plain-text conversion of the thermochemistry "
                   "library Cantera 3.2.0, BSD-3-Clause)")
HEADER_COLUMNS = ["species", "composition", "model", "T_low_K", "T_high_K", "coefficients", "note"]
N_COEFFICIENTS = {"NASA7": 7, "NASA9": 9}
#: upper-case element symbols of the source's names and their proper spelling
SYMBOL_FIXES = (("CL", "Cl"), ("AL", "Al"))
#: largest jump of G/RT allowed where two ranges of one species meet (a gross-error check;
#: the measured maxima are written to the header)
JOINT_TOLERANCE = 0.1
ELECTRON_SOURCE_NAME = "Electron"
#: our name of the electron record
ELECTRON = "e-"

_FLOAT = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")
_TOKEN = re.compile(r"([A-Z][a-z]?)|(\d+)|(\()|(\))")


# ------------------------------------------------------------------------------ formulas
def formula_counts(formula: str) -> dict[str, int]:
    """Element counts of a formula with parentheses: ``"Fe(OH)2"`` -> {"Fe": 1, "O": 2, "H": 2}.

    Raises ValueError for anything that is not element symbols, counts and parentheses.
    """
    stack: list[dict[str, int]] = [{}]
    last: dict[str, int] | None = None   # the group or atom a following count multiplies
    pos = 0
    for m in _TOKEN.finditer(formula):
        if m.start() != pos:
            raise ValueError(f"{formula!r}: unexpected {formula[pos:m.start()]!r}")
        pos = m.end()
        sym, num, opn, cls = m.groups()
        if sym:
            if sym not in Z_OF:
                raise ValueError(f"{formula!r}: unknown element symbol {sym!r}")
            last = {sym: 1}
            _add(stack[-1], last)
        elif num:
            if last is None:
                raise ValueError(f"{formula!r}: a count with nothing to multiply")
            _add(stack[-1], {k: v * (int(num) - 1) for k, v in last.items()})
            last = None
        elif opn:
            stack.append({})
            last = None
        else:
            if len(stack) < 2:
                raise ValueError(f"{formula!r}: unbalanced ')'")
            last = stack.pop()
            _add(stack[-1], last)
    if pos != len(formula) or len(stack) != 1 or not stack[0]:
        raise ValueError(f"{formula!r} is not a chemical formula")
    return stack[0]


def _add(into: dict[str, int], more: dict[str, int]) -> None:
    for k, v in more.items():
        into[k] = into.get(k, 0) + v


def normalise_symbols(formula: str) -> str:
    for bad, good in SYMBOL_FIXES:
        formula = formula.replace(bad, good)
    return formula


def split_source_name(name: str) -> tuple[str, str]:
    """``"C2H2,acetylene"`` -> ("C2H2", "acetylene"); the label is after the first comma that is
    not inside parentheses (``"BaF2(b,c)"`` has none)."""
    depth = 0
    for i, ch in enumerate(name):
        depth += (ch == "(") - (ch == ")")
        if ch == "," and depth == 0:
            return name[:i], name[i + 1:]
    return name, ""


# ------------------------------------------------------------------------------ reading
@dataclass
class _Range:
    t_low: str
    t_high: str
    model: str
    coefficients: list[str]
    line: int


@dataclass
class _Species:
    source_name: str
    name: str
    composition: dict[str, int]      # elements only, in the source's order
    charge: int
    phase: str                       # "gas" or the condensed phase label
    note: str
    ranges: list[_Range]


def _read_rows(path: Path) -> list[tuple[int, list[str]]]:
    if not path.is_file():
        raise NoDataError(f"source file {path} not found: point --source at the nasa_tm4513 "
                          "directory")
    lines = path.read_text(encoding="utf-8", errors="strict").split("\n")
    if not lines or lines[0].split("\t") != HEADER_COLUMNS:
        raise DataFormatError(f"{path}:1: expected the header columns {HEADER_COLUMNS}")
    rows = []
    for i, line in enumerate(lines[1:], start=2):
        if not line.strip():
            continue
        cols = line.split("\t")
        if len(cols) != len(HEADER_COLUMNS):
            raise DataFormatError(f"{path}:{i}: {len(cols)} tab-separated columns, expected "
                                  f"{len(HEADER_COLUMNS)}")
        rows.append((i, cols))
    return rows


def _composition(text: str, where: str) -> tuple[dict[str, int], int]:
    counts: dict[str, int] = {}
    electrons = 0
    for part in text.split():
        sym, _, num = part.partition(":")
        try:
            n = int(num)
        except ValueError:
            raise DataFormatError(f"{where}: composition entry {part!r} is not SYMBOL:COUNT") from None
        if sym == "E":
            electrons += n
        elif sym in counts:
            raise DataFormatError(f"{where}: element {sym} listed twice in {text!r}")
        else:
            counts[sym] = n
    return counts, electrons


def _number(token: str, where: str, what: str) -> str:
    if not _FLOAT.match(token) or not math.isfinite(float(token)):
        raise DataFormatError(f"{where}: {what} is {token!r}, expected a finite number")
    return token


def read_species(path: Path, condensed: bool) -> tuple[list[_Species], list[tuple[str, str]], int]:
    """Species of one table (rows grouped by name, validated), dropped names and reasons, and
    the number of rows read."""
    rows = _read_rows(path)
    groups: dict[str, list[tuple[int, list[str]]]] = {}
    for line, cols in rows:
        groups.setdefault(cols[0], []).append((line, cols))
    out, dropped = [], []
    for source_name, grp in groups.items():
        where = f"{path}:{grp[0][0]}"
        lines = [ln for ln, _ in grp]
        if lines != list(range(lines[0], lines[0] + len(lines))):
            raise DataFormatError(f"{where}: rows of {source_name} are not consecutive")
        comp_text = grp[0][1][1]
        if any(c[1] != comp_text or c[6] != grp[0][1][6] for _, c in grp):
            raise DataFormatError(f"{where}: rows of {source_name} differ in composition or note")
        counts, electrons = _composition(comp_text, where)
        if "D" in counts:
            dropped.append((source_name, "deuterium (no isotopes in our element data)"))
            continue
        if source_name.startswith("Jet-A"):
            dropped.append((source_name, "a fuel mixture, not a chemical species"))
            continue
        unknown = [s for s in counts if s not in Z_OF]
        if unknown:
            raise DataFormatError(f"{where}: unknown element(s) {unknown} in {comp_text!r}")
        charge = -electrons
        if source_name == ELECTRON_SOURCE_NAME:
            if counts or charge != -1:
                raise DataFormatError(f"{where}: the electron must have composition E:1")
            name, phase = ELECTRON, "gas"
        else:
            formula, label = split_source_name(source_name)
            phase = "gas"
            if condensed:
                m = re.match(r"^(.*)\(([^()]+)\)$", formula)
                if not m or charge:
                    raise DataFormatError(f"{where}: condensed name {source_name!r} must end in "
                                          "a phase label such as '(cr)' and be neutral")
                formula, phase = m.group(1), m.group(2)
            sign = ""
            if formula.endswith(("+", "-")):
                formula, sign = formula[:-1], formula[-1]
            want = {"": 0, "+": 1, "-": -1}[sign]
            if want and "E" not in comp_text:
                # the conversion lost the electron count (Zn+ is listed as Zn:1): the charge
                # cannot be taken from the composition, so the row is not used
                dropped.append((source_name, f"composition {comp_text!r} has no electron "
                                "count although the name is an ion"))
                continue
            if abs(charge) > 1 or charge != want:
                raise DataFormatError(f"{where}: charge {charge} from the electron count of "
                                      f"{comp_text!r} disagrees with the name {source_name!r}")
            fixed = normalise_symbols(formula)
            try:
                parsed = formula_counts(fixed)
            except ValueError as exc:
                raise DataFormatError(f"{where}: {exc}") from None
            if parsed != counts:
                raise DataFormatError(f"{where}: formula {fixed!r} gives {parsed}, the "
                                      f"composition column {counts}")
            name = fixed + sign
            if condensed:
                name += f"({phase})"
            if label:
                name += "/" + label
        ranges = []
        for ln, c in grp:
            w = f"{path}:{ln}"
            model = c[2]
            if model not in N_COEFFICIENTS:
                raise DataFormatError(f"{w}: model {model!r}, expected NASA7 or NASA9")
            coeffs = c[5].split()
            if len(coeffs) != N_COEFFICIENTS[model]:
                raise DataFormatError(f"{w}: {model} needs {N_COEFFICIENTS[model]} "
                                      f"coefficients, found {len(coeffs)}")
            coeffs = [_number(x, w, f"coefficient {k + 1}") for k, x in enumerate(coeffs)]
            lo, hi = _number(c[3], w, "T_low_K"), _number(c[4], w, "T_high_K")
            if not 0 < float(lo) < float(hi):
                raise DataFormatError(f"{w}: range {lo}-{hi} K is not positive and increasing")
            if ranges and float(ranges[-1].t_high) != float(lo):
                raise DataFormatError(f"{w}: range starts at {lo} K, the previous one ends at "
                                      f"{ranges[-1].t_high} K")
            ranges.append(_Range(lo, hi, model, coeffs, ln))
        out.append(_Species(source_name, name, counts, charge, phase, grp[0][1][6].strip(),
                            ranges))
    names = [s.name for s in out]
    if len(set(names)) != len(names):
        dup = sorted({n for n in names if names.count(n) > 1})
        raise DataFormatError(f"{path}: names {dup} occur twice after normalisation")
    return out, dropped, len(rows)


# ------------------------------------------------------------------------------ G/RT at joints
def g_over_rt(model: str, coefficients: list[float], t: float) -> float:
    """G/RT = H/RT - S/R of one polynomial at temperature t (formulas of the source README).

    The kernel :mod:`sahaboltz.kernels.thermo` evaluates the same formulas vectorised; this
    scalar form serves the import-time joint check only.
    """
    a = [float(x) for x in coefficients]
    if model == "NASA7":
        h = (a[0] + a[1] * t / 2 + a[2] * t ** 2 / 3 + a[3] * t ** 3 / 4 + a[4] * t ** 4 / 5
             + a[5] / t)
        s = (a[0] * math.log(t) + a[1] * t + a[2] * t ** 2 / 2 + a[3] * t ** 3 / 3
             + a[4] * t ** 4 / 4 + a[6])
    else:
        h = (-a[0] / t ** 2 + a[1] * math.log(t) / t + a[2] + a[3] * t / 2 + a[4] * t ** 2 / 3
             + a[5] * t ** 3 / 4 + a[6] * t ** 4 / 5 + a[7] / t)
        s = (-a[0] / (2 * t ** 2) - a[1] / t + a[2] * math.log(t) + a[3] * t + a[4] * t ** 2 / 2
             + a[5] * t ** 3 / 3 + a[6] * t ** 4 / 4 + a[8])
    return h - s


def joint_jumps(sp: _Species) -> list[float]:
    out = []
    for r0, r1 in zip(sp.ranges, sp.ranges[1:]):
        t = float(r0.t_high)
        out.append(abs(g_over_rt(r0.model, r0.coefficients, t)
                       - g_over_rt(r1.model, r1.coefficients, t)))
    return out


# ------------------------------------------------------------------------------ building
@dataclass
class ImportResult:
    texts: dict[str, str]            # output file name -> text
    counts: dict[str, tuple[int, int, int]]   # file -> (species read, kept, dropped)
    dropped: dict[str, list[tuple[str, str]]]


def build(source: Path) -> ImportResult:
    """Read and check both tables; return the output texts (nothing written)."""
    source = Path(source)
    paths = {k: source / v for k, v in SOURCE_FILES.items()}
    for p in paths.values():
        if not p.is_file():
            raise NoDataError(f"source file {p} not found: point --source at the nasa_tm4513 "
                              "directory")
    licence = paths["licence"].read_text(encoding="utf-8").split("\n")
    texts, counts, dropped_all = {}, {}, {}
    for key, out_name, condensed in (("gas", GAS_NAME, False), ("condensed", CONDENSED_NAME, True)):
        species, dropped, n_rows = read_species(paths[key], condensed)
        if not condensed and ELECTRON not in {s.name for s in species}:
            raise DataFormatError(f"{paths[key]}: no electron row ({ELECTRON_SOURCE_NAME})")
        jumps = [(j, s.name) for s in species for j in joint_jumps(s)]
        worst = max(jumps, default=(0.0, ""))
        if worst[0] > JOINT_TOLERANCE:
            raise DataFormatError(f"{paths[key]}: G/RT of {worst[1]} jumps by {worst[0]:.3g} "
                                  f"where two of its ranges meet (limit {JOINT_TOLERANCE})")
        n_read = len(species) + len(dropped)
        head = _header(key, paths, licence, n_read, len(species), dropped, n_rows, worst)
        body = []
        for s in species:
            body.append(f"species {s.name}")
            body.append(f"source_name {s.source_name}")
            body.append("composition " + " ".join(f"{k} {v}" for k, v in s.composition.items()))
            body.append(f"charge {s.charge}")
            body.append(f"phase {s.phase}")
            body.append(f"note {s.note}")
            body.append(f"source_lines {s.ranges[0].line}-{s.ranges[-1].line}")
            for r in s.ranges:
                body.append(f"range {r.t_low} {r.t_high} {r.model} {' '.join(r.coefficients)}")
            body.append("end")
        texts[out_name] = "\n".join(head + body + [""])
        counts[out_name] = (n_read, len(species), len(dropped))
        dropped_all[out_name] = dropped
    return ImportResult(texts, counts, dropped_all)


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _header(key, paths, licence, n_read, n_kept, dropped, n_rows, worst) -> list[str]:
    what = ("Gas species (molecules, molecular and atomic ions, atoms, the electron)"
            if key == "gas" else "Condensed phases (crystals and liquids)")
    h = [f"# {FORMAT_TAG}",
         f"# {what}: NASA thermodynamic polynomials.",
         "# Format: docs/molecules.md. Do not edit by hand; regenerate with",
         "#   python -m sahaboltz.data.thermo_import",
         f"# source: {SOURCE_CITATION}",
         "# source files (sha256):"]
    for k in (key, "readme", "licence"):
        h.append(f"#   {paths[k].name}  {_sha256(paths[k])}")
    h += [f"# rows read: {n_rows}",
          f"# species: {n_read} read, {n_kept} kept, {len(dropped)} dropped"]
    for name, why in dropped:
        h.append(f"#   dropped {name}: {why}")
    h += ["# checks made on import: columns and numbers parse, ranges increasing and contiguous,",
          "#   formula (symbols CL->Cl, AL->Al) gives the composition column, charge = -(electron",
          "#   count) agrees with the name's sign, names unique, G/RT continuous where ranges meet",
          f"#   (limit {JOINT_TOLERANCE}; largest jump {worst[0]:.3g}"
          + (f", {worst[1]})" if worst[1] else ")"),
          "# units: T [K]; coefficients dimensionless with R, per range 'range T_low T_high MODEL a1..an':",
          "#   NASA7: cp/R = a1 + a2 T + a3 T^2 + a4 T^3 + a5 T^4, a6 and a7 the H and S constants;",
          "#   NASA9: cp/R = a1/T^2 + a2/T + a3 + a4 T + a5 T^2 + a6 T^3 + a7 T^4, a8 and a9 likewise.",
          "#   Standard state 1 bar (ideal gas); H includes the enthalpy of formation from the",
          "#   elements in their standard states at 298.15 K.",
          "# numbers are the source's own text tokens, unchanged",
          "# ---- licence of the conversion ----"]
    body = [("# " + line).rstrip() for line in licence]
    while body and body[0] == "#":
        body.pop(0)
    while body and body[-1] == "#":
        body.pop()
    return h + body + ["# ---- end of licence ----"]


# ------------------------------------------------------------------------------ writing
def write(result: ImportResult, output_dir: Path) -> list[Path]:
    """Write each file atomically (temporary file, then :func:`os.replace`)."""
    output_dir = Path(output_dir)
    output_dir.mkdir(parents=True, exist_ok=True)
    done = []
    for name, text in result.texts.items():
        target = output_dir / name
        fd, tmp = tempfile.mkstemp(prefix="." + name + ".", suffix=".tmp", dir=output_dir)
        try:
            with os.fdopen(fd, "w", encoding="ascii", newline="\n") as fh:
                fh.write(text)
            os.chmod(tmp, 0o644)
            os.replace(tmp, target)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
        done.append(target)
    return done


def default_source_dir() -> Path | None:
    from sahaboltz.data.paths import shared_data_dir
    base = shared_data_dir()
    return base / "nasa_tm4513" if base is not None else None


def default_output_dir() -> Path:
    from sahaboltz.data.molecule_import import default_output_dir as d
    return d()


def run(source: Path | None = None, output_dir: Path | None = None, *,
        check: bool = False) -> ImportResult:
    """Import (or with ``check`` compare with the existing files; DataFormatError if they differ)."""
    source = Path(source) if source is not None else default_source_dir()
    if source is None:
        raise NoDataError("raw source data not found (../shared/data/nasa_tm4513): pass --source DIR")
    output_dir = Path(output_dir) if output_dir is not None else default_output_dir()
    result = build(source)
    if check:
        for name, text in result.texts.items():
            target = output_dir / name
            if not target.is_file() or target.read_text(encoding="ascii") != text:
                raise DataFormatError(f"{target} differs from a fresh import of {source}: re-run "
                                      "python -m sahaboltz.data.thermo_import")
    else:
        write(result, output_dir)
    return result


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m sahaboltz.data.thermo_import",
                                description="Import the NASA thermodynamic polynomials.")
    p.add_argument("--source", type=Path, default=None,
                   help="directory with gas.tsv, condensed.tsv, README.md, LICENSE-conversion.txt")
    p.add_argument("--output", type=Path, default=None,
                   help="output directory (default: level_data/molecules of the checkout)")
    p.add_argument("--check", action="store_true",
                   help="do not write; fail if the existing files differ from a fresh import")
    args = p.parse_args(argv)
    try:
        res = run(args.source, args.output, check=args.check)
    except SahaboltzError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1
    verb = "matches" if args.check else "wrote"
    for name, (n_read, n_kept, n_drop) in res.counts.items():
        print(f"{verb} {name}: {n_read} species read, {n_kept} kept, {n_drop} dropped")
    return 0


if __name__ == "__main__":
    sys.exit(main())
