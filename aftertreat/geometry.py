"""Channel geometry of a monolith brick cross-section: coated, extruded and plate catalysts.

A :class:`Substrate` holds one repeating unit of the cross-section and derives from it the
quantities the reactor model needs: pitch, hydraulic diameter, open frontal area (OFA), geometric
surface area per brick volume (GSA) and, per catalytic layer, its volume fraction of the brick and
its diffusion depth. Everything is SI [m, 1/m, 1/m^2].

Three kinds:

``coated``
    Square cells of an inert support wall (thickness t_w) carrying washcoat layers, listed from the
    gas side inward (top layer first, e.g. ``(SCR top, Pt bottom)`` for a dual-layer ammonia-slip
    catalyst). Each layer is a uniform flat film of thickness delta_k on the four walls, so it
    occupies a square annulus; the thicker washcoat fillets that form in real channel corners are
    ignored (common practice for a first-principles sizing model).
``extruded``
    Square cells whose whole wall is catalyst. The wall is reached from both of its faces, so the
    catalytic depth seen from the gas is t_w/2.
``plate``
    Parallel catalytic plates of thickness t separated by gap g; depth t/2 from each side.

Brick volume convention: V = frontal area * length, walls included (trade convention, common
practice), so every fraction below is per unit of that volume.

Equations (square cell, pitch p = 1/sqrt(N), N the cell density [1/m^2]):
    a_0 = p - t_w                            open side of the bare cell [m]
    d_h = a_0 - 2 sum_k delta_k              hydraulic diameter [m]
    OFA = (d_h/p)^2,  GSA = 4 d_h / p^2      [-], [1/m]
    f_k = (s_out,k^2 - s_in,k^2) / p^2        layer volume fraction, s the sides of the annulus
    f_wall = 1 - (a_0/p)^2
Plate (gap g, thickness t): p = g + t, d_h = 2 g, OFA = g/p, GSA = 2/p, f_plate = t/p.

References
----------
Shah, R. K. and London, A. L., *Laminar Flow Forced Convection in Ducts*, Academic Press, 1978
(hydraulic diameter of square ducts and parallel plates).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import InputError, did_you_mean
from .units import MIL

__all__ = ["Substrate", "KINDS", "CPSI_TO_PER_M2", "washcoat_thickness_from_loading"]

#: Valid substrate kinds.
KINDS: tuple[str, ...] = ("coated", "extruded", "plate")
#: Cells per square inch -> cells per square metre (1 inch = 0.0254 m exactly).
CPSI_TO_PER_M2 = 1.0 / 0.0254 ** 2


def _positive(value, key: str) -> float:
    """``value`` as a finite float > 0, else :class:`InputError` naming ``key``."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError("expected a positive number", key=key, value=value) from None
    if not math.isfinite(v) or v <= 0.0:
        raise InputError("expected a finite number > 0", key=key, value=value)
    return v


