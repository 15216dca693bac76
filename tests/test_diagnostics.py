"""Plasma diagnostics: round trips through the forward model, fits against numpy, flags, LTE.

Line lists here are scenarios of our own: real Fe I / Fe II level energies and g from the
shipped level data (NIST ASD via our importer) with INVENTED A values and wavelengths
(`synthetic_line_list`).  No published worked example with its line data was found, so none
is reproduced (see docs/diagnostics.md).
"""

import astropy.constants as ac
import astropy.units as u
import numpy as np
import pytest

from sahaboltz.diagnostics import (LineList, all_pairs, boltzmann_plot, mcwhirter_check,
                                   ratio_density, saha_boltzmann_plot, synthesize,
                                   synthetic_line_list)
from sahaboltz.diagnostics.fitting import weighted_linear_fit
from sahaboltz.errors import InputError

SEEDS = range(30)


@pytest.fixture(scope="module")
def fe_lines():
    return synthetic_line_list(["Fe I", "Fe II"], 10, rng=11)


def _random_state(rng):
    """T uniform 7000-14000 K, n_e log-uniform 1e15-1e18 cm^-3 (a laboratory LTE range)."""
    return rng.uniform(7000.0, 14000.0), 10 ** rng.uniform(15.0, 18.0)


# -- forward model against an independent Saha-Boltzmann evaluation ---------------------------
def test_forward_ratio_matches_saha_equation_with_astropy_constants(fe_lines):
    """I(Fe II)/I(Fe I) from the forward model = the Saha-Boltzmann ratio in which the partition
    functions cancel, evaluated here with astropy CODATA constants and Debye-Hueckel lowering."""
    t, ne = 10500.0, 4e16
    m = synthesize(fe_lines, t, ne, relative_error=0.0)
    n_i, i_i = all_pairs(m)
    k = ac.k_B.cgs.value
    kt_ev = (ac.k_B * t * u.K).to_value(u.eV)
    s = (2 * np.pi * ac.m_e.cgs.value * k * t / ac.h.cgs.value**2) ** 1.5
    e2 = (ac.e.gauss.value) ** 2
    lam_d = np.sqrt(k * t / (4 * np.pi * e2 * 2 * ne))
    dchi = (e2 / lam_d * u.erg).to_value(u.eV)
    chi = 7.9024681  # Fe I ionization energy [eV], NIST ASD (as in level_data)
    ratio = (2 * s / ne * (i_i.upper_g * i_i.a_value * n_i.wavelength_nm)
             / (n_i.upper_g * n_i.a_value * i_i.wavelength_nm)
             * np.exp(-(i_i.upper_energy_ev + chi - dchi - n_i.upper_energy_ev) / kt_ev))
    np.testing.assert_allclose(i_i.intensity / n_i.intensity, ratio, rtol=1e-9)


def test_forward_boltzmann_within_one_stage(fe_lines):
    """Within one species, I lambda / (g A) ratios follow exp(-dE/kT) (astropy k_B)."""
    t = 8000.0
    fe1 = synthesize(fe_lines, t, 1e16).of_species("Fe I")
    kt_ev = (ac.k_B * t * u.K).to_value(u.eV)
    y = fe1.intensity * fe1.wavelength_nm / (fe1.upper_g * fe1.a_value)
    np.testing.assert_allclose(y / y[0], np.exp(-(fe1.upper_energy_ev - fe1.upper_energy_ev[0])
                                                / kt_ev), rtol=1e-10)


# -- exact round trips -------------------------------------------------------------------------
@pytest.mark.parametrize("t, ne", [(7500.0, 3e15), (11000.0, 2e17)])
def test_exact_round_trip(fe_lines, t, ne):
    m = synthesize(fe_lines, t, ne)
    for sp in ("Fe I", "Fe II"):
        assert boltzmann_plot(m, sp).temperature == pytest.approx(t, rel=1e-9)
    sb = saha_boltzmann_plot(m)
    assert sb.temperature == pytest.approx(t, rel=1e-9)
    assert sb.electron_density == pytest.approx(ne, rel=1e-8)
    sb = saha_boltzmann_plot(m, electron_density=ne)
    assert sb.temperature == pytest.approx(t, rel=1e-9)
    n_i, i_i = all_pairs(m)
    np.testing.assert_allclose(ratio_density(n_i, i_i, t).electron_density, ne, rtol=1e-8)


