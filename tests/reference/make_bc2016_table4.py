"""Convert Barklem & Collet (2016) table 4 into tests/reference/bc2016_table4_ionization.csv.

Run from the repository root with the raw sources next to the checkout:
    python tests/reference/make_bc2016_table4.py
The output is committed so that the tests run without the raw sources.
"""

from pathlib import Path

from sahaboltz.data.paths import shared_data_dir

HEADER = """# First three ionization energies [eV] for H-U, from Barklem & Collet (2016), A&A 588, A96,
# table 4 (their source: CRC Handbook of Chemistry and Physics, Haynes 2010). BSD-3 licence.
# Converted by tests/reference/make_bc2016_table4.py; -1 in the source (no such stage) is left out.
Z,symbol,stage,ionization_energy_eV
"""


def main() -> None:
    src = shared_data_dir()
    if src is None:
        raise SystemExit("raw sources not found next to the checkout")
    rows = []
    for line in (src / "bc2016" / "table4.dat").read_text().splitlines():
        if not line.strip() or line.lstrip().startswith("*"):
            continue
        z, sym, *ies = line.split()
        for stage, ie in enumerate(ies, start=1):
            if float(ie) > 0:
                rows.append(f"{int(z)},{sym},{stage},{ie}")
    out = Path(__file__).with_name("bc2016_table4_ionization.csv")
    out.write_text(HEADER + "\n".join(rows) + "\n")
    print(f"wrote {out} ({len(rows)} values)")


if __name__ == "__main__":
    main()
