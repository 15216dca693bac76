"""sahaboltz demo: the demo scenario (an invented K dwarf and an invented argon arc).

    sahaboltz demo                      # tables through the cache, summary, plots
    sahaboltz demo --out plots/ --quick # reduced grids, a few seconds

The two tables go to the table cache (sahaboltz table cache dir prints where it is;
$SAHABOLTZ_CACHE_DIR moves it; sahaboltz table cache clear --all empties it); the plots go to
--out.  A second run finds both tables in the cache.  The scenario is described in the
module sahaboltz.faces.demo.
"""

from __future__ import annotations

import argparse

from sahaboltz.faces.output import add_format_option, emit
from sahaboltz.faces.state_options import number_option


def register(subparsers) -> None:
    p = subparsers.add_parser("demo", help="the demo: a K-dwarf photosphere table and an "
                                           "argon arc, with summary and plots",
                              description=__doc__,
                              formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--out", default="sahaboltz-demo", metavar="DIR",
                   help="directory for the plots (default ./sahaboltz-demo)")
    p.add_argument("--quick", action="store_true", help="reduced grids (seconds; for tests)")
    p.add_argument("--no-plots", action="store_true", help="skip the plots")
    p.add_argument("--workers", type=number_option(integer=True, minimum=1), default=None,
                   help="worker processes for the table builds (default: all cores)")
    add_format_option(p)
    p.set_defaults(func=_run)


#: how the demo reports what the cache did for a table (TableResult.status)
STATUS_WORDS = {"built": "built", "cached": "cache hit",
                "waited": "waited for another process that built it"}


def _status(status: str) -> str:
    return STATUS_WORDS.get(status, status)


def _run(args) -> int:
    from sahaboltz.faces.demo import ARC, STAR, run_demo

    r = run_demo(args.out, quick=args.quick, workers=args.workers, plots=not args.no_plots)
    s = r.seconds
    meta = {
        "star": f"{STAR['name']}: invented {STAR['kind']}, Teff {STAR['teff']:,.0f} K, "
                f"log g {STAR['logg']}, [M/H] = {STAR['metallicity']:+.1f}",
        "star table": f"{r.star_table} ({_status(r.statuses['star'])}, "
                      f"{s['star_table']:.1f} s)",
        "arc table": f"{r.arc_table} ({_status(r.statuses['arc'])}, {s['arc_table']:.1f} s)",
        "cache directory": str(r.cache_dir),
        "cache": "$SAHABOLTZ_CACHE_DIR moves it; 'sahaboltz table cache clear --all' empties it",
        "P_e over the star's table [dyn cm-2]":
            f"{r.electron_pressure_range[0]:.3g} .. {r.electron_pressure_range[1]:.3g}",
        "P_e along the photosphere, tau 1e-3..10 [dyn cm-2]":
            f"{r.track_electron_pressure_range[0]:.3g} .. "
            f"{r.track_electron_pressure_range[1]:.3g}",
        "plots": ", ".join(str(p) for p in r.plots) if r.plots else "(none)",
        "total seconds": round(s["total"], 2),
    }
    if args.format != "table":
        doc_meta = {**meta, "arc": r.arc}
        emit(r.depths, args.format, meta=doc_meta,
             title=f"{STAR['name']}: dominant stages at a few depths")
        return 0
    emit(r.depths, "table", meta=meta,
         title=f"{STAR['name']} photosphere: dominant stage (and its share) at a few depths "
               "[T in K, pressures in dyn cm-2, n_e in cm-3]")
    print()
    emit(r.arc, "table",
         title=f"{ARC['name']}: argon at 1 atm ({'with' if ARC['lowering'] else 'ideal gas, no'} "
               "IP lowering) [n_e in cm-3]; dchi_ArI: the Debye-Hueckel lowering of Ar I in "
               "this plasma; LTE_ok: McWhirter n_e >= 1.6e12 T^1/2 gap^3 (largest level gap)")
    return 0


__all__ = ["register"]
