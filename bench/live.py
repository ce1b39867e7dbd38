"""Live-node latency and load over real DDS on loopback, as same-run differences and ratios.

``python bench/live.py [--seconds 60]`` runs it alone; ``bench/run.py`` may call
:func:`run_live`. Every process runs on one random ROS_DOMAIN_ID kept on this machine:

* the node (``python -m sonar_guard.ros.node``) with the ring of ``run.bench_params()`` and a
  fast limit rise (``limits.rise_rate``), so a probe can follow the previous one within ~50 ms;
* a loader: Range on every sensor topic except the probe sensor's, plus odometry at 50 Hz
  (vx = 0, so the limit is not in fallback), paced on a monotonic schedule in batches;
* a sink (Range in, one DDS hop) and a relay (Range in, Float64 out with the node's
  allowed_speed QoS: two hops, like the node) as references;
* this process: the probe sensor's readings at 50 Hz and the probes, receiving
  allowed_speed, the relay's output and /diagnostics.

Latency is one-way, from just before ``publish()`` to the receiving callback, on
CLOCK_MONOTONIC, which every process on the machine shares (no clock sync): direct =
here -> sink; relay = here -> relay -> here; node = an obstacle reading on the forward-facing
probe sensor -> the lowered allowed_speed here (the node publishes a drop at once). Probes are
sequential, a random 5-25 ms apart, and a probe starts only when the limit is back up.

Phases: (1) 16 sensors x 50 Hz, direct / relay / node probes interleaved; (2) 5,000 Range/s
for ``seconds``: node probes, each followed by a relay probe (a reference for the machine's own
jitter), in the first and last 10 s (a third each when shorter); the middle is left without
probes to count the timer-driven allowed_speed rate. Node RSS and CPU come from /proc over
the load; the readings the node took, from the counters in its /diagnostics. Range is
best effort (sensor-data QoS, depth 5 per topic), so a node that cannot keep up drops
readings rather than building a backlog: watch 'took' as well as the probe latency.
"""
from __future__ import annotations

import argparse
from collections.abc import Callable, Sequence
import json
import math
import os
from pathlib import Path
import random
import select
import signal
import subprocess
import sys
import tempfile
import time
from typing import Any

HERE = Path(__file__).resolve().parent
REPO = HERE.parent
for _path in (str(REPO), str(HERE)):
    if _path not in sys.path:
        sys.path.insert(0, _path)

from diagnostic_msgs.msg import DiagnosticArray  # noqa: E402
from nav_msgs.msg import Odometry  # noqa: E402
import numpy as np  # noqa: E402
import rclpy  # noqa: E402
from rclpy.executors import SingleThreadedExecutor  # noqa: E402
from rclpy.qos import qos_profile_sensor_data  # noqa: E402
from rclpy.signals import SignalHandlerOptions  # noqa: E402
from sensor_msgs.msg import Range  # noqa: E402
from std_msgs.msg import Float64  # noqa: E402

from sonar_guard.core.config import Config, SensorConfig, build_config  # noqa: E402
from sonar_guard.core.monitor import Monitor, OdometrySample  # noqa: E402
from sonar_guard.core.readings import RangeReading  # noqa: E402
from sonar_guard.ros.node import LIMIT_QOS  # noqa: E402

__all__ = ['LiveBenchError', 'describe', 'main', 'run_live']

SENSOR_RATE_HZ = 50.0  # phase 1, every sensor; the probe sensor in both phases
ODOM_RATE_HZ = 50.0
LOAD_RATE = 5000.0  # Range msg/s into the node in phase 2, all topics together
CLEAR_M = 3.0  # range of every sensor when nothing is near
OBSTACLE_M = 0.3  # the probe: an obstacle in front of the forward-facing sensor
LIVE_OVERRIDES = {
    'limits.rise_rate': 100.0,  # m/s^2: back to max_speed within ~10 ms of a clear reading
    'sonar.jump_speed': 1000.0,  # m/s: a 2.7 m step 5 ms after the last reading is no jump
}
PROBE_GAP_S = 0.005  # least time between two readings of the probe sensor
LATENCY_PROBES = 400  # per path in phase 1, unless LATENCY_MAX_S runs out first
LATENCY_MAX_S = 30.0
WINDOW_S = 10.0  # load phase: probe windows at the start and at the end
WARMUP_S = 2.0  # load phase: after the loader has matched, before measuring
START_TIMEOUT_S = 30.0
PROBE_TIMEOUT_S = 1.0
LIMIT_TOPIC = 'allowed_speed'
DIRECT_TOPIC = 'sonar_guard_bench/direct'
RELAY_IN = 'sonar_guard_bench/relay_in'
RELAY_OUT = 'sonar_guard_bench/relay_out'
NS = 1_000_000_000


