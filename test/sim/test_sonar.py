"""One ping: time of flight, incidence, ring-down, temperature, levels and crosstalk."""
from __future__ import annotations

import math

from CoolProp.CoolProp import PropsSI
import numpy as np
import pytest
from testkit import make_config
from transforms3d.affines import compose
from transforms3d.euler import euler2mat, mat2euler

from sonar_guard.sim.absorption import absorption_db_per_m
from sonar_guard.sim.sonar import SonarPhysics, mount_pose, ping, trace
from sonar_guard.sim.world import AirZone, Disc, Wall, World

QUIET = SonarPhysics(noise_std_m=0.0)  # the model without noise: readings are deterministic
ORIGIN = (-0.5, 0.0, 0.0)  # robot pose that puts the test robot's 'ahead' sensor at (0, 0)


def c_f1(temp_c: float) -> float:
    """Speed of sound, reference.md sec. 1 F1, written out here: 331.3 sqrt(1 + T/273.15)."""
    return 331.3 * math.sqrt(1.0 + temp_c / 273.15)


def ahead(**overrides: float):
    """Return the test robot's forward sensor with some sonar parameters replaced."""
    return make_config({f'sonar.{k}': v for k, v in overrides.items()}).sensor('ahead')


def wall_across(d: float, **kw) -> Wall:
    """Return a long wall across the beam of a sensor at the origin facing +x, d m away."""
    return Wall((d, -50.0), (d, 50.0), **kw)


def tilted_wall(p: float, incidence: float, **kw) -> Wall:
    """Return a wall whose normal is ``incidence`` rad off +x, ``p`` m from the origin."""
    nx, ny = math.cos(incidence), math.sin(incidence)
    foot = (p * nx, p * ny)
    return Wall((foot[0] + 30 * ny, foot[1] - 30 * nx), (foot[0] - 30 * ny, foot[1] + 30 * nx),
                **kw)


def read(world: World, sensor, physics=QUIET, *, t=0.0, pose=ORIGIN, seed=0, **kw) -> float:
    """Return one ping's reading, m."""
    return ping(world, t, pose, sensor, physics, np.random.default_rng(seed), **kw)


