"""Read any recording, streaming and in time order: rosbag2 (MCAP, SQLite3) and ROS 1 bags.

:class:`BagSource` opens a rosbag2 directory (with metadata.yaml), a single .mcap or .db3 file,
or a ROS 1 .bag file with rosbags, and yields ``(topic, log_time_s, message)`` for the topics
asked for, in log-time order, with memory that does not grow with the recording. Range
and Odometry messages stored as CDR are decoded by :mod:`sonar_guard.offline.cdr`; every
other message by rosbags' deserializer, with the type definitions stored in the recording
(falling back to the distribution's standard types). Only the requested topics are decoded, so
a type nobody can parse on another topic does not matter.

Unreadable recordings raise :class:`~sonar_guard.errors.RecordingError` with one line that
names the path, what is wrong and what to try; never a traceback from the libraries below.

What rosbags does with damaged files (rosbags 0.11), and what this module adds:

- MCAP cut short (no footer, the usual result of a recorder that lost power): rosbags refuses
  the whole file at open ("File end magic is invalid"). This module then scans the data
  section itself (the salvage reader below): it yields, in time order, every message of the
  complete chunks and the whole messages at the start of the chunk the cut goes through
  (decompressing zstd and lz4 as a stream), then raises RecordingError naming how many it
  read. A damaged chunk (bytes overwritten inside it) ends the salvage the same way, after the
  whole records before the damage. If only the summary or footer is damaged, everything is
  read and ``damage`` says so.
- MCAP damaged inside a chunk while its summary is intact: rosbags opens the file, then fails
  on the chunk (a record whose length is garbage may even make it raise OverflowError) and
  yields none of that chunk's messages. When that happens before the first message, this
  module reads the file again with the salvage reader, so the messages before the damage are
  still checked.
- SQLite3 cut short: SQLite refuses the file at open ("database disk image is malformed");
  nothing is readable. Damage SQLite only meets while reading rows raises after the rows
  read so far.
- ROS 1 bag cut short: rosbags refuses it at open (its index sits at the end of the file);
  nothing is readable until ``rosbag reindex`` repairs it.
"""
from __future__ import annotations

from collections.abc import Callable, Hashable, Iterable, Iterator
from dataclasses import dataclass
from functools import lru_cache
import heapq
import itertools
import math
from pathlib import Path, PurePath
import sqlite3
import struct
import sys
from typing import Any
import zlib

import apsw
from lz4.frame import LZ4FrameDecompressor
from lz4.frame import decompress as lz4_decompress
from rosbags.highlevel import AnyReaderError
from rosbags.interfaces import MessageDefinitionFormat
from rosbags.rosbag1 import Reader as Reader1
from rosbags.rosbag1 import ReaderError as ReaderError1
from rosbags.rosbag2 import Reader as Reader2
from rosbags.rosbag2 import ReaderError as ReaderError2
from rosbags.serde import SerdeError
from rosbags.typesys import (
    Stores,
    TypesysError,
    get_types_from_idl,
    get_types_from_msg,
    get_typestore,
)
from rosbags.typesys.store import Typestore
import yaml

from sonar_guard.errors import RecordingError
from sonar_guard.offline.bagwrite import DISTROS, typestore_for
from sonar_guard.offline.cdr import decode_odometry, decode_range

if sys.version_info >= (3, 14):  # pragma: no cover - the same module rosbags uses
    from compression import zstd
else:
    from backports import zstd

__all__ = [
    'BagSource',
    'ODOMETRY_TYPE',
    'RANGE_TYPE',
    'TWIST_STAMPED_TYPE',
    'TWIST_TYPE',
    'TopicInfo',
]

RANGE_TYPE = 'sensor_msgs/msg/Range'
ODOMETRY_TYPE = 'nav_msgs/msg/Odometry'
TWIST_TYPE = 'geometry_msgs/msg/Twist'
TWIST_STAMPED_TYPE = 'geometry_msgs/msg/TwistStamped'

_NO_TIME = 2**63 - 1


def _ns_to_s(ns: int) -> float:
    """Return int nanoseconds as float seconds, exact to the float's resolution.

    ``ns / 1e9`` would first round an epoch time (~1.7e18 ns) to a float with 256 ns steps;
    whole seconds plus the fraction keep the nanoseconds a float can hold.
    """
    sec, rest = divmod(ns, 1_000_000_000)
    return sec + rest / 1e9


class _Damaged(Exception):
    """A damaged MCAP record met by the salvage reader."""


