"""Report figures: uncovered headings, safe speed by heading, the layout PNG, recording plots."""
from __future__ import annotations

import base64
import math
import struct

from matplotlib.colors import to_rgba
from matplotlib.figure import Figure
import numpy as np
import pytest
from testkit import make_config

from sonar_guard.core.braking import max_safe_speed
from sonar_guard.core.geometry import coverage, uniform_headings
from sonar_guard.core.monitor import EVENT_KINDS, Event, mount_of
from sonar_guard.offline.results import VERDICT_CODES, BagResult, SensorSummary
from sonar_guard.plots import (
    COLOURS,
    EVENT_COLOURS,
    VERDICT_COLOURS,
    draw_layout,
    draw_near_body,
    draw_speed_polar,
    figure_png_base64,
    layout_figure,
    safe_speed_by_heading,
    save_layout_png,
    uncovered_headings,
    unwatched_path_mask,
)
from sonar_guard.recording_plots import range_figure, speed_figure, timing_figure

PNG_SIGNATURE = b'\x89PNG\r\n\x1a\n'  # PNG spec (ISO/IEC 15948) sec. 5.2
C20 = 331.3 * math.sqrt(1 + 20.0 / 273.15)  # reference.md F1, speed of sound at 20 degC
T0 = 1_700_000_000.0

CONFIGS = {
    'test robot': {},
    'holonomic': {'robot.holonomic': True},
    'rear sensor turned left': {'sensors.behind.yaw': 1.2},
    'wide cones': {'sonar.field_of_view': 1.5},
}


def png_size(data: bytes) -> tuple[int, int]:
    """Return (width, height) from the IHDR chunk (PNG spec sec. 11.2.2: first chunk)."""
    assert data[:8] == PNG_SIGNATURE
    assert data[12:16] == b'IHDR'
    return struct.unpack('>II', data[16:24])


def gids(ax) -> list[str]:
    """Return the gid of every artist drawn in ``ax`` (patches, lines, texts, collections)."""
    artists = [*ax.patches, *ax.lines, *ax.texts, *ax.collections, *ax.artists]
    return [a.get_gid() for a in artists if a.get_gid()]


@pytest.mark.parametrize('count', [8, 72])
@pytest.mark.parametrize('overrides', CONFIGS.values(), ids=CONFIGS.keys())
def test_uncovered_headings_are_the_rows_no_sensor_covers(overrides, count):
    """Equal to the headings whose coverage() row is all False (numpy reference)."""
    config = make_config(overrides)
    headings = uniform_headings(count)
    table = coverage([mount_of(s) for s in config.sensors], config.robot.footprint, headings)
    expected = headings[~np.any(table, axis=1)]
    np.testing.assert_array_equal(uncovered_headings(config, count), expected)


def test_test_robot_leaves_exactly_left_and_right_uncovered():
    """Front beam at x=0.5 facing +x and rear at x=-0.5 facing -x: pure sideways travel is
    unwatched (hand geometry: both cones lie beyond the box's x extent), forward and reverse
    are watched."""
    found = uncovered_headings(make_config(), 4)  # 0, pi/2, pi, 3pi/2
    np.testing.assert_allclose(found, [math.pi / 2, 3 * math.pi / 2])


@pytest.mark.parametrize('free_m', [0.5, 1.0, 5.0])
def test_polar_speed_is_max_safe_speed_where_covered_and_fallback_where_not(free_m):
    """Covered: max_safe_speed at the worst detection latency + reaction, capped; else fallback."""
    config = make_config({'limits.fallback_speed': 0.25, 'robot.reaction_time': 0.12})
    got = safe_speed_by_heading(config, free_m)
    # Two sensors, one slot each, each slot one echo timeout 2R/c at R = 4 m (the default):
    # worst detection latency = cycle - own slot + 2R/c = 2 * 2R/c for both.
    latency = 2 * (2 * 4.0 / C20) + 0.12
    covered = ~np.isin(got.headings_rad, uncovered_headings(config, len(got.headings_rad)))
    np.testing.assert_array_equal(got.covered, covered)
    # reference.md sec. 5 closed form via sonar_guard.core.braking, checked there against the
    # reference table
    v = min(max_safe_speed(free_m, latency, 0.8, 0.1), 1.0)
    np.testing.assert_allclose(got.speeds_mps[covered], v, rtol=1e-12)
    np.testing.assert_allclose(got.latency_s[covered], latency, rtol=1e-9)
    np.testing.assert_array_equal(got.speeds_mps[~covered], 0.25)
    assert np.isnan(got.latency_s[~covered]).all()


