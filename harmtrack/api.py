"""Public entry points: :func:`track` for arrays, :func:`track_file` for files."""

from __future__ import annotations

import os

from .audio import load
from .config import make_config
from .result import Track
from .tracker import run

__all__ = ["track", "track_file"]


def track(y, sr: float, preset: str = "voice", *, fmin=None, fmax=None, hop_s: float = 0.01,
          **options) -> Track:
    """Track the f0, voicing and harmonic amplitudes of a recording.

    Parameters
    ----------
    y : array_like, shape (n,) or (channels, n)
        Samples (float, any scale).  Several channels are averaged (with a warning).
    sr : float
        Sample rate in Hz (8 kHz to 192 kHz are routine; higher rates are resampled).
    preset : str
        ``"voice"`` (speech, 50-800 Hz), ``"singing"`` (60-1600 Hz) or
        ``"engine"`` (firing frequency of an engine; give ``cylinders=``, and
        optionally ``strokes=`` (4 or 2), ``rpm_min=``, ``rpm_max=``); see
        :data:`harmtrack.PRESETS`.
    fmin, fmax : float, optional
        Search range of f0 in Hz; the preset's range when omitted.
    hop_s : float
        Frame hop in seconds (0.001 to 0.1).
    **options
        Any other :class:`harmtrack.TrackerConfig` field, by keyword
        (``frame_s``, ``max_harmonics``, ``smoothing``, ``prewhiten``...).

    Returns
    -------
    Track
        ``times``, ``f0_hz``, ``voiced``, ``voicing_prob``, ``harmonic_amplitudes``,
        ``model_order``, ``hnr_db`` and the settings used; engine presets add
        ``rpm``, ``order_numbers``, ``order_amplitudes``, ``uneven_db`` and
        ``uneven_flag`` (``f0_hz`` is then the firing frequency).

    Raises
    ------
    HarmtrackError
        A setting out of range, an unknown preset, or unusable samples (empty,
        non-finite, shorter than one frame).

    Notes
    -----
    A harmonic-summation search on a logarithmic f0 grid proposes candidates in
    every frame; an exact nonlinear least-squares fit of the harmonic model with
    MAP model-order selection refines the chosen f0 and gives the amplitudes; a
    Viterbi smoother over the candidates and an unvoiced state picks the track.

    References
    ----------
    M. G. Christensen and A. Jakobsson, *Multi-Pitch Estimation*, Morgan & Claypool, 2009.
    """
    cfg = make_config(preset, fmin_hz=fmin, fmax_hz=fmax, hop_s=hop_s, **options)
    return run(y, sr, cfg)


def track_file(path: str | os.PathLike, preset: str = "voice", *, fmin=None, fmax=None,
               hop_s: float = 0.01, **options) -> Track:
    """Like :func:`track`, reading the samples from an audio file.

    The returned track's ``settings`` also hold an ``"input"`` entry with the file's
    path, SHA-256, sample rate and channel count.

    A long file (decoded samples above
    :data:`harmtrack.file_stream.BLOCKS_ABOVE_BYTES`, about 10 minutes of mono
    16 kHz audio) is read in blocks and tracked by the streaming engine
    (:class:`harmtrack.stream.StreamTracker`, with 1 s of look-ahead), so only
    the labels are held in memory; ``settings["read_in_blocks"]`` then says so.
    """
    cfg = make_config(preset, fmin_hz=fmin, fmax_hz=fmax, hop_s=hop_s, **options)
    from .file_stream import needs_blocks, track_file_in_blocks

    if needs_blocks(path):  # (the settings were checked above, before any reading)
        return track_file_in_blocks(path, dict(preset=preset, fmin=fmin, fmax=fmax,
                                               hop_s=hop_s, **options))
    y, sr, info = load(path)
    tr = run(y, sr, cfg, name=os.fspath(path))
    tr.settings["input"] = info.as_dict()
    return tr
