"""The bench reactor of a kinetic calibration: a core sample of catalyst in a furnace, fed a
synthetic gas, and what the model says it measures in each experiment (:mod:`aftertreat.labdata`).

The sample is a :class:`~aftertreat.brick.Brick` built from the ``[reactor]`` table with the
brick keys of a case (``substrate``, ``cpsi``, ``wall``, ``washcoat_um``, ``length``,
``diameter``, ``cells`` ...), plus the flow (``GHSV_per_h`` at normal conditions, or
``flow_L_min`` normal, or ``total_mol_s``) and ``p_kPa``. ``mass_transfer = false`` turns film
and washcoat resistance off (a kinetically limited sample, for checks against a kinetic-only
reference).

Thermal model (common practice for a bench: a small core in a furnace at the measured
temperature):

* steady points: the sample is held at the row's T through a can heat-loss coefficient of
  1e6 W/(m2 K) to a furnace at that T (reaction heat of ppm-level feeds is then invisible);
* time runs (tpd, step): the sample is isothermal at each row's temperature (linear between
  rows), in the tanks-in-series model of :func:`_timed`.

Each experiment gives the model's outlet ppm (wet) at the measured rows, species by species, in
the order of :attr:`Experiment.measured`; :func:`predict` counts the model solves it makes.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from .brick import Brick
from .checks import number
from .errors import InputError
from .labdata import Experiment
from .stream import Stream
from .train import Train
from .units import P_NORMAL_PA, R_GAS, T_NORMAL_K

__all__ = ["BenchReactor", "parse_reactor", "predict"]

#: [reactor] keys that are not brick keys
_FLOW_KEYS = {"GHSV_per_h", "flow_L_min", "total_mol_s", "p_kPa", "mass_transfer"}
#: O2 of an O2-free carrier (TPD and steps are often run in N2 or He) [mol/mol]: 1 ppm. Time
#: steps of the transient solver do not converge with exactly zero O2 (measured on a 25 mm
#: Cu-CHA core purged in N2 + 5 % H2O: every sub-step rejected, while 1 ppm O2 converges at
#: once); no shipped rate law is sensitive to O2 at the ppm level.
O2_FLOOR = 1e-6
#: relative tolerance of the time experiments' integration (outlet ppm change by < 0.1 % of
#: their peak against 1e-7; measured on the demo TPD)
RTOL = 1e-5
#: below about this mole fraction [ppm] of a gas reactant, a reaction written zero order in it
#: ("O2 in excess") is throttled by c / (c + c_half) in the time experiments: the 1 ppm O2 of an
#: N2 purge cannot feed NH3 oxidation at its excess-O2 rate (the gas O2 would go negative)
STARVED_PPM = 1.0
#: the furnace hold of a steady point [W/(m2 K)] (see the module docstring)
HOLD_W_M2K = 1e6


@dataclass
class BenchReactor:
    """The core sample and its feed rate: ``total_mol_s`` of gas at ``p`` [Pa]."""
    brick: Brick
    total_mol_s: float
    p: float
    mass_transfer: bool = True

    def with_catalyst(self, catalyst) -> "BenchReactor":
        """The same reactor with ``catalyst`` in the sample (one catalytic layer)."""
        return dataclasses.replace(self, brick=dataclasses.replace(
            self.brick, catalysts=(catalyst,)))

    def inlet(self, x: dict[str, float], T: float) -> Stream:
        """The feed ``x`` (wet mole fractions, balance N2) at ``T``; O2 at least
        :data:`O2_FLOOR` (see there)."""
        x = dict(x)
        x["O2"] = max(x.get("O2", 0.0), O2_FLOOR)
        return Stream.from_mole_fractions(x, T=T, p=self.p, total_mol_s=self.total_mol_s)

    def steady_brick(self, T: float) -> Brick:
        return dataclasses.replace(self.brick, heat_loss_W_m2K=HOLD_W_M2K, T_ambient=T)

    def steady(self, x: dict[str, float], T: float, settings=None):
        """A steady point: the sample held at ``T`` fed ``x``; (inlet stream, solution)."""
        inlet = self.inlet(x, T)
        return inlet, Train([self.steady_brick(T)]).solve(inlet, settings=settings)

    def starved_half(self, T: float) -> float:
        """c_half of :data:`STARVED_PPM` at ``T`` [mol/m3]."""
        return STARVED_PPM * 1e-6 * self.p / (R_GAS * T)

    def flow_m3_s(self, T: float) -> float:
        """Volumetric flow Q = F R T / p of the feed at ``T`` [m3/s]."""
        return self.total_mol_s * R_GAS * T / self.p


def parse_reactor(table, file: str, catalyst) -> BenchReactor:
    """Validate the ``[reactor]`` table of a fit spec (see the module docstring)."""
    from .case import parse_brick
    if not isinstance(table, dict):
        raise InputError("expected a [reactor] table: the core sample (brick keys) and its "
                         "flow", key="reactor", file=file)
    brick_keys = {k: v for k, v in table.items() if k not in _FLOW_KEYS}
    brick_keys.setdefault("name", "sample")
    brick_keys["catalyst"] = catalyst.file
    given = [k for k in ("GHSV_per_h", "flow_L_min", "total_mol_s") if k in table]
    if len(given) != 1:
        raise InputError("give exactly one of GHSV_per_h (normal conditions), flow_L_min "
                         "(normal) and total_mol_s", key="reactor", value=given or None,
                         file=file)
    try:
        brick = parse_brick(brick_keys, 0, file)
    except InputError as exc:
        raise InputError(exc.expected, key=(exc.key or "").replace("brick[0].", "reactor."),
                         value=exc.value, file=exc.file or file) from None
    if len(brick.catalysts) != 1:
        raise InputError("the sample holds one catalyst layer", key="reactor.washcoat_um",
                         file=file)
    p = number(table.get("p_kPa", P_NORMAL_PA / 1e3), "reactor.p_kPa", file, lo=1.0,
               hi=1e4) * 1e3
    n_normal = P_NORMAL_PA / (R_GAS * T_NORMAL_K)            # mol per m3 at normal conditions
    key = given[0]
    v = number(table[key], f"reactor.{key}", file, lo=0.0, lo_open=True)
    if key == "GHSV_per_h":
        mol_s = v * brick.volume / 3600.0 * n_normal
    elif key == "flow_L_min":
        mol_s = v * 1e-3 / 60.0 * n_normal
    else:
        mol_s = v
    mt = table.get("mass_transfer", True)
    if not isinstance(mt, bool):
        raise InputError("expected true or false", key="reactor.mass_transfer", value=mt,
                         file=file)
    if not mt:
        brick = dataclasses.replace(brick, film=False, washcoat="none")
    return BenchReactor(brick=brick, total_mol_s=mol_s, p=p, mass_transfer=mt)


@dataclass
class Prediction:
    """The model's outlet of one experiment: species -> ppm (wet) at the measured rows, and
    whether every solve converged."""
    outlet_ppm: dict[str, np.ndarray]
    converged: bool
    solves: int
    coverage: np.ndarray | None = None        # time runs on request: [rows, tanks, sites]


def predict(reactor: BenchReactor, exp: Experiment, settings=None) -> Prediction:
    """What the bench would measure in ``exp`` with ``reactor``'s sample (module docstring)."""
    if exp.kind in ("steady", "lightoff"):
        return _steady(reactor, exp, settings)
    return _timed(reactor, exp)


