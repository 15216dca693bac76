"""Compiled inner loops (numba), with the pure-numpy code as the reference and fallback.

The occupation-weighted level sums of the density-dependent solve evaluate one species per
state at every Newton pass: a few thousand level terms per state, each with a logarithm, an
exponential and a dozen multiplications.  In numpy every one of those is a pass over a
temporary array (and the per-pair gathers np.repeat); a compiled loop keeps each term in
registers and is about ten times faster.  The formulas are those of
:meth:`sahaboltz.kernels.truncation.OccupationProbability.pair_weights` (the fit of
:mod:`sahaboltz.kernels.occupation`); tests/test_compiled.py checks both paths agree.

numba is optional: without it (or with SAHABOLTZ_NO_NUMBA=1 in the environment) the numpy
path runs, with the same results to rounding.
"""

from __future__ import annotations

import math
import os

import numpy as np

try:  # pragma: no cover - depends on the installation
    if os.environ.get("SAHABOLTZ_NO_NUMBA"):
        raise ImportError("disabled by SAHABOLTZ_NO_NUMBA")
    import numba
except ImportError:  # pragma: no cover
    numba = None

__all__ = ["available", "large_chain_fractions", "occupation_pair_sums", "pair_levels",
           "series_radii", "vector_exp"]


def available() -> bool:
    """Whether the compiled kernels are in use."""
    return numba is not None and not os.environ.get("SAHABOLTZ_NO_NUMBA")


# exp(x) = 2^k e^r, k = round(x / ln 2), r = x - k ln 2 in two parts (Cody and Waite: k C1 is
# exact for |k| < 2^11), e^r by its Taylor polynomial to r^13 (|r| <= ln2 / 2: the rest is
# below 4e-18 of it)
_LOG2E = 1.4426950408889634
_LN2_HI = 0.693145751953125
_LN2_LO = 1.42860682030941723212e-6
_EXP_TAYLOR = tuple(1.0 / math.factorial(k) for k in range(14))


def _two_to(k):
    """2.0 ** k for an integer k in [-1022, 1023]."""
    return 2.0 ** k


def vector_exp(x):
    """exp(x) for x <= 709 as arithmetic alone, which the compiler vectorizes (the C library's
    exp is a call per element): within one unit in the last place of it (tests/test_compiled.py),
    and 0 below x = -708 (where that gives subnormal numbers under 3.3e-308).  In the
    kernels' level loops, where the Boltzmann factors are formed; a caller compiled with
    fastmath "contract" gets fused multiply-adds, which the vectorized loop needs."""
    xc = min(max(x, -708.0), 709.0)
    k = np.floor(xc * _LOG2E + 0.5)
    r = (xc - k * _LN2_HI) - k * _LN2_LO
    c = _EXP_TAYLOR
    p = c[13]
    p = p * r + c[12]
    p = p * r + c[11]
    p = p * r + c[10]
    p = p * r + c[9]
    p = p * r + c[8]
    p = p * r + c[7]
    p = p * r + c[6]
    p = p * r + c[5]
    p = p * r + c[4]
    p = p * r + c[3]
    p = p * r + c[2]
    p = p * r + 1.0
    p = p * r + 1.0
    v = p * _two_to(int(k))
    return v if x >= -708.0 else 0.0


def series_radii(a_, b_):
    """(|smaller root|, |larger root|) in s of 1 + B s + A s^2 (a complex pair: both
    1/sqrt(A)): the radius of convergence of the series of the weight w = 1 / (1 + B s + A s^2)
    in s, and its counterpart for the series in 1/s."""
    disc = b_ * b_ - 4.0 * a_
    if disc < 0.0:
        return 1.0 / np.sqrt(a_), 1.0 / np.sqrt(a_)
    root = np.sqrt(disc)
    return 2.0 / (b_ + root), (b_ + root) / (2.0 * a_)