class TestTimeOfFlight:
    """A rough wall square to the beam reads its distance."""

    @pytest.mark.parametrize(('temp_c', 'tof_s', 'range_m'), [
        (20.0, 5.000e-3, 0.85804), (25.0, 11.650e-3, 2.01620), (-5.0, 2.400e-3, 0.39390),
        (35.0, 23.300e-3, 4.09947),
    ])
    def test_wall_square_to_the_beam_reads_its_distance(self, temp_c, tof_s, range_m):
        """Reading within the resolution and echo time = the reference row's t."""
        sensor = ahead(air_temperature=temp_c, resolution=0.001, max_range=4.5)
        world = World([wall_across(range_m)], default_air_c=temp_c)
        # time of flight d = c t / 2 (reference.md sec. 2)
        assert read(world, sensor) == pytest.approx(range_m, abs=0.0005 + 1e-9)
        echo = trace(world, 0.0, ORIGIN, sensor, QUIET)
        assert echo is not None and echo.shape == 'wall'
        # time of flight d = c t / 2 (reference.md sec. 2): the echo comes back after t
        assert echo.time_s == pytest.approx(tof_s, abs=2e-5 / c_f1(temp_c) * 2)

    @pytest.mark.parametrize('d', [0.5, 1.234, 2.0, 3.3])
    def test_reading_is_on_the_resolution_grid(self, d):
        """The reported value is a whole number of resolution steps, within half a step of d."""
        sensor = ahead(air_temperature=20.0, resolution=0.01)
        value = read(World([wall_across(d)], default_air_c=20.0), sensor)
        # time of flight d = c t / 2 (reference.md sec. 2), rounded to the sensor's step
        assert value == pytest.approx(d, abs=0.005 + 1e-9)
        assert value / 0.01 == pytest.approx(round(value / 0.01), abs=1e-6)

    def test_robot_pose_and_mount_place_the_sensor(self):
        """Robot at (1, 1) facing +y: the forward sensor (x = 0.5) sits at (1, 1.5) facing +y."""
        sensor = ahead(air_temperature=20.0, resolution=0.001)
        world = World([Wall((-9.0, 4.0), (9.0, 4.0))], default_air_c=20.0)
        # geometry: wall at y = 4, sensor at y = 1.5 -> 2.5 m
        assert read(world, sensor, pose=(1.0, 1.0, math.pi / 2)) == pytest.approx(2.5, abs=5e-4)

    def test_mount_pose_composes_like_transforms3d(self):
        """Sensor pose = robot transform x mount transform (transforms3d affines)."""
        sensor = make_config({'sensors.ahead.y': 0.2, 'sensors.ahead.yaw': 0.4}).sensor('ahead')
        pose = (1.5, -2.0, 2.3)
        robot = compose([pose[0], pose[1], 0.0], euler2mat(0.0, 0.0, pose[2]), [1, 1, 1])
        mount = compose([sensor.x_m, sensor.y_m, 0.0], euler2mat(0.0, 0.0, sensor.yaw_rad),
                        [1, 1, 1])
        both = robot @ mount  # transforms3d: homogeneous 4x4 transforms compose by product
        x, y, yaw = mount_pose(pose, sensor)
        assert (x, y) == pytest.approx((both[0, 3], both[1, 3]))
        expected_yaw = mat2euler(both[:3, :3])[2]
        assert math.remainder(yaw - expected_yaw, 2 * math.pi) == pytest.approx(0.0, abs=1e-12)

    def test_nothing_in_front_reads_infinity(self):
        """An empty world gives no echo: +inf (REP 117)."""
        assert read(World(), ahead()) == math.inf
        assert trace(World(), 0.0, ORIGIN, ahead(), QUIET) is None

    def test_disc_is_hit_at_its_near_side(self):
        """A disc of radius r at distance D on the axis echoes from D - r."""
        sensor = ahead(air_temperature=20.0)
        echo = trace(World([Disc((3.0, 0.0), 0.2, name='post')], default_air_c=20.0), 0.0,
                     ORIGIN, sensor, QUIET)
        # geometry: nearest point of a circle along the line through its centre
        assert echo is not None and echo.shape == 'post'
        assert echo.true_range_m == pytest.approx(2.8) and echo.point == pytest.approx((2.8, 0.0))


class TestIncidence:
    """Smooth surfaces reflect the pulse away at steep incidence; rough ones still echo."""

    def test_smooth_wall_at_70_degrees_is_lost_rough_still_echoes(self):
        """At 70 deg incidence a smooth wall gives +inf while a rough one echoes."""
        sensor = ahead(air_temperature=20.0, resolution=0.001)
        incidence, p = math.radians(70.0), 1.0
        smooth = read(World([tilted_wall(p, incidence, smooth=True)], default_air_c=20.0),
                      sensor)
        rough = read(World([tilted_wall(p, incidence)], default_air_c=20.0), sensor)
        # common practice: specular reflection off smooth surfaces
        assert smooth == math.inf
        # geometry: the cone edge ray (70 deg - fov/2 off the normal) is the shortest, p / cos
        half = sensor.field_of_view_rad / 2
        assert rough == pytest.approx(p / math.cos(incidence - half), abs=5e-4)

    def test_smooth_wall_square_to_the_beam_echoes(self):
        """The same smooth wall at normal incidence echoes: the loss above is the angle's."""
        sensor = ahead(air_temperature=20.0, resolution=0.001)
        world = World([tilted_wall(1.0, 0.0, smooth=True)], default_air_c=20.0)
        # common practice: specular reflection off smooth surfaces; d = c t / 2 (reference.md 2)
        assert read(world, sensor) == pytest.approx(1.0, abs=5e-4)

    @pytest.mark.parametrize(('beyond', 'echoes'), [(-0.01, True), (0.01, False)])
    def test_smooth_wall_echoes_only_within_the_specular_limit(self, beyond, echoes):
        """The ray nearest the normal must be within specular_limit_rad for an echo."""
        sensor = ahead(air_temperature=20.0)
        half = sensor.field_of_view_rad / 2
        incidence = half + QUIET.specular_limit_rad + beyond  # the edge ray is nearest normal
        value = read(World([tilted_wall(1.0, incidence, smooth=True)], default_air_c=20.0),
                     sensor)
        # common practice: specular reflection off smooth surfaces
        assert math.isfinite(value) is echoes

    def test_grazing_rough_wall_beyond_the_diffuse_limit_is_lost(self):
        """Rough surfaces stop echoing past diffuse_limit_rad."""
        sensor = ahead(air_temperature=20.0)
        half = sensor.field_of_view_rad / 2
        incidence = half + QUIET.diffuse_limit_rad + 0.02
        # common practice: grazing incidence sends the scattered pulse away from the sensor
        assert read(World([tilted_wall(0.5, incidence)], default_air_c=20.0), sensor) == math.inf


