"""Steady 1D two-phase model of one monolith brick, solved by Newton on the whole brick.

Balances per finite volume j (width dz, upwind: the cell takes its outlet state), after MODEL.md
section 6 and the textbook two-phase channel model (e.g. Froment, Bischoff & De Wilde 2011, ch. 11):

* gas molar flows (all species; stored NH3 counted as NH3, so N/H/O balance exactly)::

      F_j - F_{j-1} = sum_r nu_equiv[r] xi_r ,      xi_r = A_f dz f_layer <eta_r r_r>   [mol/s]

* film = reaction for each species that enters a rate (surface node, or every node of a resolved
  layer with diffusion between nodes)::

      a A_f dz k_m,i (c_i - c_s,i) = - sum_r nu_gas[r, i] xi_r ,   k_m,i = Sh D_i / d_h

* NH3 coverage at steady state, per site::   sum_r nu_site[r] r_r = 0
* gas energy (the gas crosses the cell at a constant solid temperature, exactly)::

      T_g,j - T_s = (T_g,j-1 - T_s) exp(-NTU),   NTU = h a A_f dz / (F c_p)

* solid energy::  sum_r (-dH_r) xi_r - F c_p (T_g,j - T_g,j-1) - U pi D dz (T_s - T_amb) = 0

The bulk gas a cell reacts with is the mean of its plug-flow profile between inlet and outlet
(logarithmic for a falling species, arithmetic for a rising one: :func:`cell_mean`). This makes the
scheme exact for first-order loss at a constant surface state on any grid: the kinetic and film
limits of the textbooks hold with 2 cells as with 200.

Washcoat: each catalytic layer is a flat slab of thickness f_k / a (Aris's volume-to-surface
length) in both washcoat models. ``effectiveness`` multiplies the rates whose ``diffusion_key`` is
species k by eta_k = tanh(phi)/phi, phi = delta sqrt(k_v / D_eff,k), k_v = sum_r |nu_equiv[r,k]|
r_r / c_s,k (Thiele 1939; Aris 1975, *The Mathematical Theory of Diffusion and Reaction in
Permeable Catalysts*). ``resolved`` puts graded finite volumes across every layer with flux
continuity between layers and no flux at the wall.

Transient (:mod:`aftertreat.transient`): the gas stays quasi-steady while coverage and solid
temperature evolve; an implicit-Euler step of length dt adds the storage terms to the same
residual (:meth:`_BrickModel.begin_step`)::

      (theta - theta_old)/dt = sum_r nu_site[r] r_r / Omega
      C_cell (T_s - T_s,old)/dt = sum_r (-dH_r) xi_r - F c_p (T_g,j - T_g,j-1) - U pi D dz (T_s - T_amb)

and the gas flows then change by the gas stoichiometry (``nu_gas``: adsorption takes NH3 out of
the gas, desorption gives it back) instead of ``nu_equiv``. Reaction heats still count stored NH3
as gas NH3: the heat of adsorption, released on storage and taken back on release, is left out.

Numerics (:mod:`aftertreat.newton`). The unknowns of all cells are solved together by Newton's
method. The Jacobian is block
lower-bidiagonal along the brick; its blocks come from forward differences evaluated in one
vectorised residual call that stacks every perturbed copy of the brick (washcoat nodes three apart
are perturbed together), and the system is solved by batched block solves plus a short recurrence
on the gas unknowns. If Newton stalls, the cells are solved one after another from the inlet (each
a small Newton problem with its converged upstream neighbour as inflow and start) and Newton
polishes the result; pseudo-transient continuation on coverage and solid temperature is the last
resort. Convergence: scaled residuals below 1e-12 (species flows / inlet flow, film balances /
(conductance x total concentration), coverage balances / capacity in 1/s) and 1e-9 K; a Newton
iteration that stalls on round-off below 1e-10 (1e-7 K) is accepted. The best state seen is
returned, with its residual and the converged flag.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from . import newton, transport
from .brick import Brick
from .errors import ConvergenceError
from .gas import GasProperties
from .species import ELEMENT_MATRIX, INDEX, SPECIES
from .stream import Stream
from .units import R_GAS

__all__ = ["BrickSolution", "solve_brick", "SolverSettings"]

NSP = len(SPECIES)


@dataclass
class SolverSettings:
    """Tolerances and limits of the steady solver (scaled residuals, see the module docstring;
    temperature rows are held to ``1e3 * tol`` K)."""
    tol: float = 1e-12
    #: a Newton iteration that stalls below this (round-off on some rows) counts as converged
    tol_accept: float = 1e-10
    max_newton: int = 40
    #: steps with a kept (older) Jacobian; 0 gives plain Newton
    max_chord: int = 60
    max_ptc_steps: int = 200
    tau0: float = 1e-3           # first pseudo-time step [s]
    fd_step: float = 1e-7


@dataclass
class BrickSolution:
    """Steady state of one brick: outlet stream, axial profiles and solver status."""
    brick: Brick
    inlet: Stream
    outlet: Stream
    z: np.ndarray                      # cell centres [m]
    F: np.ndarray                      # [ncell, nsp] molar flows at cell outlets [mol/s]
    T_gas: np.ndarray                  # [ncell] [K]
    T_solid: np.ndarray                # [ncell] [K]
    coverage: np.ndarray               # [ncell, nnode, nsite] NH3 coverage [-]
    c_surface: np.ndarray              # [ncell, nnode, nspecies-in-rates] [mol/m^3]
    film_species: list[str]
    node_layer: np.ndarray             # [nnode] layer index of each washcoat node
    dp: transport.PressureDrop
    converged: bool
    residual: float
    iterations: int                    # Jacobians formed (chord steps reuse one; not counted)
    element_balance_error: float
    seconds: float
    notes: list[str] = field(default_factory=list)
    state: np.ndarray | None = None    # solver unknowns, for warm starts
    #: the solver's last factored Jacobian: a warm start's first chord steps use it
    factors: tuple | None = field(default=None, repr=False, compare=False)
    model: object = field(default=None, repr=False, compare=False)

    def reaction_extents(self) -> list[np.ndarray]:
        """Reaction extents per layer [ncell, nrxn] in mol/s (rates x catalyst volume),
        computed on demand from the solved state."""
        return self.model.extents(self.state)

    def ppm_profile(self, species: str) -> np.ndarray:
        """Wet ppm of ``species`` at every cell outlet."""
        return self.F[:, INDEX[species]] / self.F.sum(axis=1) * 1e6


_FLOOR = 1e-3


def cell_mean(c_in, c_out):
    """Mean concentration over a cell: log mean where it falls, arithmetic mean where it rises.

    Below c_out = 1e-3 c_in the log mean is continued linearly with its slope there, so the
    function stays smooth, strictly increasing and of moderate slope for Newton iterates near or
    below zero (a flat floor stalls Newton; the exact slope, ~(c_in/c_out)/ln^2, makes it
    diverge). A cell in which a species falls more than 1000-fold (NTU > 7 in one cell) is far
    from resolved anyway; there the mean is overestimated by up to ~15 %.
    """
    falling = (c_out < c_in) & (c_in > 1e-200)
    a = np.where(falling, c_in, 1.0)
    b = np.where(falling, np.maximum(c_out, _FLOOR * a), 1.0)
    lnr = np.log(a / b)
    with np.errstate(divide="ignore", invalid="ignore"):
        lm = np.where(np.abs(a - b) <= 1e-6 * (a + b), 0.5 * (a + b), (a - b) / lnr)
        slope = np.where(lnr > 1e-6, (a / b - 1.0 - lnr) / lnr ** 2, 0.5)
    lm = lm + slope * np.minimum(np.where(falling, c_out, 1.0) - b, 0.0)
    return np.where(falling, lm, 0.5 * (c_in + c_out))


#: Ratio of the deepest to the shallowest node of a resolved layer. Nodes grow geometrically from
#: the layer's gas side inward, where reactants that react fast (NH3 on Pt) have steep profiles;
#: the ratio is fixed, so the grid refines everywhere as nodes are added. With the default 8 nodes
#: per layer the dual-layer slip catalyst's outlet NO on the demo case is within 0.3 % of a
#: 16-node solution (6 nodes: 0.6 %; uniform nodes need about twice as many).
NODE_SPREAD = 7.6


def _node_shares(n: int, spread: float = NODE_SPREAD) -> np.ndarray:
    """Fractions of a layer's thickness per node, growing geometrically inward."""
    q = spread ** (1.0 / (n - 1)) if n > 1 else 1.0
    w = q ** np.arange(n, dtype=float)
    return w / w.sum()


