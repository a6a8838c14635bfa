"""`finloop rig`, `run` and `replay` on bad input: one clear line, exit 2, no traceback, and the
safety cautions in the help."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from hil.cli import main

ROOT = Path(__file__).resolve().parents[1]
LINKS = ROOT / "configs/links/emulated_rig.toml"
CTL = ROOT / "configs/controller/demo_pax_135.toml"
SC = ROOT / "configs/scenarios/beam_sea_service_speed.toml"


@pytest.mark.parametrize("cmd", ["rig", "run"])
def test_help_shows_the_safety_cautions_and_an_example(cmd):
    r = subprocess.run([sys.executable, "-m", "hil.cli", cmd, "--help"], capture_output=True, text=True, cwd=ROOT)
    assert r.returncode == 0
    assert "CAUTION" in r.stdout and "emergency stop" in r.stdout and "--inject" in r.stdout and "--json" in r.stdout


def _links(tmp_path, **repl):
    text = LINKS.read_text().replace("/tmp/finloop-rig/", f"{tmp_path}/dev/")
    for a, b in repl.items():
        text = text.replace(a, b)
    p = tmp_path / "links.toml"
    p.write_text(text)
    return p


def test_run_without_a_rig_reports_the_link_and_keeps_a_stopped_record(tmp_path, capsys):
    out = tmp_path / "run"
    assert main(["run", str(_links(tmp_path)), str(CTL), "--out", str(out), "--no-live"]) == 2
    err = capsys.readouterr().err
    assert "link problem" in err and "can0" in err and "Traceback" not in err
    meta = json.loads((out / "meta.json").read_text())
    assert meta["status"] == "stopped" and "could not open the links" in meta["error"]


def test_rig_refuses_a_links_file_for_real_hardware(tmp_path, capsys):
    p = _links(tmp_path, **{"emulated = true": "emulated = false"})
    assert main(["rig", str(p), str(SC), "--out", str(tmp_path / "r")]) == 2
    assert "emulated = true" in capsys.readouterr().err


@pytest.mark.parametrize("args,msg", [
    (["--inject", "drop-feedback@3"], "needs a side"),
    (["--inject", "drop-demand@3"], "unknown kind"),
    (["--time-scale", "100"], "--time-scale"),
])
def test_rig_bad_options_are_one_clear_line(tmp_path, capsys, args, msg):
    assert main(["rig", str(_links(tmp_path)), str(SC), "--out", str(tmp_path / "r"), *args]) == 2
    err = capsys.readouterr().err
    assert msg in err and "Traceback" not in err


def test_run_rejects_rig_side_drills_and_time_scaling_of_real_hardware(tmp_path, capsys):
    assert main(["run", str(_links(tmp_path)), str(CTL), "--inject", "freeze-motion@3", "--out", str(tmp_path / "a")]) == 2
    assert "unknown kind" in capsys.readouterr().err
    hw = _links(tmp_path, **{"emulated = true": "emulated = false"})
    assert main(["run", str(hw), str(CTL), "--time-scale", "2", "--out", str(tmp_path / "b")]) == 2
    assert "only for emulated rigs" in capsys.readouterr().err


def test_bad_links_file_names_file_key_and_allowed_values(tmp_path, capsys):
    p = _links(tmp_path, **{'format = "nmea"\nrate_hz = 50': 'format = "morse"\nrate_hz = 50'})
    assert main(["run", str(p), str(CTL), "--out", str(tmp_path / "r")]) == 2
    err = capsys.readouterr().err
    assert "links.motion.format" in err and "morse" in err


def test_replay_of_a_folder_that_is_not_a_run_is_refused(tmp_path, capsys):
    assert main(["replay", str(tmp_path)]) == 2
    assert "not a run folder" in capsys.readouterr().err
