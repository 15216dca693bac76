"""State options shared by the commands that compute and draw equilibria.

The mixture and physics options (``--mix``, ``--by``, ``--metallicity``, ``--alpha``,
``--lowering``, ``--truncation``, ``--no-h-minus``, ``--molecules``) and the closure flags (``--gas-pressure``,
``--mass-density``, ``--hydrogen-density``, ``--electron-pressure``) are defined here once
and used by ``sahaboltz state``, the plot commands and the demo, so that every command takes
the very same options; this module also adds what a grid or a picture needs: closure
flags that take several values (``MIN:MAX:NUM`` or ``V1,V2,..``), and one-line statements of
the conditions for titles and notes.

    p = sub.add_parser("...")
    add_mixture_options(p)
    add_closure_options(p, default=("gas_pressure", "1e5"))
    ...
    comp = composition_from_args(args)
    name, text = closure_from_args(args)
    state = solve_equilibrium(comp, T, **{name: parse_values(text, name)}, **solver_options(args))
"""

from __future__ import annotations

import argparse
import re
from typing import Any

import numpy as np

from sahaboltz.data.composition import Composition, solar
from sahaboltz.equilibrium.closures import CLOSURES
from sahaboltz.equilibrium.molecule_sets import MOLECULE_SETS
from sahaboltz.data.elements import SYMBOLS, atomic_number
from sahaboltz.errors import InputError, UnknownSpeciesError
from sahaboltz.kernels import truncation as _truncation
from sahaboltz.quantities import parse_quantity, parse_values_text

#: pressure-like closures and their cgs unit (the solver's keyword names), from the registry
CLOSURE_UNITS = {name: c.unit for name, c in CLOSURES.items()}
#: short symbols for titles
CLOSURE_SYMBOLS = {name: c.symbol for name, c in CLOSURES.items()}
#: (keyword, flag, help) of every closure
CLOSURE_FLAGS = tuple((name, c.flag, f"{c.long_name} [{c.unit}, or with a unit]")
                      for name, c in CLOSURES.items())
#: closure name -> its command-line flag
CLOSURE_FLAG = {name: c.flag for name, c in CLOSURES.items()}


def truncation_option(text: str) -> str:
    """argparse type of ``--truncation``: a scheme of the registry, as its canonical text."""
    try:
        return _truncation.get(text).key
    except InputError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def add_mixture_options(p) -> None:
    """The mixture and physics options shared by every command that solves a state."""
    p.add_argument("--mix", default="solar", metavar="MIX",
                   help="'solar' (Asplund et al. 2009) or amounts such as 'N:0.78,O:0.21,Ar:0.0093' "
                        "(default solar)")
    p.add_argument("--by", choices=("number", "mass"), default="number",
                   help="whether --mix amounts are by number or mass fractions (default number)")
    p.add_argument("--metallicity", type=number_option(), default=0.0, metavar="DEX",
                   help="[M/H] scaling of the metals (default 0)")
    p.add_argument("--alpha", type=number_option(), default=0.0, metavar="DEX",
                   help="[alpha/Fe] enhancement of O Ne Mg Si S Ar Ca Ti (default 0)")
    p.add_argument("--lowering", action="store_true",
                   help="Debye-Hueckel lowering of the ionization energies (self-consistent)")
    p.add_argument("--truncation", type=truncation_option, default=None, metavar="SCHEME",
                   help="partition-function truncation (default: occupation "
                        "probabilities; lowered with --lowering): "
                        f"{_truncation.choices_help()}")
    p.add_argument("--no-h-minus", action="store_true", help="leave H- out")
    p.add_argument("--molecules", choices=MOLECULE_SETS, default="none",
                   help="molecules in the equilibrium: 'default' (= 'all') the Barklem & Collet "
                        "2016 diatomics (to 10,000 K) and the polyatomic species and molecular "
                        "ions of the NASA polynomials (to 5,000-6,000 K; left out above and "
                        "reported), 'diatomics' the Barklem & Collet ones, 'abundant' 23 common "
                        "diatomics (default none); docs/molecules.md")
    p.add_argument("--condensates", action="store_true",
                   help="with --molecules: gas-condensate equilibrium (corundum, iron, "
                        "forsterite, enstatite, spinel, ... from the NASA polynomials); the "
                        "condensed elements leave the gas")


