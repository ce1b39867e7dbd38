"""Fault injection over DDS against the running node: it must fall back in time and recover.

Each test injects one fault while the node runs in its subprocess with the shipped parameters,
asserts the expected state within a deadline, prints the time it took, and checks that the node
recovers when the fault ends:

- a sensor or the odometry publisher, running in its own process, is killed with SIGKILL (a
  crashed driver) and started again;
- a simulated clock that loops back like a replayed bag, several times;
- a flood of Range messages from several processes at once.

Publishers that get killed or flood run as ``fault_publisher.py`` subprocesses; the Rig in the
test process feeds everything else. Waits are on conditions with generous timeouts.
"""
from __future__ import annotations

import contextlib
import json
import math
import os
from pathlib import Path
import signal
import subprocess
import sys
import threading
import time

import pytest

pytest.importorskip('rclpy', reason='rclpy is not installed (make venv brings it)')

try:
    import fcntl
except ImportError:  # not POSIX: killed helpers' shared memory is left as it is
    fcntl = None

from measured import report
from nav_msgs.msg import Odometry
from rclpy.qos import HistoryPolicy, QoSProfile, ReliabilityPolicy, qos_profile_sensor_data
from rclpy.subscription import Subscription
from roskit import (
    DEFAULT_PARAMS,
    REPO,
    NodeProcess,
    Rig,
    isolate_ros_environment,
    rclpy,
    start_node,
)
from sensor_msgs.msg import Range
from std_msgs.msg import Float64

from sonar_guard.cli import load_config_file

pytestmark = pytest.mark.ros

CONFIG = load_config_file(DEFAULT_PARAMS)
LIMITS = CONFIG.limits
FALLBACK = LIMITS.fallback_speed_mps
MAX_SPEED = LIMITS.max_speed_mps
PUBLISH_PERIOD_S = 1.0 / CONFIG.publish_rate_hz
SLACK_S = 0.1  # transport and scheduling on a busy 2-core machine
FRONT = 'front_center'  # covers forward travel (vx > 0)
HELPER = Path(__file__).with_name('fault_publisher.py')
STARTUP_TIMEOUT_S = 30.0  # a fresh Python process importing rclpy on a shared machine
DISCOVERY_SKEW_S = 0.3  # the node may match a new publisher this long after it matched the node

LOOPS = 3
LOOP_S = 3.0  # the replayed clock jumps back LOOP_S every LOOP_S

FLOOD_RATE = 20_000.0  # Range messages/s over all sonar topics
FLOOD_S = 10.0
FLOOD_PROCESSES = 2  # one per core; each floods its share of the topics
# The flooders yield the CPU to the node: the test is about the node's executor under more
# messages than it can take, not about the scheduler sharing 2 busy cores (the node stays
# saturated: it takes thousands of Range/s and drops the rest).
FLOOD_NICE = 10
FLOOD_MIN_RATE = 5_000.0  # below this the machine could not load the node enough to mean much
FLOOD_PROBE_AT_S = 4.0  # odometry goes silent this far into the flood
MIN_RATE_SHARE = 0.7  # of publish_rate, in every 1 s window of the flood after the first
STEADY = 10  # limits in a row at the publish rate: the cadence is back to normal


def ms(seconds: float) -> str:
    """Seconds as whole milliseconds."""
    return f'{seconds * 1e3:.0f} ms'


