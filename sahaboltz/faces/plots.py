"""Pictures of LTE equilibria: stage fractions, dominant-stage maps, partition functions,
electron pressures and level-population (Boltzmann) diagrams.

Everything draws on :class:`matplotlib.figure.Figure` objects without pyplot, so it works
headless and never touches the user's interactive backend.  Each picture comes in two layers:

- ``draw_*`` functions take arrays that are already computed (e.g. read from a table) and only
  draw;
- ``*_plot`` functions solve the equilibrium (or evaluate the partition functions) with the
  package's public API and then call the matching ``draw_*``.

Every figure names its axes with units (mathtext) and states its conditions (composition,
pressure, physics options) in the title and a note under the axes; ``annotate=False`` leaves
both out.  Every function takes ``ax=`` (an Axes of your own figure, e.g. one panel of a
multi-panel figure; its margins are then left alone) and returns ``(fig, ax)``.
:func:`save_figure` writes PNG (200 dpi unless ``dpi=``) or PDF, chosen by the file suffix,
atomically and with the usual file permissions.

>>> fig, ax = stage_fractions_plot("Fe", np.linspace(3000, 12000, 200), 1e5)   # doctest: +SKIP
>>> save_figure(fig, "fe_stages.png")                                          # doctest: +SKIP
"""

from __future__ import annotations

import os
import textwrap
import uuid
from pathlib import Path
from typing import Any, Sequence

import numpy as np
from matplotlib.colors import BoundaryNorm, ListedColormap
from matplotlib.figure import Figure

from sahaboltz.constants import K_B_EV
from sahaboltz.data.elements import atomic_number, parse_species, spectroscopic_name
from sahaboltz.equilibrium.closures import CLOSURES
from sahaboltz.errors import InputError
from sahaboltz.faces.state_options import (CLOSURE_SYMBOLS, CLOSURE_UNITS, describe_state,
                                           format_value, unit_label)
from sahaboltz.quantities import as_positive_array

#: file suffixes :func:`save_figure` writes
FORMATS = {".png": "png", ".pdf": "pdf"}
#: resolution of PNG files unless ``dpi=`` says otherwise
DEFAULT_DPI = 200
_LN10 = float(np.log(10.0))
# line styles of the truncation schemes, in the order they are drawn (the first: solid)
_LINESTYLES = ["-", "--", ":", "-.", (0, (5, 1, 1, 1, 1, 1)), (0, (1, 3))]
# a qualitative palette that stays readable in grey print
_COLORS = ["#1b5e9e", "#d9661f", "#2a9d4b", "#b8332e", "#7b4fa6", "#8a5a44", "#d45fa8",
           "#6e6e6e", "#a6a21c", "#1fa6b8"]


# -- figures and files ---------------------------------------------------------------------
def new_figure(width: float = 7.2, height: float = 5.0, rows: int = 1,
               height_ratios: Sequence[float] | None = None, ax=None) -> tuple[Figure, Any]:
    """A figure with ``rows`` axes sharing x, with fixed margins for the title and the note;
    or, given ``ax`` (one Axes, or ``rows`` of them), that Axes' figure and the axes (a single
    Axes where ``rows`` are wanted gives the axes and None for the others).

    (Fixed margins rather than constrained layout: drawing is then twice as fast, and every
    figure here has the same furniture.)
    """
    if ax is not None:
        if rows == 1:
            return _axes_figure(ax), ax
        axes = list(ax) if isinstance(ax, (list, tuple, np.ndarray)) else [ax]
        axes += [None] * (rows - len(axes))
        return _axes_figure(axes[0]), axes[:rows]
    fig = Figure(figsize=(width, height))
    fig._sahaboltz_layout = True  # the margins are ours to adjust
    fig.subplots_adjust(left=0.115, right=0.955, top=0.93, bottom=0.14, hspace=0.08)
    if rows == 1:
        return fig, fig.add_subplot()
    axes = fig.subplots(rows, 1, sharex=True, gridspec_kw={"height_ratios": height_ratios})
    return fig, axes


def _axes_figure(ax) -> Figure:
    fig = getattr(ax, "figure", None)
    if fig is None or not hasattr(ax, "plot"):
        raise InputError(f"ax must be a matplotlib Axes, got {ax!r}")
    return fig


def _own(fig: Figure) -> bool:
    return getattr(fig, "_sahaboltz_layout", False)


def add_note(fig: Figure, text: str, width: int = 118) -> None:
    """The conditions of a figure, in small type under the axes (the margin grows to fit).
    On a figure of your own (``ax=``) the note goes under the axes without moving them."""
    lines = textwrap.wrap(text, width=width)
    inch = 1.0 / fig.get_figheight()
    fig.text(0.012, 0.012, "\n".join(lines), fontsize=7.5, color="0.25", ha="left", va="bottom")
    if _own(fig):
        fig.subplots_adjust(bottom=0.58 * inch + 0.13 * inch * len(lines))


def set_title(fig: Figure, ax, title: str, width: int = 78) -> None:
    """Title over ``ax``, wrapped to fit; the top margin grows with the lines."""
    lines = textwrap.wrap(title, width=width)
    ax.set_title("\n".join(lines), fontsize=10.5)
    if _own(fig):
        inch = 1.0 / fig.get_figheight()
        fig.subplots_adjust(top=1.0 - (0.12 + 0.19 * len(lines)) * inch)


def _annotate(fig: Figure, ax, title: str, note: str, annotate: bool) -> None:
    """Title and note unless ``annotate`` is False."""
    if annotate:
        set_title(fig, ax, title)
        if note:
            add_note(fig, note)


def save_figure(fig: Figure, path: str | os.PathLike, dpi: float | None = None) -> Path:
    """Write ``fig`` (or the ``(fig, ax)`` a plot function returns) to ``path`` as PNG or PDF
    (by suffix), never leaving a half-written file; PNG at ``dpi`` (default 200).  The file
    gets the usual permissions (those of a new file under the user's umask).

    Raises
    ------
    InputError
        An unsupported suffix, or a directory that cannot be written.
    """
    if isinstance(fig, tuple):
        fig = fig[0]
    path = Path(path)
    fmt = FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise InputError(f"cannot tell the image format of {path.name!r}: end the file name "
                         f"with {' or '.join(FORMATS)}")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the directory {path.parent}: {exc.strerror}") from None
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp")
    try:
        fig.savefig(tmp, format=fmt, dpi=DEFAULT_DPI if dpi is None else float(dpi))
        os.replace(tmp, path)
    except OSError as exc:
        raise InputError(f"cannot write {path}: {exc.strerror or exc}") from None
    finally:
        tmp.unlink(missing_ok=True)
    return path


