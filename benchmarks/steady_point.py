"""Speed of one steady operating point: a two-SCR + dual-layer-ASC train, cost versus cells, and
the speed ratio against a Cantera reactor-chain solution of the same kinetically limited brick.

Prints figures only (no assertions; speed targets are never tested). Run from the repository
root::

    python benchmarks/steady_point.py [--repeats 5] [--quick]

Timing: ``time.perf_counter``, median of several repeats. Section 3 compares our solver and
Cantera at equal accuracy (outlet NO within 0.5 % of a converged reference). One-time setup is
excluded from both: the Cantera mechanism load (YAML parse, phase creation) and our catalyst
parse / Brick construction. Per-solve construction (Cantera's reactor network, our brick model
and its transfer numbers) is included in both.
"""
from __future__ import annotations

import argparse
import pathlib
import statistics
import sys
import time

ROOT = pathlib.Path(__file__).resolve().parents[1]
# the repository root first (the package is imported from the working tree), and the
# aftertreat-independent Cantera helper shared with the validation test
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "validation"))


from machine import print_machine  # noqa: E402

import aftertreat as at  # noqa: E402
from aftertreat.catalyst import parse_catalyst  # noqa: E402
from aftertreat.species import CANTERA_NAME  # noqa: E402

import cantera_chain as cc  # noqa: E402


def median_time(fn, repeats):
    """(median seconds, last result) of ``repeats`` calls of ``fn``."""
    times, out = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


# ----------------------------------------------------------------------------------------------
# 1-2: the train
# ----------------------------------------------------------------------------------------------
def exhaust(T_C=380.0, scale=1.0):
    """An invented ammonia-engine exhaust (demo numbers, like cases/genset_point.toml)."""
    return at.Stream.from_mole_fractions(
        {"NO": 900e-6, "NO2": 50e-6, "NH3": 1100e-6, "N2O": 40e-6, "O2": 0.11, "H2O": 0.22,
         "H2": 0.002}, T=T_C + 273.15, p=104e3, mass_kg_s=2.5 * scale)


def train(cells=None):
    kw = {} if cells is None else {"cells": cells}
    cu = at.load_catalyst("cu_chabazite")
    scr_sub = at.Substrate.coated(cpsi=400, wall_mil=6, washcoat_um=(40,))
    asc_layers = tuple(c for c, _ in at.load_layers("asc_dual_layer"))
    asc_sub = at.Substrate.coated(cpsi=400, wall_mil=4, washcoat_um=(35, 12))
    return at.Train([
        at.Brick("SCR 1", scr_sub, cu, length=0.30, diameter=0.9, **kw),
        at.Brick("SCR 2", scr_sub, cu, length=0.30, diameter=0.9, **kw),
        at.Brick("ASC", asc_sub, asc_layers, length=0.15, diameter=0.9, **kw),
    ])


