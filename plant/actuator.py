"""Hydraulic fin actuator (servo) model.

Per fin: transport delay on the demand, optional deadband, first-order lag toward the demand,
rate (slew) limit and mechanical angle limit. Stepped once per control period ``dt``:

1. the demand enters a delay line of ``round(delay/dt)`` control periods;
2. the target is the delayed demand clamped to ±angle limit;
3. within the deadband (|target − x| ≤ deadband) the servo does not move;
4. otherwise x moves toward the target by the exact first-order-lag step
   x⁺ = target + (x − target)·e^(−dt/τ) (or straight to it when τ = 0), with the move clamped to
   ±rate_limit·dt, and x stays within ±angle limit.

Between two control instants the fin angle is taken to move linearly (used by the integrator).
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass


@dataclass(frozen=True)
class ActuatorParams:
    """Servo parameters for one fin (SI).

    angle_limit_rad: mechanical angle limit (> 0).
    rate_limit_rad_s: slew-rate limit (> 0).
    time_constant_s: first-order lag τ (≥ 0).
    delay_s: transport delay (≥ 0), realised as a whole number of control periods.
    deadband_rad: servo deadband (≥ 0).
    """

    angle_limit_rad: float
    rate_limit_rad_s: float
    time_constant_s: float
    delay_s: float
    deadband_rad: float = 0.0

    def delay_steps(self, dt: float) -> int:
        """Transport delay in whole control periods (rounded to nearest)."""
        return int(round(self.delay_s / dt))


def servo_move(x: float, target: float, max_step: float, lag_factor: float, deadband: float, limit: float) -> float:
    """One servo step from position ``x`` toward ``target`` (both rad).

    ``lag_factor`` = e^(−dt/τ) (0 for no lag); ``max_step`` = rate_limit·dt.
    Non-finite targets are treated as "hold position" (a hydraulic valve with no valid command
    does not move).
    """
    if not (target == target) or target in (math.inf, -math.inf):
        return x
    if target > limit:
        target = limit
    elif target < -limit:
        target = -limit
    err = target - x
    if -deadband <= err <= deadband:
        return x
    move = err * (1.0 - lag_factor)
    if move > max_step:
        move = max_step
    elif move < -max_step:
        move = -max_step
    x += move
    if x > limit:
        x = limit
    elif x < -limit:
        x = -limit
    return x


class Actuator:
    """Stateful servo for one fin: delay line + :func:`servo_move`.

    Parameters
    ----------
    params: the servo parameters.
    dt: control period, s.
    initial_angle_rad: starting position.
    """

    def __init__(self, params: ActuatorParams, dt: float, initial_angle_rad: float = 0.0):
        self.params = params
        self.dt = dt
        self.position = float(initial_angle_rad)
        n = params.delay_steps(dt)
        self._line: deque[float] = deque([float(initial_angle_rad)] * n, maxlen=n) if n else deque()
        self._n = n
        tau = params.time_constant_s
        self._lag = math.exp(-dt / tau) if tau > 0.0 else 0.0
        self._max_step = params.rate_limit_rad_s * dt
        self.stuck = False

    def step(self, demand: float) -> float:
        """Take one demand (rad), advance one control period, return the new position (rad)."""
        if self._n:
            delayed = self._line[0]
            self._line.append(demand)
        else:
            delayed = demand
        if not self.stuck:
            p = self.params
            self.position = servo_move(self.position, delayed, self._max_step, self._lag, p.deadband_rad, p.angle_limit_rad)
        return self.position
