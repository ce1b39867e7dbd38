"""Tests for sonar_guard.core.geometry: mounts, footprints, beams and heading coverage.

Check values come from outside the module: hand geometry worked out in the comments, REP 103
conventions, the geometry_msgs/Quaternion field order, and transforms3d's own quaternion code.
"""
from __future__ import annotations

import math

from hypothesis import given, settings
from hypothesis import strategies as st
import numpy as np
import pytest
from transforms3d import quaternions  # type: ignore[import-untyped]

from sonar_guard.core import geometry
from sonar_guard.core.geometry import (
    Footprint,
    Mount,
    beam_axis,
    coverage,
    covers_heading,
    edge_offset_m,
    free_distance_m,
    heading_index,
    heading_name,
    mount_quaternion,
    mount_transform,
    polygon_problems,
    uniform_headings,
)

NAN = math.nan
INF = math.inf
PI = math.pi

# 0.6 m x 0.4 m rectangle centred on base_link: x in [-0.3, 0.3], y in [-0.2, 0.2].
RECTANGLE = [0.3, 0.2, -0.3, 0.2, -0.3, -0.2, 0.3, -0.2]
# L-shape: a 2 m x 2 m square with the 1 m x 1 m corner at x > 1, y > 1 cut away (the notch).
L_SHAPE = [0.0, 0.0, 2.0, 0.0, 2.0, 1.0, 1.0, 1.0, 1.0, 2.0, 0.0, 2.0]


def _mount(x: float = 0.0, y: float = 0.0, yaw: float = 0.0, fov: float = 0.4,
           max_range: float = 4.0, z: float = 0.1) -> Mount:
    """Build a mount with short keyword names for tables."""
    return Mount(x_m=x, y_m=y, z_m=z, yaw_rad=yaw, field_of_view_rad=fov, max_range_m=max_range)


def _distance_to_outline(points: np.ndarray, p: np.ndarray) -> float:
    """Return the distance from p to the nearest edge, by the textbook point-segment formula."""
    best = INF
    for i in range(len(points)):
        a, b = points[i], points[(i + 1) % len(points)]
        ab = b - a
        t = min(max(float(np.dot(p - a, ab) / np.dot(ab, ab)), 0.0), 1.0)
        best = min(best, float(np.linalg.norm(p - (a + t * ab))))
    return best


@st.composite
def convex_polygons(draw: st.DrawFn) -> np.ndarray:
    """Draw a strictly convex polygon: 3-10 points at increasing angles on a rotated ellipse."""
    count = draw(st.integers(3, 10))
    # Bounded hypothesis floats never draw NaN or infinities.
    centre = np.array([draw(st.floats(-3.0, 3.0)) for _ in range(2)])
    semi_axes = np.array([draw(st.floats(0.1, 2.0)) for _ in range(2)])
    tilt = draw(st.floats(0.0, 2 * PI))
    gaps = np.array(draw(st.lists(st.floats(0.2, 1.0), min_size=count, max_size=count)),
                    dtype=float)
    angles = draw(st.floats(0.0, 2 * PI)) + 2 * PI * np.cumsum(gaps) / gaps.sum()
    local = np.column_stack((semi_axes[0] * np.cos(angles), semi_axes[1] * np.sin(angles)))
    rotation = np.array([[math.cos(tilt), -math.sin(tilt)], [math.sin(tilt), math.cos(tilt)]])
    polygon: np.ndarray = centre + local @ rotation.T
    return polygon


# --- mounts ----------------------------------------------------------------------------------