@dataclass(frozen=True)
class Substrate:
    """Cross-section of a monolith brick (see the module docstring for equations).

    Parameters
    ----------
    kind : {"coated", "extruded", "plate"}
    wall : float
        Wall thickness t_w (square kinds) or plate thickness t (plate) [m].
    cell_density : float or None
        Cells per frontal area N [1/m^2]; square kinds only.
    gap : float or None
        Channel gap g between plates [m]; plate only.
    washcoat : tuple of float
        Washcoat layer thicknesses [m], gas side first; coated only (empty = bare support).

    Use :meth:`coated`, :meth:`extruded` or :meth:`plate` to build from trade units.

    References
    ----------
    Shah & London (1978), see module docstring.
    """

    kind: str
    wall: float
    cell_density: float | None = None
    gap: float | None = None
    washcoat: tuple[float, ...] = ()

    def __post_init__(self):
        if self.kind not in KINDS:
            raise InputError(f"expected one of {', '.join(KINDS)}{did_you_mean(self.kind, KINDS)}",
                             key="kind", value=self.kind)
        object.__setattr__(self, "wall", _positive(self.wall, "wall"))
        wc = tuple(_positive(d, f"washcoat[{i}]") for i, d in enumerate(self.washcoat))
        object.__setattr__(self, "washcoat", wc)
        if self.kind == "plate":
            object.__setattr__(self, "gap", _positive(self.gap, "gap"))
            if self.cell_density is not None:
                raise InputError("a plate catalyst has no cell density (give gap and wall)",
                                 key="cell_density", value=self.cell_density)
        else:
            object.__setattr__(self, "cell_density",
                               _positive(self.cell_density, "cell_density"))
            if self.gap is not None:
                raise InputError("square-cell substrates have no gap (give cell_density)",
                                 key="gap", value=self.gap)
            if self.wall >= self.pitch:
                raise InputError(f"wall must be thinner than the cell pitch {self.pitch:.4g} m",
                                 key="wall", value=self.wall)
        if wc and self.kind != "coated":
            raise InputError(f"washcoat layers apply to kind 'coated' only, not '{self.kind}'",
                             key="washcoat", value=self.washcoat)
        if self.d_h <= 0.0:
            raise InputError("washcoat closes the channel: total thickness must be below half "
                             f"the open cell side {(self.pitch - self.wall) / 2:.4g} m",
                             key="washcoat", value=self.washcoat)
        if not 0.0 < self.ofa < 1.0:  # guards rounding at the extremes
            raise InputError("open frontal area must lie in (0, 1)", key="ofa", value=self.ofa)

    # --- constructors in trade units -------------------------------------------------------
    @classmethod
    def coated(cls, *, cpsi: float, wall_mil: float, washcoat_um=(30.0,)) -> "Substrate":
        """Washcoated square-cell support: cells per square inch, wall [mil], layers [um]."""
        cpsi = _positive(cpsi, "cpsi")
        wall_mil = _positive(wall_mil, "wall_mil")
        if isinstance(washcoat_um, (int, float)):
            washcoat_um = (washcoat_um,)
        layers = tuple(_positive(d, f"washcoat_um[{i}]") * 1e-6 for i, d in enumerate(washcoat_um))
        return cls("coated", wall_mil * MIL, cell_density=cpsi * CPSI_TO_PER_M2, washcoat=layers)

    @classmethod
    def extruded(cls, *, cpsi: float, wall_mm: float) -> "Substrate":
        """Fully catalytic extruded square-cell brick: cells per square inch, wall [mm]."""
        return cls("extruded", _positive(wall_mm, "wall_mm") * 1e-3,
                   cell_density=_positive(cpsi, "cpsi") * CPSI_TO_PER_M2)

    @classmethod
    def plate(cls, *, gap_mm: float, plate_mm: float) -> "Substrate":
        """Parallel catalytic plates: gap between plates and plate thickness [mm]."""
        return cls("plate", _positive(plate_mm, "plate_mm") * 1e-3,
                   gap=_positive(gap_mm, "gap_mm") * 1e-3)

    # --- derived geometry ------------------------------------------------------------------
    @property
    def shape(self) -> str:
        """Channel cross-section for the transport constants: ``"square"`` or ``"slit"``."""
        return "slit" if self.kind == "plate" else "square"

    @property
    def pitch(self) -> float:
        """Repeat distance p [m]: 1/sqrt(N) for square cells, g + t for plates."""
        if self.kind == "plate":
            return self.gap + self.wall
        return 1.0 / math.sqrt(self.cell_density)

    @property
    def d_h(self) -> float:
        """Hydraulic diameter [m]: p - t_w - 2 sum(delta) (square), 2 g (slit)."""
        if self.kind == "plate":
            return 2.0 * self.gap
        return self.pitch - self.wall - 2.0 * sum(self.washcoat)

    @property
    def ofa(self) -> float:
        """Open frontal area sigma [-]: (d_h/p)^2 (square), g/(g+t) (plate)."""
        if self.kind == "plate":
            return self.gap / self.pitch
        return (self.d_h / self.pitch) ** 2

    @property
    def gsa(self) -> float:
        """Geometric surface area per brick volume a [1/m]: 4 d_h/p^2 (square), 2/(g+t)."""
        if self.kind == "plate":
            return 2.0 / self.pitch
        return 4.0 * self.d_h / self.pitch ** 2

    @property
    def wall_fraction(self) -> float:
        """Volume fraction of the structural wall [-]: 1 - ((p - t_w)/p)^2, plate t/(g+t).

        For ``extruded`` and ``plate`` the wall is the catalyst, so this equals the single entry
        of :attr:`layer_volume_fractions`; for ``coated`` it is the inert support.
        """
        if self.kind == "plate":
            return self.wall / self.pitch
        return 1.0 - ((self.pitch - self.wall) / self.pitch) ** 2

    @property
    def layer_volume_fractions(self) -> tuple[float, ...]:
        """Volume fraction of the brick in each catalytic layer, gas side first [-]."""
        if self.kind != "coated":
            return (self.wall_fraction,)
        p = self.pitch
        out, inner_side = [], self.d_h
        for delta in self.washcoat:          # gas-side layer first: grow outward from d_h
            outer_side = inner_side + 2.0 * delta
            out.append((outer_side ** 2 - inner_side ** 2) / p ** 2)
            inner_side = outer_side
        return tuple(out)

    @property
    def layer_depths(self) -> tuple[float, ...]:
        """Diffusion depth of each catalytic layer [m]: delta_k, t_w/2 or t/2."""
        if self.kind == "coated":
            return self.washcoat
        return (self.wall / 2.0,)

    @property
    def catalytic_fraction(self) -> float:
        """Sum of :attr:`layer_volume_fractions` [-]."""
        return float(sum(self.layer_volume_fractions))


