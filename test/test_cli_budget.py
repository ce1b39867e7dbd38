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