class TestRingDown:
    """Echoes arriving during the ring-down are masked; blind range c t_ring / 2."""

    T_RING = 1.20e-3
    BLIND = 0.20593  # reference.md sec. 2: T = 20 degC, t_ring = 1.20 ms -> 0.20593 m

    def sensor(self):
        return ahead(air_temperature=20.0, ring_down=self.T_RING, resolution=0.001)

    def test_blind_range_is_the_reference_value(self):
        """c t_ring / 2 with F1 at 20 degC is 0.20593 m."""
        # blanking d_min = c t_ring / 2 (reference.md sec. 2)
        assert c_f1(20.0) * self.T_RING / 2 == pytest.approx(self.BLIND, abs=1e-5)

    def test_wall_inside_the_blind_range_is_not_seen_and_just_beyond_is(self):
        """A wall at 0.200 m reads +inf; at 0.213 m it reads 0.213 m."""
        inside = World([wall_across(0.200)], default_air_c=20.0)
        beyond = World([wall_across(0.213)], default_air_c=20.0)
        # blanking d_min = c t_ring / 2 = 0.20593 m (reference.md sec. 2); every ray of the cone
        # hits the near wall inside 0.200 / cos(fov/2) = 0.2041 m < 0.20593 m
        assert read(inside, self.sensor()) == math.inf
        assert read(beyond, self.sensor()) == pytest.approx(0.213, abs=5e-4)
        # without ring-down masking the near wall is there
        echo = trace(inside, 0.0, ORIGIN, self.sensor(), QUIET)
        assert echo is not None and echo.true_range_m == pytest.approx(0.200)

    def test_masked_object_lets_a_farther_one_be_seen(self):
        """A thin post inside the blind range is masked; the wall behind it is reported."""
        world = World([Disc((0.22, 0.0), 0.03), wall_across(1.0)], default_air_c=20.0)
        value = read(world, self.sensor())
        half = self.sensor().field_of_view_rad / 2
        # blanking (reference.md sec. 2): the post at 0.19 m < 0.20593 m is not seen; the wall
        # lies between 1.0 m (axis) and 1.0 / cos(fov/2) (cone edge) along the beam (geometry)
        assert 1.0 - 5e-4 <= value <= 1.0 / math.cos(half) + 5e-4


