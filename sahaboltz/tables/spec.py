"""Grid specifications: what a population table holds and how it is computed.

A :class:`TableSpec` names a temperature axis, a pressure-like axis, a composition, the physics
options handed to the equilibrium solver, and the outputs to store.  It can be written as a small
TOML or JSON file (see :data:`EXAMPLE_TOML`) or built in Python.  Its :meth:`TableSpec.canonical`
form (resolved axis values, normalised names) is what the cache key is made from, so two specs
that describe the same grid get the same key however they were written.
"""

from __future__ import annotations

import json
import math
import sys
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from sahaboltz.data.elements import SYMBOLS, atomic_number, parse_species, spectroscopic_name
from sahaboltz.equilibrium.closures import CLOSURES
from sahaboltz.equilibrium.thermodynamics import QUANTITIES as _THERMO_QUANTITIES
from sahaboltz.errors import InputError
from sahaboltz.kernels import truncation as _truncation

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised only on 3.10
    import tomli as tomllib

#: pressure-like axis quantities and their cgs unit (from the closure registry)
PRESSURE_QUANTITIES = {name: c.unit for name, c in CLOSURES.items()}

#: scalar outputs: name -> (unit, description)
SCALAR_OUTPUTS = {
    "electron_density": ("cm-3", "free-electron number density n_e"),
    "electron_pressure": ("dyn cm-2", "electron pressure P_e = n_e k T"),
    "gas_pressure": ("dyn cm-2", "gas pressure, all free particles"),
    "mass_density": ("g cm-3", "mass density"),
    "mean_molecular_weight": ("1", "mean mass per free particle in atomic mass units"),
    "mean_charge": ("1", "free electrons per heavy particle"),
    "status": ("1", "solver outcome of the state: 0 converged, 1 unreachable, "
                    "2 strongly coupled, 3 not converged (its other fields are NaN)"),
}

#: the scalar outputs a table stores unless its spec lists others
DEFAULT_QUANTITIES = tuple(SCALAR_OUTPUTS)
#: thermodynamic outputs (on request: ``outputs.quantities``), from the thermodynamics
#: module's list; "pressure" is stored as ``total_pressure`` (gas plus radiation if asked for)
THERMO_OUTPUTS = {("total_pressure" if k == "pressure" else k): (u or "1", d)
                  for k, (u, d) in _THERMO_QUANTITIES.items() if k != "mean_molecular_weight"}
SCALAR_OUTPUTS.update(THERMO_OUTPUTS)

AXIS_SCALES = ("log", "linear", "values")

#: default grid: dense enough in log T for cubic interpolation of stage fractions to ~1e-4
DEFAULT_TEMPERATURE = {"scale": "log", "min": 2000.0, "max": 50000.0, "per_decade": 100}
DEFAULT_PRESSURE = {"quantity": "gas_pressure", "scale": "log", "min": 1e-2, "max": 1e8,
                    "per_decade": 10}

EXAMPLE_TOML = """\
# sahaboltz table specification
[temperature]
scale = "log"          # "log", "linear" or "values"
min = 2000.0           # K (or give unit = "...")
max = 50000.0
per_decade = 100       # or: num = 141;  with scale = "values": values = [3000.0, 4000.0]

[pressure]
quantity = "gas_pressure"   # {closures}
scale = "log"
min = 1e-2                  # dyn cm-2 (or give unit = "Pa")
max = 1e8
per_decade = 10

[composition]
name = "solar"              # Asplund et al. (2009); optional metallicity = -0.5 (dex),
                            # alpha_enhancement = 0.4 (dex); or a table of number abundances:
# [composition.abundances]
# H = 1.0
# He = 0.085

[physics]
truncation = "occupation"   # {truncations}  (default "lowered" with lowering)
lowering = false            # Debye-Hueckel ionization-potential lowering
completion = false          # hydrogenic completion of the level lists (not with "plain")
h_minus = true              # include H-
molecules = "none"          # or "default" (every molecule of the data), "diatomics", "abundant"
condensates = false         # with molecules: gas-condensate equilibrium (condensed_fraction)
radiation = false           # add a T^4 radiation field to the thermodynamic outputs

[outputs]
quantities = ["electron_density", "electron_pressure", "gas_pressure", "mass_density",
              "mean_molecular_weight", "mean_charge"]
stage_fractions = "all"     # or a list of elements, e.g. ["H", "He", "Fe"]
# thermodynamics on request, e.g. "internal_energy", "entropy", "adiabatic_gradient",
# "gamma1", "heat_capacity_p", "sound_speed" (docs/thermodynamics.md)
levels = []                 # e.g. ["Fe II:0-9", "H I:0,1,2"]  (bound-level indices, ground = 0)
partition_functions = []    # e.g. ["Fe I", "Fe II"]
""".format(closures=" | ".join(CLOSURES), truncations=" | ".join(_truncation.names()))


