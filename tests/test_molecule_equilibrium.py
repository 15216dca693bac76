"""Atoms, ions, H- and molecules solved together (sahaboltz.equilibrium.molecular)."""

import astropy.units as u
import numpy as np
import pytest

from sahaboltz.constants import R_GAS
from sahaboltz.data.composition import Composition, solar
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.equilibrium.molecular import DEFAULT_MOLECULES, MolecularEquilibriumState
from sahaboltz.errors import InputError, UnknownSpeciesError
from sahaboltz.kernels.molecular import EquilibriumConstants

BAR = (1 * u.bar).to_value(u.dyn / u.cm**2)
# a solar mixture cut to the elements that matter for molecules and electrons in cool gas
# (keeps the tests fast; the full mixture is used once below)
COOL = ["H", "He", "C", "N", "O", "Na", "Mg", "Al", "Si", "S", "K", "Ca", "Ti", "Fe"]


@pytest.fixture(scope="module")
def cool_mix():
    return solar().subset(COOL)


def test_h2_dissociation_at_3000K_1bar_matches_janaf():
    # NIST-JANAF (Chase 1998): Delta_f G(H, 3000 K) = 46.01 kJ/mol, so for H2 = 2 H
    # K = p(H)^2 / (p(H2) p0) = exp(-2 * 46.01 kJ/mol / RT) = 0.025 at p0 = 1 bar.
    k = np.exp(-2 * 46.01e3 / (R_GAS * 3000.0))
    # pure hydrogen at a total of 1 bar (ions are ~1e-9 of it at 3000 K): p_H^2 + K p_H - K = 0
    p_h = 0.5 * (-k + np.sqrt(k * k + 4 * k))
    atomic_share = p_h / (p_h + 2 * (1 - p_h))          # H nuclei in atoms: 0.0788
    st = solve_equilibrium(Composition.from_number({"H": 1}), 3000.0, gas_pressure=BAR,
                           molecules=["H2"])
    got = 1.0 - float(st.molecular_fraction("H"))
    assert got == pytest.approx(atomic_share, rel=0.10)
    assert float(st.gas_pressure) == pytest.approx(BAR, rel=1e-12)


def test_conservation_neutrality_and_pressure_over_the_range():
    """Full solar mixture, default molecules, 1000-10,000 K and 1e-2-1e8 dyn cm^-2, at the
    tolerances of the atoms-only solver (tests/test_equilibrium.py)."""
    t = np.geomspace(1000.0, 1e4, 6)[:, None]
    p = np.geomspace(1e-2, 1e8, 6)[None, :]
    st = solve_equilibrium(solar(), t, gas_pressure=p, molecules="default")
    assert isinstance(st, MolecularEquilibriumState)
    assert st.shape == (6, 6)
    assert st.charge_residual().max() <= 1e-10
    assert st.conservation_residual().max() <= 1e-12
    np.testing.assert_allclose(st.gas_pressure, np.broadcast_to(p, st.shape), rtol=1e-12)
    assert st.molecule_densities().shape == (len(st.molecule_names), 6, 6)


def test_closures_agree(cool_mix):
    t = np.array([1500.0, 3000.0, 5000.0])
    p = np.array([1e2, 1e5, 1e7])
    ref = solve_equilibrium(cool_mix, t, gas_pressure=p, molecules="default")
    for kw in ({"mass_density": ref.mass_density},
               {"hydrogen_density": ref.element_density("H")},
               {"electron_pressure": ref.electron_pressure}):
        st = solve_equilibrium(cool_mix, t, molecules="default", **kw)
        np.testing.assert_allclose(st.n_e, ref.n_e, rtol=1e-9)
        np.testing.assert_allclose(st.molecule_density("CO"), ref.molecule_density("CO"),
                                   rtol=1e-9)
        np.testing.assert_allclose(st.gas_pressure, p, rtol=1e-9)


