"""Reference kernel of the brick model in numpy: per-cell residual, Jacobian, factor and solve,
and the march that solves the cells one after another.

This is the readable version of the equations (vectorised over the washcoat nodes and the
reactions of a cell) and the reference against which :mod:`aftertreat.kernel_numba` is checked
(tests assert agreement of residuals, Jacobians and whole solves). Both kernels take the same
arrays (:class:`~aftertreat.problem.KernelStatic`, :class:`~aftertreat.problem.KernelFlow`)
and implement the same algorithm; the numba twin loops where this one vectorises, and builds
its Jacobian semi-analytically where this one differences every column.

Balances of cell j (width dz_j; upwind: the cell is represented by its outlet gas state and one
surface state), from ``docs/model.md``::

    flows     (F_j - F_in - sum_q nu[q] xi_q) / F_row = 0,   xi_q = V_j sum_n f_n r_q,n
    gas T     T_g - T_s - (T_g,in - T_s) exp(-h A_j / (F c_p)) = 0
    solid T   (sum_q (-dH_q) xi_q - F (h(T_g) - h(T_g,in)) - U_j (T_s - T_amb)
               - C_j (T_s - T_s,old)/dt) / T_scale_j = 0
    layer     (J_n - J_n+1 + P_n) / node_scale_n = 0          per film species
              J_0 = G_0 (c_b - c_0),  J_n = G_n (c_n-1 - c_n),  J_N = 0   (resolved layers)
              or  k_m (c_b - c_n) + P_n                        (one node per layer)
              P_n = (f_n / a) sum_q nu_film[q] r_q,n             [mol/(m^2 s)]
    coverage  sum_q nu_site[q] r_q,n / Omega_n - (theta - theta_old)/dt = 0

nu is ``nu_equiv`` at steady state and ``nu_gas`` in a time step (1/dt > 0). c_b is the cell
mean of the bulk gas (:func:`cell_mean`). Each flow row is scaled by that species' inlet flow
(at least 1 ppm of the total), so a converged trace species is accurate relative to itself.
"""
from __future__ import annotations

import numpy as np
import scipy.linalg

from .problem import KernelFlow, KernelStatic, NSP
from .units import R_GAS

__all__ = ["cell_mean", "cell_residual", "cell_jacobian", "factor", "apply", "solve_cell",
           "march", "norm", "NORM_T_WEIGHT"]

#: weight of the temperature rows [K] in the residual norm: they balance heat flows to about
#: 1e-12 K of round-off, so they are held to 1e-3 of the tolerance of the scaled rows
NORM_T_WEIGHT = 1e-3
_FLOOR = 1e-6
_T_MIN, _T_MAX = 200.0, 2000.0
#: a fresh Newton step smaller than this relative to the unknowns: the cell is at the round-off
#: floor of its residual (rows whose terms cancel, e.g. a reversible reaction near equilibrium);
#: accepted as converged if the residual is below STALL_TOL
STEP_TOL = 1e-10
STALL_TOL = 1e-7
#: solid-temperature steps of the hot starts of a cell that ignites [K]
HOT_STEP_K = 50.0
#: a start whose scaled residual is below this is taken without trying the next candidate
START_GOOD = 1e-3


def cell_mean(c_in, c_out):
    """Mean concentration over a cell: log mean where it falls, arithmetic mean where it rises.

    Below c_out = 1e-6 c_in (a fall beyond e^13.8 in one cell) the log mean is continued by the
    quadratic through zero that meets it with its value and slope at the floor c_f: the mean
    stays smooth, increasing, positive and of bounded slope, reaches zero with c_out, and a cell
    can never take up more than its inflow, so its balance always has a root with c_out >= 0.
    Where it applies the root lies in [0, c_f], so the continuation moves a cell's outlet by at
    most 1e-6 of its inflow (0.01 ppm of 10,000 ppm); closer to zero, the log mean's slope
    (1/ln of the fall) bends so sharply that Newton cannot land on the root (seen: a 2-cell
    brick converting 99.9986 % of its NH3 in one cell stalled at a residual of 4e-7 with a
    floor of 1e-12).
    """
    c_in = np.asarray(c_in, dtype=float)
    c_out = np.asarray(c_out, dtype=float)
    falling = (c_out < c_in) & (c_in > 1e-200)
    a = np.where(falling, c_in, 1.0)
    b = np.where(falling, np.maximum(c_out, _FLOOR * a), 1.0)
    lnr = np.log(a / b)
    # (trial states far outside the bounds can overflow here: a non-finite mean rejects them)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        lm = np.where(np.abs(a - b) <= 1e-6 * (a + b), 0.5 * (a + b), (a - b) / lnr)
        s = np.where(lnr > 1e-6, (a / b - 1.0 - lnr) / lnr ** 2 * b / lm, 1.0)
        below = falling & (c_out < b)
        t = np.where(below, c_out / b, 0.0)
        lm = np.where(below, lm * ((2.0 - s) * t + (s - 1.0) * t * t), lm)
    return np.where(falling, lm, 0.5 * (c_in + c_out))