def _boltzmann_table(tidx, rows, beta_u, start, count, e, lng, shift, n_rows):
    """The Boltzmann factors exp(ln g - beta E - shift[row]) of the levels of each
    (temperature ``tidx[k]``, species ``rows[k]``) that occurs among the pairs k, once each:
    (offset of each pair's levels in the table, table, ...).  The slots are indexed by the
    species that occur (few per call), not all ``n_rows``: with many distinct temperatures
    a dense (temperature x species) index would cost more than the table.  Also each pair's
    slot number and the number of slots."""
    npair = tidx.size
    local = np.full(n_rows, -1, dtype=np.int64)
    n_local = 0
    for k in range(npair):
        if local[rows[k]] < 0:
            local[rows[k]] = n_local
            n_local += 1
    slot = np.full(beta_u.size * n_local, -1, dtype=np.int64)
    offset = np.empty(npair, dtype=np.int64)
    which = np.empty(npair, dtype=np.int64)
    slot_id = np.full(beta_u.size * n_local, -1, dtype=np.int64)
    total = 0
    n_slots = 0
    for k in range(npair):
        key = tidx[k] * n_local + local[rows[k]]
        if slot[key] < 0:
            slot[key] = total
            slot_id[key] = n_slots
            total += count[k]
            n_slots += 1
        offset[k] = slot[key]
        which[k] = slot_id[key]
    table = np.empty(total)
    filled = np.zeros(beta_u.size * n_local, dtype=np.bool_)
    for k in range(npair):
        key = tidx[k] * n_local + local[rows[k]]
        if not filled[key]:
            filled[key] = True
            bk = beta_u[tidx[k]]
            o = offset[k]
            top = shift[rows[k]]
            for j in range(count[k]):
                lv = start[k] + j
                table[o + j] = vector_exp(lng[lv] - bk * e[lv] - top)
    return offset, table, which, n_slots


def _pair_levels(tidx, rows, beta_u, starts, counts, e, lng_max, cut_ln, start, count):
    """Into ``start[k]``, ``count[k]`` the first level of pair k's species and the number of
    its levels with E < (cut_ln + ln g_max) kT at the pair's temperature (a prefix:
    energies ascend; at least one), searched once per (temperature, species) that occurs
    (:meth:`sahaboltz.kernels.partition.PartitionModel._pair_levels` is the numpy
    version)."""
    npair = tidx.size
    local = np.full(lng_max.size, -1, dtype=np.int64)
    n_local = 0
    for k in range(npair):
        if local[rows[k]] < 0:
            local[rows[k]] = n_local
            n_local += 1
    known = np.full(beta_u.size * n_local, -1, dtype=np.int64)
    for k in range(npair):
        r = rows[k]
        key = tidx[k] * n_local + local[r]
        c = known[key]
        s = starts[r]
        if c < 0:
            n = counts[r]
            cut = (cut_ln + lng_max[r]) / beta_u[tidx[k]]
            lo, hi = 0, n
            while lo < hi:
                mid = (lo + hi) // 2
                if e[s + mid] < cut:
                    lo = mid + 1
                else:
                    hi = mid
            c = min(max(lo, 1), n)
            known[key] = c
        start[k] = s
        count[k] = c


def _occupation_pair_sums(tidx, rows, beta_u, p_, a_, b_, aa, ab, nn4, start, count, e, lng,
                          q, r3, n_rows, want_temperature, u, u1, u2):
    """Per pair k: U = sum_l g_l w_l exp(-beta E_l) over levels start[k] .. start[k]+count[k],
    U1 = sum term (beta E + d ln w / d ln T), U2 = sum term d ln w / d ln n_e.

    w = exp(-nn4 r3) / (1 + s (A s + B)) with s = P Q_l (charged perturbers, the state
    factors P, A, B and their slopes aa = a dA/da, ab = a dB/da; neutral hard spheres
    with nn4 = 4 pi n_neutral / 3).  The Boltzmann factors g exp(-beta E) depend on the
    temperature and the level alone: they are computed once for each (temperature
    ``tidx[k]``, species ``rows[k]``) that occurs, so the loop over the pairs needs no
    exponential at all.
    """
    npair = tidx.size
    offset, table, _, _ = _boltzmann_table(tidx, rows, beta_u, start, count, e, lng,
                                           np.zeros(n_rows), n_rows)
    for k in range(npair):
        bk = beta_u[tidx[k]]
        pk, ak, bbk, aak, abk, nk = p_[k], a_[k], b_[k], aa[k], ab[k], nn4[k]
        o = offset[k] - start[k]
        lo, hi = start[k], start[k] + count[k]
        su = 0.0
        s1 = 0.0
        s2 = 0.0
        if nk == 0.0 and not want_temperature:
            # the solver's case: a loop without branches, which the compiler vectorizes
            for lv in range(lo, hi):
                sv = pk * q[lv]
                inv = 1.0 / (1.0 + sv * (ak * sv + bbk))
                term = table[o + lv] * inv
                su += term
                s2 -= term * inv * sv * (sv * (2.0 * ak + aak / 6.0) + bbk + abk / 6.0)
        else:
            for lv in range(lo, hi):
                sv = pk * q[lv]
                inv = 1.0 / (1.0 + sv * (ak * sv + bbk))
                term = table[o + lv] * inv * np.exp(-nk * r3[lv])
                su += term
                da = sv * (sv * aak + abk)
                s2 -= term * ((sv * (2.0 * sv * ak + bbk) + da / 6.0) * inv)
                s1 += term * (bk * e[lv] + 0.5 * da * inv)
        u[k] = su
        u1[k] = s1
        u2[k] = s2


