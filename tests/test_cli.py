"""The ``finloop`` command line: sim and validate, outputs, exit codes, no tracebacks."""

from __future__ import annotations

import csv
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from hil.cli import main

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs/scenarios/beam_sea_service_speed.toml"


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    """One passive demo run shared by several tests (it takes a few seconds)."""
    out = tmp_path_factory.mktemp("runs") / "demo"
    import io
    from contextlib import redirect_stdout

    buf = io.StringIO()
    with redirect_stdout(buf):
        code = main(["sim", str(DEMO), "--stabiliser", "off", "--json", "--out", str(out)])
    return code, json.loads(buf.getvalue()), out


def test_sim_json_prints_the_required_metrics(demo_run):
    code, m, out = demo_run
    assert code == 0
    for key in ("roll_rms_deg", "roll_sig_amp_deg", "roll_max_deg", "natural_period_s", "duration_s", "seed"):
        assert key in m
    assert m["duration_s"] == pytest.approx(1200.0)
    assert m["seed"] == 20261201
    # significant amplitude is 2σ by definition (Lloyd 1989, ch. 9); with zero mean σ = RMS
    assert m["roll_sig_amp_deg"] == pytest.approx(2 * m["roll_std_deg"])
    assert m["roll_max_deg"] >= m["roll_rms_deg"] > 0
    # the vessel's natural period from its inertia and GM: 2π√(I/(Δ g GM_GZ-slope))
    assert 12.5 < m["natural_period_s"] < 13.5


def test_sim_writes_a_run_folder_with_units_seed_and_hash(demo_run):
    _, m, out = demo_run
    assert sorted(p.name for p in out.iterdir()) == ["meta.json", "metrics.json", "roll.png", "roll_spectrum.png", "steps.csv"]
    meta = json.loads((out / "meta.json").read_text())
    assert meta["seed"] == 20261201
    assert len(meta["config_sha256"]) == 64
    assert set(meta["files"]) >= {str(DEMO)}
    assert meta["finloop_version"]
    with (out / "steps.csv").open() as fh:
        header = next(csv.reader(fh))
        first = next(csv.reader(fh))
    assert header[:3] == ["time_s", "roll_deg", "roll_rate_deg_s"]
    assert all(any(h.endswith(u) for u in ("_s", "_deg", "_deg_s", "_deg_s2", "_kn", "_m", "_kN_m", "_kN", "_kW", "_valid"))
               for h in header), header
    assert float(first[0]) == 0.0
    data = np.loadtxt(out / "steps.csv", delimiter=",", skiprows=1)
    assert data.shape == (60001, len(header))
    roll = data[:, header.index("roll_deg")]
    t = data[:, 0]
    # the CSV reproduces the printed RMS (statistics after the 60 s warm-up)
    assert math.sqrt(np.mean(roll[t >= 60.0] ** 2)) == pytest.approx(m["roll_rms_deg"], rel=1e-4)


def test_sim_is_deterministic_for_a_seed_and_changes_with_it(tmp_path, capsys):
    args = ["sim", str(ROOT / "configs/scenarios/slow_approach.toml"), "--json", "--no-plots"]
    assert main(args + ["--out", str(tmp_path / "a")]) == 0
    a = json.loads(capsys.readouterr().out)
    assert main(args + ["--out", str(tmp_path / "b")]) == 0
    b = json.loads(capsys.readouterr().out)
    assert main(args + ["--out", str(tmp_path / "c"), "--seed", "7"]) == 0
    c = json.loads(capsys.readouterr().out)
    assert a["roll_rms_deg"] == b["roll_rms_deg"]
    assert c["roll_rms_deg"] != a["roll_rms_deg"] and c["seed"] == 7
    assert (tmp_path / "a/steps.csv").read_bytes() == (tmp_path / "b/steps.csv").read_bytes()


