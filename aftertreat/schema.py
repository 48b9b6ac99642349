"""Every key a case file may hold, declared once: the case-file reference and the parsers' key sets.

Each key is one :class:`Key`: its table, name, type, unit (and unit-suffix alternatives such as
``length_mm`` next to ``length``), the values the parser accepts, its default and one sentence of
meaning. The parsers (:mod:`aftertreat.case`, :mod:`aftertreat.cyclecase`, :mod:`aftertreat.cycle`,
:mod:`aftertreat.limits`, :mod:`aftertreat.transient_run`) take their allowed-key sets from
:func:`keys`, and ``[sizing]`` its numeric bounds from :func:`bounds`, so the reference and the
validation cannot drift apart. The rules themselves stay in the parsers; ``tests/test_schema.py``
holds every range, choice and default written here against them.

Lists that come from data files or from code (shipped cycles, limit sets, catalysts, substrate
kinds, defaults held as constants, ...) are not typed in here: a text field names them as
``{name}`` and :func:`markdown` fills them in from :data:`_FROM_CODE` when the reference is
built, importing those modules only then (importing this module stays cheap).

``python -m aftertreat.schema`` prints the reference as Markdown; ``docs/case-file.md`` is that
output.
"""
from __future__ import annotations

import re
import sys
import warnings
from dataclasses import dataclass

from .combustion import FUELS
from .species import SPECIES

_ARGV = list(getattr(sys, "orig_argv", []))
if "-m" in _ARGV and _ARGV[_ARGV.index("-m") + 1:][:1] == ["aftertreat.schema"]:
    # `python -m aftertreat.schema`: the package imports this module (its parsers read the key
    # sets) before it runs as __main__; that is expected here and harmless, so say nothing
    warnings.filterwarnings("ignore", message="'aftertreat.schema' found in sys.modules",
                            category=RuntimeWarning)

__all__ = ["Key", "Range", "TABLES", "KEYS", "ITEM_TABLES", "ITEM_KEYS", "keys", "key",
           "table_keys", "item_keys", "bounds", "fill", "markdown"]

# ---- types of values ---------------------------------------------------------------------------
NUMBER = "number"
WHOLE = "whole number"
TEXT = "text"
BOOL = "true/false"
PER_MODE = "per mode"            # one number for every mode, or a list of one number per mode
QUANTITY = "quantity"            # a text with its unit, e.g. "700 mm"
NUMBERS = "number or list of numbers"
TEXTS = "list of text"
TABLE = "table"
TABLE_LIST = "list of tables"
MATRIX = "matrix"                # a list of lists of numbers, row by row
PATHS = "path or paths"          # a text, or a list of texts
VALUES = "values"                # a list of numbers, or a list of texts
MODE = "mode"                    # a whole number (position from 0) or a text (a name)

POINT, CYCLE = "point", "cycle"
BOTH = (POINT, CYCLE)

_TYPE_WORDS = {
    NUMBER: "number", WHOLE: "whole number", TEXT: "text", BOOL: "true or false",
    PER_MODE: "number, or list of one number per mode", QUANTITY: "quantity (text with unit)",
    NUMBERS: "number, or list of numbers", TEXTS: "list of texts", TABLE: "table",
    TABLE_LIST: "list of tables", MATRIX: "list of lists of numbers",
    PATHS: "text, or list of texts", VALUES: "list of numbers, or list of texts",
    MODE: "whole number or text",
}


def _num(v) -> str:
    """A bound as written in the reference: 100000, 2e6, 1e-6, 0.05."""
    s = f"{v:g}"
    return s.replace("e+0", "e").replace("e-0", "e-").replace("e+", "e")


@dataclass(frozen=True)
class Range:
    """A numeric range the parser enforces: ``lo``/``hi`` (None: unbounded), open or closed."""
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    hi_open: bool = False

    def __contains__(self, v) -> bool:
        if self.lo is not None and not (v > self.lo if self.lo_open else v >= self.lo):
            return False
        if self.hi is not None and not (v < self.hi if self.hi_open else v <= self.hi):
            return False
        return True

    def text(self) -> str:
        if self.lo is not None and self.hi is not None:
            return (("(" if self.lo_open else "[") + f"{_num(self.lo)}, {_num(self.hi)}"
                    + (")" if self.hi_open else "]"))
        if self.lo is not None:
            return (">" if self.lo_open else ">=") + f" {_num(self.lo)}"
        if self.hi is not None:
            return ("<" if self.hi_open else "<=") + f" {_num(self.hi)}"
        return ""


@dataclass(frozen=True)
class Key:
    """One key of a case file.

    ``table``: "" for the top level, else the table's dotted name, ``[]`` marking the items of a
    list of tables (``brick[]``). ``kind``: one of the types above. ``unit``: the unit of the
    value, of its range and of its default (for a quantity, the text may use any unit of
    ``dimension``). ``alts``: unit-suffix alternatives, ``(key, unit)``, each taking a plain
    number. ``allowed``: in words, what ``range`` and ``choices`` do not say (``{name}`` is filled
    in from the code when the reference is built). ``default``: in words, or ``default_value``
    (the value the parser takes when the key is absent). ``cases``: which kinds of case read it.
    ``key_set``: for a table whose accepted keys depend on another key (``engine_out`` on
    ``method``), which of its sets holds this key ("" = every set).
    """
    table: str
    name: str
    kind: str
    meaning: str
    unit: str = ""
    range: Range | None = None
    choices: tuple = ()
    allowed: str = ""
    default: str = ""
    default_value: object = None
    alts: tuple[tuple[str, str], ...] = ()
    dimension: str = ""
    example: str = ""
    cases: tuple[str, ...] = BOTH
    key_set: str = ""

    @property
    def names(self) -> tuple[str, ...]:
        """The key and its unit-suffix alternatives."""
        return (self.name,) + tuple(a for a, _ in self.alts)


# ---- the tables, in the order a case file is usually written ----------------------------------
#: (table, heading, what it holds)
TABLES: tuple[tuple[str, str, str], ...] = (
    ("", "Top level", "Keys outside any table, at the head of the file."),
    ("engine", "[engine]", "The engine or turbine behind the catalysts."),
    ("fuel", "[fuel]", "What the engine burns, as shares of the fuel energy."),
    ("cycle", "[cycle]", "The steady-state test cycle: a shipped one, or your own modes."),
    ("cycle.mode[]", "[[cycle.mode]]", "One mode of your own cycle; repeat the table for each "
     "mode, in cycle order."),
    ("engine_out", "[engine_out]", "The exhaust leaving the engine at each mode. Which keys are "
     "accepted depends on `method`: the common ones, plus those of the chosen method."),
    ("dosing", "[dosing]", "Reducing agent added upstream of the first brick."),
    ("exhaust", "[exhaust]", "The one exhaust state at the face of the first brick."),
    ("brick[]", "[[brick]]", "One catalyst brick; repeat the table for each brick, in flow "
     "order. The same keys serve point and duty-cycle cases."),
    ("limits", "[limits]", "The limits the tailpipe is checked against."),
    ("limits.custom[]", "[[limits.custom]]", "One limit of your own; repeat for each. The same "
     "keys describe the rows of the shipped limit sets."),
    ("sizing", "[sizing]", "Settings of `aftertreat size` (all optional)."),
    ("sizing.build.<kind>", "[sizing.build.<kind>]", "The lengths a brick of one substrate kind "
     "can be built in; `<kind>` is one of {kinds}. Each key overrides the shipped rule of that "
     "kind."),
    ("transient", "[transient]", "A run through time: a measured trace, or the modes of "
     "[cycle] held and ramped."),
    ("transient.dosing", "[transient.dosing]", "How the dosing follows the exhaust during a "
     "transient run."),
    ("study", "[study]", "A study of many cycle runs (`aftertreat study`, `aftertreat size "
     "--confidence`): design sweeps and Monte Carlo over stated uncertainties. Its items "
     "are the tables [[study.sweep]], [[study.uncertain]] and [[study.correlated]] below; "
     "docs/study.md explains the designs and the results."),
)

_ONLY_TRACE = "only with `trace`"


def _species_keys() -> list[Key]:
    """[exhaust] takes every species of :data:`aftertreat.species.SPECIES` in ppm or %."""
    extra = {
        "N2": "refused: N2 is the balance of the exhaust",
        "H2O": "below 100; always wet, whatever `basis` says",
        "O2": "on `basis`; once made dry with the water, at most the O2 of dry air "
              "({o2_dry_air} %)",
    }
    out = []
    for s in SPECIES:
        note = extra.get(s, "on `basis`")
        common = "; give each species once; all species together at most 100 %"
        out.append(Key(
            "exhaust", f"{s}_ppm", NUMBER, f"Amount of {s} in the exhaust.", unit="ppm",
            range=None if s == "N2" else Range(0.0),
            allowed=note + ("" if s == "N2" else common),
            default="the balance" if s == "N2" else "", default_value=None if s == "N2" else 0,
            alts=((f"{s}_pct", "%"),), cases=(POINT,)))
    return out


