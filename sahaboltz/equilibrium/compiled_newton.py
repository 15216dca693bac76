"""The charge balance solved state by state in one compiled loop (numba).

The method of the numpy engine of :mod:`sahaboltz.equilibrium.atomic` (safeguarded,
bracketed Newton in x = ln n_e on g(x) = ln(N Zbar) - x, the same start, windows and
acceptance rules), written per state: each state walks the element chains with its own
window of significant stages, found in the significance intervals
(:func:`sahaboltz.equilibrium.atomic._significance_intervals`) by binary search at a row's
first state and walked from there on.  A numpy pass over all states and all window stages
needs a dozen temporaries per chain and per pass; here every quantity stays in registers,
which is what makes the compiled path several times faster (benchmarks/bench_solver.py).
With T-only U two things differ (see :func:`_moments` and :func:`_third_order_step`): the
stages' shares come from the ratios of neighbours (a product per stage, no exponential), and
the chains' cumulants give the second and third derivatives of g, so that the step is
Chebyshev's third-order one, the last one when its predicted error is well inside the
tolerance (most states of a grid row then take one pass).

Density-dependent partition functions (occupation probabilities, charged perturbers) are
summed in the loop too.  The Boltzmann terms g exp(-E/kT) of a species depend on T alone and
are tabulated once per (temperature, species) that occurs.  A level's weight is
w = 1 / (1 + B s + A s^2) with s = P q (P, A, B from the state, q from the level; q rises
with the level energy).  For the low levels (s below a tenth of the radius of convergence of
the series of w in s) the weights are summed as that series from running sums
S_m = sum term q^m; for the high ones (s ten times beyond it) as the series in 1/s from sums
from the top; only the levels in between one by one.  Each series takes SERIES_ORDER + 1
terms (its coefficients formed once per pass), which bound it at about 1e-13.  Species whose highest
level still has weight 1 to 1e-17 take the low-density limit directly.  Stages whose share
of the mean charge stays below e^-39 of it are left out (see :func:`_moments`); a stage whose
share times the error of a cheaper ln U stays below e^-38 takes that one: the low-density
limit (error at most ln(1 + F) of its highest level), or its last exact ln U at the same
temperature carried along its slope.

Used by :func:`sahaboltz.equilibrium.atomic.solve_atomic` whenever numba is available (and
``SAHABOLTZ_NO_NUMBA`` is not set); tests/test_compiled_newton.py checks it against the numpy
engine.
"""

from __future__ import annotations

import numpy as np

from sahaboltz.constants import K_B_EV as _K_B_EV
from sahaboltz.kernels import compiled
from sahaboltz.kernels.compiled import numba
from sahaboltz.kernels.occupation import (RYDBERG_EV, stark_level_factor, stark_state_factors,
                                          stark_state_slopes)
from sahaboltz.kernels.saha import H_MINUS_AFFINITY_EV

__all__ = ["available", "CompiledSolver", "SERIES_ORDER"]

#: closure kinds of the kernel
FIXED_NUCLEI, FIXED_PARTICLES, FIXED_ELECTRONS = 0, 1, 2
#: ln n_e never leaves this range (|x| = 2000 is n_e = 10^(+-869) cm^-3)
X_CLIP = 2000.0
#: stages apart that bound the significance intervals (see significance_intervals)
INTERVAL_REACH = 32
#: terms of the series of the level weights in s (see _weighted_u)
SERIES_ORDER = 12
# a series stops at a term below this fraction of the sum
_NEGLIGIBLE = 1e-17
# a stage whose share of the mean charge stays below e^-_LN_SHARE is left out of the sums
_LN_SHARE = 34.0
# margin of that test when U depends on n_e: judged with the low-density-limit U (the largest)
_DENSITY_MARGIN = 5.0
_EXP_MARGIN = float(np.exp(-_DENSITY_MARGIN))
# the error budget of a stage's ln U: e^-4 under what the cut leaves out, over its share
_EXP_BUDGET = float(np.exp(-4.0))
# a temperature of fewer states than this sums the weighted U level by level: the running
# sums of the series (13 per level) cost more than the few evaluations they serve
_SHARED = 100
# Boltzmann pruning of the level sums, as in PartitionModel.evaluate_pairs
_CUT = 50.0
# a chain's moments carried from an earlier x may err by this fraction of the tolerance
_LAG_SHARE = 1e-3
# a Newton step may move ln n_e by at most this much while no lower bracket is known
_MAX_STEP = 20.0
# the stages' shares come from ratios of neighbours (see _moments) while |ln n_e| is below
# this; the ratio tables are clipped at e^+-_RATIO_CLIP, so that a clipped ratio times e^-+x
# stays below e^-(_RATIO_CLIP - _RATIO_X), far under any significance cut
_RATIO_X = 100.0
_RATIO_CLIP = 600.0
# a third-order step is the last when this times its predicted residual is within the
# tolerance and it is at most _THIRD_MAX_STEP long (so that the next order stays below it)
_THIRD_MARGIN = 10.0
_THIRD_MAX_STEP = 1e-3


def available() -> bool:
    return compiled.available()


def _weight(sv, a_, b_, aa, ab):
    """1/(1+F) and d ln w / d ln n_e of a level with s = sv (charged perturbers)."""
    inv = 1.0 / (1.0 + sv * (a_ * sv + b_))
    return inv, -inv * sv * (sv * (2.0 * a_ + aa / 6.0) + b_ + ab / 6.0)


def _fill(tl, row, beta, lv_start, lv_count, e, lng, lng_max, qs, term, pre, cnt_t,
          pool_base, stride, sums):
    """Boltzmann terms of species ``row`` at temperature ``tl`` and (with ``sums``) their
    running sums S_m = sum_(i < j) term q^m, m = 0 .. SERIES_ORDER (see _fill_top for the
    sums from the top, V_m = sum_(i >= j) term q^-(m+2))."""
    s = lv_start[row]
    c = lv_count[row]
    cut = (_CUT + lng_max[row]) / beta
    # levels below the Boltzmann cut (energies ascending): a prefix
    lo, hi = 0, c
    while lo < hi:
        mid = (lo + hi) // 2
        if e[s + mid] < cut:
            lo = mid + 1
        else:
            hi = mid
    cnt = min(max(lo, 1), c)
    cnt_t[tl * stride + row] = cnt
    b = tl * pool_base + s + row
    if not sums:
        for j in range(cnt):
            term[b + j] = compiled.vector_exp(lng[s + j] - beta * e[s + j])
        return
    m1 = SERIES_ORDER + 1
    for m in range(m1):
        pre[b * m1 + m] = 0.0
    for j in range(cnt):
        lv = s + j
        tv = compiled.vector_exp(lng[lv] - beta * e[lv])
        term[b + j] = tv
        q = qs[lv]
        o = (b + j) * m1
        for m in range(m1):
            pre[o + m1 + m] = pre[o + m] + tv
            tv *= q


