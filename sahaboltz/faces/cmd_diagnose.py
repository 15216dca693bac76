"""``sahaboltz diagnose ...``: temperature and electron density from measured line intensities.

Subcommands: ``boltzmann``, ``saha-boltzmann``, ``density`` (ionic-to-neutral line ratio at a
known T) and ``synthesize`` (a synthetic line list from the forward model, for trials).  The
line-list CSV format is described in :mod:`sahaboltz.diagnostics.lines` and
docs/diagnostics.md.  Plots are drawn headless (matplotlib Agg canvas, no display needed).
"""

from __future__ import annotations

import argparse

import numpy as np

from sahaboltz.errors import InputError
from sahaboltz.faces.output import add_format_option, emit, emit_summary
from sahaboltz.faces.state_options import number_option, quantity_option

_SAFETY = ("results assume optically thin lines, LTE and a homogeneous plasma; not for "
           "safety decisions about real equipment")


def register(sub) -> None:
    p = sub.add_parser("diagnose", help="plasma temperature and n_e from measured line intensities",
                       description="Plasma diagnostics from a CSV of measured lines (columns: "
                                   "species, wavelength_nm, intensity, intensity_error, "
                                   "upper_energy_eV or upper_energy_cm-1, upper_g, A_s-1; "
                                   "optional A_rel_error, lower_energy_eV, label). "
                                   + _SAFETY[0].upper() + _SAFETY[1:] + ".")
    dsub = p.add_subparsers(dest="diagnose_command", metavar="METHOD")
    dsub.required = True

    b = dsub.add_parser("boltzmann", help="excitation temperature from the lines of one species",
                        description="Boltzmann plot: weighted least squares of "
                                    "ln(I lambda / (g A)) against the upper-level energy.")
    _common(b)
    b.add_argument("--species", help="use the lines of this species (needed when the file "
                                     "holds several)")
    b.add_argument("--electron-density", type=quantity_option("cm-3"), metavar="CM-3",
                   help="n_e known from elsewhere, for the McWhirter check [cm^-3, or with a "
                        "unit]")
    b.set_defaults(func=run_boltzmann)

    s = dsub.add_parser("saha-boltzmann", help="T and n_e from two successive stages",
                        description="Saha-Boltzmann plot of the lines of stages r and r+1 of one "
                                    "element: T and n_e together, or T alone at a given n_e.")
    _common(s)
    s.add_argument("--element", help="use the lines of this element (needed when the file "
                                     "holds several)")
    s.add_argument("--electron-density", type=quantity_option("cm-3"), metavar="CM-3",
                   help="n_e known from elsewhere: fit T only [cm^-3, or with a unit]")
    s.add_argument("--electron-density-error", type=quantity_option("cm-3", positive=False,
                                                                    minimum=0.0),
                   default=0.0, metavar="CM-3", help="1-sigma uncertainty of --electron-density")
    s.add_argument("--lowering", action=argparse.BooleanOptionalAction, default=True,
                   help="Debye-Hueckel lowering of the ionization energy, as in every command "
                        "(default on here: --no-lowering leaves it out)")
    s.add_argument("--initial-temperature", type=quantity_option("K"), default=1e4, metavar="K",
                   help="start of the T iteration when n_e is given (default 10000 K)")
    s.set_defaults(func=run_saha_boltzmann)

    d = dsub.add_parser("density", help="n_e from ionic-to-neutral line ratios at known T",
                        description="Electron density from the intensity ratio of a line of "
                                    "stage r+1 to one of stage r, at a known temperature; "
                                    "every pair in the file unless --neutral/--ion pick lines.")
    d.add_argument("lines", help="line-list CSV file")
    d.add_argument("-T", "--temperature", type=quantity_option("K"), required=True, metavar="K",
                   help="the plasma temperature [K, or with a unit]")
    d.add_argument("--temperature-error", type=quantity_option("K", positive=False, minimum=0.0),
                   default=0.0, metavar="K",
                   help="1-sigma uncertainty of the temperature (propagated)")
    d.add_argument("--element", help="use the lines of this element")
    d.add_argument("--neutral", type=quantity_option("nm"), metavar="NM",
                   help="wavelength of the stage-r line")
    d.add_argument("--ion", type=quantity_option("nm"), metavar="NM",
                   help="wavelength of the stage-r+1 line")
    d.add_argument("--outlier-threshold", type=number_option(positive=True), default=3.0,
                   metavar="T", help="a pair more than T of its own errors from the combined "
                                     "ln n_e is flagged (default 3)")
    d.add_argument("--show-pairs", action="store_true",
                   help="print every pair (n_e, bounds, outlier flag) instead of the summary")
    d.add_argument("--tolerance", type=quantity_option("nm"), default=0.01, metavar="NM",
                   help="wavelength match tolerance for --neutral/--ion (default 0.01 nm)")
    d.add_argument("--lowering", action=argparse.BooleanOptionalAction, default=True,
                   help="Debye-Hueckel lowering of the ionization energy, as in every command "
                        "(default on here: --no-lowering leaves it out)")
    d.add_argument("--photon-counts", action="store_true",
                   help="intensities are photon counts (default: energy units)")
    d.add_argument("--delta-e", type=quantity_option("eV"), metavar="EV",
                   help="level gap for the McWhirter check (default: from the database)")
    add_format_option(d)
    d.set_defaults(func=run_density)

    y = dsub.add_parser("synthesize", help="write a synthetic line list (forward model)",
                        description="Line intensities of an LTE plasma at (T, n_e) for lines "
                                    "built on real database levels with INVENTED A values: for "
                                    "trying the diagnostics, never as atomic data.")
    y.add_argument("--species", nargs="+", required=True, help="e.g. 'Fe I' 'Fe II'")
    y.add_argument("--lines", type=number_option(integer=True, minimum=1), default=8,
                   metavar="N", help="lines per species")
    y.add_argument("-T", "--temperature", type=quantity_option("K"), required=True, metavar="K",
                   help="the plasma temperature [K, or with a unit]")
    y.add_argument("--electron-density", type=quantity_option("cm-3"), required=True,
                   metavar="CM-3", help="n_e [cm^-3, or with a unit]")
    y.add_argument("--noise", type=number_option(minimum=0.0), default=0.05,
                   help="relative log-normal intensity noise (default 0.05)")
    y.add_argument("--a-error", type=number_option(minimum=0.0), default=0.0,
                   help="relative error given to the synthetic A values (default 0)")
    y.add_argument("--resonance-lines", type=number_option(integer=True, minimum=0), default=0,
                   metavar="N", help="lines per species ending on the ground level")
    y.add_argument("--seed", type=number_option(integer=True), default=None)
    y.add_argument("--output", required=True, metavar="CSV")
    add_format_option(y)
    y.set_defaults(func=run_synthesize)


