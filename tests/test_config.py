"""Vessel and scenario files: demo files load; every problem is reported with file, key, value, range."""

from __future__ import annotations

import math
import re
from pathlib import Path

import pytest

from hil.config import load_scenario, load_vessel
from hil.configio import ConfigError
from plant.fins import whicker_fehlner_lift_slope

ROOT = Path(__file__).resolve().parents[1]
VESSEL = ROOT / "configs/vessels/demo_pax_135.toml"
SCENARIOS = sorted((ROOT / "configs/scenarios").glob("*.toml"))


def _write(tmp_path: Path, name: str, text: str) -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def _vessel_text(**replace: str) -> str:
    text = VESSEL.read_text(encoding="utf-8")
    for old, new in replace.items():
        assert old in text, old
        text = text.replace(old, new)
    return text


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_every_demo_scenario_loads_without_warnings(path):
    sc = load_scenario(path)
    assert sc.setup.n_steps == round(sc.setup.duration_s / sc.setup.control_dt_s)
    assert [str(w) for w in sc.warnings] == []


def test_demo_vessel_converts_trade_units_to_si():
    v = load_vessel(VESSEL)
    assert v.params.displacement_kg == 9.8e6
    assert v.actuator_stbd.angle_limit_rad == pytest.approx(math.radians(25.0))
    assert v.actuator_stbd.rate_limit_rad_s == pytest.approx(math.radians(22.0))
    assert v.fin_port.side == -1 and v.fin_stbd.side == +1
    # omitted lift slope → Whicker & Fehlner (1958) from span/chord
    assert v.fin_stbd.lift_slope_per_rad == pytest.approx(whicker_fehlner_lift_slope(3.5 / 2.3))
    # I = Δ k² (1 + A44/I44) with k = 8 m, 20 % added inertia
    assert v.params.inertia_kg_m2 == pytest.approx(9.8e6 * 64.0 * 1.2)
    assert v.params.linear_damping_ratio == pytest.approx(0.03)


def test_every_problem_in_a_broken_vessel_is_reported_at_once(tmp_path):
    text = _vessel_text(
        **{
            "gm_m = 1.8": "gm_m = -0.5",
            "beam_m = 22.0": 'beam_m = "wide"',
            "area_m2 = 8.0": "area_m2 = -8.0\nrudder_m2 = 3.0",
            "linear_ratio_pct = 3.0": "linear_ratio_pct = -3.0",
            "stall_angle_deg = 24.0": "stall_angle_deg = 95.0",
            "rate_limit_deg_s = 22.0": "rate_limit_deg_s = 0.0",
        }
    )
    p = _write(tmp_path, "broken.toml", text)
    with pytest.raises(ConfigError) as info:
        load_vessel(p)
    lines = str(info.value).splitlines()
    expected = [
        r"broken\.toml: vessel\.gm_m = -0\.5 m: out of range \(allowed \(0, 20\] m\)",
        r"broken\.toml: vessel\.beam_m = 'wide' m: expected a number",
        r"broken\.toml: fins\.area_m2 = -8\.0 m2: out of range \(allowed \(0, 100\] m2\)",
        r"broken\.toml: fins\.rudder_m2 = 3\.0: unknown key",
        r"broken\.toml: vessel\.damping\.linear_ratio_pct = -3\.0 %: out of range",
        r"broken\.toml: fins\.stall_angle_deg = 95\.0 deg: out of range \(allowed \(0, 90\) deg\)",
        r"broken\.toml: fins\.actuator\.rate_limit_deg_s = 0\.0 deg/s: out of range",
    ]
    for pat in expected:
        assert any(re.search(pat, line) for line in lines), (pat, lines)
    assert len(lines) == len(expected)  # one line per problem, none duplicated for the two fins


def test_per_side_override_errors_name_the_side_table(tmp_path):
    text = _vessel_text(**{"[fins.actuator]": "[fins.starboard]\nlever_arm_m = -1.0\n\n[fins.actuator]"})
    p = _write(tmp_path, "side.toml", text)
    with pytest.raises(ConfigError, match=r"side\.toml: fins\.starboard\.lever_arm_m = -1\.0 m: out of range"):
        load_vessel(p)


def test_unknown_key_suggests_the_close_name(tmp_path):
    p = _write(tmp_path, "typo.toml", _vessel_text(**{"gm_m = 1.8": "gm_m = 1.8\ngm_n = 1.8"}))
    with pytest.raises(ConfigError, match=r"vessel\.gm_n = 1\.8: unknown key; did you mean 'gm_m'\?"):
        load_vessel(p)