def _pressure_axis_label(quantity: str) -> str:
    c = CLOSURES[quantity]
    return f"{c.label} ${c.tex}$ [{unit_label(c.unit, tex=True)}]"


def plain_log_ticks(axis, lo: float, hi: float) -> None:
    """Label a logarithmic axis with plain numbers (3000, 5000, 10000) rather than powers."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter

    for mantissas in ((1, 2, 3, 5), (1, 2, 5), (1, 3), (1,)):
        ticks = [m * 10.0**k for k in range(int(np.floor(np.log10(lo))) - 1,
                                            int(np.ceil(np.log10(hi))) + 1)
                 for m in mantissas if lo * (1 - 1e-9) <= m * 10.0**k <= hi * (1 + 1e-9)]
        if len(ticks) <= 9:
            break
    if len(ticks) < 2:
        return  # the default labels are fine for so narrow a range
    axis.set_major_locator(FixedLocator(ticks))
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:,.0f}" if v >= 1 else f"{v:g}"))
    axis.set_minor_formatter(NullFormatter())


def log_ticks(axis, lo: float, hi: float, plain: bool = True) -> None:
    """Ticks for an axis that shows log10 of a quantity: labels in the quantity itself.

    ``plain``: 3,000 / 5,000 / 10,000 style labels; otherwise decades as powers of ten.
    """
    from matplotlib.ticker import FixedLocator, FuncFormatter

    k0, k1 = int(np.floor(np.log10(lo))) - 1, int(np.ceil(np.log10(hi))) + 1
    inside = lambda v: lo * (1 - 1e-9) <= v <= hi * (1 + 1e-9)
    if plain:
        for mantissas in ((1, 2, 3, 5), (1, 2, 5), (1, 3), (1,)):
            major = [m * 10.0**k for k in range(k0, k1) for m in mantissas if inside(m * 10.0**k)]
            if len(major) <= 9:
                break
        fmt = FuncFormatter(lambda v, _: f"{10**v:,.0f}" if 10**v >= 1 else f"{10**v:.3g}")
    else:
        step = max(1, int(np.ceil((np.log10(hi) - np.log10(lo)) / 9)))
        major = [10.0**k for k in range(k0, k1) if k % step == 0 and inside(10.0**k)]
        fmt = FuncFormatter(lambda v, _: f"$10^{{{int(round(v))}}}$")
    minor = [m * 10.0**k for k in range(k0, k1) for m in range(1, 10) if inside(m * 10.0**k)]
    axis.set_major_locator(FixedLocator(np.log10(major)))
    axis.set_major_formatter(fmt)
    axis.set_minor_locator(FixedLocator(np.log10(minor)))


def _stage_names(element, charges: Sequence[int]) -> list[str]:
    z = atomic_number(element)
    return [spectroscopic_name(z, int(q)) for q in charges]


# -- drawing: stage fractions --------------------------------------------------------------
def draw_stage_fractions(temperature, fractions, names: Sequence[str], *, title: str,
                         note: str = "", log: bool = False, min_fraction: float = 1e-3,
                         ax=None, annotate: bool = True) -> tuple[Figure, Any]:
    """Fractions of an element's stages against temperature.

    Parameters
    ----------
    temperature : array_like, shape (n,)
        T [K], increasing.
    fractions : array_like, shape (n_stages, n)
        n_stage / N_element.
    names : sequence of str
        One label per stage ("Fe I", ...).
    log : bool
        Logarithmic fraction axis (down to ``min_fraction``).
    min_fraction : float
        Stages that never reach this fraction are left out.
    """
    t = np.asarray(temperature, dtype=float)
    f = np.asarray(fractions, dtype=float)
    if f.shape != (len(names), t.size):
        raise InputError(f"fractions must have shape ({len(names)}, {t.size}), got {f.shape}")
    fig, ax = new_figure(ax=ax)
    shown = [i for i in range(len(names)) if f[i].max() >= min_fraction]
    for k, i in enumerate(shown):
        ax.plot(t, f[i], color=_COLORS[k % len(_COLORS)], lw=1.8, label=names[i])
    ax.set_xlabel("temperature $T$ [K]")
    ax.set_ylabel("fraction of the element in the stage, $n_r/N$")
    ax.set_xlim(t[0], t[-1])
    if log:
        ax.set_yscale("log")
        ax.set_ylim(min_fraction, 2.5)
    else:
        ax.set_ylim(0.0, 1.08)
    ax.grid(alpha=0.3)
    _annotate(fig, ax, title, note, annotate)
    _label_curves(fig, ax, t, [f[i] for i in shown], [names[i] for i in shown],
                  [_COLORS[k % len(_COLORS)] for k in range(len(shown))])
    return fig, ax


def _label_curves(fig, ax, t, curves, names, colors) -> None:
    """Name each curve near its peak, at the first spot where the name clears the other
    names and the curves (above the peak, else beside the falling or rising flank)."""
    renderer, frame, lines, taken = _obstacles(fig, ax)
    n = t.size
    idx = np.arange(n)
    for y, name, color in zip(curves, names, colors):
        j = int(np.argmax(y))
        edge = "left" if j < 0.06 * n else ("right" if j > 0.94 * n else "center")
        spots = [(j, (0, 4), edge)]
        for level in (0.8, 0.5, 0.25):
            for side, off, ha in ((idx > j, (5, 2), "left"), (idx < j, (-5, 2), "right")):
                if side.any():
                    k = int(np.argmin(np.where(side, np.abs(y - level * y[j]), np.inf)))
                    spots.append((k, off, ha))
        placed = False
        for k, off, ha in spots:
            ann = ax.annotate(name, (t[k], y[k]), xytext=off, textcoords="offset points",
                              ha=ha, va="bottom", color=color, fontsize=9.5,
                              fontweight="bold")
            box = ann.get_window_extent(renderer)
            pad = box.expanded(1.06, 1.1)
            if (frame.contains(box.x0 + 1, box.y0 + 1) and frame.contains(box.x1 - 1, box.y1 - 1)
                    and not any(pth.intersects_bbox(pad, filled=False) for pth in lines)
                    and not any(pad.overlaps(b) for b in taken)):
                taken.append(pad)
                placed = True
                break
            ann.remove()
        if not placed:  # nowhere free: above the peak after all
            ann = ax.annotate(name, (t[j], y[j]), xytext=(0, 4), textcoords="offset points",
                              ha=edge, va="bottom", color=color, fontsize=9.5,
                              fontweight="bold")
            taken.append(ann.get_window_extent(renderer))


# -- drawing: dominant stage ---------------------------------------------------------------
def draw_dominant_map(temperature, pressure, dominant, element, *, title: str, note: str = "",
                      pressure_quantity: str = "gas_pressure", fractions=None,
                      charges: Sequence[int] | None = None, track=None,
                      marks: Sequence[tuple[float, float, str]] = (), ax=None,
                      annotate: bool = True) -> tuple[Figure, Any]:
    """Map of the most populated stage of an element over the (T, P) plane.

    Parameters
    ----------
    temperature : array_like, shape (nT,)
        T [K], increasing.
    pressure : array_like, shape (nP,)
        The pressure-like quantity, increasing, in its cgs unit.
    dominant : array_like of int, shape (nT, nP)
        Charge of the dominant stage at each grid point.
    element : str
    fractions : array_like, shape (n_stages, nT, nP), optional
        Stage fractions; when given, regions and boundaries follow the lines where
        neighbouring stages are equally populated (interpolated between grid points) instead
        of the cells of the integer map.
    charges : sequence of int, optional
        Charge of each row of ``fractions``.
    track : (T, P, label), optional
        A curve to overplot, e.g. the T-P relation of a model atmosphere.
    marks : sequence of (T, P, text)
        Points to mark and label on the map (e.g. depths along the track).
    """
    t = np.asarray(temperature, dtype=float)
    p = np.asarray(pressure, dtype=float)
    d = np.asarray(dominant).astype(int)
    if d.shape != (t.size, p.size):
        raise InputError(f"dominant must have shape ({t.size}, {p.size}), got {d.shape}")
    present = sorted(set(d.ravel().tolist()))
    lo, hi = present[0], present[-1]
    qs = list(range(lo, hi + 1))
    names = _stage_names(element, qs)
    fig, ax = new_figure(7.2, 5.4, ax=ax)
    palette = ["#dbe9f6", "#fde2c8", "#d7efd9", "#f6d5d3", "#e6dcf0", "#efe3c9", "#f7dcec",
               "#e2e2e2"]
    cmap = ListedColormap([palette[(q - lo) % len(palette)] for q in qs])
    norm = BoundaryNorm(np.arange(lo - 0.5, hi + 1.0), cmap.N)
    # everything is drawn in (log10 T, log10 P) on linear axes, so that contour lines are
    # interpolated in the logarithms, where the fields are smooth; ticks show plain values
    lt, lp = np.log10(t), np.log10(p)
    tt, pp = np.meshgrid(lt, lp, indexing="ij")
    if fractions is not None and charges is not None and len(qs) > 1:
        # a smooth "stage level": lo + sum_q logistic(ln f_{q+1} - ln f_q).  It passes q + 1/2
        # exactly where stages q and q+1 are equally populated, so filling between its
        # half-integer contours and drawing them gives regions and boundary lines that agree
        # and do not show the grid cells
        from scipy.special import expit

        ch = list(charges)
        floor = 1e-290
        fr = np.asarray(fractions, dtype=float)
        level = np.full(d.shape, float(lo))
        for q in qs[:-1]:
            a_, b_ = fr[ch.index(q)], fr[ch.index(q + 1)]
            with np.errstate(divide="ignore"):
                field = np.log(np.maximum(b_, floor)) - np.log(np.maximum(a_, floor))
            # both underflowed: far from this boundary, on the side the dominant stage says
            both = (a_ < floor) & (b_ < floor)
            field = np.where(both, np.where(d > q, 50.0, -50.0), field)
            level += expit(field)
        ax.contourf(tt, pp, level, levels=np.arange(lo - 0.5, hi + 1.0), cmap=cmap, norm=norm)
    else:
        level = d.astype(float)
        ax.pcolormesh(tt, pp, d, cmap=cmap, norm=norm, shading="nearest", rasterized=True)
    # boundaries between neighbouring stages, labelled
    for q in qs[:-1]:
        if not (level.min() < q + 0.5 < level.max()):
            continue
        cs = ax.contour(tt, pp, level, levels=[q + 0.5], colors="k", linewidths=1.3)
        cs.stage_boundary = (q, q + 1)  # for readers of the figure (tests); log10 T, log10 P
        label = f"{names[q - lo]} | {names[q - lo + 1]}"
        ax.clabel(cs, fmt={q + 0.5: label}, inline=True, fontsize=7.5, inline_spacing=3)
    if track is not None:
        tt_, pp_, lab = track
        ax.plot(np.log10(tt_), np.log10(pp_), color="#8b1a1a", lw=2.0, label=lab)
        ax.legend(loc="upper left", fontsize=8.5, framealpha=0.9)
    for tm, pm, _ in marks:
        ax.plot([np.log10(tm)], [np.log10(pm)], "o", color="#8b1a1a", ms=4.5)
    ax.set_xlim(lt[0], lt[-1])
    ax.set_ylim(lp[0], lp[-1])
    log_ticks(ax.xaxis, t[0], t[-1], plain=True)
    log_ticks(ax.yaxis, p[0], p[-1], plain=False)
    ax.set_xlabel("temperature $T$ [K]")
    ax.set_ylabel(_pressure_axis_label(pressure_quantity))
    _annotate(fig, ax, title, note, annotate)
    # labels last, placed where they clear the lines: the marks, then the stage names
    _label_marks(fig, ax, [(np.log10(tm), np.log10(pm), text) for tm, pm, text in marks])
    _label_regions(fig, ax, lt, lp, d, qs, names)
    return fig, ax


def _obstacles(fig, ax):
    """Renderer, axes frame, drawn line paths and text boxes, in display coordinates."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    if not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    renderer = fig.canvas.get_renderer()
    lines = [ax.transData.transform_path(path)
             for coll in ax.collections if hasattr(coll, "stage_boundary")
             for path in coll.get_paths()]
    lines += [ax.transData.transform_path(ln.get_path()) for ln in ax.lines]
    taken = [t.get_window_extent(renderer) for t in ax.texts]
    return renderer, ax.get_window_extent(renderer), lines, taken


