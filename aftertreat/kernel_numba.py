"""Compiled twin of :mod:`aftertreat.kernel_numpy` (numba ``njit(cache=True, nogil=True)``).

Same arrays in, same equations, same algorithm (the march of damped per-cell Newton solves with
chord steps, bounds and pseudo-time fallback; see :func:`aftertreat.kernel_numpy.solve_cell`);
tests hold the two to agreement. Differences, all for speed:

* loops instead of array expressions, and no temporaries in the per-cell work;
* the Jacobian is semi-analytic: the rates do not depend on the gas flows and temperature, so
  those columns are differences of the balances with the rates held; the solid-temperature
  column differences the whole residual; each washcoat node's columns difference only that
  node's rates and add the exact (linear) diffusion and film terms;
* the linear solve uses the structure of a cell's Jacobian: dense LU for small cells, and for
  resolved layers a block-tridiagonal elimination across the nodes (block Thomas) with a Schur
  complement on the 12 gas and temperature unknowns (the arrow structure: every node couples
  to the gas unknowns, and only to its neighbouring nodes).

The march itself is compiled, not only the cell functions: in Python, each cell's Newton
control would cost more in call overhead than its arithmetic (measured: ~5 us per call, tens of
calls per cell). The control that stays in Python is the brick-level strategy in
:mod:`aftertreat.solver` (cold retry, pseudo-transient continuation, acceptance checks).
"""
from __future__ import annotations

import math
import warnings

import numpy as np
from numba import njit

R_GAS = 8.314462618
NSP = 10
IT_G = NSP
IT_S = NSP + 1
NODE0 = NSP + 2
NG = NSP + 2
T_WEIGHT = 1e-3
_FLOOR = 1e-6
_TMIN, _TMAX = 200.0, 2000.0

#: a Newton step (fresh Jacobian) smaller than this, relative to the unknowns, means the cell
#: sits at the round-off floor of its residual: rows whose terms cancel (a reversible reaction
#: near equilibrium) cannot be resolved further; accepted if the residual is below STALL_TOL
STEP_TOL = 1e-10
STALL_TOL = 1e-7
#: solid-temperature steps of the hot starts of a cell that ignites [K]
HOT_STEP_K = 50.0
#: a start whose scaled residual is below this is taken without trying the next candidate
START_GOOD = 1e-3



def _cache_probe():
    return 0


def _can_cache() -> bool:
    """Whether numba can keep compiled code on disk for this file: beside it in __pycache__,
    else in the user's cache folder (numba's own order; NUMBA_CACHE_DIR overrides both). A
    read-only install with no writable home has neither; then the kernel compiles in memory at
    every start (~1 min) and says so once."""
    try:
        njit(cache=True)(_cache_probe)
    except RuntimeError as exc:                    # "cannot cache function ...: no locator"
        warnings.warn(f"no writable cache folder for the compiled kernel ({exc}); it will be "
                      "compiled at every start (about a minute); set NUMBA_CACHE_DIR to a "
                      "writable folder to keep it", RuntimeWarning, stacklevel=3)
        return False
    return True


CACHED = _can_cache()

# No reference counting inside the kernel: every array is allocated in Python (``Work``), so
# the runtime's per-call reference counts of the many arrays in the problem tuples (measured:
# ~3 us per internal call) are not needed.
_jit = njit(cache=CACHED, nogil=True, _nrt=False)


# ---------------------------------------------------------------------------------------------
# small helpers
# ---------------------------------------------------------------------------------------------
@_jit
def cell_mean(c_in, c_out):
    """Scalar twin of :func:`aftertreat.kernel_numpy.cell_mean`."""
    if not (c_out < c_in and c_in > 1e-200):
        return 0.5 * (c_in + c_out)
    a = c_in
    b = max(c_out, _FLOOR * a)
    lnr = math.log(a / b)
    if abs(a - b) <= 1e-6 * (a + b):
        lm = 0.5 * (a + b)
    else:
        lm = (a - b) / lnr
    if c_out >= b:
        return lm
    # below the floor: the quadratic through zero that meets the log mean with its slope
    s = (a / b - 1.0 - lnr) / (lnr * lnr) * b / lm
    t = c_out / b
    return lm * ((2.0 - s) * t + (s - 1.0) * t * t)


@_jit
def _props(fl, T, film_idx, D_out):
    """Conductivity at T, and the film species' diffusivities at the model pressure into
    ``D_out`` (ln property linear in ln T, end segments extended)."""
    lnT = math.log(T)
    tab = fl.lnT_tab
    nt = tab.shape[0]
    k = 0
    for m in range(1, nt - 1):
        if tab[m] <= lnT:
            k = m
    t = (lnT - tab[k]) / (tab[k + 1] - tab[k])
    P = fl.lnprop
    kg = math.exp(P[k, 1] + t * (P[k + 1, 1] - P[k, 1]))
    for f in range(film_idx.shape[0]):
        c = 2 + film_idx[f]
        D_out[f] = math.exp(P[k, c] + t * (P[k + 1, c] - P[k, c])) * fl.p_ratio
    return kg


@_jit
def _cp(st, fl, T):
    cp = 0.0
    for i in range(NSP):
        a = st.nasa_low if T < st.nasa_Tmid[i] else st.nasa_high
        v = a[i, 4]
        for k in range(3, -1, -1):
            v = v * T + a[i, k]
        cp += fl.x_cp[i] * v
    return R_GAS * cp


@_jit
def _h(st, fl, T):
    """Molar enthalpy of the table composition [J/mol] (NASA-7, formation included)."""
    h = 0.0
    for i in range(NSP):
        a = st.nasa_low if T < st.nasa_Tmid[i] else st.nasa_high
        v = a[i, 4] / 5.0
        v = v * T + a[i, 3] / 4.0
        v = v * T + a[i, 2] / 3.0
        v = v * T + a[i, 1] / 2.0
        v = v * T + a[i, 0]
        h += fl.x_cp[i] * (v * T + a[i, 5])
    return R_GAS * h


@_jit
def _tab(tab, T0, T, col):
    x = T - T0
    top = tab.shape[0] - 1 - 1e-9
    if x < 0.0:
        x = 0.0
    elif x > top:
        x = top
    i = int(x)
    w = x - i
    return tab[i, col] * (1.0 - w) + tab[i + 1, col] * w


