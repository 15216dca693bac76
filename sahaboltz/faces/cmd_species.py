"""``sahaboltz info`` and ``sahaboltz levels``: what the species database holds."""

from __future__ import annotations

import math

from sahaboltz.data.database import default_database
from sahaboltz.data.elements import Z_OF, atomic_number
from sahaboltz.data.species import Species
from sahaboltz.errors import InputError, NoDataError
from sahaboltz.faces.output import add_format_option, emit
from sahaboltz.faces.state_options import number_option, quantity_option


def register(sub) -> None:
    p = sub.add_parser("info", help="summarise an element or a species from the database",
                       description="Stages, ionization energies, level counts and completeness "
                                   "notes of an element ('Fe') or one species ('Fe II', 'Fe+').")
    p.add_argument("name", help="element symbol or species, e.g. Fe, 'Fe II', Fe2+")
    add_format_option(p)
    p.set_defaults(func=run_info)

    p = sub.add_parser("levels", help="list the energy levels of a species",
                       description="Energy levels of one species, lowest first.")
    p.add_argument("species", help="e.g. 'Fe II', Fe+, 'H I'")
    p.add_argument("--max-energy", type=quantity_option("eV", positive=False), default=None,
                   metavar="EV",
                   help="only levels up to this excitation energy [eV]")
    p.add_argument("--limit", type=number_option(integer=True, minimum=1), default=None,
                   metavar="N", help="at most N levels")
    p.add_argument("--autoionizing", action="store_true",
                   help="also list levels above the ionization limit")
    add_format_option(p)
    p.set_defaults(func=run_levels)


def completeness_note(sp: Species) -> str:
    """A short human statement of how complete the level list is."""
    if sp.is_bare_nucleus:
        return "bare nucleus: U = 1"
    if len(sp.levels) == 0:
        return "no level list in the source"
    bound = sp.bound_energy_ev
    if sp.is_hydrogenic:
        return f"Rydberg levels n = 1-{len(bound)}"
    if math.isnan(sp.ionization_energy_ev):
        return "no ionization energy"
    if len(bound) == 0:
        return "no bound level"
    gap = sp.ionization_energy_ev - bound.max()
    note = f"top bound level {gap:.3g} eV below the limit"
    if len(bound) == 1:
        note = "ground level only; " + note
    return note


def _species_row(sp: Species) -> dict:
    return {"species": sp.name, "charge": sp.charge,
            "ionization_eV": None if math.isinf(sp.ionization_energy_ev) else sp.ionization_energy_ev,
            "uncertainty_eV": sp.ionization_energy_uncertainty_ev,
            "levels": int(len(sp.levels)), "bound": int(sp.bound.sum()) if len(sp.levels) else 0,
            "note": completeness_note(sp)}


def run_info(args) -> int:
    db = default_database()
    name = args.name.strip()
    if name in Z_OF or (name.isalpha() and name.capitalize() in Z_OF and len(name) <= 2):
        z = atomic_number(name.capitalize())
        stages = db.element(z)
        emit([_species_row(s) for s in stages], args.format,
             title=f"{stages[0].symbol} (Z = {z}): {len(stages)} stages",
             meta={"atomic_weight_u": db.atomic_weight(z), "level_data": str(db.path)})
        return 0
    sp = db.species(name, require_levels=False)
    row = _species_row(sp)
    meta = {k: v for k, v in sp.provenance.items() if k not in ("Z", "charge")}
    emit([row], args.format, title=sp.name, meta=meta)
    return 0


def run_levels(args) -> int:
    db = default_database()
    sp = db.species(args.species)
    lv = sp.levels
    keep = (lv.energy_ev >= 0) if args.autoionizing else sp.bound
    if args.max_energy is not None:
        if not args.max_energy >= 0:
            raise InputError(f"--max-energy must be >= 0 eV, got {args.max_energy}")
        keep = keep & (lv.energy_ev <= args.max_energy)
    idx = keep.nonzero()[0]
    if args.limit is not None:
        if args.limit < 1:
            raise InputError(f"--limit must be at least 1, got {args.limit}")
        idx = idx[: args.limit]
    if len(idx) == 0:
        raise NoDataError(f"no level of {sp.name} matches the selection")
    rows = [{"index": int(i), "energy_eV": float(lv.energy_ev[i]), "energy_cm-1": float(lv.energy_cm[i]),
             "g": float(lv.g[i]), "J": lv.j[i], "configuration": lv.configuration[i],
             "term": lv.term[i], "flags": lv.flags[i]} for i in idx]
    emit(rows, args.format, title=f"{sp.name}: {len(rows)} of {len(lv)} levels "
                                  f"(ionization energy {sp.ionization_energy_ev:.6g} eV)")
    return 0
