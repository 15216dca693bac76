"""Build level_data from NIST Atomic Spectra Database exports.

Run as::

    python -m sahaboltz.data.nist_import all  [--source DIR] [--out DIR] [--build-date YYYY-MM-DD]
    python -m sahaboltz.data.nist_import species FILE --species "Fe II" [--out DIR]
                                                 [--ionization-energy EV [--uncertainty EV]]

``all`` rebuilds the whole of level_data for Z = 1-92 from the NIST sources (``--source``
defaults to ../shared/data next to the checkout).  ``species`` replaces one species with a NIST
export of your own, keeping everything else.  Output goes to a temporary directory first and is
moved into place only when complete, so a failure never leaves a partial level_data.

Running ``all`` again on the same input with the same ``--build-date`` reproduces level_data
byte for byte (the build date is the only varying field, and it lives in MANIFEST.txt only).
"""

from __future__ import annotations

import argparse
import datetime as _dt
import hashlib
import os
import re
import shutil
import sys
import tempfile
from collections import Counter
from pathlib import Path

from sahaboltz._version import __version__
from sahaboltz.constants import AMU, HC_EV_CM, M_E, RYDBERG_CM
from sahaboltz.data import levelfile
from sahaboltz.data.elements import SYMBOLS, parse_species, spectroscopic_name
from sahaboltz.data.nist_parse import (DROP_REASONS, ElementMass, IonizationEnergy,
                                       ParsedSpectrum, parse_atomic_weights,
                                       parse_ionization_energies, parse_level_export,
                                       species_of_file)
from sahaboltz.data.paths import level_data_dir, shared_data_dir
from sahaboltz.errors import DataFormatError, InputError

#: highest atomic number imported
Z_MAX = 92
#: hydrogen-like ions get Rydberg levels up to max(this, highest n in the source)
HYDROGENIC_N_MIN = 10

LEVELS_SOURCE = "NIST Atomic Spectra Database, energy levels (tab-separated exports)"
IE_SOURCE = "NIST Atomic Spectra Database, ionization energies (ionization_energies.csv)"
WEIGHTS_SOURCE = "NIST Atomic Weights and Isotopic Compositions (weights.csv)"
COMMENTS = [
    f"levels: {LEVELS_SOURCE}; compilation MIT licence, data by NIST",
    f"ionization energies: {IE_SOURCE}",
    "hydrogen-like ions: E_n = R_inf Z^2 (mu / m_e) (1 - 1/n^2), g = 2 n^2, nuclear mass of the",
    f"  most abundant isotope from {WEIGHTS_SOURCE}",
    f"written by the sahaboltz importer (sahaboltz.data.nist_import); do not edit by hand",
]


def hydrogenic_levels(z: int, mass: ElementMass, n_max: int) -> list[tuple[str, ...]]:
    """Rydberg-formula levels of the one-electron ion of element ``z`` (rows of level_data)."""
    nucleus_u = mass.main_isotope_mass - z * M_E / AMU
    reduced = 1.0 / (1.0 + (M_E / AMU) / nucleus_u)
    rows = []
    for n in range(1, n_max + 1):
        e = RYDBERG_CM * z * z * reduced * (1.0 - 1.0 / (n * n))
        rows.append((f"{e:.6f}", str(2 * n * n), "h", "", str(n), ""))
    return rows


def _max_n(spec: ParsedSpectrum) -> int:
    ns = [int(m.group(1)) for lv in spec.levels if (m := re.match(r"^(\d+)", lv.configuration))]
    return max(ns, default=0)