def _fuel_keys() -> list[Key]:
    """[fuel] takes a share of every fuel of :data:`aftertreat.combustion.FUELS`."""
    words = {"NH3": "ammonia", "H2": "hydrogen", "natural_gas": "natural gas (taken as methane)",
             "diesel": "diesel (pilot fuel)"}
    return [Key("fuel", f, NUMBER, f"Share of the fuel energy supplied as {words.get(f, f)}.",
                unit="-", range=Range(0.0, 1.0),
                allowed="the shares sum to 1 (within 1e-6)", default_value=0, cases=(CYCLE,))
            for f in FUELS]


KEYS: tuple[Key, ...] = tuple([
    # ---- top level ------------------------------------------------------------------------
    Key("", "title", TEXT, "A title for the terminal output, JSON and reports.",
        allowed="anything (not checked; written as text)",
        default="the file name without its extension"),
    Key("", "note", TEXT, "Free notes for whoever reads the file; the program does not use them.",
        allowed="anything (not checked, not read)", default="none"),
    Key("", "engine", TABLE, "The engine: application, rated power and speed.",
        default="required", cases=(CYCLE,)),
    Key("", "fuel", TABLE, "Fuel energy shares.", default="pure ammonia (`NH3 = 1`)",
        cases=(CYCLE,)),
    Key("", "cycle", TABLE, "The test cycle whose modes are evaluated.",
        default="required, except in a trace case (`[transient] trace` and no [cycle])",
        cases=(CYCLE,)),
    Key("", "engine_out", TABLE, "The engine-out exhaust at each mode.",
        default="required with [cycle]; refused in a trace case", cases=(CYCLE,)),
    Key("", "dosing", TABLE, "Reducing agent dosed before the first brick.",
        default='no dosing (`method = "none"`)', cases=(CYCLE,)),
    Key("", "exhaust", TABLE, "The exhaust at the face of the first brick.",
        default="required", cases=(POINT,)),
    Key("", "brick", TABLE_LIST, "The catalyst bricks, in flow order.",
        default="required: at least one [[brick]]"),
    Key("", "limits", TABLE, "Limit sets and limits of your own.", default="no limits",
        cases=(CYCLE,)),
    Key("", "sizing", TABLE, "Settings of `aftertreat size`.",
        default="the defaults below; refused in a trace case", cases=(CYCLE,)),
    Key("", "transient", TABLE, "A run through time.", default="none (no transient run)",
        cases=(CYCLE,)),
    Key("", "study", TABLE, "A study: sweeps and uncertainties over many cycle runs.",
        default="none; refused in a trace case", cases=(CYCLE,)),
    # ---- [engine] -------------------------------------------------------------------------
    Key("engine", "application", TEXT, "The kind of installation, shown with the results.",
        allowed="one of {applications}", default="required", cases=(CYCLE,)),
    Key("engine", "rated_power_kW", NUMBER, "Rated power; every mode's power is a share of it.",
        unit="kW", range=Range(0.0, 2e6, lo_open=True), default="required", cases=(CYCLE,)),
    Key("engine", "rated_speed_rpm", NUMBER, "Rated speed, which sets the IMO NOx limit.",
        unit="rpm", range=Range(0.0, lo_open=True),
        default="none; a limit row with an IMO tier needs it (checked when the limits are "
                "evaluated)", cases=(CYCLE,)),
    Key("engine", "name", TEXT, "A name for the engine.",
        allowed="anything (not checked; written as text)", default="empty", cases=(CYCLE,)),
    # ---- [fuel] ---------------------------------------------------------------------------
    *_fuel_keys(),
    Key("fuel", "cracked_H2", BOOL, "The hydrogen is cracked on board from ammonia, so the "
        "nitrogen of that ammonia joins the exhaust.",
        allowed="true or false", default_value=False, cases=(CYCLE,)),
    # ---- [cycle] --------------------------------------------------------------------------
    Key("cycle", "iso8178", TEXT, "Key of a shipped test cycle.",
        allowed="one of {cycles} (upper or lower case); give `iso8178` or `mode`, not both",
        default="required unless [[cycle.mode]] is given", cases=(CYCLE,)),
    Key("cycle", "mode", TABLE_LIST, "Your own modes (see [[cycle.mode]]).",
        allowed="a non-empty list; give `iso8178` or `mode`, not both",
        default="required unless `iso8178` is given", cases=(CYCLE,)),
    # ---- [[cycle.mode]] (order: the parser lists them in this order) ---------------------
    Key("cycle.mode[]", "name", TEXT, "A label for the mode in results and --set paths.",
        allowed="unique within the cycle; written as text",
        default="the mode's number (1, 2, ...)", cases=(CYCLE,)),
    Key("cycle.mode[]", "weight", NUMBER, "Weighting factor of the mode in the cycle values.",
        unit="-", range=Range(0.0, lo_open=True),
        allowed="finite; the weights of all modes sum to 1 (within {weight_tol})",
        default="required", cases=(CYCLE,)),
    Key("cycle.mode[]", "power_pct", NUMBER, "Power of the mode.", unit="% of rated power",
        range=Range(0.0), allowed="finite; give exactly one of `power_pct` and `torque_pct`",
        default="required unless `torque_pct` is given", cases=(CYCLE,)),
    Key("cycle.mode[]", "torque_pct", NUMBER, "Torque of the mode; its power is taken as "
        "torque_pct x speed_pct / 10000 of rated power (a flat torque curve).",
        unit="% of the maximum torque at the mode speed", range=Range(0.0),
        allowed="finite; give exactly one of `power_pct` and `torque_pct`",
        default="required unless `power_pct` is given", cases=(CYCLE,)),
    Key("cycle.mode[]", "speed_pct", NUMBER, "Speed of the mode.", unit="% of rated speed",
        range=Range(0.0), allowed="finite; counts over `speed` when both are given",
        default="the speed point named by `speed`, else 100", cases=(CYCLE,)),
    Key("cycle.mode[]", "speed", TEXT, "A named speed point instead of `speed_pct`.",
        allowed="one of {speed_points}", default="none", cases=(CYCLE,)),
    Key("cycle.mode[]", "cap_exempt", BOOL, "The mode is exempt from per-mode caps of limit "
        "rows that apply exemptions.",
        allowed="true or false", default_value=False, cases=(CYCLE,)),
    # ---- [engine_out]: common keys --------------------------------------------------------
    Key("engine_out", "method", TEXT, "How the engine-out exhaust is given: worked out from "
        "fuel, efficiency and lambda by an atom balance, or as measured flows and "
        "concentrations.", choices=("combustion", "measured"), default_value="combustion",
        cases=(CYCLE,)),
    Key("engine_out", "T_C", PER_MODE, "Exhaust temperature at the engine outlet.", unit="degC",
        range=Range(0.0, 900.0), default="required", cases=(CYCLE,)),
    Key("engine_out", "p_kPa", PER_MODE, "Exhaust pressure (absolute).", unit="kPa",
        range=Range(50.0, 1000.0), default="{p_atm_kPa}", cases=(CYCLE,)),
    Key("engine_out", "NOx_ppm", PER_MODE, "NOx (NO + NO2) leaving the engine.", unit="ppm",
        range=Range(0.0, 1e5), allowed="wet for `combustion`; on `basis` for `measured`",
        default="required", cases=(CYCLE,)),
    Key("engine_out", "NO2_fraction", PER_MODE, "Share of NO2 in the NOx.", unit="mol/mol",
        range=Range(0.0, 1.0), default_value=0.05, cases=(CYCLE,)),
    Key("engine_out", "NH3_ppm", PER_MODE, "Unburned ammonia leaving the engine.", unit="ppm",
        range=Range(0.0, 1e5), allowed="wet for `combustion`; on `basis` for `measured`",
        default_value=0, cases=(CYCLE,)),
    Key("engine_out", "N2O_ppm", PER_MODE, "N2O leaving the engine.", unit="ppm",
        range=Range(0.0, 1e5), allowed="wet for `combustion`; on `basis` for `measured`",
        default_value=0, cases=(CYCLE,)),
    Key("engine_out", "H2_ppm", PER_MODE, "Unburned hydrogen leaving the engine.", unit="ppm",
        range=Range(0.0, 1e5), allowed="wet for `combustion`; on `basis` for `measured`",
        default_value=0, cases=(CYCLE,)),
    # ---- [engine_out], method = "combustion" ----------------------------------------------
    Key("engine_out", "brake_efficiency", PER_MODE, "Brake power over fuel power (lower heating "
        "value); it sets the fuel flow.", unit="-", range=Range(0.05, 0.7),
        allowed="checked at idle modes too, where it is not used",
        default='required for `method = "combustion"`', cases=(CYCLE,), key_set="combustion"),
    Key("engine_out", "lambda", PER_MODE, "Air supplied over the air needed to burn all the fuel.",
        unit="-", range=Range(1.0, 10.0), default='required for `method = "combustion"`',
        cases=(CYCLE,), key_set="combustion"),
    Key("engine_out", "intake_humidity_g_kg", PER_MODE, "Water carried in by the intake air.",
        unit="g water per kg dry air", range=Range(0.0, 60.0), default_value=10.71,
        cases=(CYCLE,), key_set="combustion"),
    Key("engine_out", "idle_fuel_pct", NUMBER, "Fuel energy flow of an idle (zero-power) mode, "
        "as a share of that at the highest-power mode.",
        unit="% of the fuel energy flow at the highest-power mode",
        range=Range(0.0, 50.0, lo_open=True), allowed="one number for every idle mode",
        default="{idle_fuel_pct}", cases=(CYCLE,), key_set="combustion"),
    # ---- [engine_out], method = "measured" ------------------------------------------------
    Key("engine_out", "mass_flow_kg_h", PER_MODE, "Exhaust mass flow.", unit="kg/h",
        range=Range(1e-6), allowed="finite", default='required for `method = "measured"`',
        cases=(CYCLE,), key_set="measured"),
    Key("engine_out", "O2_pct", PER_MODE, "Oxygen in the exhaust.", unit="%",
        range=Range(0.0, 21.0),
        allowed="on `basis`; once made dry with `H2O_pct`, at most the O2 of dry air "
                "({o2_dry_air} %), mode by mode", default='required for `method = "measured"`',
        cases=(CYCLE,), key_set="measured"),
    Key("engine_out", "H2O_pct", PER_MODE, "Water in the exhaust.", unit="%",
        range=Range(0.0, 60.0), allowed="always wet, whatever `basis` says",
        default='required for `method = "measured"`', cases=(CYCLE,), key_set="measured"),
    Key("engine_out", "basis", TEXT, "Whether O2_pct and the ppm values are on the wet or the "
        "dry exhaust.", choices=("wet", "dry"), default_value="wet", cases=(CYCLE,),
        key_set="measured"),
    # ---- [dosing] -------------------------------------------------------------------------
    Key("dosing", "method", TEXT, "The reducing agent: none, ammonia gas (from the fuel tank) or "
        "urea solution.", choices=("none", "NH3", "urea"), default_value="none",
        cases=(CYCLE,)),
    Key("dosing", "ANR", PER_MODE, "Ammonia to NOx ratio at the train inlet, counting the "
        "engine's own ammonia; with `[sizing] choose_ANR` the most the sizing may dose.",
        unit="mol NH3 per mol NOx", range=Range(0.0, 3.0),
        allowed="checked even with `method = \"none\"`",
        default='required unless `method = "none"` (then 0)', cases=(CYCLE,)),
    Key("dosing", "urea_mass_fraction", NUMBER, "Urea content of the urea solution.",
        unit="kg urea per kg solution", range=Range(0.0, 0.6, lo_open=True, hi_open=True),
        allowed='used with `method = "urea"`, checked always', default_value=0.325,
        cases=(CYCLE,)),
    # ---- [exhaust] (point cases) ----------------------------------------------------------
    Key("exhaust", "mass_flow", QUANTITY, "Exhaust mass flow.", unit="kg/s",
        dimension="mass flow", example='"9000 kg/h"', range=Range(0.0, lo_open=True),
        allowed="give exactly one of `mass_flow` and `molar_flow`",
        default="required unless `molar_flow` is given", alts=(("mass_flow_kg_s", "kg/s"),),
        cases=(POINT,)),
    Key("exhaust", "molar_flow", QUANTITY, "Exhaust molar flow.", unit="mol/s",
        dimension="molar flow", example='"83 mol/s"', range=Range(0.0, lo_open=True),
        allowed="give exactly one of `mass_flow` and `molar_flow`",
        default="required unless `mass_flow` is given", alts=(("molar_flow_mol_s", "mol/s"),),
        cases=(POINT,)),
    Key("exhaust", "T", QUANTITY, "Exhaust temperature at the first brick.", unit="degC",
        dimension="temperature", example='"380 degC"', range=Range(0.0, 900.0),
        default="required", alts=(("T_C", "degC"),), cases=(POINT,)),
    Key("exhaust", "p", QUANTITY, "Exhaust pressure (absolute).", unit="kPa",
        dimension="pressure", example='"104 kPa"', range=Range(0.0, lo_open=True),
        default="{p_atm_kPa}", alts=(("p_kPa", "kPa"),), cases=(POINT,)),
    Key("exhaust", "basis", TEXT, "Whether the ppm and % values (except H2O) are on the wet or "
        "the dry exhaust.", choices=("wet", "dry"), default_value="wet", cases=(POINT,)),
    *_species_keys(),
    # ---- [[brick]] ------------------------------------------------------------------------
    Key("brick[]", "name", TEXT, "A label for results, and the name --set paths may use.",
        allowed="anything (written as text)", default="brick 1, brick 2, ... (its position)"),
    Key("brick[]", "catalyst", TEXT, "The catalyst: a shipped catalyst file, or one of your own.",
        allowed="a shipped key, one of {catalysts}; or the path of a catalyst file, relative "
                "to the case file", default="required"),
    Key("brick[]", "substrate", TEXT, "The kind of honeycomb or plate the catalyst sits on.",
        allowed="one of {kinds}; a layered catalyst needs `coated`",
        default="`coated` for a layered catalyst, else required"),
    Key("brick[]", "cpsi", NUMBER, "Cell density of the honeycomb.", unit="cells per square inch",
        range=Range(0.0, lo_open=True),
        default="required for `coated` and `extruded`; refused for `plate`"),
    Key("brick[]", "wall", QUANTITY, "Wall thickness of the honeycomb (for `coated`, the bare "
        "support under the washcoat).", unit="mm", dimension="length", example='"0.7 mm"',
        range=Range(0.0, lo_open=True),
        allowed="thinner than the cell pitch; give one of `wall`, `wall_mm`, `wall_mil`",
        default="required for `coated` and `extruded`; refused for `plate`",
        alts=(("wall_mm", "mm"), ("wall_mil", "mil"))),
    Key("brick[]", "washcoat_um", NUMBERS, "Washcoat thickness of each catalyst layer, gas side "
        "first.", unit="um",
        allowed="one value per catalyst layer, each > 0, together less than half the open "
                "cell; `coated` only (refused for the other kinds)",
        default="the layer thicknesses of the catalyst file; required if it gives none"),
    Key("brick[]", "gap", QUANTITY, "Clear gap between neighbouring plates.", unit="mm",
        dimension="length", example='"4 mm"', range=Range(0.0, lo_open=True),
        default="required for `plate`; refused otherwise", alts=(("gap_mm", "mm"),)),
    Key("brick[]", "plate", QUANTITY, "Thickness of one catalytic plate.", unit="mm",
        dimension="length", example='"0.8 mm"', range=Range(0.0, lo_open=True),
        default="required for `plate`; refused otherwise", alts=(("plate_mm", "mm"),)),
    Key("brick[]", "length", QUANTITY, "Length of the brick in the flow direction.", unit="mm",
        dimension="length", example='"700 mm"', range=Range(0.0, lo_open=True),
        default="required", alts=(("length_mm", "mm"),)),
    Key("brick[]", "diameter", QUANTITY, "Diameter of the brick face (for a duct of another "
        "shape, the circle of the same area).", unit="mm", dimension="length",
        example='"1300 mm"', range=Range(0.0, lo_open=True), default="required",
        alts=(("diameter_mm", "mm"),)),
    Key("brick[]", "activity", NUMBER, "Multiplier on the catalytic rates for ageing "
        "(1 = fresh).", unit="-", range=Range(0.0, 2.0, lo_open=True), default_value=1.0),
    Key("brick[]", "washcoat_model", TEXT, "How diffusion inside the catalyst layers is treated.",
        allowed="one of {washcoat_models}; `effectiveness` holds one layer only",
        default="`effectiveness` for one layer, `resolved` for more"),
    Key("brick[]", "sherwood", TEXT, "The correlation for mass and heat transfer from the gas "
        "to the channel walls.", allowed="one of {sherwood}", default="{brick_sherwood}"),
    Key("brick[]", "cells", WHOLE, "Number of finite volumes along the brick.",
        range=Range(2), default="{brick_cells}"),
    Key("brick[]", "grid", TEXT, "How the finite volumes are spaced along the brick.",
        allowed="one of {grids}", default="{brick_grid}"),
    Key("brick[]", "nodes_per_layer", WHOLE, "Finite volumes across each catalyst layer in the "
        "resolved washcoat model.", range=Range(1), default="{brick_nodes_per_layer}"),
    Key("brick[]", "heat_loss_W_m2K", NUMBER, "Heat loss coefficient from the can to its "
        "surroundings, on the can surface.", unit="W/(m2 K)", range=Range(0.0),
        default_value=0.0),
    Key("brick[]", "heat_capacity_kJ_m3K", NUMBER, "Heat capacity of the brick per volume of "
        "brick, for transient runs.", unit="kJ/(m3 K)", range=Range(10.0, 10000.0),
        default="(1 - open frontal area) x the heat capacity of the solid of the substrate "
                "kind: "
                "{solid_heat_capacity}"),
    # ---- [limits] -------------------------------------------------------------------------
    Key("limits", "sets", TEXTS, "Shipped limit sets to check.", allowed="keys among "
        "{limit_sets}", default="none", cases=(CYCLE,)),
    Key("limits", "gwp", TEXT, "Which 100-year warming potential of N2O turns N2O into CO2e.",
        allowed="one of {gwp}", default_value="AR6", cases=(CYCLE,)),
    Key("limits", "custom", TABLE_LIST, "Limits of your own (see [[limits.custom]]).",
        allowed="a non-empty list", default="none", cases=(CYCLE,)),
    Key("limits", "co2e_rise_warn_pct", NUMBER, "A run warns when the train adds more CO2e "
        "(N2O) over the cycle than this share of the engine-out CO2e.",
        unit="% of the engine-out CO2e", range=Range(0.0, 1000.0), default="{co2e_warn}",
        cases=(CYCLE,)),
    # ---- [[limits.custom]] (order: the parser lists them in this order) ------------------
    Key("limits.custom[]", "name", TEXT, "A label for the limit in results.",
        allowed="anything (written as text)", default="the quantity", cases=(CYCLE,)),
    Key("limits.custom[]", "quantity", TEXT, "What is limited.",
        allowed="one of {quantities}", default="required", cases=(CYCLE,)),
    Key("limits.custom[]", "value", NUMBER, "The limit, in the quantity's unit.",
        unit="the quantity's unit", range=Range(0.0),
        allowed="finite; give exactly one of `value` and `imo_tier`",
        default="required unless `imo_tier` is given", cases=(CYCLE,)),
    Key("limits.custom[]", "unit", TEXT, "The quantity's unit, written out as a check.",
        allowed="exactly the unit of the quantity (listed with `quantity`)",
        default="the quantity's unit", cases=(CYCLE,)),
    Key("limits.custom[]", "scope", TEXT, "Check the weighted cycle value, or every mode.",
        choices=("cycle", "mode"), allowed="`cycle` for g/kWh quantities only",
        default="`cycle` for g/kWh quantities, `mode` for the others", cases=(CYCLE,)),
    Key("limits.custom[]", "o2_ref_pct", NUMBER, "The reference O2 the dry concentration is "
        "corrected to.", unit="% O2, dry",
        allowed="within [0, {o2_air_custom}) (the O2 of air of custom rows); read for ppmvd and "
                "mg/Nm3 quantities", default="required for ppmvd and mg/Nm3 quantities",
        cases=(CYCLE,)),
    Key("limits.custom[]", "source", TEXT, "Where the limit comes from.",
        allowed="anything (written as text)", default="required", cases=(CYCLE,)),
    Key("limits.custom[]", "clause", TEXT, "The clause of the source.",
        allowed="anything (written as text)", default="empty", cases=(CYCLE,)),
    Key("limits.custom[]", "confidence", TEXT, "How sure the source is.",
        allowed="anything (written as text)", default="user input", cases=(CYCLE,)),
    Key("limits.custom[]", "imo_tier", TEXT, "An IMO NOx tier whose speed-dependent formula gives "
        "the limit, instead of `value`.",
        allowed="one of {imo_tiers} (also 1, 2, 3 or \"Tier II\"); checked when the limits are "
                "evaluated, with `engine.rated_speed_rpm`", default="none", cases=(CYCLE,)),
    Key("limits.custom[]", "factor", NUMBER, "Multiplier on the limit (e.g. 1.5 for a per-mode "
        "cap of 1.5 x the weighted limit).", unit="-", range=Range(0.0, lo_open=True),
        default_value=1.0, cases=(CYCLE,)),
    Key("limits.custom[]", "apply_exemptions", BOOL, "Skip modes marked `cap_exempt` in a "
        "per-mode check.", allowed="true or false", default_value=False, cases=(CYCLE,)),
    Key("limits.custom[]", "min_load_pct", NUMBER, "Per-mode checks skip modes below this "
        "power.", unit="% of rated power", range=Range(0.0, 100.0),
        default="none (every mode is checked)", cases=(CYCLE,)),
    # ---- [sizing] -------------------------------------------------------------------------
    Key("sizing", "design_margin", NUMBER, "Every limit is tightened by this fraction for the "
        "sizing (0.1 = 10 %).", unit="-", range=Range(0.0, 0.5), default_value=0.0,
        cases=(CYCLE,)),
    Key("sizing", "dp_max_kPa", NUMBER, "Back-pressure budget of the whole train at its worst "
        "mode.", unit="kPa", range=Range(0.01, 100.0), default="none (no budget)",
        cases=(CYCLE,)),
    Key("sizing", "max_length_mm", NUMBER, "Space envelope: the most the train may measure in "
        "length, all bricks together.", unit="mm", range=Range(10.0, 1e5),
        default="none (no limit)", cases=(CYCLE,)),
    Key("sizing", "max_diameter_mm", NUMBER, "Space envelope: the largest brick diameter.",
        unit="mm", range=Range(10.0, 1e5), default="none (no limit)", cases=(CYCLE,)),
    Key("sizing", "face_velocity_m_s", NUMBER, "Diameter rule: the diameter that gives this "
        "velocity at the brick face at the largest exhaust flow.", unit="m/s",
        range=Range(0.1, 100.0), allowed="not with `ghsv_per_h`",
        default="none (the case's diameter)", cases=(CYCLE,)),
    Key("sizing", "scr_length_max_mm", NUMBER, "Longest SCR section the search tries.", unit="mm",
        range=Range(10.0, 1e5), default_value=4000.0, cases=(CYCLE,)),
    Key("sizing", "asc_length_max_mm", NUMBER, "Longest slip-catalyst section the search tries.",
        unit="mm", range=Range(10.0, 1e5), default_value=1000.0, cases=(CYCLE,)),
    Key("sizing", "ghsv_per_h", NUMBER, "Diameter rule: the SCR section gets the volume that "
        "gives this gas hourly space velocity (normal volume flow / volume) at the largest flow, "
        "with the shape set by `length_to_diameter`.", unit="1/h",
        range=Range(100.0, 1e6), allowed="not with `face_velocity_m_s`",
        default="none (the case's diameter)", cases=(CYCLE,)),
    Key("sizing", "length_to_diameter", NUMBER, "Length over diameter of the SCR section of the "
        "GHSV rule.", unit="-", range=Range(0.05, 20.0), allowed="only with `ghsv_per_h`",
        default_value=1.0, cases=(CYCLE,)),
    Key("sizing", "diameter_from_dp", BOOL, "Raise the diameter until the train meets "
        "`dp_max_kPa` (at most to `max_diameter_mm`).",
        allowed="true or false; true needs `dp_max_kPa`", default_value=False, cases=(CYCLE,)),
    Key("sizing", "N2O_max_g_kWh", NUMBER, "Cap on N2O over the cycle, for the sizing only "
        "(with the design margin).", unit="g/kWh", range=Range(0.0, 100.0), default="none",
        cases=(CYCLE,)),
    Key("sizing", "CO2e_max_g_kWh", NUMBER, "Cap on CO2 plus N2O as CO2e over the cycle, for the "
        "sizing only (with the design margin).", unit="g/kWh", range=Range(0.0, 1e5),
        default="none", cases=(CYCLE,)),
    Key("sizing", "CO2e_rise_max_pct", NUMBER, "Cap on the CO2e the train may add over the "
        "cycle, for the sizing only.", unit="% of the engine-out CO2e",
        range=Range(0.0, 1000.0), default="none", cases=(CYCLE,)),
    Key("sizing", "objective", TEXT, "What the sizing minimises: catalyst volume, or the cycle "
        "CO2e within the smallest volume (plus `volume_allowance_pct`).",
        allowed="one of {objectives}", default_value="volume", cases=(CYCLE,)),
    Key("sizing", "volume_allowance_pct", NUMBER, "Extra volume the CO2e objective may use "
        "beyond the smallest compliant train.", unit="% of the smallest volume",
        range=Range(0.0, 100.0), allowed='only with `objective = "CO2e"`',
        default_value=0.0, cases=(CYCLE,)),
    Key("sizing", "choose_ANR", BOOL, "With dosing, choose the ANR of each mode from its NOx "
        "target plus `ANR_excess`, at most the [dosing] ANR.", allowed="true or false",
        default_value=True, cases=(CYCLE,)),
    Key("sizing", "ANR_excess", NUMBER, "Ammonia dosed beyond the NOx target when the ANR is "
        "chosen.", unit="mol NH3 per mol NOx", range=Range(0, 0.5),
        default_value=0.05, cases=(CYCLE,)),
    Key("sizing", "cost_per_L", TABLE, "Catalyst cost per litre, for the cost of the sized "
        "train.", unit="your currency per litre",
        allowed="catalyst = number >= 0, keyed by the `catalyst` a [[brick]] of the case "
                "names", default="none",
        cases=(CYCLE,)),
    Key("sizing", "build", TABLE, "Buildable brick lengths per substrate kind (see "
        "[sizing.build.<kind>]).", allowed="one table per kind, among {kinds}",
        default="the shipped rules", cases=(CYCLE,)),
    # ---- [sizing.build.<kind>] (aftertreat/build.py; order: its _KEYS) -------------------
    Key("sizing.build.<kind>", "step_mm", NUMBER, "Bricks are built in whole multiples of this "
        "length.", unit="mm", range=Range(0.0, 1e5, lo_open=True),
        allowed="at least one whole step must lie within [`min_mm`, `max_mm`]",
        default="{build_step_mm}", cases=(CYCLE,)),
    Key("sizing.build.<kind>", "min_mm", NUMBER, "Shortest brick that can be built.", unit="mm",
        range=Range(0.0, 1e5, lo_open=True), default="{build_min_mm}", cases=(CYCLE,)),
    Key("sizing.build.<kind>", "max_mm", NUMBER, "Longest brick that can be built.", unit="mm",
        range=Range(0.0, 1e5, lo_open=True), default="{build_max_mm}", cases=(CYCLE,)),
    Key("sizing.build.<kind>", "L_D_min", NUMBER, "Smallest length over diameter of one brick.",
        unit="-", range=Range(0.0, 50.0, lo_open=True), allowed="at most `L_D_max`",
        default="none", cases=(CYCLE,)),
    Key("sizing.build.<kind>", "L_D_max", NUMBER, "Largest length over diameter of one brick.",
        unit="-", range=Range(0.0, 50.0, lo_open=True), allowed="at least `L_D_min`",
        default="none", cases=(CYCLE,)),
    Key("sizing.build.<kind>", "min_layers", WHOLE, "Fewest bricks of this kind in a sized "
        "section.", range=Range(1, 20), allowed="at most `max_layers`",
        default="the case's number of bricks in the section", cases=(CYCLE,)),
    Key("sizing.build.<kind>", "max_layers", WHOLE, "Most bricks of this kind in a sized section.",
        range=Range(1, 20), allowed="at least `min_layers`",
        default="the case's number of bricks in the section", cases=(CYCLE,)),
    # ---- [transient] ----------------------------------------------------------------------
    Key("transient", "trace", TEXT, "A CSV time trace of the engine-out exhaust; its header "
        "names each column and its unit.",
        allowed="an existing file, relative to the case file (or an absolute path)",
        default="none: step through the modes of [cycle]", cases=(CYCLE,)),
    Key("transient", "basis", TEXT, "Whether the trace's O2 and ppm columns are on the wet or "
        "the dry exhaust (its H2O is always wet).",
        allowed='"dry" or "wet" (checked when the trace is read); ' + _ONLY_TRACE,
        default_value="dry", cases=(CYCLE,)),
    Key("transient", "columns", TABLE, "The trace's column names where they differ from ours.",
        allowed="our name = your column header, our names among {trace_quantities} (checked "
                "when the trace is read); " + _ONLY_TRACE,
        default="our names", cases=(CYCLE,)),
    Key("transient", "zero_columns", TEXTS, "Species the trace leaves out because the engine "
        "emits none (otherwise their columns are required).",
        allowed="species among {declare_zero}; " + _ONLY_TRACE, default="none",
        cases=(CYCLE,)),
    Key("transient", "hold_s", NUMBER, "Without a trace: how long each mode of [cycle] is held.",
        unit="s", range=Range(1.0, 1e6), default_value=300.0, cases=(CYCLE,)),
    Key("transient", "ramp_s", NUMBER, "Without a trace: the linear ramp between modes.",
        unit="s", range=Range(0.0, 1e5), default_value=30.0, cases=(CYCLE,)),
    Key("transient", "dt_s", NUMBER, "Without a trace: the time step (a trace keeps its own "
        "times).", unit="s", range=Range(0.01, 600.0), default_value=1.0, cases=(CYCLE,)),
    Key("transient", "start", TEXT, "The state at time zero: in balance with the first inlet, "
        "or clean bricks without stored ammonia.", choices=("steady", "clean"),
        default_value="steady", cases=(CYCLE,)),
    Key("transient", "T_start_C", NUMBER, "Temperature of clean bricks at time zero.",
        unit="degC", range=Range(0.0, 900.0), allowed='used with `start = "clean"`',
        default="the first inlet temperature", cases=(CYCLE,)),
    Key("transient", "conduction", BOOL, "Include heat conduction along the brick solid.",
        allowed="true or false", default_value=False, cases=(CYCLE,)),
    Key("transient", "dosing", TABLE, "The dosing control (see [transient.dosing]).",
        default="fixed control", cases=(CYCLE,)),
    # ---- [transient.dosing] ---------------------------------------------------------------
    Key("transient.dosing", "control", TEXT, "How the dosed ammonia is set: the case's ANR per "
        "mode, a map of ANR against temperature, or the map plus a correction that holds a "
        "target of stored ammonia.", allowed="one of {controls}; `map` and `storage` need "
        '[dosing] `method = "NH3"` or `"urea"`', default_value="fixed", cases=(CYCLE,)),
    Key("transient.dosing", "ANR_map", TABLE, "ANR against inlet temperature, for `map` and "
        "`storage` control.", allowed="`{ T_C = [...], ANR = [...] }`: lists of the same "
        "length (at least 1), T_C rising within 0..900 degC, ANR within [0, 3]",
        default="{default_anr_map}", cases=(CYCLE,)),
    Key("transient.dosing", "target_fraction", TABLE, "Target stored ammonia against inlet "
        "temperature, as a fraction of the SCR bricks' capacity, for `storage` control.",
        allowed="`{ T_C = [...], fraction = [...] }`: lists of the same length (at least 1), "
                "T_C rising within 0..900 degC, fraction within [0, 1]",
        default="{default_target}", cases=(CYCLE,)),
    Key("transient.dosing", "response_s", NUMBER, "Time over which `storage` control corrects "
        "the stored ammonia towards its target.", unit="s", range=Range(1.0, 1e4),
        default_value=30.0, cases=(CYCLE,)),
    Key("transient.dosing", "ANR_max", NUMBER, "The most `storage` control may dose.",
        unit="mol NH3 per mol NOx", range=Range(0.0, 3.0), default_value=1.5, cases=(CYCLE,)),
    # ---- [study] (aftertreat/study_spec.py) ----------------------------------------------
    Key("study", "design", TEXT, "How the samples are placed: independent Monte Carlo draws, a "
        "Latin hypercube, a scrambled Sobol sequence arranged for Sobol indices, or a full "
        "grid of the sweep levels (each point repeated for the Monte Carlo draws of the "
        "uncertain inputs, the same draws at every point).", choices=("monte_carlo", "lhs",
                                                                        "sobol", "grid"),
        default='`"monte_carlo"`', cases=(CYCLE,)),
    Key("study", "samples", WHOLE, "Monte Carlo or Latin-hypercube samples; the base n of a "
        "Sobol design (n (k + 2) runs for k inputs); the draws per grid point of a grid.",
        range=Range(1, 10_000_000), allowed="a power of 2 for `sobol`",
        default="{study_samples}", cases=(CYCLE,)),
    Key("study", "seed", WHOLE, "Seed of the random draws; a sample's values depend only on "
        "the seed and its index, and every row records it.", range=Range(0, 2 ** 63 - 1),
        default="{study_seed}", cases=(CYCLE,)),
    Key("study", "chunk_size", WHOLE, "Samples sent to a worker at a time (it changes no value).",
        range=Range(1, 100_000), default="from the number of samples: about 64 chunks, at most "
        "{study_chunk_max} samples each", cases=(CYCLE,)),
    Key("study", "sweep", TABLE_LIST, "Design variables (see [[study.sweep]]).",
        default="none", cases=(CYCLE,)),
    Key("study", "uncertain", TABLE_LIST, "Uncertain inputs with their distributions (see "
        "[[study.uncertain]]).", default="none", cases=(CYCLE,)),
    Key("study", "correlated", TABLE_LIST, "Catalyst parameters drawn together from a "
        "multivariate normal (see [[study.correlated]]).", default="none", cases=(CYCLE,)),
])

