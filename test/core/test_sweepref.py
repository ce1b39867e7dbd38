"""Tests of the brute-force sweep reference (test/core/sweepref.py) against closed forms.

The reference judges the engine's speed limit, so it is checked here against things outside
the project: reference.md sec. 5 (stopping distance and its table) and sec. 7 (arc pose),
plane geometry worked by hand, and the circle a rigid body's point describes about a fixed
centre of rotation (textbook kinematics).
"""
from __future__ import annotations

import math

from core.sweepref import (
    Beam,
    arc_points,
    arc_pose_closed_form,
    circumradius,
    clearance,
    compose,
    fastest_point_factor,
    largest_safe_speed,
    largest_safe_turn_rate,
    max_safe_speed_closed_form,
    nearest_echo,
    path_grid,
    path_pose,
    path_poses,
    polygon_depth,
    polygon_distance,
    reading_points,
    sector_points,
    sonar_range,
    stopping_distance,
    turn_poses,
)
import numpy as np
import pytest

# A 1.0 m x 0.6 m box centred on base_link (inputs only), counter-clockwise
BOX = np.array([[0.5, 0.3], [-0.5, 0.3], [-0.5, -0.3], [0.5, -0.3]])
HALF_LENGTH, HALF_WIDTH = 0.5, 0.3


def wall(x0: float, y0: float, x1: float, y1: float, spacing: float = 0.005) -> np.ndarray:
    """Return points every ``spacing`` m along the segment (x0, y0)-(x1, y1), ends included."""
    count = max(1, math.ceil(math.hypot(x1 - x0, y1 - y0) / spacing))
    t = np.linspace(0.0, 1.0, count + 1)[:, None]
    return np.array([x0, y0]) + t * np.array([x1 - x0, y1 - y0])


# reference.md sec. 5 tables
STOPPING_ROWS = [(1.1, 0.18, 1.3, 0.663385), (0.6, 0.12, 0.5, 0.432000),
                 (2.0, 0.35, 2.2, 1.609091), (0.45, 0.2, 0.3, 0.427500)]
SPEED_ROWS = [(2.2, 0.3, 0.7, 1.557512), (0.8, 0.15, 1.0, 1.123774),
              (4.2, 0.25, 1.8, 3.464397), (0.35, 0.1, 0.4, 0.490660),
              (1.25, 0.0, 0.8, 1.414214)]


class TestStoppingPhysics:
    """The closed forms the reference stops with reproduce reference.md sec. 5."""

    @pytest.mark.parametrize('speed, latency, decel, expected', STOPPING_ROWS)
    def test_stopping_distance_matches_the_reference_table(self, speed, latency, decel,
                                                           expected):
        """s(v, T, a) = v T + v^2 / (2a) gives the table's distances."""
        assert stopping_distance(speed, latency, decel) == pytest.approx(expected, abs=1e-6)

    @pytest.mark.parametrize('room, latency, decel, expected', SPEED_ROWS)
    def test_closed_form_speed_matches_the_reference_table_and_round_trips(
            self, room, latency, decel, expected):
        """v_max(d, T, a) gives the table's speeds and s(v_max(d)) == d to 1e-9 (sec. 5)."""
        speed = max_safe_speed_closed_form(room, latency, decel)
        assert speed == pytest.approx(expected, abs=1e-6)
        assert stopping_distance(speed, latency, decel) == pytest.approx(room, abs=1e-9)

    def test_closed_form_is_zero_without_room_and_unbounded_without_obstacle(self):
        """d <= 0 means stand still; an infinite free distance bounds nothing (sec. 5)."""
        assert max_safe_speed_closed_form(0.0, 0.2, 1.0) == 0.0
        assert max_safe_speed_closed_form(-0.3, 0.2, 1.0) == 0.0
        assert max_safe_speed_closed_form(math.inf, 0.2, 1.0) == math.inf


