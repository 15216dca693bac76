"""Chunked table builds on all cores, with bounded memory and an atomic final write.

The grid is cut into rectangular blocks of at most ``chunk_states`` states.  Each block is handed
to a *compute function* ``compute(spec, T, P) -> {name: array}`` (flat 1-D arrays of the block's
states in, same-length arrays out) in a worker process, which also compresses the results into
HDF5 chunks (one chunk per block and group of rows of a stacked variable); the parent only
stores those bytes into a temporary HDF5 file as they arrive.  At most two blocks per worker
are in flight (compressed), so memory is bounded by the block size, not the grid size.  Only a finished, flushed file is renamed into
place (``os.replace``), so a build that fails or is killed never leaves a half table at ``path``.
"""

from __future__ import annotations

import multiprocessing
import os
import time
import uuid
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from pathlib import Path
from typing import Any, Callable, Iterator, Mapping

import numpy as np

from sahaboltz.errors import InputError, TableError
from sahaboltz.tables.files import describe, ensure_directory
from sahaboltz.tables.hdf5 import MAX_CHUNK_ELEMENTS, TableWriter, encode_field
from sahaboltz.tables.layout import STACKED, stack
from sahaboltz.tables.progress import Progress
from sahaboltz.tables.spec import TableSpec

ComputeFn = Callable[[TableSpec, np.ndarray, np.ndarray], Mapping[str, np.ndarray]]

#: default largest number of states per block
DEFAULT_CHUNK_STATES = 16384
#: default bound on the raw outputs of the blocks being computed, one per worker [MB];
#: shrinks blocks for many outputs
DEFAULT_MEMORY_MB = 512.0
#: states in the probe block that finds the output names and their size per state
PROBE_STATES = 16

Block = tuple[int, int, int, int]