def section_train(repeats):
    tr = train()
    inlet = exhaust()
    print("1. one steady point: 2 x Cu-CHA SCR (coated 400/6, 40 um, effectiveness factor) + "
          f"dual-layer ASC (400/4, 35+12 um, resolved, {tr.bricks[2].nodes_per_layer} nodes/layer)")
    print(f"   default resolution: cells per brick {[b.cells for b in tr.bricks]}, "
          f"washcoat {[b.washcoat for b in tr.bricks]}")
    t_cold, sol = median_time(lambda: tr.solve(inlet), repeats)
    neighbour = exhaust(T_C=390.0, scale=1.05)      # the next point of a sweep: +10 K, +5 % flow
    t_warm_same, w1 = median_time(lambda: tr.solve(inlet, guess=sol), repeats)
    t_warm_next, w2 = median_time(lambda: tr.solve(neighbour, guess=sol), repeats)
    _, cold_next = median_time(lambda: tr.solve(neighbour), 1)
    t_cold_next, _ = median_time(lambda: tr.solve(neighbour), repeats)

    def status(s):
        its = "/".join(str(b.iterations) for b in s.bricks)
        return f"Jacobians {its:>9s}  converged {s.converged}  residual {s.residual:.1e}"
    print(f"   cold start                    {t_cold * 1e3:8.1f} ms   {status(sol)}")
    print(f"   same point again              {t_warm_same * 1e3:8.1f} ms   (solutions reused: "
          "same bricks, same inlet)")
    print(f"   cold start, neighbour point   {t_cold_next * 1e3:8.1f} ms   {status(cold_next)}")
    print(f"   warm start, neighbour point   {t_warm_next * 1e3:8.1f} ms   {status(w2)}")
    print("   (neighbour: inlet +10 K and +5 % mass flow, warm-started from the first solution)")
    print(f"   targets (solver-core issue): cold <= 5 ms ({t_cold * 1e3 / 5:.1f}x it), warm from a "
          f"neighbour <= 1 ms ({t_warm_next * 1e3:.1f}x it)")
    out = sol.outlet
    print(f"   outlet: NO {out.ppm('NO'):.2f} ppm, NO2 {out.ppm('NO2'):.2f}, NH3 {out.ppm('NH3'):.3f}, "
          f"N2O {out.ppm('N2O'):.2f}; NOx conversion {sol.nox_conversion() * 100:.2f} %; "
          f"GHSV {sol.ghsv_per_h():.0f} 1/h")
    print()


def section_cells(repeats):
    print("2. cost versus cells (same train, same cells in every brick, cold start)")
    print("   cells/brick   ms/solve   ms/cell    Jacobians   converged   outlet NO ppm   NH3 ppm")
    inlet = exhaust()
    for n in (25, 50, 100, 200):
        tr = train(cells=n)
        t, sol = median_time(lambda: tr.solve(inlet), repeats)
        its = "/".join(str(b.iterations) for b in sol.bricks)
        print(f"   {n:11d}   {t * 1e3:8.1f}   {t * 1e3 / (3 * n):7.3f}   {its:>10s}   "
              f"{str(sol.converged):>9s}   {sol.outlet.ppm('NO'):13.4f}   {sol.outlet.ppm('NH3'):7.4f}")
    print("   (ms/cell: per cell of the whole train, 3 bricks)")
    print()


