"""Batch benchmark: throughput, scaling and memory of ``harmtrack batch``.

Run from the repository root::

    python benchmarks/bench_batch.py [--quick] [--data DIR] [--repeats N] [--json OUT]
                                     [--no-dask] [--no-breakdown]

A speech-like corpus is synthesised once with :mod:`harmtrack.synth` and kept
in ``--data`` (200 files of 10 s and 2000 files of 1 s, the same audio
duration; ``--quick``: 40 x 10 s and 400 x 1 s).  The command-line tool
``python -m harmtrack batch`` then labels it as a subprocess, into a fresh,
empty output folder every time, so the wall time includes everything a user
waits for (interpreter start-up, imports, worker start-up, numba cache loads,
the per-file work and the assembly of the dataset and the summary):

* the 10 s corpus with 1 local worker, 2 local workers, and a Dask cluster of
  2 workers (a real scheduler and two workers started with dask's own
  command-line tools on 127.0.0.1, ready before the clock starts);
* the 1 s corpus with 2 local workers.

The peak resident memory (VmHWM) of every process is sampled while it runs.
The CPU time of every process of a run and the CPU used meanwhile by other
processes of the machine are recorded too (a run that shared the machine is
flagged).  A breakdown section measures where the time goes: a fresh process
(interpreter, imports, numba cache load), the fixed cost of a one-file batch,
the analysis alone against the batch's per-file seconds, the Parquet dataset
(the same runs with ``--no-dataset``), two independent 1-worker runs on
the two halves of the corpus (what two processes reach with no coordination),
and CPU by process.  See
``benchmarks/README.md`` ("Batch benchmark") for the columns.

The script is a report run by hand, not a test.  It exits with status 1 when a
floor fails and 0 otherwise; its last line is the number of failed floors.
"""

import _single_thread  # noqa: F401, I001  (first: one thread before numpy loads)
from _floors import Floors  # noqa: E402

import argparse  # noqa: E402
import csv  # noqa: E402
import json  # noqa: E402
import os  # noqa: E402
import platform  # noqa: E402
import re  # noqa: E402
import shutil  # noqa: E402
import socket  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import threading  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

REPO = _single_thread.REPO

import harmtrack  # noqa: E402
from harmtrack import synth  # noqa: E402

try:
    import psutil  # noqa: E402
except ImportError:  # pragma: no cover - optional; /proc is read instead
    psutil = None

# ---------------------------------------------------------------------------
# settings
# ---------------------------------------------------------------------------

SR = 16000
HOP_S = 0.01

#: (files, seconds per file) of the two corpora; both hold the same audio duration.
LONG = (200, 10.0)
SHORT = (2000, 1.0)
QUICK_LONG = (40, 10.0)
QUICK_SHORT = (400, 1.0)

#: Base pitch of the synthetic speakers, Hz (file j speaks at SPEAKERS[j % 5]).
SPEAKERS = (85.0, 140.0, 250.0, 110.0, 200.0)
VOWELS = ("a", "e", "i", "o", "u", "neutral")
JITTER = 0.005
SHIMMER = 0.05
AMPLITUDE = 0.5
#: SNR in dB of the white noise added to file j: SNRS[j % 3].
SNRS = (30.0, 20.0, 10.0)
SEED_LONG = 20000
SEED_SHORT = 40000
#: Bumped whenever the corpus recipe changes, so a cached corpus is rebuilt.
CORPUS_VERSION = 1
CORPUS_MARKER = "corpus.json"

PRESET = "voice"
FORMATS = "npz"

#: Floors from the project's issue (throughput = audio hours per wall hour).
SCALING_FLOOR = 1.8     # 2 local workers >= this x 1 local worker
SHORT_FILE_FLOOR = 0.70  # 1 s files >= this x 10 s files, both with 2 local workers

#: A run during which other processes used more CPU than this (in cores, averaged
#: over the run) is flagged: its timing is not that of an idle machine.
OTHER_LOAD_WARN = 0.10
RSS_POLL_S = 0.2  # sampling interval of the memory sampler
RUN_TIMEOUT_S = 3600.0
CLUSTER_TIMEOUT_S = 120.0

SUMMARY_RE = re.compile(
    r"(?P<files>\d+) files: (?P<ok>\d+) labelled, (?P<skipped>\d+) up to date, "
    r"(?P<failed>\d+) failed; (?P<audio_h>[\d.]+) h of audio in (?P<seconds>[\d.]+) s "
    r"\((?P<xrt>[\d.]+|nan) x real time\)")


# ---------------------------------------------------------------------------
# corpus
# ---------------------------------------------------------------------------


def render_file(seed, j, duration_s):
    """One speech-like recording: a phrase contour, a source-filter voice, white noise."""
    rng = np.random.default_rng(seed)
    f0_base = SPEAKERS[j % len(SPEAKERS)]
    n_vowels = max(1, round(duration_s / 0.5))
    vowels = tuple(rng.choice(VOWELS, size=n_vowels))
    times, f0 = synth.f0_contour(duration_s, hop_s=HOP_S, kind="phrase", f0_hz=f0_base,
                                 seed=seed)
    y = synth.voice(times, f0, SR, seed=seed, formants=vowels if len(vowels) > 1 else vowels[0],
                    unvoiced="breath", jitter=JITTER, shimmer=SHIMMER, amplitude=AMPLITUDE)
    return synth.add_noise(y, SNRS[j % len(SNRS)], color="white", seed=seed + 1, ref="active")


def corpus_recipe(n_files, duration_s, seed_base):
    return {"version": CORPUS_VERSION, "harmtrack": harmtrack.__version__, "sr": SR,
            "files": n_files, "duration_s": duration_s, "seed_base": seed_base,
            "speakers": list(SPEAKERS), "snrs_db": list(SNRS), "jitter": JITTER,
            "shimmer": SHIMMER, "amplitude": AMPLITUDE}


