"""The HDF5 layout of a population table: writing blocks, reading metadata, checking a file.

Layout (documented in docs/table_format.md):

- ``/temperature`` (nT,) [K] and ``/<pressure quantity>`` (nP,) are dimension scales;
- one 2-D dataset ``(temperature, <pressure quantity>)`` per stored quantity, with ``units``,
  ``long_name`` and (for species quantities) ``species``/``element``/``charge`` attributes;
- provenance in root attributes; ``complete = 1`` and the ``quantities`` list are written last.

Files are plain HDF5 that h5py, xarray (engine ``h5netcdf``), C and Fortran read without custom
code.  Chunks are deflate streams (with the shuffle filter); zlib's Adler-32 checksum makes a
damaged chunk fail loudly on read.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import re
import zlib
from pathlib import Path
from typing import Any, Mapping

import h5py
import numpy as np

from sahaboltz._version import __version__
from sahaboltz.errors import TableError
from sahaboltz.tables.spec import PRESSURE_QUANTITIES, SCALAR_OUTPUTS, TableSpec

FORMAT_NAME = "sahaboltz population table"
FORMAT_VERSION = 1
#: largest HDF5 chunk (= build block) in elements: 1 MB of float64
MAX_CHUNK_ELEMENTS = 131072
GZIP_LEVEL = 1


def encode_chunk(block: np.ndarray, chunk_shape: tuple[int, int]) -> bytes:
    """One HDF5 chunk as the dataset's filters (shuffle, then deflate) would write it.

    Workers encode their blocks so that compression runs in parallel and the writing process
    only stores bytes (``write_direct_chunk``).  A block at the grid edge is padded with zeros
    to the chunk shape (HDF5 ignores the part outside the dataset).  The zlib stream carries an
    Adler-32 checksum, so a damaged chunk fails to decompress instead of reading as numbers.
    """
    a = np.asarray(block, dtype="<f8")
    if a.shape != tuple(chunk_shape):
        full = np.zeros(chunk_shape, dtype="<f8")
        full[:a.shape[0], :a.shape[1]] = a
        a = full
    shuffled = np.ascontiguousarray(a).view(np.uint8).reshape(-1, 8).T.tobytes()
    return zlib.compress(shuffled, GZIP_LEVEL)

_SPECIES_RE = re.compile(r"^(fraction|population|partition)_([A-Z][a-z]?)_([IVXLCDM]+)(?:_L(\d+))?$")
_LONG = {"fraction": "fraction of element {el} in stage {sp}",
         "population": "number density of level {lev} of {sp}",
         "partition": "partition function of {sp}"}
_UNITS = {"fraction": "1", "population": "cm-3", "partition": "1"}


_MOLECULAR_RE = re.compile(r"^molecular_fraction_([A-Z][a-z]?)$")


def quantity_attrs(name: str) -> dict[str, Any]:
    """Attributes (units, long_name, species ...) implied by a dataset name."""
    if name in SCALAR_OUTPUTS:
        unit, desc = SCALAR_OUTPUTS[name]
        return {"units": unit, "long_name": desc}
    m = _MOLECULAR_RE.match(name)
    if m:
        return {"units": "1", "long_name": f"fraction of the {m.group(1)} nuclei bound in molecules",
                "element": m.group(1)}
    m = _SPECIES_RE.match(name)
    if not m:
        return {"units": "unknown", "long_name": name}
    kind, el, stage, lev = m.groups()
    sp = f"{el} {stage}"
    attrs = {"units": _UNITS[kind], "long_name": _LONG[kind].format(el=el, sp=sp, lev=lev),
             "species": sp, "element": el}
    if lev is not None:
        attrs["level_index"] = int(lev)
    return attrs


class TableWriter:
    """Write one table file block by block.  Use :func:`sahaboltz.tables.build.build_table`.

    Datasets are created from the first block written (names and dtypes come from the compute
    function).  :meth:`finish` writes the closing attributes; a file without them is incomplete.
    """

    def __init__(self, path: str | Path, spec: TableSpec, provenance: Mapping[str, Any],
                 block_shape: tuple[int, int]):
        self.path = Path(path)
        self.spec = spec
        self.file = h5py.File(self.path, "w", libver=("earliest", "v110"))
        self._names: list[str] = []
        self._refs: list = []
        self._extra_attrs: dict[str, dict] = {}
        if block_shape[0] * block_shape[1] > MAX_CHUNK_ELEMENTS:
            raise TableError(f"block {block_shape} is larger than the largest chunk "
                             f"({MAX_CHUNK_ELEMENTS} states)")
        self.chunks = tuple(block_shape)  # one HDF5 chunk per build block
        self._datasets: dict[str, h5py.Dataset] = {}
        f = self.file
        f.attrs["format_name"] = FORMAT_NAME
        f.attrs["format_version"] = FORMAT_VERSION
        f.attrs["title"] = f"LTE populations: {spec.describe()}"
        f.attrs["package_version"] = __version__
        f.attrs["created"] = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
        f.attrs["pressure_quantity"] = spec.pressure.name
        f.attrs["composition"] = json.dumps(spec.composition, sort_keys=True)
        f.attrs["physics"] = json.dumps(spec.physics, sort_keys=True)
        f.attrs["outputs"] = json.dumps(spec.outputs.to_mapping(), sort_keys=True)
        f.attrs["spec"] = spec.canonical()
        for k, v in provenance.items():
            f.attrs[k] = v if isinstance(v, (str, int, float)) else json.dumps(v, sort_keys=True)
        self._t = self._axis(spec.temperature.name, spec.temperature.array, "K", "temperature")
        punit = PRESSURE_QUANTITIES[spec.pressure.name]
        self._p = self._axis(spec.pressure.name, spec.pressure.array, punit,
                             spec.pressure.name.replace("_", " "))

    def _axis(self, name, values, unit, long_name):
        d = self.file.create_dataset(name, data=values)
        d.attrs["units"] = unit
        d.attrs["long_name"] = long_name
        d.make_scale(name)
        return d

    def _create(self, name: str) -> h5py.Dataset:
        d = self.file.create_dataset(name, shape=self.spec.shape, dtype="<f8", chunks=self.chunks,
                                     compression="gzip", compression_opts=GZIP_LEVEL, shuffle=True)
        # dimension scales, attached the way H5DSattach_scale does, but with each scale's
        # REFERENCE_LIST written once in finish(): attaching one by one is quadratic in the
        # number of datasets (thousands for a solar mixture)
        dl = np.empty(2, dtype=object)
        dl[0] = np.array([self._t.ref], dtype=h5py.ref_dtype)
        dl[1] = np.array([self._p.ref], dtype=h5py.ref_dtype)
        d.attrs.create("DIMENSION_LIST", dl, dtype=h5py.vlen_dtype(h5py.ref_dtype))
        self._refs.append(d.ref)
        for k, v in {**quantity_attrs(name), **self._extra_attrs.get(name, {})}.items():
            d.attrs[k] = v
        self._names.append(name)
        self._datasets[name] = d
        return d

    def write_block(self, block: tuple[int, int, int, int], values: Mapping[str, Any]):
        """Store the block ``(i0, i1, j0, j1)``: per name an array of the block's states, or
        its chunk already encoded by :func:`encode_chunk` (done in the workers)."""
        i0, i1, j0, j1 = block
        # the quantity that is the pressure axis is stored once, as the coordinate
        values = {k: v for k, v in values.items()
                  if k not in (self.spec.temperature.name, self.spec.pressure.name)}
        self._extra_attrs.update(values.pop("_attrs", {}) or {})
        if not self._names:
            for name in values:
                self._create(name)
        elif set(values) != set(self._names):
            raise TableError(f"compute function returned different quantities for block {block}: "
                             f"{sorted(set(values) ^ set(self._names))}")
        if (i0 % self.chunks[0]) or (j0 % self.chunks[1]):
            raise TableError(f"block {block} is not aligned with the chunks {self.chunks}")
        for name, v in values.items():
            raw = v if isinstance(v, bytes) else encode_chunk(
                np.asarray(v, dtype=float).reshape(i1 - i0, j1 - j0), self.chunks)
            self._datasets[name].id.write_direct_chunk((i0, j0), raw)

    def finish(self, extra: Mapping[str, Any] | None = None) -> None:
        """Write the closing attributes, flush to disk and close."""
        f = self.file
        for k, v in (extra or {}).items():
            f.attrs[k] = v
        rl_type = np.dtype([("dataset", h5py.ref_dtype), ("dimension", np.int32)])
        for scale, dim in ((self._t, 0), (self._p, 1)):
            if self._refs:
                rl = np.empty(len(self._refs), dtype=rl_type)
                rl["dataset"] = self._refs
                rl["dimension"] = dim
                scale.attrs.create("REFERENCE_LIST", rl, dtype=rl_type)
        f.attrs["quantities"] = json.dumps(self._names)
        f.attrs["complete"] = 1
        f.flush()
        fd = f.id.get_vfd_handle()
        os.fsync(fd)
        f.close()

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
        if "temperature" in f and pq in f:
            meta["shape"] = (f["temperature"].shape[0], f[pq].shape[0])
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


def check_table(path: str | Path, *, key: str | None = None, full: bool = False) -> None:
    """Raise :class:`TableError` unless ``path`` is a complete table (with cache key ``key``).

    The quick check (fast enough for every cache hit) opens the file -- HDF5 itself notices a
    truncated file --, checks the closing attributes, that every listed dataset exists, and the
    shape and last chunk of the last one written.  ``full=True`` reads every chunk of every
    dataset, so damaged bytes anywhere are found (deflate checksums).
    """
    path = Path(path)
    with _open(path) as f:
        try:
            if _decode(f.attrs.get("format_name")) != FORMAT_NAME:
                raise TableError(f"{path} is not a sahaboltz population table")
            if int(f.attrs.get("complete", 0)) != 1:
                raise TableError(f"{path} is incomplete (the build did not finish)")
            if key is not None and _decode(f.attrs.get("cache_key")) != key:
                raise TableError(f"{path} holds a different table (cache key mismatch)")
            names = json.loads(_decode_str(f.attrs["quantities"]))
            pq = _decode_str(f.attrs["pressure_quantity"])
            shape = (f["temperature"].shape[0], f[pq].shape[0])
            missing = set(names) - set(f.keys())  # one listing; opening each is ~0.5 ms
            if missing:
                raise TableError(f"{path} is damaged: {len(missing)} listed dataset(s) missing, "
                                 f"e.g. {sorted(missing)[0]}")
            for name in (names if full else names[-1:]):
                d = f[name]
                if d.shape != shape:
                    raise TableError(f"{path}: dataset {name} has shape {d.shape}, expected {shape}")
                if full:
                    for sl in d.iter_chunks():
                        d[sl]
                else:
                    d[-1, -1]  # the last chunk written: decompress and checksum it
        except TableError:
            raise
        except (KeyError, OSError, ValueError, RuntimeError) as exc:
            raise TableError(f"{path} is damaged: {exc}. Delete it and build the table again.") \
                from None


def _decode_str(v) -> str:
    return v.decode() if isinstance(v, bytes) else str(v)
