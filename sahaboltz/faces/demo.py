"""The demo scenario: two invented objects, built from the built-in data in well under a minute.

1. **"Korva"**, an invented K-type dwarf star: Teff = 4,600 K, log g = 4.6, [M/H] = -0.3
   (solar-scaled, Asplund et al. 2009).  A population table of its photosphere over
   3,000-12,000 K x gas pressure 1e2-1e6 dyn cm^-2 is built through the table cache; its
   depths follow an illustrative T-P relation: the Eddington grey law
   T^4 = 3/4 Teff^4 (tau + 2/3) and an invented P_gas = 1.5e5 tau^0.65 dyn cm^-2.
2. **"ARC-1"**, an invented laboratory arc in pure argon at 1 atm, 8,000-20,000 K, with
   Debye-Hueckel lowering of the ionization energies (table through the cache), plus, at a few
   temperatures, the size of that lowering against kT and the McWhirter check of LTE.

:func:`run_demo` builds (or finds) both tables, reads them back with the interpolating reader,
writes a few plots and returns a summary; ``sahaboltz demo`` prints it.  ``quick=True`` uses
reduced grids (for the test suite).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

#: the invented star
STAR = {"name": "Korva", "kind": "K-type dwarf", "teff": 4600.0, "logg": 4.6,
        "metallicity": -0.3}
#: optical depths tau at which the summary reports the photosphere
DEPTHS_TAU = (1e-3, 1e-2, 1e-1, 1.0, 10.0)
#: elements whose dominant stage the summary reports
SUMMARY_ELEMENTS = ("H", "Na", "Ca", "Fe")
#: elements whose stage fractions the star's table stores
STAR_FRACTIONS = ("H", "He", "C", "N", "O", "Na", "Mg", "Al", "Si", "S", "K", "Ca", "Ti", "Fe")
#: invented pressure stratification P_gas = P1 tau^POWER [dyn cm^-2]
P_TAU1, P_POWER = 1.5e5, 0.65

ATM = 1.01325e6  # dyn cm^-2 per standard atmosphere (definition of the atmosphere)
#: the invented arc; ``lowering`` switches Debye-Hueckel lowering on in its table
ARC = {"name": "ARC-1", "gas": "argon", "pressure": ATM, "lowering": True}
ARC_REPORT_T = (8000.0, 10000.0, 12000.0, 14000.0, 16000.0, 18000.0, 20000.0)


def grey_temperature(tau, teff: float = STAR["teff"]) -> np.ndarray:
    """Eddington grey atmosphere, T^4 = 3/4 Teff^4 (tau + 2/3) [K]."""
    return teff * (0.75 * (np.asarray(tau, dtype=float) + 2.0 / 3.0)) ** 0.25


def track_pressure(tau) -> np.ndarray:
    """The demo star's invented gas-pressure stratification [dyn cm^-2]."""
    return P_TAU1 * np.asarray(tau, dtype=float) ** P_POWER


def star_spec(quick: bool = False):
    """Table spec of the star's photosphere (full: 91 x 41 states; quick: 19 x 9)."""
    from sahaboltz.tables.spec import TableSpec

    return TableSpec.from_mapping({
        "temperature": {"scale": "log", "min": 3000.0, "max": 12000.0,
                        "num": 19 if quick else 91},
        "pressure": {"quantity": "gas_pressure", "scale": "log", "min": 1e2, "max": 1e6,
                     "num": 9 if quick else 41},
        "composition": {"name": "solar", "metallicity": STAR["metallicity"]},
        "physics": {"lowering": False},       # default truncation: occupation probabilities
        "outputs": {"stage_fractions": list(STAR_FRACTIONS)},
    })


