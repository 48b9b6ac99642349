"""Speed of one kinetically limited brick solve: aftertreat's steady solver against Cantera's
plug-flow reactor (FlowReactor + ReactorSurface) on the same chemistry, at equal accuracy.

Prints figures only (no assertions; speed targets are never tested). Run from the repository
root::

    python benchmarks/kinetic_limit_vs_cantera.py [--repeats 7]

The chemistry (NH3 storage with Temkin desorption, standard + fast SCR), the Cantera model and
its unit mapping are those of ``tests/validation/cantera_flow.py``; the brick is the isothermal,
film-free, washcoat-free brick of ``tests/validation/test_cantera_flow.py`` (400/6, 30 um,
D 0.1 m, L 0.03 m), at 250 degC.

Accuracy: Cantera runs at the ReactorNet tolerances that bring its outlet NO within 0.5 % of its
converged value (``cantera_flow.tolerances_for``: a grid of rtol x atol, the loosest rtol from
which on every tighter one also meets the target, the cheapest such pair); aftertreat runs at
its defaults (default cells and solver settings) and on the coarsest grid that meets the same
0.5 %, and its outlet-NO error against the converged Cantera value is printed next to its time.

Timing: ``time.perf_counter``, median of ``--repeats`` calls after one untimed warm-up call.
One-time setup is excluded from both: the Cantera mechanism load (YAML parse, phase creation)
and our catalyst parse and Brick construction. Per-solve construction is included in both:
Cantera's inlet state, steady inlet coverage, reactor, surface and network; our ``Train`` and
brick model with its transfer numbers.
"""
from __future__ import annotations

import argparse
import dataclasses
import pathlib
import sys
import time

ROOT = pathlib.Path(__file__).resolve().parents[1]
# the repository root first (the package is imported from the working tree), and the
# aftertreat-independent Cantera helpers shared with the validation tests
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "validation"))


from machine import print_machine  # noqa: E402

import aftertreat as at  # noqa: E402
from aftertreat.catalyst import parse_catalyst  # noqa: E402
from aftertreat.species import CANTERA_NAME  # noqa: E402

import cantera_flow as cf  # noqa: E402


def median_time(fn, repeats):
    """(median seconds, last result) of ``repeats`` calls of ``fn``, after one warm-up call."""
    fn()
    return cf.median_seconds(fn, repeats)


