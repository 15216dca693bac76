"""Gas-condensate equilibrium (condensates=True): where the refractory elements go."""

import numpy as np
import pytest

from sahaboltz.data.composition import Composition, solar
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.errors import InputError
from sahaboltz.faces.cli import main

P_LODDERS = 100.0        # 1e-4 bar in dyn cm^-2


@pytest.fixture(scope="module")
def sequence():
    t = np.arange(1250.0, 1751.0, 25.0)
    return t, solve_equilibrium(solar(), t, gas_pressure=P_LODDERS, molecules="default",
                                condensates=True)


# Lodders 2003, ApJ 591, 1220, Table 8, 50 % condensation temperatures at 1e-4 bar (values
# from memory): corundum (Al) 1653 K, metallic iron 1334 K, forsterite (Mg) 1336 K.  Tolerance
# 40 K: our abundances (Asplund et al. 2009) and our set of condensates (no melilite, perovskite
# or hibonite, which take Al and Ca in Lodders' sequence) differ.
LODDERS_50 = {"Al": 1653.0, "Fe": 1334.0, "Mg": 1336.0}


@pytest.mark.parametrize("element", sorted(LODDERS_50))
def test_half_condensation_temperatures_match_lodders_2003(sequence, element):
    t, st = sequence
    f = st.condensed_fraction(element)
    assert np.all(np.diff(f) <= 1e-9)                  # condenses monotonically as T falls
    t50 = float(np.interp(-0.5, -f, t))
    assert t50 == pytest.approx(LODDERS_50[element], abs=40.0)


def test_phases_appear_in_the_condensation_sequence(sequence):
    # common practice: corundum first, then (Ca, Ti oxides and) spinel, iron and forsterite
    t, st = sequence
    at = {float(tt): st.stable_phases(i) for i, tt in enumerate(t)}
    assert at[1700.0] == [] and at[1600.0] == ["Al2O3(a)"]
    assert "Fe(c)" in at[1300.0] and "Mg2SiO4(s)" in at[1300.0]


def test_no_jump_in_the_gas_where_corundum_appears():
    t = np.linspace(1656.0, 1668.0, 13)              # corundum appears near 1660 K
    st = solve_equilibrium(solar(), t, gas_pressure=P_LODDERS, molecules="default",
                           condensates=True)
    f = st.condensed_fraction("Al")
    assert f[0] > 0 and f[-1] == 0
    for q in (np.log(st.n_e), np.log(st.number_density("Al I")), np.log(st.molecule_density("AlOH"))):
        assert np.abs(np.diff(q)).max() < 0.1          # 1 K steps: smooth, no step


def test_condensed_elements_leave_the_gas_and_its_electron_balance():
    kw = {"gas_pressure": P_LODDERS, "molecules": "default"}
    gas = solve_equilibrium(solar(), 1400.0, **kw)
    dust = solve_equilibrium(solar(), 1400.0, condensates=True, **kw)
    assert float(dust.condensed_fraction("Al")) > 0.99
    assert float(dust.number_density("Al I")) < 0.01 * float(gas.number_density("Al I"))
    # without alkalis (Na, K: the donors at 1400 K, which do not condense here) the electrons
    # come from Ca, Mg, Fe, Al; at 1 bar, where Mg, Fe and Ca condense, n_e drops 80-fold
    dry = solar().subset(["H", "He", "C", "N", "O", "Mg", "Al", "Si", "S", "Ca", "Ti", "Fe"])
    ne_gas = float(solve_equilibrium(dry, 1400.0, gas_pressure=1e6, molecules="default").n_e)
    ne_dust = float(solve_equilibrium(dry, 1400.0, gas_pressure=1e6, molecules="default",
                                      condensates=True).n_e)
    assert ne_dust < 0.1 * ne_gas
    # each element's budget: atoms + molecules + condensed = 1
    for el in ("Al", "Ti", "O", "H"):
        total = sum(float(v) for v in dust.element_budget(el).values())
        assert total == pytest.approx(1.0, abs=1e-12)
    # the gas pressure counts gas particles only
    assert float(dust.gas_pressure) == pytest.approx(P_LODDERS, rel=1e-12)


def test_carbon_rich_gas_condenses_graphite_not_silicates():
    # common practice: with C/O > 1 oxygen is in CO, so no silicates; carbon condenses
    comp = solar()
    le = dict(zip(comp.symbols, comp.log_eps))
    le["C"] = le["O"] + np.log10(1.2)
    st = solve_equilibrium(Composition.from_log_eps(le), 1400.0, gas_pressure=1e4,
                           molecules="default", condensates=True)
    phases = st.stable_phases()
    assert "C(gr)" in phases and "Mg2SiO4(s)" not in phases


@pytest.mark.parametrize("mixture", ["solar", "C/O=1.2", "[M/H]=-2"])
def test_conservation_and_neutrality_with_condensates(mixture):
    comp = {"solar": solar(), "[M/H]=-2": solar(metallicity=-2.0)}.get(mixture)
    if comp is None:
        base = solar()
        le = dict(zip(base.symbols, base.log_eps))
        le["C"] = le["O"] + np.log10(1.2)
        comp = Composition.from_log_eps(le)
    t = np.array([1000.0, 1600.0])[:, None]          # (hotter: nothing condenses)
    p = np.geomspace(1e-2, 1e8, 3)[None, :]
    st = solve_equilibrium(comp, t, gas_pressure=p, molecules="default", condensates=True)
    assert st.converged.all()
    assert st.conservation_residual().max() <= 1e-12
    assert st.charge_residual().max() <= 1e-12


def test_condensates_need_molecules_and_known_formulas():
    with pytest.raises(InputError, match="molecules"):
        solve_equilibrium(solar(), 1500.0, gas_pressure=1e6, condensates=True)
    with pytest.raises(InputError, match="no condensed phase"):
        solve_equilibrium(solar(), 1500.0, gas_pressure=1e6, molecules="default",
                          condensates=["Xy2O3"])


def test_cli_condensates_report_phases(capsys):
    import json
    code = main(["state", "-T", "1500", "--gas-pressure", "100", "--molecules", "default",
                 "--condensates", "--format", "json"])
    doc = json.loads(capsys.readouterr().out)
    assert code == 0
    text = json.dumps(doc)
    assert "Al2O3(a)" in text and "condensed_fraction_Al" in text
