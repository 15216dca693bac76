"""The solve front: option checks and dispatch to the atom-only or the molecular engine.

:func:`solve_equilibrium` is the one entry point.  It checks the composition, the closure
(:mod:`sahaboltz.equilibrium.closures`), the truncation and lowering pair
(:mod:`sahaboltz.kernels.truncation`) and the numerical options, builds (or reuses) the
:class:`~sahaboltz.equilibrium.network.AtomicNetwork`, and hands the checked arrays to
:func:`sahaboltz.equilibrium.atomic.solve_atomic` or, with molecules, to
:func:`sahaboltz.equilibrium.molecular.solve_molecular`.  The engines import nothing from here.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sahaboltz.data.composition import Composition
from sahaboltz.equilibrium import closures as _closures
from sahaboltz.equilibrium.atomic import DEFAULT_TOLERANCE, solve_atomic
from sahaboltz.equilibrium.closures import Closure
from sahaboltz.equilibrium.failures import check_mode, mark_failed, raise_or_keep
from sahaboltz.equilibrium.molecular import solve_molecular
from sahaboltz.equilibrium.network import AtomicNetwork
from sahaboltz.equilibrium.validity import warn_plain, warn_validity
from sahaboltz.errors import InputError
from sahaboltz.kernels import truncation as _truncation
from sahaboltz.kernels.truncation import TruncationScheme
from sahaboltz.quantities import as_positive_array

__all__ = ["solve_equilibrium", "checked_inputs", "DEFAULT_TOLERANCE"]


def _closure(given: dict) -> tuple[Closure, Any]:
    """The one closure among the keyword arguments (None values are not given)."""
    given = {k: v for k, v in given.items() if v is not None}
    unknown = [k for k in given if k not in _closures.CLOSURES]
    if unknown:
        raise InputError(f"unknown keyword argument(s) {', '.join(unknown)}: give exactly one "
                         f"closure ({', '.join(_closures.CLOSURES)}) besides the options")
    if len(given) != 1:
        raise InputError(f"give exactly one of {', '.join(_closures.CLOSURES)}; got "
                         f"{', '.join(given) if given else 'none'}")
    name, value = next(iter(given.items()))
    return _closures.CLOSURES[name], value


def checked_inputs(composition, temperature, closure_values: dict, truncation,
                   lowering) -> tuple[Closure, np.ndarray, np.ndarray, TruncationScheme]:
    """Check what every engine takes: the composition, exactly one closure, the truncation and
    lowering pair, and T and the closure value as positive arrays that broadcast.

    Returns (closure, T, closure value, truncation scheme), T and value broadcast together.
    """
    if not isinstance(composition, Composition):
        raise InputError("composition must be a Composition (e.g. solar() or "
                         f"Composition.from_number({{'Ar': 1}})), got {composition!r}")
    closure, value = _closure(closure_values)
    scheme = _truncation.resolve(truncation, lowering)
    t = as_positive_array(temperature, "K", "temperature")
    v = as_positive_array(value, closure.unit, closure.name)
    try:
        t, v = np.broadcast_arrays(t, v)
    except ValueError:
        raise InputError(f"temperature {t.shape} and {closure.name} {v.shape} do not "
                         "broadcast") from None
    closure.check(composition)
    return closure, t, v, scheme


def solve_equilibrium(composition: Composition, temperature: Any = None, *,
                      truncation: str | TruncationScheme | None = None,
                      lowering: bool = False, completion: bool = False, h_minus: bool = True,
                      molecules=None, database=None, missing_levels: str = "unit",
                      tolerance: float = DEFAULT_TOLERANCE, max_passes: int = 200,
                      network: AtomicNetwork | None = None, molecule_database=None,
                      errors: str = "raise", condensates=False, radiation: bool = False,
                      temperature_range=None, **closure: Any):
    """Solve the LTE ionization balance of a mixture at one or many states.

    Parameters
    ----------
    composition : Composition
        The mixture, e.g. :func:`sahaboltz.solar`.
    temperature : float, array_like or Quantity
        T [K].
    gas_pressure, mass_density, hydrogen_density, electron_pressure : array_like or Quantity
        Exactly one closure (the registry :data:`sahaboltz.equilibrium.closures.CLOSURES`):
        P_gas [dyn cm^-2], rho [g cm^-3], n_H (hydrogen nuclei) [cm^-3] or P_e [dyn cm^-2].
        Broadcast against ``temperature``.
    truncation : str or TruncationScheme, optional
        Partition-function truncation (:mod:`sahaboltz.kernels.truncation`: "plain",
        "lowered", "occupation", "ground", "below:n=3" ...); default "occupation"
        (Hummer & Mihalas occupation probabilities at the solved n_e), or "lowered" with
        ``lowering``.  "plain" stays available for comparisons and warns where it misleads.
    lowering : bool
        Debye-Hueckel lowering of the ionization energies, self-consistent with n_e and the
        ion densities, used also as the partition-function cut-off ("lowered").  A gas
        pressure given with it is the particle pressure kT sum n; the thermodynamics adds the
        Debye-Hueckel free energy, so its ``pressure`` lies below that by
        ``thermodynamics().debye_hueckel_pressure``.
    completion : bool
        Hydrogenic completion of the level lists (needs a bounding truncation).
    h_minus : bool
        Include H- (default True when hydrogen is present).
    molecules : {"default", "all", "diatomics", "abundant", "none"} or list of names, optional
        Solve with molecules (:mod:`sahaboltz.equilibrium.molecular`); None: atoms only.
    condensates : bool, "default", "all" or list of formulas, optional
        With molecules: gas-condensate equilibrium (corundum, iron, forsterite ...; see
        docs/molecules.md); default False.
    database : SpeciesDatabase, optional
    missing_levels : {"unit", "error"}
        Stages without level lists: U = 1 (listed in ``state.unit_partition``) or an error.
    tolerance : float
        Relative charge-neutrality tolerance (default 1e-12); with ``internal_energy`` or
        ``entropy`` also the relative tolerance to which the temperature found gives it
        (not below 1e-13).
    max_passes : int
        Most evaluations of the charge balance per state before giving up.
    network : AtomicNetwork, optional
        A prepared network (reuse it across calls with the same composition and options).
    molecule_database : MoleculeDatabase, optional
        Molecular data (default: the shipped data).
    errors : {"raise", "mask"}
        What a state that cannot be solved does: "raise" (default) raises one
        ConvergenceError naming every such state (``.indices``) and carrying the partial
        result (``.state``); "mask" returns the state with ``status`` (converged, unreachable,
        strongly coupled, not converged) and ``reason`` per state, and NaN values only there.

    internal_energy, entropy : array_like or Quantity, optional
        In place of ``temperature`` (which is then None): the specific internal energy
        [erg g^-1] with ``mass_density``, or the specific entropy [erg g^-1 K^-1] with
        ``gas_pressure`` (:data:`~sahaboltz.equilibrium.closures.THERMAL_CLOSURES`); the
        temperature is solved for (:mod:`sahaboltz.equilibrium.inverse`) within
        ``temperature_range`` (K, default (1000, 1e8); from 500 K with molecules), and the
        state returned has it as ``temperature``.
    radiation : bool
        Include black-body radiation at T in the thermodynamic properties of the result
        (``state.internal_energy``, ``state.gamma1`` ...; see
        :mod:`sahaboltz.equilibrium.thermodynamics`); default off.  The populations and the
        gas-pressure closure are not affected.

    Returns
    -------
    EquilibriumState (MolecularEquilibriumState with molecules)

    Raises
    ------
    InputError
        Bad or inconsistent arguments (named in the message).
    ConvergenceError
        With ``errors="raise"``, when some states could not be solved.
    """
    check_mode(errors)
    thermal = [k for k, val in closure.items()
               if k in _closures.THERMAL_CLOSURES and val is not None]
    if thermal:
        return _solve_thermal_front(
            composition, temperature, thermal, closure, truncation=truncation,
            lowering=lowering, completion=completion, h_minus=h_minus, molecules=molecules,
            database=database, missing_levels=missing_levels, tolerance=tolerance,
            max_passes=max_passes, network=network, molecule_database=molecule_database,
            errors=errors, condensates=condensates, radiation=radiation,
            temperature_range=temperature_range)
    if temperature is None:
        raise InputError("temperature is missing: give it, or replace it by one of "
                         + ", ".join(f"{c.name} (with {c.partner})"
                                     for c in _closures.THERMAL_CLOSURES.values()))
    closure_def, t, v, scheme = checked_inputs(composition, temperature, closure, truncation,
                                               lowering)
    if not (isinstance(max_passes, (int, np.integer)) and not isinstance(max_passes, bool)
            and max_passes >= 1):
        raise InputError(f"max_passes must be a positive whole number, got {max_passes!r}")
    if not (isinstance(tolerance, (int, float)) and not isinstance(tolerance, bool)
            and 1e-15 <= tolerance < 1e-2):
        raise InputError(f"tolerance must be a number in [1e-15, 1e-2), got {tolerance!r}")
    network = _network_for(network, composition, database, scheme, completion, h_minus,
                           missing_levels)
    if molecules is None and not (condensates is None or condensates is False
                                  or (isinstance(condensates, str) and condensates == "none")):
        raise InputError("condensates need molecules in the gas: add molecules='default'")
    if molecules is not None:
        state = solve_molecular(network, t, v, closure_def, molecules=molecules,
                                lowering=lowering, tolerance=tolerance, max_passes=max_passes,
                                molecule_database=molecule_database, condensates=condensates)
        state = raise_or_keep(state, errors, "the molecular equilibrium")
    else:
        state = raise_or_keep(solve_atomic(network, t, v, closure_def, lowering=lowering,
                                           tolerance=tolerance, max_passes=max_passes), errors)
    state.radiation = bool(radiation)
    warn_validity(state)
    if scheme.key == "plain" and truncation is not None:
        warn_plain(state)
    return state


def _solve_thermal_front(composition, temperature, thermal, given, *, truncation, lowering,
                         completion, h_minus, molecules, database, missing_levels, tolerance,
                         max_passes, network, molecule_database, errors, condensates,
                         radiation, temperature_range):
    """solve_equilibrium with a thermal closure: find T, then the state there."""
    from sahaboltz.equilibrium.inverse import DEFAULT_TEMPERATURE_RANGE, solve_thermal
    from sahaboltz.equilibrium.state_pieces import reshape as reshape_states
    from sahaboltz.equilibrium.molecular import T_MIN
    from sahaboltz.quantities import as_array
    if len(thermal) > 1:
        raise InputError(f"give one of {', '.join(thermal)}, not several")
    tc = _closures.THERMAL_CLOSURES[thermal[0]]
    if temperature is not None:
        raise InputError(f"{tc.name} replaces the temperature: give temperature=None (or "
                         f"drop {tc.name})")
    others = {k: v for k, v in given.items() if k != tc.name and v is not None}
    if set(others) != {tc.partner}:
        raise InputError(f"{tc.name} goes with {tc.partner} (and no other closure); got "
                         f"{', '.join(others) if others else 'none'}")
    if molecules is None and not (condensates is None or condensates is False
                                  or (isinstance(condensates, str) and condensates == "none")):
        raise InputError("condensates need molecules in the gas: add molecules='default'")
    if temperature_range is None:
        lo, hi = DEFAULT_TEMPERATURE_RANGE
        if molecules is not None:
            lo = max(lo, T_MIN)
    else:
        lo, hi = (float(v) for v in as_array(temperature_range, "K", "temperature_range"))
    if not (0 < lo < hi and np.isfinite(hi)):
        raise InputError(f"temperature_range must be (low, high) with 0 < low < high, got "
                         f"{temperature_range!r}")
    target = as_array(given[tc.name], tc.unit, tc.name)
    part_def, _, pv, scheme = checked_inputs(composition, 1.0, {tc.partner: others[tc.partner]},
                                             truncation, lowering)
    try:
        target, pv = np.broadcast_arrays(target, pv)
    except ValueError:
        raise InputError(f"{tc.name} {target.shape} and {tc.partner} {pv.shape} do not "
                         "broadcast") from None
    if not np.isfinite(target).all():
        raise InputError(f"{tc.name} must be finite")
    network = _network_for(network, composition, database, scheme, completion, h_minus,
                           missing_levels)

    def forward(t, v, start=None):
        if molecules is not None:
            st = solve_molecular(network, t, v, part_def, molecules=molecules,
                                 lowering=lowering, tolerance=tolerance, max_passes=max_passes,
                                 molecule_database=molecule_database, condensates=condensates)
        else:
            st = solve_atomic(network, t, v, part_def, lowering=lowering, tolerance=tolerance,
                              max_passes=max_passes, start_log_ne=start)
        st.radiation = bool(radiation)
        return st

    shape = target.shape
    _, status, reason, state = solve_thermal(forward, tc, target.ravel().astype(float),
                                             pv.ravel().astype(float), (lo, hi), tolerance)
    reshape_states(state, shape)
    bad = np.flatnonzero(status != 0)
    mark_failed(state, bad, reason[bad])
    state.thermal_closure = tc.name
    state.thermal_value = target.copy()
    state = raise_or_keep(state, errors, f"the search for T from {tc.name}")
    warn_validity(state)
    return state


def _network_for(network, composition, database, scheme, completion, h_minus, missing_levels):
    """The given network, checked against the composition and truncation, or a new one."""
    if network is None:
        return AtomicNetwork(composition, database, scheme, completion, h_minus,
                             missing_levels)
    if network.composition is not composition or network.scheme != scheme:
        raise InputError("network was built for another composition or truncation")
    return network
