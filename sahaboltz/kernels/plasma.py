"""Plasma parameters, each formula once: Debye length, Debye-Hueckel lowering, coupling
parameter and the McWhirter criterion.

    lambda_D = sqrt(k T / (4 pi e^2 (n_e + sum_z z^2 n_z)))     [cm, Gaussian units]
    dchi_z   = (z + 1) e^2 / lambda_D                             [eV]
    Gamma_e  = e^2 / (a_e k T),  a_e = (3 / (4 pi n_e))^(1/3)
    Theta    = n_e lambda_e^3,   lambda_e = h / sqrt(2 pi m_e k T)   (electron degeneracy)
    n_e     >= 1.6e12 T^(1/2) dE^3                                [cm^-3, T in K, dE in eV]

z is the charge of the species being ionized (0 for a neutral atom): the electron that leaves
feels the net charge z + 1 of the remaining ion; a negative ion (z = -1) is not lowered.

Every formula comes twice: a fast core (leading underscore, plain float arrays, no checks) for
the solver's inner loops, and a checked public wrapper (Quantities or plain numbers in the
documented unit, clear errors) for users.  Both broadcast like numpy.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sahaboltz.constants import E_CHARGE, EV, H, K_B, M_E
from sahaboltz.quantities import as_array, as_positive_array

__all__ = ["MCWHIRTER_COEFFICIENT", "debye_length", "debye_hueckel_lowering",
           "coupling_parameter", "degeneracy_parameter", "mcwhirter_density"]

#: McWhirter (1965) criterion coefficient [cm^-3 K^-1/2 eV^-3]: n_e >= 1.6e12 T^1/2 dE^3
MCWHIRTER_COEFFICIENT = 1.6e12

# e^2 [eV cm]: (z + 1) e^2 / lambda_D in eV for lambda_D in cm
_E2_EV_CM = E_CHARGE**2 / EV
# 4 pi e^2 / k [cm K]: lambda_D^2 = T / (this x screening density)
_FOUR_PI_E2_OVER_K = 4.0 * np.pi * E_CHARGE**2 / K_B


# 2 pi m_e k / h^2 [cm^-2 K^-1]
_TWO_PI_ME_K_H2 = 2.0 * np.pi * M_E * K_B / H**2


# -- fast cores --------------------------------------------------------------------------
def _log_quantum_concentration(t: np.ndarray) -> np.ndarray:
    """ln (2 pi m_e k T / h^2)^{3/2} = -3 ln lambda_e [cm^-3]: the electrons' quantum
    concentration (the constant of the Saha equation, and the degeneracy scale)."""
    return 1.5 * np.log(_TWO_PI_ME_K_H2 * t)


def _debye_length(t: np.ndarray, screening_density: np.ndarray) -> np.ndarray:
    """lambda_D [cm] from T [K] and the screening density n_e + sum z^2 n_z [cm^-3]."""
    return np.sqrt(t / (_FOUR_PI_E2_OVER_K * screening_density))


def _lowering_ev(charge: np.ndarray, lam: np.ndarray) -> np.ndarray:
    """Debye-Hueckel lowering [eV] of species of ``charge`` at Debye length ``lam`` [cm]."""
    return np.maximum(np.asarray(charge, dtype=float) + 1.0, 0.0) * (_E2_EV_CM / lam)


def _coupling(t: np.ndarray, n_e: np.ndarray) -> np.ndarray:
    """Electron coupling parameter Gamma_e."""
    a = (3.0 / (4.0 * np.pi * n_e)) ** (1.0 / 3.0)
    return E_CHARGE**2 / (a * K_B * t)


def _degeneracy(t: np.ndarray, n_e: np.ndarray) -> np.ndarray:
    """n_e lambda_e^3: the electrons per cube of their thermal wavelength (the Saha
    equation's own constant: n_e / (2 pi m_e k T / h^2)^{3/2})."""
    return n_e * np.exp(-_log_quantum_concentration(t))


def _mcwhirter(t: np.ndarray, delta_e_ev: np.ndarray) -> np.ndarray:
    """McWhirter's lower bound on n_e [cm^-3]."""
    return MCWHIRTER_COEFFICIENT * np.sqrt(t) * delta_e_ev**3


# -- checked wrappers ----------------------------------------------------------------------
def debye_length(temperature: Any, electron_density: Any, sum_z2_n: Any = None) -> np.ndarray:
    """Debye length of a plasma of electrons and ions [cm].

    Parameters
    ----------
    temperature : float, array_like or Quantity
        Temperature [K].
    electron_density : float, array_like or Quantity
        Electron number density n_e [cm^-3].
    sum_z2_n : float, array_like or Quantity, optional
        sum over ions of z^2 n_z [cm^-3].  Default: n_e (singly charged ions, neutral plasma),
        so that the screening density is 2 n_e.

    Returns
    -------
    ndarray
        lambda_D [cm], broadcast shape of the inputs.
    """
    t = as_positive_array(temperature, "K", "temperature")
    ne = as_positive_array(electron_density, "cm-3", "electron_density")
    ions = ne if sum_z2_n is None else as_array(sum_z2_n, "cm-3", "sum_z2_n", allow_negative=False)
    return _debye_length(t, ne + ions)


def debye_hueckel_lowering(charge: Any, debye_length_cm: Any) -> np.ndarray:
    """Debye-Hueckel lowering of the ionization potential [eV].

    Parameters
    ----------
    charge : int or array_like
        Charge z of the species being ionized (0 for the neutral atom, 1 for a singly
        charged ion, ...).
    debye_length_cm : float, array_like or Quantity
        Debye length [cm] (see :func:`debye_length`).

    Returns
    -------
    ndarray
        dchi = (z + 1) e^2 / lambda_D [eV], broadcast shape of the inputs.
    """
    z = as_array(charge, "", "charge", allow_negative=False)
    lam = as_positive_array(debye_length_cm, "cm", "debye_length_cm")
    return _lowering_ev(z, lam)


def coupling_parameter(temperature: Any, electron_density: Any) -> np.ndarray:
    """Electron coupling parameter Gamma_e = e^2 / (a_e k T), a_e = (3 / (4 pi n_e))^(1/3).

    Well below 1 the plasma is weakly coupled (ideal gas plus Debye-Hueckel corrections);
    near and above 1 those corrections fail.
    """
    t = as_positive_array(temperature, "K", "temperature")
    ne = as_positive_array(electron_density, "cm-3", "electron_density")
    return _coupling(t, ne)


def degeneracy_parameter(temperature: Any, electron_density: Any) -> np.ndarray:
    """Electron degeneracy parameter n_e lambda_e^3, lambda_e = h / sqrt(2 pi m_e k T).

    Well below 1 the electrons are a classical (Boltzmann) gas, as the Saha equation
    assumes; near and above 1 they are degenerate and the ideal-gas model fails.
    """
    t = as_positive_array(temperature, "K", "temperature")
    ne = as_positive_array(electron_density, "cm-3", "electron_density")
    return _degeneracy(t, ne)


def mcwhirter_density(temperature: Any, delta_e_ev: Any) -> np.ndarray:
    """McWhirter's lower bound on n_e for LTE, 1.6e12 T^1/2 dE^3 [cm^-3].

    Parameters
    ----------
    temperature : float, array_like or Quantity
        T [K].
    delta_e_ev : float, array_like or Quantity
        The largest energy gap between adjacent levels [eV].
    """
    t = as_positive_array(temperature, "K", "temperature")
    de = as_positive_array(delta_e_ev, "eV", "delta_e_ev")
    return _mcwhirter(t, de)
