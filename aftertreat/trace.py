"""Time traces of engine-out exhaust, read from a CSV file whose headers carry their units.

The header row names each column and its unit in square brackets, for example::

    # lines starting with '#' (and blank lines) are skipped anywhere in the file
    time [s],power [kW],exhaust flow [kg/h],T [degC],p [kPa],O2 [%],H2O [%],NOx [ppm],NO2/NOx [-],NH3 [ppm],N2O [ppm]
    0,200.3,4200,251.2,103.02,14.61,18.60,662,0.095,2970,55

Units are parsed by pint (the shared registry of :mod:`aftertreat.units`; ``-`` means
dimensionless) and converted to SI once, here: time [s], power [kW] (our convention for power),
exhaust mass flow [kg/s], temperature [K], pressure [Pa], O2 and H2O [%], species [ppm] and
NO2/NOx [mol/mol]. ``basis`` ("dry" or "wet") applies to O2 and the ppm columns; H2O is always wet.
Columns the file holds but no quantity uses are ignored.
"""
from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .combustion import exhaust_from_measurements
from .errors import InputError, did_you_mean
from .stream import Stream
from .units import checked_unit_text, P_ATM_PA, ureg, ZERO_C_K

__all__ = ["QUANTITIES", "Trace", "read_trace"]

#: our quantity name -> (SI unit, required?, default column header name)
QUANTITIES = {
    "time": ("s", True, "time"),
    "power": ("kW", True, "power"),
    "exhaust_flow": ("kg/s", True, "exhaust flow"),
    "T": ("K", True, "T"),
    "p": ("Pa", False, "p"),
    "O2": ("percent", True, "O2"),
    "H2O": ("percent", True, "H2O"),
    "NOx": ("ppm", True, "NOx"),
    "NO2_fraction": ("dimensionless", False, "NO2/NOx"),
    "NH3": ("ppm", False, "NH3"),
    "N2O": ("ppm", False, "N2O"),
    "H2": ("ppm", False, "H2"),
}

#: value of an absent optional column, in the SI unit of QUANTITIES (p: standard atmosphere)
_DEFAULTS = {"p": P_ATM_PA, "NO2_fraction": 0.0, "NH3": 0.0, "N2O": 0.0, "H2": 0.0}
#: Species an ammonia engine's trace must carry unless the case declares them zero
#: ([transient] zero_columns): a missing NH3 or N2O column is far more often a lost column
#: than an engine that emits none, and reading it as zero would hide the slip and the N2O.
DECLARE_ZERO = ("NH3", "N2O")

#: physical sense, in SI: (low, high, low inclusive?, what is expected, in the file's words)
#: Basis: the project conventions (T in 0..900 degC, ppm >= 0); O2 cannot exceed that of air
#: (21 %, arithmetic); 60 % H2O is far above any engine exhaust (common practice).
_RANGES = {
    "power": (0.0, np.inf, True, "a power >= 0"),
    "exhaust_flow": (0.0, np.inf, False, "an exhaust flow > 0"),
    "T": (ZERO_C_K, (ZERO_C_K + 900.0), True, "a temperature in 0..900 degC"),
    "p": (0.0, np.inf, False, "a pressure > 0"),
    "O2": (0.0, 21.0, True, "an O2 content in 0..21 %"),
    "H2O": (0.0, 60.0, True, "an H2O content in 0..60 %"),
    "NOx": (0.0, np.inf, True, "a concentration >= 0"),
    "NO2_fraction": (0.0, 1.0, True, "an NO2/NOx ratio in 0..1"),
    "NH3": (0.0, np.inf, True, "a concentration >= 0"),
    "N2O": (0.0, np.inf, True, "a concentration >= 0"),
    "H2": (0.0, np.inf, True, "a concentration >= 0"),
}

_HEADER = re.compile(r"^(?P<name>[^\[\]]*?)\s*\[(?P<unit>[^\[\]]*)\]\s*$")


