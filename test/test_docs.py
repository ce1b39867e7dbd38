"""Documentation stays in step with the schema, the shipped parameter file and itself."""
from __future__ import annotations

from pathlib import Path
import re

import pytest

from sonar_guard.core.config import SENSOR_FIELDS, global_specs

REPO = Path(__file__).resolve().parents[1]
README_PATH = REPO / 'README.md'
DEVELOPERS_PATH = REPO / 'DEVELOPERS.md'
DOCS = REPO / 'docs'
DOC_PAGES = sorted(DOCS.glob('*.md'))
PARAMETERS_PATH = DOCS / 'parameters.md'
README_MAX_LINES = 150  # the README is the front page; details live in docs/
SHIPPED = (REPO / 'config' / 'sonar_guard.yaml').read_text(encoding='utf-8')

# Markdown: fenced code blocks and inline code spans hold no links.
FENCE = re.compile(r'^(```|~~~).*?^\1', re.MULTILINE | re.DOTALL)
CODE_SPAN = re.compile(r'`[^`\n]*`')
INLINE_LINK = re.compile(r'!?\[[^\]\n]*\]\(\s*<?([^)\s>]+)>?(?:\s+"[^"]*")?\s*\)')
REFERENCE_LINK = re.compile(r'^\s{0,3}\[[^\]\n]+\]:\s*<?(\S+?)>?(?:\s+.*)?$', re.MULTILINE)
SCHEME = re.compile(r'^[A-Za-z][A-Za-z0-9+.-]*:')

# Where a remap names its target: `from:=to` (ros2 run, launch arguments), SetRemap(dst=...),
# XML <remap>/<set_remap to="...">, remappings=[(from, to)], YAML launch `to: ...`.
REMAP_TARGETS = (
    re.compile(r':=\s*["\']?([^\s"\'`,)\]]+)'),
    re.compile(r'\bdst\s*=\s*["\']([^"\']+)["\']'),
    re.compile(r'\bto\s*=\s*["\']([^"\']+)["\']'),
    re.compile(r'\(\s*["\'][^"\'\n]+["\']\s*,\s*["\']([^"\'\n]+)["\']\s*\)'),
    re.compile(r'\bto:\s*["\']?([^\s"\'},\]]+)'),
)
BORROWED_TOPIC = 'speed_limit'  # a well-known stack's input; our output is allowed_speed


def _read(path: Path) -> str:
    """Return a UTF-8 text file."""
    return path.read_text(encoding='utf-8')


def _relative_links(markdown: str) -> list[str]:
    """Return the targets of the links and images in ``markdown`` that are not URLs."""
    prose = CODE_SPAN.sub('', FENCE.sub('', markdown))
    targets = INLINE_LINK.findall(prose) + REFERENCE_LINK.findall(prose)
    return [t for t in targets if not SCHEME.match(t)]


def _slug(heading: str) -> str:
    """Return the anchor GitHub gives a heading: lower case, punctuation dropped, '-' for ' '."""
    text = heading.strip().lower().replace('`', '')
    return re.sub(r'[^\w\- ]', '', text).replace(' ', '-')


def _anchors(markdown: str) -> set[str]:
    """Return the anchors of the headings of ``markdown`` (outside code blocks)."""
    return {_slug(m.group(1)) for m in
            re.finditer(r'^#{1,6}\s+(.+?)\s*#*\s*$', FENCE.sub('', markdown), re.MULTILINE)}


def _broken_links(path: Path) -> list[str]:
    """Return each relative link of the Markdown file ``path`` that leads nowhere, with why."""
    broken = []
    for target in _relative_links(_read(path)):
        file_part, _, fragment = target.partition('#')
        resolved = (path.parent / file_part).resolve() if file_part else path
        if not resolved.exists():
            broken.append(f'{target}: no such file {resolved}')
        elif fragment and resolved.suffix == '.md' and fragment not in _anchors(_read(resolved)):
            broken.append(f'{target}: no heading with anchor #{fragment} in {resolved.name}')
    return broken


