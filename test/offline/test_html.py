"""The HTML report: one self-contained, well-formed page that escapes what a recording holds."""
from __future__ import annotations

import base64
from html.parser import HTMLParser
import math
from pathlib import Path

import numpy as np
import pytest
from testkit import make_config

from sonar_guard import SAFETY_CAUTION
from sonar_guard.core.monitor import Event
from sonar_guard.errors import SonarGuardError
from sonar_guard.offline.html import render_html, write_html_atomic
from sonar_guard.offline.results import VERDICT_CODES, BagResult, SensorSummary

T0 = 1_700_000_000.0  # bag time of the made-up recordings' start, s
HOSTILE = '<script>alert(1)</script>'
PNG_SIGNATURE = b'\x89PNG\r\n\x1a\n'  # PNG spec (ISO/IEC 15948) sec. 5.2
VOID = {'area', 'base', 'br', 'col', 'embed', 'hr', 'img', 'input', 'link', 'meta', 'source',
        'track', 'wbr'}  # HTML Living Standard, void elements: no end tag


class Page(HTMLParser):
    """Walk a page: check tags nest properly, collect images, links, text and table rows."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.problems: list[str] = []
        self.tags: list[str] = []
        self.attrs: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []
        self.tables: list[dict] = []  # {'class': ..., 'rows': [[cell text, ...], ...]}
        self._cell: list[str] | None = None
        self._row: list[str] | None = None
        self._row_titles: list[str | None] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append(tag)
        self.attrs.append((tag, a))
        if tag not in VOID:
            self.stack.append(tag)
        if tag == 'table':
            self.tables.append({'class': a.get('class'), 'rows': [], 'titles': []})
        elif tag == 'tr':
            self._row, self._row_titles = [], []
        elif tag in ('td', 'th'):
            self._cell = []
            self._row_titles.append(a.get('title'))

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)
        if tag not in VOID:
            self.handle_endtag(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.problems.append(f'</{tag}> closes {self.stack[-1:] or "nothing"}')
        else:
            self.stack.pop()
        if tag in ('td', 'th') and self._cell is not None and self._row is not None:
            self._row.append(''.join(self._cell).strip())
            self._cell = None
        elif tag == 'tr' and self._row is not None and self.tables:
            self.tables[-1]['rows'].append(self._row)
            self.tables[-1]['titles'].append(self._row_titles)
            self._row = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)

    @property
    def plain(self) -> str:
        return ' '.join(' '.join(self.text).split())

    def images(self) -> list[str]:
        return [a.get('src') or '' for tag, a in self.attrs if tag == 'img']


def parse(text: str) -> Page:
    page = Page()
    page.feed(text)
    page.close()
    assert not page.problems, page.problems[:5]
    assert page.stack == [], f'unclosed: {page.stack}'
    return page


def summary(name: str, topic: str, verdicts: list[str], ranges: list[float],
            start: float = T0) -> SensorSummary:
    """A sensor summary with one reading per verdict given, 0.1 s apart."""
    s = SensorSummary(name, topic)
    for i, (v, r) in enumerate(zip(verdicts, ranges)):
        s.readings += 1
        s.counts[v] += 1
        if math.isfinite(r) and r >= 0:
            s.range_min_m = min(s.range_min_m, r)
            s.range_max_m = max(s.range_max_m, r)
        s.ranges.add(start + 0.1 * i, r, VERDICT_CODES[v])
    s.periods.add_many(np.full(len(verdicts), 0.1))
    s.latencies.add_many(np.linspace(0.05, 0.08, len(verdicts)))
    return s


def make_result(**changes) -> BagResult:
    """A two-sensor recording of the test robot with a few verdicts, events and series."""
    config = make_config()
    verdicts = ['ok'] * 6 + ['blind', 'blind', 'no_echo', 'jump', 'ok', 'late']
    ranges = [2.0, 1.9, 1.8, 1.7, 1.6, 1.5, 0.05, 0.05, math.inf, 3.9, 1.4, 1.3]
    ahead = summary('ahead', 'sonar/ahead', verdicts, ranges)
    behind = summary('behind', 'sonar/behind', ['no_echo'] * 5 + ['invalid', 'stale'],
                     [math.inf] * 5 + [math.nan, 2.0])
    result = BagResult(path='/bags/run_1', config=config, config_source='parameters from p.yaml',
                       sensors=[ahead, behind], t_start=T0, t_end=T0 + 1.2, messages=40,
                       notes=['odometry topic odom found'])
    for i in range(13):
        t = T0 + 0.1 * i
        result.limit.add(t, max(0.0, 1.0 - 0.1 * i))
        result.speed.add(t, 0.5)
    result.events = [
        Event('overspeed', None, T0 + 0.8, T0 + 1.2, 'speed up to 0.30 m/s above the limit'),
        Event('blind', 'ahead', T0 + 0.6, T0 + 0.7, '0.050 m < min_range 0.15 m'),
        Event('jump', 'ahead', T0 + 0.9, T0 + 0.9, '1.5 -> 3.9 m in 0.1 s'),
        Event('stale', 'behind', T0 + 0.5, T0 + 1.2, 'no usable reading for more than 0.3 s'),
        Event('slot_clash', 'behind', T0 + 0.25, T0 + 0.35, 'fired 1.0 ms after ahead'),
    ]
    for key, value in changes.items():
        setattr(result, key, value)
    return result


@pytest.fixture(scope='module')
def one():
    """The report of make_result() as text and as a walked page (rendered once: it takes ~1 s)."""
    text = render_html([make_result()])
    return text, parse(text)


def test_report_is_well_formed_and_every_image_is_an_inline_png():
    """Tags nest, every <img> is a data: PNG that decodes, and each recording has its plots."""
    text = render_html([make_result(), make_result(path='/bags/run_2')])
    page = parse(text)
    assert text.startswith('<!DOCTYPE html>')
    images = page.images()
    assert len(images) == 8  # ranges, speed, timing, layout for each of two recordings
    for src in images:
        assert src.startswith('data:image/png;base64,')
        data = base64.b64decode(src.split(',', 1)[1], validate=True)
        assert data[:8] == PNG_SIGNATURE


def test_report_opens_with_the_caution_and_says_what_was_checked(one):
    """SAFETY_CAUTION in a visible box before the summary, then a one-line statement of scope."""
    _, page = one
    assert SAFETY_CAUTION in page.plain
    classes = [a.get('class') for tag, a in page.attrs]
    assert classes.index('caution') < [a.get('id') for _, a in page.attrs].index('summary')
    assert 'Checked 1 recording: 19 range readings from 2 sensors' in page.plain


def test_every_sensor_and_every_event_kind_is_listed(one):
    """Sensor names and topics in the sensor table; each event kind and sensor in the events."""
    result = make_result()
    _, page = one
    sensor_table = next(t for t in page.tables if t['rows'][0][:2] == ['sensor', 'topic'])
    assert [row[:2] for row in sensor_table['rows'][1:]] == [['ahead', 'sonar/ahead'],
                                                             ['behind', 'sonar/behind']]
    events = next(t for t in page.tables if t['class'] == 'events')['rows'][1:]
    assert {row[1] for row in events} == {e.kind for e in result.events}
    assert {row[2] for row in events} == {'ahead', 'behind', 'robot'}


def test_verdict_shares_are_percentages_of_the_sensor_readings(one):
    """ahead: 7 ok of 12 readings is 58.3 %, 2 blind 16.7 %; behind: 5 no_echo of 7 is 71.4 %."""
    _, page = one
    table = next(t for t in page.tables if t['rows'][0][:2] == ['sensor', 'topic'])
    head = table['rows'][0]
    rows = {row[0]: dict(zip(head, row)) for row in table['rows'][1:]}
    assert rows['ahead']['readings'] == '12'
    assert rows['ahead']['ok %'] == f'{100 * 7 / 12:.1f}'
    assert rows['ahead']['blind %'] == f'{100 * 2 / 12:.1f}'
    assert rows['behind']['no_echo %'] == f'{100 * 5 / 7:.1f}'
    assert rows['behind']['ok %'] == '0'
    assert rows['ahead']['range seen (m)'] == '0.05\u20133.90'


def test_summary_gives_duration_readings_events_lowest_limit_and_status():
    """One row per recording; an error replaces 'complete' with the reason."""
    broken = make_result(path='/bags/cut', error='chunk 3 is truncated')
    page = parse(render_html([make_result(), broken]))
    table = page.tables[0]
    head = table['rows'][0]
    rows = [dict(zip(head, row)) for row in table['rows'][1:]]
    assert rows[0]['recording'] == '/bags/run_1'
    assert rows[0]['duration (s)'] == '1.2'
    assert rows[0]['readings'] == '19'
    assert rows[0]['events'] == '5'
    assert rows[0]['overspeed'] == '1' and rows[0]['stale'] == '1'
    assert rows[0]['lowest limit (m/s)'] == '0.00'
    assert rows[0]['status'] == 'complete'
    assert rows[1]['status'] == 'stopped early: chunk 3 is truncated'


def test_hostile_text_from_a_recording_is_escaped_everywhere():
    """Names, topics, paths, details, notes, errors and the config source never become markup."""
    hostile = make_result(path=f'/bags/{HOSTILE}', config_source=HOSTILE, notes=[HOSTILE],
                          error=HOSTILE)
    hostile.sensors.append(summary(HOSTILE, f'sonar/{HOSTILE}', ['ok', 'no_echo'],
                                   [1.0, math.inf]))
    hostile.events.append(Event(HOSTILE, HOSTILE, T0 + 0.3, T0 + 0.4, f'"{HOSTILE}" \'x\''))
    text = render_html([hostile], title=HOSTILE, generated=HOSTILE)
    assert HOSTILE not in text
    assert '<script' not in text.lower()
    assert '&lt;script&gt;alert(1)&lt;/script&gt;' in text
    page = parse(text)
    assert 'script' not in page.tags
    assert page.plain.count(HOSTILE) >= 8  # shown as text, not dropped
    assert f'"{HOSTILE}" \'x\'' in page.plain


def test_dollar_signs_in_names_do_not_break_the_plots():
    """A name that would be mathtext in matplotlib ('$\\frac{$') is drawn literally."""
    result = make_result(path='/bags/$\\frac{$')
    result.sensors.append(summary('$\\frac{$', 'sonar/x', ['ok', 'ok'], [1.0, 1.1]))
    page = parse(render_html([result]))
    assert len(page.images()) == 4


def test_report_loads_nothing_from_outside(one):
    """No outside URLs, scripts, stylesheets or frames; images inline; links stay in the page."""
    text, page = one
    assert 'http://' not in text and 'https://' not in text
    assert 'url(' not in text and '@import' not in text  # nothing fetched from the styles
    assert not {'script', 'link', 'iframe', 'object', 'embed'} & set(page.tags)
    for tag, a in page.attrs:
        if 'src' in a:
            assert a['src'].startswith('data:image/png;base64,'), (tag, a['src'][:40])
        if 'href' in a:
            assert a['href'].startswith('#'), (tag, a['href'])
    csp = [a.get('content') for tag, a in page.attrs
           if tag == 'meta' and a.get('http-equiv') == 'Content-Security-Policy']
    assert csp and "default-src 'none'" in csp[0]


def test_event_times_are_relative_with_the_bag_time_alongside(one):
    """Start and end in s since the bag start; the bag time in the cell's title and a column."""
    _, page = one
    table = next(t for t in page.tables if t['class'] == 'events')
    head = table['rows'][0]
    blind = next(i for i, row in enumerate(table['rows']) if row[1] == 'blind')
    row = dict(zip(head, table['rows'][blind]))
    titles = dict(zip(head, table['titles'][blind]))
    assert row['start (s)'] == '0.600' and row['end (s)'] == '0.700'
    assert row['duration (s)'] == '0.100'
    assert titles['start (s)'].startswith(f'bag time {T0 + 0.6:.3f} s')
    # 1_700_000_000.6 s Unix time is 2023-11-14 22:13:20.600 UTC (datetime, stdlib)
    assert row['start, bag time'] == f'{T0 + 0.6:.3f} s (2023-11-14 22:13:20.600 UTC)'


