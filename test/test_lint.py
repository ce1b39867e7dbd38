"""Linters: ruff always (it is a test dependency); the ament linters where ROS provides them."""
from __future__ import annotations

import importlib.util
from pathlib import Path
import shutil
import subprocess
import sys

import pytest

REPO = Path(__file__).resolve().parents[1]


def test_ruff_finds_nothing():
    """ruff check with the project's ruff.toml (line length 99, import order, quotes)."""
    ruff = shutil.which('ruff', path=str(Path(sys.executable).parent)) or shutil.which('ruff')
    if ruff is None:
        pytest.skip('ruff is not installed (pip install -e .[test] brings it)')
    proc = subprocess.run([ruff, 'check', 'sonar_guard', 'test', 'launch', 'bench', 'setup.py'],
                          cwd=REPO, capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stdout + proc.stderr


@pytest.mark.parametrize('module', ['ament_flake8', 'ament_pep257'])
def test_ament_linter(module):
    """The ament linters a ROS 2 build farm runs (skipped where ament_lint is not installed)."""
    if importlib.util.find_spec(module) is None:
        pytest.skip(f'{module} is not installed (it comes with a full ROS 2 install)')
    main = importlib.import_module(f'{module}.main').main
    assert main(argv=[str(REPO / 'sonar_guard'), str(REPO / 'test')]) == 0


def test_core_type_checks_strictly():
    """mypy --strict on the pure core (style.md: typed results, mypy on core/)."""
    if importlib.util.find_spec('mypy') is None:
        pytest.skip('mypy is not installed (pip install -e .[test] brings it)')
    proc = subprocess.run([sys.executable, '-m', 'mypy', 'sonar_guard/core'], cwd=REPO,
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stdout + proc.stderr