class TestMount:
    """Mount poses, transforms, quaternions and beam axes."""

    @pytest.mark.parametrize('yaw', [0.0, PI / 2, -PI / 2, PI, 0.3, -2.5, 4.0])
    def test_transform_matches_hand_built_yaw_rotation(self, yaw: float) -> None:
        """Build base_link <- sensor as rotation about +z by yaw plus the mount position."""
        mount = _mount(x=0.25, y=-0.1, yaw=yaw, z=0.12)
        c, s = math.cos(yaw), math.sin(yaw)
        expected = np.array([[c, -s, 0.0, 0.25],
                             [s, c, 0.0, -0.1],
                             [0.0, 0.0, 1.0, 0.12],
                             [0.0, 0.0, 0.0, 1.0]])
        # REP 103 (yaw about +z, right-handed): hand-written cos/sin matrix
        np.testing.assert_allclose(mount_transform(mount), expected, atol=1e-15)

    @pytest.mark.parametrize(('mount', 'sensor_point', 'base_point'), [
        # Left-facing sonar at (0, 0.2, 0.1): 1 m along its beam is 1 m further left (+y).
        (_mount(y=0.2, yaw=PI / 2), [1.0, 0.0, 0.0], [0.0, 1.2, 0.1]),
        # Its sensor +y (left of the beam) points backwards (-x) in base_link.
        (_mount(y=0.2, yaw=PI / 2), [0.0, 1.0, 0.0], [-1.0, 0.2, 0.1]),
        # Rear-facing sonar at (-0.3, 0, 0.1): 2 m ahead of it is 2 m behind the robot.
        (_mount(x=-0.3, yaw=PI), [2.0, 0.0, 0.0], [-2.3, 0.0, 0.1]),
        # Right-facing sonar: beam along -y; sensor +z stays up.
        (_mount(yaw=-PI / 2), [0.5, 0.0, 1.0], [0.0, -0.5, 1.1]),
    ])
    def test_transform_moves_sensor_points_into_base_link(self, mount: Mount,
                                                          sensor_point: list[float],
                                                          base_point: list[float]) -> None:
        """Map points given in the sensor frame to base_link with a numpy matrix product."""
        moved = mount_transform(mount) @ np.array([*sensor_point, 1.0])
        # REP 103 (x forward, y left, z up): positions worked out by hand in the table
        np.testing.assert_allclose(moved, [*base_point, 1.0], atol=1e-12)

    @pytest.mark.parametrize('yaw', [0.0, PI / 2, -PI / 2, PI, -PI, 0.3, -2.5, 1e-9])
    def test_quaternion_round_trips_through_transforms3d(self, yaw: float) -> None:
        """Turn the (x, y, z, w) quaternion back into the transform's rotation matrix."""
        mount = _mount(yaw=yaw)
        x, y, z, w = mount_quaternion(mount)
        # geometry_msgs/Quaternion field order x, y, z, w; transforms3d quat2mat takes w, x, y, z
        np.testing.assert_allclose(quaternions.quat2mat([w, x, y, z]),
                                   mount_transform(mount)[:3, :3], atol=1e-15)

    @pytest.mark.parametrize('yaw', [0.0, PI / 2, -PI / 2, PI, -PI, 0.3, -2.5])
    def test_quaternion_is_the_closed_form_yaw_quaternion(self, yaw: float) -> None:
        """Give (0, 0, sin(yaw/2), cos(yaw/2)) for a pure yaw."""
        expected = (0.0, 0.0, math.sin(yaw / 2), math.cos(yaw / 2))
        # REP 103 (yaw about +z, right-handed)
        # geometry_msgs/Quaternion field order x, y, z, w
        assert mount_quaternion(_mount(yaw=yaw)) == pytest.approx(expected, abs=1e-15)

    @pytest.mark.parametrize(('yaw', 'axis'), [
        (0.0, (1.0, 0.0)),
        (PI / 2, (0.0, 1.0)),
        (PI, (-1.0, 0.0)),
        (-PI / 2, (0.0, -1.0)),
        (PI / 4, (math.sqrt(0.5), math.sqrt(0.5))),
    ])
    def test_beam_axis_points_along_yaw(self, yaw: float, axis: tuple[float, float]) -> None:
        """Return the unit vector at the yaw angle counter-clockwise from +x."""
        # sensor_msgs/Range: 0 angle is the sensor's x-axis; REP 103 yaw counter-clockwise
        np.testing.assert_allclose(beam_axis(_mount(yaw=yaw)), axis, atol=1e-15)

    def test_fields_are_stored_as_floats(self) -> None:
        """Convert integer fields to floats so reprs and comparisons are uniform."""
        mount = Mount(x_m=1, y_m=0, z_m=0, yaw_rad=0, field_of_view_rad=0, max_range_m=4)
        assert all(isinstance(getattr(mount, f), float) for f in Mount.__dataclass_fields__)
        assert mount == _mount(x=1.0, fov=0.0, z=0.0)

    @pytest.mark.parametrize(('changes', 'message'), [
        ({'x_m': NAN}, 'Mount.x_m must be finite'),
        ({'yaw_rad': INF}, 'Mount.yaw_rad must be finite'),
        ({'z_m': 'high'}, 'Mount.z_m must be a number'),
        ({'field_of_view_rad': -0.1}, r'Mount.field_of_view_rad must be in \[0, 2\*pi\)'),
        ({'field_of_view_rad': 2 * PI}, r'Mount.field_of_view_rad must be in \[0, 2\*pi\)'),
        ({'max_range_m': 0.0}, 'Mount.max_range_m must be > 0 m'),
        ({'max_range_m': INF}, 'Mount.max_range_m must be finite'),
    ])
    def test_bad_fields_raise_value_error_naming_the_field(self, changes: dict[str, object],
                                                           message: str) -> None:
        """Reject NaN, infinities, non-numbers and out-of-range beams at construction."""
        fields: dict[str, object] = {'x_m': 0.0, 'y_m': 0.0, 'z_m': 0.0, 'yaw_rad': 0.0,
                                     'field_of_view_rad': 0.4, 'max_range_m': 4.0}
        fields.update(changes)
        with pytest.raises(ValueError, match=message):
            Mount(**fields)  # type: ignore[arg-type]

    def test_every_bad_field_is_reported_at_once(self) -> None:
        """List all bad fields in one error, not just the first."""
        with pytest.raises(ValueError, match='x_m.*max_range_m'):
            _mount(x=NAN, max_range=-1.0)


