"""The registry of partition-function truncation schemes.

The level sum U = sum_i g_i w_i exp(-E_i / kT) diverges over a complete Rydberg series, so a
scheme says which levels count and with what weight.  Each scheme is one object here; the
partition functions (:mod:`sahaboltz.kernels.partition`), the solver, the table specs, the
command line and the plot labels all read this registry instead of listing the choices.

A scheme declares

- ``inputs``: what it needs of the state beyond T (``"n_e"``, ``"lowering_ev"``,
  ``"n_neutral"``); a scheme without inputs depends on T alone, so the solver treats it as
  ideal (no outer fixed point);
- ``bounded``: whether it keeps the sum finite when hydrogenic completion levels are added;
- ``lowering``: ``"required"``, ``"allowed"`` or ``"refused"`` together with Debye-Hueckel
  lowering of the ionization energies in the solver;
- how it cuts or weights levels: a static level selection made once (:meth:`select`), and for
  density-dependent schemes the per-state hooks :meth:`columns`, :meth:`prepare`,
  :meth:`apply` and :meth:`keep` that :class:`~sahaboltz.kernels.partition.PartitionModel`
  calls.

Schemes with a parameter are written ``"name:key=value"``, e.g. ``"below:n=3"`` (levels up
to principal quantum number 3) or ``"below:e=10.2"`` (levels up to 10.2 eV); :func:`get`
parses such text and :attr:`TruncationScheme.key` gives the canonical text back.

To add a scheme: subclass :class:`TruncationScheme` and register an instance (or, for a
parametrized one, a factory) with :func:`register`.
"""

from __future__ import annotations

import math
from typing import Any, Callable

import numpy as np

from sahaboltz.errors import InputError

# The physics kernels (occupation probabilities, plasma parameters) and the unit checks pull
# in astropy; the hooks import them on first use so that reading the registry (names, labels,
# checks of a spec file) stays cheap for the command line.

__all__ = ["TruncationScheme", "REGISTRY", "register", "get", "names", "choices_help",
           "resolve", "label"]

# completion levels with Stark parameter beta below this have f < 1.4e-16 (w ~ 0): skipped
_BETA_MIN = 1e-5


