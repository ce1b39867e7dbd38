"""Per-reading verdicts: can one sonar range reading be trusted, and if not, why not.

The validator is a small state machine per sensor. It returns a :class:`Verdict` and a reason
carrying the numbers; bad readings are data here, never exceptions. Meaning of the special
values follows REP 117: ``-inf`` too close to quantify, ``+inf`` no return, NaN erroneous.

Times are float seconds (ROS time or bag time), ranges metres, angles radians.
"""
from __future__ import annotations

from dataclasses import dataclass
import enum
import math
from typing import NamedTuple

from sonar_guard.core.acoustics import blind_range
from sonar_guard.core.config import SensorConfig

__all__ = [
    'Motion',
    'RADIATION_ULTRASOUND',
    'RangeReading',
    'ReadingCheck',
    'ReadingValidator',
    'Verdict',
    'check_metadata',
]

RADIATION_ULTRASOUND = 0  # sensor_msgs/Range ULTRASOUND=0
_META_REL_TOL = 1e-4  # Range fields are float32: allow its rounding and then some
_META_ABS_TOL = 1e-3
_FUTURE_TOL_S = 0.05  # a stamp this far ahead of arrival is a clock problem, not jitter


class Verdict(enum.Enum):
    """What one reading means for the speed limit."""

    OK = 'ok'              # a trusted range to the nearest echo
    BLIND = 'blind'        # something is closer than the sensor can measure
    NO_ECHO = 'no_echo'    # nothing returned within max_range (or the echo was lost)
    INVALID = 'invalid'    # NaN, negative, metadata or order wrong: discarded
    STALE = 'stale'        # too old when it arrived to say anything about now
    LATE = 'late'          # usable, but arrived later than the budget allows
    STUCK = 'stuck'        # unchanged although the robot moved enough that it must change
    JUMP = 'jump'          # changed faster than any plausible closing speed

    @property
    def trusted(self) -> bool:
        """True when the reading may bound the free distance on its own."""
        return self in _TRUSTED


_TRUSTED = frozenset({Verdict.OK, Verdict.BLIND, Verdict.NO_ECHO, Verdict.LATE})


class RangeReading(NamedTuple):
    """One sensor_msgs/Range reading as the core sees it.

    ``stamp_s`` is the header stamp (when the echo returned), ``arrival_s`` when it reached the
    monitor (receive time live, bag log time offline). Message metadata fields are optional:
    None means "not given, not checked".
    """

    sensor: str
    stamp_s: float
    range_m: float
    arrival_s: float
    min_range_m: float | None = None
    max_range_m: float | None = None
    field_of_view_rad: float | None = None
    radiation_type: int | None = None
    frame_id: str | None = None


@dataclass(frozen=True, slots=True)
class Motion:
    """Where odometry says the robot is: planar pose in the odom frame (m, m, rad).

    ``theta_rad`` is accumulated, not wrapped, so a difference of two poses is the real turn.
    """

    x_m: float = 0.0
    y_m: float = 0.0
    theta_rad: float = 0.0


class ReadingCheck(NamedTuple):
    """The verdict on one reading, with a reason that carries the numbers."""

    sensor: str
    stamp_s: float
    range_m: float
    verdict: Verdict
    reason: str
    late: bool = False  # arrived later than late_after, whatever the verdict

    def describe(self) -> str:
        """Return a one-line human description."""
        return f'{self.sensor} @ {self.stamp_s:.3f} s: {self.verdict.value} ({self.reason})'


