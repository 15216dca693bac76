"""Reader of tests/reference/bc2016_molecule_check.txt (values from Barklem & Collet 2016)."""

from __future__ import annotations

from pathlib import Path

REFERENCE = Path(__file__).resolve().parent / "reference" / "bc2016_molecule_check.txt"


def load_reference() -> dict[tuple[str, str], dict[float, float]]:
    """{(kind, species): {T: value}} as published (see the file header for the tables)."""
    out: dict[tuple[str, str], dict[float, float]] = {}
    for line in REFERENCE.read_text().splitlines():
        if not line.strip() or line.startswith("#"):
            continue
        kind, species, t, value = line.split()
        out.setdefault((kind, species), {})[float(t)] = float(value)
    return out