# ---------------------------------------------------------------------------------------------
# properties
# ---------------------------------------------------------------------------------------------
def props(fl: KernelFlow, T):
    """(viscosity, conductivity, diffusivities at the model pressure) at T [...]: ln(property)
    linear in ln T on the table, end segments extended (:class:`aftertreat.gas.GasProperties`)."""
    lnT = np.log(np.asarray(T, dtype=float))
    tab = fl.lnT_tab
    k = np.clip(np.searchsorted(tab, lnT, side="right") - 1, 0, tab.size - 2)
    t = (lnT - tab[k]) / (tab[k + 1] - tab[k])
    y0, y1 = fl.lnprop[k], fl.lnprop[k + 1]
    P = np.exp(y0 + t[..., None] * (y1 - y0))
    return P[..., 0], P[..., 1], P[..., 2:] * fl.p_ratio


def cp_mix(st: KernelStatic, fl: KernelFlow, T):
    """Molar cp of the table composition [J/(mol K)] from the NASA-7 polynomials."""
    T = np.asarray(T, dtype=float)
    Tn = T[..., None]
    cp = np.zeros(T.shape + (NSP,))
    for k in range(4, -1, -1):
        ak = np.where(Tn < st.nasa_Tmid, st.nasa_low[:, k], st.nasa_high[:, k])
        cp = cp * Tn + ak
    return R_GAS * (cp @ fl.x_cp)


def h_mix(st: KernelStatic, fl: KernelFlow, T):
    """Molar enthalpy of the table composition [J/mol] (NASA-7, formation included)."""
    T = np.asarray(T, dtype=float)
    Tn = T[..., None]
    lowr = Tn < st.nasa_Tmid
    c = [np.where(lowr, st.nasa_low[:, k], st.nasa_high[:, k]) for k in range(6)]
    h = Tn * (c[0] + Tn * (c[1] / 2 + Tn * (c[2] / 3 + Tn * (c[3] / 4 + Tn * c[4] / 5)))) + c[5]
    return R_GAS * (h @ fl.x_cp)


def _table(tab, T0, T):
    """Linear interpolation on a 1 K grid from T0 (rows), clipped to the table."""
    x = np.clip((np.asarray(T, dtype=float) - T0), 0.0, tab.shape[0] - 1 - 1e-9)
    i = x.astype(int)
    w = (x - i)[..., None]
    return tab[i] * (1.0 - w) + tab[i + 1] * w


def d_eff(st: KernelStatic, layer, D_mol, T):
    """Effective diffusivity in a layer [..., nsp]: (eps/tau) (1/D_m + 1/D_K)^-1 with the
    Knudsen D_K = d_pore/3 sqrt(8 R T/(pi M)) (:class:`aftertreat.catalyst.PoreStructure`)."""
    T = np.asarray(T, dtype=float)[..., None]
    D_K = st.d_pore[layer] / 3.0 * np.sqrt(8.0 * R_GAS * T / (np.pi * st.molar_mass))
    return st.eps_tau[layer] / (1.0 / D_mol + 1.0 / D_K)


