"""The truncation registry and its two textbook schemes: "ground" (U = g0) and "below"
(levels up to a principal quantum number n or an energy E), from Python and the CLI."""

from __future__ import annotations

import json

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest

from sahaboltz import InputError
from sahaboltz.data.composition import Composition
from sahaboltz.equilibrium import solve_equilibrium
from sahaboltz.faces.cli import main
from sahaboltz.kernels import truncation as registry
from sahaboltz.kernels.partition import partition_function
from sahaboltz.kernels.saha import saha_chain
from sahaboltz.tables.spec import TableSpec

# Rydberg constant for hydrogen's reduced mass, R_H = R_inf / (1 + m_e / m_p)  [cm^-1]
# (Rydberg formula; constants CODATA via astropy)
R_H = (const.Ryd / (1 + const.m_e / const.m_p)).to_value(1 / u.cm)
HC_OVER_K = (const.h * const.c / const.k_B).to_value(u.cm * u.K)   # [cm K]
# hydrogen ionization energy 13.598434 eV (NIST ASD, from memory)
CHI_H_EV = 13.598434


def _hydrogen_u(t, n_max):
    """U(H I) summed over n = 1..n_max with g = 2 n^2 and E_n = R_H (1 - 1/n^2)."""
    n = np.arange(1, n_max + 1)[:, None]
    return (2 * n**2 * np.exp(-HC_OVER_K * R_H * (1 - 1 / n**2) / t)).sum(axis=0)


def test_registry_lists_every_scheme_and_parses_parameters():
    assert set(registry.names()) >= {"plain", "lowered", "occupation", "ground", "below"}
    assert registry.get("below:n=3").key == "below:n=3"
    assert registry.get("below: e = 10.2").key == "below:e=10.2"
    assert registry.get("ground") is registry.get("ground")
    for bad in ("nonsense", "below", "below:n=0", "below:x=3", "below:n=abc", "plain:n=3"):
        with pytest.raises(InputError, match="truncation"):
            registry.get(bad)


def test_ground_level_only_is_g0():
    t = np.array([3000.0, 10000.0, 30000.0])
    # ground levels (NIST ASD): H I 1s 2S1/2 g = 2; Fe I a 5D4 (J = 4) g = 9; Na I 3s 2S1/2 g = 2
    for name, g0 in (("H I", 2.0), ("Fe I", 9.0), ("Na I", 2.0)):
        np.testing.assert_allclose(partition_function(name, t, truncation="ground"), g0,
                                   rtol=1e-14)
    assert (partition_function("Fe I", t) > 9.0).all()   # the plain sum has more levels


@pytest.mark.parametrize("n_max", [1, 2, 3, 6])
def test_levels_below_n_follow_the_rydberg_formula(n_max):
    t = np.array([5000.0, 10000.0, 20000.0])
    got = partition_function("H I", t, truncation=f"below:n={n_max}")
    # rtol: the level list resolves fine structure (tenths of a cm^-1), the formula does not
    np.testing.assert_allclose(got, _hydrogen_u(t, n_max), rtol=1e-5)


def test_levels_below_an_energy():
    t = np.array([8000.0, 16000.0])
    # E_2 = 10.20 eV and E_3 = 12.09 eV: a cut at 11 eV keeps n = 1, 2
    np.testing.assert_allclose(partition_function("H I", t, truncation="below:e=11"),
                               _hydrogen_u(t, 2), rtol=1e-5)
    # a cut below the first excited level keeps the ground level only
    np.testing.assert_array_equal(partition_function("Fe I", t, truncation="below:e=0.0"),
                                  partition_function("Fe I", t, truncation="ground"))


def test_level_populations_with_a_static_cut():
    from sahaboltz.kernels.boltzmann import level_populations
    pops = level_populations("H I", 10000.0, truncation="below:n=2")
    assert pops.sum() == pytest.approx(1.0, rel=1e-12)
    # n = 1 holds 2 / U, n = 2 the rest; levels with n >= 3 are empty
    assert pops[0] == pytest.approx(2.0 / _hydrogen_u(np.array([10000.0]), 2)[0], rel=1e-5)


def test_textbook_saha_with_ground_level_partition_functions():
    """Pure hydrogen, U(H I) = 2, U(H II) = 1: n_II n_e / n_I = (2 pi m_e k T / h^2)^1.5
    exp(-chi / kT) (the Saha equation with the textbook partition functions)."""
    t = np.array([8000.0, 10000.0, 12000.0])
    pe = 200.0
    s = (2 * np.pi * const.m_e * const.k_B * (t * u.K) / const.h**2) ** 1.5
    phi = (s.to_value(u.cm**-3) * np.exp(-CHI_H_EV * u.eV / (const.k_B * t * u.K)).to_value(1))
    n_e = pe / (const.k_B.cgs.value * t)
    ratio = phi / n_e
    f = saha_chain("H", t, electron_pressure=pe, truncation="ground")
    np.testing.assert_allclose(f[1] / f[0], ratio, rtol=1e-6)
    st = solve_equilibrium(Composition.from_number({"H": 1.0}), t, electron_pressure=pe,
                           truncation="ground", h_minus=False)
    np.testing.assert_allclose(st.fraction("H II") / st.fraction("H I"), ratio, rtol=1e-6)


def test_schemes_reach_specs_and_the_command_line(capsys):
    spec = TableSpec.from_mapping({"physics": {"truncation": "below:n=3"}})
    assert spec.physics["truncation"] == "below:n=3"
    with pytest.raises(InputError, match="physics.truncation"):
        TableSpec.from_mapping({"physics": {"truncation": "plain", "lowering": True}})
    code = main(["partition", "H I", "-T", "10000", "--truncation", "below:n=2", "--format",
                 "json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 0
    assert out["rows"][0]["U(H I)"] == pytest.approx(_hydrogen_u(np.array([1e4]), 2)[0],
                                                     rel=1e-5)
    code = main(["state", "-T", "10000", "--electron-pressure", "200", "--mix", "H:1",
                 "--truncation", "ground", "--no-h-minus", "--format", "json"])
    assert code == 0
    rows = json.loads(capsys.readouterr().out)["rows"]
    assert {r["species"] for r in rows} == {"H I", "H II"}
    with pytest.raises(SystemExit):
        main(["partition", "H I", "-T", "10000", "--truncation", "sideways"])
    assert "truncation" in capsys.readouterr().err