class Helper:
    """A fault_publisher.py subprocess; a thread collects its stdout lines as they come."""

    def __init__(self, args: list[str], log_path: Path) -> None:
        self.log_path = log_path
        self._log = open(log_path, 'w', encoding='utf-8')
        self.lines: list[tuple[float, str]] = []  # (monotonic receive time, line)
        self.proc = subprocess.Popen([sys.executable, str(HELPER), *args], cwd=REPO,
                                     env=isolate_ros_environment(), text=True,
                                     stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                     stderr=self._log)
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    def _read(self) -> None:
        assert self.proc.stdout is not None
        for line in self.proc.stdout:
            self.lines.append((time.monotonic(), line.strip()))

    def said(self, text: str) -> bool:
        """True once the helper printed a line starting with ``text``."""
        return any(line.startswith(text) for _, line in self.lines)

    def say(self, text: str) -> None:
        """Write one line to the helper's stdin."""
        assert self.proc.stdin is not None
        self.proc.stdin.write(text + '\n')
        self.proc.stdin.flush()

    def kill(self) -> None:
        """SIGKILL: no cleanup, no goodbye on the graph, as a crashing driver."""
        self.proc.kill()
        self.proc.wait(10)
        self._remove_segments()

    def _remove_segments(self) -> None:
        """Remove the shared-memory segments the helper reported, once it is dead: a SIGKILL
        leaves them in /dev/shm. Only a segment whose lock nobody holds is removed."""
        if fcntl is None:
            return
        for _, line in self.lines:
            if not line.startswith('segments'):
                continue
            for path in line.split()[1:]:
                try:
                    fd = os.open(path + '_el', os.O_RDONLY)
                except OSError:
                    continue  # gone already: it exited cleanly
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)  # Fast DDS's own liveness
                    for name in (path, path + '_el'):
                        with contextlib.suppress(FileNotFoundError):
                            os.unlink(name)
                except OSError:
                    pass  # still held: not ours to remove
                finally:
                    os.close(fd)

    def stop(self) -> None:
        """End the helper if it still runs (SIGINT, SIGKILL if that fails); close its files."""
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGINT)
            try:
                self.proc.wait(5)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(10)
        self._remove_segments()
        self._reader.join(5)
        for stream in (self.proc.stdin, self.proc.stdout):
            if stream is not None:
                try:
                    stream.close()
                except OSError:
                    pass
        self._log.close()

    def output(self) -> str:
        """What the helper printed to stderr and stdout, for failure messages."""
        self._log.flush()
        err = self.log_path.read_text(encoding='utf-8')
        return err + '\n'.join(line for _, line in self.lines)


class Heard:
    """The test's own subscription to a topic the node reads: when each message arrived."""

    def __init__(self, node, msg_type, topic: str) -> None:
        self.node = node
        self.times: list[tuple[float, float]] = []  # (monotonic arrival, stamp as monotonic)
        self._sub = node.create_subscription(msg_type, topic, self._on_msg,
                                             qos_profile_sensor_data)

    def _on_msg(self, msg) -> None:
        now_mono, now_wall = time.monotonic(), time.time()
        stamp = msg.header.stamp.sec + msg.header.stamp.nanosec * 1e-9
        self.times.append((now_mono, stamp - now_wall + now_mono))

    def close(self) -> None:
        """Stop listening."""
        self.node.destroy_subscription(self._sub)


class LimitCounter:
    """Every allowed_speed the test receives, with its monotonic arrival time.

    The queue is reliable and deep: none are overwritten while the test process is busy. Where
    rclpy passes the message info (Iron and newer) it also keeps when the node sent each
    one, so the node's cadence is counted, not the test process's own scheduling under load.
    """

    def __init__(self, node) -> None:
        self.received: list[tuple[float, float]] = []
        self.sent: list[float] = []  # monotonic, from the writer's source timestamp
        qos = QoSProfile(depth=200, history=HistoryPolicy.KEEP_LAST,
                         reliability=ReliabilityPolicy.RELIABLE)
        with_info = hasattr(Subscription, 'CallbackType')
        self._node = node
        self._sub = node.create_subscription(
            Float64, 'allowed_speed', self._on_limit_info if with_info else self._on_limit, qos)

    def _on_limit(self, msg: Float64) -> None:
        self.received.append((time.monotonic(), msg.data))

    def _on_limit_info(self, msg: Float64, info) -> None:
        self._on_limit(msg)
        self.sent.append(info['source_timestamp'] * 1e-9 - time.time() + time.monotonic())

    def per_second(self, start: float, seconds: int, by_sent: bool) -> list[int]:
        """Limits per 1 s window from ``start``, by send or by arrival time."""
        times = self.sent if by_sent else [t for t, _ in self.received]
        return [sum(1 for t in times if start + k <= t < start + k + 1)
                for k in range(seconds)]

    def first_sent(self, after: float, test) -> tuple[float, float] | None:
        """The first (send time, value) sent after ``after`` that passes ``test(value)``, or
        None (also where rclpy gives no message info)."""
        return next(((t, v) for t, (_, v) in zip(self.sent, self.received)
                     if t > after and test(v)), None)

    def close(self) -> None:
        """Stop listening."""
        self._node.destroy_subscription(self._sub)

    def first(self, after: float, test) -> tuple[float, float] | None:
        """The first (time, value) that arrived after ``after`` and passes ``test(value)``."""
        return next(((t, v) for t, v in self.received if t > after and test(v)), None)


def first_limit(rig: Rig, after: float, test) -> tuple[float, float] | None:
    """The first (time, value) of the rig's limits that arrived after ``after`` and passes."""
    return next(((t, v) for t, v in rig.limits if t > after and test(v)), None)