# --- footprints ------------------------------------------------------------------------------


class TestFootprint:
    """Footprint construction, point containment and ray exit distances."""

    def test_points_are_a_read_only_copy(self) -> None:
        """Keep an (N, 2) float array that neither the caller nor anyone else can change."""
        values = list(RECTANGLE)
        footprint = Footprint.from_flat(values)
        values[0] = 99.0
        assert footprint.points.shape == (4, 2)
        assert footprint.points[0, 0] == 0.3
        with pytest.raises(ValueError, match='read-only'):
            footprint.points[0, 0] = 1.0

    def test_repr_lists_points_as_pairs(self) -> None:
        """Print the outline on one line as (x, y) pairs in metres."""
        assert repr(Footprint.from_flat([0, 0, 1, 0, 0, 1])) == (
            'Footprint(points=[(0.0, 0.0), (1.0, 0.0), (0.0, 1.0)])')

    def test_equal_points_make_equal_hashable_footprints(self) -> None:
        """Compare by points so footprints can be dict keys and compared in configs."""
        first, second = Footprint.from_flat(RECTANGLE), Footprint.from_flat(RECTANGLE)
        assert first == second
        assert hash(first) == hash(second)
        assert first != Footprint.from_flat(L_SHAPE)

    @pytest.mark.parametrize('points', [np.zeros((3, 2)), np.arange(8.0), np.zeros((2, 3))])
    def test_constructor_rejects_unusable_arrays(self, points: np.ndarray) -> None:
        """Refuse arrays that are not (N, 2) or not a polygon."""
        with pytest.raises(ValueError):
            Footprint(points)

    @pytest.mark.parametrize(('x', 'y', 'inside'), [
        (0.0, 0.0, True),
        (0.29, -0.19, True),
        (0.3, 0.0, True),        # on the front edge
        (0.3, 0.2, True),        # the front-left corner
        (0.0, -0.2, True),       # on the right edge
        (0.3000001, 0.0, False),  # 0.1 um past the front edge, beyond the 1 nm tolerance
        (-0.35, 0.0, False),
        (0.0, 0.25, False),
    ])
    def test_contains_rectangle_inside_and_boundary(self, x: float, y: float,
                                                    inside: bool) -> None:
        """Count points inside or on the rectangle's edges as contained."""
        # hand geometry: inside iff |x| <= 0.3 and |y| <= 0.2
        assert Footprint.from_flat(RECTANGLE).contains(x, y) is inside

    @pytest.mark.parametrize(('x', 'y', 'inside'), [
        (0.5, 0.5, True),
        (1.5, 0.5, True),    # lower arm
        (0.5, 1.5, True),    # upper arm
        (1.5, 1.5, False),   # the notch
        (1.0, 1.5, True),    # on the notch's left wall
        (1.5, 1.0, True),    # on the notch's floor
        (1.0, 1.0, True),    # the reflex corner
        (1.01, 1.01, False),
        (2.5, 0.5, False),
    ])
    def test_contains_l_shape_handles_the_notch(self, x: float, y: float, inside: bool) -> None:
        """Leave the cut-away corner of the L outside and its walls on the outline."""
        # hand geometry: inside iff in [0, 2] x [0, 2] and not (x > 1 and y > 1)
        assert Footprint.from_flat(L_SHAPE).contains(x, y) is inside

    @pytest.mark.parametrize(('origin', 'direction', 'distance'), [
        ((0.0, 0.0), (1.0, 0.0), 0.3),                  # centre to front edge x = 0.3
        ((0.0, 0.0), (0.0, 1.0), 0.2),                  # centre to left edge y = 0.2
        ((0.0, 0.0), (-1.0, 0.0), 0.3),                 # centre to rear edge x = -0.3
        ((0.0, 0.0), (2.0, 0.0), 0.3),                  # length of direction does not matter
        # 45 deg: reaches y = 0.2 at x = 0.2 (< 0.3), so leaves through the left edge at
        # distance 0.2 / sin(45 deg) = 0.2 * sqrt(2).
        ((0.0, 0.0), (1.0, 1.0), 0.2 * math.sqrt(2)),
        ((0.3, 0.0), (-1.0, 0.0), 0.6),                 # from the front edge across the body
        ((0.3, 0.0), (1.0, 0.0), 0.0),                  # on the front edge facing out
        ((-1.0, 0.0), (1.0, 0.0), 1.3),                 # enters at x = -0.3, leaves at 0.3
        ((-1.0, 0.2), (1.0, 0.0), 1.3),                 # runs along the left edge to its end
    ])
    def test_exit_distance_rectangle(self, origin: tuple[float, float],
                                     direction: tuple[float, float], distance: float) -> None:
        """Measure to where the ray finally leaves the rectangle."""
        # hand geometry: distances from the edge lines x = +-0.3, y = +-0.2 (see each row)
        assert Footprint.from_flat(RECTANGLE).exit_distance(origin, direction) == (
            pytest.approx(distance, abs=1e-12))

    @pytest.mark.parametrize(('origin', 'direction', 'distance'), [
        ((0.5, 0.5), (1.0, 0.0), 1.5),          # along the lower arm to x = 2
        ((0.5, 1.5), (1.0, 0.0), 0.5),          # the upper arm ends at x = 1
        ((1.5, 0.5), (0.0, 1.0), 0.5),          # up into the notch floor y = 1
        ((0.5, 0.5), (0.0, 1.0), 1.5),          # up the left column to y = 2
        ((1.5, 1.5), (-1.0, 0.0), 1.5),         # from the notch through the upper arm to x = 0
        # From the notch towards (0, 0): passes the reflex corner (1, 1) and leaves at the
        # origin corner, sqrt(1.5^2 + 1.5^2) = 1.5 * sqrt(2) away.
        ((1.5, 1.5), (-1.0, -1.0), 1.5 * math.sqrt(2)),
        ((0.5, 3.0), (0.0, -1.0), 3.0),         # from above, through the whole height
        ((-1.0, 0.0), (1.0, 0.0), 3.0),         # along the bottom edge to (2, 0)
    ])
    def test_exit_distance_l_shape_takes_the_last_exit(self, origin: tuple[float, float],
                                                       direction: tuple[float, float],
                                                       distance: float) -> None:
        """Measure to the last crossing even when the ray leaves and re-enters the L."""
        # hand geometry: coordinates of the last edge crossed along each ray (see each row)
        assert Footprint.from_flat(L_SHAPE).exit_distance(origin, direction) == (
            pytest.approx(distance, abs=1e-12))

    @pytest.mark.parametrize(('origin', 'direction'), [
        ((1.0, 0.0), (1.0, 0.0)),      # in front of the robot, pointing further forward
        ((1.0, 1.0), (-1.0, 0.0)),     # passes the robot at y = 1, well clear of y = 0.2
        ((0.0, -1.0), (0.3, -1.0)),    # below the robot, pointing away
    ])
    def test_exit_distance_is_zero_for_a_ray_from_outside_that_never_enters(
            self, origin: tuple[float, float], direction: tuple[float, float]) -> None:
        """Give 0.0 when the origin is outside and the ray misses the footprint."""
        # hand geometry: each ray stays outside |x| <= 0.3, |y| <= 0.2
        assert Footprint.from_flat(RECTANGLE).exit_distance(origin, direction) == 0.0

    @settings(deadline=None)
    @given(polygon=convex_polygons(),
           weights=st.lists(st.floats(0.05, 1.0), min_size=10, max_size=10),
           angle=st.floats(0.0, 2 * PI))
    def test_exit_point_lies_on_the_outline_of_convex_polygons(
            self, polygon: np.ndarray, weights: list[float], angle: float) -> None:
        """Land exactly on an edge when leaving a convex polygon from an inside point."""
        footprint = Footprint(polygon)
        w = np.array(weights[:len(polygon)])
        origin = w @ polygon / w.sum()  # a convex combination with positive weights: inside
        direction = np.array([math.cos(angle), math.sin(angle)])
        distance = footprint.exit_distance(origin, direction)
        exit_point = origin + distance * direction
        assert distance > 0.0
        # textbook point-to-segment distance, computed in this test
        assert _distance_to_outline(polygon, exit_point) < 1e-9
        # convexity: a step of 1 um further is outside for good
        assert not footprint.contains(*(exit_point + 1e-6 * direction))

    @pytest.mark.parametrize(('origin', 'direction', 'message'), [
        ((NAN, 0.0), (1.0, 0.0), 'origin_xy must be finite'),
        ((0.0, 0.0), (INF, 0.0), 'direction_xy must be finite'),
        ((0.0, 0.0), (0.0, 0.0), 'direction_xy must not be the zero vector'),
        ((0.0, 0.0, 0.0), (1.0, 0.0), 'origin_xy must be two numbers'),
    ])
    def test_exit_distance_rejects_bad_rays(self, origin: tuple[float, ...],
                                            direction: tuple[float, float],
                                            message: str) -> None:
        """Raise ValueError naming the argument for NaN, infinite, zero or misshapen input."""
        with pytest.raises(ValueError, match=message):
            Footprint.from_flat(RECTANGLE).exit_distance(origin, direction)


