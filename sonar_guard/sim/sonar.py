"""One ultrasonic ping in the invented world: rays, echo levels, threshold and the reading.

The model (every constant in :class:`SonarPhysics` is an invented model constant, chosen to
give plausible behaviour for a 40 kHz air transducer; none is measured or taken from a
product):

- **Rays.** ``rays`` rays spread evenly across the beam cone, both edges included
  (``field_of_view_rad`` is the full cone angle). Each ray hits the nearest shape; its echo
  travels the path ``2 * hit distance``. The air along the path is taken at the true
  temperature at the sensor (``World.air_temperature`` at the mount position). A ray that
  hits a surface without an echo is lost: it does not go on to what lies behind, and mirror
  bounces via a second surface (multipath) are not modelled. A sensor inside a disc does not
  see that disc.
- **Incidence.** The incidence angle is the angle between the ray and the surface normal (for
  a disc, the radial direction at the hit point). A smooth wall returns an echo only when the
  incidence is within ``specular_limit_rad`` (mirror reflection: further off, the pulse is
  reflected away and lost); a rough wall or a disc returns one up to ``diffuse_limit_rad``,
  weaker at grazing incidence by ``10*log10(cos(incidence))`` dB (Lambert-like scattering).
- **Level at the receiver**, dB: ``source_level_db`` (at 1 m) minus
    - spreading, two-way: a wall is an extended flat surface, so its echo spreads like sound
      from the mirror image of the sensor, ``20*log10(2r)``; a rough wall scatters part of
      the pulse elsewhere, another ``rough_loss_db``. A disc is a small target:
      ``40*log10(r)`` less its target strength ``20*log10(radius/2)`` (a sphere's
      geometric backscatter, used for a cylinder of the same radius as a simplification);
    - absorption, ``2*r*alpha`` with alpha from ISO 9613-1 at ``frequency_hz``, the true air
      temperature and ``relative_humidity``;
    - the surface's own ``absorbs_db``;
    - the beam pattern, two-way: ``beam_edge_loss_db * (off-axis angle / half cone)^2``.
- **Detection.** A ray's echo is detected when its level is at least the threshold at its
  arrival time t: the threshold falls linearly from ``threshold_early_db`` at the pulse to
  ``threshold_db`` at ``threshold_fall_s`` and stays there (time-varying gain). Only echoes
  arriving within the echo timeout count: the sensor converts time with its assumed speed of
  sound, so the window is ``measured range <= max_range_m``.
- **Reading.** The earliest detected echo wins. The sensor measures the true round trip
  ``2r/c_true`` (true air temperature) and converts it with the speed of sound it assumes
  (``sensor.air_temperature_c``): it reports ``r * c_assumed / c_true``. Echoes arriving
  before the ring-down ends (``sensor.ring_down_s``) are masked; a later echo may still be
  seen. Timing noise (normal, ``noise_std_m`` in range) is added, then the value is rounded
  to the sensor's ``resolution_m`` (the sensor's counter reports whole steps) and clipped at
  0. No detected echo: +inf (REP 117).
- **Crosstalk.** A pulse from another sensor can arrive as a false echo: :func:`ping` takes
  ``stray_echo_m``, the one-way range at which such a stray pulse arrives (arrival time
  ``2*stray/c_true``); it is taken as strong enough to detect, is masked by the ring-down
  like any echo, and wins when it arrives first. The simulator's run computes strays only
  when ``SonarPhysics.crosstalk`` is set.

Units: metres, seconds, radians, dB; temperatures in degC.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from functools import lru_cache
import math

import numpy as np
from numpy.typing import NDArray

from sonar_guard.core.acoustics import speed_of_sound
from sonar_guard.core.config import SensorConfig
from sonar_guard.sim.absorption import absorption_db_per_m
from sonar_guard.sim.world import Disc, Point, Wall, World

__all__ = [
    'Echo',
    'Scene',
    'SonarPhysics',
    'mount_pose',
    'ping',
    'trace',
]

_MIN_R = 1e-3  # m: closer hits are taken at this distance, so the spreading law stays finite
_EPS_S = 1e-9  # m: a ray must leave its origin before it can hit


@dataclass(frozen=True, slots=True)
class SonarPhysics:
    """The invented constants of the ping model (see the module docstring; not measured)."""

    frequency_hz: float = 40_000.0
    """Pulse frequency, Hz (sets the air absorption)."""
    rays: int = 15
    """Rays across the beam cone, both edges included."""
    specular_limit_rad: float = 0.26
    """A smooth surface echoes only within this incidence angle from its normal, rad."""
    diffuse_limit_rad: float = 1.3
    """A rough surface or a disc echoes up to this incidence angle, rad."""
    source_level_db: float = 110.0
    """Pulse level at 1 m on the beam axis, dB (invented)."""
    threshold_db: float = 40.0
    """Detection threshold at late times, dB (invented)."""
    threshold_early_db: float = 70.0
    """Detection threshold right after the pulse, dB (invented)."""
    threshold_fall_s: float = 0.006
    """Time over which the threshold falls from early to late, s."""
    relative_humidity: float = 50.0
    """Relative humidity of the air, % (sets the air absorption)."""
    noise_std_m: float = 0.003
    """Standard deviation of the range noise, m."""
    crosstalk: bool = False
    """True: a run lets pulses of sensors firing together reach each other."""
    beam_edge_loss_db: float = 12.0
    """Two-way beam pattern loss at the cone edge, dB; quadratic in the off-axis angle."""
    rough_loss_db: float = 10.0
    """Share of the pulse a rough wall scatters away from the sensor, dB (invented)."""

    def __post_init__(self) -> None:
        """Check every constant is in its domain; raise ValueError naming the first bad one."""
        checks = (
            ('frequency_hz', self.frequency_hz > 0.0, '> 0 Hz'),
            ('rays', isinstance(self.rays, int) and not isinstance(self.rays, bool)
             and self.rays >= 1, 'an int >= 1'),
            ('specular_limit_rad', 0.0 <= self.specular_limit_rad <= math.pi / 2,
             'in [0, pi/2] rad'),
            ('diffuse_limit_rad', 0.0 <= self.diffuse_limit_rad <= math.pi / 2,
             'in [0, pi/2] rad'),
            ('source_level_db', math.isfinite(self.source_level_db), 'finite dB'),
            ('threshold_db', math.isfinite(self.threshold_db), 'finite dB'),
            ('threshold_early_db', math.isfinite(self.threshold_early_db), 'finite dB'),
            ('threshold_fall_s', 0.0 <= self.threshold_fall_s < math.inf, '>= 0 s'),
            ('relative_humidity', 0.0 <= self.relative_humidity <= 100.0, 'in [0, 100] %'),
            ('noise_std_m', 0.0 <= self.noise_std_m < math.inf, '>= 0 m'),
            ('beam_edge_loss_db', 0.0 <= self.beam_edge_loss_db < math.inf, '>= 0 dB'),
            ('rough_loss_db', 0.0 <= self.rough_loss_db < math.inf, '>= 0 dB'),
        )
        for name, ok, rule in checks:
            if not ok:
                raise ValueError(f'{name} must be {rule}: {getattr(self, name)!r}')

    def threshold_at(self, t_s: NDArray[np.float64] | float) -> NDArray[np.float64]:
        """Return the detection threshold at ``t_s`` s after the pulse, dB."""
        t = np.asarray(t_s, dtype=np.float64)
        if self.threshold_fall_s <= 0.0:
            return np.full_like(t, self.threshold_db)
        f = np.clip(t / self.threshold_fall_s, 0.0, 1.0)
        return self.threshold_early_db + (self.threshold_db - self.threshold_early_db) * f


@dataclass(frozen=True, slots=True)
class Echo:
    """The first detected echo of a ping, before quantisation, noise and ring-down masking."""

    range_m: float
    """Range the sensor computes from the echo time with its assumed speed of sound, m."""
    amplitude_db: float
    """Echo level at the receiver, dB."""
    shape: str
    """Name of what returned it (the shape's name, else 'wall' or 'disc')."""
    true_range_m: float = math.nan
    """Distance from the sensor to the reflecting point, m."""
    time_s: float = math.nan
    """Round-trip time at the true speed of sound, s."""
    point: Point = (math.nan, math.nan)
    """Reflecting point in the map frame, m."""


class Scene:
    """The shapes of a world at one time, as arrays ready for vectorised ray casting."""

    __slots__ = ('disc_absorbs', 'disc_c', 'disc_r', 'names', 'seg_a', 'seg_absorbs', 'seg_e',
                 'seg_len', 'seg_smooth')

    def __init__(self, shapes: Sequence[Wall | Disc]) -> None:
        walls = [s for s in shapes if isinstance(s, Wall)]
        discs = [s for s in shapes if isinstance(s, Disc)]
        a = np.array([w.a for w in walls], dtype=np.float64).reshape(-1, 2)
        b = np.array([w.b for w in walls], dtype=np.float64).reshape(-1, 2)
        self.seg_a: NDArray[np.float64] = a
        self.seg_e: NDArray[np.float64] = b - a
        self.seg_len: NDArray[np.float64] = np.hypot(self.seg_e[:, 0], self.seg_e[:, 1])
        self.seg_smooth: NDArray[np.bool_] = np.array([w.smooth for w in walls], dtype=bool)
        self.seg_absorbs: NDArray[np.float64] = np.array(
            [w.absorbs_db for w in walls], dtype=np.float64)
        self.disc_c: NDArray[np.float64] = np.array(
            [d.centre for d in discs], dtype=np.float64).reshape(-1, 2)
        self.disc_r: NDArray[np.float64] = np.array([d.radius for d in discs], dtype=np.float64)
        self.disc_absorbs: NDArray[np.float64] = np.array(
            [d.absorbs_db for d in discs], dtype=np.float64)
        self.names: tuple[str, ...] = tuple(
            [w.name or 'wall' for w in walls] + [d.name or 'disc' for d in discs])

    @classmethod
    def of(cls, world: World, t: float) -> Scene:
        """Return the scene of ``world`` at simulation time ``t`` s."""
        return cls(world.shapes_at(t))


def mount_pose(pose: tuple[float, float, float],
               sensor: SensorConfig) -> tuple[float, float, float]:
    """Return the sensor's (x m, y m, yaw rad) in the map: robot pose composed with the mount."""
    x, y, yaw = pose
    c, s = math.cos(yaw), math.sin(yaw)
    return (x + c * sensor.x_m - s * sensor.y_m, y + s * sensor.x_m + c * sensor.y_m,
            yaw + sensor.yaw_rad)


@lru_cache(maxsize=64)
def _beam(rays: int, fov_rad: float, edge_loss_db: float
          ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Return the rays' off-axis angles (rad) and their two-way beam loss (dB)."""
    half = 0.5 * fov_rad
    offsets = np.linspace(-half, half, rays) if rays > 1 else np.zeros(1)
    loss = edge_loss_db * (offsets / half) ** 2 if half > 0 else np.zeros_like(offsets)
    offsets.flags.writeable = False
    loss.flags.writeable = False
    return offsets, loss


@lru_cache(maxsize=256)
def _alpha(frequency_hz: float, temp_c: float, humidity: float) -> float:
    """Return the ISO 9613-1 absorption (dB/m), cached: a world has few air temperatures."""
    return absorption_db_per_m(frequency_hz, temp_c, humidity)


@dataclass(frozen=True, slots=True)
class _Heard:
    """Every ray's echo of one ping: times, levels and which are detected in the window."""

    x: float
    y: float
    c_true: float
    c_assumed: float
    time_s: NDArray[np.float64]
    dist_m: NDArray[np.float64]
    level_db: NDArray[np.float64]
    detected: NDArray[np.bool_]
    shape: NDArray[np.intp]
    points: NDArray[np.float64]


def _listen(scene: Scene, world: World, pose: tuple[float, float, float],
            sensor: SensorConfig, physics: SonarPhysics) -> _Heard:
    """Cast the beam's rays into ``scene`` and work out each ray's echo."""
    return _listen_all(scene, world, pose, (sensor,), physics)[0]


def _listen_all(scene: Scene, world: World, pose: tuple[float, float, float],
                sensors: Sequence[SensorConfig], physics: SonarPhysics) -> list[_Heard]:
    """Cast the rays of several sensors' beams at once; return each sensor's echoes.

    One pass over every ray of every sensor (numpy's per-call cost dominates at a few dozen
    rays); each ray's numbers are the same as when its sensor is cast alone.
    """
    origins = [mount_pose(pose, sensor) for sensor in sensors]
    temps = [world.air_temperature(x, y) for x, y, _ in origins]
    c_trues = [speed_of_sound(temp_c) for temp_c in temps]
    c_assumeds = [speed_of_sound(sensor.air_temperature_c) for sensor in sensors]
    beams = [_beam(physics.rays, sensor.field_of_view_rad, physics.beam_edge_loss_db)
             for sensor in sensors]
    counts = [offsets.size for offsets, _ in beams]

    def per_ray(values: Sequence[float]) -> NDArray[np.float64]:
        return np.repeat(np.asarray(values, dtype=np.float64), counts)

    x, y = per_ray([o[0] for o in origins]), per_ray([o[1] for o in origins])
    angles = np.concatenate([heading + offsets for (_, _, heading), (offsets, _) in
                             zip(origins, beams)])
    beam_loss = np.concatenate([loss for _, loss in beams])
    dx, dy = np.cos(angles), np.sin(angles)
    n_rays = angles.size
    n_seg = scene.seg_a.shape[0]

    # Walls: p + s d = a + u e  ->  s = (a-p) x e / (d x e),  u = (a-p) x d / (d x e)
    apx = scene.seg_a[None, :, 0] - x[:, None]
    apy = scene.seg_a[None, :, 1] - y[:, None]
    ex, ey = scene.seg_e[None, :, 0], scene.seg_e[None, :, 1]
    denom = dx[:, None] * ey - dy[:, None] * ex
    with np.errstate(divide='ignore', invalid='ignore'):
        s_w = (apx * ey - apy * ex) / denom
        u_w = (apx * dy[:, None] - apy * dx[:, None]) / denom
    hit_w = (np.abs(denom) > 1e-12) & (s_w > _EPS_S) & (u_w >= 0.0) & (u_w <= 1.0)
    dist_w = np.where(hit_w, s_w, np.inf)
    cos_w = np.abs(denom) / np.where(scene.seg_len > 0, scene.seg_len, 1.0)[None, :]

    # Discs: |p + s d - c|^2 = r^2 with |d| = 1; the nearer root, in front of the sensor
    pcx = x[:, None] - scene.disc_c[None, :, 0]
    pcy = y[:, None] - scene.disc_c[None, :, 1]
    b = dx[:, None] * pcx + dy[:, None] * pcy
    cc = pcx * pcx + pcy * pcy - (scene.disc_r * scene.disc_r)[None, :]
    disc = b * b - cc
    root = np.sqrt(np.maximum(disc, 0.0))
    s_d = -b - root
    hit_d = (disc >= 0.0) & (s_d > _EPS_S)
    dist_d = np.where(hit_d, s_d, np.inf)
    # radial normal at the hit: d . (p + s d - c) = b + s = -root
    cos_d = root / scene.disc_r[None, :] if scene.disc_r.size else root

    dist_all = np.concatenate([dist_w, dist_d], axis=1)
    if dist_all.shape[1] == 0:
        out = []
        for (mx, my, _), c_true, c_assumed, count in zip(origins, c_trues, c_assumeds, counts):
            empty = np.full(count, np.inf)
            out.append(_Heard(mx, my, c_true, c_assumed, empty, empty, np.full(count, -np.inf),
                              np.zeros(count, dtype=bool), np.full(count, -1, dtype=np.intp),
                              np.full((count, 2), np.nan)))
        return out
    cos_all = np.concatenate([cos_w, cos_d], axis=1)
    rows = np.arange(n_rays)
    idx = np.argmin(dist_all, axis=1)
    r = dist_all[rows, idx]
    hit = np.isfinite(r)
    cos_inc = np.clip(cos_all[rows, idx], 0.0, 1.0)
    incidence = np.arccos(cos_inc)
    is_disc = idx >= n_seg
    wall_i = np.where(is_disc, 0, idx)
    disc_i = np.where(is_disc, idx - n_seg, 0)
    smooth = ~is_disc & (scene.seg_smooth[wall_i] if n_seg else False)
    absorbs = np.where(is_disc, scene.disc_absorbs[disc_i] if scene.disc_r.size else 0.0,
                       scene.seg_absorbs[wall_i] if n_seg else 0.0)

    rr = np.where(hit, np.maximum(r, _MIN_R), 1.0)
    with np.errstate(divide='ignore'):
        lambert = 10.0 * np.log10(cos_inc)
    if scene.disc_r.size:
        strength = 20.0 * np.log10(scene.disc_r[disc_i] / 2.0)
    else:
        strength = np.zeros(n_rays)
    spreading = np.where(
        is_disc, 40.0 * np.log10(rr) - strength - lambert,
        20.0 * np.log10(2.0 * rr) + np.where(smooth, 0.0, physics.rough_loss_db - lambert))
    alpha = per_ray([_alpha(physics.frequency_hz, temp_c, physics.relative_humidity)
                     for temp_c in temps])
    level = physics.source_level_db - spreading - 2.0 * rr * alpha - absorbs - beam_loss
    limit = np.where(smooth, physics.specular_limit_rad, physics.diffuse_limit_rad)
    echoing = hit & (incidence <= limit)
    level = np.where(echoing, level, -np.inf)

    c_true_ray = per_ray(c_trues)
    time_s = np.where(hit, 2.0 * r / c_true_ray, np.inf)
    timeout_s = per_ray([2.0 * sensor.max_range_m / c_assumed
                         for sensor, c_assumed in zip(sensors, c_assumeds)])
    detected = echoing & (level >= physics.threshold_at(time_s)) & (time_s <= timeout_s)
    # hit points; NaN for rays that hit nothing (inf * a zero direction component is no number)
    reach = np.where(hit, r, 0.0)
    points = np.where(hit[:, None], np.stack([x + reach * dx, y + reach * dy], axis=1), np.nan)
    dist = np.where(hit, r, np.inf)
    shape = np.where(hit, idx, -1)
    out = []
    first = 0
    for (mx, my, _), c_true, c_assumed, count in zip(origins, c_trues, c_assumeds, counts):
        part = slice(first, first + count)
        out.append(_Heard(mx, my, c_true, c_assumed, time_s[part], dist[part], level[part],
                          detected[part], shape[part], points[part]))
        first += count
    return out


def _first(heard: _Heard, after_s: float = 0.0) -> int | None:
    """Return the ray index of the earliest detected echo arriving at or after ``after_s``."""
    times = np.where(heard.detected & (heard.time_s >= after_s), heard.time_s, np.inf)
    i = int(np.argmin(times))
    return i if math.isfinite(times[i]) else None


def _echo(heard: _Heard, scene: Scene, i: int) -> Echo:
    """Return ray ``i``'s echo as an :class:`Echo`."""
    r = float(heard.dist_m[i])
    return Echo(range_m=r * heard.c_assumed / heard.c_true, amplitude_db=float(heard.level_db[i]),
                shape=scene.names[int(heard.shape[i])], true_range_m=r,
                time_s=float(heard.time_s[i]),
                point=(float(heard.points[i, 0]), float(heard.points[i, 1])))


def _reading(heard: _Heard, sensor: SensorConfig, physics: SonarPhysics,
             rng: np.random.Generator, stray_echo_m: float | None) -> tuple[float, float | None]:
    """Return (reported range m, echo round-trip time s or None for no echo)."""
    ring = sensor.ring_down_s
    timeout_s = 2.0 * sensor.max_range_m / heard.c_assumed
    i = _first(heard, ring)
    t_echo = float(heard.time_s[i]) if i is not None else math.inf
    if stray_echo_m is not None and math.isfinite(stray_echo_m) and stray_echo_m >= 0.0:
        t_stray = 2.0 * stray_echo_m / heard.c_true
        if ring <= t_stray <= timeout_s and t_stray < t_echo:
            t_echo = t_stray
    if not math.isfinite(t_echo):
        return math.inf, None
    measured = 0.5 * heard.c_assumed * t_echo
    if physics.noise_std_m > 0.0:
        measured += float(rng.normal(0.0, physics.noise_std_m))
    res = sensor.resolution_m
    if res > 0.0:
        measured = math.floor(measured / res + 0.5) * res
    return max(measured, 0.0), t_echo


def trace(world: World, t: float, pose: tuple[float, float, float], sensor: SensorConfig,
          physics: SonarPhysics) -> Echo | None:
    """Return the first detected echo of a ping at time ``t`` s from robot ``pose``, or None.

    The same as :func:`ping` without ring-down masking, noise and quantisation: for tests and
    plots. ``pose`` is the robot's (x m, y m, yaw rad) in the map.
    """
    scene = Scene.of(world, t)
    heard = _listen(scene, world, pose, sensor, physics)
    i = _first(heard)
    return None if i is None else _echo(heard, scene, i)


def ping(world: World, t: float, pose: tuple[float, float, float], sensor: SensorConfig,
         physics: SonarPhysics, rng: np.random.Generator, *,
         stray_echo_m: float | None = None) -> float:
    """Return the range in m a sensor reports for a ping at ``t`` s from robot ``pose``.

    The first echo over threshold, converted with the speed of sound the sensor assumes
    (``sensor.air_temperature_c``) while sound travels at the true air temperature at the
    mount, with noise, rounded to ``sensor.resolution_m``; +inf for no echo within max range.
    Echoes arriving before the ring-down ends are masked (a later one may still be seen).
    ``stray_echo_m`` is the one-way range at which another sensor's pulse arrives, if any.
    """
    scene = Scene.of(world, t)
    heard = _listen(scene, world, pose, sensor, physics)
    return _reading(heard, sensor, physics, rng, stray_echo_m)[0]
