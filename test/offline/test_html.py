"""The HTML report: one self-contained, well-formed page that escapes what a recording holds."""
from __future__ import annotations

import base64
import html
from html.parser import HTMLParser
import math
from pathlib import Path
import re

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
        self.items: list[dict] = []  # status lines: {'list', 'class', 'sensor', 'text'}
        self._cell: list[str] | None = None
        self._row: list[str] | None = None
        self._row_titles: list[str | None] = []
        self._row_spans: list[tuple[int, int]] = []
        self._in_head = False
        self._lists: list[str] = []  # classes of the open <ul> elements
        self._open_items: list[dict] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append(tag)
        self.attrs.append((tag, a))
        if tag not in VOID:
            self.stack.append(tag)
        if tag == 'table':
            self.tables.append({'class': a.get('class'), 'rows': [], 'titles': [], 'head': 0,
                                'spans': []})
        elif tag == 'thead':
            self._in_head = True
        elif tag == 'ul':
            self._lists.append(a.get('class') or '')
        elif tag == 'li' and self._lists and self._lists[-1].startswith('health'):
            item = {'list': self._lists[-1], 'class': a.get('class'),
                    'sensor': a.get('data-sensor'), 'text': []}
            self.items.append(item)
            self._open_items.append(item)
        elif tag == 'tr':
            self._row, self._row_titles, self._row_spans = [], [], []
        elif tag in ('td', 'th'):
            self._cell = []
            self._row_titles.append(a.get('title'))
            self._row_spans.append((int(a.get('rowspan', 1)), int(a.get('colspan', 1))))

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
            self.tables[-1]['spans'].append(self._row_spans)
            self.tables[-1]['head'] += self._in_head
            self._row = None
        elif tag == 'thead':
            self._in_head = False
        elif tag == 'ul' and self._lists:
            self._lists.pop()
        elif tag == 'li' and self._open_items and self._lists[-1:] == [
                self._open_items[-1]['list']]:
            item = self._open_items.pop()
            item['text'] = ' '.join(''.join(item['text']).split())

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)
        for item in self._open_items:
            item['text'].append(data)

    @property
    def plain(self) -> str:
        return ' '.join(' '.join(self.text).split())

    def images(self) -> list[str]:
        return [a.get('src') or '' for tag, a in self.attrs if tag == 'img']


def table(page: Page, css: str) -> list[dict[str, str]]:
    """Return the body rows of the first table of class ``css`` keyed by column name.

    A column's name is what a reader sees above it: a header spanning both header rows, or
    the header under a group header (``colspan``), e.g. 'nearest' under 'range seen (m)'.
    """
    found = next(t for t in page.tables if t['class'] == css)
    head, body = found['rows'][:found['head']], found['rows'][found['head']:]
    names = head[0]
    if len(head) == 2:
        below = iter(head[1])
        names = []
        for cell, (rowspan, colspan) in zip(head[0], found['spans'][0]):
            names += [cell] if rowspan == 2 else [next(below) for _ in range(colspan)]
    return [dict(zip(names, row)) for row in body]


def groups(page: Page, css: str) -> list[str]:
    """Return the group headers (those spanning columns) of the first table of class ``css``."""
    found = next(t for t in page.tables if t['class'] == css)
    return [cell for cell, (rowspan, _) in zip(found['rows'][0], found['spans'][0])
            if found['head'] == 2 and rowspan == 1]


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


def test_the_caution_is_said_once_in_the_whole_page():
    """However many recordings, the caution appears once (not per section, not in the footer)."""
    page = parse(render_html([make_result(), make_result(path='/bags/run_2')]))
    assert page.plain.count(SAFETY_CAUTION) == 1


def test_every_sensor_and_every_event_kind_is_listed(one):
    """Sensor names and topics in the sensor table; each event kind and sensor in the events."""
    result = make_result()
    _, page = one
    sensors = table(page, 'sensors')
    assert [(r['sensor'], r['topic']) for r in sensors] == [('ahead', 'sonar/ahead'),
                                                            ('behind', 'sonar/behind')]
    events = table(page, 'events')
    assert {row['kind'] for row in events} == {e.kind for e in result.events}
    assert {row['sensor'] for row in events} == {'ahead', 'behind', 'robot'}


