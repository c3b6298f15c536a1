"""Label files as numpy ``.npz`` archives with deterministic bytes.

The archive holds one ``.npy`` member per column (``time_s``, ``f0_hz``,
``voiced`` as uint8 0/1, ``voicing_prob``, ``model_order`` as int64,
``hnr_db``, ``amp_h1`` .. ``amp_hH``), the matrix ``harmonic_amplitudes``
(T, H) and ``provenance``, a 0-d unicode array holding the provenance JSON.
``numpy.load(path)`` reads it without pickling.

Members carry a fixed date and permission bits, so equal content gives equal
bytes (archives written by numpy's own savers embed the current time).
"""

from __future__ import annotations

import io
import json
import zipfile

import numpy as np

from ..errors import HarmtrackError
from .columns import table_columns
from .provenance import dumps_compact

__all__ = ["encode", "decode"]

_DATE_TIME = (1980, 1, 1, 0, 0, 0)
_MEMBER_MODE = 0o644
_COMPRESS_LEVEL = 6


def _npy_bytes(arr: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.lib.format.write_array(buf, np.asarray(arr), allow_pickle=False)
    return buf.getvalue()


def _member(name: str) -> zipfile.ZipInfo:
    info = zipfile.ZipInfo(name + ".npy", date_time=_DATE_TIME)
    info.compress_type = zipfile.ZIP_DEFLATED
    info.create_system = 3
    info.external_attr = (0o100000 | _MEMBER_MODE) << 16
    return info


def encode(table: dict, provenance: dict) -> bytes:
    """NPZ bytes of a checked table (see :func:`harmtrack.io.columns.check_table`)."""
    amps = table["harmonic_amplitudes"]
    arrays = {}
    for name in table_columns(table):
        arrays[name] = table[name].astype("<f8")
    arrays["voiced"] = table["voiced"].astype(np.uint8)
    if "uneven_flag" in table:
        arrays["uneven_flag"] = table["uneven_flag"].astype(np.uint8)
    arrays["model_order"] = table["model_order"].astype("<i8")
    arrays["harmonic_amplitudes"] = amps.astype("<f8")
    arrays["provenance"] = np.array(dumps_compact(provenance))
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", allowZip64=True) as zf:
        for name, arr in arrays.items():
            zf.writestr(_member(name), _npy_bytes(arr), compresslevel=_COMPRESS_LEVEL)
    return buf.getvalue()


def decode(data: bytes, *, name: str) -> tuple[dict, dict]:
    """Columns (unchecked) and provenance of NPZ label bytes.

    Raises
    ------
    HarmtrackError
        Not a zip archive, unreadable members, or a missing or unreadable provenance.
    """
    if data[:2] != b"PK":
        raise HarmtrackError(f"{name}: not an NPZ label file (not a zip archive)")
    try:
        with np.load(io.BytesIO(data), allow_pickle=False) as npz:
            columns = {key: npz[key] for key in npz.files}
    except (zipfile.BadZipFile, ValueError, OSError, EOFError, KeyError, TypeError) as exc:
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise HarmtrackError(f"{name}: not a readable NPZ label file ({reason})") from None
    raw = columns.pop("provenance", None)
    if raw is None:
        raise HarmtrackError(f"{name}: NPZ label file without a provenance member")
    if raw.shape != () or raw.dtype.kind != "U":
        raise HarmtrackError(f"{name}: provenance member is not a JSON string")
    try:
        provenance = json.loads(str(raw[()]))
    except json.JSONDecodeError as exc:
        raise HarmtrackError(f"{name}: provenance is not valid JSON ({exc.msg})") from None
    if not isinstance(provenance, dict):
        raise HarmtrackError(f"{name}: provenance is not a JSON object")
    return columns, provenance
