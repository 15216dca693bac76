"""Forward model: line intensities of an LTE plasma at given (T, n_e), for tests and demos.

Emission coefficient of an optically thin line (energy units, erg s^-1 cm^-3 sr^-1):

    eps = (h c / (4 pi lambda)) A n_u,   n_u = N_el f_r(T, n_e) g_u exp(-E_u / kT) / U_r(T),

with f_r the stage fraction from the Saha chain (:func:`sahaboltz.kernels.saha.saha_chain`,
Debye-Hueckel lowering of every ionization energy when ``lowering`` is on) and U_r the plain
partition function (:func:`sahaboltz.kernels.partition.partition_function`).  Photon counts
drop the h c / lambda.  An optional optical depth tau per line multiplies the intensity by
the escape factor (1 - exp(-tau)) / tau of a homogeneous slab, to make self-absorbed lines.

Noise is multiplicative and log-normal: I_obs = I exp(r N(0, 1)) with r the relative error,
and the quoted ``intensity_error`` is r I_obs.  Tabulated A values can be given a relative
error too: the synthetic list then carries A exp(a N(0, 1)) (the "tabulated" value) while the
intensities were made with the true A.

:func:`synthetic_line_list` makes line lists for such scenarios from the real level energies and
statistical weights of the database, with invented (synthetic) A values and wavelengths from
real lower levels.  They are not real spectral lines and must not be used as atomic data.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from sahaboltz.constants import C, H, HC_EV_CM, K_B_EV
from sahaboltz.diagnostics.lines import LineList
from sahaboltz.errors import InputError
from sahaboltz.kernels.plasma import debye_hueckel_lowering, debye_length
from sahaboltz.quantities import as_array, as_positive_array

__all__ = ["line_emissivity", "synthesize", "synthetic_line_list"]


def line_emissivity(lines: LineList, temperature: Any, electron_density: Any, *,
                    element_density: Any = 1.0, lowering: bool = True,
                    photon_counts: bool = False, database=None) -> np.ndarray:
    """Emission coefficient of every line at (T, n_e) (formula in the module docstring).

    Parameters
    ----------
    lines : LineList
        Lines whose species are in the database (intensities are ignored).
    temperature : float or Quantity
        T [K].
    electron_density : float or Quantity
        n_e [cm^-3].
    element_density : float
        Nuclei of each element per cm^3 (the same for every element; default 1, i.e. per
        nucleus).
    lowering : bool
        Debye-Hueckel lowering of the ionization energies (default on).
    photon_counts : bool
        Photon emission rate (s^-1 cm^-3 sr^-1) instead of energy.

    Returns
    -------
    ndarray
        One value per line (erg s^-1 cm^-3 sr^-1, or photons s^-1 cm^-3 sr^-1).
    """
    from sahaboltz.data.database import default_database
    from sahaboltz.kernels.partition import partition_function
    from sahaboltz.kernels.saha import saha_chain

    t = float(as_positive_array(temperature, "K", "temperature"))
    ne = float(as_positive_array(electron_density, "cm-3", "electron_density"))
    nel = float(as_positive_array(element_density, "cm-3", "element_density"))
    db = database or default_database()
    pop = np.zeros(len(lines))
    for z in np.unique(lines.z):
        stages = db.element(int(z))
        low = (debye_hueckel_lowering(np.array([s.charge for s in stages], dtype=float),
                                     debye_length(t, ne)) if lowering else None)
        # the plain level sums the fits invert (see docs/diagnostics.md)
        frac = saha_chain(int(z), t, electron_density=ne, lowering_ev=low, database=db,
                          truncation="plain")
        for ch in np.unique(lines.charge[lines.z == z]):
            sel = (lines.z == z) & (lines.charge == ch)
            sp = db.species((int(z), int(ch)))
            u = float(partition_function(sp, t, truncation="plain"))
            pop[sel] = (nel * frac[int(ch)] * lines.upper_g[sel]
                        * np.exp(-lines.upper_energy_ev[sel] / (K_B_EV * t)) / u)
    rate = lines.a_value * pop / (4.0 * np.pi)
    if photon_counts:
        return rate
    return rate * H * C / (lines.wavelength_nm * 1e-7)


def synthesize(lines: LineList, temperature: Any, electron_density: Any, *,
               relative_error: float = 0.0, a_relative_error: float = 0.0,
               optical_depth: Any = None, scale: float = 1.0, lowering: bool = True,
               photon_counts: bool = False, rng: np.random.Generator | int | None = None,
               database=None) -> LineList:
    """Synthetic measured intensities of ``lines`` at (T, n_e), with noise.

    Parameters
    ----------
    lines : LineList
        The lines (their intensities are replaced).
    temperature, electron_density
        T [K] and n_e [cm^-3].
    relative_error : float
        r: log-normal noise of relative size r on every intensity, quoted as the error
        (``intensity_error = r I_obs``).  0 gives exact intensities with a 1 % quoted error.
    a_relative_error : float
        Relative error of the tabulated A values: the returned list carries perturbed A and
        ``A_rel_error = a_relative_error``.
    optical_depth : float or array_like, optional
        Line-centre-free slab optical depth per line (escape factor (1 - e^-tau) / tau).
    scale : float
        Overall factor (calibration, geometry).
    lowering, photon_counts, database
        As :func:`line_emissivity`.
    rng : numpy Generator or int seed, optional

    Returns
    -------
    LineList
    """
    for name, v in (("relative_error", relative_error), ("a_relative_error", a_relative_error)):
        if not (np.isfinite(v) and v >= 0):
            raise InputError(f"{name} must be >= 0, got {v}")
    scale = float(as_positive_array(scale, "", "scale"))
    rng = np.random.default_rng(rng)
    eps = scale * line_emissivity(lines, temperature, electron_density, lowering=lowering,
                                  photon_counts=photon_counts, database=database)
    if optical_depth is not None:
        tau = np.broadcast_to(as_array(optical_depth, "", "optical_depth", allow_negative=False),
                              eps.shape)
        small = tau < 1e-8
        escape = np.where(small, 1.0, -np.expm1(-tau) / np.where(small, 1.0, tau))
        eps = eps * escape
    noisy = eps * np.exp(relative_error * rng.standard_normal(eps.shape))
    err = (relative_error if relative_error > 0 else 0.01) * noisy
    a_tab = lines.a_value * np.exp(a_relative_error * rng.standard_normal(eps.shape))
    return LineList.from_arrays(
        species=list(lines.species), wavelength_nm=lines.wavelength_nm, intensity=noisy,
        intensity_error=err, upper_energy_ev=lines.upper_energy_ev, upper_g=lines.upper_g,
        a_value=a_tab, a_rel_error=a_relative_error, lower_energy_ev=lines.lower_energy_ev,
        label=list(lines.label), origin=list(lines.origin))


def synthetic_line_list(species: Sequence[str] | str, n_lines: int | Sequence[int] = 8, *,
                        upper_range_ev: tuple[float, float] | None = None,
                        wavelength_range_nm: tuple[float, float] = (200.0, 900.0),
                        a_range: tuple[float, float] = (1e6, 1e8),
                        resonance_lines: int = 0,
                        rng: np.random.Generator | int | None = None,
                        database=None) -> LineList:
    """A synthetic line list built on real levels of the database.

    Upper levels (energy, g) are drawn from the bound levels of each species with energy in
    ``upper_range_ev`` (default: 0.3 to 0.8 of the ionization energy); each gets a real
    lower level of that species chosen so that the wavelength falls in
    ``wavelength_range_nm``, and an invented A value, log-uniform in ``a_range``.
    ``resonance_lines`` of them per species end on the ground level instead, when the
    wavelength range allows.  Labels read "synthetic".

    Raises
    ------
    InputError
        Too few levels in the window for the lines asked for.
    """
    from sahaboltz.data.database import default_database
    db = database or default_database()
    rng = np.random.default_rng(rng)
    names = [species] if isinstance(species, str) else list(species)
    counts = [n_lines] * len(names) if np.ndim(n_lines) == 0 else list(n_lines)
    if len(counts) != len(names):
        raise InputError("n_lines must be one number or one per species")
    lam_lo, lam_hi = wavelength_range_nm
    de_lo, de_hi = 1e7 / lam_hi * HC_EV_CM, 1e7 / lam_lo * HC_EV_CM   # photon energies [eV]
    cols = {k: [] for k in ("species", "wl", "eu", "gu", "a", "el")}
    for name, n in zip(names, counts):
        sp = db.species(name)
        e = sp.bound_energy_ev
        g = sp.bound_g
        lo, hi = upper_range_ev or (0.3 * sp.ionization_energy_ev, 0.8 * sp.ionization_energy_ev)
        # upper levels with at least one lower level giving a wavelength in range
        cand = [i for i in np.flatnonzero((e >= lo) & (e <= hi))
                if np.any((e[i] - e >= de_lo) & (e[i] - e <= de_hi))]
        # distinct energies only (several J at one energy would make duplicate lines)
        cand = list({round(float(e[i]), 6): i for i in cand}.values())
        if len(cand) < n:
            raise InputError(f"{sp.name}: only {len(cand)} levels between {lo:.3g} and "
                             f"{hi:.3g} eV can emit in {lam_lo:g}-{lam_hi:g} nm; ask for fewer "
                             "lines or widen the windows")
        res_ok = [i for i in cand if de_lo <= e[i] - e[0] <= de_hi]
        n_res = min(resonance_lines, len(res_ok), n)
        pick_res = list(rng.choice(res_ok, size=n_res, replace=False)) if n_res else []
        rest = [i for i in cand if i not in pick_res]
        pick = pick_res + list(rng.choice(rest, size=n - n_res, replace=False))
        for k, i in enumerate(pick):
            if k < n_res:
                j = 0
            else:
                ok = np.flatnonzero((e[i] - e >= de_lo) & (e[i] - e <= de_hi) & (e > e[0] + 0.3))
                if ok.size == 0:
                    ok = np.flatnonzero((e[i] - e >= de_lo) & (e[i] - e <= de_hi))
                j = int(rng.choice(ok))
            cols["species"].append(sp.name)
            cols["wl"].append(1e7 * HC_EV_CM / (e[i] - e[j]))
            cols["eu"].append(float(e[i]))
            cols["gu"].append(float(g[i]))
            cols["el"].append(float(e[j]))
            cols["a"].append(float(np.exp(rng.uniform(*np.log(a_range)))))
    n_all = len(cols["wl"])
    return LineList.from_arrays(
        species=cols["species"], wavelength_nm=np.array(cols["wl"]),
        intensity=np.ones(n_all), intensity_error=np.full(n_all, 0.01),
        upper_energy_ev=np.array(cols["eu"]), upper_g=np.array(cols["gu"]),
        a_value=np.array(cols["a"]), lower_energy_ev=np.array(cols["el"]),
        label=["synthetic"] * n_all)
