"""A publisher in its own process, for the fault injection tests (test_node_faults.py).

The tests kill it (SIGKILL) to take a sensor or odometry off the graph the way a crashed driver
does, or run several of it at once to flood the sonar topics. Run as a script:

    python fault_publisher.py range SENSORS_JSON [--rate HZ]
    python fault_publisher.py odom TOPIC [--vx M_PER_S] [--rate HZ]
    python fault_publisher.py flood SENSORS_JSON --rate MSG_PER_S --duration S [--nice N]

SENSORS_JSON is a list of {"topic", "frame_id", "fov", "min", "max"}; every Range says "no
echo" (+inf, REP 117), stamped now. ``range`` and ``odom`` publish until killed and say
``matched N T`` when N subscriptions have matched (T: time.monotonic()). ``flood`` prints
``ready`` once the node has subscribed to every topic, waits for a line on stdin, then
publishes at the given rate for the given time (on a monotonic schedule, in batches) and prints
one JSON line: messages sent, seconds it took, the rate achieved.

First of all it prints ``segments PATH...``: its own DDS shared-memory segments, which a
SIGKILL leaves behind in /dev/shm; the test removes them after killing it.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time

from nav_msgs.msg import Odometry
import rclpy
from rclpy.qos import qos_profile_sensor_data
from sensor_msgs.msg import Range

BATCH_PERIOD_S = 0.005  # a flood publishes what is due in batches this far apart
MAX_BATCH = 200  # messages published before the schedule is looked at again
MATCH_TIMEOUT_S = 30.0


def _stamp(msg, ns: int) -> None:
    msg.header.stamp.sec, msg.header.stamp.nanosec = divmod(ns, 1_000_000_000)


def _range_messages(sensors: list[dict]) -> list[Range]:
    msgs = []
    for s in sensors:
        msg = Range()
        msg.header.frame_id = s['frame_id']
        msg.radiation_type = Range.ULTRASOUND
        msg.field_of_view, msg.min_range, msg.max_range = s['fov'], s['min'], s['max']
        msg.range = math.inf
        msgs.append(msg)
    return msgs


def _paced(rate_hz: float, pubs: list):
    """Yield once every 1/rate_hz s on a monotonic schedule until SIGINT shuts rclpy down.

    Says ``matched N T`` whenever the number of matched subscriptions (fewest over the
    publishers) changes to N; T is time.monotonic(), which all processes share on Linux.
    """
    period = 1.0 / rate_hz
    due = time.monotonic()
    matched = 0
    while rclpy.ok():
        count = min(p.get_subscription_count() for p in pubs)
        if count != matched:
            matched = count
            print(f'matched {count} {time.monotonic():.6f}', flush=True)
        yield
        due += period
        time.sleep(max(0.0, due - time.monotonic()))


def publish_ranges(node, sensors: list[dict], rate_hz: float) -> None:
    """Publish one Range per sensor at rate_hz until killed or interrupted."""
    pubs = [node.create_publisher(Range, s['topic'], qos_profile_sensor_data) for s in sensors]
    msgs = _range_messages(sensors)
    print('publishing', flush=True)
    for _ in _paced(rate_hz, pubs):
        ns = time.time_ns()
        for pub, msg in zip(pubs, msgs):
            _stamp(msg, ns)
            pub.publish(msg)


def publish_odometry(node, topic: str, vx: float, rate_hz: float) -> None:
    """Publish odometry with body speed vx at rate_hz until killed or interrupted."""
    pub = node.create_publisher(Odometry, topic, qos_profile_sensor_data)
    msg = Odometry()
    msg.header.frame_id, msg.child_frame_id = 'odom', 'base_link'
    msg.twist.twist.linear.x = vx
    print('publishing', flush=True)
    for _ in _paced(rate_hz, [pub]):
        _stamp(msg, time.time_ns())
        pub.publish(msg)


def flood(node, sensors: list[dict], rate: float, duration_s: float) -> None:
    """Wait for the subscribers and a go line on stdin, then publish rate messages/s."""
    pubs = [node.create_publisher(Range, s['topic'], qos_profile_sensor_data) for s in sensors]
    msgs = _range_messages(sensors)
    deadline = time.monotonic() + MATCH_TIMEOUT_S
    while any(p.get_subscription_count() == 0 for p in pubs):
        if time.monotonic() > deadline:
            print('no subscriber', flush=True)
            return
        time.sleep(0.01)
    print('ready', flush=True)
    sys.stdin.readline()
    last_ns = [0] * len(pubs)  # each topic's stamps strictly increase
    sent = 0
    start = time.monotonic()
    while rclpy.ok():
        elapsed = time.monotonic() - start
        if elapsed >= duration_s:
            break
        due = int(rate * elapsed)
        if sent >= due:  # on schedule: the next batch when it is due
            time.sleep(BATCH_PERIOD_S)
            continue
        for _ in range(min(due - sent, MAX_BATCH)):
            i = sent % len(pubs)
            ns = max(time.time_ns(), last_ns[i] + 1)
            last_ns[i] = ns
            _stamp(msgs[i], ns)
            pubs[i].publish(msgs[i])
            sent += 1
    took = time.monotonic() - start
    print(json.dumps({'sent': sent, 'seconds': took, 'rate': sent / took}), flush=True)


def own_shm_segments() -> list[str]:
    """This process's own Fast DDS shared-memory segments (not the shared port files)."""
    try:
        with open('/proc/self/maps', encoding='utf-8') as maps:
            paths = {line.split()[-1] for line in maps if '/dev/shm/fastdds_' in line}
    except OSError:  # not Linux: nothing to report
        return []
    return sorted(p for p in paths if not p.startswith('/dev/shm/fastdds_port'))


def main(argv: list[str] | None = None) -> int:
    """Parse the command line and publish."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = parser.add_subparsers(dest='mode', required=True)
    one = sub.add_parser('range')
    one.add_argument('sensors')
    one.add_argument('--rate', type=float, default=20.0)
    odom = sub.add_parser('odom')
    odom.add_argument('topic')
    odom.add_argument('--vx', type=float, default=0.05)
    odom.add_argument('--rate', type=float, default=50.0)
    many = sub.add_parser('flood')
    many.add_argument('sensors')
    many.add_argument('--rate', type=float, required=True)
    many.add_argument('--duration', type=float, required=True)
    many.add_argument('--nice', type=int, default=0, help='lower its CPU priority by N')
    args = parser.parse_args(argv)
    if getattr(args, 'nice', 0):
        os.nice(args.nice)
    rclpy.init()
    node = rclpy.create_node(f'fault_publisher_{args.mode}')
    print('segments', *own_shm_segments(), flush=True)
    try:
        if args.mode == 'range':
            publish_ranges(node, json.loads(args.sensors), args.rate)
        elif args.mode == 'odom':
            publish_odometry(node, args.topic, args.vx, args.rate)
        else:
            flood(node, json.loads(args.sensors), args.rate, args.duration)
    except KeyboardInterrupt:
        pass
    except Exception:
        if rclpy.ok():  # a real error, not SIGINT's shutdown racing a publish
            raise
    finally:
        node.destroy_node()
        rclpy.try_shutdown()
    return 0


if __name__ == '__main__':
    sys.exit(main())
