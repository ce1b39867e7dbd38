"""Configuration: ROS 2 parameter YAML into frozen, validated dataclasses."""
from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import pytest
from testkit import BASE_PARAMS, make_config
import yaml

from sonar_guard.core.config import (
    SONAR_KEYS,
    build_config,
    global_specs,
    parse_params_yaml,
    sensor_specs,
)
from sonar_guard.errors import ConfigError

REPO = Path(__file__).resolve().parents[2]


def _yaml(section: str, params: dict) -> str:
    return yaml.safe_dump({section: {'ros__parameters': params}})


class TestParseParamsYaml:
    """Sections and flattening follow the ROS 2 parameter-file layout."""

    def test_node_section_is_flattened_into_dotted_keys(self):
        """Nested mappings become dotted names, as rclpy does for parameter files."""
        text = _yaml('sonar_guard', {'limits': {'max_speed': 0.7}, 'sensors': {'a': {'x': 1}}})
        assert parse_params_yaml(text) == {'limits.max_speed': 0.7, 'sensors.a.x': 1}

    @pytest.mark.parametrize('section', ['sonar_guard', '/sonar_guard', '/robot7/sonar_guard',
                                         '/**'])
    def test_every_section_form_rclpy_accepts_is_read(self, section):
        """Plain, absolute, namespaced and wildcard node names all apply (ROS 2 param files)."""
        assert parse_params_yaml(_yaml(section, {'odom_topic': 'wheel_odom'})) == {
            'odom_topic': 'wheel_odom'}

    def test_own_section_overrides_wildcard_section(self):
        """The node's own section wins over /** whatever the order in the file."""
        text = (_yaml('sonar_guard', {'odom_topic': 'own', 'publish_rate': 5.0})
                + _yaml('/**', {'odom_topic': 'wild', 'gate_commands': True}))
        assert parse_params_yaml(text) == {
            'odom_topic': 'own', 'publish_rate': 5.0, 'gate_commands': True}

    def test_other_nodes_sections_are_ignored(self):
        """Sections of other nodes in a shared file do not leak in."""
        text = _yaml('sonar_guard', {'odom_topic': 'a'}) + _yaml('planner', {'odom_topic': 'b'})
        assert parse_params_yaml(text) == {'odom_topic': 'a'}

    @pytest.mark.parametrize('text, needle', [
        ('sonar_guard: [1, 2', 'line'),
        ('- a\n- b\n', 'mapping'),
        ('planner:\n  ros__parameters: {x: 1}\n', "no 'sonar_guard:'"),
        ('sonar_guard:\n  params: {x: 1}\n', 'ros__parameters'),
    ])
    def test_broken_files_raise_config_error_saying_why(self, text, needle):
        """Syntax errors, wrong shapes and missing sections give a ConfigError, not a crash."""
        with pytest.raises(ConfigError) as info:
            parse_params_yaml(text, source='bad.yaml')
        assert needle in str(info.value)
        assert 'bad.yaml' in str(info.value)

    def test_yaml_is_loaded_safely(self):
        """Python object tags are refused (PyYAML safe_load), never constructed."""
        with pytest.raises(ConfigError):
            parse_params_yaml('sonar_guard: !!python/object/apply:os.system ["true"]\n')


