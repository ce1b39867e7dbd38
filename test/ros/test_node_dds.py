"""The live node over real DDS on loopback: started from the shipped parameters, fed by the test.

The node runs in a subprocess on this run's own ROS_DOMAIN_ID; the test publishes Range and
Odometry and listens to allowed_speed, /diagnostics and cmd_vel_limited. Expected limits come
from the core engine fed the same inputs (the node is a thin shell over it).
"""
from __future__ import annotations

import math
import os
import signal
import time

import pytest

pytest.importorskip('rclpy', reason='rclpy is not installed (make venv brings it)')

from diagnostic_msgs.msg import DiagnosticStatus
from measured import report
from rcl_interfaces.msg import Parameter as ParameterMsg
from rcl_interfaces.msg import ParameterType, ParameterValue
from rcl_interfaces.srv import SetParameters
from roskit import DEFAULT_PARAMS, NodeProcess, Rig, isolate_ros_environment, rclpy, start_node

from sonar_guard.cli import load_config_file
from sonar_guard.core.monitor import Monitor, OdometrySample
from sonar_guard.core.readings import RangeReading

pytestmark = pytest.mark.ros

CONFIG = load_config_file(DEFAULT_PARAMS)
FRONT = 'front_center'
READING_PERIOD_S = 0.05


@pytest.fixture(scope='module')
def test_node():
    """One rclpy context and node for the test side of every test in this module."""
    isolate_ros_environment()
    rclpy.init()
    node = rclpy.create_node('sonar_guard_test_rig')
    yield node
    node.destroy_node()
    rclpy.try_shutdown()


@pytest.fixture
def started(test_node, tmp_path):
    """Start the node with the shipped parameters (command gate on); stop it after the test."""
    procs: list[NodeProcess] = []

    def start(_before_wait=None, _best_effort=(), **extra):
        proc, rig = start_node(test_node, CONFIG, tmp_path / f'node{len(procs)}.log',
                               {'gate_commands': True, **extra}, before_wait=_before_wait,
                               best_effort=_best_effort)
        procs.append(proc)
        return proc, rig

    yield start
    for proc in procs:
        code, took = proc.interrupt()
        assert code == 0, proc.output()


def core_limit(ranges: dict[str, float], vx: float, age_s: float) -> float:
    """Limit the core engine gives for readings every READING_PERIOD_S and the given age."""
    monitor = Monitor(CONFIG)
    t = 100.0
    for _ in range(60):
        monitor.on_odometry(OdometrySample(t, vx, 0.0, 0.0, t))
        for s in CONFIG.sensors:
            monitor.on_range(RangeReading(s.name, t, ranges.get(s.name, math.inf), t))
        t += READING_PERIOD_S
    t -= READING_PERIOD_S
    return monitor.limit_for(0.0, t + age_s)


def diag_levels(rig: Rig) -> dict[str, int]:
    """Latest level per status name from the diagnostics received."""
    levels: dict[str, int] = {}
    for array in rig.diagnostics:
        for status in array.status:
            levels[status.name] = status.level[0] if isinstance(status.level, bytes) else int(
                status.level)
    return levels


def test_clear_path_gives_max_speed(started):
    """Nothing in range and fresh odometry: allowed_speed reaches limits.max_speed."""
    _, rig = started()
    rig.vx = 0.05
    rig.run_until(lambda: rig.limit == pytest.approx(CONFIG.limits.max_speed_mps, abs=1e-9),
                  timeout_s=30.0)