# --- polygon checks --------------------------------------------------------------------------


class TestPolygonProblems:
    """Every reason a flat footprint list is unusable, and none for good ones."""

    @pytest.mark.parametrize(('values', 'reason'), [
        # bow-tie (0,0) (1,1) (1,0) (0,1): diagonal edges 0 and 2 cross at (0.5, 0.5)
        ([0, 0, 1, 1, 1, 0, 0, 1],
         "'robot.footprint' must be a simple polygon: edges 0 and 2 cross"),
        ([0, 0, 1, 0, 1], 'must have an even number of values (x, y pairs): got 5'),
        ([0, 0, 1, 1], 'must have at least 3 points: got 2'),
        ([0, 0, 1, NAN, 0, 1], 'must hold finite numbers: nan at index 3'),
        ([0, 0, 1, 0, INF, 1], 'must hold finite numbers: inf at index 4'),
        ([0, 0, 1, 0, 2, 0], 'must enclose an area: all points lie on one line'),
        ([0, 0, 1, 0, 1, 0, 1, 1], 'repeats a point: points 1 and 2 are both (1, 0)'),
        ([0, 0, 1, 0, 1, 1, 0, 0], 'must not repeat point 0 at the end (point 3)'),
        ([[0, 0], [1, 0], [1, 1]], 'must be a flat list'),
        # (0,0) (2,0) (2,2) (1,0) (0,2): point 3 = (1, 0) sits on edge 0 from (0,0) to (2,0)
        ([0, 0, 2, 0, 2, 2, 1, 0, 0, 2], 'edges 0 and 3 touch'),
        # spike: edge 2 runs (2,1)->(3,1) and edge 3 comes straight back (3,1)->(1,1)
        ([0, 0, 2, 0, 2, 1, 3, 1, 1, 1, 0, 1], 'edges 2 and 3 overlap'),
    ])
    def test_names_the_reason(self, values: list[float], reason: str) -> None:
        """Report the specific reason each broken list fails, naming the parameter."""
        # hand geometry / counting for each row (see the row comments)
        problems = polygon_problems(values)
        assert any(reason in problem for problem in problems), problems
        assert all(problem.startswith("'robot.footprint' ") for problem in problems)

    @pytest.mark.parametrize('values', [
        RECTANGLE,
        RECTANGLE[::-1],                      # clockwise (and x, y swapped): still simple
        L_SHAPE,
        [0, 0, 1, 0, 0, 1],                   # triangle
        [0.35, 0.25, 0.35, -0.25, -0.25, -0.25, -0.25, 0.25],  # the design.md example
        (0.3, 0.2, -0.3, 0.2, -0.3, -0.2),    # a tuple is a sequence too
    ])
    def test_accepts_simple_polygons(self, values: list[float]) -> None:
        """Return an empty list for simple polygons in either winding."""
        assert polygon_problems(values) == []

    def test_lists_every_reason_at_once(self) -> None:
        """Collect odd length, too few points and a NaN in one pass."""
        problems = polygon_problems([0, 0, 1, NAN, 2])
        assert len(problems) == 3, problems

    def test_uses_the_given_parameter_name(self) -> None:
        """Name the key the caller reads the footprint from."""
        assert polygon_problems([0, 0], name='robots.a.footprint') == [
            "'robots.a.footprint' must have at least 3 points: got 1"]

    def test_from_flat_raises_value_error_naming_the_problem(self) -> None:
        """Refuse a bow-tie with the reason in the message."""
        with pytest.raises(ValueError, match='edges 0 and 2 cross'):
            Footprint.from_flat([0, 0, 1, 1, 1, 0, 0, 1])


