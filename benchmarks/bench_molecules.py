"""Benchmark: the molecular equilibrium against the atoms-only solver on a 100 x 100 (T, P) grid.

Solar mixture (Asplund et al. 2009), T = 1000-10000 K (log spaced), P_gas = 1e-2-1e8 dyn cm^-2.
Prints the time per state of each solver and their ratio (one run each, after a warm-up that
builds the species network and the partition-function tables).

    python benchmarks/bench_molecules.py [--n 100] [--molecules default|all]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from sahaboltz.data.composition import solar
from sahaboltz.equilibrium.network import AtomicNetwork
from sahaboltz.equilibrium.solver import solve_equilibrium


def main() -> None:
    p = argparse.ArgumentParser()
    p.add_argument("--n", type=int, default=100)
    p.add_argument("--molecules", default="default")
    a = p.parse_args()
    comp = solar()
    t = np.geomspace(1000.0, 10000.0, a.n)[:, None]
    pg = np.geomspace(1e-2, 1e8, a.n)[None, :]
    net = AtomicNetwork(comp)
    solve_equilibrium(comp, 5000.0, gas_pressure=1e5, network=net)           # warm-up
    solve_equilibrium(comp, 5000.0, gas_pressure=1e5, molecules=a.molecules)
    t0 = time.perf_counter()
    atoms = solve_equilibrium(comp, t, gas_pressure=pg, network=net)
    t1 = time.perf_counter()
    mol = solve_equilibrium(comp, t, gas_pressure=pg, molecules=a.molecules)
    t2 = time.perf_counter()
    n = atoms.n_e.size
    print(f"grid {a.n} x {a.n} = {n} states, molecules={a.molecules!r} "
          f"({len(mol.molecule_names)} molecules, {len(mol.system.mol_chains)} molecular elements)")
    print(f"atoms-only : {1e3 * (t1 - t0) / n:.4f} ms/state  (mean passes {atoms.report.mean_passes:.2f})")
    print(f"molecules  : {1e3 * (t2 - t1) / n:.4f} ms/state  (mean Newton passes "
          f"{mol.report.mean_passes:.2f}, incl. the atoms-only start)")
    print(f"ratio molecules / atoms-only: {(t2 - t1) / (t1 - t0):.2f}")
    print(f"worst charge residual {mol.charge_residual().max():.2e}, "
          f"worst conservation residual {mol.conservation_residual().max():.2e}")


if __name__ == "__main__":
    main()
