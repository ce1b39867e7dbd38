"""Recordings written by the tests, with faults injected at known times (importable as `bagkit`).

A made-up one-dimensional world: the test robot of `testkit` drives toward a wall; its front
sensor ('ahead') sees the wall, its rear sensor ('behind') sees nothing. Sensors fire slot by
slot (ahead, then behind, each for one echo timeout) and stamp at echo time, like real
drivers. Faults are injected in windows that do not overlap, each listed with the kind and
sensor the checker must report. Inputs only: the expected findings follow from the rules,
the times from the script.
"""
from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
import math
from pathlib import Path
import struct
from typing import Any

import yaml

from sonar_guard.offline.bagwrite import odometry_msg, range_msg, write_bag

T0 = 1_700_000_000.0  # bag time of the scenario start, s
C20 = 331.3 * math.sqrt(1 + 20.0 / 273.15)  # reference.md F1 at 20 degC
MAX_RANGE = 4.0
TIMEOUT = 2 * MAX_RANGE / C20  # one slot
CYCLE = 2 * TIMEOUT  # ahead's slot then behind's slot
WALL_X = 3.5 + 0.5  # wall position in the world, m (the ahead sensor sits at x = 0.5)
FOV, MIN_RANGE = 0.4, 0.15

PARAMS = {
    'sensor_names': ['ahead', 'behind'],
    'sensors': {
        'ahead': {'topic': 'sonar/ahead', 'frame_id': 'sonar_ahead', 'x': 0.5, 'yaw': 0.0},
        'behind': {'topic': 'sonar/behind', 'frame_id': 'sonar_behind', 'x': -0.5,
                   'yaw': math.pi},
    },
    'sonar': {'min_range': MIN_RANGE, 'max_range': MAX_RANGE, 'field_of_view': FOV,
              'air_temperature': 20.0},
    'robot': {'footprint': [0.5, 0.3, 0.5, -0.3, -0.5, -0.3, -0.5, 0.3]},
    'odom_topic': 'odom',
}


@dataclass(frozen=True, slots=True)
class Fault:
    """One injected fault: what the checker must report, and the window it lies in (s)."""

    kind: str
    sensor: str | None
    start: float  # relative to T0
    end: float


FAULTS: tuple[Fault, ...] = (
    Fault('blind', 'ahead', 3.0, 3.5),
    Fault('no_echo', 'ahead', 5.0, 6.0),
    Fault('stale', 'behind', 7.0, 8.0),
    Fault('stuck', 'ahead', 9.0, 10.0),
    Fault('jump', 'ahead', 11.0, 11.1),
    Fault('late', 'behind', 12.0, 13.0),
    Fault('slot_clash', 'behind', 14.0, 15.0),
    Fault('overspeed', None, 17.0, 19.0),
)
DURATION = 20.0


def write_params(path: Path) -> Path:
    """Write the scenario's parameter file."""
    path.write_text(yaml.safe_dump({'sonar_guard': {'ros__parameters': PARAMS}}),
                    encoding='utf-8')
    return path


def _in(t: float, start: float, end: float) -> bool:
    return start <= t < end


def _motion(t: float, faults: bool) -> tuple[float, float]:
    """Body speed (vx m/s, wz rad/s) at scenario time t."""
    if faults:
        if _in(t, 3.0, 3.7) or _in(t, 9.0, 10.0):
            return 0.0, (1.0 if _in(t, 9.0, 10.0) else 0.0)  # stopped (turning in place)
        if _in(t, 17.0, 19.0):
            return -1.4, 0.0  # reversing faster than max_speed
        if t >= 19.0:
            return 0.0, 0.0
    return 0.1, 0.0


