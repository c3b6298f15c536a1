"""harmtrack: f0, voicing and harmonic amplitudes of harmonic sounds, frame by frame.

>>> import numpy as np, harmtrack
>>> sr = 16000
>>> t = np.arange(sr) / sr
>>> y = sum(0.3 / k * np.sin(2 * np.pi * 150 * k * t) for k in range(1, 8))
>>> tr = harmtrack.track(y, sr, preset="voice")
>>> bool(abs(np.nanmedian(tr.f0_hz) - 150) < 0.5)
True
"""

from __future__ import annotations

from ._version import __version__
from .config import PRESETS, TrackerConfig, make_config
from .errors import HarmtrackError, HarmtrackWarning, InputError
from .result import Track

__all__ = [
    "__version__",
    "track",
    "track_file",
    "StreamTracker",
    "Track",
    "TrackerConfig",
    "make_config",
    "PRESETS",
    "HarmtrackError",
    "InputError",
    "HarmtrackWarning",
]


def __getattr__(name: str):
    # The entry points pull in numba and scipy; load them on first use so that
    # `import harmtrack` (and `harmtrack --help`) stays fast.
    if name in ("track", "track_file"):
        from . import api

        return getattr(api, name)
    if name == "StreamTracker":
        from .stream import StreamTracker

        return StreamTracker
    raise AttributeError(f"module 'harmtrack' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | {"track", "track_file", "StreamTracker"})