# ----------------------------------------------------------------------------------------------
# 3: kinetic-limit case vs the Cantera CSTR chain
# ----------------------------------------------------------------------------------------------
def section_cantera(repeats, quick):
    T = 523.15
    inlet = at.Stream.from_mole_fractions(
        {"NO": 150e-6, "NO2": 50e-6, "NH3": 200e-6, "O2": 0.10, "H2O": 0.05}, T=T,
        total_mol_s=0.3)
    cat = parse_catalyst(cc.catalyst_table(), key="cantera_crosscheck", file="<benchmark>")
    sub = at.Substrate.coated(cpsi=400, wall_mil=6, washcoat_um=30)
    settings = at.SolverSettings(tol=1e-10)   # round-off floor of the heat-sunk solid (see test)

    def brick(cells):
        # isothermal as in tests/validation/test_cantera_crosscheck.py (can heat sink to T_in)
        return at.Brick("kin", sub, cat, length=0.03, diameter=0.1, film=False, washcoat="none",
                        cells=cells, heat_loss_W_m2K=1e6, T_ambient=T)

    b0 = brick(2)
    X_in = {CANTERA_NAME[s]: float(x) for s, x in zip(at.SPECIES, inlet.x) if x > 0}
    case = cc.case_from(layer_volume=sub.catalytic_fraction * b0.volume,
                        gas_volume=sub.ofa * b0.volume, T=T, p=inlet.p, X_in=X_in,
                        mol_s=inlet.total)
    t_load0 = time.perf_counter()
    phases = cc.load(case)
    t_load = time.perf_counter() - t_load0

    print("3. kinetic limit (film and washcoat off, isothermal 250 degC; NH3 storage + standard + "
          "fast SCR), ours vs Cantera CSTR chain")
    # converged reference: Richardson-extrapolated chain 400/800 (O(1/n^2) remainder ~1e-4 %)
    c400 = cc.solve_chain(case, 400, phases)
    c800 = cc.solve_chain(case, 800, phases)
    ref = 2.0 * c800.ppm("NO") - c400.ppm("NO")
    ours_fine = at.solve_brick(brick(400), inlet, settings=settings)
    print(f"   reference outlet NO: Cantera chain extrapolated (400/800) {ref:.4f} ppm; "
          f"ours at 400 cells {ours_fine.outlet.ppm('NO'):.4f} ppm "
          f"({(ours_fine.outlet.ppm('NO') / ref - 1) * 100:+.4f} %)")
    target = 0.005

    print("   ours (cells: NO error, time)")
    ours_pick = None
    for cells in (2, 3, 4, 6, 8, 12, 16, 25, 50):
        b = brick(cells)
        t, s = median_time(lambda: at.solve_brick(b, inlet, settings=settings), repeats)
        err = s.outlet.ppm("NO") / ref - 1
        print(f"     {cells:4d} cells  NO error {err * 100:+8.4f} %   {t * 1e3:8.2f} ms   "
              f"Jacobians {s.iterations}  converged {s.converged}")
        if ours_pick is None and abs(err) < target and s.converged:
            ours_pick = (cells, t, err)

    print("   Cantera chain (reactors: NO error, time)")
    cantera_pick = None
    chain_sizes = (100, 200, 300, 350, 400) if not quick else (100, 200, 350)
    chain_repeats = max(1, min(repeats, 3))
    for n in chain_sizes:
        t, ch = median_time(lambda: cc.solve_chain(case, n, phases), chain_repeats)
        err = ch.ppm("NO") / ref - 1
        print(f"     {n:4d} CSTRs  NO error {err * 100:+8.4f} %   {t * 1e3:8.1f} ms")
        if cantera_pick is None and abs(err) < target:
            cantera_pick = (n, t, err)
    print("   Cantera chain + Richardson extrapolation from n and 2n reactors (cost of both)")
    rich_pick = None
    for n in (10, 20, 40):
        def both():
            a = cc.solve_chain(case, n, phases)
            b = cc.solve_chain(case, 2 * n, phases)
            return 2.0 * b.ppm("NO") - a.ppm("NO")
        t, y = median_time(both, chain_repeats)
        err = y / ref - 1
        print(f"     {n:4d}+{2 * n:<4d}    NO error {err * 100:+8.4f} %   {t * 1e3:8.1f} ms")
        if rich_pick is None and abs(err) < target:
            rich_pick = (n, t, err)
    print(f"   one-time setup excluded from both: Cantera mechanism load {t_load * 1e3:.1f} ms; "
          "our catalyst parse + Brick construction")
    if ours_pick and cantera_pick:
        print(f"   at equal accuracy (|NO error| < {target * 100:.1f} %): ours {ours_pick[0]} cells "
              f"{ours_pick[1] * 1e3:.2f} ms vs Cantera {cantera_pick[0]} CSTRs "
              f"{cantera_pick[1] * 1e3:.1f} ms  ->  speed ratio {cantera_pick[1] / ours_pick[1]:.1f}x "
              "(target >= 20x)")
    if ours_pick and rich_pick:
        print(f"   against the extrapolated chain ({rich_pick[0]}+{2 * rich_pick[0]} CSTRs, "
              f"{rich_pick[1] * 1e3:.1f} ms): speed ratio {rich_pick[1] / ours_pick[1]:.1f}x")
    print()


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=5, help="timed repeats per figure (median)")
    ap.add_argument("--quick", action="store_true", help="fewer chain sizes")
    args = ap.parse_args()
    print_machine()
    section_train(args.repeats)
    section_cells(max(1, args.repeats // 2 + 1))
    section_cantera(args.repeats, args.quick)


if __name__ == "__main__":
    main()
