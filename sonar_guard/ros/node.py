"""The live node ``sonar_guard``: a thin shell around the core engine.

Messages become core inputs stamped with ROS time (``use_sim_time`` works); the engine decides;
the node publishes the speed limit, diagnostics, markers and (optionally) gated commands.

Run: ``ros2 run sonar_guard sonar_guard_node --ros-args --params-file FILE``.
A monitoring and speed-advice aid, not a certified safety function (see README).
"""
from __future__ import annotations

from collections.abc import Sequence
from functools import partial
import math
import signal
import sys
import time

from diagnostic_msgs.msg import DiagnosticArray
from geometry_msgs.msg import Twist
from nav_msgs.msg import Odometry
import rclpy
from rclpy.executors import ExternalShutdownException, SingleThreadedExecutor
from rclpy.node import Node
from rclpy.parameter import Parameter
from rclpy.qos import (
    DurabilityPolicy,
    HistoryPolicy,
    QoSProfile,
    ReliabilityPolicy,
    qos_profile_sensor_data,
)
from rclpy.time import Time
from sensor_msgs.msg import Range
from std_msgs.msg import Float64
from visualization_msgs.msg import MarkerArray

from sonar_guard import SAFETY_CAUTION
from sonar_guard.core.config import Config
from sonar_guard.core.monitor import Decision, Event, Monitor, SensorStatus
from sonar_guard.core.readings import Verdict
from sonar_guard.errors import ConfigError
from sonar_guard.ros.convert import odometry_to_sample, range_to_reading
from sonar_guard.ros.diagnostics import build_diagnostics, monitor_level, sensor_level
from sonar_guard.ros.markers import build_markers
from sonar_guard.ros.params import ParameterBridge

__all__ = ['FindingLog', 'LIMIT_QOS', 'SonarGuardNode', 'TransitionLog', 'gate_command', 'main']

NODE_NAME = 'sonar_guard'
LIMIT_QOS = QoSProfile(depth=1, history=HistoryPolicy.KEEP_LAST,
                       reliability=ReliabilityPolicy.RELIABLE,
                       durability=DurabilityPolicy.TRANSIENT_LOCAL)
"""allowed_speed QoS: reliable and latched, so a late subscriber gets the current limit."""
DIAGNOSTICS_PERIOD_S = 1.0
MARKER_PERIOD_S = 0.2
SPIN_TIMEOUT_S = 0.1  # the longest a stop request waits for the spin loop to see it


class TransitionLog:
    """Say each verdict change once, at most one line per sensor per ``period_s``."""

    def __init__(self, period_s: float = 1.0) -> None:
        self.period_s = period_s
        self._last: dict[str, Verdict] = {}
        self._said_at: dict[str, float] = {}
        self._held: dict[str, int] = {}

    def note(self, sensor: str, verdict: Verdict, reason: str, now_s: float) -> str | None:
        """Return the line to log for this verdict, or None when there is nothing to say."""
        previous = self._last.get(sensor)
        if previous is verdict:
            return None
        self._last[sensor] = verdict
        if now_s - self._said_at.get(sensor, -math.inf) < self.period_s:
            self._held[sensor] = self._held.get(sensor, 0) + 1
            return None
        self._said_at[sensor] = now_s
        held = self._held.pop(sensor, 0)
        extra = f' ({held} more changes in the last {self.period_s:g} s)' if held else ''
        was = previous.value if previous is not None else 'none'
        return f'{sensor}: {was} -> {verdict.value}: {reason}{extra}'


class FindingLog:
    """Log closed findings, at most ``per_second`` lines a second; count what is held back."""

    def __init__(self, per_second: float = 10.0) -> None:
        self.per_second = per_second
        self._window_start = -math.inf
        self._in_window = 0
        self._held = 0

    def note(self, event: Event, now_s: float) -> str | None:
        """Return the log line for a closed finding, or None when throttled."""
        if now_s - self._window_start >= 1.0:
            self._window_start, self._in_window = now_s, 0
        if self._in_window >= self.per_second:
            self._held += 1
            return None
        self._in_window += 1
        held, self._held = self._held, 0
        extra = f' ({held} findings not logged before this one)' if held else ''
        return (f'finding: {event.kind} {event.sensor or "robot"} '
                f'{event.t_start:.3f}..{event.t_end:.3f} s: {event.detail}{extra}')


def gate_command(cmd: Twist, limit_mps: float, fallback: bool) -> Twist:
    """Scale a command so its linear speed stays within the limit; zero when sensing failed."""
    out = Twist()
    if fallback and limit_mps <= 0.0:
        return out
    speed = math.hypot(cmd.linear.x, cmd.linear.y)
    values = (cmd.linear.x, cmd.linear.y, cmd.linear.z,
              cmd.angular.x, cmd.angular.y, cmd.angular.z)
    if not all(math.isfinite(v) for v in values):
        return out
    scale = 1.0 if speed <= limit_mps or speed == 0.0 else limit_mps / speed
    out.linear.x, out.linear.y, out.linear.z = (v * scale for v in values[:3])
    out.angular.x, out.angular.y, out.angular.z = (v * scale for v in values[3:])
    return out