def _large_fractions(tab_t, tinv, x, charges, ok, share, cut, lo, hi, out_r, out_c, out_f):
    """The stages of one chain holding at least ``share`` of the element at each state
    ``ok[i]``, ln n_q = tab_t[tinv[i], q] - charges[q] x[i] up to a constant of the state,
    normalized over the stages within e^-cut of its largest, which lie among the stages
    ``lo[i]`` to ``hi[i]``; written to ``out_*`` (stage, state, fraction).  Returns their
    number."""
    found = 0
    v = np.empty(charges.size)
    for i in range(x.size):
        if not ok[i]:
            continue
        ti = tinv[i]
        top = -np.inf
        for r in range(lo[i], hi[i] + 1):
            v[r] = tab_t[ti, r] - charges[r] * x[i]
            top = max(top, v[r])
        total = 0.0
        for r in range(lo[i], hi[i] + 1):
            v[r] -= top
            if v[r] >= -cut:
                v[r] = np.exp(v[r])
                total += v[r]
            else:
                v[r] = 0.0
        for r in range(lo[i], hi[i] + 1):
            f = v[r] / total
            if f >= share:
                out_r[found] = r
                out_c[found] = i
                out_f[found] = f
                found += 1
    return found


def large_chain_fractions(tab, tinv, x, charges, ok, share, cut, window=None):
    """(stage rows, state indices, fractions) of :func:`_large_fractions`, compiled, for the
    chain's C_q at the distinct temperatures ``tab`` (stages x temperatures): the states in
    order, the stages in order within each.  ``window``: (lo, hi) per state, the stages that
    can lie within e^-cut of the largest (default all)."""
    n = charges.size
    m = x.size
    lo, hi = window if window is not None else (np.zeros(m, dtype=np.int64),
                                                np.full(m, n - 1, dtype=np.int64))
    # at most min(n, 1 / share) stages of a state hold ``share`` each
    cap = m * min(n, int(1.0 / share) + 1)
    r, c, f = np.empty(cap, dtype=np.int64), np.empty(cap, dtype=np.int64), np.empty(cap)
    found = _large_fractions_jit(np.ascontiguousarray(np.asarray(tab, dtype=float).T),
                                 np.ascontiguousarray(tinv, dtype=np.int64),
                                 np.ascontiguousarray(x, dtype=float),
                                 np.ascontiguousarray(charges, dtype=float),
                                 np.ascontiguousarray(ok, dtype=np.bool_), float(share),
                                 float(cut), np.ascontiguousarray(lo, dtype=np.int64),
                                 np.ascontiguousarray(hi, dtype=np.int64), r, c, f)
    return r[:found].copy(), c[:found].copy(), f[:found].copy()


