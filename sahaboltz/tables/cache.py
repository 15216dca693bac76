"""A per-user cache of built tables, keyed by a digest of everything that determines them.

The key is the SHA-256 of: the canonical spec (grid values, composition, physics options,
outputs), the level-data digest, the solver version, the package version and the table format
version (or, for an injected compute function, its name and ``provenance``).  A table lives at
``<cache dir>/<key>.h5``.

- Directory: ``$SAHABOLTZ_CACHE_DIR`` if set, else ``$XDG_CACHE_HOME/sahaboltz/tables``, else
  ``~/.cache/sahaboltz/tables``.
- Builds hold an exclusive ``fcntl.flock`` on ``<key>.lock``, so concurrent builders of one spec
  compute it once; the others wait and then read the finished file.
- Files appear only complete (temporary file + ``os.replace``); the next builder of a key
  resumes from the temporary file of a killed build (``.<key>.h5.resume.tmp``, which records
  the blocks stored) and removes other stale temporaries; :func:`clear` removes them all.
- Every table has a digest of all its bytes beside it (``<key>.h5.sum``, written by the
  builder).  A hit checks the file's structure (:func:`~sahaboltz.tables.hdf5.check_table`)
  and its bytes against the digest; the last successful comparison is remembered by the file's
  size, modification and change times and inode, so a hit re-reads the file only when it may
  have changed since.  A cached file that fails either check is reported with a
  :class:`TableCacheWarning` and rebuilt.
"""

from __future__ import annotations

import contextlib
import fcntl
import hashlib
import json
import os
import time
import warnings
import zlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

from sahaboltz._version import __version__
from sahaboltz.equilibrium import SOLVER_VERSION
from sahaboltz.errors import InputError, TableError
from sahaboltz.tables.files import describe, ensure_directory
from sahaboltz.tables.layout import FORMAT_VERSION
from sahaboltz.tables.spec import TableSpec

# h5py and the build machinery are imported where used: a cache hit whose file is unchanged
# since its digest was compared needs neither (the command line answers sooner)

CACHE_ENV = "SAHABOLTZ_CACHE_DIR"
#: how to choose another cache directory, for error messages
CACHE_ADVICE = f"set ${CACHE_ENV} to a directory you can write (or build with -o FILE)"


def _is_default(compute) -> bool:
    from sahaboltz.tables.compute import solver_compute
    return compute is None or compute is solver_compute


def file_digest(path: str | Path, block: int = 1 << 22) -> str:
    """CRC-32 of every byte of a file and its size, as ``"crc32:<hex>:<size>"`` (reads the
    file once, about 1 GB/s; damage, not tampering, is what it is for)."""
    crc, size = 0, 0
    with open(path, "rb") as fh:
        while chunk := fh.read(block):
            crc = zlib.crc32(chunk, crc)
            size += len(chunk)
    return f"crc32:{crc:08x}:{size}"



class TableCacheWarning(UserWarning):
    """A cached table was damaged or incomplete and is being rebuilt."""


def cache_dir(create: bool = True) -> Path:
    """The table cache directory (see the module docstring for how it is chosen)."""
    env = os.environ.get(CACHE_ENV)
    if env:
        d = Path(env).expanduser()
    else:
        base = os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache"
        d = Path(base) / "sahaboltz" / "tables"
    if create:
        ensure_directory(d, "the table cache directory", CACHE_ADVICE)
    return d


_DIGESTS: dict[str, tuple[list, str]] = {}  # level_data dir -> (file stamps, digest)
DIGEST_MEMO = ".level_data_digest.json"


def _data_stamps(root: Path) -> list:
    return sorted([str(p.relative_to(root)), st.st_size, st.st_mtime_ns]
                  for p in root.rglob("*") if p.is_file() for st in [p.stat()])


