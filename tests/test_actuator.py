"""Fin servo model: lag, rate and angle limits, delay, deadband."""

from __future__ import annotations

import math

import pytest

from plant.actuator import Actuator

from .plant_fixtures import actuator


def test_small_step_follows_first_order_lag_exactly():
    # Linear first-order lag x' = (u − x)/τ has x(t) = u(1 − e^(−t/τ)) (any control text, e.g.
    # Ogata, Modern Control Engineering, ch. 5). Step small enough to stay off the rate limit.
    a = Actuator(actuator(time_constant_s=0.1, delay_s=0.0, rate_limit_rad_s=100.0), dt=0.01)
    u = math.radians(1.0)
    xs = [a.step(u) for _ in range(50)]
    for n, x in enumerate(xs, start=1):
        assert x == pytest.approx(u * (1 - math.exp(-n * 0.01 / 0.1)), rel=1e-12)


def test_large_step_moves_at_the_rate_limit_and_stops_at_the_angle_limit():
    rate = math.radians(20.0)
    a = Actuator(actuator(time_constant_s=0.05, delay_s=0.0, rate_limit_rad_s=rate), dt=0.02)
    xs = [a.step(math.radians(40.0)) for _ in range(200)]
    diffs = [b - a_ for a_, b in zip([0.0] + xs, xs)]
    assert max(diffs) == pytest.approx(rate * 0.02, rel=1e-12)
    assert xs[-1] == pytest.approx(math.radians(25.0), rel=1e-12)  # angle limit
    assert max(xs) <= math.radians(25.0)


def test_transport_delay_shifts_the_response_by_whole_control_periods():
    a = Actuator(actuator(time_constant_s=0.0, delay_s=0.06, rate_limit_rad_s=100.0), dt=0.02)
    xs = [a.step(0.1) for _ in range(5)]
    assert xs[:3] == [0.0, 0.0, 0.0]
    assert xs[3] == pytest.approx(0.1)


def test_deadband_holds_position_for_small_errors():
    a = Actuator(actuator(time_constant_s=0.0, delay_s=0.0, rate_limit_rad_s=100.0, deadband_rad=math.radians(0.5)), dt=0.02)
    assert a.step(math.radians(0.4)) == 0.0
    assert a.step(math.radians(0.6)) == pytest.approx(math.radians(0.6))


def test_non_finite_demand_holds_position():
    a = Actuator(actuator(time_constant_s=0.0, delay_s=0.0, rate_limit_rad_s=100.0), dt=0.02)
    assert a.step(0.1) == pytest.approx(0.1)
    assert a.step(float("nan")) == pytest.approx(0.1)
    assert a.step(float("inf")) == pytest.approx(0.1)
