"""Loader of the project's diatomic-molecule data (``level_data/molecules/``).

The file is written by :mod:`sahaboltz.data.molecule_import` from Barklem & Collet (2016); its
format is described in ``docs/molecules.md``.  Each molecule carries the two-body process its
equilibrium constant belongs to (``CO+ = C+ + O``: one component may be an ion), the adopted
dissociation energy, and the tabulated constant and partition function on the source's
temperature grid.  Equilibrium constants are converted here, once, from the file's Pa to
dyn cm^-2.

    >>> db = default_molecule_database()
    >>> db["CO"].components
    ('O', 'C')
    >>> db.molecule("HO").name          # any element order is accepted
    'OH'
"""

from __future__ import annotations

import difflib
import hashlib
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Iterable

import astropy.units as u
import numpy as np

from sahaboltz.data.elements import Z_OF, atomic_number
from sahaboltz.data.molecule_import import FORMAT_TAG, OUTPUT_NAME, parse_formula
from sahaboltz.errors import DataFormatError, NoDataError, UnknownSpeciesError

#: log10 of (1 Pa in dyn cm^-2), from astropy units: added to the file's log10 K_p [Pa]
LOG10_PA_TO_CGS = float(np.log10((1 * u.Pa).to_value(u.dyn / u.cm ** 2)))


@dataclass(frozen=True)
class Molecule:
    """One diatomic molecule and the dissociation process its constant belongs to.

    Attributes
    ----------
    name : str
        As in the source, e.g. ``"CO"``, ``"H2"``, ``"CO+"``.
    charge : int
        Net charge of the molecule.
    components : tuple of str
        The two atomic species of the process ``AB = A + B`` (charge notation, ``"C+"``, ``"O"``).
    component_Z, component_charges : tuple of int
        Atomic numbers and charges of the two components.
    dissociation_energy_ev : float
        Adopted D0 [eV] of that process.
    dissociation_energy_uncertainty_ev : float or None
        Its uncertainty [eV], None where the source gives none.
    temperature : ndarray
        Tabulation temperatures [K], increasing.
    log10_kp : ndarray
        log10 of K_p = p(A) p(B) / p(AB) [dyn cm^-2] at ``temperature``.
    partition_function : ndarray
        Molecular partition function U_AB at ``temperature``.
    provenance : str
        Source and file lines.
    """

    name: str
    charge: int
    components: tuple[str, str]
    component_Z: tuple[int, int]
    component_charges: tuple[int, int]
    dissociation_energy_ev: float
    dissociation_energy_uncertainty_ev: float | None
    temperature: np.ndarray = field(repr=False)
    log10_kp: np.ndarray = field(repr=False)
    partition_function: np.ndarray = field(repr=False)
    provenance: str = field(repr=False, default="")

    @property
    def composition(self) -> dict[int, int]:
        """Atoms of each element: ``{Z: count}`` (``{1: 2}`` for H2)."""
        out: dict[int, int] = {}
        for z in self.component_Z:
            out[z] = out.get(z, 0) + 1
        return out

    @property
    def elements(self) -> tuple[int, ...]:
        """Atomic numbers of the elements in the molecule, sorted, without repeats."""
        return tuple(sorted(set(self.component_Z)))

    @property
    def is_ion(self) -> bool:
        return self.charge != 0

    @property
    def has_ion_component(self) -> bool:
        """True when the process involves an atomic ion (``CO+ = C+ + O``, ``OH- = O- + H``)."""
        return any(q != 0 for q in self.component_charges)

    @property
    def temperature_range(self) -> tuple[float, float]:
        """Lowest and highest tabulated temperature [K]."""
        return float(self.temperature[0]), float(self.temperature[-1])