class LiveBenchError(RuntimeError):
    """The live benchmark could not run: a process did not start or stopped answering."""


# ------------------------------------------------------------------ helper processes


def _ros_environment() -> dict[str, str]:
    """Return an environment with its own DDS domain, discovery kept on this machine."""
    env = dict(os.environ)
    domain = os.environ.get('SONAR_GUARD_BENCH_DOMAIN')
    # 101..200: away from the tests' 1..100, so a test run on the same machine does not mix in
    env['ROS_DOMAIN_ID'] = domain or str(random.SystemRandom().randint(101, 200))
    env['ROS_LOCALHOST_ONLY'] = '1'  # Humble and Jazzy
    env['ROS_AUTOMATIC_DISCOVERY_RANGE'] = 'LOCALHOST'  # Jazzy and newer
    env['PYTHONUNBUFFERED'] = '1'
    return env


def _init_helper() -> tuple[Any, SingleThreadedExecutor, Callable[[], bool]]:
    """Start rclpy in a helper; return (node, executor, stopped).

    ``stopped()`` turns true on SIGINT or SIGTERM, or when the parent is gone (so a helper
    never outlives a benchmark that died).
    """
    parent = os.getppid()
    stop: list[bool] = []
    signal.signal(signal.SIGINT, lambda *_: stop.append(True))
    signal.signal(signal.SIGTERM, lambda *_: stop.append(True))
    rclpy.init(signal_handler_options=SignalHandlerOptions.NO)
    node = rclpy.create_node(f'sonar_guard_bench_{os.getpid()}')
    executor = SingleThreadedExecutor()
    executor.add_node(node)
    return node, executor, lambda: bool(stop) or os.getppid() != parent


def _stamp(msg: Any, ns: int) -> None:
    msg.sec, msg.nanosec = ns // NS, ns % NS


def _meta(sensor: SensorConfig) -> dict[str, Any]:
    """Return what a Range message of this sensor carries besides range and stamp."""
    return {'topic': sensor.topic, 'frame_id': sensor.frame_id or sensor.name,
            'field_of_view': sensor.field_of_view_rad, 'min_range': sensor.min_range_m,
            'max_range': sensor.max_range_m}


def _range_msg(meta: dict[str, Any], range_m: float) -> Range:
    msg = Range()
    msg.header.frame_id = meta['frame_id']
    msg.radiation_type = Range.ULTRASOUND
    msg.field_of_view = meta['field_of_view']
    msg.min_range, msg.max_range = meta['min_range'], meta['max_range']
    msg.range = float(range_m)
    return msg


def _role_sink() -> int:
    """One DDS hop: record publish -> callback time of each Range on DIRECT_TOPIC."""
    node, executor, stopped = _init_helper()
    got: list[tuple[int, int]] = []

    def on_range(msg: Range) -> None:
        now = time.monotonic_ns()
        got.append((int(msg.range), now - (msg.header.stamp.sec * NS + msg.header.stamp.nanosec)))

    node.create_subscription(Range, DIRECT_TOPIC, on_range, qos_profile_sensor_data)
    while not stopped():
        executor.spin_once(timeout_sec=0.1)
    print(json.dumps({'latency_ns': got}), flush=True)
    rclpy.try_shutdown()
    return 0


def _role_relay() -> int:
    """Two DDS hops with no work between: Range on RELAY_IN -> Float64(range) on RELAY_OUT."""
    node, executor, stopped = _init_helper()
    pub = node.create_publisher(Float64, RELAY_OUT, LIMIT_QOS)
    node.create_subscription(Range, RELAY_IN, lambda msg: pub.publish(Float64(data=msg.range)),
                             qos_profile_sensor_data)
    while not stopped():
        executor.spin_once(timeout_sec=0.1)
    rclpy.try_shutdown()
    return 0


