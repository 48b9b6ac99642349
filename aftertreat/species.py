"""The exhaust species carried along the train, their elements and molar masses.

One place for these facts: every module that needs a species index, an element count or a molar
mass imports it from here. Quantities are in moles (mol, mol/s) throughout the library.

Atomic weights are the IUPAC conventional values (IUPAC CIAAW, "Standard atomic weights of the
elements 2021"; values from memory, rounded to the 4-5 significant figures quoted there).
"""
from __future__ import annotations

import numpy as np

__all__ = ["SPECIES", "ELEMENTS", "INDEX", "NOX", "nox", "ELEMENT_MATRIX", "MOLAR_MASS", "CANTERA_NAME",
           "NOX", "species_index", "parse_formula"]

#: Gas species carried in every stream, in the order used by every array in the library.
SPECIES: tuple[str, ...] = ("NO", "NO2", "NH3", "N2O", "O2", "H2O", "N2", "H2", "CO2", "Ar")
#: Elements balanced by construction.
ELEMENTS: tuple[str, ...] = ("N", "H", "O", "C", "Ar")
INDEX: dict[str, int] = {s: i for i, s in enumerate(SPECIES)}
#: Species name in Cantera's GRI-Mech 3.0 (gri30.yaml) where it differs from ours.
CANTERA_NAME: dict[str, str] = {s: ("AR" if s == "Ar" else s) for s in SPECIES}
#: The species counted as NOx (mass reported as NO2, 40 CFR 1065.1005).
NOX: tuple[str, ...] = ("NO", "NO2")
#: Their positions in :data:`SPECIES`.
NOX_INDEX: list[int] = [INDEX[s] for s in NOX]


def nox(F):
    """NOx (NO + NO2) of species flows or fractions ``F`` [..., nspecies] (any last-axis
    array: mol/s, ppm ...)."""
    import numpy as np
    return np.asarray(F)[..., NOX_INDEX].sum(axis=-1)


_ATOMIC_WEIGHT_G_MOL = {"N": 14.007, "H": 1.008, "O": 15.999, "C": 12.011, "Ar": 39.95}


def parse_formula(formula: str) -> dict[str, int]:
    """Element counts of a simple formula such as ``"NH3"``, ``"N2O"`` or ``"Ar"``."""
    import re
    counts: dict[str, int] = {}
    pos = 0
    for m in re.finditer(r"([A-Z][a-z]?)(\d*)", formula):
        if m.start() != pos:
            raise ValueError(f"cannot read formula {formula!r}")
        pos = m.end()
        el = m.group(1)
        if el not in _ATOMIC_WEIGHT_G_MOL:
            raise ValueError(f"unknown element {el!r} in {formula!r}")
        counts[el] = counts.get(el, 0) + int(m.group(2) or 1)
    if pos != len(formula) or not counts:
        raise ValueError(f"cannot read formula {formula!r}")
    return counts


#: Element matrix E[e, i]: atoms of element e in species i.
ELEMENT_MATRIX = np.array([[parse_formula(s).get(e, 0) for s in SPECIES] for e in ELEMENTS],
                          dtype=float)
#: Molar masses [kg/mol] in SPECIES order.
MOLAR_MASS = np.array([sum(n * _ATOMIC_WEIGHT_G_MOL[e] for e, n in parse_formula(s).items())
                       for s in SPECIES]) * 1e-3


def species_index(name: str) -> int:
    """Index of a species in :data:`SPECIES`; a clear error with the valid names otherwise."""
    try:
        return INDEX[name]
    except KeyError:
        import difflib
        near = difflib.get_close_matches(name, SPECIES, n=3)
        hint = f" (did you mean {', '.join(near)}?)" if near else ""
        raise KeyError(f"unknown species {name!r}{hint}; valid: {', '.join(SPECIES)}") from None
