"""colcon builds the package as ament_python and installs it where ROS 2 tools look for it.

The sources are copied into a temporary workspace (`src/sonar_guard`) and built there, so the
checkout stays clean. One build serves every test in this module.
"""
from __future__ import annotations

import os
from pathlib import Path
import shutil
import subprocess
import sys

import pytest

REPO = Path(__file__).resolve().parents[2]
PACKAGE = 'sonar_guard'
# What a release of the package consists of (setup.py reads README.md and globs launch/, config/).
SOURCES = ('package.xml', 'setup.py', 'setup.cfg', 'README.md', 'resource', PACKAGE, 'launch',
           'config')
NOT_SOURCES = shutil.ignore_patterns('__pycache__', '*.pyc', '*.egg-info', '.mypy_cache',
                                     '.pytest_cache', '.hypothesis', '.ruff_cache')
BUILD_TIMEOUT_S = 300.0
SMALL_TIMEOUT_S = 60.0


def _colcon() -> str:
    """Return the colcon beside this interpreter (the venv), else the one on PATH; else skip."""
    found = (shutil.which('colcon', path=str(Path(sys.executable).parent))
             or shutil.which('colcon'))
    if found is None:
        pytest.skip('colcon is not installed: pip install colcon-common-extensions '
                    "(pip install -e '.[test]' brings it; a ROS 2 install has it too)")
    return found


def _run(args: list[str], cwd: Path, env: dict[str, str], timeout_s: float):
    """Run a command, returning the CompletedProcess with stdout and stderr merged."""
    return subprocess.run(args, cwd=cwd, env=env, stdout=subprocess.PIPE,
                          stderr=subprocess.STDOUT, text=True, timeout=timeout_s, check=False)


def _show(proc: subprocess.CompletedProcess) -> str:
    """Format a finished command and its output for an assertion message."""
    return f'$ {" ".join(proc.args)}\nexit code {proc.returncode}\n{proc.stdout}'


class Workspace:
    """A colcon workspace in a temporary directory holding a copy of this package."""

    def __init__(self, root: Path) -> None:
        self.root = root
        self.src = root / 'src' / PACKAGE
        self.prefix = root / 'install' / PACKAGE  # --install-base install, isolated layout
        self.share = self.prefix / 'share' / PACKAGE
        self.colcon = _colcon()
        self.env = dict(os.environ)
        # A user's ~/.colcon/defaults.yaml must not change the build under test.
        self.env['COLCON_HOME'] = str(root / 'colcon_home')

    def copy_sources(self) -> None:
        """Copy the package's release files from the checkout into src/sonar_guard."""
        self.src.mkdir(parents=True)
        for name in SOURCES:
            source = REPO / name
            if source.is_dir():
                shutil.copytree(source, self.src / name, ignore=NOT_SOURCES)
            else:
                shutil.copy2(source, self.src / name)

    def colcon_run(self, *args: str, timeout_s: float = SMALL_TIMEOUT_S):
        """Run colcon in the workspace root with its logs under log/."""
        return _run([self.colcon, '--log-base', 'log', *args], self.root, self.env, timeout_s)

    def site_packages(self) -> Path:
        """Return install/sonar_guard/lib/python3.X/site-packages (the one the build made)."""
        found = sorted(self.prefix.glob('lib/python3.*/site-packages'))
        assert len(found) == 1, f'expected one site-packages in {self.prefix}/lib: {found}'
        return found[0]

    def sourced_env(self) -> dict[str, str]:
        """Return the environment `source install/setup.bash` gives this package, roughly."""
        env = dict(self.env)
        for key, path in (('PYTHONPATH', self.site_packages()),
                          ('AMENT_PREFIX_PATH', self.prefix)):
            env[key] = os.pathsep.join(p for p in (str(path), env.get(key, '')) if p)
        return env


@pytest.fixture(scope='module')
def workspace(tmp_path_factory) -> Workspace:
    """Build a copy of the package with colcon once; fail with colcon's output if it breaks."""
    ws = Workspace(tmp_path_factory.mktemp('colcon_ws'))
    ws.copy_sources()
    proc = ws.colcon_run(
        'build', '--base-paths', 'src', '--build-base', 'build', '--install-base', 'install',
        # Each package's whole output at its end (kept for the failure message); no popups.
        '--event-handlers', 'console_cohesion+', 'desktop_notification-',
        timeout_s=BUILD_TIMEOUT_S)
    assert proc.returncode == 0, 'colcon build failed:\n' + _show(proc)
    return ws


def test_colcon_identifies_the_package_as_ament_python(workspace):
    """colcon-ros reads package.xml's build_type, so ROS tooling builds it like other packages."""
    proc = workspace.colcon_run('list', '--base-paths', 'src')
    assert proc.returncode == 0, _show(proc)
    assert f'{PACKAGE}\tsrc/{PACKAGE}\t(ros.ament_python)' in proc.stdout, _show(proc)


