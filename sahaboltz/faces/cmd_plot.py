"""sahaboltz plot: pictures of LTE equilibria, written as PNG or PDF (by file suffix).

    sahaboltz plot stages Fe --temperature 3000:12000:200 --gas-pressure 1e5 -o fe.png
    sahaboltz plot dominant Fe --temperature 3000:30000:80 --gas-pressure 1e-2:1e6:33 -o fe.pdf
    sahaboltz plot partition "Fe I" "Fe II" --truncations plain,occupation --electron-density 1e15
    sahaboltz plot electron-pressure --temperature 3000:12000:100 --gas-pressure 1e2,1e4,1e6
    sahaboltz plot levels "Fe I" --temperature 4600,6000 --gas-pressure 1e5
    sahaboltz plot thermo --temperature 1500:1e6:121 --gas-pressure 1e-2:1e10:61 --molecules default

Temperatures (-T/--temperature) and pressures are MIN:MAX:NUM or comma-separated values, in
K and cgs units unless a unit is written ('1 atm', '1e2:1e6:9 Pa', '5000 K,8000 K').  The
spacing of a temperature range is --temperature-scale log|linear; pressure ranges are
log-spaced.  The state options (--mix, --by, --metallicity, --alpha, --lowering,
--truncation, --no-h-minus and one of --gas-pressure, --mass-density, --hydrogen-density,
--nuclei-density, --electron-pressure) are those of 'sahaboltz state'.  PNG files are
written at 200 dpi (--dpi); --no-annotations leaves out the title and the note of conditions.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from sahaboltz.errors import InputError
from sahaboltz.faces.output import add_format_option, emit
from sahaboltz.faces.state_options import (CLOSURE_FLAG, CLOSURE_UNITS, add_closure_options,
                                           add_mixture_options, add_temperature_option,
                                           closure_from_args, composition_from_args,
                                           number_option, parse_values, quantity_option,
                                           solver_options, temperatures_from_args)


def register(subparsers) -> None:
    p = subparsers.add_parser("plot", help="draw stage fractions, dominant-stage maps, partition "
                                           "functions, electron pressures, level populations",
                              description=__doc__,
                              formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = p.add_subparsers(dest="plot_command", metavar="PLOT")
    sub.required = True

    s = sub.add_parser("stages", help="stage fractions of an element against temperature")
    s.add_argument("element", help="element symbol, e.g. Fe")
    _temperature(s, "3000:30000:300", "linear")
    add_closure_options(s, default=("gas_pressure", "1e5"))
    s.add_argument("--log", action="store_true", help="logarithmic fraction axis")
    s.add_argument("--min-fraction", type=number_option(positive=True), default=1e-3,
                   metavar="F",
                   help="leave out stages that never reach F (default 1e-3)")
    _state(s)
    _finish(s, _stages)

    b = sub.add_parser("budget", help="where an element's nuclei are (atoms, ions, molecules, "
                                      "condensates) against temperature")
    b.add_argument("element", help="element symbol, e.g. O")
    _temperature(b, "1000:6000:126", "linear")
    add_closure_options(b, default=("gas_pressure", "1e6"))
    b.add_argument("--linear", action="store_true", help="linear fraction axis (default log)")
    b.add_argument("--min-fraction", type=number_option(positive=True), default=1e-3,
                   metavar="F",
                   help="leave out parts that never reach F (default 1e-3)")
    _state(b)
    b.set_defaults(molecules="default")
    _finish(b, _budget)

    d = sub.add_parser("dominant", help="map of the dominant stage of an element over T and P")
    d.add_argument("element", help="element symbol, e.g. Fe")
    _temperature(d, "2000:50000:90", "log")
    add_closure_options(d, default=("gas_pressure", "1e-2:1e8:41"),
                        values="MIN:MAX:NUM|V1,V2,..")
    _state(d)
    _finish(d, _dominant)

    m = sub.add_parser("thermo", help="map of the adiabatic gradient (or Gamma_1, Gamma_3) "
                                      "over T and P")
    m.add_argument("--quantity", default="adiabatic_gradient",
                   choices=("adiabatic_gradient", "gamma1", "gamma3"),
                   help="what to map (default adiabatic_gradient)")
    _temperature(m, "1500:1e6:121", "log")
    add_closure_options(m, default=("gas_pressure", "1e-2:1e10:61"),
                        values="MIN:MAX:NUM|V1,V2,..")
    m.add_argument("--radiation", action="store_true", help="include radiation (a T^4)")
    _state(m)
    _finish(m, _thermo)

    u = sub.add_parser("partition", help="partition functions against temperature")
    u.add_argument("species", nargs="+", help="species, e.g. 'Fe I' 'Fe II' or Fe Fe+")
    _temperature(u, "2000:20000:200", "linear")
    u.add_argument("--truncations", default="plain", metavar="T1,T2,..",
                   help="plain, lowered, occupation (comma-separated; default plain)")
    u.add_argument("--electron-density", type=quantity_option("cm-3"), default=None,
                   metavar="CM-3", help="n_e [cm^-3, or with a unit] held fixed, for the "
                                        "lowered and occupation truncations")
    u.add_argument("--completion", action="store_true",
                   help="hydrogenic completion of the level lists (not for plain)")
    _finish(u, _partition)

    e = sub.add_parser("electron-pressure", help="electron pressure of a mixture against T")
    _temperature(e, "2000:20000:200", "linear")
    e.add_argument("--gas-pressure", default="1e2,1e4,1e6", metavar="P1,P2,..|MIN:MAX:NUM",
                   help="gas pressures [dyn cm^-2], one curve each (default 1e2,1e4,1e6)")
    add_mixture_options(e)
    _finish(e, _electron_pressure)

    v = sub.add_parser("levels", help="level-population (Boltzmann) diagram of one species")
    v.add_argument("species", help="e.g. 'Fe I', 'Ar II'")
    add_temperature_option(v, default="5000")
    add_closure_options(v, default=("gas_pressure", "1e5"))
    v.add_argument("--max-energy", type=quantity_option("eV"), default=None, metavar="EV",
                   help="only levels up to this excitation energy [eV]")
    _state(v)
    _finish(v, _levels)


def _temperature(p, default: str, scale: str) -> None:
    add_temperature_option(p, default=default, scale=scale)


def _state(p) -> None:
    add_mixture_options(p)


def _finish(p, func) -> None:
    p.add_argument("-o", "--output", metavar="FILE.png|FILE.pdf",
                   help="image file to write (default: a name from the plot, .png, here)")
    p.add_argument("--dpi", type=number_option(positive=True), default=None,
                   help="resolution of a PNG file (default 200)")
    p.add_argument("--no-annotations", dest="annotate", action="store_false",
                   help="leave out the title and the note of the conditions")
    add_format_option(p)
    p.set_defaults(func=func)


def _write(args, fig, default_stem: str, what: str, t0: float) -> int:
    from sahaboltz.faces.plots import save_figure

    out = Path(args.output) if args.output else Path(f"{default_stem}.png")
    path = save_figure(fig, out, dpi=args.dpi)
    emit([{"plot": what, "file": str(path), "bytes": path.stat().st_size,
           "seconds": round(time.perf_counter() - t0, 2)}], args.format)
    return 0


def _safe(text: str) -> str:
    return "".join(c if c.isalnum() else "_" for c in text).strip("_")


def _one_closure(args) -> tuple[str, float]:
    name, text = closure_from_args(args)
    vals = parse_values(text, CLOSURE_FLAG[name], unit=CLOSURE_UNITS[name])
    if vals.size != 1:
        raise InputError(f"{CLOSURE_FLAG[name]}: give one value for this plot, got {text!r}")
    return name, float(vals[0])


def _stages(args) -> int:
    from sahaboltz.faces.plots import stage_fractions_plot

    t0 = time.perf_counter()
    closure, value = _one_closure(args)
    fig = stage_fractions_plot(args.element, temperatures_from_args(args), value,
                               composition=composition_from_args(args),
                               pressure_quantity=closure, log=args.log,
                               min_fraction=args.min_fraction, **solver_options(args),
                               annotate=args.annotate)
    return _write(args, fig, f"stages_{_safe(args.element)}", "stage fractions", t0)


def _budget(args) -> int:
    from sahaboltz.faces.plots import element_budget_plot

    t0 = time.perf_counter()
    closure, value = _one_closure(args)
    opts = solver_options(args)
    fig = element_budget_plot(args.element, temperatures_from_args(args), value,
                              composition=composition_from_args(args),
                              pressure_quantity=closure, log=not args.linear,
                              min_fraction=args.min_fraction,
                              molecules=opts.pop("molecules", "none"),
                              condensates=opts.pop("condensates", False), **opts,
                              annotate=args.annotate)
    return _write(args, fig, f"budget_{_safe(args.element)}", "element budget", t0)


def _dominant(args) -> int:
    from sahaboltz.faces.plots import dominant_stage_plot

    t0 = time.perf_counter()
    closure, text = closure_from_args(args)
    fig = dominant_stage_plot(args.element, temperatures_from_args(args),
                              parse_values(text, CLOSURE_FLAG[closure],
                                           unit=CLOSURE_UNITS[closure]),
                              composition=composition_from_args(args),
                              pressure_quantity=closure, **solver_options(args),
                              annotate=args.annotate)
    return _write(args, fig, f"dominant_{_safe(args.element)}", "dominant stage", t0)


def _thermo(args) -> int:
    from sahaboltz.faces.plots import thermo_map_plot

    t0 = time.perf_counter()
    closure, text = closure_from_args(args)
    fig = thermo_map_plot(parse_values(args.temperature, "--temperature"),
                          parse_values(text, closure), quantity=args.quantity,
                          composition=composition_from_args(args), pressure_quantity=closure,
                          radiation=args.radiation, **solver_options(args))
    return _write(args, fig, args.quantity, args.quantity.replace("_", " "), t0)


def _partition(args) -> int:
    from sahaboltz.faces.plots import partition_function_plot

    t0 = time.perf_counter()
    truncs = [x.strip() for x in args.truncations.split(",") if x.strip()]
    fig = partition_function_plot(args.species, temperatures_from_args(args),
                                  truncations=truncs, electron_density=args.electron_density,
                                  completion=args.completion, annotate=args.annotate)
    return _write(args, fig, f"partition_{_safe('_'.join(args.species))}",
                  "partition functions", t0)


def _electron_pressure(args) -> int:
    from sahaboltz.faces.plots import electron_pressure_plot

    t0 = time.perf_counter()
    fig = electron_pressure_plot(temperatures_from_args(args),
                                 parse_values(args.gas_pressure, "--gas-pressure",
                                              unit="dyn cm-2"),
                                 composition=composition_from_args(args), **solver_options(args),
                                 annotate=args.annotate)
    return _write(args, fig, "electron_pressure", "electron pressure", t0)


def _levels(args) -> int:
    from sahaboltz.faces.plots import level_population_plot

    t0 = time.perf_counter()
    closure, value = _one_closure(args)
    fig = level_population_plot(args.species, temperatures_from_args(args),
                                value, composition=composition_from_args(args),
                                pressure_quantity=closure,
                                max_energy_ev=args.max_energy, **solver_options(args),
                                annotate=args.annotate)
    return _write(args, fig, f"levels_{_safe(args.species)}", "level populations", t0)


__all__ = ["register"]