# ---------------------------------------------------------------------------------------------
# rates
# ---------------------------------------------------------------------------------------------
def rates(st: KernelStatic, fl: KernelFlow, c, th, Ts, lam: float = 1.0):
    """Rates of every reaction at every node [..., nnode, R] (zero for reactions of other
    layers), with the activity and, for the effectiveness model, eta = tanh(phi)/phi.

    ``c`` [..., nnode, nf], ``th`` [..., nnode, ns], ``Ts`` [...] (solid temperature);
    ``lam`` multiplies every rate (the continuation of :func:`solve_cell`).
    """
    Ts = np.asarray(Ts, dtype=float)
    T = Ts[..., None, None]                                            # [..., 1, 1]
    k = st.k_ref * np.exp(-st.E_R * (1.0 / T - st.inv_Tref))          # [..., 1, R]
    k = k * np.where(st.ages > 0, st.activity, 1.0) * lam
    thc = np.clip(th, 0.0, 1.0)
    r = np.broadcast_to(k, c.shape[:-1] + (st.nrxn,)).copy()
    # concentration products (whole orders as they are, fractional ones clipped at zero)
    ca = c[..., None, :]                                                # [..., nnode, 1, nf]
    pa = np.prod(np.where(st.a_frac > 0, np.maximum(ca, 0.0), ca) ** st.a_ord, axis=-1)
    pb = np.prod(np.where(st.b_frac > 0, np.maximum(ca, 0.0), ca) ** st.b_ord, axis=-1)
    has_rev = st.rev >= 0
    if np.any(has_rev):
        lnK = _table(st.TlnKc_tab, st.T_tab0, Ts)[..., None, :] / T    # [..., 1, nrev]
        kinv = np.exp(-lnK[..., np.maximum(st.rev, 0)])
        r = r * (pa - np.where(has_rev, kinv * pb, 0.0))
    else:
        r = r * pa
    tq = thc[..., None, :]                                              # [..., nnode, 1, ns]
    r = r * np.prod(tq ** st.cov_m * (1.0 - tq) ** st.cov_q, axis=-1)
    q = np.arange(st.nrxn)
    if st.ns:
        ts = np.maximum(st.temkin_site, 0)
        th_t = thc[..., ts]                                             # [..., nnode, R]
        r = r * np.where(st.temkin_site >= 0, np.exp(st.temkin_aE_R * th_t / T), 1.0)
        es = np.maximum(st.er_site, 0)
        th_e = thc[..., es]
        r = r * np.where(st.er_site >= 0, st.er_ts * (1.0 - np.exp(-th_e / st.er_ts)), 1.0)
    if np.any(st.inh_p > 0):
        T4 = Ts[..., None, None, None]
        K = st.inh_K * np.exp(-st.inh_dH_R * (1.0 / T4 - st.inh_invT))  # [..., 1, R, nf]
        den = 1.0 + np.sum(K * np.maximum(ca, 0.0), axis=-1)
        r = r / den ** st.inh_p
    # only the node's own layer reacts
    own = (q[None, :] >= st.rxn_lo[st.node_layer][:, None]) & (
        q[None, :] < st.rxn_hi[st.node_layer][:, None])                 # [nnode, R]
    r = np.where(own, r, 0.0)
    if st.effectiveness and np.any(st.key >= 0):
        _, _, D_mol = props(fl, Ts)
        eta = np.ones_like(r)
        for n in range(st.nnode):
            layer = st.node_layer[n]
            De = d_eff(st, layer, D_mol, Ts)[..., st.film_idx]          # [..., nf]
            for kk in np.unique(st.key[st.key >= 0]):
                sel = own[n] & (st.key == kk)
                if not np.any(sel):
                    continue
                ck = c[..., n, kk]
                ck = np.where(np.abs(ck) < 1e-30, 1e-30, ck)
                kv = np.maximum((st.key_nu[sel] * r[..., n, sel]).sum(-1) / ck, 0.0)
                phi = st.depth[layer] * np.sqrt(kv / De[..., kk])
                with np.errstate(invalid="ignore", divide="ignore"):
                    e = np.where(phi > 1e-6, np.tanh(phi) / np.where(phi > 1e-6, phi, 1.0),
                                 1.0 - phi ** 2 / 3.0)
                eta[..., n, :] = np.where(sel, e[..., None], eta[..., n, :])
        r = r * eta
    return r


