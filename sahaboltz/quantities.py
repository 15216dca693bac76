"""Turning user input (astropy Quantities, plain floats or text with a unit) into checked
numbers.

Every public function that takes a physical quantity passes it through :func:`as_positive_array`
(or :func:`as_array`), so bad input fails early with a message naming the argument instead of
propagating as a silent NaN.  A temperature may be given on any astropy temperature scale
(``u.deg_C``, ``u.deg_F``, ``u.K``): it is converted to kelvin.

:func:`parse_quantity` reads the text of a command-line option or a file header ("1 atm",
"1e4 Pa", "6000 K", "5726.85 degC"; a bare number is in the documented cgs unit); it imports
astropy only when the text carries a unit.
"""

from __future__ import annotations

from typing import Any

import sys

import numpy as np

from sahaboltz.errors import InputError


def _units():
    """astropy.units, imported on first need: plain numbers and unit-free option text are
    parsed without it (a command-line cache hit must not pay its ~0.15 s import)."""
    import astropy.units as u
    return u


def as_array(value: Any, unit: str | u.UnitBase, name: str, *, allow_zero: bool = True,
             allow_negative: bool = True, equivalencies=None) -> np.ndarray:
    """Return ``value`` as a float64 array in ``unit``.

    Parameters
    ----------
    value : float, array_like or astropy.units.Quantity
        A plain number is taken to be in ``unit`` already; a Quantity is converted.
    unit : str or astropy unit
        The documented unit of the argument (e.g. ``"K"``, ``"cm-3"``, ``"dyn cm-2"``).
    name : str
        The argument's name, used in error messages.
    allow_zero, allow_negative : bool
        Whether zero / negative values are acceptable.

    Raises
    ------
    InputError
        If the value is not numeric, has incompatible units, or is NaN, infinite, zero or
        negative where that is not allowed.
    """
    u = sys.modules.get("astropy.units")  # a Quantity implies astropy.units is imported
    if u is not None and isinstance(value, u.Quantity):
        unit = u.Unit(unit)
        equivalencies = list(equivalencies or [])
        if unit.physical_type == "temperature":  # Celsius, Fahrenheit ... -> K
            equivalencies += u.temperature()
        try:
            arr = value.to_value(unit, equivalencies=equivalencies)
        except u.UnitConversionError as exc:
            raise InputError(f"{name}: cannot convert {value.unit} to {unit} ({exc})") from None
    else:
        arr = value
    try:
        arr = np.asarray(arr, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number or an array of numbers in {unit}, "
                         f"got {value!r}") from None
    if arr.size == 0:
        raise InputError(f"{name} is empty")
    bad = ~np.isfinite(arr)
    if bad.any():
        raise InputError(f"{name} must be finite; got {_first(arr, bad)} "
                         f"({int(bad.sum())} bad value(s))")
    if not allow_negative and (arr < 0).any():
        raise InputError(f"{name} must not be negative; got {_first(arr, arr < 0)} {unit}")
    if not allow_zero and (arr == 0).any():
        raise InputError(f"{name} must not be zero")
    return arr


def as_positive_array(value: Any, unit: str | u.UnitBase, name: str, **kw) -> np.ndarray:
    """Like :func:`as_array` but every element must be strictly positive."""
    arr = as_array(value, unit, name, **kw)
    if (arr <= 0).any():
        raise InputError(f"{name} must be positive; got {_first(arr, arr <= 0)} {unit}")
    return arr


def _first(arr: np.ndarray, mask: np.ndarray) -> str:
    idx = np.argwhere(mask)[0]
    where = f" at index {tuple(int(i) for i in idx)}" if arr.ndim else ""
    return f"{arr[tuple(idx)] if arr.ndim else arr.item()}{where}"


#: spellings of units astropy does not know, as people type them on a command line
_UNIT_ALIASES = {"degC": "deg_C", "°C": "deg_C", "C": "deg_C", "celsius": "deg_C",
                 "degF": "deg_F", "°F": "deg_F", "F": "deg_F", "fahrenheit": "deg_F",
                 "cm^-3": "cm-3", "cm**-3": "cm-3", "m^-3": "m-3", "g/cm3": "g cm-3",
                 "g/cm^3": "g cm-3", "kg/m3": "kg m-3", "kg/m^3": "kg m-3",
                 "dyn/cm2": "dyn cm-2", "dyn/cm^2": "dyn cm-2", "dyn cm^-2": "dyn cm-2",
                 "N/m2": "Pa", "N/m^2": "Pa"}


def split_number_unit(text: str) -> tuple[str, str]:
    """``"1e4 Pa"`` -> ``("1e4", "Pa")``, ``"1atm"`` -> ``("1", "atm")``, ``"5"`` -> ``("5", "")``."""
    import re

    m = re.match(r"\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$", text)
    if not m:
        return text.strip(), ""
    return m.group(1), m.group(2)


def unit_of(text: str, unit: str, name: str):
    """The astropy unit written in ``text`` (aliases such as 'degC' allowed), checked to be
    convertible to ``unit``."""
    text = _UNIT_ALIASES.get(text.strip(), text.strip())
    u = _units()
    from astropy.units import cds, imperial

    try:  # astropy's standard atmosphere, mmHg and psi live in its cds and imperial sets
        with u.add_enabled_units([cds.atm, cds.mmHg, imperial.psi]):
            given = u.Unit(text)
    except ValueError:
        raise InputError(f"{_prefix(name)}unknown unit {text!r}") from None
    target = u.Unit(unit)
    eq = u.temperature() if target.physical_type == "temperature" else []
    try:
        (1.0 * given).to(target, equivalencies=eq)
    except u.UnitConversionError:
        raise InputError(f"{_prefix(name)}a unit of {target.physical_type} is needed "
                         f"(e.g. {target}), got {text!r} ({given.physical_type})") from None
    return given