def _fill_top(tl, row, lv_start, qs, term, suf, cnt, pool_base):
    """The sums from the top V_m of species ``row`` at temperature ``tl`` (on first need)."""
    s = lv_start[row]
    b = tl * pool_base + s + row
    m1 = SERIES_ORDER + 1
    for m in range(m1):
        suf[(b + cnt) * m1 + m] = 0.0
    for j in range(cnt - 1, -1, -1):
        q = qs[s + j]
        o = (b + j) * m1
        if q > 0.0:
            r = 1.0 / q
            tv = term[b + j] * r * r
            for m in range(m1):
                suf[o + m] = suf[o + m1 + m] + tv
                tv *= r
        else:
            for m in range(m1):
                suf[o + m] = suf[o + m1 + m]


def _weighted_u(tl, row, beta, p_, a_, b_, aa, ab, s_lo, s_hi, coef, lv_start, lv_count, e,
                lng, lng_max, qs, term, pre, suf, cnt_t, jpos, filled, pool_base, stride):
    """(U, d ln U / d ln n_e) of species ``row`` at one state.

    A level's weight is w = 1 / (1 + B s + A s^2), s = P q.  For s <= s_lo it is summed as
    its series in s (running sums S_m), for s >= s_hi as its series in 1/s (sums V_m from the
    top), and only the levels in between one by one; with s_lo < 0 every level one by one
    (a temperature of few states, where the running sums would cost more than they save).
    """
    key = tl * stride + row
    series = s_lo >= 0.0
    if filled[key] == 0:
        _fill(tl, row, beta, lv_start, lv_count, e, lng, lng_max, qs, term, pre, cnt_t,
              pool_base, stride, series)
        filled[key] = 1
        jpos[2 * key] = 0
        jpos[2 * key + 1] = 0
    s = lv_start[row]
    cnt = cnt_t[key]
    b = tl * pool_base + s + row
    m1 = SERIES_ORDER + 1
    # the levels with s <= s_lo: [0, j0); with s >= s_hi: [j1, cnt).  Walked from where the
    # previous state of this temperature left them (the states come in density order).
    if not series:
        u = 0.0
        du = 0.0
        for j in range(cnt):
            inv, dlw = _weight(p_ * qs[s + j], a_, b_, aa, ab)
            tv = term[b + j] * inv
            u += tv
            du += tv * dlw
        return u, du / u
    q_lo = s_lo / p_
    q_hi = s_hi / p_
    j0 = jpos[2 * key]
    while j0 < cnt and qs[s + j0] <= q_lo:
        j0 += 1
    while j0 > 0 and qs[s + j0 - 1] > q_lo:
        j0 -= 1
    j1 = max(jpos[2 * key + 1], j0)
    while j1 < cnt and qs[s + j1] < q_hi:
        j1 += 1
    while j1 > j0 and qs[s + j1 - 1] >= q_hi:
        j1 -= 1
    jpos[2 * key] = j0
    jpos[2 * key + 1] = j1
    # the series in q (in s = P q, coefficients of the pass: _series_coefficients), all
    # SERIES_ORDER + 1 terms (each at most a tenth of the last: a fixed-length dot product)
    u = 0.0
    du = 0.0
    if j0 > 0:
        o = (b + j0) * m1
        for m in range(m1):
            u += coef[0, m] * pre[o + m]
            du += coef[1, m] * pre[o + m]
    if j1 < cnt:
        if filled[key] == 1:
            _fill_top(tl, row, lv_start, qs, term, suf, cnt, pool_base)
            filled[key] = 2
        o = (b + j1) * m1
        for m in range(m1):
            u += coef[2, m] * suf[o + m]
            du += coef[3, m] * suf[o + m]
    for j in range(j0, j1):
        inv, dlw = _weight(p_ * qs[s + j], a_, b_, aa, ab)
        tv = term[b + j] * inv
        u += tv
        du += tv * dlw
    return u, du / u


def _series_coefficients(p_, a_, b_, aa, ab, coef):
    """Into ``coef`` the coefficients of the series of the weight w = 1 / (1 + B s + A s^2),
    s = P q, in q (rows 0, 1: t_m and d t_m / d ln n_e; t_0 = 1, t_1 = -bt,
    t_m = -bt t_(m-1) - at t_(m-2), bt = B P, at = A P^2) and in 1/q (rows 2, 3: w =
    e_0 q^-2 + e_1 q^-3 + ..., e_0 = 1 / (A P^2), e_m = -bu e_(m-1) - au e_(m-2),
    bu = B / (A P), au = 1 / (A P^2)); P is proportional to n_e, d A / d ln n_e = aa / 6,
    d B / d ln n_e = ab / 6.  They depend on the state alone: formed once per pass."""
    m1 = coef.shape[1]
    bt = b_ * p_
    at = a_ * p_ * p_
    dbt = (b_ + ab / 6.0) * p_
    dat = (2.0 * a_ + aa / 6.0) * p_ * p_
    coef[0, 0], coef[1, 0] = 1.0, 0.0
    coef[0, 1], coef[1, 1] = -bt, -dbt
    da_a = aa / (6.0 * a_)                   # d ln A / d ln n_e
    au = 1.0 / (a_ * p_ * p_)
    bu = b_ / (a_ * p_)
    dau = -au * (da_a + 2.0)
    dbu = ab / (6.0 * a_ * p_) - bu * (da_a + 1.0)
    coef[2, 0], coef[3, 0] = au, dau
    coef[2, 1], coef[3, 1] = -bu * au, -dbu * au - bu * dau
    for m in range(2, m1):
        coef[0, m] = -bt * coef[0, m - 1] - at * coef[0, m - 2]
        coef[1, m] = (-dbt * coef[0, m - 1] - bt * coef[1, m - 1] - dat * coef[0, m - 2]
                      - at * coef[1, m - 2])
        coef[2, m] = -bu * coef[2, m - 1] - au * coef[2, m - 2]
        coef[3, m] = (-dbu * coef[2, m - 1] - bu * coef[3, m - 1] - dau * coef[2, m - 2]
                      - au * coef[3, m - 2])


def _unweighted(row, p_, a_, b_, lv_start, lv_count, qs, budget):
    """Whether every level of species ``row`` has F = s (A s + B) below ``budget``: then
    0 <= ln U_limit - ln U <= ln(1 + F_top) < budget, the low-density limit's error."""
    sv = p_ * qs[lv_start[row] + lv_count[row] - 1]     # the highest level has the largest s
    return sv * (a_ * sv + b_) < budget


