"""The species database: every element and ionization stage in level_data, looked up by name.

>>> from sahaboltz.data.database import default_database
>>> db = default_database()
>>> db.species("Fe II").ionization_energy_ev    # doctest: +SKIP
16.19921
"""

from __future__ import annotations

import functools
import hashlib
import math
from pathlib import Path

from sahaboltz.data import levelfile
from sahaboltz.data.elements import SYMBOLS, atomic_number, parse_species, spectroscopic_name
from sahaboltz.data.paths import level_data_dir
from sahaboltz.data.species import LevelTable, Species
from sahaboltz.errors import DataFormatError, InputError, NoDataError, UnknownSpeciesError


class SpeciesDatabase:
    """All species of a level_data directory.

    Parameters
    ----------
    path : str or Path, optional
        A level_data directory; default :func:`sahaboltz.data.paths.level_data_dir`.
    """

    def __init__(self, path: str | Path | None = None):
        self.path = Path(path) if path is not None else level_data_dir()
        self._species: dict[tuple[int, int], Species] = {}
        self._weights: dict[int, float] = {}
        self._isotope_mass: dict[int, float] = {}
        self._completeness: dict[tuple[int, int], str] = {}
        elements_file = self.path / "elements.txt"
        if not elements_file.is_file():
            raise NoDataError(f"{elements_file} is missing: re-run the importer "
                              "(python -m sahaboltz.data.nist_import all)")
        text = elements_file.read_text(encoding="utf-8")
        for line in text.splitlines():
            if line and not line.startswith(("#", "Z\t")):
                f = line.split("\t")
                self._weights[int(f[0])] = float(f[2])
                self._isotope_mass[int(f[0])] = float(f[5])
        files = sorted((self.path / "atoms").glob("*.txt"))
        if not files:
            raise NoDataError(f"no element files in {self.path / 'atoms'}: re-run the importer")
        for file in files:
            self._load_element(file.read_text(encoding="utf-8"), str(file))
        #: SHA-256 of every file of the level_data directory (see :func:`data_digest`)
        self.digest = data_digest(self.path)

    def _load_element(self, raw: str, path: str) -> None:
        _, sections = levelfile.parse(raw, path)
        z = None
        for sec in sections:
            try:
                z, charge = int(sec.header["Z"]), int(sec.header["charge"])
            except (KeyError, ValueError):
                raise DataFormatError(f"{path}: section [{sec.name}] lacks Z or charge") from None
            if (z, charge) in self._species:
                raise DataFormatError(f"{path}: duplicated species {sec.name}")
            ie = _float(sec.header.get("ionization_energy_eV"))
            unc = _float(sec.header.get("ionization_energy_uncertainty_eV"))
            self._species[(z, charge)] = Species(
                SYMBOLS[z], z, charge, ie, unc, levelfile.level_table(sec, path),
                provenance=dict(sec.header))
        if z is not None:  # the bare nucleus: U = 1, no levels
            self._species[(z, z)] = Species(
                SYMBOLS[z], z, z, math.inf, math.nan, LevelTable.empty(),
                provenance={"levels_source": "bare nucleus: no bound electrons, U = 1"})

    # -- look-ups ---------------------------------------------------------------------------
    def _key(self, key) -> tuple[int, int]:
        if isinstance(key, Species):
            return key.Z, key.charge
        if isinstance(key, tuple) and len(key) == 2:
            z, charge = atomic_number(key[0]), int(key[1])
            if not 0 <= charge <= z:
                raise UnknownSpeciesError(
                    f"charge {charge} is impossible for {SYMBOLS[z]}: use 0 to {z}")
            return z, charge
        if isinstance(key, str):
            return parse_species(key)
        raise InputError(f"species must be a name ('Fe II', 'Fe+') or (Z, charge), got {key!r}")

    def species(self, key, *, require_levels: bool = True) -> Species:
        """Look up one species by spectroscopic notation, charge notation or (Z, charge).

        Raises
        ------
        UnknownSpeciesError
            Unknown element or a stage beyond the bare nucleus.
        NoDataError
            The species has no data (no levels, no ionization energy) in level_data.
        """
        z, charge = self._key(key)
        if charge < 0:
            raise NoDataError(f"{key!r}: negative ions have no level lists in level_data; "
                              "H- is handled by the equilibrium solver")
        sp = self._species.get((z, charge))
        if sp is None:
            if not any(k[0] == z for k in self._species):
                raise NoDataError(f"no data for element {SYMBOLS[z]} (Z = {z}) in {self.path}")
            raise NoDataError(f"no data for {spectroscopic_name(z, charge)} in {self.path}")
        if require_levels and not sp.is_bare_nucleus and len(sp.levels) == 0:
            raise NoDataError(f"{sp.name} has no level list in the source data "
                              f"({sp.provenance.get('levels_source', '')}); import one with "
                              "python -m sahaboltz.data.nist_import species FILE --species "
                              f"'{sp.name}'")
        return sp

    __getitem__ = species

    def __contains__(self, key) -> bool:
        try:
            self.species(key)
            return True
        except (UnknownSpeciesError, NoDataError, InputError):
            return False

    def element(self, symbol) -> list[Species]:
        """Every stage of an element held in the database, neutral first, bare nucleus last."""
        z = atomic_number(symbol)
        out = [sp for (zz, _), sp in sorted(self._species.items()) if zz == z]
        if not out:
            raise NoDataError(f"no data for element {SYMBOLS[z]} (Z = {z}) in {self.path}")
        return out

    def all_species(self) -> list[Species]:
        """Every species (bare nuclei included), ordered by Z then charge."""
        return [self._species[k] for k in sorted(self._species)]

    def elements(self) -> list[int]:
        """Atomic numbers of the elements with data."""
        return sorted({z for z, _ in self._species})

    def atomic_weight(self, symbol) -> float:
        """Standard atomic weight [u] (NIST)."""
        z = atomic_number(symbol)
        if z not in self._weights:
            raise NoDataError(f"no atomic weight for {SYMBOLS[z]} in {self.path / 'elements.txt'}")
        return self._weights[z]

    def isotope_mass(self, symbol) -> float:
        """Atomic mass [u] of the element's most abundant isotope (NIST)."""
        z = atomic_number(symbol)
        return self._isotope_mass[z]

    def __len__(self) -> int:
        return len(self._species)

    def __repr__(self) -> str:
        return f"SpeciesDatabase({str(self.path)!r}, {len(self)} species)"


def data_digest(path: str | Path | None = None) -> str:
    """SHA-256 over every file of a level_data directory (relative names and contents, sorted).

    Cheap (no parsing), so a table-cache look-up can key on the data without loading them.
    """
    root = Path(path) if path is not None else level_data_dir()
    h = hashlib.sha256()
    for file in sorted(p for p in root.rglob("*") if p.is_file()):
        h.update(file.relative_to(root).as_posix().encode() + b"\0")
        h.update(file.read_bytes())
    return h.hexdigest()


def _float(text: str | None) -> float:
    return float(text) if text else math.nan


@functools.lru_cache(maxsize=None)
def _cached(path: str) -> SpeciesDatabase:
    return SpeciesDatabase(path)


def default_database() -> SpeciesDatabase:
    """The shipped level_data, loaded once per process."""
    return _cached(str(level_data_dir()))
