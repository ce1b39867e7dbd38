"""Helpers for tests that talk to the node over real DDS on loopback (importable as `roskit`).

Each test run gets its own ROS_DOMAIN_ID and keeps discovery on this machine. The node runs
in a subprocess; test publishers and subscribers live in the test process. Waiting is always
on a condition with a generous timeout, never a bare sleep.
"""
from __future__ import annotations

from collections.abc import Callable, Mapping
import math
import os
from pathlib import Path
import random
import signal
import subprocess
import sys
import time
from typing import Any

import pytest

REPO = Path(__file__).resolve().parents[1]
DEFAULT_PARAMS = REPO / 'config' / 'sonar_guard.yaml'

rclpy = pytest.importorskip('rclpy', reason='rclpy is not installed (make venv brings it)')

from diagnostic_msgs.msg import DiagnosticArray
from geometry_msgs.msg import Twist
from nav_msgs.msg import Odometry
from rclpy.node import Node
from rclpy.qos import (
    DurabilityPolicy,
    HistoryPolicy,
    QoSProfile,
    ReliabilityPolicy,
    qos_profile_sensor_data,
)
from rosgraph_msgs.msg import Clock
from sensor_msgs.msg import Range
from std_msgs.msg import Float64

from sonar_guard.core.config import Config

LIMIT_QOS = QoSProfile(depth=1, history=HistoryPolicy.KEEP_LAST,
                       reliability=ReliabilityPolicy.RELIABLE,
                       durability=DurabilityPolicy.TRANSIENT_LOCAL)


def isolate_ros_environment() -> dict[str, str]:
    """Give this test run its own DDS domain on loopback; return the environment to use."""
    if 'SONAR_GUARD_TEST_DOMAIN' not in os.environ:
        os.environ['SONAR_GUARD_TEST_DOMAIN'] = str(random.Random(os.getpid()).randint(1, 100))
    os.environ['ROS_DOMAIN_ID'] = os.environ['SONAR_GUARD_TEST_DOMAIN']
    os.environ['ROS_LOCALHOST_ONLY'] = '1'  # Humble and Jazzy
    os.environ['ROS_AUTOMATIC_DISCOVERY_RANGE'] = 'LOCALHOST'  # Jazzy and newer
    # Fast DDS keeps its shared-memory transport here: with the LOCALHOST range rmw_fastrtps
    # installs its own shared-memory + UDP transports, so FASTDDS_BUILTIN_TRANSPORTS has no
    # effect (checked with /proc/self/maps). The kill tests time the node by when it sent a
    # limit (DDS source timestamp) where rclpy gives it, so a stall of the test process is not
    # counted against the node.
    os.environ.setdefault('PYTHONFAULTHANDLER', '1')  # a crashing node prints its stacks
    return dict(os.environ)


class NodeProcess:
    """The sonar_guard node in a subprocess, with its output kept for failure messages."""

    def __init__(self, params_file: Path, extra: Mapping[str, Any] | None = None,
                 log_path: Path | None = None) -> None:
        args = [sys.executable, '-m', 'sonar_guard.ros.node', '--ros-args',
                '--params-file', str(params_file)]
        for key, value in (extra or {}).items():
            text = str(value).lower() if isinstance(value, bool) else str(value)
            args += ['-p', f'{key}:={text}']
        self.log_path = log_path or Path(os.devnull)
        self._log = open(self.log_path, 'w', encoding='utf-8')
        self._result: tuple[int, float] | None = None
        self.proc = subprocess.Popen(args, stdout=self._log, stderr=subprocess.STDOUT,
                                     env=isolate_ros_environment(), cwd=REPO, text=True)

    def output(self) -> str:
        """Return what the node printed so far."""
        if not self._log.closed:
            self._log.flush()
        try:
            return self.log_path.read_text(encoding='utf-8')
        except OSError:
            return ''

    def interrupt(self, timeout_s: float = 10.0,
                  sig: signal.Signals = signal.SIGINT) -> tuple[int, float]:
        """Send SIGINT (or ``sig``); return (exit code, seconds it took to exit)."""
        if self._result is not None:
            return self._result
        start = time.monotonic()
        if self.proc.poll() is None:
            self.proc.send_signal(sig)
        try:
            code = self.proc.wait(timeout_s)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            code = self.proc.wait(5)
        self._log.close()
        self._result = (code, time.monotonic() - start)
        return self._result


