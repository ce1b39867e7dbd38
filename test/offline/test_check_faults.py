"""`sonar-guard check` on recordings with faults injected at known times, in every format."""
from __future__ import annotations

from contextlib import closing
import json
import math
from pathlib import Path
import shutil
import sqlite3
import subprocess
import sys

import bagkit
import pytest

from sonar_guard.cli import main

REPO = Path(__file__).resolve().parents[2]
PERIOD = bagkit.CYCLE  # one reading period of each sensor, s


@pytest.fixture(scope='module')
def recordings(tmp_path_factory):
    """The faulty scenario in all three storages, a clean one, and the parameter file."""
    root = tmp_path_factory.mktemp('bags')
    params = bagkit.write_params(root / 'params.yaml')
    bags = {
        'mcap': bagkit.write_scenario(root / 'faults_mcap', storage='mcap'),
        'sqlite3': bagkit.write_scenario(root / 'faults_sqlite3', storage='sqlite3'),
        'rosbag1': bagkit.write_scenario(root / 'faults.bag', storage='rosbag1'),
        'clean': bagkit.write_scenario(root / 'clean_mcap', storage='mcap', faults=False),
    }
    return params, bags


def run_json(capsys, *args) -> tuple[int, dict]:
    code = main(['check', *map(str, args), '--json', '-'])
    return code, json.loads(capsys.readouterr().out)


def relative(event: dict) -> tuple[float, float]:
    return event['t_start'] - bagkit.T0, event['t_end'] - bagkit.T0


@pytest.mark.parametrize('storage', ['mcap', 'sqlite3', 'rosbag1'])
def test_every_injected_fault_is_found_with_kind_sensor_and_time(recordings, capsys, storage):
    """Each fault: right kind and sensor, starting inside its window (one period of slack)."""
    params, bags = recordings
    code, report = run_json(capsys, bags[storage], '--params', params)
    assert code == 1
    events = report['events']
    for fault in bagkit.FAULTS:
        hits = [e for e in events if e['kind'] == fault.kind and e['sensor'] == fault.sensor
                and fault.start - PERIOD <= relative(e)[0] <= fault.end + PERIOD]
        assert hits, (fault, [(e['kind'], e['sensor'], relative(e)) for e in events])


@pytest.mark.parametrize('storage', ['mcap', 'sqlite3', 'rosbag1'])
def test_nothing_is_found_outside_the_fault_windows(recordings, capsys, storage):
    """Every event overlaps an injected fault's window (plus one period): clean stretches
    stay clean."""
    params, bags = recordings
    _, report = run_json(capsys, bags[storage], '--params', params)
    for e in report['events']:
        start, end = relative(e)
        assert any(f.start - PERIOD <= end and start <= f.end + PERIOD
                   for f in bagkit.FAULTS), e


def test_clean_recording_exits_0(recordings, capsys):
    """The same drive without faults: no findings, exit 0."""
    params, bags = recordings
    code, report = run_json(capsys, bags['clean'], '--params', params)
    assert code == 0, report['events']
    assert report['summary']['findings'] == 0
    assert report['summary']['readings'] > 800


def test_json_follows_the_contract(recordings, capsys):
    """Top level summary/sensors/events; events carry kind, sensor, t_start, t_end, detail."""
    params, bags = recordings
    _, report = run_json(capsys, bags['mcap'], '--params', params)
    assert {'summary', 'sensors', 'events'} <= set(report)
    for e in report['events']:
        assert {'kind', 'sensor', 't_start', 't_end', 'detail'} <= set(e)
        assert e['t_start'] <= e['t_end']
        assert isinstance(e['detail'], str) and e['detail']
    names = [s['name'] for s in report['sensors']]
    assert names == ['ahead', 'behind']
    ahead = report['sensors'][0]
    # the scenario's sensors fire once per cycle of two echo timeouts (reference.md F1)
    assert ahead['period_p50_s'] == pytest.approx(PERIOD, abs=0.002)
    assert sum(ahead['shares'].values()) == pytest.approx(1.0)


def test_fail_on_limits_which_kinds_count(recordings, capsys):
    """--fail-on none: findings are still reported but the exit code is 0."""
    params, bags = recordings
    code, report = run_json(capsys, bags['mcap'], '--params', params, '--fail-on', 'none')
    assert code == 0 and report['events']
    code, _ = run_json(capsys, bags['mcap'], '--params', params, '--fail-on', 'stuck')
    assert code == 1


