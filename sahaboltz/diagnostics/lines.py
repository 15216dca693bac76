"""Measured emission lines: the input of every diagnostic, and its CSV file format.

A line list is a CSV file (comma separated, one header row, ``#`` starts a comment line) with
these columns, in any order:

================== ========= =================================================================
column             required  meaning
================== ========= =================================================================
species            yes       emitting species, e.g. ``Fe I`` or ``Fe+`` (any notation the
                             species database reads)
wavelength_nm      yes       wavelength [nm] (air or vacuum: it only enters the ratio of photon
                             energies, where the difference is below 3e-4)
intensity          yes       integrated line intensity, any one scale for the whole file,
                             corrected for the spectral response; energy units (radiance) by
                             default, photon counts when the diagnostic is told so
intensity_error    yes       1-sigma uncertainty of ``intensity`` (same scale)
upper_energy_eV    one of    energy of the upper level above the ground level of its species
upper_energy_cm-1  the two   [eV], or as a wavenumber [cm^-1]; give exactly one of the columns
upper_g            yes       statistical weight g = 2J + 1 of the upper level
A_s-1              yes       transition probability A [s^-1]
A_rel_error        no        relative 1-sigma uncertainty of A (0.1 = 10 %); default 0
lower_energy_eV    no        energy of the lower level [eV] (or ``lower_energy_cm-1``); used
                             only to recognise resonance lines (self-absorption check)
label              no        free text (e.g. a line identifier) carried into the output
================== ========= =================================================================

Empty cells in optional columns mean "not given".  Every problem is reported as a
:class:`~sahaboltz.errors.DataFormatError` naming the file and the line.
"""

from __future__ import annotations

import csv
import io
import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np

from sahaboltz.constants import HC_EV_CM
from sahaboltz.data.elements import parse_species, spectroscopic_name
from sahaboltz.errors import DataFormatError, InputError, SahaboltzError

__all__ = ["LineList", "read_lines", "write_lines", "REQUIRED_COLUMNS", "OPTIONAL_COLUMNS"]

REQUIRED_COLUMNS = ("species", "wavelength_nm", "intensity", "intensity_error", "upper_g", "A_s-1")
ENERGY_COLUMNS = ("upper_energy_eV", "upper_energy_cm-1")
OPTIONAL_COLUMNS = ("A_rel_error", "lower_energy_eV", "lower_energy_cm-1", "label")


