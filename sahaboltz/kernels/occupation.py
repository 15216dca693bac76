"""Occupation probabilities of bound levels in a plasma (Hummer & Mihalas 1988 formalism).

A level of a radiator perturbed by its neighbours survives with probability w = w_neutral *
w_charged; the partition function becomes U = sum g_i w_i exp(-E_i / kT).  w -> 1 as the
density -> 0, and w -> 0 for high levels, which bounds the otherwise divergent sum.

Charged perturbers: the fit of Hubeny, Hummer & Lanz (1994, A&A 282, 151, their appendix) to
the Hummer & Mihalas (1988, ApJ 331, 794) result with the Hooper microfield distribution:

    w = f / (1 + f),   f = 0.1402 (x + 4 Z_r a^3) beta^3 / (1 + 0.1285 x beta^(3/2))
    x = (1 + a)^3.15,  a = 0.09 n_e^(1/6) / sqrt(T)          (n_e in cm^-3, T in K)
    beta = 8.3e14 n_e^(-2/3) K_n Z^3 / n^4
    K_n = 1 for n <= 3,  K_n = (16/3) (n/(n+1))^2 (n + 7/6) / (n^2 + n + 1/2) for n > 3

Z is the charge seen by the bound electron (ion charge + 1) and Z_r = 1 the perturber (proton)
charge.  The numerical coefficients are those of the published fit (quoted from memory: the
reference search available to us did not return the paper's text).

Neutral perturbers (Hummer & Mihalas 1988, hard spheres):

    w = exp(-(4 pi / 3) n_p (r_n + r_p)^3)

Our choice of radius is the hydrogenic mean radius averaged over l with weights 2l+1,
r_n = a_0 (5 n^2 + 1) / (4 Z), so r = 1.5 a_0 for the ground state of hydrogen, which is also
the default perturber radius r_p (neutral hydrogen perturbers).

Non-hydrogenic levels use the effective principal quantum number
n_eff = Z sqrt(R / (chi - E)) with R the Rydberg energy for infinite nuclear mass.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sahaboltz.constants import E_CHARGE, H, HC_EV_CM, M_E, RYDBERG_CM
from sahaboltz.errors import InputError
from sahaboltz.quantities import as_array, as_positive_array

__all__ = ["RYDBERG_EV", "BOHR_RADIUS_CM", "effective_n", "stark_k", "hydrogenic_radius",
           "stark_level_factor", "stark_state_factors", "stark_state_slopes",
           "stark_state_curvatures", "log_w_charged_derivatives",
           "w_charged", "w_neutral", "occupation_probability", "log_w_charged", "log_w_neutral"]

#: Rydberg energy for infinite nuclear mass [eV]
RYDBERG_EV = RYDBERG_CM * HC_EV_CM
#: Bohr radius hbar^2 / (m_e e^2) [cm], derived from the package constants
BOHR_RADIUS_CM = (H / (2.0 * np.pi)) ** 2 / (M_E * E_CHARGE**2)

# coefficients of the Hubeny, Hummer & Lanz (1994) fit (see module docstring)
_BETA_COEFF = 8.3e14
_A_COEFF = 0.09
_F_C1, _F_C2, _X_EXP = 0.1402, 0.1285, 3.15


def effective_n(energy_ev: Any, ionization_energy_ev: Any, charge: Any) -> np.ndarray:
    """Effective principal quantum number n_eff = (charge + 1) sqrt(R / (chi - E)).

    Parameters
    ----------
    energy_ev : array_like
        Excitation energy of the level [eV]; must lie below ``ionization_energy_ev``.
    ionization_energy_ev : array_like
        Ionization energy of the species [eV].
    charge : array_like
        Ion charge of the species (0 for neutral).
    """
    e = as_array(energy_ev, "eV", "energy_ev")
    chi = as_positive_array(ionization_energy_ev, "eV", "ionization_energy_ev")
    z = as_array(charge, "", "charge", allow_negative=False) + 1.0
    binding = chi - e
    if (binding <= 0).any():
        raise InputError("energy_ev: every level must lie below the ionization energy to have "
                         "an effective principal quantum number")
    return z * np.sqrt(RYDBERG_EV / binding)


def stark_k(n: np.ndarray) -> np.ndarray:
    """Factor K_n of the critical field (1 for n <= 3), continuous in real-valued n."""
    n = np.asarray(n, dtype=float)
    k = (16.0 / 3.0) * (n / (n + 1.0)) ** 2 * (n + 7.0 / 6.0) / (n * n + n + 0.5)
    return np.where(n <= 3.0, 1.0, k)


def hydrogenic_radius(n: Any, z: Any = 1.0) -> np.ndarray:
    """l-averaged mean radius of hydrogenic level n, a_0 (5 n^2 + 1) / (4 Z) [cm]."""
    n = np.asarray(n, dtype=float)
    return BOHR_RADIUS_CM * (5.0 * n * n + 1.0) / (4.0 * np.asarray(z, dtype=float))


def log_w_charged(n: np.ndarray, z: np.ndarray, temperature: np.ndarray,
                  electron_density: np.ndarray) -> np.ndarray:
    """ln w for charged perturbers (unchecked arrays; see :func:`w_charged`)."""
    a = _A_COEFF * electron_density ** (1.0 / 6.0) / np.sqrt(temperature)
    x = (1.0 + a) ** _X_EXP
    beta = _BETA_COEFF * electron_density ** (-2.0 / 3.0) * stark_k(n) * z**3 / n**4
    b32 = beta ** 1.5
    f = _F_C1 * (x + 4.0 * a**3) * b32 * b32 / (1.0 + _F_C2 * x * b32)
    # ln(f / (1 + f)) without cancellation when f is large (low density: w -> 1)
    return -np.log1p(1.0 / f)


def stark_level_factor(n: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Level part Q of s = beta^(-3/2) = P(n_e) * Q(n, Z), with Q = (K_n Z^3 / n^4)^(-3/2)."""
    return (stark_k(n) * z**3 / n**4) ** -1.5


