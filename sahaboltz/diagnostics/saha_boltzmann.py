"""Saha-Boltzmann plot: T and n_e from the lines of two successive stages of one element.

The Saha equation links the stages r (lower) and r+1 (upper) of an element,

    n_{r+1} n_e / n_r = 2 (U_{r+1} / U_r) S(T) exp(-(chi_r - dchi) / kT),
    S(T) = (2 pi m_e k T / h^2)^{3/2},

so n_{r+1} / U_{r+1} = (n_r / U_r) (2 S / n_e) exp(-(chi_r - dchi) / kT) and the partition
functions cancel from the line intensities.  With y = ln(I lambda / (g A)) as in the Boltzmann
plot, the lines of the upper stage, moved to

    x* = E_u + chi_r - dchi,        y* = y - ln(2 S(T) / n_e),

fall on the straight line of the lower stage, y = c - x / kT.  dchi is the Debye-Hueckel
lowering e^2 / lambda_D of the lower stage (charge r; lambda_D with ion screening equal to
n_e, :mod:`sahaboltz.kernels.plasma`), or 0 with ``lowering=False``.

Two ways to use the plot:

n_e unknown (default)
    Weighted least squares of y = b E_u + c_r [lower stage] + c_{r+1} [upper stage]: one
    common slope b = -1/kT, one intercept per stage.  This is linear; the distance between the
    intercepts then gives n_e through

        ln n_e = ln 2 S(T) + c_r - c_{r+1} + b (chi_r - dchi(T, n_e)),

    solved by fixed-point iteration (dchi depends on n_e; 2-4 passes).  The uncertainty of
    ln n_e follows from the covariance of (b, c_r, c_{r+1}) and of chi_r by linear
    propagation, including the n_e dependence of dchi (the factor 1 / (1 - dchi / 2kT)).
n_e known (``electron_density=...``, e.g. from Stark widths)
    Every line on one straight line y* = c + b x*, whose ordinate shift ln(2 S(T) / n_e) and
    abscissa shift dchi(T, n_e) depend on T: solved by Gauss-Newton iteration in (b, c).
    This is the case where the wide energy range of the combined plot sharpens T.  The
    covariance is the Gauss-Newton one, plus the propagated uncertainty of n_e and chi_r.

Uncertainties are Birge-scaled (see :mod:`sahaboltz.diagnostics.fitting`); the line flags are
those of the Boltzmann plot (:mod:`sahaboltz.diagnostics.boltzmann_plot`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from sahaboltz.constants import K_B_EV
from sahaboltz.data.elements import spectroscopic_name
from sahaboltz.diagnostics.boltzmann_plot import boltzmann_ordinate, line_flags, resonance_mask
from sahaboltz.diagnostics.fitting import fit_with_rejection, weighted_linear_fit
from sahaboltz.diagnostics.lines import LineList
from sahaboltz.diagnostics.uncertainty import LogNormalDensity, summary_items
from sahaboltz.diagnostics.lte import McWhirterCheck, mcwhirter_check
from sahaboltz.errors import ConvergenceError, InputError, NoDataError
from sahaboltz.kernels.plasma import debye_hueckel_lowering, debye_length
from sahaboltz.kernels.saha import log_two_saha_constant
from sahaboltz.quantities import as_array, as_positive_array

__all__ = ["SahaBoltzmannFit", "saha_boltzmann_plot", "stage_pair", "ionization_energy"]

_MAX_ITER = 100


def stage_pair(lines: LineList, element=None, database=None) -> tuple:
    """(Z, r, chi_r [eV], sigma_chi [eV]) for lines of stages r and r+1 of one element.

    Raises
    ------
    InputError
        The lines are not of exactly two successive stages of one element.
    """
    from sahaboltz.data.elements import atomic_number
    if element is not None:
        z = atomic_number(element)
        if not (lines.z == z).any():
            raise InputError(f"no line of element {element} in the line list")
        lines = lines.select(lines.z == z)
    zs = np.unique(lines.z)
    if zs.size != 1:
        raise InputError("a Saha-Boltzmann plot takes the lines of one element; this list "
                         f"holds {', '.join(lines.species_names)}: choose one (element=...)")
    z = int(zs[0])
    charges = np.unique(lines.charge)
    if charges.size != 2 or charges[1] != charges[0] + 1:
        raise InputError(f"a Saha-Boltzmann plot needs lines of two successive stages; got "
                         f"{', '.join(lines.species_names)}")
    r = int(charges[0])
    return (z, r) + ionization_energy(z, r, database)


def ionization_energy(z: int, charge: int, database=None) -> tuple[float, float]:
    """(chi, sigma_chi) [eV] of stage (z, charge) from the database (sigma 0 when unknown)."""
    from sahaboltz.data.database import default_database
    sp = (database or default_database()).species((int(z), int(charge)), require_levels=False)
    chi = float(sp.ionization_energy_ev)
    if not np.isfinite(chi):
        raise NoDataError(f"no ionization energy of {sp.name} in the database")
    dchi = float(sp.ionization_energy_uncertainty_ev)
    return chi, dchi if np.isfinite(dchi) else 0.0


@dataclass
class SahaBoltzmannFit(LogNormalDensity):
    """Result of :func:`saha_boltzmann_plot`.

    Attributes
    ----------
    element, lower, upper : str
        Element symbol and the two stages ("Fe I", "Fe II").
    temperature, temperature_error : float
        [K], 1 sigma.
    electron_density : float
        [cm^-3].  n_e is log-normal: its 1-sigma interval is ``electron_density_bounds``
        (n_e e^-sigma, n_e e^+sigma); ``log10_ne_error`` is sigma(log10 n_e).
    electron_density_error : float
        n_e sigma(ln n_e), the linear (first-order) error, [cm^-3]; prefer the bounds.
    ln_ne_error : float
        sigma(ln n_e) (natural log; the old name ``log_ne_error`` still works, deprecated).
    correlation : float
        Correlation coefficient of T and ln n_e (0 when n_e was given).
    ne_fitted : bool
        True when n_e came out of the plot, False when it was given.
    ionization_energy_ev, lowering_ev : float
        chi_r and the lowering dchi used [eV].
    slope, intercept : float
        Of the common line y* = intercept + slope x* (intercept of the lower stage).
    x, y, y_error : ndarray
        Plot abscissa x* [eV], ordinate y* and its 1-sigma error, per line.
    fitted, studentized, used, flags
        As in :class:`~sahaboltz.diagnostics.boltzmann_plot.BoltzmannFit`.
    chi2, dof, iterations
    lines : LineList
    lte : McWhirterCheck or None
    """

    element: str
    lower: str
    upper: str
    temperature: float
    temperature_error: float
    electron_density: float
    electron_density_error: float
    ln_ne_error: float
    correlation: float
    ne_fitted: bool
    ionization_energy_ev: float
    lowering_ev: float
    slope: float
    intercept: float
    x: np.ndarray
    y: np.ndarray
    y_error: np.ndarray
    fitted: np.ndarray
    studentized: np.ndarray
    used: np.ndarray
    flags: list
    chi2: float
    dof: int
    iterations: int
    lines: LineList
    photon_counts: bool = False
    lte: McWhirterCheck | None = field(default=None)

    @property
    def upper_stage(self) -> np.ndarray:
        """Mask of the lines of the upper stage."""
        return self.lines.species == self.upper

    def summary(self) -> dict:
        out = {"method": "Saha-Boltzmann plot", "species": f"{self.lower} + {self.upper}",
               "temperature_K": self.temperature, "temperature_error_K": self.temperature_error,
               **summary_items(self.electron_density, self.ln_ne_error),
               "n_e_source": "fitted" if self.ne_fitted else "given",
               "T_ln_n_e_correlation": float(self.correlation),
               "lowering_eV": self.lowering_ev, "lines_used": int(self.used.sum()),
               "lines_total": int(self.used.size), "chi2": self.chi2, "dof": self.dof,
               "iterations": self.iterations,
               "flagged": int(sum(1 for f in self.flags if f and f != "resonance"))}
        if self.lte is not None:
            out.update(self.lte.as_dict())
        return out


def saha_boltzmann_plot(lines: LineList, element=None, *, electron_density=None,
                        electron_density_error=0.0, lowering: bool = True,
                        photon_counts: bool = False, reject_outliers: bool = False,
                        outlier_threshold: float = 3.0, initial_temperature: float = 1e4,
                        delta_e_ev=None, database=None) -> SahaBoltzmannFit:
    """Temperature and electron density from a Saha-Boltzmann plot (see module docstring).

    Parameters
    ----------
    lines : LineList
        Lines of two successive stages of one element (others are dropped when ``element``
        is given).
    element : str or int, optional
    electron_density : float or Quantity, optional
        n_e [cm^-3] when known from elsewhere: then only T is fitted.
    electron_density_error : float or Quantity
        Its 1-sigma uncertainty [cm^-3] (propagated into T).
    lowering : bool
        Debye-Hueckel lowering of chi_r (default on).
    photon_counts, reject_outliers, outlier_threshold
        As for :func:`~sahaboltz.diagnostics.boltzmann_plot.boltzmann_plot`.
    initial_temperature : float
        Start of the iteration when n_e is given [K].
    delta_e_ev : float, optional
        Level gap for the McWhirter check.
    database : SpeciesDatabase, optional

    Raises
    ------
    InputError
        Not two successive stages; too few lines (n_e fitted: at least 4, with lines of both
        stages and two upper energies in one of them; n_e given: at least 3); a slope that
        gives no positive temperature.
    ConvergenceError
        The iteration for n_e or T did not settle.
    """
    if element is not None:
        from sahaboltz.data.elements import atomic_number
        mask = lines.z == atomic_number(element)
        if not mask.any():
            raise InputError(f"no line of element {element} in the line list; it holds "
                             f"{', '.join(lines.species_names)}")
        lines = lines.select(mask)
    z, r, chi, s_chi = stage_pair(lines, database=database)
    lower, upper = spectroscopic_name(z, r), spectroscopic_name(z, r + 1)
    up = (lines.charge == r + 1).astype(float)
    y, sy = boltzmann_ordinate(lines, photon_counts)
    e_u = lines.upper_energy_ev
    if electron_density is None:
        res = _fit_free_ne(lines, e_u, y, sy, up, chi, s_chi, r, lowering, reject_outliers,
                           outlier_threshold)
    else:
        ne = float(as_positive_array(electron_density, "cm-3", "electron_density"))
        sne = float(as_array(electron_density_error, "cm-3", "electron_density_error",
                             allow_negative=False))
        t0 = float(as_positive_array(initial_temperature, "K", "initial_temperature"))
        res = _fit_given_ne(e_u, y, sy, up, chi, s_chi, r, ne, sne / ne, lowering, t0,
                            reject_outliers, outlier_threshold)
    fit, t, st, ne, sl, corr, dchi, b, c, its = res
    x_star = e_u + up * (chi - dchi)
    y_star = y - up * (log_two_saha_constant(t) - np.log(ne))
    try:
        lte = mcwhirter_check(t, ne, species=[lower, upper], delta_e_ev=delta_e_ev,
                              database=database)
    except NoDataError:
        lte = None
    flags = line_flags(fit, resonance_mask(lines, database), outlier_threshold)
    return SahaBoltzmannFit(
        element=lower.split()[0], lower=lower, upper=upper, temperature=float(t),
        temperature_error=float(st),
        electron_density=ne, electron_density_error=ne * sl, ln_ne_error=sl, correlation=corr,
        ne_fitted=electron_density is None, ionization_energy_ev=chi, lowering_ev=dchi,
        slope=b, intercept=c, x=x_star, y=y_star, y_error=sy, fitted=c + b * x_star,
        studentized=fit.studentized, used=fit.used, flags=flags, chi2=fit.chi2, dof=fit.dof,
        iterations=its, lines=lines, photon_counts=photon_counts, lte=lte)


def _temperature(b: float, what: str) -> float:
    if not b < 0:
        raise InputError(f"the {what} rises with energy (slope {b:.3g} /eV): no positive "
                         "temperature; check the atomic data, calibration and self-absorption")
    return -1.0 / (K_B_EV * b)


def _fit_free_ne(lines, e_u, y, sy, up, chi, s_chi, r, lowering, reject, threshold):
    low = 1.0 - up
    for name, m in (("lower", low), ("upper", up)):
        if m.sum() < 1:
            raise InputError(f"no line of the {name} stage")
    if len(lines) < 4:
        raise InputError(f"fitting T and n_e together needs at least 4 lines (3 parameters "
                         f"and a check of the scatter), got {len(lines)}")
    design = np.column_stack([e_u, low, up])
    fit = fit_with_rejection(design, y, sy, reject=reject, threshold=threshold, min_points=4)
    b, c0, c1 = fit.params
    t = _temperature(b, "Saha-Boltzmann plot")
    base = float(log_two_saha_constant(t)) + c0 - c1
    log_ne = base + b * chi
    dchi = 0.0
    for its in range(1, _MAX_ITER + 1):
        dchi = float(debye_hueckel_lowering(r, debye_length(t, np.exp(log_ne)))) if lowering else 0.0
        new = base + b * (chi - dchi)
        if abs(new - log_ne) < 1e-12:
            log_ne = new
            break
        log_ne = new
    else:
        raise ConvergenceError(f"n_e from the Saha-Boltzmann plot did not settle in {_MAX_ITER} "
                               f"passes (lowering {dchi:.3g} eV at T = {t:.4g} K); try "
                               "lowering=False")
    d = 1.0 + b * dchi / 2.0          # d/d ln n_e of the fixed-point equation
    if d <= 0:
        raise ConvergenceError("the lowering exceeds 2 kT: the Debye-Hueckel picture fails here")
    grad = np.array([-1.5 / b + chi - 1.5 * dchi, 1.0, -1.0]) / d
    var_l = float(grad @ fit.cov @ grad) + (b / d * s_chi) ** 2
    dt_db = -t / b
    st = abs(dt_db) * float(np.sqrt(fit.cov[0, 0]))
    cov_tl = dt_db * float((fit.cov @ grad)[0])
    sl = float(np.sqrt(var_l))
    corr = cov_tl / (st * sl) if st > 0 and sl > 0 else 0.0
    return fit, t, st, float(np.exp(log_ne)), sl, corr, dchi, float(b), float(c0), its


def _fit_given_ne(e_u, y, sy, up, chi, s_chi, r, ne, s_lne, lowering, t0, reject, threshold):
    n = e_u.size
    if n < 3:
        raise InputError(f"a Saha-Boltzmann plot needs at least 3 lines, got {n}")
    log_ne = np.log(ne)

    def model(b, used):
        """Model, Jacobian columns (b, c), and d model / d ln n_e, d model / d chi at b."""
        t = -1.0 / (K_B_EV * b)
        dchi = float(debye_hueckel_lowering(r, debye_length(t, ne))) if lowering else 0.0
        shift = chi - dchi
        f_no_c = b * (e_u + up * shift) + up * (float(log_two_saha_constant(t)) - log_ne)
        jb = e_u + up * (chi - 1.5 * dchi - 1.5 / b)
        d_lne = up * (-1.0 - b * dchi / 2.0)
        return f_no_c, np.column_stack([jb, np.ones(n)]), d_lne, up * b, dchi

    def solve(used):
        # start: the combined plot at the initial temperature, linear in (b, c)
        b = -1.0 / (K_B_EV * t0)
        its = 0
        for its in range(1, _MAX_ITER + 1):
            f0, jac, _, _, _ = model(b, used)
            c = np.average((y - f0)[used], weights=sy[used] ** -2)
            lin = weighted_linear_fit(jac, y - f0 - c + jac @ np.array([b, c]), sy, used)
            b_new = float(lin.params[0])
            if not b_new < 0:
                raise InputError("the Saha-Boltzmann plot rises with energy: no positive "
                                 "temperature; check n_e, the atomic data and the calibration")
            if abs(b_new - b) <= 1e-12 * abs(b):
                b = b_new
                break
            b = b_new
        else:
            raise ConvergenceError(f"T from the Saha-Boltzmann plot at n_e = {ne:.3g} cm^-3 "
                                   f"did not settle in {_MAX_ITER} Gauss-Newton steps")
        f0, jac, d_lne, d_chi, dchi = model(b, used)
        c = np.average((y - f0)[used], weights=sy[used] ** -2)
        fit = weighted_linear_fit(jac, y - f0 - c + jac @ np.array([b, c]), sy, used)
        return fit, jac, d_lne, d_chi, dchi, its

    fit, jac, d_lne, d_chi, dchi, its = solve(np.ones(n, dtype=bool))
    if reject:
        used = fit.used.copy()
        while used.sum() > 3:
            cand = np.where(used & fit.checkable, np.abs(fit.studentized), 0.0)
            worst = int(np.argmax(cand))
            if cand[worst] <= threshold:
                break
            used[worst] = False
            fit, jac, d_lne, d_chi, dchi, its = solve(used)
    b, c = (float(v) for v in fit.params)
    # sensitivity of (b, c) to the given n_e and chi: dp = -(J^T W J)^-1 J^T W (df/dq) dq
    u = fit.used
    w = sy[u] ** -2
    jw = jac[u] * w[:, None]
    cov_formal = fit.cov_formal
    cov = fit.cov.copy()
    for deriv, sigma in ((d_lne, s_lne), (d_chi, s_chi)):
        dp = -cov_formal @ (jw.T @ deriv[u])
        cov += np.outer(dp, dp) * sigma**2
    t = _temperature(b, "Saha-Boltzmann plot")
    st = t / abs(b) * float(np.sqrt(cov[0, 0]))
    fit.cov = cov
    return fit, t, st, ne, s_lne, 0.0, dchi, b, c, its