def species_section(z: int, charge: int, spec: ParsedSpectrum | None,
                    ie: IonizationEnergy | None, mass: ElementMass,
                    levels_source: str | None = None) -> levelfile.Section:
    """One level_data section from a parsed export and its ionization energy."""
    header: dict[str, str] = {"Z": str(z), "charge": str(charge)}
    header["ionization_energy_eV"] = ie.text if ie else ""
    header["ionization_energy_uncertainty_eV"] = (
        "" if ie is None or ie.uncertainty_ev is None else repr(ie.uncertainty_ev))
    header["ionization_energy_note"] = ie.note if ie else "no value in the source"
    header["ionization_energy_source"] = IE_SOURCE if ie else ""
    rows: list[tuple[str, ...]] = []
    dropped = Counter()
    if spec is not None:
        header["levels_source"] = levels_source or (
            f"NIST ASD energy levels ({Path(spec.path).name})")
        limit = spec.limits_cm[0] if spec.limits_cm else None
        header["limits_cm-1"] = " ".join(_num(x) for x in spec.limits_cm)
        header["rows_read"] = str(spec.rows_read)
        dropped.update(spec.dropped)
        if z - charge == 1:
            dropped["hydrogenic_replaced"] += len(spec.levels)
            rows = hydrogenic_levels(z, mass, max(_max_n(spec), HYDROGENIC_N_MIN))
            header["levels_source"] += "; levels from the Rydberg formula (reduced mass)"
        else:
            if limit is None and ie is not None:
                limit = ie.value_ev / HC_EV_CM
            for lv in spec.levels:
                flags = lv.flags + ("a" if limit is not None and lv.energy_cm > limit else "")
                rows.append((lv.energy_text, levelfile.format_g(lv.g), flags or "-", lv.j,
                             lv.configuration, lv.term))
        ignored = spec.ignored_suffix_codes
        header["rows_dropped"] = " ".join(f"{k}:{dropped[k]}" for k in DROP_REASONS if dropped[k])
        if ignored:
            header["suffix_codes_not_used"] = " ".join(f"{k}:{v}" for k, v in sorted(ignored.items()))
    else:
        header["levels_source"] = "none: the source has no level list for this species"
    header["levels"] = str(len(rows))
    sec = levelfile.Section(spectroscopic_name(z, charge), header, rows)
    return sec


def _num(x: float) -> str:
    return repr(float(x)).rstrip("0").rstrip(".") if "e" not in repr(float(x)) else repr(float(x))


def element_file_name(z: int) -> str:
    return f"{z:03d}_{SYMBOLS[z]}.txt"


def _collect_exports(levels_dir: Path) -> dict[tuple[int, int], Path]:
    found: dict[tuple[int, int], Path] = {}
    for path in sorted(levels_dir.glob("*.dat")):
        key = species_of_file(path)
        if key in found:
            raise DataFormatError(f"{path}: duplicated species {spectroscopic_name(*key)} "
                                  f"(also in {found[key].name})")
        found[key] = path
    if not found:
        raise DataFormatError(f"{levels_dir}: no NIST energy-level exports (*.dat) found")
    return found


def render_elements(masses: dict[int, ElementMass]) -> str:
    lines = ["# sahaboltz element data, format 1",
             f"# source: {WEIGHTS_SOURCE}",
             "# standard_weight_u: standard atomic weight (midpoint of an interval; mass number",
             "#   of the reference isotope where the element has no stable isotope)",
             "# main_isotope: mass number of the most abundant isotope; main_isotope_mass_u: its",
             "#   atomic mass (used for reduced masses of hydrogen-like ions)",
             "Z\tsymbol\tstandard_weight_u\tstandard_weight_as_given\tmain_isotope\tmain_isotope_mass_u"]
    for z in sorted(masses):
        if z > Z_MAX:
            continue
        m = masses[z]
        lines.append(f"{z}\t{SYMBOLS[z]}\t{m.standard_weight:.12g}\t{m.weight_text or '-'}\t"
                     f"{m.main_isotope}\t{m.main_isotope_mass!r}")
    return "\n".join(lines) + "\n"


