"""Tables with a composition axis: spec, resolved mixtures, 3-D layout, reader, cache key, CLI,
and the bad input that must fail before any state is computed."""

from __future__ import annotations

import json

import h5py
import numpy as np
import pytest

from sahaboltz.data.composition import Composition, solar
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.errors import InputError
from sahaboltz.faces.cli import main
from sahaboltz.tables import cache
from sahaboltz.tables.build import build_table
from sahaboltz.tables.compute import compositions_of
from sahaboltz.tables.interpolate import open_table
from sahaboltz.tables.spec import TableSpec, composition_axis_from_text, spec_from_options

from table_helpers import hydrogen_compute

#: a small custom mixture by number (our own test scenario): H, He and a trace of iron
MIX = {"H": 1.0, "He": 0.1, "Fe": 3e-5}


def fe_axis_spec(values=(-0.5, 0.0, 0.5, 1.0)):
    return TableSpec.from_mapping({
        "temperature": {"scale": "log", "min": 4500.0, "max": 9000.0, "num": 6},
        "pressure": {"scale": "log", "min": 1e3, "max": 1e5, "num": 4},
        "composition": {"abundances": MIX,
                        "axis": {"quantity": "abundance", "element": "Fe",
                                 "values": list(values)}},
        "physics": {"truncation": "plain", "h_minus": False}})


@pytest.fixture(scope="module")
def fe_table(tmp_path_factory):
    path = tmp_path_factory.mktemp("comp") / "fe.h5"
    build_table(fe_axis_spec(), path, workers=1, chunk_states=12, progress=False)
    return path


# -- spec -------------------------------------------------------------------------------------
def test_axis_in_spec_file_and_on_the_command_line_is_the_same_grid(tmp_path):
    toml = tmp_path / "g.toml"
    toml.write_text('[temperature]\nmin = 3000.0\nmax = 9000.0\nnum = 4\n'
                    '[pressure]\nmin = 1e2\nmax = 1e4\nnum = 3\n'
                    '[composition]\nname = "solar"\n'
                    '[composition.axis]\nquantity = "metallicity"\nscale = "linear"\n'
                    'min = -1.0\nmax = 0.5\nnum = 4\n')
    a = TableSpec.from_file(toml)
    b = spec_from_options("3000:9000:4", "1e2:1e4:3", composition_axis="M/H=-1,-0.5,0,0.5")
    assert a.shape == (4, 4, 3) and a.size == 48
    assert a == b and a.canonical() == b.canonical()
    assert cache.table_key(a, hydrogen_compute) == cache.table_key(b, hydrogen_compute)
    assert TableSpec.from_json(a.canonical()) == a
    # the key covers the axis: other values, another quantity, or none at all
    c = spec_from_options("3000:9000:4", "1e2:1e4:3", composition_axis="M/H=-1,-0.5,0,0.4")
    d = spec_from_options("3000:9000:4", "1e2:1e4:3", composition_axis="alpha=-1,-0.5,0,0.5")
    e = spec_from_options("3000:9000:4", "1e2:1e4:3")
    keys = {cache.table_key(s, hydrogen_compute) for s in (a, c, d, e)}
    assert len(keys) == 4
    # each slice is the fixed composition; [M/H] = 0 is the base itself
    assert a.compositions()[0] == {"name": "solar", "metallicity": -1.0}
    assert a.compositions()[2] == {"name": "solar"}


def test_command_line_axis_quantities():
    assert composition_axis_from_text("Y=0.24,0.28").name == "helium_mass_fraction"
    assert composition_axis_from_text("alpha=0:0.4:3").values == (0.0, 0.2, 0.4)
    assert composition_axis_from_text("C=-0.3,0,0.3").name == "abundance_C"
    assert composition_axis_from_text("abundance:Y=0,1").name == "abundance_Y"  # yttrium


def test_element_offsets_scale_the_number_ratio_by_the_dex_value():
    # [Fe/H] offset by definition: N_Fe/N_H times 10**offset, everything else unchanged
    comps = compositions_of(fe_axis_spec())
    base = Composition.from_number(MIX)
    for comp, d in zip(comps, (-0.5, 0.0, 0.5, 1.0)):
        r = comp.relative_to_hydrogen
        assert r[comp.symbols.index("Fe")] == pytest.approx(3e-5 * 10 ** d, rel=1e-12)
        assert r[comp.symbols.index("He")] == pytest.approx(0.1, rel=1e-12)
    np.testing.assert_array_equal(comps[1].number_fraction, base.number_fraction)


