"""The demo end to end: simulate the invented corridor run, check it, write the report."""
from __future__ import annotations

import contextlib
import io
import json
import math
from typing import NamedTuple

import numpy as np
import pytest

from sonar_guard import SAFETY_CAUTION
from sonar_guard.cli import load_config_file, main
from sonar_guard.core.monitor import EVENT_KINDS
from sonar_guard.offline.bags import BagSource
from sonar_guard.offline.causes import EVENT_CAUSES
from sonar_guard.sim.demo import (
    BEND_RADIUS,
    BEND_X,
    BIN,
    HALF_WIDTH,
    PLANNED,
    START_TIME_S,
    TURN_AT,
    _ObeyingDriver,
)

WINDOW = {p.label: p for p in PLANNED}


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


@pytest.fixture(scope='module')
def odometry(demo):
    """The demo recording's odometry: t (s from the start), x, y, yaw, vx, vy, wz arrays."""
    _, out = demo
    rows = []
    with BagSource(out / 'corridor_run') as bag:
        for _, t, m in bag.messages(['/odom']):
            p, q, v = m.pose.pose.position, m.pose.pose.orientation, m.twist.twist
            # yaw of a quaternion turning about z only (REP 103: z up)
            rows.append((t - START_TIME_S, p.x, p.y, 2.0 * math.atan2(q.z, q.w), v.linear.x,
                         v.linear.y, v.angular.z))
    return dict(zip(('t', 'x', 'y', 'yaw', 'vx', 'vy', 'wz'), np.array(rows).T))


def test_the_bend_is_an_arc_round_the_inner_corner_inside_its_window(odometry):
    """While driving and turning, the cart is R from the inner corner, wz = vx / R, and that
    happens inside the bend's planned window and turns it by a quarter."""
    m = odometry
    on_arc = (m['vx'] > 0.0) & (m['wz'] != 0.0)
    assert on_arc.sum() > 50
    # reference.md sec. 7: a base with constant v, w circles its centre at radius v / w
    np.testing.assert_allclose(np.hypot(m['x'][on_arc] - BEND_X, m['y'][on_arc] - HALF_WIDTH),
                               BEND_RADIUS, atol=1e-9)
    np.testing.assert_allclose(m['wz'][on_arc], m['vx'][on_arc] / BEND_RADIUS, atol=1e-12)
    t = m['t'][on_arc]
    assert WINDOW['bend'].start <= t.min() and t.max() <= WINDOW['bend'].end
    before, after = m['t'] < t.min(), m['t'] > t.max()
    assert m['yaw'][before][-1] == 0.0 and m['yaw'][after][0] == pytest.approx(math.pi / 2)


def test_the_cart_turns_a_quarter_left_in_place_inside_its_window(odometry):
    """Turning at zero speed happens only at the lobby's turning point, in the window, and
    adds up (trapezoid rule over wz) to a quarter turn left; it ends facing the lift door."""
    m = odometry
    turning = (m['vx'] == 0.0) & (m['wz'] != 0.0)
    assert turning.sum() > 50 and (m['wz'][turning] > 0.0).all()
    np.testing.assert_allclose(m['x'][turning], TURN_AT[0], atol=1e-9)
    np.testing.assert_allclose(m['y'][turning], TURN_AT[1], atol=1e-9)
    t = m['t'][turning]
    assert WINDOW['turn in place'].start <= t.min() and t.max() <= WINDOW['turn in place'].end
    span = (m['t'] >= t.min() - 0.1) & (m['t'] <= t.max() + 0.1)
    turned = np.sum(0.5 * (m['wz'][span][1:] + m['wz'][span][:-1]) * np.diff(m['t'][span]))
    assert turned == pytest.approx(math.pi / 2, abs=1e-3)
    assert abs(m['yaw'][-1]) == pytest.approx(math.pi)  # facing -x, the lift door
    assert not m['vy'].any()  # the cart is not holonomic


def _clearance(footprint: np.ndarray, yaw: float, centre, radius: float) -> float:
    """Distance from the cart's footprint at TURN_AT turned to ``yaw`` to a disc, m (numpy)."""
    rot = np.array([[math.cos(yaw), -math.sin(yaw)], [math.sin(yaw), math.cos(yaw)]])
    corners = np.asarray(TURN_AT) + footprint @ rot.T
    a, b = corners, np.roll(corners, -1, axis=0)
    # point-to-segment distance: project the centre onto each edge, clamp to the edge
    f = np.clip(np.einsum('ij,ij->i', np.asarray(centre) - a, b - a)
                / np.einsum('ij,ij->i', b - a, b - a), 0.0, 1.0)
    return float(np.min(np.hypot(*(a + f[:, None] * (b - a) - centre).T)) - radius)


def test_the_linen_bin_is_close_beside_but_clear_of_the_turning_cart():
    """The bin never comes within limits.margin of the cart during the quarter turn, ends up
    beside it, and lies within the circle the footprint sweeps plus the margin: a turn-rate
    limit must account for it, and one that is right never has to stop the turn."""
    config = load_config_file(None)
    footprint = np.asarray(config.robot.footprint.points)
    margin = config.limits.margin_m
    centre, radius = np.array(BIN[:2]), BIN[2]
    gaps = [_clearance(footprint, yaw, centre, radius)
            for yaw in np.linspace(math.pi / 2, math.pi, 181)]
    assert min(gaps) > margin
    assert gaps[-1] < 2.0 * margin  # close beside at the end
    swept = float(np.hypot(*footprint.T).max())  # circumradius about base_link
    assert np.hypot(*(centre - TURN_AT)) - radius < swept + margin


class _Decision(NamedTuple):
    """A stand-in for the engine's decision, with or without the allowed turn rate."""

    time_s: float
    limit_mps: float


class _TurningDecision(NamedTuple):
    time_s: float
    limit_mps: float
    turn_limit_radps: float


class _FakeMonitor:
    """Returns set decisions and counts the ticks."""

    def __init__(self, make):
        self.make = make
        self.ticks = 0

    def tick(self, now_s):
        self.ticks += 1
        return self.make(now_s)


@pytest.mark.parametrize('make, turn_limit', [
    (lambda now: _Decision(now, 0.7), math.inf),
    (lambda now: _TurningDecision(now, 0.7, 0.4), 0.4),
])
def test_driver_keeps_to_the_allowed_turn_rate_once_the_engine_gives_one(make, turn_limit):
    """The cart's controller caps the yaw rate at Decision.turn_limit_radps when the field
    exists (none before issue 17's engine), from the same tick as the speed limit."""
    driver = _ObeyingDriver(load_config_file(None), START_TIME_S, (45.0, 52.0))
    driver.monitor = _FakeMonitor(make)
    assert driver.cap(3.0, 0.5) == 0.7
    assert driver.turn_cap(3.0, 0.2) == turn_limit
    assert driver.monitor.ticks == 1
    driver.x = 46.0  # pushed: the attendant ignores both limits
    assert driver.cap(3.02, 0.5) == math.inf and driver.turn_cap(3.02, 0.2) == math.inf