# ---------------------------------------------------------------------------------------------
# the residual of one cell (vectorised over a batch of states of that cell)
# ---------------------------------------------------------------------------------------------
def cell_residual(st: KernelStatic, fl: KernelFlow, j: int, x, F_in, Tg_in, x_old, inv_dt,
                  want_xi: bool = False, lam: float = 1.0):
    """Scaled residual of cell ``j`` [..., nv] at states ``x`` [..., nv] with the inflow
    ``F_in`` [nsp] (mol/s), ``Tg_in`` [K]; ``x_old`` [nv] and ``inv_dt`` [1/s] make it an
    implicit-Euler step (``inv_dt = 0``: steady). With ``want_xi`` also the extents [..., R]."""
    x = np.asarray(x, dtype=float)
    nf, ns, nn = st.nf, st.ns, st.nnode
    nb = nf + ns
    F = x[..., :NSP]
    Tg = x[..., NSP]
    Ts = x[..., NSP + 1]
    nodes = x[..., NSP + 2:].reshape(x.shape[:-1] + (nn, nb))
    cn, th = nodes[..., :nf], nodes[..., nf:]
    p = fl.p
    Ftot = F.sum(-1)
    ctot = p / (R_GAS * Tg)
    c_out = F[..., st.film_idx] * (ctot / Ftot)[..., None]
    c_in = F_in[st.film_idx] * (p / (R_GAS * Tg_in) / F_in.sum())
    cb = cell_mean(c_in, c_out)                                          # [..., nf]
    _, k_g, D_g = props(fl, Tg)
    r = rates(st, fl, cn, th, Ts, lam)                                   # [..., nn, R]
    xi = st.vol[j] * np.einsum("n,...nq->...q", st.node_frac, r)
    nu = st.nu_gas if inv_dt > 0 else st.nu_equiv
    dF = xi @ nu
    dH = _table(st.dH_tab, st.T_tab0, Ts)                                # [..., R]
    Q = -np.sum(xi * dH, axis=-1)
    cp = cp_mix(st, fl, Tg)
    hA = fl.Nu[j] * k_g / st.d_h * st.A_ht[j]
    Fcp = Ftot * cp
    out = np.empty(x.shape)
    out[..., :NSP] = (F - F_in - dF) / fl.F_row
    out[..., NSP] = Tg - Ts - (Tg_in - Ts) * np.exp(-hA / Fcp)
    heat = Q - Ftot * (h_mix(st, fl, Tg) - h_mix(st, fl, Tg_in)) - st.loss_UA[j] * (Ts - st.T_amb)
    if inv_dt > 0:
        heat = heat - st.C_cell[j] * (Ts - x_old[NSP + 1]) * inv_dt
    out[..., NSP + 1] = heat / fl.T_scale[j]
    prod = (st.node_frac / st.gsa)[:, None] * (r @ st.nu_film)          # [..., nn, nf]
    if st.film:
        km = fl.Sh[j] * D_g[..., st.film_idx] / st.d_h                   # [..., nf]
    else:
        km = np.full(x.shape[:-1] + (nf,), 1e12)
    res_n = out[..., NSP + 2:].reshape(x.shape[:-1] + (nn, nb))
    if st.resolved:
        _, _, D_s = props(fl, Ts)
        De = np.stack([d_eff(st, st.node_layer[n], D_s, Ts)[..., st.film_idx]
                       for n in range(nn)], axis=-2)                      # [..., nn, nf]
        half = st.node_dx[:, None] / (2.0 * De)
        G = np.empty(half.shape)
        G[..., 0, :] = 1.0 / (1.0 / km + half[..., 0, :])
        G[..., 1:, :] = 1.0 / (half[..., :-1, :] + half[..., 1:, :])
        J = np.zeros(x.shape[:-1] + (nn + 1, nf))
        J[..., 0, :] = G[..., 0, :] * (cb - cn[..., 0, :])
        J[..., 1:-1, :] = G[..., 1:, :] * (cn[..., :-1, :] - cn[..., 1:, :])
        res_n[..., :nf] = (J[..., :-1, :] - J[..., 1:, :] + prod) / fl.node_scale
    else:
        res_n[..., :nf] = (km[..., None, :] * (cb[..., None, :] - cn) + prod) / fl.node_scale
    if ns:
        net = np.einsum("...nq,qs->...ns", r, st.nu_site) / st.cap
        if inv_dt > 0:
            th_old = x_old[NSP + 2:].reshape(nn, nb)[:, nf:]
            net = net - (th - th_old) * inv_dt
        res_n[..., nf:] = np.where(st.site_used > 0, net, th)
    if want_xi:
        return out, xi
    return out


def norm(R) -> float:
    """Largest scaled residual, temperature rows [K] weighted by :data:`NORM_T_WEIGHT`."""
    w = np.abs(R)
    t = w[..., NSP:NSP + 2] * NORM_T_WEIGHT
    return float(max(np.max(w[..., :NSP]), np.max(t),
                     np.max(w[..., NSP + 2:]) if w.shape[-1] > NSP + 2 else 0.0))


