"""Solving one brick: the kernel, the march, and the brick-level strategy that stays in Python.

A brick's balances are block lower-triangular along it (upwind cells: each cell depends on its
own unknowns and its inflow), so they are solved exactly by marching from the inlet, one damped
Newton solve per cell with the converged upstream cell as inflow (:func:`march`; the kernels in
:mod:`aftertreat.kernel_numpy` and :mod:`aftertreat.kernel_numba`). Every iterate stays inside
the physical bounds (flows and concentrations >= 0, coverages in [0, 1]), so no iteration can
wander onto the unphysical roots that negative concentrations would give the rate laws.

Brick-level strategy (:func:`solve`):

1. march from the inlet (each cell starts from its converged upstream neighbour; a warm
   start's stored Jacobian factors serve as chords);
2. accept only a march whose every cell converged and whose element and energy balances close
   (:func:`balances`); otherwise march again cold;
3. then pseudo-transient continuation on the whole brick: implicit-Euler steps in physical time
   from the best state, the step growing tenfold from ``ptc_dt0_s``, then a steady march;
4. a brick that still fails is returned with its best state and ``converged = False``.

Branches. The balances of a cell can have more than one solution: a slip or oxidation catalyst
fed thousands of ppm of NH3 can burn it at the very inlet (ignited) or only further down the
brick (not yet lit), both steady states of the discrete model, as light-off hysteresis is of a
real monolith. A steady solve reports the branch reached by starting every cell from its
converged upstream neighbour, and cell 0 from the inlet state: the branch of a brick warmed up
from cold (light-off from below). It does not depend on a warm start, so a mode gives the same
answer whichever mode was solved before it; a warm start lends its Jacobian factors only.
A transient run follows the branch its own history selects.

Kernel choice (:data:`KERNELS`): ``"numba"`` (compiled; the default through ``"auto"`` when
numba imports), ``"numpy"`` (the reference). ``"auto"`` falls back to numpy with one warning
(:class:`KernelWarning`) when numba is missing or fails to compile. The default can be set with
:func:`set_default_kernel` or the environment variable ``AFTERTREAT_KERNEL``.
"""
from __future__ import annotations

import os
import warnings
from dataclasses import dataclass, field

import numpy as np

from .problem import BoundProblem, StateLayout
from .species import ELEMENT_MATRIX, INDEX
from .units import R_GAS

__all__ = ["SolverSettings", "WarmStart", "SolveOutcome", "KERNELS", "KernelWarning",
           "set_default_kernel", "default_kernel", "get_kernel", "solve", "step", "balances",
           "compiled_kernel_cached"]

KERNELS = ("auto", "numba", "numpy")
_NH3 = INDEX["NH3"]


class KernelWarning(UserWarning):
    """The compiled kernel is not available; the numpy reference runs instead."""