@_jit
def _cpow(c, e, frac):
    if e == 1.0:
        return c
    if frac > 0.0:
        c = max(c, 0.0)
    if e == 2.0:
        return c * c
    return c ** e


# ---------------------------------------------------------------------------------------------
# rates
# ---------------------------------------------------------------------------------------------
@_jit
def _temp_pieces(st, fl, Ts, kT, kinv, inhK, dH, Deff, Dm, lam):
    """Everything of the rates that depends on the solid temperature only."""
    inv = 1.0 / Ts
    for q in range(st.nrxn):
        v = st.k_ref[q] * math.exp(-st.E_R[q] * (inv - st.inv_Tref[q]))
        if st.ages[q] > 0.0:
            v *= st.activity
        kT[q] = v * lam
        if st.rev[q] >= 0:
            kinv[q] = math.exp(-_tab(st.TlnKc_tab, st.T_tab0, Ts, st.rev[q]) * inv)
        if st.inh_p[q] > 0.0:
            for f in range(st.nf):
                if st.inh_K[q, f] != 0.0:
                    inhK[q, f] = st.inh_K[q, f] * math.exp(
                        -st.inh_dH_R[q, f] * (inv - st.inh_invT[q, f]))
                else:
                    inhK[q, f] = 0.0
        dH[q] = _tab(st.dH_tab, st.T_tab0, Ts, q)
    if st.effectiveness or st.resolved:
        _props(fl, Ts, st.film_idx, Dm)
        for k in range(st.depth.shape[0]):
            for f in range(st.nf):
                M = st.molar_mass[st.film_idx[f]]
                DK = st.d_pore[k] / 3.0 * math.sqrt(8.0 * R_GAS * Ts / (math.pi * M))
                Deff[k, f] = st.eps_tau[k] / (1.0 / Dm[f] + 1.0 / DK)


@_jit
def _node_rates(st, n, x, base, Ts, kT, kinv, inhK, Deff, r, row):
    """Rates of the reactions of node ``n``'s layer into ``r[row]`` (global reaction index);
    the node's unknowns start at ``x[base]``."""
    nf = st.nf
    layer = st.node_layer[n]
    lo, hi = st.rxn_lo[layer], st.rxn_hi[layer]
    for q in range(lo, hi):
        pa = 1.0
        pb = 1.0
        rev = st.rev[q] >= 0
        for f in range(nf):
            e = st.a_ord[q, f]
            if e != 0.0:
                pa *= _cpow(x[base + f], e, st.a_frac[q, f])
            if rev:
                e = st.b_ord[q, f]
                if e != 0.0:
                    pb *= _cpow(x[base + f], e, st.b_frac[q, f])
        v = kT[q] * (pa - kinv[q] * pb) if rev else kT[q] * pa
        for s in range(st.ns):
            m = st.cov_m[q, s]
            qq = st.cov_q[q, s]
            if m != 0.0 or qq != 0.0:
                th = min(max(x[base + nf + s], 0.0), 1.0)
                if m == 1.0:
                    v *= th
                elif m != 0.0:
                    v *= th ** m
                if qq == 1.0:
                    v *= 1.0 - th
                elif qq != 0.0:
                    v *= (1.0 - th) ** qq
        s = st.temkin_site[q]
        if s >= 0:
            th = min(max(x[base + nf + s], 0.0), 1.0)
            v *= math.exp(st.temkin_aE_R[q] * th / Ts)
        s = st.er_site[q]
        if s >= 0:
            th = min(max(x[base + nf + s], 0.0), 1.0)
            ts = st.er_ts[q]
            v *= ts * (1.0 - math.exp(-th / ts))
        p = st.inh_p[q]
        if p > 0.0:
            den = 1.0
            for f in range(nf):
                if inhK[q, f] != 0.0:
                    den += inhK[q, f] * max(x[base + f], 0.0)
            v /= den if p == 1.0 else den ** p
        r[row, q] = v
    if st.effectiveness:
        for kk in range(nf):
            kv = 0.0
            hit = False
            for q in range(lo, hi):
                if st.key[q] == kk:
                    kv += st.key_nu[q] * r[row, q]
                    hit = True
            if not hit:
                continue
            ck = x[base + kk]
            if abs(ck) < 1e-30:
                ck = 1e-30
            kv = max(kv / ck, 0.0)
            phi = st.depth[layer] * math.sqrt(kv / Deff[layer, kk])
            eta = math.tanh(phi) / phi if phi > 1e-6 else 1.0 - phi * phi / 3.0
            for q in range(lo, hi):
                if st.key[q] == kk:
                    r[row, q] *= eta


@_jit
def _all_rates(st, fl, x, W):
    Ts = x[IT_S]
    _temp_pieces(st, fl, Ts, W.kT, W.kinv, W.inhK, W.dH, W.Deff, W.Dm, W.lam[0])
    nb = st.nf + st.ns
    for n in range(st.nnode):
        for q in range(st.nrxn):
            W.r[n, q] = 0.0
        _node_rates(st, n, x, NODE0 + n * nb, Ts, W.kT, W.kinv, W.inhK, W.Deff, W.r, n)