def _label_marks(fig, ax, marks) -> None:
    """Label marked points beside them, on the first side where the label clears the lines."""
    if not marks:
        return
    renderer, frame, lines, taken = _obstacles(fig, ax)
    sides = [((7, -2), "left", "top"), ((-7, -2), "right", "top"),
             ((7, 4), "left", "bottom"), ((-7, 4), "right", "bottom")]
    for x, y, text in marks:
        for k, (off, ha, va) in enumerate(sides):
            ann = ax.annotate(text, (x, y), xytext=off, textcoords="offset points", fontsize=8,
                              color="#8b1a1a", ha=ha, va=va)
            box = ann.get_window_extent(renderer).expanded(1.05, 1.1)
            fits = (frame.contains(box.x0, box.y0) and frame.contains(box.x1, box.y1)
                    and not any(p.intersects_bbox(box, filled=False) for p in lines)
                    and not any(box.overlaps(b) for b in taken))
            if fits or k == len(sides) - 1:  # no side is free: keep the first choice
                if not fits:
                    ann.remove()
                    ann = ax.annotate(text, (x, y), xytext=sides[0][0],
                                      textcoords="offset points", fontsize=8,
                                      color="#8b1a1a", ha="left", va="top")
                taken.append(ann.get_window_extent(renderer))
                break
            ann.remove()