def test_missing_key_and_wrong_type_are_errors(tmp_path):
    text = _vessel_text(**{"draught_m = 5.8\n": "", "oswald_efficiency = 0.9": 'oswald_efficiency = "high"'})
    p = _write(tmp_path, "missing.toml", text)
    with pytest.raises(ConfigError) as info:
        load_vessel(p)
    msg = str(info.value)
    assert "missing.toml: vessel.draught_m: missing required key (m)" in msg
    assert "missing.toml: fins.oswald_efficiency = 'high': expected a number" in msg


def test_unusual_but_legal_values_give_warnings_not_errors(tmp_path):
    # GM 8 m on this hull: legal but very stiff (warning); its roll period then falls to 6.2 s,
    # below 7 s for a 135 m ship (second warning).
    text = _vessel_text(**{"gm_m = 1.8": "gm_m = 8.0"})
    text = re.sub(r"\[vessel\.gz\].*?\n\n", "", text, flags=re.S)  # GM alone sets the restoring
    p = _write(tmp_path, "stiff.toml", text)
    from hil.configio import Problems

    probs = Problems()
    v = load_vessel(p, probs)
    assert v.params.gm_m == 8.0
    warnings = [str(w) for w in probs.warnings]
    assert any("vessel.gm_m = 8.0 m: unusually high" in w for w in warnings), warnings
    assert any("natural roll period" in w and "very short" in w for w in warnings), warnings


def test_not_toml_and_missing_file_are_reported_cleanly(tmp_path):
    bad = _write(tmp_path, "bad.toml", "[vessel\nname = 1")
    with pytest.raises(ConfigError, match=r"bad\.toml: not valid TOML"):
        load_vessel(bad)
    with pytest.raises(ConfigError, match=r"nope\.toml: file not found"):
        load_vessel(tmp_path / "nope.toml")


def _scenario_text(**replace: str) -> str:
    text = (ROOT / "configs/scenarios/beam_sea_service_speed.toml").read_text(encoding="utf-8")
    text = text.replace('"../vessels/', f'"{ROOT}/configs/vessels/').replace('"../controller/', f'"{ROOT}/configs/controller/')
    for old, new in replace.items():
        assert old in text, old
        text = text.replace(old, new)
    return text


def test_broken_scenario_reports_sea_speed_and_sensor_problems_together(tmp_path):
    text = _scenario_text(
        **{
            "hs_m = 3.0": "hs_m = -1.0",
            "tp_s = 9.5": "tp_s = 0.0",
            "speed_kn = 20.0": "speed_kn = 20.0\nspeed_profile = { time_s = [0.0], speed_kn = [1.0] }",
            "roll_noise_deg = 0.02": "roll_noise_deg = 0.02\nrol_bias_deg = 1.0",
            "heading_deg = 90.0": "heading_deg = 360.0",
        }
    )
    p = _write(tmp_path, "sc.toml", text)
    with pytest.raises(ConfigError) as info:
        load_scenario(p)
    msg = str(info.value)
    assert "sc.toml: sea.hs_m = -1.0 m: out of range (allowed [0, 25] m)" in msg
    assert "sc.toml: sea.tp_s = 0.0 s: out of range (allowed (0, 30] s)" in msg
    assert "sc.toml: scenario: give only one of: speed_kn, speed_profile" in msg
    assert "sc.toml: sensors.motion.rol_bias_deg = 1.0: unknown key; did you mean 'roll_bias_deg'?" in msg
    assert "sc.toml: scenario.heading_deg = 360.0 deg: out of range (allowed [0, 360) deg)" in msg


def test_scenario_errors_include_the_vessel_file_it_names(tmp_path):
    v = _write(tmp_path, "v.toml", _vessel_text(**{"gm_m = 1.8": "gm_m = 0.0"}))
    text = _scenario_text().replace(f'"{ROOT}/configs/vessels/demo_pax_135.toml"', f'"{v}"')
    p = _write(tmp_path, "sc.toml", text)
    with pytest.raises(ConfigError, match=r"v\.toml: vessel\.gm_m = 0\.0 m: out of range"):
        load_scenario(p)


