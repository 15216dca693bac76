"""Time to load the whole species database (every element and stage in level_data).

    python benchmarks/bench_database.py [--repeat 5]
"""

import argparse
import statistics
import time

from sahaboltz.data.database import SpeciesDatabase


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    times = []
    for _ in range(args.repeat):
        t0 = time.perf_counter()
        db = SpeciesDatabase()
        times.append(time.perf_counter() - t0)
    n_levels = sum(len(s.levels) for s in db.all_species())
    print(f"species database: {len(db)} species, {n_levels} levels")
    print(f"load time: best {min(times):.3f} s, median {statistics.median(times):.3f} s "
          f"over {args.repeat} runs (import of the package not included)")


if __name__ == "__main__":
    main()
