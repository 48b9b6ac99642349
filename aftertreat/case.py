"""Case files: the catalyst train and the exhaust entering it, read from TOML and validated.

Every value is checked before any computation; a mistake gives one :class:`InputError` naming the
file, the key (dotted path, list items by index), the value and what was expected. Quantities may be
strings with units (``"600 mm"``, ``"350 degC"``, ``"2.4 kg/s"``) or bare numbers under a key whose
suffix names the unit (``length_mm = 600``).

Layout (our own key names)::

    title = "..."
    [exhaust]                 # the stream at the face of the first brick
    mass_flow = "2.4 kg/s"    # or molar_flow = "83 mol/s"
    T = "360 degC"
    p = "103 kPa"
    basis = "wet"             # basis of the ppm and % values below ("wet" or "dry")
    O2_pct = 11.0
    H2O_pct = 22.0            # always the wet water fraction
    NO_ppm = 900.0            # also NO2_ppm, NH3_ppm, N2O_ppm, H2_pct, CO2_pct, Ar_pct
    [[brick]]
    name = "SCR 1"
    catalyst = "vanadia_extruded"   # key of a shipped file, or a path relative to the case
    substrate = "extruded"          # "coated", "extruded" or "plate"
    cpsi = 35
    wall = "0.7 mm"                 # coated: wall_mil = 4 and washcoat_um = [35, 12]
    length = "600 mm"
    diameter = "900 mm"
    activity = 0.85                 # ageing multiplier, 1 = fresh
"""
from __future__ import annotations

import copy
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from . import schema
from .brick import WASHCOAT_MODELS, Brick
from .catalyst import LayeredCatalyst, load_catalyst
from .checks import number
from .errors import InputError, did_you_mean
from .geometry import Substrate
from .species import SPECIES
from .stream import Stream
from .train import Train
from .units import P_ATM_PA, to_si, ZERO_C_K

__all__ = ["Case", "load_case", "parse_case", "apply_set", "read_toml"]

# the keys each table accepts: declared once, with their meaning, in aftertreat.schema
_TOP = set(schema.keys("", case=schema.POINT))
_EXHAUST = set(schema.keys("exhaust"))
_BRICK = set(schema.keys("brick[]"))


@dataclass
class Case:
    """A validated case: its title, the train and the exhaust at the train inlet."""
    title: str
    train: Train
    exhaust: Stream
    file: str
    data: dict                     # the case as read (after --set overrides), for reports
    overrides: list = field(default_factory=list)   # the --set assignments, as typed


def read_toml(path: str | Path) -> dict:
    """Read a TOML file; errors name the file."""
    p = Path(path)
    if not p.exists():
        raise InputError("file not found", file=str(p))
    if p.is_dir():
        raise InputError("expected a case file (TOML), and this is a folder", file=str(p))
    try:
        with open(p, "rb") as fh:
            return tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", file=str(p)) from None
    except UnicodeDecodeError:
        raise InputError("expected a TOML text file in UTF-8 (this one is binary or in another "
                         "encoding, e.g. UTF-16: save it as UTF-8)", file=str(p)) from None
    except OSError as exc:
        raise InputError(f"cannot read the file ({exc.strerror})", file=str(p)) from None


def _unknown(table: dict, allowed: set, file: str, prefix: str) -> None:
    for k in table:
        if k not in allowed:
            raise InputError("unknown key" + did_you_mean(k, allowed) + "; valid keys: "
                             + ", ".join(sorted(allowed)), key=f"{prefix}{k}", file=file)


def _quantity(table: dict, base: str, unit: str, suffix_unit, file: str,
              prefix: str, required: bool = True, default=None):
    """Read ``base`` (a string with its unit; a bare number is refused) or ``base_<suffix>``
    (a number in the suffix's unit), as ``unit`` (SI). ``suffix_unit`` is one ``(suffix,
    unit)`` pair, several (``wall_mm`` or ``wall_mil``), or None; at most one form may be
    given."""
    pairs = [] if not suffix_unit else (
        [suffix_unit] if isinstance(suffix_unit[0], str) else list(suffix_unit))
    given = [k for k in (base, *(f"{base}_{s}" for s, _ in pairs)) if k in table]
    if len(given) > 1:                   # both would be read as one: say which to keep
        raise InputError(f"give {base} once: as {given[0]} or as {given[1]}, not both",
                         key=f"{prefix}{given[1]}", value=table[given[1]], file=file)
    if base in table:
        v = table[base]
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            # a bare number has no unit: refuse it rather than guess (700 is not 700 m)
            show = pairs[0][1] if pairs else unit
            alt = f", or {base}_{pairs[0][0]} = {v:g}" if pairs else ""
            raise InputError(f'expected a quantity with its unit, e.g. {base} = "{v:g} {show}"'
                             f"{alt}", key=f"{prefix}{base}", value=v, file=file)
        return to_si(v, unit, key=f"{prefix}{base}", file=file)
    for suffix, suffix_u in pairs:
        key = f"{base}_{suffix}"
        if key in table:
            v = table[key]
            if not isinstance(v, (int, float)) or isinstance(v, bool):
                raise InputError(f"expected a number in {suffix_u}", key=f"{prefix}{key}",
                                 value=v, file=file)
            return to_si(f"{v} {suffix_u}", unit, key=f"{prefix}{key}", file=file)
    if required:
        alt = f" (or {', '.join(f'{base}_{s}' for s, _ in pairs)})" if pairs else ""
        raise InputError(f"missing; expected {base}{alt}", key=f"{prefix}{base}", file=file)
    return default


