"""Thermodynamics of the LTE mixture (sahaboltz.equilibrium.thermodynamics)."""

import warnings

import numpy as np
import pytest

from sahaboltz.constants import A_RAD, AMU, K_B, K_B_EV, R_GAS
from sahaboltz.data.composition import Composition, solar
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.errors import InputError
from thermo_checks import assert_compiled_matches_numpy, assert_matches_finite_differences

HYDROGEN = Composition.from_number({"H": 1})
ARGON = Composition.from_number({"Ar": 1})
COOL = ["H", "He", "C", "N", "O", "Na", "Mg", "Al", "Si", "S", "K", "Ca", "Ti", "Fe"]


def solve(*args, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")      # validity / plain-sum warnings are not tested here
        return solve_equilibrium(*args, **kw)


# -- limits with named sources -------------------------------------------------------------
def test_ideal_monatomic_gas_limits():
    # ideal monatomic gas (kinetic theory, any textbook): nabla_ad = 2/5, Gamma_1 = Gamma_3 =
    # 5/3, c_p = 5k / (2 mu m_u), c_v = 3k / (2 mu m_u); argon at 300-3000 K does not ionize
    st = solve(ARGON, np.array([300.0, 1000.0, 3000.0]), gas_pressure=1e6, h_minus=False)
    cp = 2.5 * K_B / (st.mean_molecular_weight * AMU)
    np.testing.assert_allclose(st.adiabatic_gradient, 0.4, rtol=1e-8)
    np.testing.assert_allclose(st.gamma1, 5.0 / 3.0, rtol=1e-8)
    np.testing.assert_allclose(st.gamma3, 5.0 / 3.0, rtol=1e-8)
    np.testing.assert_allclose(st.heat_capacity_p, cp, rtol=1e-8)
    np.testing.assert_allclose(st.heat_capacity_v, 0.6 * cp, rtol=1e-8)
    np.testing.assert_allclose(st.chi_t, 1.0, rtol=1e-8)
    np.testing.assert_allclose(st.chi_rho, 1.0, rtol=1e-8)
    np.testing.assert_allclose(st.delta, 1.0, rtol=1e-8)
    np.testing.assert_allclose(st.dlnmu_dlnt, 0.0, atol=1e-8)
    # sound speed of argon at 300 K: sqrt(5 R T / (3 M)) = 322.6 m/s (ideal gas; the measured
    # value is 323 m/s, common practice / from memory)
    assert st.sound_speed[0] == pytest.approx(np.sqrt(5 * R_GAS * 300.0 / (3 * 39.948e-3)) * 100,
                                              rel=1e-4)


def test_argon_entropy_matches_janaf():
    # NIST-JANAF (Chase 1998), Ar: S(298.15 K, 1 bar) = 154.846 J mol^-1 K^-1 (from memory)
    st = solve(ARGON, 298.15, gas_pressure=1e6, h_minus=False)
    molar = float(st.entropy) * 39.948 * 1e-7          # erg g^-1 K^-1 -> J mol^-1 K^-1
    assert molar == pytest.approx(154.846, abs=0.02)


def test_fully_ionized_hydrogen():
    # hydrogen at 1e8 K, 1e-10 g cm^-3 is fully ionized: mu = A_H / 2 (two particles per
    # nucleus, neutral-atom mass), and the ideal monatomic limits hold
    st = solve(HYDROGEN, 1e8, mass_density=1e-10)
    a_h = HYDROGEN.atomic_weights()[0]              # standard atomic weight of H
    assert float(st.mean_molecular_weight) == pytest.approx(a_h / 2, rel=1e-10)
    assert float(st.adiabatic_gradient) == pytest.approx(0.4, rel=1e-8)
    assert float(st.gamma1) == pytest.approx(5.0 / 3.0, rel=1e-8)
    assert float(st.heat_capacity_p) == pytest.approx(2.5 * K_B / (a_h / 2 * AMU), rel=1e-8)


def test_partially_ionized_hydrogen_adiabatic_gradient_closed_form():
    # Kippenhahn & Weigert, Stellar Structure and Evolution, section 14.3 (formula from
    # memory): with x the ionized fraction and U(H I) = 2 fixed,
    #   nabla_ad = (2 + x (1 - x) (5/2 + chi/kT)) / (5 + x (1 - x) (5/2 + chi/kT)^2)
    t = np.geomspace(4000.0, 40000.0, 41)
    st = solve(HYDROGEN, t, mass_density=1e-7, truncation="ground", h_minus=False)
    x = st.stage_fractions("H")[1]
    chi = st.network.chains[0].chi_ev[0] / (K_B_EV * t)
    f = x * (1 - x) * (2.5 + chi)
    want = (2 + f) / (5 + f * (2.5 + chi))
    assert want.min() < 0.12                           # the zone is crossed
    np.testing.assert_allclose(st.adiabatic_gradient, want, rtol=1e-7)


def test_radiation_terms_and_the_radiation_dominated_limit():
    t = np.array([1e4, 1e7])
    gas = solve(HYDROGEN, t, mass_density=1e-8)
    rad = solve(HYDROGEN, t, mass_density=1e-8, radiation=True)
    assert not gas.thermodynamics().radiation and rad.thermodynamics().radiation
    np.testing.assert_allclose(rad.total_pressure - gas.total_pressure, A_RAD * t**4 / 3,
                               rtol=1e-12)
    np.testing.assert_allclose((rad.internal_energy - gas.internal_energy) * 1e-8,
                               A_RAD * t**4, rtol=1e-10)
    # a = 4 sigma / c = 7.5657e-15 erg cm^-3 K^-4 (CODATA, from memory)
    assert A_RAD == pytest.approx(7.5657e-15, rel=1e-4)
    # radiation-dominated gas: Gamma_1 -> 4/3, nabla_ad -> 1/4 (Chandrasekhar's mixture of
    # gas and radiation, from memory)
    assert float(rad.gamma1[1]) == pytest.approx(4.0 / 3.0, rel=1e-6)
    assert float(rad.adiabatic_gradient[1]) == pytest.approx(0.25, rel=1e-6)
    # the override on the state agrees with the solve option
    assert rad.thermodynamics(radiation=False).pressure == pytest.approx(gas.total_pressure)


# -- thermodynamic consistency ------------------------------------------------------------
CASES = {
    "solar, plain sums": (solar(), np.geomspace(3000.0, 1e6, 9), 1e-7,
                          {"truncation": "plain"}),
    "cool mixture with molecules": (solar().subset(COOL), np.geomspace(1500.0, 5000.0, 6),
                                    1e-8, {"truncation": "plain", "molecules": "default"}),
    "hydrogen with H-": (HYDROGEN, np.geomspace(3000.0, 3e4, 7), 1e-6, {"truncation": "plain"}),
}


@pytest.fixture(scope="module", params=list(CASES))
def case(request):
    comp, t, rho, kw = CASES[request.param]
    st = solve(comp, t, mass_density=rho, **kw)
    return comp, t, rho, kw, st


def test_cp_minus_cv_identity(case):
    # c_p - c_v = P chi_T^2 / (rho T chi_rho) (general thermodynamic identity, e.g.
    # Kippenhahn & Weigert eq. 4.19, from memory)
    *_, st = case
    th = st.thermodynamics()
    want = th.pressure * th.chi_t**2 / (th.mass_density * st.temperature * th.chi_rho)
    np.testing.assert_allclose(th.heat_capacity_p - th.heat_capacity_v, want, rtol=1e-10)


def test_maxwell_relation_and_entropy_slope(case):
    # Maxwell: (ds/d rho)_T = -(dP/dT)_rho / rho^2, i.e. (ds/d ln rho)_T = -P chi_T / (rho T);
    # and (ds/dT)_rho = c_v / T (first law).  s and u are differentiated independently.
    *_, st = case
    th = st.thermodynamics()
    t = st.temperature
    np.testing.assert_allclose(th.ds_dlnrho, -th.pressure * th.chi_t / (th.mass_density * t),
                               rtol=1e-10)
    np.testing.assert_allclose(th.ds_dlnt, th.heat_capacity_v, rtol=1e-10)


def _fd(comp, t, rho, kw, h=1e-4):
    def th(tt, rr):
        return solve(comp, tt, mass_density=rr, tolerance=1e-14, **kw).thermodynamics()
    return (th(t * np.exp(h), rho), th(t * np.exp(-h), rho), th(t, rho * np.exp(h)),
            th(t, rho * np.exp(-h)), h)


def test_exact_derivatives_against_finite_differences(case):
    # finite differences in the test only: centered, step 1e-4 in ln T and ln rho
    comp, t, rho, kw, st = case
    assert_matches_finite_differences(st.thermodynamics(), *_fd(comp, t, rho, kw))


def test_occupation_weights_exact_derivatives_and_the_size_of_the_mismatch():
    # with density-dependent weights the derivatives are still exact (against finite
    # differences), while the free-energy identities hold only to the size of
    # d ln U / d ln n_e: small in a photosphere, growing with density (docs/thermodynamics.md)
    t = np.geomspace(4000.0, 1e5, 7)
    comp = solar().subset(["H", "He", "C", "O", "Fe"])
    mismatch = []
    for rho in (1e-9, 1e-6, 1e-3):
        st = solve(comp, t, mass_density=rho)
        th = st.thermodynamics()
        up, dn, rp, rd, h = _fd(comp, t, rho, {})
        np.testing.assert_allclose(th.du_dlnt, (up.internal_energy - dn.internal_energy) / (2 * h),
                                   rtol=1e-6)
        np.testing.assert_allclose(th.chi_rho, (np.log(rp.pressure) - np.log(rd.pressure)) / (2 * h),
                                   rtol=1e-6)
        mismatch.append(np.max(np.abs(th.ds_dlnt - th.heat_capacity_v) / th.heat_capacity_v))
    assert mismatch[0] < 1e-5
    assert mismatch[0] < mismatch[1] < mismatch[2] < 0.05


def test_hydrogen_molecule_dissociation_bump_moves_with_pressure():
    # H2 = 2 H absorbs 4.48 eV per molecule: c_p peaks far above the atomic-gas value
    # 5k/(2 m_H) where H2 dissociates (2000-4000 K at 1e2-1e6 dyn cm^-2), and higher
    # pressure pushes dissociation to higher T (Le Chatelier; common practice)
    t = np.linspace(1500.0, 6000.0, 91)
    peaks = []
    for p in (1e2, 1e4, 1e6):
        st = solve(HYDROGEN, t, gas_pressure=p, molecules=["H2"], truncation="plain")
        cp = st.heat_capacity_p
        atomic = 2.5 * K_B / (HYDROGEN.atomic_weights()[0] * AMU)
        i = int(np.argmax(cp))
        assert 2000.0 <= t[i] <= 4000.0
        assert cp[i] > 5 * atomic
        peaks.append(t[i])
    assert peaks[0] < peaks[1] < peaks[2]


def test_internal_energy_zero_point_and_ionization_energy():
    # zero point: neutral ground-state atoms at rest.  Fully ionized hydrogen carries
    # 3 kT (ions and electrons) plus chi_H per nucleus (NIST: 13.598 eV)
    st = solve(HYDROGEN, 1e8, mass_density=1e-10)
    per_nucleus = float(st.internal_energy) * HYDROGEN.atomic_weights()[0] * AMU
    chi = st.network.chains[0].chi_ev[1] * K_B / K_B_EV     # H I -> H II (row 0 is H-)
    assert per_nucleus == pytest.approx(3 * K_B * 1e8 + chi, rel=1e-9)
    assert st.network.chains[0].chi_ev[1] == pytest.approx(13.598, abs=1e-3)
    assert float(st.enthalpy) == pytest.approx(float(st.internal_energy)
                                               + float(st.total_pressure) / 1e-10, rel=1e-12)


def test_compiled_and_numpy_level_sums_agree(monkeypatch):
    from sahaboltz.data.database import default_database
    from sahaboltz.kernels.partition import PartitionModel
    db = default_database()
    model = PartitionModel([db.species(s) for s in ("Fe I", "H I", "C II")],
                           truncation="occupation", completion=True)
    t = np.array([5000.0, 12000.0, 30000.0])
    ne = np.array([1e12, 1e15, 1e17])
    rows = np.arange(3)
    fast = model.pair_log_derivatives(t, ne, rows)
    monkeypatch.setenv("SAHABOLTZ_NO_NUMBA", "1")
    slow = model.pair_log_derivatives(t, ne, rows)
    for a, b in zip(fast, slow):
        np.testing.assert_allclose(a, b, rtol=1e-11, atol=1e-14)
    # and the first derivatives are those of the partition-function kernel
    u, dt, dn = model.evaluate_derivatives(t, ne)
    np.testing.assert_allclose(slow[0], np.log(u[rows, rows]), rtol=1e-12)
    np.testing.assert_allclose(slow[1], dt[rows, rows], rtol=1e-9)
    np.testing.assert_allclose(slow[2], dn[rows, rows], rtol=1e-9)


def test_compiled_level_sums_as_series_agree_with_numpy(monkeypatch):
    # pairs that share a temperature have their low levels summed as the series of the
    # weights (compiled_thermo._series_sums); the numpy reference sums every level one by
    # one.  Densities from where every level is in the series to where most are not
    from sahaboltz.data.database import default_database
    from sahaboltz.kernels import compiled_thermo
    from sahaboltz.kernels.partition import PartitionModel
    if not compiled_thermo.available():
        pytest.skip("numba is not installed (or SAHABOLTZ_NO_NUMBA is set)")
    db = default_database()
    names = ("Fe I", "H I", "C II", "He I", "Ca II", "O I")
    model = PartitionModel([db.species(s) for s in names], truncation="occupation",
                           completion=True)
    t, ne = np.meshgrid([4000.0, 9000.0, 20000.0, 60000.0], np.geomspace(1e6, 1e23, 18),
                        indexing="ij")
    t, ne = t.ravel(), ne.ravel()
    states = np.repeat(np.arange(t.size), len(names))
    rows = np.tile(np.arange(len(names)), t.size)
    fast = model.pair_log_derivatives(t, ne, rows, states=states)
    # both parts ran: pairs with levels in the series and pairs with levels one by one
    pst = {"T": t, "ne": ne}
    model.scheme.prepare_curvature_pairs(model, pst)
    p_, a_, b_ = (v[states] for v in pst["stark"])
    start, count = model._pair_levels(rows, 1.0 / (K_B_EV * t[states]))
    lim = compiled_thermo._SERIES_REACH * np.array(
        [compiled_thermo._compiled.series_radii(a, b)[0] for a, b in zip(a_, b_)])
    in_series = np.array([np.sum(p * model._q_stark[s0:s0 + c] <= li)
                          for p, s0, c, li in zip(p_, start, count, lim)])
    assert (in_series > 0).any() and (in_series < count).any()
    monkeypatch.setenv("SAHABOLTZ_NO_NUMBA", "1")
    slow = model.pair_log_derivatives(t, ne, rows, states=states)
    for a, b in zip(fast, slow):
        np.testing.assert_allclose(a, b, rtol=1e-11, atol=1e-13)


def test_molecular_constant_derivatives_against_finite_differences():
    from sahaboltz.equilibrium import AtomicNetwork
    from sahaboltz.equilibrium.molecular import select_molecules
    from sahaboltz.kernels.molecular import MoleculeConstants
    comp = solar().subset(["H", "C", "N", "O"])
    mols, _ = select_molecules(comp, "default", AtomicNetwork(comp))
    mc = MoleculeConstants(mols)
    t = np.array([1500.0, 3000.0, 4500.0])
    h = 1e-4
    d1, d2 = mc.ln_kn_derivatives(t)
    lo, mid, hi = mc.ln_kn(t * np.exp(-h)), mc.ln_kn(t), mc.ln_kn(t * np.exp(h))
    ok = np.isfinite(lo) & np.isfinite(hi)
    np.testing.assert_allclose(d1[ok], ((hi - lo) / (2 * h))[ok], rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(d2[ok], ((hi - 2 * mid + lo) / h**2)[ok], rtol=1e-4, atol=1e-3)


def test_thermodynamics_of_failed_states_are_nan_there_only():
    # errors="mask": an unreachable electron pressure fails its state (status 1); the
    # thermodynamics is NaN there and only there, and the other state's is unchanged
    st = solve(HYDROGEN, np.array([1e4, 1e4]), electron_pressure=np.array([1.0, 1e30]),
               errors="mask")
    assert list(st.status) == [0, 1]
    alone = solve(HYDROGEN, 1e4, electron_pressure=1.0)
    for name in ("gamma1", "internal_energy", "entropy", "adiabatic_gradient"):
        value = getattr(st, name)
        assert np.isfinite(value[0]) and np.isnan(value[1]), name
        assert value[0] == pytest.approx(float(getattr(alone, name)), rel=1e-12), name


# -- the closures that replace the temperature -----------------------------------------------
def test_density_energy_round_trip():
    # (rho, u) -> T -> u to 1e-10, over ionization zones of a solar mixture (a table axis:
    # shared densities) with plain sums and with the default occupation weights
    comp = solar().subset(["H", "He", "C", "O", "Fe"])
    t = np.geomspace(3000.0, 3e5, 12)
    tt, rr = np.meshgrid(t, np.array([1e-10, 1e-7, 1e-4]), indexing="ij")
    for kw in ({"truncation": "plain"}, {}):
        ref = solve(comp, tt, mass_density=rr, **kw)
        back = solve(comp, mass_density=rr, internal_energy=ref.internal_energy, **kw)
        np.testing.assert_allclose(back.internal_energy, ref.internal_energy, rtol=1e-10)
        np.testing.assert_allclose(back.temperature, tt, rtol=1e-9)
        assert back.thermal_closure == "internal_energy"


def test_pressure_entropy_round_trip_scattered_states_and_molecules():
    comp = solar().subset(COOL)
    rng = np.random.default_rng(3)
    t = np.exp(rng.uniform(np.log(1500.0), np.log(2e4), 10))
    p = np.exp(rng.uniform(np.log(1e2), np.log(1e7), 10))
    ref = solve(comp, t, gas_pressure=p)
    back = solve(comp, gas_pressure=p, entropy=ref.entropy)
    np.testing.assert_allclose(back.entropy, ref.entropy, rtol=1e-10)
    np.testing.assert_allclose(back.temperature, t, rtol=1e-9)
    cool = solve(comp, t[:4] * 0 + 2500.0, gas_pressure=p[:4], molecules="default",
                 truncation="plain")
    again = solve(comp, gas_pressure=p[:4], entropy=cool.entropy, molecules="default",
                  truncation="plain")
    np.testing.assert_allclose(again.entropy, cool.entropy, rtol=1e-10)
    np.testing.assert_allclose(again.temperature, 2500.0, rtol=1e-9)


def test_a_thermal_closure_returns_the_forward_solve_at_its_temperature():
    # the result is spliced from the Newton passes (inverse._assembled): it must be what the
    # forward solve at the temperatures found gives, thermodynamics included, in the shape
    # of the input
    comp = solar().subset(COOL)
    tt, rr = np.meshgrid(np.array([1800.0, 2600.0, 4000.0, 9000.0]),
                         np.array([1e-9, 1e-7]), indexing="ij")
    for kw in ({}, {"molecules": "default"}):
        ref = solve(comp, tt, mass_density=rr, **kw)
        back = solve(comp, mass_density=rr, internal_energy=ref.internal_energy, **kw)
        fwd = solve(comp, back.temperature, mass_density=rr, **kw)
        assert back.shape == tt.shape and back.n_e.shape == tt.shape
        np.testing.assert_allclose(back.n_e, fwd.n_e, rtol=1e-9)
        np.testing.assert_allclose(back.number_densities(), fwd.number_densities(), rtol=1e-8)
        for name in ("internal_energy", "entropy", "gamma1", "heat_capacity_v"):
            np.testing.assert_allclose(getattr(back, name), getattr(fwd, name), rtol=1e-8)


def test_thermal_closure_errors_name_the_states():
    from sahaboltz.errors import ConvergenceError
    with pytest.raises(ConvergenceError, match=r"state \(1,\).*no temperature in \[1000, 1e\+08\]"):
        solve(HYDROGEN, mass_density=np.array([1e-8, 1e-8]),
              internal_energy=np.array([1e12, 1e30]))
    st = solve(HYDROGEN, mass_density=np.array([1e-8, 1e-8]),
               internal_energy=np.array([1e12, 1e30]), errors="mask")
    assert st.converged.tolist() == [True, False]
    assert np.isnan(st.n_e[1]) and np.isfinite(st.n_e[0])
    with pytest.raises(InputError, match="goes with mass_density"):
        solve(HYDROGEN, gas_pressure=1e5, internal_energy=1e12)
    with pytest.raises(InputError, match="replaces the temperature"):
        solve(HYDROGEN, 5000.0, mass_density=1e-8, internal_energy=1e12)
    with pytest.raises(InputError, match="temperature is missing"):
        solve(HYDROGEN, mass_density=1e-8)


# -- tables ---------------------------------------------------------------------------------
def test_thermodynamic_table_fields(tmp_path):
    from sahaboltz.tables import cache
    from sahaboltz.tables.build import build_table
    from sahaboltz.tables.interpolate import open_table
    from sahaboltz.tables.spec import DEFAULT_QUANTITIES, THERMO_OUTPUTS, TableSpec
    q = ["mass_density", "internal_energy", "entropy", "adiabatic_gradient", "gamma1",
         "total_pressure", "sound_speed", "dlnmu_dlnt"]
    spec = TableSpec.from_mapping({
        "temperature": {"scale": "log", "min": 4000.0, "max": 40000.0, "num": 5},
        "pressure": {"quantity": "gas_pressure", "scale": "log", "min": 1e2, "max": 1e6,
                     "num": 3},
        "composition": {"abundances": {"H": 1.0, "He": 0.085}},
        "physics": {"radiation": True},
        "outputs": {"quantities": q, "stage_fractions": ["H"]}})
    assert set(THERMO_OUTPUTS) <= set(spec.outputs.quantities) | set(THERMO_OUTPUTS)
    assert not set(THERMO_OUTPUTS) & set(DEFAULT_QUANTITIES)   # on request only
    path = build_table(spec, tmp_path / "thermo.h5", workers=1, progress=False,
                       provenance=cache.solver_provenance(spec))
    t, p = np.meshgrid(spec.temperature.array, spec.pressure.array, indexing="ij")
    comp = Composition.from_number({"H": 1.0, "He": 0.085})
    st = solve(comp, t, gas_pressure=p, radiation=True)
    with open_table(path) as tab:
        for name in q:
            want = st.total_pressure if name == "total_pressure" else getattr(st, name)
            np.testing.assert_allclose(tab[name], want, rtol=1e-9, atol=1e-12)
        assert tab.quantity_attrs("internal_energy")["units"] == "erg g-1"


# -- command line ---------------------------------------------------------------------------
def test_state_command_prints_the_thermodynamics_block(capsys):
    import json
    from sahaboltz.faces.cli import main
    assert main(["state", "-T", "3000", "--gas-pressure", "1e6", "--mix", "Ar:1",
                 "--no-h-minus", "--format", "json"]) == 0
    meta = json.loads(capsys.readouterr().out)["meta"]
    assert "radiation not included" in meta["thermodynamics"]
    assert meta["adiabatic_gradient"] == pytest.approx(0.4, rel=1e-8)     # ideal monatomic gas
    assert main(["state", "--internal-energy", str(meta["internal_energy_erg_g-1"]),
                 "--mass-density", str(meta["pressure_dyn_cm-2"] * 0 + 1.0e-3),
                 "--mix", "Ar:1", "--no-h-minus", "--radiation", "--temperature-range",
                 "500,1e5", "--format", "json"]) == 0
    meta2 = json.loads(capsys.readouterr().out)["meta"]
    assert "radiation" in meta2["thermodynamics"] and "not" not in meta2["thermodynamics"]
    # u of an ideal monatomic gas does not depend on density: the same temperature back
    # (radiation at 3000 K adds 1e-8 of u here; ionization of Ar is below 1e-10)
    assert meta2["temperature_K"] == pytest.approx(3000.0, rel=1e-7)


def test_plot_thermo_map(tmp_path, capsys):
    from sahaboltz.faces.cli import main
    out = tmp_path / "nabla.png"
    assert main(["plot", "thermo", "--temperature", "3000:3e4:12", "--gas-pressure",
                 "1e2:1e6:5", "--mix", "H:0.9,He:0.1", "-o", str(out)]) == 0
    assert out.stat().st_size > 10_000


def test_delta_and_the_temperature_derivative_of_mu():
    # ideal gas with a variable mean molecular weight (Kippenhahn & Weigert, the chapter on
    # ionization, from memory): delta = 1 - (d ln mu / d ln T)_P, and mu falls as H ionizes
    t = np.geomspace(5000.0, 30000.0, 11)
    st = solve(HYDROGEN, t, gas_pressure=1e4, truncation="ground", h_minus=False)
    np.testing.assert_allclose(st.delta, 1.0 - st.dlnmu_dlnt, rtol=1e-10)
    assert (st.dlnmu_dlnt < 0).all() and st.dlnmu_dlnt.min() < -0.5


def test_compiled_and_numpy_plain_sums_agree(monkeypatch):
    from sahaboltz.data.database import default_database
    from sahaboltz.kernels.partition import PartitionModel
    db = default_database()
    model = PartitionModel([db.species(s) for s in ("Fe I", "H I", "C II")], truncation="plain")
    t = np.array([3000.0, 12000.0, 30000.0])
    rows = np.array([0, 1, 2])
    fast = model.pair_log_derivatives(t, None, rows)
    monkeypatch.setenv("SAHABOLTZ_NO_NUMBA", "1")
    slow = model.pair_log_derivatives(t, None, rows)
    for a, b in zip(fast, slow):
        np.testing.assert_allclose(a, b, rtol=1e-11, atol=1e-14)
    np.testing.assert_allclose(slow[1], model.log_derivative(t)[rows, np.arange(3)], rtol=1e-9)


def test_molecules_with_occupation_weights_exact_derivatives():
    comp = solar().subset(COOL)
    t = np.array([2000.0, 3500.0, 5000.0])
    kw = {"molecules": "default"}
    th = solve(comp, t, mass_density=1e-7, **kw).thermodynamics()
    up, dn, rp, rd, h = _fd(comp, t, 1e-7, kw)
    np.testing.assert_allclose(th.du_dlnt, (up.internal_energy - dn.internal_energy) / (2 * h),
                               rtol=1e-6)
    np.testing.assert_allclose(th.du_dlnrho, (rp.internal_energy - rd.internal_energy) / (2 * h),
                               atol=1e-9 * np.abs(th.internal_energy).max())
    np.testing.assert_allclose(th.chi_rho, (np.log(rp.pressure) - np.log(rd.pressure)) / (2 * h),
                               rtol=1e-6)


@pytest.mark.parametrize("truncation", ["plain", None])
def test_compiled_and_numpy_stage_sums_agree(monkeypatch, truncation):
    # the compiled per-state stage sums against the numpy path of the same formulas (the
    # reference, SAHABOLTZ_NO_NUMBA=1), across the ionization of H, He and the metals
    t, p = np.meshgrid(np.geomspace(2500.0, 3e5, 12), [1e-2, 1e4, 1e8], indexing="ij")
    st = solve(solar(), t, gas_pressure=p, truncation=truncation)
    fast, slow = assert_compiled_matches_numpy(st, monkeypatch, (
        "internal_energy", "entropy", "du_dlnt", "ds_dlnt", "ds_dlnrho", "chi_t", "chi_rho",
        "gamma1", "adiabatic_gradient", "heat_capacity_p"))
    # (du/d ln rho)_T vanishes where nothing ionizes: compared on the scale of u
    np.testing.assert_allclose(fast.du_dlnrho, slow.du_dlnrho,
                               atol=1e-12 * np.abs(slow.internal_energy).max())


@pytest.mark.parametrize("truncation", ["plain", None])
def test_compiled_windows_from_intervals_agree_with_numpy(monkeypatch, truncation):
    # with many states per temperature the compiled path takes each chain's window of
    # significant stages from its significance intervals (two binary searches per state);
    # the numpy path (the reference) tests every stage of every state
    t, p = np.meshgrid([3000.0, 9000.0, 4e4], np.geomspace(1e-3, 1e9, 100), indexing="ij")
    st = solve(solar(), t, gas_pressure=p, truncation=truncation)
    assert_compiled_matches_numpy(st, monkeypatch, (
        "internal_energy", "entropy", "du_dlnt", "ds_dlnt", "chi_t", "chi_rho", "gamma1",
        "adiabatic_gradient", "heat_capacity_p"))


@pytest.mark.slow
def test_thermal_closures_converge_over_the_solver_domain():
    # the domain the forward solver converges on with the default physics (T = 1e3 - 1e7 K,
    # P_gas = 1e-4 - 1e10 dyn cm^-2, a solar mixture, every element): every state found again
    # from (rho, u) and from (P, s), each to 1e-10 in its closure value and in T; T = 1e3 K is
    # the lowest temperature searched, so a value met there to the tolerance must count as
    # inside the range (6 of these 24 were refused as out of range before)
    tt, pp = np.meshgrid(np.geomspace(1e3, 1e7, 24), np.geomspace(1e-4, 1e10, 24),
                         indexing="ij")
    ref = solve(solar(), tt, gas_pressure=pp)
    back_u = solve(solar(), mass_density=ref.mass_density, internal_energy=ref.internal_energy)
    back_s = solve(solar(), gas_pressure=pp, entropy=ref.entropy)
    for back in (back_u, back_s):
        assert back.converged.all()
        np.testing.assert_allclose(back.temperature, tt, rtol=1e-10)
    np.testing.assert_allclose(back_u.internal_energy, ref.internal_energy, rtol=1e-10)
    np.testing.assert_allclose(back_s.entropy, ref.entropy, rtol=1e-10)