def _label_regions(fig, ax, x, y, d, qs, names) -> None:
    """Stage names inside their regions (x, y: the plot coordinates of the grid).

    Candidates are the points deepest inside each region, nearest its centre first; a name is
    put at the first candidate where its box clears every line and label already drawn, and
    left out when none does (the boundary labels still name the stage).
    """
    from scipy.ndimage import distance_transform_edt, label

    renderer, frame, lines, taken = _obstacles(fig, ax)
    sampling = ((x[1] - x[0]) / (x[-1] - x[0]), (y[1] - y[0]) / (y[-1] - y[0]))
    for q, name in zip(qs, names):
        regions, n = label(d == q)
        for r in range(1, n + 1):
            mask = regions == r
            dist = distance_transform_edt(np.pad(mask, 1), sampling=sampling)[1:-1, 1:-1]
            if dist.max() < 0.03:
                continue  # a sliver: its boundary label says enough
            ii, jj = np.nonzero(dist >= 0.5 * dist.max())
            ci, cj = np.nonzero(mask)
            far = ((ii - ci.mean()) * sampling[0]) ** 2 + ((jj - cj.mean()) * sampling[1]) ** 2
            score = dist[ii, jj] - 0.5 * np.sqrt(far)
            text = ax.text(0, 0, name, ha="center", va="center", fontweight="bold",
                           color="0.15")
            if not _place(text, renderer, frame, lines, taken,
                          [(x[ii[k]], y[jj[k]]) for k in np.argsort(-score)[:60]]):
                text.remove()


def _place(text, renderer, frame, lines, taken, candidates) -> bool:
    """Put ``text`` at the first candidate (large type, then smaller) that clears everything."""
    for size in (12, 9.5):
        text.set_fontsize(size)
        for xy in candidates:
            text.set_position(xy)
            box = text.get_window_extent(renderer).expanded(1.15, 1.3)
            if (frame.contains(box.x0, box.y0) and frame.contains(box.x1, box.y1)
                    and not any(pth.intersects_bbox(box, filled=False) for pth in lines)
                    and not any(box.overlaps(b) for b in taken)):
                taken.append(box)
                return True
    return False


# -- drawing: partition functions, electron pressure, level populations ---------------------
def draw_partition_functions(temperature, curves: Sequence[tuple[str, str, Any]], *, title: str,
                             note: str = "", ax=None, annotate: bool = True
                             ) -> tuple[Figure, Any]:
    """Partition functions against temperature.

    Parameters
    ----------
    temperature : array_like, shape (n,)
    curves : sequence of (species name, truncation, U array of shape (n,))
        One colour per species, one line style per truncation.  When a species has a
        "plain" curve and others, a lower panel shows their ratio to the plain sum (the
        curves themselves often lie on top of each other).
    ax : Axes or (Axes, Axes), optional
        Where to draw; with one Axes of your own the ratio panel is left out.

    Returns (fig, ax), or (fig, (ax, ratio_ax)) with the ratio panel.
    """
    t = np.asarray(temperature, dtype=float)
    species = list(dict.fromkeys(c[0] for c in curves))
    styles = {tr: _LINESTYLES[i % len(_LINESTYLES)]
              for i, tr in enumerate(dict.fromkeys(c[1] for c in curves))}
    plain = {c[0]: np.asarray(c[2], dtype=float) for c in curves if c[1] == "plain"}
    ratios = [c for c in curves if c[1] != "plain" and c[0] in plain]
    if ratios:
        fig, (ax, axr) = new_figure(7.2, 6.2, rows=2, height_ratios=[2.3, 1], ax=ax)
    else:
        fig, ax = new_figure(ax=ax[0] if isinstance(ax, (list, tuple)) else ax)
        axr = None
    for name, trunc, u in curves:
        color = _COLORS[species.index(name) % len(_COLORS)]
        ax.plot(t, np.asarray(u, dtype=float), color=color, ls=styles[trunc], lw=1.7,
                label=f"{name}, {trunc}")
    ax.set_yscale("log")
    lo, hi = ax.get_ylim()
    plain_log_ticks(ax.yaxis, lo, hi)
    ax.set_xlim(t[0], t[-1])
    ax.set_ylabel("partition function $U(T)$ (dimensionless)")
    ax.grid(alpha=0.3, which="both")
    ax.legend(fontsize=8.5, ncol=2 if len(curves) > 6 else 1, framealpha=0.85)
    if annotate:
        set_title(fig, ax, title)
    if axr is not None:
        for name, trunc, u in ratios:
            color = _COLORS[species.index(name) % len(_COLORS)]
            axr.plot(t, np.asarray(u, dtype=float) / plain[name], color=color,
                     ls=styles[trunc], lw=1.5)
        axr.axhline(1.0, color="0.5", lw=0.8)
        axr.set_ylabel("ratio to plain sum")
        axr.grid(alpha=0.3)
        axr.set_xlabel("temperature $T$ [K]")
    else:
        ax.set_xlabel("temperature $T$ [K]")
    if note and annotate:
        add_note(fig, note)
    return (fig, (ax, axr)) if axr is not None else (fig, ax)


def draw_electron_pressure(temperature, curves: Sequence[tuple[str, Any]], *, title: str,
                           note: str = "", ax=None, annotate: bool = True
                           ) -> tuple[Figure, Any]:
    """Electron pressure against temperature, one curve per gas pressure.

    Parameters
    ----------
    temperature : array_like, shape (n,)
    curves : sequence of (label, P_e array [dyn cm^-2] of shape (n,))
    """
    t = np.asarray(temperature, dtype=float)
    fig, ax = new_figure(ax=ax)
    for k, (lab, pe) in enumerate(curves):
        ax.plot(t, np.asarray(pe, dtype=float), color=_COLORS[k % len(_COLORS)], lw=1.8, label=lab)
    ax.set_yscale("log")
    ax.set_xlim(t[0], t[-1])
    ax.set_xlabel("temperature $T$ [K]")
    ax.set_ylabel("electron pressure $P_e = n_e k T$ [dyn cm$^{-2}$]")
    ax.grid(alpha=0.3, which="both")
    ax.legend(fontsize=8.5, framealpha=0.85, loc="lower right")
    _annotate(fig, ax, title, note, annotate)
    return fig, ax