def check_metadata(reading: RangeReading, sensor: SensorConfig) -> str:
    """Return why the message's own fields disagree with the configuration, or ''.

    The configuration may be more cautious than the message (a larger min_range, a smaller
    max_range); it may not be bolder: a message claiming a larger blind range or a shorter
    reach than configured, or another beam width, is not the sensor configured.
    """
    if reading.radiation_type is not None and reading.radiation_type != RADIATION_ULTRASOUND:
        return f'radiation_type {reading.radiation_type} is not ULTRASOUND (0)'
    for label, got, want, sign in (
        ('min_range', reading.min_range_m, sensor.min_range_m, 1.0),  # got <= want is fine
        ('max_range', reading.max_range_m, sensor.max_range_m, -1.0),  # got >= want is fine
        ('field_of_view', reading.field_of_view_rad, sensor.field_of_view_rad, 0.0),
    ):
        if got is None:
            continue
        tol = max(_META_ABS_TOL, _META_REL_TOL * want)
        excess = (got - want) * sign if sign else abs(got - want)
        if not math.isfinite(got) or excess > tol:
            unit = 'rad' if label == 'field_of_view' else 'm'
            return f'message {label} {got:g} {unit} disagrees with configured {want:g} {unit}'
    if sensor.frame_id and reading.frame_id is not None and reading.frame_id != sensor.frame_id:
        return f'frame_id {reading.frame_id!r} is not the configured {sensor.frame_id!r}'
    return ''


