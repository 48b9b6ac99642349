"""Evaluate a duty-cycle case: engine-out exhaust, dosing and the train at every mode, then the
cycle-weighted emissions and the limits.

This is the orchestrator the CLI, the TUI and scripts call (:func:`run_case`); it returns a
:class:`CycleResult` with named, unit-carrying values, ``to_json()`` for the ``aftertreat.run/1``
contract and ``to_pandas()`` tables.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from . import emissions
from .errors import InputError
from .output import brick_dict, stream_dict
from .species import ELEMENT_MATRIX, INDEX, NOX, SPECIES
from .stream import Stream
from .train import TrainSolution
from .units import NORMAL_CONDITIONS, ZERO_C_K

__all__ = ["ModeResult", "CycleResult", "ModeInlet", "run_case", "mode_inlets",
           "engine_out_stream"]


@dataclass
class ModeResult:
    """One mode of the cycle: what the engine makes, what is dosed, what leaves the train."""
    name: str
    weight: float
    power_kW: float
    cap_exempt: bool
    engine_out: Stream
    reagent: np.ndarray                # dosed reagent [mol/s over SPECIES] (gas products)
    inlet: Stream                      # at the first brick (engine-out + reagent, mixed)
    solution: TrainSolution
    air_CO2_mol_s: float = 0.0         # CO2 that came in with the intake air

    @property
    def outlet(self) -> Stream:
        return self.solution.outlet

    @property
    def anr(self) -> float:
        """NH3/NOx at the first brick (:func:`aftertreat.dosing.anr`)."""
        from .dosing import anr
        return anr(self.inlet)

    def summary(self) -> dict:
        """The per-mode figures shared by the table and the JSON object (units in the keys)."""
        s = self.solution
        return {"weight": self.weight, "power_kW": self.power_kW,
                "exhaust_kg_h": self.inlet.mass_flow * 3600.0, "T_in_C": self.inlet.T - ZERO_C_K,
                "T_out_C": self.outlet.T - ZERO_C_K, "GHSV_per_h": s.ghsv_per_h(),
                "dp_kPa": s.dp_Pa / 1e3, "ANR": self.anr, "NOx_conversion": s.nox_conversion(),
                "converged": s.converged, "element_balance_error": self.element_balance_error()}

    def element_balance_error(self) -> float:
        """max |atoms(outlet) - atoms(engine-out + reagent)| / max atoms in [-]."""
        a_in = ELEMENT_MATRIX @ (self.engine_out.F + self.reagent)
        a_out = ELEMENT_MATRIX @ self.outlet.F
        return float(np.max(np.abs(a_out - a_in)) / np.max(a_in))

    def emissions(self, stream: Stream | None = None):
        """Mass flows [g/h] and dry ppm of a stream (default the train outlet)."""
        return stream_emissions(self.outlet if stream is None else stream, self.air_CO2_mol_s)


def stream_emissions(s: Stream, air_CO2_mol_s: float = 0.0) -> dict:
    """Mass flows [g/h] (NOx as NO2; CO2 net of the intake air's) and dry ppm of a stream."""
    F = s.F
    x_h2o = F[INDEX["H2O"]] / F.sum()
    dry = s.ppm_dry()
    co2 = max(F[INDEX["CO2"]] - air_CO2_mol_s, 0.0)
    return {"NOx_g_h": emissions.nox_g_h(F[INDEX["NO"]], F[INDEX["NO2"]]),
            "N2O_g_h": emissions.mass_flow_g_h(F[INDEX["N2O"]], "N2O"),
            "NH3_g_h": emissions.mass_flow_g_h(F[INDEX["NH3"]], "NH3"),
            "CO2_g_h": emissions.mass_flow_g_h(co2, "CO2"),
            "ppmvd": {sp: dry[sp] for sp in ("NO", "NO2", "NH3", "N2O")} |
                     {"NOx": sum(dry[s] for s in NOX)},
            "O2_dry_pct": dry["O2"] * 1e-4, "H2O_pct": x_h2o * 100.0}


def mode_emissions(name, weight, power_kW, cap_exempt, stream: Stream, air_CO2_mol_s=0.0):
    """A :class:`aftertreat.limits.ModeEmissions` for one stream of one mode."""
    from .limits import ModeEmissions
    e = stream_emissions(stream, air_CO2_mol_s)
    return ModeEmissions(name=name, weight=weight, power_kW=power_kW, cap_exempt=cap_exempt,
                         NOx_g_h=e["NOx_g_h"], N2O_g_h=e["N2O_g_h"], NH3_g_h=e["NH3_g_h"],
                         CO2_g_h=e["CO2_g_h"], ppmvd=e["ppmvd"], O2_dry_pct=e["O2_dry_pct"],
                         x_H2O=e["H2O_pct"] / 100.0)


@dataclass
class CycleResult:
    """Results of a duty-cycle case."""
    case: object
    modes: list[ModeResult]
    cycle: dict
    engine_out_cycle: dict
    limits: list            # aftertreat.limits.LimitCheck, one per check
    seconds: float
    warnings: list[str] = field(default_factory=list)
    train: object = None               # the train solved (the case's, or a what-if/sizing one)

    @property
    def passed(self) -> bool:
        return all(r.passed for r in self.limits) and self.converged

    @property
    def converged(self) -> bool:
        return all(m.solution.converged for m in self.modes)

    def mode_table(self):
        """One row per mode, units in the column names."""
        import pandas as pd
        rows = []
        for m in self.modes:
            e = m.emissions()
            rows.append({"mode": m.name, **m.summary(),
                         "NOx_in_ppm_wet": m.inlet.ppm("NOx"),
                         "NOx_out_ppm_wet": m.outlet.ppm("NOx"),
                         "NH3_in_ppm_wet": m.inlet.ppm("NH3"),
                         "NH3_out_ppm_wet": m.outlet.ppm("NH3"),
                         "N2O_out_ppm_wet": m.outlet.ppm("N2O"),
                         "NOx_out_ppmvd": e["ppmvd"]["NOx"], "NH3_out_ppmvd": e["ppmvd"]["NH3"],
                         "O2_dry_pct": e["O2_dry_pct"], "H2O_pct": e["H2O_pct"],
                         "NOx_g_h": e["NOx_g_h"], "N2O_g_h": e["N2O_g_h"],
                         "NH3_g_h": e["NH3_g_h"], "CO2_g_h": e["CO2_g_h"]})
        return pd.DataFrame(rows)

    def limit_table(self):
        import pandas as pd
        return pd.DataFrame([r.to_dict() for r in self.limits])

    def to_pandas(self):
        """The per-mode table (:meth:`mode_table`)."""
        return self.mode_table()

    @property
    def dp_kPa_max(self) -> float:
        """Back-pressure of the train at its worst mode [kPa]."""
        return max(m.solution.dp_Pa for m in self.modes) / 1e3

    def train_n2o(self) -> dict:
        """The N2O the train made over the cycle and what it does to the greenhouse-gas total
        (cycle values, GWP100 of the case's set): outlet minus engine-out."""
        c, e = self.cycle, self.engine_out_cycle
        g0, g1 = e["GHG_CO2e_g_kWh"], c["GHG_CO2e_g_kWh"]
        return {"N2O_made_g_kWh": c["N2O_g_kWh"] - e["N2O_g_kWh"],
                "N2O_made_CO2e_g_kWh": c["N2O_CO2e_g_kWh"] - e["N2O_CO2e_g_kWh"],
                "GHG_CO2e_engine_out_g_kWh": g0, "GHG_CO2e_g_kWh": g1,
                "GHG_CO2e_rise_pct": 100.0 * (g1 / g0 - 1.0) if g0 > 0 else None,
                "GWP_set": self.case.gwp_set}

    def to_json(self) -> dict:
        """The ``aftertreat.run/1`` object (docs/conventions.md)."""
        modes = []
        for m in self.modes:
            s = m.solution
            modes.append({
                "name": m.name, **m.summary(),
                "engine_out": stream_dict(m.engine_out),
                "dosed": _reagent_dict(m.reagent),
                "outlet": stream_dict(m.outlet),
                "bricks": [brick_dict(b) for b in s.bricks],
                "warnings": s.warnings})
        return {"schema": "aftertreat.run/1", "case": self.case.title, "file": self.case.file,
                "overrides": list(getattr(self.case, "overrides", [])),
                "cycle_name": self.case.cycle.name, "modes": modes, "cycle": self.cycle,
                "engine_out_cycle": self.engine_out_cycle, "train_N2O": self.train_n2o(),
                "limits": [r.to_dict() for r in self.limits],
                "pass": self.passed, "converged": self.converged,
                "GHSV_normal_conditions": NORMAL_CONDITIONS, "GWP_set": self.case.gwp_set,
                "warnings": self.warnings, "solve_s": self.seconds}


def _reagent_dict(F: np.ndarray) -> dict:
    """STREAM object of the dosed reagent (gas products of the reagent; ppm not meaningful)."""
    return {"mol_s": {sp: float(F[INDEX[sp]]) for sp in SPECIES},
            "ppm_wet": {sp: 0.0 for sp in SPECIES}, "ppmvd": {sp: 0.0 for sp in SPECIES}}


def engine_out_stream(case, i: int):
    """Engine-out exhaust of mode ``i`` and the CO2 that came with the intake air [mol/s]."""
    from . import combustion
    from .cycle import mode_power_fraction
    e = case.engine_out
    mode = case.cycle.modes[i]
    power = case.engine.rated_power_kW * mode_power_fraction(mode)
    nox = e["NOx_ppm"][i]
    if e["method"] == "combustion":
        minor = {"NO": nox * (1 - e["NO2_fraction"][i]), "NO2": nox * e["NO2_fraction"][i],
                 "NH3": e["NH3_ppm"][i], "N2O": e["N2O_ppm"][i], "H2": e["H2_ppm"][i]}
        blend = combustion.FuelBlend(energy_shares=case.fuel["shares"],
                                     cracked_H2=case.fuel["cracked_H2"])
        fuel_kW = None
        if power <= 0.0:
            # idle: no brake power to divide by an efficiency; the fuel burned is a share of
            # the fuel at the highest-power mode (engine_out.idle_fuel_pct)
            top = max(range(case.n_modes),
                      key=lambda k: mode_power_fraction(case.cycle.modes[k]))
            rated_fuel_kW = (case.engine.rated_power_kW
                             * mode_power_fraction(case.cycle.modes[top])
                             / e["brake_efficiency"][top])
            fuel_kW = e["idle_fuel_pct"] / 100.0 * rated_fuel_kW
        try:
            res = combustion.combustion(power, e["brake_efficiency"][i], blend, e["lambda"][i],
                                        T_K=e["T_K"][i], p_Pa=e["p_Pa"][i],
                                        intake_humidity_g_kg=e["intake_humidity_g_kg"][i],
                                        minor=minor, fuel_kW=fuel_kW)
        except InputError as exc:
            raise InputError(f"mode '{mode.name}': {exc.expected}", key="engine_out",
                             value=exc.value, file=case.file) from None
        air_co2 = res.air_dry_mol_s * combustion.dry_air()[INDEX["CO2"]]
        return power, res.exhaust, air_co2
    try:
        stream = combustion.exhaust_from_measurements(
            T_K=e["T_K"][i], p_Pa=e["p_Pa"][i], mass_flow_kg_s=e["mass_flow_kg_s"][i],
            H2O_pct=e["H2O_pct"][i], O2_pct=e["O2_pct"][i], NOx_ppm=nox,
            NO2_fraction=e["NO2_fraction"][i], NH3_ppm=e["NH3_ppm"][i], N2O_ppm=e["N2O_ppm"][i],
            H2_ppm=e["H2_ppm"][i], basis=e["basis"])
    except InputError as exc:
        key = f"engine_out.{exc.key}" if exc.key in e else "engine_out"
        raise InputError(f"mode '{mode.name}': {exc.expected}", key=key,
                         value=exc.value, file=case.file) from None
    return power, stream, 0.0


def _check_reference_o2(case, i: int, eo: Stream) -> None:
    """Refuse, before any solving, a mode whose dry O2 makes the reference-O2 correction of one
    of the case's limit rows diverge (O2_dry at or above the set's O2 of air)."""
    o2_dry = float(eo.ppm_dry()["O2"]) * 1e-4
    for ls in case.limit_sets:
        if any(r.o2_ref_pct is not None for r in ls.rows) and o2_dry >= ls.o2_air_pct:
            e = case.engine_out
            key = "engine_out.O2_pct" if e["method"] != "combustion" else "engine_out.lambda"
            raise InputError(
                f"mode '{case.cycle.modes[i].name}': the exhaust holds {o2_dry:.2f} % O2 dry, "
                f"at or above the {ls.o2_air_pct:g} % of air that limit set "
                f"'{ls.name}' corrects to its reference O2 with (the correction diverges); "
                "expected a lower O2 or more water on a wet basis", key=key,
                value=_mode_value(e, key.split(".")[1], i), file=case.file)


def _mode_value(e: dict, key: str, i: int):
    v = e.get(key)
    try:
        return float(v[i])
    except (TypeError, IndexError, KeyError):
        return v


@dataclass(frozen=True)
class ModeInlet:
    """What enters the train at one mode: the brake power, the engine-out exhaust, the CO2 the
    intake air brought [mol/s] (not emitted by the engine), the train inlet (engine-out plus
    the dosed reagent's gas products) and the dosed reagent [mol/s per species]."""
    power_kW: float
    engine_out: Stream
    air_CO2_mol_s: float
    inlet: Stream
    reagent: np.ndarray


def mode_inlets(case) -> list[ModeInlet]:
    """:class:`ModeInlet` of every mode. Independent of the train, so sizing computes it
    once."""
    from . import dosing
    out = []
    d = case.dosing
    for i in range(case.n_modes):
        power, eo, air_co2 = engine_out_stream(case, i)
        _check_reference_o2(case, i, eo)
        inlet, reagent = dosing.dose(eo, d["method"], float(d["ANR"][i]),
                                     urea_mass_fraction=d["urea_mass_fraction"])
        out.append(ModeInlet(power, eo, air_co2, inlet, reagent))
    return out


def mode_labels(case, powers_kW) -> list[str]:
    """The name each mode is shown and keyed by. ISO mode numbers ("1", "2" ...) are shown by
    their load ("75 %"); when two modes share a load, or a load label would repeat another
    mode's name, every numbered mode keeps its number too ("3 (50 %)"), so labels stay unique."""
    names = [m.name for m in case.cycle.modes]
    load = [f"{100.0 * p / case.engine.rated_power_kW:.0f} %" for p in powers_kW]
    numbered = [n.strip().isdigit() for n in names]
    labels = [load[i] if numbered[i] else n for i, n in enumerate(names)]
    if len(set(labels)) < len(labels):
        labels = [f"{n} ({load[i]})" if numbered[i] else n for i, n in enumerate(names)]
    if len(set(labels)) < len(labels):
        raise InputError("expected unique mode names", key="cycle.mode", value=names,
                         file=case.file)
    return labels


def engine_out_cycle(case, inlets=None) -> dict:
    """Cycle values of the engine-out exhaust (no train): :func:`aftertreat.limits.
    cycle_values` of every mode's engine-out stream, with the case's GWP set."""
    from . import limits
    inlets = mode_inlets(case) if inlets is None else inlets
    heads = [mode_emissions(m.name, m.weight, x.power_kW, bool(getattr(m, "cap_exempt", False)),
                            x.engine_out, x.air_CO2_mol_s) for m, x in zip(case.cycle.modes, inlets)]
    return limits.cycle_values(heads, gwp_set=case.gwp_set)


#: NH3 slip [ppmvd] above which a case without any NH3 limit is warned about: twice the odour
#: threshold of about 5 ppm (common practice: SCR slip is usually held below 10 ppm)
NH3_UNLIMITED_WARN_PPMVD = 10.0


def run_case(case, *, progress=None, train=None, guesses=None, inlets=None,
             settings=None) -> CycleResult:
    """Evaluate every mode of ``case`` (a :class:`~aftertreat.cyclecase.RunCase`).

    ``progress(i, n, name)`` is called before each mode. Modes are solved in cycle order, each
    warm-started from the previous mode's solution, or from ``guesses[i]`` (a previous result's
    :class:`~aftertreat.train.TrainSolution` of the same mode on the same grid) when given.
    ``train`` replaces the case's train (what-ifs, sizing); ``inlets`` reuses
    :func:`mode_inlets`; ``settings`` (:class:`~aftertreat.reactor.SolverSettings`) loosens or
    tightens the solver, e.g. for a coarse sizing search.
    """
    from . import limits
    t0 = time.perf_counter()
    train = case.train if train is None else train
    inlets = mode_inlets(case) if inlets is None else inlets
    results: list[ModeResult] = []
    labels = mode_labels(case, [x.power_kW for x in inlets])
    guess = None
    n = case.n_modes
    for i, mode in enumerate(case.cycle.modes):
        if progress:
            progress(i, n, mode.name)
        x = inlets[i]
        power, eo, air_co2, inlet, reagent = (x.power_kW, x.engine_out, x.air_CO2_mol_s,
                                              x.inlet, x.reagent)
        g = guesses[i] if guesses is not None else guess
        try:
            sol = train.solve(inlet, guess=g, settings=settings)
        except InputError as exc:
            raise InputError(f"mode '{mode.name}': {exc.expected}", key=exc.key, value=exc.value,
                             file=exc.file or case.file) from None
        guess = sol if sol.converged else guess
        results.append(ModeResult(name=labels[i], weight=mode.weight, power_kW=power,
                                  cap_exempt=bool(getattr(mode, "cap_exempt", False)),
                                  engine_out=eo, reagent=reagent, inlet=inlet, solution=sol,
                                  air_CO2_mol_s=air_co2))
    tail = [_mode_emissions(m, limits) for m in results]
    head = [_mode_emissions(m, limits, m.engine_out) for m in results]
    cyc = limits.cycle_values(tail, gwp_set=case.gwp_set)
    cyc["NH3_slip_ppm_wet_max"] = max(m.outlet.ppm("NH3") for m in results)
    cyc["NH3_slip_ppmvd_max"] = max(m.emissions()["ppmvd"]["NH3"] for m in results)
    eo_cyc = limits.cycle_values(head, gwp_set=case.gwp_set)
    rows = []
    for ls in case.limit_sets:
        rows += limits.evaluate(ls, tail, rated_speed_rpm=case.engine.rated_speed_rpm,
                                gwp_set=case.gwp_set, rated_power_kW=case.engine.rated_power_kW)
    warnings = [f"mode '{m.name}': {w}" for m in results for w in m.solution.warnings]
    for m in results:
        if not m.solution.converged:
            warnings.append(f"mode '{m.name}': the solver did not converge; its numbers are "
                            "flagged")
    if not any(r.quantity.startswith("NH3") for r in rows) \
            and cyc["NH3_slip_ppmvd_max"] > NH3_UNLIMITED_WARN_PPMVD:
        warnings.append(
            f"no NH3 limit in the case, and the NH3 slip reaches {cyc['NH3_slip_ppmvd_max']:.0f} "
            "ppmvd (odour near 5 ppm, irritation near 30 ppm): add an NH3 limit "
            "([[limits.custom]] with quantity NH3_ppmvd)")
    g0, g1 = eo_cyc["GHG_CO2e_g_kWh"], cyc["GHG_CO2e_g_kWh"]
    if g0 > 0 and g1 > g0 * (1.0 + case.co2e_rise_warn_pct / 100.0):
        warnings.append(
            f"the train raises the greenhouse-gas emission from {g0:.0f} to {g1:.0f} g CO2e/kWh "
            f"(+{(g1 / g0 - 1) * 100:.0f} %, above the {case.co2e_rise_warn_pct:g} % of "
            f"limits.co2e_rise_warn_pct): N2O made in the train, "
            f"{cyc['N2O_g_kWh'] - eo_cyc['N2O_g_kWh']:+.2f} g/kWh "
            f"({(cyc['N2O_CO2e_g_kWh'] - eo_cyc['N2O_CO2e_g_kWh']):+.0f} g CO2e/kWh, "
            f"GWP100 {case.gwp_set})")
    idle = [m.name for m in results if m.power_kW <= 0.0]
    e = case.engine_out
    if idle and e["method"] == "combustion":
        warnings.append(
            "idle mode(s) " + ", ".join(f"'{n}'" for n in idle) + ": exhaust from a fuel flow of "
            f"{e['idle_fuel_pct']:g} % of the highest-power mode's ("
            + ("engine_out.idle_fuel_pct" if e.get("idle_fuel_pct_given") else
               "default, from memory: give engine_out.idle_fuel_pct") + "); no g/kWh at idle, "
            "its g/h counts in the weighted cycle values")
    return CycleResult(case=case, modes=results, cycle=cyc, engine_out_cycle=eo_cyc,
                       limits=rows, seconds=time.perf_counter() - t0, warnings=warnings,
                       train=train)


def _mode_emissions(m: ModeResult, limits, stream: Stream | None = None):
    return mode_emissions(m.name, m.weight, m.power_kW, m.cap_exempt,
                          m.outlet if stream is None else stream, m.air_CO2_mol_s)
