"""Saha factors and the single-element Saha chain.

The Saha equation for the ionization r -> r+1 of one element,

    n_{r+1} n_e / n_r = Phi_r(T) = 2 (U_{r+1} / U_r) (2 pi m_e k T / h^2)^{3/2}
                                   exp(-(chi_r - dchi_r) / k T)            [cm^-3],

links neighbouring stages.  For a whole element the stage populations follow from the
cumulative products ``n_r / n_0 = prod_{i<r} Phi_i / n_e``; we form them as cumulative *sums of
logarithms* so that nothing overflows (chi / kT reaches 10^6 for uranium's inner shells at
1,000 K), and normalize with a log-sum-exp.

Everything here broadcasts over the state shape: stage axis first, then the states.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from sahaboltz.constants import K_B, K_B_EV
from sahaboltz.data.database import default_database
from sahaboltz.errors import InputError, NoDataError
from sahaboltz.kernels import truncation as _truncation
from sahaboltz.kernels.partition import PartitionModel
from sahaboltz.kernels.plasma import _log_quantum_concentration
from sahaboltz.quantities import as_array, as_positive_array

__all__ = ["H_MINUS_AFFINITY_EV", "saha_constant", "log_saha_constant", "log_two_saha_constant",
           "log_saha_factor", "chain_log_populations", "chain_fractions", "saha_chain"]

#: electron affinity of hydrogen [eV] (Lykke, Murray & Lineberger 1991, Phys. Rev. A 43, 6104)
H_MINUS_AFFINITY_EV = 0.754195

_LN2 = float(np.log(2.0))

# -- fast cores (plain float arrays, no checks) ----------------------------------------------
#: ln (2 pi m_e k T / h^2)^{3/2} [cm^-3] (the plasma kernel's quantum concentration)
_log_saha_constant = _log_quantum_concentration


def _log_saha_steps(t: np.ndarray, chi_ev: np.ndarray, ln_u: np.ndarray,
                    lowering_ev: np.ndarray | None = None) -> np.ndarray:
    """ln Phi_r of the R steps of a chain, shape (R, n).

    ``t`` (n,) [K]; ``chi_ev`` (R,) the ionization energy of each step's lower stage;
    ``ln_u`` (R+1, n) ln U of the stages; ``lowering_ev`` (R, n) or None.
    """
    beta = 1.0 / (K_B_EV * t)
    steps = (_LN2 + ln_u[1:] - ln_u[:-1] + _log_saha_constant(t)[None, :]
             - np.multiply.outer(chi_ev, beta))
    if lowering_ev is not None:
        steps += lowering_ev * beta[None, :]
    return steps


# -- checked wrappers ------------------------------------------------------------------------
def log_saha_constant(temperature: Any) -> np.ndarray:
    """ln of (2 pi m_e k T / h^2)^{3/2} with the constant in cm^-3."""
    return _log_saha_constant(as_positive_array(temperature, "K", "temperature"))


def log_two_saha_constant(temperature: Any) -> np.ndarray:
    """ln(2 S(T)), S = (2 pi m_e k T / h^2)^{3/2} [cm^-3]: the Saha factor's constant with the
    free electron's two spin states."""
    return _LN2 + log_saha_constant(temperature)


def saha_constant(temperature: Any) -> np.ndarray:
    """(2 pi m_e k T / h^2)^{3/2} [cm^-3]: the electron's thermal quantum concentration."""
    return np.exp(log_saha_constant(temperature))


def log_saha_factor(temperature: Any, ionization_energy_ev: Any, u_lower: Any, u_upper: Any,
                    lowering_ev: Any = 0.0) -> np.ndarray:
    """ln Phi, with Phi = n_{r+1} n_e / n_r [cm^-3] from the Saha equation.

    Parameters
    ----------
    temperature : float, array_like or Quantity
        T [K].
    ionization_energy_ev : float or array_like
        chi_r of the lower stage [eV].
    u_lower, u_upper : float or array_like
        Partition functions of the lower and upper stage.
    lowering_ev : float or array_like
        Lowering dchi_r of the ionization energy [eV] (0: ideal gas).

    Returns
    -------
    ndarray
        ln Phi (broadcast shape of the inputs).
    """
    t = as_positive_array(temperature, "K", "temperature")
    chi = as_array(ionization_energy_ev, "eV", "ionization_energy_ev")
    ul = as_positive_array(u_lower, "", "u_lower")
    uu = as_positive_array(u_upper, "", "u_upper")
    dchi = as_array(lowering_ev, "eV", "lowering_ev", allow_negative=False)
    return _LN2 + np.log(uu / ul) + _log_saha_constant(t) - (chi - dchi) / (K_B_EV * t)


def chain_log_populations(log_phi: np.ndarray, log_ne: np.ndarray) -> np.ndarray:
    """ln(n_r / n_0) for a chain of stages 0..R from the Saha factors of its R steps.

    Parameters
    ----------
    log_phi : ndarray, shape (R, ...)
        ln Phi_r for r = 0..R-1 (ln of n_{r+1} n_e / n_r [cm^-3]).
    log_ne : ndarray
        ln n_e [cm^-3], broadcastable to ``log_phi.shape[1:]``.

    Returns
    -------
    ndarray, shape (R+1, ...)
        ln(n_r / n_0) (the first row is 0).
    """
    log_phi = np.asarray(log_phi, dtype=float)
    steps = log_phi - np.asarray(log_ne, dtype=float)
    out = np.zeros((steps.shape[0] + 1,) + steps.shape[1:])
    np.cumsum(steps, axis=0, out=out[1:])
    return out


