"""Command-line options that describe an equilibrium state, shared by the computing commands.

A state is a composition, a temperature, one pressure-like quantity (the closure) and the
physics options.  Commands add the option groups they need with the ``add_*`` functions and
turn the parsed arguments into solver inputs with :func:`composition_from_args`,
:func:`solver_options` and :func:`closure_from_args`; :func:`describe_state` gives the one-line
statement of the conditions that plots and summaries print.

    p = sub.add_parser("...")
    add_composition_options(p)
    add_closure_options(p)
    add_physics_options(p)
    ...
    comp = composition_from_args(args)
    state = solve_equilibrium(comp, T, **closure_from_args(args, P), **solver_options(args))
"""

from __future__ import annotations

import argparse
import re
from typing import Any

import numpy as np

from sahaboltz.errors import InputError

#: pressure-like closures and their cgs unit (the solver's keyword names)
CLOSURE_UNITS = {"gas_pressure": "dyn cm-2", "electron_pressure": "dyn cm-2",
                 "mass_density": "g cm-3", "hydrogen_density": "cm-3"}
#: short symbols for titles
CLOSURE_SYMBOLS = {"gas_pressure": "P_gas", "electron_pressure": "P_e",
                   "mass_density": "rho", "hydrogen_density": "n_H"}
TRUNCATIONS = ("plain", "lowered", "occupation")


# -- adding options ------------------------------------------------------------------------
def add_composition_options(parser: argparse.ArgumentParser) -> None:
    """``--composition solar|SYM=N,..``, ``--metallicity`` and ``--alpha``."""
    g = parser.add_argument_group("composition")
    g.add_argument("--composition", default="solar", metavar="solar|SYM=N,..",
                   help="'solar' (Asplund et al. 2009, default) or amounts by number, "
                        "e.g. H=1,He=0.1 or Ar=1")
    g.add_argument("--metallicity", type=float, default=0.0, metavar="DEX",
                   help="[M/H]: scale the solar metals by 10^DEX (default 0)")
    g.add_argument("--alpha", type=float, default=0.0, metavar="DEX",
                   help="[alpha/Fe]: extra scaling of O Ne Mg Si S Ar Ca Ti (default 0)")


def add_closure_options(parser: argparse.ArgumentParser) -> None:
    """``--pressure-quantity``: which quantity the ``--pressure`` values are."""
    parser.add_argument("--pressure-quantity", default="gas_pressure",
                        choices=tuple(CLOSURE_UNITS),
                        help="what --pressure gives (cgs: dyn cm-2, g cm-3 or cm-3); "
                             "default gas_pressure")


def add_physics_options(parser: argparse.ArgumentParser) -> None:
    """``--truncation``, ``--lowering``."""
    g = parser.add_argument_group("physics")
    g.add_argument("--truncation", choices=TRUNCATIONS, default=None,
                   help="partition-function truncation (default: plain, or lowered with "
                        "--lowering)")
    g.add_argument("--lowering", action="store_true",
                   help="Debye-Hueckel ionization-potential lowering")


# -- reading them --------------------------------------------------------------------------
def parse_composition(text: str | None, metallicity: float = 0.0, alpha: float = 0.0):
    """A :class:`~sahaboltz.data.composition.Composition` from ``solar`` or ``SYM=N,...``."""
    from sahaboltz.data.composition import Composition, solar

    text = (text or "solar").strip()
    if "=" in text:
        if metallicity or alpha:
            raise InputError("--metallicity/--alpha scale the solar mixture; with explicit "
                             "amounts (SYM=N,..) give the amounts you want instead")
        amounts: dict[str, float] = {}
        for item in text.split(","):
            if not item.strip():
                continue
            if item.count("=") != 1:
                raise InputError(f"composition: write SYMBOL=NUMBER,..., e.g. H=1,He=0.1; "
                                 f"got {item!r}")
            sym, val = (s.strip() for s in item.split("="))
            try:
                amounts[sym] = float(val)
            except ValueError:
                raise InputError(f"composition: amount of {sym} must be a number, "
                                 f"got {val!r}") from None
        name = "+".join(f"{k}" for k in amounts) if len(amounts) <= 4 else "custom"
        return Composition.from_number(amounts, name=name)
    if text.lower() not in ("solar", "asplund2009"):
        raise InputError(f"composition: unknown name {text!r}; use 'solar' or give amounts "
                         "by number, e.g. H=1,He=0.1")
    return solar("asplund2009", metallicity=metallicity, alpha_enhancement=alpha)


def composition_from_args(args: argparse.Namespace):
    """The composition the ``add_composition_options`` options ask for."""
    return parse_composition(getattr(args, "composition", "solar"),
                             getattr(args, "metallicity", 0.0), getattr(args, "alpha", 0.0))