@dataclass(frozen=True)
class LineList:
    """A checked list of emission lines (arrays of equal length).

    Attributes
    ----------
    species : ndarray of str
        Spectroscopic names ("Fe I").
    z, charge : ndarray of int
        Atomic number and charge of the emitter.
    wavelength_nm, intensity, intensity_error, upper_energy_ev, upper_g, a_value, a_rel_error
        As the CSV columns (energies in eV, A in s^-1).
    lower_energy_ev : ndarray
        Lower-level energy [eV]; NaN where not given (only ever read through ``has_lower``).
    label : ndarray of str
    origin : ndarray of str
        Where each line came from ("file.csv:12" or "row 3").
    """

    species: np.ndarray
    z: np.ndarray
    charge: np.ndarray
    wavelength_nm: np.ndarray
    intensity: np.ndarray
    intensity_error: np.ndarray
    upper_energy_ev: np.ndarray
    upper_g: np.ndarray
    a_value: np.ndarray
    a_rel_error: np.ndarray
    lower_energy_ev: np.ndarray
    label: np.ndarray
    origin: np.ndarray = field(default=None)

    # -- construction ------------------------------------------------------------------------
    @classmethod
    def from_arrays(cls, *, species: Sequence[str] | str, wavelength_nm: Any, intensity: Any,
                    intensity_error: Any, upper_energy_ev: Any, upper_g: Any, a_value: Any,
                    a_rel_error: Any = 0.0, lower_energy_ev: Any = None,
                    label: Sequence[str] | None = None,
                    origin: Sequence[str] | None = None) -> "LineList":
        """Build a checked line list from arrays (a single species name applies to all).

        Raises
        ------
        InputError
            A value out of range, arrays of different lengths, an unknown species.
        """
        n = len(np.atleast_1d(np.asarray(intensity)))
        where = list(origin) if origin is not None else [f"row {i + 1}" for i in range(n)]
        names = [species] * n if isinstance(species, str) else list(species)
        cols = {"wavelength_nm": wavelength_nm, "intensity": intensity,
                "intensity_error": intensity_error, "upper_energy_ev": upper_energy_ev,
                "upper_g": upper_g, "a_value": a_value, "a_rel_error": a_rel_error,
                "lower_energy_ev": np.nan if lower_energy_ev is None else lower_energy_ev}
        arrs = {}
        for k, v in cols.items():
            a = np.asarray(v, dtype=float)
            if a.ndim > 1:
                raise InputError(f"{k} must be one-dimensional, got shape {a.shape}")
            a = np.broadcast_to(np.atleast_1d(a), (n,)).astype(float) if a.size == 1 else a
            if a.shape != (n,):
                raise InputError(f"{k} has {a.size} values but intensity has {n}")
            arrs[k] = a
        if len(names) != n or len(where) != n:
            raise InputError(f"species / origin must have one entry per line ({n})")
        labels = np.array(list(label) if label is not None else [""] * n, dtype=object)
        if labels.shape != (n,):
            raise InputError(f"label must have one entry per line ({n})")
        if n == 0:
            raise InputError("the line list is empty")
        zc = []
        for name, w in zip(names, where):
            try:
                zc.append(parse_species(str(name)))
            except SahaboltzError as exc:
                raise InputError(f"{w}: species: {exc}") from None
        z = np.array([p[0] for p in zc], dtype=int)
        ch = np.array([p[1] for p in zc], dtype=int)
        for i in range(n):
            _check_line(where[i], ch[i], {k: arrs[k][i] for k in arrs}, InputError)
        return cls(species=np.array([spectroscopic_name(a, b) for a, b in zc], dtype=object),
                   z=z, charge=ch, label=labels, origin=np.array(where, dtype=object), **arrs)

    # -- views -------------------------------------------------------------------------------
    def __len__(self) -> int:
        return int(self.intensity.size)

    @property
    def has_lower(self) -> np.ndarray:
        """Mask of the lines whose lower-level energy was given."""
        return np.isfinite(self.lower_energy_ev)

    @property
    def species_names(self) -> list[str]:
        """Distinct species, in order of first appearance."""
        return list(dict.fromkeys(self.species.tolist()))

    def select(self, mask_or_index: Any) -> "LineList":
        """The lines picked by a boolean mask or an index array (a new LineList)."""
        idx = np.asarray(mask_or_index)
        if idx.dtype == bool and idx.shape != (len(self),):
            raise InputError(f"mask has shape {idx.shape}, the line list has {len(self)} lines")
        vals = {f: getattr(self, f)[idx] for f in self.__dataclass_fields__}
        if np.size(vals["intensity"]) == 0:
            raise InputError("the selection contains no line")
        return LineList(**vals)

    def of_species(self, species: str) -> "LineList":
        """The lines of one species (any notation)."""
        z, ch = parse_species(species)
        mask = (self.z == z) & (self.charge == ch)
        if not mask.any():
            raise InputError(f"no line of {spectroscopic_name(z, ch)} in the line list; it "
                             f"holds {', '.join(self.species_names)}")
        return self.select(mask)

    def with_intensity(self, intensity: Any, intensity_error: Any) -> "LineList":
        """A copy with new intensities (e.g. from the forward model)."""
        return LineList.from_arrays(
            species=list(self.species), wavelength_nm=self.wavelength_nm, intensity=intensity,
            intensity_error=intensity_error, upper_energy_ev=self.upper_energy_ev,
            upper_g=self.upper_g, a_value=self.a_value, a_rel_error=self.a_rel_error,
            lower_energy_ev=self.lower_energy_ev, label=list(self.label), origin=list(self.origin))

    def to_rows(self) -> list[dict]:
        """One dict per line, keyed by the CSV column names."""
        rows = []
        for i in range(len(self)):
            row = {"species": self.species[i], "wavelength_nm": float(self.wavelength_nm[i]),
                   "intensity": float(self.intensity[i]),
                   "intensity_error": float(self.intensity_error[i]),
                   "upper_energy_eV": float(self.upper_energy_ev[i]),
                   "upper_g": float(self.upper_g[i]), "A_s-1": float(self.a_value[i]),
                   "A_rel_error": float(self.a_rel_error[i]),
                   "lower_energy_eV": (float(self.lower_energy_ev[i]) if self.has_lower[i]
                                       else None),
                   "label": self.label[i]}
            rows.append(row)
        return rows


