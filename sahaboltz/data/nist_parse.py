"""Readers for the NIST Atomic Spectra Database exports used as sources of level_data.

Three formats are read:

* energy-level exports (tab-separated, every field quoted: Configuration, Term, J, Prefix,
  Level (cm-1), Suffix), one file per spectrum;
* the ionization-energy CSV (At. Num, Ion Charge, Ground Shells, Ground Level, Ionization
  Energy (eV), Uncertainty (eV));
* the atomic-weights CSV (isotope masses, isotopic compositions, standard atomic weights).

These functions only parse and classify; turning the parsed rows into level_data is the job of
:mod:`sahaboltz.data.nist_import`.  Every problem raises :class:`DataFormatError` naming the
file and line.
"""

from __future__ import annotations

import csv
import re
from collections import Counter
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path

from sahaboltz.data.elements import Z_OF, from_roman
from sahaboltz.errors import DataFormatError

LEVEL_HEADER = ["Configuration", "Term", "J", "Prefix", "Level (cm-1)", "Suffix"]

#: why a source row did not become a level; every dropped row is counted under one of these
DROP_REASONS = {
    "limit_row": "a 'Limit' row: an ionization or series limit, not a level",
    "no_energy": "the row gives no energy",
    "no_J": "the row gives no J, no LS term and no bare principal quantum number: g is unknown",
    "hydrogenic_duplicate": "a row giving only n that repeats levels resolved in the same file",
    "hydrogenic_replaced": "hydrogen-like ion: levels are taken from the Rydberg formula instead",
}

_OFFSET = re.compile(r"\+[a-z]")
# an LS term such as "7G", "4P*" or "a 5D" (optional seniority / series letter in front)
_LS_TERM = re.compile(r"^(?:[a-z]'* )?(\d+)([SPDFGHIKLMNOQRTUVWXYZ])\*?$")
_L_LETTERS = "SPDFGHIKLMNOQRTUVWXYZ"
_N_ONLY = re.compile(r"^\d+$")
_FILE_NAME = re.compile(r"^nistspectrum=([A-Z][a-z]?)\+([IVXLCDM]+)\.webdump\.dat$")


@dataclass
class ParsedLevel:
    """One level as read from a source row."""

    energy_text: str  # the energy as written (kept for byte-exact, lossless output)
    energy_cm: float
    g: float
    flags: str
    j: str
    configuration: str
    term: str
    line: int


@dataclass
class ParsedSpectrum:
    """The result of reading one energy-level export."""

    path: str
    levels: list[ParsedLevel]
    limits_cm: list[float]
    rows_read: int
    dropped: Counter = field(default_factory=Counter)
    ignored_suffix_codes: Counter = field(default_factory=Counter)


def species_of_file(path: str | Path) -> tuple[int, int]:
    """(Z, charge) from an export's file name, e.g. ``nistspectrum=Fe+II.webdump.dat``."""
    name = Path(path).name
    m = _FILE_NAME.match(name)
    if not m or m.group(1) not in Z_OF:
        raise DataFormatError(f"{path}: cannot tell the species from the file name; expected "
                              "'nistspectrum=<Symbol>+<Roman stage>.webdump.dat'")
    return Z_OF[m.group(1)], from_roman(m.group(2)) - 1


def parse_j(text: str, where: str) -> tuple[float, str]:
    """Statistical weight and flags from a J field.

    ``"7/2,9/2"`` lists several levels at one energy: their weights are summed (flag 'm').
    ``"1/2 or 3/2"`` is one level of uncertain J: the mean weight of the alternatives (flag 'j').
    ``"3/2?"`` is an uncertain J taken at face value (flag 'j').
    """
    flags = ""
    s = text.strip()
    if s.endswith("?"):
        s = s[:-1].strip()
        flags += "j"
    try:
        if " or " in s:
            alts = [_g(part) for part in re.split(r"\s*(?:,|\bor\b)\s*", s) if part]
            return sum(alts) / len(alts), flags + ("" if "j" in flags else "j")
        if "," in s:
            return float(sum(_g(part) for part in s.split(","))), flags + "m"
        return _g(s), flags
    except (ValueError, ZeroDivisionError):
        raise DataFormatError(f"{where}: cannot read J {text!r}") from None


