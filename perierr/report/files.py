"""Result files that never mislead: checked before the work, written atomically after it.

A result file appears only complete: it is written to a temporary file in the
same folder and renamed over the target (``os.replace``, atomic on POSIX and
Windows), so an interrupted or failed run never leaves a partial file. An old
file at the target is removed when the command starts (and the command says
so), so a failed run never leaves yesterday's result looking like today's.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

from ..errors import InputError

__all__ = ["atomic_path", "atomic_write_text", "prepare_output"]


def prepare_output(path, *, option: str, remove: bool = True) -> str | None:
    """Check that ``path`` can be written, and remove an old file there.

    Parameters
    ----------
    path : str or Path
    option : str
        The option that named it (``"--json"``), for messages.
    remove : bool
        False: only check (a command checks every output and option first, and removes old files only once
        nothing more can be refused).

    Returns
    -------
    str or None
        A note when an old file was removed.

    Raises
    ------
    InputError
        If the folder does not exist, is not a folder, or cannot be written, or
        the path is a folder.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise InputError(option, str(path), "is a folder; expected a file name")
    if not folder.is_dir():
        raise InputError(option, str(path), f"the folder {str(folder)!r} does not exist; create it first")
    if not os.access(folder, os.W_OK):
        raise InputError(option, str(path), f"the folder {str(folder)!r} is not writable")
    if path.exists() or path.is_symlink():
        if path.is_symlink() or not path.is_file():
            raise InputError(option, str(path), "is not a regular file (a link, device or pipe); give a file name")
        if not remove:
            return None
        try:
            path.unlink()
        except OSError as exc:
            why = f"an old file is there and cannot be removed ({exc.strerror})"
            raise InputError(option, str(path), why) from None
        return f"removed the old {path} (the new one is written when the run completes)"
    return None


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path`` (same suffix); rename it to ``path`` if the block succeeds.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "out.txt"
    >>> with atomic_path(target) as tmp:
    ...     _ = tmp.write_text("done")
    >>> target.read_text()
    'done'
    """
    path = Path(path)
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=path.suffix or ".tmp", dir=path.parent or ".")
    os.close(fd)
    tmp = Path(name)
    try:
        yield tmp
        with open(tmp, "rb") as f:  # on disk before the rename, so that a crash leaves the old file or the new
            os.fsync(f.fileno())
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes the file private (0600): give it the usual mode
        os.replace(tmp, path)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()


def _umask() -> int:
    """The process's file-creation mask (read by setting it and putting it back)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def atomic_write_text(path, text: str) -> Path:
    """Write ``text`` to ``path`` atomically (UTF-8); returns the path."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)