def test_mass_action_and_budgets(cool_mix):
    t = np.array([[2000.0], [4000.0]])
    p = np.array([[1e3, 1e6]])
    mols = [m for m in DEFAULT_MOLECULES] + ["CO+"]
    st = solve_equilibrium(cool_mix, t, gas_pressure=p, molecules=mols)
    # n(A) n(B) / n(AB) = K_n(T) for the processes of Barklem & Collet (2016)
    kn = EquilibriumConstants(["CO", "H2", "CO+"]).kn(np.broadcast_to(t, st.shape))
    np.testing.assert_allclose(st.number_density("C I") * st.number_density("O I")
                               / st.molecule_density("CO"), kn[0], rtol=1e-9)
    np.testing.assert_allclose(st.number_density("H I") ** 2 / st.molecule_density("H2"),
                               kn[1], rtol=1e-9)
    np.testing.assert_allclose(st.number_density("C II") * st.number_density("O I")
                               / st.molecule_density("CO+"), kn[2], rtol=1e-9)
    # molecules by exact name through number_density too; "Co" stays cobalt (not in the mix)
    np.testing.assert_array_equal(st.number_density("CO"), st.molecule_density("CO"))
    with pytest.raises(UnknownSpeciesError):
        st.number_density("Co")
    for el in ("H", "C", "O", "Fe"):
        budget = st.element_budget(el)
        np.testing.assert_allclose(sum(budget.values()), 1.0, rtol=1e-11)
        np.testing.assert_allclose(st.stage_fractions(el, negative=True).sum(axis=0)
                                   + st.molecular_fraction(el), 1.0, rtol=1e-11)


def test_continuity_with_the_atoms_only_solver(cool_mix):
    # at 8000 K and above, where molecules hold < 1e-5 of hydrogen at these pressures, the
    # electron density agrees with the atoms-only solver to 1e-6 (issue 5); at higher
    # pressures molecules are physically present at 8000 K (see docs/molecules.md)
    t = np.array([8000.0, 9000.0, 10000.0])[:, None]
    p = np.array([1e-2, 1.0, 1e2, 1e4])[None, :]
    mol = solve_equilibrium(cool_mix, t, gas_pressure=p, molecules="default")
    atoms = solve_equilibrium(cool_mix, t, gas_pressure=p)
    np.testing.assert_allclose(mol.n_e, atoms.n_e, rtol=1e-6)
    # above the table (10,000 K) molecules are absent: the same state as without them
    hot = solve_equilibrium(cool_mix, 12000.0, gas_pressure=1e6, molecules="default")
    ref = solve_equilibrium(cool_mix, 12000.0, gas_pressure=1e6)
    assert float(hot.n_e) == pytest.approx(float(ref.n_e), rel=1e-10)
    assert np.all(hot.molecule_densities() == 0)


def test_cool_dense_gas_hydrogen_molecular_and_co_locks_carbon(cool_mix):
    st = solve_equilibrium(cool_mix, 2500.0, gas_pressure=1e6, molecules="default")
    # hydrogen mostly molecular in cool dense gas (A&A 363, 1065 (2000), section 1)
    assert float(st.molecular_fraction("H")) > 0.5
    # O > C (solar): CO takes most of the carbon (common practice: CO locking in cool stars)
    assert float(st.element_budget("C")["CO"]) > 0.9
    # and not all of the oxygen: the rest is in OH, other oxides and atoms
    assert float(st.element_budget("O")["CO"]) < 0.8


def test_molecule_sets(cool_mix):
    none = solve_equilibrium(cool_mix, 3000.0, gas_pressure=1e5, molecules="none")
    atoms = solve_equilibrium(cool_mix, 3000.0, gas_pressure=1e5)
    assert float(none.n_e) == pytest.approx(float(atoms.n_e), rel=1e-12)
    diatomics = solve_equilibrium(cool_mix, 3000.0, gas_pressure=1e5, molecules="diatomics")
    assert len(diatomics.molecule_names) > 60
    # Barklem & Collet processes with C-, O-, Si-, S- are left out of 'diatomics' and say why
    assert any(s.startswith("OH-:") for s in diatomics.skipped_molecules)
    everything = solve_equilibrium(cool_mix, 3000.0, gas_pressure=1e5, molecules="all")
    # in the full set the NASA OH- (formed from O, H and an electron) takes its place
    assert "OH-" in everything.molecule_names and "H2O" in everything.molecule_names
    assert not any(s.startswith("OH-:") for s in everything.skipped_molecules)
    assert everything.charge_residual() <= 1e-10
    assert everything.conservation_residual() <= 1e-12
    two = solve_equilibrium(cool_mix, 3000.0, gas_pressure=1e5, molecules=["H2", "CO"])
    assert two.molecule_names == ["H2", "CO"]
    with pytest.raises(UnknownSpeciesError):
        two.molecule_density("CN")


