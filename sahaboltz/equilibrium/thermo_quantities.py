"""Names, units and descriptions of the thermodynamic quantities of a state.

Apart from :mod:`~sahaboltz.equilibrium.thermodynamics` (which computes them) so that table
specs and option parsers can list them without importing the constants (astropy).
"""

from __future__ import annotations

#: name -> (unit, description) of every quantity of :class:`Thermodynamics`
QUANTITIES = {
    "pressure": ("dyn cm-2", "total pressure (gas, and radiation when included)"),
    "internal_energy": ("erg g-1", "specific internal energy (zero point: neutral ground-state "
                                   "atoms and free electrons at rest)"),
    "enthalpy": ("erg g-1", "specific enthalpy u + P / rho"),
    "entropy": ("erg g-1 K-1", "specific entropy (Sackur-Tetrode with internal partition "
                               "functions)"),
    "heat_capacity_v": ("erg g-1 K-1", "specific heat at constant volume"),
    "heat_capacity_p": ("erg g-1 K-1", "specific heat at constant pressure"),
    "adiabatic_gradient": ("", "nabla_ad = (d ln T / d ln P) at constant entropy"),
    "gamma1": ("", "Gamma_1 = (d ln P / d ln rho) adiabatic"),
    "gamma3": ("", "Gamma_3 = 1 + (d ln T / d ln rho) adiabatic"),
    "chi_t": ("", "chi_T = (d ln P / d ln T) at constant rho"),
    "chi_rho": ("", "chi_rho = (d ln P / d ln rho) at constant T"),
    "delta": ("", "delta = -(d ln rho / d ln T) at constant P"),
    "sound_speed": ("cm s-1", "adiabatic sound speed sqrt(Gamma_1 P / rho)"),
    "mean_molecular_weight": ("", "mu = rho / (m_u n_particles), gas particles only"),
    "dlnmu_dlnt": ("", "(d ln mu / d ln T) at constant P"),
}

__all__ = ["QUANTITIES"]