def test_sim_refuses_to_overwrite_an_existing_run(tmp_path, capsys):
    out = tmp_path / "run"
    out.mkdir()
    (out / "steps.csv").write_text("precious\n")
    code = main(["sim", str(DEMO), "--no-plots", "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    assert "already exists and is not an empty folder" in err
    assert (out / "steps.csv").read_text() == "precious\n"


def test_validate_accepts_every_bundled_config(capsys):
    files = sorted(str(p) for p in (ROOT / "configs").rglob("*.toml"))
    assert len(files) >= 6
    assert main(["validate", "--json", *files]) == 0
    res = json.loads(capsys.readouterr().out)
    assert res["ok"] and all(f["ok"] for f in res["files"])
    kinds = {f["kind"] for f in res["files"]}
    assert kinds == {"scenario", "vessel", "controller", "envelope", "links"}


def test_validate_lists_every_problem_and_exits_2(tmp_path, capsys):
    text = (ROOT / "configs/vessels/demo_pax_135.toml").read_text()
    text = text.replace("gm_m = 1.8", "gm_m = 0.0").replace("area_m2 = 8.0", "area_m2 = -1.0\nflap = true")
    bad = tmp_path / "bad_vessel.toml"
    bad.write_text(text)
    code = main(["validate", str(bad)])
    cap = capsys.readouterr()
    assert code == 2
    assert "bad_vessel.toml: vessel.gm_m = 0.0 m: out of range (allowed (0, 20] m)" in cap.err
    assert "bad_vessel.toml: fins.area_m2 = -1.0 m2: out of range (allowed (0, 100] m2)" in cap.err
    assert "bad_vessel.toml: fins.flap = true: unknown key" in cap.err
    assert "bad_vessel.toml: vessel: 3 error(s)" in cap.out


def test_validate_rejects_a_file_of_unknown_kind(tmp_path, capsys):
    f = tmp_path / "x.toml"
    f.write_text("[boat]\nname = 'x'\n")
    assert main(["validate", str(f)]) == 2
    assert "not a finloop config" in capsys.readouterr().err


@pytest.mark.parametrize(
    "argv, needle",
    [
        (["sim", "no/such/file.toml"], "no/such/file.toml: file not found"),
        (["sim", str(DEMO), "--stabiliser", "sideways"], "invalid choice: 'sideways'"),
        (["sim", str(DEMO), "--seed", "-3"], "expected a whole number >= 0"),
        (["validate"], "the following arguments are required: FILE"),
    ],
)
def test_bad_command_line_input_gives_one_clear_line_exit_2_and_no_traceback(argv, needle):
    r = subprocess.run([sys.executable, "-m", "hil.cli", *argv], capture_output=True, text=True, cwd=ROOT)
    assert r.returncode == 2, r.stderr
    assert needle in r.stderr
    assert "Traceback" not in r.stderr + r.stdout


def test_help_explains_each_command():
    r = subprocess.run([sys.executable, "-m", "hil.cli", "sim", "--help"], capture_output=True, text=True, cwd=ROOT)
    assert r.returncode == 0
    assert "SCENARIO.toml" in r.stdout and "--json" in r.stdout and "significant" in r.stdout
    r = subprocess.run([sys.executable, "-m", "hil.cli", "--help"], capture_output=True, text=True, cwd=ROOT)
    assert "CAUTION" in r.stdout and "does not replace the ship's certified" in r.stdout


def test_a_capsizing_run_stops_early_keeps_its_records_and_exits_3(tmp_path, capsys):
    # A steady heeling arm of 1.2 m exceeds the demo GZ curve's maximum (0.88 m at 35°), so
    # the vessel has no equilibrium and capsizes (static stability: heeling arm > max GZ).
    text = DEMO.read_text().replace('"../vessels/', f'"{ROOT}/configs/vessels/').replace('"../controller/', f'"{ROOT}/configs/controller/')
    text += '\n[[external_moments]]\nkind = "step"\nheeling_arm_m = 1.2\nstart_s = 100.0\n'
    sc = tmp_path / "capsize.toml"
    sc.write_text(text)
    out = tmp_path / "run"
    code = main(["sim", str(sc), "--json", "--no-plots", "--out", str(out)])
    cap = capsys.readouterr()
    assert code == 3
    res = json.loads(cap.out)
    assert "roll left the model's range" in res["stopped_early"]["off"]
    assert "run stopped early" in cap.err
    data = np.loadtxt(out / "steps.csv", delimiter=",", skiprows=1)
    assert 100.0 < data[-1, 0] < 1200.0  # recorded up to the capsize
    assert json.loads((out / "meta.json").read_text())["stopped_early"]