@dataclass(frozen=True)
class Axis:
    """One grid axis: a name, its cgs unit and strictly increasing positive values."""

    name: str
    unit: str
    values: tuple[float, ...]
    scale: str = field(default="values", compare=False)  # how the values were made; not identity

    def __post_init__(self):
        v = np.asarray(self.values, dtype=float)
        if v.ndim != 1 or v.size < 2:
            raise InputError(f"{self.name} axis needs at least 2 values, got {v.size}")
        if not np.all(np.isfinite(v)) or np.any(v <= 0):
            raise InputError(f"{self.name} axis values must be finite and positive")
        if np.any(np.diff(v) <= 0):
            raise InputError(f"{self.name} axis values must be strictly increasing; "
                             f"sort them and remove duplicates")

    @property
    def array(self) -> np.ndarray:
        return np.asarray(self.values, dtype=float)

    def __len__(self) -> int:
        return len(self.values)

    @classmethod
    def from_mapping(cls, name: str, unit: str, m: Mapping[str, Any]) -> "Axis":
        """Build an axis from ``{scale, min, max, num | per_decade, values, unit}``."""
        known = {"scale", "min", "max", "num", "per_decade", "values", "unit", "quantity"}
        extra = set(m) - known
        if extra:
            raise InputError(f"{name} axis: unknown key(s) {sorted(extra)}; known: {sorted(known)}")
        scale = m.get("scale", "values" if "values" in m else "log")
        if scale not in AXIS_SCALES:
            raise InputError(f"{name} axis: scale must be one of {AXIS_SCALES}, got {scale!r}")
        if scale == "values":
            if "values" not in m:
                raise InputError(f"{name} axis: scale 'values' needs a 'values' list")
            vals = np.asarray(m["values"], dtype=float)
        else:
            for k in ("min", "max"):
                if k not in m:
                    raise InputError(f"{name} axis: scale {scale!r} needs 'min' and 'max'")
            lo, hi = float(m["min"]), float(m["max"])
            if not (0 < lo < hi and math.isfinite(hi)):
                raise InputError(f"{name} axis: need 0 < min < max, got min={lo}, max={hi}")
            if "num" in m:
                num = int(m["num"])
            elif "per_decade" in m and scale == "log":
                num = int(math.ceil(float(m["per_decade"]) * math.log10(hi / lo) - 1e-9)) + 1
            else:
                raise InputError(f"{name} axis: give 'num' (or 'per_decade' for a log axis)")
            if num < 2:
                raise InputError(f"{name} axis: need at least 2 points, got {num}")
            vals = (np.geomspace(lo, hi, num) if scale == "log" else np.linspace(lo, hi, num))
            vals[0], vals[-1] = lo, hi  # exact end points
        in_unit = m.get("unit", unit)
        if in_unit != unit:  # astropy only when converting: it takes ~0.5 s to import
            import astropy.units as u
            try:
                vals = (vals * u.Unit(in_unit)).to_value(unit)
            except (ValueError, u.UnitConversionError) as exc:
                raise InputError(f"{name} axis: cannot use unit {in_unit!r} ({exc})") from None
        return cls(name, unit, tuple(float(x) for x in vals), scale)


def normalise_species(text: str) -> str:
    """``"Fe+"`` / ``"fe ii"`` -> ``"Fe II"``."""
    z, charge = parse_species(text)
    return spectroscopic_name(z, charge)


def dataset_name(kind: str, species: str | None = None, level: int | None = None) -> str:
    """HDF5/netCDF-safe dataset name: ``fraction_Fe_II``, ``population_Fe_II_L3``, ``partition_H_I``."""
    if species is None:
        return kind
    name = f"{kind}_{species.replace(' ', '_')}"
    return name if level is None else f"{name}_L{level}"


