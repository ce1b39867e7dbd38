"""Sensor health: one level per sensor, the number that decided it, and advice unless fine.

The thresholds are the module's own choices (documented there); these tests check that each
rule trips exactly at its threshold, that the worst level wins, and that the text carries
the share that decided it, computed here from the counts.
"""
from __future__ import annotations

import dataclasses
import math

from hypothesis import given, settings
from hypothesis import strategies as st
import pytest
from testkit import make_config

from sonar_guard.core.monitor import Event
from sonar_guard.core.readings import Verdict
from sonar_guard.offline import health
from sonar_guard.offline.health import LEVELS, SensorHealth, assess_recording, assess_sensor
from sonar_guard.offline.results import BagResult, SensorSummary

N = 1000  # readings of the made-up sensors: shares are count / 1000 exactly


def sensor(name: str = 'front_center', n: int = N, **counts: int) -> SensorSummary:
    """A summary with the given verdict counts; the rest of the ``n`` readings are ok."""
    s = SensorSummary(name, f'sonar/{name}')
    s.readings = n
    for verdict, count in counts.items():
        s.counts[verdict] = count
    s.counts['ok'] = n - sum(counts.values())
    return s


def stale(name: str, start: float, end: float) -> Event:
    return Event('stale', name, start, end, 'no usable reading')


def test_a_sensor_that_lost_90_percent_of_its_echoes_is_degraded_and_says_so():
    """900 of 1000 readings no_echo: degraded, '90 %' in the text, advice about the echo."""
    got = assess_sensor(sensor(no_echo=900))
    assert got.level == 'degraded'
    assert got.deciding_text == 'no echo in 90 % of 1000 readings'
    assert 'max range' in got.advice and 'threshold' in got.advice
    assert got.describe() == 'front_center: degraded: no echo in 90 % of 1000 readings'


def test_a_sensor_without_readings_is_unusable_and_points_at_its_topic():
    """Zero readings: unusable, 'no readings at all', advice naming the topic to check."""
    got = assess_sensor(sensor(n=0))
    assert (got.level, got.deciding_text) == ('unusable', 'no readings at all')
    assert 'sonar/front_center' in got.advice


# rule, verdict counts at the threshold, and the text expected there
RULES = {
    'discarded unusable': (health.UNUSABLE_DISCARDED, 'invalid', 'unusable',
                           '{pct} of 1000 readings discarded (mostly invalid)'),
    'discarded degraded': (health.DEGRADED_DISCARDED, 'stuck', 'degraded',
                           '{pct} of 1000 readings discarded (mostly stuck)'),
    'no echo': (health.DEGRADED_NO_ECHO, 'no_echo', 'degraded',
                'no echo in {pct} of 1000 readings'),
    'blind': (health.DEGRADED_BLIND, 'blind', 'degraded', 'blind in {pct} of 1000 readings'),
    'jump': (health.DEGRADED_JUMP, 'jump', 'degraded', 'a jump in {pct} of 1000 readings'),
    'late': (health.DEGRADED_LATE, 'late', 'degraded', 'late in {pct} of 1000 readings'),
}


def _pct(count: int) -> str:
    """The share of 1000 readings as the module prints it (whole percent from 10 % up)."""
    pct = 100 * count / N
    return f'{pct:.0f} %' if pct >= 10 else f'{pct:.1f} %'


@pytest.mark.parametrize(('threshold', 'verdict', 'level', 'text'), RULES.values(),
                         ids=RULES.keys())
def test_each_rule_trips_at_its_threshold_and_not_one_reading_below(threshold, verdict,
                                                                    level, text):
    """At the threshold share: that level and text; one reading fewer: one level better."""
    at = math.ceil(threshold * N)
    got = assess_sensor(sensor(**{verdict: at}))
    assert (got.level, got.deciding_text) == (level, text.format(pct=_pct(at)))
    assert got.advice
    below = assess_sensor(sensor(**{verdict: at - 1}))
    assert LEVELS.index(below.level) == LEVELS.index(level) - 1