def _series_limits(a_, b_):
    """(s_lo, s_hi): a tenth of the radius of convergence of the series of w in s and ten
    times its counterpart for the series in 1/s, so that SERIES_ORDER terms leave ~1e-13."""
    r_small, r_big = compiled.series_radii(a_, b_)
    return 0.1 * r_small, 10.0 * r_big


def _moments(x, zref, t, tl, ti, density, direct, ctab, ratios, bare, lu_first, xl, xr, ch_off, ch_n,
             ch_frac, ch_lnaz, ch_whole, q_flat, mrow, hm_q, beta, lv_start, lv_count, e, lng,
             lng_max, qs, term, pre, suf, cnt_t, jpos, filled, pool_base, stride,
             scratch_a, scratch_d, coef, wpos, lu_at, d_at, x_at, lag, lag_budget):
    """(Zbar, -dZbar/dx, sum alpha <|q|>, d^2 Zbar/dx^2, -d^3 Zbar/dx^3) at x for one state.

    The derivatives are the chains' cumulants of q: ln sum exp(C_q - q x) is the cumulant
    generating function of -q in x, so d<q>/dx = -kappa_2, d kappa_2/dx = -kappa_3 and
    d kappa_3/dx = -kappa_4 (without ``density``; with it the slope has the covariance with
    d ln U / dx and the higher two are not used).

    ``zref`` is the mean charge the balance needs at x (n_e / N): a stage of element k below
    e^-thr of the element's largest, thr = ln(alpha_k Z_k / zref) + _LN_SHARE, changes Zbar by
    less than e^-39 (1e-17) of it and is left out (the significance intervals bound the
    window first).

    With T-only U (``lag_budget`` > 0) a chain's moments at an earlier x of this temperature
    (``lag``: x, <q>, Var q, kappa_3, <|q|>, kappa_4, charge span of the window, zref)
    serve again, carried along their Taylor series, where the remainder, at most
    alpha span^4 |dx|^3 / 6, stays below ``lag_budget`` times zref: the minor elements are
    summed once per state and temperature, not at every pass.
    """
    zbar = 0.0
    slope = 0.0
    zabs = 0.0
    k3 = 0.0
    k4 = 0.0
    p_ = a_ = b_ = aa = ab = s_lo = s_hi = 0.0
    if density:
        ne = np.exp(x)
        p_, a_, b_ = _state_factors(t, ne)
        aa, ab = _state_slopes(t, ne)
        if direct:
            s_lo, s_hi = -1.0, np.inf     # (no series: every level one by one)
        else:
            s_lo, s_hi = _series_limits(a_, b_)
            _series_coefficients(p_, a_, b_, aa, ab, coef)
    ln_zref = np.log(zref) if zref > 0.0 else -np.inf
    rat = abs(x) < _RATIO_X and ratios.shape[0] > 0
    e_down = np.exp(-x) if rat else 0.0
    zref_cut = zref * np.exp(-_LN_SHARE)
    nch = ch_off.size
    for k in range(ch_off.size):
        if lag_budget > 0.0 and zref > 0.0:
            dx = x - lag[k, 0]
            # (and the stages left out there, below e^-34 of that zref, stay out of reach)
            if abs(dx) < 1.0 and zref >= 0.1 * lag[k, 7]:
                sp4 = lag[k, 6] ** 4
                if ch_frac[k] * sp4 * abs(dx) ** 3 < 6.0 * lag_budget * zref:
                    f = ch_frac[k]
                    zbar += f * (lag[k, 1] - lag[k, 2] * dx + 0.5 * lag[k, 3] * dx * dx)
                    slope += f * (lag[k, 2] - lag[k, 3] * dx)
                    zabs += f * lag[k, 4]
                    k3 += f * lag[k, 3]
                    k4 += f * lag[k, 5]
                    continue
        o = ch_off[k]
        n = ch_n[k]
        if ch_whole[k]:
            lo = 0
            hi = n - 1
        else:
            # the intervals are non-increasing in the stage: the stages with xl > x come first,
            # those with xr < x last; both counts by binary search at a state's first pass,
            # then walked from the last pass (Newton steps rarely move them)
            lo = wpos[2 * k]
            a = wpos[2 * k + 1]
            if lo < 0:
                lo, b = 0, n
                while lo < b:
                    mid = (lo + b) // 2
                    if xl[ti, o + mid] > x:
                        lo = mid + 1
                    else:
                        b = mid
                a, b = 0, n
                while a < b:
                    mid = (a + b) // 2
                    if xr[ti, o + mid] >= x:
                        a = mid + 1
                    else:
                        b = mid
            else:
                while lo > 0 and xl[ti, o + lo - 1] <= x:
                    lo -= 1
                while lo < n and xl[ti, o + lo] > x:
                    lo += 1
                while a > 0 and xr[ti, o + a - 1] < x:
                    a -= 1
                while a < n and xr[ti, o + a] >= x:
                    a += 1
            wpos[2 * k] = lo
            wpos[2 * k + 1] = a
            # and one stage beyond (each end when U depends on n_e, as the numpy engine):
            # in an almost neutral gas the first ion carries the charge however small its
            # share of the element
            hi = min(a, n - 1)
            if density:
                lo = max(lo - 1, 0)
            if hi < lo:
                hi = lo
        s0 = s1 = s2 = s3 = s4 = sd = sqd = sab = 0.0
        by_ratio = rat and ratios[ti, o + n - 1] > 0.0
        if by_ratio:
            # the stages' shares relative to the largest (of the limit tables when U depends
            # on n_e) follow from the ratios of neighbours, e^(C_(r+1) - C_r) e^-x, a product
            # per stage instead of an exponential.  The largest is walked to from this
            # chain's last (ln share is concave in the stage; were it not, a local largest
            # only keeps more stages)
            r = min(max(wpos[2 * nch + k], lo), hi)
            while r < hi and ratios[ti, o + r] * e_down > 1.0:
                r += 1
            while r > lo and ratios[ti, o + r - 1] * e_down < 1.0:
                r -= 1
            wpos[2 * nch + k] = r
        # e^-thr: the shares below it of the largest are left out (thr = ln(alpha Z / zref)
        # + _LN_SHARE, see above; 0 when zref is not known)
        e_thr = zref_cut * ratios[ti, o + n - 1] if by_ratio else np.exp(
            -(ch_lnaz[k] - ln_zref + _LN_SHARE))
        if by_ratio and not density:
            q = q_flat[o + r]
            s0, s1, s2, s3, s4, sab = _add_share(1.0, q, s0, s1, s2, s3, s4, sab)
            p = 1.0
            for rr in range(r + 1, hi + 1):
                p *= ratios[ti, o + rr - 1] * e_down
                if p >= e_thr:
                    s0, s1, s2, s3, s4, sab = _add_share(p, q_flat[o + rr], s0, s1, s2, s3,
                                                         s4, sab)
            p = 1.0
            for rr in range(r - 1, lo - 1, -1):
                p *= 1.0 / (ratios[ti, o + rr] * e_down)   # (the division off p's chain)
                if p >= e_thr:
                    s0, s1, s2, s3, s4, sab = _add_share(p, q_flat[o + rr], s0, s1, s2, s3,
                                                         s4, sab)
        else:
            # the shares p0 of the (limit) tables relative to their largest, into scratch_a
            if by_ratio:
                scratch_a[r] = 1.0
                p = 1.0
                for rr in range(r + 1, hi + 1):
                    p *= ratios[ti, o + rr - 1] * e_down
                    scratch_a[rr] = p
                p = 1.0
                for rr in range(r - 1, lo - 1, -1):
                    p *= 1.0 / (ratios[ti, o + rr] * e_down)
                    scratch_a[rr] = p
            else:
                a0max = -np.inf
                for rr in range(lo, hi + 1):
                    av = ctab[ti, o + rr] - q_flat[o + rr] * x
                    scratch_a[rr] = av
                    if av > a0max:
                        a0max = av
                for rr in range(lo, hi + 1):
                    scratch_a[rr] = np.exp(max(scratch_a[rr] - a0max, -300.0))
            pmax = 0.0
            if density:
                # U depends on n_e: a stage's share is its limit share times U / U_limit
                # (<= 1; C_q of the limit tables is K_q + ln U_q - ln U_first, ``bare`` is
                # K_q), with a weighted U, one carried from an earlier x, or the limit itself;
                # which stages to weigh is judged with the limit shares
                cut0 = e_thr * _EXP_MARGIN
                bud = e_thr * _EXP_BUDGET
                for rr in range(lo, hi + 1):
                    p0 = scratch_a[rr]
                    if p0 < cut0 or p0 == 0.0:
                        scratch_a[rr] = 0.0
                        continue
                    i = o + rr
                    q = q_flat[i]
                    m = mrow[i]
                    d = 0.0
                    wf = 1.0
                    # the limit U serves where its error, at most ln(1 + F_top), times the
                    # stage's share of the charge is below e^-38, under the e^-34 the cut
                    # leaves out (judged with the limit shares, an upper bound); its
                    # d ln U / dx, of the same order as the error, is then left out too
                    budget = max(_NEGLIGIBLE, bud / p0)
                    if m >= 0 and _unweighted(m, p_, a_, b_, lv_start, lv_count, qs, budget):
                        pass
                    elif m >= 0:
                        # an earlier pass's exact U, carried to x along its slope, where the
                        # error in ln U (|d2 ln U / dx2| <= 6 |d|: the weights go as n_e to
                        # n_e^2) stays within the budget
                        dx = x - x_at[i]
                        if abs(dx) < 0.5 and 3.0 * abs(d_at[i]) * dx * dx < budget:
                            d = d_at[i]
                        else:
                            u, d = _weighted_u(tl, m, beta, p_, a_, b_, aa, ab, s_lo, s_hi,
                                               coef, lv_start, lv_count, e, lng, lng_max, qs,
                                               term, pre, suf, cnt_t, jpos, filled,
                                               pool_base, stride)
                            lu_at[i] = u
                            d_at[i] = d
                            x_at[i] = x
                            dx = 0.0
                        wf = lu_at[i] * np.exp(d * dx + bare[ti, i] - ctab[ti, i]
                                               - lu_first[ti, k])
                    elif q < 0.0:      # a negative ion: one bound state with its own weight
                        wf, d = _weight(p_ * hm_q, a_, b_, aa, ab)
                    p = p0 * wf
                    scratch_a[rr] = p
                    scratch_d[rr] = d
                    if p > pmax:
                        pmax = p
            else:
                for rr in range(lo, hi + 1):
                    if scratch_a[rr] > pmax:
                        pmax = scratch_a[rr]
            cut = pmax * e_thr
            for rr in range(lo, hi + 1):
                p = scratch_a[rr]
                if p < cut or p == 0.0:
                    continue
                q = q_flat[o + rr]
                s0, s1, s2, s3, s4, sab = _add_share(p, q, s0, s1, s2, s3, s4, sab)
                if density:
                    d = scratch_d[rr]
                    sd += p * d
                    sqd += p * q * d
        inv = 1.0 / s0
        mq = s1 * inv
        mq2 = s2 * inv
        var = mq2 - mq * mq
        if var < 0.0:
            var = 0.0
        cov = (sqd - mq * sd) * inv
        f = ch_frac[k]
        zbar += f * mq
        slope += f * (var - cov)
        zabs += f * sab * inv
        mq3 = s3 * inv
        kap3 = mq3 - 3.0 * mq * mq2 + 2.0 * mq * mq * mq
        kap4 = (s4 * inv - 4.0 * mq * mq3 + 6.0 * mq * mq * mq2 - 3.0 * mq * mq * mq * mq
                - 3.0 * var * var)
        k3 += f * kap3
        k4 += f * kap4
        if lag_budget > 0.0:
            lag[k, 0] = x
            lag[k, 1] = mq
            lag[k, 2] = var
            lag[k, 3] = kap3
            lag[k, 4] = sab * inv
            lag[k, 5] = kap4
            lag[k, 6] = q_flat[o + hi] - q_flat[o + lo]
            lag[k, 7] = zref
    return zbar, slope, zabs, k3, k4


