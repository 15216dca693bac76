"""``sahaboltz partition`` and ``sahaboltz populations``: U(T) and Boltzmann level populations."""

from __future__ import annotations

import argparse

import numpy as np

from sahaboltz.errors import InputError
from sahaboltz.faces.output import add_format_option, emit
from sahaboltz.faces.state_options import (number_option, quantity_option,
                                           temperatures_from_args, truncation_option)
from sahaboltz.kernels import truncation as registry
# the level data, the partition model and the Boltzmann kernels are imported by the commands
# that use them, not when the parser is built (`sahaboltz partition -h` stays quick)


def _add_truncation_options(p) -> None:
    p.add_argument("--truncation", type=truncation_option, default=None, metavar="SCHEME",
                   help="how the level sum is truncated (default: occupation with "
                        "--electron-density, lowered with --lowering, plain at a temperature "
                        f"alone): {registry.choices_help()}")
    p.add_argument("--completion", action="store_true",
                   help="add hydrogenic Rydberg levels of the parent above the highest "
                        "tabulated level (needs --truncation lowered or occupation)")
    p.add_argument("--electron-density", "--n-e", type=quantity_option("cm-3"), default=None,
                   metavar="CM-3", dest="n_e",
                   help="electron density [cm^-3, or with a unit] for the density-dependent "
                        "truncations (--n-e is the old spelling)")
    p.add_argument("--lowering", action="store_true",
                   help="Debye-Hueckel lowering of the ionization energy at --electron-density "
                        "(as in every command); --lowering-energy gives the value instead")
    p.add_argument("--lowering-energy", type=quantity_option("eV", positive=False, minimum=0.0),
                   default=None, metavar="EV",
                   help="a given ionization-potential lowering [eV, or with a unit] for "
                        "--truncation lowered")
    p.add_argument("--n-neutral", type=quantity_option("cm-3", positive=False, minimum=0.0),
                   default=None, metavar="CM-3", dest="n_neutral",
                   help="density of neutral perturbers [cm^-3] for --truncation occupation")


def register(sub) -> None:
    p = sub.add_parser("partition", help="partition functions U(T) of one or more species",
                       description="Internal partition functions over a list or a range of "
                                   "temperatures, one column per species.")
    p.add_argument("species", nargs="+", help="e.g. 'Fe II' Fe+ 'H I'")
    p.add_argument("-T", "--temperature", nargs="+", metavar="MIN:MAX:NUM|V1,V2,..",
                   help="temperatures [K, or with a unit]: values (space- or comma-separated) "
                        "or MIN:MAX:NUM")
    p.add_argument("--temperature-scale", choices=("log", "linear"), default="linear",
                   help="spacing of a MIN:MAX:NUM range (default linear)")
    p.add_argument("--range", type=number_option(), nargs=3, metavar=("START", "STOP", "N"),
                   help=argparse.SUPPRESS)  # old spelling of -T START:STOP:N
    p.add_argument("--log", action="store_true", help=argparse.SUPPRESS)  # old: log spacing
    p.add_argument("--derivative", action="store_true",
                   help="also print d ln U / d ln T for each species")
    _add_truncation_options(p)
    add_format_option(p)
    p.set_defaults(func=run_partition)

    p = sub.add_parser("populations", help="Boltzmann level populations of a species",
                       description="Fraction of a stage in each level at one temperature "
                                   "(and density), with the partition function.")
    p.add_argument("species", help="e.g. 'Fe II'")
    p.add_argument("-T", "--temperature", type=quantity_option("K"), required=True,
                   metavar="VALUE", help="temperature [K, or with a unit]")
    p.add_argument("--index", type=number_option(integer=True, minimum=0), nargs="+",
                   default=None, metavar="I", help="only these level indices (0 = ground)")
    p.add_argument("--energy-range", type=quantity_option("eV", positive=False), nargs=2,
                   default=None, metavar=("LO", "HI"),
                   help="only levels with LO <= E <= HI [eV]")
    p.add_argument("--configuration", default=None, help="only this configuration (wildcards ok)")
    p.add_argument("--term", default=None, help="only this term label (wildcards ok)")
    p.add_argument("--limit", type=number_option(integer=True, minimum=1), default=None,
                   metavar="N", help="at most N rows")
    _add_truncation_options(p)
    add_format_option(p)
    p.set_defaults(func=run_populations)


def _temperatures(args) -> np.ndarray:
    if args.temperature and args.range:
        raise InputError("give either -T/--temperature or --range, not both")
    if args.range:  # the old spelling, kept working: --range START STOP N [--log]
        start, stop, n = args.range
        if n < 1 or n != int(n):
            raise InputError(f"--range: N must be a positive integer, got {n:g}")
        if args.log:
            if start <= 0 or stop <= 0:
                raise InputError("--range with --log needs positive START and STOP")
            return np.geomspace(start, stop, int(n))
        return np.linspace(start, stop, int(n))
    if args.temperature:
        if args.log:
            args.temperature_scale = "log"
        return temperatures_from_args(args)
    raise InputError("give temperatures with -T/--temperature, e.g. -T 4000 6000 or "
                     "-T 2000:10000:5")


