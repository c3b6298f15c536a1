"""Label files as numpy ``.npz`` archives with deterministic bytes.

The archive holds one ``.npy`` member per frame column (``time_s``, ``f0_hz``,
``voiced`` as uint8 0/1, ``voicing_prob``, ``model_order`` as int64,
``hnr_db``), the matrix ``harmonic_amplitudes`` (T, H) (column ``k - 1`` is
the CSV column ``amp_hk``) and ``provenance``, a 0-d unicode array holding the
provenance JSON.  Engine tracks add ``rpm``, ``uneven_db``, ``uneven_flag``
(uint8), ``order_numbers`` (K,) and the matrix ``order_amplitudes`` (T, K)
(linear; the CSV's ``order_<q>_db`` columns are ``20 log10`` of it).
``numpy.load(path)`` reads it without pickling; matrices rather than one member
per column keep the archive small and quick to write.

Members carry a fixed date and permission bits, so equal content gives equal
bytes (archives written by numpy's own savers embed the current time).
"""

from __future__ import annotations

import io
import json
import zipfile

import numpy as np

from ..errors import HarmtrackError
from .columns import BASE_COLUMNS, amp_name, order_name, table_columns
from .provenance import dumps_compact

__all__ = ["encode", "decode"]

_DATE_TIME = (1980, 1, 1, 0, 0, 0)
_MEMBER_MODE = 0o644
_COMPRESS_LEVEL = 1  # labels are small; the fastest level packs them nearly as well


def _npy_bytes(arr: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.lib.format.write_array(buf, np.asarray(arr), allow_pickle=False)
    return buf.getvalue()


#: Members smaller than this are stored, not compressed: deflating a few hundred
#: bytes saves little and costs a compressor set-up each.
_STORE_BELOW = 4096


def _member(name: str, size: int) -> zipfile.ZipInfo:
    info = zipfile.ZipInfo(name + ".npy", date_time=_DATE_TIME)
    info.compress_type = zipfile.ZIP_STORED if size < _STORE_BELOW else zipfile.ZIP_DEFLATED
    info.create_system = 3
    info.external_attr = (0o100000 | _MEMBER_MODE) << 16
    return info


def encode(table: dict, provenance: dict) -> bytes:
    """NPZ bytes of a checked table (see :func:`harmtrack.io.columns.check_table`)."""
    arrays = {name: table[name].astype("<f8") for name in BASE_COLUMNS}
    arrays["voiced"] = table["voiced"].astype(np.uint8)
    arrays["model_order"] = table["model_order"].astype("<i8")
    arrays["harmonic_amplitudes"] = table["harmonic_amplitudes"].astype("<f8")
    if "rpm" in table:
        arrays["rpm"] = table["rpm"].astype("<f8")
        arrays["uneven_db"] = table["uneven_db"].astype("<f8")
        arrays["uneven_flag"] = table["uneven_flag"].astype(np.uint8)
        names = [n for n in table_columns(table) if n.startswith("order_")
                 and not n.endswith("_db")]
        arrays["order_numbers"] = np.array([float(n[len("order_"):]) for n in names], "<f8")
        arrays["order_amplitudes"] = np.stack([table[n] for n in names], axis=1).astype("<f8") \
            if names else np.zeros((table["time_s"].size, 0))
    arrays["provenance"] = np.array(dumps_compact(provenance))
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", allowZip64=True) as zf:
        for name, arr in arrays.items():
            data = _npy_bytes(arr)
            zf.writestr(_member(name, len(data)), data, compresslevel=_COMPRESS_LEVEL)
    return buf.getvalue()


def _expand(columns: dict) -> dict:
    """Per-column entries from the matrices (the table layout of the other formats)."""
    amps = columns.get("harmonic_amplitudes")
    if amps is not None and amps.ndim == 2 and "amp_h1" not in columns:
        for k in range(amps.shape[1]):
            columns[amp_name(k + 1)] = amps[:, k]
    orders = columns.pop("order_amplitudes", None)
    numbers = columns.pop("order_numbers", None)
    if orders is not None and numbers is not None and orders.ndim == 2 \
            and numbers.shape == (orders.shape[1],):
        with np.errstate(divide="ignore", invalid="ignore"):
            db = 20.0 * np.log10(orders)
        for j, q in enumerate(numbers.tolist()):
            columns[order_name(q)] = orders[:, j]
            columns[order_name(q, True)] = db[:, j]
    return columns


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
            columns = _expand({key: npz[key] for key in npz.files})
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
