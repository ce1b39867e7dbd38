"""RViz markers: cone geometry against numpy, stable ids, frames, shading, the limit text."""
from __future__ import annotations

import dataclasses
import math

from builtin_interfaces.msg import Time
import numpy as np
import pytest
from testkit import make_config
from visualization_msgs.msg import Marker, MarkerArray

from sonar_guard.core.monitor import Decision, Monitor, OdometrySample, SensorStatus
from sonar_guard.core.readings import RangeReading, Verdict
from sonar_guard.ros import markers
from sonar_guard.ros.markers import build_markers, cone_length_m, cone_points, shade_of

STAMP = Time(sec=42, nanosec=250_000_000)
# 'ahead' publishes in its own frame; 'behind' has none and is drawn in base_link at its mount,
# turned to a yaw that is not a multiple of pi/2 and raised, so pose mistakes show.
SETTINGS = {'sensors.ahead.frame_id': 'sonar_ahead', 'sensors.behind.yaw': 2.5,
            'sensors.behind.z': 0.2, 'sonar.stuck_count': 100000}
FOV = 0.4  # sonar.field_of_view default (core/config.py), rad
MIN_RANGE, MAX_RANGE = 0.15, 4.0  # sonar.min_range / sonar.max_range defaults, m


@pytest.fixture
def config():
    """The two-sensor test robot with the frames and mount above."""
    return make_config(SETTINGS)


def drive(config, ahead, *, seconds=0.5):
    """Run a monitor with 'ahead' reading ``ahead`` every 40 ms; 'behind' never heard."""
    monitor = Monitor(config)
    decision, t = None, 0.0
    for k in range(int(round(seconds / 0.02))):
        t = k * 0.02
        monitor.on_odometry(OdometrySample(t, 0.2, 0.0, 0.0, t))
        if k % 2 == 0:
            monitor.on_range(RangeReading('ahead', t, ahead, t))
        decision = monitor.tick(t)
    return monitor.statuses(t), decision


def rgb(marker):
    """Return a marker's colour as a tuple."""
    c = marker.color
    return (c.r, c.g, c.b)


def as_array(marker):
    """Return a marker's points as an (N, 3) numpy array."""
    return np.array([(p.x, p.y, p.z) for p in marker.points])


# ---------------------------------------------------------------------------- cone geometry


@pytest.mark.parametrize(('length', 'fov', 'segments'), [
    (1.25, 0.4, 12),
    (4.0, 0.26, 8),
    (0.15, 1.0, 3),
    (2.0, 2.5, 24),
])
def test_cone_rim_lies_at_half_the_field_of_view_from_the_axis(length, fov, segments):
    """Apex at the origin; every rim point fov/2 off +x, length/cos(fov/2) away, at x=length."""
    pts = np.asarray(cone_points(length, fov, segments), dtype=float)
    assert pts.shape == (3 * segments, 3)  # TRIANGLE_LIST: three points per triangle
    apex, rim = pts[0::3], np.concatenate((pts[1::3], pts[2::3]))
    assert np.all(apex == 0.0)
    norms = np.linalg.norm(rim, axis=1)
    # numpy (vector angle): arccos(p . x_hat / |p|)
    angles = np.arccos(np.clip(rim @ np.array([1.0, 0.0, 0.0]) / norms, -1.0, 1.0))
    np.testing.assert_allclose(angles, fov / 2, atol=1e-12)
    # right triangle apex-centre-rim: hypotenuse = adjacent / cos(half-angle)
    np.testing.assert_allclose(norms, length / math.cos(fov / 2), rtol=1e-12)
    np.testing.assert_allclose(rim[:, 0], length, rtol=1e-12)


@pytest.mark.parametrize('segments', [3, 12, 17])
def test_cone_fan_goes_once_round_the_rim_without_flat_triangles(segments):
    """Rim points evenly spaced round +x; each rim edge used once; no zero-area triangle."""
    pts = np.asarray(cone_points(1.0, 0.4, segments), dtype=float)
    first, second = pts[1::3], pts[2::3]
    azimuth = np.sort(np.arctan2(first[:, 2], first[:, 1]))  # numpy (angle about +x)
    np.testing.assert_allclose(np.diff(azimuth), 2 * math.pi / segments, rtol=1e-9)
    # the fan closes: each triangle's second rim point is the next triangle's first
    np.testing.assert_allclose(second, np.roll(first, -1, axis=0), atol=1e-15)
    areas = 0.5 * np.linalg.norm(np.cross(first, second), axis=1)  # numpy (cross product)
    assert np.all(areas > 1e-6)


