"""The info and levels commands, in all three output formats."""

import csv
import io
import json

import pytest

from sahaboltz.faces.cli import main


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_info_element_table(capsys):
    code, out, _ = run(capsys, "info", "He")
    assert code == 0 and "He I" in out and "He III" in out and "bare nucleus" in out


def test_info_species_json(capsys):
    code, out, _ = run(capsys, "info", "Fe II", "--format", "json")
    doc = json.loads(out)
    # NIST ASD: ionization energy of Fe II is 16.19921 eV
    assert doc["rows"][0]["ionization_eV"] == pytest.approx(16.19921)


def test_levels_csv(capsys):
    code, out, _ = run(capsys, "levels", "Fe I", "--max-energy", "0.115", "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(out)))
    # Fe I a 5D J = 4, 3, 2, 1 lie at 0-888 cm^-1 (<= 0.111 eV), J = 0 at 978 cm^-1 (NIST ASD)
    assert [r["J"] for r in rows] == ["4", "3", "2", "1"]


@pytest.mark.parametrize("argv,msg", [(["levels", "Xx I"], "unknown element"),
                                      (["levels", "Fe I", "--max-energy", "-1"], "max-energy"),
                                      (["info", "Fe XXIX"], "highest stage")])
def test_errors_are_clear(capsys, argv, msg):
    code, _, err = run(capsys, *argv)
    assert code == 2 and msg in err
