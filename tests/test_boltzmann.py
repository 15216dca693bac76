"""Boltzmann level populations, level selection and excitation temperatures."""

from __future__ import annotations

import numpy as np
import pytest

from sahaboltz.constants import HC_EV_CM
from sahaboltz.data.species import LevelTable, Species
from sahaboltz.errors import InputError
from sahaboltz.kernels.boltzmann import (excitation_temperature, level_fraction,
                                         level_populations, level_ratio, select_levels)
from sahaboltz.kernels.partition import partition_function

# n = 2..5 populations relative to n = 1 at 10,000 K, sum over n <= 5, chi = 13.598 eV
# (New Mexico State University ASTR 545 homework solution, as quoted in issue 3)
NMSU_RATIOS = {2: 2.899e-5, 3: 7.288e-6, 4: 6.016e-6, 5: 6.591e-6}


def _hydrogen_n5() -> Species:
    """H I with the levels n = 1..5 only, E_n = chi (1 - 1/n^2), g = 2 n^2."""
    chi = 13.598
    n = np.arange(1, 6, dtype=float)
    e_ev = chi * (1 - 1 / n**2)
    lab = np.array([str(int(k)) for k in n], dtype=object)
    lv = LevelTable(e_ev / HC_EV_CM, 2 * n**2, np.array(["h"] * 5, dtype=object), lab,
                    np.array([""] * 5, dtype=object), np.array([""] * 5, dtype=object))
    return Species("H", 1, 0, chi, float("nan"), lv)


@pytest.mark.parametrize("n", sorted(NMSU_RATIOS))
def test_hydrogen_populations_relative_to_ground(n):
    h = _hydrogen_n5()
    r = level_ratio(h, 1e4, n - 1, 0)
    assert abs(r / NMSU_RATIOS[n] - 1) < 1e-3, (n, r)


@pytest.mark.parametrize("n", sorted(NMSU_RATIOS))
def test_database_hydrogen_populations(db, n):
    # the database's H I (NIST energies, reduced-mass Rydberg levels) gives the same ratios
    # within 0.1 %: the level energies differ by < 4e-4 eV from chi (1 - 1/n^2)
    r = level_ratio("H I", 1e4, {"configuration": str(n)}, {"configuration": "1"})
    assert abs(r / NMSU_RATIOS[n] - 1) < 1e-3, (n, r)


def test_fractions_sum_to_one_and_match_u(db):
    t = np.array([4000.0, 9000.0])
    pops = level_populations("Fe II", t)
    assert pops.shape == (len(db.species("Fe II").levels), 2)
    np.testing.assert_allclose(pops.sum(axis=0), 1.0, rtol=1e-12)
    # ground level: g0 / U (definition)
    g0 = db.species("Fe II").levels.g[0]
    np.testing.assert_allclose(pops[0], g0 / partition_function("Fe II", t), rtol=1e-12)


def test_non_bound_levels_have_zero_population(db):
    ca = db.species("Ca I")
    pops = level_populations(ca, 8000.0)
    assert np.all(pops[~ca.bound] == 0) and np.all(pops[ca.bound] > 0)


def test_selection_by_configuration_term_and_energy(db):
    fe = db.species("Fe I")
    a5d = select_levels(fe, configuration="3d6.4s2", term="a 5D")
    assert len(a5d) == 5  # a 5D, J = 4..0 (NIST ASD)
    assert list(fe.levels.j[a5d]) == ["4", "3", "2", "1", "0"]
    win = select_levels(fe, energy_range_ev=(0.0, 0.1))
    assert np.all(fe.levels.energy_ev[win] <= 0.1)
    f_term = level_fraction("Fe I", 5000.0, configuration="3d6.4s2", term="*5D")
    f_idx = level_fraction("Fe I", 5000.0, list(a5d))
    np.testing.assert_allclose(f_term, f_idx, rtol=1e-14)


def test_population_with_density_dependent_truncation(db):
    plain = level_fraction("H I", 1e4, {"configuration": "2"})
    occ = level_fraction("H I", 1e4, {"configuration": "2"}, truncation="occupation", n_e=1e15)
    low = level_fraction("H I", 1e4, 1, truncation="lowered", n_e=1e15)
    assert occ.shape == () and low.shape == ()
    # truncation removes high levels, so n = 2 holds at least the plain-sum fraction
    assert occ >= plain * (1 - 1e-9) and low >= plain * (1 - 1e-9)


def test_excitation_temperature_inverts_the_hydrogen_ratio():
    # the NMSU n=2/n=1 ratio belongs to 10,000 K (same source as above), 0.1 %
    h = _hydrogen_n5()
    t = excitation_temperature(h, NMSU_RATIOS[2], 1, 0)
    assert abs(t / 1e4 - 1) < 1e-3


def test_excitation_temperature_of_level_sets(db):
    # round trip for sets (terms) of Fe I: the ratio at T gives T back (inverse check)
    up = {"configuration": "3d7.(4F).4s", "term": "a 5F"}
    lo = {"configuration": "3d6.4s2", "term": "a 5D"}
    t = np.array([3000.0, 6000.0, 12000.0])
    r = level_ratio("Fe I", t, up, lo)
    np.testing.assert_allclose(excitation_temperature("Fe I", r, up, lo), t, rtol=1e-9)


def test_bad_selection_and_ratio(db):
    with pytest.raises(InputError, match="levels"):
        level_fraction("Fe I", 5000.0, configuration="no such configuration")
    with pytest.raises(InputError, match="index"):
        level_fraction("Fe I", 5000.0, 10**6)
    with pytest.raises(InputError, match="upper"):
        level_ratio("Fe I", 5000.0, {"term": "9Z"}, 0)
    with pytest.raises(InputError, match="not bound"):
        select_levels("Ca I", index=int(np.flatnonzero(~db.species("Ca I").bound)[0]))
    with pytest.raises(InputError, match="ratio"):
        excitation_temperature("Fe I", -1.0, 1, 0)
    with pytest.raises(InputError, match="ratio"):
        excitation_temperature("Fe I", np.nan, 1, 0)
    with pytest.raises(InputError, match="ratio"):
        excitation_temperature("Fe I", 100.0, 1, 0)  # beyond the g_u/g_l limit
    with pytest.raises(InputError, match="temperature"):
        level_populations("Fe I", -5.0)
