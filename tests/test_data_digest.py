"""The level-data digest that keys the table cache covers every data file."""

import shutil

from sahaboltz.data.database import SpeciesDatabase, data_digest


def test_digest_changes_with_any_data_file(tmp_path, db):
    ld = tmp_path / "ld"
    shutil.copytree(db.path, ld)
    before = data_digest(ld)
    assert before == data_digest(db.path) == SpeciesDatabase(ld).digest
    mol = sorted((ld / "molecules").glob("*"))
    assert mol, "molecule data are part of level_data"
    mol[0].write_bytes(mol[0].read_bytes() + b"\n")
    assert data_digest(ld) != before