def test_obstacle_ahead_gives_the_core_limit(started):
    """An obstacle 1.0 m ahead: the published limit is the core's for the same inputs.

    The obstacle's sensor publishes best effort, the others reliable: both must arrive.
    """
    _, rig = started(_best_effort=(FRONT,))
    rig.vx = 0.05
    rig.ranges[FRONT] = 1.0
    # the limit stays at 0 until the node has fresh readings from every sensor and odometry
    # (its monitor status stops reporting a failure), then rises slowly to its target: wait
    # for that, then until it settles
    trusted = (DiagnosticStatus.OK[0], DiagnosticStatus.WARN[0])  # DiagnosticStatus.msg
    rig.run_until(lambda: diag_levels(rig).get('sonar_guard: monitor') in trusted,
                  timeout_s=30.0)
    trusted_from = len(rig.limits)
    rig.run_until(lambda: len(rig.limits) > trusted_from + 40
                  and abs(rig.limits[-1][1] - rig.limits[-20][1]) < 0.01, timeout_s=30.0)
    observed = rig.limit
    # the node's reading age lies between 0 and one reading period (plus transport jitter)
    high = core_limit({FRONT: 1.0}, 0.05, age_s=0.0)
    low = core_limit({FRONT: 1.0}, 0.05, age_s=READING_PERIOD_S + 0.03)
    report(f'\nobstacle at 1.0 m: node {observed:.4f} m/s, core {low:.4f}..{high:.4f} m/s')
    assert low * 0.98 <= observed <= high * 1.02
    assert observed < CONFIG.limits.max_speed_mps


def test_silent_sensor_drops_to_fallback_within_stale_after(started):
    """A covering sensor going quiet gives fallback_speed within stale_after + 0.1 s."""
    _, rig = started()
    rig.vx = 0.05
    rig.run_until(lambda: rig.limit > 0.5, timeout_s=30.0)
    silenced: dict[str, float] = {}

    def silence(t):
        if t > 0.5 and not silenced:
            rig.silent.add(FRONT)
            silenced['at'] = t

    rig.run_until(lambda: bool(silenced) and rig.limit == CONFIG.limits.fallback_speed_mps,
                  timeout_s=10.0, step=silence)
    # from the last reading the sensor sent to the first fallback value received
    delay = rig.limits[-1][0] - rig.last_published[FRONT]
    budget = CONFIG.limits.stale_after_s + 0.1
    report(f'\nsilent {FRONT}: fallback after {delay * 1e3:.0f} ms (budget {budget * 1e3:.0f} ms)')
    assert delay <= budget
    rig.run_until(lambda: diag_levels(rig).get(f'sonar_guard: {FRONT}') in (
        DiagnosticStatus.STALE[0], DiagnosticStatus.ERROR[0]), timeout_s=5.0)
    # the sensor comes back (a restarted driver): the limit climbs again
    rig.silent.discard(FRONT)
    back = rig.run_until(lambda: rig.limit > 0.3, timeout_s=10.0)
    report(f'{FRONT} back: limit above 0.3 m/s after {back * 1e3:.0f} ms (rise_rate '
          f'{CONFIG.limits.rise_rate_mps2:g} m/s^2)')


def test_stale_odometry_drops_to_fallback(started):
    """Without odometry the motion is unknown: fallback_speed within odom_stale_after."""
    _, rig = started()
    rig.vx = 0.05
    rig.run_until(lambda: rig.limit > 0.5, timeout_s=30.0)
    rig.odometry_silent = True
    took = rig.run_until(lambda: rig.limit == CONFIG.limits.fallback_speed_mps, timeout_s=10.0)
    report(f'\nodometry silent: fallback after {took * 1e3:.0f} ms '
          f'(odom_stale_after {CONFIG.limits.odom_stale_after_s * 1e3:.0f} ms)')
    assert took <= CONFIG.limits.odom_stale_after_s + 0.2
    rig.odometry_silent = False
    rig.run_until(lambda: rig.limit > 0.3, timeout_s=30.0)  # recovers when odometry returns


