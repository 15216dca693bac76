"""Chunked table builds on all cores, or on a Dask cluster, with bounded memory, resumable,
and an atomic final write.

The grid is cut into rectangular blocks of at most ``chunk_states`` states (whole
temperature rows of one composition, when the grid has a composition axis;
:mod:`sahaboltz.tables.blocks`).  Each block is handed to a *compute function*
``compute(spec, T, P) -> {name: array}`` (flat 1-D arrays of the block's states in,
same-length arrays out) in a worker process, which also compresses the results into HDF5
chunks (one chunk per block and group of rows of a stacked variable); this process only
stores those bytes into a temporary HDF5 file as they arrive.  At most two blocks per worker
are in flight (compressed), so memory is bounded by the block size, not the grid size.  Only
a finished, flushed file is renamed into place (``os.replace``), so a build that fails or is
killed never leaves a half table at ``path``.

Builds resume: the temporary file ``.<name>.resume.tmp`` records the blocks stored in it
(:class:`~sahaboltz.tables.hdf5.TableWriter`), and the next build of the same table (same
spec and provenance) that finds it computes only the others.  It is kept when a build is
interrupted (Ctrl-C), killed, or loses its workers or its cluster, and removed when the
compute function itself fails.

With ``client=`` (a ``distributed.Client``) or ``scheduler=`` (its address) the blocks run
as tasks on a Dask cluster (:mod:`sahaboltz.tables.cluster`); this process stays the one
writer.  Dask is imported only then.
"""

from __future__ import annotations

import fcntl
import hashlib
import json
import multiprocessing
import os
import time
import uuid
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path
from typing import Any, Iterator, Mapping

import numpy as np

from sahaboltz.errors import InputError, TableError
from sahaboltz.tables.blocks import (Block, ComputeFn, block_spec, block_states,  # noqa: F401
                                     blocks, run_block)
from sahaboltz.tables.hdf5 import MAX_CHUNK_ELEMENTS, TableWriter, block_shape
from sahaboltz.tables.files import describe, ensure_directory
from sahaboltz.tables.progress import Progress
from sahaboltz.tables.spec import TableSpec

#: default largest number of states per block
DEFAULT_CHUNK_STATES = 16384
#: default bound on the raw outputs of the blocks being computed, one per worker [MB];
#: shrinks blocks for many outputs (320 MB: a 2-worker build of a solar table with every
#: stage fraction keeps each worker near 350 MB, 515 MB at 512; equally fast,
#: benchmarks/bench_tables.py)
DEFAULT_MEMORY_MB = 320.0
#: states in the probe block that finds the output names and their size per state
PROBE_STATES = 16


def _worker_init() -> None:
    """Let a worker die with the build: a killed parent must not leave workers behind; and
    leave Ctrl-C to the parent (which stops the workers), so that an interrupted build
    prints one line instead of a traceback from every worker."""
    import signal
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:  # Linux: prctl(PR_SET_PDEATHSIG, SIGKILL)
        import ctypes
        libc = ctypes.CDLL("libc.so.6", use_errno=True)
        libc.prctl(1, int(signal.SIGKILL))
        # glibc: serve the block-sized arrays from the heap and keep what a block frees for
        # the next one (M_MMAP_MAX = 0, M_TRIM_THRESHOLD = 1 GiB); otherwise every array is
        # a fresh mapping whose first touch faults in each page, about 2.5 ms per MB here,
        # as much as computing the values.  The peak memory is unchanged.
        libc.mallopt(-4, 0)
        libc.mallopt(-1, 1 << 30)
    except (OSError, AttributeError):
        pass


def _stop_workers(pool: ProcessPoolExecutor) -> None:
    """End the workers of an interrupted build now (not after their running blocks)."""
    procs = list(getattr(pool, "_processes", {}).values())  # the executor's own processes
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in procs:
        if proc.is_alive():
            proc.terminate()
    for proc in procs:
        proc.join(timeout=5)


def default_compute() -> ComputeFn:
    """The compute function backed by the equilibrium solver."""
    from sahaboltz.tables.compute import solver_compute
    return solver_compute


def _pool(workers: int) -> ProcessPoolExecutor:
    # fork shares the already-loaded level data with the workers; fall back where it is absent
    methods = multiprocessing.get_all_start_methods()
    ctx = multiprocessing.get_context("fork" if "fork" in methods else None)
    return ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_worker_init)


def _results(compute: ComputeFn, spec: TableSpec, todo: list[Block], workers: int,
             chunk_shape: tuple[int, int]) -> Iterator[tuple[Block, dict]]:
    if workers <= 1 or len(todo) <= 1:
        for b in todo:
            yield run_block(compute, spec, b, chunk_shape)
        return
    pool = _pool(workers)
    with pool:
        pending: set = set()
        queue = iter(todo)
        try:
            while True:
                while len(pending) < 2 * workers:  # bounded: memory ~ chunk size x 2 x workers
                    b = next(queue, None)
                    if b is None:
                        break
                    pending.add(pool.submit(run_block, compute, spec, b, chunk_shape))
                if not pending:
                    return
                finished, pending = wait(pending, return_when=FIRST_COMPLETED)
                for fut in finished:
                    yield fut.result()
        except BaseException:  # Ctrl-C, a failed block, a closed generator: stop at once
            _stop_workers(pool)
            raise
        finally:
            for fut in pending:
                fut.cancel()


