"""Re-running the importer on the raw NIST sources (needs ../shared/data; slow)."""

import filecmp
import re

import pytest

from sahaboltz.data import levelfile
from sahaboltz.data.nist_import import build_all, element_file_name, import_species
from sahaboltz.data.nist_parse import parse_level_export, species_of_file
from sahaboltz.data.database import SpeciesDatabase
from sahaboltz.errors import DataFormatError

pytestmark = [pytest.mark.slow, pytest.mark.needs_sources]


def _manifest_date(db):
    text = (db.path / "MANIFEST.txt").read_text()
    return re.search(r"^build_date = (\S+)$", text, re.M).group(1)


def test_reimport_reproduces_level_data_byte_for_byte(tmp_path, source_dir, db):
    out = tmp_path / "level_data"
    build_all(source_dir, out, _manifest_date(db))
    cmp = filecmp.dircmp(db.path, out, ignore=["molecules", "abundances"])
    assert not cmp.left_only and not cmp.right_only and not cmp.diff_files
    for sub in cmp.subdirs.values():
        assert not sub.diff_files and not sub.left_only and not sub.right_only, sub.diff_files


def test_every_source_file_is_accounted_for(source_dir, db):
    # level count = source rows - documented dropped rows, for every one of the source files
    files = sorted((source_dir / "nist_asd" / "energy_levels").glob("*.dat"))
    assert len(files) == 5050
    for path in files:
        z, charge = species_of_file(path)
        spec = parse_level_export(path)
        data_rows = sum(1 for line in path.read_text().splitlines()[1:] if line.strip())
        assert spec.rows_read == data_rows, path.name
        assert len(spec.levels) == data_rows - sum(spec.dropped.values()), path.name
        if z > 92:
            continue
        sp = db.species((z, charge), require_levels=False)
        assert int(sp.provenance["rows_read"]) == data_rows, path.name
        dropped = dict(item.split(":") for item in sp.provenance.get("rows_dropped", "").split())
        if sp.is_hydrogenic:  # all rows replaced by the Rydberg formula
            assert int(dropped["hydrogenic_replaced"]) == len(spec.levels), path.name
        else:
            assert len(sp.levels) == data_rows - sum(int(v) for v in dropped.values()), path.name


def test_user_import_of_one_species(tmp_path, source_dir, db):
    import shutil
    ld = tmp_path / "ld"
    shutil.copytree(db.path, ld, ignore=shutil.ignore_patterns("molecules", "abundances"))
    export = tmp_path / "nistspectrum=Na+I.webdump.dat"
    lines = (source_dir / "nist_asd" / "energy_levels" / export.name).read_text().splitlines()
    export.write_text("\n".join(lines[:11]) + "\n")  # the ten lowest rows only
    before = (ld / "atoms" / element_file_name(11)).read_text()
    sec = import_species(export, "Na I", ld, ionization_energy=None, uncertainty=None)
    after = (ld / "atoms" / element_file_name(11)).read_text()
    assert after.split("\n[")[0] == before.split("\n[")[0]  # the file's header is kept
    assert sec.header["levels"] == "10"
    new = SpeciesDatabase(ld)
    assert len(new["Na I"].levels) == 10
    assert new["Na I"].ionization_energy_ev == db["Na I"].ionization_energy_ev
    assert len(new["Na II"].levels) == len(db["Na II"].levels)  # the rest is untouched
    levelfile.parse((ld / "atoms" / element_file_name(11)).read_text(), "x")


def test_failed_import_leaves_level_data_untouched(tmp_path, source_dir, db):
    import shutil
    src = tmp_path / "src"
    shutil.copytree(source_dir / "nist_asd", src / "nist_asd")
    bad = src / "nist_asd" / "energy_levels" / "nistspectrum=Fe+I.webdump.dat"
    bad.write_text(bad.read_text() + '"3d7"\t"x"\n')
    out = tmp_path / "level_data"
    shutil.copytree(db.path, out)
    before = {p.name: p.read_bytes() for p in (out / "atoms").iterdir()}
    with pytest.raises(DataFormatError, match="Fe\\+I.webdump.dat, line"):
        build_all(src, out, "2000-01-01")
    assert {p.name: p.read_bytes() for p in (out / "atoms").iterdir()} == before
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".level_data-")]
