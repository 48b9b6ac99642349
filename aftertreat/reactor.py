"""Steady 1D two-phase model of one monolith brick: its balances, and the solved brick.

Balances per finite volume j (width dz_j; upwind: the cell takes its outlet state), after the
textbook two-phase channel model (e.g. Froment, Bischoff & De Wilde 2011, ch. 11); the full
statement with units is in ``docs/model.md``:

* gas molar flows (all species; stored NH3 counted as NH3, so N, H and O balance exactly)::

      F_j - F_{j-1} = sum_r nu_equiv[r] xi_r ,      xi_r = A_f dz_j f_layer <eta_r r_r>   [mol/s]

* film = reaction for each species that enters a rate (one surface node per layer, or finite
  volumes across each layer with diffusion between them)::

      a A_f dz_j k_m,i (c_i - c_s,i) = - sum_r nu_gas[r, i] xi_r ,   k_m,i = Sh D_i / d_h

* NH3 coverage at steady state, per site::   sum_r nu_site[r] r_r = 0
* gas energy (the gas crosses the cell at a constant solid temperature, exactly)::

      T_g,j - T_s = (T_g,j-1 - T_s) exp(-NTU),   NTU = h a A_f dz_j / (F c_p)

* solid energy::  sum_r (-dH_r) xi_r - F (h(T_g,j) - h(T_g,j-1)) - U pi D dz_j (T_s - T_amb) = 0

  (the gas takes the enthalpy rise of its flow, h the molar enthalpy of the inlet composition
  from NASA-7 data: exact for any temperature change across a cell)

The bulk gas a cell reacts with is the mean of its plug-flow profile between inlet and outlet
(logarithmic for a falling species, arithmetic for a rising one), which makes the scheme exact
for first-order loss at a constant surface state on any grid.

Washcoat: each catalytic layer is a flat slab of thickness f_k / a (Aris's volume-to-surface
length). ``effectiveness`` multiplies the rates whose ``diffusion_key`` is species k by
eta_k = tanh(phi)/phi, phi = delta sqrt(k_v / D_eff,k), k_v = sum_r |nu_equiv[r,k]| r_r / c_s,k
(Thiele 1939; Aris 1975). ``resolved`` puts graded finite volumes across every layer with flux
continuity between layers and no flux at the wall.

The brick is compiled into plain arrays (:mod:`aftertreat.problem`) and solved by marching from
the inlet, a damped Newton solve per cell inside physical bounds (:mod:`aftertreat.solver`,
kernels :mod:`aftertreat.kernel_numba` and :mod:`aftertreat.kernel_numpy`). A result counts as
converged only when every cell converged and its element and energy balances close.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from . import transport
from .brick import Brick
from .errors import ConvergenceError, InputError
from .problem import BrickProblem, StateLayout, problem_for
from .solver import SolverSettings, WarmStart, solve
from .species import INDEX, SPECIES
from .stream import Stream
from .units import ZERO_C_K

__all__ = ["BrickSolution", "solve_brick", "SolverSettings", "require_converged", "WarmStart"]

NSP = len(SPECIES)


@dataclass
class BrickSolution:
    """Steady state of one brick: outlet stream, axial profiles and solver status."""
    brick: Brick
    inlet: Stream
    outlet: Stream
    z: np.ndarray                      # cell centres [m]
    F: np.ndarray                      # [ncell, nsp] molar flows at cell outlets [mol/s]
    T_gas: np.ndarray                  # [ncell] [K]
    T_solid: np.ndarray                # [ncell] [K]
    coverage: np.ndarray               # [ncell, nnode, nsite] NH3 coverage [-]
    c_surface: np.ndarray              # [ncell, nnode, nspecies-in-rates] [mol/m^3]
    film_species: list[str]
    node_layer: np.ndarray             # [nnode] layer index of each washcoat node
    dp: transport.PressureDrop
    converged: bool
    residual: float
    iterations: int                    # Jacobians formed (chord steps reuse one; not counted)
    element_balance_error: float
    seconds: float
    energy_balance_K: float = 0.0      # energy-balance error, as kelvin of the outlet gas
    notes: list[str] = field(default_factory=list)
    #: the solved state, its layout and grid, and the kernel's Jacobian factors: what a
    #: neighbouring solve starts from (``Train.solve(..., guess=...)``)
    warm_start: WarmStart | None = field(default=None, repr=False, compare=False)
    extents: np.ndarray | None = field(default=None, repr=False, compare=False)  # [n, R] mol/s
    evaluations: int = 0               # cell residual evaluations
    attempts: list[str] = field(default_factory=list)

    @property
    def layout(self) -> StateLayout:
        return self.warm_start.layout

    @property
    def state(self) -> np.ndarray:
        """The solver's unknowns [ncell, nv] (named by :attr:`layout`)."""
        return self.warm_start.x

    def reaction_extents(self) -> list[np.ndarray]:
        """Reaction extents per layer [ncell, nrxn of the layer] in mol/s (rates x catalyst
        volume) at the solved state."""
        out, lo = [], 0
        for cat in self.brick.catalysts:
            hi = lo + cat.mechanism.n_reactions
            out.append(self.extents[:, lo:hi])
            lo = hi
        return out

    def ppm_profile(self, species: str) -> np.ndarray:
        """Wet ppm of ``species`` at every cell outlet."""
        return self.F[:, INDEX[species]] / self.F.sum(axis=1) * 1e6


#: Whether an inlet temperature outside a catalyst's validity range is an error (strict) or a
#: warning carried in the solution's notes (the default; ``aftertreat ... --strict`` sets it).
_STRICT_RANGE = [False]


