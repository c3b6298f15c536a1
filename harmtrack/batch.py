"""Dataset labelling: every recording of a folder or manifest, resumably, in parallel.

A batch is planned in the main process (inputs, output names, settings), run
file by file by workers (local processes, or a Dask cluster), and assembled in
the main process (the frame dataset and the per-file summary), always in input
order, so that the bytes do not depend on the number of workers or on which
worker did what.

Resuming: each label file's provenance carries a *batch key*, the SHA-256 of the
input's content, the settings, the label formats and the tool version.  A file
whose labels exist with the same key is not tracked again.  Labels are written
atomically, so a run killed at any moment leaves whole label files or none.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import time
from pathlib import Path

import numpy as np

from ._version import __version__
from .batch_inputs import find_inputs, safe_output_base
from .errors import HarmtrackError

__all__ = ["Task", "plan_batch", "label_one", "label_chunk", "run_batch", "BatchReport",
           "LABEL_FORMATS", "DATASET_NAME", "SUMMARY_NAME"]

#: Label formats a batch can write per file.
LABEL_FORMATS = ("npz", "csv", "json")

#: Names of the files a batch writes at the top of the output folder.
DATASET_NAME = "frames.parquet"
SUMMARY_NAME = "summary.csv"

#: Summary columns, in file order.
SUMMARY_COLUMNS = ("file_id", "name", "status", "error", "duration_s", "sample_rate", "channels",
                   "frames", "voiced_share", "f0_median_hz", "f0_min_hz", "f0_max_hz", "seconds")


@dataclasses.dataclass(frozen=True)
class Task:
    """One file's job, as sent to a worker (plain data, picklable)."""

    file_id: int
    path: str
    name: str
    out_base: str
    formats: tuple
    options: tuple  # sorted (key, value) pairs of harmtrack.track_file options, preset included


#: Option names of :func:`harmtrack.track_file` that differ from the settings' names.
_CONFIG_NAMES = {"fmin": "fmin_hz", "fmax": "fmax_hz"}


def _options_key(options: dict) -> tuple:
    return tuple(sorted((k, v) for k, v in options.items() if v is not None))


def plan_batch(source, outdir, *, formats=("npz",), options: dict | None = None) -> list[Task]:
    """The tasks of a batch: inputs found in ``source``, outputs under ``outdir``.

    Raises
    ------
    HarmtrackError
        No such input, an unknown label format, settings out of range (checked
        here, before any work starts), or an output name outside ``outdir``.
    """
    from .config import make_config

    formats = tuple(dict.fromkeys(formats))
    bad = [f for f in formats if f not in LABEL_FORMATS]
    if bad or not formats:
        raise HarmtrackError(f"label format {bad[0] if bad else ''!r} unknown; choose from "
                             f"{', '.join(LABEL_FORMATS)}")
    opts = dict(options or {})
    preset = opts.pop("preset", "voice")
    make_config(preset, **{_CONFIG_NAMES.get(k, k): v for k, v in opts.items()})  # validates
    opts["preset"] = preset
    entries = find_inputs(source)
    outdir = Path(outdir)
    bases = _unique_bases([e.name for e in entries])
    return [Task(file_id=i, path=e.path, name=e.name,
                 out_base=os.fspath(safe_output_base(outdir, b)), formats=formats,
                 options=_options_key(opts))
            for i, (e, b) in enumerate(zip(entries, bases))]



def _unique_bases(names: list[str]) -> list[str]:
    """Label names: the input name without its extension, or with it where two would clash.

    Each ends in ``.x``, the place holder that :func:`_label_paths` replaces by
    the label format's extension.
    """
    stems = [os.path.splitext(n)[0] for n in names]
    count: dict[str, int] = {}
    for s in stems:
        count[s] = count.get(s, 0) + 1
    return [s + ".x" if count[s] == 1 else n + ".x" for s, n in zip(stems, names)]


def _label_paths(task: Task) -> list[Path]:
    base = Path(task.out_base)  # ends in ".x": the suffix is replaced by the format's
    return [base.with_suffix("." + fmt) for fmt in task.formats]


def batch_key(task: Task, input_sha256: str) -> str:
    """SHA-256 of what a file's labels depend on: content, settings, formats, version."""
    record = {"input": input_sha256, "options": [list(kv) for kv in task.options],
              "formats": list(task.formats), "version": __version__}
    return hashlib.sha256(json.dumps(record, sort_keys=True).encode()).hexdigest()