class SonarGuardNode(Node):
    """Subscribe to sonar and odometry, publish the speed limit and what stands behind it."""

    def __init__(self, **kwargs: object) -> None:
        super().__init__(NODE_NAME, **kwargs)  # type: ignore[arg-type]
        self.params = ParameterBridge(self)
        self.config: Config = self.params.build()  # raises ConfigError: main() reports it
        for warning in self.config.warnings:
            self.get_logger().warning(warning)
        self.monitor = Monitor(self.config)
        self._transitions = TransitionLog()
        self._findings = FindingLog()
        self._published = math.nan
        self._levels: dict[str, int] = {}
        self._resets_seen = 0
        self._waiting_for_clock_said = False
        self._last_decision: Decision | None = None
        # sensors whose readings can move the limit now (all of them until the first decision)
        self._covering: frozenset[str] = frozenset(self.config.sensor_names)

        self.limit_pub = self.create_publisher(Float64, 'allowed_speed', LIMIT_QOS)
        self.diag_pub = self.create_publisher(DiagnosticArray, '/diagnostics', 10)
        self.marker_pub = self.create_publisher(MarkerArray, '~/markers', 1)
        self._subs = [
            self.create_subscription(Range, s.topic, partial(self._on_range, s.name),
                                     qos_profile_sensor_data)
            for s in self.config.sensors]
        self._subs.append(self.create_subscription(
            Odometry, self.config.odom_topic, self._on_odom, qos_profile_sensor_data))
        self.cmd_pub = None
        if self.config.gate_commands:
            self.cmd_pub = self.create_publisher(Twist, 'cmd_vel_limited', 10)
            self._subs.append(self.create_subscription(
                Twist, 'cmd_vel_request', self._on_cmd, 10))
        self.create_timer(1.0 / self.config.publish_rate_hz, self._on_publish_timer)
        self.create_timer(DIAGNOSTICS_PERIOD_S, self._publish_diagnostics)
        self.create_timer(MARKER_PERIOD_S, self._publish_markers)
        self.add_on_set_parameters_callback(self._on_set_parameters)
        self.get_logger().info(
            f'watching {len(self.config.sensors)} sonar(s): '
            f'{", ".join(s.name for s in self.config.sensors)}; odometry on '
            f'{self.config.odom_topic!r}; limit up to {self.config.limits.max_speed_mps:g} m/s')
        self.get_logger().info(SAFETY_CAUTION)

    # ------------------------------------------------------------------ time

    def _now(self) -> float | None:
        """Return ROS time in s, or None while a simulated clock has not started."""
        now = self.get_clock().now().nanoseconds * 1e-9
        if now == 0.0:
            if not self._waiting_for_clock_said:
                self.get_logger().warning('waiting for /clock (use_sim_time is true)')
                self._waiting_for_clock_said = True
            return None
        return now

    # ------------------------------------------------------------------ inputs

    def _on_range(self, sensor: str, msg: Range) -> None:
        now = self._now()
        if now is None:
            return
        check = self.monitor.on_range(range_to_reading(sensor, msg, now))
        line = self._transitions.note(sensor, check.verdict, check.reason, time.monotonic())
        if line and check.verdict.trusted:  # rclpy wants one severity per call site
            self.get_logger().info(line)
        elif line:
            self.get_logger().warning(line)
        if sensor in self._covering:
            # decide at once only after a reading that can move the limit (as `check` does);
            # the publish timer decides for the rest
            self._decide(now, publish_drop=True)

    def _on_odom(self, msg: Odometry) -> None:
        now = self._now()
        if now is None:
            return
        self.monitor.on_odometry(odometry_to_sample(msg, now))

    def _on_cmd(self, msg: Twist) -> None:
        now = self._now()
        if now is None or self.cmd_pub is None:
            return
        decision = self._last_decision or self._decide(now, publish_drop=True)
        heading = self.monitor.heading_of(msg.linear.x, msg.linear.y)
        limit = self.monitor.limit_for(heading, now)
        if self.monitor.covering(heading) == decision.covering:
            limit = min(limit, decision.limit_mps)  # same direction: keep the gradual rise
        self.cmd_pub.publish(gate_command(msg, limit, decision.fallback))

    # ------------------------------------------------------------------ outputs

    def _decide(self, now: float, *, publish_drop: bool) -> Decision:
        decision = self.monitor.tick(now)
        if self._last_decision is None or decision.covering != self._last_decision.covering:
            self._covering = frozenset(decision.covering)
        self._last_decision = decision
        if self.monitor.clock_resets != self._resets_seen:
            self._resets_seen = self.monitor.clock_resets
            self.get_logger().warning('ROS time jumped backwards: histories reset')
        if publish_drop and decision.limit_mps < self._published:
            self._publish_limit(decision.limit_mps)
        for event in self.monitor.pop_events():  # popped every time: memory stays flat
            line = self._findings.note(event, time.monotonic())
            if line:
                self.get_logger().warning(line)
        return decision

    def _publish_limit(self, limit: float) -> None:
        self._published = limit
        self.limit_pub.publish(Float64(data=float(limit)))

    def _on_publish_timer(self) -> None:
        now = self._now()
        if now is None:
            return
        decision = self._decide(now, publish_drop=False)
        self._publish_limit(decision.limit_mps)
        statuses = self.monitor.statuses(now)
        # levels only at 20 Hz; the message is built when one changed (or at the 1 Hz tick)
        levels = {s.name: sensor_level(s) for s in statuses}
        levels[''] = monitor_level(decision, self.config)
        if levels != self._levels:  # a level changed: say so now, not at the next 1 Hz tick
            self._levels = levels
            self.diag_pub.publish(self._diagnostics(statuses, decision, now))

    def _diagnostics(self, statuses: Sequence[SensorStatus], decision: Decision,
                     now: float) -> DiagnosticArray:
        return build_diagnostics(statuses, decision, self.config, Time(seconds=now).to_msg())

    def _publish_diagnostics(self) -> None:
        now = self._now()
        if now is None or self._last_decision is None:
            return
        self.diag_pub.publish(self._diagnostics(self.monitor.statuses(now),
                                                self._last_decision, now))

    def _publish_markers(self) -> None:
        now = self._now()
        if now is None or self._last_decision is None:
            return
        if self.marker_pub.get_subscription_count() == 0:
            return
        self.marker_pub.publish(build_markers(self.config, self.monitor.statuses(now),
                                              self._last_decision, Time(seconds=now).to_msg()))

    def _on_set_parameters(self, params: list[Parameter]):  # type: ignore[no-untyped-def]
        result, config = self.params.vet(params)
        if config is not None:
            self.monitor.reconfigure(config)
            self.config = config
            self.get_logger().info(
                'parameters changed: ' + ', '.join(f'{p.name}={p.value!r}' for p in params))
        elif not result.successful:
            self.get_logger().warning(f'parameter change rejected: {result.reason}')
        return result


