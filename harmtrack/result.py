"""The :class:`Track` result type and unit conversions."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Track", "hz_to_cents", "hz_to_midi"]


def hz_to_cents(f_hz, ref_hz: float = 10.0):
    """Cents above ``ref_hz`` (NaN stays NaN)."""
    return 1200.0 * np.log2(np.asarray(f_hz, dtype=np.float64) / ref_hz)


def hz_to_midi(f_hz):
    """MIDI note number (A4 = 440 Hz = 69; NaN stays NaN)."""
    return 69.0 + 12.0 * np.log2(np.asarray(f_hz, dtype=np.float64) / 440.0)


@dataclass(frozen=True)
class Track:
    """Frame-by-frame result of the harmonic-model tracker.

    Attributes
    ----------
    times : ndarray, shape (T,)
        Frame centres in seconds of the input.
    f0_hz : ndarray, shape (T,)
        Fundamental frequency, NaN where unvoiced.
    voiced : ndarray of bool, shape (T,)
        Voicing decision of the smoother.
    voicing_prob : ndarray, shape (T,)
        Posterior probability that the frame is voiced, in [0, 1].
    harmonic_amplitudes : ndarray, shape (T, H)
        Linear amplitude (input units, peak) of harmonic ``k * f0`` in column
        ``k - 1``; 0 where the harmonic is absent (dropped by model selection),
        NaN in unvoiced frames and for harmonics above the analysed band.
    model_order : ndarray of int, shape (T,)
        Number of harmonics of the selected model, 0 where unvoiced.
    hnr_db : ndarray, shape (T,)
        Harmonics-to-noise ratio of the frame under the fitted model, dB (NaN unvoiced).
    sr : float
        Sample rate of the input, Hz.
    frame_s : float
        Analysis frame length, seconds.
    settings : dict
        The settings the track was made with (see :class:`harmtrack.TrackerConfig`).
    """

    times: np.ndarray
    f0_hz: np.ndarray
    voiced: np.ndarray
    voicing_prob: np.ndarray
    harmonic_amplitudes: np.ndarray
    model_order: np.ndarray
    hnr_db: np.ndarray
    sr: float
    frame_s: float
    settings: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return int(self.times.shape[0])

    @property
    def hop_s(self) -> float:
        """Frame hop in seconds."""
        return float(self.settings.get("hop_s", np.nan))

    @property
    def n_harmonics(self) -> int:
        """Number of amplitude columns ``H``."""
        return int(self.harmonic_amplitudes.shape[1])

    def f0_cents(self, ref_hz: float = 10.0) -> np.ndarray:
        """f0 in cents above ``ref_hz`` (NaN unvoiced)."""
        return hz_to_cents(self.f0_hz, ref_hz)

    def f0_midi(self) -> np.ndarray:
        """f0 as fractional MIDI note numbers (NaN unvoiced)."""
        return hz_to_midi(self.f0_hz)

    def amplitudes_db(self, ref: float = 1.0) -> np.ndarray:
        """Harmonic amplitudes in dB re ``ref`` (-inf where absent, NaN unvoiced)."""
        with np.errstate(divide="ignore"):
            return 20.0 * np.log10(self.harmonic_amplitudes / ref)

    def summary(self) -> dict:
        """Duration, voiced share and f0 statistics of the track."""
        v = self.voiced
        f = self.f0_hz[v]
        out = {
            "frames": len(self),
            "duration_s": float(self.times[-1] + self.hop_s) if len(self) else 0.0,
            "voiced_fraction": float(np.mean(v)) if len(self) else 0.0,
        }
        if f.size:
            out.update(f0_median_hz=float(np.median(f)), f0_min_hz=float(np.min(f)),
                       f0_max_hz=float(np.max(f)))
        return out
