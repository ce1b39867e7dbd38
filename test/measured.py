"""Figures the DDS tests measure (fallback and recovery times, ...), shown at the end of a run.

``report(...)`` prints like ``print`` (visible with ``pytest -s``) and keeps the text;
``conftest.py`` lists everything kept in a section of the terminal summary, so a plain
``make test`` shows every measured recovery time too.
"""
from __future__ import annotations

LINES: list[str] = []


def report(*parts: object) -> None:
    """Print ``parts`` as print() would and keep them for the summary."""
    text = ' '.join(str(p) for p in parts)
    print(text)
    LINES.extend(line for line in text.splitlines() if line.strip())
