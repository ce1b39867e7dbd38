"""BagSource: every storage reads back what was written; bad and damaged files give one line.

Reference for damaged files: rosbags' own readers, which refuse a truncated MCAP, SQLite3 or
ROS 1 file at open (shown here), and its MCAP chunk index of the intact file, which says how
many messages the complete chunks before a cut hold.
"""
from __future__ import annotations

import math
import os
from pathlib import Path
import random
import shutil
import sqlite3
import struct
from typing import Any

import numpy as np
import pytest
from rosbags.highlevel import AnyReader, AnyReaderError
from rosbags.rosbag1 import Writer as Writer1
from rosbags.rosbag2 import CompressionFormat, CompressionMode, StoragePlugin
from rosbags.rosbag2 import Writer as Writer2
from rosbags.rosbag2.storage_mcap import McapReader

from sonar_guard.errors import RecordingError
from sonar_guard.offline.bags import (
    ODOMETRY_TYPE,
    RANGE_TYPE,
    TWIST_TYPE,
    BagSource,
    TopicInfo,
)
from sonar_guard.offline.bagwrite import (
    odometry_msg,
    range_msg,
    twist_msg,
    typestore_for,
    write_bag,
)
from sonar_guard.offline.cdr import RangeMessage
from sonar_guard.ros.convert import odometry_to_sample, range_to_reading, stamp_to_s

STRING_TYPE = 'std_msgs/msg/String'
STORAGES = [('mcap', 'humble'), ('mcap', 'jazzy'), ('sqlite3', 'humble'), ('rosbag1', 'noetic')]
FLOAT_FIELDS = ('range', 'min_range', 'max_range', 'field_of_view')


def sample_records(distro: str, steps: int = 40) -> list[tuple[str, str, float, Any]]:
    """Return two sonars, odometry and commands in time order (made-up values, distinct times)."""
    records: list[tuple[str, str, float, Any]] = []
    for i in range(steps):
        t = 500.0 + 0.05 * i
        for k, side in enumerate(('front', 'left')):
            # includes the REP 117 specials: +inf no return, -inf too close, NaN invalid
            value = [0.37 + 0.01 * i, math.inf, -math.inf, math.nan][(i + k) % 4]
            records.append((f'/sonar/{side}', RANGE_TYPE, t + 0.001 * k, range_msg(
                t - 0.003, f'sonar_{side}', value, min_range=0.15, max_range=4.0,
                field_of_view=0.4 + 0.1 * k, radiation_type=k, distro=distro)))
        if i % 2 == 0:
            records.append(('/odom', ODOMETRY_TYPE, t + 0.004, odometry_msg(
                t, 0.3 + 0.01 * i, 0.02, -0.1, distro=distro)))
        if i % 8 == 0:
            records.append(('/cmd_vel_request', TWIST_TYPE, t + 0.005,
                            twist_msg(0.6, 0.2, distro=distro)))
    return records


def write(tmp_path: Path, storage: str, distro: str, records: list[Any] | None = None,
          name: str = 'run') -> Path:
    """Write sample records to ``tmp_path/name`` (.bag for ROS 1) and return the path."""
    target = tmp_path / (f'{name}.bag' if storage == 'rosbag1' else name)
    return write_bag(target, records if records is not None else sample_records(distro),
                     storage=storage, distro=distro)


def storage_file(path: Path) -> Path:
    """Return the one .mcap or .db3 file of a rosbag2 directory."""
    (found,) = [p for p in path.iterdir() if p.suffix in ('.mcap', '.db3')]
    return found


def same_float(a: float, b: float) -> bool:
    """Return whether two floats are equal, NaN matching NaN."""
    return (math.isnan(a) and math.isnan(b)) or a == b


def assert_same_message(got: Any, want: Any, msgtype: str) -> None:
    """Check the fields the checker reads (ros/convert.py) against the written message."""
    if msgtype == RANGE_TYPE:
        assert got.header.stamp.sec == want.header.stamp.sec
        assert got.header.stamp.nanosec == want.header.stamp.nanosec
        assert got.header.frame_id == want.header.frame_id
        assert got.radiation_type == want.radiation_type
        for name in FLOAT_FIELDS:  # float32 on the wire (sensor_msgs/Range definition)
            assert same_float(getattr(got, name), float(np.float32(getattr(want, name)))), name
    elif msgtype == ODOMETRY_TYPE:
        assert stamp_to_s(got.header.stamp) == stamp_to_s(want.header.stamp)
        for part in ('linear', 'angular'):
            for axis in 'xyz':
                assert (getattr(getattr(got.twist.twist, part), axis)
                        == getattr(getattr(want.twist.twist, part), axis))
    else:
        assert (got.linear.x, got.angular.z) == (want.linear.x, want.angular.z)


def read_all(path: Path, topics: Any = None) -> list[tuple[str, float, Any]]:
    """Return every message BagSource yields for ``topics`` (default: all topics)."""
    with BagSource(path) as bag:
        return list(bag.messages(bag.topics if topics is None else topics))


