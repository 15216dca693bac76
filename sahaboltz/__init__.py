"""sahaboltz: LTE ionization and excitation (Saha-Boltzmann) equilibrium of gas mixtures.

The public API, importable from the top level::

    import sahaboltz as sb

    state = sb.solve_equilibrium(sb.solar(), [4000.0, 6000.0], gas_pressure=1e5)
    state.n_e, state.fraction("Fe II")
    sb.partition_function("Fe I", 5000.0)
    tab = sb.open_table(sb.get_table(sb.TableSpec.from_file("grid.toml")))

Names are imported on first use, so ``import sahaboltz`` stays cheap (the command line's start).
"""

from __future__ import annotations

from sahaboltz._lazy import lazy_names
from sahaboltz._version import __version__
from sahaboltz.errors import (ConvergenceError, DataFormatError, InputError, NoDataError,
                              SahaboltzError, TableError, UnknownSpeciesError)

#: public name -> module that defines it
_LAZY = {
    # the solver and its results
    "solve_equilibrium": "sahaboltz.equilibrium.solver",
    "EquilibriumState": "sahaboltz.equilibrium.state",
    "dominant_stage": "sahaboltz.equilibrium.quick",
    "half_ionization_temperatures": "sahaboltz.equilibrium.quick",
    "stage_table": "sahaboltz.equilibrium.quick",
    "CLOSURES": "sahaboltz.equilibrium.closures",
    # partition functions and level populations
    "partition_function": "sahaboltz.kernels.partition",
    "log_derivative": "sahaboltz.kernels.partition",
    "PartitionModel": "sahaboltz.kernels.partition",
    "TRUNCATIONS": "sahaboltz.kernels.partition",
    "level_populations": "sahaboltz.kernels.boltzmann",
    "level_fraction": "sahaboltz.kernels.boltzmann",
    "level_ratio": "sahaboltz.kernels.boltzmann",
    "select_levels": "sahaboltz.kernels.boltzmann",
    "excitation_temperature": "sahaboltz.kernels.boltzmann",
    "saha_chain": "sahaboltz.kernels.saha",
    # compositions and data
    "solar": "sahaboltz.data.composition",
    "Composition": "sahaboltz.data.composition",
    "default_database": "sahaboltz.data.database",
    # tables
    "TableSpec": "sahaboltz.tables.spec",
    "build_table": "sahaboltz.tables.build",
    "get_table": "sahaboltz.tables.cache",
    "open_table": "sahaboltz.tables.interpolate",
    "PopulationTable": "sahaboltz.tables.interpolate",
}

__all__ = ["__version__", "SahaboltzError", "InputError", "UnknownSpeciesError", "NoDataError",
           "DataFormatError", "ConvergenceError", "TableError", *_LAZY]


__getattr__, __dir__ = lazy_names("sahaboltz", globals(), _LAZY)
