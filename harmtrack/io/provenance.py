"""Provenance records of label files and their canonical JSON text.

The record says which program, version, input and settings made a file.  It
holds no clock time, so the same input and settings always give the same bytes.
"""

from __future__ import annotations

import json
import math
import os

import numpy as np

from .._version import __version__

__all__ = ["TOOL", "make_provenance", "canonical", "dumps_compact"]

#: Value of the ``"tool"`` entry.
TOOL = "harmtrack"


def make_provenance(track, *, extra: dict | None = None) -> dict:
    """Provenance record of a track.

    Parameters
    ----------
    track : Track
        The result whose settings and input are recorded.
    extra : dict, optional
        Entries that replace or extend the record (e.g. a caller's own notes).

    Returns
    -------
    dict
        ``{"tool", "version", "input", "settings", "frame_s", "sr"}``; ``input``
        is ``settings["input"]`` of a track made from a file (path, sha256, sr,
        channels, frames, format, subtype) and ``{"path": None}`` otherwise;
        ``settings`` holds the remaining settings.  JSON-ready (see :func:`canonical`).
    """
    settings = dict(track.settings or {})
    source = settings.pop("input", None) or {"path": None}
    record = {
        "tool": TOOL,
        "version": __version__,
        "input": source,
        "settings": settings,
        "frame_s": float(track.frame_s),
        "sr": float(track.sr),
    }
    if extra:
        record.update(extra)
    return canonical(record)


def canonical(obj):
    """A JSON-ready copy of ``obj``.

    Dict keys become strings, tuples lists, numpy scalars and arrays plain
    numbers and lists, paths strings, and non-finite floats ``None``.
    Anything else is written as its ``str``.
    """
    kind = type(obj)
    if kind is str or kind is int or kind is bool or obj is None:  # the common leaves first
        return obj
    if kind is float:
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {str(k): canonical(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [canonical(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return canonical(obj.tolist())
    if isinstance(obj, np.generic):
        return canonical(obj.item())
    if isinstance(obj, (bool, int, str)):  # subclasses
        return obj
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    return str(obj)


def dumps_compact(obj) -> str:
    """One-line JSON with sorted keys and no spaces, ASCII only, no NaN."""
    return json.dumps(canonical(obj), sort_keys=True, separators=(",", ":"),
                      ensure_ascii=True, allow_nan=False)
