"""Plain-sum partition functions against Barklem & Collet (2016, A&A 588, A96), table 8.

Reference values: tests/reference/bc2016_table8_partition.csv, converted from
table8_vNov2022.dat (BSD-3) by tests/reference/make_bc2016_table8_partition.py.  The check is
0.5 % for 1,000 K <= T <= 10,000 K for every species both cover; a species that cannot meet it
is listed below with its reason, and each reason is itself checked.
"""

from __future__ import annotations

import collections
from pathlib import Path

import numpy as np
import pytest

from sahaboltz.constants import K_B_EV
from sahaboltz.errors import NoDataError
from sahaboltz.kernels.partition import PartitionModel

REF_FILE = Path(__file__).parent / "reference" / "bc2016_table8_partition.csv"
TOL = 0.005  # the tolerance asked for by the check

# --- species that cannot meet 0.5 % over 1,000-10,000 K, by reason --------------------------
# B&C summed every NIST level including those above the first ionization limit (autoionizing);
# we leave those out (DESIGN.md point 2).  Checked: adding them back reproduces B&C to 0.5 %.
ABOVE_LIMIT = {"Ca I", "Sr I", "Ge I"}
# The NIST ASD export in our sources lists only the ground level for these spectra, while
# B&C had full level lists.  Checked: one level in the data.
SOURCE_GROUND_ONLY = {"U I", "U II", "Pa I", "Pa II"}
# B&C's input had a single level (their U is constant in T); current NIST lists many.
# Checked: the reference value is the same at every temperature.
BC_SINGLE_LEVEL = {"Th III", "Os III", "Re III"}
# The level lists of these spectra changed between the NIST ASD version B&C extracted (2015)
# and our export (mostly lanthanides, actinides and 5d elements, where NIST has added or revised
# excited levels); the importer keeps every row with an energy and a J.  Checked: the ground
# terms agree, i.e. 0.5 % at 1,000 K, and the disagreement grows with T.
NIST_VERSION = {
    "Th I", "Th II", "Pm II", "Er III", "Pr I", "Sm I", "Sm III", "Nd I", "Nd II", "Nd III",
    "Hf I", "Ta I", "Ta II", "Ac I", "Eu I", "Eu III", "Tb I", "Tb II", "Tb III", "Os I",
    "Dy I", "Dy II", "Yb I", "Lu I", "Gd I", "Gd III", "Ce I", "Ho III",
    "La I", "Tm I", "Tm II", "Re I",
}
# A sharper form of the same reason: our level lists extend those B&C had.  Checked: keeping
# only our levels below one energy (an upper part of the list that B&C lacked) reproduces
# their U to 0.5 % at every temperature.
BC_SHORTER_LIST = {"V I", "Y I", "Zn I", "Ra I", "Pt I", "Pb I"}
EXCEPTIONS = ABOVE_LIMIT | SOURCE_GROUND_ONLY | BC_SINGLE_LEVEL | NIST_VERSION | BC_SHORTER_LIST


def _load_reference() -> dict[str, tuple[np.ndarray, np.ndarray]]:
    rows = collections.defaultdict(list)
    with REF_FILE.open() as fh:
        for line in fh:
            if line.startswith("#") or line.startswith("species,"):
                continue
            name, t, u = line.strip().split(",")
            rows[name].append((float(t), float(u)))
    return {k: (np.array([r[0] for r in v]), np.array([r[1] for r in v]))
            for k, v in rows.items()}


REFERENCE = _load_reference()
# B&C also tabulate negative ions and deuterium, which level_data does not hold
COVERED = sorted(k for k in REFERENCE if not k.endswith("-") and not k.startswith("D "))


def _species(db, name):
    try:
        return db.species(name)
    except NoDataError as exc:
        pytest.fail(f"{name}: in B&C table 8 but not usable from level_data ({exc})")


def _plain_u(sp, temps):
    return PartitionModel([sp]).evaluate(temps)[0]