class ReadingValidator:
    """Judge the readings of one sensor in arrival order.

    Args:
        sensor: the sensor's configuration.
        stale_after_s: a reading older than this on arrival is stale.
    """

    __slots__ = ('_acoustic_blind_m', '_last_finite', '_last_stamp', '_meta_ok', '_run_count',
                 '_run_pose', '_run_range', 'sensor', 'stale_after_s')

    def __init__(self, sensor: SensorConfig, *, stale_after_s: float) -> None:
        self.configure(sensor, stale_after_s=stale_after_s)
        self.reset()

    def configure(self, sensor: SensorConfig, *, stale_after_s: float) -> None:
        """Take new thresholds for the same sensor; the history is kept."""
        self.sensor = sensor
        self.stale_after_s = stale_after_s
        self._meta_ok: tuple[object, ...] | None = None  # message metadata last found agreeing
        self._acoustic_blind_m = (blind_range(sensor.ring_down_s, sensor.air_temperature_c)
                                  if sensor.ring_down_s > 0 else 0.0)

    def reset(self) -> None:
        """Forget history (after a clock jump)."""
        self._last_stamp = -math.inf
        self._last_finite: tuple[float, float] | None = None  # (stamp, range) of last in-range
        self._run_range = math.nan
        self._run_count = 0
        self._run_pose: Motion | None = None

    @property
    def acoustic_blind_m(self) -> float:
        """Blind range from the configured ring-down time (0 when not configured), m."""
        return self._acoustic_blind_m

    def check(self, reading: RangeReading, pose: Motion | None = None) -> ReadingCheck:
        """Return the verdict on ``reading``; ``pose`` is the robot pose at its stamp."""
        verdict, reason = self._judge(reading, pose)
        late = (verdict not in (Verdict.INVALID, Verdict.STALE)
                and reading.arrival_s - reading.stamp_s > self.sensor.late_after_s)
        return ReadingCheck(reading.sensor, reading.stamp_s, reading.range_m, verdict, reason,
                            late)

    def _judge(self, rd: RangeReading, pose: Motion | None) -> tuple[Verdict, str]:
        s = self.sensor
        r = rd.range_m
        if not math.isfinite(rd.stamp_s) or not math.isfinite(rd.arrival_s):
            return Verdict.INVALID, f'stamp {rd.stamp_s!r} or arrival {rd.arrival_s!r} not finite'
        if rd.stamp_s <= self._last_stamp:
            word = 'repeats' if rd.stamp_s == self._last_stamp else 'is older than'
            return (Verdict.INVALID,
                    f'stamp {rd.stamp_s:.6f} s {word} the previous {self._last_stamp:.6f} s')
        # a sensor sends the same metadata every time: check it again only when it changes
        given = (rd.radiation_type, rd.min_range_m, rd.max_range_m, rd.field_of_view_rad,
                 rd.frame_id)
        if given != self._meta_ok:
            meta = check_metadata(rd, s)
            if meta:
                self._last_stamp = rd.stamp_s
                return Verdict.INVALID, meta
            self._meta_ok = given
        if math.isnan(r):
            self._last_stamp = rd.stamp_s
            return Verdict.INVALID, 'range is NaN (REP 117: erroneous detection)'
        age = rd.arrival_s - rd.stamp_s
        if age < -_FUTURE_TOL_S:
            return Verdict.INVALID, f'stamp {-age:.3f} s ahead of the clock'
        self._last_stamp = rd.stamp_s
        if age > self.stale_after_s:
            return Verdict.STALE, f'arrived {age:.3f} s after its stamp > {self.stale_after_s:g} s'
        verdict, reason = self._range_verdict(r)
        if verdict is Verdict.OK:
            verdict, reason = self._motion_verdict(rd, pose, reason)
        elif verdict is not Verdict.INVALID:
            self._run_count = 0
        if verdict is Verdict.OK and age > s.late_after_s:
            return Verdict.LATE, f'arrived {age:.3f} s after its stamp > {s.late_after_s:g} s'
        return verdict, reason

    def _range_verdict(self, r: float) -> tuple[Verdict, str]:
        s = self.sensor
        if r == -math.inf:
            return Verdict.BLIND, '-inf (REP 117: too close to quantify)'
        if r == math.inf:
            return Verdict.NO_ECHO, '+inf (REP 117: no return in range)'
        if r < 0:
            return Verdict.INVALID, f'negative range {r:g} m'
        if r < s.min_range_m:
            return Verdict.BLIND, f'{r:.3f} m < min_range {s.min_range_m:g} m'
        if r < self._acoustic_blind_m:
            return (Verdict.BLIND,
                    f'{r:.3f} m inside the ring-down blind range {self._acoustic_blind_m:.3f} m')
        if r >= s.max_range_m - s.resolution_m:
            return Verdict.NO_ECHO, f'{r:.3f} m at max_range {s.max_range_m:g} m'
        return Verdict.OK, f'{r:.3f} m'

    def _motion_verdict(self, rd: RangeReading, pose: Motion | None,
                        reason: str) -> tuple[Verdict, str]:
        s = self.sensor
        r = rd.range_m
        previous = self._last_finite
        self._last_finite = (rd.stamp_s, r)
        # stuck: a run of readings unchanged within the resolution
        if self._run_count and abs(r - self._run_range) <= s.resolution_m:
            self._run_count += 1
        else:
            self._run_count, self._run_range, self._run_pose = 1, r, pose
        if self._run_count >= s.stuck_count and pose is not None and self._run_pose is not None:
            travel, turn = _travel_along_beam(self._run_pose, pose, s.yaw_rad,
                                              s.field_of_view_rad / 2)
            if abs(travel) >= s.stuck_travel_m or abs(turn) >= s.stuck_turn_rad:
                return (Verdict.STUCK,
                        f'{self._run_count} readings at {self._run_range:.3f} m while the robot '
                        f'moved {travel:+.2f} m along the beam and turned {turn:+.2f} rad')
        # jump: faster change than any plausible closing speed
        if previous is not None:
            dt = rd.stamp_s - previous[0]
            if 0 < dt <= self.stale_after_s:
                rate = abs(r - previous[1]) / dt
                if rate > s.jump_speed_mps and abs(r - previous[1]) > 2 * s.resolution_m:
                    return (Verdict.JUMP,
                            f'{previous[1]:.3f} -> {r:.3f} m in {dt:.3f} s = {rate:.1f} m/s '
                            f'> {s.jump_speed_mps:g} m/s')
        return Verdict.OK, reason


def _travel_along_beam(start: Motion, end: Motion, yaw_rad: float,
                       half_fov_rad: float) -> tuple[float, float]:
    """Return (travel along the beam that must change the reading, turn) between two poses.

    Travel counts only when its direction lies inside the beam cone: then whatever echoes
    gets nearer or farther. Travel at an angle to the beam can leave the reading unchanged
    legitimately (a side wall parallel to the path, seen at the cone's edge).
    """
    heading = start.theta_rad + yaw_rad
    dx, dy = end.x_m - start.x_m, end.y_m - start.y_m
    distance = math.hypot(dx, dy)
    along = dx * math.cos(heading) + dy * math.sin(heading)
    inside = distance > 0 and abs(along) >= distance * math.cos(half_fov_rad)
    return (along if inside else 0.0), end.theta_rad - start.theta_rad
