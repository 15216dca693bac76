"""Tables built from the shared state options (mixtures, lowering, molecules)."""

import h5py
import numpy as np
import pytest

from sahaboltz.data.composition import Composition, solar
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.faces.cli import main
from sahaboltz.tables.interpolate import open_table


def _build(tmp_path, capsys, *opts):
    out = tmp_path / "t.h5"
    code = main(["table", "build", *opts, "--no-progress", "-o", str(out)])
    capsys.readouterr()
    assert code == 0
    return out


def test_mass_fraction_mix_with_lowering(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("SAHABOLTZ_CACHE_DIR", str(tmp_path / "cache"))
    path = _build(tmp_path, capsys, "--temperature", "9000,15000", "--pressure", "1.013e6,2e6",
                  "--mix", "Ar:1", "--by", "mass", "--lowering")
    with open_table(path) as tab:
        frac = tab["fraction_Ar_II"][:, 0]
    # the same state solved directly: argon with lowering (truncation at the lowered limit)
    direct = solve_equilibrium(Composition.from_number({"Ar": 1}), [9000.0, 15000.0],
                               gas_pressure=1.013e6, lowering=True).fraction("Ar II")
    np.testing.assert_allclose(frac, direct, rtol=1e-9)


def test_molecules_are_stored_per_element(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("SAHABOLTZ_CACHE_DIR", str(tmp_path / "cache"))
    path = _build(tmp_path, capsys, "--temperature", "2500,5000", "--pressure", "1e6,2e6",
                  "--molecules", "default", "--fractions", "H,C,O")
    with open_table(path) as tab:
        mol_h = tab["molecular_fraction_H"][:, 0]
        assert tab.units("molecular_fraction_C") == "1"
        h1 = tab["fraction_H_I"][:, 0]
        assert "number_density_H2" in tab and "number_density_CO" in tab
        assert tab.units("number_density_CO") == "cm-3"
        n_h2, n_hm = tab["number_density_H2"][:, 0], tab["number_density_H-"][:, 0]
        n_h = tab["number_density_H_I"][:, 0] / h1  # hydrogen nuclei
    with h5py.File(path) as f:  # molecules: one variable with a molecule coordinate
        assert f["molecule_number_density"].dims[0][0].name == "/molecule"
    # cool dense gas: hydrogen mostly molecular (A&A 363, 1065 (2000), sect. 1); hot: atomic
    assert mol_h[0] > 0.5 and mol_h[1] < 0.05
    # stage fractions are shares of all of the element's nuclei, molecules included
    assert h1[0] == pytest.approx(1 - mol_h[0], abs=1e-6)
    # the H2 density is (nearly all of) the bound hydrogen nuclei, halved; H- is a trace
    assert 2 * n_h2[0] == pytest.approx(mol_h[0] * n_h[0], rel=0.05)
    assert 0 < n_hm[0] < 1e-6 * n_h[0]


def test_spec_file_and_options_together_is_an_error(tmp_path, capsys):
    spec = tmp_path / "g.toml"
    main(["table", "template"])
    spec.write_text(capsys.readouterr().out)
    code = main(["table", "build", str(spec), "--mix", "Ar:1", "--no-progress"])
    assert code == 2 and "not both" in capsys.readouterr().err


def test_states_that_cannot_be_solved_are_flagged_not_fatal(tmp_path, capsys, monkeypatch):
    # at 2,000 K a solar gas supplies at most P_e ~ 0.016 dyn cm^-2 (H- takes the electrons
    # beyond that; tests/test_physical_defaults.py checks the edge): the 1e4 states are
    # unreachable, the others are solved as usual
    monkeypatch.setenv("SAHABOLTZ_CACHE_DIR", str(tmp_path / "cache"))
    out = tmp_path / "pe.h5"
    code = main(["table", "build", "--temperature", "2000,9000", "--pressure", "1e-3,1e4",
                 "--pressure-quantity", "electron_pressure", "--fractions", "H,Fe",
                 "--no-progress", "-o", str(out)])
    cap = capsys.readouterr()
    assert code == 0
    assert "1 of 4 states could not be solved" in cap.err
    with open_table(out) as tab:
        status = tab["status"]
        frac = tab["fraction_Fe_I"]
    np.testing.assert_array_equal(status, [[0, 1], [0, 0]])
    assert np.isnan(frac[0, 1]) and np.isfinite(frac[status == 0]).all()
    with h5py.File(out) as f:
        assert f["status"].attrs["flag_meanings"].split()[1] == b"unreachable"
    direct = solve_equilibrium(solar(), [2000.0, 9000.0],
                               electron_pressure=1e-3).fraction("Fe I")
    np.testing.assert_allclose(frac[:, 0], direct, rtol=1e-9)


def test_condensed_fractions_are_stored_per_element(tmp_path, capsys, monkeypatch):
    # below about 1,650 K at 1e-4 bar (100 dyn cm^-2) corundum takes the aluminium
    # (Lodders 2003, ApJ 591, 1220: 50 % condensation of Al near 1650 K at 1e-4 bar, from
    # memory; tests/test_condensation.py checks the temperature itself)
    monkeypatch.setenv("SAHABOLTZ_CACHE_DIR", str(tmp_path / "cache"))
    path = _build(tmp_path, capsys, "--temperature", "1400,2000", "--pressure", "100,200",
                  "--molecules", "default", "--condensates", "--fractions", "Al,O")
    with open_table(path) as tab:
        al = tab["condensed_fraction_Al"][:, 0]
        assert tab.units("condensed_fraction_Al") == "1"
        al_atoms = tab["fraction_Al_I"][:, 0] + tab["fraction_Al_II"][:, 0]
        al_mol = tab["molecular_fraction_Al"][:, 0]
    assert al[0] > 0.99 and al[1] == 0.0
    # every nucleus is somewhere: atoms and ions, molecules, condensates
    np.testing.assert_allclose(al_atoms + al_mol + al, 1.0, rtol=1e-9)
