"""Independent method-of-lines reference for the transient brick model (NH3 storage + solid heat).

This module does not import ``aftertreat``. It solves the same *continuous* equations as the
project's transient model, by a different discretisation (finite volumes in z, an exponential
Runge-Kutta integration of the gas inside each cell, and an error-controlled stiff integrator in
time), so that the project's time stepping can be checked against it.

Equations
---------
One brick of length L and frontal area A; geometric surface area a [m^2/m^3 of brick], hydraulic
diameter d_h, catalytic-layer volume fraction f [m^3 of layer per m^3 of brick], heat capacity C
[J/(m^3 of brick K)], no heat loss. Kinetic limit: no film or washcoat resistance, so the surface
sees the bulk concentrations c_i = x_i p / (R T_g) [mol/m^3 of gas]. One storage site of capacity
Omega [mol/m^3 of layer] with NH3 coverage theta; rates per m^3 of layer, with
k(T) = k_ref exp(-E/R (1/T - 1/T_ref))::

    1  NH3 -> NH3(S)                          r1 = k1(Ts) c_NH3 (1 - theta)
    2  NH3(S) -> NH3                          r2 = k2(Ts) exp(alpha E2 theta / (R Ts)) theta
    3  4 NH3(S) + 4 NO + O2 -> 4 N2 + 6 H2O   r3 = k3(Ts) c_NO theta
    4  4 NH3(S) + 3 O2 -> 2 N2 + 6 H2O        r4 = k4(Ts) theta

Gas (quasi-steady; F_i molar flows [mol/s], z in 0..L)::

    dF_i/dz = A f sum_r nu_gas[r, i] r_r
    F_tot cp(T_g) dT_g/dz = h a A (Ts - T_g),        h = Nu k_gas(T_g) / d_h,  Nu = 2.976

(Nu of the fully developed square channel at constant wall temperature: Shah & London 1978.)
Surface and solid::

    Omega dtheta/dt = r1 - r2 - 4 r3 - 4 r4
    C dTs/dt        = h a (T_g - Ts) + f sum_r (-dH_r(Ts)) r_r

dH_r from the NASA-7 polynomials of Cantera's ``gri30.yaml`` (McBride, Gordon & Reno 1993) with
stored NH3 counted as gas NH3: adsorption and desorption carry no heat, reactions 3 and 4 the heat
of the gas-phase reactions as written. cp(T) [J/(mol K)] is the NASA-7 cp of the *inlet*
composition at the local T_g; k_gas(T) the Cantera mixture-averaged conductivity of the inlet
composition (both for the composition at the first inlet time).

Discretisation in z (finite volumes; Schiesser 1991 for the method of lines)
------------------------------------------------------------------------------
N equal cells; the unknowns are the cell averages theta_j and Ts_j, taken constant over the cell.
For a given profile the gas is integrated along z cell by cell. Within a cell theta and Ts are
constant, so the gas equations are linear in the reacting flows::

    F_NH3' = -lambda_N(z) F_NH3 + s,    F_NO' = -lambda_O(z) F_NO,   D' = -mu(z) D,   D = T_g - Ts

with lambda_N = A f k1 (1-theta) p/(R T_g F_tot), lambda_O = 4 A f k3 theta p/(R T_g F_tot),
s = A f r2 and mu = h a A/(F_tot cp). The coefficients vary inside the cell only through T_g and
F_tot (F_tot follows algebraically from the NH3 and NO flows: every extent of reactions 3 and 4
adds 5 mol of gas). Each cell is crossed with one step (or more, see below) of Lawson's
integrating-factor Runge-Kutta method of order 4 (Lawson 1967) around the coefficients frozen at
the cell inlet, with the frozen linear inhomogeneous part (including the desorption source s,
through phi_1(x) = (e^x - 1)/x) solved exactly: the step is *exact* when the coefficients are
constant, whatever lambda dz (no stiffness limit), and fourth order in the small departure of the
coefficients from their inlet values (the gas temperature change across the cell). This is why
it is chosen over a plain explicit scheme (whose error grows with the cell Damkoehler number) and
over an implicit one (whose Newton solve would cost a factor in every right-hand side). A cell is
split into equal substeps when a bound on (lambda or mu) x dz (from the temperature range and
theta in 0..1, fixed for the run so that the right-hand side stays smooth) exceeds 0.5.

The cell exchanges are taken from the gas itself, so gas and surface balance exactly: the NH3
adsorbed minus desorbed in a cell is -Delta F_NH3, the extent of reaction 3 is -Delta F_NO / 4,
and the heat given to the gas is Q = int F_tot cp dT_g = [F_tot (H(T_g) - H(Ts))] -
int (H(T_g) - H(Ts)) dF_tot (H the NASA-7 molar enthalpy of the inlet composition; the last,
tiny, term by the same Runge-Kutta weights). Hence::

    Omega dtheta_j/dt = (-Delta F_NH3,j + Delta F_NO,j) / (A f dz) - 4 r4,j
    C dTs_j/dt        = -Q_j / (A dz) + f ((-dH_3) (-Delta F_NO,j / (4 A f dz)) + (-dH_4) r4,j)

The piecewise-constant surface state makes the scheme second order in dz; the gas integration
inside a cell agrees with an adaptive DOP853 integration of the continuous gas equations for the
same piecewise-constant state to ~1e-10 (:func:`gas_check`).

Time integration
----------------
``scipy.integrate.solve_ivp`` with BDF (variable order 1-5, quasi-constant step size, error-
controlled: Byrne & Hindmarsh 1975; Shampine & Reichelt 1997) or Radau (order 5, Hairer &
Wanner 1996, ch. IV.8), rtol 1e-8 by default, atol 1e-3 rtol on theta and 1 K x rtol on Ts.
The unknowns are ordered cell by cell, [theta_1, Ts_1, theta_2, Ts_2, ...]: the gas couples
every cell to all cells upstream and to none downstream, so the Jacobian is block lower
triangular and its sparse LU (SuperLU, used by solve_ivp for a sparse Jacobian) has no fill. It
is formed by forward differences in one numpy march that carries the 2N perturbed copies of the
state as columns; a single right-hand side is one march in Python floats. The integration
restarts at every breakpoint of the piecewise-linear inlet, so kinks of the inlet never fall
inside a step. Outputs are read from the integrator's dense output and put through one more
(vectorised) gas march. The starting state is the reference's own steady state at the first
inlet (damped Newton, :func:`steady_state`).

Convergence (measured on the scenario of ``test_transient_reference.py``, a 400 cpsi Cu-zeolite
brick heated from 200 to 350 C within 1 s; numbers in that file's docstring): second order in
dz; the outlet NH3 release peak changes by 2e-4 (N 100 -> 200) and 6e-5 (200 -> 400), and by
< 1e-6 when rtol goes from 1e-8 to 1e-9.

References
----------
Byrne, G. D. and Hindmarsh, A. C. (1975). A polyalgorithm for the numerical solution of
    ordinary differential equations. ACM Trans. Math. Software 1, 71-96.
Hairer, E. and Wanner, G. (1996). Solving Ordinary Differential Equations II: Stiff and
    Differential-Algebraic Problems, 2nd ed. Springer.
Lawson, J. D. (1967). Generalized Runge-Kutta processes for stable systems with large Lipschitz
    constants. SIAM J. Numer. Anal. 4, 372-380.
McBride, B. J., Gordon, S. and Reno, M. A. (1993). Coefficients for calculating thermodynamic
    and transport properties of individual species. NASA TM-4513.
Schiesser, W. E. (1991). The Numerical Method of Lines. Academic Press.
Shampine, L. F. and Reichelt, M. W. (1997). The MATLAB ODE suite. SIAM J. Sci. Comput. 18,
    1-22.
Shah, R. K. and London, A. L. (1978). Laminar Flow Forced Convection in Ducts. Academic Press.
"""
from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from scipy import sparse
from scipy.integrate import solve_ivp
from scipy.sparse.linalg import splu
from scipy.optimize import minimize_scalar

