"""The atom-only engine: electron density and every stage population of an atomic mixture.

Formulation (see docs/equilibrium.md).  With N the density of nuclei and alpha_k the number
fraction of element k, the Saha chains fix each element's stage fractions f_kq from T and n_e
alone (plus n_e-dependent corrections when non-ideal options are on).  Element conservation,
n_kq = N alpha_k f_kq, then holds by construction, and the remaining unknowns are n_e and N.
With Zbar(n_e) = sum_k alpha_k <q>_k the mean charge per nucleus, charge neutrality reads

    N Zbar(n_e) = n_e,

and the closure (:mod:`sahaboltz.equilibrium.closures`) gives N: fixed when it fixes the nuclei
(a mass or hydrogen-nucleus density); N = P/kT - n_e when it fixes all particles (a gas
pressure; each nucleus is one particle while there are no molecules); N = n_e / Zbar when it
fixes the electrons (an electron pressure).  We solve g(x) = ln(N Zbar) - x = 0 in x = ln n_e for all states at
once with a safeguarded Newton method: dZbar/dx = -sum_k alpha_k Var_k(q) exactly (the stage
populations are an exponential family in x), g' <= -1, and every state keeps a bracket
[lo, hi] with g(lo) > 0 > g(hi) so that a bad Newton step becomes a bisection.  Non-ideal
corrections (lowering, occupation probabilities) are frozen, solved for, and updated in an
outer fixed point (:func:`_solve_nonideal_block`).

The front, :func:`sahaboltz.equilibrium.solver.solve_equilibrium`, checks the options and calls
:func:`solve_atomic` here (or the molecular engine, which calls it for its start).
"""

from __future__ import annotations

import numpy as np

from sahaboltz.equilibrium import compiled_newton
from sahaboltz.equilibrium.closures import Closure
from sahaboltz.equilibrium.network import AtomicNetwork
from sahaboltz.equilibrium.state import (CONVERGED, NOT_CONVERGED, STRONGLY_COUPLED,
                                         UNREACHABLE, EquilibriumState, SolveReport)
from sahaboltz.equilibrium.validity import COUPLING_LIMIT
from sahaboltz.kernels.plasma import _coupling, _debye_length, _lowering_ev

__all__ = ["solve_atomic", "DEFAULT_TOLERANCE"]

#: default relative tolerance on charge neutrality |sum q n - n_e| / (sum |q| n + n_e)
DEFAULT_TOLERANCE = 1e-12
# elements of (species x states) handled at once; bounds memory and keeps work in cache
_CHUNK_ELEMENTS = 1 << 24
# a Newton step may move ln n_e by at most this much while no lower bracket is known
_MAX_STEP = 20.0
# most updates of the frozen non-ideal corrections
_MAX_OUTER = 60
# populations below e^-300 of an element's largest stage are floored there inside the solver
_LOG_FLOOR = -300.0
# significance threshold of the windows when U depends on n_e: the low-density-limit tables
# that place the windows overestimate each U, by up to this margin above the usual e^-40
_DENSITY_THR = 45.0
# the low-density-limit solve only starts the density-dependent one: a loose tolerance will do
_START_TOLERANCE = 1e-6
# a Newton step below this times sqrt(tol) is the last one (see run): its error is of the
# order of its square
_FINAL_STEP = 1e-4


def solve_atomic(network: AtomicNetwork, t: np.ndarray, v: np.ndarray, closure: Closure, *,
                 lowering: bool = False, tolerance: float = DEFAULT_TOLERANCE,
                 max_passes: int = 200, start_log_ne: np.ndarray | None = None
                 ) -> EquilibriumState:
    """Solve the atoms-only balance at the states (``t``, ``v``) (checked, broadcast arrays).

    ``closure`` says what ``v`` is; ``network`` holds the composition and the truncation.
    States that cannot be solved get a status and a reason in the result (and NaN values);
    the front decides whether that is an error.  ``start_log_ne``: ln n_e near each state's
    solution where the caller knows one (NaN elsewhere; the inverse closures do), a hint that
    the compiled solver starts its Newton from (the result is the same to the tolerance).
    """
    shape = t.shape
    tf, vf = t.ravel().copy(), v.ravel().copy()
    warm = None if start_log_ne is None else np.asarray(start_log_ne, dtype=float).ravel()
    x, nuc, lam, report, status, reason, tables = _solve_flat(
        network, tf, vf, closure, lowering, tolerance, int(max_passes), shape, warm)
    state = EquilibriumState(network=network, temperature=t.copy(), log_ne=x.reshape(shape),
                             nuclei_density=nuc.reshape(shape), closure=closure.name,
                             closure_value=v.copy(), lowering=lowering,
                             debye_length=None if lam is None else lam.reshape(shape),
                             report=report, status=status, reason=reason)
    if tables is not None and tables[0].size * network.n_species <= _KEPT_TABLE_ELEMENTS:
        # the thermodynamics needs the same tables (their significance windows): kept until
        # it has run
        state.saha_tables = tables
    return state


def _fixed_densities(network: AtomicNetwork, closure: Closure, t, v):
    """(fixed nuclei N or None, fixed free particles P/kT or None) for the closure's kind."""
    if closure.fixes == "nuclei":
        return closure.nuclei(network.composition, v), None
    if closure.fixes == "particles":
        return None, closure.particles(t, v)
    return None, None


