"""Loader of the shipped molecular data (level_data/molecules): lookups, processes, bad files."""

import numpy as np
import pytest

from sahaboltz.data.molecules import LOG10_PA_TO_CGS, MoleculeDatabase, default_molecule_database
from sahaboltz.data.paths import REPO_ROOT
from sahaboltz.errors import DataFormatError, NoDataError, UnknownSpeciesError
from molecule_reference import load_reference

SHIPPED = REPO_ROOT / "level_data" / "molecules" / "bc2016_diatomics.txt"
REF = load_reference()


@pytest.fixture(scope="module")
def mdb():
    return default_molecule_database()


def test_all_291_diatomics(mdb):
    # Barklem & Collet (2016) ReadMe: "291 diatomic molecules"
    assert len(mdb) == 291
    assert all(sum(m.composition.values()) == 2 for m in mdb)


@pytest.mark.parametrize("name,components,charges,charge,d0", [
    # processes and adopted D0 from Barklem & Collet (2016) table1 (columns 2-3 and 'Adopted')
    ("H2", ("H", "H"), (0, 0), 0, 4.478007),
    ("CO", ("O", "C"), (0, 0), 0, 11.117),
    ("CO+", ("C+", "O"), (1, 0), 1, 8.3654),   # ReadMe "Important note": pK = p(C+) p(O)/p(CO+)
    ("OH-", ("O-", "H"), (-1, 0), -1, 4.78399),
    ("H2+", ("H", "H+"), (0, 1), 1, 2.650639),
])
def test_process_components_and_charges(mdb, name, components, charges, charge, d0):
    m = mdb[name]
    assert m.name == name
    assert m.components == components
    assert m.component_charges == charges
    assert m.charge == charge
    assert m.dissociation_energy_ev == pytest.approx(d0, abs=1e-9)
    assert m.has_ion_component == any(charges)


def test_lookup_by_formula_in_any_order(mdb):
    assert mdb.molecule("HO").name == "OH"
    assert mdb.molecule("OC").name == "CO"
    assert mdb["CO"] is mdb.molecule(" CO ")
    assert "CO+" in mdb and "CO++" not in mdb
    # CO (carbon monoxide) and Co (cobalt) are told apart by case
    assert mdb["CO"].composition == {8: 1, 6: 1}
    assert "CoH" in mdb and mdb["CoH"].composition == {27: 1, 1: 1}


def test_unknown_molecule_is_a_clear_error(mdb):
    with pytest.raises(UnknownSpeciesError, match="no molecule 'CQ'"):
        mdb["CQ"]
    with pytest.raises(UnknownSpeciesError, match="did you mean"):
        mdb.molecule("C0")
    with pytest.raises(UnknownSpeciesError):
        mdb.molecule(12)


def test_made_of(mdb):
    names = {m.name for m in mdb.made_of(["H", "C", "N", "O"], neutral_components=True)}
    # the ten neutral diatomics of H, C, N, O in Barklem & Collet (2016) table1
    assert names == {"H2", "C2", "N2", "O2", "CH", "NH", "OH", "CN", "CO", "NO"}
    with_ions = {m.name for m in mdb.made_of(["H"])}
    assert with_ions == {"H2", "H2+", "H2-"}   # table1 rows made of hydrogen only


def test_tabulated_values_are_the_published_ones_in_cgs(mdb):
    # Barklem & Collet (2016) table7_vNov2022 (Pa) and table6, at grid temperatures
    assert LOG10_PA_TO_CGS == pytest.approx(1.0, abs=1e-12)   # 1 Pa = 10 dyn cm^-2
    for name in ("H2", "CO", "OH", "CN", "CO+"):
        m = mdb[name]
        for t, log_pk in REF[("log10_pK", name)].items():
            i = int(np.flatnonzero(m.temperature == t)[0])
            assert m.log10_kp[i] == pytest.approx(log_pk + 1.0, abs=1e-9)
            assert m.partition_function[i] == REF[("molecular_U", name)][t]


def test_grid_and_provenance(mdb):
    m = mdb["CO"]
    # Barklem & Collet (2016): 42 temperatures from 1e-5 K to 10,000 K
    assert len(m.temperature) == 42
    assert m.temperature_range == (1e-5, 1e4)
    assert "Barklem" in m.provenance and "table1 106" in m.provenance
    assert len(mdb.digest) == 64


def _copy_with(tmp_path, line_no, new):
    lines = SHIPPED.read_text().split("\n")
    lines[line_no - 1] = new
    p = tmp_path / "bad.txt"
    p.write_text("\n".join(lines))
    return p


def _first_line(prefix):
    for i, ln in enumerate(SHIPPED.read_text().split("\n"), start=1):
        if ln.startswith(prefix):
            return i
    raise AssertionError(prefix)


def test_malformed_data_line_names_file_and_line(tmp_path):
    n = _first_line("molecule H2") + 8   # first data row of H2
    p = _copy_with(tmp_path, n, "   1.00000e-05  -2.25687e+09  abc")
    with pytest.raises(DataFormatError, match=rf"bad\.txt:{n}"):
        MoleculeDatabase(p)


def test_malformed_block_and_format_tag(tmp_path):
    n = _first_line("molecule CO") + 1
    p = _copy_with(tmp_path, n, "process CO = O * C")
    with pytest.raises(DataFormatError, match="process line"):
        MoleculeDatabase(p)
    p = _copy_with(tmp_path, 1, "# some other format")
    with pytest.raises(DataFormatError, match="not a molecular data file"):
        MoleculeDatabase(p)
    n = _first_line("molecule CO") + 10
    t, logk, _ = SHIPPED.read_text().split("\n")[n - 1].split()
    p = _copy_with(tmp_path, n, f"{t} {logk} -1.0")
    with pytest.raises(DataFormatError, match=rf"bad\.txt:{n}: T and U_AB must be positive"):
        MoleculeDatabase(p)
    p = _copy_with(tmp_path, n, f"1.0e-6 {logk} 1.0")
    with pytest.raises(DataFormatError, match=rf"bad\.txt:{n}: temperatures must increase"):
        MoleculeDatabase(p)


def test_missing_file(tmp_path):
    with pytest.raises(NoDataError, match="molecule_import"):
        MoleculeDatabase(tmp_path)