@_jit
def _assemble(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, R, n_eval):
    """The residual of cell ``j`` at ``x`` from the rates already in ``W.r`` (and the
    temperature pieces of x's solid temperature in ``W``); fills ``W.xi``, ``W.km``, ``W.G``.
    Only the rows of the first ``n_eval`` washcoat nodes are written (the others are left as
    they are): the gas columns of the Jacobian need only the nodes that see the bulk gas."""
    nf, ns, nn = st.nf, st.ns, st.nnode
    nb = nf + ns
    Tg = x[IT_G]
    Ts = x[IT_S]
    p = fl.p
    Ftot = 0.0
    Fin_tot = 0.0
    for i in range(NSP):
        Ftot += x[i]
        Fin_tot += Fin[i]
    ctot = p / (R_GAS * Tg)
    cin = p / (R_GAS * Tgin) / Fin_tot
    for f in range(nf):
        i = st.film_idx[f]
        W.cb[f] = cell_mean(Fin[i] * cin, x[i] * ctot / Ftot)
    kg = _props(fl, Tg, st.film_idx, W.Dg)
    # extents and heat
    Q = 0.0
    for q in range(st.nrxn):
        s = 0.0
        for n in range(nn):
            s += st.node_frac[n] * W.r[n, q]
        W.xi[q] = st.vol[j] * s
        Q -= W.xi[q] * W.dH[q]
    nu = st.nu_gas if inv_dt > 0.0 else st.nu_equiv
    for i in range(NSP):
        d = 0.0
        for q in range(st.nrxn):
            d += nu[q, i] * W.xi[q]
        R[i] = (x[i] - Fin[i] - d) / fl.F_row[i]
    cp = _cp(st, fl, Tg)
    hA = fl.Nu[j] * kg / st.d_h * st.A_ht[j]
    Fcp = Ftot * cp
    R[IT_G] = Tg - Ts - (Tgin - Ts) * math.exp(-hA / Fcp)
    # the gas takes the enthalpy rise of its own flow (exact for any temperature change)
    heat = Q - Ftot * (_h(st, fl, Tg) - _h(st, fl, Tgin)) - st.loss_UA[j] * (Ts - st.T_amb)
    if inv_dt > 0.0:
        heat -= st.C_cell[j] * (Ts - xo[IT_S]) * inv_dt
    R[IT_S] = heat / fl.T_scale[j]
    for f in range(nf):
        W.km[f] = fl.Sh[j, f] * W.Dg[f] / st.d_h if st.film else 1e12
    if st.resolved:
        for n in range(min(n_eval + 1, nn)):
            k = st.node_layer[n]
            for f in range(nf):
                W.half[n, f] = st.node_dx[n] / (2.0 * W.Deff[k, f])
        for f in range(nf):
            W.G[0, f] = 1.0 / (1.0 / W.km[f] + W.half[0, f])
        for n in range(1, min(n_eval + 1, nn)):
            for f in range(nf):
                W.G[n, f] = 1.0 / (W.half[n - 1, f] + W.half[n, f])
    for n in range(n_eval):
        base = NODE0 + n * nb
        w = st.node_frac[n] / st.gsa
        for f in range(nf):
            prod = 0.0
            for q in range(st.nrxn):
                prod += st.nu_film[q, f] * W.r[n, q]
            prod *= w
            c = x[base + f]
            if st.resolved:
                if n == 0:
                    Jn = W.G[0, f] * (W.cb[f] - c)
                else:
                    Jn = W.G[n, f] * (x[base - nb + f] - c)
                Jn1 = W.G[n + 1, f] * (c - x[base + nb + f]) if n < nn - 1 else 0.0
                R[base + f] = (Jn - Jn1 + prod) / fl.node_scale[n, f]
            else:
                R[base + f] = (W.km[f] * (W.cb[f] - c) + prod) / fl.node_scale[n, f]
        for s in range(ns):
            th = x[base + nf + s]
            if st.site_used[n, s] > 0.0:
                net = 0.0
                for q in range(st.nrxn):
                    net += st.nu_site[q, s] * W.r[n, q]
                net /= st.cap[n, s]
                if inv_dt > 0.0:
                    net -= (th - xo[base + nf + s]) * inv_dt
                R[base + nf + s] = net
            else:
                R[base + nf + s] = th


@_jit
def residual(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, R):
    """Scaled residual of cell ``j`` into ``R`` (rates, extents and pieces left in ``W``)."""
    _all_rates(st, fl, x, W)
    _assemble(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, R, st.nnode)


@_jit
def norm(R):
    m = 0.0
    for i in range(R.shape[0]):
        v = abs(R[i])
        if i == IT_G or i == IT_S:
            v *= T_WEIGHT
        if v > m or v != v:
            m = v
    return m


@_jit
def scales(st, fl, s):
    nb = st.nf + st.ns
    for i in range(NSP):
        s[i] = fl.F_scale * 1e-6
    s[IT_G] = 1.0
    s[IT_S] = 1.0
    c0 = fl.p / (R_GAS * fl.T_in) * 1e-6
    for n in range(st.nnode):
        b = NODE0 + n * nb
        for f in range(st.nf):
            s[b + f] = c0
        for k in range(st.ns):
            s[b + st.nf + k] = 1e-4


