"""Imported first by the benchmark scripts: one thread everywhere, and the checkout importable.

The thread pools of the numeric libraries read these variables when they are
first imported, so this module must be imported before numpy is.
"""

import os
import sys
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
             "NUMBA_NUM_THREADS", "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_var] = "1"

try:  # belt and braces: also cap pools that ignore the variables above
    from threadpoolctl import threadpool_limits

    THREAD_LIMITER = threadpool_limits(1)
except ImportError:  # pragma: no cover - optional
    THREAD_LIMITER = None

REPO = Path(__file__).resolve().parent.parent
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))
