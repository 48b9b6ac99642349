"""Compiled right-hand side and Jacobian of the bench's tanks-in-series model (numba).

The same equations as the numpy reference in :func:`aftertreat.bench._timed` (tests hold the
two to agreement, tests/test_bench_kernel.py)::

    eps V/N dc_a,k/dt = Q (c_a,k-1 - c_a,k) + f V/N sum_r nu_a,r r_r
    Omega_s dtheta_s,k/dt = sum_r nu_s,r r_r

for the reacting gas species a and the storage sites s of every tank k, with the rates of the
brick kernel (:func:`aftertreat.kernel_numba._node_rates`, one washcoat node of the sample's
catalyst: the same compiled rate laws the brick solver uses, never re-written here). A reaction
written zero order in a gas reactant it consumes is throttled by c / (c + c_half) as in the
reference (:data:`aftertreat.bench.STARVED_PPM`). The Jacobian's reaction terms are forward
differences of each tank's own state (a tank's rates see its own state only), the flow terms
exact; both as in :func:`aftertreat.bench._tanks_jacobian`.

Why compiled: the scipy BDF integration of a TPD calls the right-hand side ~10^3 times per
prediction and a fit makes ~10^2 predictions; in numpy each call costs ~0.25 ms of array
overhead for ~50 unknowns (measured on the demo TPD, pyinstrument).
"""
from __future__ import annotations

import numpy as np
from numba import njit

from .kernel_numba import CACHED, _node_rates, _temp_pieces

_jit = njit(cache=CACHED, nogil=True)


@_jit
def _tank_rates(st, c_a, th, c_fixed, film_act, T, starve, half, W_kT, W_kinv, W_inhK, W_Deff,
                xloc, r, row):
    """Rates of one tank (active gas ``c_a`` [na], coverages ``th`` [ns]) into ``r[row]``;
    the temperature pieces (``W_*``) must hold those of ``T``."""
    nf = st.nf
    for f in range(nf):
        a = film_act[f]
        xloc[f] = max(c_a[a], 0.0) if a >= 0 else c_fixed[f]
    for s in range(st.ns):
        xloc[nf + s] = th[s]
    for q in range(st.nrxn):
        r[row, q] = 0.0
    _node_rates(st, 0, xloc, 0, T, W_kT, W_kinv, W_inhK, W_Deff, r, row)
    na = c_a.shape[0]
    for q in range(st.nrxn):
        for a in range(na):
            if starve[q, a]:
                c = max(c_a[a], 0.0)
                r[row, q] *= c / (c + half)


@_jit
def rhs(st, fl, y, N, c_in, c_fixed, film_act, T, Q, Vg, Vc, omega, nu_a, nu_s, starve, half,
        W_kT, W_kinv, W_inhK, W_dH, W_Deff, W_Dm, xloc, r, dy):
    """dy/dt of the tanks (state: N x na gas, then N x ns coverages) into ``dy``."""
    na = nu_a.shape[1]
    ns = nu_s.shape[1]
    _temp_pieces(st, fl, T, W_kT, W_kinv, W_inhK, W_dH, W_Deff, W_Dm, 1.0)
    for k in range(N):
        g0 = k * na
        s0 = N * na + k * ns
        _tank_rates(st, y[g0:g0 + na], y[s0:s0 + ns], c_fixed, film_act, T, starve, half,
                    W_kT, W_kinv, W_inhK, W_Deff, xloc, r, 0)
        for a in range(na):
            up = c_in[a] if k == 0 else y[g0 - na + a]
            src = 0.0
            for q in range(st.nrxn):
                src += nu_a[q, a] * r[0, q]
            dy[g0 + a] = (Q * (up - y[g0 + a]) + Vc * src) / Vg
        for s in range(ns):
            src = 0.0
            for q in range(st.nrxn):
                src += nu_s[q, s] * r[0, q]
            dy[s0 + s] = src / omega[s]