# ---------------------------------------------------------------------------------------------
# the Jacobian
# ---------------------------------------------------------------------------------------------
@_jit
def jacobian(st, fl, j, x, Fin, Tgin, xo, inv_dt, fd, W, Jm):
    """dR/dx of cell ``j`` into ``Jm`` [nv, nv] (semi-analytic; module docstring)."""
    nv = x.shape[0]
    nf, ns, nn = st.nf, st.ns, st.nnode
    nb = nf + ns
    R0 = W.R0
    residual(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, R0)
    sc = W.sc
    scales(st, fl, sc)
    xp = W.xp
    Rp = W.Rp
    for i in range(nv):
        xp[i] = x[i]
    for a in range(nv):
        for b in range(nv):
            Jm[a, b] = 0.0
    # gas columns: flows and gas temperature, with the rates held (they depend on neither)
    # (central differences where the step stays inside the bounds: the log mean of a flow near
    # zero is curved on the scale of the flow itself). Of the washcoat rows only those of the
    # nodes that see the bulk gas depend on these columns: all nodes with one node per layer,
    # the first node of a resolved washcoat
    n_gas = 1 if st.resolved else nn
    rows = NODE0 + n_gas * nb
    for col in range(NSP + 1):
        h = fd * max(abs(x[col]), sc[col])
        xp[col] = x[col] + h
        if x[col] - h >= 0.0:
            up = xp[col]
            _assemble(st, fl, j, xp, Fin, Tgin, xo, inv_dt, W, Rp, n_gas)
            for a in range(rows):
                Jm[a, col] = Rp[a]
            xp[col] = x[col] - h
            h = up - xp[col]
            _assemble(st, fl, j, xp, Fin, Tgin, xo, inv_dt, W, Rp, n_gas)
            for a in range(rows):
                Jm[a, col] = (Jm[a, col] - Rp[a]) / h
        else:
            h = xp[col] - x[col]
            _assemble(st, fl, j, xp, Fin, Tgin, xo, inv_dt, W, Rp, n_gas)
            for a in range(rows):
                Jm[a, col] = (Rp[a] - R0[a]) / h
        xp[col] = x[col]
    # back to x's film coefficients and conductances (the node columns use them)
    _assemble(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, Rp, nn)
    # washcoat nodes: each node's own rates, plus the exact film/diffusion terms
    Ts = x[IT_S]
    nu = st.nu_gas if inv_dt > 0.0 else st.nu_equiv
    rp = W.rp
    dr = W.dr
    for n in range(nn):
        base = NODE0 + n * nb
        layer = st.node_layer[n]
        lo, hi = st.rxn_lo[layer], st.rxn_hi[layer]
        wv = st.vol[j] * st.node_frac[n]
        wa = st.node_frac[n] / st.gsa
        for v in range(nb):
            col = base + v
            h = fd * max(abs(x[col]), sc[col])
            if x[col] - h >= 0.0 and (v < nf or x[col] + h <= 1.0):
                # central differences where both sides are inside the bounds (Temkin and
                # Arrhenius-like terms are strongly curved: forward steps cost ~1e-6 accuracy)
                xp[col] = x[col] + h
                up = xp[col]
                _node_rates(st, n, xp, base, Ts, W.kT, W.kinv, W.inhK, W.Deff, rp, 0)
                xp[col] = x[col] - h
                h = up - xp[col]
                _node_rates(st, n, xp, base, Ts, W.kT, W.kinv, W.inhK, W.Deff, rp, 1)
                xp[col] = x[col]
                for q in range(lo, hi):
                    dr[q] = (rp[0, q] - rp[1, q]) / h
            else:
                if v >= nf and x[col] > 0.5:
                    h = -h
                xp[col] = x[col] + h
                h = xp[col] - x[col]
                _node_rates(st, n, xp, base, Ts, W.kT, W.kinv, W.inhK, W.Deff, rp, 0)
                xp[col] = x[col]
                for q in range(lo, hi):
                    dr[q] = (rp[0, q] - W.r[n, q]) / h
            for i in range(NSP):
                d = 0.0
                for q in range(lo, hi):
                    d += nu[q, i] * dr[q]
                Jm[i, col] = -wv * d / fl.F_row[i]
            d = 0.0
            for q in range(lo, hi):
                d -= W.dH[q] * dr[q]
            Jm[IT_S, col] = wv * d / fl.T_scale[j]
            for f in range(nf):
                d = 0.0
                for q in range(lo, hi):
                    d += st.nu_film[q, f] * dr[q]
                Jm[base + f, col] = wa * d / fl.node_scale[n, f]
            if v < nf:
                if st.resolved:
                    g_up = W.G[n, v]
                    g_dn = W.G[n + 1, v] if n < nn - 1 else 0.0
                    Jm[base + v, col] += -(g_up + g_dn) / fl.node_scale[n, v]
                    if n > 0:
                        Jm[base - nb + v, col] += g_up / fl.node_scale[n - 1, v]
                    if n < nn - 1:
                        Jm[base + nb + v, col] += g_dn / fl.node_scale[n + 1, v]
                else:
                    Jm[base + v, col] += -W.km[v] / fl.node_scale[n, v]
            for s in range(ns):
                row = base + nf + s
                if st.site_used[n, s] > 0.0:
                    d = 0.0
                    for q in range(lo, hi):
                        d += st.nu_site[q, s] * dr[q]
                    d /= st.cap[n, s]
                    if v == nf + s:
                        d -= inv_dt
                    Jm[row, col] = d
                else:
                    Jm[row, col] = 1.0 if v == nf + s else 0.0
    # solid temperature last: the whole residual (it overwrites the rates in W), by central
    # differences (Arrhenius terms make this the most curved column: E/(R T^2) ~ 0.1-0.5 1/K)
    h = fd * max(abs(x[IT_S]), sc[IT_S])
    xp[IT_S] = x[IT_S] + h
    up = xp[IT_S]
    residual(st, fl, j, xp, Fin, Tgin, xo, inv_dt, W, Rp)
    for a in range(nv):
        Jm[a, IT_S] = Rp[a]
    xp[IT_S] = x[IT_S] - h
    h = up - xp[IT_S]
    residual(st, fl, j, xp, Fin, Tgin, xo, inv_dt, W, Rp)
    xp[IT_S] = x[IT_S]
    for a in range(nv):
        Jm[a, IT_S] = (Jm[a, IT_S] - Rp[a]) / h


# ---------------------------------------------------------------------------------------------
# linear algebra: dense LU, and the block structure of resolved layers
# ---------------------------------------------------------------------------------------------
@_jit
def _lu(A, piv):
    """In-place LU with partial pivoting of the square ``A``; False if singular."""
    n = A.shape[0]
    for k in range(n):
        p = k
        big = abs(A[k, k])
        for i in range(k + 1, n):
            v = abs(A[i, k])
            if v > big:
                big = v
                p = i
        piv[k] = p
        if big == 0.0 or big != big:
            return False
        if p != k:
            for c in range(n):
                t = A[k, c]
                A[k, c] = A[p, c]
                A[p, c] = t
        inv = 1.0 / A[k, k]
        for i in range(k + 1, n):
            A[i, k] *= inv
            m = A[i, k]
            if m != 0.0:
                for c in range(k + 1, n):
                    A[i, c] -= m * A[k, c]
    return True


@_jit
def _lu_solve(LU, piv, b):
    """Solve in place with the factors of :func:`_lu`."""
    n = LU.shape[0]
    for k in range(n):
        p = piv[k]
        if p != k:
            t = b[k]
            b[k] = b[p]
            b[p] = t
    for i in range(n):
        s = b[i]
        for c in range(i):
            s -= LU[i, c] * b[c]
        b[i] = s
    for i in range(n - 1, -1, -1):
        s = b[i]
        for c in range(i + 1, n):
            s -= LU[i, c] * b[c]
        b[i] = s / LU[i, i]


@_jit
def _structured(nv, nn, resolved):
    """Resolved layers with enough unknowns use the block structure (module docstring)."""
    return resolved == 1 and nn > 1 and nv > 30


@_jit
def fac_sizes(nv, nn, nb, resolved):
    """(float size, int size) of one cell's stored factors."""
    if not _structured(nv, nn, resolved):
        return nv * nv, nv
    blk = nb * nb
    nfl = 3 * nn * blk + 2 * nn * nb * NG + NG * NG
    return nfl, nn * nb + NG


