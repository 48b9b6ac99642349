"""Independent kinetic-limit reference: NH3 storage + standard + fast SCR as a Cantera surface
mechanism, solved as a chain of isothermal, isobaric stirred reactors (CSTRs) in series.

This module does not import ``aftertreat``: it takes plain numbers (rate constants in the
project's units, site capacity, reacting volume, flow) and builds everything else from Cantera,
so that it is an independent check of the project's steady brick solver. It is shared by
``tests/validation/test_cantera_crosscheck.py`` and ``benchmarks/steady_point.py`` (which adds
this folder to ``sys.path``).

Chemistry (project form, per m^3 of catalytic layer; c in mol/m^3 of gas, theta the NH3 coverage
of one storage site of capacity Omega [mol/m^3 of layer])::

    1  NH3 -> NH3(S)                         r1 = k1 c_NH3 (1 - theta)        k1 [1/s]
    2  NH3(S) -> NH3                         r2 = k2 theta                     k2 [mol/(m^3 s)]
    3  4 NH3(S) + 4 NO + O2 -> 4 N2 + 6 H2O  r3 = k3 c_NO theta                k3 [1/s]
    4  2 NH3(S) + NO + NO2 -> 2 N2 + 3 H2O   r4 = k4 c_NO c_NO2 theta          k4 [m^3/(mol s)]

with k = k_ref exp(-E/R (1/T - 1/T_ref)), and the coverage balance
Omega dtheta/dt = r1 - r2 - 4 r3 - 2 r4.

Cantera form. Cantera's surface kinetics works in kmol, m^2 and m^3: the rate of progress of a
surface reaction is q [kmol/(m^2 s)] = k prod C_gas[kmol/m^3]^order prod C_surf[kmol/m^2]^order,
with C_surf = Gamma theta for a species of size 1 on a surface of site density Gamma [kmol/m^2].
We let **one m^2 of Cantera surface stand for one m^3 of catalytic layer**: the surface area of a
reactor equals its catalytic-layer volume (numerically), and

    Gamma = 1e-3 Omega                     [kmol/m^2]  <- [mol/m^3 layer]
    q     = 1e-3 r                         [kmol/(m^2 s)] <- [mol/(m^3 s)]
    C_gas = 1e-3 c                         [kmol/m^3]  <- [mol/m^3]

The Cantera equations are written with the *same stoichiometry* as the project's, one Cantera
event = one project reaction extent, and explicit reaction orders (Cantera's ``orders`` field
overrides the default "order = stoichiometric coefficient"; O2 gets order 0), so q = 1e-3 r for
every reaction when

    1  NH3 + S => NH3(S)                             q1 = K1 C_NH3 C_S,  C_S = Gamma (1 - theta)
       1e-3 k1 c (1-theta) = K1 (1e-3 c) Gamma (1-theta)            => K1 = k1 / Gamma   [m^3/(kmol s)]
    2  NH3(S) => NH3 + S                             q2 = K2 C_NH3(S) = K2 Gamma theta
       1e-3 k2 theta = K2 Gamma theta                               => K2 = 1e-3 k2 / Gamma = k2 / Omega  [1/s]
    3  4 NH3(S) + 4 NO + O2 => 4 N2 + 6 H2O + 4 S    orders {NO: 1, NH3(S): 1, O2: 0}
       q3 = K3 C_NO C_NH3(S):  1e-3 k3 c_NO theta = K3 (1e-3 c_NO) Gamma theta  => K3 = k3 / Gamma  [m^3/(kmol s)]
    4  2 NH3(S) + NO + NO2 => 2 N2 + 3 H2O + 2 S     orders {NO: 1, NO2: 1, NH3(S): 1}
       q4 = K4 C_NO C_NO2 C_NH3(S):  1e-3 k4 c c' theta = K4 1e-6 c c' Gamma theta
                                                                    => K4 = 1e3 k4 / Gamma  [m^6/(kmol^2 s)]

The temperature dependence is carried over exactly: K(T) = K_ref exp(-E/R (1/T - 1/T_ref)) is
written as Cantera's Arrhenius A exp(-Ea/(R T)) with A = K_ref exp(E/(R T_ref)), Ea = E. (The
reactors here are isothermal, so only K at the inlet temperature matters.)

With this mapping the Cantera coverage balance, Gamma dtheta/dt = q1 - q2 - 4 q3 - 2 q4, is the
project's divided by 1e3, and the Cantera gas source per reactor, area * q * nu, equals the
project's layer volume * r * nu, so the two models are the same equations; they differ only in
their discretisation along the channel (a CSTR chain here, a log-mean finite-volume scheme there)
and in the solver.

Reactor chain: each stirred reactor holds 1/n of the channel gas volume and 1/n of the surface
(= layer volume), is isothermal (energy off) and isobaric (a pressure controller on the outlet),
and is fed by a mass-flow controller from a reservoir holding the previous reactor's outlet; it is
advanced in time to steady state (warm-started from the previous reactor's state). A chain of n
CSTRs approximates plug flow with an O(1/n) error: for a first-order loss with Damkoehler number
Da, ln(out/in) = -n ln(1 + Da/n) = -Da + Da^2/(2n) + O(n^-2). :func:`solve_chain_extrapolated`
removes the leading term by Richardson extrapolation from n and 2n (plug = 2 y_2n - y_n + O(n^-2)).
The gas volume of each reactor only sets the transient, not the steady state.

Reference: the CSTR-chain construction follows Cantera's own "surface reactor chain" example
(cantera.org, examples/python/reactors; from memory); the kinetics are those of the project's
catalyst file format (Olsson-type mass-action global kinetics).
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

import cantera as ct

#: Gas species (Cantera / GRI-Mech 3.0 names) carried by the Cantera model, in the project's order.
GAS_SPECIES = ("NO", "NO2", "NH3", "N2O", "O2", "H2O", "N2", "H2", "CO2", "AR")
#: Cantera's gas constant per mole [J/(mol K)] (CODATA 2018 exact value, as Cantera uses).
R_MOL = ct.gas_constant / 1e3


@dataclass(frozen=True)
class Rate:
    """A project-form rate constant: k = k_ref exp(-E/R (1/T - 1/T_ref)), SI project units."""
    k_ref: float
    E: float            # [J/mol]
    T_ref: float        # [K]

    def at(self, T: float) -> float:
        return self.k_ref * np.exp(-self.E / R_MOL * (1.0 / T - 1.0 / self.T_ref))


@dataclass(frozen=True)
class KineticLimitCase:
    """Everything the Cantera reference needs, in the project's units.

    ``adsorption`` k1 [1/s], ``desorption`` k2 [mol/(m^3 s)], ``standard`` k3 [1/s],
    ``fast`` k4 [m^3/(mol s)]; ``capacity`` Omega [mol/m^3 of layer]; ``layer_volume`` [m^3] the
    catalytic-layer volume of the whole brick (f V); ``gas_volume`` [m^3] (transient only);
    ``X_in`` inlet mole fractions by Cantera name; ``mol_s`` total inlet molar flow [mol/s].
    """
    adsorption: Rate
    desorption: Rate
    standard: Rate
    fast: Rate
    capacity: float
    layer_volume: float
    gas_volume: float
    T: float
    p: float
    X_in: dict = field(default_factory=dict)
    mol_s: float = 1.0


# ----------------------------------------------------------------------------------------------
# The cross-check chemistry as a project catalyst table (a plain dict, exactly as a TOML file would
# read), shared by the validation test and the benchmark. Values of catalysts/cu_chabazite.toml
# (fitted / from memory there) with the Temkin factor set to zero: plain Arrhenius desorption,
# exactly expressible in Cantera.
# ----------------------------------------------------------------------------------------------
_PROV = "fitted: test chemistry for the Cantera cross-check (values of cu_chabazite.toml)"
#: the storage site: capacity Omega [mol/m^3 of layer]
SITE = {"name": "S1", "capacity_mol_m3": 1500.0, "provenance": {"capacity_mol_m3": _PROV}}
#: name -> (equation, k_ref [SI project units], E [kJ/mol], T_ref [degC], orders, coverage,
#: free_sites); every reaction uses the ``mass_action`` form
REACTIONS = {
    "adsorption": ("NH3 -> NH3(S1)", 5000.0, 0.0, 300.0, {"NH3": 1}, {}, {"S1": 1}),
    "desorption": ("NH3(S1) -> NH3", 0.0908, 150.0, 300.0, {}, {"S1": 1}, {}),
    "standard": ("4 NH3(S1) + 4 NO + O2 -> 4 N2 + 6 H2O", 300.0, 65.0, 250.0,
                 {"NO": 1}, {"S1": 1}, {}),
    "fast": ("2 NH3(S1) + NO + NO2 -> 2 N2 + 3 H2O", 2.0e5, 50.0, 250.0,
             {"NO": 1, "NO2": 1}, {"S1": 1}, {}),
}


def catalyst_table() -> dict:
    """The chemistry above as a catalyst table for ``aftertreat.catalyst.parse_catalyst``."""
    rx = []
    for name, (eq, k, E, Tref, orders, cov, free) in REACTIONS.items():
        spec = {"name": name, "equation": eq, "form": "mass_action", "k_ref": k, "E_kJ_mol": E,
                "T_ref_C": Tref}
        for key, val in (("orders", orders), ("coverage", cov), ("free_sites", free)):
            if val:
                spec[key] = val
        spec["provenance"] = {p: _PROV for p in ("k_ref", "E_kJ_mol", "orders", "coverage",
                                                 "free_sites") if p in spec}
        rx.append(spec)
    return {
        "name": "kinetic-limit cross-check chemistry", "role": "SCR", "valid_T_C": [150.0, 600.0],
        "source": [{"key": "Olsson2008", "authors": "L. Olsson, H. Sjovall, R.J. Blint",
                    "year": 2008, "title": "A kinetic model for ammonia selective catalytic "
                    "reduction over Cu-ZSM-5", "journal": "Appl. Catal. B 81 (2008) 203-217",
                    "use": "mass-action global template"}],
        "pores": {"porosity": 0.4, "tortuosity": 3.0, "pore_diameter_nm": 200.0,
                  "provenance": {"porosity": _PROV, "tortuosity": _PROV,
                                 "pore_diameter_nm": _PROV}},
        "site": [dict(SITE)],
        "reaction": rx,
    }


def case_from(layer_volume: float, gas_volume: float, T: float, p: float, X_in: dict,
              mol_s: float) -> KineticLimitCase:
    """The Cantera inputs for the table above, taken from the raw constants (not from a parsed
    project catalyst): E kJ/mol -> J/mol, T_ref degC -> K."""
    def rate(name):
        _, k, E, Tref, *_ = REACTIONS[name]
        return Rate(k_ref=k, E=E * 1e3, T_ref=Tref + 273.15)
    return KineticLimitCase(
        adsorption=rate("adsorption"), desorption=rate("desorption"),
        standard=rate("standard"), fast=rate("fast"), capacity=SITE["capacity_mol_m3"],
        layer_volume=layer_volume, gas_volume=gas_volume, T=T, p=p, X_in=dict(X_in),
        mol_s=mol_s)


def mechanism_yaml(case: KineticLimitCase) -> str:
    """The Cantera YAML text of the gas + surface phases (see the module docstring)."""
    gamma = 1e-3 * case.capacity                                   # [kmol/m^2]

    def arr(K_ref, rate: Rate):
        # K(T) = K_ref exp(-E/R (1/T - 1/T_ref)) = A exp(-E/(R T)),  A = K_ref exp(E/(R T_ref))
        return f"{{A: {K_ref * np.exp(rate.E / (R_MOL * rate.T_ref)):.17g}, b: 0.0, Ea: {rate.E:.17g}}}"

    K1 = arr(case.adsorption.k_ref / gamma, case.adsorption)        # m^3/(kmol s)
    K2 = arr(case.desorption.k_ref * 1e-3 / gamma, case.desorption)  # 1/s
    K3 = arr(case.standard.k_ref / gamma, case.standard)            # m^3/(kmol s)
    K4 = arr(case.fast.k_ref * 1e3 / gamma, case.fast)              # m^6/(kmol^2 s)
    species = ", ".join(GAS_SPECIES)
    return f"""
