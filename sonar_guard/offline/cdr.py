"""Fast decoding of sensor_msgs/Range and nav_msgs/Odometry payloads in CDR (rosbag2's format).

A Range in CDR (XCDR1, as rosbag2 stores it) after the 4-byte encapsulation header, with every
primitive aligned to its size counted from the first byte after that header::

    int32 sec | uint32 nanosec | uint32 len, len bytes frame_id incl. NUL | uint8 radiation_type
    | pad to 4 | float32 field_of_view, min_range, max_range, range | float32 variance (Iron+)

Humble's Range has no ``variance``; Iron and later append it. Both are told apart by the payload
length, so one decoder serves every distribution. :func:`decode_range` returns small immutable
records with the message's attribute paths (``msg.header.stamp.sec``, ``msg.range``, ...);
:func:`decode_ranges` decodes many payloads at once with numpy and agrees with it exactly.

An Odometry is a header, a second string (child_frame_id), then 85 float64 aligned to 8:
pose (position xyz, orientation xyzw, 36 covariance) and twist (linear xyz, angular xyz,
36 covariance); the layout is the same in every distribution. :func:`decode_odometry`
returns records with the message's attribute paths (``msg.twist.twist.linear.x``, ...).
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from struct import Struct
from typing import NamedTuple

import numpy as np
import numpy.typing as npt

__all__ = [
    'Header',
    'OdometryMessage',
    'RangeArrays',
    'RangeMessage',
    'Stamp',
    'decode_odometry',
    'decode_range',
    'decode_ranges',
]

_ENCAPSULATION_SIZE = 4
# sec, nanosec and the frame_id length come first at fixed offsets.
_FIXED_HEAD = _ENCAPSULATION_SIZE + 12
# CDR allows padding the payload up to the next multiple of 4; more than that is garbage.
_MAX_TAIL_PADDING = 3


class Stamp(NamedTuple):
    """A builtin_interfaces/Time: whole seconds and nanoseconds (s, ns)."""

    sec: int
    nanosec: int


class Header(NamedTuple):
    """A std_msgs/Header: stamp and coordinate frame."""

    stamp: Stamp
    frame_id: str


class RangeMessage(NamedTuple):
    """A sensor_msgs/Range (m, rad); ``variance`` (m^2) is 0.0 where the payload lacks it."""

    header: Header
    radiation_type: int
    field_of_view: float
    min_range: float
    max_range: float
    range: float
    variance: float


def _align4(pos: int) -> int:
    """Return ``pos`` advanced to 4-byte alignment counted from the end of the encapsulation."""
    return _ENCAPSULATION_SIZE + ((pos - _ENCAPSULATION_SIZE + 3) & ~3)


def _byte_order(raw: bytes | memoryview) -> str:
    """Return the struct byte order of a CDR payload, or raise ValueError naming the problem."""
    if len(raw) < _ENCAPSULATION_SIZE:
        raise ValueError(f'Range payload of {len(raw)} bytes is shorter than the 4-byte CDR '
                         'encapsulation header')
    if raw[0] != 0 or raw[1] not in (0, 1):
        raise ValueError(f'unsupported CDR encapsulation {bytes(raw[:4]).hex(" ")}; expected '
                         '00 01 (little endian) or 00 00 (big endian)')
    return '<' if raw[1] else '>'


def _layout(size: int, str_len: int) -> tuple[int, int, bool]:
    """Return (radiation offset, float block offset, has variance) for one payload layout.

    Raises ValueError when ``size`` bytes cannot hold a Range whose frame_id takes ``str_len``
    bytes (terminator included), or hold more than a Range plus alignment padding.
    """
    if str_len < 1:
        raise ValueError('frame_id length is 0; CDR strings count their terminating NUL')
    radiation_at = _FIXED_HEAD + str_len
    floats_at = _align4(radiation_at + 1)
    tail = size - (floats_at + 16)
    if tail < 0:
        raise ValueError(f'Range payload of {size} bytes is truncated: frame_id of {str_len - 1} '
                         f'bytes needs {floats_at + 16} bytes')
    has_variance = tail >= 4
    if tail - 4 * has_variance > _MAX_TAIL_PADDING:
        raise ValueError(f'Range payload of {size} bytes has {tail - 4 * has_variance} bytes '
                         'after its last field; it is not a sensor_msgs/Range')
    return radiation_at, floats_at, has_variance


_HEAD = {'<': Struct('<iII'), '>': Struct('>iII')}
_FLOATS = {'<': Struct('<4f'), '>': Struct('>4f')}
_FLOAT = {'<': Struct('<f'), '>': Struct('>f')}
_new = tuple.__new__  # builds the records without NamedTuple's Python-level __new__ (speed)


def decode_range(raw: bytes | memoryview) -> RangeMessage:
    """Decode one CDR sensor_msgs/Range payload (with its encapsulation header).

    Raises ValueError naming the problem for short, garbled or foreign payloads.
    """
    order = _byte_order(raw)
    size = len(raw)
    if size < _FIXED_HEAD:
        raise ValueError(f'Range payload of {size} bytes is truncated: the header needs '
                         f'{_FIXED_HEAD} bytes')
    sec, nanosec, str_len = _HEAD[order].unpack_from(raw, _ENCAPSULATION_SIZE)
    radiation_at, floats_at, has_variance = _layout(size, str_len)
    if raw[radiation_at - 1] != 0:
        raise ValueError('frame_id lacks its terminating NUL; the payload is garbled')
    try:
        frame_id = str(raw[_FIXED_HEAD:radiation_at - 1], 'utf-8')
    except UnicodeDecodeError as err:
        raise ValueError(f'frame_id is not valid UTF-8 ({err.reason})') from None
    # _layout has checked the size, so these unpacks cannot run short.
    fov, min_range, max_range, range_m = _FLOATS[order].unpack_from(raw, floats_at)
    variance = _FLOAT[order].unpack_from(raw, floats_at + 16)[0] if has_variance else 0.0
    header = _new(Header, (_new(Stamp, (sec, nanosec)), frame_id))
    return _new(RangeMessage, (header, raw[radiation_at], fov, min_range, max_range, range_m,
                               variance))


@dataclass(frozen=True, slots=True)
class RangeArrays:
    """Many decoded Range payloads as columns, in input order (s, ns, m, rad, m^2)."""

    sec: npt.NDArray[np.int32]
    nanosec: npt.NDArray[np.uint32]
    stamp_s: npt.NDArray[np.float64]
    """``sec + nanosec * 1e-9`` in float64, the same arithmetic as ros.convert.stamp_to_s."""
    radiation_type: npt.NDArray[np.uint8]
    field_of_view: npt.NDArray[np.float32]
    min_range: npt.NDArray[np.float32]
    max_range: npt.NDArray[np.float32]
    range: npt.NDArray[np.float32]
    variance: npt.NDArray[np.float32]
    frame_id: list[str]

    def __len__(self) -> int:
        """Return the number of payloads."""
        return len(self.frame_id)


_FLOAT_FIELDS = ('field_of_view', 'min_range', 'max_range', 'range')


def _group_dtype(order: str, size: int, str_len: int) -> np.dtype[np.void]:
    """Return a structured dtype over one whole payload of a fixed layout."""
    radiation_at, floats_at, has_variance = _layout(size, str_len)
    names = ['sec', 'nanosec', 'frame', 'nul', 'radiation_type', *_FLOAT_FIELDS]
    formats: list[object] = [order + 'i4', order + 'u4', ('u1', (str_len - 1,)), 'u1', 'u1']
    formats += [order + 'f4'] * 4
    offsets = [4, 8, _FIXED_HEAD, radiation_at - 1, radiation_at]
    offsets += [floats_at + 4 * k for k in range(4)]
    if has_variance:
        names.append('variance')
        formats.append(order + 'f4')
        offsets.append(floats_at + 16)
    return np.dtype({'names': names, 'formats': formats, 'offsets': offsets, 'itemsize': size})


def _first_error(raws: Sequence[bytes | memoryview], indices: npt.NDArray[np.intp]) -> ValueError:
    """Return decode_range's error for the first failing payload among ``indices``."""
    for i in indices.tolist():
        try:
            decode_range(raws[i])
        except ValueError as err:
            return ValueError(f'payload {i}: {err}')
    raise AssertionError('bulk and scalar Range decoding disagree')  # a bug, not bad data