def test_polar_speed_uses_the_slowest_covering_sensor():
    """Where two sensors cover a heading, the worse of their detection latencies counts."""
    # 'behind' moved to the left side facing left; slots of 50 ms and 20 ms, so cycle 70 ms
    # and latencies (cycle - own slot + 2R/c) of 20 ms + 2R/c for ahead, 50 ms + 2R/c behind
    config = make_config({'sensors.behind.x': 0.0, 'sensors.behind.y': 0.3,
                          'sensors.behind.yaw': math.pi / 2,
                          'sensors.ahead.slot_duration': 0.05,
                          'sensors.behind.slot_duration': 0.02})
    got = safe_speed_by_heading(config, 1.0)
    headings = uniform_headings(72)
    table = coverage([mount_of(s) for s in config.sensors], config.robot.footprint, headings)
    both, only_ahead = table.all(axis=1), table[:, 0] & ~table[:, 1]
    assert both.any() and only_ahead.any()
    timeout = 2 * 4.0 / C20
    np.testing.assert_allclose(got.latency_s[both], 0.05 + timeout + 0.10, rtol=1e-9)
    np.testing.assert_allclose(got.latency_s[only_ahead], 0.02 + timeout + 0.10, rtol=1e-9)


def test_polar_plot_draws_the_computed_speeds_as_a_closed_curve():
    """The curve's radii are safe_speed_by_heading's speeds, first point repeated at the end."""
    config = make_config({'limits.fallback_speed': 0.2})
    fig = Figure()
    ax = fig.add_subplot(projection='polar')
    draw_speed_polar(ax, config, 1.5)
    line = next(li for li in ax.lines if li.get_gid() == 'safe-speed')
    expected = safe_speed_by_heading(config, 1.5)
    np.testing.assert_allclose(line.get_ydata()[:-1], expected.speeds_mps)
    assert line.get_ydata()[-1] == line.get_ydata()[0]
    fallback = next(li for li in ax.lines if li.get_gid() == 'fallback')
    np.testing.assert_allclose(fallback.get_xdata(), uncovered_headings(config, 72))


def test_polar_plot_refuses_a_cartesian_axes():
    """A plain axes is a usage error, said in words."""
    with pytest.raises(ValueError, match='polar'):
        draw_speed_polar(Figure().add_subplot(), make_config(), 1.0)


@pytest.mark.parametrize('overrides', CONFIGS.values(), ids=CONFIGS.keys())
def test_layout_draws_footprint_a_cone_per_sensor_and_a_wedge_per_uncovered_heading(overrides):
    """One footprint, one beam wedge per sensor, one warning wedge per uncovered heading."""
    config = make_config(overrides)
    ax = Figure().add_subplot()
    draw_layout(ax, config, heading_count=36)
    drawn = gids(ax)
    assert drawn.count('footprint') == 1
    assert drawn.count('beam') == len(config.sensors)
    assert drawn.count('uncovered') == len(uncovered_headings(config, 36))
    np.testing.assert_allclose(ax.patches[0].get_xy()[:-1], config.robot.footprint.points)
    assert ax.get_aspect() == 1.0
    assert ax.get_legend() is not None


