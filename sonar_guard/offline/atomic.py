"""Write output files whole or not at all, and only where the user said."""
from __future__ import annotations

import os
from pathlib import Path
import tempfile

from sonar_guard.errors import SonarGuardError

__all__ = ['OutputError', 'check_output_path', 'write_bytes_atomic', 'write_text_atomic']


class OutputError(SonarGuardError):
    """An output file cannot be written where it was asked for."""


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def check_output_path(path: str | Path) -> Path:
    """Raise OutputError unless ``path`` can be written by :func:`write_bytes_atomic`.

    For checking every output path before long work starts: a symbolic link at ``path`` is
    refused (it could send the output somewhere the user did not name), and so is a folder
    that does not exist.
    """
    target = Path(path)
    if target.is_symlink():
        raise OutputError(f'{target}: is a symbolic link; name the real file to write')
    folder = target.parent if str(target.parent) else Path('.')
    if not folder.is_dir():
        raise OutputError(f'{target}: folder {folder} does not exist')
    return target


def write_text_atomic(path: str | Path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` whole or not at all; see :func:`write_bytes_atomic`."""
    return write_bytes_atomic(path, text.encode('utf-8'))


def write_bytes_atomic(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder, then rename.

    A reader never sees a half-written file. A symbolic link at ``path`` is refused: it
    could send the output somewhere the user did not name.
    """
    target = check_output_path(path)
    folder = target.parent if str(target.parent) else Path('.')
    fd, tmp = tempfile.mkstemp(prefix=f'.{target.name}.', suffix='.tmp', dir=folder)
    try:
        with os.fdopen(fd, 'wb') as handle:
            handle.write(data)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual permissions
        os.replace(tmp, target)
    except OSError as err:
        Path(tmp).unlink(missing_ok=True)
        raise OutputError(f'{target}: cannot write: {err.strerror or err}') from None
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return target