def scenario(*, faults: bool = True,
             distro: str = 'humble') -> Iterator[tuple[str, str, float, Any]]:
    """Yield (topic, msgtype, log time s, message) in log-time order."""
    records: list[tuple[float, str, str, Any]] = []
    x = 0.0
    dt = 0.02
    xs: list[tuple[float, float]] = []  # (t, x) at the odometry rate, for ranges
    for k in range(int(DURATION / dt)):
        t = k * dt
        vx, wz = _motion(t, faults)
        xs.append((t, x))
        records.append((T0 + t, '/odom', 'nav_msgs/msg/Odometry',
                        odometry_msg(T0 + t, vx, 0.0, wz, x=x, distro=distro)))
        x += vx * dt

    def x_at(t: float) -> float:
        i = min(int(t / dt), len(xs) - 1)
        return xs[i][1]

    frozen: dict[str, float] = {}
    k = 0
    while k * CYCLE < DURATION:
        fire0 = k * CYCLE
        for slot, name in enumerate(('ahead', 'behind')):
            fire = fire0 + slot * TIMEOUT
            if faults and name == 'behind' and _in(fire0, 14.0, 15.0):
                fire = fire0  # fires together with ahead: crosstalk risk
            if name == 'ahead':
                r = WALL_X - (x_at(fire) + 0.5)
                if faults:
                    if _in(fire, 3.0, 3.5):
                        r = -math.inf
                    elif _in(fire, 5.0, 6.0):
                        r = math.inf
                    elif _in(fire, 9.0, 10.0):
                        r = frozen.setdefault('stuck', r)
                    elif _in(fire, 11.0, 11.04):
                        r -= 1.5
                if math.isfinite(r) and r >= MAX_RANGE:
                    r = math.inf
            else:
                r = math.inf
                if faults and _in(fire, 7.0, 8.0):
                    continue  # silent
            if r == -math.inf:
                tof = 2 * MIN_RANGE / C20  # an echo inside the blind range returns at once
            else:
                tof = 2 * r / C20 if math.isfinite(r) and 0 <= r < MAX_RANGE else TIMEOUT
            stamp = fire + tof
            log = stamp + (0.15 if faults and name == 'behind' and _in(fire, 12.0, 13.0)
                           else 0.0)
            records.append((T0 + log, f'/sonar/{name}', 'sensor_msgs/msg/Range',
                            range_msg(T0 + stamp, f'sonar_{name}', r, min_range=MIN_RANGE,
                                      max_range=MAX_RANGE, field_of_view=FOV,
                                      distro=distro)))
        k += 1
    records.sort(key=lambda rec: rec[0])
    for t, topic, msgtype, msg in records:
        yield topic, msgtype, t, msg


def write_scenario(path: Path, *, storage: str = 'mcap', faults: bool = True) -> Path:
    """Write the scenario as a recording in the given storage; return its path."""
    distro = 'noetic' if storage == 'rosbag1' else 'humble'
    return write_bag(path, scenario(faults=faults, distro=distro), storage=storage,
                     distro=distro)


def storage_file(bag: Path) -> Path:
    """Return the one storage file (.mcap or .db3) of a rosbag2 directory, or the file itself."""
    if bag.is_file():
        return bag
    (found,) = [p for p in bag.iterdir() if p.suffix in ('.mcap', '.db3')]
    return found


def overwrite(path: Path, offset: int, data: bytes) -> None:
    """Overwrite bytes of a file in place (damage, not truncation: the size stays the same)."""
    size = path.stat().st_size
    assert 0 <= offset and offset + len(data) <= size, (offset, len(data), size)
    with path.open('r+b') as fh:
        fh.seek(offset)
        fh.write(data)
    assert path.stat().st_size == size


def mcap_chunk_records(path: Path) -> list[tuple[int, int, int]]:
    """Return (file offset, opcode, length) of the records inside an uncompressed MCAP's first
    chunk. Layout from the MCAP specification (mcap.dev/spec): 8-byte magic, then records of
    opcode uint8 + length uint64 + content; a Chunk (0x06) holds message_start_time,
    message_end_time, uncompressed_size (uint64 each), uncompressed_crc (uint32), compression
    (uint32-length string) and records (uint64-length bytes)."""
    data = path.read_bytes()
    pos = 8
    while True:
        op, length = struct.unpack_from('<BQ', data, pos)
        if op == 0x06:
            break
        pos += 9 + length
    content = pos + 9
    (name_size,) = struct.unpack_from('<I', data, content + 28)
    assert data[content + 32:content + 32 + name_size] == b'', 'chunk is compressed'
    start = content + 32 + name_size
    (size,) = struct.unpack_from('<Q', data, start)
    records, at = [], start + 8
    while at < start + 8 + size:
        op, length = struct.unpack_from('<BQ', data, at)
        records.append((at, op, length))
        at += 9 + length
    return records
