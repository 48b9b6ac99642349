"""Shared fixtures: test catalysts built from dicts (exactly as a TOML file would give them) and a
wall-clock guard for solves, so that a solver that never returns fails a test instead of hanging
the suite."""
import os

import pytest
from hypothesis import settings as hyp_settings

# Property tests draw the same examples on every run by default (a CI result that depends on
# the draw is not a result); `HYPOTHESIS_PROFILE=explore` draws new ones on every run, to hunt
# for failures (DEVELOPERS.md).
hyp_settings.register_profile("repeatable", derandomize=True, print_blob=True)
hyp_settings.register_profile("explore", derandomize=False, print_blob=True,
                              max_examples=1000)
hyp_settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))

from aftertreat.catalyst import parse_catalyst

_TEST = "fitted: test value"


def catalyst_table(reactions, *, valid_T_C=(100.0, 700.0), porosity=0.4, tortuosity=3.0,
                       pore_diameter_nm=200.0, sites=()):
    """A complete catalyst table (as read from TOML) around ``reactions``; every numeric
    parameter gets a ``fitted: test value`` provenance unless the reaction already has one."""
    rx = []
    for r in reactions:
        r = dict(r)
        if "provenance" not in r:
            r["provenance"] = {p: _TEST for p in ("k_ref", "A", "E_kJ_mol", "E", "alpha",
                                                  "theta_star", "orders", "coverage",
                                                  "free_sites", "inhibition",
                                                  "inhibition_order") if p in r}
        rx.append(r)
    return {
        "name": "test catalyst",
        "valid_T_C": list(valid_T_C),
        "source": [{"key": "test", "authors": "aftertreat test suite", "year": 2024}],
        "pores": {"porosity": porosity, "tortuosity": tortuosity,
                  "pore_diameter_nm": pore_diameter_nm,
                  "provenance": {"porosity": _TEST, "tortuosity": _TEST,
                                 "pore_diameter_nm": _TEST}},
        "site": [dict(s) for s in sites],
        "reaction": rx,
    }


@pytest.fixture
def make_catalyst():
    """Factory: ``make_catalyst(reactions, **kw)`` -> Catalyst via ``parse_catalyst``."""
    def make(reactions, **kw):
        return parse_catalyst(catalyst_table(reactions, **kw), key="test",
                              file="<test catalyst>")
    return make


@pytest.fixture
def catalyst_dict():
    """Factory for the raw dict (for tests that corrupt one entry)."""
    return catalyst_table


@pytest.fixture
def deadline():
    """Context manager ``with deadline(20): ...`` raising TimeoutError after 20 s (Unix); 20x
    longer when the numpy reference kernel is the default (it is that much slower)."""
    from aftertreat import solver
    from fuzz_cases import time_limit

    def guard(seconds):
        return time_limit(seconds * (20 if solver.default_kernel() == "numpy" else 1),
                          "solve did not return")
    return guard