def test_layout_marks_forward_and_reverse_for_a_robot_that_only_drives_those():
    """Non-holonomic: both driven headings marked; covered in the trusted colour, else not."""
    ax = Figure().add_subplot()
    draw_layout(ax, make_config({'sensors.behind.yaw': 1.2}))
    texts = {t.get_gid(): t for t in ax.texts if t.get_gid()}
    assert {'heading-forward-text', 'heading-reverse-text'} <= set(texts)
    assert to_rgba(texts['heading-forward-text'].get_color()) == to_rgba(COLOURS['trusted'])
    assert to_rgba(texts['heading-reverse-text'].get_color()) == to_rgba(COLOURS['uncovered'])


def test_layout_of_a_holonomic_robot_marks_no_driven_headings():
    """Every heading is driven: no forward/reverse marks."""
    ax = Figure().add_subplot()
    draw_layout(ax, make_config({'robot.holonomic': True}))
    assert not [g for g in gids(ax) if g.startswith('heading-')]


# The test robot (testkit): box x in [-0.5, 0.5], y in [-0.3, 0.3]; sensors mid front edge
# facing forward and mid rear edge facing back, fov 0.4 rad, range 4 m (config defaults).
# One cone centred on a path of half width 0.3 m: the full width is inside from
# d0 = 0.3/tan(0.2) beyond the edge (right triangle, see test/core/test_watch.py); nearer, the
# cone covers |y| <= d*tan(0.2) only.
D0 = 0.3 / math.tan(0.2)


@pytest.mark.parametrize('x, y, marked', [
    (0.6, 0.25, True),                 # 0.1 m ahead, 0.25 m aside: |y| > 0.1*tan(0.2)
    (0.6, 0.0, False),                 # on the beam axis: in the cone
    (0.5 + D0 - 0.05, 0.29, True),     # just before d0, near the side: still outside the cone
    (0.5 + D0 + 0.05, 0.29, False),    # just after d0: the full width is watched
    (0.6, 0.35, False),                # beside the path, not in it
    (0.4, 0.25, False),                # on the body
    (-0.6, -0.25, True),               # reversing: the same behind the rear edge
    (-0.5 - D0 - 0.05, 0.29, False),
    (0.0, 0.5, False),                 # sideways: not a driven heading of this robot
])
def test_unwatched_path_mask_marks_the_path_before_its_full_width_is_watched(x, y, marked):
    """Points in front of / behind the box, nearer than d0 and outside the cone, are marked."""
    mask = unwatched_path_mask(make_config(), [x], [y])
    assert mask.shape == (1, 1)
    assert bool(mask[0, 0]) is marked


def test_unwatched_path_mask_of_a_holonomic_base_covers_the_sideways_path_to_the_cones_reach():
    """Sideways nothing spans the width: the whole side path is marked, out to where the
    farthest cone could reach along that heading: apexes on y = 0 with 4 m range, so out to
    d = 4 m - 0.3 m beyond the side edge at y = 0.3 m, i.e. y = 4 m."""
    config = make_config({'robot.holonomic': True})
    assert unwatched_path_mask(config, [0.0], [0.31, 3.95, -0.31, -3.95]).all()
    assert not unwatched_path_mask(config, [0.0], [4.05, -4.05]).any()


def gid_count(ax, gid: str) -> int:
    return gids(ax).count(gid)