def _parse_levels(entry: str) -> tuple[str, tuple[int, ...]]:
    """``"Fe II:0-3,7"`` -> ``("Fe II", (0, 1, 2, 3, 7))``."""
    if ":" not in entry:
        raise InputError(f"level selection {entry!r}: write 'SPECIES:INDICES', e.g. 'Fe II:0-9'")
    sp, idx = entry.split(":", 1)
    out: list[int] = []
    try:
        for part in idx.split(","):
            part = part.strip()
            if "-" in part:
                a, b = (int(x) for x in part.split("-", 1))
                out.extend(range(a, b + 1))
            elif part:
                out.append(int(part))
    except ValueError:
        raise InputError(f"level selection {entry!r}: indices must be integers or ranges "
                         f"like 0-9") from None
    if not out or min(out) < 0:
        raise InputError(f"level selection {entry!r}: give non-negative level indices")
    return normalise_species(sp), tuple(sorted(set(out)))


@dataclass(frozen=True)
class Outputs:
    """What to store.  ``stage_fractions`` is ``"all"`` or a tuple of element symbols."""

    quantities: tuple[str, ...] = DEFAULT_QUANTITIES
    stage_fractions: str | tuple[str, ...] = "all"
    levels: tuple[tuple[str, tuple[int, ...]], ...] = ()
    partition_functions: tuple[str, ...] = ()

    @classmethod
    def from_mapping(cls, m: Mapping[str, Any]) -> "Outputs":
        known = {"quantities", "stage_fractions", "levels", "partition_functions"}
        extra = set(m) - known
        if extra:
            raise InputError(f"outputs: unknown key(s) {sorted(extra)}; known: {sorted(known)}")
        q = tuple(m.get("quantities", DEFAULT_QUANTITIES))
        bad = [x for x in q if x not in SCALAR_OUTPUTS]
        if bad:
            raise InputError(f"outputs.quantities: unknown {bad}; choose from {list(SCALAR_OUTPUTS)}")
        sf = m.get("stage_fractions", "all")
        if isinstance(sf, str):
            if sf != "all":
                sf = tuple(s.strip() for s in sf.split(",") if s.strip())
        if not isinstance(sf, str):
            sf = tuple(SYMBOLS[atomic_number(s)] for s in sf)
        levels = tuple(_parse_levels(e) for e in m.get("levels", ()))
        pf = tuple(normalise_species(s) for s in m.get("partition_functions", ()))
        return cls(tuple(dict.fromkeys(q)), sf, levels, tuple(dict.fromkeys(pf)))

    def to_mapping(self) -> dict:
        return {"quantities": list(self.quantities),
                "stage_fractions": (self.stage_fractions if isinstance(self.stage_fractions, str)
                                    else list(self.stage_fractions)),
                "levels": [f"{sp}:{','.join(str(i) for i in idx)}" for sp, idx in self.levels],
                "partition_functions": list(self.partition_functions)}


