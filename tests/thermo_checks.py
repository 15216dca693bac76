"""Checks shared by the thermodynamics tests: the finite-difference check of the exact
derivatives, and the compiled path against the numpy reference.

Centered differences in the test only: the thermodynamics of states moved by +-h in ln T
(``up``, ``dn``) and in ln rho (``rp``, ``rd``) against the exact slopes of ``th``.
"""

import numpy as np


def assert_matches_finite_differences(th, up, dn, rp, rd, h, rtol=1e-6):
    for q, qt, qr in (("internal_energy", "du_dlnt", "du_dlnrho"),
                      ("entropy", "ds_dlnt", "ds_dlnrho")):
        val = getattr(th, q)
        fd_t = (getattr(up, q) - getattr(dn, q)) / (2 * h)
        fd_r = (getattr(rp, q) - getattr(rd, q)) / (2 * h)
        np.testing.assert_allclose(getattr(th, qt), fd_t, rtol=rtol, err_msg=qt)
        # the density slope can vanish (no ionization change): compared on the scale of the value
        np.testing.assert_allclose(getattr(th, qr), fd_r, rtol=rtol,
                                   atol=1e-7 * np.abs(val).max(), err_msg=qr)
    np.testing.assert_allclose(th.chi_t, (np.log(up.pressure) - np.log(dn.pressure)) / (2 * h),
                               rtol=rtol, err_msg="chi_t")
    np.testing.assert_allclose(th.chi_rho,
                               (np.log(rp.pressure) - np.log(rd.pressure)) / (2 * h),
                               rtol=rtol, err_msg="chi_rho")


def assert_compiled_matches_numpy(state, monkeypatch, names, rtol=1e-11):
    """The thermodynamics of ``state`` by the compiled path and by the numpy path (the
    reference, SAHABOLTZ_NO_NUMBA=1) agree in the quantities ``names``; returns both."""
    from sahaboltz.equilibrium.thermodynamics import thermodynamics
    fast = thermodynamics(state)
    monkeypatch.setenv("SAHABOLTZ_NO_NUMBA", "1")
    slow = thermodynamics(state)
    for name in names:
        np.testing.assert_allclose(getattr(fast, name), getattr(slow, name), rtol=rtol,
                                   err_msg=name)
    return fast, slow