# ---- items of the [study] lists ---------------------------------------------------------------
# These lists of tables are read by aftertreat/study_spec.py, which refuses any other key by
# name; they are documented here with the same Key records and rendered after [study].
_PATH = ("the dotted path of a case value, as `--set` takes it (list items by position or "
         "name), or `catalyst.<key>.<reaction>.k_ref|ln_k_ref|E_kJ_mol` or "
         "`catalyst.<key>.site.<site>.capacity_mol_m3`; or a list of paths that take the same "
         "value; checked against the case when it is read")
_HOW = ("`set`: the value replaces the case value; `scale`: it multiplies it; `shift`: it is "
        "added to it (a per-mode list at every mode, or at `mode`)")
#: (table, heading, what it holds)
ITEM_TABLES: tuple[tuple[str, str, str], ...] = (
    ("study.sweep[]", "[[study.sweep]]", "One design variable of a study; repeat for each."),
    ("study.uncertain[]", "[[study.uncertain]]", "One uncertain input of a study, with its "
     "distribution; repeat for each. The parameters a distribution takes: {distributions}."),
    ("study.correlated[]", "[[study.correlated]]", "Catalyst parameters drawn together from a "
     "multivariate normal, e.g. the estimate and covariance of a catalyst fit."),
)


def _item_common(t: str) -> list[Key]:
    return [
        Key(t, "path", PATHS, "What the item changes.", allowed=_PATH, default="required",
            cases=(CYCLE,)),
        Key(t, "how", TEXT, "How the value acts on the case value.", choices=("set", "scale",
                                                                             "shift"),
            allowed=_HOW, default='`"set"`', cases=(CYCLE,)),
        Key(t, "mode", MODE, "Change a per-mode value at this mode only.",
            allowed="a mode position from 0 (a number) or a mode name of the cycle",
            default="every mode", cases=(CYCLE,)),
        Key(t, "unit", TEXT, "Unit written after a value that is set, for quantities.",
            allowed='e.g. `"mm"`; only with `how = "set"`', default="none", cases=(CYCLE,)),
        Key(t, "name", TEXT, "The item's input column in the dataset (`x.<name>`).",
            allowed="distinct from the other items'", default="the path, with `_scale`, "
            "`_shift`, `_<unit>` and the mode added", cases=(CYCLE,)),
    ]