class MoleculeDatabase:
    """The diatomic molecules of one data file, looked up by name.

    Parameters
    ----------
    path : str or Path, optional
        The data file, or a directory holding ``bc2016_diatomics.txt``; default
        ``level_data/molecules``.
    """

    def __init__(self, path: str | Path | None = None):
        if path is None:
            from sahaboltz.data.paths import level_data_dir
            path = level_data_dir() / "molecules"
        path = Path(path)
        if path.is_dir():
            path = path / OUTPUT_NAME
        if not path.is_file():
            raise NoDataError(f"molecular data file {path} not found: run "
                              "python -m sahaboltz.data.molecule_import to create it")
        raw = path.read_bytes()
        self.path = path
        self.digest = hashlib.sha256(raw).hexdigest()
        self.header, self._molecules = _parse(raw.decode("ascii"), str(path))
        self._by_key = {_formula_key(m.name): m for m in self._molecules.values()}

    # ------------------------------------------------------------------ lookup
    def molecule(self, name: str | Molecule) -> Molecule:
        """The molecule called ``name`` (``"CO"``, ``"H2"``, ``"CO+"``; element order free).

        Raises
        ------
        UnknownSpeciesError
            If there is no such molecule in the data, with the closest names as suggestions.
        """
        if isinstance(name, Molecule):
            return name
        if not isinstance(name, str):
            raise UnknownSpeciesError(f"a molecule is named by a string such as 'CO', got {name!r}")
        text = name.strip()
        if text in self._molecules:
            return self._molecules[text]
        try:
            key = _formula_key(text)
        except ValueError:
            key = None
        if key is not None and key in self._by_key:
            return self._by_key[key]
        close = difflib.get_close_matches(text, list(self._molecules), n=4, cutoff=0.5)
        hint = f"; did you mean {', '.join(close)}?" if close else ""
        raise UnknownSpeciesError(f"no molecule {name!r} in {self.path.name} (it holds "
                                  f"{len(self)} diatomics of Barklem & Collet 2016){hint}")

    __getitem__ = molecule

    def __contains__(self, name) -> bool:
        try:
            self.molecule(name)
        except UnknownSpeciesError:
            return False
        return True

    def __len__(self) -> int:
        return len(self._molecules)

    def __iter__(self):
        return iter(self._molecules.values())

    @property
    def names(self) -> list[str]:
        """Molecule names in file order."""
        return list(self._molecules)

    def all_molecules(self) -> list[Molecule]:
        return list(self._molecules.values())

    def made_of(self, elements: Iterable[int | str], *, neutral_only: bool = False,
                neutral_components: bool = False) -> list[Molecule]:
        """Molecules all of whose elements are among ``elements`` (symbols or Z).

        ``neutral_only`` keeps neutral molecules; ``neutral_components`` keeps processes
        between two neutral atoms.
        """
        allowed = {atomic_number(e) for e in elements}
        out = []
        for m in self._molecules.values():
            if not set(m.component_Z) <= allowed:
                continue
            if neutral_only and m.charge != 0:
                continue
            if neutral_components and m.has_ion_component:
                continue
            out.append(m)
        return out

    def __repr__(self) -> str:
        return f"MoleculeDatabase({str(self.path)!r}, {len(self)} molecules)"


def _formula_key(name: str) -> tuple[tuple[tuple[str, int], ...], int]:
    counts, charge = parse_formula(name)
    return tuple(sorted(counts.items())), charge


def _species_of(text: str, where: str) -> tuple[int, int]:
    counts, charge = parse_formula(text)
    if len(counts) != 1 or sum(counts.values()) != 1:
        raise DataFormatError(f"{where}: component {text!r} is not a single atom or atomic ion")
    return Z_OF[next(iter(counts))], charge


