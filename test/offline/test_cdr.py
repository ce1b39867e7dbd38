"""The fast Range decoder agrees with rosbags' deserializer and rejects damaged payloads."""
from __future__ import annotations

import struct
from typing import Any

from hypothesis import given, settings
from hypothesis import strategies as st
import numpy as np
import pytest
from rosbags.serde import SerdeError
from rosbags.typesys import Stores, get_typestore

from sonar_guard.offline.cdr import RangeMessage, decode_odometry, decode_range, decode_ranges
from sonar_guard.ros.convert import stamp_to_s

RANGE = 'sensor_msgs/msg/Range'
# rosbags deserializer (library reference): Humble's Range has no variance, Jazzy's has one.
STORES = {'humble': get_typestore(Stores.ROS2_HUMBLE), 'jazzy': get_typestore(Stores.ROS2_JAZZY)}

float32s = st.floats(width=32)  # every float32 incl. +/-inf, NaN, -0.0 and subnormals
frame_ids = st.text(st.characters(codec='utf-8'), max_size=40)


def build_range(store: Any, *, sec: int, nanosec: int, frame_id: str, radiation: int,
                floats: tuple[float, float, float, float], variance: float) -> Any:
    """Return a rosbags Range of ``store`` (variance only where the type has it)."""
    types = store.types
    header = types['std_msgs/msg/Header'](
        stamp=types['builtin_interfaces/msg/Time'](sec=sec, nanosec=nanosec), frame_id=frame_id)
    fov, min_range, max_range, range_m = floats
    extra = {'variance': variance} if 'variance' in types[RANGE].__dataclass_fields__ else {}
    return types[RANGE](header=header, radiation_type=radiation, field_of_view=fov,
                        min_range=min_range, max_range=max_range, range=range_m, **extra)


@st.composite
def payloads(draw: st.DrawFn) -> tuple[str, bytes]:
    """Draw (distro, CDR payload) of a random Range, little or big endian."""
    distro = draw(st.sampled_from(sorted(STORES)))
    store = STORES[distro]
    msg = build_range(
        store,
        sec=draw(st.integers(-2**31, 2**31 - 1)),
        nanosec=draw(st.integers(0, 2**32 - 1)),
        frame_id=draw(frame_ids),
        radiation=draw(st.integers(0, 255)),
        floats=(draw(float32s), draw(float32s), draw(float32s), draw(float32s)),
        variance=draw(float32s),
    )
    little = draw(st.booleans())
    return distro, bytes(store.serialize_cdr(msg, RANGE, little_endian=little))


def bits(value: float) -> bytes:
    """Return the float64 bit pattern, so NaN equals NaN and -0.0 differs from 0.0."""
    return struct.pack('<d', value)


def assert_matches_reference(ours: RangeMessage, ref: Any) -> None:
    """Check every field of our decoding against rosbags' message."""
    assert ours.header.stamp.sec == ref.header.stamp.sec
    assert ours.header.stamp.nanosec == ref.header.stamp.nanosec
    assert ours.header.frame_id == ref.header.frame_id
    assert ours.radiation_type == ref.radiation_type
    for name in ('field_of_view', 'min_range', 'max_range', 'range'):
        assert bits(getattr(ours, name)) == bits(getattr(ref, name)), name
    # Humble has no variance field: the decoder reports 0.0 there (cdr.py docstring).
    assert bits(ours.variance) == bits(getattr(ref, 'variance', 0.0))