class TestRoundTrip:
    """What write_bag writes, BagSource reads back: topics, counts, order, times, values."""

    @pytest.mark.parametrize(('storage', 'distro'), STORAGES)
    def test_every_record_comes_back_in_time_order(self, tmp_path, storage, distro):
        """Same topics, types, counts, order, log times and field values in each storage."""
        records = sample_records(distro)
        path = write(tmp_path, storage, distro, records)
        targets = [path] if storage == 'rosbag1' else [path, storage_file(path)]
        for target in targets:  # the directory and its storage file alone
            with BagSource(target) as bag:
                assert bag.storage == storage
                assert bag.damage is None
                assert bag.message_count == len(records)
                counts: dict[str, int] = {}
                for topic, _, _, _ in records:
                    counts[topic] = counts.get(topic, 0) + 1
                types = {topic: msgtype for topic, msgtype, _, _ in records}
                assert bag.topics == {t: TopicInfo(t, types[t], n) for t, n in counts.items()}
                assert bag.start_s == pytest.approx(records[0][2], abs=1e-9)
                assert bag.end_s == pytest.approx(records[-1][2], abs=1e-9)
                got = list(bag.messages(bag.topics))
                assert bag.read_count == len(records)
            assert [g[0] for g in got] == [r[0] for r in records]
            for (_, log_s, msg), (_, msgtype, want_s, want) in zip(got, records):
                assert log_s == pytest.approx(want_s, abs=1e-9)  # ns in the file
                assert_same_message(msg, want, msgtype)

    @pytest.mark.parametrize(('storage', 'distro'), STORAGES)
    def test_messages_feed_the_conversion_seam(self, tmp_path, storage, distro):
        """Decoded Range and Odometry convert to core inputs (ros/convert.py, the consumer)."""
        path = write(tmp_path, storage, distro)
        with BagSource(path) as bag:
            for topic, log_s, msg in bag.messages(['/sonar/front', '/odom']):
                if topic == '/odom':
                    assert odometry_to_sample(msg, log_s).vx_mps > 0.29
                else:
                    reading = range_to_reading('front', msg, log_s)
                    assert reading.frame_id == 'sonar_front'
                    assert reading.min_range_m == float(np.float32(0.15))
                    # rosbag2 Range payloads take the fast CDR decoder; ROS 1 goes via rosbags
                    assert isinstance(msg, RangeMessage) == (storage != 'rosbag1')

    @pytest.mark.parametrize('storage', ['mcap', 'sqlite3', 'rosbag1'])
    def test_epoch_log_times_come_back_as_the_same_floats(self, tmp_path, storage):
        """Wall-clock log times (~1.7e9 s) survive the nanosecond file format bit for bit."""
        distro = 'noetic' if storage == 'rosbag1' else 'humble'
        rnd = random.Random(11)
        times = sorted(1.7e9 + rnd.uniform(0.0, 3600.0) for _ in range(200))
        records = [('/odom', ODOMETRY_TYPE, t, odometry_msg(t, 0.1, distro=distro))
                   for t in times]
        path = write(tmp_path, storage, distro, records)
        got = read_all(path)
        assert [log_s for _, log_s, _ in got] == times
        assert [stamp_to_s(m.header.stamp) for _, _, m in got] == pytest.approx(times, abs=1e-6)

    def test_only_requested_topics_are_yielded(self, tmp_path):
        """A subset, a single name and an absent topic."""
        path = write(tmp_path, 'mcap', 'humble')
        with BagSource(path) as bag:
            assert {t for t, _, _ in bag.messages(['/odom', '/missing'])} == {'/odom'}
            assert bag.read_count == bag.topics['/odom'].count
            assert {t for t, _, _ in bag.messages('/sonar/left')} == {'/sonar/left'}
            assert list(bag.messages([])) == []
            assert bag.read_count == 0

    def test_topics_of_type_and_msgtype_of(self, tmp_path):
        """Topics by type, sorted; the type of a topic; None for an absent one."""
        path = write(tmp_path, 'sqlite3', 'humble')
        with BagSource(path) as bag:
            assert bag.topics_of_type(RANGE_TYPE) == ['/sonar/front', '/sonar/left']
            assert bag.topics_of_type(ODOMETRY_TYPE) == ['/odom']
            assert bag.topics_of_type('geometry_msgs/msg/TwistStamped') == []
            assert bag.msgtype_of('/cmd_vel_request') == TWIST_TYPE
            assert bag.msgtype_of('/nope') is None

    def test_messages_stream_lazily_and_count_as_they_go(self, tmp_path):
        """Nothing is read before it is asked for; read_count follows the consumer."""
        path = write(tmp_path, 'rosbag1', 'noetic')
        with BagSource(path) as bag:
            stream = bag.messages(bag.topics)
            assert bag.read_count == 0
            first = next(stream)
            assert first[0] == '/sonar/front' and bag.read_count == 1
            next(stream)
            assert bag.read_count == 2

    @pytest.mark.parametrize('storage', ['mcap', 'sqlite3', 'rosbag1'])
    def test_an_empty_recording_has_nan_times(self, tmp_path, storage):
        """No messages: start and end are NaN, counts 0, no topics."""
        path = write(tmp_path, storage, 'noetic' if storage == 'rosbag1' else 'humble', [])
        with BagSource(path) as bag:
            assert math.isnan(bag.start_s) and math.isnan(bag.end_s)
            assert bag.message_count == 0 and bag.topics == {}
            assert list(bag.messages(['/sonar/front'])) == []

    def test_use_outside_with_is_a_runtime_error(self, tmp_path):
        """Queries need the recording open."""
        bag = BagSource(write(tmp_path, 'mcap', 'humble'))
        with pytest.raises(RuntimeError, match='not open'):
            bag.messages(['/odom'])
        with bag:
            pass
        with pytest.raises(RuntimeError, match='not open'):
            bag.topics_of_type(RANGE_TYPE)


