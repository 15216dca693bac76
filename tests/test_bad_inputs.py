"""A battery of bad inputs through the command line and the Python API.

Every case must end in a clear message that names the input (the CLI option, the spec key,
the file, or the Python argument), a non-zero exit status (2, as argparse uses for bad
options) and no traceback; from Python, an exception of the package's own hierarchy
(``SahaboltzError``), not a bare ValueError / TypeError / OSError.
"""

from __future__ import annotations

import multiprocessing
import os
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest

import sahaboltz as sb
from sahaboltz.errors import SahaboltzError
from sahaboltz.faces.cli import main

# -- the command line ----------------------------------------------------------------------------
STATE = ["state", "-T", "5000", "--gas-pressure", "1e5"]

#: (id, argv, a fragment the message must contain); {d} is a directory of the test's own
CLI_CASES = [
    ("T not a number", ["state", "-T", "hot", "--gas-pressure", "1e5"], "-T/--temperature"),
    ("T list for one state", ["state", "-T", "3000,6000", "--gas-pressure", "1e5"],
     "-T/--temperature: give one value here"),
    ("half-ionization T one value", ["half-ionization", "H", "--electron-pressure", "200",
                                     "-T", "3000"], "-T/--temperature: give the range searched"),
    ("half-ionization T reversed", ["half-ionization", "H", "--electron-pressure", "200",
                                    "-T", "5e4:3000"], "from a lower to a higher"),
    ("T zero", ["state", "-T", "0", "--gas-pressure", "1e5"], "-T/--temperature must be pos"),
    ("T below absolute zero", ["state", "-T", "-300 degC", "--gas-pressure", "1e5"],
     "-T/--temperature must be positive"),
    ("T wrong unit", ["state", "-T", "5000 Pa", "--gas-pressure", "1e5"], "temperature"),
    ("pressure wrong unit", ["state", "-T", "5000", "--gas-pressure", "1 kg"],
     "--gas-pressure"),
    ("pressure unknown unit", ["state", "-T", "5000", "--gas-pressure", "1 furlong2"],
     "--gas-pressure"),
    ("pressure negative", ["state", "-T", "5000", "--gas-pressure", "-5"], "--gas-pressure"),
    ("pressure nan", ["state", "-T", "5000", "--gas-pressure", "nan"], "--gas-pressure"),
    ("density wrong unit", ["state", "-T", "5000", "--mass-density", "1 K"], "--mass-density"),
    ("no closure", ["state", "-T", "5000"], "--gas-pressure"),
    ("two closures", STATE + ["--mass-density", "1e-7"], "not allowed with argument"),
    ("no temperature", ["state", "--gas-pressure", "1e5"], "-T/--temperature is needed"),
    ("mix twice", STATE + ["--mix", "H:1,H:2"], "--mix: H is given twice"),
    ("mix twice any case", STATE + ["--mix", "fe:1,Fe:2"], "--mix: Fe is given twice"),
    ("mix unknown element", STATE + ["--mix", "Xx:1"], "--mix: unknown element 'Xx'"),
    ("mix amount text", STATE + ["--mix", "H:abc"], "--mix: amount of H is not a number"),
    ("mix amount negative", STATE + ["--mix", "H:-1"], "--mix: amount of H must be a positive"),
    ("mix no amount", STATE + ["--mix", "H"], "--mix: expected 'Element:amount'"),
    ("metallicity text", STATE + ["--metallicity", "low"], "--metallicity"),
    ("truncation unknown", STATE + ["--truncation", "sharp"], "--truncation"),
    ("molecules unknown", STATE + ["--molecules", "some"], "--molecules"),
    ("min-fraction negative", STATE + ["--min-fraction", "-1"], "--min-fraction"),
    ("budget without molecules", STATE + ["--budget"], "--budget needs molecules"),
    ("levels without --from", STATE + ["--levels", "H I:0"], "--levels goes with --from"),
    ("species without --from", STATE + ["--species", "H I"], "--species goes with --from"),
    ("from missing file", ["state", "--from", "{d}/none.txt"], "--from {d}/none.txt: cannot"),
    ("from no header", ["state", "--from", "{d}/noheader.txt"], "first line must name"),
    ("from bad number", ["state", "--from", "{d}/badnumber.txt"], "line 3: 'x' is not a num"),
    ("from short row", ["state", "--from", "{d}/shortrow.txt"], "line 3: 1 values for 2"),
    ("from no T column", ["state", "--from", "{d}/noT.txt"], "no temperature column"),
    ("from two pressures", ["state", "--from", "{d}/twoP.txt"], "several pressure-like"),
    ("from bad unit", ["state", "--from", "{d}/badunit.txt"], "column 'P_gas'"),
    ("from negative T", ["state", "--from", "{d}/negT.txt"], "column 'T' must be positive"),
    ("from with -T", ["state", "--from", "{d}/ok.txt", "-T", "5000"], "leave out -T"),
    ("from unknown column", ["state", "--from", "{d}/ok.txt", "--temperature-column", "Tx"],
     "--temperature-column 'Tx'"),
    ("from level out of range", ["state", "--from", "{d}/ok.txt", "--mix", "H:1", "--levels",
                                 "H I:999"], "--levels H I:999"),
    ("from bad level text", ["state", "--from", "{d}/ok.txt", "--levels", "H I:a"],
     "--levels: level selection"),
    ("from output suffix", ["state", "--from", "{d}/ok.txt", "--mix", "H:1", "-o",
                            "{d}/out.txt"], "-o/--output"),
    ("half-ionization element", ["half-ionization", "Xx", "--electron-pressure", "10"],
     "unknown element"),
    ("half-ionization pressure", ["half-ionization", "H", "--electron-pressure", "lots"],
     "--electron-pressure"),
    ("partition no T", ["partition", "Fe I"], "-T/--temperature"),
    ("partition range NUM", ["partition", "Fe I", "-T", "1000:2000:x"], "NUM of MIN:MAX:NUM"),
    ("partition range order", ["partition", "Fe I", "-T", "5000:1000:5"], "0 < MIN < MAX"),
    ("partition range parts", ["partition", "Fe I", "-T", "1000:2000"], "MIN:MAX:NUM"),
    ("partition species", ["partition", "Xx I", "-T", "5000"], "unknown element"),
    ("partition lowering no n_e", ["partition", "Fe I", "-T", "5000", "--lowering"],
     "--lowering needs --electron-density"),
    ("partition lowering twice", ["partition", "Fe I", "-T", "5000", "--lowering",
                                  "--lowering-energy", "0.1", "--electron-density", "1e15"],
     "not both"),
    ("partition n_e unit", ["partition", "Fe I", "-T", "5000", "--electron-density", "1 K"],
     "--electron-density"),
    ("populations limit", ["populations", "H I", "-T", "1e4", "--limit", "0"], "--limit"),
    ("populations T", ["populations", "H I", "-T", "warm"], "-T/--temperature"),
    ("levels max-energy", ["levels", "Fe II", "--max-energy", "-1"], "--max-energy"),
    ("info unknown", ["info", "Qq"], "Qq"),
    ("spec min text", ["table", "build", "{d}/min.toml", "-o", "{d}/t.h5"],
     "temperature.min must be a number, got text 'hot'"),
    ("spec num text", ["table", "build", "{d}/num.toml", "-o", "{d}/t.h5"],
     "temperature.num must be a number, got text 'ten'"),
    ("spec values text", ["table", "build", "{d}/values.toml", "-o", "{d}/t.h5"],
     "temperature.values[0] must be a number"),
    ("spec number for table", ["table", "build", "{d}/bare.toml", "-o", "{d}/t.h5"],
     "temperature must be a table"),
    ("spec list for number", ["table", "build", "{d}/list.toml", "-o", "{d}/t.h5"],
     "temperature.min must be a number, got a list"),
    ("spec boolean text", ["table", "build", "{d}/bool.toml", "-o", "{d}/t.h5"],
     "physics.lowering must be true or false"),
    ("spec outputs number", ["table", "build", "{d}/outputs.toml", "-o", "{d}/t.h5"],
     "outputs.levels must be a list"),
    ("spec abundance text", ["table", "build", "{d}/abund.toml", "-o", "{d}/t.h5"],
     "composition.abundances.H must be a number"),
    ("spec unit wrong", ["table", "build", "{d}/unit.toml", "-o", "{d}/t.h5"],
     "temperature axis: temperature.unit"),
    ("spec not toml", ["table", "build", "{d}/broken.toml", "-o", "{d}/t.h5"],
     "is not valid TOML"),
    ("spec missing", ["table", "build", "{d}/none.toml"], "cannot read table spec"),
    ("spec and options", ["table", "build", "{d}/min.toml", "-T", "3000:4000:2"],
     "either a spec file or grid options"),
    ("output under a file", ["table", "build", "-T", "3000:4000:2", "--pressure", "1e4:1e5:2",
                             "-o", "{d}/afile/t.h5"], "{d}/afile"),
    ("output is a directory", ["table", "build", "-T", "3000:4000:2", "--pressure",
                               "1e4:1e5:2", "-o", "{d}"], "is a directory"),
    ("axis unit", ["table", "build", "-T", "3000:4000:2", "--pressure", "1 foo"],
     "--pressure: unknown unit"),
    ("axis range parts", ["table", "build", "-T", "3000:4000", "--pressure", "1e4:1e5:2"],
     "-T/--temperature: give MIN:MAX:NUM"),
    ("axis unsorted", ["table", "build", "-T", "4000,3000", "--pressure", "1e4:1e5:2"],
     "-T/--temperature: temperature axis values must be strictly increasing"),
    ("compute unknown", ["table", "build", "-T", "3000:4000:2", "--pressure", "1e4:1e5:2",
                         "--compute", "nomodule_x:f"], "--compute"),
    ("query missing table", ["table", "query", "{d}/none.h5", "--at", "5000,1e5"],
     "no table file {d}/none.h5"),
    ("query missing key", ["table", "query", "0123abcd", "--at", "5000,1e5"],
     "no cached table with key starting '0123abcd'"),
    ("query point", ["table", "query", "{d}/small.h5", "--at", "5000"], "--at: write T,P"),
    ("query outside", ["table", "query", "{d}/small.h5", "--at", "1e6,1e5"],
     "Give --outside clip to clamp"),
    ("boltzmann two species", ["diagnose", "boltzmann", "{d}/lines.csv"],
     "choose one (--species)"),
    ("lowered without lowering", STATE + ["--truncation", "lowered"],
     "--truncation lowered cuts the partition functions at the lowered ionization limit: "
     "it needs --lowering"),
    ("cache clear nothing", ["table", "cache", "clear"], "say which table"),
    ("plot one value", ["plot", "stages", "Fe", "--gas-pressure", "1e2,1e3", "-o",
                        "{d}/x.png"], "--gas-pressure: give one value"),
    ("plot suffix", ["plot", "stages", "Fe", "-T", "3000:5000:3", "-o", "{d}/x.gif"],
     "end the file name with .png or .pdf"),
    ("plot needs n_e", ["plot", "partition", "Fe I", "--truncations", "occupation", "-o",
                        "{d}/y.png"], "electron density"),
    ("plot dpi", ["plot", "stages", "Fe", "--dpi", "0"], "--dpi"),
    ("plot one temperature", ["plot", "stages", "Fe", "-T", "5000", "-o", "{d}/z.png"],
     "at least 2"),
    ("plot temperature unit", ["plot", "stages", "Fe", "-T", "3 kg:5 kg:3", "-o",
                               "{d}/z.png"], "-T/--temperature"),
    ("diagnose missing file", ["diagnose", "boltzmann", "{d}/none.csv"],
     "cannot read line list"),
    ("diagnose T", ["diagnose", "density", "{d}/lines.csv", "-T", "hot"], "-T/--temperature"),
    ("diagnose ion line", ["diagnose", "density", "{d}/lines.csv", "-T", "1e4", "--ion",
                           "1.0"], "--ion 1.0 nm"),
    ("synthesize lines", ["diagnose", "synthesize", "--species", "Fe I", "--lines", "0",
                          "-T", "1e4", "--electron-density", "1e16", "--output",
                          "{d}/s.csv"], "--lines"),
]


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    d = tmp_path_factory.mktemp("bad")
    files = {
        "noheader.txt": "5000 1e5\n",
        "badnumber.txt": "T P\n5000 1e5\n6000 x\n",
        "shortrow.txt": "T P\n5000 1e5\n6000\n",
        "noT.txt": "depth P\n1 1e5\n",
        "twoP.txt": "T P Pe\n5000 1e5 1\n",
        "badunit.txt": "T [K], P_gas [kg]\n5000, 1e5\n",
        "negT.txt": "T P\n-5 1e5\n",
        "ok.txt": "T P\n5000 1e5\n6000 1e5\n",
        "min.toml": 'temperature = {min = "hot", max = 1e4, num = 5}\n',
        "num.toml": 'temperature = {min = 3000, max = 1e4, num = "ten"}\n',
        "values.toml": 'temperature = {scale = "values", values = ["a", "b"]}\n',
        "bare.toml": "temperature = 5\n",
        "list.toml": "temperature = {min = [1, 2], max = 1e4, num = 5}\n",
        "bool.toml": 'physics = {lowering = "yes"}\n',
        "outputs.toml": "outputs = {levels = 5}\n",
        "abund.toml": 'composition = {abundances = {H = "x"}}\n',
        "unit.toml": 'temperature = {min = 3000, max = 1e4, num = 5, unit = "Pa"}\n',
        "broken.toml": "[temperature\nmin = 1\n",
        "afile": "a regular file\n",
    }
    for name, text in files.items():
        (d / name).write_text(text)
    assert main(["table", "build", "-T", "3000:6000:4", "--pressure", "1e4:1e5:3", "--mix",
                 "H:1", "--no-progress", "-o", str(d / "small.h5")]) == 0
    assert main(["diagnose", "synthesize", "--species", "Fe I", "Fe II", "--lines", "4",
                 "-T", "1e4", "--electron-density", "1e16", "--seed", "1", "--output",
                 str(d / "lines.csv")]) == 0
    return d


