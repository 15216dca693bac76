"""G/RT from the NASA polynomials and the formation constants built from it.

Gibbs energy
------------
With the 9-coefficient layout of :mod:`sahaboltz.data.thermo` (a 7-coefficient row is
0, 0, a1..a7), H/RT and S/R of the source README combine into

    G/RT = H/RT - S/R = sum_j a_j b_j(T),
    b = (-T^-2/2, (ln T + 1)/T, 1 - ln T, -T/2, -T^2/6, -T^3/12, -T^4/20, 1/T, -1),

evaluated per species in the range that holds T.  G includes each species' enthalpy of
formation from the elements in their standard states (298.15 K), standard pressure 1 bar.

Constants of formation from the atoms
-------------------------------------
For a molecule M with nu_A atoms of each element A and charge q, the process

    M = sum_A nu_A A + (-q) e-           (A the neutral atoms; for a cation, M+ + e- = atoms)

has  ln K_p0 = -(sum_A nu_A g_A - q g_e - g_M)  with g = G/RT of the same file.  The reference
states of the elements cancel: every g carries the same element enthalpies, once per atom.
In cgs, with Delta n = sum nu_A - q - 1 particles gained,

    K_p = p_A^nu ... p_e^-q / p_M = K_p0 (1 bar)^Delta n   [dyn cm^-2]^Delta n
    K_n = n_A^nu ... n_e^-q / n_M = K_p / (kT)^Delta n      [cm^-3]^Delta n,

so that ln n_M = sum_A nu_A ln n_A - q ln n_e - ln K_n, the form the molecular equilibrium
uses for every species.  The atoms' G/RT contain their own partition functions (NASA's level
sums); docs/molecules.md and tests/test_thermo.py show that they agree with ours, and the
electron record with the Saha equation of our ionization energies.

Outside a species' data range its constant is +inf (the species is absent there); the
molecular equilibrium reports which species that leaves out at which states.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from sahaboltz.constants import K_B
from sahaboltz.data.thermo import ThermoDatabase, ThermoSpecies, default_thermo_database
from sahaboltz.quantities import as_positive_array

#: the standard pressure of the polynomials, 1 bar [dyn cm^-2]
P_STANDARD = 1.0e6
_LN_P0 = np.log(P_STANDARD)
_BLOCK = 256                 # temperatures per block of GibbsTable.g_over_rt


def _basis(t: np.ndarray) -> np.ndarray:
    """The functions b_j(T) of G/RT = sum a_j b_j, shape t.shape + (9,)."""
    lt = np.log(t)
    return np.stack([-0.5 / t ** 2, (lt + 1.0) / t, 1.0 - lt, -t / 2, -t ** 2 / 6,
                     -t ** 3 / 12, -t ** 4 / 20, 1.0 / t, -np.ones_like(t)], axis=-1)


def _basis_derivatives(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """d b_j / d ln T and d2 b_j / d ln T^2 of :func:`_basis`, each t.shape + (9,)."""
    lt = np.log(t)
    z = np.zeros_like(t)
    d1 = np.stack([t ** -2, -lt / t, -np.ones_like(t), -t / 2, -t ** 2 / 3, -t ** 3 / 4,
                   -t ** 4 / 5, -1.0 / t, z], axis=-1)
    d2 = np.stack([-2.0 * t ** -2, (lt - 1.0) / t, z, -t / 2, -2.0 * t ** 2 / 3,
                   -3.0 * t ** 3 / 4, -4.0 * t ** 4 / 5, 1.0 / t, z], axis=-1)
    return d1, d2


class GibbsTable:
    """G/RT of a fixed list of species, vectorised over temperatures.

    ``g_over_rt(t)`` returns (n_species,) + t.shape, NaN outside each species' data range.
    """

    def __init__(self, species: Sequence[ThermoSpecies]):
        self.species = list(species)
        n = len(self.species)
        nr = max((len(s.t_low) for s in self.species), default=1)
        self._edges = np.full((n, nr - 1), np.inf)      # inner range boundaries
        self._coef = np.zeros((n, nr, 9))
        self.t_min = np.array([s.t_low[0] for s in self.species])
        self.t_max = np.array([s.t_high[-1] for s in self.species])
        for i, s in enumerate(self.species):
            k = len(s.t_low)
            self._edges[i, :k - 1] = s.t_low[1:]
            self._coef[i, :k] = s.coefficients

    def g_over_rt(self, temperature: Any) -> np.ndarray:
        return self._evaluate(temperature, lambda tb: (_basis(tb),))[0]

    def g_over_rt_derivatives(self, temperature: Any) -> tuple[np.ndarray, np.ndarray]:
        """d(G/RT)/d ln T and d2(G/RT)/d ln T^2 (the polynomial of the range that holds T),
        each (n_species,) + t.shape, NaN outside each species' data range."""
        return self._evaluate(temperature, _basis_derivatives)

    def _evaluate(self, temperature, bases) -> list[np.ndarray]:
        t = as_positive_array(temperature, "K", "temperature")
        flat = t.ravel()
        outs = None
        for a in range(0, flat.size, _BLOCK):       # blocks keep the (n, m, 9) gather small
            tb = flat[a:a + _BLOCK]
            # range index: how many inner boundaries lie at or below T
            idx = (tb[None, :, None] >= self._edges[:, None, :]).sum(axis=2)     # (n, m)
            coef = np.take_along_axis(self._coef, idx[:, :, None], axis=1)        # (n, m, 9)
            basis = bases(tb)
            if outs is None:
                outs = [np.empty((len(self.species), flat.size)) for _ in basis]
            for o, b in zip(outs, basis):
                o[:, a:a + _BLOCK] = np.einsum("nmj,mj->nm", coef, b)
        if outs is None:
            outs = [np.empty((len(self.species), 0)) for _ in bases(flat)]
        inside = (flat[None, :] >= self.t_min[:, None]) & (flat[None, :] <= self.t_max[:, None])
        return [np.where(inside, o, np.nan).reshape((len(self.species),) + t.shape)
                for o in outs]