class Rig:
    """Test-side publishers and subscribers, and a clock-driven feeding loop."""

    def __init__(self, node: Node, config: Config, best_effort: tuple[str, ...] = ()) -> None:
        self.node = node
        self.config = config
        sensors = {s.name: s.topic for s in config.sensors}
        self.meta = {s.name: (s.field_of_view_rad, s.min_range_m, s.max_range_m)
                     for s in config.sensors}
        # sensor drivers publish either way; the node's sensor-data QoS must take both
        self.range_pubs = {name: node.create_publisher(
            Range, topic, qos_profile_sensor_data if name in best_effort else 10)
            for name, topic in sensors.items()}
        self.odom_pub = node.create_publisher(Odometry, config.odom_topic, 10)
        self.cmd_pub = node.create_publisher(Twist, 'cmd_vel_request', 10)
        self.limits: list[tuple[float, float]] = []  # (monotonic receive time, value)
        self.diagnostics: list[DiagnosticArray] = []
        self.gated: list[Twist] = []
        self._subs = [
            node.create_subscription(Float64, 'allowed_speed', self._on_limit, LIMIT_QOS),
            node.create_subscription(DiagnosticArray, '/diagnostics', self.diagnostics.append,
                                     10),
            node.create_subscription(Twist, 'cmd_vel_limited', self.gated.append, 10),
        ]
        self.ranges: dict[str, float] = {name: math.inf for name in sensors}
        self.silent: set[str] = set()
        self.vx = 0.0
        self.odometry_silent = False
        self.sim_offset_s: float | None = None  # set: publish /clock at wall time + offset
        self.clock_pub = node.create_publisher(Clock, '/clock', 10)
        self.last_published: dict[str, float] = {}  # monotonic time of each sensor's last Range

    def unmatched(self) -> list[str]:
        """Topics of the Range and Odometry publishers no subscription has matched yet."""
        pubs = [*self.range_pubs.values(), self.odom_pub]
        return [pub.topic_name for pub in pubs if pub.get_subscription_count() == 0]

    def matched(self) -> bool:
        """Tell whether a subscription (the node's) matched every Range and Odometry publisher."""
        return not self.unmatched()

    def _on_limit(self, msg: Float64) -> None:
        self.limits.append((time.monotonic(), msg.data))

    @property
    def limit(self) -> float:
        """Latest allowed_speed received (NaN before the first)."""
        return self.limits[-1][1] if self.limits else math.nan

    def now_msg(self):
        """The stamp for outgoing messages: wall time, or simulated time when a clock runs."""
        if self.sim_offset_s is None:
            return self.node.get_clock().now().to_msg()
        t = time.time() + self.sim_offset_s
        msg = Clock().clock
        msg.sec, msg.nanosec = int(t), int((t - int(t)) * 1e9)
        return msg

    def publish_clock(self) -> None:
        """Publish /clock when simulating time."""
        if self.sim_offset_s is not None:
            self.clock_pub.publish(Clock(clock=self.now_msg()))

    def publish_readings(self) -> None:
        """Publish one Range per non-silent sensor, stamped now."""
        stamp = self.now_msg()
        for name, pub in self.range_pubs.items():
            if name in self.silent:
                continue
            msg = Range()
            msg.header.stamp = stamp
            msg.header.frame_id = self.config.sensor(name).frame_id or name
            msg.radiation_type = Range.ULTRASOUND
            fov, rmin, rmax = self.meta[name]
            msg.field_of_view, msg.min_range, msg.max_range = fov, rmin, rmax
            msg.range = float(self.ranges[name])
            pub.publish(msg)
            self.last_published[name] = time.monotonic()

    def publish_odometry(self) -> None:
        """Publish odometry with body speed vx, stamped now (unless odometry is silenced)."""
        if self.odometry_silent:
            return
        msg = Odometry()
        msg.header.stamp = self.now_msg()
        msg.header.frame_id = 'odom'
        msg.child_frame_id = 'base_link'
        msg.twist.twist.linear.x = float(self.vx)
        self.odom_pub.publish(msg)

    def run_until(self, condition: Callable[[], bool], timeout_s: float = 20.0,
                  reading_period_s: float = 0.05, odom_period_s: float = 0.02,
                  step: Callable[[float], None] | None = None) -> float:
        """Feed readings and odometry until ``condition()``; return the seconds it took.

        ``step(t)`` may change ranges, speed or silence at elapsed time t. Raises
        AssertionError on timeout.
        """
        start = time.monotonic()
        next_reading = next_odom = start
        while True:
            now = time.monotonic()
            elapsed = now - start
            if step is not None:
                step(elapsed)
            if now >= next_odom:
                self.publish_clock()
                self.publish_odometry()
                next_odom += odom_period_s
            if now >= next_reading:
                self.publish_readings()
                next_reading += reading_period_s
            rclpy.spin_once(self.node, timeout_sec=0.002)
            if condition():
                return elapsed
            if elapsed > timeout_s:
                raise AssertionError(f'condition not met within {timeout_s} s; '
                                     f'last limit {self.limit}')

    def send_command(self, vx: float, wz: float = 0.0) -> None:
        """Publish one cmd_vel_request."""
        msg = Twist()
        msg.linear.x, msg.angular.z = float(vx), float(wz)
        self.cmd_pub.publish(msg)


def start_node(test_node: Node, config: Config, log_path: Path,
               extra: Mapping[str, Any] | None = None, *,
               before_wait: Callable[[Rig], None] | None = None,
               best_effort: tuple[str, ...] = (), timeout_s: float = 30.0
               ) -> tuple[NodeProcess, Rig]:
    """Start the node with the shipped parameters and a Rig; wait for its first limit and
    until its subscriptions matched every Range and Odometry publisher of the Rig.

    ``before_wait(rig)`` runs before the wait (to start a simulated clock, say). Raises
    AssertionError with the node's output when either does not happen in ``timeout_s``.
    """
    proc = NodeProcess(DEFAULT_PARAMS, extra, log_path=log_path)
    rig = Rig(test_node, config, best_effort=best_effort)
    if before_wait is not None:
        before_wait(rig)
    try:
        # the node publishes allowed_speed at publish_rate from the start, before discovery has
        # matched its subscriptions: wait for the first limit and for every reading publisher
        # to see the node, so a slow discovery does not eat into a test's own timing
        rig.run_until(lambda: bool(rig.limits) and rig.matched(), timeout_s=timeout_s)
    except AssertionError:
        proc.interrupt()
        raise AssertionError('node never published allowed_speed or never subscribed to '
                             f'{rig.unmatched()}:\n' + proc.output()) from None
    return proc, rig