def _existing_key(paths: list[Path]) -> str | None:
    """The batch key all of ``paths`` carry, or None when one is missing or differs."""
    from .io import read_labels

    keys = set()
    for p in paths:
        if not p.is_file():
            return None
        try:
            _, prov = read_labels(p)
        except HarmtrackError:
            return None
        keys.add((prov.get("batch") or {}).get("key"))
    return keys.pop() if len(keys) == 1 else None


def label_one(task: Task) -> dict:
    """Track one file and write its labels (runs in a worker).

    Never raises for a bad input: the returned record has ``status`` ``"ok"``,
    ``"skipped"`` (labels up to date) or ``"failed"`` with a one-line ``error``.
    A labelled file's record also carries ``labels``: the columns and provenance
    of its first label file, decoded from the written bytes, so that the main
    process need not read the file back.
    """
    from .audio import decode
    from .config import make_config
    from .io import atomic_write_bytes, decode_labels, encode_table, make_provenance
    from .io.columns import track_table
    from .tracker import run

    start = time.perf_counter()
    rec = {"file_id": task.file_id, "name": task.name, "status": "failed", "error": ""}
    try:
        try:
            with open(task.path, "rb") as fh:
                raw = fh.read()
        except OSError as exc:
            raise HarmtrackError(f"{task.path}: cannot read: {exc.strerror or exc}") from None
        digest = hashlib.sha256(raw).hexdigest()
        key = batch_key(task, digest)
        paths = _label_paths(task)
        if _existing_key(paths) == key:
            rec["status"] = "skipped"
            return rec
        opts = dict(task.options)
        preset = opts.pop("preset", "voice")
        cfg = make_config(preset, **{_CONFIG_NAMES.get(k, k): v for k, v in opts.items()})
        y, sr, info = decode(raw, name=task.path, sha256=digest)
        del raw
        tr = run(y, sr, cfg, name=task.path)
        info = info.as_dict()
        info["path"] = task.name  # portable: the name inside the dataset, not this disk's path
        prov = {"input": info, "batch": {"key": key, "name": task.name}}
        paths[0].parent.mkdir(parents=True, exist_ok=True)
        table, record = track_table(tr, validate=False), make_provenance(tr, extra=prov)
        for i, (p, fmt) in enumerate(zip(paths, task.formats)):
            data = encode_table(table, record, fmt=fmt)
            # no disk syncs: a file cut short by a power failure fails the next
            # run's resume check (every label file is read back) and is redone
            atomic_write_bytes(p, data, durable=False)
            if i == 0:  # what the dataset takes, exactly as a later run would read it
                rec["labels"] = ((table, record) if fmt == "npz"  # NPZ holds values exactly
                                 else decode_labels(data, fmt=fmt, name=os.fspath(p)))
        rec["status"] = "ok"
    except (HarmtrackError, OSError, MemoryError) as exc:
        rec["error"] = " ".join(str(exc).split())
    except Exception as exc:  # noqa: BLE001 - one bad file must not stop the batch
        rec["error"] = f"internal error: {type(exc).__name__}: {' '.join(str(exc).split())}"
    finally:
        rec["seconds"] = time.perf_counter() - start
    return rec


# ---------------------------------------------------------------------------
# running
# ---------------------------------------------------------------------------


@dataclasses.dataclass
class BatchReport:
    """What a batch did."""

    tasks: list
    records: list          # one per task, in task order
    dataset: Path | None
    summary: Path
    seconds: float
    audio_s: float

    @property
    def counts(self) -> dict:
        out = {"ok": 0, "skipped": 0, "failed": 0}
        for r in self.records:
            out[r["status"]] += 1
        return out

    @property
    def failed(self) -> int:
        return self.counts["failed"]


def _sizes(tasks: list[Task]) -> np.ndarray:
    """File sizes in bytes (0 where unreadable): the work estimate for chunks and ETA."""
    out = np.zeros(len(tasks))
    for i, t in enumerate(tasks):
        try:
            out[i] = os.stat(t.path).st_size
        except OSError:
            out[i] = 0.0
    return out


def _clean_stale_temporaries(outdir: Path) -> None:
    """Remove temporary files a killed run left (only ours, only inside ``outdir``)."""
    for folder, _, files in os.walk(outdir):
        for f in files:
            if f.startswith(".") and f.endswith(".tmp"):
                try:
                    os.unlink(os.path.join(folder, f))
                except OSError:
                    pass