# --- edge offset and free distance -----------------------------------------------------------


class TestEdgeOffsetAndFreeDistance:
    """How much of each beam is still over the robot, and what range is left beyond it."""

    @pytest.mark.parametrize(('mount', 'offset'), [
        (_mount(), 0.3),                           # centre, facing forward: half of 0.6 m
        (_mount(x=0.3), 0.0),                      # on the front edge, facing out
        (_mount(yaw=PI / 2), 0.2),                 # centre, facing left: half of 0.4 m
        (_mount(yaw=PI / 4), 0.2 * math.sqrt(2)),  # 45 deg: leaves the left edge at x = 0.2
        (_mount(x=0.3, yaw=PI), 0.6),              # front edge facing back: across the body
        (_mount(x=0.5), 0.0),                      # ahead of the robot, facing away
    ])
    def test_edge_offset_on_a_rectangle(self, mount: Mount, offset: float) -> None:
        """Measure along the beam axis from the mount to the 0.6 m x 0.4 m outline."""
        # hand geometry: edge lines x = +-0.3, y = +-0.2 (see each row)
        assert edge_offset_m(mount, Footprint.from_flat(RECTANGLE)) == (
            pytest.approx(offset, abs=1e-12))

    @pytest.mark.parametrize(('mount', 'reading', 'free'), [
        (_mount(), 2.0, 1.7),            # 2.0 m seen from the centre minus 0.3 m of robot
        (_mount(), 0.25, 0.0),           # an echo from inside the outline: floored
        (_mount(x=0.3), 1.0, 1.0),       # on the edge: nothing to subtract
        (_mount(), INF, INF),            # REP 117 +inf: no return within range
        (_mount(), -INF, 0.0),           # REP 117 -inf: too close to measure
    ])
    def test_free_distance_subtracts_the_edge_offset(self, mount: Mount, reading: float,
                                                     free: float) -> None:
        """Return range minus edge offset, floored at zero, keeping +inf."""
        # hand geometry: offsets from the table above; REP 117 meaning of +-inf
        assert free_distance_m(reading, mount, Footprint.from_flat(RECTANGLE)) == (
            pytest.approx(free, abs=1e-12))