def arc_spec(quick: bool = False):
    """Table spec of the argon arc: 8,000-20,000 K x 0.5, 1 and 2 atm."""
    from sahaboltz.tables.spec import TableSpec

    return TableSpec.from_mapping({
        "temperature": {"scale": "linear", "min": 8000.0, "max": 20000.0,
                        "num": 25 if quick else 121},
        "pressure": {"quantity": "gas_pressure", "scale": "values",
                     "values": [0.5 * ATM, ATM, 2.0 * ATM]},
        "composition": {"abundances": {"Ar": 1.0}},
        "physics": {"lowering": ARC["lowering"]},   # lowered cut with lowering, else occupation
        "outputs": {"stage_fractions": ["Ar"], "partition_functions": ["Ar I", "Ar II"]},
    })


@dataclass
class DemoResult:
    """What the demo did: tables, timings, summary rows and the plots written."""

    star_table: Path
    arc_table: Path
    cache_hits: dict[str, bool]
    seconds: dict[str, float]
    depths: list[dict]
    arc: list[dict]
    electron_pressure_range: tuple[float, float]
    track_electron_pressure_range: tuple[float, float]
    plots: list[Path] = field(default_factory=list)
    cache_dir: Path | None = None
    #: what the cache did for each table: "built", "cached" or "waited" (another process
    #: built it while this one waited for it)
    statuses: dict[str, str] = field(default_factory=dict)


def _table(spec, workers):
    from sahaboltz.tables.cache import obtain_table

    t0 = time.perf_counter()
    res = obtain_table(spec, workers=workers, progress=False)
    return res.path, res.status, time.perf_counter() - t0


def _stage_rows(tab, element: str) -> tuple[list[str], np.ndarray]:
    """Stage names and grids (n_stage, nT, nP) of an element stored in a table."""
    names, grids = [], []
    for q in tab.quantities:
        if q.startswith(f"fraction_{element}_"):
            names.append(tab.quantity_attrs(q)["species"])
            grids.append(tab[q])
    return names, np.array(grids)


def _stages_from_table(tab, element: str) -> tuple[list[str], list[int], np.ndarray]:
    from sahaboltz.data.elements import parse_species

    names, grids = _stage_rows(tab, element)
    charges = [parse_species(n)[1] for n in names]
    order = np.argsort(charges)
    return ([names[i] for i in order], [charges[i] for i in order], grids[order])


