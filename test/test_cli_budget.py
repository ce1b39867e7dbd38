"""`sonar-guard budget`: timing per the contract for any parameter file; bad files exit 2."""
from __future__ import annotations

import json
import math
from pathlib import Path
import subprocess
import sys

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
import pytest
from testkit import BASE_PARAMS
import yaml

from sonar_guard.cli import load_config_file, main

REPO = Path(__file__).resolve().parents[1]


def c_f1(temp_c):
    """Speed of sound, reference.md F1: 331.3*sqrt(1 + T/273.15) m/s."""
    return 331.3 * math.sqrt(1 + temp_c / 273.15)


def write_params(path: Path, params: dict) -> Path:
    """Write flat parameters as a ROS 2 parameter file (dotted keys nest, as rclpy reads them)."""
    tree: dict = {}
    for key, value in params.items():
        node = tree
        *parents, leaf = key.split('.')
        for p in parents:
            node = node.setdefault(p, {})
        node[leaf] = value
    path.write_text(yaml.safe_dump({'sonar_guard': {'ros__parameters': tree}}), encoding='utf-8')
    return path


def run_json(capsys, *args) -> dict:
    assert main(['budget', '--json', *args]) == 0
    return json.loads(capsys.readouterr().out)


sensor_st = st.fixed_dictionaries({
    'slot': st.integers(0, 3),
    'max_range': st.floats(0.5, 8.0),
    'slot_duration': st.one_of(st.just(0.0), st.floats(0.005, 0.1)),
    'air_temperature': st.floats(-20.0, 45.0),
})


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(sensors=st.lists(sensor_st, min_size=1, max_size=6))
def test_budget_json_timing_follows_the_contract_for_any_params(tmp_path, capsys, sensors):
    """Slot = slot_duration or longest 2R/c sharing it; cycle = sum; latency per design.md."""
    names = [f's{i}' for i in range(len(sensors))]
    params = {'sensor_names': names, 'robot.footprint': BASE_PARAMS['robot.footprint'],
              'sonar.min_range': 0.1}
    for name, s in zip(names, sensors):
        for key, value in s.items():
            params[f'sensors.{name}.{key}'] = value
    out = run_json(capsys, '--params', str(write_params(tmp_path / 'p.yaml', params)))

    # independent computation with reference.md F1 and the rules of the issue
    timeout = {n: 2 * s['max_range'] / c_f1(s['air_temperature']) for n, s in zip(names, sensors)}
    need = {n: s['slot_duration'] or timeout[n] for n, s in zip(names, sensors)}
    slot_len: dict[int, float] = {}
    for n, s in zip(names, sensors):
        slot_len[s['slot']] = max(slot_len.get(s['slot'], 0.0), need[n])
    cycle = math.fsum(slot_len.values())
    assert [row['name'] for row in out['sensors']] == names
    for row, s in zip(out['sensors'], sensors):
        n = row['name']
        assert row['slot'] == s['slot']
        assert row['echo_timeout_s'] == pytest.approx(timeout[n], rel=1e-9)
        assert row['blind_range_m'] == 0.1
        assert row['cycle_s'] == pytest.approx(cycle, rel=1e-9)
        assert row['detection_latency_s'] == pytest.approx(
            cycle - slot_len[s['slot']] + timeout[n], rel=1e-9)


def test_budget_headings_list_covering_sensors_and_safe_speeds(capsys):
    """The shipped cart: forward and reverse, each with its sensors and v_max per distance."""
    out = run_json(capsys)
    headings = {h['heading']: h for h in out['headings']}
    assert set(headings) == {'forward', 'reverse'}
    assert headings['forward']['sensors'] and headings['reverse']['sensors']
    config = load_config_file(None)
    a, margin = config.robot.decel_mps2, config.limits.margin_m
    cap = config.limits.max_speed_mps
    for h in headings.values():
        latency = h['latency_s']
        for row in h['speeds']:
            d = row['free_distance_m'] - margin
            # reference.md sec. 5 closed form
            expected = -a * latency + math.sqrt((a * latency) ** 2 + 2 * a * d)
            assert row['max_safe_speed_mps'] == pytest.approx(expected, rel=1e-9)
            assert row['allowed_mps'] == pytest.approx(min(expected, cap), rel=1e-9)


def test_budget_table_is_readable(capsys):
    """The default output is a table naming every sensor and the safety caution."""
    assert main(['budget']) == 0
    out = ' '.join(capsys.readouterr().out.split())
    assert 'front_center' in out and 'detection' in out
    assert 'not a certified safety function' in out


def test_bad_params_file_exits_2_listing_every_problem_without_traceback(tmp_path):
    """A broken file gives exit 2 and each problem once, no Python traceback."""
    params = dict(BASE_PARAMS)
    params.update({'robot.decel': 0.0, 'limits.margin': -1.0, 'sonar.max_range': 'far'})
    path = write_params(tmp_path / 'bad.yaml', params)
    proc = subprocess.run([sys.executable, '-m', 'sonar_guard', 'budget', '--params', str(path)],
                          capture_output=True, text=True, cwd=REPO, timeout=120)
    assert proc.returncode == 2
    assert 'Traceback' not in proc.stderr
    assert '3 problems' in proc.stderr
    for key in ("'robot.decel'", "'limits.margin'", "'sonar.max_range'"):
        assert key in proc.stderr