# --- heading coverage ------------------------------------------------------------------------


class TestCoversHeading:
    """Whether a beam meets the corridor swept ahead of the footprint."""

    footprint = Footprint.from_flat(RECTANGLE)

    @pytest.mark.parametrize(('mount', 'heading', 'covered'), [
        (_mount(x=0.3), 0.0, True),             # front sensor, moving forward
        (_mount(x=0.3), PI, False),             # front sensor, reversing
        (_mount(x=-0.3, yaw=PI), PI, True),     # rear sensor, reversing
        (_mount(x=-0.3, yaw=PI), -PI, True),    # same heading written as -pi
        (_mount(x=-0.3, yaw=PI), 0.0, False),   # rear sensor, moving forward
        (_mount(), 0.0, True),                  # centre sensor inside a padded footprint
        (_mount(y=0.2, yaw=PI / 2), PI / 2, True),  # left sensor, moving left
    ])
    def test_sensors_cover_the_way_they_face(self, mount: Mount, heading: float,
                                             covered: bool) -> None:
        """Cover the heading a sensor faces and not the opposite one.

        Moving forward the corridor is x > 0.3, |y| <= 0.2; reversing it is x < -0.3,
        |y| <= 0.2; moving left it is y > 0.2, |x| <= 0.3. A 0.4 rad cone from the front edge
        stays in x >= 0.3, from the rear edge in x <= -0.3.
        """
        # hand geometry: corridors in the docstring
        assert covers_heading(mount, self.footprint, heading) is covered

    def test_side_sensor_with_a_narrow_cone_misses_forward(self) -> None:
        """Miss forward: a left-facing cone from the left edge never reaches |y| <= 0.2.

        Sensor at (0, 0.2) facing +y with a 0.4 rad cone: every beam direction has angle in
        [pi/2 - 0.2, pi/2 + 0.2], so sin > 0 and every point beyond the mount has y > 0.2,
        while the forward corridor needs |y| <= 0.2.
        """
        # hand geometry: see docstring
        assert not covers_heading(_mount(y=0.2, yaw=PI / 2), self.footprint, 0.0)

    @pytest.mark.parametrize(('fov', 'covered'), [(0.4, False), (0.7, False), (0.85, True),
                                                  (1.2, True)])
    def test_recessed_corner_sensor_covers_forward_only_with_a_wide_cone(self, fov: float,
                                                                         covered: bool) -> None:
        """Cover forward once the cone's right edge passes the front-left corner.

        Sensor at (0.28, 0.15), 2 cm behind the front edge and 5 cm in from the left edge (a
        padded footprint), facing left (+y). The ray to the corner (0.3, 0.2) has angle
        atan2(0.05, 0.02) = 1.1903 rad. A ray at a smaller angle crosses the front edge x = 0.3
        below y = 0.2, straight into the forward corridor (x > 0.3, |y| <= 0.2); a ray at a
        larger angle leaves through the left edge into y > 0.2, where the corridor never is.
        So the cone covers forward iff pi/2 - fov/2 < 1.1903, i.e. fov > 0.761 rad. At
        fov = 0.85 the stretch of corridor along the edge ray is only 6 mm long.
        """
        mount = _mount(x=0.28, y=0.15, yaw=PI / 2, fov=fov)
        # hand geometry: threshold fov > 2 * (pi/2 - atan2(0.05, 0.02)) = 0.761 rad
        assert covers_heading(mount, self.footprint, 0.0) is covered

    def test_short_corridor_stretch_is_found_with_one_sample_per_ray(self) -> None:
        """Find the 6 mm stretch from the corner case even with samples=1 (4 m spacing)."""
        mount = _mount(x=0.28, y=0.15, yaw=PI / 2, fov=0.85)
        # hand geometry: as in the recessed-corner test; only the crossing midpoints can hit it
        assert covers_heading(mount, self.footprint, 0.0, rays=9, samples=1)

    def test_beam_that_ends_inside_the_footprint_covers_nothing(self) -> None:
        """Cover no heading when max range (0.2 m) ends before the edge (0.3 m away)."""
        mount = _mount(max_range=0.2)
        # hand geometry: the whole beam lies in |x| <= 0.2 < 0.3, |y| <= 0.2 * tan(0.2)
        assert not any(covers_heading(mount, self.footprint, h) for h in uniform_headings(8))

    def test_notch_sensor_of_an_l_shape_covers_forward_and_left(self) -> None:
        """Cover forward from the notch: moving +x, the upper arm sweeps through the notch.

        L-shape [0, 2] x [0, 2] without (1, 2] x (1, 2]. Sensor on the notch floor at (1.5, 1)
        facing +y: its beam runs up through the notch (x near 1.5, y > 1). Forward, the upper
        arm (x <= 1, 1 <= y <= 2) sweeps the notch, so those points are in the corridor. Left
        (+y), the lower arm sweeps the notch too. Reversing, the corridor is x < 0: missed.
        """
        footprint = Footprint.from_flat(L_SHAPE)
        mount = _mount(x=1.5, y=1.0, yaw=PI / 2)
        # hand geometry: see docstring
        assert covers_heading(mount, footprint, 0.0)
        assert covers_heading(mount, footprint, PI / 2)
        assert not covers_heading(mount, footprint, PI)

    def test_coverage_table_has_a_row_per_heading_and_a_column_per_mount(self) -> None:
        """Tabulate front, left and rear sensors against the four axes; nobody covers right."""
        mounts = [_mount(x=0.3), _mount(y=0.2, yaw=PI / 2), _mount(x=-0.3, yaw=PI)]
        table = coverage(mounts, self.footprint, uniform_headings(4))
        # hand geometry: corridors as in test_sensors_cover_the_way_they_face; moving right
        # the corridor is y < -0.2, |x| <= 0.3, which none of the three cones reaches.
        expected = np.array([[True, False, False],    # forward
                             [False, True, False],    # left
                             [False, False, True],    # reverse
                             [False, False, False]])  # right
        assert table.dtype == np.bool_
        np.testing.assert_array_equal(table, expected)

    def test_coverage_with_no_mounts_is_an_empty_column_set(self) -> None:
        """Return shape (len(headings), 0) when there are no mounts."""
        assert coverage([], self.footprint, [0.0, PI]).shape == (2, 0)

    @pytest.mark.parametrize(('rays', 'samples'), [(0, 48), (9, 0), (2.5, 48), (True, 48)])
    def test_rejects_bad_sample_counts(self, rays: int, samples: int) -> None:
        """Require integer rays and samples of at least 1."""
        with pytest.raises(ValueError, match='must be an integer >= 1'):
            covers_heading(_mount(), self.footprint, 0.0, rays=rays, samples=samples)


