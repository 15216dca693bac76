"""Thermodynamics of a solved LTE state: energy, entropy and the response functions.

The gas is an ideal mixture of species j (atoms and ions of every stage, H-, molecules,
electrons) with densities n_j.  Each has a single-particle partition function per volume

    Q_j(T, n_e) = (2 pi m_j k T / h^2)^{3/2} U_j(T, n_e) exp(-E_j / kT),

U_j the internal partition function the solve used (occupation weights included) and E_j the
energy of the species' ground state above the zero point: **neutral atoms in their ground
levels and free electrons, all at rest**.  So E = chi_0 + ... + chi_{q-1} for stage q (the
sum of the ionization energies), E = -0.754 eV for H-, E = -(binding energy) for a molecule;
for a molecule Q comes from its equilibrium constant, Q_AB = Q_A Q_B / K_n(T).  With
a_j = d ln Q_j / d ln T (at fixed n_e) = 3/2 + d ln U_j / d ln T + E_j / kT:

    internal energy per volume   E = k T sum_j n_j a_j                  (+ a T^4)
    pressure                     P = k T sum_j n_j                      (+ a T^4 / 3)
    entropy per volume           S = k sum_j n_j [1 + a_j - ln(n_j / Q_j)]   (+ 4 a T^3 / 3)

(S is the Sackur-Tetrode sum of every species with its internal partition function; the
electrons have U = 2, a = 3/2.)  In equilibrium ln(n_j / Q_j) = sum_c nu_jc lambda_c, with
nu_jc the atoms of element c in j and the charge, and lambda_c the element potentials; so
sum_j n_j ln(n_j / Q_j) = sum_k N alpha_k lambda_k, which needs one stage per element.

Derivatives
-----------
Every derivative is exact: the equilibrium relations ln n_j = ln Q_j(T, n_e) + nu_j . lambda,
with the element totals N alpha_k and charge neutrality, are differentiated implicitly.  At
fixed T or fixed N (i.e. rho) a change d ln T, d ln N moves the potentials by the solution of

    sum_j nu_jc n_j [A_j d ln T + (nu_j - D_j e_charge) . d lambda] = N alpha_c d ln N,

A_j = a_j + (3/2) D_j, D_j = d ln U_j / d ln n_e: the Jacobian of the element and charge
balances (the Gram matrix sum_j n_j nu_j nu_j^T, with the occupation weights' density
dependence in the charge column).  Elements that are in no molecule are eliminated by hand
(a diagonal block), so the linear solve per state is 1 x 1 for atoms alone and
(1 + elements in molecules) for molecules.  c_v then needs the second derivatives of ln U and
ln K (:meth:`sahaboltz.kernels.partition.PartitionModel.pair_log_derivatives`,
:meth:`sahaboltz.kernels.molecular.MoleculeConstants.ln_kn_derivatives`).

Response functions follow from u(T, rho) and P(T, rho) and the first law
dq = du + P d(1/rho): c_v = (du/dT)_rho, Gamma_3 - 1 = (P/rho - (du/d ln rho)_T) / (du/d ln T)_rho,
Gamma_1 = chi_rho + chi_T (Gamma_3 - 1), nabla_ad = (Gamma_3 - 1) / Gamma_1,
c_p = c_v + (P/rho - (du/d ln rho)_T) delta / T, delta = chi_T / chi_rho.

Density-dependent weights
-------------------------
Saha with U(n_e) is not the minimum of an ideal free energy, so with occupation probabilities
the identities that need one (c_p - c_v = P chi_T^2 / (rho T chi_rho), the Maxwell relations,
T ds = du + P d(1/rho)) hold only to the size of d ln U / d ln n_e.  We take u, P and s as
defined above on the solver's equilibrium, and every response function from u and P through
the first law (what a hydrodynamics code conserves); docs/thermodynamics.md gives the measured
size of the mismatch.

Debye-Hueckel lowering
----------------------
Saha with the lowering (z + 1) e^2 / lambda_D is the minimum of the ideal free energy plus
F_DH / V = -kT / (12 pi lambda_D^3); with eps = kappa S = 1 / (8 pi lambda_D^3),
kappa = e^2 / (2 lambda_D kT), S = n_e + sum z^2 n, that adds -kT eps to E, -kT eps / 3 to P
and -k eps / 3 to S, and in the screened gas sum_j n_j ln(n_j / Q_j) gains kappa S.  kappa is
a third column of the derivatives, closed by d ln kappa = -1.5 d ln T + 0.5 d ln S (see
:func:`sahaboltz.equilibrium.compiled_thermodynamics.screening_increments`).  The gas-pressure
closure keeps fixing kT sum n; ``pressure`` includes the Debye-Hueckel term.

Condensates
-----------
A present condensed compound j (G_j per cm^3) keeps sum_k V_jk ln n_k0 = ln K_j(T) over the
neutral atoms; its energy per formula unit is e_j = kT (V_j . a_0 - d ln K_j / d ln T)
(Gibbs-Helmholtz on its chemical potential kT (ln K_j - V_j . ln Q_0)), so E gains
sum_j G_j e_j and S gains the same over T (sum_k N alpha_k lambda_k then counts the condensed
atoms too); its amount and saturation are a column and a row of the Jacobian
(:func:`_with_condensates`).
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass

import numpy as np

from sahaboltz.constants import A_RAD, AMU, K_B, K_B_EV, M_E
from sahaboltz.equilibrium import compiled_newton
from sahaboltz.equilibrium import compiled_thermodynamics as _compiled_sums
from sahaboltz.equilibrium.thermo_quantities import QUANTITIES
from sahaboltz.errors import InputError
from sahaboltz.kernels.plasma import _log_quantum_concentration, _lowering_ev

__all__ = ["Thermodynamics", "thermodynamics", "QUANTITIES"]

# the names, units and descriptions of the quantities: thermo_quantities (light to import)

# stages below e^-_THR of their element's largest stage are left out (they cannot change a
# double-precision sum); the density-dependent U are bounded by their low-density limit
_THR = 40.0
# and a stage below e^-_THR_ALL of all nuclei too (rare elements)
_THR_ALL = 40.0
# (species x states) elements per chunk
_CHUNK_ELEMENTS = 1 << 24


@dataclass
class Thermodynamics:
    """Thermodynamic quantities of every state (arrays of the state shape; NaN where the
    state was not solved).  Units: cgs per gram (see :data:`QUANTITIES`).

    Besides the quantities of :data:`QUANTITIES` it holds the partial derivatives they are
    built from: ``du_dlnt`` = (du/d ln T)_rho, ``du_dlnrho`` = (du/d ln rho)_T, ``ds_dlnt``,
    ``ds_dlnrho`` (the same of s, differentiated from its own formula), ``gas_pressure``,
    ``chi_t_gas``, ``chi_rho_gas`` (the gas alone), ``chi_t_particles``,
    ``chi_rho_particles`` (those of the particle pressure kT sum n, which the gas-pressure
    closure fixes: with lowering the gas pressure adds ``debye_hueckel_pressure``,
    -kT / (24 pi lambda_D^3), to it; 0 without lowering) and ``radiation`` (whether a T^4
    field is included).
    """

    radiation: bool
    pressure: np.ndarray
    gas_pressure: np.ndarray
    mass_density: np.ndarray
    internal_energy: np.ndarray
    entropy: np.ndarray
    du_dlnt: np.ndarray
    du_dlnrho: np.ndarray
    ds_dlnt: np.ndarray
    ds_dlnrho: np.ndarray
    chi_t: np.ndarray
    chi_rho: np.ndarray
    chi_t_gas: np.ndarray
    chi_rho_gas: np.ndarray
    chi_t_particles: np.ndarray
    chi_rho_particles: np.ndarray
    debye_hueckel_pressure: np.ndarray
    mean_molecular_weight: np.ndarray
    temperature: np.ndarray

    # -- derived through the first law --------------------------------------------------
    @property
    def enthalpy(self) -> np.ndarray:
        return self.internal_energy + self.pressure / self.mass_density

    @property
    def heat_capacity_v(self) -> np.ndarray:
        return self.du_dlnt / self.temperature

    @property
    def _heat_per_dlnrho(self) -> np.ndarray:
        """-(dq / d ln rho)_T = P/rho - (du/d ln rho)_T."""
        return self.pressure / self.mass_density - self.du_dlnrho

    @property
    def delta(self) -> np.ndarray:
        return self.chi_t / self.chi_rho

    @property
    def heat_capacity_p(self) -> np.ndarray:
        return (self.du_dlnt + self._heat_per_dlnrho * self.delta) / self.temperature

    @property
    def gamma3(self) -> np.ndarray:
        return 1.0 + self._heat_per_dlnrho / self.du_dlnt

    @property
    def gamma1(self) -> np.ndarray:
        return self.chi_rho + self.chi_t * (self.gamma3 - 1.0)

    @property
    def adiabatic_gradient(self) -> np.ndarray:
        return (self.gamma3 - 1.0) / self.gamma1

    @property
    def sound_speed(self) -> np.ndarray:
        return np.sqrt(self.gamma1 * self.pressure / self.mass_density)

    @property
    def dlnmu_dlnt(self) -> np.ndarray:
        """(d ln mu / d ln T) at constant total P: mu = rho / (m_u n), n the particles."""
        d = self.delta
        dln_n = (self.chi_t_particles - 1.0) - self.chi_rho_particles * d
        return -d - dln_n

    @property
    def ds_dlnt_p(self) -> np.ndarray:
        """(ds / d ln T) at constant particle pressure kT sum n (the gas pressure the
        closures fix; the slope the (P, s) closure needs)."""
        return self.ds_dlnt - self.ds_dlnrho * self.chi_t_particles / self.chi_rho_particles

    def get(self, name: str) -> np.ndarray:
        """A quantity of :data:`QUANTITIES` by name."""
        if name not in QUANTITIES:
            raise InputError(f"unknown thermodynamic quantity {name!r}; choose one of "
                             f"{', '.join(QUANTITIES)}")
        return getattr(self, name)


def thermodynamics(state, radiation: bool = False) -> Thermodynamics:
    """The thermodynamic quantities of a solved state (see the module docstring).

    Parameters
    ----------
    state : EquilibriumState or MolecularEquilibriumState
    radiation : bool
        Add black-body radiation at T: a T^4 / 3 to P, a T^4 to the energy per volume,
        4 a T^3 / 3 to the entropy per volume (default off).
    """
    net = state.network
    shape = state.shape
    ok = state.converged.ravel()
    t_all = state.temperature.ravel()
    keys = ("n_tot", "dn_t", "dn_n", "ea", "dea_t", "dea_n", "s_corr", "ds_corr_t", "ds_corr_n",
            "eps", "deps_t", "deps_n")
    acc = {k: np.full(t_all.size, np.nan) for k in keys}
    idx_ok = np.flatnonzero(ok)
    if idx_ok.size:
        order = idx_ok[np.argsort(t_all[idx_ok], kind="stable")]
        n_sp = net.n_species + len(getattr(getattr(state, "system", None), "molecules", ()))
        chunk = max(1, _CHUNK_ELEMENTS // max(1, n_sp))
        for c0 in range(0, order.size, chunk):
            sel = order[c0:c0 + chunk]
            out = _chunk(state, sel)
            for k in keys:
                acc[k][sel] = out[k]
    t = t_all
    nuc = state.nuclei_density.ravel()
    rho = nuc * state.composition.mean_mass_amu * AMU
    kt = K_B * t
    n_tot = acc["n_tot"]
    # the Debye-Hueckel terms (0 without lowering): eps = kappa sum z^2 n = 1 / (8 pi lambda_D^3)
    # gives E_DH = -kT eps, P_DH = -kT eps / 3, S_DH = -k eps / 3
    eps, deps_t, deps_n = acc["eps"], acc["deps_t"], acc["deps_n"]
    n_p = n_tot - eps / 3.0
    p_gas = n_p * kt
    chi_t_gas = 1.0 + (acc["dn_t"] - deps_t / 3.0) / n_p
    chi_rho_gas = (acc["dn_n"] - deps_n / 3.0) / n_p
    e_vol = kt * (acc["ea"] - eps)
    e_t = kt * (acc["ea"] - eps + acc["dea_t"] - deps_t)
    e_n = kt * (acc["dea_n"] - deps_n)
    s_vol = K_B * (n_tot + acc["ea"] - acc["s_corr"] - 4.0 / 3.0 * eps)
    s_t = K_B * (acc["dn_t"] + acc["dea_t"] - acc["ds_corr_t"] - 4.0 / 3.0 * deps_t)
    s_n = K_B * (acc["dn_n"] + acc["dea_n"] - acc["ds_corr_n"] - 4.0 / 3.0 * deps_n)
    p = p_gas.copy()
    chi_t = chi_t_gas.copy()
    chi_rho = chi_rho_gas.copy()
    if radiation:
        at4 = A_RAD * t**4
        p = p_gas + at4 / 3.0
        chi_t = (p_gas * chi_t_gas + 4.0 * at4 / 3.0) / p
        chi_rho = p_gas * chi_rho_gas / p
        e_vol = e_vol + at4
        e_t = e_t + 4.0 * at4
        s_rad = 4.0 * at4 / (3.0 * t)
        s_vol = s_vol + s_rad
        s_t = s_t + 3.0 * s_rad
    u = e_vol / rho
    s = s_vol / rho

    def sh(a):
        return a.reshape(shape)

    return Thermodynamics(
        radiation=bool(radiation), pressure=sh(p), gas_pressure=sh(p_gas), mass_density=sh(rho),
        internal_energy=sh(u), entropy=sh(s), du_dlnt=sh(e_t / rho),
        du_dlnrho=sh(e_n / rho - u), ds_dlnt=sh(s_t / rho), ds_dlnrho=sh(s_n / rho - s),
        chi_t=sh(chi_t), chi_rho=sh(chi_rho), chi_t_gas=sh(chi_t_gas),
        chi_rho_gas=sh(chi_rho_gas), chi_t_particles=sh(1.0 + acc["dn_t"] / n_tot),
        chi_rho_particles=sh(acc["dn_n"] / n_tot),
        debye_hueckel_pressure=sh(-kt * eps / 3.0), mean_molecular_weight=sh(rho / (AMU * n_tot)),
        temperature=sh(t.copy()))


# ------------------------------------------------------------------------------ the work
def _stage_energies(chain) -> np.ndarray:
    """E of every stage of a chain above its neutral atom [eV] (H-: minus the affinity)."""
    cum = np.concatenate([[0.0], np.cumsum(chain.chi_ev)])
    i0 = int(np.flatnonzero(chain.charges == 0)[0])
    return cum - cum[i0]


def _distinct_keys(key: np.ndarray, size: int) -> tuple[np.ndarray, np.ndarray]:
    """np.unique(key, return_inverse=True) for keys in [0, size): by a table, not a sort."""
    seen = np.zeros(size, dtype=bool)
    seen[key] = True
    distinct = np.flatnonzero(seen)
    position = np.empty(size, dtype=np.intp)
    position[distinct] = np.arange(distinct.size)
    return distinct, position[key]


def _log_u_values(net, chain, rows, inside, t, ne, tinv, ut, factors, debye=None):
    """ln U and its derivatives (ln U, U_T, U_n, U_TT, U_Tn) of a chain's stages ``rows``
    (W, m) where ``inside``, as values ``vals`` (5, K) and each window position's index into
    them ``idx`` (W, m), -1 where U = 1 (a stage without levels: all five 0).  With T-only U
    the values are those of the (stage, temperature) that occur, shared by the states, so
    that no (5, W, m) arrays need filling; the density derivatives only with
    density-dependent weights (``factors``: the weights' state factors,
    ``PartitionModel.log_derivative_state_factors``); for a scheme cut at the lowered limit,
    the cut of the Debye length ``debye`` of each state."""
    w, m = rows.shape
    idx = np.full((w, m), -1, dtype=np.intp)
    vals = np.zeros((5, 0))
    mrow = chain.model_rows[rows]
    has = (mrow >= 0) & inside
    if chain.model is not None and has.any():
        model = net.model
        at = np.flatnonzero(has)               # flat (stage, state) positions: one index
        j = at % m
        mr = mrow.ravel()[at]
        if net.ideal:
            # the partition functions depend on T alone: once per (stage, distinct T)
            key, inv = _distinct_keys(mr * ut.size + tinv[j], chain.n * ut.size)
            vals = model.pair_log_derivatives(ut[key % ut.size], None,
                                              chain.model_offset + key // ut.size)
            idx.reshape(-1)[at] = inv
        else:
            if "lowering_ev" in net.scheme.inputs:
                flat = chain.model_offset + mr
                low = net.bounded_lowering(_lowering_ev(chain.charges[rows.ravel()[at]],
                                                        debye[j]),
                                           model.ionization_energy_ev[flat])
                vals = model.pair_log_derivatives(t[j], None, flat, lowering_ev=low)
            else:
                vals = model.pair_log_derivatives(t, ne, chain.model_offset + mr,
                                                  states=j, state_factors=factors,
                                                  temperature_index=tinv)
            idx.reshape(-1)[at] = np.arange(at.size)
        vals = np.asarray(vals)        # (the rows of one array: no copy)
    if chain.charges[0] < 0 and not net.ideal:
        wts = net.scheme.bound_state_weight_derivatives(float(chain.chi_ev[0]), t, ne)
        if wts is not None:
            # a value per state, after the others
            neg = (rows == 0) & inside
            k0 = vals.shape[1]
            vals = np.concatenate([vals, np.stack([np.broadcast_to(v, (m,)) for v in wts])],
                                  axis=1)
            idx[neg] = k0 + np.nonzero(neg)[1]
    return vals, idx


def _log_u_terms(vals, idx) -> list:
    """The five (W, m) arrays of the values of :func:`_log_u_values` (0 where U = 1)."""
    out = []
    for v in vals:
        a = np.take(v, idx, mode="clip") if v.size else np.zeros(idx.shape)
        a[idx < 0] = 0.0
        out.append(a)
    return out


def _with_condensates(state, system, sel, t, nuc, kept, mat, rhs, ch):
    """The Jacobian and right-hand sides with a column and a row per condensed compound j.

    A present compound (G_j = gamma_j N formula units per cm^3 > 0) keeps the gas saturated,
    sum_k V_jk ln n_k0 = ln K_j(T) over the neutral atoms k0, so
    sum_k V_jk (d lambda_k - D_k0 d lambda_ch) = (d ln K_j / d ln T - V_j . A_0) d ln T, and
    its atoms enter the element balances (sum_k ... + V_jk dG_j); an absent one stays absent
    (dG_j = 0).  Returns the extended (mat, rhs) and (G, e_hat, de_hat/d ln T at fixed n_e,
    de_hat/d ln n_e), e_hat = e_j / kT the energy per formula unit above the zero point.
    """
    nc = system.n_cond
    km = len(system.mol_chains)
    m, r_dim, n_col = rhs.shape
    g_c = state._gamma.reshape(nc, -1)[:, sel] * nuc[None, :]
    present = g_c > 0.0
    k1, k2 = (v.reshape(nc, -1) for v in system.cond_constants.ln_kn_derivatives(t))
    neutral = np.zeros((4, km, m))                      # a, b, c, d of each neutral atom
    for p, st in kept.items():
        at = (int(np.flatnonzero(st["charges"] == 0)[0]) - st["rows"][0])[None, :]
        for i, key in enumerate(("a", "b", "c", "d")):
            neutral[i, p] = np.take_along_axis(st[key], at, axis=0)[0]
    a0, b0, c0, d0 = neutral
    v = system.V                                        # (nc, km)
    big = np.zeros((m, r_dim + nc, r_dim + nc))
    big[:, :r_dim, :r_dim] = mat
    rb = np.zeros((m, r_dim + nc, n_col))
    rb[:, :r_dim] = rhs
    for j in range(nc):
        cj = r_dim + j
        on = present[j]
        big[:, :km, cj] = v[j][None, :]
        big[on, cj, :km] = v[j][None, :]
        big[on, cj, ch] = -(v[j] @ d0)[on]
        rb[on, cj, 0] = (k1[j] - v[j] @ (a0 + 1.5 * d0))[on]
        big[~on, cj, cj] = 1.0
    e_hat = np.where(present, v @ a0 - k1, 0.0)
    de_t = np.where(present, v @ b0 - k2, 0.0)
    de_x = np.where(present, v @ c0, 0.0)
    return big, rb, (g_c, e_hat, de_t, de_x)


_BOUNDS: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def _log_u_bounds(net, chain) -> tuple[np.ndarray, np.ndarray]:
    """Bounds ln g_ground <= ln U <= ln sum_i g_i of every stage of a chain for partition
    functions that depend on T alone (U = 1 for stages without levels and H-)."""
    per_net = _BOUNDS.setdefault(net, {})
    if chain.k not in per_net:
        lo = np.zeros(chain.n)
        hi = np.zeros(chain.n)
        model = net.model
        for r, row in enumerate(chain.model_rows):
            if row < 0:
                continue
            i = chain.model_offset + row
            lng = model._lng[model._starts[i]:model._starts[i] + model._counts[i]]
            lo[r] = lng[np.isfinite(lng)][0]
            top = lng.max()
            hi[r] = top + np.log(np.exp(lng - top).sum())
        per_net[chain.k] = (lo, hi)
    return per_net[chain.k]


def _window(lo: np.ndarray, hi: np.ndarray, n: int, forced: list) -> np.ndarray:
    """Rows (W, m) of the smallest common-width windows that hold the stages ``lo`` to ``hi``
    of each state (of ``n``) and the ``forced`` ones."""
    if forced:
        lo = np.minimum(lo, min(forced))
        hi = np.maximum(hi, max(forced))
    width = int((hi - lo).max()) + 1
    s0 = np.minimum(lo, n - width)
    return s0[None, :] + np.arange(width)[:, None]


def _significant_rows(tab, tinv, x, charges, kq, kap, u_hi, u_lo, thr, forced):
    """The window rows (W, m) of a chain's significant stages and which of them are
    significant (``inside``; the ``forced`` ones always): stage r at state j with
    a_r + u_hi_r >= max_s (a_s + u_lo_s) - thr, a_r = tab[r, tinv[j]] - q_r x_j + kq_r kap_j
    (``tab``: stages x distinct temperatures; u_hi, u_lo: bounds of ln U or 0)."""
    n = charges.size
    if _compiled_sums.available():
        # a_r = C_r - q_r x: the stages' significance intervals bound each state's window
        # where temperatures are shared (those of the solver's windows, supersets)
        lohi = (None if kq.any() or u_hi.any() or u_lo.any()
                else compiled_newton.interval_windows(charges, tab, tinv, x, thr))
        if lohi is None:
            lohi = _compiled_sums.significance_bounds(tab, tinv, x, charges, kq, kap, u_hi,
                                                      u_lo, thr)
        lo, hi = lohi
        rows = _window(lo, hi, n, forced)
        inside = _compiled_sums.inside_rows(tab, tinv, x, charges, kq, kap, u_hi, u_lo, thr,
                                            rows)
    else:
        a0 = tab[:, tinv] - np.multiply.outer(charges, x) + np.multiply.outer(kq, kap)
        sig = a0 + u_hi[:, None] >= (a0 + u_lo[:, None]).max(axis=0) - thr
        rows = _window(np.argmax(sig, axis=0), n - 1 - np.argmax(sig[::-1], axis=0), n,
                       forced)
        inside = np.take_along_axis(sig, rows, axis=0)
    for row in forced:
        inside |= rows == row
    return rows, inside


def _chunk(state, sel) -> dict:
    net = state.network
    comp = state.composition
    system = getattr(state, "system", None)
    t = state.temperature.ravel()[sel]
    x = state.log_ne.ravel()[sel]
    ne = np.exp(x)
    nuc = state.nuclei_density.ravel()[sel]
    m = t.size
    ut, tinv = np.unique(t, return_inverse=True)
    beta = 1.0 / (K_B_EV * t)
    lq = _log_quantum_concentration(t)                 # ln (2 pi m_e k T / h^2)^{3/2}
    ln_qe = np.log(2.0) + lq
    lam_ch = ln_qe - x
    weights = comp.atomic_weights()
    mol_pos = {} if system is None else {c.k: i for i, c in enumerate(system.mol_chains)}
    km = len(mol_pos)
    r_dim = km + 1
    ch = km                                             # the charge row / column
    y = (None if system is None else
         state.log_neutral.reshape(km, -1)[:, sel])
    comp_rows = {}                                      # chain position -> component stages
    if system is not None:
        for comps in system._comp:
            for p, row in comps:
                comp_rows.setdefault(p, set()).add(row)
    lowered_cut = "lowering_ev" in net.scheme.inputs
    factors = (None if net.ideal or net.model is None or lowered_cut
               else net.model.log_derivative_state_factors(t, ne))
    # Debye-Hueckel lowering: kappa = e^2 / (2 lambda_D k T) (half the lowering of a neutral
    # atom over kT) is a third column of the derivatives (see screening_increments)
    screened = bool(state.lowering)
    if screened and (km or system is not None and len(system.molecules)):
        raise InputError("thermodynamics with lowering: molecules are solved without it")
    debye = state.debye_length.ravel()[sel] if screened else None
    kap = 0.5 * beta * _lowering_ev(0.0, debye) if screened else None
    kap_or_0 = kap if screened else np.zeros(m)        # (the windows' test takes an array)
    n_col = 3 if screened else 2
    mat = np.zeros((m, r_dim, r_dim))
    rhs = np.zeros((m, r_dim, n_col))
    # the eliminated chains' shares (_compiled_sums.eliminated_increments), summed
    acc = np.zeros((_compiled_sums.N_ACC, m))
    frac_elim = 0.0
    fast = _compiled_sums.available()
    kept = {}                                           # position -> per-stage arrays
    s_corr = np.zeros(m)
    for c in net.chains:
        i0 = int(np.flatnonzero(c.charges == 0)[0])
        bare = net.bare_log_c(c, ut)
        # significant: within e^-_THR of the element's largest stage and (for rare elements)
        # above e^-_THR_ALL of all nuclei
        thr = max(2.0, min(_THR, _THR_ALL + np.log(c.fraction)))
        zero = np.zeros(c.n)
        kq = c.charges * (c.charges + 1.0) if screened else zero
        if net.ideal and ut.size * 8 > m:
            # temperatures hardly shared: rather than every U at every temperature, bounds of
            # ln U decide (a superset of the stages)
            tab = bare
            u_lo, u_hi = _log_u_bounds(net, c)
        else:
            # ln U at each distinct T (exact for T-only U; for density-dependent U their
            # low-density limit, which bounds each from above): the solver's tables
            tab = state.saha_table(c, ut)
            u_lo = u_hi = zero
        p = mol_pos.get(c.k)
        forced = [] if p is None else sorted({i0} | comp_rows.get(p, set()))
        rows, inside = _significant_rows(tab, tinv, x, c.charges, kq, kap_or_0, u_hi, u_lo,
                                         thr, forced)
        vals, idx = _log_u_values(net, c, rows, inside, t, ne, tinv, ut, factors, debye)
        terms = None
        if screened or p is not None or not fast:
            terms = _log_u_terms(vals, idx)
        if screened:
            # the lowering's share of ln n (from the first stage): kappa q (q + 1), carried
            # with ln U so that lambda_k comes out as the element potential of the screened gas
            qr = c.charges[rows]
            terms[0] = terms[0] + qr * (qr + 1.0) * kap[None, :]
            vals, idx = np.stack(terms).reshape(5, -1), np.arange(rows.size).reshape(rows.shape)
        mass_term = 1.5 * np.log(weights[c.k] * AMU / M_E)
        if p is None:
            frac_elim += c.fraction
        if p is None and fast:
            _compiled_sums.eliminated_chain_sums(rows, inside, bare, tinv, x, c.charges,
                                                 _stage_energies(c), beta, vals, idx,
                                                 nuc * c.fraction, lq, mass_term, lam_ch, acc,
                                                 screened)
            continue
        q = c.charges[rows]
        lu, u_t, u_n, u_tt, u_tn = terms
        ln_rel = np.take(bare.ravel(), rows * ut.size + tinv[None, :]) + lu - q * x[None, :]
        ln_rel = np.where(inside, ln_rel, -np.inf)
        if p is None:
            top = ln_rel.max(axis=0)
            ln_n = ln_rel - (top + np.log(np.exp(ln_rel - top).sum(axis=0)))
            ln_n += np.log(nuc * c.fraction)[None, :]
        else:
            at0 = np.take_along_axis(ln_rel, (i0 - rows[0])[None, :], axis=0)[0]
            ln_n = y[p][None, :] + ln_rel - at0[None, :]
        n = np.exp(ln_n)
        eb = _stage_energies(c)[rows] * beta[None, :]
        a = np.where(inside, 1.5 + u_t + eb, 0.0)
        b = np.where(inside, u_tt - eb, 0.0)
        d = u_n
        cc = u_tn
        big_a = a + 1.5 * d
        # element potential from the most populated stage: lambda_k = ln(n_r/Q_r) - q_r lambda_ch
        r = np.argmax(ln_n, axis=0)[None, :]

        def take(arr):
            return np.take_along_axis(arr, r, axis=0)[0]

        ln_q_r = lq + mass_term + take(lu) - take(eb)
        lam_k = take(ln_n) - ln_q_r - take(q) * lam_ch
        nq = n * q
        nd = n * d
        na = n * a
        st = {"rows": rows, "charges": c.charges, "q": q, "a": a, "b": b, "d": d, "c": cc, "lam": lam_k,
              "Na": nuc * c.fraction,
              "S0": n.sum(axis=0), "Sq": nq.sum(axis=0), "Sqq": (nq * q).sum(axis=0),
              "SD": nd.sum(axis=0), "SqD": (nq * d).sum(axis=0),
              "SA": (n * big_a).sum(axis=0), "SqA": (nq * big_a).sum(axis=0),
              "Sa": na.sum(axis=0), "SaA": (na * big_a).sum(axis=0),
              "Saq": (na * (q - d)).sum(axis=0), "Sb": (n * b).sum(axis=0),
              "Sc": (n * cc).sum(axis=0)}
        if p is None:
            acc[:_compiled_sums.N_PLAIN] += np.array(_compiled_sums.eliminated_increments(
                *(st[k] for k in ("S0", "Sq", "Sqq", "SD", "SqD", "SA", "SqA", "Sa", "SaA",
                                  "Saq", "Sb", "Sc", "Na", "lam"))))
            if screened:
                nq2 = nq * q
                acc[_compiled_sums.N_PLAIN:] += np.array(_compiled_sums.screening_increments(
                    st["S0"], st["Sq"], st["Sqq"], (nq2 * q).sum(axis=0),
                    (nq2 * q * q).sum(axis=0), st["SD"], st["SqD"], (nq2 * d).sum(axis=0),
                    st["SA"], (nq2 * big_a).sum(axis=0), st["Sa"], (na * q * q).sum(axis=0),
                    (na * d).sum(axis=0), st["Sc"], st["Na"]))
        else:
            s_corr += st["Na"] * lam_k
            mat[:, p, p] += st["S0"]
            mat[:, p, ch] += st["Sq"] - st["SD"]
            mat[:, ch, p] += st["Sq"]
            mat[:, ch, ch] += st["Sqq"] - st["SqD"]
            rhs[:, p, 0] -= st["SA"]
            rhs[:, ch, 0] -= st["SqA"]
            rhs[:, p, 1] += st["Na"]
            kept[p] = st
    # molecules
    mol = None
    if system is not None and len(system.molecules):
        n_m = np.nan_to_num(state.molecule_densities().reshape(len(system.molecules), -1)[:, sel])
        d1, d2 = system.constants.ln_kn_derivatives(t)
        d1 = d1.reshape(len(system.molecules), m)
        d2 = d2.reshape(len(system.molecules), m)
        a_m = -d1.copy()
        b_m = -d2.copy()
        d_m = np.zeros_like(a_m)
        c_m = np.zeros_like(a_m)
        qm = system.q_mol
        for i, comps in enumerate(system._comp):
            qsum = 0.0
            for p, row in comps:
                st = kept[p]
                at = (row - st["rows"][0])[None, :]
                a_m[i] += np.take_along_axis(st["a"], at, axis=0)[0]
                b_m[i] += np.take_along_axis(st["b"], at, axis=0)[0]
                d_m[i] += np.take_along_axis(st["d"], at, axis=0)[0]
                c_m[i] += np.take_along_axis(st["c"], at, axis=0)[0]
                qsum += float(kept[p]["charges"][row])
            a_m[i] += 1.5 * (qsum - qm[i])
        big_am = a_m + 1.5 * d_m
        nu_hat = np.concatenate([system.nu, qm[:, None]], axis=1)          # (nm, R)
        # sum_M nu_hat_Mr n_M nu_tilde_Ms, nu_tilde = nu_hat - D_M e_charge
        mat += np.einsum("im,ir,is->mrs", n_m, nu_hat, nu_hat)
        mat[:, :, ch] -= np.einsum("im,ir->mr", n_m * d_m, nu_hat)
        rhs[:, :, 0] -= np.einsum("im,ir->mr", n_m * big_am, nu_hat)
        mol = {"n": n_m, "a": a_m, "b": b_m, "d": d_m, "c": c_m, "A": big_am, "nu": nu_hat}
    mat[:, ch, ch] += acc[0]
    rhs[:, ch, 0] += acc[1]
    rhs[:, ch, 1] += acc[2]
    # electrons (d ln n_e = 1.5 d ln T - d lambda_ch + d kappa)
    mat[:, ch, ch] += ne
    rhs[:, ch, 0] += 1.5 * ne
    if screened:
        rhs[:, ch, 2] += acc[12] + ne
    cond = None
    if system is not None and system.n_cond:
        mat, rhs, cond = _with_condensates(state, system, sel, t, nuc, kept, mat, rhs, ch)
    # row equilibration, then the batched solve
    scale = np.abs(mat).max(axis=2)
    scale[scale == 0] = 1.0
    dl_all = np.linalg.solve(mat / scale[:, :, None], rhs / scale[:, :, None])
    dl = dl_all[:, :r_dim]                                                  # (m, R, n_col)
    dlam_ch = dl[:, ch, :]                                                  # (m, n_col)
    et = np.eye(n_col)[0]
    dz = (1.5 * et + np.eye(n_col)[-1] * screened)[None, :] - dlam_ch      # d ln n_e
    out_n = np.zeros((m, n_col))
    out_ea = np.zeros((m, n_col))
    out_lam = np.zeros((m, n_col))
    n_tot = ne.copy()
    ea = 1.5 * ne
    out_n += ne[:, None] * dz
    out_ea += 1.5 * ne[:, None] * dz

    def chain_terms(st, dlam_k):
        # d ln n = A eT + dlam_k + (q - D) dlam_ch over the stages, summed with weights
        dn = (st["SA"][:, None] * et[None, :] + st["S0"][:, None] * dlam_k
              + (st["Sq"] - st["SD"])[:, None] * dlam_ch)
        dea = ((st["SaA"] + st["Sb"])[:, None] * et[None, :] + st["Sa"][:, None] * dlam_k
               + st["Saq"][:, None] * dlam_ch + st["Sc"][:, None] * dz)
        return dn, dea

    # the eliminated chains: their particles do not move at fixed N, the rest is P + Q dlam_ch
    out_n[:, 1] += nuc * frac_elim
    out_ea[:, :2] += acc[6:8].T
    out_lam[:, :2] += acc[9:11].T
    if screened:
        out_ea[:, 2] += acc[13]
        out_lam[:, 2] += acc[14]
    out_ea += acc[8][:, None] * dlam_ch
    out_lam += acc[11][:, None] * dlam_ch
    n_tot += acc[3]
    ea += acc[4]
    s_corr += acc[5]
    for p, st in kept.items():
        dlam_k = dl[:, p, :]
        dn, dea = chain_terms(st, dlam_k)
        out_n += dn
        out_ea += dea
        out_lam += st["Na"][:, None] * dlam_k
        n_tot += st["S0"]
        ea += st["Sa"]
    if mol is not None:
        n_m = mol["n"]
        nu_lam = np.einsum("ir,mrk->imk", mol["nu"], dl)                 # (nm, m, 2)
        dln = (mol["A"][:, :, None] * et[None, None, :] + nu_lam
               - mol["d"][:, :, None] * dlam_ch[None, :, :])
        out_n += np.einsum("im,imk->mk", n_m, dln)
        out_ea += (np.einsum("im,imk->mk", n_m * mol["a"], dln)
                   + (n_m * mol["b"]).sum(axis=0)[:, None] * et[None, :]
                   + (n_m * mol["c"]).sum(axis=0)[:, None] * dz)
        n_tot += n_m.sum(axis=0)
        ea += (n_m * mol["a"]).sum(axis=0)
    if cond is not None:
        # the condensed phases: E_c = sum_j G_j e_j, e_j / kT = V_j . a_0 - d ln K_j / d ln T
        g_c, e_hat, de_t, de_x = cond
        d_g = dl_all[:, r_dim:]                                           # (m, nc, n_col)
        ea += (g_c * e_hat).sum(axis=0)
        out_ea += (np.einsum("mjk,jm->mk", d_g, e_hat)
                   + (g_c * de_t).sum(axis=0)[:, None] * et[None, :]
                   + (g_c * de_x).sum(axis=0)[:, None] * dz)
    eps = np.zeros(m)
    deps = np.zeros((m, 2))
    if screened:
        # close the kappa column: ln kappa = const - 1.5 ln T + 0.5 ln S, S = n_e + sum q^2 n
        scr = acc[19] + ne
        d_scr = acc[16:19].T + acc[15][:, None] * dlam_ch + ne[:, None] * dz
        g = 0.5 * kap / scr
        den = 1.0 - g * d_scr[:, 2]
        dk = np.stack([(g * d_scr[:, 0] - 1.5 * kap) / den, g * d_scr[:, 1] / den], axis=1)

        def fold(v):
            return v[:, :2] + v[:, 2:] * dk

        out_n, out_ea, out_lam, d_scr = fold(out_n), fold(out_ea), fold(out_lam), fold(d_scr)
        # the gas's share of the Debye-Hueckel free energy: eps = kappa S = 1/(8 pi lambda^3)
        eps = kap * scr
        deps = scr[:, None] * dk + kap[:, None] * d_scr
    lam_sum = s_corr                                    # sum_k N alpha_k lambda_k
    return {"n_tot": n_tot, "dn_t": out_n[:, 0], "dn_n": out_n[:, 1], "ea": ea,
            "dea_t": out_ea[:, 0], "dea_n": out_ea[:, 1], "s_corr": s_corr,
            "ds_corr_t": out_lam[:, 0], "ds_corr_n": out_lam[:, 1] + lam_sum,
            "eps": eps, "deps_t": deps[:, 0], "deps_n": deps[:, 1]}