def level_data_digest() -> str:
    """:func:`sahaboltz.data.database.data_digest` of the level data in use, remembered by
    every file's name, size and modification time: in this process, and in the cache
    directory across processes (so a cache hit from the command line neither reads the level
    data nor imports the data layer's parsers)."""
    from sahaboltz.data.paths import level_data_dir

    root = level_data_dir()
    stamps = _data_stamps(root)
    memo = _DIGESTS.get(str(root))
    if memo is not None and memo[0] == stamps:
        return memo[1]
    memo_file = cache_dir() / DIGEST_MEMO
    with contextlib.suppress(OSError, ValueError, KeyError, TypeError):
        doc = json.loads(memo_file.read_text()).get(str(root))
        if doc and doc["stamps"] == stamps:
            _DIGESTS[str(root)] = (stamps, doc["digest"])
            return doc["digest"]
    from sahaboltz.data.database import data_digest

    digest = data_digest(root)
    _DIGESTS[str(root)] = (stamps, digest)
    with contextlib.suppress(OSError, ValueError):
        try:
            all_docs = json.loads(memo_file.read_text())
        except (OSError, ValueError):
            all_docs = {}
        all_docs[str(root)] = {"stamps": stamps, "digest": digest}
        tmp = memo_file.with_name(f"{DIGEST_MEMO}.{os.getpid()}.tmp")
        tmp.write_text(json.dumps(all_docs))
        os.replace(tmp, memo_file)
    return digest


def solver_provenance(spec: TableSpec) -> dict[str, Any]:
    """Level-data digest, solver version and resolved composition for the real compute."""
    from sahaboltz.tables.compute import composition_digest_doc

    return {"level_data_digest": level_data_digest(),
            "solver_version": SOLVER_VERSION,
            "resolved_composition": composition_digest_doc(spec),
            "compute": "sahaboltz.tables.compute.solver_compute"}


def compute_provenance(compute, spec: TableSpec) -> dict[str, Any]:
    """What identifies the compute function in the cache key and in the file's attributes."""
    if _is_default(compute):
        return solver_provenance(spec)
    prov = {"compute": f"{compute.__module__}.{compute.__qualname__}"}
    prov.update(getattr(compute, "provenance", {}) or {})
    return prov


def table_key(spec: TableSpec, compute=None) -> str:
    """The cache key (hex SHA-256) of ``spec`` computed by ``compute``."""
    doc = {"spec": json.loads(spec.canonical()), "provenance": compute_provenance(compute, spec),
           "package_version": __version__, "format_version": FORMAT_VERSION}
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


@contextlib.contextmanager
def key_lock(directory: Path, key: str, blocking: bool = True) -> Iterator[bool]:
    """Hold the exclusive lock of ``key``; yields False if ``blocking=False`` and it is taken."""
    lock = directory / f"{key}.lock"
    try:
        fh = open(lock, "a+")
    except OSError as exc:
        raise TableError(f"cannot write in the table cache directory {directory}: "
                         f"{describe(exc)}; {CACHE_ADVICE}") from None
    with fh:
        try:
            fcntl.flock(fh, fcntl.LOCK_EX | (0 if blocking else fcntl.LOCK_NB))
        except BlockingIOError:
            yield False
            return
        try:
            yield True
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


#: a comparison made this soon after the file's last change (ns) is not trusted later: the
#: file system's clock is coarse, so a write just after it could leave the times unchanged
RACY_NS = 50_000_000


def digest_path(table: Path) -> Path:
    """Where the digest of a cached table is kept."""
    return table.with_name(table.name + ".sum")


def _stamp(table: Path) -> list[int]:
    st = table.stat()
    return [st.st_size, st.st_mtime_ns, st.st_ctime_ns, st.st_ino]


def _write_digest(table: Path, digest: str) -> None:
    stamp = _stamp(table)
    doc = {"digest": digest, "stamp": stamp, "verified_ns": time.time_ns()}
    tmp = digest_path(table).with_name(f".{table.name}.sum.{os.getpid()}.tmp")
    tmp.write_text(json.dumps(doc))
    os.replace(tmp, digest_path(table))


def record_digest(table: Path) -> None:
    """Compute and store the digest of a table just built."""
    _write_digest(table, file_digest(table))