__all__ = ["BrickConfig", "Kinetics", "PiecewiseLinearInlet", "Result", "simulate",
           "steady_state", "gas_check", "SPECIES", "R_GAS"]

#: Species of the reaction set, in the order of every flow array here; other inlet species are
#: carried after them unchanged.
SPECIES = ("NH3", "NO", "O2", "H2O", "N2")
_CT_NAME = {"Ar": "AR"}
#: Nusselt number of a fully developed square channel, constant wall temperature
#: (Shah & London 1978).
NU_SQUARE = 2.976


@lru_cache(maxsize=1)
def _gas():
    import cantera as ct
    return ct.Solution("gri30.yaml", transport_model="mixture-averaged")


def _gas_constant() -> float:
    import cantera as ct
    return ct.gas_constant / 1000.0          # J/(mol K)


R_GAS = _gas_constant()


# ---------------------------------------------------------------------------------------------
# configuration
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class BrickConfig:
    """One brick: SI numbers. ``ofa`` does not enter the kinetic-limit equations with a constant
    Nusselt number; it only gives the channel velocity at the first inlet, reported in
    ``Result.extra["u_channel_m_s"]``."""
    length_m: float
    frontal_area_m2: float
    ofa: float
    gsa_m2_m3: float
    d_h_m: float
    layer_fraction: float
    heat_capacity_J_m3K: float
    nusselt: float = NU_SQUARE


@dataclass(frozen=True)
class Kinetics:
    """Rate constants k_ref [1/s for 1 and 3 (per mol/m^3 of gas), mol/(m^3 s) for 2 and 4],
    activation energies E [J/mol], reference temperatures [K], Temkin factor alpha [-] and the
    site capacity [mol/m^3 of layer]."""
    capacity_mol_m3: float
    k1: float
    k2: float
    E2: float
    alpha: float
    k3: float
    E3: float
    k4: float
    E4: float
    T_ref1: float = 573.15
    T_ref2: float = 573.15
    T_ref3: float = 523.15
    T_ref4: float = 573.15
    E1: float = 0.0