@pytest.mark.parametrize('content', ['sonar_guard: [unclosed', '', 'other_node: {}'])
def test_unusable_files_exit_2(tmp_path, capsys, content):
    """Syntax errors, empty files and files for other nodes are unusable input."""
    path = tmp_path / 'p.yaml'
    path.write_text(content)
    assert main(['budget', '--params', str(path)]) == 2
    assert 'sonar-guard: error:' in capsys.readouterr().err


def test_missing_file_exits_2(tmp_path, capsys):
    """A path that does not exist is named in the one-line error."""
    assert main(['budget', '--params', str(tmp_path / 'nope.yaml')]) == 2
    assert 'nope.yaml' in capsys.readouterr().err


def test_help_carries_the_safety_caution():
    """--help says this is an aid and names the standards to defer to."""
    proc = subprocess.run([sys.executable, '-m', 'sonar_guard', '--help'], capture_output=True,
                          text=True, cwd=REPO, timeout=120)
    assert proc.returncode == 0
    text = ' '.join(proc.stdout.split())
    for needle in ('not a certified safety function', 'ISO 3691-4', 'ISO 13482',
                   'ANSI/RIA R15.08', 'blind zone', 'crosstalk'):
        assert needle in text


def test_budget_plot_writes_the_layout_png(tmp_path, capsys):
    """--plot FILE.png draws the layout; the file is a PNG (signature per the PNG spec)."""
    out = tmp_path / 'layout.png'
    assert main(['budget', '--plot', str(out)]) == 0
    assert out.read_bytes()[:8] == b'\x89PNG\r\n\x1a\n'  # PNG file signature (RFC 2083)


def test_budget_plot_refuses_a_symlink(tmp_path, capsys):
    """An output path that is a symbolic link is refused with exit 2."""
    (tmp_path / 'elsewhere.png').write_bytes(b'')
    link = tmp_path / 'layout.png'
    link.symlink_to(tmp_path / 'elsewhere.png')
    assert main(['budget', '--plot', str(link)]) == 2
    assert 'symbolic link' in capsys.readouterr().err


# The test robot of testkit: box x in [-0.5, 0.5], y in [-0.3, 0.3], one sensor mid front edge
# facing forward and one mid rear edge facing back, fov 0.4 rad and range 4 m (the defaults).
# Right triangles (test/core/test_watch.py): the full 0.6 m width is inside a cone from
# 0.3/tan(0.2) to sqrt(4^2 - 0.3^2) m beyond each edge. Turning: a ray from base_link at phi
# meets the front cone inside the ring (out to r = hypot(0.5, 0.3)) for
# |phi| < b - asin(0.5*sin(b)/r), b = 0.2 (sine rule); the rear cone likewise about pi.
def test_budget_json_gives_where_the_full_width_is_watched_and_the_turning_gaps(tmp_path, capsys):
    """full_width_from_m / _to_m per heading and turn_unwatched_sectors_rad, closed forms."""
    out = run_json(capsys, '--params', str(write_params(tmp_path / 'p.yaml', BASE_PARAMS)))
    for h in out['headings']:
        assert h['full_width_from_m'] == pytest.approx(0.3 / math.tan(0.2), abs=1e-9)
        assert h['full_width_to_m'] == pytest.approx(math.sqrt(16 - 0.09), abs=1e-9)
        assert {'heading', 'heading_rad', 'sensors', 'latency_s', 'speeds'} <= set(h)
    edge = 0.2 - math.asin(0.5 * math.sin(0.2) / math.hypot(0.5, 0.3))
    assert out['turn_unwatched_sectors_rad'] == [
        [pytest.approx(-math.pi + edge, abs=1e-9), pytest.approx(-edge, abs=1e-9)],
        [pytest.approx(edge, abs=1e-9), pytest.approx(math.pi - edge, abs=1e-9)]]


def test_budget_json_full_width_is_null_where_no_cone_spans_the_path(tmp_path, capsys):
    """Rear sensor turned to face left: reverse is never watched across its width (null)."""
    params = {**BASE_PARAMS, 'sensors.behind.yaw': math.pi / 2}
    out = run_json(capsys, '--params', str(write_params(tmp_path / 'p.yaml', params)))
    by_name = {h['heading']: h for h in out['headings']}
    assert by_name['reverse']['full_width_from_m'] is None
    assert by_name['reverse']['full_width_to_m'] is None
    assert by_name['forward']['full_width_from_m'] == pytest.approx(0.3 / math.tan(0.2))


def test_budget_table_has_a_full_width_column_and_says_what_no_cone_watches(tmp_path, capsys):
    """The column header carries its unit; 'nowhere' for a path no cone spans; the log
    sentences follow the table."""
    params = {**BASE_PARAMS, 'sensors.behind.yaw': math.pi / 2}
    assert main(['budget', '--params', str(write_params(tmp_path / 'p.yaml', params))]) == 0
    out = capsys.readouterr().out
    words = ' '.join(out.split())
    assert 'full' in words and 'width' in words and 'from m' in words
    rows = {line.split()[1]: line for line in out.splitlines()
            if line.startswith('│ forward') or line.startswith('│ reverse')}
    assert f'{0.3 / math.tan(0.2):.2f}' in rows['forward']
    assert 'nowhere' in rows['reverse']
    assert 'What no cone watches:' in out
    assert 'turning in place:' in words
