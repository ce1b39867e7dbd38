"""Write output files whole or not at all, and only where the user said."""
from __future__ import annotations

import errno
import os
from pathlib import Path
import stat
import tempfile

from sonar_guard.errors import SonarGuardError

__all__ = ['OutputError', 'check_output_path', 'os_error_advice', 'write_bytes_atomic',
           'write_text_atomic']


class OutputError(SonarGuardError):
    """An output file cannot be written where it was asked for."""


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def os_error_advice(err: OSError) -> str:
    """Return what went wrong in words a user acts on (read-only, full disk, ...)."""
    if err.errno in (errno.EACCES, errno.EPERM):
        return 'permission denied; choose a folder you can write to'
    if err.errno == errno.EROFS:
        return 'the file system is read-only; choose a writable folder'
    if err.errno == errno.ENOSPC:
        return 'no space left on the device; free some space or choose another folder'
    if err.errno == errno.ENAMETOOLONG:
        return 'the name is too long; choose a shorter one'
    return f'{err.strerror or err}; choose a writable folder on a normal file system'


def _folder_of(target: Path) -> Path:
    return target.parent if str(target.parent) else Path('.')


def check_output_path(path: str | Path) -> Path:
    """Raise OutputError unless ``path`` can be written by :func:`write_bytes_atomic`.

    For checking every output path before long work starts, so that a run never ends in
    nothing written: refused are an empty name, a symbolic link (it could send the output
    somewhere the user did not name), anything there that is not a regular file (a folder, a
    device such as /dev/null, a pipe: replacing it would destroy it), a folder that does not
    exist, and a folder where no file can be created (read-only, no permission, /proc). The
    last is found by creating and removing a temporary file there.
    """
    if str(path) == '':
        raise OutputError('an empty output path; name the file to write')
    target = Path(path)
    try:
        if target.is_symlink():
            raise OutputError(f'{target}: is a symbolic link; name the real file to write')
        if target.exists():
            mode = os.stat(target).st_mode
            if stat.S_ISDIR(mode):
                raise OutputError(f'{target}: is a folder; name a file inside it')
            if not stat.S_ISREG(mode):
                raise OutputError(f'{target}: is not a regular file (a device, pipe or '
                                  'socket); name a file to write')
        folder = _folder_of(target)
        if not folder.is_dir():
            raise OutputError(f'{target}: folder {folder} does not exist; create it first')
    except (ValueError, OSError) as err:  # a NUL byte in the name, a path too long to test
        raise OutputError(f'{path!r}: not a usable path: {err}') from None
    try:
        fd, probe = tempfile.mkstemp(prefix=f'.{target.name}.', suffix='.tmp', dir=folder)
    except OSError as err:
        raise OutputError(f'{target}: cannot write in {folder}: {os_error_advice(err)}') from None
    os.close(fd)
    os.unlink(probe)
    return target


def write_text_atomic(path: str | Path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` whole or not at all; see :func:`write_bytes_atomic`."""
    return write_bytes_atomic(path, text.encode('utf-8'))


def write_bytes_atomic(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder, then rename.

    A reader never sees a half-written file, and a failed write leaves nothing behind. What
    :func:`check_output_path` refuses is refused here too.
    """
    target = check_output_path(path)
    folder = _folder_of(target)
    tmp = ''
    try:
        fd, tmp = tempfile.mkstemp(prefix=f'.{target.name}.', suffix='.tmp', dir=folder)
        with os.fdopen(fd, 'wb') as handle:
            handle.write(data)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual permissions
        os.replace(tmp, target)
    except OSError as err:
        if tmp:
            Path(tmp).unlink(missing_ok=True)
        raise OutputError(f'{target}: cannot write: {os_error_advice(err)}') from None
    except BaseException:
        if tmp:
            Path(tmp).unlink(missing_ok=True)
        raise
    return target