def test_near_body_view_marks_where_the_full_width_starts_and_hatches_the_turning_gaps():
    """The dashed line sits d0 beyond each edge across the path; one hatched wedge per sector
    of the turning ring no cone looks into, with the closed-form angles of test_watch.py."""
    ax = Figure().add_subplot()
    draw_near_body(ax, make_config())
    lines = [li for li in ax.lines if li.get_gid() == 'full-width-from']
    xs = sorted(float(li.get_xdata()[0]) for li in lines)
    np.testing.assert_allclose(xs, [-0.5 - D0, 0.5 + D0], atol=1e-9)
    for li in lines:
        np.testing.assert_allclose(sorted(li.get_ydata()), [-0.3, 0.3], atol=1e-9)
    texts = [t.get_text() for t in ax.texts if t.get_gid() == 'full-width-from-text']
    assert texts == [f'{D0:.2f} m'] * 2
    wedges = [p for p in ax.patches if p.get_gid() == 'turn-unwatched']
    # a sensor at distance a = 0.5 on the axis, ring out to r = hypot(0.5, 0.3): the ray at
    # phi meets the cone in the ring for |phi| < b - asin(a*sin(b)/r), b = fov/2 (sine rule)
    edge = math.degrees(0.2 - math.asin(0.5 * math.sin(0.2) / math.hypot(0.5, 0.3)))
    spans = sorted((w.theta1, w.theta2) for w in wedges)
    np.testing.assert_allclose(spans, [(-180 + edge, -edge), (edge, 180 - edge)], atol=1e-6)
    for w in wedges:
        assert w.r == pytest.approx(math.hypot(0.5, 0.3))
        assert w.width == pytest.approx(math.hypot(0.5, 0.3) - 0.3)
        assert w.get_hatch()
    assert gid_count(ax, 'unwatched-path') == 1
    assert ax.get_legend() is not None


def test_layout_hatches_the_unwatched_path_and_ring_with_distinct_legend_entries():
    """The top view carries both shadings, each with its own hatch and legend entry."""
    ax = Figure().add_subplot()
    draw_layout(ax, make_config())
    path = next(p for p in ax.patches if p.get_gid() == 'unwatched-path')
    ring = next(p for p in ax.patches if p.get_gid() == 'turn-unwatched')
    assert path.get_hatch() and ring.get_hatch() and path.get_hatch() != ring.get_hatch()
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any('path not watched' in t for t in labels)
    assert any('turning in place' in t for t in labels)


def test_a_layout_whose_cones_see_everything_draws_no_unwatched_path():
    """Cones of nearly half a turn from base_link see the full width from each edge on."""
    config = make_config({'sensors.ahead.x': 0.0, 'sensors.behind.x': 0.0,
                          'sonar.field_of_view': 3.0})
    ax = Figure().add_subplot()
    draw_near_body(ax, config)
    assert 'unwatched-path' not in gids(ax)


def test_save_layout_png_writes_a_png_of_the_figure_size(tmp_path):
    """16 x 5.4 inches at 100 dpi is 1600 x 540 pixels."""
    path = tmp_path / 'layout.png'
    save_layout_png(make_config(), path, free_distance_m=2.0)
    assert png_size(path.read_bytes()) == (1600, 540)


def test_figure_png_base64_gives_png_text_and_releases_the_figure():
    """Base64 text of a PNG; the figure is cleared afterwards."""
    fig = layout_figure(make_config())
    text = figure_png_base64(fig)
    assert isinstance(text, str)
    assert png_size(base64.b64decode(text, validate=True)) == (1600, 540)
    assert fig.axes == []


def test_verdict_and_event_colours_cover_every_verdict_and_kind_and_differ():
    """One colour per verdict (VERDICT_CODES order) and per event kind; verdicts distinct."""
    assert set(VERDICT_COLOURS) == set(VERDICT_CODES)
    assert len({to_rgba(c) for c in VERDICT_COLOURS.values()}) == len(VERDICT_COLOURS)
    assert set(EVENT_KINDS) <= set(EVENT_COLOURS)
    for kind in set(EVENT_KINDS) & set(VERDICT_COLOURS):
        assert EVENT_COLOURS[kind] == VERDICT_COLOURS[kind]


# ------------------------------------------------------------------ recording plots


def recording(ranges: list[float], verdicts: list[str], events=()) -> BagResult:
    s = SensorSummary('ahead', 'sonar/ahead')
    for i, (r, v) in enumerate(zip(ranges, verdicts)):
        s.readings += 1
        s.ranges.add(T0 + i, r, VERDICT_CODES[v])
        s.latencies.add(0.05)
        s.periods.add(0.1)
    result = BagResult('/b', make_config(), 'test', sensors=[s], events=list(events),
                       t_start=T0, t_end=T0 + len(ranges))
    for i in range(len(ranges)):
        result.limit.add(T0 + i, 0.5)
        result.speed.add(T0 + i, 0.4)
    return result