def decode_ranges(raws: Sequence[bytes | memoryview]) -> RangeArrays:
    """Decode many CDR sensor_msgs/Range payloads at once into numpy columns.

    Payloads are grouped by layout (byte order, frame_id length, total size) so each group is
    one ``np.frombuffer`` over its joined bytes. Values equal :func:`decode_range`'s exactly;
    a bad payload raises decode_range's ValueError prefixed with the payload's index.
    """
    count = len(raws)
    if count == 0:
        empty = np.empty(0, np.float32)
        return RangeArrays(np.empty(0, np.int32), np.empty(0, np.uint32), np.empty(0),
                           np.empty(0, np.uint8), empty, empty.copy(), empty.copy(),
                           empty.copy(), empty.copy(), [])
    sizes = np.fromiter((len(r) for r in raws), dtype=np.int64, count=count)
    short = np.flatnonzero(sizes < _FIXED_HEAD)
    if short.size:
        raise _first_error(raws, short)
    ends = np.cumsum(sizes)
    starts = ends - sizes
    flat = np.frombuffer(b''.join(raws), dtype=np.uint8)
    little = flat[starts + 1] == 1
    bad = np.flatnonzero((flat[starts] != 0) | (flat[starts + 1] > 1))
    if bad.size:
        raise _first_error(raws, bad)
    head = [flat[starts + 12 + k].astype(np.int64) for k in range(4)]
    str_lens = np.where(little,
                        head[0] | head[1] << 8 | head[2] << 16 | head[3] << 24,
                        head[3] | head[2] << 8 | head[1] << 16 | head[0] << 24)
    del flat, head

    out = {
        'sec': np.empty(count, np.int32), 'nanosec': np.empty(count, np.uint32),
        'radiation_type': np.empty(count, np.uint8), 'variance': np.zeros(count, np.float32),
    }
    out.update({name: np.empty(count, np.float32) for name in _FLOAT_FIELDS})
    frame_ids: list[str] = [''] * count

    # Group payloads of one layout: sort by (byte order, frame_id length, size), split on change.
    order_idx = np.lexsort((sizes, str_lens, little))
    keys = np.stack([little[order_idx], str_lens[order_idx], sizes[order_idx]], axis=1)
    cuts = np.flatnonzero(np.any(keys[1:] != keys[:-1], axis=1)) + 1
    bounds = [0, *cuts.tolist(), count]
    for lo, hi in zip(bounds[:-1], bounds[1:]):
        idx = order_idx[lo:hi]
        is_little, str_len, size = keys[lo].tolist()
        try:
            dtype = _group_dtype('<' if is_little else '>', size, str_len)
        except ValueError:
            raise _first_error(raws, idx) from None
        rows = np.frombuffer(b''.join([raws[i] for i in idx.tolist()]), dtype=dtype)
        if np.any(rows['nul'] != 0):
            raise _first_error(raws, idx[rows['nul'] != 0])
        for name in ('sec', 'nanosec', 'radiation_type', *_FLOAT_FIELDS):
            out[name][idx] = rows[name]
        if 'variance' in dtype.names:
            out['variance'][idx] = rows['variance']
        if str_len == 1:
            continue  # empty frame_ids: the '' already in place
        # Fixed-width byte strings: numpy's 'S' drops trailing NULs, but at one width that
        # mapping is one-to-one, so it is a safe key; the text comes from the exact bytes.
        frames = np.ascontiguousarray(rows['frame']).view(f'S{str_len - 1}').ravel()
        _, first, which = np.unique(frames, return_index=True, return_inverse=True)
        try:
            names = [str(rows['frame'][j].tobytes(), 'utf-8') for j in first.tolist()]
        except UnicodeDecodeError:
            raise _first_error(raws, idx) from None
        for i, w in zip(idx.tolist(), which.ravel().tolist()):
            frame_ids[i] = names[w]

    stamp_s = out['sec'].astype(np.float64) + out['nanosec'].astype(np.float64) * 1e-9
    return RangeArrays(stamp_s=stamp_s, frame_id=frame_ids, **out)