def main(args: Sequence[str] | None = None) -> int:
    """Run the node until SIGINT or SIGTERM; return 0, or 2 when the parameters are unusable."""
    _init_without_signal_thread(args)
    stop = _StopRequest()
    node = None
    try:
        try:
            node = SonarGuardNode()
        except ConfigError as err:
            logger = rclpy.logging.get_logger(NODE_NAME)
            logger.error(f'cannot start: {len(err.problems)} problem(s) in the parameters')
            for problem in err.problems:
                logger.error(f'  - {problem}')
            return 2
        executor = SingleThreadedExecutor()
        executor.add_node(node)
        try:
            _spin(node, executor, stop)
        finally:
            # let go of the node's handles before they are destroyed (clean, crash-free exit)
            executor.remove_node(node)
            executor.shutdown(timeout_sec=1.0)
    except (KeyboardInterrupt, ExternalShutdownException):
        pass
    finally:
        if node is not None:
            node.destroy_node()
        rclpy.try_shutdown()
    return 0


class _StopRequest:
    """SIGINT and SIGTERM ask the spin loop to end; the main thread then shuts down in order.

    rclpy's own handlers shut the context down from a separate thread while the main thread
    may still be inside a callback or destroying entities; a node here crashed (SIGSEGV) at
    exit now and then that way. Handling the signals in Python keeps the whole shutdown on the
    main thread: the spin loop sees the request within one spin timeout.
    """

    def __init__(self) -> None:
        self.requested = False
        for sig in (signal.SIGINT, signal.SIGTERM):
            signal.signal(sig, self._request)

    def _request(self, _signum: int, _frame: object) -> None:
        if self.requested:  # asked twice: stop waiting for the loop
            raise KeyboardInterrupt
        self.requested = True


def _init_without_signal_thread(args: Sequence[str] | None) -> None:
    """rclpy.init without rclpy's signal handlers (where this rclpy can leave them out)."""
    argv = list(args) if args is not None else None
    try:
        from rclpy.signals import SignalHandlerOptions
    except ImportError:  # an rclpy without the option: its own handlers it is
        rclpy.init(args=argv)
        return
    rclpy.init(args=argv, signal_handler_options=SignalHandlerOptions.NO)


def _spin(node: SonarGuardNode, executor: SingleThreadedExecutor, stop: _StopRequest) -> None:
    """Spin until a stop request or shutdown; a message that cannot be taken is logged.

    rclpy can fail to take a message when a signal arrives in the middle of it (the pending
    interrupt breaks the conversion); the node then goes on and sees the stop next turn.
    """
    failures = 0
    while not stop.requested and rclpy.ok():
        try:
            executor.spin_once(timeout_sec=SPIN_TIMEOUT_S)
        except RuntimeError as err:
            failures += 1
            if failures <= 3 or failures % 1000 == 0:
                node.get_logger().warning(f'could not take a message ({failures}): {err}')


if __name__ == '__main__':
    sys.exit(main())
