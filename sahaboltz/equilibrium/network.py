"""The species of an atomic mixture, arranged as one Saha chain per element.

For element k the chain runs over its charge states q = q_min .. Z (q_min = -1 for hydrogen
when H- is included, else 0).  With ln Phi_i the Saha factors of its steps, the populations
relative to the first stage are

    ln(n_q / n_first) = C_q - (q - q_min) ln n_e,       C_q = sum_{i < q} ln Phi_i,

so at fixed T (and fixed non-ideal corrections) a whole element depends on n_e through the one
linear term.  :class:`AtomicNetwork` computes the C tables; the solver combines them.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from sahaboltz.data.composition import Composition
from sahaboltz.data.database import default_database
from sahaboltz.data.elements import SYMBOLS, atomic_number, parse_species, spectroscopic_name
from sahaboltz.errors import InputError, NoDataError, UnknownSpeciesError
from sahaboltz.kernels import truncation as _truncation
from sahaboltz.kernels.partition import PartitionModel
from sahaboltz.kernels.plasma import _lowering_ev
from sahaboltz.kernels.saha import H_MINUS_AFFINITY_EV, _log_saha_steps

#: name of the negative hydrogen ion in results
H_MINUS = "H-"
#: what to do with stages that have no level list: "unit" -> U = 1 (recorded), "error"
MISSING_LEVEL_CHOICES = ("unit", "error")


@dataclass
class Chain:
    """One element's stages, in charge order."""

    k: int                       # position in the composition
    Z: int
    symbol: str
    fraction: float              # number fraction of all nuclei
    names: list
    charges: np.ndarray          # float, ascending
    chi_ev: np.ndarray           # ionization energy of each step's lower stage, len n-1
    model: PartitionModel | None  # partition functions of the stages with levels
    model_rows: np.ndarray       # for each stage its row in ``model``, -1 for U = 1
    species: list = field(default_factory=list)  # Species objects (None for H-)
    offset: int = 0              # position of the first stage in the flat species list
    model_offset: int = 0        # row of the chain's first modelled stage in network.model

    @property
    def n(self) -> int:
        return len(self.names)

    @property
    def q_min(self) -> float:
        return float(self.charges[0])