# What the libraries raise on a bad or damaged file: rosbags' own errors, the SQLite drivers',
# decompressors' (lz4 raises RuntimeError, zstd its ZstdError) and the low-level ones rosbags
# lets through from a damaged index (struct, EOF, asserts in its ROS 1 index reader, ord() of
# a missing byte; OverflowError and MemoryError when a damaged length field asks for an
# impossible seek or buffer). Caught only around calls into those libraries and the salvage
# reader, so bugs elsewhere in this package still surface.
_FILE_ERRORS: tuple[type[BaseException], ...] = (
    ReaderError1, ReaderError2, AnyReaderError, TypesysError, SerdeError, _Damaged,
    apsw.Error, sqlite3.DatabaseError, zstd.ZstdError, OSError, EOFError, struct.error,
    KeyError, IndexError, ValueError, AssertionError, RuntimeError, TypeError, OverflowError,
    MemoryError,
)
# What decoding one payload raises when the bytes are not the message they claim to be.
_DECODE_ERRORS: tuple[type[BaseException], ...] = (
    SerdeError, ValueError, struct.error, IndexError, KeyError,
)
# What parsing MCAP records by hand raises on damaged bytes.
_RECORD_ERRORS: tuple[type[BaseException], ...] = (
    _Damaged, struct.error, ValueError, RuntimeError, zstd.ZstdError, OverflowError,
)


@dataclass(frozen=True, slots=True)
class TopicInfo:
    """A topic of a recording: name, message type and number of messages.

    A topic recorded with several types has them joined by '|' in ``msgtype``.
    """

    name: str
    msgtype: str
    count: int


@dataclass(slots=True)
class _Channel:
    """One connection (rosbags) or channel (MCAP) of a recording."""

    key: Hashable
    topic: str
    msgtype: str
    msgdef_format: str  # 'msg', 'idl' or '' when the recording stores no definition
    msgdef: str
    count: int
    serialization: str  # 'cdr' (rosbag2) or 'ros1'


def _one_line(err: BaseException) -> str:
    """Return an exception as one short line, with its class unless it is a reader's own."""
    text = ' '.join(str(err).split()) or type(err).__name__
    if not isinstance(err, (ReaderError1, ReaderError2, AnyReaderError, _Damaged)):
        text = f'{type(err).__name__}: {text}'
    return text if len(text) <= 300 else text[:297] + '...'


def _format_name(fmt: MessageDefinitionFormat) -> str:
    """Return 'msg', 'idl' or '' for a rosbags message definition format."""
    return {MessageDefinitionFormat.MSG: 'msg', MessageDefinitionFormat.IDL: 'idl'}.get(fmt, '')


class _RosbagsBackend:
    """An intact recording read through rosbags' own readers."""

    def __init__(self, reader: Reader1 | Reader2) -> None:
        self.reader = reader
        ros1 = isinstance(reader, Reader1)
        self.connections = {conn.id: conn for conn in reader.connections}
        self.channels = [
            _Channel(conn.id, conn.topic, conn.msgtype, _format_name(conn.msgdef.format),
                     conn.msgdef.data, conn.msgcount,
                     'ros1' if ros1 else conn.ext.serialization_format)
            for conn in reader.connections
        ]
        self.start_ns = reader.start_time
        self.end_ns = reader.end_time - 1  # rosbags' end is one nanosecond after the last
        self.count = reader.message_count
        self.distro = None if ros1 else reader.ros_distro
        self.damage: str | None = None
        self.lost = False

    def iterate(self, keys: Iterable[Hashable]) -> Iterator[tuple[Hashable, int, bytes]]:
        """Yield (channel key, log time ns, payload) of the given channels in time order."""
        conns = [self.connections[key] for key in keys]
        if not conns:  # rosbags reads every connection when given none
            return
        for conn, log_ns, raw in self.reader.messages(connections=conns):
            yield conn.id, log_ns, raw

    def close(self) -> None:
        """Close the rosbags reader."""
        self.reader.close()


# ---------------------------------------------------------------------------------------------
# MCAP salvage: read the data section of a file whose summary or end is missing or damaged.
# Record layout from the MCAP specification (mcap.dev/spec): magic, then records of
# opcode uint8 + length uint64 + content; strings are uint32 length + UTF-8.

_MCAP_MAGIC = b'\x89MCAP0\r\n'
_OP_HEADER, _OP_FOOTER, _OP_SCHEMA, _OP_CHANNEL = 0x01, 0x02, 0x03, 0x04
_OP_MESSAGE, _OP_CHUNK, _OP_DATA_END = 0x05, 0x06, 0x0F
_RECORD_NAMES = {_OP_SCHEMA: 'schema record', _OP_CHANNEL: 'channel record',
                 _OP_MESSAGE: 'message record', _OP_CHUNK: 'chunk'}
_RECORD_HEAD = struct.Struct('<BQ')
_MESSAGE_HEAD = struct.Struct('<HIQQ')  # channel id, sequence, log time, publish time
_RUN_BYTES = 1 << 20  # unchunked messages are handled in runs of about this many bytes


@dataclass(frozen=True, slots=True)
class _Block:
    """A stretch of one MCAP file read as a unit: a chunk or a run of unchunked messages."""

    file: int
    start: int
    end: int
    chunk: bool
    min_ns: int
    partial: bool = False  # a chunk cut short by the end of the file, or damaged
    records: int = -1  # of a partial chunk: how many records are whole (-1: all)