def verify_digest(table: Path) -> bool:
    """Raise :class:`TableError` unless the bytes of ``table`` are those the builder wrote.

    Cheap when the file has not changed since the last comparison (a ``stat``; returns True);
    otherwise the file is read once (about 1 GB/s) and compared with the digest (returns
    False).  A table without a digest (copied in by hand) has every chunk read and checked
    once, and then gets one.
    """
    try:
        doc = json.loads(digest_path(table).read_text())
        digest = doc["digest"]
    except (OSError, ValueError, KeyError, TypeError):
        from sahaboltz.tables.hdf5 import check_table
        check_table(table, full=True)
        record_digest(table)
        return False
    stamp = _stamp(table)
    racy = doc.get("verified_ns", 0) - max(stamp[1], stamp[2]) < RACY_NS
    if doc.get("stamp") == stamp and not racy:
        return True
    if file_digest(table) != digest:
        raise TableError(f"{table} is damaged: its bytes differ from those written when it "
                         f"was built (digest mismatch)")
    with contextlib.suppress(OSError):
        _write_digest(table, digest)
    return False


def check_cached(table: Path, key: str) -> None:
    """The checks of a cache hit: the digest of every byte, and -- unless the file is unchanged
    since it was last compared, so that it is the complete table its builder checked -- its
    structure and cache key (:func:`~sahaboltz.tables.hdf5.check_table`)."""
    if not verify_digest(table):
        from sahaboltz.tables.hdf5 import check_table
        check_table(table, key=key)


def _stale_temps(directory: Path, key: str) -> list[Path]:
    return list(directory.glob(f".{key}.h5.*.tmp"))


@dataclass(frozen=True)
class TableResult:
    """What :func:`obtain_table` did: where the table is, its key, and ``status`` -- "built",
    "cached" (found valid), or "waited" (another process built it while this one waited)."""

    path: Path
    key: str
    status: str
    #: states the solver could not solve (status field != 0), counted when built here
    failed_states: int | None = None


def _failed_states(path) -> int:
    from sahaboltz.tables.hdf5 import read_metadata
    return int(read_metadata(path).get("failed_states", 0))


def obtain_table(spec: TableSpec, *, output: str | Path | None = None,
                 compute=None, directory: str | Path | None = None,
                 rebuild: bool = False, **build_options) -> TableResult:
    """The table for ``spec``: from the cache (built there first if needed), or built at
    ``output`` with the same key and provenance as a cached one would carry.

    This is the one place that derives a table's key, provenance and file name; the command
    line and :func:`get_table` call it.
    """
    key = table_key(spec, compute)
    prov = {**compute_provenance(compute, spec), "cache_key": key}
    if output is not None:
        from sahaboltz.tables.build import build_table
        path = build_table(spec, output, compute=compute, provenance=prov, **build_options)
        return TableResult(Path(path), key, "built", _failed_states(path))
    d = (ensure_directory(directory, "the table directory") if directory is not None
         else cache_dir())
    final = d / f"{key}.h5"
    if not rebuild and final.exists():
        with contextlib.suppress(TableError, OSError):
            check_cached(final, key)
            return TableResult(final, key, "cached")  # fast path: no lock for a hit
    with _cluster(build_options), key_lock(d, key):
        if final.exists():
            if not rebuild:
                try:
                    check_cached(final, key)
                    return TableResult(final, key, "waited")  # built while we waited
                except (TableError, OSError) as exc:
                    warnings.warn(f"cached table {final.name} is damaged and will be rebuilt: "
                                  f"{exc}", TableCacheWarning, stacklevel=2)
        from sahaboltz.tables.build import build_table, resume_path_for  # not for a hit
        for tmp in _stale_temps(d, key):  # left by a killed builder; we hold the lock
            if tmp != resume_path_for(final):  # the record a build resumes from stays
                tmp.unlink(missing_ok=True)
        digest_path(final).unlink(missing_ok=True)
        build_table(spec, final, compute=compute, provenance=prov, **build_options)
        failed = _failed_states(final)
        record_digest(final)
        _fsync_dir(d)
    return TableResult(final, key, "built", failed)


