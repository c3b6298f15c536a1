"""Reading reference f0 tracks: plain text with a time column and an f0 column."""

from __future__ import annotations

import os
import re

import numpy as np

from ..errors import HarmtrackError

__all__ = ["read_reference"]

_TIME_NAMES = ("time_s", "time", "t")
_F0_NAMES = ("f0_hz", "f0", "frequency_hz", "frequency")
_SPLIT = re.compile(r"[,;\s]+")


def read_reference(path: str | os.PathLike) -> tuple[np.ndarray, np.ndarray]:
    """Read a reference f0 track.

    The file is text: optional ``#`` comment lines, an optional header row,
    then one row per frame, cells separated by commas, semicolons or blanks.
    With a header, the columns named ``time_s`` (or ``time``) and ``f0_hz``
    (or ``f0``) are used, so harmtrack's own CSV labels are accepted too;
    without one, the first two columns.  Unvoiced frames hold ``nan`` or a
    value <= 0.

    Returns
    -------
    times : ndarray, shape (T,)
        Seconds, strictly increasing.
    f0 : ndarray, shape (T,)
        Hz as written (NaN or <= 0 where unvoiced).

    Raises
    ------
    HarmtrackError
        Missing or unreadable file, no time or f0 column, non-numeric cells,
        ragged rows, or times not increasing; the message names the path.
    """
    name = os.fspath(path)
    try:
        with open(name, encoding="utf-8") as fh:
            lines = fh.read().splitlines()
    except FileNotFoundError:
        raise HarmtrackError(f"{name}: no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        reason = getattr(exc, "strerror", None) or type(exc).__name__
        raise HarmtrackError(f"{name}: cannot read reference f0 file ({reason})") from None
    rows = [(i + 1, _SPLIT.split(ln.strip())) for i, ln in enumerate(lines)
            if ln.strip() and not ln.lstrip().startswith("#")]
    if not rows:
        raise HarmtrackError(f"{name}: reference f0 file holds no rows")
    t_col, f_col = 0, 1
    first = rows[0][1]
    if not _numeric(first):
        header = [h.lower() for h in first]
        t_col = _find(header, _TIME_NAMES, name, "time")
        f_col = _find(header, _F0_NAMES, name, "f0")
        rows = rows[1:]
    width = len(rows[0][1]) if rows else 0
    if width < 2 and rows:
        raise HarmtrackError(f"{name}: reference f0 file needs a time and an f0 column")
    times, f0 = [], []
    for line_no, cells in rows:
        if len(cells) != width:
            raise HarmtrackError(
                f"{name}: line {line_no} has {len(cells)} fields, expected {width}"
            )
        try:
            times.append(float(cells[t_col]))
            f0.append(float(cells[f_col]))
        except (ValueError, IndexError):
            raise HarmtrackError(f"{name}: line {line_no}: cells are not numbers") from None
    times = np.asarray(times, dtype=np.float64)
    f0 = np.asarray(f0, dtype=np.float64)
    if not np.all(np.isfinite(times)) or (times.size > 1 and not np.all(np.diff(times) > 0)):
        raise HarmtrackError(f"{name}: times are not finite and strictly increasing")
    return times, f0


def _numeric(cells: list) -> bool:
    try:
        [float(c) for c in cells]
    except ValueError:
        return False
    return True


def _find(header: list, names: tuple, path: str, what: str) -> int:
    for n in names:
        if n in header:
            return header.index(n)
    raise HarmtrackError(f"{path}: no {what} column (expected one of {', '.join(names)})")
