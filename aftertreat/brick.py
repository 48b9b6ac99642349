"""A catalyst brick: substrate, catalytic layers, size, ageing and numerical settings."""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

from .catalyst import Catalyst
from .errors import InputError
from .geometry import Substrate

__all__ = ["Brick", "WASHCOAT_MODELS", "GRIDS", "solid_heat_capacity_J_m3K"]


@lru_cache(maxsize=1)
def _materials() -> dict:
    import tomllib
    from importlib import resources
    return tomllib.loads(resources.files("aftertreat").joinpath("data/materials.toml")
                         .read_text(encoding="utf-8"))


def solid_heat_capacity_J_m3K(kind: str) -> float:
    """Volumetric heat capacity of a substrate kind's solid [J/(m^3 K)] (from memory, +-30 %:
    see ``data/materials.toml``)."""
    return float(_materials()[kind]["solid_heat_capacity_MJ_m3K"]) * 1e6

#: How diffusion in the catalytic layer is treated.
#: ``effectiveness``: slab Thiele modulus from the local linearised rate, eta = tanh(phi)/phi
#: (single layer only); ``resolved``: finite volumes across each layer (needed for a dual-layer
#: ammonia-slip catalyst, whose N2 selectivity comes from the layer coupling).
WASHCOAT_MODELS = ("effectiveness", "resolved", "none")
#: How the cells are spaced along a brick: ``graded`` puts edges at z_k = L (k/N)^2 (small cells
#: at the inlet, where the film transfer coefficient of developing flow varies as z^-1/2 and the
#: profiles are steepest; the last cell is twice the uniform width), ``uniform`` at L k/N.
GRIDS = ("graded", "uniform")


