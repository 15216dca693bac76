"""Property-based checks of the mixture solver over random states and compositions.

The properties are those of the exact equations: every element conserved, charge neutrality,
and (Saha) ionization that rises with T at fixed P_e and falls with P_e at fixed T.
"""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sahaboltz.data.composition import Composition
from sahaboltz.equilibrium import solve_equilibrium

# a pool of electron donors and absorbers with very different ionization energies
POOL = ("H", "He", "C", "N", "O", "Na", "Mg", "Al", "Si", "K", "Ca", "Fe", "Ar")

SOLVER = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def compositions(draw):
    els = draw(st.lists(st.sampled_from(POOL), min_size=1, max_size=5, unique=True))
    amounts = {e: 10.0 ** draw(st.floats(-8, 0)) for e in els}
    return Composition.from_number(amounts)


log_t = st.floats(np.log10(1.5e3), 5.5)
log_p = st.floats(-3.0, 9.0)


@SOLVER
@given(comp=compositions(), lt=st.lists(log_t, min_size=1, max_size=6),
       lp=st.lists(log_p, min_size=1, max_size=6),
       closure=st.sampled_from(["gas_pressure", "mass_density", "hydrogen_density"]))
def test_conservation_and_neutrality(comp, lt, lp, closure):
    if closure == "hydrogen_density" and "H" not in comp:
        closure = "gas_pressure"
    n = min(len(lt), len(lp))
    t = 10.0 ** np.array(lt[:n])
    p = 10.0 ** np.array(lp[:n])
    value = {"gas_pressure": p, "mass_density": p * 1e-12, "hydrogen_density": p * 1e6}[closure]
    s = solve_equilibrium(comp, t, **{closure: value})
    assert np.all(np.isfinite(s.n_e)) and np.all(s.n_e > 0)
    assert s.conservation_residual().max() <= 1e-12
    assert s.charge_residual().max() <= 1e-10
    if closure == "gas_pressure":
        np.testing.assert_allclose(s.gas_pressure, p, rtol=1e-12)


@SOLVER
@given(comp=compositions(), lpe=st.floats(-2.0, 4.0), lt0=st.floats(3.3, 4.7))
def test_ionization_rises_with_temperature_at_fixed_pe(comp, lpe, lt0):
    t = 10.0 ** (lt0 + np.array([0.0, 0.05]))
    s = solve_equilibrium(comp, t, electron_pressure=10.0 ** lpe, h_minus=False)
    for el in comp.symbols:
        neutral = s.stage_fractions(el)[0]
        assert neutral[1] <= neutral[0] * (1 + 1e-9), el


@SOLVER
@given(comp=compositions(), lt=st.floats(3.3, 4.7), lpe0=st.floats(-2.0, 4.0))
def test_ionization_falls_with_electron_pressure_at_fixed_t(comp, lt, lpe0):
    pe = 10.0 ** (lpe0 + np.array([0.0, 0.3]))
    s = solve_equilibrium(comp, 10.0 ** lt, electron_pressure=pe, h_minus=False)
    for el in comp.symbols:
        neutral = s.stage_fractions(el)[0]
        assert neutral[1] >= neutral[0] * (1 - 1e-9), el


@SOLVER
@given(lt=st.floats(3.2, 5.0), lp=st.floats(-2.0, 8.0))
def test_mean_charge_rises_with_temperature_at_fixed_gas_pressure(lt, lp):
    comp = Composition.from_number({"H": 0.9, "He": 0.1})
    s = solve_equilibrium(comp, 10.0 ** (lt + np.array([0.0, 0.02])), gas_pressure=10.0 ** lp)
    assert s.mean_charge[1] >= s.mean_charge[0] * (1 - 1e-9)
