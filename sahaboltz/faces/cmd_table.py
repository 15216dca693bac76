"""sahaboltz table: build, inspect and query population tables; manage the table cache.

    sahaboltz table template > grid.toml          # an annotated spec file to edit
    sahaboltz table build grid.toml               # build (or find) it in the cache
    sahaboltz table build --temperature 3000:30000:100 --pressure 1e2:1e6:41 -o t.h5
    sahaboltz table build grid.toml --composition-axis metallicity=-2:0.5:6   # a third axis
    sahaboltz table template --temperature-quantity internal_energy > rho_u.toml
    sahaboltz table build --temperature-quantity internal_energy -T 3e11:3e14:31 \
        --pressure 1e-10:1e-4:7 -o rho_u.h5        # (u, rho) axes; T is stored as a field
    sahaboltz table build grid.toml --scheduler tcp://10.0.0.5:8786   # on a Dask cluster
    sahaboltz table inspect t.h5                  # provenance and stored quantities
    sahaboltz table query t.h5 --at 5800,1e5 -q electron_density,fraction_Fe_II
    sahaboltz table cache list | inspect KEY | clear [KEY | --all] | dir
"""

from __future__ import annotations

import argparse
import csv
from dataclasses import replace
import importlib
import os
import sys
import time
from pathlib import Path

import numpy as np

from sahaboltz.equilibrium.closures import CLOSURES, THERMAL_CLOSURES
from sahaboltz.errors import InputError
from sahaboltz.faces.output import add_format_option, emit
from sahaboltz.faces.state_options import add_mixture_options, number_option, parse_mix
from sahaboltz.tables.spec import composition_axis_from_text, normalize_composition


