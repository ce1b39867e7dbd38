"""Firing schedule, measured periods, crosstalk risk and detection latency."""
from __future__ import annotations

import math

from hypothesis import given
from hypothesis import strategies as st
import numpy as np
import pytest
from testkit import make_config

from sonar_guard.core.acoustics import detection_latency
from sonar_guard.core.schedule import (
    ClashDetector,
    PeriodTracker,
    Schedule,
    estimated_firing_time,
    infer_slots,
)


def c_f1(temp_c):
    """Speed of sound, reference.md F1: 331.3*sqrt(1 + T/273.15) m/s."""
    return 331.3 * math.sqrt(1 + temp_c / 273.15)


def test_slot_lasts_the_echo_timeout_of_its_longest_range_sensor():
    """slot_duration 0: the slot lasts 2R/c of its longest-range sensor (reference.md sec. 2)."""
    config = make_config({'sensors.behind.slot': 0, 'sensors.behind.max_range': 2.5,
                          'sonar.max_range': 4.5, 'sonar.air_temperature': 10.0})
    schedule = Schedule.from_config(config)
    assert len(schedule.slots) == 1
    # reference.md sec. 2: T = 10 degC, R = 4.5 m -> 26.6817 ms
    assert schedule.slots[0].duration_s == pytest.approx(26.6817e-3, abs=1e-6)
    assert schedule.cycle_s == schedule.slots[0].duration_s


def test_cycle_is_the_sum_of_slots_and_latency_follows_the_contract_formula():
    """latency = cycle - own slot + own echo timeout (design.md detection_latency)."""
    config = make_config({'sensors.ahead.max_range': 6.0, 'sensors.behind.max_range': 2.5,
                          'sonar.air_temperature': 20.0})
    schedule = Schedule.from_config(config)
    t_ahead = 2 * 6.0 / c_f1(20.0)  # reference.md: 20 degC, 6.0 m -> 34.9635 ms
    t_behind = 2 * 2.5 / c_f1(20.0)
    assert t_ahead == pytest.approx(34.9635e-3, abs=1e-6)
    assert schedule.cycle_s == pytest.approx(t_ahead + t_behind, rel=1e-12)
    behind = schedule.timing('behind')
    # cycle (t_ahead + t_behind) - own slot (t_behind) + own echo timeout (t_behind)
    assert behind.detection_latency_s == pytest.approx(t_ahead + t_behind, rel=1e-12)
    assert behind.detection_latency_s == pytest.approx(
        detection_latency([t_ahead, t_behind], 1, 2.5, 20.0), rel=1e-12)
    assert behind.blind_range_m == config.sensor('behind').min_range_m


def test_configured_slot_duration_replaces_the_echo_timeout():
    """A non-zero slot_duration is the slot length, whatever the range."""
    config = make_config({'sonar.slot_duration': 0.05})
    schedule = Schedule.from_config(config)
    assert [s.duration_s for s in schedule.slots] == [0.05, 0.05]
    assert schedule.cycle_s == pytest.approx(0.1)


@given(st.lists(st.floats(0.01, 0.2), min_size=6, max_size=80))
def test_measured_period_median_and_worst_match_numpy(gaps):
    """Median and worst over the window agree with numpy.median and numpy.max."""
    tracker = PeriodTracker(window=50)
    stamps = np.cumsum([0.0, *gaps])
    for t in stamps:
        tracker.add(float(t))
    window = np.diff(stamps)[-50:]
    assert tracker.count == len(window)
    assert tracker.median_s == pytest.approx(float(np.median(window)), rel=1e-9)  # numpy
    assert tracker.worst_s == pytest.approx(float(np.max(window)), rel=1e-9)  # numpy
    assert tracker.ready


def test_period_tracker_needs_a_few_periods_before_it_is_ready():
    """Two readings are not a measurement of the schedule."""
    tracker = PeriodTracker()
    for t in (1.0, 1.1, 1.2):
        tracker.add(t)
    assert not tracker.ready
    assert math.isnan(PeriodTracker().median_s)


def test_firing_time_is_the_stamp_minus_the_flight_time():
    """An echo-time stamp minus 2r/c is when the pulse left."""
    sensor = make_config({'sonar.air_temperature': 20.0}).sensor('ahead')
    fired = estimated_firing_time(5.0, 1.5, sensor)
    assert fired == pytest.approx(5.0 - 2 * 1.5 / c_f1(20.0), rel=1e-12)
    assert estimated_firing_time(5.0, math.inf, sensor) == pytest.approx(
        5.0 - 2 * sensor.max_range_m / c_f1(20.0))
    assert estimated_firing_time(5.0, math.nan, sensor) == 5.0


