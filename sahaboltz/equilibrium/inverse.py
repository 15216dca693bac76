"""States fixed by a thermodynamic quantity instead of the temperature.

The closures of :data:`~sahaboltz.equilibrium.closures.THERMAL_CLOSURES`, (mass density,
specific internal energy) and (gas pressure, specific entropy), give no temperature: we solve
y(T; partner) = y* for T with a safeguarded Newton method in ln T, every state at once.  Each
pass is one forward solve of the active states (:mod:`~sahaboltz.equilibrium.solver`) and its
thermodynamics; the slope d y / d ln T is exact (c_v T at fixed rho, c_p T at fixed P; both
positive, so y rises monotonically with T and the root is unique).

Start: where the states share few partner values (a table axis), y and its exact slope are
first evaluated on a 65-point ln T grid for each distinct value (only 65 distinct
temperatures, so cheap); the grid brackets each root and the cubic Hermite interpolant of
(y, dy/d ln T) gives a first start.  Otherwise that start comes from such a table on 8-32
partner values spanning theirs, interpolated in ln(partner).  Either start is then refined
on the Hermite interpolant of degree 7 through the four nodes around it on a 16x finer ln T
grid (nodes shared by the states, so again few temperatures), which brings most starts within
the tolerance: the first pass at them is the last.  Every state keeps a bracket [lo, hi] in
ln T (the range, narrowed by the signs seen), and a step that would leave it bisects; the
last Newton step, below 3e-7 in ln T, is taken without evaluating again (its error is of the
order of its square).  A state whose value lies outside what the range of temperatures gives
is reported with that range and the nearest value reached.

The result is put together from the passes (:mod:`~sahaboltz.equilibrium.state_pieces`):
a state whose temperature did not move after its last pass is that pass's state (solved there
to the forward solve's tolerance, as a solve of its own would be); only the states moved by an
unevaluated last step are solved once more.  The thermodynamics the passes
computed stay with the result.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from sahaboltz.equilibrium.closures import ThermalClosure
from sahaboltz.equilibrium.state_pieces import splice

__all__ = ["solve_thermal", "DEFAULT_TEMPERATURE_RANGE"]

#: temperatures searched by default [K] (with molecules the lower end is the molecular
#: solver's lowest temperature)
DEFAULT_TEMPERATURE_RANGE = (1000.0, 1.0e8)
# relative tolerance: |y - y*| <= tol (|y*| + |dy/dlnT|), tol the forward solve's (its
# states, and so y, are known no better), but not below _TOL_FLOOR (the sums' rounding)
_TOL = 1e-12
_TOL_FLOOR = 1e-13
# a Newton step below this in ln T is the last one (its own error is of order its square)
_LAST_STEP = 3e-7
_MAX_PASSES = 60
# grid points of the start table, and when it pays (states per distinct partner value)
_GRID = 65
# the start is then refined on a grid this many times finer, on this many nodes per state
_REFINE = 16
_NODES = 4
# partner values of the coarse start table when they are many (at least; up to 4x with more
# states, half as many grid states as states)
_COARSE = 8


def solve_thermal(forward: Callable, closure: ThermalClosure, target: np.ndarray,
                  partner: np.ndarray, t_range: tuple[float, float], tol: float = _TOL):
    """The states (flat arrays ``target`` of ``closure``, ``partner`` of its partner closure).

    ``forward(t, v[, x])`` solves flat states at temperatures ``t`` with partner values ``v``
    (``x``: ln n_e near each solution where known, NaN elsewhere, a hint) and returns the
    result with ``errors="mask"``.  Returns (T, status, reason) per state
    (status 0 where a temperature in ``t_range`` matches, else 3 with the reason) and the
    flat result at those temperatures.
    """
    m = target.size
    tol = max(float(tol), _TOL_FLOOR)
    log_lo, log_hi = np.log(t_range[0]), np.log(t_range[1])
    lo = np.full(m, log_lo)
    hi = np.full(m, log_hi)
    tau = np.full(m, 0.5 * (log_lo + log_hi))
    status = np.zeros(m, dtype=np.int8)
    reason = np.full(m, "", dtype=object)
    done = np.zeros(m, dtype=bool)
    reached = np.full(m, np.nan)                  # last value seen, for the messages
    uv, vinv = np.unique(partner, return_inverse=True)
    if uv.size <= max(1, m // 4):
        table = _grid_values(forward, closure, uv, log_lo, log_hi)
        tau, lo, hi, outside = _start_table(table, target, vinv, log_lo, log_hi, tol)
        _out_of_range(closure, target, partner, outside, t_range, status, reason, done)
        x_start = _refine_start(forward, closure, uv, vinv, target, tau, done, log_lo, log_hi)
    else:
        # many distinct partner values: a table on a coarse grid of them, its y and slopes
        # interpolated in ln(partner) to each state's partner value (y is close to linear
        # in it: exactly so for an ideal gas of fixed composition), then the start as above
        # (a start only: the brackets stay the whole range)
        lv = np.log(partner)
        nc = int(np.clip(m // (2 * _GRID), _COARSE, 4 * _COARSE))
        grid_v = np.exp(np.linspace(lv.min(), lv.max(), nc))
        pos = np.interp(lv, np.log(grid_v), np.arange(nc))
        i0 = np.minimum(np.floor(pos).astype(int), nc - 2)
        w = (pos - i0)[:, None]
        y, dy = _grid_values(forward, closure, grid_v, log_lo, log_hi)
        own = ((1.0 - w) * y[i0] + w * y[i0 + 1], (1.0 - w) * dy[i0] + w * dy[i0 + 1])
        tau = _start_table(own, target, np.arange(m), log_lo, log_hi, tol)[0]
        x_start = _refine_start(forward, closure, uv, vinv, target, tau, done, log_lo, log_hi)
    # every pass's state is kept: where a state's temperature is not moved after its pass,
    # that pass's state is its result (the first pass evaluates every state, so that its
    # state can hold the rest)
    pieces = []
    ev_pass = np.zeros(m, dtype=np.intp)
    ev_pos = np.arange(m)
    ev_tau = np.full(m, np.nan)
    active = np.flatnonzero(~done)
    for k in range(_MAX_PASSES):
        if not active.size and k:
            break
        evaluated = np.arange(m) if k == 0 else active
        st = forward(np.exp(tau[evaluated]), partner[evaluated], x_start[evaluated])
        th = st.thermodynamics()
        pieces.append(st)
        x_start[evaluated] = st.log_ne.ravel()       # the next pass's starts
        ev_pass[evaluated] = k
        ev_pos[evaluated] = np.arange(evaluated.size)
        ev_tau[evaluated] = tau[evaluated]
        at = np.flatnonzero(~done[evaluated])
        y = th.get(closure.name).ravel()[at]
        slope = getattr(th, closure.slope).ravel()[at]
        ok = st.converged.ravel()[at] & np.isfinite(y) & np.isfinite(slope) & (slope > 0)
        f = y - target[active]
        reached[active] = y
        conv = ok & (np.abs(f) <= tol * (np.abs(target[active]) + slope))
        done[active[conv]] = True
        # the bracket from the signs seen
        neg = ok & (f < 0)
        pos = ok & (f > 0)
        lo[active[neg]] = tau[active[neg]]
        hi[active[pos]] = tau[active[pos]]
        # no root in range: the value at an end of the range is already on the far side
        edge = ok & ~conv & (((tau[active] <= log_lo) & pos) | ((tau[active] >= log_hi) & neg))
        fail = ~ok & ~conv
        for i in active[fail]:
            status[i] = 3
            reason[i] = (f"the forward solve failed at T = {np.exp(tau[i]):.6g} K on the way "
                         f"to {closure.name} = {target[i]:.6g} {closure.unit}")
            done[i] = True
        if edge.any():
            _out_of_range(closure, target, partner, active[edge], t_range, status, reason, done,
                          reached)
        go = ok & ~conv & ~edge
        a = active[go]
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = tau[a] - f[go] / slope[go]
        inside = np.isfinite(newton) & (newton > lo[a]) & (newton < hi[a])
        # a step beyond an end of the range goes to that end first (then the test above)
        to_lo = ~inside & np.isfinite(newton) & (newton <= lo[a]) & (lo[a] <= log_lo)
        to_hi = ~inside & np.isfinite(newton) & (newton >= hi[a]) & (hi[a] >= log_hi)
        nxt = np.where(inside, newton, 0.5 * (lo[a] + hi[a]))
        nxt = np.where(to_lo, log_lo, np.where(to_hi, log_hi, nxt))
        last = inside & (np.abs(newton - tau[a]) <= _LAST_STEP)
        tau[a] = nxt
        done[a[last]] = True
        # a collapsed bracket without a root at double precision: accept (the value is then
        # as close as T can make it)
        tight = (hi[a] - lo[a]) <= 1e-15 * np.abs(tau[a])
        done[a[tight & ~last]] = True
        active = np.flatnonzero(~done)
    for i in np.flatnonzero(~done):
        status[i] = 3
        reason[i] = (f"no convergence in {_MAX_PASSES} passes for {closure.name} = "
                     f"{target[i]:.6g} {closure.unit}")
    return np.exp(tau), status, reason, _assembled(forward, pieces, ev_pass, ev_pos,
                                                   ev_tau, tau, partner, x_start)


def _assembled(forward, pieces, ev_pass, ev_pos, ev_tau, tau, partner, x_start):
    """The flat result at the temperatures ``tau``: the first pass's state, with the states
    of later passes where they were evaluated last at their final temperature, and a forward
    solve of the rest (the states whose last step was taken without evaluating again)."""
    base = pieces[0]
    kept = "_thermo_cache" in base.__dict__
    for k in range(1, len(pieces)):
        sel = np.flatnonzero((ev_pass == k) & (ev_tau == tau))
        if sel.size:
            splice(base, sel, pieces[k], ev_pos[sel])
    rest = np.flatnonzero(ev_tau != tau)
    if rest.size:
        part = forward(np.exp(tau[rest]), partner[rest], x_start[rest])
        if kept:
            part.thermodynamics()        # as the other states have it
        splice(base, rest, part)
    return base


def _grid_values(forward, closure, uv, log_lo, log_hi):
    """y and dy/d ln T on the ln T grid for every partner value ``uv``, (n_v, G) each."""
    grid = np.linspace(log_lo, log_hi, _GRID)
    tt = np.repeat(np.exp(grid)[None, :], uv.size, axis=0)
    vv = np.repeat(uv[:, None], _GRID, axis=1)
    th = forward(tt.ravel(), vv.ravel()).thermodynamics()
    y = th.get(closure.name).reshape(uv.size, _GRID)
    dy = getattr(th, closure.slope).reshape(uv.size, _GRID)
    # y rises with T; a failed grid point takes its lower neighbour's value (monotone)
    bad = ~(np.isfinite(y) & np.isfinite(dy) & (dy > 0))
    y = np.maximum.accumulate(np.where(bad, -np.inf, y), axis=1)
    return y, np.where(bad, np.nan, dy)


def _refine_start(forward, closure, uv, vinv, target, tau, done, log_lo, log_hi):
    """Move the starts ``tau`` (in place) onto the Hermite interpolant of a grid _REFINE
    times finer than the start table's: y and dy/d ln T at the four nodes around each start
    (nodes shared by the states of one partner value and by all partners, so each forward
    solve has at most that grid's temperatures) give a polynomial of degree 7, whose error
    falls as the eighth power of the spacing: most starts come within the tolerance, so the
    first pass is the last and its state the result."""
    fine = np.linspace(log_lo, log_hi, (_GRID - 1) * _REFINE + 1)
    h = fine[1] - fine[0]
    act = np.flatnonzero(~done)
    if not act.size:
        return np.full(tau.size, np.nan)
    j = np.clip(np.floor((tau[act] - log_lo) / h).astype(int), 0, fine.size - 2)
    w0 = np.clip(j - 1, 0, fine.size - _NODES)                # the first of the nodes
    nodes = w0[:, None] + np.arange(_NODES)[None, :]          # (n, _NODES)
    keys = vinv[act][:, None] * fine.size + nodes
    uk, kinv = np.unique(keys.ravel(), return_inverse=True)
    st = forward(np.exp(fine[uk % fine.size]), uv[uk // fine.size])
    th = st.thermodynamics()
    y = th.get(closure.name).ravel()[kinv].reshape(nodes.shape)
    dy = getattr(th, closure.slope).ravel()[kinv].reshape(nodes.shape)
    x_nodes = st.log_ne.ravel()[kinv].reshape(nodes.shape)
    good = (np.isfinite(y) & np.isfinite(dy) & (dy > 0)).all(axis=1)
    # the cell among the nodes that holds the target (the start's own, unless it was off)
    a = np.clip((y <= target[act][:, None]).sum(axis=1) - 1, 0, _NODES - 2)
    ya = np.take_along_axis(y, a[:, None], axis=1)[:, 0]
    yb = np.take_along_axis(y, a[:, None] + 1, axis=1)[:, 0]
    ok = good & (yb > ya) & (ya <= target[act]) & (target[act] <= yb)
    sel = act[ok]
    left = (w0 + a)[ok]
    u = nodes[ok] - left[:, None]
    root = _hermite_node_root(u, y[ok], h * dy[ok], target[sel])
    tau[sel] = fine[left] + h * root
    # ln n_e there, the cubic through the nodes' (a start for the solve at tau)
    weights = np.ones(u.shape)
    for i in range(_NODES):
        for k in range(_NODES):
            if k != i:
                weights[:, i] *= (root - u[:, k]) / (u[:, i] - u[:, k])
    x_start = np.full(tau.size, np.nan)
    x_start[sel] = (weights * x_nodes[ok]).sum(axis=1)
    return x_start


def _hermite_node_root(u, y, dy, target):
    """u in [0, 1] where the Hermite interpolant of (y, dy/du) at the nodes ``u`` (integers,
    0 and 1 among them; one row per state) meets ``target``: Newton's divided differences
    with every node twice, then Newton's method on the polynomial from the cubic's root."""
    n, k = u.shape
    z = np.repeat(u.astype(float), 2, axis=1)                 # (n, 2k)
    d = np.repeat(y, 2, axis=1)
    coef = [d[:, 0].copy()]
    for lev in range(1, 2 * k):
        dz = z[:, lev:] - z[:, :-lev]
        num = d[:, 1:] - d[:, :-1]
        if lev == 1:
            # a doubled node's first divided difference is the slope there
            nd = np.where(dz == 0.0, np.repeat(dy, 2, axis=1)[:, 1:], num / np.where(
                dz == 0.0, 1.0, dz))
        else:
            nd = num / dz
        d = nd
        coef.append(d[:, 0].copy())
    coef = np.stack(coef, axis=1)                             # (n, 2k)
    i0 = np.argmax(u == 0, axis=1)[:, None]
    y0 = np.take_along_axis(y, i0, axis=1)[:, 0]
    y1 = np.take_along_axis(y, i0 + 1, axis=1)[:, 0]
    d0 = np.take_along_axis(dy, i0, axis=1)[:, 0]
    d1 = np.take_along_axis(dy, i0 + 1, axis=1)[:, 0]
    x = _hermite_root(y0, y1, d0, d1, 0.0, 1.0, target)
    with np.errstate(divide="ignore", invalid="ignore"):
        for _ in range(4):
            p = coef[:, -1].copy()
            dp = np.zeros(n)
            for c in range(2 * k - 2, -1, -1):
                dp = dp * (x - z[:, c]) + p
                p = p * (x - z[:, c]) + coef[:, c]
            step = (p - target) / dp
            x = np.where(np.isfinite(step), np.clip(x - step, 0.0, 1.0), x)
    return x


def _hermite_root(y0, y1, d0, d1, lo, h, target):
    """ln T in [lo, lo + h] where the cubic Hermite interpolant of (y, dy/d ln T) at the
    cell's ends meets ``target`` (a few Newton steps from the linear estimate, kept inside)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.clip((target - y0) / (y1 - y0), 0.0, 1.0)
        frac = np.where(np.isfinite(frac), frac, 0.5)
        for _ in range(4):
            s_ = frac
            h00, h10 = 2 * s_**3 - 3 * s_**2 + 1, s_**3 - 2 * s_**2 + s_
            h01, h11 = -2 * s_**3 + 3 * s_**2, s_**3 - s_**2
            val = h00 * y0 + h10 * h * d0 + h01 * y1 + h11 * h * d1
            der = ((6 * s_**2 - 6 * s_) * y0 + (3 * s_**2 - 4 * s_ + 1) * h * d0
                   + (-6 * s_**2 + 6 * s_) * y1 + (3 * s_**2 - 2 * s_) * h * d1)
            step = (val - target) / der
            frac = np.where(np.isfinite(step), np.clip(frac - step, 0.0, 1.0), frac)
    return lo + frac * h


def _start_table(table, target, vinv, log_lo, log_hi, tol):
    """Start values and brackets from the grid values ``table`` (of :func:`_grid_values`)
    for states of partner rows ``vinv``; also the states whose target lies outside the
    grid's range of y (a target met at an end of the range to the tolerance ``tol`` is
    inside: it starts there)."""
    grid = np.linspace(log_lo, log_hi, _GRID)
    y, dy = table
    yg = y[vinv]                                               # (m, G)
    dyg = dy[vinv]
    j = (yg <= target[:, None]).sum(axis=1)                    # grid points at or below
    with np.errstate(invalid="ignore"):
        at_lo = np.abs(target - yg[:, 0]) <= tol * (np.abs(target) + np.abs(dyg[:, 0]))
        at_hi = np.abs(target - yg[:, -1]) <= tol * (np.abs(target) + np.abs(dyg[:, -1]))
    outside = np.flatnonzero(((j == 0) & ~at_lo) | ((j == _GRID) & ~at_hi))
    jl = np.clip(j - 1, 0, _GRID - 2)
    y0 = np.take_along_axis(yg, jl[:, None], axis=1)[:, 0]
    y1 = np.take_along_axis(yg, jl[:, None] + 1, axis=1)[:, 0]
    d0 = np.take_along_axis(dyg, jl[:, None], axis=1)[:, 0]
    d1 = np.take_along_axis(dyg, jl[:, None] + 1, axis=1)[:, 0]
    lo, hi = grid[jl], grid[jl + 1]
    # on the cubic Hermite interpolant of y (values and exact slopes at both ends)
    tau = _hermite_root(y0, y1, d0, d1, lo, hi - lo, target)
    return tau, lo.copy(), hi.copy(), outside


def _out_of_range(closure, target, partner, idx, t_range, status, reason, done, reached=None):
    from sahaboltz.equilibrium.closures import CLOSURES
    pc = CLOSURES[closure.partner]
    for i in idx:
        status[i] = 3
        near = "" if reached is None or not np.isfinite(reached[i]) else \
            f" (nearest reached {reached[i]:.6g})"
        reason[i] = (f"no temperature in [{t_range[0]:.6g}, {t_range[1]:.6g}] K gives "
                     f"{closure.name} = {target[i]:.6g} {closure.unit} at {pc.name} = "
                     f"{partner[i]:.6g} {pc.unit}{near}")
        done[i] = True
