"""Tests for sonar_guard.core.watch: the swept width and the turning ring no cone watches.

Expected values are plane geometry worked out in the comments (right triangles, the support
function of a rectangle, the sine rule), or a brute-force point test written here with numpy;
none of them calls the code under test.
"""
from __future__ import annotations

import math

from hypothesis import given, settings
from hypothesis import strategies as st
import numpy as np
import pytest
from testkit import make_config

from sonar_guard.core.geometry import Footprint, Mount
from sonar_guard.core.watch import (
    full_width_from_m,
    full_width_stretches,
    in_some_cone,
    swept_band,
    turn_annulus_m,
    unwatched_lines,
    unwatched_turn_sectors,
    watch_headings,
)

PI = math.pi


def box(front: float, rear: float, half_width: float) -> Footprint:
    """Rectangle x in [-rear, front], y in [-half_width, half_width] about base_link."""
    return Footprint.from_flat([front, half_width, -rear, half_width, -rear, -half_width,
                                front, -half_width])


def mount(x: float, y: float, yaw: float, fov: float, reach: float) -> Mount:
    return Mount(x, y, 0.1, yaw, fov, reach)


def in_sector(points: np.ndarray, m: Mount) -> np.ndarray:
    """Brute force, written here: within max range of the apex and within fov/2 of the axis."""
    offset = points - [m.x_m, m.y_m]
    distance = np.hypot(offset[:, 0], offset[:, 1])
    angle = np.arctan2(offset[:, 1], offset[:, 0]) - m.yaw_rad
    off_axis = np.abs((angle + PI) % (2 * PI) - PI)
    return (distance <= m.max_range_m + 1e-9) & (off_axis <= m.field_of_view_rad / 2 + 1e-9)


# ------------------------------------------------------------------ the swept band


@pytest.mark.parametrize('heading', [0.0, 0.3, PI / 4, PI / 2, 2.0, PI, -PI / 3])
def test_swept_band_of_a_centred_rectangle_is_its_support_function(heading):
    """Rectangle with half sides (hx, hy): lead = hx|cos h| + hy|sin h|, width = 2(hx|sin h| +
    hy|cos h|) (support function of a box, convex geometry textbook)."""
    hx, hy = 0.5, 0.3
    band = swept_band(box(hx, hx, hy), heading)
    c, s = abs(math.cos(heading)), abs(math.sin(heading))
    assert band.lead_m == pytest.approx(hx * c + hy * s, abs=1e-12)
    assert band.width_m == pytest.approx(2 * (hx * s + hy * c), abs=1e-12)
    assert band.low_m == pytest.approx(-band.high_m, abs=1e-12)  # centred: symmetric


# ------------------------------------------------------------------ full width, closed forms


# One sensor at the middle of the front edge facing forward, fov F, range R; the path is W wide.
# Cross-section d ahead: the point (d, y) is in the cone iff |y| <= d*tan(F/2) and
# d^2 + y^2 <= R^2 (right triangle). The widest points are the corners y = +-W/2, so the
# whole width is inside for d in [(W/2)/tan(F/2), sqrt(R^2 - (W/2)^2)]: non-empty exactly when
# (W/2)/tan(F/2) <= R*cos(F/2), i.e. (W/2)/sin(F/2) <= R (the edge ray meets the corner line
# within range).
# A sensor off the middle by c (y = c) reaches the far side last: replace W/2 by W/2 + |c|.
ONE_SENSOR = [
    # (F rad, R m, W m, c m)
    (0.4, 4.0, 0.6, 0.0),
    (0.44, 3.5, 0.62, 0.0),
    (1.0, 2.0, 1.0, 0.0),
    (2.0, 1.5, 0.8, 0.0),
    (0.2, 4.0, 0.5, 0.0),
    (0.6, 3.0, 0.6, -0.1),  # right of the middle: the left side (+y) is reached last
    (0.6, 3.0, 0.6, 0.15),  # left of the middle: the right side is reached last
]


