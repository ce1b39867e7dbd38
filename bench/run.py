"""`make bench`: speed and memory of the offline checker and the engine, as same-run ratios.

Machines here are shared and noisy, so every figure is a ratio (or a difference) against a
reference measured in the same run on the same data:

* offline throughput: `check` on a generated 16-sensor x 20 Hz recording against a plain loop
  that reads the same recording with rosbags and deserializes every message (goal >= 1.5x),
  and against reading it without deserializing (goal >= 0.5x);
* offline memory: peak RSS of `check` on the long recording minus on one a tenth as long
  (goal < 30 MB);
* live node (bench/live.py): latency publisher -> node -> allowed_speed against publisher ->
  subscriber directly (goal: <= 1 ms added at p50, <= 3 ms at p99), and 5,000 Range/s for
  ``--live-seconds``: backlog, allowed_speed rate, RSS, CPU per 1,000 msg/s;
* core: engine steps per second in process.

Writes bench/results.json and prints a table.
"""
from __future__ import annotations

import argparse
import json
import math
from pathlib import Path
import platform
import resource
import subprocess
import sys
import tempfile
import time

HERE = Path(__file__).resolve().parent
REPO = HERE.parent
sys.path.insert(0, str(REPO))

from sonar_guard.core.config import build_config  # noqa: E402
from sonar_guard.core.monitor import Monitor, OdometrySample  # noqa: E402
from sonar_guard.core.readings import RangeReading  # noqa: E402
from sonar_guard.offline.bagwrite import odometry_msg, range_msg, write_bag  # noqa: E402

SENSORS = 16
RATE_HZ = 20.0
ODOM_HZ = 50.0
T0 = 1_700_000_000.0


def bench_params() -> dict:
    """A made-up 16-sensor ring for the benchmark (inputs only)."""
    names = [f's{i:02d}' for i in range(SENSORS)]
    params: dict = {'sensor_names': names, 'sonar.max_range': 4.0, 'sonar.min_range': 0.15,
                    'sonar.field_of_view': 0.4, 'sonar.slot_duration': 1.0 / RATE_HZ / 4,
                    'robot.footprint': [0.4, 0.3, 0.4, -0.3, -0.4, -0.3, -0.4, 0.3]}
    for i, n in enumerate(names):
        yaw = 2 * math.pi * i / SENSORS
        params[f'sensors.{n}.x'] = 0.4 * math.cos(yaw)
        params[f'sensors.{n}.y'] = 0.3 * math.sin(yaw)
        params[f'sensors.{n}.yaw'] = yaw
        params[f'sensors.{n}.slot'] = i % 4
    return params


