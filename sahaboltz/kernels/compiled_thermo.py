"""Compiled loop (numba) of the thermodynamic level sums with occupation probabilities.

:meth:`sahaboltz.kernels.partition.PartitionModel.pair_log_derivatives` needs, per (state,
species) pair, ln U and its first and second derivatives in (ln T, ln n_e).  With occupation
weights every level term needs the weight and four of its derivatives; in numpy each is a
pass over a temporary array.  This loop keeps a term in registers.  The formulas are those
of :func:`sahaboltz.kernels.occupation.log_w_charged_derivatives` (the numpy reference, which
runs without numba or with SAHABOLTZ_NO_NUMBA=1); tests/test_thermodynamics.py checks that
both agree.
"""

from __future__ import annotations

import numpy as np

from sahaboltz.kernels import compiled as _compiled

__all__ = ["available", "occupation_log_derivative_sums"]


def available() -> bool:
    return _compiled.available()


def _level_sums(boltz, e, q, bk, pk, ak, bbk, a1k, b1k, a2k, b2k, shift):
    """The weighted moments of one pair's levels: boltz (Boltzmann factors, hard-sphere
    weights included), energies ``e`` and Stark factors ``q`` of its levels; with P = 0
    every weight is 1 (s = 0) and they are the plain Boltzmann moments.  A loop without
    branches or exponentials, which the compiler vectorizes."""
    s0 = 0.0
    se = 0.0
    see = 0.0
    sde = 0.0
    sd = 0.0
    sed = 0.0
    sdd = 0.0
    for lv in range(boltz.size):
        sv = pk * q[lv]
        s2 = sv * sv
        inv = 1.0 / (1.0 + sv * (ak * sv + bbk))
        g_s = 2.0 * ak * s2 + bbk * sv
        g_a = a1k * s2 + b1k * sv
        g_aa = (a1k + a2k) * s2 + (b1k + b2k) * sv
        g_sa = 2.0 * a1k * s2 + b1k * sv
        w_t = 0.5 * g_a * inv
        w_n = -(g_s + g_a * (1.0 / 6.0)) * inv
        w_tt = -0.25 * g_aa * inv + w_t * w_t
        w_tn = 0.5 * (g_sa + g_aa * (1.0 / 6.0)) * inv + w_t * w_n
        be = bk * e[lv]
        term = boltz[lv] * inv
        ec = be + w_t - shift
        s0 += term
        se += term * ec
        see += term * ec * ec
        sde += term * (w_tt - be)
        sd += term * w_n
        sed += term * ec * w_n
        sdd += term * w_tn
    return s0, se, see, sde, sd, sed, sdd


def _sums(tidx, rows, beta_u, p_, a_, b_, a1, b1, a2, b2, nn4, start, count, e, lng, lng_max,
          q, r3, n_rows, out):
    """The Boltzmann factors g exp(-beta E) / g_max depend on the temperature and the level
    alone: they are computed once for each (temperature ``tidx[k]``, species ``rows[k]``)
    that occurs (as in :mod:`sahaboltz.kernels.compiled`), then every pair's loop needs no
    exponential (but for neutral perturbers' hard-sphere weights)."""
    npair = tidx.size
    offset, table = _compiled._boltzmann_table(tidx, rows, beta_u, start, count, e, lng,
                                               lng_max, n_rows)
    for k in range(npair):
        bk = beta_u[tidx[k]]
        lo, hi = start[k], start[k] + count[k]
        boltz = table[offset[k]:offset[k] + count[k]]
        if nn4[k] != 0.0:
            boltz = boltz * np.exp(-nn4[k] * r3[lo:hi])
        shift = bk * e[lo]
        s0, se, see, sde, sd, sed, sdd = _level_sums(
            boltz, e[lo:hi], q[lo:hi], bk, p_[k], a_[k], b_[k], a1[k], b1[k], a2[k], b2[k],
            shift)
        inv0 = 1.0 / s0
        me = se * inv0
        md = sd * inv0
        out[0, k] = np.log(s0) + lng_max[rows[k]]
        out[1, k] = me + shift
        out[2, k] = md
        out[3, k] = see * inv0 - me * me + sde * inv0
        out[4, k] = sed * inv0 - me * md + sdd * inv0


if _compiled.numba is not None:  # pragma: no branch
    # error_model="numpy": a division cannot raise (no branch per level), so the level loop
    # is vectorized; the sums may be reordered (no NaN or inf arises in them)
    _level_sums = _compiled.numba.njit(
        cache=True, nogil=True, error_model="numpy",
        fastmath={"reassoc", "contract", "arcp", "nsz"})(_level_sums)
    _sums_jit = _compiled.numba.njit(cache=True, nogil=True, error_model="numpy")(_sums)


def occupation_log_derivative_sums(tidx, rows, beta_u, stark, curv, nn, start, count, e, lng,
                                   lng_max, q, r3, n_rows):
    """(ln U, U_T, U_n, U_TT, U_Tn) per pair; ``tidx`` indexes each pair's temperature among
    the distinct ones (1/kT in ``beta_u``), ``rows`` its species among ``n_rows``;
    ``stark`` = (P, A, B) and ``curv`` = (a A', a B', a^2 A'', a^2 B'') per pair
    (:mod:`sahaboltz.kernels.occupation`), ``nn`` the neutral-perturber density per pair or
    None, ``start``/``count`` each pair's levels, ``lng_max`` the largest ln g per species."""
    n = tidx.size
    out = np.empty((5, n))
    nn4 = np.zeros(n) if nn is None else (4.0 * np.pi / 3.0) * np.asarray(nn, dtype=float)
    f64 = [np.ascontiguousarray(v, dtype=float) for v in (beta_u, *stark, *curv)]
    i64 = [np.ascontiguousarray(v, dtype=np.int64) for v in (tidx, rows)]
    _sums_jit(*i64, *f64, nn4, np.ascontiguousarray(start, dtype=np.int64),
              np.ascontiguousarray(count, dtype=np.int64), e, lng,
              np.ascontiguousarray(lng_max, dtype=float), q, r3, int(n_rows), out)
    return tuple(out)


def plain_log_derivative_sums(tidx, rows, beta_u, start, count, e, lng, lng_max, q, r3, n_rows):
    """The same sums with every weight 1 (partition functions of T alone): the loop above
    with P = 0, so that s = 0 and every weight term vanishes."""
    n = tidx.size
    zero = np.zeros(n)
    return occupation_log_derivative_sums(tidx, rows, beta_u, (zero,) * 3, (zero,) * 4, None,
                                          start, count, e, lng, lng_max, q, r3, n_rows)