ITEM_KEYS: tuple[Key, ...] = tuple([
    *_item_common("study.sweep[]"),
    Key("study.sweep[]", "values", VALUES, "The values to try (numbers, or texts such as "
        "catalyst keys).", allowed="a non-empty list; give `values` or `lo` and `hi`",
        default="none", cases=(CYCLE,)),
    Key("study.sweep[]", "lo", NUMBER, "Low end of the range.", unit="the value's unit",
        allowed="below `hi`", default="none", cases=(CYCLE,)),
    Key("study.sweep[]", "hi", NUMBER, "High end of the range.", unit="the value's unit",
        allowed="above `lo`", default="none", cases=(CYCLE,)),
    Key("study.sweep[]", "points", WHOLE, "Levels from `lo` to `hi` on a grid.",
        range=Range(2, 10000), allowed='only with `design = "grid"`',
        default="{study_points}", cases=(CYCLE,)),
    *_item_common("study.uncertain[]"),
    Key("study.uncertain[]", "distribution", TEXT, "The distribution of the value.",
        choices=("normal", "lognormal", "uniform", "triangular"), default="required",
        cases=(CYCLE,)),
    Key("study.uncertain[]", "mean", NUMBER, "Mean of a normal distribution.",
        default="required for `normal`", cases=(CYCLE,)),
    Key("study.uncertain[]", "sd", NUMBER, "Standard deviation of a normal distribution.",
        range=Range(0.0), default="required for `normal`", cases=(CYCLE,)),
    Key("study.uncertain[]", "median", NUMBER, "Median of a lognormal distribution.",
        range=Range(0.0, lo_open=True), default="required for `lognormal`", cases=(CYCLE,)),
    Key("study.uncertain[]", "sigma", NUMBER, "Standard deviation of ln x of a lognormal "
        "distribution.", range=Range(0.0), default="required for `lognormal`",
        cases=(CYCLE,)),
    Key("study.uncertain[]", "lo", NUMBER, "Low end of a uniform or triangular distribution.",
        allowed="below `hi`", default="required for `uniform` and `triangular`",
        cases=(CYCLE,)),
    Key("study.uncertain[]", "peak", NUMBER, "Most likely value of a triangular distribution.",
        allowed="within [`lo`, `hi`]", default="required for `triangular`", cases=(CYCLE,)),
    Key("study.uncertain[]", "hi", NUMBER, "High end of a uniform or triangular distribution.",
        allowed="above `lo`", default="required for `uniform` and `triangular`",
        cases=(CYCLE,)),
    Key("study.correlated[]", "from_fit", TEXT, "Take the parameters, mean and covariance "
        "from this catalyst's `[fit]` table (written by `aftertreat fit`).",
        allowed="the key of a catalyst of the train whose file has a `[fit]` table; a fitted "
        "`k_ref` in ln coordinates becomes `ln_k_ref`, a capacity `ln_capacity_mol_m3`; "
        "instead of `mean` and `covariance`", default="none", cases=(CYCLE,)),
    Key("study.correlated[]", "parameters", TEXTS, "The catalyst parameters, as paths "
        "`catalyst.<key>.<reaction>.<parameter>`.", allowed="distinct; parameters among "
        "{catalyst_params}; with `from_fit`, a choice among the fitted ones",
        default="required (with `from_fit`: all fitted ones a study can vary)", cases=(CYCLE,)),
    Key("study.correlated[]", "mean", NUMBERS, "Mean of each parameter.",
        allowed="one number per parameter", default="required unless `from_fit`",
        cases=(CYCLE,)),
    Key("study.correlated[]", "covariance", MATRIX, "Covariance matrix of the parameters, "
        "row by row.", allowed="a list of lists, k x k, symmetric and positive semi-definite",
        default="required unless `from_fit`", cases=(CYCLE,)),
    Key("study.correlated[]", "how", TEXT, "How the drawn values act on the catalyst's "
        "parameters.", choices=("set", "scale", "shift"), default='`"set"`',
        cases=(CYCLE,)),
])