def _common(p) -> None:
    p.add_argument("lines", help="line-list CSV file")
    p.add_argument("--photon-counts", action="store_true",
                   help="intensities are photon counts (default: energy units)")
    p.add_argument("--reject-outliers", action="store_true",
                   help="drop outliers (|studentized residual| > threshold) and refit")
    p.add_argument("--outlier-threshold", type=number_option(positive=True), default=3.0,
                   metavar="T",
                   help="studentized-residual limit of the outlier flag (default 3)")
    p.add_argument("--delta-e", type=quantity_option("eV"), metavar="EV",
                   help="level gap for the McWhirter check (default: from the database)")
    p.add_argument("--plot", metavar="PNG", help="draw the fit (with its residuals) to this "
                                                 "image file (.png or .pdf)")
    p.add_argument("--dpi", type=number_option(positive=True), default=None,
                   help="resolution of a PNG plot (default 200)")
    p.add_argument("--show-lines", action="store_true",
                   help="print the per-line table (ordinates, residuals, flags) instead of "
                        "the summary")
    add_format_option(p)


# -- commands --------------------------------------------------------------------------------
def run_boltzmann(args) -> int:
    from sahaboltz.diagnostics import boltzmann_plot, read_lines
    fit = boltzmann_plot(read_lines(args.lines), args.species, photon_counts=args.photon_counts,
                         reject_outliers=args.reject_outliers,
                         outlier_threshold=args.outlier_threshold,
                         electron_density=args.electron_density, delta_e_ev=args.delta_e)
    _report(args, fit, f"Boltzmann plot of {fit.species}")
    return 0


def run_saha_boltzmann(args) -> int:
    from sahaboltz.diagnostics import read_lines, saha_boltzmann_plot
    fit = saha_boltzmann_plot(read_lines(args.lines), args.element,
                              electron_density=args.electron_density,
                              electron_density_error=args.electron_density_error,
                              lowering=args.lowering, photon_counts=args.photon_counts,
                              reject_outliers=args.reject_outliers,
                              outlier_threshold=args.outlier_threshold,
                              initial_temperature=args.initial_temperature,
                              delta_e_ev=args.delta_e)
    _report(args, fit, f"Saha-Boltzmann plot of {fit.lower} + {fit.upper}")
    return 0


