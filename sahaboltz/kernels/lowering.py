"""Debye length and Debye-Hueckel lowering of the ionization potential.

lambda_D = sqrt(k T / (4 pi e^2 (n_e + sum_z z^2 n_z)))   [cm, Gaussian units]
dchi_z   = (z + 1) e^2 / lambda_D                           [eV]

where z is the charge of the species being ionized (0 for a neutral atom): the electron that
leaves feels the net charge z + 1 of the remaining ion.  Both broadcast like numpy.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sahaboltz.constants import E_CHARGE, EV, K_B
from sahaboltz.quantities import as_array, as_positive_array

__all__ = ["debye_length", "debye_hueckel_lowering"]


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
    return np.sqrt(K_B * t / (4.0 * np.pi * E_CHARGE**2 * (ne + ions)))


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
    return (z + 1.0) * E_CHARGE**2 / lam / EV