@_jit
def jacobian(st, fl, y, N, c_fixed, film_act, T, Q, Vg, Vc, omega, nu_a, nu_s, starve, half,
             W_kT, W_kinv, W_inhK, W_dH, W_Deff, W_Dm, xloc, r, loc, J):
    """The Jacobian of :func:`rhs` into ``J`` [n, n] (see the module docstring). Steps:
    sqrt(eps) times the value, at least 1e-6 of the largest gas concentration (gas) or 1e-4
    (coverage), taken downwards for a coverage above 1/2."""
    na = nu_a.shape[1]
    ns = nu_s.shape[1]
    m = na + ns
    n = N * m
    _temp_pieces(st, fl, T, W_kT, W_kinv, W_inhK, W_dH, W_Deff, W_Dm, 1.0)
    cmax = 1e-12
    for i in range(N * na):
        cmax = max(cmax, abs(y[i]))
    for i in range(n):
        for j in range(n):
            J[i, j] = 0.0
    for k in range(N):
        g0 = k * na
        s0 = N * na + k * ns
        for a in range(na):
            loc[a] = y[g0 + a]
        for s in range(ns):
            loc[na + s] = y[s0 + s]
        _tank_rates(st, loc[:na], loc[na:], c_fixed, film_act, T, starve, half, W_kT,
                    W_kinv, W_inhK, W_Deff, xloc, r, 0)
        for v in range(m):
            x0 = loc[v]
            if v < na:
                h = 1.5e-8 * max(abs(x0), 1e-6 * cmax)
            else:
                h = 1.5e-8 * max(abs(x0), 1e-4)
                if x0 > 0.5:
                    h = -h
            loc[v] = x0 + h
            _tank_rates(st, loc[:na], loc[na:], c_fixed, film_act, T, starve, half, W_kT,
                        W_kinv, W_inhK, W_Deff, xloc, r, 1)
            loc[v] = x0
            col = g0 + v if v < na else s0 + (v - na)
            for a in range(na):
                d = 0.0
                for q in range(st.nrxn):
                    d += nu_a[q, a] * (r[1, q] - r[0, q])
                J[g0 + a, col] = Vc * d / h / Vg
            for s in range(ns):
                d = 0.0
                for q in range(st.nrxn):
                    d += nu_s[q, s] * (r[1, q] - r[0, q])
                J[s0 + s, col] = d / h / omega[s]
        for a in range(na):
            J[g0 + a, g0 + a] -= Q / Vg
            if k > 0:
                J[g0 + a, g0 - na + a] = Q / Vg


class TanksKernel:
    """The compiled tanks model of one bench sample: built from the sample brick in the
    kinetic limit (its kernel static arrays) and bound to the feed's composition."""

    def __init__(self, reactor, act_sp, starve, inlet):
        import dataclasses
        from .problem import BrickProblem
        b = reactor.brick
        brick = dataclasses.replace(b, film=False, washcoat="none")
        bound = BrickProblem(brick).bind(inlet)
        self.st, self.fl = bound.static, bound.flow
        st = self.st
        act = list(int(i) for i in act_sp)
        self.film_act = np.array([act.index(int(i)) if int(i) in act else -1
                                  for i in st.film_idx], dtype=np.int64)
        self.film_idx = np.asarray(st.film_idx)
        self.act_sp = np.asarray(act_sp)
        self.starve = np.ascontiguousarray(starve, dtype=np.bool_)
        mech = b.catalysts[0].mechanism
        self.nu_a = np.ascontiguousarray(mech.nu_gas[:, act_sp], dtype=float)
        self.nu_s = np.ascontiguousarray(mech.nu_site, dtype=float).reshape(mech.n_reactions, -1)
        R, nf, ns = st.nrxn, st.nf, st.ns
        nl = max(len(st.depth), 1)
        self.W = (np.zeros(R), np.zeros(R), np.zeros((R, nf)), np.zeros(R),
                  np.zeros((nl, nf)), np.zeros(nf))
        self.xloc = np.zeros(nf + ns)
        self.r = np.zeros((2, R))
        self.loc = np.zeros(len(act_sp) + ns)

    def rhs(self, y, N, c_in, T, Q, Vg, Vc, omega, half) -> np.ndarray:
        """dy/dt at ``y`` with the full inlet concentrations ``c_in`` [nsp] at ``T``."""
        dy = np.empty(len(y))
        rhs(self.st, self.fl, np.ascontiguousarray(y, dtype=float), N,
            np.ascontiguousarray(c_in[self.act_sp]), np.ascontiguousarray(c_in[self.film_idx]),
            self.film_act, T, Q, Vg, Vc, omega, self.nu_a, self.nu_s, self.starve, half,
            *self.W, self.xloc, self.r, dy)
        return dy

    def jacobian(self, y, N, c_in, T, Q, Vg, Vc, omega, half) -> np.ndarray:
        """The Jacobian of :meth:`rhs` at ``y``."""
        n = len(y)
        J = np.empty((n, n))
        jacobian(self.st, self.fl, np.ascontiguousarray(y, dtype=float), N,
                 np.ascontiguousarray(c_in[self.film_idx]), self.film_act, T, Q, Vg, Vc, omega,
                 self.nu_a, self.nu_s, self.starve, half, *self.W, self.xloc, self.r, self.loc,
                 J)
        return J
