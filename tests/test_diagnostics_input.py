"""Line-list CSV input: the documented columns, units, and clear errors naming file and line."""

import astropy.constants as ac
import astropy.units as u
import numpy as np
import pytest

from sahaboltz.diagnostics import LineList, read_lines, synthetic_line_list, write_lines
from sahaboltz.errors import DataFormatError, InputError

HEADER = "species,wavelength_nm,intensity,intensity_error,upper_energy_eV,upper_g,A_s-1"
GOOD = ["Fe I,400.0,120.0,6.0,3.2,5,1.0e7",
        "Fe+,300.0,80.0,4.0,5.1,7,2.0e7",
        "fe_i,500.0,40.0,2.0,4.4,9,3.0e6"]


def _write(tmp_path, text, name="lines.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_reads_documented_columns_with_comments(tmp_path):
    p = _write(tmp_path, "# measured on a made-up arc\n" + HEADER + "\n" + "\n".join(GOOD) + "\n\n")
    ln = read_lines(p)
    assert len(ln) == 3
    assert list(ln.species) == ["Fe I", "Fe II", "Fe I"]
    assert list(ln.charge) == [0, 1, 0]
    np.testing.assert_array_equal(ln.upper_energy_ev, [3.2, 5.1, 4.4])
    assert ln.origin[0] == f"{p}:3"                 # file line numbers count comments
    assert not ln.has_lower.any()
    np.testing.assert_array_equal(ln.a_rel_error, 0.0)


def test_wavenumber_energies_and_optional_columns(tmp_path):
    text = ("species,wavelength_nm,intensity,intensity_error,upper_energy_cm-1,upper_g,A_s-1,"
            "A_rel_error,lower_energy_cm-1,label\n"
            "Fe I,400.0,120.0,6.0,25000.0,5,1.0e7,0.1,0,res line\n"
            "Fe I,500.0,50.0,3.0,30000.0,7,1.0e7,,8000.0,\n")
    ln = read_lines(_write(tmp_path, text))
    # 1 cm^-1 = h c in energy: astropy CODATA
    per_cm = (ac.h * ac.c / u.cm).to_value(u.eV)
    np.testing.assert_allclose(ln.upper_energy_ev, [25000 * per_cm, 30000 * per_cm], rtol=1e-12)
    np.testing.assert_allclose(ln.lower_energy_ev, [0.0, 8000 * per_cm], rtol=1e-12)
    assert list(ln.a_rel_error) == [0.1, 0.0]
    assert list(ln.label) == ["res line", ""]


def test_write_read_round_trip(tmp_path):
    ln = synthetic_line_list(["Fe I", "Fe II"], 4, rng=2)
    p = tmp_path / "syn.csv"
    write_lines(p, ln, header_comments=["synthetic"])
    back = read_lines(p)
    for f in ("wavelength_nm", "intensity", "upper_energy_ev", "upper_g", "a_value",
              "lower_energy_ev"):
        np.testing.assert_array_equal(getattr(back, f), getattr(ln, f))
    assert list(back.species) == list(ln.species)
    assert not list(tmp_path.glob(".*tmp"))          # no temporary file left behind


@pytest.mark.parametrize("text, match", [
    ("", "no header"),
    ("# only a comment\n", "no header"),
    (HEADER + "\n", "not followed"),
    (HEADER.replace(",A_s-1", "") + "\nFe I,400,1,0.1,3,5\n", "missing column.*A_s-1"),
    (HEADER + ",colour\nFe I,400,1,0.1,3,5,1e7,red\n", "unknown column.*colour"),
    (HEADER + ",upper_energy_cm-1\nFe I,400,1,0.1,3,5,1e7,20000\n", "exactly one of"),
    (HEADER.replace("upper_energy_eV", "upper_g") + "\n", "appear twice"),
    (HEADER + "\n" + GOOD[0] + "\nFe I,400,abc,0.1,3,5,1e7\n", r"lines.csv:3: column intensity: 'abc'"),
    (HEADER + "\nFe I,400,1,0.1,3,5\n", r"lines.csv:2: 6 cells"),
    (HEADER + "\nFe I,400,-1,0.1,3,5,1e7\n", r"lines.csv:2: intensity .* must be positive"),
    (HEADER + "\nFe I,400,1,0,3,5,1e7\n", r"lines.csv:2: intensity_error"),
    (HEADER + "\nFe I,400,1,0.1,-3,5,1e7\n", r"lines.csv:2: upper energy"),
    (HEADER + "\nFe I,400,1,0.1,3,5,nan\n", r"lines.csv:2: A_s-1 .* not a finite"),
    (HEADER + "\nFe I,,1,0.1,3,5,1e7\n", r"lines.csv:2: column wavelength_nm is empty"),
    (HEADER + "\nXx I,400,1,0.1,3,5,1e7\n", r"lines.csv:2: species"),
    (HEADER + ",lower_energy_eV\nFe I,400,1,0.1,3,5,1e7,3.5\n", r"lines.csv:2: lower energy"),
    (HEADER + ",A_rel_error\nFe I,400,1,0.1,3,5,1e7,-0.1\n", r"lines.csv:2: A_rel_error"),
])
def test_bad_files_name_file_and_line(tmp_path, text, match):
    with pytest.raises(DataFormatError, match=match):
        read_lines(_write(tmp_path, text))


def test_missing_file(tmp_path):
    with pytest.raises(DataFormatError, match="cannot read line list"):
        read_lines(tmp_path / "absent.csv")


def test_from_arrays_checks():
    kw = dict(species="Fe I", wavelength_nm=[400.0, 500.0], intensity=[1.0, 2.0],
              intensity_error=[0.1, 0.1], upper_energy_ev=[3.0, 4.0], upper_g=[5, 7],
              a_value=[1e7, 1e7])
    assert len(LineList.from_arrays(**kw)) == 2
    with pytest.raises(InputError, match="has 3 values"):
        LineList.from_arrays(**{**kw, "upper_g": [5, 7, 9]})
    with pytest.raises(InputError, match="row 2: upper_g"):
        LineList.from_arrays(**{**kw, "upper_g": [5, 0]})
    with pytest.raises(InputError, match="row 1: species"):
        LineList.from_arrays(**{**kw, "species": ["Qq I", "Fe I"]})
    with pytest.raises(InputError, match="negative ions"):
        LineList.from_arrays(**{**kw, "species": "H-"})
