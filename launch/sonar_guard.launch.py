"""Start the sonar_guard node with a parameter file.

Usage (after `colcon build` and `source install/setup.bash`)::

    ros2 launch sonar_guard sonar_guard.launch.py
    ros2 launch sonar_guard sonar_guard.launch.py params_file:=/path/to/my_robot.yaml
    ros2 launch sonar_guard sonar_guard.launch.py use_sim_time:=true log_level:=debug
    ros2 launch sonar_guard sonar_guard.launch.py --show-args

Arguments:
    params_file   ROS 2 parameter YAML for the node (default: the installed
                  config/sonar_guard.yaml, an invented demo robot: measure your own).
    use_sim_time  'true' to follow /clock, e.g. when replaying a bag with `--clock`.
    namespace     namespace of the node and of its relative topics ('' = none).
    log_level     debug, info, warn, error or fatal.

The node is named `sonar_guard`, so the top-level key of the parameter file must match it.
With a namespace the node becomes `/<namespace>/sonar_guard`: key the file `/**/sonar_guard:`
(any namespace) or `/<namespace>/sonar_guard:`; a bare `sonar_guard:` key only matches the
node without a namespace, and its parameters would then be silently ignored.

Topics are relative (`allowed_speed`, `odom`, the sensors' `sonar/...` topics, ...), so they
follow the namespace and can be remapped. The odometry topic can also be set with the
`odom_topic` parameter. To feed a controller, remap `allowed_speed` to whatever topic it
listens to. To remap an input from the command line without this file::

    ros2 run sonar_guard sonar_guard_node --ros-args \\
        --params-file /path/to/my_robot.yaml \\
        -r odom:=/wheel/odometry

To remap when including this file from another launch file (SetRemap applies to every node
started inside the group)::

    from launch.actions import GroupAction, IncludeLaunchDescription
    from launch.launch_description_sources import PythonLaunchDescriptionSource
    from launch.substitutions import PathJoinSubstitution
    from launch_ros.actions import SetRemap
    from launch_ros.substitutions import FindPackageShare

    GroupAction([
        SetRemap(src='odom', dst='/wheel/odometry'),
        SetRemap(src='sonar/front_center', dst='/ultrasound/front'),
        IncludeLaunchDescription(
            PythonLaunchDescriptionSource(PathJoinSubstitution(
                [FindPackageShare('sonar_guard'), 'launch', 'sonar_guard.launch.py'])),
            launch_arguments={'params_file': '/path/to/my_robot.yaml'}.items(),
        ),
    ])

The same arguments exist in `sonar_guard.launch.xml` for XML launch files.
"""
from launch import LaunchDescription
from launch.actions import DeclareLaunchArgument
from launch.substitutions import LaunchConfiguration, PathJoinSubstitution
from launch_ros.actions import Node
from launch_ros.parameter_descriptions import ParameterValue
from launch_ros.substitutions import FindPackageShare


def generate_launch_description():
    """Declare the arguments and the sonar_guard node."""
    params_file = LaunchConfiguration('params_file')
    use_sim_time = LaunchConfiguration('use_sim_time')
    namespace = LaunchConfiguration('namespace')
    log_level = LaunchConfiguration('log_level')

    return LaunchDescription([
        DeclareLaunchArgument(
            'params_file',
            default_value=PathJoinSubstitution(
                [FindPackageShare('sonar_guard'), 'config', 'sonar_guard.yaml']),
            description='ROS 2 parameter YAML for the sonar_guard node'),
        DeclareLaunchArgument(
            'use_sim_time', default_value='false',
            description="'true' to use simulation (/clock) time"),
        DeclareLaunchArgument(
            'namespace', default_value='',
            description="namespace of the node and its relative topics ('' for none)"),
        DeclareLaunchArgument(
            'log_level', default_value='info',
            description='logging level of the node: debug, info, warn, error or fatal'),
        Node(
            package='sonar_guard',
            executable='sonar_guard_node',
            name='sonar_guard',
            namespace=namespace,
            parameters=[
                params_file,
                # A launch argument is a string: 'false' must reach the node as a bool.
                {'use_sim_time': ParameterValue(use_sim_time, value_type=bool)},
            ],
            arguments=['--ros-args', '--log-level', log_level],
            output='screen',
            emulate_tty=True,
        ),
    ])