def item_keys(table: str) -> tuple[str, ...]:
    """The names a [study] list item (``study.sweep[]``, ``study.uncertain[]``,
    ``study.correlated[]``) accepts."""
    if table not in {t for t, _, _ in ITEM_TABLES}:
        raise KeyError(f"no item table {table!r} in the schema")
    return tuple(n for k in ITEM_KEYS if k.table == table for n in k.names)


# ---- queries the parsers use ---------------------------------------------------------------
def table_keys(table: str, *, case: str | None = None, key_set: str | None = None
               ) -> tuple[Key, ...]:
    """The :class:`Key` entries of ``table``, in schema order: those a ``case`` kind reads
    ("point" or "cycle"; None: either), and of a ``key_set`` (None: all; "": only the keys
    every set holds; a name: those and the set's own)."""
    if table not in {t for t, _, _ in TABLES}:
        raise KeyError(f"no table {table!r} in the schema")
    return tuple(k for k in KEYS if k.table == table
                 and (case is None or case in k.cases)
                 and (key_set is None or k.key_set in ("", key_set)))


def keys(table: str, *, case: str | None = None, key_set: str | None = None) -> tuple[str, ...]:
    """Every name ``table`` accepts (each key and its unit-suffix alternatives), in schema
    order; ``case`` and ``key_set`` as in :func:`table_keys`."""
    return tuple(n for k in table_keys(table, case=case, key_set=key_set) for n in k.names)


