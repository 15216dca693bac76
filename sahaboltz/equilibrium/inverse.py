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
on the Hermite interpolant of an 8x finer ln T grid, evaluated only at the two nodes around
each start (shared temperatures again), which brings most starts within 3e-7 in ln T of the
root, so one pass usually reaches the tolerance (the last Newton step, below 3e-7 in ln T,
is taken without evaluating again: its error is of the order of its square).  Every state keeps a bracket [lo, hi] in ln T (the range,
narrowed by the signs seen), and a step that would leave it bisects.  A state whose value lies
outside what the range of temperatures gives is reported with that range and the nearest value reached.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from sahaboltz.equilibrium.closures import ThermalClosure

__all__ = ["solve_thermal", "DEFAULT_TEMPERATURE_RANGE"]

#: temperatures searched by default [K] (with molecules the lower end is the molecular
#: solver's lowest temperature)
DEFAULT_TEMPERATURE_RANGE = (1000.0, 1.0e8)
# relative tolerance: |y - y*| <= _TOL (|y*| + |dy/dlnT|)
_TOL = 1e-13
# a Newton step below this in ln T is the last one (its own error is of order its square)
_LAST_STEP = 3e-7
_MAX_PASSES = 60
# grid points of the start table, and when it pays (states per distinct partner value)
_GRID = 65
# the start is then refined on a grid this many times finer (two nodes per state)
_REFINE = 8
# partner values of the coarse start table when they are many (at least; up to 4x with more
# states, half as many grid states as states)
_COARSE = 8


def solve_thermal(forward: Callable, closure: ThermalClosure, target: np.ndarray,
                  partner: np.ndarray, t_range: tuple[float, float]):
    """The states (flat arrays ``target`` of ``closure``, ``partner`` of its partner closure).

    ``forward(t, v)`` solves flat states at temperatures ``t`` with partner values ``v`` and
    returns the result with ``errors="mask"``.  Returns (T, status, reason) per state:
    status 0 where a temperature in ``t_range`` matches, else 3 with the reason.
    """
    m = target.size
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
        tau, lo, hi, outside = _start_table(table, target, vinv, log_lo, log_hi)
        _out_of_range(closure, target, partner, outside, t_range, status, reason, done)
        _refine_start(forward, closure, uv, vinv, target, tau, done, log_lo, log_hi)
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
        tau = _start_table(own, target, np.arange(m), log_lo, log_hi)[0]
        _refine_start(forward, closure, uv, vinv, target, tau, done, log_lo, log_hi)
    active = np.flatnonzero(~done)
    for _ in range(_MAX_PASSES):
        if not active.size:
            break
        st = forward(np.exp(tau[active]), partner[active])
        th = st.thermodynamics()
        y = th.get(closure.name).ravel()
        slope = getattr(th, closure.slope).ravel()
        ok = st.converged.ravel() & np.isfinite(y) & np.isfinite(slope) & (slope > 0)
        f = y - target[active]
        reached[active] = y
        conv = ok & (np.abs(f) <= _TOL * (np.abs(target[active]) + slope))
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
    return np.exp(tau), status, reason


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
    """Move the starts ``tau`` (in place) onto the cubic Hermite interpolant of a grid
    _REFINE times finer than the start table's, evaluated only at the two nodes around each
    start (nodes shared by the states of one partner value and by all partners, so each
    forward solve has at most that grid's temperatures).  The Hermite error falls as the
    fourth power of the spacing: most starts come within _LAST_STEP of the root, so the
    first Newton step is already the last."""
    fine = np.linspace(log_lo, log_hi, (_GRID - 1) * _REFINE + 1)
    h = fine[1] - fine[0]
    act = np.flatnonzero(~done)
    if not act.size:
        return
    j = np.clip(np.floor((tau[act] - log_lo) / h).astype(int), 0, fine.size - 2)
    keys = np.concatenate([vinv[act] * fine.size + j, vinv[act] * fine.size + j + 1])
    uk, kinv = np.unique(keys, return_inverse=True)
    th = forward(np.exp(fine[uk % fine.size]), uv[uk // fine.size]).thermodynamics()
    y = th.get(closure.name).ravel()
    dy = getattr(th, closure.slope).ravel()
    good = np.isfinite(y) & np.isfinite(dy) & (dy > 0)
    a, b = kinv[:act.size], kinv[act.size:]
    ok = good[a] & good[b] & (y[b] > y[a])
    sel = act[ok]
    tau[sel] = _hermite_root(y[a][ok], y[b][ok], dy[a][ok], dy[b][ok], fine[j[ok]], h,
                             target[sel])


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


def _start_table(table, target, vinv, log_lo, log_hi):
    """Start values and brackets from the grid values ``table`` (of :func:`_grid_values`)
    for states of partner rows ``vinv``; also the states whose target lies outside the
    grid's range of y."""
    grid = np.linspace(log_lo, log_hi, _GRID)
    y, dy = table
    yg = y[vinv]                                               # (m, G)
    j = (yg <= target[:, None]).sum(axis=1)                    # grid points at or below
    outside = np.flatnonzero((j == 0) | (j == _GRID))
    jl = np.clip(j - 1, 0, _GRID - 2)
    dyg = dy[vinv]
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
