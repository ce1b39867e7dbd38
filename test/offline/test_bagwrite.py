"""write_bag and the message builders: checked against rosbags' own readers."""
from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from rosbags.highlevel import AnyReader
from rosbags.typesys import Stores, get_typestore
from transforms3d.euler import euler2quat

from sonar_guard.offline.bagwrite import (
    odometry_msg,
    range_msg,
    twist_msg,
    typestore_for,
    write_bag,
)

RANGE = 'sensor_msgs/msg/Range'
ODOM = 'nav_msgs/msg/Odometry'
TWIST = 'geometry_msgs/msg/Twist'
STORAGES = [('mcap', 'humble'), ('mcap', 'jazzy'), ('sqlite3', 'humble'), ('rosbag1', 'noetic')]


def sample_records(distro: str) -> list[tuple[str, str, float, Any]]:
    """Return Range, Odometry and Twist records in time order (made-up values)."""
    records: list[tuple[str, str, float, Any]] = []
    for i in range(30):
        t = 1000.0 + 0.05 * i
        records.append(('/sonar/front', RANGE, t, range_msg(
            t - 0.002, 'sonar_front', 0.3 + 0.1 * i, min_range=0.15, max_range=4.0,
            field_of_view=0.4, distro=distro)))
        if i % 3 == 0:
            records.append(('/odom', ODOM, t + 0.01, odometry_msg(
                t, 0.4, 0.05, -0.2, x=1.0 + i, y=-2.0, yaw=0.1 * i, distro=distro)))
        if i % 10 == 0:
            twist = twist_msg(0.5, 0.1, distro=distro)
            records.append(('/cmd_vel_request', TWIST, t + 0.02, twist))
    return records


def read_back(path: Path) -> list[tuple[str, str, int, Any]]:
    """Return (topic, msgtype, log ns, message) read with rosbags' AnyReader (library)."""
    out = []
    # default_typestore only matters for bags without stored definitions; ours carry them.
    with AnyReader([path], default_typestore=get_typestore(Stores.ROS2_HUMBLE)) as reader:
        for conn, log_ns, raw in reader.messages():
            out.append((conn.topic, conn.msgtype, log_ns, reader.deserialize(raw, conn.msgtype)))
    return out


class TestWriteBag:
    """Recordings written here read back identically with rosbags."""

    @pytest.mark.parametrize(('storage', 'distro'), STORAGES)
    def test_rosbags_reads_back_every_record(self, tmp_path, storage, distro):
        """Topics, types, log times and field values survive the round trip."""
        records = sample_records(distro)
        target = tmp_path / ('run.bag' if storage == 'rosbag1' else 'run')
        assert write_bag(target, iter(records), storage=storage, distro=distro) == target
        if storage == 'rosbag1':
            assert target.is_file()
        else:
            assert (target / 'metadata.yaml').is_file()
            suffix = '.mcap' if storage == 'mcap' else '.db3'
            assert len(list(target.glob(f'*{suffix}'))) == 1
        got = read_back(target)
        assert len(got) == len(records)
        for (topic, msgtype, t_s, msg), (g_topic, g_type, g_ns, g_msg) in zip(records, got):
            assert (g_topic, g_type) == (topic, msgtype)
            assert g_ns == round(t_s * 1e9)
            if msgtype == RANGE:
                assert g_msg.header.stamp == msg.header.stamp
                assert g_msg.header.frame_id == msg.header.frame_id
                for name in ('range', 'min_range', 'max_range', 'field_of_view'):
                    # Range floats are float32 on the wire (sensor_msgs/Range definition)
                    assert getattr(g_msg, name) == float(np.float32(getattr(msg, name)))
            elif msgtype == ODOM:
                assert g_msg.header.stamp == msg.header.stamp
                assert g_msg.child_frame_id == 'base_link'
                assert g_msg.twist.twist.linear.x == msg.twist.twist.linear.x
                assert g_msg.twist.twist.angular.z == msg.twist.twist.angular.z
                assert np.array_equal(g_msg.pose.covariance, np.zeros(36))
            else:
                assert g_msg.linear.x == 0.5 and g_msg.angular.z == 0.1

    def test_records_out_of_time_order_are_refused_and_nothing_is_left(self, tmp_path):
        """Time order is required; the partly written recording is removed."""
        records = sample_records('humble')
        records[5], records[6] = records[6], records[5]
        with pytest.raises(ValueError, match=r'record 6 .*before the previous record'):
            write_bag(tmp_path / 'run', records)
        assert not (tmp_path / 'run').exists()

    @pytest.mark.parametrize('storage', ['mcap', 'sqlite3', 'rosbag1'])
    def test_a_failing_generator_leaves_no_partial_output(self, tmp_path, storage):
        """Records are consumed lazily; an error mid-stream removes what was written."""
        distro = 'noetic' if storage == 'rosbag1' else 'humble'
        consumed = []

        def records():
            for record in sample_records(distro)[:10]:
                consumed.append(record)
                yield record
            raise RuntimeError('source failed')

        with pytest.raises(RuntimeError, match='source failed'):
            write_bag(tmp_path / 'out', records(), storage=storage)
        assert len(consumed) == 10
        assert list(tmp_path.iterdir()) == []

    def test_an_existing_path_is_never_overwritten(self, tmp_path):
        """write_bag only creates; an existing file stays as it was."""
        target = tmp_path / 'run.bag'
        target.write_bytes(b'keep me')
        with pytest.raises(FileExistsError):
            write_bag(target, sample_records('noetic'), storage='rosbag1')
        assert target.read_bytes() == b'keep me'

    @pytest.mark.parametrize(('kwargs', 'message'), [
        ({'storage': 'parquet'}, 'storage must be one of'),
        ({'distro': 'rolling-ridley'}, 'distro must be one of'),
        ({'storage': 'rosbag1', 'distro': 'humble'}, 'needs a ROS 1 distro'),
        ({'storage': 'mcap', 'distro': 'noetic'}, 'needs a ROS 2 distro'),
    ])
    def test_bad_storage_or_distro_is_a_value_error(self, tmp_path, kwargs, message):
        """Unknown names and storage/distro mismatches are refused before writing."""
        with pytest.raises(ValueError, match=message):
            write_bag(tmp_path / 'x', [], **kwargs)
        assert not (tmp_path / 'x').exists()

    @pytest.mark.parametrize(('record', 'message'), [
        (('/a', RANGE, -1.0, None), 'finite time >= 0'),
        (('/a', RANGE, math.nan, None), 'finite time >= 0'),
        (('/a', 'acme_msgs/msg/Nothing', 1.0, None), 'not a message type'),
        (('', RANGE, 1.0, None), 'non-empty string'),
        (('/a', RANGE, 1.0), 'is not \\(topic, msgtype, log_time_s, message\\)'),
    ])
    def test_malformed_records_are_value_errors(self, tmp_path, record, message):
        """Each malformed record is refused with a reason."""
        with pytest.raises(ValueError, match=message):
            write_bag(tmp_path / 'x', [record])
        assert not (tmp_path / 'x').exists()

    def test_a_message_of_another_distro_is_named_in_the_error(self, tmp_path):
        """A Humble Range (no variance) cannot be serialized with the Jazzy typestore."""
        msg = range_msg(1.0, 'f', 1.0, min_range=0.1, max_range=4.0, field_of_view=0.4)
        with pytest.raises(ValueError, match=r'record 0 on /s: cannot serialize .* jazzy'):
            write_bag(tmp_path / 'x', [('/s', RANGE, 1.0, msg)], distro='jazzy')
        assert not (tmp_path / 'x').exists()

    def test_an_empty_recording_is_valid(self, tmp_path):
        """No records still makes a recording rosbags opens, with no messages."""
        target = write_bag(tmp_path / 'empty', [])
        assert read_back(target) == []