class TestDecodeRange:
    """decode_range against rosbags' own CDR deserializer."""

    @settings(max_examples=400, deadline=None)
    @given(payloads())
    def test_every_field_equals_the_rosbags_deserializer(self, case):
        """Random Range payloads of both distros and byte orders decode like rosbags does."""
        distro, raw = case
        # rosbags deserializer (library reference)
        ref = STORES[distro].deserialize_cdr(raw, RANGE)
        assert_matches_reference(decode_range(raw), ref)
        assert_matches_reference(decode_range(memoryview(raw)), ref)

    def test_byte_orders_are_told_apart_by_the_encapsulation_header(self):
        """00 01 is little endian and 00 00 big endian; both give the same message."""
        store = STORES['jazzy']
        msg = build_range(store, sec=7, nanosec=250, frame_id='sonar_left', radiation=0,
                          floats=(0.5, 0.02, 4.0, 1.25), variance=0.01)
        little = bytes(store.serialize_cdr(msg, RANGE, little_endian=True))
        big = bytes(store.serialize_cdr(msg, RANGE, little_endian=False))
        assert little[:2] == b'\x00\x01' and big[:2] == b'\x00\x00'  # CDR encapsulation ids
        assert little != big
        assert decode_range(little) == decode_range(big)
        assert decode_range(big).range == 1.25 and decode_range(big).variance == np.float32(0.01)

    def test_humble_payload_has_zero_variance_and_jazzy_keeps_it(self):
        """The same reading in Humble (no variance field) and Jazzy layouts."""
        kwargs: dict[str, Any] = dict(sec=1, nanosec=2, frame_id='f', radiation=1,
                                      floats=(0.4, 0.1, 3.0, 2.0), variance=0.25)
        humble = STORES['humble'].serialize_cdr(build_range(STORES['humble'], **kwargs), RANGE)
        jazzy = STORES['jazzy'].serialize_cdr(build_range(STORES['jazzy'], **kwargs), RANGE)
        assert len(jazzy) == len(humble) + 4  # one float32 more (sensor_msgs/Range, Iron+)
        assert decode_range(humble).variance == 0.0
        assert decode_range(jazzy).variance == 0.25
        assert decode_range(humble)._replace(variance=0.25) == decode_range(jazzy)


def humble_payload(frame_id: str = 'sonar_front') -> bytes:
    """Return a little-endian Humble Range payload."""
    store = STORES['humble']
    msg = build_range(store, sec=3, nanosec=4, frame_id=frame_id, radiation=0,
                      floats=(0.4, 0.15, 4.0, 1.5), variance=0.0)
    return bytes(store.serialize_cdr(msg, RANGE, little_endian=True))


class TestDamagedPayloads:
    """Short or garbled payloads raise ValueError naming the problem."""

    @pytest.mark.parametrize('frame_id', ['', 'a', 'abc', 'sonar_front'])
    def test_every_truncation_of_a_humble_payload_is_rejected(self, frame_id):
        """Each prefix of a Humble Range is refused, as rosbags refuses it too."""
        raw = humble_payload(frame_id)
        for cut in range(len(raw)):
            with pytest.raises(ValueError, match=r'truncated|shorter|length|NUL'):
                decode_range(raw[:cut])
            with pytest.raises(SerdeError):  # rosbags deserializer (library reference)
                STORES['humble'].deserialize_cdr(raw[:cut], RANGE)

    def test_jazzy_payload_cut_before_the_variance_reads_as_humble(self):
        """Without its last float a Jazzy payload is a valid Humble one: the format allows it."""
        store = STORES['jazzy']
        msg = build_range(store, sec=3, nanosec=4, frame_id='x', radiation=0,
                          floats=(0.4, 0.15, 4.0, 1.5), variance=0.5)
        raw = bytes(store.serialize_cdr(msg, RANGE))
        assert decode_range(raw[:-4]).variance == 0.0
        assert decode_range(raw[:-4])._replace(variance=0.5) == decode_range(raw)
        for cut in range(len(raw) - 4):
            with pytest.raises(ValueError):
                decode_range(raw[:cut])

    @pytest.mark.parametrize(('mutate', 'message'), [
        (lambda b: b[:1] + b'\x02' + b[2:], 'encapsulation'),          # 00 02: not plain CDR
        (lambda b: b'\x01' + b[1:], 'encapsulation'),
        (lambda b: b[:12] + struct.pack('<I', 0) + b[16:], 'length is 0'),
        (lambda b: b[:12] + struct.pack('<I', 10**6) + b[16:], 'truncated'),
        (lambda b: b[:27] + b'X' + b[28:], 'NUL'),                     # terminator overwritten
        (lambda b: b[:16] + b'\xff' + b[17:], 'UTF-8'),
        (lambda b: b + bytes(8), 'after its last field'),              # 8 stray bytes
    ])
    def test_garbled_payloads_name_the_problem(self, mutate, message):
        """Each kind of damage gives a ValueError that says what is wrong."""
        raw = mutate(humble_payload('sonar_front'))  # frame_id bytes 16..26, NUL at 27
        with pytest.raises(ValueError, match=message):
            decode_range(raw)

    def test_up_to_three_padding_bytes_are_accepted_like_rosbags_does(self):
        """CDR may pad a payload to a multiple of 4; rosbags accepts 3 spare bytes, so do we."""
        raw = humble_payload() + bytes(3)
        ref = STORES['humble'].deserialize_cdr(raw, RANGE)  # rosbags deserializer (reference)
        assert_matches_reference(decode_range(raw), ref)


