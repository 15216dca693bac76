"""The closure registry: every registered closure works from Python, the CLI and table specs,
and a solved state reproduces the value it was given."""

from __future__ import annotations

import json

import numpy as np
import pytest

from sahaboltz import InputError
from sahaboltz.data.composition import Composition, solar
from sahaboltz.equilibrium import CLOSURES, solve_equilibrium
from sahaboltz.faces.cli import main
from sahaboltz.tables.spec import PRESSURE_QUANTITIES, TableSpec

# one physical state per closure kind, solved first with a gas pressure (see below)
T = np.array([4000.0, 9000.0, 20000.0])
P = np.array([1e4, 1e5, 1e6])


@pytest.fixture(scope="module")
def reference():
    return solve_equilibrium(solar(), T, gas_pressure=P)


@pytest.mark.parametrize("name", sorted(CLOSURES))
def test_each_closure_reproduces_its_value_and_the_state(name, reference):
    value = getattr(reference, name)
    st = solve_equilibrium(solar(), T, **{name: value})
    # the state fixed by any closure is the same physical state (tolerance: the solver's 1e-12
    # neutrality, amplified where n_e is a small difference of large numbers)
    np.testing.assert_allclose(getattr(st, name), value, rtol=1e-10)
    np.testing.assert_allclose(st.n_e, reference.n_e, rtol=1e-8)
    np.testing.assert_allclose(st.gas_pressure, P, rtol=1e-8)


def test_registry_reaches_specs_and_command_line(capsys):
    assert set(PRESSURE_QUANTITIES) == set(CLOSURES)
    for name, c in CLOSURES.items():
        spec = TableSpec.from_mapping({"pressure": {"quantity": name, "values": [1.0, 2.0]}})
        assert spec.pressure.unit == c.unit
    code = main(["state", "-T", "9000", "--nuclei-density", "1e15", "--mix", "Ar:1",
                 "--format", "json"])
    assert code == 0
    meta = json.loads(capsys.readouterr().out)["meta"]
    assert meta["nuclei_density_cm-3"] == pytest.approx(1e15, rel=1e-12)


def test_closure_errors_name_the_choices():
    with pytest.raises(InputError, match="exactly one of gas_pressure"):
        solve_equilibrium(solar(), 5000.0)
    with pytest.raises(InputError, match="unknown keyword"):
        solve_equilibrium(solar(), 5000.0, gas_presure=1e5)
    with pytest.raises(InputError, match="no hydrogen"):
        solve_equilibrium(Composition.from_number({"Ar": 1.0}), 9000.0, hydrogen_density=1e15)