def test_several_bags_in_parallel_match_one_by_one(recordings, capsys):
    """--jobs 2 gives the same report as checking sequentially."""
    params, bags = recordings
    _, one = run_json(capsys, bags['mcap'], bags['clean'], '--params', params)
    _, two = run_json(capsys, bags['mcap'], bags['clean'], '--params', params, '--jobs', '2')
    assert one['events'] == two['events']
    assert len(two['bags']) == 2 and two['summary']['bags'] == 2


def test_without_params_range_topics_are_found_by_type(recordings, capsys):
    """No --params: sensors come from the Range topics and the report says defaults apply."""
    _, bags = recordings
    code, report = run_json(capsys, bags['clean'])
    assert code == 0, report['events']
    assert {s['topic'] for s in report['sensors']} == {'/sonar/ahead', '/sonar/behind'}
    assert 'no --params' in report['bags'][0]['summary']['config']


# What the readings alone show (design.md event kinds): the geometry and the robot's limits
# are unknown without --params, so stuck and overspeed are not looked for.
READINGS_KINDS = {'blind', 'no_echo', 'invalid', 'stale', 'late', 'slot_clash', 'jump'}


@pytest.mark.parametrize('storage', ['mcap', 'sqlite3'])
def test_without_params_only_what_the_readings_show_is_reported(recordings, capsys, storage):
    """Every injected fault the readings alone show is found; stuck and overspeed, which
    need the robot's poses and brakes, are neither found nor guessed, and no allowed speed
    is given."""
    _, bags = recordings
    code, report = run_json(capsys, bags[storage])
    assert code == 1
    events = report['events']
    assert {e['kind'] for e in events} <= READINGS_KINDS, events
    for fault in bagkit.FAULTS:
        if fault.kind not in READINGS_KINDS:
            continue
        hits = [e for e in events if e['kind'] == fault.kind
                and e['sensor'] == f'sonar_{fault.sensor}'
                and fault.start - PERIOD <= relative(e)[0] <= fault.end + PERIOD]
        assert hits, (fault, [(e['kind'], e['sensor'], relative(e)) for e in events])
    summary = report['summary']
    assert summary['skipped_checks'] == ['overspeed', 'stuck']
    assert 'stuck' in summary['skipped_notice'] and '--params' in summary['skipped_notice']
    assert summary['min_limit_mps'] is None  # no limit from a made-up robot


def test_without_params_the_skipped_checks_are_said_once_at_the_top(recordings, capsys):
    """The terminal summary opens with the notice and says it only once."""
    _, bags = recordings
    assert main(['check', str(bags['mcap']), str(bags['clean'])]) == 1
    out = capsys.readouterr().out
    assert out.lstrip().startswith('No parameter file')
    assert 'Skipped: stuck' in ' '.join(out.split())  # rich folds long lines
    assert out.count('No parameter file') == 1


def test_with_params_nothing_is_skipped(recordings, capsys):
    """A parameter file enables every check; the summary says none was skipped."""
    params, bags = recordings
    _, report = run_json(capsys, bags['mcap'], '--params', params)
    assert report['summary']['skipped_checks'] == []
    assert report['summary']['skipped_notice'] == ''
    assert report['summary']['min_limit_mps'] is not None


def test_truncated_recording_exits_2_and_reports_what_was_readable(recordings, capsys,
                                                                   tmp_path):
    """A bag cut short: exit 2 with the reason, and the readable part is still reported."""
    params, bags = recordings
    cut = tmp_path / 'cut.mcap'
    source = next(bags['mcap'].glob('*.mcap'))
    data = source.read_bytes()
    cut.write_bytes(data[: int(len(data) * 0.6)])
    code, report = run_json(capsys, cut, '--params', params)
    assert code == 2
    incomplete = report['summary']['incomplete'] + report['summary']['unusable']
    assert incomplete and 'cut.mcap' in incomplete[0]['path']
    if report['summary']['checked']:
        assert report['summary']['readings'] > 0


@pytest.mark.parametrize('make', ['missing', 'empty', 'no_metadata', 'garbage'])
def test_unusable_input_exits_2_with_one_line_and_no_traceback(tmp_path, make):
    """Missing, empty, metadata-less and garbage inputs: exit 2, one line on stderr."""
    target = tmp_path / 'input.mcap'
    if make == 'empty':
        target.write_bytes(b'')
    elif make == 'no_metadata':
        target = tmp_path / 'folder'
        target.mkdir()
    elif make == 'garbage':
        target.write_bytes(b'not a recording at all' * 100)
    proc = subprocess.run([sys.executable, '-m', 'sonar_guard', 'check', str(target)],
                          capture_output=True, text=True, cwd=REPO, timeout=120)
    assert proc.returncode == 2
    assert 'Traceback' not in proc.stderr
    errors = [line for line in proc.stderr.splitlines() if line.startswith('sonar-guard:')]
    assert len(errors) == 1, proc.stderr


