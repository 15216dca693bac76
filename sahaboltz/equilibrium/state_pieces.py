"""A flat result put together from the results of several solves, and given its shape.

The inverse closures (:mod:`~sahaboltz.equilibrium.inverse`) evaluate every state at a
temperature of its own in each Newton pass; where the pass's temperature is the one
returned, that pass's state *is* the answer (a forward solve is deterministic), so the
result is spliced from the passes instead of being solved once more.

Every per-state quantity of a result (of :class:`~sahaboltz.equilibrium.state.EquilibriumState`
and its molecular subclass, their :class:`SolveReport` and any thermodynamics they keep) is an
array whose last axis runs over the states; these helpers walk them generically, so that a
new per-state attribute needs no code here.  The network and the molecular system are shared
(not per state) and are not walked.
"""

from __future__ import annotations

import numpy as np

__all__ = ["splice", "reshape"]

# shared by the states, never per state
_SHARED = frozenset({"network", "system"})


def _per_state(value, m: int) -> bool:
    return isinstance(value, np.ndarray) and value.ndim >= 1 and value.shape[-1] == m


def splice(base, idx: np.ndarray, part, part_idx: np.ndarray | None = None) -> None:
    """Write the states ``part_idx`` (default all) of the flat result ``part`` into the flat
    result ``base`` at the states ``idx`` (in place; both solved with the same network,
    closure kind and options)."""
    idx = np.asarray(idx, dtype=np.intp)
    m = base.temperature.size
    if base.temperature.ndim != 1 or part.temperature.ndim != 1:
        raise ValueError("splice: flat results only")
    take = (np.arange(part.temperature.size) if part_idx is None
            else np.asarray(part_idx, dtype=np.intp))
    if take.size != idx.size:
        raise ValueError("splice: one state of the part per index")
    k = part.temperature.size
    own = base.__dict__
    for name in list(own):
        if name in _SHARED:
            continue
        value = own[name]
        other = part.__dict__.get(name)
        if name == "_cache":                       # per-chain fractions: recomputed
            value.clear()
        elif name == "_thermo_cache":
            for key in list(value):
                if key in (other or {}):
                    _splice_fields(value[key], other[key], idx, take, m, k)
                else:
                    del value[key]
        elif name == "saha_tables":                # the tables of base's temperatures only
            own[name] = None
        elif name == "skipped_molecules":
            own[name] = list(dict.fromkeys(list(value) + list(other or [])))
        else:
            own[name] = _spliced(value, other, idx, take, m, k)


def _splice_fields(obj, other, idx, take, m, k) -> None:
    for name, value in vars(obj).items():
        setattr(obj, name, _spliced(value, getattr(other, name), idx, take, m, k))


def _spliced(value, other, idx, take, m, k):
    if _per_state(value, m):
        if not _per_state(other, k):
            raise ValueError("splice: the part's per-state arrays differ from the base's")
        out = np.array(value, dtype=np.result_type(value, other))
        out[..., idx] = other[..., take]
        return out
    if isinstance(value, dict):
        return {key: _spliced(v, other[key], idx, take, m, k) for key, v in value.items()}
    if hasattr(value, "__dict__") and not isinstance(value, type):
        _splice_fields(value, other, idx, take, m, k)
    return value


def reshape(state, shape: tuple) -> None:
    """Give the flat result ``state`` the array shape ``shape`` (in place)."""
    m = state.temperature.size
    if int(np.prod(shape)) != m:
        raise ValueError(f"reshape: {m} states do not fill {shape}")
    own = state.__dict__
    for name in list(own):
        if name in _SHARED:
            continue
        if name == "_cache":
            own[name].clear()
        elif name == "_thermo_cache":
            for th in own[name].values():
                _reshape_fields(th, shape, m)
        else:
            own[name] = _reshaped(own[name], shape, m)


def _reshape_fields(obj, shape, m) -> None:
    for name, value in vars(obj).items():
        setattr(obj, name, _reshaped(value, shape, m))


def _reshaped(value, shape, m):
    if _per_state(value, m):
        return value.reshape(value.shape[:-1] + tuple(shape))
    if isinstance(value, dict):
        return {k: _reshaped(v, shape, m) for k, v in value.items()}
    if hasattr(value, "__dict__") and not isinstance(value, type):
        _reshape_fields(value, shape, m)
    return value