def parse_mix(text: str, by: str = "number", metallicity: float = 0.0,
              alpha: float = 0.0) -> Composition:
    """'solar' or 'El:amount,El:amount' -> Composition."""
    text = (text or "").strip()
    if text.lower() == "solar":
        return solar(metallicity=metallicity, alpha_enhancement=alpha)
    amounts = {}
    for part in filter(None, (s.strip() for s in text.split(","))):
        if ":" not in part:
            raise InputError(f"--mix: expected 'Element:amount' pairs such as 'Ar:1', got {part!r}")
        el, val = part.split(":", 1)
        try:
            amount = float(val)
        except ValueError:
            raise InputError(f"--mix: amount of {el.strip()} is not a number: {val!r}") from None
        if not (amount > 0 and np.isfinite(amount)):
            raise InputError(f"--mix: amount of {el.strip()} must be a positive number, "
                             f"got {val!r}")
        key = el.strip()
        try:  # "fe" and "Fe" are one element
            key = SYMBOLS[atomic_number(key)]
        except UnknownSpeciesError as exc:
            raise InputError(f"--mix: {exc}") from None
        if key in amounts:
            raise InputError(f"--mix: {key} is given twice ({text!r}); give each element once")
        amounts[key] = amount
    if not amounts:
        raise InputError("--mix: give 'solar' or amounts such as 'N:0.78,O:0.21,Ar:0.0093'")
    comp = (Composition.from_mass_fraction(amounts, name=text) if by == "mass"
            else Composition.from_number(amounts, name=text))
    if metallicity or alpha:
        comp = comp.scaled(metallicity, alpha)
    return comp


def add_closure_options(parser: argparse.ArgumentParser, *, default: tuple[str, str],
                        values: str = "VALUE") -> None:
    """The closure flags of ``sahaboltz state``, taking text (one value, a list or a range).

    Parameters
    ----------
    default : (closure name, text)
        Used when none of the flags is given, e.g. ``("gas_pressure", "1e5")``.
    values : str
        Metavar: "VALUE" for one value, "MIN:MAX:NUM|V1,V2,.." for several.
    """
    grp = parser.add_mutually_exclusive_group()
    for dest, flag, text in CLOSURE_FLAGS:
        extra = f" (default {default[1]})" if dest == default[0] else ""
        grp.add_argument(flag, dest=dest, metavar=values, help=text + extra)
    parser.set_defaults(_closure_default=default)


def closure_from_args(args: argparse.Namespace) -> tuple[str, str]:
    """(closure name, its text) from the closure flags, or the command's default."""
    given = [(dest, getattr(args, dest)) for dest, _, _ in CLOSURE_FLAGS
             if getattr(args, dest, None) is not None]
    return given[0] if given else tuple(args._closure_default)


def composition_from_args(args: argparse.Namespace):
    """The composition the mixture options ask for (see ``parse_mix``)."""
    return parse_mix(args.mix, args.by, args.metallicity, args.alpha)


def solver_options(args: argparse.Namespace) -> dict[str, Any]:
    """Keyword arguments of ``solve_equilibrium`` from the physics options."""
    opts = {"truncation": args.truncation, "lowering": bool(args.lowering),
            "h_minus": not args.no_h_minus}
    if getattr(args, "molecules", "none") != "none":
        opts["molecules"] = args.molecules
    if getattr(args, "condensates", False):
        opts["condensates"] = True
    return opts


def parse_values(text: str, name: str, *, scale: str = "log", unit: str | None = None
                 ) -> np.ndarray:
    """Values from ``MIN:MAX:NUM`` (log-spaced unless ``scale='linear'``) or ``V1,V2,..``;
    with ``unit``, each may carry a unit (:func:`sahaboltz.quantities.parse_values_text`)."""
    return parse_values_text(text, name, scale=scale, unit=unit)


def quantity_option(unit: str, *, positive: bool = True, minimum: float | None = None):
    """argparse ``type=`` of a numeric option with an optional unit ("1 atm", "6000 K");
    a bare number is in ``unit`` (the documented cgs unit).  argparse names the option in
    its message."""
    def parse(text: str) -> float:
        try:
            value = parse_quantity(text, unit, "")
        except InputError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None
        if positive and not value > 0:
            raise argparse.ArgumentTypeError(f"must be positive, got {text!r}")
        if minimum is not None and value < minimum:
            raise argparse.ArgumentTypeError(f"must be at least {minimum:g} {unit}, got {text!r}")
        return value
    parse.__name__ = f"quantity in {unit}"
    return parse


def number_option(*, positive: bool = False, integer: bool = False, minimum: float | None = None):
    """argparse ``type=`` of a plain number (a fraction, a count, dex), checked to be finite
    (and positive, at least ``minimum``, whole) with a message argparse prefixes with the option."""
    def parse(text: str):
        try:
            value = int(text) if integer else float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"expected {'a whole number' if integer else 'a number'}, got {text!r}") from None
        if not np.isfinite(value):
            raise argparse.ArgumentTypeError(f"must be finite, got {text!r}")
        if positive and not value > 0:
            raise argparse.ArgumentTypeError(f"must be positive, got {text!r}")
        if minimum is not None and value < minimum:
            raise argparse.ArgumentTypeError(f"must be at least {minimum:g}, got {text!r}")
        return value
    parse.__name__ = "whole number" if integer else "number"
    return parse


