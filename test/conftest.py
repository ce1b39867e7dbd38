"""Test-run wide hooks: a summary section with the figures the DDS tests measured."""
from __future__ import annotations

from typing import Any


def pytest_terminal_summary(terminalreporter: Any) -> None:
    """List what ``measured.report`` kept (fault fallback and recovery times, ...)."""
    from measured import LINES

    if LINES:
        terminalreporter.section('measured by the DDS tests (times on this machine)')
        for line in LINES:
            terminalreporter.write_line(line)
