"""Where a solved state leaves the model's ground: the warnings a solve gives.

- :class:`~sahaboltz.errors.ValidityWarning` where the electrons are degenerate
  (n_e lambda_e^3 > :data:`DEGENERACY_LIMIT`) or the plasma strongly coupled
  (Gamma_e > :data:`COUPLING_LIMIT`): the ideal-gas Saha-Boltzmann model assumes neither.
- :class:`~sahaboltz.errors.TruncationWarning` where an explicitly chosen plain level sum
  misleads: for a species holding a noticeable share of its element, the plain U exceeds the
  occupation-weighted U at that state's density by more than :data:`PLAIN_EXCESS`.
"""

from __future__ import annotations

import warnings

import numpy as np

from sahaboltz.errors import TruncationWarning, ValidityWarning
from sahaboltz.kernels import truncation as _truncation
from sahaboltz.kernels.occupation import stark_state_factors

#: n_e lambda_e^3 above which the electron gas counts as degenerate
DEGENERACY_LIMIT = 1.0
#: Gamma_e above which the plasma counts as strongly coupled
COUPLING_LIMIT = 1.0
#: plain U / occupation-weighted U above which the plain sum is said to mislead
PLAIN_EXCESS = 1.10
#: species below this share of their element are not checked (they barely matter)
CHECKED_SHARE = 1e-3


def warn_validity(state, stacklevel: int = 3) -> None:
    """Warn once per solve when some states are degenerate or strongly coupled."""
    ok = state.converged
    if not ok.any():
        return
    theta = np.where(ok, state.degeneracy_parameter, 0.0)
    gamma = np.where(ok, state.coupling_parameter, 0.0)
    parts = []
    if (theta > DEGENERACY_LIMIT).any():
        parts.append(f"{int((theta > DEGENERACY_LIMIT).sum())} with degenerate electrons "
                     f"(n_e lambda_e^3 up to {theta.max():.3g} > {DEGENERACY_LIMIT:g})")
    if (gamma > COUPLING_LIMIT).any():
        parts.append(f"{int((gamma > COUPLING_LIMIT).sum())} strongly coupled "
                     f"(Gamma_e up to {gamma.max():.3g} > {COUPLING_LIMIT:g})")
    if parts:
        warnings.warn(ValidityWarning(
            f"{' and '.join(parts)} of {ok.size} states: the ideal-gas Saha-Boltzmann model "
            "does not hold there (see 'Validity' in docs/equilibrium.md)"),
            stacklevel=stacklevel)


def plain_excess(state) -> dict[str, int]:
    """For a state solved with the plain sum: per species, the number of states where its
    plain U exceeds the occupation-weighted U at that state's n_e by more than
    :data:`PLAIN_EXCESS` (species holding at least :data:`CHECKED_SHARE` of their element)."""
    net = state.network
    if net.model is None:
        return {}
    ok = state.converged.ravel()
    t = state.temperature.ravel()
    ne = state.n_e.ravel()
    occ = net.model.with_scheme(_truncation.get("occupation"))
    # screen: U_occ / U_plain >= w of the species' highest level, so only pairs whose top
    # level is weighted below 1/PLAIN_EXCESS need the full sums
    stark = stark_state_factors(t, np.where(ok, ne, 1.0))
    pairs_state, pairs_row, names = [], [], []
    for c in net.chains:
        # every (stage, state) of the chain at once; the fractions are not kept in the state
        # (all stages of a large grid would be held for this check alone)
        f = state._chain_fractions(c, keep=False).reshape(c.n, -1)
        j, sel = np.nonzero((f >= CHECKED_SHARE) & (c.model_rows >= 0)[:, None] & ok[None, :])
        if not j.size:
            continue
        r = c.model_offset + c.model_rows[j]
        low = occ.top_weight(r, *(v[sel] for v in stark)) < 1.0 / PLAIN_EXCESS
        pairs_state.append(sel[low])
        pairs_row.append(r[low])
        names.append(c.offset + j[low])
    if not pairs_state or not sum(p.size for p in pairs_state):
        return {}
    st_idx = np.concatenate(pairs_state)
    rows = np.concatenate(pairs_row)
    names = np.concatenate(names)
    # the plain sums: one table over the distinct temperatures (the state's own partition
    # functions)
    ut, tinv = np.unique(t[st_idx], return_inverse=True)
    # At one temperature the weighted U of a species falls as n_e rises (every level's
    # F = s (A s + B) grows with n_e), so the states where the plain U exceeds it form the
    # top of each (temperature, species) group sorted by n_e: a binary search per group
    # finds where they start, with ~log2(group size) sums instead of one per state.
    group = tinv * net.model.n_species + rows
    order = np.lexsort((ne[st_idx], group))
    st_idx, rows, names, group, tinv = (a[order] for a in (st_idx, rows, names, group, tinv))
    starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
    ends = np.r_[starts[1:], group.size]
    u_plain = net.model.evaluate(ut)[rows[starts], tinv[starts]]
    lo, hi = starts.copy(), ends.copy()     # the first flagged position lies in [lo, hi]
    while True:
        act = np.flatnonzero(lo < hi)
        if not act.size:
            break
        mid = (lo[act] + hi[act]) // 2
        u_occ = occ.evaluate_pairs(t, ne, rows[mid], want_temperature=False,
                                   states=st_idx[mid])[0]
        flag = u_plain[act] > PLAIN_EXCESS * u_occ
        hi[act] = np.where(flag, mid, hi[act])
        lo[act] = np.where(flag, lo[act], mid + 1)
    counts = np.bincount(names[starts], weights=ends - hi, minlength=net.n_species)
    return {net.species_names[i]: int(counts[i]) for i in np.flatnonzero(counts > 0)}


def warn_plain(state, stacklevel: int = 3) -> None:
    """Warn when an explicit plain sum misleads (see :func:`plain_excess`)."""
    excess = plain_excess(state)
    if not excess:
        return
    worst = sorted(excess.items(), key=lambda kv: -kv[1])
    listed = ", ".join(f"{name} ({n})" for name, n in worst[:8])
    more = f" and {len(worst) - 8} more species" if len(worst) > 8 else ""
    warnings.warn(TruncationWarning(
        f"truncation='plain' exceeds the occupation-weighted partition function by more than "
        f"{100 * (PLAIN_EXCESS - 1):.0f} % at this density for {listed}{more} "
        "(number of states in brackets): the default truncation='occupation' is the "
        "physically sound one there"), stacklevel=stacklevel)
