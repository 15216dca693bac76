"""The importer's handling of every pitfall of the NIST ASD exports, on small hand-written samples."""

import pytest

from sahaboltz.data.nist_parse import (parse_ionization_energies, parse_j, parse_level_export,
                                       species_of_file)
from sahaboltz.errors import DataFormatError

HEAD = "Configuration\tTerm\tJ\tPrefix\tLevel (cm-1)\tSuffix\n"


def row(config, term, j, prefix, level, suffix):
    return "\t".join(f'"{x}"' for x in (config, term, j, prefix, level, suffix)) + "\t\n"


def parse(*rows, name="nistspectrum=X+I.webdump.dat"):
    return parse_level_export(name, HEAD + "".join(rows))


def test_plain_levels_and_g():
    sp = parse(row("2s2", "1S", "0", "", "0.000", ""), row("2s.2p", "3P*", "2", "", "100.5", ""))
    assert [lv.g for lv in sp.levels] == [1, 5]  # g = 2J + 1
    assert sp.rows_read == 2 and not sp.dropped


def test_j_list_sums_g():
    # "7/2,9/2": two levels at one energy: g = 8 + 10
    g, flags = parse_j("7/2,9/2", "x")
    assert g == 18 and "m" in flags
    assert parse_j("1,2,3", "x")[0] == 3 + 5 + 7


def test_uncertain_j():
    # "1/2 or 3/2": one level of unknown J: mean of g = 2 and g = 4
    assert parse_j("1/2 or 3/2", "x") == (3.0, "j")
    assert parse_j("1/2 or 3/2 or 5/2", "x")[0] == 4.0
    assert parse_j("5/2, 7/2 or 9/2", "x")[0] == 8.0
    g, flags = parse_j("3/2?", "x")
    assert g == 4 and flags == "j"


def test_bad_j_names_file_and_line():
    with pytest.raises(DataFormatError, match=r"X\+I.*line 3.*J"):
        parse(row("a", "b", "1", "", "0", ""), row("c", "d", "abc", "", "10", ""))


def test_brackets_question_marks_and_offsets_are_flagged():
    sp = parse(row("a", "t", "1", "(", "10.0", ")"), row("b", "t", "1", "[", "20.0", "]"),
               row("c", "t", "1", "", "30.0", "?"), row("d", "t", "1", "", "40.0", "+x"),
               row("e", "t", "1", "", "50.0", "+y?"), row("f", "t", "1", "[", "60.0", "]+x"))
    flags = [lv.flags for lv in sp.levels]
    assert flags == ["t", "d", "q", "x", "qx", "dx"]


def test_rows_without_energy_are_dropped_and_counted():
    sp = parse(row("a", "t", "1", "", "0", ""), row("b", "t", "1", "", "", ""))
    assert len(sp.levels) == 1 and sp.dropped["no_energy"] == 1


def test_n_only_rows_duplicate_or_stand_alone():
    # n = 2 is resolved (2s, 2p): its n-only row is a duplicate; n = 12 stands alone: g = 2 n^2
    sp = parse(row("1s", "2S", "1/2", "", "0", ""), row("2s", "2S", "1/2", "", "82258.9", ""),
               row("2p", "2P*", "3/2", "", "82259.3", ""), row("2", "", "", "", "82259.2", ""),
               row("12", "", "", "[", "108917.1", "]"))
    assert sp.dropped["hydrogenic_duplicate"] == 1
    top = sp.levels[-1]
    assert top.g == 2 * 12 ** 2 and "h" in top.flags and "d" in top.flags


def test_several_limits_first_is_ionization_limit():
    sp = parse(row("a", "t", "0", "", "0", ""), row("X II (1S)", "Limit", "---", "", "1000.0", ""),
               row("b", "t", "1", "", "1500.0", ""),
               row("X II (2S)", "Limit", "---", "", "2000.0", ""))
    assert sp.limits_cm == [1000.0, 2000.0]
    assert sp.dropped["limit_row"] == 2 and len(sp.levels) == 2


def test_row_without_j_is_dropped():
    sp = parse(row("4f12", "", "", "", "0", ""), row("a", "t", "1", "", "5", ""))
    assert sp.dropped["no_J"] == 1 and len(sp.levels) == 1


def test_malformed_row_names_file_and_line():
    with pytest.raises(DataFormatError, match="line 2: expected 6"):
        parse('"a"\t"b"\t"1"\n')


def test_bad_energy():
    with pytest.raises(DataFormatError, match="line 2: cannot read the energy"):
        parse(row("a", "t", "1", "", "12x.5", ""))


def test_unknown_layout_and_empty_file():
    with pytest.raises(DataFormatError, match="unknown column layout"):
        parse_level_export("f.dat", "Config\tJ\tLevel\n")
    with pytest.raises(DataFormatError, match="empty file"):
        parse_level_export("f.dat", "")


def test_species_from_file_name():
    assert species_of_file("nistspectrum=Fe+XXVI.webdump.dat") == (26, 25)
    with pytest.raises(DataFormatError):
        species_of_file("iron.txt")


def test_ionization_energy_csv_duplicate_species(tmp_path):
    p = tmp_path / "ie.csv"
    p.write_text("At. Num,Ion Charge,Ground Shells,Ground Level,Ionization Energy (eV),Uncertainty (eV)\n"
                 "1,0,1s,2S<1/2>,(13.598434599702),0.000000000012\n"
                 "2,+1,1s,2S<1/2>,[54.41],\n"
                 "2,+1,1s,2S<1/2>,54.4,\n")
    with pytest.raises(DataFormatError, match="line 4: duplicated species"):
        parse_ionization_energies(p)
    p.write_text("\n".join(p.read_text().splitlines()[:3]) + "\n")
    ies = parse_ionization_energies(p)
    assert ies[(1, 0)].value_ev == 13.598434599702 and ies[(1, 0)].note == "theoretical"
    assert ies[(2, 1)].note == "estimated" and ies[(2, 1)].uncertainty_ev is None


def test_row_with_a_term_but_no_j_is_the_whole_term():
    # a 7G term with unresolved J: g = (2S+1)(2L+1) = 7 * 9 (LS coupling); "a 5D*": 5 * 5
    sp = parse(row("3d5.(6S).6g", "7G", "", "", "113932.04", ""),
               row("3d6.4s", "a 5D*", "", "", "120000.0", ""))
    assert [lv.g for lv in sp.levels] == [63, 25]
    assert all("j" in lv.flags for lv in sp.levels) and not sp.dropped
