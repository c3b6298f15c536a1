"""Label files as JSON.

Layout::

    {
     "provenance": {...},
     "columns": {"time_s": "s", "f0_hz": "Hz", ...},
     "frames": {
      "time_s": [0.0, 0.01, ...],
      "f0_hz": [null, 148.2, ...],
      ...
     }
    }

``columns`` gives the unit of every column, ``frames`` one list per column.
Missing values (NaN) are ``null``; ``voiced`` holds 0/1 and ``model_order``
whole numbers.  Numbers keep full double precision.  Keys of ``provenance``
are sorted; columns keep the file order of the CSV layout.
"""

from __future__ import annotations

import json
import math

from ..errors import HarmtrackError
from .columns import table_columns, table_units
from .provenance import dumps_compact

__all__ = ["encode", "write", "decode"]


def _dump(obj) -> str:
    return json.dumps(obj, separators=(",", ":"), ensure_ascii=True, allow_nan=False)


def _values(name: str, arr) -> list:
    if name in ("voiced", "model_order", "uneven_flag"):
        return [int(v) for v in arr.tolist()]
    return [v if math.isfinite(v) else None for v in arr.tolist()]


def encode(table: dict, provenance: dict) -> bytes:
    """JSON bytes of a checked table (see :func:`harmtrack.io.columns.check_table`)."""
    import io

    buf = io.StringIO()
    write(buf, table, provenance)
    return buf.getvalue().encode("ascii")


def write(fh, table: dict, provenance: dict) -> None:
    """Write the JSON label text of a table to the text stream ``fh``, one column at
    a time (the table's arrays may be memory-mapped: only one column's text is
    held at once)."""
    names = table_columns(table)
    fh.write("{\n"
             f' "provenance": {dumps_compact(provenance)},\n'
             f' "columns": {_dump(table_units(table))},\n'
             ' "frames": {\n')
    for i, n in enumerate(names):
        fh.write(f"  {_dump(n)}: {_dump(_values(n, table[n]))}"
                 + (",\n" if i < len(names) - 1 else "\n"))
    fh.write(" }\n}\n")


def decode(data: bytes, *, name: str) -> tuple[dict, dict]:
    """Columns (unchecked; ``null`` read as NaN later) and provenance of JSON label bytes.

    Raises
    ------
    HarmtrackError
        Not JSON, or not an object with ``provenance`` and ``frames`` objects.
    """
    try:
        doc = json.loads(data)
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        reason = getattr(exc, "msg", None) or type(exc).__name__
        raise HarmtrackError(f"{name}: not a JSON label file ({reason})") from None
    if not isinstance(doc, dict):
        raise HarmtrackError(f"{name}: not a JSON label file (top level is not an object)")
    frames = doc.get("frames")
    if not isinstance(frames, dict):
        raise HarmtrackError(f"{name}: JSON label file without a \"frames\" object")
    provenance = doc.get("provenance")
    if not isinstance(provenance, dict):
        raise HarmtrackError(f"{name}: JSON label file without a \"provenance\" object")
    for key, values in frames.items():
        if not isinstance(values, list):
            raise HarmtrackError(f"{name}: frames.{key} is not a list")
    return dict(frames), provenance