def _ppm(F: np.ndarray, sp: str) -> float:
    from .species import INDEX
    return float(F[INDEX[sp]] / F.sum() * 1e6)


def _steady(reactor, exp, settings) -> Prediction:
    out = {sp: np.empty(len(exp.T_K)) for sp in exp.measured}
    ok = True
    for j, T in enumerate(exp.T_K):
        _, sol = reactor.steady(exp.feed_at(j), float(T), settings)
        ok &= sol.converged
        for sp in out:
            out[sp][j] = _ppm(sol.outlet.F, sp)
    return Prediction(outlet_ppm=out, converged=bool(ok), solves=len(exp.T_K))


def _timed(reactor, exp, coverage: bool = False, compiled: bool = True) -> Prediction:
    """A time experiment (tpd, step) on the sample as ``N`` well-mixed tanks in series (N = the
    sample's cells), isothermal at the row's temperature (linear between rows), in the kinetic
    limit (film and washcoat resistance neglected, common practice for TPD and breakthrough
    analysis at bench flows), with the catalyst's own rate laws (:meth:`Mechanism.rates`)::

        eps V/N dc_i,k/dt = Q (c_i,k-1 - c_i,k) + f V/N sum_r nu_i,r r_r(c_k, theta_k, T)
        Omega_s dtheta_s,k/dt = sum_r nu_s,r r_r(c_k, theta_k, T)

    with the open fraction eps, the catalytic fraction f, the brick volume V and Q = F R T / p
    (the molar flow F is held at the feed's: ppm-level reactions change it by ppm). Only the
    species some reaction makes or uses are integrated; the others keep their feed value.
    Integrated with scipy's BDF (Shampine & Reichelt, SIAM J. Sci. Comput. 18 (1997) 1) with the
    Jacobian of :func:`_tanks_jacobian`. A tpd starts from the sample saturated in ``adsorb``
    (the same tanks integrated to steady coverage at the adsorption T); a step from a clean
    sample (no stored NH3, the gas free of NH3). ``coverage`` also returns every tank's
    coverages at the rows. ``compiled`` evaluates the right-hand side and Jacobian with
    :mod:`aftertreat.bench_kernel` (numba); ``False`` with the numpy code here, the reference
    the compiled one is tested against.
    """
    import warnings
    from scipy.integrate import solve_ivp as _solve_ivp
    from .species import INDEX
    b = reactor.brick
    mech = b.catalysts[0].mechanism
    N = max(int(b.cells), 1)
    V = b.volume
    Vg, Vc = b.substrate.ofa * V / N, b.substrate.catalytic_fraction * V / N
    omega = np.asarray(mech.capacity, dtype=float)
    act_sp = np.flatnonzero(np.any(mech.nu_gas != 0, axis=0))     # species that react
    na, ns = len(act_sp), len(omega)
    nu_a, nu_s = mech.nu_gas[:, act_sp], mech.nu_site
    p = reactor.p
    t_data, T_data = exp.time_s, exp.T_K
    act = float(b.activity)
    evals = [0]
    # reactions written zero order in a gas reactant they consume (O2 "in excess")
    starve = np.array([[nu_a[j, a] < 0 and getattr(rx.law, "orders", {}).get(int(act_sp[a]), 0) == 0
                        for a in range(na)] for j, rx in enumerate(mech.reactions)],
                      dtype=bool).reshape(len(mech.reactions), na)

    def conc(x: dict, T: float) -> np.ndarray:
        return reactor.inlet(x, T).x * p / (R_GAS * T)

    def local_rates(c_a, th, T, c_full):
        """Rates [rows, nrxn] of tank states (active gas c_a, coverages th) at T. A gas
        concentration the integration undershoots below zero counts as zero (mass action would
        otherwise run the reaction backwards: seen with the 1 ppm O2 of an N2 purge, consumed by
        NH3 oxidation at the top of a TPD ramp)."""
        c = np.repeat(c_full[None], len(c_a), axis=0)
        c_a = np.maximum(c_a, 0.0)
        c[:, act_sp] = c_a
        r = mech.rates(c, th, np.full(len(c_a), T), act)
        if starve.any():
            f = c_a[:, None, :] / (c_a[:, None, :] + reactor.starved_half(T))   # [rows, 1, na]
            r = r * np.prod(np.where(starve[None], f, 1.0), axis=2)
        return r

    def split(y):
        return y[:N * na].reshape(N, na), y[N * na:].reshape(N, ns)

    kernel = None
    if compiled:
        from .bench_kernel import TanksKernel
        kernel = TanksKernel(reactor, act_sp, starve,
                             reactor.inlet(exp.feed_at(0), float(exp.T_K[0])))

    def system(T_of, c_in_of):
        if kernel is not None:
            def rhs_c(t, y):
                evals[0] += 1
                T = T_of(t)
                return kernel.rhs(y, N, c_in_of(t), T, reactor.flow_m3_s(T), Vg, Vc, omega,
                                  reactor.starved_half(T))

            def jac_c(t, y):
                evals[0] += 1
                T = T_of(t)
                return kernel.jacobian(y, N, c_in_of(t), T, reactor.flow_m3_s(T), Vg, Vc,
                                       omega, reactor.starved_half(T))
            return rhs_c, jac_c

        def rhs(t, y):
            evals[0] += 1
            T, c_in = T_of(t), c_in_of(t)
            c, th = split(y)
            r = local_rates(c, th, T, c_in)
            up = np.vstack([c_in[act_sp][None], c[:-1]])
            dc = (reactor.flow_m3_s(T) * (up - c) + Vc * (r @ nu_a)) / Vg
            dth = (r @ nu_s) / omega
            return np.concatenate([dc.ravel(), dth.ravel()])

        def jac(t, y):
            evals[0] += 1
            T, c_in = T_of(t), c_in_of(t)
            return _tanks_jacobian(y, N, na, ns, lambda c, th: local_rates(c, th, T, c_in),
                                   nu_a, nu_s, reactor.flow_m3_s(T), Vg, Vc, omega)
        return rhs, jac

    def integrate(funcs, y0, t_span, t_eval=None):
        # a trial parameter set far out can overflow a rate: the integration then fails or
        # gives NaN, which the caller sees (success flag, NaN outlet), not a warning on screen
        rhs, jac = funcs
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            return _solve_ivp(rhs, t_span, y0, method="BDF", t_eval=t_eval, rtol=RTOL, jac=jac,
                              atol=np.concatenate([np.full(N * na, 1e-12),
                                                   np.full(N * ns, 1e-9)]))

    if exp.kind == "tpd":
        c_ad = conc(exp.adsorb_feed, exp.adsorb_T_K)
        y0 = np.concatenate([np.tile(c_ad[act_sp], N), np.zeros(N * ns)])
        sat = integrate(system(lambda t: exp.adsorb_T_K, lambda t: c_ad), y0, (0.0, 1e6))
        y0 = sat.y[:, -1]
        ok = sat.success
    else:
        c0 = conc(exp.feed_at(0), float(T_data[0]))
        c0[INDEX["NH3"]] = 0.0
        y0, ok = np.concatenate([np.tile(c0[act_sp], N), np.zeros(N * ns)]), True
    # the feed of row j holds over the interval ending at row j; T is linear between rows
    feeds = [conc(exp.feed_at(j), float(T_data[j])) * float(T_data[j]) for j in range(len(t_data))]

    def c_in_of(t):
        j = min(int(np.searchsorted(t_data, t)), len(t_data) - 1)
        return feeds[j] / T_of(t)

    def T_of(t):
        return float(np.interp(t, t_data, T_data))
    sol = integrate(system(T_of, c_in_of), y0, (float(t_data[0]), float(t_data[-1])),
                    t_eval=t_data)
    ok &= sol.success and sol.y.shape[1] == len(t_data) and bool(np.all(np.isfinite(sol.y)))
    if ok:
        # physical state at every row (invariants, not only a solver flag): no negative gas
        # beyond the integration tolerance, coverages within [0, 1]
        gas, th = sol.y[:N * na], sol.y[N * na:]
        ok &= bool(np.all(gas >= -1e-6 * max(float(np.abs(gas).max()), 1e-30))
                   and np.all((th >= -1e-6) & (th <= 1.0 + 1e-6)))
    out = {}
    if ok:
        # the last tank's gas [rows, nsp]: the reacting species as integrated, the rest as fed
        c = np.array([c_in_of(float(t)) for t in t_data])
        c[:, act_sp] = sol.y[(N - 1) * na:N * na].T
        x = c / np.maximum(c.sum(axis=1, keepdims=True), 1e-300)
        out = {sp: x[:, INDEX[sp]] * 1e6 for sp in exp.measured}
    else:
        out = {sp: np.full(len(t_data), np.nan) for sp in exp.measured}
    cov = sol.y[N * na:].T.reshape(-1, N, ns) if coverage and ok else None
    return Prediction(outlet_ppm=out, converged=bool(ok), solves=evals[0], coverage=cov)