def test_range_plot_puts_non_finite_and_out_of_range_readings_on_the_top_edge():
    """+inf, NaN and beyond-axis ranges are drawn at the top edge, finite ones where they are."""
    result = recording([1.0, math.inf, 2.0, math.nan, 50.0],
                       ['ok', 'no_echo', 'ok', 'invalid', 'no_echo'])
    fig = range_figure(result)
    ax = fig.axes[0]
    top = 4.0 * 1.08  # default max_range 4 m, plus the headroom the plot keeps
    points = np.concatenate([c.get_offsets() for c in ax.collections
                             if len(c.get_offsets())])
    by_time = {round(float(t), 6): float(y) for t, y in points}
    assert by_time == {0.0: 1.0, 1.0: pytest.approx(top), 2.0: 2.0,
                       3.0: pytest.approx(top), 4.0: pytest.approx(top)}
    assert ax.get_ylim()[1] >= top


def test_range_plot_colours_each_point_by_its_verdict():
    """The dot of an ok reading is VERDICT_COLOURS['ok'], a blind one VERDICT_COLOURS['blind']."""
    fig = range_figure(recording([1.0, 0.05], ['ok', 'blind']))
    dots = fig.axes[0].collections[0]
    colours = [tuple(c) for c in dots.get_facecolors()]
    assert colours == [to_rgba(VERDICT_COLOURS['ok']), to_rgba(VERDICT_COLOURS['blind'])]


def test_range_and_speed_plots_shade_events_of_their_sensor_and_of_the_robot():
    """A sensor's events go in its row, robot events (sensor None) in the speed plot."""
    events = [Event('blind', 'ahead', T0 + 1, T0 + 2, 'x'),
              Event('overspeed', None, T0 + 2, T0 + 3, 'y')]
    result = recording([1.0, 0.05, 0.05, 1.0], ['ok', 'blind', 'blind', 'ok'], events)
    assert 'event-blind' in gids(range_figure(result).axes[0])
    assert 'event-overspeed' not in gids(range_figure(result).axes[0])
    assert 'event-overspeed' in gids(speed_figure(result).axes[0])


@pytest.mark.parametrize('make', [range_figure, speed_figure, timing_figure])
def test_plots_of_an_empty_recording_say_no_data(make):
    """No readings: the figure is drawn and says 'no data' instead of failing."""
    for sensors in ([], [SensorSummary('ahead', 'sonar/ahead')]):
        empty = BagResult('/b', make_config(), 'test', sensors=sensors)
        fig = make(empty)
        assert any('no-data' in gids(ax) for ax in fig.axes)
        assert base64.b64decode(figure_png_base64(fig))[:8] == PNG_SIGNATURE


def test_names_with_dollar_signs_are_drawn_literally():
    """A name that matplotlib would parse as mathtext is drawn as typed and does not fail."""
    result = recording([1.0], ['ok'])
    result.sensors[0].name = '$\\frac{$'
    fig = range_figure(result)
    shown, is_math = fig.axes[0].yaxis.label._preprocess_math(fig.axes[0].get_ylabel())
    assert (shown, is_math) == ('$\\frac{$', False)  # what matplotlib will draw, as typed
    assert figure_png_base64(fig)


# ------------------------------------------------------------------ speed and timing figures


def lines_by_gid(ax) -> dict:
    return {li.get_gid(): li for li in ax.lines if li.get_gid()}


def test_speed_plot_has_a_legend_and_tells_measured_from_allowed_by_line_style():
    """Legend names both series; measured is solid, allowed is dashed (not colour alone)."""
    ax = speed_figure(recording([1.0, 1.0, 1.0], ['ok', 'ok', 'ok'])).axes[0]
    legend = ax.get_legend()
    assert legend is not None
    texts = [t.get_text() for t in legend.get_texts()]
    assert any(t.startswith('measured speed') for t in texts)
    assert any(t.startswith('allowed speed') for t in texts)
    lines = lines_by_gid(ax)
    assert lines['speed'].get_linestyle() == '-'
    assert lines['limit'].get_linestyle() == '--'
    np.testing.assert_allclose(lines['limit'].get_ydata(), 0.5)  # recording(): limit 0.5 m/s
    np.testing.assert_allclose(lines['speed'].get_ydata(), 0.4)