@dataclass(frozen=True)
class TableSpec:
    """Everything that determines a population table.

    Attributes
    ----------
    temperature : Axis
        Temperatures [K].
    pressure : Axis
        The pressure-like axis; ``pressure.name`` is one of :data:`PRESSURE_QUANTITIES`.
    composition : dict
        ``{"name": "solar"}`` or ``{"abundances": {"H": 1.0, ...}}`` (number ratios N_X/N_H).
    physics : dict
        ``truncation`` (a name of :mod:`sahaboltz.kernels.truncation`), ``lowering``,
        ``completion``, ``h_minus``,
        ``molecules`` (a molecule set of the solver: "none", "default", "diatomics" ...).
    outputs : Outputs
        The quantities to store.
    """

    temperature: Axis
    pressure: Axis
    composition: dict = field(default_factory=lambda: {"name": "solar"})
    physics: dict = field(default_factory=lambda: _physics({}))
    outputs: Outputs = field(default_factory=Outputs)

    @property
    def shape(self) -> tuple[int, int]:
        return (len(self.temperature), len(self.pressure))

    @property
    def size(self) -> int:
        return len(self.temperature) * len(self.pressure)

    @property
    def pressure_quantity(self) -> str:
        return self.pressure.name

    # -- construction ---------------------------------------------------------------------------
    @classmethod
    def from_mapping(cls, m: Mapping[str, Any]) -> "TableSpec":
        """Build from the nested mapping of a TOML/JSON spec file (see :data:`EXAMPLE_TOML`)."""
        known = {"temperature", "pressure", "composition", "physics", "outputs"}
        extra = set(m) - known
        if extra:
            raise InputError(f"table spec: unknown section(s) {sorted(extra)}; known: {sorted(known)}")
        tm = dict(m.get("temperature", DEFAULT_TEMPERATURE))
        temperature = Axis.from_mapping("temperature", "K", tm)
        pm = dict(m.get("pressure", DEFAULT_PRESSURE))
        quantity = pm.get("quantity", "gas_pressure")
        if quantity not in PRESSURE_QUANTITIES:
            raise InputError(f"pressure.quantity must be one of {list(PRESSURE_QUANTITIES)}, "
                             f"got {quantity!r}")
        pressure = Axis.from_mapping(quantity, PRESSURE_QUANTITIES[quantity], pm)
        composition = normalize_composition(m.get("composition", {"name": "solar"}))
        return cls(temperature, pressure, composition,
                   _physics(m.get("physics", {})), Outputs.from_mapping(m.get("outputs", {})))

    @classmethod
    def from_file(cls, path: str | Path) -> "TableSpec":
        """Read a ``.toml`` or ``.json`` spec file."""
        path = Path(path)
        try:
            raw = path.read_bytes()
        except OSError as exc:
            raise InputError(f"cannot read table spec {path}: {exc.strerror}") from None
        try:
            if path.suffix.lower() == ".json":
                m = json.loads(raw)
            else:
                m = tomllib.loads(raw.decode())
        except (ValueError, tomllib.TOMLDecodeError) as exc:
            raise InputError(f"table spec {path} is not valid "
                             f"{'JSON' if path.suffix.lower() == '.json' else 'TOML'}: {exc}") from None
        return cls.from_mapping(m)

    def with_outputs(self, **kw) -> "TableSpec":
        return replace(self, outputs=replace(self.outputs, **kw))

    # -- serialisation --------------------------------------------------------------------------
    def to_mapping(self) -> dict:
        """A mapping that :meth:`from_mapping` reads back to an equal spec (axes as values)."""
        return {
            "temperature": {"scale": "values", "values": list(self.temperature.values)},
            "pressure": {"quantity": self.pressure.name, "scale": "values",
                         "values": list(self.pressure.values)},
            "composition": self.composition,
            "physics": dict(self.physics),
            "outputs": self.outputs.to_mapping(),
        }

    def canonical(self) -> str:
        """Canonical JSON text of the spec (sorted keys, exact float repr); the cache key input."""
        return json.dumps(self.to_mapping(), sort_keys=True, separators=(",", ":"))

    @classmethod
    def from_json(cls, text: str) -> "TableSpec":
        return cls.from_mapping(json.loads(text))

    def describe(self) -> str:
        t, p = self.temperature.array, self.pressure.array
        return (f"{len(t)} x {len(p)} grid: T {t[0]:g}..{t[-1]:g} K, {self.pressure.name} "
                f"{p[0]:g}..{p[-1]:g} {self.pressure.unit}")


def normalize_composition(c: Any) -> dict:
    """A spec's composition table, checked: {"name": ..., [M/H], [alpha/Fe]} or {"abundances": ...}."""
    if isinstance(c, str):
        c = {"name": c}
    if not isinstance(c, Mapping):
        raise InputError("composition must be a name like 'solar' or a table of abundances")
    if "abundances" in c:
        ab = {}
        for sym, val in dict(c["abundances"]).items():
            val = float(val)
            if not (val > 0 and math.isfinite(val)):
                raise InputError(f"composition: abundance of {sym} must be positive, got {val}")
            ab[SYMBOLS[atomic_number(sym)]] = val
        if not ab:
            raise InputError("composition.abundances is empty")
        out = {"abundances": dict(sorted(ab.items(), key=lambda kv: atomic_number(kv[0])))}
        extra = set(c) - {"abundances"}
    else:
        out = {"name": str(c.get("name", "solar"))}
        for k in ("metallicity", "alpha_enhancement"):  # [M/H], [alpha/Fe] in dex
            if float(c.get(k, 0.0)) != 0.0:
                out[k] = float(c[k])
        extra = set(c) - {"name", "metallicity", "alpha_enhancement"}
    if extra:
        raise InputError(f"composition: unknown key(s) {sorted(extra)}; give 'name' or 'abundances'")
    return out


def _physics(p: Mapping[str, Any]) -> dict:
    known = {"truncation", "lowering", "molecules", "condensates", "completion", "h_minus",
             "radiation"}
    extra = set(p) - known
    if extra:
        raise InputError(f"physics: unknown key(s) {sorted(extra)}; known: {sorted(known)}")
    lowering = bool(p.get("lowering", False))
    try:  # the solver's rule, from the registry: the scheme it would use for these options
        trunc = _truncation.resolve(p.get("truncation") or None, lowering).key
    except InputError as exc:
        raise InputError(f"physics.truncation: {exc}") from None
    molecules = _molecule_set(p.get("molecules", False))
    condensates = bool(p.get("condensates", False))
    if condensates and molecules == "none":
        raise InputError("physics.condensates needs molecules (e.g. molecules = \"default\")")
    out = {"truncation": trunc, "lowering": lowering, "molecules": molecules,
           "condensates": condensates, "completion": bool(p.get("completion", False)),
           "h_minus": bool(p.get("h_minus", True))}
    if p.get("radiation"):   # only when asked for: the keys of existing specs stay as they were
        out["radiation"] = True
    return out


