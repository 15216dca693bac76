"""Plots: every plot command writes a real image headless, and the drawn data are right.

The physics checks compare what the figures show with independent formulas:
- pure hydrogen up to 8,000 K: the Saha equation with U(H I) = 2, U(H II) = 1 (Barklem &
  Collet 2016, table 8, give U(H I) = 2.00001 at 8,000 K; the excited levels matter above);
- the Boltzmann law: log10(n_i/g_i) falls with slope -log10(e) / kT per eV
  ("theta = 5040 / T", common practice);
- Barklem & Collet (2016, A&A 588, A96) table 8 partition functions (tests/reference).
Constants come from astropy (CODATA), the H ionization energy from NIST (13.598434 eV,
Kramida et al., NIST ASD; value from memory).
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pytest
from astropy import constants as c
from astropy import units as u

from sahaboltz.data.composition import Composition
from sahaboltz.errors import InputError
from sahaboltz.faces import plots
from sahaboltz.faces.cli import main

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
CHI_H_EV = 13.598434  # NIST ASD, H I ionization energy (from memory)
REFERENCE = Path(__file__).parent / "reference" / "bc2016_table8_partition.csv"


def hydrogen_fraction_saha(t, p_gas):
    """Ionized fraction x of pure hydrogen at T [K], P_gas [dyn cm^-2] (no H-)."""
    t = np.asarray(t, dtype=float)
    kt = (c.k_B * t * u.K).cgs.value
    lam = ((2 * np.pi * c.m_e * c.k_B * t * u.K / c.h**2) ** 1.5).to(u.cm**-3).value
    phi = 2.0 * (1.0 / 2.0) * lam * np.exp(-CHI_H_EV / (c.k_B.to(u.eV / u.K).value * t))
    # x^2 / (1 - x^2) = phi k T / P
    a = phi * kt / p_gas
    return np.sqrt(a / (1.0 + a))


def _is_png(path: Path) -> bool:
    return path.stat().st_size > 5000 and path.read_bytes()[:8] == PNG_MAGIC


# -- the commands ----------------------------------------------------------------------------
COMMANDS = {
    "stages": ["stages", "Fe", "--temperature", "3000:12000:40", "--gas-pressure", "1e4"],
    "dominant": ["dominant", "Ca", "--temperature", "3000:20000:20", "--gas-pressure",
                 "1e0:1e6:7"],
    "partition": ["partition", "Fe I", "Fe+", "--temperature", "3000:15000:30",
                  "--truncations", "plain,lowered,occupation", "--electron-density", "1e16"],
    "electron-pressure": ["electron-pressure", "--mix", "H:0.92,He:0.08", "--temperature",
                          "3000:20000:30", "--gas-pressure", "1e2,1e5"],
    "levels": ["levels", "Ar II", "--mix", "Ar:1", "--temperature", "12000,16000",
               "--gas-pressure", "1.01325e6", "--max-energy", "25"],
    "budget": ["budget", "O", "--temperature", "1500:4500:7", "--gas-pressure", "1e6",
               "--molecules", "diatomics"],
}


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_plot_command_writes_png(name, tmp_path, capsys):
    out = tmp_path / f"{name}.png"
    assert main(["plot", *COMMANDS[name], "-o", str(out)]) == 0
    assert _is_png(out)
    printed = capsys.readouterr().out
    assert str(out) in printed
    assert not list(tmp_path.glob(".*.tmp"))  # no temporary left behind


def test_plot_command_pdf_and_json(tmp_path, capsys):
    import json

    out = tmp_path / "h.pdf"
    assert main(["plot", "stages", "H", "--mix", "H:1", "--temperature", "4000:20000:20",
                 "--gas-pressure", "1e3", "--format", "json", "-o", str(out)]) == 0
    assert out.read_bytes()[:5] == b"%PDF-" and out.stat().st_size > 3000
    doc = json.loads(capsys.readouterr().out)
    assert doc["rows"][0]["file"] == str(out) and doc["rows"][0]["bytes"] == out.stat().st_size


def test_plot_default_file_name(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["plot", "stages", "Na", "--temperature", "3000:9000:10"]) == 0
    assert _is_png(tmp_path / "stages_Na.png")


def test_plot_command_bad_input_is_an_error(tmp_path, capsys):
    # a bad suffix, a pressure list where one value is needed, an unknown element
    assert main(["plot", "stages", "Fe", "-o", str(tmp_path / "x.gif")]) == 2
    assert "end the file name with .png or .pdf" in capsys.readouterr().err
    assert main(["plot", "stages", "Fe", "--gas-pressure", "1e2,1e3",
                 "-o", str(tmp_path / "x.png")]) == 2
    assert "give one value" in capsys.readouterr().err
    assert main(["plot", "partition", "Fe I", "--truncations", "occupation",
                 "-o", str(tmp_path / "y.png")]) == 2
    assert "electron density" in capsys.readouterr().err
    assert not list(tmp_path.iterdir())


def test_save_figure_failure_leaves_nothing(tmp_path):
    fig, ax = plots.new_figure()
    ax.plot([1, 2], [1, 2])
    blocker = tmp_path / "file"
    blocker.write_text("not a directory")
    with pytest.raises(InputError):
        plots.save_figure(fig, blocker / "inside.png")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["file"]


# -- what the figures show -------------------------------------------------------------------
def _hydrogen():
    return Composition.from_number({"H": 1.0}, name="hydrogen")


def test_stage_fractions_curves_follow_saha_for_hydrogen():
    t = np.linspace(5000.0, 8000.0, 31)
    p = 1e1
    fig, ax = plots.stage_fractions_plot("H", t, p, composition=_hydrogen(), h_minus=False)
    lines = {ln.get_label(): ln for ln in ax.lines}
    assert set(lines) == {"H I", "H II"}
    x_plot = lines["H II"].get_ydata()
    np.testing.assert_allclose(lines["H II"].get_xdata(), t)
    np.testing.assert_allclose(x_plot, hydrogen_fraction_saha(t, p), rtol=2e-4, atol=1e-6)
    # axes carry units, the conditions are stated
    assert "[K]" in ax.get_xlabel()
    texts = " ".join(tx.get_text() for tx in fig.texts)
    assert ("$P_\\mathrm{gas}$ = 10 dyn cm$^{-2}$" in texts and "no IP lowering" in texts
            and "LTE" in texts)


def test_dominant_map_boundary_matches_saha_for_hydrogen():
    from scipy.optimize import brentq

    t = np.geomspace(4000.0, 12000.0, 56)    # steps of 2 %
    p = np.geomspace(1e-1, 1e1, 5)           # half ionization at 6,500-7,850 K
    fig, ax = plots.dominant_stage_plot("H", t, p, composition=_hydrogen(), h_minus=False)
    (line,) = [cs for cs in ax.collections if getattr(cs, "stage_boundary", None) == (0, 1)]
    xy = 10.0 ** np.concatenate([path.vertices for path in line.get_paths()])  # log10 axes
    order = np.argsort(xy[:, 1])
    for pj in p[1:-1]:
        t_half = brentq(lambda tt: hydrogen_fraction_saha(tt, pj) - 0.5, 3000.0, 30000.0)
        t_line = np.exp(np.interp(np.log(pj), np.log(xy[order, 1]), np.log(xy[order, 0])))
        # the drawn boundary lies on the Saha half-ionization temperature (well inside a step)
        assert t_line == pytest.approx(t_half, rel=3e-3)
    labels = {tx.get_text() for tx in ax.texts}
    assert {"H I", "H II"} <= labels                   # regions named
    assert "H I | H II" in labels                      # boundary labelled
    assert "dyn cm" in ax.get_ylabel() and "[K]" in ax.get_xlabel()


def test_electron_pressure_curves_follow_saha_for_hydrogen():
    t = np.linspace(5000.0, 8000.0, 13)
    p = [1e-1, 1e1]
    fig, ax = plots.electron_pressure_plot(t, p, composition=_hydrogen(), h_minus=False)
    assert len(ax.lines) == 2
    for line, pj in zip(ax.lines, p):
        x = hydrogen_fraction_saha(t, pj)
        np.testing.assert_allclose(line.get_ydata(), pj * x / (1.0 + x), rtol=2e-4)
    assert "dyn cm" in ax.get_ylabel()


def test_level_diagram_slope_is_the_boltzmann_law():
    temps = [4000.0, 7000.0]
    fig, ax = plots.level_population_plot("Fe I", temps, 1e5, max_energy_ev=6.0,
                                          truncation="plain")
    points = [ln for ln in ax.lines if ln.get_linestyle() == "None"]
    assert len(points) == 2
    for ln, t in zip(points, temps):
        e, y = ln.get_xdata(), ln.get_ydata()
        assert e.size > 100 and e.max() <= 6.0
        slope = np.polyfit(e, y, 1)[0]
        expect = -np.log10(np.e) / (c.k_B.to(u.eV / u.K).value * t)  # ~ -5040/T
        assert slope == pytest.approx(expect, rel=1e-9)
        # the plain sum: every point on the line (g taken from the right level)
        np.testing.assert_allclose(y - (y[0] + expect * (e - e[0])), 0.0, atol=1e-9)
    assert "eV" in ax.get_xlabel() and "cm" in ax.get_ylabel()


def _bc2016(species):
    rows = [r for r in csv.reader(line for line in REFERENCE.open() if not line.startswith("#"))]
    return {float(r[1]): float(r[2]) for r in rows[1:] if r[0] == species}


@pytest.mark.parametrize("species", ["Fe I", "Fe II", "Ca I"])
def test_partition_plot_shows_published_values(species):
    ref = _bc2016(species)
    t = np.array([3000.0, 5000.0, 8000.0])
    fig, ax = plots.partition_function_plot([species], t, truncations=["plain"])
    line = ax.lines[0]
    np.testing.assert_allclose(line.get_xdata(), t)
    # our plain sums agree with Barklem & Collet's within 2 % at these temperatures
    np.testing.assert_allclose(line.get_ydata(), [ref[x] for x in t], rtol=0.02)


def test_partition_plot_ratio_panel_for_truncations():
    t = np.linspace(5000.0, 20000.0, 16)
    fig, (ax, axr) = plots.partition_function_plot(["Ar I"], t,
                                                   truncations=["plain", "occupation"],
                                                   electron_density=1e17)
    assert fig.axes == [ax, axr]
    ratio = axr.lines[0].get_ydata()
    # occupation probabilities only remove weight: U_occ <= U_plain, and -> equal at low T
    assert np.all(ratio <= 1.0 + 1e-12) and ratio[0] == pytest.approx(1.0, abs=1e-5)
    assert ratio[-1] < 0.99


def test_element_budget_accounts_for_every_nucleus():
    from sahaboltz.data.composition import solar
    from sahaboltz.equilibrium import solve_equilibrium
    from sahaboltz.faces.plots import element_budget

    t = np.array([1300.0, 1700.0, 3000.0])
    state = solve_equilibrium(solar(), t, gas_pressure=100.0, molecules="default",
                              condensates=True)
    names, f = element_budget(state, "Al")
    np.testing.assert_allclose(f.sum(axis=0), 1.0, rtol=1e-9)
    # corundum (or spinel) holds the aluminium at 1,300 K and 1e-4 bar, none is condensed at
    # 3,000 K (Lodders 2003, ApJ 591, 1220: Al condenses near 1,650 K there; from memory)
    condensed = sum(f[i] for i, n in enumerate(names) if "condensed" in n)
    assert condensed[0] > 0.99 and condensed[2] == 0.0