def label_chunk(tasks: list) -> list:
    """:func:`label_one` for each task of a chunk (one round trip to a worker)."""
    return [label_one(t) for t in tasks]


#: Audio per chunk sent to a worker, seconds: short files travel in groups, so the
#: cost of a round trip to a worker process is shared by several files.
CHUNK_AUDIO_S = 8.0

#: Bytes of a file per second of audio assumed for chunking: 16-bit mono at
#: 16 kHz (compressed or multichannel files only shift the chunk sizes).
CHUNK_BYTES_PER_S = 32000.0


def _chunks(tasks: list, sizes: np.ndarray, workers: int) -> list:
    """Consecutive groups of tasks of about :data:`CHUNK_AUDIO_S` of audio each.

    The audio is judged by file size (:data:`CHUNK_BYTES_PER_S` bytes a second).
    A chunk never holds more than an eighth of a worker's share of the batch, so
    the work stays spread evenly to the end.
    """
    total = float(sizes.sum())
    target = max(1.0, min(CHUNK_AUDIO_S * CHUNK_BYTES_PER_S, total / max(1, 8 * workers)))
    out, cur, acc = [], [], 0.0
    for t, b in zip(tasks, sizes):
        cur.append(t)
        acc += max(float(b), 4096.0)  # unreadable or empty files still cost a little
        if acc >= target:
            out.append(cur)
            cur, acc = [], 0.0
    if cur:
        out.append(cur)
    return out


def _run_local(chunks, workers, on_done):
    """Label the chunks here and in ``workers - 1`` helper processes.

    Every process, this one included, claims the next chunk from a shared
    counter until none is left, so the work stays balanced to the end.  Helpers
    send their records back through a queue whose sending thread lets them go
    on labelling meanwhile; this process takes them between its own chunks.  A
    chunk whose helper died before sending it back is labelled here at the end.

    Helpers are processes of their own, set up for labelling
    (:func:`harmtrack.worker_setup.prepare_worker`); this process is left as it
    is, unless its owner (the command line) has set it up already.
    """
    if workers <= 1 or len(chunks) <= 1:
        for chunk in chunks:
            for rec in label_chunk(chunk):
                on_done(rec)
        return
    import multiprocessing
    import queue

    # Forked helpers inherit the loaded modules, compiled kernels and set-up of
    # this process, which saves each about 0.4 s of start-up; where fork is
    # missing, helpers start afresh.
    if "fork" in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context("fork")
    else:  # pragma: no cover - platforms without fork
        ctx = multiprocessing.get_context("spawn")
    counter = ctx.Value("q", 0)
    results = ctx.Queue()
    helpers = [ctx.Process(target=_helper, args=(chunks, counter, results, os.getpid()),
                           daemon=True, name=f"harmtrack-helper-{i + 1}")
               for i in range(workers - 1)]
    done: set = set()

    def take(item):
        index, recs = item
        for rec in recs:
            on_done(rec)
        done.add(index)

    try:
        for h in helpers:
            h.start()
        while (i := _claim(counter, len(chunks))) is not None:
            take((i, label_chunk(chunks[i])))
            while True:
                try:
                    take(results.get_nowait())
                except queue.Empty:
                    break
        # the helpers' last chunks
        while len(done) < len(chunks):
            try:
                take(results.get(timeout=0.2))
            except queue.Empty:
                if not any(h.is_alive() for h in helpers):
                    try:  # a record sent just before its helper ended
                        take(results.get(timeout=0.2))
                    except queue.Empty:
                        break
        for i in range(len(chunks)):  # chunks lost with a helper that died
            if i not in done:
                take((i, label_chunk(chunks[i])))
    finally:
        for h in helpers:
            if h.is_alive():
                h.terminate()
        for h in helpers:
            if h.pid is not None:  # started (a helper that failed to start has none)
                h.join()
        results.close()
        results.cancel_join_thread()


def _claim(counter, n: int):
    """The index of the next chunk nobody has taken yet, or None."""
    with counter.get_lock():
        i = counter.value
        if i >= n:
            return None
        counter.value = i + 1
        return i


def _helper(chunks, counter, results, parent_pid: int) -> None:
    """A helper process: label claimed chunks and send their records back."""
    from .worker_setup import prepare_worker

    prepare_worker()  # nothing left to do when forked from a prepared process
    while os.getppid() == parent_pid:  # a helper does not outlive its batch
        i = _claim(counter, len(chunks))
        if i is None:
            break
        results.put((i, label_chunk(chunks[i])))
    results.close()
    results.join_thread()  # every record is handed over before the helper ends


