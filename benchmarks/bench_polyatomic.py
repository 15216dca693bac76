"""Benchmark: the molecular equilibrium with every molecule against the diatomics only.

Solar mixture (Asplund et al. 2009) on an n x n grid, T = 1000-6000 K (linear), P_gas = 1e-2-1e8
dyn cm^-2 (log spaced).  "all" is the Barklem & Collet diatomics plus the NASA polyatomic species
and molecular ions (about 800 species for the solar mixture); "diatomics" the Barklem & Collet ones
(283).  Prints the time per state of each and their ratio (issue 17's target: at most 3), after a
warm-up solve of each set that builds the networks and data tables; one run each, in this process.

    python benchmarks/bench_polyatomic.py [--n 100] [--condensates]

With ``--condensates`` a third run adds the gas-condensate equilibrium to "all" (issue 17's
target: at most 10 times the diatomics-only solve).
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from sahaboltz.data.composition import solar
from sahaboltz.equilibrium.solver import solve_equilibrium


def main() -> None:
    p = argparse.ArgumentParser()
    p.add_argument("--n", type=int, default=100)
    p.add_argument("--condensates", action="store_true")
    a = p.parse_args()
    comp = solar()
    t = np.linspace(1000.0, 6000.0, a.n)[:, None]
    pg = np.geomspace(1e-2, 1e8, a.n)[None, :]
    times, states = {}, {}
    runs = [("diatomics", "diatomics", False), ("all", "all", False)]
    if a.condensates:
        runs.append(("all+cond", "all", True))
    for label, mset, cond in runs:
        solve_equilibrium(comp, 3000.0, gas_pressure=1e5, molecules=mset,
                          condensates=cond)                                 # warm-up
        t0 = time.perf_counter()
        states[label] = solve_equilibrium(comp, t, gas_pressure=pg, molecules=mset,
                                          condensates=cond)
        times[label] = time.perf_counter() - t0
    n = a.n * a.n
    for mset, st in states.items():
        print(f"{mset:9s}: {len(st.molecule_names):4d} molecules, {len(st.system.mol_chains)} "
              f"molecular elements, {1e3 * times[mset] / n:.3f} ms/state, mean passes "
              f"{st.report.mean_passes:.2f}, worst conservation residual "
              f"{st.conservation_residual().max():.1e}, worst charge residual "
              f"{st.charge_residual().max():.1e}, converged {int(st.converged.sum())}/{n}")
    print(f"grid {a.n} x {a.n}: ratio all / diatomics = {times['all'] / times['diatomics']:.2f} "
          "(target <= 3)")
    if a.condensates:
        print(f"grid {a.n} x {a.n}: ratio all+condensates / diatomics = "
              f"{times['all+cond'] / times['diatomics']:.2f} (target <= 10)")


if __name__ == "__main__":
    main()
