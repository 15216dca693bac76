"""Benchmark of tables on the axes that replace the temperature: (u, rho) and (s, P).

    python benchmarks/bench_thermal_axes.py                    # solar, 31 x 31, 3 repeats
    python benchmarks/bench_thermal_axes.py --shape 61x61 --repeats 1
    python benchmarks/bench_thermal_axes.py --truncation plain --elements H,He,C,O,Fe

Each repeat builds, in this process (one worker, so that process CPU time is the whole
cost), a (u, rho) table over u 3e11..3e14 erg g-1 and rho 1e-10..1e-4 g cm-3, and, as the
reference run, the (T, rho) table of the same shape over the temperatures that the first
table found (its range, log-spaced), with the same mixture, physics and outputs.  Then the
same for (s, P) over s 2e9..4e9 erg g-1 K-1 and P 1e2..1e6 dyn cm-2 against (T, P).
Printed: process CPU seconds of each build (min and median of the repeats), per state, and
the ratio thermal / reference -- the cost of finding the temperature, which is the inverse
solve of the equilibrium layer (sahaboltz/equilibrium/inverse.py: a 65-point start table per
partner value, then Newton passes).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def _cpu() -> float:
    return time.process_time()


def _spec(first: dict, pressure: dict, composition: dict, physics: dict, elements):
    from sahaboltz.tables.spec import TableSpec
    return TableSpec.from_mapping({
        "temperature": first, "pressure": pressure, "composition": composition,
        "physics": physics,
        "outputs": {"stage_fractions": list(elements) if elements else "all"}})


def _timed_build(spec, path):
    from sahaboltz.tables import cache
    from sahaboltz.tables.build import build_table
    t0 = _cpu()
    build_table(spec, path, workers=1, progress=False, provenance=cache.solver_provenance(spec),
                resume=False)
    return _cpu() - t0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--shape", default="31x31", help="states along each axis, NxM")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--truncation", default=None, help="physics.truncation (default: the solver's)")
    ap.add_argument("--elements", default=None,
                    help="a subset of the solar mixture, e.g. H,He,C,O,Fe (default: all)")
    args = ap.parse_args()
    n, m = (int(x) for x in args.shape.lower().split("x"))
    elements = args.elements.split(",") if args.elements else None
    if elements:
        from sahaboltz.data.composition import solar
        comp = solar().subset(elements)
        composition = {"abundances": dict(zip(comp.symbols,
                                              (float(x) / float(comp.number_fraction[0])
                                               for x in comp.number_fraction)))}
    else:
        composition = {"name": "solar"}
    physics = {"truncation": args.truncation} if args.truncation else {}
    cases = [
        ("(u, rho)", {"quantity": "internal_energy", "scale": "log", "min": 3e11, "max": 3e14,
                      "num": n},
         {"quantity": "mass_density", "scale": "log", "min": 1e-10, "max": 1e-4, "num": m}),
        ("(s, P)", {"quantity": "entropy", "scale": "linear", "min": 2e9, "max": 4e9, "num": n},
         {"quantity": "gas_pressure", "scale": "log", "min": 1e2, "max": 1e6, "num": m}),
    ]
    from sahaboltz.tables.interpolate import open_table
    print(f"grid {n} x {m}, composition {composition if elements else 'solar'}, "
          f"truncation {args.truncation or 'default'}, {args.repeats} repeats, "
          f"one process (CPU seconds)")
    with tempfile.TemporaryDirectory() as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # one small build first: the network and the level data are then loaded (and kept
        # per process) for every timed build alike
        _timed_build(_spec({"min": 3000.0, "max": 4000.0, "num": 2},
                           {"quantity": "gas_pressure", "values": [1e4, 1e5]},
                           composition, physics, elements), Path(tmp) / "warm.h5")
        for label, first, pressure in cases:
            thermal = _spec(first, pressure, composition, physics, elements)
            times_th, times_ref = [], []
            for k in range(args.repeats):
                path = Path(tmp) / f"th{k}.h5"
                times_th.append(_timed_build(thermal, path))
                with open_table(path) as tab:
                    t = tab["temperature"]
                    failed = int(tab.attrs.get("failed_states", 0))
                lo, hi = np.nanmin(t), np.nanmax(t)
                ref = _spec({"scale": "log", "min": float(lo), "max": float(hi), "num": n},
                            pressure, composition, physics, elements)
                times_ref.append(_timed_build(ref, Path(tmp) / f"ref{k}.h5"))
            mt, md = min(times_th), statistics.median(times_th)
            rt, rd = min(times_ref), statistics.median(times_ref)
            print(f"{label}: thermal axes {mt:.2f} s min, {md:.2f} s median "
                  f"({1e3 * mt / (n * m):.2f} ms/state; {failed} states without a temperature "
                  f"in range); reference (T, {pressure['quantity']}) over T {lo:.0f}..{hi:.0f} K "
                  f"{rt:.2f} s min, {rd:.2f} s median; ratio {mt / rt:.2f} (min), "
                  f"{md / rd:.2f} (median)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