# --- headings --------------------------------------------------------------------------------


class TestHeadings:
    """Evenly spaced headings, nearest-heading lookup and names."""

    @pytest.mark.parametrize(('heading', 'count', 'index'), [
        (-0.01, 8, 0),                # just right of forward wraps to index 0
        (2 * PI - 0.01, 8, 0),        # just short of a full turn: also forward
        (PI, 4, 2),
        (-PI / 2, 4, 3),              # right is the last of four
        (4 * PI + PI / 2, 4, 1),      # two full turns plus left
        (PI / 4 - 0.01, 8, 1),
        (3.0, 1, 0),                  # one heading: always index 0
    ])
    def test_heading_index_picks_the_nearest_and_wraps(self, heading: float, count: int,
                                                       index: int) -> None:
        """Return the index of the nearest of count headings k * 2*pi / count."""
        # hand arithmetic: round(heading / (2*pi / count)) modulo count
        assert heading_index(heading, count) == index

    @given(count=st.integers(1, 64), data=st.data())
    def test_heading_index_inverts_uniform_headings(self, count: int, data: st.DataObject) -> None:
        """Map every uniform heading, nudged by under half a step, back to its own index."""
        k = data.draw(st.integers(0, count - 1))
        nudge = data.draw(st.floats(-0.49, 0.49)) * 2 * PI / count
        assert heading_index(float(uniform_headings(count)[k]) + nudge, count) == k

    @pytest.mark.parametrize(('count', 'expected'), [
        (1, [0.0]),
        (4, [0.0, PI / 2, PI, 3 * PI / 2]),
        (8, [k * PI / 4 for k in range(8)]),
    ])
    def test_uniform_headings_are_evenly_spaced_from_zero(self, count: int,
                                                          expected: list[float]) -> None:
        """Return count headings k * 2*pi / count in [0, 2*pi)."""
        # hand arithmetic: k * 2*pi / count
        np.testing.assert_allclose(uniform_headings(count), expected, atol=1e-15)

    @pytest.mark.parametrize('count', [0, -1, 2.5, NAN, True, '4'])
    def test_counts_must_be_positive_integers(self, count: object) -> None:
        """Raise ValueError for counts that are not integers >= 1."""
        with pytest.raises(ValueError, match='count must be an integer >= 1'):
            uniform_headings(count)  # type: ignore[arg-type]
        with pytest.raises(ValueError, match='count must be an integer >= 1'):
            heading_index(0.0, count)  # type: ignore[arg-type]

    @pytest.mark.parametrize(('heading', 'name'), [
        (0.0, 'forward'),
        (2 * PI, 'forward'),
        (1e-7, 'forward'),            # within 1e-6 rad of an axis
        (PI / 2, 'left'),
        (PI, 'reverse'),
        (-PI, 'reverse'),
        (-PI / 2, 'right'),
        (3 * PI / 2, 'right'),
        (PI / 4, 'heading 45 deg'),
        (-PI / 4, 'heading -45 deg'),
        (7 * PI / 4, 'heading -45 deg'),
        (3 * PI / 4, 'heading 135 deg'),
        (math.radians(22.5), 'heading 22.5 deg'),
        (1e-3, 'heading 0.06 deg'),   # off the axis by more than 1e-6 rad: not 'forward'
    ])
    def test_heading_name(self, heading: float, name: str) -> None:
        """Name the four axes and give other headings in degrees in (-180, 180]."""
        # REP 103: +x forward, +y left, yaw counter-clockwise
        assert heading_name(heading) == name


