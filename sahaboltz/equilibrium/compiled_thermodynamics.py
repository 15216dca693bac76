"""The stage sums of the thermodynamics, state by state in one compiled loop (numba).

For every element in no molecule, :func:`sahaboltz.equilibrium.thermodynamics.thermodynamics`
needs per state a dozen sums over the stages of its window (n_j, n_j q_j, n_j a_j, ...), and
from them the element's share of the charge equation and of the derivatives.  In numpy each
is a pass over a (stages x states) temporary, for every element; this loop keeps a state's
window in registers.  The formulas of the stage terms are those of the numpy path in
thermodynamics.py (the reference, which runs without numba or with SAHABOLTZ_NO_NUMBA=1);
:func:`eliminated_increments` is shared by both, and tests/test_thermodynamics.py checks that
the two paths agree.
"""

from __future__ import annotations

import numpy as np

from sahaboltz.kernels import compiled as _compiled

__all__ = ["available", "eliminated_increments", "screening_increments",
           "eliminated_chain_sums", "significance_bounds", "inside_rows", "N_ACC", "N_PLAIN"]

#: rows of the accumulator: :func:`eliminated_increments` (the first N_PLAIN), then
#: :func:`screening_increments` (with Debye-Hueckel lowering)
N_PLAIN = 12
N_ACC = 20


def available() -> bool:
    return _compiled.available()


def eliminated_increments(s0, sq, sqq, sd, sqd, sa_big, sqa_big, sa, saa_big, saq, sb, sc,
                          na, lam):
    """An element's share, eliminated by hand (a diagonal block of the Jacobian), from its
    stage sums (S0 = sum n, Sq = sum n q, SD = sum n D, SA = sum n A, Sa = sum n a, ...;
    ``na`` = N alpha, ``lam`` its potential).  Returns the increments of

        0 the charge-charge Jacobian entry, 1-2 the charge row's right-hand sides (d ln T,
        d ln N), 3 n_tot, 4 sum n a, 5 sum N alpha lambda, and the terms of the derivatives
        as P + Q d lambda_ch once the charge potential is known: 6-7 of sum n a (P for
        d ln T and d ln N), 8 its Q, 9-10 of sum N alpha lambda, 11 its Q.

    With d lambda_k = ((-SA, N alpha) - (Sq - SD) d lambda_ch) / S0 the element's particle
    count does not move at fixed N (its d n = (0, N alpha)), and
    d(sum n a) = (SaA + Sb) e_T + Sa d lambda_k + Saq d lambda_ch + Sc (1.5 e_T - d lambda_ch).
    """
    inv = 1.0 / s0
    qd = sq - sd
    return (sqq - sqd - sq * qd * inv, -(sqa_big - sq * sa_big * inv), -sq * na * inv,
            s0, sa, na * lam,
            saa_big + sb + 1.5 * sc - sa * sa_big * inv, sa * na * inv, saq - sa * qd * inv - sc,
            -na * sa_big * inv, na * na * inv, -na * qd * inv)


def screening_increments(s0, sq, sqq, sq3, sq4, sd, sqd, sq2d, sa_big, sq2a, sa, saq2, sad, sc,
                         na):
    """An eliminated element's share of the Debye-Hueckel terms (with lowering), from its
    stage sums (as :func:`eliminated_increments`, and Sq3 = sum n q^3, Sq2D = sum n q^2 D,
    Sq2A = sum n q^2 A, Saq2 = sum n a q^2, SaD = sum n a D, ...).

    kappa = e^2 / (2 lambda_D k T) enters every ion's ln n as q^2 kappa and shifts ln n_e by
    kappa, so that d ln n = A e_T + d lambda_k + (q - D) d lambda_ch + (q^2 + D) d kappa: a
    third column (forcing f = q^2 + D, as A is the forcing of d ln T).  Returns the
    increments of 12 the charge row's right-hand side of that column, 13 the P of sum n a
    and 14 of sum N alpha lambda in it; and of the screening density sum q^2 n:
    15 its Q (the factor of d lambda_ch), 16-18 its P for d ln T, d ln N, d kappa, 19 itself.
    """
    inv = 1.0 / s0
    qd = sq - sd
    sf = sqq + sd                      # sum n f, f = q^2 + D
    sqf = sq3 + sqd
    saf = saq2 + sad
    return (-(sqf - sq * sf * inv), saf + sc - sa * sf * inv, -na * sf * inv,
            sq3 - sq2d - sqq * qd * inv, sq2a - sqq * sa_big * inv, sqq * na * inv,
            sq4 + sq2d - sqq * sf * inv, sqq)


