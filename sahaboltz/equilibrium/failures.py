"""How the engines report states that did not converge: one error naming every such state."""

from __future__ import annotations

import numpy as np

from sahaboltz.errors import ConvergenceError

#: states listed in full in the message (the rest are counted)
_LISTED = 10


def convergence_failure(bad: np.ndarray, t: np.ndarray, v: np.ndarray, closure, resid: np.ndarray,
                        shape: tuple, what: str, hint: str) -> ConvergenceError:
    """A ConvergenceError for the flat states ``bad`` of an array of ``shape``.

    The message lists the first states with T, the closure value and the residual; the error
    carries every failed index (in the state shape) as ``.indices``.
    """
    where = np.flatnonzero(bad)
    lines = []
    for i in where[:_LISTED]:
        idx = tuple(int(j) for j in np.unravel_index(i, shape)) if shape else ()
        lines.append(f"  state {idx}: T = {t[i]:.6g} K, {closure.name} = {v[i]:.6g} "
                     f"{closure.unit} (residual {resid[i]:.3g})")
    more = f"\n  ... and {where.size - _LISTED} more" if where.size > _LISTED else ""
    err = ConvergenceError(f"{what} did not converge at {where.size} of {bad.size} states:\n"
                           + "\n".join(lines) + more + f"\n({hint})")
    err.indices = [tuple(int(j) for j in np.unravel_index(i, shape)) for i in where]
    return err