def _positive(v, key, file, what="a value > 0"):
    if not (v is not None and v > 0):
        raise InputError(f"expected {what}", key=key, value=v, file=file)
    return v


def parse_exhaust(ex: dict, file: str) -> Stream:
    """The exhaust table into a :class:`Stream` (mole fractions wet, N2 takes the balance)."""
    pre = "exhaust."
    _unknown(ex, _EXHAUST, file, pre)
    T = _quantity(ex, "T", "K", ("C", "degC"), file, pre)
    if not (ZERO_C_K <= T <= (ZERO_C_K + 900.0)):
        raise InputError("expected a temperature within 0..900 degC", key=pre + "T",
                         value=ex.get("T", ex.get("T_C")), file=file)
    p = _quantity(ex, "p", "Pa", ("kPa", "kPa"), file, pre, required=False, default=P_ATM_PA)
    _positive(p, pre + "p", file, "a pressure > 0")
    basis = ex.get("basis", "wet")
    if basis not in ("wet", "dry"):
        raise InputError("expected 'wet' or 'dry'", key=pre + "basis", value=basis, file=file)
    y = {}
    for s in SPECIES:
        for suf, scale in (("ppm", 1e-6), ("pct", 1e-2)):
            k = f"{s}_{suf}"
            if k in ex:
                v = ex[k]
                if not isinstance(v, (int, float)) or isinstance(v, bool) or not v >= 0:
                    raise InputError(f"expected a number >= 0 ({suf})", key=pre + k, value=v,
                                     file=file)
                if s in y:
                    raise InputError(f"give {s} once (as _ppm or _pct)", key=pre + k, file=file)
                y[s] = v * scale
    if "N2" in y:
        given = next(f"N2_{suf}" for suf in ("ppm", "pct") if f"N2_{suf}" in ex)
        raise InputError("N2 is the balance; do not give it", key=pre + given,
                         value=ex[given], file=file)
    mass = _quantity(ex, "mass_flow", "kg/s", ("kg_s", "kg/s"), file, pre, required=False)
    molar = _quantity(ex, "molar_flow", "mol/s", ("mol_s", "mol/s"), file, pre, required=False)
    if (mass is None) == (molar is None):
        raise InputError("give exactly one of mass_flow and molar_flow", key=pre + "mass_flow",
                         file=file)
    _positive(mass if mass is not None else molar,
              pre + ("mass_flow" if mass is not None else "molar_flow"), file, "a flow > 0")
    nox = y.get("NO", 0.0) + y.get("NO2", 0.0)
    from .combustion import exhaust_from_measurements
    try:
        return exhaust_from_measurements(
            T_K=T, p_Pa=p, mass_flow_kg_s=mass, molar_flow_mol_s=molar,
            H2O_pct=100.0 * y.get("H2O", 0.0), O2_pct=100.0 * y.get("O2", 0.0),
            NOx_ppm=1e6 * nox, NO2_fraction=y.get("NO2", 0.0) / nox if nox > 0 else 0.0,
            NH3_ppm=1e6 * y.get("NH3", 0.0), N2O_ppm=1e6 * y.get("N2O", 0.0),
            H2_ppm=1e6 * y.get("H2", 0.0), CO2_pct=100.0 * y.get("CO2", 0.0),
            Ar_pct=100.0 * y.get("Ar", 0.0), basis=basis)
    except InputError as exc:
        raise InputError(exc.expected, key=pre + (exc.key or ""), value=exc.value,
                         file=file) from None


