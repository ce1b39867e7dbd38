"""Hostile command lines: each ends with exit 2 and one plain line on stderr, never a
traceback, and leaves nothing half-written behind."""
from __future__ import annotations

import os
from pathlib import Path
import shutil
import subprocess
import sys

import bagkit
import pytest

from sonar_guard.cli import main

TYPO_PARAMS = """\
sonar_guard:
  ros__parameters:
    sensor_names: [ahead]
    robot:
      decell: 0.5
"""


def _writable(folder: Path) -> bool:
    try:
        (folder / 'probe').write_text('x', encoding='utf-8')
    except OSError:
        return False
    (folder / 'probe').unlink()
    return True


@pytest.fixture(scope='module')
def world(tmp_path_factory):
    """A short recording, its parameter file, a file with a typo'd key, a text file, an empty
    folder and a read-only folder (chmod; for root, an immutable folder when chattr works)."""
    root = tmp_path_factory.mktemp('hostile')
    params = bagkit.write_params(root / 'params.yaml')
    bag = bagkit.write_scenario(root / 'clean', storage='mcap', faults=False)
    typo = root / 'typo.yaml'
    typo.write_text(TYPO_PARAMS, encoding='utf-8')
    text = root / 'notes.txt'
    text.write_text('not a recording\n', encoding='utf-8')
    (root / 'empty').mkdir()
    readonly = root / 'readonly'
    readonly.mkdir()
    os.chmod(readonly, 0o555)
    immutable = False
    if _writable(readonly) and shutil.which('chattr'):  # root ignores the mode bits
        immutable = subprocess.run(['chattr', '+i', str(readonly)], capture_output=True,
                                   check=False).returncode == 0
    yield {'root': root, 'bag': bag, 'params': params, 'typo': typo, 'text': text,
           'empty': root / 'empty', 'readonly': readonly,
           'readonly_works': not _writable(readonly)}
    if immutable:
        subprocess.run(['chattr', '-i', str(readonly)], check=False)
    os.chmod(readonly, 0o755)


# (arguments, words the one line must hold). {bag}, {params}, {typo}, {text}, {empty},
# {readonly}, {root} are filled in from the fixture.
HOSTILE = {
    # output paths: missing folder, read-only folder, not a real file system location, a
    # device, a folder, an empty name
    'check --json into a missing folder':
        (['check', '{bag}', '--params', '{params}', '--json', '{root}/nope/r.json'],
         'does not exist'),
    'check --html into a missing folder':
        (['check', '{bag}', '--params', '{params}', '--html', '{root}/nope/r.html'],
         'does not exist'),
    'check --json into a read-only folder':
        (['check', '{bag}', '--params', '{params}', '--json', '{readonly}/r.json'],
         'cannot write'),
    'check --html into a read-only folder':
        (['check', '{bag}', '--params', '{params}', '--html', '{readonly}/r.html'],
         'cannot write'),
    'check --json into /proc':
        (['check', '{bag}', '--params', '{params}', '--json', '/proc/self/r.json'],
         'cannot write'),
    'check --html onto /dev/null':
        (['check', '{bag}', '--params', '{params}', '--html', '/dev/null'],
         'not a regular file'),
    'check --html onto a folder':
        (['check', '{bag}', '--params', '{params}', '--html', '{root}'], 'is a folder'),
    'check --json with an empty name':
        (['check', '{bag}', '--params', '{params}', '--json', ''], 'empty'),
    'tune -o into a missing folder':
        (['tune', '{bag}', '--params', '{params}', '-o', '{root}/nope/p.yaml'],
         'does not exist'),
    'tune -o into a read-only folder':
        (['tune', '{bag}', '--params', '{params}', '-o', '{readonly}/p.yaml'], 'cannot write'),
    'tune -o into /proc':
        (['tune', '{bag}', '--params', '{params}', '-o', '/proc/self/p.yaml'], 'cannot write'),
    'tune -o onto /dev/null':
        (['tune', '{bag}', '--params', '{params}', '-o', '/dev/null'], 'not a regular file'),
    'budget --plot into /proc':
        (['budget', '--params', '{params}', '--plot', '/proc/self/l.png'], 'cannot write'),
    'demo --out under /proc': (['demo', '--out', '/proc/self/demo'], 'cannot create'),
    'demo --out in a read-only folder':
        (['demo', '--out', '{readonly}/demo'], 'cannot create'),
    # numbers that make no sense
    'budget --free-distance nan': (['budget', '--free-distance', 'nan'], '--free-distance'),
    'budget --free-distance inf': (['budget', '--free-distance', 'inf'], '--free-distance'),
    'budget --free-distance 1e400': (['budget', '--free-distance', '1e400'],
                                     '--free-distance'),
    'budget --free-distance -1': (['budget', '--free-distance', '-1'], '--free-distance'),
    'budget --free-distance 0': (['budget', '--free-distance', '0'], '--free-distance'),
    'budget --free-distance abc': (['budget', '--free-distance', 'abc'], '--free-distance'),
    'demo --duration -5': (['demo', '--duration', '-5'], '--duration'),
    'demo --duration 0': (['demo', '--duration', '0'], '--duration'),
    'demo --duration nan': (['demo', '--duration', 'nan'], '--duration'),
    'demo --duration inf': (['demo', '--duration', 'inf'], '--duration'),
    'demo --seed -1': (['demo', '--seed', '-1'], '--seed'),
    'demo --seed 1.5': (['demo', '--seed', '1.5'], '--seed'),
    'check --jobs 0': (['check', '{bag}', '--jobs', '0'], '--jobs'),
    'check --jobs -3': (['check', '{bag}', '--jobs', '-3'], '--jobs'),
    'check --jobs nan': (['check', '{bag}', '--jobs', 'nan'], '--jobs'),
    'check --jobs 2.5': (['check', '{bag}', '--jobs', '2.5'], '--jobs'),
    # inputs that are not recordings
    'tune a missing file': (['tune', '{root}/missing.mcap', '--params', '{params}'],
                            'no such file'),
    'tune a folder without a recording': (['tune', '{empty}', '--params', '{params}'],
                                          'metadata.yaml'),
    'tune a text file': (['tune', '{text}', '--params', '{params}'], 'unknown recording type'),
    'check a missing file': (['check', '{root}/missing.mcap'], 'no such file'),
    'check a folder without a recording': (['check', '{empty}'], 'metadata.yaml'),
    'check a text file': (['check', '{text}'], 'unknown recording type'),
    # parameters
    'check with a missing parameter file': (['check', '{bag}', '--params', '{root}/none.yaml'],
                                            'not found'),
    'check with a typo in a key':
        (['check', '{bag}', '--params', '{typo}'],
         'unknown key robot.decell (did you mean robot.decel?)'),
    'budget with a typo in a key':
        (['budget', '--params', '{typo}'],
         'unknown key robot.decell (did you mean robot.decel?)'),
    'tune with a typo in a key':
        (['tune', '{bag}', '--params', '{typo}'],
         'unknown key robot.decell (did you mean robot.decel?)'),
    # the command line itself
    'no command': ([], 'name a command'),
    'unknown command': (['inspect'], 'invalid choice'),
    'check without a recording': (['check'], 'required'),
    'check --fail-on an unknown kind': (['check', '{bag}', '--fail-on', 'bogus'], 'bogus'),
    'tune --cmd-topic not a topic': (['tune', '{bag}', '--cmd-topic', 'two words'],
                                     '--cmd-topic'),
}


