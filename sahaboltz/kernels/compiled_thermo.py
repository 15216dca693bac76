"""Compiled loop (numba) of the thermodynamic level sums with occupation probabilities.

:meth:`sahaboltz.kernels.partition.PartitionModel.pair_log_derivatives` needs, per (state,
species) pair, ln U and its first and second derivatives in (ln T, ln n_e).  With occupation
weights every level term needs the weight and four of its derivatives; in numpy each is a
pass over a temporary array.  This loop keeps a term in registers.  The formulas are those
of :func:`sahaboltz.kernels.occupation.log_w_charged_derivatives` (the numpy reference, which
runs without numba or with SAHABOLTZ_NO_NUMBA=1); tests/test_thermodynamics.py checks that
both agree.

Most levels of a pair have s = P q far inside the radius of convergence of the series of
the weight in s (as in the compiled solver, :mod:`sahaboltz.equilibrium.compiled_newton`):
where a (temperature, species) is shared by several pairs, its levels up to where s reaches
_SERIES_REACH of that radius are summed as the series, from running sums of
g exp(-E/kT) q^m (E/kT)^k formed once for the (temperature, species); only the levels above
one by one (on the 200 x 200 benchmark grid 12.8 of 80 levels per pair).
"""

from __future__ import annotations

import numpy as np

from sahaboltz.kernels import compiled as _compiled

__all__ = ["available", "occupation_log_derivative_sums"]

#: terms of the series of the level weights in s (see _series_sums)
SERIES_ORDER = 12
# levels with s below this fraction of the series' radius of convergence are summed as the
# series: its terms fall at least ~30-fold, so that the second derivatives' m^2 growth still
# leaves the twelfth term below 1e-16
_SERIES_REACH = 0.03
# a series stops at terms below this fraction of the sums
_NEGLIGIBLE = 1e-17
# a (temperature, species) gets running sums when at least this many pairs share it
_MIN_SHARE = 3


def available() -> bool:
    return _compiled.available()


def _level_sums(table, tb, e, q, lo, n, bk, pk, ak, bbk, a1k, b1k, a2k, b2k, shift):
    """The weighted moments of ``n`` levels of one pair: their Boltzmann factors from
    ``table[tb]`` (hard-sphere weights included), energies and Stark factors from
    ``e[lo]``, ``q[lo]``; with P = 0 every weight is 1 (s = 0) and they are the plain
    Boltzmann moments.  A loop without branches or exponentials, which the compiler
    vectorizes (indices, not slices: a slice costs reference counting per pair)."""
    s0 = 0.0
    se = 0.0
    see = 0.0
    sde = 0.0
    sd = 0.0
    sed = 0.0
    sdd = 0.0
    for j in range(n):
        sv = pk * q[lo + j]
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
        be = bk * e[lo + j]
        term = table[tb + j] * inv
        ec = be + w_t - shift
        s0 += term
        se += term * ec
        see += term * ec * ec
        sde += term * (w_tt - be)
        sd += term * w_n
        sed += term * ec * w_n
        sdd += term * w_tn
    return s0, se, see, sde, sd, sed, sdd