def _newton(i, x, lo, hi, kind, nref, tol, max_passes, final_step, t, tl, ti, density, direct,
            ctab,
            ratios,
            bare, lu_first, xl, xr, ch_off, ch_n, ch_frac, ch_lnaz, ch_whole, q_flat, mrow,
            hm_q, beta, lv_start, lv_count, e, lng, lng_max, qs, term, pre, suf, cnt_t,
            jpos, filled,
            pool_base, stride, scratch_a, scratch_d, coef, wpos, lu_at, d_at, x_at, lag, out_x,
            out_nuc, out_passes, out_resid, out_done):
    """Safeguarded Newton for state ``i`` from x (see _ChunkSolver.run, the same rules)."""
    prev = np.inf
    lag_budget = -1.0 if density else _LAG_SHARE * tol
    for _ in range(max_passes):
        ne = np.exp(x)
        zref = 0.0         # the mean charge the balance needs here (0: not known)
        if kind == FIXED_NUCLEI:
            zref = ne / nref
        elif kind == FIXED_PARTICLES and nref > ne:
            zref = ne / (nref - ne)
        zbar, var, zabs, k3, k4 = _moments(x, zref, t, tl, ti, density, direct, ctab, ratios,
                                           bare,
                                           lu_first,
                                           xl, xr, ch_off, ch_n, ch_frac, ch_lnaz, ch_whole,
                                           q_flat, mrow, hm_q, beta, lv_start, lv_count, e, lng,
                                           lng_max, qs, term, pre, suf, cnt_t, jpos, filled,
                                           pool_base, stride, scratch_a, scratch_d, coef,
                                           wpos, lu_at, d_at, x_at, lag, lag_budget)
        out_passes[i] += 1
        if kind == FIXED_ELECTRONS:     # n_e is given: one evaluation decides
            out_x[i] = x
            if zbar > 0.0:
                nn = ne / zbar
                out_nuc[i] = nn
                out_resid[i] = 0.0
                out_done[i] = nn > 0.0 and np.isfinite(nn)
            else:
                out_resid[i] = np.inf
            return np.nan
        nn = nref if kind == FIXED_NUCLEI else nref - ne
        rel = abs(nn * zbar - ne) / (nn * zabs + ne)
        ok = rel <= tol
        # stalled at machine precision inside a collapsed bracket: accept if still good
        if (hi - lo) <= 8e-16 * max(1.0, abs(x)) and rel <= 1e-10:
            ok = True
        out_x[i] = x
        out_resid[i] = rel
        valid = nn > 0.0 and zbar > 0.0
        u = ne / nn if kind == FIXED_PARTICLES else 0.0
        dg = -var / zbar - 1.0 - u
        if ok:
            out_done[i] = True
            out_nuc[i] = nn
            return -dg * nn / nref if valid else np.nan
        g = np.log(nn * zbar) - x if valid else -np.inf
        xn = x - g / dg
        # Chebyshev's third-order step where U depends on T alone (the cumulants give the
        # second and third derivatives of g); it is the last one when its predicted error is
        # well inside the tolerance
        third = -1.0
        g2 = 0.0
        if valid and not density:
            dx3, err3, rel_corr, g2 = _third_order_step(g, dg, zbar, var, k3, k4, u)
            if abs(rel_corr) <= 0.1:
                xn = x + dx3
                # the residual is at most |g| ~ |g'| |error|
                third = _THIRD_MARGIN * abs(dg) * err3
        if nn > 0.0 and not valid:
            # Zbar <= 0 (negative ions outweigh the positive ones): Newton on N Zbar / n_e - 1
            f_lin = nn * zbar / ne - 1.0
            df_lin = -(nn / ne) * (var + zbar)
            if kind == FIXED_PARTICLES:
                df_lin -= zbar
            xn = x - f_lin / df_lin
        if g > 0.0:
            lo = max(lo, x)
        if g < 0.0:
            hi = min(hi, x)
        outside = not (nn > 0.0) or not np.isfinite(xn) or not (xn > lo) or not (xn < hi)
        if np.isfinite(lo) and abs(xn - x) > 0.5 * prev:
            outside = True     # too slow a decrease (Newton cycling): bisect, as rtsafe
        if outside:
            xn = 0.5 * (lo + hi) if np.isfinite(lo) else hi - _MAX_STEP
        if not np.isfinite(lo):
            xn = max(xn, x - _MAX_STEP)
        step = abs(xn - x)
        prev = step
        x_was = x
        x = xn
        last = 0.0 <= third <= tol and step <= _THIRD_MAX_STEP
        if final_step > 0.0 and not outside and (step <= final_step or last) and (
                kind != FIXED_PARTICLES or nref > np.exp(xn)):
            out_done[i] = True
            out_x[i] = xn
            nn = nref if kind == FIXED_NUCLEI else nref - np.exp(xn)
            out_nuc[i] = nn
            out_resid[i] = third if last else max(rel * step, step * step)
            if last:    # g' carried to the new x
                dg += g2 * (xn - x_was)
            return -dg * nn / nref
    return np.nan