def open_error(path: Path) -> RecordingError:
    """Open ``path`` expecting RecordingError; check it is one clean line naming the path."""
    with pytest.raises(RecordingError) as caught:
        with BagSource(path):
            pass
    err = caught.value
    text = str(err)
    assert str(path) in text
    assert '\n' not in text
    # no chained traceback: nothing caused it, or the library error is suppressed
    assert err.__cause__ is None
    assert err.__context__ is None or err.__suppress_context__
    return err


class TestUnreadablePaths:
    """Bad paths and files: RecordingError at open, one line, naming the file and a next step."""

    def test_missing_path(self, tmp_path):
        """A path that does not exist."""
        assert 'no such file' in str(open_error(tmp_path / 'nowhere.mcap'))

    @pytest.mark.parametrize('name', ['run.mcap', 'run.db3', 'run.bag'])
    def test_zero_length_file(self, tmp_path, name):
        """An empty file of each kind."""
        path = tmp_path / name
        path.touch()
        assert 'empty (0 bytes)' in str(open_error(path))

    def test_directory_without_metadata_names_the_storage_file(self, tmp_path):
        """A rosbag2 directory that lost metadata.yaml points at its storage file and reindex."""
        path = write(tmp_path, 'mcap', 'humble')
        (path / 'metadata.yaml').unlink()
        text = str(open_error(path))
        assert 'no metadata.yaml' in text and 'ros2 bag reindex' in text
        assert str(storage_file(path)) in text

    def test_empty_directory(self, tmp_path):
        """A directory with nothing in it."""
        (tmp_path / 'd').mkdir()
        assert 'no metadata.yaml' in str(open_error(tmp_path / 'd'))

    @pytest.mark.parametrize(('name', 'expect'), [
        ('garbage.mcap', 'as an MCAP file'),
        ('garbage.db3', 'as a SQLite3 (.db3) file'),
        ('garbage.bag', 'as a ROS 1 bag'),
    ])
    def test_random_bytes_with_a_recording_suffix(self, tmp_path, name, expect):
        """Random bytes named like a recording."""
        path = tmp_path / name
        path.write_bytes(random.Random(7).randbytes(5000))
        assert expect in str(open_error(path))

    def test_db3_that_is_not_sqlite(self, tmp_path):
        """A text file named .db3: SQLite says it is not a database."""
        path = tmp_path / 'notes.db3'
        path.write_text('these are my notes, not a database\n' * 40)
        assert 'not a database' in str(open_error(path))

    def test_unknown_suffix(self, tmp_path):
        """A suffix no recording format uses."""
        path = tmp_path / 'run.txt'
        path.write_text('hello')
        assert "unknown recording type '.txt'" in str(open_error(path))

    def test_misnamed_mcap_is_recognized_by_its_content(self, tmp_path):
        """An MCAP file with another suffix: the message says to rename it."""
        src = storage_file(write(tmp_path, 'mcap', 'humble'))
        path = tmp_path / 'copy.dat'
        shutil.copy(src, path)
        assert 'rename it to end in .mcap' in str(open_error(path))

    def test_sqlite_named_mcap_is_recognized_by_its_content(self, tmp_path):
        """A SQLite3 bag file renamed .mcap: the message names the right suffix."""
        path = tmp_path / 'wrong.mcap'
        shutil.copy(storage_file(write(tmp_path, 'sqlite3', 'humble')), path)
        assert 'rename it to end in .db3' in str(open_error(path))

    @pytest.mark.parametrize('text', ['{{{ not yaml', 'rosbag2_bagfile_information: 3\n', ''])
    def test_broken_metadata_yaml(self, tmp_path, text):
        """metadata.yaml that is not YAML or not rosbag2 metadata."""
        path = write(tmp_path, 'sqlite3', 'humble')
        (path / 'metadata.yaml').write_text(text)
        assert 'as a rosbag2 recording' in str(open_error(path))

    def test_metadata_naming_a_missing_storage_file(self, tmp_path):
        """metadata.yaml is intact but its storage file is gone."""
        path = write(tmp_path, 'mcap', 'humble')
        storage_file(path).unlink()
        assert 'missing' in str(open_error(path))