@pytest.mark.parametrize('fov, reach, width, c', ONE_SENSOR)
def test_one_front_sensor_watches_the_full_width_between_two_right_triangle_distances(
        fov, reach, width, c):
    """From (W/2 + |c|)/tan(F/2) to sqrt(R^2 - (W/2 + |c|)^2) ahead of the front edge."""
    half = width / 2 + abs(c)
    footprint = box(0.4, 0.3, width / 2)
    start = half / math.tan(fov / 2)
    end = math.sqrt(reach ** 2 - half ** 2)
    assert start <= reach * math.cos(fov / 2)  # the table's cases all have a stretch
    m = mount(0.4, c, 0.0, fov, reach)
    stretches = full_width_stretches([m], footprint, 0.0)
    assert stretches == [(pytest.approx(start, abs=1e-9), pytest.approx(end, abs=1e-9))]
    assert full_width_from_m([m], footprint, 0.0) == pytest.approx(start, abs=1e-9)


def test_one_front_sensor_too_narrow_for_its_range_watches_the_full_width_nowhere():
    """(W/2)/tan(F/2) > R*cos(F/2): the edges reach the path's sides only beyond max range."""
    fov, reach, half = 0.2, 1.0, 0.3
    assert half / math.tan(fov / 2) > reach * math.cos(fov / 2)
    m = mount(0.4, 0.0, 0.0, fov, reach)
    assert full_width_from_m([m], box(0.4, 0.3, half), 0.0) is None
    assert full_width_stretches([m], box(0.4, 0.3, half), 0.0) == []


@pytest.mark.parametrize('inset', [0.05, 0.2, 1.0])
def test_a_sensor_set_back_inside_the_outline_counts_from_the_edge_not_the_mount(inset):
    """Mount inset m behind the front edge: both distances shrink by m, floored at the edge
    (same right triangles, measured from the mount)."""
    fov, reach, half = 0.8, 3.0, 0.3
    m = mount(0.4 - inset, 0.0, 0.0, fov, reach)
    start = max(half / math.tan(fov / 2) - inset, 0.0)
    end = math.sqrt(reach ** 2 - half ** 2) - inset
    assert full_width_stretches([m], box(0.4, 0.3, half), 0.0) == \
        [(pytest.approx(start, abs=1e-9), pytest.approx(end, abs=1e-9))]


# Two sensors side by side at y = +-s on the front edge, facing forward, fov F, range R, path
# |y| <= W/2 with s < W/2. At d ahead each cone covers y within s*(+-1) +- m(d), where
# m(d) = min(d*tan(F/2), sqrt(R^2 - d^2)) (half chord of the wedge, half chord of the disc).
# The two cover [-W/2, W/2] iff m(d) >= s (they meet in the middle) and m(d) >= W/2 - s (they
# reach the sides): with k = max(s, W/2 - s) that is d in [k/tan(F/2), sqrt(R^2 - k^2)].
@pytest.mark.parametrize('s, half, fov, reach', [
    (0.15, 0.3, 0.4, 4.0),
    (0.2, 0.3, 0.4, 4.0),   # k = s: the middle closes last
    (0.1, 0.3, 0.6, 2.0),   # k = W/2 - s: the sides are reached last
    (0.25, 0.35, 1.2, 0.9),
])
def test_two_sensors_side_by_side_watch_the_width_once_both_gaps_close(s, half, fov, reach):
    """Stretch [k/tan(F/2), sqrt(R^2 - k^2)] with k = max(s, W/2 - s) (derived above)."""
    mounts = [mount(0.4, s, 0.0, fov, reach), mount(0.4, -s, 0.0, fov, reach)]
    k = max(s, half - s)
    got = full_width_stretches(mounts, box(0.4, 0.3, half), 0.0)
    assert got == [(pytest.approx(k / math.tan(fov / 2), abs=1e-9),
                    pytest.approx(math.sqrt(reach ** 2 - k ** 2), abs=1e-9))]


def test_a_sensor_at_the_front_left_corner_of_a_square_facing_45_deg_watches_that_heading():
    """Square of half side a, heading 45 deg: the corner leads and sits mid-band, the band is
    2*sqrt(2)*a wide (support function), so W/2 = sqrt(2)*a in the one-sensor formula."""
    a, fov, reach = 0.3, 1.2, 3.0
    m = mount(a, a, PI / 4, fov, reach)
    half = math.sqrt(2) * a
    got = full_width_stretches([m], box(a, a, a), PI / 4)
    assert got == [(pytest.approx(half / math.tan(fov / 2), abs=1e-9),
                    pytest.approx(math.sqrt(reach ** 2 - half ** 2), abs=1e-9))]