def build_all(source: Path, out: Path, build_date: str, progress=None) -> dict:
    """Write the whole of level_data into ``out`` (atomically); return a summary."""
    levels_dir = source / "nist_asd" / "energy_levels"
    exports = _collect_exports(levels_dir)
    ies = parse_ionization_energies(source / "nist_asd" / "ionisation_energies" /
                                    "ionization_energies.csv")
    masses = parse_atomic_weights(source / "nist_asd" / "atomic_weights" / "weights.csv")
    files: dict[str, str] = {"elements.txt": render_elements(masses)}
    totals = Counter()
    skipped = [p.name for (z, _), p in exports.items() if z > Z_MAX]
    for z in range(1, Z_MAX + 1):
        if progress:
            progress(z)
        sections = []
        for charge in range(z):
            spec = parse_level_export(exports[(z, charge)]) if (z, charge) in exports else None
            ie = ies.get((z, charge))
            if spec is None and ie is None:
                continue
            sec = species_section(z, charge, spec, ie, masses[z])
            sections.append(sec)
            totals["species"] += 1
            totals["levels"] += len(sec.rows)
            totals["rows_read"] += spec.rows_read if spec else 0
            for item in sec.header.get("rows_dropped", "").split():
                reason, count = item.split(":")
                totals[f"dropped.{reason}"] += int(count)
        files[f"atoms/{element_file_name(z)}"] = levelfile.render(SYMBOLS[z], z, sections, COMMENTS)
    inputs = sorted(exports.values()) + [
        source / "nist_asd" / "ionisation_energies" / "ionization_energies.csv",
        source / "nist_asd" / "atomic_weights" / "weights.csv"]
    files["MANIFEST.txt"] = _manifest(files, inputs, source, build_date, totals, skipped)
    _write_tree_atomically(out, files, keep=("molecules", "abundances"))
    return dict(totals)


def _manifest(files, inputs, source, build_date, totals, skipped) -> str:
    h = hashlib.sha256()
    for p in inputs:
        h.update(p.name.encode())
        h.update(p.read_bytes())
    lines = ["# sahaboltz level_data manifest",
             f"build_date = {build_date}",
             f"importer = sahaboltz.data.nist_import (sahaboltz {__version__.split('+')[0]})",
             f"levels_source = {LEVELS_SOURCE}",
             f"ionization_energy_source = {IE_SOURCE}",
             f"weights_source = {WEIGHTS_SOURCE}",
             f"source_files = {len(inputs)}",
             f"source_sha256 = {h.hexdigest()}",
             f"elements = 1-{Z_MAX}",
             f"not_imported = {len(skipped)} exports of elements beyond Z = {Z_MAX}"]
    lines += [f"total.{k} = {v}" for k, v in sorted(totals.items())]
    lines.append("# drop reasons:")
    lines += [f"#   {k}: {v}" for k, v in DROP_REASONS.items()]
    lines.append("# files (sha256):")
    lines += [f"file {name} {hashlib.sha256(text.encode()).hexdigest()}"
              for name, text in sorted(files.items())]
    return "\n".join(lines) + "\n"