def _run_dask(chunks, scheduler, workers, on_done):
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise HarmtrackError(
            "the Dask engine needs dask's distributed scheduler: pip install 'dask[distributed]'"
        ) from None
    cluster = None
    try:
        if scheduler == "local":
            import dask

            # Dask's nanny sets MALLOC_TRIM_THRESHOLD_ for its workers, which turns off
            # the C library's adaptive allocation thresholds: every large array is then
            # mapped and unmapped afresh, and a file takes about a quarter longer.
            # The workers of the cluster started here keep the default allocator.
            environ = dict(dask.config.get("distributed.nanny.pre-spawn-environ", {}))
            environ.pop("MALLOC_TRIM_THRESHOLD_", None)
            with dask.config.set({"distributed.nanny.pre-spawn-environ": environ}):
                cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                       dashboard_address=None)
            client = Client(cluster)
            # the cluster's workers are this batch's own processes: set them up as
            # local helpers are (a cluster of somebody else's is left as it is)
            from .worker_setup import prepare_worker

            client.run(prepare_worker)
        elif os.path.isfile(scheduler):
            client = Client(scheduler_file=scheduler, timeout="10s")
        else:
            client = Client(scheduler, timeout="10s")
    except (OSError, TimeoutError, ValueError) as exc:
        if cluster is not None:
            cluster.close()
        raise HarmtrackError(f"cannot reach the Dask scheduler {scheduler}: {exc}") from None
    try:
        futures = client.map(label_chunk, chunks, pure=False)
        for fut in as_completed(futures):
            for rec in fut.result():
                on_done(rec)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


def run_batch(tasks: list[Task], outdir, *, workers: int | None = None,
              scheduler: str | None = None, dataset: bool = True, progress=None) -> BatchReport:
    """Run the tasks, then write the frame dataset and the summary.

    Parameters
    ----------
    tasks : list of Task
        From :func:`plan_batch`.
    outdir : path
        The output folder (created if missing).
    workers : int, optional
        Local worker processes (default: all cores); with ``scheduler="local"``
        the number of Dask workers started.
    scheduler : str, optional
        ``None``: local processes.  ``"local"``: a Dask cluster on this machine.
        Otherwise the address of a running Dask scheduler (``tcp://host:port``)
        or the path of its scheduler file.
    dataset : bool
        Also write :data:`DATASET_NAME` (needs pyarrow).
    progress : callable, optional
        Called as ``progress(done, total, audio_done_s, work_fraction, elapsed_s)``
        after each file; ``work_fraction`` is the share of the input bytes done.
    """
    from .batch_output import DatasetWriter, file_stats, labels_of, write_summary

    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    _clean_stale_temporaries(outdir)
    workers = int(workers or os.cpu_count() or 1)
    sizes = _sizes(tasks)
    records: list = [None] * len(tasks)
    start = time.perf_counter()
    state = {"done": 0, "bytes": 0.0, "audio": 0.0, "next": 0}
    writer = DatasetWriter(outdir / DATASET_NAME) if dataset else None

    def finish_in_order():
        # files are taken in input order, whatever order the workers finish in
        while state["next"] < len(tasks) and records[state["next"]] is not None:
            i = state["next"]
            labels = labels_of(tasks[i], records[i])
            if labels is not None:
                records[i]["stats"] = file_stats(*labels)
                state["audio"] += records[i]["stats"]["duration_s"] or 0.0
                if writer is not None:
                    writer.add(tasks[i], *labels)
            state["next"] += 1

    def on_done(rec):
        i = rec["file_id"]
        records[i] = rec
        state["done"] += 1
        state["bytes"] += sizes[i]
        finish_in_order()
        if progress is not None:
            progress(state["done"], len(tasks), state["audio"],
                     state["bytes"] / max(1.0, float(sizes.sum())), time.perf_counter() - start)

    try:
        chunks = _chunks(tasks, sizes, workers)
        if scheduler is None:
            _run_local(chunks, workers, on_done)
        else:
            _run_dask(chunks, scheduler, workers, on_done)
        ds_path = writer.close() if writer is not None else None
    except BaseException:
        if writer is not None:
            writer.abort()
        raise
    summary = write_summary(outdir / SUMMARY_NAME, tasks, records)
    return BatchReport(tasks=tasks, records=records, dataset=ds_path, summary=summary,
                       seconds=time.perf_counter() - start, audio_s=state["audio"])