class TestPaths:
    """Numerically integrated poses follow the textbook kinematics of reference.md sec. 7."""

    @pytest.mark.parametrize('curvature', [5.0, 2.0, 0.3, 0.0, -0.3, -2.0, -5.0])
    @pytest.mark.parametrize('length', [0.01, 0.4, 1.0, 2.5])
    def test_forward_arc_matches_the_closed_form(self, curvature, length):
        """After s m, base_link is at (sin(ks)/k, (1 - cos(ks))/k, ks) (reference.md sec. 7)."""
        pose = path_pose(length, 0.0, curvature)
        expected = arc_pose_closed_form(length, curvature)
        # midpoint rule in 1 mm steps: error per step ds^3 k^2 / 24, summed < 1e-6 m
        assert pose == pytest.approx(expected, abs=1e-6)

    @pytest.mark.parametrize('heading', [math.pi, math.pi / 2, -0.7, 2.5])
    @pytest.mark.parametrize('curvature', [3.0, 0.0, -1.2])
    def test_a_heading_rotates_the_forward_path(self, heading, curvature):
        """Moving along heading h is the forward path rotated by h, the same yaw (textbook
        kinematics: the body velocity turns with the body)."""
        x, y, yaw = arc_pose_closed_form(1.3, curvature)
        c, s = math.cos(heading), math.sin(heading)
        expected = (c * x - s * y, s * x + c * y, yaw)
        assert path_pose(1.3, heading, curvature) == pytest.approx(expected, abs=1e-6)

    def test_path_grid_includes_both_ends_with_small_steps(self):
        """The grid starts at 0, ends at the length, and never steps further than asked."""
        grid = path_grid(1.0, 0.003)
        assert grid[0] == 0.0 and grid[-1] == 1.0
        assert np.diff(grid).max() <= 0.003 + 1e-15

    def test_turn_in_place_keeps_base_link_and_turns_by_direction(self):
        """Turning in place: base_link stays, the yaw grows counter-clockwise for +1."""
        poses = turn_poses(np.array([0.0, 0.5]), -1)
        assert poses.tolist() == [[0.0, 0.0, 0.0], [0.0, 0.0, -0.5]]

    def test_fastest_point_factor_is_the_speed_of_the_far_corner(self):
        """A point p of a body moving at v with yaw rate w moves at |v + w x p| (rigid body):
        on an arc of curvature 2 1/m the front-right corner (0.5, -0.3) moves at
        |(1 + 2*0.3, 2*0.5)| per metre of base_link travel."""
        assert fastest_point_factor(BOX, 0.0, 2.0) == pytest.approx(math.hypot(1.6, 1.0))
        assert fastest_point_factor(BOX, 0.0, 0.0) == pytest.approx(1.0)

    def test_compose_chains_two_poses(self):
        """compose(a, b) is b seen from the frame a: a quarter turn maps +x onto +y."""
        assert compose((1.0, 2.0, math.pi / 2), np.array([[1.0, 0.0, 0.1]]))[0] == \
            pytest.approx([1.0, 3.0, math.pi / 2 + 0.1])