def _remap_targets(text: str) -> list[str]:
    """Return every remap target written in ``text``, as written."""
    return [m.group(1) for pattern in REMAP_TARGETS for m in pattern.finditer(text)]


def _remaps_onto(text: str, topic: str) -> list[str]:
    """Return the remap targets in ``text`` whose last name is ``topic`` (any namespace)."""
    return [t for t in _remap_targets(text)
            if t.strip('.;:`\'"').rstrip('/').split('/')[-1] == topic]


def _parameter_row(text: str, key: str) -> list[str] | None:
    """Return the cells of the table row of ``key`` in ``text``, or None without one."""
    row = next((line for line in text.splitlines() if line.startswith(f'| `{key}` |')), None)
    return None if row is None else [cell.strip() for cell in row.strip().strip('|').split('|')]


# -- the parameter page and the shipped parameter file -------------------------------------

@pytest.mark.parametrize('spec', global_specs(), ids=lambda s: s.key)
def test_parameter_page_lists_every_key_with_its_unit(spec):
    """Each global key has a row in docs/parameters.md whose unit column is its unit."""
    cells = _parameter_row(_read(PARAMETERS_PATH), spec.key)
    assert cells is not None, f'docs/parameters.md has no row for {spec.key}'
    assert cells[1] == (spec.unit or '-'), f'{spec.key}: unit {cells[1]!r}, want {spec.unit!r}'


@pytest.mark.parametrize('field', [f.key for f in SENSOR_FIELDS])
def test_parameter_page_lists_every_per_sensor_key(field):
    """Each per-sensor key appears in the table of docs/parameters.md."""
    text = _read(PARAMETERS_PATH)
    assert re.search(rf'`sensors\.<name>\.{field}`|`\.{field}`', text), field


def test_parameter_row_reads_the_unit_column_not_any_cell():
    """A unit that only appears in another column does not count as the key's unit."""
    table = '| `limits.margin` | - | `0.1` | >= 0 and <= 10 m | m kept free |'
    assert _parameter_row(table, 'limits.margin')[1] == '-'
    assert _parameter_row(table, 'limits.other') is None


@pytest.mark.parametrize('spec', global_specs(), ids=lambda s: s.key)
def test_shipped_parameter_file_documents_every_key(spec):
    """config/sonar_guard.yaml sets every global key, so it documents each with a comment."""
    leaf = spec.key.split('.')[-1]
    assert re.search(rf'^\s*{leaf}:', SHIPPED, re.MULTILINE), spec.key


# -- README and docs/ -----------------------------------------------------------------------

def test_docs_folder_holds_the_pages_readme_points_to():
    """docs/ exists with the parameter page among its Markdown pages."""
    assert PARAMETERS_PATH in DOC_PAGES, f'no {PARAMETERS_PATH} among {DOC_PAGES}'


def test_readme_is_under_the_line_limit():
    """README stays a short front page; details go into docs/."""
    lines = len(_read(README_PATH).splitlines())
    assert lines < README_MAX_LINES, f'README.md has {lines} lines (limit {README_MAX_LINES})'


@pytest.mark.parametrize('page', DOC_PAGES, ids=lambda p: p.name)
def test_readme_links_every_docs_page(page):
    """Every docs/*.md page is reachable from README with a relative link."""
    linked = {(REPO / t.partition('#')[0]).resolve() for t in _relative_links(_read(README_PATH))}
    assert page.resolve() in linked, f'README.md does not link docs/{page.name}'


@pytest.mark.parametrize('page', DOC_PAGES, ids=lambda p: p.name)
def test_docs_page_opens_with_a_title_and_one_line_saying_what_it_holds(page):
    """A page starts '# Title', a blank line, one line of summary, then a blank line."""
    lines = _read(page).splitlines()
    assert len(lines) >= 4 and lines[0].startswith('# '), f'{page.name}: no title line'
    assert lines[1] == '' and lines[2].strip() and lines[3] == '', (
        f'{page.name}: the title must be followed by one summary line and a blank line')
    assert not lines[2].startswith(('#', '|', '-', '*', '`')), f'{page.name}: {lines[2]!r}'


