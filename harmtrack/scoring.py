"""Scoring label files against reference f0 files: one pair, or two folders matched by name.

Estimates are harmtrack label files (CSV, NPZ or JSON) or plain text with a
time and an f0 column; references the same (see
:func:`harmtrack.io.read_reference`: ``0``, a negative value or ``nan`` mean
unvoiced).  Each pair is scored with :func:`harmtrack.metrics.compare` on the
reference's frames; the pooled row scores the frames of all pairs together
(every frame counts once, so long files weigh more).
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import metrics
from .errors import HarmtrackError

__all__ = ["SCORE_COLUMNS", "ScoreRow", "read_track", "match_pairs", "score_pairs",
           "format_table", "encode_csv", "encode_json"]

#: Score columns, in table order (see :mod:`harmtrack.metrics`).
SCORE_COLUMNS = ("raw_pitch_accuracy", "raw_chroma_accuracy", "gross_pitch_error",
                 "fine_pitch_error_cents", "voicing_decision_error", "voicing_recall",
                 "voicing_false_alarm")

#: Short headings of the on-screen table.
_HEADS = {"raw_pitch_accuracy": "RPA%", "raw_chroma_accuracy": "RCA%",
          "gross_pitch_error": "GPE%", "fine_pitch_error_cents": "FPE¢",
          "voicing_decision_error": "VDE%", "voicing_recall": "VRec%",
          "voicing_false_alarm": "VFA%"}

#: File name endings tried when folders are matched by name.
_LABEL_SUFFIXES = (".csv", ".npz", ".json", ".txt", ".f0", ".tsv")


@dataclass(frozen=True)
class ScoreRow:
    """Scores of one pair (or of all pairs pooled: ``name == "pooled"``)."""

    name: str
    scores: dict
    frames: int


def read_track(path) -> tuple[np.ndarray, np.ndarray]:
    """``(times, f0)`` of a label file or a plain time/f0 text file (NaN or <= 0 unvoiced).

    Raises
    ------
    HarmtrackError
        Unreadable file, missing columns, times not increasing, columns of
        different lengths; the message names the file.
    """
    from .io import read_labels, read_reference

    name = os.fspath(path)
    ext = Path(name).suffix.lower()
    labels = ext in (".npz", ".json")
    if ext == ".csv":
        with open(name, "rb") as fh:
            labels = fh.read(512).startswith(b"# harmtrack")
    if labels:  # read_labels checks the columns, their lengths and the times
        cols, _ = read_labels(name)
        return cols["time_s"], cols["f0_hz"]
    return read_reference(name)


def _key(rel: Path) -> str:
    """The name a file is matched by: its path inside the folder, without the
    label suffix (``a/b.f0.csv`` and ``a/b.csv`` both give ``a/b``)."""
    s = rel.as_posix()
    low = s.lower()
    for suf in (".f0.csv", ".f0.txt", ".f0") + _LABEL_SUFFIXES:
        if low.endswith(suf):
            return s[: -len(suf)]
    return s


def _listing(folder: Path) -> dict:
    out = {}
    for p in sorted(folder.rglob("*")):
        if p.is_file() and not p.name.startswith(".") and p.suffix.lower() in _LABEL_SUFFIXES:
            out.setdefault(_key(p.relative_to(folder)), p)
    return out


def match_pairs(est, ref) -> tuple[list, list, list]:
    """Pairs ``(name, est_path, ref_path)`` to score, and the names without partner.

    ``est`` and ``ref`` are two files, or two folders whose files are matched by
    their path inside the folder without the label suffix.

    Returns
    -------
    pairs : list of (str, Path, Path)
    est_only, ref_only : list of str
        Names found in only one folder.

    Raises
    ------
    HarmtrackError
        A missing path, a file paired with a folder, or folders with no name in common.
    """
    est, ref = Path(est), Path(ref)
    for p in (est, ref):
        if not p.exists():
            raise HarmtrackError(f"{p}: no such file or folder")
    if est.is_file() and ref.is_file():
        return [(est.name, est, ref)], [], []
    if est.is_dir() != ref.is_dir():
        raise HarmtrackError(f"{est} and {ref}: give two files or two folders")
    e, r = _listing(est), _listing(ref)
    common = sorted(set(e) & set(r))
    if not common:
        raise HarmtrackError(f"{est} and {ref}: no file name in common (files are matched by "
                             "their path inside the folder, without .csv/.npz/.json/.txt)")
    return ([(k, e[k], r[k]) for k in common], sorted(set(e) - set(r)),
            sorted(set(r) - set(e)))


def score_pairs(pairs, *, method: str = "nearest", cent_tolerance: float = 50.0,
                gross_tolerance: float = 0.2) -> list:
    """A :class:`ScoreRow` per pair, then the pooled row.

    Raises
    ------
    HarmtrackError
        An unreadable or malformed file (the message names it).
    """
    if not (math.isfinite(cent_tolerance) and 0.0 < cent_tolerance <= 1200.0):
        raise HarmtrackError(f"cent tolerance {cent_tolerance:g} must lie in (0, 1200]")
    if not (math.isfinite(gross_tolerance) and 0.0 < gross_tolerance < 10.0):
        raise HarmtrackError(f"gross tolerance {gross_tolerance:g} must lie in (0, 10)")
    rows, ref_all, est_all = [], [], []
    for name, est_path, ref_path in pairs:
        rt, rf = read_track(ref_path)
        et, ef = read_track(est_path)
        if rt.size == 0:
            raise HarmtrackError(f"{ref_path}: the reference has no frames")
        try:
            s = metrics.compare(rt, rf, et, ef, method=method, cent_tolerance=cent_tolerance,
                                gross_tolerance=gross_tolerance)
        except HarmtrackError as exc:
            raise HarmtrackError(f"{est_path} vs {ref_path}: {exc}") from None
        rows.append(ScoreRow(name, s, rt.size))
        on_ref = (metrics.resample_nearest(et, ef, rt) if method == "nearest"
                  else metrics.resample_linear(et, ef, rt))
        ref_all.append(rf)
        est_all.append(on_ref)
    pooled = metrics.evaluate_aligned(np.concatenate(ref_all), np.concatenate(est_all),
                                      cent_tolerance=cent_tolerance,
                                      gross_tolerance=gross_tolerance)
    rows.append(ScoreRow("pooled", pooled, int(sum(r.frames for r in rows))))
    return rows


def _cell(key: str, v) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{v:.2f}" if key == "fine_pitch_error_cents" else f"{100.0 * v:.2f}"


def format_table(rows: list) -> str:
    """The scores as an aligned text table (shares in %, fine error in cents)."""
    width = max(12, *(len(r.name) for r in rows))
    head = f"{'file':<{width}} {'frames':>8}" + "".join(f"{_HEADS[k]:>8}" for k in SCORE_COLUMNS)
    lines = [head, "-" * len(head)]
    for r in rows:
        if r.name == "pooled" and len(rows) > 1:
            lines.append("-" * len(head))
        lines.append(f"{r.name:<{width}} {r.frames:>8d}"
                     + "".join(f"{_cell(k, r.scores.get(k)):>8}" for k in SCORE_COLUMNS))
    return "\n".join(lines)


def _plain(v):
    return None if isinstance(v, float) and not math.isfinite(v) else v


def encode_csv(rows: list) -> bytes:
    """One row per file and the pooled row; shares as fractions, NaN empty."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(("file", "frames") + SCORE_COLUMNS)
    for r in rows:
        w.writerow([r.name, r.frames] + [
            "" if _plain(r.scores.get(k)) is None else f"{r.scores[k]:.10g}"
            for k in SCORE_COLUMNS])
    return buf.getvalue().encode("utf-8")


def encode_json(rows: list, *, settings: dict) -> bytes:
    """``{"settings": ..., "files": [...], "pooled": {...}}`` with ``null`` for NaN."""
    def one(r):
        return {"file": r.name, "frames": r.frames,
                **{k: _plain(r.scores.get(k)) for k in SCORE_COLUMNS}}

    doc = {"settings": settings, "files": [one(r) for r in rows[:-1]], "pooled": one(rows[-1])}
    return (json.dumps(doc, indent=1) + "\n").encode("utf-8")