def scales(st: KernelStatic, fl: KernelFlow):
    """Smallest magnitude each unknown is measured against [nv], for difference steps, the step
    bounds and the round-off test: 1 ppm of the total flow and of the total concentration,
    1e-4 coverage, 1 K. (Larger steps would cross the strongly nonlinear cell mean of a species
    that is nearly used up.)"""
    nb = st.nf + st.ns
    s = np.empty(NSP + 2 + st.nnode * nb)
    s[:NSP] = fl.F_scale * 1e-6
    s[NSP:NSP + 2] = 1.0
    c0 = fl.p / (R_GAS * fl.T_in) * 1e-6
    for n in range(st.nnode):
        b = NSP + 2 + n * nb
        s[b:b + st.nf] = c0
        s[b + st.nf:b + nb] = 1e-4
    return s


def cell_jacobian(st, fl, j, x, F_in, Tg_in, x_old, inv_dt, R0, fd_step, lam=1.0):
    """dR/dx of cell ``j`` [nv, nv] by differences of every column (all perturbed copies in
    one vectorised residual call), with the steps of the compiled kernel: h = fd_step
    max(|x|, scale); central differences where x - h and x + h stay inside the bounds (x - h
    >= 0, and x + h <= 1 for a coverage), else forward (coverages above 1/2 stepped down)."""
    nv = x.size
    h = fd_step * np.maximum(np.abs(x), scales(st, fl))
    cov = np.zeros(nv, dtype=bool)
    for n in range(st.nnode):
        b = NSP + 2 + n * (st.nf + st.ns) + st.nf
        cov[b:b + st.ns] = True
    central = (x - h >= 0.0) & (~cov | (x + h <= 1.0))
    h = np.where(cov & ~central & (x > 0.5), -h, h)
    E = np.diag(h)
    # the unperturbed state goes through the same batched evaluation as the perturbed ones, so
    # that round-off patterns of the batch cancel in the differences
    X = np.vstack([x[None, :], x[None, :] + E, x[None, :] - E])
    Rp = cell_residual(st, fl, j, X, F_in, Tg_in, x_old, inv_dt, lam=lam)
    up = x + h
    dn = np.where(central, x - h, x)
    Rlo = np.where(central[:, None], Rp[1 + nv:], Rp[:1])
    return ((Rp[1:1 + nv] - Rlo) / (up - dn)[:, None]).T


def factor(J):
    """LU factors of a cell Jacobian (dense, partial pivoting)."""
    return scipy.linalg.lu_factor(J, check_finite=False)


def apply(fac, rhs):
    """Solve J dx = rhs with the factors of :func:`factor`."""
    return scipy.linalg.lu_solve(fac, rhs, check_finite=False)


# ---------------------------------------------------------------------------------------------
# bounds
# ---------------------------------------------------------------------------------------------
def _bounds(st: KernelStatic, fl: KernelFlow):
    """(lower-bounded mask, upper-bounded mask, floors) of the unknowns: flows and
    concentrations >= 0, coverages in [0, 1]. An unknown within its floor (1e-6 of its scale:
    1e-12 of the total flow, 1e-10 coverage) of a bound is projected onto it rather than allowed
    to shorten every step (a trace species or an empty site that Newton overshoots below zero
    would otherwise stall the others)."""
    nv = NSP + 2 + st.nnode * (st.nf + st.ns)
    s = scales(st, fl)
    lower = np.zeros(nv, dtype=bool)
    upper = np.zeros(nv, dtype=bool)
    lower[:NSP] = True
    for n in range(st.nnode):
        b = NSP + 2 + n * (st.nf + st.ns)
        lower[b:b + st.nf + st.ns] = True
        upper[b + st.nf:b + st.nf + st.ns] = True
    floor = s * 1e-6
    return lower, upper, floor


def step_bound(x, dx, lower, upper, floor, tau_b):
    """Largest alpha <= 1 keeping every bounded unknown that is not already at its bound
    (within ``floor``) a fraction ``1 - tau_b`` of its distance from the bound."""
    a = 1.0
    neg = lower & (dx < 0) & (x > floor)
    if np.any(neg):
        a = min(a, float(np.min(-tau_b * x[neg] / dx[neg])))
    pos = upper & (dx > 0) & (1.0 - x > floor)
    if np.any(pos):
        a = min(a, float(np.min(tau_b * (1.0 - x[pos]) / dx[pos])))
    return a


