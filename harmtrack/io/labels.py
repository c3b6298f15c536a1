"""Writing and reading label files: one row per frame of a :class:`harmtrack.Track`.

Three formats, chosen by the file extension (``.csv`` when there is none) or
by ``fmt=``:

* ``.csv``  comment lines (``# `` + tool and version, ``# provenance: <JSON>``,
  ``# units: ...``), a header row, one row per frame; fixed number formats.
* ``.npz``  numpy archive: one array per frame column, the matrix
  ``harmonic_amplitudes`` (T, H) instead of the ``amp_h`` columns, and a
  ``provenance`` JSON string (see :mod:`harmtrack.io.npz_format`).
* ``.json`` ``{"provenance": ..., "columns": {name: unit}, "frames": {name: [...]}}``
  with ``null`` for missing values.

Columns
-------
| column | unit | CSV format | meaning |
|---|---|---|---|
| `time_s` | s | `%.6f` | frame centre, seconds from the start of the input |
| `f0_hz` | Hz | `%.4f` | fundamental frequency; nan where unvoiced |
| `voiced` | 0/1 | `%d` | voicing decision: 1 voiced, 0 unvoiced |
| `voicing_prob` | probability | `%.4f` | posterior probability that the frame is voiced, 0 to 1 |
| `model_order` | harmonics | `%d` | number of harmonics in the fitted model; 0 where unvoiced |
| `hnr_db` | dB | `%.2f` | harmonics-to-noise ratio under the fitted model; nan where unvoiced |
| `amp_h1` .. `amp_hH` | linear amplitude, full scale = 1 | `%.6g` | peak amplitude of harmonic k (at k * f0_hz) in input units; 0 where absent, nan where unvoiced or above the analysed band |

(The same table, generated from :data:`harmtrack.io.columns.COLUMNS`, is
returned by :func:`harmtrack.io.columns_markdown`.)  Engine tracks add the
columns of :data:`harmtrack.io.columns.ENGINE_COLUMNS`: ``rpm``, ``uneven_db``,
``uneven_flag``, and ``order_<q>`` / ``order_<q>_db`` for each engine order.

Provenance
----------
Every file records ``{"tool": "harmtrack", "version": ..., "input": {...},
"settings": {...}, "frame_s": ..., "sr": ...}``.  ``input`` holds the path,
SHA-256, sample rate, channels, frames, format and subtype of the analysed
file, or ``{"path": null}`` for a track made from an array.  There is no clock
time in a file: the same input and settings give byte-identical files.

Writes are atomic (see :func:`harmtrack.io.atomic.atomic_write_bytes`).
"""

from __future__ import annotations

import os
from pathlib import Path

from ..errors import HarmtrackError
from . import csv_format, json_format, npz_format
from .atomic import atomic_write_bytes, check_destination
from .columns import check_table, track_table
from .provenance import make_provenance

__all__ = ["FORMATS", "resolve_format", "write_labels", "read_labels", "encode_labels"]

#: Format name -> (encoder, decoder).
_CODECS = {
    "csv": (csv_format.encode, csv_format.decode),
    "npz": (npz_format.encode, npz_format.decode),
    "json": (json_format.encode, json_format.decode),
}

#: Label formats, the default first.
FORMATS: tuple[str, ...] = tuple(_CODECS)


def resolve_format(path: str | os.PathLike, fmt: str | None = None) -> str:
    """The label format for ``path``: ``fmt`` when given, else from the extension.

    Raises
    ------
    HarmtrackError
        ``fmt`` is not a known format, or it is omitted and the extension is
        neither empty nor ``.csv``, ``.npz`` or ``.json``.
    """
    known = ", ".join(FORMATS)
    if fmt is not None:
        if not isinstance(fmt, str) or fmt.lower() not in _CODECS:
            raise HarmtrackError(
                f"{os.fspath(path)}: unknown label format {fmt!r}; use one of {known}"
            )
        return fmt.lower()
    ext = Path(os.fspath(path)).suffix.lower()
    if not ext:
        return FORMATS[0]
    if ext[1:] not in _CODECS:
        raise HarmtrackError(
            f"{os.fspath(path)}: unknown label file extension {ext!r}; use .csv, .npz or .json "
            "(or name the format explicitly)"
        )
    return ext[1:]


