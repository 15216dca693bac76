"""Thermodynamics of gas in equilibrium with condensed phases (condensates=True).

A present condensate keeps the gas saturated, sum_k V_jk ln n_k = ln K_j(T); its energy per
formula unit above the zero point is e_j = kT (V_j . a_atoms - d ln K_j / d ln T), so the
mixture of ideal gas and pure condensed phases has a free energy and the identities hold.
"""

import warnings

import numpy as np
import pytest

from sahaboltz.constants import K_B
from sahaboltz.data.composition import Composition, solar
from sahaboltz.data.thermo import default_thermo_database
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.equilibrium.molecular import select_condensates
from sahaboltz.kernels.thermo import CondensateConstants
from thermo_checks import assert_matches_finite_differences

KW = {"molecules": "default", "condensates": True}


def solve(*args, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")      # validity warnings are not tested here
        return solve_equilibrium(*args, **kw)


@pytest.fixture(scope="module")
def dusty():
    # a solar gas at 1,150-1,300 K and 1e-9 g cm^-3 (a protoplanetary-disk-like density):
    # iron and the magnesium silicates condensed, their share falling with T
    t = np.array([1150.0, 1200.0, 1250.0, 1300.0])
    return t, 1e-9, solve(solar(), t, mass_density=1e-9, tolerance=1e-13, **KW)


def test_the_condensates_are_there(dusty):
    t, rho, st = dusty
    assert np.all(st.condensed_fraction("Fe") > 0.05)
    assert np.all(np.diff(st.condensed_fraction("Fe")) < 0)


def test_free_energy_identities_with_condensates(dusty):
    # c_p - c_v = P chi_T^2 / (rho T chi_rho) and (ds/d ln rho)_T = -P chi_T / (rho T) (general
    # thermodynamic identities, e.g. Kippenhahn & Weigert eq. 4.19, from memory)
    t, rho, st = dusty
    th = st.thermodynamics()
    want = th.pressure * th.chi_t**2 / (th.mass_density * t * th.chi_rho)
    np.testing.assert_allclose(th.heat_capacity_p - th.heat_capacity_v, want, rtol=1e-10)
    np.testing.assert_allclose(th.ds_dlnrho, -th.pressure * th.chi_t / (th.mass_density * t),
                               rtol=1e-10)
    np.testing.assert_allclose(th.ds_dlnt, th.heat_capacity_v, rtol=1e-10)


def test_exact_derivatives_against_finite_differences(dusty):
    # centered differences in the test only (step 1e-5 in ln T and ln rho)
    t, rho, st = dusty
    th = st.thermodynamics()
    h = 1e-5
    runs = [solve(solar(), t * np.exp(a * h), mass_density=rho * np.exp(b * h),
                  tolerance=1e-13, **KW).thermodynamics()
            for a, b in ((1, 0), (-1, 0), (0, 1), (0, -1))]
    assert_matches_finite_differences(th, *runs, h)


def test_condensation_energy_of_iron_is_its_sublimation_energy():
    # hydrogen with a little iron that condenses: per condensed atom the energy falls by the
    # sublimation energy, Delta H - kT, with H(T) of Fe(g) and of the stable solid from the
    # NASA 9-coefficient polynomials of the data (H/RT = -a1/T^2 + a2 ln T / T + a3 + a4 T/2
    # + a5 T^2/3 + a6 T^3/4 + a7 T^4/5 + b1/T: McBride, Zehe & Gordon 2002, NASA TP-2002-211556)
    comp = Composition.from_number({"H": 1.0, "Fe": 1e-4})
    t = np.array([1200.0, 1500.0, 1700.0])
    rho = 1e-6
    with_fe = solve(comp, t, mass_density=rho, molecules="default", condensates=["Fe"])
    without = solve(comp, t, mass_density=rho, molecules="default")
    assert np.all(with_fe.condensed_fraction("Fe") > 0.5)
    per_atom = ((without.internal_energy - with_fe.internal_energy) * rho
                / with_fe.condensed_density("Fe"))

    def h_over_rt(sp, tt):
        a = sp.coefficients[np.searchsorted(sp.t_high, tt)]
        return (-a[0] / tt**2 + a[1] * np.log(tt) / tt + a[2] + a[3] * tt / 2
                + a[4] * tt**2 / 3 + a[5] * tt**3 / 4 + a[6] * tt**4 / 5 + a[7] / tt)

    cc = CondensateConstants(select_condensates(comp, ["Fe"]))
    solid = [cc.phases[i] for i in cc.stable_phase(t)[0]]
    gas = default_thermo_database().atom(26)
    want = np.array([K_B * tt * (h_over_rt(gas, tt) - h_over_rt(sp, tt) - 1.0)
                     for sp, tt in zip(solid, t)])
    # (FeH and Fe+ in the gas shift the difference by < 1e-5)
    np.testing.assert_allclose(per_atom, want, rtol=3e-5)
    assert 3.5 < want.min() / 1.602176634e-12 < 4.5      # about 4 eV per atom


def test_latent_heat_raises_the_heat_capacity(dusty):
    # where the condensed share of iron falls with T, its evaporation takes up heat (the gas
    # alone has no such term; at 1,400 K and above, with iron evaporated, the two agree to
    # 1e-4: the condensed Al, Ca and Ti hold little)
    t, rho, st = dusty
    gas_only = solve(solar(), t, mass_density=rho, molecules="default")
    assert np.all(st.heat_capacity_v > gas_only.heat_capacity_v)


def test_thermal_closure_round_trip_with_condensates(dusty):
    t, rho, st = dusty
    back = solve(solar(), None, internal_energy=st.internal_energy, mass_density=rho, **KW)
    np.testing.assert_allclose(back.temperature, t, rtol=1e-10)
    np.testing.assert_allclose(back.condensed_fraction("Fe"), st.condensed_fraction("Fe"),
                               rtol=1e-6)
