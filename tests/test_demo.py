"""The demo runs end to end (reduced grids), builds its tables through the cache once, and its
numbers agree with outside knowledge of the two invented objects' kind of gas."""

from __future__ import annotations

import json

import numpy as np
import pytest

from sahaboltz.faces.cli import main

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def demo_runs(tmp_path_factory):
    """Run ``sahaboltz demo --quick`` twice into a fresh cache; keep both outputs."""
    import os

    root = tmp_path_factory.mktemp("demo")
    cache = root / "cache"
    out = root / "plots"
    old = os.environ.get("SAHABOLTZ_CACHE_DIR")
    os.environ["SAHABOLTZ_CACHE_DIR"] = str(cache)
    try:
        runs = []
        for _ in range(2):
            import contextlib
            import io
            buf = io.StringIO()
            with contextlib.redirect_stdout(buf):
                rc = main(["demo", "--quick", "--out", str(out), "--workers", "1"])
            runs.append((rc, buf.getvalue()))
        buf = io.StringIO()
        with contextlib.redirect_stdout(buf):
            rc = main(["demo", "--quick", "--no-plots", "--format", "json"])
        runs.append((rc, buf.getvalue()))
    finally:
        if old is None:
            os.environ.pop("SAHABOLTZ_CACHE_DIR", None)
        else:
            os.environ["SAHABOLTZ_CACHE_DIR"] = old
    return {"cache": cache, "out": out, "runs": runs}


def test_demo_runs_and_second_run_is_a_cache_hit(demo_runs):
    (rc1, first), (rc2, second), _ = demo_runs["runs"]
    assert rc1 == 0 and rc2 == 0
    assert first.count("(built,") == 2 and "cache hit" not in first
    assert second.count("(cache hit,") == 2 and "(built," not in second
    cache = demo_runs["cache"]
    tables = sorted(cache.glob("*.h5"))
    assert len(tables) == 2
    for t in tables:
        assert str(t) in first and str(t) in second     # says where the cache put the file
    assert f"cache directory: {cache}" in first


def test_demo_writes_its_plots(demo_runs):
    pngs = sorted(demo_runs["out"].glob("*.png"))
    assert [p.name for p in pngs] == ["arc_partition_Ar.png", "arc_stages_Ar.png",
                                      "korva_dominant_Fe.png", "korva_electron_pressure.png",
                                      "korva_stages_Ca.png"]
    for p in pngs:
        assert p.stat().st_size > 10000 and p.read_bytes()[:8] == PNG_MAGIC
    assert not list(demo_runs["out"].glob(".*.tmp"))


def test_demo_summary_physics(demo_runs):
    rc, text = demo_runs["runs"][2]
    assert rc == 0
    doc = json.loads(text)
    depths = doc["rows"]
    assert [d["tau"] for d in depths] == [1e-3, 1e-2, 1e-1, 1.0, 10.0]
    for d in depths:
        # in a cool dwarf's photosphere hydrogen is neutral while Na (5.14 eV) and Ca (6.11 eV)
        # are almost entirely singly ionized (common practice: the Sun's photosphere is
        # the same way)
        assert d["H"].startswith("H I ")
        assert d["Na"].startswith("Na II ") and d["Ca"].startswith("Ca II ")
        # the reported n_e and P_e are one state: P_e = n_e k T (astropy k_B)
        from astropy.constants import k_B
        assert d["P_e"] == pytest.approx(d["n_e"] * k_B.cgs.value * d["T_K"], rel=2e-3)
    # P_e rises with depth
    pe = [d["P_e"] for d in depths]
    assert all(b > a for a, b in zip(pe, pe[1:]))
    arc = {row["T_K"]: row for row in doc["meta"]["arc"]}
    ne = np.array([arc[t]["n_e"] for t in sorted(arc)])
    # atmospheric-pressure argon: n_e peaks near 2e17 cm^-3 at 15,000-18,000 K
    # (from memory: the LTE composition curves of argon plasmas in the thermal-plasma
    # literature, e.g. Boulos, Fauchais & Pfender, Thermal Plasmas, 1994)
    assert 1e17 < ne.max() < 3e17
    assert 15000 <= sorted(arc)[int(np.argmax(ne))] <= 18000
    # Ar I and Ar II are equally abundant near 14,500 K at 1 atm (from memory, same source)
    assert arc[14000]["Ar I"] > arc[14000]["Ar II"] and arc[16000]["Ar II"] > arc[16000]["Ar I"]
    # Debye-Hueckel lowering of Ar I stays a small fraction of kT: the ideal gas is adequate
    assert max(r["dchi/kT"] for r in arc.values()) < 0.1


def test_demo_help_mentions_quick(capsys):
    with pytest.raises(SystemExit):
        main(["demo", "--help"])
    assert "--quick" in capsys.readouterr().out
