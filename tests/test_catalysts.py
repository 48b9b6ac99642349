"""The shipped catalyst library: loads, cites its sources, states provenance for every value."""
import copy
import tomllib

import numpy as np
import pytest

import aftertreat as at
from aftertreat.catalyst import PROVENANCE_KINDS, parse_catalyst
from aftertreat.errors import InputError
from aftertreat.species import ELEMENT_MATRIX

KEYS = at.available_catalysts()


def test_library_has_the_required_kinds():
    roles = {k: at.load_catalyst(k) for k in KEYS}
    assert {"vanadia_extruded", "cu_chabazite", "fe_zeolite", "asc_dual_layer"} <= set(KEYS)
    assert isinstance(roles["asc_dual_layer"], at.LayeredCatalyst)
    assert [c.role for c, _ in roles["asc_dual_layer"].layers] == ["SCR", "oxidation"]


@pytest.mark.parametrize("key", KEYS)
def test_sources_and_provenance(key):
    cat = at.load_catalyst(key)
    assert cat.sources, "every catalyst cites at least one source"
    for s in cat.sources:
        assert s.get("authors") and s.get("year") and s.get("journal")
    if isinstance(cat, at.LayeredCatalyst):
        return
    rows = cat.provenance_table()
    assert rows
    for r in rows:
        assert r["provenance"].lower().startswith(PROVENANCE_KINDS)
    lo, hi = cat.valid_T
    assert 273.15 < lo < hi < 1273.15


@pytest.mark.parametrize("key", [k for k in KEYS if k != "asc_dual_layer"])
def test_every_reaction_balances_atoms(key):
    for r in at.load_catalyst(key).mechanism.reactions:
        assert np.allclose(ELEMENT_MATRIX @ r.nu_equiv, 0.0, atol=1e-12), r.name


def _vanadia_data():
    with open(at.load_catalyst("vanadia_extruded").file, "rb") as fh:
        return tomllib.load(fh)


def test_missing_provenance_is_refused():
    data = _vanadia_data()
    bad = copy.deepcopy(data)
    del bad["reaction"][2]["provenance"]["k_ref"]
    with pytest.raises(InputError) as err:
        parse_catalyst(bad, key="v", file="v.toml")
    assert "reaction[2].provenance.k_ref" in str(err.value) and "v.toml" in str(err.value)
    bad = copy.deepcopy(data)
    bad["reaction"][2]["provenance"]["k_ref"] = "a guess"
    with pytest.raises(InputError):
        parse_catalyst(bad, key="v", file="v.toml")


def test_unbalanced_reaction_in_file_is_refused():
    bad = _vanadia_data()
    bad["reaction"][2]["equation"] = "4 NH3(S1) + 4 NO + O2 -> 4 N2 + 5 H2O"
    with pytest.raises(InputError) as err:
        parse_catalyst(bad, key="v", file="v.toml")
    assert "balance" in str(err.value) and "reaction[2].equation" in str(err.value)


def test_unknown_top_key_suggests():
    bad = _vanadia_data()
    bad["valid_T"] = bad.pop("valid_T_C")
    with pytest.raises(InputError) as err:
        parse_catalyst(bad, key="v", file="v.toml")
    assert "did you mean valid_T_C" in str(err.value)


def test_results_register_their_sources():
    """A solved train lists the catalysts' citations and the transport correlation it used."""
    brick = at.Brick("s", at.Substrate.extruded(cpsi=35, wall_mm=0.7),
                     at.load_catalyst("vanadia_extruded"), length=0.3, diameter=0.3, cells=8)
    ex = at.Stream.from_mole_fractions({"NO": 500e-6, "NH3": 500e-6, "O2": 0.1, "H2O": 0.1},
                                       T=623.15, mass_kg_s=0.2)
    sol = at.Train([brick]).solve(ex)
    text = "\n".join(sol.sources())
    assert "Nova" in text and "Tronconi" in text and "Shah" in text
    prov = sol.provenance()
    assert set(prov["catalyst"]) == {"vanadia_extruded"}
    assert prov["provenance"].str.lower().str.startswith(PROVENANCE_KINDS).all()
