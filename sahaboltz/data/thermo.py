"""Loader of the NASA thermodynamic polynomials (``level_data/molecules/nasa1993_*.txt``).

The files are written by :mod:`sahaboltz.data.thermo_import`; the format is described in
``docs/molecules.md``.  Each record is one species (gas) or phase (condensed) with its
composition, charge and the polynomial coefficients of each temperature range, held here in
the 9-coefficient layout (a 7-coefficient row a1..a7 becomes 0, 0, a1..a7).

A gas record offers the attributes the molecular equilibrium reads from a diatomic
:class:`~sahaboltz.data.molecules.Molecule` (``component_Z`` with repeats, all components
neutral atoms, ``charge``, ``elements``): its constant belongs to the process "molecule =
neutral atoms (+ electrons for a negative ion, - electrons for a positive one)".

    >>> db = default_thermo_database()
    >>> db["H2O"].composition
    {1: 2, 8: 1}
    >>> db["AlCl2-"].charge
    -1
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import numpy as np

from sahaboltz.data.elements import SYMBOLS, Z_OF
from sahaboltz.data.thermo_import import (CONDENSED_NAME, ELECTRON, FORMAT_TAG, GAS_NAME,
                                          formula_counts)
from sahaboltz.errors import DataFormatError, NoDataError, UnknownSpeciesError

SOURCE_TAG = "nasa1993"


@dataclass(frozen=True)
class ThermoSpecies:
    """One species (or condensed phase) with its NASA polynomials.

    Attributes
    ----------
    name : str
        Our name: ``"H2O"``, ``"AlCl2-"``, ``"C2H2/vinylidene"``, ``"Al2O3(a)"``.
    composition : dict
        ``{Z: count}`` of the elements.
    charge : int
    phase : str
        ``"gas"`` or the condensed phase label (``"cr"``, ``"L"``, ``"a"``, ``"s"`` ...).
    t_low, t_high : ndarray
        Bounds of each temperature range [K], contiguous and increasing.
    coefficients : ndarray
        (n_ranges, 9), the 9-coefficient layout.
    provenance : str
    """

    name: str
    composition: dict = field(repr=False)
    charge: int
    phase: str
    t_low: np.ndarray = field(repr=False)
    t_high: np.ndarray = field(repr=False)
    coefficients: np.ndarray = field(repr=False)
    note: str = field(repr=False, default="")
    provenance: str = field(repr=False, default="")
    source: str = field(repr=False, default=SOURCE_TAG)

    # -- the attributes the molecular equilibrium reads ------------------------------------
    @property
    def component_Z(self) -> tuple[int, ...]:
        """Atomic number of every atom (with repeats: ``(1, 1, 8)`` for H2O)."""
        return tuple(z for z in sorted(self.composition) for _ in range(self.composition[z]))

    @property
    def component_charges(self) -> tuple[int, ...]:
        return (0,) * len(self.component_Z)

    @property
    def components(self) -> tuple[str, ...]:
        return tuple(SYMBOLS[z] for z in self.component_Z)

    @property
    def elements(self) -> tuple[int, ...]:
        return tuple(sorted(self.composition))

    @property
    def n_atoms(self) -> int:
        return sum(self.composition.values())

    @property
    def is_ion(self) -> bool:
        return self.charge != 0

    @property
    def has_ion_component(self) -> bool:
        return False

    @property
    def is_condensed(self) -> bool:
        return self.phase != "gas"

    @property
    def formula(self) -> str:
        """The name without isomer label and phase: ``"C2H2"`` for ``"C2H2/vinylidene"``."""
        base = self.name.split("/")[0]
        return base[:base.index("(")] if self.is_condensed and "(" in base else base

    @property
    def temperature_range(self) -> tuple[float, float]:
        return float(self.t_low[0]), float(self.t_high[-1])


class ThermoDatabase:
    """The species of one thermo file, looked up by name (``"H2O"``; element order free)."""

    def __init__(self, path: str | Path):
        path = Path(path)
        if not path.is_file():
            raise NoDataError(f"thermodynamic data file {path} not found: run "
                              "python -m sahaboltz.data.thermo_import to create it")
        self.path = path
        self.header, self._species = _parse(path.read_text(encoding="ascii"), str(path))
        self._by_key: dict = {}
        for s in self._species.values():     # first of a formula wins (unlabelled isomers first)
            self._by_key.setdefault(_key(s), s)

    def species(self, name: str) -> ThermoSpecies:
        if isinstance(name, ThermoSpecies):
            return name
        text = str(name).strip()
        if text in self._species:
            return self._species[text]
        try:
            base, sign = (text[:-1], text[-1]) if text.endswith(("+", "-")) else (text, "")
            k = (tuple(sorted((Z_OF[s], n) for s, n in formula_counts(base).items())),
                 {"": 0, "+": 1, "-": -1}[sign])
            if k in self._by_key:
                return self._by_key[k]
        except (ValueError, KeyError):
            pass
        close = difflib.get_close_matches(text, list(self._species), n=4, cutoff=0.6)
        hint = f"; did you mean {', '.join(close)}?" if close else ""
        raise UnknownSpeciesError(f"no species {name!r} in {self.path.name}{hint}")

    __getitem__ = species

    def __contains__(self, name) -> bool:
        try:
            self.species(name)
        except UnknownSpeciesError:
            return False
        return True

    def __iter__(self):
        return iter(self._species.values())

    def __len__(self) -> int:
        return len(self._species)

    @property
    def names(self) -> list[str]:
        return list(self._species)

    def atom(self, z: int, charge: int = 0) -> ThermoSpecies:
        """The single-atom species of element ``z`` with ``charge``."""
        name = SYMBOLS[z] + {0: "", 1: "+", -1: "-"}[charge]
        s = self._species.get(name)
        if s is None or s.n_atoms != 1:
            raise UnknownSpeciesError(f"no atomic species {name} in {self.path.name}")
        return s

    def has_atom(self, z: int) -> bool:
        s = self._species.get(SYMBOLS[z])
        return s is not None and s.n_atoms == 1

    def electron(self) -> ThermoSpecies:
        return self.species(ELECTRON)

    def __repr__(self) -> str:
        return f"ThermoDatabase({str(self.path)!r}, {len(self)} species)"


def _key(s: ThermoSpecies):
    return tuple(sorted(s.composition.items())), s.charge


def _parse(text: str, path: str) -> tuple[list[str], dict[str, ThermoSpecies]]:
    lines = text.split("\n")
    if not lines or lines[0].strip() != f"# {FORMAT_TAG}":
        raise DataFormatError(f"{path}:1: not a thermodynamic data file of format "
                              f"{FORMAT_TAG!r} (first line {lines[0][:40]!r})")
    header = [ln for ln in lines if ln.startswith("#")]
    out: dict[str, ThermoSpecies] = {}
    i, n = 0, len(lines)
    while i < n:
        line = lines[i]
        i += 1
        if not line.strip() or line.startswith("#"):
            continue
        start = i
        try:
            key, name = line.split(" ", 1)
            if key != "species":
                raise ValueError(f"expected 'species NAME', got {line[:40]!r}")
            fields = {}
            for expect in ("source_name", "composition", "charge", "phase", "note", "source_lines"):
                k, _, rest = lines[i].partition(" ")
                if k != expect:
                    raise ValueError(f"line {i + 1}: expected '{expect}', got {lines[i][:40]!r}")
                fields[expect] = rest
                i += 1
            comp_tokens = fields["composition"].split()
            comp = {Z_OF[comp_tokens[j]]: int(comp_tokens[j + 1])
                    for j in range(0, len(comp_tokens), 2)}
            ranges = []
            while i < n and lines[i] != "end":
                parts = lines[i].split()
                if not parts or parts[0] != "range":
                    raise ValueError(f"line {i + 1}: expected 'range ...' or 'end'")
                model = parts[3]
                c = [float(v) for v in parts[4:]]
                if model == "NASA7" and len(c) == 7:
                    c = [0.0, 0.0] + c
                elif not (model == "NASA9" and len(c) == 9):
                    raise ValueError(f"line {i + 1}: {model} with {len(c)} coefficients")
                ranges.append((float(parts[1]), float(parts[2]), c))
                i += 1
            if i >= n:
                raise ValueError(f"block of {name} has no 'end' line")
            i += 1
            if not ranges:
                raise ValueError(f"{name} has no temperature range")
        except (ValueError, IndexError, KeyError) as exc:
            raise DataFormatError(f"{path}:{start}: malformed species block ({exc})") from None
        lo = np.array([r[0] for r in ranges])
        hi = np.array([r[1] for r in ranges])
        co = np.array([r[2] for r in ranges])
        if np.any(hi <= lo) or np.any(lo[1:] != hi[:-1]) or not np.all(np.isfinite(co)):
            raise DataFormatError(f"{path}:{start}: ranges of {name} must be contiguous and "
                                  "increasing, coefficients finite")
        for a in (lo, hi, co):
            a.setflags(write=False)
        if name in out:
            raise DataFormatError(f"{path}:{start}: species {name} appears twice")
        out[name] = ThermoSpecies(
            name=name, composition=comp, charge=int(fields["charge"]), phase=fields["phase"],
            t_low=lo, t_high=hi, coefficients=co, note=fields["note"],
            provenance=f"McBride, Gordon & Reno 1993 ({fields['note']}); "
                       f"{Path(path).name}:{start}")
    if not out:
        raise DataFormatError(f"{path}: no species blocks")
    return header, out


@lru_cache(maxsize=8)
def _cached(path: str) -> ThermoDatabase:
    return ThermoDatabase(path)


def default_thermo_database(condensed: bool = False) -> ThermoDatabase:
    """The shipped gas (or condensed) polynomials (cached; ``$SAHABOLTZ_LEVEL_DATA`` moves them)."""
    from sahaboltz.data.paths import level_data_dir
    return _cached(str(level_data_dir() / "molecules" / (CONDENSED_NAME if condensed else GAS_NAME)))
