"""Build script for sonar_guard: an ament_python package that also installs with pip."""
from glob import glob

from setuptools import find_packages, setup

PACKAGE = 'sonar_guard'

setup(
    name=PACKAGE,
    version='0.1.0',
    description='Checks ultrasonic range readings and advises a speed the robot can stop within.',
    long_description=open('README.md', encoding='utf-8').read(),
    long_description_content_type='text/markdown',
    license='Apache-2.0',
    python_requires='>=3.10',
    packages=find_packages(exclude=['test', 'test.*']),
    data_files=[
        ('share/ament_index/resource_index/packages', [f'resource/{PACKAGE}']),
        (f'share/{PACKAGE}', ['package.xml']),
        (f'share/{PACKAGE}/launch', glob('launch/*.launch.*')),
        (f'share/{PACKAGE}/config', glob('config/*.yaml')),
    ],
    package_data={PACKAGE: ['py.typed']},
    install_requires=[
        'numpy>=1.21',
        'transforms3d>=0.4',
        'PyYAML>=5.4',
        'rich>=12',
        'matplotlib>=3.5',
    ],
    extras_require={
        'test': [
            'pytest>=7',
            'hypothesis>=6.50',
            'CoolProp>=6.4',
            'rosbags>=0.10',
            'colcon-common-extensions>=0.3',
            'ruff>=0.4',
            'mypy>=1.5',
            'types-PyYAML',
        ],
    },
    zip_safe=True,
    entry_points={
        'console_scripts': [
            'sonar-guard = sonar_guard.cli:main',
            'sonar_guard_node = sonar_guard.ros.node:main',
        ],
    },
)