class TestDecodeRanges:
    """The bulk numpy decoder agrees exactly with the scalar one."""

    @settings(max_examples=150, deadline=None)
    @given(st.lists(payloads(), max_size=30))
    def test_bulk_columns_equal_scalar_decoding(self, cases):
        """Mixed distros, byte orders and frame_id lengths decode to the same values."""
        raws = [raw for _, raw in cases]
        bulk = decode_ranges(raws)
        assert len(bulk) == len(raws)
        for i, raw in enumerate(raws):
            one = decode_range(raw)
            assert int(bulk.sec[i]) == one.header.stamp.sec
            assert int(bulk.nanosec[i]) == one.header.stamp.nanosec
            assert bits(float(bulk.stamp_s[i])) == bits(stamp_to_s(one.header.stamp))
            assert bulk.frame_id[i] == one.header.frame_id
            assert int(bulk.radiation_type[i]) == one.radiation_type
            for name in ('field_of_view', 'min_range', 'max_range', 'range', 'variance'):
                assert bits(float(getattr(bulk, name)[i])) == bits(getattr(one, name)), name

    def test_columns_have_the_documented_dtypes(self):
        """float64 stamps, float32 ranges, uint8 radiation type."""
        bulk = decode_ranges([humble_payload('a'), humble_payload('bb'), humble_payload('a')])
        assert bulk.stamp_s.dtype == np.float64
        assert bulk.range.dtype == np.float32 and bulk.variance.dtype == np.float32
        assert bulk.radiation_type.dtype == np.uint8
        assert bulk.frame_id == ['a', 'bb', 'a']

    def test_empty_input_gives_empty_columns(self):
        """No payloads, no rows."""
        bulk = decode_ranges([])
        assert len(bulk) == 0 and bulk.range.shape == (0,)

    @pytest.mark.parametrize('bad', [b'\x00\x01', humble_payload()[:-1],
                                     humble_payload()[:27] + b'X' + humble_payload()[28:]])
    def test_a_bad_payload_raises_with_its_index(self, bad):
        """The first damaged payload is named by its position, with the scalar reason."""
        with pytest.raises(ValueError) as scalar:
            decode_range(bad)
        with pytest.raises(ValueError, match=r'^payload 1: ') as bulk:
            decode_ranges([humble_payload(), bad, humble_payload()])
        assert str(bulk.value) == f'payload 1: {scalar.value}'


ODOMETRY = 'nav_msgs/msg/Odometry'
float64s = st.floats(allow_nan=True, allow_infinity=True)


@st.composite
def odometry_payloads(draw: st.DrawFn) -> tuple[str, bytes]:
    """Draw (distro, CDR payload) of a random Odometry, little or big endian."""
    distro = draw(st.sampled_from(sorted(STORES)))
    store = STORES[distro]
    types = store.types
    vec = types['geometry_msgs/msg/Vector3']
    header = types['std_msgs/msg/Header'](
        stamp=types['builtin_interfaces/msg/Time'](sec=draw(st.integers(-2**31, 2**31 - 1)),
                                                   nanosec=draw(st.integers(0, 2**32 - 1))),
        frame_id=draw(frame_ids))
    doubles = draw(st.lists(float64s, min_size=85, max_size=85))
    pose = types['geometry_msgs/msg/Pose'](
        position=types['geometry_msgs/msg/Point'](*doubles[0:3]),
        orientation=types['geometry_msgs/msg/Quaternion'](*doubles[3:7]))
    twist = types['geometry_msgs/msg/Twist'](linear=vec(*doubles[43:46]),
                                             angular=vec(*doubles[46:49]))
    msg = types[ODOMETRY](
        header=header, child_frame_id=draw(frame_ids),
        pose=types['geometry_msgs/msg/PoseWithCovariance'](
            pose=pose, covariance=np.array(doubles[7:43])),
        twist=types['geometry_msgs/msg/TwistWithCovariance'](
            twist=twist, covariance=np.array(doubles[49:85])))
    return distro, bytes(store.serialize_cdr(msg, ODOMETRY, little_endian=draw(st.booleans())))