def test_exact_round_trip_photon_counts_and_no_lowering(fe_lines):
    m = synthesize(fe_lines, 9500.0, 5e16, photon_counts=True, lowering=False)
    assert boltzmann_plot(m, "Fe I", photon_counts=True).temperature == pytest.approx(9500, 1e-9)
    sb = saha_boltzmann_plot(m, photon_counts=True, lowering=False)
    assert sb.lowering_ev == 0.0
    assert sb.electron_density == pytest.approx(5e16, rel=1e-8)
    # energy-unit analysis of photon counts is biased: the lambda factor matters
    assert abs(boltzmann_plot(m, "Fe I").temperature - 9500) > 1.0


# -- noisy round trips: recovered within the stated uncertainties -----------------------------
def _pulls(values):
    return np.array(values)


def test_boltzmann_recovery_within_stated_uncertainty(fe_lines):
    rng = np.random.default_rng(2024)
    pulls = []
    for seed in SEEDS:
        t, ne = _random_state(rng)
        m = synthesize(fe_lines, t, ne, relative_error=0.05, a_relative_error=0.05, rng=seed)
        fit = boltzmann_plot(m, "Fe I")
        pulls.append((fit.temperature - t) / fit.temperature_error)
    pulls = _pulls(pulls)
    # a 3-sigma miss has probability 0.3 % for a correct error; allow one in 30 (common practice)
    assert np.sum(np.abs(pulls) > 3) <= 1
    # and the errors are not inflated: the pull spread is near 1 (0.6-1.4 for 30 draws)
    assert 0.6 < np.std(pulls) < 1.4


def test_saha_boltzmann_recovery_within_stated_uncertainty(fe_lines):
    rng = np.random.default_rng(7)
    pt, pn = [], []
    for seed in SEEDS:
        t, ne = _random_state(rng)
        m = synthesize(fe_lines, t, ne, relative_error=0.05, rng=seed)
        fit = saha_boltzmann_plot(m)
        pt.append((fit.temperature - t) / fit.temperature_error)
        pn.append(np.log(fit.electron_density / ne) / fit.ln_ne_error)
    for p in (_pulls(pt), _pulls(pn)):
        assert np.sum(np.abs(p) > 3) <= 1
        assert 0.6 < np.std(p) < 1.4


def test_saha_boltzmann_given_ne_propagates_its_error(fe_lines):
    rng = np.random.default_rng(99)
    pulls, errs = [], []
    for seed in SEEDS:
        t, ne = _random_state(rng)
        m = synthesize(fe_lines, t, ne, relative_error=0.03, rng=seed)
        ne_meas = ne * np.exp(0.2 * rng.standard_normal())     # 20 % error on the given n_e
        fit = saha_boltzmann_plot(m, electron_density=ne_meas, electron_density_error=0.2 * ne_meas)
        pulls.append((fit.temperature - t) / fit.temperature_error)
        errs.append(fit.temperature_error)
        # without the n_e error the stated uncertainty must be smaller
        fit0 = saha_boltzmann_plot(m, electron_density=ne_meas)
        assert fit0.temperature_error < fit.temperature_error
    pulls = _pulls(pulls)
    assert np.sum(np.abs(pulls) > 3) <= 1
    assert 0.6 < np.std(pulls) < 1.4


def test_ratio_density_recovery_with_temperature_error(fe_lines):
    rng = np.random.default_rng(5)
    pulls = []
    for seed in SEEDS:
        t, ne = _random_state(rng)
        m = synthesize(fe_lines, t, ne, relative_error=0.05, rng=seed)
        t_meas = t + 150.0 * rng.standard_normal()
        n_i, i_i = all_pairs(m)
        res = ratio_density(n_i.select([0]), i_i.select([0]), t_meas, 150.0)
        pulls.append(np.log(res.electron_density[0] / ne) / res.ln_ne_error[0])
        # the budget adds in quadrature to the total
        b = res.error_budget
        np.testing.assert_allclose(np.sqrt(b["lines"]**2 + b["temperature"]**2
                                           + b["ionization_energy"]**2), res.ln_ne_error)
    pulls = _pulls(pulls)
    assert np.sum(np.abs(pulls) > 3) <= 1
    assert 0.6 < np.std(pulls) < 1.4


