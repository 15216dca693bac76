"""Analytic compute functions for the table tests: pure hydrogen in LTE, closed-form Saha.

For pure atomic hydrogen (no H-, no H2) at temperature T and gas pressure P the Saha equation
    n_e n_p / n_HI = (2 pi m_e k T / h^2)^{3/2} (2 U_II / U_I) exp(-chi / kT),  U_I = 2, U_II = 1
with n_e = n_p = x n_H and P = (1 + x) n_H k T gives x^2 / (1 - x^2) = S k T / P: the ionized
fraction x in closed form (e.g. Mihalas, Stellar Atmospheres, 2nd ed., eq. 5-17 and the
pure-hydrogen example).  It is the independent reference the table machinery is checked against.
"""

from __future__ import annotations

import os
import time

import numpy as np

from sahaboltz.constants import AMU, H, K_B, K_B_EV, M_E

#: ionization energy of H I [eV]: NIST ASD ionization energies (Kramida et al.), 13.598434599702
CHI_H_EV = 13.598434599702
#: standard atomic weight of H [amu], conventional value: NIST atomic weights table
A_H = 1.008


def hydrogen_saha(T, P):
    """Closed-form ionization of pure hydrogen: returns dict of named arrays."""
    T = np.asarray(T, float)
    P = np.asarray(P, float)
    kt = K_B * T
    s = (2 * np.pi * M_E * kt / H**2) ** 1.5 * np.exp(-CHI_H_EV / (K_B_EV * T))
    a = s * kt / P
    x = np.sqrt(a / (1 + a))
    neutral = (1 / (1 + a)) / (1 + x)  # 1 - x without cancellation
    n_h = P / ((1 + x) * kt)
    n_e = x * n_h
    rho = n_h * A_H * AMU
    return {"electron_density": n_e, "electron_pressure": n_e * kt, "mass_density": rho,
            "mean_molecular_weight": rho / (n_h * (1 + x) * AMU), "mean_charge": x / (1 + x),
            "fraction_H_I": neutral, "fraction_H_II": x}


def hydrogen_compute(spec, T, P):
    """Compute function for build_table: pure-hydrogen Saha (gas-pressure axis only)."""
    assert spec.pressure.name == "gas_pressure"
    _mark()
    return hydrogen_saha(T, P)


def slow_hydrogen_compute(spec, T, P):
    """Like hydrogen_compute but sleeps per block, so a test can kill a build midway."""
    time.sleep(float(os.environ.get("SBT_TEST_SLEEP", "0.3")))
    return hydrogen_compute(spec, T, P)


def _mark():
    """Append one line per call to $SBT_TEST_MARKER (pid), so tests can count computations."""
    path = os.environ.get("SBT_TEST_MARKER")
    if path:
        with open(path, "a") as fh:
            fh.write(f"{os.getpid()}\n")