def test_obstacle_lost_into_the_blind_zone_keeps_the_limit_low(started):
    """Closing in, then inside the blind range, then no echo: the limit stays at 0."""
    _, rig = started()
    rig.vx = 0.05
    rig.run_until(lambda: rig.limit > 0.3, timeout_s=30.0)
    phases = {}

    def script(t):
        if t < 1.0:
            rig.ranges[FRONT] = 0.8 - 0.4 * t  # closing in at 0.4 m/s
        elif t < 1.3:
            rig.ranges[FRONT] = 0.1  # inside min_range 0.2 m: blind
        else:
            rig.ranges[FRONT] = math.inf  # the ring-down swallows the echo: no echo
            phases.setdefault('no_echo', len(rig.limits))

    rig.run_until(lambda: 'no_echo' in phases and len(rig.limits) > phases['no_echo'] + 20,
                  timeout_s=10.0, step=script)
    assert max(v for _, v in rig.limits[phases['no_echo']:]) == 0.0


def test_gate_scales_commands_to_the_limit_and_zeroes_them_when_sensing_fails(started):
    """cmd_vel_limited keeps linear speed within the limit; a silent sensor gives zero."""
    _, rig = started()
    rig.vx = 0.05
    rig.run_until(lambda: rig.limit > 0.6, timeout_s=30.0)
    rig.gated.clear()
    rig.send_command(2.0, 0.4)
    rig.run_until(lambda: rig.gated, timeout_s=5.0)
    cmd = rig.gated[-1]
    limit = rig.limit
    assert 0.0 < cmd.linear.x <= CONFIG.limits.max_speed_mps + 1e-9
    assert cmd.linear.x == pytest.approx(limit, abs=0.1)
    assert cmd.angular.z / 0.4 == pytest.approx(cmd.linear.x / 2.0, rel=1e-6)  # same scale
    rig.silent.add(FRONT)
    rig.run_until(lambda: rig.limit == 0.0, timeout_s=5.0)
    rig.gated.clear()
    rig.send_command(0.5, 0.2)
    rig.run_until(lambda: rig.gated, timeout_s=5.0)
    assert (rig.gated[-1].linear.x, rig.gated[-1].angular.z) == (0.0, 0.0)


def _set(test_node, name: str, value: float):
    client = test_node.create_client(SetParameters, '/sonar_guard/set_parameters')
    assert client.wait_for_service(timeout_sec=20.0)
    msg = ParameterMsg(name=name)
    if isinstance(value, str):
        msg.value = ParameterValue(type=ParameterType.PARAMETER_STRING, string_value=value)
    else:
        msg.value = ParameterValue(type=ParameterType.PARAMETER_DOUBLE, double_value=value)
    future = client.call_async(SetParameters.Request(parameters=[msg]))
    rclpy.spin_until_future_complete(test_node, future, timeout_sec=20.0)
    test_node.destroy_client(client)
    return future.result().results[0]


def test_runtime_parameter_changes_apply_at_once_or_are_rejected_with_a_reason(started,
                                                                                test_node):
    """ros2 param set: new max_speed applies; zero decel and topic changes are refused."""
    _, rig = started()
    rig.vx = 0.05
    rig.run_until(lambda: rig.limit > 0.5, timeout_s=30.0)
    assert _set(test_node, 'limits.max_speed', 0.4).successful
    rig.run_until(lambda: rig.limit == pytest.approx(0.4), timeout_s=5.0)
    bad = _set(test_node, 'robot.decel', 0.0)
    assert not bad.successful and 'robot.decel' in bad.reason
    restart = _set(test_node, 'odom_topic', 'other_odom')
    assert not restart.successful and 'restart' in restart.reason
    rig.run_until(lambda: len(rig.limits) > 10 and rig.limit == pytest.approx(0.4),
                  timeout_s=5.0)