def test_events_are_listed_by_start_time(one):
    """The events table is sorted by start time whatever order the result holds them in."""
    result = make_result()
    _, page = one
    table = next(t for t in page.tables if t['class'] == 'events')
    starts = [float(row[3]) for row in table['rows'][1:]]
    assert starts == sorted(round(e.t_start - T0, 3) for e in result.events)


def test_events_table_is_capped_and_says_how_many_more():
    """With more events than the cap, the first ones by time are listed and the rest counted."""
    many = [Event('jump', 'ahead', T0 + 0.001 * i, T0 + 0.001 * i, f'jump {i}')
            for i in range(510)]
    page = parse(render_html([make_result(events=many[::-1])], max_events=500))
    table = next(t for t in page.tables if t['class'] == 'events')
    assert len(table['rows']) - 1 == 500
    assert table['rows'][-1][-1] == 'jump 499'
    assert '10 more events not shown' in page.plain


def test_default_cap_is_500_rows():
    """Without max_events the table stops at 500 rows."""
    many = [Event('jump', 'ahead', T0 + 0.001 * i, T0 + 0.001 * i, 'j') for i in range(501)]
    page = parse(render_html([make_result(events=many)]))
    table = next(t for t in page.tables if t['class'] == 'events')
    assert len(table['rows']) - 1 == 500
    assert '1 more event not shown' in page.plain