def _string(buf: memoryview, pos: int) -> tuple[str, int]:
    """Return the MCAP string at ``pos`` and the position after it."""
    (size,) = struct.unpack_from('<I', buf, pos)
    end = pos + 4 + size
    if end > len(buf):
        raise _Damaged(f'a string runs past its record ({size} bytes)')
    return str(buf[pos + 4:end], 'utf-8'), end


def _chunk_payload(content: memoryview, *, partial: bool = False) -> bytes:
    """Return the decompressed, checked records of an MCAP chunk record's content.

    With ``partial`` the record is cut short: decompress what is there (streaming) and skip the
    size and checksum checks, which need the whole chunk.
    """
    _, _, size, crc = struct.unpack_from('<QQQI', content, 0)
    compression, pos = _string(content, 28)
    (stored,) = struct.unpack_from('<Q', content, pos)
    data = content[pos + 8:pos + 8 + stored]
    if len(data) != stored and not partial:
        raise _Damaged('chunk data runs past its record')
    if compression == '':
        raw = bytes(data)
    elif compression == 'zstd':
        raw = zstd.ZstdDecompressor().decompress(data) if partial else zstd.decompress(data)
    elif compression == 'lz4':
        raw = LZ4FrameDecompressor().decompress(data) if partial else lz4_decompress(data)
    else:
        raise _Damaged(f'unsupported chunk compression {compression!r}')
    if partial:
        return raw
    if len(raw) != size:
        raise _Damaged(f'chunk holds {len(raw)} bytes, its header says {size}')
    if crc and zlib.crc32(raw) != crc:  # MCAP uses the zlib CRC-32
        raise _Damaged('chunk checksum mismatch')
    return raw


def _records(buf: bytes, *, partial: bool = False) -> Iterator[tuple[int, memoryview]]:
    """Yield (opcode, content) of the records in a decompressed chunk.

    With ``partial`` the chunk is cut short: stop quietly before its first incomplete record.
    """
    view = memoryview(buf)
    pos, size = 0, len(buf)
    while pos < size:
        if pos + 9 > size:
            if partial:
                return
            raise _Damaged('chunk ends inside a record header')
        op, length = _RECORD_HEAD.unpack_from(buf, pos)
        pos += 9
        if pos + length > size:
            if partial:
                return
            raise _Damaged(f'chunk ends inside a record (opcode 0x{op:02x})')
        yield op, view[pos:pos + length]
        pos += length