def _g(j_text: str) -> int:
    j = Fraction(j_text.strip())
    if j < 0 or (2 * j).denominator != 1:
        raise ValueError(j_text)
    return int(2 * j + 1)


def _unquote(field_text: str) -> str:
    f = field_text.strip()
    if len(f) >= 2 and f[0] == '"' and f[-1] == '"':
        return f[1:-1]
    return f


def parse_level_export(path: str | Path, text: str | None = None) -> ParsedSpectrum:
    """Read one NIST ASD energy-level export.

    Parameters
    ----------
    path : str or Path
        The file (read unless ``text`` is given; always used in messages).
    text : str, optional
        The file's content, for parsing samples held in memory.

    Raises
    ------
    DataFormatError
        Empty file, unknown column layout, a row with the wrong number of fields, an energy or J
        that cannot be read.
    """
    path = str(path)
    if text is None:
        try:
            text = Path(path).read_text(encoding="utf-8")
        except OSError as exc:
            raise DataFormatError(f"{path}: cannot read ({exc.strerror})") from None
    lines = text.splitlines()
    if not lines or not lines[0].strip():
        raise DataFormatError(f"{path}: empty file; expected a NIST energy-level export")
    header = [h.strip() for h in lines[0].rstrip("\t").split("\t")]
    if header != LEVEL_HEADER:
        raise DataFormatError(f"{path}, line 1: unknown column layout {header}; expected "
                              f"{LEVEL_HEADER} (a tab-separated NIST ASD levels export)")
    out = ParsedSpectrum(path=path, levels=[], limits_cm=[], rows_read=0)
    n_only: list[tuple[int, ParsedLevel]] = []
    resolved_n: set[int] = set()
    for lineno, raw in enumerate(lines[1:], start=2):
        if not raw.strip():
            continue
        fields = raw.split("\t")
        if len(fields) == 7 and fields[6].strip() == "":
            fields = fields[:6]
        if len(fields) != 6:
            raise DataFormatError(f"{path}, line {lineno}: expected 6 tab-separated fields, "
                                  f"found {len(fields)}: {raw!r}")
        out.rows_read += 1
        config, term, jtext, prefix, level, suffix = (_unquote(f) for f in fields)
        where = f"{path}, line {lineno}"
        if term == "Limit":
            out.dropped["limit_row"] += 1
            if level:
                out.limits_cm.append(_energy(level, where))
            continue
        if not level:
            out.dropped["no_energy"] += 1
            continue
        energy = _energy(level, where)
        flags = ""
        if "(" in prefix or "(" in suffix:
            flags += "t"
        if "[" in prefix or "[" in suffix:
            flags += "d"
        if "?" in suffix:
            flags += "q"
        if _OFFSET.search(suffix):
            flags += "x"
        leftover = re.sub(r"[\[\]()?]|\+[a-z]", "", suffix)
        if leftover:
            out.ignored_suffix_codes[leftover] += 1
        if _N_ONLY.match(config) and not term and not jtext:
            n = int(config)
            n_only.append((n, ParsedLevel(level, energy, 2.0 * n * n, flags + "h", "",
                                          config, term, lineno)))
            continue
        if not jtext:
            lsm = _LS_TERM.match(term)
            if not lsm:
                out.dropped["no_J"] += 1
                continue
            # a whole LS term at one energy, J unresolved: g = (2S+1)(2L+1)
            g, jflags = float(int(lsm.group(1)) * (2 * _L_LETTERS.index(lsm.group(2)) + 1)), "j"
        else:
            g, jflags = parse_j(jtext, where)
        m = re.match(r"^(\d+)[a-z]", config)
        if m:
            resolved_n.add(int(m.group(1)))
        out.levels.append(ParsedLevel(level, energy, g, jflags + flags, jtext, config, term,
                                      lineno))
    for n, lev in n_only:
        if n in resolved_n:
            out.dropped["hydrogenic_duplicate"] += 1
        else:
            out.levels.append(lev)
    out.levels.sort(key=lambda lv: (lv.energy_cm, lv.line))
    return out


