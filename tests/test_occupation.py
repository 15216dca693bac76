"""Occupation probabilities and Debye-Hueckel lowering against published scalings and values."""

from __future__ import annotations

import numpy as np
import pytest

from sahaboltz.errors import InputError
from sahaboltz.kernels.plasma import debye_hueckel_lowering, debye_length
from sahaboltz.kernels.occupation import (BOHR_RADIUS_CM, RYDBERG_EV, effective_n,
                                          log_w_charged, occupation_probability,
                                          stark_level_factor, stark_state_factors, w_charged,
                                          w_neutral)

N_FINE = np.linspace(1.0, 300.0, 299001)


def _n_half(ne, t=1e4):
    """Principal quantum number where w = 0.5 (w falls monotonically with n)."""
    w = w_charged(N_FINE, t, ne)
    return float(np.interp(0.5, w[::-1], N_FINE[::-1]))


def test_w_tends_to_one_at_low_density():
    # the occupation-probability formalism reduces to the free atom (Hummer & Mihalas 1988)
    n = np.arange(1, 201)
    np.testing.assert_allclose(w_charged(n, 1e4, 1e-2), 1.0, atol=1e-9)
    np.testing.assert_allclose(w_neutral(n, 1e-2), 1.0, atol=1e-9)
    np.testing.assert_allclose(occupation_probability(n, 1e4, 1e-2, neutral_density=1e-2),
                               1.0, atol=1e-9)


def test_w_falls_with_n_and_density():
    n = np.arange(1, 60)
    w = w_charged(n, 1e4, 1e15)
    assert np.all(np.diff(w) <= 0)
    assert w[0] > 0.999999 and w[-1] < 1e-3
    assert np.all(np.diff(w_charged(20, 1e4, [1e12, 1e14, 1e16])) < 0)


def test_inglis_teller_scaling():
    # n(w = 0.5) ~ n_e^(-2/15): from 1e13 to 1e17 cm^-3 it falls by 10^(8/15) = 3.4 (issue 3
    # check; Inglis & Teller 1939 scaling), within 25 %
    ratio = _n_half(1e13) / _n_half(1e17)
    assert abs(ratio / 10 ** (8 / 15) - 1) < 0.25, ratio


@pytest.mark.parametrize("log_ne", [13.0, 14.0, 15.0, 16.0, 17.0])
def test_half_point_near_inglis_teller_limit(log_ne):
    # log10 n_e = 23.26 - 7.5 log10 n_max (cgs; common textbook form, from memory)
    n_it = 10 ** ((23.26 - log_ne) / 7.5)
    assert abs(_n_half(10**log_ne) - n_it) <= 2.0


def test_neutral_perturbers_hard_sphere():
    # w = exp(-(4 pi/3) n (r_n + r_1)^3), r_1 = 1.5 a0 for hydrogen 1s (<r> = 3/2 a0, textbook)
    n_h = 1e17
    r = 2 * 1.5 * BOHR_RADIUS_CM
    np.testing.assert_allclose(w_neutral(1, n_h), np.exp(-4 * np.pi / 3 * n_h * r**3), rtol=1e-12)
    np.testing.assert_allclose(BOHR_RADIUS_CM, 0.529177e-8, rtol=1e-6)  # a0, CODATA (from memory)


def test_effective_n_of_hydrogen_levels():
    # Rydberg energy 13.6057 eV (CODATA, from memory); hydrogen n = 3 lies 1.5117 eV below the limit
    assert abs(RYDBERG_EV - 13.605693) < 1e-5
    np.testing.assert_allclose(effective_n(RYDBERG_EV * (1 - 1 / 9), RYDBERG_EV, 0), 3.0,
                               rtol=1e-12)
    with pytest.raises(InputError, match="energy_ev"):
        effective_n(14.0, 13.6, 0)


def test_debye_length_nrl_formulary():
    # lambda_De = 7.43e2 T_eV^(1/2) n_e^(-1/2) cm, electrons only (NRL Plasma Formulary, from
    # memory); with ions of equal density the screening density doubles
    t_k, ne = 11604.518, 1e14   # 1 eV
    lam_e = debye_length(t_k, ne, sum_z2_n=0.0)
    np.testing.assert_allclose(lam_e, 7.43e2 * ne**-0.5, rtol=2e-3)
    np.testing.assert_allclose(debye_length(t_k, ne), lam_e / np.sqrt(2), rtol=1e-12)


def test_debye_hueckel_lowering_value():
    # e^2 = 1.44e-7 eV cm (common value, from memory): dchi = (z + 1) e^2 / lambda
    np.testing.assert_allclose(debye_hueckel_lowering(0, 1e-5), 1.44e-2, rtol=2e-3)
    np.testing.assert_allclose(debye_hueckel_lowering([0, 1, 2], 1e-5), [1.44e-2, 2.88e-2, 4.32e-2],
                               rtol=2e-3)


@pytest.mark.parametrize("bad", [0.0, -1.0, np.nan, np.inf])
def test_bad_input_names_the_argument(bad):
    with pytest.raises(InputError, match="electron_density"):
        w_charged(3, 1e4, bad)
    with pytest.raises(InputError, match="temperature"):
        w_charged(3, bad, 1e14)
    with pytest.raises(InputError, match="electron_density"):
        debye_length(1e4, bad)
    with pytest.raises(InputError, match="temperature"):
        debye_length(bad, 1e14)
    with pytest.raises(InputError, match="debye_length_cm"):
        debye_hueckel_lowering(0, bad)


def test_factored_form_used_by_partition_sums_is_the_same_fit():
    # the partition sums use ln w = -ln(1 + s (A s + B)), s = beta^(-3/2) (algebraic rewrite)
    n = np.linspace(1.0, 80.0, 400)[None, :]
    t = np.array([3000.0, 1e4, 3e4])[:, None]
    ne = np.array([1e11, 1e15, 1e18])[:, None]
    for z in (1.0, 2.0, 6.0):
        direct = log_w_charged(n, z, t, ne)
        p, a, b = stark_state_factors(t, ne)
        s = p * stark_level_factor(n, z)
        np.testing.assert_allclose(-np.log1p(s * (a * s + b)), direct, rtol=1e-10, atol=1e-300)