class TestBuilders:
    """The message builders fill the fields of each distro's types."""

    def test_range_fields_and_stamp_split(self):
        """1234.5 s becomes sec 1234, nanosec 500000000 (builtin_interfaces/Time)."""
        msg = range_msg(1234.5, 'sonar_left', 2.5, min_range=0.2, max_range=5.0,
                        field_of_view=0.5, radiation_type=1)
        assert (msg.header.stamp.sec, msg.header.stamp.nanosec) == (1234, 500_000_000)
        assert (msg.header.frame_id, msg.range, msg.min_range, msg.max_range) == (
            'sonar_left', 2.5, 0.2, 5.0)
        assert (msg.field_of_view, msg.radiation_type) == (0.5, 1)
        assert not hasattr(msg, 'variance')  # Humble's Range has none

    def test_distro_specific_fields_are_filled(self):
        """Jazzy's Range gets variance 0; a Noetic header gets seq 0."""
        assert range_msg(1.0, 'f', 1.0, min_range=0.1, max_range=4.0, field_of_view=0.4,
                         distro='jazzy').variance == 0.0
        assert odometry_msg(1.0, 0.2, distro='noetic').header.seq == 0

    @pytest.mark.parametrize('yaw', [0.0, 0.5, -2.0, math.pi])
    def test_odometry_orientation_is_the_yaw_quaternion(self, yaw):
        """Orientation equals transforms3d's quaternion of (0, 0, yaw) (library reference)."""
        q = odometry_msg(1.0, 0.3, yaw=yaw).pose.pose.orientation
        w, x, y, z = euler2quat(0.0, 0.0, yaw)  # transforms3d: (w, x, y, z), static axes sxyz
        assert np.allclose([q.w, q.x, q.y, q.z], [w, x, y, z], atol=1e-15)

    def test_odometry_twist_is_the_body_velocity(self):
        """vx, vy, wz land in twist.twist (REP 105: in child_frame_id)."""
        msg = odometry_msg(2.0, 0.7, -0.1, 0.3, child_frame_id='base_footprint')
        twist = msg.twist.twist
        assert (twist.linear.x, twist.linear.y, twist.angular.z) == (0.7, -0.1, 0.3)
        assert msg.child_frame_id == 'base_footprint' and msg.header.frame_id == 'odom'

    def test_negative_stamp_is_refused(self):
        """Stamps are times >= 0 s."""
        with pytest.raises(ValueError, match='stamp_s'):
            range_msg(-0.5, 'f', 1.0, min_range=0.1, max_range=4.0, field_of_view=0.4)

    def test_typestore_for_is_cached_and_checks_the_name(self):
        """One typestore per distro; unknown names raise ValueError listing the known ones."""
        assert typestore_for('jazzy') is typestore_for('jazzy')
        with pytest.raises(ValueError, match='humble'):
            typestore_for('nope')