def _role_load(rate: float, spec_json: str) -> int:
    """Publish Range round-robin on the given sensors at ``rate`` msg/s and odometry at 50 Hz.

    Paced on a monotonic schedule, in batches of whatever is due (sleeps of ~1 ms). Prints
    ``ready`` once every publisher has matched a subscriber, and its counts when stopped.
    """
    spec = json.loads(spec_json)
    node, _, stopped = _init_helper()
    sensors = spec['sensors']
    pubs = [node.create_publisher(Range, s['topic'], qos_profile_sensor_data) for s in sensors]
    msgs = [_range_msg(s, spec['range_m']) for s in sensors]
    odom_pub = node.create_publisher(Odometry, spec['odom_topic'], qos_profile_sensor_data)
    odom = Odometry()
    odom.header.frame_id, odom.child_frame_id = 'odom', 'base_link'
    deadline = time.monotonic() + START_TIMEOUT_S
    while any(p.get_subscription_count() == 0 for p in [*pubs, odom_pub]):
        if stopped() or time.monotonic() > deadline:
            print(json.dumps({'error': 'no subscriber matched'}), flush=True)
            return 1
        time.sleep(0.01)
    print('ready', flush=True)
    start = time.monotonic_ns()
    sent = odom_sent = 0
    worst_lag_ns = 0
    n = len(pubs)
    while not stopped():
        now = time.monotonic_ns()
        due = (now - start) * rate // NS
        if due - sent > 1:
            worst_lag_ns = max(worst_lag_ns, now - start - int(sent * NS / rate))
        while sent < due:
            i = sent % n
            _stamp(msgs[i].header.stamp, time.time_ns())
            pubs[i].publish(msgs[i])
            sent += 1
        if (now - start) * ODOM_RATE_HZ // NS >= odom_sent:
            _stamp(odom.header.stamp, time.time_ns())
            odom_pub.publish(odom)
            odom_sent += 1
        time.sleep(0.001)
    elapsed = (time.monotonic_ns() - start) / NS
    print(json.dumps({'sent': sent, 'odometry': odom_sent, 'seconds': elapsed,
                      'worst_lag_s': worst_lag_ns / NS}), flush=True)
    rclpy.try_shutdown()
    return 0


class _Proc:
    """A child process with its output in a log file (or a pipe), stopped by SIGINT."""

    def __init__(self, name: str, args: Sequence[str], env: dict[str, str], log: Path,
                 pipe: bool = False) -> None:
        self.name, self.log_path = name, log
        self._log = open(log, 'w', encoding='utf-8')
        self.proc = subprocess.Popen(list(args), env=env, cwd=REPO, text=True,
                                     stdout=subprocess.PIPE if pipe else self._log,
                                     stderr=self._log)
        self.out = ''

    @property
    def pid(self) -> int:
        return self.proc.pid

    def alive(self) -> bool:
        return self.proc.poll() is None

    def log(self) -> str:
        if not self._log.closed:
            self._log.flush()
        try:
            return self.log_path.read_text(encoding='utf-8')
        except OSError:
            return ''

    def ready_line(self) -> bool:
        """Return True when the child has printed a line (without blocking)."""
        if self.proc.stdout is None:
            return False
        if select.select([self.proc.stdout], [], [], 0)[0]:
            self.out += self.proc.stdout.readline()
            return True
        return False

    def stop(self, timeout_s: float = 10.0) -> tuple[int, str]:
        """Send SIGINT, wait, kill if needed; return (exit code, what it printed on stdout)."""
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGINT)
        try:
            out, _ = self.proc.communicate(timeout=timeout_s)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            out, _ = self.proc.communicate(timeout=5)
        self._log.close()
        self.out += out or ''
        return self.proc.returncode, self.out


def _helper(role: str, *extra: str) -> list[str]:
    return [sys.executable, str(Path(__file__).resolve()), '--role', role, *extra]


# ------------------------------------------------------------------ /proc readings