def test_helium_mass_fraction_keeps_the_metals():
    # Asplund et al. (2009), ARA&A 47, 481, section 3.12: present-day solar photosphere
    # X = 0.7381, Y = 0.2485, Z = 0.0134
    x, y, z = solar().xyz()
    # (our mixture gives them to 1e-3: A(He) = 10.93 is rounded in the table)
    assert (x, y, z) == pytest.approx((0.7381, 0.2485, 0.0134), abs=1e-3)
    x2, y2, z2 = solar().with_helium_mass_fraction(0.30).xyz()
    assert y2 == pytest.approx(0.30, rel=1e-12)
    assert z2 == pytest.approx(z, rel=1e-12)
    assert x2 == pytest.approx(1 - 0.30 - z, rel=1e-12)


def test_layout_and_values_at_grid_points(fe_table):
    with h5py.File(fe_table) as f:
        assert f.attrs["composition_axis"] == b"abundance_Fe"
        assert f["abundance_Fe"].attrs["units"] == b"dex"
        assert f["electron_density"].shape == (4, 6, 4)
        assert f["fraction"].shape[1:] == (4, 6, 4)
        assert "build_progress" not in f and "build_identity" not in f.attrs
    spec = fe_axis_spec()
    with open_table(fe_table) as tab:
        assert tab.composition_axis == "abundance_Fe" and tab.composition_unit == "dex"
        for k, d in enumerate(spec.composition_axis.values):
            # the slice solved directly with the mixture of that offset
            comp = Composition.from_number(MIX).with_offsets({"Fe": d})
            direct = solve_equilibrium(comp, tab.temperature[:, None],
                                       gas_pressure=tab.pressure[None, :], truncation="plain",
                                       h_minus=False)
            np.testing.assert_allclose(tab["electron_density"][k], direct.n_e, rtol=1e-12)
            np.testing.assert_allclose(tab["fraction_Fe_II"][k], direct.fraction("Fe II"),
                                       rtol=1e-12)
        # iron's share of the nuclei follows the offset: N_Fe/N_H = 3e-5 * 10**d
        fe = sum(tab[f"number_density_Fe_{s}"] for s in ("I", "II", "III"))
        h = tab["number_density_H_I"] + tab["number_density_H_II"]
        ratio = fe / h
        for k, d in enumerate(spec.composition_axis.values):
            np.testing.assert_allclose(ratio[k], 3e-5 * 10 ** d, rtol=1e-6)


def test_interpolation_in_the_composition_axis(fe_table):
    d = np.array([-0.25, 0.2, 0.75, 0.0])  # between the axis values -0.5, 0, 0.5, 1
    with open_table(fe_table) as tab:
        t, p = tab.temperature[2], tab.pressure[1]
        got = tab.interpolate(["number_density_Fe_II", "electron_density"], t, p, d)
        lin = tab.interpolate("number_density_Fe_II", t, p, d, method="linear")
        for k, dk in enumerate(d):
            comp = Composition.from_number(MIX).with_offsets({"Fe": dk}) if dk else \
                Composition.from_number(MIX)
            direct = solve_equilibrium(comp, t, gas_pressure=p, truncation="plain",
                                       h_minus=False)
            # a trace element: its density ~ 10**d, so ln n is nearly linear in dex
            assert got["number_density_Fe_II"][k] == pytest.approx(
                float(direct.number_density("Fe II")), rel=2e-4)
            assert lin[k] == pytest.approx(float(direct.number_density("Fe II")), rel=2e-3)
            # n_e comes from H and Fe: ln n_e curves in dex; 4 points on a 0.5 dex axis
            assert got["electron_density"][k] == pytest.approx(float(direct.n_e), rel=4e-3)
            if dk in (0.2, 0.75):  # inside the axis the cubic beats the linear
                lin_ne = tab.interpolate("electron_density", t, p, dk, method="linear")
                assert abs(got["electron_density"][k] / direct.n_e - 1) < \
                    abs(lin_ne / direct.n_e - 1)
        with pytest.raises(InputError, match="composition axis, abundance_Fe"):
            tab.interpolate("electron_density", t, p)
        with pytest.raises(InputError, match="abundance_Fe = 1.5"):
            tab.interpolate("electron_density", t, p, 1.5)
        assert np.isnan(tab.interpolate("electron_density", t, p, 1.5, outside="nan"))
        ds = tab.to_xarray()  # xarray (h5netcdf) names the third dimension from the file
        assert ds["fraction"].dims == ("species", "abundance_Fe", "temperature", "gas_pressure")
        assert ds["abundance_Fe"].attrs["units"] == "dex"
        np.testing.assert_array_equal(ds["fraction"].sel(species="Fe II", abundance_Fe=0.5),
                                      tab["fraction_Fe_II"][2])
        ds.close()
        df = tab.to_dataframe(["electron_density"])
        assert df.index.names == ["abundance_Fe", "temperature", "gas_pressure"]
        assert len(df) == 4 * 6 * 4


# -- bad input: errors before any work ----------------------------------------------------------
def _counting(spec, t, p):
    _counting.calls += 1
    return hydrogen_compute(spec, t, p)


_counting.calls = 0