def _series_sums(pre, base, pk, ak, bbk, a1k, b1k, a2k, b2k):
    """The weighted sums of the levels below ``base`` (running sums ``pre`` from there) as
    the series of w = 1 / (1 + B s + A s^2) in s = P q, w = sum_m tau_m s^m with
    tau_0 = 1, tau_1 = -B, tau_m = -B tau_(m-1) - A tau_(m-2).

    A and B depend on the state through a alone (d ln a / d ln T = -1/2,
    d ln a / d ln n_e = 1/6) and P is proportional to n_e, so with ' = a d/da
    (B' = b1, B'' = b1 + b2, likewise A) the coefficient of q^m is P^m tau_m and
    d/d ln T -> -tau'/2, d/d ln n_e -> m tau + tau'/6, d2/d ln T^2 -> tau''/4,
    d2/d ln T d ln n_e -> -(m tau' + tau''/6)/2.  Returns (W0, W0e, W0ee, WT, WTe, WN, WNe,
    WTT, WTN): sum g exp(-E/kT) X e^k for X = w, dw/d ln T, dw/d ln n_e and the second
    derivatives, e = E/kT above the species' first level."""
    m1 = SERIES_ORDER + 1
    bd, bdd = b1k, b1k + b2k
    ad, add = a1k, a1k + a2k
    w0 = w0e = w0ee = wt = wte = wn = wne = wtt = wtn = 0.0
    tv, td, tdd = 1.0, 0.0, 0.0                     # tau_m and its a-derivatives
    pv, pd, pdd = 0.0, 0.0, 0.0                     # tau_(m-1)
    pm = 1.0
    quiet = 0
    for m in range(m1):
        o = (base * m1 + m) * 3
        z0 = pm * pre[o]
        z1 = pm * pre[o + 1]
        z2 = pm * pre[o + 2]
        w0 += tv * z0
        w0e += tv * z1
        w0ee += tv * z2
        wt -= 0.5 * td * z0
        wte -= 0.5 * td * z1
        dn = m * tv + td * (1.0 / 6.0)
        wn += dn * z0
        wne += dn * z1
        wtt += 0.25 * tdd * z0
        wtn -= 0.5 * (m * td + tdd * (1.0 / 6.0)) * z0
        # the derivatives grow as m and m^2 times the term: two terms in a row below
        # _NEGLIGIBLE of the sums end the series
        mag = (abs(tv) * (m + 1) + abs(td) + abs(tdd)) * (z0 + z2)
        if mag <= _NEGLIGIBLE * (w0 + w0ee):
            quiet += 1
            if quiet == 2:
                break
        else:
            quiet = 0
        # tau_(m+1) = -B tau_m - A tau_(m-1), differentiated twice in ln a
        nv = -(bbk * tv + ak * pv)
        nd = -(bd * tv + bbk * td + ad * pv + ak * pd)
        ndd = -(bdd * tv + 2.0 * bd * td + bbk * tdd + add * pv + 2.0 * ad * pd + ak * pdd)
        pv, pd, pdd = tv, td, tdd
        tv, td, tdd = nv, nd, ndd
        pm *= pk
    return w0, w0e, w0ee, wt, wte, wn, wne, wtt, wtn


