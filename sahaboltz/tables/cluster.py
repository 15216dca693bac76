"""Table builds on a Dask cluster (``pip install 'sahaboltz[dask]'``): blocks as tasks.

:func:`sahaboltz.tables.build.build_table` with ``client=`` or ``scheduler=`` hands its blocks
to a :class:`DaskRunner`: each block is one task (:func:`remote_block`) that computes it and
compresses it into finished HDF5 chunks on a worker; the results come back to the building
process, the one writer, which stores them as they arrive.  At most two tasks per worker
thread are in flight, so the client holds only compressed blocks.  A worker that dies loses
its tasks to the scheduler, which runs them again elsewhere; the table is the same.

Every worker checks once that it runs the same package version, solver version and level
data as the build expects (the table's provenance), so a table is never made of blocks of
two versions.  Dask is imported only here, and only when a cluster build is asked for.

Dask's nanny starts workers with ``MALLOC_TRIM_THRESHOLD_=65536``, which also fixes glibc's
mmap threshold at 128 kB: every temporary array of the solver (megabytes) is then mapped
and unmapped again, and a block costs about 1.5 times the CPU time it costs elsewhere
(benchmarks/bench_scaling.py).  A worker's first block sets glibc's thresholds back to what
glibc itself would reach (:func:`tune_malloc`).
"""

from __future__ import annotations

import ctypes
import os
import re
import socket
import sys
from pathlib import Path
from typing import Any, Iterator, Mapping

from sahaboltz._version import __version__
from sahaboltz.errors import InputError, TableError
from sahaboltz.tables.blocks import Block, ComputeFn, run_block
from sahaboltz.tables.spec import TableSpec

#: ``[scheme://]host:port``; host a name, IPv4 address or bracketed IPv6 address
_ADDRESS = re.compile(r"^(?:(?P<scheme>[a-z][a-z0-9+.-]*)://)?"
                      r"(?P<host>\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9_.-]+):(?P<port>[0-9]{1,5})$")
SCHEMES = ("tcp", "tls", "ucx", "ws", "wss")


def check_address(address: Any) -> str:
    """A scheduler address as Dask takes it (``tcp://`` added when no scheme is given), or
    the path of a scheduler file (``.json``, written by ``dask scheduler --scheduler-file``).

    Raises
    ------
    InputError
        A malformed address, naming it.
    """
    text = str(address).strip() if isinstance(address, (str, Path)) else ""
    if text.endswith(".json"):
        if not Path(text).is_file():
            raise InputError(f"scheduler file {text} does not exist (the scheduler writes it "
                             f"when started with --scheduler-file)")
        return text
    m = _ADDRESS.match(text)
    hint = ("write tcp://HOST:PORT, e.g. tcp://10.0.0.5:8786, or give the scheduler's "
            ".json scheduler file")
    if not m:
        raise InputError(f"malformed scheduler address {address!r}: {hint}")
    scheme = m.group("scheme") or "tcp"
    if scheme not in SCHEMES:
        raise InputError(f"scheduler address {address!r}: unknown scheme {scheme!r} "
                         f"(one of {', '.join(SCHEMES)}); {hint}")
    if not 0 < int(m.group("port")) < 65536:
        raise InputError(f"scheduler address {address!r}: port must be 1..65535; {hint}")
    return f"{scheme}://{m.group('host')}:{int(m.group('port'))}"


def _distributed():
    try:
        import distributed
    except ImportError:
        raise InputError("building on a Dask cluster needs dask and distributed: "
                         "pip install 'sahaboltz[dask]'") from None
    return distributed


def connect(address: str, timeout: float = 10.0):
    """A ``distributed.Client`` of the scheduler at ``address`` (or scheduler file).

    Raises
    ------
    InputError
        A malformed address, or Dask not installed.
    TableError
        The scheduler cannot be reached within ``timeout`` seconds (naming the address).
    """
    target = check_address(address)
    distributed = _distributed()
    kw = {"scheduler_file": target} if target.endswith(".json") else {"address": target}
    try:
        return distributed.Client(timeout=f"{float(timeout)}s", set_as_default=False, **kw)
    except (OSError, TimeoutError, ValueError) as exc:
        raise TableError(f"cannot reach the Dask scheduler at {address} ({exc}); nothing was "
                         f"computed or written. Is the scheduler running there, and can this "
                         f"machine reach it?") from None


_IDENTITY: dict[str, str] = {}  # per worker process: what it runs

#: glibc's largest dynamic mmap threshold on 64-bit systems (32 MiB); trim at twice it
_MMAP_THRESHOLD = 32 * 1024 * 1024


def tune_malloc() -> bool:
    """Undo the fixed 128 kB mmap threshold that ``MALLOC_TRIM_THRESHOLD_`` (set by Dask's
    nanny) implies under glibc: large temporaries come from the heap again, as without it.
    Returns whether the thresholds were set (Linux with glibc, the variable set)."""
    if not sys.platform.startswith("linux") or not os.environ.get("MALLOC_TRIM_THRESHOLD_"):
        return False
    try:
        libc = ctypes.CDLL("libc.so.6")
        m_trim_threshold, m_mmap_threshold = -1, -3  # glibc <malloc.h>
        return bool(libc.mallopt(m_mmap_threshold, _MMAP_THRESHOLD) and
                    libc.mallopt(m_trim_threshold, 2 * _MMAP_THRESHOLD))
    except (OSError, AttributeError):
        return False