# -- damaged storage -------------------------------------------------------------------------


def blob_records(steps: int = 160) -> list[tuple[str, str, float, Any]]:
    """Return sonar and odometry records padded with 20 kB strings: several MCAP chunks."""
    store = typestore_for('humble')
    rnd = random.Random(3)
    records = []
    for i in range(steps):
        t = 10.0 + 0.1 * i
        records.append(('/sonar/front', RANGE_TYPE, t, range_msg(
            t, 'sonar_front', 0.5 + 0.01 * i, min_range=0.15, max_range=4.0, field_of_view=0.4)))
        records.append(('/odom', ODOMETRY_TYPE, t + 0.01, odometry_msg(t, 0.1 * (i % 7))))
        blob = ''.join(rnd.choice('abcdefgh') for _ in range(20_000))  # incompressible-ish
        records.append(('/blob', STRING_TYPE, t + 0.02,
                        store.types[STRING_TYPE](data=blob)))
    return records


def cut(path: Path, fraction: float) -> int:
    """Truncate the file at ``fraction`` of its size; return the new size."""
    size = int(path.stat().st_size * fraction)
    os.truncate(path, size)
    return size


def complete_chunk_counts(mcap: Path, cut_at: int) -> dict[str, int]:
    """Per topic, messages in the chunks that end before byte ``cut_at`` (rosbags' index)."""
    reader = McapReader(mcap)  # rosbags MCAP storage reader (library reference)
    reader.open()
    try:
        topic_of = {conn.id: conn.topic for conn in reader.connections}
        counts = dict.fromkeys(topic_of.values(), 0)
        for chunk in reader.chunks:
            if chunk.chunk_start_offset + chunk.chunk_length <= cut_at:
                for cid, n in chunk.channel_count.items():
                    counts[topic_of[cid]] += n
        assert len(reader.chunks) >= 3, 'the test needs several chunks'
    finally:
        reader.close()
    return counts


