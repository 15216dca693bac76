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
from sahaboltz.equilibrium.closures import CLOSURES, THERMAL_CLOSURES
from sahaboltz.equilibrium.thermo_quantities import QUANTITIES as _THERMO_QUANTITIES
from sahaboltz.errors import InputError, SahaboltzError
from sahaboltz.kernels import truncation as _truncation

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised only on 3.10
    import tomli as tomllib

#: pressure-like axis quantities and their cgs unit (from the closure registry)
PRESSURE_QUANTITIES = {name: c.unit for name, c in CLOSURES.items()}
#: first-axis quantities and their cgs unit: the temperature, or a thermal closure that
#: replaces it (the registry's THERMAL_CLOSURES; the temperature is then solved for and stored
#: as a field)
TEMPERATURE_QUANTITIES = {"temperature": "K",
                          **{name: c.unit for name, c in THERMAL_CLOSURES.items()}}
#: how the values of an axis are interpolated: in their logarithm or as they are
INTERPOLATIONS = ("log", "linear")

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
#: stored as a field when an axis replaces it (always there), else it is the axis
SCALAR_OUTPUTS["temperature"] = ("K", "temperature")

AXIS_SCALES = ("log", "linear", "values")

#: what a composition axis can run over: quantity -> (unit, long name of its coordinate).
#: The same keys, given once, modify the fixed composition (``metallicity = -0.5``).
COMPOSITION_AXES = {
    "metallicity": ("dex", "[M/H]: log10 scaling, by number relative to H, of every element "
                           "heavier than He"),
    "alpha_enhancement": ("dex", "[alpha/Fe]: further log10 scaling of O Ne Mg Si S Ar Ca Ti"),
    "helium_mass_fraction": ("1", "helium mass fraction Y (metal mass fractions kept, "
                                  "X = 1 - Y - Z)"),
    "abundance": ("dex", "log10 scaling of one element's abundance relative to H, from the "
                         "base mixture"),
}
#: command-line and spec-file aliases of the composition-axis quantities
COMPOSITION_ALIASES = {"metallicity": "metallicity", "m/h": "metallicity", "[m/h]": "metallicity",
                       "alpha": "alpha_enhancement", "alpha_enhancement": "alpha_enhancement",
                       "[alpha/fe]": "alpha_enhancement", "y": "helium_mass_fraction",
                       "helium_mass_fraction": "helium_mass_fraction"}
#: elements heavier than He that [alpha/Fe] scales (as sahaboltz.data.composition.ALPHA_ELEMENTS)
_ALPHA_Z = (8, 10, 12, 14, 16, 18, 20, 22)

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
# optional third grid axis over the composition (one of them):
# [composition.axis]
# quantity = "metallicity"  # [M/H] in dex; or "alpha_enhancement" (dex),
#                           # "helium_mass_fraction" (Y), "abundance" with element = "C" (dex)
# values = [-1.0, -0.5, 0.0, 0.5]   # or scale = "linear", min, max, num

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


#: the first two sections of the template for a first axis that replaces the temperature
_THERMAL_EXAMPLES = {
    "internal_energy": """\
# sahaboltz table specification: a (specific internal energy, mass density) grid
[temperature]
quantity = "internal_energy"  # in place of the temperature, which is solved for and stored
scale = "log"          # "log" (needs min > 0), "linear" or "values"
min = 3e11             # erg g-1 (or give unit = "J kg-1"); zero point: neutral ground-state
max = 3e14             # atoms and electrons at rest, so u < 0 is possible with molecules
per_decade = 20        # or: num = 61
# interpolation = "log"  # the reader's variable along this axis: "log" (ln u; the default
#                        # on a log scale) or "linear" (u itself; the default otherwise)

[pressure]
quantity = "mass_density"   # the partner of internal_energy
scale = "log"
min = 1e-10                 # g cm-3
max = 1e-4
per_decade = 10
""",
    "entropy": """\
# sahaboltz table specification: a (specific entropy, gas pressure) grid
[temperature]
quantity = "entropy"   # in place of the temperature, which is solved for and stored
scale = "linear"       # "log", "linear" or "values"
min = 2e9              # erg g-1 K-1 (or give unit = "J kg-1 K-1")
max = 4e9
num = 41
# interpolation = "linear"  # the reader's variable along this axis: "linear" (s itself; the
#                           # default on a linear scale) or "log" (ln s)

[pressure]
quantity = "gas_pressure"   # the partner of entropy
scale = "log"
min = 1e2                   # dyn cm-2
max = 1e6
per_decade = 10
""",
}


def example_toml(temperature_quantity: str = "temperature") -> str:
    """The annotated template spec; with a quantity that replaces the temperature
    (``internal_energy``, ``entropy``), its first two sections are that axis and its
    partner, and a (commented) ``physics.temperature_range`` line is added."""
    if temperature_quantity == "temperature":
        return EXAMPLE_TOML
    if temperature_quantity not in _THERMAL_EXAMPLES:
        raise InputError(f"temperature quantity must be one of {list(TEMPERATURE_QUANTITIES)}, "
                         f"got {temperature_quantity!r}")
    rest = EXAMPLE_TOML[EXAMPLE_TOML.index("[composition]"):]
    rest = rest.replace("condensates = false         # with molecules: gas-condensate "
                        "equilibrium (condensed_fraction)\n",
                        "condensates = false         # with molecules: gas-condensate "
                        "equilibrium (condensed_fraction)\n"
                        "# temperature_range = [1000.0, 1e8]  # K, where T is searched "
                        "(default; from 500 K with molecules)\n")
    rest = rest.replace("[outputs]\n", "[outputs]\n# temperature and status are always stored "
                                        "with this axis\n")
    return _THERMAL_EXAMPLES[temperature_quantity] + "\n" + rest