class _BrickModel:
    """Index bookkeeping and the residual of one brick at one inlet state."""

    def __init__(self, brick: Brick, inlet: Stream):
        self.brick, self.inlet = brick, inlet
        sub = brick.substrate
        self.n = int(brick.cells)
        self.mechs = [c.mechanism for c in brick.catalysts]
        self.film = sorted(set().union(*[m.film_species for m in self.mechs]))
        self.nf = len(self.film)
        self.ns = max([len(m.sites) for m in self.mechs] + [0])
        resolved = brick.washcoat == "resolved"
        self.resolved = resolved
        # washcoat nodes: layer index, thickness [m], brick volume fraction
        # Each layer is treated as a flat slab whose thickness is its volume per geometric surface,
        # f_k / a (Aris's characteristic length, Aris 1957), in both washcoat models, so volumes
        # and diffusion lengths agree; for thin coats it is within (1 + delta/d_h) of the coat
        # thickness, and for an extruded wall it counts the corner volume.
        depths = [frac / sub.gsa for frac in sub.layer_volume_fractions]
        node_layer, node_dx, node_frac = [], [], []
        for k, (depth, frac) in enumerate(zip(depths, sub.layer_volume_fractions)):
            nn = int(brick.nodes_per_layer) if resolved else 1
            node_layer += [k] * nn
            share = _node_shares(nn)
            node_dx += list(depth * share)
            node_frac += list(frac * share)
        self.node_layer = np.array(node_layer)
        self.node_dx = np.array(node_dx)
        self.node_frac = np.array(node_frac)
        self.nnode = len(node_layer)
        self.layer_nodes = [np.nonzero(self.node_layer == k)[0] for k in range(len(self.mechs))]
        self.depths = np.array(depths)
        # unknown layout per cell
        self.iTg, self.iTs = NSP, NSP + 1
        self.ic0 = NSP + 2
        self.ith0 = self.ic0 + self.nnode * self.nf
        self.nv = self.ith0 + self.nnode * self.ns
        # geometry and flow
        self.A = brick.frontal_area
        self.dz = brick.length / self.n
        self.z_edges = np.linspace(0.0, brick.length, self.n + 1)
        self.a = sub.gsa
        self.d_h = sub.d_h
        self.A_ht = self.a * self.A * self.dz           # film area per cell [m^2]
        self.gas = GasProperties.for_stream(inlet.F)       # pressure passed where it matters
        self.p = inlet.p
        self.F_in_tot = inlet.total
        self.cp_ref = float(self.gas.cp_molar(inlet.T))
        self.notes: list[str] = []
        self._transfer_numbers(inlet)
        self.loss_UA = brick.heat_loss_W_m2K * np.pi * brick.diameter * self.dz
        # capacities, padded
        self.cap = np.ones((self.nnode, max(self.ns, 1)))
        self.site_used = np.zeros((self.nnode, max(self.ns, 1)), dtype=bool)
        for k, m in enumerate(self.mechs):
            for s in range(len(m.sites)):
                self.cap[self.layer_nodes[k], s] = m.capacity[s]
                self.site_used[self.layer_nodes[k], s] = True
        self.cap = self.cap[:, : self.ns]
        self.site_used = self.site_used[:, : self.ns]
        # film-species columns in each layer's full species vector
        self.film_idx = np.array(self.film, dtype=int)
        self.nu_gas_f = [m.nu_gas[:, self.film_idx] for m in self.mechs]
        self.nu_equiv = [m.nu_equiv for m in self.mechs]
        #: stoichiometry of the gas-flow rows: nu_equiv at steady state, nu_gas in a time step
        self.nu_flow = self.nu_equiv
        #: implicit-Euler step (x_old, dt [s], heat capacity per cell [J/K]) or None (steady)
        self.step = None
        self._last_rates = None                   # (x, rates) of the last single-copy residual
        self.key_idx = []
        for m in self.mechs:
            keys = np.array([(-1 if r.diffusion_key is None else r.diffusion_key)
                             for r in m.reactions])
            self.key_idx.append(keys)

    # -- transient ----------------------------------------------------------------------------
    def begin_transient(self) -> None:
        """Switch the gas rows to the gas stoichiometry (storage is then not at steady state)."""
        self.nu_flow = [m.nu_gas for m in self.mechs]

    def begin_step(self, x_old: np.ndarray, dt: float, heat_capacity_J_m3K: float) -> None:
        """Make the residual that of an implicit-Euler step of ``dt`` [s] from ``x_old``; the
        brick's solid has ``heat_capacity_J_m3K`` per m^3 of brick."""
        self.step = (x_old, float(dt), heat_capacity_J_m3K * self.A * self.dz)

    def set_inlet(self, inlet: Stream) -> None:
        """A new inlet state for the same brick (each time step of a transient): flow scaling,
        gas tables and the transfer numbers follow it."""
        self.inlet = inlet
        self.p = inlet.p
        self.F_in_tot = inlet.total
        self.gas = GasProperties.for_stream(inlet.F)
        self.cp_ref = float(self.gas.cp_molar(inlet.T))
        # film transfer numbers (Graetz coordinate ~ 1/flow): recomputed when the flow moved by
        # more than 1 % or the temperature by 2 K since they were last computed (the entrance-
        # region Sherwood number then changes by < 0.5 %; Sh ~ Gz^(1/3) at most)
        m0, T0 = self._transfer_at
        if abs(inlet.mass_flow / m0 - 1.0) > 0.01 or abs(inlet.T - T0) > 2.0:
            notes = list(self.notes)
            self._transfer_numbers(inlet)
            self.notes = notes

    def pressure_drop(self, x: np.ndarray) -> transport.PressureDrop:
        """Pressure drop along the brick at the state ``x`` (its solved gas temperatures) and the
        current inlet (:func:`aftertreat.transport.pressure_drop`)."""
        b = self.brick
        Tg = x[:, self.iTg]
        return transport.pressure_drop(self.d_h, b.substrate.ofa, b.substrate.shape, b.length,
                                       self.inlet.mass_flow, self.A,
                                       self.gas.density(Tg, self.p), self.gas.viscosity(Tg),
                                       apparent=b.apparent_friction)

    def stored_nh3_mol(self, x: np.ndarray) -> float:
        """NH3 held on the storage sites [mol]: sum over nodes of Omega theta V_node."""
        if not self.ns:
            return 0.0
        th = x[:, self.ith0:].reshape(self.n, self.nnode, self.ns)
        v_node = self.A * self.dz * self.node_frac                      # [nnode] m^3 of layer
        return float(np.sum(th * (self.cap * self.site_used)[None] * v_node[None, :, None]))

    def _transfer_numbers(self, inlet: Stream):
        """Cell-mean Sherwood and Nusselt numbers from the inlet state (Graetz coordinate)."""
        b = self.brick
        sub = b.substrate
        T = inlet.T
        rho = float(self.gas.density(T, self.p))
        u = inlet.mass_flow / (rho * self.A * sub.ofa)          # channel velocity [m/s]
        self.u_channel = u
        self._transfer_at = (inlet.mass_flow, inlet.T)
        D = self.gas.diffusivity(T, self.p)[self.film]          # [nf]
        alpha = float(self.gas.conductivity(T) / (rho * self.gas.cp_mass(T)))
        method = b.sherwood
        if sub.shape != "square" and method == "tronconi_forzatti_1992":
            method = "hawthorn_1974"
            self.notes.append("Tronconi-Forzatti holds for square channels; Hawthorn (1974) used "
                              "for this slit geometry")
        z = self.z_edges[:, None]
        zs_m = z * D[None, :] / (u * self.d_h ** 2)
        zs_h = self.z_edges * alpha / (u * self.d_h ** 2)
        self.Sh = transport.sherwood_cell_mean(method, zs_m, shape=sub.shape)     # [n, nf]
        self.Nu = transport.sherwood_cell_mean(method, zs_h, shape=sub.shape)     # [n]

    # -- state packing -------------------------------------------------------------------------
    def initial_state(self) -> np.ndarray:
        if self.step is not None:               # a time step restarts from where it began
            return self.step[0].copy()
        x = np.zeros((self.n, self.nv))
        inl = self.inlet
        x[:, :NSP] = inl.F
        x[:, self.iTg] = inl.T
        x[:, self.iTs] = inl.T
        c = inl.x * self.p / (R_GAS * inl.T)
        x[:, self.ic0:self.ith0] = np.tile(c[self.film_idx], self.nnode)
        x[:, self.ith0:] = 0.0
        if self.ns:
            self._balance_coverage(x)
        return x

    def _balance_coverage(self, x, steps: int = 14):
        """Start coverages where the coverage balances vanish at the starting gas state.

        Each balance falls monotonically from adsorption (theta = 0) to desorption and reaction
        (theta = 1), so a vectorised bisection per node and site finds it robustly.
        """
        F_in, Tg_in = self.inflow(x)
        lo = np.zeros((self.n, self.nv - self.ith0))
        hi = np.ones_like(lo)
        for _ in range(steps):
            mid = 0.5 * (lo + hi)
            x[:, self.ith0:] = mid
            r = self.residual(x, F_in, Tg_in)[:, self.ith0:]
            lo = np.where(r > 0, mid, lo)
            hi = np.where(r > 0, hi, mid)
        x[:, self.ith0:] = np.where(self.site_used.ravel(), 0.5 * (lo + hi), 0.0)

    def scales(self, x) -> np.ndarray:
        """Typical magnitude of each unknown, for finite-difference steps."""
        s = np.empty(self.nv)
        s[:NSP] = self.F_in_tot * 1e-6
        s[self.iTg] = s[self.iTs] = 1.0
        s[self.ic0:self.ith0] = self.p / (R_GAS * self.inlet.T) * 1e-6
        s[self.ith0:] = 1e-4
        return np.maximum(np.abs(x), s[None, :])

    def clip(self, x):
        """Keep coverages in [0, 1] and temperatures sane. Flows and concentrations are not
        clipped: rates see max(c, 0), and clipping them would stall Newton next to c = 0."""
        x[:, self.ith0:] = np.clip(x[:, self.ith0:], 0.0, 1.0)
        x[:, self.iTg] = np.clip(x[:, self.iTg], 200.0, 2000.0)
        x[:, self.iTs] = np.clip(x[:, self.iTs], 200.0, 2000.0)
        return x

    # -- physics ---------------------------------------------------------------------------------
    def layer_rates(self, x, F_in, Tg_in, rows=None):
        """Reaction rates per layer [ncell, nnode_layer, nrxn] (with effectiveness factors).

        The bulk gas seen by a cell is the mean over the cell of the plug-flow profile between
        its inlet and outlet: the logarithmic mean for a species that falls along the cell
        (exact for a first-order loss at a constant surface state), the arithmetic mean for one
        that rises. This makes the scheme exact for the analytical kinetic and film limits on any
        grid, and second-order otherwise.
        """
        n = x.shape[0]
        F = x[:, :NSP]
        Tg, Ts = x[:, self.iTg], x[:, self.iTs]
        ctot = self.p / (R_GAS * Tg)
        c_out = F * (ctot / F.sum(axis=1))[:, None]
        c_in = F_in * (self.p / (R_GAS * Tg_in) / F_in.sum(axis=1))[:, None]
        cb = cell_mean(c_in, c_out)
        cn = x[:, self.ic0:self.ith0].reshape(n, self.nnode, self.nf)
        th = x[:, self.ith0:].reshape(n, self.nnode, self.ns)
        out = []
        for k, m in enumerate(self.mechs):
            nodes = self.layer_nodes[k]
            c_full = np.repeat(cb[:, None, :], len(nodes), axis=1)
            c_full[:, :, self.film_idx] = cn[:, nodes, :]
            theta = th[:, nodes, : len(m.sites)]
            r = m.rates(c_full, theta, Ts[:, None], self.brick.activity)
            if self.brick.washcoat == "effectiveness":
                r = r * self._eta(k, m, r, c_full, Ts)
            out.append(r)
        return out, cb, ctot, cn, th

    def _eta(self, k, m, r, c_full, Ts):
        """Effectiveness factors [n, 1, nrxn] for rates keyed to a diffusing species."""
        keys = self.key_idx[k]
        eta = np.ones(r.shape)
        if np.all(keys < 0):
            return eta
        D_mol = self.gas.diffusivity(Ts, self.p)
        D_eff = self.brick.catalysts[k].pores.effective_diffusivity(D_mol, Ts)   # [n, nsp]
        delta = self.depths[k]
        for key in np.unique(keys[keys >= 0]):
            sel = keys == key
            kv = (np.abs(m.nu_equiv[sel, key]) * r[..., sel]).sum(-1)
            ck = c_full[..., key]
            ck = np.where(np.abs(ck) < 1e-30, 1e-30, ck)
            kv = np.maximum(kv / ck, 0.0)        # r / c: smooth through c = 0 for first order
            phi = delta * np.sqrt(kv / D_eff[:, None, key])
            e = np.where(phi > 1e-6, np.tanh(phi) / np.where(phi > 1e-6, phi, 1.0),
                         1.0 - phi ** 2 / 3.0)
            eta[..., sel] = e[..., None]
        return eta

    def residual(self, x, F_in, Tg_in, rows=None, want_rates=False):
        """Scaled residual [nrow, nv] with the inflow of each row given (not taken from x).

        Rows are cells; ``rows`` maps each row to its cell when several perturbed copies of the
        brick are evaluated in one call (the finite-difference Jacobian does that).
        """
        n, nf = x.shape[0], self.nf
        if rows is None:
            rows = slice(None)
        R = np.empty((n, self.nv))
        rates, cb, ctot, cn, th = self.layer_rates(x, F_in, Tg_in)
        F = x[:, :NSP]
        Tg, Ts = x[:, self.iTg], x[:, self.iTs]
        Ftot = F.sum(axis=1)
        vol = self.A * self.dz
        dF = np.zeros((n, NSP))
        Q = np.zeros(n)
        prod = np.zeros((n, self.nnode, nf))          # production per geometric area [mol/m2 s]
        dH = []
        for k, m in enumerate(self.mechs):
            nodes = self.layer_nodes[k]
            w = self.node_frac[nodes][None, :, None]                   # brick volume fraction
            xi = (vol * w * rates[k]).sum(axis=1)                      # [n, nrxn] mol/s
            dF += xi @ self.nu_flow[k]
            dH.append(m.reaction_enthalpy(Ts))
            Q -= (xi * dH[-1]).sum(axis=1)
            prod[:, nodes, :] = (w / self.a) * (rates[k] @ self.nu_gas_f[k])
            # coverage balances, per node and site [1/s]
            if m.sites:
                net = rates[k] @ m.nu_site                              # [n, nodes, nsite]
                R_th = np.zeros((n, len(nodes), self.ns))
                R_th[..., : len(m.sites)] = net / self.cap[nodes, : len(m.sites)]
                if len(m.sites) < self.ns:
                    R_th[..., len(m.sites):] = th[:, nodes, len(m.sites):]
                R[:, self.ith0:].reshape(n, self.nnode, self.ns)[:, nodes, :] = R_th
            elif self.ns:
                R[:, self.ith0:].reshape(n, self.nnode, self.ns)[:, nodes, :] = th[:, nodes, :]
        if self.step is not None and self.ns:
            x_old = self.step[0] if isinstance(rows, slice) else self.step[0][rows]
            used = self.site_used.ravel()
            R[:, self.ith0:] -= used * (x[:, self.ith0:] - x_old[:, self.ith0:]) / self.step[1]
        R[:, :NSP] = (F - F_in - dF) / self.F_in_tot
        # transfer coefficients at the gas temperature
        _, cond, D_gas = self.gas.transport(Tg, self.p)
        h = self.Nu[rows] * cond / self.d_h                                  # [n] W/(m2 K)
        hA = h * self.A_ht
        cp = self.gas.cp_molar(Tg)
        # gas heated by a solid at constant T_s along the cell: exact exponential approach,
        # T_out - T_s = (T_in - T_s) exp(-NTU), NTU = h A / (F c_p) (smooth everywhere, unlike
        # a log-mean temperature difference); the gas takes q = F c_p (T_out - T_in).
        Fcp = Ftot * cp
        R[:, self.iTg] = Tg - Ts - (Tg_in - Ts) * np.exp(-hA / Fcp)
        q = Fcp * (Tg - Tg_in)
        loss = self.loss_UA * (Ts - self.brick.T_ambient)
        if self.step is not None:
            x_old = self.step[0] if isinstance(rows, slice) else self.step[0][rows]
            Q = Q - self.step[2] * (Ts - x_old[:, self.iTs]) / self.step[1]
        R[:, self.iTs] = (Q - q - loss) / hA
        # film and washcoat diffusion
        cbf = cb[:, self.film_idx]
        if self.brick.film:
            D = D_gas[:, self.film_idx]
            km = self.Sh[rows] * D / self.d_h                                # [n, nf] m/s
        else:
            km = np.full((n, nf), 1e12)
        scale = km * ctot[:, None]
        Rc = R[:, self.ic0:self.ith0].reshape(n, self.nnode, nf)
        if not self.resolved:
            Rc[:] = (km[:, None, :] * (cbf[:, None, :] - cn) + prod) / scale[:, None, :]
        else:
            D_mol = self.gas.diffusivity(Ts, self.p)
            Deff = np.empty((n, self.nnode, nf))
            for k in range(len(self.mechs)):
                nodes = self.layer_nodes[k]
                De = self.brick.catalysts[k].pores.effective_diffusivity(D_mol, Ts)
                Deff[:, nodes, :] = De[:, None, self.film_idx]
            half = self.node_dx[None, :, None] / (2.0 * Deff)          # [n, nnode, nf] s/m
            J = np.zeros((n, self.nnode + 1, nf))                      # flux into node j from above
            G = np.empty((n, self.nnode, nf))                          # conductance into node
            G[:, 0, :] = 1.0 / (1.0 / km + half[:, 0, :])
            G[:, 1:, :] = 1.0 / (half[:, :-1, :] + half[:, 1:, :])
            J[:, 0, :] = G[:, 0, :] * (cbf - cn[:, 0, :])
            J[:, 1:-1, :] = G[:, 1:, :] * (cn[:, :-1, :] - cn[:, 1:, :])
            # each node's balance scaled by its own conductance (not k_m, which is huge with the
            # film switched off and would hide the node residuals)
            Rc[:] = (J[:, :-1, :] - J[:, 1:, :] + prod) / (G * ctot[:, None, None])
        if want_rates:
            return R, rates, hA, dH
        if isinstance(rows, slice):
            self._last_rates = (x, rates)
        return R

    def rates_at(self, x) -> list:
        """Layer rates at the state ``x`` (those of the last residual call when it was at x)."""
        if self._last_rates is not None and self._last_rates[0] is x:
            return self._last_rates[1]
        return self.layer_rates(x, *self.inflow(x))[0]

    def extents(self, x) -> list:
        """Reaction extents per layer [ncell, nrxn] in mol/s at the state ``x``."""
        rates = self.rates_at(x)
        vol = self.A * self.dz
        return [(vol * self.node_frac[self.layer_nodes[k]][None, :, None] * rates[k]).sum(axis=1)
                for k in range(len(self.mechs))]

    def inflow(self, x):
        F_in = np.empty((self.n, NSP))
        F_in[0] = self.inlet.F
        F_in[1:] = x[:-1, :NSP]
        Tg_in = np.empty(self.n)
        Tg_in[0] = self.inlet.T
        Tg_in[1:] = x[:-1, self.iTg]
        return F_in, Tg_in