def draw_level_populations(series: Sequence[tuple[str, Any, Any]], *, title: str,
                           note: str = "", boltzmann_lines: Sequence[tuple[float, float]] = (),
                           ax=None, annotate: bool = True) -> tuple[Figure, Any]:
    """Level-population diagram: log10(n_i / g_i) against excitation energy.

    Parameters
    ----------
    series : sequence of (label, energy_ev array, log10(n_i/g_i) array)
    boltzmann_lines : sequence of (temperature [K], intercept)
        Straight lines of slope -1 / (k T ln 10) per eV (the Boltzmann law), drawn through
        the given intercepts, one per series.
    """
    fig, ax = new_figure(ax=ax)
    emax = max(float(np.max(e)) for _, e, _ in series)
    for k, (lab, e, y) in enumerate(series):
        color = _COLORS[k % len(_COLORS)]
        ax.plot(e, y, "o", ms=3.2, color=color, alpha=0.8, label=lab, mec="none")
        if k < len(boltzmann_lines):
            t, b = boltzmann_lines[k]
            x = np.array([0.0, emax])
            ax.plot(x, b - x / (K_B_EV * t * _LN10), color=color, lw=1.0, ls="--", alpha=0.8)
    ax.set_xlabel("excitation energy $E_i$ [eV]")
    ax.set_ylabel("$\\log_{10}(n_i/g_i)$  [$n_i$ in cm$^{-3}$]")
    ax.grid(alpha=0.3)
    handles, labels = ax.get_legend_handles_labels()
    if boltzmann_lines:
        from matplotlib.lines import Line2D
        handles.append(Line2D([], [], color="0.3", ls="--", lw=1.0))
        labels.append("Boltzmann law, slope $-1/(kT\\,\\ln 10)$")
    ax.legend(handles, labels, fontsize=8.5, framealpha=0.85, loc="upper right")
    _annotate(fig, ax, title, note, annotate)
    return fig, ax


# -- computing and drawing -----------------------------------------------------------------
def _solve(composition, temperature, closure: str, value, truncation, lowering, h_minus=True):
    from sahaboltz.equilibrium import solve_equilibrium

    if closure not in CLOSURE_UNITS:
        raise InputError(f"pressure_quantity must be one of {', '.join(CLOSURE_UNITS)}, "
                         f"got {closure!r}")
    return solve_equilibrium(composition, temperature, **{closure: value},
                             truncation=truncation, lowering=lowering, h_minus=h_minus)


def _default_composition(composition):
    if composition is not None:
        return composition
    from sahaboltz.data.composition import solar
    return solar()


def _map_pressures(pressure, pressure_quantity: str) -> np.ndarray:
    """The sorted pressure-like axis of a T-P map (at least two values, in cgs)."""
    unit = CLOSURE_UNITS.get(pressure_quantity, "")
    p = np.sort(np.atleast_1d(as_positive_array(pressure, unit, pressure_quantity)).ravel())
    if p.size < 2:
        raise InputError(f"{pressure_quantity}: give at least 2 values for a map "
                         "(e.g. 1e2:1e6:41)")
    return p


def _sorted_temperature(temperature, minimum: int = 2) -> np.ndarray:
    t = np.sort(np.atleast_1d(as_positive_array(temperature, "K", "temperature")).ravel())
    if t.size < minimum:
        raise InputError(f"temperature: give at least {minimum} values for a curve "
                         f"(e.g. 3000:12000:200)")
    return t


def _scalar(value, name: str, unit: str) -> float:
    v = as_positive_array(value, unit, name)
    if v.size != 1:
        raise InputError(f"{name}: give one value for this plot, got {v.size}")
    return float(v.ravel()[0])


def stage_fractions_plot(element: str, temperature: Any, pressure: Any, *, composition=None,
                         pressure_quantity: str = "gas_pressure", truncation: str | None = None,
                         lowering: bool = False, h_minus: bool = True, log: bool = False,
                         min_fraction: float = 1e-3, ax=None, annotate: bool = True
                         ) -> tuple[Figure, Any]:
    """Stage fractions of ``element`` against temperature at one fixed pressure.

    Parameters
    ----------
    element : str
        Element symbol, e.g. "Fe".
    temperature : array_like or Quantity
        Temperatures [K] (at least two).
    pressure : float or Quantity
        The fixed value of ``pressure_quantity`` in its cgs unit.
    composition : Composition, optional
        Default: solar (Asplund et al. 2009).
    truncation, lowering
        Physics options of :func:`sahaboltz.equilibrium.solve_equilibrium`.
    """
    comp = _default_composition(composition)
    t = _sorted_temperature(temperature)
    pv = _scalar(pressure, pressure_quantity, CLOSURE_UNITS.get(pressure_quantity, ""))
    state = _solve(comp, t, pressure_quantity, pv, truncation, lowering, h_minus)
    fr = state.stage_fractions(element)
    q = state.stage_charges(element)
    sym = atomic_number(element)
    el = spectroscopic_name(sym, 0).split()[0]
    title = (f"Ionization stages of {el} at ${CLOSURES[pressure_quantity].tex}$ = "
             f"{format_value(pv, CLOSURE_UNITS[pressure_quantity], tex=True)}")
    note = describe_state(comp, closure=pressure_quantity, value=pv, truncation=truncation,
                          lowering=lowering, h_minus=h_minus, tex=True)
    return draw_stage_fractions(t, fr, _stage_names(element, q), title=title, note=note,
                                log=log, min_fraction=min_fraction, ax=ax, annotate=annotate)


def element_budget(state, element: str, min_fraction: float = 0.0
                   ) -> tuple[list[str], np.ndarray]:
    """Where an element's nuclei are at every state of a 1-D solve: (names, fractions) with
    the neutral atom, the ions together (H- included), each molecule and each condensate,
    fractions of all its nuclei (they add up to 1).  Parts that never reach
    ``min_fraction`` are left out."""
    fr = np.asarray(state.stage_fractions(element, negative=True), dtype=float)
    q = np.asarray(state.stage_charges(element, negative=True))
    sym = spectroscopic_name(atomic_number(element), 0).split()[0]
    names, rows = [f"{sym} I (atoms)", f"{sym} ions"], [fr[q == 0].sum(axis=0),
                                                          fr[q != 0].sum(axis=0)]
    if hasattr(state, "element_budget"):
        for where, share in state.element_budget(element).items():
            if where != "atoms":
                names.append(where)
                rows.append(np.asarray(share, dtype=float))
    f = np.array(rows)
    keep = [i for i in range(len(names)) if np.nanmax(f[i]) >= min_fraction]
    return [names[i] for i in keep], f[keep]


