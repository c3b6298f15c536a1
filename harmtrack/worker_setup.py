"""Set-up of a process that labels many files: the C allocator, the garbage
collector and the compiled kernels.

A batch process spends its life allocating and freeing the same arrays file
after file, and every process, the main one included, first pays for loading
the compiled kernels.  :func:`prepare_worker` does both set-ups once, before the
first file (and before helpers are forked, so that they inherit them):

* :func:`tune_allocator` fixes the C library's thresholds for returning memory
  to the system, so that the arrays of one file are reused by the next instead
  of being unmapped and mapped afresh (each fresh page is zeroed by the kernel:
  a page fault per 4 KiB);
* :func:`load_kernels` loads the tracker's compiled kernels from their on-disk
  cache with the garbage collector paused, then moves every object alive at
  that point out of the collector's way (:func:`gc.freeze`): later collections
  stop walking the compiler's objects (about 160,000), and forked helpers copy
  fewer of the pages that hold them.
"""

from __future__ import annotations

import ctypes
import gc
import sys

import numpy as np

__all__ = ["prepare_worker", "tune_allocator", "load_kernels",
           "MMAP_THRESHOLD", "TRIM_THRESHOLD", "TOP_PAD"]

#: Blocks at least this large are mapped on their own, bytes.  32 MiB is the
#: largest value the C library's own adaptive rule reaches on 64-bit systems; the
#: adaptive rule starts at 128 KiB, so the arrays of a 10 s file (about 1 MiB
#: each) would be mapped and unmapped afresh until it has seen them freed.
MMAP_THRESHOLD = 32 << 20
#: Free memory kept at the top of the heap before any is returned, bytes (twice
#: the mapping threshold, the ratio of the adaptive rule).
TRIM_THRESHOLD = 64 << 20
#: Extra memory asked for whenever the heap grows, bytes: fewer, larger requests.
TOP_PAD = 16 << 20

# mallopt parameter numbers (glibc's malloc.h)
_M_TRIM_THRESHOLD, _M_TOP_PAD, _M_MMAP_THRESHOLD = -1, -2, -3

_prepared = False


def tune_allocator() -> bool:
    """Fix the C allocator's thresholds (:data:`MMAP_THRESHOLD`,
    :data:`TRIM_THRESHOLD`, :data:`TOP_PAD`) for this process.

    Only with the GNU C library (Linux); elsewhere nothing is changed.  Forked
    children inherit the setting.  Peak memory stays that of the largest file,
    but up to :data:`TRIM_THRESHOLD` of freed memory may stay with the process
    until it ends.

    Returns
    -------
    bool
        Whether the thresholds were set.
    """
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(None)  # the C library this interpreter is linked with
        libc.gnu_get_libc_version  # noqa: B018  (another C library: leave it alone)
        mallopt = libc.mallopt
    except (OSError, AttributeError):
        return False
    mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
    mallopt.restype = ctypes.c_int
    return all(mallopt(param, value) == 1 for param, value in (
        (_M_MMAP_THRESHOLD, MMAP_THRESHOLD), (_M_TRIM_THRESHOLD, TRIM_THRESHOLD),
        (_M_TOP_PAD, TOP_PAD)))


def load_kernels() -> None:
    """Load the tracker's compiled kernels into this process, then freeze the
    objects alive so far out of the garbage collector's generations.

    The tracker runs once on a short harmonic tone (so that the search, the
    refinement and the smoother all run) with the collector paused.  SciPy's
    linear algebra is imported first: the compiler imports it anyway when it
    loads its library, and it loads faster before the compiler's objects exist.
    """
    from .errors import HarmtrackError

    enabled = gc.isenabled()
    gc.disable()
    try:
        import scipy.linalg  # noqa: F401  (see above)

        from . import api

        t = np.arange(4800) / 16000.0
        tone = sum(np.sin(2 * np.pi * 150.0 * k * t) / k for k in range(1, 6))
        try:
            api.track(0.1 * tone, 16000.0)
        except HarmtrackError:  # pragma: no cover - nothing to warm
            pass
    finally:
        if enabled:
            gc.enable()
    gc.freeze()


def prepare_worker() -> None:
    """:func:`tune_allocator` and :func:`load_kernels`, once per process (a forked
    child of a prepared process is prepared already)."""
    global _prepared
    if _prepared:
        return
    tune_allocator()
    load_kernels()
    _prepared = True