# -- the fit itself against numpy, and the studentized residuals against brute force ------------
def test_boltzmann_fit_matches_numpy_polyfit(fe_lines):
    m = synthesize(fe_lines, 9000.0, 1e17, relative_error=0.05, rng=3).of_species("Fe I")
    fit = boltzmann_plot(m)
    y = np.log(m.intensity * m.wavelength_nm / (m.upper_g * m.a_value))
    sig = m.intensity_error / m.intensity
    p, cov = np.polyfit(m.upper_energy_ev, y, 1, w=1 / sig, cov="unscaled")
    assert fit.slope == pytest.approx(p[0], rel=1e-10)
    assert fit.intercept == pytest.approx(p[1], rel=1e-10)
    birge = max(1.0, fit.chi2 / fit.dof)
    np.testing.assert_allclose(fit.cov, cov * birge, rtol=1e-8)
    k_ev = ac.k_B.to_value(u.eV / u.K)
    assert fit.temperature == pytest.approx(-1 / (k_ev * p[0]), rel=1e-10)
    assert fit.temperature_error == pytest.approx(k_ev * fit.temperature**2
                                                  * np.sqrt(cov[0, 0] * birge), rel=1e-8)


def test_studentized_residuals_equal_leave_one_out_refits():
    rng = np.random.default_rng(1)
    x = np.linspace(1.0, 6.0, 9)
    sig = np.full(9, 0.05)
    y = 3.0 - 1.1 * x + sig * rng.standard_normal(9) * 2.0   # scatter above the stated errors
    design = np.column_stack([x, np.ones_like(x)])
    fit = weighted_linear_fit(design, y, sig)
    for i in range(9):
        keep = np.arange(9) != i
        p, cov = np.polyfit(x[keep], y[keep], 1, w=1 / sig[keep], cov="unscaled")
        chi2 = np.sum(((y[keep] - np.polyval(p, x[keep])) / sig[keep]) ** 2)
        s2 = max(1.0, chi2 / (8 - 2))
        var_pred = np.array([x[i], 1.0]) @ cov @ np.array([x[i], 1.0]) * s2
        t = (y[i] - np.polyval(p, x[i])) / np.sqrt(sig[i] ** 2 * s2 + var_pred)
        assert fit.studentized[i] == pytest.approx(t, rel=1e-9)


# -- flags ------------------------------------------------------------------------------------
def test_self_absorbed_resonance_line_is_flagged():
    lines = synthetic_line_list("Fe I", 10, resonance_lines=2, rng=4)
    res = np.flatnonzero(lines.lower_energy_ev == 0.0)
    assert res.size == 2
    tau = np.zeros(len(lines))
    tau[res[0]] = 4.0                       # escape factor 0.25: strongly self-absorbed
    m = synthesize(lines, 9000.0, 1e17, relative_error=0.03, optical_depth=tau, rng=8)
    fit = boltzmann_plot(m)
    assert "self-absorption?" in fit.flags[res[0]]
    assert "resonance" in fit.flags[res[1]]
    assert "self-absorption?" not in fit.flags[res[1]]
    assert sum("resonance" in f for f in fit.flags) == 2
    refit = boltzmann_plot(m, reject_outliers=True)
    assert not refit.used[res[0]]
    assert abs(refit.temperature - 9000.0) < 3 * refit.temperature_error


def test_outlier_flag_and_rejection(fe_lines):
    m = synthesize(fe_lines, 10000.0, 1e17, relative_error=0.04, rng=21).of_species("Fe II")
    inten = m.intensity.copy()
    inten[3] *= 2.5                          # a blend, say: ln 2.5 = 23 sigma high
    bad = m.with_intensity(inten, m.intensity_error)
    fit = boltzmann_plot(bad)
    assert "outlier" in fit.flags[3]
    assert sum("outlier" in f for f in fit.flags) >= 1
    refit = boltzmann_plot(bad, reject_outliers=True)
    assert "rejected" in refit.flags[3] and not refit.used[3]
    assert refit.used.sum() == len(bad) - 1
    assert abs(refit.temperature - 10000.0) < 3 * refit.temperature_error
    clean = boltzmann_plot(m)
    assert not any("outlier" in f for f in clean.flags)


