"""Real C and Fortran readers of a built table, against the system HDF5 library.

tests/readers/read_table.c and read_table.f90 (shown in docs/table_format.md) are compiled
here with the HDF5 compiler wrappers (h5cc, h5fc; for C also cc with pkg-config), run on a
table built by the package, and what they print -- a row of a stacked variable, both
coordinates and the units of all three -- must equal what h5py reads, bit for bit (%.17g and
18 significant digits both identify a double uniquely).  The tests skip, saying why, only
where no compiler or HDF5 development files are installed (.ci/run installs them).
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import h5py
import numpy as np
import pytest

from sahaboltz.tables.build import build_table
from sahaboltz.tables.spec import spec_from_options

from table_helpers import hydrogen_compute

READERS = Path(__file__).resolve().parent / "readers"
DOC = Path(__file__).resolve().parents[1] / "docs" / "table_format.md"


def _c_compiler() -> list[str] | None:
    if shutil.which("h5cc"):
        return ["h5cc"]
    cc = shutil.which("cc") or shutil.which("gcc")
    if cc and shutil.which("pkg-config"):
        r = subprocess.run(["pkg-config", "--cflags", "--libs", "hdf5"], capture_output=True,
                           text=True)
        if r.returncode == 0:
            return [cc, *r.stdout.split()]
    return None


def _compile(kind: str, tmp: Path) -> Path:
    exe = tmp / f"read_table_{kind}"
    if kind == "c":
        cmd = _c_compiler()
        if cmd is None:
            pytest.skip("no C compiler with HDF5 development files (h5cc, or cc and "
                        "pkg-config hdf5); .ci/run installs libhdf5-dev")
        # the flags of pkg-config go after the source for the linker
        argv = [cmd[0], str(READERS / "read_table.c"), "-o", str(exe), *cmd[1:]]
    else:
        if not shutil.which("h5fc"):
            pytest.skip("no HDF5 Fortran compiler wrapper h5fc (gfortran with the HDF5 "
                        "Fortran library); .ci/run installs libhdf5-dev and gfortran")
        argv = ["h5fc", str(READERS / "read_table.f90"), "-o", str(exe)]
    r = subprocess.run(argv, capture_output=True, text=True, cwd=tmp)
    assert r.returncode == 0, f"compiling the {kind} reader failed:\n{r.stderr}"
    return exe


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    spec = spec_from_options("3000:30000:13", "1e-1:1e7:9", fractions="H")
    return build_table(spec, tmp_path_factory.mktemp("readers") / "h.h5",
                       compute=hydrogen_compute, workers=1, chunk_states=40, progress=False)


def _parse(out: str) -> dict:
    lines = out.split("\n")
    doc: dict = {"units": lines[0].split(" ", 1)[1].strip()}
    k = 1
    for axis in ("temperature", "pressure"):
        head = lines[k].split()
        assert head[0] == "axis"
        n = int(head[-1])
        doc[axis] = (head[1], head[2:-1], np.array([float(x) for x in lines[k + 1:k + 1 + n]]))
        k += 1 + n
    head = lines[k].split()
    assert head[0] == "values"
    nt, np_ = int(head[1]), int(head[2])
    doc["values"] = np.array([float(x) for x in lines[k + 1:k + 1 + nt * np_]]).reshape(nt, np_)
    return doc


def _read_h_ii(kind, path, tmp_path) -> dict:
    """What the compiled reader prints for the H II row of ``fraction`` in ``path``."""
    exe = _compile(kind, tmp_path)
    r = subprocess.run([str(exe), str(path), "fraction", "species", "H II"],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    return _parse(r.stdout)


@pytest.mark.parametrize("kind", ["c", "fortran"])
def test_reader_prints_what_python_reads(kind, table, tmp_path):
    got = _read_h_ii(kind, table, tmp_path)
    with h5py.File(table, "r") as f:
        species = list(f["species"].asstr()[:])
        row = f["fraction"][species.index("H II")]
        t, p = f["temperature"][:], f["gas_pressure"][:]
        assert got["units"] == f["fraction"].attrs["units"].decode() == "1"
        assert got["temperature"][0] == "temperature"
        assert got["temperature"][1] == [f["temperature"].attrs["units"].decode()] == ["K"]
        assert got["pressure"][0] == "gas_pressure"
        assert " ".join(got["pressure"][1]) == f["gas_pressure"].attrs["units"].decode()
    # bit for bit: the same doubles
    assert np.array_equal(got["temperature"][2], t) and np.array_equal(got["pressure"][2], p)
    assert got["values"].shape == row.shape and np.array_equal(got["values"], row)
    assert np.all(row > 0)  # a real row (H II at these states), not zeros


@pytest.fixture(scope="module")
def thermal_table(tmp_path_factory):
    # a first axis that replaces the temperature: (internal energy, mass density), pure H
    from sahaboltz.tables import cache
    from sahaboltz.tables.spec import TableSpec
    spec = TableSpec.from_mapping({
        "temperature": {"quantity": "internal_energy", "scale": "log", "min": 2e12,
                        "max": 2e13, "num": 5},
        "pressure": {"quantity": "mass_density", "scale": "log", "min": 1e-10, "max": 1e-8,
                     "num": 3},
        "composition": {"abundances": {"H": 1.0}}, "physics": {"h_minus": False},
        "outputs": {"stage_fractions": ["H"]}})
    return build_table(spec, tmp_path_factory.mktemp("readers") / "u.h5", workers=1,
                       progress=False, provenance=cache.solver_provenance(spec))


@pytest.mark.parametrize("kind", ["c", "fortran"])
def test_reader_takes_the_first_axis_that_replaces_the_temperature(kind, thermal_table,
                                                                   tmp_path):
    got = _read_h_ii(kind, thermal_table, tmp_path)
    with h5py.File(thermal_table, "r") as f:
        species = list(f["species"].asstr()[:])
        row = f["fraction"][species.index("H II")]
        u, rho = f["internal_energy"][:], f["mass_density"][:]
        assert got["temperature"][0] == "internal_energy"
        assert " ".join(got["temperature"][1]) == f["internal_energy"].attrs["units"].decode()
        assert got["pressure"][0] == "mass_density"
    assert np.array_equal(got["temperature"][2], u) and np.array_equal(got["pressure"][2], rho)
    assert np.array_equal(got["values"], row) and np.all((row > 0) & (row < 1))


def test_reader_refuses_a_damaged_chunk(table, tmp_path):
    """The C reader gets an error, not numbers, from a chunk with flipped bytes."""
    exe = _compile("c", tmp_path)
    bad = tmp_path / "bad.h5"
    shutil.copy(table, bad)
    with h5py.File(bad, "r") as f:
        info = f["fraction"].id.get_chunk_info(0)
    with open(bad, "r+b") as fh:
        fh.seek(info.byte_offset + info.size // 2)
        b = fh.read(4)
        fh.seek(info.byte_offset + info.size // 2)
        fh.write(bytes(x ^ 0xFF for x in b))
    r = subprocess.run([str(exe), str(bad), "fraction", "species", "H I"],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode != 0


def test_docs_show_both_programs():
    text = DOC.read_text()
    blocks = dict((m.group(1), m.group(2)) for m in
                  re.finditer(r"^```(c|fortran)\n(.*?)^```", text, re.S | re.M))
    assert blocks.get("c") == (READERS / "read_table.c").read_text()
    assert blocks.get("fortran") == (READERS / "read_table.f90").read_text()


def test_ncdump_lists_the_table(table):
    """netCDF-4's own tool reads names, dimensions, units and the string coordinate."""
    if not shutil.which("ncdump"):
        pytest.skip("ncdump (netCDF tools, e.g. the netcdf-bin package) is not installed")
    head = subprocess.run(["ncdump", "-h", str(table)], capture_output=True, text=True,
                          timeout=60)
    assert head.returncode == 0, head.stderr
    assert "double fraction(species, temperature, gas_pressure)" in head.stdout
    assert 'temperature:units = "K"' in head.stdout
    assert ':Conventions = "CF-1.8"' in head.stdout
    data = subprocess.run(["ncdump", "-v", "species,charge", str(table)], capture_output=True,
                          text=True, timeout=60)
    assert 'species = "H I", "H II"' in data.stdout and "charge = 0, 1" in data.stdout
