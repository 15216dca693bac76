"""Importer of the Barklem & Collet (2016) molecular tables: reproducibility and bad input."""

import shutil

import pytest

from sahaboltz.data import molecule_import as mi
from sahaboltz.data.paths import REPO_ROOT
from sahaboltz.errors import DataFormatError, NoDataError

SHIPPED = REPO_ROOT / "level_data" / "molecules" / mi.OUTPUT_NAME


@pytest.fixture()
def bc2016(source_dir):
    return source_dir / "bc2016"


@pytest.fixture()
def source_copy(bc2016, tmp_path):
    """A scratch copy of the four source files (made at test time, outside the repository)."""
    d = tmp_path / "src"
    d.mkdir()
    for name in mi.SOURCE_FILES.values():
        shutil.copy(bc2016 / name, d / name)
    return d


def test_rerun_reproduces_shipped_file_byte_for_byte(bc2016, tmp_path):
    res = mi.run(bc2016, tmp_path)
    assert (tmp_path / mi.OUTPUT_NAME).read_bytes() == SHIPPED.read_bytes()
    # ReadMe of Barklem & Collet (2016): "291 diatomic molecules"
    assert (res.n_read, res.n_kept, len(res.dropped)) == (291, 291, 0)
    # and --check on the shipped file passes through the command-line entry point
    assert mi.main(["--source", str(bc2016), "--output", str(SHIPPED.parent), "--check"]) == 0


def test_header_names_source_licence_and_counts():
    head = [ln for ln in SHIPPED.read_text().splitlines() if ln.startswith("#")]
    text = "\n".join(head)
    assert "Barklem, P. S. & Collet, R. 2016, A&A 588, A96" in text
    assert "BSD 3-Clause License" in text and "Copyright (c) 2020, Paul Barklem" in text
    assert "# molecules: 291 read, 291 kept, 0 dropped" in text
    for name in ("table1.dat", "table6.dat", "table7_vNov2022.dat"):
        assert name in text


def _corrupt(path, line_no, old, new):
    lines = path.read_text().split("\n")
    assert old in lines[line_no - 1]
    head, _, tail = lines[line_no - 1].rpartition(old)   # the last occurrence
    lines[line_no - 1] = head + new + tail
    path.write_text("\n".join(lines))


@pytest.mark.parametrize("table,line_no,old,new,needle", [
    ("table7_vNov2022.dat", 106, "e+", "x+", "table7_vNov2022.dat:106"),   # CO row, bad number
    ("table6.dat", 5, "2.50000e-01", "2.50000e-01 ", "table6.dat:5"),       # H2 row, bad width
    ("table1.dat", 106, "11.117000", "   nan   ", "table1.dat:106"),        # CO adopted D0
    ("table1.dat", 106, "    O    C", "    O    N", "table1.dat:106"),       # CO = O + N: wrong
])
def test_malformed_row_names_file_and_line_and_writes_nothing(source_copy, tmp_path, table,
                                                              line_no, old, new, needle):
    _corrupt(source_copy / table, line_no, old, new)
    out = tmp_path / "out"
    out.mkdir()
    (out / mi.OUTPUT_NAME).write_text("previous good file\n")
    with pytest.raises(DataFormatError, match=needle.replace(".", r"\.")):
        mi.run(source_copy, out)
    assert (out / mi.OUTPUT_NAME).read_text() == "previous good file\n"
    assert sorted(p.name for p in out.iterdir()) == [mi.OUTPUT_NAME]


def test_constant_not_belonging_to_table1_process_is_refused(source_copy, tmp_path):
    # give CO the D0 of CN (7.737 eV, table1): the constant at 1e-5 K no longer matches it
    _corrupt(source_copy / "table1.dat", 106, "11.117000  0.007000", " 7.737000  0.007000")
    with pytest.raises(DataFormatError, match="implies D0"):
        mi.run(source_copy, tmp_path)


def test_failed_write_leaves_no_half_file(source_copy, tmp_path, monkeypatch):
    out = tmp_path / "out"
    out.mkdir()
    (out / mi.OUTPUT_NAME).write_text("previous good file\n")

    def boom(*a, **k):
        raise OSError("disk full (simulated)")
    monkeypatch.setattr(mi.os, "replace", boom)
    with pytest.raises(OSError):
        mi.run(source_copy, out)
    assert (out / mi.OUTPUT_NAME).read_text() == "previous good file\n"
    assert sorted(p.name for p in out.iterdir()) == [mi.OUTPUT_NAME]


def test_missing_source_file_is_a_clear_error(tmp_path):
    with pytest.raises(NoDataError, match="table1.dat"):
        mi.run(tmp_path, tmp_path / "out")
    assert mi.main(["--source", str(tmp_path), "--output", str(tmp_path / "out")]) == 1


@pytest.mark.parametrize("text,expected", [
    ("CO", ({"C": 1, "O": 1}, 0)), ("H2", ({"H": 2}, 0)), ("CO+", ({"C": 1, "O": 1}, 1)),
    ("OH-", ({"O": 1, "H": 1}, -1)), ("HeH+", ({"He": 1, "H": 1}, 1)), ("Co", ({"Co": 1}, 0)),
])
def test_parse_formula(text, expected):
    assert mi.parse_formula(text) == expected


@pytest.mark.parametrize("text", ["co", "C0", "Xx2", "CO++", ""])
def test_parse_formula_rejects(text):
    with pytest.raises(ValueError):
        mi.parse_formula(text)