def run_density(args) -> int:
    from sahaboltz.diagnostics import all_pairs, ratio_density, read_lines
    lines = read_lines(args.lines)
    neutral, ion = all_pairs(lines, args.element)
    keep = np.ones(len(neutral), dtype=bool)
    for side, wl, opt in ((neutral, args.neutral, "--neutral"), (ion, args.ion, "--ion")):
        if wl is not None:
            hit = np.abs(side.wavelength_nm - wl) <= args.tolerance
            if not hit.any():
                raise InputError(f"{opt} {wl} nm: no line of that stage within "
                                 f"{args.tolerance} nm")
            keep &= hit
    neutral, ion = neutral.select(keep), ion.select(keep)
    res = ratio_density(neutral, ion, args.temperature, args.temperature_error,
                        lowering=args.lowering, photon_counts=args.photon_counts,
                        delta_e_ev=args.delta_e)
    notes = {}
    if res.lte:
        notes["lte_note"] = res.lte[0].message if len(res.lte) == 1 else (
            f"McWhirter criterion met by {sum(bool(c.satisfied) for c in res.lte)} of "
            f"{len(res.lte)} pairs (needs n_e >= {res.lte[0].required_density:.3g} cm^-3)")
    notes["note"] = _SAFETY
    rows = res.rows(args.outlier_threshold)
    title = "electron density from line ratios"
    if args.show_pairs or len(rows) == 1:
        emit(rows, args.format, title=title, meta=notes)
        return 0
    comb = res.combined(args.outlier_threshold)
    summary = {"method": "ionic-to-neutral line ratios, combined in ln n_e",
               "temperature_K": res.temperature, "temperature_error_K": res.temperature_error,
               **comb.summary()}
    out = [r for r in rows if r["outlier"]]
    summary["outliers"] = ("; ".join(f"{r['neutral']} / {r['ion']}" for r in out[:8])
                           + (f" and {len(out) - 8} more" if len(out) > 8 else "")) or "none"
    summary.update(notes)
    emit_summary(summary, args.format, title=title + f" ({len(rows)} pairs; --show-pairs "
                                                      "lists them)")
    return 0


def run_synthesize(args) -> int:
    from sahaboltz.diagnostics import synthesize, synthetic_line_list, write_lines
    rng = np.random.default_rng(args.seed)
    base = synthetic_line_list(args.species, args.lines, resonance_lines=args.resonance_lines,
                               rng=rng)
    lines = synthesize(base, args.temperature, args.electron_density, relative_error=args.noise,
                       a_relative_error=args.a_error, rng=rng)
    write_lines(args.output, lines, header_comments=[
        "SYNTHETIC line list from the sahaboltz forward model: real level energies and g from",
        "the level data, INVENTED A values and wavelengths; not atomic data.",
        f"T = {args.temperature} K, n_e = {args.electron_density} cm^-3, noise = {args.noise}, "
        f"seed = {args.seed}"])
    emit([{"file": args.output, "lines": len(lines), "species": " + ".join(lines.species_names),
           "temperature_K": args.temperature, "n_e_cm-3": args.electron_density}],
         args.format, title="synthetic line list written")
    return 0


# -- output ----------------------------------------------------------------------------------
def _report(args, fit, title) -> None:
    summary = fit.summary()
    summary["note"] = _SAFETY
    if args.plot:
        from sahaboltz.faces.plots import diagnostic_fit_plot, save_figure
        fig, _ = diagnostic_fit_plot(fit)
        save_figure(fig, args.plot, dpi=args.dpi)
        summary["plot"] = args.plot
    if args.show_lines:
        emit(line_rows(fit), args.format, title=title, meta=summary)
    else:
        emit_summary(summary, args.format, title=title)


def line_rows(fit) -> list[dict]:
    """Per-line table of a Boltzmann or Saha-Boltzmann fit."""
    ln = fit.lines
    return [{"species": ln.species[i], "wavelength_nm": float(ln.wavelength_nm[i]),
             "x_eV": float(fit.x[i]), "y": float(fit.y[i]), "y_error": float(fit.y_error[i]),
             "fitted": float(fit.fitted[i]), "studentized": float(fit.studentized[i]),
             "used": bool(fit.used[i]), "flags": fit.flags[i], "label": ln.label[i]}
            for i in range(len(ln))]
