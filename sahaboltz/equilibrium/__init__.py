"""The mixture solver: LTE ionization balance of a whole composition.

>>> from sahaboltz.data.composition import solar
>>> from sahaboltz.equilibrium import solve_equilibrium
>>> state = solve_equilibrium(solar(), 5800.0, gas_pressure=1e5)   # doctest: +SKIP
>>> state.n_e, state.stage_fractions("Fe")                         # doctest: +SKIP

Layout: :mod:`~sahaboltz.equilibrium.solver` is the front (checks, dispatch) over the engines
:mod:`~sahaboltz.equilibrium.atomic` (atoms, ions, H-) and
:mod:`~sahaboltz.equilibrium.molecular` (with molecules); :mod:`~.closures` is the closure
registry, :mod:`~.network` the element chains, :mod:`~.state` the result, :mod:`~.quick` the
quick answers.  Names are imported on first use.
"""

from __future__ import annotations

from sahaboltz._lazy import lazy_names

#: version of the equilibrium results: raise it with any change that alters a solved state
#: (it is part of the table cache key, so cached tables computed before are not reused)
SOLVER_VERSION = "2"

_LAZY = {
    "solve_equilibrium": "sahaboltz.equilibrium.solver",
    "EquilibriumState": "sahaboltz.equilibrium.state",
    "AtomicNetwork": "sahaboltz.equilibrium.network",
    "H_MINUS": "sahaboltz.equilibrium.network",
    "CLOSURES": "sahaboltz.equilibrium.closures",
    "dominant_stage": "sahaboltz.equilibrium.quick",
    "half_ionization_temperatures": "sahaboltz.equilibrium.quick",
    "stage_table": "sahaboltz.equilibrium.quick",
}

__all__ = ["SOLVER_VERSION", *_LAZY]


__getattr__, __dir__ = lazy_names("sahaboltz.equilibrium", globals(), _LAZY)