def test_reference_file_covers_the_range():
    # 284 species in table8_vNov2022 (its header); 11 temperatures 1,000-10,000 K
    assert len(REFERENCE) == 284
    t, _ = REFERENCE["Fe I"]
    assert t.min() == 1000.0 and t.max() == 10000.0 and len(t) == 11


@pytest.mark.parametrize("name", [n for n in COVERED if n not in EXCEPTIONS])
def test_plain_sum_matches_barklem_collet(db, name):
    temps, ref = REFERENCE[name]
    u = _plain_u(_species(db, name), temps)
    dev = u / ref - 1.0
    worst = int(np.argmax(np.abs(dev)))
    assert abs(dev[worst]) <= TOL, (f"{name}: U = {u[worst]:.6g} vs B&C {ref[worst]:.6g} at "
                                    f"T = {temps[worst]:.0f} K ({100 * dev[worst]:+.3f} %)")


@pytest.mark.parametrize("name", sorted(EXCEPTIONS))
def test_exception_is_still_needed(db, name):
    """An excepted species must really fail, else it belongs back in the main check."""
    temps, ref = REFERENCE[name]
    u = _plain_u(_species(db, name), temps)
    assert np.max(np.abs(u / ref - 1.0)) > TOL, f"{name} now agrees with B&C: drop the exception"


@pytest.mark.parametrize("name", sorted(ABOVE_LIMIT))
def test_above_limit_levels_explain_difference(db, name):
    sp = _species(db, name)
    temps, ref = REFERENCE[name]
    e, g = sp.levels.energy_ev, sp.levels.g
    u_all = (g * np.exp(-np.outer(1.0 / (K_B_EV * temps), e))).sum(axis=1)
    assert (~sp.bound).any()
    np.testing.assert_allclose(u_all, ref, rtol=TOL, err_msg=name)


@pytest.mark.parametrize("name", sorted(SOURCE_GROUND_ONLY))
def test_source_has_only_the_ground_level(db, name):
    assert len(_species(db, name).levels) == 1, name


@pytest.mark.parametrize("name", sorted(BC_SINGLE_LEVEL))
def test_bc_had_a_single_level(db, name):
    _, ref = REFERENCE[name]
    assert np.all(ref == ref[0]), name
    assert len(_species(db, name).levels) > 1


@pytest.mark.parametrize("name", sorted(NIST_VERSION))
def test_nist_version_species_agree_at_low_temperature(db, name):
    temps, ref = REFERENCE[name]
    u = _plain_u(_species(db, name), temps)
    dev = np.abs(u / ref - 1.0)
    assert dev[0] <= TOL, f"{name}: {100 * dev[0]:.3f} % at {temps[0]:.0f} K"
    assert dev[-1] > TOL  # the difference is in excited levels, seen at high T


@pytest.mark.parametrize("name", sorted(BC_SHORTER_LIST))
def test_a_shorter_level_list_reproduces_bc(db, name):
    sp = _species(db, name)
    temps, ref = REFERENCE[name]
    e, g = sp.bound_energy_ev, sp.bound_g
    partial = np.cumsum(g[:, None] * np.exp(-np.outer(e, 1.0 / (K_B_EV * temps))), axis=0)
    best = np.abs(partial / ref - 1.0).max(axis=1)
    assert best.min() <= TOL, f"{name}: no cut of our list reproduces B&C ({best.min():.4f})"
    assert np.argmin(best) < len(e) - 1  # the cut leaves out part of our list


def test_worst_case_of_the_main_check(db):
    """Summary figure for the report: the largest deviation over the non-excepted species."""
    worst = 0.0
    for name in COVERED:
        if name in EXCEPTIONS:
            continue
        temps, ref = REFERENCE[name]
        worst = max(worst, float(np.max(np.abs(_plain_u(db.species(name), temps) / ref - 1))))
    assert worst <= TOL
