"""Turning user input (astropy Quantities or plain floats) into checked numpy arrays.

Every public function that takes a physical quantity passes it through :func:`as_positive_array`
(or :func:`as_array`), so bad input fails early with a message naming the argument instead of
propagating as a silent NaN.
"""

from __future__ import annotations

from typing import Any

import astropy.units as u
import numpy as np

from sahaboltz.errors import InputError


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
    unit = u.Unit(unit)
    if isinstance(value, u.Quantity):
        try:
            arr = value.to_value(unit, equivalencies=equivalencies or [])
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
        raise InputError(f"{name} must be positive; got {_first(arr, arr <= 0)} {u.Unit(unit)}")
    return arr


def _first(arr: np.ndarray, mask: np.ndarray) -> str:
    idx = np.argwhere(mask)[0]
    where = f" at index {tuple(int(i) for i in idx)}" if arr.ndim else ""
    return f"{arr[tuple(idx)] if arr.ndim else arr.item()}{where}"