@pytest.mark.parametrize(('args', 'name'), [
    ((-0.1, 0.4), 'length_m'),
    ((math.nan, 0.4), 'length_m'),
    ((math.inf, 0.4), 'length_m'),
    ((1.0, 0.0), 'fov_rad'),
    ((1.0, math.pi), 'fov_rad'),
    ((1.0, math.nan), 'fov_rad'),
    ((1.0, 0.4, 2), 'segments'),
    ((1.0, 0.4, 2.5), 'segments'),
    ((1.0, 0.4, True), 'segments'),
])
def test_cone_points_rejects_bad_arguments_by_name(args, name):
    """Misuse raises ValueError naming the argument (DEVELOPERS.md conventions)."""
    with pytest.raises(ValueError, match=name):
        cone_points(*args)


BASE_STATUS = SensorStatus(name='ahead', verdict=Verdict.OK, reason='1.250 m', last_range_m=1.25,
                           silent_for_s=0.01, silent=False, free_distance_m=1.25, memory_m=None,
                           latency_s=0.05, period_median_s=0.04, period_worst_s=0.05)


@pytest.mark.parametrize(('changes', 'expected'), [
    ({}, 1.25),
    ({'last_range_m': 0.05, 'verdict': Verdict.BLIND}, MIN_RANGE),
    ({'last_range_m': -math.inf, 'verdict': Verdict.BLIND}, MIN_RANGE),  # REP 117 too close
    ({'last_range_m': math.inf, 'verdict': Verdict.NO_ECHO}, MAX_RANGE),  # REP 117 no return
    ({'last_range_m': 7.0, 'verdict': Verdict.NO_ECHO}, MAX_RANGE),
    ({'last_range_m': math.nan, 'verdict': Verdict.INVALID}, MAX_RANGE),  # REP 117 erroneous
    ({'silent': True, 'silent_for_s': 2.0}, MAX_RANGE),
    ({'verdict': None, 'last_range_m': math.nan}, MAX_RANGE),
])
def test_cone_length_is_the_range_clipped_or_max_range_when_unknown(config, changes, expected):
    """Clipped to [min_range, max_range]; max_range for no echo, NaN, silence or nothing yet."""
    status = dataclasses.replace(BASE_STATUS, **changes)
    assert cone_length_m(config.sensor('ahead'), status) == expected
    assert cone_length_m(config.sensor('ahead'), None) == MAX_RANGE


# ---------------------------------------------------------------------------- the marker array


def test_one_cone_per_sensor_then_the_text_all_added_stamped_and_short_lived(config):
    """TRIANGLE_LIST per sensor, then TEXT_VIEW_FACING; ADD, the given stamp, ~1 s, unlocked."""
    statuses, decision = drive(config, 1.25)
    array = build_markers(config, statuses, decision, STAMP)
    assert isinstance(array, MarkerArray)
    assert [m.type for m in array.markers] == [Marker.TRIANGLE_LIST, Marker.TRIANGLE_LIST,
                                               Marker.TEXT_VIEW_FACING]
    for m in array.markers:
        assert m.action == Marker.ADD
        assert m.header.stamp == STAMP
        assert m.ns == 'sonar_guard'
        assert m.frame_locked is False
        lifetime = m.lifetime.sec + m.lifetime.nanosec * 1e-9
        assert 0.5 <= lifetime <= 2.0


def test_ids_are_unique_and_stable_across_calls(config):
    """Same (ns, id) per sensor on every call, whatever the readings, so RViz replaces them."""
    first = build_markers(config, *drive(config, 1.25), STAMP)
    second = build_markers(config, *drive(config, -math.inf), Time(sec=43))
    keys = [(m.ns, m.id) for m in first.markers]
    assert keys == [(m.ns, m.id) for m in second.markers]
    assert len(set(keys)) == len(keys)
    # cone id = index in config.sensors
    assert [m.id for m in first.markers[:2]] == [0, 1]
    # a custom namespace is used for every marker
    custom = build_markers(config, *drive(config, 1.25), STAMP, namespace='cart')
    assert {m.ns for m in custom.markers} == {'cart'}


def test_sensor_with_a_frame_is_drawn_in_it_at_the_origin(config):
    """frame_id configured: the cone sits in that frame with the identity pose."""
    ahead = build_markers(config, *drive(config, 1.25), STAMP).markers[0]
    assert ahead.header.frame_id == 'sonar_ahead'
    p, q = ahead.pose.position, ahead.pose.orientation
    assert (p.x, p.y, p.z) == (0.0, 0.0, 0.0)
    assert (q.x, q.y, q.z, q.w) == (0.0, 0.0, 0.0, 1.0)


