"""Set-up of labelling processes: allocator thresholds, kernels, garbage collector.

Each check runs in a fresh interpreter, so that this test session's own process
is left as it is.
"""

from __future__ import annotations

import platform
import subprocess
import sys
import textwrap

import pytest


def _run(code: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True,
                          text=True, timeout=300, check=False)


@pytest.mark.skipif(not sys.platform.startswith("linux") or platform.libc_ver()[0] != "glibc",
                    reason="the allocator thresholds are the GNU C library's")
def test_allocator_thresholds_are_accepted():
    # mallopt returns 1 when the C library accepts a parameter (glibc manual,
    # "Malloc Tunable Parameters"); every threshold must be taken
    res = _run("""
        from harmtrack import worker_setup
        print(worker_setup.tune_allocator(), worker_setup.tune_allocator())
    """)
    assert res.returncode == 0, res.stderr
    assert res.stdout.split() == ["True", "True"]


def test_prepare_worker_loads_the_kernels_and_freezes_the_collector():
    res = _run("""
        import gc
        from harmtrack import worker_setup
        assert gc.get_freeze_count() == 0
        worker_setup.prepare_worker()
        from harmtrack import nls, salience, smoothing
        kernels = [salience.pick_candidates, nls.analyse_frames, smoothing.viterbi]
        print(gc.isenabled(), gc.get_freeze_count() > 10000,
              all(len(k.signatures) > 0 for k in kernels))
        frozen = gc.get_freeze_count()
        worker_setup.prepare_worker()  # once per process
        print(gc.get_freeze_count() == frozen)
    """)
    assert res.returncode == 0, res.stderr
    assert res.stdout.split() == ["True"] * 4


def test_a_disabled_collector_stays_disabled():
    res = _run("""
        import gc
        from harmtrack import worker_setup
        gc.disable()
        worker_setup.load_kernels()
        print(gc.isenabled())
    """)
    assert res.returncode == 0, res.stderr
    assert res.stdout.split() == ["False"]