def _third_order_step(g, dg, zbar, var, k3, k4, u):
    """Chebyshev's step for g(x) = ln(nn Zbar) - x from g, g' and the moments of
    :func:`_moments` (Zbar' = -var, Zbar'' = k3, Zbar''' = -k4; u = n_e / nn where
    nn = nref - n_e, else 0): (step, predicted error, c2 s, g'').

    With s = g / g' and c_k = g^(k) / (k! g') the step is -s - c2 s^2 and its error
    (2 c2^2 - c3) e^3 (e the error before it), taken as (2 c2^2 + |c3|) |s|^3."""
    l1 = -var / zbar
    l2 = k3 / zbar - l1 * l1
    l3 = -k4 / zbar - 3.0 * l1 * k3 / zbar + 2.0 * l1 * l1 * l1
    w = u + u * u                # ln(nref - e^x): -u, -(u + u^2), -(u + u^2)(1 + 2u)
    g2 = l2 - w
    g3 = l3 - w * (1.0 + 2.0 * u)
    sn = g / dg
    c2 = g2 / (2.0 * dg)
    c3 = g3 / (6.0 * dg)
    err = (2.0 * c2 * c2 + abs(c3)) * abs(sn) ** 3
    return -sn - c2 * sn * sn, err, c2 * sn, g2


def _intervals(charges, tab, thr, reach, clip, xl, xr):
    """:func:`sahaboltz.equilibrium.atomic._significance_intervals` as loops over a finite
    table (the same operations in the same order, so the same values), temperatures
    innermost; into ``xl``/``xr`` of the table's shape (n_stages, n_T)."""
    n, nt = tab.shape
    for r in range(n):
        for t in range(nt):
            xl[r, t] = -clip
            xr[r, t] = clip
    for d in range(1, min(reach, n - 1) + 1):
        for r in range(n - d):
            dq = charges[r + d] - charges[r]
            off = thr / dq
            for t in range(nt):
                slope = (tab[r + d, t] - tab[r, t]) / dq     # secant slope of r and r + d
                lo = slope - off
                if lo > xl[r, t]:
                    xl[r, t] = lo
                hi = slope + off
                if hi < xr[r + d, t]:
                    xr[r + d, t] = hi
    for r in range(n):       # clipped, then the monotone envelopes
        for t in range(nt):
            v = min(max(xl[r, t], -clip), clip)
            xl[r, t] = v if r == 0 or v < xl[r - 1, t] else xl[r - 1, t]
    for r in range(n - 1, -1, -1):
        for t in range(nt):
            v = min(max(xr[r, t], -clip), clip)
            xr[r, t] = v if r == n - 1 or v > xr[r + 1, t] else xr[r + 1, t]


