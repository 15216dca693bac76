"""Benchmark: the thermodynamics of a solved grid, and the closures that replace T.

1. The 200 x 200 grid of benchmarks/bench_solver.py (T = 1,000 K - 1e6 K, P_gas = 1e-4 -
   1e10 dyn cm^-2, log spaced, solar composition, all elements and stages, H-): the solve,
   then every thermodynamic quantity (``state.thermodynamics()``: energy, entropy and all
   response functions with their exact derivatives), for the plain sums and for the default
   physics (occupation probabilities).  Prints both times and the ratio (the issue's budget:
   the thermodynamics adds at most 50 % to the solve).
2. The inverse closures on an N x N grid (default 60 x 60) of (T, rho) states: their u and
   s are computed forward, then the states are found again from (rho, u) and from (P, s).
   Prints the time of each inverse solve and its ratio to the forward solve of the same
   states (a), on its (T, rho) grid, where the temperatures are shared along rows, and (b) at
   the found, all distinct, temperatures (the same work per state as each Newton pass), and
   the round-trip errors.

    python benchmarks/bench_thermo.py [--nt 200] [--np 200] [--inverse-n 60] [--repeat 2]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np

from sahaboltz.data.composition import solar
from sahaboltz.equilibrium import AtomicNetwork, solve_equilibrium


def _best(fn, repeat):
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nt", type=int, default=200)
    ap.add_argument("--np", dest="npr", type=int, default=200)
    ap.add_argument("--inverse-n", type=int, default=60)
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--skip-grid", action="store_true", help="only the inverse closures")
    ap.add_argument("--skip-inverse", action="store_true", help="only the 200 x 200 grid")
    ap.add_argument("--physics", default="plain,default",
                    help="which of plain,default to time (default both)")
    args = ap.parse_args(argv)
    warnings.simplefilter("ignore")          # validity notes are not what is timed
    comp = solar()
    nets = {name: (AtomicNetwork(comp, truncation="plain") if name == "plain"
                   else AtomicNetwork(comp)) for name in args.physics.split(",")}
    for name, net in nets.items():           # compile and warm up
        solve_equilibrium(comp, np.array([5e3, 2e4]), gas_pressure=1e4, network=net,
                          truncation=net.truncation).thermodynamics()

    if not args.skip_grid:
        tt, pp = np.meshgrid(np.geomspace(1e3, 1e6, args.nt), np.geomspace(1e-4, 1e10, args.npr),
                             indexing="ij")
        print(f"grid: {args.nt} x {args.npr} (T, P_gas) states, solar mixture, "
              f"{next(iter(nets.values())).n_species} species")
        for name, net in nets.items():
            t_solve = t_thermo = np.inf
            for _ in range(args.repeat):
                t0 = time.perf_counter()
                st = solve_equilibrium(comp, tt, gas_pressure=pp, network=net,
                                       truncation=net.truncation)
                t1 = time.perf_counter()
                th = st.thermodynamics()
                t2 = time.perf_counter()
                t_solve, t_thermo = min(t_solve, t1 - t0), min(t_thermo, t2 - t1)
            finite = np.isfinite(th.gamma1).mean()
            print(f"  {name:7s}: solve {t_solve:6.2f} s, thermodynamics {t_thermo:6.2f} s, "
                  f"ratio {t_thermo / t_solve:.2f} (best of {args.repeat}); "
                  f"nabla_ad in [{np.nanmin(th.adiabatic_gradient):.3f}, "
                  f"{np.nanmax(th.adiabatic_gradient):.3f}], finite {finite:.0%}")

    if args.skip_inverse:
        return
    n = args.inverse_n
    tt, rr = np.meshgrid(np.geomspace(2e3, 1e6, n), np.geomspace(1e-12, 1e-2, n), indexing="ij")
    print(f"inverse closures: {n} x {n} states (T = 2,000 K - 1e6 K, rho = 1e-12 - 1e-2 g cm^-3)")
    for name, net in nets.items():
        kw = {"network": net, "truncation": net.truncation}
        t_fwd, st = _best(lambda: solve_equilibrium(comp, tt, mass_density=rr, **kw), 1)
        u, s, p = st.internal_energy, st.entropy, st.gas_pressure
        t_u, back_u = _best(lambda: solve_equilibrium(comp, mass_density=rr,
                                                      internal_energy=u, **kw), 1)
        t_s, back_s = _best(lambda: solve_equilibrium(comp, gas_pressure=p, entropy=s, **kw), 1)
        t_dist, _ = _best(lambda: solve_equilibrium(comp, back_u.temperature, mass_density=rr,
                                                    **kw), 1)
        err_u = np.nanmax(np.abs(back_u.internal_energy / u - 1))
        err_s = np.nanmax(np.abs(back_s.entropy / s - 1))
        err_t = max(np.nanmax(np.abs(back_u.temperature / tt - 1)),
                    np.nanmax(np.abs(back_s.temperature / tt - 1)))
        print(f"  {name:7s}: forward {t_fwd:6.2f} s on the grid, {t_dist:6.2f} s at distinct T; "
              f"(rho, u) {t_u:6.2f} s = {t_u / t_fwd:.1f}x grid / {t_u / t_dist:.1f}x distinct; "
              f"(P, s) {t_s:6.2f} s = {t_s / t_fwd:.1f}x / {t_s / t_dist:.1f}x; round trips: "
              f"u {err_u:.1e}, s {err_s:.1e}, T {err_t:.1e}")


if __name__ == "__main__":
    main()
