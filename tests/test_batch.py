"""Dataset labelling: the batch command end to end, resuming, determinism, Dask."""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from harmtrack import batch, synth
from harmtrack.batch_inputs import find_inputs, safe_output_base
from harmtrack.errors import HarmtrackError
from harmtrack.io import read_labels

pa = pytest.importorskip("pyarrow")
pq = pytest.importorskip("pyarrow.parquet")

SR = 16000
N_GOOD = 32


def _harmtrack(*args, **kw):
    return subprocess.run([sys.executable, "-m", "harmtrack", *map(str, args)],
                          capture_output=True, text=True, **kw)


@pytest.fixture(scope="module")
def dataset(tmp_path_factory):
    """32 short recordings in nested folders (one with an upper-case extension, one
    FLAC), plus an empty, a garbage and a truncated file, and a folder link loop."""
    root = tmp_path_factory.mktemp("data") / "in"
    (root / "a" / "b").mkdir(parents=True)
    for i in range(N_GOOD):
        y = synth.harmonic_tone(0.5 + 0.05 * (i % 4), SR, f0_hz=90.0 + 9.0 * i,
                                amplitudes=[0.3, 0.2, 0.1, 0.05], seed=i)
        folder = root / ("a" if i % 3 == 1 else "a/b" if i % 3 == 2 else "")
        ext = {5: ".WAV", 7: ".flac"}.get(i, ".wav")
        synth.write_wav(folder / f"rec{i:02d}{ext}", y, SR)
    (root / "empty.wav").write_bytes(b"")
    (root / "garbage.wav").write_bytes(np.random.default_rng(0).bytes(4000))
    data = (root / "rec00.wav").read_bytes()
    (root / "a" / "truncated.wav").write_bytes(data[: len(data) // 2])
    (root / "notes.txt").write_text("not audio\n")
    os.symlink(root, root / "a" / "loop")  # must not be walked forever
    return root


def _tree_digest(folder: Path, patterns=("*.npz", "*.csv", "*.parquet")) -> dict:
    out = {}
    for pat in patterns:
        for p in sorted(folder.rglob(pat)):
            if p.name != batch.SUMMARY_NAME:
                out[p.relative_to(folder).as_posix()] = hashlib.sha256(p.read_bytes()).hexdigest()
    return out


def test_inputs_are_found_once_in_sorted_order(dataset):
    entries = find_inputs(dataset)
    names = [e.name for e in entries]
    assert len(names) == N_GOOD + 3 == len(set(names))  # the loop adds nothing
    assert "a/b/rec05.WAV" in names and "a/rec07.flac" in names and "a/b/rec02.wav" in names
    assert "notes.txt" not in names
    assert names[:4] == ["empty.wav", "garbage.wav", "rec00.wav", "rec03.wav"]
    assert [e.name for e in find_inputs(dataset)] == names  # deterministic


def test_manifest_entries_cannot_write_outside(tmp_path, dataset):
    manifest = tmp_path / "list.csv"
    manifest.write_text("path,speaker\n"
                        f"{dataset / 'rec00.wav'},x\n"
                        "../escape/../../etc/passwd.wav,y\n"
                        "sub/ok.wav,z\n")
    entries = find_inputs(manifest)
    out = tmp_path / "out"
    for e in entries:
        base = safe_output_base(out, e.name)
        assert os.path.commonpath([base, out]) == str(out)
    assert entries[0].name.startswith("_outside/")  # absolute path elsewhere
    assert entries[1].name.startswith("_outside/")  # climbs out of the manifest's folder
    assert entries[2].name == "sub/ok.wav"
    with pytest.raises(HarmtrackError):
        safe_output_base(out, "../x.wav")


def test_batch_end_to_end(tmp_path, dataset):
    out = tmp_path / "out"
    res = _harmtrack("batch", dataset, "-o", out, "--formats", "npz,csv", "--workers", "2", "-q")
    assert res.returncode == 2, res.stderr  # some files failed
    assert f"{N_GOOD + 3} files: {N_GOOD} labelled, 0 up to date, 3 failed" in res.stdout
    assert res.stderr.count("failed:") == 3
    # labels mirror the input folders, in both formats
    assert (out / "a" / "b" / "rec02.npz").is_file() and (out / "a" / "b" / "rec02.csv").is_file()
    assert (out / "a" / "b" / "rec05.npz").is_file() and (out / "a" / "rec07.npz").is_file()
    assert not list(out.rglob(".*.tmp"))
    # summary: one row per input, statuses and errors
    rows = (out / batch.SUMMARY_NAME).read_text().splitlines()
    header = rows[0].split(",")
    assert tuple(header) == batch.SUMMARY_COLUMNS and len(rows) == N_GOOD + 4
    status = {r.split(",")[1]: r.split(",")[2] for r in rows[1:]}
    assert status["empty.wav"] == status["garbage.wav"] == status["a/truncated.wav"] == "failed"
    assert sum(v == "ok" for v in status.values()) == N_GOOD
    # the dataset, read back with pyarrow, equals the per-file labels
    table = pq.read_table(out / batch.DATASET_NAME)
    meta = json.loads(pq.read_metadata(out / batch.DATASET_NAME).metadata[b"harmtrack"])
    assert len(meta["files"]) == N_GOOD and meta["settings"]["preset"] == "voice"
    names = table.column("name").to_pylist()
    for f in meta["files"][::7]:
        cols, prov = read_labels((out / f["name"]).with_suffix(".npz"))
        assert prov["input"]["sha256"] == f["sha256"] and prov["input"]["path"] == f["name"]
        rows_f = [i for i, n in enumerate(names) if n == f["name"]]
        sub = table.take(pa.array(rows_f))
        np.testing.assert_array_equal(sub.column("time_s").to_numpy(), cols["time_s"])
        np.testing.assert_array_equal(sub.column("f0_hz").to_numpy(), cols["f0_hz"])
        np.testing.assert_array_equal(sub.column("voiced").to_numpy(), cols["voiced"])
        np.testing.assert_array_equal(sub.column("amp_h3").to_numpy(), cols["amp_h3"])
        assert set(sub.column("file_id").to_pylist()) == {f["file_id"]}


def test_one_or_two_workers_and_rerun_give_identical_bytes(tmp_path, dataset):
    one, two = tmp_path / "one", tmp_path / "two"
    assert _harmtrack("batch", dataset, "-o", one, "--workers", "1", "-q").returncode == 2
    assert _harmtrack("batch", dataset, "-o", two, "--workers", "2", "-q").returncode == 2
    d1 = _tree_digest(one)
    assert len(d1) == N_GOOD + 1 and d1 == _tree_digest(two)
    again = _harmtrack("batch", dataset, "-o", two, "--workers", "2")
    assert f"0 labelled, {N_GOOD} up to date, 3 failed" in again.stdout
    assert f"{N_GOOD + 3}/{N_GOOD + 3} files" in again.stderr  # the progress line
    assert _tree_digest(two) == d1
    # other settings: everything is labelled again
    hop = _harmtrack("batch", dataset, "-o", two, "--hop", "0.02", "-q")
    assert f"{N_GOOD} labelled, 0 up to date" in hop.stdout
    cols, prov = read_labels(two / "rec00.npz")
    np.testing.assert_allclose(np.diff(cols["time_s"]), 0.02)
    assert prov["settings"]["hop_s"] == 0.02


def test_resume_after_kill(tmp_path):
    src = tmp_path / "long"
    src.mkdir()
    for i in range(40):
        y = synth.harmonic_tone(2.0, SR, f0_hz=110.0 + 3 * i, amplitudes=[0.3, 0.2], seed=i)
        synth.write_wav(src / f"x{i:02d}.wav", y, SR)
    ref = tmp_path / "ref"
    assert _harmtrack("batch", src, "-o", ref, "--workers", "1", "-q",
                      "--formats", "npz,csv").returncode == 0
    out = tmp_path / "out"
    proc = subprocess.Popen([sys.executable, "-m", "harmtrack", "batch", str(src), "-o", str(out),
                             "--workers", "1", "-q", "--formats", "npz,csv"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and len(list(out.rglob("*.npz"))) < 5:
        time.sleep(0.02)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    done = len(list(out.rglob("*.npz")))
    assert 5 <= done < 40, "the batch should be killed part-way"
    assert not (out / batch.DATASET_NAME).exists()
    for p in out.rglob("*.npz"):  # whatever exists is whole
        read_labels(p)
    res = _harmtrack("batch", src, "-o", out, "--workers", "1", "-q", "--formats", "npz,csv")
    assert res.returncode == 0
    assert "up to date" in res.stdout and not list(out.rglob(".*.tmp"))
    assert _tree_digest(out) == _tree_digest(ref)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_dask_cluster_gives_the_local_labels(tmp_path, dataset):
    pytest.importorskip("distributed")
    dask_cli = shutil.which("dask", path=os.path.dirname(sys.executable)) or shutil.which("dask")
    if dask_cli is None:
        pytest.skip("dask's command-line tools are not installed")
    sched_file = tmp_path / "scheduler.json"
    env = dict(os.environ, DASK_DISTRIBUTED__WORKER__DAEMON="False")
    procs = [subprocess.Popen([dask_cli, "scheduler", "--host", "127.0.0.1", "--port",
                               str(_free_port()), "--no-dashboard", "--scheduler-file",
                               str(sched_file)], stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL, env=env, start_new_session=True)]
    try:
        deadline = time.monotonic() + 60
        while not sched_file.exists() and time.monotonic() < deadline:
            time.sleep(0.1)
        assert sched_file.exists(), "the scheduler did not start"
        address = json.loads(sched_file.read_text())["address"]
        for _ in range(2):
            procs.append(subprocess.Popen(
                [dask_cli, "worker", address, "--nworkers", "1", "--nthreads", "1",
                 "--no-dashboard", "--host", "127.0.0.1"], stdout=subprocess.DEVNULL,
                stderr=subprocess.DEVNULL, env=env, start_new_session=True))
        from distributed import Client

        with Client(address, timeout="30s") as client:
            client.wait_for_workers(2, timeout=60)
        local, remote = tmp_path / "local", tmp_path / "remote"
        assert _harmtrack("batch", dataset, "-o", local, "--workers", "1", "-q").returncode == 2
        res = _harmtrack("batch", dataset, "-o", remote, "--scheduler", address, "-q")
        assert res.returncode == 2, res.stderr
        assert f"{N_GOOD} labelled" in res.stdout
        assert _tree_digest(remote) == _tree_digest(local)
    finally:
        for p in procs:
            try:
                os.killpg(p.pid, signal.SIGTERM)
            except ProcessLookupError:
                pass
        for p in procs:
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                os.killpg(p.pid, signal.SIGKILL)


def test_bad_batch_input(tmp_path):
    res = _harmtrack("batch", tmp_path / "missing", "-o", tmp_path / "o")
    assert res.returncode == 2 and "no such file or folder" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1
    (tmp_path / "emptydir").mkdir()
    res = _harmtrack("batch", tmp_path / "emptydir", "-o", tmp_path / "o")
    assert res.returncode == 2 and "no audio files" in res.stderr
    res = _harmtrack("batch", tmp_path / "emptydir", "-o", tmp_path / "o", "--formats", "mp4")
    assert res.returncode == 2 and "'mp4'" in res.stderr
    res = _harmtrack("batch", tmp_path / "emptydir", "-o", tmp_path / "o", "--fmin", "-3")
    assert res.returncode == 2 and "fmin" in res.stderr
    synth.write_wav(tmp_path / "emptydir" / "one.wav", np.zeros(SR), SR)
    res = _harmtrack("batch", tmp_path / "emptydir", "-o", tmp_path / "o", "--scheduler",
                     f"tcp://127.0.0.1:{_free_port()}")
    assert res.returncode == 2 and "cannot reach the Dask scheduler" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_fresh_compilation_gives_the_same_labels(tmp_path, dataset):
    # A process that compiles the kernels afresh (its own empty cache) must label
    # exactly as processes that load them from the cache: batches mix both kinds
    # (a new cluster node, a first run after installing).
    wav = dataset / "a" / "rec01.wav"
    cached = tmp_path / "cached.npz"
    fresh = tmp_path / "fresh.npz"
    assert _harmtrack("track", wav, "-o", cached, "-q").returncode == 0
    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path / "empty_cache"))
    assert _harmtrack("track", wav, "-o", fresh, "-q", env=env).returncode == 0
    assert fresh.read_bytes() == cached.read_bytes()


def test_inputs_with_the_same_stem_keep_their_own_labels(tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    for ext, f0 in ((".wav", 120.0), (".flac", 180.0)):
        y = synth.harmonic_tone(0.5, SR, f0_hz=f0, amplitudes=[0.3, 0.2], seed=1)
        synth.write_wav(src / f"take{ext}", y, SR)
    out = tmp_path / "out"
    res = _harmtrack("batch", src, "-o", out, "--workers", "1", "-q")
    assert res.returncode == 0, res.stderr
    wav, flac = read_labels(out / "take.wav.npz")[0], read_labels(out / "take.flac.npz")[0]
    assert abs(np.nanmedian(wav["f0_hz"]) - 120.0) < 2 and abs(np.nanmedian(flac["f0_hz"]) - 180.0) < 2


def test_engine_batch_carries_the_engine_columns(tmp_path):
    from harmtrack import engine_synth as es

    src = tmp_path / "in"
    src.mkdir()
    for i, dead in enumerate((None, 1)):
        t, r = es.rpm_profile(1.5, kind="steady", rpm=1800.0, hop_s=0.01, seed=i)
        y = es.engine(t, r, SR, cylinders=4, seed=i, weak_cylinder=dead, weak_db=-np.inf,
                      noise_snr_db=20.0)
        synth.write_wav(src / f"e{i}.wav", y, SR)
    out = tmp_path / "out"
    res = _harmtrack("batch", src, "-o", out, "--preset", "engine", "--cylinders", "4",
                     "--rpm-min", "800", "--rpm-max", "4000", "--max-order", "4", "-q")
    assert res.returncode == 0, res.stderr
    table = pq.read_table(out / batch.DATASET_NAME)
    assert {"rpm", "uneven_db", "uneven_flag", "order_2", "order_2_db"} <= set(table.column_names)
    for name, flagged in (("e0.wav", False), ("e1.wav", True)):
        rows = [i for i, n in enumerate(table.column("name").to_pylist()) if n == name]
        sub = table.take(pa.array(rows))
        assert abs(np.nanmedian(sub.column("rpm").to_numpy()) / 1800.0 - 1) < 0.01
        assert (np.mean(sub.column("uneven_flag").to_numpy()) > 0.9) == flagged


def test_local_dask_cluster_gives_the_local_labels(tmp_path, dataset):
    pytest.importorskip("distributed")
    local, dask_local = tmp_path / "local", tmp_path / "dask"
    assert _harmtrack("batch", dataset, "-o", local, "--workers", "1", "-q").returncode == 2
    res = _harmtrack("batch", dataset, "-o", dask_local, "--scheduler", "local", "--workers", "2",
                     "-q", cwd=tmp_path)
    assert res.returncode == 2, res.stderr
    assert _tree_digest(dask_local) == _tree_digest(local)


def test_work_of_a_helper_that_dies_is_redone(tmp_path, dataset, monkeypatch):
    # A helper process that ends abruptly (killed, out of memory) loses the chunk
    # it was labelling; the batch process labels that chunk itself at the end.
    parent = os.getpid()
    real = batch.label_chunk

    marker = tmp_path / "helper_died"

    def helper_dies(tasks):
        if os.getpid() != parent:  # the helper's first chunk
            marker.write_text(tasks[0].name)
            os._exit(9)
        return real(tasks)

    monkeypatch.setattr(batch, "label_chunk", helper_dies)
    monkeypatch.setattr(batch, "CHUNK_AUDIO_S", 0.5)  # one file per chunk
    ref = tmp_path / "ref"
    assert _harmtrack("batch", dataset, "-o", ref, "--workers", "1", "-q").returncode == 2
    out = tmp_path / "out"
    tasks = batch.plan_batch(dataset, out)
    rep = batch.run_batch(tasks, out, workers=2)
    assert marker.exists()  # the helper did take a chunk, and died with it
    assert rep.counts == {"ok": N_GOOD, "skipped": 0, "failed": 3}
    assert _tree_digest(out) == _tree_digest(ref)
