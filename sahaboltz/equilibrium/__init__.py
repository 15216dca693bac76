"""The mixture solver: LTE ionization balance of a whole composition.

>>> from sahaboltz.data.composition import solar
>>> from sahaboltz.equilibrium import solve_equilibrium
>>> state = solve_equilibrium(solar(), 5800.0, gas_pressure=1e5)   # doctest: +SKIP
>>> state.n_e, state.stage_fractions("Fe")                         # doctest: +SKIP
"""

from sahaboltz.equilibrium.network import H_MINUS, AtomicNetwork
from sahaboltz.equilibrium.quick import (dominant_stage, half_ionization_temperatures,
                                         stage_table)
from sahaboltz.equilibrium.closures import CLOSURES
from sahaboltz.equilibrium.solver import solve_equilibrium
from sahaboltz.equilibrium.state import EquilibriumState

__all__ = ["solve_equilibrium", "EquilibriumState", "AtomicNetwork", "H_MINUS", "CLOSURES",
           "dominant_stage", "half_ionization_temperatures", "stage_table"]