@dataclass
class SolverSettings:
    """Tolerances and limits of the brick solver.

    ``tol``: target of the scaled residual of every cell (flows / inlet flow, layer balances /
    (conductance x concentration), coverages in 1/s; temperature rows in K weighted 1e-3);
    ``tol_accept``: a cell that stalls below it (round-off) counts as converged. Per cell at
    most ``max_iter`` iterations and ``max_jacobians`` Jacobians. ``jacobian_reuse``: chord
    steps with an older Jacobian (a neighbouring cell's, or a warm start's) while each cuts the
    residual below ``chord_accept`` of the last, kept while below ``chord_keep``.
    The energy balance is accepted within ``energy_tol_K`` plus ``energy_rtol`` of the heat the
    reactions released (in kelvin of the gas: the model's own approximations, c_p at the inlet
    composition and reaction heats at the solid temperature, leave ~1e-3 of it; measured).
    ``step_fraction``: a Newton step may take a bounded unknown at most this fraction of the
    way to its bound, and the temperatures move by at most ``max_step_T_K`` per step.
    ``warm_states``: a steady solve starts each cell from a warm start's state for that cell
    (else from its converged upstream neighbour, and the warm start lends only its Jacobian
    factors); off by default, so that a steady answer does not depend on what was solved
    before it (module docstring, "Branches").
    ``rate_continuation``: a cell that Newton cannot solve is followed from nearly unreacting
    (all rates x 1e-3) to its real rates. ``continuation``: pseudo-transient continuation of
    the whole brick when the marches fail. ``balance_tol``: largest element-balance error
    accepted [-];
    ``energy_tol_K``: largest energy-balance error accepted, in kelvin of the gas stream.
    """
    tol: float = 1e-10
    tol_accept: float = 1e-9
    max_iter: int = 60
    max_jacobians: int = 25
    jacobian_reuse: bool = True
    chord_accept: float = 0.5
    chord_keep: float = 0.1
    fd_step: float = 1e-7
    tau0: float = 1e-2
    step_fraction: float = 0.99
    max_step_T_K: float = 50.0
    rate_continuation: bool = True
    balance_tol: float = 1e-9
    energy_tol_K: float = 0.05
    energy_rtol: float = 5e-3
    ptc_dt0_s: float = 0.01
    continuation: bool = True
    warm_states: bool = False
    kernel: str | None = None

    def vector(self) -> np.ndarray:
        """The settings vector the kernels read (order of :data:`kernel_numpy.SETTINGS`)."""
        return np.array([self.tol, self.tol_accept, self.max_iter, self.max_jacobians,
                         1.0 if self.jacobian_reuse else 0.0, self.chord_accept,
                         self.chord_keep, self.fd_step, self.tau0, self.step_fraction,
                         self.max_step_T_K, 1.0 if self.rate_continuation else 0.0])


# ---------------------------------------------------------------------------------------------
# kernels
# ---------------------------------------------------------------------------------------------
_DEFAULT = [os.environ.get("AFTERTREAT_KERNEL", "auto")]
_RESOLVED: dict[str, object] = {}


def set_default_kernel(name: str) -> None:
    """Kernel used when :attr:`SolverSettings.kernel` is None (``auto``, ``numba``, ``numpy``)."""
    if name not in KERNELS:
        raise ValueError(f"unknown kernel {name!r}; one of {KERNELS}")
    _DEFAULT[0] = name


def default_kernel() -> str:
    return _DEFAULT[0]


class _NumpyKernel:
    name = "numpy"

    def new_factors(self, bound: BoundProblem):
        return [None] * bound.static.n

    def march(self, bound, X, guess, x_old, inv_dt, factors, cfg):
        from . import kernel_numpy as kn
        st, fl = bound.static, bound.flow
        xo = x_old if x_old is not None else None
        conv, res, njac, nres, XI = kn.march(st, fl, X, guess, xo, inv_dt, factors, tuple(cfg))
        return conv, res, njac, nres, XI

    def factors_fit(self, factors, bound) -> bool:
        return isinstance(factors, list) and len(factors) == bound.static.n


class _NumbaFactors:
    """Per-cell Jacobian factors of the numba kernel (flat arrays), valid where ``ok``."""
    __slots__ = ("FF", "FI", "ok", "nv")

    def __init__(self, n, nv, nfl, nin):
        self.FF = np.empty((n, nfl))
        self.FI = np.empty((n, nin), dtype=np.int64)
        self.ok = np.zeros(n, dtype=np.bool_)
        self.nv = nv