def solver_options(args: argparse.Namespace) -> dict[str, Any]:
    """Keyword arguments of ``solve_equilibrium`` from the physics options."""
    return {"truncation": getattr(args, "truncation", None),
            "lowering": bool(getattr(args, "lowering", False))}


def closure_from_args(args: argparse.Namespace, values: Any) -> dict[str, Any]:
    """``{pressure quantity: values}`` for ``solve_equilibrium``."""
    return {getattr(args, "pressure_quantity", "gas_pressure"): values}


def parse_values(text: str, name: str, *, scale: str = "log") -> np.ndarray:
    """Axis values from ``MIN:MAX:NUM`` (log-spaced unless ``scale='linear'``) or ``V1,V2,..``."""
    text = str(text).strip()
    try:
        if ":" in text:
            parts = text.split(":")
            if len(parts) != 3:
                raise ValueError
            lo, hi, num = float(parts[0]), float(parts[1]), int(parts[2])
            if not (0 < lo < hi) or num < 2:
                raise InputError(f"{name}: need 0 < MIN < MAX and NUM >= 2, got {text!r}")
            return np.geomspace(lo, hi, num) if scale == "log" else np.linspace(lo, hi, num)
        vals = np.array([float(x) for x in text.split(",") if x.strip()])
    except ValueError:
        raise InputError(f"{name}: give MIN:MAX:NUM or comma-separated numbers, "
                         f"got {text!r}") from None
    if vals.size == 0 or not np.all(np.isfinite(vals)) or np.any(vals <= 0):
        raise InputError(f"{name}: values must be positive numbers, got {text!r}")
    return vals


# -- describing ----------------------------------------------------------------------------
def composition_label(composition) -> str:
    """Short name of a composition for titles."""
    name = getattr(composition, "name", "custom")
    name = name.replace(" [a/Fe]=+0", "")
    if name == "asplund2009" or name.startswith("asplund2009 "):
        name = "solar (Asplund+2009)" + name[len("asplund2009"):]
    if name in ("custom",) or len(composition) <= 4:
        parts = ", ".join(f"{s} {x:.3g}" for s, x in composition.as_dict().items())
        return f"{parts} by number" if len(composition) > 1 else f"pure {composition.symbols[0]}"
    return name


def physics_label(truncation: str | None, lowering: bool) -> str:
    """'plain partition functions, ideal gas' and the like."""
    trunc = truncation or ("lowered" if lowering else "plain")
    text = {"plain": "U: all tabulated levels", "lowered": "U cut at the lowered limit",
            "occupation": "U with occupation probabilities"}[trunc]
    return text + (", Debye-Hueckel lowering" if lowering else ", no IP lowering")


def format_value(value: float, unit: str) -> str:
    """``1e+05 dyn cm-2`` -> ``1e5 dyn cm^-2`` for titles."""
    v = float(value)
    text = f"{v:.3g}"
    if "e" in text:
        m, e = text.split("e")
        text = f"{m}e{int(e)}" if m != "1" else f"1e{int(e)}"
    return f"{text} {unit_label(unit)}"


def unit_label(unit: str, tex: bool = False) -> str:
    """'dyn cm-2' -> 'dyn cm^-2' (or mathtext 'dyn cm$^{-2}$' for matplotlib)."""
    if tex:
        return re.sub(r"([A-Za-z])(-?\d+)", r"\1$^{\2}$", unit)
    return re.sub(r"([A-Za-z])(-?\d+)", r"\1^\2", unit)


def describe_state(composition, *, closure: str | None = None, value: Any = None,
                   truncation: str | None = None, lowering: bool = False) -> str:
    """One line naming the conditions: composition; closure = value; physics options."""
    parts = [composition_label(composition)]
    if closure is not None and value is not None:
        v = np.atleast_1d(np.asarray(value, dtype=float))
        sym = CLOSURE_SYMBOLS.get(closure, closure)
        unit = CLOSURE_UNITS.get(closure, "")
        if v.size == 1:
            parts.append(f"{sym} = {format_value(v[0], unit)}")
        else:
            parts.append(f"{sym} = {format_value(v.min(), unit)} .. {format_value(v.max(), unit)}")
    parts.append(physics_label(truncation, lowering))
    parts.append("LTE")
    return "; ".join(parts)


__all__ = ["add_composition_options", "add_closure_options", "add_physics_options",
           "composition_from_args", "solver_options", "closure_from_args", "parse_values",
           "parse_composition", "describe_state", "composition_label", "physics_label",
           "format_value", "unit_label", "CLOSURE_UNITS", "CLOSURE_SYMBOLS"]
