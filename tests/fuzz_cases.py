"""Seeded generator of valid but unusual duty-cycle cases, and a checker of result invariants.

Everything a generated case contains is INVENTED fuzz data: it describes no real engine, ship,
site or product. The numbers are drawn to be plausible for ammonia-fuelled engines (NOx of
hundreds to thousands of ppm, unburned NH3 often several times the NOx, N2O up to hundreds of
ppm) and to combine options in unusual but valid ways (mixed catalyst trains, very coarse grids,
plate and extruded zeolites, custom cycles of one to six modes).

Public helpers:

* :func:`random_cycle_case` -- TOML text of a valid duty-cycle case, deterministic in its seed.
* :func:`reproduction_case` -- one fixed case (a D2 genset at about 210 C with a Cu-CHA extruded /
  Cu-CHA coated on 4 cells / Fe-zeolite plate train and no dosing) that exposed a solver bug.
* :func:`load_case_text` -- write case text to a temporary file and read it with the loader the
  command line uses (:func:`aftertreat.cyclecase.load_run_case`).
* :func:`check_case_inputs` -- physical consistency of a loaded case's per-mode exhaust (no solve).
* :func:`check_result` -- invariants of a :class:`aftertreat.evaluate.CycleResult`.
* :func:`run_all` -- load, run and check many seeds; optionally compare warm- and cold-started
  solves of every mode.

Run from the command line (not part of the default test suite; it solves every case)::

    python tests/fuzz_cases.py 0 60            # seeds 0..59, summary on stdout
    python tests/fuzz_cases.py 0 60 --json out.json
    python tests/fuzz_cases.py --repro
"""
from __future__ import annotations

import json
import math
import os
import random
import signal
import sys
import tempfile
import time
import traceback
import warnings
from contextlib import contextmanager
from pathlib import Path

import numpy as np

__all__ = ["random_cycle_case", "reproduction_case", "load_case_text", "check_case_inputs",
           "check_result", "run_all", "case_summary", "PROBLEM_KINDS", "SCR_CATALYSTS"]

# ------------------------------------------------------------------------------------------------
# What the generator draws from
# ------------------------------------------------------------------------------------------------

#: SCR catalysts shipped with the project and the substrate kinds each is put on (first = usual).
SCR_CATALYSTS: dict[str, tuple[str, ...]] = {
    "vanadia_extruded": ("extruded", "plate"),
    "cu_chabazite": ("coated", "extruded", "plate"),
    "fe_zeolite": ("coated", "plate", "extruded"),
}
#: Slip / oxidation catalysts that may close a train (always coated).
TAIL_CATALYSTS = ("asc_dual_layer", "platinum_alumina")

#: ISO cycles each application may use (idle-mode cycles are left out unless the case is drawn
#: with ``idle=True``: see :func:`_idle_free_cycles`).
_APP_CYCLES = {
    "marine propulsion": ("E2", "E3"),
    "auxiliary genset": ("D2",),
    "stationary engine": ("D1", "D2"),
    "gas turbine": ("D1",),
}
_MODE_NAMES = ("full ahead", "cruise", "slow steaming", "manoeuvring", "harbour", "hotel load",
               "peak", "base load", "part load", "night load", "standby", "shore approach",
               "dynamic positioning", "transit", "loading", "ballast", "eco", "boost")

#: Problem categories of :func:`check_result` (every problem string starts with one + ": ").
PROBLEM_KINDS = ("element balance", "negative internal flow", "non-finite internal flow",
                 "coverage out of range", "negative outlet flow", "NH3 made")

# rough fuel data for flow estimates only (the tool computes the exhaust itself):
# LHV [J/mol], O2 [mol/mol], products per mol fuel (N2, H2O, CO2)
_FUEL_EST = {"NH3": (316.8e3, 0.75, (0.5, 1.5, 0.0)),
             "H2": (241.8e3, 0.5, (0.0, 1.0, 0.0)),
             "natural_gas": (802.6e3, 2.0, (0.0, 2.0, 1.0)),
             "diesel": (592.5e3, 1.4625, (0.0, 0.925, 1.0))}
_M = {"N2": 28.013, "O2": 31.998, "H2O": 18.015, "CO2": 44.009}      # g/mol
_HUMIDITY = 10.71 / 18.015 * 28.96e-3                               # mol H2O per mol dry air
_CP_GAS = 30.0            # J/(mol K), a low estimate of the exhaust cp (so heat bounds are high)
_HEAT_PER_NH3 = 410e3     # J per mol NH3 converted, upper bound over the shipped reactions
_UREA_COOL_PER_NH3 = 260e3  # J per mol NH3 dosed as 32.5 % urea (evaporation + decomposition)
_GHSV_RANGE = (2500.0, 160000.0)   # drawn inside 2000..200000 1/h with margin for the estimate


def _idle_free_cycles() -> set[str]:
    """Shipped ISO cycles without a zero-power mode (read from the cycle data)."""
    from aftertreat.cycle import available_cycles, load_cycle
    return {k for k in available_cycles() if min(load_cycle(k).power_fractions()) > 0.0}


def _cycle_fractions(key: str) -> list[float]:
    from aftertreat.cycle import load_cycle
    return load_cycle(key).power_fractions()


def _catalyst_range_C(key: str) -> tuple[float, float]:
    """Validity range [degC] of a shipped catalyst (all layers of a layered one), from its file."""
    from aftertreat.catalyst import load_layers
    cats = [c for c, _ in load_layers(key)]
    return (max(c.valid_T[0] for c in cats) - 273.15, min(c.valid_T[1] for c in cats) - 273.15)


# ------------------------------------------------------------------------------------------------
# A minimal TOML writer (the values here are strings, numbers, booleans and flat lists)
# ------------------------------------------------------------------------------------------------

def _num(v: float, digits: int = 6) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if not math.isfinite(v):
        raise ValueError(f"not a finite number: {v}")
    s = f"{v:.{digits}g}"
    if "e" not in s and "." not in s:
        s += ".0"
    return s


def _val(v) -> str:
    if isinstance(v, str):
        return json.dumps(v)          # a JSON string is a valid TOML basic string here (ASCII)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_val(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_val(x)}" for k, x in v.items()) + " }"
    return _num(v)


def _table(lines: list[str], header: str | None, items: dict) -> None:
    if header is not None:
        lines.append("")
        lines.append(header)
    for k, v in items.items():
        if v is not None:
            lines.append(f"{k} = {_val(v)}")


# ------------------------------------------------------------------------------------------------
# Engine and exhaust estimates (only to size the bricks and draw consistent measured maps)
# ------------------------------------------------------------------------------------------------

