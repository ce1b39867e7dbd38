"""Output paths are never followed through symbolic links: every command refuses a link planted
where it would write, with exit 2 and one line, and leaves the link's target untouched."""
from __future__ import annotations

import ast
import os
from pathlib import Path
import re

import bagkit
import pytest

from sonar_guard.cli import main

REPO = Path(__file__).resolve().parents[1]
PACKAGE = REPO / 'sonar_guard'


@pytest.fixture(scope='module')
def inputs(tmp_path_factory):
    """A short clean recording and its parameter file."""
    root = tmp_path_factory.mktemp('inputs')
    params = bagkit.write_params(root / 'params.yaml')
    bag = bagkit.write_scenario(root / 'clean', storage='mcap', faults=False)
    return str(bag), str(params)


# Every output path of every command: (arguments with {out} where the output goes, which
# path under the working folder the link is planted at, whether {out} names a folder).
OUTPUTS = {
    'check --json': (['check', '{bag}', '--params', '{params}', '--json', '{out}', '--quiet'],
                     'report.json', False),
    'check --html': (['check', '{bag}', '--params', '{params}', '--html', '{out}', '--quiet'],
                     'report.html', False),
    'tune -o': (['tune', '{bag}', '--params', '{params}', '-o', '{out}'], 'params.yaml', False),
    'tune --output': (['tune', '{bag}', '--params', '{params}', '--output', '{out}'],
                      'params.yaml', False),
    'budget --plot': (['budget', '--params', '{params}', '--plot', '{out}', '--json'],
                      'layout.png', False),
    'demo --out': (['demo', '--out', '{out}', '--duration', '1'], 'demo', True),
    'demo --out: its report.json': (['demo', '--out', '{out}', '--duration', '1'],
                                    'demo/report.json', True),
    'demo --out: its report.html': (['demo', '--out', '{out}', '--duration', '1'],
                                    'demo/report.html', True),
    'demo --out: its recording': (['demo', '--out', '{out}', '--duration', '1'],
                                  'demo/corridor_run', True),
}


def snapshot(path: Path) -> object:
    """Return what is at ``path`` (not following a link there): content, times, listing."""
    if not os.path.lexists(path):
        return None
    if path.is_dir() and not path.is_symlink():
        return sorted((str(p.relative_to(path)), snapshot(p)) for p in path.rglob('*'))
    st = os.lstat(path)
    content = os.readlink(path) if path.is_symlink() else path.read_bytes()
    return (content, st.st_mtime_ns, st.st_size)


def make_target(root: Path, kind: str) -> Path:
    """Return where the planted link points: an existing file or folder, or nothing."""
    if kind == 'file':
        target = root / 'elsewhere' / 'precious.txt'
        target.parent.mkdir()
        target.write_text('not yours to overwrite\n', encoding='utf-8')
    elif kind == 'folder':
        target = root / 'elsewhere'
        target.mkdir()
        (target / 'precious.txt').write_text('not yours to overwrite\n', encoding='utf-8')
    else:
        target = root / 'elsewhere' / 'nothing_here'
        target.parent.mkdir()
    return target


def temporary_files(*folders: Path) -> list[str]:
    """Return the names of temporary files left in the folders (atomic writes use .tmp)."""
    return [p.name for folder in folders if folder.is_dir() for p in folder.iterdir()
            if p.name.endswith('.tmp')]


@pytest.mark.parametrize('kind', ['file', 'folder', 'dangling'])
@pytest.mark.parametrize('output', sorted(OUTPUTS))
def test_symbolic_link_at_an_output_path_is_refused_and_its_target_untouched(
        inputs, tmp_path, capsys, output, kind):
    """exit 2, one 'sonar-guard: error:' line naming the link, no traceback; the link, what it
    points to and the folders around stay exactly as they were."""
    bag, params = inputs
    argv, planted, is_folder = OUTPUTS[output]
    work = tmp_path / 'work'
    work.mkdir()
    out = work / ('demo' if is_folder else planted)
    link = work / planted
    link.parent.mkdir(exist_ok=True)
    target = make_target(tmp_path, kind)
    link.symlink_to(target)
    before = (snapshot(tmp_path / 'elsewhere'), snapshot(link), snapshot(work))

    code = main([a.format(bag=bag, params=params, out=out) for a in argv])
    err = capsys.readouterr().err

    assert code == 2, err
    assert 'Traceback' not in err
    errors = [line for line in err.splitlines() if line.startswith('sonar-guard:')]
    assert len(errors) == 1, err
    assert str(link) in errors[0] and 'symbolic link' in errors[0], errors[0]
    assert link.is_symlink() and os.readlink(link) == str(target)
    assert (snapshot(tmp_path / 'elsewhere'), snapshot(link), snapshot(work)) == before
    assert not temporary_files(work, link.parent, target.parent)


