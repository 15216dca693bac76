"""Importer of the NASA thermodynamic polynomials: reproducibility, normalisation, bad input."""

import shutil

import pytest

from sahaboltz.data import thermo_import as ti
from sahaboltz.data.paths import REPO_ROOT
from sahaboltz.data.thermo import default_thermo_database
from sahaboltz.errors import DataFormatError, NoDataError

SHIPPED = REPO_ROOT / "level_data" / "molecules"


@pytest.fixture()
def nasa(source_dir):
    return source_dir / "nasa_tm4513"


@pytest.fixture()
def source_copy(nasa, tmp_path):
    """A scratch copy of the source files (made at test time, outside the repository)."""
    d = tmp_path / "src"
    d.mkdir()
    for name in ti.SOURCE_FILES.values():
        shutil.copy(nasa / name, d / name)
    return d


@pytest.mark.needs_sources
def test_rerun_reproduces_shipped_files_byte_for_byte(nasa, tmp_path):
    res = ti.run(nasa, tmp_path)
    for name in ti.OUTPUT_NAMES:
        assert (tmp_path / name).read_bytes() == (SHIPPED / name).read_bytes(), name
    # the source README: "748 gas species ... and 382 condensed species"
    assert res.counts[ti.GAS_NAME][0] == 748
    assert res.counts[ti.CONDENSED_NAME][0] == 382
    assert ti.main(["--source", str(nasa), "--output", str(SHIPPED), "--check"]) == 0


def test_header_names_source_licence_counts_and_drops():
    text = (SHIPPED / ti.GAS_NAME).read_text()
    head = "\n".join(ln for ln in text.splitlines() if ln.startswith("#"))
    assert "McBride, B. J., Gordon, S. & Reno, M. A. 1993" in head
    assert "gas.tsv" in head and "LICENSE-conversion.txt" in head
    assert "Copyright (c) 2011-2025, Cantera Developers." in head
    assert "# species: 748 read, 721 kept, 27 dropped" in head
    assert "dropped Zn+: composition 'Zn:1' has no electron count" in head


@pytest.mark.parametrize("name,composition,charge", [
    ("AlCl2-", {13: 1, 17: 2}, -1),          # source ALCL2-, composition Al:1 Cl:2 E:1
    ("HAlO", {1: 1, 13: 1, 8: 1}, 0),        # source HALO
    ("LiAlF4", {3: 1, 13: 1, 9: 4}, 0),
    ("Fe(OH)2", {26: 1, 8: 2, 1: 2}, 0),
    ("(HCOOH)2", {1: 4, 6: 2, 8: 4}, 0),
    ("H3O+", {1: 3, 8: 1}, 1),
    ("C2H2/vinylidene", {6: 2, 1: 2}, 0),
])
def test_names_symbols_and_charges_normalised(name, composition, charge):
    sp = default_thermo_database()[name]
    assert sp.composition == composition and sp.charge == charge


def test_condensed_phases_are_a_separate_file_with_phase_labels():
    cdb = default_thermo_database(condensed=True)
    gas = default_thermo_database()
    for name in ("Al2O3(a)", "Fe(a)", "Fe(L)", "Mg2SiO4(s)", "MgSiO3(I)", "SiO2(hqz)", "TiO2(ru)",
                 "CaO(s)", "MgAl2O4(s)", "C(gr)", "H2O(s)", "H2O(L)"):
        assert cdb[name].is_condensed and name not in gas.names
    assert all(not s.is_condensed for s in gas)
    # temperature ranges kept as in the source: corundum 300-1000-2327 K (condensed.tsv)
    al2o3 = cdb["Al2O3(a)"]
    assert list(al2o3.t_low) == [300.0, 1000.0] and al2o3.t_high[-1] == 2327.0


def test_lookup_in_any_element_order_and_unknown_name():
    db = default_thermo_database()
    assert db.species("OH2").name == "H2O"
    assert db.species("C2H2").name == "C2H2/acetylene"      # the first isomer of the formula
    with pytest.raises(Exception, match="did you mean"):
        db.species("H2O3x")


def _corrupt(path, line_no, old, new):
    lines = path.read_text().split("\n")
    assert old in lines[line_no - 1], lines[line_no - 1]
    lines[line_no - 1] = lines[line_no - 1].replace(old, new, 1)
    path.write_text("\n".join(lines))


@pytest.mark.needs_sources
@pytest.mark.parametrize("line_no,old,new,needle", [
    (3, "3.11112433", "3.1x", "gas.tsv:3: coefficient 1"),            # AL, bad number
    (4, "\t1000\t6000", "\t1200\t6000", "gas.tsv:4: range starts"),    # gap between ranges
    (3, "Al:1", "Al:2", "gas.tsv:3: rows of AL differ"),               # composition differs in rows
    ((5, 6), "Al:1 E:-1", "Al:1 E:1", "gas.tsv:5: charge -1"),         # AL+ with a wrong count
])
def test_malformed_row_names_file_and_line_and_writes_nothing(source_copy, tmp_path, line_no,
                                                              old, new, needle):
    for ln in (line_no if isinstance(line_no, tuple) else (line_no,)):
        _corrupt(source_copy / "gas.tsv", ln, old, new)
    out = tmp_path / "out"
    out.mkdir()
    (out / ti.GAS_NAME).write_text("previous good file\n")
    with pytest.raises(DataFormatError, match=needle.replace(".", r"\.").replace("+", r"\+")):
        ti.run(source_copy, out)
    assert (out / ti.GAS_NAME).read_text() == "previous good file\n"
    assert sorted(p.name for p in out.iterdir()) == [ti.GAS_NAME]


def test_missing_source_is_a_clear_error(tmp_path):
    with pytest.raises(NoDataError, match="gas.tsv"):
        ti.run(tmp_path, tmp_path / "out")
    assert ti.main(["--source", str(tmp_path), "--output", str(tmp_path / "out")]) == 1


@pytest.mark.parametrize("text,expected", [
    ("Fe(OH)2", {"Fe": 1, "O": 2, "H": 2}), ("CH3C(CH3)2CH3", {"C": 5, "H": 12}),
    ("(HCOOH)2", {"H": 4, "C": 2, "O": 4}), ("Co", {"Co": 1}), ("CO", {"C": 1, "O": 1}),
])
def test_formula_counts(text, expected):
    assert ti.formula_counts(text) == expected


@pytest.mark.parametrize("text", ["CL", "Fe(OH", "Fe)2", "2H", "", "Xy"])
def test_formula_counts_rejects(text):
    with pytest.raises(ValueError):
        ti.formula_counts(text)
