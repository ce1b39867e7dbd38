"""The simulator's world: doors, moving boxes, walkers, air zones and the sim facade."""
from __future__ import annotations

import importlib
import math

from matplotlib.path import Path as MplPath
import numpy as np
import pytest
from transforms3d.euler import euler2mat

from sonar_guard.sim.world import (
    AirZone,
    Disc,
    MovingBox,
    SwingingDoor,
    Walker,
    Wall,
    World,
    interpolate_waypoints,
)


def test_sim_facade_exports_sorted_existing_names():
    """sonar_guard.sim has a sorted __all__ whose names all exist (style.md facades)."""
    sim = importlib.import_module('sonar_guard.sim')
    assert list(sim.__all__) == sorted(sim.__all__)
    assert [n for n in sim.__all__ if not hasattr(sim, n)] == []


class TestSwingingDoor:
    """A door leaf swings linearly between its closed and open angles."""

    door = SwingingDoor(hinge=(2.0, 1.0), length=0.9, closed_angle=0.0,
                        open_angle=-math.pi / 2, t_open_start=4.0, t_open_end=6.0)

    @pytest.mark.parametrize(('t', 'angle'), [
        (0.0, 0.0), (4.0, 0.0), (5.0, -math.pi / 4), (5.5, -3 * math.pi / 8), (6.0, -math.pi / 2),
        (99.0, -math.pi / 2),
    ])
    def test_leaf_is_at_the_linearly_interpolated_angle(self, t, angle):
        """The leaf runs from the hinge to hinge + L (cos a, sin a) at a = numpy.interp(t)."""
        (wall,) = self.door.at(t)
        # numpy.interp: linear between (t_open_start, closed) and (t_open_end, open), held outside
        expected_angle = np.interp(t, [4.0, 6.0], [0.0, -math.pi / 2])
        assert expected_angle == pytest.approx(angle)
        assert wall.a == (2.0, 1.0)
        # closed form: tip = hinge + L (cos a, sin a)
        assert wall.b == pytest.approx((2.0 + 0.9 * math.cos(angle), 1.0 + 0.9 * math.sin(angle)))
        assert math.dist(wall.a, wall.b) == pytest.approx(0.9)
        assert wall.name == 'door' and wall.smooth is False

    def test_end_before_start_is_refused(self):
        """A swing that ends before it starts raises ValueError naming t_open_end."""
        with pytest.raises(ValueError, match='t_open_end'):
            SwingingDoor((0.0, 0.0), 1.0, 0.0, 1.0, 5.0, 4.0)


class TestMovingBox:
    """A box follows its waypoints (or a function) and shows four walls."""

    box = MovingBox(waypoints=[(1.0, 0.0, 0.0), (3.0, 4.0, 2.0), (5.0, 4.0, -2.0)],
                    size=(0.8, 0.4), yaw=0.3, name='trolley')

    @pytest.mark.parametrize('t', [-1.0, 1.0, 1.7, 3.0, 4.2, 5.0, 9.0])
    def test_centre_interpolates_like_numpy(self, t):
        """The centre is numpy.interp of the waypoints, held before and after them."""
        ts, xs, ys = [1.0, 3.0, 5.0], [0.0, 4.0, 4.0], [0.0, 2.0, -2.0]
        # numpy.interp holds the end values outside the range, as the box must
        assert self.box.centre(t) == pytest.approx((np.interp(t, ts, xs), np.interp(t, ts, ys)))

    def test_walls_are_the_rotated_rectangle(self):
        """Corners are centre + R(yaw) (+-L/2, +-W/2); R from transforms3d."""
        walls = self.box.at(2.0)
        assert len(walls) == 4 and all(w.name == 'trolley' for w in walls)
        centre = np.array(self.box.centre(2.0))
        rot = euler2mat(0.0, 0.0, 0.3)[:2, :2]  # transforms3d rotation about z
        local = np.array([[0.4, -0.2], [0.4, 0.2], [-0.4, 0.2], [-0.4, -0.2]])
        expected = centre + local @ rot.T
        got = np.array([w.a for w in walls])
        np.testing.assert_allclose(got, expected, atol=1e-12)
        # the four walls close the outline
        for i, w in enumerate(walls):
            assert w.b == walls[(i + 1) % 4].a

    def test_centre_may_be_a_function_of_time(self):
        """centre_at as a callable gives the centre directly."""
        box = MovingBox(centre_at=lambda t: (t, 2.0 * t), size=(1.0, 1.0))
        assert box.centre(1.5) == (1.5, 3.0)

    def test_centre_at_also_takes_waypoints(self):
        """centre_at given waypoints behaves as waypoints do."""
        box = MovingBox([(0.0, 0.0, 0.0), (2.0, 2.0, 0.0)])
        assert box.centre(1.0) == pytest.approx((1.0, 0.0))

    @pytest.mark.parametrize('kwargs', [{}, {'centre_at': lambda t: (0.0, 0.0),
                                              'waypoints': [(0.0, 0.0, 0.0)]}])
    def test_exactly_one_way_of_giving_the_centre(self, kwargs):
        """Neither or both of centre_at and waypoints raise ValueError."""
        with pytest.raises(ValueError, match='exactly one'):
            MovingBox(**kwargs)

    def test_waypoint_times_must_increase(self):
        """Waypoints out of time order are refused."""
        with pytest.raises(ValueError, match='increase'):
            MovingBox(waypoints=[(1.0, 0.0, 0.0), (1.0, 1.0, 0.0)])


