"""Make the INVENTED demo lab data of fit_cu_chabazite.toml: the bench model run with an
invented "true" parameter set, plus seeded normal noise of each experiment's stated
uncertainty. Run from the repository root:  python cases/lab_cu_chabazite/make_lab_data.py
"""
from pathlib import Path

import numpy as np

from aftertreat.bench import predict
from aftertreat.fit import load_fit_spec, replace_parameters

HERE = Path(__file__).resolve().parent
#: the invented "true" catalyst (values at the shipped file's T_ref); a fit should land near them
TRUTH = {"standard SCR: k_ref": 2000.0, "standard SCR: E_kJ_mol": 58.0,
         "NH3 desorption (weak): E_kJ_mol": 118.0, "NH3 desorption: E_kJ_mol": 142.0,
         "NH3 desorption (Bronsted): E_kJ_mol": 178.0, "site S1: capacity_mol_m3": 550.0}
SEED = 20261203


def write_inputs() -> None:
    """The rows (temperatures, times) of the three experiments, with zero readings."""
    (HERE / "scr_lightoff.csv").write_text(
        "T [degC],NO_out [ppm],NH3_out [ppm]\n"
        + "".join(f"{T},0,0\n" for T in range(150, 476, 25)))
    (HERE / "nh3_step.csv").write_text(
        "time [s],T [degC],NH3_out [ppm]\n" + "".join(f"{t},200,0\n" for t in range(0, 1201, 60)))
    rows = []
    for t in range(0, 3001, 75):                     # 10 min purge, then 10 K/min to 550 C
        T = 150.0 if t < 600 else min(150.0 + (t - 600) / 60.0 * 10.0, 550.0)
        rows.append(f"{t},{T:.1f},0\n")
    (HERE / "nh3_tpd.csv").write_text("time [s],T [degC],NH3_out [ppm]\n" + "".join(rows))


def main() -> None:
    write_inputs()
    spec = load_fit_spec(HERE / "fit_cu_chabazite.toml", output=HERE / "_unused.toml")
    true = replace_parameters(spec, TRUTH)
    rng = np.random.default_rng(SEED)
    for e in true.experiments:
        pr = predict(true.reactor, e)
        lines = Path(e.file).read_text().splitlines()
        head = lines[0].split(",")
        rows = [line.split(",") for line in lines[1:]]
        for sp, v in pr.outlet_ppm.items():
            j = head.index(f"{sp}_out [ppm]")
            a, r = e.uncertainty
            noisy = np.maximum(v + rng.normal(0.0, a + r * np.abs(v)), 0.0)
            for i, row in enumerate(rows):
                row[j] = f"{noisy[i]:.2f}"
        Path(e.file).write_text("# INVENTED demo data (make_lab_data.py), not measurements\n"
                                + ",".join(head) + "\n"
                                + "".join(",".join(r) + "\n" for r in rows))
    print("wrote the invented lab data; truth:", TRUTH)


if __name__ == "__main__":
    main()
