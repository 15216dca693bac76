"""The result of an equilibrium solve: n_e, bulk quantities and every species population.

Populations are formed on request, element by element, from the solved n_e (they are cheap
Saha chains); a 200 x 200 grid of a solar mixture would need ~1 GB to hold all of them.

Units: densities cm^-3, pressures dyn cm^-2, mass density g cm^-3, lengths cm, T in K.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from sahaboltz.constants import AMU, K_B
from sahaboltz.equilibrium import compiled_newton
from sahaboltz.equilibrium.network import AtomicNetwork, Chain
from sahaboltz.equilibrium.thermo_quantities import QUANTITIES as _THERMO_QUANTITIES
from sahaboltz.equilibrium.thermodynamics import Thermodynamics, thermodynamics
from sahaboltz.errors import InputError, NoDataError
from sahaboltz.kernels import compiled as _compiled
from sahaboltz.kernels import truncation as _truncation
from sahaboltz.kernels.plasma import (_coupling, _debye_length, _degeneracy, _lowering_ev,
                                      _mcwhirter)
from sahaboltz.kernels.saha import _chain_fractions_inplace
from sahaboltz.quantities import as_positive_array

# e^-750 is below the smallest positive double (4.9e-324 = e^-744.4): a stage whose fraction
# is bounded by it is exactly 0 in double precision
_LN_UNDERFLOW = -750.0


#: names of :meth:`EquilibriumState.quantity` and their units
QUANTITY_UNITS = {"temperature": "K", "n_e": "cm-3", "nuclei_density": "cm-3",
                  "particle_density": "cm-3", "hydrogen_density": "cm-3",
                  "electron_pressure": "dyn cm-2", "gas_pressure": "dyn cm-2",
                  "mass_density": "g cm-3", "mean_molecular_weight": "u",
                  "mean_charge": "", "debye_length": "cm", "coupling_parameter": "",
                  "degeneracy_parameter": "", "number_density": "cm-3", "fraction": "",
                  "partition_function": "", "lowering_ev": "eV"}
#: the names that take a species
SPECIES_QUANTITIES = ("number_density", "fraction", "partition_function", "lowering_ev")

#: the outcome of a solve at one state (``EquilibriumState.status``), by code
STATUS_NAMES = ("converged", "unreachable", "strongly_coupled", "not_converged")
CONVERGED, UNREACHABLE, STRONGLY_COUPLED, NOT_CONVERGED = range(len(STATUS_NAMES))


@dataclass
class SolveReport:
    """Bookkeeping of one solve, for diagnostics and benchmarks."""

    passes: np.ndarray          # evaluations of the charge balance per state
    residual: np.ndarray        # final relative charge-neutrality residual per state

    @property
    def mean_passes(self) -> float:
        return float(self.passes.mean())


class EquilibriumState:
    """Solved LTE ionization balance on an array of states (any shape).

    Attributes
    ----------
    temperature : ndarray
        T [K].
    n_e : ndarray
        Electron density [cm^-3].
    nuclei_density : ndarray
        Density of nuclei of all elements, N [cm^-3] (atoms + ions of every stage).
    closure : str
        The pressure-like quantity given ("gas_pressure", "mass_density", ...).
    lowering : bool
        Whether Debye-Hueckel lowering was applied.
    report : SolveReport
        Passes per state and final residuals.
    status : ndarray of int8
        Per state: 0 converged, 1 unreachable (an electron pressure the gas cannot supply
        at that temperature), 2 strongly coupled (refused: the Debye-Hueckel lowering reaches
        an ionization energy), 3 not converged (names in :data:`STATUS_NAMES`).  Every
        quantity of a state that did not converge is NaN, and only there.
    reason : ndarray of str
        Why, per state ("" where converged).
    """

    def __init__(self, *, network: AtomicNetwork, temperature, log_ne, nuclei_density, closure,
                 closure_value, lowering, debye_length, report, status=None, reason=None):
        self.network = network
        shape = np.shape(temperature)
        self.status = (np.zeros(shape, dtype=np.int8) if status is None
                       else np.asarray(status, dtype=np.int8).reshape(shape))
        self.reason = (np.full(shape, "", dtype=object) if reason is None
                       else np.asarray(reason, dtype=object).reshape(shape))
        self.temperature = temperature
        self.log_ne = log_ne
        self.n_e = np.exp(log_ne)
        self.nuclei_density = nuclei_density
        self.closure = closure
        self.closure_value = closure_value
        self.lowering = lowering
        self._debye = debye_length
        self.report = report
        self._cache: dict = {}     # per chain (chain.k) its fractions; derived per-state data
        #: (distinct temperatures, C_q of every chain there) of the solve, as the solver
        #: formed them (low-density-limit U), or None: read (and dropped) by the
        #: thermodynamics
        self.saha_tables = None

    # -- bulk quantities ---------------------------------------------------------------------
    @property
    def shape(self) -> tuple:
        return self.temperature.shape

    @property
    def converged(self) -> np.ndarray:
        """True where the state was solved (``status == 0``)."""
        return self.status == CONVERGED

    def failures(self) -> dict[tuple, str]:
        """Every state that was not solved: index -> "status: reason"."""
        out = {}
        for i in np.flatnonzero(self.status.ravel() != CONVERGED):
            idx = tuple(int(j) for j in np.unravel_index(i, self.shape))
            out[idx] = f"{STATUS_NAMES[self.status.ravel()[i]]}: {self.reason.ravel()[i]}"
        return out

    @property
    def composition(self):
        return self.network.composition

    @property
    def species_names(self) -> list[str]:
        """Every species of the mixture, element by element in charge order ("H-" first)."""
        return list(self.network.species_names)

    @property
    def unit_partition(self) -> list[str]:
        """Species without a level list, taken with U = 1."""
        return list(self.network.unit_partition)

    @property
    def electron_pressure(self) -> np.ndarray:
        """P_e = n_e k T [dyn cm^-2]."""
        return self.n_e * K_B * self.temperature

    @property
    def particle_density(self) -> np.ndarray:
        """All free particles: nuclei (each atom or ion counts once) plus electrons [cm^-3]."""
        return self.nuclei_density + self.n_e

    @property
    def gas_pressure(self) -> np.ndarray:
        """P_gas = (N + n_e) k T [dyn cm^-2] (ideal gas)."""
        return self.particle_density * K_B * self.temperature

    @property
    def mass_density(self) -> np.ndarray:
        """rho [g cm^-3] (neutral-atom masses; the free electrons carry the difference)."""
        return self.nuclei_density * self.composition.mean_mass_amu * AMU

    @property
    def mean_molecular_weight(self) -> np.ndarray:
        """mu = rho / (m_u (N + n_e)): mean mass per free particle [u]."""
        return self.mass_density / (AMU * self.particle_density)

    @property
    def mean_charge(self) -> np.ndarray:
        """Mean charge per nucleus, n_e / N (H- counted negative)."""
        return self.n_e / self.nuclei_density

    @property
    def hydrogen_density(self) -> np.ndarray:
        """Hydrogen nuclei n_H [cm^-3] (atoms, ions, H-, and in molecules)."""
        return self.element_density("H")

    def element_density(self, element) -> np.ndarray:
        """Nuclei of one element [cm^-3]."""
        return self.nuclei_density * self.network.chain_of(element).fraction

    # -- thermodynamics ------------------------------------------------------------------
    #: whether the thermodynamic properties include black-body radiation at T (the solve
    #: front sets it from ``radiation=``; :meth:`thermodynamics` can override it)
    radiation = False

    def thermodynamics(self, radiation: bool | None = None) -> Thermodynamics:
        """Energy, entropy and response functions of every state
        (:mod:`sahaboltz.equilibrium.thermodynamics`), computed once and kept.

        ``radiation``: include a T^4 radiation field (default: the state's own
        :attr:`radiation`, off unless the solve asked for it).
        """
        rad = self.radiation if radiation is None else bool(radiation)
        cache = self.__dict__.setdefault("_thermo_cache", {})
        if rad not in cache:
            cache[rad] = thermodynamics(self, radiation=rad)
            self.saha_tables = None
        return cache[rad]

    # -- populations -----------------------------------------------------------------------
    def _chain_fractions(self, chain: Chain, keep: bool = True) -> np.ndarray:
        if not keep and chain.k not in self._cache:
            got = self._chain_fractions(chain)
            del self._cache[chain.k]
            return got
        if chain.k not in self._cache:
            ok = self.converged.ravel()
            every = bool(ok.all())
            t = self.temperature.ravel() if every else self.temperature.ravel()[ok]
            x = self.log_ne.ravel() if every else self.log_ne.ravel()[ok]
            if t.size == 0:
                got = np.empty((chain.n, 0))
            elif self.network.ideal and not self.lowering:
                got = _chain_fractions_inplace(self._ideal_log_populations(chain, t, x))
            elif self.network.scheme.density_dependent and self._debye is None:
                got = self._weighted_chain_fractions(chain, t, x)
            else:
                lam = None if self._debye is None else self._debye.ravel()[ok]
                tab = self.network.log_c(chain, t, np.exp(x), lam)
                tab -= np.multiply.outer(chain.charges, x)     # tab is this call's own array
                got = _chain_fractions_inplace(tab)
            if not every:  # NaN at the states not solved
                out = np.full((chain.n, ok.size), np.nan)
                out[:, ok] = got
                got = out
            self._cache[chain.k] = got.reshape((chain.n,) + self.shape)
        return self._cache[chain.k]

    def _ideal_log_populations(self, chain: Chain, t: np.ndarray, x: np.ndarray
                               ) -> np.ndarray:
        """ln n_q up to a constant of each state with T-only U: C_q once per distinct
        temperature, then - q ln n_e per state (a new array the caller may overwrite)."""
        ut, inv = np.unique(t, return_inverse=True)
        tab = self.network.log_c(chain, ut)[:, inv]
        tab -= np.multiply.outer(chain.charges, x)
        return tab

    def saha_table(self, chain: Chain, ut: np.ndarray) -> np.ndarray:
        """C_q of a chain at the temperatures ``ut`` with the low-density-limit U: the columns
        of the solver's own tables where the state kept them, else computed."""
        kept = self.saha_tables
        if kept is not None:
            t_kept, tables = kept
            pos = np.searchsorted(t_kept, ut)
            if pos.size and pos[-1] < t_kept.size and np.array_equal(t_kept[pos], ut):
                return tables[chain.k][:, pos]
        return self.network.log_c(chain, ut)

    def _distinct_temperatures(self) -> tuple[np.ndarray, np.ndarray]:
        """(distinct temperatures, each flat state's index among them), formed once (kept
        with the chains' fractions, which a splice or reshape clears)."""
        if "distinct_t" not in self._cache:
            self._cache["distinct_t"] = np.unique(self.temperature.ravel(),
                                                  return_inverse=True)
        return self._cache["distinct_t"]

    def _large_fractions(self, chain: Chain, share: float
                         ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(stage rows, flat state indices, fractions) of the chain's stages holding at least
        ``share`` of the element at the solved states, without forming the others: with
        T-only U the normalization is summed over the stages within e^-40 of each state's
        largest (the rest cannot change it in double precision); otherwise from the full
        fractions.  For checks that look at the major stages of large grids."""
        ok = self.converged.ravel()
        if not (self.network.ideal and not self.lowering):
            f = self._chain_fractions(chain, keep=False).reshape(chain.n, -1)
            r, c = np.nonzero((f >= share) & ok[None, :])
            return r, c, f[r, c]
        t, x = self.temperature.ravel(), self.log_ne.ravel()
        cut = 40.0
        if _compiled.available():   # one pass per state, not a dozen over (stages x states)
            ut, inv = self._distinct_temperatures()
            tab = self.saha_table(chain, ut)
            window = compiled_newton.interval_windows(chain.charges, tab, inv, x, cut)
            return _compiled.large_chain_fractions(tab, inv, x, chain.charges, ok, share, cut,
                                                   window)
        tab = self._ideal_log_populations(chain, t, x)
        tab -= tab.max(axis=0)
        r, c = np.nonzero(tab >= -cut)
        e = np.exp(tab[r, c])
        total = np.bincount(c, weights=e, minlength=t.size)
        f = e / total[c]
        big = (f >= share) & ok[c]
        return r[big], c[big], f[big]

    def _weighted_chain_fractions(self, chain: Chain, t: np.ndarray, x: np.ndarray
                                  ) -> np.ndarray:
        """A chain's stage fractions at the flat states (t, ln n_e = x) with density-dependent
        U, evaluating the exact U only where a stage's fraction can be a nonzero double.

        ln n_q = ln U_q + a_q(T) - q ln n_e up to a constant of each state (the Saha chain).
        The low-density limit of every U (one value per temperature) bounds it from above,
        so it bounds every ln n_q from above; a stage whose bound lies more than 750 below
        the log of the sum over the exactly evaluated stages has a fraction below e^-750,
        which is 0 in double precision (as it is in the full evaluation).  Most high stages
        of heavy elements are such: a solar table's stage fractions need their exact U at
        about a quarter of the (stage, state) pairs.
        """
        net = self.network
        ut, tinv = np.unique(t, return_inverse=True)
        limit = net.log_u(chain, ut)                     # (stages, distinct T)
        bound = self._log_populations(chain, ut, limit)[:, tinv]
        bound -= np.multiply.outer(chain.charges, x)
        top_bound = bound.max(axis=0)
        new = bound >= top_bound + _LN_UNDERFLOW
        # only the rows that some state needs take part below (at a block's temperatures
        # most high stages of heavy elements are out of reach at every state)
        rows = np.flatnonzero(new.any(axis=1))
        r0, r1 = int(rows[0]), int(rows[-1]) + 1
        n_e = np.exp(x)
        ln_n = bound[r0:r1].copy()
        keep = np.zeros(ln_n.shape, dtype=bool)
        new = new[r0:r1]
        while True:
            r, c = np.nonzero(new)
            # the exact ln U replaces its bound in the stage's own row only
            ln_n[r, c] += (net.log_u_pairs(chain, t, n_e, r + r0, c, tinv)
                           - limit[r + r0, tinv[c]])
            keep |= new
            tab = np.where(keep, ln_n, -np.inf)
            top = tab.max(axis=0)
            tab -= top
            np.exp(tab, out=tab)
            total = tab.sum(axis=0)
            log_sum = top + np.log(total)
            # a stage left out has its bound below top_bound - 750, so below log_sum - 750,
            # unless the exact U of the kept ones fell far below their bounds (pressure
            # ionization): only those states are looked at again, over the whole chain
            low = np.flatnonzero(log_sum < top_bound)
            if not low.size:
                break
            reach = bound[:, low] >= log_sum[low] + _LN_UNDERFLOW
            rows = np.flatnonzero(reach.any(axis=1))
            n0, n1 = min(r0, int(rows[0])), max(r1, int(rows[-1]) + 1)
            if (n0, n1) != (r0, r1):   # widen the rows taken part
                wide = bound[n0:n1].copy()
                wide[r0 - n0:r1 - n0] = ln_n
                wider = np.zeros(wide.shape, dtype=bool)
                wider[r0 - n0:r1 - n0] = keep
                ln_n, keep, r0, r1 = wide, wider, n0, n1
            new = np.zeros(keep.shape, dtype=bool)
            new[:, low] = reach[r0:r1] & ~keep[:, low]
            if not new.any():
                break
        tab /= total
        if (r0, r1) == (0, chain.n):
            return tab
        out = np.zeros((chain.n, t.size))
        out[r0:r1] = tab
        return out

    def _log_populations(self, chain: Chain, t: np.ndarray, ln_u: np.ndarray) -> np.ndarray:
        """ln n_q + q ln n_e up to a constant of each state, ln U_q + a_q(T), from the chain's
        ln U (shape (chain.n, t.size)): C_q plus ln U of the first stage."""
        out = self.network.log_c_of(chain, t, ln_u)
        out += ln_u[0]
        return out

    def stage_fractions(self, element, negative: bool = False, keep: bool = True
                        ) -> np.ndarray:
        """Fractions n_q / N_element of the stages q = 0 .. Z of one element.

        Parameters
        ----------
        element : str or int
        negative : bool
            Prepend the negative ion (H- for hydrogen) when the mixture has one.
        keep : bool
            Keep the result in the state for later calls (default).  False for a caller that
            stores it elsewhere (a table build: the fractions of all elements of a large
            block would otherwise be held twice).

        Returns
        -------
        ndarray, shape (n_stages,) + state shape
        """
        chain = self.network.chain_of(element)
        f = self._chain_fractions(chain, keep)
        return f if negative else f[chain.charges >= 0]

    def stage_charges(self, element, negative: bool = False) -> np.ndarray:
        """Charges of the rows of :meth:`stage_fractions`."""
        chain = self.network.chain_of(element)
        q = chain.charges.astype(int)
        return q if negative else q[q >= 0]

    def fraction(self, species) -> np.ndarray:
        """n_species / N_element for one species ("Fe II", "Fe+", (26, 1), "H-")."""
        i = self.network.species_index(species)
        chain = self.network.chains[self.network.element_index[i]]
        return self._chain_fractions(chain)[i - chain.offset]

    def number_density(self, species) -> np.ndarray:
        """Number density of one species [cm^-3]."""
        i = self.network.species_index(species)
        chain = self.network.chains[self.network.element_index[i]]
        return self._chain_fractions(chain)[i - chain.offset] * self.nuclei_density * chain.fraction

    def number_densities(self) -> np.ndarray:
        """All species, shape (n_species,) + state shape, in :attr:`species_names` order."""
        return np.concatenate([self._chain_fractions(c) * (self.nuclei_density * c.fraction)
                               for c in self.network.chains])

    def partition_function(self, species) -> np.ndarray:
        """The partition function U of ``species`` that the solve used at every state (the
        same in the Saha chain and the level populations); NaN where not solved."""
        i = self.network.species_index(species)
        chain = self.network.chains[self.network.element_index[i]]
        ok = self.converged.ravel()
        out = np.full(ok.size, np.nan)
        if ok.any():
            lam = None if self._debye is None else self._debye.ravel()[ok]
            ln_u = self.network.log_u(chain, self.temperature.ravel()[ok],
                                      self.n_e.ravel()[ok], lam)
            out[ok] = np.exp(ln_u[i - chain.offset])
        return out.reshape(self.shape)

    def lowering_ev(self, species) -> np.ndarray:
        """The Debye-Hueckel lowering of the ionization energy of ``species`` in the solve
        [eV] (0 without ``lowering``; H-, which is not lowered, 0 too)."""
        i = self.network.species_index(species)
        if not self.lowering:
            return np.zeros(self.shape)
        return _lowering_ev(self.network.charges[i], self.debye_length)

    def dominant_stage(self, element, negative: bool = True) -> np.ndarray:
        """Charge of the most populated stage of an element at every state (int array)."""
        chain = self.network.chain_of(element)
        f = self._chain_fractions(chain)
        q = chain.charges.astype(int)
        if not negative:
            f, q = f[q >= 0], q[q >= 0]
        return q[np.argmax(f, axis=0)]

    def level_populations(self, species) -> tuple[np.ndarray, np.ndarray]:
        """Boltzmann populations of the levels of one species.

        Returns
        -------
        populations : ndarray, shape (n_levels,) + state shape
            n_i = n_species g_i w_i exp(-E_i/kT) / U [cm^-3] over the levels counted in U.
        energy_ev : ndarray
            Their excitation energies [eV].
        """
        i = self.network.species_index(species)
        chain = self.network.chains[self.network.element_index[i]]
        row = chain.model_rows[i - chain.offset]
        if row < 0:
            raise NoDataError(f"{self.network.species_names[i]} has no level list "
                              "(taken with U = 1), so no level populations")
        sp = chain.model.species[row]
        kw = {}
        scheme = self.network.scheme
        if "lowering_ev" in scheme.inputs:
            # the model wants a lowering for each of its species: (n_species,) + state shape
            q = np.array([s.charge for s in chain.model.species], dtype=float)
            kw["lowering_ev"] = _lowering_ev(q.reshape((-1,) + (1,) * len(self.shape)),
                                             self.debye_length[None, ...])
        elif scheme.density_dependent:
            kw["n_e"] = self.n_e
        terms, energy, _ = chain.model.level_terms(sp, self.temperature, **kw)
        return terms / terms.sum(axis=0) * self.number_density(species), energy

    # -- checks ------------------------------------------------------------------------------
    def _charge_sums(self) -> tuple[np.ndarray, np.ndarray]:
        """(sum q n_q, sum |q| n_q) over the charged heavy particles, per state."""
        pos = np.zeros(self.shape)
        tot = np.zeros(self.shape)
        for c in self.network.chains:
            nk = self._chain_fractions(c) * (self.nuclei_density * c.fraction)
            pos += np.tensordot(c.charges, nk, axes=1)
            tot += np.tensordot(np.abs(c.charges), nk, axes=1)
        return pos, tot

    def charge_residual(self) -> np.ndarray:
        """|sum q n_q - n_e| / (sum |q| n_q + n_e) at every state."""
        pos, tot = self._charge_sums()
        return np.abs(pos - self.n_e) / (tot + self.n_e)

    def conservation_residual(self) -> np.ndarray:
        """Largest |sum_q n_kq - N alpha_k| / (N alpha_k) over the elements, per state."""
        worst = np.zeros(self.shape)
        for c in self.network.chains:
            nk = self._chain_fractions(c) * (self.nuclei_density * c.fraction)
            want = self.nuclei_density * c.fraction
            worst = np.maximum(worst, np.abs(nk.sum(axis=0) - want) / want)
        return worst

    # -- plasma parameters -----------------------------------------------------------------
    def sum_z2_n(self) -> np.ndarray:
        """sum over ions of z^2 n_z [cm^-3] (H- included)."""
        out = np.zeros(self.shape)
        for c in self.network.chains:
            out += np.tensordot(c.charges**2, self._chain_fractions(c), axes=1) * (
                self.nuclei_density * c.fraction)
        return out

    @property
    def debye_length(self) -> np.ndarray:
        """lambda_D = sqrt(kT / (4 pi e^2 (n_e + sum z^2 n_z))) [cm]."""
        if self._debye is not None:
            return self._debye
        return _debye_length(self.temperature, self.n_e + self.sum_z2_n())

    @property
    def coupling_parameter(self) -> np.ndarray:
        """Electron coupling Gamma_e = e^2 / (a_e k T), a_e = (3 / (4 pi n_e))^(1/3)."""
        return _coupling(self.temperature, self.n_e)

    @property
    def degeneracy_parameter(self) -> np.ndarray:
        """Electron degeneracy n_e lambda_e^3 (<< 1: a classical electron gas, as assumed)."""
        return _degeneracy(self.temperature, self.n_e)

    @property
    def debye_number(self) -> np.ndarray:
        """Electrons in a Debye sphere, (4 pi / 3) n_e lambda_D^3 (>> 1 for an ideal plasma)."""
        return 4.0 * np.pi / 3.0 * self.n_e * self.debye_length**3

    def mcwhirter_density(self, delta_e_ev: Any = None) -> np.ndarray:
        """McWhirter's lower bound on n_e for LTE, 1.6e12 T^1/2 dE^3 [cm^-3].

        Parameters
        ----------
        delta_e_ev : float or array_like, optional
            The largest energy gap between adjacent levels [eV].  Default: the largest
            adjacent-level gap among the species at least 1 % as abundant as the most abundant
            species with levels (usually the resonance gap of the dominant stage).
        """
        if delta_e_ev is None:
            delta_e_ev = self.largest_gap_ev()
        else:
            delta_e_ev = as_positive_array(delta_e_ev, "eV", "delta_e_ev")
        return _mcwhirter(self.temperature, delta_e_ev)

    def lte_valid(self, delta_e_ev: Any = None) -> np.ndarray:
        """McWhirter criterion n_e >= 1.6e12 T^1/2 dE^3 (necessary, not sufficient)."""
        return self.n_e >= self.mcwhirter_density(delta_e_ev)

    def largest_gap_ev(self, threshold: float = 0.01) -> np.ndarray:
        """Largest adjacent-level gap [eV] among the abundant species (see mcwhirter_density).

        A species counts when its density is at least ``threshold`` times that of the most
        abundant species that has a level list (bare nuclei and H- have none).
        """
        weights, gaps = [], []
        for c in self.network.chains:
            f = self._chain_fractions(c)
            for j, sp in enumerate(c.species):
                if sp is None or sp.is_bare_nucleus or c.model_rows[j] < 0:
                    continue
                if sp.largest_gap_ev is None:
                    continue
                weights.append(f[j] * c.fraction)
                gaps.append(sp.largest_gap_ev)
        if not gaps:
            raise NoDataError("no species with two or more levels: pass delta_e_ev")
        w = np.array(weights)
        g = np.array(gaps).reshape((-1,) + (1,) * len(self.shape))
        use = w >= threshold * w.max(axis=0)
        return np.where(use, g, 0.0).max(axis=0)

    # -- presentation ------------------------------------------------------------------------
    def summary(self, index=None) -> dict:
        """Bulk quantities of one state (``index`` into the state shape; scalar states: None)."""
        idx = () if index is None else index
        if self.shape and index is None:
            raise InputError("summary: give the index of one state of the array")
        return {"temperature_K": float(self.temperature[idx]),
                "n_e_cm-3": float(self.n_e[idx]),
                "electron_pressure_dyn_cm-2": float(self.electron_pressure[idx]),
                "gas_pressure_dyn_cm-2": float(self.gas_pressure[idx]),
                "mass_density_g_cm-3": float(self.mass_density[idx]),
                "nuclei_density_cm-3": float(self.nuclei_density[idx]),
                "mean_molecular_weight": float(self.mean_molecular_weight[idx]),
                "mean_charge": float(self.mean_charge[idx]),
                "truncation": _truncation.used(self.network.scheme, self.lowering),
                "coupling_parameter": float(self.coupling_parameter[idx]),
                "degeneracy_parameter": float(self.degeneracy_parameter[idx])}

    def to_xarray(self, dims=None):
        """The state as an :class:`xarray.Dataset`: bulk fields, and ``fraction`` and
        ``number_density`` with a ``species`` coordinate (see
        :func:`sahaboltz.equilibrium.export.state_to_xarray`)."""
        from sahaboltz.equilibrium.export import state_to_xarray
        return state_to_xarray(self, dims)

    # -- units and notebooks -------------------------------------------------------------------
    def quantity(self, name: str, species: str | None = None):
        """An astropy Quantity of a result, e.g. ``state.quantity("n_e")`` (cm^-3),
        ``state.quantity("gas_pressure")`` (dyn cm^-2; ``.to("Pa")`` converts) or
        ``state.quantity("number_density", "Fe II")``; names in :data:`QUANTITY_UNITS`."""
        import astropy.units as u

        if name not in QUANTITY_UNITS:
            raise InputError(f"quantity: unknown name {name!r}; choose from "
                             f"{', '.join(QUANTITY_UNITS)}")
        if name in SPECIES_QUANTITIES:
            if species is None:
                raise InputError(f"quantity({name!r}) needs a species, e.g. "
                                 f"quantity({name!r}, 'Fe II')")
            value = getattr(self, name)(species)
        else:
            if species is not None:
                raise InputError(f"quantity({name!r}) takes no species")
            value = getattr(self, name)
        return np.asarray(value, dtype=float) * u.Unit(QUANTITY_UNITS[name])

    def _repr_html_(self) -> str:
        from sahaboltz._html import html_table, span

        rows = [("composition", self.composition.name),
                ("states", "one" if not self.shape else f"{self.shape} = {self.temperature.size}"),
                ("temperature", span(self.temperature, "K")),
                (self.closure, span(self.closure_value, QUANTITY_UNITS.get(self.closure, ""))),
                ("n_e", span(self.n_e, "cm-3")),
                ("electron pressure", span(self.electron_pressure, "dyn cm-2")),
                ("mass density", span(self.mass_density, "g cm-3")),
                ("truncation", _truncation.used(self.network.scheme, self.lowering)),
                ("converged", f"{int(self.converged.sum())} of {self.converged.size}")]
        if not self.shape:
            symbols = list(self.composition.symbols)
            common = [e for e in ("H", "He", "C", "N", "O", "Na", "Mg", "Si", "Ca", "Fe")
                      if e in symbols]
            for el in (common if len(symbols) > 12 else symbols):
                chain = self.network.chain_of(el)
                q = int(self.dominant_stage(el))
                f = float(np.max(self.stage_fractions(el)))
                rows.append((f"dominant {el}", f"{chain.names[list(chain.charges).index(q)]} "
                                               f"({f:.3g})"))
        return html_table("EquilibriumState (LTE)", rows,
                          "state.quantity('n_e') gives astropy Quantities")

    def __repr__(self) -> str:
        return (f"EquilibriumState({self.composition.name!r}, shape={self.shape}, "
                f"closure={self.closure}, {self.network.n_species} species)")


def _thermo_property(name: str) -> property:
    unit, what = _THERMO_QUANTITIES[name]
    return property(lambda self: self.thermodynamics().get(name),
                    doc=f"{what}{f' [{unit}]' if unit else ''} (see :meth:`thermodynamics`).")


for _name in _THERMO_QUANTITIES:
    if _name not in ("mean_molecular_weight", "pressure"):
        setattr(EquilibriumState, _name, _thermo_property(_name))
EquilibriumState.total_pressure = _thermo_property("pressure")
del _name