def _chain_sums(rows, inside, bare, tinv, x, charges, energies, beta, vals, idx, na, lq,
                mass_term, lam_ch, screened, acc):
    """Add one element's :func:`eliminated_increments` to ``acc`` (N_ACC, m) at every state.

    ``rows``/``inside`` (W, m): the window's stages and which of them count; ``bare`` the
    element's T-only C_q at the distinct temperatures ``tinv`` indexes; ``vals`` (5, K) ln U
    and its derivatives (ln U, U_T, U_n, U_TT, U_Tn), window position (j, i)'s at
    ``idx[j, i]`` (-1: all 0, U = 1); ``na`` = N alpha; ``lq`` the electron's
    ln (2 pi m_e k T / h^2)^{3/2}, ``mass_term`` = 1.5 ln(m / m_e) of the element; with
    ``screened`` also the :func:`screening_increments` (``lu`` then holds the lowering's
    kappa q (q + 1) too)."""
    w, m = rows.shape
    lr = np.empty(w)                                   # ln of relative populations, then them
    for i in range(m):
        xi = x[i]
        ti = tinv[i]
        top = -np.inf
        for j in range(w):
            if inside[j, i]:
                k = idx[j, i]
                v = bare[rows[j, i], ti] - charges[rows[j, i]] * xi
                if k >= 0:
                    v += vals[0, k]
                lr[j] = v
                if v > top:
                    top = v
            else:
                lr[j] = -np.inf
        tot = 0.0
        for j in range(w):
            if inside[j, i]:
                lr[j] = np.exp(lr[j] - top)          # relative population
                tot += lr[j]
        scale = na[i] / tot
        bi = beta[i]
        s0 = sq = sqq = sd = sqd = sa_big = sqa_big = sa = saa_big = saq = sb = sc = 0.0
        sq3 = sq4 = sq2d = sq2a = saq2 = sad = 0.0
        best = -1.0
        r = 0
        for j in range(w):
            if not inside[j, i]:
                continue
            if lr[j] > best:
                best = lr[j]
                r = j
            n = lr[j] * scale
            q = charges[rows[j, i]]
            eb = energies[rows[j, i]] * bi
            k = idx[j, i]
            u_t = u_n = u_tt = u_tn = 0.0
            if k >= 0:
                u_t, u_n, u_tt, u_tn = vals[1, k], vals[2, k], vals[3, k], vals[4, k]
            a = 1.5 + u_t + eb
            b = u_tt - eb
            d = u_n
            big_a = a + 1.5 * d
            nq = n * q
            na_ = n * a
            s0 += n
            sq += nq
            sqq += nq * q
            sd += n * d
            sqd += nq * d
            sa_big += n * big_a
            sqa_big += nq * big_a
            sa += na_
            saa_big += na_ * big_a
            saq += na_ * (q - d)
            sb += n * b
            sc += n * u_tn
            if screened:
                nq2 = nq * q
                sq3 += nq2 * q
                sq4 += nq2 * q * q
                sq2d += nq2 * d
                sq2a += nq2 * big_a
                saq2 += na_ * q * q
                sad += na_ * d
        eb_r = energies[rows[r, i]] * bi
        ln_n_r = np.log(best * scale)
        lu_r = vals[0, idx[r, i]] if idx[r, i] >= 0 else 0.0
        lam = ln_n_r - (lq[i] + mass_term + lu_r - eb_r) - charges[rows[r, i]] * lam_ch[i]
        inc = _increments(s0, sq, sqq, sd, sqd, sa_big, sqa_big, sa, saa_big, saq, sb, sc,
                          na[i], lam)
        for k in range(N_PLAIN):
            acc[k, i] += inc[k]
        if screened:
            inc2 = _screening(s0, sq, sqq, sq3, sq4, sd, sqd, sq2d, sa_big, sq2a, sa, saq2, sad,
                              sc, na[i])
            for k in range(N_ACC - N_PLAIN):
                acc[N_PLAIN + k, i] += inc2[k]