def solve_brick(brick: Brick, inlet: Stream, *, guess: np.ndarray | None = None,
                settings: SolverSettings | None = None, check_validity: bool = True,
                factors: tuple | None = None) -> BrickSolution:
    """Steady state of ``brick`` fed by ``inlet``.

    Never raises on non-convergence: the solution carries ``converged`` and ``residual``.
    ``guess`` (a previous solution's ``state`` on the same grid) warm-starts the solver, and
    ``factors`` (its ``factors``) lets the first steps reuse that solution's Jacobian: for a
    neighbouring problem (a slightly longer brick, a nearby inlet) the chord steps then converge
    with no new Jacobian. A Jacobian that does not fit or contracts too slowly is replaced.
    """
    t0 = time.perf_counter()
    st = settings or SolverSettings()
    if check_validity:
        for cat in brick.catalysts:
            cat.check_temperature(inlet.T, f"inlet temperature of brick '{brick.name}'")
    model = _BrickModel(brick, inlet)
    x = model.initial_state() if guess is None or guess.shape != (model.n, model.nv) \
        else guess.copy()
    if factors is not None and factors[2].shape[:2] != (model.n, model.nv):
        factors = None
    x, its, res, factors = newton.iterate(model, x, st, factors)
    converged = res < st.tol_accept      # tol is the target; round-off may stall just above it
    sol = _package(model, x, inlet, converged, res, its, time.perf_counter() - t0)
    sol.factors = factors
    return sol


