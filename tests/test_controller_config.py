"""Controller files: the demo validates and converts to SI; broken variants are rejected with one
line per problem naming file, key path, value, unit and allowed range.

Unit conversions checked by hand: 1 kn = 1852/3600 m/s (international nautical mile);
1° = π/180 rad; 1 kN = 1000 N.
"""

from __future__ import annotations

import math

import pytest

from controller import ControllerParams
from hil.configio import Problems
from hil.controller_config import CONTROLLER_TOP_KEY, load_controller, read_controller_file

from .config_helpers import edited_copy, error_lines

from .test_controller_support import DEMO

TEXT = DEMO.read_text(encoding="utf-8")


def variant(tmp_path, *edits, name="ctl.toml"):
    """The demo file with regex edits (pattern, replacement) applied; each must match once."""
    return edited_copy(tmp_path, TEXT, edits, name)


def errors_of(path):
    return error_lines(load_controller, path)


def test_demo_file_loads_without_errors_or_warnings_and_converts_to_si():
    problems = Problems()
    p = load_controller(DEMO, problems)
    assert problems.items == []
    assert p.dt == 1 / 50
    assert p.angle_limit == pytest.approx(25 * math.pi / 180, rel=1e-15)
    assert p.rate_limit == pytest.approx(22 * math.pi / 180, rel=1e-15)
    assert p.u_cutout == pytest.approx(6 * 1852 / 3600, rel=1e-15)  # 3.0867 m/s
    assert p.u_reengage == pytest.approx(7 * 1852 / 3600, rel=1e-15)
    assert p.u_ref == pytest.approx(20 * 1852 / 3600, rel=1e-15)
    assert p.rated_lift == 350e3
    assert p.k_rate == 5.0 and p.k_roll == 0.5 and p.k_accel == 0.5  # ratios: same in deg and rad
    assert p.heel_gain == 0.1 and p.trim_min == 0.25 and p.trim_max == 1.5
    assert p.notch_hz == 8.0 and p.lowpass_hz == 2.0 and p.rate_source == "sensor"
    assert (p.n_fade, p.n_dwell, p.n_hold, p.n_track) == (150, 250, 500, 50)


def test_demo_fin_numbers_agree_with_whicker_fehlner_and_the_stated_fin_moment():
    p = load_controller(DEMO)
    # Whicker & Fehlner (1958): CLα = 1.8π·AR / (1.8 + √(AR² + 4)) with no sweep; AR ≈ 1.5
    # (span 3.5 m / chord 2.3 m = 1.52; 1.8π·1.5/(1.8 + 2.5) = 1.973)
    ar = 1.5
    assert p.lift_slope == pytest.approx(1.8 * math.pi * ar / (1.8 + math.sqrt(ar * ar + 4.0)), rel=0.01)
    # fin-pair moment per rad at 20 kn ≈ 1.7e7 N·m/rad (file comment, hand computation)
    assert p.fin_moment_per_rad(20 * 1852 / 3600) == pytest.approx(1.71e7, rel=0.01)


def test_controller_files_are_recognised_by_their_top_level_table():
    import tomllib

    assert CONTROLLER_TOP_KEY == "controller"
    assert list(tomllib.loads(TEXT)) == ["controller"]
    problems = Problems()
    assert isinstance(read_controller_file(DEMO, tomllib.loads(TEXT), problems), ControllerParams)


