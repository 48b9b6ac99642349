"""The compiled kernel (aftertreat.kernel_numba) against the numpy reference
(aftertreat.kernel_numpy): residuals, Jacobians and whole solves, steady and transient, over every
shipped catalyst and washcoat model, at random states (hypothesis).

Consistency checks with no external basis: the two kernels implement the same equations (the
numba Jacobian semi-analytically, the numpy one by differencing every column), so they must
agree to round-off in the residual, to the difference-step error in the Jacobian, and to the
solver tolerance in a solve.
"""
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hs

import aftertreat as at
from aftertreat import kernel_numpy as kn
from aftertreat import solver
from aftertreat.problem import problem_for

kb = pytest.importorskip("aftertreat.kernel_numba")

EXTRUDED = at.Substrate.extruded(cpsi=35, wall_mm=0.7)
COATED = at.Substrate.coated(cpsi=400, wall_mil=4, washcoat_um=(60,))
ASC_LAYERS = at.load_layers("asc_dual_layer")
ASC_SUB = at.Substrate.coated(cpsi=400, wall_mil=4,
                              washcoat_um=tuple(th * 1e6 for _, th in ASC_LAYERS))

#: (catalyst, washcoat model) pairs: every shipped catalyst with each model it allows
PAIRS = [(k, w) for k in ("vanadia_extruded", "cu_chabazite", "fe_zeolite", "platinum_alumina")
         for w in ("effectiveness", "resolved", "none")] + \
        [("asc_dual_layer", "resolved"), ("asc_dual_layer", "none")]


def make_brick(kind, washcoat, *, cells=6, nodes=5):
    if kind == "asc_dual_layer":
        return at.Brick("ASC", ASC_SUB, tuple(c for c, _ in ASC_LAYERS), length=0.1,
                        diameter=0.5, washcoat=washcoat, cells=cells, nodes_per_layer=nodes)
    sub = EXTRUDED if kind == "vanadia_extruded" else COATED
    return at.Brick(kind, sub, at.load_catalyst(kind), length=0.2, diameter=0.5,
                    washcoat=washcoat, cells=cells, nodes_per_layer=nodes)


def feed(T_C, NO, NO2, NH3, N2O, O2, H2O):
    return at.Stream.from_mole_fractions(
        {"NO": NO * 1e-6, "NO2": NO2 * 1e-6, "NH3": NH3 * 1e-6, "N2O": N2O * 1e-6, "O2": O2,
         "H2O": H2O}, T=T_C + 273.15, mass_kg_s=0.4)


feeds = hs.builds(feed, hs.floats(200, 550), hs.floats(0, 2000), hs.floats(0, 700),
                  hs.floats(0, 4000), hs.floats(0, 200), hs.floats(0.02, 0.15),
                  hs.floats(0.05, 0.30))


def random_state(bound, rng):
    """A state inside the bounds near the inlet: flows and layer concentrations scaled down at
    random, coverages anywhere in [0, 1], temperatures within 30 K of the inlet."""
    lay, st = bound.layout, bound.static
    x = bound.inlet_state()[0].copy()
    x[:10] *= rng.uniform(0.3, 1.0, 10)
    x[lay.T_GAS] += rng.uniform(-30, 30)
    x[lay.T_SOLID] += rng.uniform(-30, 30)
    c = lay.c_surface(x[None])[0]
    c *= rng.uniform(0.0, 1.0, c.shape)
    th = lay.coverage(x[None])[0]
    th[:] = rng.uniform(0, 1, th.shape) * st.site_used
    return x


def _cell_inputs(kind, washcoat, s_in, seed):
    bound = problem_for(make_brick(kind, washcoat)).bind(s_in)
    rng = np.random.default_rng(seed)
    x = random_state(bound, rng)
    xo = random_state(bound, rng)
    Fin = bound.flow.F_in * rng.uniform(0.8, 1.0, 10)
    Tin = bound.flow.T_in + rng.uniform(-10, 10)
    return bound, x, xo, Fin, Tin