def parse_brick(b: dict, i: int, file: str) -> Brick:
    pre = f"brick[{i}]."
    _unknown(b, _BRICK, file, pre)
    name = str(b.get("name", f"brick {i + 1}"))
    ck = b.get("catalyst")
    if not isinstance(ck, str):
        raise InputError("expected the key of a catalyst file (see 'aftertreat catalysts')",
                         key=pre + "catalyst", value=ck, file=file)
    try:
        cat = load_catalyst(ck, base=Path(file).parent)
    except InputError as exc:
        if exc.file:                  # a problem inside the catalyst file: report it there
            raise
        raise InputError(exc.expected, key=pre + "catalyst", value=ck, file=file) from None
    kind = b.get("substrate", "coated" if isinstance(cat, LayeredCatalyst) else None)
    if kind not in ("coated", "extruded", "plate"):
        raise InputError("expected 'coated', 'extruded' or 'plate'" + did_you_mean(kind, (
            "coated", "extruded", "plate")), key=pre + "substrate", value=kind, file=file)
    layers = cat.layers if isinstance(cat, LayeredCatalyst) else [(cat, None)]
    unread = {"plate": ("cpsi", "wall", "wall_mm", "wall_mil", "washcoat_um"),
              "extruded": ("washcoat_um", "gap", "gap_mm", "plate", "plate_mm"),
              "coated": ("gap", "gap_mm", "plate", "plate_mm")}[kind]
    for k in unread:
        if k in b:                       # a value the model would not read: not silently
            raise InputError(f"this {kind} brick does not use {k}; remove it (see "
                             "docs/case-file.md for the keys of each substrate)",
                             key=pre + k, value=b[k], file=file)
    try:
        if kind == "plate":
            gap = _quantity(b, "gap", "m", ("mm", "mm"), file, pre)
            plate = _quantity(b, "plate", "m", ("mm", "mm"), file, pre)
            _positive(gap, pre + "gap", file, "a gap > 0")
            _positive(plate, pre + "plate", file, "a plate thickness > 0")
            sub = Substrate(kind="plate", wall=plate, gap=gap)
        else:
            cpsi = b.get("cpsi")
            if not isinstance(cpsi, (int, float)) or isinstance(cpsi, bool) or not cpsi > 0:
                raise InputError("expected a cell density in cells per square inch > 0",
                                 key=pre + "cpsi", value=cpsi, file=file)
            wall = _quantity(b, "wall", "m", (("mm", "mm"), ("mil", "mil")), file, pre)
            if kind == "coated":
                wc = b.get("washcoat_um")
                if wc is None:
                    if any(t is None for _, t in layers):
                        raise InputError("expected washcoat_um = [thickness, ...] (one per layer)",
                                         key=pre + "washcoat_um", file=file)
                    wc = [t * 1e6 for _, t in layers]
                if not isinstance(wc, list):
                    wc = [wc]
                wc = [number(t, pre + "washcoat_um", file, lo=0.0, lo_open=True,
                             what="a washcoat thickness in um") for t in wc]
                if len(wc) != len(layers):
                    raise InputError(f"expected {len(layers)} washcoat thickness(es), one per "
                                     "catalyst layer", key=pre + "washcoat_um", value=wc,
                                     file=file)
                sub = Substrate(kind="coated", wall=wall, cell_density=cpsi / 0.0254 ** 2,
                                washcoat=tuple(float(t) * 1e-6 for t in wc))
            else:
                if len(layers) > 1:
                    raise InputError("a layered catalyst needs a coated substrate",
                                     key=pre + "substrate", value=kind, file=file)
                sub = Substrate(kind="extruded", wall=wall, cell_density=cpsi / 0.0254 ** 2)
        length = _positive(_quantity(b, "length", "m", ("mm", "mm"), file, pre), pre + "length",
                           file, "a length > 0")
        diameter = _positive(_quantity(b, "diameter", "m", ("mm", "mm"), file, pre),
                             pre + "diameter", file, "a diameter > 0")
        wm = b.get("washcoat_model")
        if wm is not None and wm not in WASHCOAT_MODELS:
            raise InputError(f"expected one of {WASHCOAT_MODELS}", key=pre + "washcoat_model",
                             value=wm, file=file)
        kw = {}
        for key in ("cells", "nodes_per_layer"):
            if key in b:
                v = b[key]
                if not isinstance(v, int) or isinstance(v, bool) or v < 1:
                    raise InputError("expected a whole number >= 1", key=pre + key, value=v,
                                     file=file)
                kw[key] = v
        if "grid" in b:
            from .brick import GRIDS
            if b["grid"] not in GRIDS:
                raise InputError(f"expected one of {', '.join(GRIDS)}" + did_you_mean(b["grid"], GRIDS),
                                 key=pre + "grid", value=b["grid"], file=file)
            kw["grid"] = b["grid"]
        if "sherwood" in b:
            from .transport import sherwood_methods
            if not isinstance(b["sherwood"], str) or b["sherwood"] not in sherwood_methods():
                raise InputError("expected one of " + ", ".join(sherwood_methods())
                                 + did_you_mean(str(b["sherwood"]), sherwood_methods()),
                                 key=pre + "sherwood", value=b["sherwood"], file=file)
            kw["sherwood"] = b["sherwood"]
        act = b.get("activity", 1.0)
        if not isinstance(act, (int, float)) or isinstance(act, bool):
            raise InputError("expected a number in (0, 2]", key=pre + "activity", value=act,
                             file=file)
        return Brick(name=name, substrate=sub, catalysts=tuple(c for c, _ in layers),
                     length=length, diameter=diameter, activity=float(act), washcoat=wm,
                     heat_loss_W_m2K=number(b.get("heat_loss_W_m2K", 0.0),
                                            pre + "heat_loss_W_m2K", file, lo=0.0),
                     heat_capacity_kJ_m3K=b.get("heat_capacity_kJ_m3K"), **kw)
    except InputError as exc:
        if exc.file:
            raise
        key = exc.key if exc.key and exc.key.startswith(pre) else (
            pre + exc.key.split(".")[-1] if exc.key else pre.rstrip("."))
        raise InputError(exc.expected, key=key, value=exc.value, file=file) from None


