"""The real per-block compute function: the equilibrium solver on a block of (T, P) states.

:func:`solver_compute` has the signature every compute function has,
``compute(spec, T, P) -> {dataset name: 1-D array}``; :mod:`sahaboltz.tables.build` runs it in
worker processes.  Names follow :func:`sahaboltz.tables.spec.dataset_name`.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sahaboltz.data.elements import atomic_number, spectroscopic_name
from sahaboltz.errors import InputError
from sahaboltz.tables.spec import TableSpec, dataset_name

_SOLAR_NAMES = {"solar": "asplund2009", "asplund2009": "asplund2009"}


def composition_of(spec: TableSpec):
    """The :class:`~sahaboltz.data.composition.Composition` a spec asks for."""
    from sahaboltz.data.composition import Composition, solar

    c = spec.composition
    if "abundances" in c:
        return Composition.from_number(c["abundances"], name="custom")
    name = c.get("name", "solar")
    if name not in _SOLAR_NAMES:
        raise InputError(f"unknown composition {name!r}; use 'solar' or give abundances "
                         f"(SYMBOL=NUMBER relative to hydrogen)")
    return solar(_SOLAR_NAMES[name], metallicity=float(c.get("metallicity", 0.0)),
                 alpha_enhancement=float(c.get("alpha_enhancement", 0.0)))


def composition_digest_doc(spec: TableSpec) -> dict[str, Any]:
    """The resolved composition (element -> number fraction) for the cache key."""
    comp = composition_of(spec)
    return {"name": comp.name, "number_fraction": dict(zip(comp.symbols,
                                                           (float(x) for x in comp.number_fraction)))}


_NETWORKS: dict[str, tuple[Any, Any]] = {}  # per process: spec identity -> (composition, network)


def _network_key(spec: TableSpec) -> str:
    return repr((sorted(spec.composition.items()), sorted(spec.physics.items())))


def solve_block(spec: TableSpec, T: np.ndarray, P: np.ndarray):
    """Solve the equilibrium of the states ``(T, P)`` with the spec's physics options.

    The solver's prepared network is kept per process and reused for every block (building
    it costs about a second for the solar mixture; forked workers inherit the parent's).
    """
    from sahaboltz.equilibrium import solve_equilibrium

    phys = spec.physics
    kwargs = {spec.pressure.name: P, "truncation": phys["truncation"],
              "lowering": bool(phys["lowering"]), "completion": bool(phys["completion"]),
              "h_minus": bool(phys["h_minus"])}
    if phys["molecules"] != "none":
        kwargs["molecules"] = phys["molecules"]
    key = _network_key(spec)
    if key in _NETWORKS and phys["molecules"] == "none":
        comp, network = _NETWORKS[key]
        return solve_equilibrium(comp, T, network=network, **kwargs)
    comp = composition_of(spec)
    state = solve_equilibrium(comp, T, **kwargs)
    network = getattr(state, "network", None)
    if network is not None:
        _NETWORKS[key] = (comp, network)
    return state


def solver_compute(spec: TableSpec, T: np.ndarray, P: np.ndarray) -> dict[str, np.ndarray]:
    """Compute function backed by :func:`sahaboltz.equilibrium.solve_equilibrium`."""
    state = solve_block(spec, T, P)
    out: dict[str, Any] = {}
    scalars = {"electron_density": "n_e", "electron_pressure": "electron_pressure",
               "gas_pressure": "gas_pressure", "mass_density": "mass_density",
               "mean_molecular_weight": "mean_molecular_weight", "mean_charge": "mean_charge"}
    for name in spec.outputs.quantities:
        out[name] = np.asarray(getattr(state, scalars[name]), dtype=float).reshape(T.shape)
    comp = state.composition if hasattr(state, "composition") else composition_of(spec)
    sf = spec.outputs.stage_fractions
    elements = comp.symbols if sf == "all" else list(sf)
    for el in elements:
        if el not in comp:
            raise InputError(f"stage fractions of {el} asked for, but {el} is not in the "
                             f"composition ({', '.join(comp.symbols)})")
        fr = np.asarray(state.stage_fractions(el), dtype=float)
        z = atomic_number(el)
        for charge in range(fr.shape[0]):
            out[dataset_name("fraction", spectroscopic_name(z, charge))] = fr[charge].reshape(T.shape)
        if hasattr(state, "molecular_fraction"):  # solved with molecules
            out[dataset_name("molecular_fraction", el)] = np.asarray(
                state.molecular_fraction(el), dtype=float).reshape(T.shape)
    attrs: dict[str, dict] = {}
    if spec.outputs.partition_functions or spec.outputs.levels:
        _species_outputs(spec, state, T, out, attrs)
    if attrs:
        out["_attrs"] = attrs
    return out


def _partition(species, spec: TableSpec, state, T):
    """U of one species with the truncation the solver used for this state."""
    from sahaboltz.kernels.partition import PartitionModel
    from sahaboltz.kernels.plasma import _lowering_ev

    phys = spec.physics
    pm = PartitionModel([species], truncation=phys["truncation"],
                        completion=bool(phys["completion"]))
    n_e = np.asarray(state.n_e, dtype=float).reshape(T.shape)
    kw: dict[str, Any] = {"n_e": n_e}
    if "lowering_ev" in pm.scheme.inputs:
        lam = np.asarray(state.debye_length, dtype=float).reshape(T.shape)
        kw["lowering_ev"] = _lowering_ev(species.charge, lam)[None, :]
    return np.asarray(pm.evaluate(T, **kw), dtype=float)[0]


def _species_outputs(spec, state, T, out, attrs) -> None:
    from sahaboltz.data.database import default_database

    db = default_database()
    for name in spec.outputs.partition_functions:
        sp = db.species(name)
        out[dataset_name("partition", sp.name)] = _partition(sp, spec, state, T)
    for name, indices in spec.outputs.levels:
        pops, energy = state.level_populations(name)
        pops = np.asarray(pops, dtype=float).reshape(len(energy), -1)
        if max(indices) >= len(energy):
            raise InputError(f"{name} has {len(energy)} levels in its partition function "
                             f"(indices 0..{len(energy) - 1}); asked for level {max(indices)}")
        sp = db.species(name)
        g = sp.bound_g
        for i in indices:
            dn = dataset_name("population", name, i)
            out[dn] = pops[i].reshape(T.shape)
            attrs[dn] = {"energy_ev": float(energy[i])}
            if i < g.size:
                attrs[dn]["g"] = float(g[i])


__all__ = ["solver_compute", "composition_of", "composition_digest_doc"]