def _energy(text: str, where: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise DataFormatError(f"{where}: cannot read the energy {text!r} as a number") from None
    if value < 0 or value != value:
        raise DataFormatError(f"{where}: negative or invalid energy {text!r}")
    return value


@dataclass(frozen=True)
class IonizationEnergy:
    value_ev: float
    uncertainty_ev: float | None
    note: str  # '' measured, 'theoretical' (parentheses), 'estimated' (square brackets)
    text: str  # as written, for lossless output


def parse_ionization_energies(path: str | Path) -> dict[tuple[int, int], IonizationEnergy]:
    """Read the NIST ionization-energy CSV into ``{(Z, charge): IonizationEnergy}``."""
    path = str(path)
    out: dict[tuple[int, int], IonizationEnergy] = {}
    try:
        fh = open(path, newline="", encoding="utf-8")
    except OSError as exc:
        raise DataFormatError(f"{path}: cannot read ({exc.strerror})") from None
    with fh:
        reader = csv.reader(fh)
        header = next(reader, None)
        if not header or header[0] != "At. Num" or "Ionization Energy (eV)" not in header:
            raise DataFormatError(f"{path}, line 1: unknown column layout {header}")
        col = header.index("Ionization Energy (eV)")
        ucol = header.index("Uncertainty (eV)")
        for lineno, row in enumerate(reader, start=2):
            if not row:
                continue
            try:
                z, charge = int(row[0]), int(row[1].replace("+", ""))
            except (ValueError, IndexError):
                raise DataFormatError(f"{path}, line {lineno}: bad Z / charge in {row!r}") from None
            raw = row[col].strip()
            if not raw:
                continue
            note = "theoretical" if raw.startswith("(") else "estimated" if raw.startswith("[") else ""
            val = raw.strip("()[]")
            try:
                value = float(val)
                unc = float(row[ucol]) if row[ucol].strip() else None
            except ValueError:
                raise DataFormatError(f"{path}, line {lineno}: cannot read {raw!r}") from None
            if (z, charge) in out:
                raise DataFormatError(f"{path}, line {lineno}: duplicated species Z={z} charge={charge}")
            out[(z, charge)] = IonizationEnergy(value, unc, note, val)
    return out


@dataclass(frozen=True)
class ElementMass:
    Z: int
    symbol: str
    standard_weight: float  # standard atomic weight [u] (interval midpoint where an interval)
    weight_text: str
    main_isotope: int  # mass number of the most abundant isotope (or the longest-lived one)
    main_isotope_mass: float  # its atomic mass [u]


def _number(text: str) -> float:
    return float(re.sub(r"\(\d+#?\)|#", "", text))


def parse_atomic_weights(path: str | Path) -> dict[int, ElementMass]:
    """Read the NIST atomic-weights CSV into ``{Z: ElementMass}``.

    Standard atomic weights given as an interval ``[a,b]`` are represented by the midpoint; a
    bracketed mass number ``[98]`` (no stable isotope) by that number.
    """
    path = str(path)
    rows: dict[int, list[dict]] = {}
    with open(path, newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        for lineno, row in enumerate(reader, start=2):
            if not any((v or "").strip() for v in row.values()):
                continue  # blank trailing rows
            try:
                z = int(row["Atomic Number"])
                rows.setdefault(z, []).append({
                    "symbol": row["Atomic Symbol"], "A": int(row["Mass Number"]),
                    "mass": _number(row["Relative Atomic Mass"]),
                    "abundance": _number(row["Isotopic Composition"]) if row["Isotopic Composition"] else 0.0,
                    "weight": row["Standard Atomic Weight"].strip()})
            except (KeyError, ValueError) as exc:
                raise DataFormatError(f"{path}, line {lineno}: cannot read row ({exc})") from None
    out = {}
    for z, isotopes in rows.items():
        wtext = isotopes[0]["weight"]
        inner = wtext.strip("[]")
        if "," in inner:
            a, b = (float(x) for x in inner.split(","))
            weight = 0.5 * (a + b)
        elif wtext:
            weight = _number(inner)
        else:
            weight = float("nan")
        main = max(isotopes, key=lambda r: r["abundance"])
        if main["abundance"] == 0.0:  # no natural abundance: the isotope nearest the weight
            main = min(isotopes, key=lambda r: abs(r["mass"] - weight) if weight == weight else r["A"])
            if weight != weight:
                weight = main["mass"]
        symbol = next((r["symbol"] for r in isotopes if r["symbol"] in Z_OF), isotopes[0]["symbol"])
        out[z] = ElementMass(z, symbol, weight, wtext, main["A"], main["mass"])
    return out