def ensure_corpus(folder, n_files, duration_s, seed_base):
    """Build the corpus in ``folder`` unless a complete one with the same recipe is there.

    Returns (folder, seconds spent building, whether it was reused).
    """
    folder = Path(folder)
    recipe = corpus_recipe(n_files, duration_s, seed_base)
    marker = folder / CORPUS_MARKER
    names = [f"utt_{j:05d}.wav" for j in range(n_files)]
    if marker.is_file():
        try:
            same = json.loads(marker.read_text()) == recipe
        except (OSError, ValueError):
            same = False
        on_disk = sorted(p.name for p in folder.iterdir() if p.suffix == ".wav")
        if same and on_disk == names:
            return folder, 0.0, True
    t0 = time.perf_counter()
    folder.mkdir(parents=True, exist_ok=True)
    if marker.exists():
        marker.unlink()
    for p in folder.iterdir():  # only our own files: a stale or partial corpus
        if p.name.startswith("utt_") and p.suffix == ".wav":
            p.unlink()
    for j, name in enumerate(names):
        synth.write_wav(folder / name, render_file(seed_base + j, j, duration_s), SR)
    marker.write_text(json.dumps(recipe, indent=1) + "\n")  # written last: marks it complete
    return folder, time.perf_counter() - t0, False


# ---------------------------------------------------------------------------
# processes and memory
# ---------------------------------------------------------------------------


def child_env():
    """The benchmark's environment (one thread per process), with the checkout importable."""
    env = os.environ.copy()
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(REPO), env.get("PYTHONPATH")) if p)
    return env


def _proc_status_kb(pid, field):
    try:
        with open(f"/proc/{pid}/status") as f:
            for line in f:
                if line.startswith(field + ":"):
                    return int(line.split()[1])
    except (OSError, ValueError, IndexError):
        return None
    return None


def _cmdline(pid):
    try:
        with open(f"/proc/{pid}/cmdline", "rb") as f:
            return f.read().replace(b"\0", b" ").decode("utf-8", "replace").strip()
    except OSError:
        if psutil is not None:
            try:
                return " ".join(psutil.Process(pid).cmdline())
            except psutil.Error:
                return ""
        return ""


def _children(pid):
    """Descendants of ``pid`` (psutil, else a walk of /proc)."""
    if psutil is not None:
        try:
            return [c.pid for c in psutil.Process(pid).children(recursive=True)]
        except psutil.Error:
            return []
    parents = {}
    for d in os.listdir("/proc"):
        if d.isdigit():
            ppid = _proc_status_kb(int(d), "PPid")
            if ppid is not None:
                parents.setdefault(ppid, []).append(int(d))
    out, todo = [], [pid]
    while todo:
        kids = parents.get(todo.pop(), [])
        out += kids
        todo += kids
    return out


def _peak_kb(pid):
    """The kernel's high-water mark of the resident set (VmHWM), else the current RSS."""
    kb = _proc_status_kb(pid, "VmHWM")
    if kb is None and psutil is not None:
        try:
            kb = psutil.Process(pid).memory_info().rss // 1024
        except psutil.Error:
            kb = None
    return kb


def machine_busy_s():
    """CPU seconds the whole machine has spent busy since boot (all CPUs, /proc/stat)."""
    try:
        with open("/proc/stat") as f:
            v = [int(x) for x in f.readline().split()[1:]]
    except (OSError, ValueError):
        return None
    idle = v[3] + (v[4] if len(v) > 4 else 0)  # idle + iowait
    return (sum(v[:8]) - idle) / os.sysconf("SC_CLK_TCK")


def _cpu_s(pid):
    """User + system CPU seconds of one process so far (/proc/<pid>/stat)."""
    try:
        with open(f"/proc/{pid}/stat") as f:
            fields = f.read().rsplit(")", 1)[1].split()
        return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")
    except (OSError, ValueError, IndexError):
        return None


def wait_for_idle(max_wait_s, *, window_s=1.0, busy_cores=0.15):
    """Wait until the machine was idle for ``window_s`` (other CPU < ``busy_cores``).

    Returns (seconds waited, CPU cores busy in the last window).
    """
    t0 = time.monotonic()
    while True:
        a = machine_busy_s()
        time.sleep(window_s)
        b = machine_busy_s()
        if a is None or b is None:
            return 0.0, float("nan")
        cores = (b - a) / window_s
        waited = time.monotonic() - t0
        if cores < busy_cores or waited >= max_wait_s:
            return waited, cores


class MemorySampler:
    """Polls the peak RSS of some process trees until stopped.

    VmHWM is the kernel's own high-water mark, so polling only has to catch
    each process once shortly before it exits; only growth in the last poll
    interval of a process's life can be missed.
    """

    def __init__(self, roots, interval=RSS_POLL_S):
        self.roots = dict(roots)  # pid -> label of the tree
        self.interval = interval
        self.peak_kb = {}   # pid -> max VmHWM seen
        self.cpu_first = {}  # pid -> CPU seconds when first seen
        self.cpu_last = {}   # pid -> CPU seconds when last seen
        self.info = {}      # pid -> (tree label, parent pid or None, cmdline)
        self.before = set()  # pids that existed before the run
        self.batch_pid = None
        self.epoch0 = None
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)

    def start(self):
        self.sample()
        self._thread.start()
        return self

    def sample(self):
        for root, label in list(self.roots.items()):
            for pid in [root] + _children(root):
                kb = _peak_kb(pid)
                if kb is None:
                    continue
                if pid not in self.info:
                    ppid = _proc_status_kb(pid, "PPid")
                    self.info[pid] = (label, ppid, _cmdline(pid))
                self.peak_kb[pid] = max(kb, self.peak_kb.get(pid, 0))
                cpu = _cpu_s(pid)
                if cpu is not None:
                    self.cpu_first.setdefault(pid, cpu)
                    self.cpu_last[pid] = cpu

    def _loop(self):
        while not self._stop.wait(self.interval):
            self.sample()

    def stop(self):
        self._stop.set()
        self._thread.join()

    def cpu_used_s(self, pids):
        """CPU seconds the given (long-lived) processes used between first and last sample."""
        return sum(self.cpu_last[p] - self.cpu_first[p] for p in pids if p in self.cpu_last)

    def processes(self):
        """[(pid, tree label, parent pid, cmdline, peak MB, CPU s in the run)] of every process.

        The CPU time of a process that ended during the run is its last sample's,
        up to one poll interval short.
        """
        out = []
        for pid in self.peak_kb:
            last = self.cpu_last.get(pid, 0.0)
            cpu = last - self.cpu_first.get(pid, 0.0) if pid in self.before else last
            out.append((pid, *self.info[pid], self.peak_kb[pid] / 1024.0, cpu))
        return out


def _is_helper(cmd):
    """Helper processes of the multiprocessing machinery (no work done there)."""
    return "resource_tracker" in cmd or "forkserver" in cmd or "semaphore_tracker" in cmd