def project(x, lower, upper):
    x[lower] = np.maximum(x[lower], 0.0)
    x[upper] = np.minimum(x[upper], 1.0)
    x[NSP] = min(max(x[NSP], _T_MIN), _T_MAX)
    x[NSP + 1] = min(max(x[NSP + 1], _T_MIN), _T_MAX)
    return x


# ---------------------------------------------------------------------------------------------
# one cell, then the march
# ---------------------------------------------------------------------------------------------
#: settings vector read by both kernels (see :class:`aftertreat.solver.SolverSettings`)
SETTINGS = ("tol", "tol_accept", "max_iter", "max_jac", "chord", "chord_accept", "chord_keep",
            "fd_step", "tau0", "tau_b", "max_step_T_K", "continuation")


def _balance_coverage(st, fl, j, x, F_in, Tg_in, x_old, inv_dt, lower, upper, steps=14):
    """Coverages that zero their balances at the start state (vectorised bisection per node
    and site: each balance falls monotonically from adsorption at theta = 0 to desorption and
    reaction at theta = 1)."""
    nb = st.nf + st.ns
    idx = np.array([NSP + 2 + n * nb + st.nf + s for n in range(st.nnode) for s in range(st.ns)],
                   dtype=int)
    if not idx.size:
        return x
    lo = np.zeros(idx.size)
    hi = np.ones(idx.size)
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        x[idx] = mid
        r = cell_residual(st, fl, j, x, F_in, Tg_in, x_old, inv_dt)[idx]
        lo = np.where(r > 0, mid, lo)
        hi = np.where(r > 0, hi, mid)
    x[idx] = np.where(st.site_used.ravel() > 0, 0.5 * (lo + hi), 0.0)
    return x


def _newton(st, fl, j, x0, F_in, Tg_in, x_old, inv_dt, fac, cfg, bnds, tol, lam):
    """Damped Newton on cell ``j`` (inflow fixed) until the scaled residual is below ``tol``.

    ``fac`` (factors of a neighbouring Jacobian, or None) serves chord steps while they cut the
    residual by ``chord_accept``; a fresh Jacobian is formed otherwise. A Newton step is first
    held to a trust region of ``max_step_T_K`` on the temperatures and to the bounds of the
    other unknowns (fraction to the boundary ``tau_b``, :func:`step_bound`); if the bounds cut
    it, the whole step projected onto the bounds is tried first; then it is backtracked until
    the residual falls. If Newton stalls, pseudo-time steps on the coverage and solid-
    temperature rows take over (switched evolution relaxation) and hand back to Newton.

    Returns (x, residual norm, stalled at round-off, factors, jacobians, evaluations).
    """
    tol_acc, max_it, max_jac, chord, c_acc, c_keep, fd, tau0, tau_b, max_dT = cfg[1:11]
    lower, upper, floor = bnds
    nv = x0.size
    mask = np.zeros(nv)
    mask[NSP + 1] = 1.0
    for n in range(st.nnode):
        b = NSP + 2 + n * (st.nf + st.ns) + st.nf
        mask[b:b + st.ns] = st.site_used[n]
    x = project(x0.copy(), lower, upper)
    sc = scales(st, fl)
    stalled = False

    def res(v):
        return cell_residual(st, fl, j, v, F_in, Tg_in, x_old, inv_dt, lam=lam)

    R = res(x)
    rn = norm(R)
    nres, njac = 1, 0
    fresh = False
    tau = 0.0
    if not chord:
        fac = None
    for _ in range(int(max_it)):
        if rn <= tol or not np.isfinite(rn):
            break
        if fac is None:
            if njac >= max_jac:
                break
            J = cell_jacobian(st, fl, j, x, F_in, Tg_in, x_old, inv_dt, R, fd, lam=lam)
            nres += nv
            if tau > 0:
                J = J - np.diag(mask / tau)
            try:
                fac = factor(J)
            except (ValueError, np.linalg.LinAlgError):
                fac = None
                break
            njac += 1
            fresh = True
        dx = -apply(fac, R)
        if not np.all(np.isfinite(dx)):
            if fresh:
                break
            fac = None
            continue
        if fresh and np.max(np.abs(dx) / (np.abs(x) + sc)) < STEP_TOL and rn < STALL_TOL:
            stalled = True                      # at the round-off floor of its rows
            break
        dT = max(abs(dx[NSP]), abs(dx[NSP + 1]))
        aT = max_dT / dT if dT > max_dT else 1.0
        a = min(aT, step_bound(x, dx, lower, upper, floor, tau_b))
        if not fresh:                                  # chord step: one try
            xt = project(x + a * dx, lower, upper)
            Rt = res(xt)
            nres += 1
            rt = norm(Rt)
            if np.isfinite(rt) and rt <= c_acc * rn:
                if rt > c_keep * rn:
                    fac = None
                x, R, rn = xt, Rt, rt
                continue
            if rn < 10.0 * tol:                        # the round-off floor, not the Jacobian
                break
            fac = None
            continue
        fresh = False
        ok = False
        if a < aT:
            # the bound cut the step: first try the full step projected onto the bounds (the
            # components it pushes past a bound stop there), which does not let one unknown
            # creeping towards its bound stall all the others
            xt = project(x + aT * dx, lower, upper)
            Rt = res(xt)
            nres += 1
            rt = norm(Rt)
            ok = bool(np.isfinite(rt) and rt < (1.0 - 1e-4 * a) * rn)
        for _ls in range(0 if ok else 12):
            xt = project(x + a * dx, lower, upper)
            Rt = res(xt)
            nres += 1
            rt = norm(Rt)
            if np.isfinite(rt) and (rt < (1.0 - 1e-4 * a) * rn or tau > 0):
                ok = True
                break
            a *= 0.5
        if ok:
            if tau > 0:
                tau *= min(max(rn / max(rt, 1e-300), 0.2), 10.0)
                fac = None
                if tau > 1e6:
                    tau = 0.0
            x, R, rn = xt, Rt, rt
            continue
        fac = None
        if rn < tol:
            break
        tau = tau0 if tau == 0 else tau * 0.1
        if tau < 1e-12:
            break
    return x, rn, stalled, fac, njac, nres


