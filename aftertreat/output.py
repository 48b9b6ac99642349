"""Results as JSON-ready dictionaries and human tables; safe file writing.

Key names carry their units (``T_out_C``, ``dp_kPa``) and follow the CLI contract of the project.
"""
from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import numpy as np

from .dosing import anr

from .species import INDEX, SPECIES
from .stream import Stream
from .train import TrainSolution
from .units import NORMAL_CONDITIONS, ZERO_C_K

__all__ = ["stream_dict", "brick_dict", "point_dict", "write_atomic", "SAFETY_NOTE"]

#: Shown wherever results could guide a real installation.
SAFETY_NOTE = (
    "Safety: NH3 is toxic. Odour near 5 ppm, irritation near 30 ppm, intolerable near 140 ppm, "
    "dangerous from a few hundred ppm (NIOSH: 25 ppm 10-h average, 35 ppm 15-min, 300 ppm "
    "immediately dangerous to life or health). Stored NH3 is a pressurised liquid (about 9 bar "
    "at 20 C) or a refrigerated liquid (boils at -33 C). Results are model estimates with the "
    "parameter provenance shown; local codes, permits and licensed engineering practice govern "
    "any installation.")


def stream_dict(s: Stream) -> dict:
    """STREAM object: molar flows [mol/s], wet ppm and dry ppm per species."""
    return {"mol_s": {sp: float(s.F[INDEX[sp]]) for sp in SPECIES},
            "ppm_wet": s.ppm_wet(),
            "ppmvd": s.ppm_dry()}


def brick_dict(b) -> dict:
    """One brick of a solved train (a :class:`~aftertreat.reactor.BrickSolution`) for JSON."""
    return {"name": b.brick.name, "role": b.brick.role,
            "catalysts": [c.key for c in b.brick.catalysts],
            "volume_L": b.brick.volume * 1e3, "T_out_C": b.outlet.T - ZERO_C_K,
            "dp_kPa": b.dp.total_Pa / 1e3, "converged": b.converged,
            "residual": b.residual, "iterations": b.iterations,
            "outlet": stream_dict(b.outlet)}


def point_dict(case_title: str, sol: TrainSolution) -> dict:
    """The ``aftertreat.point/1`` object: one operating point of a train."""
    bricks = [brick_dict(b) for b in sol.bricks]
    return {"schema": "aftertreat.point/1", "case": case_title,
            "exhaust_kg_h": sol.inlet.mass_flow * 3600.0,
            "T_in_C": sol.inlet.T - ZERO_C_K, "T_out_C": sol.outlet.T - ZERO_C_K,
            "GHSV_per_h": sol.ghsv_per_h(), "GHSV_normal_conditions": NORMAL_CONDITIONS,
            "dp_kPa": sol.dp_Pa / 1e3,
            "ANR": anr(sol.inlet), "NOx_conversion": sol.nox_conversion(),
            "converged": sol.converged, "element_balance_error": sol.element_balance_error,
            "inlet": stream_dict(sol.inlet), "outlet": stream_dict(sol.outlet),
            "bricks": bricks, "warnings": sol.warnings, "solve_s": sol.seconds}


def _clean(o):
    if isinstance(o, float) and not np.isfinite(o):
        return None
    if isinstance(o, dict):
        return {k: _clean(v) for k, v in o.items()}
    if isinstance(o, list):
        return [_clean(v) for v in o]
    if isinstance(o, (np.floating,)):
        return _clean(float(o))
    if isinstance(o, (np.integer,)):
        return int(o)
    if isinstance(o, np.bool_):
        return bool(o)
    return o


def to_json(obj) -> str:
    """JSON text with NaN and infinities written as null (strict JSON)."""
    return json.dumps(_clean(obj), indent=2, allow_nan=False)


def current_umask() -> int:
    """The process's file-creation mask (read by setting it and putting it back)."""
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_atomic(path: str | Path, text: str | bytes) -> None:
    """Write a file through a temporary file in the same folder and rename it into place."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    mode = "wb" if isinstance(text, bytes) else "w"
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, mode) as fh:
            fh.write(text)
        os.chmod(tmp, 0o666 & ~current_umask())    # mkstemp makes 0600; give normal permissions
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