@pytest.mark.parametrize("composition, message", [
    ({"name": "solar", "metallicity": -0.5,
      "axis": {"quantity": "metallicity", "values": [-1, 0]}}, "also fixes metallicity"),
    ({"abundances": {"H": 1, "He": 0.1},
      "axis": {"quantity": "metallicity", "values": [-1, 0]}}, "no element heavier than He"),
    ({"abundances": {"H": 1, "He": 0.1, "Fe": 1e-5},
      "axis": {"quantity": "alpha_enhancement", "values": [0, 0.4]}}, "no alpha element"),
    ({"abundances": {"H": 1, "He": 0.1},
      "axis": {"quantity": "abundance", "element": "C", "values": [-1, 0]}},
     "custom mixture has no C"),
    ({"abundances": {"He": 1, "C": 0.01},
      "axis": {"quantity": "helium_mass_fraction", "values": [0.2, 0.3]}}, "no hydrogen"),
    ({"name": "solar", "abundance_offsets": {"C": 0.2},
      "axis": {"quantity": "abundance", "element": "C", "values": [-1, 0]}},
     "also fixes an offset of C"),
    ({"name": "solar", "axis": {"quantity": "abundance", "element": "H", "values": [-1, 0]}},
     "hydrogen itself cannot be the axis"),
    ({"name": "solar", "axis": {"quantity": "helium_mass_fraction", "values": [0.0, 0.3]}},
     r"Y must lie in \(0, 1\)"),
    ({"name": "solar", "axis": {"quantity": "metallicity", "values": [0.5, 0.0]}},
     "strictly increasing"),
    ({"name": "solar", "axis": {"quantity": "oxygen", "values": [0, 1]}}, "quantity must be"),
])
def test_contradictory_or_bad_axis_is_an_error(composition, message):
    with pytest.raises(InputError, match=message):
        TableSpec.from_mapping({"temperature": {"values": [4000, 5000]},
                                "pressure": {"values": [1e3, 1e4]},
                                "composition": composition})


def test_axis_leaving_hydrogen_negative_fails_before_any_work(tmp_path):
    spec = spec_from_options("4000,5000", "1e3,1e4", composition_axis="Y=0.25,0.99")
    _counting.calls = 0
    with pytest.raises(InputError, match=r"helium_mass_fraction = 0.99: .*X = 1 - Y - Z = -0.00"):
        build_table(spec, tmp_path / "t.h5", compute=_counting, workers=1, progress=False)
    assert _counting.calls == 0
    assert list(tmp_path.iterdir()) == []


def test_cli_axis_build_query_and_errors(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv(cache.CACHE_ENV, str(tmp_path / "cache"))
    out = tmp_path / "t.h5"
    code = main(["table", "build", "--temperature", "4000:9000:5", "--pressure", "1e2:1e5:4",
                 "--fractions", "H", "--composition-axis", "metallicity=-1:0:3",
                 "--compute", "table_helpers:hydrogen_compute", "--no-progress",
                 "-o", str(out), "--format", "json"])
    assert code == 0
    assert json.loads(capsys.readouterr().out)["rows"][0]["grid"] == "3x5x4"
    code = main(["table", "query", str(out), "--at", "6000,1e3,-0.25", "-q",
                 "fraction_H_II", "--format", "json"])
    assert code == 0
    row = json.loads(capsys.readouterr().out)["rows"][0]
    # the pure-hydrogen closed form does not depend on the metals: any [M/H] gives it
    from table_helpers import hydrogen_saha
    assert row["metallicity"] == -0.25
    assert row["fraction_H_II"] == pytest.approx(float(hydrogen_saha(6000.0, 1e3)[
        "fraction_H_II"]), rel=1e-4)
    assert main(["table", "query", str(out), "--at", "6000,1e3"]) == 2
    assert "T,P,C" in capsys.readouterr().err
    # [M/H] given fixed and as the axis; a custom mixture without metals
    assert main(["table", "build", "--temperature", "4000,5000", "--pressure", "1e3,1e4",
                 "--metallicity", "-0.5", "--composition-axis", "metallicity=-1,0",
                 "-o", str(tmp_path / "x.h5")]) == 2
    assert "also fixes metallicity" in capsys.readouterr().err
    assert main(["table", "build", "--temperature", "4000,5000", "--pressure", "1e3,1e4",
                 "--mix", "H:0.9,He:0.1,Fe:1e-5", "--metallicity", "-0.5",
                 "--composition-axis", "metallicity=-1,0", "-o", str(tmp_path / "x.h5")]) == 2
    assert "also fixes metallicity" in capsys.readouterr().err
    assert main(["table", "build", "--temperature", "4000,5000", "--pressure", "1e3,1e4",
                 "--mix", "H:0.9,He:0.1", "--composition-axis", "metallicity=-1,0",
                 "-o", str(tmp_path / "x.h5")]) == 2
    assert "no element heavier than He" in capsys.readouterr().err
    assert not (tmp_path / "x.h5").exists()