@pytest.mark.parametrize('sensors', [[], [SensorSummary('ahead', 'sonar/ahead')]])
def test_empty_recording_renders_with_no_data_plots(sensors):
    """No readings at all (no sensors, or sensors that never spoke): still a full page."""
    empty = BagResult(path='/bags/empty', config=make_config(), config_source='defaults',
                      sensors=sensors)
    page = parse(render_html([empty]))
    images = page.images()
    assert len(images) == 4
    for src in images:
        assert base64.b64decode(src.split(',', 1)[1])[:8] == PNG_SIGNATURE
    assert page.plain.count('(no data)') == 3  # ranges, speed, timing; the layout has data
    assert 'No events.' in page.plain


def test_no_recordings_at_all_still_renders():
    """An empty list gives a page with the caution and an empty summary."""
    page = parse(render_html([]))
    assert SAFETY_CAUTION in page.plain
    assert page.images() == []


# ------------------------------------------------------------------ write_html_atomic


def test_atomic_write_replaces_the_file_and_leaves_no_temporary_file(tmp_path, one):
    """The report lands whole, replacing an older one; nothing else is left in the folder."""
    target = tmp_path / 'report.html'
    target.write_text('old', encoding='utf-8')
    text, _ = one
    write_html_atomic(text, target)
    assert target.read_text(encoding='utf-8') == text
    assert [p.name for p in tmp_path.iterdir()] == ['report.html']


