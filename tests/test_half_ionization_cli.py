"""``sahaboltz half-ionization`` over its default range (1,000 K - 1e6 K)."""

import json

from sahaboltz.faces.cli import main


def test_hydrogen_at_fixed_electron_pressure_default_range(capsys):
    # pure hydrogen at P_e = 200 dyn cm^-2 is half ionized near 9,600 K (Carroll & Ostlie 2007,
    # An Introduction to Modern Astrophysics, sect. 8.1); in the cool part of the default range
    # H- outnumbers H+ there, which must not abort the search
    code = main(["half-ionization", "H", "--electron-pressure", "200", "--format", "json"])
    rows = json.loads(capsys.readouterr().out)["rows"]
    assert code == 0 and len(rows) == 1
    assert abs(rows[0]["temperature_K"] - 9600) < 100


def test_range_as_temperature_option(capsys):
    # the same transition through the one temperature option, with units, and through the
    # old --tmin/--tmax spelling (the 9,600 K check value above)
    found = []
    for extra in (["-T", "3000:50000"], ["-T", "3000 K:50000 K"],
                  ["--tmin", "3000", "--tmax", "5e4"]):
        code = main(["half-ionization", "H", "--electron-pressure", "200", "--format", "json"]
                    + extra)
        rows = json.loads(capsys.readouterr().out)["rows"]
        assert code == 0 and len(rows) == 1
        found.append(rows[0]["temperature_K"])
    assert abs(found[0] - 9600) < 100 and found[0] == found[1] == found[2]
