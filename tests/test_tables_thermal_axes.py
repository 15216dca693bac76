"""Tables on the axes that replace the temperature: (internal energy, mass density) and
(entropy, gas pressure).

The outside reference is the forward solve: at every grid point the stored temperature,
solved forward with the partner value (``solve_equilibrium(comp, T, mass_density=rho)``), must
give back the axis value (``state.internal_energy``, ``state.entropy``); the inverse solver is
checked against it in tests/test_thermodynamics.py.  Off grid, the interpolated temperature is
compared with a direct inverse solve at the same point.
"""

from __future__ import annotations

import json
import warnings

import h5py
import numpy as np
import pytest

from sahaboltz.data.composition import Composition
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.errors import InputError
from sahaboltz.faces.cli import main
from sahaboltz.tables import cache
from sahaboltz.tables.build import build_table
from sahaboltz.tables.interpolate import open_table
from sahaboltz.tables.spec import Axis, TableSpec, example_toml

MIX = {"H": 1.0, "He": 0.085, "O": 4.9e-4, "Fe": 3.2e-5}   # number ratios, an invented mixture
COMP = Composition.from_number(MIX)


def solve(*args, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")      # validity warnings are not what is tested here
        return solve_equilibrium(*args, **kw)


def _spec(first, pressure, **extra):
    return TableSpec.from_mapping({"temperature": first, "pressure": pressure,
                                   "composition": {"abundances": MIX},
                                   "outputs": {"stage_fractions": ["H", "He", "Fe"],
                                               **extra.pop("outputs", {})}, **extra})


def _build(spec, path):
    return build_table(spec, path, workers=1, progress=False,
                       provenance=cache.solver_provenance(spec))


RHO_U = {"quantity": "internal_energy", "scale": "log", "min": 2e11, "max": 2e14,
         "per_decade": 16}
RHO = {"quantity": "mass_density", "scale": "log", "min": 1e-10, "max": 1e-6, "num": 9}


@pytest.fixture(scope="module")
def rho_u_table(tmp_path_factory):
    spec = _spec(RHO_U, RHO, outputs={"quantities": ["electron_density", "gas_pressure",
                                                     "entropy"]})
    return spec, _build(spec, tmp_path_factory.mktemp("ru") / "rho_u.h5")


def test_density_energy_table_gives_back_u_at_grid_points(rho_u_table):
    spec, path = rho_u_table
    u, rho = np.meshgrid(spec.temperature.array, spec.pressure.array, indexing="ij")
    with open_table(path) as tab:
        assert tab.temperature_quantity == "internal_energy"
        assert tab.temperature_unit == "erg g-1" and tab.temperature_interpolation == "log"
        np.testing.assert_array_equal(tab.temperature, spec.temperature.array)
        t = tab["temperature"]
        assert (tab["status"] == 0).all()
        ne, pg, s = tab["electron_density"], tab["gas_pressure"], tab["entropy"]
        fe2 = tab["fraction_Fe_II"]
        assert "internal_energy" not in tab       # the axis is stored once, as the coordinate
        assert tab.units("temperature") == "K"
    # the outside reference: the forward solve at the stored T gives back the axis value
    fwd = solve(COMP, t, mass_density=rho)
    np.testing.assert_allclose(fwd.internal_energy, u, rtol=1e-10)
    # and every other field is that state's
    np.testing.assert_allclose(ne, fwd.n_e, rtol=1e-8)
    np.testing.assert_allclose(pg, fwd.gas_pressure, rtol=1e-9)
    np.testing.assert_allclose(s, fwd.entropy, rtol=1e-9)
    np.testing.assert_allclose(fe2, fwd.fraction("Fe II"), rtol=1e-7, atol=1e-300)
    # the grid crosses the hydrogen ionization zone (T from about 2,000 K to 3e5 K)
    assert t.min() < 3000.0 and t.max() > 1e5


def test_density_energy_interpolation_matches_a_direct_inverse_solve(rho_u_table):
    spec, path = rho_u_table
    rng = np.random.default_rng(11)
    lu = rng.uniform(np.log(2.2e11), np.log(1.8e14), 24)
    lr = rng.uniform(np.log(1.1e-10), np.log(0.9e-6), 24)
    u, rho = np.exp(lu), np.exp(lr)
    with open_table(path) as tab:
        got = tab.interpolate(["temperature", "electron_density"], u, rho)
        with pytest.raises(InputError, match=r"internal_energy = .*erg g-1"):
            tab.interpolate("temperature", 1e15, 1e-8)
        assert np.isnan(tab.interpolate("temperature", -1e11, 1e-8, outside="nan"))
    direct = solve(COMP, mass_density=rho, internal_energy=u)
    # 16 points per decade of u, 2 per decade of rho: the interpolation error of this grid,
    # measured 1.3e-2 at most for T (4.4e-2 for n_e) and 2.5e-5 in the median; the largest
    # where hydrogen's ionization ends and T(u) turns up within a few per cent of u (c_v
    # drops there); checked with room to spare
    np.testing.assert_allclose(got["temperature"], direct.temperature, rtol=3e-2)
    np.testing.assert_allclose(got["electron_density"], direct.n_e, rtol=1e-1)
    err = np.abs(got["temperature"] / direct.temperature - 1)
    assert np.median(err) < 3e-4


def test_pressure_entropy_table(tmp_path):
    spec = _spec({"quantity": "entropy", "scale": "linear", "min": 1.8e9, "max": 3.6e9,
                  "num": 73},
                 {"quantity": "gas_pressure", "scale": "log", "min": 1e2, "max": 1e6, "num": 17})
    assert spec.temperature.interpolation == "linear"      # linear scale: interpolated in s
    path = _build(spec, tmp_path / "p_s.h5")
    s, p = np.meshgrid(spec.temperature.array, spec.pressure.array, indexing="ij")
    with open_table(path) as tab:
        t = tab["temperature"]
        status = tab["status"]
        rng = np.random.default_rng(5)
        sq = rng.uniform(1.85e9, 3.55e9, 16)
        pq = np.exp(rng.uniform(np.log(1.2e2), np.log(0.8e6), 16))
        got = tab.interpolate("temperature", sq, pq)
    assert (status == 0).all()
    fwd = solve(COMP, t, gas_pressure=p)
    np.testing.assert_allclose(fwd.entropy, s, rtol=1e-10)
    direct = solve(COMP, gas_pressure=pq, entropy=sq)
    # 73 points over 1.8e9 erg g-1 K-1 and 4 per decade of P: the grid's interpolation
    # error, measured 8.4e-4 at most and 1.9e-4 in the median (with 5 values of P: 5.7e-2;
    # T at fixed s changes fastest along P in the ionization zones)
    np.testing.assert_allclose(got, direct.temperature, rtol=5e-3)
    assert np.median(np.abs(got / direct.temperature - 1)) < 1e-3


def test_unreachable_energies_are_flagged_not_raised(tmp_path):
    # u = 1e9 erg g-1 is below what the gas holds at 1,000 K (3/2 kT / (mu m_u) alone is
    # about 1e11 there, kinetic theory) and 1e30 above what 1e8 K gives: no temperature of
    # the search range matches, so those states are flagged and NaN, the others solved
    spec = _spec({"quantity": "internal_energy", "values": [1e9, 1e12, 1e13, 1e30]},
                 {"quantity": "mass_density", "values": [1e-9, 1e-7]})
    assert spec.temperature.interpolation == "linear"      # explicit values: linear in u
    path = _build(spec, tmp_path / "bad.h5")
    with open_table(path) as tab:
        status, t, ne = tab["status"], tab["temperature"], tab["electron_density"]
        assert tab.attrs["failed_states"] == 4
    bad = np.array([[True, True], [False, False], [False, False], [True, True]])
    np.testing.assert_array_equal(status != 0, bad)
    assert (status[bad] == 3).all()                       # the existing not-converged flag
    assert np.isnan(t[bad]).all() and np.isnan(ne[bad]).all()
    assert np.isfinite(t[~bad]).all() and np.isfinite(ne[~bad]).all()
    fwd = solve(COMP, t[1:3], mass_density=np.array([1e-9, 1e-7]))
    np.testing.assert_allclose(fwd.internal_energy, [[1e12, 1e12], [1e13, 1e13]], rtol=1e-10)


def test_negative_internal_energy_axis_with_molecules(tmp_path):
    # with the zero point of neutral atoms at rest, molecular hydrogen holds u < 0: H2 is
    # bound by 4.478 eV (NIST-JANAF / Huber & Herzberg, from memory), -2.2e12 erg g-1 per
    # gram of hydrogen against 3/2 kT/m_H ~ 1.2e11 erg g-1 at 1,000 K
    spec = TableSpec.from_mapping({
        "temperature": {"quantity": "internal_energy", "scale": "linear", "min": -1.6e12,
                        "max": 4e11, "num": 5},
        "pressure": {"quantity": "mass_density", "values": [1e-7, 1e-5]},
        "composition": {"abundances": {"H": 1.0}},
        "physics": {"molecules": "default", "truncation": "plain", "h_minus": False,
                    "temperature_range": [600.0, 2e4]},
        "outputs": {"stage_fractions": ["H"]}})
    path = _build(spec, tmp_path / "h2.h5")
    u, rho = np.meshgrid(spec.temperature.array, spec.pressure.array, indexing="ij")
    with open_table(path) as tab:
        t, status = tab["temperature"], tab["status"]
        molf = tab["molecular_fraction_H"]
        mid = tab.interpolate("temperature", -1.0e12, 1e-6)
    ok = status == 0
    assert ok[:2].all()                                   # the negative values are reached
    fwd = solve(Composition.from_number({"H": 1.0}), t[ok], mass_density=rho[ok],
                molecules="default", truncation="plain", h_minus=False)
    np.testing.assert_allclose(fwd.internal_energy, u[ok], rtol=1e-10)
    assert molf[0].min() > 0.5                            # mostly molecular where u < 0
    direct = solve(Composition.from_number({"H": 1.0}), mass_density=1e-6,
                   internal_energy=-1.0e12, molecules="default", truncation="plain",
                   h_minus=False, temperature_range=(600.0, 2e4))
    assert mid == pytest.approx(float(direct.temperature), rel=5e-2)


def test_xarray_reads_the_new_axes(rho_u_table):
    xr = pytest.importorskip("xarray")
    pytest.importorskip("h5netcdf")
    spec, path = rho_u_table
    with h5py.File(path) as f:
        t = f["temperature"][()]
        assert f.attrs["temperature_quantity"] == b"internal_energy"
    with xr.open_dataset(path, engine="h5netcdf") as ds:
        assert ds["temperature"].dims == ("internal_energy", "mass_density")
        assert ds["fraction"].dims == ("species", "internal_energy", "mass_density")
        cu = ds["internal_energy"]
        assert cu.attrs["units"] == "erg g-1" and "internal energy" in cu.attrs["long_name"]
        assert cu.attrs["interpolation"] == "log"
        assert ds["mass_density"].attrs["units"] == "g cm-3"
        assert ds["temperature"].attrs["units"] == "K"
        np.testing.assert_array_equal(ds["temperature"].values, t)
        np.testing.assert_array_equal(cu.values, spec.temperature.array)


def test_spec_keys_checks_and_cache_key():
    u_spec = _spec(RHO_U, RHO)
    again = TableSpec.from_json(u_spec.canonical())
    assert again == u_spec and again.canonical() == u_spec.canonical()
    doc = json.loads(u_spec.canonical())["temperature"]
    assert doc["quantity"] == "internal_energy" and doc["interpolation"] == "log"
    assert u_spec.outputs.quantities[0] == "temperature"    # always stored, with status
    assert "status" in u_spec.outputs.quantities
    bare = _spec(RHO_U, RHO, outputs={"quantities": ["electron_density"]})
    assert bare.outputs.quantities == ("temperature", "status", "electron_density")
    # a temperature table's canonical spec (and so its cache key) is as it always was
    t_spec = _spec({"scale": "log", "min": 3000.0, "max": 30000.0, "num": 5}, RHO)
    assert set(json.loads(t_spec.canonical())["temperature"]) == {"scale", "values"}
    # the quantity and the interpolation variable are part of the key
    lin = _spec({**RHO_U, "interpolation": "linear"}, RHO)
    keys = {cache.table_key(s) for s in (u_spec, lin, t_spec)}
    assert len(keys) == 3
    with pytest.raises(InputError, match="goes with a mass_density axis"):
        _spec(RHO_U, {**RHO, "quantity": "gas_pressure"})
    # the thermodynamics covers lowering and condensates: both go with a thermal axis
    assert _spec(RHO_U, RHO, physics={"lowering": True}).physics["lowering"]
    assert _spec(RHO_U, RHO, physics={"molecules": "default",
                                      "condensates": True}).physics["condensates"]
    with pytest.raises(InputError, match="needs its mass_density axis"):
        TableSpec.from_mapping({"temperature": RHO_U})
    with pytest.raises(InputError, match="temperature.quantity must be one of"):
        _spec({**RHO_U, "quantity": "enthalpy"}, RHO)
    with pytest.raises(InputError, match="temperature_range"):
        _spec({"min": 3000.0, "max": 30000.0, "num": 5}, RHO,
              physics={"temperature_range": [1e3, 1e5]})
    with pytest.raises(InputError, match="unknown key"):       # only thermal axes take it
        _spec({"min": 3000.0, "max": 30000.0, "num": 5, "interpolation": "linear"}, RHO)
    # u may be negative (its zero point is a convention) on a linear axis; s may not
    neg = Axis.from_mapping("internal_energy", "erg g-1",
                            {"scale": "linear", "min": -1e12, "max": 1e12, "num": 3},
                            thermal=True, signed=True)
    assert neg.values == (-1e12, 0.0, 1e12) and neg.interpolation == "linear"
    with pytest.raises(InputError, match="positive"):
        _spec({**RHO_U, "scale": "linear", "min": -1e12, "num": 3, "interpolation": "log"},
              RHO)
    with pytest.raises(InputError, match="0 < min"):
        _spec({"quantity": "entropy", "scale": "linear", "min": -1e9, "max": 3e9, "num": 3},
              {"quantity": "gas_pressure", "values": [1e3, 1e4]})
    # units on the axis: J kg-1 = 1e4 erg g-1 (SI/cgs definitions)
    si = _spec({**RHO_U, "unit": "J kg-1", "min": 2e7, "max": 2e10}, RHO)
    np.testing.assert_allclose(si.temperature.array, u_spec.temperature.array, rtol=1e-12)


def test_command_line_template_build_query_inspect(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("SAHABOLTZ_CACHE_DIR", str(tmp_path / "cache"))
    assert main(["table", "template", "--temperature-quantity", "entropy"]) == 0
    text = capsys.readouterr().out
    spec_file = tmp_path / "ps.toml"
    spec_file.write_text(text)
    tmpl = TableSpec.from_file(spec_file)
    assert tmpl.temperature.name == "entropy" and tmpl.pressure.name == "gas_pressure"
    assert TableSpec.from_mapping(
        __import__("sahaboltz.tables.spec", fromlist=["tomllib"]).tomllib.loads(example_toml("internal_energy"))).thermal.name == \
        "internal_energy"
    out = tmp_path / "cli.h5"
    code = main(["table", "build", "--temperature-quantity", "internal_energy",
                 "-T", "2e11:2e14:25", "--pressure", "1e-10,1e-8,1e-6", "--mix",
                 "H:1,He:0.085", "--fractions", "H,He", "--no-progress", "-o", str(out),
                 "--format", "json"])
    cap = capsys.readouterr()
    assert code == 0, cap.err
    with open_table(out) as tab:
        assert tab.temperature_quantity == "internal_energy"
        assert tab.pressure_quantity == "mass_density"      # the partner, by default
    assert main(["table", "query", str(out), "--at", "3e12,1e-8", "--at", "2e7 J kg-1,1e-7",
                 "-q", "temperature,electron_density", "--format", "json"]) == 0
    rows = json.loads(capsys.readouterr().out)["rows"]
    assert rows[0]["internal_energy"] == 3e12 and rows[1]["internal_energy"] == 2e11
    comp = Composition.from_number({"H": 1.0, "He": 0.085})
    direct = solve(comp, mass_density=np.array([1e-8, 1e-7]),
                   internal_energy=np.array([3e12, 2e11]))
    np.testing.assert_allclose([r["temperature"] for r in rows], direct.temperature, rtol=2e-2)
    assert main(["table", "inspect", str(out), "--format", "json"]) == 0
    meta = json.loads(capsys.readouterr().out)["meta"]
    assert meta["internal_energy"].endswith("erg g-1 (25)")
    # the same axes built into the cache twice: one key, the second a hit
    args = ["table", "build", "--temperature-quantity", "internal_energy", "-T",
            "2e11:2e14:4", "--pressure", "1e-9,1e-7", "--mix", "H:1", "--fractions", "H",
            "--no-progress", "--format", "json"]
    assert main(args) == 0
    first = json.loads(capsys.readouterr().out)["rows"][0]
    assert main(args) == 0
    second = json.loads(capsys.readouterr().out)["rows"][0]
    assert first["key"] == second["key"] and second["status"] != first["status"]
    # bad options name themselves
    assert main(["table", "build", "--temperature-quantity", "entropy", "-T", "2e9:3e9:3",
                 "--pressure", "1e-9,1e-7", "--pressure-quantity", "mass_density",
                 "--no-progress", "-o", str(tmp_path / "x.h5")]) == 2
    assert "goes with a gas_pressure axis" in capsys.readouterr().err
    assert main(["table", "build", "--temperature-quantity", "internal_energy",
                 "--pressure", "1e-9,1e-7", "--no-progress", "-o", str(tmp_path / "y.h5")]) == 2
    assert "no default" in capsys.readouterr().err
