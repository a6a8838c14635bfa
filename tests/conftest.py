"""Shared test configuration: hypothesis profiles.

- ``ci`` (default): bounded so the whole suite stays well inside CI's time budget on 2 cores.
- ``soak``: long property-based runs, selected with ``HYPOTHESIS_PROFILE=soak``.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

from hypothesis import HealthCheck, settings

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:  # allow running the tests from a plain checkout
    sys.path.insert(0, str(ROOT))

settings.register_profile(
    "ci",
    max_examples=60,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)
settings.register_profile(
    "soak",
    max_examples=20_000,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))
