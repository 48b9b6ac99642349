"""INVENTED DEMO DATA: writes cases/harbour_manoeuvre.csv, an invented engine-out time trace.

Scenario (invented, not measured): a 2 MW ammonia-fuelled genset of a harbour vessel over 30 min
at 1 Hz: idle alongside, manoeuvring load steps, a short high-load burst, back down to near idle.
Every trend below is a rough, invented shape chosen to exercise the tools (common practice for
the direction of each trend; no value is taken from a measurement):
exhaust flow ~ (0.25 + 0.75 load) x 13000 kg/h; turbine-out T 250..400 degC with a 75 s
first-order lag; O2 (dry) 15..11 %; H2O (wet) 18..24 %; NOx (dry) 600..1200 ppm with a 30 %
overshoot decaying in ~10 s after load rises; unburned NH3 (dry) ~3000 ppm at idle to ~500 ppm at
full load, with spikes at load steps; N2O 20..60 ppm; ~1 % measurement noise. Deterministic
(fixed seed). Run: ``python cases/make_harbour_trace.py``.
"""
import os
import tempfile
from pathlib import Path

import numpy as np

RATED_KW = 2000.0
FLOW_RATED_KG_H = 13000.0
SEED = 20240611

#: (time [s], load [-]) breakpoints; steps take 5 s (governor response)
SCHEDULE = [(0, 0.10), (300, 0.10), (360, 0.25), (540, 0.25), (545, 0.40), (720, 0.40),
            (725, 0.60), (840, 0.60), (845, 0.45), (900, 0.45), (930, 0.88), (1040, 0.88),
            (1045, 0.50), (1200, 0.50), (1205, 0.35), (1320, 0.35), (1325, 0.55), (1440, 0.55),
            (1445, 0.30), (1560, 0.30), (1565, 0.20), (1650, 0.20), (1680, 0.12), (1799, 0.12)]


def decaying(events: np.ndarray, tau_s: float) -> np.ndarray:
    """Sum of exp(-(t - t_k)/tau) responses to unit-time impulses ``events`` (1 Hz samples)."""
    kernel = np.exp(-np.arange(int(8 * tau_s)) / tau_s)
    return np.convolve(events, kernel)[: len(events)]


def make(n: int = 1800) -> dict[str, np.ndarray]:
    """The invented trace as arrays keyed by CSV header."""
    rng = np.random.default_rng(SEED)

    def noise(rel: float) -> np.ndarray:
        """Multiplicative measurement noise, relative standard deviation ``rel``."""
        return 1.0 + rel * rng.standard_normal(n)

    t = np.arange(n, dtype=float)
    bt, bl = np.array(SCHEDULE, dtype=float).T
    load = np.interp(t, bt, bl)
    # load change per second, spread over the 5 s step: an impulse train for the step responses
    dl = np.diff(load, prepend=load[0])
    up = decaying(np.clip(dl, 0, None) / 0.15, 10.0)             # ~1 per 15 % step up
    any_step = decaying(np.abs(dl) / 0.15, 8.0)

    power = RATED_KW * load * noise(0.005)
    flow = (0.25 + 0.75 * load) * FLOW_RATED_KG_H * noise(0.01)
    T_target = 235.0 + 165.0 * load
    T = np.empty(n)
    T[0], a = T_target[0], 1.0 - np.exp(-1.0 / 75.0)             # 75 s first-order lag
    for i in range(1, n):
        T[i] = T[i - 1] + a * (T_target[i] - T[i - 1])
    T = T + 1.0 * rng.standard_normal(n)
    p = (103.0 + 2.0 * load ** 2) * noise(0.001)
    O2 = (15.0 - 4.0 * load) * noise(0.01)
    H2O = (18.0 + 6.0 * load) * noise(0.01)
    NOx = (600.0 + 600.0 * load) * (1.0 + 0.3 * np.clip(up, 0, 1.5)) * noise(0.01)
    NO2 = (0.10 - 0.05 * load) * noise(0.01)
    NH3 = (500.0 + 2500.0 * ((1.0 - load) / 0.9) ** 2) * (1.0 + 0.4 * np.clip(any_step, 0, 1.5))
    NH3 = NH3 * noise(0.01)
    N2O = (60.0 - 40.0 * load) * noise(0.01)
    return {"time [s]": t, "power [kW]": power, "exhaust flow [kg/h]": flow, "T [degC]": T,
            "p [kPa]": p, "O2 [%]": O2, "H2O [%]": H2O, "NOx [ppm]": NOx, "NO2/NOx [-]": NO2,
            "NH3 [ppm]": NH3, "N2O [ppm]": N2O}


def write(path: Path) -> None:
    """Write the CSV atomically (a temporary file in the same folder, then ``os.replace``)."""
    cols = make()
    fmt = ["%d", "%.1f", "%.0f", "%.1f", "%.2f", "%.2f", "%.2f", "%.0f", "%.3f", "%.0f", "%.0f"]
    table = np.column_stack(list(cols.values()))
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=path.name, suffix=".tmp")
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)      # mkstemp makes 0600; give the usual permissions
        with os.fdopen(fd, "w", newline="\n") as f:
            f.write("# INVENTED DEMO DATA (not a measurement): 2 MW ammonia genset, harbour "
                    "manoeuvre, 1 Hz; written by cases/make_harbour_trace.py; O2/NOx/NH3/N2O "
                    "dry, H2O wet\n")
            f.write(",".join(cols) + "\n")
            np.savetxt(f, table, fmt=fmt, delimiter=",")
        os.replace(tmp, path)
    except BaseException:
        os.unlink(tmp)
        raise


if __name__ == "__main__":
    out = Path(__file__).resolve().parent / "harbour_manoeuvre.csv"
    write(out)
    print(f"wrote {out}")