def significance_intervals(charges, tab, thr, reach, clip):
    """(xl, xr), each (n_T, n_stages): the compiled :func:`_intervals` (a finite ``tab``)."""
    xl = np.empty(tab.shape)
    xr = np.empty(tab.shape)
    _intervals_jit(np.ascontiguousarray(charges, dtype=float),
                   np.ascontiguousarray(tab, dtype=float), float(thr), int(reach), float(clip),
                   xl, xr)
    return xl.T.copy(), xr.T.copy()


def _interval_bounds(xl, xr, tinv, x, lo, hi):
    """Per state j the stages whose significance interval [xl_r, xr_r] at its temperature
    holds x_j: both ends are non-increasing in r, so they are the stages from the first with
    xl_r <= x_j to the last with xr_r >= x_j (two binary searches)."""
    n = xl.shape[1]
    for j in range(x.size):
        a, b = xl[tinv[j]], xr[tinv[j]]
        i0, i1 = 0, n
        while i0 < i1:                     # first r with xl_r <= x
            mid = (i0 + i1) // 2
            if a[mid] <= x[j]:
                i1 = mid
            else:
                i0 = mid + 1
        k0, k1 = 0, n
        while k0 < k1:                     # number of r with xr_r >= x
            mid = (k0 + k1) // 2
            if b[mid] >= x[j]:
                k0 = mid + 1
            else:
                k1 = mid
        if k0 - 1 < i0:
            lo[j] = 0
            hi[j] = n - 1
        else:
            lo[j] = i0
            hi[j] = k0 - 1


def interval_bounds(xl, xr, tinv, x):
    """Compiled :func:`_interval_bounds` for intervals (temperatures x stages): (lo, hi)."""
    lo, hi = np.empty(x.size, dtype=np.int64), np.empty(x.size, dtype=np.int64)
    _interval_bounds_jit(np.ascontiguousarray(xl, dtype=float),
                         np.ascontiguousarray(xr, dtype=float),
                         np.ascontiguousarray(tinv, dtype=np.int64),
                         np.ascontiguousarray(x, dtype=float), lo, hi)
    return lo, hi


def interval_windows(charges, tab, tinv, x, thr):
    """(lo, hi) per state: the stages whose significance interval at its temperature (within
    e^-thr of the largest, :func:`significance_intervals`, supersets) holds its x = ln n_e;
    ``tab`` stages x distinct temperatures, ``tinv`` each state's.  None where intervals
    would cost more than a pass over the stages (~n INTERVAL_REACH per temperature against
    2 n per state) or the table is not finite."""
    n = charges.size
    if tinv.size < 2 * tab.shape[1] * min(INTERVAL_REACH, n) or not np.isfinite(tab).all():
        return None
    xl, xr = significance_intervals(charges, tab, thr, INTERVAL_REACH, X_CLIP)
    return interval_bounds(xl, xr, tinv, x)


def _transpose_into(a, out):
    """out[j, i] = a[i, j] in 32 x 32 tiles: a (stages x temperatures) table turned into
    the per-temperature rows the solve reads, ten times faster than numpy's strided copy of
    a large table (which misses the cache on every read)."""
    n, m = a.shape
    for i0 in range(0, n, 32):
        i1 = min(i0 + 32, n)
        for j0 in range(0, m, 32):
            j1 = min(j0 + 32, m)
            for i in range(i0, i1):
                for j in range(j0, j1):
                    out[j, i] = a[i, j]


def _per_temperature(tables) -> np.ndarray:
    """The chains' (n_stages, n_T) tables as one (n_T, all stages) C-ordered array."""
    cat = np.concatenate(tables, axis=0)
    out = np.empty((cat.shape[1], cat.shape[0]))
    _transpose_into_jit(cat, out)
    return out


def _neighbour_ratios(ctab, sizes, ln_az) -> np.ndarray:
    """(n_T, stages): e^(C_(r+1) - C_r) per chain and temperature of the per-temperature
    tables ``ctab`` (clipped at e^+-_RATIO_CLIP).  The slot of a chain's last stage holds
    1 / (alpha Z) of the chain (``ln_az`` = ln(alpha Z)), or NaN where the chain's C is not
    finite at that temperature (the shares are then taken by exponentials)."""
    d = np.zeros(ctab.shape)
    with np.errstate(invalid="ignore"):
        d[:, :-1] = np.clip(ctab[:, 1:] - ctab[:, :-1], -_RATIO_CLIP, _RATIO_CLIP)
    out = np.exp(d, out=d)
    start = 0
    for n, laz in zip(sizes, ln_az):
        bad = ~np.isfinite(ctab[:, start:start + n]).all(axis=1)
        out[:, start + n - 1] = np.where(bad, np.nan, np.exp(-laz))
        start += n
    return out


def _add_share(p, q, s0, s1, s2, s3, s4, sab):
    """The sums of _moments with a stage of share p and charge q added."""
    pq = p * q
    pq2 = pq * q
    pq3 = pq2 * q
    return s0 + p, s1 + pq, s2 + pq2, s3 + pq3, s4 + pq3 * q, sab + abs(pq)


def _push(ys, xs, y, x):
    """Add the newest solved state (y, x) to a row's last three."""
    ys[2], xs[2] = ys[1], xs[1]
    ys[1], xs[1] = ys[0], xs[0]
    ys[0], xs[0] = y, x


def _extrapolated(y, ys, xs):
    """x at y from the last solved states of a row (``ys``, ``xs``, newest first; NaN where
    none): quadratic through three, linear through two, within 2 units of ln nref of the
    newest; NaN otherwise (the caller keeps its own start)."""
    if not (np.isfinite(ys[0]) and np.isfinite(ys[1])) or abs(y - ys[0]) > 2.0:
        return np.nan
    d01 = ys[0] - ys[1]
    if abs(d01) < 1e-9:
        return np.nan
    s01 = (xs[0] - xs[1]) / d01
    xg = xs[0] + s01 * (y - ys[0])
    if np.isfinite(ys[2]):
        d12 = ys[1] - ys[2]
        d02 = ys[0] - ys[2]
        if abs(d12) > 1e-9 and abs(d02) > 1e-9:
            s12 = (xs[1] - xs[2]) / d12
            xg += (s01 - s12) / d02 * (y - ys[0]) * (y - ys[1])
    return xg