def _write_tree_atomically(out: Path, files: dict[str, str], keep: tuple[str, ...] = ()) -> None:
    """Write ``files`` (relative path -> text) as the directory ``out``, all or nothing.

    Subdirectories named in ``keep`` (data owned by other importers) are carried over.
    """
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=".level_data-", dir=out.parent))
    try:
        for name, text in files.items():
            p = tmp / name
            p.parent.mkdir(parents=True, exist_ok=True)
            p.write_text(text, encoding="utf-8")
        for sub in keep:
            if (out / sub).is_dir() and not (tmp / sub).exists():
                shutil.copytree(out / sub, tmp / sub)
        if out.exists():
            old = out.with_name(out.name + ".old-" + str(os.getpid()))
            os.replace(out, old)
            os.replace(tmp, out)
            shutil.rmtree(old)
        else:
            os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def import_species(export: Path, species: str, out: Path, *, ionization_energy: float | None,
                   uncertainty: float | None) -> levelfile.Section:
    """Replace one species in level_data with a NIST export of the user's own."""
    z, charge = parse_species(species)
    if charge < 0 or charge >= z:
        raise InputError(f"--species {species!r}: only atoms and ions with electrons have levels")
    spec = parse_level_export(export)
    if not spec.levels:
        raise DataFormatError(f"{export}: no usable levels in the export")
    path = Path(out) / "atoms" / element_file_name(z)
    _, sections = levelfile.parse(path.read_text(encoding="utf-8"), str(path))
    old = next((s for s in sections if s.name == spectroscopic_name(z, charge)), None)
    if ionization_energy is not None:
        ie = IonizationEnergy(float(ionization_energy), uncertainty, "given by the user",
                              repr(float(ionization_energy)))
    elif old and old.header.get("ionization_energy_eV"):
        unc = old.header.get("ionization_energy_uncertainty_eV")
        ie = IonizationEnergy(float(old.header["ionization_energy_eV"]),
                              float(unc) if unc else None, old.header.get("ionization_energy_note", ""),
                              old.header["ionization_energy_eV"])
    else:
        raise InputError(f"no ionization energy known for {species}: give --ionization-energy")
    masses = {}
    elements_path = Path(out) / "elements.txt"
    for line in elements_path.read_text().splitlines():
        if line and not line.startswith(("#", "Z\t")):
            f = line.split("\t")
            masses[int(f[0])] = ElementMass(int(f[0]), f[1], float(f[2]), f[3], int(f[4]), float(f[5]))
    new = species_section(z, charge, spec, ie, masses[z],
                          levels_source=f"user import of {Path(export).name} "
                                        f"({_dt.date.today().isoformat()})")
    if ionization_energy is None and old:
        new.header["ionization_energy_source"] = old.header.get("ionization_energy_source", "")
    else:
        new.header["ionization_energy_source"] = "given by the user"
    sections = [s for s in sections if s.name != new.name] + [new]
    sections.sort(key=lambda s: int(s.header["charge"]))
    text = levelfile.render(SYMBOLS[z], z, sections, COMMENTS)
    fd, tmp = tempfile.mkstemp(prefix=".import-", dir=path.parent)
    with os.fdopen(fd, "w", encoding="utf-8") as fh:
        fh.write(text)
    os.replace(tmp, path)
    return new


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m sahaboltz.data.nist_import",
                                 description="Build level_data from NIST ASD exports.")
    sub = ap.add_subparsers(dest="what", required=True)
    a = sub.add_parser("all", help="rebuild level_data for Z = 1-92 from the NIST sources")
    a.add_argument("--source", type=Path, default=None, help="source data directory "
                   "(holding nist_asd/); default ../shared/data next to the checkout")
    a.add_argument("--out", type=Path, default=None, help="level_data directory to write")
    a.add_argument("--build-date", default=None,
                   help="date recorded in MANIFEST.txt (default: $SOURCE_DATE_EPOCH or today)")
    s = sub.add_parser("species", help="replace one species with a NIST export of your own")
    s.add_argument("export", type=Path, help="tab-separated NIST ASD energy-level export")
    s.add_argument("--species", required=True, help="which species the file holds, e.g. 'Fe II'")
    s.add_argument("--out", type=Path, default=None, help="level_data directory to update")
    s.add_argument("--ionization-energy", type=float, default=None, help="[eV]; default: keep")
    s.add_argument("--uncertainty", type=float, default=None, help="[eV]")
    args = ap.parse_args(argv)
    from sahaboltz.errors import SahaboltzError
    try:
        out = args.out or level_data_dir()
        if args.what == "all":
            source = args.source or shared_data_dir()
            if source is None:
                raise InputError("no source data found: give --source DIR (the directory holding nist_asd/)")
            date = args.build_date or _default_date()
            totals = build_all(Path(source), Path(out), date,
                               progress=lambda z: print(f"\rimporting Z = {z:3d}/{Z_MAX}", end="",
                                                        file=sys.stderr))
            print(file=sys.stderr)
            print(f"wrote {out}: {totals['species']} species, {totals['levels']} levels "
                  f"from {totals['rows_read']} source rows")
        else:
            sec = import_species(args.export, args.species, Path(out),
                                 ionization_energy=args.ionization_energy,
                                 uncertainty=args.uncertainty)
            print(f"replaced {sec.name} in {out}: {sec.header['levels']} levels "
                  f"(dropped: {sec.header.get('rows_dropped') or 'none'})")
    except SahaboltzError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    return 0


def _default_date() -> str:
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch:
        return _dt.datetime.fromtimestamp(int(epoch), _dt.timezone.utc).date().isoformat()
    return _dt.date.today().isoformat()


if __name__ == "__main__":
    sys.exit(main())
