"""Idle (zero-power) modes: the exhaust of a combustion-method case, and specific emissions.

ISO 8178-4 weights an idle mode's mass emission (g/h) into the cycle's weighted specific
emission, sum(W_i g_i) / sum(W_i P_i), while the idle mode itself has no brake power and so no
g/kWh of its own. The cases are INVENTED test data."""
import json

import numpy as np
import pytest

from aftertreat.cli import main
from aftertreat.cyclecase import load_run_case
from aftertreat.errors import InputError
from aftertreat.evaluate import mode_inlets, run_case

#: no dosing, one Cu-CHA brick, the IMO Tier III set (shared by both cases)
TAIL = """[dosing]
method = "none"
[[brick]]
name = "SCR"
catalyst = "cu_chabazite"
substrate = "coated"
cpsi = 400
wall_mil = 4
washcoat_um = [40]
length = "300 mm"
diameter = "{diameter} mm"
cells = 20
[limits]
sets = ["imo_tier_iii"]
"""

CASE = """
title = "invented: 1 MW ammonia engine on C1 (has an idle mode)"
[engine]
application = "stationary engine"
rated_power_kW = 1000
rated_speed_rpm = 1500
[fuel]
NH3 = 0.95
H2 = 0.05
[cycle]
iso8178 = "C1"
[engine_out]
method = "combustion"
brake_efficiency = 0.40
lambda = 2.2
T_C = 360
p_kPa = 103
NOx_ppm = 900
NO2_fraction = 0.1
NH3_ppm = 1500
N2O_ppm = 60
{extra}
""" + TAIL.format(diameter=600)

MEASURED = """
title = "invented: measured exhaust with an idle mode in a custom cycle"
[engine]
application = "stationary engine"
rated_power_kW = 500
rated_speed_rpm = 1500
[fuel]
NH3 = 1.0
[[cycle.mode]]
name = "rated"
weight = 0.8
power_pct = 100
[[cycle.mode]]
name = "idle"
weight = 0.2
power_pct = 0
[engine_out]
method = "measured"
basis = "wet"
mass_flow_kg_h = [2600, 300]
T_C = [380, 250]
O2_pct = [11, 17]
H2O_pct = [22, 8]
NOx_ppm = [900, 300]
NH3_ppm = [1200, 800]
""" + TAIL.format(diameter=500)


def _case(tmp_path, text, name="c.toml"):
    f = tmp_path / name
    f.write_text(text)
    return f


def test_combustion_idle_mode_burns_its_share_of_the_rated_fuel(tmp_path):
    """At equal lambda the atom balance is linear in the fuel flow, so the idle exhaust is
    idle_fuel_pct / 100 of the highest-power mode's, to round-off (C1's idle mode, 7 %)."""
    case = load_run_case(_case(tmp_path, CASE.format(extra="idle_fuel_pct = 7")))
    inl = mode_inlets(case)
    names = [m.name for m in case.cycle.modes]
    idle = [i for i, m in enumerate(inl) if m.power_kW == 0.0]
    top = int(np.argmax([m.power_kW for m in inl]))
    assert len(idle) == 1 and names[idle[0]]
    big = inl[top].engine_out.F > 0
    ratio = inl[idle[0]].engine_out.F[big] / inl[top].engine_out.F[big]
    np.testing.assert_allclose(ratio, 0.07, rtol=1e-9)


def test_idle_case_runs_and_says_how_the_idle_exhaust_was_made(tmp_path, capsys):
    """`aftertreat run` on a C1 combustion case: exit 0, finite numbers only in the JSON, and
    a warning naming the default idle fuel share as an assumption."""
    f = _case(tmp_path, CASE.format(extra=""))
    assert main(["run", str(f), "--json"]) == 0
    text = capsys.readouterr().out
    assert "Infinity" not in text and "NaN" not in text
    obj = json.loads(text)
    assert any("idle" in w and "idle_fuel_pct" in w for w in obj["warnings"])