def local_roles(sampler, batch_pid, workers):
    """Peak MB and CPU s of a local batch: {"main": (mb, cpu), "workers": [(mb, cpu)...]}.

    With one worker the batch process does the work itself and is its worker.
    """
    main, wk = None, []
    for pid, _, ppid, cmd, mb, cpu in sampler.processes():
        if pid == batch_pid:
            main = (mb, cpu)
        elif ppid == batch_pid and not _is_helper(cmd):
            wk.append((mb, cpu))
    if workers <= 1 and not wk and main is not None:
        wk = [main]
    return {"main": main or (None, None), "workers": sorted(wk, reverse=True)}


def dask_roles(sampler, batch_pid, worker_roots):
    """Like :func:`local_roles` for a Dask batch, plus "nannies".

    ``dask worker`` runs a nanny process that starts the actual worker as its
    child; the worker is what does the tracking.  "main" is the batch client.
    """
    main, wk, nannies, sched = None, [], [], (None, None)
    for pid, tree, ppid, cmd, mb, cpu in sampler.processes():
        if pid == batch_pid:
            main = (mb, cpu)
        elif tree == "scheduler":
            if ppid not in sampler.roots:  # the scheduler itself, not a helper of it
                sched = (mb, cpu)
        elif pid in worker_roots:
            nannies.append((mb, cpu))
        elif ppid in worker_roots and not _is_helper(cmd):
            wk.append((mb, cpu))
    if not wk:  # workers without a nanny: the root itself works
        wk, nannies = nannies, []
    return {"main": main or (None, None), "workers": sorted(wk, reverse=True),
            "nannies": sorted(nannies, reverse=True), "scheduler": sched}


# ---------------------------------------------------------------------------
# one batch run
# ---------------------------------------------------------------------------


def read_summary(path):
    with open(path, newline="") as f:
        rows = list(csv.DictReader(f))
    secs = np.array([float(r["seconds"]) for r in rows if r["seconds"]])
    return rows, secs


def run_cli_batch(corpus, outdir, *, workers=None, scheduler=None, cwd, extra_roots=None,
                  extra_args=()):
    """``python -m harmtrack batch`` as a subprocess into the empty ``outdir``.

    Returns a dict: wall_s (Popen to exit), the CLI's own figures, per-file
    seconds from summary.csv, and the sampler (peak RSS of every process).
    """
    outdir = Path(outdir)
    if outdir.exists() and any(outdir.iterdir()):
        raise RuntimeError(f"{outdir}: output folder not empty; every timed run needs a fresh one")
    cmd = [sys.executable, "-m", "harmtrack", "batch", str(corpus), "-o", str(outdir),
           "--formats", FORMATS, "--preset", PRESET, "-q"]
    if workers is not None:
        cmd += ["--workers", str(workers)]
    if scheduler is not None:
        cmd += ["--scheduler", scheduler]
    cmd += list(extra_args)
    with tempfile.TemporaryFile(mode="w+") as out_f, tempfile.TemporaryFile(mode="w+") as err_f:
        rc, wall, usage, busy, sampler = _run_sampled(cmd, cwd, out_f, err_f, extra_roots)
        out_f.seek(0)
        err_f.seek(0)
        stdout, stderr = out_f.read(), err_f.read()
    busy0, busy1 = busy
    ours = usage.ru_utime + usage.ru_stime + sampler.cpu_used_s(extra_roots or {})
    ours += sampler.cpu_used_s([p for p, (_, ppid, _) in sampler.info.items()
                                if ppid in (extra_roots or {})])
    machine = (busy1 - busy0) if busy0 is not None and busy1 is not None else float("nan")
    # CPU used by processes that are not part of this run, as cores over the run
    other_cores = max(0.0, machine - ours) / wall
    if rc < 0:
        raise RuntimeError(f"batch killed (signal {-rc}; timeout {RUN_TIMEOUT_S:g} s): "
                           f"{' '.join(cmd)}")
    if rc != 0:
        tail = "\n".join(stderr.strip().splitlines()[-15:])
        raise RuntimeError(f"batch failed with exit status {rc}: {' '.join(cmd)}\n{tail}")
    m = SUMMARY_RE.search(stdout)
    if not m:
        raise RuntimeError(f"no summary line in the batch's output: {stdout.strip()[:300]!r}")
    n = int(m["files"])
    if int(m["ok"]) != n:
        raise RuntimeError(f"expected all {n} files labelled in a fresh folder, got: "
                           f"{m.group(0)}")
    _, secs = read_summary(outdir / "summary.csv")
    return {"cmd": cmd, "pid": sampler.batch_pid, "wall_s": wall, "files": n, "cpu_s": ours,
            "other_cores": other_cores, "timeline": timeline(outdir, sampler.epoch0, wall),
            "cli_seconds": float(m["seconds"]), "cli_xrt": float(m["xrt"]),
            "summary_line": stdout.strip().splitlines()[0], "file_seconds": secs,
            "sampler": sampler}


def timeline(outdir, epoch0, wall):
    """When the outputs were written, in seconds after the batch process was started.

    From the files' modification times: the first and the last per-file label
    file, the dataset and the summary; ``exit_s`` is the wall time.
    """
    outdir = Path(outdir)
    times = [p.stat().st_mtime for p in outdir.rglob("*." + FORMATS)]
    out = {"first_label_s": min(times) - epoch0 if times else None,
           "last_label_s": max(times) - epoch0 if times else None, "exit_s": wall}
    for key, name in (("dataset_s", "frames.parquet"), ("summary_s", "summary.csv")):
        f = outdir / name
        out[key] = f.stat().st_mtime - epoch0 if f.exists() else None
    return out


def _run_sampled(cmd, cwd, out_f, err_f, extra_roots):
    """Run ``cmd`` to its end while sampling memory and CPU; the wall clock is Popen to exit."""
    roots = dict(extra_roots or {})
    sampler = MemorySampler(roots)
    sampler.sample()  # CPU times of the cluster's processes before the run
    sampler.before = set(sampler.info)
    busy0 = machine_busy_s()
    sampler.epoch0 = time.time()  # file times (mtime) are read against this clock
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=out_f, stderr=err_f, cwd=str(cwd), env=child_env())
    sampler.roots[proc.pid] = "batch"
    sampler.batch_pid = proc.pid
    sampler.start()
    timer = threading.Timer(RUN_TIMEOUT_S, proc.kill)  # ends only this run's process
    timer.start()
    # wait4: the exit status and the CPU time of the batch and every process it reaped
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    busy1 = machine_busy_s()
    timer.cancel()
    proc.returncode = os.waitstatus_to_exitcode(status)
    sampler.stop()
    sampler.sample()  # the cluster's CPU times after the run
    return proc.returncode, wall, usage, (busy0, busy1), sampler