def _exhaust_estimate(power_kW: float, eta: float, lam: float, shares: dict, cracked: bool):
    """(mol/s, wet H2O fraction, dry O2 fraction, molar mass g/mol) of complete combustion."""
    fuel_W = power_kW * 1e3 / eta
    n2 = h2o = co2 = o2_need = 0.0
    for f, s in shares.items():
        lhv, o2, (pn2, ph2o, pco2) = _FUEL_EST[f]
        n = s * fuel_W / lhv
        o2_need += n * o2
        n2, h2o, co2 = n2 + n * pn2, h2o + n * ph2o, co2 + n * pco2
        if f == "H2" and cracked:
            n2 += n / 3.0                       # 2 NH3 -> N2 + 3 H2
    air = lam * o2_need / 0.2095
    o2 = (lam - 1.0) * o2_need
    n2 += air * 0.7905
    h2o += air * _HUMIDITY
    total = n2 + o2 + h2o + co2
    M = (n2 * _M["N2"] + o2 * _M["O2"] + h2o * _M["H2O"] + co2 * _M["CO2"]) / total
    return total, h2o / total, o2 / (total - h2o), M


def _loguniform(rng: random.Random, lo: float, hi: float) -> float:
    return math.exp(rng.uniform(math.log(lo), math.log(hi)))


def _viscosity(T_K: float) -> float:
    """Exhaust dynamic viscosity [Pa s], air-like power law (estimate)."""
    return 1.8e-5 * (T_K / 293.0) ** 0.68


# ------------------------------------------------------------------------------------------------
# Bricks
# ------------------------------------------------------------------------------------------------

def _substrate(rng: random.Random, kind: str, catalyst: str) -> dict:
    """Substrate keys of one brick, valid for the kind (and d_h > 0 with margin)."""
    if kind == "plate":
        return {"substrate": "plate", "gap_mm": round(rng.uniform(2.5, 7.0), 2),
                "plate_mm": round(rng.uniform(0.5, 1.2), 2)}
    if kind == "extruded":
        cpsi = rng.choice((8, 15, 18, 20, 25, 30, 35, 45, 60, 70, 87, 100))
        pitch_mm = 25.4 / math.sqrt(cpsi)
        return {"substrate": "extruded", "cpsi": cpsi,
                "wall_mm": round(pitch_mm * rng.uniform(0.10, 0.25), 2)}
    cpsi, (wlo, whi) = rng.choice(((100, (8.0, 12.0)), (200, (6.0, 10.0)), (300, (5.0, 8.0)),
                                   (400, (4.0, 6.5)), (600, (3.0, 4.5)), (900, (2.0, 3.0))))
    wall_mil = round(rng.uniform(wlo, whi), 1)
    pitch_um = 25400.0 / math.sqrt(cpsi)
    room_um = 0.3 * (pitch_um - wall_mil * 25.4)       # total washcoat at most 30 % of the gap
    out = {"substrate": "coated", "cpsi": cpsi, "wall_mil": wall_mil}
    if catalyst == "asc_dual_layer":
        if rng.random() < 0.6:
            top, bottom = rng.uniform(20.0, 80.0), rng.uniform(5.0, 30.0)
            f = min(1.0, room_um / (top + bottom))
            out["washcoat_um"] = [round(top * f, 1), round(bottom * f, 1)]
    elif catalyst == "platinum_alumina":
        out["washcoat_um"] = [round(min(rng.uniform(8.0, 40.0), room_um), 1)]
    else:
        out["washcoat_um"] = [round(min(rng.uniform(20.0, 150.0), room_um), 1)]
    return out


def _geometry(sub: dict) -> tuple[float, float, float]:
    """(hydraulic diameter [m], open frontal area [-], Poiseuille constant) of a substrate dict
    (same equations as aftertreat.geometry; used only for the pressure-drop estimate)."""
    if sub["substrate"] == "plate":
        g, t = sub["gap_mm"] * 1e-3, sub["plate_mm"] * 1e-3
        return 2.0 * g, g / (g + t), 48.0              # slit: 4 f Re / 2 = 48 (Fanning fRe 24)
    p = 0.0254 / math.sqrt(sub["cpsi"])
    wall = sub["wall_mm"] * 1e-3 if "wall_mm" in sub else sub["wall_mil"] * 25.4e-6
    wc = sum(sub.get("washcoat_um", [47.0])) * 1e-6
    dh = p - wall - 2.0 * wc
    return dh, (dh / p) ** 2, 28.46                    # square: 2 x Fanning fRe 14.23


def _dp_estimate(bricks: list[dict], Q_act_m3_s: float, T_K: float) -> float:
    """Laminar channel pressure drop of the train [Pa] at an actual volume flow (estimate)."""
    mu = _viscosity(T_K)
    dp = 0.0
    for b in bricks:
        dh, ofa, po = _geometry(b)
        A = math.pi / 4.0 * (b["diameter_mm"] * 1e-3) ** 2
        u = Q_act_m3_s / A / ofa
        dp += po * mu * u * b["length_mm"] * 1e-3 / dh ** 2
    return 1.4 * dp                                    # entrance and contraction allowance


def _draw_train(rng: random.Random) -> list[dict]:
    """Catalysts, substrates, grids and lengths of 1-3 SCR bricks and an optional tail (sizes of
    the diameter are set later from the flows)."""
    n_scr = rng.choices((1, 2, 3), weights=(3, 4, 3))[0]
    keys = list(SCR_CATALYSTS)
    cats = [rng.choice(keys) for _ in range(n_scr)]
    if n_scr > 1 and len(set(cats)) == 1 and rng.random() < 0.7:   # mostly mixed trains
        cats[rng.randrange(1, n_scr)] = rng.choice([k for k in keys if k != cats[0]])
    tail = rng.choices((None, "asc_dual_layer", "platinum_alumina"), weights=(4, 4, 2))[0]
    bricks = []
    for i, c in enumerate(cats):
        kinds = SCR_CATALYSTS[c]
        kind = kinds[0] if rng.random() < 0.6 else rng.choice(kinds)
        b = {"name": f"SCR {i + 1} ({c}, {kind})", "catalyst": c, **_substrate(rng, kind, c)}
        b["length_mm"] = round(_loguniform(rng, 50.0, 2000.0))
        bricks.append(b)
    if tail is not None:
        b = {"name": f"{'ASC' if tail == 'asc_dual_layer' else 'Pt oxidation'} ({tail})",
             "catalyst": tail, **_substrate(rng, "coated", tail)}
        b["length_mm"] = round(_loguniform(rng, 50.0, 500.0))
        bricks.append(b)
    for b in bricks:
        r = rng.random()
        if r < 0.3:
            b["cells"] = rng.randint(2, 5)               # very coarse grids
        elif r < 0.85:
            b["cells"] = rng.randint(6, 60)
        # else: the default grid
        if rng.random() < 0.7:
            b["activity"] = round(rng.uniform(0.5, 1.0), 3)
        if b["catalyst"] == "asc_dual_layer" and rng.random() < 0.4:
            b["nodes_per_layer"] = rng.randint(2, 10)
        if b["substrate"] == "plate" and rng.random() < 0.5:
            b["sherwood"] = rng.choice(("hawthorn_1974", "fully_developed"))
        elif b["substrate"] != "plate" and rng.random() < 0.15:
            b["sherwood"] = rng.choice(("tronconi_forzatti_1992", "hawthorn_1974",
                                        "fully_developed"))
        if (b["catalyst"] not in TAIL_CATALYSTS and b["substrate"] == "coated"
                and rng.random() < 0.15):
            b["washcoat_model"] = rng.choice(("resolved", "none"))
            if b["washcoat_model"] == "resolved":
                b["nodes_per_layer"] = rng.randint(2, 8)
    return bricks