@pytest.mark.parametrize('yaw, heading', [
    (PI / 2, 0.0),      # faces left, robot drives forward
    (PI, 0.0),          # faces backwards
    (0.0, PI),          # the front sensor when reversing
    (0.0, PI / 4),      # 45 deg off: the cone drifts out of the band as it widens
])
def test_a_sensor_that_does_not_face_the_heading_gives_none(yaw, heading):
    """No cross-section ahead is ever fully inside the cone."""
    m = mount(0.4, 0.0, yaw, 0.4, 4.0)
    assert full_width_from_m([m], box(0.4, 0.4, 0.3), heading) is None


@pytest.mark.parametrize('side', [1.0, -1.0])
def test_a_cone_whose_edge_runs_along_the_path_2_cm_inside_its_side_never_watches_it(side):
    """Edge parallel to the heading at |y| = 0.28 m, path half width 0.30 m: a 2 cm strip along
    that side stays outside the cone at every distance (the edge is the line |y| = 0.28)."""
    m = mount(0.4, side * 0.28, -side * 0.5, 1.0, 3.0)  # edges at yaw 0 and -side * 1.0
    assert full_width_stretches([m], box(0.4, 0.3, 0.3), 0.0) == []
    moved = mount(0.4, side * 0.30, -side * 0.5, 1.0, 3.0)  # on the side line: watched
    assert full_width_from_m([moved], box(0.4, 0.3, 0.3), 0.0) == \
        pytest.approx(0.6 / math.tan(1.0), abs=1e-9)  # the other edge crosses 0.6 m of width


def test_a_gap_between_two_watched_stretches_starts_the_count_again():
    """Short wide cone covers the width near, a long narrow one only far out: the answer is the
    far stretch's start (conservative), and both stretches are listed."""
    half = 0.3
    # wide: F = 2.0, R = 1.0 -> [0.3/tan 1.0, sqrt(1 - 0.09)] = [0.1926, 0.9539]
    # narrow: F = 0.2, R = 4.0 -> [0.3/tan 0.1, sqrt(16 - 0.09)] = [2.9900, 3.9887]
    mounts = [mount(0.4, 0.0, 0.0, 2.0, 1.0), mount(0.4, 0.0, 0.0, 0.2, 4.0)]
    got = full_width_stretches(mounts, box(0.4, 0.3, half), 0.0)
    near = (half / math.tan(1.0), math.sqrt(1.0 - half ** 2))
    far = (half / math.tan(0.1), math.sqrt(16.0 - half ** 2))
    assert got == [pytest.approx(near, abs=1e-9), pytest.approx(far, abs=1e-9)]
    assert full_width_from_m(mounts, box(0.4, 0.3, half), 0.0) == pytest.approx(far[0])


def test_no_sensors_or_zero_width_beams_watch_nothing():
    """A ray (fov 0) has no area; no mounts at all: None, and the whole ring unwatched."""
    footprint = box(0.4, 0.3, 0.3)
    assert full_width_from_m([], footprint, 0.0) is None
    assert full_width_from_m([mount(0.4, 0.0, 0.0, 0.0, 4.0)], footprint, 0.0) is None
    assert unwatched_turn_sectors([], footprint) == [(-PI, PI)]


def test_a_non_finite_heading_is_refused_naming_the_argument():
    """Misuse raises ValueError naming heading_rad."""
    with pytest.raises(ValueError, match='heading_rad'):
        full_width_from_m([], box(0.4, 0.3, 0.3), math.nan)


# ------------------------------------------------------------------ full width, brute force

mount_st = st.builds(
    mount,
    x=st.floats(-0.6, 0.6), y=st.floats(-0.4, 0.4), yaw=st.floats(-PI, PI),
    fov=st.floats(0.05, 3.0), reach=st.floats(0.3, 3.0))