def test_html_report_is_written_whole(recordings, tmp_path, capsys):
    """--html writes one self-contained page with plots and the caution."""
    params, bags = recordings
    out = tmp_path / 'report.html'
    assert main(['check', str(bags['mcap']), '--params', str(params), '--html', str(out),
                 '--quiet']) == 1
    text = out.read_text(encoding='utf-8')
    assert text.count('data:image/png;base64,') >= 3
    assert 'not a certified safety function' in text
    assert not [p for p in tmp_path.iterdir() if p.name.startswith('.report.html')]


def test_terminal_summary_names_sensors_and_findings(recordings, capsys):
    """The default output is a readable summary with the findings and the caution."""
    params, bags = recordings
    assert main(['check', str(bags['mcap']), '--params', str(params)]) == 1
    out = ' '.join(capsys.readouterr().out.split())
    for needle in ('ahead', 'behind', 'findings:', 'stuck', 'overspeed',
                   'not a certified safety function'):
        assert needle in out


def test_decoded_ranges_match_what_was_written(recordings):
    """The stream read back carries the written ranges (float32, Range.msg)."""
    from sonar_guard.offline.bags import BagSource
    _, bags = recordings
    written = [(t, m.range) for topic, _, t, m in bagkit.scenario(faults=False)
               if topic == '/sonar/ahead']
    with BagSource(bags['clean']) as bag:
        read = [(t, m.range) for _, t, m in bag.messages(['/sonar/ahead'])]
    assert len(read) == len(written)
    for (tw, rw), (tr, rr) in zip(written, read):
        assert tr == pytest.approx(tw, abs=1e-9)
        assert (math.isinf(rw) and math.isinf(rr)) or rr == pytest.approx(rw, rel=1e-6)



def test_recorded_limits_that_make_no_sense_are_unusable_not_a_crash(tmp_path, capsys):
    """Without --params, Range limits come from the messages; nonsense there is exit 2."""
    from sonar_guard.offline.bagwrite import range_msg, write_bag
    records = [('/sonar/odd', 'sensor_msgs/msg/Range', 1.0 + 0.05 * k,
                range_msg(1.0 + 0.05 * k, 'odd', 1.0, min_range=5.0, max_range=1.0,
                          field_of_view=0.4)) for k in range(5)]
    bag = write_bag(tmp_path / 'odd', records, storage='mcap')
    code, report = run_json(capsys, bag)
    assert code == 2
    assert report['summary']['unusable'][0]['reason']


def test_wrong_message_type_on_a_configured_topic_is_unusable(recordings, tmp_path, capsys):
    """A configured Range topic that carries Odometry: exit 2 naming the topic and type."""
    from sonar_guard.offline.bagwrite import odometry_msg, write_bag
    params, _ = recordings
    records = [('/sonar/ahead', 'nav_msgs/msg/Odometry', 1.0 + 0.1 * k,
                odometry_msg(1.0 + 0.1 * k, 0.1)) for k in range(5)]
    bag = write_bag(tmp_path / 'wrong', records, storage='mcap')
    code, report = run_json(capsys, bag, '--params', params)
    assert code == 2
    reason = report['summary']['unusable'][0]['reason']
    assert '/sonar/ahead' in reason and 'nav_msgs/msg/Odometry' in reason


def test_missing_topics_are_noted_and_the_sensor_is_silent(recordings, tmp_path, capsys):
    """A recording without the rear sensor: a note, and a stale finding for it."""
    from sonar_guard.offline.bagwrite import write_bag
    params, _ = recordings
    records = [r for r in bagkit.scenario(faults=False) if r[0] != '/sonar/behind'
               and r[2] < bagkit.T0 + 3.0]
    bag = write_bag(tmp_path / 'no_rear', records, storage='mcap')
    code, report = run_json(capsys, bag, '--params', params)
    assert code == 1
    assert any("'behind'" in n for n in report['bags'][0]['summary']['notes'])
    assert any(e['kind'] == 'stale' and e['sensor'] == 'behind' for e in report['events'])


