"""Saha factors and the single-element Saha chain."""

import astropy.constants as ac
import astropy.units as u
import numpy as np
import pytest

from sahaboltz.errors import InputError
from sahaboltz.kernels.partition import partition_function
from sahaboltz.kernels.saha import (H_MINUS_AFFINITY_EV, chain_fractions, chain_log_populations,
                                    log_saha_factor, saha_chain, saha_constant)


def test_saha_constant_textbook_value():
    # (2 pi m_e k T / h^2)^{3/2} = 2.4147e15 T^{3/2} cm^-3 (common textbook value, from memory)
    assert saha_constant(1e4) == pytest.approx(2.4147e15 * 1e6, rel=2e-4)
    # and independently from astropy's CODATA constants
    t = 7321.0 * u.K
    ref = ((2 * np.pi * ac.m_e * ac.k_B * t / ac.h**2) ** 1.5).to(u.cm**-3).value
    assert saha_constant(t) == pytest.approx(ref, rel=1e-12)


def test_log_saha_factor_against_astropy():
    t = 6000.0
    chi = 7.9024681  # Fe I ionization energy [eV] (NIST ASD)
    ref = (2 * 25.0 / 30.0 * (2 * np.pi * ac.m_e * ac.k_B * t * u.K / ac.h**2) ** 1.5
           * np.exp(-(chi * u.eV / (ac.k_B * t * u.K)).decompose().value)).to(u.cm**-3).value
    assert np.exp(log_saha_factor(t, chi, 30.0, 25.0)) == pytest.approx(ref, rel=1e-12)
    # a lowering dchi multiplies Phi by exp(dchi / kT)
    boost = np.exp(log_saha_factor(t, chi, 30.0, 25.0, lowering_ev=0.1)) / ref
    assert boost == pytest.approx(np.exp((0.1 * u.eV / (ac.k_B * t * u.K)).decompose().value),
                                  rel=1e-12)


def test_hydrogen_half_ionized_at_200_dyn():
    # Carroll & Ostlie (2007), An Introduction to Modern Astrophysics, 2nd ed., sec. 8.1:
    # pure hydrogen at P_e = 200 dyn cm^-2 (20 N m^-2) is half ionized near 9,600 K
    # (U(H I) = 2; the ideal value is about 9,556 K)
    temps = np.linspace(9000.0, 10200.0, 601)
    f = saha_chain("H", temps, electron_pressure=200.0)
    t_half = np.interp(0.5, f[1], temps)
    assert abs(t_half - 9600.0) < 100.0
    assert abs(t_half - 9556.0) < 5.0
    np.testing.assert_allclose(f.sum(axis=0), 1.0, rtol=1e-14)


def test_chain_matches_two_stage_saha_ratio():
    t, ne = 8000.0, 1e13
    f = saha_chain("Ca", t, electron_density=ne, truncation="plain")
    u0, u1 = (partition_function(s, t) for s in ("Ca I", "Ca II"))   # plain sums
    ratio = np.exp(log_saha_factor(t, 6.1131552, u0, u1)) / ne  # chi(Ca I), NIST ASD
    assert f[1] / f[0] == pytest.approx(ratio, rel=1e-6)
    assert f.shape == (21,)


def test_chain_does_not_overflow_for_uranium_cold_and_hot():
    f = saha_chain("U", [1000.0, 1e6], electron_density=[1e10, 1e10])
    assert np.all(np.isfinite(f)) and f.shape == (93, 2)
    assert f[0, 0] > 0.99          # cold: neutral (U I ionization energy 6.19 eV)
    assert f[:5, 1].sum() < 1e-10  # hot: the low stages are empty
    np.testing.assert_allclose(f.sum(axis=0), 1.0, rtol=1e-14)


def test_ionization_rises_with_t_and_falls_with_density():
    t = np.geomspace(3000, 30000, 50)
    f = saha_chain("Na", t, electron_pressure=10.0)
    assert np.all(np.diff(f[0]) < 0)
    g = saha_chain("Na", 6000.0, electron_density=np.geomspace(1e8, 1e18, 30))
    assert np.all(np.diff(g[0]) > 0)


def test_chain_helpers():
    lp = np.array([[np.log(1e12)], [np.log(1e10)]])
    rel = chain_log_populations(lp, np.log(1e11))
    np.testing.assert_allclose(np.exp(rel[:, 0]), [1.0, 10.0, 1.0])
    np.testing.assert_allclose(chain_fractions(rel)[:, 0], [1 / 12, 10 / 12, 1 / 12])


def test_h_minus_affinity_value():
    # Lykke, Murray & Lineberger (1991), Phys. Rev. A 43, 6104: 0.754195(19) eV
    assert H_MINUS_AFFINITY_EV == 0.754195


def test_bad_input():
    with pytest.raises(InputError):
        saha_chain("H", 5000.0)                       # no density
    with pytest.raises(InputError):
        saha_chain("H", 5000.0, electron_density=1e12, electron_pressure=1.0)
    with pytest.raises(InputError, match="temperature"):
        saha_chain("H", -5.0, electron_density=1e12)
    with pytest.raises(InputError, match="electron_pressure"):
        saha_chain("H", 5000.0, electron_pressure=float("nan"))
    with pytest.raises(InputError):
        log_saha_factor(5000.0, 13.6, 0.0, 1.0)
