"""Shared test helpers (importable as `testkit`): a small two-sensor robot from flat parameters."""
from __future__ import annotations

from collections.abc import Mapping
import math
from typing import Any

from sonar_guard.core.config import Config, build_config

# A made-up test robot: 1.0 m x 0.6 m box, one sensor on the front edge facing forward and one
# on the rear edge facing backward. Inputs only: every expected value in the tests is computed
# from outside formulas or libraries.
BASE_PARAMS: dict[str, Any] = {
    'sensor_names': ['ahead', 'behind'],
    'sensors.ahead.x': 0.5,
    'sensors.ahead.yaw': 0.0,
    'sensors.behind.x': -0.5,
    'sensors.behind.yaw': math.pi,
    'robot.footprint': [0.5, 0.3, 0.5, -0.3, -0.5, -0.3, -0.5, 0.3],
}


def make_config(overrides: Mapping[str, Any] | None = None) -> Config:
    """Build the test robot's configuration with some parameters replaced."""
    overrides = dict(overrides or {})
    names = overrides.get('sensor_names', BASE_PARAMS['sensor_names'])
    # the base robot's keys of sensors the test leaves out would be unknown keys
    params = {k: v for k, v in BASE_PARAMS.items()
              if not k.startswith('sensors.') or k.split('.')[1] in names}
    params.update(overrides)
    return build_config(params)
