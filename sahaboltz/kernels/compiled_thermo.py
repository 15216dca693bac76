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


def _sums(beta, p_, a_, b_, a1, b1, a2, b2, nn4, start, count, e, lng, q, r3, out):
    for k in range(beta.size):
        bk, pk, ak, bbk = beta[k], p_[k], a_[k], b_[k]
        a1k, b1k, a2k, b2k, nk = a1[k], b1[k], a2[k], b2[k], nn4[k]
        lo, hi = start[k], start[k] + count[k]
        top = -1e300
        for lv in range(lo, hi):
            v = lng[lv] - bk * e[lv]
            if v > top:
                top = v
        shift = bk * e[lo]
        s0 = 0.0
        se = 0.0
        see = 0.0
        sde = 0.0
        sd = 0.0
        sed = 0.0
        sdd = 0.0
        for lv in range(lo, hi):
            sv = pk * q[lv]
            s2 = sv * sv
            g = sv * (ak * sv + bbk)
            inv = 1.0 / (1.0 + g)
            g_s = 2.0 * ak * s2 + bbk * sv
            g_a = a1k * s2 + b1k * sv
            g_aa = (a1k + a2k) * s2 + (b1k + b2k) * sv
            g_sa = 2.0 * a1k * s2 + b1k * sv
            w_t = 0.5 * g_a * inv
            w_n = -(g_s + g_a / 6.0) * inv
            w_tt = -0.25 * g_aa * inv + w_t * w_t
            w_tn = 0.5 * (g_sa + g_aa / 6.0) * inv + w_t * w_n
            be = bk * e[lv]
            term = np.exp(lng[lv] - be - top - nk * r3[lv]) * inv
            ec = be + w_t - shift
            s0 += term
            se += term * ec
            see += term * ec * ec
            sde += term * (w_tt - be)
            sd += term * w_n
            sed += term * ec * w_n
            sdd += term * w_tn
        inv0 = 1.0 / s0
        me = se * inv0
        md = sd * inv0
        out[0, k] = np.log(s0) + top
        out[1, k] = me + shift
        out[2, k] = md
        out[3, k] = see * inv0 - me * me + sde * inv0
        out[4, k] = sed * inv0 - me * md + sdd * inv0


if _compiled.numba is not None:  # pragma: no branch
    _sums_jit = _compiled.numba.njit(cache=True, nogil=True)(_sums)


def occupation_log_derivative_sums(beta, stark, curv, nn, start, count, e, lng, q, r3):
    """(ln U, U_T, U_n, U_TT, U_Tn) per pair; ``stark`` = (P, A, B) and ``curv`` =
    (a A', a B', a^2 A'', a^2 B'') per pair (:mod:`sahaboltz.kernels.occupation`), ``nn`` the
    neutral-perturber density per pair or None, ``start``/``count`` each pair's levels."""
    n = beta.size
    out = np.empty((5, n))
    nn4 = np.zeros(n) if nn is None else (4.0 * np.pi / 3.0) * np.asarray(nn, dtype=float)
    f64 = [np.ascontiguousarray(v, dtype=float) for v in (beta, *stark, *curv)]
    _sums_jit(*f64, nn4, np.ascontiguousarray(start, dtype=np.int64),
              np.ascontiguousarray(count, dtype=np.int64), e, lng, q, r3, out)
    return tuple(out)
