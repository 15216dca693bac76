"""``sahaboltz state`` and ``sahaboltz half-ionization``: the ionization balance of one state."""

from __future__ import annotations

from sahaboltz.equilibrium.closures import CLOSURES, THERMAL_CLOSURES
from sahaboltz.faces.output import add_format_option, emit
from sahaboltz.faces.state_options import (CLOSURE_FLAGS, add_mixture_options, parse_mix,
                                           solver_options)

def register(sub) -> None:
    p = sub.add_parser("state", help="stage fractions of a gas at one temperature and pressure",
                       description="Solve the LTE ionization balance of a mixture at one state "
                                   "and list the stage fractions of the chosen elements.")
    p.add_argument("-T", "--temperature", type=float, default=None, metavar="K",
                   help="temperature [K] (or give one of the thermal options below instead)")
    grp = p.add_mutually_exclusive_group(required=True)
    for dest, flag, text in CLOSURE_FLAGS:
        grp.add_argument(flag, dest=dest, type=float, metavar="X", help=text)
    thermal = p.add_mutually_exclusive_group()
    for c in THERMAL_CLOSURES.values():
        thermal.add_argument(c.flag, dest=c.name, type=float, default=None, metavar="X",
                             help=f"in place of -T: {c.long_name} [{c.unit}], with "
                                  f"{CLOSURES[c.partner].flag}")
    p.add_argument("--temperature-range", default=None, metavar="LO,HI",
                   help="temperatures searched with a thermal option [K] (default 1000,1e8)")
    p.add_argument("--radiation", action="store_true",
                   help="include black-body radiation at T in the thermodynamics block")
    add_mixture_options(p)
    p.add_argument("--elements", default=None, metavar="LIST",
                   help="comma-separated elements to list (default: all of a custom mix; "
                        "H,He,C,N,O,Na,Mg,Si,Ca,Fe for solar)")
    p.add_argument("--min-fraction", type=float, default=1e-6, metavar="F",
                   help="hide stages below this fraction of their element (default 1e-6)")
    p.add_argument("--dominant-only", action="store_true",
                   help="one row per element: its dominant stage")
    p.add_argument("--budget", action="store_true",
                   help="with --molecules: where each listed element's nuclei are (atoms, "
                        "each molecule), as fractions")
    p.add_argument("--plasma", action="store_true",
                   help="also print Debye length, coupling parameter and the McWhirter check")
    add_format_option(p)
    p.set_defaults(func=run_state)

    p = sub.add_parser("half-ionization",
                       help="temperatures where each ionization of an element is half complete",
                       description="At a fixed electron or gas pressure, the temperature of each "
                                   "stage transition q -> q+1 of an element, where half of the "
                                   "element is above stage q.")
    p.add_argument("element", help="element symbol, e.g. H, Fe")
    grp = p.add_mutually_exclusive_group(required=True)
    grp.add_argument("--electron-pressure", type=float, metavar="X", help="P_e [dyn cm^-2]")
    grp.add_argument("--gas-pressure", type=float, metavar="X", help="P_gas [dyn cm^-2]")
    p.add_argument("--mix", default=None, metavar="MIX",
                   help="'solar' or amounts 'H:0.9,He:0.1' (default: the pure element)")
    p.add_argument("--by", choices=("number", "mass"), default="number")
    p.add_argument("--tmin", type=float, default=1e3, metavar="K", help="default 1000 K")
    p.add_argument("--tmax", type=float, default=1e6, metavar="K", help="default 1e6 K")
    p.add_argument("--lowering", action="store_true")
    p.add_argument("--no-h-minus", action="store_true")
    add_format_option(p)
    p.set_defaults(func=run_half)