@pytest.mark.parametrize("kind,washcoat", PAIRS)
@pytest.mark.parametrize("inv_dt", [0.0, 2.0])
@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(s_in=feeds, seed=hs.integers(0, 2 ** 31), j=hs.integers(0, 5))
def test_residual_and_jacobian_agree(kind, washcoat, inv_dt, s_in, seed, j):
    """Residual to 1e-12 relative (each row against its size or 1) and the Jacobian to 1e-7
    (each entry times its unknown's size, against its row's largest)."""
    bound, x, xo, Fin, Tin = _cell_inputs(kind, washcoat, s_in, seed)
    st, fl = bound.static, bound.flow
    W = kb.make_work(st)
    Rb = np.zeros(x.size)
    kb.residual(st, fl, j, x, Fin, Tin, xo, inv_dt, W, Rb)
    Rn = kn.cell_residual(st, fl, j, x, Fin, Tin, xo, inv_dt)
    np.testing.assert_allclose(Rb, Rn, rtol=1e-12, atol=1e-12)
    # both difference with the same steps (central where both sides are inside the bounds), so
    # their truncation errors are the same and what is compared is the arithmetic (the numba
    # Jacobian holds the rates for the gas columns and adds the film and diffusion terms exactly);
    # steps of 1e-5 keep the round-off of the numpy differences (whole rows re-evaluated) below
    # the tolerance
    fd = 1e-5
    Jb = np.zeros((x.size, x.size))
    kb.jacobian(st, fl, j, x, Fin, Tin, xo, inv_dt, fd, W, Jb)
    Jn = kn.cell_jacobian(st, fl, j, x, Fin, Tin, xo, inv_dt, Rn, fd)
    # each row's response to relative changes of the unknowns (columns scaled by the size of
    # their unknown), against the row's largest: the accuracy Newton needs, and what the numpy
    # differences can resolve (a row's small entries sit under its big terms' round-off)
    size = np.abs(x) + kn.scales(st, fl)
    Sb, Sn = Jb * size, Jn * size
    row = np.maximum(np.max(np.abs(Sn), axis=1, keepdims=True), 1e-300)
    assert np.max(np.abs(Sb - Sn) / row) < 1e-7


@pytest.mark.parametrize("kind,washcoat", PAIRS)
def test_factor_and_solve_agree(kind, washcoat):
    """The numba block factor and solve (dense, or block-tridiagonal with a Schur complement
    for resolved layers) against a dense LU of the same matrix: 1e-10 relative."""
    s_in = feed(330.0, 800, 100, 900, 20, 0.1, 0.1)
    bound, x, xo, Fin, Tin = _cell_inputs(kind, washcoat, s_in, 7)
    st, fl = bound.static, bound.flow
    W = kb.make_work(st)
    J = np.zeros((x.size, x.size))
    kb.jacobian(st, fl, 2, x, Fin, Tin, xo, 0.0, 1e-7, W, J)
    rhs = np.random.default_rng(1).normal(size=x.size)
    assert kb.factor(st, J, W.ff, W.fi, W)
    out = np.zeros(x.size)
    kb.apply(st, W.ff, W.fi, rhs, out, W)
    ref = kn.apply(kn.factor(J), rhs)
    np.testing.assert_allclose(out, ref, rtol=1e-10, atol=1e-10 * np.max(np.abs(ref)))


def _solve_both(kind, washcoat, s_in, **kw):
    out = {}
    for k in ("numba", "numpy"):
        b = make_brick(kind, washcoat, cells=8, nodes=4)
        out[k] = solver.solve(problem_for(b).bind(s_in),
                              settings=solver.SolverSettings(kernel=k, **kw))
    return out


def _floors(bound):
    """Absolute tolerances of the comparison (for unknowns that are zero or nearly so in both
    answers): 1e-7 ppm of the total flow and concentration, 1e-9 K, 1e-8 coverage (a steady
    coverage is set by a balance of rates that can be slow at 200 C: at the round-off floor of
    the residual, ~3e-11, it is known to ~1e-9, seen with Fe-zeolite at 200 C). A strong
    storage site whose desorption rate constant k_d at the inlet temperature is tiny is pinned
    by its residual only to ~tol / k_d: 1e-11 / k_d is added to its coverages (seen with the
    Bronsted site of the three-site Cu-CHA, E 182 kJ/mol, k_d ~ 3e-8 1/s at 200 C, in an
    NH3-free feed: 8e-5 in one kernel and 0 in the other, both converged)."""
    st = bound.static
    f = kn.scales(st, bound.flow) * 1e-7
    f[bound.layout.differential()] = 1e-8
    T = bound.inlet.T
    k = st.k_ref * np.exp(-st.E_R * (1.0 / T - st.inv_Tref))
    for n in range(st.nnode):
        for site in range(st.ns):
            kd = [k[q] for q in range(st.nrxn) if st.temkin_site[q] == site]
            if kd:
                col = bound.layout.NODE0 + n * (st.nf + st.ns) + st.nf + site
                f[..., col] += 1e-11 / max(min(kd), 1e-300)
    f[bound.layout.T_SOLID] = f[bound.layout.T_GAS] = 1e-9
    return f


def _agree(xb, xn, bound, rel=1e-9):
    """Every unknown within ``rel`` of its size plus its absolute tolerance; the worst
    excess is reported."""
    excess = np.abs(xb - xn) - (rel * np.abs(xn) + _floors(bound))
    assert np.all(excess <= 0), float(np.max(excess))