class TestTemperature:
    """Sound travels at the true air temperature; the sensor converts with the one it assumes."""

    def test_cold_air_reads_long_by_the_speed_ratio(self):
        """Sensor assumes 20 degC, air at -10 degC: a wall at 2.000 m reads 2.1109 m."""
        sensor = ahead(air_temperature=20.0, resolution=0.0001)
        value = read(World([wall_across(2.0)], default_air_c=-10.0), sensor)
        # reference.md sec. 2 temp-comp row: reads 2.1109 m (tol 1e-4 m)
        assert value == pytest.approx(2.1109, abs=1e-4)
        # CoolProp: ratio = c_assumed / c_true within 0.1 %
        c20 = PropsSI('A', 'T', 293.15, 'P', 101325, 'Air')
        cm10 = PropsSI('A', 'T', 263.15, 'P', 101325, 'Air')
        assert value / 2.0 == pytest.approx(c20 / cm10, rel=1e-3)
        echo = trace(World([wall_across(2.0)], default_air_c=-10.0), 0.0, ORIGIN, sensor, QUIET)
        assert echo is not None and echo.true_range_m == pytest.approx(2.0)
        # reference.md sec. 2 temp-comp row, before rounding to the sensor's step
        assert echo.range_m == pytest.approx(2.1109, abs=1e-4)
        # time of flight at the true speed (reference.md sec. 1 F1 at -10 degC = 325.179 m/s)
        assert echo.time_s == pytest.approx(2 * 2.0 / 325.179, rel=1e-5)

    def test_air_zone_at_the_sensor_sets_the_speed(self):
        """The air at the mount decides: a cold zone around the sensor reads long."""
        sensor = ahead(air_temperature=20.0, resolution=0.0001)
        dock = AirZone([(-0.5, -0.5), (0.5, -0.5), (0.5, 0.5), (-0.5, 0.5)], -10.0)
        inside = World([wall_across(2.0)], air=[dock], default_air_c=20.0)
        # reference.md sec. 2 temp-comp row (the zone holds the sensor)
        assert read(inside, sensor) == pytest.approx(2.1109, abs=1e-4)
        # reference.md sec. 2: same temperature assumed and true -> the true distance
        assert read(inside, sensor, pose=(-1.5, 0.0, 0.0)) == pytest.approx(3.0, abs=1e-4)


class TestLevels:
    """Echo level: spreading, absorption, threshold."""

    def test_amplitude_falls_with_range(self):
        """The echo of a rough wall and of a disc weakens monotonically with distance."""
        sensor = ahead(air_temperature=20.0, max_range=30.0)
        for make in (wall_across, lambda d: Disc((d + 0.2, 0.0), 0.2)):
            levels = []
            for d in np.linspace(0.3, 5.0, 25):
                echo = trace(World([make(float(d))], default_air_c=20.0), 0.0, ORIGIN, sensor,
                             QUIET)
                assert echo is not None
                levels.append(echo.amplitude_db)
            # common practice: spreading and absorption both grow with range (reference.md 3)
            assert np.all(np.diff(levels) < 0)

    @pytest.mark.parametrize(('make', 'spreading_db'), [
        (wall_across, 20 * math.log10(2.0)),  # extended surface: image source at 2r
        (lambda d: Disc((d + 0.2, 0.0), 0.2), 40 * math.log10(2.0)),  # small target
    ])
    def test_level_from_1_to_2_m_drops_by_spreading_plus_absorption(self, make, spreading_db):
        """Doubling the range costs the spreading law plus 2 x 1 m x alpha(40 kHz)."""
        sensor = ahead(air_temperature=20.0)
        one = trace(World([make(1.0)], default_air_c=20.0), 0.0, ORIGIN, sensor, QUIET)
        two = trace(World([make(2.0)], default_air_c=20.0), 0.0, ORIGIN, sensor, QUIET)
        assert one is not None and two is not None
        # reference.md sec. 3: alpha = 1.32 dB/m at 40 kHz, 20 degC, 50 %; round trip 2 x 1 m
        assert one.amplitude_db - two.amplitude_db == pytest.approx(
            spreading_db + 2 * 1.0 * 1.32, abs=2 * 0.05)

    def test_wall_beyond_reach_gives_no_echo(self):
        """A rough wall at 15 m is below threshold (+inf) though max range is 30 m."""
        sensor = ahead(air_temperature=20.0, max_range=30.0)
        far = World([wall_across(15.0)], default_air_c=20.0)
        near = World([wall_across(8.0)], default_air_c=20.0)
        # derived from reference.md sec. 3: at 15 m absorption alone costs 2 x 15 x 1.32 = 40 dB
        assert 2 * 15.0 * absorption_db_per_m(40_000.0) > 39.0
        assert read(far, sensor) == math.inf and trace(far, 0.0, ORIGIN, sensor, QUIET) is None
        assert math.isfinite(read(near, sensor))

    def test_wall_beyond_max_range_gives_no_echo(self):
        """An echo later than the echo timeout is not waited for: +inf."""
        sensor = ahead(air_temperature=20.0, max_range=4.0)
        # timeout t_max = 2 R_max / c (reference.md sec. 2)
        assert read(World([wall_across(4.05)], default_air_c=20.0), sensor) == math.inf
        assert math.isfinite(read(World([wall_across(3.95)], default_air_c=20.0), sensor))

    def test_absorbing_surface_can_hide_an_object(self):
        """Enough surface absorption puts a person's echo below threshold."""
        sensor = ahead(air_temperature=20.0)
        plain = World([Disc((3.2, 0.0), 0.18)], default_air_c=20.0)
        soft = World([Disc((3.2, 0.0), 0.18, absorbs_db=40.0)], default_air_c=20.0)
        echo = trace(plain, 0.0, ORIGIN, sensor, QUIET)
        assert echo is not None
        # common practice: sound-absorbing materials return weak echoes (design.md safety)
        assert echo.amplitude_db - 40.0 < QUIET.threshold_db
        assert read(soft, sensor) == math.inf

    def test_threshold_falls_linearly_after_the_pulse(self):
        """Threshold: early value at 0, late value from threshold_fall_s, linear between."""
        physics = SonarPhysics()
        t = np.array([0.0, 0.003, 0.006, 0.05])
        # numpy.interp: linear from (0, early) to (fall, late), held after
        expected = np.interp(t, [0.0, 0.006], [70.0, 40.0])
        np.testing.assert_allclose(physics.threshold_at(t), expected)