# --- NaN everywhere --------------------------------------------------------------------------

_RECT = Footprint.from_flat(RECTANGLE)

NAN_CALLS = {
    'Mount': lambda: _mount(yaw=NAN),
    'Footprint.from_flat': lambda: Footprint.from_flat([0, 0, 1, 0, NAN, 1]),
    'Footprint': lambda: Footprint(np.array([[0, 0], [1, 0], [NAN, 1]])),
    'contains': lambda: _RECT.contains(NAN, 0.0),
    'exit_distance origin': lambda: _RECT.exit_distance((0.0, NAN), (1.0, 0.0)),
    'exit_distance direction': lambda: _RECT.exit_distance((0.0, 0.0), (NAN, 0.0)),
    'free_distance_m': lambda: free_distance_m(NAN, _mount(), _RECT),
    'covers_heading': lambda: covers_heading(_mount(), _RECT, NAN),
    'coverage': lambda: coverage([_mount()], _RECT, [0.0, NAN]),
    'heading_index': lambda: heading_index(NAN, 8),
    'uniform_headings': lambda: uniform_headings(NAN),  # type: ignore[arg-type]
    'heading_name': lambda: heading_name(NAN),
}


@pytest.mark.parametrize('call', NAN_CALLS.values(), ids=NAN_CALLS.keys())
def test_every_function_rejects_nan_with_value_error(call: object) -> None:
    """Raise ValueError instead of letting NaN through."""
    with pytest.raises(ValueError):
        call()  # type: ignore[operator]


def test_polygon_problems_reports_nan_instead_of_raising() -> None:
    """Return NaN as a problem: this function's job is to list problems."""
    assert polygon_problems([0, 0, 1, 0, NAN, 1]) == [
        "'robot.footprint' must hold finite numbers: nan at index 4"]


def test_public_names_are_sorted_and_exist() -> None:
    """Keep __all__ sorted and every listed name importable."""
    assert geometry.__all__ == sorted(geometry.__all__)
    assert all(hasattr(geometry, name) for name in geometry.__all__)
