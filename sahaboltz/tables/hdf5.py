"""The HDF5 layout of a population table (format 2): writing blocks, reading, checking a file.

Layout (documented in docs/table_format.md):

- ``/temperature`` (nT,) [K] and ``/<pressure quantity>`` (nP,) are dimension scales, and so
  is, for a table with a composition axis, ``/<composition quantity>`` (nC,) (``metallicity``,
  ``alpha_enhancement``, ``helium_mass_fraction``, ``abundance_C`` ...), and so are
  the label coordinates ``/species``, ``/molecule``, ``/element``, ``/level``,
  ``/partition_species`` of the stacked variables (strings);
- scalar fields are 2-D ``(temperature, <pressure quantity>)``; stacked ones are 3-D
  ``(label, temperature, <pressure quantity>)`` (one variable for all species, ...); a
  composition axis adds a dimension before temperature: ``([label,] composition, T, P)``;
- auxiliary coordinates (``charge``, ``atomic_number``, ``level_energy``, ``level_g`` ...)
  are listed in each variable's CF ``coordinates`` attribute;
- provenance in root attributes; ``complete = 1`` and the ``variables`` list are written last.
- while a build runs, ``/build_progress`` (per block: 0, or 1 + its unsolved states once stored) and the root
  attributes ``build_identity`` and ``build_variables`` let a killed build resume; they are
  removed when the table is finished.

Files are plain netCDF-4/HDF5 that h5py, xarray (engine ``h5netcdf``), C and Fortran read
without custom code.  Every chunk goes through shuffle, deflate and the Fletcher-32 checksum
filter (all built into HDF5), so any reader gets an error from a damaged chunk, never wrong
numbers.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
import time
import zlib
from pathlib import Path
from typing import Any, Mapping

import h5py
import numpy as np

from sahaboltz._version import __version__
from sahaboltz.errors import TableError
from sahaboltz.tables.layout import (AUX, DIM_LONG, FORMAT_NAME, FORMAT_VERSION, STACKED,
                                     field_attrs)
from sahaboltz.tables.spec import PRESSURE_QUANTITIES, TableSpec, axis_long_name

#: largest HDF5 chunk (= build block) in elements: 1 MB of float64
MAX_CHUNK_ELEMENTS = 131072
#: a stacked variable's chunk holds this many elements at least (rows x block states), so
#: that a build writes few, large chunks; reading one row decompresses at most its chunk
MIN_CHUNK_ELEMENTS = 32768
GZIP_LEVEL = 1
# deflate with the run-length strategy: after the shuffle the sign/exponent bytes of a chunk
# come in long runs and the low mantissa bytes hardly compress at all, so matching runs only
# compresses about as well as the full search (3.17x vs 3.21x on a solar table) at 1.6x its
# speed; it is standard deflate, which every HDF5 reader inflates
_DEFLATE_STRATEGY = zlib.Z_RLE
#: the dataset of a build in progress that records its stored blocks
PROGRESS = "build_progress"


def fletcher32(data: bytes) -> bytes:
    """HDF5's Fletcher-32 checksum of ``data`` as its filter appends it (4 bytes).

    HDF5 sums 16-bit big-endian words with an end-around carry folded every 360 words; the
    folds keep the sums modulo 65535, and a sum that is a nonzero multiple of 65535 ends as
    65535, so the closed form below equals it (checked against HDF5 in the tests).
    """
    w = np.frombuffer(data if len(data) % 2 == 0 else data + b"\0", dtype=">u2").astype(np.uint64)
    s1 = int(w.sum())
    s2 = int(np.dot(np.arange(w.size, 0, -1, dtype=np.uint64), w)) if w.size else 0
    c1, c2 = s1 % 65535, s2 % 65535
    c1 = 65535 if (c1 == 0 and s1) else c1
    c2 = 65535 if (c2 == 0 and s2) else c2
    return ((c2 << 16) | c1).to_bytes(4, "little")


def encode_chunk(block: np.ndarray, chunk_shape: tuple[int, ...]) -> bytes:
    """One HDF5 chunk as the dataset's filters (shuffle, deflate, Fletcher-32) write it.

    Workers encode their blocks so that compression runs in parallel and the writing process
    only stores bytes (``write_direct_chunk``).  A block at the grid edge is padded with zeros
    to the chunk shape (HDF5 ignores the part outside the dataset).
    """
    a = np.asarray(block, dtype="<f8")
    if a.shape != tuple(chunk_shape):
        full = np.zeros(chunk_shape, dtype="<f8")
        full[tuple(slice(0, k) for k in a.shape)] = a
        a = full
    shuffled = np.ascontiguousarray(a).view(np.uint8).reshape(-1, 8).T.tobytes()
    z = zlib.compressobj(GZIP_LEVEL, zlib.DEFLATED, 15, 9, _DEFLATE_STRATEGY)
    packed = z.compress(shuffled) + z.flush()
    return packed + fletcher32(packed)


def rows_per_chunk(n_rows: int, block_states: int) -> int:
    """Rows of a stacked variable per chunk for blocks of ``block_states`` states."""
    want = -(-MIN_CHUNK_ELEMENTS // max(1, block_states))
    fit = max(1, MAX_CHUNK_ELEMENTS // max(1, block_states))
    return max(1, min(n_rows, want, fit))


def encode_field(arr: np.ndarray, block_shape: tuple[int, ...], chunk_shape: tuple[int, ...],
                 stacked: bool) -> list[bytes | None]:
    """The chunks of one variable over one block (``block_shape`` states, e.g. (nT, nP) rows
    or (1, nT, nP) of one composition; smaller than ``chunk_shape`` at the grid edge): one,
    or one per group of rows of a stacked variable.

    A chunk of zeros only is None: it is not written, and HDF5 reads an unwritten chunk as the
    variable's fill value, 0.  High stages of heavy elements are exactly 0 (underflow) over
    much of a grid, so this skips most of the compression of a solar table.
    """
    block_shape, chunk_shape = tuple(block_shape), tuple(chunk_shape)
    if not stacked:
        a = arr.reshape(block_shape)
        return [encode_chunk(a, chunk_shape) if a.any() else None]
    n = arr.shape[0]
    k = rows_per_chunk(n, math.prod(chunk_shape))
    a = arr.reshape((n,) + block_shape)
    nonzero = np.add.reduceat(np.any(a, axis=tuple(range(1, a.ndim))),
                              np.arange(0, n, k)) > 0
    return [encode_chunk(a[r:r + k], (k,) + chunk_shape) if nz else None
            for r, nz in zip(range(0, n, k), nonzero)]


def block_offset(block: tuple[int, ...]) -> tuple[int, ...]:
    """Where a block ``([c,] i0, i1, j0, j1)`` starts in a scalar variable."""
    *lead, i0, _, j0, _ = block
    return tuple(lead) + (i0, j0)


def block_shape(block: tuple[int, ...]) -> tuple[int, ...]:
    """The shape of a block ``([c,] i0, i1, j0, j1)`` in a scalar variable."""
    *lead, i0, i1, j0, j1 = block
    return (1,) * len(lead) + (i1 - i0, j1 - j0)


def _str_array(values) -> np.ndarray:
    """Variable-length UTF-8 strings: netCDF-4's own string type (``ncdump`` and xarray read
    them as text; fixed-length strings netCDF shows as NIL)."""
    return np.array([str(v) for v in values], dtype=h5py.string_dtype())


def _text(value: str) -> np.bytes_:
    """A fixed-length string attribute (what C and Fortran read most simply)."""
    return np.bytes_(str(value).encode())


class TableWriter:
    """Write one table file block by block.  Use :func:`sahaboltz.tables.build.build_table`.

    Variables are created from the first block written (names, labels and coordinates come
    from the compute function).  The blocks stored are recorded in the file
    (:meth:`mark_done`), so that a killed build can go on from them (:meth:`reopen`).
    :meth:`finish` writes the closing attributes; a file without them is incomplete.
    """

    def __init__(self, path: str | Path, spec: TableSpec, provenance: Mapping[str, Any],
                 block_shape: tuple[int, ...], *, identity: str = "", block_states: int = 0,
                 n_blocks: int = 0):
        t0 = time.perf_counter()
        self.path = Path(path)
        self.spec = spec
        self.file = h5py.File(self.path, "w", libver=("earliest", "v110"), locking=False)
        self._setup(block_shape)
        f = self.file
        f.attrs["Conventions"] = _text("CF-1.8")
        f.attrs["format_name"] = _text(FORMAT_NAME)
        f.attrs["format_version"] = np.int32(FORMAT_VERSION)
        f.attrs["title"] = _text(f"LTE populations: {spec.describe()}")
        f.attrs["source"] = _text(f"sahaboltz {__version__}")
        f.attrs["package_version"] = _text(__version__)
        f.attrs["created"] = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
        f.attrs["pressure_quantity"] = _text(spec.pressure.name)
        if spec.thermal is not None:  # a first axis in place of the temperature
            f.attrs["temperature_quantity"] = _text(spec.temperature.name)
        ax = spec.composition_axis
        if ax is not None:
            f.attrs["composition_axis"] = _text(ax.name)
        f.attrs["composition"] = json.dumps(spec.composition, sort_keys=True)
        f.attrs["physics"] = json.dumps(spec.physics, sort_keys=True)
        f.attrs["outputs"] = json.dumps(spec.outputs.to_mapping(), sort_keys=True)
        f.attrs["spec"] = spec.canonical()
        for k, v in provenance.items():
            f.attrs[k] = v if isinstance(v, (str, int, float)) else json.dumps(v, sort_keys=True)
        if ax is not None:
            self._c = self._scale(ax.name, ax.array, ax.unit, ax.long_name)
        ta = spec.temperature
        self._t = self._scale(ta.name, ta.array, ta.unit, axis_long_name(ta.name))
        if spec.thermal is not None:  # the reader's variable along it (ln or as it is)
            self._t.attrs["interpolation"] = _text(ta.interpolation)
        punit = PRESSURE_QUANTITIES[spec.pressure.name]
        self._p = self._scale(spec.pressure.name, spec.pressure.array, punit,
                              spec.pressure.name.replace("_", " "))
        # the build's record: which blocks are stored (removed by finish)
        f.attrs["build_identity"] = identity
        # contiguous (no chunk index to update): a checkpoint rewrites it in place
        prog = f.create_dataset(PROGRESS, data=np.zeros(n_blocks, np.int64))
        self._record = np.zeros(n_blocks, np.int64)
        prog.attrs["block_states"] = np.int64(block_states)
        prog.attrs["chunk_shape"] = json.dumps(list(self.chunks))
        self.seconds["create"] += time.perf_counter() - t0

    def _setup(self, block_shape) -> None:
        self.seconds = {"create": 0.0, "write": 0.0}  # file and variables; storing chunks
        if math.prod(block_shape) > MAX_CHUNK_ELEMENTS:
            raise TableError(f"block {tuple(block_shape)} is larger than the largest chunk "
                             f"({MAX_CHUNK_ELEMENTS} states)")
        self.chunks = tuple(block_shape)  # one HDF5 chunk per build block (and row group)
        self._datasets: dict[str, h5py.Dataset] = {}
        self._labels: dict[str, list] = {}
        self._rows: dict[str, int] = {}
        self._c = None
        self._flushed = time.monotonic()

    @classmethod
    def reopen(cls, path: str | Path, spec: TableSpec, identity: str
               ) -> tuple["TableWriter", int, np.ndarray] | None:
        """Open the temporary file of a killed build of the same table to go on with it:
        returns (writer, states per block, record), or None when the file is not such a
        record (another table, damaged, or finished).  The record has one entry per block:
        0 not stored, else 1 + the states of the block the solver could not solve."""
        try:
            f = h5py.File(path, "a", locking=False)
        except OSError:
            return None
        try:
            if _decode(f.attrs.get("build_identity")) != identity or PROGRESS not in f:
                f.close()
                return None
            prog = f[PROGRESS]
            self = cls.__new__(cls)
            self.path, self.spec, self.file = Path(path), spec, f
            self._setup(tuple(json.loads(_decode_str(prog.attrs["chunk_shape"]))))
            ax = spec.composition_axis
            self._c = f[ax.name] if ax is not None else None
            self._t, self._p = f[spec.temperature.name], f[spec.pressure.name]
            for name in json.loads(_decode_str(f.attrs.get("build_variables", "[]"))):
                d = f[name]
                self._datasets[name] = d
                var = STACKED.get(name)
                if var is not None:
                    self._rows[name] = d.chunks[0]
                    self._labels[var.dim] = [_decode_str(x) for x in f[var.dim][()]]
            self._record = prog[()].astype(np.int64)
            return self, int(prog.attrs["block_states"]), self._record.copy()
        except (KeyError, OSError, ValueError, RuntimeError):
            f.close()
            return None

    def _scale(self, name, values, unit, long_name):
        d = self.file.create_dataset(name, data=values)
        if unit:
            d.attrs["units"] = _text(unit)
        d.attrs["long_name"] = _text(long_name)
        d.make_scale(name)
        return d

    def _create(self, fields, labels: Mapping[str, list], aux: Mapping[str, np.ndarray]) -> None:
        f = self.file
        scales = {dim: self._scale(dim, _str_array(labs), "", DIM_LONG.get(dim, dim))
                  for dim, labs in labels.items()}
        self._labels = {dim: [str(x) for x in labs] for dim, labs in labels.items()}
        aux_of: dict[str, list[str]] = {}
        for name, values in aux.items():
            dim, unit, long_name = AUX.get(name, (None, "", name))
            if dim not in scales:
                raise TableError(f"coordinate {name} belongs to no stored dimension")
            v = np.asarray(values)
            d = f.create_dataset(name, data=_str_array(v) if v.dtype.kind in "OUS" else v)
            if unit:
                d.attrs["units"] = _text(unit)
            d.attrs["long_name"] = _text(long_name)
            d.dims[0].attach_scale(scales[dim])
            aux_of.setdefault(dim, []).append(name)
        for name in fields:
            var = STACKED.get(name)
            if var is not None:
                nrow = len(self._labels[var.dim])
                k = rows_per_chunk(nrow, math.prod(self.chunks))
                shape, chunks = (nrow,) + self.spec.shape, (k,) + self.chunks
                self._rows[name] = k
            else:
                shape, chunks = self.spec.shape, self.chunks
            d = f.create_dataset(name, shape=shape, dtype="<f8", chunks=chunks,
                                 compression="gzip", compression_opts=GZIP_LEVEL, shuffle=True,
                                 fletcher32=True, fillvalue=0.0)  # unwritten chunks: zeros
            for k_, v_ in field_attrs(name).items():
                d.attrs[k_] = v_ if isinstance(v_, np.ndarray) else _text(v_)
            axes = [self._t, self._p] if self._c is None else [self._c, self._t, self._p]
            if var is not None:
                axes.insert(0, scales[var.dim])
                if aux_of.get(var.dim):
                    d.attrs["coordinates"] = _text(" ".join(aux_of[var.dim]))
            for i, sc in enumerate(axes):  # a dozen variables: attaching one by one is cheap
                d.dims[i].attach_scale(sc)
            self._datasets[name] = d
        f.attrs["build_variables"] = json.dumps(list(self._datasets))

    def write_block(self, block: tuple[int, ...], values: Mapping[str, Any]):
        """Store the block ``([c,] i0, i1, j0, j1)``: ``values`` as made by the workers
        (:func:`sahaboltz.tables.build.run_block`): ``fields`` (arrays, or their chunks
        already encoded), ``labels`` and ``aux``."""
        t0 = time.perf_counter()
        fields = {k: v for k, v in values["fields"].items()
                  if k not in (self.spec.temperature.name, self.spec.pressure.name)}
        if not self._datasets:
            self._create(list(fields), values["labels"], values["aux"])
            self.seconds["create"] += time.perf_counter() - t0
            t0 = time.perf_counter()
        elif set(fields) != set(self._datasets) or \
                {k: [str(x) for x in v] for k, v in values["labels"].items()} != self._labels:
            raise TableError(f"compute function returned different quantities for block {block}: "
                             f"{sorted(set(fields) ^ set(self._datasets))}")
        at = block_offset(block)
        if len(at) != len(self.chunks) or any(a % c for a, c in zip(at, self.chunks)):
            raise TableError(f"block {block} is not aligned with the chunks {self.chunks}")
        for name, chunks in fields.items():
            stacked = name in STACKED
            if not isinstance(chunks, list):
                chunks = encode_field(np.asarray(chunks, dtype=float), block_shape(block),
                                      self.chunks, stacked)
            dsid = self._datasets[name].id
            if stacked:
                k = self._rows[name]
                for g, raw in enumerate(chunks):
                    if raw is not None:
                        dsid.write_direct_chunk((g * k,) + at, raw)
            elif chunks[0] is not None:
                dsid.write_direct_chunk(at, chunks[0])
        self.seconds["write"] += time.perf_counter() - t0

    def mark_done(self, index: int, elapsed: float, failed: int = 0, every: float = 0.0) -> None:
        """Record block ``index`` (of the build's block list) as stored, with ``failed``
        states that could not be solved.  The record reaches the file at the next checkpoint
        (now, or at most ``every`` seconds later), after everything written before it; a
        block stored but not yet recorded is computed again by a resumed build."""
        self._record[index] = 1 + int(failed)
        if time.monotonic() - self._flushed >= every:
            self.checkpoint(elapsed)

    def checkpoint(self, elapsed: float) -> None:
        """Flush what is written, with the build's seconds so far, and only then the record
        of the blocks stored: HDF5 may write its caches to the file in any order, so a record
        written with the data could reach the file before the chunks it vouches for (a build
        killed then would resume with those chunks missing)."""
        f = self.file
        f.attrs["build_elapsed"] = float(elapsed)
        f.flush()
        f[PROGRESS][...] = self._record
        f.flush()
        self._flushed = time.monotonic()

    def elapsed_before(self) -> float:
        """Build seconds spent in earlier runs of a resumed build."""
        return float(self.file.attrs.get("build_elapsed", 0.0))

    def finish(self, extra: Mapping[str, Any] | None = None) -> None:
        """Remove the build's record, write the closing attributes, flush to disk and close."""
        f = self.file
        del f[PROGRESS]
        for k in ("build_identity", "build_variables", "build_elapsed"):
            if k in f.attrs:
                del f.attrs[k]
        for k, v in (extra or {}).items():
            f.attrs[k] = v
        f.attrs["create_seconds"] = round(self.seconds["create"], 4)
        f.attrs["write_seconds"] = round(self.seconds["write"], 4)
        f.attrs["variables"] = json.dumps(list(self._datasets))
        f.attrs["complete"] = 1
        f.flush()
        fd = f.id.get_vfd_handle()
        os.fsync(fd)
        f.close()

    def close(self) -> None:
        """Close the file as it is, with its record: an interrupted build goes on from it."""
        try:
            self.file.flush()
        finally:
            self.file.close()

    def abort(self) -> None:
        try:
            self.file.close()
        except Exception:  # noqa: BLE001 - closing a broken file must not mask the first error
            pass


def read_metadata(path: str | Path) -> dict[str, Any]:
    """Root attributes of a table (JSON attributes decoded) plus ``shape`` and ``size_bytes``."""
    path = Path(path)
    with _open(path) as f:
        meta = {k: _decode(v) for k, v in f.attrs.items()}
        pq = meta.get("pressure_quantity")
        if meta.get("temperature_quantity", "temperature") in f and pq in f:
            meta["shape"] = _grid_shape(f)
    meta["size_bytes"] = path.stat().st_size
    return meta


def _decode(v):
    if isinstance(v, bytes):
        v = v.decode()
    if isinstance(v, str) and v[:1] in "[{":
        try:
            return json.loads(v)
        except ValueError:
            return v
    if isinstance(v, np.generic):
        return v.item()
    return v


def _open(path: Path) -> h5py.File:
    try:
        return h5py.File(path, "r")
    except FileNotFoundError:
        raise TableError(f"no table file at {path}") from None
    except OSError as exc:
        raise TableError(f"{path} is not a readable HDF5 file (damaged or truncated?): {exc}. "
                         f"Delete it and build the table again.") from None


def format_error(path: Path, version) -> TableError:
    """The error for a file of another format version."""
    if version == 1:
        return TableError(f"{path} is a format-1 table (one dataset per quantity); this "
                          f"version reads format {FORMAT_VERSION} only. Build it again: "
                          f"'sahaboltz table build' with the same spec (cached format-1 "
                          f"tables are rebuilt automatically).")
    return TableError(f"{path} has table format version {version!r}; this sahaboltz reads "
                      f"format {FORMAT_VERSION}. Build the table again.")


def check_table(path: str | Path, *, key: str | None = None, full: bool = False) -> None:
    """Raise :class:`TableError` unless ``path`` is a complete format-2 table (with cache key
    ``key``).

    The quick check opens the file -- HDF5 itself notices a truncated file --, checks the
    format, the closing attributes, that every listed variable exists with the grid's shape,
    and reads the last chunk written.  It cannot see damage elsewhere: the cache adds a digest
    of the whole file (:func:`file_digest`), and ``full=True`` reads every chunk of every
    variable (each is checked against its Fletcher-32 checksum and by deflate).
    """
    path = Path(path)
    with _open(path) as f:
        try:
            if _decode(f.attrs.get("format_name")) != FORMAT_NAME:
                raise TableError(f"{path} is not a sahaboltz population table")
            version = _decode(f.attrs.get("format_version"))
            if version != FORMAT_VERSION:
                raise format_error(path, version)
            if int(f.attrs.get("complete", 0)) != 1:
                raise TableError(f"{path} is incomplete (the build did not finish)")
            if key is not None and _decode(f.attrs.get("cache_key")) != key:
                raise TableError(f"{path} holds a different table (cache key mismatch)")
            names = json.loads(_decode_str(f.attrs["variables"]))
            shape = _grid_shape(f)
            missing = set(names) - set(f.keys())
            if missing:
                raise TableError(f"{path} is damaged: {len(missing)} listed variable(s) missing, "
                                 f"e.g. {sorted(missing)[0]}")
            for name in names:
                d = f[name]
                if d.shape[-len(shape):] != shape:
                    raise TableError(f"{path}: variable {name} has shape {d.shape}, expected "
                                     f"(..., {', '.join(str(n) for n in shape)})")
                if full:
                    for sl in d.iter_chunks():
                        d[sl]
            if not full and names:
                f[names[-1]][(-1,) * f[names[-1]].ndim]  # the last chunk written
        except TableError:
            raise
        except (KeyError, OSError, ValueError, RuntimeError) as exc:
            raise TableError(f"{path} is damaged: {exc}. Delete it and build the table again.") \
                from None


def _grid_shape(f: h5py.File) -> tuple[int, ...]:
    """(nT, nP), or (nC, nT, nP) for a table with a composition axis."""
    shape = (f[temperature_quantity(f)].shape[0],
             f[_decode_str(f.attrs["pressure_quantity"])].shape[0])
    ax = f.attrs.get("composition_axis")
    return shape if ax is None else (f[_decode_str(ax)].shape[0],) + shape


def temperature_quantity(f: h5py.File) -> str:
    """Name of a table's first axis: ``temperature`` unless the root attribute
    ``temperature_quantity`` names the quantity that replaces it."""
    return _decode_str(f.attrs.get("temperature_quantity", "temperature"))


def _decode_str(v) -> str:
    return v.decode() if isinstance(v, bytes) else str(v)