def records(minutes: float):
    """Yield a recording: every sensor at RATE_HZ, odometry at ODOM_HZ, in time order."""
    duration = minutes * 60.0
    period = 1.0 / RATE_HZ
    k_odom = 0
    k = 0
    while k * period < duration:
        base = k * period
        cycle = []
        while k_odom / ODOM_HZ < base + period:
            t = T0 + k_odom / ODOM_HZ
            cycle.append((t, '/odom', 'nav_msgs/msg/Odometry', odometry_msg(t, 0.3)))
            k_odom += 1
        for i in range(SENSORS):
            t = T0 + base + (i % 4) * period / 4 + 0.001 * (i // 4)
            r = 1.0 + 2.5 * abs(math.sin(0.01 * k + i))
            cycle.append((t, f'/sonar/s{i:02d}', 'sensor_msgs/msg/Range',
                          range_msg(t, f's{i:02d}', r, min_range=0.15, max_range=4.0,
                                    field_of_view=0.4)))
        cycle.sort(key=lambda rec: rec[0])
        for t, topic, msgtype, msg in cycle:
            yield topic, msgtype, t, msg
        k += 1


def timed(fn) -> tuple[float, object]:
    start = time.perf_counter()
    out = fn()
    return time.perf_counter() - start, out


def read_all(bag: Path, deserialize: bool) -> int:
    """The reference loop: rosbags' AnyReader over every message."""
    from rosbags.highlevel import AnyReader
    n = 0
    with AnyReader([bag]) as reader:
        for conn, _, raw in reader.messages():
            if deserialize:
                reader.deserialize(raw, conn.msgtype)
            n += 1
    return n


def check_rss_mb(bag: Path, params: Path) -> float:
    """Peak RSS (MB) of `sonar-guard check` on one recording, in its own process."""
    # VmHWM, not ru_maxrss: Linux carries ru_maxrss over from the parent across fork+exec
    code = ('from sonar_guard.cli import main; '
            f'main(["check", {str(bag)!r}, "--params", {str(params)!r}, "--quiet", '
            '"--fail-on", "none"]); '
            'print([l.split()[1] for l in open("/proc/self/status") if l.startswith("VmHWM")][0])')
    out = subprocess.run([sys.executable, '-c', code], capture_output=True, text=True,
                         cwd=REPO, check=True).stdout.split()[-1]
    return int(out) / 1024.0


def engine_steps_per_s(config, seconds: float = 2.0) -> float:
    monitor = Monitor(config)
    names = config.sensor_names
    n, t = 0, T0
    start = time.perf_counter()
    while time.perf_counter() - start < seconds:
        for name in names:
            t += 0.003
            monitor.on_range(RangeReading(name, t, 1.0 + 0.01 * (n % 50), t))
            monitor.tick(t)
            n += 1
        monitor.on_odometry(OdometrySample(t, 0.3, 0.0, 0.0, t))
    return n / (time.perf_counter() - start)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument('--minutes', type=float, default=30.0,
                        help='length of the long recording (default 30)')
    parser.add_argument('--live-seconds', type=float, default=60.0,
                        help='length of the 5,000 msg/s live load (default 60)')
    parser.add_argument('--no-live', action='store_true',
                        help='skip the live-node measurements (they need rclpy)')
    args = parser.parse_args()
    import yaml

    from sonar_guard.cli import main as cli_main
    results: dict = {'machine': f'{platform.machine()} {platform.processor() or ""}'.strip(),
                     'python': platform.python_version(), 'minutes': args.minutes}
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        params = root / 'params.yaml'
        params.write_text(yaml.safe_dump({'sonar_guard': {'ros__parameters': bench_params()}}))
        print(f'writing a {args.minutes:g} min recording ...', flush=True)
        t_write, long_bag = timed(lambda: write_bag(root / 'long', records(args.minutes)))
        short_bag = write_bag(root / 'short', records(args.minutes / 10))
        readings = int(args.minutes * 60 * RATE_HZ * SENSORS)
        results['readings'] = readings
        results['write_s'] = t_write
        print('reading it with rosbags ...', flush=True)
        t_raw, n = timed(lambda: read_all(long_bag, False))
        t_deser, _ = timed(lambda: read_all(long_bag, True))
        print('checking it ...', flush=True)
        t_check, code = timed(lambda: cli_main(['check', str(long_bag), '--params', str(params),
                                                '--quiet', '--fail-on', 'none']))
        results.update(messages=n, raw_read_s=t_raw, deserialize_s=t_deser, check_s=t_check,
                       check_vs_deserialize=t_deser / t_check, check_vs_raw=t_raw / t_check)
        print('measuring memory ...', flush=True)
        rss_long = check_rss_mb(long_bag, params)
        rss_short = check_rss_mb(short_bag, params)
        results.update(rss_long_mb=rss_long, rss_short_mb=rss_short,
                       rss_growth_mb=rss_long - rss_short)
    live_rows: list[tuple[str, str, str]] = []
    if not args.no_live:
        from live import run_live
        print('measuring the live node ...', flush=True)
        live_rows = run_live(results, seconds=args.live_seconds)
    config = build_config(bench_params())
    results['engine_steps_per_s'] = engine_steps_per_s(config)
    results['peak_rss_bench_mb'] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    (HERE / 'results.json').write_text(json.dumps(results, indent=2) + '\n')
    rows = [
        ('offline: check vs rosbags read+deserialize', f"{results['check_vs_deserialize']:.2f}x",
         '>= 1.5x'),
        ('offline: check vs rosbags raw read', f"{results['check_vs_raw']:.2f}x", '>= 0.5x'),
        ('offline: RSS long - short recording', f"{results['rss_growth_mb']:.1f} MB", '< 30 MB'),
        *live_rows,
        ('core: engine steps per second', f"{results['engine_steps_per_s']:,.0f}", '-'),
    ]
    print()
    if live_rows:
        from live import describe
        print('live: ' + describe(results))
    print(f"{readings:,} readings, {results['messages']:,} messages "
          f"({args.minutes:g} min); check took {t_check:.1f} s, rosbags read+deserialize "
          f"{t_deser:.1f} s, raw read {t_raw:.1f} s")
    width = max(len(r[0]) for r in rows)
    print(f"{'figure':<{width}}  {'reached':>12}  goal")
    for name, value, goal in rows:
        print(f'{name:<{width}}  {value:>12}  {goal}')
    print(f'results: {HERE / "results.json"}')
    return 0


if __name__ == '__main__':
    sys.exit(main())