def _tanks_jacobian(y, N, na, ns, rates, nu_a, nu_s, Q, Vg, Vc, omega) -> np.ndarray:
    """The Jacobian of the tanks' right-hand side (:func:`_timed`): flow terms exactly, the
    reaction terms by forward differences of every tank's own state, all perturbations in one
    vectorised ``rates`` call (a tank's rates depend on its own state only). Steps: sqrt(eps)
    times the value, at least 1e-6 of the largest gas concentration (gas) or 1e-4 (coverage),
    taken downwards for a coverage above 1/2 (rates clip coverage at 1)."""
    m = na + ns
    c, th = y[:N * na].reshape(N, na), y[N * na:].reshape(N, ns)
    X = np.concatenate([c, th], axis=1)                         # [N, m] local states
    floor = np.concatenate([np.full(na, 1e-6 * max(float(np.abs(c).max()), 1e-12)),
                            np.full(ns, 1e-4)])
    h = 1.5e-8 * np.maximum(np.abs(X), floor)
    h[:, na:] = np.where(th > 0.5, -h[:, na:], h[:, na:])
    P = np.repeat(X[:, None, :], m, axis=1)                     # [N, m(perturbed var), m]
    P[:, np.arange(m), np.arange(m)] += h
    rows = np.concatenate([X, P.reshape(N * m, m)])
    r = rates(rows[:, :na], rows[:, na:])
    r0, rp = r[:N], r[N:].reshape(N, m, -1)
    dr = (rp - r0[:, None, :]) / h[:, :, None]                  # [N, var, nrxn]
    dgas = dr @ nu_a                                            # [N, var, na]
    dsite = dr @ nu_s                                           # [N, var, ns]
    n = N * m
    J = np.zeros((n, n))
    for k in range(N):
        g = slice(k * na, (k + 1) * na)
        s = slice(N * na + k * ns, N * na + (k + 1) * ns)
        J[g, g] = (Vc * dgas[k, :na].T - Q * np.eye(na)) / Vg
        J[g, s] = Vc * dgas[k, na:].T / Vg
        J[s, g] = dsite[k, :na].T / omega[:, None]
        J[s, s] = dsite[k, na:].T / omega[:, None]
        if k > 0:
            J[g, slice((k - 1) * na, k * na)] = Q / Vg * np.eye(na)
    return J
