"""Bad inputs on random valid cases (tests/fuzz_cases.py): each trap a user fell into (binary,
UTF-16 and folder case files, an absurd rated power, a bare number on a dimensional key, dry
O2 above air, a misspelt key, a report onto an existing file, a bad per-mode list) is planted
in a random case and must give exit 2 with one line naming the file and the key, before any
solving (our own contract: docs/conventions.md, errors)."""
import random
import tomllib

import pytest

import fuzz_cases as fc
from aftertreat.cli import main
from aftertreat.report import to_toml

TRAPS = ("binary", "utf16", "folder", "rated_power", "bare_length", "bare_diameter", "dry_o2",
         "misspelt_key", "report_onto_file", "short_list", "weights")


def _plant(trap: str, seed: int, tmp_path):
    """(argv, text that must be in the one stderr line) for ``trap`` planted in a fuzz case."""
    rng = random.Random(seed)
    text = fc.random_cycle_case(seed)
    data = tomllib.loads(text)
    f = tmp_path / "case.toml"
    argv = ["run", str(f)]
    key = None
    if trap == "binary":
        f.write_bytes(bytes(rng.randrange(256) for _ in range(800)))
        return argv, "case.toml"
    if trap == "utf16":
        f.write_bytes(text.encode("utf-16"))
        return argv, "case.toml"
    if trap == "folder":
        f.mkdir()
        return argv, "case.toml"
    if trap == "rated_power":
        data["engine"]["rated_power_kW"] = rng.choice((1e300, -5.0, 0.0))
        key = "engine.rated_power_kW"
    elif trap in ("bare_length", "bare_diameter"):
        i = rng.randrange(len(data["brick"]))
        k = "length" if trap == "bare_length" else "diameter"
        b = data["brick"][i]
        b[k] = round(b.pop(f"{k}_mm"), 1)              # 700 would silently mean 700 m
        key = f"brick[{i}].{k}"
    elif trap == "dry_o2":
        e = data["engine_out"]
        if e["method"] != "measured":
            pytest.skip("dry O2 is given only for measured exhaust")
        i = rng.randrange(len(e["O2_pct"]))
        w = e["H2O_pct"][i]
        e["O2_pct"][i] = round(21.5 * (1 - w / 100), 2)     # 21.5 % dry: more than air
        key = "engine_out.O2_pct"
    elif trap == "misspelt_key":
        table = rng.choice(("engine", "engine_out", "limits"))
        data[table]["rated_powr_kW" if table == "engine" else "T_Celsius"] = 1
        key = table + "."
    elif trap == "report_onto_file":
        (tmp_path / "notes.txt").write_text("the user's own file")
        argv += ["--report", str(tmp_path / "notes.txt")]
        key = "--report"
    elif trap == "short_list":
        e = data["engine_out"]
        n = len(e["NOx_ppm"])
        e["NOx_ppm"] = e["NOx_ppm"][: max(n - 1, 0)] if n > 1 else [1.0, 2.0]
        key = "engine_out.NOx_ppm"
    elif trap == "weights":
        if "mode" not in data["cycle"]:
            data["cycle"] = {"mode": [{"name": "a", "weight": 0.6, "power_pct": 100},
                                      {"name": "b", "weight": 0.6, "power_pct": 50}]}
            key = "cycle.mode"
        else:
            data["cycle"]["mode"][0]["weight"] += 0.3
            key = "cycle.mode"
    f.write_text(to_toml(data), encoding="utf-8")
    return argv, key


@pytest.mark.parametrize("trap", TRAPS)
@pytest.mark.parametrize("seed", range(4))
def test_planted_trap_is_one_line_exit_2(trap, seed, tmp_path, capsys, monkeypatch):
    import aftertreat.evaluate as ev
    monkeypatch.setattr(ev, "run_case", lambda *a, **k: pytest.fail("solved a bad case"))
    argv, must = _plant(trap, 1000 + 7 * seed + TRAPS.index(trap), tmp_path)
    rc = main(argv)
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1, (trap, err)
    assert "Traceback" not in err[0] and must in err[0], (trap, err)
    if trap != "report_onto_file":
        assert "case.toml" in err[0], err
    if trap == "report_onto_file":
        assert (tmp_path / "notes.txt").read_text() == "the user's own file"
