"""The unit of work of a table build: a block of states, computed and compressed.

A block is ``(i0, i1, j0, j1)`` -- temperature rows i0..i1-1 and pressure columns j0..j1-1 --
or ``(c, i0, i1, j0, j1)`` in composition slice ``c`` of a grid with a composition axis.
:func:`run_block` is what a worker runs, in a local process pool
(:mod:`sahaboltz.tables.build`) or as a task on a Dask cluster (:mod:`sahaboltz.tables.cluster`).
"""

from __future__ import annotations

from typing import Callable, Mapping

import numpy as np

from sahaboltz.errors import InputError, TableError
from sahaboltz.tables.hdf5 import block_shape, encode_field
from sahaboltz.tables.layout import STACKED, stack
from sahaboltz.tables.spec import TableSpec

ComputeFn = Callable[[TableSpec, np.ndarray, np.ndarray], Mapping[str, np.ndarray]]

#: ``(i0, i1, j0, j1)``, or ``(c, i0, i1, j0, j1)`` in composition slice c
Block = tuple[int, ...]


def blocks(shape: tuple[int, ...], chunk_states: int) -> list[Block]:
    """Cut a ``(nT, nP)`` grid into blocks ``(i0, i1, j0, j1)`` of at most ``chunk_states``
    states; a ``(nC, nT, nP)`` grid into ``(c, i0, i1, j0, j1)``, slice after slice."""
    if chunk_states < 1:
        raise InputError(f"chunk_states must be >= 1, got {chunk_states}")
    *lead, nt, np_ = shape
    cols = min(np_, chunk_states)
    rows = max(1, min(nt, chunk_states // cols))
    plane = [(i, min(i + rows, nt), j, min(j + cols, np_))
             for i in range(0, nt, rows) for j in range(0, np_, cols)]
    if not lead:
        return plane
    return [(c,) + b for c in range(lead[0]) for b in plane]


def block_states(spec: TableSpec, block: Block) -> tuple[np.ndarray, np.ndarray]:
    """Flat (T, P) arrays of the states in ``block``, row-major (T slowest)."""
    i0, i1, j0, j1 = block[-4:]
    t, p = np.meshgrid(spec.temperature.array[i0:i1], spec.pressure.array[j0:j1], indexing="ij")
    return t.ravel(), p.ravel()


def block_spec(spec: TableSpec, block: Block) -> TableSpec:
    """The 2-D spec a compute function sees for ``block``: with a composition axis, that of
    the block's slice (its composition fixed)."""
    return spec if len(block) == 4 else spec.at_composition(block[0])


def run_block(compute: ComputeFn, spec: TableSpec, block: Block,
              chunk_shape: tuple[int, ...] | None = None) -> tuple:
    """Compute one block and stack its outputs into the table's variables
    (:func:`sahaboltz.tables.layout.stack`); with ``chunk_shape``, as finished HDF5 chunks."""
    t, p = block_states(spec, block)
    fields, labels, aux = stack(compute(block_spec(spec, block), t, p), t.size)
    shape = block_shape(block)
    # a state the solver could not solve is NaN in every field, and says why in "status"
    failed = fields["status"] != 0 if "status" in fields else np.zeros(t.size, bool)
    for name, arr in fields.items():
        # one sum finds a NaN or an infinity (no physical sum of the values overflows); only
        # then the states are looked at one by one
        if not np.isfinite(np.sum(arr)) and not np.all(np.isfinite(arr[..., ~failed])):
            raise TableError(f"compute function returned non-finite {name} in block {block}")
        if chunk_shape is not None:
            fields[name] = encode_field(arr, shape, chunk_shape, name in STACKED)
    return block, {"fields": fields, "labels": labels, "aux": aux, "failed": int(failed.sum())}


__all__ = ["Block", "ComputeFn", "blocks", "block_states", "block_spec", "run_block"]