def brute_force_watched(mounts: list[Mount], footprint: Footprint, heading: float,
                        d: float) -> bool:
    """Sample the cross-section at d with 2001 points; watched when each is in some cone."""
    u = np.array([math.cos(heading), math.sin(heading)])
    n = np.array([-u[1], u[0]])
    lead = (footprint.points @ u).max()
    across = footprint.points @ n
    t = np.linspace(across.min(), across.max(), 2001)
    points = (lead + d) * u + t[:, np.newaxis] * n
    inside = np.zeros(len(points), dtype=bool)
    for m in mounts:
        inside |= in_sector(points, m)
    return bool(inside.all())


@settings(max_examples=60, deadline=None, derandomize=True)
@given(mounts=st.lists(mount_st, min_size=1, max_size=4),
       heading=st.sampled_from([0.0, PI / 4, PI / 2, PI, -0.7]))
def test_stretches_agree_with_a_brute_force_point_test(mounts, heading):
    """Inside every stretch each sampled point is in a cone; outside, with a 5 mm guard at the
    ends, a sampled point is not (the stretches neither claim too much nor too little)."""
    footprint = box(0.5, 0.4, 0.3)
    stretches = full_width_stretches(mounts, footprint, heading)
    for a, b in stretches:
        assert b > a
        for d in np.linspace(a, b, 25)[1:-1]:
            assert brute_force_watched(mounts, footprint, heading, float(d))
    for d in np.arange(0.0, 4.0, 0.02):
        if any(a - 5e-3 <= d <= b + 5e-3 for a, b in stretches):
            continue
        assert not brute_force_watched(mounts, footprint, heading, float(d)), d
    if stretches:
        assert full_width_from_m(mounts, footprint, heading) == stretches[-1][0]


def test_in_some_cone_matches_the_brute_force_sector_test():
    """Random points against two cones, one of them wider than half a turn."""
    rng = np.random.default_rng(7)
    points = rng.uniform(-3, 3, size=(4000, 2))
    mounts = [mount(0.4, 0.1, 0.3, 0.5, 2.0), mount(-0.2, 0.0, 2.5, 4.0, 1.0)]
    expected = in_sector(points, mounts[0]) | in_sector(points, mounts[1])
    np.testing.assert_array_equal(in_some_cone(mounts, points), expected)


def test_a_cone_wider_than_half_a_turn_is_not_taken_as_convex():
    """fov 5 rad (> pi) about forward: the notch behind (+-(2*pi - 5)/2 about pi) is unwatched,
    so reversing with the sensor at the centre of a square sees the width only where the notch
    has passed (hand geometry: the notch edges leave the apex at +-0.64 rad about pi)."""
    a = 0.3
    m = mount(0.0, 0.0, 0.0, 5.0, 3.0)  # inside a padded footprint, at base_link
    # reverse: cross-section at x = -(a + d); the notch is |angle - pi| < (2*pi - 5)/2 = 0.6416,
    # i.e. |y| < (a + d)*tan(0.6416): never covers the middle, so never watched
    assert full_width_from_m([m], box(a, a, a), PI) is None
    # forward: the cone is everything but the notch; cross-sections ahead are all inside,
    # out to the corners' range sqrt(R^2 - a^2) - a
    assert full_width_stretches([m], box(a, a, a), 0.0) == \
        [(0.0, pytest.approx(math.sqrt(9.0 - a * a) - a, abs=1e-9))]


# ------------------------------------------------------------------ turning in place


@pytest.mark.parametrize('front, rear, half, inner', [
    (0.5, 0.5, 0.3, 0.3),
    (0.8, 0.3, 0.31, 0.3),
    (0.4, 0.6, 0.5, 0.4),
])
def test_turn_annulus_of_a_rectangle_is_nearest_edge_and_farthest_corner(front, rear, half,
                                                                          inner):
    """Inscribed about base_link: the nearest edge; circumscribed: the farthest corner."""
    got = turn_annulus_m(box(front, rear, half))
    assert got == (pytest.approx(inner), pytest.approx(math.hypot(max(front, rear), half)))


