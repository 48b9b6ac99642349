"""The nonlinear solver of the steady brick model: Newton on the whole brick, with a cell-by-cell
march and pseudo-transient continuation as fallbacks.

The Jacobian of the brick residual (:class:`aftertreat.reactor._BrickModel`) is block lower
bidiagonal along the brick. Its blocks come from forward differences evaluated in one vectorised
residual call that stacks every perturbed copy of the brick (washcoat nodes three apart share a
copy); the system is solved by batched block solves plus a short recurrence on the gas unknowns.

References
----------
Kelley, C.T. and Keyes, D.E. (1998). Convergence analysis of pseudo-transient continuation.
SIAM J. Numer. Anal. 35, 508-523.
Mulder, W.A. and van Leer, B. (1985). Experiments with implicit upwind methods for the Euler
equations. J. Comput. Phys. 59, 232-246 (switched evolution relaxation).
"""
from __future__ import annotations

import numpy as np
import scipy.linalg

from .species import SPECIES

NSP = len(SPECIES)

__all__ = ["iterate", "norm", "newton_step", "jacobian", "apply_jacobian"]


#: Diagonal blocks up to this size are inverted outright (cheapest to apply in chord steps);
#: larger ones are LU-factored (an explicit inverse of a 92 x 92 block costs 3x its LU).
_INVERT_UP_TO = 24


def newton_step(model, x, R, F_in, Tg_in, fd_step, ptc_diag=None):
    """Solve J dx = -R (plus an optional pseudo-time diagonal) for the block-bidiagonal J."""
    return apply_jacobian(model, jacobian(model, x, R, F_in, Tg_in, fd_step, ptc_diag), R)


def jacobian(model, x, R, F_in, Tg_in, fd_step, ptc_diag=None):
    """The block-bidiagonal Jacobian at ``x``, factored for :func:`apply_jacobian`:
    ``(B^-1, B^-1 C)`` per cell, B the diagonal block and C the coupling to the upstream cell's
    gas unknowns.

    The Jacobian is formed by forward differences in one vectorised residual call holding every
    perturbed copy of the brick: one copy per gas unknown (flows, temperatures), one per inflow
    quantity (the coupling to the upstream cell), and for the washcoat nodes one copy per node
    variable and *colour*: nodes three apart are perturbed together, since a node's balance sees
    only its neighbours. Their effect on the gas rows (linear in each node's rates) is rebuilt
    from each node's own rate change, so the copies needed do not grow with the node count.
    """
    n, nv = model.n, model.nv
    ng = NSP + 1
    nd = model.ic0                                         # directly perturbed columns
    nn, nf, ns = model.nnode, model.nf, model.ns
    nvar = nf + ns                                         # unknowns per washcoat node
    ncol = min(3, nn)
    h = fd_step * model.scales(x)                          # [n, nv]
    # step coverages inward from their upper bound (clipped rates are flat beyond theta = 1)
    th = x[:, model.ith0:]
    h[:, model.ith0:] = np.where(th > 0.5, -h[:, model.ith0:], h[:, model.ith0:])
    hF = fd_step * np.maximum(np.abs(F_in), model.F_in_tot * 1e-6)
    hT = fd_step * np.maximum(np.abs(Tg_in), 1.0)

    def node_col(node, v):
        return model.ic0 + node * nf + v if v < nf else model.ith0 + node * ns + (v - nf)

    m = nd + ncol * nvar + ng
    X = np.broadcast_to(x, (m, n, nv)).copy()
    idx = np.arange(nd)
    X[idx, :, idx] += h[:, :nd].T
    groups = []                                            # (copy, colour, variable)
    for g in range(ncol):
        for v in range(nvar):
            copy = nd + g * nvar + v
            cols = [node_col(j, v) for j in range(g, nn, 3)]
            X[copy][:, cols] += h[:, cols]
            groups.append((copy, g, v))
    o = nd + ncol * nvar
    Fin = np.broadcast_to(F_in, (m, n, NSP)).copy()
    Fin[o + np.arange(NSP), :, np.arange(NSP)] += hF.T
    Tin = np.broadcast_to(Tg_in, (m, n)).copy()
    Tin[o + NSP] += hT
    rows = np.tile(np.arange(n), m)
    Rall, rates, hA, dH = model.residual(X.reshape(m * n, nv), Fin.reshape(m * n, NSP),
                                         Tin.reshape(m * n), rows, want_rates=True)
    Rall = Rall.reshape(m, n, nv)
    dR = Rall - R[None]
    B = np.zeros((n, nv, nv))
    B[:, :, :nd] = (dR[:nd] / h[:, :nd].T[:, :, None]).transpose(1, 2, 0)
    if nn and nvar:
        rates = [r.reshape((m, n) + r.shape[1:]) for r in rates]
        hA = hA.reshape(m, n)[0]
        dH = [d.reshape((m, n) + d.shape[1:])[0] for d in dH]
        vol = model.A * model.dz
        node_rows = [np.r_[model.ic0 + j * nf: model.ic0 + (j + 1) * nf] for j in range(nn)]
        th_rows = [np.r_[model.ith0 + j * ns: model.ith0 + (j + 1) * ns] for j in range(nn)]
        for copy, g, v in groups:
            for j in range(g, nn, 3):
                col = node_col(j, v)
                hj = h[:, col][:, None]
                for jj in range(max(j - 1, 0), min(j + 2, nn)):
                    B[:, node_rows[jj], col] = dR[copy][:, node_rows[jj]] / hj
                B[:, th_rows[j], col] = dR[copy][:, th_rows[j]] / hj
                # gas rows through this node's rates only
                k = model.node_layer[j]
                jl = int(np.searchsorted(model.layer_nodes[k], j))
                dr = (rates[k][copy][:, jl, :] - rates[k][0][:, jl, :]) / hj       # [n, nrxn]
                xi = vol * model.node_frac[j] * dr
                B[:, :NSP, col] = -(xi @ model.nu_flow[k]) / model.F_in_tot
                B[:, model.iTs, col] = -(xi * dH[k]).sum(axis=1) / hA
    C = np.empty((n, nv, ng))
    C[:, :, :NSP] = (dR[o:o + NSP] / hF.T[:, :, None]).transpose(1, 2, 0)
    C[:, :, NSP] = dR[o + NSP] / hT[:, None]
    if ptc_diag is not None:
        # implicit Euler on dx/dt = R (coverage and solid-temperature rows are written so that
        # the residual is the rate of change): (J - I/tau) dx = -R
        B[:, np.arange(nv), np.arange(nv)] -= ptc_diag
    if nv <= _INVERT_UP_TO or getattr(model, "prefer_inverse", False):
        # explicit inverses, applied by one einsum: for small blocks, or where one Jacobian
        # serves many chord steps (transient runs)
        Binv = np.linalg.inv(B)
        return Binv, None, Binv @ C
    lu = scipy.linalg.lu_factor(B, check_finite=False)      # batched over cells
    return None, lu, scipy.linalg.lu_solve(lu, C, check_finite=False)


