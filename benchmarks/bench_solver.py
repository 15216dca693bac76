"""Benchmark: the vectorized mixture solver against a per-state reference.

A grid of N_T x N_P (T, P_gas) states (default 200 x 200, T = 1,000 K - 1e6 K and
P_gas = 1e-4 - 1e10 dyn cm^-2, log spaced), solar composition (Asplund et al. 2009), every
element with data, every ionization stage, H- included, plain partition functions (the
reference's physics); first, the default physics (occupation probabilities) is timed against
the plain sums on the same grid, as a ratio.

The reference solves one state at a time with scipy.optimize.brentq on ln n_e, with the same
physics: the same Saha chains (the same ln-population tables C_q(T), handed to it precomputed
for free, which favours the reference), padded into an (elements x stages) array so that each
residual evaluation is one numpy expression over all species.  It is timed on a subset of the
states spread over the grid and scaled to the full grid.

A second reference does the same with a residual that loops over the elements in Python
(timed on a quarter of the subset).  A third solves the default physics (occupation
probabilities) the same way, with ln U of every stage evaluated at each residual's n_e in one
flat call (timed on a third of the subset), against the default solve.

The plain solve and the reference alternate --repeat times (this machine's speed drifts);
the speedup is given best against best and as the median of the alternating pairs.

Prints: times, speedups, the solver's average passes, the largest n_e difference against the
reference, the charge-neutrality and element-conservation residuals of the solved grid.

    python benchmarks/bench_solver.py [--nt 200] [--np 200] [--subset 400] [--repeat 3]
                                      [--numpy-path] [--bands 4] [--only-ratio]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy.optimize import brentq

from sahaboltz.constants import K_B
from sahaboltz.data.composition import solar
from sahaboltz.equilibrium import AtomicNetwork, solve_equilibrium


def _padded_charges(chains) -> np.ndarray:
    """The charges of every chain's stages, (chains x longest chain), 0 past a chain's end."""
    q = np.zeros((len(chains), max(c.n for c in chains)))
    for k, c in enumerate(chains):
        q[k, :c.n] = c.charges
    return q


def _padded_tables(chains, shape, table_of, t: float) -> np.ndarray:
    """Each chain's table at one temperature (``table_of(chain, [t])``), padded with -inf."""
    out = np.full(shape, -np.inf)
    for k, c in enumerate(chains):
        out[k, :c.n] = table_of(c, np.array([t]))[:, 0]
    return out


def _residual(a, q, alpha, nuc, x) -> float:
    """g(x) = ln(N Zbar) - x from the stages' a = C - q x (-inf past a chain's end)."""
    a = a - a.max(axis=1, keepdims=True)
    e = np.exp(a)
    zbar = alpha @ ((e * q).sum(axis=1) / e.sum(axis=1))
    if zbar <= 0:
        return -1e3  # n_e far too high: negative ions outweigh the positive
    return np.log(nuc * zbar) - x


def _brentq_ln_ne(g, ntot: float, zmax: float) -> tuple[float, int]:
    """n_e from brentq on ln n_e, bracketed below the largest n_e the mixture can give."""
    hi = np.log(ntot * zmax / (1.0 + zmax))
    lo = hi - 50.0
    while g(lo) <= 0:
        lo -= 50.0
    root, info = brentq(g, lo, hi, xtol=1e-13, rtol=8.9e-16, full_output=True)
    return float(np.exp(root)), info.function_calls


def reference_solver(network: AtomicNetwork):
    """A straightforward per-state solver: brentq on ln n_e with the network's Saha chains."""
    chains = network.chains
    q = _padded_charges(chains)
    alpha = np.array([c.fraction for c in chains])

    def tables(t: float) -> np.ndarray:
        return _padded_tables(chains, q.shape, network.log_c, t)

    def solve(t: float, p: float, ctab: np.ndarray) -> tuple[float, int]:
        ntot = p / (K_B * t)
        return _brentq_ln_ne(lambda x: _residual(ctab - q * x, q, alpha, ntot - np.exp(x), x),
                             ntot, network.max_mean_charge)

    return tables, solve


