"""The interpolating reader: any stored quantity at arbitrary (T, P) inside the grid.

Interpolation runs in ln T and ln P (the Saha and Boltzmann factors are smooth there), and on
ln q for quantities that are never negative (densities, pressures, fractions, partition
functions); other quantities are interpolated as they are.  The default ``method="quintic"`` is
a tensor product of Lagrange polynomials through 6 points in ln T (error ~ h^6; stage fractions
vary fastest along T, and the one-sided stencils of the outermost temperature cells still
meet 1e-3 on the default grid, which 4 points do not) and 4 points in ln P; ``"cubic"`` is
4 x 4.  Where a stencil spans more than ``e^50`` in a logged quantity (a value that underflowed
to zero next to finite ones) they fall back to bilinear interpolation of the log, which cannot
overshoot.  ``method="linear"`` is bilinear everywhere.  Zeros are logged as the smallest normal float; results below it come back as
exactly 0.

A table with a composition axis (metallicity, [alpha/Fe], helium mass fraction Y or one
element's abundance) is interpolated in it as well, as given (dex quantities are already
logarithms, so ln q is interpolated linearly in dex): Lagrange through 4 composition points
where the axis has 4 or more (and the method is not ``linear``), else linearly; where the 4
values of a logged quantity span more than ``e^50`` it is linear there.

A table whose first axis replaces the temperature (specific internal energy with a mass-density
axis, specific entropy with gas pressure; root attribute ``temperature_quantity``) is
interpolated along it in ln of the value or in the value itself, as its coordinate's
``interpolation`` attribute says (values of any sign need the latter); its temperature is a
stored field like the others.

Points outside the grid raise :class:`~sahaboltz.errors.InputError` by default; ``outside="clip"``
clamps them onto the grid edge and ``outside="nan"`` returns NaN there (asked-for, documented NaN).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Sequence

import numpy as np

from sahaboltz.errors import InputError, TableError
from sahaboltz.tables.hdf5 import (FORMAT_VERSION, _decode, _decode_str, _open, check_table,
                                   format_error, temperature_quantity)
from sahaboltz.tables.layout import STACKED, row_names
from sahaboltz.tables.spec import PRESSURE_QUANTITIES

_LOG_FLOOR = float(np.log(np.finfo(float).tiny))
_SPAN_LIMIT = 50.0  # ln units; a wider stencil means an underflow edge -> bilinear there
_BATCH = 16384  # points per vectorized pass; bounds temporary memory
#: method -> stencil width (points) along (ln T, ln P)
METHODS = {"quintic": (6, 4), "cubic": (4, 4), "linear": (2, 2)}
OUTSIDE = ("raise", "clip", "nan")


def optional(module: str, what: str):
    """Import an optional package, or say how to get it."""
    import importlib
    try:
        return importlib.import_module(module)
    except ImportError:
        raise InputError(f"{what} needs the {module} package: pip install {module}") from None


class PopulationTable:
    """A population table opened for reading and interpolation (a context manager).

    Parameters
    ----------
    path : str or Path
        A table written by :func:`~sahaboltz.tables.build.build_table` (format 2; a format-1
        file raises :class:`~sahaboltz.errors.TableError` saying it must be rebuilt).
    check : bool
        Run the quick integrity check on open (default True).

    Attributes
    ----------
    temperature : ndarray
        The first axis: temperatures [K], or the values of :attr:`temperature_quantity` when
        a quantity replaces the temperature (the temperature is then the stored field
        ``"temperature"``, ``table["temperature"]``).
    temperature_quantity : str
        ``temperature``, or ``internal_energy`` (with a ``mass_density`` axis) or ``entropy``
        (with ``gas_pressure``).
    temperature_unit : str
        Its unit (``K``, ``erg g-1``, ``erg g-1 K-1``).
    temperature_interpolation : {"log", "linear"}
        The variable along the first axis: ln of the value (temperature always), or the value.
    pressure : ndarray
        Pressure-like axis in the cgs unit of :attr:`pressure_quantity`.
    pressure_quantity : str
        ``gas_pressure``, ``electron_pressure``, ``mass_density`` or ``hydrogen_density``.
    composition_axis : str or None
        Name of the composition axis (``metallicity``, ``alpha_enhancement``,
        ``helium_mass_fraction``, ``abundance_C`` ...), None for a 2-D table.
    composition : ndarray or None
        Its values (unit :attr:`composition_unit`).
    variables : dict
        Stored variable -> its row labels (None for a scalar field), e.g.
        ``{"electron_density": None, "fraction": ["H-", "H I", ...]}``.
    quantities : list of str
        Names of the single quantities: scalar fields and one name per row of a stacked
        variable (``fraction_Fe_II``, ``number_density_H-``, ``number_density_CO``,
        ``population_Fe_II_L3``, ``partition_Fe_I``, ``molecular_fraction_C``).
    attrs : dict
        Root attributes (provenance), JSON ones decoded.
    """

    def __init__(self, path: str | Path, *, check: bool = True):
        self.path = Path(path)
        self._file = None
        if check:
            check_table(self.path)
        f = self._h5()
        self.attrs = {k: _decode(v) for k, v in f.attrs.items()}
        if self.attrs.get("format_version") != FORMAT_VERSION:
            self.close()
            raise format_error(self.path, self.attrs.get("format_version"))
        self.pressure_quantity = str(self.attrs["pressure_quantity"])
        self.temperature_quantity = temperature_quantity(f)
        tq = f[self.temperature_quantity]
        self.temperature = tq[()]
        self.temperature_unit = _decode_str(tq.attrs.get("units", b"K"))
        self.temperature_interpolation = _decode_str(tq.attrs.get("interpolation", b"log"))
        self.pressure = f[self.pressure_quantity][()]
        self.variables: dict[str, list | None] = {}
        for var in self.attrs["variables"]:
            st = STACKED.get(var)
            self.variables[var] = (None if st is None else
                                   [_decode_str(x) for x in f[st.dim][()]])
        self._index = row_names(self.variables)
        self.quantities = list(self._index)
        self._qattrs: dict[str, dict] = {}
        self.pressure_unit = PRESSURE_QUANTITIES[self.pressure_quantity]
        self._data: dict[str, np.ndarray] = {}
        self._prepared: dict[str, tuple[np.ndarray, bool, np.ndarray | None]] = {}
        self._lt = self._first_variable(self.temperature)
        self._lp = np.log(self.pressure)
        self._axes = (_Axis(self._lt), _Axis(self._lp))
        ax = self.attrs.get("composition_axis")
        self.composition_axis = None if ax is None else str(ax)
        self.composition = None if ax is None else f[self.composition_axis][()]
        self.composition_unit = (None if ax is None else
                                 _decode_str(f[self.composition_axis].attrs.get("units", b"")))
        self._caxis = None if ax is None else _Axis(np.asarray(self.composition, float))

    # -- file handle and context manager ------------------------------------------------------
    def _h5(self):
        if self._file is None:
            self._file = _open(self.path)
        return self._file

    def close(self) -> None:
        """Close the file (the arrays already read stay usable)."""
        if self._file is not None:
            self._file.close()
            self._file = None

    def __enter__(self) -> "PopulationTable":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def __del__(self):
        try:
            self.close()
        except Exception:  # noqa: BLE001 - interpreter shutdown
            pass

    def _repr_html_(self) -> str:
        from sahaboltz._html import html_table

        t, p = self.temperature, self.pressure
        rows = [("file", str(self.path)),
                ("title", str(self.attrs.get("title", ""))),
                ("grid", f"{t.size} x {p.size}"),
                (self.temperature_quantity, f"{t[0]:.4g} .. {t[-1]:.4g} {self.temperature_unit}"),
                (self.pressure_quantity, f"{p[0]:.4g} .. {p[-1]:.4g} {self.pressure_unit}"),
                ("composition", str(self.attrs.get("composition", ""))),
                ("physics", str(self.attrs.get("physics", ""))),
                ("variables", ", ".join(self.variables)),
                ("quantities", f"{len(self.quantities)} (e.g. "
                               f"{', '.join(self.quantities[:4])})")]
        return html_table("PopulationTable", rows,
                          "table.interpolate(name, T, P); table.to_xarray()")

    def __repr__(self) -> str:
        lead = "" if self.composition is None else f"{len(self.composition)} x "
        return (f"PopulationTable({str(self.path)!r}: {lead}{len(self.temperature)} x "
                f"{len(self.pressure)}, {len(self.variables)} variables, "
                f"{len(self.quantities)} quantities)")

    def __contains__(self, name: str) -> bool:
        return name in self._index or name in self.variables

    def units(self, name: str) -> str:
        """The ``units`` attribute of a quantity."""
        return str(self.quantity_attrs(name).get("units", ""))

    def quantity_attrs(self, name: str) -> dict[str, Any]:
        """Attributes of a quantity: its variable's (units, long_name) and, for a row, its
        label and the coordinates of that row (charge, element, level energy, g ...)."""
        if name in self.variables:
            var, row = name, None
        else:
            self._known(name)
            var, row = self._index[name]
        if name not in self._qattrs:
            f = self._h5()
            d = f[var]
            a = {k: _decode(v) for k, v in d.attrs.items()
                 if k not in ("DIMENSION_LIST", "REFERENCE_LIST")}
            if row is not None:
                st = STACKED[var]
                a["variable"], a[st.dim] = var, self.variables[var][row]
                for c in str(a.get("coordinates", "")).split():
                    a[c] = _decode(f[c][row]) if not isinstance(f[c][row], bytes) \
                        else _decode_str(f[c][row])
                a.pop("coordinates", None)
            self._qattrs[name] = a
        return dict(self._qattrs[name])

    def _known(self, name: str) -> None:
        if name not in self._index:
            close = [q for q in self.quantities if name.lower() in q.lower()][:8]
            hint = f" (did you mean {', '.join(close)}?)" if close else ""
            raise InputError(f"table has no quantity {name!r}{hint}; it holds "
                             f"{len(self.quantities)}: {', '.join(self.quantities[:12])}"
                             f"{' ...' if len(self.quantities) > 12 else ''}")

    def __getitem__(self, name: str) -> np.ndarray:
        """The stored grid of a quantity, shape (nT, nP); of a whole stacked variable
        (``"fraction"``), shape (rows, nT, nP); with a composition axis (nC, nT, nP) and
        (rows, nC, nT, nP)."""
        if name in self.variables and self.variables[name] is not None:
            return self._read(name, slice(None))
        self._known(name)
        if name not in self._data:
            var, row = self._index[name]
            self._data[name] = self._read(var, () if row is None else row)
        return self._data[name]

    def _read(self, var: str, sel) -> np.ndarray:
        try:
            return self._h5()[var][sel]
        except OSError as exc:
            raise TableError(f"{self.path}: variable {var} is damaged ({exc}); delete "
                             f"the file and build the table again") from None

    # -- other views ---------------------------------------------------------------------------
    def to_xarray(self):
        """The table as an :class:`xarray.Dataset` (read lazily by xarray's ``h5netcdf``
        engine; every coordinate, unit and long name comes from the file itself)."""
        xr = optional("xarray", "to_xarray()")
        optional("h5netcdf", "to_xarray()")
        return xr.open_dataset(self.path, engine="h5netcdf")

    def to_dataframe(self, names: str | Sequence[str] | None = None):
        """Quantities as a :class:`pandas.DataFrame`, one row per grid state (index:
        [the composition quantity,] temperature and the pressure-like quantity); default: the
        scalar fields."""
        pd = optional("pandas", "to_dataframe()")
        if names is None:
            names = [v for v, labs in self.variables.items() if labs is None]
        elif isinstance(names, str):
            names = [names]
        axes = [self.temperature, self.pressure]
        names_ = [self.temperature_quantity, self.pressure_quantity]
        if self.composition is not None:
            axes.insert(0, self.composition)
            names_.insert(0, self.composition_axis)
        grids = np.meshgrid(*axes, indexing="ij")
        index = pd.MultiIndex.from_arrays([g.ravel() for g in grids], names=names_)
        return pd.DataFrame({n: self[n].ravel() for n in names}, index=index)

    def _prepare(self, name: str, widths: tuple[int, int]
                 ) -> tuple[np.ndarray, bool, np.ndarray | None]:
        if name not in self._prepared:
            v = self[name]
            logged = bool(np.all((v >= 0) | np.isnan(v)))  # NaN: a state not solved
            g = np.log(np.maximum(v, np.finfo(float).tiny)) if logged else v.astype(float)
            self._prepared[name] = (g, logged, {})
        g, logged, wide = self._prepared[name]
        if logged and widths not in wide:
            if g.ndim == 2:
                wide[widths] = _wide_windows(g, *widths)
            else:  # one map per composition slice
                maps = [_wide_windows(plane, *widths) for plane in g]
                wide[widths] = None if all(m is None for m in maps) else np.stack(
                    [m if m is not None else np.zeros(
                        (g.shape[1] - widths[0] + 1, g.shape[2] - widths[1] + 1), bool)
                     for m in maps])
        return np.ascontiguousarray(g).ravel(), logged, wide.get(widths)

    def quantity(self, name: str, temperature, pressure, composition=None, **options):
        """:meth:`interpolate` one quantity and return it as an astropy Quantity in the unit
        the table stores it in (``units`` attribute; "1" is dimensionless), e.g.
        ``table.quantity("electron_pressure", 5800 * u.K, 1e4 * u.Pa).to(u.Pa)``."""
        import astropy.units as u

        if not isinstance(name, str):
            raise InputError(f"quantity: give one name, got {name!r}")
        value = self.interpolate(name, temperature, pressure, composition, **options)
        unit = self.units(name)
        return np.asarray(value) * (u.dimensionless_unscaled if unit in ("", "1")
                                    else u.Unit(unit))

    def interpolate(self, names: str | Sequence[str], temperature, pressure, composition=None,
                    *, method: str = "quintic", outside: str = "raise"):
        """Interpolate stored quantities at the points ``(temperature, pressure[, composition])``.

        Parameters
        ----------
        names : str or sequence of str
            Quantity name(s), e.g. ``"electron_density"``, ``"fraction_Fe_II"``.
        temperature : float, array_like or Quantity
            Temperatures [K]; for a table whose first axis replaces the temperature, values
            of that quantity (:attr:`temperature_quantity`, in :attr:`temperature_unit`).
        pressure : float, array_like or Quantity
            Values of the table's pressure-like quantity, in its cgs unit (:attr:`pressure_unit`).
        composition : float or array_like, optional
            Values of the composition axis (:attr:`composition_axis`, e.g. [M/H] in dex);
            needed for, and only for, a table with one.
        method : {"quintic", "cubic", "linear"}
            Lagrange stencils of 6 points in ln T and 4 in ln P (default), 4 x 4, or bilinear;
            along a composition axis 4 points (linear for "linear" or fewer than 4 values).
        outside : {"raise", "clip", "nan"}
            What to do with points outside the grid.

        Returns
        -------
        ndarray or dict of ndarray
            Broadcast shape of the inputs; a dict when ``names`` is a sequence.
        """
        from sahaboltz.quantities import as_array, as_positive_array  # astropy: when used

        if method not in METHODS:
            raise InputError(f"method must be one of {METHODS}, got {method!r}")
        if outside not in OUTSIDE:
            raise InputError(f"outside must be one of {OUTSIDE}, got {outside!r}")
        single = isinstance(names, str)
        names = [names] if single else list(names)
        for n in names:
            self._known(n)
        if self.temperature_quantity == "temperature":
            t = as_positive_array(temperature, "K", "temperature")
        else:  # a value the log axis cannot reach (<= 0) is outside the grid
            t = as_array(temperature, self.temperature_unit, self.temperature_quantity)
        p = as_positive_array(pressure, self.pressure_unit, self.pressure_quantity)
        c = self._composition_values(composition)
        t, p, c = np.broadcast_arrays(t, p, 0.0 if c is None else c)
        shape = t.shape
        lt, lp, lc = self._first_variable(t).ravel(), np.log(p).ravel(), c.ravel()
        bad = self._outside(lt, lp, lc, outside)
        lt = np.clip(lt, self._lt[0], self._lt[-1])
        lp = np.clip(lp, self._lp[0], self._lp[-1])
        out = {n: np.empty(lt.size) for n in names}
        wt = min(METHODS[method][0], self.temperature.size)
        wp = min(METHODS[method][1], self.pressure.size)
        wc = 0
        if self._caxis is not None:
            lc = np.clip(lc, self._caxis.x[0], self._caxis.x[-1])
            wc = 4 if (self.composition.size >= 4 and method != "linear") else 2
        prepared = [self._prepare(n, (wt, wp)) for n in names]
        for s in range(0, lt.size, _BATCH):
            sl = slice(s, s + _BATCH)
            st = _Stencil(self._axes[0], lt[sl], wt)
            sp = _Stencil(self._axes[1], lp[sl], wp)
            sc = _Stencil(self._caxis, lc[sl], wc) if wc else None
            for n, (g, logged, wide) in zip(names, prepared):
                out[n][sl] = _evaluate(g, len(self._lt), len(self._lp), st, sp, logged, wide,
                                       sc)
        for n in names:
            if bad is not None:
                out[n][bad] = np.nan
            out[n] = out[n].reshape(shape)
        return out[names[0]] if single else out

    def _first_variable(self, values) -> np.ndarray:
        """The interpolation variable of first-axis values: ln (values <= 0 become -inf,
        outside any log axis) or the values themselves."""
        v = np.asarray(values, dtype=float)
        if self.temperature_interpolation == "linear":
            return v
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(v > 0, np.log(np.where(v > 0, v, 1.0)), -np.inf)

    def _first_value(self, x: float) -> float:
        """A first-axis value from its interpolation variable."""
        return float(x) if self.temperature_interpolation == "linear" else float(np.exp(x))

    def _composition_values(self, composition):
        if self.composition is None:
            if composition is not None:
                raise InputError("this table has no composition axis; give temperature and "
                                 f"{self.pressure_quantity} only")
            return None
        if composition is None:
            raise InputError(f"this table has a composition axis, {self.composition_axis} "
                             f"{self.composition[0]:g}..{self.composition[-1]:g} "
                             f"{self.composition_unit}: give composition= values too")
        try:
            c = np.asarray(composition, dtype=float)
        except (TypeError, ValueError):
            raise InputError(f"composition ({self.composition_axis}) must be numbers, got "
                             f"{composition!r}") from None
        if not np.all(np.isfinite(c)):
            raise InputError(f"composition ({self.composition_axis}) values must be finite")
        return c

    def _outside(self, lt, lp, lc, outside):
        tol = 1e-12
        # in ln q an absolute 1e-12 is relative; a linear first axis needs its own scale
        tt = tol if self.temperature_interpolation == "log" else \
            tol * float(np.abs(self._lt[[0, -1]]).max())
        bad = ((lt < self._lt[0] - tt) | (lt > self._lt[-1] + tt) |
               (lp < self._lp[0] - tol) | (lp > self._lp[-1] + tol))
        cx = self._caxis
        if cx is not None:
            bad |= (lc < cx.x[0] - tol) | (lc > cx.x[-1] + tol)
        if not bad.any():
            return None
        if outside == "raise":
            i = int(np.argmax(bad))
            at_c = covers_c = ""
            if cx is not None:
                at_c = f", {self.composition_axis} = {lc[i]:.6g}"
                covers_c = (f", {self.composition_axis} {cx.x[0]:g}..{cx.x[-1]:g} "
                            f"{self.composition_unit}")
            first = ("T" if self.temperature_quantity == "temperature"
                     else self.temperature_quantity)
            tu = self.temperature_unit
            raise InputError(
                f"{int(bad.sum())} point(s) outside the table, e.g. {first} = "
                f"{self._first_value(lt[i]):.6g} {tu}, "
                f"{self.pressure_quantity} = {np.exp(lp[i]):.6g} {self.pressure_unit}{at_c}; "
                f"the grid covers {first} {self.temperature[0]:g}..{self.temperature[-1]:g} "
                f"{tu} and "
                f"{self.pressure[0]:g}..{self.pressure[-1]:g} {self.pressure_unit}{covers_c}. "
                f"Pass outside='clip' to clamp onto the edge or outside='nan' for NaN there.")
        return bad if outside == "nan" else None


class _Axis:
    """One axis in log variables, with what every batch of points reuses."""

    def __init__(self, x: np.ndarray):
        self.x = x
        step = np.diff(x)
        # uniform (log-spaced) axes find cells by arithmetic instead of a binary search
        self.uniform = bool(np.all(np.abs(step - step.mean()) <= 1e-9 * np.abs(step.mean())))
        self.step = float(step.mean())
        self._inv: dict[int, np.ndarray] = {}

    def inv_denominator(self, w: int) -> np.ndarray:
        """Per stencil start, 1 / prod_{m != k} (x_k - x_m) of the ``w`` nodes."""
        if w not in self._inv:
            win = np.lib.stride_tricks.sliding_window_view(self.x, w)
            inv = np.ones_like(win)
            for k in range(w):
                for m in range(w):
                    if m != k:
                        inv[:, k] /= win[:, k] - win[:, m]
            self._inv[w] = inv
        return self._inv[w]

    def cells(self, q: np.ndarray) -> np.ndarray:
        n = self.x.size
        if self.uniform:
            c = np.floor((q - self.x[0]) / self.step).astype(np.intp)
            np.clip(c, 0, n - 2, out=c)
            # rounding near a node: step one cell back or forward where needed
            c -= (q < self.x[c]) & (c > 0)
            c += (q >= self.x[np.minimum(c + 1, n - 1)]) & (c < n - 2)
            return c
        return np.clip(np.searchsorted(self.x, q, side="right") - 1, 0, n - 2)


class _Stencil:
    """Interpolation nodes and Lagrange weights (``width`` points) along one axis for a batch
    of points; the cell of each point is central in its stencil except at the axis ends."""

    def __init__(self, axis: _Axis, q: np.ndarray, width: int):
        x = axis.x
        n = x.size
        cell = axis.cells(q)
        self.cell = cell
        self.frac = (q - x[cell]) / (x[cell + 1] - x[cell])
        if width > 2:
            start = np.clip(cell - (width // 2 - 1), 0, n - width)
            d = q[:, None] - x[start[:, None] + np.arange(width)]  # (N, w)
            # prod_{m != k} d_m without dividing: products before and after k
            before = np.ones_like(d)
            after = np.ones_like(d)
            for k in range(1, width):
                before[:, k] = before[:, k - 1] * d[:, k - 1]
                after[:, width - 1 - k] = after[:, width - k] * d[:, width - k]
            self.start, self.weights = start, before * after * axis.inv_denominator(width)[start]
        else:
            self.start = cell
            self.weights = np.stack([1 - self.frac, self.frac], axis=1)
        self.width = self.weights.shape[1]
        self.offset = cell - self.start  # position of the cell inside the stencil


def _wide_windows(g2d: np.ndarray, wt: int, wp: int) -> np.ndarray | None:
    """Per wt x wp stencil start: does the logged quantity span more than the limit there?"""
    if wt * wp <= 4 or g2d.shape[0] < wt or g2d.shape[1] < wp or np.ptp(g2d) <= _SPAN_LIMIT:
        return None
    # separable sliding max/min: along P, then along T
    win = np.lib.stride_tricks.sliding_window_view(g2d, wp, axis=1)
    hi, lo = win.max(axis=-1), win.min(axis=-1)
    hi = np.lib.stride_tricks.sliding_window_view(hi, wt, axis=0).max(axis=-1)
    lo = np.lib.stride_tricks.sliding_window_view(lo, wt, axis=0).min(axis=-1)
    wide = (hi - lo) > _SPAN_LIMIT
    return wide if wide.any() else None


def _evaluate(g: np.ndarray, nrow: int, ncol: int, st: _Stencil, sp: _Stencil, logged: bool,
              wide_map: np.ndarray | None, sc: _Stencil | None = None) -> np.ndarray:
    """Interpolated values at a batch of points: in (ln T, ln P) on each composition slice of
    the stencil ``sc`` (the one plane of a 2-D table), then along the composition axis."""
    if sc is None:
        res = _plane(g, 0, ncol, st, sp, logged, wide_map, None)
    else:
        planes = np.stack([_plane(g, (sc.start + k) * (nrow * ncol), ncol, st, sp, logged,
                                  wide_map, sc.start + k) for k in range(sc.width)], axis=1)
        res = np.einsum("nk,nk->n", sc.weights, planes)
        if logged and sc.width > 2:  # an underflow edge across the compositions: linear
            wide = np.ptp(planes, axis=1) > _SPAN_LIMIT
            if wide.any():
                n = np.nonzero(wide)[0]
                i, u = sc.offset[wide], sc.frac[wide]
                res[wide] = (1 - u) * planes[n, i] + u * planes[n, i + 1]
    if logged:
        out = np.exp(res)
        out[res <= _LOG_FLOOR * (1 - 1e-12)] = 0.0
        return out
    return res


def _plane(g: np.ndarray, base0, ncol: int, st: _Stencil, sp: _Stencil, logged: bool,
           wide_map: np.ndarray | None, cidx) -> np.ndarray:
    """Tensor-product Lagrange values in (ln T, ln P) on the plane starting at ``base0``."""
    offsets = (np.arange(st.width)[:, None] * ncol + np.arange(sp.width)[None, :]).ravel()
    base = base0 + st.start * ncol + sp.start
    vals = g.take(base[:, None] + offsets).reshape(-1, st.width, sp.width)  # (N, wt, wp)
    res = np.einsum("na,nab,nb->n", st.weights, vals, sp.weights)
    if logged and wide_map is not None and st.width * sp.width > 4:
        wide = (wide_map[st.start, sp.start] if cidx is None else
                wide_map[cidx, st.start, sp.start])
        if wide.any():
            res[wide] = _bilinear(vals[wide], st, sp, wide)
    return res


def _bilinear(vals, st: _Stencil, sp: _Stencil, mask) -> np.ndarray:
    n = np.arange(vals.shape[0])
    i, j = st.offset[mask], sp.offset[mask]
    u, v = st.frac[mask], sp.frac[mask]
    return ((1 - u) * (1 - v) * vals[n, i, j] + u * (1 - v) * vals[n, i + 1, j] +
            (1 - u) * v * vals[n, i, j + 1] + u * v * vals[n, i + 1, j + 1])


def open_table(path: str | Path, *, check: bool = True) -> PopulationTable:
    """Open a population table for reading and interpolation (see :class:`PopulationTable`)."""
    return PopulationTable(path, check=check)