def _size_train(rng: random.Random, bricks: list[dict], Q_N: list[float], Q_act_max: float,
                T_max_K: float, p_min_Pa: float) -> None:
    """Diameters (and, if needed, lengths) so that the train GHSV lies in 2000..200000 1/h at
    every mode and the pressure drop stays well below the tool's limits."""
    qmin, qmax = min(Q_N), max(Q_N)                   # Nm3/h
    for attempt in range(400):
        if attempt:                                   # redraw lengths after a failed attempt
            for b in bricks:
                hi = 500.0 if b["catalyst"] in TAIL_CATALYSTS else 2000.0
                b["length_mm"] = round(_loguniform(rng, 50.0, hi))
        L = sum(b["length_mm"] for b in bricks) * 1e-3
        lo_V = qmax / _GHSV_RANGE[1]
        hi_V = qmin / _GHSV_RANGE[0]
        if lo_V > hi_V:
            continue
        V = _loguniform(rng, lo_V, hi_V)
        D = math.sqrt(4.0 * V / (math.pi * L))
        if not 0.08 <= D <= 12.0:
            continue
        spread = rng.random() < 0.25                  # some trains change diameter
        for b in bricks:
            b["diameter_mm"] = round(D * 1e3 * (rng.uniform(0.85, 1.15) if spread else 1.0))
        V_real = sum(math.pi / 4 * (b["diameter_mm"] * 1e-3) ** 2 * b["length_mm"] * 1e-3
                     for b in bricks)
        if not (_GHSV_RANGE[0] <= qmin / V_real and qmax / V_real <= _GHSV_RANGE[1]):
            continue
        if _dp_estimate(bricks, Q_act_max, T_max_K) > min(25e3, 0.2 * p_min_Pa):
            continue
        face = Q_act_max / (math.pi / 4 * (min(b["diameter_mm"] for b in bricks) * 1e-3) ** 2)
        if face > 25.0:
            continue
        return
    raise RuntimeError("fuzz generator: no train size satisfies the GHSV and pressure-drop "
                       "bounds (change the draw)")


# ------------------------------------------------------------------------------------------------
# The case generator
# ------------------------------------------------------------------------------------------------

def _draw_fuel(rng: random.Random, app: str) -> tuple[dict, bool | None]:
    r = rng.random()
    shares: dict[str, float] = {}
    cracked = None
    if r < 0.35:
        pass                                                           # pure NH3
    elif r < 0.7:
        shares["H2"] = round(rng.uniform(0.02, 0.30), 3)
        cracked = rng.choice((True, False, None))
    elif r < 0.88:
        shares["diesel"] = round(rng.uniform(0.01, 0.08), 3)          # pilot
        if rng.random() < 0.5:
            shares["H2"] = round(rng.uniform(0.02, 0.15), 3)
            cracked = rng.choice((True, False))
    else:
        if app in ("gas turbine", "stationary engine"):
            shares["natural_gas"] = round(rng.uniform(0.05, 0.30), 3)  # co-firing
        else:
            shares["diesel"] = round(rng.uniform(0.01, 0.05), 3)
    shares = {"NH3": round(1.0 - sum(shares.values()), 6), **shares}
    return shares, cracked


#: ISO cycles with a zero-power (idle) mode, drawn by ``random_cycle_case(seed, idle=True)``
#: for engines (ISO 8178-4 weights their g/h into the cycle; no g/kWh at idle)
_IDLE_CYCLES = ("C1", "C2", "E1", "E5")


def _draw_cycle(rng: random.Random, app: str, idle: bool = False
                ) -> tuple[dict | None, list[dict] | None, list[float]]:
    """(iso key table or None, custom mode tables or None, power fractions). With ``idle``
    the cycle has a zero-power mode: a shipped idle cycle, or a custom cycle with an idle
    mode added."""
    allowed = [k for k in _APP_CYCLES[app] if k in _idle_free_cycles()]
    if idle and rng.random() < 0.5:
        key = rng.choice(_IDLE_CYCLES)
        return {"iso8178": key}, None, _cycle_fractions(key)
    if allowed and rng.random() < 0.6 and not idle:
        key = rng.choice(allowed)
        return {"iso8178": key}, None, _cycle_fractions(key)
    n = rng.randint(1, 6)
    names = rng.sample(_MODE_NAMES, n)
    cuts = sorted(rng.sample(range(1, 100), n - 1))
    parts = [b - a for a, b in zip([0] + cuts, cuts + [100])]
    lo = 30.0 if app == "gas turbine" else 5.0
    modes, fr = [], []
    for name, w in zip(names, parts):
        m = {"name": name, "weight": w / 100.0}
        if app != "gas turbine" and rng.random() < 0.25:              # torque-defined mode
            torque = round(rng.uniform(15.0, 100.0), 1)
            speed = round(rng.uniform(45.0, 100.0), 1)
            m.update(torque_pct=torque, speed_pct=speed)
            fr.append(torque * speed / 1e4)
        else:
            p = round(rng.uniform(lo, 110.0), 1)
            m["power_pct"] = p
            if rng.random() < 0.4:
                m["speed_pct"] = round(rng.uniform(60.0, 100.0), 1)
            fr.append(p / 100.0)
        if rng.random() < 0.1:
            m["cap_exempt"] = True
        modes.append(m)
    if idle:                       # one mode becomes idle: no power, a tenth of the weight
        k = rng.randrange(len(modes))
        modes[k] = {"name": "idle", "weight": modes[k]["weight"], "power_pct": 0.0}
        fr[k] = 0.0
        if len(modes) == 1:        # an idle-only cycle has no work: add a loaded mode
            modes[0]["weight"] = 0.2
            modes.append({"name": "loaded", "weight": 0.8, "power_pct": 75.0})
            fr.append(0.75)
    return None, modes, fr


def _per_mode_or_scalar(rng: random.Random, values: list[float], digits: int):
    """The list, or (sometimes) one number for every mode."""
    if len(values) > 1 and rng.random() < 0.2:
        return round(values[0], digits)
    return [round(v, digits) for v in values]