# -- checked reading of a spec's values (a spec file can hold anything) --------------------
def _table(value: Any, where: str) -> Mapping[str, Any]:
    """A table (mapping) of a spec, or an InputError naming where it belongs."""
    if not isinstance(value, Mapping):
        raise InputError(f"{where} must be a table of keys (e.g. [{where}] in TOML), "
                         f"got {_shown(value)}")
    return value


def _number(value: Any, where: str) -> float:
    """A finite number of a spec (not a string, a list or a boolean)."""
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise InputError(f"{where} must be a number, got {_shown(value)}")
    v = float(value)
    if not math.isfinite(v):
        raise InputError(f"{where} must be finite, got {value!r}")
    return v


def _integer(value: Any, where: str) -> int:
    """A whole number of a spec (2 or 2.0; not 2.5, "ten" or true)."""
    v = _number(value, where)
    if v != int(v):
        raise InputError(f"{where} must be a whole number, got {value!r}")
    return int(v)


def _boolean(value: Any, where: str) -> bool:
    """true or false (a string such as "no" would otherwise read as True)."""
    if not isinstance(value, (bool, np.bool_)):
        raise InputError(f"{where} must be true or false, got {_shown(value)}")
    return bool(value)


def _strings(value: Any, where: str) -> list[str]:
    """A list of strings of a spec (a single string is a one-item list)."""
    if isinstance(value, str):
        return [value]
    if not isinstance(value, (list, tuple)) or not all(isinstance(x, str) for x in value):
        raise InputError(f"{where} must be a list of strings, got {_shown(value)}")
    return list(value)


def _shown(value: Any) -> str:
    kind = {str: "text", list: "a list", tuple: "a list", dict: "a table", bool: "a boolean",
            int: "a number", float: "a number"}.get(type(value), type(value).__name__)
    text = repr(value)
    return f"{kind} {text if len(text) <= 40 else text[:37] + '...'}"


def axis_long_name(name: str) -> str:
    """The ``long_name`` of an axis coordinate, from the closure registries."""
    if name in THERMAL_CLOSURES:
        return THERMAL_CLOSURES[name].long_name
    return name.replace("_", " ")


