"""Outputs of ``harmtrack live``: the JSON-lines log and the captured audio.

The log holds one JSON object per line.  Frame lines carry the label columns
under their CSV names (``time_s``, ``f0_hz``, ``voiced``, ...); event lines
carry an ``"event"`` key (``start``, ``alarm``, ``stop``) and never a frame
column other than ``time_s``.  Lines are written in whole batches by one
``write`` on a file opened for appending, so a reader following the file
never sees a half line, and a failed write is cut back to the last whole line.

The audio goes to a hidden temporary file next to the destination, written as
it arrives and renamed over the destination once finalised, so the named
file is always a complete WAV.
"""

from __future__ import annotations

import json
import math
import os
import sys
from pathlib import Path

from .errors import HarmtrackError

__all__ = ["frame_records", "encode_lines", "JsonLinesLog", "WavRecorder", "INT_COLUMNS"]

#: Columns written as whole numbers (0/1 flags and counts).
INT_COLUMNS = ("voiced", "model_order", "uneven_flag")


def frame_records(track) -> list[dict]:
    """One dict per frame of ``track``, keyed by the label column names, in file order.

    NaN and infinite values become None (JSON ``null``); ``voiced``,
    ``model_order`` and ``uneven_flag`` are integers.

    Parameters
    ----------
    track : harmtrack.Track

    Returns
    -------
    list of dict
    """
    from .io.columns import table_columns, track_table

    if len(track) == 0:
        return []
    table = track_table(track, validate=False)
    names = table_columns(table)
    columns = []
    for name in names:
        values = table[name].tolist()
        if name in INT_COLUMNS:
            values = [int(v) for v in values]
        else:
            values = [v if math.isfinite(v) else None for v in values]
        columns.append(values)
    return [dict(zip(names, row)) for row in zip(*columns)]


def encode_lines(records) -> bytes:
    """The records as JSON lines (ASCII, one object per line, each ending in a newline)."""
    return "".join(
        json.dumps(r, separators=(",", ":"), ensure_ascii=True, allow_nan=False) + "\n"
        for r in records
    ).encode("ascii")


class JsonLinesLog:
    """Appends whole JSON lines to a file, or writes them to standard output.

    Parameters
    ----------
    target : str
        File path, or ``"-"`` for standard output.  A file is created when
        missing and appended to otherwise; it is opened at the first write.
    """

    def __init__(self, target: str):
        self.target = target
        self.to_stdout = target == "-"
        self._fd = None
        self.lines = 0

    def _open(self) -> None:
        path = self.target
        try:
            self._fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
            size = os.fstat(self._fd).st_size
            if size:
                with open(path, "rb") as fh:
                    fh.seek(size - 1)
                    last = fh.read(1)
                if last != b"\n":
                    # An earlier writer was cut off mid-line: end that line so
                    # that every line of ours parses on its own.
                    self._write_all(b"\n")
        except OSError as exc:
            raise HarmtrackError(f"{path}: cannot write: {exc.strerror or exc}") from None

    def _write_all(self, data: bytes) -> None:
        view = memoryview(data)
        while view:
            n = os.write(self._fd, view)
            view = view[n:]

    def write(self, records) -> None:
        """Write the records (frame or event dicts) as one batch of whole lines.

        Raises
        ------
        HarmtrackError
            The file cannot be written (disk full...); the file is cut back to
            its size before this batch.
        BrokenPipeError
            Standard output was closed by its reader.
        """
        data = encode_lines(records)
        if not data:
            return
        if self.to_stdout:
            out = sys.stdout
            out.write(data.decode("ascii"))
            out.flush()
            self.lines += len(records)
            return
        if self._fd is None:
            self._open()
        before = os.fstat(self._fd).st_size
        try:
            self._write_all(data)
        except OSError as exc:
            try:
                os.ftruncate(self._fd, before)
            except OSError:
                pass
            raise HarmtrackError(f"{self.target}: cannot write: {exc.strerror or exc}") from None
        self.lines += len(records)

    def close(self) -> None:
        """Sync and close the file (nothing to do for standard output)."""
        if self._fd is not None:
            fd, self._fd = self._fd, None
            try:
                os.fsync(fd)
            except OSError:
                pass
            os.close(fd)


class WavRecorder:
    """Writes captured samples to a 32-bit float WAV file, finalised on :meth:`close`.

    The samples go to a hidden ``.NAME.<pid>.part`` file in the destination's
    folder; :meth:`close` finalises its header and renames it over ``path``;
    :meth:`discard` removes it.  32-bit float keeps the exact samples the
    tracker saw.

    Parameters
    ----------
    path : str or os.PathLike
        Destination; its folder must exist and be writable.
    sr : int
        Sample rate, Hz.
    """

    def __init__(self, path, sr: int):
        import soundfile as sf

        from .io.atomic import check_destination

        self.path = check_destination(path)
        self.tmp = self.path.parent / f".{self.path.name}.{os.getpid()}.part"
        self.frames = 0
        try:
            self._file = sf.SoundFile(self.tmp, "w", samplerate=int(sr), channels=1,
                                      format="WAV", subtype="FLOAT")
        except (OSError, RuntimeError) as exc:
            raise HarmtrackError(f"{self.path}: cannot write: {exc}") from None

    def write(self, samples) -> None:
        """Append mono samples (float, full scale = 1)."""
        import numpy as np

        x = np.asarray(samples, dtype=np.float32).reshape(-1)
        if x.size == 0:
            return
        try:
            self._file.write(x)
        except (OSError, RuntimeError) as exc:
            raise HarmtrackError(f"{self.path}: cannot write: {exc}") from None
        self.frames += x.size

    def close(self) -> Path:
        """Finalise the file and move it to its name; returns the path."""
        try:
            self._file.close()
            os.replace(self.tmp, self.path)
        except (OSError, RuntimeError) as exc:
            self.discard()
            raise HarmtrackError(f"{self.path}: cannot write: {exc}") from None
        return self.path

    def discard(self) -> None:
        """Close and remove the temporary file; the destination is left as it was."""
        try:
            self._file.close()
        except Exception:  # noqa: BLE001 - already failing; remove the file regardless
            pass
        try:
            os.unlink(self.tmp)
        except FileNotFoundError:
            pass