class AtomicNetwork:
    """Element chains of a composition, with their partition-function models.

    Parameters
    ----------
    composition : Composition
    database : SpeciesDatabase, optional
    truncation : str or TruncationScheme, optional
        Partition-function truncation (:mod:`sahaboltz.kernels.truncation`); default that of
        the solver (occupation probabilities).
    completion : bool
        Hydrogenic completion of the level lists (see the partition-function docs).
    h_minus : bool
        Include H- (electron affinity :data:`sahaboltz.kernels.saha.H_MINUS_AFFINITY_EV`,
        U(H-) = 1) when hydrogen is present.
    missing_levels : {"unit", "error"}
        Stages without a level list in the database: take U = 1 (listed in
        :attr:`unit_partition`) or raise NoDataError.
    """

    def __init__(self, composition: Composition, database=None, truncation=None,
                 completion: bool = False, h_minus: bool = True, missing_levels: str = "unit"):
        if not isinstance(composition, Composition):
            raise InputError("composition must be a sahaboltz.data.composition.Composition, "
                             f"e.g. solar() or Composition.from_number(...); got {composition!r}")
        self.scheme = (_truncation.resolve(None) if truncation is None
                       else _truncation.get(truncation))
        if missing_levels not in MISSING_LEVEL_CHOICES:
            raise InputError(f"missing_levels must be one of {MISSING_LEVEL_CHOICES}")
        self.composition = composition
        self.database = database or default_database()
        self.truncation = self.scheme.key
        self.completion = bool(completion)
        self.h_minus = bool(h_minus) and 1 in set(composition.Z.tolist())
        self.unit_partition: list[str] = []
        self.chains: list[Chain] = []
        offset = 0
        for k, (z, frac) in enumerate(zip(composition.Z.tolist(), composition.number_fraction)):
            chain = self._chain(k, z, float(frac), missing_levels)
            chain.offset = offset
            offset += chain.n
            self.chains.append(chain)
        # one partition-function model for every stage with levels; each chain sees its own
        # stages through a view (chain.model), and solvers can evaluate any (state, stage)
        # pairs of the whole mixture in one call (self.model, rows chain.model_offset + row)
        packed = [sp for c in self.chains if c.model for sp in c.model]
        self.model = (PartitionModel(packed, truncation=self.scheme, completion=self.completion)
                      if packed else None)
        first = 0
        for c in self.chains:
            if c.model:
                count = len(c.model)
                c.model_offset = first
                c.model = self.model.subset(first, first + count)
                first += count
        self.species_names = [n for c in self.chains for n in c.names]
        self.charges = np.concatenate([c.charges for c in self.chains])
        self.element_index = np.concatenate([np.full(c.n, c.k) for c in self.chains])
        self._by_name = {n: i for i, n in enumerate(self.species_names)}
        self.max_mean_charge = float(sum(c.fraction * c.charges[-1] for c in self.chains))

    def _chain(self, k: int, z: int, frac: float, missing: str) -> Chain:
        try:
            stages = self.database.element(z)
        except NoDataError:
            raise NoDataError(f"the composition contains {SYMBOLS[z]}, which has no data in "
                              f"{self.database.path}: drop it with composition.subset(...)") from None
        if len(stages) != z + 1 or [s.charge for s in stages] != list(range(z + 1)):
            raise NoDataError(f"{SYMBOLS[z]}: the database lacks some ionization stages "
                              f"(has charges {[s.charge for s in stages]}); all 0..{z} are needed")
        with_levels, rows = [], []
        for s in stages:
            if s.is_bare_nucleus or s.bound.any():
                rows.append(len(with_levels))
                with_levels.append(s)
            else:
                if missing == "error":
                    raise NoDataError(f"{s.name} has no level list; pass missing_levels='unit' "
                                      "to take U = 1 for it")
                rows.append(-1)
                self.unit_partition.append(s.name)
        model = with_levels or None   # the species; packed into one model for all chains below
        names = [s.name for s in stages]
        charges = [float(s.charge) for s in stages]
        chi = [s.ionization_energy_ev for s in stages[:-1]]
        species = list(stages)
        if z == 1 and self.h_minus:
            names.insert(0, H_MINUS)
            charges.insert(0, -1.0)
            chi.insert(0, H_MINUS_AFFINITY_EV)
            rows.insert(0, -1)  # U(H-) = 1: a single bound state
            species.insert(0, None)
        if not np.all(np.isfinite(chi)):
            raise NoDataError(f"{SYMBOLS[z]}: an ionization energy is missing in the database")
        return Chain(k, z, SYMBOLS[z], frac, names, np.array(charges), np.array(chi), model,
                     np.array(rows), species)

    # -- look-ups ---------------------------------------------------------------------------
    @property
    def n_species(self) -> int:
        return len(self.species_names)

    def species_index(self, name: str) -> int:
        """Flat position of a species given as "Fe II", "Fe+", (Z, charge) or "H-"."""
        if name in self._by_name:
            return self._by_name[name]
        if isinstance(name, tuple):
            z, q = int(name[0]), int(name[1])
        else:
            z, q = parse_species(name)
        key = spectroscopic_name(z, q)  # "H-" for the negative ion
        if key not in self._by_name:
            raise UnknownSpeciesError(f"{name!r} is not among the species of this mixture "
                                      f"({', '.join(self.composition.symbols)})")
        return self._by_name[key]

    def chain_of(self, element) -> Chain:
        z = atomic_number(element)
        for c in self.chains:
            if c.Z == z:
                return c
        raise UnknownSpeciesError(f"{SYMBOLS[z]} is not in the composition "
                                  f"({', '.join(self.composition.symbols)})")

    # -- physics ----------------------------------------------------------------------------
    @property
    def ideal(self) -> bool:
        """True when the chains depend on temperature only (no n_e-dependent corrections)."""
        return not self.scheme.density_dependent

    #: electron density [cm^-3] standing for the low-density limit of density-dependent
    #: partition functions (every occupation probability is 1 to double precision there)
    LIMIT_DENSITY = 1e-30

    def bare_log_c(self, chain: Chain, t: np.ndarray) -> np.ndarray:
        """C_q without the partition functions (all U = 1): the chain's T-only part, to which
        ln U_q of each stage is added."""
        steps = _log_saha_steps(t, chain.chi_ev, np.zeros((chain.n, t.shape[0])))
        out = np.zeros((chain.n, t.shape[0]))
        np.cumsum(steps, axis=0, out=out[1:])
        return out

    def negative_ion_log_u(self, chain: Chain, t: np.ndarray, n_e: np.ndarray | None
                           ) -> tuple[np.ndarray, np.ndarray] | None:
        """(ln U, d ln U / d ln n_e) of the chain's negative ion (U = 1 times the scheme's
        weight of its one bound state), or None (no negative ion, or no density weighting)."""
        if chain.charges[0] >= 0 or n_e is None:
            return None
        return self.scheme.bound_state_weight(float(chain.chi_ev[0]), t, n_e)

    def stage_log_u(self, chain: Chain, t: np.ndarray, n_e: np.ndarray, rows: slice
                    ) -> tuple[np.ndarray, np.ndarray]:
        """(ln U, d ln U / d ln n_e) of the stages ``rows`` of a chain at the flat states (t, n_e)
        (no Debye-Hueckel lowering); stages without levels (and H-) have U = 1."""
        idx = np.arange(chain.n)[rows]
        out = np.zeros((idx.size, t.shape[0]))
        der = np.zeros((idx.size, t.shape[0]))
        mrows = chain.model_rows[idx]
        has = mrows >= 0
        if has.any():
            r0, r1 = int(mrows[has].min()), int(mrows[has].max()) + 1
            u, _, dn = chain.model.subset(r0, r1).evaluate_derivatives(t, n_e)
            out[has] = np.log(u[mrows[has] - r0])
            der[has] = dn[mrows[has] - r0]
        return out, der

    def log_u(self, chain: Chain, t: np.ndarray, n_e: np.ndarray | None = None,
              debye_length: np.ndarray | None = None) -> np.ndarray:
        """ln U of every stage of a chain at the flat states (t, n_e), as the solver uses them:
        with the truncation scheme's n_e (default: its low-density limit) and, for schemes cut
        at the lowered limit, the Debye-Hueckel lowering of ``debye_length``.  Stages without
        levels and H- have U = 1.  Shape (chain.n, n)."""
        n = t.shape[0]
        ln_u = np.zeros((chain.n, n))
        neg = self.negative_ion_log_u(chain, t, n_e)
        if neg is not None:
            ln_u[0] = neg[0]
        if chain.model is None:
            return ln_u
        has = chain.model_rows >= 0
        if not has.any():
            return ln_u
        kw = {}
        if "lowering_ev" in self.scheme.inputs:
            low = (np.zeros((chain.model.n_species, n)) if debye_length is None else
                   _lowering_ev(chain.charges[has][:, None], debye_length[None, :]))
            kw["lowering_ev"] = self.bounded_lowering(low,
                                                      chain.model.ionization_energy_ev[:, None])
        elif self.scheme.density_dependent:
            if n_e is None and self.scheme.unweighted_limit:
                # the low-density limit: the plain sum over the same levels, no pair sums
                u = self._limit_model(chain).evaluate(t)
                ln_u[has] = np.log(u)
                return ln_u
            # every (stage, state) pair through the pair sums (compiled where available)
            ne = np.full(n, self.LIMIT_DENSITY) if n_e is None else np.asarray(n_e, float)
            rows = chain.model_rows[has]
            k = rows.size
            _, tinv = np.unique(t, return_inverse=True)
            u = chain.model.evaluate_pairs(t, ne, np.repeat(rows, n),
                                           want_temperature=False, temperature_index=tinv,
                                           states=np.tile(np.arange(n), k))[0]
            ln_u[has] = np.log(u.reshape(k, n))
            return ln_u
        u = chain.model.evaluate(t, **kw)
        ln_u[has] = np.log(u)
        return ln_u

    def log_u_chains(self, t: np.ndarray) -> list[np.ndarray]:
        """:meth:`log_u` of every chain at the temperatures ``t`` without n_e or lowering (the
        scheme's low-density limit), from one evaluation of the whole mixture's partition
        model where the scheme has no lowering input (one call, not one per chain)."""
        if self.model is None or "lowering_ev" in self.scheme.inputs or (
                self.scheme.density_dependent and not self.scheme.unweighted_limit):
            return [self.log_u(c, t) for c in self.chains]
        # with density-dependent weights their limit: the plain sum over the same levels
        model = self._limit_model() if self.scheme.density_dependent else self.model
        u = model.evaluate(t)
        out = []
        for c in self.chains:
            ln_u = np.zeros((c.n, t.shape[0]))
            has = c.model_rows >= 0
            if c.model is not None and has.any():
                ln_u[has] = np.log(u[c.model_offset + c.model_rows[has]])
            out.append(ln_u)
        return out

    @staticmethod
    def bounded_lowering(lowering_ev: np.ndarray, chi_ev: np.ndarray) -> np.ndarray:
        """The lowering that cuts a partition function: at most 0.999 chi (none for a bare
        nucleus, chi = inf), so that the ground level stays in the sum while a trial n_e is
        far too high; a converged state is checked against chi separately."""
        return np.minimum(lowering_ev, np.where(np.isfinite(chi_ev), 0.999 * chi_ev, 0.0))

    def _limit_model(self, chain: Chain | None = None):
        """The mixture's (or a chain's) partition model with every weight 1 (its low-density
        limit), kept."""
        cache = self.__dict__.setdefault("_limit_models", {})
        if "all" not in cache:
            cache["all"] = self.model.with_scheme(_truncation.get("plain"))
        if chain is None:
            return cache["all"]
        if chain.k not in cache:
            first = chain.model_offset
            cache[chain.k] = cache["all"].subset(first, first + chain.model.n_species)
        return cache[chain.k]

    def log_u_pairs(self, chain: Chain, t: np.ndarray, n_e: np.ndarray, rows: np.ndarray,
                    states: np.ndarray, temperature_index: np.ndarray | None = None
                    ) -> np.ndarray:
        """ln U of the flat pairs (stage ``rows[p]`` of the chain, state ``states[p]``) at the
        states' (t, n_e), with the density-dependent scheme (no lowering): the values
        :meth:`log_u` gives at those pairs, for a caller that needs only some of them."""
        out = np.zeros(rows.size)
        neg = chain.charges[rows] < 0
        if neg.any():
            out[neg] = self.negative_ion_log_u(chain, t[states[neg]], n_e[states[neg]])[0]
        if chain.model is None:
            return out
        mrows = chain.model_rows[rows]
        has = mrows >= 0
        if has.any():
            u = chain.model.evaluate_pairs(t, n_e, mrows[has], want_temperature=False,
                                           temperature_index=temperature_index,
                                           states=states[has])[0]
            out[has] = np.log(u)
        return out

    def log_c(self, chain: Chain, t: np.ndarray, n_e: np.ndarray | None = None,
              debye_length: np.ndarray | None = None) -> np.ndarray:
        """C_q (see module docstring) for the states given as flat arrays.

        Parameters
        ----------
        t : ndarray, shape (n,)
            Temperatures [K].
        n_e : ndarray, shape (n,), optional
            Electron densities, for density-dependent truncations (default: their
            low-density limit, an upper bound of each U).
        debye_length : ndarray, shape (n,), optional
            Debye length [cm]: apply Debye-Hueckel lowering (z + 1) e^2 / lambda_D to the
            ionization energies and, for schemes that use a lowering, to the
            partition-function cut-offs.

        Returns
        -------
        ndarray, shape (chain.n, n)
        """
        ln_u = self.log_u(chain, t, n_e, debye_length)
        # lowering of each stage's ionization (H-, q = -1, is not lowered)
        lowering = None if debye_length is None else _lowering_ev(chain.charges[:-1, None],
                                                                   debye_length[None, :])
        return self.log_c_of(chain, t, ln_u, lowering)

    @staticmethod
    def log_c_of(chain: Chain, t: np.ndarray, ln_u: np.ndarray,
                 lowering_ev: np.ndarray | None = None) -> np.ndarray:
        """C_q from the chain's ln U (shape (chain.n, n)) given by the caller: the Saha
        chain's steps, summed from the first stage (C of the first stage is 0)."""
        steps = _log_saha_steps(t, chain.chi_ev, ln_u, lowering_ev)
        out = np.zeros((chain.n, t.shape[0]))
        np.cumsum(steps, axis=0, out=out[1:])
        return out
