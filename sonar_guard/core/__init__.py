"""The pure core of sonar_guard: physics, configuration, verdicts, schedule, geometry, engine.

Imports only the standard library, numpy, transforms3d and PyYAML: never rclpy, rosbags or
file I/O. Units are SI (REP 103); temperatures in degrees Celsius.
"""
from sonar_guard.core.acoustics import (
                                        blind_range,
                                        detection_latency,
                                        echo_timeout,
                                        range_from_tof,
                                        reported_range,
                                        speed_of_sound,
                                        tof_from_range,
)
from sonar_guard.core.braking import max_safe_speed, max_safe_speed_array, stopping_distance
from sonar_guard.core.config import (
                                        Config,
                                        LimitsConfig,
                                        ParamSpec,
                                        RobotConfig,
                                        SensorConfig,
                                        build_config,
                                        parse_params_yaml,
)
from sonar_guard.core.geometry import Footprint, Mount, covers_heading, free_distance_m
from sonar_guard.core.monitor import Decision, Event, Monitor, OdometrySample, SensorStatus
from sonar_guard.core.readings import RangeReading, ReadingCheck, ReadingValidator, Verdict
from sonar_guard.core.schedule import Schedule, SensorTiming

__all__ = [
    'Config',
    'Decision',
    'Event',
    'Footprint',
    'LimitsConfig',
    'Monitor',
    'Mount',
    'OdometrySample',
    'ParamSpec',
    'RangeReading',
    'ReadingCheck',
    'ReadingValidator',
    'RobotConfig',
    'Schedule',
    'SensorConfig',
    'SensorStatus',
    'SensorTiming',
    'Verdict',
    'blind_range',
    'build_config',
    'covers_heading',
    'detection_latency',
    'echo_timeout',
    'free_distance_m',
    'max_safe_speed',
    'max_safe_speed_array',
    'parse_params_yaml',
    'range_from_tof',
    'reported_range',
    'speed_of_sound',
    'stopping_distance',
    'tof_from_range',
]