@contextlib.contextmanager
def _cluster(build_options: dict) -> Iterator[None]:
    """With ``scheduler=`` in ``build_options``: connect before the cache's lock is taken (an
    unreachable scheduler leaves nothing behind, not even a lock file) and hand the build the
    client, closed afterwards."""
    address = build_options.get("scheduler")
    if address is None or build_options.get("client") is not None:
        yield
        return
    from sahaboltz.tables.cluster import connect
    client = connect(address, build_options.get("connect_timeout", 10.0))
    build_options["client"] = client
    del build_options["scheduler"]
    try:
        yield
    finally:
        client.close()


def get_table(spec: TableSpec, *, compute=None,
              directory: str | Path | None = None, rebuild: bool = False,
              **build_options) -> Path:
    """Path of the cached table for ``spec``, building it first if needed.

    Parameters
    ----------
    spec : TableSpec
    compute : callable, optional
        As for :func:`~sahaboltz.tables.build.build_table`; default: the equilibrium solver.
    directory : path, optional
        Cache directory; default :func:`cache_dir`.
    rebuild : bool
        Build again even if a valid table exists.
    **build_options
        ``workers``, ``chunk_states``, ``progress``, ``client`` / ``scheduler`` (a Dask
        cluster), ``resume`` ... for the build (:func:`~sahaboltz.tables.build.build_table`).

    Warns
    -----
    TableCacheWarning
        When a cached file is damaged; it is rebuilt.
    """
    return obtain_table(spec, compute=compute, directory=directory, rebuild=rebuild,
                        **build_options).path


def _fsync_dir(d: Path) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(d, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def entries(directory: str | Path | None = None) -> list[dict[str, Any]]:
    """One dict per cached table: key, path, size, created, grid, status ('ok' or the problem)."""
    d = Path(directory) if directory is not None else cache_dir()
    out = []
    for path in sorted(d.glob("*.h5")):
        key = path.stem
        row: dict[str, Any] = {"key": key, "path": str(path), "size_bytes": path.stat().st_size}
        from sahaboltz.tables.hdf5 import read_metadata
        try:
            check_cached(path, key)
            meta = read_metadata(path)
            row.update(created=meta.get("created"), title=meta.get("title"),
                       shape=meta.get("shape"), status="ok")
        except (TableError, OSError) as exc:
            row.update(created=None, title=None, shape=None, status=f"damaged: {exc}")
        out.append(row)
    return out


def find(key_prefix: str, directory: str | Path | None = None) -> Path:
    """The cached table whose key starts with ``key_prefix``."""
    d = Path(directory) if directory is not None else cache_dir()
    plain = key_prefix and all(c in "0123456789abcdef" for c in key_prefix.lower())
    hits = sorted(d.glob(f"{key_prefix.lower()}*.h5")) if plain else []
    if not hits:
        raise InputError(f"no cached table with key starting {key_prefix!r}; "
                         f"see 'sahaboltz table cache list'")
    if len(hits) > 1:
        raise InputError(f"key prefix {key_prefix!r} matches {len(hits)} tables; give more of it")
    return hits[0]


def clear(key_prefix: str | None = None, directory: str | Path | None = None) -> list[str]:
    """Delete cached tables (all, or those whose key starts with ``key_prefix``).

    Tables being built right now (lock held) are skipped.  Lock files are left in place (empty;
    deleting one could let two builders hold "the" lock at once).  Returns the removed keys.
    """
    d = Path(directory) if directory is not None else cache_dir()
    removed = []
    keys = {p.name.split(".")[0] for p in d.glob("*.h5")}
    keys |= {p.name.split(".")[1] for p in d.glob(".*.h5.*.tmp")}
    for key in sorted(keys):
        if key_prefix and not key.startswith(key_prefix):
            continue
        with key_lock(d, key, blocking=False) as got:
            if not got:
                continue
            (d / f"{key}.h5").unlink(missing_ok=True)
            digest_path(d / f"{key}.h5").unlink(missing_ok=True)
            for tmp in _stale_temps(d, key):
                tmp.unlink(missing_ok=True)
        removed.append(key)
    return removed
