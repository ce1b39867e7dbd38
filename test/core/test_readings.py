"""The validator: one verdict per reading, each at its boundary."""
from __future__ import annotations

import math

import numpy as np
import pytest
from testkit import make_config

from sonar_guard.core.readings import Motion, RangeReading, ReadingValidator, Verdict

# Tests use a forward sensor with min 0.15 m, max 4.0 m, resolution 0.01 m (schema defaults
# unless a test overrides them).


def validator(overrides=None, stale_after_s=0.3):
    config = make_config(overrides)
    return ReadingValidator(config.sensor('ahead'), stale_after_s=stale_after_s)


def reading(r, stamp=10.0, arrival=None, **meta):
    return RangeReading('ahead', stamp, r, stamp if arrival is None else arrival, **meta)


class TestRep117Values:
    """Special values mean what REP 117 says they mean."""

    # REP 117: "-Inf ... too close to quantify", "+Inf ... out of range", "NaN ... erroneous"
    @pytest.mark.parametrize('value, verdict', [
        (-math.inf, Verdict.BLIND),
        (math.inf, Verdict.NO_ECHO),
        (math.nan, Verdict.INVALID),
    ])
    def test_special_values_follow_rep_117(self, value, verdict):
        """-inf is too close, +inf no return, NaN erroneous (REP 117)."""
        assert validator().check(reading(value)).verdict is verdict

    def test_rep_117_table_in_limits_values_are_usable(self):
        """REP 117 check form: min <= value <= max is valid; here max is the no-echo reading."""
        # REP 117 test table (min 0.03, max 4.2): 0.03 valid, 0.01 outside the limits.
        v = validator({'sonar.min_range': 0.03, 'sonar.max_range': 4.2})
        assert v.check(reading(0.03, stamp=1.0)).verdict is Verdict.OK
        assert v.check(reading(0.01, stamp=2.0)).verdict is Verdict.BLIND
        # common practice: sonar drivers report max_range when no echo came back, so a
        # reading at max_range (REP 117 "valid") is treated as no echo.
        assert v.check(reading(4.2, stamp=3.0)).verdict is Verdict.NO_ECHO
        assert v.check(reading(5.0, stamp=4.0)).verdict is Verdict.NO_ECHO


class TestRangeBoundaries:
    """Blind and no-echo boundaries are exact."""

    def test_min_range_itself_is_ok_and_just_below_is_blind(self):
        """REP 117: value == minimum_range is a valid reading."""
        v = validator()
        assert v.check(reading(0.15, stamp=1.0)).verdict is Verdict.OK
        below = v.check(reading(np.nextafter(0.15, 0), stamp=2.0))
        assert below.verdict is Verdict.BLIND
        assert '0.15' in below.reason

    def test_no_echo_starts_one_resolution_below_max_range(self):
        """A lost echo reads as maximum, within the sensor resolution."""
        v = validator()
        assert v.check(reading(3.99, stamp=1.0)).verdict is Verdict.NO_ECHO
        assert v.check(reading(np.nextafter(3.99, 0), stamp=2.0)).verdict is Verdict.OK

    def test_negative_finite_range_is_invalid(self):
        """A negative distance has no meaning (Range.msg: range in metres)."""
        check = validator().check(reading(-0.2))
        assert check.verdict is Verdict.INVALID
        assert '-0.2' in check.reason

    def test_ring_down_blind_range_uses_the_speed_of_sound(self):
        """Inside c*t_ring/2 is blind; reference.md: 20 degC, 1.20 ms -> 0.20593 m."""
        v = validator({'sonar.ring_down': 1.20e-3, 'sonar.air_temperature': 20.0,
                       'sonar.min_range': 0.1})
        assert v.acoustic_blind_m == pytest.approx(0.20593, abs=1e-5)  # reference.md sec. 2
        assert v.check(reading(0.2055, stamp=1.0)).verdict is Verdict.BLIND
        assert v.check(reading(0.2065, stamp=2.0)).verdict is Verdict.OK