def apply_jacobian(model, factors, R):
    """dx solving J dx = -R with the factors of :func:`jacobian`: each cell's block solve, then
    the recurrence dx_j = B_j^-1 (-R_j) - B_j^-1 C_j dx_{j-1}[gas] down the brick."""
    Binv, lu, G = factors
    if Binv is not None:
        a = -np.einsum("nij,nj->ni", Binv, R)
    else:
        a = -scipy.linalg.lu_solve(lu, R[:, :, None], check_finite=False)[:, :, 0]
    # only the gas unknowns (flows, then T_g: the first NSP + 1 columns) carry the coupling, so
    # the sequential part of the recurrence runs on them alone and the rest follows in one call
    ng = NSP + 1
    assert model.iTg == NSP
    Gg = G[:, :ng, :]
    y = np.empty((len(a), ng))
    y[0] = a[0, :ng]
    for j in range(1, len(a)):
        y[j] = a[j, :ng] - Gg[j] @ y[j - 1]
    dx = a.copy()
    dx[1:] -= np.einsum("nij,nj->ni", G[1:], y[:-1])
    return dx


def norm(model, R) -> float:
    """Largest scaled residual, temperature rows [K] weighted by 1e-3.

    The temperature rows balance heat flows of order kW to a fraction of a watt and bottom out at
    ~1e-12 K from round-off on fine grids, so they are held to 1e-9 K when the species and coverage
    rows are held to the tolerance (1e-12) itself.
    """
    if not R.size:
        return 0.0
    w = np.abs(R)
    w[:, model.iTg] *= 1e-3
    w[:, model.iTs] *= 1e-3
    return float(np.max(w))


