"""Shared check: N, H and O atoms balance between JSON stream objects (conservation of atoms)."""
import numpy as np

from aftertreat.species import ELEMENT_MATRIX, ELEMENTS, SPECIES


def assert_atoms_balance(mol_s_in: list[dict], mol_s_out: dict, rel: float = 1e-9) -> None:
    """The summed ``mol_s`` dictionaries of ``mol_s_in`` hold the same N, H and O atoms as
    ``mol_s_out``, to ``rel`` of the inflow."""
    f_in = np.array([sum(d[s] for d in mol_s_in) for s in SPECIES])
    f_out = np.array([mol_s_out[s] for s in SPECIES])
    a_in, a_out = ELEMENT_MATRIX @ f_in, ELEMENT_MATRIX @ f_out
    for e in ("N", "H", "O"):
        i = ELEMENTS.index(e)
        assert abs(a_out[i] - a_in[i]) <= rel * a_in[i], e