class TruncationScheme:
    """Base class: every tabulated bound level counts with weight 1 (the plain sum)."""

    name = "plain"
    #: phrase for plot legends and notes
    label = "all tabulated levels"
    #: one line for option help
    summary = "every tabulated bound level (no density dependence)"
    inputs: tuple[str, ...] = ()
    bounded = False
    lowering = "refused"
    #: the state column to sort unique states by first (neighbours then share work)
    sort_first: str | None = None
    #: every selected level has weight 1 in the low-density limit, so that limit is the plain
    #: sum over the same levels (solvers tabulate it with the plain evaluation)
    unweighted_limit = True

    @property
    def key(self) -> str:
        """Canonical text of the scheme (with its parameter), as :func:`get` reads it."""
        return self.name

    @property
    def density_dependent(self) -> bool:
        return bool(self.inputs)

    def __repr__(self) -> str:
        return f"<truncation {self.key}>"

    def __eq__(self, other) -> bool:
        return isinstance(other, TruncationScheme) and other.key == self.key

    def __hash__(self) -> int:
        return hash(self.key)

    # -- static selection (once, when the levels are packed) -------------------------------
    def select(self, energy_ev: np.ndarray, n_eff: np.ndarray, n_completion: np.ndarray
               ) -> np.ndarray:
        """Which of one species' packed levels (sorted by energy, ground first) to keep."""
        return np.ones(energy_ev.shape, dtype=bool)

    # -- per-state hooks (density-dependent schemes only) ---------------------------------
    def columns(self, model, inputs: dict, shape: tuple
                ) -> tuple[list[tuple[str, np.ndarray]], dict]:
        """Extra flat state columns (name, values) that make two states distinct, and values
        shared by all states (put into the state dict as they are)."""
        return [], {}

    def prepare(self, model, st: dict) -> None:
        """Derive per-unique-state values from the columns stored in ``st``."""

    def apply(self, model, lv: np.ndarray, st: dict, sl: slice, counts: np.ndarray,
              arg: np.ndarray, slopes: bool = False):
        """Cut (set to -inf) or weight (add ln w) the ln-terms ``arg`` (states x levels lv).

        With ``slopes``, return (d ln w / d ln T, d ln w / d ln n_e) of those terms at fixed
        n_e and at fixed T (arrays like ``arg``, or None where they vanish): a cut has none
        (U only jumps when a level crosses it)."""
        return None

    def keep(self, model, st: dict, sl: slice) -> np.ndarray | None:
        """Levels that can matter for the states ``sl`` beyond the Boltzmann pruning, or None."""
        return None

    def prepare_pairs(self, model, pst: dict) -> None:
        """For :meth:`PartitionModel.evaluate_pairs`: the scheme's state values into ``pst``
        (arrays, or tuples of arrays, along ``pst["T"]``: per state or per pair)."""

    def bound_state_weight(self, binding_ev: float, temperature: np.ndarray,
                           n_e: np.ndarray):
        """(ln w, d ln w / d ln n_e) of a lone bound state of ``binding_ev`` (a negative ion
        with U = 1), or None when the scheme does not weight levels by density."""
        return None

    def pair_weights(self, model, lv: np.ndarray, counts: np.ndarray, pairs: slice, pst: dict,
                     want_temperature: bool = True):
        """For :meth:`PartitionModel.evaluate_pairs`: (ln w, d ln w / d ln T or None,
        d ln w / d ln n_e) of the flat level terms ``lv``, ``counts[j]`` of them for each pair
        ``pairs.start + j``; None when every w = 1."""
        return None

    # -- second derivatives (thermodynamics) ----------------------------------------------
    def prepare_curvature_pairs(self, model, pst: dict) -> None:
        """For :meth:`PartitionModel.pair_log_derivatives`: per-pair state values into ``pst``."""

    def pair_weight_derivatives(self, model, lv: np.ndarray, counts: np.ndarray, pairs: slice,
                                pst: dict):
        """(ln w, w_T, w_n, w_TT, w_Tn) of the flat level terms ``lv`` (``counts[j]`` for pair
        ``pairs.start + j``): ln w and its first and second derivatives in ln T and ln n_e;
        None when every w is constant."""
        return None

    def bound_state_weight_derivatives(self, binding_ev: float, temperature: np.ndarray,
                                       n_e: np.ndarray):
        """(ln w, w_T, w_n, w_TT, w_Tn) of a lone bound state (a negative ion), or None when
        its weight is 1."""
        return None

    def pair_log_derivative_sums(self, model, rows: np.ndarray, start: np.ndarray,
                                 count: np.ndarray, pst: dict, temps: tuple,
                                 states: np.ndarray | None = None):
        """(ln U, U_T, U_n, U_TT, U_Tn) of every pair by a compiled loop, or None to let the
        numpy path use :meth:`pair_weight_derivatives`; ``temps``: (1/kT of the distinct
        temperatures, each pair's index among them); ``pst`` per pair, or per state with
        ``states`` (each pair's state)."""
        return None

    def pair_sums(self, model, tidx: np.ndarray, beta_u: np.ndarray, rows: np.ndarray,
                  start: np.ndarray, count: np.ndarray, pst: dict,
                  want_temperature: bool = True):
        """For :meth:`PartitionModel.evaluate_pairs`: the sums (U, U1, U2) of every pair at
        once by a compiled loop (:mod:`sahaboltz.kernels.compiled`), or None to let the
        numpy path use :meth:`pair_weights`.  ``tidx`` indexes each pair's temperature in
        the distinct ones, whose 1/kT are ``beta_u``."""
        return None


class GroundLevel(TruncationScheme):
    """Only the lowest level: U = g_0, as in textbook estimates."""

    name = "ground"
    label = "ground level only"
    summary = "the lowest level alone, U = g0 (textbook comparisons)"
    bounded = True
    lowering = "allowed"

    def select(self, energy_ev, n_eff, n_completion):
        keep = np.zeros(energy_ev.shape, dtype=bool)
        keep[0] = True
        return keep