def test_per_mode_g_kWh_rows_do_not_apply_at_idle(tmp_path):
    """Measured exhaust, a custom cycle with an idle mode that no clause exempts: the per-mode
    g/kWh cap does not apply there (limit None, a note says why), the cycle value includes
    the idle g/h (weighted: sum W g / sum W P)."""
    case = load_run_case(_case(tmp_path, MEASURED))
    res = run_case(case)
    rows = [r for r in res.limits if r.mode == "idle"]
    assert rows and all(r.limit is None and "idle" in r.note for r in rows)
    assert all(np.isfinite(r.value) or r.value is None for r in res.limits
               if r.limit is not None)
    idle = next(m for m in res.modes if m.name == "idle")
    rated = next(m for m in res.modes if m.name == "rated")
    g_rated, g_idle = (m.emissions()["NOx_g_h"] for m in (rated, idle))
    assert g_idle > 0
    expect = (0.8 * g_rated + 0.2 * g_idle) / (0.8 * 500.0)
    assert res.cycle["NOx_g_kWh"] == pytest.approx(expect, rel=1e-9)


@pytest.mark.parametrize("bad", ["0", "80", '"five"'])
def test_bad_idle_fuel_share(tmp_path, bad):
    with pytest.raises(InputError) as e:
        load_run_case(_case(tmp_path, CASE.format(extra=f"idle_fuel_pct = {bad}")))
    assert e.value.key == "engine_out.idle_fuel_pct"


def test_no_nh3_limit_and_high_slip_is_warned(tmp_path):
    """The C1 case has only NOx limits while its engine-out NH3 (1500 ppm) exceeds the NOx:
    the run warns that the slip is unlimited (common practice: SCR slip held below 10 ppm)."""
    res = run_case(load_run_case(_case(tmp_path, CASE.format(extra=""))))
    assert res.cycle["NH3_slip_ppmvd_max"] > 10.0
    assert any("no NH3 limit" in w for w in res.warnings)


def test_train_that_raises_co2e_is_warned_and_brackets_survive_printing(tmp_path, capsys):
    """A Cu-CHA SCR and a dual-layer slip catalyst fed 1500 ppm NH3 make N2O: the cycle CO2e
    rises by more than the default 10 % (limits.co2e_rise_warn_pct) and the run says so, with
    the N2O the train made; at 1000 % it does not. The notes print whole in the terminal even
    with square brackets in them (TOML table names)."""
    asc = ('[[brick]]\nname = "ASC"\ncatalyst = "asc_dual_layer"\nsubstrate = "coated"\n'
           'cpsi = 400\nwall_mil = 4\nlength = "100 mm"\ndiameter = "600 mm"\ncells = 20\n'
           '[limits]\n')
    text = CASE.format(extra="").replace("[limits]\n", asc, 1)
    res = run_case(load_run_case(_case(tmp_path, text)))
    rise = res.cycle["GHG_CO2e_g_kWh"] / res.engine_out_cycle["GHG_CO2e_g_kWh"] - 1
    assert rise > 0.10
    warned = [w for w in res.warnings if "greenhouse-gas emission" in w]
    assert len(warned) == 1 and "N2O made in the train" in warned[0]
    quiet = text.replace("[limits]\n", "[limits]\nco2e_rise_warn_pct = 1000\n", 1)
    res2 = run_case(load_run_case(_case(tmp_path, quiet, "quiet.toml")))
    assert not [w for w in res2.warnings if "greenhouse-gas emission" in w]
    assert main(["run", str(_case(tmp_path, text, "print.toml"))]) == 0
    out = capsys.readouterr().out.replace("\n", " ")
    assert "no NH3 limit" in out and "[[limits.custom]]" in out


def test_numeric_mode_names_stay_unique_when_loads_repeat(tmp_path):
    """Numbered modes are shown by load ("100 %"); two custom modes at the same load keep their
    numbers ("1 (100 %)", "2 (100 %)"), so their per-mode limit rows stay apart (our rule)."""
    text = MEASURED.replace('name = "rated"', 'name = "1"').replace(
        'name = "idle"\nweight = 0.2\npower_pct = 0', 'name = "2"\nweight = 0.2\npower_pct = 100')
    text = text.replace("mass_flow_kg_h = [2600, 300]", "mass_flow_kg_h = [2600, 2500]")
    res = run_case(load_run_case(_case(tmp_path, text)))
    names = [m.name for m in res.modes]
    assert names == ["1 (100 %)", "2 (100 %)"], names
    per_mode = [r.mode for r in res.limits if r.mode is not None]
    assert len(per_mode) == len(set((r.mode, r.name) for r in res.limits
                                    if r.mode is not None))


def test_repeated_mode_name_refused(tmp_path):
    text = MEASURED.replace('name = "idle"', 'name = "rated"')
    with pytest.raises(InputError) as e:
        load_run_case(_case(tmp_path, text))
    assert "cycle.mode[1].name" in str(e.value) and "unique" in str(e.value)