class TestBuildConfig:
    """Flat parameters become typed values, with every problem reported at once."""

    def test_defaults_fill_what_is_not_given(self):
        """Unset keys take their schema default."""
        config = make_config()
        specs = {s.key: s.default for s in global_specs()}
        assert config.limits.max_speed_mps == specs['limits.max_speed']
        assert config.sensor('ahead').max_range_m == specs['sonar.max_range']
        assert config.sensor('ahead').topic == 'sonar/ahead'

    def test_list_position_is_the_default_slot(self):
        """Sensor order is the firing order unless slot says otherwise (design.md)."""
        config = make_config({'sensors.behind.slot': 0})
        assert [s.slot for s in config.sensors] == [0, 0]
        assert [s.slot for s in make_config().sensors] == [0, 1]

    @pytest.mark.parametrize('key', SONAR_KEYS)
    def test_a_sensor_overrides_every_sonar_default(self, key):
        """sensors.<name>.<key> replaces sonar.<key> for that sensor only."""
        spec = next(s for s in global_specs() if s.key == f'sonar.{key}')
        if spec.kind == 'int':
            value = spec.default + 1
        else:
            value = spec.default * 0.5 if spec.default else 0.001
            if key == 'late_after':
                value = 0.05
        config = make_config({f'sensors.ahead.{key}': value,
                              'sonar.max_range': 4.0, 'sonar.min_range': 0.1})
        ahead = dataclasses.asdict(config.sensor('ahead'))
        behind = dataclasses.asdict(config.sensor('behind'))
        field = next(f for f in ahead if f == key or f.startswith(key + '_'))
        assert ahead[field] == value
        assert behind[field] != value

    def test_integers_are_accepted_for_float_keys(self):
        """A YAML 2 for a metre value means 2.0 m."""
        assert make_config({'sonar.max_range': 5}).sensor('ahead').max_range_m == 5.0

    def test_every_problem_is_reported_at_once_with_key_rule_and_value(self):
        """Four bad values give four problems, each naming key, allowed range and value."""
        bad = {'robot.decel': 0.0, 'limits.max_speed': -1.0, 'sonar.field_of_view': 'wide',
               'sensors.ahead.stuck_count': 1}
        with pytest.raises(ConfigError) as info:
            make_config(bad)
        problems = info.value.problems
        assert len(problems) == 4, problems
        assert "'robot.decel' must be > 0 and <= 20 m/s^2: 0.0" in problems
        assert "'limits.max_speed' must be > 0 and <= 10 m/s: -1.0" in problems
        assert any("'sonar.field_of_view'" in p and "'wide'" in p for p in problems)
        assert any("'sensors.ahead.stuck_count'" in p and ': 1' in p for p in problems)
        assert isinstance(info.value, ValueError)

    @pytest.mark.parametrize('overrides, needle', [
        ({'robot.decel': float('nan')}, "'robot.decel' must be a finite number"),
        ({'limits.margin': True}, "'limits.margin' must be a number"),
        ({'sensor_names': []}, "'sensor_names' must list at least one sensor"),
        ({'sensor_names': ['ahead', 'ahead']}, "lists 'ahead' twice"),
        ({'sensor_names': ['9lives']}, "'sensor_names' entries must start with a letter"),
        ({'sensors.behind.topic': 'sonar/ahead'}, 'repeats the topic'),
        ({'odom_topic': 'sonar/ahead'}, "'odom_topic' is also the topic"),
        ({'sensors.ahead.topic': 'bad topic'}, 'valid ROS topic name'),
        ({'sonar.min_range': 5.0}, 'min_range must be below max_range'),
        ({'limits.fallback_speed': 2.0}, "'limits.fallback_speed' must be <="),
        ({'sonar.late_after': 0.5}, 'late_after must be below limits.stale_after'),
        ({'robot.footprint': [0, 0, 1, 1, 1, 0, 0, 1]}, "'robot.footprint'"),
        ({'robot.footprint': [0, 0, 1]}, "'robot.footprint'"),
        ({'gate_commands': 'yes'}, "'gate_commands' must be true or false"),
    ])
    def test_invalid_values_are_rejected_with_the_reason(self, overrides, needle):
        """Each rule of the schema names the key that broke it."""
        with pytest.raises(ConfigError) as info:
            make_config(overrides)
        assert any(needle in p for p in info.value.problems), info.value.problems

    @pytest.mark.parametrize('key, value, problem', [
        ('robot.decell', 0.5, 'unknown key robot.decell (did you mean robot.decel?)'),
        ('limits.max_sped', 0.5, 'unknown key limits.max_sped (did you mean limits.max_speed?)'),
        ('sensors.ahead.yawn', 0.1,
         'unknown key sensors.ahead.yawn (did you mean sensors.ahead.yaw?)'),
        ('sensors.ahaed.x', 1.0,
         'unknown key sensors.ahaed.x: sensor ahaed is not in sensor_names '
         '(did you mean ahead?)'),
        ('sensors.ghost.x', 1.0,
         'unknown key sensors.ghost.x: sensor ghost is not in sensor_names '
         '(list it there or delete its keys)'),
        ('colour', 'red', 'unknown key colour (not a parameter of sonar_guard'),
    ])
    def test_unknown_keys_fail_with_the_closest_known_key(self, key, value, problem):
        """A misspelt key is an error naming the closest key, not a default used silently."""
        with pytest.raises(ConfigError) as info:
            make_config({key: value})
        assert len(info.value.problems) == 1
        assert info.value.problems[0].startswith(problem), info.value.problems

    @pytest.mark.parametrize('key, value', [
        ('use_sim_time', True),
        ('start_type_description_service', False),
        ('qos_overrides./sonar/front.subscription.reliability', 'best_effort'),
    ])
    def test_keys_of_ros_tools_are_accepted(self, key, value):
        """Keys that rclpy and the QoS override mechanism read from the same file are fine."""
        assert make_config({key: value}).warnings == ()

    def test_config_is_frozen(self):
        """Configuration cannot change after validation."""
        config = make_config()
        with pytest.raises(dataclasses.FrozenInstanceError):
            config.limits.max_speed_mps = 3.0  # type: ignore[misc]

    def test_to_parameters_round_trips(self):
        """The flat parameters a config gives build the same config."""
        config = make_config({'sensors.ahead.max_range': 3.0, 'robot.holonomic': True})
        again = build_config(config.to_parameters())
        assert again == config

    def test_sensor_specs_cover_every_sensor_key(self):
        """The node can declare one parameter per sensor field and per override."""
        keys = {s.key for s in sensor_specs('ahead')}
        assert {f'sensors.ahead.{k}' for k in SONAR_KEYS} <= keys
        assert {'sensors.ahead.topic', 'sensors.ahead.yaw', 'sensors.ahead.slot'} <= keys

    def test_spec_ranges_describe_units(self):
        """Range text reads like the README table: bound, bound, unit."""
        spec = next(s for s in global_specs() if s.key == 'sonar.field_of_view')
        assert spec.range_text() == f'> 0 and <= {math.pi:g} rad'


