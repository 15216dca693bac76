"""In-memory species records: one ionization stage of one element with its bound levels."""

from __future__ import annotations

import functools
from dataclasses import dataclass, field

import astropy.units as u
import numpy as np

from sahaboltz.constants import HC_EV_CM
from sahaboltz.data.elements import roman

#: level flags (one letter each, in the ``flags`` string of a level)
FLAG_MEANINGS = {
    "j": "J uncertain (alternatives 'a or b' averaged, marked '?', or not given: then the row "
         "is a whole LS term and g = (2S+1)(2L+1))",
    "m": "several J at one energy; their g are summed",
    "t": "energy theoretical (in parentheses in the source)",
    "d": "energy derived, interpolated or extrapolated (in square brackets in the source)",
    "q": "energy questionable ('?' in the source)",
    "x": "energy relative to an unknown offset (+x, +y, ... in the source): a lower bound",
    "a": "autoionizing: above the first ionization limit (kept, but not a bound level)",
    "h": "hydrogenic: a level given only by n (g = 2 n^2), or from the Rydberg formula",
}


@dataclass(frozen=True)
class LevelTable:
    """Energy levels of one species, as parallel arrays sorted by energy.

    Attributes
    ----------
    energy_cm : ndarray
        Excitation energy above the ground level [cm^-1].
    g : ndarray
        Statistical weight (2J+1, summed over J alternatives given at one energy).
    flags : ndarray of str
        Letters from :data:`FLAG_MEANINGS`, '' for a plain level.
    configuration, term, j : ndarray of str
        Labels as given by the source.
    """

    energy_cm: np.ndarray
    g: np.ndarray
    flags: np.ndarray
    configuration: np.ndarray
    term: np.ndarray
    j: np.ndarray

    @property
    def energy_ev(self) -> np.ndarray:
        """Excitation energy [eV]."""
        return self.energy_cm * HC_EV_CM

    def __len__(self) -> int:
        return len(self.energy_cm)

    @classmethod
    def empty(cls) -> "LevelTable":
        e = np.zeros(0)
        s = np.zeros(0, dtype=object)
        return cls(e, e.copy(), s, s.copy(), s.copy(), s.copy())

    def has_flag(self, letter: str) -> np.ndarray:
        """Boolean mask of the levels carrying flag ``letter``."""
        if len(self.flags) == 0:
            return np.zeros(0, dtype=bool)
        return np.char.find(self.flags.astype(str), letter) >= 0


@dataclass(frozen=True)
class Species:
    """One ionization stage of one element.

    Attributes
    ----------
    symbol : str
        Element symbol, e.g. ``"Fe"``.
    Z : int
        Atomic number.
    charge : int
        Ion charge (0 for the neutral atom, Z for the bare nucleus).
    ionization_energy_ev : float
        Energy to remove one more electron [eV]; ``inf`` for a bare nucleus.
    ionization_energy_uncertainty_ev : float
        Its uncertainty [eV] (NaN when the source gives none).
    levels : LevelTable
        All tabulated levels, including autoionizing ones (flag 'a').
    provenance : dict
        Source names and import bookkeeping, as stored in level_data.
    """

    symbol: str
    Z: int
    charge: int
    ionization_energy_ev: float
    ionization_energy_uncertainty_ev: float
    levels: LevelTable
    provenance: dict = field(default_factory=dict, compare=False)

    @property
    def name(self) -> str:
        """Spectroscopic notation, e.g. ``"Fe II"``."""
        return f"{self.symbol} {roman(self.charge + 1)}"

    @property
    def charge_notation(self) -> str:
        """Charge notation, e.g. ``"Fe+"``, ``"Fe2+"``."""
        if self.charge == 0:
            return self.symbol
        return f"{self.symbol}{'' if self.charge == 1 else self.charge}+"

    @property
    def is_bare_nucleus(self) -> bool:
        return self.charge == self.Z

    @property
    def is_hydrogenic(self) -> bool:
        """One electron left (H I, He II, ..., Fe XXVI)."""
        return self.Z - self.charge == 1

    @functools.cached_property
    def bound(self) -> np.ndarray:
        """Mask of the bound levels: below the ionization energy and not autoionizing."""
        lv = self.levels
        return (lv.energy_ev < self.ionization_energy_ev) & ~lv.has_flag("a")

    @property
    def bound_energy_ev(self) -> np.ndarray:
        """Excitation energies of the bound levels [eV]."""
        return self.levels.energy_ev[self.bound]

    @property
    def largest_gap_ev(self) -> float | None:
        """Largest gap between adjacent bound levels [eV] (the dE of McWhirter's criterion);
        None with fewer than two distinct bound levels."""
        e = np.unique(self.bound_energy_ev)
        return float(np.diff(e).max()) if e.size >= 2 else None

    @property
    def bound_g(self) -> np.ndarray:
        """Statistical weights of the bound levels."""
        return self.levels.g[self.bound]

    def levels_quantity(self) -> dict:
        """Bound and autoionizing levels with units: energy as eV and cm^-1 Quantities."""
        return {"energy": self.levels.energy_ev * u.eV,
                "wavenumber": self.levels.energy_cm / u.cm,
                "g": self.levels.g, "flags": self.levels.flags,
                "configuration": self.levels.configuration, "term": self.levels.term,
                "J": self.levels.j}

    def __repr__(self) -> str:
        return (f"Species({self.name}, Z={self.Z}, charge={self.charge}, "
                f"chi={self.ionization_energy_ev:.6g} eV, {len(self.levels)} levels)")