def test_turn_annulus_of_a_footprint_beside_base_link_starts_at_zero():
    """base_link outside the outline: the whole disc out to the farthest vertex is swept."""
    footprint = Footprint.from_flat([0.2, 0.1, 0.6, 0.1, 0.6, -0.1, 0.2, -0.1])
    assert turn_annulus_m(footprint) == (0.0, pytest.approx(math.hypot(0.6, 0.1)))


def watched_half_angle(mount_x: float, outer: float, fov: float) -> float:
    """A sensor on the +x axis at distance a facing forward: the ray from base_link at phi
    meets its cone from rho = a*tan(b)/(tan(b)*cos(phi) - |sin(phi)|) on (b = fov/2; the line
    |y| = (x - a)*tan(b)). That is inside the ring while rho < outer, i.e.
    sin(b - |phi|) > (a/outer)*sin(b) (multiply by cos(b)): |phi| < b - asin(a*sin(b)/outer)."""
    b = fov / 2
    return b - math.asin(mount_x * math.sin(b) / outer)


@pytest.mark.parametrize('fov', [0.3, 0.4, 0.8, 1.2])
def test_square_with_one_forward_sensor_leaves_all_but_a_thin_forward_sector_unwatched(fov):
    """Square of half side a, sensor mid front edge: watched |phi| < b - asin(sin(b)/sqrt(2))
    (outer radius a*sqrt(2)); one unwatched sector across the rear."""
    a = 0.3
    edge = watched_half_angle(a, a * math.sqrt(2), fov)
    got = unwatched_turn_sectors([mount(a, 0.0, 0.0, fov, 4.0)], box(a, a, a))
    assert got == [(pytest.approx(edge, abs=1e-9), pytest.approx(2 * PI - edge, abs=1e-9))]


def test_rectangle_with_front_and_rear_sensors_leaves_both_sides_unwatched():
    """Sensors mid front and mid rear edge of the test robot (1.0 m x 0.6 m): the sides from
    the forward sector's edge to the rear sector's edge are unwatched, mirrored."""
    hx, hy, fov = 0.5, 0.3, 0.4
    outer = math.hypot(hx, hy)
    edge = watched_half_angle(hx, outer, fov)
    mounts = [mount(hx, 0.0, 0.0, fov, 4.0), mount(-hx, 0.0, PI, fov, 4.0)]
    got = unwatched_turn_sectors(mounts, box(hx, hx, hy))
    assert got == [(pytest.approx(-PI + edge, abs=1e-9), pytest.approx(-edge, abs=1e-9)),
                   (pytest.approx(edge, abs=1e-9), pytest.approx(PI - edge, abs=1e-9))]


def test_a_cone_over_the_body_only_watches_nothing_of_the_ring():
    """A cone from base_link reaching 0.45 m crosses the ring (0.3 to 0.58 m) only over the
    body (x <= 0.45 < 0.5): it looks at the robot, not at anything turning could hit."""
    got = unwatched_turn_sectors([mount(0.0, 0.0, 0.0, 0.4, 0.45)], box(0.5, 0.5, 0.3))
    assert got == [(-PI, PI)]


def test_every_sector_is_a_direction_no_cone_reaches_in_the_ring():
    """Brute force: rays in the middle of each sector never meet a cone within the ring outside
    the footprint; rays between sectors do (demo-like cart with eight sensors)."""
    config = make_config({
        'sensor_names': ['f', 'fl', 'fr', 'r'],
        'sensors.f.x': 0.5, 'sensors.fl.x': 0.5, 'sensors.fl.y': 0.25, 'sensors.fl.yaw': 0.9,
        'sensors.fr.x': 0.5, 'sensors.fr.y': -0.25, 'sensors.fr.yaw': -0.9,
        'sensors.r.x': -0.5, 'sensors.r.yaw': PI, 'sonar.field_of_view': 0.6})
    mounts = [mount(s.x_m, s.y_m, s.yaw_rad, s.field_of_view_rad, s.max_range_m)
              for s in config.sensors]
    footprint = config.robot.footprint
    inner, outer = turn_annulus_m(footprint)
    sectors = unwatched_turn_sectors(mounts, footprint)
    assert sectors

    def meets(phi: float) -> bool:
        rho = np.linspace(inner, outer, 4001)
        points = rho[:, np.newaxis] * [math.cos(phi), math.sin(phi)]
        off_body = (np.abs(points[:, 0]) > 0.5) | (np.abs(points[:, 1]) > 0.3)  # the box
        cones = np.zeros(len(points), dtype=bool)
        for m in mounts:
            cones |= in_sector(points, m)
        return bool((cones & off_body).any())

    for a, b in sectors:
        for phi in np.linspace(a, b, 9)[1:-1]:
            assert not meets(float(phi))
    starts = [a for a, _ in sectors] + [sectors[0][0] + 2 * PI]
    for (_, b), a in zip(sectors, starts[1:]):
        if a - b > 2e-3:
            assert meets((a + b) / 2)


