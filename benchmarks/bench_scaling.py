"""Benchmark of table builds beyond one process: states per second per core in a local
process pool (1 and 2 processes) and on a Dask LocalCluster of 2 worker processes, and a
projection of a 1e8-state build on N cores from the measured per-state cost.

    python benchmarks/bench_scaling.py                       # solar mixture, 1600 states
    python benchmarks/bench_scaling.py --states 400 --only local1,dask
    python benchmarks/bench_scaling.py --truncation plain --cores 64,512,4096

Every configuration builds the same grid (solar mixture, Asplund et al. 2009, all stage
fractions, the solver's default physics unless ``--truncation``) with the same block size
(``--block``), after a warm-up build of a small grid of the same mixture, and on every Dask worker a warm-up
block (the solver's prepared network, compiled loops and the level data are then loaded in
every worker, as they are for all but the first blocks of a long build; local pool workers
are forked from this process and inherit them).  Reported per configuration: wall time,
states/s, states/s per core (states/s / cores in use), core-seconds per state, and the
largest resident memory of a worker (ru_maxrss), and the CPU time per state (this process
and its pool workers, or the Dask workers -- the writer and the LocalCluster's scheduler, in
this process, are printed apart; steadier than wall time on a machine shared with other
work).  The Dask workers run without Dask's statistical profiler unless ``--profile``.
The file size per state is that of the table built.  The projection assumes the CPU time per state stays what the cluster measured
(blocks are independent); the single writer must then take the file at size/time, which is
printed beside it (its own measured rate: ``write_seconds`` of the tables built).
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def _spec(n_t: int, n_p: int, truncation):
    from sahaboltz.tables.spec import spec_from_options
    return spec_from_options(f"3000:40000:{n_t}", f"1e-1:1e7:{n_p}", truncation=truncation)


def _rss_mb_self() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux: kB


def _build(spec, path, **kw) -> tuple[float, dict]:
    from sahaboltz.tables import cache
    from sahaboltz.tables.build import build_table

    stats: dict = {}
    prov = cache.compute_provenance(None, spec)
    t0 = time.perf_counter()
    build_table(spec, path, progress=False, provenance=prov, resume=False, stats=stats, **kw)
    return time.perf_counter() - t0, stats


def _children_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0


def _cpu(who=resource.RUSAGE_SELF) -> float:
    r = resource.getrusage(who)
    return r.ru_utime + r.ru_stime


def _worker_cpu() -> float:  # runs on a Dask worker
    return _cpu()


def _warm_worker(spec) -> None:  # runs on every Dask worker: what its first block would load
    from sahaboltz.tables.blocks import run_block
    from sahaboltz.tables.cluster import worker_identity
    from sahaboltz.tables.compute import solver_compute
    worker_identity(("level_data_digest",))
    run_block(solver_compute, spec, (0, 1, 0, 8))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--states", type=int, default=1600, help="states of the timed grid")
    ap.add_argument("--block", type=int, default=200, help="states per block")
    ap.add_argument("--truncation", default=None, help="solver truncation (default: its own)")
    ap.add_argument("--only", default="local1,local2,dask")
    ap.add_argument("--project", type=float, default=1e8, help="states of the projected build")
    ap.add_argument("--cores", default="2,64,256,1024,4096", help="core counts to project to")
    ap.add_argument("--profile", action="store_true",
                    help="keep the Dask workers' profiler on (Dask's default)")
    args = ap.parse_args(argv)
    import h5py

    n_p = 40
    n_t = max(2, args.states // n_p)
    spec = _spec(n_t, n_p, args.truncation)
    warm = _spec(2, 8, args.truncation)
    parts = args.only.split(",")
    rows = []
    tmp = Path(tempfile.mkdtemp(prefix="sb-scaling-"))
    print(f"grid {spec.describe()}; {spec.size} states, blocks of {args.block}; "
          f"load average {os.getloadavg()[0]:.2f} at start; cpu_count {os.cpu_count()}")
    file_bytes = write_s = None
    for part in parts:
        if part.startswith("local"):
            w = int(part[5:])
            _build(warm, tmp / "warm.h5", workers=w, chunk_states=args.block)
            c0 = _cpu() + _cpu(resource.RUSAGE_CHILDREN)
            wall, st = _build(spec, tmp / f"{part}.h5", workers=w, chunk_states=args.block)
            cpu = _cpu() + _cpu(resource.RUSAGE_CHILDREN) - c0  # the pool's workers are reaped
            rss = _rss_mb_self() if w == 1 else _children_rss_mb()
            rows.append((f"local pool, {w} process{'es' if w > 1 else ''}", w, wall, cpu, rss))
            path = tmp / f"{part}.h5"
        elif part == "dask":
            import dask
            import distributed
            # as docs/scaling.md recommends: without the workers' statistical profiler, which
            # samples every thread every 10 ms (about 12% more CPU per block, measured)
            dask.config.set({"distributed.worker.profile.enabled": args.profile})
            cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1,
                                               processes=True, dashboard_address=None,
                                               silence_logs=40)
            client = distributed.Client(cluster)
            try:
                _build(warm, tmp / "warm.h5", client=client, chunk_states=args.block)
                client.run(_warm_worker, warm)
                w0, c0 = sum(client.run(_worker_cpu).values()), _cpu()
                wall, st = _build(spec, tmp / "dask.h5", client=client,
                                  chunk_states=args.block)
                cpu = sum(client.run(_worker_cpu).values()) - w0  # the workers
                here = _cpu() - c0  # this process: the writer, and the LocalCluster's scheduler
                rss = max(client.run(lambda: resource.getrusage(
                    resource.RUSAGE_SELF).ru_maxrss / 1024.0).values())
            finally:
                client.close()
                cluster.close()
            rows.append(("Dask LocalCluster, 2 workers x 1 thread", 2, wall, cpu, rss))
            print(f"Dask: the writer and the scheduler (this process) used "
                  f"{1e3 * here / spec.size:.2f} CPU ms per state besides the workers'")
            path = tmp / "dask.h5"
        else:
            raise SystemExit(f"unknown part {part!r}")
        file_bytes = path.stat().st_size
        with h5py.File(path) as f:
            write_s = float(f.attrs["write_seconds"])
    print(f"\n{'configuration':<42} {'cores':>5} {'wall s':>7} {'states/s':>8} "
          f"{'states/s/core':>13} {'CPU ms/state':>12} {'states/CPU-s':>12} {'RSS MB':>6}")
    for name, cores, wall, cpu, rss in rows:
        rate = spec.size / wall
        print(f"{name:<42} {cores:>5} {wall:7.2f} {rate:8.1f} {rate / cores:13.1f} "
              f"{1e3 * cpu / spec.size:12.2f} {spec.size / cpu:12.1f} {rss:6.0f}")
    print("(states/s/core: wall-clock rate over the cores in use; on a machine shared with "
          "other work the CPU time per state -- this process and its workers, or the Dask "
          "workers -- is the steadier figure)")
    per_state_b = file_bytes / spec.size
    print(f"\nfile: {file_bytes / 1e6:.2f} MB, {per_state_b / 1e3:.1f} kB per state; the "
          f"writer stored it in {write_s:.3f} s ({file_bytes / max(write_s, 1e-9) / 1e6:.0f} "
          f"MB/s)")
    name, cores, wall, cpu, rss = next((r for r in rows if r[0].startswith("Dask")), rows[-1])
    core_s = cpu / spec.size  # a dedicated core per worker: its CPU time is its wall time
    print(f"\nprojection from '{name}': {1e3 * core_s:.2f} CPU ms per state "
          f"({3600 / core_s:.3g} states per core-hour), {args.project:.0e} states")
    print(f"{'cores':>6} {'time':>10} {'core-hours':>10} {'file':>9} {'writer MB/s':>11} "
          f"{'worker RSS':>10}")
    for n in (int(x) for x in args.cores.split(",")):
        t = args.project * core_s / n
        size = args.project * per_state_b
        when = f"{t / 3600:.1f} h" if t >= 3600 else f"{t / 60:.1f} min"
        print(f"{n:>6} {when:>10} {args.project * core_s / 3600:10.0f} "
              f"{size / 1e12:7.2f} TB {size / t / 1e6:11.0f} {rss:8.0f} MB")
    print("\n(worker RSS is at this benchmark's block size; it is set by the block, not by the "
          "grid: blocks are sized so that the raw outputs of one stay under "
          "memory_mb / workers per machine)")
    for p in tmp.iterdir():
        p.unlink()
    tmp.rmdir()
    return 0


if __name__ == "__main__":
    sys.exit(main())