class TestMessageMetadata:
    """The message's own fields must agree with the configuration."""

    def test_float32_copies_of_configured_values_pass(self):
        """Range.msg min/max/fov are float32: their rounding is not a disagreement."""
        v = validator()
        check = v.check(reading(1.0, min_range_m=float(np.float32(0.15)),
                                max_range_m=float(np.float32(4.0)),
                                field_of_view_rad=float(np.float32(0.4)), radiation_type=0))
        assert check.verdict is Verdict.OK

    @pytest.mark.parametrize('meta, needle', [
        ({'min_range_m': 0.25}, 'min_range'),
        ({'max_range_m': 3.0}, 'max_range'),
        ({'field_of_view_rad': 0.3}, 'field_of_view'),
        ({'radiation_type': 1}, 'ULTRASOUND'),  # Range.msg: INFRARED=1
        ({'max_range_m': math.nan}, 'max_range'),
    ])
    def test_disagreeing_metadata_is_invalid(self, meta, needle):
        """A message claiming other limits or another radiation type is not this sensor."""
        check = validator().check(reading(1.0, **meta))
        assert check.verdict is Verdict.INVALID
        assert needle in check.reason

    def test_configuration_more_cautious_than_the_message_is_fine(self):
        """Configured min above the message's, max below it: the reading is used."""
        check = validator({'sonar.min_range': 0.3, 'sonar.max_range': 3.0}).check(
            reading(1.0, min_range_m=0.15, max_range_m=4.0))
        assert check.verdict is Verdict.OK

    def test_wrong_frame_is_invalid_only_when_a_frame_is_configured(self):
        """frame_id is checked against sensors.<name>.frame_id when that is set."""
        assert validator().check(reading(1.0, frame_id='other')).verdict is Verdict.OK
        v = validator({'sensors.ahead.frame_id': 'sonar_ahead'})
        check = v.check(reading(1.0, frame_id='other'))
        assert check.verdict is Verdict.INVALID
        assert "'other'" in check.reason


class TestTiming:
    """Stamps, ages and order."""

    def test_age_beyond_stale_after_is_stale_and_beyond_late_after_is_late(self):
        """late_after < age <= stale_after is late; above stale_after is stale."""
        v = validator({'sonar.late_after': 0.1}, stale_after_s=0.3)
        assert v.check(reading(1.0, stamp=1.0, arrival=1.099)).verdict is Verdict.OK
        assert v.check(reading(1.0, stamp=2.0, arrival=2.1001)).verdict is Verdict.LATE
        assert v.check(reading(1.0, stamp=3.0, arrival=3.3)).verdict is Verdict.LATE
        assert v.check(reading(1.0, stamp=4.0, arrival=4.3001)).verdict is Verdict.STALE

    def test_out_of_order_and_repeated_stamps_are_invalid(self):
        """A reading older than or as old as the previous one is discarded."""
        v = validator()
        assert v.check(reading(1.0, stamp=5.0)).verdict is Verdict.OK
        older = v.check(reading(1.0, stamp=4.9))
        assert older.verdict is Verdict.INVALID and 'older' in older.reason
        again = v.check(reading(1.0, stamp=5.0))
        assert again.verdict is Verdict.INVALID and 'repeats' in again.reason
        assert v.check(reading(1.0, stamp=5.1)).verdict is Verdict.OK

    def test_stamp_from_the_future_is_invalid(self):
        """A stamp well ahead of arrival shows a clock problem."""
        check = validator().check(reading(1.0, stamp=10.0, arrival=9.0))
        assert check.verdict is Verdict.INVALID and 'ahead' in check.reason