def _solve_states(order, tpos, t_share, t_u, kind, nref, x0, x_warm, x_hi, tol, start_tol, max_passes,
                  final_step, density, ctab, ratios, bare, lu_first, xl, xr, ch_off, ch_n, ch_frac,
                  ch_lnaz, ch_whole, q_flat, mrow, hm_q, lv_start, lv_count, e, lng, lng_max, qs,
                  term, pre, suf, cnt_t, jpos, filled, n_group, out_x, out_nuc,
                  out_passes, out_resid,
                  out_done):
    """Solve the states ``order`` (sorted by temperature); ``tpos`` their temperature index.

    With ``density``, each state first converges with the low-density-limit tables ``ctab``
    to ``start_tol`` and then with the occupation-weighted sums (``bare`` the T-only part of
    C), accepting after a final step below ``final_step``.  The level tables (``term``,
    ``pre``, ``suf``) hold ``n_group`` consecutive temperatures at a time.  ``x_warm``: a
    start near each state's solution where the caller knows one (NaN elsewhere): the Newton
    (with ``density`` the weighted one) starts there, as from a row's extrapolation.
    ``t_share``: the number of states of each temperature (those of fewer than _SHARED sum
    their weighted U level by level).
    """
    stride = lv_start.size
    pool_base = e.size + stride
    nstage = q_flat.size
    scratch_a = np.empty(nstage)
    scratch_d = np.empty(nstage)
    coef = np.empty((4, SERIES_ORDER + 1))    # a pass's coefficients of the weights' series
    # per chain its window's two ends and (T-only U) its largest stage, walked from the last
    wpos = np.empty(3 * ch_off.size, dtype=np.int64)
    # per stage, the last exact weighted U at this temperature, d ln U / dx and the x of it
    lu_at = np.zeros(nstage)
    d_at = np.zeros(nstage)
    x_at = np.full(nstage, np.inf)
    last_ti = -1
    # per chain, its moments at the last x where they were summed (T-only U, this T)
    lag = np.empty((ch_off.size, 8))
    lag[:, 0] = np.inf
    # the last three solved states at the current temperature (ln nref, ideal-phase x): the
    # next state's start is extrapolated from them along the row of a grid
    ys = np.full(3, np.nan)
    xs = np.full(3, np.nan)
    ysd = np.full(3, np.nan)     # the same of the weighted solutions
    xsd = np.full(3, np.nan)
    row_ti = -1
    shift = np.nan
    group = -1
    t_first = tpos[order[0]] if order.size else 0
    for j in range(order.size):
        i = order[j]
        ti = tpos[i]
        t = t_u[ti]
        beta = 1.0 / (_K_B_EV * t)
        tl = 0
        direct = t_share[ti] < _SHARED
        if density:
            g = (ti - t_first) // n_group
            if g != group:
                group = g
                filled[:] = 0
            tl = (ti - t_first) - g * n_group
        lo = -np.inf
        hi = x_hi[i]
        x = hi if kind == FIXED_ELECTRONS else min(x0[i], hi - 1e-9)
        y = np.log(nref[i]) if kind != FIXED_ELECTRONS else 0.0
        if ti != row_ti:
            ys[:] = np.nan
            ysd[:] = np.nan
            shift = np.nan
            row_ti = ti
            lag[:, 0] = np.inf
            wpos[:] = -1      # (along a row each chain's window is walked from the last)
        elif kind != FIXED_ELECTRONS:
            xg = _extrapolated(y, ys, xs)
            if np.isfinite(xg):
                x = min(xg, hi - 1e-9)
        warm = kind != FIXED_ELECTRONS and np.isfinite(x_warm[i])
        if warm and not density:
            x = min(x_warm[i], hi - 1e-9)
        out_passes[i] = 0
        out_done[i] = False
        out_nuc[i] = np.nan
        if density and kind != FIXED_ELECTRONS and (warm or (ti == row_ti
                                                             and np.isfinite(ysd[2]))):
            # the caller's start, or three weighted solutions of this row (their
            # extrapolation): the weighted Newton starts there directly, closer than the
            # low-density-limit solve would
            xg = x_warm[i] if warm else _extrapolated(y, ysd, xsd)
            if np.isfinite(xg):
                if ti != last_ti:
                    x_at[:] = np.inf
                    last_ti = ti
                _newton(i, min(xg, hi - 1e-9), lo, hi, kind, nref[i], tol, max_passes,
                        final_step, t, tl, ti, True, direct, ctab, ratios, bare, lu_first, xl, xr, ch_off,
                        ch_n, ch_frac, ch_lnaz, ch_whole, q_flat, mrow, hm_q, beta, lv_start,
                        lv_count, e, lng, lng_max, qs, term, pre, suf, cnt_t, jpos, filled,
                        pool_base, stride, scratch_a, scratch_d, coef, wpos, lu_at, d_at, x_at, lag,
                        out_x, out_nuc, out_passes, out_resid, out_done)
                if out_done[i]:
                    _push(ysd, xsd, y, out_x[i])
                    continue
                out_passes[i] = 0   # not solved from there: the full sequence below
                out_done[i] = False
                out_nuc[i] = np.nan
                wpos[:] = -1
        first_tol = start_tol if density else tol
        first_step = 0.0 if density else final_step
        _newton(i, x, lo, hi, kind, nref[i], first_tol, max_passes, first_step, t, tl, ti, False,
                False,
                ctab, ratios, ctab, lu_first, xl, xr, ch_off, ch_n, ch_frac, ch_lnaz, ch_whole,
                q_flat,
                mrow, hm_q, beta, lv_start, lv_count, e, lng, lng_max, qs, term, pre, suf,
                cnt_t, jpos,
                filled, pool_base, stride, scratch_a, scratch_d, coef, wpos, lu_at, d_at, x_at, lag,
                out_x, out_nuc, out_passes, out_resid, out_done)
        if out_done[i] and kind != FIXED_ELECTRONS:
            _push(ys, xs, y, out_x[i])
        if not density:
            continue
        x = out_x[i]
        x_ideal = x
        if not np.isfinite(x):
            x = hi - 1.0
        elif np.isfinite(shift):
            x += shift    # the previous state's density correction (same temperature)
        x = hi if kind == FIXED_ELECTRONS else min(x, hi - 1e-9)
        start_passes = out_passes[i]
        if ti != last_ti:   # U depends on (T, n_e) alone: the saved values serve one T
            x_at[:] = np.inf
            last_ti = ti
        out_passes[i] = 0
        out_done[i] = False
        out_nuc[i] = np.nan
        _newton(i, x, lo, hi, kind, nref[i], tol, max_passes, final_step, t, tl, ti, True, direct,
                ctab, ratios, bare, lu_first, xl, xr, ch_off, ch_n, ch_frac, ch_lnaz, ch_whole,
                q_flat,
                mrow, hm_q, beta, lv_start, lv_count, e, lng, lng_max, qs, term, pre, suf,
                cnt_t, jpos,
                filled, pool_base, stride, scratch_a, scratch_d, coef, wpos, lu_at, d_at, x_at, lag,
                out_x, out_nuc, out_passes, out_resid, out_done)
        out_passes[i] += start_passes
        shift = out_x[i] - x_ideal if out_done[i] and np.isfinite(x_ideal) else np.nan
        if out_done[i] and kind != FIXED_ELECTRONS:
            _push(ysd, xsd, y, out_x[i])