def solve_cell(st, fl, j, x0, F_in, Tg_in, x_old, inv_dt, fac, cfg, bnds):
    """Solve the balances of cell ``j`` with its inflow fixed: damped Newton (:func:`_newton`)
    and, if it fails, natural continuation in the reaction rates (every rate times lambda,
    lambda from 1e-3 to 1 in growing steps; a failed step is redone shorter; e.g. Allgower &
    Georg 2003, *Introduction to Numerical Continuation Methods*, ch. 1), which follows the
    solution from a nearly unreacting cell to the real one; and if that too fails, Newton from
    starts 50, 100, ... 400 K hotter (a strongly exothermic cell, e.g. a platinum slip catalyst
    fed thousands of ppm of NH3, can ignite: its cool solution ends at a fold of the heat
    balance, past which only the hot one exists).

    Returns (x, residual norm, converged, factors, jacobians formed, residual evaluations).
    """
    tol, tol_acc = cfg[0], cfg[1]
    x, rn, stalled, fac, njac, nres = _newton(st, fl, j, x0, F_in, Tg_in, x_old, inv_dt, fac,
                                              cfg, bnds, tol, 1.0)
    ok = rn < tol_acc or stalled
    if not ok and cfg[11] > 0:
        xh = x0.copy()
        lam_ok, lam, grow = 0.0, 1e-3, 10.0
        x = x0.copy()
        for _k in range(60):
            last = lam == 1.0
            x, rn, stalled, fac, nj, nr = _newton(st, fl, j, x, F_in, Tg_in, x_old, inv_dt,
                                                  None, cfg, bnds,
                                                  tol if last else 1e3 * tol_acc, lam)
            njac += nj
            nres += nr
            if rn < (tol_acc if last else 1e3 * tol_acc) or stalled:
                if last:
                    break
                lam_ok, xh = lam, x.copy()
                grow = min(grow * 2.0, 10.0)
            else:
                x = xh.copy()
                grow = np.sqrt(grow)
                if grow < 1.02:
                    break
            lam = min(1.0, max(lam_ok, 1e-3) * grow) if lam_ok > 0 else lam / 4.0
        rn = norm(cell_residual(st, fl, j, x, F_in, Tg_in, x_old, inv_dt))
        if not (rn < tol_acc or (stalled and rn < STALL_TOL)):
            # ignition: the cool solution of the cell's heat balance can end at a fold, which
            # no path from the cool side passes; the hot one is searched from hotter starts
            for k in range(1, 9):
                xs = x0.copy()
                xs[NSP + 1] += HOT_STEP_K * k
                xs[NSP] += 0.5 * HOT_STEP_K * k
                _balance_coverage(st, fl, j, xs, F_in, Tg_in, x_old, inv_dt, *bnds[:2])
                x, rn, stalled, fac, nj, nr = _newton(st, fl, j, xs, F_in, Tg_in, x_old, inv_dt,
                                                      None, cfg, bnds, tol, 1.0)
                njac += nj
                nres += nr + 14
                if rn < tol_acc or (stalled and rn < STALL_TOL):
                    break
    rn = norm(cell_residual(st, fl, j, x, F_in, Tg_in, x_old, inv_dt))
    nres += 1
    return x, rn, bool(rn < tol_acc or (stalled and rn < STALL_TOL)), fac, njac, nres


