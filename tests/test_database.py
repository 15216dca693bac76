"""Species look-ups, bare nuclei, level units and error messages of the species database."""

import astropy.units as u
import numpy as np
import pytest

from sahaboltz.data.database import SpeciesDatabase
from sahaboltz.errors import DataFormatError, NoDataError, SahaboltzError, UnknownSpeciesError


@pytest.mark.parametrize("name", ["Fe II", "FeII", "fe ii", "Fe+", "Fe+1", (26, 1), ("Fe", 1)])
def test_notations_find_the_same_species(db, name):
    sp = db.species(name)
    assert (sp.Z, sp.charge, sp.name) == (26, 1, "Fe II")


def test_charge_notation_multiple(db):
    assert db.species("Fe2+").name == "Fe III"
    assert db.species("Fe++").name == "Fe III"
    assert db["Ni"].name == "Ni I"  # nickel, not N + numeral


def test_bare_nuclei_have_no_levels(db):
    for name in ("H II", "He III", "Fe XXVII"):
        sp = db[name]
        assert sp.is_bare_nucleus and len(sp.levels) == 0 and sp.ionization_energy_ev == np.inf


def test_every_element_1_to_92_with_all_stages(db):
    assert db.elements() == list(range(1, 93))
    fe = db.element("Fe")
    assert [s.charge for s in fe] == list(range(27))


def test_levels_have_units(db):
    lv = db["Fe I"].levels_quantity()
    assert lv["energy"].unit == u.eV and lv["wavenumber"].unit == 1 / u.cm
    # ground level of Fe I is 3d6.4s2 a 5D4 (NIST ASD): g = 9
    assert lv["g"][0] == 9 and lv["energy"][0].value == 0.0


def test_autoionizing_levels_are_flagged_not_bound(db):
    sp = db["Fe I"]
    above = sp.levels.energy_ev >= sp.ionization_energy_ev
    assert not sp.bound[above].any()


@pytest.mark.parametrize("bad,err", [("Xx II", UnknownSpeciesError), ("Fe XXVIII", UnknownSpeciesError),
                                     ((26, 27), UnknownSpeciesError), ("Qq", UnknownSpeciesError),
                                     ("H-", NoDataError)])
def test_clear_errors(db, bad, err):
    with pytest.raises(err) as info:
        db.species(bad)
    assert isinstance(info.value, SahaboltzError) and str(info.value)


def test_stage_beyond_nucleus_message_names_highest_stage(db):
    with pytest.raises(UnknownSpeciesError, match="Fe XXVII"):
        db.species("Fe XXVIII")


def test_species_without_levels_is_a_no_data_error(db):
    empty = [s for s in db.all_species() if not s.is_bare_nucleus and len(s.levels) == 0]
    assert empty, "the NIST source has stages with an ionization energy but no level list"
    with pytest.raises(NoDataError, match="no level list"):
        db.species(empty[0].name)
    assert db.species(empty[0].name, require_levels=False).ionization_energy_ev > 0


def test_atomic_weight(db):
    # standard atomic weight of Fe, 55.845(2) (NIST atomic weights)
    assert db.atomic_weight("Fe") == pytest.approx(55.845, abs=1e-6)
    assert db.atomic_weight(1) == pytest.approx(1.008, abs=1e-3)


def test_duplicated_section_is_rejected(tmp_path, db):
    import shutil
    shutil.copytree(db.path, tmp_path / "ld", ignore=shutil.ignore_patterns("molecules", "abundances"))
    f = tmp_path / "ld" / "atoms" / "001_H.txt"
    text = f.read_text()
    f.write_text(text + text[text.index("\n[H I]"):])
    with pytest.raises(DataFormatError, match="duplicated species H I"):
        SpeciesDatabase(tmp_path / "ld")


def test_truncated_file_is_detected(tmp_path, db):
    import shutil
    shutil.copytree(db.path, tmp_path / "ld", ignore=shutil.ignore_patterns("molecules", "abundances"))
    f = tmp_path / "ld" / "atoms" / "026_Fe.txt"
    text = f.read_text()
    f.write_text(text[: len(text) // 2].rsplit("\n", 1)[0] + "\n")
    with pytest.raises(DataFormatError, match="026_Fe.txt"):
        SpeciesDatabase(tmp_path / "ld")


def test_fe_i_plain_sum_smoke_check(db):
    # Barklem & Collet (2016) table8_vNov2022: U(Fe I, 5000 K) = 27.794; within 0.1 %
    from sahaboltz.constants import K_B_EV
    sp = db["Fe I"]
    U = np.sum(sp.bound_g * np.exp(-sp.bound_energy_ev / (K_B_EV * 5000.0)))
    assert U == pytest.approx(27.794, rel=1e-3)
