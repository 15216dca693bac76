"""What a format-2 table holds: its variables, their dimensions, units and names.

Every stored quantity is one *variable*: a scalar field with dimensions
``(temperature, <pressure quantity>)``, or a stacked one with a leading label dimension
(``species``, ``molecule``, ``element``, ``level``, ``partition_species``) whose coordinate
names each row.  A compute function returns ``{name: array}``; flat names of one row
(``fraction_Fe_II``, ``population_Fe_II_L3``, ``partition_Fe_I``, ``molecular_fraction_C``,
``number_density_CO``) are stacked into their variable here, so simple compute functions need
not know the layout.  The reader speaks the same flat names (:func:`row_names`).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from sahaboltz.errors import TableError
from sahaboltz.tables.spec import SCALAR_OUTPUTS

FORMAT_NAME = "sahaboltz population table"
#: the table format written and read; part of the cache key (a new layout gets new keys)
FORMAT_VERSION = 2


@dataclass(frozen=True)
class Stacked:
    """A variable with one row per label of ``dim``; ``prefix`` makes the flat row names."""

    name: str
    dim: str
    units: str
    long_name: str
    prefix: str


#: the stacked variables, in file order
STACKED = {v.name: v for v in (
    Stacked("fraction", "species", "1",
            "number fraction of the element's nuclei in this species", "fraction"),
    Stacked("number_density", "species", "cm-3", "number density of the species",
            "number_density"),
    Stacked("molecule_number_density", "molecule", "cm-3", "number density of the molecule",
            "number_density"),
    Stacked("molecular_fraction", "element", "1",
            "fraction of the element's nuclei bound in molecules", "molecular_fraction"),
    Stacked("condensed_fraction", "element", "1",
            "fraction of the element's nuclei in condensed phases", "condensed_fraction"),
    Stacked("level_number_density", "level", "cm-3", "number density of the level",
            "population"),
    Stacked("partition_function", "partition_species", "1", "partition function",
            "partition"),
)}

#: long names of the label dimensions' coordinates
DIM_LONG = {"species": "atomic species (element and stage; H- is charge -1)",
            "molecule": "molecule", "element": "element", "level": "level (species:index)",
            "partition_species": "species of the stored partition functions"}

_ROMAN = re.compile(r"^[A-Z][a-z]?_[IVXLCDM]+$")


def row_name(var: str, label: str) -> str:
    """Flat name of one row: ``fraction`` + ``Fe II`` -> ``fraction_Fe_II``; levels
    ``Fe II:3`` -> ``population_Fe_II_L3``."""
    prefix = STACKED[var].prefix
    if var == "level_number_density":
        sp, idx = label.rsplit(":", 1)
        return f"{prefix}_{sp.replace(' ', '_')}_L{idx}"
    return f"{prefix}_{label.replace(' ', '_')}"


_FLAT = [(re.compile(r"^fraction_(.+)$"), "fraction"),
         (re.compile(r"^population_(.+)_L(\d+)$"), "level_number_density"),
         (re.compile(r"^partition_(.+)$"), "partition_function"),
         (re.compile(r"^molecular_fraction_([A-Z][a-z]?)$"), "molecular_fraction"),
         (re.compile(r"^number_density_(.+)$"), None)]  # species or molecule, by the label


def parse_flat(name: str) -> tuple[str, str] | None:
    """``fraction_Fe_II`` -> ``("fraction", "Fe II")``; None for a scalar field."""
    if name in SCALAR_OUTPUTS:
        return None
    for rx, var in _FLAT:
        m = rx.match(name)
        if not m:
            continue
        if var == "level_number_density":
            return var, f"{m.group(1).replace('_', ' ')}:{int(m.group(2))}"
        label = m.group(1)
        if var is None:  # atoms are "El_ROMAN" or "H-"; anything else is a molecule
            atomic = bool(_ROMAN.match(label)) or label == "H-"
            var = "number_density" if atomic else "molecule_number_density"
        return var, label.replace("_", " ") if _ROMAN.match(label) else label
    return None


def species_coords(labels) -> dict[str, np.ndarray]:
    """Auxiliary coordinates of the species dimension: charge (-1 for H-) and element."""
    from sahaboltz.data.elements import SYMBOLS, parse_species

    zs, qs = [], []
    for lab in labels:
        z, q = parse_species(lab)
        zs.append(z)
        qs.append(q)
    return {"charge": np.array(qs, dtype=np.int32),
            "atomic_number": np.array(zs, dtype=np.int32),
            "element_symbol": np.array([SYMBOLS[z] for z in zs], dtype=object)}


#: auxiliary coordinate variables: name -> (dim, units, long_name)
AUX = {"charge": ("species", "1", "charge of the species in units of e (H- is -1)"),
       "atomic_number": ("species", "1", "atomic number Z of the species' element"),
       "element_symbol": ("species", "", "element of the species"),
       "level_energy": ("level", "eV", "excitation energy of the level"),
       "level_g": ("level", "1", "statistical weight g of the level"),
       "level_species": ("level", "", "species of the level"),
       "level_index": ("level", "1", "index of the level in the species' level list (ground 0)")}


def stack(out: Mapping[str, Any], n: int) -> tuple[dict[str, np.ndarray], dict[str, list],
                                                     dict[str, np.ndarray]]:
    """Turn a compute function's ``{name: array}`` into (fields, labels, aux coordinates).

    Fields are ``(n,)`` for scalars and ``(rows, n)`` for stacked variables; ``labels`` holds
    each label dimension's row labels; a compute function may return stacked variables
    directly with ``_labels`` (and ``_coords`` for auxiliary coordinates such as level energies).
    """
    fields: dict[str, np.ndarray] = {}
    labels: dict[str, list] = {k: list(v) for k, v in (out.get("_labels") or {}).items()}
    aux: dict[str, np.ndarray] = {k: np.asarray(v) for k, v in (out.get("_coords") or {}).items()}
    rows: dict[str, list[tuple[str, np.ndarray]]] = {}
    for name, arr in out.items():
        if name.startswith("_"):
            continue
        if name in STACKED:
            a = np.asarray(arr, dtype=float)
            dim = STACKED[name].dim
            if dim not in labels or a.ndim != 2 or a.shape != (len(labels[dim]), n):
                raise TableError(f"compute function returned {name} with shape {a.shape}; "
                                 f"expected ({len(labels.get(dim, []))}, {n}) with _labels[{dim!r}]")
            fields[name] = a
            continue
        a = np.asarray(arr, dtype=float)
        if a.shape != (n,):
            raise TableError(f"compute function returned {name} with shape {a.shape}; "
                             f"expected ({n},) for a block of {n} states")
        flat = parse_flat(name)
        if flat is None:
            fields[name] = a
        else:
            rows.setdefault(flat[0], []).append((flat[1], a))
    for var, items in rows.items():  # the labels of each dimension, in order of appearance
        if var in fields:
            raise TableError(f"compute function returned {var} both stacked and as rows")
        have = labels.setdefault(STACKED[var].dim, [])
        have.extend(lab for lab, _ in items if lab not in have)
    for var, items in rows.items():
        by = dict(items)
        want = labels[STACKED[var].dim]
        missing = [lab for lab in want if lab not in by]
        if missing:
            raise TableError(f"compute function returned {var} without the rows "
                             f"{', '.join(missing)} (every {STACKED[var].dim} needs one)")
        fields[var] = np.stack([by[lab] for lab in want])
    if "species" in labels:
        aux.update({k: v for k, v in species_coords(labels["species"]).items() if k not in aux})
    if "level" in labels and "level_species" not in aux:
        sp_idx = [lab.rsplit(":", 1) for lab in labels["level"]]
        aux["level_species"] = np.array([s for s, _ in sp_idx], dtype=object)
        aux["level_index"] = np.array([int(i) for _, i in sp_idx], dtype=np.int32)
    return fields, labels, aux


def row_names(variables: Mapping[str, list]) -> dict[str, tuple[str, int | None]]:
    """Flat name -> (variable, row or None) for the variables of a file (var -> labels)."""
    out: dict[str, tuple[str, int | None]] = {}
    for var, labs in variables.items():
        if labs is None:
            out[var] = (var, None)
        else:
            for k, lab in enumerate(labs):
                out[row_name(var, lab)] = (var, k)
    return out


def field_attrs(name: str) -> dict[str, Any]:
    """units and long_name of a variable."""
    if name in STACKED:
        v = STACKED[name]
        return {"units": v.units, "long_name": v.long_name}
    if name in SCALAR_OUTPUTS:
        unit, desc = SCALAR_OUTPUTS[name]
        out = {"units": unit, "long_name": desc}
        if name == "status":  # CF flags, so that netCDF tools name the codes
            out["flag_values"] = np.arange(4.0)
            out["flag_meanings"] = "converged unreachable strongly_coupled not_converged"
        return out
    return {"units": "unknown", "long_name": name}