def test_verdict_shares_are_percentages_of_the_sensor_readings(one):
    """ahead: 7 ok of 12 readings is 58.3 %, 2 blind 16.7 %; behind: 5 no_echo of 7 is 71.4 %."""
    _, page = one
    shares = {row['sensor']: row for row in table(page, 'verdicts')}
    sensors = {row['sensor']: row for row in table(page, 'sensors')}
    assert sensors['ahead']['readings'] == '12'
    assert shares['ahead']['ok'] == f'{100 * 7 / 12:.1f}'
    assert shares['ahead']['blind'] == f'{100 * 2 / 12:.1f}'
    assert shares['behind']['no_echo'] == f'{100 * 5 / 7:.1f}'
    assert shares['behind']['ok'] == '0'
    assert (sensors['ahead']['nearest'], sensors['ahead']['farthest']) == ('0.05', '3.90')
    assert groups(page, 'verdicts') == ['share of readings (%)']


def test_verdicts_that_never_occur_are_left_out_of_the_shares():
    """Only ok and the verdicts some sensor had get a column; the page says how many are out."""
    result = make_result()
    result.sensors = result.sensors[:1]  # ahead: ok, blind, no_echo, jump, late
    page = parse(render_html([result]))
    row = table(page, 'verdicts')[0]
    assert list(row) == ['sensor', 'ok', 'blind', 'no_echo', 'late', 'jump']  # Verdict order
    assert 'left out (3)' in page.plain


def test_summary_gives_duration_readings_events_lowest_limit_and_status():
    """One row per recording; an error replaces 'complete' with the reason."""
    broken = make_result(path='/bags/cut', error='chunk 3 is truncated')
    page = parse(render_html([make_result(), broken]))
    rows = table(page, 'summary')
    assert rows[0]['recording'] == 'run_1'  # the full path heads its section
    assert rows[0]['duration (s)'] == '1.2'
    assert rows[0]['readings'] == '19'
    assert rows[0]['events'] == '5'
    assert rows[0]['findings by kind'] == ('blind\u00a01 stale\u00a01 jump\u00a01 '
                                          'slot_clash\u00a01 overspeed\u00a01')
    assert rows[0]['lowest allowed speed (m/s)'] == '0.00'
    assert rows[0]['status'] == 'complete'
    assert rows[1]['status'] == 'stopped early: chunk 3 is truncated'
    links = [a for tag, a in page.attrs if tag == 'a' and a.get('href') == '#bag-2']
    assert links and links[0]['title'] == '/bags/cut'


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
    """Start and end in s since the bag start; the bag time in the cell's title and above."""
    _, page = one
    found = next(t for t in page.tables if t['class'] == 'events')
    rows = table(page, 'events')
    blind = next(i for i, row in enumerate(rows) if row['kind'] == 'blind')
    row = rows[blind]
    titles = dict(zip(row, found['titles'][found['head'] + blind]))
    assert row['start'] == '0.600' and row['end'] == '0.700'
    assert row['duration'] == '0.100'
    # 1_700_000_000.6 s Unix time is 2023-11-14 22:13:20.600 UTC (datetime, stdlib)
    assert titles['start'] == f'bag time {T0 + 0.6:.3f} s (2023-11-14 22:13:20.600 UTC)'
    # 1_700_000_000 s is 2023-11-14 22:13:20 UTC (datetime, stdlib)
    assert f'bag time {T0:.3f} s (2023-11-14 22:13:20.000 UTC)' in page.plain
    assert groups(page, 'events') == ['time (s)']


def test_events_are_listed_by_start_time(one):
    """The events table is sorted by start time whatever order the result holds them in."""
    result = make_result()
    _, page = one
    starts = [float(row['start']) for row in table(page, 'events')]
    assert starts == sorted(round(e.t_start - T0, 3) for e in result.events)


def test_events_table_is_capped_and_says_how_many_more():
    """With more events than the cap, the first ones by time are listed and the rest counted."""
    many = [Event('jump', 'ahead', T0 + 0.001 * i, T0 + 0.001 * i, f'jump {i}')
            for i in range(510)]
    page = parse(render_html([make_result(events=many[::-1])], max_events=500))
    rows = table(page, 'events')
    assert len(rows) == 500
    assert rows[-1]['detail'] == 'jump 499'
    assert '10 more events not shown' in page.plain


def test_default_cap_is_500_rows():
    """Without max_events the table stops at 500 rows."""
    many = [Event('jump', 'ahead', T0 + 0.001 * i, T0 + 0.001 * i, 'j') for i in range(501)]
    page = parse(render_html([make_result(events=many)]))
    assert len(table(page, 'events')) == 500
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


