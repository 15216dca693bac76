"""One option grammar, units, output formats, structures, plots, progress and notebooks.

Check values and their sources:
- 1 atm = 101325 Pa and 1 Pa = 10 dyn cm^-2 (SI definitions, BIPM SI brochure); the Celsius
  scale is T/K = t/degC + 273.15 (SI definition); astropy's units are the reference library.
- pure hydrogen without H-: the Saha equation with U(H I) = 2, U(H II) = 1 and the NIST
  ionization energy 13.598434 eV (tests/test_plots.py; value from memory), good to 2e-4
  below 8,000 K (Barklem & Collet 2016 give U(H I) = 2.00001 at 8,000 K).
- the weighted mean of ln n_e: numpy's ``np.average`` with the same weights (reference
  library); the forward model at zero noise returns the n_e it was given.
- PNG width in pixels = figure width [in] x dpi (PNG IHDR chunk, PNG specification).
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import struct
import subprocess
import sys
import threading
import time
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest

import sahaboltz as sb
from sahaboltz.data.composition import Composition
from sahaboltz.errors import InputError
from sahaboltz.faces import cli, plots
from sahaboltz.faces.cli import main
from sahaboltz.quantities import parse_quantity, parse_values_text

from test_plots import hydrogen_fraction_saha

ROOT = Path(__file__).resolve().parents[1]


def _run(capsys, *argv):
    code = main(list(argv))
    out = capsys.readouterr()
    return code, out.out, out.err


# -- the command line itself -----------------------------------------------------------------
def test_top_level_help_lists_every_command_without_importing_them():
    # COMMANDS (the top-level help) must name exactly the commands the modules register
    import argparse
    import importlib

    parser = argparse.ArgumentParser()
    sub = parser.add_subparsers()
    for name in cli.COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    registered = {a.dest: a.help for a in sub._choices_actions}
    assert registered == {k: v[1] for k, v in cli.COMMANDS.items()}
    # and `sahaboltz --help` imports none of the command modules, nor numpy (start-up time)
    code = ("import sys\nfrom sahaboltz.faces.cli import main\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "print([m for m in sys.modules if m.startswith('sahaboltz.faces.cmd_') "
            "or m in ('numpy', 'astropy')])")
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env={**os.environ, "PYTHONPATH": str(ROOT)}, check=True)
    assert "COMMAND" in res.stdout and res.stdout.strip().endswith("[]")


def _parsers():
    import argparse

    parser = cli.build_parser()
    todo = [parser]
    while todo:
        p = todo.pop()
        yield p
        for a in p._actions:
            if isinstance(a, argparse._SubParsersAction):
                todo.extend(a.choices.values())


def test_help_texts_are_plain_text():
    for p in _parsers():
        texts = [p.description or ""] + [a.help or "" for a in p._actions]
        for text in texts:
            assert "``" not in text and ":mod:" not in text and ":func:" not in text, (p.prog,
                                                                                        text)


def test_ctrl_c_is_one_line_and_exit_130(capsys, monkeypatch):
    import sahaboltz.faces.cmd_species as species

    def interrupted(args):
        raise KeyboardInterrupt
    monkeypatch.setattr(species, "run_info", interrupted)
    code, out, err = _run(capsys, "info", "Fe")
    assert code == 130 and err == "sahaboltz: interrupted\n" and out == ""


# -- units -----------------------------------------------------------------------------------
@pytest.mark.parametrize("text, unit, expect", [
    ("1 atm", "dyn cm-2", 1.01325e6),          # 101325 Pa (SI definition) = 1.01325e6 dyn cm-2
    ("1atm", "dyn cm-2", 1.01325e6),
    ("1e4 Pa", "dyn cm-2", 1e5),               # 1 Pa = 10 dyn cm-2
    ("1 bar", "dyn cm-2", 1e6),
    ("6000 K", "K", 6000.0),
    ("5726.85 degC", "K", 6000.0),             # T/K = t/degC + 273.15
    ("1e23 m-3", "cm-3", 1e17),
    ("2 g/cm3", "g cm-3", 2.0),
    ("1e5", "dyn cm-2", 1e5),                  # a bare number: the documented cgs unit
])
def test_parse_quantity_against_the_si_definitions(text, unit, expect):
    assert parse_quantity(text, unit, "--x") == pytest.approx(expect, rel=1e-12)


def test_values_with_units_and_ranges():
    np.testing.assert_allclose(parse_values_text("1e2,1e4 Pa", "--p", unit="dyn cm-2"),
                               [1e3, 1e5], rtol=1e-12)
    np.testing.assert_allclose(parse_values_text("1:100:3 atm", "--p", unit="dyn cm-2"),
                               [1.01325e6, 1.01325e7, 1.01325e8], rtol=1e-12)
    np.testing.assert_allclose(parse_values_text("26.85 degC:326.85 degC:2", "-T", unit="K",
                                                 scale="linear"), [300.0, 600.0], rtol=1e-12)


def test_cli_units_give_the_same_state(capsys):
    doc = []
    for t, p in (("6000", "1.01325e6"), ("5726.85 degC", "1 atm"), ("6000 K", "101325 Pa")):
        code, out, _ = _run(capsys, "state", "-T", t, "--gas-pressure", p, "--mix", "H:1",
                            "--format", "json")
        assert code == 0
        doc.append(json.loads(out)["meta"])
    for d in doc[1:]:
        assert d["temperature_K"] == pytest.approx(doc[0]["temperature_K"], rel=1e-12)
        assert d["n_e_cm-3"] == pytest.approx(doc[0]["n_e_cm-3"], rel=1e-10)


def test_python_api_takes_any_temperature_scale():
    h = Composition.from_number({"H": 1.0})
    a = sb.solve_equilibrium(h, 6000.0, gas_pressure=1e5, h_minus=False)
    b = sb.solve_equilibrium(h, 5726.85 * u.deg_C, gas_pressure=1e4 * u.Pa, h_minus=False)
    assert float(b.temperature) == pytest.approx(6000.0, rel=1e-12)
    assert float(b.n_e) == pytest.approx(float(a.n_e), rel=1e-10)
    assert float(sb.partition_function("Fe I", 5726.85 * u.deg_C)) == pytest.approx(
        float(sb.partition_function("Fe I", 6000.0)), rel=1e-12)


def test_one_temperature_grammar_in_partition(capsys):
    code, out, _ = _run(capsys, "partition", "H I", "-T", "2000:8000:4", "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert code == 0 and [float(r["T_K"]) for r in rows] == [2000.0, 4000.0, 6000.0, 8000.0]
    code, out, _ = _run(capsys, "partition", "H I", "-T", "1000:100000:3",
                        "--temperature-scale", "log", "--format", "csv")
    np.testing.assert_allclose([float(r["T_K"]) for r in csv.DictReader(io.StringIO(out))],
                               [1e3, 1e4, 1e5], rtol=1e-12)
    # the old spellings still work: --n-e for --electron-density, --range START STOP N
    code, out, _ = _run(capsys, "partition", "H I", "--range", "2000", "8000", "4",
                        "--n-e", "1e15", "--format", "json")
    old = json.loads(out)
    code, out, _ = _run(capsys, "partition", "H I", "-T", "2000:8000:4",
                        "--electron-density", "1e21 m-3", "--format", "json")
    assert json.loads(out)["rows"] == old["rows"] and old["meta"]["truncation"] == "occupation"


# -- state output ------------------------------------------------------------------------------
def test_state_csv_and_json_carry_the_conditions(capsys):
    code, out, _ = _run(capsys, "state", "-T", "9000", "--gas-pressure", "1e5", "--mix", "H:1",
                        "--no-h-minus", "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert code == 0 and {r["species"] for r in rows} == {"H I", "H II"}
    x = hydrogen_fraction_saha(9000.0, 1e5)
    for r in rows:
        assert float(r["temperature_K"]) == 9000.0
        assert float(r["gas_pressure_dyn_cm-2"]) == 1e5      # written 100000.0, not 99999.99..
        assert float(r["n_e_cm-3"]) > 0 and r["dominant"] in ("True", "False")
    h2 = next(r for r in rows if r["species"] == "H II")
    assert float(h2["fraction"]) == pytest.approx(x, rel=3e-3)   # Saha, U = 2 (at 9,000 K)
    code, out, _ = _run(capsys, "state", "-T", "9000", "--gas-pressure", "1e5", "--mix", "H:1",
                        "--format", "json")
    doc = json.loads(out)
    assert all(isinstance(r["dominant"], bool) for r in doc["rows"])
    assert doc["meta"]["gas_pressure_dyn_cm-2"] == 1e5 and doc["meta"]["closure"] == "gas_pressure"


# -- structures --------------------------------------------------------------------------------
def test_state_from_a_structure_file(tmp_path, capsys):
    t = np.array([5000.0, 6000.0, 7000.0, 8000.0])
    p = np.array([1e1, 3e1, 1e2, 3e2])            # dyn cm-2, written in Pa
    src = tmp_path / "model.txt"
    src.write_text("# a structure of our own\n  depth   T [K]   P_gas [Pa]\n" + "".join(
        f"  {k}  {tk:.1f}  {pk / 10:.6g}\n" for k, (tk, pk) in enumerate(zip(t, p))))
    out = tmp_path / "pops.csv"
    code, _, err = _run(capsys, "state", "--from", str(src), "--mix", "H:1", "--no-h-minus",
                        "--species", "H I,H II", "--levels", "H I:0-2", "-o", str(out))
    assert code == 0, err
    lines = [ln for ln in out.read_text().splitlines() if not ln.startswith("#")]
    rows = list(csv.DictReader(lines))
    assert len(rows) == 4 and [float(r["depth"]) for r in rows] == [0, 1, 2, 3]
    np.testing.assert_allclose([float(r["fraction_H_II"]) for r in rows],
                               hydrogen_fraction_saha(t, p), rtol=2e-4)
    # the level populations add up to no more than the H I density, the ground level most
    for r in rows:
        pops = [float(r[f"population_H_I_L{i}_cm-3"]) for i in range(3)]
        assert sum(pops) <= float(r["number_density_H_I_cm-3"]) * (1 + 1e-12)
        assert pops[0] > pops[1] > 0
    # JSON and HDF5 hold the same rows
    import h5py
    for name in ("pops.json", "pops.h5"):
        code, _, _ = _run(capsys, "state", "--from", str(src), "--mix", "H:1", "--no-h-minus",
                          "--species", "H II", "-o", str(tmp_path / name))
        assert code == 0
    doc = json.loads((tmp_path / "pops.json").read_text())
    with h5py.File(tmp_path / "pops.h5", "r") as f:
        np.testing.assert_allclose(f["fraction_H_II"][()],
                                   [r["fraction_H_II"] for r in doc["rows"]], rtol=1e-9)
    assert doc["closure"] == "gas_pressure" and doc["rows"][0]["gas_pressure_dyn_cm-2"] == 10.0


def test_structure_units_from_options_and_csv(tmp_path, capsys):
    src = tmp_path / "m.csv"
    src.write_text("T,Pe\n4726.85,1\n5726.85,1\n")     # degC and Pa given as options
    code, out, err = _run(capsys, "state", "--from", str(src), "--temperature-unit", "degC",
                          "--pressure-unit", "Pa", "--mix", "H:1", "--species", "H II",
                          "--format", "json")
    assert code == 0, err
    rows = json.loads(out)["rows"]
    assert [r["temperature_K"] for r in rows] == [5000.0, 6000.0]
    assert [r["electron_pressure_dyn_cm-2"] for r in rows] == pytest.approx([10.0, 10.0],
                                                                             rel=1e-9)


# -- diagnostics -------------------------------------------------------------------------------
def _lines(noise=0.03, seed=3):
    """A synthetic Fe I + Fe II line list at 10,000 K, n_e = 5e16 cm-3 (the forward model)."""
    from sahaboltz.diagnostics import synthesize, synthetic_line_list

    rng = np.random.default_rng(seed)
    base = synthetic_line_list(["Fe I", "Fe II"], 6, rng=rng)
    return synthesize(base, 10000.0, 5e16, relative_error=noise, rng=rng)


def test_combined_density_is_the_weighted_mean_in_ln_ne():
    from sahaboltz.diagnostics import all_pairs, ratio_density

    lines = _lines(noise=0.05)
    neutral, ion = all_pairs(lines)
    res = ratio_density(neutral, ion, 10000.0, 100.0)
    comb = res.combined()
    assert not comb.outlier.any()
    w = 1.0 / res.error_budget["lines"] ** 2
    assert math.log(comb.electron_density) == pytest.approx(
        np.average(np.log(res.electron_density), weights=w), rel=1e-12)
    lo, hi = comb.electron_density_bounds
    assert lo < comb.electron_density < hi
    assert hi / comb.electron_density == pytest.approx(comb.electron_density / lo, rel=1e-12)
    assert abs(math.log(comb.electron_density / 5e16)) < 3 * comb.ln_ne_error
    # shared lines: the error of the mean is larger than if the 36 pairs were independent
    assert comb.ln_error_lines > np.sqrt(1.0 / w.sum())
    assert comb.log10_ne_error == pytest.approx(comb.ln_ne_error / math.log(10), rel=1e-12)


def test_a_bad_line_flags_its_pairs():
    from sahaboltz.diagnostics import all_pairs, ratio_density

    lines = _lines(noise=0.02)
    k = int(np.flatnonzero(lines.charge == 0)[0])
    lines.intensity[k] *= 20.0                       # a blend: 20 times too bright
    neutral, ion = all_pairs(lines)
    res = ratio_density(neutral, ion, 10000.0)
    comb = res.combined()
    bad = (neutral.wavelength_nm == lines.wavelength_nm[k])
    assert comb.outlier[bad].all() and not comb.outlier[~bad].any()
    # the pairs left are unharmed: the combined n_e is the true one (within its error)
    assert abs(math.log(comb.electron_density / 5e16)) < 3 * comb.ln_ne_error


def test_fit_names_say_which_logarithm():
    from sahaboltz.diagnostics import saha_boltzmann_plot

    fit = saha_boltzmann_plot(_lines(noise=0.03))
    s = fit.summary()
    assert s["sigma_ln_n_e"] == fit.ln_ne_error
    assert s["sigma_log10_n_e"] == pytest.approx(fit.ln_ne_error / math.log(10), rel=1e-12)
    assert (s["n_e_low_cm-3"], s["n_e_high_cm-3"]) == pytest.approx(
        (fit.electron_density * math.exp(-fit.ln_ne_error),
         fit.electron_density * math.exp(fit.ln_ne_error)), rel=1e-12)
    with pytest.warns(DeprecationWarning):
        assert fit.log_ne_error == fit.ln_ne_error


def test_diagnose_summary_is_readable_and_json_flat(tmp_path, capsys):
    from sahaboltz.diagnostics import write_lines

    path = tmp_path / "l.csv"
    write_lines(path, _lines(noise=0.03))
    code, out, _ = _run(capsys, "diagnose", "saha-boltzmann", str(path))
    assert code == 0
    t_line = next(ln for ln in out.splitlines() if ln.strip().startswith("temperature_K"))
    assert t_line.index(t_line.split()[1]) < 40       # the value next to its key
    assert max(len(ln) for ln in out.splitlines()) <= 140
    code, out, _ = _run(capsys, "diagnose", "saha-boltzmann", str(path), "--format", "json")
    doc = json.loads(out)
    assert "rows" not in doc and isinstance(doc["temperature_K"], float)


# -- plots -------------------------------------------------------------------------------------
def _png_size(path: Path) -> tuple[int, int]:
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", data[16:24])          # IHDR width, height


def test_plots_into_your_own_axes_without_annotations(tmp_path):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(10, 4))
    ax1, ax2 = fig.subplots(1, 2)
    t = np.linspace(5000.0, 8000.0, 7)
    h = Composition.from_number({"H": 1.0})
    f1, a1 = plots.stage_fractions_plot("H", t, 1e1, composition=h, h_minus=False, ax=ax1,
                                        annotate=False)
    f2, a2 = plots.electron_pressure_plot(t, [1e1], composition=h, h_minus=False, ax=ax2)
    assert f1 is fig and f2 is fig and a1 is ax1 and a2 is ax2
    assert ax1.get_title() == "" and ax2.get_title() != ""
    np.testing.assert_allclose(ax1.lines[1].get_ydata(), hydrogen_fraction_saha(t, 1e1),
                               rtol=2e-4)
    path = plots.save_figure(fig, tmp_path / "two.png", dpi=50)
    assert _png_size(path) == (500, 200)
    mode = path.stat().st_mode & 0o777
    umask = os.umask(0)
    os.umask(umask)
    assert mode == 0o666 & ~umask                    # a new file's usual permissions


def test_default_png_is_200_dpi(tmp_path):
    fig, ax = plots.new_figure()
    ax.plot([1, 2], [1, 2])
    w, h = _png_size(plots.save_figure((fig, ax), tmp_path / "a.png"))
    assert (w, h) == (round(7.2 * 200), round(5.0 * 200))


def test_diagnostic_plot_has_a_residual_panel(tmp_path):
    from sahaboltz.diagnostics import boltzmann_plot

    lines = _lines(noise=0.03)
    fit = boltzmann_plot(lines, "Fe I")
    fig, (ax, axr) = plots.diagnostic_fit_plot(fit)
    ys = np.concatenate([ln.get_ydata() for ln in axr.lines if ln.get_linestyle() == "None"])
    np.testing.assert_allclose(np.sort(ys), np.sort(fit.studentized[~np.isnan(fit.studentized)]))
    assert "$" in ax.get_ylabel() and "eV" in axr.get_xlabel()
    assert plots.save_figure(fig, tmp_path / "fit.png").stat().st_mode & 0o044 == 0o044


# -- progress and notebooks ------------------------------------------------------------------
def test_progress_modes():
    from sahaboltz.tables.progress import Progress

    log = io.StringIO()
    p = Progress(100, None, stream=log, interval=0.0)     # not a terminal: log lines
    assert p.mode == "log"
    p.update(40)
    p.close()
    assert log.getvalue().startswith("sahaboltz: table build 40% (40 of 100 states)")
    quiet = io.StringIO()
    q = Progress(100, False, stream=quiet)
    q.update(100)
    q.close()
    assert quiet.getvalue() == ""
    bar = io.StringIO()
    b = Progress(10, True, stream=bar)
    b.update(10)
    b.close()
    assert "10/10" in bar.getvalue()                       # a tqdm (or plain) bar


def test_quantities_and_html():
    state = sb.solve_equilibrium(sb.solar(), 5800.0, gas_pressure=1e5)
    ne = state.quantity("n_e")
    assert ne.unit == u.cm**-3 and float(ne.value) == float(state.n_e)
    assert state.quantity("gas_pressure").to_value(u.Pa) == pytest.approx(1e4, rel=1e-10)
    assert state.quantity("number_density", "Fe II").unit == u.cm**-3
    with pytest.raises(InputError, match="unknown name"):
        state.quantity("n_x")
    html = state._repr_html_()
    assert html.startswith("<div>") and "dominant Fe" in html and "Fe II" in html


def test_table_quantity(tmp_path, capsys):
    path = tmp_path / "h.h5"
    code, _, _ = _run(capsys, "table", "build", "-T", "5000:8000:7", "--pressure",
                      "1e0:1e2:5 Pa", "--mix", "H:1", "--no-h-minus", "--no-progress",
                      "-o", str(path))
    assert code == 0
    tab = sb.open_table(path)
    pe = tab.quantity("electron_pressure", 6000 * u.K, 1 * u.Pa)       # 10 dyn cm-2, on grid
    assert pe.unit == u.dyn / u.cm**2
    x = hydrogen_fraction_saha(6000.0, 10.0)
    assert pe.to_value(u.dyn / u.cm**2) == pytest.approx(10.0 * x / (1 + x), rel=2e-4)
    assert tab.quantity("fraction_H_II", 6000.0, 10.0).unit == u.dimensionless_unscaled
    assert "PopulationTable" in tab._repr_html_()
    tab.close()


# -- a builder that waited ---------------------------------------------------------------------
def slow_compute(spec, t, p):
    time.sleep(1.0)
    return {"electron_density": t * 0 + 1.0}


def test_a_builder_that_only_waited_says_so(tmp_path):
    from sahaboltz.faces.cmd_demo import STATUS_WORDS
    from sahaboltz.tables.cache import obtain_table
    from sahaboltz.tables.spec import TableSpec

    spec = TableSpec.from_mapping({"temperature": {"scale": "values", "values": [3e3, 4e3]},
                                   "pressure": {"scale": "values", "values": [1e2, 1e3]},
                                   "outputs": {"quantities": ["electron_density"],
                                               "stage_fractions": []}})
    got = {}

    def build(name):
        got[name] = obtain_table(spec, compute=slow_compute, directory=tmp_path, workers=1,
                                 progress=False).status
    first = threading.Thread(target=build, args=("first",))
    first.start()
    time.sleep(0.4)
    build("second")
    first.join()
    assert got == {"first": "built", "second": "waited"}
    assert "waited" in STATUS_WORDS["waited"]
