"""``sahaboltz state`` and ``sahaboltz half-ionization``: the ionization balance of one state."""

from __future__ import annotations

from sahaboltz.data.elements import atomic_number, spectroscopic_name
from sahaboltz.equilibrium.closures import CLOSURES, THERMAL_CLOSURES
from sahaboltz.errors import InputError
from sahaboltz.faces.output import add_format_option, emit
from sahaboltz.faces.state_options import (CLOSURE_FLAGS, CLOSURE_UNITS, add_mixture_options,
                                           add_temperature_option, number_option, parse_mix,
                                           quantity_option, solver_options)

def register(sub) -> None:
    p = sub.add_parser("state", help="stage fractions of a gas at one state, or along a "
                                     "structure file (--from)",
                       description="Solve the LTE ionization balance of a mixture at one state "
                                   "and list the stage fractions of the chosen elements; or, "
                                   "with --from FILE, at every row of a model structure "
                                   "(a temperature and a pressure-like column) and write the "
                                   "chosen species' fractions, number densities and level "
                                   "populations per row.")
    add_temperature_option(p, several=False)
    grp = p.add_mutually_exclusive_group()
    for dest, flag, text in CLOSURE_FLAGS:
        grp.add_argument(flag, dest=dest, type=quantity_option(CLOSURE_UNITS[dest]),
                         metavar="X", help=text)
    thermal = p.add_mutually_exclusive_group()
    for c in THERMAL_CLOSURES.values():
        thermal.add_argument(c.flag, dest=c.name, default=None, metavar="X",
                             type=quantity_option(c.unit, positive=False),
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
    p.add_argument("--min-fraction", type=number_option(minimum=0.0), default=1e-6, metavar="F",
                   help="hide stages below this fraction of their element (default 1e-6)")
    p.add_argument("--dominant-only", action="store_true",
                   help="one row per element: its dominant stage")
    p.add_argument("--budget", action="store_true",
                   help="with --molecules: where each listed element's nuclei are (atoms, "
                        "each molecule), as fractions")
    p.add_argument("--plasma", action="store_true",
                   help="also print Debye length, coupling parameter and the McWhirter check")
    s = p.add_argument_group("a model structure (--from)")
    s.add_argument("--from", dest="structure", metavar="FILE",
                   help="solve every row of this CSV or whitespace table (a header line naming "
                        "the columns, units in brackets: 'T [K]  P_gas [Pa]')")
    s.add_argument("--temperature-column", metavar="NAME",
                   help="the temperature column (default: the one named T or temperature)")
    s.add_argument("--pressure-column", metavar="NAME",
                   help="the pressure-like column (default: the one named P, P_gas, P_e, rho, "
                        "n_H ...)")
    s.add_argument("--pressure-quantity", choices=tuple(CLOSURE_UNITS), default=None,
                   help="what the pressure-like column is (default: from its name)")
    s.add_argument("--temperature-unit", metavar="UNIT",
                   help="unit of the temperature column when its header has none (default K)")
    s.add_argument("--pressure-unit", metavar="UNIT",
                   help="unit of the pressure-like column when its header has none "
                        "(default: cgs)")
    s.add_argument("--species", default=None, metavar="LIST",
                   help="species whose fraction and number density to write, e.g. "
                        "'H I,Fe I,Fe II' (default: the stages of --elements)")
    s.add_argument("--levels", action="append", default=[], metavar="SPECIES:IDX",
                   help="level populations to write, e.g. 'Fe I:0-4' (repeatable)")
    s.add_argument("-o", "--output", metavar="FILE",
                   help="write the rows to FILE.csv, FILE.json or FILE.h5 (default: print)")
    add_format_option(p)
    p.set_defaults(func=run_state)

    p = sub.add_parser("half-ionization",
                       help="temperatures where each ionization of an element is half complete",
                       description="At a fixed electron or gas pressure, the temperature of each "
                                   "stage transition q -> q+1 of an element, where half of the "
                                   "element is above stage q.")
    p.add_argument("element", help="element symbol, e.g. H, Fe")
    grp = p.add_mutually_exclusive_group(required=True)
    grp.add_argument("--electron-pressure", type=quantity_option("dyn cm-2"), metavar="X",
                     help="P_e [dyn cm^-2, or with a unit]")
    grp.add_argument("--gas-pressure", type=quantity_option("dyn cm-2"), metavar="X",
                     help="P_gas [dyn cm^-2, or with a unit]")
    p.add_argument("--mix", default=None, metavar="MIX",
                   help="'solar' or amounts 'H:0.9,He:0.1' (default: the pure element)")
    p.add_argument("--by", choices=("number", "mass"), default="number")
    p.add_argument("-T", "--temperature", metavar="MIN:MAX",
                   help="temperature range searched [K, or each with a unit] (default 1000:1e6)")
    p.add_argument("--tmin", type=quantity_option("K"), default=None, metavar="K",
                   help="the lower end of -T alone")
    p.add_argument("--tmax", type=quantity_option("K"), default=None, metavar="K",
                   help="the upper end of -T alone")
    p.add_argument("--lowering", action="store_true",
                   help="Debye-Hueckel lowering of the ionization energies (self-consistent)")
    p.add_argument("--no-h-minus", action="store_true")
    add_format_option(p)
    p.set_defaults(func=run_half)


def _elements(args, comp) -> list[str]:
    if args.elements:
        return [e.strip() for e in args.elements.split(",") if e.strip()]
    if args.mix.strip().lower() == "solar":
        return [e for e in ("H", "He", "C", "N", "O", "Na", "Mg", "Si", "Ca", "Fe") if e in comp]
    return comp.symbols


def run_state(args) -> int:
    from sahaboltz.equilibrium import solve_equilibrium, stage_table
    from sahaboltz.quantities import parse_quantity

    if args.structure:
        return run_structure(args)
    for opt in ("temperature_column", "pressure_column", "pressure_quantity", "temperature_unit",
                "pressure_unit", "species", "output"):
        if getattr(args, opt) is not None:
            raise InputError(f"--{opt.replace('_', '-')} goes with --from FILE")
    if args.levels:
        raise InputError("--levels goes with --from FILE")
    thermal = {name: getattr(args, name) for name in THERMAL_CLOSURES
               if getattr(args, name, None) is not None}
    if args.temperature is None and not thermal:
        raise InputError("-T/--temperature is needed (or --from FILE for a structure, or "
                         + " / ".join(c.flag for c in THERMAL_CLOSURES.values())
                         + " with its partner closure)")
    temperature = None
    if args.temperature is not None:
        temperature = parse_quantity(args.temperature, "K", "-T/--temperature")
        if not temperature > 0:
            raise InputError(f"-T/--temperature must be positive, got {args.temperature!r}")
    extra = {}
    if args.temperature_range:
        try:
            extra["temperature_range"] = tuple(float(v) for v in
                                               args.temperature_range.split(","))
        except ValueError:
            raise InputError(f"--temperature-range: give LO,HI in K, got "
                             f"{args.temperature_range!r}") from None
    comp = parse_mix(args.mix, args.by, args.metallicity, args.alpha)
    closure = {dest: getattr(args, dest) for dest, _, _ in CLOSURE_FLAGS
               if getattr(args, dest) is not None}
    if not closure:
        raise InputError("give one of " + ", ".join(f for _, f, _ in CLOSURE_FLAGS)
                         + " (e.g. --gas-pressure 1e5 or --gas-pressure '1 atm')")
    state = solve_equilibrium(comp, temperature, **closure, **thermal, **extra,
                              radiation=args.radiation, **solver_options(args))
    temperature = float(state.temperature)
    elements = _elements(args, comp)
    meta = state.summary()
    meta["mixture"] = comp.name
    (name, value), = closure.items()
    meta["closure"] = name
    # the given value, not the solved one (equal to the solver's tolerance, 1e-12)
    meta[f"{name}_{CLOSURE_UNITS[name].replace(' ', '_')}"] = float(value)
    if args.budget:
        return _emit_budget(state, elements, args, meta)
    rows = stage_table(state, elements, min_fraction=args.min_fraction)
    if args.dominant_only:
        rows = [r for r in rows if r["dominant"]]
    if args.plasma:
        meta["debye_length_cm"] = float(state.debye_length)
        meta["coupling_parameter"] = float(state.coupling_parameter)
        meta["mcwhirter_min_n_e_cm-3"] = float(state.mcwhirter_density())
        meta["lte_mcwhirter"] = bool(state.lte_valid())
    meta.update(thermo_summary(state))
    if args.format == "table":
        for r in rows:
            r["dominant"] = "*" if r["dominant"] else ""
    elif args.format == "csv":  # every row carries the conditions of the state
        rows = [{**_conditions(meta), **r} for r in rows]
    emit(rows, args.format, title=f"LTE ionization balance at T = {temperature:g} K",
         meta=meta)
    return 0


def thermo_summary(state, index=None) -> dict:
    """The thermodynamics block of one state (``index``; scalar states: None), keyed with
    units; says whether radiation is included, or why there is no block."""
    from sahaboltz.equilibrium.thermo_quantities import QUANTITIES
    try:
        th = state.thermodynamics()
    except InputError as exc:
        return {"thermodynamics": f"not available ({exc})"}
    idx = () if index is None else index
    out = {"thermodynamics": ("matter and radiation (a T^4)" if th.radiation else
                              "matter only (radiation not included; --radiation adds it)")}
    for name, (unit, _) in QUANTITIES.items():
        if name == "mean_molecular_weight":
            continue
        key = f"{name}_{unit.replace(' ', '_')}" if unit else name
        out[key] = float(th.get(name)[idx])
        if name == "pressure" and state.lowering:
            # the gas-pressure closure fixes kT sum n; the pressure adds this to it
            out["debye_hueckel_pressure_dyn_cm-2"] = float(th.debye_hueckel_pressure[idx])
    return out


#: the conditions every CSV row of ``state`` repeats (the CSV has no place for metadata)
CONDITION_KEYS = ("temperature_K", "gas_pressure_dyn_cm-2", "electron_pressure_dyn_cm-2",
                  "n_e_cm-3", "mass_density_g_cm-3")


def _conditions(meta: dict) -> dict:
    return {k: meta[k] for k in CONDITION_KEYS if k in meta}


def run_structure(args) -> int:
    """``state --from FILE``: every row of a structure file in one vectorized solve."""
    from sahaboltz.equilibrium import solve_equilibrium
    from sahaboltz.faces.structure import read_structure, structure_rows, write_structure
    from sahaboltz.tables.spec import _parse_levels, normalise_species

    given = [f for d, f, _ in CLOSURE_FLAGS if getattr(args, d) is not None]
    if args.temperature is not None:
        given.insert(0, "-T/--temperature")
    if given:
        raise InputError("--from FILE takes the temperatures and pressures from the file; "
                         f"leave out {', '.join(given)}")
    if args.budget or args.dominant_only or args.plasma:
        raise InputError("--budget, --dominant-only and --plasma are for one state, not --from")
    st = read_structure(args.structure, temperature_column=args.temperature_column,
                        pressure_column=args.pressure_column,
                        pressure_quantity=args.pressure_quantity,
                        temperature_unit=args.temperature_unit, pressure_unit=args.pressure_unit)
    comp = parse_mix(args.mix, args.by, args.metallicity, args.alpha)
    try:
        levels = [_parse_levels(e) for e in args.levels]
    except InputError as exc:
        raise InputError(f"--levels: {exc}") from None
    if args.species:
        species = [normalise_species(s) for s in args.species.split(",") if s.strip()]
    else:
        species = []
        for el in _elements(args, comp):
            z = atomic_number(el)
            species += [spectroscopic_name(z, q) for q in range(min(z, 2) + 1)]
    state = solve_equilibrium(comp, st.temperature, **{st.closure: st.value},
                              **solver_options(args))
    names, cols = structure_rows(st, state, species, levels)
    meta = {"source": st.path, "rows": len(st), "mixture": comp.name, "closure": st.closure,
            "truncation": state.summary(0)["truncation"] if state.shape else "",
            "lowering": bool(args.lowering), "units": "K, cm-3, dyn cm-2, g cm-3"}
    if args.output:
        path = write_structure(args.output, names, cols, meta)
        emit([{"file": str(path), "rows": len(st), "columns": len(names)}], args.format,
             title="structure solved")
        return 0
    rows = [{n: float(cols[n][r]) for n in names} for r in range(len(st))]
    emit(rows, args.format, title=f"LTE populations along {st.path}", meta=meta)
    return 0


def _search_range(args) -> tuple[float, float]:
    """(T_min, T_max) [K] of half-ionization: -T MIN:MAX, --tmin/--tmax, default 1e3 - 1e6."""
    from sahaboltz.quantities import parse_quantity

    t_min, t_max = 1e3, 1e6
    if args.temperature is not None:
        parts = str(args.temperature).split(":")
        if len(parts) != 2:
            raise InputError(f"-T/--temperature: give the range searched as MIN:MAX (e.g. "
                             f"3000:50000 or '3000 K:50000 K'), got {args.temperature!r}")
        t_min, t_max = (parse_quantity(x.strip(), "K", "-T/--temperature") for x in parts)
    t_min = args.tmin if args.tmin is not None else t_min
    t_max = args.tmax if args.tmax is not None else t_max
    if not 0 < t_min < t_max:
        raise InputError(f"-T/--temperature: the range searched must run from a lower to a "
                         f"higher positive temperature, got {t_min:g} to {t_max:g} K")
    return t_min, t_max


def run_half(args) -> int:
    from sahaboltz.equilibrium import half_ionization_temperatures

    comp = parse_mix(args.mix, args.by) if args.mix else None
    args.tmin, args.tmax = _search_range(args)
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


def _emit_budget(state, elements, args, meta) -> int:
    """Element budget: the share of each element's nuclei in atoms/ions and in each molecule."""
    if not hasattr(state, "element_budget"):
        raise InputError("--budget needs molecules: add --molecules default (or all)")
    rows = []
    for el in elements:
        for where, share in state.element_budget(el).items():
            value = float(share)
            if where == "atoms" or value >= args.min_fraction:
                rows.append({"element": el, "in": "atoms and ions" if where == "atoms" else where,
                             "fraction": value})
    meta["molecules"] = len(state.molecule_names)
    if args.format == "csv":
        rows = [{**_conditions(meta), **r} for r in rows]
    emit(rows, args.format, title=f"element budget at T = {meta['temperature_K']:g} K",
         meta=meta)
    return 0