@pytest.mark.parametrize(
    "edits, expected",
    [
        ([(r"^rate_deg_s = 22", "rate_deg_s = 0")],
         "controller.limits.rate_deg_s = 0 deg/s: out of range (allowed (0, 200] deg/s)"),
        ([(r"^rate_deg_s = 22", "rate_deg_s = -5.0")],
         "controller.limits.rate_deg_s = -5.0 deg/s: out of range (allowed (0, 200] deg/s)"),
        ([(r"^cutout_speed_kn = 6", "cutout_speed_kn = 7")],
         "controller.cutout.reengage_speed_kn = 7 kn: must be above cutout_speed_kn = 7 kn (hysteresis)"),
        ([(r"^reengage_speed_kn = 7", "reengage_speed_kn = 5.5")],
         "controller.cutout.reengage_speed_kn = 5.5 kn: must be above cutout_speed_kn = 6 kn (hysteresis)"),
        ([(r"^angle_deg = 25", "angle_deg = 50")],
         "controller.limits.angle_deg = 50 deg: out of range (allowed (0, 45] deg)"),
        ([(r"^roll_rate_s = 5.0", "roll_rate_s = -5.0")],
         "controller.gains.roll_rate_s = -5.0 s: negative gain is not restoring (allowed [0, 200] s; "
         "set controller.allow_negative_gains = true to accept it)"),
        ([(r"^gain_per_s = 0.1", "gain_per_s = -0.1")],
         "controller.heel_trim.gain_per_s = -0.1 1/s: negative gain is not restoring"),
        ([(r"^roll_rate_s = 5.0", "roll_rate = 5.0")],
         "controller.gains.roll_rate = 5.0: unknown key; did you mean 'roll_rate_s'?"),
        ([(r"^roll_rate_s = 5.0", "roll_rate_s = 5.0\nroll_rate = 5.0")],
         "controller.gains.roll_rate = 5.0: unknown key"),
        ([(r"^\[controller.bench\]", "[controller.bnech]")],
         "controller.bnech = {table}: unknown key; did you mean 'bench'?"),
        ([(r"^angle_deg = 25", 'angle_deg = "25"')],
         "controller.limits.angle_deg = '25' deg: expected a number (allowed (0, 45] deg)"),
        ([(r"^fade_s = 3\n", "")],
         "controller.cutout.fade_s: missing required key (s)"),
        ([(r"^lowpass_hz = 2.0", "lowpass_hz = 24")],
         "controller.filters.lowpass_hz = 24 Hz: out of range (allowed (0, 22.5] Hz)"),
        ([(r"^notch_hz = 8.0", "notch_hz = 25")],
         "controller.filters.notch_hz = 25 Hz: out of range (allowed [0, 25) Hz)"),
        ([(r"^feedback_range_deg = 30", "feedback_range_deg = 20")],
         "controller.faults.feedback_range_deg = 20 deg: must be at least limits.angle_deg = 25 deg"),
        ([(r"^authority_deg = 4", "authority_deg = 30")],
         "controller.heel_trim.authority_deg = 30 deg: must not exceed limits.angle_deg = 25 deg"),
        ([(r"^stall_margin_deg = 2", "stall_margin_deg = 20"), (r"^stall_angle_deg = 24", "stall_angle_deg = 15")],
         "controller.limits.stall_margin_deg = 20 deg: must be below fin.stall_angle_deg = 15 deg"),
        ([(r"^trim_max_pct = 150", "trim_max_pct = 90")],
         "controller.gains.trim_max_pct = 90 %: out of range (allowed [100, 300] %)"),
        ([(r"^debounce_steps = 3", "debounce_steps = 2.5")],
         "controller.faults.debounce_steps = 2.5: expected an integer (allowed [1, 1000])"),
        ([(r'^roll_rate_source = "sensor"', 'roll_rate_source = "gyro"')],
         "controller.roll_rate_source = 'gyro': not recognised (allowed: sensor, derivative)"),
        ([(r"^min_speed_kn = 8", "min_speed_kn = 24"), (r"^max_speed_kn = 24", "max_speed_kn = 8")],
         "controller.schedule.max_speed_kn = 8 kn: must be above min_speed_kn = 24 kn"),
    ],
)
def test_broken_controller_file_is_rejected_with_a_precise_message(tmp_path, edits, expected):
    path = variant(tmp_path, *edits)
    lines = errors_of(path)
    assert any(line.startswith(f"{path}: {expected}") for line in lines), lines


def test_table_schedule_with_speeds_not_increasing_is_rejected(tmp_path):
    table = 'rule = "table"\nreference_speed_kn = 20\nspeeds_kn = [6, 12, 10, 24]\nfactors = [3, 2, 1, 0.8]\nspeed_filter_s = 2.0\n'
    path = variant(tmp_path, (r'^rule = "speed_squared"(.|\n)*?speed_filter_s = 2.0\n', table))
    lines = errors_of(path)
    assert any("controller.schedule.speeds_kn[2] = 10 kn: must be strictly increasing (previous value 12)" in x
               for x in lines), lines  # fmt: skip