def stark_state_factors(temperature: np.ndarray, electron_density: np.ndarray
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """State parts (P, A, B) of the charged-perturber fit written as ln w = -ln(1 + s (A s + B)).

    With s = beta^(-3/2) = P Q: 1/f = s^2 / (c1 (x + 4a^3)) + c2 x s / (c1 (x + 4a^3)), the
    same fit as :func:`log_w_charged`, arranged so that a (states x levels) block needs only an
    outer product and three element-wise passes.
    """
    a = _A_COEFF * electron_density ** (1.0 / 6.0) / np.sqrt(temperature)
    x = (1.0 + a) ** _X_EXP
    denom = _F_C1 * (x + 4.0 * a**3)
    p = (_BETA_COEFF * electron_density ** (-2.0 / 3.0)) ** -1.5
    return p, 1.0 / denom, _F_C2 * x / denom


def stark_state_slopes(temperature: np.ndarray, electron_density: np.ndarray
                       ) -> tuple[np.ndarray, np.ndarray]:
    """d ln(1 + s (A s + B)) / d ln n_e and / d ln T of the charged-perturber fit need how A and
    B of :func:`stark_state_factors` change: returns (a dA/da, a dB/da), where
    a = 0.09 n_e^(1/6) / sqrt(T) (so d a / d ln n_e = a/6 and d a / d ln T = -a/2)."""
    a = _A_COEFF * electron_density ** (1.0 / 6.0) / np.sqrt(temperature)
    x = (1.0 + a) ** _X_EXP
    dx = _X_EXP * (1.0 + a) ** (_X_EXP - 1.0)
    denom = _F_C1 * (x + 4.0 * a**3)
    ddenom = _F_C1 * (dx + 12.0 * a * a)
    da_a = -ddenom / denom**2
    db_a = _F_C2 * (dx * denom - x * ddenom) / denom**2
    return a * da_a, a * db_a


def stark_state_curvatures(temperature: np.ndarray, electron_density: np.ndarray
                           ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """First and second logarithmic derivatives of A and B of :func:`stark_state_factors`
    with respect to a = 0.09 n_e^(1/6) / sqrt(T): (a A', a B', a^2 A'', a^2 B'').

    With D = c1 (x + 4 a^3), x = (1 + a)^3.15: A = 1/D, B = c2 x / D, so
    A' = -D'/D^2, A'' = 2 D'^2/D^3 - D''/D^2, B' = c2 (x'/D - x D'/D^2),
    B'' = c2 (x''/D - 2 x' D'/D^2 - x D''/D^2 + 2 x D'^2/D^3).  (Unchecked arrays.)
    """
    a = _A_COEFF * electron_density ** (1.0 / 6.0) / np.sqrt(temperature)
    x = (1.0 + a) ** _X_EXP
    x1 = _X_EXP * (1.0 + a) ** (_X_EXP - 1.0)
    x2 = _X_EXP * (_X_EXP - 1.0) * (1.0 + a) ** (_X_EXP - 2.0)
    d = _F_C1 * (x + 4.0 * a**3)
    d1 = _F_C1 * (x1 + 12.0 * a * a)
    d2 = _F_C1 * (x2 + 24.0 * a)
    a1 = -d1 / d**2
    a2 = 2.0 * d1**2 / d**3 - d2 / d**2
    b1 = _F_C2 * (x1 / d - x * d1 / d**2)
    b2 = _F_C2 * (x2 / d - 2.0 * x1 * d1 / d**2 - x * d2 / d**2 + 2.0 * x * d1**2 / d**3)
    return a * a1, a * b1, a * a * a2, a * a * b2


def log_w_charged_derivatives(s, a_, b_, a_a1, b_a1, a_a2, b_a2):
    """ln w of the charged-perturber fit and its derivatives in (ln T, ln n_e).

    ln w = -ln(1 + g), g = A s^2 + B s with s = P(n_e) Q (P proportional to n_e) and A, B
    functions of a (d ln a / d ln T = -1/2, d ln a / d ln n_e = 1/6); the arguments are s,
    A, B and the output of :func:`stark_state_curvatures` (broadcasting arrays).

    Returns (ln w, d ln w/d ln T, d ln w/d ln n_e, d2 ln w/d ln T^2, d2 ln w/d ln T d ln n_e).
    """
    s2 = s * s
    g = s * (a_ * s + b_)
    g_s = 2.0 * a_ * s2 + b_ * s                   # d g / d ln s
    g_a = a_a1 * s2 + b_a1 * s                     # d g / d ln a
    g_aa = (a_a1 + a_a2) * s2 + (b_a1 + b_a2) * s  # d2 g / d ln a^2
    g_sa = 2.0 * a_a1 * s2 + b_a1 * s
    g_t = -0.5 * g_a
    g_n = g_s + g_a / 6.0
    g_tt = 0.25 * g_aa
    g_tn = -0.5 * (g_sa + g_aa / 6.0)
    inv = 1.0 / (1.0 + g)
    return (-np.log1p(g), -g_t * inv, -g_n * inv, -g_tt * inv + (g_t * inv) ** 2,
            -g_tn * inv + g_t * g_n * inv * inv)


def log_w_neutral(n: np.ndarray, z: np.ndarray, neutral_density: np.ndarray,
                  perturber_radius_cm: float | np.ndarray) -> np.ndarray:
    """ln w for neutral perturbers (unchecked arrays; see :func:`w_neutral`)."""
    r = hydrogenic_radius(n, z) + perturber_radius_cm
    return -(4.0 * np.pi / 3.0) * neutral_density * r**3


def _checked_n_z(n: Any, charge: Any) -> tuple[np.ndarray, np.ndarray]:
    nn = as_positive_array(n, "", "n")
    z = as_array(charge, "", "charge", allow_negative=False) + 1.0
    return nn, z


def w_charged(n: Any, temperature: Any, electron_density: Any, charge: Any = 0) -> np.ndarray:
    """Occupation probability from charged perturbers (Hubeny, Hummer & Lanz 1994 fit).

    Parameters
    ----------
    n : array_like
        (Effective) principal quantum number of the level.
    temperature : float, array_like or Quantity
        Temperature [K].
    electron_density : float, array_like or Quantity
        Electron density n_e [cm^-3]; the ion (proton) density is taken equal to it.
    charge : int or array_like
        Ion charge of the radiator (0 for H I, 1 for He II ...).

    Returns
    -------
    ndarray
        w in (0, 1], broadcast shape of the inputs.
    """
    nn, z = _checked_n_z(n, charge)
    t = as_positive_array(temperature, "K", "temperature")
    ne = as_positive_array(electron_density, "cm-3", "electron_density")
    return np.exp(log_w_charged(nn, z, t, ne))


def w_neutral(n: Any, neutral_density: Any, charge: Any = 0,
              perturber_radius_cm: float | None = None) -> np.ndarray:
    """Occupation probability from neutral perturbers (Hummer & Mihalas 1988 hard spheres).

    Parameters
    ----------
    n : array_like
        (Effective) principal quantum number of the level.
    neutral_density : float, array_like or Quantity
        Number density of neutral perturbers [cm^-3] (zero allowed).
    charge : int or array_like
        Ion charge of the radiator.
    perturber_radius_cm : float, optional
        Hard-sphere radius of the perturbers [cm]; default that of ground-state hydrogen.
    """
    nn, z = _checked_n_z(n, charge)
    nd = as_array(neutral_density, "cm-3", "neutral_density", allow_negative=False)
    rp = hydrogenic_radius(1.0) if perturber_radius_cm is None else float(perturber_radius_cm)
    return np.exp(log_w_neutral(nn, z, nd, rp))


def occupation_probability(n: Any, temperature: Any, electron_density: Any, charge: Any = 0,
                           neutral_density: Any = None,
                           perturber_radius_cm: float | None = None) -> np.ndarray:
    """Total occupation probability w = w_charged * w_neutral.

    Parameters are those of :func:`w_charged` and :func:`w_neutral`; ``neutral_density=None``
    leaves out the neutral perturbers.
    """
    w = w_charged(n, temperature, electron_density, charge)
    if neutral_density is not None:
        w = w * w_neutral(n, neutral_density, charge, perturber_radius_cm)
    return w
