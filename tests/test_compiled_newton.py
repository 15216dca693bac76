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


def test_third_order_step_against_an_analytic_balance():
    # one chain with charges 0..3 and a fixed nref (n_e + N = nref): the cumulants give the
    # derivatives of g(x) = ln((nref - e^x) Zbar) - x, which central differences of g
    # (numpy, outside the kernel) must match, and from x near the root Chebyshev's step
    # leaves an error of the order it predicts, far below Newton's
    step = compiled_newton._third_order_step.py_func
    c = np.array([0.0, 35.0, 71.0, 105.0])     # Zbar = 1.25 at the root: all stages matter
    q = np.arange(4.0)
    nref = np.exp(36.0)

    def moments(x):
        p = np.exp(c - q * x - (c - q * x).max())
        w = p / p.sum()
        m = w @ q
        k = [w @ (q - m) ** j for j in (2, 3, 4)]
        return m, k[0], k[1], k[2] - 3 * k[0] ** 2

    def g(x):
        return np.log((nref - np.exp(x)) * moments(x)[0]) - x

    root = __import__("scipy.optimize", fromlist=["brentq"]).brentq(g, 30.0, 35.99, xtol=1e-15)
    h = 1e-3
    for x in (root - 2e-3, root + 1e-3, root + 3e-2):
        zbar, var, k3, k4 = moments(x)
        u = np.exp(x) / (nref - np.exp(x))
        gx = g(x)
        dg = -var / zbar - 1.0 - u
        np.testing.assert_allclose(dg, (g(x + h) - g(x - h)) / (2 * h), rtol=1e-5)
        dx, err, corr, g2 = step(gx, dg, zbar, var, k3, k4, u)
        np.testing.assert_allclose(g2, (g(x + h) - 2 * gx + g(x - h)) / h**2, rtol=1e-4)
        actual = abs(x + dx - root)
        newton = abs(x - gx / dg - root)
        assert actual <= err < 30 * actual, (actual, err)
        assert actual < 1e-2 * newton


def test_rows_of_a_fine_grid_mostly_finish_in_one_pass(monkeypatch):
    # along a row of a grid as fine as the benchmark's (0.07 dex in P) the start from the
    # last states is close enough that the third-order step is the last one for most states;
    # those states meet the charge balance (checked from their populations) to the tolerance
    # and equal the numpy engine's answer
    tt, pp = _grid(3, 100, 4e3, 6e4, 1e-2, 1e5)
    fast, slow = _both(monkeypatch, solar(), tt, "plain", gas_pressure=pp)
    one = fast.report.passes == 1
    assert one.mean() > 0.7
    assert fast.charge_residual()[one].max() <= 1.5e-12
    np.testing.assert_allclose(fast.n_e, slow.n_e, rtol=1e-11)


def test_neighbour_ratio_tables():
    # e^(C_(r+1) - C_r) per chain; a chain's last slot holds 1 / (alpha Z) where its C is
    # finite at that temperature, NaN where not (the kernel then takes exponentials)
    ctab = np.array([[1.0, 3.0, -2.0, 5.0, 4.0],
                     [0.0, -np.inf, 1.0, 2.0, 2.5]])
    r = compiled_newton._neighbour_ratios(ctab, [3, 2], np.log([0.5, 2e-3]))
    np.testing.assert_allclose(r[0, :2], np.exp([2.0, -5.0]))
    np.testing.assert_allclose(r[:, 3], np.exp([-1.0, 0.5]))
    assert r[0, 2] == 2.0 and np.isnan(r[1, 2]) and np.allclose(r[:, 4], 500.0)