# names of the internal fields as the CSV calls them, for messages
_SHOWN = {"a_value": "A_s-1", "a_rel_error": "A_rel_error", "upper_energy_ev": "upper energy [eV]",
          "lower_energy_ev": "lower energy [eV]"}


def _check_line(where: str, charge: int, v: dict, error) -> None:
    """Range checks of one line; ``error`` is the exception class to raise."""
    def bad(col, why):
        raise error(f"{where}: {_SHOWN.get(col, col)} = {v[col]!r} {why}")
    for col in ("wavelength_nm", "intensity", "intensity_error", "upper_g", "a_value"):
        if not np.isfinite(v[col]):
            bad(col, "is not a finite number")
        if v[col] <= 0:
            bad(col, "must be positive (a line with zero intensity cannot enter a log plot; "
                     "drop it)" if col == "intensity" else "must be positive")
    if not np.isfinite(v["upper_energy_ev"]) or v["upper_energy_ev"] < 0:
        bad("upper_energy_ev", "must be a finite energy >= 0 above the ground level")
    if not np.isfinite(v["a_rel_error"]) or v["a_rel_error"] < 0:
        bad("a_rel_error", "must be >= 0 (a relative uncertainty, 0.1 = 10 %)")
    low = v["lower_energy_ev"]
    if np.isfinite(low) and not (0 <= low < v["upper_energy_ev"]):
        bad("lower_energy_ev", f"must be >= 0 and below the upper energy "
                               f"{v['upper_energy_ev']:.6g} eV")
    if charge < 0:
        raise error(f"{where}: negative ions are not supported as line emitters")