@dataclass
class Brick:
    """One monolith brick of a train.

    Parameters
    ----------
    name : a label used in results.
    substrate : the channel geometry (:class:`~aftertreat.geometry.Substrate`).
    catalysts : one catalyst per catalytic layer of the substrate, gas side first (a dual-layer
        ASC is ``(scr_catalyst, oxidation_catalyst)`` on a two-layer washcoat).
    length, diameter : [m]. Brick volume V = pi/4 D^2 L, walls included (trade convention).
    activity : ageing multiplier on the catalytic reaction rates (1 = fresh).
    washcoat : one of :data:`WASHCOAT_MODELS`; ``None`` picks ``effectiveness`` for one layer and
        ``resolved`` for more. ``none`` ignores internal diffusion (eta = 1; analytical checks).
    nodes_per_layer : finite volumes across each layer in the resolved model (graded towards
        each layer's gas side, :data:`aftertreat.problem.NODE_SPREAD`).
    cells : finite volumes along the brick.
    grid : spacing of the cells, one of :data:`GRIDS`.

    The default resolution (80 graded cells, 32 nodes per resolved layer) keeps outlet NO, NO2,
    NH3 and N2O within 0.1 % of a grid-converged solution on the demo cases and on a seeded
    random design space (``tests/validation/test_grid.py``, ``docs/model.md``).
    sherwood : film mass/heat-transfer correlation, a method of :func:`aftertreat.transport.sherwood`.
    film : ``False`` switches film resistance off (kinetic limit; for analytical checks).
    apparent_friction : include the entrance-region apparent friction (Shah 1978).
    heat_loss_W_m2K : heat loss coefficient through the can to ambient, on the can surface.
    heat_capacity_kJ_m3K : heat capacity of the brick per m^3 of brick (transient model);
        ``None`` takes (1 - OFA) x the substrate kind's solid value (``data/materials.toml``).
    """
    name: str
    substrate: Substrate
    catalysts: tuple[Catalyst, ...]
    length: float
    diameter: float
    activity: float = 1.0
    washcoat: str | None = None
    nodes_per_layer: int = 32
    cells: int = 80
    grid: str = "graded"
    sherwood: str = "tronconi_forzatti_1992"
    film: bool = True
    apparent_friction: bool = True
    heat_loss_W_m2K: float = 0.0
    T_ambient: float = 298.15
    heat_capacity_kJ_m3K: float | None = None
    extra: dict = field(default_factory=dict)

    def __post_init__(self):
        if isinstance(self.catalysts, Catalyst):
            self.catalysts = (self.catalysts,)
        self.catalysts = tuple(self.catalysts)
        n_layers = len(self.substrate.layer_depths)
        if len(self.catalysts) != n_layers:
            raise InputError(f"the substrate has {n_layers} catalytic layer(s): give one catalyst "
                             "per layer, gas side first", key=f"{self.name}.catalysts",
                             value=[c.key for c in self.catalysts])
        for key, v in (("length", self.length), ("diameter", self.diameter)):
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
                raise InputError("expected a length > 0", key=f"{self.name}.{key}", value=v)
        if not (0 < self.activity <= 2):
            raise InputError("expected an activity multiplier in (0, 2] (1 = fresh)",
                             key=f"{self.name}.activity", value=self.activity)
        if self.washcoat is None:
            self.washcoat = "effectiveness" if n_layers == 1 else "resolved"
        if self.washcoat not in WASHCOAT_MODELS:
            raise InputError(f"expected one of {WASHCOAT_MODELS}", key=f"{self.name}.washcoat",
                             value=self.washcoat)
        if self.washcoat == "effectiveness" and n_layers > 1:
            raise InputError("the effectiveness-factor model holds one layer only; use 'resolved'",
                             key=f"{self.name}.washcoat", value=self.washcoat)
        if int(self.cells) < 2:
            raise InputError("expected at least 2 cells", key=f"{self.name}.cells",
                             value=self.cells)
        if self.grid not in GRIDS:
            raise InputError(f"expected one of {GRIDS}", key=f"{self.name}.grid", value=self.grid)
        if int(self.nodes_per_layer) < 1:
            raise InputError("expected at least 1 node per layer",
                             key=f"{self.name}.nodes_per_layer", value=self.nodes_per_layer)
        if self.heat_capacity_kJ_m3K is not None and not (
                isinstance(self.heat_capacity_kJ_m3K, (int, float))
                and 10.0 <= self.heat_capacity_kJ_m3K <= 10000.0):
            raise InputError("expected a heat capacity in 10..10000 kJ/(m3 K) per m3 of brick",
                             key=f"{self.name}.heat_capacity_kJ_m3K",
                             value=self.heat_capacity_kJ_m3K)
        if self.heat_loss_W_m2K < 0:
            raise InputError("expected a heat-loss coefficient >= 0",
                             key=f"{self.name}.heat_loss_W_m2K", value=self.heat_loss_W_m2K)

    @property
    def heat_capacity_J_m3K(self) -> float:
        """Heat capacity of the brick per m^3 of brick [J/(m^3 K)] (see the class docstring)."""
        if self.heat_capacity_kJ_m3K is not None:
            return self.heat_capacity_kJ_m3K * 1e3
        return (1.0 - self.substrate.ofa) * solid_heat_capacity_J_m3K(self.substrate.kind)

    def cell_edges(self):
        """Edges of the finite volumes along the brick [m], 0 to ``length`` (:data:`GRIDS`)."""
        import numpy as np
        s = np.linspace(0.0, 1.0, int(self.cells) + 1)
        return (s * s if self.grid == "graded" else s) * self.length

    @property
    def frontal_area(self) -> float:
        """[m^2]"""
        return math.pi / 4.0 * self.diameter ** 2

    @property
    def volume(self) -> float:
        """Brick volume, walls included [m^3]."""
        return self.frontal_area * self.length

    @property
    def role(self) -> str:
        """``SCR``, ``ASC`` (an oxidation layer under an SCR layer) or ``oxidation``."""
        roles = [c.role for c in self.catalysts]
        if all(r == "SCR" for r in roles):
            return "SCR"
        if roles[0] == "SCR" and "oxidation" in roles:
            return "ASC"
        return "oxidation"
