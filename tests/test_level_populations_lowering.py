"""Level populations of a solved state when the ionization energies are lowered."""

import astropy.constants as const
import astropy.units as u
import numpy as np

from sahaboltz.data.composition import Composition
from sahaboltz.equilibrium import solve_equilibrium


def test_populations_with_debye_lowering_sum_and_follow_boltzmann(db):
    argon = Composition.from_number({"Ar": 1})
    T = np.array([12000.0, 15000.0])
    state = solve_equilibrium(argon, T, gas_pressure=1.013e6, lowering=True)
    pops, energy = state.level_populations("Ar II")
    assert pops.shape[1:] == T.shape
    np.testing.assert_allclose(pops.sum(axis=0), state.number_density("Ar II"), rtol=1e-12)
    # the ratio of the two lowest levels is the Boltzmann factor with their g (Ar II ground
    # term 3p5 2P3/2, 2P1/2 from NIST ASD via level_data), k_B from astropy (CODATA)
    lv = db["Ar II"].levels
    kT = (const.k_B * T * u.K).to(u.eV).value
    expected = lv.g[1] / lv.g[0] * np.exp(-(lv.energy_ev[1] - lv.energy_ev[0]) / kT)
    np.testing.assert_allclose(pops[1] / pops[0], expected, rtol=1e-10)
    # Ar I levels within the lowering of the limit, e^2 / lambda_D, are left out
    pops, energy = state.level_populations("Ar I")
    dchi = const.e.gauss.value ** 2 / state.debye_length / (1 * u.eV).to(u.erg).value
    top = energy[:, None] >= db["Ar I"].ionization_energy_ev - dchi[None, :]
    assert top.any() and (pops[top] == 0).all() and (pops[~top] > 0).all()
