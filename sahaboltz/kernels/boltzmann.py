"""Boltzmann level populations within one ionization stage, and their inverse.

n_i / N_r = g_i w_i exp(-E_i / kT) / U_r, with U_r and w_i from the chosen truncation (see
:mod:`sahaboltz.kernels.partition`).  Levels are addressed by their index in the species'
level table (``species.levels``), or selected by energy window, configuration or term label.
Levels that are not bound (autoionizing, above the ionization energy) or that the truncation
removes have population 0.

The inverse, :func:`excitation_temperature`, turns an observed population ratio of two levels
(or two sets of levels) into the temperature of the Boltzmann distribution that gives it.
"""

from __future__ import annotations

import fnmatch
from typing import Any, Sequence

import numpy as np

from sahaboltz.constants import K_B_EV
from sahaboltz.data.species import Species
from sahaboltz.errors import InputError
from sahaboltz.kernels.partition import (_model_for, _resolve, default_truncation,
                                         species_lowering)
from sahaboltz.quantities import as_array, as_positive_array

__all__ = ["select_levels", "level_populations", "level_fraction", "level_ratio",
           "excitation_temperature"]

Selection = Any  # int, sequence of int, slice, or dict of criteria (see select_levels)


def select_levels(species, *, index: Any = None, energy_range_ev: Sequence[float] | None = None,
                  configuration: str | None = None, term: str | None = None,
                  j: str | None = None, bound_only: bool = True,
                  argument: str = "levels") -> np.ndarray:
    """Indices (into ``species.levels``) of the levels matching every given criterion.

    Parameters
    ----------
    species : str, (Z, charge) or Species
    index : int, sequence of int or slice, optional
        Level indices in the species' level table (0 = ground level).
    energy_range_ev : (float, float), optional
        Keep levels with lo <= E <= hi [eV].
    configuration, term, j : str, optional
        Labels as in the level table.  A label equal to the text is matched exactly;
        otherwise the text is a shell-style pattern ("*4s2*", "?5D").  Blanks around the
        labels are ignored.
    bound_only : bool
        Drop levels that are not bound (default True).
    argument : str
        Name used in error messages.

    Raises
    ------
    InputError
        An index out of range, a malformed window, or a selection that matches nothing.
    """
    sp = _resolve(species)
    n = len(sp.levels)
    keep = np.ones(n, dtype=bool)
    given = []
    if index is not None:
        given.append("index")
        mask = np.zeros(n, dtype=bool)
        if isinstance(index, slice):
            mask[index] = True
        else:
            idx = np.atleast_1d(np.asarray(index))
            if idx.dtype.kind not in "iu":
                raise InputError(f"{argument}: index must be integers, got {index!r}")
            if ((idx < -n) | (idx >= n)).any():
                raise InputError(f"{argument}: index {idx[(idx < -n) | (idx >= n)][0]} is out of "
                                 f"range; {sp.name} has {n} tabulated levels (0..{n - 1})")
            mask[idx] = True
        keep &= mask
    if energy_range_ev is not None:
        given.append("energy_range_ev")
        try:
            lo, hi = (float(v) for v in energy_range_ev)
        except (TypeError, ValueError):
            raise InputError(f"{argument}: energy_range_ev must be (low, high) in eV, "
                             f"got {energy_range_ev!r}") from None
        if not (np.isfinite(lo) and np.isfinite(hi)) or hi < lo:
            raise InputError(f"{argument}: energy_range_ev must be finite with low <= high, "
                             f"got ({lo}, {hi})")
        e = sp.levels.energy_ev
        keep &= (e >= lo) & (e <= hi)
    for label, pattern in (("configuration", configuration), ("term", term), ("j", j)):
        if pattern is None:
            continue
        given.append(label)
        values = getattr(sp.levels, label)
        pat = str(pattern).strip()
        labels = [str(v).strip() for v in values]
        exact = np.array([v == pat for v in labels], dtype=bool)
        # labels hold '*' (odd parity) themselves: an exact match wins over wildcards, so
        # "2P*" does not also pick the even "2P"
        keep &= exact if exact.any() else np.array(
            [fnmatch.fnmatchcase(v, pat) for v in labels], dtype=bool)
    if not given:
        raise InputError(f"{argument}: give at least one of index, energy_range_ev, "
                         "configuration, term or j")
    if bound_only:
        before = keep.any()
        keep &= sp.bound
        if before and not keep.any():
            raise InputError(f"{argument}: the selection ({', '.join(given)}) matches only "
                             f"levels of {sp.name} that are not bound (autoionizing or above "
                             "the ionization energy)")
    if not keep.any():
        raise InputError(f"{argument}: the selection ({', '.join(given)}) matches no level of "
                         f"{sp.name}; list its levels with 'sahaboltz levels'")
    return np.flatnonzero(keep)


def _selection(species, sel: Selection, argument: str) -> np.ndarray:
    if isinstance(sel, dict):
        return select_levels(species, argument=argument, **sel)
    return select_levels(species, index=sel, argument=argument)