def _solve_cell(model, j: int, xj, F_in, Tg_in, st, diag_mask):
    """Solve the balances of cell ``j`` alone for a given inflow (Newton, then local
    pseudo-transient continuation if Newton does not converge). Returns (x_j, converged)."""
    nv = model.nv
    rows1 = np.array([j])
    rowsn = np.full(nv, j)
    Fn = np.broadcast_to(F_in, (nv, NSP))
    Tn = np.full(nv, Tg_in)

    def res_of(v):
        return model.residual(v[None, :], F_in[None, :], np.array([Tg_in]), rows1)[0]

    x = xj.copy()
    tau = None
    for it in range(60):
        R = res_of(x)
        res = norm(model, R[None, :])
        if res < st.tol:
            return x, True
        h = st.fd_step * model.scales(x[None, :])[0]
        h[model.ith0:] = np.where(x[model.ith0:] > 0.5, -h[model.ith0:], h[model.ith0:])
        X = x[None, :] + np.diag(h)
        Jm = ((model.residual(X, Fn, Tn, rowsn) - R[None, :]) / h[:, None]).T
        if tau is not None:
            Jm = Jm - np.diag(diag_mask / tau)
        try:
            dx = np.linalg.solve(Jm, -R)
        except np.linalg.LinAlgError:
            dx = np.linalg.lstsq(Jm, -R, rcond=None)[0]
        alpha = 1.0
        for _ in range(8):
            xn = model.clip((x + alpha * dx)[None, :])[0]
            rn = norm(model, res_of(xn)[None, :])
            if np.isfinite(rn) and (rn < res or tau is not None):
                break
            alpha *= 0.5
        if not np.isfinite(rn):
            if tau is None:
                tau = 1e-2
            tau *= 0.1
            continue
        if tau is None and rn >= res:
            tau = 1e-2                        # Newton failed here: pseudo-time on this cell
            continue
        x = xn
        if tau is not None:
            tau *= min(max(res / max(rn, 1e-300), 0.2), 10.0)
            if tau > 1e6:
                tau = None
    return x, norm(model, res_of(x)[None, :]) < st.tol


def _march(model, x0, st):
    """Solve cell after cell downstream: exact for the upwind (block-triangular) balances, and
    robust, since each cell starts from its converged upstream neighbour."""
    diag_mask = np.zeros(model.nv)
    diag_mask[model.ith0:] = model.site_used.ravel() if model.ns else 0.0
    diag_mask[model.iTs] = 1.0
    x = x0.copy()
    F_in, Tg_in = model.inlet.F.copy(), model.inlet.T
    for j in range(model.n):
        start = x[j] if j == 0 else x[j - 1]
        xj, _ = _solve_cell(model, j, start, F_in, Tg_in, st, diag_mask)
        x[j] = xj
        F_in, Tg_in = xj[:NSP].copy(), xj[model.iTg]
    return x


#: A chord step (old Jacobian) is accepted when it cuts the residual norm below this fraction...
CHORD_ACCEPT = 0.5
#: ...and the Jacobian is kept for the next step while the cut is below this one.
CHORD_KEEP = 0.1
#: Below this multiple of the tolerance a chord step that stalls ends the iteration (the
#: residual is then at the round-off floor of the scaled rows, ~1e-12, not limited by the
#: Jacobian; it still counts as converged only below ``tol_accept``).
_ROUND_OFF = 10.0


