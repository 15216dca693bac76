"""The compiled occupation-weighted level sums against the numpy path they replace.

Both evaluate the same published fit (Hubeny, Hummer & Lanz 1994, see
sahaboltz/kernels/occupation.py); the numpy path is the reference here, and the level sums
of a whole model (PartitionModel.evaluate, numpy only) are the second, independent one.
"""

from __future__ import annotations

import numpy as np
import pytest

from sahaboltz.data.database import default_database
from sahaboltz.kernels import compiled
from sahaboltz.kernels.partition import PartitionModel

pytestmark = pytest.mark.skipif(not compiled.available(), reason="numba is not installed")

NAMES = ("H I", "He I", "C II", "O I", "Na I", "Ca I", "Fe I", "Fe II")


@pytest.fixture(scope="module")
def model():
    db = default_database()
    return PartitionModel([db.species(n) for n in NAMES], "occupation")


def _pairs(seed=3, n=3000):
    rng = np.random.default_rng(seed)
    t_u = np.geomspace(2500.0, 2e5, 40)
    ti = rng.integers(0, t_u.size, n)
    return t_u[ti], 10.0 ** rng.uniform(6, 24, n), rng.integers(0, len(NAMES), n), ti


@pytest.mark.parametrize("neutral", [False, True])
def test_compiled_pair_sums_equal_the_numpy_path(model, monkeypatch, neutral):
    t, ne, rows, ti = _pairs()
    nn = 1e-3 * ne if neutral else None
    fast = model.evaluate_pairs(t, ne, rows, nn, temperature_index=ti)
    fast_sorted = model.evaluate_pairs(t, ne, rows, nn)   # its own temperature index
    monkeypatch.setattr(compiled, "available", lambda: False)
    slow = model.evaluate_pairs(t, ne, rows, nn)
    for a, b, c in zip(fast, fast_sorted, slow):
        np.testing.assert_allclose(a, c, rtol=1e-12, atol=1e-14)
        np.testing.assert_array_equal(a, b)


def test_compiled_pair_sums_equal_whole_model_sums(model):
    t, ne, rows, ti = _pairs(seed=5, n=400)
    u, dlt, dln = model.evaluate_pairs(t, ne, rows, temperature_index=ti)
    full_u, full_t, full_n = model.evaluate_derivatives(t, ne)
    pick = (rows, np.arange(t.size))
    np.testing.assert_allclose(u, full_u[pick], rtol=1e-12)
    np.testing.assert_allclose(dlt, full_t[pick], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(dln, full_n[pick], rtol=1e-10, atol=1e-12)


def test_solver_gives_the_same_state_on_both_paths(monkeypatch):
    from sahaboltz.data.composition import solar
    from sahaboltz.equilibrium import solve_equilibrium

    t = np.array([4000.0, 9000.0, 2e4, 1e5])
    p = np.array([1e6, 1e5, 1e3, 1e8])
    fast = solve_equilibrium(solar(), t, gas_pressure=p)
    monkeypatch.setattr(compiled, "available", lambda: False)
    slow = solve_equilibrium(solar(), t, gas_pressure=p)
    np.testing.assert_allclose(fast.n_e, slow.n_e, rtol=1e-10)


def test_borrowing_kernels_count_no_references():
    # a kernel compiled by borrowing_jit gives njit's result without the runtime's reference
    # counting of its array arguments (njit's code increments and decrements each one per
    # call, which cost a fifth of the default solve before the inner kernels borrowed)
    numba = pytest.importorskip("numba")

    def body(a, b, n):       # a loop bound read from an array: numba keeps the counts here
        s = 0.0
        j = n % 3
        while j < 4:
            s += a[j] * b[j]
            if s > 1e300:
                s = np.sqrt(s)
            j += 1
        for k in range(int(a[0])):
            s += np.log(b[k] + 1.0) * a[k]
        return s

    a, b = np.arange(3.0, 8.0), np.linspace(0.0, 1.0, 7)
    borrowing = compiled.borrowing_jit()(body)
    counting = numba.njit(body)
    assert borrowing(a, b, 50) == counting(a, b, 50)
    assert "NRT_incref" in counting.inspect_llvm(counting.signatures[0])
    assert "NRT_incref" not in borrowing.inspect_llvm(borrowing.signatures[0])


def test_vector_exp_matches_the_math_library():
    # reference: the C library's exp through math.exp (correctly rounded to about 1 ulp)
    import math

    x = np.concatenate([np.linspace(-708.0, 709.0, 200_001), [-1e-300, 0.0, 1e-300]])
    got = np.array([compiled.vector_exp(v) for v in x[::97]]) if not compiled.available() \
        else _vector_exp_array(x)
    ref = np.array([math.exp(v) for v in (x if compiled.available() else x[::97])])
    ulp = np.abs(got - ref) / np.spacing(ref)
    assert ulp.max() <= 2.0
    assert compiled.vector_exp(-800.0) == 0.0


def _vector_exp_array(x):
    numba = pytest.importorskip("numba")

    @numba.njit
    def run(v):
        out = np.empty_like(v)
        for i in range(v.size):
            out[i] = compiled.vector_exp(v[i])
        return out

    return run(x)


def test_shared_temperatures_give_the_same_state_on_both_paths(monkeypatch):
    # 300 states at two temperatures: the compiled solver sums the weights' series once per
    # temperature (more states than _SHARED share it); the numpy path sums level by level
    from sahaboltz.data.composition import solar
    from sahaboltz.equilibrium import solve_equilibrium

    t = np.repeat([6000.0, 15000.0], 150)
    p = np.tile(np.geomspace(1e-2, 1e8, 150), 2)
    fast = solve_equilibrium(solar(), t, gas_pressure=p)
    monkeypatch.setattr(compiled, "available", lambda: False)
    slow = solve_equilibrium(solar(), t, gas_pressure=p)
    np.testing.assert_allclose(fast.n_e, slow.n_e, rtol=1e-10)