@dataclass(frozen=True)
class Axis:
    """One grid axis: a name, its cgs unit and strictly increasing values.

    Values are positive unless ``signed`` (a quantity whose zero point is a convention, such
    as the specific internal energy).  ``interpolation`` says how the reader interpolates
    along the axis: in ln(value) (``"log"``; temperature and the pressure-like axes always)
    or in the value (``"linear"``); it is part of the axis' identity.
    """

    name: str
    unit: str
    values: tuple[float, ...]
    scale: str = field(default="values", compare=False)  # how the values were made; not identity
    interpolation: str = "log"
    signed: bool = field(default=False, compare=False)

    def __post_init__(self):
        v = np.asarray(self.values, dtype=float)
        if v.ndim != 1 or v.size < 2:
            raise InputError(f"{self.name} axis needs at least 2 values, got {v.size}")
        if not np.all(np.isfinite(v)) or (not self.signed and np.any(v <= 0)):
            raise InputError(f"{self.name} axis values must be finite"
                             f"{'' if self.signed else ' and positive'}")
        if np.any(np.diff(v) <= 0):
            raise InputError(f"{self.name} axis values must be strictly increasing; "
                             f"sort them and remove duplicates")
        if self.interpolation not in INTERPOLATIONS:
            raise InputError(f"{self.name}.interpolation must be one of {INTERPOLATIONS}, got "
                             f"{self.interpolation!r}")
        if self.interpolation == "log" and np.any(v <= 0):
            raise InputError(f"{self.name} axis: interpolation in the logarithm needs positive "
                             f"values (got {v[0]:g}..{v[-1]:g}); use scale = \"linear\" or "
                             f"interpolation = \"linear\"")

    @property
    def array(self) -> np.ndarray:
        return np.asarray(self.values, dtype=float)

    def __len__(self) -> int:
        return len(self.values)

    @classmethod
    def from_mapping(cls, name: str, unit: str, m: Mapping[str, Any], *,
                     thermal: bool = False, signed: bool = False) -> "Axis":
        """Build an axis from ``{scale, min, max, num | per_decade, values, unit}``.

        ``thermal``: an axis that replaces the temperature; it also takes ``interpolation``
        (default: ``"log"`` for a log-spaced axis, else ``"linear"``).  ``signed``: its values
        may be zero or negative (then on a linear or explicit scale)."""
        m = _table(m, name)
        known = {"scale", "min", "max", "num", "per_decade", "values", "unit", "quantity"}
        if thermal:
            known.add("interpolation")
        extra = set(m) - known
        if extra:
            raise InputError(f"{name} axis: unknown key(s) {sorted(extra)}; known: {sorted(known)}")
        scale = m.get("scale", "values" if "values" in m else "log")
        if not isinstance(scale, str) or scale not in AXIS_SCALES:
            raise InputError(f"{name} axis: scale must be one of {AXIS_SCALES}, got {scale!r}")
        if scale == "values":
            if "values" not in m:
                raise InputError(f"{name} axis: scale 'values' needs a 'values' list")
            raw = m["values"]
            if not isinstance(raw, (list, tuple)):
                raise InputError(f"{name}.values must be a list of numbers, got {_shown(raw)}")
            vals = np.array([_number(v, f"{name}.values[{k}]") for k, v in enumerate(raw)])
        else:
            for k in ("min", "max"):
                if k not in m:
                    raise InputError(f"{name} axis: scale {scale!r} needs 'min' and 'max'")
            lo, hi = _number(m["min"], f"{name}.min"), _number(m["max"], f"{name}.max")
            if not (0 < lo < hi and math.isfinite(hi)) and not (
                    signed and scale == "linear" and lo < hi):
                raise InputError(f"{name} axis: need 0 < min < max, got min={lo}, max={hi}"
                                 f"{' (any sign on a linear scale)' if signed else ''}")
            if "num" in m:
                num = _integer(m["num"], f"{name}.num")
            elif "per_decade" in m and scale == "log":
                per = _number(m["per_decade"], f"{name}.per_decade")
                if not per > 0:
                    raise InputError(f"{name}.per_decade must be positive, got {per:g}")
                num = int(math.ceil(per * math.log10(hi / lo) - 1e-9)) + 1
            else:
                raise InputError(f"{name} axis: give 'num' (or 'per_decade' for a log axis)")
            if num < 2:
                raise InputError(f"{name} axis: need at least 2 points, got {num}")
            vals = (np.geomspace(lo, hi, num) if scale == "log" else np.linspace(lo, hi, num))
            vals[0], vals[-1] = lo, hi  # exact end points
        in_unit = m.get("unit", unit)
        if not isinstance(in_unit, str):
            raise InputError(f"{name}.unit must be text such as 'K' or 'Pa', got "
                             f"{_shown(in_unit)}")
        if in_unit != unit:  # astropy only when converting: it takes ~0.5 s to import
            from sahaboltz.quantities import convert, unit_of
            try:
                vals = convert(vals, unit_of(in_unit, unit, f"{name}.unit"), unit)
            except InputError as exc:
                raise InputError(f"{name} axis: {exc}") from None
        interp = m.get("interpolation", "log" if scale == "log" or not thermal else "linear")
        if not isinstance(interp, str):
            raise InputError(f"{name}.interpolation must be one of {INTERPOLATIONS}, got "
                             f"{_shown(interp)}")
        return cls(name, unit, tuple(float(x) for x in vals), scale, interp, signed)

    def to_mapping(self) -> dict:
        """The axis as explicit values (what the canonical spec holds)."""
        out = {"scale": "values", "values": list(self.values)}
        if self.name in THERMAL_CLOSURES:  # temperature and pressure axes: as they always were
            out = {"quantity": self.name, **out, "interpolation": self.interpolation}
        return out