def _cli(argv, capsys):
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse: bad options exit with status 2 and a usage line
        code = exc.code
    out = capsys.readouterr()
    return code, out.err


@pytest.mark.parametrize("case", CLI_CASES, ids=[c[0] for c in CLI_CASES])
def test_cli_bad_input(case, inputs, capsys, monkeypatch):
    monkeypatch.setenv("SAHABOLTZ_CACHE_DIR", str(inputs / "cache"))
    _, argv, fragment = case
    argv = [a.format(d=inputs) for a in argv]
    capsys.readouterr()
    code, err = _cli(argv, capsys)
    assert code == 2, err
    assert fragment.format(d=inputs) in err
    assert "Traceback" not in err
    assert err.count("\n") <= 30                     # a message, not a dump
    last = err.strip().splitlines()[-1]
    assert last.startswith(("sahaboltz: error:", "sahaboltz ")), last


def test_cli_failed_state_in_cli_words(capsys):
    # the Python remedy (errors='mask') has no command-line form and is not offered there
    code, err = _cli(["state", "-T", "3000", "--electron-pressure", "1e12", "--mix",
                      "H:0.9,He:0.1"], capsys)
    assert code == 2 and "errors=" not in err and "electron_pressure" not in err
    assert err.startswith("sahaboltz: error: ") and "Traceback" not in err
    assert "--electron-pressure = 1e+12 (unreachable" in err


