"""Transient behaviour of a catalyst train: NH3 storage and brick temperature over time.

The gas crosses a brick in milliseconds, while the NH3 stored on the catalyst and the brick's
temperature change over seconds to minutes (``docs/model.md``). So the gas is taken as
quasi-steady and only coverage and solid temperature carry time derivatives, per cell (and per
washcoat node and storage site)::

    d theta/dt          = sum_r nu_site[r] r_r / Omega
    C_cell dT_s/dt      = sum_r (-dH_r) xi_r - F c_p (T_g,j - T_g,j-1) - U pi D dz (T_s - T_amb)
                          [+ axial conduction k_ax A d2T_s/dz2 dz, optional]

with the gas rows of :mod:`aftertreat.reactor` using the gas stoichiometry (adsorption takes
NH3 out of the gas). Each step is one implicit-Euler step of every brick in flow order, each fed
by its upstream brick's outlet at the new time; the step is the brick residual with the old
state and 1/dt as data (:func:`aftertreat.solver.step`), solved by the same march as the
steady state, with the previous step's Jacobian factors as chords.

Error-controlled steps. Between two samples of the input (a trace's own time grid) the inlet
is taken linear in time, and the interval is crossed in as many sub-steps as a local error
estimate asks for. A sub-step is variable-step BDF2 (second order, L-stable; Hairer & Wanner
1996, ch. III.5, V.1), written as the implicit-Euler residual of the kernels with a modified old
state x* and step h/a0 (:func:`_bdf2`); the first sub-step of a run, and any sub-step that would
grow the step more than twofold, is implicit Euler. The local error is estimated from the
extrapolation of the states before the step (Milne's device, :func:`_error`; Hairer, Norsett &
Wanner 1993, ch. III.7) and measured on the coverages and solid temperatures against
``atol_coverage + rtol |theta|`` and ``atol_T_K + rtol |T|``; a step above 1 is redone shorter,
and the next may grow by up to 0.9/sqrt(err) (at most twofold). The step size changes only when
the estimate allows 1.5x or more, and each input interval is split into equal sub-steps: a new
step size costs every cell a new Jacobian, while an unchanged one lets the last sub-step's
factors serve as chords. Results are reported on the input's own grid, with the sub-steps
counted. ``method = "euler"`` keeps implicit Euler with its first-order estimate.

Axial conduction in the solid (off by default) is applied after each sub-step as an implicit
diffusion step on T_s (Lie splitting; conserves the brick's heat, unconditionally stable), with
k_ax = (1 - OFA) k_solid.

Conservation: at converged steps the NH3 that enters minus what leaves equals the NH3 destroyed
by reaction (gas or stored, ``nu_equiv``) plus the change of the amount stored, summed over the
sub-steps as the method sums them (for BDF2, x_n+1 - x_n = h/a0 f_n+1 + gamma (x_n - x_n-1),
so each step's amounts carry gamma times the last step's); :meth:`TransientResult.nh3_account`
holds the totals.

References
----------
Hairer, E. and Wanner, G. (1996). Solving Ordinary Differential Equations II: Stiff and
    Differential-Algebraic Problems, 2nd ed., Springer (implicit Euler, step-size control).
Shampine, L.F. (1994). Numerical Solution of Ordinary Differential Equations. Chapman & Hall.
Redhead, P.A. (1962). Thermal desorption of gases. Vacuum 12, 203-211 (used in the tests).
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from . import solver
from .problem import BoundProblem, BrickProblem, problem_for
from .solver import SolverSettings
from .species import INDEX, SPECIES
from .stream import Stream

__all__ = ["TransientSettings", "TrainState", "TransientResult", "start", "advance", "simulate"]

NSP = len(SPECIES)
_NH3 = INDEX["NH3"]


@dataclass
class TransientSettings:
    """Settings of a transient run.

    ``tol`` is the scaled residual of each step (species rows as a fraction of the inlet flow:
    1e-8 is 0.01 ppm). ``error_control`` sub-steps each input interval as the local error
    estimate asks (module docstring), with tolerances ``atol_coverage`` [-], ``atol_T_K`` [K]
    and ``rtol`` [-], steps no shorter than ``dt_min_s`` and at most ``max_substeps`` per
    interval; without it, one implicit-Euler step per input interval. ``method``: ``"bdf2"``
    (second order, variable step; a sub-step without an accepted one before it is implicit
    Euler) or ``"euler"`` (implicit Euler throughout). ``conduction`` switches
    axial heat conduction in the brick solid on, with ``k_solid_W_mK`` the solid's
    conductivity (cordierite and titania about 1-3 W/(m K), from memory).

    Defaults, measured (``docs/model.md``, section 7): ``atol_coverage = 2e-4`` holds the NH3
    release peak of ``tests/validation/test_transient_reference.py`` within 0.3 % in value and
    time (5e-4: time -1.8 %). ``atol_T_K = 0.5``: the solid-temperature estimate mostly sees
    the kinks of the piecewise-linear inlet at each sample, not a solution error; on the
    harbour trace, 0.5 K against 0.02 K moves outlet NO, NO2, NH3 and N2O by at most 2e-4 of
    their largest values and the outlet temperature by 3e-4 K, with 4x fewer sub-steps and
    10x fewer Jacobians (the reference peak is unchanged: +0.27 %, -0.27 %).
    """
    tol: float = 1e-8
    tol_accept: float = 1e-7
    error_control: bool = True
    method: str = "bdf2"
    atol_coverage: float = 2e-4
    atol_T_K: float = 0.5
    rtol: float = 0.0
    dt_min_s: float = 1e-3
    max_substeps: int = 2000
    conduction: bool = False
    k_solid_W_mK: float = 1.5
    kernel: str | None = None

    def solver(self) -> SolverSettings:
        # the flow rows close to tol per cell, so the atoms to ~cells x tol; the energy account
        # to ~cells x 1e3 tol K (module docstring of aftertreat.solver)
        return SolverSettings(tol=self.tol, tol_accept=self.tol_accept, kernel=self.kernel,
                              balance_tol=max(1e-9, 1e3 * self.tol_accept),
                              energy_tol_K=0.05 + 1e4 * self.tol_accept)


@dataclass(eq=False)
class _BrickRun:
    """One brick during a transient run: its problem bound to the current inlet, its state and
    the Jacobian factors kept as chords."""
    problem: BrickProblem
    bound: BoundProblem | None
    x: np.ndarray
    factors: object = None
    dp_Pa: float = 0.0

    @property
    def layout(self):
        return self.problem.layout


@dataclass(eq=False)
class TrainState:
    """The state of every brick of a train at one time (what a step starts from), with the
    two states before it (for the error estimate's predictor)."""
    train: object
    bricks: list[_BrickRun]
    t_s: float = 0.0
    #: accepted states before the current one, most recent first, each with the length of the
    #: step that left it: [(states at t - h1, h1), (states at t - h1 - h2, h2)] (at most two)
    history: list | None = None

    def stored_nh3_mol(self) -> np.ndarray:
        """NH3 stored in each brick [mol]."""
        return np.array([b.problem.stored_nh3_mol(b.x) for b in self.bricks])

    def capacity_mol(self) -> np.ndarray:
        """NH3 storage capacity of each brick [mol] (every site full)."""
        return np.array([b.problem.capacity_mol() for b in self.bricks])

    def solid_T_K(self) -> list[np.ndarray]:
        """Solid temperature along each brick [K]."""
        return [b.layout.T_solid(b.x).copy() for b in self.bricks]

    def set_coverage(self, value: float) -> None:
        """Set every used storage site of every brick to the coverage ``value`` (e.g. a
        saturated brick before a desorption run)."""
        for b in self.bricks:
            used = b.problem.static.site_used > 0
            cov = b.layout.coverage(b.x)
            cov[:] = np.where(used[None], value, 0.0)
        self.history = None


def _outlet(run: _BrickRun, inlet: Stream) -> Stream:
    lay = run.layout
    return Stream(F=lay.flows(run.x)[-1].copy(), T=float(lay.T_gas(run.x)[-1]),
                  p=inlet.p - run.dp_Pa)


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
        for b, bs in zip(train.bricks, sol.bricks):
            prob = problem_for(b)
            runs.append(_BrickRun(problem=prob, bound=None, x=bs.state.copy(),
                                  dp_Pa=bs.dp.total_Pa))
        return TrainState(train=train, bricks=runs)
    T0 = inlet.T if T_start_K is None else float(T_start_K)
    stream = inlet
    for b in train.bricks:
        prob = problem_for(b)
        bound = prob.bind(stream)
        x = bound.inlet_state()
        lay = prob.layout
        lay.coverage(x)[:] = 0.0
        x[:, lay.T_SOLID] = T0
        x[:, lay.T_GAS] = T0
        runs.append(_BrickRun(problem=prob, bound=bound, x=x))
    return TrainState(train=train, bricks=runs)


@dataclass
class StepRecord:
    """What one (sub-)step produced (flows in mol/s, temperatures in K)."""
    outlet: Stream
    brick_outlets: list[Stream]
    converged: bool
    residual: float
    reacted_nh3_mol_s: float            # NH3 destroyed by reaction (gas or stored) [mol/s]
    jacobians: int


def _bdf2(state: TrainState, h: float, st: TransientSettings):
    """(omega, a0, gamma) of a variable-step BDF2 step of ``h`` after the last accepted step
    h1 (omega = h/h1): a0 x_n+1 - (1 + omega) x_n + omega^2/(1 + omega) x_n-1 = h f_n+1,
    a0 = (1 + 2 omega)/(1 + omega) (e.g. Hairer & Wanner 1996, ch. III.5), written as an
    implicit-Euler step of h/a0 from x* = ((1 + omega)^2 x_n - omega^2 x_n-1)/(1 + 2 omega);
    gamma = omega^2/(1 + 2 omega) is the share of the last step's change carried into this
    one (x_n+1 - x_n = h/a0 f_n+1 + gamma (x_n - x_n-1)). None: implicit Euler."""
    if st.method != "bdf2" or not state.history:
        return None
    om = h / state.history[0][1]
    return om, (1.0 + 2.0 * om) / (1.0 + om), om * om / (1.0 + 2.0 * om)


def _step_all(state: TrainState, inlet: Stream, dt: float, st: TransientSettings, ss,
              coef=None):
    """One step of ``dt`` of every brick from ``state`` (not committed): implicit Euler, or
    BDF2 with ``coef`` from :func:`_bdf2` (the differential unknowns start from x* and the
    step is dt/a0). Returns the new states, bound problems, factors and pressure drops, and the
    step's record."""
    stream = inlet
    new, outlets = [], []
    ok, worst, reacted, jac = True, 0.0, 0.0, 0
    for k, run in enumerate(state.bricks):
        bound = run.problem.bind(stream, like=run.bound)
        if coef is None:
            out = solver.step(bound, run.x, dt, factors=run.factors, settings=ss)
        else:
            om, a0, gamma = coef
            x_prev = state.history[0][0][k]
            diff = run.layout.differential()
            # x* = ((1 + omega)^2 x_n - omega^2 x_n-1)/(1 + 2 omega) = x_n + gamma (x_n - x_n-1)
            x_star = run.x.copy()
            x_star[:, diff] += gamma * (run.x[:, diff] - x_prev[:, diff])
            # start from the linear extrapolation in time (the march projects it into the
            # bounds and keeps it only where it beats the cell's other starts)
            guess = run.x + (run.x - x_prev) * om
            out = solver.step(bound, x_star, dt / a0, guess=guess, factors=run.factors,
                              settings=ss)
        x = out.x
        if st.conduction:
            _conduct(run.problem, x, dt, st.k_solid_W_mK)
        ok = ok and out.converged
        worst = max(worst, out.residual)
        jac += out.jacobians
        nu = run.problem.static.nu_equiv[:, _NH3]
        reacted -= float((out.extents @ nu).sum())
        dp = bound.pressure_drop(x).total_Pa
        new.append((bound, x, out.factors, dp))
        lay = run.layout
        stream = Stream(F=lay.flows(x)[-1].copy(), T=float(lay.T_gas(x)[-1]), p=stream.p - dp)
        outlets.append(stream)
    rec = StepRecord(outlet=stream, brick_outlets=outlets, converged=ok, residual=worst,
                     reacted_nh3_mol_s=reacted, jacobians=jac)
    return new, rec


def _commit(state: TrainState, new, dt: float) -> None:
    state.history = [([r.x for r in state.bricks], dt)] + (state.history or [])[:1]
    for run, (bound, x, factors, dp) in zip(state.bricks, new):
        run.bound, run.x, run.factors, run.dp_Pa = bound, x, factors, dp
    state.t_s += dt


def advance(state: TrainState, inlet: Stream, dt: float,
            settings: TransientSettings | None = None) -> StepRecord:
    """Advance ``state`` by one implicit-Euler step of ``dt`` [s] with ``inlet`` at the new time
    (no sub-steps). The state is updated in place (``state.t_s`` too). Never raises on
    non-convergence: the record carries ``converged`` and the worst brick residual."""
    st = settings or TransientSettings()
    new, rec = _step_all(state, inlet, dt, st, st.solver())
    _commit(state, new, dt)
    return rec


def _error(state: TrainState, new, h: float, st: TransientSettings, coef=None) -> float:
    """Scaled local error estimate of a step of ``h`` (module docstring).

    Implicit Euler: h/(h + h1) (x - x_lin), x_lin the linear extrapolation of the last two
    states (a start at rest: derivative 0). BDF2 with two states before the current one:
    K_c/(K_c + K_p) (x - x_quad), x_quad the quadratic extrapolation of the last three,
    K_c = (1 + omega)^2/(omega (1 + 2 omega)) the step's error constant and
    K_p = (h + h1)(h + h1 + h2)/h^2 the predictor's, both times h^3 d3x/dt3 / 6 (Milne's
    device; Hairer, Norsett & Wanner 1993, ch. III.7). A BDF2 step with only one state before
    it takes the first-order estimate (an over-estimate)."""
    hist = state.history or []
    two = coef is not None and len(hist) >= 2
    worst = 0.0
    for k, (run, (_, x, _, _)) in enumerate(zip(state.bricks, new)):
        lay = run.layout
        if two:
            x1, h1 = hist[0][0][k], hist[0][1]
            x2, h2 = hist[1][0][k], hist[1][1]
            t1, t2 = -h1, -h1 - h2                   # times of x1, x2; run.x at 0, x at h
            pred = ((h - t1) * (h - t2) / (t1 * t2) * run.x
                    + h * (h - t2) / (t1 * (t1 - t2)) * x1
                    + h * (h - t1) / (t2 * (t2 - t1)) * x2)
            om = h / h1
            kc = (1.0 + om) ** 2 / (om * (1.0 + 2.0 * om))
            kp = (h + h1) * (h + h1 + h2) / (h * h)
            e = kc / (kc + kp) * (x - pred)
        else:
            xp, h1 = (hist[0][0][k], hist[0][1]) if hist else (run.x, h)
            pred = run.x + (run.x - xp) * (h / h1)
            e = h / (h + h1) * (x - pred)
        used = run.problem.static.site_used > 0
        cov = np.abs(lay.coverage(e))[:, used]
        if cov.size:
            sc = st.atol_coverage + st.rtol * np.abs(lay.coverage(x)[:, used])
            worst = max(worst, float(np.max(cov / sc)))
        eT = np.abs(lay.T_solid(e))
        sc = st.atol_T_K + st.rtol * np.abs(lay.T_solid(x))
        worst = max(worst, float(np.max(eT / sc)))
    return worst


def _conduct(prob: BrickProblem, x, dt: float, k_solid: float) -> None:
    """Implicit axial conduction step on T_s (insulated brick faces), in place:
    C_j (T_j - T*_j)/dt = k_ax A [(T_j+1 - T_j)/dz_j+1/2 - (T_j - T_j-1)/dz_j-1/2], a
    tridiagonal solve."""
    from scipy.linalg import solve_banded
    b, st = prob.brick, prob.static
    n = st.n
    k_ax = (1.0 - b.substrate.ofa) * k_solid
    zc = 0.5 * (prob.z_edges[:-1] + prob.z_edges[1:])
    g = k_ax * b.frontal_area / np.diff(zc) * dt                  # [n-1] W/K x s
    C = st.C_cell                                                  # J/K per cell
    ab = np.zeros((3, n))
    ab[1] = C
    ab[1, :-1] += g
    ab[1, 1:] += g
    ab[0, 1:] = -g
    ab[2, :-1] = -g
    col = prob.layout.T_SOLID
    x[:, col] = solve_banded((1, 1), ab, C * x[:, col])


@dataclass
class TransientResult:
    """Time series of a transient run, with the NH3 account.

    Arrays are per time point ``t_s`` [s] of the input (the first point is the starting
    state): ``inlet_F``, ``outlet_F`` [N, nspecies] mol/s, ``inlet_T_K``, ``outlet_T_K``,
    ``stored_nh3_mol`` [N, nbricks], ``solid_T_mean_K`` and ``solid_T_max_K`` [N, nbricks],
    ``reacted_nh3_mol_s``, ``converged``, ``residual``, ``jacobians``, ``substeps`` (implicit-
    Euler steps taken over the interval ending at each point) and ``rejected`` (steps redone
    shorter); per interval the amounts that crossed it as the scheme sums them: ``inlet_mol``,
    ``outlet_mol`` [N, nspecies] and ``reacted_nh3_mol`` [N].
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
    substeps: np.ndarray | None = None
    rejected: np.ndarray | None = None
    inlet_mol: np.ndarray | None = None
    outlet_mol: np.ndarray | None = None
    reacted_nh3_mol: np.ndarray | None = None
    seconds: float = 0.0
    extra: dict = field(default_factory=dict)

    def nh3_account(self) -> dict:
        """NH3 in, out, destroyed and the change in storage over the run [mol], summed over
        the implicit-Euler sub-steps as the scheme takes them."""
        n_in = float(self.inlet_mol[:, _NH3].sum())
        n_out = float(self.outlet_mol[:, _NH3].sum())
        n_react = float(self.reacted_nh3_mol.sum())
        d_store = float(self.stored_nh3_mol[-1].sum() - self.stored_nh3_mol[0].sum())
        return {"in_mol": n_in, "out_mol": n_out, "reacted_mol": n_react,
                "stored_change_mol": d_store,
                "imbalance_mol": n_in - n_out - n_react - d_store}

    @property
    def all_converged(self) -> bool:
        return bool(np.all(self.converged))


def _blend(a: Stream, b: Stream, w: float) -> Stream:
    """The inlet a fraction ``w`` of the way from sample ``a`` to sample ``b`` (linear)."""
    if w >= 1.0:
        return b
    return Stream(F=(1.0 - w) * a.F + w * b.F, T=(1.0 - w) * a.T + w * b.T,
                  p=(1.0 - w) * a.p + w * b.p)


def simulate(train, times, inlets, *, state: TrainState | None = None,
             settings: TransientSettings | None = None, progress=None,
             partial=None, partial_every_s: float = 2.0) -> TransientResult:
    """Run ``train`` through a time series.

    ``times`` [s] (increasing); ``inlets`` gives the train inlet at each time: a list of
    :class:`Stream`, or a callable ``inlets(i, state) -> Stream`` (a dosing controller sees the
    state at sample i - 1). The run starts from ``state`` (default: the steady state at the
    first inlet, :func:`start`); each interval is crossed in error-controlled sub-steps (BDF2)
    with the inlet linear in time (module docstring), or in one implicit-Euler step when
    ``settings.error_control`` is off.

    ``progress(i, N)`` is called before each interval; ``partial(result)``, when given, about
    every ``partial_every_s`` seconds of wall time with the :class:`TransientResult` of the
    points computed so far (copies: a viewer can show the run while it goes on).
    """
    st = settings or TransientSettings()
    ss = st.solver()
    t0 = time.perf_counter()
    times = np.asarray(times, dtype=float)
    if times.ndim != 1 or len(times) < 2 or np.any(np.diff(times) <= 0):
        raise ValueError("times must be at least two increasing values")
    get = inlets if callable(inlets) else (lambda i, s: inlets[i])
    first = get(0, state)
    if state is None:
        state = start(train, first, settings=st)
    N, nb = len(times), len(state.bricks)
    inF, outF = np.empty((N, NSP)), np.empty((N, NSP))
    inT, outT = np.empty(N), np.empty(N)
    stored = np.empty((N, nb))
    Tmean, Tmax = np.empty((N, nb)), np.empty((N, nb))
    reacted = np.zeros(N)
    conv = np.ones(N, dtype=bool)
    resid = np.zeros(N)
    jac = np.zeros(N, dtype=int)
    subs = np.zeros(N, dtype=int)
    rej = np.zeros(N, dtype=int)
    in_mol, out_mol = np.zeros((N, NSP)), np.zeros((N, NSP))
    reacted_mol = np.zeros(N)

    def record(i, inlet, outlet):
        inF[i], inT[i] = inlet.F, inlet.T
        outF[i], outT[i] = outlet.F, outlet.T
        stored[i] = state.stored_nh3_mol()
        for k, b in enumerate(state.bricks):
            Ts = b.layout.T_solid(b.x)
            Tmean[i, k] = Ts.mean()
            Tmax[i, k] = Ts.max()

    names = [b.problem.brick.name for b in state.bricks]

    def pack(n: int) -> TransientResult:
        """The first ``n`` points (all of them: the arrays themselves; fewer: copies)."""
        c = (lambda a: a) if n == N else (lambda a: a[:n].copy())
        return TransientResult(t_s=times[:n].copy(), inlet_F=c(inF),
                               inlet_T_K=c(inT), outlet_F=c(outF), outlet_T_K=c(outT),
                               stored_nh3_mol=c(stored), solid_T_mean_K=c(Tmean),
                               solid_T_max_K=c(Tmax), reacted_nh3_mol_s=c(reacted),
                               converged=c(conv), residual=c(resid), jacobians=c(jac),
                               brick_names=list(names), substeps=c(subs), rejected=c(rej),
                               inlet_mol=c(in_mol), outlet_mol=c(out_mol),
                               reacted_nh3_mol=c(reacted_mol), seconds=time.perf_counter() - t0)

    stream = first
    for run in state.bricks:
        stream = _outlet(run, stream)
    record(0, first, stream)
    next_partial = time.perf_counter() + partial_every_s
    state.t_s = float(times[0])
    prev_inlet = first
    h_next = float(times[1] - times[0])
    carry = (np.zeros(NSP), np.zeros(NSP), 0.0)          # the last step's amounts (BDF2)
    for i in range(1, N):
        if progress is not None:
            progress(i, N)
        inlet = get(i, state)
        t_a, t_b = float(times[i - 1]), float(times[i])
        span = t_b - t_a
        if not st.error_control:
            new, rec = _step_all(state, inlet, span, st, ss)
            _commit(state, new, span)
            steps = [(span, 0.0, rec, inlet)]
        else:
            steps = []
            t = t_a
            h = min(h_next, span)
            while t < t_b - 1e-12 * span:
                rest = t_b - t
                # the rest of the interval in equal sub-steps no longer than h: consecutive
                # sub-steps (and intervals of equal length) then share their step size, so each
                # cell's Jacobian factors from the last sub-step still serve as chords
                n_rest = max(1, int(np.ceil(rest / h - 1e-9)))
                n_rest = max(1, min(n_rest, st.max_substeps - len(steps)))
                last = n_rest == 1
                h_try = rest / n_rest
                w = (t + h_try - t_a) / span
                s_in = _blend(prev_inlet, inlet, w)
                coef = _bdf2(state, h_try, st)
                if coef is not None and coef[0] > 2.0:
                    coef = None          # BDF2 is zero-stable for omega < 1 + sqrt(2) only
                new, rec = _step_all(state, s_in, h_try, st, ss, coef)
                err = _error(state, new, h_try, st, coef) if rec.converged else np.inf
                hmin = min(st.dt_min_s, rest)
                if err > 1.0 and h_try > hmin and len(steps) + rej[i] < st.max_substeps:
                    rej[i] += 1
                    h = h_try * min(0.9, max(0.2, 0.9 / np.sqrt(err)))
                    if last:
                        h = min(h, 0.5 * rest)         # (not stretched onto the sample again)
                    h = max(hmin, h)
                    continue
                _commit(state, new, h_try)
                steps.append((h_try / coef[1], coef[2], rec, s_in) if coef is not None
                             else (h_try, 0.0, rec, s_in))
                t += h_try
                # (at most doubling: BDF2 needs omega below 1 + sqrt(2))
                grow = min(2.0 if st.method == "bdf2" else 4.0,
                           0.9 / np.sqrt(max(err, 1e-12)))
                # the nominal step is kept unless the estimate allows 1.5x or more (hysteresis:
                # a new step size costs every cell a new Jacobian)
                if grow >= 1.5:
                    h = max(h, h_try * grow)
                h = max(h, st.dt_min_s)
            h_next = max(h, st.dt_min_s)
        rec = steps[-1][2]
        record(i, inlet, rec.outlet)
        conv[i] = all(s[2].converged for s in steps)
        resid[i] = max(s[2].residual for s in steps)
        jac[i] = sum(s[2].jacobians for s in steps)
        reacted[i] = rec.reacted_nh3_mol_s
        subs[i] = len(steps)
        for h_eff, gamma, r, s_in in steps:
            # the amounts of the account as the step sums them: x_n+1 - x_n = h_eff f_n+1
            # (+ gamma (x_n - x_n-1) for BDF2), so that in - out = destroyed + change in
            # storage holds exactly, step by step
            inc = (h_eff * s_in.F + gamma * carry[0], h_eff * r.outlet.F + gamma * carry[1],
                   h_eff * r.reacted_nh3_mol_s + gamma * carry[2])
            in_mol[i] += inc[0]
            out_mol[i] += inc[1]
            reacted_mol[i] += inc[2]
            carry = inc
        prev_inlet = inlet
        if partial is not None and i < N - 1 and time.perf_counter() >= next_partial:
            partial(pack(i + 1))
            next_partial = time.perf_counter() + partial_every_s
    return pack(N)