def test_table_schedule_loads_and_rejects_keys_of_the_other_rule(tmp_path):
    table = 'rule = "table"\nreference_speed_kn = 20\nspeeds_kn = [6, 12, 20, 24]\nfactors = [3, 2, 1, 0.8]\nspeed_filter_s = 2.0\n'
    pattern = r'^rule = "speed_squared"(.|\n)*?speed_filter_s = 2.0\n'
    p = load_controller(variant(tmp_path, (pattern, table)))
    assert p.schedule_table and p.table_factors == (3.0, 2.0, 1.0, 0.8)
    assert p.table_speeds[1] == pytest.approx(12 * 1852 / 3600, rel=1e-15)
    lines = errors_of(variant(tmp_path, (pattern, table + "min_speed_kn = 8\n"), name="b.toml"))
    assert any('controller.schedule.min_speed_kn = 8 kn: only used with rule = "speed_squared"' in x for x in lines)
    lines = errors_of(variant(tmp_path, (pattern, table.replace("0.8]", "0.8, 0.5]")), name="c.toml"))
    assert any("controller.schedule.factors" in x and "needs as many values as speeds_kn (4), got 5" in x for x in lines)


def test_negative_gains_load_when_explicitly_allowed(tmp_path):
    path = variant(tmp_path, (r"^allow_negative_gains = false", "allow_negative_gains = true"),
                   (r"^roll = 0.5", "roll = -0.5"))  # fmt: skip
    assert load_controller(path).k_roll == -0.5


def test_every_problem_in_a_file_is_reported_at_once(tmp_path):
    path = variant(
        tmp_path,
        (r"^rate_deg_s = 22", "rate_deg_s = 0"),
        (r"^reengage_speed_kn = 7", "reengage_speed_kn = 5"),
        (r"^angle_deg = 25", "angle_deg = 60"),
        (r"^roll_rate_s = 5.0", "roll_rate_s = -5.0"),
        (r"^roll = 0.5", "rol = 0.5"),
    )
    lines = errors_of(path)
    keys = ["limits.rate_deg_s =", "cutout.reengage_speed_kn =", "limits.angle_deg =", "gains.roll_rate_s =",
            "gains.rol =", "gains.roll:"]  # fmt: skip
    for k in keys:
        assert sum(f"controller.{k}" in line for line in lines) == 1, (k, lines)
    assert len(lines) == len(keys)


def test_unreadable_files_give_one_clear_line(tmp_path):
    lines = errors_of(tmp_path / "missing.toml")
    assert lines == [f"{tmp_path / 'missing.toml'}: file not found"]
    bad = tmp_path / "bad.toml"
    bad.write_text("[controller\n", encoding="utf-8")
    lines = errors_of(bad)
    assert len(lines) == 1 and "not valid TOML" in lines[0]


def test_unknown_top_level_table_and_missing_controller_table_are_errors(tmp_path):
    path = tmp_path / "x.toml"
    path.write_text(TEXT + "\n[vessel]\nname = 'x'\n", encoding="utf-8")
    assert any("vessel = {table}: unknown key" in x for x in errors_of(path))
    path.write_text("[other]\na = 1\n", encoding="utf-8")
    lines = errors_of(path)
    assert lines == [f"{path}: controller: missing required key", f"{path}: other = {{table}}: unknown key (known keys here: controller)"], lines


def test_parameters_built_in_code_are_checked_too():
    with pytest.raises(ValueError) as info:
        ControllerParams(rate_limit=0.0, u_cutout=4.0, u_reengage=3.0, angle_limit=1.0, k_rate=-1.0)
    text = str(info.value)
    for needle in ("rate_limit = 0.0", "u_cutout = 4.0 must be below u_reengage = 3.0",
                   "angle_limit = 1.0: must be <= 0.785398", "k_rate = -1.0: must be >= 0"):  # fmt: skip
        assert needle in text, text
    assert ControllerParams(k_rate=-1.0, allow_negative_gains=True).k_rate == -1.0