def readings_taken(rig: Rig, before: float | None = None) -> tuple[float, int]:
    """(node time, Range messages taken over all sensors) from the node's latest diagnostics
    (the count_<verdict> values), or from the latest one stamped before ``before``."""
    for array in reversed(rig.diagnostics):
        stamp = array.header.stamp.sec + array.header.stamp.nanosec * 1e-9
        if before is not None and stamp >= before:
            continue
        total = sum(int(kv.value) for status in array.status for kv in status.values
                    if kv.key.startswith('count_'))
        return stamp, total
    raise AssertionError('no diagnostics from the node')


def sensor_json(names) -> str:
    """The fault_publisher.py description of the named sensors."""
    return json.dumps([{'topic': s.topic, 'frame_id': s.frame_id or s.name,
                        'fov': s.field_of_view_rad, 'min': s.min_range_m,
                        'max': s.max_range_m} for s in (CONFIG.sensor(n) for n in names)])


@pytest.fixture(scope='module')
def ros_context():
    """One rclpy context for the test side of this module."""
    isolate_ros_environment()
    rclpy.init()
    yield
    rclpy.try_shutdown()


@pytest.fixture
def test_node(ros_context):
    """A fresh test-side node per test: no subscription outlives its test."""
    node = rclpy.create_node('sonar_guard_fault_rig')
    yield node
    node.destroy_node()


@pytest.fixture
def helpers(tmp_path):
    """Start fault_publisher.py subprocesses; every one still running is killed after the test."""
    started: list[Helper] = []

    def start(*args: str) -> Helper:
        helper = Helper(list(args), tmp_path / f'helper{len(started)}.log')
        started.append(helper)
        return helper

    yield start
    for helper in started:
        helper.stop()


@pytest.fixture
def started(test_node, tmp_path):
    """Start the node with the shipped parameters; it must exit 0 on SIGINT after the test."""
    procs: list[NodeProcess] = []

    def start(_before_wait=None, **extra):
        proc, rig = start_node(test_node, CONFIG, tmp_path / f'node{len(procs)}.log', extra,
                               before_wait=_before_wait, timeout_s=STARTUP_TIMEOUT_S)
        procs.append(proc)
        return proc, rig

    yield start
    for proc in procs:
        code, _ = proc.interrupt()
        assert code == 0, proc.output()


def _sent_and_arrived(rig: Rig, counter: LimitCounter, after: float,
                      test) -> tuple[float, float]:
    """(when the node sent it, when the test got it) of the first limit after ``after`` that
    passes ``test``; the send time is the arrival time where rclpy gives no message info."""
    found = first_limit(rig, after, test)
    assert found is not None
    sent = counter.first_sent(after, test)
    return (sent[0] if sent is not None else found[0]), found[0]


def _late_arrival(sent: float, arrived: float, what: str) -> str:
    """A note for the report when a limit reached the test well after the node sent it."""
    lag = arrived - sent
    return f'; the {what} reached the test {ms(lag)} after it was sent' if lag > 0.05 else ''