def run_demo(out_dir: str | Path = "sahaboltz-demo", *, quick: bool = False,
             workers: int | None = None, plots: bool = True) -> DemoResult:
    """Build the demo tables (through the cache), summarise them and write the plots.

    Parameters
    ----------
    out_dir : path
        Directory for the plots (created).
    quick : bool
        Reduced grids (a few seconds; for tests).
    workers : int, optional
        Worker processes for the table builds (default: all cores).
    plots : bool
        Write the plots (default True).
    """
    from sahaboltz.data.composition import Composition
    from sahaboltz.constants import K_B_EV
    from sahaboltz.equilibrium import solve_equilibrium
    from sahaboltz.kernels.plasma import debye_hueckel_lowering
    from sahaboltz.tables import cache
    from sahaboltz.tables.interpolate import open_table

    t_start = time.perf_counter()
    seconds: dict[str, float] = {}
    star_path, star_status, seconds["star_table"] = _table(star_spec(quick), workers)
    arc_path, arc_status, seconds["arc_table"] = _table(arc_spec(quick), workers)
    star_hit, arc_hit = star_status != "built", arc_status != "built"

    # -- the star: read the table back at a few depths ------------------------------------
    t0 = time.perf_counter()
    tab = open_table(star_path)
    tau = np.asarray(DEPTHS_TAU)
    t_d, p_d = grey_temperature(tau), track_pressure(tau)
    names = ["electron_pressure", "electron_density"]
    stage_info = {el: _stages_from_table(tab, el) for el in SUMMARY_ELEMENTS}
    for el, (sp_names, _, _) in stage_info.items():
        names += [f"fraction_{n.replace(' ', '_')}" for n in sp_names]
    vals = tab.interpolate(names, t_d, p_d)
    depths = []
    for k in range(tau.size):
        row: dict[str, Any] = {"tau": float(tau[k]), "T_K": round(float(t_d[k]), 1),
                               "P_gas": float(p_d[k]), "P_e": float(vals["electron_pressure"][k]),
                               "n_e": float(vals["electron_density"][k])}
        for el, (sp_names, _, _) in stage_info.items():
            fr = [float(vals[f"fraction_{n.replace(' ', '_')}"][k]) for n in sp_names]
            i = int(np.argmax(fr))
            row[el] = f"{sp_names[i]} ({100 * fr[i]:.0f}%)"
        depths.append(row)
    pe = tab["electron_pressure"]
    track_tau = np.geomspace(1e-3, 10.0, 60)
    pe_track = tab.interpolate("electron_pressure", grey_temperature(track_tau),
                               track_pressure(track_tau))
    seconds["star_read"] = time.perf_counter() - t0

    # -- the arc: table at 1 atm plus the McWhirter check --------------------------------
    t0 = time.perf_counter()
    arc_tab = open_table(arc_path)
    ar_names, ar_q, ar_fr = _stages_from_table(arc_tab, "Ar")
    j_atm = int(np.argmin(np.abs(arc_tab.pressure - ATM)))
    t_r = np.asarray(ARC_REPORT_T)
    argon = Composition.from_number({"Ar": 1.0}, name="argon")
    state = solve_equilibrium(argon, t_r, gas_pressure=ARC["pressure"],
                              lowering=ARC["lowering"])
    # lowering of the Ar I ionization energy by the arc's own plasma (Debye-Hueckel)
    lowering_ev = debye_hueckel_lowering(0, state.debye_length)
    arc_vals = arc_tab.interpolate(["electron_density"] + [f"fraction_{n.replace(' ', '_')}"
                                                          for n in ar_names[:3]],
                                   t_r, np.full(t_r.shape, ARC["pressure"]))
    ne_min = state.mcwhirter_density()
    gap = np.broadcast_to(state.largest_gap_ev(), t_r.shape)
    arc_rows = []
    for k in range(t_r.size):
        arc_rows.append({"T_K": float(t_r[k]), "n_e": float(arc_vals["electron_density"][k]),
                         **{n: float(arc_vals[f"fraction_{n.replace(' ', '_')}"][k])
                            for n in ar_names[:3]},
                         "dchi_ArI_eV": round(float(lowering_ev[k]), 4),
                         "dchi/kT": round(float(lowering_ev[k] / (K_B_EV * t_r[k])), 4),
                         "gap_eV": round(float(gap[k]), 3),
                         "McWhirter_n_e": float(ne_min[k]),
                         "LTE_ok": bool(state.lte_valid()[k])})
    seconds["arc_read"] = time.perf_counter() - t0

    result = DemoResult(star_table=star_path, arc_table=arc_path,
                        cache_hits={"star": star_hit, "arc": arc_hit},
                        statuses={"star": star_status, "arc": arc_status}, seconds=seconds,
                        depths=depths, arc=arc_rows,
                        electron_pressure_range=(float(pe.min()), float(pe.max())),
                        track_electron_pressure_range=(float(pe_track.min()),
                                                       float(pe_track.max())),
                        cache_dir=cache.cache_dir())
    if plots:
        t0 = time.perf_counter()
        result.plots = _plots(Path(out_dir), tab, arc_tab, stage_info, (ar_names, ar_q, ar_fr),
                              j_atm, track_tau, float(np.median(state.n_e)))
        seconds["plots"] = time.perf_counter() - t0
    seconds["total"] = time.perf_counter() - t_start
    return result


