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
import os
from pathlib import Path

import numpy as np

from .errors import HarmtrackError
from .io.atomic import atomic_write_bytes
from .io.provenance import dumps_compact

__all__ = ["DatasetWriter", "labels_of", "file_stats", "write_summary"]

#: Parquet key-value metadata key of the dataset's provenance record.
METADATA_KEY = b"harmtrack"


def labels_of(task, rec):
    """``(columns, provenance)`` of a finished file, or None when it has no labels.

    A file labelled in this run brings its labels in its record; an up-to-date
    one is read from its first label file.  A file whose labels cannot be read
    back is marked failed.
    """
    from .batch import _label_paths
    from .io import read_labels

    if rec is None or rec["status"] not in ("ok", "skipped"):
        return None
    labels = rec.pop("labels", None)
    if labels is None:
        try:
            labels = read_labels(_label_paths(task)[0])
        except HarmtrackError as exc:
            rec.update(status="failed", error=f"labels unreadable: {exc}")
            return None
    return labels


def file_stats(cols: dict, prov: dict) -> dict:
    """Summary figures of one file's labels."""
    v = cols["voiced"]
    f = cols["f0_hz"][v]
    info = prov.get("input") or {}
    sr = info.get("sr")
    frames = info.get("frames")
    return {
        "duration_s": frames / sr if sr and frames is not None else None,
        "sample_rate": sr, "channels": info.get("channels"), "frames": int(v.size),
        "voiced_share": float(v.mean()) if v.size else 0.0,
        "f0_median_hz": float(np.median(f)) if f.size else None,
        "f0_min_hz": float(f.min()) if f.size else None,
        "f0_max_hz": float(f.max()) if f.size else None,
    }


#: Parquet compression codec of the dataset's column chunks.
COMPRESSION = "lz4"

#: Rows gathered before a row group is written: few, large row groups read fast
#: and cost the writing process little per file.
ROW_GROUP_ROWS = 65536


def _arrow_columns(cols: dict) -> dict:
    """The label columns with the dataset's types, in label-file order (whatever the
    order of ``cols``)."""
    from .io.columns import table_columns

    out = {}
    for key in table_columns(cols):
        arr = cols[key]
        if arr.dtype == bool:
            out[key] = np.asarray(arr, dtype=bool)
        elif key == "model_order":
            out[key] = np.asarray(arr, dtype=np.int32)
        else:
            out[key] = np.asarray(arr, dtype=np.float64)
    return out


