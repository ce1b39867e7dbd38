"""Documentation stays in step with the schema and the shipped parameter file."""
from __future__ import annotations

from pathlib import Path
import re

import pytest

from sonar_guard.core.config import SENSOR_FIELDS, global_specs

REPO = Path(__file__).resolve().parents[1]
README = (REPO / 'README.md').read_text(encoding='utf-8')
SHIPPED = (REPO / 'config' / 'sonar_guard.yaml').read_text(encoding='utf-8')


@pytest.mark.parametrize('spec', global_specs(), ids=lambda s: s.key)
def test_readme_parameter_table_lists_every_key_with_its_unit(spec):
    """Each global key has a README row naming its unit."""
    row = next((line for line in README.splitlines() if line.startswith(f'| `{spec.key}` |')),
               None)
    assert row is not None, f'README has no row for {spec.key}'
    assert f'| {spec.unit or "-"} |' in row


@pytest.mark.parametrize('field', [f.key for f in SENSOR_FIELDS])
def test_readme_lists_every_per_sensor_key(field):
    """Each per-sensor key appears in the README table."""
    assert re.search(rf'`sensors\.<name>\.{field}`|`\.{field}`', README)


@pytest.mark.parametrize('spec', global_specs(), ids=lambda s: s.key)
def test_shipped_parameter_file_documents_every_key(spec):
    """config/sonar_guard.yaml sets every global key, so it documents each with a comment."""
    leaf = spec.key.split('.')[-1]
    assert re.search(rf'^\s*{leaf}:', SHIPPED, re.MULTILINE), spec.key


@pytest.mark.parametrize('doc', ['README.md', 'DEVELOPERS.md'])
def test_docs_carry_no_unfinished_markers(doc):
    """No TODO/FIXME left in user-facing documents."""
    text = (REPO / doc).read_text(encoding='utf-8')
    assert 'TODO' not in text and 'FIXME' not in text