def key(table: str, name: str) -> Key:
    """The :class:`Key` of ``table`` that accepts ``name`` (a key or one of its alternatives)."""
    for k in KEYS:
        if k.table == table and name in k.names:
            return k
    raise KeyError(f"no key {name!r} in table {table!r} of the schema")


def bounds(table: str) -> dict[str, tuple[float, float]]:
    """``{name: (lo, hi)}`` of every key of ``table`` with a range, in schema order; the parser
    checks ``lo <= value <= hi``, so every such range must be closed at both ends."""
    out = {}
    for k in table_keys(table):
        if k.range is None:
            continue
        r = k.range
        if r.lo is None or r.hi is None or r.lo_open or r.hi_open:
            raise ValueError(f"schema: {table}.{k.name} needs a closed range [lo, hi] here")
        out[k.name] = (r.lo, r.hi)
    return out


def _check_table() -> None:
    """Every key's table is listed in :data:`TABLES`, and no name is accepted twice by one
    table for one kind of case and one key set."""
    known = [t for t, _, _ in TABLES]
    for k in KEYS:
        if k.table not in known:
            raise ValueError(f"schema: key {k.name!r} is in an unlisted table {k.table!r}")
    for table in known:
        sets = {k.key_set for k in KEYS if k.table == table}
        for case in BOTH:
            for ks in sets:
                names = keys(table, case=case, key_set=ks)
                if len(names) != len(set(names)):
                    raise ValueError(f"schema: a name of [{table}] is declared twice")