def test_sim_time_drives_the_node_and_a_backward_jump_resets_once(started):
    """use_sim_time: the node runs on /clock; the clock going back resets and logs once."""
    # a simulated clock 1000 s behind wall time, published by the rig before the node waits
    proc, rig = started(use_sim_time=True,
                        _before_wait=lambda r: setattr(r, 'sim_offset_s', -1000.0))
    rig.vx = 0.05
    rig.run_until(lambda: rig.limit > 0.3, timeout_s=30.0)
    rig.sim_offset_s = -1030.0  # thirty seconds back, as a looping bag replay does
    rig.run_until(lambda: 'jumped backwards' in proc.output(), timeout_s=10.0)
    mark = len(rig.limits)
    rig.run_until(lambda: len(rig.limits) > mark + 40 and rig.limit > 0.3, timeout_s=30.0)
    assert proc.output().count('jumped backwards') == 1


def test_node_paused_and_resumed_recovers(started):
    """SIGSTOP for 1 s while inputs keep coming, then SIGCONT: the node answers again and its
    limit is sane (never above max_speed) within a few publish periods."""
    proc, rig = started()
    rig.vx = 0.05
    rig.run_until(lambda: rig.limit > 0.5, timeout_s=30.0)
    os.kill(proc.proc.pid, signal.SIGSTOP)
    try:
        deadline = time.monotonic() + 1.0
        while time.monotonic() < deadline:  # keep feeding while it is paused
            rig.publish_readings()
            rig.publish_odometry()
            rclpy.spin_once(rig.node, timeout_sec=0.02)
    finally:
        os.kill(proc.proc.pid, signal.SIGCONT)
    mark = len(rig.limits)
    took = rig.run_until(lambda: len(rig.limits) > mark + 10, timeout_s=10.0)
    report(f'\npaused 1 s: 10 fresh limits {took * 1e3:.0f} ms after SIGCONT')
    assert all(0.0 <= v <= CONFIG.limits.max_speed_mps for _, v in rig.limits[mark:])
    rig.run_until(lambda: rig.limit > 0.5, timeout_s=15.0)


@pytest.mark.parametrize('sig', [signal.SIGINT, signal.SIGTERM], ids=['SIGINT', 'SIGTERM'])
def test_stop_signal_exits_cleanly_within_two_seconds(started, sig):
    """Ctrl-C (SIGINT) or a service manager's SIGTERM ends the node with exit code 0 in
    under 2 s."""
    proc, _ = started()
    code, took = proc.interrupt(sig=sig)
    report(f'\n{sig.name}: exit {code} after {took * 1e3:.0f} ms')
    assert code == 0 and took < 2.0


def test_bad_startup_parameters_exit_2_listing_every_problem(tmp_path):
    """Every problem is logged, no traceback, exit code 2."""
    proc = NodeProcess(DEFAULT_PARAMS, {'robot.decel': 0.0, 'limits.margin': -2.0,
                                        'sonar.max_range': 'far'},
                       log_path=tmp_path / 'bad.log')
    code = proc.proc.wait(60)
    out = proc.output()
    assert code == 2, out
    assert 'Traceback' not in out
    for key in ("'robot.decel'", "'limits.margin'", "'sonar.max_range'"):
        assert key in out


def test_a_misspelt_key_stops_the_node_with_the_hint_check_gives(tmp_path):
    """A typo'd key in the parameter file: exit 2 and the same line as `sonar-guard check`;
    the keys ROS tools read from the same file (QoS overrides) are accepted beside it."""
    params = tmp_path / 'typo.yaml'
    params.write_text(DEFAULT_PARAMS.read_text(encoding='utf-8').replace(
        '  ros__parameters:\n',
        '  ros__parameters:\n    qos_overrides:\n      /odom:\n        subscription:\n'
        '          depth: 5\n', 1).replace('decel:', 'decell:', 1), encoding='utf-8')
    proc = NodeProcess(params, log_path=tmp_path / 'typo.log')
    code = proc.proc.wait(60)
    out = proc.output()
    assert code == 2, out
    assert 'unknown key robot.decell (did you mean robot.decel?)' in out
    assert 'qos_overrides' not in out and 'Traceback' not in out
