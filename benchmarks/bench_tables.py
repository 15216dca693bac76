"""Benchmark of population tables: build against the solver, file creation, cache hits (in
Python and from the command line), opening in xarray, interpolation, peak memory.

    python benchmarks/bench_tables.py                      # solar mixture, 1e4 and 1e5 states
    python benchmarks/bench_tables.py --sizes 1e4 --compute analytic
    python benchmarks/bench_tables.py --only xarray,cli    # the quick parts

Parts (``--only``):

- ``build``: per size, a square grid over the default T and P ranges is built (all cores) and
  the same states are solved directly in this process (``solve_block``, the call a worker
  makes); reported are both per-state costs, their ratio (build wall time x workers against
  the solver's time, and CPU time of the build and its workers against the solver's CPU
  time: the fairer figure on a machine shared with other work), the file-creation time (the file, its coordinates
  and variables; stored in the file as ``create_seconds``), the parent's chunk-writing time
  and a cache hit.
- ``xarray``: a small grid of the solar mixture with all stage fractions (every species of
  every element: the variable count of a full table) is opened with
  ``xarray.open_dataset(engine="h5netcdf")``; the time excludes importing xarray.
- ``cli``: ``sahaboltz table build ...`` run twice as a fresh process; the second run is a
  cache hit.  ``python -c "import numpy"`` is timed beside it: the floor of any command.

``--compute analytic`` uses the closed-form pure-hydrogen compute function of the tests (to time
the machinery alone).  Tables go to a temporary cache directory that is deleted at the end.
Peak memory is resource.getrusage's ru_maxrss of this process and of its (worker) children.
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def _rss_mb(who) -> float:
    return resource.getrusage(who).ru_maxrss / 1024.0  # Linux: kB


def _cpu() -> float:
    """CPU seconds of this process and its finished children (the build's workers): less
    sensitive than wall time to other work on the machine."""
    a, b = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return a.ru_utime + a.ru_stime + b.ru_utime + b.ru_stime


TRUNCATION = {"name": None}  # --truncation: the solver's default unless given


def _grid(n_t: int, n_p: int, fractions: str):
    from sahaboltz.tables.spec import spec_from_options
    return spec_from_options(f"2000:50000:{n_t}", f"1e-2:1e8:{n_p}", fractions=fractions,
                             truncation=TRUNCATION["name"])


def bench_build(args, compute, fractions) -> None:
    import h5py

    from sahaboltz.tables import cache
    from sahaboltz.tables.build import block_states
    from sahaboltz.tables.interpolate import open_table

    workers = args.workers or os.cpu_count() or 1
    for size in (int(float(s)) for s in args.sizes.split(",")):
        n = int(round(size ** 0.5))
        spec = _grid(n, n, fractions)
        c0 = _cpu()
        t0 = time.perf_counter()
        path = cache.get_table(spec, compute=compute, workers=workers, progress=False)
        build = time.perf_counter() - t0
        build_cpu = _cpu() - c0  # this process and its (finished) workers
        t0 = time.perf_counter()
        again = cache.get_table(spec, compute=compute, workers=workers, progress=False)
        hit = time.perf_counter() - t0
        assert again == path
        with h5py.File(path, "r") as f:
            create, write = float(f.attrs["create_seconds"]), float(f.attrs["write_seconds"])
        tab = open_table(path)
        print(f"\n{n} x {n} = {n * n:.3g} states, {len(tab.variables)} variables "
              f"({len(tab.quantities)} quantities), file {path.stat().st_size / 1e6:.1f} MB")
        print(f"  build           {build:9.2f} s   ({build / (n * n) * 1e3:.3f} ms/state wall, "
              f"{workers} workers; CPU {build_cpu:.2f} s = {build_cpu / (n * n) * 1e3:.3f} "
              f"ms/state)")
        print(f"  file creation   {create:9.3f} s   (file, coordinates, variables)")
        print(f"  chunk writing   {write:9.3f} s   (parent, whole build)")
        print(f"  cache hit       {hit * 1e3:9.2f} ms")
        print(f"  peak RSS of the build: this process {_rss_mb(resource.RUSAGE_SELF):.0f} MB, "
              f"largest worker {_rss_mb(resource.RUSAGE_CHILDREN):.0f} MB")
        if not args.no_solver:
            from sahaboltz.tables.compute import solve_block

            t, p = block_states(spec, (0, spec.shape[0], 0, spec.shape[1]))
            solve_block(spec, t[:4], p[:4])  # the prepared network, as the workers have it
            c0 = _cpu()
            t0 = time.perf_counter()
            if compute is None:
                solve_block(spec, t, p)
            else:
                compute(spec, t, p)
            solve = time.perf_counter() - t0
            solve_cpu = _cpu() - c0
            print(f"  solver alone    {solve:9.2f} s   ({solve / (n * n) * 1e3:.3f} ms/state wall, "
                  f"1 process; CPU {solve_cpu / (n * n) * 1e3:.3f} ms/state)")
            print(f"  build / solver  {build_cpu / solve_cpu:9.2f}     (CPU per state; wall x "
                  f"workers / wall: {build * workers / solve:.2f})")
        _interpolation(tab, args)
        print(f"  peak RSS so far: this process {_rss_mb(resource.RUSAGE_SELF):.0f} MB, "
              f"largest worker {_rss_mb(resource.RUSAGE_CHILDREN):.0f} MB")
        tab.close()


def _interpolation(tab, args) -> None:
    rng = np.random.default_rng(1)
    m = int(args.points)
    t = np.exp(rng.uniform(np.log(2000), np.log(50000), m))
    p = np.exp(rng.uniform(np.log(1e-2), np.log(1e8), m))
    tab.interpolate("electron_density", t[:10], p[:10])  # load + log the dataset once
    t0 = time.perf_counter()
    tab.interpolate("electron_density", t, p)
    dt = time.perf_counter() - t0
    print(f"  interpolate     {m:.0e} points, 1 quantity: {dt:.3f} s "
          f"({m / dt / 1e6:.2f} M points/s)")
    names = [q for q in tab.quantities if q.startswith("fraction_")][:20]
    tab.interpolate(names, t[:10], p[:10])
    t0 = time.perf_counter()
    tab.interpolate(names, t, p)
    dt = time.perf_counter() - t0
    print(f"  interpolate     {m:.0e} points, {len(names)} quantities: {dt:.3f} s "
          f"({m * len(names) / dt / 1e6:.2f} M point-quantities/s)")


def bench_xarray(args) -> None:
    import xarray as xr  # imported before the clock starts

    from sahaboltz.tables import cache
    from sahaboltz.tables.interpolate import open_table

    spec = _grid(6, 5, "all")  # every species of every element of the solar mixture
    path = cache.get_table(spec, workers=args.workers, progress=False)
    with open_table(path) as tab:
        rows = len(tab.variables["fraction"])
    best = float("inf")
    for _ in range(3):
        t0 = time.perf_counter()
        ds = xr.open_dataset(path, engine="h5netcdf")
        fe2 = float(ds["fraction"].sel(species="Fe II").isel(temperature=2, gas_pressure=2))
        best = min(best, time.perf_counter() - t0)
        ds.close()
    print(f"\nxarray: solar table with all stage fractions ({rows} species, "
          f"{len(ds.data_vars)} variables): open + one value {best * 1e3:.1f} ms "
          f"(Fe II fraction {fe2:.3g})")
    from shutil import which
    if which("ncdump"):
        r = subprocess.run(["ncdump", "-h", str(path)], capture_output=True, text=True)
        print(f"  ncdump -h: exit {r.returncode}, {len(r.stdout.splitlines())} lines")


def bench_cli(args) -> None:
    exe = Path(sys.executable).with_name("sahaboltz")
    argv = [str(exe), "table", "build", "--temperature", "3000:20000:12", "--pressure",
            "1e2:1e6:5", "--no-progress"]
    subprocess.run(argv, check=True, capture_output=True)  # builds (or finds) it
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        r = subprocess.run(argv, check=True, capture_output=True, text=True)
        times.append(time.perf_counter() - t0)
        assert " cached " in r.stdout, r.stdout
    floor = []
    for _ in range(5):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", "import numpy"], check=True)
        floor.append(time.perf_counter() - t0)
    print(f"\ncommand line cache hit: best {min(times):.3f} s, median "
          f"{float(np.median(times)):.3f} s (python -c 'import numpy': best {min(floor):.3f} s, "
          f"median {float(np.median(floor)):.3f} s)")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1e4,1e5", help="numbers of states (square grids)")
    ap.add_argument("--compute", default="solver", choices=("solver", "analytic"))
    ap.add_argument("--workers", type=int, default=None)
    ap.add_argument("--fractions", default="all", help="stage fractions to store (default all)")
    ap.add_argument("--points", type=float, default=1e6, help="interpolation points")
    ap.add_argument("--only", default="build,xarray,cli", help="parts to run")
    ap.add_argument("--truncation", help="partition-function truncation of the solver "
                                         "(default: the solver's, occupation probabilities)")
    ap.add_argument("--no-solver", action="store_true", help="skip the direct solve reference")
    ap.add_argument("--cache-dir", help="keep the tables in this directory (default: a temporary "
                                        "one, deleted at the end)")
    args = ap.parse_args(argv)
    parts = set(args.only.split(","))
    TRUNCATION["name"] = args.truncation

    from sahaboltz.tables import cache

    if args.compute == "analytic":
        sys.path.insert(0, str(ROOT / "tests"))
        from table_helpers import hydrogen_compute as compute
        fractions = "H"
        label = "pure hydrogen, closed form (machinery only)"
    else:
        compute = None
        fractions = args.fractions
        label = "solar mixture (Asplund et al. 2009), equilibrium solver"
    print(f"compute: {label}; truncation: {args.truncation or 'default'}; "
          f"workers: {args.workers or os.cpu_count()}; "
          f"load average {os.getloadavg()[0]:.2f}")

    with tempfile.TemporaryDirectory(prefix="sahaboltz-bench-") as tmp:
        os.environ[cache.CACHE_ENV] = args.cache_dir or tmp
        if "xarray" in parts:
            bench_xarray(args)
        if "cli" in parts:
            bench_cli(args)
        if "build" in parts:
            bench_build(args, compute, fractions)
    return 0


if __name__ == "__main__":
    sys.exit(main())
