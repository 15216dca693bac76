"""Tables built from the shared state options (mixtures, lowering, molecules)."""

import h5py
import numpy as np
import pytest

from sahaboltz.data.composition import Composition
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.faces.cli import main


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
    with h5py.File(path) as f:
        frac = f["fraction_Ar_II"][:, 0]
    # the same state solved directly: argon with lowering (truncation at the lowered limit)
    direct = solve_equilibrium(Composition.from_number({"Ar": 1}), [9000.0, 15000.0],
                               gas_pressure=1.013e6, lowering=True).fraction("Ar II")
    np.testing.assert_allclose(frac, direct, rtol=1e-9)


def test_molecules_are_stored_per_element(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("SAHABOLTZ_CACHE_DIR", str(tmp_path / "cache"))
    path = _build(tmp_path, capsys, "--temperature", "2500,5000", "--pressure", "1e6,2e6",
                  "--molecules", "default", "--fractions", "H,C,O")
    with h5py.File(path) as f:
        mol_h = f["molecular_fraction_H"][:, 0]
        assert f["molecular_fraction_C"].attrs["units"] == "1"
        h1 = f["fraction_H_I"][:, 0]
    # cool dense gas: hydrogen mostly molecular (A&A 363, 1065 (2000), sect. 1); hot: atomic
    assert mol_h[0] > 0.5 and mol_h[1] < 0.05
    # stage fractions are shares of all of the element's nuclei, molecules included
    assert h1[0] == pytest.approx(1 - mol_h[0], abs=1e-6)


def test_spec_file_and_options_together_is_an_error(tmp_path, capsys):
    spec = tmp_path / "g.toml"
    main(["table", "template"])
    spec.write_text(capsys.readouterr().out)
    code = main(["table", "build", str(spec), "--mix", "Ar:1", "--no-progress"])
    assert code == 2 and "not both" in capsys.readouterr().err
