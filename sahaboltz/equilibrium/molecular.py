"""Atoms, ions, H- and diatomic molecules in one LTE equilibrium.

Formulation
-----------
For every element k that occurs in one of the chosen molecules ("molecular elements", set M)
the unknown is y_k = ln n_k0, the density of its neutral atoms; further unknowns are
x = ln n_e and, for a gas-pressure or electron-pressure closure, w = ln N (N = all nuclei).
The Saha chains (:class:`~sahaboltz.equilibrium.network.AtomicNetwork`) give every stage of k
relative to its neutral atom, n_kq = n_k0 exp(L_kq - q x), and each molecule's dissociation
constant (:mod:`sahaboltz.kernels.molecular`) gives, for its process AB = A + B with A, B
given stages of elements a, b,

    ln n_AB = y_a + y_b + L_a,qA + L_b,qB - ln K_n(T) - (qA + qB) x.

Elements not in M need no unknown: their stage fractions follow from x alone (as in the
atoms-only solver).  The equations, all written as differences of logarithms of sums of
positive terms (no cancellation, well scaled from 1 to 10^20 cm^-3):

* nuclei of each k in M:   ln(atoms_k + sum_m nu_mk n_m) - ln(alpha_k N) = 0
* charge neutrality:       ln(positive charges) - ln(n_e + negative charges) = 0
* closure:                 gas pressure: ln(all free particles) - ln(P/kT) = 0;
                           mass or hydrogen density: N fixed; electron pressure: x fixed.

Every density is exp of a linear function of the unknowns times T-only factors, so the
Jacobian is exact and cheap (sums of fractions).  All states are solved at once:

1. start from the atoms-only solution, then Gauss-Seidel sweeps over the element equations at
   fixed n_e and N (removes the gross overestimate of the molecules);
2. inner solve: at fixed n_e and N the element equations are the gradient of a convex function
   of y; damped Newton on it (line search, small ridge) converges from any start;
3. outer step: one full Newton step at the inner solution (the Schur-complement step in
   ln n_e, ln N), capped at 2 in those logarithms and halved for a state whose charge or
   pressure residual grew; back to 2 until every log residual is below the tolerance.

Results come back as a :class:`MolecularEquilibriumState` (an
:class:`~sahaboltz.equilibrium.state.EquilibriumState` whose atomic populations are scaled to
the part of each element not in molecules) with the molecule densities, the fraction of each
element locked in molecules and an element-budget report.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from sahaboltz.data.composition import Composition
from sahaboltz.data.elements import SYMBOLS, Z_OF
from sahaboltz.data.molecule_import import parse_formula
from sahaboltz.data.molecules import MoleculeDatabase, default_molecule_database
from sahaboltz.data.thermo import ThermoDatabase, ThermoSpecies, default_thermo_database
from sahaboltz.data.thermo_import import ELECTRON, formula_counts
from sahaboltz.equilibrium.atomic import solve_atomic
from sahaboltz.equilibrium.closures import Closure
from sahaboltz.equilibrium.molecule_sets import MOLECULE_SETS
from sahaboltz.equilibrium.network import AtomicNetwork
from sahaboltz.equilibrium.state import (CONVERGED, NOT_CONVERGED, EquilibriumState,
                                         SolveReport)
from sahaboltz.errors import InputError, UnknownSpeciesError
from sahaboltz.kernels.molecular import MoleculeConstants
from sahaboltz.kernels.thermo import CondensateConstants

#: the short set "abundant": the diatomics that take a noticeable share of an abundant element
#: in cool stellar atmospheres (H, C, N, O, and the main metal hydrides and oxides)
DEFAULT_MOLECULES = ("H2", "H2+", "CH", "NH", "OH", "C2", "CN", "CO", "N2", "NO", "O2", "SiO",
                     "SiS", "CS", "SO", "HS", "MgH", "SiH", "CaH", "FeH", "AlH", "TiO", "AlO")
#: named molecule sets: "default" (the physically best set: every species of the data, each
#: where its data reach), "all" (the same species), "diatomics" (Barklem & Collet only),
#: "abundant" (DEFAULT_MOLECULES), "none": their names are in molecule_sets (light to import)
#: lowest temperature the molecular solver accepts [K] (the issue's supported range starts
#: at 1000 K; below ~500 K solar-mixture densities span more than float64's range)
T_MIN = 500.0
_MAX_STEP = 5.0           # largest change of any logarithm in one Newton step
_MAX_OUTER_STEP = 2.0     # largest change of ln n_e or ln N in one outer step
_START_PASSES = 200       # passes allowed to the atoms-only solver that gives the start
_CHUNK = 2048             # states solved together
_RIDGE = 1e-10
_STALL_ACCEPT = 1e-9      # residual accepted for a state that stops improving (see _solve_chunk)
_X_WINDOW = 20.0          # ln n_e stays within this distance of the atoms-only value
_MAX_REFREEZE = 20        # solves with the density-dependent partition functions updated
# log-barrier parameter of the condensates (per nucleus): start and end (a condensed
# compound's gas is then saturated to ln S = -mu / gamma ~ -1e-14 for gamma ~ 1e-8)
_MU_START, _MU_END = 1e-8, 1e-22
_MAX_COND_ITER = 60       # primal-dual Newton steps per inner solve with condensates


# ------------------------------------------------------------------------------ molecule sets
def _key(counts: dict[str, int], charge: int) -> tuple:
    return tuple(sorted(counts.items())), charge


def _query_key(text: str):
    """(sorted (Z, count), charge) of a formula such as "OH2", "Fe(OH)2" or "H3O+"; None if it
    is not one."""
    base, sign = (text[:-1], text[-1]) if text.endswith(("+", "-")) else (text, "")
    try:
        counts = formula_counts(base)
    except ValueError:
        return None
    return tuple(sorted((Z_OF[k], v) for k, v in counts.items())), {"": 0, "+": 1, "-": -1}[sign]


def polyatomic_candidates(thermo: ThermoDatabase) -> list[ThermoSpecies]:
    """The gas species of the NASA polynomials that the molecular equilibrium can add: every
    molecule and molecular ion, and the negative atomic ions except H- (which the atomic
    network holds); not the atoms, positive atomic ions and the electron (the atomic network's)."""
    out = []
    for s in thermo:
        if s.name == ELECTRON or s.is_condensed:
            continue
        if not all(thermo.has_atom(z) for z in s.elements):
            continue        # no constant without the atoms' G (Mo oxides: no Mo gas in the data)
        if s.n_atoms >= 2 or (s.charge < 0 and s.elements != (1,)):
            out.append(s)
    return out


def select_molecules(composition: Composition, molecules: Any, network: AtomicNetwork,
                     database: MoleculeDatabase | None = None,
                     thermo: ThermoDatabase | None = None) -> tuple[list, list[str]]:
    """Resolve the ``molecules=`` option into records; also return the skipped names and why.

    ``"default"`` and ``"all"``: every Barklem & Collet diatomic made of the mixture's elements,
    and every species of the NASA polynomials (:func:`polyatomic_candidates`) that is not
    already one of those diatomics (Barklem & Collet stays where both have a molecule: its
    tables reach 10,000 K); each species takes part where its data reach (see
    :meth:`MolecularEquilibriumState.left_out`).  ``"diatomics"``: the Barklem & Collet
    molecules only; ``"abundant"``: :data:`DEFAULT_MOLECULES`; a list of names: exactly those
    (Barklem & Collet first, then the NASA gas species; an error if one is unknown or needs an
    element or ion the mixture lacks); ``"none"`` or an empty list: no molecules;
    ``True``/``False`` mean ``"default"``/``"none"``.  Barklem & Collet processes that involve
    an atomic negative ion other than H- (C-, O-, Si-, S-) cannot be used, because the atomic
    network has no such ions; in the full sets the NASA species of the same formula replaces
    such a diatomic (it is formed from neutral atoms and electrons), in "diatomics" it is skipped.
    """
    db = database or default_molecule_database()
    present = set(int(z) for z in composition.Z)

    def usable(m) -> str | None:
        missing = [SYMBOLS[z] for z in m.elements if z not in present]
        if missing:
            return f"element(s) {', '.join(missing)} not in the mixture"
        for z, q in zip(m.component_Z, m.component_charges):
            try:
                network.species_index((z, q))
            except (UnknownSpeciesError, InputError):
                return (f"its process {m.name} = {' + '.join(m.components)} needs "
                        f"{SYMBOLS[z]}{'+' * q if q > 0 else '-' * (-q)}, which the atomic "
                        "network does not include")
        return None

    skipped: list[str] = []
    if isinstance(molecules, (bool, np.bool_)):      # molecules=True / False (table specs)
        molecules = "default" if molecules else "none"
    if isinstance(molecules, str):
        if molecules not in MOLECULE_SETS:
            raise InputError(f"molecules must be one of {MOLECULE_SETS} or a list of names "
                             f"such as ['H2', 'CO'], got {molecules!r}")
        if molecules == "none":
            return [], skipped
        pool = ([db[n] for n in DEFAULT_MOLECULES] if molecules == "abundant"
                else db.all_molecules())
        out, unusable = [], {}
        for m in pool:
            why = usable(m)
            if why is None:
                out.append(m)
            elif not why.startswith("element"):
                unusable[_key(*parse_formula(m.name))] = f"{m.name}: {why}"
        if molecules in ("default", "all"):
            have = {_key(*parse_formula(m.name)) for m in out}
            thermo = thermo or default_thermo_database()
            for s in polyatomic_candidates(thermo):
                k = _key({SYMBOLS[z]: c for z, c in s.composition.items()}, s.charge)
                if k in have or usable(s) is not None:
                    continue
                unusable.pop(k, None)        # the NASA species replaces an unusable diatomic
                out.append(s)
        return out, skipped + list(unusable.values())
    try:
        names = list(molecules)
    except TypeError:
        raise InputError(f"molecules must be one of {MOLECULE_SETS} or a list of names, got "
                         f"{molecules!r}") from None
    out, seen = [], set()
    for n in names:
        try:
            m = db.molecule(n)
        except UnknownSpeciesError as exc:
            thermo = thermo or default_thermo_database()
            if n not in thermo:
                raise UnknownSpeciesError(f"{exc}; nor is {n!r} a gas species of the NASA "
                                          "polynomials") from None
            m = thermo.species(n)
            if m not in polyatomic_candidates(thermo):
                raise InputError(f"{m.name} is an atom, a positive atomic ion, H- or the "
                                 "electron: the atomic network holds it, not molecules=")
        why = usable(m)
        if why is not None:
            raise InputError(f"molecule {m.name}: {why}; remove it from molecules= or add the "
                             "element to the composition")
        if m.name not in seen:
            seen.add(m.name)
            out.append(m)
    return out, skipped


#: the condensed compounds of ``condensates=True``: the main carriers of Al, Ca, Ti, Fe, Mg, Si,
#: C and H2O in cool gas (every phase of each in the data takes part, the most stable one wins)
DEFAULT_CONDENSATES = ("Al2O3", "CaO", "TiO2", "MgAl2O4", "Mg2SiO4", "MgSiO3", "SiO2", "MgO",
                       "Fe", "Ni", "FeS", "C", "H2O")


def select_condensates(composition: Composition, condensates: Any,
                       thermo: ThermoDatabase | None = None) -> list[list[ThermoSpecies]]:
    """Resolve ``condensates=``: False/None/"none" (no condensation), True/"default"
    (:data:`DEFAULT_CONDENSATES` the mixture can form), "all" (every condensed compound of the
    data made of the mixture's elements, whose atoms the gas data hold), or a list of formulas
    (``["Al2O3", "Fe"]``).  Returns the phases of each compound."""
    if condensates is None or condensates is False or (isinstance(condensates, str)
                                                       and condensates == "none"):
        return []
    cdb = thermo or default_thermo_database(condensed=True)
    gas = default_thermo_database()
    present = set(int(z) for z in composition.Z)
    by_formula: dict[str, list[ThermoSpecies]] = {}
    for sp in cdb:
        by_formula.setdefault(sp.formula, []).append(sp)
    if condensates is True or condensates == "default":
        names, strict = list(DEFAULT_CONDENSATES), False
    elif condensates == "all":
        names, strict = list(by_formula), False
    elif isinstance(condensates, str):
        raise InputError(f"condensates must be True, False, 'default', 'all', 'none' or a list "
                         f"of formulas such as ['Al2O3', 'Fe'], got {condensates!r}")
    else:
        names, strict = list(condensates), True
    out = []
    for f in names:
        phases = by_formula.get(f)
        if phases is None:
            raise InputError(f"no condensed phase {f!r} in the data (formulas such as 'Al2O3', "
                             "'Mg2SiO4', 'Fe', 'C', 'H2O')")
        els = phases[0].elements
        if not set(els) <= present or not all(gas.has_atom(z) for z in els):
            if strict:
                raise InputError(f"condensate {f}: its elements are not all in the mixture (or "
                                 "have no gas atoms in the data)")
            continue
        out.append(phases)
    return out


# ------------------------------------------------------------------------------ the solve
def solve_molecular(network: AtomicNetwork, t: np.ndarray, v: np.ndarray, closure: Closure, *,
                    molecules: Any = "default", lowering: bool = False,
                    tolerance: float = 1e-12, max_passes: int = 200,
                    molecule_database: MoleculeDatabase | None = None, condensates: Any = False):
    """Equilibrium of atoms, ions, H- and molecules at the states (``t``, ``v``).

    Called by :func:`sahaboltz.equilibrium.solve_equilibrium` with checked, broadcast arrays;
    ``molecules`` is ``"default"``, ``"all"``, ``"none"`` or a list of molecule names (see
    :func:`select_molecules`).  Only the ideal-gas options are supported with molecules
    (``truncation="plain"``, no lowering): at the densities where molecules survive,
    pressure ionization is negligible.

    Returns
    -------
    MolecularEquilibriumState (or the atoms-only state for an empty molecule set)

    Raises
    ------
    InputError
        Bad arguments; temperatures below :data:`T_MIN`; a molecule the mixture cannot form.
    States that cannot be solved carry a status and a reason in the result (and NaN
    values); the front raises for them unless ``errors="mask"``.
    """
    if lowering or "lowering_ev" in network.scheme.inputs:
        raise InputError("molecules are solved without Debye-Hueckel lowering (at the densities "
                         "where molecules survive it is negligible): drop lowering=True or the "
                         "'lowered' truncation")
    if np.any(t < T_MIN):
        raise InputError(f"temperature {t[t < T_MIN].min():g} K is below {T_MIN:g} K, the lowest "
                         "temperature of the molecular equilibrium")
    composition = network.composition
    mols, skipped = select_molecules(composition, molecules, network, molecule_database)
    conds = select_condensates(composition, condensates)
    if conds and not mols:
        raise InputError("condensates need molecules in the gas: add molecules='default'")
    if not mols:
        return solve_atomic(network, t, v, closure, tolerance=tolerance, max_passes=max_passes)
    # starting values from the atoms-only solution.  With a given electron pressure that
    # solution may not exist (molecules can leave more free electrons than atoms alone, e.g.
    # by starving H- of H atoms); those states start from N = e^15 n_e instead.
    shape = t.shape
    tf, vf = t.ravel().copy(), v.ravel().copy()
    n = tf.size
    status = np.zeros(n, dtype=np.int8)
    reason = np.full(n, "", dtype=object)
    atoms = solve_atomic(network, tf, vf, closure, tolerance=max(tolerance, 1e-14),
                         max_passes=_START_PASSES)
    x0, w0 = atoms.log_ne.copy(), np.log(atoms.nuclei_density)
    start_bad = ~atoms.converged
    if start_bad.any():
        if closure.fixes == "electrons":
            x0[start_bad] = np.log(closure.electrons(tf, vf))[start_bad]
            w0[start_bad] = x0[start_bad] + 15.0
        else:
            status[start_bad] = NOT_CONVERGED
            for i in np.flatnonzero(start_bad):
                reason[i] = f"the atoms-only starting solution failed: {atoms.reason[i]}"
    sel = np.flatnonzero(status == CONVERGED)
    system = MolecularSystem(network, mols, conds)
    out = {"y": np.full((len(system.mol_chains), n), np.nan), "g": np.zeros((len(conds), n)),
           "x": np.full(n, np.nan),
           "w": np.full(n, np.nan), "passes": np.zeros(n, dtype=int),
           "resid": np.full(n, np.inf)}
    if sel.size:
        ts, vs = tf[sel], vf[sel]
        sol = system.solve(ts, vs, closure, x0[sel], w0[sel], tolerance, max_passes)
        # partition functions that depend on n_e are held at the start's n_e in each solve:
        # repeat from the solution until it reproduces itself (the dependence is weak here)
        for _ in range(_MAX_REFREEZE if network.scheme.density_dependent else 0):
            # again for the states solved so far, within what is left of their passes
            go = np.flatnonzero(sol["ok"] & (sol["passes"] < max_passes))
            if not go.size:
                break
            previous = sol["x"][go]
            left = max(1, max_passes - int(sol["passes"][go].max()))
            again = system.solve(ts[go], vs[go], closure, previous, sol["w"][go], tolerance,
                                 left, passes=sol["passes"][go])
            for key in ("x", "w", "passes", "resid", "ok"):
                sol[key][go] = again[key]
            sol["y"][:, go] = again["y"]
            sol["g"][:, go] = again["g"]
            if np.nanmax(np.abs(again["x"] - previous), initial=0.0) <= tolerance:
                break
        for key in ("x", "w", "passes", "resid"):
            out[key][sel] = sol[key]
        out["y"][:, sel] = sol["y"]
        out["g"][:, sel] = sol["g"]
        bad = sel[~sol["ok"]]
        status[bad] = NOT_CONVERGED
        for i in bad:
            reason[i] = (f"no convergence in {int(out['passes'][i])} passes (largest log "
                         f"residual {out['resid'][i]:.3g}); try molecules='default' or fewer "
                         "molecules, or a looser tolerance")
    failed = status != CONVERGED
    out["x"][failed] = out["w"][failed] = np.nan
    out["y"][:, failed] = np.nan
    out["g"][:, failed] = np.nan
    return MolecularEquilibriumState(
        network=network, temperature=t.copy(), log_ne=out["x"].reshape(shape),
        nuclei_density=np.exp(out["w"]).reshape(shape), closure=closure.name,
        closure_value=v.copy(), lowering=False, debye_length=None,
        report=SolveReport(out["passes"].reshape(shape), out["resid"].reshape(shape)),
        status=status, reason=reason,
        system=system, log_neutral=out["y"].reshape((-1,) + shape), skipped_molecules=skipped,
        absent=system.constants.absent(tf).reshape((-1,) + shape),
        condensed=out["g"].reshape((-1,) + shape))


class MolecularSystem:
    """The unknowns, T-only tables and residual/Jacobian of the molecular equilibrium."""

    def __init__(self, network: AtomicNetwork, molecules: Sequence,
                 condensates: Sequence[Sequence[ThermoSpecies]] = ()):
        self.network = network
        self.molecules = list(molecules)
        self.constants = MoleculeConstants(self.molecules, above_range="absent")
        self.condensates = [list(c) for c in condensates]
        self.cond_constants = CondensateConstants(self.condensates)
        zs = sorted({z for m in self.molecules for z in m.component_Z}
                    | {z for c in self.condensates for z in c[0].composition})
        self.mol_chains = [network.chain_of(z) for z in zs]          # elements in M, by Z
        self.other_chains = [c for c in network.chains if c.Z not in set(zs)]
        pos = {c.Z: i for i, c in enumerate(self.mol_chains)}
        nm, nk = len(self.molecules), len(self.mol_chains)
        self.nu = np.zeros((nm, nk))
        for i, m in enumerate(self.molecules):
            for z in m.component_Z:
                self.nu[i, pos[z]] += 1.0
        w = np.einsum("ik,ij->ikj", self.nu, self.nu).reshape(nm, nk * nk)
        self._pairs = np.flatnonzero(w.any(axis=0))
        self._pair_weights = w[:, self._pairs]
        self.q_mol = np.array([float(m.charge) for m in self.molecules])
        self.alpha = np.array([c.fraction for c in self.mol_chains])
        # condensed compounds: atoms of each element per formula unit, (n_cond, nk)
        self.V = np.zeros((len(self.condensates), nk))
        for j, c in enumerate(self.condensates):
            for z, cnt in c[0].composition.items():
                self.V[j, pos[z]] = cnt
        self.cond_floor = np.array([1e-13 * (self.alpha[row > 0] / row[row > 0]).min()
                                    for row in self.V])
        wv = np.einsum("ik,ij->ikj", self.V, self.V).reshape(len(self.condensates), nk * nk)
        self._vpairs = np.flatnonzero(wv.any(axis=0))
        self._vpair_weights = wv[:, self._vpairs]
        # component stages: (chain position, row of the stage in that chain)
        self._comp = [[(pos[z], int(np.flatnonzero(self.mol_chains[pos[z]].charges == q)[0]))
                       for z, q in zip(m.component_Z, m.component_charges)] for m in self.molecules]

    @property
    def names(self) -> list[str]:
        return [m.name for m in self.molecules]

    @property
    def condensate_names(self) -> list[str]:
        """The condensed compounds, by formula (``"Al2O3"``, ``"Fe"``, ``"C"``)."""
        return [c[0].formula for c in self.condensates]

    @property
    def n_cond(self) -> int:
        return len(self.condensates)

    def condensed(self, tb: dict, y: np.ndarray, mu: np.ndarray):
        """Condensed amounts gamma_j = mu / (ln K_j - V_j y) per nucleus (the log-barrier's
        multipliers) and the curvature sum_j V_jk V_ji mu / gap_j^2, (m, nk, nk)."""
        b = tb["b"]
        fin = np.isfinite(b)
        gap = np.where(fin, np.where(fin, b, 0.0) - self.V @ y, np.inf)
        with np.errstate(divide="ignore", invalid="ignore"):
            gam = np.where(fin, mu[None, :] / gap, 0.0)
            w2 = np.where(fin, mu[None, :] / gap ** 2, 0.0)
        nk = self.V.shape[1]
        curv = np.zeros((y.shape[1], nk * nk))
        curv[:, self._vpairs] = w2.T @ self._vpair_weights
        return gam, gap, curv.reshape(-1, nk, nk)

    def gram(self, n_m: np.ndarray) -> np.ndarray:
        """sum_i nu_ik n_im nu_ij for every state m, shape (m, nk, nk).  Only the element pairs
        that share a molecule are nonzero: one matrix product over those pairs (a batched
        (nk x nm)(nm x nk) product is ten times slower for hundreds of molecules)."""
        nk = self.nu.shape[1]
        out = np.zeros((n_m.shape[1], nk * nk))
        out[:, self._pairs] = n_m.T @ self._pair_weights
        return out.reshape(-1, nk, nk)

    # -- temperature-only tables -------------------------------------------------------------
    def tables(self, t: np.ndarray, x0: np.ndarray | None = None, others: bool = True,
               n_e: np.ndarray | None = None) -> dict:
        """Tables for the states ``t``: stages relative to the neutral atom, packed.

        They depend on T alone unless the partition functions depend on n_e (occupation
        probabilities); those are evaluated at ``n_e`` (default exp(x0)) and held fixed in
        the solve, which :func:`solve_molecular` repeats until n_e reproduces itself.

        With ``x0`` (a starting ln n_e per state), ln n_e is confined to the window
        x0 +- :data:`_X_WINDOW` and each chain keeps only the stages that come within e^-60 of
        its most populated stage somewhere in that window: at
        T <= 10,000 K that is a handful of the up to 93 stages, which makes every residual
        evaluation cheap.  ``others=False`` leaves out the elements not in molecules.
        """
        net = self.network
        ut, inv = np.unique(t, return_inverse=True)
        ne = n_e if n_e is not None or x0 is None else np.exp(x0)

        def rel(c):
            i0 = int(np.flatnonzero(c.charges == 0)[0])
            if net.scheme.density_dependent:
                tab = net.log_c(c, t, ne)
                return tab - tab[i0]
            tab = net.log_c(c, ut)
            return (tab - tab[i0])[:, inv]

        lmol = [rel(c) for c in self.mol_chains]
        ln_kn = self.constants.ln_kn(ut)[:, inv]
        s = -ln_kn
        for i, comps in enumerate(self._comp):
            for k, row in comps:
                s[i] = s[i] + lmol[k][row]
        b = (self.cond_constants.ln_kn(ut)[:, inv] if self.n_cond
             else np.zeros((0, t.size)))
        out = {"s": s, "b": b, "t": t, "full_mol": lmol,
               "full_oth": [rel(c) for c in self.other_chains] if others else None}
        return self.repack(out, x0)

    def repack(self, tab: dict, x0: np.ndarray | None) -> dict:
        """(Re)build the trimmed stage tables of ``tab`` for a window centred on ``x0``."""
        m = tab["t"].size
        tab["mol"] = _pack(self.mol_chains, tab["full_mol"], x0, m)
        if tab["full_oth"] is not None:
            tab["oth"] = _pack(self.other_chains, tab["full_oth"], x0, m)
        if x0 is not None:
            tab["xlo"], tab["xhi"] = x0 - _X_WINDOW, x0 + _X_WINDOW
        return tab

    # -- residual and Jacobian ---------------------------------------------------------------
    def evaluate(self, tab: dict, y: np.ndarray, x: np.ndarray, w: np.ndarray,
                 closure: Closure, target: np.ndarray | None, want_jacobian: bool = True,
                 mu: np.ndarray | None = None, z: np.ndarray | None = None):
        """Residuals R (n_eq, m) and Jacobian J (m, n_eq, n_unknown) at (y, x, w).

        Unknown order: y_1..y_K, then x unless the closure fixes n_e, then w unless it fixes N.
        With condensates the element totals include gamma_j N (z = ln gamma further unknowns,
        after w) and a row per compound: V_j y + mu / gamma_j - ln K_j = 0 (saturation up to
        the barrier's gap mu / gamma_j, ~1e-14 at the end for a condensed compound).
        """
        nk, m = y.shape
        # atomic moments of the molecular elements
        ln_at, qm, qp, qn, q2p, q2n = _packed_moments(*tab["mol"][:2], x)
        ln_at += y                                      # ln(atoms of k, all stages)
        # molecules
        ln_m = tab["s"] + self.nu @ y - np.multiply.outer(self.q_mol, x)
        ln_m = np.minimum(ln_m, 700.0)                  # guard overflow on wild trial points
        n_m = np.exp(ln_m)
        at = np.exp(ln_at)
        ln_n = w
        n_nuc = np.exp(ln_n)
        # other elements: charge moments from x alone
        qo, lo_, fr = tab["oth"]
        if fr.size:
            _, a1, a2, a3, a4, a5 = _packed_moments(qo, lo_, x)
            op, on = fr @ a2, fr @ a3
            odp = fr @ (-a4 + a1 * a2)                   # d<q+>/dx per nucleus
            odn = fr @ (a5 + a1 * a3)                    # d<q->/dx per nucleus
        else:
            op = on = odp = odn = np.zeros(m)
        ofrac = float(fr.sum())
        ne = np.exp(x)
        # element totals
        tot = at + self.nu.T @ n_m                        # (nk, m)
        nc = self.n_cond
        if nc:
            fin = np.isfinite(tab["b"])
            gam = np.where(fin, np.exp(np.minimum(z, 0.0)), 0.0)
            cond = n_nuc[None, :] * (self.V.T @ gam)      # nuclei of each element condensed
            tot = tot + cond
            gapz = mu[None, :] * np.exp(-np.maximum(z, -700.0))
            r_c = np.where(fin, self.V @ y + gapz - np.where(fin, tab["b"], 0.0), 0.0)
        r_el = np.log(tot) - np.log(self.alpha)[:, None] - ln_n[None, :]
        # charges
        q_pos_m = np.where(self.q_mol > 0, self.q_mol, 0.0)
        q_neg_m = np.where(self.q_mol < 0, -self.q_mol, 0.0)
        pos = (at * qp).sum(axis=0) + n_nuc * op + q_pos_m @ n_m
        neg = ne + (at * qn).sum(axis=0) + n_nuc * on + q_neg_m @ n_m
        r_ch = np.log(pos) - np.log(neg)
        rows = [r_el, r_ch[None, :]]
        fix_x = closure.fixes == "electrons"
        fix_w = closure.fixes == "nuclei"
        if closure.fixes == "particles":
            part = at.sum(axis=0) + n_nuc * ofrac + n_m.sum(axis=0) + ne
            rows.append((np.log(part) - np.log(target))[None, :])
        if nc:
            rows.append(r_c)
        r = np.concatenate(rows, axis=0)
        if not want_jacobian:
            return r, None
        n_xw = (0 if fix_x else 1) + (0 if fix_w else 1)
        n_unk = nk + n_xw + nc
        jac = np.zeros((m, r.shape[0], n_unk))
        # d/dy
        # sum_i nu_ik nu_ij n_i / T_k
        jac[:, :nk, :nk] = self.gram(n_m) / tot.T[:, :, None]
        idx = np.arange(nk)
        jac[:, idx, idx] += (at / tot).T
        dpos_y = (at * qp).T + (n_m.T @ (self.nu * q_pos_m[:, None]))
        dneg_y = (at * qn).T + (n_m.T @ (self.nu * q_neg_m[:, None]))
        jac[:, nk, :nk] = dpos_y / pos[:, None] - dneg_y / neg[:, None]
        if closure.fixes == "particles":
            jac[:, nk + 1, :nk] = (at.T + n_m.T @ self.nu) / part[:, None]
        col = nk
        if not fix_x:
            dtot_x = -(at * qm) - (self.nu * self.q_mol[:, None]).T @ n_m
            jac[:, :nk, col] = (dtot_x / tot).T
            dpos_x = -(at * q2p).sum(axis=0) + n_nuc * odp - (q_pos_m * self.q_mol) @ n_m
            dneg_x = ne + (at * q2n).sum(axis=0) + n_nuc * odn - (q_neg_m * self.q_mol) @ n_m
            jac[:, nk, col] = dpos_x / pos - dneg_x / neg
            if closure.fixes == "particles":
                dpart_x = -(at * qm).sum(axis=0) - self.q_mol @ n_m + ne
                jac[:, nk + 1, col] = dpart_x / part
            col += 1
        if not fix_w:
            jac[:, :nk, col] = -1.0 + (cond / tot).T if nc else -1.0
            jac[:, nk, col] = n_nuc * op / pos - n_nuc * on / neg
            if closure.fixes == "particles":
                jac[:, nk + 1, col] = n_nuc * ofrac / part
        if nc:
            c0, r0 = nk + n_xw, r.shape[0] - nc
            jac[:, :nk, c0:] = (n_nuc[:, None, None] * self.V.T[None] * gam.T[:, None, :]
                                / tot.T[:, :, None])
            jac[:, r0:, :nk] = np.where(fin.T[:, :, None], self.V[None], 0.0)
            jac[:, r0:, c0:] = (np.where(fin, -gapz, 1.0).T[:, :, None] * np.eye(nc)[None])
        return r, jac

    # -- Newton ------------------------------------------------------------------------------
    def solve(self, t, v, closure, x0, w0, tol, max_passes, passes=None) -> dict:
        """Solve the flat states; ``ok`` says which converged (the others keep their last
        iterate and residual)."""
        n = t.size
        out_y = np.empty((len(self.mol_chains), n))
        out_g = np.zeros((self.n_cond, n))
        out_x, out_w = x0.copy(), w0.copy()
        passes = np.zeros(n, dtype=int) if passes is None else passes.copy()
        resid = np.full(n, np.inf)
        ok = np.zeros(n, dtype=bool)
        order = np.argsort(t, kind="stable")
        for c0 in range(0, n, _CHUNK):
            idx = order[c0:c0 + _CHUNK]
            y, x, w, p, r, rr = self._solve_chunk(t[idx], v[idx], closure, x0[idx], w0[idx], tol,
                                              max_passes)
            out_y[:, idx], out_x[idx], out_w[idx], resid[idx] = y, x, w, rr
            out_g[:, idx] = self._last_gamma
            passes[idx] += p
            ok[idx] = np.isfinite(r)
        ok &= np.isfinite(out_x) & np.isfinite(out_w)
        return {"y": out_y, "x": out_x, "w": out_w, "g": out_g, "passes": passes, "resid": resid,
                "ok": ok}

    def _fixed(self, t, v, closure):
        """(fixed ln N or None, fixed free-particle density or None) for the closure's kind."""
        if closure.fixes == "nuclei":
            return np.log(closure.nuclei(self.network.composition, v)), None
        if closure.fixes == "particles":
            return None, closure.particles(t, v)
        return None, None

    def _solve_chunk(self, t, v, closure, x, w, tol, max_passes):
        m = t.size
        w_fixed, target = self._fixed(t, v, closure)
        if w_fixed is not None:
            w = w_fixed.copy()
        if closure.fixes == "electrons":
            x = np.log(closure.electrons(t, v))
        tab = self.tables(t, x0=x)
        # start: neutral densities of the atoms-only solution
        y = np.log(self.alpha)[:, None] + w[None, :] - _packed_moments(*tab["mol"][:2], x)[0]
        y = self._relax_elements(tab, y, x, w)
        nc = self.n_cond
        mu = np.full(m, _MU_START)
        z = np.full((nc, m), np.nan)          # ln(condensed formula units per nucleus)
        if nc:
            y = self._feasible(tab, y)
        passes = np.zeros(m, dtype=int)
        resid = np.full(m, np.inf)
        active = np.arange(m)
        nk = y.shape[0]
        fix_x = closure.fixes == "electrons"
        fix_w = w_fixed is not None

        def sub(d, sel):
            return {"s": d["s"][:, sel], "b": d["b"][:, sel], "t": d["t"][sel], "xlo": d["xlo"][sel],
                    "xhi": d["xhi"][sel],
                    "mol": (d["mol"][0], d["mol"][1][:, :, sel], d["mol"][2]),
                    "oth": (d["oth"][0], d["oth"][1][:, :, sel], d["oth"][2])}

        damp = np.ones(m)                     # per-state outer step factor (trust region)
        prev = np.full(m, np.inf)
        last_err = np.full(m, np.inf)
        stall = np.zeros(m, dtype=int)
        accepted = np.zeros(m, dtype=bool)
        # aim a decade below the requested tolerance (so that residuals recomputed from the
        # state stay inside it); accept the requested one once progress stalls at rounding
        goal = max(0.1 * tol, 1e-14)
        for _ in range(max_passes):
            # ln n_e ran to the edge of its window (electron-poor gas, where molecules remove
            # the donors): re-centre the window and re-trim the stage tables
            edge = (x[active] - tab["xlo"][active] < 1.0) | (tab["xhi"][active] - x[active] < 1.0)
            if edge.any():
                centre = np.where(np.isin(np.arange(m), active[edge]), x,
                                  0.5 * (tab["xlo"] + tab["xhi"]))
                tab = self.repack(tab, centre)
            tb = sub(tab, active)
            tg = None if target is None else target[active]
            if nc:
                ya, za, ma = self._inner_pd(tb, y[:, active], z[:, active], x[active],
                                            w[active], mu[active], goal)
                z[:, active], mu[active] = za, ma
            else:
                ya = self._inner(tb, y[:, active], x[active], w[active], goal)
                za = ma = None
            y[:, active] = ya
            xa, wa = x[active], w[active]
            r, jac = self.evaluate(tb, ya, xa, wa, closure, tg, mu=ma, z=za)
            passes[active] += 1
            err = np.abs(r).max(axis=0)
            if nc:      # not done before the barrier parameter is at its end value
                err = np.where(ma > _MU_END, np.maximum(err, 1.0), err)
            resid[active] = err
            stalled = err > 0.5 * last_err[active]
            stall[active] = np.where(stalled, stall[active] + 1, 0)
            last_err[active] = err
            # converged; or stuck at rounding within the tolerance; or stuck for several passes
            # at the conditioning limit of a near-stoichiometric mixture (e.g. C/O = 1 exactly,
            # where free C and O are a tiny difference of nearly equal totals): residual kept
            # in the report
            done = ((err <= goal) | ((err <= tol) & stalled)
                    | ((err <= _STALL_ACCEPT) & (stall[active] >= 4)))
            accepted[active[done]] = True
            if done.all():
                break
            # outer residual (charge, pressure) grew: shrink this state's next step
            outer = np.abs(r[nk:r.shape[0] - nc]).max(axis=0)
            grew = outer > prev[active]
            damp[active] = np.where(grew, 0.5 * damp[active], np.minimum(1.0, 2.0 * damp[active]))
            prev[active] = outer
            keep = ~done
            active = active[keep]
            r, jac = r[:, keep], jac[keep]
            ya, xa, wa = ya[:, keep], xa[keep], wa[keep]
            tb = sub(tab, active)
            # at a point where the element equations hold, the full Newton step is the Schur
            # complement step in (x, w); the y part is its linear prediction, which the next
            # inner solve corrects
            step = _solve_batched(jac, -r.T)               # (m_act, n_unk)
            n_xw = step.shape[1] - nk - nc
            outer_step = (np.abs(step[:, nk:nk + n_xw]).max(axis=1) if n_xw
                          else np.zeros(active.size))
            scale = np.minimum(damp[active], np.minimum(
                _MAX_OUTER_STEP / np.maximum(outer_step, 1e-300),
                _MAX_STEP / np.maximum(np.abs(step[:, :nk]).max(axis=1), 1e-300)))
            step *= np.minimum(scale, 1.0)[:, None]
            y[:, active] = ya + step[:, :nk].T
            col = nk
            if not fix_x:
                x[active] = np.clip(xa + step[:, col], tb["xlo"], tb["xhi"])
                col += 1
            if not fix_w:
                w[active] = wa + step[:, col]
            if nc:      # the linear prediction of ln gamma (the inner solve corrects it)
                z[:, active] = z[:, active] + np.clip(step[:, nk + n_xw:].T, -_MAX_STEP, _MAX_STEP)
        if nc:
            # what the barrier leaves of an undersaturated compound (mu / gap, ~1e-22) is no
            # condensate: below 1e-13 of its scarcest element it is set to 0 (conservation
            # changes by less than 1e-13)
            gam = np.where(np.isfinite(tab["b"]), np.exp(np.minimum(z, 0.0)), 0.0)
            self._last_gamma = np.where(gam > self.cond_floor[:, None], gam, 0.0)
        else:
            self._last_gamma = np.zeros((0, m))
        return y, x, w, passes, np.where(accepted, resid, np.inf), resid

    def _inner_pd(self, tb, y, z, x, w, mu, tol):
        """Element and saturation equations at fixed n_e and N with condensates.

        States without condensed amounts yet (z NaN) start on the log-barrier path at
        mu = _MU_START (:meth:`_inner`, convex, from the feasible start of
        :meth:`_feasible`); then primal-dual Newton in (y, z = ln gamma) on

            ln(gas_k + N sum_j V_jk gamma_j) = ln(alpha_k N),   V_j y + mu / gamma_j = ln K_j,

        lowering mu a hundredfold per step to _MU_END.  gamma and the gap mu / gamma stay
        positive by construction; a compound whose gas is clearly undersaturated gets its
        gamma = mu / gap directly.  Returns (y, z, mu).
        """
        y, z, mu = y.copy(), z.copy(), mu.copy()
        nk, m = y.shape
        nc = self.n_cond
        b = tb["b"]
        fin = np.isfinite(b)
        bb = np.where(fin, b, 0.0)
        new = np.isnan(z).any(axis=0)
        if new.any():
            sel = np.flatnonzero(new)
            ts = {"s": tb["s"][:, sel], "b": b[:, sel],
                  "mol": (tb["mol"][0], tb["mol"][1][:, :, sel], tb["mol"][2])}
            m0 = np.full(sel.size, _MU_START)
            y[:, sel] = self._inner(ts, y[:, sel], x[sel], w[sel], tol, mu=m0)
            _, gap, _ = self.condensed(ts, y[:, sel], m0)
            z[:, sel] = np.where(np.isfinite(gap), np.log(m0)[None, :] - np.log(np.where(
                np.isfinite(gap), gap, 1.0)), -700.0)
            mu[sel] = _MU_START
        n_nuc = np.exp(w)
        ln_goal = np.log(self.alpha)[:, None] + w[None, :]
        ln_at0 = _packed_moments(*tb["mol"][:2], x)[0]
        qx = np.multiply.outer(self.q_mol, x)
        act = np.arange(m)
        idx = np.arange(nk)
        for _it in range(_MAX_COND_ITER):
            mu[act] = np.maximum(mu[act] * 1e-2, _MU_END)
            ya, za, ma, fa = y[:, act], z[:, act], mu[act], fin[:, act]
            n_m = np.exp(np.minimum(tb["s"][:, act] + self.nu @ ya - qx[:, act], 700.0))
            at = np.exp(np.minimum(ya + ln_at0[:, act], 700.0))
            gam = np.where(fa, np.exp(np.minimum(za, 0.0)), 0.0)
            nn = n_nuc[act]
            tot = at + self.nu.T @ n_m + nn[None, :] * (self.V.T @ gam)
            gapz = ma[None, :] * np.exp(-np.maximum(za, -700.0))
            r = np.concatenate([np.log(tot) - ln_goal[:, act],
                                np.where(fa, self.V @ ya + gapz - bb[:, act], 0.0)])
            err = np.abs(r).max(axis=0)
            done = (err <= tol) & (ma <= _MU_END)
            if done.all():
                break
            keep = ~done
            act, ya, za, ma, fa = act[keep], ya[:, keep], za[:, keep], ma[keep], fa[:, keep]
            n_m, at, gam, nn, tot, gapz, r = (n_m[:, keep], at[:, keep], gam[:, keep], nn[keep],
                                              tot[:, keep], gapz[:, keep], r[:, keep])
            ma_ = act.size
            jac = np.zeros((ma_, nk + nc, nk + nc))
            jac[:, :nk, :nk] = self.gram(n_m) / tot.T[:, :, None]
            jac[:, idx, idx] += (at / tot).T
            jac[:, :nk, nk:] = nn[:, None, None] * self.V.T[None] * gam.T[:, None, :] / tot.T[:, :, None]
            jac[:, nk:, :nk] = np.where(fa.T[:, :, None], self.V[None], 0.0)
            jac[:, nk:, nk:] = np.where(fa, -gapz, 1.0).T[:, :, None] * np.eye(nc)[None]
            d = _solve_batched(jac, -r.T)
            lam = np.minimum(1.0, _MAX_STEP / np.maximum(np.abs(d).max(axis=1), 1e-300))
            yn = ya + (lam[:, None] * d[:, :nk]).T
            zn = za + (lam[:, None] * d[:, nk:]).T
            # clearly undersaturated compounds: gamma from the gap itself
            gap = bb[:, act] - self.V @ yn
            free = fa & (gap > 1e-3)
            zn = np.where(free, np.log(ma)[None, :] - np.log(np.where(free, gap, 1.0)), zn)
            y[:, act], z[:, act] = yn, np.minimum(zn, 0.0)
        return y, z, mu

    def _feasible(self, tab, y):
        """Lower the free atoms of each supersaturated compound's scarcest element until the
        compound is undersaturated by e (the barrier's start needs a feasible point); lowering
        an element only lowers the other compounds' saturation, so one sweep suffices."""
        b = tab["b"]
        y = y.copy()
        for j in range(self.n_cond):
            fin = np.isfinite(b[j])
            over = np.where(fin, self.V[j] @ y - np.where(fin, b[j], 0.0) + 1.0, 0.0)
            els = np.flatnonzero(self.V[j])
            k = els[np.argmin(self.alpha[els])]
            y[k] -= np.maximum(over, 0.0) / self.V[j, k]
        return y

    def _inner(self, tb, y, x, w, tol, max_iter: int = 100, mu: np.ndarray | None = None):
        """Element equations at fixed n_e and N: minimise the convex function

            G(y) = sum_k atoms_k(y) + sum_m n_m(y) - sum_k alpha_k N y_k
                   [ - mu N sum_j ln(ln K_j - V_j y)   with condensates ],

        whose gradient is (nuclei of k found - nuclei of k given) and whose Hessian
        diag(atoms) + sum_m n_m nu_m nu_m^T is positive definite: Newton with a backtracking
        line search on G converges from any start.  G differences are formed with expm1, so
        the line search stays meaningful down to the rounding level.

        With condensates the last term is a log barrier for "no compound supersaturated"
        (V y <= ln K): its gradient adds the condensed nuclei N V^T gamma, gamma_j =
        mu / (ln K_j - V_j y), so at the minimum the elements are conserved with gamma_j N
        formula units of compound j condensed, and a condensed compound's gas is saturated to
        ln S = -mu / gamma_j.  The convex problem keeps Newton with line search (steps
        shortened to stay feasible); it is used at mu = _MU_START only, to start
        :meth:`_inner_pd`, because for small mu the gap ln K - V y is no longer resolved in
        double precision.
        """
        y = y.copy()
        nk, m = y.shape
        nc = self.n_cond
        ln_at0 = _packed_moments(*tb["mol"][:2], x)[0]
        ln_b = np.log(self.alpha)[:, None] + w[None, :]
        b = np.exp(ln_b)
        qx = np.multiply.outer(self.q_mol, x)
        act = np.arange(m)
        eye = np.eye(nk)
        for _i in range(max_iter):
            ya, s_, qa, la, lb, ba = y[:, act], tb["s"][:, act], qx[:, act], ln_at0[:, act], ln_b[:, act], b[:, act]
            n_m = np.exp(np.minimum(s_ + self.nu @ ya - qa, 700.0))
            at = np.exp(np.minimum(ya + la, 700.0))
            tot = at + self.nu.T @ n_m
            if nc:
                tba = {"b": tb["b"][:, act]}
                gam, gap, curv = self.condensed(tba, ya, mu[act])
                tot = tot + np.exp(w[act])[None, :] * (self.V.T @ gam)
            res = np.log(tot) - lb
            ok = np.abs(res).max(axis=0) <= tol
            if ok.all():
                break
            keep = ~ok
            act, ya, n_m, at, tot, ba, s_, qa, la = (act[keep], ya[:, keep], n_m[:, keep],
                                                    at[:, keep], tot[:, keep], ba[:, keep],
                                                    s_[:, keep], qa[:, keep], la[:, keep])
            grad = tot - ba                                            # (nk, ma)
            hess = self.gram(n_m)
            hess += at.T[:, :, None] * eye[None]
            if nc:
                gap, curv = gap[:, keep], curv[keep]
                nn = np.exp(w[act])
                hess += nn[:, None, None] * curv
            dsc = 1.0 / np.sqrt(np.einsum("mkk->mk", hess))
            hs = hess * dsc[:, :, None] * dsc[:, None, :]
            # a ridge of 1e-10 (relative): where one molecule holds nearly all of two elements
            # (CO when C < O) the Hessian is singular to working precision; the ridge turns
            # the free direction (how the rest splits between C and O) into a long, capped
            # descent step instead of no step at all
            hs += _RIDGE * eye[None]
            d = -_solve_batched(hs, (grad.T * dsc)) * dsc              # (ma, nk)
            big = np.abs(d).max(axis=1)
            d *= np.minimum(1.0, _MAX_STEP / np.maximum(big, 1e-300))[:, None]
            slope = (grad.T * d).sum(axis=1)                           # < 0
            nud = d @ self.nu.T                                        # (ma, nm)
            lam = np.ones(act.size)
            if nc:
                # stay strictly feasible: no gap may close by more than 90 % in one step
                vd = self.V @ d.T                                      # (nc, ma)
                fin = np.isfinite(gap)
                with np.errstate(divide="ignore", invalid="ignore"):
                    lim = np.where(fin & (vd > 0), 0.9 * gap / vd, np.inf)
                lam = np.minimum(lam, lim.min(axis=0))
                ratio = np.where(fin, vd / np.where(fin, gap, 1.0), 0.0)
                mun = mu[act] * nn
            # near the solution (log residuals below 1e-2) the Newton step is taken as it is:
            # with the barrier the objective's differences drown in rounding before the
            # residuals do; far from it the line search on G
            pend = (np.flatnonzero(np.abs(res[:, keep]).max(axis=0) > 1e-2) if nc
                    else np.arange(act.size))
            for _h in range(40):
                lp = lam[pend]
                dg = ((at[:, pend] * np.expm1(np.minimum(lp[:, None] * d[pend], 700.0).T)).sum(axis=0)
                      + (n_m[:, pend] * np.expm1(np.minimum(lp[:, None] * nud[pend], 700.0).T)).sum(axis=0)
                      - lp * (ba[:, pend] * d[pend].T).sum(axis=0))
                if nc:
                    dg = dg - mun[pend] * np.log1p(-lp[None, :] * ratio[:, pend]).sum(axis=0)
                good = dg <= 1e-4 * lp * slope[pend]
                pend = pend[~good]
                if not pend.size:
                    break
                lam[pend] *= 0.5
            y[:, act] = ya + (lam[:, None] * d).T
        return y

    def _relax_elements(self, tab, y, x, w, sweeps: int = 6, iters: int = 40):
        """Starting values: Gauss-Seidel sweeps over the element equations at fixed n_e, N.

        For one element the equation ln(atoms_k + sum_m nu_mk n_m) = ln(alpha_k N) is convex
        and increasing in y_k, so Newton from the atoms-only value (an upper bound: molecules
        only add) converges monotonically; sweeping the elements in order of abundance
        removes the gross overestimate of the molecules that would make the full Jacobian
        nearly singular (e.g. C and O both seemingly all in CO).
        """
        y = y.copy()
        order = np.argsort(-self.alpha, kind="stable")
        ln_at0 = _packed_moments(*tab["mol"][:2], x)[0]
        goal = np.log(self.alpha)[:, None] + w[None, :]
        for _s in range(sweeps):
            for k in order:
                nu_k = self.nu[:, k]
                involved = nu_k > 0
                if not involved.any():
                    continue
                for _i in range(iters):
                    ln_m = tab["s"][involved] + self.nu[involved] @ y - np.multiply.outer(
                        self.q_mol[involved], x)
                    ln_m = np.minimum(ln_m, 700.0)
                    nm = np.exp(ln_m)
                    at = np.exp(np.minimum(y[k] + ln_at0[k], 700.0))
                    tot = at + nu_k[involved] @ nm
                    g = np.log(tot) - goal[k]
                    dg = (at + (nu_k[involved] ** 2) @ nm) / tot
                    y[k] = y[k] - g / dg
                    if np.all(np.abs(g) < 1e-6):
                        break
        return y


def _pack(chains, tables, x0, m):
    """Stack chains into (charges (nc, nq), L (nc, nq, m), fractions (nc,)), -inf padded,
    keeping per chain the contiguous stage range that matters in the x window (see tables;
    stages between the two ends' dominant stages are all kept)."""
    kept = []
    for c, lt in zip(chains, tables):
        if x0 is None:
            lo, hi = 0, c.n
        else:
            # the dominant stage moves monotonically with ln n_e, and a stage off the dominant
            # range is least suppressed at one end of the window: testing the two ends is exact
            sig = np.zeros(c.n, dtype=bool)
            for xe in (x0 - _X_WINDOW, x0 + _X_WINDOW):
                a = lt - np.multiply.outer(c.charges, xe)
                sig |= (a >= a.max(axis=0) - 60.0).any(axis=1)
            rows = np.flatnonzero(sig)
            lo, hi = int(rows[0]), int(rows[-1]) + 1
        kept.append((c.charges[lo:hi], lt[lo:hi]))
    nq = max((len(q) for q, _ in kept), default=1)
    qs = np.zeros((len(kept), nq))
    ls = np.full((len(kept), nq, m), -np.inf)
    for i, (q, lt) in enumerate(kept):
        qs[i, :len(q)] = q
        ls[i, :len(q)] = lt
    return qs, ls, np.array([c.fraction for c in chains])


def _packed_moments(q, lt, x):
    """For packed chains (see _pack) relative to their neutral atoms: ln S = ln sum_q
    exp(L_q - q x) and the moments <q>, <q+>, <|q-|>, <q^2>_{q>0}, <q^2>_{q<0}, each (nc, m)."""
    a = lt - q[:, :, None] * x[None, None, :]
    mx = a.max(axis=1)
    f = np.exp(a - mx[:, None, :])
    s = f.sum(axis=1)
    f /= s[:, None, :]
    qp = np.where(q > 0, q, 0.0)[:, :, None]
    qn = np.where(q < 0, q, 0.0)[:, :, None]
    return (mx + np.log(s), (q[:, :, None] * f).sum(axis=1), (qp * f).sum(axis=1),
            (-qn * f).sum(axis=1), (qp * qp * f).sum(axis=1), (qn * qn * f).sum(axis=1))


def _solve_batched(jac: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve J d = rhs for every state; singular states fall back to least squares."""
    try:
        return np.linalg.solve(jac, rhs[..., None])[..., 0]
    except np.linalg.LinAlgError:
        out = np.empty_like(rhs)
        for i in range(rhs.shape[0]):
            out[i] = np.linalg.lstsq(jac[i], rhs[i], rcond=None)[0]
        return out


# ------------------------------------------------------------------------------ the result
class MolecularEquilibriumState(EquilibriumState):
    """An equilibrium state with molecules.

    Atomic populations (``number_density``, ``fraction``, ``stage_fractions`` ...) are those of
    the atoms and ions only; ``fraction`` and ``stage_fractions`` stay relative to *all* nuclei
    of the element, so for each element

        sum(stage_fractions(el)) + molecular_fraction(el) = 1.

    ``nuclei_density`` counts every nucleus, free or bound in a molecule.
    """

    def __init__(self, *, system: MolecularSystem, log_neutral: np.ndarray,
                 skipped_molecules: list[str], absent: np.ndarray | None = None,
                 condensed: np.ndarray | None = None, **kw):
        super().__init__(**kw)
        self.system = system
        # condensed formula units per nucleus, (n_cond,) + shape
        self._gamma = (np.zeros((system.n_cond,) + self.shape) if condensed is None
                       else condensed.reshape((system.n_cond,) + self.shape))
        self._absent = (np.zeros((len(system.molecules),) + self.shape, dtype=bool)
                        if absent is None else absent)
        self.log_neutral = log_neutral
        self.skipped_molecules = list(skipped_molecules)
        ok = self.converged.ravel()
        n_mol = np.full((len(system.molecules), ok.size), np.nan)
        shares = np.full((len(system.mol_chains), ok.size), np.nan)
        if ok.any():        # (failed states stay NaN)
            t = self.temperature.ravel()[ok]
            x = self.log_ne.ravel()[ok]
            tab = system.tables(t, others=False, n_e=np.exp(x))
            y = log_neutral.reshape(log_neutral.shape[0], -1)[:, ok]
            ln_m = tab["s"] + system.nu @ y - np.multiply.outer(system.q_mol, x)
            n_mol[:, ok] = np.exp(ln_m)
            n_nuc = self.nuclei_density.ravel()[ok]
            ln_at = _packed_moments(*tab["mol"][:2], x)[0]
            for k, c in enumerate(system.mol_chains):
                shares[k, ok] = np.exp(y[k] + ln_at[k]) / (n_nuc * c.fraction)
        self._n_mol = n_mol.reshape((len(system.molecules),) + self.shape)
        self._atomic_share = {c.k: shares[k].reshape(self.shape)
                              for k, c in enumerate(system.mol_chains)}

    # -- molecules ---------------------------------------------------------------------------
    @property
    def molecule_names(self) -> list[str]:
        return self.system.names

    def molecule_densities(self) -> np.ndarray:
        """Number densities of the molecules [cm^-3], shape (n_molecules,) + state shape."""
        return self._n_mol

    def molecule_density(self, name: str) -> np.ndarray:
        """Number density of one molecule [cm^-3] (``"CO"``, ``"H2"``, ``"CO+"``, ``"H2O"``;
        element order free)."""
        names = self.system.names
        text = str(name).strip()
        if text not in names:
            key = _query_key(text)
            match = [m.name for m in self.system.molecules
                     if key is not None and (tuple(sorted(m.composition.items())), m.charge) == key]
            # of several isomers the one without a label, else the first (C2H2/acetylene)
            match.sort(key=lambda n: "/" in n)
            if not match:
                raise UnknownSpeciesError(f"{text} is not among the {len(names)} molecules of "
                                          f"this solve (e.g. {', '.join(names[:8])})")
            text = match[0]
        return self._n_mol[names.index(text)]

    def left_out(self, index=None) -> list[str]:
        """Molecules of the chosen set that are absent at a state (``index``; default: at any
        state) because its temperature is outside their data (the NASA polynomials end at
        5000 or 6000 K, Barklem & Collet at 10,000 K)."""
        a = self._absent.reshape(len(self.system.molecules), *self.shape)
        a = a[(slice(None),) + (index if isinstance(index, tuple) else (index,))] \
            if index is not None else a.reshape(len(self.system.molecules), -1).any(axis=1)
        if a.ndim > 1:
            a = a.reshape(a.shape[0], -1).any(axis=1)
        return [n for n, gone in zip(self.system.names, a) if gone]

    def number_density(self, species) -> np.ndarray:
        """Number density [cm^-3] of an atomic species ("Fe II", "H-") or, by its exact name,
        of a molecule of this solve ("CO" is carbon monoxide here, "Co" cobalt)."""
        if isinstance(species, str) and species.strip() in self.system.names:
            return self._n_mol[self.system.names.index(species.strip())]
        return super().number_density(species)

    def molecular_fraction(self, element) -> np.ndarray:
        """Fraction of the nuclei of ``element`` that are bound in gas molecules."""
        chain = self.network.chain_of(element)
        share = self._atomic_share.get(chain.k)
        return (np.zeros(self.shape) if share is None
                else 1.0 - share - self.condensed_fraction(element))

    # -- condensates -------------------------------------------------------------------------
    @property
    def condensate_names(self) -> list[str]:
        """The condensed compounds of this solve (formulas; empty without condensates)."""
        return self.system.condensate_names

    def condensed_density(self, name: str) -> np.ndarray:
        """Formula units of one condensed compound per cm^3 (``"Al2O3"``)."""
        try:
            j = self.condensate_names.index(str(name).strip())
        except ValueError:
            raise UnknownSpeciesError(f"{name!r} is not a condensate of this solve "
                                      f"({', '.join(self.condensate_names) or 'none'})") from None
        return self._gamma[j] * self.nuclei_density

    def condensed_fraction(self, element) -> np.ndarray:
        """Fraction of the nuclei of ``element`` in condensed phases."""
        chain = self.network.chain_of(element)
        sysm = self.system
        zs = [c.Z for c in sysm.mol_chains]
        if not sysm.n_cond or chain.Z not in zs:
            return np.zeros(self.shape)
        return np.tensordot(sysm.V[:, zs.index(chain.Z)], self._gamma, axes=1) / chain.fraction

    def stable_phases(self, index=None) -> list[str]:
        """The condensed phases present at one state (``index``; a scalar state needs none),
        e.g. ``['Al2O3(a)', 'Fe(c)']``: the compounds with a condensed amount, named by the
        phase that is stable at T."""
        sysm = self.system
        if not sysm.n_cond:
            return []
        idx = () if index is None else (index if isinstance(index, tuple) else (index,))
        t = float(self.temperature[idx])
        gam = self._gamma[(slice(None),) + idx]
        best = sysm.cond_constants.stable_phase(t).ravel()
        return [sysm.cond_constants.phases[best[j]].name for j in range(sysm.n_cond)
                if gam[j] > 0 and best[j] >= 0]

    def element_budget(self, element) -> dict[str, np.ndarray]:
        """Where the nuclei of one element are: ``{"atoms": ..., "CO": ..., ...}`` as fractions
        of its nuclei (molecules that hold none of it are left out)."""
        chain = self.network.chain_of(element)
        total = self.nuclei_density * chain.fraction
        out = {"atoms": self._atomic_share.get(chain.k, np.ones(self.shape))}
        z = chain.Z
        for i, m in enumerate(self.system.molecules):
            cnt = m.component_Z.count(z)
            if cnt:
                out[m.name] = cnt * self._n_mol[i] / total
        for j, c in enumerate(self.system.condensates):
            cnt = c[0].composition.get(z, 0)
            if cnt:
                out[f"{c[0].formula}(condensed)"] = cnt * self._gamma[j] / chain.fraction
        return out

    def log_supersaturation(self, compound: str) -> np.ndarray:
        """ln S of a condensed compound in this gas: S = prod n_A^nu / K_n, with n_A the free
        neutral atoms and K_n the saturation constant of the compound's most stable phase in
        the NASA data (:class:`~sahaboltz.kernels.thermo.CondensateConstants`).  S > 1: the gas
        is supersaturated, the compound would condense.  In a solve without ``condensates=``
        the gas is not depleted, so the temperature where S = 1 is the compound's appearance
        (onset) temperature while none of its elements has condensed in another compound
        before; with condensates, ln S ~ 0 for the condensed ones.  NaN where no phase of the
        compound has data."""
        cdb = default_thermo_database(condensed=True)
        phases = [sp for sp in cdb if sp.formula == str(compound).strip()]
        if not phases:
            raise UnknownSpeciesError(f"no condensed phase of {compound!r} in the NASA data")
        pos = {c.Z: k for k, c in enumerate(self.system.mol_chains)}
        missing = [SYMBOLS[z] for z in phases[0].composition if z not in pos]
        if missing:
            raise InputError(f"{compound}: element(s) {', '.join(missing)} are in no molecule "
                             "of this solve (their free atoms are not unknowns of it)")
        ln_k = CondensateConstants([phases]).ln_kn(self.temperature.ravel())[0]
        ln_a = np.zeros(self.temperature.size)
        y = self.log_neutral.reshape(self.log_neutral.shape[0], -1)
        for z, cnt in phases[0].composition.items():
            ln_a = ln_a + cnt * y[pos[z]]
        out = np.where(np.isfinite(ln_k), ln_a - np.where(np.isfinite(ln_k), ln_k, 0.0), np.nan)
        return out.reshape(self.shape)

    # -- overrides: atoms scaled to the part of each element not in molecules ---------------
    def _chain_fractions(self, chain, keep: bool = True):
        keep = keep or chain.k in self._cache   # what was kept stays kept
        if chain.k not in self._cache:
            f = super()._chain_fractions(chain)
            share = self._atomic_share.get(chain.k)
            if share is not None:
                self._cache[chain.k] = f * share
        return self._cache[chain.k] if keep else self._cache.pop(chain.k)

    @property
    def particle_density(self) -> np.ndarray:
        """Free particles: atoms and ions, molecules, electrons [cm^-3]."""
        bound = (self.system.nu.sum(axis=1) - 1.0) @ self._n_mol.reshape(len(self.system.molecules), -1)
        # nuclei in condensates are not gas particles
        cond = self.nuclei_density * np.tensordot(self.system.V.sum(axis=1), self._gamma, axes=1)
        return self.nuclei_density + self.n_e - bound.reshape(self.shape) - cond

    def sum_z2_n(self) -> np.ndarray:
        out = super().sum_z2_n()
        return out + np.tensordot(self.system.q_mol**2, self._n_mol, axes=1)

    def _charge_sums(self) -> tuple[np.ndarray, np.ndarray]:
        pos, tot = super()._charge_sums()
        q = self.system.q_mol  # molecular ions count too
        return (pos + np.tensordot(q, self._n_mol, axes=1),
                tot + np.tensordot(np.abs(q), self._n_mol, axes=1))

    def conservation_residual(self) -> np.ndarray:
        worst = np.zeros(self.shape)
        for c in self.network.chains:
            nk = self._chain_fractions(c) * (self.nuclei_density * c.fraction)
            have = nk.sum(axis=0)
            for i, m in enumerate(self.system.molecules):
                have = have + m.component_Z.count(c.Z) * self._n_mol[i]
            for j, cc in enumerate(self.system.condensates):
                have = have + cc[0].composition.get(c.Z, 0) * self._gamma[j] * self.nuclei_density
            want = self.nuclei_density * c.fraction
            worst = np.maximum(worst, np.abs(have - want) / want)
        return worst

    def summary(self, index=None) -> dict:
        out = super().summary(index)
        idx = () if index is None else index
        for el in ("H", "C", "N", "O"):
            try:
                out[f"molecular_fraction_{el}"] = float(self.molecular_fraction(el)[idx])
            except UnknownSpeciesError:
                pass
        out["molecules"] = len(self.system.molecules)
        if self.system.n_cond:
            out["condensed_phases"] = ", ".join(self.stable_phases(index)) or "none"
            for el in ("Al", "Ca", "Ti", "Mg", "Si", "Fe", "C", "O"):
                try:
                    out[f"condensed_fraction_{el}"] = float(self.condensed_fraction(el)[idx])
                except UnknownSpeciesError:
                    pass
        gone = self.left_out(index)
        if gone:
            out["molecules_left_out"] = (f"{len(gone)} outside their data's temperature range"
                                         f" ({', '.join(gone[:6])}{' ...' if len(gone) > 6 else ''})")
        return out

    def __repr__(self) -> str:
        return (f"MolecularEquilibriumState({self.composition.name!r}, shape={self.shape}, "
                f"closure={self.closure}, {self.network.n_species} atomic species, "
                f"{len(self.system.molecules)} molecules)")
