"""The package's exception root and its few subclasses.

Bad sensor readings are data (a verdict), never exceptions. Exceptions are for misuse of an
API, bad configuration and unreadable recordings. Command-line front ends catch
:class:`SonarGuardError` only, print its one-line message and exit with code 2.
"""
from __future__ import annotations

from collections.abc import Iterable

__all__ = ['ConfigError', 'RecordingError', 'SonarGuardError']


class SonarGuardError(Exception):
    """Root of every error this package raises on purpose."""


class ConfigError(SonarGuardError, ValueError):
    """A parameter file or parameter set is unusable; ``problems`` lists every reason."""

    def __init__(self, problems: Iterable[str], *, source: str = '') -> None:
        self.problems: tuple[str, ...] = tuple(problems) or ('invalid configuration',)
        self.source = source
        where = f'{source}: ' if source else ''
        count = len(self.problems)
        if count == 1:  # one problem, one line
            super().__init__(f'{where}{self.problems[0]}')
            return
        head = f'{where}{count} problems in the parameters'
        super().__init__(head + ''.join(f'\n  - {p}' for p in self.problems))


class RecordingError(SonarGuardError):
    """A recording (bag) cannot be read; the message says what and where."""
