"""An equilibrium state as an :class:`xarray.Dataset` (xarray is imported only here, on use).

The variables and their names, units and long names are those of a format-2 population table
(docs/table_format.md), so a state and a table look alike: scalar fields over the state
dimensions, ``fraction`` and ``number_density`` with a leading ``species`` dimension (``charge``
-1 for H-), molecules with a ``molecule`` dimension.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from sahaboltz.data.elements import SYMBOLS, parse_species
from sahaboltz.errors import InputError

_SCALARS = {  # name: (state attribute, units, long_name)
    "temperature": ("temperature", "K", "temperature"),
    "electron_density": ("n_e", "cm-3", "free-electron number density n_e"),
    "electron_pressure": ("electron_pressure", "dyn cm-2", "electron pressure P_e = n_e k T"),
    "gas_pressure": ("gas_pressure", "dyn cm-2", "gas pressure, all free particles"),
    "mass_density": ("mass_density", "g cm-3", "mass density"),
    "nuclei_density": ("nuclei_density", "cm-3", "density of nuclei of all elements"),
    "mean_molecular_weight": ("mean_molecular_weight", "1",
                              "mean mass per free particle in atomic mass units"),
    "mean_charge": ("mean_charge", "1", "free electrons per heavy particle"),
}


def state_to_xarray(state, dims: Sequence[str] | None = None):
    """The populations of ``state`` as an xarray Dataset (see the module docstring).

    ``dims`` names the state dimensions (default ``state`` for 1-D states, ``state_0``,
    ``state_1`` ... otherwise).
    """
    try:
        import xarray as xr
    except ImportError:
        raise InputError("to_xarray() needs the xarray package: pip install xarray") from None
    shape = state.shape
    if dims is None:
        dims = ("state",) if len(shape) == 1 else tuple(f"state_{i}" for i in range(len(shape)))
    dims = tuple(dims)
    if len(dims) != len(shape):
        raise InputError(f"dims: the state has {len(shape)} dimension(s) {shape}, got {dims}")
    data = {}
    for name, (attr, unit, long_name) in _SCALARS.items():
        data[name] = (dims, np.asarray(getattr(state, attr), dtype=float),
                      {"units": unit, "long_name": long_name})
    data["status"] = (dims, np.asarray(state.status), {
        "long_name": "outcome of the solve: 0 converged, 1 unreachable, 2 strongly coupled, "
                     "3 not converged"})
    species = state.species_names
    nd = np.asarray(state.number_densities(), dtype=float)
    frac = np.concatenate([np.asarray(state.stage_fractions(el, negative=True), dtype=float)
                           for el in state.composition.symbols])
    sd = ("species",) + dims
    data["fraction"] = (sd, frac, {"units": "1", "long_name":
                                   "number fraction of the element's nuclei in this species"})
    data["number_density"] = (sd, nd, {"units": "cm-3",
                                       "long_name": "number density of the species"})
    zq = [parse_species(s) for s in species]
    coords = {"species": ("species", np.array(species, dtype=object)),
              "charge": ("species", np.array([q for _, q in zq], dtype=np.int32),
                         {"units": "1", "long_name": "charge of the species in units of e "
                                                     "(H- is -1)"}),
              "element_symbol": ("species", np.array([SYMBOLS[z] for z, _ in zq], dtype=object))}
    if hasattr(state, "molecule_densities") and state.molecule_names:
        coords["molecule"] = ("molecule", np.array(state.molecule_names, dtype=object))
        data["molecule_number_density"] = (("molecule",) + dims,
                                           np.asarray(state.molecule_densities(), dtype=float),
                                           {"units": "cm-3",
                                            "long_name": "number density of the molecule"})
    return xr.Dataset(data, coords=coords, attrs={
        "Conventions": "CF-1.8", "title": repr(state), "closure": state.closure,
        "truncation": state.network.truncation, "lowering": int(bool(state.lowering))})