def random_cycle_case(seed: int, idle: bool = False) -> str:
    """TOML text of a valid, invented duty-cycle case, drawn with ``random.Random(seed)``.
    With ``idle`` the cycle has a zero-power mode (engines only; drawn from another stream,
    so the seeds without it are unchanged); its exhaust is that of ``idle_fuel_pct`` of the
    highest-power mode's fuel."""
    rng = random.Random(seed if not idle else 1_000_003 + seed)
    app = rng.choice(("marine propulsion", "auxiliary genset", "stationary engine",
                      "gas turbine"))
    if idle and app == "gas turbine":
        app = "stationary engine"
    turbine = app == "gas turbine"
    if app == "marine propulsion":
        P = round(_loguniform(rng, 800.0, 25000.0))
        speed = round(rng.choice((_loguniform(rng, 70.0, 160.0), _loguniform(rng, 400.0, 1900.0))))
    elif app == "auxiliary genset":
        P, speed = round(_loguniform(rng, 300.0, 4500.0)), rng.choice((720, 750, 900, 1000,
                                                                       1200, 1500, 1800))
    elif app == "stationary engine":
        P, speed = round(_loguniform(rng, 500.0, 12000.0)), rng.choice((500, 600, 750, 1000,
                                                                        1500))
    else:
        P, speed = round(_loguniform(rng, 5000.0, 60000.0)), None
    shares, cracked = _draw_fuel(rng, app)
    iso, custom, fracs = _draw_cycle(rng, app, idle)
    n = len(fracs)
    bricks = _draw_train(rng)
    ranges = [_catalyst_range_C(b["catalyst"]) for b in bricks]
    T_floor = max(200.0, max(r[0] for r in ranges)) + 0.5
    T_ceil = min(550.0, min(r[1] for r in ranges)) - 0.5

    # -- engine operating line (efficiency, lambda) and the exhaust flow per mode
    if turbine:
        eta_r, lam_r = rng.uniform(0.28, 0.40), rng.uniform(2.6, 3.6)
        eta = [max(0.12, eta_r * (1 - 0.5 * (1 - min(f, 1.0)) ** 1.5)) for f in fracs]
        lam = [min(9.0, lam_r * (1 + 0.6 * max(0.0, 1 - f))) for f in fracs]
    else:
        eta_r, lam_r = rng.uniform(0.38, 0.48), rng.uniform(1.7, 2.4)
        eta = [max(0.12, eta_r * (1 - 0.45 * max(0.0, 1 - f) ** 2)) for f in fracs]
        lam = [min(9.0, lam_r * (1 + 0.9 * max(0.0, 1 - f))) for f in fracs]
    idle_pct = round(rng.uniform(2.0, 10.0), 2) if idle and rng.random() < 0.6 else None
    top = max(range(len(fracs)), key=lambda i: fracs[i])
    fuel_top_kW = P * fracs[top] / eta[top]
    # an idle mode burns idle_fuel_pct (default 5) of the top mode's fuel: as brake power at
    # its own efficiency, that is the same fuel flow
    est = [_exhaust_estimate(P * f if f > 0 else
                             (idle_pct or 5.0) / 100.0 * fuel_top_kW * e, e, lm, shares,
                             bool(cracked))
           for f, e, lm in zip(fracs, eta, lam)]

    # -- engine-out minor species and dosing
    nox, no2f, nh3, n2o, h2 = [], [], [], [], []
    for f in fracs:
        x = rng.uniform(100.0, 3000.0) if rng.random() < 0.5 else _loguniform(rng, 100.0, 3000.0)
        if turbine:
            x = min(x, rng.uniform(100.0, 900.0))
        nox.append(x)
        no2f.append(rng.uniform(0.0, 0.7) if rng.random() < 0.6 else rng.uniform(0.0, 0.1))
        kind = rng.random()
        ratio = (0.0 if kind < 0.1 else rng.uniform(0.0, 1.0) if kind < 0.25
                 else rng.uniform(1.0, 3.0) if kind < 0.45 else rng.uniform(3.0, 8.0))
        nh3.append(ratio * x)
        n2o.append(rng.uniform(0.0, 300.0) if rng.random() < 0.85 else 0.0)
        h2.append(rng.uniform(0.0, 3000.0) if "H2" in shares or rng.random() < 0.3 else 0.0)
    dmethod = rng.choices(("none", "NH3", "urea"), weights=(4, 3.5, 2.5))[0]
    anr = [rng.uniform(0.0, 2.0) for _ in range(n)] if dmethod != "none" else [0.0] * n
    if dmethod != "none" and n > 1 and rng.random() < 0.3:
        anr = [anr[0]] * n

    # -- temperatures: within every catalyst's range at every brick inlet (urea cooling at the
    #    first brick, and the largest possible reaction heat ahead of the last brick)
    multi = len(bricks) > 1
    T = []
    base = rng.random()
    slope = rng.choice((1.0, 1.0, 0.0, -0.5))
    for i in range(n):
        for _ in range(200):
            add = max(0.0, anr[i] * nox[i] - nh3[i]) * 1e-6
            drop = add * (_UREA_COOL_PER_NH3 if dmethod == "urea" else 15e3) / _CP_GAS
            rise = _HEAT_PER_NH3 * (nh3[i] * 1e-6 + add) / _CP_GAS if multi else 0.0
            lo, hi = T_floor + drop + 0.5, T_ceil - rise - 0.5
            if lo <= hi:
                break
            nh3[i] *= 0.8                              # too much heat for the range: less NH3
            anr[i] *= 0.8
        else:
            raise RuntimeError("fuzz generator: no feasible temperature window")
        u = min(1.0, max(0.0, base + slope * 0.4 * (fracs[i] - 0.5) + rng.gauss(0.0, 0.1)))
        T.append(round(lo + (hi - lo) * u, 1))
    p_kPa = [round(rng.uniform(101.0, 110.0), 2) for _ in range(n)]

    # -- train size from the flows
    Q_N = [e[0] * 0.0224141 * 3600.0 for e in est]                 # Nm3/h (0 C, 101.325 kPa)
    imax = max(range(n), key=lambda i: est[i][0])
    Q_act = est[imax][0] * 8.314462618 * (max(T) + 273.15) / (min(p_kPa) * 1e3)
    _size_train(rng, bricks, Q_N, Q_act, max(T) + 273.15, min(p_kPa) * 1e3)

    # -- write the case
    lines = ["# INVENTED FUZZ CASE (tests/fuzz_cases.py): every number below is drawn at random",
             "# to be plausible; it describes no real engine, ship, site or product.",
             f"# seed = {seed}"]
    _table(lines, None, {"title": f"Invented fuzz case, seed {seed}: {app}, "
                                  f"{len(bricks)} brick(s), dosing {dmethod}"})
    _table(lines, "[engine]", {"application": app, "rated_power_kW": P,
                               "rated_speed_rpm": speed,
                               "name": f"invented fuzz engine {seed}"})
    fuel = dict(shares)
    if cracked is not None:
        fuel["cracked_H2"] = cracked
    if not (len(shares) == 1 and cracked is None and rng.random() < 0.3):   # [fuel] may be omitted
        _table(lines, "[fuel]", fuel)
    if iso is not None:
        _table(lines, "[cycle]", iso)
    else:
        for m in custom:
            _table(lines, "[[cycle.mode]]", m)
    measured = rng.random() < 0.5
    eo = {"method": "measured" if measured else "combustion",
          "T_C": [round(t, 1) for t in T],
          "p_kPa": _per_mode_or_scalar(rng, p_kPa, 2),
          "NOx_ppm": [round(v, 1) for v in nox],
          "NO2_fraction": _per_mode_or_scalar(rng, no2f, 3),
          "NH3_ppm": [round(v, 1) for v in nh3],
          "N2O_ppm": _per_mode_or_scalar(rng, n2o, 1),
          "H2_ppm": _per_mode_or_scalar(rng, h2, 1)}
    if measured:
        jit = [rng.uniform(0.95, 1.05) for _ in range(n)]
        eo["basis"] = "wet"
        eo["mass_flow_kg_h"] = [round(e[0] * e[3] * 3.6 * j, 1) for e, j in zip(est, jit)]
        h2o = [min(30.0, 100.0 * e[1] * rng.uniform(0.93, 1.05)) for e in est]
        o2_dry = [min(19.0, 100.0 * e[2] * rng.uniform(0.95, 1.05)) for e in est]
        eo["O2_pct"] = [round(o * (1.0 - w / 100.0), 2) for o, w in zip(o2_dry, h2o)]   # wet
        eo["H2O_pct"] = [round(w, 2) for w in h2o]
    else:
        eo["brake_efficiency"] = [round(e, 4) for e in eta]
        eo["lambda"] = [round(v, 3) for v in lam]
        if idle_pct is not None:
            eo["idle_fuel_pct"] = idle_pct
        if rng.random() < 0.5:
            eo["intake_humidity_g_kg"] = round(rng.uniform(2.0, 25.0), 2)
    _table(lines, "[engine_out]", eo)
    if dmethod == "none":
        if rng.random() < 0.7:
            _table(lines, "[dosing]", {"method": "none"})
    else:
        d = {"method": dmethod, "ANR": _per_mode_or_scalar(rng, anr, 3) if len(set(anr)) > 1
             else round(anr[0], 3)}
        if dmethod == "urea" and rng.random() < 0.3:
            d["urea_mass_fraction"] = rng.choice((0.325, 0.4))
        _table(lines, "[dosing]", d)
    order = ("name", "catalyst", "substrate", "cpsi", "wall_mm", "wall_mil", "washcoat_um",
             "gap_mm", "plate_mm", "length_mm", "diameter_mm", "activity", "cells",
             "nodes_per_layer", "washcoat_model", "sherwood")
    for b in bricks:
        _table(lines, "[[brick]]", {k: b[k] for k in order if k in b})
    lim: dict = {}
    use_imo = not turbine and rng.random() < 0.65
    if use_imo:
        lim["sets"] = ["imo_tier_iii"]
    if rng.random() < 0.3:
        lim["gwp"] = rng.choice(("AR6", "AR5", "AR4"))
    rows = []
    if not use_imo or rng.random() < 0.7:
        if rng.random() < 0.8 or not use_imo:
            rows.append({"name": "NH3 slip at every mode (invented fuzz limit)",
                         "quantity": "NH3_ppmvd", "value": round(rng.uniform(2.0, 30.0), 1),
                         "unit": "ppmvd", "o2_ref_pct": 15.0,
                         "source": "invented fuzz limit (no regulatory basis)"})
        if rng.random() < 0.6:
            rows.append({"name": "N2O over the cycle (invented fuzz limit)",
                         "quantity": "N2O_g_kWh", "value": round(rng.uniform(0.1, 2.0), 3),
                         "unit": "g/kWh", "source": "invented fuzz limit (no regulatory basis)"})
    _table(lines, "[limits]", lim)
    for r in rows:
        _table(lines, "[[limits.custom]]", r)
    return "\n".join(lines) + "\n"


