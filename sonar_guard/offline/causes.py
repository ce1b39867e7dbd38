"""Why each kind of finding happens, in one sentence a technician reads.

One table for every report (terminal, HTML, the demo's summary), so a kind is explained the
same way everywhere.
"""
from __future__ import annotations

__all__ = ['EVENT_CAUSES']

EVENT_CAUSES: dict[str, str] = {
    'blind': 'something was nearer than the sensor can measure (inside its blind range), '
             'or the sensor reported -inf',
    'no_echo': 'an echo that was closing in was lost (a smooth surface turned the pulse '
               'away, or the object came inside the blind range); it is remembered as an '
               'obstacle until a trusted echo',
    'invalid': 'readings were discarded: NaN or negative ranges, message fields that '
               'disagree with the parameters, or stamps out of order',
    'stale': 'a sensor or the odometry was silent, or its messages were too old on arrival',
    'stuck': 'a range stayed the same while the robot moved along the beam enough to change '
             'it',
    'jump': 'a range changed faster than anything there can move: an object entered or left '
            'the beam between two readings, or a stray echo',
    'late': 'readings arrived later after their stamp than the timing budget allows',
    'slot_clash': 'two sensors had pulses in the air at once where the firing order says they '
                  'should not: each may hear the other',
    'overspeed': 'the robot stayed faster than the allowed speed for longer than reaction and '
                 'braking allow: it did not slow down, or the limit fell faster than it can '
                 'brake',
}
"""Kind of finding -> why it happens (one sentence, no final full stop)."""