def _bounds(tab, tinv, x, charges, kq, kap, u_hi, u_lo, thr, lo, hi):
    """Per state j the first and last stage r with a_r + u_hi_r >= max_s (a_s + u_lo_s) - thr,
    a_r = tab[r, tinv[j]] - q_r x_j + kq_r kap_j (numpy's argmax convention where none is:
    0 and n - 1).  Stage by stage over all states (a loop across the states vectorizes; one
    across a state's stages is a chain of maxima)."""
    n = charges.size
    m = x.size
    top = np.full(m, -np.inf)
    for r in range(n):
        row = tab[r]
        for j in range(m):
            top[j] = max(top[j], row[tinv[j]] - charges[r] * x[j] + kq[r] * kap[j] + u_lo[r])
    lo[:] = n
    hi[:] = -1
    for r in range(n):
        row = tab[r]
        for j in range(m):
            if row[tinv[j]] - charges[r] * x[j] + kq[r] * kap[j] + u_hi[r] >= top[j] - thr:
                lo[j] = min(lo[j], r)
                hi[j] = r
    for j in range(m):
        if hi[j] < 0:
            lo[j] = 0
            hi[j] = n - 1


def _inside(tab, tinv, x, charges, kq, kap, u_hi, u_lo, thr, rows, inside):
    """Whether each window stage rows[w, j] passes the test of :func:`_bounds`; the maximum
    over the window rows is the maximum over all stages (the largest stage is in the
    window)."""
    for j in range(x.size):
        top = -np.inf
        for w in range(rows.shape[0]):
            r = rows[w, j]
            top = max(top, tab[r, tinv[j]] - charges[r] * x[j] + kq[r] * kap[j] + u_lo[r])
        for w in range(rows.shape[0]):
            r = rows[w, j]
            inside[w, j] = (tab[r, tinv[j]] - charges[r] * x[j] + kq[r] * kap[j] + u_hi[r]
                            >= top - thr)


_increments = eliminated_increments
_screening = screening_increments
if _compiled.numba is not None:  # pragma: no branch
    _increments = _compiled.numba.njit(cache=True, nogil=True)(eliminated_increments)
    _screening = _compiled.numba.njit(cache=True, nogil=True)(screening_increments)
    _chain_sums_jit = _compiled.numba.njit(cache=True, nogil=True, error_model="numpy")(
        _chain_sums)
    _bounds_jit = _compiled.numba.njit(cache=True, nogil=True, error_model="numpy")(_bounds)
    _inside_jit = _compiled.numba.njit(cache=True, nogil=True, error_model="numpy")(_inside)


def eliminated_chain_sums(rows, inside, bare, tinv, x, charges, energies, beta, vals, idx, na,
                          lq, mass_term, lam_ch, acc, screened=False) -> None:
    """Compiled :func:`_chain_sums` (``vals`` (5, K): ln U, U_T, U_n, U_TT, U_Tn; ``idx``
    (W, m) each window position's column of them, -1 for U = 1)."""
    f64 = np.ascontiguousarray
    _chain_sums_jit(f64(rows, dtype=np.int64), f64(inside, dtype=np.bool_), f64(bare, dtype=float),
                    f64(tinv, dtype=np.int64), f64(x, dtype=float), f64(charges, dtype=float),
                    f64(energies, dtype=float), f64(beta, dtype=float),
                    f64(vals, dtype=float).reshape(5, -1), f64(idx, dtype=np.int64),
                    f64(na, dtype=float),
                    f64(lq, dtype=float), float(mass_term), f64(lam_ch, dtype=float),
                    bool(screened), acc)


def _stage_args(tab, tinv, x, charges, kq, kap, u_hi, u_lo):
    f64 = np.ascontiguousarray
    return (f64(tab, dtype=float), f64(tinv, dtype=np.int64), f64(x, dtype=float),
            f64(charges, dtype=float), f64(kq, dtype=float), f64(kap, dtype=float),
            f64(u_hi, dtype=float), f64(u_lo, dtype=float))


def significance_bounds(tab, tinv, x, charges, kq, kap, u_hi, u_lo, thr):
    """Compiled :func:`_bounds` for a chain's table ``tab`` (stages x distinct temperatures):
    (lo, hi) per state, without a (stages x states) array."""
    lo, hi = np.empty(x.size, dtype=np.int64), np.empty(x.size, dtype=np.int64)
    _bounds_jit(*_stage_args(tab, tinv, x, charges, kq, kap, u_hi, u_lo), float(thr), lo, hi)
    return lo, hi


def inside_rows(tab, tinv, x, charges, kq, kap, u_hi, u_lo, thr, rows):
    """Compiled :func:`_inside`: (W, m) booleans for the window rows ``rows``."""
    inside = np.empty(rows.shape, dtype=np.bool_)
    _inside_jit(*_stage_args(tab, tinv, x, charges, kq, kap, u_hi, u_lo), float(thr),
                np.ascontiguousarray(rows, dtype=np.int64), inside)
    return inside
