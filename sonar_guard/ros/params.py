"""ROS parameters from the core's schema: declare with descriptors, read, validate changes.

Every key is declared from the same :class:`~sonar_guard.core.config.ParamSpec` the YAML
loader uses, so the node, the offline tools and the README agree on names, units and ranges.
Validation is the core's: one :class:`~sonar_guard.errors.ConfigError` lists every problem.
"""
from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from rcl_interfaces.msg import (
    FloatingPointRange,
    IntegerRange,
    ParameterDescriptor,
    ParameterType,
    SetParametersResult,
)
from rclpy.exceptions import (
    InvalidParameterTypeException,
    InvalidParameterValueException,
    ParameterUninitializedException,
)
from rclpy.node import Node
from rclpy.parameter import Parameter

from sonar_guard.core.config import Config, ParamSpec, build_config, global_specs, sensor_specs
from sonar_guard.errors import ConfigError

__all__ = ['ParameterBridge', 'descriptor_of']

_TYPES = {
    'float': ParameterType.PARAMETER_DOUBLE,
    'int': ParameterType.PARAMETER_INTEGER,
    'bool': ParameterType.PARAMETER_BOOL,
    'str': ParameterType.PARAMETER_STRING,
    'float_list': ParameterType.PARAMETER_DOUBLE_ARRAY,
    'str_list': ParameterType.PARAMETER_STRING_ARRAY,
}
_EMPTY_TYPED = {'float_list': Parameter.Type.DOUBLE_ARRAY,
                'str_list': Parameter.Type.STRING_ARRAY}


def descriptor_of(spec: ParamSpec) -> ParameterDescriptor:
    """Return the ROS parameter descriptor of one schema entry (unit and range in the text)."""
    unit = f' [{spec.unit}]' if spec.unit else ''
    restart = ' Read at start only: restart the node to change it.' if spec.needs_restart else ''
    allowed = spec.range_text() if spec.kind in ('float', 'int') else ''
    d = ParameterDescriptor(
        name=spec.key, type=_TYPES[spec.kind],
        description=f'{spec.description}{unit}.{restart}',
        additional_constraints=f'allowed: {allowed}' if allowed else '',
        # floats accept integers (a YAML 2 for 2.0 m); per-sensor overrides may stay unset
        dynamic_typing=spec.kind == 'float' or spec.default is None,
    )
    if spec.low is not None and spec.high is not None:
        if spec.kind == 'float':
            d.floating_point_range = [FloatingPointRange(
                from_value=float(spec.low), to_value=float(spec.high), step=0.0)]
        elif spec.kind == 'int':
            d.integer_range = [IntegerRange(
                from_value=int(spec.low), to_value=int(spec.high), step=0)]
    return d


class ParameterBridge:
    """Declare the schema on a node, build the Config, and vet runtime changes.

    ``apply`` is called with every accepted new Config (the node reconfigures its engine).
    """

    def __init__(self, node: Node) -> None:
        self._node = node
        self._specs: dict[str, ParamSpec] = {}
        self.values: dict[str, Any] = {}
        for spec in global_specs():
            self._declare(spec)
        names = self.values.get('sensor_names') or []
        if isinstance(names, (list, tuple)):
            for name in dict.fromkeys(n for n in names if isinstance(n, str) and n):
                for spec in sensor_specs(name):
                    self._declare(spec)
        overrides: Mapping[str, Any] = getattr(node, '_parameter_overrides', {}) or {}
        # keys of the file that are not ours: the core names each as a problem, unless the
        # node has it already (use_sim_time and the other parameters every ROS node declares)
        self.unknown = {k: getattr(p, 'value', p) for k, p in overrides.items()
                        if k not in self._specs and not node.has_parameter(k)}

    def _declare(self, spec: ParamSpec) -> None:
        node = self._node
        self._specs[spec.key] = spec
        descriptor = descriptor_of(spec)
        default: Any = spec.default
        if spec.kind in _EMPTY_TYPED and not default:
            default = _EMPTY_TYPED[spec.kind]
        try:
            param = node.declare_parameter(spec.key, default, descriptor)
            value = param.value
        except (InvalidParameterTypeException, InvalidParameterValueException) as err:
            # keep the raw override so the core reports it in its own words, key and value
            override = getattr(node, '_parameter_overrides', {}).get(spec.key)
            value = getattr(override, 'value', str(err))
            node.declare_parameter(spec.key, default, descriptor, ignore_override=True)
        except ParameterUninitializedException:
            value = None
        self.values[spec.key] = value

    def build(self) -> Config:
        """Validate the declared values and unknown overrides (each a problem) into a Config."""
        return build_config({**self.unknown, **self.values}, source='parameters')

    def vet(self, params: list[Parameter]) -> tuple[SetParametersResult, Config | None]:
        """Judge a runtime change: the new Config when it is acceptable, else the reason."""
        changes = {p.name: p.value for p in params if p.name in self._specs}
        restart = sorted(k for k, v in changes.items()
                         if self._specs[k].needs_restart and v != self.values.get(k))
        if restart:
            reason = (f'{", ".join(repr(k) for k in restart)} '
                      f'{"is" if len(restart) == 1 else "are"} read at start only: '
                      'restart the node to change it')
            return SetParametersResult(successful=False, reason=reason), None
        if not changes:
            return SetParametersResult(successful=True), None
        candidate = {**self.values, **changes}
        try:
            config = build_config(candidate, source='parameters')
        except ConfigError as err:
            return SetParametersResult(successful=False, reason='; '.join(err.problems)), None
        self.values = candidate
        return SetParametersResult(successful=True), config