def readable_counts(mcap: Path, cut_at: int) -> dict[str, int]:
    """Per topic, messages whose record ends before byte ``cut_at`` of an uncompressed MCAP.

    Whole chunks from rosbags' chunk index; in the chunk the cut goes through, the message
    records located by its message index records (MCAP specification: channel id, then
    (log time, offset into the chunk's records) pairs).
    """
    counts = complete_chunk_counts(mcap, cut_at)
    data = mcap.read_bytes()
    reader = McapReader(mcap)  # rosbags MCAP storage reader (library reference)
    reader.open()
    try:
        topic_of = {conn.id: conn.topic for conn in reader.connections}
        for chunk in reader.chunks:
            start, end = chunk.chunk_start_offset, chunk.chunk_start_offset + chunk.chunk_length
            if not start < cut_at < end:
                continue
            assert chunk.compression == ''
            # chunk record: opcode + length (9), start/end time, size (24), crc (4),
            # compression string (4 + 0), records length (8), then the records
            records_at = start + 9 + 24 + 4 + 4 + 8
            for cid, index_at in chunk.message_index_offsets.items():
                op, _, channel, size = struct.unpack_from('<BQHI', data, index_at)
                assert op == 0x07 and channel == cid
                for k in range(size // 16):
                    _, offset = struct.unpack_from('<QQ', data, index_at + 15 + 16 * k)
                    (length,) = struct.unpack_from('<Q', data, records_at + offset + 1)
                    if records_at + offset + 9 + length <= cut_at:
                        counts[topic_of[cid]] += 1
    finally:
        reader.close()
    return counts


def write_zstd_mcap(path: Path, records: list[tuple[str, str, float, Any]]) -> None:
    """Write records with rosbags into an MCAP recording whose chunks are zstd-compressed."""
    store = typestore_for('humble')
    writer = Writer2(path, version=8, storage_plugin=StoragePlugin.MCAP)
    writer.set_compression(CompressionMode.STORAGE, CompressionFormat.ZSTD)
    with writer:
        conns: dict[str, Any] = {}
        for topic, msgtype, t_s, msg in records:
            if topic not in conns:
                conns[topic] = writer.add_connection(topic, msgtype, typestore=store)
            writer.write(conns[topic], round(t_s * 1e9), store.serialize_cdr(msg, msgtype))


def damage_chunk(mcap: Path, index: int) -> dict[str, int]:
    """Zero 256 bytes in the middle of chunk ``index``; return per-topic counts of the chunks
    before it (rosbags' chunk index of the intact file, library reference)."""
    reader = McapReader(mcap)
    reader.open()
    chunks = list(reader.chunks)
    topic_of = {conn.id: conn.topic for conn in reader.connections}
    reader.close()
    assert len(chunks) > index + 1, 'the test needs more chunks'
    data = bytearray(mcap.read_bytes())
    middle = chunks[index].chunk_start_offset + chunks[index].chunk_length // 2
    data[middle:middle + 256] = bytes(256)
    mcap.write_bytes(bytes(data))
    counts = dict.fromkeys(topic_of.values(), 0)
    for chunk in chunks[:index]:
        for cid, n in chunk.channel_count.items():
            counts[topic_of[cid]] += n
    return counts


class TestTruncatedMcap:
    """A cut MCAP (recorder lost power): rosbags refuses it, BagSource salvages the chunks."""

    @pytest.mark.parametrize('as_directory', [True, False])
    def test_messages_before_the_cut_are_yielded_then_the_error(self, tmp_path, as_directory):
        """Every whole message before the cut comes out right and counted, then the error."""
        path = write(tmp_path, 'mcap', 'humble', blob_records())
        intact = read_all(path, ['/sonar/front', '/odom'])
        mcap = storage_file(path)
        pristine = shutil.copy(mcap, tmp_path / 'pristine.mcap')
        cut_at = cut(mcap, 0.6)
        expected = readable_counts(pristine, cut_at)
        complete = complete_chunk_counts(pristine, cut_at)
        with pytest.raises(AnyReaderError, match='end magic'):  # rosbags refuses it at open
            AnyReader([path if as_directory else mcap]).open()

        target = path if as_directory else mcap
        got = []
        with BagSource(target) as bag:
            assert bag.damage and 'ends at byte' in bag.damage
            assert bag.topics['/sonar/front'].count == expected['/sonar/front']
            with pytest.raises(RecordingError) as caught:
                for item in bag.messages(['/sonar/front', '/odom']):
                    got.append(item)
            read_count = bag.read_count
        n = expected['/sonar/front'] + expected['/odom']
        # the cut chunk gave some of its messages too, and something was lost
        assert complete['/sonar/front'] + complete['/odom'] < n < len(intact)
        assert len(got) == read_count == n
        for (topic, log_s, msg), (i_topic, i_log_s, i_msg) in zip(got, intact):
            assert (topic, log_s) == (i_topic, i_log_s)
            assert_same_message(msg, i_msg, ODOMETRY_TYPE if topic == '/odom' else RANGE_TYPE)
        text = str(caught.value)
        assert text.startswith(f'{target}: truncated or corrupted after {n} messages (bag time ')
        assert f'{got[-1][1]:.3f} s' in text and '\n' not in text
        assert 'messages of that chunk were recovered' in text
        if as_directory:
            assert 'metadata.yaml lists' in text

    def test_a_cut_inside_the_first_chunk_yields_its_whole_messages(self, tmp_path):
        """Cut before any chunk ends: the first chunk's whole messages still come out."""
        path = write(tmp_path, 'mcap', 'humble', blob_records())
        mcap = storage_file(path)
        pristine = shutil.copy(mcap, tmp_path / 'pristine.mcap')
        expected = readable_counts(pristine, cut(mcap, 0.05))
        assert complete_chunk_counts(pristine, mcap.stat().st_size)['/sonar/front'] == 0
        got = []
        with BagSource(path) as bag:
            with pytest.raises(RecordingError, match='after [1-9]'):
                for item in bag.messages(['/sonar/front']):
                    got.append(item)
            assert bag.read_count == len(got) == expected['/sonar/front'] > 0

    def test_a_cut_before_any_message_yields_nothing_but_still_opens(self, tmp_path):
        """Only the header and part of the first chunk's definitions: no topics, no messages."""
        path = write(tmp_path, 'mcap', 'humble')
        mcap = storage_file(path)
        os.truncate(mcap, 120)
        with BagSource(mcap) as bag:
            assert bag.message_count == 0 and math.isnan(bag.start_s)
            with pytest.raises(RecordingError, match=r'after 0 messages \(before the first'):
                list(bag.messages(['/sonar/front']))
            assert bag.read_count == 0

    def test_a_cut_compressed_chunk_gives_what_decompresses(self, tmp_path):
        """zstd chunks: the cut chunk's decodable start is used; values match the intact read."""
        path = tmp_path / 'zstd'
        write_zstd_mcap(path, blob_records(120))
        intact = read_all(path, ['/sonar/front'])
        mcap = storage_file(path)
        pristine = shutil.copy(mcap, tmp_path / 'pristine.mcap')
        complete = complete_chunk_counts(pristine, cut(mcap, 0.6))['/sonar/front']
        got = []
        with BagSource(path) as bag:
            with pytest.raises(RecordingError, match='truncated or corrupted'):
                for item in bag.messages(['/sonar/front']):
                    got.append(item)
        assert complete < len(got) < len(intact)
        for (_, log_s, msg), (_, i_log_s, i_msg) in zip(got, intact):
            assert log_s == i_log_s
            assert_same_message(msg, i_msg, RANGE_TYPE)

    def test_a_damaged_chunk_before_the_cut_ends_the_salvage_there(self, tmp_path):
        """Cut and a broken compressed chunk: only the chunks before the broken one count."""
        path = tmp_path / 'zstd'
        write_zstd_mcap(path, blob_records(120))
        mcap = storage_file(path)
        expected = damage_chunk(mcap, 1)
        cut(mcap, 0.9)
        with BagSource(path) as bag:
            assert bag.topics['/sonar/front'].count == expected['/sonar/front']
            assert bag.topics['/odom'].count == expected['/odom']
            got = []
            with pytest.raises(RecordingError, match=r'chunk at byte \d+ of zstd.mcap is damaged'):
                for topic, _, _ in bag.messages(['/sonar/front', '/odom']):
                    got.append(topic)
        assert len(got) == expected['/sonar/front'] + expected['/odom'] > 0

    def test_a_damaged_footer_with_intact_data_reads_everything(self, tmp_path):
        """Only the closing magic is broken: all messages, no error, damage noted."""
        path = write(tmp_path, 'mcap', 'humble')
        intact = read_all(path)
        mcap = storage_file(path)
        data = bytearray(mcap.read_bytes())
        data[-8:] = bytes(8)
        mcap.write_bytes(bytes(data))
        with pytest.raises(AnyReaderError):  # rosbags refuses it
            AnyReader([path]).open()
        with BagSource(path) as bag:
            assert 'intact data section' in (bag.damage or '')
            got = list(bag.messages(bag.topics))
        assert [(t, s) for t, s, _ in got] == [(t, s) for t, s, _ in intact]

    def test_overlapping_chunks_are_merged_into_time_order(self, tmp_path):
        """Chunks whose times overlap (messages written late) still come out sorted."""
        store = typestore_for('humble')
        path = tmp_path / 'late'
        written = []
        with Writer2(path, version=8, storage_plugin=StoragePlugin.MCAP) as writer:
            sonar = writer.add_connection('/sonar/front', RANGE_TYPE, typestore=store)
            blob = writer.add_connection('/blob', STRING_TYPE, typestore=store)
            big = store.serialize_cdr(store.types[STRING_TYPE](data='x' * 30_000), STRING_TYPE)
            for i in range(200):
                # the sonar lags the blobs by 30 s, so later chunks hold earlier sonar times
                t_ns = 1_000_000_000 * (100 + i)
                t_sonar = t_ns - 30_000_000_000
                raw = store.serialize_cdr(range_msg(
                    t_sonar / 1e9, 'f', 1.0, min_range=0.1, max_range=4.0, field_of_view=0.4),
                    RANGE_TYPE)
                writer.write(blob, t_ns, big)
                writer.write(sonar, t_sonar, raw)
                written += [('/blob', t_ns), ('/sonar/front', t_sonar)]
        mcap = storage_file(path)
        pristine = shutil.copy(mcap, tmp_path / 'pristine.mcap')
        counts = readable_counts(pristine, cut(mcap, 0.7))
        expected = written[:sum(counts.values())]  # rosbags fills chunks in write order
        with BagSource(path) as bag:
            got = []
            with pytest.raises(RecordingError, match='truncated or corrupted'):
                for topic, log_s, _ in bag.messages(['/sonar/front', '/blob']):
                    got.append((topic, round(log_s * 1e9)))
        times = [t for _, t in got]
        assert times == sorted(times)
        assert sorted(got) == sorted(expected)


class TestUnchunkedMcap:
    """MCAP files without chunks (a recorder's fast-write setting), built record by record."""

    MAGIC = b'\x89MCAP0\r\n'  # MCAP specification: magic, then opcode + uint64 length records

    @staticmethod
    def record(op: int, content: bytes) -> bytes:
        """Return one MCAP record."""
        return struct.pack('<BQ', op, len(content)) + content

    @staticmethod
    def text(value: str) -> bytes:
        """Return an MCAP string (uint32 length + UTF-8)."""
        data = value.encode()
        return struct.pack('<I', len(data)) + data

    def build(self, stamps_s: list[float], *, closed: bool) -> bytes:
        """Return an unchunked MCAP with one Range per stamp, closed or cut after the last."""
        store = typestore_for('humble')
        msgdef, _ = store.generate_msgdef(RANGE_TYPE, ros_version=2)
        out = self.MAGIC + self.record(0x01, self.text('ros2') + self.text('handmade'))
        out += self.record(0x03, struct.pack('<H', 1) + self.text(RANGE_TYPE)
                           + self.text('ros2msg') + self.text(msgdef))
        out += self.record(0x04, struct.pack('<HH', 1, 1) + self.text('/sonar/front')
                           + self.text('cdr') + struct.pack('<I', 0))
        for seq, t_s in enumerate(stamps_s):
            raw = bytes(store.serialize_cdr(range_msg(
                t_s, 'f', 1.0 + seq, min_range=0.1, max_range=4.0, field_of_view=0.4),
                RANGE_TYPE))
            t_ns = round(t_s * 1e9)
            out += self.record(0x05, struct.pack('<HIQQ', 1, seq, t_ns, t_ns) + raw)
        if closed:  # data end, then a footer without summary, then the magic again
            out += self.record(0x0F, struct.pack('<I', 0))
            out += self.record(0x02, struct.pack('<QQI', 0, 0, 0)) + self.MAGIC
        return out

    def test_closed_file_reads_like_rosbags_reads_it(self, tmp_path):
        """The hand-built file is valid: rosbags and BagSource agree on it."""
        path = tmp_path / 'flat.mcap'
        path.write_bytes(self.build([1.0, 1.5, 2.0], closed=True))
        with AnyReader([path]) as reader:  # rosbags reader (library reference)
            ref = [(c.topic, t) for c, t, _ in reader.messages()]
        got = read_all(path)
        assert [(t, round(s * 1e9)) for t, s, _ in got] == ref
        assert [m.range for _, _, m in got] == [1.0, 2.0, 3.0]

    def test_cut_file_yields_complete_messages_sorted(self, tmp_path):
        """Cut inside the last record: the whole ones come out in time order, then the error."""
        path = tmp_path / 'cut.mcap'
        data = self.build([3.0, 1.0, 2.0, 4.0], closed=False)
        path.write_bytes(data[:-10])
        with BagSource(path) as bag:
            assert bag.message_count == 3
            got = []
            with pytest.raises(RecordingError, match='after 3 messages'):
                for _, log_s, msg in bag.messages(['/sonar/front']):
                    got.append((log_s, msg.range))
        assert got == [(1.0, 2.0), (2.0, 3.0), (3.0, 1.0)]


class TestOtherDamage:
    """Truncated SQLite3 and ROS 1 files, and damage met in the middle of reading."""

    def test_truncated_sqlite_is_refused_at_open(self, tmp_path):
        """SQLite itself refuses a cut database: no rows are readable, the error comes at open.

        rosbags reports SQLite's 'database disk image is malformed'; there is nothing to
        salvage without a repair tool, so BagSource cannot even be opened.
        """
        path = write(tmp_path, 'sqlite3', 'humble', blob_records(60))
        db3 = storage_file(path)
        cut(db3, 0.6)
        with pytest.raises(sqlite3.DatabaseError, match='malformed'):  # SQLite (library)
            sqlite3.connect(f'file:{db3}?mode=ro', uri=True).execute(
                'SELECT count(*) FROM messages').fetchall()
        for target in (path, db3):
            text = str(open_error(target))
            assert 'malformed' in text and '.recover' in text

    def test_truncated_ros1_bag_is_refused_at_open(self, tmp_path):
        """A ROS 1 bag keeps its index at the end: cut, rosbags cannot open it at all."""
        path = write(tmp_path, 'rosbag1', 'noetic')
        cut(path, 0.6)
        text = str(open_error(path))
        assert 'index looks damaged' in text and 'rosbag reindex' in text

    def test_damage_inside_a_compressed_chunk_stops_after_the_good_ones(self, tmp_path):
        """rosbags opens it (summary intact) and fails at the broken chunk: prefix, then error."""
        path = tmp_path / 'zstd'
        records = blob_records(120)
        write_zstd_mcap(path, records)
        expected = damage_chunk(storage_file(path), 1)['/sonar/front']
        got = []
        with BagSource(path) as bag:
            assert bag.damage is None  # rosbags could open it
            with pytest.raises(RecordingError) as caught:
                for _, _, msg in bag.messages(['/sonar/front']):
                    got.append(msg.range)
            assert bag.read_count == expected == len(got)
        want = [r[3].range for r in records if r[0] == '/sonar/front'][:expected]
        assert got == [float(np.float32(v)) for v in want]
        assert f'after {expected} messages' in str(caught.value)


# -- message types -------------------------------------------------------------------------


class TestMessageTypes:
    """Types the typestore cannot parse, and recordings without stored definitions."""

    @pytest.mark.parametrize('storage', ['mcap', 'sqlite3', 'rosbag1'])
    def test_an_unparsable_type_on_another_topic_does_not_stop_range_topics(self, tmp_path,
                                                                           storage):
        """A garbage definition: AnyReader refuses the bag; BagSource reads the sonar."""
        ros1 = storage == 'rosbag1'
        store = typestore_for('noetic' if ros1 else 'humble')
        path = tmp_path / ('weird.bag' if ros1 else 'weird')
        ranges = [range_msg(1.0 + i, 'f', 0.5 * i, min_range=0.1, max_range=4.0,
                            field_of_view=0.4, distro='noetic' if ros1 else 'humble')
                  for i in range(5)]
        if ros1:
            with Writer1(path) as writer:
                sonar = writer.add_connection('/sonar/front', RANGE_TYPE, typestore=store)
                odd = writer.add_connection('/chirp', 'acme_msgs/msg/Chirp',
                                            msgdef='this is not @@ a definition', md5sum='0' * 32)
                for i, msg in enumerate(ranges):
                    writer.write(sonar, (1 + i) * 10**9, store.serialize_ros1(msg, RANGE_TYPE))
                    writer.write(odd, (1 + i) * 10**9 + 5, b'\x01\x02\x03')
        else:
            plugin = StoragePlugin.MCAP if storage == 'mcap' else StoragePlugin.SQLITE3
            with Writer2(path, version=8, storage_plugin=plugin) as writer:
                sonar = writer.add_connection('/sonar/front', RANGE_TYPE, typestore=store)
                odd = writer.add_connection('/chirp', 'acme_msgs/msg/Chirp',
                                            msgdef='this is not @@ a definition',
                                            rihs01='RIHS01_' + '0' * 64)
                for i, msg in enumerate(ranges):
                    writer.write(sonar, (1 + i) * 10**9, store.serialize_cdr(msg, RANGE_TYPE))
                    writer.write(odd, (1 + i) * 10**9 + 5, b'\x00\x01\x00\x00\x01\x02\x03\x04')
        # rosbags' high-level reader refuses the whole recording (a KeyError escapes it for
        # rosbag2, where it checks type hashes; AnyReaderError for ROS 1)
        with pytest.raises((AnyReaderError, KeyError)):
            AnyReader([path]).open()
        with BagSource(path) as bag:
            assert bag.msgtype_of('/chirp') == 'acme_msgs/msg/Chirp'
            got = [msg.range for _, _, msg in bag.messages(['/sonar/front'])]
            assert got == [0.5 * i for i in range(5)]
            with pytest.raises(RecordingError, match=r'decode topic /chirp.*does not parse'):
                bag.messages(['/chirp'])

    def test_humble_sqlite_without_definitions_uses_standard_types(self, tmp_path):
        """Humble's SQLite3 bags store no definitions: standard Humble types decode them."""
        store = typestore_for('humble')
        path = tmp_path / 'old.db3'
        db = sqlite3.connect(path)
        # the table layout of a Humble-era rosbag2 SQLite3 bag (rosbag2_storage_default_plugins)
        db.executescript(
            'CREATE TABLE topics(id INTEGER PRIMARY KEY, name TEXT NOT NULL, type TEXT NOT NULL,'
            ' serialization_format TEXT NOT NULL, offered_qos_profiles TEXT NOT NULL);'
            'CREATE TABLE messages(id INTEGER PRIMARY KEY, topic_id INTEGER NOT NULL,'
            ' timestamp INTEGER NOT NULL, data BLOB NOT NULL);')
        db.execute("INSERT INTO topics VALUES (1, '/odom', ?, 'cdr', '')", (ODOMETRY_TYPE,))
        db.execute("INSERT INTO topics VALUES (2, '/sonar/front', ?, 'cdr', '')", (RANGE_TYPE,))
        for i in range(4):
            odom = odometry_msg(5.0 + i, 0.25 * i)
            sonar = range_msg(5.0 + i, 'f', 1.5, min_range=0.1, max_range=4.0, field_of_view=0.4)
            db.execute('INSERT INTO messages (topic_id, timestamp, data) VALUES (1, ?, ?)',
                       ((5 + i) * 10**9, bytes(store.serialize_cdr(odom, ODOMETRY_TYPE))))
            db.execute('INSERT INTO messages (topic_id, timestamp, data) VALUES (2, ?, ?)',
                       ((5 + i) * 10**9 + 1, bytes(store.serialize_cdr(sonar, RANGE_TYPE))))
        db.commit()
        db.close()
        got = read_all(path)
        assert [t for t, _, _ in got] == ['/odom', '/sonar/front'] * 4
        assert [m.twist.twist.linear.x for t, _, m in got if t == '/odom'] == [0, 0.25, 0.5, 0.75]
        assert all(m.range == 1.5 for t, _, m in got if t == '/sonar/front')

    def test_a_garbled_range_payload_stops_with_the_count(self, tmp_path):
        """A payload that is not a Range on a Range topic: prefix, then RecordingError."""
        store = typestore_for('humble')
        path = tmp_path / 'bad'
        with Writer2(path, version=8, storage_plugin=StoragePlugin.SQLITE3) as writer:
            sonar = writer.add_connection('/sonar/front', RANGE_TYPE, typestore=store)
            for i in range(3):
                writer.write(sonar, (1 + i) * 10**9, store.serialize_cdr(range_msg(
                    1.0 + i, 'f', 1.0, min_range=0.1, max_range=4.0, field_of_view=0.4),
                    RANGE_TYPE))
            writer.write(sonar, 9 * 10**9, b'\x00\x01\x00\x00\x05')
        with BagSource(path) as bag:
            with pytest.raises(RecordingError, match=r'after 3 messages .*does not decode as '
                                                     r'sensor_msgs/msg/Range'):
                list(bag.messages(['/sonar/front']))
            assert bag.read_count == 3