_check_table()


# ---- lists and defaults filled in from the code when the reference is built -----------------
def _code(items) -> str:
    return ", ".join(f"`{i}`" for i in items)


def _quoted(items) -> str:
    return ", ".join(f'`"{i}"`' for i in items)


def _from(module: str, name: str, show=_quoted):
    """A text maker for :data:`_FROM_CODE`: ``show`` of ``aftertreat.<module>.<name>`` (called
    first when it is a function), imported only when the reference is built."""
    def get() -> str:
        import importlib
        v = getattr(importlib.import_module(f"aftertreat.{module}"), name)
        return show(v() if callable(v) else v)
    return get


def _number(scale: float = 1.0):
    return lambda v: f"{v * scale:g}"


def _speed_points() -> str:
    from .cycle import _speed_points as points
    return ", ".join(f'`"{k}"` ({v:g} %)' for k, v in points(None, None).items())


def _quantities() -> str:
    from .limits import QUANTITIES
    return ", ".join(f'`"{q}"` ({u})' for q, (u, _, _) in QUANTITIES.items())


def _imo_tiers() -> str:
    from .limits import _data
    return _quoted(_data()["imo_nox_tier"])


def _o2_air_custom() -> str:
    import inspect
    from .limits import custom_limits
    return _num(inspect.signature(custom_limits).parameters["o2_air_pct"].default)


def _brick_default(name: str):
    def get() -> str:
        import dataclasses
        from .brick import Brick
        v = {f.name: f.default for f in dataclasses.fields(Brick)}[name]
        return f'`"{v}"`' if isinstance(v, str) else f"{v:g}"
    return get


def _solid_heat_capacity() -> str:
    from .brick import solid_heat_capacity_J_m3K
    from .geometry import KINDS
    return ", ".join(f"{k} {solid_heat_capacity_J_m3K(k) / 1e3:g}" for k in KINDS) + " kJ/(m3 K)"


def _build_default(field: str):
    def get() -> str:
        from .build import default_rules
        return ", ".join(f"{k} {getattr(r, field):g}" for k, r in default_rules().items())
    return get


def _map_text(table: dict) -> str:
    return "`{ " + ", ".join(f"{k} = [{', '.join(f'{v:g}' for v in vals)}]"
                             for k, vals in table.items()) + " }`"


def _default_anr_map() -> str:
    from .transient_run import DEFAULT_ANR_MAP
    return _map_text(DEFAULT_ANR_MAP)


def _default_target() -> str:
    from .transient_run import DEFAULT_TARGET
    return _map_text(DEFAULT_TARGET)


#: ``{name}`` in a text field -> the text, from the code or data that holds the fact
_FROM_CODE = {
    "applications": _from("cyclecase", "APPLICATIONS"),
    "cycles": _from("cycle", "available_cycles"),
    "speed_points": _speed_points,
    "weight_tol": _from("cycle", "WEIGHT_SUM_TOL", _num),
    "limit_sets": _from("limits", "available_limit_sets"),
    "quantities": _quantities,
    "gwp": _from("emissions", "GWP100"),
    "imo_tiers": _imo_tiers,
    "o2_air_custom": _o2_air_custom,
    "catalysts": _from("catalyst", "available_catalysts"),
    "kinds": _from("geometry", "KINDS"),
    "washcoat_models": _from("brick", "WASHCOAT_MODELS"),
    "grids": _from("brick", "GRIDS"),
    "sherwood": _from("transport", "sherwood_methods"),
    "brick_sherwood": _brick_default("sherwood"),
    "brick_cells": _brick_default("cells"),
    "brick_grid": _brick_default("grid"),
    "brick_nodes_per_layer": _brick_default("nodes_per_layer"),
    "solid_heat_capacity": _solid_heat_capacity,
    "build_step_mm": _build_default("step_mm"),
    "build_min_mm": _build_default("min_mm"),
    "build_max_mm": _build_default("max_mm"),
    "controls": _from("transient_run", "CONTROLS"),
    "objectives": _from("cyclecase", "SIZING_OBJECTIVES"),
    "default_anr_map": _default_anr_map,
    "default_target": _default_target,
    "trace_quantities": _from("trace", "QUANTITIES", _code),
    "declare_zero": _from("trace", "DECLARE_ZERO"),
    "o2_dry_air": _from("combustion", "dry_air_o2_pct", lambda v: f"{v:.2f}"),
    "p_atm_kPa": _from("units", "P_ATM_PA", _number(1e-3)),
    "idle_fuel_pct": _from("cyclecase", "IDLE_FUEL_PCT_DEFAULT", _number()),
    "co2e_warn": _from("cyclecase", "CO2E_RISE_WARN_PCT", _number()),
    "study_samples": _from("study_spec", "DEFAULT_SAMPLES", _number()),
    "study_seed": _from("study_spec", "DEFAULT_SEED", _number()),
    "study_points": _from("study_spec", "DEFAULT_POINTS", _number()),
    "study_chunk_max": _from("study", "CHUNK_MAX", _number()),
    "catalyst_params": _from("study_spec", "CATALYST_PARAMS", _code),
    "distributions": lambda: "; ".join(
        f"`{k}`: " + ", ".join(f"`{p}`" for p in v)
        for k, v in __import__("aftertreat.sampling", fromlist=["x"]).DISTRIBUTIONS.items()),
}
_PLACEHOLDER = re.compile(r"\{([A-Za-z_0-9]+)\}")


def fill(text: str, cache: dict | None = None) -> str:
    """``text`` with every ``{name}`` of :data:`_FROM_CODE` replaced (an unknown name is an
    error: a typo must not reach the reference)."""
    cache = {} if cache is None else cache

    def one(m):
        name = m.group(1)
        if name not in _FROM_CODE:
            raise KeyError(f"schema: no list or default named {{{name}}}")
        if name not in cache:
            cache[name] = _FROM_CODE[name]()
        return cache[name]
    return _PLACEHOLDER.sub(one, text)


