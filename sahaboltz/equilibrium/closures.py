"""The registry of closures: the pressure-like quantity that fixes a state besides T.

Charge neutrality and element conservation leave one condition open; a closure supplies it.
Each closure says which density it fixes (its ``fixes`` kind), and the solvers dispatch on that
kind, never on the closure's name:

``"particles"``
    all free particles: ``value`` is P_gas and the total P / kT is fixed;
``"nuclei"``
    the density of nuclei N is fixed by ``value`` and the composition (mass density,
    hydrogen-nucleus density);
``"electrons"``
    n_e is fixed (electron pressure).

The solvers' keywords, table axes, command-line flags and plot labels all read
:data:`CLOSURES`.  A new closure of an existing kind is one :func:`register` call here (plus a
test and its line in the docs).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from sahaboltz.errors import InputError

# sahaboltz.constants (astropy) is imported where a value is computed, not here: reading the
# registry (names, units, flags) stays cheap for the command line and the table cache

__all__ = ["Closure", "CLOSURES", "register", "get", "FIXES", "ThermalClosure", "THERMAL_CLOSURES",
           "register_thermal"]

#: the kinds of density a closure can fix (see the module docstring)
FIXES = ("particles", "nuclei", "electrons")


@dataclass(frozen=True)
class Closure:
    """One closure: names, unit and how it fixes the state.

    Attributes
    ----------
    name : str
        Keyword of the solvers and name of a table axis (``"gas_pressure"``).
    unit : str
        The cgs unit of the value (astropy syntax, ``"dyn cm-2"``).
    symbol, tex : str
        Short symbol for text (``"P_gas"``) and for matplotlib mathtext.
    flag : str
        Command-line option (``"--gas-pressure"``).
    label : str
        Short name for axis labels (``"gas pressure"``).
    long_name : str
        What it is, for help texts and file attributes.
    fixes : {"particles", "nuclei", "electrons"}
        Which density the value fixes.
    nuclei_per_value : callable, optional
        For ``fixes == "nuclei"``: ``f(composition)`` such that N = value * f.
    needs : callable, optional
        ``f(composition)`` returning an error text when the closure cannot be used for that
        composition (e.g. a hydrogen density without hydrogen), else None.
    """

    name: str
    unit: str
    symbol: str
    tex: str
    flag: str
    label: str
    long_name: str
    fixes: str
    nuclei_per_value: Callable[[Any], float] | None = None
    needs: Callable[[Any], str | None] | None = None

    def check(self, composition) -> None:
        """Raise InputError when this closure cannot fix a state of ``composition``."""
        why = self.needs(composition) if self.needs is not None else None
        if why:
            raise InputError(f"{self.name}: {why}")

    def nuclei(self, composition, value: np.ndarray) -> np.ndarray:
        """The fixed density of nuclei N [cm^-3] (``fixes == "nuclei"`` only)."""
        return value * self.nuclei_per_value(composition)

    def particles(self, temperature: np.ndarray, value: np.ndarray) -> np.ndarray:
        """The fixed density of free particles P / kT [cm^-3] (``fixes == "particles"``)."""
        from sahaboltz.constants import K_B
        return value / (K_B * temperature)

    def electrons(self, temperature: np.ndarray, value: np.ndarray) -> np.ndarray:
        """The fixed electron density P_e / kT [cm^-3] (``fixes == "electrons"``)."""
        from sahaboltz.constants import K_B
        return value / (K_B * temperature)


#: name -> Closure, in the order options are listed
CLOSURES: dict[str, Closure] = {}


def register(closure: Closure) -> Closure:
    """Add a closure to the registry."""
    if closure.fixes not in FIXES:
        raise ValueError(f"closure {closure.name}: fixes must be one of {FIXES}")
    CLOSURES[closure.name] = closure
    return closure


def get(name: str) -> Closure:
    """The closure called ``name``; InputError naming the choices otherwise."""
    try:
        return CLOSURES[name]
    except (KeyError, TypeError):
        raise InputError(f"unknown closure {name!r}; choose one of {', '.join(CLOSURES)}") from None


def _nuclei_per_gram(composition) -> float:
    from sahaboltz.constants import AMU
    return 1.0 / (composition.mean_mass_amu * AMU)


def _needs_hydrogen(composition) -> str | None:
    if "H" not in composition:
        return "the composition has no hydrogen; use mass_density or gas_pressure"
    return None


register(Closure("gas_pressure", "dyn cm-2", "P_gas", r"P_\mathrm{gas}", "--gas-pressure",
                 "gas pressure", "gas pressure, all free particles", "particles"))
register(Closure("mass_density", "g cm-3", "rho", r"\rho", "--mass-density",
                 "mass density", "mass density", "nuclei",
                 nuclei_per_value=_nuclei_per_gram))
register(Closure("hydrogen_density", "cm-3", "n_H", r"n_\mathrm{H}", "--hydrogen-density",
                 "hydrogen-nucleus density", "density of hydrogen nuclei", "nuclei",
                 nuclei_per_value=lambda comp: 1.0 / comp.number_fraction_of("H"),
                 needs=_needs_hydrogen))
register(Closure("nuclei_density", "cm-3", "N", r"N", "--nuclei-density",
                 "nuclei density", "density of nuclei of all elements (heavy particles)",
                 "nuclei", nuclei_per_value=lambda comp: 1.0))
register(Closure("electron_pressure", "dyn cm-2", "P_e", r"P_\mathrm{e}", "--electron-pressure",
                 "electron pressure", "electron pressure P_e = n_e k T", "electrons"))


# -- closures that replace the temperature ------------------------------------------------
@dataclass(frozen=True)
class ThermalClosure:
    """A thermodynamic quantity that, with a partner closure, fixes a state in place of T.

    Attributes
    ----------
    name : str
        Keyword of the solver (``"internal_energy"``) and a table axis name.
    unit, symbol, tex, flag, label, long_name : str
        As for :class:`Closure`.
    partner : str
        The closure of :data:`CLOSURES` given with it (``"mass_density"``).
    slope : str
        The attribute of :class:`~sahaboltz.equilibrium.thermodynamics.Thermodynamics` that is
        d(value)/d ln T at fixed partner: the Newton slope of the inverse solve.
    signed : bool
        The value may be zero or negative (its zero point is a convention: u is negative
        where molecules bind more energy than the gas holds); table axes of it then take
        values of any sign and are interpolated in the value itself, not its logarithm.
    """

    name: str
    unit: str
    symbol: str
    tex: str
    flag: str
    label: str
    long_name: str
    partner: str
    slope: str
    signed: bool = False


#: name -> ThermalClosure: the state is then found by solving for T
#: (:mod:`sahaboltz.equilibrium.inverse`)
THERMAL_CLOSURES: dict[str, ThermalClosure] = {}


def register_thermal(closure: ThermalClosure) -> ThermalClosure:
    """Add a closure that replaces the temperature (its partner must be registered)."""
    if closure.partner not in CLOSURES:
        raise ValueError(f"thermal closure {closure.name}: unknown partner {closure.partner}")
    THERMAL_CLOSURES[closure.name] = closure
    return closure


register_thermal(ThermalClosure(
    "internal_energy", "erg g-1", "u", r"u", "--internal-energy", "specific internal energy",
    "specific internal energy (zero point: neutral ground-state atoms and electrons at rest)",
    partner="mass_density", slope="du_dlnt", signed=True))
register_thermal(ThermalClosure(
    "entropy", "erg g-1 K-1", "s", r"s", "--entropy", "specific entropy",
    "specific entropy (Sackur-Tetrode with internal partition functions)",
    partner="gas_pressure", slope="ds_dlnt_p"))
