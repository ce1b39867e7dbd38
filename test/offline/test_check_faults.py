"""`sonar-guard check` on recordings with faults injected at known times, in every format."""
from __future__ import annotations

import json
import math
from pathlib import Path
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
    assert code in (0, 1)
    assert {s['topic'] for s in report['sensors']} == {'/sonar/ahead', '/sonar/behind'}
    assert 'no --params' in report['bags'][0]['summary']['config']


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