def reproduction_case() -> str:
    """The fixed case that exposed a solver bug (INVENTED numbers apart from the stated ones):
    2 MW D2 genset on pure NH3, measured engine-out at about 210 C, NOx 1395 ppm with 35 % NO2,
    unburned NH3 of 233-5264 ppm; Cu-CHA extruded 25 cpsi, Cu-CHA coated 900 cpsi on 4 cells,
    Fe-zeolite plate; no dosing."""
    return '''\
# INVENTED REPRODUCTION CASE (tests/fuzz_cases.py): engine and train are made up; the engine-out
# NOx, NO2 fraction, NH3 and temperatures are the values that exposed a solver bug.
title = "Invented reproduction case: 2 MW NH3 genset on D2 at 210 C, Cu-CHA x2 + Fe plate"

[engine]
application = "auxiliary genset"
rated_power_kW = 2000
rated_speed_rpm = 900
name = "invented reproduction genset"

[fuel]
NH3 = 1.0

[cycle]
iso8178 = "D2"

[engine_out]
method = "measured"
basis = "wet"
mass_flow_kg_h = [13500.0, 10800.0, 8100.0, 5200.0, 3000.0]
T_C = [212.0, 211.0, 210.5, 209.5, 209.0]
p_kPa = 104.0
O2_pct = [11.0, 11.8, 12.6, 13.8, 15.2]
H2O_pct = [20.5, 19.5, 18.0, 15.5, 12.0]
NOx_ppm = 1395.0
NO2_fraction = 0.35
NH3_ppm = [4472.0, 449.0, 233.0, 5264.0, 1072.0]
N2O_ppm = 0.0
H2_ppm = 0.0

[dosing]
method = "none"

[[brick]]
name = "SCR 1 (Cu-CHA, extruded 25 cpsi)"
catalyst = "cu_chabazite"
substrate = "extruded"
cpsi = 25
wall_mm = 0.8
length_mm = 600
diameter_mm = 1100

[[brick]]
name = "SCR 2 (Cu-CHA, coated 900 cpsi, 4 cells)"
catalyst = "cu_chabazite"
substrate = "coated"
cpsi = 900
wall_mil = 2.5
washcoat_um = [60.0]
length_mm = 150
diameter_mm = 1100
cells = 4

[[brick]]
name = "SCR 3 (Fe-zeolite, plate)"
catalyst = "fe_zeolite"
substrate = "plate"
gap_mm = 4.5
plate_mm = 0.8
length_mm = 500
diameter_mm = 1100

[limits]
sets = ["imo_tier_iii"]

[[limits.custom]]
name = "NH3 slip at every mode (invented limit)"
quantity = "NH3_ppmvd"
value = 10.0
unit = "ppmvd"
o2_ref_pct = 15.0
source = "invented limit of the reproduction case (no regulatory basis)"
'''


