"""`sonar-guard tune`: proposals from a recording, with evidence; looser values are not applied."""
from __future__ import annotations

import math

import numpy as np
import pytest
import yaml

from sonar_guard.cli import load_config_file, main
from sonar_guard.core.config import build_config, parse_params_yaml
from sonar_guard.offline.bagwrite import odometry_msg, range_msg, twist_msg, write_bag
from sonar_guard.offline.tune import gather, propose, render_params

# A made-up recording of the two-sensor test robot. Inputs only; expected proposals follow
# from the rules in sonar_guard/offline/tune.py and are computed below with numpy.
T0 = 1_000.0
DECELS = (0.5, 0.7, 0.9)  # m/s^2 of three braking stops
REACTION_S = 0.2  # odometry follows a command step after this long
CEILING = 3.6  # what the sensor reports when no echo returns
PARAMS = {
    'sensor_names': ['ahead', 'behind'],
    'sensors': {'ahead': {'x': 0.5, 'yaw': 0.0}, 'behind': {'x': -0.5, 'yaw': math.pi}},
    'sonar': {'min_range': 0.15, 'max_range': 4.0, 'field_of_view': 0.4},
    'robot': {'footprint': [0.5, 0.3, 0.5, -0.3, -0.5, -0.3, -0.5, 0.3], 'decel': 0.8,
              'reaction_time': 0.1},
    'limits': {'stale_after': 0.3},
}


def recording():
    """Yield records: readings with a ceiling and a close approach, stops, command steps."""
    records = []
    t = 0.0
    # odometry and commands: three accelerate-cruise-brake cycles, commands lead by REACTION_S
    for decel in DECELS:
        start = t
        records.append((T0 + start, '/cmd_vel', 'geometry_msgs/msg/Twist', twist_msg(0.8)))
        v = 0.0
        while True:
            tt = t - start
            if tt < REACTION_S:
                v = 0.0
            elif tt < REACTION_S + 1.0:
                v = 0.8
            else:
                v = max(0.0, 0.8 - decel * (tt - REACTION_S - 1.0))
            records.append((T0 + t, '/odom', 'nav_msgs/msg/Odometry', odometry_msg(T0 + t, v)))
            if tt > REACTION_S + 1.0 and v == 0.0:
                break
            t = round(t + 0.02, 6)
        records.append((T0 + start + 1.0, '/cmd_vel', 'geometry_msgs/msg/Twist', twist_msg(0.0)))
        t = round(t + 0.5, 6)
    end = t
    # readings every 50 ms with one 0.4 s gap; 5 % at the ceiling; an approach to 0.12 m
    k = 0
    tr = 0.0
    while tr < end:
        if 2.0 <= tr < 2.4:
            tr = 2.4
        r = 1.0 + 0.8 * math.sin(tr)
        if k % 20 == 0:
            r = CEILING
        if 3.0 <= tr < 3.5:
            r = 0.12 + (3.5 - tr) * 0.2  # closes in smoothly down to 0.12 m
        for name in ('ahead', 'behind'):
            records.append((T0 + tr, f'/sonar/{name}', 'sensor_msgs/msg/Range',
                            range_msg(T0 + tr, f'sonar_{name}', r, min_range=0.15,
                                      max_range=4.0, field_of_view=0.4)))
        k += 1
        tr = round(tr + 0.05, 6)
    records.sort(key=lambda rec: rec[0])
    for t_s, topic, msgtype, msg in records:
        yield topic, msgtype, t_s, msg


@pytest.fixture(scope='module')
def setup(tmp_path_factory):
    root = tmp_path_factory.mktemp('tune')
    params = root / 'params.yaml'
    params.write_text(yaml.safe_dump({'sonar_guard': {'ros__parameters': PARAMS}}))
    bag = write_bag(root / 'drive', recording(), storage='mcap')
    return root, params, bag


def by_key(proposals):
    return {p.key: p for p in proposals}


def test_decel_is_a_low_percentile_of_the_braking_seen(setup):
    """5th percentile of the stops' decelerations (numpy.percentile), tighter than 0.8."""
    _, params, bag = setup
    config = load_config_file(params)
    p = by_key(propose(config, gather([str(bag)], config)))['robot.decel']
    assert p.proposed == pytest.approx(float(np.percentile(DECELS, 5)), abs=0.03)  # numpy
    assert not p.looser


