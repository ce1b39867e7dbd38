"""Live and offline agree: one recorded stream, played to the node over DDS and checked offline.

The test plays the fault scenario of `bagkit` in real time with a simulated clock (/clock at
bag time, as `ros2 bag play --clock` does) to the node started with use_sim_time, and feeds
the same records to the offline replayer. Both must report the same findings (kind, sensor,
start within one publish period) and the same speed limit (within one publish period).
"""
from __future__ import annotations

import math
import re
import time

import pytest

pytest.importorskip('rclpy', reason='rclpy is not installed (make venv brings it)')

import bagkit
from measured import report
from nav_msgs.msg import Odometry
from rosgraph_msgs.msg import Clock
from roskit import LIMIT_QOS, NodeProcess, isolate_ros_environment, rclpy
from sensor_msgs.msg import Range
from std_msgs.msg import Float64

from sonar_guard.cli import load_config_file
from sonar_guard.offline.bags import BagSource
from sonar_guard.offline.bagwrite import write_bag
from sonar_guard.offline.replay import Replayer, wire_topics
from sonar_guard.offline.results import BagResult

pytestmark = pytest.mark.ros

PERIOD = 0.05  # the node's publish period at the default 20 Hz, s
FINDING = re.compile(r'finding: (\w+) (\w+) ([\d.]+)\.\.([\d.]+) s')
SIM_END = 16.0  # scenario seconds played (covers every fault but the last)


def offline(bag, config):
    """Replay the recording offline; return (events, [(t, limit)])."""
    decisions = []
    with BagSource(bag) as source:
        wiring, _ = wire_topics(config, source.topics)
        result = BagResult(path=str(bag), config=config, config_source='test')
        replayer = Replayer(config, wiring, result, on_decision=decisions.append)
        for topic, t, msg in source.messages(list(wiring.sensors) + [wiring.odometry]):
            replayer.feed(topic, t, msg)
        replayer.finish()
    return result.events, [(d.time_s, d.limit_mps) for d in decisions]


def play_live(records, params, log_path):
    """Play records to the node in real time with /clock; return (findings, [(t, limit)])."""
    isolate_ros_environment()
    proc = NodeProcess(params, {'use_sim_time': True}, log_path=log_path)
    context = rclpy.Context()
    rclpy.init(context=context)
    node = rclpy.create_node('sonar_guard_player', context=context)
    executor = rclpy.executors.SingleThreadedExecutor(context=context)
    executor.add_node(node)
    clock = node.create_publisher(Clock, '/clock', 10)
    pubs = {}
    sim = {'now': bagkit.T0}
    limits: list[tuple[float, float]] = []
    node.create_subscription(Float64, 'allowed_speed',
                             lambda m: limits.append((sim['now'], m.data)), LIMIT_QOS)

    def publish_clock(t):
        msg = Clock()
        msg.clock.sec, msg.clock.nanosec = int(t), int(round((t - int(t)) * 1e9))
        if msg.clock.nanosec >= 1_000_000_000:
            msg.clock.sec, msg.clock.nanosec = msg.clock.sec + 1, 0
        clock.publish(msg)

    try:
        for topic, msgtype, _, _ in records:
            if topic not in pubs:
                pubs[topic] = node.create_publisher(
                    Range if msgtype.endswith('Range') else Odometry, topic.lstrip('/'), 50)
        # wait until the node runs and hears us: it publishes allowed_speed on its timer
        deadline = time.monotonic() + 30.0
        while not limits:
            publish_clock(sim['now'])
            executor.spin_once(timeout_sec=0.01)
            assert time.monotonic() < deadline, 'node did not start:\n' + proc.output()
        limits.clear()
        start = time.monotonic()
        last_clock = 0.0
        index = 0
        while True:
            sim['now'] = bagkit.T0 + (time.monotonic() - start)
            while index < len(records) and records[index][2] <= sim['now']:
                topic, msgtype, t, msg = records[index]
                publish_clock(t)
                pubs[topic].publish(_to_rclpy(msg, msgtype))
                index += 1
            if time.monotonic() - last_clock >= 0.005:
                publish_clock(sim['now'])
                last_clock = time.monotonic()
            executor.spin_once(timeout_sec=0.001)
            if index >= len(records):
                break
        for _ in range(20):
            executor.spin_once(timeout_sec=0.01)
    finally:
        code, _ = proc.interrupt()
        node.destroy_node()
        rclpy.try_shutdown(context=context)
    assert code == 0, proc.output()
    findings = [(m.group(1), None if m.group(2) == 'robot' else m.group(2),
                 float(m.group(3)), float(m.group(4)))
                for m in FINDING.finditer(proc.output())]
    return findings, limits


def _to_rclpy(msg, msgtype):
    """Copy a rosbags message into the matching rclpy message."""
    if msgtype.endswith('Range'):
        out = Range()
        out.header.stamp.sec, out.header.stamp.nanosec = msg.header.stamp.sec, \
            msg.header.stamp.nanosec
        out.header.frame_id = msg.header.frame_id
        out.radiation_type = msg.radiation_type
        out.field_of_view, out.min_range = float(msg.field_of_view), float(msg.min_range)
        out.max_range, out.range = float(msg.max_range), float(msg.range)
        return out
    out = Odometry()
    out.header.stamp.sec, out.header.stamp.nanosec = msg.header.stamp.sec, \
        msg.header.stamp.nanosec
    out.twist.twist.linear.x = float(msg.twist.twist.linear.x)
    out.twist.twist.angular.z = float(msg.twist.twist.angular.z)
    return out


def test_live_node_and_offline_check_agree_on_findings_and_limit(tmp_path):
    """Same findings (kind, sensor, start within one period) and limit (within one period)."""
    params = bagkit.write_params(tmp_path / 'params.yaml')
    config = load_config_file(params)
    records = [r for r in bagkit.scenario() if r[2] < bagkit.T0 + SIM_END]
    bag = write_bag(tmp_path / 'stream', iter(records), storage='mcap')
    off_events, off_limits = offline(bag, config)
    live_events, live_limits = play_live(records, params, tmp_path / 'node.log')

    horizon = bagkit.T0 + SIM_END - 1.0  # findings still open at the end differ by design
    off = [(e.kind, e.sensor, e.t_start) for e in off_events if e.t_end < horizon]
    live = [(k, s, t0) for k, s, t0, t1 in live_events if t1 < horizon]
    report(f'\noffline findings {len(off)}, live findings {len(live)}')
    for kind, sensor, t0 in off:
        assert any(k == kind and s == sensor and abs(t - t0) <= PERIOD + 0.02
                   for k, s, t in live), (kind, sensor, t0 - bagkit.T0, live)
    for kind, sensor, t0 in live:
        assert any(k == kind and s == sensor and abs(t - t0) <= PERIOD + 0.02
                   for k, s, t in off), (kind, sensor, t0 - bagkit.T0, off)

    # every live limit equals an offline limit within one publish period of its time
    checked = 0
    misses = []
    for t, v in live_limits:
        if not bagkit.T0 + 0.5 < t < horizon:
            continue
        near = [lv for lt, lv in off_limits if abs(lt - t) <= PERIOD]
        if not near:
            continue
        checked += 1
        if not min(near) - 0.02 <= v <= max(near) + 0.02:
            misses.append((round(t - bagkit.T0, 3), v, min(near), max(near)))
    report(f'limit samples compared: {checked}, outside one period: {len(misses)}')
    assert checked > 100
    assert len(misses) <= max(2, checked // 100), misses[:10]
    assert not math.isnan(sum(v for _, v in live_limits))