class LocalRunner:
    """Blocks in a local process pool (or in this process with one worker)."""

    def __init__(self, workers: int):
        self.workers = workers  # blocks computed at once on this machine

    def probe(self, compute: ComputeFn, spec: TableSpec, block: Block) -> dict:
        return run_block(compute, spec, block)[1]

    def results(self, compute, spec, todo, chunk_shape) -> Iterator[tuple[Block, dict]]:
        return _results(compute, spec, todo, self.workers, chunk_shape)

    @staticmethod
    def resumable(exc: BaseException) -> bool:
        """Is ``exc`` an interruption (keep the record and resume) rather than a failure of
        the computation itself?"""
        return isinstance(exc, (KeyboardInterrupt, SystemExit, BrokenProcessPool, OSError))

    def close(self) -> None:
        pass


def temp_path_for(path: Path) -> Path:
    """A unique temporary name next to ``path`` (same file system, so ``os.replace`` is atomic)."""
    return path.with_name(f".{path.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp")


def resume_path_for(path: Path) -> Path:
    """The temporary file of the builds of ``path``, which records their progress."""
    return path.with_name(f".{path.name}.resume.tmp")


def build_identity(spec: TableSpec, provenance: Mapping[str, Any], compute: ComputeFn) -> str:
    """What a resumed build must share with the one it goes on from (hex SHA-256)."""
    doc = {"spec": spec.canonical(), "provenance": dict(provenance),
           "compute": f"{compute.__module__}.{compute.__qualname__}"}
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def _claim(path: Path, resume: bool) -> tuple[Path, int | None]:
    """The temporary file of this build, locked (``flock``) while the build runs.  When
    another build of the same target holds the resumable one, this build uses a temporary
    of its own (and does not record anything for later)."""
    if resume:
        tmp = resume_path_for(path)
        fd = os.open(tmp, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            return tmp, fd
        except BlockingIOError:
            os.close(fd)
    return temp_path_for(path), None


def _discard_record(path: Path) -> None:
    """Remove the record of an interrupted build of ``path`` now built, unless a build is
    writing it."""
    tmp = resume_path_for(path)
    try:
        fd = os.open(tmp, os.O_RDWR)
    except OSError:
        return
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        tmp.unlink(missing_ok=True)
    except BlockingIOError:
        pass
    finally:
        os.close(fd)


def _check_compositions(spec: TableSpec) -> None:
    """Resolve every slice of a composition axis: an abundance left negative, or an element
    to scale that is absent, is an error before any work starts."""
    from sahaboltz.tables.compute import compositions_of
    compositions_of(spec)


def build_table(spec: TableSpec, path: str | Path, *, compute: ComputeFn | None = None,
                workers: int | None = None, chunk_states: int = DEFAULT_CHUNK_STATES,
                progress: bool | None = None, provenance: Mapping[str, Any] | None = None,
                memory_mb: float = DEFAULT_MEMORY_MB, client=None, scheduler: str | None = None,
                resume: bool = True, connect_timeout: float = 10.0,
                stats: dict | None = None) -> Path:
    """Compute ``spec`` and write it as an HDF5 table at ``path`` (atomically).

    Parameters
    ----------
    spec : TableSpec
        The grid and outputs.
    path : str or Path
        Where the finished table goes; an existing file there is replaced only on success.
    compute : callable, optional
        ``compute(spec, T, P) -> {name: array}``; default: the equilibrium solver.  It must be a
        module-level function (it is sent to worker processes).  With a composition axis it
        gets the 2-D spec of the block's composition slice.
    workers : int, optional
        Worker processes; default: all cores.  1 computes in this process.  Not used with a
        Dask cluster.
    chunk_states : int
        Largest number of states per block.
    memory_mb : float
        Bound on the raw output arrays of the blocks being computed (one per worker) on one
        machine.  A probe of a few states measures the output size per state; blocks are made
        small enough.
    progress : bool, optional
        True: a tqdm progress bar; False: none; None (default): a bar in a terminal or a
        notebook, else a log line on stderr every 10 s (:mod:`sahaboltz.tables.progress`).
    provenance : mapping, optional
        Extra root attributes (cache key, level-data digest, solver version ...).
    client : distributed.Client, optional
        Run the blocks as tasks on this Dask cluster (needs ``sahaboltz[dask]``).
    scheduler : str, optional
        Or the cluster's scheduler address (``tcp://HOST:PORT``) or scheduler file (.json);
        an unreachable one is an error naming it, before anything is written.
    resume : bool
        Go on from the record of an interrupted build of the same table at ``path``, and keep
        one if this build is interrupted (default True).
    connect_timeout : float
        Seconds to wait for the scheduler.
    stats : dict, optional
        Filled with what the build did: ``blocks``, ``computed`` (blocks computed in this
        run), ``resumed`` (blocks found stored), ``block_states``.

    Returns
    -------
    Path
        ``path``.
    """
    path = Path(path)
    compute = compute or default_compute()
    if spec.composition_axis is not None:
        _check_compositions(spec)
    provenance = dict(provenance or {})
    if client is not None or scheduler is not None:
        from sahaboltz.tables.cluster import DaskRunner  # dask only for cluster builds
        runner: Any = DaskRunner(client=client, address=scheduler, timeout=connect_timeout,
                                 expect=provenance)
    else:
        runner = LocalRunner(workers or os.cpu_count() or 1)
    try:
        return _build(spec, path, compute, runner, chunk_states, memory_mb, progress,
                      provenance, resume, stats if stats is not None else {})
    finally:
        runner.close()


def _build(spec, path, compute, runner, chunk_states, memory_mb, progress, provenance,
           resume, stats) -> Path:
    identity = build_identity(spec, provenance, compute)
    if path.is_dir():
        raise InputError(f"{path} is a directory: give the table's file name (e.g. "
                         f"{path / 'table.h5'})")
    ensure_directory(path.parent, "the directory of the table")
    tmp, fd = _claim(path, resume)
    writer = None
    bar = None
    t0 = time.perf_counter()
    before = 0.0  # seconds of earlier runs of a resumed build
    try:
        state = None
        if fd is not None and os.fstat(fd).st_size > 0:
            state = TableWriter.reopen(tmp, spec, identity)
        if state is not None:
            writer, per_block, record = state
            todo_all = blocks(spec.shape, per_block)
            if len(todo_all) != record.size:  # not a record of these blocks: start again
                writer.abort()
                writer, state = None, None
        if state is None:
            per_block = _block_states(compute, spec, runner, chunk_states, memory_mb)
            todo_all = blocks(spec.shape, per_block)
            record = np.zeros(len(todo_all), np.int64)
            try:
                writer = TableWriter(tmp, spec, provenance, block_shape(todo_all[0]),
                                     identity=identity, block_states=per_block,
                                     n_blocks=len(todo_all))
            except OSError as exc:
                raise TableError(f"cannot write the table {path}: "
                                 f"{describe(exc) if exc.errno else exc}") from None
        index = {b: k for k, b in enumerate(todo_all)}
        done = record > 0
        todo = [b for b, d in zip(todo_all, done) if not d]
        failed = int(np.sum(record[done] - 1))
        stats.update(blocks=len(todo_all), resumed=int(done.sum()), computed=0,
                     block_states=per_block)
        bar = Progress(spec.size, progress)
        bar.update(sum(int(np.prod(block_shape(b))) for b, d in zip(todo_all, done) if d))
        before = writer.elapsed_before()
        for block, values in runner.results(compute, spec, todo, writer.chunks):
            writer.write_block(block, values)
            n_failed = values.get("failed", 0)
            writer.mark_done(index[block], before + time.perf_counter() - t0, n_failed)
            failed += n_failed
            stats["computed"] += 1
            bar.update(int(np.prod(block_shape(block))))
        extra = {"build_seconds": round(before + time.perf_counter() - t0, 3),
                 "failed_states": failed}
        if stats["resumed"]:
            extra["resumed_blocks"] = stats["resumed"]
        writer.finish(extra)
        os.replace(tmp, path)
        if fd is None:  # built without the record (resume=False, or it was busy)
            _discard_record(path)
    except BaseException as exc:
        keep = fd is not None and runner.resumable(exc)
        if writer is not None:
            if keep:
                try:
                    writer.checkpoint(before + time.perf_counter() - t0)
                    writer.close()
                except Exception:  # noqa: BLE001 - the interruption is what to report
                    writer.abort()
            else:
                writer.abort()
        if not keep or writer is None:
            tmp.unlink(missing_ok=True)
        raise
    finally:
        if bar is not None:
            bar.close()
        if fd is not None:
            os.close(fd)
    return path


def _block_states(compute, spec: TableSpec, runner, chunk_states: int, memory_mb: float) -> int:
    """States per block: ``chunk_states``, fewer when the outputs per state (measured on a
    probe of a few states) would make the blocks in flight on one machine exceed
    ``memory_mb``."""
    n = min(spec.shape[-1], PROBE_STATES)
    probe = (0, 1, 0, n) if spec.composition_axis is None else (0, 0, 1, 0, n)
    sample = runner.probe(compute, spec, probe)
    per_state = sum(a.nbytes for a in sample["fields"].values()) / n
    # raw outputs exist only in the block a worker computes; what travels is compressed
    fit = int(memory_mb * 1e6 / (max(runner.workers, 1) * max(per_state, 1.0)))
    return max(1, min(chunk_states, fit, MAX_CHUNK_ELEMENTS))