def _kill_and_restart(rig: Rig, proc: NodeProcess, heard: Heard, start_helper, what: str,
                      stale_after_s: float) -> None:
    """Start a helper feeding ``heard``'s topic, kill it, time the fallback; restart it.

    Fallback deadline: the staleness threshold, one publish period (the timer decides at least
    that often) and the slack, counted from the stamp of the last message the test heard from
    the killed helper. Limits are timed by when the node sent them where rclpy says so (DDS
    source timestamp): a stall of the test process itself (seen once, ~1 s, right after a
    SIGKILL) then does not count against the node; where they arrived later, the report says.
    """
    victim = start_helper()
    try:
        rig.run_until(lambda: heard.times and rig.limit > 0.5, timeout_s=STARTUP_TIMEOUT_S)
    except AssertionError:
        raise AssertionError(f'no limit above 0.5 m/s with {what} fed from a subprocess\n'
                             f'helper: {victim.output()}\nnode: {proc.output()}') from None
    counter = LimitCounter(rig.node)
    killed_at = time.monotonic()
    victim.kill()
    rig.run_until(lambda: first_limit(rig, killed_at, lambda v: v == FALLBACK) is not None,
                  timeout_s=10.0)
    fell_at, fell_arrived = _sent_and_arrived(rig, counter, killed_at, lambda v: v == FALLBACK)
    after_last = fell_at - heard.times[-1][1]
    heard.close()  # from here on the node is the topic's only subscriber
    deadline = stale_after_s + PUBLISH_PERIOD_S + SLACK_S

    restarted_at = time.monotonic()
    fresh = start_helper()
    rig.run_until(lambda: first_limit(rig, restarted_at, lambda v: v > FALLBACK) is not None,
                  timeout_s=STARTUP_TIMEOUT_S)
    rose_at, rose_arrived = _sent_and_arrived(rig, counter, restarted_at, lambda v: v > FALLBACK)
    counter.close()
    # the restarted publisher has matched the node's subscription: its messages reach the node
    # from then on; before, they go nowhere (best effort)
    rig.run_until(lambda: fresh.said('matched 1'), timeout_s=10.0)
    matched_at = next(float(line.split()[2]) for _, line in fresh.lines
                      if line.startswith('matched 1'))
    climbed = rig.run_until(lambda: rig.limit > 0.3, timeout_s=10.0)
    report(f'\nfault: {what} publisher SIGKILLed -> fallback after {ms(after_last)} from its last '
          f'message, {ms(fell_at - killed_at)} from the kill (deadline {ms(deadline)}); '
          f'recovered {ms(rose_at - restarted_at)} after restart ({ms(rose_at - matched_at)} '
          f'after it matched the node, deadline '
          f'{ms(PUBLISH_PERIOD_S + SLACK_S + DISCOVERY_SKEW_S)}), above 0.3 m/s '
          f'{ms(rose_at - restarted_at + climbed)} after restart'
          + _late_arrival(fell_at, fell_arrived, 'fallback')
          + _late_arrival(rose_at, rose_arrived, 'recovery'))
    # never before the threshold (that would be a fallback for some other reason), never late
    assert stale_after_s - 0.03 <= after_last <= deadline, proc.output()
    # back once its messages get through: the next publish period, plus the node's own side
    # of the matching, which may come a little after the publisher's
    assert rose_at - matched_at <= PUBLISH_PERIOD_S + SLACK_S + DISCOVERY_SKEW_S


def test_killed_sensor_publisher_falls_back_and_recovers_on_restart(started, helpers,
                                                                    test_node):
    """SIGKILL the process publishing front_center (the others keep coming from the rig):
    fallback within stale_after + a publish period + slack; restarted, the limit rises."""
    proc, rig = started()
    rig.vx = 0.05
    rig.silent.add(FRONT)  # front_center comes only from the helper process
    heard = Heard(test_node, Range, CONFIG.sensor(FRONT).topic)
    _kill_and_restart(rig, proc, heard, lambda: helpers('range', sensor_json([FRONT])),
                      FRONT, LIMITS.stale_after_s)


def test_killed_odometry_publisher_falls_back_and_recovers_on_restart(started, helpers,
                                                                      test_node):
    """SIGKILL the process publishing odometry: fallback within odom_stale_after + a publish
    period + slack; restarted, the limit rises."""
    proc, rig = started()
    rig.vx = 0.05
    rig.odometry_silent = True  # odometry comes only from the helper process
    heard = Heard(test_node, Odometry, CONFIG.odom_topic)
    _kill_and_restart(rig, proc, heard,
                      lambda: helpers('odom', CONFIG.odom_topic, '--vx', '0.05'),
                      'odometry', LIMITS.odom_stale_after_s)