# ---------------------------------------------------------------------------
# Dask cluster
# ---------------------------------------------------------------------------


def free_port():
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def dask_command(tool):
    """``dask scheduler`` / ``dask worker`` from this environment's dask."""
    exe = Path(sys.executable).with_name("dask")
    if exe.exists():
        return [str(exe), tool]
    found = shutil.which("dask")
    if found:
        return [found, tool]
    raise RuntimeError("dask's command-line tool is not installed "
                       "(pip install 'dask[distributed]')")


class DaskCluster:
    """A scheduler and ``n`` single-threaded workers as separate processes on 127.0.0.1."""

    def __init__(self, workdir, n_workers=2):
        self.workdir = Path(workdir)
        self.n_workers = n_workers
        self.scheduler = None
        self.workers = []
        self.address = None
        self.start_s = None
        self._logs = []

    def _popen(self, cmd, log_name):
        log = open(self.workdir / log_name, "w")  # noqa: SIM115 - closed in stop()
        self._logs.append(log)
        env = child_env()
        # scratch space of the scheduler and workers inside the run's folder, not in /tmp
        env["DASK_TEMPORARY_DIRECTORY"] = str(self.workdir)
        return subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT, cwd=str(self.workdir),
                                env=env)

    def log_tail(self, n=10):
        out = []
        for log in self._logs:
            try:
                lines = Path(log.name).read_text().strip().splitlines()[-n:]
            except OSError:
                continue
            out.append(f"--- {Path(log.name).name}\n" + "\n".join(lines))
        return "\n".join(out)

    def start(self):
        from distributed import Client

        self.workdir.mkdir(parents=True, exist_ok=True)
        port = free_port()
        sched_file = self.workdir / "scheduler.json"
        t0 = time.perf_counter()
        self.scheduler = self._popen(
            dask_command("scheduler") + ["--host", "127.0.0.1", "--port", str(port),
                                         "--no-dashboard", "--scheduler-file", str(sched_file)],
            "scheduler.log")
        deadline = time.monotonic() + CLUSTER_TIMEOUT_S
        while not sched_file.is_file():
            if self.scheduler.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError("the Dask scheduler did not start\n" + self.log_tail())
            time.sleep(0.05)
        while True:  # the file may be seen before it is completely written
            try:
                self.address = json.loads(sched_file.read_text())["address"]
                break
            except (ValueError, KeyError):
                if time.monotonic() > deadline:
                    raise RuntimeError("unreadable scheduler file\n" + self.log_tail()) from None
                time.sleep(0.05)
        for i in range(self.n_workers):
            local = self.workdir / f"worker{i}"
            local.mkdir(exist_ok=True)
            self.workers.append(self._popen(
                dask_command("worker") + [self.address, "--nworkers", "1", "--nthreads", "1",
                                          "--no-dashboard", "--host", "127.0.0.1",
                                          "--local-directory", str(local)],
                f"worker{i}.log"))
        try:
            with Client(self.address, timeout="30s") as client:
                client.wait_for_workers(self.n_workers, timeout=CLUSTER_TIMEOUT_S)
        except Exception as exc:  # noqa: BLE001 - reported with the logs
            raise RuntimeError(f"Dask workers did not connect: {exc}\n" + self.log_tail()) from None
        self.start_s = time.perf_counter() - t0
        return self

    def stop(self):
        """Ask the scheduler to shut the cluster down; end what is left by its process id."""
        procs = [p for p in [self.scheduler] + self.workers if p is not None]
        clean = True
        if self.address and any(p.poll() is None for p in procs):
            try:
                from distributed import Client

                with Client(self.address, timeout="10s") as client:
                    client.shutdown()
            except Exception:  # noqa: BLE001 - fall back to signals below
                clean = False
        for p in procs:
            try:
                p.wait(timeout=30)
            except subprocess.TimeoutExpired:
                clean = False
                p.terminate()
                try:
                    p.wait(timeout=10)
                except subprocess.TimeoutExpired:
                    p.kill()
                    p.wait()
        for log in self._logs:
            log.close()
        return clean


# ---------------------------------------------------------------------------
# breakdown: where the time goes
# ---------------------------------------------------------------------------

STARTUP_PROBE = r"""
import time
t0 = time.perf_counter()
import numpy as np
import harmtrack
import harmtrack.batch
t1 = time.perf_counter()
y = np.sin(2 * np.pi * 140.0 * np.arange(16000) / 16000.0)
y += 1e-3 * np.random.default_rng(0).standard_normal(16000)
harmtrack.track(y, 16000, preset="voice")
t2 = time.perf_counter()
harmtrack.track(y, 16000, preset="voice")
t3 = time.perf_counter()
print(t1 - t0, t2 - t1, t3 - t2)
"""


MALLOC_PROBE = r"""
import sys, time, glob
import harmtrack
files = sorted(glob.glob(sys.argv[1] + "/*.wav"))[:int(sys.argv[2])]
harmtrack.track_file(files[0], preset=sys.argv[3])
secs = []
for f in files:
    t0 = time.perf_counter()
    harmtrack.track_file(f, preset=sys.argv[3])
    secs.append(time.perf_counter() - t0)
secs.sort()
print(secs[len(secs) // 2])
"""


def _dask_prespawn_environ():
    """The environment dask's nanny sets in the worker processes it starts ({} if none)."""
    try:
        import dask
        import distributed  # noqa: F401 - loads distributed's configuration

        env = dask.config.get("distributed.nanny.pre-spawn-environ", default={}) or {}
    except ImportError:
        return {}
    return {str(k): str(v) for k, v in env.items() if k not in os.environ}


def malloc_probe(corpus, env_set, cwd, n=30):
    """Median ``track_file`` seconds in a fresh process without and with ``env_set``."""
    out = []
    for extra in ({}, env_set):
        env = child_env()
        env.update(extra)
        p = subprocess.run([sys.executable, "-c", MALLOC_PROBE, str(corpus), str(n), PRESET],
                           capture_output=True, text=True, cwd=str(cwd), env=env, timeout=600,
                           check=False)
        if p.returncode != 0:
            raise RuntimeError(f"probe failed: {p.stderr.strip()[-300:]}")
        out.append(float(p.stdout.split()[-1]))
    return tuple(out)


