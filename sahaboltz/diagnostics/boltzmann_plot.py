"""Boltzmann plot: the excitation temperature from the lines of one species.

For an optically thin line from upper level u of a species in LTE, the integrated intensity in
energy units is

    I = F (h c / 4 pi lambda) A g_u (n_s / U_s) exp(-E_u / kT)

(F: geometry and calibration, the same for every line).  So

    y = ln(I lambda / (g_u A)) = -E_u / kT + const,

a straight line in E_u of slope -1/kT.  For intensities in photon counts the lambda drops out:
y = ln(I / (g_u A)).  The fit is weighted least squares with sigma_y^2 = (dI/I)^2 + (dA/A)^2,
and T = -1 / (k slope), sigma_T = k T^2 sigma_slope.

Line flags (the rule, documented in docs/diagnostics.md):

``outlier``
    |t| > 3 (``outlier_threshold``), t the externally studentized residual of
    :mod:`sahaboltz.diagnostics.fitting`.
``resonance``
    the lower level (column ``lower_energy_eV``, when given) belongs to the ground term of the
    species: E_lower <= highest level of the ground term (same configuration and term label as
    the ground level, from the database) + 0.005 eV.
``self-absorption?``
    a resonance line lying below the fit by more than 2 sigma (t < -2): self-absorption
    weakens the strongest lines ending on the most populated levels first.
``unchecked``
    the line alone fixes a fit parameter (leverage 1), so its residual says nothing.

With ``reject_outliers=True`` the worst outlier is dropped and the fit repeated until none is
left (at least 3 lines are kept); the flags always refer to the final fit.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from sahaboltz.constants import K_B_EV
from sahaboltz.diagnostics.fitting import LinearFit, fit_with_rejection
from sahaboltz.diagnostics.lines import LineList
from sahaboltz.diagnostics.lte import McWhirterCheck, mcwhirter_check
from sahaboltz.errors import InputError, NoDataError, SahaboltzError

__all__ = ["BoltzmannFit", "boltzmann_plot", "boltzmann_ordinate", "line_flags",
           "ground_term_top_ev", "RESONANCE_TOLERANCE_EV", "SELF_ABSORPTION_T"]

#: slack on the top of the ground term when recognising resonance lines [eV] (40 cm^-1)
RESONANCE_TOLERANCE_EV = 0.005
#: a resonance line this many sigma (studentized) below the fit is flagged as self-absorbed
SELF_ABSORPTION_T = -2.0


def boltzmann_ordinate(lines: LineList, photon_counts: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """y = ln(I lambda / (g A)) (or ln(I / (g A)) for photon counts) and its 1-sigma error."""
    lam = 1.0 if photon_counts else lines.wavelength_nm
    y = np.log(lines.intensity * lam / (lines.upper_g * lines.a_value))
    sy = np.hypot(lines.intensity_error / lines.intensity, lines.a_rel_error)
    return y, sy


def ground_term_top_ev(species: str, database=None) -> float | None:
    """Energy of the highest level of the ground term [eV], or None if the species is unknown."""
    from sahaboltz.data.database import default_database
    try:
        sp = (database or default_database()).species(species)
    except SahaboltzError:
        return None
    lv = sp.levels
    if len(lv) == 0:
        return None
    same = (sp.bound & (lv.configuration == lv.configuration[0]) & (lv.term == lv.term[0]))
    return float(lv.energy_ev[same].max()) if same.any() else float(lv.energy_ev[0])


def resonance_mask(lines: LineList, database=None) -> np.ndarray:
    """Lines whose lower level is in the ground term (False where the lower level is not given)."""
    out = np.zeros(len(lines), dtype=bool)
    for name in lines.species_names:
        top = ground_term_top_ev(name, database)
        sel = (lines.species == name) & lines.has_lower
        if top is None:
            top = 0.0  # unknown species: only a lower level at the ground energy counts
        out[sel] = lines.lower_energy_ev[sel] <= top + RESONANCE_TOLERANCE_EV
    return out


def line_flags(fit: LinearFit, resonance: np.ndarray, threshold: float) -> list[str]:
    """Comma-separated flags of every line (see the module docstring); '' when none."""
    flags = []
    for i in range(fit.used.size):
        f = []
        if not fit.used[i]:
            f.append("rejected")
        if not fit.checkable[i]:
            f.append("unchecked")
        elif abs(fit.studentized[i]) > threshold:
            f.append("outlier")
        if resonance[i]:
            f.append("resonance")
            if fit.checkable[i] and fit.studentized[i] < SELF_ABSORPTION_T:
                f.append("self-absorption?")
        flags.append(",".join(f))
    return flags


@dataclass
class BoltzmannFit:
    """Result of :func:`boltzmann_plot`.

    Attributes
    ----------
    species : str
    temperature, temperature_error : float
        T and its 1-sigma uncertainty [K] (Birge-scaled, see fitting).
    slope, intercept : float
        Of y = intercept + slope E_u (slope in eV^-1).
    cov : ndarray (2, 2)
        Covariance of (slope, intercept).
    chi2, dof : float, int
    lines : LineList
        The lines of the species, in input order.
    x, y, y_error : ndarray
        E_u [eV], the ordinate and its 1-sigma error, per line.
    fitted, studentized : ndarray
        Model ordinate and externally studentized residual per line.
    used : ndarray of bool
        Lines in the final fit.
    flags : list of str
    photon_counts : bool
    lte : McWhirterCheck or None
    """

    species: str
    temperature: float
    temperature_error: float
    slope: float
    intercept: float
    cov: np.ndarray
    chi2: float
    dof: int
    lines: LineList
    x: np.ndarray
    y: np.ndarray
    y_error: np.ndarray
    fitted: np.ndarray
    studentized: np.ndarray
    used: np.ndarray
    flags: list
    photon_counts: bool = False
    lte: McWhirterCheck | None = field(default=None)

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else 0.0

    def summary(self) -> dict:
        """The headline numbers as a flat dict."""
        out = {"method": "Boltzmann plot", "species": self.species,
               "temperature_K": self.temperature, "temperature_error_K": self.temperature_error,
               "lines_used": int(self.used.sum()), "lines_total": int(self.used.size),
               "chi2": self.chi2, "dof": self.dof,
               "flagged": int(sum(1 for f in self.flags if f and f != "resonance"))}
        if self.lte is not None:
            out.update(self.lte.as_dict())
        return out


def boltzmann_plot(lines: LineList, species: str | None = None, *, photon_counts: bool = False,
                   reject_outliers: bool = False, outlier_threshold: float = 3.0,
                   electron_density=None, delta_e_ev=None, database=None) -> BoltzmannFit:
    """Excitation temperature of one species from a Boltzmann plot.

    Parameters
    ----------
    lines : LineList
        Measured lines; with ``species`` given, only that species' lines are used, otherwise
        the list must hold exactly one species.
    species : str, optional
    photon_counts : bool
        Intensities are photon counts (not energy units).
    reject_outliers : bool
        Drop outliers (|t| > ``outlier_threshold``) one at a time and refit.
    outlier_threshold : float
        Studentized-residual limit of the ``outlier`` flag (default 3).
    electron_density : float, optional
        n_e [cm^-3] if known from elsewhere (e.g. Stark widths), for the McWhirter check.
    delta_e_ev : float, optional
        Level gap for the McWhirter check (default: from the database, see
        :func:`sahaboltz.diagnostics.lte.mcwhirter_check`).
    database : SpeciesDatabase, optional

    Raises
    ------
    InputError
        Several species and none chosen, fewer than 3 lines, all at one energy, or a slope
        that is not negative (no temperature).
    """
    if not outlier_threshold > 0:
        raise InputError(f"outlier_threshold must be positive, got {outlier_threshold}")
    if species is not None:
        lines = lines.of_species(species)
    names = lines.species_names
    if len(names) != 1:
        raise InputError(f"a Boltzmann plot takes the lines of one species; this list holds "
                         f"{', '.join(names)}: choose one (species=...)")
    if len(lines) < 3:
        raise InputError(f"{names[0]}: a Boltzmann plot needs at least 3 lines (temperature "
                         f"and its uncertainty), got {len(lines)}")
    x = lines.upper_energy_ev
    if np.ptp(x) < 1e-6:
        raise InputError(f"{names[0]}: all lines share one upper energy; the plot has no slope")
    y, sy = boltzmann_ordinate(lines, photon_counts)
    design = np.column_stack([x, np.ones_like(x)])
    fit = fit_with_rejection(design, y, sy, reject=reject_outliers,
                             threshold=outlier_threshold, min_points=3)
    slope, intercept = fit.params
    if not slope < 0:
        raise InputError(f"{names[0]}: the Boltzmann plot rises with energy (slope "
                         f"{slope:.3g} /eV), so it gives no positive temperature; check the "
                         "atomic data, the intensity calibration and self-absorption")
    t = -1.0 / (K_B_EV * slope)
    dt = K_B_EV * t**2 * float(np.sqrt(fit.cov[0, 0]))
    try:
        lte = mcwhirter_check(t, electron_density, species=names, delta_e_ev=delta_e_ev,
                              database=database)
    except NoDataError:
        lte = None  # species outside the database and no dE given: nothing to check against
    flags = line_flags(fit, resonance_mask(lines, database), outlier_threshold)
    return BoltzmannFit(species=names[0], temperature=float(t), temperature_error=float(dt),
                        slope=float(slope), intercept=float(intercept), cov=fit.cov,
                        chi2=fit.chi2, dof=fit.dof, lines=lines, x=x, y=y, y_error=sy,
                        fitted=fit.fitted, studentized=fit.studentized, used=fit.used,
                        flags=flags, photon_counts=photon_counts, lte=lte)