def odometry_doubles(msg: Any) -> list[bytes]:
    """Every float64 of an Odometry in message order, as bit patterns."""
    p, t = msg.pose.pose, msg.twist.twist
    values = [p.position.x, p.position.y, p.position.z, p.orientation.x, p.orientation.y,
              p.orientation.z, p.orientation.w, *list(msg.pose.covariance),
              t.linear.x, t.linear.y, t.linear.z, t.angular.x, t.angular.y, t.angular.z,
              *list(msg.twist.covariance)]
    return [bits(float(v)) for v in values]


class TestDecodeOdometry:
    """decode_odometry against rosbags' own CDR deserializer."""

    @settings(max_examples=300, deadline=None)
    @given(odometry_payloads())
    def test_every_field_equals_the_rosbags_deserializer(self, case):
        """Random Odometry payloads of both distros and byte orders decode like rosbags does."""
        distro, raw = case
        ref = STORES[distro].deserialize_cdr(raw, ODOMETRY)  # library reference
        ours = decode_odometry(raw)
        assert ours.header.stamp.sec == ref.header.stamp.sec
        assert ours.header.stamp.nanosec == ref.header.stamp.nanosec
        assert ours.header.frame_id == ref.header.frame_id
        assert ours.child_frame_id == ref.child_frame_id
        assert odometry_doubles(ours) == odometry_doubles(ref)
        assert odometry_doubles(decode_odometry(memoryview(raw))) == odometry_doubles(ref)

    @pytest.mark.parametrize('frames', [('', ''), ('odom', 'base_link'), ('a', 'abcdefgh')])
    def test_every_truncation_is_rejected(self, frames):
        """Each prefix of an Odometry payload is refused, as rosbags refuses it too."""
        store = STORES['humble']
        types = store.types
        msg = types[ODOMETRY](
            header=types['std_msgs/msg/Header'](
                stamp=types['builtin_interfaces/msg/Time'](sec=1, nanosec=2),
                frame_id=frames[0]),
            child_frame_id=frames[1],
            pose=types['geometry_msgs/msg/PoseWithCovariance'](
                pose=types['geometry_msgs/msg/Pose'](
                    position=types['geometry_msgs/msg/Point'](1.0, 2.0, 3.0),
                    orientation=types['geometry_msgs/msg/Quaternion'](0.0, 0.0, 0.0, 1.0)),
                covariance=np.zeros(36)),
            twist=types['geometry_msgs/msg/TwistWithCovariance'](
                twist=types['geometry_msgs/msg/Twist'](
                    linear=types['geometry_msgs/msg/Vector3'](0.5, 0.0, 0.0),
                    angular=types['geometry_msgs/msg/Vector3'](0.0, 0.0, 0.1)),
                covariance=np.zeros(36)))
        raw = bytes(store.serialize_cdr(msg, ODOMETRY))
        assert decode_odometry(raw).twist.twist.linear.x == 0.5
        for cut in range(len(raw) - 7):  # the last 7 bytes cannot hold another float64
            with pytest.raises(ValueError, match=r'truncated|shorter|NUL'):
                decode_odometry(raw[:cut])
        with pytest.raises(ValueError, match='not a nav_msgs/Odometry'):
            decode_odometry(raw + bytes(8))

    def test_a_range_payload_is_not_an_odometry(self):
        """A foreign payload is refused with a reason, not misread."""
        with pytest.raises(ValueError):
            decode_odometry(humble_payload())