def test_silent_time_from_stale_events_counts_overlaps_once_and_only_its_own():
    """Stale events 0-40 s and 30-60 s of 100 s: 60 % silent, unusable; others' do not count."""
    events = [stale('front_center', 0.0, 40.0), stale('front_center', 30.0, 60.0),
              stale('rear_center', 0.0, 100.0), Event('jump', 'front_center', 70, 70, 'j')]
    got = assess_sensor(sensor(), events, duration_s=100.0)
    assert (got.level, got.deciding_text) == ('unusable', 'silent for 60 % of the recording')
    assert 'publishes' in got.advice
    quiet = assess_sensor(sensor(), [stale('front_center', 0.0, 10.0)], duration_s=100.0)
    assert (quiet.level, quiet.deciding_text) == ('degraded', 'silent for 10 % of the recording')
    assert assess_sensor(sensor(), events).level == 'fine'  # no duration: time not judged


def test_the_worst_level_wins_and_the_largest_discarded_verdict_names_the_advice():
    """30 % discarded (mostly stale) beats 60 % no echo; the advice is about the clocks."""
    got = assess_sensor(sensor(no_echo=600, invalid=50, stale=200, stuck=50))
    assert got.level == 'unusable'
    assert got.deciding_text == '30 % of 1000 readings discarded (mostly stale)'
    assert 'clock' in got.advice


def test_verdicts_whose_check_was_skipped_are_not_used():
    """Stuck readings from a check that did not run (no parameters) do not make it unusable."""
    counts = {'stuck': 900}
    assert assess_sensor(sensor(**counts)).level == 'unusable'
    assert assess_sensor(sensor(**counts), skipped=('stuck', 'overspeed')).level == 'fine'
    events = [stale('front_center', 0.0, 100.0)]
    assert assess_sensor(sensor(), events, duration_s=100.0, skipped=('stale',)).level == 'fine'


def test_a_fine_sensor_gives_its_ok_share_and_no_advice():
    """Nothing trips: fine, 'ok in 99 % of 1000 readings', empty advice."""
    got = assess_sensor(sensor(no_echo=5, jump=5))
    assert got == SensorHealth('front_center', 'fine', 'ok in 99 % of 1000 readings', '')


verdicts = st.fixed_dictionaries({v.value: st.integers(0, 400) for v in Verdict
                                  if v is not Verdict.OK})


@settings(max_examples=300, deadline=None, derandomize=True)
@given(verdicts, st.integers(0, 400))
def test_advice_is_given_exactly_when_a_sensor_is_not_fine(counts, ok):
    """Any counts: a known level, a deciding text with a number, advice iff not fine."""
    s = sensor(n=ok + sum(counts.values()), **counts)
    got = assess_sensor(s)
    assert got.level in LEVELS
    assert any(ch.isdigit() for ch in got.deciding_text) or got.deciding_text == (
        'no readings at all')
    assert bool(got.advice) == (got.level != 'fine')
    assert got.advice == '' or got.advice.endswith('.')


def test_assess_recording_keeps_sensor_order_and_uses_the_recording_time_and_skips():
    """One health per sensor in order; stale events judged against the bag's duration."""
    result = BagResult('/b', make_config(), 'test',
                       sensors=[sensor('ahead', stuck=500), sensor('behind')],
                       events=[stale('behind', 10.0, 90.0)], t_start=0.0, t_end=100.0,
                       skipped_checks=('stuck',))
    got = assess_recording(result)
    assert [h.name for h in got] == ['ahead', 'behind']
    assert [h.level for h in got] == ['fine', 'unusable']
    assert got[1].deciding_text == 'silent for 80 % of the recording'


def test_health_is_a_frozen_value_with_a_readable_repr():
    """Frozen (a report cannot change it) and its repr names every field."""
    got = assess_sensor(sensor(no_echo=900))
    with pytest.raises(dataclasses.FrozenInstanceError):
        got.level = 'fine'  # type: ignore[misc]
    assert repr(got).startswith("SensorHealth(name='front_center', level='degraded'")


def test_public_names_exist_and_all_is_sorted():
    """A small, sorted public surface (style.md facades)."""
    assert list(health.__all__) == sorted(health.__all__)
    assert all(hasattr(health, name) for name in health.__all__)
    assert LEVELS == ('fine', 'degraded', 'unusable')
