"""The molecules option and the element-budget report of ``sahaboltz state``."""

import json

from sahaboltz.faces.cli import main


def test_state_budget_with_molecules(capsys):
    code = main(["state", "-T", "2500", "--gas-pressure", "1e6", "--molecules", "default",
                 "--budget", "--elements", "H,C,O", "--format", "json"])
    doc = json.loads(capsys.readouterr().out)
    assert code == 0
    share = {(r["element"], r["in"]): r["fraction"] for r in doc["rows"]}
    # cool dense gas: hydrogen mostly molecular (A&A 363, 1065 (2000), sect. 1) and, with O > C,
    # CO takes most of the carbon (common practice: CO locking in cool atmospheres)
    assert share[("H", "H2")] > 0.5
    assert share[("C", "CO")] > 0.9
    for el in "HCO":  # each element's budget adds up to one
        assert abs(sum(v for (e, _), v in share.items() if e == el) - 1) < 1e-4  # shares < 1e-6 hidden


def test_budget_without_molecules_is_a_clear_error(capsys):
    code = main(["state", "-T", "2500", "--gas-pressure", "1e6", "--budget"])
    assert code == 2 and "--molecules" in capsys.readouterr().err


def test_state_budget_puts_oxygen_in_water_with_the_default_set(capsys):
    # the case of issue 17: 3000 K, 1e6 dyn cm^-2; with diatomics only, OH took 35 % of the
    # oxygen; with the polyatomic species H2O takes more than OH (common practice: water is
    # the main oxygen carrier after CO in M-dwarf atmospheres)
    share = {}
    for mset in ("diatomics", "default"):
        main(["state", "-T", "3000", "--gas-pressure", "1e6", "--molecules", mset, "--budget",
              "--elements", "O", "--format", "json"])
        doc = json.loads(capsys.readouterr().out)
        share[mset] = {r["in"]: r["fraction"] for r in doc["rows"]}
    assert "H2O" not in share["diatomics"] and share["diatomics"]["OH"] > 0.3
    assert share["default"]["H2O"] > 3 * share["default"]["OH"]
