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
   the temperatures found (those of the states returned; they differ from the grid's in the
   last digits, so fewer are shared), and the round-trip errors.  The Newton passes in
   between run at temperatures of their own for every state.
3. The same for N^2 scattered states (each its own T in 2,000 K - 1e6 K and rho in 1e-12 -
   1e-2 g cm^-3, log-uniform, fixed seed): what a hydrodynamics code asks.  Here the forward
   solve of the same states has a temperature per state too, so the ratio compares like
   with like.

Times are process CPU time (the machine is shared); each figure is the best ("min") and the
median of --repeat runs, and the ratios are formed from both.

    python benchmarks/bench_thermo.py [--nt 200] [--np 200] [--inverse-n 60] [--repeat 3]
                                      [--skip-grid] [--skip-inverse] [--skip-scattered]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np

from sahaboltz.data.composition import solar
from sahaboltz.equilibrium import AtomicNetwork, solve_equilibrium


def _timed(fn):
    t0 = time.process_time()
    out = fn()
    return time.process_time() - t0, out


def _stats(times) -> tuple[float, float]:
    """(min, median) of repeated times."""
    return float(np.min(times)), float(np.median(times))


def _ratio(num, den) -> str:
    (n0, n1), (d0, d1) = _stats(num), _stats(den)
    return f"{n0 / d0:.2f} min / {n1 / d1:.2f} median"


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nt", type=int, default=200)
    ap.add_argument("--np", dest="npr", type=int, default=200)
    ap.add_argument("--inverse-n", type=int, default=60)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--skip-grid", action="store_true", help="only the inverse closures")
    ap.add_argument("--skip-inverse", action="store_true", help="only the 200 x 200 grid")
    ap.add_argument("--skip-scattered", action="store_true",
                    help="not the inverse closures on scattered states")
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
            t_solve, t_thermo = [], []
            for _ in range(args.repeat):
                dt, st = _timed(lambda: solve_equilibrium(comp, tt, gas_pressure=pp, network=net,
                                                          truncation=net.truncation))
                t_solve.append(dt)
                dt, th = _timed(st.thermodynamics)
                t_thermo.append(dt)
            finite = np.isfinite(th.gamma1).mean()
            (s0, s1), (h0, h1) = _stats(t_solve), _stats(t_thermo)
            print(f"  {name:7s}: solve {s0:6.2f} s (median {s1:.2f}), thermodynamics {h0:6.2f} s "
                  f"(median {h1:.2f}), ratio {_ratio(t_thermo, t_solve)} ({args.repeat} runs); "
                  f"nabla_ad in [{np.nanmin(th.adiabatic_gradient):.3f}, "
                  f"{np.nanmax(th.adiabatic_gradient):.3f}], finite {finite:.0%}")

    if args.skip_inverse:
        return
    n = args.inverse_n
    tt, rr = np.meshgrid(np.geomspace(2e3, 1e6, n), np.geomspace(1e-12, 1e-2, n), indexing="ij")
    print(f"inverse closures: {n} x {n} states (T = 2,000 K - 1e6 K, rho = 1e-12 - 1e-2 g cm^-3)")
    for name, net in nets.items():
        _inverse_case(comp, net, tt, rr, args.repeat, grid=True)
    if args.skip_scattered:
        return
    rng = np.random.default_rng(20261203)
    ts = np.exp(rng.uniform(np.log(2e3), np.log(1e6), n * n))
    rs = np.exp(rng.uniform(np.log(1e-12), np.log(1e-2), n * n))
    print(f"inverse closures: {n * n} scattered states (log-uniform in the same ranges)")
    for name, net in nets.items():
        _inverse_case(comp, net, ts, rs, args.repeat, grid=False)


def _inverse_case(comp, net, tt, rr, repeat, grid):
    """Time the (rho, u) and (P, s) closures on the states (tt, rr) against forward solves."""
    kw = {"network": net, "truncation": net.truncation}
    name = "plain" if net.truncation == "plain" else "default"
    t_fwd, t_u, t_s, t_dist = [], [], [], []
    for _ in range(repeat):
        dt, st = _timed(lambda: solve_equilibrium(comp, tt, mass_density=rr, **kw))
        t_fwd.append(dt)
        u, s, p = st.internal_energy, st.entropy, st.gas_pressure
        dt, back_u = _timed(lambda: solve_equilibrium(comp, mass_density=rr, internal_energy=u,
                                                      **kw))
        t_u.append(dt)
        dt, back_s = _timed(lambda: solve_equilibrium(comp, gas_pressure=p, entropy=s, **kw))
        t_s.append(dt)
        dt, _ = _timed(lambda: solve_equilibrium(comp, back_u.temperature, mass_density=rr,
                                                 **kw))
        t_dist.append(dt)
    err_u = np.nanmax(np.abs(back_u.internal_energy / u - 1))
    err_s = np.nanmax(np.abs(back_s.entropy / s - 1))
    err_t = max(np.nanmax(np.abs(back_u.temperature / tt - 1)),
                np.nanmax(np.abs(back_s.temperature / tt - 1)))
    n_t = np.unique(back_u.temperature).size
    where = (f"on the grid ({np.unique(tt).size} temperatures)" if grid
             else f"({np.unique(tt).size} temperatures)")
    print(f"  {name:7s}: forward {_stats(t_fwd)[0]:6.2f} s {where}, "
          f"{_stats(t_dist)[0]:6.2f} s at the found ones ({n_t} distinct) (min of {repeat})")
    first = "grid" if grid else "forward"
    print(f"           (rho, u) {_stats(t_u)[0]:6.2f} s (median {_stats(t_u)[1]:.2f}) = "
          f"{_ratio(t_u, t_fwd)} x {first}, {_ratio(t_u, t_dist)} x found")
    print(f"           (P, s)   {_stats(t_s)[0]:6.2f} s (median {_stats(t_s)[1]:.2f}) = "
          f"{_ratio(t_s, t_fwd)} x {first}, {_ratio(t_s, t_dist)} x found")
    print(f"           round trips: u {err_u:.1e}, s {err_s:.1e}, T {err_t:.1e}")


if __name__ == "__main__":
    main()
