"""Populations along a model structure: ``sahaboltz state --from FILE``.

A structure file is a table with one row per depth (or time, or position): a temperature
column and one pressure-like column (gas pressure, electron pressure, mass density, hydrogen
or nuclei density), as CSV or as whitespace-separated columns, ``#`` comments allowed.  The
first line that is not a comment is the header; a unit may follow a name in brackets or
parentheses (``T [K]``, ``P_gas (Pa)``, ``rho[kg m-3]``) or be given by ``--temperature-unit``
/ ``--pressure-unit``; without one the documented cgs unit (K, dyn cm-2, g cm-3, cm-3) holds.

Every row is solved at once (one vectorized call of the solver), and the output has one row
per input row: the input columns, n_e, and the chosen species' fractions, number densities
and level populations.
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sahaboltz.equilibrium.closures import CLOSURES
from sahaboltz.errors import InputError
from sahaboltz.faces.output import DIGITS
from sahaboltz.quantities import convert, unit_of

#: header names (lower case, without unit) recognised as the temperature column
TEMPERATURE_NAMES = ("t", "temperature", "temp", "t_k", "temperature_k")
#: header names recognised as each pressure-like closure
CLOSURE_NAMES = {
    "gas_pressure": ("p", "p_gas", "pgas", "pg", "pressure", "gas_pressure", "p_gas_dyn_cm-2"),
    "electron_pressure": ("p_e", "pe", "electron_pressure"),
    "mass_density": ("rho", "density", "mass_density"),
    "hydrogen_density": ("n_h", "nh", "hydrogen_density"),
    "nuclei_density": ("n_nuc", "nuclei_density"),
}

_UNIT_IN_NAME = re.compile(r"^(.*?)\s*[\[(]\s*(.+?)\s*[\])]\s*$")


@dataclass
class Structure:
    """The rows of a structure file: temperature [K], the closure and its values (cgs), and
    every column as read (for the output)."""

    path: str
    temperature: np.ndarray
    closure: str
    value: np.ndarray
    columns: dict[str, np.ndarray]

    def __len__(self) -> int:
        return self.temperature.size


def _split(line: str, delimiter: str | None) -> list[str]:
    if delimiter == ",":
        return [c.strip() for c in next(csv.reader(io.StringIO(line)))]
    return line.split()


def _numeric(cells: list[str]) -> bool:
    try:
        [float(c) for c in cells]
        return True
    except ValueError:
        return False


def _name_unit(header: str) -> tuple[str, str]:
    m = _UNIT_IN_NAME.match(header)
    return (m.group(1).strip(), m.group(2).strip()) if m else (header.strip(), "")


def read_structure(path: str | Path, *, temperature_column: str | None = None,
                   pressure_column: str | None = None, pressure_quantity: str | None = None,
                   temperature_unit: str | None = None, pressure_unit: str | None = None
                   ) -> Structure:
    """Read a structure file (see the module docstring).

    The columns are found by name (``--temperature-column`` / ``--pressure-column``, or the
    usual names: T, temperature; P, P_gas, pressure; P_e; rho; n_H); the pressure-like
    quantity follows from the name or ``pressure_quantity``.  Raises :class:`InputError`
    naming the file, line and column for anything it cannot read.
    """
    path = Path(path)
    try:
        text = path.read_text()
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"--from {path}: cannot read it "
                         f"({getattr(exc, 'strerror', None) or exc})") from None
    lines = [(n, ln.strip()) for n, ln in enumerate(text.splitlines(), 1)
             if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError(f"--from {path}: no rows (only comments or blank lines)")
    delimiter = "," if "," in lines[0][1] else None
    header = _split(lines[0][1], delimiter)
    if delimiter is None:  # "T [K]" in a whitespace header is one column: its unit follows
        merged: list[str] = []
        for tok in header:
            if merged and tok[:1] in "[(":
                merged[-1] += " " + tok
            else:
                merged.append(tok)
        header = merged
    if _numeric(header):
        raise InputError(f"--from {path}, line {lines[0][0]}: the first line must name the "
                         f"columns (e.g. 'T [K], P_gas [dyn cm-2]')")
    names = [_name_unit(h) for h in header]
    if len({n for n, _ in names}) != len(names):
        raise InputError(f"--from {path}: a column name appears twice in {header}")
    rows = []
    for n, ln in lines[1:]:
        cells = _split(ln, delimiter)
        if len(cells) != len(header):
            raise InputError(f"--from {path}, line {n}: {len(cells)} values for "
                             f"{len(header)} columns")
        try:
            rows.append([float(c) for c in cells])
        except ValueError:
            bad = next(c for c in cells if not _numeric([c]))
            raise InputError(f"--from {path}, line {n}: {bad!r} is not a number") from None
    if not rows:
        raise InputError(f"--from {path}: a header but no rows of values")
    data = np.array(rows, dtype=float)
    columns = {name: data[:, k] for k, (name, _) in enumerate(names)}
    units = {name: unit for name, unit in names}

    t_name = _find(path, names, temperature_column, TEMPERATURE_NAMES, "--temperature-column",
                   "temperature")
    if pressure_column is not None:
        p_name = _find(path, names, pressure_column, (), "--pressure-column", "pressure")
        quantity = pressure_quantity or _quantity_of(p_name) or "gas_pressure"
    else:
        found = [(n, q) for n, _ in names for q in [_quantity_of(n)] if q and n != t_name]
        if pressure_quantity is not None:
            found = [(n, q) for n, q in found if q == pressure_quantity] or found
        if not found:
            raise InputError(f"--from {path}: no pressure-like column among "
                             f"{[n for n, _ in names]}; name it with --pressure-column "
                             f"(and --pressure-quantity)")
        if len(found) > 1:
            raise InputError(f"--from {path}: several pressure-like columns "
                             f"{[n for n, _ in found]}; choose one with --pressure-column")
        p_name, quantity = found[0][0], pressure_quantity or found[0][1]
    if quantity not in CLOSURES:
        raise InputError(f"--pressure-quantity must be one of {', '.join(CLOSURES)}, "
                         f"got {quantity!r}")
    t = _in_unit(path, columns[t_name], units[t_name] or temperature_unit, "K", t_name,
                 "--temperature-unit")
    p = _in_unit(path, columns[p_name], units[p_name] or pressure_unit, CLOSURES[quantity].unit,
                 p_name, "--pressure-unit")
    for name, v in ((t_name, t), (p_name, p)):
        bad = ~(np.isfinite(v) & (v > 0))
        if bad.any():
            k = int(np.flatnonzero(bad)[0])
            raise InputError(f"--from {path}: column {name!r} must be positive and finite; "
                             f"row {k + 1} has {columns[name][k]:g}")
    return Structure(str(path), t, quantity, p, columns)


def _find(path, names, wanted, usual, option, what) -> str:
    plain = [n for n, _ in names]
    if wanted is not None:
        if wanted not in plain:
            raise InputError(f"{option} {wanted!r}: {path} has the columns {plain}")
        return wanted
    hits = [n for n in plain if n.lower() in usual]
    if len(hits) != 1:
        raise InputError(f"--from {path}: {'no' if not hits else 'more than one'} {what} "
                         f"column among {plain}; name it with {option}")
    return hits[0]


def _quantity_of(name: str) -> str | None:
    low = name.lower()
    for quantity, aliases in CLOSURE_NAMES.items():
        if low in aliases:
            return quantity
    return None


def _in_unit(path, values, given: str | None, unit: str, column: str, option: str) -> np.ndarray:
    if not given or given == unit:
        return values
    try:
        return convert(values, unit_of(given, unit, f"column {column!r}"), unit)
    except InputError as exc:
        raise InputError(f"--from {path}: {exc} ({option} sets it when the header has none)"
                         ) from None


def structure_rows(structure: Structure, state, species: list[str],
                   levels: list[tuple[str, tuple[int, ...]]]) -> tuple[list[str], dict]:
    """The output columns: the input ones, n_e and, per species, fraction, number density
    and the chosen level populations; returns (column names, name -> array)."""
    out: dict[str, np.ndarray] = {}
    for name, v in structure.columns.items():
        out[name] = v
    out["temperature_K"] = structure.temperature
    unit = CLOSURES[structure.closure].unit.replace(" ", "_")
    given = f"{structure.closure}_{unit}"
    out[given] = structure.value
    out["n_e_cm-3"] = state.n_e
    for key, value in (("electron_pressure_dyn_cm-2", state.electron_pressure),
                       ("gas_pressure_dyn_cm-2", state.gas_pressure),
                       ("mass_density_g_cm-3", state.mass_density)):
        if key != given:  # the given column stays as given (the solved one equals it to 1e-12)
            out[key] = value
    for sp in species:
        key = sp.replace(" ", "_")
        out[f"fraction_{key}"] = state.fraction(sp)
        out[f"number_density_{key}_cm-3"] = state.number_density(sp)
    for sp, idx in levels:
        pops, _ = state.level_populations(sp)
        key = sp.replace(" ", "_")
        for i in idx:
            if i >= pops.shape[0]:
                raise InputError(f"--levels {sp}:{i}: {sp} has {pops.shape[0]} levels in its "
                                 f"partition function (0-{pops.shape[0] - 1})")
            out[f"population_{key}_L{i}_cm-3"] = pops[i]
    return list(out), out


def write_structure(path: str | Path, names: list[str], columns: dict, meta: dict) -> Path:
    """Write the rows to ``path``: ``.csv``, ``.json`` or ``.h5`` / ``.hdf5`` by suffix."""
    import json
    import os

    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".csv", ".json", ".h5", ".hdf5"):
        raise InputError(f"-o/--output {path}: the suffix must be .csv, .json, .h5 or .hdf5")
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        if suffix == ".csv":
            with open(tmp, "w", newline="") as fh:
                for k, v in meta.items():
                    fh.write(f"# {k}: {v}\n")
                w = csv.writer(fh, lineterminator="\n")
                w.writerow(names)
                for r in range(len(columns[names[0]])):
                    w.writerow([f"{float(columns[n][r]):.{DIGITS}g}" for n in names])
        elif suffix == ".json":
            rows = [{n: float(f"{float(columns[n][r]):.{DIGITS}g}") for n in names}
                    for r in range(len(columns[names[0]]))]
            tmp.write_text(json.dumps({**meta, "rows": rows}, indent=1) + "\n")
        else:
            import h5py
            with h5py.File(tmp, "w") as f:
                for k, v in meta.items():
                    f.attrs[k] = str(v)
                for n in names:
                    f.create_dataset(n, data=np.asarray(columns[n], dtype=float))
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


__all__ = ["read_structure", "structure_rows", "write_structure", "Structure"]