def test_atomic_write_that_fails_keeps_the_old_report_and_no_temporary_file(tmp_path):
    """Text that cannot be encoded fails mid-write: the old file stays, no temp file remains."""
    target = tmp_path / 'report.html'
    target.write_text('old', encoding='utf-8')
    with pytest.raises(UnicodeEncodeError):
        write_html_atomic('<p>\ud800</p>', target)  # a lone surrogate has no UTF-8 form
    assert target.read_text(encoding='utf-8') == 'old'
    assert [p.name for p in tmp_path.iterdir()] == ['report.html']


def test_atomic_write_refuses_a_symlink(tmp_path):
    """A symbolic link at the path is refused with a one-line error; its target is untouched."""
    elsewhere = tmp_path / 'elsewhere.txt'
    elsewhere.write_text('keep me', encoding='utf-8')
    link = tmp_path / 'report.html'
    link.symlink_to(elsewhere)
    with pytest.raises(SonarGuardError) as info:
        write_html_atomic('<p>x</p>', link)
    assert '\n' not in str(info.value) and 'report.html' in str(info.value)
    assert link.is_symlink() and elsewhere.read_text(encoding='utf-8') == 'keep me'
    assert sorted(p.name for p in tmp_path.iterdir()) == ['elsewhere.txt', 'report.html']


def test_atomic_write_into_a_missing_folder_is_a_one_line_error(tmp_path):
    """A folder that does not exist gives SonarGuardError, not a traceback-worthy OSError."""
    with pytest.raises(SonarGuardError) as info:
        write_html_atomic('<p>x</p>', tmp_path / 'missing' / 'report.html')
    assert '\n' not in str(info.value)


def test_written_report_reads_back_as_the_same_page(tmp_path, one):
    """What is written reads back, as UTF-8, to the very text rendered."""
    text, _ = one
    target = Path(tmp_path) / 'r.html'
    write_html_atomic(text, target)
    assert target.read_text(encoding='utf-8') == text