def test_reaction_time_comes_from_command_steps(setup):
    """Odometry follows commands after REACTION_S: proposed within one odometry period."""
    _, params, bag = setup
    config = load_config_file(params)
    p = by_key(propose(config, gather([str(bag)], config)))['robot.reaction_time']
    assert p.proposed == pytest.approx(REACTION_S, abs=0.025)
    assert not p.looser  # longer than the configured 0.1 s: more conservative


def test_max_range_is_the_no_echo_ceiling(setup):
    """A value held by 5 % of readings at the top is the no-echo reading."""
    _, params, bag = setup
    config = load_config_file(params)
    p = by_key(propose(config, gather([str(bag)], config)))['sensors.ahead.max_range']
    assert p.proposed == pytest.approx(CEILING, abs=1e-6)
    assert not p.looser


def test_looser_proposals_are_flagged_and_not_applied(setup):
    """A smaller min_range and a longer stale_after are less conservative: kept as comments."""
    _, params, bag = setup
    config = load_config_file(params)
    proposals = by_key(propose(config, gather([str(bag)], config)))
    low = proposals['sensors.ahead.min_range']
    stale = proposals['limits.stale_after']
    assert low.looser and low.proposed == pytest.approx(0.12, abs=0.011)
    assert stale.looser and stale.proposed > 0.3
    text = render_params(config, proposals.values(), sources=[str(bag)])
    tuned = build_config(parse_params_yaml(text))
    assert tuned.sensor('ahead').min_range_m == 0.15
    assert tuned.limits.stale_after_s == 0.3
    assert 'LOOSER proposal, not applied' in text
    assert tuned.robot.decel_mps2 == proposals['robot.decel'].proposed


def test_tune_output_round_trips_into_check(setup, capsys):
    """-o writes a parameter file that loads and that `check` accepts (exit 0 or 1)."""
    root, params, bag = setup
    out = root / 'tuned.yaml'
    assert main(['tune', str(bag), '--params', str(params), '-o', str(out)]) == 0
    printed = capsys.readouterr().out
    assert 'robot.decel' in printed and 'LOOSER' in printed
    config = load_config_file(out)
    assert config.sensor_names == ('ahead', 'behind')
    assert main(['check', str(bag), '--params', str(out), '--quiet']) in (0, 1)


def test_tune_without_output_prints_the_file(setup, capsys):
    """Without -o the parameter file goes to stdout and the proposals to stderr."""
    _, params, bag = setup
    assert main(['tune', str(bag), '--params', str(params)]) == 0
    captured = capsys.readouterr()
    assert build_config(parse_params_yaml(captured.out)).sensor_names == ('ahead', 'behind')
    assert 'proposed' in captured.err


def test_absence_of_close_readings_never_raises_min_range(setup):
    """Readings that never came near the blind range are no evidence for a larger one."""
    _, params, bag = setup
    config = load_config_file(params)
    flat = config.to_parameters()
    flat['sensors.ahead.min_range'] = 0.05
    lower = build_config(flat)
    proposals = by_key(propose(lower, gather([str(bag)], lower)))
    assert 'sensors.ahead.min_range' not in proposals


def test_one_sample_speed_steps_are_not_braking(tmp_path):
    """Odometry that drops to 0 in one sample (a glitch) proposes no deceleration."""
    records = []
    for k in range(200):
        t = T0 + 0.02 * k
        v = 0.8 if (k // 20) % 2 == 0 else 0.0  # 0.8 -> 0 in one sample, five times
        records.append(('/odom', 'nav_msgs/msg/Odometry', t, odometry_msg(t, v)))
    bag = write_bag(tmp_path / 'steps', records, storage='mcap')
    config = build_config({'sensor_names': ['ahead'], 'robot.footprint': [
        0.5, 0.3, 0.5, -0.3, -0.5, -0.3, -0.5, 0.3]})
    evidence = gather([str(bag)], config)
    assert evidence.decels == []
    assert 'robot.decel' not in by_key(propose(config, evidence))


def test_tighter_stale_after_stays_above_late_after_so_the_output_loads(tmp_path):
    """A recording whose readings come faster than late_after (bagkit: 10 ms periods,
    late_after 0.1 s) must not get a stale_after at or below late_after: the config rule
    late_after < stale_after would refuse the proposed file."""
    import bagkit

    params = bagkit.write_params(tmp_path / 'params.yaml')
    bag = bagkit.write_scenario(tmp_path / 'clean', faults=False)
    out = tmp_path / 'tuned.yaml'
    assert main(['tune', str(bag), '--params', str(params), '-o', str(out)]) == 0
    tuned = load_config_file(out)
    assert all(s.late_after_s < tuned.limits.stale_after_s for s in tuned.sensors)