def _parse(text: str, path: str) -> tuple[list[str], dict[str, Molecule]]:
    lines = text.split("\n")
    if not lines or lines[0].strip() != f"# {FORMAT_TAG}":
        raise DataFormatError(f"{path}:1: not a molecular data file of format "
                              f"{FORMAT_TAG!r} (first line {lines[0][:40]!r})")
    header = [ln for ln in lines if ln.startswith("#")]
    source = next((ln[len("# source: "):] for ln in header if ln.startswith("# source: ")), "")
    molecules: dict[str, Molecule] = {}
    i, n = 0, len(lines)
    while i < n:
        line = lines[i].strip()
        i += 1
        if not line or line.startswith("#"):
            continue
        start = i
        where = f"{path}:{start}"
        try:
            key, name = line.split()
            if key != "molecule":
                raise ValueError
            fields = {}
            for expect in ("process", "charge", "D0_eV", "D0_literature_eV", "source_lines"):
                parts = lines[i].split()
                if not parts or parts[0] != expect:
                    raise DataFormatError(f"{path}:{i + 1}: expected a '{expect}' line in the "
                                          f"block of {name}, got {lines[i][:40]!r}")
                fields[expect] = parts[1:]
                i += 1
            proc = fields["process"]
            if len(proc) != 5 or proc[0] != name or proc[1] != "=" or proc[3] != "+":
                raise DataFormatError(f"{path}:{start + 1}: process line must read "
                                      f"'{name} = A + B'")
            comps = (proc[2], proc[4])
            (z1, q1), (z2, q2) = (_species_of(c, f"{path}:{start + 1}") for c in comps)
            charge = int(fields["charge"][0])
            d0 = fields["D0_eV"]
            d0_ev = float(d0[0])
            d0_err = None if d0[2] == "none" else float(d0[2])
            rows = []
            while i < n and lines[i].strip() != "end":
                s = lines[i].strip()
                if s and not s.startswith("#"):
                    vals = s.split()
                    if len(vals) != 3:
                        raise DataFormatError(f"{path}:{i + 1}: expected 'T log10_Kp_Pa U_AB', "
                                              f"got {s[:50]!r}")
                    try:
                        row = [float(v) for v in vals]
                    except ValueError:
                        raise DataFormatError(f"{path}:{i + 1}: not numbers: {s[:50]!r}") from None
                    if not all(np.isfinite(row)) or row[0] <= 0 or row[2] <= 0:
                        raise DataFormatError(f"{path}:{i + 1}: T and U_AB must be positive "
                                              f"and all values finite: {s[:50]!r}")
                    if rows and row[0] <= rows[-1][0]:
                        raise DataFormatError(f"{path}:{i + 1}: temperatures must increase")
                    rows.append(row)
                i += 1
            if i >= n:
                raise DataFormatError(f"{where}: block of {name} has no 'end' line")
            i += 1
        except DataFormatError:
            raise
        except (ValueError, IndexError) as exc:
            raise DataFormatError(f"{where}: malformed molecule block ({exc or 'bad line'})") from None
        arr = np.array(rows, dtype=np.float64).reshape(-1, 3)
        t, logk, q = arr.T
        if len(t) < 4:
            raise DataFormatError(f"{where}: {name} has {len(t)} temperatures, at least 4 needed")
        if q1 + q2 != charge:
            raise DataFormatError(f"{where}: charges of {comps} do not add up to {charge}")
        if name in molecules:
            raise DataFormatError(f"{where}: molecule {name} appears twice")
        for a in (t, logk, q):
            a.setflags(write=False)
        lg = logk + LOG10_PA_TO_CGS
        lg.setflags(write=False)
        molecules[name] = Molecule(
            name=name, charge=charge, components=comps, component_Z=(z1, z2),
            component_charges=(q1, q2), dissociation_energy_ev=d0_ev,
            dissociation_energy_uncertainty_ev=d0_err, temperature=t, log10_kp=lg,
            partition_function=q,
            provenance=f"{source}; {' '.join(fields['source_lines'])}; {Path(path).name}:{start}")
    if not molecules:
        raise DataFormatError(f"{path}: no molecule blocks")
    return header, molecules


@lru_cache(maxsize=4)
def _cached(path: str) -> MoleculeDatabase:
    return MoleculeDatabase(path)


def default_molecule_database() -> MoleculeDatabase:
    """The shipped molecular data (cached; ``$SAHABOLTZ_LEVEL_DATA`` moves it)."""
    from sahaboltz.data.paths import level_data_dir
    return _cached(str(level_data_dir() / "molecules"))
