"""Internal partition functions U(T) of atoms and ions, for many species at once.

U_r = sum_i g_i w_i exp(-E_i / kT) over the bound levels of stage r.  Which levels count, and
with what weight w_i, is the truncation scheme, chosen from the registry
:mod:`sahaboltz.kernels.truncation`: ``"plain"`` (every tabulated bound level), ``"lowered"``
(levels below the lowered limit chi - dchi), ``"occupation"`` (Hummer & Mihalas occupation
probabilities), ``"ground"`` (the lowest level), ``"below:n=N"`` / ``"below:e=E"`` (levels up
to a principal quantum number or energy).

``completion=True`` adds hydrogenic Rydberg levels of the parent ion above the highest
tabulated level (energies chi - R Z^2 / n^2, weights 2 n^2 g_parent; see
docs/partition_functions.md); it needs a scheme that bounds the sum, so it is refused with
``"plain"``.

:class:`PartitionModel` packs the levels of all its species into flat arrays once; each call
evaluates exp(-E/kT) for (levels x unique states) in cache-sized blocks and sums the levels of
each species with ``np.add.reduceat``.  Terms smaller than e^-50 of the ground term are skipped
(the result is unchanged at double precision), which saves most of the work at low T.
"""

from __future__ import annotations

import copy
import functools
import math
from typing import Any, Iterable

import numpy as np

from sahaboltz.constants import K_B_EV
from sahaboltz.data.species import Species
from sahaboltz.errors import InputError, NoDataError
from sahaboltz.kernels import truncation as _truncation
from sahaboltz.kernels.occupation import RYDBERG_EV, hydrogenic_radius, stark_level_factor
from sahaboltz.quantities import as_array, as_positive_array

__all__ = ["TRUNCATIONS", "PartitionModel", "partition_function", "log_derivative"]

#: the registered truncation scheme names (see :mod:`sahaboltz.kernels.truncation`)
TRUNCATIONS = _truncation.names()

# a term with E/kT - ln(g_max) > _CUT is below e^-50 = 2e-22 of a ground term g0 >= 1 at E = 0
_CUT = 50.0
# elements of the (states x levels) work block; sized to stay in the CPU cache
_BLOCK = 1 << 17
# states x levels per group sharing one pruned level set (the pruning test costs a pass)
_GROUP_ELEMENTS = 1 << 22
# level terms per block of evaluate_pairs
_PAIR_BLOCK = 1 << 18
# species stride of the sort keys that find each pair's pruned levels [eV]: above every energy
_PAIR_KEY_STRIDE = 1e7