class BelowLimit(TruncationScheme):
    """Levels up to a principal quantum number or an excitation energy (the ground always).

    ``below:n=N`` keeps the levels whose effective principal quantum number
    n* = (z + 1) sqrt(R / (chi - E)) is at most N (within half a unit, so that hydrogen's
    levels n = 1..N are kept exactly); ``below:e=E`` keeps levels with energy E_i <= E [eV].
    """

    name = "below"
    summary = "levels up to a principal quantum number or energy: below:n=3, below:e=10.2"
    bounded = True
    lowering = "allowed"

    def __init__(self, n: float | None = None, e: float | None = None):
        if (n is None) == (e is None):
            raise InputError("truncation 'below' needs one limit: below:n=N (principal quantum "
                             "number) or below:e=E (energy in eV)")
        if n is not None and not (n >= 1 and math.isfinite(n)):
            raise InputError(f"truncation below:n=N needs N >= 1, got {n}")
        if e is not None and not (e >= 0 and math.isfinite(e)):
            raise InputError(f"truncation below:e=E needs a finite E >= 0 eV, got {e}")
        self.n, self.e = n, e

    @property
    def key(self) -> str:
        return f"below:n={self.n:g}" if self.n is not None else f"below:e={self.e:g}"

    @property
    def label(self) -> str:
        return (f"levels with n <= {self.n:g}" if self.n is not None
                else f"levels below {self.e:g} eV")

    def select(self, energy_ev, n_eff, n_completion):
        keep = (n_eff <= self.n + 0.5) if self.n is not None else (energy_ev <= self.e)
        keep = keep.copy()
        keep[0] = True
        return keep


class LoweredLimit(TruncationScheme):
    """Levels below the lowered ionization limit chi - dchi, dchi given or Debye-Hueckel."""

    name = "lowered"
    label = "levels below the lowered limit"
    summary = "levels below the lowered ionization limit (needs lowering)"
    inputs = ("lowering_ev",)
    bounded = True
    lowering = "required"

    def columns(self, model, inputs, shape):
        low, ne = inputs.get("lowering_ev"), inputs.get("n_e")
        ns = model.n_species
        if low is not None:
            from sahaboltz.quantities import as_array
            low = as_array(low, "eV", "lowering_ev", allow_negative=False)
            if low.ndim == 1 and len(low) == ns:
                low = low.reshape((ns,) + (1,) * len(shape))
            try:
                full_shape = np.broadcast_shapes(low.shape, (ns,) + shape)
            except ValueError:
                raise InputError(f"lowering_ev of shape {low.shape} does not broadcast "
                                 f"against (n_species,) + state shape "
                                 f"{(ns,) + shape}") from None
            if full_shape != (ns,) + shape:
                raise InputError(f"lowering_ev of shape {low.shape} would enlarge the "
                                 f"state shape {shape}")
            lw = np.broadcast_to(low, full_shape).reshape(ns, -1)
            if lw.shape[1] == 0 or (lw == lw[:, :1]).all():
                return [], {"low_const": lw[:, 0].copy() if lw.shape[1] else np.zeros(ns)}
            return [("L", row) for row in lw], {}
        if ne is not None:
            return [("ne", np.broadcast_to(ne, shape).ravel())], {}
        raise InputError("lowering_ev / n_e: the 'lowered' truncation needs either "
                         "the lowering itself or the electron density")

    def prepare(self, model, st):
        if "low_const" in st:
            low = np.repeat(st["low_const"][:, None], st["n"], axis=1)
        elif "L" in st:
            low = np.atleast_2d(st["L"])
        else:
            from sahaboltz.kernels.plasma import _debye_length, _lowering_ev
            # Debye-Hueckel with the default screening of singly charged ions (2 n_e)
            low = _lowering_ev(model.charge[:, None], _debye_length(st["T"], 2.0 * st["ne"])[None, :])
        low = np.where(model._bare[:, None], 0.0, low)
        cut = model.ionization_energy_ev[:, None] - low       # (n_species, n_states)
        bad = cut <= model._emin[:, None]
        if bad.any():
            s = int(np.argwhere(bad)[0][0])
            raise InputError(f"lowering_ev: the lowering of {model.names[s]} reaches its "
                             f"ionization energy ({model.ionization_energy_ev[s]:.6g} eV), so "
                             "no bound level is left; the plasma is too dense for this model")
        st["cut"] = cut

    def apply(self, model, lv, st, sl, counts, arg, slopes=False):
        cut = np.repeat(st["cut"][:, sl].T, counts, axis=1)
        np.copyto(arg, -np.inf, where=~(model._e[lv] < cut))
        return None

    def keep(self, model, st, sl):
        return model._e < st["cut"][:, sl].max(axis=1)[model._sp]


