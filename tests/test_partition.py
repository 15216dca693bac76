"""Partition functions: limits, monotonic behaviour, truncations, shapes and bad input."""

from __future__ import annotations

import astropy.units as u
import numpy as np
import pytest

from sahaboltz.data.species import LevelTable, Species
from sahaboltz.errors import InputError, NoDataError, UnknownSpeciesError
from sahaboltz.kernels.plasma import debye_hueckel_lowering, debye_length
from sahaboltz.kernels.partition import PartitionModel, log_derivative, partition_function


def _usable(db):
    return [sp for sp in db.all_species() if sp.is_bare_nucleus or sp.bound.any()]


@pytest.fixture(scope="module")
def all_model(db):
    return PartitionModel(_usable(db))


def _species(energies_ev, g, chi, name="Xx", z=1, charge=0):
    """A hand-made species (levels in eV) for checks that need no database."""
    e = np.asarray(energies_ev, float)
    blank = np.array([""] * len(e), dtype=object)
    lv = LevelTable(e / (1.0 / 8065.543937), np.asarray(g, float), blank.copy(), blank.copy(),
                    blank.copy(), blank.copy())
    return Species(name, z, charge, chi, float("nan"), lv)


# -- limits ---------------------------------------------------------------------------------
def test_hydrogen_tends_to_two_at_low_temperature(db):
    # ground level 1s 2S1/2 alone: g = 2 (textbook value)
    t = np.array([300.0, 1000.0, 3000.0])
    np.testing.assert_allclose(partition_function("H I", t), 2.0, rtol=1e-12)


def test_bare_nucleus_is_one(db):
    # a bare nucleus has no bound electron: U = 1 (DESIGN.md point 2 / CONTRACTS.md)
    np.testing.assert_array_equal(partition_function("H II", [1e3, 1e5]), 1.0)
    np.testing.assert_array_equal(partition_function("Fe XXVII", 3e4), 1.0)


# -- monotonic behaviour --------------------------------------------------------------------
def test_u_rises_with_temperature_for_every_species(all_model):
    # U = sum g exp(-E/kT) with E >= 0 cannot fall as T rises (issue 3 check)
    t = np.geomspace(1000.0, 50000.0, 120)
    uu = all_model.evaluate(t)
    step = np.diff(uu, axis=1)
    bad = np.flatnonzero((step < -1e-13 * uu[:, 1:]).any(axis=1))
    assert not len(bad), f"U falls with T for {[all_model.names[i] for i in bad[:10]]}"


def test_relaxing_the_lowering_never_lowers_u(all_model):
    t = np.array([5000.0, 20000.0, 50000.0])
    plain = all_model.evaluate(t)
    prev = None
    for low in (2.0, 0.5, 0.1, 0.01, 0.0):  # decreasing lowering = relaxed truncation
        m = PartitionModel(all_model.species, "lowered")
        uu = m.evaluate(t, lowering_ev=low)
        assert np.all(uu <= plain * (1 + 1e-12))
        if prev is not None:
            assert np.all(uu >= prev * (1 - 1e-12)), f"lowering {low} eV"
        prev = uu
    np.testing.assert_allclose(prev, plain, rtol=1e-12)  # zero lowering = plain sum


def test_lower_density_never_lowers_u_with_occupation(db):
    sps = [db.species(n) for n in ("H I", "He I", "He II", "C I", "Fe I", "Fe II", "Ca II")]
    m = PartitionModel(sps, "occupation")
    mc = PartitionModel(sps, "occupation", completion=True)
    t = np.array([6000.0, 12000.0, 30000.0])
    prev = None
    for ne in (1e18, 1e16, 1e14, 1e12, 1e10):
        uu = m.evaluate(t, n_e=ne)
        uc = mc.evaluate(t, n_e=ne)
        assert np.all(uc >= uu), "completion adds levels, so never lowers U"
        if prev is not None:
            assert np.all(uu >= prev * (1 - 1e-12)), f"n_e = {ne:g}"
        prev = uu


def test_completion_with_lowering_adds_levels_and_is_bounded(db):
    h = db.species("H I")
    m = PartitionModel([h], "lowered")
    mc = PartitionModel([h], "lowered", completion=True)
    t = np.array([10000.0])
    for ne in (1e16, 1e13, 1e10):
        u0, uc = m.evaluate(t, n_e=ne)[0, 0], mc.evaluate(t, n_e=ne)[0, 0]
        assert uc >= u0
        # completion levels of H start above n = 40 (highest tabulated level)
        dchi = debye_hueckel_lowering(0, debye_length(1e4, ne))
        n_max = np.sqrt(13.6 / dchi)
        if n_max < 41:
            assert uc == u0


def test_every_truncation_tends_to_the_plain_sum_at_low_density(db):
    sps = [db.species(n) for n in ("H I", "He I", "O I", "Fe I", "Fe II", "Si II")]
    t = np.array([4000.0, 8000.0, 15000.0])
    plain = PartitionModel(sps).evaluate(t)
    low = PartitionModel(sps, "lowered").evaluate(t, n_e=1.0)
    occ = PartitionModel(sps, "occupation").evaluate(t, n_e=1.0)
    np.testing.assert_allclose(low, plain, rtol=1e-10)
    np.testing.assert_allclose(occ, plain, rtol=1e-6)


def test_completion_refused_with_plain_sum(db):
    with pytest.raises(InputError, match="completion"):
        PartitionModel([db.species("H I")], "plain", completion=True)


