"""Every validation check runs on both solver kernels: the compiled one (numba, the default) and
the numpy reference. The kernel is the default of :mod:`aftertreat.solver` for the test and the
environment variable ``AFTERTREAT_KERNEL`` for any command the test starts.

The numpy variants of the studies that take minutes on the reference kernel (the grid-
convergence study, long transient references, sizing a demo case) are marked slow: `python3 -m pytest -m slow`
runs them."""
import pytest

from aftertreat import solver

#: numpy-kernel variants kept out of the default run (minutes each on 2 cores)
_SLOW_ON_NUMPY = ("test_grid.py", "test_transient_reference.py", "test_transient.py")
#: single numpy-kernel tests kept out of the default run (name without the parameter)
_SLOW_TESTS_ON_NUMPY = ("test_mixed_brick_lengths_stay_buildable",)   # ~3.5 min on numpy


@pytest.fixture(autouse=True, params=["numba", "numpy"])
def kernel(request, monkeypatch):
    old = solver.default_kernel()
    solver.set_default_kernel(request.param)
    monkeypatch.setenv("AFTERTREAT_KERNEL", request.param)
    yield request.param
    solver.set_default_kernel(old)


@pytest.hookimpl(tryfirst=True)          # before `-m 'not slow'` deselects
def pytest_collection_modifyitems(config, items):
    for item in items:
        cs = getattr(item, "callspec", None)
        if cs is not None and cs.params.get("kernel") == "numpy" \
                and (item.path.name in _SLOW_ON_NUMPY
                     or item.originalname in _SLOW_TESTS_ON_NUMPY):
            item.add_marker(pytest.mark.slow)