@pytest.mark.parametrize("kind,washcoat", PAIRS)
@settings(max_examples=3, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(s_in=feeds)
def test_steady_solves_agree(kind, washcoat, s_in):
    """Whole steady solves at a tight tolerance (1e-11): both converge, and every unknown agrees
    to 1e-9 relative (plus the absolute tolerances of :func:`_floors`)."""
    out = _solve_both(kind, washcoat, s_in, tol=1e-11, tol_accept=1e-10)
    assert out["numba"].converged and out["numpy"].converged, (out["numba"].attempts,
                                                                 out["numpy"].attempts)
    xb, xn = out["numba"].x, out["numpy"].x
    bound = problem_for(make_brick(kind, washcoat, cells=8, nodes=4)).bind(s_in)
    _agree(xb, xn, bound)


@pytest.mark.parametrize("kind,washcoat", PAIRS[::2])
def test_transient_steps_agree(kind, washcoat):
    """One implicit-Euler step of 2 s after an inlet change (hotter and richer in NH3) from a
    steady state: both kernels agree to 1e-9 relative."""
    s0 = feed(280.0, 700, 70, 800, 10, 0.1, 0.1)
    s1 = feed(320.0, 700, 70, 1200, 10, 0.1, 0.1)
    b = make_brick(kind, washcoat, cells=8, nodes=4)
    x0 = solver.solve(problem_for(b).bind(s0)).x
    bound = problem_for(b).bind(s1)
    steps = {k: solver.step(bound, x0, 2.0, settings=solver.SolverSettings(
        kernel=k, tol=1e-11, tol_accept=1e-10)) for k in ("numba", "numpy")}
    assert all(s.converged for s in steps.values())
    _agree(steps["numba"].x, steps["numpy"].x, bound)


def test_auto_falls_back_to_numpy_with_one_warning(monkeypatch):
    """Without a working numba, "auto" runs the numpy reference and warns once (one line)."""
    import warnings
    monkeypatch.setattr(solver, "_load_numba", lambda **kw: (None, "ImportError: no numba"))
    monkeypatch.setattr(solver, "_RESOLVED", {})
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        k1 = solver.get_kernel("auto")
        k2 = solver.get_kernel("auto")
    assert k1.name == "numpy" and k2 is k1
    msgs = [x for x in w if issubclass(x.category, solver.KernelWarning)]
    assert len(msgs) == 1 and "\n" not in str(msgs[0].message)


def test_kernel_constants_agree():
    """The numba kernel keeps its own copies of the numerical constants (numba's cache checks
    only the kernel's own file, so importing them would let a stale compiled kernel run with
    old values): they must equal the reference kernel's."""
    for name in ("_FLOOR", "STEP_TOL", "STALL_TOL", "HOT_STEP_K", "START_GOOD", "NSP"):
        assert getattr(kb, name) == getattr(kn, name), name
    assert (kb._TMIN, kb._TMAX) == (kn._T_MIN, kn._T_MAX)


def _python(code, **env):
    import os
    import subprocess
    import sys
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env={**os.environ, **env}, timeout=120)


def test_cache_state_is_reported(tmp_path):
    """An empty cache folder is reported as not compiled (the CLI then says it compiles)."""
    p = _python("from aftertreat.solver import compiled_kernel_cached as c; print(c())",
                NUMBA_CACHE_DIR=str(tmp_path))
    assert p.returncode == 0 and p.stdout.strip() == "False", p.stderr


def test_no_writable_cache_folder_compiles_in_memory_with_one_warning():
    """With no cache locator (a read-only install and home; simulated, since file permissions
    do not bind root), the kernel module still imports, uncached, with one warning line."""
    p = _python("import warnings; warnings.simplefilter('always')\n"
                "import numba.core.caching as c; c.CacheImpl._locator_classes = []\n"
                "from aftertreat import kernel_numba as k; print(k.CACHED)")
    assert p.returncode == 0 and p.stdout.strip() == "False", p.stderr
    lines = [x for x in p.stderr.splitlines() if "RuntimeWarning" in x]
    assert len(lines) == 1 and "NUMBA_CACHE_DIR" in lines[0]


def test_auto_falls_back_when_the_kernel_fails_to_compile(monkeypatch):
    """A compile error of the numba kernel at its first call (simulated) under "auto": the
    solve completes on the numpy reference, with one warning line, and later solves stay on it."""
    import warnings
    from numba.core.errors import TypingError

    def broken(*args):
        raise TypingError("simulated compile failure")

    monkeypatch.setattr(solver, "_RESOLVED", {})
    monkeypatch.setattr(kb, "march", broken)
    s_in = feed(330.0, 800, 100, 900, 20, 0.1, 0.1)
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        k = solver.get_kernel("auto")
        out = solver.solve(problem_for(make_brick("cu_chabazite", "effectiveness")).bind(s_in),
                           settings=solver.SolverSettings(kernel="auto"))
        again = solver.solve(problem_for(make_brick("fe_zeolite", "none")).bind(s_in),
                             settings=solver.SolverSettings(kernel="auto"))
    assert out.converged and again.converged and k.name == "numpy"
    msgs = [x for x in w if issubclass(x.category, solver.KernelWarning)]
    assert len(msgs) == 1 and "\n" not in str(msgs[0].message)