# ------------------------------------------------------------------------------------------------
# Loading and input consistency
# ------------------------------------------------------------------------------------------------

def load_case_text(text: str, name: str = "fuzz_case", directory: str | os.PathLike | None = None):
    """Write ``text`` to ``<directory>/<name>.toml`` (a fresh temporary folder by default) and read
    it with :func:`aftertreat.cyclecase.load_run_case`, as the command line does."""
    from aftertreat.cyclecase import load_run_case
    if directory is None:
        with tempfile.TemporaryDirectory(prefix="aftertreat-fuzz-") as d:
            return load_case_text(text, name, d)
    path = Path(directory) / f"{name}.toml"
    path.write_text(text, encoding="utf-8")
    return load_run_case(path)


def check_case_inputs(case) -> list[str]:
    """Physical consistency of a loaded case's per-mode exhaust (no solve): positive flows, dry
    O2 below 20.9 %, wet H2O at most 30 %, pressure 101-110 kPa, the first brick's inlet
    temperature within every catalyst's validity range, train GHSV within 2000-200000 1/h."""
    from aftertreat.evaluate import mode_inlets
    from aftertreat.species import INDEX
    out = []
    lo = max(c.valid_T[0] for b in case.train.bricks for c in b.catalysts)
    hi = min(c.valid_T[1] for b in case.train.bricks for c in b.catalysts)
    V = case.train.volume
    for i, x in enumerate(mode_inlets(case)):
        power, eo, inlet = x.power_kW, x.engine_out, x.inlet
        m = case.cycle.modes[i].name
        if not power >= 0:
            out.append(f"mode {m}: power {power} kW is negative")
        for s, label in ((eo, "engine-out"), (inlet, "train inlet")):
            F = s.F
            if not (np.all(np.isfinite(F)) and np.all(F >= 0) and F.sum() > 0):
                out.append(f"mode {m}: {label} flows not all finite and >= 0: {F}")
                continue
            dry = F.sum() - F[INDEX["H2O"]]
            o2 = 100.0 * F[INDEX["O2"]] / dry
            if not 0.0 < o2 < 20.9:
                out.append(f"mode {m}: {label} dry O2 {o2:.3f} % not in (0, 20.9)")
            h2o = 100.0 * F[INDEX["H2O"]] / F.sum()
            if label == "engine-out" and not 0.0 < h2o <= 30.0 + 1e-9:
                out.append(f"mode {m}: engine-out H2O {h2o:.2f} % not in (0, 30]")
        if not 101e3 - 1e-6 <= eo.p <= 110e3 + 1e-6:
            out.append(f"mode {m}: pressure {eo.p / 1e3:.2f} kPa not in 101..110")
        if not lo - 1e-9 <= inlet.T <= hi + 1e-9:
            out.append(f"mode {m}: train inlet {inlet.T - 273.15:.1f} C outside the catalysts' "
                       f"common range {lo - 273.15:.0f}..{hi - 273.15:.0f} C")
        ghsv = inlet.total * 8.314462618 * 273.15 / 101325.0 / V * 3600.0
        if not 2000.0 <= ghsv <= 200000.0:
            out.append(f"mode {m}: train GHSV {ghsv:.0f} 1/h not in 2000..200000")
    return out


# ------------------------------------------------------------------------------------------------
# Result invariants
# ------------------------------------------------------------------------------------------------

def _balance(mode) -> float:
    e = getattr(mode, "element_balance_error")
    return float(e() if callable(e) else e)


def check_result(result, *, flow_tol: float = 0.0) -> list[str]:
    """Human-readable problems of a :class:`~aftertreat.evaluate.CycleResult` (empty if none).

    Checks: a mode flagged converged whose element balance error exceeds 1e-9; negative (or
    non-finite) molar flows at any cell outlet inside any brick; NH3 coverages outside [0, 1];
    negative outlet flows; outlet NH3 above the inlet NH3 x (1 + 1e-9) (the shipped catalysts make
    no NH3). ``flow_tol`` > 0 ignores internal flows above ``-flow_tol`` x the mode's total inlet
    flow (e.g. 1e-12 to separate round-off from real negatives; the default 0 reports every one).

    Uses only documented result fields: ``result.modes``; per mode ``name``,
    ``element_balance_error()``, ``inlet.F``, ``outlet.F`` and ``solution`` (``converged``,
    ``bricks``); per brick solution ``brick.name``, ``F`` [ncell, nspecies] (flows at every cell
    outlet), ``coverage`` [ncell, nnode, nsite] and, when present, ``node_layer`` with the
    brick's ``catalysts`` (to skip site slots a layer does not have). Every problem starts with
    one of :data:`PROBLEM_KINDS` followed by ``": "``.
    """
    from aftertreat.species import INDEX, SPECIES
    problems = []
    for mi, mode in enumerate(result.modes):
        where = f"mode {mi} '{mode.name}'"
        sol = mode.solution
        converged = bool(sol.converged)
        err = _balance(mode)
        if converged and not err <= 1e-9:
            problems.append(f"element balance: {where} converged but element_balance_error = "
                            f"{err:.3e} > 1e-9")
        F_in = np.asarray(mode.inlet.F, dtype=float)
        scale = float(F_in.sum())
        for bi, b in enumerate(sol.bricks):
            bname = f"{where} brick {bi} '{getattr(getattr(b, 'brick', None), 'name', bi)}'"
            F = np.asarray(b.F, dtype=float)
            if not np.all(np.isfinite(F)):
                problems.append(f"non-finite internal flow: {bname}: "
                                f"{int(np.sum(~np.isfinite(F)))} non-finite molar flow(s)")
            neg = np.isfinite(F) & (F < -flow_tol * scale)
            if neg.any():
                j, k = np.unravel_index(np.argmin(np.where(neg, F, np.inf)), F.shape)
                sp = sorted({SPECIES[s] for s in np.nonzero(neg)[1]})
                problems.append(
                    f"negative internal flow: {bname} (converged={bool(b.converged)}): "
                    f"{int(neg.sum())} negative flow(s) of {', '.join(sp)}; most negative "
                    f"{SPECIES[k]} = {F[j, k]:.3e} mol/s at cell {j} of {F.shape[0]} "
                    f"({F[j, k] / scale:.2e} of the inlet flow, "
                    f"{1e6 * F[j, k] / F[j].sum():.3g} ppm)")
            cov = np.asarray(b.coverage, dtype=float)
            if cov.size:
                mask = np.ones(cov.shape, dtype=bool)
                nl = getattr(b, "node_layer", None)
                cats = getattr(getattr(b, "brick", None), "catalysts", None)
                if nl is not None and cats is not None and cov.ndim == 3:
                    for node, layer in enumerate(np.asarray(nl)):
                        ns = len(cats[int(layer)].mechanism.sites)
                        mask[:, node, ns:] = False
                vals = cov[mask]
                bad = ~np.isfinite(vals) | (vals < 0.0) | (vals > 1.0)
                if bad.any():
                    fin = vals[np.isfinite(vals)]
                    problems.append(
                        f"coverage out of range: {bname}: {int(bad.sum())} coverage value(s) "
                        f"outside [0, 1] (min {fin.min() if fin.size else float('nan'):.3e}, "
                        f"max {fin.max() if fin.size else float('nan'):.6g})")
        F_out = np.asarray(mode.outlet.F, dtype=float)
        if np.any(~np.isfinite(F_out)) or np.any(F_out < 0):
            bad = [f"{SPECIES[i]} = {F_out[i]:.3e}" for i in range(len(F_out))
                   if not (np.isfinite(F_out[i]) and F_out[i] >= 0)]
            problems.append(f"negative outlet flow: {where}: {', '.join(bad)} mol/s")
        i = INDEX["NH3"]
        # (a round-off allowance of 1e-6 ppm of the total flow: a mode with no NH3 in can
        # show 1e-25 mol/s out)
        if F_out[i] > F_in[i] * (1.0 + 1e-9) + 1e-12 * float(np.sum(F_in)):
            problems.append(f"NH3 made: {where}: outlet NH3 {F_out[i]:.6e} mol/s > inlet "
                            f"{F_in[i]:.6e} mol/s (the shipped catalysts make no NH3)")
    return problems


