"""Chemical compositions: which elements a gas contains, and how much of each.

A :class:`Composition` holds the number fraction of every element (nuclei of element k over all
nuclei; they sum to 1).  Build one from

* the built-in solar mixture, :func:`solar` (Asplund et al. 2009, read from the project's own
  ``level_data/abundances/asplund2009.txt``), optionally scaled by [M/H] and [alpha/Fe];
* amounts by number, :meth:`Composition.from_number` (any scale: ratios matter);
* mass fractions, :meth:`Composition.from_mass_fraction` (e.g. air as N, O, Ar);
* A(X) = log10(N_X/N_H) + 12 values, :meth:`Composition.from_log_eps`.

>>> air = Composition.from_mass_fraction({"N": 0.7552, "O": 0.2314, "Ar": 0.0129})
>>> round(air.number_fraction_of("N"), 3)   # doctest: +SKIP
0.781
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Mapping

import numpy as np

from sahaboltz.data.elements import SYMBOLS, atomic_number
from sahaboltz.errors import DataFormatError, InputError, NoDataError, UnknownSpeciesError

#: alpha elements scaled by [alpha/Fe] (common practice: O, Ne, Mg, Si, S, Ar, Ca, Ti)
ALPHA_ELEMENTS = (8, 10, 12, 14, 16, 18, 20, 22)

#: abundance sets shipped in level_data/abundances
SOLAR_SETS = {"asplund2009": "abundances/asplund2009.txt"}


@dataclass(frozen=True)
class Composition:
    """Element make-up of a gas, as number fractions of nuclei.

    Attributes
    ----------
    Z : ndarray of int
        Atomic numbers, ascending, each once.
    number_fraction : ndarray
        N_k / sum N, same order; positive, sums to 1.
    name : str
        A label for output and provenance.
    origin : tuple of str
        Per element, where its amount comes from (e.g. ``"p"`` photospheric, ``"m"``
        meteoritic for the solar set; ``"given"`` for custom mixtures).
    provenance : dict
        Source and processing notes (reference, scaling applied).
    """

    Z: np.ndarray
    number_fraction: np.ndarray
    name: str = "custom"
    origin: tuple = ()
    provenance: dict = field(default_factory=dict, compare=False)

    def __post_init__(self):
        z = np.asarray(self.Z, dtype=int)
        x = np.asarray(self.number_fraction, dtype=float)
        if z.ndim != 1 or z.shape != x.shape or z.size == 0:
            raise InputError("a composition needs one amount per element and at least one element")
        if len(set(z.tolist())) != z.size:
            raise InputError(f"a composition lists an element twice: {z.tolist()}")
        if not np.all(np.isfinite(x)) or np.any(x <= 0):
            raise InputError("composition amounts must be finite and positive after dropping zeros")
        order = np.argsort(z)
        origin = tuple(self.origin) if self.origin else ("given",) * z.size
        object.__setattr__(self, "Z", z[order])
        object.__setattr__(self, "number_fraction", x[order] / x.sum())
        object.__setattr__(self, "origin", tuple(origin[i] for i in order))
        self.Z.setflags(write=False)
        self.number_fraction.setflags(write=False)

    # -- constructors --------------------------------------------------------------------
    @classmethod
    def from_number(cls, amounts: Mapping, name: str = "custom", **kw) -> "Composition":
        """Mixture from amounts by number (atoms, moles, or ratios: only ratios matter).

        Parameters
        ----------
        amounts : mapping
            Element symbol or atomic number -> amount (>= 0; zeros are dropped).

        Raises
        ------
        UnknownSpeciesError
            An unknown element.
        InputError
            A negative or non-finite amount, or nothing left after dropping zeros.
        """
        z, x = _checked(amounts, "amount by number")
        return cls(z, x, name=name, **kw)

    @classmethod
    def from_mass_fraction(cls, fractions: Mapping, name: str = "custom",
                           atomic_weights: Mapping | None = None) -> "Composition":
        """Mixture from mass fractions (normalized to sum 1 if they do not already).

        Parameters
        ----------
        fractions : mapping
            Element -> mass fraction (>= 0).
        atomic_weights : mapping, optional
            Element -> atomic weight [u]; default: the NIST standard atomic weights of the
            species database.
        """
        z, w = _checked(fractions, "mass fraction")
        a = _weights(z, atomic_weights)
        return cls(z, w / a, name=name,
                   provenance={"given_as": "mass fractions", "mass_fractions": dict(
                       zip((SYMBOLS[k] for k in z), (w / w.sum()).tolist()))})

    @classmethod
    def from_log_eps(cls, log_eps: Mapping, name: str = "custom", **kw) -> "Composition":
        """Mixture from A(X) = log10(N_X / N_H) + 12 values."""
        items = {}
        for key, val in log_eps.items():
            v = _finite(val, f"A({key})")
            items[key] = 10.0 ** (v - 12.0)
        z, x = _checked(items, "amount")
        return cls(z, x, name=name, **kw)

    # -- views ---------------------------------------------------------------------------
    @property
    def symbols(self) -> list[str]:
        """Element symbols in order of Z."""
        return [SYMBOLS[z] for z in self.Z]

    def __len__(self) -> int:
        return int(self.Z.size)

    def __contains__(self, element) -> bool:
        try:
            return atomic_number(element) in set(self.Z.tolist())
        except UnknownSpeciesError:
            return False

    def _index(self, element) -> int:
        z = atomic_number(element)
        hit = np.nonzero(self.Z == z)[0]
        if hit.size == 0:
            raise UnknownSpeciesError(f"{SYMBOLS[z]} is not in the composition {self.name!r}")
        return int(hit[0])

    def number_fraction_of(self, element) -> float:
        """N_k / sum of all nuclei for one element."""
        return float(self.number_fraction[self._index(element)])

    @property
    def relative_to_hydrogen(self) -> np.ndarray:
        """N_k / N_H (requires hydrogen)."""
        return self.number_fraction / self.number_fraction_of("H")

    @property
    def log_eps(self) -> np.ndarray:
        """A(X) = log10(N_X / N_H) + 12 (requires hydrogen)."""
        return np.log10(self.relative_to_hydrogen) + 12.0

    def atomic_weights(self) -> np.ndarray:
        """Standard atomic weights [u] of the elements, in order (from the species database)."""
        return _weights(self.Z, None)

    @property
    def mean_mass_amu(self) -> float:
        """Mean mass per nucleus [u] (neutral-atom masses: free electrons keep the balance)."""
        return float(np.dot(self.number_fraction, self.atomic_weights()))

    @property
    def mass_fractions(self) -> np.ndarray:
        """Mass fraction of every element, in order."""
        m = self.number_fraction * self.atomic_weights()
        return m / m.sum()

    def mass_fraction_of(self, element) -> float:
        return float(self.mass_fractions[self._index(element)])

    def xyz(self) -> tuple[float, float, float]:
        """Hydrogen, helium and metal mass fractions (X, Y, Z)."""
        m = self.mass_fractions
        x = float(m[self.Z == 1].sum())
        y = float(m[self.Z == 2].sum())
        return x, y, float(m[self.Z > 2].sum())

    # -- derived mixtures ----------------------------------------------------------------
    def scaled(self, metallicity: float = 0.0, alpha_enhancement: float = 0.0) -> "Composition":
        """Scale the metals relative to hydrogen.

        Every element heavier than He is multiplied (by number, relative to H) by
        ``10**metallicity``; the alpha elements (:data:`ALPHA_ELEMENTS`) additionally by
        ``10**alpha_enhancement``.  H and He are unchanged.

        Parameters
        ----------
        metallicity : float
            [M/H] [dex].
        alpha_enhancement : float
            [alpha/Fe] [dex].
        """
        m = _finite(metallicity, "metallicity [M/H]")
        a = _finite(alpha_enhancement, "alpha_enhancement [alpha/Fe]")
        dex = np.where(self.Z > 2, m, 0.0) + np.where(np.isin(self.Z, ALPHA_ELEMENTS), a, 0.0)
        prov = dict(self.provenance)
        prov["scaling"] = f"[M/H] = {m:+g}, [alpha/Fe] = {a:+g} (alpha: O Ne Mg Si S Ar Ca Ti)"
        label = self.name if (m == 0 and a == 0) else f"{self.name} [M/H]={m:+g} [a/Fe]={a:+g}"
        return Composition(self.Z, self.number_fraction * 10.0 ** dex, name=label,
                           origin=self.origin, provenance=prov)

    def with_offsets(self, offsets: Mapping) -> "Composition":
        """Scale single elements: ``{"C": 0.3}`` multiplies N_C/N_H by 10**0.3 (dex).

        Raises
        ------
        InputError
            An offset of an element the mixture lacks (it has nothing to scale), or of H.
        """
        x = self.number_fraction.copy()
        notes = []
        for key, val in offsets.items():
            z = atomic_number(key)
            if z == 1:
                raise InputError("abundance offsets are relative to hydrogen; H cannot have one")
            if z not in self:
                raise InputError(f"abundance offset of {SYMBOLS[z]}: the mixture {self.name!r} "
                                 f"has no {SYMBOLS[z]} to scale")
            d = _finite(val, f"abundance offset of {SYMBOLS[z]}")
            x[self._index(z)] *= 10.0 ** d
            notes.append(f"[{SYMBOLS[z]}/H] {d:+g}")
        prov = dict(self.provenance)
        prov["offsets"] = ", ".join(notes)
        label = f"{self.name} {' '.join(notes)}" if notes else self.name
        return Composition(self.Z, x, name=label, origin=self.origin, provenance=prov)

    def with_helium_mass_fraction(self, y: float) -> "Composition":
        """The mixture with helium mass fraction ``y``: every metal keeps its mass fraction
        (Z fixed), hydrogen takes the rest, X = 1 - Y - Z (He is added if absent).

        Raises
        ------
        InputError
            ``y`` outside (0, 1), no hydrogen, or X = 1 - Y - Z not positive.
        """
        y = _finite(y, "helium mass fraction Y")
        if not 0 < y < 1:
            raise InputError(f"helium mass fraction Y must lie in (0, 1), got {y:g}")
        if 1 not in self:
            raise InputError(f"helium mass fraction: the mixture {self.name!r} has no hydrogen "
                             f"to take up X = 1 - Y - Z")
        z_all = np.union1d(self.Z, [2])
        m = np.zeros(z_all.size)
        m[np.searchsorted(z_all, self.Z)] = self.mass_fractions
        metals = z_all > 2
        zmet = float(m[metals].sum())
        x = 1.0 - y - zmet
        if x <= 0:
            raise InputError(f"helium mass fraction Y = {y:g} with the metal mass fraction "
                             f"Z = {zmet:.4g} leaves hydrogen X = 1 - Y - Z = {x:.4g}, not "
                             f"positive")
        m[z_all == 1], m[z_all == 2] = x, y
        prov = dict(self.provenance)
        prov["helium"] = f"Y = {y:g} (X = {x:.6g}, Z = {zmet:.6g} kept)"
        origin = tuple(self.origin[self._index(z)] if z in self else "given" for z in z_all)
        return Composition(z_all, m / _weights(z_all, None), name=f"{self.name} Y={y:g}",
                           origin=origin, provenance=prov)

    def subset(self, elements: Iterable) -> "Composition":
        """Only the listed elements (renormalized)."""
        keep = sorted({atomic_number(e) for e in elements})
        idx = [self._index(z) for z in keep]
        return Composition(self.Z[idx], self.number_fraction[idx], name=self.name,
                           origin=tuple(self.origin[i] for i in idx),
                           provenance=dict(self.provenance))

    def as_dict(self) -> dict[str, float]:
        """Element symbol -> number fraction."""
        return dict(zip(self.symbols, self.number_fraction.tolist()))

    def __repr__(self) -> str:
        head = ", ".join(f"{s}: {x:.3g}" for s, x in list(self.as_dict().items())[:6])
        more = ", ..." if len(self) > 6 else ""
        return f"Composition({self.name!r}, {len(self)} elements: {head}{more})"


# -- helpers ---------------------------------------------------------------------------------
def _finite(value, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(v):
        raise InputError(f"{name} must be finite, got {value!r}")
    return v


def _checked(amounts: Mapping, what: str) -> tuple[np.ndarray, np.ndarray]:
    if not isinstance(amounts, Mapping) or not amounts:
        raise InputError(f"give the composition as a non-empty mapping element -> {what}, "
                         f"e.g. {{'N': 0.78, 'O': 0.21, 'Ar': 0.0093}}")
    z, x = [], []
    for key, val in amounts.items():
        zk = atomic_number(key)  # UnknownSpeciesError names the element
        v = _finite(val, f"{what} of {key}")
        if v < 0:
            raise InputError(f"{what} of {key} must not be negative, got {v}")
        if zk in z:
            raise InputError(f"element {SYMBOLS[zk]} given twice in the composition")
        if v > 0:
            z.append(zk)
            x.append(v)
    if not z:
        raise InputError(f"every {what} in the composition is zero: give at least one element "
                         "a positive amount")
    return np.array(z, dtype=int), np.array(x, dtype=float)


def _weights(z: np.ndarray, given: Mapping | None) -> np.ndarray:
    if given is not None:
        table = {atomic_number(k): _finite(v, f"atomic weight of {k}") for k, v in given.items()}
        missing = [SYMBOLS[k] for k in z if k not in table]
        if missing:
            raise InputError(f"atomic_weights lacks {', '.join(missing)}")
        w = np.array([table[k] for k in z])
        if np.any(w <= 0):
            raise InputError("atomic weights must be positive")
        return w
    from sahaboltz.data.database import default_database

    db = default_database()
    return np.array([db.atomic_weight(int(k)) for k in z])


def read_abundance_file(path: Path) -> Composition:
    """Load an abundance set written by :mod:`sahaboltz.data.composition_import`."""
    from sahaboltz.data.composition_import import COLUMNS, FORMAT_LINE, ORIGINS

    path = Path(path)
    if not path.is_file():
        raise NoDataError(f"{path} not found: run python -m sahaboltz.data.composition_import")
    lines = path.read_text(encoding="utf-8").splitlines()
    if not lines or lines[0] != FORMAT_LINE:
        raise DataFormatError(f"{path}:1: not a sahaboltz abundance file (expected {FORMAT_LINE!r})")
    header, amounts, origin, seen_columns = {}, {}, [], False
    for n, line in enumerate(lines, 1):
        if line.startswith("#"):
            if " = " in line:
                k, v = line[1:].split(" = ", 1)
                header[k.strip()] = v.strip()
            continue
        if not line.strip():
            continue
        f = line.split("\t")
        if not seen_columns:
            if tuple(f) != COLUMNS:
                raise DataFormatError(f"{path}:{n}: expected columns {COLUMNS}, got {f}")
            seen_columns = True
            continue
        if len(f) != len(COLUMNS) or f[4] not in ORIGINS:
            raise DataFormatError(f"{path}:{n}: malformed row {line!r}")
        try:
            z, a = int(f[0]), float(f[2])
        except ValueError:
            raise DataFormatError(f"{path}:{n}: bad number in {line!r}") from None
        if not 1 <= z < len(SYMBOLS) or SYMBOLS[z] != f[1] or not math.isfinite(a):
            raise DataFormatError(f"{path}:{n}: bad element or value in {line!r}")
        amounts[z] = 10.0 ** (a - 12.0)
        origin.append(f[4])
    if not amounts:
        raise DataFormatError(f"{path}: no abundance rows")
    header["file"] = str(path)
    return Composition(np.array(list(amounts)), np.array(list(amounts.values())),
                       name=header.get("name", path.stem), origin=tuple(origin),
                       provenance=header)


@functools.lru_cache(maxsize=None)
def _solar_cached(path: str) -> Composition:
    return read_abundance_file(Path(path))


def solar(source: str = "asplund2009", metallicity: float = 0.0,
          alpha_enhancement: float = 0.0, elements: Iterable | None = None) -> Composition:
    """The solar composition, optionally scaled.

    Parameters
    ----------
    source : str
        Abundance set; ``"asplund2009"``: Asplund, Grevesse, Sauval & Scott (2009), ARA&A 47,
        481, Table 1 -- photospheric values, meteoritic where no photospheric value exists
        (``origin`` flag ``"m"``).
    metallicity, alpha_enhancement : float
        [M/H] and [alpha/Fe] in dex, see :meth:`Composition.scaled`.
    elements : iterable, optional
        Keep only these elements.
    """
    if source not in SOLAR_SETS:
        raise InputError(f"unknown abundance set {source!r}; choose from {sorted(SOLAR_SETS)}")
    from sahaboltz.data.paths import level_data_dir

    comp = _solar_cached(str(level_data_dir() / SOLAR_SETS[source]))
    if elements is not None:
        comp = comp.subset(elements)
    if metallicity or alpha_enhancement:
        comp = comp.scaled(metallicity, alpha_enhancement)
    return comp
