"""The demo end to end: simulate the invented corridor run, check it, write the report."""
from __future__ import annotations

import contextlib
import io
import json

import pytest

from sonar_guard import SAFETY_CAUTION
from sonar_guard.cli import main
from sonar_guard.core.monitor import EVENT_KINDS
from sonar_guard.offline.causes import EVENT_CAUSES
from sonar_guard.sim.demo import PLANNED


@pytest.fixture(scope='module')
def demo(tmp_path_factory):
    """Run `sonar-guard demo` once into a temporary folder."""
    out = tmp_path_factory.mktemp('demo')
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        code = main(['demo', '--out', str(out)])
    (out / 'printed.txt').write_text(printed.getvalue(), encoding='utf-8')
    return code, out


def test_demo_writes_the_recording_and_both_reports(demo):
    """Exit 0; the recording, report.html (with plots) and report.json are there."""
    code, out = demo
    assert code == 0
    assert (out / 'corridor_run' / 'metadata.yaml').is_file()
    html = (out / 'report.html').read_text(encoding='utf-8')
    assert html.count('data:image/png;base64,') >= 4
    assert 'not a certified safety function' in html
    report = json.loads((out / 'report.json').read_text(encoding='utf-8'))
    assert report['summary']['readings'] > 5000  # 8 sensors x ~12 Hz x 75 s


@pytest.mark.parametrize('planned', PLANNED, ids=lambda p: p.what.split(':')[0])
def test_every_planned_happening_is_named_by_the_report(demo, planned):
    """Each planned happening shows as a finding of its kinds inside its time window."""
    _, out = demo
    report = json.loads((out / 'report.json').read_text(encoding='utf-8'))
    t0 = report['bags'][0]['summary']['t_start']
    hits = [e for e in report['events'] if e['kind'] in planned.kinds
            and planned.start <= e['t_start'] - t0 <= planned.end]
    assert hits, (planned, [(e['kind'], e['sensor'], e['t_start'] - t0)
                            for e in report['events']])


def test_shortened_demo_runs(tmp_path, capsys):
    """--duration cuts the run short and still checks and reports."""
    assert main(['demo', '--out', str(tmp_path), '--duration', '10']) == 0
    out = capsys.readouterr().out
    assert 'report:' in out and (tmp_path / 'report.html').is_file()


def test_the_summary_explains_every_kind_of_finding_once(demo):
    """Every kind the check produced, planned or not, gets one line saying how many and why
    (the planned happening, or the cause of that kind); the caution is said once."""
    _, out = demo
    printed = (out / 'printed.txt').read_text(encoding='utf-8')
    report = json.loads((out / 'report.json').read_text(encoding='utf-8'))
    produced: dict[str, int] = {}
    for e in report['events']:
        produced[e['kind']] = produced.get(e['kind'], 0) + 1
    assert produced
    lines = printed.splitlines()
    for kind, count in produced.items():
        mine = [line for line in lines if line.strip().startswith(f'{kind} {count}: ')]
        assert len(mine) == 1, (kind, printed)
        t0 = report['bags'][0]['summary']['t_start']
        unplanned = [e for e in report['events'] if e['kind'] == kind and not any(
            kind in p.kinds and p.start <= e['t_start'] - t0 <= p.end for p in PLANNED)]
        assert ('not planned' in mine[0]) == bool(unplanned)
        if unplanned:
            assert EVENT_CAUSES[kind] in mine[0]
    assert printed.count(SAFETY_CAUTION) == 1


def test_every_kind_of_finding_has_a_cause():
    """The cause table covers the contract's event kinds exactly (design.md)."""
    assert set(EVENT_CAUSES) == set(EVENT_KINDS)