def _package(model: _BrickModel, x, inlet: Stream, converged, res, its, seconds) -> BrickSolution:
    b = model.brick
    n = model.n
    F = x[:, :NSP].copy()
    Tg, Ts = x[:, model.iTg].copy(), x[:, model.iTs].copy()
    dp = model.pressure_drop(x)
    notes = list(model.notes)
    if dp.total_Pa > 0.5 * inlet.p:
        from .errors import InputError
        raise InputError(f"pressure drop {dp.total_Pa / 1e3:.1f} kPa exceeds half the inlet "
                         f"pressure {inlet.p / 1e3:.1f} kPa: the brick is far too long or the "
                         "flow far too high for this substrate", key=f"brick '{b.name}'",
                         value=f"length {b.length * 1e3:.0f} mm, diameter {b.diameter * 1e3:.0f} mm")
    if dp.total_Pa > 0.1 * inlet.p:
        notes.append(f"pressure drop {dp.total_Pa / 1e3:.1f} kPa is over 10 % of the inlet "
                     "pressure; the reaction model uses the inlet pressure throughout")
    outlet = Stream(F=np.maximum(F[-1], 0.0), T=float(Tg[-1]), p=inlet.p - dp.total_Pa)
    for cat in b.catalysts:
        lo, hi = cat.valid_T
        if Ts.max() > hi or Ts.min() < lo:
            notes.append(f"catalyst temperature reached {Ts.min() - 273.15:.0f}.."
                         f"{Ts.max() - 273.15:.0f} C, outside the validity range "
                         f"{lo - 273.15:.0f}..{hi - 273.15:.0f} C of '{cat.key}'")
    atoms_in = ELEMENT_MATRIX @ inlet.F
    err = float(np.max(np.abs(ELEMENT_MATRIX @ outlet.F - atoms_in)) / np.max(atoms_in))
    return BrickSolution(
        brick=b, inlet=inlet, outlet=outlet, z=(model.z_edges[:-1] + model.z_edges[1:]) / 2,
        F=F, T_gas=Tg, T_solid=Ts,
        coverage=x[:, model.ith0:].reshape(n, model.nnode, model.ns).copy(),
        c_surface=x[:, model.ic0:model.ith0].reshape(n, model.nnode, model.nf).copy(),
        film_species=[SPECIES[i] for i in model.film], node_layer=model.node_layer,
        model=model, dp=dp, converged=bool(converged), residual=float(res), iterations=its,
        element_balance_error=err, seconds=seconds, notes=notes, state=x.copy())


def require_converged(sol: BrickSolution) -> BrickSolution:
    """Raise :class:`ConvergenceError` unless ``sol`` converged."""
    if not sol.converged:
        raise ConvergenceError(f"brick '{sol.brick.name}' did not converge "
                               f"(scaled residual {sol.residual:.2e})", sol.residual)
    return sol
