"""Offline tools: read recordings, replay them through the engine, report and tune.

Reports (``offline.html``) and proposals (``offline.tune``) are imported on their own: they
pull in matplotlib and more than a replay needs.
"""
from sonar_guard.offline.bags import BagSource, TopicInfo
from sonar_guard.offline.bagwrite import odometry_msg, range_msg, twist_msg, write_bag
from sonar_guard.offline.check import CheckRun, check_many, report_json
from sonar_guard.offline.replay import Replayer, check_bag
from sonar_guard.offline.results import BagResult, SensorSummary

__all__ = [
    'BagResult',
    'BagSource',
    'CheckRun',
    'Replayer',
    'SensorSummary',
    'TopicInfo',
    'check_bag',
    'check_many',
    'odometry_msg',
    'range_msg',
    'report_json',
    'twist_msg',
    'write_bag',
]