class PartitionModel:
    """Partition functions of a fixed list of species, evaluated together.

    Parameters
    ----------
    species : iterable of Species
        The species (any mix of elements and stages; a bare nucleus gives U = 1).
    truncation : str or TruncationScheme
        How the level sum is truncated: a name of :mod:`sahaboltz.kernels.truncation`
        ("plain", "lowered", "occupation", "ground", "below:n=3" ...).  Default "plain".
    completion : bool
        Add hydrogenic Rydberg levels of the parent above the highest tabulated level.
        Needs a scheme that bounds the sum (not "plain").
    max_completion_n : int
        Highest principal quantum number of the completion levels (default 1000).  Below
        about n_e = 1e9 cm^-3 the bounding truncation would admit more; the sum then stops here.
    parent_ground_g : dict, optional
        Statistical weight of the parent's ground level, keyed by (Z, charge) of the species
        being completed; looked up in ``species`` and then in the default database otherwise.
    perturber_radius_cm : float, optional
        Hard-sphere radius of neutral perturbers for "occupation" (default: ground-state H).

    Raises
    ------
    InputError
        Unknown truncation, completion with an unbounded one, or an empty species list.
    NoDataError
        A species (other than a bare nucleus) with no bound level, or a missing parent for
        completion.
    """

    def __init__(self, species: Iterable[Species] | Species, truncation: str = "plain",
                 completion: bool = False, *, max_completion_n: int = 1000,
                 parent_ground_g: dict | None = None,
                 perturber_radius_cm: float | None = None):
        if isinstance(species, Species):
            species = [species]
        self.species: list[Species] = list(species)
        if not self.species:
            raise InputError("species: give at least one Species")
        for sp in self.species:
            if not isinstance(sp, Species):
                raise InputError(f"species: expected Species objects, got {sp!r}; look names up "
                                 "with sahaboltz.data.database.default_database().species()")
        scheme = _truncation.get(truncation)
        if completion and not scheme.bounded:
            raise InputError(f"completion=True needs a truncation that bounds the sum "
                             f"('lowered' or 'occupation'): with '{scheme.key}' the Rydberg "
                             "series diverges")
        if int(max_completion_n) < 2:
            raise InputError(f"max_completion_n must be >= 2, got {max_completion_n}")
        self.scheme = scheme
        self.truncation = scheme.key
        self.completion = bool(completion)
        self.max_completion_n = int(max_completion_n)
        self.perturber_radius_cm = (hydrogenic_radius(1.0) if perturber_radius_cm is None
                                    else float(perturber_radius_cm))
        self.names = [sp.name for sp in self.species]
        self._pack(parent_ground_g or {})

    # -- construction -----------------------------------------------------------------------
    def _parent_g(self, sp: Species, given: dict) -> float:
        key = (sp.Z, sp.charge)
        if key in given:
            return float(given[key])
        if sp.charge + 1 == sp.Z:
            return 1.0  # parent is the bare nucleus
        for other in self.species:
            if other.Z == sp.Z and other.charge == sp.charge + 1:
                return _ground_g(other)
        try:
            from sahaboltz.data.database import default_database
            parent = default_database().species((sp.Z, sp.charge + 1))
        except Exception as exc:  # no database, or the parent has no levels
            raise NoDataError(f"completion of {sp.name} needs the ground-level weight of its "
                              f"parent ion; pass parent_ground_g={{({sp.Z}, {sp.charge}): g}} "
                              f"({exc})") from None
        return _ground_g(parent)

    def _pack(self, given_parent_g: dict) -> None:
        e_all, g_all, neff_all, z_all, n_all, wapply_all, counts = [], [], [], [], [], [], []
        static = []
        chi, charge, emin, ntop = [], [], [], []
        for sp in self.species:
            z = sp.charge + 1.0
            if sp.is_bare_nucleus:
                e, g = np.zeros(1), np.ones(1)
                neff, wap = np.ones(1), np.zeros(1, bool)
                nlev = np.zeros(1)
                chi.append(math.inf)
            else:
                if not np.isfinite(sp.ionization_energy_ev):
                    raise NoDataError(f"{sp.name} has no ionization energy: cannot tell bound "
                                      "levels from autoionizing ones")
                mask = sp.bound
                if not mask.any():
                    raise NoDataError(f"{sp.name} has no bound levels in the level data "
                                      f"({sp.provenance.get('levels_source', 'no source')}); "
                                      "leave it out of the species list or import a level list")
                order = np.argsort(sp.levels.energy_ev[mask], kind="stable")
                e = sp.levels.energy_ev[mask][order]
                g = sp.levels.g[mask][order].astype(float)
                if (g <= 0).any() or not np.isfinite(e).all():
                    raise NoDataError(f"{sp.name}: level data with g <= 0 or non-finite energy")
                neff = z * np.sqrt(RYDBERG_EV / (sp.ionization_energy_ev - e))
                wap = np.ones(len(e), bool)
                nlev = np.zeros(len(e))  # 0 = tabulated level
                if self.completion and sp.charge >= 0:
                    n_top = float(neff.max())
                    n0 = int(math.floor(n_top + 0.5)) + 1
                    if n0 <= self.max_completion_n:
                        n = np.arange(n0, self.max_completion_n + 1, dtype=float)
                        gp = self._parent_g(sp, given_parent_g)
                        e = np.concatenate([e, sp.ionization_energy_ev - RYDBERG_EV * z * z / n**2])
                        g = np.concatenate([g, 2.0 * n * n * gp])
                        neff = np.concatenate([neff, n])
                        wap = np.concatenate([wap, np.ones(len(n), bool)])
                        nlev = np.concatenate([nlev, n])
                chi.append(sp.ionization_energy_ev)
            ntop.append(float(neff[nlev == 0].max()) if not sp.is_bare_nucleus else 0.0)
            static.append(self.scheme.select(e, neff, nlev))
            e_all.append(e); g_all.append(g); neff_all.append(neff); n_all.append(nlev)
            z_all.append(np.full(len(e), z)); wapply_all.append(wap); counts.append(len(e))
            charge.append(sp.charge)
            emin.append(float(e[0]))
        self._e = np.concatenate(e_all)
        # levels the scheme leaves out for good keep their place with weight 0 (ln g = -inf),
        # so that level indices stay those of the species' bound levels
        self._static = np.concatenate(static)
        self._lng = np.where(self._static, np.log(np.concatenate(g_all)), -np.inf)
        self._neff = np.concatenate(neff_all)
        self._zrad = np.concatenate(z_all)
        self._ncomp = np.concatenate(n_all)       # n of completion levels, 0 for tabulated
        self._wapply = np.concatenate(wapply_all)
        self._counts = np.asarray(counts)
        self._starts = np.concatenate([[0], np.cumsum(self._counts)[:-1]]).astype(np.intp)
        self._sp = np.repeat(np.arange(len(self.species)), self._counts)
        self.ionization_energy_ev = np.asarray(chi, dtype=float)
        self.charge = np.asarray(charge, dtype=float)
        self._emin = np.asarray(emin)
        self._lng_max = np.maximum.reduceat(self._lng, self._starts)
        self._lng_max_lv = self._lng_max[self._sp]
        self._is_comp = self._ncomp > 0
        self._bare = np.array([sp.is_bare_nucleus for sp in self.species])
        # level parts of the occupation probabilities (see occupation.stark_state_factors)
        # (zero where no weight applies, e.g. a bare nucleus: w = 1 there)
        self._q_stark = np.where(self._wapply, stark_level_factor(self._neff, self._zrad), 0.0)
        self._r3 = np.where(self._wapply, (hydrogenic_radius(self._neff, self._zrad)
                                           + self.perturber_radius_cm) ** 3, 0.0)

    @property
    def n_species(self) -> int:
        return len(self.species)

    # per-level and per-species packed arrays: what subset() slices
    _LEVEL_ARRAYS = ("_e", "_lng", "_neff", "_zrad", "_ncomp", "_wapply", "_static", "_is_comp",
                     "_q_stark", "_r3")
    _SPECIES_ARRAYS = ("_counts", "ionization_energy_ev", "charge", "_emin", "_lng_max", "_bare")

    def with_scheme(self, truncation) -> "PartitionModel":
        """The same packed levels under another truncation scheme (a view, no re-packing);
        only for schemes that keep every level (no static selection)."""
        scheme = _truncation.get(truncation)
        if type(scheme).select is not _truncation.TruncationScheme.select or (
                type(self.scheme).select is not _truncation.TruncationScheme.select):
            raise InputError(f"with_scheme: '{scheme.key}' selects other levels than "
                             f"'{self.scheme.key}'; build a new PartitionModel")
        if self.completion and not scheme.bounded:
            raise InputError(f"with_scheme: completion levels need a bounding scheme, "
                             f"not '{scheme.key}'")
        other = copy.copy(self)
        other.scheme = scheme
        other.truncation = scheme.key
        return other

    def top_weight(self, row, p_: np.ndarray, a_: np.ndarray, b_: np.ndarray
                   ) -> np.ndarray:
        """Charged-perturber occupation probability of the highest packed level of species
        ``row`` (one, or one per state) at states given by their factors (P, A, B) of
        :func:`~sahaboltz.kernels.occupation.stark_state_factors`: the smallest w of its
        levels, so U_occupation >= top_weight * U_plain."""
        row = np.asarray(row, dtype=np.intp)
        s = p_ * self._q_stark[self._starts[row] + self._counts[row] - 1]
        return 1.0 / (1.0 + s * (a_ * s + b_))

    def subset(self, start: int, stop: int) -> "PartitionModel":
        """The species ``start:stop`` of this model as a model of their own (a view on the
        packed levels: no copy, no re-packing)."""
        if not 0 <= start < stop <= self.n_species:
            raise InputError(f"subset {start}:{stop} is outside the {self.n_species} species")
        sub = copy.copy(self)
        sub.__dict__.pop("_pair_keys", None)   # the parent's search keys index its own levels
        l0 = int(self._starts[start])
        l1 = int(self._starts[stop - 1] + self._counts[stop - 1])
        for name in self._LEVEL_ARRAYS:
            setattr(sub, name, getattr(self, name)[l0:l1])
        for name in self._SPECIES_ARRAYS:
            setattr(sub, name, getattr(self, name)[start:stop])
        sub.species = self.species[start:stop]
        sub.names = self.names[start:stop]
        sub._starts = self._starts[start:stop] - l0
        sub._sp = self._sp[l0:l1] - start
        sub._lng_max_lv = self._lng_max_lv[l0:l1]
        return sub

    @property
    def n_levels(self) -> int:
        """Number of packed levels (tabulated bound levels plus completion levels)."""
        return len(self._e)

    def index(self, name_or_species) -> int:
        """Position of a species (by name "Fe II" or Species) in this model."""
        if isinstance(name_or_species, Species):
            name_or_species = name_or_species.name
        try:
            return self.names.index(name_or_species)
        except ValueError:
            raise InputError(f"species: {name_or_species!r} is not in this PartitionModel "
                             f"(it holds {len(self.names)} species)") from None

    # -- public evaluation ------------------------------------------------------------------
    def evaluate(self, temperature: Any, n_e: Any = None, lowering_ev: Any = None,
                 n_neutral: Any = None) -> np.ndarray:
        """Partition functions U of every species.

        Parameters
        ----------
        temperature : float, array_like or Quantity
            Temperature [K], any shape.
        n_e : float, array_like or Quantity, optional
            Electron density [cm^-3]; needed for "occupation", and for "lowered" when
            ``lowering_ev`` is not given (Debye-Hueckel lowering from n_e and T).
        lowering_ev : float, array_like or Quantity, optional
            Ionization-potential lowering of each species [eV] ("lowered" only; ignored by
            the other truncations).  Broadcast against (n_species,) + state shape; a 1-D
            array of length n_species is taken as one value per species.
        n_neutral : float, array_like or Quantity, optional
            Density of neutral perturbers [cm^-3] for "occupation" (hard spheres).

        Returns
        -------
        ndarray
            Shape (n_species,) + broadcast shape of the state arguments.
        """
        return self._run(temperature, n_e, lowering_ev, n_neutral)[0]

    def log_derivative(self, temperature: Any, n_e: Any = None, lowering_ev: Any = None,
                       n_neutral: Any = None) -> np.ndarray:
        """d ln U / d ln T at fixed n_e, same arguments and shape as :meth:`evaluate`.

        It is <E>/kT plus the mean of d ln w / d ln T of the occupation probabilities (a cut
        at the lowered limit adds nothing: U only jumps when a level crosses it).
        """
        u, u1, _ = self._run(temperature, n_e, lowering_ev, n_neutral, want_energy=True)
        return u1 / u

    def evaluate_with_derivative(self, temperature: Any, n_e: Any = None,
                                 lowering_ev: Any = None, n_neutral: Any = None
                                 ) -> tuple[np.ndarray, np.ndarray]:
        """(U, d ln U / d ln T) in one pass."""
        u, u1, _ = self._run(temperature, n_e, lowering_ev, n_neutral, want_energy=True)
        return u, u1 / u

    def evaluate_derivatives(self, temperature: Any, n_e: Any = None,
                             lowering_ev: Any = None, n_neutral: Any = None
                             ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(U, d ln U / d ln T at fixed n_e, d ln U / d ln n_e at fixed T) in one pass.

        The density derivative is that of the occupation probabilities (zero for schemes
        that do not weight levels by density).
        """
        u, u1, u2 = self._run(temperature, n_e, lowering_ev, n_neutral, want_energy=True,
                              want_density=True)
        return u, u1 / u, u2 / u

    def _pair_levels(self, rows: np.ndarray, beta: np.ndarray, temps=None
                     ) -> tuple[np.ndarray, np.ndarray]:
        """(first level, number of levels) of each pair's species that pass the Boltzmann
        pruning at 1/kT = ``beta`` [eV^-1] (a prefix: levels are sorted by energy).  With
        ``temps`` = (1/kT of the distinct temperatures, index of each pair's) and pairs of a
        few neighbouring species (one element's stages), each count is searched once per
        (temperature, species) and gathered."""
        if not hasattr(self, "_pair_keys"):
            self._pair_keys = self._sp * _PAIR_KEY_STRIDE + self._e
        from sahaboltz.kernels import compiled as _compiled
        if temps is not None and rows.size and _compiled.available():
            beta_u, tidx = temps      # (each (temperature, species) searched once)
            return _compiled.pair_levels(tidx, rows, beta_u, self._starts, self._counts,
                                         self._e, self._lng_max, _CUT)
        start = self._starts[rows]
        if temps is not None and rows.size:
            beta_u, tidx = temps
            r0 = int(rows.min())
            span = np.arange(r0, int(rows.max()) + 1)
            if beta_u.size * span.size * 2 <= rows.size:
                cut = (_CUT + self._lng_max[span])[None, :] / beta_u[:, None]
                table = (np.searchsorted(self._pair_keys, span * _PAIR_KEY_STRIDE + cut)
                         - self._starts[span])
                count = table[tidx, rows - r0]
                return start, np.clip(count, 1, self._counts[rows])
        cut = (_CUT + self._lng_max[rows]) / beta
        count = np.searchsorted(self._pair_keys, rows * _PAIR_KEY_STRIDE + cut) - start
        return start, np.clip(count, 1, self._counts[rows])

    def evaluate_pairs(self, temperature: np.ndarray, n_e: np.ndarray, rows: np.ndarray,
                       n_neutral: np.ndarray | None = None, *, want_temperature: bool = True,
                       temperature_index: np.ndarray | None = None,
                       states: np.ndarray | None = None
                       ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray]:
        """(U, d ln U / d ln T, d ln U / d ln n_e) of one species per state: the flat pairs
        (``temperature[p]``, ``n_e[p]``, species ``rows[p]``), unchecked float arrays.

        For solvers that need a different set of species at every state: the work is the
        levels of each pair's species alone (pruned as in :meth:`evaluate`), in one
        vectorized pass over all pairs.  ``want_temperature=False`` skips the temperature
        derivative (None).  ``temperature_index`` may give each pair's position among the
        distinct temperatures (a caller that knows it spares a sort).  With ``states``, the
        state arguments are given once per state and pair ``p`` belongs to state
        ``states[p]`` (the scheme's state factors are then computed once per state).  Schemes
        with a per-state lowering are not supported.
        """
        if "lowering_ev" in self.scheme.inputs:
            raise InputError("evaluate_pairs: a lowering per state is not supported here")
        t = np.asarray(temperature, dtype=float)
        rows = np.asarray(rows, dtype=np.intp)
        npair = rows.size
        pst = {"T": t, "ne": np.asarray(n_e, dtype=float)}
        if n_neutral is not None:
            pst["nn"] = np.asarray(n_neutral, dtype=float)
        self.scheme.prepare_pairs(self, pst)
        if states is not None:   # from per-state to per-pair values
            pst = _per_pair(pst, states)
            t = pst["T"]
            if temperature_index is not None:
                temperature_index = np.asarray(temperature_index)[states]
        beta = 1.0 / (K_B_EV * t)
        start, count = self._pair_levels(rows, beta)
        if temperature_index is None:
            t_u, tidx = np.unique(t, return_inverse=True)
        else:
            tidx = np.asarray(temperature_index, dtype=np.intp)
            t_u = np.ones(int(tidx.max()) + 1 if tidx.size else 0)
            t_u[tidx] = t
        fast = self.scheme.pair_sums(self, tidx, 1.0 / (K_B_EV * t_u), rows, start, count, pst,
                                     want_temperature)
        if fast is not None:
            u, u1, u2 = fast
            return u, u1 / u if want_temperature else None, u2 / u
        u, u2 = np.zeros(npair), np.zeros(npair)
        u1 = np.zeros(npair) if want_temperature else None
        # blocks of consecutive pairs with about _PAIR_BLOCK level terms each
        ends = np.cumsum(count)
        cuts = np.searchsorted(ends, np.arange(_PAIR_BLOCK, ends[-1], _PAIR_BLOCK))
        edges = np.unique(np.concatenate([[0], cuts + 1, [npair]]))
        for p0, p1 in zip(edges[:-1], edges[1:]):
            cnt = count[p0:p1]
            off = np.concatenate([[0], np.cumsum(cnt)[:-1]])
            lv = np.repeat(start[p0:p1] - off, cnt) + np.arange(int(ends[p1 - 1] - (ends[p0 - 1] if p0 else 0)))
            arg = self._lng[lv] - np.repeat(beta[p0:p1], cnt) * self._e[lv]
            w = self.scheme.pair_weights(self, lv, cnt, slice(p0, p1), pst, want_temperature)
            d_t = d_n = None
            if w is not None:
                lw, d_t, d_n = w
                arg += lw
            terms = np.exp(arg)
            u[p0:p1] = np.add.reduceat(terms, off)
            if d_n is not None:
                u2[p0:p1] = np.add.reduceat(terms * d_n, off)
            if want_temperature:
                energy = np.repeat(beta[p0:p1], cnt) * self._e[lv]
                if d_t is not None:
                    energy += d_t
                u1[p0:p1] = np.add.reduceat(terms * energy, off)
        return u, None if u1 is None else u1 / u, u2 / u

    def pair_log_derivatives(self, temperature: np.ndarray, n_e: np.ndarray | None,
                             rows: np.ndarray, states: np.ndarray | None = None,
                             state_factors: dict | None = None,
                             lowering_ev: np.ndarray | None = None,
                             temperature_index: np.ndarray | None = None
                             ) -> tuple[np.ndarray, ...]:
        """ln U and its first and second derivatives in (ln T, ln n_e) for the flat pairs
        (state, species ``rows[p]``), unchecked float arrays as in :meth:`evaluate_pairs`.

        With the level terms t_i = g_i w_i exp(-E_i/kT), e_i = E_i/kT + d ln w_i/d ln T and
        d_i = d ln w_i / d ln n_e (angle brackets: means weighted by t_i):

            d ln U/d ln T = <e>,             d ln U/d ln n_e = <d>,
            d2 ln U/d ln T^2 = Var(e) + <-E/kT + d2 ln w/d ln T^2>,
            d2 ln U/d ln T d ln n_e = Cov(e, d) + <d2 ln w/d ln T d ln n_e>.

        Returns (ln U, U_T, U_n, U_TT, U_Tn) as the rows of one (5, npair) array; the density
        derivatives are 0 for schemes whose weights do not depend on n_e.  ``state_factors``:
        those of :meth:`log_derivative_state_factors` for these (temperature, n_e), when a
        caller evaluates several sets of pairs of the same states.  Schemes cut at a lowered
        limit take the lowering of each pair, ``lowering_ev`` [eV] (already bounded below the
        ionization energy): at a fixed lowering their U depends on T alone, so the density
        derivatives are 0 (the cut moves a level in or out only in steps).
        ``temperature_index``: each state's (each pair's, without ``states``) position among
        the distinct temperatures, from a caller that knows it (spares sorting the pairs).
        """
        lowered = "lowering_ev" in self.scheme.inputs
        if lowered and lowering_ev is None:
            raise InputError("pair_log_derivatives: the truncation "
                             f"'{self.scheme.key}' needs the lowering of each pair")
        t = np.asarray(temperature, dtype=float)
        rows = np.asarray(rows, dtype=np.intp)
        npair = rows.size
        out = np.zeros((5, npair))
        if not npair:
            return out
        pst = {"T": t, "ne": (np.full(t.shape, 1e-30) if n_e is None
                              else np.asarray(n_e, dtype=float))}
        dens = self.scheme.density_dependent and n_e is not None and not lowered
        if dens:
            if state_factors is None:
                self.scheme.prepare_curvature_pairs(self, pst)
            else:
                pst.update(state_factors)
        per_state = pst                    # the scheme's compiled sums take them per state
        if states is not None:
            states = np.asarray(states, dtype=np.intp)
            t = t[states]
        beta = 1.0 / (K_B_EV * t)
        temps = None                       # (1/kT of the distinct temperatures, index per pair)
        if temperature_index is not None:
            tidx = np.asarray(temperature_index, dtype=np.intp)
            if states is not None:
                tidx = tidx[states]
            beta_u = np.ones(int(tidx.max()) + 1)
            beta_u[tidx] = beta
            temps = (beta_u, tidx)
        start, count = self._pair_levels(rows, beta, temps)
        if lowered:
            # the levels below the lowered limit chi - dchi (a prefix: energies ascend)
            cut = np.where(self._bare[rows], np.inf,
                           self.ionization_energy_ev[rows] - np.asarray(lowering_ev, float))
            below = np.searchsorted(self._pair_keys, rows * _PAIR_KEY_STRIDE + cut) - start
            count = np.clip(np.minimum(count, below), 1, None)
        if dens:
            fast = self.scheme.pair_log_derivative_sums(
                self, rows, start, count, per_state,
                temps if temps is not None else _distinct(beta), states)
            if fast is not None:
                return fast
        else:   # every weight 1 here
            from sahaboltz.kernels import compiled_thermo
            if compiled_thermo.available():
                beta_u, tidx = temps if temps is not None else _distinct(beta)
                return compiled_thermo.plain_log_derivative_sums(
                    tidx, rows, beta_u, start, count, self._e, self._lng,
                    self._lng_max, self._q_stark, self._r3, self.n_species)
        if states is not None:
            pst = _per_pair(pst, states)
        ln_u, u_t, u_n, u_tt, u_tn = out
        ends = np.cumsum(count)
        cuts = np.searchsorted(ends, np.arange(_PAIR_BLOCK, ends[-1], _PAIR_BLOCK))
        edges = np.unique(np.concatenate([[0], cuts + 1, [npair]]))
        for p0, p1 in zip(edges[:-1], edges[1:]):
            cnt = count[p0:p1]
            off = np.concatenate([[0], np.cumsum(cnt)[:-1]])
            total = int(ends[p1 - 1] - (ends[p0 - 1] if p0 else 0))
            lv = np.repeat(start[p0:p1] - off, cnt) + np.arange(total)
            be = np.repeat(beta[p0:p1], cnt) * self._e[lv]
            arg = self._lng[lv] - be
            w = self.scheme.pair_weight_derivatives(self, lv, cnt, slice(p0, p1), pst) \
                if dens else None
            e = be
            de = -be
            d = dd = None
            if w is not None:
                lw, w_t, w_n, w_tt, w_tn = w
                arg = arg + lw
                e = be + w_t
                de = w_tt - be
                d, dd = w_n, w_tn
            # scale by the largest term of each pair (no overflow, exact ratios)
            top = np.maximum.reduceat(arg, off)
            terms = np.exp(arg - np.repeat(top, cnt))
            s0 = np.add.reduceat(terms, off)
            inv = 1.0 / s0

            def mean(v):
                return np.add.reduceat(terms * v, off) * inv

            m_e = mean(e)
            ln_u[p0:p1] = np.log(s0) + top
            u_t[p0:p1] = m_e
            # the variance about the mean (no cancellation)
            de_c = e - np.repeat(m_e, cnt)
            u_tt[p0:p1] = mean(de_c * de_c) + mean(de)
            if d is not None:
                m_d = mean(d)
                u_n[p0:p1] = m_d
                u_tn[p0:p1] = mean(de_c * (d - np.repeat(m_d, cnt))) + mean(dd)
        return out

    def log_derivative_state_factors(self, temperature: np.ndarray, n_e: np.ndarray) -> dict:
        """The scheme's factors of each state (temperature, n_e) that
        :meth:`pair_log_derivatives` needs (empty for weights independent of n_e)."""
        pst = {"T": np.asarray(temperature, dtype=float), "ne": np.asarray(n_e, dtype=float)}
        if self.scheme.density_dependent:
            self.scheme.prepare_curvature_pairs(self, pst)
        return {k: v for k, v in pst.items() if k not in ("T", "ne")}

    def level_terms(self, species, temperature: Any, n_e: Any = None, lowering_ev: Any = None,
                    n_neutral: Any = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Boltzmann terms g_i w_i exp(-E_i/kT) of one species' packed levels.

        Returns
        -------
        terms : ndarray, shape (n_levels_of_species,) + state shape
            Zero for levels removed by the truncation.
        energy_ev : ndarray
            Energies of those levels [eV] (tabulated bound levels first, then completion).
        n_completion : ndarray
            Principal quantum number of completion levels, 0 for tabulated ones.
        """
        s = self.index(species)
        st = self._states(temperature, n_e, lowering_ev, n_neutral)
        if "cut" in st:  # _arg pairs each species' cut with its levels: keep this species'
            st["cut"] = st["cut"][s:s + 1]
        lv = np.arange(self._starts[s], self._starts[s] + self._counts[s])
        out = np.empty((st["n"], len(lv)))
        for lo in range(0, st["n"], max(1, _BLOCK // len(lv))):
            hi = min(st["n"], lo + max(1, _BLOCK // len(lv)))
            out[lo:hi] = np.exp(self._arg(lv, st, slice(lo, hi), np.array([len(lv)])))
        terms = out.T[:, st["inverse"]].reshape((len(lv),) + st["shape"])
        return terms, self._e[lv].copy(), self._ncomp[lv].copy()

    # -- internals --------------------------------------------------------------------------
    def _states(self, temperature, n_e, lowering_ev, n_neutral) -> dict:
        """Check the inputs and reduce them to unique states (flat columns)."""
        t = as_positive_array(temperature, "K", "temperature")
        ne = None if n_e is None else as_positive_array(n_e, "cm-3", "n_e")
        nn = None if n_neutral is None else as_array(n_neutral, "cm-3", "n_neutral",
                                                      allow_negative=False)
        shapes = [t.shape] + [a.shape for a in (ne, nn) if a is not None]
        try:
            shape = np.broadcast_shapes(*shapes)
        except ValueError:
            raise InputError(f"temperature, n_e and n_neutral do not broadcast together "
                             f"(shapes {', '.join(map(str, shapes))})") from None
        extra, shared = self.scheme.columns(
            self, {"n_e": ne, "n_neutral": nn, "lowering_ev": lowering_ev}, shape)
        cols = [("T", np.broadcast_to(t, shape).ravel())] + extra
        if self.scheme.sort_first is not None:
            # sort states by that column first: a group of neighbours then shares it, so
            # e.g. dissolved completion levels can be skipped for the whole group
            cols.sort(key=lambda c: c[0] != self.scheme.sort_first)
        if len(cols) == 1:
            uniq, inverse = np.unique(cols[0][1], return_inverse=True)
            table = uniq[:, None]
        else:
            table, inverse = np.unique(np.stack([c for _, c in cols], axis=1), axis=0,
                                       return_inverse=True)
        st = {"shape": shape, "inverse": inverse.ravel(), "n": len(table), **shared}
        for name in dict.fromkeys(n for n, _ in cols):
            idx = [i for i, (n, _) in enumerate(cols) if n == name]
            st[name] = table[:, idx[0]].copy() if len(idx) == 1 else table[:, idx].T.copy()
        st["beta"] = 1.0 / (K_B_EV * st["T"])
        self.scheme.prepare(self, st)
        return st

    def _arg(self, lv: np.ndarray, st: dict, sl: slice, counts: np.ndarray,
             slopes: bool = False):
        """ln of the Boltzmann terms, shape (states in ``sl``, levels ``lv``); with ``slopes``
        also the weights' (d ln w / d ln T, d ln w / d ln n_e), or None where they vanish.

        ``counts`` is the number of levels of each species in ``lv`` (species are contiguous).
        """
        arg = np.multiply.outer(st["beta"][sl], -self._e[lv])
        arg += self._lng[lv]
        out = self.scheme.apply(self, lv, st, sl, counts, arg, slopes)
        return (arg, out) if slopes else arg

    def _keep(self, st: dict, sl: slice) -> np.ndarray:
        """Levels that can matter for the states in ``sl`` (a prefix of every species)."""
        keep = self._static & (self._e * st["beta"][sl].min() - self._lng_max_lv < _CUT)
        more = self.scheme.keep(self, st, sl)
        if more is not None:
            keep &= more
        keep[self._starts] = True  # never leave a species without a level
        return keep

    def _run(self, temperature, n_e, lowering_ev, n_neutral, want_energy: bool = False,
             want_density: bool = False):
        st = self._states(temperature, n_e, lowering_ev, n_neutral)
        nst = st["n"]
        # (states x species) while summing: a block's sums are then contiguous rows
        u = np.empty((nst, self.n_species))
        u1 = np.empty((nst, self.n_species)) if want_energy else None
        u2 = np.zeros((nst, self.n_species)) if want_density else None
        slopes = (want_energy or want_density) and self.scheme.density_dependent
        all_lv = np.arange(self.n_levels)
        # states are sorted by temperature: a group of neighbours shares one pruned level set,
        # decided once per group, then the group is evaluated in cache-sized blocks
        group = max(1, _GROUP_ELEMENTS // self.n_levels)
        static = not self.scheme.density_dependent
        for g0 in range(0, nst, group):
            g1 = min(nst, g0 + group)
            keep = self._keep(st, slice(g0, g1))
            if keep.all():
                lv, starts, counts = all_lv, self._starts, self._counts
            else:
                lv = np.flatnonzero(keep)
                counts = np.add.reduceat(keep.astype(np.intp), self._starts)
                starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
            step = max(1, _BLOCK // len(lv))
            e = self._e[lv]
            if static:
                neg_e, lng = -e, self._lng[lv]
                buf = np.empty((min(step, g1 - g0), len(lv)))
            for lo in range(g0, g1, step):
                hi = min(g1, lo + step)
                sl = slice(lo, hi)
                d_t = d_n = None
                if static:
                    terms = buf[:hi - lo]
                    np.multiply.outer(st["beta"][sl], neg_e, out=terms)
                    terms += lng
                elif slopes:
                    terms, w_slopes = self._arg(lv, st, sl, counts, slopes=True)
                    d_t, d_n = w_slopes if w_slopes is not None else (None, None)
                else:
                    terms = self._arg(lv, st, sl, counts)
                np.exp(terms, out=terms)
                u[sl] = np.add.reduceat(terms, starts, axis=1)
                if want_density and d_n is not None:
                    u2[sl] = np.add.reduceat(terms * d_n, starts, axis=1)
                if want_energy:
                    energy = np.multiply.outer(st["beta"][sl], e)
                    if d_t is not None:
                        energy += d_t
                    terms *= energy
                    u1[sl] = np.add.reduceat(terms, starts, axis=1)
        out_shape = (self.n_species,) + st["shape"]
        inverse = st["inverse"]
        if inverse.size == nst and (inverse == np.arange(nst)).all():
            inverse = None     # distinct, sorted states: no gather
        return tuple(None if v is None else _species_first(v, inverse).reshape(out_shape)
                     for v in (u, u1, u2))


def _species_first(v: np.ndarray, inverse: np.ndarray | None) -> np.ndarray:
    """(species x states) C-ordered from the (unique states x species) sums, gathered to the
    states by ``inverse`` (None: they are the unique states)."""
    if inverse is not None:
        v = np.take(v, inverse, axis=0)
    return np.ascontiguousarray(v.T)


def _ground_g(sp: Species) -> float:
    """Statistical weight of the lowest bound level (1 for a bare nucleus)."""
    if sp.is_bare_nucleus:
        return 1.0
    mask = sp.bound
    if not mask.any():
        raise NoDataError(f"{sp.name} has no bound levels, so its ground-level weight is unknown")
    e = sp.levels.energy_ev[mask]
    return float(sp.levels.g[mask][np.argmin(e)])


def _resolve(species) -> Species:
    if isinstance(species, Species):
        return species
    from sahaboltz.data.database import default_database
    return default_database().species(species)


@functools.lru_cache(maxsize=256)
def _cached_model(key, truncation: str, completion: bool) -> PartitionModel:
    return PartitionModel([_resolve(key)], truncation, completion)


def default_truncation(truncation, n_e, lowering_ev):
    """The scheme of a partition-function call: the given one, else the physically best for
    what is known (occupation probabilities with an electron density, the cut at the lowered
    limit with a given lowering, the plain sum at a temperature alone)."""
    if truncation is not None:
        return _truncation.get(truncation)
    return _truncation.resolve(None, lowering=lowering_ev is not None, density=n_e is not None)


def _model_for(species, truncation, completion: bool) -> PartitionModel:
    if isinstance(species, Species):
        return PartitionModel([species], truncation, completion)
    if not isinstance(species, (str, tuple)):
        raise InputError(f"species must be a name ('Fe II', 'Fe+'), (Z, charge) or a Species; "
                         f"got {species!r}")
    return _cached_model(species, _truncation.get(truncation).key, completion)


def species_lowering(model: PartitionModel, lowering_ev: Any):
    """A lowering given for one species (scalar or state-shaped) as the model wants it:
    (n_species,) + state shape; None when the model's scheme does not use a lowering."""
    if lowering_ev is None or "lowering_ev" not in model.scheme.inputs:
        return None
    low = as_array(lowering_ev, "eV", "lowering_ev", allow_negative=False)
    return low[None, ...] if low.ndim else low


def partition_function(species, temperature: Any, *, truncation: str | None = None,
                       completion: bool = False, n_e: Any = None, lowering_ev: Any = None,
                       n_neutral: Any = None) -> np.ndarray:
    """Partition function U of one species.

    Parameters
    ----------
    species : str, (Z, charge) or Species
        E.g. ``"Fe II"``, ``"Fe+"``, ``(26, 1)``; names are looked up in the default database.
    temperature : float, array_like or Quantity
        Temperature [K].
    truncation : str, optional
        A scheme of :mod:`sahaboltz.kernels.truncation`.  Default: occupation probabilities
        when ``n_e`` is given, the lowered limit when only ``lowering_ev`` is, else the plain
        sum of the tabulated levels.
    completion, n_e, lowering_ev, n_neutral
        As for :class:`PartitionModel` and :meth:`PartitionModel.evaluate` (``lowering_ev``
        is a scalar or an array of the state shape here).

    Returns
    -------
    ndarray
        U, broadcast shape of the state arguments.

    Raises
    ------
    UnknownSpeciesError, NoDataError
        Unknown species, or one without level data.
    InputError
        Bad temperature / density / options.
    """
    model = _model_for(species, default_truncation(truncation, n_e, lowering_ev), completion)
    return model.evaluate(temperature, n_e, species_lowering(model, lowering_ev), n_neutral)[0]


def log_derivative(species, temperature: Any, *, truncation: str | None = None,
                   completion: bool = False, n_e: Any = None, lowering_ev: Any = None,
                   n_neutral: Any = None) -> np.ndarray:
    """d ln U / d ln T of one species (arguments as :func:`partition_function`)."""
    model = _model_for(species, default_truncation(truncation, n_e, lowering_ev), completion)
    return model.log_derivative(temperature, n_e, species_lowering(model, lowering_ev),
                                n_neutral)[0]


def _distinct(beta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(distinct values of 1/kT, each pair's index among them)."""
    beta_u, tidx = np.unique(beta, return_inverse=True)
    return beta_u, tidx.ravel()


def _per_pair(pst: dict, states) -> dict:
    """State arguments given once per state, taken to the pairs (pair p belongs to state
    ``states[p]``); tuples of arrays element by element."""
    states = np.asarray(states, dtype=np.intp)
    return {k: tuple(a[states] for a in v) if isinstance(v, tuple) else v[states]
            for k, v in pst.items()}
