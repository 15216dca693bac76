"""The real per-block compute function: the equilibrium solver on a block of (T, P) states.

:func:`solver_compute` has the signature every compute function has,
``compute(spec, T, P) -> {dataset name: 1-D array}``; :mod:`sahaboltz.tables.build` runs it in
worker processes.  What it returns is described in :mod:`sahaboltz.tables.layout`.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sahaboltz.data.elements import atomic_number, spectroscopic_name
from sahaboltz.errors import InputError
from sahaboltz.tables.spec import THERMO_OUTPUTS, TableSpec

_SOLAR_NAMES = {"solar": "asplund2009", "asplund2009": "asplund2009"}


def composition_of(spec: TableSpec):
    """The :class:`~sahaboltz.data.composition.Composition` of a spec's fixed composition
    (the base, then [M/H] and [alpha/Fe], element offsets, helium mass fraction)."""
    if spec.composition_axis is not None:
        raise InputError("a spec with a composition axis has one composition per slice: "
                         "use compositions_of(spec)")
    return resolve_composition(spec.composition)


def resolve_composition(c: dict):
    """A fixed composition document (:func:`~sahaboltz.tables.spec.normalize_composition`)
    as a :class:`~sahaboltz.data.composition.Composition`."""
    from sahaboltz.data.composition import Composition, solar

    if "abundances" in c:
        comp = Composition.from_number(c["abundances"], name="custom")
        if c.get("metallicity") or c.get("alpha_enhancement"):
            comp = comp.scaled(float(c.get("metallicity", 0.0)),
                               float(c.get("alpha_enhancement", 0.0)))
    else:
        name = c.get("name", "solar")
        if name not in _SOLAR_NAMES:
            raise InputError(f"unknown composition {name!r}; use 'solar' or give abundances "
                             f"(SYMBOL=NUMBER relative to hydrogen)")
        comp = solar(_SOLAR_NAMES[name], metallicity=float(c.get("metallicity", 0.0)),
                     alpha_enhancement=float(c.get("alpha_enhancement", 0.0)))
    if c.get("abundance_offsets"):
        comp = comp.with_offsets(c["abundance_offsets"])
    if "helium_mass_fraction" in c:
        comp = comp.with_helium_mass_fraction(c["helium_mass_fraction"])
    return comp


def compositions_of(spec: TableSpec) -> list:
    """The composition of every slice, resolved (all of them, so that a slice that leaves an
    abundance negative is an error before any state is computed); all slices must hold the
    same elements, since the file stores one species list."""
    comps = []
    ax = spec.composition_axis
    for k, doc in enumerate(spec.compositions()):
        try:
            comps.append(resolve_composition(doc))
        except InputError as exc:
            if ax is None:
                raise
            raise InputError(f"composition axis {ax.name} = {ax.values[k]:g}: {exc}") from None
    if len({tuple(c.Z.tolist()) for c in comps}) > 1:
        raise InputError(f"composition axis {ax.name}: the slices hold different elements; "
                         f"every slice needs the same ones")
    return comps


def composition_digest_doc(spec: TableSpec) -> dict[str, Any]:
    """The resolved composition (element -> number fraction) for the cache key; with a
    composition axis, one per slice."""
    docs = [{"name": comp.name, "number_fraction": dict(zip(
        comp.symbols, (float(x) for x in comp.number_fraction)))}
        for comp in compositions_of(spec)]
    if spec.composition_axis is None:
        return docs[0]
    return {"axis": spec.composition_axis.name, "slices": docs}


#: per process: spec identity -> (composition, network), the most recent few (a composition
#: axis has one network per slice; its blocks come slice after slice)
_NETWORKS: dict[str, tuple[Any, Any]] = {}
_KEEP_NETWORKS = 4


def _network_key(spec: TableSpec) -> str:
    return repr((sorted(spec.composition.items()), sorted(spec.physics.items())))


def solve_block(spec: TableSpec, T: np.ndarray, P: np.ndarray):
    """Solve the equilibrium of the states ``(T, P)`` with the spec's physics options.

    ``T`` holds the values of the first axis: temperatures, or those of the thermal closure
    that replaces the temperature (``spec.thermal``), which the solver then inverts for T
    (states it finds no temperature for are masked, not raised).  The solver's prepared
    network is kept per process and reused for every block (building it costs about a second
    for the solar mixture; forked workers inherit the parent's).
    """
    from sahaboltz.equilibrium import solve_equilibrium

    phys = spec.physics
    kwargs = {spec.pressure.name: P, "truncation": phys["truncation"],
              "lowering": bool(phys["lowering"]), "completion": bool(phys["completion"]),
              "h_minus": bool(phys["h_minus"]), "errors": "mask"}
    if spec.thermal is not None:
        kwargs[spec.temperature.name] = T
        kwargs["radiation"] = bool(phys.get("radiation"))   # u and s include it, if asked
        if "temperature_range" in phys:
            kwargs["temperature_range"] = tuple(phys["temperature_range"])
        T = None
    if phys["molecules"] != "none":
        kwargs["molecules"] = phys["molecules"]
    if phys.get("condensates"):
        kwargs["condensates"] = True
    key = _network_key(spec)
    if key in _NETWORKS and phys["molecules"] == "none":
        comp, network = _NETWORKS[key]
        return solve_equilibrium(comp, T, network=network, **kwargs)
    comp = composition_of(spec)
    state = solve_equilibrium(comp, T, **kwargs)
    network = getattr(state, "network", None)
    if network is not None:
        _NETWORKS[key] = (comp, network)
        while len(_NETWORKS) > _KEEP_NETWORKS:
            del _NETWORKS[next(iter(_NETWORKS))]
    return state


def solver_compute(spec: TableSpec, T: np.ndarray, P: np.ndarray) -> dict[str, Any]:
    """Compute function backed by :func:`sahaboltz.equilibrium.solve_equilibrium`.

    Returns the stacked variables of format 2 directly (``fraction`` and ``number_density``
    over every species of the chosen elements, H- included; molecules; levels; partition
    functions) with their ``_labels`` and ``_coords``.  Each element's populations are formed
    once, from the solved n_e, and both the fractions and the densities come from them.
    """
    state = solve_block(spec, T, P)
    n = T.size
    out: dict[str, Any] = {}
    labels: dict[str, list] = {}
    coords: dict[str, list] = {}
    scalars = {"electron_density": "n_e", "electron_pressure": "electron_pressure",
               "gas_pressure": "gas_pressure", "mass_density": "mass_density",
               "mean_molecular_weight": "mean_molecular_weight", "mean_charge": "mean_charge",
               "status": "status", "temperature": "temperature"}
    thermo = None
    for name in spec.outputs.quantities:
        if name in THERMO_OUTPUTS:
            if thermo is None:
                thermo = state.thermodynamics(radiation=bool(spec.physics.get("radiation")))
            value = thermo.get("pressure" if name == "total_pressure" else name)
        else:
            value = getattr(state, scalars[name])
        out[name] = np.asarray(value, dtype=float).reshape(n)
    if "temperature" in out:  # where no temperature was found, NaN like every other field
        out["temperature"][np.asarray(state.status).reshape(n) != 0] = np.nan
    comp = state.composition
    sf = spec.outputs.stage_fractions
    elements = comp.symbols if sf == "all" else list(sf)
    for el in elements:
        if el not in comp:
            raise InputError(f"stage fractions of {el} asked for, but {el} is not in the "
                             f"composition ({', '.join(comp.symbols)})")
    charges = [state.stage_charges(el, negative=True) for el in elements]
    species = [spectroscopic_name(atomic_number(el), int(q))
               for el, qs in zip(elements, charges) for q in qs]
    if species:
        # filled in place, one element at a time (a solar block holds ~3,650 rows of each)
        labels["species"] = species
        fraction = out["fraction"] = np.empty((len(species), n))
        density = out["number_density"] = np.empty((len(species), n))
        r = 0
        for el, qs in zip(elements, charges):
            rows = slice(r, r + len(qs))
            fraction[rows] = np.asarray(state.stage_fractions(el, negative=True, keep=False),
                                        dtype=float).reshape(-1, n)
            np.multiply(fraction[rows], np.asarray(state.element_density(el),
                                                   dtype=float).reshape(n), out=density[rows])
            r += len(qs)
    if hasattr(state, "molecule_densities"):  # solved with molecules
        if state.molecule_names:
            labels["molecule"] = list(state.molecule_names)
            out["molecule_number_density"] = np.asarray(
                state.molecule_densities(), dtype=float).reshape(-1, n)
        if elements:
            labels["element"] = list(elements)
            out["molecular_fraction"] = np.stack([np.asarray(
                state.molecular_fraction(el), dtype=float).reshape(n) for el in elements])
            if spec.physics.get("condensates"):
                out["condensed_fraction"] = np.stack([np.asarray(
                    state.condensed_fraction(el), dtype=float).reshape(n) for el in elements])
    if spec.outputs.partition_functions:
        names = list(spec.outputs.partition_functions)
        labels["partition_species"] = names
        out["partition_function"] = np.stack([np.asarray(
            state.partition_function(sp), dtype=float).reshape(n) for sp in names])
    if spec.outputs.levels:
        _level_outputs(spec, state, n, out, labels, coords)
    out["_labels"] = labels
    out["_coords"] = coords
    return out


def _level_outputs(spec, state, n, out, labels, coords) -> None:
    from sahaboltz.data.database import default_database

    db = default_database()
    rows, names, energies, weights = [], [], [], []
    for name, indices in spec.outputs.levels:
        pops, energy = state.level_populations(name)
        pops = np.asarray(pops, dtype=float).reshape(len(energy), -1)
        if max(indices) >= len(energy):
            raise InputError(f"{name} has {len(energy)} levels in its partition function "
                             f"(indices 0..{len(energy) - 1}); asked for level {max(indices)}")
        g = db.species(name).bound_g
        for i in indices:
            rows.append(pops[i].reshape(n))
            names.append(f"{name}:{i}")
            energies.append(float(energy[i]))
            weights.append(float(g[i]) if i < g.size else float("nan"))
    labels["level"] = names
    coords["level_energy"] = np.array(energies)
    coords["level_g"] = np.array(weights)
    out["level_number_density"] = np.stack(rows)


__all__ = ["solver_compute", "composition_of", "compositions_of", "resolve_composition",
           "composition_digest_doc"]