class FormationConstants:
    """ln K_p, ln K_n of "species = neutral atoms + electrons" (see the module docstring).

    Parameters
    ----------
    species : sequence of ThermoSpecies or names
    database : ThermoDatabase, optional
        Where the atoms and the electron are taken from; default the shipped gas data.

    Every method returns (n_species,) + T.shape; +inf where T is outside a species' range
    (or that of one of its atoms), i.e. the species is absent there.
    """

    def __init__(self, species: Sequence[ThermoSpecies | str], database: ThermoDatabase | None = None):
        db = database or default_thermo_database()
        self.species = [s if isinstance(s, ThermoSpecies) else db.species(s) for s in species]
        zs = sorted({z for s in self.species for z in s.composition})
        self._atoms = [db.atom(z) for z in zs]
        self._table = GibbsTable(self.species + self._atoms + [db.electron()])
        pos = {z: i for i, z in enumerate(zs)}
        self._nu = np.zeros((len(self.species), len(zs)))
        for i, s in enumerate(self.species):
            for z, c in s.composition.items():
                self._nu[i, pos[z]] = c
        self._q = np.array([float(s.charge) for s in self.species])
        # gas particles gained; a condensed phase is not a gas particle (its activity is 1)
        self.delta_n = (self._nu.sum(axis=1) - self._q
                        - np.array([0.0 if s.is_condensed else 1.0 for s in self.species]))
        n = len(self.species)
        lo, hi = self._table.t_min, self._table.t_max
        # a species exists where it and all its atoms (and the electron, for ions) have data
        self.t_min = np.array([max([lo[i]] + [lo[n + pos[z]] for z in s.composition])
                               for i, s in enumerate(self.species)])
        self.t_max = np.array([min([hi[i]] + [hi[n + pos[z]] for z in s.composition]
                                   + ([hi[-1]] if s.charge else []))
                               for i, s in enumerate(self.species)])

    @property
    def names(self) -> list[str]:
        return [s.name for s in self.species]

    def __len__(self) -> int:
        return len(self.species)

    def in_range(self, temperature: Any) -> np.ndarray:
        """True where each species has data, (n_species,) + T.shape."""
        t = as_positive_array(temperature, "K", "temperature")
        sh = (-1,) + (1,) * t.ndim
        return (t >= self.t_min.reshape(sh)) & (t <= self.t_max.reshape(sh))

    def ln_kp0(self, temperature: Any) -> np.ndarray:
        """ln of the dimensionless constant (pressures in units of 1 bar)."""
        t = as_positive_array(temperature, "K", "temperature")
        n = len(self.species)
        g = self._table.g_over_rt(t).reshape(n + len(self._atoms) + 1, -1)
        g_mol, g_at, g_e = g[:n], g[n:-1], g[-1]
        with np.errstate(invalid="ignore"):
            d = self._nu @ np.nan_to_num(g_at) - np.multiply.outer(self._q, np.nan_to_num(g_e)) - g_mol
        out = np.where(self.in_range(t).reshape(n, -1), -d, np.inf)
        return out.reshape((n,) + t.shape)

    def ln_kp(self, temperature: Any) -> np.ndarray:
        """ln K_p, pressures in dyn cm^-2."""
        t = as_positive_array(temperature, "K", "temperature")
        sh = (-1,) + (1,) * t.ndim
        return self.ln_kp0(t) + self.delta_n.reshape(sh) * _LN_P0

    def ln_kn(self, temperature: Any) -> np.ndarray:
        """ln K_n, densities in cm^-3."""
        t = as_positive_array(temperature, "K", "temperature")
        sh = (-1,) + (1,) * t.ndim
        return self.ln_kp(t) - self.delta_n.reshape(sh) * np.log(K_B * t)

    def ln_kn_derivatives(self, temperature: Any) -> tuple[np.ndarray, np.ndarray]:
        """d ln K_n / d ln T and d2 ln K_n / d ln T^2 (0 where the species is absent)."""
        t = as_positive_array(temperature, "K", "temperature")
        n = len(self.species)
        sh = (-1,) + (1,) * t.ndim
        inside = self.in_range(t).reshape(n, -1)
        out = []
        for order, g in enumerate(self._table.g_over_rt_derivatives(t)):
            g = np.nan_to_num(g.reshape(g.shape[0], -1))
            d = -(self._nu @ g[n:-1] - np.multiply.outer(self._q, g[-1]) - g[:n])
            if order == 0:
                d = d - self.delta_n[:, None]
            out.append(np.where(inside, d, 0.0).reshape((n,) + t.shape))
        return out[0], out[1]