@dataclass(eq=False)
class Trace:
    """An engine-out time trace, one sample per row, arrays in SI.

    ``t_s`` [s], ``power_kW`` [kW], ``mass_flow_kg_s`` [kg/s], ``T_K`` [K], ``p_Pa`` [Pa],
    ``O2_pct`` [%], ``H2O_pct`` [% wet], ``NOx_ppm``, ``NO2_fraction`` [mol/mol], ``NH3_ppm``,
    ``N2O_ppm``, ``H2_ppm`` [ppm]. O2 and the ppm arrays are on ``basis`` ("dry" or "wet").
    """
    t_s: np.ndarray
    power_kW: np.ndarray
    mass_flow_kg_s: np.ndarray
    T_K: np.ndarray
    p_Pa: np.ndarray
    O2_pct: np.ndarray
    H2O_pct: np.ndarray
    NOx_ppm: np.ndarray
    NO2_fraction: np.ndarray
    NH3_ppm: np.ndarray
    N2O_ppm: np.ndarray
    H2_ppm: np.ndarray
    basis: str = "dry"
    file: str | None = None

    def __len__(self) -> int:
        return len(self.t_s)

    @property
    def duration_s(self) -> float:
        """Last time minus first time [s]."""
        return float(self.t_s[-1] - self.t_s[0])

    @property
    def work_kWh(self) -> float:
        """Engine work over the trace [kWh]: trapezoidal integral of power over time / 3600 s/h."""
        p, t = self.power_kW, self.t_s
        return float(np.sum(0.5 * (p[1:] + p[:-1]) * np.diff(t)) / 3600.0)

    def exhaust(self, i: int) -> Stream:
        """Sample ``i``'s engine-out stream (N2 takes the balance), via
        :func:`aftertreat.combustion.exhaust_from_measurements`."""
        try:
            return exhaust_from_measurements(
                T_K=float(self.T_K[i]), p_Pa=float(self.p_Pa[i]),
                mass_flow_kg_s=float(self.mass_flow_kg_s[i]), H2O_pct=float(self.H2O_pct[i]),
                O2_pct=float(self.O2_pct[i]), NOx_ppm=float(self.NOx_ppm[i]),
                NO2_fraction=float(self.NO2_fraction[i]), NH3_ppm=float(self.NH3_ppm[i]),
                N2O_ppm=float(self.N2O_ppm[i]), H2_ppm=float(self.H2_ppm[i]), basis=self.basis)
        except InputError as e:
            row = range(len(self))[i] + 1
            raise InputError(f"{e.expected} (data row {row})", key=e.key, value=e.value,
                             file=self.file) from None

    def exhausts(self) -> list[Stream]:
        """Every sample's engine-out stream, in time order."""
        return [self.exhaust(i) for i in range(len(self))]


def _split_header(cell: str) -> tuple[str, str | None]:
    """``" T [degC]"`` -> ``("T", "degC")`` (name stripped); no brackets -> unit None."""
    m = _HEADER.match(cell.strip())
    if m is None:
        return cell.strip(), None
    return m["name"].strip(), m["unit"].strip()


def _unit(text: str, q: str, header: str, file: str):
    """The pint unit of column ``header``, checked against quantity ``q``'s dimension."""
    return column_unit(text, QUANTITIES[q][0], header, file)


def column_unit(text: str, si: str, header: str, file: str):
    """The pint unit ``text`` of column ``header``, checked to convert to ``si`` (traces, lab
    data); ``-`` or an empty unit means dimensionless."""
    reg = ureg()
    if not checked_unit_text(text):
        raise InputError(f"unit '{text}' is not a plain unit (powers must be small numbers; "
                         f"expected units of {si})", key=header, value=text, file=file)
    try:
        unit = reg.parse_units("dimensionless" if text in ("-", "") else text)
    except Exception:    # noqa: BLE001 - pint's parser raises many kinds (TokenError, TypeError...)
        raise InputError(f"unit '{text}' is not one pint knows (expected units of {si})",
                         key=header, value=text, file=file) from None
    if reg.Quantity(1.0, unit).dimensionality != reg.Quantity(1.0, si).dimensionality:
        raise InputError(f"unit '{text}' cannot be converted to {si}", key=header, value=text,
                         file=file)
    return unit