def element_budget_plot(element: str, temperature: Any, pressure: Any, *, composition=None,
                        pressure_quantity: str = "gas_pressure", molecules="default",
                        condensates: bool = False, truncation: str | None = None,
                        lowering: bool = False, h_minus: bool = True, log: bool = True,
                        min_fraction: float = 1e-3, ax=None, annotate: bool = True
                        ) -> tuple[Figure, Any]:
    """Where the nuclei of ``element`` are (atoms, ions, each molecule, condensed) against
    temperature at one fixed pressure: the element's budget in cool gas."""
    from sahaboltz.equilibrium import solve_equilibrium

    comp = _default_composition(composition)
    t = _sorted_temperature(temperature)
    pv = _scalar(pressure, pressure_quantity, CLOSURE_UNITS.get(pressure_quantity, ""))
    if pressure_quantity not in CLOSURE_UNITS:
        raise InputError(f"pressure_quantity must be one of {', '.join(CLOSURE_UNITS)}, "
                         f"got {pressure_quantity!r}")
    opts = {"molecules": molecules} if molecules not in (None, "none") else {}
    if condensates:
        opts["condensates"] = True
    state = solve_equilibrium(comp, t, **{pressure_quantity: pv}, truncation=truncation,
                              lowering=lowering, h_minus=h_minus, **opts)
    names, f = element_budget(state, element, min_fraction)
    el = names[0].split()[0]
    title = (f"Where the {el} is, at ${CLOSURES[pressure_quantity].tex}$ = "
             f"{format_value(pv, CLOSURE_UNITS[pressure_quantity], tex=True)}")
    note = describe_state(comp, closure=pressure_quantity, value=pv, truncation=truncation,
                          lowering=lowering, h_minus=h_minus, tex=True)
    note += f"; molecules: {molecules}" + ("; with condensates" if condensates else "")
    fig, ax = draw_stage_fractions(t, f, names, title=title, note=note, log=log,
                                   min_fraction=min_fraction, ax=ax, annotate=annotate)
    ax.set_ylabel(f"fraction of the {el} nuclei")
    return fig, ax


def dominant_stage_plot(element: str, temperature: Any, pressure: Any, *, composition=None,
                        pressure_quantity: str = "gas_pressure", truncation: str | None = None,
                        lowering: bool = False, h_minus: bool = True, ax=None,
                        annotate: bool = True) -> tuple[Figure, Any]:
    """Map of the dominant stage of ``element`` over a temperature x pressure grid.

    Parameters
    ----------
    temperature, pressure : array_like
        Grid axes (at least two values each), T [K] and ``pressure_quantity`` in cgs.
    """
    comp = _default_composition(composition)
    t = _sorted_temperature(temperature)
    p = _map_pressures(pressure, pressure_quantity)
    state = _solve(comp, t[:, None], pressure_quantity, p[None, :], truncation, lowering,
                   h_minus)
    d = state.dominant_stage(element, negative=False)
    el = spectroscopic_name(atomic_number(element), 0).split()[0]
    title = f"Dominant ionization stage of {el}"
    note = (describe_state(comp, closure=pressure_quantity, value=p, truncation=truncation,
                           lowering=lowering, h_minus=h_minus, tex=True)
            + "; lines: neighbouring stages equally populated")
    return draw_dominant_map(t, p, d, element, title=title, note=note,
                             pressure_quantity=pressure_quantity,
                             fractions=state.stage_fractions(element),
                             charges=state.stage_charges(element), ax=ax, annotate=annotate)


def partition_function_plot(species: Sequence[str], temperature: Any, *,
                            truncations: Sequence[str] = ("plain",),
                            electron_density: float | None = None,
                            completion: bool = False, ax=None, annotate: bool = True
                            ) -> tuple[Figure, Any]:
    """Partition functions of ``species`` against temperature for several truncations.

    Parameters
    ----------
    species : sequence of str
        E.g. ``["Fe I", "Fe II"]``.
    truncations : sequence of str
        Schemes of :mod:`sahaboltz.kernels.truncation` ("plain", "lowered", "occupation",
        "ground", "below:n=3" ...); the density-dependent ones ("lowered" cuts the sum at
        the Debye-Hueckel-lowered limit, "occupation" weights the levels by occupation
        probabilities) need ``electron_density``.
    electron_density : float, optional
        n_e [cm^-3] held fixed along the curves (needed by the density-dependent schemes).
    completion : bool
        Hydrogenic completion of the level lists (for the density-dependent schemes only).
    """
    from sahaboltz.kernels import truncation as registry
    from sahaboltz.kernels.partition import partition_function

    if isinstance(species, str):
        species = [species]
    if not species:
        raise InputError("give at least one species, e.g. 'Fe I'")
    t = _sorted_temperature(temperature)
    schemes = list(dict.fromkeys(registry.get(x) for x in truncations))
    truncations = [sc.key for sc in schemes]
    needs_ne = [sc.key for sc in schemes if sc.density_dependent]
    if needs_ne and electron_density is None:
        raise InputError(f"truncation {needs_ne[0]!r} depends on the density: give the "
                         "electron density (e.g. 1e15 cm^-3)")
    ne = None if electron_density is None else _scalar(electron_density, "electron_density",
                                                       "cm-3")
    curves = []
    names = []
    for text in species:
        z, charge = parse_species(text)
        name = spectroscopic_name(z, charge)
        names.append(name)
        for sc in schemes:
            kw: dict[str, Any] = {"truncation": sc}
            if sc.density_dependent:
                kw["n_e"] = ne
                kw["completion"] = completion
            curves.append((name, sc.key, partition_function(name, t, **kw)))
    title = f"Partition functions of {', '.join(names)}"
    bits = [f"truncations: {', '.join(truncations)}"]
    if needs_ne:
        bits.append(f"$n_e$ = {format_value(ne, 'cm-3', tex=True)} held fixed"
                    + ("; lowered: Debye-Hueckel limit from $n_e$, $T$" if "lowered" in truncations
                       else ""))
        bits.append("hydrogenic completion" if completion else "tabulated levels only")
    bits.append("levels: NIST ASD via level_data")
    return draw_partition_functions(t, curves, title=title, note="; ".join(bits), ax=ax,
                                    annotate=annotate)


def electron_pressure_plot(temperature: Any, gas_pressures: Any, *, composition=None,
                           truncation: str | None = None, lowering: bool = False,
                           h_minus: bool = True, ax=None, annotate: bool = True
                           ) -> tuple[Figure, Any]:
    """Electron pressure of a mixture against temperature, one curve per gas pressure."""
    comp = _default_composition(composition)
    t = _sorted_temperature(temperature)
    p = np.atleast_1d(as_positive_array(gas_pressures, "dyn cm-2", "gas_pressure")).ravel()
    state = _solve(comp, t[:, None], "gas_pressure", p[None, :], truncation, lowering, h_minus)
    pe = state.electron_pressure
    curves = [(f"$P_\\mathrm{{gas}}$ = {format_value(pv, 'dyn cm-2', tex=True)}",
               pe[:, k]) for k, pv in enumerate(p)]
    from sahaboltz.faces.state_options import composition_label
    title = f"Electron pressure of {composition_label(comp)}"
    note = describe_state(comp, closure="gas_pressure", value=p, truncation=truncation,
                          lowering=lowering, h_minus=h_minus, tex=True)
    return draw_electron_pressure(t, curves, title=title, note=note, ax=ax, annotate=annotate)