def weighted_reference(network: AtomicNetwork):
    """The same brentq for density-dependent partition functions (the default occupation
    probabilities): every residual evaluates ln U of all stages at that n_e in one flat call
    (``PartitionModel.evaluate_pairs``, compiled where the package's is) and forms the chains'
    C_q = K_q(T) + ln U_q - ln U_first from the T-only part K_q, given for free."""
    chains = network.chains
    q = _padded_charges(chains)
    flat = np.full(q.shape, -1, dtype=np.intp)
    for k, c in enumerate(chains):
        flat[k, :c.n] = np.where(c.model_rows >= 0, c.model_rows + c.model_offset, -1)
    has = flat >= 0
    rows = flat[has]
    k_h = next(k for k, c in enumerate(chains) if c.charges[0] < 0)   # the chain with H-
    alpha = np.array([c.fraction for c in chains])
    model = network.model

    def tables(t: float) -> np.ndarray:
        return _padded_tables(chains, q.shape, network.bare_log_c, t)

    def solve(t: float, p: float, bare: np.ndarray) -> tuple[float, int]:
        ntot = p / (K_B * t)
        tt = np.array([t])
        zeros = np.zeros(rows.size, dtype=np.intp)

        def g(x):
            ne = np.array([np.exp(x)])
            ln_u = np.zeros_like(bare)
            ln_u[has] = np.log(model.evaluate_pairs(tt, ne, rows, want_temperature=False,
                                                    states=zeros)[0])
            ln_u[k_h, 0] = network.negative_ion_log_u(chains[k_h], tt, ne)[0][0]
            return _residual(bare + ln_u - ln_u[:, :1] - q * x, q, alpha, ntot - ne[0], x)

        return _brentq_ln_ne(g, ntot, network.max_mean_charge)

    return tables, solve


def looping_reference(network: AtomicNetwork):
    """The same brentq, but each residual walks the elements one by one (a plain loop)."""
    chains = network.chains

    def solve(t: float, p: float, ctabs: list) -> float:
        ntot = p / (K_B * t)

        def g(x):
            zbar = 0.0
            for c, tab in zip(chains, ctabs):
                a = tab - c.charges * x
                e = np.exp(a - a.max())
                zbar += c.fraction * float(c.charges @ e) / float(e.sum())
            if zbar <= 0:
                return -1e3
            return np.log((ntot - np.exp(x)) * zbar) - x

        return _brentq_ln_ne(g, ntot, network.max_mean_charge)[0]

    return solve


