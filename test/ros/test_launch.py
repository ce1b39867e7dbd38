"""launch/sonar_guard.launch.py starts a node that publishes a usable allowed_speed.

A launch_testing test: it needs a full ROS 2 install (launch, launch_ros, launch_testing) and
this package built and sourced, e.g.

    colcon build --packages-select sonar_guard && source install/setup.bash
    launch_test test/ros/test_launch.py        # or: python -m pytest test/ros/test_launch.py

Under pytest, launch_testing's plugin runs this file because `generate_test_description` is
marked `launch_test`. Without launch_testing (the pip-only development venv) the module skips.
"""
import importlib.util
import math
import os
from pathlib import Path
import signal
import time
import unittest

import pytest

_NEEDED = ('ament_index_python', 'launch', 'launch_ros', 'launch_testing', 'rclpy', 'std_msgs',
           'yaml')
# origin None: only a namespace package, e.g. this repository's own launch/ directory.
_MISSING = [name for name in _NEEDED
            if getattr(importlib.util.find_spec(name), 'origin', None) is None]
if _MISSING:
    pytest.skip(f'{", ".join(_MISSING)} not installed: launch tests need a full ROS 2 install '
                '(apt install ros-<distro>-launch-testing-ros)', allow_module_level=True)

from ament_index_python.packages import PackageNotFoundError, get_package_prefix
from launch import LaunchDescription
from launch.actions import IncludeLaunchDescription, SetEnvironmentVariable
from launch.launch_description_sources import PythonLaunchDescriptionSource
import launch_testing
import launch_testing.actions
import launch_testing.asserts
import rclpy
from rclpy.context import Context
from rclpy.executors import SingleThreadedExecutor
from rclpy.qos import DurabilityPolicy, HistoryPolicy, QoSProfile, ReliabilityPolicy
from std_msgs.msg import Float64
import yaml

REPO = Path(__file__).resolve().parents[2]
LAUNCH_FILE = REPO / 'launch' / 'sonar_guard.launch.py'
PARAMS_FILE = REPO / 'config' / 'sonar_guard.yaml'
WAIT_S = 20.0  # generous: DDS discovery plus node start-up on a loaded CI machine
# The node's latched limit (../shared/design.md, Topics): reliable, transient local, depth 1.
LIMIT_QOS = QoSProfile(depth=1, history=HistoryPolicy.KEEP_LAST,
                       reliability=ReliabilityPolicy.RELIABLE,
                       durability=DurabilityPolicy.TRANSIENT_LOCAL)
# Discovery stays on this machine; an outer runner's ROS_DOMAIN_ID (launch_test, colcon test)
# is kept, otherwise this run picks its own. The same values reach the node and the probe.
ISOLATION_ENV = {
    'ROS_DOMAIN_ID': os.environ.get('ROS_DOMAIN_ID') or str(1 + os.getpid() % 100),
    'ROS_LOCALHOST_ONLY': '1',  # Humble
    'ROS_AUTOMATIC_DISCOVERY_RANGE': 'LOCALHOST',  # Jazzy and newer
}


def _why_node_cannot_start():
    """Return why the launch file cannot find the node's package, or None when it can."""
    try:
        get_package_prefix('sonar_guard')
    except (PackageNotFoundError, OSError):  # OSError: AMENT_PREFIX_PATH unset (not sourced)
        return ('sonar_guard is not in the ament index: build and source the workspace first '
                '(colcon build && source install/setup.bash)')
    return None


def _max_speed_mps(params_file):
    """Return limits.max_speed (m/s) for the sonar_guard node from a ROS 2 parameter file."""
    with open(params_file, encoding='utf-8') as stream:
        document = yaml.safe_load(stream)
    own, wildcard = [], []
    for key, section in document.items():
        parameters = (section or {}).get('ros__parameters') or {}
        value = (parameters.get('limits') or {}).get('max_speed')
        if value is None:
            continue
        if key == '/**':
            wildcard.append(value)
        elif str(key).rstrip('/').split('/')[-1] == 'sonar_guard':  # also /**/sonar_guard
            own.append(value)
    found = own or wildcard  # the node's own section overrides `/**`
    assert found, f'no limits.max_speed for sonar_guard in {params_file}'
    return float(found[-1])


@pytest.mark.launch_test
@pytest.mark.ros
def generate_test_description():
    """Include the package's launch file with the repository's parameters, then test."""
    reason = _why_node_cannot_start()
    if reason is not None:
        raise unittest.SkipTest(reason)  # launch_testing reports the whole run as skipped
    return LaunchDescription([
        *(SetEnvironmentVariable(name, value) for name, value in ISOLATION_ENV.items()),
        IncludeLaunchDescription(
            PythonLaunchDescriptionSource(str(LAUNCH_FILE)),
            launch_arguments={'params_file': str(PARAMS_FILE)}.items(),
        ),
        launch_testing.actions.ReadyToTest(),
    ])


class TestLaunchedNode(unittest.TestCase):
    """While the launch runs: the node publishes allowed_speed within its contract."""

    @classmethod
    def setUpClass(cls):
        """Start a probe node in its own rclpy context on the launch's domain."""
        cls._saved_env = {name: os.environ.get(name) for name in ISOLATION_ENV}
        os.environ.update(ISOLATION_ENV)  # rclpy reads these when the context starts
        cls.context = Context()
        rclpy.init(context=cls.context)
        cls.node = rclpy.create_node('sonar_guard_launch_probe', context=cls.context)
        cls.executor = SingleThreadedExecutor(context=cls.context)
        cls.executor.add_node(cls.node)

    @classmethod
    def tearDownClass(cls):
        """Stop the probe and give the environment back."""
        cls.executor.shutdown()
        cls.node.destroy_node()
        rclpy.shutdown(context=cls.context)
        for name, value in cls._saved_env.items():
            if value is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = value

    def test_node_publishes_allowed_speed_between_zero_and_max_speed(self):
        """A non-negative allowed_speed arrives, and nothing received exceeds limits.max_speed."""
        received = []
        subscription = self.node.create_subscription(
            Float64, 'allowed_speed', lambda msg: received.append(msg.data), LIMIT_QOS)
        try:
            deadline = time.monotonic() + WAIT_S
            while not any(value >= 0.0 for value in received) and time.monotonic() < deadline:
                self.executor.spin_once(timeout_sec=0.1)
        finally:
            self.node.destroy_subscription(subscription)
        self.assertTrue(any(value >= 0.0 for value in received),
                        f'no allowed_speed >= 0 within {WAIT_S} s; received {received}')
        # design.md, Topics: m/s, >= 0; Parameters: limits.max_speed is never exceeded.
        max_speed = _max_speed_mps(PARAMS_FILE)
        outside = [value for value in received
                   if not (math.isfinite(value) and 0.0 <= value <= max_speed)]
        self.assertEqual(outside, [], f'allowed_speed outside [0, {max_speed}] m/s')


@launch_testing.post_shutdown_test()
class TestLaunchedNodeShutdown(unittest.TestCase):
    """After the launch stops: the node exited by itself on SIGINT, without an error."""

    def test_node_exits_cleanly_on_sigint(self, proc_info):
        """Exit code 0, or the plain SIGINT exit (-2 from launch, 130 from a shell wrapper)."""
        launch_testing.asserts.assertExitCodes(proc_info, allowable_exit_codes=[
            launch_testing.asserts.EXIT_OK,
            -signal.SIGINT,
            launch_testing.asserts.EXIT_SIGINT,
        ])