def level_population_data(species: str, temperature: Any, pressure: Any, *, composition=None,
                          pressure_quantity: str = "gas_pressure", truncation: str | None = None,
                          lowering: bool = False, h_minus: bool = True):
    """Energies [eV], g and level densities n_i [cm^-3] of the tabulated bound levels.

    Returns
    -------
    energy_ev : ndarray, shape (n_levels,)
    g : ndarray, shape (n_levels,)
    populations : ndarray, shape (n_levels, n_temperatures)
    state : EquilibriumState
    """
    from sahaboltz.data.database import default_database

    comp = _default_composition(composition)
    t = np.atleast_1d(as_positive_array(temperature, "K", "temperature")).ravel()
    pv = _scalar(pressure, pressure_quantity, CLOSURE_UNITS.get(pressure_quantity, ""))
    sp = default_database().species(species)
    state = _solve(comp, t, pressure_quantity, pv, truncation, lowering, h_minus)
    pops, energy = state.level_populations(sp.name)
    e_tab, g_tab = sp.bound_energy_ev, sp.bound_g.astype(float)
    order = np.argsort(e_tab, kind="stable")
    e_tab, g_tab = e_tab[order], g_tab[order]
    n = e_tab.size
    # the state lists the tabulated bound levels first, lowest first, then any completion
    if energy.size < n or not np.allclose(energy[:n], e_tab):
        raise InputError(f"level populations of {sp.name}: the solver's level list does not "
                         "match the database's bound levels")
    return e_tab, g_tab, np.asarray(pops)[:n], state


def level_population_plot(species: str, temperature: Any, pressure: Any, *, composition=None,
                          pressure_quantity: str = "gas_pressure", truncation: str | None = None,
                          lowering: bool = False, h_minus: bool = True,
                          max_energy_ev: float | None = None, ax=None,
                          annotate: bool = True) -> tuple[Figure, Any]:
    """Boltzmann diagram of one species: log10(n_i/g_i) against E_i, at one or more T.

    Parameters
    ----------
    species : str
        E.g. "Fe I".
    temperature : float or array_like
        One or a few temperatures [K]; one series of points each.
    pressure : float
        The fixed ``pressure_quantity`` [cgs].
    max_energy_ev : float, optional
        Leave out levels above this excitation energy.
    """
    comp = _default_composition(composition)
    e, g, pops, state = level_population_data(species, temperature, pressure,
                                              composition=comp,
                                              pressure_quantity=pressure_quantity,
                                              truncation=truncation, lowering=lowering,
                                              h_minus=h_minus)
    keep = np.ones(e.size, bool) if max_energy_ev is None else e <= max_energy_ev
    if not keep.any():
        raise InputError(f"no level of {species} below {max_energy_ev} eV")
    t = state.temperature
    series, lines = [], []
    for k in range(t.size):
        nk = pops[:, k]
        ok = keep & (nk > 0)
        y = np.log10(nk[ok] / g[ok])
        series.append((f"T = {t[k]:,.0f} K", e[ok], y))
        lines.append((float(t[k]), float(np.log10(nk[0] / g[0]))))
    name = spectroscopic_name(*parse_species(species))
    pv = float(np.ravel(state.closure_value)[0])
    title = f"Level populations of {name} (Boltzmann diagram)"
    note = (describe_state(comp, closure=pressure_quantity, value=pv, truncation=truncation,
                           lowering=lowering, h_minus=h_minus, tex=True)
            + f"; {int(keep.sum())} tabulated bound levels; $n_i$ = number density of level $i$")
    return draw_level_populations(series, title=title, note=note, boltzmann_lines=lines, ax=ax,
                                  annotate=annotate)


# -- diagnostics ---------------------------------------------------------------------------
def diagnostic_fit_plot(fit, *, ax=None, annotate: bool = True) -> tuple[Figure, Any]:
    """A Boltzmann or Saha-Boltzmann fit: the lines with their error bars, the fitted line,
    rejected and flagged lines marked, and a lower panel of the studentized residuals.

    Parameters
    ----------
    fit : BoltzmannFit or SahaBoltzmannFit
        From :func:`sahaboltz.diagnostics.boltzmann_plot` or
        :func:`~sahaboltz.diagnostics.saha_boltzmann_plot`.
    ax : Axes or (Axes, Axes), optional
        Where to draw; one Axes of your own leaves the residual panel out.
    annotate : bool
        Title and the note of the method's assumptions (default True).

    Returns (fig, (ax, residual_ax)), or (fig, ax) without the residual panel.
    """
    saha = hasattr(fit, "upper")
    fig, axes = new_figure(7.2, 6.0, rows=2, height_ratios=[2.6, 1], ax=ax)
    ax, axr = axes[0], axes[1]
    groups = ([(fit.lower, ~fit.upper_stage), (fit.upper, fit.upper_stage)]
              if saha else [(fit.species, np.ones(fit.used.size, dtype=bool))])
    flagged = np.array([("outlier" in f) or ("self-absorption" in f) for f in fit.flags])
    for k, (name, sel) in enumerate(groups):
        color = _COLORS[k]
        ok = sel & fit.used
        ax.errorbar(fit.x[ok], fit.y[ok], yerr=fit.y_error[ok], fmt="o", ms=4, color=color,
                    capsize=2, lw=1.0, label=name)
        out = sel & ~fit.used
        if out.any():
            ax.errorbar(fit.x[out], fit.y[out], yerr=fit.y_error[out], fmt="x", ms=6,
                        color=color, capsize=2, lw=1.0, label=f"{name}, rejected")
        if axr is not None:
            axr.plot(fit.x[sel], fit.studentized[sel], "o" if k == 0 else "s", ms=3.5,
                     color=color, mec="none")
    if flagged.any():
        ax.plot(fit.x[flagged], fit.y[flagged], "s", mfc="none", mec=_COLORS[3], ms=10,
                label="flagged (outlier or self-absorption)")
    lo, hi = float(fit.x.min()), float(fit.x.max())
    pad = 0.05 * (hi - lo or 1.0)
    xs = np.array([lo - pad, hi + pad])
    ax.plot(xs, fit.intercept + fit.slope * xs, color="k", lw=1.1,
            label=f"$T$ = {fit.temperature:,.0f} $\\pm$ {fit.temperature_error:,.0f} K")
    y_label = ("$\\ln(I/(g A))$" if fit.photon_counts else "$\\ln(I \\lambda/(g A))$")
    if saha:
        ax.set_ylabel(y_label + " (upper stage: $- \\ln(2 S(T)/n_e)$)")
        x_label = "$E_u$ [eV] (upper stage: $E_u + \\chi - \\Delta\\chi$)"
        src = "fitted" if fit.ne_fitted else "given"
        lo_ne, hi_ne = fit.electron_density_bounds
        title = (f"Saha-Boltzmann plot of {fit.lower} + {fit.upper}: $n_e$ = "
                 f"{format_value(fit.electron_density, 'cm-3', tex=True)} ({src}; "
                 f"1$\\sigma$: {format_value(lo_ne, '', tex=True).strip()} .. "
                 f"{format_value(hi_ne, '', tex=True).strip()})")
    else:
        ax.set_ylabel(y_label)
        x_label = "upper-level energy $E_u$ [eV]"
        title = f"Boltzmann plot of {fit.species}"
    ax.legend(fontsize=8, framealpha=0.85)
    ax.grid(alpha=0.3)
    ax.set_xlim(xs[0], xs[1])
    if axr is not None:
        axr.axhline(0.0, color="0.4", lw=0.8)
        axr.set_ylabel("studentized\nresidual")
        axr.grid(alpha=0.3)
        axr.set_xlabel(x_label)
    else:
        ax.set_xlabel(x_label)
    note = ("LTE, optically thin lines and a homogeneous plasma assumed; "
            f"{int(fit.used.sum())} of {fit.used.size} lines used, "
            f"$\\chi^2$/dof = {fit.chi2:.3g}/{fit.dof}")
    _annotate(fig, ax, title, note, annotate)
    return (fig, (ax, axr)) if axr is not None else (fig, ax)