def read_trace(path, *, columns: dict | None = None, basis: str = "dry",
               file: str | None = None, zero=("NH3", "N2O")) -> Trace:
    """Read an engine-out time trace from the CSV file ``path``.

    ``columns`` maps quantity names of :data:`QUANTITIES` to the file's header names (without
    the ``[unit]`` part); unmapped quantities use the default names. Header names match ignoring
    case and surrounding spaces. ``basis`` ("dry"/"wet") applies to O2 and the ppm columns.
    ``file`` names the file in error messages (default: ``path``). Absent optional columns take
    p = 101325 Pa and zero for NO2/NOx and H2; NH3 and N2O (:data:`DECLARE_ZERO`) may be absent
    only if listed in ``zero`` (the case's ``[transient] zero_columns``; the library default
    lets both be absent).

    Every bad value is an :class:`~aftertreat.errors.InputError` naming the file, the column
    (``key`` = the header cell as written), the value as written and the data row (1-based,
    counting data lines only) and file line.
    """
    import pandas as pd

    file = str(path) if file is None else file
    if basis not in ("dry", "wet"):
        raise InputError("expected 'dry' or 'wet'", key="basis", value=basis, file=file)
    want = {q: d for q, (_, _, d) in QUANTITIES.items()}
    for q, name in (columns or {}).items():
        if q not in QUANTITIES:
            raise InputError(f"unknown quantity; valid: {', '.join(QUANTITIES)}"
                             + did_you_mean(q, QUANTITIES), key=f"columns.{q}", value=name,
                             file=file)
        if not isinstance(name, str) or not name.strip():
            raise InputError("expected a column header name", key=f"columns.{q}", value=name,
                             file=file)
        want[q] = name
    want = {q: _split_header(n)[0] for q, n in want.items()}

    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except OSError as e:
        raise InputError(f"cannot read the trace file ({e.strerror})", file=file) from None
    except UnicodeDecodeError:
        raise InputError("expected a UTF-8 text file", file=file) from None
    lines = [(n, s) for n, s in enumerate(text.splitlines(), start=1)
             if s.strip() and not s.lstrip().startswith("#")]
    if not lines:
        raise InputError("expected a header row and data rows; the file has none", file=file)

    head_no, head = lines[0]
    cells = [c.strip() for c in next(csv.reader([head]))]
    if len(cells) == 1 and ";" in cells[0]:
        raise InputError("expected comma-separated columns; the header holds ';'",
                         key=f"line {head_no}", value=cells[0], file=file)
    names = [_split_header(c)[0] for c in cells]

    where = {}     # quantity -> column index
    for q, name in want.items():
        hits = [j for j, n in enumerate(names) if n.lower() == name.lower()]
        if len(hits) > 1:     # case-blind matching is ambiguous: an exact match decides
            hits = [j for j in hits if names[j] == name] or hits
        if len(hits) > 1:
            raise InputError(f"column '{name}' appears {len(hits)} times (header names match "
                             "ignoring case); rename one or map it with columns",
                             key=cells[hits[0]], file=file)
        if hits:
            where[q] = hits[0]
        elif q in DECLARE_ZERO and q not in zero:
            raise InputError(
                f"missing column '{name}' (e.g. '{name} [{QUANTITIES[q][0]}]'); headers found: "
                f"{', '.join(cells)}. If the engine emits no {q}, say so in the case with "
                f'[transient] zero_columns = ["{q}"]' + did_you_mean(name, names), key=name,
                file=file)
        elif QUANTITIES[q][1]:
            raise InputError(
                f"missing required column '{name}' (quantity '{q}', e.g. '{name} "
                f"[{QUANTITIES[q][0]}]'); headers found: {', '.join(cells)}"
                + did_you_mean(name, names), key=name, file=file)
    shared = [q for q in where if list(where.values()).count(where[q]) > 1]
    if shared:
        raise InputError(f"one column is mapped to {', '.join(shared)}",
                         key=cells[where[shared[0]]], file=file)
    units = {}
    for q, j in where.items():
        unit = _split_header(cells[j])[1]
        if unit is None:
            raise InputError(f"expected a unit in square brackets, e.g. '{cells[j]} "
                             f"[{QUANTITIES[q][0]}]'", key=cells[j], file=file)
        units[q] = _unit(unit, q, cells[j], file)

    data = [s for _, s in lines[1:]]
    line_no = np.array([n for n, _ in lines[1:]])
    if not data:
        raise InputError("expected at least one data row after the header", file=file)
    width = np.array([s.count(",") for s in data]) + 1
    odd = np.flatnonzero(width != len(cells))
    if odd.size:
        r = int(odd[0])
        raise InputError(f"expected {len(cells)} cells as in the header, found {width[r]} "
                         f"(data row {r + 1}, file line {line_no[r]})",
                         key=f"line {line_no[r]}", value=data[r], file=file)
    try:
        df = pd.read_csv(io.StringIO("\n".join(data)), header=None, names=range(len(cells)),
                         usecols=sorted(where.values()), na_filter=False,
                         skipinitialspace=True)
    except pd.errors.ParserError as e:      # e.g. an unclosed quote
        raise InputError(f"cannot read the data rows as CSV ({e})", file=file) from None

    def locate(r: int) -> str:
        return f"data row {r + 1}, file line {line_no[r]}"

    reg, raw, si = ureg(), {}, {}
    for q, j in where.items():
        col = df[j]
        x = pd.to_numeric(col, errors="coerce").to_numpy(dtype=float)
        bad = np.flatnonzero(~np.isfinite(x))
        if bad.size:
            r = int(bad[0])
            cell = str(col.iloc[r]).strip()
            what = ", found an empty cell" if cell == "" else " (finite)"
            raise InputError(f"expected a number{what} ({locate(r)})", key=cells[j],
                             value=cell, file=file)
        raw[q] = x
        si[q] = np.asarray(reg.Quantity(x, units[q]).to(QUANTITIES[q][0]).magnitude, float)

    t = si["time"]
    if t[0] < 0:
        raise InputError(f"expected a time >= 0 at the start ({locate(0)})",
                         key=cells[where["time"]], value=float(raw["time"][0]), file=file)
    back = np.flatnonzero(np.diff(t) <= 0)
    if back.size:
        r = int(back[0]) + 1
        raise InputError(f"expected time strictly increasing, after {raw['time'][r - 1]:g} "
                         f"({locate(r)})", key=cells[where["time"]], value=float(raw["time"][r]),
                         file=file)
    for q, x in si.items():
        if q not in _RANGES:
            continue
        lo, hi, lo_in, what = _RANGES[q]
        # round-off of unit conversion (e.g. 1652 degF is 900 degC) is not a violation
        ok = ((x >= lo * (1 - 1e-12)) if lo_in else (x > lo)) & (x <= hi * (1 + 1e-12))
        bad = np.flatnonzero(~ok)
        if bad.size:
            r = int(bad[0])
            raise InputError(f"expected {what} ({locate(r)})", key=cells[where[q]],
                             value=float(raw[q][r]), file=file)

    n = len(t)
    full = {q: si[q] if q in si else np.full(n, _DEFAULTS[q]) for q in QUANTITIES}
    return Trace(t_s=full["time"], power_kW=full["power"], mass_flow_kg_s=full["exhaust_flow"],
                 T_K=full["T"], p_Pa=full["p"], O2_pct=full["O2"], H2O_pct=full["H2O"],
                 NOx_ppm=full["NOx"], NO2_fraction=full["NO2_fraction"], NH3_ppm=full["NH3"],
                 N2O_ppm=full["N2O"], H2_ppm=full["H2"], basis=basis, file=file)
