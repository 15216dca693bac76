"""Compositions: the shipped Asplund (2009) set, scaling, custom mixtures, validation."""

import math

import numpy as np
import pytest

from sahaboltz.data.composition import Composition, read_abundance_file, solar
from sahaboltz.data.composition_import import import_asplund2009
from sahaboltz.data.paths import level_data_dir
from sahaboltz.errors import DataFormatError, InputError, UnknownSpeciesError


def test_solar_values_match_asplund_table1():
    s = solar()
    eps = dict(zip(s.symbols, s.log_eps))
    # Asplund, Grevesse, Sauval & Scott (2009), ARA&A 47, 481, Table 1, photospheric column
    assert eps["H"] == pytest.approx(12.00, abs=1e-9)
    assert eps["He"] == pytest.approx(10.93, abs=1e-9)
    assert eps["O"] == pytest.approx(8.69, abs=1e-9)
    assert eps["Fe"] == pytest.approx(7.50, abs=1e-9)
    assert eps["Th"] == pytest.approx(0.02, abs=1e-9)
    # same table, meteoritic column: no photospheric value for As, Hg and U
    assert eps["As"] == pytest.approx(2.30, abs=1e-9)
    assert eps["Hg"] == pytest.approx(1.17, abs=1e-9)
    assert eps["U"] == pytest.approx(-0.54, abs=1e-9)


def test_meteoritic_values_are_flagged():
    s = solar()
    origin = dict(zip(s.symbols, s.origin))
    # Asplund et al. (2009) Table 1 gives no photospheric value for these 14 elements
    meteoritic = {"As", "Se", "Br", "Cd", "Sb", "Te", "I", "Cs", "Ta", "Re", "Pt", "Hg", "Bi", "U"}
    assert {k for k, v in origin.items() if v == "m"} == meteoritic
    assert origin["Fe"] == "p" and origin["H"] == "p"
    assert len(s) == 83  # Table 1 lists no value for Tc, Pm, Po-Ac, Pa


def test_solar_mass_fractions():
    x, y, z = solar().xyz()
    # Asplund et al. (2009) sec. 3.12: present-day photosphere X = 0.7381, Y = 0.2485,
    # Z = 0.0134, Z/X = 0.0181 (their atomic masses differ slightly from NIST standard weights)
    assert x == pytest.approx(0.7381, abs=2e-3)
    assert y == pytest.approx(0.2485, abs=2e-3)
    assert z == pytest.approx(0.0134, abs=3e-4)
    assert z / x == pytest.approx(0.0181, abs=3e-4)
    assert x + y + z == pytest.approx(1.0, abs=1e-14)


def test_scaling_metallicity_and_alpha():
    base = solar()
    s = solar(metallicity=-1.0, alpha_enhancement=0.4)
    rel0 = dict(zip(base.symbols, base.relative_to_hydrogen))
    rel = dict(zip(s.symbols, s.relative_to_hydrogen))
    assert rel["He"] == pytest.approx(rel0["He"], rel=1e-13)   # H and He untouched
    assert rel["Fe"] == pytest.approx(0.1 * rel0["Fe"], rel=1e-13)
    for el in ("O", "Ne", "Mg", "Si", "S", "Ar", "Ca", "Ti"):  # alpha elements (common practice)
        assert rel[el] == pytest.approx(10 ** (-0.6) * rel0[el], rel=1e-12)
    assert rel["C"] == pytest.approx(0.1 * rel0["C"], rel=1e-13)
    assert 0.1 * base.xyz()[2] < s.xyz()[2] < 0.25 * base.xyz()[2]  # alpha (O) keeps Z up


def test_mass_fraction_mixture_air():
    # dry air by mass N 75.52 %, O 23.14 %, Ar 1.29 % (from memory, CRC-style tables); the
    # atom fractions follow from N2 78.08 %, O2 20.95 %, Ar 0.93 % by volume (from memory)
    air = Composition.from_mass_fraction({"N": 0.7552, "O": 0.2314, "Ar": 0.0129})
    atoms = np.array([2 * 78.08, 2 * 20.95, 0.93])
    atoms /= atoms.sum()
    got = np.array([air.number_fraction_of(e) for e in ("N", "O", "Ar")])
    np.testing.assert_allclose(got, atoms, rtol=0.02)
    np.testing.assert_allclose(air.mass_fractions, np.array([0.7552, 0.2314, 0.0129]) / 0.9995,
                               rtol=1e-12)


def test_atomic_weights_match_mendeleev():
    mendeleev = pytest.importorskip("mendeleev")
    comp = Composition.from_number({"H": 1, "C": 1, "Fe": 1, "Ar": 1})
    ref = [mendeleev.element(s).atomic_weight for s in comp.symbols]
    np.testing.assert_allclose(comp.atomic_weights(), ref, rtol=2e-4)


def test_number_mixtures_and_views():
    ar = Composition.from_number({"Ar": 3.0}, name="argon")
    assert ar.number_fraction_of("Ar") == 1.0 and ar.symbols == ["Ar"]
    mix = Composition.from_number({26: 1.0, "h": 9.0, "He": 0.0})
    assert mix.symbols == ["H", "Fe"]            # zeros dropped, ordered by Z, case-insensitive
    assert mix.number_fraction_of("H") == pytest.approx(0.9)
    assert "He" not in mix and "Fe" in mix
    logs = Composition.from_log_eps({"H": 12.0, "He": 11.0})
    assert logs.number_fraction_of("He") == pytest.approx(0.1 / 1.1)
    assert len(solar(elements=["H", "He", "Fe"])) == 3


@pytest.mark.parametrize("bad, exc", [
    ({"Xx": 1.0}, UnknownSpeciesError),
    ({"H": -1.0}, InputError),
    ({"H": float("nan")}, InputError),
    ({"H": math.inf}, InputError),
    ({"H": 0.0, "He": 0.0}, InputError),
    ({}, InputError),
    ({"H": "lots"}, InputError),
])
def test_bad_mixtures(bad, exc):
    with pytest.raises(exc):
        Composition.from_number(bad)
    with pytest.raises(exc):
        Composition.from_mass_fraction(bad)


def test_bad_scaling_and_source():
    with pytest.raises(InputError):
        solar().scaled(metallicity=float("nan"))
    with pytest.raises(InputError):
        solar(source="nowhere")
    with pytest.raises(UnknownSpeciesError):
        Composition.from_number({"Ar": 1}).number_fraction_of("Fe")


def test_malformed_abundance_file(tmp_path):
    good = (level_data_dir() / "abundances" / "asplund2009.txt").read_text()
    bad = tmp_path / "bad.txt"
    bad.write_text(good.replace("26\tFe\t7.50", "26\tFe\tseven"))
    with pytest.raises(DataFormatError, match="bad number"):
        read_abundance_file(bad)
    bad.write_text("not an abundance file\n")
    with pytest.raises(DataFormatError):
        read_abundance_file(bad)


@pytest.mark.needs_sources
def test_importer_reproduces_shipped_file(source_dir, tmp_path):
    out = import_asplund2009(source_dir / "abundances" / "asplund2009.csv", tmp_path / "a.txt")
    shipped = level_data_dir() / "abundances" / "asplund2009.txt"
    assert out.read_text() == shipped.read_text()
    assert "source_sha256" in read_abundance_file(out).provenance