def _x_upper(network, closure, t, v, fixed_n, ntot) -> np.ndarray:
    """Upper bound of ln n_e: full ionization (or the given n_e when the closure fixes it)."""
    zmax = network.max_mean_charge
    if ntot is not None:
        return np.log(ntot * zmax / (1.0 + zmax))
    if fixed_n is not None:
        return np.log(fixed_n * zmax)
    return np.log(closure.electrons(t, v))


def _solve_flat(network, t, v, closure, lowering, tol, max_passes, shape, warm=None):
    n = t.size
    fixed_n, ntot = _fixed_densities(network, closure, t, v)
    x_out = np.empty(n)
    nuc_out = np.empty(n)
    lam_out = np.empty(n) if lowering else None
    ne_last = np.full(n, np.nan)  # last iterate of the lowering fixed point, where unsettled
    passes = np.zeros(n, dtype=int)
    resid = np.empty(n)
    failed = np.zeros(n, dtype=bool)
    chunk = max(1, _CHUNK_ELEMENTS // max(1, network.n_species))
    # by temperature (neighbours share partition-function work), then by the closure value:
    # the states of one temperature come as a row, which the compiled solver continues along
    order = np.lexsort((v, t))
    density = not network.ideal and not lowering
    if not lowering:
        # Saha tables per temperature: exact for T-only partition functions, and for
        # density-dependent ones their low-density limit (the start and the windows)
        ut, tinv = np.unique(t, return_inverse=True)
        ln_u = network.log_u_chains(ut)
        c_unique = [network.log_c_of(c, ut, lu) for c, lu in zip(network.chains, ln_u)]
        lu_first = [lu[0].copy() for lu in ln_u]    # the compiled solver's, for free
        del ln_u
        intervals = [_significance_intervals(c.charges, tab,
                                             thr=_DENSITY_THR if density else 40.0)
                     for c, tab in zip(network.chains, c_unique)]
    else:
        ut = tinv = c_unique = None
    fast = None
    if c_unique is not None and compiled_newton.available() and (
            not density or network.scheme.key == "occupation"):
        bare = [network.bare_log_c(c, ut) for c in network.chains] if density else None
        fast = compiled_newton.CompiledSolver(network, ut, c_unique, intervals, bare,
                                              lu_first if density else None)
        kind = (compiled_newton.FIXED_NUCLEI if fixed_n is not None else
                compiled_newton.FIXED_PARTICLES if ntot is not None else
                compiled_newton.FIXED_ELECTRONS)
    for c0 in range(0, n, chunk):
        idx = order[c0:c0 + chunk]
        if fast is not None:
            fn = None if fixed_n is None else fixed_n[idx]
            nt = None if ntot is None else ntot[idx]
            x_hi = _x_upper(network, closure, t[idx], v[idx], fn, nt)
            nref = fn if fn is not None else nt if nt is not None else np.zeros(idx.size)
            x0 = (x_hi if fn is None and nt is None else
                  _weak_start(network, c_unique, tinv[idx], fn, nt, x_hi))
            out = fast.run(tinv[idx], kind, nref, x0, x_hi, tol,
                           max(tol, _START_TOLERANCE) if density else tol, max_passes,
                           _FINAL_STEP * np.sqrt(tol), None if warm is None else warm[idx])
            x_out[idx], nuc_out[idx], passes[idx], resid[idx], done = out
            failed[idx] = ~done
            continue
        if density:
            out = _solve_density_block(network, t[idx], v[idx], closure,
                                       None if fixed_n is None else fixed_n[idx],
                                       None if ntot is None else ntot[idx],
                                       (c_unique, intervals, tinv[idx]), ut, tol, max_passes)
            x_out[idx], nuc_out[idx], passes[idx], resid[idx], done = out
            failed[idx] = ~done
            continue
        if c_unique is None:
            out = _solve_nonideal_block(network, t[idx], v[idx], closure,
                                        None if fixed_n is None else fixed_n[idx],
                                        None if ntot is None else ntot[idx], lowering, tol,
                                        max_passes)
            x_out[idx], nuc_out[idx], passes[idx], resid[idx], done, lam, ne_last[idx] = out
            failed[idx] = ~done
            if lowering:
                lam_out[idx] = lam
            continue
        sub = _ChunkSolver(network, t[idx], v[idx], closure,
                           None if fixed_n is None else fixed_n[idx],
                           None if ntot is None else ntot[idx], (c_unique, intervals, tinv[idx]))
        sub.run(tol, max_passes, final_step=_FINAL_STEP * np.sqrt(tol))
        x_out[idx], nuc_out[idx], passes[idx], resid[idx] = sub.x, sub.nuc, sub.passes, sub.resid
        failed[idx] = ~sub.done
    bad = failed | ~np.isfinite(x_out) | ~np.isfinite(nuc_out) | ~(nuc_out > 0)
    status = np.zeros(n, dtype=np.int8)
    reason = np.full(n, "", dtype=object)
    if bad.any():
        _classify_failures(network, closure, t, v, resid, passes, bad, status, reason,
                           max_passes)
    if lowering:
        _check_lowering(network, lam_out, ~bad, status, reason)
        _unsettled_coupling(t, ne_last, status, reason)
    failed = status != CONVERGED
    x_out[failed] = nuc_out[failed] = np.nan
    if lam_out is not None:
        lam_out[failed] = np.nan
    return (x_out, nuc_out, lam_out, SolveReport(passes.reshape(shape), resid.reshape(shape)),
            status, reason, None if c_unique is None else (ut, c_unique))


# the Saha tables of a solve (stages x distinct temperatures) are kept on its state for its
# thermodynamics up to this size (128 MB: the 3,648 stages of a solar mixture at 3,600
# temperatures, as an inverse closure's pass has; forming them again costs about as much as
# the thermodynamics' level sums)
_KEPT_TABLE_ELEMENTS = 1 << 24

#: the default of ``max_passes``; a smaller limit is the first suspect of a failure
DEFAULT_MAX_PASSES = 200


def _classify_failures(network, closure, t, v, resid, passes, bad, status, reason,
                       max_passes: int = DEFAULT_MAX_PASSES) -> None:
    """Status and reason of the states ``bad``: a given electron pressure that the gas cannot
    supply (with the largest it can there), or no convergence."""
    idx = np.flatnonzero(bad)
    if closure.fixes == "electrons":
        pe_max = _largest_electron_pressure(network, t[idx])
        # with n_e given, a failure means the charges cannot balance it: unreachable
        status[idx] = UNREACHABLE
        for i, pm in zip(idx, pe_max):
            reason[i] = (f"P_e = {v[i]:.6g} dyn cm-2 cannot be reached at T = {t[i]:.6g} K: "
                         + (f"at most {pm:.4g} dyn cm-2 there (above it negative ions "
                            "outweigh the positive ones)" if np.isfinite(pm)
                            else "too few electron donors"))
        return
    status[idx] = NOT_CONVERGED
    hint = ("; the 'lowered' cut makes U jump whenever a level crosses the limit, so the "
            "balance can lack an exact root: 'occupation' is continuous"
            if network.scheme.key == "lowered" else "; check that the state is physical")
    if max_passes < DEFAULT_MAX_PASSES:
        hint = (f"; max_passes={max_passes} is below the default {DEFAULT_MAX_PASSES}: "
                "raise it")
    for i in idx:
        reason[i] = (f"no convergence in {int(passes[i])} passes (relative charge residual "
                     f"{resid[i]:.3g}){hint}")


def _largest_electron_pressure(network, t) -> np.ndarray:
    """The largest P_e [dyn cm^-2] that the gas can supply at each T: where the mean charge
    per nucleus, falling as n_e rises (more H-, less ionization), reaches zero; inf when it
    stays positive (no negative ions)."""
    from sahaboltz.constants import K_B

    ut, inv = np.unique(t, return_inverse=True)
    tables = [network.log_c(c, ut) for c in network.chains]

    def zbar(x):
        total = np.zeros(x.size)
        for c, tab in zip(network.chains, tables):
            a = tab[:, inv] - np.multiply.outer(c.charges, x)
            a -= a.max(axis=0)
            f = np.exp(a)
            total += c.fraction * (c.charges @ f) / f.sum(axis=0)
        return total

    lo = np.full(t.size, -100.0)
    hi = np.full(t.size, 150.0)
    if (zbar(hi) > 0).all():
        return np.full(t.size, np.inf)
    for _ in range(100):
        mid = 0.5 * (lo + hi)
        pos = zbar(mid) > 0
        lo = np.where(pos, mid, lo)
        hi = np.where(pos, hi, mid)
    return np.where(zbar(hi) > 0, np.inf, np.exp(lo) * K_B * t)


def _solve_density_block(network, t, v, closure, fixed_n, ntot, tables, ut, tol, max_passes):
    """Newton on ln n_e with partition functions that depend on n_e (occupation
    probabilities, no lowering): started from the solution with their low-density limit,
    each pass evaluates ln U and d ln U / d ln n_e of the stages that can matter at the trial
    n_e, and the derivative of the charge balance includes them (exact Newton, bracketed).
    """
    start = _ChunkSolver(network, t, v, closure, fixed_n, ntot, tables)
    start.run(max(tol, _START_TOLERANCE), max_passes)
    x0 = np.where(np.isfinite(start.x), start.x, start.x_hi - 1.0)
    solver = _ChunkSolver(network, t, v, closure, fixed_n, ntot, tables)
    moments = _DensityMoments(network, t, tables, ut)
    solver.run(tol, max_passes, moments=moments, x0=x0, final_step=_FINAL_STEP * np.sqrt(tol))
    return solver.x, solver.nuc, start.passes + solver.passes, solver.resid, solver.done


class _DensityMoments:
    """Charge moments of every element when ln U_q depends on n_e.

    With K_q(T) the chain's T-only part (:meth:`AtomicNetwork.bare_log_c`), stage q of
    element k has ln n_q = K_q + ln U_q(T, n_e) - q x + const; its significance window comes
    from the low-density-limit tables (each U is largest there) with a wider threshold.  The
    moments returned are Zbar, -dZbar/dx = sum_k alpha_k (Var_k(q) - Cov_k(q, d ln U/dx)),
    sum alpha <|q|> and sum alpha <q^2>.
    """

    def __init__(self, network, t, tables, ut):
        self.net = network
        self.t = t
        self.limit, _, tpos = tables
        self.tpos = tpos
        self.bare = [network.bare_log_c(c, ut) for c in network.chains]

    def __call__(self, sel, x):
        m = sel.size
        t = self.t[sel]
        tp = self.tpos[sel]
        ne = np.exp(x)
        plans = []
        pair_state, pair_row = [], []
        npairs = 0
        for k, c in enumerate(self.net.chains):
            if c.n <= _Windows.WHOLE:   # short chains whole, as in the T-only windows
                width, s0 = c.n, np.zeros(m, dtype=np.intp)
                lo, hi = s0, np.full(m, c.n - 1)
            else:
                # the stages within e^-thr of the largest at this x, judged with the
                # low-density-limit tables (each U largest there)
                a0 = self.limit[k][:, tp] - np.multiply.outer(c.charges, x)
                sig = a0 >= a0.max(axis=0) - _DENSITY_THR
                # and one stage beyond each end: in an almost neutral gas the first ion
                # carries the charge however small its share of the element
                lo = np.maximum(np.argmax(sig, axis=0) - 1, 0)
                hi = np.minimum(c.n - np.argmax(sig[::-1], axis=0), c.n - 1)
                width = int((hi - lo).max()) + 1
                s0 = np.minimum(lo, c.n - width)
            rows = s0[None, :] + np.arange(width)[:, None]          # (w, m) stage indices
            mrow = c.model_rows[rows]
            # each state's own window only (the padding up to the widest is left out)
            inside = (rows >= lo[None, :]) & (rows <= hi[None, :])
            has = (mrow >= 0) & inside
            where = np.flatnonzero(has.ravel())
            plans.append((c, rows, where, npairs, inside))
            pair_state.append(np.broadcast_to(np.arange(m), rows.shape).ravel()[where])
            pair_row.append((mrow + c.model_offset).ravel()[where])
            npairs += where.size
        lu = dlu = np.zeros(0)
        if npairs:
            st = np.concatenate(pair_state)
            u, _, dlu = self.net.model.evaluate_pairs(t, ne, np.concatenate(pair_row),
                                                      want_temperature=False,
                                                      temperature_index=tp, states=st)
            lu = np.log(u)
        zbar, slope, zabs, z2 = (np.zeros(m) for _ in range(4))
        for c, rows, where, first, inside in plans:
            k = c.k
            a = np.take_along_axis(self.bare[k][:, tp], rows, axis=0)
            a[~inside] = -np.inf
            d = np.zeros(a.shape)
            a.ravel()[where] += lu[first:first + where.size]
            d.ravel()[where] = dlu[first:first + where.size]
            neg = self.net.negative_ion_log_u(c, t, ne)
            if neg is not None:       # a negative ion (H-) sits in row 0 of a whole chain
                a[0] += neg[0]
                d[0] = neg[1]
            q = c.q_min + rows
            a -= q * x[None, :]
            a -= a.max(axis=0)
            np.maximum(a, _LOG_FLOOR, out=a, where=inside)
            p = np.exp(a)
            p /= p.sum(axis=0)
            mq = (p * q).sum(axis=0)
            mq2 = (p * q * q).sum(axis=0)
            cov = (p * q * d).sum(axis=0) - mq * (p * d).sum(axis=0)
            zbar += c.fraction * mq
            slope += c.fraction * (np.maximum(mq2 - mq * mq, 0.0) - cov)
            zabs += c.fraction * (p * np.abs(q)).sum(axis=0)
            z2 += c.fraction * mq2
        return zbar, slope, zabs, z2


def _solve_nonideal_block(network, t, v, closure, fixed_n, ntot, lowering, tol, max_passes):
    """Outer fixed point on the n_e-dependent corrections around the ideal Newton solver.

    The corrections (Debye-Hueckel lowering from n_e and sum z^2 n_z; occupation
    probabilities from n_e) are frozen at theta = (n_e, sum z^2 n_z); with them frozen the
    Saha chains depend on T alone and the safeguarded Newton solve of the ideal case applies
    unchanged (monotone, bracketed).  theta is then updated from the solution until it
    reproduces itself to the tolerance.
    """
    m = t.size
    x = np.full(m, np.nan)
    nuc = np.full(m, np.nan)
    passes = np.zeros(m, dtype=int)
    resid = np.full(m, np.inf)
    done = np.zeros(m, dtype=bool)
    lam_out = np.full(m, np.nan)
    ne_last = np.full(m, np.nan)
    x_hi = _x_upper(network, closure, t, v, fixed_n, ntot)
    # start from the weakly non-ideal branch: no lowering, a low density for the occupation
    # probabilities (starting from full ionization can land on a spurious self-sustained
    # Debye-Hueckel "pressure ionization" branch in cold dense gas)
    fixed_pe = fixed_n is None and ntot is None
    ne_th = np.exp(x_hi) if fixed_pe else np.ones(m)
    s_th = ne_th.copy()
    act = np.arange(m)
    for outer in range(_MAX_OUTER):
        if act.size == 0:
            break
        tt = t[act]
        lam = _debye_length(tt, ne_th + s_th) if lowering and outer > 0 else None
        tables = [network.log_c(c, tt, ne_th, lam) for c in network.chains]
        intervals = [_significance_intervals(c.charges, tab) for c, tab in
                     zip(network.chains, tables)]
        child = _ChunkSolver(network, tt, v[act], closure,
                             None if fixed_n is None else fixed_n[act],
                             None if ntot is None else ntot[act],
                             (tables, intervals, np.arange(act.size)))
        child.run(tol, max_passes)
        passes[act] += child.passes
        ok = child.done
        xn = np.where(ok, child.x, np.log(ne_th))
        _, _, _, z2 = child._moments(tables, xn)
        ne_new = np.exp(xn)
        s_new = np.where(ok, child.nuc * z2, s_th)
        conv = ok & (np.abs(xn - np.log(ne_th)) <= tol) & (outer > 0 or not lowering)
        if lowering:
            conv &= np.abs(s_new - s_th) <= tol * (ne_new + s_new)
        fin = act[conv]
        x[fin], nuc[fin], resid[fin] = xn[conv], child.nuc[conv], child.resid[conv]
        done[fin] = True
        if lowering and lam is not None:
            lam_out[fin] = lam[conv]
        # states whose frozen-correction solve failed cannot be helped by iterating
        keep = ~conv & ok
        resid[act[~ok]] = child.resid[~ok]
        ne_last[act[~ok]] = ne_th[~ok]
        act = act[keep]
        ne_th, s_th = ne_new[keep], s_new[keep]
    if act.size:
        resid[act] = np.maximum(resid[act], tol * 10)
        ne_last[act] = ne_th
    return x, nuc, passes, resid, done, lam_out, ne_last


def _check_lowering(network, lam, ok, status, reason) -> None:
    """Refuse the states (``ok`` so far) where the Debye-Hueckel lowering of some species
    reaches its ionization energy: the plasma is too strongly coupled for this model."""
    for c in network.chains:
        ratio = _lowering_ev(c.charges[:-1, None], lam[None, :]) / c.chi_ev[:, None]
        over = ok & (ratio >= 1.0).any(axis=0) & (status == CONVERGED)
        for i in np.flatnonzero(over):
            status[i] = STRONGLY_COUPLED
            reason[i] = (f"the Debye-Hueckel lowering reaches the ionization energy of "
                         f"{c.symbol}: the plasma is too strongly coupled for this model "
                         f"(Debye length {lam[i]:.3g} cm)")


def _unsettled_coupling(t, ne_last, status, reason) -> None:
    """Refuse, as strongly coupled, the states whose lowering fixed point did not settle while
    its last iterate had Gamma_e above the validity limit: next to the strong-coupling edge
    the Debye-Hueckel correction changes faster than the balance can follow, and the model
    does not hold there anyway."""
    idx = np.flatnonzero((status == NOT_CONVERGED) & np.isfinite(ne_last))
    if not idx.size:
        return
    gamma = _coupling(t[idx], ne_last[idx])
    for i, g in zip(idx[gamma > COUPLING_LIMIT], gamma[gamma > COUPLING_LIMIT]):
        status[i] = STRONGLY_COUPLED
        reason[i] = (f"the Debye-Hueckel correction does not settle: its last iterate has "
                     f"Gamma_e = {g:.3g} > {COUPLING_LIMIT:g}, too strongly coupled for this model")


def _weak_start(network, c_unique, tpos, fixed_n, ntot, x_hi):
    """Weak-ionization estimate n_e ~ sqrt(N sum_k alpha_k Phi_k), capped by x_hi (the sum
    depends on T alone: formed per distinct temperature of the tables)."""
    terms = np.empty((len(network.chains), c_unique[0].shape[1]))
    for k, (c, tab) in enumerate(zip(network.chains, c_unique)):
        i0 = int(np.flatnonzero(c.charges == 0)[0])
        terms[k] = np.log(c.fraction) + (tab[i0 + 1] - tab[i0])
    mx = terms.max(axis=0)
    ln_sum = mx + np.log(np.exp(terms - mx).sum(axis=0))
    nref = fixed_n if fixed_n is not None else ntot
    return np.minimum(0.5 * (np.log(nref) + ln_sum[tpos]), x_hi - 1e-9)


class _ChunkSolver:
    """Safeguarded Newton in ln n_e over one block of states, with fixed Saha tables."""

    def __init__(self, network, t, v, closure, fixed_n, ntot, tables):
        self.net = network
        self.t, self.v, self.closure = t, v, closure
        self.fixed_n, self.ntot = fixed_n, ntot
        # (C tables per temperature, their significance intervals, each state's T index)
        self.ideal_tables = tables
        m = t.size
        self.passes = np.zeros(m, dtype=int)
        self.done = np.zeros(m, dtype=bool)
        self.x = np.empty(m)
        self.nuc = np.full(m, np.nan)
        self.resid = np.full(m, np.inf)
        self.x_hi = _x_upper(network, closure, t, v, fixed_n, ntot)
        self.mom = [np.stack([np.ones(c.n), c.charges, c.charges**2, np.abs(c.charges)])
                    for c in network.chains]

    # -- the charge balance --------------------------------------------------------------
    def _moments(self, tables, x):
        """Charge moments from full chains (tables of the same states as ``x``)."""
        m = x.size
        zbar, var, zabs, z2 = (np.zeros(m) for _ in range(4))
        for c, tab, mom in zip(self.net.chains, tables, self.mom):
            a = tab - np.multiply.outer(c.charges, x)
            a -= a.max(axis=0)
            np.maximum(a, _LOG_FLOOR, out=a)
            np.exp(a, out=a)
            s = mom @ a
            inv = 1.0 / s[0]
            mq = s[1] * inv
            mq2 = s[2] * inv
            zbar += c.fraction * mq
            var += c.fraction * np.maximum(mq2 - mq * mq, 0.0)
            zabs += c.fraction * s[3] * inv
            z2 += c.fraction * mq2
        return zbar, var, zabs, z2

    def _initial(self):
        if self.fixed_n is None and self.ntot is None:
            return self.x_hi.copy()
        c_unique, _, tpos = self.ideal_tables
        return _weak_start(self.net, c_unique, tpos, self.fixed_n, self.ntot, self.x_hi)

    def run(self, tol, max_passes, moments=None, x0=None, final_step=None):
        """Safeguarded Newton in x = ln n_e.

        ``moments(active, x) -> (Zbar, -dZbar/dx, <|q|>, <q^2>)`` per nucleus; default: from the
        windows over the fixed Saha tables.  ``x0``: starting values (default: the
        weak-ionization estimate).  ``final_step``: accept a state after an unsafeguarded
        Newton step no longer than this, without evaluating it again (for expensive
        moments: Newton converges quadratically, so the step's own error is of the order of
        its square).
        """
        m = self.t.size
        fixed_pe = self.fixed_n is None and self.ntot is None
        x = (self._initial() if x0 is None or fixed_pe
             else np.minimum(x0, self.x_hi - 1e-9))
        lo = np.full(m, -np.inf)
        hi = self.x_hi.copy()
        active = np.arange(m)
        if moments is None:
            windows = _Windows(self.net.chains, *self.ideal_tables)

            def moments(sel, xs):
                return windows.moments(sel, xs, step[sel])
        step = np.full(m, 0.5)  # size of the last Newton step (sets the window margins)
        fixed_pe = self.fixed_n is None and self.ntot is None
        prev = np.full(m, np.inf)  # previous step size, for the rtsafe-style safeguard
        for _ in range(max_passes):
            xa = x[active]
            zbar, var, zabs, _ = moments(active, xa)
            self.passes[active] += 1
            ne = np.exp(xa)
            if fixed_pe:
                nn = np.where(zbar > 0, ne / np.where(zbar > 0, zbar, 1.0), np.nan)
            elif self.fixed_n is not None:
                nn = self.fixed_n[active]
            else:
                nn = self.ntot[active] - ne
            f = nn * zbar - ne
            scale = nn * zabs + ne
            rel = np.abs(f) / scale
            ok = rel <= tol
            if fixed_pe:
                ok = np.isfinite(nn) & (nn > 0)
                rel = np.where(ok, 0.0, np.inf)
            # stalled at machine precision inside a collapsed bracket: accept if still good
            tight = (hi[active] - lo[active]) <= 8e-16 * np.maximum(1.0, np.abs(xa))
            ok |= tight & (rel <= 1e-10)
            done_now = active[ok]
            self.done[done_now] = True
            self.x[done_now] = xa[ok]
            self.nuc[done_now] = nn[ok]
            self.resid[done_now] = rel[ok]
            if fixed_pe:  # n_e is given: one evaluation decides
                self.x[active] = xa
                self.resid[active] = rel
                break
            keep = ~ok
            if not keep.any():
                break
            self.resid[active[keep]] = rel[keep]
            self.x[active[keep]] = xa[keep]
            # Newton step with bracket safeguard
            a = active[keep]
            xa, zb, vr, nnk, nek = xa[keep], zbar[keep], var[keep], nn[keep], ne[keep]
            valid = (nnk > 0) & (zb > 0)
            with np.errstate(divide="ignore", invalid="ignore"):
                g = np.where(valid, np.log(np.where(valid, nnk * zb, 1.0)) - xa, -np.inf)
                dg = -vr / zb - 1.0
                if self.ntot is not None:
                    dg = dg - nek / nnk
                xn = xa - g / dg
                # Zbar <= 0 (negative ions outweigh the positive ones: n_e far too high):
                # Newton on the linear form F = N Zbar / n_e - 1 instead of its logarithm
                lin = (nnk > 0) & ~valid
                if lin.any():
                    f_lin = nnk * zb / nek - 1.0
                    df_lin = -(nnk / nek) * (vr + zb)
                    if self.ntot is not None:
                        df_lin = df_lin - zb
                    xn = np.where(lin, xa - f_lin / df_lin, xn)
            lo[a] = np.where(g > 0, np.maximum(lo[a], xa), lo[a])
            hi[a] = np.where(g < 0, np.minimum(hi[a], xa), hi[a])
            la, ha = lo[a], hi[a]
            outside = ~(nnk > 0) | ~np.isfinite(xn) | ~(xn > la) | ~(xn < ha)
            # too slow a decrease (e.g. Newton cycling across a kink): bisect (as rtsafe)
            outside |= np.isfinite(la) & (np.abs(xn - xa) > 0.5 * prev[a])
            bisect = np.where(np.isfinite(la), 0.5 * (la + ha), ha - _MAX_STEP)
            xn = np.where(outside, bisect, xn)
            xn = np.where(np.isfinite(la), xn, np.maximum(xn, xa - _MAX_STEP))
            prev[a] = step[a] = np.abs(xn - xa)
            x[a] = xn
            if final_step is not None:
                last = ~outside & (step[a] <= final_step)
                if self.ntot is not None:
                    last &= self.ntot[a] > np.exp(xn)
                fin = a[last]
                self.done[fin] = True
                self.x[fin] = xn[last]
                self.nuc[fin] = (self.fixed_n[fin] if self.fixed_n is not None
                                 else self.ntot[fin] - np.exp(xn[last]))
                self.resid[fin] = np.maximum(rel[keep][last] * step[fin], step[fin] ** 2)
                a = a[~last]
                if not a.size:
                    break
            active = a


def _significance_intervals(charges: np.ndarray, tab: np.ndarray, thr: float = 40.0,
                            reach: int = compiled_newton.INTERVAL_REACH
                            ) -> tuple[np.ndarray, np.ndarray]:
    """Where in x = ln n_e each stage of a chain can matter, at each tabulated temperature.

    With a_r(x) = C_r - q_r x, stage r is within e^-thr of the largest stage exactly when
    a_s(x) - a_r(x) <= thr for every other stage s, i.e. for x in [xl_r, xr_r] with

        xl_r = max_{s > r} (C_s - C_r - thr) / (q_s - q_r),
        xr_r = min_{s < r} (C_r - C_s + thr) / (q_r - q_s).

    Only stages s within ``reach`` of r are used: a maximum (minimum) over fewer stages can
    only lower xl (raise xr), so the intervals stay supersets.  They are returned as monotone
    envelopes (xl running minimum from the first stage, xr running maximum from the last),
    which again only widen them and make the windows contiguous, clipped to
    [-_X_CLIP, _X_CLIP]; shape (n_T, n_stages) each.  (Compiled where numba is available:
    :func:`sahaboltz.equilibrium.compiled_newton.significance_intervals`, the same values.)
    """
    if compiled_newton.available() and np.isfinite(tab).all():
        return compiled_newton.significance_intervals(charges, tab, thr, reach, _X_CLIP)
    n, nt = tab.shape
    xl = np.full((n, nt), -_X_CLIP)
    xr = np.full((n, nt), _X_CLIP)
    for d in range(1, min(reach, n - 1) + 1):
        dq = (charges[d:] - charges[:-d])[:, None]
        slope = (tab[d:] - tab[:-d]) / dq         # secant slopes between stages r and r + d
        np.maximum(xl[:-d], slope - thr / dq, out=xl[:-d])
        np.minimum(xr[d:], slope + thr / dq, out=xr[d:])
    np.clip(xl, -_X_CLIP, _X_CLIP, out=xl)
    np.clip(xr, -_X_CLIP, _X_CLIP, out=xr)
    xl = np.minimum.accumulate(xl, axis=0)
    xr = np.maximum.accumulate(xr[::-1], axis=0)[::-1]
    return xl.T.copy(), xr.T.copy()


_X_CLIP = compiled_newton.X_CLIP
# window margin: delta = _MARGIN x the last Newton step, within [_DELTA_MIN, _DELTA_MAX]
_MARGIN, _DELTA_MIN, _DELTA_MAX = 2.0, 0.01, 1.0


class _Windows:
    """Charge moments of every element from a window of its significant stages.

    For each temperature the significance intervals of :func:`_significance_intervals` say
    which stages of a chain lie within e^-THR of its largest stage anywhere in
    [x - delta, x + delta]; two binary searches per chain and state give that window of W_k
    consecutive stages.  At the reference point x_ref the window populations are formed once,
    E0_j = exp(a_j(x_ref) - max); for |x - x_ref| <= delta they are exactly E0_j y^j with
    y = exp(-(x - x_ref)), so a Newton pass costs two small array operations per window stage
    and no exponentials.  Stages left out stay below e^-40 (4e-18) of their element's
    largest stage throughout.
    """

    #: chains this short are always taken whole (and H with H- needs its true charges)
    WHOLE = compiled_newton.WHOLE_CHAIN
    _BIG = 4.0 * _X_CLIP + 8.0

    def __init__(self, chains, c_unique, intervals, tpos):
        self.chains = chains
        self.c_unique = c_unique
        self.tpos = tpos                      # each state's index into the unique temperatures
        self.ids = np.arange(tpos.size)       # chunk positions of the rows held here
        m = tpos.size
        self.m = m
        self.xref = np.full(m, np.nan)
        self.delta = np.zeros(m)
        self.width = [None] * len(chains)
        self.start = [np.zeros(m, dtype=np.intp) for _ in chains]
        self.e0 = [None] * len(chains)
        self.whole = [c.n <= self.WHOLE for c in chains]
        self.mom_q = [np.stack([np.ones(c.n), c.charges, c.charges**2, np.abs(c.charges)])
                      for c in chains]
        self._mom_j = {}
        # search keys: the chunk's temperatures one after another, offset by _BIG each
        used, local = np.unique(tpos, return_inverse=True)
        self.local = local.ravel()
        off = (np.arange(used.size) * self._BIG)[:, None]
        self.keys_l, self.keys_r = [], []
        for k, c in enumerate(chains):
            if self.whole[k]:
                self.keys_l.append(None)
                self.keys_r.append(None)
                continue
            xl, xr = intervals[k]
            self.keys_l.append((off - xl[used]).ravel())   # ascending within each T
            self.keys_r.append((off - xr[used]).ravel())

    def _mom(self, w):
        if w not in self._mom_j:
            j = np.arange(w, dtype=float)
            self._mom_j[w] = np.stack([np.ones(w), j, j * j])
        return self._mom_j[w]

    def _refresh(self, sel, x, delta) -> bool:
        """New windows for the states ``sel`` (chunk positions) at x; False if one is too wide."""
        loc = self.local[sel]
        tp = self.tpos[sel]
        base = loc * self._BIG
        plans = []
        for k, c in enumerate(self.chains):
            n = c.n
            if self.whole[k]:
                a = self.c_unique[k][:, tp] - np.multiply.outer(c.charges, x)
                plans.append((k, None, None, a))
                continue
            # lowest significant stage: #{r: xl_r > x + delta}; highest: n-1-#{r: xr_r < x - delta}
            lo = np.searchsorted(self.keys_l[k], base - (x + delta), side="left") - loc * n
            hi = n - 1 - (loc + 1) * n + np.searchsorted(self.keys_r[k], base - (x - delta),
                                                         side="right")
            hi = np.maximum(hi, lo)
            need = int((hi - lo).max()) + 1
            w = self.width[k]
            if w is None:
                w = min(n, need + 1)
            elif need > w:
                return False
            s0 = np.minimum(lo, n - w)
            rows = s0[None, :] + np.arange(w)[:, None]
            tab = self.c_unique[k]
            a = np.take(tab.ravel(), rows * tab.shape[1] + tp[None, :])
            a -= (c.q_min + rows) * x[None, :]
            plans.append((k, w, s0, a))
        for k, w, s0, a in plans:
            a -= a.max(axis=0)
            # e^-300 is as good as 0 here and keeps exp off its slow underflow path
            np.maximum(a, _LOG_FLOOR, out=a)
            np.exp(a, out=a)
            if w is not None:
                if self.width[k] is None:
                    self.width[k] = w
                    self.e0[k] = np.zeros((w, self.m))
                self.start[k][sel] = s0
            elif self.e0[k] is None:
                self.e0[k] = np.zeros((self.chains[k].n, self.m))
            self.e0[k][:, sel] = a
        self.xref[sel] = x
        self.delta[sel] = delta
        return True

    def _compress(self, keep: np.ndarray) -> None:
        """Drop the rows of converged states so later passes touch contiguous arrays."""
        self.ids = self.ids[keep]
        self.m = keep.size
        for name in ("xref", "delta", "tpos", "local"):
            setattr(self, name, getattr(self, name)[keep])
        self.start = [st[keep] for st in self.start]
        self.e0 = [None if e is None else e[:, keep] for e in self.e0]

    def moments(self, sel, x, last_step):
        """(Zbar, sum Var, sum |q|, sum q^2) per nucleus at the states ``sel`` (chunk positions)."""
        rows = np.searchsorted(self.ids, sel)
        if rows.size < 0.6 * self.m:
            self._compress(rows)
            rows = np.arange(rows.size)
        sel = rows
        stale = ~(np.abs(x - self.xref[sel]) <= self.delta[sel])
        if stale.any():
            delta = np.clip(_MARGIN * last_step[stale], _DELTA_MIN, _DELTA_MAX)
            if not self._refresh(sel[stale], x[stale], delta):
                # a window got too narrow: rebuild the windows of these states from scratch
                self.width = [None] * len(self.chains)
                self.e0 = [None] * len(self.chains)
                self.xref[:] = np.nan
                d = np.clip(_MARGIN * last_step, _DELTA_MIN, _DELTA_MAX)
                self._refresh(sel, x, d)
        allsel = sel.size == self.m
        dx = x - self.xref[sel]
        wmax = max(c.n if self.whole[k] else self.width[k] for k, c in enumerate(self.chains))
        powers = np.empty((wmax, sel.size))
        powers[0] = 1.0
        if wmax > 1:
            powers[1:] = np.exp(-dx)
            np.cumprod(powers, axis=0, out=powers)
        zbar, var, zabs, z2 = (np.zeros(sel.size) for _ in range(4))
        for k, c in enumerate(self.chains):
            e0 = self.e0[k] if allsel else self.e0[k][:, sel]
            w = e0.shape[0]
            e = e0 * powers[:w]
            if self.whole[k]:
                s = self.mom_q[k] @ e
                inv = 1.0 / s[0]
                mq, mq2 = s[1] * inv, s[2] * inv
                zabs += c.fraction * (s[3] * inv)
                vq = mq2 - mq * mq
            else:
                s = self._mom(w) @ e
                inv = 1.0 / s[0]
                mj, mj2 = s[1] * inv, s[2] * inv
                base = c.q_min + (self.start[k] if allsel else self.start[k][sel])
                mq = base + mj
                mq2 = base * (base + 2.0 * mj) + mj2
                zabs += c.fraction * mq   # no negative charges in a windowed chain
                vq = mj2 - mj * mj
            zbar += c.fraction * mq
            var += c.fraction * np.maximum(vq, 0.0)
            z2 += c.fraction * mq2
        return zbar, var, zabs, z2