def encode_table(table: dict, provenance: dict, *, fmt: str) -> bytes:
    """The bytes of a label file from a checked table and a complete provenance record."""
    return _CODECS[resolve_format("<labels>", fmt)][0](table, provenance)


def encode_labels(track, *, fmt: str = "csv", provenance: dict | None = None) -> bytes:
    """The bytes of a label file for ``track`` (what :func:`write_labels` writes).

    Parameters
    ----------
    track : Track
    fmt : {"csv", "npz", "json"}
    provenance : dict, optional
        Entries that replace or extend the provenance record built from the track.
    """
    fmt = resolve_format("<labels>", fmt)
    encode = _CODECS[fmt][0]
    return encode(track_table(track), make_provenance(track, extra=provenance))


def write_labels(track, path: str | os.PathLike, *, fmt: str | None = None,
                 provenance: dict | None = None) -> Path:
    """Write the frames of ``track`` to a label file, atomically.

    Parameters
    ----------
    track : Track
        The result to write.
    path : str or os.PathLike
        Destination; its folder must exist.  An existing file is replaced only
        once the new one is complete.
    fmt : {"csv", "npz", "json"}, optional
        Format; by default from the extension of ``path`` (``.csv`` if none).
    provenance : dict, optional
        Entries that replace or extend the provenance record built from the
        track (see the module documentation).

    Returns
    -------
    pathlib.Path
        The written path.

    Raises
    ------
    HarmtrackError
        Unknown format or extension, missing or unwritable folder, or a failed write;
        the message names the path.  The destination is then left untouched.
    """
    fmt = resolve_format(path, fmt)
    check_destination(path)
    data = encode_labels(track, fmt=fmt, provenance=provenance)
    return atomic_write_bytes(path, data)


def read_labels(path: str | os.PathLike, *, fmt: str | None = None) -> tuple[dict, dict]:
    """Read a label file written by :func:`write_labels`.

    Parameters
    ----------
    path : str or os.PathLike
    fmt : {"csv", "npz", "json"}, optional
        Format; by default from the extension, or from the content when the
        extension is not a label extension.

    Returns
    -------
    columns : dict of ndarray
        One array per column (``time_s``, ``f0_hz``, ``voiced`` (bool),
        ``voicing_prob``, ``model_order`` (int64), ``hnr_db``, ``amp_h1`` ..
        ``amp_hH``) and ``harmonic_amplitudes`` (T, H).
    provenance : dict
        The provenance record (empty for a CSV file without one).

    Raises
    ------
    HarmtrackError
        Missing or unreadable file, or a malformed one (wrong or missing columns,
        ragged rows, times not increasing...); the message names the path.
    """
    name = os.fspath(path)
    if not os.path.exists(name):
        raise HarmtrackError(f"{name}: no such file")
    if os.path.isdir(name):
        raise HarmtrackError(f"{name}: is a folder, not a label file")
    try:
        with open(name, "rb") as fh:
            data = fh.read()
    except OSError as exc:
        raise HarmtrackError(f"{name}: cannot read: {exc.strerror or exc}") from None
    if fmt is None:
        try:
            fmt = resolve_format(name)
        except HarmtrackError:
            fmt = _sniff(data)
    else:
        fmt = resolve_format(name, fmt)
    return decode_labels(data, fmt=fmt, name=name)


def decode_labels(data: bytes, *, fmt: str, name: str = "<labels>") -> tuple[dict, dict]:
    """Columns and provenance of label-file bytes (what :func:`read_labels` returns)."""
    columns, provenance = _CODECS[resolve_format(name, fmt)][1](data, name=name)
    return check_table(columns, name=name), provenance


def _sniff(data: bytes) -> str:
    """Guess the format of label bytes from their first bytes."""
    if data[:2] == b"PK":
        return "npz"
    if data.lstrip()[:1] == b"{":
        return "json"
    return "csv"
