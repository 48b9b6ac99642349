"""Transient behaviour of a catalyst train: NH3 storage and brick temperature over time.

The gas crosses a brick in milliseconds, while the NH3 stored on the catalyst and the brick's
temperature change over seconds to minutes (MODEL.md sections 6-7). So the gas is taken as
quasi-steady and only coverage and solid temperature carry time derivatives, per cell (and per
washcoat node and storage site)::

    d theta/dt          = sum_r nu_site[r] r_r / Omega
    C_cell dT_s/dt      = sum_r (-dH_r) xi_r - F c_p (T_g,j - T_g,j-1) - U pi D dz (T_s - T_amb)
                          [+ axial conduction k_ax A d2T_s/dz2 dz, optional]

with the gas rows of :mod:`aftertreat.reactor` (now using the gas stoichiometry: adsorption takes
NH3 out of the gas). Each time step is one implicit-Euler step of the whole brick, solved by the
steady solver's Newton machinery (:meth:`aftertreat.reactor._BrickModel.begin_step`): the
storage terms add a diagonal to the Jacobian, and the factored Jacobian of one step serves as the
chord for the next ones while it contracts (:func:`aftertreat.newton.iterate`). Implicit Euler is
L-stable, so steps of the trace's own interval (1 s) are stable whatever the stiffness of the
storage kinetics; it is first-order accurate in time. Bricks are stepped in flow order, each fed
by its upstream brick's outlet at the new time.

Axial conduction in the solid (off by default) is applied after each step as an implicit
diffusion step on T_s (Lie splitting; conserves the brick's heat and is unconditionally stable),
with k_ax = (1 - OFA) k_solid.

Conservation: at a converged step the NH3 that enters minus what leaves equals the NH3 destroyed
by reaction (gas or stored, ``nu_equiv``) plus the change of the amount stored, to the solver
tolerance; :class:`TransientResult` keeps the four totals.

References
----------
Hairer, E. and Wanner, G. (1996). Solving Ordinary Differential Equations II: Stiff and
    Differential-Algebraic Problems, 2nd ed., Springer (implicit Euler for index-1 DAEs).
Redhead, P.A. (1962). Thermal desorption of gases. Vacuum 12, 203-211 (used in the tests).
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from . import newton
from .reactor import SolverSettings, _BrickModel
from .species import INDEX, SPECIES
from .stream import Stream

__all__ = ["TransientSettings", "TrainState", "TransientResult", "start", "advance", "simulate"]

NSP = len(SPECIES)
_NH3 = INDEX["NH3"]


@dataclass
class TransientSettings:
    """Solver settings of a transient run.

    ``tol`` is the scaled residual of each step (species rows as a fraction of the inlet flow:
    1e-8 is 0.01 ppm); ``conduction`` switches axial heat conduction in the brick solid on,
    with ``k_solid_W_mK`` the solid's conductivity (cordierite and titania about 1-3 W/(m K),
    from memory).
    """
    tol: float = 1e-8
    tol_accept: float = 1e-7
    max_newton: int = 20
    max_ptc_steps: int = 100
    conduction: bool = False
    k_solid_W_mK: float = 1.5

    def solver(self) -> SolverSettings:
        return SolverSettings(tol=self.tol, tol_accept=self.tol_accept,
                              max_newton=self.max_newton, max_ptc_steps=self.max_ptc_steps)


@dataclass
class _BrickRun:
    """One brick during a transient run: its model, its state and the Jacobian kept."""
    model: _BrickModel
    x: np.ndarray
    factors: tuple | None = None
    dp_Pa: float = 0.0
    x_prev: np.ndarray | None = None          # the state one step earlier (for the predictor)
    dt_prev: float = 0.0


@dataclass
class TrainState:
    """The state of every brick of a train at one time (what a step starts from)."""
    train: object
    bricks: list[_BrickRun]
    t_s: float = 0.0

    def stored_nh3_mol(self) -> np.ndarray:
        """NH3 stored in each brick [mol]."""
        return np.array([b.model.stored_nh3_mol(b.x) for b in self.bricks])

    def capacity_mol(self) -> np.ndarray:
        """NH3 storage capacity of each brick [mol] (every site full)."""
        out = []
        for b in self.bricks:
            m = b.model
            full = b.x.copy()
            full[:, m.ith0:] = 1.0
            out.append(m.stored_nh3_mol(full))
        return np.array(out)

    def solid_T_K(self) -> list[np.ndarray]:
        """Solid temperature along each brick [K]."""
        return [b.x[:, b.model.iTs].copy() for b in self.bricks]


def _outlet(run: _BrickRun, inlet: Stream) -> Stream:
    m = run.model
    return Stream(F=np.maximum(run.x[-1, :NSP], 0.0), T=float(run.x[-1, m.iTg]),
                  p=inlet.p - run.dp_Pa)


def _new_model(brick, inlet: Stream) -> _BrickModel:
    m = _BrickModel(brick, inlet)
    m.begin_transient()
    m.prefer_inverse = True          # one Jacobian serves many steps: invert once, apply cheaply
    return m


def start(train, inlet: Stream, *, steady: bool = True, T_start_K: float | None = None,
          settings: TransientSettings | None = None) -> TrainState:
    """The state a transient run starts from.

    ``steady=True``: the steady state of ``train`` fed by ``inlet`` (stored NH3 and temperatures
    in balance with it). ``steady=False``: a clean brick (no stored NH3) with solid and gas at
    ``T_start_K`` (default the inlet temperature); the first step then solves the gas.
    """
    st = settings or TransientSettings()
    runs = []
    if steady:
        sol = train.solve(inlet, settings=st.solver())
        stream = inlet
        for b, bs in zip(train.bricks, sol.bricks):
            m = _new_model(b, stream)
            runs.append(_BrickRun(model=m, x=bs.state.copy(), factors=None, dp_Pa=bs.dp.total_Pa))
            stream = bs.outlet
        return TrainState(train=train, bricks=runs)
    T0 = inlet.T if T_start_K is None else float(T_start_K)
    stream = inlet
    for b in train.bricks:
        m = _new_model(b, stream)
        x = m.initial_state()
        x[:, m.ith0:] = 0.0
        x[:, m.iTs] = T0
        x[:, m.iTg] = T0
        runs.append(_BrickRun(model=m, x=x))
    return TrainState(train=train, bricks=runs)


@dataclass
class StepRecord:
    """What one step produced (flows in mol/s, temperatures in K)."""
    outlet: Stream
    brick_outlets: list[Stream]
    converged: bool
    residual: float
    reacted_nh3_mol_s: float            # NH3 destroyed by reaction (gas or stored) [mol/s]
    jacobians: int


def advance(state: TrainState, inlet: Stream, dt: float,
            settings: TransientSettings | None = None) -> StepRecord:
    """Advance ``state`` by one implicit-Euler step of ``dt`` [s] with ``inlet`` at the new time.

    The state is updated in place (``state.t_s`` too). Never raises on non-convergence: the
    record carries ``converged`` and the worst brick residual.
    """
    st = settings or TransientSettings()
    solver = st.solver()
    stream = inlet
    outlets = []
    ok, worst, reacted, jac = True, 0.0, 0.0, 0
    for run in state.bricks:
        m = run.model
        m.set_inlet(stream)
        m.begin_step(run.x, dt, m.brick.heat_capacity_J_m3K)
        guess = run.x
        if run.x_prev is not None and run.dt_prev > 0:
            # linear predictor from the last two states (a guess only: Newton decides)
            guess = m.clip(run.x + (run.x - run.x_prev) * (dt / run.dt_prev))
        x, its, res, run.factors = newton.iterate(m, guess, solver, run.factors)
        m.step = None
        run.x_prev, run.dt_prev, run.x = run.x, dt, x
        if st.conduction:
            _conduct(m, x, dt, st.k_solid_W_mK)
        ok = ok and res < st.tol_accept
        worst = max(worst, res)
        jac += its
        for k, xi in enumerate(m.extents(x)):
            reacted -= float((xi @ m.mechs[k].nu_equiv[:, _NH3]).sum())
        run.dp_Pa = m.pressure_drop(x).total_Pa
        stream = _outlet(run, stream)
        outlets.append(stream)
    state.t_s += dt
    return StepRecord(outlet=stream, brick_outlets=outlets, converged=ok, residual=worst,
                      reacted_nh3_mol_s=reacted, jacobians=jac)


def _conduct(m: _BrickModel, x, dt: float, k_solid: float) -> None:
    """Implicit axial conduction step on T_s (insulated brick faces), in place:
    C (T - T*)/dt = k_ax A (T_{j+1} - 2 T_j + T_{j-1})/dz, a tridiagonal solve."""
    from scipy.linalg import solve_banded
    n = m.n
    k_ax = (1.0 - m.brick.substrate.ofa) * k_solid
    C = m.brick.heat_capacity_J_m3K * m.A * m.dz                 # J/K per cell
    g = k_ax * m.A / m.dz * dt / C                                # conductance x dt / C
    ab = np.zeros((3, n))
    ab[0, 1:] = -g
    ab[2, :-1] = -g
    ab[1] = 1.0 + 2.0 * g
    ab[1, 0] = ab[1, -1] = 1.0 + g
    x[:, m.iTs] = solve_banded((1, 1), ab, x[:, m.iTs])


@dataclass
class TransientResult:
    """Time series of a transient run, with the NH3 account.

    Arrays are per time point ``t_s`` [s] (the first point is the starting state): ``inlet_F``,
    ``outlet_F`` [N, nspecies] mol/s, ``inlet_T_K``, ``outlet_T_K``, ``stored_nh3_mol``
    [N, nbricks], ``solid_T_mean_K`` and ``solid_T_max_K`` [N, nbricks], ``reacted_nh3_mol_s``,
    ``converged``, ``residual``, ``jacobians``.
    """
    t_s: np.ndarray
    inlet_F: np.ndarray
    inlet_T_K: np.ndarray
    outlet_F: np.ndarray
    outlet_T_K: np.ndarray
    stored_nh3_mol: np.ndarray
    solid_T_mean_K: np.ndarray
    solid_T_max_K: np.ndarray
    reacted_nh3_mol_s: np.ndarray
    converged: np.ndarray
    residual: np.ndarray
    jacobians: np.ndarray
    brick_names: list[str]
    seconds: float = 0.0
    extra: dict = field(default_factory=dict)

    def nh3_account(self) -> dict:
        """NH3 in, out, destroyed and the change in storage over the run [mol], as implicit
        Euler sums them (each step's rates at its end time, times its dt)."""
        dt = np.diff(self.t_s)
        n_in = float(dt @ self.inlet_F[1:, _NH3])
        n_out = float(dt @ self.outlet_F[1:, _NH3])
        n_react = float(dt @ self.reacted_nh3_mol_s[1:])
        d_store = float(self.stored_nh3_mol[-1].sum() - self.stored_nh3_mol[0].sum())
        return {"in_mol": n_in, "out_mol": n_out, "reacted_mol": n_react,
                "stored_change_mol": d_store,
                "imbalance_mol": n_in - n_out - n_react - d_store}

    @property
    def all_converged(self) -> bool:
        return bool(np.all(self.converged))


def simulate(train, times, inlets, *, state: TrainState | None = None,
             settings: TransientSettings | None = None, progress=None) -> TransientResult:
    """Run ``train`` through a time series.

    ``times`` [s] (increasing); ``inlets`` gives the train inlet at each time: a list of
    :class:`Stream`, or a callable ``inlets(i, state) -> Stream`` (a dosing controller sees the
    state before step i). The run starts from ``state`` (default: the steady state at the first
    inlet, :func:`start`) and takes one implicit-Euler step per interval.
    """
    st = settings or TransientSettings()
    t0 = time.perf_counter()
    times = np.asarray(times, dtype=float)
    if times.ndim != 1 or len(times) < 2 or np.any(np.diff(times) <= 0):
        raise ValueError("times must be at least two increasing values")
    get = inlets if callable(inlets) else (lambda i, s: inlets[i])
    first = get(0, state)
    if state is None:
        state = start(train, first, settings=st)
    N, nb = len(times), len(state.bricks)
    inF = np.empty((N, NSP))
    outF = np.empty((N, NSP))
    inT, outT = np.empty(N), np.empty(N)
    stored = np.empty((N, nb))
    Tmean, Tmax = np.empty((N, nb)), np.empty((N, nb))
    reacted = np.zeros(N)
    conv = np.ones(N, dtype=bool)
    resid = np.zeros(N)
    jac = np.zeros(N, dtype=int)

    def record(i, inlet, outlet):
        inF[i], inT[i] = inlet.F, inlet.T
        outF[i], outT[i] = outlet.F, outlet.T
        stored[i] = state.stored_nh3_mol()
        for k, b in enumerate(state.bricks):
            Ts = b.x[:, b.model.iTs]
            Tmean[i, k] = Ts.mean()
            Tmax[i, k] = Ts.max()

    # the starting point: outlet of the starting state
    stream = first
    for run in state.bricks:
        stream = _outlet(run, stream)
    record(0, first, stream)
    state.t_s = float(times[0])
    for i in range(1, N):
        if progress is not None:
            progress(i, N)
        inlet = get(i, state)
        rec = advance(state, inlet, float(times[i] - times[i - 1]), st)
        record(i, inlet, rec.outlet)
        reacted[i], conv[i], resid[i], jac[i] = (rec.reacted_nh3_mol_s, rec.converged,
                                                 rec.residual, rec.jacobians)
    return TransientResult(t_s=times.copy(), inlet_F=inF, inlet_T_K=inT, outlet_F=outF,
                           outlet_T_K=outT, stored_nh3_mol=stored, solid_T_mean_K=Tmean,
                           solid_T_max_K=Tmax, reacted_nh3_mol_s=reacted, converged=conv,
                           residual=resid, jacobians=jac,
                           brick_names=[b.model.brick.name for b in state.bricks],
                           seconds=time.perf_counter() - t0)