class _NumbaKernel:
    """The compiled kernel. Under ``auto`` (``fallback=True``) a failure to compile at the first
    call switches this object to the numpy reference for good, with one warning."""
    name = "numba"

    def __init__(self, module, fallback=False):
        self.k = module
        self.fallback = fallback
        self.spare = None                    # the numpy kernel once compilation failed

    def new_factors(self, bound: BoundProblem):
        if self.spare is not None:
            return self.spare.new_factors(bound)
        st = bound.static
        nv = bound.layout.nv
        nfl, nin = self.k.fac_sizes(nv, st.nnode, st.nf + st.ns, st.resolved)
        return _NumbaFactors(st.n, nv, nfl, nin)

    def factors_fit(self, factors, bound) -> bool:
        if self.spare is not None:
            return self.spare.factors_fit(factors, bound)
        return (isinstance(factors, _NumbaFactors) and factors.FF.shape[0] == bound.static.n
                and factors.nv == bound.layout.nv)

    def march(self, bound, X, guess, x_old, inv_dt, factors, cfg):
        if self.spare is None and self.fallback:
            try:
                return self._march(bound, X, guess, x_old, inv_dt, factors, cfg)
            except Exception as exc:
                from numba.core.errors import NumbaError
                if not isinstance(exc, NumbaError):
                    raise
                first = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
                warnings.warn(f"compiled kernel failed to compile ({type(exc).__name__}: "
                              f"{first[:120]}); using the numpy reference kernel, which is "
                              "much slower", KernelWarning, stacklevel=3)
                self.spare, self.name = _NumpyKernel(), "numpy"
        if self.spare is not None:
            if not self.spare.factors_fit(factors, bound):
                factors = self.spare.new_factors(bound)
            return self.spare.march(bound, X, guess, x_old, inv_dt, factors, cfg)
        return self._march(bound, X, guess, x_old, inv_dt, factors, cfg)

    def _march(self, bound, X, guess, x_old, inv_dt, factors, cfg):
        st, fl = bound.static, bound.flow
        n, nv = X.shape
        work = self.k.make_work(st)
        conv = np.zeros(n, dtype=np.bool_)
        res = np.zeros(n)
        njac = np.zeros(n, dtype=np.int64)
        nres = np.zeros(n, dtype=np.int64)
        XI = np.zeros((n, max(st.nrxn, 1)))
        g = guess if guess is not None else X
        xo = x_old if x_old is not None else np.zeros_like(X)
        self.k.march(st, fl, X, g, guess is not None, xo, float(inv_dt), factors.FF, factors.FI,
                     factors.ok, np.asarray(cfg, dtype=float), conv, res, njac, nres, XI, work)
        return conv, res, njac, nres, XI[:, :st.nrxn]


def compiled_kernel_cached() -> bool | None:
    """Whether the compiled kernel's march is in numba's on-disk cache for the current source
    (False: the next solve compiles it, about 1-2 minutes on 2 cores; None: numba missing, or
    its cache cannot be inspected). For a status line only; reads numba's cache index."""
    try:
        from . import kernel_numba
        return bool(kernel_numba.march._cache._cache_file._load_index())
    except Exception:                                  # private API of numba: best effort
        return None


def _load_numba(fallback=False):
    try:
        from . import kernel_numba
    except Exception as exc:                          # numba missing or broken
        return None, f"{type(exc).__name__}: {exc}"
    return _NumbaKernel(kernel_numba, fallback=fallback), None


def get_kernel(name: str | None = None):
    """The kernel object for ``name`` (None: the default). ``auto`` is numba when it imports
    and compiles, else numpy with one :class:`KernelWarning`."""
    name = name or _DEFAULT[0]
    if name in _RESOLVED:
        return _RESOLVED[name]
    if name == "numpy":
        k = _NumpyKernel()
    elif name == "numba":
        k, why = _load_numba()
        if k is None:
            raise RuntimeError(f"the numba kernel is not available ({why})")
    elif name == "auto":
        k, why = _load_numba(fallback=True)
        if k is None:
            warnings.warn(f"compiled kernel unavailable ({why}); using the numpy reference "
                          "kernel, which is much slower", KernelWarning, stacklevel=2)
            k = _NumpyKernel()
    else:
        raise ValueError(f"unknown kernel {name!r}; one of {KERNELS}")
    _RESOLVED[name] = k
    return k


