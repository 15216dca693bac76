"""Quick answers on top of the solver: dominant stage, half-ionization temperatures, tables."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Iterable

import numpy as np

from sahaboltz.constants import K_B

from sahaboltz.data.composition import Composition
from sahaboltz.data.elements import atomic_number, spectroscopic_name
from sahaboltz.equilibrium.network import AtomicNetwork
from sahaboltz.equilibrium.solver import solve_equilibrium
from sahaboltz.equilibrium.state import EquilibriumState
from sahaboltz.errors import InputError
from sahaboltz.kernels import truncation as _truncation
from sahaboltz.quantities import as_positive_array

__all__ = ["dominant_stage", "half_ionization_temperatures", "HalfIonization", "stage_table"]


def dominant_stage(state_or_composition, element, temperature: Any = None, **solve_kw
                   ) -> np.ndarray:
    """Charge of the most populated stage of ``element`` (int array, state shape).

    Call it with a solved :class:`EquilibriumState`, ``dominant_stage(state, "Fe")``, or
    with a composition and a state to solve, ``dominant_stage(solar(), "Fe", 5800,
    gas_pressure=1e5)`` (keywords as :func:`solve_equilibrium`).
    """
    if isinstance(state_or_composition, EquilibriumState):
        if temperature is not None or solve_kw:
            raise InputError("dominant_stage: give either a solved state or a composition with "
                             "a temperature and closure, not both")
        return state_or_composition.dominant_stage(element)
    if temperature is None:
        raise InputError("dominant_stage: a composition needs a temperature and a closure "
                         "(e.g. gas_pressure=...)")
    return solve_equilibrium(state_or_composition, temperature, **solve_kw).dominant_stage(element)


@dataclass(frozen=True)
class HalfIonization:
    """Where the transition from charge ``lower`` to ``lower + 1`` is half complete.

    ``temperature`` [K] is where the element's share in stages above ``lower`` reaches 1/2;
    ``electron_density`` [cm^-3] is n_e there.
    """

    element: str
    lower: int
    temperature: float
    electron_density: float

    @property
    def label(self) -> str:
        z = atomic_number(self.element)
        return f"{spectroscopic_name(z, self.lower)} -> {spectroscopic_name(z, self.lower + 1)}"


def half_ionization_temperatures(element, *, electron_pressure: Any = None,
                                 gas_pressure: Any = None, composition: Composition | None = None,
                                 t_min: float = 1.0e3, t_max: float = 1.0e6,
                                 n_grid: int = 256, truncation: str | None = None,
                                 lowering: bool = False, h_minus: bool = True,
                                 database=None) -> list[HalfIonization]:
    """Temperatures at which each ionization of ``element`` is half complete.

    At fixed electron pressure or fixed gas pressure, the share of the element in stages above
    q, S_q(T) = sum_{s > q} n_s / N_element, rises through 1/2 at one temperature per
    transition q -> q+1.  The transitions are located on a log-spaced grid and refined by
    bisection in ln T to 1e-12 relative.

    Parameters
    ----------
    element : str or int
    electron_pressure, gas_pressure : float or Quantity
        Exactly one [dyn cm^-2].
    composition : Composition, optional
        The mixture (default: the pure element).  With a fixed electron pressure and no
        lowering the answer does not depend on the other elements.
    t_min, t_max : float
        Temperature range searched [K]; transitions outside it are not returned.
    n_grid : int
        Points of the initial grid.
    truncation, lowering, h_minus, database
        As for :func:`solve_equilibrium`.

    Returns
    -------
    list of HalfIonization
        One per transition found in [t_min, t_max], lowest charge first.
    """
    z = atomic_number(element)
    if (electron_pressure is None) == (gas_pressure is None):
        raise InputError("give exactly one of electron_pressure and gas_pressure [dyn cm^-2]")
    closure = "electron_pressure" if electron_pressure is not None else "gas_pressure"
    p = as_positive_array(electron_pressure if electron_pressure is not None else gas_pressure,
                          "dyn cm-2", closure)
    if p.ndim:
        raise InputError(f"{closure}: give one value (the transitions are found one pressure "
                         "at a time)")
    lo_t = float(as_positive_array(t_min, "K", "t_min"))
    hi_t = float(as_positive_array(t_max, "K", "t_max"))
    if not hi_t > lo_t:
        raise InputError(f"t_max ({hi_t} K) must exceed t_min ({lo_t} K)")
    if int(n_grid) < 8:
        raise InputError("n_grid must be at least 8")
    comp = composition if composition is not None else Composition.from_number({z: 1.0})
    trunc = _truncation.resolve(truncation, lowering)
    net = AtomicNetwork(comp, database, trunc, False, h_minus)
    chain = net.chain_of(z)
    kw = {closure: float(p), "truncation": trunc, "lowering": lowering, "network": net}

    # At a given P_e (no lowering) the stage fractions follow from n_e = P_e / kT by the Saha
    # chain alone; charge neutrality only sets the total density, and may have no solution
    # (pure hydrogen in cool gas at a high P_e, where H- outnumbers H+), so skip the solve.
    saha_only = closure == "electron_pressure" and not lowering

    def above(temps: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        if saha_only:
            temps = np.atleast_1d(np.asarray(temps, dtype=float))
            x = np.log(float(p) / (K_B * temps))
            a = net.log_c(chain, temps, np.exp(x)) - np.multiply.outer(chain.charges, x)
            a -= a.max(axis=0)
            f = np.exp(a)
            f /= f.sum(axis=0)
            n_e = np.exp(x)
        else:
            st = solve_equilibrium(comp, temps, **kw)
            f = st.stage_fractions(z, negative=True)          # (n, m)
            n_e = st.n_e
        q = chain.charges
        # share above charge q for q = 0 .. Z-1
        tail = np.cumsum(f[::-1], axis=0)[::-1]            # tail[i] = sum_{s >= i}
        i0 = int(np.flatnonzero(q == 0)[0])
        return tail[i0 + 1:], n_e

    grid = np.geomspace(lo_t, hi_t, int(n_grid))
    s_grid, _ = above(grid)
    found = []
    for q in range(z):
        s = s_grid[q]
        cross = np.flatnonzero((s[:-1] < 0.5) & (s[1:] >= 0.5))
        if cross.size:
            found.append((q, grid[cross[0]], grid[cross[0] + 1]))
    if not found:
        return []
    qs = np.array([f[0] for f in found])
    lo = np.log([f[1] for f in found])
    hi = np.log([f[2] for f in found])
    for _ in range(60):
        if np.all(hi - lo <= 1e-12 * np.abs(hi)):
            break
        mid = 0.5 * (lo + hi)
        s_mid, _ = above(np.exp(mid))
        val = s_mid[qs, np.arange(qs.size)]
        lo = np.where(val < 0.5, mid, lo)
        hi = np.where(val < 0.5, hi, mid)
    t_half = np.exp(0.5 * (lo + hi))
    _, ne = above(t_half)
    sym = chain.symbol
    return [HalfIonization(sym, int(q), float(t), float(n)) for q, t, n in zip(qs, t_half, ne)]


def stage_table(state: EquilibriumState, elements: Iterable | None = None, index=None,
                min_fraction: float = 0.0, negative: bool = True) -> list[dict]:
    """The stage distribution of one state as rows (for printing or a DataFrame).

    Parameters
    ----------
    state : EquilibriumState
    elements : iterable, optional
        Elements to list (default: all in the composition).
    index : tuple, optional
        Which state of an array (not needed for a scalar state).
    min_fraction : float
        Leave out stages below this fraction of their element.
    negative : bool
        Include H-.

    Returns
    -------
    list of dict
        Keys: element, species, charge, fraction, number_density_cm-3, U (the partition
        function of the solve), dominant; with lowering also lowering_eV.
    """
    if state.shape and index is None:
        raise InputError(f"stage_table: the state has shape {state.shape}; give index=")
    idx = () if index is None else tuple(np.atleast_1d(index).tolist())
    if elements is None:
        elements = state.composition.symbols
    rows = []
    for el in elements:
        chain = state.network.chain_of(el)
        f = state.stage_fractions(el, negative=negative)[(slice(None),) + idx]
        q = state.stage_charges(el, negative=negative)
        dens = f * float(state.element_density(el)[idx])
        top = int(np.argmax(f))
        for j in range(f.shape[0]):
            if f[j] < min_fraction and j != top:
                continue
            name = chain.names[int(np.flatnonzero(chain.charges == q[j])[0])]
            row = {"element": chain.symbol, "species": name, "charge": int(q[j]),
                   "fraction": float(f[j]), "number_density_cm-3": float(dens[j]),
                   "U": float(state.partition_function(name)[idx])}
            if state.lowering:
                row["lowering_eV"] = float(state.lowering_ev(name)[idx])
            row["dominant"] = j == top
            rows.append(row)
    return rows