class TestDistances:
    """Point-to-footprint distances against plane geometry worked by hand."""

    @pytest.mark.parametrize('point, expected', [
        ((1.0, 0.0), 0.5),                        # ahead of the front edge
        ((0.0, -0.7), 0.4),                       # beside the right edge
        ((0.8, 0.7), math.hypot(0.3, 0.4)),       # diagonally off a corner: to the corner
        ((0.1, 0.1), 0.0),                        # inside
        ((0.5, 0.0), 0.0),                        # on the outline
    ])
    def test_distance_to_the_box(self, point, expected):
        """The distance is to the nearest point of the filled polygon."""
        got = polygon_distance(np.array([point]), BOX)[0]
        assert got == pytest.approx(expected, abs=1e-12)

    @pytest.mark.parametrize('point, expected', [
        ((0.1, 0.1), 0.2),    # nearest to the left edge y = 0.3
        ((0.45, 0.0), 0.05),  # nearest to the front edge x = 0.5
        ((1.0, 0.0), 0.0),    # outside
    ])
    def test_depth_inside_the_box(self, point, expected):
        """The depth of an inside point is its distance to the nearest edge."""
        got = polygon_depth(np.array([point]), BOX)[0]
        assert got == pytest.approx(expected, abs=1e-12)

    def test_distance_to_an_l_shape_sees_into_the_notch(self):
        """An L-shape (box without its front-left quarter): a point in the notch is nearest to
        the inner corner, not to the convex hull."""
        ell = np.array([[0.5, 0.0], [0.0, 0.0], [0.0, 0.3], [-0.5, 0.3], [-0.5, -0.3],
                        [0.5, -0.3]])
        assert polygon_distance(np.array([[0.2, 0.2]]), ell)[0] == pytest.approx(0.2)
        assert polygon_distance(np.array([[0.2, -0.1]]), ell)[0] == 0.0

    def test_clearance_of_a_straight_sweep_is_the_gap_left_at_its_end(self):
        """A point 1 m ahead of the front edge: after 0.7 m of travel 0.3 m are left."""
        poses = path_poses(path_grid(0.7, 0.002), 0.0, 0.0)
        assert clearance(poses, BOX, np.array([[1.5, 0.1]])) == pytest.approx(0.3, abs=1e-9)


class TestStraightLines:
    """A wall square to the travel direction gives the closed form of reference.md sec. 5."""

    @pytest.mark.parametrize('room, latency, decel, expected', SPEED_ROWS)
    def test_straight_approach_to_a_wall_ahead(self, room, latency, decel, expected):
        """Wall at front edge + margin + d: the largest safe speed is the table's v_max(d)."""
        margin = 0.1
        x = HALF_LENGTH + margin + room
        points = wall(x, -2.0, x, 2.0)
        got = largest_safe_speed(BOX, [(points, latency)], 0.0, 0.0, margin=margin,
                                 decel=decel, turn_decel=1.0, max_speed=4.0)
        assert got == pytest.approx(expected, abs=2e-6)

    def test_reversing_towards_a_wall_behind(self):
        """Reversing (heading pi) towards a wall 1.25 m behind the rear edge beyond the margin,
        no latency: sqrt(2 a d) = sqrt(2) (reference.md sec. 5 table, last row)."""
        x = -(HALF_LENGTH + 0.1 + 1.25)
        got = largest_safe_speed(BOX, [(wall(x, -2.0, x, 2.0), 0.0)], math.pi, 0.0,
                                 margin=0.1, decel=0.8, turn_decel=1.0, max_speed=4.0)
        assert got == pytest.approx(math.sqrt(2.0), abs=2e-6)

    def test_holonomic_sideways_towards_a_wall_on_the_left(self):
        """Moving along +y (heading pi/2) to a wall 0.8 m left of the left edge beyond the
        margin: v_max(0.8, 0.15, 1.0) = 1.123774 (reference.md sec. 5)."""
        y = HALF_WIDTH + 0.1 + 0.8
        got = largest_safe_speed(BOX, [(wall(-2.0, y, 2.0, y), 0.15)], math.pi / 2, 0.0,
                                 margin=0.1, decel=1.0, turn_decel=1.0, max_speed=4.0)
        assert got == pytest.approx(1.123774, abs=2e-6)

    def test_the_smallest_bound_of_several_point_sets_wins(self):
        """Two sets with their own budgets: the limit is the smaller closed form."""
        near = wall(1.6, -1.0, 1.6, 1.0)   # 1.0 m of room, short budget
        far = wall(2.0, -1.0, 2.0, 1.0)    # 1.4 m of room, long budget
        got = largest_safe_speed(BOX, [(near, 0.1), (far, 1.5)], 0.0, 0.0, margin=0.1,
                                 decel=1.0, turn_decel=1.0, max_speed=4.0)
        expected = min(max_safe_speed_closed_form(1.0, 0.1, 1.0),
                       max_safe_speed_closed_form(1.4, 1.5, 1.0))
        assert got == pytest.approx(expected, abs=2e-6)

    def test_capped_at_max_speed_and_zero_when_already_inside_the_margin(self):
        """Nothing in reach gives the cap; a point within the margin now gives 0."""
        far = wall(9.0, -1.0, 9.0, 1.0)
        assert largest_safe_speed(BOX, [(far, 0.2)], 0.0, 0.0, margin=0.1, decel=1.0,
                                  turn_decel=1.0, max_speed=1.2) == 1.2
        close = np.array([[0.55, 0.0]])
        assert largest_safe_speed(BOX, [(close, 0.2)], math.pi, 0.0, margin=0.1, decel=1.0,
                                  turn_decel=1.0, max_speed=1.2) == 0.0

    def test_a_point_beside_the_path_does_not_limit(self):
        """A point 0.15 m right of the right edge's line, margin 0.1: never reached."""
        side = np.array([[3.0, -(HALF_WIDTH + 0.15)]])
        assert largest_safe_speed(BOX, [(side, 0.2)], 0.0, 0.0, margin=0.1, decel=1.0,
                                  turn_decel=1.0, max_speed=2.0) == 2.0