class _McapSalvage:
    """Read the data section of MCAP files by scanning, when rosbags cannot use the summary.

    Pass one (here) walks every record once: it collects schemas and channels, counts messages
    and notes each chunk (or run of unchunked messages) with its earliest log time, stopping at
    the first damaged or missing record. Pass two (:meth:`iterate`) reads the blocks again in
    file order and releases a message once no later block can hold an earlier one, so the
    output is in log-time order while memory holds only overlapping blocks.
    """

    def __init__(self, paths: list[Path]) -> None:
        self.paths = paths
        self.channels: list[_Channel] = []
        self.blocks: list[_Block] = []
        self.count = 0
        self.start_ns = _NO_TIME
        self.end_ns = -1
        self.distro: str | None = None
        self.damage: str | None = None
        self.lost = False
        self._by_key: dict[tuple[int, int], _Channel] = {}
        self._run_start, self._run_min = -1, _NO_TIME  # the open run of unchunked messages
        for index, path in enumerate(paths):
            self._scan(index, path)
            if self.lost:
                break
        mins = [block.min_ns for block in self.blocks] + [_NO_TIME + 1]
        for i in range(len(mins) - 2, -1, -1):
            mins[i] = min(mins[i], mins[i + 1])
        self._later_min = mins

    def _note(self, index: int, channel: int, log_ns: int) -> bool:
        """Count one message; return whether its channel is known."""
        chan = self._by_key.get((index, channel))
        if chan is None:
            return False
        chan.count += 1
        self.count += 1
        self.start_ns = min(self.start_ns, log_ns)
        self.end_ns = max(self.end_ns, log_ns)
        return True

    def _schema_or_channel(self, index: int, op: int, content: memoryview,
                           schemas: dict[int, tuple[str, str, str]]) -> None:
        """Register a schema or channel record."""
        (ident,) = struct.unpack_from('<H', content, 0)
        if op == _OP_SCHEMA:
            name, pos = _string(content, 2)
            encoding, pos = _string(content, pos)
            (size,) = struct.unpack_from('<I', content, pos)
            schemas[ident] = (name, encoding, str(content[pos + 4:pos + 4 + size], 'utf-8'))
            return
        (schema_id,) = struct.unpack_from('<H', content, 2)
        topic, pos = _string(content, 4)
        encoding, _ = _string(content, pos)
        name, schema_encoding, text = schemas.get(schema_id, ('', '', ''))
        fmt = {'ros2msg': 'msg', 'ros2idl': 'idl'}.get(schema_encoding, '')
        if (index, ident) not in self._by_key:
            chan = _Channel((index, ident), topic, name, fmt, text, 0, encoding)
            self._by_key[(index, ident)] = chan
            self.channels.append(chan)

    def _scan_chunk(self, index: int, content: memoryview,
                    schemas: dict[int, tuple[str, str, str]], *, partial: bool = False
                    ) -> tuple[int, int]:
        """Register a chunk's schemas and channels, count its messages; return its min time
        and how many of its records were taken in.

        Messages are counted only once the chunk has parsed, so a damaged chunk adds nothing
        to the counts. With ``partial`` (a chunk cut short or damaged) the records are taken in
        up to the first one that is incomplete, does not parse, is of a kind chunks do not hold
        (schema, channel and message only; mcap.dev/spec) or is a message logged outside the
        time range the chunk's header states.
        """
        stamps: list[tuple[int, int]] = []
        first_ns, last_ns = struct.unpack_from('<QQ', content, 0)
        if not 0 < last_ns >= first_ns:  # no time range stated: do not judge by it
            first_ns, last_ns = 0, _NO_TIME + 1
        payload = _chunk_payload(content, partial=partial)
        taken = 0
        for op, rec in _records(payload, partial=partial):
            try:
                if op == _OP_MESSAGE:
                    channel, _, log_ns, _ = _MESSAGE_HEAD.unpack_from(rec, 0)
                    if partial and not first_ns <= log_ns <= last_ns:
                        break
                    stamps.append((channel, log_ns))
                elif op in (_OP_SCHEMA, _OP_CHANNEL):
                    self._schema_or_channel(index, op, rec, schemas)
                elif partial:
                    break
            except _RECORD_ERRORS:
                if not partial:
                    raise
                break
            taken += 1
        min_ns = _NO_TIME
        for channel, log_ns in stamps:
            if self._note(index, channel, log_ns):
                min_ns = min(min_ns, log_ns)
        return min_ns, taken

    def _scan(self, index: int, path: Path) -> None:
        """Walk one file's data section (pass one)."""
        size = path.stat().st_size
        schemas: dict[int, tuple[str, str, str]] = {}
        with path.open('rb') as fh:
            if fh.read(8) != _MCAP_MAGIC:
                raise _Damaged('the file does not start with the MCAP magic')
            head = fh.read(9)
            if len(head) < 9 or head[0] != _OP_HEADER:
                raise _Damaged('the MCAP header record is missing')
            (length,) = struct.unpack_from('<Q', head, 1)
            if 17 + length > size:
                raise _Damaged('the MCAP header record runs past the end of the file')
            profile, _ = _string(memoryview(fh.read(length)), 0)
            if profile != 'ros2':
                raise _Damaged(f'MCAP profile {profile!r} is not ros2')
            pos = 17 + length
            while True:
                _ = fh.seek(pos)
                head = fh.read(9)
                if not head:
                    self._lose(f'{path.name} ends at byte {pos} without its closing records '
                               '(the recording was not closed)')
                    break
                if len(head) < 9:
                    self._lose(f'{path.name} ends inside a record header at byte {size}')
                    break
                op, length = _RECORD_HEAD.unpack(head)
                end = pos + 9 + length
                if end > size:
                    kind = _RECORD_NAMES.get(op, f'record (opcode 0x{op:02x})')
                    reason = f'{path.name} ends at byte {size} inside a {kind} that needs {end}'
                    if op == _OP_CHUNK:
                        recovered = self._scan_cut_chunk(index, fh, pos, size, schemas)
                        reason += f'; {recovered} messages of that chunk were recovered'
                    self._lose(reason)
                    break
                if op in (_OP_DATA_END, _OP_FOOTER):
                    break
                try:
                    self._scan_record(index, fh, op, pos, end, schemas)
                except _RECORD_ERRORS as err:
                    kind = _RECORD_NAMES.get(op, f'record (opcode 0x{op:02x})')
                    reason = (f'the {kind} at byte {pos} of {path.name} is damaged: '
                              f'{_one_line(err)}')
                    if op == _OP_CHUNK:
                        recovered = self._scan_cut_chunk(index, fh, pos, end, schemas)
                        reason += f'; {recovered} messages before the damage were recovered'
                    self._lose(reason)
                    break
                pos = end
            self._close_run(index, pos)

    def _scan_record(self, index: int, fh: Any, op: int, pos: int, end: int,
                     schemas: dict[int, tuple[str, str, str]]) -> None:
        """Take in one top-level record of the data section (pass one)."""
        if op == _OP_MESSAGE:
            if end - pos - 9 < _MESSAGE_HEAD.size:
                raise _Damaged('a message record is shorter than its header')
            channel, _, log_ns, _ = _MESSAGE_HEAD.unpack(fh.read(_MESSAGE_HEAD.size))
            if self._note(index, channel, log_ns):
                if self._run_start < 0:
                    self._run_start = pos
                self._run_min = min(self._run_min, log_ns)
            if self._run_start >= 0 and end - self._run_start >= _RUN_BYTES:
                self._close_run(index, end)
        elif op in (_OP_SCHEMA, _OP_CHANNEL):
            self._schema_or_channel(index, op, memoryview(fh.read(end - pos - 9)), schemas)
        elif op == _OP_CHUNK:
            self._close_run(index, pos)
            min_ns, _ = self._scan_chunk(index, memoryview(fh.read(end - pos - 9)), schemas)
            if min_ns != _NO_TIME:
                self.blocks.append(_Block(index, pos, end, True, min_ns))

    def _scan_cut_chunk(self, index: int, fh: Any, pos: int, end: int,
                        schemas: dict[int, tuple[str, str, str]]) -> int:
        """Take in the whole messages of a chunk cut by the file's end or damaged, up to the
        cut or the damage (the chunk ends at byte ``end`` or the file's); return how many."""
        before = self.count
        _ = fh.seek(pos + 9)
        try:
            min_ns, taken = self._scan_chunk(index, memoryview(fh.read(end - pos - 9)),
                                             schemas, partial=True)
        except _RECORD_ERRORS:
            return 0  # too little of it, or its own header or compression is damaged
        if min_ns != _NO_TIME:
            self.blocks.append(_Block(index, pos, end, True, min_ns, partial=True,
                                      records=taken))
        return self.count - before

    def _close_run(self, index: int, end: int) -> None:
        """End the open run of unchunked messages at byte ``end`` as one block."""
        if self._run_start >= 0:
            self.blocks.append(_Block(index, self._run_start, end, False, self._run_min))
        self._run_start, self._run_min = -1, _NO_TIME

    def _lose(self, reason: str) -> None:
        """Record that the data section is cut: messages after this point are lost."""
        self.damage = reason
        self.lost = True

    def iterate(self, keys: Iterable[Hashable]) -> Iterator[tuple[Hashable, int, bytes]]:
        """Yield (channel key, log time ns, payload) of the given channels in time order."""
        wanted = set(keys)
        if not wanted:
            return
        pending: list[tuple[int, int, Hashable, bytes]] = []
        serial = 0
        handles: dict[int, Any] = {}
        try:
            for number, block in enumerate(self.blocks):
                fh = handles.get(block.file)
                if fh is None:
                    fh = handles[block.file] = self.paths[block.file].open('rb')
                _ = fh.seek(block.start)
                data = fh.read(block.end - block.start)
                if len(data) != block.end - block.start:
                    raise _Damaged(f'{self.paths[block.file].name} changed while being read')
                records: Iterable[tuple[int, memoryview]]
                if block.chunk:
                    payload = _chunk_payload(memoryview(data)[9:], partial=block.partial)
                    records = _records(payload, partial=block.partial)
                    if block.records >= 0:
                        records = itertools.islice(records, block.records)
                else:
                    records = _records(data)
                for op, rec in records:
                    if op != _OP_MESSAGE:
                        continue
                    channel, _, log_ns, _ = _MESSAGE_HEAD.unpack_from(rec, 0)
                    key = (block.file, channel)
                    if key in wanted:
                        heapq.heappush(pending, (log_ns, serial, key, bytes(rec[22:])))
                        serial += 1
                later = self._later_min[number + 1]
                while pending and pending[0][0] <= later:
                    log_ns, _, key, raw = heapq.heappop(pending)
                    yield key, log_ns, raw
        finally:
            for fh in handles.values():
                fh.close()

    def close(self) -> None:
        """Nothing to close: pass two opens its files per iteration."""