def _time_bands(comp, tt, pp, plain_net, default_net, bands, repeat) -> None:
    """The default and plain solves of each of ``bands`` consecutive temperature bands of the
    grid (rows of ``tt``), best of ``repeat`` alternating runs: where the default costs."""
    edges = np.linspace(0, tt.shape[0], bands + 1).astype(int)
    print(f"by temperature band (best of {repeat}):")
    for a, b in zip(edges[:-1], edges[1:]):
        best = {}
        for _ in range(repeat):
            for name, net in (("plain", plain_net), ("default", default_net)):
                t0 = time.perf_counter()
                solve_equilibrium(comp, tt[a:b], gas_pressure=pp[a:b], network=net,
                                  truncation=net.truncation)
                best[name] = min(best.get(name, np.inf), time.perf_counter() - t0)
        print(f"  T = {tt[a, 0]:9.0f} - {tt[b - 1, 0]:9.0f} K: default {best['default']:.3f} s, "
              f"plain {best['plain']:.3f} s, ratio {best['default'] / best['plain']:.2f}")


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nt", type=int, default=200)
    ap.add_argument("--np", dest="npr", type=int, default=200)
    ap.add_argument("--subset", type=int, default=400, help="states solved by the reference")
    ap.add_argument("--tmax", type=float, default=1e6)
    ap.add_argument("--repeat", type=int, default=3, help="repeats of the plain/default pair")
    ap.add_argument("--numpy-path", action="store_true",
                    help="also time both physics on the numpy engine (no compiled kernels)")
    ap.add_argument("--bands", type=int, default=0,
                    help="also time both physics on this many temperature bands of the grid "
                         "(where the default physics costs)")
    ap.add_argument("--only-ratio", action="store_true",
                    help="stop after the default/plain timings (no reference solves)")
    args = ap.parse_args(argv)

    temps = np.geomspace(1e3, args.tmax, args.nt)
    press = np.geomspace(1e-4, 1e10, args.npr)
    tt, pp = np.meshgrid(temps, press, indexing="ij")
    comp = solar()

    t0 = time.perf_counter()
    network = AtomicNetwork(comp, truncation="plain")
    t_net = time.perf_counter() - t0
    print(f"grid: {args.nt} x {args.npr} states; {len(comp)} elements, {network.n_species} "
          f"species (all stages, H-); {len(network.unit_partition)} stages without levels "
          "taken with U = 1")
    print(f"network set-up (database, partition-function models): {t_net:.2f} s "
          "(shared, not counted below)")

    # the default physics (occupation probabilities, density-dependent U) against the plain
    # sums, in this process, alternating, best of --repeat
    default_net = AtomicNetwork(comp)
    solve_equilibrium(comp, tt[:2, :2], gas_pressure=pp[:2, :2], network=default_net)  # compile
    # the check behind the warning that an explicit plain sum misleads is timed on its own
    from sahaboltz.equilibrium import solver as _solver
    from sahaboltz.equilibrium.validity import plain_excess
    warn_plain, _solver.warn_plain = _solver.warn_plain, lambda state, stacklevel=3: None
    from sahaboltz.kernels import compiled
    available = compiled.available
    runs = [("plain", network), ("default", default_net)]
    if args.numpy_path:
        runs += [("plain, numpy path", network), ("default, numpy path", default_net)]
    times = {name: [] for name, _ in runs}
    for _ in range(args.repeat):
        for name, net in runs:
            compiled.available = (lambda: False) if "numpy" in name else available
            t0 = time.perf_counter()
            st = solve_equilibrium(comp, tt, gas_pressure=pp, network=net,
                                   truncation=net.truncation)
            times[name].append(time.perf_counter() - t0)
            compiled.available = available
            if name == "default":
                default_state = st
            elif name == "plain":
                st_plain = st
    t0 = time.perf_counter()
    plain_excess(st_plain)
    t_check = time.perf_counter() - t0
    ratio = min(times["default"]) / min(times["plain"])
    print(f"default physics (occupation probabilities): best {min(times['default']):.2f} s, "
          f"median {np.median(times['default']):.2f} s; plain sums: best "
          f"{min(times['plain']):.2f} s, median {np.median(times['plain']):.2f} s; "
          f"ratio {ratio:.2f} (best) {np.median(times['default']) / np.median(times['plain']):.2f}"
          f" (median); passes: mean {default_state.report.mean_passes:.2f}, "
          f"max {int(default_state.report.passes.max())}")
    if args.numpy_path:
        for name in ("plain", "default"):
            slow = min(times[f"{name}, numpy path"])
            print(f"  {name} on the numpy path (no compiled kernels): best {slow:.2f} s, "
                  f"{slow / min(times[name]):.2f}x the compiled path")
        print(f"  numpy path, default over plain: "
              f"{min(times['default, numpy path']) / min(times['plain, numpy path']):.2f}")
    print(f"  (the check of an explicit plain sum against the weighted one, not in the plain "
          f"time above: {t_check:.2f} s)")
    if args.bands:
        _time_bands(comp, tt, pp, network, default_net, args.bands, args.repeat)
    if args.only_ratio:
        _solver.warn_plain = warn_plain
        return

    t0, c0 = time.perf_counter(), time.process_time()
    state = solve_equilibrium(comp, tt, gas_pressure=pp, network=network, truncation="plain")
    t_vec, c_vec = time.perf_counter() - t0, time.process_time() - c0
    print(f"vectorized solver: {t_vec:.2f} s wall, {c_vec:.2f} s CPU for {tt.size} states "
          f"({c_vec / tt.size * 1e6:.1f} us CPU per state)")
    print(f"  passes over the data: mean {state.report.mean_passes:.2f}, "
          f"max {int(state.report.passes.max())}")

    rng = np.random.default_rng(1)
    pick = rng.choice(tt.size, size=min(args.subset, tt.size), replace=False)
    tables, solve = reference_solver(network)
    ut = np.unique(tt.ravel()[pick])
    t0 = time.perf_counter()
    ctabs = {t: tables(t) for t in ut}
    t_tab = time.perf_counter() - t0
    ne_ref = np.empty(pick.size)

    def run_reference():
        evals = 0
        c0 = time.process_time()
        for j, i in enumerate(pick):
            ne_ref[j], nev = solve(tt.ravel()[i], pp.ravel()[i], ctabs[tt.ravel()[i]])
            evals += nev
        return time.process_time() - c0, evals

    # the machine's speed drifts: the solver and the reference alternate, --repeat times,
    # and the ratio is formed from the best of each and per pair (median)
    c_vecs, c_refs = [c_vec], []
    for r in range(args.repeat):
        c_ref, evals = run_reference()
        c_refs.append(c_ref / pick.size * tt.size)
        if r:
            c0 = time.process_time()
            solve_equilibrium(comp, tt, gas_pressure=pp, network=network, truncation="plain")
            c_vecs.append(time.process_time() - c0)
    _solver.warn_plain = warn_plain
    pair = np.array(c_refs) / np.array(c_vecs)
    print(f"reference (brentq per state): {min(c_refs) / tt.size * 1e3:.2f} ms CPU per state "
          f"(best of {args.repeat}; median {np.median(c_refs) / tt.size * 1e3:.2f}), "
          f"{evals / pick.size:.1f} residual evaluations per state; scaled to the grid "
          f"{min(c_refs):.1f} s")
    print(f"  (its Saha tables, given for free: {t_tab / ut.size * 1e3:.1f} ms per temperature)")
    print(f"speedup (CPU): {min(c_refs) / min(c_vecs):.0f}x best against best, "
          f"{np.median(pair):.0f}x median of {pair.size} alternating pairs "
          f"(min {pair.min():.0f}x, max {pair.max():.0f}x); solver best {min(c_vecs):.3f} s")

    loop = looping_reference(network)
    few = pick[: max(1, pick.size // 4)]
    ne_loop = np.empty(few.size)
    t0, c0 = time.perf_counter(), time.process_time()
    for j, i in enumerate(few):
        t_i = tt.ravel()[i]
        rows = ctabs[t_i]
        ne_loop[j] = loop(t_i, pp.ravel()[i], [rows[k, :c.n] for k, c in
                                               enumerate(network.chains)])
    t_loop = (time.perf_counter() - t0) / few.size * tt.size
    c_loop = (time.process_time() - c0) / few.size * tt.size
    print(f"second reference (same brentq, residual looping over the elements): "
          f"{t_loop / tt.size * 1e3:.2f} ms per state, scaled {t_loop:.1f} s; "
          f"speedup {c_loop / min(c_vecs):.0f}x CPU; max n_e difference "
          f"{np.abs(state.n_e.ravel()[few] / ne_loop - 1).max():.2e}")

    # the default physics against the same brentq with occupation-weighted U
    w_tables, w_solve = weighted_reference(default_net)
    few = pick[: max(1, pick.size // 3)]
    w_bare = {t: w_tables(t) for t in np.unique(tt.ravel()[few])}
    ne_w = np.empty(few.size)
    c0 = time.process_time()
    evals = 0
    for j, i in enumerate(few):
        ne_w[j], nev = w_solve(tt.ravel()[i], pp.ravel()[i], w_bare[tt.ravel()[i]])
        evals += nev
    c_w = (time.process_time() - c0) / few.size * tt.size
    best_default = min(times["default"])
    print(f"default-physics reference (the same brentq, occupation-weighted U of every stage "
          f"at each evaluation): {c_w / tt.size * 1e3:.2f} ms CPU per state ({few.size} "
          f"states, {evals / few.size:.1f} evaluations each), scaled {c_w:.0f} s; speedup of "
          f"the default solve {c_w / best_default:.0f}x (best, {best_default:.2f} s); max n_e "
          f"difference {np.abs(default_state.n_e.ravel()[few] / ne_w - 1).max():.2e}")

    ne_vec = state.n_e.ravel()[pick]
    rel = np.abs(ne_vec / ne_ref - 1.0)
    print(f"n_e agreement on the subset: max relative difference {rel.max():.2e}")
    t0 = time.perf_counter()
    charge = state.charge_residual()
    cons = state.conservation_residual()
    print(f"charge-neutrality residual (all states): max {charge.max():.2e}; "
          f"element conservation: max {cons.max():.2e} "
          f"(check took {time.perf_counter() - t0:.1f} s)")


if __name__ == "__main__":
    main()