def time_subprocess(cmd, *, cwd, repeats=3):
    """Median wall time of a command (and its last stdout)."""
    walls, out = [], ""
    for _ in range(repeats):
        t0 = time.perf_counter()
        p = subprocess.run(cmd, capture_output=True, text=True, cwd=str(cwd), env=child_env(),
                           timeout=600, check=False)
        walls.append(time.perf_counter() - t0)
        if p.returncode != 0:
            raise RuntimeError(f"{' '.join(cmd)} failed: {p.stderr.strip()[-300:]}")
        out = p.stdout
    return float(np.median(walls)), out


def run_halves(corpus, cwd, fresh_outdir):
    """Wall seconds until two ``--workers 1`` batches, each given half the files of
    ``corpus`` as a manifest and started together, have both exited."""
    files = sorted(Path(corpus).glob("*.wav"))
    procs, manifests = [], []
    for i, part in enumerate((files[0::2], files[1::2])):
        man = Path(cwd) / f"half{i}_{time.monotonic_ns()}.txt"
        man.write_text("".join(f"{f}\n" for f in part))
        manifests.append(man)
    outs = [fresh_outdir(f"half{i}") for i in range(2)]
    t0 = time.perf_counter()
    for man, out in zip(manifests, outs):
        procs.append(subprocess.Popen(
            [sys.executable, "-m", "harmtrack", "batch", str(man), "-o", str(out), "--formats",
             FORMATS, "--preset", PRESET, "-q", "--workers", "1"],
            cwd=str(cwd), env=child_env(), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE))
    errs = [p.communicate(timeout=RUN_TIMEOUT_S)[1] for p in procs]
    wall = time.perf_counter() - t0
    for p, err in zip(procs, errs):
        if p.returncode != 0:
            raise RuntimeError(f"half batch failed: {err.decode(errors='replace')[-300:]}")
    for d in outs + manifests:
        shutil.rmtree(d, ignore_errors=True) if d.is_dir() else d.unlink()
    return wall