def washcoat_thickness_from_loading(loading_g_L: float, density_kg_m3: float, cpsi: float,
                                    wall_mil: float, *, beneath_m: float = 0.0) -> float:
    """Uniform layer thickness delta [m] that holds a washcoat loading on a square-cell support.

    The layer volume fraction is f = loading/rho_layer (loading in g/L = kg/m^3 of brick, rho the
    layer's apparent density [kg/m^3]). On a cell of pitch p whose open side before this layer is
    a = p - t_w - 2*beneath, the layer is a square annulus: a^2 - (a - 2 delta)^2 = f p^2, so

        delta = (a - sqrt(a^2 - f p^2)) / 2,

    the root with delta < a/2. ``beneath_m`` is the total thickness of layers already coated
    under this one [m] (0 for the bottom layer). Corner fillets are ignored (see module notes).

    References
    ----------
    Square-annulus area: elementary geometry (no external source).
    """
    loading = _positive(loading_g_L, "loading_g_L")
    rho = _positive(density_kg_m3, "density_kg_m3")
    p = 1.0 / math.sqrt(_positive(cpsi, "cpsi") * CPSI_TO_PER_M2)
    beneath = float(beneath_m)
    if not math.isfinite(beneath) or beneath < 0.0:
        raise InputError("expected a finite thickness >= 0 [m]", key="beneath_m", value=beneath_m)
    a = p - _positive(wall_mil, "wall_mil") * MIL - 2.0 * beneath
    if a <= 0.0:
        raise InputError("wall and underlying layers close the cell", key="wall_mil",
                         value=wall_mil)
    f = loading / rho
    disc = a * a - f * p * p
    if disc <= 0.0:
        raise InputError(f"loading does not fit in the open cell (max {a * a / p ** 2 * rho:.4g} "
                         "g/L at this density)", key="loading_g_L", value=loading_g_L)
    # Rationalised form of (a - sqrt(disc))/2 avoids cancellation for thin layers.
    return f * p * p / (2.0 * (a + math.sqrt(disc)))