@_jit
def factor(st, Jm, ff, fi, W):
    """Factor the cell Jacobian ``Jm`` into the flat arrays ``ff`` (floats), ``fi`` (ints)."""
    nv = Jm.shape[0]
    nn = st.nnode
    nb = st.nf + st.ns
    if not _structured(nv, nn, st.resolved):
        A = ff[:nv * nv].reshape((nv, nv))
        for a in range(nv):
            for b in range(nv):
                A[a, b] = Jm[a, b]
        return _lu(A, fi[:nv])
    blk = nb * nb
    Gs = ff[0:nn * blk].reshape((nn, nb, nb))
    Ms = ff[nn * blk:2 * nn * blk].reshape((nn, nb, nb))
    Ls = ff[2 * nn * blk:3 * nn * blk].reshape((nn, nb, nb))
    o = 3 * nn * blk
    Wm = ff[o:o + nn * nb * NG].reshape((nn * nb, NG))
    o += nn * nb * NG
    Agn = ff[o:o + NG * nn * nb].reshape((NG, nn * nb))
    o += NG * nn * nb
    S = ff[o:o + NG * NG].reshape((NG, NG))
    pivG = fi[0:nn * nb].reshape((nn, nb))
    pivS = fi[nn * nb:nn * nb + NG]
    for k in range(nn):
        b0 = NG + k * nb
        for a in range(nb):
            for b in range(nb):
                Gs[k, a, b] = Jm[b0 + a, b0 + b]
                Ls[k, a, b] = Jm[b0 + a, b0 - nb + b] if k > 0 else 0.0
    # block Thomas: G_k = D_k - L_k M_k, M_k = G_(k-1)^-1 U_(k-1)
    col = W.col
    for k in range(nn):
        if k > 0:
            b0 = NG + (k - 1) * nb
            for c in range(nb):
                for a in range(nb):
                    col[a] = Jm[b0 + a, b0 + nb + c]          # U_(k-1), column c
                _lu_solve(Gs[k - 1], pivG[k - 1], col)
                for a in range(nb):
                    Ms[k, a, c] = col[a]
            for a in range(nb):
                for c in range(nb):
                    s = 0.0
                    for m in range(nb):
                        s += Ls[k, a, m] * Ms[k, m, c]
                    Gs[k, a, c] -= s
        if not _lu(Gs[k], pivG[k]):
            return False
    # W = T^-1 A_ng, S = A_gg - A_gn W
    rhs = W.rhs
    for g in range(NG):
        for a in range(nn * nb):
            rhs[a] = Jm[NG + a, g]
        _tri_solve(nn, nb, Gs, Ms, Ls, pivG, rhs, W.tmp)
        for a in range(nn * nb):
            Wm[a, g] = rhs[a]
    for g in range(NG):
        for a in range(nn * nb):
            Agn[g, a] = Jm[g, NG + a]
    for g in range(NG):
        for h in range(NG):
            s = Jm[g, h]
            for a in range(nn * nb):
                s -= Agn[g, a] * Wm[a, h]
            S[g, h] = s
    return _lu(S, pivS)


@_jit
def _tri_solve(nn, nb, Gs, Ms, Ls, pivG, y, tmp):
    """Solve T y = r in place (block Thomas factors)."""
    for k in range(nn):
        o = k * nb
        if k > 0:
            for a in range(nb):
                s = 0.0
                for m in range(nb):
                    s += Ls[k, a, m] * y[o - nb + m]
                y[o + a] -= s
        for a in range(nb):
            tmp[a] = y[o + a]
        _lu_solve(Gs[k], pivG[k], tmp)
        for a in range(nb):
            y[o + a] = tmp[a]
    for k in range(nn - 2, -1, -1):
        o = k * nb
        for a in range(nb):
            s = 0.0
            for m in range(nb):
                s += Ms[k + 1, a, m] * y[o + nb + m]
            y[o + a] -= s


@_jit
def apply(st, ff, fi, rhs, out, W):
    """out = J^-1 rhs with the factors of :func:`factor`."""
    nv = rhs.shape[0]
    nn = st.nnode
    nb = st.nf + st.ns
    for a in range(nv):
        out[a] = rhs[a]
    if not _structured(nv, nn, st.resolved):
        _lu_solve(ff[:nv * nv].reshape((nv, nv)), fi[:nv], out)
        return
    blk = nb * nb
    Gs = ff[0:nn * blk].reshape((nn, nb, nb))
    Ms = ff[nn * blk:2 * nn * blk].reshape((nn, nb, nb))
    Ls = ff[2 * nn * blk:3 * nn * blk].reshape((nn, nb, nb))
    o = 3 * nn * blk
    Wm = ff[o:o + nn * nb * NG].reshape((nn * nb, NG))
    o += nn * nb * NG
    Agn = ff[o:o + NG * nn * nb].reshape((NG, nn * nb))
    o += NG * nn * nb
    S = ff[o:o + NG * NG].reshape((NG, NG))
    pivG = fi[0:nn * nb].reshape((nn, nb))
    pivS = fi[nn * nb:nn * nb + NG]
    y = out[NG:]
    _tri_solve(nn, nb, Gs, Ms, Ls, pivG, y, W.tmp)
    t = W.tS
    for g in range(NG):
        s = rhs[g]
        for a in range(nn * nb):
            s -= Agn[g, a] * y[a]
        t[g] = s
    _lu_solve(S, pivS, t)
    for g in range(NG):
        out[g] = t[g]
    for a in range(nn * nb):
        s = 0.0
        for g in range(NG):
            s += Wm[a, g] * t[g]
        y[a] -= s


# ---------------------------------------------------------------------------------------------
# one cell, then the march
# ---------------------------------------------------------------------------------------------
@_jit
def _bounds(st, fl, lower, upper, floor):
    nb = st.nf + st.ns
    nv = lower.shape[0]
    scales(st, fl, floor)
    for i in range(nv):
        floor[i] *= 1e-6
        lower[i] = i < NSP
        upper[i] = False
    for n in range(st.nnode):
        b = NODE0 + n * nb
        for k in range(nb):
            lower[b + k] = True
        for k in range(st.ns):
            upper[b + st.nf + k] = True


@_jit
def _step_bound(x, dx, lower, upper, floor, tau_b):
    a = 1.0
    for i in range(x.shape[0]):
        if lower[i] and dx[i] < 0.0 and x[i] > floor[i]:
            v = -tau_b * x[i] / dx[i]
            if v < a:
                a = v
        if upper[i] and dx[i] > 0.0 and 1.0 - x[i] > floor[i]:
            v = tau_b * (1.0 - x[i]) / dx[i]
            if v < a:
                a = v
    return a