def test_speed_plot_marks_every_finding_on_the_time_axis_one_row_per_kind():
    """A strip below shares the time axis: each kind a labelled row, a tick at each start."""
    events = [Event('no_echo', 'ahead', T0 + 1, T0 + 2, 'x'),
              Event('jump', 'ahead', T0 + 2.5, T0 + 2.5, 'y'),
              Event('overspeed', None, T0 + 3, T0 + 3.5, 'z')]
    fig = speed_figure(recording([1.0] * 5, ['ok'] * 5, events))
    main, strip = fig.axes
    assert strip.get_shared_x_axes().joined(main, strip)
    assert [t.get_text() for t in strip.get_yticklabels()] == ['no_echo', 'jump', 'overspeed']
    starts = lines_by_gid(strip)
    for row, e in enumerate(events):
        tick = starts[f'finding-{e.kind}-start']
        np.testing.assert_allclose(tick.get_xdata(), [e.t_start - T0])
        np.testing.assert_allclose(tick.get_ydata(), [row])
    spans = {c.get_gid() for c in strip.collections}
    assert spans == {'finding-no_echo', 'finding-overspeed'}  # the jump has no duration


def test_speed_plot_without_an_allowed_speed_draws_measured_speed_and_says_so():
    """An empty limit series (no parameter file): measured only, a note, no max-speed line."""
    result = recording([1.0, 1.0, 1.0], ['ok', 'ok', 'ok'])
    result.limit = BagResult('/b', make_config(), 'test').limit  # a fresh, empty series
    fig = speed_figure(result)
    ax = fig.axes[0]
    assert set(lines_by_gid(ax)) == {'speed'}
    assert 'no-limit' in gids(ax)
    assert not [li for li in ax.lines if li.get_linestyle() == ':']  # no configured max speed
    texts = [t.get_text() for t in ax.get_legend().get_texts()]
    assert 'allowed speed: not computed' in texts
    assert 'not computed' in fig.get_suptitle()
    assert base64.b64decode(figure_png_base64(fig))[:8] == PNG_SIGNATURE


def area(fig: Figure) -> float:
    w, h = fig.get_size_inches()
    return float(w * h)


@pytest.mark.parametrize('count', [1, 3, 8])
def test_histograms_are_smaller_than_the_time_plots(count):
    """The timing grid is narrower and smaller in area than the range and speed figures."""
    result = recording([1.0, 2.0], ['ok', 'ok'])
    template = result.sensors[0]
    result.sensors = [SensorSummary(f's{i}', f'sonar/s{i}', readings=2, periods=template.periods,
                                    latencies=template.latencies) for i in range(count)]
    timing = timing_figure(result)
    for plot in (range_figure(result), speed_figure(result)):
        assert timing.get_size_inches()[0] < 0.8 * plot.get_size_inches()[0]
        assert area(timing) < area(plot)


def test_histograms_form_a_grid_at_most_four_sensors_wide_period_above_latency():
    """Six sensors: two grid rows of four columns, each sensor a period and a latency plot."""
    result = recording([1.0, 2.0], ['ok', 'ok'])
    s = result.sensors[0]
    result.sensors = [SensorSummary(f's{i}', 'x', periods=s.periods, latencies=s.latencies)
                      for i in range(6)]
    fig = timing_figure(result)
    shown = [ax for ax in fig.axes if ax.get_visible()]
    assert len(shown) == 12
    names = [ax.get_title(loc='left') for ax in shown if ax.get_title(loc='left')]
    assert names == [f's{i}' for i in range(6)]
    columns = {round(ax.get_position().x0, 3) for ax in shown}
    assert len(columns) == 4