def parse_case(data: dict, file: str) -> Case:
    """Validate a case dictionary (as read from TOML) into a :class:`Case`."""
    if "cycle" in data and "exhaust" not in data:
        raise InputError("this is a duty-cycle case (it has [cycle]): use 'aftertreat run' or "
                         "'aftertreat size'", key="cycle", file=file)
    if "transient" in data and "exhaust" not in data:
        raise InputError("this is a time-trace case (it has [transient]): use 'aftertreat run'",
                         key="transient", file=file)
    _unknown(data, _TOP, file, "")
    if "exhaust" not in data or not isinstance(data["exhaust"], dict):
        raise InputError("missing the [exhaust] table", key="exhaust", file=file)
    bricks = data.get("brick")
    if not isinstance(bricks, list) or not bricks:
        raise InputError("expected at least one [[brick]]", key="brick", file=file)
    exhaust = parse_exhaust(data["exhaust"], file)
    train = Train([parse_brick(b, i, file) for i, b in enumerate(bricks)])
    return Case(title=str(data.get("title", Path(file).stem)), train=train, exhaust=exhaust,
                file=file, data=data)


def _parse_value(text: str):
    """A --set value: TOML syntax when it parses (numbers, quoted strings, lists), else text."""
    try:
        return tomllib.loads(f"v = {text}")["v"]
    except tomllib.TOMLDecodeError:
        return text


def apply_set(data: dict, assignment: str, file: str) -> dict:
    """Apply one ``KEY=VALUE`` what-if to a copy of the case data.

    KEY is the dotted path in the case file; list items by index or by their ``name``
    (``brick.0.length`` or ``brick.SCR 1.length``). A table the case leaves out is made (e.g.
    ``sizing.build.extruded.step_mm=100``); every key is validated with the rest of the case, so
    a misspelt table or key is refused there, by name.
    """
    if "=" not in assignment:
        raise InputError("expected KEY=VALUE", key="--set", value=assignment, file=file)
    path, text = assignment.split("=", 1)
    keys = [k.strip() for k in path.strip().split(".")]
    out = copy.deepcopy(data)
    node = out
    for depth, k in enumerate(keys[:-1]):
        where = ".".join(keys[: depth + 1])
        if isinstance(node, list):
            idx = None
            if k.lstrip("-").isdigit():
                idx = int(k)
            else:
                names = [item.get("name") for item in node if isinstance(item, dict)]
                if k in names:
                    idx = names.index(k)
            if idx is None or not -len(node) <= idx < len(node):
                names = [str(item.get("name")) for item in node if isinstance(item, dict)]
                raise InputError("no such list item (give an index or a name: "
                                 + ", ".join(names) + ")" + did_you_mean(k, names),
                                 key=f"--set {where}", value=k, file=file)
            node = node[idx]
        elif isinstance(node, dict):
            if k not in node:     # a table the case leaves out: made here, and the parser
                node[k] = {}      # then refuses it (naming the key) if it is not a valid one
            node = node[k]
        else:
            raise InputError("not a table", key=f"--set {where}", file=file)
    if not isinstance(node, dict):
        raise InputError("the path must end in a key of a table", key=f"--set {path}", file=file)
    node[keys[-1]] = _parse_value(text.strip())
    return out


def load_case(path: str | Path, sets: list[str] | None = None) -> Case:
    """Read, override (``--set``) and validate a case file."""
    file = str(path)
    data = read_toml(path)
    for s in sets or []:
        data = apply_set(data, s, file)
    case = parse_case(data, file)
    case.overrides = list(sets or [])
    return case