def add_temperature_option(p, *, default: str | None = None, required: bool = False,
                           several: bool = True, scale: str = "linear") -> None:
    """The one temperature option of every command: ``-T/--temperature`` with values
    ``V1,V2,..`` or ``MIN:MAX:NUM`` (each value may carry a unit, e.g. '5726.85 degC'),
    and ``--temperature-scale log|linear`` for the spacing of MIN:MAX:NUM."""
    what = "MIN:MAX:NUM|V1,V2,.." if several else "VALUE"
    text = ("temperatures [K, or with a unit such as '6000 K', '5726.85 degC']: comma-separated "
            "values or MIN:MAX:NUM" if several else
            "temperature [K, or with a unit such as '6000 K', '5726.85 degC']")
    if default is not None:
        text += f" (default {default})"
    p.add_argument("-T", "--temperature", default=default, required=required, metavar=what,
                   help=text)
    if several:
        p.add_argument("--temperature-scale", choices=("log", "linear"), default=scale,
                       help=f"spacing of a MIN:MAX:NUM temperature range (default {scale})")


def temperatures_from_args(args, *, minimum: int = 1) -> np.ndarray:
    """The temperatures [K] of ``-T/--temperature`` (and ``--temperature-scale``)."""
    if args.temperature is None:
        raise InputError("-T/--temperature: give temperatures, e.g. -T 5800 or -T 3000:12000:40")
    texts = args.temperature if isinstance(args.temperature, list) else [args.temperature]
    scale = getattr(args, "temperature_scale", "linear")
    t = np.concatenate([parse_values(x, "-T/--temperature", scale=scale, unit="K")
                        for x in texts])
    if t.size < minimum:
        raise InputError(f"-T/--temperature: give at least {minimum} temperatures, got {t.size}")
    return t


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
    """'U: all tabulated levels, no IP lowering' and the like."""
    scheme = _truncation.resolve(truncation, lowering)
    return f"U: {scheme.label}" + (", Debye-Hueckel lowering" if lowering else ", no IP lowering")


def format_value(value: float, unit: str, tex: bool = False) -> str:
    """``1e+05 dyn cm-2`` -> ``1e5 dyn cm^-2`` for titles (``tex``: mathtext exponents)."""
    v = float(value)
    text = f"{v:.4g}"
    if "e" in text:
        m, e = text.split("e")
        text = f"{m}e{int(e)}" if m != "1" else f"1e{int(e)}"
    return f"{text} {unit_label(unit, tex)}"


def unit_label(unit: str, tex: bool = False) -> str:
    """'dyn cm-2' -> 'dyn cm^-2' (or mathtext 'dyn cm$^{-2}$' for matplotlib)."""
    if tex:
        return re.sub(r"([A-Za-z])(-?\d+)", r"\1$^{\2}$", unit)
    return re.sub(r"([A-Za-z])(-?\d+)", r"\1^\2", unit)


def describe_state(composition, *, closure: str | None = None, value: Any = None,
                   truncation: str | None = None, lowering: bool = False,
                   h_minus: bool = True, tex: bool = False) -> str:
    """One line naming the conditions: composition; closure = value; physics options
    (``tex``: symbols and units in mathtext, for figures)."""
    parts = [composition_label(composition)]
    if closure is not None and value is not None:
        v = np.atleast_1d(np.asarray(value, dtype=float))
        sym = CLOSURE_SYMBOLS.get(closure, closure)
        if tex and closure in CLOSURES:
            sym = f"${CLOSURES[closure].tex}$"
        unit = CLOSURE_UNITS.get(closure, "")
        if v.size == 1:
            parts.append(f"{sym} = {format_value(v[0], unit, tex)}")
        else:
            parts.append(f"{sym} = {format_value(v.min(), unit, tex)} .. "
                         f"{format_value(v.max(), unit, tex)}")
    physics = physics_label(truncation, lowering)
    parts.append("$U$" + physics[1:] if tex and physics.startswith("U:") else physics)
    if not h_minus:
        parts.append("no H$^-$" if tex else "no H-")
    parts.append("LTE")
    return "; ".join(parts)


__all__ = ["add_mixture_options", "add_closure_options", "composition_from_args",
           "solver_options", "closure_from_args", "parse_values", "parse_mix", "describe_state",
           "composition_label", "physics_label", "format_value", "unit_label",
           "CLOSURE_UNITS", "CLOSURE_SYMBOLS", "CLOSURE_FLAG", "quantity_option",
           "number_option", "add_temperature_option", "temperatures_from_args"]
