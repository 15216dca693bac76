"""Units of the Barklem & Collet (2016) equilibrium constants, established independently.

The published table7 gives log10(pK) without a unit.  The Saha-like dissociation formula for
AB = A + B,
    K_p = p_A p_B / p_AB = kT (2 pi mu kT / h^2)^{3/2} (U_A U_B / U_AB) exp(-D0 / kT),
(e.g. Tatum 1966, Publ. Dom. Astrophys. Obs. 13, 1; it is the Saha equation with the reduced
mass and the molecular partition function) evaluated in cgs from the same source's partition
functions (table8 atoms, table6 molecules) and dissociation energies (table1) is 10 times the
published pK: the table is in Pa (N m^-2).  The loader converts to dyn cm^-2, and these tests
check that what the kernel returns is the formula's cgs value.
"""

import astropy.units as u
import numpy as np
import pytest

from sahaboltz.constants import AMU, H, K_B, EV, R_GAS
from sahaboltz.data.molecules import default_molecule_database
from sahaboltz.kernels.molecular import EquilibriumConstants, equilibrium_constant
from molecule_reference import load_reference

REF = load_reference()
TEMPS = [1000.0, 2000.0, 3000.0, 5000.0, 8000.0, 10000.0]


def saha_dissociation_kp(mol, t, weight):
    """K_p [dyn cm^-2] from the formula above with the published partition functions."""
    a, b = mol.components
    u_a = REF[("atomic_U", a)][t]         # Barklem & Collet (2016) table8_vNov2022
    u_b = REF[("atomic_U", b)][t]
    u_ab = REF[("molecular_U", mol.name)][t]   # Barklem & Collet (2016) table6
    m_a, m_b = weight(mol.component_Z[0]), weight(mol.component_Z[1])
    mu = m_a * m_b / (m_a + m_b) * AMU
    kt = K_B * t
    return (kt * (2 * np.pi * mu * kt / H**2) ** 1.5 * u_a * u_b / u_ab
            * np.exp(-mol.dissociation_energy_ev * EV / kt))


@pytest.mark.parametrize("name", ["CO", "H2", "OH", "CN", "CO+"])
def test_kernel_constant_is_the_saha_formula_in_cgs(name, db):
    mdb = default_molecule_database()
    mol = mdb[name]
    model = EquilibriumConstants([name])
    for t in TEMPS:
        expected = saha_dissociation_kp(mol, t, db.atomic_weight)
        got = model.kp(t)[0]
        # agreement within a few % (the source's own constants and masses may differ slightly;
        # a unit slip would be a factor 10)
        assert got == pytest.approx(expected, rel=0.03), (name, t)


@pytest.mark.parametrize("name", ["CO", "H2", "OH", "CN", "CO+"])
def test_published_pk_is_in_pascal(name, db):
    mol = default_molecule_database()[name]
    pa_to_cgs = (1 * u.Pa).to_value(u.dyn / u.cm**2)
    for t in TEMPS:
        published = 10 ** REF[("log10_pK", name)][t]   # Barklem & Collet (2016) table7_vNov2022
        formula_cgs = saha_dissociation_kp(mol, t, db.atomic_weight)
        assert published * pa_to_cgs == pytest.approx(formula_cgs, rel=0.03)
        # and not in cgs: the difference is a factor 10, far outside the tolerance
        assert abs(np.log10(published / formula_cgs)) > 0.9


def test_h2_dissociation_constant_matches_janaf_at_3000K():
    # NIST-JANAF thermochemical tables (Chase 1998), H (g): Delta_f G(3000 K) = 46.01 kJ/mol;
    # H2 = 2 H has Delta_r G = 2 Delta_f G(H), K = exp(-Delta_r G / RT) at p0 = 1 bar (= 0.025)
    delta_g = 2 * 46.01e3
    k_janaf = np.exp(-delta_g / (R_GAS * 3000.0))
    assert k_janaf == pytest.approx(0.025, abs=0.0005)
    bar = (1 * u.bar).to_value(u.dyn / u.cm**2)
    k_ours = equilibrium_constant("H2", 3000.0) / bar
    assert k_ours == pytest.approx(k_janaf, rel=0.10)
    # the number-density form is K_p / kT
    assert equilibrium_constant("H2", 3000.0, form="density") == pytest.approx(
        k_ours * bar / (K_B * 3000.0), rel=1e-12)