class TestArcs:
    """On an arc every body point circles the centre of rotation (0, 1/k) (reference.md sec. 7),
    so the outermost corner sweeps the largest circle about it (textbook kinematics)."""

    # box from x = -0.2 to 0.8 so that the front-right corner is the unique farthest point
    # from a left-turn centre
    SHIFTED = BOX + np.array([0.3, 0.0])

    @pytest.mark.parametrize('curvature', [0.5, 1.5, 4.0])
    def test_a_point_on_the_outer_corner_circle_is_grazed_where_the_corner_gets_there(
            self, curvature):
        """A point at the corner's radius + margin about the centre: the clearance over the
        arc stays above the margin until the corner has turned onto it, then equals it."""
        centre = np.array([0.0, 1.0 / curvature])
        corner = np.array([0.8, -0.3])
        radius = float(np.hypot(*(corner - centre)))
        corner_angle = math.atan2(*(corner - centre)[::-1])
        margin = 0.1
        turned = 0.6  # rad about the centre
        point = centre + (radius + margin) * np.array([math.cos(corner_angle + turned),
                                                       math.sin(corner_angle + turned)])
        at = turned / curvature  # path length of base_link when the corner reaches the point
        before = path_poses(path_grid(at * 0.97, 0.0005), 0.0, curvature)
        through = path_poses(path_grid(at * 1.2, 0.0005), 0.0, curvature)
        assert clearance(before, self.SHIFTED, point[None, :]) > margin + 1e-5
        assert clearance(through, self.SHIFTED, point[None, :]) == pytest.approx(margin,
                                                                                  abs=1e-6)

    @pytest.mark.parametrize('curvature', [0.5, 1.5, 4.0, -2.0])
    def test_arc_speed_matches_the_closed_form_at_the_corner_contact(self, curvature):
        """A point 1 mm inside that circle is reached when the corner, on its circle of radius
        R, is m from the point at radius rho: the law of cosines gives the angle still to go,
        cos(gap) = (rho^2 + R^2 - m^2) / (2 rho R); then v_max(path length, T, a) with the
        deceleration min(decel, turn_decel / |k|) (reference.md sec. 5 and 7)."""
        sign = math.copysign(1.0, curvature)
        centre = np.array([0.0, 1.0 / curvature])
        corner = np.array([0.8, -0.3 * sign])  # the outer front corner of the turn
        radius = float(np.hypot(*(corner - centre)))
        corner_angle = math.atan2(*(corner - centre)[::-1])
        margin, turned = 0.1, 0.6
        rho = radius + margin - 0.001
        angle = corner_angle + sign * turned
        point = centre + rho * np.array([math.cos(angle), math.sin(angle)])
        gap = math.acos((rho ** 2 + radius ** 2 - margin ** 2) / (2 * rho * radius))
        decel, turn_decel, latency = 1.0, 1.8, 0.25
        got = largest_safe_speed(self.SHIFTED, [(point[None, :], latency)], 0.0, curvature,
                                 margin=margin, decel=decel, turn_decel=turn_decel,
                                 max_speed=5.0)
        a = min(decel, turn_decel / abs(curvature))
        expected = max_safe_speed_closed_form((turned - gap) / abs(curvature), latency, a)
        assert got == pytest.approx(expected, rel=1e-5)

    def test_a_tight_arc_allows_far_less_than_the_straight_line(self):
        """A wall 1 m ahead and 0.4 m right: straight travel passes it, a tight right turn
        runs into it."""
        points = wall(1.0, -0.4, 3.0, -0.4, 0.005)
        kw = dict(margin=0.05, decel=1.0, turn_decel=2.0, max_speed=2.0)
        straight = largest_safe_speed(BOX, [(points, 0.2)], 0.0, 0.0, **kw)
        right_turn = largest_safe_speed(BOX, [(points, 0.2)], 0.0, -1.0, **kw)
        assert straight == 2.0
        assert right_turn < 0.5 * straight

    def test_finer_sampling_changes_the_answer_by_little(self):
        """Halving the pose step moves an arc result by far less than a millimetre's worth
        (the reference's own sampling is not what a test measures)."""
        points = arc_points(0.5, 0.1, 0.3, 0.5, 1.3)
        kw = dict(margin=0.1, decel=0.9, turn_decel=1.5, max_speed=3.0)
        coarse = largest_safe_speed(BOX, [(points, 0.3)], 0.0, 1.7, step=0.004, **kw)
        fine = largest_safe_speed(BOX, [(points, 0.3)], 0.0, 1.7, step=0.001, **kw)
        assert coarse >= fine - 1e-9  # fewer samples can only allow more
        assert coarse == pytest.approx(fine, rel=1e-4)