def test_cli_cache_directory_under_a_file(inputs, capsys, monkeypatch):
    monkeypatch.setenv("SAHABOLTZ_CACHE_DIR", str(inputs / "afile" / "cache"))
    code, err = _cli(["table", "build", "-T", "3000:4000:2", "--pressure", "1e4:1e5:2"],
                     capsys)
    assert code == 2 and "the table cache directory" in err and "SAHABOLTZ_CACHE_DIR" in err
    assert "Traceback" not in err


def test_cli_read_only_cache_directory(inputs, capsys, monkeypatch):
    # a read-only directory (the super-user may write anywhere, so the check is simulated)
    ro = inputs / "readonly"
    ro.mkdir(exist_ok=True)
    monkeypatch.setenv("SAHABOLTZ_CACHE_DIR", str(ro))
    real = os.access
    monkeypatch.setattr(os, "access",
                        lambda p, mode, **kw: False if Path(p) == ro else real(p, mode, **kw))
    code, err = _cli(["table", "build", "-T", "3000:4000:2", "--pressure", "1e4:1e5:2"],
                     capsys)
    assert code == 2 and f"cannot write in the table cache directory {ro}" in err
    assert "Traceback" not in err


@pytest.mark.parametrize("resume", [True, False])
def test_ctrl_c_during_a_build_leaves_no_worker_and_no_file(inputs, capsys, monkeypatch,
                                                            resume):
    from sahaboltz.tables import hdf5

    calls = []

    def interrupt(self, block, values):
        calls.append(block)
        raise KeyboardInterrupt
    monkeypatch.setattr(hdf5.TableWriter, "write_block", interrupt)
    out = inputs / f"ctrlc{resume}"
    out.mkdir()
    code, err = _cli(["table", "build", "-T", "3000:6000:20", "--pressure", "1e3:1e5:20",
                      "--mix", "H:1", "--workers", "2", "--chunk-states", "20",
                      "--no-progress", "-o", str(out / "t.h5")]
                     + ([] if resume else ["--no-resume"]), capsys)
    assert calls and code == 130 and err == "sahaboltz: interrupted\n"
    # no table and no stray temporary file: only the record that lets the next run of the
    # same command go on (tests/test_tables_resume.py), and none with --no-resume
    assert [f.name for f in out.iterdir()] == ([".t.h5.resume.tmp"] if resume else [])
    assert multiprocessing.active_children() == []  # no worker left


