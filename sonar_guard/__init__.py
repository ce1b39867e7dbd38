"""sonar_guard: checks ultrasonic range readings and advises a speed the robot can stop within.

A monitoring and speed-advice aid, not a certified safety function. See README.md.
"""
__version__ = '0.1.0'

SAFETY_CAUTION = (
    'sonar_guard is a monitoring and speed-advice aid, not a certified safety function. '
    'Ultrasonic sensing misses steep or smooth surfaces that reflect the pulse away, '
    'sound-absorbing materials, thin objects, anything inside the blind zone, and readings '
    "corrupted by crosstalk. Follow ISO 3691-4, ISO 13482, ANSI/RIA R15.08, the robot's own "
    'risk assessment, local codes and qualified safety practice.'
)

__all__ = ['SAFETY_CAUTION', '__version__']