class CondensateConstants:
    """Saturation constants of condensed compounds, each the most stable of its phases.

    For a compound C (solid or liquid, activity 1) made of nu_A atoms of each element,
    ``ln_kn`` is ln K_n = ln prod n_A^nu at saturation [cm^-3 per atom], from
    "C(condensed) = sum nu_A A(gas)" (:class:`FormationConstants` with Delta n = sum nu_A).  Of
    the phases of one compound (Fe(a), Fe(c), Fe(d), Fe(L)) whose data hold at T, the one with
    the smallest constant is the stable one; the gas is saturated with respect to C where
    sum nu_A ln n_A = ln K_n.  +inf where no phase of C has data at T.

    Parameters
    ----------
    compounds : sequence of sequences of ThermoSpecies
        The phases of each compound (same composition).
    """

    def __init__(self, compounds: Sequence[Sequence[ThermoSpecies]]):
        self.compounds = [list(c) for c in compounds]
        self.phases = [p for c in self.compounds for p in c]
        self._owner = np.array([i for i, c in enumerate(self.compounds) for _ in c], dtype=int)
        self._fc = FormationConstants(self.phases) if self.phases else None

    def __len__(self) -> int:
        return len(self.compounds)

    def _all(self, t: np.ndarray) -> np.ndarray:
        return self._fc.ln_kn(t).reshape(len(self.phases), -1)

    def ln_kn(self, temperature: Any) -> np.ndarray:
        """(n_compounds,) + T.shape: ln K_n of the stable phase (+inf: no data)."""
        t = as_positive_array(temperature, "K", "temperature")
        out = np.full((len(self.compounds), t.size), np.inf)
        if self.phases:
            np.minimum.at(out, self._owner, self._all(t))
        return out.reshape((len(self.compounds),) + t.shape)

    def ln_kn_derivatives(self, temperature: Any) -> tuple[np.ndarray, np.ndarray]:
        """d ln K_n / d ln T and d2 ln K_n / d ln T^2 of the stable phase, (n_compounds,) +
        T.shape each (0 where no phase has data).  kT d ln K_n / d ln T is the energy that
        turns one formula unit of the condensate into gas atoms (van 't Hoff, K in densities)."""
        t = as_positive_array(temperature, "K", "temperature")
        n = len(self.compounds)
        d1 = np.zeros((n, t.size))
        d2 = np.zeros((n, t.size))
        if self.phases:
            best = self.stable_phase(t).reshape(n, -1)
            a1, a2 = (v.reshape(len(self.phases), -1) for v in self._fc.ln_kn_derivatives(t))
            col = np.arange(t.size)
            has = best >= 0
            for i in range(n):
                d1[i, has[i]] = a1[best[i, has[i]], col[has[i]]]
                d2[i, has[i]] = a2[best[i, has[i]], col[has[i]]]
        return d1.reshape((n,) + t.shape), d2.reshape((n,) + t.shape)

    def stable_phase(self, temperature: Any) -> np.ndarray:
        """(n_compounds,) + T.shape: index into ``phases`` of each compound's stable phase
        (-1 where none has data)."""
        t = as_positive_array(temperature, "K", "temperature")
        out = np.full((len(self.compounds), t.size), -1, dtype=int)
        if self.phases:
            k = self._all(t)
            for i, c in enumerate(self.compounds):
                rows = np.flatnonzero(self._owner == i)
                sub = k[rows]
                best = np.argmin(sub, axis=0)
                out[i] = np.where(np.isfinite(sub.min(axis=0)), rows[best], -1)
        return out.reshape((len(self.compounds),) + t.shape)
