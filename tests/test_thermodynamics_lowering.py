"""Thermodynamics with Debye-Hueckel lowering: the Coulomb free energy that goes with it.

Saha with the lowering (z + 1) e^2 / lambda_D of every ionization is the minimum of the ideal
free energy plus the Debye-Hueckel term F_DH / V = -kT / (12 pi lambda_D^3); the tests check
that term against the Debye-Hueckel limiting law and the thermodynamic identities that a
free energy guarantees.
"""

import warnings

import numpy as np
import pytest
from astropy import constants as const

from sahaboltz.data.composition import Composition
from sahaboltz.equilibrium import solve_equilibrium
from thermo_checks import assert_compiled_matches_numpy, assert_matches_finite_differences

HYDROGEN = Composition.from_number({"H": 1})
ARGON = Composition.from_number({"Ar": 1})


def solve(*args, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")      # validity warnings are not tested here
        return solve_equilibrium(*args, lowering=True, **kw)


def _debye_hueckel_pressure(t, screening_density):
    # Debye-Hueckel limiting law (Landau & Lifshitz, Statistical Physics, section 78, from
    # memory): F_DH = -(2/3) e^3 sqrt(pi / (kT V)) (sum_a N_a z_a^2)^{3/2}, so
    # P_DH = -(1/3) e^3 sqrt(pi / kT) S^{3/2} and E_DH = 3 P_DH; constants from astropy (cgs)
    e = const.e.gauss.value           # statC
    k = const.k_B.cgs.value
    return -(e**3) * np.sqrt(np.pi / (k * t)) * screening_density**1.5 / 3.0


# (composition, temperatures [K], mass density [g cm^-3], options): an argon arc and a hydrogen
# plasma across their ionization, weakly coupled (Gamma_e < 0.3)
CASES = {
    "argon arc, lowered cut": (ARGON, np.geomspace(8000.0, 30000.0, 6), 1e-4, {}),
    "hydrogen, lowered cut": (HYDROGEN, np.geomspace(8000.0, 30000.0, 6), 1e-6, {}),
    "argon arc, occupation weights": (ARGON, np.geomspace(8000.0, 30000.0, 6), 1e-4,
                                      {"truncation": "occupation"}),
}


@pytest.fixture(scope="module", params=list(CASES))
def case(request):
    comp, t, rho, kw = CASES[request.param]
    return request.param, comp, t, rho, kw, solve(comp, t, mass_density=rho, tolerance=1e-14,
                                                  **kw)


def test_the_coulomb_terms_matter_here(case):
    # the cases are meant to test the Debye-Hueckel terms: they change P by 1e-5 .. 3 %
    *_, st = case
    th = st.thermodynamics()
    ideal = (st.nuclei_density + st.n_e) * const.k_B.cgs.value * st.temperature
    rel = 1.0 - th.pressure / ideal
    assert rel.min() > 0 and rel.max() > 1e-3
    assert np.all(st.coupling_parameter < 0.3)


def test_free_energy_identities(case):
    # c_p - c_v = P chi_T^2 / (rho T chi_rho) and the Maxwell relation
    # (ds/d ln rho)_T = -P chi_T / (rho T) (general thermodynamic identities, e.g. Kippenhahn &
    # Weigert eq. 4.19, from memory) hold exactly where U depends on T alone: with the cut at
    # the lowered limit (U moves only in steps); occupation weights break them at the size of
    # d ln U / d ln n_e (docs/thermodynamics.md), so there they are only close
    name, comp, t, rho, kw, st = case
    th = st.thermodynamics()
    rtol = 1e-10 if "lowered" in name else 5e-2
    want = th.pressure * th.chi_t**2 / (th.mass_density * t * th.chi_rho)
    np.testing.assert_allclose(th.heat_capacity_p - th.heat_capacity_v, want, rtol=rtol)
    np.testing.assert_allclose(th.ds_dlnrho, -th.pressure * th.chi_t / (th.mass_density * t),
                               rtol=rtol)


def test_exact_derivatives_against_finite_differences(case):
    # centered differences in the test only, step 1e-5 in ln T and ln rho: small enough that no
    # level crosses the lowered limit inside the stencil (checked on the density stencil, where
    # U at the same T would jump with a crossing)
    name, comp, t, rho, kw, st = case
    th = st.thermodynamics()
    h = 1e-5
    runs = [solve(comp, t * np.exp(s * h), mass_density=rho * np.exp(r * h), tolerance=1e-14,
                  **kw) for s, r in ((1, 0), (-1, 0), (0, 1), (0, -1))]
    if "lowered" in name:
        for other in runs[2:]:
            for sp in (comp.symbols[0] + " I", comp.symbols[0] + " II"):
                np.testing.assert_array_equal(
                    other.partition_function(sp) == st.partition_function(sp), True)
    assert_matches_finite_differences(th, *(r.thermodynamics() for r in runs), h)


def test_fully_ionized_hydrogen_follows_the_limiting_law():
    # hydrogen at 1e7 K and 1 g cm^-3 is ionized (99 %) and weakly coupled (Gamma_e ~ 0.02):
    # the pressure and energy below the ideal gas of its particles are the Debye-Hueckel terms
    t = np.array([1e7, 2e7])
    st = solve(HYDROGEN, t, mass_density=1.0)
    th = st.thermodynamics()
    k = const.k_B.cgs.value
    n_e = st.n_e
    screening = n_e + st.sum_z2_n()      # n_e + sum z^2 n over H II and H- (8e-6 of it)
    p_dh = _debye_hueckel_pressure(t, screening)
    assert np.all(np.abs(p_dh) > 3e-4 * th.pressure)
    np.testing.assert_allclose(th.pressure - (st.nuclei_density + n_e) * k * t, p_dh,
                               rtol=1e-8)
    np.testing.assert_allclose(th.debye_hueckel_pressure, p_dh, rtol=1e-8)
    # E_DH = 3 P_DH; the ideal part: 3/2 kT per particle and chi_H per ion (the lowered cut
    # keeps only the ground level of H I here, so U = 2 carries no excitation energy)
    assert np.all(st.partition_function("H I") == 2.0)
    chi = st.network.chains[0].chi_ev[1] * const.e.si.value * 1e7      # erg
    n_ion = st.nuclei_density * st.fraction("H II")
    e_ideal = 1.5 * k * t * (st.nuclei_density + n_e) + chi * n_ion
    np.testing.assert_allclose(th.internal_energy * th.mass_density - e_ideal, 3.0 * p_dh,
                               rtol=1e-5)


@pytest.mark.parametrize("closure", ["internal_energy", "entropy"])
def test_thermal_closures_round_trip_with_lowering(closure):
    # (rho, u) -> T -> u and (P, s) -> T -> s with the lowering in every forward solve
    t = np.geomspace(8000.0, 30000.0, 6)
    st = solve(ARGON, t, mass_density=1e-4)
    partner = ({"mass_density": 1e-4} if closure == "internal_energy" else
               {"gas_pressure": st.gas_pressure})
    back = solve(ARGON, None, **{closure: getattr(st, closure)}, **partner)
    np.testing.assert_allclose(back.temperature, t, rtol=1e-10)
    np.testing.assert_allclose(getattr(back, closure), getattr(st, closure), rtol=1e-10)


def test_compiled_and_numpy_stage_sums_agree_with_lowering(monkeypatch):
    # the compiled per-state sums (with the screening terms) against the numpy path
    from sahaboltz.data.composition import solar
    comp = solar().subset(["H", "He", "C", "N", "O", "Ne", "Mg", "Si", "Fe"])
    t, rho = np.meshgrid(np.geomspace(6000.0, 1e5, 8), [1e-7, 1e-5], indexing="ij")
    st = solve(comp, t, mass_density=rho)
    assert_compiled_matches_numpy(st, monkeypatch, (
        "internal_energy", "entropy", "du_dlnt", "ds_dlnt", "ds_dlnrho", "chi_t", "chi_rho",
        "gamma1", "adiabatic_gradient"))


def test_state_command_prints_the_coulomb_pressure(capsys):
    import json
    from sahaboltz.faces.cli import main
    assert main(["state", "-T", "12000", "--gas-pressure", "1e6", "--mix", "Ar:1", "--lowering",
                 "--format", "json"]) == 0
    meta = json.loads(capsys.readouterr().out)["meta"]
    # the closure fixes kT sum n = 1e6; the pressure adds the (negative) Debye-Hueckel term
    assert meta["gas_pressure_dyn_cm-2"] == pytest.approx(1e6, rel=1e-12)
    assert meta["debye_hueckel_pressure_dyn_cm-2"] < 0
    assert meta["pressure_dyn_cm-2"] == pytest.approx(
        1e6 + meta["debye_hueckel_pressure_dyn_cm-2"], rel=1e-12)