class TestClash:
    """Pulses of different slots in the air together risk crosstalk."""

    def test_sensors_of_different_slots_firing_within_one_timeout_clash(self):
        """Fired 5 ms apart with a 23 ms echo timeout: the second hears the first."""
        config = make_config({'sonar.air_temperature': 20.0})
        clash = ClashDetector(config.sensors)
        timeout = 2 * config.sensor('ahead').max_range_m / c_f1(20.0)
        # both saw no echo: each fired one echo timeout before its stamp
        assert clash.check('ahead', 1.000, math.inf) is None
        other, gap = clash.check('behind', 1.005, math.inf)
        assert other == 'ahead' and gap == pytest.approx(0.005)
        assert timeout > 0.005 / 0.9

    def test_back_to_back_slots_do_not_clash(self):
        """Firing a full echo timeout apart is the schedule working as designed."""
        config = make_config({'sonar.air_temperature': 20.0})
        timeout = 2 * config.sensor('ahead').max_range_m / c_f1(20.0)
        clash = ClashDetector(config.sensors)
        clash.check('ahead', 1.0, math.inf)
        assert clash.check('behind', 1.0 + timeout, math.inf) is None

    def test_clash_gap_is_the_difference_of_estimated_firing_times(self):
        """The detector's gap is the difference of estimated_firing_time for two echoes."""
        config = make_config({'sonar.air_temperature': 20.0})
        clash = ClashDetector(config.sensors)
        clash.check('ahead', 1.000, 1.2)
        other, gap = clash.check('behind', 1.004, 0.8)
        expected = (estimated_firing_time(1.004, 0.8, config.sensor('behind'))
                    - estimated_firing_time(1.000, 1.2, config.sensor('ahead')))
        assert other == 'ahead' and gap == pytest.approx(expected, rel=1e-12)

    def test_readings_without_a_flight_time_never_clash(self):
        """NaN and -inf say nothing about when the pulse left (REP 117 meanings)."""
        config = make_config({'sonar.air_temperature': 20.0})
        clash = ClashDetector(config.sensors)
        assert clash.check('ahead', 1.000, 1.0) is None
        assert clash.check('behind', 1.001, -math.inf) is None
        assert clash.check('behind', 1.002, math.nan) is None

    def test_sensors_sharing_a_slot_never_clash(self):
        """Sensors in one slot fire together on purpose."""
        config = make_config({'sensors.behind.slot': 0})
        clash = ClashDetector(config.sensors)
        clash.check('ahead', 1.0, math.inf)
        assert clash.check('behind', 1.0, math.inf) is None


class TestInferSlots:
    """Firing slots guessed from when pulses left, for recordings without a parameter file."""

    TIMEOUT = 2 * 4.0 / c_f1(20.0)  # reference.md sec. 2: 2R/c at 4 m, 20 degC

    def firings(self, offsets, cycle, count=100, skip=()):
        """Fire each sensor at its offset (s) into a repeating cycle (s)."""
        return {name: [k * cycle + off for k in range(count) if (name, k) not in skip]
                for name, off in offsets.items()}

    def test_sensors_one_after_another_get_their_own_slots_in_firing_order(self):
        """Three sensors, each one timeout after the last: three slots, in firing order."""
        t = self.TIMEOUT
        slots = infer_slots(self.firings({'c': 2 * t, 'a': 0.0, 'b': t}, 3 * t),
                            dict.fromkeys('abc', t))
        assert slots == {'a': 0, 'b': 1, 'c': 2}

    def test_sensors_that_always_fire_together_share_a_slot(self):
        """Pairs firing within a millisecond every cycle share a slot (by design, e.g. facing
        away from each other); sharing is transitive."""
        t = self.TIMEOUT
        slots = infer_slots(self.firings({'a': 0.0, 'b': 0.001, 'c': 0.0015, 'd': t}, 2 * t),
                            dict.fromkeys('abcd', t))
        assert slots['a'] == slots['b'] == slots['c'] == 0 and slots['d'] == 1

    def test_an_occasional_overlap_is_not_taken_for_a_shared_slot(self):
        """A sensor that fires early in a few cycles (a clash) keeps its own slot, so the
        clash detector can still flag those cycles."""
        t = self.TIMEOUT
        firings = self.firings({'a': 0.0, 'b': t}, 2 * t)
        firings['b'][:10] = [k * 2 * t + 0.002 for k in range(10)]  # 10 % of cycles early
        slots = infer_slots(firings, dict.fromkeys('ab', t))
        assert slots['a'] != slots['b']
        config = make_config({'sensors.ahead.slot': slots['a'],
                              'sensors.behind.slot': slots['b']})
        clash = ClashDetector(config.sensors)
        assert clash.check('ahead', 0.0 + 1e-3, 0.1) is None  # fired ~0 (0.1 m flight)
        assert clash.check('behind', 0.002 + self.TIMEOUT, 4.0) is not None  # fired at 2 ms

    def test_a_sensor_without_readings_gets_a_slot_of_its_own(self):
        """No firing times: a slot after the others, never merged."""
        slots = infer_slots({'a': [0.0, 0.1], 'quiet': []}, {'a': 0.02, 'quiet': 0.02})
        assert slots == {'a': 0, 'quiet': 1}