def test_recording_without_readings_exits_2(recordings, tmp_path, capsys):
    """An empty recording is not a clean one: exit 2 saying no readings were found."""
    from sonar_guard.offline.bagwrite import write_bag
    params, _ = recordings
    bag = write_bag(tmp_path / 'empty', iter([]), storage='mcap')
    code, report = run_json(capsys, bag, '--params', params)
    assert code == 2
    assert 'no readings' in report['summary']['incomplete'][0]['reason']


# ---------------------------------------------------------------------------------------------
# Corrupted (not truncated) storage: bytes overwritten in place, the file keeps its size.

def _sqlite_pages(bag: Path) -> None:
    """Overwrite three whole pages in the middle of the .db3 with a byte pattern."""
    db = bagkit.storage_file(bag)
    data = db.read_bytes()
    # SQLite file format (sqlite.org/fileformat.html, 1.3): the page size is the big-endian
    # 2-byte value at offset 16 of the header
    page = int.from_bytes(data[16:18], 'big')
    middle = len(data) // page // 2
    pattern = bytes((37 * i + 11) % 256 for i in range(3 * page))
    bagkit.overwrite(db, middle * page, pattern)


def _sqlite_blob(bag: Path) -> None:
    """Overwrite the CDR encapsulation header of one Range payload stored in the .db3."""
    db = bagkit.storage_file(bag)
    with closing(sqlite3.connect(db)) as conn:  # rosbag2 sqlite3 schema: messages, topics
        (payload,) = conn.execute(
            'SELECT m.data FROM messages m JOIN topics t ON t.id = m.topic_id '
            "WHERE t.name = '/sonar/ahead' ORDER BY m.timestamp LIMIT 1 OFFSET 250").fetchone()
    data = db.read_bytes()
    assert data.count(payload) == 1  # stamps make every payload unique
    # a CDR payload starts with its 4-byte encapsulation header (00 01 00 00: little-endian
    # CDR, the representation identifier of the OMG DDS-RTPS / DDS-XTypes specifications;
    # section numbers from memory); ff ff ff ff is no encapsulation at all
    bagkit.overwrite(db, data.find(payload), b'\xff\xff\xff\xff')