# ---------------------------------------------------------------------------------------------
# warm starts and outcomes
# ---------------------------------------------------------------------------------------------
@dataclass(eq=False)
class WarmStart:
    """A solved brick state to start a neighbouring solve from: the state, its layout and
    grid, and the kernel's Jacobian factors (used only by the same kernel on the same layout)."""
    layout: StateLayout
    z_edges: np.ndarray
    x: np.ndarray
    factors: object = None
    kernel: str = ""

    def fits(self, layout: StateLayout, n_cells: int) -> bool:
        return self.layout == layout and self.x.shape[0] == n_cells

    def onto(self, layout: StateLayout, z_edges: np.ndarray) -> "WarmStart | None":
        """This state interpolated onto another grid: along the brick by the fraction of its
        length (the profiles of a longer or shorter brick, or of a finer grid, are close in
        that coordinate), and across each washcoat layer by depth when the node counts
        differ; without factors. None if the layouts differ in more than their nodes."""
        old = self.layout
        if (old.film_species, old.sites) != (layout.film_species, layout.sites) or \
                sorted(set(old.node_layer)) != sorted(set(layout.node_layer)):
            return None
        zo = 0.5 * (self.z_edges[:-1] + self.z_edges[1:]) / self.z_edges[-1]
        zn = 0.5 * (z_edges[:-1] + z_edges[1:]) / z_edges[-1]
        xa = np.empty((len(zn), self.x.shape[1]))
        for k in range(self.x.shape[1]):
            xa[:, k] = np.interp(zn, zo, self.x[:, k])
        if layout == old:
            return WarmStart(layout=layout, z_edges=np.asarray(z_edges), x=xa)
        x = np.zeros((len(zn), layout.nv))
        x[:, :old.NODE0] = xa[:, :old.NODE0]
        blocks_o = xa[:, old.NODE0:].reshape(len(zn), old.n_nodes, old.nb)
        blocks_n = x[:, layout.NODE0:].reshape(len(zn), layout.n_nodes, layout.nb)
        lo_, ln_ = np.array(old.node_layer), np.array(layout.node_layer)
        do_, dn_ = np.array(old.node_depth), np.array(layout.node_depth)
        for k in set(layout.node_layer):
            so, sn = np.nonzero(lo_ == k)[0], np.nonzero(ln_ == k)[0]
            for v in range(layout.nb):
                for c in range(len(zn)):
                    blocks_n[c, sn, v] = np.interp(dn_[sn], do_[so], blocks_o[c, so, v])
        return WarmStart(layout=layout, z_edges=np.asarray(z_edges), x=x)


@dataclass
class SolveOutcome:
    """The solver's answer for one brick: the best state, its status and the work done."""
    x: np.ndarray
    extents: np.ndarray                 # [n, R] reaction extents at x [mol/s]
    converged: bool
    residual: float
    cell_converged: np.ndarray
    jacobians: int
    evaluations: int
    element_balance_error: float
    energy_balance_K: float
    factors: object = None
    kernel: str = ""
    attempts: list[str] = field(default_factory=list)


def _h_species(st, T) -> np.ndarray:
    """Molar enthalpy of every species at T [J/mol], shape T.shape + (nsp,) (NASA-7, as
    :func:`aftertreat.thermo.h_molar`, from the problem's coefficient arrays)."""
    T = np.asarray(T, dtype=float)[..., None]
    low = T < st.nasa_Tmid                                       # [..., nsp]
    a = [np.where(low, st.nasa_low[:, k], st.nasa_high[:, k]) for k in range(6)]
    return R_GAS * (T * (a[0] + T * (a[1] / 2 + T * (a[2] / 3 + T * (a[3] / 4 + T * a[4] / 5))))
                    + a[5])