units: {{length: m, quantity: kmol, activation-energy: J/mol}}
phases:
- name: gas
  thermo: ideal-gas
  elements: [O, H, C, N, Ar]
  species:
  - gri30.yaml/species: [{species}]
  kinetics: none
  state: {{T: {case.T}, P: {case.p}, X: {{N2: 1.0}}}}
- name: scr_surface
  thermo: ideal-surface
  adjacent-phases: [gas]
  elements: [O, H, N, Cu]
  species: [S, NH3(S)]
  site-density: {gamma:.17g}
  kinetics: surface
  reactions: all
  state: {{T: {case.T}, P: {case.p}, coverages: {{S: 1.0}}}}
species:
- name: S
  composition: {{Cu: 1}}
  thermo: {{model: constant-cp, T0: 298.15, h0: 0.0, s0: 0.0, cp0: 0.0}}
- name: NH3(S)
  composition: {{Cu: 1, N: 1, H: 3}}
  thermo: {{model: constant-cp, T0: 298.15, h0: 0.0, s0: 0.0, cp0: 0.0}}
reactions:
- equation: NH3 + S => NH3(S)
  rate-constant: {K1}
  id: adsorption
- equation: NH3(S) => NH3 + S
  rate-constant: {K2}
  id: desorption
- equation: 4 NH3(S) + 4 NO + O2 => 4 N2 + 6 H2O + 4 S
  rate-constant: {K3}
  orders: {{NO: 1, NH3(S): 1, O2: 0}}
  id: standard_scr