# ------------------------------------------------------------------ diagnosis


def status_lines(page: Page, compact: bool = False) -> list[dict]:
    want = 'health compact' if compact else 'health'
    return [item for item in page.items if item['list'] == want]


def test_each_recording_opens_with_a_status_line_per_sensor_with_its_deciding_number():
    """Right under the heading, before any table: one line per sensor with level and share."""
    text = render_html([make_result()])
    section = text[text.index('<section class="bag"'):]
    assert section.index('<ul class="health">') < section.index('<table')
    page = parse(text)
    lines = {item['sensor']: item for item in status_lines(page)}
    assert set(lines) == {'ahead', 'behind'}
    # ahead: 1 jump in 12 readings; behind: invalid + stale = 2 of 7 readings discarded
    assert f'a jump in {100 / 12:.1f} % of 12 readings' in lines['ahead']['text']
    assert lines['ahead']['class'] == 'lvl-degraded'
    assert f'{100 * 2 / 7:.0f} % of 7 readings discarded' in lines['behind']['text']
    assert lines['behind']['class'] == 'lvl-unusable'
    order = [item['sensor'] for item in status_lines(page)]
    assert order == ['behind', 'ahead']  # worst first


def test_a_sensor_that_lost_90_percent_of_its_echoes_never_reads_as_fine():
    """9 of 10 readings no_echo: 'degraded' in words and a triangle, not the fine mark."""
    lost = summary('front_center', 'sonar/front_center', ['ok'] + ['no_echo'] * 9,
                   [1.0] + [math.inf] * 9)
    page = parse(render_html([make_result(sensors=[lost], events=[])]))
    for item in status_lines(page) + status_lines(page, compact=True):
        if item['sensor'] == 'front_center':
            assert item['class'] == 'lvl-degraded'
            assert item['text'].startswith('\u25b2 degraded front_center: no echo in 90 %')
            assert 'fine' not in item['text'] and '\u2713' not in item['text']


def test_advice_is_given_for_each_degraded_or_unusable_sensor_and_not_for_fine_ones():
    """'Next:' with one sentence on every line that is not fine; fine lines have none."""
    fine = summary('steady', 'sonar/steady', ['ok'] * 10, [1.0] * 10)
    page = parse(render_html([make_result(sensors=[*make_result().sensors, fine])]))
    lines = status_lines(page)
    assert {item['class'] for item in lines} == {'lvl-fine', 'lvl-degraded', 'lvl-unusable'}
    for item in lines:
        if item['class'] == 'lvl-fine':
            assert 'Next:' not in item['text'], item
        else:
            assert re.search(r'Next: Check [^.]+\.$', item['text']), item


def test_summary_lists_every_sensor_compactly_without_advice():
    """The summary names each sensor once: problems one per line, the fine ones together."""
    fine = [summary(n, f'sonar/{n}', ['ok'] * 4, [1.0] * 4) for n in ('left', 'right')]
    page = parse(render_html([make_result(sensors=[*make_result().sensors, *fine])]))
    lines = status_lines(page, compact=True)
    assert [item['class'] for item in lines] == ['lvl-unusable', 'lvl-degraded', 'lvl-fine']
    assert lines[-1]['text'] == '\u2713 fine left, right'
    assert not any('Next:' in item['text'] for item in lines)


def test_levels_differ_in_word_and_symbol_not_only_colour(one):
    """Each level's badge carries its own word and its own symbol."""
    _, page = one
    marks = {item['class']: item['text'].split()[:2] for item in page.items}
    assert marks['lvl-unusable'] == ['\u2716', 'unusable']
    assert marks['lvl-degraded'] == ['\u25b2', 'degraded']


NOTICE = ('No parameter file: stuck and overspeed were not checked; pass --params with the '
          "robot's parameter file to check them.")


def test_the_skipped_notice_is_shown_once_near_the_top_however_many_recordings_share_it():
    """Two recordings with the same notice: one box before the summary, naming both."""
    skipped = {'skipped_checks': ('stuck', 'overspeed'), 'skipped_notice': NOTICE}
    text = render_html([make_result(**skipped), make_result(path='/bags/run_2', **skipped)])
    page = parse(text)
    assert page.plain.count(NOTICE) == 1
    assert text.index('class="skipped"') < text.index('id="summary"')
    assert (f'{html.escape(NOTICE)} (recordings <a href="#bag-1">1</a>, '
            '<a href="#bag-2">2</a>)') in text
    assert page.plain.count('Checks not run: stuck, overspeed') == 2  # a pointer per section