# ------------------------------------------------------------------ sentences for the log


def test_lines_for_the_test_robot_give_the_closed_form_distances_and_the_sides():
    """Test robot (1.0 x 0.6 m, fov 0.4 rad, range 4 m, sensors mid front and rear): the full
    width from 0.3/tan(0.2) to sqrt(16 - 0.09) m both ways; the turning ring's sides unwatched."""
    lines = unwatched_lines(make_config())
    start, end = 0.3 / math.tan(0.2), math.sqrt(16 - 0.09)
    forward = next(li for li in lines if li.startswith('forward:'))
    reverse = next(li for li in lines if li.startswith('reverse:'))
    for line, edge in ((forward, 'front edge'), (reverse, 'rear edge')):
        assert f'from {start:.2f} m to {end:.2f} m' in line
        assert f'the {start:.2f} m nearest' in line and edge in line
        assert 'the limit cannot account for it' in line
    turning = next(li for li in lines if li.startswith('turning in place'))
    edge = math.degrees(watched_half_angle(0.5, math.hypot(0.5, 0.3), 0.4))
    assert f'{edge:.0f} to {180 - edge:.0f} deg' in turning
    assert 'between 0.30 m and 0.58 m' in turning


def test_lines_name_a_driven_heading_no_sensor_covers_and_its_fallback_speed():
    """Rear sensor turned to 1.2 rad (its cone stays beside the body, as test_plots has it):
    reverse is uncovered, and the fallback speed is said."""
    lines = unwatched_lines(make_config({'sensors.behind.yaw': 1.2,
                                         'limits.fallback_speed': 0.2}))
    reverse = next(li for li in lines if li.startswith('reverse:'))
    assert 'no sensor covers this heading at all' in reverse and '0.20 m/s' in reverse


def test_lines_for_a_holonomic_base_cover_every_45_degrees():
    """Holonomic: eight headings, the sideways ones uncovered, and the uncovered span listed."""
    config = make_config({'robot.holonomic': True})
    assert len(watch_headings(config)) == 8
    lines = unwatched_lines(config)
    assert any(li.startswith('no sensor covers travel headings') for li in lines)
    for name in ('forward', 'reverse', 'left', 'right', 'heading 45 deg', 'heading -135 deg'):
        assert any(li.startswith(f'{name}:') for li in lines), name
    left = next(li for li in lines if li.startswith('left:'))
    assert 'no sensor covers this heading at all' in left


def test_lines_say_when_the_full_width_is_watched_from_the_edge_on():
    """A very wide cone set well inside the outline sees the full width right at the edge."""
    config = make_config({'sensor_names': ['ahead'], 'sensors.ahead.x': 0.0,
                          'sonar.field_of_view': 3.0})
    forward = next(li for li in unwatched_lines(config) if li.startswith('forward:'))
    assert 'nothing watches' not in forward and 'from 0.00 m' in forward


def test_lines_say_when_no_cone_looks_into_the_turning_ring_at_all():
    """Cones that end inside the body: the whole ring is unwatched, said in words."""
    config = make_config({'sensors.ahead.x': 0.0, 'sensors.behind.x': 0.0,
                          'sensors.ahead.max_range': 0.25, 'sensors.behind.max_range': 0.25,
                          'sonar.min_range': 0.05})
    turning = next(li for li in unwatched_lines(config) if li.startswith('turning in place'))
    assert 'no cone looks into' in turning and 'in any direction' in turning