- equation: 2 NH3(S) + NO + NO2 => 2 N2 + 3 H2O + 2 S
  rate-constant: {K4}
  orders: {{NO: 1, NO2: 1, NH3(S): 1}}
  id: fast_scr
"""


def phases(text: str):
    """The gas ``Solution`` and surface ``Interface`` of a mechanism in the YAML form of
    :func:`mechanism_yaml`."""
    gas = ct.Solution(yaml=text, name="gas")
    surf = ct.Interface(yaml=text, name="scr_surface", adjacent=[gas])
    return gas, surf


def load(case: KineticLimitCase):
    """One-time setup: the gas ``Solution`` and surface ``Interface`` of ``case``."""
    return phases(mechanism_yaml(case))


@dataclass
class ChainResult:
    """Outlet of the CSTR chain and per-reactor profiles (mole fractions by Cantera name)."""
    n: int
    X_out: dict
    X: np.ndarray            # [n, nsp] outlet mole fractions of each reactor (GAS_SPECIES order)
    coverage: np.ndarray     # [n] NH3(S) coverage
    seconds: float
    max_surface_residual: float   # max |d theta/dt| at the final states [1/s]

    def ppm(self, name: str) -> float:
        return self.X_out[name] * 1e6


def _theta_rate(gas, surf, reactor, wall, case, k_nh3s) -> float:
    """|d theta/dt| [1/s] of the reactor's current state (net NH3(S) production / Gamma)."""
    gas.TPX = case.T, case.p, reactor.phase.X
    surf.TP = case.T, case.p
    surf.coverages = wall.coverages
    return abs(float(surf.net_production_rates[k_nh3s])) / surf.site_density