def test_readme_keeps_the_safety_caution():
    """README says what the package is not and which standards and practice come first."""
    text = re.sub(r'[\s>]+', ' ', _read(README_PATH))
    for phrase in ('not a certified safety function', 'blind zone', 'crosstalk',
                   'ISO 3691-4', 'ISO 13482', 'ANSI/RIA R15.08', 'risk assessment',
                   'local codes', 'qualified safety practice'):
        assert phrase in text, phrase


@pytest.mark.parametrize('doc', [README_PATH, DEVELOPERS_PATH, *DOC_PAGES],
                         ids=lambda p: str(p.relative_to(REPO)))
def test_relative_links_resolve(doc):
    """Every relative link (and its #anchor, if any) leads to an existing file and heading."""
    assert _broken_links(doc) == []


@pytest.mark.parametrize(('markdown', 'broken'), [
    ('[p](docs/missing.md)', 1),
    ('![plot](docs/missing.png)', 1),
    ('[p][ref]\n\n[ref]: docs/missing.md\n', 1),
    ('[self](#no-such-heading)\n\n# Title\n', 1),
    ('[self](#title)\n\n# Title\n', 0),
    ('[web](https://example.invalid/x.md) `[code](missing.md)`', 0),
    ('```\n[code](missing.md)\n```\n', 0),
])
def test_link_check_finds_broken_links(tmp_path, markdown, broken):
    """The link check itself: missing files and anchors count, URLs and code do not."""
    page = tmp_path / 'page.md'
    page.write_text(markdown, encoding='utf-8')
    assert len(_broken_links(page)) == broken, _broken_links(page)


@pytest.mark.parametrize('doc', [README_PATH, DEVELOPERS_PATH, *DOC_PAGES],
                         ids=lambda p: str(p.relative_to(REPO)))
def test_docs_carry_no_unfinished_markers(doc):
    """No TODO/FIXME left in user-facing documents."""
    text = _read(doc)
    assert 'TODO' not in text and 'FIXME' not in text


# -- our own topic names --------------------------------------------------------------------

def _shipped_text_files() -> list[Path]:
    """Return README, the docs pages and the launch and config files."""
    files = [README_PATH, *DOC_PAGES]
    for folder in ('launch', 'config'):
        files += sorted(p for p in (REPO / folder).iterdir() if p.is_file())
    return files


def test_shipped_text_files_include_launch_and_config():
    """The remap check below really reads the launch files and the parameter file."""
    names = {p.relative_to(REPO).as_posix() for p in _shipped_text_files()}
    assert {'README.md', 'launch/sonar_guard.launch.py', 'launch/sonar_guard.launch.xml',
            'config/sonar_guard.yaml'} <= names


@pytest.mark.parametrize('path', _shipped_text_files(), ids=lambda p: str(p.relative_to(REPO)))
def test_no_example_remaps_onto_a_borrowed_speed_limit_topic(path):
    """Examples keep our own output names; none remaps onto another stack's speed_limit."""
    assert _remaps_onto(_read(path), BORROWED_TOPIC) == []


@pytest.mark.parametrize(('text', 'found'), [
    ('ros2 run sonar_guard sonar_guard_node --ros-args -r allowed_speed:=/speed_limit', 1),
    ('`-r allowed_speed:=speed_limit`', 1),
    ("SetRemap(src='allowed_speed', dst='/robot/speed_limit')", 1),
    ('<set_remap from="allowed_speed" to="speed_limit"/>', 1),
    ('<remap from="allowed_speed" to="/speed_limit" />', 1),
    ("remappings=[('allowed_speed', '/speed_limit')]", 1),
    ('remap:\n  - {from: allowed_speed, to: /speed_limit}', 1),
    ('-r odom:=/wheel/odometry -r allowed_speed:=/base/allowed_speed', 0),
    ("SetRemap(src='odom', dst='/speed_limit_odom')", 0),
])
def test_remap_check_finds_remaps_onto_speed_limit(text, found):
    """The remap check itself: every way of writing a remap is read, other names pass."""
    assert len(_remaps_onto(text, BORROWED_TOPIC)) == found