if numba is not None:  # pragma: no branch
    _jit = numba.njit(cache=True, nogil=True, error_model="numpy")
    # the functions called per state, pass and stage allocate nothing: compiled without the
    # runtime's reference counts (see kernels.compiled.borrowing_jit)
    _inner = compiled.borrowing_jit(cache=True, nogil=True, error_model="numpy")
    # the level sums may be reordered (vectorized): no NaN or inf arises in them
    _sums = compiled.borrowing_jit(cache=True, nogil=True, error_model="numpy",
                                   fastmath={"reassoc", "contract", "arcp", "nsz"})
    _state_factors = _inner(stark_state_factors)
    _state_slopes = _inner(stark_state_slopes)
    _weight = _sums(_weight)
    _fill = _sums(_fill)
    _fill_top = _sums(_fill_top)
    _series_limits = _inner(_series_limits)
    _series_coefficients = _inner(_series_coefficients)
    _add_share = numba.njit(cache=True, nogil=True, inline="always")(_add_share)
    _third_order_step = _inner(_third_order_step)
    _extrapolated = _inner(_extrapolated)
    _push = _inner(_push)
    _transpose_into_jit = _jit(_transpose_into)
    _intervals_jit = _jit(_intervals)
    _interval_bounds_jit = _jit(_interval_bounds)
    _unweighted = _inner(_unweighted)
    _weighted_u = _sums(_weighted_u)
    _moments = _inner(_moments)
    _newton = _inner(_newton)
    _solve_states_jit = _jit(_solve_states)


class CompiledSolver:
    """The compiled charge-balance solve over the unique temperatures ``ut`` of a grid.

    ``c_unique``: per chain C at ``ut`` (shape (n_stages, n_T)), or, with ``bare`` given, its
    low-density limit; ``intervals`` the chains' significance intervals from those tables;
    ``bare``: per chain the T-only part of C when U depends on n_e (occupation
    probabilities, charged perturbers), else None; ``lu_first``: then per chain the
    low-density-limit ln U of its first stage at ``ut``.
    """

    def __init__(self, network, ut, c_unique, intervals, bare=None, lu_first=None):
        chains = network.chains
        self.t_u = np.ascontiguousarray(ut, dtype=float)
        self.ctab = _per_temperature(c_unique)
        self.xl = np.ascontiguousarray(np.concatenate([iv[0] for iv in intervals], axis=1))
        self.xr = np.ascontiguousarray(np.concatenate([iv[1] for iv in intervals], axis=1))
        n = np.array([c.n for c in chains], dtype=np.int64)
        frac = np.array([c.fraction for c in chains])
        top = np.array([max(abs(c.charges[0]), c.charges[-1]) for c in chains])
        self.chains = (np.concatenate([[0], np.cumsum(n)[:-1]]).astype(np.int64), n, frac,
                       np.log(frac * top), n <= WHOLE_CHAIN)
        self.ratios = _neighbour_ratios(self.ctab, n, self.chains[3])
        self.q_flat = np.concatenate([c.charges for c in chains]).astype(float)
        self.density = bare is not None
        model = network.model
        if self.density and model is not None:
            self.mrow = np.concatenate([np.where(c.model_rows >= 0,
                                                 c.model_rows + c.model_offset, -1)
                                        for c in chains]).astype(np.int64)
            self.bare = _per_temperature(bare)
            self.lu_first = np.ascontiguousarray(np.stack(lu_first, axis=1))
            self.levels = (model._starts.astype(np.int64), model._counts.astype(np.int64),
                           model._e, model._lng, model._lng_max, model._q_stark)
        else:
            self.mrow = np.full(self.q_flat.size, -1, dtype=np.int64)
            self.bare = self.ctab
            self.lu_first = np.zeros((1, len(chains)))
            one = np.zeros(1)
            self.levels = (np.zeros(1, dtype=np.int64), np.zeros(1, dtype=np.int64),
                           one, one, one, one)
        # the H- bound state as a hydrogenic level of its binding energy (as the scheme does)
        self.hm_q = float(stark_level_factor(np.sqrt(RYDBERG_EV / H_MINUS_AFFINITY_EV), 1.0))
        # level tables for this many temperatures at once (about 50 MB), kept between calls
        rows = self.levels[0].size
        base = self.levels[2].size + rows
        m1 = SERIES_ORDER + 1
        self.n_group = max(1, (6 << 20) // (base * (2 * m1 + 1))) if self.density else 0
        g = self.n_group
        self.pool = (np.empty(g * base), np.empty(g * base * m1), np.empty(g * base * m1),
                     np.zeros(g * rows, dtype=np.int64), np.zeros(2 * g * rows, dtype=np.int64),
                     np.zeros(g * rows, dtype=np.int8))

    def run(self, tpos, kind, nref, x0, x_hi, tol, start_tol, max_passes, final_step,
            x_warm=None):
        """(x, nuc, passes, resid, done) of the states with temperature indices ``tpos``;
        ``x_warm``: known starts near the solutions (NaN where none)."""
        n = tpos.size
        tpos = np.ascontiguousarray(tpos, dtype=np.int64)
        order = np.argsort(tpos, kind="stable").astype(np.int64)
        out_x, out_nuc, out_resid = np.empty(n), np.full(n, np.nan), np.full(n, np.inf)
        out_passes = np.zeros(n, dtype=np.int64)
        out_done = np.zeros(n, dtype=np.bool_)
        f64 = np.ascontiguousarray
        _solve_states_jit(order, tpos, np.bincount(tpos, minlength=self.t_u.size), self.t_u, int(kind), f64(nref, dtype=float),
                          f64(x0, dtype=float),
                          np.full(n, np.nan) if x_warm is None else f64(x_warm, dtype=float),
                          f64(x_hi, dtype=float), float(tol),
                          float(start_tol), int(max_passes), float(final_step), self.density,
                          self.ctab, self.ratios, self.bare, self.lu_first, self.xl, self.xr,
                          *self.chains,
                          self.q_flat,
                          self.mrow, self.hm_q, *self.levels, *self.pool, max(self.n_group, 1),
                          out_x, out_nuc, out_passes, out_resid, out_done)
        return out_x, out_nuc, out_passes, out_resid, out_done


#: chains this short are always taken whole (as the numpy windows do; H with H- needs it)
WHOLE_CHAIN = 4