def set_strict_temperature_range(strict: bool) -> None:
    """Make an inlet temperature outside a catalyst's validity range an :class:`InputError`
    (``True``) or a warning in the solution's notes (``False``, the default)."""
    _STRICT_RANGE[0] = bool(strict)


def solve_brick(brick: Brick, inlet: Stream, *, guess: "WarmStart | BrickSolution | None" = None,
                settings: SolverSettings | None = None,
                check_validity: bool = True) -> BrickSolution:
    """Steady state of ``brick`` fed by ``inlet``.

    An inlet temperature outside a catalyst's validity range is a warning in the notes (the
    same rule as for the brick's own temperatures), or an :class:`InputError` in strict mode
    (:func:`set_strict_temperature_range`); ``check_validity=False`` skips the check.

    Never raises on non-convergence: the solution carries ``converged`` and ``residual``.
    ``guess`` (a previous solution or its :class:`WarmStart`) warm-starts the solver: for a
    neighbouring problem (a slightly longer brick, a nearby inlet) its states and Jacobian
    factors let most cells converge by chord steps alone.
    """
    t0 = time.perf_counter()
    range_notes = []
    if check_validity:
        for cat in brick.catalysts:
            if _STRICT_RANGE[0]:
                cat.check_temperature(inlet.T, f"inlet temperature of brick '{brick.name}'")
            lo, hi = cat.valid_T
            if not lo - 1e-9 <= inlet.T <= hi + 1e-9:
                range_notes.append(
                    f"inlet temperature {inlet.T - ZERO_C_K:.1f} C is outside the validity range "
                    f"{lo - ZERO_C_K:.0f}..{hi - ZERO_C_K:.0f} C of '{cat.key}': the rates are "
                    "extrapolated")
    if isinstance(guess, BrickSolution):
        guess = guess.warm_start
    prob = problem_for(brick)
    bound = prob.bind(inlet)
    out = solve(bound, guess=guess, settings=settings)
    sol = package(prob, bound, out, time.perf_counter() - t0)
    if range_notes:                      # one note per catalyst: the inlet's says it already
        said = [c.key for c in brick.catalysts if any(f"of '{c.key}'" in n for n in range_notes)]
        sol.notes[:] = range_notes + [n for n in sol.notes if not (
            n.startswith("catalyst temperature reached") and any(f"'{k}'" in n for k in said))]
    return sol


def package(prob: BrickProblem, bound, out, seconds: float) -> BrickSolution:
    """A :class:`BrickSolution` from the solver's outcome (pressure drop, outlet, notes)."""
    b, inlet, lay = prob.brick, bound.inlet, prob.layout
    x = out.x
    F = lay.flows(x).copy()
    Tg, Ts = lay.T_gas(x).copy(), lay.T_solid(x).copy()
    dp = bound.pressure_drop(x)
    notes = list(bound.notes)
    if dp.total_Pa > 0.5 * inlet.p:
        raise InputError(f"pressure drop {dp.total_Pa / 1e3:.1f} kPa exceeds half the inlet "
                         f"pressure {inlet.p / 1e3:.1f} kPa: the brick is far too long or the "
                         "flow far too high for this substrate", key=f"brick '{b.name}'",
                         value=f"length {b.length * 1e3:.0f} mm, diameter {b.diameter * 1e3:.0f} mm")
    if dp.total_Pa > 0.1 * inlet.p:
        notes.append(f"pressure drop {dp.total_Pa / 1e3:.1f} kPa is over 10 % of the inlet "
                     "pressure; the reaction model uses the inlet pressure throughout")
    if not out.converged:
        notes.append("not converged (" + "; ".join(out.attempts) + ")")
    # the state is inside its bounds by construction (flows >= 0): the outlet is not clipped
    outlet = Stream(F=F[-1], T=float(Tg[-1]), p=inlet.p - dp.total_Pa)
    for cat in b.catalysts:
        lo, hi = cat.valid_T
        if Ts.max() > hi or Ts.min() < lo:
            notes.append(f"catalyst temperature reached {Ts.min() - ZERO_C_K:.0f}.."
                         f"{Ts.max() - ZERO_C_K:.0f} C, outside the validity range "
                         f"{lo - ZERO_C_K:.0f}..{hi - ZERO_C_K:.0f} C of '{cat.key}'")
    z = prob.z_edges
    warm = WarmStart(layout=lay, z_edges=z, x=x, factors=out.factors, kernel=out.kernel)
    return BrickSolution(
        brick=b, inlet=inlet, outlet=outlet, z=0.5 * (z[:-1] + z[1:]), F=F, T_gas=Tg,
        T_solid=Ts, coverage=lay.coverage(x).copy(), c_surface=lay.c_surface(x).copy(),
        film_species=list(lay.film_species), node_layer=np.array(lay.node_layer), dp=dp,
        converged=bool(out.converged), residual=float(out.residual), iterations=out.jacobians,
        element_balance_error=float(out.element_balance_error), seconds=seconds,
        energy_balance_K=float(out.energy_balance_K), notes=notes, warm_start=warm,
        extents=out.extents, evaluations=out.evaluations, attempts=out.attempts)


def require_converged(sol: BrickSolution) -> BrickSolution:
    """Raise :class:`ConvergenceError` unless ``sol`` converged."""
    if not sol.converged:
        raise ConvergenceError(f"brick '{sol.brick.name}' did not converge "
                               f"(scaled residual {sol.residual:.2e})", sol.residual)
    return sol