def test_faults_and_external_moments_are_read_in_trade_units(tmp_path):
    text = _scenario_text() + (
        '\n[[faults]]\nchannel = "roll"\nkind = "stuck"\nstart_s = 100.0\nduration_s = 5.0\nvalue_deg = 4.0\n'
        '\n[[external_moments]]\nkind = "steady"\nmoment_kN_m = 1000.0\n'
        '\n[[external_moments]]\nkind = "step"\nmass_t = 10.0\ntransverse_shift_m = -5.0\nstart_s = 50.0\n'
    )
    sc = load_scenario(_write(tmp_path, "f.toml", text))
    (f,) = sc.setup.faults
    assert (f.channel, f.kind, f.start_s, f.duration_s) == ("roll", "stuck", 100.0, 5.0)
    assert f.value == pytest.approx(math.radians(4.0))
    steady, step = sc.setup.external_moments
    assert steady.moment_n_m == pytest.approx(1.0e6)
    assert step.moment_n_m == pytest.approx(10_000 * 9.80665 * -5.0)  # m g d, standard gravity
    bad = text.replace('value_deg = 4.0', 'value_kn = 4.0')
    with pytest.raises(ConfigError, match=r"faults\[0\]\.value_kn = 4\.0: unknown key"):
        load_scenario(_write(tmp_path, "g.toml", bad))


def test_rao_table_vessel_rolls_like_the_effective_slope_vessel_it_tabulates(tmp_path):
    # The demo RAO table is the effective-slope RAO (|X| = Δ g GM r_eff k sin β·sinc(k sin β B/2), θ = ∓90°;
    # DEVELOPERS.md) tabulated every 15° and 0.05 rad/s; through the whole pipeline the roll must
    # agree with the direct model to the table's linear-interpolation error (< 2 % of σ here).
    import numpy as np

    from hil.simulate import run_passive

    base = _scenario_text(**{"duration_s = 1200.0": "duration_s = 300.0"})
    a = load_scenario(_write(tmp_path, "a.toml", base))
    b = load_scenario(_write(tmp_path, "b.toml", base.replace("demo_pax_135.toml\"\ncontroller", "demo_pax_135_rao.toml\"\ncontroller")))
    assert b.vessel.wave_moment.method == "rao_table"
    ra, rb = run_passive(a), run_passive(b)
    diff = np.std(ra.records["roll_rad"] - rb.records["roll_rad"])
    assert diff < 0.02 * np.std(ra.records["roll_rad"])


def test_heading_outside_the_rao_table_is_a_config_error(tmp_path):
    rao = tmp_path / "rao.csv"
    rao.write_text("heading_deg,wave_frequency_rad_s,moment_kN_m_per_m,phase_deg\n"
                   "90,0.3,100,-90\n90,1.0,500,-90\n120,0.3,100,-90\n120,1.0,500,-90\n")
    v = (ROOT / "configs/vessels/demo_pax_135_rao.toml").read_text().replace('"demo_pax_135_roll_rao.csv"', f'"{rao}"')
    vp = _write(tmp_path, "v.toml", v)
    text = _scenario_text().replace(f'"{ROOT}/configs/vessels/demo_pax_135.toml"', f'"{vp}"')
    assert load_scenario(_write(tmp_path, "ok.toml", text)).vessel.wave_moment.method == "rao_table"  # 90° inside
    bad = text.replace("heading_deg = 90.0", "heading_deg = 60.0")
    with pytest.raises(ConfigError, match=r"scenario\.heading_deg = 60\.0 deg: not covered by the vessel's RAO table"):
        load_scenario(_write(tmp_path, "bad.toml", bad))


def test_scenario_checks_the_controller_it_names_and_its_sample_rate(tmp_path):
    sc = load_scenario(ROOT / "configs/scenarios/beam_sea_service_speed.toml")
    assert sc.controller is not None and sc.controller.dt == pytest.approx(0.02)
    with pytest.raises(ConfigError, match=r"scenario\.control_rate_hz = 20\.0 Hz: must equal the controller's sample_rate_hz \(50 Hz"):
        load_scenario(_write(tmp_path, "r.toml", _scenario_text(**{"control_rate_hz = 50.0": "control_rate_hz = 20.0"})))
    ctl = (ROOT / "configs/controller/demo_pax_135.toml").read_text().replace("rate_deg_s = 22", "rate_deg_s = 0")
    c = _write(tmp_path, "c.toml", ctl)
    text = _scenario_text().replace(f'"{ROOT}/configs/controller/demo_pax_135_tuned.toml"', f'"{c}"')
    with pytest.raises(ConfigError, match=r"c\.toml: controller\.limits\.rate_deg_s = 0"):
        load_scenario(_write(tmp_path, "s.toml", text))