def register(subparsers) -> None:
    p = subparsers.add_parser("table", help="population tables: build, inspect, query, cache",
                              description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = p.add_subparsers(dest="table_command", metavar="ACTION")
    sub.required = True

    t = sub.add_parser("template", help="print an annotated table spec (TOML) to start from")
    t.add_argument("--temperature-quantity", default="temperature",
                   choices=("temperature",) + tuple(THERMAL_CLOSURES),
                   help="the first axis: temperature (default) or a quantity that replaces "
                        "it (internal_energy with a mass_density axis, entropy with "
                        "gas_pressure)")
    t.set_defaults(func=_template)

    b = sub.add_parser("build", help="build a table from a spec file or options")
    b.add_argument("spec", nargs="?", help="spec file (.toml or .json); or give the options below")
    g = b.add_argument_group("grid (when no spec file is given)")
    g.add_argument("-T", "--temperature", metavar="MIN:MAX:NUM|V1,V2,..",
                   help="temperature axis [K, or with a unit] (default 2000:50000, 100 per "
                        "decade); with --temperature-quantity, that quantity's axis in its "
                        "cgs unit or with a unit (a negative MIN: -T=-1e11:1e13:41)")
    g.add_argument("--temperature-quantity", default="temperature",
                   choices=("temperature",) + tuple(THERMAL_CLOSURES),
                   help="the first axis: temperature (default), or internal_energy [erg g-1] "
                        "(with a mass_density axis) or entropy [erg g-1 K-1] (with "
                        "gas_pressure), in place of the temperature, which is then solved "
                        "for and stored as a field")
    g.add_argument("--temperature-scale", choices=("log", "linear"), default="log",
                   help="spacing of a MIN:MAX:NUM first axis (default log); a thermal "
                        "axis is interpolated in ln of its value when log-spaced, else in "
                        "the value")
    g.add_argument("--temperature-range", metavar="LO,HI", default=None,
                   help="with --temperature-quantity: the temperatures searched [K] "
                        "(default 1000,1e8; from 500 K with molecules)")
    g.add_argument("--pressure", metavar="MIN:MAX:NUM|V1,V2,..",
                   help="pressure-like axis in cgs or with a unit, e.g. '1e2:1e6:9' or "
                        "'1e1:1e5:9 Pa' (default gas pressure 1e-2:1e8 dyn cm-2, 10 per decade)")
    g.add_argument("--pressure-quantity", default=None, choices=tuple(CLOSURES),
                   help="default gas_pressure, or the partner of --temperature-quantity")
    g.add_argument("--pressure-scale", choices=("log", "linear"), default="log")
    add_mixture_options(g)
    g.add_argument("--completion", action="store_true",
                   help="hydrogenic completion of the level lists (not with plain truncation)")
    g.add_argument("--fractions", default="all", metavar="all|EL,..",
                   help="stage fractions to store (default all elements)")
    g.add_argument("--levels", action="append", default=[], metavar="SPECIES:IDX",
                   help="level populations to store, e.g. 'Fe II:0-9' (repeatable)")
    g.add_argument("--partition", action="append", default=[], metavar="SPECIES",
                   help="partition functions to store, e.g. 'Fe II' (repeatable)")
    b.add_argument("--composition-axis", metavar="QUANTITY=MIN:MAX:NUM|V1,V2,..",
                   help="a third grid axis over the composition: metallicity ([M/H], dex), "
                        "alpha ([alpha/Fe], dex), Y (helium mass fraction) or an element "
                        "symbol (its abundance offset in dex; abundance:Y for yttrium), e.g. "
                        "metallicity=-2:0.5:6 (also with a spec file without one)")
    b.add_argument("-o", "--output", help="write the table here instead of the cache")
    b.add_argument("--rebuild", action="store_true", help="rebuild even if cached")
    b.add_argument("--workers", type=number_option(integer=True, minimum=1),
                   help="worker processes (default: all cores)")
    b.add_argument("--scheduler", metavar="ADDRESS",
                   help="run the blocks on a Dask cluster: its scheduler's tcp://HOST:PORT or "
                        "scheduler file (.json); needs sahaboltz[dask] (docs/scaling.md)")
    b.add_argument("--no-resume", action="store_true",
                   help="start afresh instead of going on from an interrupted build's record")
    b.add_argument("--chunk-states", type=number_option(integer=True, minimum=1), default=None,
                   help="states per block")
    b.add_argument("--no-progress", action="store_true", help="no progress bar")
    b.add_argument("--compute", metavar="MODULE:FUNCTION",
                   help="advanced: your own compute(spec, T, P) -> dict of arrays instead of "
                        "the equilibrium solver")
    add_format_option(b)
    b.set_defaults(func=_build)

    i = sub.add_parser("inspect", help="provenance and variables of a table")
    i.add_argument("table", help="table file, or a cache key (prefix)")
    i.add_argument("--verify", action="store_true", help="read every chunk (checksums)")
    add_format_option(i)
    i.set_defaults(func=_inspect)

    q = sub.add_parser("query", help="interpolate a table at given points")
    q.add_argument("table", help="table file, or a cache key (prefix)")
    q.add_argument("--at", action="append", default=[], metavar="T,P[,C]",
                   help="a point: temperature [K] and the table's pressure-like quantity in cgs, "
                        "or with units ('5800 K,1e4 Pa'), and the composition value for a table "
                        "with a composition axis (repeatable); for a table whose first axis "
                        "replaces the temperature, T is its value (e.g. u in erg g-1)")
    q.add_argument("--points", metavar="CSV",
                   help="CSV file with columns T,P (and C with a composition axis; header "
                        "optional)")
    q.add_argument("-q", "--quantities", action="append", default=[], metavar="NAME,..",
                   help="quantities to interpolate (default: the scalar ones)")
    q.add_argument("--method", choices=("quintic", "cubic", "linear"), default="quintic",
                   help="Lagrange stencils: 6 x 4 points in (ln T, ln P) (default), 4 x 4, "
                        "or bilinear")
    q.add_argument("--outside", choices=("raise", "clip", "nan"), default="raise",
                   help="points outside the grid: error (default), clamp, or NaN")
    add_format_option(q)
    q.set_defaults(func=_query)

    c = sub.add_parser("cache", help="list, inspect or clear cached tables")
    csub = c.add_subparsers(dest="cache_command", metavar="ACTION")
    csub.required = True
    cl = csub.add_parser("list", help="cached tables")
    add_format_option(cl)
    cl.set_defaults(func=_cache_list)
    ci = csub.add_parser("inspect", help="provenance and quantities of one cached table")
    ci.add_argument("table", metavar="KEY", help="cache key (prefix)")
    ci.add_argument("--verify", action="store_true", help="read every chunk (checksums)")
    add_format_option(ci)
    ci.set_defaults(func=_inspect)
    cc = csub.add_parser("clear", help="delete cached tables")
    cc.add_argument("key", nargs="?", help="key (prefix) of the table to delete")
    cc.add_argument("--all", action="store_true", help="delete every cached table")
    add_format_option(cc)
    cc.set_defaults(func=_cache_clear)
    cd = csub.add_parser("dir", help="print the cache directory")
    add_format_option(cd)
    cd.set_defaults(func=_cache_dir)


def _template(args) -> int:
    from sahaboltz.tables.spec import example_toml
    sys.stdout.write(example_toml(args.temperature_quantity))
    return 0


def _load_compute(text: str | None):
    if not text:
        return None
    if ":" not in text:
        raise InputError(f"--compute: write MODULE:FUNCTION, got {text!r}")
    mod, func = text.split(":", 1)
    try:
        return getattr(importlib.import_module(mod), func)
    except (ImportError, AttributeError) as exc:
        raise InputError(f"--compute: cannot load {text!r}: {exc}") from None


def _spec_from_args(args):
    from sahaboltz.tables.spec import TableSpec, spec_from_options

    grid_opts = (args.temperature, args.pressure, args.levels, args.partition,
                 args.pressure_quantity, args.temperature_quantity != "temperature",
                 args.temperature_range)
    physics_opts = (args.mix != "solar", args.metallicity, args.alpha, args.lowering,
                    args.truncation, args.completion, args.no_h_minus, args.molecules != "none",
                    args.condensates,
                    args.fractions != "all")
    axis = composition_axis_from_text(args.composition_axis) if args.composition_axis else None
    if args.spec:
        if any(grid_opts) or any(physics_opts):
            raise InputError("give either a spec file or grid options, not both")
        spec = TableSpec.from_file(args.spec)
        if axis is not None:
            if spec.composition_axis is not None:
                raise InputError(f"{args.spec} has a composition axis already "
                                 f"({spec.composition_axis.name}); give it there or with "
                                 f"--composition-axis, not both")
            spec = replace(spec, composition_axis=axis)
        return spec
    spec = spec_from_options(args.temperature, args.pressure,
                             pressure_quantity=args.pressure_quantity,
                             temperature_quantity=args.temperature_quantity,
                             temperature_range=_temperature_range(args.temperature_range),
                             temperature_scale=args.temperature_scale,
                             pressure_scale=args.pressure_scale,
                             truncation=args.truncation, lowering=args.lowering,
                             molecules=args.molecules, condensates=args.condensates,
                             completion=args.completion,
                             h_minus=not args.no_h_minus, fractions=args.fractions,
                             levels=args.levels, partition_functions=args.partition)
    return replace(spec, composition=_composition_doc(args, axis is not None),
                   composition_axis=axis)


def _temperature_range(text: str | None):
    """``--temperature-range LO,HI`` [K, or each with a unit] as (lo, hi), or None."""
    if text is None:
        return None
    from sahaboltz.quantities import parse_quantity
    parts = text.split(",")
    if len(parts) != 2:
        raise InputError(f"--temperature-range: give LO,HI in K, got {text!r}")
    return tuple(parse_quantity(x, "K", "--temperature-range") for x in parts)


def _composition_doc(args, modifiers: bool = False) -> dict:
    """The spec's composition from the shared mixture options (--mix, --by, --metallicity,
    --alpha): solar by name, anything else as resolved number abundances (with a composition
    axis, [M/H] and [alpha/Fe] kept as modifiers, so that one given twice is caught)."""
    if modifiers and args.mix.strip().lower() != "solar":
        comp = parse_mix(args.mix, args.by, 0.0, 0.0)
        return normalize_composition({
            "abundances": dict(zip(comp.symbols, (float(x) for x in comp.number_fraction))),
            "metallicity": args.metallicity, "alpha_enhancement": args.alpha})
    if args.mix.strip().lower() == "solar":
        doc = {"name": "solar"}
        if args.metallicity:
            doc["metallicity"] = args.metallicity
        if args.alpha:
            doc["alpha_enhancement"] = args.alpha
        return normalize_composition(doc)
    comp = parse_mix(args.mix, args.by, args.metallicity, args.alpha)
    return normalize_composition({"abundances": dict(zip(comp.symbols,
                                                (float(x) for x in comp.number_fraction)))})


def _build(args) -> int:
    from sahaboltz.tables.cache import obtain_table

    if args.scheduler is not None:  # a malformed address: an error before anything else
        from sahaboltz.tables.cluster import check_address
        check_address(args.scheduler)
        if args.workers:
            raise InputError("--workers sets local processes; with --scheduler the cluster's "
                             "workers compute: give one of them")
    spec = _spec_from_args(args)
    opts = {"workers": args.workers, "progress": False if args.no_progress else None,
            "resume": not args.no_resume}
    if args.scheduler is not None:
        opts["scheduler"] = args.scheduler
    if args.chunk_states:
        opts["chunk_states"] = args.chunk_states
    stats: dict = {}
    t0 = time.perf_counter()
    res = obtain_table(spec, output=args.output, compute=_load_compute(args.compute),
                       rebuild=args.rebuild, stats=stats, **opts)
    if stats.get("resumed"):
        print(f"sahaboltz: note: resumed an interrupted build: {stats['resumed']} of "
              f"{stats['blocks']} blocks were stored already", file=sys.stderr)
    if res.failed_states:
        print(f"sahaboltz: note: {res.failed_states} of {spec.size} states could not be solved "
              "(their fields are NaN; the 'status' field says why)", file=sys.stderr)
    emit([{"key": res.key[:16], "status": res.status,
           "failed_states": res.failed_states if res.failed_states is not None else "",
           "grid": "x".join(str(n) for n in spec.shape),
           "seconds": round(time.perf_counter() - t0, 3), "path": str(res.path)}], args.format)
    return 0


def _resolve(text: str) -> Path:
    from sahaboltz.tables import cache
    p = Path(text)
    if p.exists():
        return p
    if "/" in text or os.sep in text or p.suffix:
        raise InputError(f"no table file {text} (and not a cache key: "
                         "see 'sahaboltz table cache list')")
    return cache.find(text)


def _inspect(args) -> int:
    from sahaboltz.tables.hdf5 import check_table, read_metadata
    from sahaboltz.tables.interpolate import open_table

    path = _resolve(args.table)
    check_table(path, full=args.verify)
    meta = read_metadata(path)
    tab = open_table(path, check=False)
    keep = ("title", "created", "package_version", "solver_version", "level_data_digest",
            "cache_key", "composition", "physics", "temperature_quantity", "pressure_quantity",
            "build_seconds", "size_bytes")
    info = {k: (meta[k] if isinstance(meta[k], (str, int, float)) else str(meta[k]))
            for k in keep if k in meta}
    info[tab.temperature_quantity] = (f"{tab.temperature[0]:g}..{tab.temperature[-1]:g} "
                                      f"{tab.temperature_unit} ({tab.temperature.size})")
    info[tab.pressure_quantity] = (f"{tab.pressure[0]:g}..{tab.pressure[-1]:g} "
                                   f"{tab.pressure_unit} ({tab.pressure.size})")
    if tab.composition_axis is not None:
        info[tab.composition_axis] = (f"{tab.composition[0]:g}..{tab.composition[-1]:g} "
                                      f"{tab.composition_unit} ({tab.composition.size})")
    if args.verify:
        info["verified"] = "all chunks read, Fletcher-32 checksums ok"
    info["format_version"] = meta.get("format_version")
    rows = []
    for var, labels in tab.variables.items():  # one row per variable, not per species
        a = tab.quantity_attrs(var)
        rows.append({"variable": var, "rows": "" if labels is None else len(labels),
                     "first": "" if not labels else labels[0],
                     "last": "" if not labels else labels[-1],
                     "units": a.get("units", ""), "long_name": a.get("long_name", "")})
    tab.close()
    emit(rows, args.format, title=str(path), meta=info)
    return 0


def _points(args, ncol: int = 2, pressure_unit: str = "dyn cm-2",
            first_unit: str = "K") -> tuple[np.ndarray, ...]:
    """The query points: ``ncol`` values each (T,P, or T,P,C with a composition axis); T and P
    may carry units.  T is the table's first axis: a temperature, or the value of the
    quantity that replaces it (``first_unit``, e.g. erg g-1)."""
    from sahaboltz.quantities import parse_quantity

    what = "T,P" if ncol == 2 else "T,P,C"
    pts: list[tuple[float, ...]] = []
    for item in args.at:
        parts = item.split(",")
        if len(parts) != ncol:
            extra = " (the table has a composition axis)" if ncol == 3 else ""
            raise InputError(f"--at: write {what} ({ncol} values{extra}, T and P each with an "
                             f"optional unit, e.g. 5800,1e5 or '5800 K,1e4 Pa'), got {item!r}")
        point = [parse_quantity(parts[0], first_unit,
                                "--at (temperature)" if first_unit == "K" else "--at (first axis)"),
                 parse_quantity(parts[1], pressure_unit, "--at (pressure)")]
        if ncol == 3:
            try:
                point.append(float(parts[2]))
            except ValueError:
                raise InputError(f"--at: the composition value must be a number, got "
                                 f"{parts[2]!r}") from None
        pts.append(tuple(point))
    if args.points:
        try:
            with open(args.points, newline="") as fh:
                for n, row in enumerate(csv.reader(fh), 1):
                    if not row or row[0].strip().startswith("#"):
                        continue
                    try:
                        pts.append(tuple(float(row[k]) for k in range(ncol)))
                    except (ValueError, IndexError):
                        if n == 1:  # header
                            continue
                        raise InputError(f"{args.points}, line {n}: need {ncol} numbers "
                                         f"{what}") from None
        except OSError as exc:
            raise InputError(f"cannot read {args.points}: {exc.strerror}") from None
    if not pts:
        raise InputError(f"give points with --at {what} or --points FILE.csv")
    a = np.array(pts, dtype=float)
    return tuple(a[:, k] for k in range(ncol))


def _query(args) -> int:
    from sahaboltz.tables.interpolate import open_table
    from sahaboltz.tables.spec import SCALAR_OUTPUTS

    tab = open_table(_resolve(args.table))
    names = [n.strip() for item in args.quantities for n in item.split(",") if n.strip()]
    if not names:
        names = [n for n in tab.quantities if n in SCALAR_OUTPUTS]
    t, p, *c = _points(args, 2 if tab.composition_axis is None else 3, tab.pressure_unit,
                       tab.temperature_unit)
    vals = tab.interpolate(names, t, p, c[0] if c else None, method=args.method,
                           outside=args.outside)
    rows = []
    for k in range(t.size):
        row = {tab.temperature_quantity: float(t[k]), tab.pressure_quantity: float(p[k])}
        if c:
            row[tab.composition_axis] = float(c[0][k])
        row.update({n: float(vals[n][k]) for n in names})
        rows.append(row)
    emit(rows, args.format, meta={"table": str(tab.path), "method": args.method})
    return 0


def _cache_list(args) -> int:
    from sahaboltz.tables import cache
    rows = [{"key": e["key"][:16], "created": e["created"],
             "grid": "x".join(str(n) for n in e["shape"]) if e["shape"] else "",
             "MB": round(e["size_bytes"] / 1e6, 3), "status": e["status"][:60],
             "title": e["title"] or ""} for e in cache.entries()]
    emit(rows, args.format, columns=["key", "created", "grid", "MB", "status", "title"],
         title=f"table cache: {cache.cache_dir()}")
    return 0


def _cache_clear(args) -> int:
    from sahaboltz.tables import cache
    if not args.key and not args.all:
        raise InputError("say which table to delete (KEY prefix) or --all")
    if args.key and args.all:
        raise InputError("give a KEY or --all, not both")
    removed = cache.clear(None if args.all else args.key)
    if args.key and not removed:
        raise InputError(f"no cached table with key starting {args.key!r} (or it is being built)")
    emit([{"removed": k[:16]} for k in removed], args.format,
         title=f"removed {len(removed)} table(s) from {cache.cache_dir()}")
    return 0


def _cache_dir(args) -> int:
    from sahaboltz.tables import cache
    emit([{"cache_dir": str(cache.cache_dir())}], args.format)
    return 0


__all__ = ["register"]
