"""The default physics: occupation probabilities wherever n_e is known, pressure ionization,
validity warnings, and failures reported per state, never per array.

Independent references used here:
- the ideal Saha equation with U(H I) = 2, U(H II) = 1 (the textbook form, e.g. Rybicki &
  Lightman, Radiative Processes in Astrophysics, eq. 9.45), with constants from astropy
  (CODATA 2018) and the H ionization energy 13.598434 eV (NIST ASD);
- the electron thermal wavelength h / sqrt(2 pi m_e k T) and the ion-sphere radius
  (3 / (4 pi n_e))^(1/3) of the usual definitions of the degeneracy and coupling parameters
  (e.g. the NRL Plasma Formulary), with astropy constants;
- the low-density limit of Hummer & Mihalas (1988, ApJ 331, 794): w -> 1, so the weighted
  sum tends to the plain sum of the tabulated levels.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from astropy import constants as ac
from astropy import units as u

from sahaboltz.data.composition import Composition, solar
from sahaboltz.data.database import default_database
from sahaboltz.data.elements import atomic_number, spectroscopic_name
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.equilibrium.state import (CONVERGED, NOT_CONVERGED, STRONGLY_COUPLED,
                                         UNREACHABLE)
from sahaboltz.errors import ConvergenceError, TruncationWarning, ValidityWarning
from sahaboltz.kernels.partition import PartitionModel

HYDROGEN = Composition.from_number({"H": 1.0})
CHI_H_EV = 13.598434  # NIST ASD ionization energy of H I


def _ideal_saha_neutral_fraction(t: float, n_h: float) -> float:
    """H I fraction of pure hydrogen from the ideal Saha equation with U(H I) = 2,
    U(H II) = 1 and n_e = n(H II) (astropy constants)."""
    lam = (ac.h / np.sqrt(2 * np.pi * ac.m_e * ac.k_B * t * u.K)).to(u.cm).value
    kt_ev = (ac.k_B * t * u.K).to(u.eV).value
    s = 2.0 * (1.0 / 2.0) / lam**3 * np.exp(-CHI_H_EV / kt_ev) / n_h   # x^2 / (1 - x)
    x = 0.5 * (-s + np.sqrt(s * s + 4.0 * s))
    return 1.0 - x


# -- the default truncation -------------------------------------------------------------------
@pytest.mark.parametrize("name, t", [("H I", 8000.0), ("Fe I", 5000.0), ("Ca I", 9000.0),
                                     ("Fe II", 12000.0)])
def test_occupation_weights_tend_to_the_plain_sum_at_low_density(name, t):
    sp = default_database().species(name)
    plain = PartitionModel([sp], "plain").evaluate(t)[0]
    weighted = PartitionModel([sp], "occupation").evaluate(t, n_e=1e-2)[0]
    assert weighted == pytest.approx(plain, rel=1e-6)
    # and at a photospheric-to-chromospheric n_e the weights only take away
    dense = PartitionModel([sp], "occupation").evaluate(t, n_e=1e16)[0]
    assert dense < plain


def test_solar_core_hydrogen_is_pressure_ionized_by_default():
    # T = 1.57e7 K and n_H = 6e25 cm^-3: values for the solar centre from memory (standard
    # solar models give T_c = 1.57e7 K, rho_c = 150 g cm^-3, X_c = 0.35)
    t, n_h = 1.57e7, 6e25
    default = solve_equilibrium(HYDROGEN, t, hydrogen_density=n_h)
    ideal = _ideal_saha_neutral_fraction(t, n_h)
    neutral = float(default.stage_fractions("H")[0])
    assert 0.05 < ideal < 0.5          # the textbook answer leaves a good share neutral
    assert neutral < 1e-3 * ideal      # the default is far more ionized than that
    # the plain sum, chosen explicitly, is the absurd answer of the old default and warns
    with pytest.warns(TruncationWarning, match="H I"):
        plain = solve_equilibrium(HYDROGEN, t, hydrogen_density=n_h, truncation="plain")
    assert float(plain.stage_fractions("H")[0]) > 0.9


def test_helium_at_solar_core_conditions_is_fully_ionized():
    # He/H by number 0.085 (Asplund et al. 2009 photosphere; the core has more He, which
    # changes nothing here)
    mix = Composition.from_number({"H": 1.0, "He": 0.085})
    state = solve_equilibrium(mix, 1.57e7, hydrogen_density=6e25)
    he = np.asarray(state.stage_fractions("He")).ravel()
    assert he[2] > 0.9999 and np.isfinite(he).all()


def test_vanishing_ground_state_weights_give_no_nan():
    # densities where even the ground-state occupation probability of H falls far below 1
    t = np.array([1e5, 1e6, 1e7])
    n_h = np.array([1e25, 1e27, 1e28])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        state = solve_equilibrium(HYDROGEN, t, hydrogen_density=n_h)
    assert state.converged.all()
    u_h = state.partition_function("H I")
    assert np.isfinite(u_h).all() and (u_h >= 0).all() and (u_h < 2.0).all()
    assert np.isfinite(state.stage_fractions("H")).all()
    pops, _ = state.level_populations("H I")
    assert np.isfinite(pops).all()


def test_saha_chain_and_state_use_the_same_partition_function():
    # at fixed P_e the Saha ratio N(H II)/N(H I) scales as U(H II)/U(H I): the ratio between
    # default and plain solves must be the inverse ratio of the U each state reports
    sol = solar()
    default = solve_equilibrium(sol, 12000.0, electron_pressure=200.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TruncationWarning)
        plain = solve_equilibrium(sol, 12000.0, electron_pressure=200.0, truncation="plain")

    def ratio(s):
        f = np.asarray(s.stage_fractions("H")).ravel()
        return f[-1] / f[-2]

    u_ratio = float(plain.partition_function("H I") / default.partition_function("H I"))
    assert ratio(default) / ratio(plain) == pytest.approx(u_ratio, rel=1e-9)
    # the plain sum over-counts the dissolved upper levels by several per cent here
    assert u_ratio > 1.02
    # and the level populations of the state add up to the species' number density
    pops, _ = default.level_populations("H I")
    assert pops.sum(axis=0) == pytest.approx(default.number_density("H I"), rel=1e-10)


# -- validity ---------------------------------------------------------------------------------
def test_degeneracy_and_coupling_parameters_match_their_definitions():
    t = np.array([6000.0, 1e6])
    state = solve_equilibrium(HYDROGEN, t, hydrogen_density=np.array([1e16, 1e24]))
    ne = state.n_e * u.cm**-3
    lam = ac.h / np.sqrt(2 * np.pi * ac.m_e * ac.k_B * t * u.K)
    theta = (ne * lam**3).to(u.dimensionless_unscaled).value
    a = (3.0 / (4.0 * np.pi * ne)) ** (1.0 / 3.0)
    e2 = (ac.e.gauss**2)
    gamma = (e2 / (a * ac.k_B * t * u.K)).to(u.dimensionless_unscaled).value
    np.testing.assert_allclose(state.degeneracy_parameter, theta, rtol=1e-6)
    np.testing.assert_allclose(state.coupling_parameter, gamma, rtol=1e-6)


def test_degenerate_or_coupled_states_warn_and_ordinary_ones_do_not():
    with pytest.warns(ValidityWarning, match="degenerate"):
        solve_equilibrium(HYDROGEN, [1e4, 1e5], hydrogen_density=[1e15, 3e26])
    with pytest.warns(ValidityWarning, match="strongly coupled"):
        solve_equilibrium(HYDROGEN, 3e4, hydrogen_density=3e23)
    with warnings.catch_warnings():
        warnings.simplefilter("error", ValidityWarning)
        solve_equilibrium(solar(), np.array([4000.0, 5800.0, 2e4]), gas_pressure=1e5)


def test_explicit_plain_sum_warns_where_it_misleads():
    sol = solar()
    t = np.linspace(8400.0, 12600.0, 8)
    with pytest.warns(TruncationWarning) as rec:
        plain = solve_equilibrium(sol, t, gas_pressure=1e5, truncation="plain")
    msg = str(rec[0].message)
    for name in ("Na I", "Ca I", "Mg I"):
        assert name in msg
    # the count given for Na I is the number of states where its plain U exceeds the
    # occupation-weighted U at the state's n_e by more than 10 %
    sp = default_database().species("Na I")
    u_plain = PartitionModel([sp], "plain").evaluate(t)[0]
    u_occ = PartitionModel([sp], "occupation").evaluate(t, n_e=plain.n_e)[0]
    assert f"Na I ({int((u_plain > 1.10 * u_occ).sum())})" in msg
    # no warning with the default, nor with the plain sum where it is harmless
    with warnings.catch_warnings():
        warnings.simplefilter("error", TruncationWarning)
        solve_equilibrium(sol, t, gas_pressure=1e5)
        solve_equilibrium(sol, np.array([3500.0, 4500.0]), gas_pressure=1e5,
                          truncation="plain")


# -- failures per state -----------------------------------------------------------------------
def _mixed_grid():
    """Six electron-pressure states, two of them beyond what the gas can supply at 2,000 K
    (H- takes the electrons: the mean charge per nucleus reaches zero first)."""
    t = np.array([2000.0, 4000.0, 6000.0, 2000.0, 8000.0, 5000.0])
    pe = np.array([1e4, 1.0, 10.0, 1e8, 100.0, 3.0])
    return t, pe, np.array([0, 3])


def test_raise_names_every_failed_state_and_carries_the_partial_result():
    sol = solar()
    t, pe, bad = _mixed_grid()
    with pytest.raises(ConvergenceError) as info:
        solve_equilibrium(sol, t, electron_pressure=pe)
    err = info.value
    assert err.indices == [(int(i),) for i in bad]
    for i in bad:
        assert f"state ({i},)" in str(err)
    good = np.setdiff1d(np.arange(t.size), bad)
    alone = solve_equilibrium(sol, t[good], electron_pressure=pe[good])
    np.testing.assert_allclose(err.state.n_e[good], alone.n_e, rtol=1e-12)
    np.testing.assert_allclose(np.asarray(err.state.stage_fractions("Fe"))[:, good],
                               alone.stage_fractions("Fe"), rtol=1e-10, atol=1e-300)


def test_mask_gives_status_reason_and_nan_only_at_failed_states():
    sol = solar()
    t, pe, bad = _mixed_grid()
    state = solve_equilibrium(sol, t, electron_pressure=pe, errors="mask")
    expect = np.full(t.size, CONVERGED)
    expect[bad] = UNREACHABLE
    np.testing.assert_array_equal(state.status, expect)
    assert set(state.failures()) == {(int(i),) for i in bad}
    failed = ~state.converged
    for q in (state.n_e, state.gas_pressure, state.mass_density,
              np.asarray(state.stage_fractions("H"))[0]):
        assert np.isnan(q[failed]).all() and np.isfinite(q[~failed]).all()
    assert all(r == "" for r in state.reason[~failed])


def test_largest_reachable_electron_pressure_is_the_edge():
    sol = solar()
    state = solve_equilibrium(sol, 2000.0, electron_pressure=1e4, errors="mask")
    assert state.status == UNREACHABLE
    reason = str(state.reason)
    pe_max = float(reason.split("at most ")[1].split(" dyn")[0])
    inside = solve_equilibrium(sol, 2000.0, electron_pressure=0.9 * pe_max)
    assert inside.converged.all()
    outside = solve_equilibrium(sol, 2000.0, electron_pressure=1.1 * pe_max, errors="mask")
    assert outside.status == UNREACHABLE


def test_strong_coupling_with_lowering_is_refused_per_state():
    t = np.array([1e4, 1e4, 3e4, 1e5])
    n_h = np.array([1e15, 1e25, 1e22, 1e18])
    state = solve_equilibrium(HYDROGEN, t, hydrogen_density=n_h, lowering=True, errors="mask")
    np.testing.assert_array_equal(state.status, [CONVERGED, STRONGLY_COUPLED,
                                                 STRONGLY_COUPLED, CONVERGED])
    assert all("strongly coupled" in r for r in state.reason[1:3])
    with pytest.raises(ConvergenceError, match="2 strongly_coupled"):
        solve_equilibrium(HYDROGEN, t, hydrogen_density=n_h, lowering=True)


# -- the domain ---------------------------------------------------------------------------------
@pytest.mark.slow
def test_default_physics_converges_over_the_whole_domain():
    """T = 1e3 - 1e7 K x P_gas = 1e-4 - 1e10 dyn cm^-2 (solar mixture), then the mass-density
    and hydrogen-density ranges that domain spans, with the default physics: every state
    converges; with Debye-Hueckel lowering every state converges or is refused as strongly
    coupled; with the electron pressure every state converges or is unreachable."""
    sol = solar()
    n = 22
    tt, pp = np.meshgrid(np.geomspace(1e3, 1e7, n), np.geomspace(1e-4, 1e10, n),
                         indexing="ij")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        base = solve_equilibrium(sol, tt, gas_pressure=pp, errors="mask")
        counts = {"gas_pressure": np.bincount(base.status.ravel(), minlength=4)}
        for closure, values in (("mass_density", base.mass_density),
                                ("hydrogen_density", base.hydrogen_density)):
            lo, hi = np.nanmin(values), np.nanmax(values)
            grid = np.geomspace(lo, hi, n)[None, :]
            s = solve_equilibrium(sol, tt[:, :1], errors="mask", **{closure: grid})
            counts[closure] = np.bincount(s.status.ravel(), minlength=4)
        low = solve_equilibrium(sol, tt, gas_pressure=pp, lowering=True, errors="mask")
        counts["lowering"] = np.bincount(low.status.ravel(), minlength=4)
        pe = solve_equilibrium(sol, tt, electron_pressure=pp, errors="mask")
        counts["electron_pressure"] = np.bincount(pe.status.ravel(), minlength=4)
    for closure in ("gas_pressure", "mass_density", "hydrogen_density"):
        assert counts[closure][CONVERGED] == n * n, (closure, counts[closure])
    assert counts["lowering"][NOT_CONVERGED] == 0 and counts["lowering"][UNREACHABLE] == 0
    assert counts["lowering"][CONVERGED] > 0.9 * n * n
    assert counts["electron_pressure"][NOT_CONVERGED] == 0
    assert counts["electron_pressure"][STRONGLY_COUPLED] == 0


# -- the command line -----------------------------------------------------------------------
def _cli(capsys, *argv):
    from sahaboltz.faces.cli import main

    code = main(list(argv))
    out = capsys.readouterr()
    return code, out.out, out.err


def test_state_command_says_what_it_used(capsys):
    import json

    code, out, err = _cli(capsys, "state", "-T", "12000", "--gas-pressure", "1e5", "--mix",
                          "solar", "--elements", "H,Na", "--format", "json")
    assert code == 0 and err == ""
    doc = json.loads(out)
    assert doc["meta"]["truncation"] == "occupation"
    for key in ("coupling_parameter", "degeneracy_parameter"):
        assert doc["meta"][key] > 0
    state = solve_equilibrium(solar(), 12000.0, gas_pressure=1e5)
    na = next(r for r in doc["rows"] if r["species"] == "Na I")
    assert na["U"] == pytest.approx(float(state.partition_function("Na I")), rel=1e-6)


def test_explicit_plain_sum_gives_a_one_line_note(capsys):
    code, _, err = _cli(capsys, "state", "-T", "12000", "--gas-pressure", "1e5", "--mix",
                        "solar", "--elements", "Na", "--truncation", "plain")
    assert code == 0
    notes = [line for line in err.splitlines() if line.startswith("sahaboltz: note:")]
    assert len(notes) == 1 and "Na I" in notes[0]
    code, _, err = _cli(capsys, "partition", "Na I", "-T", "12000", "--n-e", "1e16",
                        "--truncation", "plain")
    assert code == 0 and err.startswith("sahaboltz: note:") and "Na I" in err


def test_state_lowering_column_follows_debye_hueckel(capsys):
    import json

    code, out, _ = _cli(capsys, "state", "-T", "20000", "--hydrogen-density", "1e18", "--mix",
                        "solar", "--elements", "Fe", "--lowering", "--min-fraction", "1e-8",
                        "--format", "json")
    assert code == 0
    doc = json.loads(out)
    assert doc["meta"]["truncation"] == "lowered with Debye-Hueckel lowering"
    low = {r["charge"]: r["lowering_eV"] for r in doc["rows"]}
    # Debye-Hueckel: the lowering of stage q is (q + 1) e^2 / lambda_D (e.g. Griem, Principles
    # of Plasma Spectroscopy), so it grows in proportion to q + 1
    for q, value in low.items():
        assert value == pytest.approx((q + 1) * low[0], rel=1e-12)
    assert 0.01 < low[0] < 1.0


def test_partition_command_picks_occupation_given_a_density(capsys):
    import json

    code, out, _ = _cli(capsys, "partition", "Na I", "-T", "10000", "--n-e", "1e16",
                        "--format", "json")
    doc = json.loads(out)
    assert doc["meta"]["truncation"] == "occupation"
    sp = default_database().species("Na I")
    expect = PartitionModel([sp], "occupation").evaluate(1e4, n_e=1e16)[0]
    assert doc["rows"][0]["U(Na I)"] == pytest.approx(float(expect), rel=1e-12)
    code, out, _ = _cli(capsys, "partition", "Na I", "-T", "10000", "--format", "json")
    assert json.loads(out)["meta"]["truncation"] == "plain"


def test_plain_sum_counts_equal_an_evaluation_at_every_state():
    """The plain-sum check counts, per species, the states where the plain U exceeds the
    occupation-weighted U by more than 10 %; it searches each temperature's states in order
    of n_e.  Its counts must equal those of the partition model evaluated at every state
    (species holding at least 1e-3 of their element)."""
    from sahaboltz.equilibrium.validity import CHECKED_SHARE, PLAIN_EXCESS, plain_excess

    t = np.geomspace(4000.0, 3e4, 9)[:, None] * np.ones((1, 12))
    p = np.ones((9, 1)) * np.geomspace(1e-2, 1e9, 12)[None, :]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TruncationWarning)
        state = solve_equilibrium(solar(), t, gas_pressure=p, truncation="plain")
    got = plain_excess(state)
    db = default_database()
    want = {}
    for el in state.composition.symbols:
        frac = state.stage_fractions(el, negative=False)
        for q, f in enumerate(frac):
            name = spectroscopic_name(atomic_number(el), q)
            if name not in state.network.species_names or q == atomic_number(el):
                continue
            if name in state.network.unit_partition:   # no levels: U = 1 in both
                continue
            sp = db.species(name)
            u_plain = PartitionModel([sp], "plain").evaluate(t.ravel())[0]
            u_occ = PartitionModel([sp], "occupation").evaluate(t.ravel(),
                                                                 n_e=state.n_e.ravel())[0]
            n = int(((f.ravel() >= CHECKED_SHARE) & (u_plain > PLAIN_EXCESS * u_occ)).sum())
            if n:
                want[name] = n
    assert got == want and sum(want.values()) > 20


def test_large_stage_fractions_compiled_and_numpy_agree(monkeypatch):
    """The plain-sum check finds each chain's major stages (a share of at least 1e-3) in one
    compiled pass per state; the numpy path (SAHABOLTZ_NO_NUMBA=1, the reference) forms the
    table of all stages.  Both give the same stages, states and fractions."""
    from sahaboltz.kernels import compiled
    if not compiled.available():
        pytest.skip("numba is not installed (or SAHABOLTZ_NO_NUMBA is set)")
    t = np.geomspace(2500.0, 2e5, 14)[:, None] * np.ones((1, 10))
    p = np.ones((14, 1)) * np.geomspace(1e-3, 1e9, 10)[None, :]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TruncationWarning)
        state = solve_equilibrium(solar(), t, gas_pressure=p, truncation="plain")
    fast = [state._large_fractions(c, 1e-3) for c in state.network.chains]
    monkeypatch.setenv("SAHABOLTZ_NO_NUMBA", "1")
    slow = [state._large_fractions(c, 1e-3) for c in state.network.chains]
    for c, (r1, c1, f1), (r2, c2, f2) in zip(state.network.chains, fast, slow):
        o1, o2 = np.lexsort((r1, c1)), np.lexsort((r2, c2))
        np.testing.assert_array_equal(r1[o1], r2[o2])
        np.testing.assert_array_equal(c1[o1], c2[o2])
        np.testing.assert_allclose(f1[o1], f2[o2], rtol=1e-12)
    assert sum(r.size for r, _, _ in fast) > t.size * 10
