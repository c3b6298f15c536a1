"""Atomic file replacement: readers see the old file or the new one, never a mix."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from ..errors import HarmtrackError

__all__ = ["check_destination", "atomic_write_bytes", "AtomicFile"]

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


class AtomicFile:
    """A file written into a temporary file next to ``path`` and renamed over it by
    :meth:`commit`, so readers see the old file or the whole new one, never a mix.

    ``fh`` is the open temporary file (binary, or text with ``text=True``).
    :meth:`abort` (or any failure in :meth:`commit`) removes the temporary file
    and leaves an existing ``path`` as it was.  A replaced file keeps its
    permission bits; a new one gets ``rw-r--r--``.

    Raises
    ------
    HarmtrackError
        See :func:`check_destination`; also an operating-system failure while
        creating or committing the file, with the path in the message.
    """

    def __init__(self, path: str | os.PathLike, *, text: bool = False, encoding: str = "utf-8"):
        self.path = path = check_destination(path)
        try:
            self._mode = path.stat().st_mode & 0o7777 if path.exists() else _NEW_FILE_MODE
            fd, self.tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.",
                                            suffix=".tmp")
        except OSError as exc:
            raise HarmtrackError(f"{path}: cannot write: {exc.strerror or exc}") from None
        self.fh = (os.fdopen(fd, "w", encoding=encoding, newline="") if text
                   else os.fdopen(fd, "w+b"))

    def commit(self, *, durable: bool = True) -> Path:
        """Flush (and with ``durable`` sync) the file and rename it to its name."""
        try:
            self.fh.flush()
            if durable:
                os.fsync(self.fh.fileno())
            self.fh.close()
            os.chmod(self.tmp, self._mode)
            os.replace(self.tmp, self.path)
        except BaseException as exc:
            self.abort()
            if isinstance(exc, OSError):
                raise HarmtrackError(f"{self.path}: cannot write: {exc.strerror or exc}") from None
            raise
        if durable:
            _sync_folder(self.path.parent)
        return self.path

    def abort(self) -> None:
        """Close and remove the temporary file."""
        try:
            self.fh.close()
        except OSError:
            pass
        try:
            os.unlink(self.tmp)
        except OSError:
            pass


def atomic_write_bytes(path: str | os.PathLike, data: bytes, *, durable: bool = True) -> Path:
    """Write ``data`` to ``path`` atomically (see :class:`AtomicFile`).

    Without ``durable`` the write is still atomic for other processes and
    survives the writer being killed, but not necessarily a power cut; callers
    that validate files on their next run (the batch's resume check) save the
    two syncs per file that way.

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
    f = AtomicFile(path)
    try:
        f.fh.write(data)
    except BaseException as exc:
        f.abort()
        if isinstance(exc, OSError):
            raise HarmtrackError(f"{f.path}: cannot write: {exc.strerror or exc}") from None
        raise
    return f.commit(durable=durable)


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
