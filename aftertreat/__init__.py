"""aftertreat: size SCR and ammonia-slip catalysts behind ammonia-fuelled engines and turbines.

Quantities are SI inside the library, and the quantity unit is the mole (mol, mol/s). A script
builds a train and solves one operating point in a few lines::

    import aftertreat as at
    scr = at.Brick("SCR 1", at.Substrate.extruded(cpsi=35, wall_mm=0.7),
                   at.load_catalyst("vanadia_extruded"), length=0.6, diameter=0.8)
    exhaust = at.Stream.from_mole_fractions(
        {"NO": 800e-6, "NH3": 900e-6, "O2": 0.10, "H2O": 0.22}, T=623.15, mass_kg_s=1.2)
    result = at.Train([scr]).solve(exhaust)
    print(result.outlet.ppm("NO"), result.brick_table())

A duty-cycle case (engine, fuel, cycle, engine-out, dosing, train, limits) runs with
``at.run_case(at.load_run_case("cases/genset_d2.toml"))`` and sizes with ``at.size_case(...)``.
"""
from .brick import Brick
from .catalyst import (Catalyst, LayeredCatalyst, available_catalysts, load_catalyst,
                       load_layers)
from .cyclecase import load_run_case
from .errors import ConvergenceError, InputError
from .evaluate import CycleResult, run_case
from .geometry import Substrate
from .reactor import BrickSolution, SolverSettings, solve_brick
from .species import SPECIES
from .stream import Stream
from .sizing import SizingResult, size_case
from .train import Train, TrainSolution

__version__ = "0.1.0"

__all__ = ["Brick", "BrickSolution", "Catalyst", "ConvergenceError", "CycleResult",
           "InputError", "LayeredCatalyst", "SPECIES", "SizingResult", "SolverSettings",
           "Stream", "Substrate", "Train", "TrainSolution", "available_catalysts",
           "load_catalyst", "load_layers", "load_run_case", "run_case", "size_case",
           "solve_brick", "__version__"]