@_jit
def _project(x, lower, upper):
    for i in range(x.shape[0]):
        if lower[i] and x[i] < 0.0:
            x[i] = 0.0
        if upper[i] and x[i] > 1.0:
            x[i] = 1.0
    x[IT_G] = min(max(x[IT_G], _TMIN), _TMAX)
    x[IT_S] = min(max(x[IT_S], _TMIN), _TMAX)


@_jit
def _trial(x, dx, a, lower, upper, out):
    for i in range(x.shape[0]):
        v = x[i] + a * dx[i]
        if lower[i] and v < 0.0:
            v = 0.0
        if upper[i] and v > 1.0:
            v = 1.0
        out[i] = v
    out[IT_G] = min(max(out[IT_G], _TMIN), _TMAX)
    out[IT_S] = min(max(out[IT_S], _TMIN), _TMAX)


@_jit
def _balance_coverage(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, R):
    """Coverages that zero their balances at the start state (bisection, 14 halvings)."""
    nb = st.nf + st.ns
    if st.ns == 0:
        return
    nn = st.nnode
    lo = W.lo
    hi = W.hi
    for n in range(nn):
        for s in range(st.ns):
            lo[n, s] = 0.0
            hi[n, s] = 1.0
    for _ in range(14):
        for n in range(nn):
            for s in range(st.ns):
                x[NODE0 + n * nb + st.nf + s] = 0.5 * (lo[n, s] + hi[n, s])
        residual(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, R)
        for n in range(nn):
            for s in range(st.ns):
                mid = 0.5 * (lo[n, s] + hi[n, s])
                if R[NODE0 + n * nb + st.nf + s] > 0.0:
                    lo[n, s] = mid
                else:
                    hi[n, s] = mid
    for n in range(nn):
        for s in range(st.ns):
            v = 0.5 * (lo[n, s] + hi[n, s])
            x[NODE0 + n * nb + st.nf + s] = v if st.site_used[n, s] > 0.0 else 0.0


@_jit
def _newton(st, fl, j, x, Fin, Tgin, xo, inv_dt, ff, fi, have_fac, cfg, bnd_lo, bnd_hi, floor,
            W, stat, tol, max_it, max_jac, have_R):
    """Damped Newton on cell ``j`` in place on ``x`` until the residual is below ``tol``.
    ``stat`` receives [residual, stalled at round-off, jacobians, evaluations, factors valid]
    (the counts are added to). ``have_R``: 1 if ``W.R`` already holds the residual of ``x``
    (the march evaluated its start; ``x`` inside the bounds), 2 if the rates and extents in
    ``W`` are that evaluation's too, else 0. Returns whether the residual last evaluated
    (rates and extents in ``W``) is that of the final ``x``."""
    fd, tau0, tau_b, max_dT = cfg[7], cfg[8], cfg[9], cfg[10]
    chord = cfg[4] > 0.0
    c_acc, c_keep = cfg[5], cfg[6]
    nv = x.shape[0]
    nb = st.nf + st.ns
    R = W.R
    Rt = W.Rt
    xt = W.xt
    dx = W.dx
    Jm = W.J
    stalled = False
    at_x = True
    if have_R > 0:
        nres = 0
        at_x = have_R == 2
    else:
        _project(x, bnd_lo, bnd_hi)                 # the start inside the bounds
        residual(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, R)
        nres = 1
    rn = norm(R)
    njac = 0
    fresh = False
    tau = 0.0
    if not chord:
        have_fac = False
    for _it in range(max_it):
        if rn <= tol or rn != rn:
            break
        if not have_fac:
            if njac >= max_jac:
                break
            jacobian(st, fl, j, x, Fin, Tgin, xo, inv_dt, fd, W, Jm)
            nres += nv
            at_x = False
            if tau > 0.0:
                Jm[IT_S, IT_S] -= 1.0 / tau
                for n in range(st.nnode):
                    for s in range(st.ns):
                        if st.site_used[n, s] > 0.0:
                            c = NODE0 + n * nb + st.nf + s
                            Jm[c, c] -= 1.0 / tau
            njac += 1
            if not factor(st, Jm, ff, fi, W):
                have_fac = False
                break
            have_fac = True
            fresh = True
        for i in range(nv):
            Rt[i] = -R[i]
        apply(st, ff, fi, Rt, dx, W)
        finite = True
        big = 0.0
        for i in range(nv):
            if not math.isfinite(dx[i]):
                finite = False
            else:
                v = abs(dx[i]) / (abs(x[i]) + W.sc[i])
                if v > big:
                    big = v
        if not finite:
            have_fac = False
            if fresh:
                break
            continue
        if fresh and big < STEP_TOL and rn < STALL_TOL:
            stalled = True                         # at the round-off floor of its rows
            break
        # a trust region on the temperatures, then the bounds of the other unknowns
        dT = max(abs(dx[IT_G]), abs(dx[IT_S]))
        aT = max_dT / dT if dT > max_dT else 1.0
        a = min(aT, _step_bound(x, dx, bnd_lo, bnd_hi, floor, tau_b))
        if not fresh:                                  # chord step: one try
            _trial(x, dx, a, bnd_lo, bnd_hi, xt)
            residual(st, fl, j, xt, Fin, Tgin, xo, inv_dt, W, Rt)
            nres += 1
            at_x = False
            rt = norm(Rt)
            if rt == rt and rt <= c_acc * rn:
                if rt > c_keep * rn:
                    have_fac = False
                for i in range(nv):
                    x[i] = xt[i]
                    R[i] = Rt[i]
                rn = rt
                at_x = True
                continue
            if rn < 10.0 * tol:
                break
            have_fac = False
            continue
        fresh = False
        ok = False
        rt = rn
        if a < aT:
            # the bound cut the step: first try the full step projected onto the bounds (the
            # components it pushes past a bound stop there), which does not let one unknown
            # creeping towards its bound stall all the others
            _trial(x, dx, aT, bnd_lo, bnd_hi, xt)
            residual(st, fl, j, xt, Fin, Tgin, xo, inv_dt, W, Rt)
            nres += 1
            at_x = False
            rt = norm(Rt)
            if rt == rt and (rt < (1.0 - 1e-4 * a) * rn):
                ok = True
        for _ls in range(0 if ok else 12):
            _trial(x, dx, a, bnd_lo, bnd_hi, xt)
            residual(st, fl, j, xt, Fin, Tgin, xo, inv_dt, W, Rt)
            nres += 1
            at_x = False
            rt = norm(Rt)
            if rt == rt and (rt < (1.0 - 1e-4 * a) * rn or tau > 0.0):
                ok = True
                break
            a *= 0.5
        if ok:
            if tau > 0.0:
                tau *= min(max(rn / max(rt, 1e-300), 0.2), 10.0)
                have_fac = False
                if tau > 1e6:
                    tau = 0.0
            for i in range(nv):
                x[i] = xt[i]
                R[i] = Rt[i]
            rn = rt
            at_x = True
            continue
        have_fac = False
        if rn < tol:
            break
        tau = tau0 if tau == 0.0 else tau * 0.1
        if tau < 1e-12:
            break
    stat[0] = rn
    stat[1] = 1.0 if stalled else 0.0
    stat[2] += njac
    stat[3] += nres
    stat[4] = 1.0 if have_fac else 0.0
    return at_x