class OccupationProbability(TruncationScheme):
    """Every level weighted by its occupation probability (Hummer & Mihalas 1988; charged
    perturbers after Hubeny, Hummer & Lanz 1994), see :mod:`sahaboltz.kernels.occupation`."""

    name = "occupation"
    label = "occupation probabilities"
    summary = "levels weighted by occupation probabilities (Hummer & Mihalas 1988)"
    inputs = ("n_e", "n_neutral")
    bounded = True
    lowering = "allowed"
    sort_first = "ne"

    def columns(self, model, inputs, shape):
        ne, nn = inputs.get("n_e"), inputs.get("n_neutral")
        if ne is None:
            raise InputError("n_e: the 'occupation' truncation needs the electron density")
        cols = [("ne", np.broadcast_to(ne, shape).ravel())]
        if nn is not None:
            cols.append(("nn", np.broadcast_to(nn, shape).ravel()))
        return cols, {}

    def prepare(self, model, st):
        from sahaboltz.kernels.occupation import stark_state_factors
        st["stark_p"], st["stark_a"], st["stark_b"] = stark_state_factors(st["T"], st["ne"])

    def apply(self, model, lv, st, sl, counts, arg, slopes=False):
        wap = model._wapply[lv]
        if not wap.any():
            return None
        q = model._q_stark[lv][wap]
        sv = np.multiply.outer(st["stark_p"][sl], q)          # s = beta^(-3/2)
        a_, b_ = st["stark_a"][sl][:, None], st["stark_b"][sl][:, None]
        f = sv * a_
        f += b_
        f *= sv                                               # F = s (A s + B), ln w = -ln(1+F)
        if slopes:
            out = self._slopes(st, sl, sv, a_, b_, f)
        lw = np.log1p(f, out=f)
        if "nn" in st:
            lw += np.multiply.outer((4.0 * np.pi / 3.0) * st["nn"][sl], model._r3[lv][wap])
        if wap.all():
            arg -= lw
        else:
            arg[:, wap] -= lw
        if not slopes:
            return None
        if wap.all():
            return out
        full = [np.zeros(arg.shape), np.zeros(arg.shape)]
        for k in range(2):
            full[k][:, wap] = out[k]
        return tuple(full)

    def bound_state_weight(self, binding_ev, temperature, n_e):
        # the weakly bound electron of a negative ion (H-: 0.754 eV) is given the weight of a
        # hydrogenic level of the same binding energy, n* = sqrt(R / E_b), Z = 1 (our choice,
        # see docs/partition_functions.md): 1 in photospheres, dissolved where H is
        from sahaboltz.kernels.occupation import (RYDBERG_EV, stark_level_factor,
                                                  stark_state_factors, stark_state_slopes)
        n_star = np.sqrt(RYDBERG_EV / binding_ev)
        q = stark_level_factor(np.asarray(n_star), np.asarray(1.0))
        p_, a_, b_ = stark_state_factors(temperature, n_e)
        aa, ab = stark_state_slopes(temperature, n_e)
        sv = p_ * q
        f = sv * (a_ * sv + b_)
        d_n = -(sv * (2.0 * sv * a_ + b_) + sv * (sv * aa + ab) / 6.0) / (1.0 + f)
        return -np.log1p(f), d_n

    def bound_state_weight_derivatives(self, binding_ev, temperature, n_e):
        from sahaboltz.kernels.occupation import (RYDBERG_EV, log_w_charged_derivatives,
                                                  stark_level_factor, stark_state_curvatures,
                                                  stark_state_factors)
        # the same hydrogenic stand-in as bound_state_weight
        q = stark_level_factor(np.asarray(np.sqrt(RYDBERG_EV / binding_ev)), np.asarray(1.0))
        p_, a_, b_ = stark_state_factors(temperature, n_e)
        return log_w_charged_derivatives(p_ * q, a_, b_, *stark_state_curvatures(temperature,
                                                                                   n_e))

    def prepare_curvature_pairs(self, model, pst):
        from sahaboltz.kernels.occupation import stark_state_curvatures, stark_state_factors
        pst["stark"] = stark_state_factors(pst["T"], pst["ne"])
        pst["stark_curv"] = stark_state_curvatures(pst["T"], pst["ne"])

    def pair_log_derivative_sums(self, model, rows, start, count, pst, temps, states=None):
        from sahaboltz.kernels import compiled_thermo
        if not compiled_thermo.available():
            return None
        beta_u, tidx = temps
        return compiled_thermo.occupation_log_derivative_sums(
            tidx.ravel(), rows, beta_u, pst["stark"], pst["stark_curv"], pst.get("nn"), start,
            count, model._e, model._lng, model._lng_max, model._q_stark, model._r3,
            model.n_species, states)

    def pair_weight_derivatives(self, model, lv, counts, pairs, pst):
        from sahaboltz.kernels.occupation import log_w_charged_derivatives
        p_, a_, b_ = (np.repeat(v[pairs], counts) for v in pst["stark"])
        curv = (np.repeat(v[pairs], counts) for v in pst["stark_curv"])
        out = list(log_w_charged_derivatives(p_ * model._q_stark[lv], a_, b_, *curv))
        if "nn" in pst:   # hard spheres: independent of T and n_e
            out[0] = out[0] - (4.0 * np.pi / 3.0) * np.repeat(pst["nn"][pairs], counts) * model._r3[lv]
        return tuple(out)

    def prepare_pairs(self, model, pst):
        from sahaboltz.kernels.occupation import stark_state_factors, stark_state_slopes
        pst["stark"] = stark_state_factors(pst["T"], pst["ne"])
        pst["stark_slopes"] = stark_state_slopes(pst["T"], pst["ne"])

    def pair_sums(self, model, tidx, beta_u, rows, start, count, pst, want_temperature=True):
        from sahaboltz.kernels import compiled
        if not compiled.available():
            return None
        return compiled.occupation_pair_sums(tidx, rows, beta_u, pst["stark"],
                                             pst["stark_slopes"], pst.get("nn"), start, count,
                                             model._e, model._lng, model._q_stark, model._r3,
                                             model.n_species, want_temperature)

    def pair_weights(self, model, lv, counts, pairs, pst, want_temperature=True):
        p_, a_, b_ = (np.repeat(v[pairs], counts) for v in pst["stark"])
        aa, ab = (np.repeat(v[pairs], counts) for v in pst["stark_slopes"])
        sv = p_ * model._q_stark[lv]          # zero for bare nuclei (their Q is 0 there)
        f = sv * (a_ * sv + b_)
        da = sv * (sv * aa + ab)
        inv = -1.0 / (1.0 + f)
        d_t = (-0.5 * da) * inv if want_temperature else None
        d_n = (sv * (2.0 * sv * a_ + b_) + da / 6.0) * inv
        lw = -np.log1p(f)
        if "nn" in pst:
            lw -= (4.0 * np.pi / 3.0) * np.repeat(pst["nn"][pairs], counts) * model._r3[lv]
        return lw, d_t, d_n

    @staticmethod
    def _slopes(st, sl, sv, a_, b_, f):
        """(d ln w / d ln T, d ln w / d ln n_e) of the charged-perturber weights."""
        from sahaboltz.kernels.occupation import stark_state_slopes
        if "stark_slopes" not in st:
            st["stark_slopes"] = stark_state_slopes(st["T"], st["ne"])
        aa, ab = (v[sl][:, None] for v in st["stark_slopes"])   # a dA/da, a dB/da
        da = sv * (sv * aa + ab)                                # dF/d ln a
        inv = -1.0 / (1.0 + f)
        d_t = (-0.5 * da) * inv                                 # d ln a / d ln T = -1/2
        d_n = (sv * (2.0 * sv * a_ + b_) + da / 6.0) * inv      # d s / d ln n_e = s
        return d_t, d_n

    def keep(self, model, st, sl):
        if not model.completion:
            return None
        from sahaboltz.kernels.occupation import _BETA_COEFF, stark_k
        ne_min = st["ne"][sl].min()
        n = np.where(model._is_comp, model._ncomp, 1.0)
        beta_stark = _BETA_COEFF * ne_min ** (-2.0 / 3.0) * stark_k(n) * model._zrad**3 / n**4
        return ~model._is_comp | (beta_stark > _BETA_MIN)