def _series_split(tidx, sidx, p_, a_, b_, nn4, start, count, e, q, beta_u, offset, table,
                  slot, n_slots):
    """Which levels of each pair are summed as the series of their weights: the first
    ``j0[k]`` (s below _SERIES_REACH of the radius of convergence; q rises with the level),
    for (temperature, species) that at least _MIN_SHARE pairs share (their running sums cost
    more than the levels of fewer pairs); the running sums S_m^k = sum g exp(-E/kT) q^m e^k
    over those levels (e = E/kT above the first level), ``pre``, kept at the levels where
    some pair's series ends, and each pair's row of them ``at_k`` (-1: no series).  ``slot``:
    each pair's (temperature, species) among ``n_slots``, whose levels start at ``offset``
    in ``table``."""
    npair = tidx.size
    m1 = SERIES_ORDER + 1
    uses = np.zeros(n_slots, dtype=np.int64)
    for k in range(npair):
        uses[slot[k]] += 1
    j0 = np.zeros(npair, dtype=np.int64)
    at_k = np.full(npair, -1, dtype=np.int64)
    if npair == 0 or uses.max() < _MIN_SHARE:
        return j0, at_k, np.empty(0)
    j_max = np.zeros(n_slots, dtype=np.int64)
    last = np.full(n_slots, -1, dtype=np.int64)   # the previous pair's count of the slot
    lims = np.empty(p_.size)                      # per state: the end of the series in s
    for i in range(p_.size):
        lims[i] = _SERIES_REACH * _compiled.series_radii(a_[i], b_[i])[0]
    for k in range(npair):
        o = slot[k]
        i = sidx[k]
        if nn4[i] != 0.0 or uses[o] < _MIN_SHARE:
            continue
        lim = lims[i]
        pk = p_[i]
        s = start[k]
        c = count[k]
        j = last[o]
        if j < 0:                              # levels with P q <= lim: a prefix
            lo, hi = 0, c
            while lo < hi:
                mid = (lo + hi) // 2
                if pk * q[s + mid] <= lim:
                    lo = mid + 1
                else:
                    hi = mid
            j = lo
        else:   # walked from the previous pair of the slot (often the neighbouring state)
            while j < c and pk * q[s + j] <= lim:
                j += 1
            while j > 0 and pk * q[s + j - 1] > lim:
                j -= 1
        last[o] = j
        j0[k] = j
        if j > j_max[o]:
            j_max[o] = j
    # the running sums are kept only at the levels where some pair's series ends
    pre_at = np.empty(n_slots, dtype=np.int64)
    total = 0
    for o in range(n_slots):
        pre_at[o] = total
        total += j_max[o]
    row = np.full(total, -1, dtype=np.int64)
    n_rows_kept = 0
    for k in range(npair):
        if j0[k] > 0:
            r = pre_at[slot[k]] + j0[k] - 1
            if row[r] < 0:
                row[r] = n_rows_kept
                n_rows_kept += 1
            at_k[k] = row[r]
    pre = np.empty(n_rows_kept * m1 * 3)
    acc = np.empty(m1 * 3)
    pw = np.empty(m1)
    done = np.zeros(n_slots, dtype=np.bool_)
    for k in range(npair):
        o = slot[k]
        if j_max[o] == 0 or done[o]:
            continue
        done[o] = True
        bk = beta_u[tidx[k]]
        s = start[k]
        e0 = e[s]
        tb = offset[k]
        acc[:] = 0.0
        for j in range(j_max[o]):
            tv = table[tb + j]
            ev = bk * (e[s + j] - e0)
            qv = q[s + j]
            pw[0] = tv
            for m in range(1, m1):
                pw[m] = pw[m - 1] * qv
            for m in range(m1):
                acc[3 * m] += pw[m]
                acc[3 * m + 1] += pw[m] * ev
                acc[3 * m + 2] += pw[m] * (ev * ev)
            r = row[pre_at[o] + j]
            if r >= 0:
                pre[r * m1 * 3:(r + 1) * m1 * 3] = acc
    return j0, at_k, pre


def _sums(tidx, rows, sidx, beta_u, p_, a_, b_, a1, b1, a2, b2, nn4, start, count, e, lng,
          lng_max, q, r3, n_rows, out):
    """The Boltzmann factors g exp(-beta E) / g_max depend on the temperature and the level
    alone: they are computed once for each (temperature ``tidx[k]``, species ``rows[k]``)
    that occurs (as in :mod:`sahaboltz.kernels.compiled`), then every pair's loop needs no
    exponential (but for neutral perturbers' hard-sphere weights).  The low levels of pairs
    that share a (temperature, species) are summed as series (:func:`_series_sums`), the
    rest one by one.  The state factors (P, A, B, their curvatures, nn4) are given per state,
    pair k's at ``sidx[k]``."""
    npair = tidx.size
    offset, table, slot, n_slots = _compiled._boltzmann_table(tidx, rows, beta_u, start,
                                                              count, e, lng, lng_max, n_rows)
    j0, at_k, pre = _series_split(tidx, sidx, p_, a_, b_, nn4, start, count, e, q, beta_u,
                                  offset, table, slot, n_slots)
    for k in range(npair):
        bk = beta_u[tidx[k]]
        i = sidx[k]
        pk, ak, bbk, a1k, b1k, a2k, b2k = p_[i], a_[i], b_[i], a1[i], b1[i], a2[i], b2[i]
        lo = start[k]
        jk = j0[k]
        n = count[k] - jk
        shift = bk * e[lo]
        if nn4[i] != 0.0:   # (every level one by one here: jk = 0)
            hard = table[offset[k]:offset[k] + n] * np.exp(-nn4[i] * r3[lo:lo + n])
            s0, se, see, sde, sd, sed, sdd = _level_sums(
                hard, np.uint64(0), e, q, np.uint64(lo), np.uint64(n), bk, pk, ak, bbk, a1k,
                b1k, a2k, b2k, shift)
        else:
            s0, se, see, sde, sd, sed, sdd = _level_sums(
                table, np.uint64(offset[k] + jk), e, q, np.uint64(lo + jk), np.uint64(n), bk,
                pk, ak, bbk, a1k, b1k, a2k, b2k, shift)
        see += sde
        sed += sdd
        if jk > 0:
            w0, w0e, w0ee, wt, wte, wn, wne, wtt, wtn = _series_sums(
                pre, at_k[k], pk, ak, bbk, a1k, b1k, a2k, b2k)
            # in the one-by-one sums' terms: e + d ln w / d ln T and its square, and
            # sum w (d2 ln w / d ln T^2 - E/kT) = WTT - sum w w_t^2 - (W0e + shift W0)
            s0 += w0
            se += w0e + wt
            see += w0ee + 2.0 * wte + wtt - (w0e + shift * w0)
            sd += wn
            sed += wne + wtn
        inv0 = 1.0 / s0
        me = se * inv0
        md = sd * inv0
        out[0, k] = np.log(s0) + lng_max[rows[k]]
        out[1, k] = me + shift
        out[2, k] = md
        out[3, k] = see * inv0 - me * me
        out[4, k] = sed * inv0 - me * md