@_jit
def solve_cell(st, fl, j, x, Fin, Tgin, xo, inv_dt, ff, fi, have_fac, cfg, bnd_lo, bnd_hi,
               floor, W, out, have_R):
    """Solve cell ``j`` in place on ``x`` (twin of :func:`aftertreat.kernel_numpy.solve_cell`):
    damped Newton, and if it fails, continuation in the reaction rates from a nearly
    unreacting cell. ``ff``/``fi`` hold the chord factors (valid if ``have_fac``) and receive
    any new ones. ``out`` = [residual, converged, jacobians, residual evaluations, factors
    valid]. ``have_R``: what ``W`` holds of the start ``x`` (see :func:`_newton`)."""
    tol, tol_acc = cfg[0], cfg[1]
    max_it, max_jac = int(cfg[2]), int(cfg[3])
    nv = x.shape[0]
    st_ = W.stat
    for k in range(5):
        st_[k] = 0.0
    scales(st, fl, W.sc)
    x0 = W.x0
    for i in range(nv):
        x0[i] = x[i]
    W.lam[0] = 1.0
    at_x = _newton(st, fl, j, x, Fin, Tgin, xo, inv_dt, ff, fi, have_fac, cfg, bnd_lo, bnd_hi,
                   floor, W, st_, tol, max_it, max_jac, have_R)
    ok = st_[0] < tol_acc or st_[1] > 0.0
    if not ok:
        at_x = False
    if not ok and cfg[11] > 0.0:
        # continuation: all rates x lam, lam from 1e-3 to 1 in growing steps (each Newton
        # solve starts from the last converged one; a failed step is redone shorter)
        xh = W.xh
        for i in range(nv):
            x[i] = x0[i]
            xh[i] = x0[i]
        lam_ok = 0.0
        lam = 1e-3
        grow = 10.0
        for _k in range(60):
            W.lam[0] = lam
            _newton(st, fl, j, x, Fin, Tgin, xo, inv_dt, ff, fi, False, cfg, bnd_lo, bnd_hi,
                    floor, W, st_, tol if lam == 1.0 else 1e3 * tol_acc, max_it, max_jac,
                    0)
            good = st_[0] < (tol_acc if lam == 1.0 else 1e3 * tol_acc) or st_[1] > 0.0
            if good:
                if lam == 1.0:
                    break
                lam_ok = lam
                for i in range(nv):
                    xh[i] = x[i]
                grow = min(grow * 2.0, 10.0)
            else:
                for i in range(nv):
                    x[i] = xh[i]
                grow = math.sqrt(grow)
                if grow < 1.02:
                    break
            lam = min(1.0, max(lam_ok, 1e-3) * grow) if lam_ok > 0.0 else lam / 4.0
        W.lam[0] = 1.0
        residual(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, W.R)
        rn = norm(W.R)
        if not (rn < tol_acc or (st_[1] > 0.0 and rn < STALL_TOL)):
            # ignition: the cool solution of the cell's heat balance can end at a fold, which
            # no path from the cool side passes; the hot one is searched from hotter starts
            for k in range(1, 9):
                for i in range(nv):
                    x[i] = x0[i]
                x[IT_S] = x0[IT_S] + HOT_STEP_K * k
                x[IT_G] = x0[IT_G] + 0.5 * HOT_STEP_K * k
                _balance_coverage(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, W.R)
                _newton(st, fl, j, x, Fin, Tgin, xo, inv_dt, ff, fi, False, cfg, bnd_lo,
                        bnd_hi, floor, W, st_, tol, max_it, max_jac, 0)
                if st_[0] < tol_acc or (st_[1] > 0.0 and st_[0] < STALL_TOL):
                    break
    # leave the rates and extents of the final state in W (unless the last evaluation was it)
    extra = 0
    if not at_x:
        residual(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, W.R)
        extra = 1
    rn = norm(W.R)
    out[0] = rn
    out[1] = 1.0 if (rn < tol_acc or (st_[1] > 0.0 and rn < STALL_TOL)) else 0.0
    out[2] = st_[2]
    out[3] = st_[3] + extra
    out[4] = st_[4]


