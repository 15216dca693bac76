"""Weighted linear least squares with per-point diagnostics, shared by the plot fits.

The fits of a Boltzmann or Saha-Boltzmann plot are linear in their parameters.  Besides the
parameters and their covariance, each point gets an *externally studentized residual*: its
residual divided by what the residual should scatter by if the point were left out of the fit,

    t_i = e_i / (sigma_i sqrt(1 - h_ii) max(1, s_(i))),

with h_ii the leverage (diagonal of the hat matrix), and s_(i)^2 the reduced chi-square of the
fit without point i (closed form: (chi^2 - e_i^2 / (sigma_i^2 (1 - h_ii))) / (n - p - 1)).
The max(1, .) keeps the stated uncertainties as the yardstick unless the scatter is larger
than they say.  A point excluded from the fit gets the same statistic from the fit of the
others: (y_i - x_i p) / sqrt(sigma_i^2 s^2 + x_i C x_i).

The quoted covariance is the formal one, (X^T W X)^-1, multiplied by the Birge factor
max(1, chi^2 / dof) (common practice: uncertainties that do not explain the scatter are scaled
up, never down).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sahaboltz.errors import InputError

__all__ = ["LinearFit", "weighted_linear_fit", "fit_with_rejection"]

# a point whose leverage is within this of 1 fixes a parameter alone and cannot be checked
_LEVERAGE_ONE = 1e-9


@dataclass
class LinearFit:
    """Result of :func:`weighted_linear_fit` (see the module docstring)."""

    params: np.ndarray          # (p,)
    cov: np.ndarray             # (p, p), Birge-scaled
    cov_formal: np.ndarray      # (p, p), from the stated uncertainties alone
    chi2: float
    dof: int
    used: np.ndarray            # (n,) bool, points in the fit
    fitted: np.ndarray          # (n,) model value at every point
    residual: np.ndarray        # (n,) y - fitted
    studentized: np.ndarray     # (n,) externally studentized residual (0 where not checkable)
    checkable: np.ndarray       # (n,) bool: the statistic is defined

    @property
    def reduced_chi2(self) -> float:
        """chi^2 / dof (NaN-free: 0 when dof = 0)."""
        return self.chi2 / self.dof if self.dof > 0 else 0.0

    @property
    def birge(self) -> float:
        """Factor applied to the formal covariance, max(1, chi^2/dof)."""
        return max(1.0, self.reduced_chi2)


def weighted_linear_fit(design: np.ndarray, y: np.ndarray, sigma: np.ndarray,
                        used: np.ndarray | None = None) -> LinearFit:
    """Fit y = design @ p by weighted least squares (weights 1/sigma^2) on the ``used`` points.

    Raises
    ------
    InputError
        Fewer points than parameters, or a design matrix that does not fix every parameter.
    """
    x = np.asarray(design, dtype=float)
    y = np.asarray(y, dtype=float)
    s = np.asarray(sigma, dtype=float)
    n, p = x.shape
    used = np.ones(n, dtype=bool) if used is None else np.asarray(used, dtype=bool)
    m = int(used.sum())
    if m < p:
        raise InputError(f"the fit has {p} parameters but only {m} usable line(s); add lines")
    w = 1.0 / s[used]
    xa = x[used] * w[:, None]
    ya = y[used] * w
    # QR keeps the solve well conditioned when energies cluster
    q, r = np.linalg.qr(xa)
    if np.min(np.abs(np.diag(r))) <= 1e-12 * np.max(np.abs(np.diag(r))):
        raise InputError("the lines do not fix every fit parameter (e.g. all upper energies "
                         "equal, or a stage with no line); use lines spread in energy")
    params = np.linalg.solve(r, q.T @ ya)
    rinv = np.linalg.inv(r)
    cov_formal = rinv @ rinv.T
    fitted = x @ params
    resid = y - fitted
    chi2 = float(np.sum((resid[used] / s[used]) ** 2))
    dof = m - p
    birge = max(1.0, chi2 / dof) if dof > 0 else 1.0
    cov = cov_formal * birge

    t = np.zeros(n)
    ok = np.zeros(n, dtype=bool)
    h = np.sum(q**2, axis=1)                       # leverages of the used points
    iu = np.flatnonzero(used)
    one_minus_h = 1.0 - h
    good = one_minus_h > _LEVERAGE_ONE
    e_std = np.zeros(m)
    e_std[good] = resid[iu][good] / (s[iu][good] * np.sqrt(one_minus_h[good]))
    if m - p - 1 > 0:
        s_del2 = np.maximum((chi2 - e_std**2) / (m - p - 1), 0.0)
        scale = np.sqrt(np.maximum(1.0, s_del2))
    else:
        scale = np.ones(m)
    t[iu[good]] = e_std[good] / scale[good]
    ok[iu[good]] = True
    out = ~used
    if out.any():
        var_pred = np.einsum("ij,jk,ik->i", x[out], cov, x[out])
        t[out] = resid[out] / np.sqrt(s[out] ** 2 * birge + var_pred)
        ok[out] = True
    return LinearFit(params=params, cov=cov, cov_formal=cov_formal, chi2=chi2, dof=dof,
                     used=used, fitted=fitted, residual=resid, studentized=t, checkable=ok)


def fit_with_rejection(design: np.ndarray, y: np.ndarray, sigma: np.ndarray, *,
                       reject: bool, threshold: float, min_points: int) -> LinearFit:
    """Fit; with ``reject``, drop the worst point with |t| > threshold and refit, repeatedly.

    Rejection stops when no point exceeds the threshold or when only ``min_points`` remain.
    """
    fit = weighted_linear_fit(design, y, sigma)
    if not reject:
        return fit
    used = fit.used.copy()
    while used.sum() > min_points:
        cand = np.where(used & fit.checkable, np.abs(fit.studentized), 0.0)
        worst = int(np.argmax(cand))
        if cand[worst] <= threshold:
            break
        used[worst] = False
        try:
            fit = weighted_linear_fit(design, y, sigma, used)
        except InputError:  # the point fixes a parameter alone: keep it
            used[worst] = True
            break
    return fit