def test_looping_sim_clock_resets_every_loop_and_keeps_sane_limits(started):
    """use_sim_time with /clock jumping back LOOP_S every LOOP_S, LOOPS times (a bag replayed
    in a loop): every loop resets the node once, and its limits stay within [0, max_speed]."""
    proc, rig = started(use_sim_time=True,
                        _before_wait=lambda r: setattr(r, 'sim_offset_s', -1000.0))
    rig.vx = 0.05
    rig.run_until(lambda: rig.limit > 0.5, timeout_s=30.0)
    begin = len(rig.limits)
    loops: list[dict[str, float]] = []  # per loop: when the clock jumped, when the log said so

    def replay(t: float) -> None:
        if len(loops) < LOOPS and t >= LOOP_S * (len(loops) + 1):
            rig.sim_offset_s -= LOOP_S  # the bag starts over
            loops.append({'jumped': time.monotonic()})
        if loops and 'logged' not in loops[-1]:
            if proc.output().count('jumped backwards') >= len(loops):
                loops[-1]['logged'] = time.monotonic()

    def done() -> bool:
        return (len(loops) == LOOPS and 'logged' in loops[-1]
                and first_limit(rig, loops[-1]['jumped'], lambda v: v == FALLBACK) is not None
                and rig.limit > 0.5)

    rig.run_until(done, timeout_s=LOOPS * LOOP_S + 30.0, step=replay)
    out = proc.output()
    assert out.count('jumped backwards') == LOOPS, out  # one reset per loop, not more

    values = [v for _, v in rig.limits[begin:]]
    assert all(math.isfinite(v) and 0.0 <= v <= MAX_SPEED for v in values), values
    lines = []
    for k, loop in enumerate(loops):
        jumped = loop['jumped']
        end = loops[k + 1]['jumped'] if k + 1 < LOOPS else math.inf
        fresh = first_limit(rig, jumped, lambda v: v == FALLBACK)  # the reset's first limit
        assert fresh is not None and fresh[0] < end, f'loop {k + 1}: no reset to fallback'
        rise = first_limit(rig, fresh[0], lambda v: v > FALLBACK)
        high = first_limit(rig, fresh[0], lambda v: v > 0.5)
        assert rise is not None and high is not None and high[0] < end, \
            f'loop {k + 1}: the limit did not climb back above 0.5 m/s within the loop'
        count = sum(1 for t, _ in rig.limits if jumped <= t < min(end, jumped + LOOP_S))
        lines.append(f'loop {k + 1}: clock back {LOOP_S:g} s -> first fresh limit (the reset '
                     f'to fallback) after {ms(fresh[0] - jumped)} (deadline '
                     f'{ms(2 * PUBLISH_PERIOD_S + SLACK_S)}), log line seen within '
                     f'{ms(loop["logged"] - jumped)}; rising after {ms(rise[0] - jumped)}, '
                     f'above 0.5 m/s after {ms(high[0] - jumped)}; {count} limits in the loop')
        assert fresh[0] - jumped <= 2 * PUBLISH_PERIOD_S + SLACK_S
        assert rise[0] - fresh[0] <= 2 * PUBLISH_PERIOD_S + SLACK_S
        if k + 1 < LOOPS:  # whole loops only: the timer runs on the looping clock
            assert count >= MIN_RATE_SHARE * CONFIG.publish_rate_hz * LOOP_S
    report(f'\nfault: sim clock looping every {LOOP_S:g} s, {LOOPS} times; limits within '
          f'[{min(values):.3f}, {max(values):.3f}] m/s\n' + '\n'.join(lines))