@_jit
def march(st, fl, X, guess, has_guess, x_old, inv_dt, FF, FI, fac_ok, cfg, conv, res, njac,
          nres, XI, W):
    """Twin of :func:`aftertreat.kernel_numpy.march` (arrays in, arrays out). ``FF``, ``FI``
    [n, size] hold per-cell factors, valid where ``fac_ok``; they are updated in place."""
    n = st.n
    nv = X.shape[1]
    lower = W.lower
    upper = W.upper
    floor = W.floor
    _bounds(st, fl, lower, upper, floor)
    Fin = W.Fin
    for i in range(NSP):
        Fin[i] = fl.F_in[i]
    Tgin = fl.T_in
    nfl, nin = FF.shape[1], FI.shape[1]
    ff = W.ff
    fi = W.fi
    have = False
    x = W.x
    cand = W.cand
    out = W.out
    for j in range(n):
        xo = x_old[j]
        best = 1e300
        cnt = 0
        last = False                               # the last evaluation is the best start
        if has_guess:
            for i in range(nv):
                cand[i] = guess[j, i]
            _project(cand, lower, upper)
            residual(st, fl, j, cand, Fin, Tgin, xo, inv_dt, W, W.R)
            cnt += 1
            r = norm(W.R)
            if r == r:
                best = r
                last = True
                for i in range(nv):
                    x[i] = cand[i]
                    W.Rp[i] = W.R[i]
        if j > 1:
            # the two upstream cells extrapolated (geometrically where both are positive: the
            # profiles are close to exponential), projected into the bounds
            w = (st.dz[j - 1] + st.dz[j]) / (st.dz[j - 2] + st.dz[j - 1])
            for i in range(nv):
                a1 = X[j - 1, i]
                a2 = X[j - 2, i]
                if lower[i] and a1 > 0.0 and a2 > 0.0:
                    cand[i] = a1 * (a1 / a2) ** w
                else:
                    cand[i] = a1 + (a1 - a2) * w
            _project(cand, lower, upper)
            residual(st, fl, j, cand, Fin, Tgin, xo, inv_dt, W, W.R)
            cnt += 1
            r = norm(W.R)
            last = r == r and r < best
            if last:
                best = r
                for i in range(nv):
                    x[i] = cand[i]
                    W.Rp[i] = W.R[i]
        if j > 0 and best > START_GOOD:
            # the upstream cell itself, unless a start above is already good (the extrapolated
            # one nearly always is: it saves one residual per cell)
            residual(st, fl, j, X[j - 1], Fin, Tgin, xo, inv_dt, W, W.R)
            cnt += 1
            r = norm(W.R)
            last = r == r and r < best
            if last:
                best = r
                for i in range(nv):
                    x[i] = X[j - 1, i]
                    W.Rp[i] = W.R[i]
        have_R = 0 if best == 1e300 else (2 if last else 1)
        if have_R > 0:
            # the chosen start's residual (the march's starts are inside the bounds already,
            # except the upstream cell's state, which is a converged one)
            for i in range(nv):
                W.R[i] = W.Rp[i]
        else:
            for i in range(nv):
                x[i] = X[j, i]                     # the raw inlet state
            _balance_coverage(st, fl, j, x, Fin, Tgin, xo, inv_dt, W, W.R)
            cnt += 14
        # chords: this cell's factors from the last solve, unless the upstream cell has just
        # formed a Jacobian in this one (a neighbour at the same time and inlet is closer than
        # the same cell at another time: measured, 22 against ~75 Jacobians per step of a slip
        # catalyst after a 5 K, 20 ppm inlet change)
        if fac_ok[j] and not (j > 0 and njac[j - 1] > 0):
            for i in range(nfl):
                ff[i] = FF[j, i]
            for i in range(nin):
                fi[i] = FI[j, i]
            have = True
        solve_cell(st, fl, j, x, Fin, Tgin, xo, inv_dt, ff, fi, have, cfg, lower, upper,
                   floor, W, out, have_R)
        have = out[4] > 0.0
        if have:
            for i in range(nfl):
                FF[j, i] = ff[i]
            for i in range(nin):
                FI[j, i] = fi[i]
        fac_ok[j] = have
        for i in range(nv):
            X[j, i] = x[i]
        res[j] = out[0]
        conv[j] = out[1] > 0.0
        njac[j] = int(out[2])
        nres[j] = int(out[3]) + cnt
        for q in range(st.nrxn):
            XI[j, q] = W.xi[q]
        for i in range(NSP):
            Fin[i] = x[i]
        Tgin = x[IT_G]


# ---------------------------------------------------------------------------------------------
# work space (allocated in Python once per problem)
# ---------------------------------------------------------------------------------------------
from typing import NamedTuple  # noqa: E402


class Work(NamedTuple):
    """Scratch arrays of one cell's residual and Jacobian."""
    kT: np.ndarray
    kinv: np.ndarray
    inhK: np.ndarray
    dH: np.ndarray
    Deff: np.ndarray
    Dm: np.ndarray
    r: np.ndarray
    xi: np.ndarray
    cb: np.ndarray
    Dg: np.ndarray
    km: np.ndarray
    half: np.ndarray
    G: np.ndarray
    R: np.ndarray
    Rt: np.ndarray
    R0: np.ndarray
    Rp: np.ndarray
    xt: np.ndarray
    dx: np.ndarray
    xp: np.ndarray
    sc: np.ndarray
    rp: np.ndarray
    dr: np.ndarray
    J: np.ndarray
    col: np.ndarray
    rhs: np.ndarray
    tmp: np.ndarray
    tS: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    floor: np.ndarray
    Fin: np.ndarray
    ff: np.ndarray
    fi: np.ndarray
    x: np.ndarray
    cand: np.ndarray
    out: np.ndarray
    x0: np.ndarray
    xh: np.ndarray
    stat: np.ndarray
    lam: np.ndarray


def make_work(st) -> Work:
    """Scratch arrays sized for the problem ``st`` (a :class:`~aftertreat.problem.KernelStatic`)."""
    nb = max(st.nf + st.ns, 1)
    ns = max(st.ns, 1)
    nv = NSP + 2 + st.nnode * (st.nf + st.ns)
    nfl, nin = fac_sizes(nv, st.nnode, st.nf + st.ns, st.resolved)
    R = max(st.nrxn, 1)
    nf = max(st.nf, 1)
    vec = lambda: np.zeros(nv)            # noqa: E731
    return Work(kT=np.zeros(R), kinv=np.zeros(R), inhK=np.zeros((R, nf)), dH=np.zeros(R),
                Deff=np.ones((st.depth.shape[0], nf)), Dm=np.ones(nf),
                r=np.zeros((st.nnode, R)), xi=np.zeros(R), cb=np.zeros(nf), Dg=np.ones(nf),
                km=np.ones(nf), half=np.ones((st.nnode, nf)), G=np.ones((st.nnode, nf)),
                R=vec(), Rt=vec(), R0=vec(), Rp=vec(), xt=vec(), dx=vec(), xp=vec(), sc=vec(),
                rp=np.zeros((2, R)), dr=np.zeros(R), J=np.zeros((nv, nv)),
                col=np.zeros(nb), rhs=np.zeros(max(st.nnode * nb, 1)), tmp=np.zeros(nb),
                tS=np.zeros(NG), lo=np.zeros((st.nnode, ns)), hi=np.ones((st.nnode, ns)),
                lower=np.zeros(nv, dtype=np.bool_), upper=np.zeros(nv, dtype=np.bool_),
                floor=np.zeros(nv), Fin=np.zeros(NSP), ff=np.zeros(nfl),
                fi=np.zeros(nin, dtype=np.int64), x=vec(), cand=vec(), out=np.zeros(5),
                x0=vec(), xh=vec(), stat=np.zeros(5), lam=np.ones(1))