class TestTurningInPlace:
    """Turning about base_link: every point circles it; the corners sweep the circumcircle."""

    @pytest.mark.parametrize('bearing', [0.0, 0.4, 2.0, -1.0])
    def test_a_full_turn_comes_as_close_as_the_circumcircle(self, bearing):
        """A point at radius rho outside the circumcircle of radius hypot(0.5, 0.3) is passed
        at rho - hypot(0.5, 0.3): a corner sweeps that circle (plane geometry)."""
        rho = 0.75
        point = np.array([[rho * math.cos(bearing), rho * math.sin(bearing)]])
        poses = turn_poses(path_grid(2 * math.pi, 0.0005), 1)
        assert circumradius(BOX) == pytest.approx(math.hypot(HALF_LENGTH, HALF_WIDTH))
        assert clearance(poses, BOX, point) == pytest.approx(rho - circumradius(BOX), abs=1e-6)

    def test_turn_rate_is_capped_outside_the_circumcircle_plus_margin(self):
        """A point 1 mm beyond circumradius + margin is never reached; 1 mm inside it, 0.3 rad
        ahead of the front-left corner, it is (the corner's bearing is atan2(0.3, 0.5))."""
        edge = circumradius(BOX) + 0.1
        bearing = math.atan2(HALF_WIDTH, HALF_LENGTH) + 0.3
        kw = dict(margin=0.1, turn_decel=2.0, max_turn_rate=1.5)
        outside = (edge + 0.001) * np.array([[math.cos(bearing), math.sin(bearing)]])
        inside = (edge - 0.001) * np.array([[math.cos(bearing), math.sin(bearing)]])
        assert largest_safe_turn_rate(BOX, [(outside, 0.2)], 1, **kw) == 1.5
        assert largest_safe_turn_rate(BOX, [(inside, 0.2)], 1, **kw) < 1.5

    @pytest.mark.parametrize('direction', [1, -1])
    def test_turn_rate_matches_the_closed_form_of_the_first_contact(self, direction):
        """A point at radius 0.55 m, bearing pi/2 + 0.3, enters the box grown by the margin
        0.1 through its left edge line y = 0.4 where it lies at bearing asin(0.4 / 0.55)
        (counter-clockwise turn: the point's bearing in base_link falls) or pi - that
        (clockwise); then v_max(angle, T, alpha) (reference.md sec. 5)."""
        rho, bearing, margin = 0.55, math.pi / 2 + 0.3, 0.1
        point = np.array([[rho * math.cos(bearing), rho * math.sin(bearing)]])
        entry = math.asin((HALF_WIDTH + margin) / rho)
        # the entry lies on the straight part of that line: |x| = rho cos(entry) <= 0.5
        assert rho * math.cos(entry) <= HALF_LENGTH
        angle = bearing - entry if direction == 1 else (math.pi - entry) - bearing
        got = largest_safe_turn_rate(BOX, [(point, 0.2)], direction, margin=margin,
                                     turn_decel=2.0, max_turn_rate=10.0)
        assert got == pytest.approx(max_safe_speed_closed_form(angle, 0.2, 2.0), rel=1e-5)