class Vector3(NamedTuple):
    """A geometry_msgs/Vector3 or Point (x, y, z)."""

    x: float
    y: float
    z: float


class Quaternion(NamedTuple):
    """A geometry_msgs/Quaternion (x, y, z, w)."""

    x: float
    y: float
    z: float
    w: float


class Pose(NamedTuple):
    """A geometry_msgs/Pose: position (m) and orientation."""

    position: Vector3
    orientation: Quaternion


class PoseWithCovariance(NamedTuple):
    """A geometry_msgs/PoseWithCovariance: pose and a row-major 6x6 covariance."""

    pose: Pose
    covariance: tuple[float, ...]


class Twist(NamedTuple):
    """A geometry_msgs/Twist: linear (m/s) and angular (rad/s) velocity."""

    linear: Vector3
    angular: Vector3


class TwistWithCovariance(NamedTuple):
    """A geometry_msgs/TwistWithCovariance: twist and a row-major 6x6 covariance."""

    twist: Twist
    covariance: tuple[float, ...]


class OdometryMessage(NamedTuple):
    """A nav_msgs/Odometry: header, child frame, pose and twist with covariances."""

    header: Header
    child_frame_id: str
    pose: PoseWithCovariance
    twist: TwistWithCovariance


_ODOM_DOUBLES = 7 + 36 + 6 + 36
_ODOM_BODY = {'<': Struct(f'<{_ODOM_DOUBLES}d'), '>': Struct(f'>{_ODOM_DOUBLES}d')}
_UINT32 = {'<': Struct('<I'), '>': Struct('>I')}