def blocks(shape: tuple[int, int], chunk_states: int) -> list[Block]:
    """Cut a ``(nT, nP)`` grid into blocks ``(i0, i1, j0, j1)`` of at most ``chunk_states`` states."""
    if chunk_states < 1:
        raise InputError(f"chunk_states must be >= 1, got {chunk_states}")
    nt, np_ = shape
    cols = min(np_, chunk_states)
    rows = max(1, min(nt, chunk_states // cols))
    return [(i, min(i + rows, nt), j, min(j + cols, np_))
            for i in range(0, nt, rows) for j in range(0, np_, cols)]


def block_states(spec: TableSpec, block: Block) -> tuple[np.ndarray, np.ndarray]:
    """Flat (T, P) arrays of the states in ``block``, row-major (T slowest)."""
    i0, i1, j0, j1 = block
    t, p = np.meshgrid(spec.temperature.array[i0:i1], spec.pressure.array[j0:j1], indexing="ij")
    return t.ravel(), p.ravel()


def run_block(compute: ComputeFn, spec: TableSpec, block: Block,
              chunk_shape: tuple[int, int] | None = None) -> tuple:
    """Compute one block and stack its outputs into the table's variables
    (:func:`sahaboltz.tables.layout.stack`); with ``chunk_shape``, as finished HDF5 chunks."""
    t, p = block_states(spec, block)
    fields, labels, aux = stack(compute(spec, t, p), t.size)
    shape = (block[1] - block[0], block[3] - block[2])
    # a state the solver could not solve is NaN in every field, and says why in "status"
    failed = fields["status"] != 0 if "status" in fields else np.zeros(t.size, bool)
    for name, arr in fields.items():
        if not np.all(np.isfinite(arr[..., ~failed])):
            raise TableError(f"compute function returned non-finite {name} in block {block}")
        if chunk_shape is not None:
            fields[name] = encode_field(arr, shape, chunk_shape, name in STACKED)
    return block, {"fields": fields, "labels": labels, "aux": aux, "failed": int(failed.sum())}


def _worker_init() -> None:
    """Let a worker die with the build: a killed parent must not leave workers behind; and
    leave Ctrl-C to the parent (which stops the workers), so that an interrupted build
    prints one line instead of a traceback from every worker."""
    import signal
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:  # Linux: prctl(PR_SET_PDEATHSIG, SIGKILL)
        import ctypes
        ctypes.CDLL("libc.so.6", use_errno=True).prctl(1, int(signal.SIGKILL))
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


def temp_path_for(path: Path) -> Path:
    """A unique temporary name next to ``path`` (same file system, so ``os.replace`` is atomic)."""
    return path.with_name(f".{path.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp")


def build_table(spec: TableSpec, path: str | Path, *, compute: ComputeFn | None = None,
                workers: int | None = None, chunk_states: int = DEFAULT_CHUNK_STATES,
                progress: bool | None = None, provenance: Mapping[str, Any] | None = None,
                memory_mb: float = DEFAULT_MEMORY_MB) -> Path:
    """Compute ``spec`` and write it as an HDF5 table at ``path`` (atomically).

    Parameters
    ----------
    spec : TableSpec
        The grid and outputs.
    path : str or Path
        Where the finished table goes; an existing file there is replaced only on success.
    compute : callable, optional
        ``compute(spec, T, P) -> {name: array}``; default: the equilibrium solver.  It must be a
        module-level function (it is sent to worker processes).
    workers : int, optional
        Worker processes; default: all cores.  1 computes in this process.
    chunk_states : int
        Largest number of states per block.
    memory_mb : float
        Bound on the raw output arrays of the blocks being computed (one per worker).  A
        probe of a few states measures the output size per state; blocks are made small enough.
    progress : bool, optional
        True: a tqdm progress bar; False: none; None (default): a bar in a terminal or a
        notebook, else a log line on stderr every 10 s (:mod:`sahaboltz.tables.progress`).
    provenance : mapping, optional
        Extra root attributes (cache key, level-data digest, solver version ...).

    Returns
    -------
    Path
        ``path``.
    """
    path = Path(path)
    compute = compute or default_compute()
    workers = workers or os.cpu_count() or 1
    # probe: output bytes per state (a solar mixture with all stage fractions has thousands)
    _, sample = run_block(compute, spec, (0, 1, 0, min(spec.shape[1], PROBE_STATES)))
    per_state = sum(a.nbytes for a in sample["fields"].values()) / \
        min(spec.shape[1], PROBE_STATES)
    # raw outputs exist only in the block a worker computes; what travels is compressed
    fit = int(memory_mb * 1e6 / (max(workers, 1) * max(per_state, 1.0)))
    todo = blocks(spec.shape, max(1, min(chunk_states, fit, MAX_CHUNK_ELEMENTS)))
    if path.is_dir():
        raise InputError(f"{path} is a directory: give the table's file name (e.g. "
                         f"{path / 'table.h5'})")
    ensure_directory(path.parent, "the directory of the table")
    tmp = temp_path_for(path)
    first = todo[0]
    writer = None
    bar = Progress(spec.size, progress)
    t0 = time.perf_counter()
    failed = 0
    try:
        chunk_shape = (first[1] - first[0], first[3] - first[2])
        try:
            writer = TableWriter(tmp, spec, dict(provenance or {}), chunk_shape)
        except OSError as exc:
            raise TableError(f"cannot write the table {path}: "
                             f"{describe(exc) if exc.errno else exc}") from None
        for block, values in _results(compute, spec, todo, workers, chunk_shape):
            writer.write_block(block, values)
            failed += values.get("failed", 0)
            bar.update((block[1] - block[0]) * (block[3] - block[2]))
        writer.finish({"build_seconds": round(time.perf_counter() - t0, 3),
                       "failed_states": failed})
        os.replace(tmp, path)
    except BaseException:
        if writer is not None:
            writer.abort()
        tmp.unlink(missing_ok=True)
        raise
    finally:
        bar.close()
    return path
