"""Start-up of the command line, and the structure command's one vectorized solve.

    python benchmarks/bench_interface.py [--repeat 7] [--rows 300]

1. ``sahaboltz --help`` and ``sahaboltz state -h`` as new processes, against a bare
   ``python -c pass`` (the interpreter's own start, the reference in the same run): the
   top-level help imports no command module, so it should cost little above the interpreter.
2. ``state --from``: the rows of a structure solved in one call of the solver against the same
   rows solved one call per row (the reference), same results.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def _wall(argv: list[str], repeat: int) -> float:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        subprocess.run(argv, env=env, stdout=subprocess.DEVNULL, check=True)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def startup(repeat: int) -> None:
    py = sys.executable
    bare = _wall([py, "-c", "pass"], repeat)
    help_top = _wall([py, "-m", "sahaboltz.faces.cli", "--help"], repeat)
    help_state = _wall([py, "-m", "sahaboltz.faces.cli", "state", "-h"], repeat)
    print(f"python -c pass          {bare:6.3f} s (median of {repeat})")
    print(f"sahaboltz --help        {help_top:6.3f} s  ({help_top / bare:4.1f} x the bare "
          f"interpreter, {help_top - bare:.3f} s above it)")
    print(f"sahaboltz state -h      {help_state:6.3f} s  ({help_state / bare:4.1f} x; imports "
          f"the state command and the solver's registries)")


def structure(rows: int) -> None:
    import sahaboltz as sb

    comp = sb.solar()
    t = np.geomspace(3500.0, 12000.0, rows)
    p = np.geomspace(1e2, 1e6, rows)
    sb.solve_equilibrium(comp, t[:2], gas_pressure=p[:2])        # warm caches and compile
    t0 = time.perf_counter()
    one = sb.solve_equilibrium(comp, t, gas_pressure=p)
    vec = time.perf_counter() - t0
    n = min(rows, 10)
    t0 = time.perf_counter()
    loop = [float(sb.solve_equilibrium(comp, t[k], gas_pressure=p[k]).n_e) for k in range(n)]
    per_row = (time.perf_counter() - t0) / n
    np.testing.assert_allclose(loop, one.n_e[:n], rtol=1e-9)
    print(f"structure of {rows} rows, solar mix: one vectorized solve {vec:.3f} s "
          f"({1e3 * vec / rows:.2f} ms per row); one solve per row {1e3 * per_row:.1f} ms per "
          f"row (first {n} rows): {per_row * rows / vec:.0f} x slower")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=7)
    ap.add_argument("--rows", type=int, default=300)
    args = ap.parse_args()
    startup(args.repeat)
    structure(args.rows)


if __name__ == "__main__":
    main()