def _cpu_s(pid: int) -> float:
    """Return user + system CPU seconds of a process so far."""
    fields = Path(f'/proc/{pid}/stat').read_text().rsplit(')', 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf('SC_CLK_TCK')


def _rss_mb(pid: int) -> float:
    """Return the resident set size of a process, MB."""
    for line in Path(f'/proc/{pid}/status').read_text().splitlines():
        if line.startswith('VmRSS:'):
            return int(line.split()[1]) / 1024.0
    return math.nan


# ------------------------------------------------------------------ the probing side


def expected_limits(config: Config, probe: str) -> tuple[float, float]:
    """Return the core's limits (m/s) with every sensor clear, and with the probe's obstacle."""
    monitor = Monitor(config)
    t, clear = 100.0, math.nan
    for _ in range(int(SENSOR_RATE_HZ)):
        monitor.on_odometry(OdometrySample(t, 0.0, 0.0, 0.0, t))
        for s in config.sensors:
            monitor.on_range(RangeReading(s.name, t, CLEAR_M, t))
        clear = monitor.tick(t).limit_mps
        t += 1.0 / SENSOR_RATE_HZ
    monitor.on_range(RangeReading(probe, t, OBSTACLE_M, t))
    return clear, monitor.tick(t).limit_mps


def forward_sensor(config: Config) -> SensorConfig:
    """Return the sensor covering forward travel whose beam points most nearly forward."""
    covering = Monitor(config).covering(0.0)
    if not covering:
        raise LiveBenchError('no sensor covers forward travel in the benchmark ring')
    return min((config.sensor(n) for n in covering),
               key=lambda s: abs(math.remainder(s.yaw_rad, 2 * math.pi)))


class _Prober:
    """This process's side: the probe sensor's readings, the probes, and what comes back."""

    def __init__(self, context: Any, config: Config, sensor: SensorConfig, threshold: float,
                 watch: list[_Proc]) -> None:
        self.node = rclpy.create_node('sonar_guard_bench_prober', context=context)
        self.executor = SingleThreadedExecutor(context=context)
        self.executor.add_node(self.node)
        self.meta, self.threshold, self.watch = _meta(sensor), threshold, watch
        self.rng = random.Random(7)
        qos = qos_profile_sensor_data
        self.probe_pub = self.node.create_publisher(Range, sensor.topic, qos)
        self.direct_pub = self.node.create_publisher(Range, DIRECT_TOPIC, qos)
        self.relay_pub = self.node.create_publisher(Range, RELAY_IN, qos)
        self.limits: list[tuple[int, float]] = []  # (monotonic ns received, allowed_speed)
        self.relayed: dict[int, int] = {}  # probe number -> monotonic ns received
        self.diagnostics: list[tuple[int, float, int]] = []  # (ns received, stamp s, readings)
        self.node.create_subscription(
            Float64, LIMIT_TOPIC, lambda m: self.limits.append((time.monotonic_ns(), m.data)),
            LIMIT_QOS)
        self.node.create_subscription(
            Float64, RELAY_OUT,
            lambda m: self.relayed.__setitem__(int(m.data), time.monotonic_ns()), LIMIT_QOS)
        self.node.create_subscription(DiagnosticArray, '/diagnostics', self._on_diagnostics, 10)
        self.state_m = CLEAR_M
        self.probe_sent = 0  # readings of the probe sensor published
        self.period_ns = int(NS / SENSOR_RATE_HZ)
        self.next_reading_ns = time.monotonic_ns()
        self.last_reading_ns = 0
        self.seq = 0
        self._checked_ns = 0

    def close(self) -> None:
        self.executor.shutdown()
        self.node.destroy_node()

    def _on_diagnostics(self, msg: DiagnosticArray) -> None:
        total = 0
        for status in msg.status:
            if status.name.startswith('sonar_guard: ') and status.name != 'sonar_guard: monitor':
                total += sum(int(kv.value) for kv in status.values
                             if kv.key.startswith('count_'))
        stamp = msg.header.stamp.sec + msg.header.stamp.nanosec * 1e-9
        self.diagnostics.append((time.monotonic_ns(), stamp, total))

    def _publish_reading(self, range_m: float) -> int:
        """Publish one reading of the probe sensor, stamped now; return monotonic ns sent."""
        msg = _range_msg(self.meta, range_m)
        _stamp(msg.header.stamp, time.time_ns())
        sent = time.monotonic_ns()
        self.probe_pub.publish(msg)
        self.last_reading_ns = sent
        self.probe_sent += 1
        return sent

    def pump(self, until_ns: int, done: Callable[[], bool] | None = None) -> bool:
        """Keep the probe sensor at its rate and take messages until ``done()`` or ``until_ns``.

        Returns whether ``done()`` became true. Raises LiveBenchError when a child stopped.
        """
        gap_ns = int(PROBE_GAP_S * NS)
        while True:
            if done is not None and done():
                return True
            now = time.monotonic_ns()
            if now >= until_ns:
                return False
            if now - self._checked_ns > NS // 2:
                self._checked_ns = now
                for proc in self.watch:
                    if not proc.alive():
                        print(f'--- {proc.name} log ---\n{proc.log()}', file=sys.stderr)
                        raise LiveBenchError(f'{proc.name} exited with {proc.proc.returncode} '
                                             '(log above)')
            wake = self.next_reading_ns
            if now >= self.next_reading_ns:
                if now - self.last_reading_ns >= gap_ns:
                    self._publish_reading(self.state_m)
                    self.next_reading_ns += self.period_ns
                    if self.next_reading_ns < now:
                        self.next_reading_ns = now + self.period_ns
                    continue
                wake = self.last_reading_ns + gap_ns
            timeout_ns = max(0, min(until_ns, wake) - now)
            self.executor.spin_once(timeout_sec=min(timeout_ns, 10_000_000) / NS)

    def pause(self, seconds: float) -> None:
        """Pump for ``seconds``."""
        self.pump(time.monotonic_ns() + int(seconds * NS))

    def _first(self, start: int, test: Callable[[float], bool]) -> int | None:
        """Return the receive time (ns) of the first limit from index ``start`` passing test."""
        for t, value in self.limits[start:]:
            if test(value):
                return t
        return None

    def wait_clear(self, timeout_s: float) -> bool:
        """Wait until the last allowed_speed received is above the threshold."""
        return self.pump(time.monotonic_ns() + int(timeout_s * NS),
                         lambda: bool(self.limits) and self.limits[-1][1] >= self.threshold)

    def _ready_for_probe(self) -> None:
        """Wait a random 5-25 ms and the gap after the probe sensor's last reading."""
        self.pause(self.rng.uniform(0.005, 0.025))
        self.pump(self.last_reading_ns + int(PROBE_GAP_S * NS))

    def node_probe(self) -> float | None:
        """Obstacle in front -> lowered allowed_speed received; return ms (None: lost)."""
        if not self.wait_clear(5.0):
            raise LiveBenchError(f'allowed_speed did not come back above {self.threshold:.3f} '
                                 f'm/s; last {self.limits[-1:]}')
        self._ready_for_probe()
        start = len(self.limits)
        self.state_m = OBSTACLE_M
        sent = self._publish_reading(OBSTACLE_M)
        below = lambda v: v < self.threshold  # noqa: E731
        self.pump(sent + int(PROBE_TIMEOUT_S * NS), lambda: self._first(start, below) is not None)
        arrived = self._first(start, below)
        self.pump(self.last_reading_ns + int(PROBE_GAP_S * NS))  # no 'jump' on the way back
        self.state_m = CLEAR_M
        mark = len(self.limits)
        self._publish_reading(CLEAR_M)
        if not self.pump(time.monotonic_ns() + 5 * NS,
                         lambda: self._first(mark, lambda v: v >= self.threshold) is not None):
            raise LiveBenchError('allowed_speed did not rise again after a clear reading')
        return None if arrived is None else (arrived - sent) / 1e6

    def relay_probe(self) -> float | None:
        """Range -> relay -> Float64 received; return ms (None: lost)."""
        self._ready_for_probe()
        self.seq += 1
        seq = self.seq
        msg = _range_msg(self.meta, float(seq))
        sent = time.monotonic_ns()
        self.relay_pub.publish(msg)
        if self.pump(sent + int(PROBE_TIMEOUT_S * NS), lambda: seq in self.relayed):
            return (self.relayed[seq] - sent) / 1e6
        return None

    def direct_probe(self, seq: int | None = None) -> None:
        """Range -> sink (it records the latency); numbers <= 0 are warm-ups."""
        self._ready_for_probe()
        if seq is None:
            self.seq += 1
            seq = self.seq
        msg = _range_msg(self.meta, float(seq))
        now = time.monotonic_ns()
        _stamp(msg.header.stamp, now)
        self.direct_pub.publish(msg)
        self.pump(now + int(PROBE_GAP_S * NS))

    def taken(self, t0_ns: int, t1_ns: int) -> tuple[float, float]:
        """Return (readings/s the node counted, seconds) between two monotonic times."""
        inside = [d for d in self.diagnostics if t0_ns <= d[0] <= t1_ns]
        if len(inside) < 2 or inside[-1][1] <= inside[0][1]:
            return math.nan, 0.0
        span = inside[-1][1] - inside[0][1]
        return (inside[-1][2] - inside[0][2]) / span, span


# ------------------------------------------------------------------ the run


def _p(values: Sequence[float], q: float) -> float:
    return float(np.percentile(values, q)) if len(values) else math.nan


def _bench_params() -> dict:
    from run import bench_params  # here, not at the top: run.py may import this module
    return {**bench_params(), **LIVE_OVERRIDES}


def _wait_for(prober: _Prober, what: str, done: Callable[[], bool], logs: Sequence[_Proc],
              timeout_s: float = START_TIMEOUT_S) -> None:
    if not prober.pump(time.monotonic_ns() + int(timeout_s * NS), done):
        text = '\n'.join(f'--- {p.name} log ---\n{p.log()}' for p in logs)
        print(text, file=sys.stderr)
        raise LiveBenchError(f'{what} within {timeout_s:g} s (logs above)')


def _start_loader(prober: _Prober, rate: float, spec: str, env: dict[str, str], log: Path,
                  node: _Proc) -> _Proc:
    loader = _Proc(f'loader {rate:g} msg/s', _helper('load', '--rate', str(rate), '--spec', spec),
                   env, log, pipe=True)
    try:
        _wait_for(prober, f'the loader ({rate:g} msg/s) did not match the node',
                  loader.ready_line, [loader, node])
        if 'ready' not in loader.out:
            raise LiveBenchError(f'loader did not start: {loader.out}\n{loader.log()}')
    except BaseException:
        loader.stop()
        raise
    return loader


def _stop_loader(loader: _Proc) -> dict[str, float]:
    code, out = loader.stop()
    lines = [line for line in out.splitlines() if line.startswith('{')]
    if code != 0 or not lines:
        raise LiveBenchError(f'loader failed ({code}): {out}\n{loader.log()}')
    return json.loads(lines[-1])


def run_live(results: dict, *, seconds: float = 60.0) -> list[tuple[str, str, str]]:
    """Measure the live node; fill ``results`` with figures, return (figure, reached, goal).

    ``seconds`` is the length of the 5,000 msg/s load (>= 6 s). Raises LiveBenchError when the
    node or a helper does not start or stops; the node's log is printed first.
    """
    if seconds < 6.0:
        raise ValueError(f'seconds must be >= 6: {seconds!r}')
    began = time.monotonic()
    load_before = os.getloadavg()[0]
    params = _bench_params()
    config = build_config(params)
    probe = forward_sensor(config)
    others = [s for s in config.sensors if s.name != probe.name]
    clear, lowered = expected_limits(config, probe.name)
    if lowered > clear - 0.1:
        raise LiveBenchError(f'the probe obstacle barely lowers the limit: {clear} -> {lowered}')
    threshold = (clear + lowered) / 2
    spec = {'range_m': CLEAR_M, 'odom_topic': config.odom_topic,
            'sensors': [_meta(s) for s in others]}
    spec_json = json.dumps(spec)
    env = _ros_environment()
    import yaml

    with tempfile.TemporaryDirectory(prefix='sonar_guard_live_') as tmp:
        root = Path(tmp)
        params_file = root / 'params.yaml'
        params_file.write_text(yaml.safe_dump({'sonar_guard': {'ros__parameters': params}}))
        procs: list[_Proc] = []
        context = rclpy.Context()
        saved = {k: os.environ.get(k) for k in
                 ('ROS_DOMAIN_ID', 'ROS_LOCALHOST_ONLY', 'ROS_AUTOMATIC_DISCOVERY_RANGE')}
        prober = None
        node_code = None
        try:
            node = _Proc('node', [sys.executable, '-m', 'sonar_guard.ros.node', '--ros-args',
                                  '--params-file', str(params_file)], env, root / 'node.log')
            procs.append(node)
            sink = _Proc('sink', _helper('sink'), env, root / 'sink.log', pipe=True)
            relay = _Proc('relay', _helper('relay'), env, root / 'relay.log')
            procs += [sink, relay]
            os.environ.update({k: env[k] for k in saved})
            rclpy.init(context=context, domain_id=int(env['ROS_DOMAIN_ID']))
            prober = _Prober(context, config, probe, threshold, [node, sink, relay])

            # ---- phase 1: 16 sensors x 50 Hz; direct, relay and node probes interleaved
            rate1 = SENSOR_RATE_HZ * len(others)
            loader = _start_loader(prober, rate1, spec_json, env, root / 'loader1.log', node)
            procs.append(loader)
            _wait_for(prober, f'node did not publish allowed_speed >= {threshold:.3f} m/s',
                      lambda: bool(prober.limits) and prober.limits[-1][1] >= threshold,
                      [node])
            _wait_for(prober, 'relay did not answer',
                      lambda: prober.relay_probe() is not None, [relay])
            _wait_for(prober, 'sink did not match',
                      lambda: prober.direct_pub.get_subscription_count() > 0, [sink])
            for k in range(20):
                prober.direct_probe(seq=-k)
            for _ in range(5):
                prober.node_probe()
            seq_start = prober.seq
            node_ms: list[float] = []
            relay_ms: list[float] = []
            lost = {'node': 0, 'relay': 0}
            kinds = ['node', 'relay', 'direct']
            t0, cpu0 = time.monotonic_ns(), _cpu_s(node.pid)
            sent0 = prober.probe_sent
            while (len(node_ms) < LATENCY_PROBES
                   and time.monotonic_ns() - t0 < LATENCY_MAX_S * NS):
                prober.rng.shuffle(kinds)
                for kind in kinds:
                    if kind == 'direct':
                        prober.direct_probe()
                        continue
                    ms = prober.node_probe() if kind == 'node' else prober.relay_probe()
                    if ms is None:
                        lost[kind] += 1
                    else:
                        (node_ms if kind == 'node' else relay_ms).append(ms)
            t1, cpu1 = time.monotonic_ns(), _cpu_s(node.pid)
            taken1, _ = prober.taken(t0, t1)
            stats1 = _stop_loader(loader)
            procs.remove(loader)
            code, out = sink.stop()
            procs.remove(sink)
            prober.watch.remove(sink)
            lines = [line for line in out.splitlines() if line.startswith('{')]
            if code != 0 or not lines:
                raise LiveBenchError(f'sink failed ({code}): {out}\n{sink.log()}')
            direct_ms = [ns / 1e6 for seq, ns in json.loads(lines[-1])['latency_ns']
                         if seq > seq_start]
            # the loader's rate over its whole run, the probe sensor's over the window
            rate_in1 = (stats1['sent'] / stats1['seconds']
                        + (prober.probe_sent - sent0) / ((t1 - t0) / NS))
            cpu_per_k1 = (cpu1 - cpu0) / ((t1 - t0) / NS) / (rate_in1 / 1000)

            # ---- phase 2: 5,000 Range/s for `seconds`
            window = min(WINDOW_S, seconds / 3)
            rate2 = LOAD_RATE - SENSOR_RATE_HZ  # the probe sensor adds SENSOR_RATE_HZ
            loader = _start_loader(prober, rate2, spec_json, env, root / 'loader2.log', node)
            procs.append(loader)
            prober.pause(WARMUP_S)
            load0, cpu0, rss0 = time.monotonic_ns(), _cpu_s(node.pid), _rss_mb(node.pid)
            sent0 = prober.probe_sent
            end = load0 + int(seconds * NS)
            rss = [rss0]
            first: list[float] = []
            last: list[float] = []
            relay_first: list[float] = []  # reference: the machine's own jitter, same windows
            relay_last: list[float] = []
            lost['load'] = lost['load_relay'] = 0
            quiet_end = end - int((window + 0.3) * NS)
            for series, relayed, until in ((first, relay_first, load0 + int(window * NS)),
                                           (None, None, quiet_end), (last, relay_last, end)):
                if series is None or relayed is None:  # the quiet middle: timer publishes only
                    quiet0 = time.monotonic_ns()
                    while time.monotonic_ns() < until:
                        prober.pump(min(time.monotonic_ns() + NS, until))
                        rss.append(_rss_mb(node.pid))
                    quiet1 = time.monotonic_ns()
                    continue
                while time.monotonic_ns() < until:
                    ms = prober.node_probe()
                    if ms is None:
                        lost['load'] += 1
                    else:
                        series.append(ms)
                    ms = prober.relay_probe()
                    if ms is None:
                        lost['load_relay'] += 1
                    else:
                        relayed.append(ms)
            load1, cpu1, rss1 = time.monotonic_ns(), _cpu_s(node.pid), _rss_mb(node.pid)
            rss.append(rss1)
            taken2, _ = prober.taken(load0, load1)
            stats2 = _stop_loader(loader)
            procs.remove(loader)
            load_s = (load1 - load0) / NS
            rate_in2 = stats2['sent'] / stats2['seconds'] + (prober.probe_sent - sent0) / load_s
            quiet = [t for t, _ in prober.limits if quiet0 + 0.2 * NS <= t <= quiet1]
            quiet_rate = (len(quiet) - 1) / ((quiet[-1] - quiet[0]) / NS) if len(quiet) > 2 \
                else math.nan
            worst_gap_ms = float(np.max(np.diff(quiet))) / 1e6 if len(quiet) > 2 else math.nan
            prober.close()
            prober = None
            node_code, _ = node.stop()
            procs.remove(node)
            if node_code != 0:
                print(node.log(), file=sys.stderr)
                raise LiveBenchError(f'node exited with {node_code} on SIGINT')
        finally:
            if prober is not None:
                prober.close()
            for proc in reversed(procs):
                proc.stop()
            rclpy.try_shutdown(context=context)
            for k, v in saved.items():
                if v is None:
                    os.environ.pop(k, None)
                else:
                    os.environ[k] = v

    d50, d99 = _p(direct_ms, 50), _p(direct_ms, 99)
    r50, r99 = _p(relay_ms, 50), _p(relay_ms, 99)
    n50, n99 = _p(node_ms, 50), _p(node_ms, 99)
    f99, l99 = _p(first, 99), _p(last, 99)
    cpu_per_k2 = (cpu1 - cpu0) / load_s / (rate_in2 / 1000)
    live = {
        'probe_sensor': probe.name, 'limit_clear_mps': clear, 'limit_obstacle_mps': lowered,
        'rate_in_1': rate_in1, 'node_took_1': taken1,
        'direct_n': len(direct_ms), 'relay_n': len(relay_ms), 'node_n': len(node_ms),
        'lost': lost,
        'direct_p50_ms': d50, 'direct_p99_ms': d99, 'relay_p50_ms': r50, 'relay_p99_ms': r99,
        'node_p50_ms': n50, 'node_p99_ms': n99,
        'node_minus_direct_p50_ms': n50 - d50, 'node_minus_direct_p99_ms': n99 - d99,
        'node_minus_relay_p50_ms': n50 - r50, 'node_minus_relay_p99_ms': n99 - r99,
        'cpu_per_1000_msg_s_at_800': cpu_per_k1,
        'load_seconds': load_s, 'load_rate_in': rate_in2, 'loader_worst_lag_s':
            stats2['worst_lag_s'], 'node_took_2': taken2,
        'load_probes_first': len(first), 'load_probes_last': len(last),
        'load_p50_first_ms': _p(first, 50), 'load_p50_last_ms': _p(last, 50),
        'load_p99_first_ms': f99, 'load_p99_last_ms': l99, 'load_p99_ratio': l99 / f99,
        'limit_rate_hz': quiet_rate, 'limit_worst_gap_ms': worst_gap_ms,
        'publish_rate_hz': config.publish_rate_hz,
        'rss_start_mb': rss0, 'rss_end_mb': rss1, 'rss_max_mb': max(rss),
        'cpu_per_1000_msg_s': cpu_per_k2, 'node_cpu_core': (cpu1 - cpu0) / load_s,
        'load_p50_ratio': _p(last, 50) / _p(first, 50),
        'load_relay_p99_first_ms': _p(relay_first, 99),
        'load_relay_p99_last_ms': _p(relay_last, 99),
        'load_relay_p99_ratio': _p(relay_last, 99) / _p(relay_first, 99),
        'loader_worst_lag_s_1': stats1['worst_lag_s'],
        # other work on the machine: 1-min load average before and after (2 cores here)
        'loadavg_before': load_before, 'loadavg_after': os.getloadavg()[0],
        'seconds': time.monotonic() - began,
    }
    results.update({f'live_{key}': value for key, value in live.items()})
    took2 = (f'{taken2:,.0f} msg/s ({100 * taken2 / rate_in2:.0f}%)' if math.isfinite(taken2)
             else 'unknown')
    return [
        ('live: node - direct latency, p50', f'{n50 - d50:+.2f} ms', '<= 1 ms'),
        ('live: node - direct latency, p99', f'{n99 - d99:+.2f} ms', '<= 3 ms'),
        ('live: node - relay latency, p50 / p99', f'{n50 - r50:+.2f} / {n99 - r99:+.2f} ms',
         '-'),
        ('live: latency p50 / p99, direct', f'{d50:.2f} / {d99:.2f} ms', '-'),
        ('live: latency p50 / p99, relay', f'{r50:.2f} / {r99:.2f} ms', '-'),
        ('live: latency p50 / p99, node', f'{n50:.2f} / {n99:.2f} ms', '-'),
        ('live: Range msg/s sent at load', f'{rate_in2:,.0f}', f'{LOAD_RATE:,.0f}'),
        ('live: Range msg/s the node took at load', took2, '-'),
        ('live: probe p99 last / first window at load', f'{l99 / f99:.2f}x', '<= 1.5x'),
        ('live: same for the relay (machine noise)',
         f"{live['load_relay_p99_ratio']:.2f}x", '-'),
        ('live: allowed_speed rate at load', f'{quiet_rate:.1f} Hz',
         f'{config.publish_rate_hz:g} Hz'),
        ('live: node RSS end - start of load', f'{rss1 - rss0:+.1f} MB', 'flat'),
        ('live: node CPU s per s per 1,000 msg/s', f'{cpu_per_k2:.3f}', '-'),
    ]


def describe(results: dict) -> str:
    """Return one line on how the live run went (probes, load, how busy the machine was)."""
    live = {key[5:]: value for key, value in results.items() if key.startswith('live_')}
    return (f"probe sensor {live['probe_sensor']}: limit {live['limit_clear_mps']:.3f} -> "
            f"{live['limit_obstacle_mps']:.3f} m/s; {live['node_n']} node, {live['relay_n']} "
            f"relay, {live['direct_n']} direct probes at {live['rate_in_1']:,.0f} msg/s; "
            f"load {live['load_seconds']:.0f} s ({live['load_probes_first']} + "
            f"{live['load_probes_last']} probes); loader at most "
            f"{live['loader_worst_lag_s']:.3f} s behind; load average "
            f"{live['loadavg_before']:.1f} -> {live['loadavg_after']:.1f}; "
            f"live part took {live['seconds']:.0f} s")


def _print_rows(rows: Sequence[tuple[str, str, str]]) -> None:
    width = max(len(r[0]) for r in rows)
    vwidth = max(12, *(len(r[1]) for r in rows))
    print(f"{'figure':<{width}}  {'reached':>{vwidth}}  goal")
    for name, value, goal in rows:
        print(f'{name:<{width}}  {value:>{vwidth}}  {goal}')


def main(argv: Sequence[str] | None = None) -> int:
    """Run the live part alone and print its rows; return 0."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument('--seconds', type=float, default=60.0,
                        help='length of the 5,000 msg/s load, s (default 60)')
    parser.add_argument('--json', type=Path, help='also write the figures to this file')
    parser.add_argument('--role', choices=('sink', 'relay', 'load'), help=argparse.SUPPRESS)
    parser.add_argument('--rate', type=float, help=argparse.SUPPRESS)
    parser.add_argument('--spec', help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.role == 'sink':
        return _role_sink()
    if args.role == 'relay':
        return _role_relay()
    if args.role == 'load':
        return _role_load(args.rate, args.spec)
    results: dict = {}
    rows = run_live(results, seconds=args.seconds)
    print('\n' + describe(results))
    _print_rows(rows)
    if args.json is not None:
        args.json.write_text(json.dumps(results, indent=2) + '\n')
    return 0


if __name__ == '__main__':
    sys.exit(main())