# -- McWhirter --------------------------------------------------------------------------------
def test_mcwhirter_check_on_results(fe_lines):
    # Fe I largest adjacent-level gap: a 5D0 (978.074 cm-1) to a 5F5 (6928.268 cm-1), NIST ASD
    # (from memory) = 5950.194 cm-1
    gap_ev = (5950.194 / u.cm * ac.h * ac.c).to_value(u.eV)
    chk = mcwhirter_check(10000.0, 1e12, species=["Fe I"])
    assert chk.delta_e_ev == pytest.approx(gap_ev, rel=1e-5)
    # McWhirter (1965): n_e >= 1.6e12 T^1/2 dE^3 (the usual form, from memory)
    assert chk.required_density == pytest.approx(1.6e12 * 100.0 * gap_ev**3, rel=1e-5)
    assert chk.satisfied is False and "doubtful" in chk.message
    m = synthesize(fe_lines, 9000.0, 1e13)          # too thin for LTE at these gaps
    sb = saha_boltzmann_plot(m)
    assert sb.lte.satisfied is False
    m = synthesize(fe_lines, 9000.0, 1e17)
    assert saha_boltzmann_plot(m).lte.satisfied is True
    assert boltzmann_plot(m, "Fe I").lte.satisfied is None      # n_e not known
    assert boltzmann_plot(m, "Fe I", electron_density=1e17).lte.satisfied is True
    assert mcwhirter_check(9000.0, 1e15, delta_e_ev=2.0).gap_species == "given"


# -- bad input to the fits ----------------------------------------------------------------------
def _few(n, species="Fe I", energies=None):
    return LineList.from_arrays(species=species, wavelength_nm=np.full(n, 400.0),
                                intensity=np.ones(n), intensity_error=np.full(n, 0.05),
                                upper_energy_ev=energies if energies is not None
                                else np.linspace(3, 5, n), upper_g=np.full(n, 5.0),
                                a_value=np.full(n, 1e7))


def test_fit_input_errors(fe_lines):
    m = synthesize(fe_lines, 9000.0, 1e17)
    with pytest.raises(InputError, match="one species"):
        boltzmann_plot(m)
    with pytest.raises(InputError, match="at least 3"):
        boltzmann_plot(_few(2))
    with pytest.raises(InputError, match="one upper energy"):
        boltzmann_plot(_few(4, energies=np.full(4, 3.0)))
    rising = _few(4)
    rising = rising.with_intensity(np.exp(np.linspace(0, 2, 4)), np.full(4, 0.05))
    with pytest.raises(InputError, match="rises"):
        boltzmann_plot(rising)
    with pytest.raises(InputError, match="no line of Ca I"):
        boltzmann_plot(m, "Ca I")
    with pytest.raises(InputError, match="successive"):
        saha_boltzmann_plot(LineList.from_arrays(
            species=["Fe I"] * 3 + ["Fe III"] * 3, wavelength_nm=np.full(6, 400.0),
            intensity=np.ones(6), intensity_error=np.full(6, .05),
            upper_energy_ev=[3, 4, 5, 3, 4, 5.], upper_g=np.full(6, 5.), a_value=np.full(6, 1e7)))
    with pytest.raises(InputError, match="no line of element Ca"):
        saha_boltzmann_plot(m, "Ca")
    n_i, i_i = all_pairs(m)
    with pytest.raises(InputError, match="pair them"):
        ratio_density(n_i.select([0, 1]), i_i.select([0, 1, 2]), 9000.0)
    with pytest.raises(InputError, match="not successive"):
        ratio_density(n_i.select([0]), n_i.select([1]), 9000.0)
    with pytest.raises(InputError, match="temperature"):
        ratio_density(n_i.select([0]), i_i.select([0]), -5.0)
    with pytest.raises(InputError, match="electron_density"):
        saha_boltzmann_plot(m, electron_density=0.0)