def _number(text: str, col: str, where: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise DataFormatError(f"{where}: column {col}: {text!r} is not a number") from None


def read_lines(path: str | os.PathLike) -> LineList:
    """Read a line-list CSV file (format in the module docstring).

    Raises
    ------
    DataFormatError
        Missing or duplicated columns, unreadable numbers, values out of range, an unknown
        species; the message names the file and the line.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise DataFormatError(f"cannot read line list {path}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise DataFormatError(f"{path}: not a UTF-8 text file") from None
    numbered = [(i + 1, ln) for i, ln in enumerate(text.splitlines())
                if ln.strip() and not ln.lstrip().startswith("#")]
    if not numbered:
        raise DataFormatError(f"{path}: no header row (the file is empty or all comments)")
    reader = csv.reader(io.StringIO("\n".join(ln for _, ln in numbered)))
    rows = list(reader)
    header = [h.strip() for h in rows[0]]
    hline = numbered[0][0]
    dup = {h for h in header if header.count(h) > 1}
    if dup:
        raise DataFormatError(f"{path}:{hline}: column(s) {', '.join(sorted(dup))} appear twice")
    known = set(REQUIRED_COLUMNS) | set(ENERGY_COLUMNS) | set(OPTIONAL_COLUMNS)
    unknown = [h for h in header if h not in known]
    if unknown:
        raise DataFormatError(f"{path}:{hline}: unknown column(s) {', '.join(unknown)}; the "
                              f"columns are {', '.join(REQUIRED_COLUMNS + ENERGY_COLUMNS)} and "
                              f"optionally {', '.join(OPTIONAL_COLUMNS)}")
    missing = [c for c in REQUIRED_COLUMNS if c not in header]
    if missing:
        raise DataFormatError(f"{path}:{hline}: missing column(s) {', '.join(missing)}")
    ecols = [c for c in ENERGY_COLUMNS if c in header]
    if len(ecols) != 1:
        raise DataFormatError(f"{path}:{hline}: give exactly one of the columns "
                              f"{' and '.join(ENERGY_COLUMNS)} (found {len(ecols)})")
    lcols = [c for c in ("lower_energy_eV", "lower_energy_cm-1") if c in header]
    if len(lcols) > 1:
        raise DataFormatError(f"{path}:{hline}: give at most one of lower_energy_eV and "
                              "lower_energy_cm-1")
    if len(rows) < 2:
        raise DataFormatError(f"{path}: the header is not followed by any line")
    col = {h: k for k, h in enumerate(header)}
    out = {k: [] for k in ("species", "wavelength_nm", "intensity", "intensity_error",
                           "upper_energy_ev", "upper_g", "a_value", "a_rel_error",
                           "lower_energy_ev", "label", "origin", "z", "charge")}
    for (lineno, _), cells in zip(numbered[1:], rows[1:]):
        where = f"{path}:{lineno}"
        if len(cells) != len(header):
            raise DataFormatError(f"{where}: {len(cells)} cells, the header has {len(header)}")
        cells = [c.strip() for c in cells]
        get = lambda c: cells[col[c]] if c in col else ""  # noqa: E731
        for c in REQUIRED_COLUMNS + (ecols[0],):
            if get(c) == "":
                raise DataFormatError(f"{where}: column {c} is empty")
        try:
            z, charge = parse_species(get("species"))
        except SahaboltzError as exc:
            raise DataFormatError(f"{where}: species: {exc}") from None
        to_ev = (lambda x: x) if ecols[0].endswith("eV") else (lambda x: x * HC_EV_CM)
        v = {"wavelength_nm": _number(get("wavelength_nm"), "wavelength_nm", where),
             "intensity": _number(get("intensity"), "intensity", where),
             "intensity_error": _number(get("intensity_error"), "intensity_error", where),
             "upper_energy_ev": to_ev(_number(get(ecols[0]), ecols[0], where)),
             "upper_g": _number(get("upper_g"), "upper_g", where),
             "a_value": _number(get("A_s-1"), "A_s-1", where),
             "a_rel_error": _number(get("A_rel_error"), "A_rel_error", where)
             if get("A_rel_error") else 0.0,
             "lower_energy_ev": np.nan}
        if lcols and get(lcols[0]):
            low = _number(get(lcols[0]), lcols[0], where)
            v["lower_energy_ev"] = low if lcols[0].endswith("eV") else low * HC_EV_CM
        _check_line(where, charge, v, DataFormatError)
        for k, x in v.items():
            out[k].append(x)
        out["species"].append(spectroscopic_name(z, charge))
        out["z"].append(z)
        out["charge"].append(charge)
        out["label"].append(get("label"))
        out["origin"].append(where)
    return LineList(species=np.array(out["species"], dtype=object),
                    z=np.array(out["z"], dtype=int), charge=np.array(out["charge"], dtype=int),
                    label=np.array(out["label"], dtype=object),
                    origin=np.array(out["origin"], dtype=object),
                    **{k: np.array(out[k], dtype=float) for k in
                       ("wavelength_nm", "intensity", "intensity_error", "upper_energy_ev",
                        "upper_g", "a_value", "a_rel_error", "lower_energy_ev")})


def write_lines(path: str | os.PathLike, lines: LineList, header_comments: Iterable[str] = ()) -> None:
    """Write a line list as CSV (energies in eV); atomic: a failed write leaves no half file."""
    path = Path(path)
    cols = list(REQUIRED_COLUMNS[:4]) + ["upper_energy_eV", "upper_g", "A_s-1", "A_rel_error",
                                         "lower_energy_eV", "label"]
    buf = io.StringIO()
    for c in header_comments:
        buf.write(f"# {c}\n")
    w = csv.DictWriter(buf, fieldnames=cols, lineterminator="\n")
    w.writeheader()
    for row in lines.to_rows():
        row = {k: ("" if v is None else (repr(v) if isinstance(v, float) else v))
               for k, v in row.items()}
        w.writerow(row)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(buf.getvalue())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