@dataclass(frozen=True)
class PiecewiseLinearInlet:
    """Inlet temperature [K] and molar flows [mol/s] at times ``t_s``, linear in between and
    constant outside; ``flows`` maps species (Cantera-compatible names: NH3, NO, O2, H2O, N2, CO2,
    Ar, ...) to one value or one value per time. Pressure ``p_Pa`` is constant."""
    t_s: tuple
    T_K: tuple
    flows: dict
    p_Pa: float = 101325.0

    def species(self) -> tuple[str, ...]:
        extra = tuple(sorted(s for s in self.flows if s not in SPECIES))
        return SPECIES + extra

    def breakpoints(self) -> np.ndarray:
        return np.asarray(self.t_s, dtype=float)

    def table(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(t [nt], T [nt], F [nt, nsp]) with the flows in :meth:`species` order."""
        ts = np.asarray(self.t_s, dtype=float)
        if ts.ndim != 1 or ts.size < 1 or np.any(np.diff(ts) <= 0):
            raise ValueError("t_s must be increasing")
        T = np.broadcast_to(np.asarray(self.T_K, float), ts.shape).copy()
        F = np.column_stack([np.broadcast_to(np.asarray(self.flows.get(s, 0.0), float),
                                             ts.shape) for s in self.species()])
        if np.any(F < 0) or np.any(T <= 0):
            raise ValueError("flows must be >= 0 and temperatures > 0")
        return ts, T, F

    def state(self, t: float) -> tuple[float, np.ndarray]:
        """(T [K], flows [mol/s] in :meth:`species` order) at time t."""
        ts, T, F = self.table()
        return _interp_row(t, ts, T, F)


def _interp_row(t, ts, T, F):
    """Linear interpolation of (T, F rows) at t, constant outside [ts[0], ts[-1]]."""
    if t <= ts[0]:
        return float(T[0]), F[0].copy()
    if t >= ts[-1]:
        return float(T[-1]), F[-1].copy()
    i = int(np.searchsorted(ts, t, side="right")) - 1
    w = (t - ts[i]) / (ts[i + 1] - ts[i])
    return float(T[i] + w * (T[i + 1] - T[i])), F[i] + w * (F[i + 1] - F[i])


# ---------------------------------------------------------------------------------------------
# gas properties of the inlet composition (Cantera, evaluated once)
# ---------------------------------------------------------------------------------------------
class _Properties:
    """cp, H (NASA-7, exact) and the conductivity (Chebyshev fit of ln k in ln T to Cantera's
    mixture-averaged values, checked to 1e-10 relative) of one composition, plus the reaction
    enthalpies of reactions 3 and 4, all as plain polynomials (cheap in the inner loop)."""

    def __init__(self, species, x, T_lo, T_hi, p, fit_tol=1e-10):
        gas = _gas()
        names = [_CT_NAME.get(s, s) for s in species]
        x = np.asarray(x, float) / np.sum(x)
        low, high, mids = [], [], []
        for n in names:
            th = gas.species(n).thermo
            c = np.asarray(th.coeffs, float)
            mids.append(c[0])
            high.append(c[1:8])
            low.append(c[8:15])
        mids = np.array(mids)
        if np.ptp(mids) > 0:
            raise NotImplementedError("species with different NASA-7 midpoints")
        T_mid = float(mids[0])
        if T_lo < T_mid <= T_hi:
            raise NotImplementedError(f"temperature range {T_lo:.0f}..{T_hi:.0f} K crosses the "
                                      f"NASA-7 midpoint {T_mid:.0f} K")
        a = np.array(low if T_hi <= T_mid else high)          # [nsp, 7]
        self.species, self.x, self.T_lo, self.T_hi = tuple(species), x, T_lo, T_hi
        R = R_GAS
        mix = x @ a
        # cp = R (a1 + a2 T + a3 T^2 + a4 T^3 + a5 T^4);  H = R (a1 T + a2 T^2/2 + ... + a6)
        self.cp_c = tuple(float(v) for v in (R * mix[4], R * mix[3], R * mix[2], R * mix[1],
                                             R * mix[0]))                 # Horner, high first
        self.H_c = tuple(float(v) for v in (R * mix[4] / 5, R * mix[3] / 4, R * mix[2] / 3,
                                            R * mix[1] / 2, R * mix[0]))  # times T, + R a6
        self.H_0 = float(R * mix[5])
        idx = {s: i for i, s in enumerate(species)}
        nu3 = np.zeros(len(species))
        nu4 = np.zeros(len(species))
        for s, v in {"NH3": -4, "NO": -4, "O2": -1, "N2": 4, "H2O": 6}.items():
            nu3[idx[s]] = v
        for s, v in {"NH3": -4, "O2": -3, "N2": 2, "H2O": 6}.items():
            nu4[idx[s]] = v
        self._dH = [nu @ a for nu in (nu3, nu4)]
        # self-checks against Cantera itself
        Tc = np.linspace(T_lo, T_hi, 7)
        X = np.zeros(gas.n_species)
        for n, xi in zip(names, x):
            X[gas.species_index(n)] += xi
        for T in Tc:
            gas.TPX = T, p, X
            if abs(self.cp(T) / (gas.cp_mole / 1000.0) - 1.0) > 1e-12:
                raise AssertionError("NASA-7 cp disagrees with Cantera")
            h_ct = gas.enthalpy_mole / 1000.0
            if abs(self.H(T) - h_ct) > 1e-9 * abs(h_ct) + 1e-6:
                raise AssertionError("NASA-7 H disagrees with Cantera")
            for nu, dH in zip((nu3, nu4), self.dH(np.array([T]))):
                ref = sum(v * gas.species(n).thermo.h(T) / 1000.0 for v, n in zip(nu, names))
                if abs(dH[0] - ref) > 1e-9 * abs(ref):
                    raise AssertionError("reaction enthalpy disagrees with Cantera")
        # conductivity: Chebyshev fit of ln k in ln T on 48 Chebyshev points, of the lowest
        # degree that reproduces Cantera within fit_tol (relative) on 157 points in between
        u = np.cos(np.pi * (np.arange(48) + 0.5) / 48)
        lo, hi = math.log(T_lo), math.log(T_hi)
        self._lnT_c, self._lnT_w = 0.5 * (hi + lo), 0.5 * (hi - lo)

        def k_cantera(T):
            gas.TPX = T, p, X
            return gas.thermal_conductivity

        lnk = np.log([k_cantera(math.exp(self._lnT_c + self._lnT_w * v)) for v in u])
        Tv = np.exp(np.linspace(lo, hi, 157))
        kv = np.array([k_cantera(T) for T in Tv])
        for degree in range(3, 16):
            cheb = np.polynomial.chebyshev.Chebyshev.fit(u, lnk, degree, domain=[-1, 1])
            self.k_c = tuple(float(v) for v in
                             cheb.convert(kind=np.polynomial.Polynomial).coef[::-1])
            err = float(np.max(np.abs(self.k(Tv, np.log, np.exp) / kv - 1.0)))
            if err < fit_tol:
                break
        else:
            raise AssertionError(f"conductivity fit error {err:.1e} > {fit_tol:.0e}")
        self.k_fit_error, self.k_fit_degree = err, degree

    # each works on floats and on numpy arrays alike
    def cp(self, T):
        c = self.cp_c
        return (((c[0] * T + c[1]) * T + c[2]) * T + c[3]) * T + c[4]

    def H(self, T):
        c = self.H_c
        return ((((c[0] * T + c[1]) * T + c[2]) * T + c[3]) * T + c[4]) * T + self.H_0

    def k(self, T, log=math.log, exp=math.exp):
        s = (log(T) - self._lnT_c) / self._lnT_w
        c = self.k_c
        v = c[0]
        for ci in c[1:]:
            v = v * s + ci
        return exp(v)

    def dH(self, T):
        """Enthalpies of reactions 3 and 4 as written [J/mol] at T (numpy), shape (2,) + T.shape."""
        T = np.asarray(T, float)
        out = []
        for b in self._dH:
            h = ((((b[4] / 5 * T + b[3] / 4) * T + b[2] / 3) * T + b[1] / 2) * T + b[0]) * T + b[5]
            out.append(R_GAS * h)
        return np.array(out)


# ---------------------------------------------------------------------------------------------
# the gas march (one code for Python floats and for numpy columns)
# ---------------------------------------------------------------------------------------------
class _ScalarOps:
    exp = staticmethod(math.exp)
    log = staticmethod(math.log)

    @staticmethod
    def tphi(c, tau):
        """tau phi_1(-c tau) = (1 - exp(-c tau))/c, and tau at c = 0."""
        return -math.expm1(-c * tau) / c if c != 0.0 else tau


class _VectorOps:
    exp = staticmethod(np.exp)
    log = staticmethod(np.log)

    @staticmethod
    def tphi(c, tau):
        nz = c != 0.0
        return np.where(nz, -np.expm1(-c * tau) / np.where(nz, c, 1.0), tau)


class _Model:
    """Everything fixed during a run: geometry, kinetics, properties, grid."""

    def __init__(self, brick: BrickConfig, kin: Kinetics, inlet: PiecewiseLinearInlet,
                 cells: int, T_range=None, substeps=None):
        self.b, self.kin, self.inlet = brick, kin, inlet
        self.n = int(cells)
        if self.n < 1:
            raise ValueError("cells >= 1")
        self.species = inlet.species()
        self._table = inlet.table()
        self.p = float(inlet.p_Pa)
        self.dz = brick.length_m / self.n
        self.Af = brick.frontal_area_m2 * brick.layer_fraction
        T0, F0 = inlet.state(float(inlet.breakpoints()[0]))
        Ts_all = np.asarray(inlet.T_K, float)
        if T_range is None:
            T_range = (float(Ts_all.min()) - 60.0, float(Ts_all.max()) + 140.0)
        self.props = _Properties(self.species, F0, T_range[0], T_range[1], self.p)
        self.T_range = T_range
        # h a A / (k_gas) per unit length [W/(m K) per (W/(m K))]
        self.hA_per_k = brick.nusselt / brick.d_h_m * brick.gsa_m2_m3 * brick.frontal_area_m2
        if substeps is None:
            substeps = self._substeps()
        self.m = int(substeps)

    def _substeps(self) -> int:
        """Substeps per cell, fixed for the run (so that the right-hand side stays smooth): the
        Lawson step is exact for frozen coefficients, and its error comes from their change
        across the cell, i.e. from the heat-transfer units per cell mu dz (T_g moves) and, more
        weakly, from the cell Damkoehler numbers lambda dz. Bounds: mu at the coldest gas of the
        temperature range, lambda at theta = 0 (adsorption) or 1 (SCR) with rate constants at
        the hottest inlet + 50 K; a substep keeps mu dz <= 0.25 and lambda dz <= 2. (On the
        scenario of the tests: 1 substep for N >= 100, 2 at N = 50; outlet flows within 1e-8
        of DOP853 at N = 100 and 7e-10 at N = 200, :func:`gas_check`.)"""
        k, T_lo = self.kin, self.T_range[0]
        T_rx = float(np.max(np.asarray(self.inlet.T_K, float))) + 50.0
        Fmin = min(self.inlet.state(t)[1].sum() for t in self.inlet.breakpoints())
        w_max = self.p / (R_GAS * T_lo * Fmin)
        lamN = self.Af * max(_arr(k.k1, k.E1, k.T_ref1, T) for T in (T_lo, T_rx)) * w_max
        lamO = 4 * self.Af * _arr(k.k3, k.E3, k.T_ref3, T_rx) * w_max
        Tg = np.linspace(T_lo, self.T_range[1], 50)
        mu = np.max(self.hA_per_k * self.props.k(Tg, np.log, np.exp) / self.props.cp(Tg)) / Fmin
        return max(1, math.ceil(max(mu * self.dz / 0.25, max(lamN, lamO) * self.dz / 2.0)))

    # -- cell data for a batch of states -----------------------------------------------------
    def cell_data(self, th, Ts):
        """Per-cell constants (arrays shaped like ``th``) for the march and the balances."""
        k, Af = self.kin, self.Af
        inv = 1.0 / Ts
        k1 = k.k1 * np.exp(-k.E1 / R_GAS * (inv - 1.0 / k.T_ref1)) if k.E1 else k.k1
        r2 = k.k2 * np.exp(-k.E2 / R_GAS * (inv - 1.0 / k.T_ref2)
                           + k.alpha * k.E2 * th * inv / R_GAS) * th
        k3 = k.k3 * np.exp(-k.E3 / R_GAS * (inv - 1.0 / k.T_ref3))
        r4 = k.k4 * np.exp(-k.E4 / R_GAS * (inv - 1.0 / k.T_ref4)) * th
        pR = self.p / R_GAS
        return dict(aN=Af * k1 * (1.0 - th) * pR, aO=4.0 * Af * k3 * th * pR, s=Af * r2,
                    s4=5.0 * Af * r4, r4=r4, Hs=self.props.H(Ts))

    def march(self, th, Ts, gas_in, X):
        """Cross the brick. ``th``, ``Ts``: per-cell sequences (floats, or numpy columns);
        ``gas_in`` = (F_NH3, F_NO, F_tot, T_g) at the inlet. Returns per-cell Delta F_NH3,
        Delta F_NO, heat to gas Q [W] (lists) and the outlet (F_NH3, F_NO, F_tot, T_g)."""
        scalar = X is _ScalarOps
        d = self.cell_data(np.asarray(th), np.asarray(Ts))
        if scalar:
            d = {key: v.tolist() for key, v in d.items()}
            Ts_l = list(Ts)
        else:
            Ts_l = Ts
        P = self.props
        cp, H, kk = P.cp, P.H, P.k
        log, exp, tphi = X.log, X.exp, X.tphi
        hAk = self.hA_per_k
        FN, FO, Ft, Tg = gas_in
        H0 = H(Tg)
        g0 = hAk * kk(Tg, log, exp) / cp(Tg)
        h = self.dz / self.m
        half = 0.5 * h
        sixth = h / 6.0
        dFN, dFO, Qh = [], [], []
        aN_l, aO_l, s_l, s4_l, Hs_l = d["aN"], d["aO"], d["s"], d["s4"], d["Hs"]
        for j in range(self.n):
            aN, aO, s, s4, Hs, Tsj = aN_l[j], aO_l[j], s_l[j], s4_l[j], Hs_l[j], Ts_l[j]
            FN_c, FO_c, Q_c = FN, FO, 0.0
            for _ in range(self.m):
                w0 = 1.0 / (Tg * Ft)
                cN, cO, cT = aN * w0, aO * w0, g0 / Ft
                D0 = Tg - Tsj
                EN, EO, ET = exp(-cN * half), exp(-cO * half), exp(-cT * half)
                EN2, EO2, ET2 = EN * EN, EO * EO, ET * ET
                # exact frozen-coefficient flow to h/2 and h (NH3 with its desorption source)
                N_h, N_f = EN * FN + s * tphi(cN, half), EN2 * FN + s * tphi(cN, h)
                O_h, O_f = EO * FO, EO2 * FO
                D_h, D_f = ET * D0, ET2 * D0
                q1 = (H0 - Hs) * (s - cN * FN + 1.25 * cO * FO + s4)

                def stage(tau, n_, o_, d_):
                    T_ = Tsj + d_
                    F_ = Ft + (n_ - FN) - 1.25 * (o_ - FO) + s4 * tau
                    w_ = 1.0 / (T_ * F_)
                    lN, lO = aN * w_, aO * w_
                    mu = hAk * kk(T_, log, exp) / (cp(T_) * F_)
                    q = (H(T_) - Hs) * (s - lN * n_ + 1.25 * lO * o_ + s4)
                    return -(lN - cN) * n_, -(lO - cO) * o_, -(mu - cT) * d_, q

                kN2, kO2, kD2, q2 = stage(half, N_h, O_h, D_h)
                kN3, kO3, kD3, q3 = stage(half, N_h + half * kN2, O_h + half * kO2,
                                          D_h + half * kD2)
                kN4, kO4, kD4, q4 = stage(h, N_f + h * EN * kN3, O_f + h * EO * kO3,
                                          D_f + h * ET * kD3)
                FN1 = N_f + sixth * (2.0 * EN * (kN2 + kN3) + kN4)
                FO1 = O_f + sixth * (2.0 * EO * (kO2 + kO3) + kO4)
                D1 = D_f + sixth * (2.0 * ET * (kD2 + kD3) + kD4)
                Tg1 = Tsj + D1
                Ft1 = Ft + (FN1 - FN) - 1.25 * (FO1 - FO) + s4 * h
                H1 = H(Tg1)
                Q_c = Q_c + Ft1 * (H1 - Hs) - Ft * (H0 - Hs) - sixth * (q1 + 2.0 * (q2 + q3) + q4)
                g0 = hAk * kk(Tg1, log, exp) / cp(Tg1)
                FN, FO, Ft, Tg, H0 = FN1, FO1, Ft1, Tg1, H1
            dFN.append(FN - FN_c)
            dFO.append(FO - FO_c)
            Qh.append(Q_c)
        return dFN, dFO, Qh, (FN, FO, Ft, Tg), d["r4"]

    # -- right-hand side ---------------------------------------------------------------------
    def gas_inlet(self, t):
        T, F = _interp_row(t, *self._table)
        return F, T

    def rhs(self, t, y):
        """d/dt of y = [theta_1, Ts_1, theta_2, Ts_2, ...] (cells interleaved, so that the
        Jacobian is block lower triangular); y of shape (2N,) (one march in Python floats) or
        (2N, k) (k states in one numpy march)."""
        F_in, T_in = self.gas_inlet(t)
        gas_in = (float(F_in[0]), float(F_in[1]), float(F_in.sum()), T_in)
        th, Ts = y[0::2], y[1::2]
        if y.ndim == 1:
            dFN, dFO, Qh, _, r4 = self.march(th.tolist(), Ts.tolist(), gas_in, _ScalarOps)
            dFN, dFO, Qh, r4 = np.array(dFN), np.array(dFO), np.array(Qh), np.array(r4)
        else:
            dFN, dFO, Qh, _, r4 = self.march(th, Ts, gas_in, _VectorOps)
            dFN, dFO, Qh = np.array(dFN), np.array(dFO), np.array(Qh)
        out = np.empty(y.shape)
        out[0::2], out[1::2] = self.balances(th, Ts, dFN, dFO, Qh, r4)
        return out

    def balances(self, th, Ts, dFN, dFO, Qh, r4):
        b, k = self.b, self.kin
        Vl = self.Af * self.dz                                   # layer volume per cell
        dth = ((-dFN + dFO) / Vl - 4.0 * r4) / k.capacity_mol_m3
        r3 = -dFO / (4.0 * Vl)
        dH3, dH4 = self.props.dH(Ts)
        q_rx = b.layer_fraction * (-dH3 * r3 - dH4 * r4)
        dTs = (-Qh / (b.frontal_area_m2 * self.dz) + q_rx) / b.heat_capacity_J_m3K
        return dth, dTs

    def jacobian(self, t, y, f0=None):
        """Forward-difference Jacobian from one vectorised march over the 2N perturbed columns,
        as a sparse matrix: cell j depends only on cells 1..j, so with the interleaved ordering it
        is block lower triangular and its sparse LU has no fill (solve_ivp then factors it with
        SuperLU instead of a dense LU)."""
        if f0 is None:
            f0 = self.rhs(t, y)
        scale = np.tile([1e-3, 300.0], self.n)
        dy = 1e-7 * np.maximum(np.abs(y), scale)
        dy = (y + dy) - y
        Y = y[:, None] + np.diag(dy)
        J = (self.rhs(t, Y) - f0[:, None]) / dy[None, :]
        return sparse.csc_matrix(np.tril(J, 1))

    def outlet(self, t, Y):
        """Outlet flows [k, nsp] and T_g [k] for states Y [2N, k] at times t [k]."""
        t = np.atleast_1d(t)
        Fin = np.array([self.gas_inlet(ti)[0] for ti in t])              # [k, nsp]
        Tin = np.array([self.gas_inlet(ti)[1] for ti in t])
        gas_in = (Fin[:, 0], Fin[:, 1], Fin.sum(axis=1), Tin)
        dFN, dFO, Qh, (FN, FO, Ft, Tg), r4 = self.march(Y[0::2], Y[1::2], gas_in, _VectorOps)
        ext3 = (Fin[:, 1] - FO) / 4.0
        ext4 = (self.Af * self.dz) * np.sum(r4, axis=0)
        out = Fin.copy()
        out[:, 0], out[:, 1] = FN, FO
        isp = {s: i for i, s in enumerate(self.species)}
        out[:, isp["O2"]] -= ext3 + 3.0 * ext4
        out[:, isp["N2"]] += 4.0 * ext3 + 2.0 * ext4
        out[:, isp["H2O"]] += 6.0 * ext3 + 6.0 * ext4
        return out, Tg, Ft


def _arr(k_ref, E, T_ref, T):
    return k_ref * math.exp(-E / R_GAS * (1.0 / T - 1.0 / T_ref))


# ---------------------------------------------------------------------------------------------
# driver
# ---------------------------------------------------------------------------------------------
@dataclass
class Result:
    """Outputs of :func:`simulate`. ``outlet_F`` [ntime, nspecies] mol/s in ``species`` order,
    ``outlet_T_K`` [ntime]; ``theta``, ``Ts_K`` the profiles at the end on cell centres ``z_m``;
    ``theta0``, ``Ts0_K`` the starting profiles; ``seconds`` the wall time."""
    t_s: np.ndarray
    species: tuple
    outlet_F: np.ndarray
    outlet_T_K: np.ndarray
    z_m: np.ndarray
    theta: np.ndarray
    Ts_K: np.ndarray
    theta0: np.ndarray
    Ts0_K: np.ndarray
    seconds: float
    nfev: int
    njev: int
    steps: int
    cells: int
    substeps: int
    rtol: float
    extra: dict = field(default_factory=dict)
    _model: object = field(default=None, repr=False)
    _segments: list = field(default_factory=list, repr=False)

    def flow(self, species: str) -> np.ndarray:
        return self.outlet_F[:, self.species.index(species)]

    def state(self, t: float) -> np.ndarray:
        """[theta, Ts] at time t from the integrator's dense output."""
        for t0, t1, sol in self._segments:
            if t0 <= t <= t1:
                return sol(t)
        raise ValueError(f"t = {t} outside the run")

    def outlet_at(self, t):
        """Outlet flows [k, nsp] and T_g [k] at times t (dense output, then one gas march)."""
        t = np.atleast_1d(np.asarray(t, float))
        Y = np.column_stack([self.state(ti) for ti in t])
        F, Tg, _ = self._model.outlet(t, Y)
        return F, Tg

    def peak(self, species: str = "NH3"):
        """(time [s], value [mol/s]) of the maximum outlet flow of ``species``, refined on the
        dense output by a bounded scalar search around the largest output sample."""
        i = self.species.index(species)
        y = self.outlet_F[:, i]
        j = int(np.argmax(y))
        lo, hi = self.t_s[max(j - 1, 0)], self.t_s[min(j + 1, len(self.t_s) - 1)]
        res = minimize_scalar(lambda t: -self.outlet_at(t)[0][0, i], bounds=(lo, hi),
                              method="bounded", options={"xatol": 1e-6 * max(hi, 1.0)})
        if -res.fun < y[j]:
            return float(self.t_s[j]), float(y[j])
        return float(res.x), float(-res.fun)


def _tolerances(n, rtol):
    return np.tile([1e-3 * rtol, 1.0 * rtol], n)


def steady_state(model: _Model, t0: float, y_guess=None, max_newton: int = 40):
    """Steady state of the reference at the inlet of time t0: Newton's method on
    dy/dt = 0 with the forward-difference Jacobian, damped so that every coverage stays inside
    (0, 1), from half coverage at the inlet temperature (or ``y_guess``); if that does not
    converge, a long BDF run at the same inlet (pseudo-transient continuation) first.
    Returns (y, largest |dy/dt| left)."""
    n = model.n
    T0, _ = model.inlet.state(t0)
    y = np.tile([0.5, T0], n) if y_guess is None else np.asarray(y_guess, float).copy()

    def newton(y):
        for _ in range(max_newton):
            r = model.rhs(t0, y)
            step = splu(model.jacobian(t0, y, r)).solve(-r)
            th, dth, lam = y[0::2], step[0::2], 1.0
            while lam > 1e-6 and not np.all((th + lam * dth > 0) & (th + lam * dth < 1)):
                lam *= 0.5
            y = y + lam * step
            if lam == 1.0 and np.max(np.abs(step) / np.maximum(np.abs(y), 1e-3)) < 1e-12:
                return y, True
        return y, False

    y_new, ok = newton(y)
    if not ok:
        sol = solve_ivp(lambda t, yy: model.rhs(t0, yy), (0.0, 1e7), y, method="BDF",
                        rtol=1e-6, atol=_tolerances(n, 1e-6),
                        jac=lambda t, yy: model.jacobian(t0, yy))
        y_new, ok = newton(sol.y[:, -1])
        if not ok:
            raise RuntimeError("steady state of the reference not found")
    return y_new, float(np.max(np.abs(model.rhs(t0, y_new))))


def simulate(brick: BrickConfig, kin: Kinetics, inlet: PiecewiseLinearInlet, t_out, *,
             cells: int = 200, rtol: float = 1e-8, method: str = "BDF", y0=None,
             substeps: int | None = None, T_range=None) -> Result:
    """Run the reference from the steady state at the first inlet (or from ``y0`` =
    [theta_1, Ts_1, theta_2, Ts_2, ...]) through the output times ``t_out`` (increasing, from
    the first inlet time on). ``cells`` = N, ``rtol`` of solve_ivp, ``method`` BDF or Radau."""
    wall = time.perf_counter()
    model = _Model(brick, kin, inlet, cells, T_range=T_range, substeps=substeps)
    n = model.n
    t_out = np.asarray(t_out, float)
    t_start = float(inlet.breakpoints()[0])
    extra = {}
    if y0 is None:
        t_ss = time.perf_counter()
        y, res = steady_state(model, t_start)
        extra["steady_residual"] = res
        extra["steady_seconds"] = time.perf_counter() - t_ss
    else:
        y = np.asarray(y0, float).copy()
    y_start = y.copy()
    edges = np.unique(np.concatenate([[t_start], inlet.breakpoints(), [t_out[-1]]]))
    edges = edges[(edges >= t_start) & (edges <= t_out[-1])]
    atol = _tolerances(n, rtol)
    segments, nfev, njev, steps = [], 0, 0, 0
    for a, b in zip(edges[:-1], edges[1:]):
        sol = solve_ivp(model.rhs, (a, b), y, method=method, rtol=rtol, atol=atol,
                        jac=model.jacobian, dense_output=True)
        if not sol.success:
            raise RuntimeError(f"solve_ivp failed on [{a}, {b}]: {sol.message}")
        y = sol.y[:, -1]
        segments.append((a, b, sol.sol))
        nfev, njev, steps = nfev + sol.nfev, njev + sol.njev, steps + sol.t.size - 1
    res = Result(t_s=t_out, species=model.species, outlet_F=np.empty((0, 0)),
                 outlet_T_K=np.empty(0), z_m=(np.arange(n) + 0.5) * model.dz,
                 theta=y[0::2].copy(), Ts_K=y[1::2].copy(), theta0=y_start[0::2].copy(),
                 Ts0_K=y_start[1::2].copy(), seconds=0.0, nfev=nfev, njev=njev, steps=steps,
                 cells=n, substeps=model.m, rtol=rtol, extra=extra, _model=model,
                 _segments=segments)
    states = []
    for ti in t_out:
        states.append(y_start if ti <= t_start else res.state(ti))
    Y = np.column_stack(states)
    lo, hi = model.T_range
    if np.any(Y[1::2] < lo) or np.any(Y[1::2] > hi):
        raise RuntimeError(f"solid temperature left the property range {lo:.0f}..{hi:.0f} K; "
                           "pass a wider T_range")
    F, Tg, _ = model.outlet(t_out, Y)
    res.outlet_F, res.outlet_T_K = F, Tg
    extra["k_fit_error"] = model.props.k_fit_error
    T0, F0 = inlet.state(t_start)
    extra["u_channel_m_s"] = (F0.sum() * R_GAS * T0 / inlet.p_Pa
                              / (brick.frontal_area_m2 * brick.ofa))
    res.seconds = time.perf_counter() - wall
    return res


# ---------------------------------------------------------------------------------------------
# check of the in-cell gas integration against an adaptive integrator of the continuous ODE
# ---------------------------------------------------------------------------------------------
def gas_check(brick: BrickConfig, kin: Kinetics, inlet: PiecewiseLinearInlet, theta, Ts, *,
              t: float = 0.0, rtol: float = 1e-13):
    """Largest relative difference between the march and DOP853 (rtol ``rtol``) on the continuous
    gas equations for the piecewise-constant state (theta, Ts) on ``len(theta)`` cells: outlet
    NH3, NO, T_g - T_in and the heat given to the gas in each cell. Returns a dict."""
    theta, Ts = np.asarray(theta, float), np.asarray(Ts, float)
    model = _Model(brick, kin, inlet, theta.size)
    n, P, k = model.n, model.props, kin
    F_in, T_in = model.gas_inlet(t)
    gas_in = (float(F_in[0]), float(F_in[1]), float(F_in.sum()), T_in)
    dFN, dFO, Qh, (FN, FO, Ft, Tg), r4 = model.march(theta.tolist(), Ts.tolist(), gas_in,
                                                      _ScalarOps)
    pR = model.p / R_GAS
    y = np.array([gas_in[0], gas_in[1], gas_in[2], T_in, 0.0])
    worst = {"NH3": 0.0, "NO": 0.0, "Tg": 0.0, "Q": 0.0}
    for j in range(n):
        th, T = theta[j], Ts[j]
        k1 = _arr(k.k1, k.E1, k.T_ref1, T)
        r2 = _arr(k.k2, k.E2, k.T_ref2, T) * math.exp(k.alpha * k.E2 * th / (R_GAS * T)) * th
        k3 = _arr(k.k3, k.E3, k.T_ref3, T)
        r4j = _arr(k.k4, k.E4, k.T_ref4, T) * th

        def ode(z, v):
            FN_, FO_, Ft_, Tg_, _ = v
            cN, cO = FN_ / Ft_ * pR / Tg_, FO_ / Ft_ * pR / Tg_
            r1, r3 = k1 * cN * (1 - th), k3 * cO * th
            hA = model.hA_per_k * P.k(Tg_)
            dN = model.Af * (-r1 + r2)
            dO = -4 * model.Af * r3
            return [dN, dO, dN - 1.25 * dO + 5 * model.Af * r4j, hA * (T - Tg_) / (Ft_ * P.cp(Tg_)),
                    hA * (T - Tg_)]

        y[4] = 0.0
        sol = solve_ivp(ode, (0.0, model.dz), y, method="DOP853", rtol=rtol, atol=1e-30)
        y = sol.y[:, -1]
        worst["Q"] = max(worst["Q"], abs(Qh[j] - y[4]) / max(abs(y[4]), 1e-300))
    worst["NH3"] = abs(FN / y[0] - 1)
    worst["NO"] = abs(FO / y[1] - 1)
    worst["Tg"] = abs((Tg - T_in) / (y[3] - T_in) - 1)
    return worst