# -- the Python API ------------------------------------------------------------------------------
def _spec(**axis):
    return {"temperature": axis, "pressure": {"scale": "values", "values": [1e4, 1e5]}}


API_CASES = [
    ("temperature text", lambda: sb.solve_equilibrium(sb.solar(), "hot", gas_pressure=1e5),
     "temperature"),
    ("temperature unit", lambda: sb.solve_equilibrium(sb.solar(), 5000 * u.kg,
                                                      gas_pressure=1e5), "temperature"),
    ("pressure unit", lambda: sb.solve_equilibrium(sb.solar(), 5000.0,
                                                   gas_pressure=1 * u.K), "gas_pressure"),
    ("no closure", lambda: sb.solve_equilibrium(sb.solar(), 5000.0), "give exactly one"),
    ("unknown keyword", lambda: sb.solve_equilibrium(sb.solar(), 5000.0, pressure=1e5),
     "pressure"),
    ("max_passes zero", lambda: sb.solve_equilibrium(sb.solar(), 5e3, gas_pressure=1e5,
                                                     max_passes=0), "max_passes"),
    ("max_passes too small", lambda: sb.solve_equilibrium(sb.solar(), 5e3, gas_pressure=1e5,
                                                          max_passes=1),
     "max_passes=1 is below the default 200: raise it"),
    ("max_passes boolean", lambda: sb.solve_equilibrium(sb.solar(), 5e3, gas_pressure=1e5,
                                                        max_passes=True), "max_passes"),
    ("tolerance text", lambda: sb.solve_equilibrium(sb.solar(), 5e3, gas_pressure=1e5,
                                                    tolerance="tight"), "tolerance"),
    ("negative abundance", lambda: sb.Composition.from_number({"H": -1.0}), "H"),
    ("unknown species", lambda: sb.partition_function("Xx I", 5000.0), "Xx"),
    ("spec number for table", lambda: sb.TableSpec.from_mapping({"temperature": 5}),
     "temperature must be a table"),
    ("spec min text", lambda: sb.TableSpec.from_mapping(_spec(min="hot", max=1e4, num=3)),
     "temperature.min"),
    ("spec num fraction", lambda: sb.TableSpec.from_mapping(_spec(min=3e3, max=1e4, num=2.5)),
     "temperature.num must be a whole number"),
    ("spec per_decade negative", lambda: sb.TableSpec.from_mapping(
        _spec(min=3e3, max=1e4, per_decade=-1)), "per_decade"),
    ("spec physics list", lambda: sb.TableSpec.from_mapping({"physics": [1]}),
     "physics must be a table"),
    ("spec molecules number", lambda: sb.TableSpec.from_mapping({"physics": {"molecules": 3}}),
     "physics.molecules"),
    ("spec truncation number", lambda: sb.TableSpec.from_mapping(
        {"physics": {"truncation": 3}}), "physics.truncation"),
    ("spec quantities number", lambda: sb.TableSpec.from_mapping({"outputs": {"quantities": 1}}),
     "outputs.quantities"),
    ("state quantity name", lambda: sb.solve_equilibrium(
        sb.Composition.from_number({"H": 1.0}), 6000.0, gas_pressure=1e5).quantity("n_x"),
     "unknown name 'n_x'"),
    ("open missing table", lambda: sb.open_table("/nonexistent/none.h5"), "none.h5"),
    ("plot one temperature", lambda: __import__("sahaboltz.faces.plots", fromlist=["x"])
     .stage_fractions_plot("H", [5000.0], 1e5), "at least 2"),
    ("plot bad ax", lambda: __import__("sahaboltz.faces.plots", fromlist=["x"])
     .stage_fractions_plot("H", [5e3, 6e3], 1e5, ax="left"), "ax must be a matplotlib Axes"),
    ("parse unit", lambda: sb.TableSpec.from_mapping(_spec(min=3e3, max=1e4, num=3,
                                                           unit="furlong")), "furlong"),
]


@pytest.mark.parametrize("case", API_CASES, ids=[c[0] for c in API_CASES])
def test_api_bad_input(case):
    _, call, fragment = case
    with pytest.raises(SahaboltzError) as info:
        call()
    assert fragment in str(info.value)


def test_battery_size():
    assert len(CLI_CASES) + len(API_CASES) + 3 >= 60