def _mcap_middle(bag: Path) -> None:
    """Overwrite 4 KiB in the middle of the .mcap with 0xff (longer than any record, so at
    least one record header inside the chunk is destroyed)."""
    mcap = bagkit.storage_file(bag)
    bagkit.overwrite(mcap, mcap.stat().st_size // 2, b'\xff' * 4096)


def _mcap_opcode(bag: Path) -> None:
    """Overwrite the opcode of the message record nearest the middle with 0x00: readers skip
    records of unknown opcodes (mcap.dev/spec), so one message goes missing without an error
    from the reader."""
    mcap = bagkit.storage_file(bag)
    middle = mcap.stat().st_size // 2
    messages = [at for at, op, _ in bagkit.mcap_chunk_records(mcap) if op == 0x05]
    bagkit.overwrite(mcap, min(messages, key=lambda at: abs(at - middle)), b'\x00')


CORRUPTIONS = {  # name: (storage, damage, whether messages before the damage are readable)
    'sqlite3-pages': ('sqlite3', _sqlite_pages, False),
    'sqlite3-blob': ('sqlite3', _sqlite_blob, True),
    'mcap-middle': ('mcap', _mcap_middle, True),
    'mcap-opcode': ('mcap', _mcap_opcode, True),
}


def _corrupted_copy(bags: dict, tmp_path: Path, name: str) -> Path:
    storage, damage, _ = CORRUPTIONS[name]
    bag = tmp_path / f'damaged_{storage}'
    shutil.copytree(bags[storage], bag)
    for p in bag.iterdir():  # keep metadata.yaml pointing at the renamed storage file
        if p.suffix in ('.mcap', '.db3'):
            p.rename(bag / f'{bag.name}{p.suffix}')
    meta = bag / 'metadata.yaml'
    meta.write_text(meta.read_text(encoding='utf-8').replace(bags[storage].name, bag.name),
                    encoding='utf-8')
    damage(bag)
    return bag


def assert_outputs_whole_or_absent(folder: Path, json_path: Path, html_path: Path) -> None:
    """Each report file is complete or not there, and no temporary file is left behind."""
    if json_path.exists():
        report = json.loads(json_path.read_text(encoding='utf-8'))
        assert report['summary']['exit_code'] == 2
    if html_path.exists():
        assert html_path.read_text(encoding='utf-8').rstrip().endswith('</html>')
    leftovers = [p.name for p in folder.iterdir() if p.name.endswith('.tmp')]
    assert not leftovers


@pytest.mark.parametrize('name', sorted(CORRUPTIONS))
def test_corrupted_storage_exits_2_with_one_line_and_reports_what_was_readable(
        recordings, tmp_path, capsys, name):
    """Bytes overwritten inside a recording: exit 2, one error line naming it, no traceback,
    whole reports (or none), and the messages before the damage still checked."""
    params, bags = recordings
    bag = _corrupted_copy(bags, tmp_path, name)
    out = tmp_path / 'out'
    out.mkdir()
    json_path, html_path = out / 'report.json', out / 'report.html'
    code = main(['check', str(bag), '--params', str(params), '--json', str(json_path),
                 '--html', str(html_path), '--quiet'])
    err = capsys.readouterr().err
    assert code == 2
    assert 'Traceback' not in err
    errors = [line for line in err.splitlines() if line.startswith('sonar-guard:')]
    assert len(errors) == 1 and bag.name in errors[0], err
    assert_outputs_whole_or_absent(out, json_path, html_path)
    summary = json.loads(json_path.read_text(encoding='utf-8'))['summary']
    _, _, readable = CORRUPTIONS[name]
    if readable:  # checked up to the damage and reported as incomplete
        assert summary['checked'] == 1 and summary['readings'] > 0
        assert 'corrupted after' in summary['incomplete'][0]['reason']
    else:  # SQLite refuses a damaged database at open: nothing is readable
        assert summary['checked'] == 0
        assert 'damaged' in summary['unusable'][0]['reason']


def test_mcap_damaged_mid_file_is_checked_up_to_the_damage(recordings, tmp_path, capsys):
    """The messages before the overwritten middle of a single-chunk MCAP are still checked:
    about half the readings, and the faults that lie in the first half are found."""
    params, bags = recordings
    _, clean = run_json(capsys, bags['mcap'], '--params', params)
    bag = _corrupted_copy(bags, tmp_path, 'mcap-middle')
    code, report = run_json(capsys, bag, '--params', params)
    assert code == 2
    share = report['summary']['readings'] / clean['summary']['readings']
    assert 0.3 < share < 0.7, share
    found = {(e['kind'], e['sensor']) for e in report['events']}
    assert {('blind', 'ahead'), ('no_echo', 'ahead'), ('stale', 'behind')} <= found


def test_corrupted_mcap_from_the_command_line_shows_no_traceback(recordings, tmp_path):
    """The installed command, in its own process: exit 2, one line on stderr, whole reports."""
    params, bags = recordings
    bag = _corrupted_copy(bags, tmp_path, 'mcap-middle')
    storage = bagkit.storage_file(bag)
    json_path, html_path = tmp_path / 'r.json', tmp_path / 'r.html'
    proc = subprocess.run([sys.executable, '-m', 'sonar_guard', 'check', str(storage),
                           '--params', str(params), '--json', str(json_path), '--html',
                           str(html_path), '--quiet'],
                          capture_output=True, text=True, cwd=REPO, timeout=300)
    assert proc.returncode == 2, proc.stderr
    assert 'Traceback' not in proc.stderr
    errors = [line for line in proc.stderr.splitlines() if line.startswith('sonar-guard:')]
    assert len(errors) == 1, proc.stderr
    assert_outputs_whole_or_absent(tmp_path, json_path, html_path)


def test_terminal_summary_gives_each_sensor_a_status_with_what_to_do(recordings, capsys):
    """Every sensor is named once in a status line: fine ones together, others with their
    deciding number and a 'next:' line (the levels of offline/health.py)."""
    from sonar_guard.cli import load_config_file
    from sonar_guard.offline.health import assess_recording
    from sonar_guard.offline.replay import check_bag

    params, bags = recordings
    expected = assess_recording(check_bag(str(bags['mcap']), load_config_file(params)))
    assert main(['check', str(bags['mcap']), '--params', str(params)]) == 1
    out = ' '.join(capsys.readouterr().out.split())  # undo rich's line folding
    for h in expected:
        if h.level == 'fine':
            assert h.name in out.split('fine: ', 1)[1].split(' sensor ')[0]
        else:
            assert f'{h.level.upper()} {h.name}: {h.deciding_text} next: {h.advice}' in out
    assert any(h.level != 'fine' for h in expected)
