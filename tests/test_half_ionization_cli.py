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
