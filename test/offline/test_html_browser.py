"""The HTML report in a real browser: no horizontal page overflow at 800 and 1280 px wide.

Headless Chromium loads a copy of the report with one measuring script added (the report's
own Content-Security-Policy forbids scripts, so the copy drops it) and prints the DOM, where
the script has written the page's scroll width, the viewport width and every table that
needs its own scroll box. Only the Python standard library drives the browser. Without a
Chromium or Chrome on this machine the tests skip and say so (CI may have none).
"""
from __future__ import annotations

import json
import math
from pathlib import Path
import re
import shutil
import subprocess

import bagkit
import numpy as np
import pytest
from testkit import make_config

from sonar_guard.cli import main
from sonar_guard.core.monitor import EVENT_KINDS, Event
from sonar_guard.core.readings import Verdict
from sonar_guard.offline.html import render_html
from sonar_guard.offline.results import VERDICT_CODES, BagResult, SensorSummary

WIDTHS = (800, 1280)  # px: a small laptop window, a common desktop one
CANDIDATES = ('chromium', 'chromium-browser', 'google-chrome', 'google-chrome-stable')

MEASURE = """<script>
(function () {
  var wide = [];
  document.querySelectorAll('table').forEach(function (t) {
    var box = t.parentElement;
    if (box.scrollWidth > box.clientWidth + 1) { wide.push(t.className); }
  });
  var out = document.createElement('pre');
  out.id = 'measure';
  out.textContent = JSON.stringify({
    scrollWidth: document.documentElement.scrollWidth,
    innerWidth: window.innerWidth,
    scrollingTables: wide,
    tables: document.querySelectorAll('table').length
  });
  document.body.appendChild(out);
})();
</script>"""


def browser() -> str | None:
    """Return the path of a Chromium-family browser, or None."""
    if Path('/usr/bin/chromium').exists():
        return '/usr/bin/chromium'
    return next((found for name in CANDIDATES if (found := shutil.which(name))), None)


def measure(report: Path, width: int, tmp_path: Path) -> dict:
    """Load a measuring copy of ``report`` at ``width`` px and return what the script found."""
    exe = browser()
    if exe is None:
        pytest.skip('no Chromium or Chrome found (/usr/bin/chromium, or chromium, '
                    'chromium-browser, google-chrome on PATH): the browser check needs one')
    text = report.read_text(encoding='utf-8')
    text, removed = re.subn(r'<meta http-equiv="Content-Security-Policy"[^>]*>', '', text)
    assert removed == 1  # the report itself forbids scripts; only this copy may run one
    probe = tmp_path / f'probe_{width}_{report.stem}.html'
    probe.write_text(text.replace('</body>', MEASURE + '</body>'), encoding='utf-8')
    profile = tmp_path / f'profile_{width}'
    proc = subprocess.run(
        [exe, '--headless', '--no-sandbox', '--disable-gpu', '--disable-quic',
         '--no-first-run', '--disable-background-networking', '--disable-component-update',
         '--disable-sync', '--hide-scrollbars', f'--user-data-dir={profile}',
         f'--window-size={width},1000', '--dump-dom', probe.as_uri()],
        capture_output=True, text=True, timeout=180)
    found = re.search(r'<pre id="measure">(.*?)</pre>', proc.stdout, re.S)
    assert found, f'no measurement (exit {proc.returncode}): {proc.stderr[-2000:]}'
    return json.loads(found.group(1).replace('&quot;', '"'))


@pytest.fixture(scope='module')
def reports(tmp_path_factory) -> dict[str, Path]:
    """Reports of the fault scenario checked with and without parameters, and a wide one."""
    if browser() is None:
        pytest.skip('no Chromium or Chrome found: the browser check needs one')
    root = tmp_path_factory.mktemp('browser')
    params = bagkit.write_params(root / 'params.yaml')
    bag = bagkit.write_scenario(root / 'faults_mcap', storage='mcap')
    out = {'params': root / 'params.html', 'no_params': root / 'no_params.html',
           'worst': root / 'worst.html'}
    assert main(['check', str(bag), '--params', str(params), '--html',
                 str(out['params'])]) in (0, 1)
    assert main(['check', str(bag), '--html', str(out['no_params'])]) in (0, 1)
    out['worst'].write_text(render_html(worst_case()), encoding='utf-8')
    return out


def sensor(name: str, topic: str) -> SensorSummary:
    """A sensor with three readings of every verdict, 0.1 s apart from T0."""
    s = SensorSummary(name, topic)
    ranges = [1.0, 0.05, math.inf, math.nan, 2.0, 2.1, 2.1, 3.9]
    for i, (v, r) in enumerate(zip([v.value for v in Verdict] * 3, ranges * 3)):
        s.readings += 1
        s.counts[v] += 1
        if math.isfinite(r):
            s.range_min_m, s.range_max_m = min(s.range_min_m, r), max(s.range_max_m, r)
        s.ranges.add(bagkit.T0 + 0.1 * i, r, VERDICT_CODES[v])
    s.periods.add_many(np.full(s.readings, 0.0815))
    s.latencies.add_many(np.linspace(0.075, 0.101, s.readings))
    return s


def worst_case() -> list[BagResult]:
    """Two recordings with every verdict, every event kind, long names and a long error."""
    t0 = bagkit.T0
    long_name = 'sonar_front_center_lower_bumper_left'
    sensors = [sensor(f'{long_name}_{i}', f'/robot/base/sonar/{long_name}_{i}/range')
               for i in range(3)]
    events = [Event(kind, None if kind == 'overspeed' else sensors[0].name, t0 + 0.1 * i,
                    t0 + 0.1 * i + 0.05, f'{kind}: 1.234 m -> 3.456 m in 0.085 s = 27.1 m/s')
              for i, kind in enumerate(EVENT_KINDS)]
    deep = '/data/recordings/2024-05-17/site_b/cart_07/' + 'a_rather_long_folder_name/' * 3
    results = []
    for path in (deep + 'run_0001', deep + 'run_0002_' + 'x' * 60):
        r = BagResult(path, make_config(), 'parameters from /etc/robots/cart_07/params.yaml',
                      sensors=sensors, events=events, t_start=t0, t_end=t0 + 2.4)
        for k in range(25):
            r.limit.add(t0 + 0.1 * k, 0.8)
            r.speed.add(t0 + 0.1 * k, 0.5)
        results.append(r)
    results[0].skipped_checks = ('stuck', 'overspeed')
    results[0].skipped_notice = ('No parameter file: stuck and overspeed were not checked; '
                                 'pass --params to check them.')
    results[1].error = ('chunk 12 at offset 123456789 is truncated: expected 65536 bytes, '
                        'found 1021')
    return results


@pytest.mark.parametrize('width', WIDTHS)
@pytest.mark.parametrize('name', ['params', 'no_params', 'worst'])
def test_report_has_no_horizontal_page_overflow(reports, tmp_path, name, width):
    """Document scroll width <= viewport width: the page never scrolls sideways."""
    got = measure(reports[name], width, tmp_path)
    assert got['innerWidth'] == width
    assert got['tables'] > 0
    assert got['scrollWidth'] <= got['innerWidth'], got


@pytest.mark.parametrize('width', WIDTHS)
@pytest.mark.parametrize('name', ['params', 'no_params'])
def test_tables_of_a_real_report_fit_without_their_own_scroll_box(reports, tmp_path, name,
                                                                  width):
    """A real recording's tables fit the width as they are; the scroll box is a last resort."""
    got = measure(reports[name], width, tmp_path)
    assert got['scrollingTables'] == [], got