def iterate(model, x0, st, J0=None):
    """Newton with backtracking; on stagnation, pseudo-transient continuation from the start.

    Returns the final state, the number of Jacobians formed, its scaled residual norm and the
    last factored Jacobian (see :func:`jacobian`). ``J0``, a Jacobian of a neighbouring problem,
    is used for chord steps until it contracts too slowly.

    Chord steps (Newton with an old Jacobian, e.g. Kelley 2003, "Solving Nonlinear Equations
    with Newton's Method", SIAM, ch. 1.4) cost one residual and one application of the stored
    factors; a step that does not halve the residual norm is discarded and the Jacobian
    refreshed.

    Pseudo-transient continuation (Kelley & Keyes, SIAM J. Numer. Anal. 35 (1998) 508) advances
    coverage and solid temperature by implicit Euler steps whose size grows as the residual falls
    (switched evolution relaxation), then hands over to Newton. The total number of linear solves
    is bounded by ``max_newton + max_ptc_steps``, and continuation restarts at most twice.
    """
    diag_mask = np.zeros(model.nv)
    diag_mask[model.ith0:] = model.site_used.ravel() if model.ns else 0.0
    diag_mask[model.iTs] = 1.0
    x = x0.copy()
    its = 0
    budget = st.max_newton + st.max_ptc_steps
    newton_left = st.max_newton
    restarts = 0
    tau = None                                 # None: plain Newton
    ref = np.inf                               # non-monotone reference for the line search
    best_res, best_x = np.inf, x0.copy()
    known = current = None                 # (x, R) of the last accepted line-search point
    J = J0                                 # factored Jacobian kept for chord steps
    J_out = J0                             # the latest plain Newton Jacobian, returned
    chord_left = st.max_chord
    while its < budget:
        F_in, Tg_in = model.inflow(x)
        if known is not None and known[0] is x:
            R = known[1]                       # already evaluated by the line search
        else:
            R = model.residual(x, F_in, Tg_in)
        known = None
        res = norm(model, R)
        current = (x, res)                     # the state the loop has evaluated last
        if res < best_res:
            best_res, best_x = res, x.copy()
        if res < st.tol:
            break
        # non-monotone acceptance for the first Newton steps (they may cross a ridge), then
        # plain decrease, which breaks the two-cycles that kinks in the model can cause
        ref = (min(ref, 10.0 * res) if np.isfinite(ref) else 10.0 * res) \
            if newton_left > st.max_newton - 4 else res
        if J is not None and tau is None and chord_left > 0:
            # chord step: the Jacobian of an earlier iterate, kept while it contracts well
            chord_left -= 1
            x_new = model.clip(x + apply_jacobian(model, J, R))
            R_new = model.residual(x_new, *model.inflow(x_new))
            res_new = norm(model, R_new)
            near = res < _ROUND_OFF * st.tol           # within reach of round-off
            if np.isfinite(res_new) and res_new < CHORD_ACCEPT * res:
                if res_new > CHORD_KEEP * res and not near:
                    J = None                   # slow contraction: a fresh Jacobian next time
                x = x_new
                known = (x, R_new)
                continue
            if near:
                break                          # round-off, not the Jacobian, stops progress
            J, known = None, (x, R)            # refresh at x and take a Newton step from it
            continue
        diag = None if tau is None else diag_mask / tau
        try:
            J = jacobian(model, x, R, F_in, Tg_in, st.fd_step, diag)
            dx = apply_jacobian(model, J, R)
            if tau is None:
                J_out = J
        except np.linalg.LinAlgError:
            J, dx = None, np.full_like(x, np.nan)
        if tau is not None:
            J = None                           # a pseudo-time Jacobian is not kept for chords
        its += 1
        alpha, accepted, res_new = 1.0, False, np.inf
        for _ in range(10):
            x_new = model.clip(x + alpha * dx)
            R_new = model.residual(x_new, *model.inflow(x_new))
            res_new = norm(model, R_new)
            if np.isfinite(res_new) and (res_new < ref or tau is not None):
                accepted = True
                break
            alpha *= 0.5
        if tau is None:
            newton_left -= 1
            stalled = alpha < 1.0 / 64.0 and res_new > 0.5 * res
            if accepted and not stalled and newton_left >= 0:
                x = x_new
                known = (x, R_new)
                continue
            if best_res < st.tol_accept or restarts >= 2 or st.max_ptc_steps <= 0:
                break                          # converged to round-off, or out of options
            restarts += 1
            if restarts == 1:
                # Newton stalled: solve cell by cell from the inlet, then polish with Newton
                x, newton_left, ref = _march(model, model.initial_state(), st), st.max_newton, np.inf
                J = None
                continue
            # still stalled: restart from the crude state with pseudo-time stepping
            x, tau, ref, J = model.initial_state(), st.tau0, np.inf, None
            continue
        if not np.isfinite(res_new):
            tau *= 0.1
            continue
        x = x_new
        known = (x, R_new)
        # switched evolution relaxation (Mulder & van Leer 1985): step grows as the residual falls
        tau *= min(max(res / max(res_new, 1e-300), 0.2), 10.0)
        if tau > 1e6:
            tau, newton_left, ref = None, st.max_newton, np.inf   # finish with Newton
    if current is not None and current[0] is x:
        res_x = current[1]
    elif known is not None and known[0] is x:
        res_x = norm(model, known[1])
    else:
        res_x = norm(model, model.residual(x, *model.inflow(x)))
    if res_x > best_res:
        return best_x, its, best_res, J_out    # never return worse than the best state seen
    return x, its, res_x, J_out