def point(alpha, repeats, T_C=250.0, mol_s=0.3):
    T = T_C + 273.15
    inlet = at.Stream.from_mole_fractions(
        {"NO": 150e-6, "NO2": 50e-6, "NH3": 200e-6, "O2": 0.10, "H2O": 0.05}, T=T,
        total_mol_s=mol_s)
    # --- one-time setup (not timed): our catalyst parse + Brick; the Cantera mechanism load
    cat = parse_catalyst(cf.catalyst_table(alpha), key="kinetic_limit_bench", file="<benchmark>")
    sub = at.Substrate.coated(cpsi=400, wall_mil=6, washcoat_um=30)
    brick = at.Brick("kin", sub, cat, length=0.03, diameter=0.1, film=False, washcoat="none",
                     heat_loss_W_m2K=1e6, T_ambient=T)           # default cells, isothermal
    X_in = {CANTERA_NAME[s]: float(x) for s, x in zip(at.SPECIES, inlet.x) if x > 0}
    case = cf.flow_case_from(layer_per_length=sub.catalytic_fraction * brick.frontal_area,
                             flow_area=sub.ofa * brick.frontal_area, length=brick.length,
                             T=inlet.T, p=inlet.p, X_in=X_in, mol_s=inlet.total, alpha=alpha)
    t0 = time.perf_counter()
    phases = cf.load(case)
    t_load = time.perf_counter() - t0

    print(f"Temkin alpha {alpha:g}: {T_C:.0f} degC, {mol_s:g} mol/s, NO/NO2/NH3 150/50/200 ppm")
    ref = cf.solve_reference(case)                  # scipy Radau, rtol 1e-10 (independent)
    choice = cf.tolerances_for(case, phases, target=0.005, repeats=repeats)
    print(f"   converged outlet NO: Cantera (rtol 1e-12) {choice.reference_ppm:.6f} ppm, "
          f"scipy solve_ivp {ref.ppm('NO'):.6f} ppm "
          f"({(choice.reference_ppm / ref.ppm('NO') - 1) * 100:+.1e} %)")
    print("   Cantera tolerance scan (outlet NO error; F = integration failed):")
    rtols = sorted({r for r, *_ in choice.scan}, reverse=True)
    atols = sorted({a for _, a, *_ in choice.scan}, reverse=True)
    print("     atol \\ rtol " + "".join(f"{r:>10.0e}" for r in rtols))
    errs = {(r, a): e for r, a, e, _ in choice.scan}
    for a in atols:
        cells = ["F" if errs[(r, a)] is None else f"{errs[(r, a)] * 100:+.3f}%" for r in rtols]
        print(f"     {a:12.0e}  " + "".join(f"{c:>10s}" for c in cells))

    # Cantera at the chosen tolerances, with the part spent on the steady inlet coverage
    gas, surf = phases

    def inlet_coverage():
        gas.TPX = case.T, case.p, case.X_in
        surf.TP = case.T, case.p
        surf.coverages = {"S": 1.0}
        cf.steady_inlet_coverage(surf)
    t_cov, _ = median_time(inlet_coverage, repeats)
    t_ct, ct_sol = median_time(lambda: cf.solve_flow(case, phases, rtol=choice.rtol,
                                                     atol=choice.atol), repeats)
    err_ct = ct_sol.ppm("NO") / choice.reference_ppm - 1
    print(f"   Cantera FlowReactor  rtol {choice.rtol:.0e} atol {choice.atol:.0e}: "
          f"{t_ct * 1e3:7.2f} ms  NO error {err_ct * 100:+.4f} %  "
          f"(of which steady inlet coverage {t_cov * 1e3:.2f} ms)")

    # aftertreat: one steady brick solve through the public Train API
    t_at, sol = median_time(lambda: at.Train([brick]).solve(inlet), repeats)
    err_at = sol.outlet.ppm("NO") / choice.reference_ppm - 1
    its = "/".join(str(b.iterations) for b in sol.bricks)
    print(f"   aftertreat           {brick.cells} cells (default):    {t_at * 1e3:7.2f} ms  "
          f"NO error {err_at * 100:+.4f} %  (Jacobians {its}, converged {sol.converged})")
    # aftertreat on the coarsest grid that meets the same 0.5 % (as Cantera's tolerances are
    # the loosest that meet it): the smallest cell count from which on every finer one tested
    # does too
    scan = []
    for n in (2, 3, 4, 6, 8, 12, 16, 24, 40):
        b = dataclasses.replace(brick, cells=n)
        t_n, s_n = median_time(lambda b=b: at.Train([b]).solve(inlet), repeats)
        scan.append((n, t_n, s_n.outlet.ppm("NO") / choice.reference_ppm - 1, s_n.converged))
    ok = [abs(e) < 5e-3 and c for _, _, e, c in scan]
    k = next(i for i in range(len(scan)) if all(ok[i:]))
    n_c, t_c, e_c, _ = scan[k]
    print(f"   aftertreat           {n_c} cells (coarsest at 0.5 %): {t_c * 1e3:5.2f} ms  "
          f"NO error {e_c * 100:+.4f} %")
    print(f"   one-time setup excluded: Cantera mechanism load {t_load * 1e3:.1f} ms; "
          "our catalyst parse + Brick construction")
    for label, t in (("default cells", t_at), ("coarsest grid at 0.5 %", t_c)):
        ratio = t_ct / t
        faster = "aftertreat faster" if ratio > 1 else "Cantera faster"
        print(f"   speed ratio Cantera / aftertreat, {label}: {ratio:.2f}  ({faster}; both "
              "within 0.5 % on outlet NO)")
    print()


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=7, help="timed repeats per figure (median)")
    args = ap.parse_args()
    print_machine()
    print("kinetic limit (film and washcoat off, isothermal), one brick: aftertreat vs Cantera "
          "FlowReactor at 0.5 % on outlet NO")
    print()
    for alpha in (0.0, 0.4):
        point(alpha, max(1, args.repeats))


if __name__ == "__main__":
    main()
