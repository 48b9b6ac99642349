"""Citations of the models and data the program uses, keyed by the name used in the code.

Catalyst files carry their own ``[[source]]`` entries; this table covers correlations, methods and
data that are part of the program itself. :meth:`aftertreat.train.Train.sources` collects the
ones a train's model uses, and :func:`case_sources` adds the case's cycle, trace, limit sets and
GWP set: ``aftertreat sources``, a report's ``sources.txt`` and the terminal UI all list
:func:`case_sources`.
"""
from __future__ import annotations

__all__ = ["MODEL_SOURCES", "case_sources"]

MODEL_SOURCES: dict[str, str] = {
    "shah_london_1978": "Shah, R.K. and London, A.L. (1978). Laminar Flow Forced Convection in "
                        "Ducts. Academic Press (square-duct Nu, Sh and fRe).",
    "fully_developed": "Shah, R.K. and London, A.L. (1978). Laminar Flow Forced Convection in "
                       "Ducts. Academic Press (fully developed Sh = Nu = 2.976).",
    "tronconi_forzatti_1992": "Tronconi, E. and Forzatti, P. (1992). Adequacy of lumped parameter "
                              "models for SCR reactors with monolith structure. AIChE J. 38, "
                              "201-210 (developing-flow Sherwood number).",
    "hawthorn_1974": "Hawthorn, R.D. (1974). Afterburner catalysis - effects of heat and mass "
                     "transfer between gas and catalyst surface. AIChE Symp. Ser. 70(137), "
                     "428-438.",
    "shah_1978": "Shah, R.K. (1978). A correlation for laminar hydrodynamic entry length "
                 "solutions for circular and noncircular ducts. J. Fluids Eng. 100, 177-179.",
    "kays_london_1984": "Kays, W.M. and London, A.L. (1984). Compact Heat Exchangers, 3rd ed. "
                        "McGraw-Hill (entrance and exit losses).",
    "rennels_2012": "Rennels, D.C. and Hudson, H.M. (2012). Pipe Flow: A Practical and "
                    "Comprehensive Guide. Wiley (sharp contraction loss).",
    "cantera": "Goodwin, D.G. et al. Cantera: an object-oriented software toolkit for chemical "
               "kinetics, thermodynamics and transport processes, version 3 "
               "(GRI-Mech 3.0 thermodynamic and transport data).",
    "thiele_1939": "Thiele, E.W. (1939). Relation between catalytic activity and size of "
                   "particle. Ind. Eng. Chem. 31, 916-920 (effectiveness factor).",
}


def case_sources(case, train=None) -> list[str]:
    """Every source behind the numbers of ``case`` (a point or duty-cycle case) with ``train``
    (default: the case's): catalysts and correlations, then the duty cycle, the time trace, the
    limit sets and the GWP values, one line each, in that order."""
    train = case.train if train is None else train
    lines = list(train.sources())
    cyc = getattr(case, "cycle", None)
    if cyc is not None:
        lines.append(f"Duty cycle {cyc.name}: {cyc.source} (confidence: {cyc.confidence})")
    tr = getattr(case, "transient", None)
    if tr is not None and tr.get("trace"):
        lines.append(f"Time trace {tr['trace']}: the case's own data")
    for ls in getattr(case, "limit_sets", []):
        lines.append(f"Limit set {ls.name}: {ls.source} (confidence: {ls.confidence})")
    gwp = getattr(case, "gwp_set", None)
    if gwp is not None:
        from .emissions import GWP100, GWP100_SOURCES
        lines.append(f"GWP100 of N2O = {GWP100[gwp]:g} ({gwp}): {GWP100_SOURCES[gwp]}")
    return lines