def analysis_times(corpus, n=20):
    """Median seconds of ``harmtrack.track_file`` (read + analysis) on ``n`` files, here.

    Compared with the per-file seconds of summary.csv (the worker's whole job:
    hashing, resume check, analysis, encoding and writing the labels) it shows
    the per-file cost of the batch machinery around the analysis.
    """
    files = sorted(Path(corpus).glob("*.wav"))
    pick = files[::max(1, len(files) // n)][:n]
    harmtrack.track_file(pick[0], preset=PRESET)  # untimed: numba's cache load
    secs = []
    for f in pick:
        t0 = time.perf_counter()
        harmtrack.track_file(f, preset=PRESET)
        secs.append(time.perf_counter() - t0)
    return float(np.median(secs))


# ---------------------------------------------------------------------------
# report
# ---------------------------------------------------------------------------


def fmt_mb(values):
    if not values:
        return "-"
    return "/".join(f"{v:.0f}" for v in values)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true",
                    help=f"{QUICK_LONG[0]} x {QUICK_LONG[1]:g} s and {QUICK_SHORT[0]} x "
                         f"{QUICK_SHORT[1]:g} s files, one run per configuration")
    ap.add_argument("--data", type=Path,
                    default=Path(tempfile.gettempdir()) / "harmtrack_bench_batch",
                    help="folder of the synthetic corpus, built once and reused "
                         "(default: %(default)s)")
    ap.add_argument("--repeats", type=int, default=None,
                    help="runs per configuration, interleaved; the median counts "
                         "(default 3, or 1 with --quick)")
    ap.add_argument("--json", type=Path, default=None, help="write every number to this file")
    ap.add_argument("--no-dask", action="store_true", help="skip the Dask cluster configuration")
    ap.add_argument("--no-breakdown", action="store_true",
                    help="skip the where-the-time-goes measurements")
    ap.add_argument("--wait-idle", type=float, default=60.0, metavar="S",
                    help="before each timed run, wait up to S seconds for the machine to be "
                         "idle for 1 s (default %(default)g; 0: do not wait)")
    ap.add_argument("--keep", action="store_true",
                    help="keep the output folders (printed) instead of removing them")
    args = ap.parse_args(argv)

    repeats = args.repeats if args.repeats is not None else (1 if args.quick else 3)
    if repeats < 1:
        ap.error("--repeats must be at least 1")
    long_spec = QUICK_LONG if args.quick else LONG
    short_spec = QUICK_SHORT if args.quick else SHORT

    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    cpus = os.cpu_count() or 1
    try:
        import distributed

        dask_version = distributed.__version__
    except ImportError:
        dask_version = None
    print(f"harmtrack {harmtrack.__version__} | numpy {np.__version__} | "
          f"distributed {dask_version or 'not installed'} | psutil "
          f"{psutil.__version__ if psutil else 'not installed (/proc)'} | python "
          f"{platform.python_version()} | {platform.machine()}")
    limiter = " + threadpoolctl" if _single_thread.THREAD_LIMITER else ""
    print(f"threads: 1 per process (env vars{limiter}"
          f", inherited by every subprocess) | load average {load[0]:.2f} on {cpus} CPUs"
          + ("  << machine is busy: timings are unreliable"
             if load[0] > max(0.5, 0.25 * cpus) else ""))
    if cpus < 2:
        print(f"note: only {cpus} CPU: 2 workers cannot run in parallel here")

    # --- corpus -------------------------------------------------------------------
    data = args.data.resolve()
    data.mkdir(parents=True, exist_ok=True)
    corpora = {}
    for key, (n, dur), seed in (("long", long_spec, SEED_LONG), ("short", short_spec, SEED_SHORT)):
        folder, built_s, reused = ensure_corpus(data / f"{key}_{n}x{dur:g}s", n, dur, seed)
        corpora[key] = {"folder": folder, "files": n, "duration_s": dur, "audio_s": n * dur}
        print(f"corpus {key}: {n} x {dur:g} s = {n * dur / 3600:.3f} h, {SR} Hz mono, {folder} "
              + ("(reused)" if reused else f"(built in {built_s:.1f} s)"))

    work = Path(tempfile.mkdtemp(prefix="harmtrack_bench_batch_run_"))
    try:
        counter = {"n": 0}

        def fresh_outdir(label):
            counter["n"] += 1
            d = work / f"out{counter['n']:03d}_{label}"
            assert not d.exists()
            return d

        def discard(outdir):
            if not args.keep:
                shutil.rmtree(outdir, ignore_errors=True)

        # --- warm-up: fills numba's on-disk cache if it is empty (not timed) -------------
        warm_src = work / "warm_in"
        warm_src.mkdir()
        for p in sorted(corpora["long"]["folder"].glob("*.wav"))[:2]:
            shutil.copy(p, warm_src / p.name)
        warm_out = fresh_outdir("warm")
        t0 = time.perf_counter()
        run_cli_batch(warm_src, warm_out, workers=1, cwd=work)
        print(f"warm-up: 2-file batch in {time.perf_counter() - t0:.2f} s (not counted; fills "
              "numba's on-disk cache when it is empty)")
        discard(warm_out)

        # --- timed runs, interleaved ------------------------------------------------------
        configs = [
            ("local1", "10 s files, local, 1 worker", "long", {"workers": 1}),
            ("local2", "10 s files, local, 2 workers", "long", {"workers": 2}),
        ]
        if not args.no_dask:
            if dask_version is None:
                print("Dask: distributed not installed, configuration skipped")
            else:
                configs.append(("dask2", "10 s files, Dask, 2 workers", "long", {"dask": 2}))
        configs.append(("short2", "1 s files, local, 2 workers", "short", {"workers": 2}))

        def idle_gate():
            if args.wait_idle <= 0:
                return 0.0
            waited, cores = wait_for_idle(args.wait_idle)
            if cores >= 0.15:
                print(f"  (machine still busy after waiting {waited:.0f} s: {cores:.2f} cores "
                      "in use)")
            return waited

        runs = {c[0]: [] for c in configs}
        last_outdir = {}
        print(f"\nruns: {len(configs)} configurations x {repeats} repeat(s), interleaved; "
              "every run "
              "into a fresh, empty output folder")
        for rep in range(repeats):
            for key, label, corpus_key, how in configs:
                corpus = corpora[corpus_key]["folder"]
                outdir = fresh_outdir(key)
                if "dask" in how:
                    cluster = DaskCluster(work / f"dask{counter['n']:03d}", how["dask"])
                    try:
                        cluster.start()
                        roots = {p.pid: f"worker{i}" for i, p in enumerate(cluster.workers)}
                        waited = idle_gate()
                        r = run_cli_batch(corpus, outdir, scheduler=cluster.address, cwd=work,
                                          extra_roots={**roots, cluster.scheduler.pid: "scheduler"})
                    finally:
                        clean = cluster.stop()
                    roles = dask_roles(r["sampler"], r["pid"], set(roots))
                    r.update(cluster_start_s=cluster.start_s, clean_shutdown=clean,
                             workers=how["dask"],
                             nanny_mb=[mb for mb, _ in roles["nannies"]],
                         nanny_cpu_s=[cpu for _, cpu in roles["nannies"]],
                         scheduler_mb=roles["scheduler"][0],
                         scheduler_cpu_s=roles["scheduler"][1])
                else:
                    waited = idle_gate()
                    r = run_cli_batch(corpus, outdir, workers=how["workers"], cwd=work)
                    roles = local_roles(r["sampler"], r["pid"], how["workers"])
                    r.update(workers=how["workers"])
                r.update(main_mb=roles["main"][0], main_cpu_s=roles["main"][1],
                         worker_mb=[mb for mb, _ in roles["workers"]],
                         worker_cpu_s=[cpu for _, cpu in roles["workers"]])
                r["audio_s"] = corpora[corpus_key]["audio_s"]
                r["waited_idle_s"] = waited
                r["throughput"] = r["audio_s"] / r["wall_s"]
                del r["sampler"]
                runs[key].append(r)
                extra = ""
                if "dask" in how:
                    extra = (f"; cluster up in {r['cluster_start_s']:.1f} s (not counted), "
                             f"shutdown {'clean' if r['clean_shutdown'] else 'NOT clean'}")
                busy = (f"  << other processes used {r['other_cores']:.2f} cores"
                        if r["other_cores"] > OTHER_LOAD_WARN else "")
                print(f"  [{rep + 1}/{repeats}] {label:<30s} wall {r['wall_s']:7.2f} s  "
                      f"{r['throughput']:6.0f} audio h/h  CPU {r['cpu_s']:6.2f} s  "
                      f"other load {r['other_cores']:.2f} cores{extra}{busy}")
                if key in last_outdir:
                    discard(last_outdir[key])
                last_outdir[key] = outdir

        # --- table -------------------------------------------------------------------------
        def med(key, field):
            return float(np.median([r[field] for r in runs[key]]))

        summary = {}
        for key, label, corpus_key, how in configs:
            rs = runs[key]
            fs = np.concatenate([r["file_seconds"] for r in rs])
            summary[key] = {
                "label": label, "files": rs[0]["files"], "audio_s": rs[0]["audio_s"],
                "workers": rs[0]["workers"], "wall_s": med(key, "wall_s"),
                "wall_s_runs": [r["wall_s"] for r in rs],
                "throughput": float(np.median([r["throughput"] for r in rs])),
                "cli_seconds": med(key, "cli_seconds"), "cli_xrt": med(key, "cli_xrt"),
                "main_mb": max((r["main_mb"] or 0.0) for r in rs),
                "worker_mb": [max(v) for v in zip(*[r["worker_mb"] for r in rs])]
                if all(r["worker_mb"] for r in rs) else [],
                "nanny_mb": [max(v) for v in zip(*[r["nanny_mb"] for r in rs])]
                if all(r.get("nanny_mb") for r in rs) else [],
                "other_cores_max": max(r["other_cores"] for r in rs),
                "cpu_s": med(key, "cpu_s"), "main_cpu_s": med(key, "main_cpu_s"),
                "worker_cpu_s": [float(np.median(v))
                                 for v in zip(*[r["worker_cpu_s"] for r in rs])],
                "file_s_median": float(np.median(fs)), "file_s_sum": float(np.median(
                    [r["file_seconds"].sum() for r in rs])),
                "file_s_max": float(np.max(fs)),
                "cluster_start_s": (float(np.median([r["cluster_start_s"] for r in rs]))
                                    if "dask" in how else None),
                "scheduler_mb": (max(r["scheduler_mb"] or 0.0 for r in rs)
                                 if "dask" in how else None),
                "scheduler_cpu_s": med(key, "scheduler_cpu_s") if "dask" in how else None,
                "nanny_cpu_s": ([float(np.median(v)) for v in zip(*[r["nanny_cpu_s"] for r in rs])]
                                if "dask" in how else []),
                "timeline": {k: float(np.median([r["timeline"][k] for r in rs]))
                             for k in rs[0]["timeline"]
                             if all(r["timeline"][k] is not None for r in rs)},
                "summary_line": rs[-1]["summary_line"], "cmd": rs[-1]["cmd"],
            }

        print()
        head = (f"{'configuration':<30s}{'files':>6s}{'audio h':>9s}{'wall s':>8s}"
                f"{'audio h/h':>10s}"
                f"{'xRT cli':>8s}{'main MB':>8s}  {'worker MB':<11s}{'file s':>8s}{'CPU s':>8s}"
                f"{'other':>7s}")
        print(head)
        print("-" * len(head))
        for key, s in summary.items():
            print(f"{s['label']:<30s}{s['files']:>6d}{s['audio_s'] / 3600:>9.3f}{s['wall_s']:>8.2f}"
                  f"{s['throughput']:>10.0f}{s['cli_xrt']:>8.0f}{s['main_mb']:>8.0f}  "
                  f"{fmt_mb(s['worker_mb']):<11s}{s['file_s_median']:>8.4f}{s['cpu_s']:>8.2f}"
                  f"{s['other_cores_max']:>7.2f}")
        print(f"wall s: Popen to exit of `python -m harmtrack batch` (median of {repeats}), "
              "start-up included;\naudio h/h: throughput, audio hours per wall hour (= x real "
              "time on the wall clock);\nxRT cli: the CLI's own 'x real time' (its clock starts "
              "after start-up and the input scan);\nmain MB: peak RSS (VmHWM) of the "
              "batch process (Dask: the client);\nworker MB: peak RSS of each worker process "
              "(local: the helper processes the batch process forks;\nit labels files too, see "
              "main MB; Dask: the worker process under each nanny); file s: median per-file seconds from summary.csv;\n"
              "CPU s: CPU seconds of all "
              "processes of the run (Dask: client, scheduler, nannies, workers);\nother: CPU "
              f"used meanwhile by processes outside the run, in cores (max over runs; > "
              f"{OTHER_LOAD_WARN:g}: not an idle machine).")
        if "dask2" in summary:
            s = summary["dask2"]
            print("Dask: cluster start-up (scheduler + 2 workers connected) "
                  f"{s['cluster_start_s']:.1f} s,"
                  f" not in wall s; peak RSS: scheduler {s['scheduler_mb']:.0f} MB, nannies "
                  f"{fmt_mb(s['nanny_mb'])} MB.")

        # --- breakdown -------------------------------------------------------------------
        breakdown = {}
        if not args.no_breakdown:
            print("\nwhere the time goes")
            py_s, _ = time_subprocess([sys.executable, "-c", "pass"], cwd=work)
            imp_s, _ = time_subprocess([sys.executable, "-c", "import harmtrack"], cwd=work)
            _, probe = time_subprocess([sys.executable, "-c", STARTUP_PROBE], cwd=work)
            p_import, p_first, p_second = (float(v) for v in probe.split())
            one_src = work / "one_in"
            one_src.mkdir()
            shutil.copy(min(corpora["short"]["folder"].glob("*.wav")), one_src)
            one_walls = []
            for _ in range(3):
                o = fresh_outdir("one")
                one_walls.append(run_cli_batch(one_src, o, workers=1, cwd=work)["wall_s"])
                discard(o)
            one_s = float(np.median(one_walls))
            breakdown["process"] = {"python_empty_s": py_s, "import_harmtrack_s": imp_s,
                                    "import_batch_and_numpy_s": p_import, "first_track_s": p_first,
                                    "second_track_s": p_second, "batch_1_file_1s_wall_s": one_s}
            print(f"  a fresh process: `python -c pass` {py_s:.3f} s, "
                  f"`python -c 'import harmtrack'` {imp_s:.3f} s (wall);\n"
                  f"    inside it: numpy + harmtrack.batch imports {p_import:.3f} s, "
                  f"first track call {p_first:.3f} s, second {p_second:.3f} s\n"
                  f"    -> numba cache load and first-call set-up ~{p_first - p_second:.2f} s, "
                  "paid once by every fresh worker")
            print("  `harmtrack batch` of a single 1 s file (1 worker, in-process): "
                  f"{one_s:.2f} s wall = the fixed cost of a run")

            # analysis alone vs the worker's whole per-file job
            for key, cfg_key in (("long", "local1"), ("short", "short2")):
                if cfg_key not in summary:
                    continue
                ana = analysis_times(corpora[key]["folder"])
                d = corpora[key]["duration_s"]
                job = summary[cfg_key]["file_s_median"]
                breakdown[f"per_file_{key}"] = {"track_file_s": ana, "batch_file_s": job,
                                                "batch_config": cfg_key}
                print(f"  per file, {d:g} s files: harmtrack.track_file {ana * 1e3:.1f} ms here; "
                      f"the batch's per-file seconds ({summary[cfg_key]['label']}) "
                      f"{job * 1e3:.1f} ms\n"
                      f"    = {ana / d * 1e3:.2f} vs {job / d * 1e3:.2f} ms per audio second")

            # the most any two processes can do here: two independent 1-worker runs,
            # each on half the 10 s files, started together (no coordination at all)
            halves = []
            for rep in range(repeats):
                idle_gate()
                halves.append(run_halves(corpora["long"]["folder"], work, fresh_outdir))
            h_wall = float(np.median(halves))
            t_one = summary["local1"]["wall_s"]
            breakdown["independent_halves"] = {"wall_s": h_wall, "runs": halves,
                                               "ratio_vs_1_worker": t_one / h_wall}
            print(f"  two independent 1-worker runs on the two halves of the 10 s files, started "
                  f"together: {h_wall:.2f} s to both exits\n"
                  f"    -> {t_one / h_wall:.2f} x one worker: the scaling two processes reach "
                  "here with no coordination at all (start-up paid by each, cores shared)")

            # dataset assembly: the same runs with --no-dataset (public option)
            nods = {}
            for rep in range(repeats):
                for key, _, corpus_key, how in configs:
                    if key not in ("local2", "short2"):
                        continue
                    o = fresh_outdir(key + "_nods")
                    idle_gate()
                    r = run_cli_batch(corpora[corpus_key]["folder"], o, workers=how["workers"],
                                      cwd=work, extra_args=["--no-dataset"])
                    nods.setdefault(key, []).append(r["wall_s"])
                    discard(o)
            for key, walls in nods.items():
                w = float(np.median(walls))
                breakdown[f"no_dataset_{key}"] = {"wall_s": w, "runs": walls,
                                                  "dataset_cost_s": summary[key]["wall_s"] - w}
                print(f"  {summary[key]['label']}: with --no-dataset {w:.2f} s wall vs "
                      f"{summary[key]['wall_s']:.2f} s -> the Parquet dataset costs "
                      f"{summary[key]['wall_s'] - w:.2f} s")

            # per run: the files' own seconds against the wall clock, CPU by process
            print("  per configuration (medians): wall = start-up and input scan "
                  "(wall - CLI clock) + CLI clock;\n  'in files' = sum of per-file seconds / "
                  "workers; CPU s of the main process and of each worker")
            for key, s in summary.items():
                files_per_worker = s["file_s_sum"] / s["workers"]
                breakdown[f"overhead_{key}"] = {
                    "startup_and_scan_s": s["wall_s"] - s["cli_seconds"],
                    "in_files_per_worker_s": files_per_worker,
                    "outside_files_s": s["wall_s"] - files_per_worker,
                    "main_cpu_s": s["main_cpu_s"], "worker_cpu_s": s["worker_cpu_s"]}
                wk_cpu = "/".join(f"{v:.2f}" for v in s["worker_cpu_s"]) or "-"
                print(f"    {s['label']:<30s} wall {s['wall_s']:6.2f} = "
                      f"{s['wall_s'] - s['cli_seconds']:4.2f} + {s['cli_seconds']:6.2f}; "
                      f"in files {files_per_worker:6.2f}; outside "
                      f"{s['wall_s'] - files_per_worker:5.2f}; CPU main {s['main_cpu_s']:5.2f}, "
                      f"workers {wk_cpu}; slowest file {s['file_s_max']:.2f} s")
                if s["scheduler_cpu_s"] is not None:
                    print(f"    {'':<30s} Dask scheduler CPU {s['scheduler_cpu_s']:.2f} s, nannies "
                          f"{'/'.join(f'{v:.2f}' for v in s['nanny_cpu_s'])} s")

            # the timeline of a run, from the output files' modification times
            print("  timeline (medians, s after the batch process started): first label file "
                  "written, last one,\n  dataset and summary written, process exit")
            for key, s in summary.items():
                tl = s["timeline"]
                breakdown[f"timeline_{key}"] = tl
                if "first_label_s" not in tl:
                    continue
                nan = float("nan")
                print(f"    {s['label']:<30s} first {tl['first_label_s']:5.2f}  last "
                      f"{tl['last_label_s']:5.2f}  dataset {tl.get('dataset_s', nan):5.2f}  "
                      f"summary {tl.get('summary_s', nan):5.2f}  exit {tl['exit_s']:5.2f}   -> "
                      f"before the first label {tl['first_label_s']:.2f}, after the last "
                      f"{tl['exit_s'] - tl['last_label_s']:.2f}")

            if "dask2" in summary:
                # dask's nanny starts its workers with MALLOC_TRIM_THRESHOLD_ set
                # (dask config distributed.nanny.pre-spawn-environ)
                env_set = _dask_prespawn_environ()
                if env_set:
                    plain, with_env = malloc_probe(corpora["long"]["folder"], env_set, work)
                    breakdown["dask_prespawn_environ"] = {"environ": env_set,
                                                          "track_file_s": plain,
                                                          "track_file_with_environ_s": with_env}
                    print(f"  Dask's nanny starts workers with {env_set}; "
                          f"harmtrack.track_file on 10 s files in a fresh process: "
                          f"{plain * 1e3:.1f} ms without, {with_env * 1e3:.1f} ms with "
                          f"({100 * (with_env / plain - 1):+.0f} %)")

        # --- floors ------------------------------------------------------------------------
        floors = Floors()
        floor = floors.add

        t1, t2 = summary["local1"]["throughput"], summary["local2"]["throughput"]
        floor(f"2 local workers >= {SCALING_FLOOR:g} x 1 worker", t2 >= SCALING_FLOOR * t1,
              f"{t2 / t1:.2f} x ({t2:.0f} vs {t1:.0f} audio h/h)")
        ts = summary["short2"]["throughput"]
        floor(f"1 s files >= {SHORT_FILE_FLOOR * 100:g} % of 10 s files (2 workers)",
              ts >= SHORT_FILE_FLOOR * t2,
              f"{100 * ts / t2:.0f} % ({ts:.0f} vs {t2:.0f} audio h/h)")
        busy_runs = sum(r["other_cores"] > OTHER_LOAD_WARN for rs in runs.values() for r in rs)
        n_fail = floors.report(
            note=f"note: {busy_runs} run(s) shared the machine with other load" if busy_runs else "",
            width=46)

        if args.json:
            doc = {
                "settings": {"sr": SR, "preset": PRESET, "formats": FORMATS, "repeats": repeats,
                             "quick": args.quick,
                             "corpora": {k: dict(v, folder=str(v["folder"]))
                                         for k, v in corpora.items()},
                             "corpus_recipe": {
                                 k: corpus_recipe(v["files"], v["duration_s"],
                                                  SEED_LONG if k == "long" else SEED_SHORT)
                                 for k, v in corpora.items()},
                             "floors": {"scaling": SCALING_FLOOR, "short_files": SHORT_FILE_FLOOR}},
                "environment": {"harmtrack": harmtrack.__version__, "numpy": np.__version__,
                                "distributed": dask_version, "python": platform.python_version(),
                                "machine": platform.machine(), "cpus": cpus,
                                "load_average_1min": load[0]},
                "runs": {k: [{kk: (vv.tolist() if isinstance(vv, np.ndarray) else vv)
                              for kk, vv in r.items()} for r in rs] for k, rs in runs.items()},
                "summary": summary, "breakdown": breakdown, "floors": floors.items,
                "failed_floors": n_fail,
            }
            args.json.parent.mkdir(parents=True, exist_ok=True)
            args.json.write_text(json.dumps(doc, indent=2, default=float) + "\n")
            print(f"\nwrote {args.json}")

    finally:
        if args.keep:
            print(f"\noutput folders kept in {work}")
        else:
            shutil.rmtree(work, ignore_errors=True)
    print(f"\nfailed floors: {n_fail} of {len(floors)}")
    return 1 if n_fail else 0


if __name__ == "__main__":
    sys.exit(main())