def problem_kind(problem: str) -> str:
    """The :data:`PROBLEM_KINDS` entry a :func:`check_result` string belongs to."""
    return problem.split(":", 1)[0]


# ------------------------------------------------------------------------------------------------
# Running many cases
# ------------------------------------------------------------------------------------------------

@contextmanager
def time_limit(seconds, what="case did not finish"):
    """Raise TimeoutError("<what> within <seconds> s") if the block runs longer (Unix; no
    limit where SIGALRM is missing or ``seconds`` is falsy). Also the tests' hang guard."""
    if not seconds or not hasattr(signal, "SIGALRM"):
        yield
        return

    def _raise(signum, frame):
        raise TimeoutError(f"{what} within {seconds} s")
    old = signal.signal(signal.SIGALRM, _raise)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


_COMPARE = ("NO", "NO2", "NH3", "N2O")
#: Negative internal flows smaller than this fraction of the inlet flow are counted apart as
#: round-off in the :func:`run_all` summary (they are still problems of :func:`check_result`).
ROUNDOFF_FLOW_TOL = 1e-12


def _cold_view(mode, cold):
    """A one-mode result-like object of a cold solve, for :func:`check_result`."""
    from types import SimpleNamespace

    from aftertreat.species import ELEMENT_MATRIX

    def balance():
        a_in = ELEMENT_MATRIX @ np.asarray(mode.inlet.F)
        a_out = ELEMENT_MATRIX @ np.asarray(cold.outlet.F)
        return float(np.max(np.abs(a_out - a_in)) / np.max(a_in))
    return SimpleNamespace(modes=[SimpleNamespace(name=mode.name, element_balance_error=balance,
                                                  inlet=mode.inlet, outlet=cold.outlet,
                                                  solution=cold)])


def _warm_vs_cold(case, result) -> tuple[list[dict], list[str]]:
    """Solve every mode again without a warm start. Returns the modes whose outlet NO, NO2, NH3
    or N2O differ from the warm-started run by more than 1e-6 of the mode's inlet NOx + NH3
    [mol/s] plus 1e-12 mol/s, and the :func:`check_result` problems of the cold solves (prefixed
    ``cold solve, mode i``; negative internal flows within round-off left out)."""
    from aftertreat.species import INDEX
    out, cold_problems = [], []
    train = result.train if result.train is not None else case.train
    for mi, mode in enumerate(result.modes):
        t0 = time.perf_counter()
        cold = train.solve(mode.inlet)
        for p in check_result(_cold_view(mode, cold), flow_tol=ROUNDOFF_FLOW_TOL):
            cold_problems.append(f"cold solve, {p.replace('mode 0 ', f'mode {mi} ', 1)}")
        F_in = mode.inlet.F
        ref = F_in[INDEX["NO"]] + F_in[INDEX["NO2"]] + F_in[INDEX["NH3"]]
        tol = 1e-6 * ref + 1e-12
        warm_F, cold_F = mode.outlet.F, cold.outlet.F
        diffs = {s: float(cold_F[INDEX[s]] - warm_F[INDEX[s]]) for s in _COMPARE}
        worst = max(_COMPARE, key=lambda s: abs(diffs[s]))
        if abs(diffs[worst]) > tol:
            out.append({"mode": mi, "name": mode.name, "species": worst,
                        "warm_mol_s": float(warm_F[INDEX[worst]]),
                        "cold_mol_s": float(cold_F[INDEX[worst]]),
                        "relative": abs(diffs[worst]) / (ref + 1e-300),
                        "warm_ppm": float(1e6 * warm_F[INDEX[worst]] / warm_F.sum()),
                        "cold_ppm": float(1e6 * cold_F[INDEX[worst]] / cold_F.sum()),
                        "warm_converged": bool(mode.solution.converged),
                        "cold_converged": bool(cold.converged),
                        "warm_residual": float(mode.solution.residual),
                        "cold_residual": float(cold.residual),
                        "all_relative": {s: abs(d) / (ref + 1e-300) for s, d in diffs.items()},
                        "cold_seconds": time.perf_counter() - t0})
    return out, cold_problems


def case_summary(result) -> list[dict]:
    """Per mode: name, converged, residual, element balance, inlet and outlet wet ppm."""
    from aftertreat.species import INDEX
    rows = []
    for m in result.modes:
        rows.append({"name": m.name, "converged": bool(m.solution.converged),
                     "residual": float(m.solution.residual), "balance": _balance(m),
                     "T_in_C": float(m.inlet.T - 273.15),
                     "in_ppm": {s: float(1e6 * m.inlet.F[INDEX[s]] / m.inlet.F.sum())
                                for s in _COMPARE},
                     "out_ppm": {s: float(1e6 * m.outlet.F[INDEX[s]] / m.outlet.F.sum())
                                 for s in _COMPARE}})
    return rows


