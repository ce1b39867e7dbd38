"""Where installed files live: the default parameter file in a checkout, a venv or colcon."""
from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
import sys

__all__ = ['default_params_path']

_PACKAGE = 'sonar_guard'
_FILE = 'sonar_guard.yaml'


def _candidates() -> Iterator[Path]:
    yield Path(__file__).resolve().parent.parent / 'config' / _FILE  # source checkout
    try:
        from ament_index_python.packages import get_package_share_directory
        yield Path(get_package_share_directory(_PACKAGE)) / 'config' / _FILE  # colcon install
    except (ImportError, LookupError, OSError, ValueError):
        pass  # not on a ROS install, or this package is not in the ament index
    yield Path(sys.prefix) / 'share' / _PACKAGE / 'config' / _FILE  # pip install (data_files)


def default_params_path() -> Path:
    """Return the path of the installed default parameter file (config/sonar_guard.yaml)."""
    last = None
    for path in _candidates():
        if path.is_file():
            return path
        last = path
    assert last is not None
    return last