@dataclass(frozen=True)
class CompositionAxis:
    """The optional third grid axis: one composition quantity over ``values``.

    ``quantity`` is a key of :data:`COMPOSITION_AXES`; ``element`` names the element for
    ``"abundance"``.  Each value, applied to the spec's base composition, gives the fixed
    composition of one slice of the grid (:meth:`fixed`).  Values may be negative (dex) but
    are finite and strictly increasing.
    """

    quantity: str
    values: tuple[float, ...]
    element: str | None = None

    def __post_init__(self):
        if self.quantity not in COMPOSITION_AXES:
            raise InputError(f"composition axis: quantity must be one of "
                             f"{list(COMPOSITION_AXES)}, got {self.quantity!r}")
        if (self.quantity == "abundance") != (self.element is not None):
            raise InputError("composition axis: give element = \"SYMBOL\" with quantity "
                             "\"abundance\" (and only with it)")
        if self.element == "H":
            raise InputError("composition axis: abundances are scaled relative to hydrogen, "
                             "so hydrogen itself cannot be the axis; scale the metals "
                             "(metallicity) or helium instead")
        v = np.asarray(self.values, dtype=float)
        if v.ndim != 1 or v.size < 2:
            raise InputError(f"composition axis {self.name} needs at least 2 values, got {v.size}")
        if not np.all(np.isfinite(v)):
            raise InputError(f"composition axis {self.name}: values must be finite")
        if np.any(np.diff(v) <= 0):
            raise InputError(f"composition axis {self.name}: values must be strictly "
                             f"increasing; sort them and remove duplicates")
        if self.quantity == "helium_mass_fraction" and (v[0] <= 0 or v[-1] >= 1):
            raise InputError(f"composition axis helium_mass_fraction: Y must lie in (0, 1), "
                             f"got {v[0]:g}..{v[-1]:g} (Y = 0 would remove helium, which the "
                             f"other slices hold)")

    @property
    def name(self) -> str:
        """Name of the coordinate in the file: the quantity, or ``abundance_C``."""
        return self.quantity if self.element is None else f"abundance_{self.element}"

    @property
    def unit(self) -> str:
        return COMPOSITION_AXES[self.quantity][0]

    @property
    def long_name(self) -> str:
        text = COMPOSITION_AXES[self.quantity][1]
        return text if self.element is None else text.replace("one element's",
                                                              f"{self.element}'s")

    @property
    def array(self) -> np.ndarray:
        return np.asarray(self.values, dtype=float)

    def __len__(self) -> int:
        return len(self.values)

    def fixed(self, base: Mapping[str, Any], k: int) -> dict:
        """The fixed composition (as :func:`normalize_composition` gives it) of slice ``k``."""
        out = dict(base)
        if self.quantity == "abundance":
            offsets = dict(out.get("abundance_offsets", {}))
            offsets[self.element] = float(self.values[k])
            out["abundance_offsets"] = offsets
        else:
            out[self.quantity] = float(self.values[k])
        return normalize_composition(out)

    def check_base(self, base: Mapping[str, Any]) -> None:
        """Raise :class:`InputError` if the axis contradicts the fixed composition ``base``."""
        what = f"composition axis {self.name}"
        if self.quantity == "abundance":
            if self.element in base.get("abundance_offsets", {}):
                raise InputError(f"{what}: the composition also fixes an offset of "
                                 f"{self.element}; give it either fixed or as the axis")
        elif self.quantity in base:
            raise InputError(f"{what}: the composition also fixes {self.quantity} = "
                             f"{base[self.quantity]}; give it either fixed or as the axis")
        ab = base.get("abundances")
        if ab is None:
            return  # a named set: checked when it is resolved (it has every element)
        zs = [atomic_number(s) for s in ab]
        if self.quantity == "abundance" and self.element not in ab:
            raise InputError(f"{what}: the custom mixture has no {self.element} "
                             f"({', '.join(ab)}); add it to composition.abundances")
        if self.quantity == "metallicity" and not any(z > 2 for z in zs):
            raise InputError(f"{what}: the custom mixture ({', '.join(ab)}) has no element "
                             f"heavier than He, so [M/H] would change nothing")
        if self.quantity == "alpha_enhancement" and not any(z in _ALPHA_Z for z in zs):
            raise InputError(f"{what}: the custom mixture ({', '.join(ab)}) has no alpha "
                             f"element (O Ne Mg Si S Ar Ca Ti), so [alpha/Fe] would change "
                             f"nothing")
        if self.quantity == "helium_mass_fraction" and 1 not in zs:
            raise InputError(f"{what}: the custom mixture has no hydrogen, which takes up "
                             f"X = 1 - Y - Z")

    @classmethod
    def from_mapping(cls, m: Mapping[str, Any]) -> "CompositionAxis":
        """``{quantity, [element], values | scale = "linear", min, max, num}``."""
        if not isinstance(m, Mapping):
            raise InputError("composition.axis must be a table: quantity = ..., values = [...]")
        known = {"quantity", "element", "values", "scale", "min", "max", "num"}
        extra = set(m) - known
        if extra:
            raise InputError(f"composition.axis: unknown key(s) {sorted(extra)}; "
                             f"known: {sorted(known)}")
        if "quantity" not in m:
            raise InputError(f"composition.axis: give quantity = one of {list(COMPOSITION_AXES)}")
        quantity = COMPOSITION_ALIASES.get(str(m["quantity"]).strip().lower(),
                                           str(m["quantity"]))
        element = m.get("element")
        if element is not None:
            element = SYMBOLS[atomic_number(str(element).strip())]
        scale = m.get("scale", "values" if "values" in m else "linear")
        if scale == "values":
            if "values" not in m:
                raise InputError("composition.axis: give values = [...] or min, max, num")
            try:
                vals = [float(x) for x in m["values"]]
            except (TypeError, ValueError):
                raise InputError(f"composition.axis: values must be numbers, "
                                 f"got {m['values']!r}") from None
        elif scale == "linear":
            try:
                lo, hi, num = float(m["min"]), float(m["max"]), int(m["num"])
            except KeyError:
                raise InputError("composition.axis: scale \"linear\" needs min, max and num") \
                    from None
            except (TypeError, ValueError):
                raise InputError("composition.axis: min, max, num must be numbers") from None
            if num < 2 or not lo < hi:
                raise InputError(f"composition.axis: need min < max and num >= 2, got "
                                 f"min={lo}, max={hi}, num={num}")
            vals = np.linspace(lo, hi, num).tolist()
            vals[0], vals[-1] = lo, hi
        else:
            raise InputError(f"composition.axis: scale must be \"values\" or \"linear\" (the "
                             f"quantities are already logarithmic or fractions), got {scale!r}")
        return cls(quantity, tuple(float(x) for x in vals), element)

    def to_mapping(self) -> dict:
        out = {"quantity": self.quantity, "values": list(self.values)}
        if self.element is not None:
            out["element"] = self.element
        return out


