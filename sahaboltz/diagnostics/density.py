"""Electron density from the intensity ratio of an ionic and a neutral line at known T.

For a line of stage r ("neutral", n) and one of stage r+1 ("ionic", i) of the same element,
the Saha and Boltzmann relations give (partition functions cancel, see
:mod:`sahaboltz.diagnostics.saha_boltzmann`)

    n_e = 2 S(T) (I_n lambda_n g_i A_i) / (I_i lambda_i g_n A_n)
          exp(-(E_i + chi_r - dchi - E_n) / kT),

lambda dropping out for photon counts.  dchi = e^2 / lambda_D (Debye-Hueckel, depends on n_e)
is found by fixed-point iteration.  Error propagation (linear, in ln n_e), with
X = E_i + chi_r - dchi - E_n and D = 1 - dchi / 2kT (the n_e dependence of dchi):

    sigma^2(ln n_e) D^2 = (dI_n/I_n)^2 + (dA_n/A_n)^2 + (dI_i/I_i)^2 + (dA_i/A_i)^2
                          + [(3/2 + X/kT - dchi/2kT) dT/T]^2 + (d chi / kT)^2.

The temperature term usually dominates: X/kT is 10-20 for typical lines, so a 3 % error in T
gives 30-60 % in n_e.  Several pairs can be evaluated at once (arrays).

Combined estimate (:meth:`RatioDensity.combined`): the weighted mean of ln n_e over the pairs,
weights 1 / sigma_lines^2 (the part of each pair's error that is its own).  Pairs share lines
(every neutral line pairs with every ionic one) and all share T and chi, so the error of the
mean is propagated with those correlations: the line part as
sum over lines of sigma_line^2 (sum of the weights of the pairs using the line)^2 / (sum w)^2,
scaled by the Birge ratio sqrt(chi^2 / dof) when the pairs scatter more than their errors
allow, and the T and chi parts (common to every pair) added as their weighted means.  A pair
whose ln n_e lies more than ``threshold`` (3) of its own line errors from the mean is flagged
as an outlier and left out of the mean (starting from the weighted median and clipping until
the set of outliers settles; a blended or self-absorbed line shows up in every pair it is in).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from sahaboltz.constants import K_B_EV
from sahaboltz.diagnostics.boltzmann_plot import boltzmann_ordinate
from sahaboltz.diagnostics.lines import LineList
from sahaboltz.diagnostics.lte import mcwhirter_check
from sahaboltz.diagnostics.saha_boltzmann import ionization_energy, stage_pair
from sahaboltz.diagnostics.uncertainty import LogNormalDensity, summary_items
from sahaboltz.errors import ConvergenceError, InputError, NoDataError
from sahaboltz.kernels.plasma import debye_hueckel_lowering, debye_length
from sahaboltz.kernels.saha import log_two_saha_constant
from sahaboltz.quantities import as_array, as_positive_array

__all__ = ["RatioDensity", "CombinedDensity", "ratio_density", "all_pairs"]

_MAX_ITER = 100


@dataclass
class RatioDensity(LogNormalDensity):
    """Result of :func:`ratio_density` (one entry per line pair).

    Attributes
    ----------
    neutral, ion : LineList
        The lines of each pair (stage r and r+1).
    temperature, temperature_error : float
        The T used [K] and its 1-sigma error.
    electron_density : ndarray
        n_e [cm^-3]; log-normal, 1-sigma interval ``electron_density_bounds``.
    electron_density_error : ndarray
        n_e sigma(ln n_e), the linear (first-order) error [cm^-3]; prefer the bounds.
    ln_ne_error : ndarray
        sigma(ln n_e) (natural log; ``log_ne_error`` is its deprecated name,
        ``log10_ne_error`` sigma(log10 n_e)).
    error_budget : dict of ndarray
        sigma(ln n_e) from the intensities and A values ("lines"), from T ("temperature") and
        from chi ("ionization_energy"); they add in quadrature.
    lowering_ev : ndarray
    lte : list of McWhirterCheck
    """

    neutral: LineList
    ion: LineList
    temperature: float
    temperature_error: float
    electron_density: np.ndarray
    electron_density_error: np.ndarray
    ln_ne_error: np.ndarray
    error_budget: dict
    lowering_ev: np.ndarray
    lte: list = field(default_factory=list)

    def rows(self, threshold: float = 3.0) -> list[dict]:
        """One row per pair; ``outlier`` marks the pairs :meth:`combined` flags."""
        out = []
        flagged = self.combined(threshold).outlier if self.electron_density.size > 2 else \
            np.zeros(self.electron_density.size, bool)
        lo, hi = self.electron_density_bounds
        for k in range(self.electron_density.size):
            row = {"neutral": f"{self.neutral.species[k]} {self.neutral.wavelength_nm[k]:.3f}",
                   "ion": f"{self.ion.species[k]} {self.ion.wavelength_nm[k]:.3f}",
                   "temperature_K": self.temperature,
                   "n_e_cm-3": float(self.electron_density[k]),
                   "n_e_low_cm-3": float(lo[k]), "n_e_high_cm-3": float(hi[k]),
                   "sigma_ln_n_e": float(self.ln_ne_error[k]),
                   "sigma_ln_from_lines": float(self.error_budget["lines"][k]),
                   "sigma_ln_from_T": float(self.error_budget["temperature"][k]),
                   "lowering_eV": float(self.lowering_ev[k])}
            if self.lte:
                row["mcwhirter_satisfied"] = bool(self.lte[k].satisfied)
            row["outlier"] = bool(flagged[k])
            out.append(row)
        return out

    def combined(self, threshold: float = 3.0) -> "CombinedDensity":
        """The combined n_e of all pairs, weighted in ln n_e (module docstring)."""
        y = np.log(self.electron_density)
        s_own = self.error_budget["lines"]
        if not np.all(s_own > 0):
            raise InputError("combined n_e: every pair needs a non-zero intensity error "
                             "(intensity_error) to be weighted")
        w_all = 1.0 / s_own**2
        # a robust start (the weighted median), then clip: pairs more than `threshold` of
        # their own errors away are outliers and leave the mean, until the set settles
        order = np.argsort(y)
        cum = np.cumsum(w_all[order])
        mean = float(y[order][np.searchsorted(cum, 0.5 * cum[-1])])
        out = np.zeros(y.size, dtype=bool)
        for _ in range(20):
            new = np.abs(y - mean) / s_own > threshold
            if new.all():
                new[:] = False
            keep = ~new
            mean = float(np.sum(w_all[keep] * y[keep]) / w_all[keep].sum())
            if np.array_equal(new, out):
                break
            out = new
        w = np.where(out, 0.0, w_all)
        resid = np.where(out, 0.0, (y - mean) / s_own)
        n = int((~out).sum())
        # the line part with the lines the pairs share (the budget's own part per line)
        var_lines = 0.0
        for side, budget in ((self.neutral, "neutral_lines"), (self.ion, "ion_lines")):
            keys = [f"{a}|{b!r}" for a, b in zip(side.species, side.wavelength_nm.tolist())]
            _, inverse = np.unique(keys, return_inverse=True)
            per_line = self.error_budget[budget]
            wsum = np.bincount(inverse, weights=w)
            sig = np.zeros(wsum.size)
            sig[inverse] = per_line
            var_lines += float(np.sum((sig * wsum) ** 2))
        var_lines /= float(w.sum()) ** 2
        dof = n - 1
        chi2 = float(np.sum(resid**2))
        birge = max(1.0, np.sqrt(chi2 / dof)) if dof > 0 else 1.0
        s_t = float(np.sum(w * self.error_budget["temperature"]) / w.sum())
        s_chi = float(np.sum(w * self.error_budget["ionization_energy"]) / w.sum())
        s_tot = float(np.sqrt(var_lines * birge**2 + s_t**2 + s_chi**2))
        return CombinedDensity(electron_density=float(np.exp(mean)), ln_ne_error=s_tot,
                               ln_error_lines=float(np.sqrt(var_lines) * birge),
                               ln_error_temperature=s_t, ln_error_ionization_energy=s_chi,
                               pairs=y.size, chi2=chi2, dof=dof, birge_ratio=float(birge),
                               outlier=out, threshold=threshold)


@dataclass
class CombinedDensity(LogNormalDensity):
    """The combined n_e of several line pairs (:meth:`RatioDensity.combined`).

    ``electron_density`` [cm^-3] with ``ln_ne_error`` = sigma(ln n_e) (and its parts from the
    lines, T and chi), ``electron_density_bounds``; ``outlier`` marks the pairs more than
    ``threshold`` of their own errors from the mean (left out of it); ``pairs`` counts all of
    them; ``birge_ratio`` = max(1, sqrt(chi2/dof)) of the pairs kept.
    """

    electron_density: float
    ln_ne_error: float
    ln_error_lines: float
    ln_error_temperature: float
    ln_error_ionization_energy: float
    pairs: int
    chi2: float
    dof: int
    birge_ratio: float
    outlier: np.ndarray
    threshold: float

    def summary(self) -> dict:
        return {**summary_items(self.electron_density, self.ln_ne_error),
                "sigma_ln_from_lines": self.ln_error_lines,
                "sigma_ln_from_T": self.ln_error_temperature,
                "sigma_ln_from_chi": self.ln_error_ionization_energy,
                "pairs": self.pairs, "outlier_pairs": int(self.outlier.sum()),
                "chi2": self.chi2, "dof": self.dof, "birge_ratio": self.birge_ratio}


def all_pairs(lines: LineList, element=None, database=None) -> tuple[LineList, LineList]:
    """Every (stage r line, stage r+1 line) pair of a two-stage line list, as two LineLists."""
    if element is not None:
        from sahaboltz.data.elements import atomic_number
        mask = lines.z == atomic_number(element)
        if not mask.any():
            raise InputError(f"no line of element {element} in the line list")
        lines = lines.select(mask)
    _, r, _, _ = stage_pair(lines, database=database)
    i_n = np.flatnonzero(lines.charge == r)
    i_i = np.flatnonzero(lines.charge == r + 1)
    a, b = np.meshgrid(i_n, i_i, indexing="ij")
    return lines.select(a.ravel()), lines.select(b.ravel())


def ratio_density(neutral: LineList, ion: LineList, temperature, temperature_error=0.0, *,
                  lowering: bool = True, photon_counts: bool = False, delta_e_ev=None,
                  database=None) -> RatioDensity:
    """n_e from ionic-to-neutral line ratios at a known temperature (module docstring).

    Parameters
    ----------
    neutral, ion : LineList
        Equal numbers of lines (or one of them a single line), paired in order; each pair of
        stages r and r+1 of one element.
    temperature, temperature_error : float or Quantity
        T and its 1-sigma uncertainty [K].
    lowering : bool
        Debye-Hueckel lowering of chi_r (default on).
    photon_counts : bool
        Intensities in photon counts.
    delta_e_ev : float, optional
        Level gap for the McWhirter check.

    Raises
    ------
    InputError
        Unequal lengths, lines not of successive stages of one element, bad T.
    ConvergenceError
        The lowering iteration does not settle (dchi comparable to kT).
    """
    t = float(as_positive_array(temperature, "K", "temperature"))
    st = float(as_array(temperature_error, "K", "temperature_error", allow_negative=False))
    n = max(len(neutral), len(ion))
    if len(neutral) not in (1, n) or len(ion) not in (1, n):
        raise InputError(f"neutral has {len(neutral)} lines and ion {len(ion)}: pair them one "
                         "to one (or give one line on one side)")
    if len(neutral) == 1 and n > 1:
        neutral = neutral.select(np.zeros(n, dtype=int))
    if len(ion) == 1 and n > 1:
        ion = ion.select(np.zeros(n, dtype=int))
    bad = (neutral.z != ion.z) | (ion.charge != neutral.charge + 1)
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise InputError(f"pair {k + 1}: {neutral.species[k]} and {ion.species[k]} are not "
                         "successive stages (r, r+1) of one element")
    chi = np.empty(n)
    s_chi = np.empty(n)
    for z, r in set(zip(neutral.z.tolist(), neutral.charge.tolist())):
        sel = (neutral.z == z) & (neutral.charge == r)
        chi[sel], s_chi[sel] = ionization_energy(z, r, database)
    y_n, s_n = boltzmann_ordinate(neutral, photon_counts)
    y_i, s_i = boltzmann_ordinate(ion, photon_counts)
    kt = K_B_EV * t
    base = float(log_two_saha_constant(t)) + y_n - y_i
    x0 = ion.upper_energy_ev + chi - neutral.upper_energy_ev
    log_ne = base - x0 / kt
    dchi = np.zeros(n)
    for _ in range(_MAX_ITER):
        if lowering:
            dchi = debye_hueckel_lowering(neutral.charge, debye_length(t, np.exp(log_ne)))
        new = base - (x0 - dchi) / kt
        done = np.all(np.abs(new - log_ne) < 1e-12)
        log_ne = new
        if done:
            break
    else:
        raise ConvergenceError(f"the lowering iteration did not settle at T = {t:.4g} K")
    d = 1.0 - dchi / (2.0 * kt)
    if np.any(d <= 0):
        raise ConvergenceError("the lowering exceeds 2 kT: the Debye-Hueckel picture fails here")
    x = x0 - dchi
    s_lines = np.hypot(s_n, s_i) / d
    s_temp = np.abs(1.5 + x / kt - dchi / (2.0 * kt)) * (st / t) / d
    s_ion = s_chi / kt / d
    sl = np.sqrt(s_lines**2 + s_temp**2 + s_ion**2)
    ne = np.exp(log_ne)
    lte = []
    for k in range(n):
        try:
            lte.append(mcwhirter_check(t, ne[k], species=[neutral.species[k], ion.species[k]],
                                       delta_e_ev=delta_e_ev, database=database))
        except NoDataError:
            lte = []
            break
    return RatioDensity(neutral=neutral, ion=ion, temperature=t, temperature_error=st,
                        electron_density=ne, electron_density_error=ne * sl, ln_ne_error=sl,
                        error_budget={"lines": s_lines, "temperature": s_temp,
                                      "ionization_energy": s_ion,
                                      "neutral_lines": s_n / d, "ion_lines": s_i / d},
                        lowering_ev=np.asarray(dchi, dtype=float) * np.ones(n), lte=lte)