class TestSonarModel:
    """The test world's sonar: nearest obstacle point inside the cone, REP 117 specials."""

    BEAM = Beam(0.5, 0.0, 0.0, 0.4, 0.15, 3.0)

    @pytest.mark.parametrize('points, expected', [
        ([[1.5, 0.0]], 1.0),                        # on the axis, 1 m from the mount
        ([[1.5, 0.0], [1.2, 0.1]], math.hypot(0.7, 0.1)),  # the nearer of two
        ([[1.5, 0.5]], math.inf),                   # 0.46 rad off axis: outside the 0.2 rad
        ([[4.0, 0.0]], math.inf),                   # beyond max range: no echo
        ([[0.6, 0.0]], -math.inf),                  # nearer than min range: blind
    ])
    def test_reading_at_the_start_pose(self, points, expected):
        """Plane geometry of a cone at (0.5, 0) looking along +x with fov 0.4 rad."""
        assert sonar_range(self.BEAM, (0.0, 0.0, 0.0), np.array(points)) == \
            pytest.approx(expected)

    def test_the_cone_turns_and_moves_with_the_robot(self):
        """Robot at (1, 1) facing +y: the mount is at (1, 1.5) and looks along +y."""
        points = np.array([[1.0, 2.5], [2.0, 1.0]])
        assert sonar_range(self.BEAM, (1.0, 1.0, math.pi / 2), points) == pytest.approx(1.0)
        assert nearest_echo(self.BEAM, (1.0, 1.0, math.pi / 2), points) == 0

    def test_an_echo_gives_its_arc_and_no_echo_the_max_range_arc(self):
        """An echo r: points at r from the mount spanning exactly yaw +/- fov/2; +inf: the arc
        at max range; a NaN: nothing."""
        arc = reading_points(self.BEAM, 1.2)
        rel = arc - np.array([0.5, 0.0])
        assert np.hypot(rel[:, 0], rel[:, 1]) == pytest.approx(1.2)
        bearings = np.arctan2(rel[:, 1], rel[:, 0])
        assert (bearings.min(), bearings.max()) == pytest.approx((-0.2, 0.2))
        assert np.hypot(*np.diff(arc, axis=0).T).max() <= 0.005 + 1e-12
        far = reading_points(self.BEAM, math.inf) - np.array([0.5, 0.0])
        assert np.hypot(far[:, 0], far[:, 1]) == pytest.approx(3.0)
        assert len(reading_points(self.BEAM, math.nan)) == 0

    def test_blind_gives_the_whole_sector_to_min_range_with_its_apex(self):
        """-inf fills the sector of radius min_range, apex at the mount."""
        sector = reading_points(self.BEAM, -math.inf)
        rel = sector - np.array([0.5, 0.0])
        radii = np.hypot(rel[:, 0], rel[:, 1])
        assert radii.min() == 0.0 and radii.max() == pytest.approx(0.15)
        assert len(sector) == len(sector_points(0.5, 0.0, 0.0, 0.4, 0.15))