def balances(bound: BoundProblem, x: np.ndarray, *, x_old: np.ndarray | None = None,
             dt: float | None = None, extents: np.ndarray | None = None) -> tuple:
    """(element balance error [-], energy balance error [K], heat released [K], pricing of the
    stored NH3 [K]) of a brick state. The heat the reactions released (with ``extents``
    [n, R], else 0) and the enthalpy difference of the NH3 that goes onto the sites between the
    solid and the gas temperature (a time step) are given in kelvin of the outlet gas: the
    scales against which the energy error is judged.

    Elements: max over N, H, O of |atoms out + atoms stored per second - atoms in| / max atoms
    in, stored NH3 counted in a time step (``x_old``, ``dt``). Energy, by the exact enthalpy
    account from the NASA-7 data: H_in - H_out (formation enthalpies included; NH3 going onto
    the sites carries its gas enthalpy) = heat lost through the can + heat stored in the solid
    per second; the error is reported as kelvin of the outlet gas (divided by F c_p). The model
    takes c_p at the inlet composition and each reaction's heat at the solid temperature, so
    this account closes to ~1e-3 K, not to round-off; a state that breaks it by more is not a
    solution of the physics whatever its residual.
    """
    st, lay, inl = bound.static, bound.layout, bound.inlet
    F = lay.flows(x)
    F_out = F[-1]
    Ts = lay.T_solid(x)
    T_out = float(lay.T_gas(x)[-1])
    stored_rate = 0.0
    heat_store = 0.0
    h_nh3 = pricing = 0.0
    if x_old is not None and dt:
        cell = bound.problem.stored_nh3_per_cell
        rate = (cell(x) - cell(x_old)) / dt                 # [n] mol/s going onto the sites
        stored_rate = float(rate.sum())
        heat_store = float(np.sum(st.C_cell * (Ts - lay.T_solid(x_old)))) / dt
        # the NH3 a cell stores leaves the gas with its enthalpy at that cell's temperature
        hs = _h_species(st, Ts)[:, _NH3]
        h_nh3 = float(np.sum(rate * hs))
        # the model does not say at which temperature (solid or gas) that NH3 changes hands,
        # nor carries its sensible heat in the gas balance: the difference is the model's own
        # uncertainty of the account, added to the heat scale below
        pricing = float(np.sum(np.abs(rate * (hs - _h_species(st, lay.T_gas(x))[:, _NH3]))))
    a_in = ELEMENT_MATRIX @ inl.F
    a_out = ELEMENT_MATRIX @ F_out + ELEMENT_MATRIX[:, _NH3] * stored_rate
    el = float(np.max(np.abs(a_out - a_in)) / np.max(a_in))
    h_in = float(_h_species(st, inl.T) @ inl.F)
    h_out = float(_h_species(st, T_out) @ F_out)
    loss = float(np.sum(st.loss_UA * (Ts - st.T_amb)))
    err_W = h_in - h_out - h_nh3 - loss - heat_store
    Fcp = float(F_out.sum() * bound.gas.cp_molar(T_out))
    released = 0.0
    if extents is not None and st.nrxn:
        i = np.clip((Ts - st.T_tab0).astype(int), 0, st.dH_tab.shape[0] - 1)
        released = float(np.abs(np.sum(extents * st.dH_tab[i])))
    return el, abs(err_W) / Fcp, released / Fcp, pricing / Fcp


def _accept(bound, x, conv, XI, st: SolverSettings, x_old=None, dt=None):
    if not np.all(conv):
        return False, np.nan, np.nan
    if np.any(bound.layout.flows(x) < 0) or not np.all(np.isfinite(x)):
        return False, np.nan, np.nan
    el, en, heat, pricing = balances(bound, x, x_old=x_old, dt=dt, extents=XI)
    tol = st.energy_tol_K + st.energy_rtol * heat + pricing
    return (el <= st.balance_tol and en <= tol), el, en


def _run(kernel, bound, X0, guess, x_old, inv_dt, factors, cfg):
    X = X0.copy()
    conv, res, njac, nres, XI = kernel.march(bound, X, guess, x_old, inv_dt, factors, cfg)
    return X, conv, res, int(njac.sum()), int(nres.sum()), XI


