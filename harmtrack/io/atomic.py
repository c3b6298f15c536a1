"""Atomic file replacement: readers see the old file or the new one, never a mix."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from ..errors import HarmtrackError

__all__ = ["check_destination", "atomic_write_bytes"]

_NEW_FILE_MODE = 0o644


def check_destination(path: str | os.PathLike) -> Path:
    """Check that ``path`` can be created or replaced, without touching it.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    HarmtrackError
        The folder is missing, is not a folder, or is not writable, or
        ``path`` itself is a folder.
    """
    path = Path(os.fspath(path))
    folder = path.parent
    if not folder.exists():
        raise HarmtrackError(f"{path}: cannot write: folder {str(folder)!r} does not exist")
    if not folder.is_dir():
        raise HarmtrackError(f"{path}: cannot write: {str(folder)!r} is not a folder")
    if path.is_dir():
        raise HarmtrackError(f"{path}: cannot write: it is a folder")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise HarmtrackError(f"{path}: cannot write: folder {str(folder)!r} is not writable")
    return path


def atomic_write_bytes(path: str | os.PathLike, data: bytes, *, durable: bool = True) -> Path:
    """Write ``data`` to ``path`` atomically.

    The bytes go to a temporary file in the destination folder, which is
    flushed, synced to disk (with ``durable``) and renamed over ``path``.
    Without ``durable`` the write is still atomic for other processes and
    survives the writer being killed, but not necessarily a power cut; callers
    that validate files on their next run (the batch's resume check) save the
    two syncs per file that way.  On any failure the
    temporary file is removed and an existing ``path`` is left as it was.
    A replaced file keeps its permission bits; a new one gets ``rw-r--r--``.

    Returns
    -------
    pathlib.Path
        The written path.

    Raises
    ------
    HarmtrackError
        See :func:`check_destination`; also any operating-system failure while
        writing (disk full, permission denied...), with the path in the message.
    """
    path = check_destination(path)
    try:
        mode = path.stat().st_mode & 0o7777 if path.exists() else _NEW_FILE_MODE
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    except OSError as exc:
        raise HarmtrackError(f"{path}: cannot write: {exc.strerror or exc}") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            if durable:
                os.fsync(fh.fileno())
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(exc, OSError):
            raise HarmtrackError(f"{path}: cannot write: {exc.strerror or exc}") from None
        raise
    if durable:
        _sync_folder(path.parent)
    return path


def _sync_folder(folder: Path) -> None:
    """Make the rename durable where the platform allows syncing a folder."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