class DatasetWriter:
    """All frames of all files as one Parquet file, written file by file.

    Columns: ``file_id`` (int32), ``name`` (dictionary-encoded string), then the
    label columns of :mod:`harmtrack.io.columns` (``time_s``, ``f0_hz``,
    ``voiced``, ``voicing_prob``, ``model_order``, ``hnr_db``, ``amp_h1`` ...,
    and the engine columns for engine presets).  The file's key-value metadata
    ``harmtrack`` holds the provenance: tool version, settings, and each file's
    name, SHA-256 and batch key.  Rows go to a temporary file next to ``path``,
    renamed over it by :meth:`close`: a killed run leaves no partial dataset.
    Memory holds up to :data:`ROW_GROUP_ROWS` frames.
    """

    def __init__(self, path: Path):
        import importlib.util

        # checked now, imported at the first row group (the import takes a while,
        # which then overlaps with the workers' labelling)
        if importlib.util.find_spec("pyarrow") is None:
            raise HarmtrackError("the frame dataset needs pyarrow: pip install pyarrow")
        self.path = Path(path)
        self._tmp = self.path.with_name(f".{self.path.name}.writing.tmp")
        self._writer = None
        self._keys = None
        self._buffer: list = []
        self._rows = 0
        self._files: list = []
        self._head: dict = {}
        # Row groups are encoded and compressed on a thread of their own (pyarrow
        # lets go of the interpreter meanwhile), so the process that collects the
        # files keeps labelling and keeps its helpers fed.  One group at a time.
        self._pool = None
        self._pending = None

    def add(self, task, cols: dict, prov: dict) -> None:
        """Append one file's frames (files must come in input order)."""
        arrays = _arrow_columns(cols)
        keys = tuple((k, a.dtype.str) for k, a in arrays.items())
        if self._keys is None:
            self._keys = keys
            self._head = {"tool": prov.get("tool"), "version": prov.get("version"),
                          "settings": prov.get("settings")}
        elif keys != self._keys:
            raise HarmtrackError(f"{task.name}: its label columns differ from the other files'")
        self._buffer.append((task.file_id, task.name, arrays))
        self._rows += arrays["time_s"].shape[0]
        self._files.append({"file_id": task.file_id, "name": task.name,
                            "sha256": (prov.get("input") or {}).get("sha256"),
                            "batch_key": (prov.get("batch") or {}).get("key")})
        if self._rows >= ROW_GROUP_ROWS:
            self._flush()

    def _flush(self) -> None:
        """Hand the buffered files to the writing thread as one row group."""
        if not self._buffer:
            return
        self._wait()
        if self._pool is None:
            from concurrent.futures import ThreadPoolExecutor

            self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="dataset")
        self._pending = self._pool.submit(self._write_group, self._buffer, self._keys)
        self._buffer = []
        self._rows = 0

    def _wait(self) -> None:
        """Wait for the row group being written; its error, if any, is raised here."""
        if self._pending is not None:
            pending, self._pending = self._pending, None
            pending.result()

    def _write_group(self, buffer: list, keys: tuple) -> None:
        import pyarrow as pa
        import pyarrow.parquet as pq

        counts = [a["time_s"].shape[0] for _, _, a in buffer]
        names = [n for _, n, _ in buffer]
        data = {
            "file_id": pa.array(np.repeat([f for f, _, _ in buffer], counts).astype(np.int32)),
            "name": pa.DictionaryArray.from_arrays(
                pa.array(np.repeat(np.arange(len(names), dtype=np.int32), counts)),
                pa.array(names, type=pa.string())),
        }
        for key, _ in keys:
            data[key] = pa.array(np.concatenate([a[key] for _, _, a in buffer]))
        table = pa.table(data)
        if self._writer is None:
            # LZ4 packs the frames 10 % larger than Zstandard's fastest level but
            # in half the time, here and in the training code that reads them
            self._writer = pq.ParquetWriter(os.fspath(self._tmp), table.schema,
                                            compression=COMPRESSION, use_dictionary=["name"])
        self._writer.write_table(table, row_group_size=max(1, table.num_rows))

    def _stop_thread(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True)
            self._pool = None

    def close(self) -> Path | None:
        """Finish the file and put it in place; None when no file had frames."""
        try:
            self._flush()
            self._wait()
        finally:
            self._stop_thread()
        if self._writer is None:
            return None
        meta = dict(self._head, files=self._files)
        self._writer.add_key_value_metadata({METADATA_KEY.decode(): dumps_compact(meta)})
        self._writer.close()
        self._writer = None
        os.replace(self._tmp, self.path)
        return self.path

    def abort(self) -> None:
        """Drop the partial file."""
        self._pending = None
        self._stop_thread()  # a row group being written is finished first
        if self._writer is not None:
            self._writer.close()
            self._writer = None
        try:
            os.unlink(self._tmp)
        except OSError:
            pass


def _fmt(v) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v)


def write_summary(path: Path, tasks, records) -> Path:
    """One row per input file (see :data:`harmtrack.batch.SUMMARY_COLUMNS`), atomically.

    ``records`` carry each file's status, error, seconds and, where it has
    labels, its :func:`file_stats` under ``"stats"``.
    """
    from .batch import SUMMARY_COLUMNS

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(SUMMARY_COLUMNS)
    for task, rec in zip(tasks, records):
        rec = rec or {"status": "failed", "error": "not run"}
        row = {"file_id": task.file_id, "name": task.name, "status": rec["status"],
               "error": rec.get("error", ""), "seconds": rec.get("seconds")}
        row.update(rec.get("stats") or {})
        w.writerow([_fmt(row.get(c)) for c in SUMMARY_COLUMNS])
    return atomic_write_bytes(path, buf.getvalue().encode("utf-8"))