# ---------------------------------------------------------------------------------------------


@lru_cache(maxsize=64)
def _embedded_typestore(fmt: str, text: str, msgtype: str) -> Typestore:
    """Return a typestore built from a definition stored in a recording (cached by text)."""
    if fmt == 'msg':
        types = get_types_from_msg(text, msgtype)
    else:
        types = {}
        sep = '=' * 80 + '\n'
        if text.startswith(f'{sep}IDL: '):  # several IDL files joined, as rosbag2 stores them
            for part in text.split(sep)[1:]:
                _, idl = part.split('\n', 1)
                types.update(get_types_from_idl(idl))
        else:
            types.update(get_types_from_idl(text))
    store = get_typestore(Stores.EMPTY)
    store.register(types)
    _ = store.get_msgdef(msgtype)  # generates the code now, so a broken type fails here
    return store


def _read_metadata(directory: Path) -> dict[str, Any] | None:
    """Return rosbag2_bagfile_information of a directory's metadata.yaml, or None if unusable."""
    try:
        data = yaml.safe_load((directory / 'metadata.yaml').read_text(encoding='utf-8'))
        info = data['rosbag2_bagfile_information']
    except (OSError, UnicodeDecodeError, yaml.YAMLError, TypeError, KeyError):
        return None
    return info if isinstance(info, dict) else None


_SNIFF = ((_MCAP_MAGIC, '.mcap'), (b'SQLite format 3\x00', '.db3'), (b'#ROSBAG V', '.bag'))
_LABELS = {'mcap': 'an MCAP file', 'sqlite3': 'a SQLite3 (.db3) file', 'rosbag1': 'a ROS 1 bag',
           'rosbag2': 'a rosbag2 recording'}