# -- the registry ----------------------------------------------------------------------------
#: name -> a scheme instance, or a factory taking the parameter keywords
REGISTRY: dict[str, TruncationScheme | Callable[..., TruncationScheme]] = {}


def register(name: str, scheme: TruncationScheme | Callable[..., TruncationScheme]) -> None:
    """Add a scheme (an instance, or a factory of keyword parameters) under ``name``."""
    REGISTRY[name] = scheme


register("plain", TruncationScheme())
register("lowered", LoweredLimit())
register("occupation", OccupationProbability())
register("ground", GroundLevel())
register("below", BelowLimit)


def names() -> tuple[str, ...]:
    """The registered scheme names (parametrized ones without their parameter)."""
    return tuple(REGISTRY)


def choices_help() -> str:
    """The schemes, one phrase each, for command-line help."""
    return "; ".join(f"{name}: {entry.summary}" for name, entry in REGISTRY.items())


def get(truncation: Any) -> TruncationScheme:
    """The scheme for a name (``"occupation"``), a text with parameter (``"below:n=3"``) or a
    scheme instance.

    Raises
    ------
    InputError
        Unknown name or a malformed parameter.
    """
    if isinstance(truncation, TruncationScheme):
        return truncation
    if not isinstance(truncation, str):
        raise InputError(f"truncation must be one of {', '.join(names())}, got {truncation!r}")
    text = truncation.strip()
    name, _, param = text.partition(":")
    entry = REGISTRY.get(name.strip())
    if entry is None:
        raise InputError(f"truncation must be one of {', '.join(names())}, got {truncation!r}")
    if isinstance(entry, TruncationScheme):
        if param:
            raise InputError(f"truncation {name!r} takes no parameter, got {truncation!r}")
        return entry
    kw = {}
    for item in filter(None, (p.strip() for p in param.split(","))):
        k, eq, v = item.partition("=")
        try:
            if not eq:
                raise ValueError
            kw[k.strip().lower()] = float(v)
        except ValueError:
            raise InputError(f"truncation {truncation!r}: write {name}:key=value "
                             f"({entry.summary})") from None
    try:
        return entry(**kw)
    except TypeError:
        raise InputError(f"truncation {truncation!r}: unknown parameter; "
                         f"{entry.summary}") from None