def run_state(args) -> int:
    from sahaboltz.equilibrium import solve_equilibrium, stage_table

    comp = parse_mix(args.mix, args.by, args.metallicity, args.alpha)
    closure = {dest: getattr(args, dest) for dest, _, _ in CLOSURE_FLAGS
               if getattr(args, dest) is not None}
    closure.update({name: getattr(args, name) for name in THERMAL_CLOSURES
                    if getattr(args, name, None) is not None})
    if args.temperature is None and not set(closure) & set(THERMAL_CLOSURES):
        from sahaboltz.errors import InputError
        raise InputError("give -T/--temperature, or "
                         + " / ".join(c.flag for c in THERMAL_CLOSURES.values())
                         + " with its partner closure")
    extra = {}
    if args.temperature_range:
        try:
            extra["temperature_range"] = tuple(float(v) for v in
                                               args.temperature_range.split(","))
        except ValueError:
            from sahaboltz.errors import InputError
            raise InputError(f"--temperature-range: give LO,HI in K, got "
                             f"{args.temperature_range!r}") from None
    state = solve_equilibrium(comp, args.temperature, **closure, radiation=args.radiation,
                              **extra, **solver_options(args))
    args.temperature = float(state.temperature)
    if args.elements:
        elements = [e.strip() for e in args.elements.split(",") if e.strip()]
    elif args.mix.strip().lower() == "solar":
        elements = [e for e in ("H", "He", "C", "N", "O", "Na", "Mg", "Si", "Ca", "Fe")
                    if e in comp]
    else:
        elements = comp.symbols
    if args.budget:
        return _emit_budget(state, elements, args)
    rows = stage_table(state, elements, min_fraction=args.min_fraction)
    if args.dominant_only:
        rows = [r for r in rows if r["dominant"]]
    for r in rows:
        r["dominant"] = "*" if r["dominant"] else ""
    meta = state.summary()
    meta["mixture"] = comp.name
    if args.plasma:
        meta["debye_length_cm"] = float(state.debye_length)
        meta["coupling_parameter"] = float(state.coupling_parameter)
        meta["mcwhirter_min_n_e_cm-3"] = float(state.mcwhirter_density())
        meta["lte_mcwhirter"] = bool(state.lte_valid())
    meta.update(thermo_summary(state))
    emit(rows, args.format, title=f"LTE ionization balance at T = {args.temperature:g} K",
         meta=meta)
    return 0


def thermo_summary(state, index=None) -> dict:
    """The thermodynamics block of one state (``index``; scalar states: None), keyed with
    units; says whether radiation is included, or why there is no block."""
    from sahaboltz.equilibrium.thermodynamics import QUANTITIES
    from sahaboltz.errors import InputError
    try:
        th = state.thermodynamics()
    except InputError as exc:
        return {"thermodynamics": f"not available ({exc})"}
    idx = () if index is None else index
    out = {"thermodynamics": ("gas and radiation (a T^4)" if th.radiation else
                              "gas only (radiation not included; --radiation adds it)")}
    for name, (unit, _) in QUANTITIES.items():
        if name == "mean_molecular_weight":
            continue
        key = f"{name}_{unit.replace(' ', '_')}" if unit else name
        out[key] = float(th.get(name)[idx])
    return out


def run_half(args) -> int:
    from sahaboltz.equilibrium import half_ionization_temperatures

    comp = parse_mix(args.mix, args.by) if args.mix else None
    res = half_ionization_temperatures(args.element, electron_pressure=args.electron_pressure,
                                       gas_pressure=args.gas_pressure, composition=comp,
                                       t_min=args.tmin, t_max=args.tmax, lowering=args.lowering,
                                       h_minus=not args.no_h_minus)
    rows = [{"transition": h.label, "temperature_K": h.temperature,
             "n_e_cm-3": h.electron_density} for h in res]
    which = ("P_e" if args.electron_pressure is not None else "P_gas")
    value = args.electron_pressure if args.electron_pressure is not None else args.gas_pressure
    emit(rows, args.format,
         title=f"half-ionization temperatures of {args.element} at {which} = {value:g} dyn cm^-2",
         meta={"searched_K": f"{args.tmin:g} - {args.tmax:g}",
               "truncation": _truncation_used(args.lowering),
               "transitions_found": len(rows)})
    return 0


def _truncation_used(lowering: bool) -> str:
    from sahaboltz.kernels import truncation

    return truncation.used(truncation.resolve(None, lowering), lowering)


def _emit_budget(state, elements, args) -> int:
    """Element budget: the share of each element's nuclei in atoms/ions and in each molecule."""
    if not hasattr(state, "element_budget"):
        from sahaboltz.errors import InputError
        raise InputError("--budget needs molecules: add --molecules default (or all)")
    rows = []
    for el in elements:
        for where, share in state.element_budget(el).items():
            value = float(share)
            if where == "atoms" or value >= args.min_fraction:
                rows.append({"element": el, "in": "atoms and ions" if where == "atoms" else where,
                             "fraction": value})
    meta = state.summary()
    meta["molecules"] = len(state.molecule_names)
    emit(rows, args.format, title=f"element budget at T = {args.temperature:g} K", meta=meta)
    return 0