def convert(values, given, unit: str):
    """``values`` (float or array) in the astropy unit ``given``, converted to ``unit``."""
    u = _units()
    target = u.Unit(unit)
    eq = u.temperature() if target.physical_type == "temperature" else []
    return (np.asarray(values, dtype=float) * given).to_value(target, equivalencies=eq)


def parse_quantity(text: Any, unit: str, name: str, *, default_unit: str | None = None) -> float:
    """A number in ``unit`` from text such as ``"1 atm"``, ``"1e4 Pa"``, ``"5726.85 degC"``.

    A bare number is taken to be in ``default_unit`` (default: ``unit``, the documented cgs
    unit).  Raises :class:`InputError` naming ``name`` (e.g. the option ``--gas-pressure``)
    when the text is not a number with a unit of the right kind.
    """
    if isinstance(text, (int, float, np.floating, np.integer)) and not isinstance(text, bool):
        value = float(text)
        given_unit = default_unit
    else:
        if "," in str(text) or ":" in str(text):
            raise InputError(f"{_prefix(name)}give one value here (e.g. '6000' or '6000 K'), "
                             f"got {text!r}")
        number, given_unit = split_number_unit(str(text))
        try:
            value = float(number)
        except ValueError:
            raise InputError(f"{_prefix(name)}expected a number with an optional unit "
                             f"(e.g. '1e5', '1 atm', '6000 K'), got {text!r}") from None
        given_unit = given_unit or default_unit
    if given_unit and given_unit != unit:
        value = float(convert(value, unit_of(given_unit, unit, name), unit))
    if not np.isfinite(value):
        raise InputError(f"{_prefix(name)}must be finite, got {text!r}")
    return value


def _prefix(name: str) -> str:
    return f"{name}: " if name else ""


def parse_range_text(text: str, name: str, unit: str | None = None, *, positive: bool = True
                     ) -> tuple[float, float, int] | None:
    """``"MIN:MAX:NUM"`` -> (min, max, num) in ``unit`` (a unit may follow each number or NUM
    alone: "1:10:5 atm"); None when ``text`` is not a range.  ``positive=False`` lets MIN be
    zero or negative (a quantity whose zero point is a convention)."""
    text = str(text).strip()
    if ":" not in text:
        return None
    parts = text.split(":")
    if len(parts) != 3:
        raise InputError(f"{name}: give MIN:MAX:NUM (e.g. 3000:12000:40) or comma-separated "
                         f"values, got {text!r}")
    num_text, tail = split_number_unit(parts[2])
    try:
        num = int(num_text)
    except ValueError:
        raise InputError(f"{name}: NUM of MIN:MAX:NUM must be a whole number, "
                         f"got {parts[2].strip()!r}") from None
    lo, hi = (_one_value(x, name, unit, tail) for x in parts[:2])
    if not ((0 < lo or not positive) and lo < hi) or num < 2:
        raise InputError(f"{name}: need {'0 < ' if positive else ''}MIN < MAX and NUM >= 2, "
                         f"got {text!r}")
    return lo, hi, num


def parse_values_text(text: str, name: str, *, scale: str = "log", unit: str | None = None,
                      positive: bool = True) -> np.ndarray:
    """Values from ``MIN:MAX:NUM`` (log-spaced unless ``scale='linear'``) or ``V1,V2,..``.

    With ``unit`` (the documented cgs unit) every value may carry a unit ("1 atm",
    "5000 K:12000 K:40"); a unit written once at the end ("1e2,1e4,1e6 Pa", "1:10:5 atm")
    applies to the bare numbers before it.  ``name`` (the option, e.g. ``--gas-pressure``)
    starts every error message.
    """
    rng = parse_range_text(text, name, unit, positive=positive)
    if rng is not None:
        lo, hi, num = rng
        if scale not in ("log", "linear"):
            raise InputError(f"{name}: the spacing must be 'log' or 'linear', got {scale!r}")
        vals = np.geomspace(lo, hi, num) if scale == "log" else np.linspace(lo, hi, num)
        vals[0], vals[-1] = lo, hi
        return vals
    items = [x.strip() for x in str(text).split(",") if x.strip()]
    if not items:
        raise InputError(f"{name}: give MIN:MAX:NUM or comma-separated values, got {text!r}")
    tail = split_number_unit(items[-1])[1] if unit else ""
    vals = np.array([_one_value(x, name, unit, tail) for x in items])
    if positive and np.any(vals <= 0):
        raise InputError(f"{name}: values must be positive, got {text!r}")
    return vals


def _one_value(text: str, name: str, unit: str | None, default_unit: str) -> float:
    if unit is None:
        try:
            v = float(text)
        except ValueError:
            raise InputError(f"{name}: give MIN:MAX:NUM or comma-separated numbers, "
                             f"got {text!r}") from None
        if not np.isfinite(v):
            raise InputError(f"{name}: values must be finite, got {text!r}")
        return v
    return parse_quantity(text, unit, name, default_unit=default_unit or None)