def test_completion_weights_follow_parent_ground_level(db):
    # He I Rydberg levels 1s nl: singlets and triplets, 4 n^2 states = 2 n^2 g(He II 1s) with
    # g = 2 (counting of states, textbook)
    he = db.species("He I")
    m = PartitionModel([he], "lowered", completion=True)
    comp = m._ncomp > 0
    n = m._ncomp[comp]
    np.testing.assert_allclose(np.exp(m._lng[comp]), 4 * n**2)


# -- d ln U / d ln T ------------------------------------------------------------------------
@pytest.mark.parametrize("name", ["H I", "Fe I", "Fe II", "Ti I", "Ce II", "O III"])
def test_log_derivative_is_the_derivative_of_ln_u(db, name):
    # d ln U / d ln T against a central difference of ln U (mathematical identity)
    t = np.array([2000.0, 6000.0, 15000.0, 40000.0])
    h = 1e-5
    num = (np.log(partition_function(name, t * (1 + h)))
           - np.log(partition_function(name, t * (1 - h)))) / (np.log1p(h) - np.log1p(-h))
    np.testing.assert_allclose(log_derivative(name, t), num, rtol=1e-6, atol=1e-9)  # roundoff of the difference


# -- shapes ---------------------------------------------------------------------------------
def test_shapes_broadcast_and_repeated_temperatures(db):
    sps = [db.species("Fe I"), db.species("Fe II"), db.species("Fe XXVII")]
    m = PartitionModel(sps, "occupation")
    t = np.array([[4000.0], [8000.0], [4000.0]])          # repeated rows
    ne = np.array([1e12, 1e14, 1e16, 1e12])
    uu = m.evaluate(t, n_e=ne)
    assert uu.shape == (3, 3, 4)
    np.testing.assert_array_equal(uu[:, 0], uu[:, 2])
    one = m.evaluate(8000.0, n_e=1e14)
    assert one.shape == (3,)
    np.testing.assert_allclose(one, uu[:, 1, 1], rtol=1e-14)


def test_quantities_are_accepted(db):
    a = partition_function("Fe I", 5000.0)
    b = partition_function("Fe I", 5 * u.kK)
    np.testing.assert_allclose(a, b, rtol=1e-14)
    c = partition_function("Fe I", 5000.0, truncation="occupation", n_e=1e14)
    d = partition_function("Fe I", 5000.0 * u.K, truncation="occupation", n_e=1e20 * u.m**-3)
    np.testing.assert_allclose(c, d, rtol=1e-14)


def test_per_species_lowering(db):
    sps = [db.species("Na I"), db.species("Na II")]
    m = PartitionModel(sps, "lowered")
    t = np.array([6000.0, 9000.0])
    both = m.evaluate(t, lowering_ev=np.array([0.5, 0.0]))
    assert both.shape == (2, 2)
    np.testing.assert_allclose(both[1], PartitionModel(sps[1:]).evaluate(t)[0])
    np.testing.assert_allclose(both[0], m.evaluate(t, lowering_ev=0.5)[0])


def test_hand_made_species_without_database():
    # two-level atom: U = g0 + g1 exp(-E1/kT) (definition)
    sp = _species([0.0, 1.0], [2, 6], chi=5.0)
    t = 5000.0
    kt = 8.617333262e-5 * t  # k_B [eV/K], CODATA 2018 (from memory)
    np.testing.assert_allclose(partition_function(sp, t), 2 + 6 * np.exp(-1.0 / kt), rtol=1e-9)


# -- bad input ------------------------------------------------------------------------------
@pytest.mark.parametrize("bad", [0.0, -100.0, np.nan, np.inf, [5000.0, np.nan]])
def test_bad_temperature_is_refused(db, bad):
    with pytest.raises(InputError, match="temperature"):
        partition_function("Fe I", bad)


@pytest.mark.parametrize("bad", [0.0, -1e12, np.nan, np.inf])
def test_bad_density_is_refused(db, bad):
    with pytest.raises(InputError, match="n_e"):
        partition_function("Fe I", 5000.0, truncation="occupation", n_e=bad)
    with pytest.raises(InputError, match="n_e"):
        partition_function("Fe I", 5000.0, truncation="lowered", n_e=bad)


def test_missing_density_is_refused(db):
    with pytest.raises(InputError, match="n_e"):
        partition_function("Fe I", 5000.0, truncation="occupation")
    with pytest.raises(InputError, match="lowering_ev"):
        partition_function("Fe I", 5000.0, truncation="lowered")


def test_bad_lowering_is_refused(db):
    with pytest.raises(InputError, match="lowering_ev"):
        partition_function("Fe I", 5000.0, truncation="lowered", lowering_ev=-0.1)
    with pytest.raises(InputError, match="lowering_ev"):
        partition_function("Fe I", 5000.0, truncation="lowered", lowering_ev=100.0)


def test_unknown_species_and_options(db):
    with pytest.raises(UnknownSpeciesError):
        partition_function("Xq I", 5000.0)
    with pytest.raises(UnknownSpeciesError):
        partition_function("Fe XXVIII", 5000.0)
    with pytest.raises(InputError, match="truncation"):
        partition_function("Fe I", 5000.0, truncation="debye")


def test_species_without_levels_is_refused(db):
    nolev = next(sp for sp in db.all_species() if not sp.is_bare_nucleus and not sp.bound.any())
    with pytest.raises(NoDataError, match=nolev.name):
        PartitionModel([nolev])


def test_no_silent_nan_at_extremes(all_model):
    # very low and very high T, and occupation at very high density, stay finite
    uu = all_model.evaluate([1.0, 1e7])
    assert np.isfinite(uu).all()