def test_bad_input(cool_mix):
    kw = {"gas_pressure": 1e5}
    with pytest.raises(InputError, match="Li"):          # Li is not in the mixture
        solve_equilibrium(cool_mix, 3000.0, molecules=["LiH"], **kw)
    with pytest.raises(InputError, match="O-"):          # OH- = O- + H: no O- in the network
        solve_equilibrium(cool_mix, 3000.0, molecules=["OH-"], **kw)
    with pytest.raises(UnknownSpeciesError):
        solve_equilibrium(cool_mix, 3000.0, molecules=["CQ"], **kw)
    with pytest.raises(InputError, match="molecules must be"):
        solve_equilibrium(cool_mix, 3000.0, molecules="most", **kw)
    with pytest.raises(InputError, match="below"):
        solve_equilibrium(cool_mix, [3000.0, 300.0], molecules="default", **kw)
    with pytest.raises(InputError, match="without Debye-Hueckel lowering"):
        solve_equilibrium(cool_mix, 3000.0, molecules="default", lowering=True, **kw)


@pytest.mark.parametrize("amounts,molecules", [
    ({"N": 78, "O": 21, "Ar": 1}, "all"),    # dry air by number (common practice): no easy donors
    ({"C": 1, "O": 2}, "default"),           # CO + O2 gas: molecules remove most C+ and O+ donors
])
def test_electron_poor_gases_converge(amounts, molecules):
    t = np.geomspace(1000.0, 1e4, 6)[:, None]
    p = np.geomspace(1e-2, 1e8, 6)[None, :]
    st = solve_equilibrium(Composition.from_number(amounts), t, gas_pressure=p,
                           molecules=molecules)
    assert st.charge_residual().max() <= 1e-10
    assert st.conservation_residual().max() <= 1e-12
    np.testing.assert_allclose(st.gas_pressure, np.broadcast_to(p, st.shape), rtol=1e-12)


def test_carbon_rich_gas_co_locks_oxygen(cool_mix):
    # C/O = 2: now oxygen is the minority and CO takes nearly all of it, the spare carbon goes
    # to C2, CN, CH and atoms (common practice: CO locking in carbon stars)
    fr = cool_mix.as_dict()
    fr["C"] = 2 * fr["O"]
    st = solve_equilibrium(Composition.from_number(fr), 2500.0, gas_pressure=1e6,
                           molecules="default")
    assert float(st.element_budget("O")["CO"]) > 0.99
    assert float(st.element_budget("C")["CO"]) == pytest.approx(0.5, abs=0.02)


def test_all_molecules_solar_over_the_range():
    """Every usable diatomic of the data (283 for the solar mixture) over the issue's range
    (the full set with the NASA species: tests/test_molecule_chemistry.py)."""
    t = np.geomspace(1000.0, 1e4, 12)[:, None]
    p = np.geomspace(1e-2, 1e8, 12)[None, :]
    st = solve_equilibrium(solar(), t, gas_pressure=p, molecules="diatomics")
    assert len(st.molecule_names) > 250
    assert st.charge_residual().max() <= 1e-10
    assert st.conservation_residual().max() <= 1e-12
    np.testing.assert_allclose(st.gas_pressure, np.broadcast_to(p, st.shape), rtol=1e-12)


def test_unconverged_states_are_reported(cool_mix):
    from sahaboltz.errors import ConvergenceError
    t = np.array([[1500.0, 2500.0], [3500.0, 4500.0]])
    with pytest.raises(ConvergenceError, match=r"did not converge at \d+ of 4 states") as info:
        solve_equilibrium(cool_mix, t, gas_pressure=1e6, molecules="default", max_passes=1)
    assert info.value.indices and all(len(i) == 2 for i in info.value.indices)
    assert "T = 1500 K" in str(info.value)