def solve_chain(case: KineticLimitCase, n: int, phases=None, *, rtol: float = 1e-9,
                atol: float = 1e-20, theta_tol: float = 1e-11) -> ChainResult:
    """Solve the chain of ``n`` isothermal CSTRs (see the module docstring).

    ``phases`` = ``load(case)`` may be passed to reuse a loaded mechanism (setup excluded from
    timing); the returned ``seconds`` cover the chain solution only.
    """
    gas, surf = phases if phases is not None else load(case)
    t0 = time.perf_counter()
    gas.TPX = case.T, case.p, case.X_in
    surf.TP = case.T, case.p
    surf.coverages = {"S": 1.0}
    mdot = case.mol_s * gas.mean_molecular_weight / 1e3          # [kg/s]
    # One Solution object shared by the reactors, as in Cantera's reactor-chain example: each
    # reactor keeps its own state vector and syncs the shared object when it evaluates.
    upstream = ct.Reservoir(gas, clone=False)
    reactor = ct.IdealGasReactor(gas, energy="off", volume=case.gas_volume / n, clone=False)
    wall = ct.ReactorSurface(surf, reactor, A=case.layer_volume / n, clone=False)
    downstream = ct.Reservoir(gas, clone=False)
    mfc = ct.MassFlowController(upstream, reactor, mdot=mdot)
    ct.PressureController(reactor, downstream, primary=mfc, K=1e-5)
    net = ct.ReactorNet([reactor])
    net.rtol, net.atol = rtol, atol
    idx = [gas.species_index(s) for s in GAS_SPECIES]
    k_nh3s = surf.kinetics_species_index("NH3(S)")
    k_cov = surf.species_index("NH3(S)")
    X = np.empty((n, len(GAS_SPECIES)))
    cov = np.empty(n)
    res = 0.0
    for j in range(n):
        if j:
            net.initial_time = 0.0      # restart the integrator from the current (warm) state
        net.advance_to_steady_state()
        # Cantera's steady test looks at the change of the whole state between steps, which
        # the slow coverage can pass too early; keep integrating (doubling the time) until the
        # coverage balance itself is below ``theta_tol`` [1/s].
        for _ in range(60):
            r_theta = _theta_rate(gas, surf, reactor, wall, case, k_nh3s)
            if r_theta < theta_tol:
                break
            net.advance(2.0 * net.time)
        else:
            raise RuntimeError(f"CSTR {j} of {n} did not reach steady state "
                               f"(|dtheta/dt| = {r_theta:.3g} 1/s)")
        res = max(res, r_theta)
        X[j] = reactor.phase.X[idx]
        cov[j] = wall.coverages[k_cov]
        gas.TPX = case.T, case.p, reactor.phase.X
        # next reactor: fed with this outlet (gas holds it now), started from this state
        upstream.syncState()
    X_out = {s: float(v) for s, v in zip(GAS_SPECIES, X[-1])}
    return ChainResult(n=n, X_out=X_out, X=X, coverage=cov,
                       seconds=time.perf_counter() - t0, max_surface_residual=res)


def solve_chain_extrapolated(case: KineticLimitCase, n: int, phases=None):
    """Richardson extrapolation of the chain to plug flow from n and 2n reactors.

    Returns ``(X_plug, coarse, fine)``: extrapolated outlet mole fractions (2 y_2n - y_n) and the
    two chain results; |y_2n - y_n| estimates the error of the n-reactor chain, and the
    remaining error of the extrapolation is O(n^-2).
    """
    coarse = solve_chain(case, n, phases)
    fine = solve_chain(case, 2 * n, phases)
    X_plug = {s: 2.0 * fine.X_out[s] - coarse.X_out[s] for s in GAS_SPECIES}
    return X_plug, coarse, fine