class TestShippedConfig:
    """The parameter file installed with the package is valid."""

    def test_default_config_file_loads_without_warnings(self):
        """config/sonar_guard.yaml validates and has no unknown keys."""
        text = (REPO / 'config' / 'sonar_guard.yaml').read_text(encoding='utf-8')
        config = build_config(parse_params_yaml(text))
        assert config.warnings == ()
        assert len(config.sensors) == 8

    def test_base_test_params_are_used_as_given(self):
        """The shared test robot is what conftest says."""
        config = make_config()
        assert config.sensor_names == tuple(BASE_PARAMS['sensor_names'])


# REP 103: SI units (metre, second, radian, hertz) and degrees Celsius for temperature;
# m/s and m/s^2 are the SI derived units for speed and acceleration.
REP_103_UNITS = {'', 'm', 's', 'rad', 'Hz', 'degC', 'm/s', 'm/s^2'}


@pytest.mark.parametrize('spec', [*global_specs(), *sensor_specs('x')], ids=lambda s: s.key)
def test_every_parameter_unit_is_rep_103(spec):
    """No feet, degrees of angle, milliseconds or km/h anywhere in the parameters (REP 103)."""
    assert spec.unit in REP_103_UNITS


def test_every_sensor_key_maps_to_a_sensor_config_field():
    """The key-to-field table covers each per-sensor key and each SensorConfig field but name."""
    from sonar_guard.core.config import _SENSOR_FIELD_OF_KEY, SensorConfig
    keys = {s.key.rsplit('.', 1)[1] for s in sensor_specs('x')}
    assert set(_SENSOR_FIELD_OF_KEY) == keys
    fields = {f.name for f in dataclasses.fields(SensorConfig)} - {'name'}
    assert set(_SENSOR_FIELD_OF_KEY.values()) == fields