_HINTS = {
    'mcap': '; `mcap recover` may rebuild a damaged file',
    'sqlite3': '; `sqlite3 FILE .recover` may rescue the rows of a damaged one',
    'rosbag1': '; `rosbag reindex` may repair a bag cut short',
    'rosbag2': '',
}


class BagSource:
    """One recording, opened as a context manager, read as a stream in log-time order.

    Accepts a rosbag2 directory with metadata.yaml (.mcap or .db3 storage), a single .mcap or
    .db3 file, or a ROS 1 .bag file. After ``__enter__``: ``topics``, ``start_s``, ``end_s``
    and ``message_count`` describe it (bag log times in float s; NaN and 0 when empty),
    ``storage`` is 'mcap', 'sqlite3' or 'rosbag1', and ``damage`` says why an MCAP file had to
    be read by scanning (None normally).
    """

    def __init__(self, path: str | Path) -> None:
        """Remember the recording at ``path``; nothing is opened until ``with``."""
        self.path = Path(path)
        self.topics: dict[str, TopicInfo] = {}
        self.start_s = math.nan
        self.end_s = math.nan
        self.message_count = 0
        self.storage = ''
        self.damage: str | None = None
        self.read_count = 0
        """Messages yielded by the latest :meth:`messages` iteration."""
        self._backend: _RosbagsBackend | _McapSalvage | None = None
        self._last_ns: int | None = None
        self._mcap_files: list[Path] = []  # the MCAP storage files, for salvage while reading

    def __repr__(self) -> str:
        """Return a short description: path, storage, message count."""
        state = f'{self.storage}, {self.message_count} messages' if self._backend else 'closed'
        return f'BagSource({str(self.path)!r}, {state})'

    # -- opening --------------------------------------------------------------------------------

    def __enter__(self) -> BagSource:
        """Open the recording; raise RecordingError (one line) when it cannot be read."""
        if self._backend is not None:
            raise RuntimeError(f'{self.path} is already open')
        backend = self._open()
        self._backend = backend
        self.damage = backend.damage
        by_topic: dict[str, list[_Channel]] = {}
        for chan in backend.channels:
            by_topic.setdefault(chan.topic, []).append(chan)
        self.topics = {
            name: TopicInfo(name, '|'.join(sorted({c.msgtype for c in chans})),
                            sum(c.count for c in chans))
            for name, chans in sorted(by_topic.items())
        }
        self.message_count = backend.count
        if backend.count:
            self.start_s = _ns_to_s(backend.start_ns)
            self.end_s = _ns_to_s(backend.end_ns)
        else:
            self.start_s = self.end_s = math.nan
        return self

    def __exit__(self, *exc: object) -> None:
        """Close the recording."""
        backend, self._backend = self._backend, None
        if backend is not None:
            try:
                backend.close()
            except _FILE_ERRORS:
                pass  # closing a damaged file may complain again; the reading is over anyway

    def _fail(self, what: str) -> RecordingError:
        """Return the one-line error for this recording."""
        return RecordingError(f'{self.path}: {what}')

    def _open(self) -> _RosbagsBackend | _McapSalvage:
        """Check the path and open it with the reader its kind needs."""
        path = self.path
        if not path.exists():
            broken = ' (a broken symbolic link)' if path.is_symlink() else ''
            raise self._fail(f'no such file or directory{broken}; check the path')
        if path.is_dir():
            return self._open_directory()
        if not path.is_file():
            raise self._fail('not a regular file or directory; expected a recording')
        try:
            size = path.stat().st_size
        except OSError as err:
            raise self._fail(f'cannot be read: {_one_line(err)}') from None
        if size == 0:
            raise self._fail('the file is empty (0 bytes): the recording was never written; '
                             'record it again')
        kinds = {'.mcap': 'mcap', '.db3': 'sqlite3', '.bag': 'rosbag1'}
        storage = kinds.get(path.suffix)
        if storage is None:
            raise self._fail(self._unknown_type())
        self.storage = storage
        if storage == 'mcap':
            self._mcap_files = [path]
        reader_cls = Reader1 if storage == 'rosbag1' else Reader2
        reader, err = self._try_rosbags(reader_cls)
        if reader is not None:
            return _RosbagsBackend(reader)
        assert err is not None
        if storage == 'mcap':
            salvage = self._try_salvage([path], err)
            if salvage is not None:
                return salvage
        raise self._unreadable(storage, err)

    def _sniff(self) -> str | None:
        """Return the suffix whose format signature the file starts with, or None."""
        try:
            with self.path.open('rb') as fh:
                start = fh.read(16)
        except OSError:
            return None
        return next((suffix for magic, suffix in _SNIFF if start.startswith(magic)), None)

    def _unknown_type(self) -> str:
        """Return the reason for a file whose suffix names no recording format."""
        what = (f'unknown recording type {self.path.suffix!r}' if self.path.suffix
                else 'a file without a suffix is not a known recording type')
        looks = self._sniff()
        if looks:
            return f'{what}; its content looks like a {looks} file: rename it to end in {looks}'
        return (f'{what}; expected a rosbag2 directory (with metadata.yaml), a .mcap or .db3 '
                'file, or a ROS 1 .bag file')

    def _open_directory(self) -> _RosbagsBackend | _McapSalvage:
        """Open a rosbag2 directory."""
        path = self.path
        if not (path / 'metadata.yaml').is_file():
            stored = sorted(p for p in path.iterdir() if p.suffix in ('.mcap', '.db3'))
            inside = (f'read the storage file {stored[0]} directly, or ' if len(stored) == 1
                      else '')
            raise self._fail('the directory has no metadata.yaml, so it is not a complete '
                             f'rosbag2 recording; {inside}rebuild it with '
                             f'`ros2 bag reindex {path}`')
        info = _read_metadata(path)
        identifier = str(info.get('storage_identifier', '')) if info else ''
        self.storage = identifier if identifier in ('mcap', 'sqlite3') else 'rosbag2'
        compression = str(info.get('compression_mode', '') or '').lower() if info else 'none'
        if info and identifier == 'mcap' and compression in ('', 'none'):
            try:
                self._mcap_files = [path / PurePath(str(name)).name
                                    for name in info['relative_file_paths']]
            except (KeyError, TypeError):
                self._mcap_files = []
        reader, err = self._try_rosbags(Reader2)
        if reader is not None:
            return _RosbagsBackend(reader)
        assert err is not None
        if self._mcap_files:
            files = self._mcap_files
            salvage = self._try_salvage(files, err)
            if salvage is not None:
                listed = info.get('message_count')
                if salvage.lost and isinstance(listed, int):
                    salvage.damage = (f'{salvage.damage}; metadata.yaml lists {listed} '
                                      f'messages, {salvage.count} are readable')
                return salvage
        raise self._unreadable('rosbag2' if not info else self.storage, err)

    def _try_rosbags(self, reader_cls: type[Reader1] | type[Reader2]
                     ) -> tuple[Reader1 | Reader2 | None, BaseException | None]:
        """Open with rosbags; return (reader, None) or (None, the error it raised)."""
        try:
            reader = reader_cls(self.path)
            reader.open()
        except _FILE_ERRORS as err:
            return None, err
        return reader, None

    def _try_salvage(self, files: list[Path], err: BaseException) -> _McapSalvage | None:
        """Scan MCAP files rosbags refused; None when they are not MCAP data at all."""
        try:
            salvage = _McapSalvage(files)
        except (_Damaged, OSError, struct.error, ValueError, OverflowError, MemoryError):
            return None
        if not salvage.lost:
            salvage.damage = (f'rosbags cannot use its summary ({_one_line(err)}); read by '
                              'scanning its intact data section')
        return salvage

    def _unreadable(self, storage: str, err: BaseException) -> RecordingError:
        """Return the error for a recording rosbags cannot open."""
        if isinstance(err, PermissionError):
            return self._fail(f'cannot be read: permission denied ({_one_line(err)}); check the '
                              'permissions of the file or directory')
        label = _LABELS.get(storage, 'a recording')
        if self.path.is_file():
            looks = self._sniff()
            if looks is None:
                return self._fail(f'cannot be read as {label}: it does not start with the '
                                  f'signature of {label} ({_one_line(err)}); it is damaged or '
                                  'of another kind')
            if looks != self.path.suffix:
                return self._fail(f'cannot be read as {label}: its content looks like a {looks} '
                                  f'file; rename it to end in {looks}')
        return self._fail(f'cannot be read as {label}: {_one_line(err)}; it is damaged or not '
                          f'{label}{_HINTS.get(storage, "")}')

    # -- queries --------------------------------------------------------------------------------

    def _require_open(self) -> _RosbagsBackend | _McapSalvage:
        """Return the open backend or raise RuntimeError (use ``with``)."""
        if self._backend is None:
            raise RuntimeError(f'{self.path} is not open; use `with BagSource(path) as bag:`')
        return self._backend

    def topics_of_type(self, msgtype: str) -> list[str]:
        """Return the names of the topics recorded with ``msgtype``, sorted."""
        self._require_open()
        return [name for name, info in self.topics.items() if info.msgtype == msgtype]

    def msgtype_of(self, topic: str) -> str | None:
        """Return the message type recorded on ``topic``, or None if the topic is absent."""
        self._require_open()
        info = self.topics.get(topic)
        return info.msgtype if info else None

    # -- reading --------------------------------------------------------------------------------

    def _decoder(self, chan: _Channel) -> Callable[[bytes], Any]:
        """Return the payload decoder of a channel, or raise RecordingError if none exists."""
        if chan.serialization == 'cdr' and chan.msgtype == RANGE_TYPE:
            return decode_range
        if chan.serialization == 'cdr' and chan.msgtype == ODOMETRY_TYPE:
            return decode_odometry
        if chan.serialization not in ('cdr', 'ros1'):
            raise self._fail(f'topic {chan.topic} is stored as {chan.serialization!r}, '
                             'which cannot be decoded (expected cdr)')
        store = self._typestore(chan)
        msgtype = chan.msgtype
        if chan.serialization == 'ros1':
            return lambda raw: store.deserialize_ros1(raw, msgtype)
        return lambda raw: store.deserialize_cdr(raw, msgtype)

    def _typestore(self, chan: _Channel) -> Typestore:
        """Return the typestore that decodes a channel: its stored definition, else standard."""
        problem = 'has no definition in the recording'
        if chan.msgdef_format and chan.msgdef:
            try:
                return _embedded_typestore(chan.msgdef_format, chan.msgdef, chan.msgtype)
            except (TypesysError, KeyError, ValueError, IndexError, AssertionError) as err:
                problem = f'has a stored definition that does not parse ({_one_line(err)})'
        if chan.serialization == 'ros1':
            distro = 'noetic'
        else:
            named = self._backend.distro if self._backend else None
            distro = named if named in DISTROS and named != 'noetic' else 'humble'
        standard = typestore_for(distro)
        if chan.msgtype in standard.types:
            return standard
        raise self._fail(f'cannot decode topic {chan.topic}: its type {chan.msgtype or "(none)"} '
                         f'{problem} and is not a standard {distro} type')

    def messages(self, topics: Iterable[str]) -> Iterator[tuple[str, float, Any]]:
        """Yield (topic, log time s, decoded message) for ``topics`` in log-time order.

        Topics the recording lacks yield nothing. When the storage turns out damaged partway,
        everything readable is yielded first, then RecordingError says how far reading got.
        ``read_count`` counts the messages yielded.
        """
        backend = self._require_open()
        wanted = {topics} if isinstance(topics, str) else set(topics)
        decoders = {chan.key: (chan, self._decoder(chan))
                    for chan in backend.channels if chan.topic in wanted}
        self.read_count = 0
        self._last_ns = None
        return self._stream(backend, decoders)

    def _stream(self, backend: _RosbagsBackend | _McapSalvage,
                decoders: dict[Hashable, tuple[_Channel, Callable[[bytes], Any]]]
                ) -> Iterator[tuple[str, float, Any]]:
        """Decode and yield the backend's messages; turn damage into RecordingError.

        MCAP storage that rosbags fails on before the first message is read again by
        scanning (see the module docstring), from the start.
        """
        stream = backend.iterate(list(decoders))
        try:
            while True:
                problem: str | None = None
                try:
                    key, log_ns, raw = next(stream)
                except StopIteration:
                    break
                except _FILE_ERRORS as err:
                    problem, error = _one_line(err), err
                else:
                    chan, decode = decoders[key]
                    try:
                        message = decode(raw)
                    except _DECODE_ERRORS as err:
                        problem = (f'a message on {chan.topic} does not decode as '
                                   f'{chan.msgtype}: {_one_line(err)}')
                        error = err
                if problem is not None:
                    salvage = self._salvage_unread(backend, error)
                    if salvage is None:
                        raise self._cut(problem) from None
                    stream.close()
                    topics = {chan.topic for chan, _ in decoders.values()}
                    backend = salvage
                    decoders = {chan.key: (chan, self._decoder(chan))
                                for chan in salvage.channels if chan.topic in topics}
                    stream = salvage.iterate(list(decoders))
                    continue
                self.read_count += 1
                self._last_ns = log_ns
                yield chan.topic, _ns_to_s(log_ns), message
        finally:
            stream.close()
        if backend.lost:
            raise self._cut(backend.damage or 'the data section is cut short')
        listed = sum(chan.count for chan, _ in decoders.values())
        if isinstance(backend, _RosbagsBackend) and self.read_count < listed:
            # damage the reader steps over without noticing (a run of zero bytes inside an
            # MCAP chunk reads as empty records): fewer messages than the recording lists
            raise self._cut(f'only {self.read_count} of the {listed} messages its index lists '
                            'on these topics could be read; the storage is damaged')

    def _salvage_unread(self, backend: _RosbagsBackend | _McapSalvage,
                        err: BaseException) -> _McapSalvage | None:
        """Return a salvage reader for MCAP storage rosbags failed on before yielding anything
        (it reads a chunk whole, so damage inside one loses every message of it), or None."""
        if not isinstance(backend, _RosbagsBackend) or self.read_count or not self._mcap_files:
            return None
        salvage = self._try_salvage(self._mcap_files, err)
        if salvage is not None and not salvage.lost:
            salvage.damage = (f'rosbags failed while reading ({_one_line(err)}); read by '
                              'scanning its data section')
        if salvage is not None:
            self.damage = salvage.damage
        return salvage

    def _cut(self, reason: str) -> RecordingError:
        """Return the error for storage that stops being readable partway."""
        if self._last_ns is None:
            where = 'before the first message'
        else:
            t_s = _ns_to_s(self._last_ns)
            where = f'bag time {t_s:.3f} s, {t_s - self.start_s:.3f} s after the start'
        return self._fail(f'truncated or corrupted after {self.read_count} messages ({where}): '
                          f'{reason}')