def composition_axis_from_text(text: str) -> CompositionAxis:
    """Parse ``--composition-axis``: ``QUANTITY=MIN:MAX:NUM`` or ``QUANTITY=V1,V2,..`` with
    QUANTITY ``metallicity`` (or ``M/H``), ``alpha``, ``Y`` (helium mass fraction), or an
    element symbol, e.g. ``C`` (its abundance offset in dex; ``abundance:Y`` for yttrium)."""
    if "=" not in text:
        raise InputError(f"--composition-axis: write QUANTITY=MIN:MAX:NUM or QUANTITY=V1,V2,.. "
                         f"(QUANTITY: metallicity, alpha, Y or an element symbol), got {text!r}")
    q, vals = (x.strip() for x in text.split("=", 1))
    m: dict[str, Any] = {}
    if q.lower() in COMPOSITION_ALIASES:  # "Y" is helium's mass fraction; yttrium: abundance:Y
        m["quantity"] = COMPOSITION_ALIASES[q.lower()]
    else:
        try:
            m["element"] = SYMBOLS[atomic_number(q.split(":", 1)[1] if q.lower().startswith(
                "abundance:") else q)]
        except (InputError, KeyError, ValueError):
            raise InputError(f"--composition-axis: {q!r} is neither metallicity, alpha, Y nor "
                             f"an element symbol") from None
        m["quantity"] = "abundance"
    try:
        if ":" in vals:
            parts = vals.split(":")
            if len(parts) != 3:
                raise ValueError
            m.update(scale="linear", min=float(parts[0]), max=float(parts[1]), num=int(parts[2]))
        else:
            m["values"] = [float(x) for x in vals.split(",") if x.strip()]
    except ValueError:
        raise InputError(f"--composition-axis: give MIN:MAX:NUM or comma-separated numbers "
                         f"after '=', got {vals!r}") from None
    return CompositionAxis.from_mapping(m)


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
        m = _table(m, "outputs")
        known = {"quantities", "stage_fractions", "levels", "partition_functions"}
        extra = set(m) - known
        if extra:
            raise InputError(f"outputs: unknown key(s) {sorted(extra)}; known: {sorted(known)}")
        q = tuple(_strings(m["quantities"], "outputs.quantities") if "quantities" in m
                  else DEFAULT_QUANTITIES)
        bad = [x for x in q if x not in SCALAR_OUTPUTS]
        if bad:
            raise InputError(f"outputs.quantities: unknown {bad}; choose from {list(SCALAR_OUTPUTS)}")
        sf = m.get("stage_fractions", "all")
        if isinstance(sf, str):
            if sf != "all":
                sf = tuple(s.strip() for s in sf.split(",") if s.strip())
        if not isinstance(sf, str):
            sf = tuple(SYMBOLS[atomic_number(s)] for s in _strings(sf, "outputs.stage_fractions"))
        levels = tuple(_parse_levels(e) for e in _strings(m.get("levels", []), "outputs.levels"))
        pf = tuple(normalise_species(s) for s in _strings(m.get("partition_functions", []),
                                                          "outputs.partition_functions"))
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
        The first axis: temperatures [K], or a quantity that replaces the temperature
        (``temperature.name`` in :data:`TEMPERATURE_QUANTITIES`: ``internal_energy`` with a
        ``mass_density`` axis, ``entropy`` with ``gas_pressure``; the registry
        ``THERMAL_CLOSURES``); the temperature is then solved for and stored as a field.
    pressure : Axis
        The pressure-like axis; ``pressure.name`` is one of :data:`PRESSURE_QUANTITIES`.
    composition : dict
        ``{"name": "solar"}`` or ``{"abundances": {"H": 1.0, ...}}`` (number ratios N_X/N_H),
        with optional modifiers (:func:`normalize_composition`).  With a composition axis it
        is the base that every slice modifies.
    physics : dict
        ``truncation`` (a name of :mod:`sahaboltz.kernels.truncation`), ``lowering``,
        ``completion``, ``h_minus``,
        ``molecules`` (a molecule set of the solver: "none", "default", "diatomics" ...).
    outputs : Outputs
        The quantities to store.
    composition_axis : CompositionAxis, optional
        A third grid axis over the composition; the grid is then
        (composition, temperature, pressure) and every slice is a 2-D spec
        (:meth:`at_composition`).
    """

    temperature: Axis
    pressure: Axis
    composition: dict = field(default_factory=lambda: {"name": "solar"})
    physics: dict = field(default_factory=lambda: _physics({}))
    outputs: Outputs = field(default_factory=Outputs)
    composition_axis: CompositionAxis | None = None

    def __post_init__(self):
        if self.composition_axis is not None:
            self.composition_axis.check_base(self.composition)
        tc = self.thermal
        if tc is None:
            if "temperature_range" in self.physics:
                raise InputError("physics.temperature_range is the search range of the "
                                 "temperature, for a first axis that replaces it "
                                 "(temperature.quantity = " +
                                 " | ".join(repr(k) for k in THERMAL_CLOSURES) + ")")
            return
        if self.pressure.name != tc.partner:
            raise InputError(f"a {tc.name} axis goes with a {tc.partner} axis "
                             f"(pressure.quantity = \"{tc.partner}\"), got {self.pressure.name}")
        phys = self.physics
        # the temperature found, and whether it was found, are always stored
        q = self.outputs.quantities
        need = [x for x in ("temperature", "status") if x not in q]
        if need:
            object.__setattr__(self, "outputs", replace(self.outputs,
                                                        quantities=tuple(need) + tuple(q)))

    @property
    def thermal(self):
        """The :class:`~sahaboltz.equilibrium.closures.ThermalClosure` of the first axis, or
        None when it is the temperature."""
        return THERMAL_CLOSURES.get(self.temperature.name)

    @property
    def temperature_quantity(self) -> str:
        """Name of the first axis: ``temperature``, ``internal_energy`` or ``entropy``."""
        return self.temperature.name

    @property
    def shape(self) -> tuple[int, ...]:
        """(nT, nP), or (nC, nT, nP) with a composition axis."""
        tp = (len(self.temperature), len(self.pressure))
        return tp if self.composition_axis is None else (len(self.composition_axis),) + tp

    @property
    def size(self) -> int:
        return math.prod(self.shape)

    def at_composition(self, k: int) -> "TableSpec":
        """The 2-D spec of composition slice ``k`` (its composition fixed)."""
        ax = self.composition_axis
        if ax is None:
            raise InputError("this spec has no composition axis")
        return replace(self, composition=ax.fixed(self.composition, k), composition_axis=None)

    def compositions(self) -> list[dict]:
        """The fixed composition of every slice (one, without a composition axis)."""
        if self.composition_axis is None:
            return [self.composition]
        return [self.composition_axis.fixed(self.composition, k)
                for k in range(len(self.composition_axis))]

    @property
    def pressure_quantity(self) -> str:
        return self.pressure.name

    # -- construction ---------------------------------------------------------------------------
    @classmethod
    def from_mapping(cls, m: Mapping[str, Any]) -> "TableSpec":
        """Build from the nested mapping of a TOML/JSON spec file (see :data:`EXAMPLE_TOML`)."""
        m = _table(m, "table spec")
        known = {"temperature", "pressure", "composition", "physics", "outputs"}
        extra = set(m) - known
        if extra:
            raise InputError(f"table spec: unknown section(s) {sorted(extra)}; known: {sorted(known)}")
        tm = dict(_table(m.get("temperature", DEFAULT_TEMPERATURE), "temperature"))
        temperature = first_axis(tm)
        tc = THERMAL_CLOSURES.get(temperature.name)
        if tc is not None and "pressure" not in m:
            raise InputError(f"a {tc.name} axis needs its {tc.partner} axis: give [pressure] "
                             f"with quantity = \"{tc.partner}\" (there is no default)")
        pm = dict(_table(m.get("pressure", DEFAULT_PRESSURE), "pressure"))
        quantity = pm.get("quantity", "gas_pressure" if tc is None else tc.partner)
        if not isinstance(quantity, str) or quantity not in PRESSURE_QUANTITIES:
            raise InputError(f"pressure.quantity must be one of {list(PRESSURE_QUANTITIES)}, "
                             f"got {quantity!r}")
        pressure = Axis.from_mapping(quantity, PRESSURE_QUANTITIES[quantity], pm)
        cm = m.get("composition", {"name": "solar"})
        composition = normalize_composition(cm)
        axis = (CompositionAxis.from_mapping(cm["axis"])
                if isinstance(cm, Mapping) and "axis" in cm else None)
        return cls(temperature, pressure, composition,
                   _physics(m.get("physics", {})), Outputs.from_mapping(m.get("outputs", {})),
                   axis)

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
        try:
            return cls.from_mapping(m)
        except SahaboltzError as exc:
            raise type(exc)(f"table spec {path}: {exc}") from None

    def with_outputs(self, **kw) -> "TableSpec":
        return replace(self, outputs=replace(self.outputs, **kw))

    # -- serialisation --------------------------------------------------------------------------
    def to_mapping(self) -> dict:
        """A mapping that :meth:`from_mapping` reads back to an equal spec (axes as values)."""
        return {
            "temperature": self.temperature.to_mapping(),
            "pressure": {"quantity": self.pressure.name, "scale": "values",
                         "values": list(self.pressure.values)},
            "composition": (self.composition if self.composition_axis is None else
                            {**self.composition, "axis": self.composition_axis.to_mapping()}),
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
        first = ("T" if self.thermal is None else self.temperature.name)
        text = (f"{len(t)} x {len(p)} grid: {first} {t[0]:g}..{t[-1]:g} "
                f"{self.temperature.unit}, {self.pressure.name} "
                f"{p[0]:g}..{p[-1]:g} {self.pressure.unit}")
        ax = self.composition_axis
        if ax is not None:
            c = ax.array
            text = (f"{len(c)} x {text}, {ax.name} {c[0]:g}..{c[-1]:g}"
                    f"{' ' + ax.unit if ax.unit != '1' else ''}")
        return text


def first_axis(m: Mapping[str, Any]) -> Axis:
    """The first axis of a spec from its ``[temperature]`` section: ``quantity`` (default
    ``"temperature"``) names it, one of :data:`TEMPERATURE_QUANTITIES`."""
    quantity = m.get("quantity", "temperature")
    if not isinstance(quantity, str) or quantity not in TEMPERATURE_QUANTITIES:
        raise InputError(f"temperature.quantity must be one of {list(TEMPERATURE_QUANTITIES)}, "
                         f"got {quantity!r}")
    tc = THERMAL_CLOSURES.get(quantity)
    if tc is None:
        return Axis.from_mapping("temperature", "K", m)
    return Axis.from_mapping(quantity, tc.unit, m, thermal=True, signed=tc.signed)


def normalize_composition(c: Any) -> dict:
    """A spec's fixed composition, checked: a base -- ``{"name": "solar"}`` or
    ``{"abundances": {...}}`` (number ratios) -- and optional modifiers applied in this order:
    ``metallicity`` [M/H] and ``alpha_enhancement`` [alpha/Fe] (dex), ``abundance_offsets``
    (element -> dex), ``helium_mass_fraction`` Y (metal mass fractions kept).  Modifiers that
    change nothing (0 dex) are dropped, so equal mixtures get equal keys."""
    if isinstance(c, str):
        c = {"name": c}
    if not isinstance(c, Mapping):
        raise InputError("composition must be a name like 'solar' or a table of abundances")
    c = dict(c)
    c.pop("axis", None)  # the composition axis is read by TableSpec.from_mapping
    if "abundances" in c:
        if "name" in c:
            raise InputError("composition: give either a name or abundances, not both")
        ab = {}
        for sym, val in _table(c["abundances"], "composition.abundances").items():
            val = _number(val, f"composition.abundances.{sym}")
            if not val > 0:
                raise InputError(f"composition: abundance of {sym} must be positive, got {val}")
            ab[SYMBOLS[atomic_number(sym)]] = val
        if not ab:
            raise InputError("composition.abundances is empty")
        out: dict[str, Any] = {"abundances": dict(sorted(ab.items(),
                                                         key=lambda kv: atomic_number(kv[0])))}
    else:
        name = c.get("name", "solar")
        if not isinstance(name, str):
            raise InputError(f"composition.name must be text such as 'solar', got {_shown(name)}")
        out = {"name": name}
    for k in ("metallicity", "alpha_enhancement"):  # [M/H], [alpha/Fe] in dex
        if k in c and _number(c[k], f"composition.{k}") != 0.0:
            out[k] = float(c[k])
    offsets = {}
    for sym, val in dict(c.get("abundance_offsets", {})).items():
        z = atomic_number(sym)
        if z == 1:
            raise InputError("composition.abundance_offsets: offsets are relative to hydrogen; "
                             "hydrogen cannot have one")
        if _number(val, f"composition.abundance_offsets.{sym}") != 0.0:
            offsets[SYMBOLS[z]] = float(val)
    if offsets:
        out["abundance_offsets"] = dict(sorted(offsets.items(),
                                               key=lambda kv: atomic_number(kv[0])))
    if "helium_mass_fraction" in c:
        y = _number(c["helium_mass_fraction"], "composition.helium_mass_fraction")
        if not 0 < y < 1:
            raise InputError(f"composition.helium_mass_fraction: Y must lie in (0, 1), got {y}")
        out["helium_mass_fraction"] = y
    extra = set(c) - {"name", "abundances", "metallicity", "alpha_enhancement",
                      "abundance_offsets", "helium_mass_fraction"}
    if extra:
        raise InputError(f"composition: unknown key(s) {sorted(extra)}; give 'name' or "
                         f"'abundances', optionally metallicity, alpha_enhancement, "
                         f"abundance_offsets, helium_mass_fraction, and an [composition.axis]")
    return out


def _physics(p: Mapping[str, Any]) -> dict:
    p = _table(p, "physics")
    known = {"truncation", "lowering", "molecules", "condensates", "completion", "h_minus",
             "radiation", "temperature_range"}
    extra = set(p) - known
    if extra:
        raise InputError(f"physics: unknown key(s) {sorted(extra)}; known: {sorted(known)}")
    lowering = _boolean(p.get("lowering", False), "physics.lowering")
    truncation = p.get("truncation") or None
    if truncation is not None and not isinstance(truncation, str):
        raise InputError(f"physics.truncation must be text such as 'occupation', got "
                         f"{_shown(truncation)}")
    try:  # the solver's rule, from the registry: the scheme it would use for these options
        trunc = _truncation.resolve(truncation, lowering).key
    except InputError as exc:
        raise InputError(f"physics.truncation: {exc}") from None
    molecules = _molecule_set(p.get("molecules", False))
    condensates = _boolean(p.get("condensates", False), "physics.condensates")
    if condensates and molecules == "none":
        raise InputError("physics.condensates needs molecules (e.g. molecules = \"default\")")
    out = {"truncation": trunc, "lowering": lowering, "molecules": molecules,
           "condensates": condensates,
           "completion": _boolean(p.get("completion", False), "physics.completion"),
           "h_minus": _boolean(p.get("h_minus", True), "physics.h_minus")}
    if _boolean(p.get("radiation", False), "physics.radiation"):
        out["radiation"] = True   # only when asked for: existing specs keep their keys
    if p.get("temperature_range") is not None:   # the search of T for a thermal first axis
        rng = p["temperature_range"]
        if not isinstance(rng, (list, tuple)) or len(rng) != 2:
            raise InputError(f"physics.temperature_range must be [low, high] in K, got "
                             f"{_shown(rng)}")
        lo, hi = (_number(x, "physics.temperature_range") for x in rng)
        if not 0 < lo < hi:
            raise InputError(f"physics.temperature_range: need 0 < low < high, got {lo}, {hi}")
        out["temperature_range"] = [lo, hi]
    return out


def _molecule_set(value: Any) -> str:
    """The molecule set of the solver's ``molecules=`` option, one of
    :data:`sahaboltz.equilibrium.molecule_sets.MOLECULE_SETS` (``true`` / ``false`` in a spec file
    mean "default" / "none")."""
    if value is True or value is False:
        return "default" if value else "none"
    if not isinstance(value, str):
        raise InputError(f"physics.molecules must be true, false or a name such as 'default', "
                         f"got {_shown(value)}")
    if value in ("none", "default"):
        return value
    # the other names only when a spec gives one (a cache hit needs no molecule code)
    from sahaboltz.equilibrium.molecule_sets import MOLECULE_SETS
    if value in MOLECULE_SETS:
        return value
    raise InputError(f"physics.molecules must be true, false or one of "
                     f"{', '.join(repr(m) for m in MOLECULE_SETS)}, got {value!r}")


def axis_from_text(name: str, unit: str, text: str, scale: str = "log",
                   option: str | None = None, *, thermal: bool = False,
                   signed: bool = False) -> Axis:
    """Parse a command-line axis: ``MIN:MAX:NUM`` or a comma-separated list of values, each
    optionally with a unit ("1e2:1e6:9 Pa", "5726.85 degC,8000 K"); ``option`` (e.g.
    ``--pressure``) names it in errors.  ``thermal`` and ``signed`` as for
    :meth:`Axis.from_mapping` (a signed quantity may have MIN <= 0 on a linear scale)."""
    from sahaboltz.quantities import parse_range_text, parse_values_text

    where = option or name
    kw = {"thermal": thermal, "signed": signed}
    rng = parse_range_text(text, where, unit, positive=not signed)
    if rng is not None:
        lo, hi, num = rng
        return Axis.from_mapping(name, unit, {"scale": scale, "min": lo, "max": hi, "num": num},
                                 **kw)
    vals = parse_values_text(text, where, unit=unit, positive=not signed)
    try:
        return Axis.from_mapping(name, unit, {"scale": "values", "values": list(vals)}, **kw)
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None


def spec_from_options(temperature: str | None = None, pressure: str | None = None, *,
                      pressure_quantity: str | None = None, temperature_scale: str = "log",
                      temperature_quantity: str = "temperature",
                      temperature_range: Sequence[float] | None = None,
                      pressure_scale: str = "log", composition: str | None = None,
                      truncation: str | None = None, lowering: bool = False,
                      molecules: bool | str = False, condensates: bool = False,
                      completion: bool = False, h_minus: bool = True,
                      fractions: str | Sequence[str] = "all", levels: Sequence[str] = (),
                      partition_functions: Sequence[str] = (),
                      quantities: Sequence[str] | None = None,
                      composition_axis: str | None = None) -> TableSpec:
    """Build a spec from command-line style options (defaults: :data:`DEFAULT_TEMPERATURE`, ...);
    ``composition_axis`` as for ``--composition-axis`` (:func:`composition_axis_from_text`).
    ``temperature_quantity`` names the first axis (``temperature`` or a quantity that
    replaces it, whose values ``temperature`` then gives; the pressure quantity defaults to
    its partner); ``temperature_range`` [K] is where its temperatures are searched."""
    if temperature_quantity not in TEMPERATURE_QUANTITIES:
        raise InputError(f"temperature quantity must be one of {list(TEMPERATURE_QUANTITIES)}")
    tc = THERMAL_CLOSURES.get(temperature_quantity)
    if pressure_quantity is None:
        pressure_quantity = "gas_pressure" if tc is None else tc.partner
    if pressure_quantity not in PRESSURE_QUANTITIES:
        raise InputError(f"pressure quantity must be one of {list(PRESSURE_QUANTITIES)}")
    punit = PRESSURE_QUANTITIES[pressure_quantity]
    if tc is not None:
        if not temperature:
            raise InputError(f"-T/--temperature: give the {tc.name} axis values "
                             f"[{tc.unit}] (no default for it)")
        t_axis = axis_from_text(tc.name, tc.unit, temperature, temperature_scale,
                                "-T/--temperature", thermal=True, signed=tc.signed)
    else:
        t_axis = (axis_from_text("temperature", "K", temperature, temperature_scale,
                                 "-T/--temperature") if temperature
                  else Axis.from_mapping("temperature", "K", DEFAULT_TEMPERATURE))
    if pressure:
        p_axis = axis_from_text(pressure_quantity, punit, pressure, pressure_scale, "--pressure")
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
                               "h_minus": h_minus,
                               "temperature_range": (None if temperature_range is None
                                                     else list(temperature_range))}),
                     Outputs.from_mapping(out),
                     composition_axis_from_text(composition_axis) if composition_axis else None)