def test_node_executable_is_in_lib_sonar_guard_for_ros2_run(workspace):
    """`ros2 run sonar_guard sonar_guard_node` looks in lib/<package> (setup.cfg script_dir)."""
    node = workspace.prefix / 'lib' / PACKAGE / 'sonar_guard_node'
    assert node.is_file(), f'missing {node}'
    assert os.access(node, os.X_OK), f'{node} is not executable'


def test_package_is_registered_in_the_ament_index(workspace):
    """The marker file makes `ros2 pkg list` and FindPackageShare find the package."""
    marker = workspace.prefix / 'share' / 'ament_index' / 'resource_index' / 'packages' / PACKAGE
    assert marker.is_file(), f'missing {marker}'


@pytest.mark.parametrize('relative', [
    'package.xml',
    'launch/sonar_guard.launch.py',
    'launch/sonar_guard.launch.xml',
    'config/sonar_guard.yaml',
])
def test_share_directory_holds_manifest_launch_files_and_parameters(workspace, relative):
    """`ros2 launch sonar_guard ...` and the default params_file resolve inside share/."""
    installed = workspace.share / relative
    assert installed.is_file(), f'missing {installed}'
    assert installed.read_bytes() == (REPO / relative).read_bytes(), f'{installed} differs'


def test_every_module_of_the_source_package_is_installed(workspace):
    """A subpackage without __init__.py is silently left out by find_packages: catch that."""
    site = workspace.site_packages()
    source_root = REPO / PACKAGE
    wanted = sorted(path.relative_to(REPO) for path in source_root.rglob('*')
                    if path.suffix == '.py' or path.name == 'py.typed')
    assert wanted, f'no Python files under {source_root}'
    missing = [str(path) for path in wanted if not (site / path).is_file()]
    assert not missing, f'not installed into {site}: {missing}'


def test_python_package_imports_from_the_install_tree(workspace):
    """With the install on PYTHONPATH, `import sonar_guard` loads the installed copy."""
    site = workspace.site_packages()
    assert (site / PACKAGE / '__init__.py').is_file()
    code = ('import sonar_guard, sonar_guard.core\n'
            'print(sonar_guard.__file__)\n'
            'print(sonar_guard.core.speed_of_sound(20.0))\n')
    proc = _run([sys.executable, '-c', code], workspace.root, workspace.sourced_env(),
                SMALL_TIMEOUT_S)
    assert proc.returncode == 0, _show(proc)
    first_line = proc.stdout.splitlines()[0]
    assert Path(first_line).resolve() == (site / PACKAGE / '__init__.py').resolve(), _show(proc)


def test_node_console_script_points_at_the_node_main(workspace):
    """The installed entry point of sonar_guard_node is sonar_guard.ros.node:main."""
    code = ('import importlib.metadata as md\n'
            "dist = md.distribution('sonar_guard')\n"
            "print(dist.locate_file(''))\n"
            'for ep in dist.entry_points:\n'
            "    if ep.group == 'console_scripts':\n"
            "        print(f'{ep.name}={ep.value}')\n")
    proc = _run([sys.executable, '-c', code], workspace.root, workspace.sourced_env(),
                SMALL_TIMEOUT_S)
    assert proc.returncode == 0, _show(proc)
    lines = proc.stdout.splitlines()
    assert Path(lines[0]).resolve() == workspace.site_packages().resolve(), _show(proc)
    assert 'sonar_guard_node=sonar_guard.ros.node:main' in lines[1:], _show(proc)


def test_installed_cli_script_runs(workspace):
    """The generated lib/sonar_guard/sonar-guard script starts from the install tree."""
    script = workspace.prefix / 'lib' / PACKAGE / 'sonar-guard'
    assert os.access(script, os.X_OK), f'{script} is missing or not executable'
    # Run the script with this interpreter: its shebang names colcon's, which may differ.
    proc = _run([sys.executable, str(script), '--help'], workspace.root,
                workspace.sourced_env(), SMALL_TIMEOUT_S)
    assert proc.returncode == 0, _show(proc)
    assert 'usage: sonar-guard' in proc.stdout, _show(proc)


def test_installed_parameters_are_found_through_the_ament_index(workspace):
    """Once sourced, the package finds its default parameter file in share/ (not the checkout)."""
    pytest.importorskip('ament_index_python',
                        reason='ament_index_python is not installed (make venv brings it)')
    code = ('from ament_index_python.packages import get_package_share_directory\n'
            'from sonar_guard.paths import default_params_path\n'
            "print(get_package_share_directory('sonar_guard'))\n"
            'print(default_params_path())\n')
    proc = _run([sys.executable, '-c', code], workspace.root, workspace.sourced_env(),
                SMALL_TIMEOUT_S)
    assert proc.returncode == 0, _show(proc)
    share, params = (Path(line).resolve() for line in proc.stdout.splitlines()[:2])
    assert share == workspace.share.resolve(), _show(proc)
    assert params == (workspace.share / 'config' / 'sonar_guard.yaml').resolve(), _show(proc)
