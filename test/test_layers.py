"""Layering and public surface: the core stays pure, facades export what they promise."""
from __future__ import annotations

import importlib
from pathlib import Path
import subprocess
import sys

import pytest

REPO = Path(__file__).resolve().parents[1]


def test_importing_the_core_loads_no_ros_bag_or_plot_library():
    """sonar_guard.core never pulls in rclpy, rosbags or matplotlib (design.md layering)."""
    code = ('import sys, sonar_guard.core; '
            'bad = [m for m in ("rclpy", "rosbags", "matplotlib") if m in sys.modules]; '
            'print(",".join(bad))')
    proc = subprocess.run([sys.executable, '-c', code], capture_output=True, text=True,
                          cwd=REPO, timeout=120, check=True)
    assert proc.stdout.strip() == ''


def test_core_modules_import_nothing_from_the_shells():
    """No core module imports ros/, offline/, sim/ or the CLI (imports point one way)."""
    for path in (REPO / 'sonar_guard' / 'core').glob('*.py'):
        text = path.read_text(encoding='utf-8')
        for shell in ('sonar_guard.ros', 'sonar_guard.offline', 'sonar_guard.sim',
                      'sonar_guard.cli', 'import rclpy', 'import rosbags'):
            assert shell not in text, f'{path.name} mentions {shell}'


def _modules_with_all() -> list[str]:
    """Every module of the package that declares __all__ (ros/ ones need rclpy)."""
    out = []
    for path in sorted((REPO / 'sonar_guard').rglob('*.py')):
        if '__all__' not in path.read_text(encoding='utf-8'):
            continue
        parts = path.relative_to(REPO).with_suffix('').parts
        out.append('.'.join(parts[:-1] if parts[-1] == '__init__' else parts))
    return out


@pytest.mark.parametrize('module', _modules_with_all())
def test_public_names_exist_and_all_is_sorted(module):
    """Every name in __all__ exists and the list is sorted (style.md facades)."""
    if module.startswith('sonar_guard.ros'):
        pytest.importorskip('rclpy', reason='rclpy is not installed (make venv brings it)')
    mod = importlib.import_module(module)
    assert list(mod.__all__) == sorted(mod.__all__)
    missing = [name for name in mod.__all__ if not hasattr(mod, name)]
    assert not missing


def test_contract_functions_are_importable_from_the_core():
    """design.md lists these functions as importable from sonar_guard.core."""
    import sonar_guard.core as core
    for name in ('speed_of_sound', 'range_from_tof', 'echo_timeout', 'blind_range',
                 'detection_latency', 'stopping_distance', 'max_safe_speed'):
        assert callable(getattr(core, name))


def test_config_error_is_a_value_error_under_the_package_root():
    """One exception root; configuration errors are also ValueErrors (style.md)."""
    from sonar_guard.errors import ConfigError, RecordingError, SonarGuardError
    assert issubclass(ConfigError, SonarGuardError) and issubclass(ConfigError, ValueError)
    assert issubclass(RecordingError, SonarGuardError)
    err = ConfigError(['a', 'b'], source='x.yaml')
    assert str(err).splitlines() == ['x.yaml: 2 problems in the parameters', '  - a', '  - b']
    assert str(ConfigError(['a'], source='x.yaml')) == 'x.yaml: a'  # one problem, one line
