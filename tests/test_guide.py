"""The user guide's examples run: every ```python block (in order, one namespace) and every
line of a ```sh block that starts with ``sahaboltz`` (through the CLI entry point), in an
empty directory with a private table cache; a ```toml block whose first line is
``# NAME.toml: ...`` is written to NAME.toml when it is reached.  The C and Fortran examples
are the reader programs of tests/readers (compiled and run by tests/test_tables_readers.py);
here their arguments are checked against the table the guide builds.  The guide's links to
other documents must resolve."""

from __future__ import annotations

import contextlib
import io
import re
import shlex
from pathlib import Path

import h5py
import pytest

from sahaboltz.faces.cli import main

GUIDE = Path(__file__).resolve().parents[1] / "docs" / "guide.md"
FENCE = re.compile(r"^```(\w+)[^\n]*\n(.*?)^```", re.S | re.M)


def blocks(kind: str | None = None) -> list[tuple[str, str]]:
    found = [(m.group(1), m.group(2)) for m in FENCE.finditer(GUIDE.read_text())]
    return [b for b in found if kind is None or b[0] == kind]


def commands(text: str) -> list[str]:
    """The ``sahaboltz`` lines of a shell block, with backslash continuations joined."""
    joined = re.sub(r"\\\n\s*", " ", text)
    return [ln.strip() for ln in joined.splitlines() if ln.strip().startswith("sahaboltz ")]


def run_command(line: str) -> str:
    argv = shlex.split(line)[1:]
    target = None
    if ">" in argv:  # 'sahaboltz ... > file': stdout into a file
        k = argv.index(">")
        argv, target = argv[:k], argv[k + 1]
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        rc = main(argv)
    assert rc == 0, f"guide command failed (exit {rc}): {line}"
    if target:
        Path(target).write_text(buf.getvalue())
    return buf.getvalue()


def test_guide_has_examples():
    kinds = [k for k, _ in blocks()]
    assert kinds.count("python") >= 6 and kinds.count("sh") >= 5
    assert {"c", "fortran"} <= set(kinds)


def test_guide_examples_run(tmp_path, monkeypatch):
    pytest.importorskip("xarray")
    pytest.importorskip("h5netcdf")
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("SAHABOLTZ_CACHE_DIR", str(tmp_path / "cache"))
    namespace: dict = {"__name__": "guide"}
    outputs = []
    ran = 0
    for kind, text in blocks():
        if kind == "python":
            with contextlib.redirect_stdout(io.StringIO()):
                exec(compile(text, f"{GUIDE.name}:python block", "exec"), namespace)
            ran += 1
        elif kind == "toml":
            m = re.match(r"#\s*([\w.-]+\.toml)\b", text)
            if m:
                Path(m.group(1)).write_text(text)
        elif kind == "sh":
            for line in commands(text):
                outputs.append((line, run_command(line)))
                ran += 1
    assert ran >= 20
    # the files the examples say they write exist and are what they claim
    for name in ("first.h5", "grid.toml", "template.toml", "fe_stages.png", "fe_map.png",
                 "fe_u.pdf", "pe.png", "ar2_levels.png", "ca_stages.png"):
        assert (tmp_path / name).stat().st_size > 0, name
    assert (tmp_path / "fe_u.pdf").read_bytes()[:5] == b"%PDF-"
    assert sorted(p.name for p in (tmp_path / "demo-plots").glob("*.png"))
    # the text around the examples promises these answers (Fe II dominates at 5800 K, 1e5)
    state_out = dict(outputs)["sahaboltz state -T 5800 --gas-pressure 1e5 --dominant-only"]
    assert re.search(r"^Fe\s+Fe II\s", state_out, re.M)
    # the structure example wrote one row per depth with the columns it names
    import csv
    rows = list(csv.DictReader(ln for ln in (tmp_path / "populations.csv").open()
                               if not ln.startswith("#")))
    assert [r["depth"] for r in rows] == ["1", "2", "3", "4"]
    assert {"fraction_Fe_II", "number_density_Ca_II_cm-3",
            "population_Fe_I_L2_cm-3"} <= set(rows[0])
    assert float(rows[0]["gas_pressure_dyn_cm-2"]) == 1e3          # 1e2 Pa
    # the spec-file build made a table with what grid.toml asks for
    built = dict(outputs)["sahaboltz table build grid.toml --no-progress"]
    path = Path(built.split()[-1])
    with h5py.File(path, "r") as f:
        assert f["temperature"].size == 31 and f["gas_pressure"].size == 9
        assert "Fe II" in list(f["partition_species"].asstr()[:])
        species = list(f["species"].asstr()[:])
        assert "Ca II" in species and "O I" not in species


def test_c_and_fortran_examples_read_the_guides_table(tmp_path, monkeypatch):
    """The C/Fortran examples are the programs tests/test_tables_readers.py compiles and runs,
    and what the guide runs them on exists in the table the guide builds."""
    readers = Path(__file__).resolve().parent / "readers"
    for kind, name in (("c", "read_table.c"), ("fortran", "read_table.f90")):
        (text,) = [t for k, t in blocks(kind)]
        assert text == (readers / name).read_text(), f"the guide's {kind} example is not {name}"
    monkeypatch.chdir(tmp_path)
    build = [ln for _, t in blocks("sh") for ln in commands(t) if " -o first.h5" in ln]
    assert len(build) == 1
    run_command(build[0])
    runs = re.findall(r"\./read_table (\S+) (\w+) (\w+) \"([^\"]+)\"", GUIDE.read_text())
    assert runs
    with h5py.File(tmp_path / "first.h5", "r") as f:
        for file, var, coord, label in runs:
            assert file == "first.h5" and var in f and coord in f
            assert label in list(f[coord].asstr()[:])
            # the layout the text describes: (rows, nT, nP), temperature before pressure
            assert f[var].shape == (f[coord].size, f["temperature"].size, f["gas_pressure"].size)


def test_guide_links_resolve():
    text = GUIDE.read_text()
    links = re.findall(r"\]\(([^)#\s]+\.md)\)", text)
    assert "table_format.md" in links
    for link in links:
        assert (GUIDE.parent / link).is_file(), f"guide links to missing {link}"
    anchors = re.findall(r"\]\(#([a-z0-9-]+)\)", text)
    headings = {re.sub(r"[^a-z0-9 -]", "", h.lower()).replace(" ", "-")
                for h in re.findall(r"^## (.+)$", text, re.M)}
    for a in anchors:
        assert a in headings, f"guide links to missing section #{a}"