def borrowing_jit(**options):
    """``numba.njit(**options)`` for a kernel that allocates no array and returns none: compiled
    without the runtime's reference counting, so that its array arguments are borrowed from
    the caller.  With it, every call of a function that is not inlined increments and
    decrements the count of each array argument (two atomic operations each): 24 per call of
    the solver's weighted U, about a fifth of the default solve (measured with perf), and 8x
    the time of a small 8-array kernel called in a loop.  Plain njit where numba does not
    know the option (an unknown option fails only when the kernel is first compiled)."""
    from numba.core import cpu

    if hasattr(cpu.CPUTargetOptions, "_nrt"):
        return numba.njit(_nrt=False, **options)
    return numba.njit(**options)      # pragma: no cover - a numba without the option


if numba is not None:  # pragma: no branch
    from llvmlite import ir as _ir
    from numba.core import types as _types
    from numba.extending import intrinsic as _intrinsic

    @_intrinsic
    def _float_from_bits(typingctx, bits):
        """The float64 whose bits are the int64 ``bits`` (a bit cast)."""
        def codegen(context, builder, signature, args):
            return builder.bitcast(args[0], _ir.DoubleType())
        return _types.float64(_types.int64), codegen

    def _two_to_jit(k):
        # the exponent field of a double: 2^k without a call
        return _float_from_bits(np.int64(k + 1023) << 52)

    _two_to = numba.njit(inline="always")(_two_to_jit)
    vector_exp = numba.njit(inline="always")(vector_exp)
    _boltzmann_table = numba.njit(cache=True, nogil=True, fastmath={"contract"})(
        _boltzmann_table)
    _pair_levels_jit = numba.njit(cache=True, nogil=True)(_pair_levels)
    series_radii = numba.njit(cache=True, nogil=True, error_model="numpy")(series_radii)
    _large_fractions_jit = numba.njit(cache=True, nogil=True, error_model="numpy")(
        _large_fractions)
    # error_model="numpy": a division cannot raise (no branch per level), so the compiler
    # vectorizes the level loops
    _occupation_pair_sums_jit = numba.njit(
        cache=True, nogil=True, error_model="numpy",
        fastmath={"reassoc", "contract", "arcp", "nsz"})(_occupation_pair_sums)


def pair_levels(tidx, rows, beta_u, starts, counts, e, lng_max, cut_ln):
    """(start, count) of each pair's levels below the Boltzmann cut (see
    :func:`_pair_levels`), compiled."""
    n = rows.size
    start = np.empty(n, dtype=np.int64)
    count = np.empty(n, dtype=np.int64)
    i64 = np.ascontiguousarray
    _pair_levels_jit(i64(tidx, dtype=np.int64), i64(rows, dtype=np.int64),
                     i64(beta_u, dtype=float), i64(starts, dtype=np.int64),
                     i64(counts, dtype=np.int64), e, i64(lng_max, dtype=float), float(cut_ln),
                     start, count)
    return start, count


def occupation_pair_sums(tidx, rows, beta_u, stark, slopes, nn, start, count, e, lng, q, r3,
                         n_rows: int, want_temperature: bool):
    """(U, U1, U2) of the pairs (see :func:`_occupation_pair_sums`), compiled.

    ``tidx`` indexes the distinct temperatures' ``beta_u`` = 1/kT [eV^-1]; ``rows`` the
    species of each pair among ``n_rows``; ``stark`` = (P, A, B) and ``slopes`` =
    (a dA/da, a dB/da) per pair (:func:`~sahaboltz.kernels.occupation.stark_state_factors`,
    ``stark_state_slopes``); ``nn`` the neutral-perturber density per pair or None.
    """
    n = tidx.size
    u, u1, u2 = np.empty(n), np.empty(n), np.empty(n)
    nn4 = np.zeros(n) if nn is None else (4.0 * np.pi / 3.0) * np.asarray(nn, dtype=float)
    f64 = [np.ascontiguousarray(v, dtype=float) for v in (beta_u, *stark, *slopes)]
    _occupation_pair_sums_jit(np.ascontiguousarray(tidx, dtype=np.int64),
                              np.ascontiguousarray(rows, dtype=np.int64), *f64, nn4,
                              np.ascontiguousarray(start, dtype=np.int64),
                              np.ascontiguousarray(count, dtype=np.int64), e, lng, q, r3,
                              int(n_rows), bool(want_temperature), u, u1, u2)
    return u, u1, u2
