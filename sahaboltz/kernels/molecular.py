"""Dissociation equilibrium constants of diatomic molecules, interpolated in temperature.

For the process ``AB = A + B`` of each molecule (one of A, B may be an atomic ion, see
:class:`sahaboltz.data.molecules.Molecule`) the constants are

    K_p(T) = p(A) p(B) / p(AB)   [dyn cm^-2]
    K_n(T) = n(A) n(B) / n(AB) = K_p / (k T)   [cm^-3]

Interpolation
-------------
The tabulated log K_p spans ~10^9 dex over the source grid and is dominated by the Boltzmann
factor exp(-D0/kT).  We interpolate the smooth *reduced* function

    r(ln T) = ln K_p + D0/(kT) - (5/2) ln T

which, by the Saha-like dissociation formula K_p = kT (2 pi mu kT/h^2)^{3/2} (U_A U_B/U_AB)
exp(-D0/kT), is ln(U_A U_B / U_AB) plus a constant: nearly flat, slowly varying.  The
interpolant is a cubic spline (not-a-knot) of r in ln T through all tabulated nodes.  Why:

* accuracy: dropping every other node above 1000 K and predicting the dropped published values
  back, the error in log10 K_p has a median over the 291 molecules of 0.0009 dex (90 % below
  0.004, worst 0.013, BaO); PCHIP on the same test gives 0.0027 / 0.012 / 0.071 (Cs2: it
  flattens the minimum of r that the weakly bound alkali dimers have near 5000-7000 K);
  a spline of log K_p itself instead of r gives 0.012 / 0.020 / 0.033 dex (CO) - 13 times
  worse at the median - and PCHIP of log K_p 0.060 / 0.10 / 0.16;
* smoothness: the spline is C2, so d ln K / d ln T (needed for internal energies) and its
  derivative (heat capacities) are continuous; PCHIP's second derivative jumps at every node;
* no wiggles: ln K_p from the spline rises monotonically with T for all 291 molecules on a
  20,000-point grid over the whole table (1e-5 K to 10,000 K); tests/test_molecule_kernel.py
  checks it from 300 K up.  The source prints ~6 significant digits, so below ~10 K, where
  ln K_p ~ -10^4...-10^9, r is rounding noise; a spline is not local, but that noise changes
  ln K_p above 100 K by less than 3e-6 (measured against a spline through the >= 10 K nodes).

The molecular partition function is interpolated with PCHIP in ln T on ln U (it has flat-to-
rising steps at low T where a spline could undershoot; it is not needed to second order).

Outside the table
-----------------
* Below the lowest tabulated temperature (1e-5 K for the shipped data): :class:`InputError`.
  (K_p itself underflows to 0 below a few hundred K for strongly bound molecules; use the
  logarithmic forms there.)
* Above the highest tabulated temperature (10,000 K): by default molecules are treated as
  absent (``above_range="absent"``): ln K = +inf, K = inf, i.e. complete dissociation, and
  d ln K / d ln T = 0.  At 10,000 K molecules hold a negligible part of the matter at stellar
  densities; where that is not good enough, ``above_range="extrapolate"`` keeps the reduced
  function at its 10,000 K value (frozen partition-function ratio, exact T^{5/2} and Boltzmann
  factor; continuous at 10,000 K), and ``above_range="error"`` raises :class:`InputError`.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np
from scipy.interpolate import CubicSpline, PchipInterpolator

from sahaboltz.constants import K_B, K_B_EV
from sahaboltz.data.molecules import Molecule, MoleculeDatabase, default_molecule_database
from sahaboltz.data.thermo import ThermoSpecies
from sahaboltz.errors import InputError
from sahaboltz.kernels.thermo import FormationConstants
from sahaboltz.quantities import as_positive_array

ABOVE_RANGE_POLICIES = ("absent", "extrapolate", "error")
_LN10 = np.log(10.0)


class EquilibriumConstants:
    """Vectorized K_p(T), K_n(T) and d ln K / d ln T for a set of molecules.

    Parameters
    ----------
    molecules : sequence of str or Molecule
        Molecule names (``"CO"``, ``"H2"``, ``"CO+"``) or records.
    database : MoleculeDatabase, optional
        Where names are looked up; default the shipped data.
    above_range : {"absent", "extrapolate", "error"}
        Policy above the highest tabulated temperature (see the module docstring).

    Notes
    -----
    Every method takes a temperature T [K] (float, array or Quantity) and returns an array of
    shape ``(n_molecules,) + T.shape``.
    """

    def __init__(self, molecules: Sequence[str | Molecule], database: MoleculeDatabase | None = None,
                 above_range: str = "absent"):
        if above_range not in ABOVE_RANGE_POLICIES:
            raise InputError(f"above_range must be one of {ABOVE_RANGE_POLICIES}, got "
                             f"{above_range!r}")
        if isinstance(molecules, (str, Molecule)):
            molecules = [molecules]
        db = database
        recs = []
        for m in molecules:
            if isinstance(m, Molecule):
                recs.append(m)
            else:
                db = db or default_molecule_database()
                recs.append(db.molecule(m))
        self.molecules: list[Molecule] = recs
        self.above_range = above_range
        n = len(recs)
        self.dissociation_energy_ev = np.array([m.dissociation_energy_ev for m in recs])
        if n:
            self.t_min = max(m.temperature[0] for m in recs)
            self.t_max = min(m.temperature[-1] for m in recs)
        else:
            self.t_min, self.t_max = 0.0, np.inf
        # one interpolator per distinct temperature grid (the shipped data share one grid)
        self._groups: list[tuple[np.ndarray, CubicSpline, PchipInterpolator]] = []
        grids: dict[bytes, list[int]] = {}
        for i, m in enumerate(recs):
            grids.setdefault(m.temperature.tobytes(), []).append(i)
        for idx in grids.values():
            t = recs[idx[0]].temperature
            x = np.log(t)
            r = np.stack([_reduced(recs[i].log10_kp * _LN10, recs[i].dissociation_energy_ev, t)
                          for i in idx], axis=-1)
            lnu = np.stack([np.log(recs[i].partition_function) for i in idx], axis=-1)
            self._groups.append((np.array(idx), CubicSpline(x, r, axis=0, extrapolate=False),
                                 PchipInterpolator(x, lnu, axis=0, extrapolate=False)))

    @property
    def names(self) -> list[str]:
        return [m.name for m in self.molecules]

    def __len__(self) -> int:
        return len(self.molecules)

    # ------------------------------------------------------------------ evaluation
    def _prepare(self, temperature: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        t = as_positive_array(temperature, "K", "temperature")
        if len(self.molecules) and np.any(t < self.t_min):
            bad = t[t < self.t_min].min()
            raise InputError(f"temperature {bad:g} K is below the lowest tabulated temperature "
                             f"{self.t_min:g} K of the molecular data: no constants there")
        above = t > self.t_max
        if above.any() and self.above_range == "error":
            raise InputError(f"temperature {t[above].max():g} K is above the highest tabulated "
                             f"temperature {self.t_max:g} K of the molecular data; use "
                             "above_range='absent' (molecules dissociated) or 'extrapolate'")
        x = np.log(np.minimum(t, self.t_max))
        return t, x, above

    def _interp(self, x: np.ndarray, which: int, nu: int = 0) -> np.ndarray:
        out = np.empty((len(self.molecules),) + x.shape)
        for idx, f_r, f_u in self._groups:
            f = (f_r, f_u)[which]
            vals = f(x.ravel(), nu=nu)                    # (x.size, n_group)
            out[idx] = np.moveaxis(vals, -1, 0).reshape((len(idx),) + x.shape)
        return out

    def ln_kp(self, temperature: Any) -> np.ndarray:
        """Natural log of K_p [dyn cm^-2]; +inf above the table with ``above_range="absent"``."""
        t, x, above = self._prepare(temperature)
        r = self._interp(x, 0)
        d0 = self.dissociation_energy_ev.reshape((-1,) + (1,) * t.ndim)
        out = r - d0 / (K_B_EV * t) + 2.5 * np.log(t)
        if self.above_range == "absent":
            out = np.where(above, np.inf, out)
        return out

    def log10_kp(self, temperature: Any) -> np.ndarray:
        """log10 of K_p [dyn cm^-2]."""
        return self.ln_kp(temperature) / _LN10

    def kp(self, temperature: Any) -> np.ndarray:
        """K_p = p(A) p(B) / p(AB) [dyn cm^-2] (underflows to 0 at very low T)."""
        return np.exp(self.ln_kp(temperature))

    def ln_kn(self, temperature: Any) -> np.ndarray:
        """Natural log of K_n = n(A) n(B) / n(AB) = K_p / (kT) [cm^-3]."""
        t = as_positive_array(temperature, "K", "temperature")
        return self.ln_kp(t) - np.log(K_B * t)

    def kn(self, temperature: Any) -> np.ndarray:
        """K_n = n(A) n(B) / n(AB) [cm^-3]."""
        return np.exp(self.ln_kn(temperature))

    def dln_kp_dln_t(self, temperature: Any) -> np.ndarray:
        """d ln K_p / d ln T (= dissociation enthalpy / kT + 1); 0 where molecules are absent."""
        t, x, above = self._prepare(temperature)
        dr = self._interp(x, 0, nu=1)
        d0 = self.dissociation_energy_ev.reshape((-1,) + (1,) * t.ndim)
        out = dr + d0 / (K_B_EV * t) + 2.5
        if self.above_range != "extrapolate":
            out = np.where(above, 0.0, out)
        else:
            out = np.where(above, d0 / (K_B_EV * t) + 2.5, out)
        return out

    def dln_kn_dln_t(self, temperature: Any) -> np.ndarray:
        """d ln K_n / d ln T = d ln K_p / d ln T - 1 (0 where molecules are absent)."""
        t, _, above = self._prepare(temperature)
        out = self.dln_kp_dln_t(t) - 1.0
        return out if self.above_range == "extrapolate" else np.where(above, 0.0, out)

    def ln_kn_derivatives(self, temperature: Any) -> tuple[np.ndarray, np.ndarray]:
        """d ln K_n / d ln T and d2 ln K_n / d ln T^2 from the spline of the reduced function:
        ln K_n = r(ln T) - D0/kT + (3/2) ln T + const, so the first is r' + D0/kT + 3/2 and
        the second r'' - D0/kT (both 0 where molecules are absent; with "extrapolate" r is
        frozen above the table)."""
        t, x, above = self._prepare(temperature)
        d0 = self.dissociation_energy_ev.reshape((-1,) + (1,) * t.ndim) / (K_B_EV * t)
        d1 = self._interp(x, 0, nu=1) + d0 + 1.5
        d2 = self._interp(x, 0, nu=2) - d0
        if self.above_range == "extrapolate":
            d1 = np.where(above, d0 + 1.5, d1)
            d2 = np.where(above, -d0, d2)
        else:
            d1 = np.where(above, 0.0, d1)
            d2 = np.where(above, 0.0, d2)
        return d1, d2

    def partition_function(self, temperature: Any) -> np.ndarray:
        """Molecular partition function U_AB (PCHIP in ln T on ln U; above the table it is held at
        its value at the highest tabulated temperature)."""
        _, x, _ = self._prepare(temperature)
        return np.exp(self._interp(x, 1))


def _reduced(ln_kp: np.ndarray, d0_ev: float, t: np.ndarray) -> np.ndarray:
    """r = ln K_p + D0/kT - 5/2 ln T: the smooth part of ln K_p."""
    return ln_kp + d0_ev / (K_B_EV * t) - 2.5 * np.log(t)


def equilibrium_constant(molecule: str | Molecule, temperature: Any, *, form: str = "pressure",
                         database: MoleculeDatabase | None = None,
                         above_range: str = "absent") -> np.ndarray:
    """K_p [dyn cm^-2] (``form="pressure"``) or K_n [cm^-3] (``form="density"``) of one molecule.

    Returns an array of the shape of ``temperature``.  See :class:`EquilibriumConstants`.
    """
    model = EquilibriumConstants([molecule], database=database, above_range=above_range)
    if form == "pressure":
        return model.kp(temperature)[0]
    if form == "density":
        return model.kn(temperature)[0]
    raise InputError(f"form must be 'pressure' or 'density', got {form!r}")


class MoleculeConstants:
    """ln K_n of a mixed list of molecules: Barklem & Collet diatomics (their two-body process,
    :class:`EquilibriumConstants`) and species of the NASA polynomials (formation from the
    neutral atoms and electrons, :class:`sahaboltz.kernels.thermo.FormationConstants`).

    Both kinds give ln n_M = sum over the process's atomic species of ln n - q_e ln n_e
    - ln K_n, with the stage factors of ion components added by the caller; +inf outside a
    molecule's data (the molecule is absent there, see :meth:`absent`).
    """

    def __init__(self, molecules: Sequence[Any], above_range: str = "absent"):
        self.molecules = list(molecules)
        self._bc = [i for i, m in enumerate(self.molecules) if isinstance(m, Molecule)]
        self._th = [i for i, m in enumerate(self.molecules) if isinstance(m, ThermoSpecies)]
        if len(self._bc) + len(self._th) != len(self.molecules):
            raise InputError("molecules must be Molecule or ThermoSpecies records")
        self.diatomic = EquilibriumConstants([self.molecules[i] for i in self._bc],
                                             above_range=above_range) if self._bc else None
        self.formation = (FormationConstants([self.molecules[i] for i in self._th])
                          if self._th else None)
        self.t_max = np.full(len(self.molecules), np.inf)
        if self.diatomic is not None:
            self.t_max[self._bc] = self.diatomic.t_max
        if self.formation is not None:
            self.t_max[self._th] = self.formation.t_max

    def __len__(self) -> int:
        return len(self.molecules)

    def ln_kn(self, temperature: Any) -> np.ndarray:
        t = as_positive_array(temperature, "K", "temperature")
        out = np.empty((len(self.molecules),) + t.shape)
        if self.diatomic is not None:
            out[self._bc] = self.diatomic.ln_kn(t)
        if self.formation is not None:
            out[self._th] = self.formation.ln_kn(t)
        return out

    def ln_kn_derivatives(self, temperature: Any) -> tuple[np.ndarray, np.ndarray]:
        """d ln K_n / d ln T and d2 ln K_n / d ln T^2, (n,) + T.shape each (0 where absent)."""
        t = as_positive_array(temperature, "K", "temperature")
        d1 = np.zeros((len(self.molecules),) + t.shape)
        d2 = np.zeros_like(d1)
        for idx, model in ((self._bc, self.diatomic), (self._th, self.formation)):
            if model is not None:
                d1[idx], d2[idx] = model.ln_kn_derivatives(t)
        return d1, d2

    def absent(self, temperature: Any) -> np.ndarray:
        """True where a molecule has no constant (outside its data): (n,) + T.shape."""
        return np.isinf(self.ln_kn(temperature))
