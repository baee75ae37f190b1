"""Atomic file writing: an interrupted run never leaves a half-written file."""

import contextlib
import os
import tempfile
from pathlib import Path

__all__ = ["atomic_path", "write_bytes_atomic", "write_text_atomic"]


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