def test_range_flood_keeps_the_publish_rate_and_the_node_reacting(started, helpers,
                                                                  test_node):
    """FLOOD_RATE Range messages/s for FLOOD_S from FLOOD_PROCESSES processes: allowed_speed
    keeps >= 70 % of publish_rate in every 1 s window after the first, odometry silenced mid
    flood still gives fallback in time, and after the flood the node is normal and exits 0."""
    proc, rig = started()
    counter = LimitCounter(test_node)
    rig.vx = 0.05
    rig.run_until(lambda: rig.limit > 0.5, timeout_s=30.0)
    names = CONFIG.sensor_names
    floods = [helpers('flood', sensor_json(names[i::FLOOD_PROCESSES]),
                      '--rate', str(FLOOD_RATE / FLOOD_PROCESSES), '--duration', str(FLOOD_S),
                      '--nice', str(FLOOD_NICE))
              for i in range(FLOOD_PROCESSES)]
    rig.run_until(lambda: all(f.said('ready') or f.proc.poll() is not None for f in floods),
                  timeout_s=60.0)
    for f in floods:
        assert f.said('ready'), f.output()
    for f in floods:
        f.say('go')
    go = time.monotonic()
    go_wall = time.time()

    probe: dict[str, float] = {}

    def odometry_probe(t: float) -> None:
        now = time.monotonic()
        if 'silenced' not in probe and now - go >= FLOOD_PROBE_AT_S:
            rig.odometry_silent = True
            probe['silenced'] = now
        elif 'silenced' in probe and 'fallback' not in probe:
            hit = counter.first(probe['silenced'], lambda v: v == FALLBACK)
            if hit is not None:
                probe['fallback'] = hit[0]
                rig.odometry_silent = False
                probe['resumed'] = now
        elif 'resumed' in probe and 'rose' not in probe:
            hit = counter.first(probe['resumed'], lambda v: v > FALLBACK)
            if hit is not None:
                probe['rose'] = hit[0]

    rig.run_until(lambda: all(f.proc.poll() is not None for f in floods) and 'rose' in probe,
                  timeout_s=FLOOD_S + 60.0, step=odometry_probe)
    reports = []
    for f in floods:
        last = f.lines[-1][1] if f.lines else ''
        assert last.startswith('{'), f.output()
        reports.append(json.loads(last))
    end = go + max(r['seconds'] for r in reports)
    achieved = sum(r['sent'] for r in reports) / (end - go)
    # what the node took: its reading counts from the diagnostics before and after the flood
    # (1 Hz; the depth-5 sensor-data queues drop whatever it cannot take)
    end_wall = go_wall + (end - go)
    rig.run_until(lambda: readings_taken(rig)[0] > end_wall, timeout_s=10.0)
    t0, n0 = readings_taken(rig, before=go_wall)
    t1, n1 = readings_taken(rig)
    taken = (n1 - n0) / (t1 - t0)
    assert proc.proc.poll() is None, 'the node died under the flood:\n' + proc.output()

    # normal after the flood: clear path and fresh odometry give max_speed, and the last
    # STEADY limits came at the publish rate (no gap over 1.5 periods)
    def settled() -> float | None:
        got = counter.received
        first = next((i for i, (t, _) in enumerate(got) if t > end), len(got))
        for i in range(max(STEADY, first), len(got)):
            recent = got[i - STEADY:i + 1]
            if (got[i][1] == pytest.approx(MAX_SPEED, abs=1e-9)
                    and all(b[0] - a[0] <= 1.5 * PUBLISH_PERIOD_S
                            for a, b in zip(recent, recent[1:]))):
                return got[i][0] - end
        return None

    rig.run_until(lambda: settled() is not None, timeout_s=20.0)
    normal_after = settled()
    # and it reacts as before: a silent sensor gives fallback within its deadline
    rig.silent.add(FRONT)
    silenced = time.monotonic()
    rig.run_until(lambda: counter.first(silenced, lambda v: v == FALLBACK) is not None,
                  timeout_s=10.0)
    after_flood = counter.first(silenced, lambda v: v == FALLBACK)[0] - rig.last_published[FRONT]
    code, took = proc.interrupt()

    arrived = counter.per_second(go, int(end - go), by_sent=False)
    # the node's cadence: by send time where rclpy tells it, else by arrival
    windows = counter.per_second(go, int(end - go), by_sent=True) if counter.sent else arrived
    by = 'by send time' if counter.sent else 'by arrival'
    odom_deadline = LIMITS.odom_stale_after_s + PUBLISH_PERIOD_S + SLACK_S
    sensor_deadline = LIMITS.stale_after_s + PUBLISH_PERIOD_S + SLACK_S
    report(f'\nfault: Range flood {achieved:.0f} msg/s for {end - go:.1f} s '
          f'({FLOOD_PROCESSES} processes at nice {FLOOD_NICE}, target {FLOOD_RATE:.0f} msg/s), '
          f'the node took {taken:.0f} Range/s over {t1 - t0:.1f} s around it; allowed_speed '
          f'per 1 s window {windows} {by}, {arrived} by arrival (publish_rate '
          f'{CONFIG.publish_rate_hz:g} Hz)\n'
          f'odometry silenced {FLOOD_PROBE_AT_S:g} s into the flood -> fallback after '
          f'{ms(probe["fallback"] - probe["silenced"])} (deadline {ms(odom_deadline)}); '
          f'recovered {ms(probe["rose"] - probe["resumed"])} after odometry resumed\n'
          f'after the flood: normal (max speed, steady cadence) {ms(normal_after)} after its '
          f'end; {FRONT} silenced -> fallback after {ms(after_flood)} '
          f'(deadline {ms(sensor_deadline)}); SIGINT exit {code} after {ms(took)}')
    assert achieved >= FLOOD_MIN_RATE, f'the machine only produced {achieved:.0f} msg/s'
    # the flood reached the node: well beyond the rig's own 20 Hz per sensor
    assert taken >= 5 * CONFIG.publish_rate_hz * len(names), taken
    assert all(n >= MIN_RATE_SHARE * CONFIG.publish_rate_hz for n in windows[1:]), windows
    assert probe['fallback'] - probe['silenced'] <= odom_deadline
    assert probe['rose'] - probe['resumed'] <= PUBLISH_PERIOD_S + SLACK_S
    assert after_flood <= sensor_deadline
    assert code == 0, proc.output()
    assert 'Traceback' not in proc.output()
