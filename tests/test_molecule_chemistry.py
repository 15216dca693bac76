"""Cool-gas chemistry with the full molecule set (Barklem & Collet diatomics and the NASA
polyatomic species): where C, N and O go, and the solve's robustness over the issue's range."""

import numpy as np
import pytest

from sahaboltz.data.composition import Composition, solar
from sahaboltz.equilibrium import solve_equilibrium

BAR = 1.0e6                                   # dyn cm^-2


def carbon_rich(c_over_o: float = 1.2) -> Composition:
    comp = solar()
    le = dict(zip(comp.symbols, comp.log_eps))
    le["C"] = le["O"] + np.log10(c_over_o)
    return Composition.from_log_eps(le, name=f"C/O={c_over_o}")


MIXTURES = {"solar": solar, "C/O=1.2": carbon_rich, "[M/H]=-2": lambda: solar(metallicity=-2.0)}


@pytest.fixture(scope="module")
def solar_1bar():
    t = np.array([1500.0, 2000.0, 2500.0, 3000.0])
    return t, solve_equilibrium(solar(), t, gas_pressure=BAR, molecules="default")


def test_co_holds_nearly_all_carbon_in_oxygen_rich_gas(solar_1bar):
    # common practice: in O-rich gas at 1 bar above ~1500 K carbon is almost all in CO
    _, st = solar_1bar
    assert np.all(st.element_budget("C")["CO"] > 0.98)


def test_water_holds_most_oxygen_not_in_co_below_2500k(solar_1bar):
    # common practice: below ~2500 K at 1 bar the oxygen left over by CO is mostly H2O
    t, st = solar_1bar
    bo = st.element_budget("O")
    rest = 1.0 - bo["CO"]
    share = bo["H2O"] / rest
    assert np.all(share[t <= 2500.0] > 0.5)
    # and the diatomic-only answer puts that oxygen in OH instead (what the issue reported)
    di = solve_equilibrium(solar(), 2000.0, gas_pressure=BAR, molecules="diatomics")
    assert float(di.element_budget("O")["OH"]) > 0.1 > float(bo["OH"][1])


def test_carbon_rich_gas_loses_water_and_gains_hcn_and_acetylene():
    # common practice: with C/O > 1 the oxygen is in CO, water falls by orders of magnitude and
    # the surplus carbon goes into HCN and C2H2
    t = np.array([2000.0, 2500.0])
    o_rich = solve_equilibrium(solar(), t, gas_pressure=BAR, molecules="default")
    c_rich = solve_equilibrium(carbon_rich(), t, gas_pressure=BAR, molecules="default")

    def x(st, name):
        return st.molecule_density(name) / st.nuclei_density

    assert np.all(x(c_rich, "H2O") < 0.01 * x(o_rich, "H2O"))
    assert np.all(x(c_rich, "HCN") > 100 * x(o_rich, "HCN"))
    assert np.all(x(c_rich, "C2H2") > 100 * x(o_rich, "C2H2"))
    assert np.all(c_rich.element_budget("O")["CO"] > 0.95)


def test_co_ch4_equal_abundance_temperature_at_1bar():
    # Lodders & Fegley 2002, Icarus 155, 393: for solar composition at 1 bar CO and CH4 are
    # equally abundant near 1100-1300 K (the range as recalled, from memory)
    t = np.arange(1000.0, 1401.0, 50.0)
    st = solve_equilibrium(solar(), t, gas_pressure=BAR, molecules="default")
    ln_ratio = np.log(st.molecule_density("CO") / st.molecule_density("CH4"))
    assert np.all(np.diff(ln_ratio) > 0)               # CO takes over with rising T
    t_eq = float(np.interp(0.0, ln_ratio, t))
    assert 1100.0 <= t_eq <= 1300.0


@pytest.mark.parametrize("mixture", sorted(MIXTURES))
def test_conservation_and_neutrality_over_the_range(mixture):
    """1000-6000 K x 1e-2-1e8 dyn cm^-2 (5 x 5 states; the 20 x 20 grid is the slow test)."""
    t = np.linspace(1000.0, 6000.0, 5)[:, None]
    p = np.geomspace(1e-2, 1e8, 5)[None, :]
    st = solve_equilibrium(MIXTURES[mixture](), t, gas_pressure=p, molecules="default")
    assert st.converged.all()
    assert st.conservation_residual().max() <= 1e-12
    assert st.charge_residual().max() <= 1e-12
    np.testing.assert_allclose(st.gas_pressure, np.broadcast_to(p, st.shape), rtol=1e-12)
    # the NASA species whose data end at 5000 K are left out above it, and the state says so
    assert "SiO2" in st.left_out((4, 0)) and not st.left_out((0, 0))
    assert "molecules_left_out" in st.summary((4, 0))


@pytest.mark.slow
@pytest.mark.parametrize("mixture", sorted(MIXTURES))
def test_converges_on_a_finer_grid(mixture):
    # 10 x 10 states (the 100 x 100 solar grid converges too: benchmarks/bench_polyatomic.py)
    t = np.linspace(1000.0, 6000.0, 10)[:, None]
    p = np.geomspace(1e-2, 1e8, 10)[None, :]
    st = solve_equilibrium(MIXTURES[mixture](), t, gas_pressure=p, molecules="default")
    assert st.converged.all()
    assert st.conservation_residual().max() <= 1e-12
    assert st.charge_residual().max() <= 1e-12
