"""Results put together from pieces (sahaboltz.equilibrium.state_pieces).

The inverse closures return the states of their Newton passes spliced into one result; a
spliced result must be what a forward solve at the same temperatures gives: every
population, partition function and thermodynamic quantity (to the solver's tolerance), the
status and reasons, the shape.
"""

import warnings

import numpy as np
import pytest

from sahaboltz.data.composition import solar
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.equilibrium.state_pieces import reshape, splice

CASES = {
    "atoms": ({}, np.array([4000.0, 6000.0, 9000.0, 15000.0, 30000.0, 1e5]), 1e-7),
    "lowering": ({"lowering": True}, np.array([8000.0, 12000.0, 2e4, 4e4, 1e5, 3e5]), 1e-5),
    "molecules": ({"molecules": "default"}, np.array([1500.0, 2000.0, 2600.0, 3300.0, 4200.0,
                                                      5000.0]), 1e-8),
    "condensates": ({"molecules": "default", "condensates": True},
                    np.array([1150.0, 1200.0, 1300.0, 1500.0, 1700.0, 2100.0]), 1e-9),
}


def solve(t, rho, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return solve_equilibrium(solar(), t, mass_density=np.full(t.shape, rho), **kw)


def _same(a, b, rtol):
    assert a.shape == b.shape
    fin = np.isfinite(b)
    assert np.array_equal(np.isfinite(a), fin)
    np.testing.assert_allclose(a[fin], b[fin], rtol=rtol, atol=0)


@pytest.mark.parametrize("case", sorted(CASES))
def test_a_spliced_result_is_the_solve_at_its_temperatures(case):
    kw, t, rho = CASES[case]
    other = t * 1.07                               # the part: other temperatures
    base = solve(t, rho, **kw)
    base.thermodynamics()
    idx = np.array([1, 4, 5])
    part = solve(other[idx[::-1]], rho, **kw)      # in another order: part_idx maps them
    part.thermodynamics()
    splice(base, idx, part, np.array([2, 1, 0]))
    t_new = t.copy()
    t_new[idx] = other[idx]
    ref = solve(t_new, rho, **kw)
    assert np.array_equal(base.temperature, t_new)
    _same(base.n_e, ref.n_e, 1e-9)
    _same(base.number_densities(), ref.number_densities(), 1e-8)
    for sp in ("H I", "Fe II", "Ca I"):
        _same(base.partition_function(sp), ref.partition_function(sp), 1e-9)
    th, th_ref = base.thermodynamics(), ref.thermodynamics()
    for name in ("internal_energy", "entropy", "gamma1", "adiabatic_gradient", "heat_capacity_p"):
        _same(th.get(name), th_ref.get(name), 1e-8)
    if "molecules" in kw:
        _same(base.molecule_densities(), ref.molecule_densities(), 1e-7)
    assert np.array_equal(base.status, ref.status)


def test_a_part_without_thermodynamics_drops_the_kept_ones():
    kw, t, rho = CASES["atoms"]
    base = solve(t, rho, **kw)
    base.thermodynamics()
    part = solve(t[:2] * 1.1, rho, **kw)
    splice(base, np.array([0, 1]), part)
    assert "_thermo_cache" not in base.__dict__ or not base.__dict__["_thermo_cache"]
    ref = solve(np.concatenate([t[:2] * 1.1, t[2:]]), rho, **kw)
    _same(base.thermodynamics().internal_energy, ref.thermodynamics().internal_energy, 1e-8)


def test_reshape_gives_every_quantity_the_shape():
    kw, t, rho = CASES["molecules"]
    st = solve(t, rho, **kw)
    th_flat = st.thermodynamics().gamma1.copy()
    reshape(st, (2, 3))
    assert st.shape == (2, 3)
    assert st.n_e.shape == (2, 3) and st.status.shape == (2, 3)
    assert st.molecule_densities().shape[-2:] == (2, 3)
    np.testing.assert_array_equal(st.thermodynamics().gamma1, th_flat.reshape(2, 3))
    ref = solve(t.reshape(2, 3), rho, **kw)
    _same(st.molecule_density("H2"), ref.molecule_density("H2"), 1e-8)


def test_splice_refuses_what_does_not_fit():
    kw, t, rho = CASES["atoms"]
    base = solve(t, rho, **kw)
    with pytest.raises(ValueError, match="one state of the part per index"):
        splice(base, np.array([0, 1]), solve(t[:3], rho, **kw))
    with pytest.raises(ValueError, match="flat results only"):
        splice(base, np.array([0]), solve(t[:2].reshape(1, 2), rho, **kw), np.array([0]))
    with pytest.raises(ValueError, match="do not fill"):
        reshape(base, (4, 2))