def solve(bound: BoundProblem, guess: WarmStart | None = None,
          settings: SolverSettings | None = None) -> SolveOutcome:
    """Steady state of a bound brick (strategy in the module docstring). Never raises on
    non-convergence."""
    st = settings or SolverSettings()
    kernel = get_kernel(st.kernel)
    cfg = st.vector()
    n = bound.static.n
    X0 = bound.inlet_state()
    attempts = []
    g = fac = None
    if guess is not None:
        if guess.fits(bound.layout, n):
            g = guess.x
            if guess.kernel == kernel.name and kernel.factors_fit(guess.factors, bound):
                fac = guess.factors
        else:
            w = guess.onto(bound.layout, bound.problem.z_edges)
            g = w.x if w is not None else None
        if not st.warm_states:
            g = None
    jac = evals = 0
    best = None
    tries = ([("warm", g, fac)] if g is not None or fac is not None else []) + [("cold", None,
                                                                                  None)]
    for label, gx, f in tries:
        factors = f if f is not None else kernel.new_factors(bound)
        X, conv, res, nj, nr, XI = _run(kernel, bound, X0, gx, None, 0.0, factors, cfg)
        jac += nj
        evals += nr
        ok, el, en = _accept(bound, X, conv, XI, st)
        attempts.append(f"{label}: {int(conv.sum())}/{n} cells converged, residual "
                        f"{float(np.max(res)):.1e}" + ("" if ok else ", rejected"))
        cand = (ok, float(np.max(res)), X, conv, XI, factors, el, en)
        if best is None or (ok and not best[0]) or (ok == best[0] and cand[1] < best[1]):
            best = cand
        if ok:
            break
    if not best[0] and st.continuation:
        # pseudo-transient continuation: physical implicit-Euler steps from the best state
        x = best[2]
        dt = st.ptc_dt0_s
        factors = kernel.new_factors(bound)
        while dt < 1e7:
            X, conv, res, nj, nr, XI = _run(kernel, bound, x, x, x, 1.0 / dt, factors, cfg)
            jac += nj
            evals += nr
            if np.all(np.isfinite(X)):
                x = X
            dt *= 10.0
        factors = kernel.new_factors(bound)
        X, conv, res, nj, nr, XI = _run(kernel, bound, X0, x, None, 0.0, factors, cfg)
        jac += nj
        evals += nr
        ok, el, en = _accept(bound, X, conv, XI, st)
        attempts.append(f"continuation: {int(conv.sum())}/{n} cells converged, residual "
                        f"{float(np.max(res)):.1e}" + ("" if ok else ", rejected"))
        if ok or float(np.max(res)) < best[1]:
            best = (ok, float(np.max(res)), X, conv, XI, factors, el, en)
    ok, resid, X, conv, XI, factors, el, en = best
    if not np.isfinite(el):
        el, en, _, _ = balances(bound, X)
    return SolveOutcome(x=X, extents=XI, converged=bool(ok), residual=resid, cell_converged=conv,
                        jacobians=jac, evaluations=evals, element_balance_error=el,
                        energy_balance_K=en, factors=factors, kernel=kernel.name,
                        attempts=attempts)


def step(bound: BoundProblem, x_old: np.ndarray, dt: float, *, guess: np.ndarray | None = None,
         factors=None, settings: SolverSettings | None = None) -> SolveOutcome:
    """One implicit-Euler step of ``dt`` [s] from ``x_old`` with the bound inlet at the new
    time. ``factors`` (of the previous step, same kernel) serve as chords and are updated in
    place. A step that fails is retried from ``x_old`` without factors."""
    st = settings or SolverSettings()
    kernel = get_kernel(st.kernel)
    cfg = st.vector()
    if factors is None or not kernel.factors_fit(factors, bound):
        factors = kernel.new_factors(bound)
    g = x_old if guess is None else guess
    X, conv, res, nj, nr, XI = _run(kernel, bound, x_old, g, x_old, 1.0 / dt, factors, cfg)
    ok, el, en = _accept(bound, X, conv, XI, st, x_old, dt)
    attempts = ["step" + ("" if ok else ", rejected")]
    if not ok:
        factors = kernel.new_factors(bound)
        X2, conv2, res2, nj2, nr2, XI2 = _run(kernel, bound, x_old, x_old, x_old, 1.0 / dt,
                                              factors, cfg)
        nj += nj2
        nr += nr2
        ok2, el2, en2 = _accept(bound, X2, conv2, XI2, st, x_old, dt)
        attempts.append("step from the old state" + ("" if ok2 else ", rejected"))
        if ok2 or float(np.max(res2)) < float(np.max(res)):
            X, conv, res, XI, ok, el, en = X2, conv2, res2, XI2, ok2, el2, en2
    if not np.isfinite(el):
        el, en, _, _ = balances(bound, X, x_old=x_old, dt=dt)
    return SolveOutcome(x=X, extents=XI, converged=bool(ok), residual=float(np.max(res)),
                        cell_converged=conv, jacobians=nj, evaluations=nr,
                        element_balance_error=el, energy_balance_K=en, factors=factors,
                        kernel=kernel.name, attempts=attempts)