if _compiled.numba is not None:  # pragma: no branch
    # error_model="numpy": a division cannot raise (no branch per level), so the level loop
    # is vectorized; the sums may be reordered (no NaN or inf arises in them)
    # (called per pair, they allocate nothing: no reference counts, see borrowing_jit)
    _level_sums = _compiled.borrowing_jit(
        cache=True, nogil=True, error_model="numpy",
        fastmath={"reassoc", "contract", "arcp", "nsz"})(_level_sums)
    _series_sums = _compiled.borrowing_jit(cache=True, nogil=True, error_model="numpy")(
        _series_sums)
    _series_split = _compiled.numba.njit(cache=True, nogil=True, error_model="numpy")(
        _series_split)
    _sums_jit = _compiled.numba.njit(cache=True, nogil=True, error_model="numpy")(_sums)


def occupation_log_derivative_sums(tidx, rows, beta_u, stark, curv, nn, start, count, e, lng,
                                   lng_max, q, r3, n_rows, states=None):
    """(ln U, U_T, U_n, U_TT, U_Tn) per pair, the rows of one (5, pairs) array; ``tidx``
    indexes each pair's temperature among the distinct ones (1/kT in ``beta_u``), ``rows``
    its species among ``n_rows``;
    ``stark`` = (P, A, B) and ``curv`` = (a A', a B', a^2 A'', a^2 B'') per pair, or per state
    with ``states`` (pair k belongs to state ``states[k]``; no gathers to the pairs)
    (:mod:`sahaboltz.kernels.occupation`), ``nn`` the neutral-perturber density likewise or
    None, ``start``/``count`` each pair's levels, ``lng_max`` the largest ln g per species."""
    n = tidx.size
    out = np.empty((5, n))
    f64 = [np.ascontiguousarray(v, dtype=float) for v in (beta_u, *stark, *curv)]
    n_state = f64[1].size
    nn4 = (np.zeros(n_state) if nn is None
           else (4.0 * np.pi / 3.0) * np.ascontiguousarray(nn, dtype=float))
    sidx = np.arange(n) if states is None else states
    i64 = [np.ascontiguousarray(v, dtype=np.int64) for v in (tidx, rows, sidx)]
    _sums_jit(*i64, *f64, nn4, np.ascontiguousarray(start, dtype=np.int64),
              np.ascontiguousarray(count, dtype=np.int64), e, lng,
              np.ascontiguousarray(lng_max, dtype=float), q, r3, int(n_rows), out)
    return out


def plain_log_derivative_sums(tidx, rows, beta_u, start, count, e, lng, lng_max, q, r3, n_rows):
    """The same sums with every weight 1 (partition functions of T alone): the loop above
    with P = 0, so that s = 0 and every weight term vanishes."""
    zero = np.zeros(1)
    return occupation_log_derivative_sums(tidx, rows, beta_u, (zero,) * 3, (zero,) * 4, None,
                                          start, count, e, lng, lng_max, q, r3, n_rows,
                                          states=np.zeros(tidx.size, dtype=np.int64))
