"""A train of bricks in series, solved at one operating point, and its results.

The outlet stream of each brick (flows, temperature, pressure after its pressure drop) feeds the
next one. Results keep every brick's solution and convert to pandas tables with units in the
column names.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from .brick import Brick
from .errors import InputError
from .problem import signature
from .reactor import BrickSolution, SolverSettings, solve_brick
from .species import ELEMENT_MATRIX, INDEX, NOX, SPECIES
from .stream import Stream
from .units import P_NORMAL_PA, R_GAS, T_NORMAL_K, ZERO_C_K

__all__ = ["Train", "TrainSolution"]


@dataclass
class Train:
    """Bricks in flow order (e.g. SCR, SCR, ASC)."""
    bricks: list[Brick]

    def __post_init__(self):
        self.bricks = list(self.bricks)
        if not self.bricks:
            raise InputError("a train needs at least one brick", key="bricks")
        names = [b.name for b in self.bricks]
        dup = {n for n in names if names.count(n) > 1}
        if dup:
            raise InputError("brick names must be unique", key="bricks", value=sorted(dup))

    @property
    def volume(self) -> float:
        """Total brick volume [m^3]."""
        return sum(b.volume for b in self.bricks)

    def provenance(self):
        """Every kinetic parameter of the train's catalysts with its provenance, as a table
        (one block per catalyst, in flow order)."""
        import pandas as pd
        rows, seen = [], set()
        for b in self.bricks:
            for c in b.catalysts:
                if c.key not in seen:
                    seen.add(c.key)
                    rows += c.provenance_table()
        return pd.DataFrame(rows)

    def sources(self) -> list[str]:
        """Citations of the catalysts and correlations this train's model uses: each catalyst's
        own sources, then the transfer, pressure-loss and property correlations."""
        from .citations import MODEL_SOURCES
        out: list[str] = []
        for b in self.bricks:
            for c in b.catalysts:
                out += c.citations()
        keys = [b.sherwood for b in self.bricks]
        keys += ["shah_london_1978", "kays_london_1984", "rennels_2012", "cantera"]
        if any(b.washcoat == "effectiveness" for b in self.bricks):
            keys.append("thiele_1939")
        if any(b.apparent_friction for b in self.bricks):
            keys.append("shah_1978")
        out += [MODEL_SOURCES[k] for k in keys]
        return list(dict.fromkeys(out))

    def solve(self, inlet: Stream, *, settings: SolverSettings | None = None,
              guess: "TrainSolution | None" = None) -> "TrainSolution":
        """Steady state of the train fed by ``inlet`` (the stream at the first brick's face).

        ``guess`` is a previous solution of a train like this one (or a list holding a
        :class:`~aftertreat.solver.WarmStart` or None per brick) used to warm-start each brick;
        sizing loops and what-ifs pass it in. A brick of ``guess`` that is
        the same problem as now (same brick, same inlet) is reused without solving.
        """
        t0 = time.perf_counter()
        sols: list[BrickSolution] = []
        stream = inlet
        for i, b in enumerate(self.bricks):
            g = None
            prevs = guess.bricks if isinstance(guess, TrainSolution) else guess
            if prevs is not None and i < len(prevs):
                prev = prevs[i]
                if (isinstance(prev, BrickSolution) and prev.converged
                        and _same_brick(prev.brick, b) and _same_stream(prev.inlet, stream)):
                    sols.append(prev)           # same brick, same inlet: the same steady state
                    stream = prev.outlet
                    continue
                g = prev.warm_start if isinstance(prev, BrickSolution) else prev
            sol = solve_brick(b, stream, guess=g, settings=settings)
            sols.append(sol)
            stream = sol.outlet
        return TrainSolution(train=self, inlet=inlet, bricks=sols,
                             seconds=time.perf_counter() - t0)


def ghsv_per_h(stream: Stream, volume: float, T_normal: float = T_NORMAL_K,
               p_normal: float = P_NORMAL_PA) -> float:
    """GHSV [1/h]: volumetric flow at the normal conditions (T_normal [K], p_normal [Pa]) over
    the brick volume [m^3], walls included (trade convention)."""
    return stream.total * R_GAS * T_normal / p_normal / volume * 3600.0


def _same_brick(a: Brick, b: Brick) -> bool:
    """True when two bricks define the same steady problem (same catalyst objects, geometry,
    grid and settings: :func:`aftertreat.problem.signature`)."""
    return a is b or signature(a) == signature(b)


def _same_stream(a: Stream, b: Stream) -> bool:
    return a.T == b.T and a.p == b.p and np.array_equal(a.F, b.F)


@dataclass
class TrainSolution:
    """Steady state of a train: one :class:`~aftertreat.reactor.BrickSolution` per brick."""
    train: Train
    inlet: Stream
    bricks: list[BrickSolution]
    seconds: float = 0.0
    notes: list[str] = field(default_factory=list)

    @property
    def warnings(self) -> list[str]:
        """Notes from every brick (correlation substitutions, temperatures out of range)."""
        return [f"{b.brick.name}: {n}" for b in self.bricks for n in b.notes]

    @property
    def outlet(self) -> Stream:
        return self.bricks[-1].outlet

    @property
    def converged(self) -> bool:
        return all(b.converged for b in self.bricks)

    @property
    def residual(self) -> float:
        """Largest scaled residual over the bricks."""
        return max(b.residual for b in self.bricks)

    @property
    def element_balance_error(self) -> float:
        """max |N, H, O atoms out - in| / max(atoms in) over the whole train [-]."""
        a_in = ELEMENT_MATRIX @ self.inlet.F
        a_out = ELEMENT_MATRIX @ self.outlet.F
        return float(np.max(np.abs(a_out - a_in)) / np.max(a_in))

    @property
    def dp_Pa(self) -> float:
        """Total pressure drop over the train [Pa]."""
        return sum(b.dp.total_Pa for b in self.bricks)

    def nox_conversion(self) -> float:
        """1 - (NO + NO2 out)/(NO + NO2 in), on molar flows [-]."""
        idx = [INDEX[s] for s in NOX]
        nin = self.inlet.F[idx].sum()
        return float(1.0 - self.outlet.F[idx].sum() / nin) if nin > 0 else float("nan")

    def ghsv_per_h(self, T_normal: float = T_NORMAL_K, p_normal: float = P_NORMAL_PA) -> float:
        """Gas hourly space velocity over the whole train [1/h], normal conditions given [K, Pa]."""
        return ghsv_per_h(self.inlet, self.train.volume, T_normal, p_normal)

    # ---- tables --------------------------------------------------------------------------------
    def brick_table(self):
        """One row per brick: volume, outlet temperature, pressure drop, outlet ppm, status."""
        import pandas as pd
        rows = []
        for s in self.bricks:
            b = s.brick
            row = {"name": b.name, "role": b.role,
                   "catalysts": "+".join(c.key for c in b.catalysts),
                   "volume_L": b.volume * 1e3, "length_mm": b.length * 1e3,
                   "diameter_mm": b.diameter * 1e3,
                   "GHSV_per_h": ghsv_per_h(s.inlet, b.volume),
                   "T_in_C": s.inlet.T - ZERO_C_K, "T_out_C": s.outlet.T - ZERO_C_K,
                   "dp_kPa": s.dp.total_Pa / 1e3}
            for sp in ("NO", "NO2", "NH3", "N2O"):
                row[f"{sp}_out_ppm_wet"] = s.outlet.ppm(sp)
            row.update({"converged": s.converged, "residual": s.residual,
                        "iterations": s.iterations, "element_balance_error":
                        s.element_balance_error})
            rows.append(row)
        return pd.DataFrame(rows)

    def profiles(self):
        """Axial profiles along the train: one row per cell, z measured from the train inlet.

        Columns: ``brick``, ``z_mm``, wet ppm of each species (``NO_ppm_wet`` ...), ``T_gas_C``,
        ``T_solid_C``, and the NH3 coverage of the gas-side node of each site (``theta_<layer>_<site>``).
        """
        import pandas as pd
        frames = []
        z0 = 0.0
        for s in self.bricks:
            d = {"brick": s.brick.name, "z_mm": (z0 + s.z) * 1e3}
            tot = s.F.sum(axis=1)
            for sp in SPECIES:
                d[f"{sp}_ppm_wet"] = s.F[:, INDEX[sp]] / tot * 1e6
            d["T_gas_C"] = s.T_gas - ZERO_C_K
            d["T_solid_C"] = s.T_solid - ZERO_C_K
            for k, cat in enumerate(s.brick.catalysts):
                first = int(np.nonzero(s.node_layer == k)[0][0])
                for j, site in enumerate(cat.mechanism.sites):
                    d[f"theta_{cat.key}_{site}"] = s.coverage[:, first, j]
            frames.append(pd.DataFrame(d))
            z0 += s.brick.length
        return pd.concat(frames, ignore_index=True)

    def to_pandas(self):
        """The axial profiles (:meth:`profiles`); :meth:`brick_table` gives the per-brick summary."""
        return self.profiles()

    def provenance(self):
        """Every kinetic parameter behind this result with its provenance
        (:meth:`Train.provenance`)."""
        return Train([b.brick for b in self.bricks]).provenance()

    def sources(self) -> list[str]:
        """Citations of the catalysts and correlations used (:meth:`Train.sources`)."""
        return Train([b.brick for b in self.bricks]).sources()
