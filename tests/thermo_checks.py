"""The finite-difference check of the exact thermodynamic derivatives, shared by the tests.

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