def _lowering_ev(args):
    """The lowering [eV] asked for: a given value, or Debye-Hueckel at --electron-density
    for a neutral's ionization (z = 0; the model applies (z + 1) e^2 / lambda_D per species)."""
    if args.lowering and args.lowering_energy is not None:
        raise InputError("give --lowering (Debye-Hueckel) or --lowering-energy EV, not both")
    if args.lowering_energy is not None:
        return args.lowering_energy
    if args.lowering:
        if args.n_e is None:
            raise InputError("--lowering needs --electron-density (the lowering follows from it)")
        return None
    return None


def _scheme(args) -> str:
    """The truncation to use: the one asked for, else the best for what is given."""
    from sahaboltz.kernels.partition import default_truncation

    low = _lowering_ev(args)
    if args.lowering and args.truncation is None:
        return "lowered"
    return default_truncation(args.truncation, args.n_e, low).key


def _warn_plain(args, species, t, u) -> None:
    """An explicit plain sum next to a given n_e: say where it exceeds the weighted one."""
    if args.truncation != "plain" or args.n_e is None:
        return
    import warnings

    from sahaboltz.equilibrium.validity import PLAIN_EXCESS
    from sahaboltz.errors import TruncationWarning
    from sahaboltz.kernels.partition import PartitionModel

    occ = PartitionModel(species, "occupation").evaluate(t, args.n_e, None, args.n_neutral)
    over = [f"{sp.name} (by {100 * (r - 1):.0f} %)" for sp, r in
            zip(species, (u / occ).max(axis=1)) if r > PLAIN_EXCESS]
    if over:
        warnings.warn(TruncationWarning(
            f"truncation='plain' exceeds the occupation-weighted partition function at "
            f"n_e = {args.n_e:g} cm-3 for {', '.join(over)}: the default with --n-e "
            "(occupation) is the physically sound one"))


def _lowering(args, n_species: int):
    low = _lowering_ev(args)
    if low is None:
        return None
    return np.full(n_species, low)


def run_partition(args) -> int:
    from sahaboltz.data.database import default_database
    from sahaboltz.kernels.partition import PartitionModel
    db = default_database()
    species = [db.species(name) for name in args.species]
    t = _temperatures(args)
    model = PartitionModel(species, _scheme(args), args.completion)
    u, dlnu = model.evaluate_with_derivative(t, args.n_e, _lowering(args, len(species)),
                                             args.n_neutral)
    _warn_plain(args, species, t, u)
    rows = []
    for k, temp in enumerate(t):
        row = {"T_K": float(temp)}
        for i, sp in enumerate(species):
            row[f"U({sp.name})"] = float(u[i, k])
            if args.derivative:
                row[f"dlnU/dlnT({sp.name})"] = float(dlnu[i, k])
        rows.append(row)
    meta = {"truncation": model.truncation, "completion": args.completion}
    if args.n_e is not None:
        meta["n_e_cm-3"] = args.n_e
    if args.lowering_energy is not None:
        meta["lowering_eV"] = args.lowering_energy
    elif args.lowering:
        meta["lowering"] = "Debye-Hueckel at n_e"
    emit(rows, args.format, title="Partition functions", meta=meta)
    return 0


def run_populations(args) -> int:
    from sahaboltz.data.database import default_database
    from sahaboltz.kernels.boltzmann import level_populations, select_levels
    from sahaboltz.kernels.partition import PartitionModel
    db = default_database()
    sp = db.species(args.species)
    criteria = {k: v for k, v in (("index", args.index), ("energy_range_ev", args.energy_range),
                                  ("configuration", args.configuration), ("term", args.term))
                if v is not None}
    sel = select_levels(sp, **criteria) if criteria else np.flatnonzero(sp.bound)
    low = _lowering_ev(args)
    scheme = _scheme(args)
    pops = level_populations(sp, args.temperature, truncation=scheme,
                             completion=args.completion, n_e=args.n_e, lowering_ev=low,
                             n_neutral=args.n_neutral)
    model = PartitionModel([sp], scheme, args.completion)
    u = float(model.evaluate(args.temperature, args.n_e, _lowering(args, 1), args.n_neutral)[0])
    _warn_plain(args, [sp], np.atleast_1d(float(args.temperature)), np.atleast_2d(u))
    lv = sp.levels
    ground = pops[0] if pops[0] > 0 else np.nan
    rows = []
    for i in sel[:args.limit] if args.limit else sel:
        rows.append({"index": int(i), "configuration": str(lv.configuration[i]),
                     "term": str(lv.term[i]), "J": str(lv.j[i]), "g": float(lv.g[i]),
                     "energy_eV": float(lv.energy_ev[i]), "fraction": float(pops[i]),
                     "n/n_ground": float(pops[i] / ground)})
    meta = {"T_K": args.temperature, "U": u, "truncation": scheme,
            "selected_fraction": float(pops[sel].sum())}
    if args.n_e is not None:
        meta["n_e_cm-3"] = args.n_e
    emit(rows, args.format, title=f"Level populations of {sp.name}", meta=meta)
    return 0
