"""How far the robot moves before its footprint comes within the margin of a point."""
from __future__ import annotations

import math

from hypothesis import given, settings
from hypothesis import strategies as st
import numpy as np
import pytest

from sonar_guard.core.sweep import contact_path_length, contact_turn_angle, distance_to_polygon

# A made-up 1.0 m x 0.6 m box about base_link (inputs only).
BOX = np.array([[0.5, 0.3], [0.5, -0.3], [-0.5, -0.3], [-0.5, 0.3]])
MARGIN = 0.1


def pose_on_arc(k, s):
    """Pose after path length s on an arc of curvature k from the origin facing +x:
    (sin(ks)/k, (1 - cos(ks))/k, ks) (reference.md sec. 7, textbook kinematics)."""
    if k == 0:
        return s, 0.0, 0.0
    return math.sin(k * s) / k, (1 - math.cos(k * s)) / k, k * s


def world_to_robot(point, pose):
    """Express a world point in the robot frame at ``pose`` (plane rotation, numpy)."""
    x, y, th = pose
    c, s = math.cos(th), math.sin(th)
    dx, dy = point[0] - x, point[1] - y
    return np.array([c * dx + s * dy, -s * dx + c * dy])


def gap(point, pose):
    """Distance from a world point to the box at ``pose`` (plane geometry)."""
    return float(distance_to_polygon(world_to_robot(point, pose)[None], BOX)[0])


def test_straight_ahead_the_front_edge_reaches_the_margin_after_the_gap_less_margin():
    """A point 2 m ahead of the front edge, driving forward: s = 2 - margin (plane geometry)."""
    s = contact_path_length(np.array([[2.5, 0.1]]), BOX, MARGIN, 0.0, 0.0)[0]
    assert s == pytest.approx(2.0 - MARGIN, abs=1e-12)


def test_reversing_the_rear_edge_leads_and_points_ahead_are_never_reached():
    """Reverse (heading pi): a point behind is reached by the rear edge; one ahead never."""
    s = contact_path_length(np.array([[-1.5, 0.0], [1.5, 0.0]]), BOX, MARGIN, math.pi, 0.0)
    assert s[0] == pytest.approx(1.0 - MARGIN, abs=1e-12) and math.isinf(s[1])


def test_a_point_beside_the_path_is_reached_only_when_within_margin_of_the_side():
    """Driving forward past a point 0.35 m left of centre (0.05 m beside the box, inside the
    margin): reached at the front corner's end circle; 0.45 m left (outside): never."""
    near, far = contact_path_length(np.array([[2.0, 0.35], [2.0, 0.45]]), BOX, MARGIN,
                                    0.0, 0.0)
    # end circle of radius m about the corner (0.5, 0.3): dx = sqrt(m^2 - 0.05^2)
    assert near == pytest.approx(2.0 - 0.5 - math.sqrt(MARGIN**2 - 0.05**2), abs=1e-12)
    assert math.isinf(far)


def test_within_margin_now_is_zero():
    """Inside the box or within the margin of it: contact at once."""
    s = contact_path_length(np.array([[0.0, 0.0], [0.55, 0.0]]), BOX, MARGIN, 0.0, 0.3)
    assert list(s) == [0.0, 0.0]


def test_turning_in_place_a_corner_sweeps_its_circle():
    """A point on the circle through the corners (radius hypot(0.5, 0.3)), 0.4 rad beyond the
    front-right corner: turning right it meets that corner after 0.4 rad; turning left it
    goes the long way round to the rear-right corner (plane geometry)."""
    radius = math.hypot(0.5, 0.3)
    corner = math.atan2(0.3, 0.5)
    # a point at angle -corner - 0.4 on the circle of radius `radius`, turning right
    # (direction -1) moves counter-clockwise in the robot frame toward the front-right corner
    ahead = -corner - 0.4
    p = radius * np.array([[math.cos(ahead), math.sin(ahead)]])
    phi = contact_turn_angle(p, BOX, 0.0, -1)[0]
    assert phi == pytest.approx(0.4, abs=1e-9)
    # the other way it goes clockwise from angle -corner - 0.4 to the rear-right corner at
    # -(pi - corner)
    assert contact_turn_angle(p, BOX, 0.0, +1)[0] == pytest.approx(
        math.pi - 2 * corner - 0.4, abs=1e-9)


@settings(max_examples=60, deadline=None, derandomize=True)
@given(px=st.floats(-3.0, 3.0), py=st.floats(-3.0, 3.0),
       k=st.one_of(st.just(0.0), st.floats(-4.0, 4.0)), reverse=st.booleans())
def test_contact_matches_a_fine_walk_along_the_arc(px, py, k, reverse):
    """Walk the arc of reference.md sec. 7 in 2 mm steps: no pose before the closed form's
    path length comes within the margin, and the pose at it is exactly at the margin."""
    point = np.array([px, py])
    if distance_to_polygon(point[None], BOX)[0] <= MARGIN + 0.01:
        return
    heading = math.pi if reverse else 0.0
    s = contact_path_length(point[None], BOX, MARGIN, heading, k)[0]
    end = min(s, 4.0) if math.isfinite(s) else 4.0
    if k != 0:
        end = min(end, 2 * math.pi / abs(k))
    step = 0.002
    for t in np.arange(0.0, end - step, step):
        assert gap(point, path_pose(k, t, reverse)) > MARGIN - 1e-9, (t, s)
    if math.isfinite(s) and s < 4.0:
        assert gap(point, path_pose(k, s, reverse)) == pytest.approx(MARGIN, abs=1e-6)


def path_pose(k, s, reverse):
    """Pose after path length s driving forward, or in reverse (velocity -x, yaw rate k per
    metre): integrating dx/ds = -cos(th), dy/ds = -sin(th), dth/ds = k gives
    (-sin(ks)/k, -(1 - cos(ks))/k, ks) (textbook kinematics, as reference.md sec. 7)."""
    x, y, th = pose_on_arc(k, s)
    return (-x, -y, th) if reverse else (x, y, th)
