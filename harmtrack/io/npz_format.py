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
import struct
import zipfile
import zlib

import numpy as np

from ..errors import HarmtrackError
from .columns import BASE_COLUMNS, amp_name, order_name, table_columns
from .provenance import dumps_compact

__all__ = ["encode", "write", "decode"]

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


def _members(table: dict, provenance: dict) -> dict:
    """The archive's arrays, by member name (no copies of float64 columns)."""
    arrays = {name: np.asarray(table[name], dtype="<f8") for name in BASE_COLUMNS}
    arrays["voiced"] = np.asarray(table["voiced"]).astype(np.uint8)
    arrays["model_order"] = np.asarray(table["model_order"]).astype("<i8")
    arrays["harmonic_amplitudes"] = np.asarray(table["harmonic_amplitudes"], dtype="<f8")
    if "rpm" in table:
        arrays["rpm"] = np.asarray(table["rpm"], dtype="<f8")
        arrays["uneven_db"] = np.asarray(table["uneven_db"], dtype="<f8")
        arrays["uneven_flag"] = np.asarray(table["uneven_flag"]).astype(np.uint8)
        names = [n for n in table_columns(table) if n.startswith("order_")
                 and not n.endswith("_db")]
        arrays["order_numbers"] = np.array([float(n[len("order_"):]) for n in names], "<f8")
        arrays["order_amplitudes"] = np.stack([table[n] for n in names], axis=1).astype("<f8") \
            if names else np.zeros((table["time_s"].size, 0))
    # rows are written in C order, and the headers must say so
    arrays = {k: np.ascontiguousarray(a) for k, a in arrays.items()}
    arrays["provenance"] = np.array(dumps_compact(provenance))
    return arrays


#: Rows of a member's array written to the archive at a time.
_CHUNK_ROWS = 65536


#: Tables up to this many bytes are encoded by :func:`_archive_bytes` in memory;
#: larger ones go through :func:`write` and the zipfile module.
_IN_MEMORY_BYTES = 16 << 20


def encode(table: dict, provenance: dict) -> bytes:
    """NPZ bytes of a checked table (see :func:`harmtrack.io.columns.check_table`)."""
    members = _members(table, provenance)
    if sum(a.nbytes for a in members.values()) <= _IN_MEMORY_BYTES:
        return _archive_bytes(members)
    buf = io.BytesIO()
    write(buf, table, provenance)
    return buf.getvalue()


# ZIP records (PKWARE's APPNOTE.TXT, sections 4.3.7, 4.3.12 and 4.3.16), laid
# out as the zipfile module lays them out for the members :func:`write` makes:
# version 2.0 to extract and made by Unix, no flags, no extra fields, no comments.
_LOCAL = struct.Struct("<4s2B4HL2L2H")
_CENTRAL = struct.Struct("<4s4B4HL2L5H2L")
_END = struct.Struct("<4s4H2LH")
_VERSION = 20
_DOS_TIME = 0
_DOS_DATE = (_DATE_TIME[0] - 1980) << 9 | _DATE_TIME[1] << 5 | _DATE_TIME[2]
_ATTR = (0o100000 | _MEMBER_MODE) << 16


def _npy_header(arr: np.ndarray) -> bytes:
    head = io.BytesIO()
    np.lib.format.write_array_header_1_0(head, np.lib.format.header_data_from_array_1_0(arr))
    return head.getvalue()


def _archive_bytes(members: dict) -> bytes:
    """The archive :func:`write` makes, byte for byte, built in memory in one pass
    (the zipfile module's per-member bookkeeping costs more than the data for
    the labels of a short file)."""
    parts, central = [], []
    offset = 0
    headers: dict = {}
    for name, arr in members.items():
        if arr.dtype.kind == "U" or arr.ndim == 0:
            data = _npy_bytes(arr)
        else:
            key = (arr.dtype.str, arr.shape)
            if key not in headers:
                headers[key] = _npy_header(arr)
            data = headers[key] + np.ascontiguousarray(arr).tobytes()
        deflate = len(data) >= _STORE_BELOW
        if deflate:
            packer = zlib.compressobj(_COMPRESS_LEVEL, zlib.DEFLATED, -15)
            packed = packer.compress(data) + packer.flush()
        else:
            packed = data
        member = (name + ".npy").encode("ascii")
        crc = zlib.crc32(data)
        method = zipfile.ZIP_DEFLATED if deflate else zipfile.ZIP_STORED
        local = _LOCAL.pack(b"PK\003\004", _VERSION, 0, 0, method, _DOS_TIME, _DOS_DATE,
                            crc, len(packed), len(data), len(member), 0)
        central.append(_CENTRAL.pack(b"PK\001\002", _VERSION, 3, _VERSION, 0, 0, method,
                                     _DOS_TIME, _DOS_DATE, crc, len(packed), len(data),
                                     len(member), 0, 0, 0, 0, _ATTR, offset) + member)
        parts += (local, member, packed)
        offset += len(local) + len(member) + len(packed)
    directory = b"".join(central)
    end = _END.pack(b"PK\005\006", 0, 0, len(central), len(central), len(directory), offset, 0)
    return b"".join(parts) + directory + end


def write(fh, table: dict, provenance: dict) -> None:
    """Write the NPZ archive of a table to the seekable binary stream ``fh``, each
    member in chunks of rows (the table's arrays may be memory-mapped)."""
    _write_members(fh, _members(table, provenance))


def _write_members(fh, members: dict) -> None:
    with zipfile.ZipFile(fh, "w", allowZip64=True) as zf:
        for name, arr in members.items():
            if arr.dtype.kind == "U" or arr.ndim == 0 or arr.nbytes < _STORE_BELOW:
                data = _npy_bytes(arr)
                zf.writestr(_member(name, len(data)), data, compresslevel=_COMPRESS_LEVEL)
                continue
            head_bytes = _npy_header(arr)
            info = _member(name, len(head_bytes) + arr.nbytes)
            info.file_size = len(head_bytes) + arr.nbytes  # the zip64 decision needs it
            if hasattr(zipfile.ZipInfo, "compress_level"):  # Python >= 3.13
                info.compress_level = _COMPRESS_LEVEL
            else:
                info._compresslevel = _COMPRESS_LEVEL
            with zf.open(info, "w") as out:
                out.write(head_bytes)
                for i in range(0, arr.shape[0], _CHUNK_ROWS):
                    out.write(np.ascontiguousarray(arr[i:i + _CHUNK_ROWS]).tobytes())


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