class TestStuckAndJump:
    """Readings that cannot be right given how the robot moved or how fast things close."""

    def run(self, v, ranges, poses, dt=0.05):
        return [v.check(reading(r, stamp=1.0 + i * dt), pose).verdict
                for i, (r, pose) in enumerate(zip(ranges, poses))]

    def test_unchanged_reading_while_driving_along_the_beam_is_stuck(self):
        """stuck_count equal readings while moving stuck_travel toward the target: stuck."""
        v = validator({'sonar.stuck_count': 5, 'sonar.stuck_travel': 0.2})
        poses = [Motion(0.06 * i, 0.0, 0.0) for i in range(6)]
        verdicts = self.run(v, [1.5] * 6, poses)
        # reading 5 (index 4) is the 5th equal one at 0.24 m travelled >= 0.2 m
        assert verdicts[:4] == [Verdict.OK] * 4
        assert verdicts[4:] == [Verdict.STUCK] * 2

    def test_unchanged_reading_while_driving_across_the_beam_is_fine(self):
        """Driving parallel to a wall does not change a side reading (common practice)."""
        v = validator({'sonar.stuck_count': 5, 'sonar.stuck_travel': 0.2})
        poses = [Motion(0.0, 0.1 * i, 0.0) for i in range(8)]
        assert set(self.run(v, [1.5] * 8, poses)) == {Verdict.OK}

    def test_unchanged_reading_while_turning_is_stuck(self):
        """Turning by stuck_turn swings the beam elsewhere: the reading must change."""
        v = validator({'sonar.stuck_count': 4, 'sonar.stuck_turn': 0.5})
        poses = [Motion(0.0, 0.0, 0.2 * i) for i in range(5)]
        verdicts = self.run(v, [2.0] * 5, poses)
        assert verdicts[-2:] == [Verdict.STUCK, Verdict.STUCK]
        assert Verdict.STUCK not in verdicts[:3]

    def test_change_within_resolution_still_counts_as_unchanged(self):
        """Readings that differ by less than the resolution are the same reading."""
        v = validator({'sonar.stuck_count': 3, 'sonar.stuck_travel': 0.1})
        poses = [Motion(0.1 * i, 0.0, 0.0) for i in range(3)]
        assert self.run(v, [1.500, 1.505, 1.498], poses)[-1] is Verdict.STUCK

    def test_without_odometry_nothing_is_stuck(self):
        """Stuck needs evidence of motion."""
        v = validator({'sonar.stuck_count': 3})
        assert set(self.run(v, [1.5] * 6, [None] * 6)) == {Verdict.OK}

    def test_change_faster_than_jump_speed_is_a_jump(self):
        """|dr|/dt above jump_speed between consecutive readings is a jump."""
        v = validator({'sonar.jump_speed': 5.0})
        assert v.check(reading(2.0, stamp=1.0)).verdict is Verdict.OK
        # 0.24 m in 0.05 s = 4.8 m/s <= 5 m/s
        assert v.check(reading(1.76, stamp=1.05)).verdict is Verdict.OK
        # 0.26 m in 0.05 s = 5.2 m/s > 5 m/s
        check = v.check(reading(1.50, stamp=1.10))
        assert check.verdict is Verdict.JUMP
        assert '5.2 m/s' in check.reason

    def test_jump_is_not_judged_across_a_silence(self):
        """After more than stale_after without readings, a new range is not a jump."""
        v = validator({'sonar.jump_speed': 5.0}, stale_after_s=0.3)
        v.check(reading(3.0, stamp=1.0))
        assert v.check(reading(0.5, stamp=1.5)).verdict is Verdict.OK

    def test_reset_forgets_history(self):
        """After a clock jump an old stamp is accepted again."""
        v = validator()
        v.check(reading(1.0, stamp=100.0))
        v.reset()
        assert v.check(reading(1.0, stamp=1.0)).verdict is Verdict.OK


def test_trusted_verdicts_are_those_that_bound_the_free_distance():
    """ok, late, blind and no_echo say something about the path; the rest do not."""
    assert {v for v in Verdict if v.trusted} == {
        Verdict.OK, Verdict.LATE, Verdict.BLIND, Verdict.NO_ECHO}


def test_reason_describes_the_reading():
    """describe() gives a readable one-line summary."""
    check = validator().check(reading(-math.inf, stamp=2.5))
    assert check.describe() == 'ahead @ 2.500 s: blind (-inf (REP 117: too close to quantify))'


def test_late_flag_applies_to_every_usable_verdict():
    """A no-echo or blind reading that arrives late keeps its verdict and is flagged late."""
    v = validator({'sonar.late_after': 0.1})
    no_echo = v.check(reading(math.inf, stamp=1.0, arrival=1.2))
    assert no_echo.verdict is Verdict.NO_ECHO and no_echo.late
    blind = v.check(reading(-math.inf, stamp=2.0, arrival=2.2))
    assert blind.verdict is Verdict.BLIND and blind.late
    on_time = v.check(reading(math.inf, stamp=3.0, arrival=3.05))
    assert not on_time.late
    stale = v.check(reading(1.0, stamp=4.0, arrival=4.5))
    assert stale.verdict is Verdict.STALE and not stale.late


def test_unchanged_reading_while_driving_past_at_an_angle_is_fine():
    """A beam 0.35 rad off the path, fov 0.4: forward travel lies outside the cone, so a side
    wall parallel to the path may hold the reading (plane geometry)."""
    v = validator({'sensors.ahead.yaw': 0.35, 'sonar.field_of_view': 0.4,
                   'sonar.stuck_count': 5, 'sonar.stuck_travel': 0.2})
    verdicts = [v.check(reading(1.48, stamp=1.0 + 0.05 * i), Motion(0.1 * i, 0.0, 0.0)).verdict
                for i in range(10)]
    assert set(verdicts) == {Verdict.OK}
