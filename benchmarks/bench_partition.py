"""Time U(T) for every species in the database at 1,000 temperatures.

Compared side by side, in the same run, with one numpy exp over an array of the same number of
elements (levels x temperatures), both allocating (np.exp(x)) and in place (np.exp(x, out=x)).
Each figure is the best of --repeat runs (and the ratios also as medians).  Prints the
figures; asserts nothing.

    python benchmarks/bench_partition.py [--repeat 3] [--n-t 1000] [--t-min 1000] [--t-max 50000]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from sahaboltz.data.database import default_database
from sahaboltz.kernels.partition import PartitionModel


def best(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--n-t", type=int, default=1000)
    ap.add_argument("--t-min", type=float, default=1000.0)
    ap.add_argument("--t-max", type=float, default=50000.0)
    args = ap.parse_args()

    db = default_database()
    species = [sp for sp in db.all_species() if sp.is_bare_nucleus or sp.bound.any()]
    skipped = len(db.all_species()) - len(species)
    t0 = time.perf_counter()
    model = PartitionModel(species)
    t_pack = time.perf_counter() - t0
    n_el = model.n_levels * args.n_t
    print(f"species: {model.n_species} (skipped {skipped} without bound levels), "
          f"packed levels: {model.n_levels}, pack time {t_pack:.3f} s")
    print(f"elements (levels x temperatures): {n_el:.3e}")

    rng = np.random.default_rng(0)
    x = -rng.uniform(0.0, 60.0, n_el)  # arguments of the size and range the sum sees
    y = x.copy()
    cases = {
        "geometric": np.geomspace(args.t_min, args.t_max, args.n_t),
        "linear": np.linspace(args.t_min, args.t_max, args.n_t),
        "linear 1e3-1e4 K": np.linspace(1000.0, 10000.0, args.n_t),
        # hot enough that no term can be skipped: the cost of the sum itself
        "linear 3e4-5e4 K": np.linspace(30000.0, 50000.0, args.n_t),
    }
    # the machine may be shared: interleave the timings and keep the best of each, so that
    # load changes during the run hit the baseline and the sums alike
    jobs = {"exp alloc": lambda: np.exp(x),
            "copy": lambda: np.copyto(y, x),
            "exp in place": lambda: (np.copyto(y, x), np.exp(y, out=y))}
    for label, temps in cases.items():
        jobs[f"U {label}"] = (lambda tt=temps: model.evaluate(tt))
        jobs[f"U+d {label}"] = (lambda tt=temps: model.evaluate_with_derivative(tt))
    times = {k: [] for k in jobs}
    for _ in range(args.repeat):
        for k, fn in jobs.items():
            times[k].append(best(fn, 1))
    tb = {k: min(v) for k, v in times.items()}
    t_exp_alloc = tb["exp alloc"]
    t_exp_inplace = tb["exp in place"] - tb["copy"]
    del y
    print(f"np.exp over {n_el:.3e} elements: allocating {t_exp_alloc:.3f} s, "
          f"in place {t_exp_inplace:.3f} s (best of {args.repeat}, interleaved)")
    tm = {k: float(np.median(v)) for k, v in times.items()}
    t_exp_median = tm["exp in place"] - tm["copy"]
    for label in cases:
        t_u, t_ud = tb[f"U {label}"], tb[f"U+d {label}"]
        print(f"U, T {label:18s}: {t_u:.3f} s  ratio {t_u / t_exp_alloc:.2f} (alloc exp) "
              f"{t_u / t_exp_inplace:.2f} (in-place exp);  U + dlnU/dlnT {t_ud:.3f} s "
              f"ratio {t_ud / t_exp_inplace:.2f} (in-place); medians of {args.repeat}: "
              f"{tm[f'U {label}'] / t_exp_median:.2f} and {tm[f'U+d {label}'] / t_exp_median:.2f}")

    # density-dependent truncations, for the record (fewer states: they cost more per state)
    sub = [sp for sp in species if sp.Z <= 30 and sp.charge <= 3]
    grid_t, grid_ne = np.meshgrid(np.geomspace(3000, 50000, 50), np.geomspace(1e10, 1e18, 20))
    for trunc, comp in (("lowered", False), ("occupation", False), ("occupation", True)):
        m = PartitionModel(sub, trunc, comp)
        t_m = best(lambda: m.evaluate(grid_t, n_e=grid_ne), 1)
        print(f"{trunc:10s} completion={comp!s:5s}: {m.n_species} species (Z <= 30, I-IV), "
              f"{m.n_levels} packed levels, 1,000 (T, n_e) states: {t_m:.3f} s")


if __name__ == "__main__":
    main()
