"""Typed, frozen, validated configuration: the single source of truth for every parameter.

A ROS 2 parameter file (``<node>:`` or ``/**:`` then ``ros__parameters``) is flattened into
dotted keys (``sonar.max_range``, ``sensors.front.topic``), exactly the names the node declares
as ROS parameters. :func:`build_config` turns such a flat mapping into a :class:`Config`,
collecting every problem before it raises one :class:`~sonar_guard.errors.ConfigError`.

Units are SI (REP 103): metres, seconds, radians, m/s, m/s^2; temperatures in degrees Celsius.
This module reads no files: callers pass text or mappings in.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
import difflib
import math
import re
from typing import Any

import yaml

from sonar_guard.core.geometry import Footprint, polygon_problems
from sonar_guard.errors import ConfigError

__all__ = [
    'Config',
    'LimitsConfig',
    'NODE_NAME',
    'ParamSpec',
    'ROS_OWNED_KEYS',
    'ROS_OWNED_PREFIXES',
    'RobotConfig',
    'SENSOR_FIELDS',
    'SONAR_KEYS',
    'SensorConfig',
    'build_config',
    'flatten_parameters',
    'global_specs',
    'parse_params_yaml',
    'sensor_specs',
    'unknown_key_problems',
]

NODE_NAME = 'sonar_guard'
_NAME_RE = re.compile(r'^[A-Za-z][A-Za-z0-9_]*$')
_TOPIC_RE = re.compile(r'^~?/?[A-Za-z_{][A-Za-z0-9_/{}~]*$')


@dataclass(frozen=True, slots=True)
class ParamSpec:
    """One parameter: its key, type, default, unit, allowed range and meaning."""

    key: str
    kind: str  # 'float' | 'int' | 'bool' | 'str' | 'float_list' | 'str_list'
    default: Any
    unit: str
    description: str
    low: float | None = None
    high: float | None = None
    low_open: bool = False  # True: value must be > low (not >=)
    needs_restart: bool = False

    def range_text(self) -> str:
        """Describe the allowed range, e.g. ``> 0 and <= 10 m/s``."""
        parts = []
        if self.low is not None:
            parts.append(f'{">" if self.low_open else ">="} {_num(self.low)}')
        if self.high is not None:
            parts.append(f'<= {_num(self.high)}')
        unit = f' {self.unit}' if self.unit and parts else ''
        return ' and '.join(parts) + unit if parts else 'any'


def _num(value: float) -> str:
    return f'{value:g}'


def _f(key: str, default: float, unit: str, description: str, low: float | None = None,
       high: float | None = None, *, low_open: bool = False, restart: bool = False) -> ParamSpec:
    return ParamSpec(key, 'float', default, unit, description, low, high, low_open, restart)


def _i(key: str, default: int, unit: str, description: str, low: int | None = None,
       high: int | None = None, *, restart: bool = False) -> ParamSpec:
    return ParamSpec(key, 'int', default, unit, description, low, high, False, restart)


# Defaults for every sensor; each sensor may override any of them under sensors.<name>.
_SONAR_SPECS: tuple[ParamSpec, ...] = (
    _f('sonar.min_range', 0.15, 'm', 'blind range as configured: readings below it are blind',
       0.0, 100.0),
    _f('sonar.max_range', 4.0, 'm', 'largest range the sensor reports; at or above it: no echo',
       0.0, 100.0, low_open=True),
    _f('sonar.field_of_view', 0.4, 'rad', 'full cone angle of the beam', 0.0, math.pi,
       low_open=True),
    _f('sonar.slot_duration', 0.0, 's',
       "length of this sensor's firing slot; 0 means the echo timeout for max_range", 0.0, 1.0),
    _f('sonar.air_temperature', 20.0, 'degC', 'air temperature for the speed of sound', -40.0,
       70.0),
    _f('sonar.ring_down', 0.0, 's',
       'transducer ring-down time; readings inside c*t/2 are blind (0: not configured)', 0.0,
       0.02),
    _f('sonar.resolution', 0.01, 'm', 'smallest range step the sensor reports', 0.0, 0.5,
       low_open=True),
    _f('sonar.late_after', 0.1, 's', 'a reading arriving this long after its stamp is late',
       0.0, 10.0, low_open=True),
    _i('sonar.stuck_count', 10, '', 'readings unchanged within resolution before stuck applies',
       2, 100000),
    _f('sonar.stuck_travel', 0.15, 'm',
       'travel along the beam during an unchanged stretch that makes the reading stuck', 0.0,
       100.0, low_open=True),
    _f('sonar.stuck_turn', 0.5, 'rad',
       'turn during an unchanged stretch that makes the reading stuck', 0.0, 2 * math.pi,
       low_open=True),
    _f('sonar.jump_speed', 6.0, 'm/s',
       'range change rate between consecutive readings above which a reading is a jump', 0.0,
       1000.0, low_open=True),
)

SONAR_KEYS: tuple[str, ...] = tuple(s.key.split('.', 1)[1] for s in _SONAR_SPECS)

_GLOBAL_SPECS: tuple[ParamSpec, ...] = (
    ParamSpec('sensor_names', 'str_list', [], '',
              'sensors to monitor; list order is the firing order unless slot says otherwise',
              needs_restart=True),
    *_SONAR_SPECS,
    ParamSpec('robot.footprint', 'float_list',
              [0.35, 0.25, 0.35, -0.25, -0.25, -0.25, -0.25, 0.25], 'm',
              'footprint polygon in base_link as flat x,y pairs', needs_restart=True),
    _f('robot.decel', 0.8, 'm/s^2', 'braking deceleration the robot can always achieve', 0.0,
       20.0, low_open=True),
    _f('robot.reaction_time', 0.10, 's', 'time from a new limit to the brakes acting', 0.0,
       5.0),
    ParamSpec('robot.holonomic', 'bool', False, '',
              'true: travel in any heading; false: forward and reverse only'),
    _f('limits.max_speed', 1.0, 'm/s', 'never exceeded', 0.0, 10.0, low_open=True),
    _f('limits.fallback_speed', 0.0, 'm/s',
       'limit when sensing in the direction of travel cannot be trusted', 0.0, 10.0),
    _f('limits.margin', 0.10, 'm', 'distance kept free after stopping', 0.0, 10.0),
    _f('limits.stale_after', 0.30, 's', 'time without a reading before a sensor is silent', 0.0,
       60.0, low_open=True),
    _f('limits.odom_stale_after', 0.25, 's',
       'time without odometry before the limit falls back', 0.0, 60.0, low_open=True),
    _f('limits.rise_rate', 0.5, 'm/s^2', 'how fast the limit may rise; it drops at once', 0.0,
       100.0, low_open=True),
    _f('limits.memory_hold', 0.0, 's',
       'how long an obstacle whose echo was lost is held without a trusted echo (0: until '
       'one comes)', 0.0, 600.0),
    _f('limits.overspeed_grace', 0.3, 's',
       'extra time, beyond reaction and braking, before speed above the limit is overspeed',
       0.0, 60.0),
    _f('limits.overspeed_tolerance', 0.02, 'm/s', 'speed above the limit that is ignored', 0.0,
       1.0),
    ParamSpec('odom_topic', 'str', 'odom', '', 'nav_msgs/Odometry input', needs_restart=True),
    _f('publish_rate', 20.0, 'Hz', 'rate of allowed_speed messages', 0.0, 1000.0,
       low_open=True, restart=True),
    ParamSpec('gate_commands', 'bool', False, '',
              'scale cmd_vel_request into cmd_vel_limited', needs_restart=True),
)

SENSOR_FIELDS: tuple[ParamSpec, ...] = (
    ParamSpec('topic', 'str', '', '', 'sensor_msgs/Range topic (default sonar/<name>)',
              needs_restart=True),
    ParamSpec('frame_id', 'str', '', '', 'expected header.frame_id (empty: not checked)'),
    _f('x', 0.0, 'm', 'mount position in base_link', -50.0, 50.0),
    _f('y', 0.0, 'm', 'mount position in base_link', -50.0, 50.0),
    _f('z', 0.0, 'm', 'mount height in base_link', -50.0, 50.0),
    _f('yaw', 0.0, 'rad', 'beam axis angle in base_link, counter-clockwise from +x',
       -2 * math.pi, 2 * math.pi),
    _i('slot', -1, '', 'firing slot; sensors sharing a slot fire together (-1: list position)',
       -1, 1000),
)


def global_specs() -> tuple[ParamSpec, ...]:
    """Return the specs of every key that does not depend on the sensor list."""
    return _GLOBAL_SPECS


def sensor_specs(name: str) -> tuple[ParamSpec, ...]:
    """Return the specs of the keys of one sensor, ``sensors.<name>.*``, overrides included."""
    own = tuple(replace(s, key=f'sensors.{name}.{s.key}') for s in SENSOR_FIELDS)
    overrides = tuple(
        replace(s, key=f'sensors.{name}.{s.key.split(".", 1)[1]}', default=None)
        for s in _SONAR_SPECS
    )
    return own + overrides


@dataclass(frozen=True, slots=True)
class SensorConfig:
    """One sonar: where it is, how it fires, and the thresholds its readings are checked with."""

    name: str
    topic: str
    frame_id: str
    x_m: float
    y_m: float
    z_m: float
    yaw_rad: float
    slot: int
    min_range_m: float
    max_range_m: float
    field_of_view_rad: float
    slot_duration_s: float
    air_temperature_c: float
    ring_down_s: float
    resolution_m: float
    late_after_s: float
    stuck_count: int
    stuck_travel_m: float
    stuck_turn_rad: float
    jump_speed_mps: float


@dataclass(frozen=True, slots=True)
class RobotConfig:
    """The robot body and its brakes."""

    footprint: Footprint
    decel_mps2: float
    reaction_time_s: float
    holonomic: bool


@dataclass(frozen=True, slots=True)
class LimitsConfig:
    """How the speed limit is bounded, when sensing counts as silent, and overspeed."""

    max_speed_mps: float
    fallback_speed_mps: float
    margin_m: float
    stale_after_s: float
    odom_stale_after_s: float
    rise_rate_mps2: float
    memory_hold_s: float
    overspeed_grace_s: float
    overspeed_tolerance_mps: float


@dataclass(frozen=True, slots=True)
class Config:
    """Everything the engine and its shells need, validated once."""

    sensors: tuple[SensorConfig, ...]
    robot: RobotConfig
    limits: LimitsConfig
    odom_topic: str = 'odom'
    publish_rate_hz: float = 20.0
    gate_commands: bool = False
    warnings: tuple[str, ...] = field(default=(), compare=False)

    def sensor(self, name: str) -> SensorConfig:
        """Return the sensor called ``name``; KeyError when there is none."""
        for s in self.sensors:
            if s.name == name:
                return s
        raise KeyError(name)

    @property
    def sensor_names(self) -> tuple[str, ...]:
        """Names in configuration order."""
        return tuple(s.name for s in self.sensors)

    def to_parameters(self) -> dict[str, Any]:
        """Return the flat parameter mapping that builds this same configuration."""
        out: dict[str, Any] = {
            'sensor_names': list(self.sensor_names),
            'robot.footprint': [float(v) for v in self.robot.footprint.points.ravel()],
            'robot.decel': self.robot.decel_mps2,
            'robot.reaction_time': self.robot.reaction_time_s,
            'robot.holonomic': self.robot.holonomic,
            'limits.max_speed': self.limits.max_speed_mps,
            'limits.fallback_speed': self.limits.fallback_speed_mps,
            'limits.margin': self.limits.margin_m,
            'limits.stale_after': self.limits.stale_after_s,
            'limits.odom_stale_after': self.limits.odom_stale_after_s,
            'limits.rise_rate': self.limits.rise_rate_mps2,
            'limits.memory_hold': self.limits.memory_hold_s,
            'limits.overspeed_grace': self.limits.overspeed_grace_s,
            'limits.overspeed_tolerance': self.limits.overspeed_tolerance_mps,
            'odom_topic': self.odom_topic,
            'publish_rate': self.publish_rate_hz,
            'gate_commands': self.gate_commands,
        }
        for s in self.sensors:
            for key, value in _sensor_values(s).items():
                out[f'sensors.{s.name}.{key}'] = value
        return out


# parameter key of a sensor (under sensors.<name>.) -> SensorConfig field, one table for both
# directions
_SENSOR_FIELD_OF_KEY: dict[str, str] = {
    'topic': 'topic', 'frame_id': 'frame_id', 'x': 'x_m', 'y': 'y_m', 'z': 'z_m',
    'yaw': 'yaw_rad', 'slot': 'slot', 'min_range': 'min_range_m', 'max_range': 'max_range_m',
    'field_of_view': 'field_of_view_rad', 'slot_duration': 'slot_duration_s',
    'air_temperature': 'air_temperature_c', 'ring_down': 'ring_down_s',
    'resolution': 'resolution_m', 'late_after': 'late_after_s', 'stuck_count': 'stuck_count',
    'stuck_travel': 'stuck_travel_m', 'stuck_turn': 'stuck_turn_rad',
    'jump_speed': 'jump_speed_mps',
}


def _sensor_values(s: SensorConfig) -> dict[str, Any]:
    return {key: getattr(s, attr) for key, attr in _SENSOR_FIELD_OF_KEY.items()}


# ----------------------------------------------------------------------------------------
# YAML -> flat parameters


def parse_params_yaml(text: str, *, node_name: str = NODE_NAME,
                      source: str = '') -> dict[str, Any]:
    """Parse ROS 2 parameter-file text into a flat ``{dotted.key: value}`` mapping.

    Sections apply in file order of precedence: ``/**`` first, then the node's own section
    (``sonar_guard``, ``/sonar_guard`` or ``/<namespace>/sonar_guard``).
    """
    try:
        data = yaml.safe_load(text)
    except yaml.YAMLError as err:
        mark = getattr(err, 'problem_mark', None)
        where = f' at line {mark.line + 1}, column {mark.column + 1}' if mark else ''
        problem = getattr(err, 'problem', None) or 'not valid YAML'
        raise ConfigError([f'YAML{where}: {problem}'], source=source) from None
    if data is None:
        data = {}
    if not isinstance(data, dict):
        raise ConfigError(
            [f'top level must be a mapping of node names, got {type(data).__name__}'],
            source=source)
    wildcard: list[dict[str, Any]] = []
    own: list[dict[str, Any]] = []
    problems: list[str] = []
    for key, section in data.items():
        key_s = str(key)
        if key_s == '/**':
            target = wildcard
        elif key_s.rstrip('/').split('/')[-1] == node_name:
            target = own
        else:
            continue
        params = section.get('ros__parameters') if isinstance(section, dict) else None
        if not isinstance(params, dict):
            problems.append(f'section {key_s!r} must hold a ros__parameters mapping')
            continue
        target.append(params)
    if not wildcard and not own and not problems:
        problems.append(
            f"no '{node_name}:' or '/**:' section with ros__parameters; "
            f'found: {", ".join(map(str, data)) or "nothing"}')
    if problems:
        raise ConfigError(problems, source=source)
    flat: dict[str, Any] = {}
    for params in wildcard + own:
        flat.update(flatten_parameters(params))
    return flat


def flatten_parameters(tree: Mapping[str, Any], prefix: str = '') -> dict[str, Any]:
    """Flatten nested parameter mappings into dotted keys, as ROS 2 does."""
    flat: dict[str, Any] = {}
    for key, value in tree.items():
        full = f'{prefix}{key}'
        if isinstance(value, Mapping):
            flat.update(flatten_parameters(value, full + '.'))
        else:
            flat[full] = value
    return flat


# ----------------------------------------------------------------------------------------
# flat parameters -> Config


class _Reader:
    """Collects typed values and every problem found while reading a flat mapping."""

    def __init__(self, values: Mapping[str, Any]) -> None:
        self.values = values
        self.used: set[str] = set()
        self.problems: list[str] = []

    def get(self, spec: ParamSpec, fallback: Any = None) -> Any:
        self.used.add(spec.key)
        if spec.key not in self.values or self.values[spec.key] is None:
            return fallback if spec.default is None else spec.default
        raw = self.values[spec.key]
        value, error = _coerce(spec, raw)
        if error:
            self.problems.append(f'{spec.key!r} {error}: {raw!r}')
            return fallback if spec.default is None else spec.default
        if spec.kind in ('float', 'int') and not _in_range(spec, value):
            self.problems.append(f'{spec.key!r} must be {spec.range_text()}: {raw!r}')
            # go on with the default so cross-checks do not repeat this problem
            return fallback if spec.default is None else spec.default
        return value


def _coerce(spec: ParamSpec, raw: Any) -> tuple[Any, str]:
    kind = spec.kind
    if kind == 'bool':
        return (raw, '') if isinstance(raw, bool) else (None, 'must be true or false')
    if kind == 'str':
        return (raw, '') if isinstance(raw, str) else (None, 'must be a string')
    if kind == 'int':
        if isinstance(raw, bool) or not isinstance(raw, int):
            return None, 'must be an integer'
        return raw, ''
    if kind == 'float':
        if isinstance(raw, bool) or not isinstance(raw, (int, float)):
            return None, f'must be a number in {spec.unit or "plain units"}'
        value = float(raw)
        if not math.isfinite(value):
            return None, 'must be a finite number'
        return value, ''
    if kind == 'str_list':
        if not isinstance(raw, (list, tuple)) or not all(isinstance(v, str) for v in raw):
            return None, 'must be a list of strings'
        return list(raw), ''
    if kind == 'float_list':
        if not isinstance(raw, (list, tuple)) or not all(
                isinstance(v, (int, float)) and not isinstance(v, bool) for v in raw):
            return None, 'must be a list of numbers'
        return [float(v) for v in raw], ''
    raise AssertionError(kind)  # pragma: no cover - specs are ours


def _in_range(spec: ParamSpec, value: float) -> bool:
    if spec.low is not None and (value <= spec.low if spec.low_open else value < spec.low):
        return False
    return spec.high is None or value <= spec.high


def build_config(values: Mapping[str, Any], *, source: str = '') -> Config:
    """Validate a flat parameter mapping into a :class:`Config`.

    Raises :class:`ConfigError` listing every problem (key, rule and value). An unknown key
    is a problem too, named with the closest known key: a misspelt key would otherwise leave
    its parameter at the default without a word. Keys that ROS tools put in the same file
    (``use_sim_time``, ``qos_overrides.*``, ...) are accepted.
    """
    r = _Reader(values)
    g = {s.key: s for s in _GLOBAL_SPECS}
    names = r.get(g['sensor_names'])
    if not names:
        r.problems.append("'sensor_names' must list at least one sensor: []")
        names = []
    seen: set[str] = set()
    for n in names:
        if not _NAME_RE.match(n):
            r.problems.append(
                f"'sensor_names' entries must start with a letter and hold only letters, "
                f'digits and _: {n!r}')
        if n in seen:
            r.problems.append(f"'sensor_names' lists {n!r} twice")
        seen.add(n)
    names = list(dict.fromkeys(names))

    defaults = {s.key.split('.', 1)[1]: r.get(s) for s in _SONAR_SPECS}
    sensors = [_read_sensor(r, n, i, defaults) for i, n in enumerate(names)]

    footprint_values = r.get(g['robot.footprint'])
    footprint = None
    fp_problems = polygon_problems(footprint_values)
    if fp_problems:
        r.problems.extend(p if p.startswith("'") else f"'robot.footprint' {p}"
                          for p in fp_problems)
    else:
        footprint = Footprint.from_flat(footprint_values)
    robot_kw = dict(decel_mps2=r.get(g['robot.decel']),
                    reaction_time_s=r.get(g['robot.reaction_time']),
                    holonomic=r.get(g['robot.holonomic']))
    limits = LimitsConfig(
        max_speed_mps=r.get(g['limits.max_speed']),
        fallback_speed_mps=r.get(g['limits.fallback_speed']),
        margin_m=r.get(g['limits.margin']),
        stale_after_s=r.get(g['limits.stale_after']),
        odom_stale_after_s=r.get(g['limits.odom_stale_after']),
        rise_rate_mps2=r.get(g['limits.rise_rate']),
        memory_hold_s=r.get(g['limits.memory_hold']),
        overspeed_grace_s=r.get(g['limits.overspeed_grace']),
        overspeed_tolerance_mps=r.get(g['limits.overspeed_tolerance']),
    )
    odom_topic = r.get(g['odom_topic'])
    publish_rate = r.get(g['publish_rate'])
    gate = r.get(g['gate_commands'])

    _cross_checks(r.problems, sensors, limits, odom_topic)
    r.problems.extend(unknown_key_problems(values, r.used, names))
    warnings: list[str] = []
    if r.problems:
        raise ConfigError(r.problems, source=source)
    assert footprint is not None
    return Config(
        sensors=tuple(sensors),
        robot=RobotConfig(footprint=footprint, **robot_kw),
        limits=limits,
        odom_topic=odom_topic,
        publish_rate_hz=publish_rate,
        gate_commands=gate,
        warnings=tuple(warnings),
    )


def _read_sensor(r: _Reader, name: str, index: int, defaults: Mapping[str, Any]) -> SensorConfig:
    specs = {s.key.rsplit('.', 1)[1]: s for s in sensor_specs(name)}
    v = {k: r.get(spec, defaults.get(k)) for k, spec in specs.items()}
    topic = v['topic'] or f'sonar/{name}'
    if not _TOPIC_RE.match(topic) or '//' in topic or topic.endswith('/'):
        r.problems.append(f"'sensors.{name}.topic' must be a valid ROS topic name: {topic!r}")
    v['topic'] = topic
    v['slot'] = v['slot'] if v['slot'] >= 0 else index
    return SensorConfig(name=name, **{attr: v[key] for key, attr in _SENSOR_FIELD_OF_KEY.items()})


def _cross_checks(problems: list[str], sensors: Sequence[SensorConfig], limits: LimitsConfig,
                  odom_topic: str) -> None:
    topics: dict[str, str] = {}
    for s in sensors:
        if s.min_range_m >= s.max_range_m:
            problems.append(
                f"'sensors.{s.name}' min_range must be below max_range: "
                f'{s.min_range_m:g} m >= {s.max_range_m:g} m')
        if s.late_after_s >= limits.stale_after_s:
            problems.append(
                f"'sensors.{s.name}' late_after must be below limits.stale_after: "
                f'{s.late_after_s:g} s >= {limits.stale_after_s:g} s')
        if s.topic in topics:
            problems.append(
                f"'sensors.{s.name}.topic' repeats the topic of {topics[s.topic]!r}: {s.topic!r}")
        topics.setdefault(s.topic, s.name)
    if not odom_topic:
        problems.append("'odom_topic' must not be empty: ''")
    elif odom_topic in topics:
        problems.append(
            f"'odom_topic' is also the topic of sensor {topics[odom_topic]!r}: {odom_topic!r}")
    if limits.fallback_speed_mps > limits.max_speed_mps:
        problems.append(
            f"'limits.fallback_speed' must be <= limits.max_speed "
            f'({limits.max_speed_mps:g} m/s): {limits.fallback_speed_mps!r}')


ROS_OWNED_KEYS: frozenset[str] = frozenset({'use_sim_time', 'start_type_description_service'})
"""Parameters every ROS 2 node has; a parameter file for this node may set them."""

ROS_OWNED_PREFIXES: tuple[str, ...] = ('qos_overrides.',)
"""Key prefixes that ROS tools read from the same parameter file (QoS overrides)."""


def unknown_key_problems(values: Mapping[str, Any], used: set[str],
                         names: Sequence[str]) -> list[str]:
    """Return one problem per key that is not a parameter, with the closest known key."""
    known = sorted(used)
    problems = []
    for key in values:
        if key in used or key in ROS_OWNED_KEYS or key.startswith(ROS_OWNED_PREFIXES):
            continue
        parts = key.split('.')
        if len(parts) >= 2 and parts[0] == 'sensors' and parts[1] not in names:
            close = difflib.get_close_matches(parts[1], list(names), n=1, cutoff=0.6)
            hint = (f'did you mean {close[0]}?' if close
                    else 'list it there or delete its keys')
            problems.append(f'unknown key {key}: sensor {parts[1]} is not in sensor_names '
                            f'({hint})')
            continue
        close = difflib.get_close_matches(key, known, n=1, cutoff=0.6)
        hint = (f'did you mean {close[0]}?' if close
                else 'not a parameter of sonar_guard; see the parameter reference')
        problems.append(f'unknown key {key} ({hint})')
    return problems
