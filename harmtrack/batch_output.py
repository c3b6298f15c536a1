"""The files a batch writes at the top of its output folder: the frame dataset
(Parquet) and the per-file summary (CSV).

Both are assembled in input order from the per-file label files, so their
content does not depend on how the work was spread over workers.  The dataset
holds no clock time and is byte-identical across reruns; the summary reports
this run (statuses and seconds taken).
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np

from .errors import HarmtrackError
from .io.atomic import atomic_write_bytes
from .io.provenance import dumps_compact

__all__ = ["read_results", "write_dataset", "write_summary"]

#: Parquet key-value metadata key of the dataset's provenance record.
METADATA_KEY = b"harmtrack"

_SKIP = {"harmonic_amplitudes"}


def read_results(tasks, records) -> list:
    """``(task, columns, provenance)`` of every file with labels, in task order."""
    from .batch import _label_paths
    from .io import read_labels

    out = []
    for task, rec in zip(tasks, records):
        if rec is None or rec["status"] not in ("ok", "skipped"):
            continue
        path = _label_paths(task)[0]
        try:
            cols, prov = read_labels(path)
        except HarmtrackError as exc:
            rec.update(status="failed", error=f"labels unreadable: {exc}")
            continue
        out.append((task, cols, prov))
    return out


def _arrow_table(task, cols):
    import pyarrow as pa

    n = cols["time_s"].shape[0]
    arrays = {"file_id": pa.array(np.full(n, task.file_id, dtype=np.int32)),
              "name": pa.array([task.name] * n, type=pa.string()).dictionary_encode()}
    for key, arr in cols.items():
        if key in _SKIP:
            continue
        if arr.dtype == bool:
            arrays[key] = pa.array(arr)
        elif key == "model_order":
            arrays[key] = pa.array(arr.astype(np.int32))
        else:
            arrays[key] = pa.array(np.asarray(arr, dtype=np.float64))
    return pa.table(arrays)


def write_dataset(path: Path, results) -> Path | None:
    """All frames of all files as one Parquet file (written atomically).

    Columns: ``file_id`` (int32), ``name`` (dictionary-encoded string), then the
    label columns of :mod:`harmtrack.io.columns` (``time_s``, ``f0_hz``,
    ``voiced``, ``voicing_prob``, ``model_order``, ``hnr_db``, ``amp_h1`` ...,
    and the engine columns for engine presets).  The file's key-value metadata
    ``harmtrack`` holds the provenance: tool version, settings, and each file's
    name, SHA-256 and batch key.  None when no file has labels.
    """
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        raise HarmtrackError("the frame dataset needs pyarrow: pip install pyarrow") from None
    if not results:
        return None
    tables = [_arrow_table(task, cols) for task, cols, _ in results]
    schema = tables[0].schema
    for (task, _, _), t in zip(results, tables):
        if not t.schema.equals(schema):
            raise HarmtrackError(f"{task.name}: its label columns differ from the other files'")
    first = results[0][2]
    meta = {"tool": first.get("tool"), "version": first.get("version"),
            "settings": first.get("settings"),
            "files": [{"file_id": task.file_id, "name": task.name,
                       "sha256": (prov.get("input") or {}).get("sha256"),
                       "batch_key": (prov.get("batch") or {}).get("key")}
                      for task, _, prov in results]}
    schema = schema.with_metadata({METADATA_KEY: dumps_compact(meta).encode("ascii")})
    buf = pa.BufferOutputStream()
    with pq.ParquetWriter(buf, schema, compression="zstd", use_dictionary=["name"]) as writer:
        for t in tables:
            writer.write_table(t.replace_schema_metadata(schema.metadata))
    return atomic_write_bytes(path, buf.getvalue().to_pybytes())


def _fmt(v) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v)


def write_summary(path: Path, tasks, records, results) -> Path:
    """One row per input file (see :data:`harmtrack.batch.SUMMARY_COLUMNS`), atomically."""
    from .batch import SUMMARY_COLUMNS

    stats = {}
    for task, cols, prov in results:
        v = cols["voiced"]
        f = cols["f0_hz"][v]
        info = prov.get("input") or {}
        sr = info.get("sr")
        frames = info.get("frames")
        stats[task.file_id] = {
            "duration_s": frames / sr if sr and frames is not None else None,
            "sample_rate": sr, "channels": info.get("channels"), "frames": int(v.size),
            "voiced_share": float(v.mean()) if v.size else 0.0,
            "f0_median_hz": float(np.median(f)) if f.size else None,
            "f0_min_hz": float(f.min()) if f.size else None,
            "f0_max_hz": float(f.max()) if f.size else None,
        }
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(SUMMARY_COLUMNS)
    for task, rec in zip(tasks, records):
        rec = rec or {"status": "failed", "error": "not run"}
        row = {"file_id": task.file_id, "name": task.name, "status": rec["status"],
               "error": rec.get("error", ""), "seconds": rec.get("seconds")}
        row.update(stats.get(task.file_id, {}))
        w.writerow([_fmt(row.get(c)) for c in SUMMARY_COLUMNS])
    return atomic_write_bytes(path, buf.getvalue().encode("utf-8"))