def _plots(out: Path, tab, arc_tab, stage_info, arc_stages, j_atm, track_tau, arc_ne) -> list[Path]:
    from sahaboltz.data.composition import solar
    from sahaboltz.faces import plots as P
    from sahaboltz.faces.state_options import describe_state, format_value

    out.mkdir(parents=True, exist_ok=True)
    written = []
    star = f"{STAR['name']} (invented {STAR['kind']}, Teff {STAR['teff']:,.0f} K, " \
           f"[M/H] = {STAR['metallicity']:+.1f})"
    comp = solar(metallicity=STAR["metallicity"])
    t, p = tab.temperature, tab.pressure
    source = f"; from the cached table {tab.path.name[:12]}..."

    # 1. dominant stage of Fe over the table, with the photosphere's T-P track
    names, charges, fr = stage_info["Fe"]
    dom = np.asarray(charges)[np.argmax(fr, axis=0)]
    fig = P.draw_dominant_map(
        t, p, dom, "Fe", fractions=fr, charges=charges,
        title=f"Dominant stage of iron in the photosphere of {star}",
        note=describe_state(comp, closure="gas_pressure", value=p, tex=True)
             + "; track: grey $T(\\tau)$ with the invented $P_\\mathrm{gas} = 1.5\\times10^5\\,"
               "\\tau^{0.65}$ dyn cm$^{-2}$, $\\tau$ = 1e-3..10" + source,
        track=(grey_temperature(track_tau), track_pressure(track_tau),
               "photosphere, tau = 0.001-10"),
        marks=[(float(grey_temperature(x)), float(track_pressure(x)), f"tau = {x:g}")
               for x in DEPTHS_TAU])
    written.append(P.save_figure(fig, out / "korva_dominant_Fe.png"))

    # 2. stage fractions of Ca and Fe at the pressure of tau = 1
    j = int(np.argmin(np.abs(np.log(p / P_TAU1))))
    for el in ("Ca",):
        names, charges, fr = stage_info[el]
        fig = P.draw_stage_fractions(
            t, fr[:, :, j], names, log=False,
            title=f"Ionization of {el} in {STAR['name']} at $P_\\mathrm{{gas}}$ = "
                  f"{format_value(p[j], 'dyn cm-2', tex=True)} (near $\\tau$ = 1)",
            note=describe_state(comp, closure="gas_pressure", value=p[j], tex=True) + source)
        written.append(P.save_figure(fig, out / f"korva_stages_{el}.png"))

    # 3. electron pressure against T at a few gas pressures of the table
    pe = tab["electron_pressure"]
    cols = [int(np.argmin(np.abs(np.log(p / v)))) for v in (1e2, 1e3, 1e4, 1e5, 1e6)]
    cols = list(dict.fromkeys(cols))
    curves = [(f"$P_\\mathrm{{gas}}$ = {format_value(p[c], 'dyn cm-2', tex=True)}", pe[:, c])
              for c in cols]
    fig = P.draw_electron_pressure(t, curves, title=f"Electron pressure in {star}",
                                   note=describe_state(comp, closure="gas_pressure",
                                                       value=p[cols], tex=True) + source)
    written.append(P.save_figure(fig, out / "korva_electron_pressure.png"))

    # 4. the argon arc at 1 atm
    ar_names, _, ar_fr = arc_stages
    argon_note = describe_state(_argon(), closure="gas_pressure", value=arc_tab.pressure[j_atm],
                                lowering=ARC["lowering"], tex=True)
    fig = P.draw_stage_fractions(
        arc_tab.temperature, ar_fr[:, :, j_atm], ar_names,
        title=f"{ARC['name']}: invented argon arc at 1 atm",
        note=argon_note + f"; from the cached table {arc_tab.path.name[:12]}...")
    written.append(P.save_figure(fig, out / "arc_stages_Ar.png"))

    # 5. argon partition functions: plain sum against the lowered cut at the arc's n_e
    fig = P.partition_function_plot(["Ar I", "Ar II"], np.linspace(5000.0, 20000.0, 121),
                                    truncations=("plain", "lowered", "occupation"),
                                    electron_density=float(f"{arc_ne:.2g}"))
    written.append(P.save_figure(fig, out / "arc_partition_Ar.png"))
    return written


def _argon():
    from sahaboltz.data.composition import Composition
    return Composition.from_number({"Ar": 1.0}, name="argon")


__all__ = ["run_demo", "DemoResult", "star_spec", "arc_spec", "grey_temperature",
           "track_pressure", "STAR", "ARC", "DEPTHS_TAU"]
