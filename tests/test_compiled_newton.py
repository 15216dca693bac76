"""The compiled per-state solver against the numpy engine (the same equations, solved twice).

The numpy engine of sahaboltz.equilibrium.atomic is the reference here: both solve the same
charge balance to the same tolerance (1e-12 relative), so their electron densities may differ
only by the convergence tolerance.  Each closure kind (particles, nuclei, electrons) and both
kinds of partition function (T only, and occupation-weighted, which the compiled path sums
with its series) are covered, including states that must fail (an unreachable P_e).
"""

import numpy as np
import pytest

from sahaboltz.data.composition import Composition, solar
from sahaboltz.equilibrium import AtomicNetwork, compiled_newton, solve_equilibrium
from sahaboltz.equilibrium.state import CONVERGED

pytestmark = pytest.mark.skipif(not compiled_newton.available(),
                                reason="numba is not installed (or SAHABOLTZ_NO_NUMBA is set)")


def _both(monkeypatch, comp, t, truncation, errors="raise", **closure):
    net = AtomicNetwork(comp, truncation=truncation)
    fast = solve_equilibrium(comp, t, network=net, truncation=truncation, errors=errors,
                             **closure)
    with monkeypatch.context() as m:
        m.setattr(compiled_newton, "available", lambda: False)
        slow = solve_equilibrium(comp, t, network=net, truncation=truncation, errors=errors,
                                 **closure)
    return fast, slow


def _grid(n_t, n_p, t0, t1, p0, p1):
    return np.meshgrid(np.geomspace(t0, t1, n_t), np.geomspace(p0, p1, n_p), indexing="ij")


@pytest.mark.parametrize("truncation", ["plain", "occupation"])
def test_gas_pressure_grid_matches_numpy_engine(monkeypatch, truncation):
    tt, pp = _grid(9, 8, 1.5e3, 9e5, 1e-3, 1e9)
    fast, slow = _both(monkeypatch, solar(), tt, truncation, gas_pressure=pp)
    np.testing.assert_allclose(fast.n_e, slow.n_e, rtol=1e-11)
    # the compiled path meets the same charge balance
    assert fast.charge_residual().max() < 1e-11


@pytest.mark.parametrize("truncation", ["plain", "occupation"])
def test_mass_density_and_electron_pressure_closures(monkeypatch, truncation):
    t = np.array([3.2e3, 6.1e3, 1.3e4, 4.4e4, 2.5e5])
    rho = np.array([1e-9, 3e-7, 1e-5, 1e-3, 2e-2])
    fast, slow = _both(monkeypatch, solar(), t, truncation, mass_density=rho)
    np.testing.assert_allclose(fast.n_e, slow.n_e, rtol=1e-11)
    pe = np.array([1e-2, 10.0, 1e3, 1e5, 1e7])
    fast, slow = _both(monkeypatch, solar(), t, truncation, electron_pressure=pe)
    np.testing.assert_allclose(fast.nuclei_density, slow.nuclei_density, rtol=1e-11)


def test_unreachable_electron_pressure_fails_alike(monkeypatch):
    # in a cool hydrogen-helium gas H- caps the electron pressure (see the physical-defaults
    # tests): far above it both engines must refuse the same state; at 6,000 K and a low P_e
    # hydrogen is the donor and the state is reachable
    comp = Composition.from_number({"H": 0.92, "He": 0.08})
    t = np.array([6.0e3, 3.0e3])
    pe = np.array([1e-3, 1e12])
    fast, slow = _both(monkeypatch, comp, t, "plain", errors="mask", electron_pressure=pe)
    np.testing.assert_array_equal(fast.status, slow.status)
    assert fast.status[0] == CONVERGED and fast.status[1] != CONVERGED
    np.testing.assert_allclose(fast.nuclei_density[0], slow.nuclei_density[0], rtol=1e-11)


def test_pressure_ionized_hydrogen(monkeypatch):
    # solar-core-like density: the occupation weights dissolve the bound levels, so pure
    # hydrogen is nearly fully ionized in both engines (the series for the weights of
    # dissolved levels, s >> 1, are exercised here)
    comp = Composition.from_number({"H": 1.0})
    t = np.array([1.57e7, 2e5, 3e4])
    rho = np.array([150.0, 1.0, 1e-2])
    fast, slow = _both(monkeypatch, comp, t, "occupation", mass_density=rho)
    np.testing.assert_allclose(fast.n_e, slow.n_e, rtol=1e-11)
    assert fast.fraction("H II")[0] > 0.99


def test_compiled_significance_intervals_equal_the_numpy_ones(monkeypatch):
    # the loops do the numpy code's operations in its order: the same doubles, every chain
    from sahaboltz.equilibrium import atomic
    net = AtomicNetwork(solar(), truncation="plain")
    t = np.geomspace(1e3, 1e6, 50)
    tabs = [net.log_c(c, t) for c in net.chains]
    fast = [atomic._significance_intervals(c.charges, tb) for c, tb in zip(net.chains, tabs)]
    monkeypatch.setattr(compiled_newton, "available", lambda: False)
    slow = [atomic._significance_intervals(c.charges, tb) for c, tb in zip(net.chains, tabs)]
    for c, (a, b) in zip(net.chains, zip(fast, slow)):
        assert np.array_equal(a[0], b[0]) and np.array_equal(a[1], b[1]), c.symbol
    # the windows are not trivial: somewhere a stage is out of reach
    assert any((a[0] > -atomic._X_CLIP).any() for a in fast)


@pytest.mark.parametrize("truncation", ["plain", "occupation"])
def test_a_start_hint_changes_the_passes_not_the_answer(monkeypatch, truncation):
    # the inverse closures hand the solver ln n_e near each solution (atomic.solve_atomic's
    # start_log_ne): from there the Newton needs fewer passes, and the answer is the numpy
    # engine's (which ignores the hint) to the tolerance; NaN means no hint
    from sahaboltz.equilibrium.atomic import solve_atomic
    from sahaboltz.equilibrium.closures import CLOSURES
    comp = solar()
    net = AtomicNetwork(comp, truncation=truncation)
    rng = np.random.default_rng(5)
    t = np.exp(rng.uniform(np.log(2e3), np.log(1e6), 60))      # a temperature per state
    rho = np.exp(rng.uniform(np.log(1e-12), np.log(1e-2), 60))
    closure = CLOSURES["mass_density"]
    cold = solve_atomic(net, t, rho, closure)
    hint = cold.log_ne * (1 + 1e-6 * rng.standard_normal(t.size))
    hint[::7] = np.nan
    warm = solve_atomic(net, t, rho, closure, start_log_ne=hint)
    with monkeypatch.context() as m:
        m.setattr(compiled_newton, "available", lambda: False)
        slow = solve_atomic(net, t, rho, closure, start_log_ne=hint)
    np.testing.assert_allclose(warm.n_e, slow.n_e, rtol=1e-11)
    np.testing.assert_allclose(warm.n_e, cold.n_e, rtol=1e-11)
    given = np.isfinite(hint)
    assert warm.report.passes[given].mean() < 0.6 * cold.report.passes[given].mean()