def _fill(args: list[str], world: dict) -> list[str]:
    return [a.format(**{k: str(v) for k, v in world.items()}) for a in args]


def _left_behind(world: dict) -> list[str]:
    """Files a failed run may have left: temporary files and outputs in the test folders."""
    return sorted(str(p.relative_to(world['root'])) for p in world['root'].rglob('*')
                  if p.name.endswith('.tmp') or p.suffix in ('.json', '.html', '.png')
                  or p.name in ('p.yaml', 'demo'))


@pytest.mark.parametrize('case', HOSTILE, ids=list(HOSTILE))
def test_hostile_command_line_exits_2_with_one_line(world, capsys, case):
    """Exit 2; stderr is exactly one line naming the problem; no traceback; nothing written."""
    args, words = HOSTILE[case]
    if '{readonly}' in ' '.join(args) and not world['readonly_works']:
        pytest.skip('no way to make a read-only folder here (root without chattr)')
    code = main(_fill(args, world))
    out, err = capsys.readouterr()
    assert code == 2, (out, err)
    lines = err.strip('\n').splitlines()
    assert len(lines) == 1, err
    assert words in lines[0], lines[0]
    assert 'Traceback' not in out + err
    assert _left_behind(world) == []


def test_a_bad_output_path_stops_the_run_before_any_output_is_written(world, capsys):
    """--json fine, --html impossible: exit 2 and the JSON is not written either."""
    good = world['root'] / 'fine.json'
    code = main(['check', str(world['bag']), '--params', str(world['params']),
                 '--json', str(good), '--html', '/proc/self/r.html'])
    assert code == 2 and not good.exists()
    assert len(capsys.readouterr().err.strip().splitlines()) == 1


@pytest.mark.parametrize('args', [
    ['budget', '--free-distance', 'nan'],
    ['demo', '--duration', '-5'],
    ['check', '/no/such/recording.mcap'],
])
def test_the_installed_command_prints_one_line_too(args):
    """The console script itself (not only main()): exit 2, one line, no traceback."""
    exe = Path(sys.executable).parent / 'sonar-guard'
    command = [str(exe)] if exe.exists() else [sys.executable, '-m', 'sonar_guard']
    done = subprocess.run([*command, *args], capture_output=True, text=True, timeout=60,
                          check=False)
    assert done.returncode == 2, done
    assert len(done.stderr.strip().splitlines()) == 1, done.stderr
    assert 'Traceback' not in done.stdout + done.stderr