# ---- the reference ----------------------------------------------------------------------------
_COMMAND = "python -m aftertreat.schema > docs/case-file.md"


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _value_text(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return f'`"{v}"`'
    return f"{v:g}"


def _row(k: Key, cache: dict) -> list[str]:
    name = " or ".join(f"`{n}`" for n in k.names)
    if k.kind == QUANTITY:
        typ = f"quantity, e.g. `{k.example}`"
        unit = f"{k.unit} (the text may use any {k.dimension} unit)"
    else:
        typ = _TYPE_WORDS[k.kind]
        unit = k.unit
    if k.alts:
        if k.kind == QUANTITY:
            typ += "; " + "; ".join(f"`{a}`: number" for a, _ in k.alts)
        unit += "; " + "; ".join(f"`{a}`: {u}" for a, u in k.alts)
    allowed = []
    if k.range is not None:
        r = k.range.text()
        if k.kind == QUANTITY:
            r += f" {k.unit}"
        allowed.append(("each " if k.kind in (PER_MODE, NUMBERS) else "") + r)
    if k.choices:
        allowed.append("one of " + _quoted(k.choices))
    if k.allowed:
        allowed.append(fill(k.allowed, cache))
    if not allowed:
        allowed.append("not checked beyond its type")
    if k.default_value is not None:
        default = _value_text(k.default_value)
        if k.kind == PER_MODE:
            default += " at every mode"
    else:
        default = fill(k.default, cache) if k.default else "none"
    return [name, typ, unit or "-", "; ".join(allowed), default, fill(k.meaning, cache)]


def _section(table: str, heading: str, intro: str, cache: dict) -> list[str]:
    rows = table_keys(table)
    where = {frozenset(BOTH): "point and duty-cycle cases", frozenset((POINT,)): "point cases",
             frozenset((CYCLE,)): "duty-cycle cases"}
    cases = frozenset(c for k in rows for c in k.cases)
    out = [f"## {heading}", "", fill(intro, cache) + f" Read in {where[cases]}.", ""]
    sets = sorted({k.key_set for k in rows if k.key_set})
    for ks in [""] + sets:
        part = [k for k in rows if k.key_set == ks]
        if sets:
            out += ["Keys of every method:" if not ks else f'With `method = "{ks}"`:', ""]
        out += ["| key | type | unit | allowed | default | meaning |",
                "|---|---|---|---|---|---|"]
        out += ["| " + " | ".join(_cell(c) for c in _row(k, cache)) + " |" for k in part]
        out.append("")
    if table == "":
        out += ["A point case reads " + _code(keys("", case=POINT)) + "; a duty-cycle case "
                + _code(keys("", case=CYCLE)) + ".", ""]
    return out


def _item_section(table: str, heading: str, intro: str, cache: dict) -> list[str]:
    """A section of a [study] item table (:data:`ITEM_KEYS`)."""
    out = [f"## {heading}", "", fill(intro, cache) + " Read in duty-cycle cases.", "",
           "| key | type | unit | allowed | default | meaning |", "|---|---|---|---|---|---|"]
    out += ["| " + " | ".join(_cell(c) for c in _row(k, cache)) + " |" for k in ITEM_KEYS
            if k.table == table]
    out.append("")
    return out


def _shipped(cache: dict) -> list[str]:
    from .build import default_rules
    from .cycle import available_cycles, load_cycle
    from .emissions import GWP100, GWP100_SOURCES
    from .limits import QUANTITIES, available_limit_sets, load_limit_set
    out = ["## Shipped data", "",
           "These lists are read from the data files of the package when this page is built.", "",
           "Test cycles (`[cycle] iso8178`):", ""]
    out += [f"- `{k}`: {load_cycle(k).name}" for k in available_cycles()]
    out += ["", "Limit sets (`[limits] sets`):", ""]
    out += [f"- `{k}`: {load_limit_set(k).name}" for k in available_limit_sets()]
    out += ["", "Limit quantities (`[[limits.custom]] quantity`), with their unit and the scope "
            "they are checked on by default:", ""]
    out += [f"- `{q}`: {u}, {s}" + (", dry, corrected to `o2_ref_pct`" if o2 else "")
            for q, (u, s, o2) in QUANTITIES.items()]
    out += ["", "Warming potentials of N2O over 100 years (`[limits] gwp`):", ""]
    out += [f"- `{k}`: {v:g}, {GWP100_SOURCES[k]}" for k, v in GWP100.items()]
    out += ["", "Buildable brick lengths (`[sizing.build.<kind>]` defaults):", ""]
    out += [f"- `{k}`: {r.step_mm:g} mm steps, {r.min_mm:g} to {r.max_mm:g} mm per brick; "
            f"{r.provenance}" for k, r in default_rules().items()]
    out += ["", "Catalysts (`[[brick]] catalyst`): " + fill("{catalysts}", cache)
            + "; `aftertreat catalysts KEY` shows one with its sources.", ""]
    return out


def _notes(cache: dict) -> list[str]:
    return [
        "## Conventions", "",
        "**Units.** The program works in SI inside. A key whose name ends in a unit "
        "(`rated_power_kW`, `T_C`, `length_mm`, `dp_max_kPa`) takes a plain number in that "
        "unit. A key without one (`length`, `diameter`, `wall`, `gap`, `plate`, `T`, `p`, "
        "`mass_flow`, `molar_flow`) takes a text holding the value and its unit, such as "
        '`"700 mm"`, `"380 degC"` or `"9000 kg/h"`. A bare number under such a key is '
        "refused, because nothing says whether 700 means millimetres or metres: write the unit, "
        "or use the key with the unit in its name (`length_mm = 700`). When both forms are "
        "given, the one without a suffix counts (aftertreat/case.py).", "",
        "**Per-mode values.** A per-mode key takes one number, used at every mode, or a list "
        "with one number per mode of the cycle, in cycle order (aftertreat/cyclecase.py).", "",
        "**Wet and dry concentrations** (aftertreat/cyclecase.py, aftertreat/combustion.py, "
        "aftertreat/case.py, aftertreat/transient_run.py):", "",
        '- `[engine_out]` with `method = "combustion"`: `NOx_ppm`, `NH3_ppm`, `N2O_ppm` and '
        "`H2_ppm` are wet, parts per million of the whole exhaust including its water; the atom "
        "balance works out the O2 and the water. This method has no `basis` key.",
        '- `[engine_out]` with `method = "measured"`: `basis` (default `"wet"`) says whether '
        "`O2_pct` and the ppm values are wet or dry; `H2O_pct` is always wet. Dry values are "
        "made wet as y_wet = y_dry (1 - y_H2O).",
        "- `[exhaust]` of a point case: as for measured exhaust; `basis` (default `\"wet\"`) "
        "covers every `_ppm` and `_pct` value except `H2O_pct`, which is always wet.",
        "- `[transient] trace`: `basis` (default `\"dry\"`) covers the O2 and ppm columns; the "
        "H2O column is always wet.", "",
        "**Limits referred to O2** (aftertreat/limits.py). Rows whose quantity ends in `_ppmvd` "
        "or `_mg_Nm3` are checked at every mode on the dry concentration, corrected to the row's "
        "`o2_ref_pct`: C_ref = C_dry (O2_air - O2_ref) / (O2_air - O2_dry), with the O2 of air "
        "of the limit set (" + fill("{o2_air_custom}", cache) + " % for rows of your own). "
        "mg/Nm3 values are at the set's normal conditions, NOx counted as NO2. "
        "`NH3_ppm_wet_max` is the wet NH3 concentration, not corrected. g/kWh rows are weighted "
        "over the cycle, e = sum(W m) / sum(W P); with `scope = \"mode\"` each mode's own m / P "
        "is checked instead.", "",
        "## Point cases, duty-cycle cases and trace cases", "",
        "- A point case has `[exhaust]` and `[[brick]]`: one exhaust state through the train, "
        "with `aftertreat point`.",
        "- A duty-cycle case has `[engine]`, `[cycle]`, `[engine_out]` and `[[brick]]`, and "
        "usually `[limits]`: `aftertreat run` evaluates every mode and the cycle, "
        "`aftertreat size` sizes the SCR and slip catalyst with `[sizing]`. It may add "
        "`[transient]` to step through its modes in time.",
        "- A trace case is a duty-cycle case with `[transient] trace` and no `[cycle]`: the "
        "trace gives the engine-out exhaust, so `[engine_out]` and `[sizing]` are refused; run "
        "it with `aftertreat run`.",
        "- Each command refuses the other kind of case, saying which command to use.", "",
        "## What-ifs with --set", "",
        "`--set KEY=VALUE` changes one value before the case is checked, for example "
        "`aftertreat size cases/genset_d2.toml --set sizing.design_margin=0.12` or "
        "`aftertreat point cases/genset_point.toml --set \"brick.SCR 1.length=700 mm\"`. KEY is "
        "the dotted path of the key in the file. An item of a list of tables is picked by its "
        "position from 0 or by its `name`: `brick.0.length` and `brick.SCR 1.length` are the "
        "same brick (a negative position counts from the end), `limits.custom.0.value` the "
        "first limit of your own. A table the case leaves out is made on the way, e.g. "
        "`--set sizing.build.extruded.step_mm=25` or `--set transient.hold_s=120`; an item of a "
        "list cannot be made this way. VALUE is read "
        "as a TOML value where it is one (numbers, `true`, quoted texts, lists, inline tables), "
        "and as plain text otherwise, so `700 mm` needs no quotes. The changed case is checked "
        "like the file, and a bad value is reported under its key (aftertreat/case.py, "
        "`apply_set`).", "",
    ]


def markdown() -> str:
    """The case-file reference (``docs/case-file.md``)."""
    cache: dict = {}
    out = ["# Case-file reference", "",
           f"Generated from `aftertreat/schema.py` by `{_COMMAND}`; do not edit it by hand: "
           "change the schema and run the command again (`tests/test_schema.py` fails while "
           "this file is out of date).", "",
           "Case files are TOML. Every key of every table is listed below with its type, unit, "
           "the values the program accepts, its default and its meaning; any other key is "
           "refused with the list of valid ones. 'Not checked' means the program takes the "
           "value as it comes.", ""]
    for table, heading, intro in TABLES:
        out += _section(table, heading, intro, cache)
        if table == "study":
            for t, h, i in ITEM_TABLES:
                out += _item_section(t, h, i, cache)
    out += _notes(cache)
    out += _shipped(cache)
    return "\n".join(out).rstrip("\n") + "\n"


if __name__ == "__main__":
    sys.stdout.write(markdown())