def label(truncation: Any) -> str:
    """The plot/notes phrase of a scheme."""
    return get(truncation).label


def used(scheme: Any, lowering: bool) -> str:
    """What a solve used, as outputs name it: the scheme's key, and the lowering if on."""
    return get(scheme).key + (" with Debye-Hueckel lowering" if lowering else "")


def resolve(truncation: Any, lowering: bool = False, density: bool = True) -> TruncationScheme:
    """The scheme to use for the options ``truncation`` (None: the default), ``lowering``
    (Debye-Hueckel lowering of the ionization energies) and whether a density is known.

    The default is the physically best choice: occupation probabilities wherever the
    electron density is known (every solve), the plain sum where it is not (a partition
    function asked for at a temperature alone), and with lowering the cut at the lowered limit
    (consistent with the lowered ionization energies).  A scheme that counts levels above the
    lowered limit ("plain") is refused with lowering, and "lowered" needs it.
    """
    if truncation is None:
        if lowering:
            return REGISTRY["lowered"]
        return REGISTRY["occupation"] if density else REGISTRY["plain"]
    scheme = get(truncation)
    if scheme.lowering == "required" and not lowering:
        raise InputError(f"truncation='{scheme.key}' cuts the partition functions at the "
                         "lowered ionization limit: it needs lowering=True (Debye-Hueckel)")
    if scheme.lowering == "refused" and lowering:
        raise InputError(f"lowering=True with truncation='{scheme.key}' would lower the "
                         "ionization energies but not the partition-function cut-off: use "
                         "truncation='lowered' (the default with lowering) or 'occupation'")
    return scheme