def test_different_notices_are_each_shown_once_and_none_when_every_check_ran():
    """Distinct sentences each once; no box at all when no recording skipped a check."""
    other = 'No parameter file: overspeed was not checked.'
    page = parse(render_html([make_result(skipped_notice=NOTICE),
                              make_result(skipped_notice=other), make_result()]))
    assert page.plain.count(NOTICE) == 1 and page.plain.count(other) == 1
    assert 'class="skipped"' not in render_html([make_result()])


def test_a_recording_without_an_allowed_speed_says_it_was_not_computed():
    """Empty limit series: the caption and the scope say so; the summary shows a dash."""
    result = make_result(skipped_checks=('overspeed',), skipped_notice=NOTICE)
    result.limit = BagResult('/b', make_config(), '').limit  # a fresh, empty series
    page = parse(render_html([result]))
    assert 'the allowed speed was not computed for this recording' in page.plain
    assert 'the allowed speed was not computed, and findings' in page.plain
    assert table(page, 'summary')[0]['lowest allowed speed (m/s)'] == '\u2013'


# ------------------------------------------------------------------ tables that fit

NUMBER = re.compile(r'^(-?\d+(\.\d+)?|\u2013)$')
TEXT_COLUMNS = {'sensor', 'topic', 'frame', 'kind', 'detail', 'recording', 'status',
                'findings by kind'}


@pytest.mark.parametrize('css', ['summary', 'sensors', 'verdicts', 'timing', 'events'])
def test_cells_hold_bare_numbers_with_each_unit_once_in_the_headers(one, css):
    """Numeric cells are numbers or a dash (no unit inside); a unit appears once per table."""
    _, page = one
    rows = table(page, css)
    assert rows
    for row in rows:
        for column, cell in row.items():
            if column not in TEXT_COLUMNS:
                assert NUMBER.match(cell), (css, column, cell)
    found = next(t for t in page.tables if t['class'] == css)
    headers = ' '.join(cell for row in found['rows'][:found['head']] for cell in row)
    units = re.findall(r'\(([^)]*)\)', headers)
    assert len(units) == len(set(units)), units


def css_rules(text: str) -> list[tuple[str, str]]:
    """Return (selector, declarations) of every rule in the page's style sheet."""
    sheet = text[text.index('<style>') + 7:text.index('</style>')]
    sheet = re.sub(r'@media[^{]*{', '', sheet)
    return [(sel.strip(), body) for sel, body in re.findall(r'([^{}]+){([^}]*)}', sheet)]


def test_no_rule_breaks_words_in_tables_and_numbers_are_right_aligned_tabular(one):
    """No word-break anywhere; overflow-wrap only on headings and prose; td right + tabular."""
    text, _ = one
    rules = css_rules(text)
    assert not [sel for sel, body in rules if 'word-break' in body]
    for sel, body in rules:
        if 'overflow-wrap' in body:
            assert not re.search(r'\b(td|th|table|tr)\b', sel), sel
    cell = ' '.join(body for sel, body in rules if re.search(r'(^|,\s*)td\b', sel))
    assert 'text-align: right' in cell and 'font-variant-numeric: tabular-nums' in cell
    wide = ' '.join(body for sel, body in rules if sel == '.wide')
    assert 'overflow-x: auto' in wide
    for found in page_tables(text):
        assert found  # every table sits in a scrolling wrapper


def page_tables(text: str) -> list[bool]:
    """For each <table>, whether the element just before it opens a .wide wrapper."""
    return [text[:m.start()].endswith('<div class="wide">')
            for m in re.finditer('<table', text)]


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


def test_without_parameters_no_made_up_layout_or_safe_speed_is_drawn():
    """Skipped checks (no parameter file): the poses are made up, so the layout figure and its
    safe-speed-by-heading plot are left out, and the page says why; with parameters, drawn."""
    without = render_html([make_result(skipped_checks=('stuck', 'overspeed'),
                                       skipped_notice=NOTICE)])
    assert 'sensor layout, top view' not in without
    assert 'Not drawn: the sensor poses and the footprint are unknown' in without
    assert 'sensor layout, top view' in render_html([make_result()])