class TestNoiseAndCrosstalk:
    """Range noise and stray pulses from other sensors."""

    def test_noise_has_the_configured_spread(self):
        """Readings scatter around the distance with noise_std_m (numpy sample statistics)."""
        sensor = ahead(air_temperature=20.0, resolution=0.0001)
        world = World([wall_across(2.0)], default_air_c=20.0)
        rng = np.random.default_rng(11)
        values = np.array([ping(world, 0.0, ORIGIN, sensor, SonarPhysics(), rng)
                           for _ in range(2000)])
        # numpy: sample mean and standard deviation of normal noise (std 0.003 m)
        assert values.mean() == pytest.approx(2.0, abs=0.0005)
        assert values.std() == pytest.approx(0.003, rel=0.1)

    def test_same_seed_same_reading(self):
        """The generator passed in is the only source of randomness."""
        world = World([wall_across(2.0)], default_air_c=20.0)
        physics = SonarPhysics()
        assert read(world, ahead(), physics, seed=5) == read(world, ahead(), physics, seed=5)

    def test_stray_pulse_arriving_first_is_reported(self):
        """A stray pulse at 0.8 m before the wall's echo at 2 m is what the sensor reports."""
        sensor = ahead(air_temperature=20.0, resolution=0.001, ring_down=1.2e-3)
        world = World([wall_across(2.0)], default_air_c=20.0)
        # time of flight d = c t / 2 (reference.md sec. 2): the earliest arrival wins
        assert read(world, sensor, stray_echo_m=0.8) == pytest.approx(0.8, abs=5e-4)
        assert read(world, sensor, stray_echo_m=3.0) == pytest.approx(2.0, abs=5e-4)
        # blanking 0.20593 m (reference.md sec. 2): a stray inside the ring-down is masked too
        assert read(world, sensor, stray_echo_m=0.1) == pytest.approx(2.0, abs=5e-4)


@pytest.mark.parametrize(('field', 'value'), [
    ('rays', 0), ('frequency_hz', 0.0), ('relative_humidity', 101.0), ('noise_std_m', -1.0),
    ('specular_limit_rad', 2.0),
])
def test_bad_physics_constants_raise_value_error_naming_them(field, value):
    """SonarPhysics refuses out-of-domain constants, naming the field."""
    with pytest.raises(ValueError, match=field):
        SonarPhysics(**{field: value})