class TestWalker:
    """A walker is one disc moving through its waypoints."""

    def test_walker_disc_follows_its_waypoints(self):
        """Centre = numpy.interp of the waypoints; default radius 0.18 m, name 'person'."""
        walker = Walker([(0.0, 1.0, 1.0), (2.0, 3.0, 0.0)])
        for t in (-1.0, 0.0, 0.5, 1.0, 2.0, 3.0):
            (disc,) = walker.at(t)
            assert isinstance(disc, Disc)
            # numpy.interp
            assert disc.centre == pytest.approx(
                (np.interp(t, [0.0, 2.0], [1.0, 3.0]), np.interp(t, [0.0, 2.0], [1.0, 0.0])))
            assert disc.radius == 0.18 and disc.name == 'person'

    def test_single_waypoint_stands_still(self):
        """One waypoint: the position holds at every time."""
        assert interpolate_waypoints([(5.0, 1.0, 2.0)], 0.0) == (1.0, 2.0)
        assert interpolate_waypoints([(5.0, 1.0, 2.0)], 9.0) == (1.0, 2.0)


class TestWorld:
    """Shapes at a time, and the air temperature at a point."""

    dock = AirZone([(0.0, 0.0), (4.0, 0.0), (4.0, 3.0), (2.0, 5.0), (0.0, 3.0)], 2.0)
    world = World(walls=[Wall((0.0, -1.0), (10.0, -1.0))],
                  movers=[Walker([(0.0, 1.0, 0.0)])],
                  air=[dock, AirZone([(-10.0, -10.0), (10.0, -10.0), (10.0, 10.0)], 30.0)],
                  default_air_c=21.0)

    def test_shapes_are_the_static_ones_then_the_movers(self):
        """shapes_at lists static shapes first, then each mover's shapes at that time."""
        shapes = self.world.shapes_at(3.0)
        assert shapes[0] == Wall((0.0, -1.0), (10.0, -1.0))
        assert isinstance(shapes[1], Disc) and len(shapes) == 2

    @pytest.mark.parametrize(('x', 'y', 'temp_c'), [
        (1.0, 1.0, 2.0),    # inside the dock
        (2.0, 4.5, 2.0),    # in the dock's roof triangle
        (3.5, 4.5, 21.0),   # outside both zones (above the second zone's diagonal)
        (9.0, -5.0, 30.0),  # inside only the second zone
        (-20.0, 0.0, 21.0),  # far away: the default
    ])
    def test_air_temperature_is_the_first_zone_holding_the_point(self, x, y, temp_c):
        """First zone containing the point gives its temperature, else the default."""
        assert self.world.air_temperature(x, y) == temp_c

    def test_zone_containment_agrees_with_matplotlib(self):
        """AirZone.contains agrees with matplotlib.path.Path.contains_points on random points."""
        rng = np.random.default_rng(3)
        pts = rng.uniform(-1.0, 6.0, size=(2000, 2))
        # matplotlib (outside library) point-in-polygon
        expected = MplPath(np.array(self.dock.polygon)).contains_points(pts)
        got = np.array([self.dock.contains(x, y) for x, y in pts])
        assert (got == expected).mean() == 1.0


@pytest.mark.parametrize(('make', 'name'), [
    (lambda: Wall((0.0, 0.0), (0.0, 0.0)), 'distinct'),
    (lambda: Wall((0.0, 0.0), (1.0, math.nan)), 'b.y'),
    (lambda: Wall((0.0, 0.0), (1.0, 0.0), absorbs_db=-1.0), 'absorbs_db'),
    (lambda: Disc((0.0, 0.0), 0.0), 'radius'),
    (lambda: AirZone([(0.0, 0.0), (1.0, 0.0)], 5.0), 'polygon'),
    (lambda: Walker([]), 'waypoints'),
])
def test_bad_shapes_raise_value_error_naming_the_field(make, name):
    """Bad geometry raises ValueError whose message names what is wrong."""
    with pytest.raises(ValueError, match=name):
        make()


def test_wall_keeps_end_points_as_tuples():
    """Lists given as end points become hashable tuples."""
    wall = Wall([0, 0], [1, 2])
    assert wall.a == (0.0, 0.0) and wall.b == (1.0, 2.0)
    assert hash(wall) == hash(Wall((0.0, 0.0), (1.0, 2.0)))
