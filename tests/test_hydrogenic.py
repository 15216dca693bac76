"""Hydrogen-like ions carry Rydberg-formula levels with the reduced mass."""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest


@pytest.mark.parametrize("name,z", [("H I", 1), ("He II", 2), ("Li III", 3), ("C VI", 6),
                                    ("Fe XXVI", 26)])
def test_rydberg_levels_with_reduced_mass(db, name, z):
    mendeleev = pytest.importorskip("mendeleev")
    # nuclear mass: atomic mass of the most abundant isotope (mendeleev, from NIST) less Z m_e
    iso = max((i for i in mendeleev.element(z).isotopes if i.abundance), key=lambda i: i.abundance)
    m_e_u = (const.m_e / const.u).decompose().value
    m_nuc = iso.mass - z * m_e_u
    rinf = const.Ryd.to(1 / u.cm).value  # CODATA, via astropy
    n = np.arange(1, 11)
    expected = rinf * z**2 / (1 + m_e_u / m_nuc) * (1 - 1 / n**2)
    sp = db[name]
    assert sp.is_hydrogenic
    lv = sp.levels
    assert np.allclose(lv.g[:10], 2 * n**2)
    np.testing.assert_allclose(lv.energy_cm[1:10], expected[1:], rtol=1e-5)
    assert lv.energy_cm[0] == 0.0


def test_hydrogen_ground_state_weight(db):
    # U(H I) -> 2 at low temperature: the ground level 1s 2S1/2 has g = 2
    assert db["H I"].levels.g[0] == 2
