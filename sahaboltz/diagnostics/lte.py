"""The McWhirter criterion applied to a diagnostic result.

LTE among the levels of a species needs collisions to beat radiative decay.  McWhirter's
(1965) necessary condition is

    n_e >= 1.6e12 T^1/2 (dE)^3     [cm^-3, T in K, dE in eV],

with dE the largest gap between adjacent levels.  The coefficient is the one the equilibrium
kernels define (:func:`sahaboltz.kernels.plasma.mcwhirter_density`), and the default dE is
defined as there: the largest gap between adjacent bound levels of the species, here of the
species whose lines were measured.  The criterion is necessary, not sufficient: transient
and inhomogeneous plasmas (laser-produced plumes) need more (relaxation times, diffusion
lengths) than this check can tell.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from sahaboltz.kernels.plasma import _mcwhirter
from sahaboltz.errors import InputError, NoDataError
from sahaboltz.quantities import as_positive_array

__all__ = ["McWhirterCheck", "largest_level_gap_ev", "mcwhirter_check"]


@dataclass(frozen=True)
class McWhirterCheck:
    """Outcome of :func:`mcwhirter_check`."""

    temperature: float
    electron_density: float | None   # None: not known (a Boltzmann plot alone)
    delta_e_ev: float
    gap_species: str                 # whose level gap dE is ("given" when passed in)
    required_density: float          # 1.6e12 T^1/2 dE^3 [cm^-3]
    satisfied: bool | None           # None when n_e is not known

    @property
    def message(self) -> str:
        base = (f"McWhirter criterion: n_e >= {self.required_density:.3g} cm^-3 needed "
                f"(T = {self.temperature:.4g} K, dE = {self.delta_e_ev:.4g} eV of "
                f"{self.gap_species})")
        if self.satisfied is None:
            return base + "; n_e not known here, compare it yourself"
        if self.satisfied:
            return (base + f"; n_e = {self.electron_density:.3g} cm^-3 meets it (necessary, "
                           "not sufficient for LTE)")
        return (base + f"; n_e = {self.electron_density:.3g} cm^-3 is BELOW it: LTE is "
                       "doubtful and the temperature / density found here may be meaningless")

    def as_dict(self) -> dict:
        return {"mcwhirter_required_n_e_cm-3": self.required_density,
                "mcwhirter_delta_e_eV": self.delta_e_ev, "mcwhirter_gap_species": self.gap_species,
                "mcwhirter_satisfied": self.satisfied, "lte_note": self.message}


def largest_level_gap_ev(species: str, database=None) -> float:
    """Largest gap between adjacent bound levels of a species [eV] (from the database)."""
    from sahaboltz.data.database import default_database
    db = database or default_database()
    sp = db.species(species)
    if sp.largest_gap_ev is None:
        raise NoDataError(f"{sp.name} has fewer than two bound levels: pass delta_e_ev")
    return sp.largest_gap_ev


def mcwhirter_check(temperature: Any, electron_density: Any = None, *,
                    species: Sequence[str] = (), delta_e_ev: Any = None,
                    database=None) -> McWhirterCheck:
    """Check McWhirter's criterion for a measured (T, n_e).

    Parameters
    ----------
    temperature : float or Quantity
        T [K].
    electron_density : float or Quantity, optional
        n_e [cm^-3]; without it the required density is reported and ``satisfied`` is None.
    species : sequence of str
        Species whose lines were used; dE is the largest adjacent-level gap among them.
    delta_e_ev : float, optional
        dE [eV] given directly (overrides ``species``).
    database : SpeciesDatabase, optional

    Raises
    ------
    InputError
        Neither ``species`` nor ``delta_e_ev``; bad values.
    """
    t = float(as_positive_array(temperature, "K", "temperature"))
    ne = None if electron_density is None else float(
        as_positive_array(electron_density, "cm-3", "electron_density"))
    if delta_e_ev is not None:
        de, who = float(as_positive_array(delta_e_ev, "eV", "delta_e_ev")), "given"
    else:
        if not species:
            raise InputError("mcwhirter_check: give the species of the lines or delta_e_ev")
        gaps = {s: largest_level_gap_ev(s, database) for s in species}
        who = max(gaps, key=gaps.get)
        de = gaps[who]
    need = float(_mcwhirter(t, de))
    return McWhirterCheck(temperature=t, electron_density=ne, delta_e_ev=de, gap_species=who,
                          required_density=need, satisfied=None if ne is None else ne >= need)