def test_check_refuses_a_linked_html_path_before_writing_the_json(inputs, tmp_path, capsys):
    """Both report paths are vetted before the check runs: no JSON written beside a refused
    HTML path, so the outputs of one run are whole or absent together."""
    bag, params = inputs
    target = make_target(tmp_path, 'file')
    (tmp_path / 'report.html').symlink_to(target)
    json_path = tmp_path / 'report.json'
    code = main(['check', bag, '--params', params, '--json', str(json_path),
                 '--html', str(tmp_path / 'report.html'), '--quiet'])
    assert code == 2
    assert not json_path.exists()
    assert target.read_text(encoding='utf-8') == 'not yours to overwrite\n'


def test_demo_removes_links_inside_its_old_recording_without_following_them(tmp_path, capsys):
    """An old demo recording folder holding a link: the folder is replaced, the link removed
    and what it pointed to kept."""
    target = make_target(tmp_path, 'file')
    old = tmp_path / 'demo' / 'corridor_run'
    old.mkdir(parents=True)
    (old / 'metadata.yaml').symlink_to(target)
    assert main(['demo', '--out', str(tmp_path / 'demo'), '--duration', '1']) == 0
    assert target.read_text(encoding='utf-8') == 'not yours to overwrite\n'
    assert not (old / 'metadata.yaml').is_symlink()
    assert (tmp_path / 'demo' / 'report.json').is_file()
    assert not temporary_files(tmp_path / 'demo')


# Calls that write files, and the only places allowed to make them: the atomic writer itself,
# the in-memory PNG, and write_bag (which only creates new paths and refuses any that exist,
# links included).
_METHODS = {'write_text', 'write_bytes', 'savefig', 'rename', 'symlink_to', 'hardlink_to',
            'write_bag', 'mkstemp'}
_MODULE_CALLS = {('os', 'replace'), ('os', 'rename'), ('shutil', 'copy'), ('shutil', 'copy2'),
                 ('shutil', 'copyfile'), ('shutil', 'copytree'), ('shutil', 'move')}
_ALLOWED = {
    ('offline/atomic.py', 'mkstemp'), ('offline/atomic.py', 'os.replace'),
    ('offline/atomic.py', 'fdopen for writing'),
    ('plots.py', 'savefig'),  # into an io.BytesIO, then write_bytes_atomic
    ('sim/demo.py', 'write_bag'), ('sim/drive.py', 'write_bag'),
}


def _writes(path: Path) -> set[tuple[str, str]]:
    """Return (module, call) for every call in a module that can write a file."""
    where = path.relative_to(PACKAGE).as_posix()
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding='utf-8'))):
        if not isinstance(node, ast.Call):
            continue
        func = node.func
        base = (func.value.id if isinstance(func, ast.Attribute)
                and isinstance(func.value, ast.Name) else '')
        name = func.attr if isinstance(func, ast.Attribute) else getattr(func, 'id', '')
        if name in _METHODS:
            found.add((where, name))
        elif (base, name) in _MODULE_CALLS:
            found.add((where, f'{base}.{name}'))
        elif name in ('open', 'fdopen'):
            modes = [a.value for a in [*node.args, *(k.value for k in node.keywords)]
                     if isinstance(a, ast.Constant) and isinstance(a.value, str)
                     and re.fullmatch(r'[rwaxbt+]+', a.value)]
            if any(set(m) & set('wax+') for m in modes):
                found.add((where, f'{name} for writing'))
    return found


def test_every_file_writer_goes_through_the_atomic_writer():
    """No module writes a file by itself (open(..., 'w'), write_text, savefig to a path, ...):
    output goes through offline/atomic.py, which refuses links."""
    found = set().union(*(_writes(p) for p in PACKAGE.rglob('*.py')))
    assert found - _ALLOWED == set()
    assert ('offline/atomic.py', 'os.replace') in found  # the scan sees the writer it allows
