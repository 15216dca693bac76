"""Convert Barklem & Collet (2016) table 8 (vNov2022) into tests/reference/bc2016_table8_partition.csv.

Source: Barklem, P. S. & Collet, R. 2016, A&A 588, A96, "Partition functions and equilibrium
constants for diatomic molecules and atoms of astrophysical interest", table8_vNov2022.dat
(atomic partition functions after the Oct-Nov 2022 J-parsing fix), BSD-3 licence.

The source file (fixed format, see its ReadMe): one header line, the number of species, a line
"T [K]" with 42 temperatures, a blank line, then one line per species: the name (e.g. "Fe_II")
in bytes 2-7 and 42 partition functions in 42(3x,E11.4).

We keep temperatures 1,000 K <= T <= 10,000 K (the range our test checks) and write a long
table: species (spectroscopic notation "Fe II"; negative ions as "H-"), T_K, U.

Usage:  python tests/reference/make_bc2016_table8_partition.py [path/to/table8_vNov2022.dat]
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
OUT = HERE / "bc2016_table8_partition.csv"
T_MIN, T_MAX = 1000.0, 10000.0


def read_table8(path: Path) -> tuple[list[float], dict[str, list[float]]]:
    lines = path.read_text().splitlines()
    n_species = int(lines[1].split()[0])
    t_line = lines[2]
    if not t_line.lstrip().startswith("T [K]"):
        raise ValueError(f"{path}: line 3 should hold the temperatures, got {t_line[:20]!r}")
    temps = [float(v) for v in t_line[7:].split()]
    table: dict[str, list[float]] = {}
    for line in lines[3:]:
        if not line.strip():
            continue
        name = line[1:7].strip()
        values = [float(line[7 + 14 * i + 3: 7 + 14 * (i + 1)]) for i in range(len(temps))]
        # "Fe_II" -> "Fe II"; negative ions ("H-", "S-") keep their charge notation
        table[name.replace("_", " ")] = values
    if len(table) != n_species:
        raise ValueError(f"{path}: header says {n_species} species, found {len(table)}")
    return temps, table


def main(argv: list[str]) -> int:
    if argv:
        src = Path(argv[0])
    else:
        src = HERE.parents[2] / "shared" / "data" / "bc2016" / "table8_vNov2022.dat"
    temps, table = read_table8(src)
    keep = [i for i, t in enumerate(temps) if T_MIN <= t <= T_MAX]
    rows = ["# Partition functions of atoms and ions, 1,000-10,000 K.",
            "# Source: Barklem, P. S. & Collet, R. 2016, A&A 588, A96, table 8, version vNov2022",
            "# (table8_vNov2022.dat, after the Oct-Nov 2022 J-parsing fix); BSD-3 licence.",
            "# Converted by tests/reference/make_bc2016_table8_partition.py; values as published.",
            "species,T_K,U"]
    for name, values in table.items():
        for i in keep:
            rows.append(f"{name},{temps[i]:.1f},{values[i]:.5e}")
    fd, tmp = tempfile.mkstemp(dir=HERE, suffix=".tmp")
    with os.fdopen(fd, "w") as fh:
        fh.write("\n".join(rows) + "\n")
    os.replace(tmp, OUT)
    print(f"wrote {OUT} ({len(table)} species x {len(keep)} temperatures)")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