def _cdr_string(raw: bytes | memoryview, pos: int, order: str, what: str) -> tuple[str, int]:
    """Read a CDR string whose length field starts at ``pos``; return (text, end position)."""
    if len(raw) < pos + 4:
        raise ValueError(f'Odometry payload of {len(raw)} bytes is truncated in {what}')
    (length,) = _UINT32[order].unpack_from(raw, pos)
    end = pos + 4 + length
    if length < 1 or len(raw) < end:
        raise ValueError(f'Odometry payload of {len(raw)} bytes is truncated in {what} '
                         f'(length {length})')
    if raw[end - 1] != 0:
        raise ValueError(f'{what} lacks its terminating NUL; the payload is garbled')
    try:
        return str(raw[pos + 4:end - 1], 'utf-8'), end
    except UnicodeDecodeError as err:
        raise ValueError(f'{what} is not valid UTF-8 ({err.reason})') from None


def decode_odometry(raw: bytes | memoryview) -> OdometryMessage:
    """Decode one CDR nav_msgs/Odometry payload (with its encapsulation header).

    Raises ValueError naming the problem for short, garbled or foreign payloads.
    """
    order = _byte_order(raw)
    size = len(raw)
    if size < _FIXED_HEAD:
        raise ValueError(f'Odometry payload of {size} bytes is truncated: the header needs '
                         f'{_FIXED_HEAD} bytes')
    sec, nanosec = _HEAD[order].unpack_from(raw, _ENCAPSULATION_SIZE)[:2]
    frame_id, pos = _cdr_string(raw, _ENCAPSULATION_SIZE + 8, order, 'frame_id')
    child, pos = _cdr_string(raw, _align4(pos), order, 'child_frame_id')
    body_at = _ENCAPSULATION_SIZE + ((pos - _ENCAPSULATION_SIZE + 7) & ~7)  # float64: align 8
    body = _ODOM_BODY[order]
    tail = size - (body_at + body.size)
    if tail < 0:
        raise ValueError(f'Odometry payload of {size} bytes is truncated: it needs '
                         f'{body_at + body.size} bytes')
    if tail > _MAX_TAIL_PADDING:
        raise ValueError(f'Odometry payload of {size} bytes has {tail} bytes after its last '
                         'field; it is not a nav_msgs/Odometry')
    d = body.unpack_from(raw, body_at)
    header = _new(Header, (_new(Stamp, (sec, nanosec)), frame_id))
    pose = _new(Pose, (_new(Vector3, d[0:3]), _new(Quaternion, d[3:7])))
    twist = _new(Twist, (_new(Vector3, d[43:46]), _new(Vector3, d[46:49])))
    return _new(OdometryMessage, (header, child, _new(PoseWithCovariance, (pose, d[7:43])),
                                  _new(TwistWithCovariance, (twist, d[49:85]))))
