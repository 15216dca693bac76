"""``sahaboltz diagnose``: synthesize a line list, fit it, plot, and fail cleanly."""

import json
import math

import pytest

from sahaboltz.faces import cli


@pytest.fixture
def run(monkeypatch, capsys):
    # only this command group, so the test does not depend on the other command modules
    monkeypatch.setattr(cli, "COMMAND_MODULES", ["sahaboltz.faces.cmd_diagnose"])

    def _run(*argv):
        code = cli.main(list(argv))
        out = capsys.readouterr()
        return code, out.out, out.err
    return _run


@pytest.fixture
def synthetic_csv(run, tmp_path):
    path = tmp_path / "fe.csv"
    code, out, _ = run("diagnose", "synthesize", "--species", "Fe I", "Fe II", "--lines", "9",
                       "--temperature", "10000", "--electron-density", "5e16", "--noise", "0.03",
                       "--seed", "5", "--output", str(path), "--format", "json")
    assert code == 0 and path.exists()
    assert "SYNTHETIC" in path.read_text().splitlines()[0]
    return path


def _summary(out):
    return json.loads(out)          # one flat object


def test_boltzmann_json_and_plot(run, synthetic_csv, tmp_path):
    png = tmp_path / "b.png"
    code, out, _ = run("diagnose", "boltzmann", str(synthetic_csv), "--species", "Fe II",
                       "--plot", str(png), "--format", "json")
    assert code == 0
    s = _summary(out)
    assert abs(s["temperature_K"] - 10000) < 3 * s["temperature_error_K"]
    assert "safety" in s["note"]
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"   # PNG signature (the PNG spec)


def test_saha_boltzmann_both_modes(run, synthetic_csv, tmp_path):
    code, out, _ = run("diagnose", "saha-boltzmann", str(synthetic_csv), "--format", "json",
                       "--plot", str(tmp_path / "sb.png"))
    assert code == 0
    s = _summary(out)
    assert abs(s["temperature_K"] - 10000) < 3 * s["temperature_error_K"]
    # n_e is log-normal: 5e16 lies within 3 sigma of ln n_e, and the bounds bracket n_e
    assert abs(math.log(s["n_e_cm-3"] / 5e16)) < 3 * s["sigma_ln_n_e"]
    assert s["n_e_low_cm-3"] < s["n_e_cm-3"] < s["n_e_high_cm-3"]
    assert s["sigma_log10_n_e"] == pytest.approx(s["sigma_ln_n_e"] / math.log(10), rel=1e-12)
    assert s["mcwhirter_satisfied"] is True and s["n_e_source"] == "fitted"
    code, out, _ = run("diagnose", "saha-boltzmann", str(synthetic_csv), "--electron-density",
                       "5e16", "--electron-density-error", "5e15", "--format", "csv",
                       "--show-lines")
    assert code == 0
    rows = out.strip().splitlines()
    assert rows[0].startswith("species,wavelength_nm,x_eV,y")
    assert len(rows) == 1 + 18


def test_density_pairs_and_selection(run, synthetic_csv):
    code, out, _ = run("diagnose", "density", str(synthetic_csv), "--temperature", "10000",
                       "--temperature-error", "200", "--format", "json", "--show-pairs")
    assert code == 0
    rows = json.loads(out)["rows"]
    assert len(rows) == 81                                 # 9 x 9 pairs
    for r in rows:
        assert abs(math.log(r["n_e_cm-3"] / 5e16)) < 3 * r["sigma_ln_n_e"]
        assert r["outlier"] is False
    code, out, _ = run("diagnose", "density", str(synthetic_csv), "-T", "10000 K",
                       "--temperature-error", "200", "--format", "json")
    s = json.loads(out)                                    # the combined estimate
    assert code == 0 and s["pairs"] == 81 and s["outlier_pairs"] == 0
    assert abs(math.log(s["n_e_cm-3"] / 5e16)) < 3 * s["sigma_ln_n_e"]
    wl = rows[10]["neutral"].split()[-1]
    code, out, _ = run("diagnose", "density", str(synthetic_csv), "--temperature", "10000",
                       "--neutral", wl, "--format", "json", "--show-pairs")
    assert code == 0 and len(json.loads(out)["rows"]) == 9


def test_errors_exit_2_with_message(run, synthetic_csv, tmp_path):
    code, _, err = run("diagnose", "boltzmann", str(synthetic_csv))
    assert code == 2 and "one species" in err
    code, _, err = run("diagnose", "boltzmann", str(tmp_path / "nope.csv"))
    assert code == 2 and "cannot read line list" in err
    code, _, err = run("diagnose", "density", str(synthetic_csv), "--temperature", "9000",
                       "--ion", "1.0")
    assert code == 2 and "--ion 1.0 nm" in err
    bad = tmp_path / "bad.csv"
    bad.write_text("species,wavelength_nm\nFe I,400\n")
    code, _, err = run("diagnose", "saha-boltzmann", str(bad))
    assert code == 2 and f"{bad}:1: missing column" in err
