"""Atomic file writing: an interrupted run never leaves a half-written file or folder.

A file is written under a temporary name beside its target and renamed over it. A
folder (a model folder) is written whole beside its target and swapped in at the end:
on Linux by one atomic exchange of the two names (``renameat2`` with
``RENAME_EXCHANGE``), elsewhere by two renames, so an interrupted run leaves either
the old folder or the new one in place, never a mixture.
"""

import contextlib
import ctypes
import errno
import os
import re
import shutil
import tempfile
from pathlib import Path

__all__ = ["atomic_path", "write_bytes_atomic", "write_folder_atomic", "write_text_atomic"]


@contextlib.contextmanager
def atomic_path(target):
    """Yield a temporary path next to ``target``; rename it over ``target`` on success.

    Parameters
    ----------
    target : str or Path
        Final file name. Its folder is created if needed.

    Yields
    ------
    Path
        Where the caller writes. On an exception the temporary file is removed
        and ``target`` is left as it was.
    """
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(
        prefix=f".{target.name}.", suffix=".part", dir=target.parent
    )
    os.close(handle)
    temporary = Path(temporary)
    # mkstemp makes the file private (0600); give it the permissions a plain open() would
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(temporary, 0o666 & ~umask)
    try:
        yield temporary
        os.replace(temporary, target)
    finally:
        if temporary.exists():
            temporary.unlink()


def write_bytes_atomic(target, data):
    """Write ``data`` (bytes) to ``target`` atomically."""
    with atomic_path(target) as temporary:
        temporary.write_bytes(data)


def write_text_atomic(target, text):
    """Write ``text`` (UTF-8, ``\\n`` line ends) to ``target`` atomically."""
    write_bytes_atomic(target, text.encode("utf-8"))


def _private_mode():
    """Permissions a plain ``open`` or ``mkdir`` would give, from the umask."""
    umask = os.umask(0)
    os.umask(umask)
    return umask


def _process_alive(pid):
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _remove_abandoned(parent, name):
    """Remove staging and set-aside folders of ``name`` left by runs that were killed."""
    pattern = re.compile(rf"^\.{re.escape(name)}\.(?:new|old)-(\d+)-")
    for entry in parent.iterdir():
        match = pattern.match(entry.name)
        if match and entry.is_dir() and not entry.is_symlink() and not _process_alive(int(match.group(1))):
            shutil.rmtree(entry, ignore_errors=True)


_RENAME_EXCHANGE = 2
_AT_FDCWD = -100


def _exchange(first, second):
    """Swap two paths in one step (Linux ``renameat2``); False where that is not available."""
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    renameat2.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    renameat2.restype = ctypes.c_int
    if renameat2(_AT_FDCWD, os.fsencode(first), _AT_FDCWD, os.fsencode(second), _RENAME_EXCHANGE) == 0:
        return True
    error = ctypes.get_errno()
    if error in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP):
        return False  # a file system or kernel without the exchange
    raise OSError(error, os.strerror(error), str(second))


def write_folder_atomic(target, files):
    """Write a folder holding exactly ``files``, replacing ``target`` only at the end.

    Parameters
    ----------
    target : str or Path
        The folder. Its parent is created if needed. An existing folder of that name
        is replaced whole (the caller decides whether it may be).
    files : dict of str to bytes
        File name -> content.

    Notes
    -----
    The new folder is written as a hidden sibling ``.NAME.new-PID-*`` and swapped in;
    the old one is then removed. Siblings left by a run that was killed (its process
    id no longer runs) are removed first.
    """
    target = Path(target)
    parent = target.parent
    parent.mkdir(parents=True, exist_ok=True)
    _remove_abandoned(parent, target.name)
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}.new-{os.getpid()}-", dir=parent))
    aside = None
    try:
        # mkdtemp makes the folder private (0700): give it a plain mkdir's permissions
        os.chmod(staging, 0o777 & ~_private_mode())
        for name, data in files.items():
            (staging / name).write_bytes(data)
        if not os.path.lexists(target):
            os.rename(staging, target)
        elif _exchange(staging, target):
            aside = staging  # the old folder now sits under the staging name
        else:
            aside = Path(tempfile.mkdtemp(prefix=f".{target.name}.old-{os.getpid()}-", dir=parent))
            os.rmdir(aside)
            os.rename(target, aside)
            try:
                os.rename(staging, target)
            except BaseException:
                os.rename(aside, target)
                raise
    finally:
        if staging.exists() and staging != aside:
            shutil.rmtree(staging, ignore_errors=True)
    if aside is not None:
        shutil.rmtree(aside, ignore_errors=True)