def worker_identity(keys) -> dict[str, str]:
    """Package version, solver version and level-data digest of this process (the digest is
    computed once, about half a second)."""
    if "package_version" not in _IDENTITY:
        from sahaboltz.equilibrium import SOLVER_VERSION
        _IDENTITY.update(package_version=__version__, solver_version=SOLVER_VERSION)
        tune_malloc()  # once per worker process
    if "level_data_digest" in keys and "level_data_digest" not in _IDENTITY:
        from sahaboltz.data.database import data_digest
        from sahaboltz.data.paths import level_data_dir
        _IDENTITY["level_data_digest"] = data_digest(level_data_dir())
    return {k: _IDENTITY[k] for k in keys if k in _IDENTITY}


def remote_block(compute: ComputeFn, spec: TableSpec, block: Block,
                 chunk_shape: tuple[int, ...] | None, expect: Mapping[str, str]) -> tuple:
    """The task of one block on a worker: check the worker's versions, then
    :func:`~sahaboltz.tables.blocks.run_block`."""
    have = worker_identity(expect)
    for key, want in expect.items():
        if have.get(key) != want:
            raise TableError(f"Dask worker on {socket.gethostname()} has {key} "
                             f"{have.get(key)!r}, the build expects {want!r}: install the same "
                             f"sahaboltz and level data on every worker (docs/scaling.md)")
    return run_block(compute, spec, block, chunk_shape)


class DaskRunner:
    """Runs the blocks of a build as tasks on a Dask cluster (see the module docstring).

    Parameters
    ----------
    client : distributed.Client, optional
        A connected client (left open afterwards).
    address : str, optional
        Otherwise the scheduler to connect to (the client is closed afterwards).
    expect : mapping
        Provenance of the build; its ``solver_version`` and ``level_data_digest``, and the
        package version, must be those of every worker.
    """

    def __init__(self, client=None, address: str | None = None, timeout: float = 10.0,
                 expect: Mapping[str, Any] | None = None):
        self._own = client is None
        self.client = connect(address, timeout) if client is None else client
        self.address = address or getattr(self.client.scheduler, "address", "?")
        try:
            nthreads = self.client.nthreads()
            if not nthreads:
                self.client.wait_for_workers(1, timeout=timeout)
                nthreads = self.client.nthreads()
        except (OSError, TimeoutError) as exc:
            self.close()
            raise TableError(f"the Dask scheduler at {self.address} has no workers "
                             f"({exc}); start some (docs/scaling.md)") from None
        #: blocks computed at once on one machine (the memory bound of the block size)
        self.workers = max(nthreads.values())
        self.expect = {"package_version": __version__}
        self.expect.update({k: str(v) for k, v in (expect or {}).items()
                            if k in ("solver_version", "level_data_digest")})

    def _slots(self) -> int:
        return max(2, 2 * sum(self.client.nthreads().values()))

    def probe(self, compute: ComputeFn, spec: TableSpec, block: Block) -> dict:
        fut = self.client.submit(remote_block, compute, spec, block, None, self.expect,
                                 pure=False)
        return fut.result()[1]

    def results(self, compute: ComputeFn, spec: TableSpec, todo: list[Block],
                chunk_shape: tuple[int, ...]) -> Iterator[tuple[Block, dict]]:
        distributed = _distributed()
        queue = iter(todo)
        pending = distributed.as_completed(loop=self.client.loop)  # not the default client
        live = set()

        def submit(n: int) -> None:
            for _ in range(n):
                b = next(queue, None)
                if b is None:
                    return
                fut = self.client.submit(remote_block, compute, spec, b, chunk_shape,
                                         self.expect, pure=False)
                live.add(fut)
                pending.add(fut)

        submit(self._slots())
        try:
            for n, fut in enumerate(pending, 1):
                block, values = fut.result()
                live.discard(fut)
                fut.release()
                yield block, values
                submit(1)
                if n % 16 == 0:  # workers may have joined or left: two tasks per thread
                    submit(max(0, self._slots() - len(live)))
        finally:
            if live:
                self.client.cancel(list(live))

    @staticmethod
    def resumable(exc: BaseException) -> bool:
        """An interruption or a lost cluster (keep the record), not a failed computation."""
        if isinstance(exc, (KeyboardInterrupt, SystemExit, OSError, TimeoutError)):
            return True
        return type(exc).__name__ in ("KilledWorker", "CancelledError", "FutureCancelledError")

    def close(self) -> None:
        if self._own:
            try:
                self.client.close()
            except Exception:  # noqa: BLE001 - closing must not hide the build's own error
                pass


__all__ = ["DaskRunner", "check_address", "connect", "remote_block", "tune_malloc"]
