"""How failed states are reported: per state in the result, and as one error naming all.

The engines never raise for a state they cannot solve; they give it a status and a reason
(:class:`~sahaboltz.equilibrium.state.EquilibriumState` ``status``, ``reason``) and NaN
values.  :func:`raise_or_keep` applies the caller's choice: ``errors="raise"`` (default) raises
one ConvergenceError naming every failed state and carrying the partial result,
``errors="mask"`` returns the state as it is.
"""

from __future__ import annotations

import numpy as np

from sahaboltz.equilibrium.state import CONVERGED, STATUS_NAMES
from sahaboltz.errors import ConvergenceError, InputError

#: the choices of ``errors=``
ERROR_MODES = ("raise", "mask")
#: states listed in full in the message (the rest are counted by status)
_LISTED = 10


def check_mode(errors: str) -> str:
    if errors not in ERROR_MODES:
        raise InputError(f"errors must be one of {', '.join(ERROR_MODES)}, got {errors!r}")
    return errors


def raise_or_keep(state, errors: str, what: str = "the ionization balance"):
    """Return ``state``, or raise for its failed states when ``errors == "raise"``."""
    bad = state.status != CONVERGED
    if errors == "mask" or not bad.any():
        return state
    raise convergence_error(state, what)


def convergence_error(state, what: str) -> ConvergenceError:
    """One error for all failed states: the first ones listed with T, the closure value and
    why, the rest counted; ``.indices`` (every failed index), ``.state`` (the partial
    result) and ``.status`` go with it."""
    flat = state.status.ravel()
    where = np.flatnonzero(flat != CONVERGED)
    t = state.temperature.ravel()
    v = np.broadcast_to(state.closure_value, state.shape).ravel()
    shape = state.shape
    lines = []
    for i in where[:_LISTED]:
        idx = tuple(int(j) for j in np.unravel_index(i, shape)) if shape else ()
        lines.append(f"  state {idx}: T = {t[i]:.6g} K, {state.closure} = {v[i]:.6g} "
                     f"({STATUS_NAMES[flat[i]]}: {state.reason.ravel()[i]})")
    counts = ", ".join(f"{int((flat == k).sum())} {name}" for k, name in enumerate(STATUS_NAMES)
                       if k != CONVERGED and (flat == k).any())
    more = f"\n  ... and {where.size - _LISTED} more" if where.size > _LISTED else ""
    err = ConvergenceError(f"{what} did not converge at {where.size} of {flat.size} states "
                           f"({counts}):\n" + "\n".join(lines) + more +
                           "\n(errors='mask' returns the other states, with a status per state)")
    err.indices = [tuple(int(j) for j in np.unravel_index(i, shape)) for i in where]
    err.state = state
    return err


def mark_failed(state, flat_index, reasons, status: int = 3) -> None:
    """Mark states of a result as failed after the fact (a closure search found no state
    there): status, reason, and NaN values in place of their populations."""
    idx = np.asarray(flat_index, dtype=np.intp)
    if not idx.size:
        return
    state.status.reshape(-1)[idx] = status
    reason = state.reason.reshape(-1)
    for i, why in zip(idx, reasons):
        reason[i] = why
    for name in ("log_ne", "n_e", "nuclei_density"):
        arr = np.array(getattr(state, name), dtype=float)
        arr.reshape(-1)[idx] = np.nan
        setattr(state, name, arr)
    if getattr(state, "_n_mol", None) is not None:
        state._n_mol.reshape(state._n_mol.shape[0], -1)[:, idx] = np.nan
    state._cache.clear()
    state.__dict__.pop("_thermo_cache", None)