def chain_fractions(log_rel: np.ndarray) -> np.ndarray:
    """Stage fractions from ln(n_r / n_0) (any reference stage): a log-sum-exp normalization."""
    return _chain_fractions_inplace(np.array(log_rel, dtype=float))


def _chain_fractions_inplace(a: np.ndarray) -> np.ndarray:
    """:func:`chain_fractions` overwriting its float array argument (no temporaries of its
    size: large grids of many stages are memory-bound)."""
    a -= np.max(a, axis=0, keepdims=True)
    np.exp(a, out=a)
    a /= a.sum(axis=0, keepdims=True)
    return a


def saha_chain(element: Any, temperature: Any, electron_density: Any = None,
               electron_pressure: Any = None, *, truncation: str | None = None,
               lowering_ev: Any = None, completion: bool = False,
               database=None, missing_levels: str = "unit") -> np.ndarray:
    """Stage fractions of one element at given (T, n_e) or (T, P_e): the Saha chain.

    Parameters
    ----------
    element : str or int
        Element symbol or atomic number; every stage in the database is used (neutral to
        bare nucleus).
    temperature : float, array_like or Quantity
        T [K].
    electron_density : float, array_like or Quantity, optional
        n_e [cm^-3].  Give exactly one of ``electron_density`` and ``electron_pressure``.
    electron_pressure : float, array_like or Quantity, optional
        P_e = n_e k T [dyn cm^-2].
    truncation : str, optional
        Partition-function truncation (:mod:`sahaboltz.kernels.truncation`); default
        occupation probabilities at the given n_e (the lowered limit with ``lowering_ev``).
    lowering_ev : float or array_like, optional
        Lowering of every ionization energy of this element [eV], broadcastable to
        (n_stages,) + state shape (e.g. from Debye-Hueckel).  Default: none.
    completion : bool
        Hydrogenic completion of the partition functions.
    database : SpeciesDatabase, optional
        Default: :func:`sahaboltz.data.database.default_database`.
    missing_levels : {"unit", "error"}
        Stages without a level list in the database: take U = 1, or raise NoDataError.

    Returns
    -------
    ndarray, shape (Z+1,) + broadcast(T, n_e).shape
        n_r / N_element for r = 0 (neutral) .. Z (bare nucleus).

    Raises
    ------
    InputError
        Neither or both of ``electron_density`` and ``electron_pressure``; bad values.
    """
    if (electron_density is None) == (electron_pressure is None):
        raise InputError("give exactly one of electron_density [cm^-3] and "
                         "electron_pressure [dyn cm^-2]")
    t = as_positive_array(temperature, "K", "temperature")
    if electron_density is not None:
        ne = as_positive_array(electron_density, "cm-3", "electron_density")
    else:
        pe = as_positive_array(electron_pressure, "dyn cm-2", "electron_pressure")
        ne = pe / (K_B * t)
    t, ne = np.broadcast_arrays(t, ne)
    db = database or default_database()
    stages = db.element(element)
    has = np.array([s.is_bare_nucleus or bool(s.bound.any()) for s in stages])
    if missing_levels not in ("unit", "error"):
        raise InputError(f"missing_levels must be 'unit' or 'error', got {missing_levels!r}")
    if missing_levels == "error" and not has.all():
        raise NoDataError(f"{stages[int(np.argmin(has))].name} has no level list; pass "
                          "missing_levels='unit' to take U = 1 for it")
    scheme = (_truncation.get(truncation) if truncation is not None
              else _truncation.resolve(None, lowering=lowering_ev is not None))
    model = PartitionModel([s for s, h in zip(stages, has) if h], truncation=scheme,
                           completion=completion)
    if lowering_ev is None:
        low = np.zeros((len(stages),) + t.shape)
    else:
        low = np.broadcast_to(as_array(lowering_ev, "eV", "lowering_ev", allow_negative=False),
                              (len(stages),) + t.shape)
    kw = {}
    if scheme.density_dependent:
        kw["n_e"] = ne
        if lowering_ev is not None and "lowering_ev" in scheme.inputs:
            kw["lowering_ev"] = low[has]
    u = np.ones((len(stages),) + t.shape)
    u[has] = model.evaluate(t, **kw)
    chi = np.array([s.ionization_energy_ev for s in stages[:-1]])
    log_phi = _log_saha_steps(t.ravel(), chi, np.log(u.reshape(len(stages), -1)),
                              low[:-1].reshape(len(stages) - 1, -1))
    return chain_fractions(chain_log_populations(log_phi.reshape((-1,) + t.shape), np.log(ne)))


def stage_charges(stages: Sequence) -> np.ndarray:
    """Charges of a list of species (helper for chains)."""
    return np.array([s.charge for s in stages], dtype=float)