def test_sensor_without_a_frame_is_placed_at_its_mount_in_base_link(config):
    """No frame_id: base_link (REP 105), position x, y, z and the yaw as a quaternion."""
    behind = build_markers(config, *drive(config, 1.25), STAMP).markers[1]
    assert behind.header.frame_id == 'base_link'
    p, q = behind.pose.position, behind.pose.orientation
    assert (p.x, p.y, p.z) == pytest.approx((-0.5, 0.0, 0.2))  # testkit mount + override
    # unit quaternion of a turn by yaw about +z: (0, 0, sin(yaw/2), cos(yaw/2)), x y z w order
    # (geometry_msgs/Quaternion); either sign is the same rotation
    expected = np.array([0.0, 0.0, math.sin(2.5 / 2), math.cos(2.5 / 2)])
    got = np.array([q.x, q.y, q.z, q.w])
    assert min(np.abs(got - expected).max(), np.abs(got + expected).max()) < 1e-12
    # numpy: the rotation matrix of that quaternion maps the cone's +x onto the beam yaw
    x, y, z, w = got
    first_column = np.array([1 - 2 * (y * y + z * z), 2 * (x * y + w * z), 2 * (x * z - w * y)])
    np.testing.assert_allclose(first_column, [math.cos(2.5), math.sin(2.5), 0.0], atol=1e-12)


def test_cone_length_follows_the_last_reading(config):
    """An ok 1.25 m reading draws the rim at x = 1.25 m; a silent sensor at max_range."""
    ahead, behind, _ = build_markers(config, *drive(config, 1.25), STAMP).markers
    assert as_array(ahead)[:, 0].max() == pytest.approx(1.25)
    assert as_array(behind)[:, 0].max() == pytest.approx(MAX_RANGE)
    # TRIANGLE_LIST points are scaled by scale: 1 keeps them in metres (visualization_msgs)
    assert (ahead.scale.x, ahead.scale.y, ahead.scale.z) == (1.0, 1.0, 1.0)


def test_ok_and_silent_sensors_have_different_see_through_colours(config):
    """'ahead' ok and 'behind' never heard are shaded apart; alpha about 0.35."""
    ahead, behind, _ = build_markers(config, *drive(config, 1.25), STAMP).markers
    assert rgb(ahead) != rgb(behind)
    assert shade_of(dataclasses.replace(BASE_STATUS, silent=True)) == 'silent'
    for m in (ahead, behind):
        assert m.color.a == pytest.approx(0.35, abs=0.05)


@pytest.mark.parametrize(('changes', 'shade'), [
    ({}, 'trusted'),
    ({'verdict': Verdict.NO_ECHO}, 'trusted'),
    ({'verdict': Verdict.NO_ECHO, 'memory_m': 0.3}, 'caution'),
    ({'verdict': Verdict.BLIND}, 'caution'),
    ({'verdict': Verdict.JUMP}, 'caution'),
    ({'verdict': Verdict.LATE}, 'caution'),
    ({'verdict': Verdict.STALE}, 'caution'),
    ({'verdict': Verdict.INVALID}, 'untrusted'),
    ({'verdict': Verdict.STUCK}, 'untrusted'),
    ({'silent': True}, 'silent'),
    ({'verdict': None}, 'silent'),
])
def test_shade_follows_the_diagnostic_level(changes, shade):
    """The colour table of the markers module docstring; four distinct colours."""
    assert shade_of(dataclasses.replace(BASE_STATUS, **changes)) == shade
    assert len(set(markers.PALETTE.values())) == 4


def test_text_shows_the_limit_and_a_short_reason(config):
    """TEXT_VIEW_FACING in base_link above the robot: 'x.xx m/s' and the reason's head."""
    statuses, _ = drive(config, 1.25)
    decision = Decision(time_s=0.48, limit_mps=0.4567, target_mps=0.4567, heading_rad=0.0,
                        reason='ahead: 0.55 m free, latency 0.240 s', limiting_sensor='ahead',
                        covering=('ahead',), speed_mps=0.2, odometry_fresh=True)
    text = build_markers(config, statuses, decision, STAMP).markers[-1]
    assert text.header.frame_id == 'base_link'
    assert '0.46 m/s' in text.text  # 0.4567 rounded to two decimals
    assert 'ahead: 0.55 m free' in text.text
    assert 'latency' not in text.text
    assert text.pose.position.z > max(s.z_m for s in config.sensors)
    assert text.scale.z > 0.0  # TEXT_VIEW_FACING: scale.z is the text height


def test_text_follows_the_engine_limit(config):
    """The limit in the text is the decision's limit_mps to two decimals."""
    statuses, decision = drive(config, 0.5)
    text = build_markers(config, statuses, decision, STAMP).markers[-1].text
    assert 0.0 < decision.limit_mps < 1.0
    assert text.startswith(f'{decision.limit_mps:.2f} m/s')


def test_public_names_exist_and_all_is_sorted():
    """Sorted __all__ whose names exist (style.md facades)."""
    assert list(markers.__all__) == sorted(markers.__all__)
    assert all(hasattr(markers, name) for name in markers.__all__)