def run_one(text: str, label: str, *, warm_vs_cold: bool = True,
            timeout_s: float | None = None) -> dict:
    """Load, run and check one case text; never raises (errors are recorded)."""
    from aftertreat.errors import InputError
    from aftertreat.evaluate import run_case
    rec: dict = {"label": label, "status": "ok", "problems": [], "problems_beyond_roundoff": [],
                 "warm_cold": [], "cold_problems": [],
                 "python_warnings": [], "solver_warnings": [], "modes": []}
    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            with time_limit(timeout_s):
                with tempfile.TemporaryDirectory(prefix="aftertreat-fuzz-") as d:
                    case = load_case_text(text, label.replace(" ", "_"), d)
                rec["title"] = case.title
                result = run_case(case)
                rec["solve_seconds"] = time.perf_counter() - t0
                rec["solver_warnings"] = list(result.warnings)
                rec["modes"] = case_summary(result)
                rec["problems"] = check_result(result)
                rec["problems_beyond_roundoff"] = [
                    p for p in check_result(result, flow_tol=ROUNDOFF_FLOW_TOL)
                    if problem_kind(p) == "negative internal flow"]
                if warm_vs_cold:
                    rec["warm_cold"], rec["cold_problems"] = _warm_vs_cold(case, result)
        except InputError as exc:
            rec["status"], rec["error"] = "InputError", str(exc)
        except Exception as exc:                                       # noqa: BLE001
            rec["status"], rec["error"] = type(exc).__name__, str(exc)
            rec["traceback"] = traceback.format_exc(limit=6)
    seen: dict[str, int] = {}
    for w in caught:
        key = f"{w.category.__name__}: {w.message} ({Path(w.filename).name}:{w.lineno})"
        seen[key] = seen.get(key, 0) + 1
    rec["python_warnings"] = [f"{k} [x{n}]" if n > 1 else k for k, n in seen.items()]
    rec["seconds"] = time.perf_counter() - t0
    return rec


def run_all(seeds, *, warm_vs_cold: bool = True, timeout_s: float | None = None,
            progress=None) -> dict:
    """Load, run and check the case of every seed (see the module docstring).

    Returns a dict with ``cases`` (one record per seed: status, error, problems (strict) and
    problems_beyond_roundoff (negative internal flows below -1e-12 of the inlet flow), warm/cold
    disagreements, cold_problems (:func:`check_result` on the cold solves), Python warnings,
    solver warnings, per-mode summary, seconds) and summary counts: ``n_cases``, ``n_ok``,
    ``n_input_error``, ``n_other_error``, ``problem_counts`` (per :data:`PROBLEM_KINDS`),
    ``n_negative_internal_flow_beyond_roundoff``, ``n_modes``, ``n_converged_modes``,
    ``n_warm_cold``, ``cold_problem_counts``, ``n_python_warnings``, ``n_solver_warnings``.
    ``progress(record)`` is called after each seed; ``timeout_s`` bounds each case (Unix).
    """
    cases = {}
    for seed in seeds:
        rec = run_one(random_cycle_case(seed), f"seed {seed}", warm_vs_cold=warm_vs_cold,
                      timeout_s=timeout_s)
        rec["seed"] = seed
        cases[seed] = rec
        if progress:
            progress(rec)
    return summarise(cases)


def summarise(cases: dict) -> dict:
    """Summary counts over ``{key: run_one record}`` (see :func:`run_all`)."""
    recs = list(cases.values())
    counts = {k: 0 for k in PROBLEM_KINDS}
    for r in recs:
        for p in r["problems"]:
            counts[problem_kind(p)] = counts.get(problem_kind(p), 0) + 1
    cold_counts = {k: 0 for k in PROBLEM_KINDS}
    for r in recs:
        for p in r.get("cold_problems", []):
            k = problem_kind(p.split(", ", 1)[1])
            cold_counts[k] = cold_counts.get(k, 0) + 1
    return {"cases": cases, "n_cases": len(recs),
            "n_ok": sum(r["status"] == "ok" for r in recs),
            "n_input_error": sum(r["status"] == "InputError" for r in recs),
            "n_other_error": sum(r["status"] not in ("ok", "InputError") for r in recs),
            "problem_counts": counts,
            "n_cases_with_problems": sum(bool(r["problems"]) for r in recs),
            "n_negative_internal_flow_beyond_roundoff": sum(
                len(r.get("problems_beyond_roundoff", [])) for r in recs),
            "n_modes": sum(len(r["modes"]) for r in recs),
            "n_converged_modes": sum(m["converged"] for r in recs for m in r["modes"]),
            "n_warm_cold": sum(len(r["warm_cold"]) for r in recs),
            "cold_problem_counts": cold_counts,
            "n_python_warnings": sum(len(r["python_warnings"]) for r in recs),
            "n_solver_warnings": sum(len(r["solver_warnings"]) for r in recs)}


def _print_summary(s: dict, file=sys.stdout) -> None:
    keys = [k for k in s if k != "cases"]
    for k in keys:
        print(f"{k}: {s[k]}", file=file)
    for key, r in s["cases"].items():
        if r["status"] != "ok":
            print(f"[{key}] {r['status']}: {r.get('error', '')}", file=file)
        tiny = 0
        for p in r["problems"]:
            if problem_kind(p) == "negative internal flow":
                tiny += 1
                continue
            print(f"[{key}] {p}", file=file)
        for p in r.get("problems_beyond_roundoff", []):
            tiny -= 1
            print(f"[{key}] {p}", file=file)
        if tiny:
            print(f"[{key}] ({tiny} brick state(s) with negative internal flows within "
                  f"round-off, below {ROUNDOFF_FLOW_TOL:g} of the inlet flow)", file=file)
        for w in r["warm_cold"]:
            print(f"[{key}] warm/cold: mode {w['mode']} '{w['name']}' {w['species']}: warm "
                  f"{w['warm_ppm']:.6g} ppm, cold {w['cold_ppm']:.6g} ppm (rel {w['relative']:.2e}"
                  f"; converged warm={w['warm_converged']} cold={w['cold_converged']})", file=file)
        for p in r.get("cold_problems", []):
            print(f"[{key}] {p}", file=file)
        for w in r["python_warnings"]:
            print(f"[{key}] python warning: {w}", file=file)


def _main(argv: list[str]) -> int:
    import argparse
    ap = argparse.ArgumentParser(description="Run invented fuzz cases and check invariants.")
    ap.add_argument("start", nargs="?", type=int, default=0)
    ap.add_argument("stop", nargs="?", type=int, default=60)
    ap.add_argument("--repro", action="store_true", help="run the reproduction case only")
    ap.add_argument("--no-warm-cold", action="store_true")
    ap.add_argument("--timeout", type=float, default=None, help="seconds per case")
    ap.add_argument("--json", help="write the full record to this file")
    a = ap.parse_args(argv)

    def prog(r):
        print(f"{r['label']}: {r['status']} {len(r['problems'])} problem(s), "
              f"{len(r['warm_cold'])} warm/cold, {r['seconds']:.1f} s", file=sys.stderr,
              flush=True)
    if a.repro:
        rec = run_one(reproduction_case(), "reproduction", warm_vs_cold=not a.no_warm_cold,
                      timeout_s=a.timeout)
        prog(rec)
        s = summarise({"reproduction": rec})
    else:
        s = run_all(range(a.start, a.stop), warm_vs_cold=not a.no_warm_cold,
                    timeout_s=a.timeout, progress=prog)
    _print_summary(s)
    if a.json:
        Path(a.json).write_text(json.dumps(s, indent=1, default=str), encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(_main(sys.argv[1:]))