def level_populations(species, temperature: Any, *, truncation: str | None = None,
                      completion: bool = False, n_e: Any = None, lowering_ev: Any = None,
                      n_neutral: Any = None) -> np.ndarray:
    """Fraction n_i / N of the stage in every tabulated level.

    Returns
    -------
    ndarray
        Shape (len(species.levels),) + state shape; 0 for levels that are not bound or that
        the truncation removes.  With ``completion`` the fractions of the tabulated levels sum
        to less than 1 (the rest sits in the completion levels).
    """
    sp = _resolve(species)
    model = _model_for(species if not isinstance(species, Species) else sp,
                       default_truncation(truncation, n_e, lowering_ev), completion)
    terms, _, ncomp = model.level_terms(sp.name, temperature, n_e,
                                        species_lowering(model, lowering_ev), n_neutral)
    u = terms.sum(axis=0)
    tab = terms[ncomp == 0]
    mask = sp.bound
    bound_idx = np.flatnonzero(mask)[np.argsort(sp.levels.energy_ev[mask], kind="stable")]
    out = np.zeros((len(sp.levels),) + terms.shape[1:])
    out[bound_idx] = tab / u
    return out


def level_fraction(species, temperature: Any, levels: Selection = None, *,
                   truncation: str | None = None, completion: bool = False, n_e: Any = None,
                   lowering_ev: Any = None, n_neutral: Any = None, **criteria) -> np.ndarray:
    """Fraction of the stage in a level or a set of levels.

    Parameters
    ----------
    levels : int, sequence of int, slice or dict, optional
        Level indices, or a dict of :func:`select_levels` criteria.  Criteria may also be
        given as keywords (``configuration="3d6.4s"``, ``energy_range_ev=(0, 1)``...).
    """
    if levels is not None and criteria:
        raise InputError("levels: give either a selection or keyword criteria, not both")
    sel = _selection(species, levels if levels is not None else criteria, "levels")
    pops = level_populations(species, temperature, truncation=truncation,
                             completion=completion, n_e=n_e, lowering_ev=lowering_ev,
                             n_neutral=n_neutral)
    return pops[sel].sum(axis=0)


def level_ratio(species, temperature: Any, upper: Selection, lower: Selection, *,
                truncation: str | None = None, completion: bool = False, n_e: Any = None,
                lowering_ev: Any = None, n_neutral: Any = None) -> np.ndarray:
    """Population ratio n(upper) / n(lower) of two levels or two sets of levels.

    Raises
    ------
    InputError
        If the truncation empties the lower set (ratio undefined).
    """
    iu = _selection(species, upper, "upper")
    il = _selection(species, lower, "lower")
    pops = level_populations(species, temperature, truncation=truncation,
                             completion=completion, n_e=n_e, lowering_ev=lowering_ev,
                             n_neutral=n_neutral)
    nl = pops[il].sum(axis=0)
    if (nl <= 0).any():
        raise InputError("lower: the truncation removes every level of the lower set at some "
                         "of the given states, so the ratio is undefined")
    return pops[iu].sum(axis=0) / nl


def excitation_temperature(species, ratio: Any, upper: Selection, lower: Selection) -> np.ndarray:
    """Excitation temperature [K] from an observed population ratio n(upper) / n(lower).

    For single levels T = (E_u - E_l) / (k ln(g_u n_l / (g_l n_u))); for sets of levels the
    ratio of the summed Boltzmann terms is inverted numerically (bisection in ln T).
    Occupation probabilities are not included (w = 1).

    Parameters
    ----------
    ratio : float or array_like
        Observed n(upper) / n(lower), per state (populations, not line intensities).
    upper, lower : selections
        As for :func:`level_ratio`; every upper level must lie above every lower level.

    Raises
    ------
    InputError
        Non-positive or non-finite ratio, overlapping sets, or a ratio that no positive
        temperature gives (population inversion, or above the T -> infinity limit).
    """
    sp = _resolve(species)
    r = as_positive_array(ratio, "", "ratio")
    iu = _selection(sp, upper, "upper")
    il = _selection(sp, lower, "lower")
    e, g = sp.levels.energy_ev, sp.levels.g.astype(float)
    if e[iu].min() <= e[il].max():
        raise InputError("upper, lower: every upper level must lie above every lower level")
    r_inf = g[iu].sum() / g[il].sum()  # the ratio as T -> infinity
    if (r >= r_inf).any():
        raise InputError(f"ratio: {r[r >= r_inf].flat[0]:.6g} is at or above the "
                         f"high-temperature limit g_u/g_l = {r_inf:.6g}; no positive "
                         "temperature gives it (population inversion?)")
    if len(iu) == 1 and len(il) == 1:
        de = e[iu[0]] - e[il[0]]
        return de / (K_B_EV * np.log(r_inf / r))
    # sets: ratio(T) rises monotonically from 0 to r_inf; bisect in ln T, vectorised
    eu, gu, el, gl = e[iu], g[iu], e[il], g[il]
    e0 = el.min()

    def model_ratio(t):
        b = 1.0 / (K_B_EV * t)
        num = (gu * np.exp(-(eu - e0) * b[..., None])).sum(axis=-1)
        den = (gl * np.exp(-(el - e0) * b[..., None])).sum(axis=-1)
        return num / den

    lo = np.full(r.shape, np.log(1e-2))
    hi = np.full(r.shape, np.log(1e9))
    if (model_ratio(np.exp(lo)) > r).any() or (model_ratio(np.exp(hi)) < r).any():
        raise InputError("ratio: outside the range reached between 0.01 K and 1e9 K")
    for _ in range(80):  # 80 halvings of a 25-wide ln T interval: far below 1e-12 relative
        mid = 0.5 * (lo + hi)
        above = model_ratio(np.exp(mid)) > r
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    return np.exp(0.5 * (lo + hi))