__all__ = ["save_figure", "new_figure", "diagnostic_fit_plot", "add_note", "draw_stage_fractions",
           "draw_dominant_map",
           "draw_partition_functions", "draw_electron_pressure", "draw_level_populations",
           "stage_fractions_plot", "dominant_stage_plot", "partition_function_plot",
           "electron_pressure_plot", "level_population_data", "level_population_plot",
           "log_ticks", "plain_log_ticks", "set_title"]


# -- thermodynamic maps ----------------------------------------------------------------------
#: quantities a thermodynamic map can show: name -> (label, contour levels)
THERMO_MAP_QUANTITIES = {
    "adiabatic_gradient": (r"adiabatic gradient $\nabla_\mathrm{ad}$",
                           [0.05, 0.1, 0.15, 0.2, 0.25, 0.3, 0.35, 0.39]),
    "gamma1": (r"$\Gamma_1$", [1.1, 1.2, 1.3, 1.4, 1.5, 1.6, 1.65]),
    "gamma3": (r"$\Gamma_3$", [1.1, 1.2, 1.3, 1.4, 1.5, 1.6, 1.65]),
}


def draw_thermo_map(temperature, pressure, field, *, quantity: str, title: str, note: str = "",
                    pressure_quantity: str = "gas_pressure") -> Figure:
    """Colour map of a thermodynamic quantity (shape (nT, nP)) over the (T, P) plane, with
    labelled contours (the ionization and dissociation zones show as its valleys)."""
    from matplotlib import cm

    label, levels = THERMO_MAP_QUANTITIES[quantity]
    t = np.asarray(temperature, dtype=float)
    p = np.asarray(pressure, dtype=float)
    f = np.asarray(field, dtype=float)
    if f.shape != (t.size, p.size):
        raise InputError(f"field must have shape ({t.size}, {p.size}), got {f.shape}")
    fig, ax = new_figure(7.2, 5.4)
    lt, lp = np.log10(t), np.log10(p)
    tt, pp = np.meshgrid(lt, lp, indexing="ij")
    mesh = ax.pcolormesh(tt, pp, f, cmap=cm.viridis, shading="nearest", rasterized=True)
    fig.colorbar(mesh, ax=ax, label=label)
    good = np.isfinite(f)
    inside = [lv for lv in levels if good.any() and f[good].min() < lv < f[good].max()]
    if inside:
        cs = ax.contour(tt, pp, np.where(good, f, np.nan), levels=inside, colors="w",
                        linewidths=0.8)
        ax.clabel(cs, fmt="%g", inline=True, fontsize=7.5)
    ax.set_xlim(lt[0], lt[-1])
    ax.set_ylim(lp[0], lp[-1])
    log_ticks(ax.xaxis, t[0], t[-1], plain=True)
    log_ticks(ax.yaxis, p[0], p[-1], plain=False)
    ax.set_xlabel("temperature $T$ [K]")
    ax.set_ylabel(_pressure_axis_label(pressure_quantity))
    set_title(fig, ax, title)
    if note:
        add_note(fig, note)
    return fig


def thermo_map_plot(temperature: Any, pressure: Any, *, quantity: str = "adiabatic_gradient",
                    composition=None, pressure_quantity: str = "gas_pressure",
                    radiation: bool = False, **solver_options) -> Figure:
    """Map of the adiabatic gradient (or Gamma_1, Gamma_3) over a T x P grid.

    ``solver_options`` go to :func:`~sahaboltz.equilibrium.solve_equilibrium` (truncation,
    lowering, h_minus, molecules ...).
    """
    from sahaboltz.equilibrium import solve_equilibrium

    if quantity not in THERMO_MAP_QUANTITIES:
        raise InputError(f"quantity must be one of {', '.join(THERMO_MAP_QUANTITIES)}, "
                         f"got {quantity!r}")
    comp = _default_composition(composition)
    t = _sorted_temperature(temperature)
    p = _map_pressures(pressure, pressure_quantity)
    state = solve_equilibrium(comp, t[:, None], **{pressure_quantity: p[None, :]},
                              radiation=radiation, errors="mask", **solver_options)
    field = state.thermodynamics().get(quantity)
    label = THERMO_MAP_QUANTITIES[quantity][0]
    note = (describe_state(comp, closure=pressure_quantity, value=p,
                           truncation=solver_options.get("truncation"),
                           lowering=bool(solver_options.get("lowering")),
                           h_minus=solver_options.get("h_minus", True))
            + ("; molecules " + str(solver_options["molecules"])
               if solver_options.get("molecules") else "")
            + ("; radiation included" if radiation else "; matter only (no radiation)"))
    return draw_thermo_map(t, p, field, quantity=quantity,
                           title=f"{label.split(' $')[0] if ' $' in label else label} of the "
                                 "LTE gas", note=note, pressure_quantity=pressure_quantity)