def _molecule_set(value: Any) -> str:
    """The molecule set of the solver's ``molecules=`` option, one of
    :data:`sahaboltz.equilibrium.molecular.MOLECULE_SETS` (``true`` / ``false`` in a spec file
    mean "default" / "none")."""
    if value is True or value is False:
        return "default" if value else "none"
    if value in ("none", "default"):
        return value
    # the other names only when a spec gives one (a cache hit needs no molecule code)
    from sahaboltz.equilibrium.molecular import MOLECULE_SETS
    if value in MOLECULE_SETS:
        return value
    raise InputError(f"physics.molecules must be true, false or one of "
                     f"{', '.join(repr(m) for m in MOLECULE_SETS)}, got {value!r}")


def axis_from_text(name: str, unit: str, text: str, scale: str = "log") -> Axis:
    """Parse a command-line axis: ``MIN:MAX:NUM`` or a comma-separated list of values."""
    if ":" in text:
        parts = text.split(":")
        if len(parts) != 3:
            raise InputError(f"{name}: write MIN:MAX:NUM, e.g. 3000:30000:100, got {text!r}")
        try:
            lo, hi, num = float(parts[0]), float(parts[1]), int(parts[2])
        except ValueError:
            raise InputError(f"{name}: MIN:MAX:NUM must be numbers, got {text!r}") from None
        return Axis.from_mapping(name, unit, {"scale": scale, "min": lo, "max": hi, "num": num})
    try:
        vals = [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise InputError(f"{name}: give MIN:MAX:NUM or comma-separated numbers, got {text!r}") from None
    return Axis.from_mapping(name, unit, {"scale": "values", "values": vals})


def spec_from_options(temperature: str | None = None, pressure: str | None = None, *,
                      pressure_quantity: str = "gas_pressure", temperature_scale: str = "log",
                      pressure_scale: str = "log", composition: str | None = None,
                      truncation: str | None = None, lowering: bool = False,
                      molecules: bool | str = False, condensates: bool = False,
                      completion: bool = False, h_minus: bool = True,
                      fractions: str | Sequence[str] = "all", levels: Sequence[str] = (),
                      partition_functions: Sequence[str] = (),
                      quantities: Sequence[str] | None = None) -> TableSpec:
    """Build a spec from command-line style options (defaults: :data:`DEFAULT_TEMPERATURE`, ...)."""
    if pressure_quantity not in PRESSURE_QUANTITIES:
        raise InputError(f"pressure quantity must be one of {list(PRESSURE_QUANTITIES)}")
    punit = PRESSURE_QUANTITIES[pressure_quantity]
    t_axis = (axis_from_text("temperature", "K", temperature, temperature_scale) if temperature
              else Axis.from_mapping("temperature", "K", DEFAULT_TEMPERATURE))
    if pressure:
        p_axis = axis_from_text(pressure_quantity, punit, pressure, pressure_scale)
    else:
        d = {k: v for k, v in DEFAULT_PRESSURE.items() if k != "quantity"}
        if pressure_quantity != "gas_pressure":
            raise InputError(f"give the {pressure_quantity} axis values (no default for it)")
        p_axis = Axis.from_mapping(pressure_quantity, punit, d)
    comp: Any = {"name": "solar"}
    if composition and "=" in composition:
        try:
            comp = {"abundances": {k.strip(): float(v) for k, v in
                                   (item.split("=") for item in composition.split(","))}}
        except ValueError:
            raise InputError(f"composition: write NAME or SYMBOL=ABUNDANCE,..., got "
                             f"{composition!r}") from None
    elif composition:
        comp = {"name": composition}
    out = {"stage_fractions": fractions, "levels": list(levels),
           "partition_functions": list(partition_functions)}
    if quantities is not None:
        out["quantities"] = list(quantities)
    return TableSpec(t_axis, p_axis, normalize_composition(comp),
                     _physics({"truncation": truncation, "lowering": lowering,
                               "molecules": molecules, "condensates": condensates,
                               "completion": completion,
                               "h_minus": h_minus}),
                     Outputs.from_mapping(out))
