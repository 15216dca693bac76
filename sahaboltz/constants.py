"""Physical constants in cgs, taken once from astropy (CODATA); never typed by hand."""

import astropy.constants as _c
import astropy.units as _u

#: Boltzmann constant [erg K^-1]
K_B = _c.k_B.cgs.value
#: Boltzmann constant [eV K^-1]
K_B_EV = _c.k_B.to(_u.eV / _u.K).value
#: Planck constant [erg s]
H = _c.h.cgs.value
#: speed of light [cm s^-1]
C = _c.c.cgs.value
#: electron mass [g]
M_E = _c.m_e.cgs.value
#: proton mass [g]
M_P = _c.m_p.cgs.value
#: atomic mass constant [g]
AMU = _c.u.cgs.value
#: elementary charge [statC] (Gaussian)
E_CHARGE = _c.e.gauss.value
#: electron volt [erg]
EV = (1 * _u.eV).to(_u.erg).value
#: Rydberg constant for infinite nuclear mass [cm^-1]
RYDBERG_CM = _c.Ryd.to(1 / _u.cm).value
#: h c [eV cm]: converts a wavenumber in cm^-1 into eV
HC_EV_CM = (_c.h * _c.c).to(_u.eV * _u.cm).value
#: Avogadro constant [mol^-1]
N_A = _c.N_A.value
#: gas constant [J mol^-1 K^-1]
R_GAS = _c.R.si.value
#: radiation constant a = 4 sigma / c [erg cm^-3 K^-4]
A_RAD = (4 * _c.sigma_sb / _c.c).cgs.value