def march(st: KernelStatic, fl: KernelFlow, X, guess, x_old, inv_dt, factors, cfg):
    """Solve the cells of a brick one after another from the inlet.

    ``X`` [n, nv] receives the solution. ``guess`` [n, nv] or None: warm-start states (each
    cell starts from the better of its guess and its converged upstream neighbour);
    ``x_old`` [n, nv] and ``inv_dt``: an implicit-Euler step (``x_old`` also the guess);
    ``factors``: a list of per-cell factors of a previous solve (or None), used for chord
    steps, and updated in place with this solve's. A cold cell 0 starts at the inlet state
    with its coverages balanced (:func:`_balance_coverage`).

    Returns per-cell arrays (converged, residual, jacobians, residual evaluations) and the
    reaction extents [n, R] at the solution.
    """
    n = st.n
    bnds = _bounds(st, fl)
    conv = np.zeros(n, dtype=bool)
    res = np.zeros(n)
    njac = np.zeros(n, dtype=np.int64)
    nres = np.zeros(n, dtype=np.int64)
    XI = np.zeros((n, st.nrxn))
    F_in, Tg_in = fl.F_in.copy(), fl.T_in
    zero = np.zeros(X.shape[1])
    fac = None
    for j in range(n):
        xo = x_old[j] if x_old is not None else zero
        # starts in turn: the warm-start guess, the two upstream cells extrapolated, and the
        # upstream cell itself unless a start before it is already good (START_GOOD)
        best = None

        def consider(c):
            nonlocal best
            rc = norm(cell_residual(st, fl, j, c, F_in, Tg_in, xo, inv_dt))
            nres[j] += 1
            if np.isfinite(rc) and (best is None or rc < best[1]):
                best = (c, rc)

        if guess is not None:
            consider(project(guess[j].copy(), bnds[0], bnds[1]))
        if j > 1:
            # the two upstream cells extrapolated (geometrically where both are positive: the
            # profiles are close to exponential), projected into the bounds
            w = (st.dz[j - 1] + st.dz[j]) / (st.dz[j - 2] + st.dz[j - 1])
            a1, a2 = X[j - 1], X[j - 2]
            geo = bnds[0] & (a1 > 0) & (a2 > 0)
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                ex = np.where(geo, a1 * (a1 / np.where(geo, a2, 1.0)) ** w, a1 + (a1 - a2) * w)
            consider(project(ex, bnds[0], bnds[1]))
        if j > 0 and (best is None or best[1] > START_GOOD):
            consider(X[j - 1])
        if best is None:
            x0 = X[j].copy()                            # the raw inlet state
            _balance_coverage(st, fl, j, x0, F_in, Tg_in, xo, inv_dt, *bnds[:2])
            nres[j] += 14
            best = (x0, 0.0)
        # chords: this cell's factors from the last solve, unless the upstream cell has just
        # formed a Jacobian in this one (aftertreat.kernel_numba.march)
        own = factors is not None and factors[j] is not None and not (j > 0 and njac[j - 1] > 0)
        f0 = factors[j] if own else fac
        x, rn, ok, fac, nj, nr = solve_cell(st, fl, j, best[0], F_in, Tg_in, xo, inv_dt, f0,
                                            cfg, bnds)
        if fac is None:
            fac = f0
        if factors is not None:
            factors[j] = fac
        X[j] = x
        conv[j], res[j], njac[j] = ok, rn, nj
        nres[j] += nr
        XI[j] = cell_residual(st, fl, j, x, F_in, Tg_in, xo, inv_dt, want_xi=True)[1]
        F_in, Tg_in = x[:NSP].copy(), float(x[NSP])
    return conv, res, njac, nres, XI
