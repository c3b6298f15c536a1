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
    rpm : ndarray, shape (T,) or None
        Engine presets: crankshaft speed from the firing frequency ``f0_hz``
        (NaN where no engine is heard); None otherwise.
    order_numbers : ndarray, shape (K,) or None
        Engine presets: the engine orders of ``order_amplitudes`` columns
        (0.5, 1, 1.5, ... for 4-stroke; 1, 2, ... for 2-stroke).
    order_amplitudes : ndarray, shape (T, K) or None
        Engine presets: linear peak amplitude of each engine order, from
        computed order tracking (NaN where no engine or above the band).
    uneven_db : ndarray, shape (T,) or None
        Engine presets: uneven-firing index, energy of the non-firing (half)
        orders relative to the firing orders, dB.
    uneven_flag : ndarray of bool, shape (T,) or None
        Engine presets: ``uneven_db`` above the threshold in a frame with an engine.
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
    rpm: np.ndarray | None = None
    order_numbers: np.ndarray | None = None
    order_amplitudes: np.ndarray | None = None
    uneven_db: np.ndarray | None = None
    uneven_flag: np.ndarray | None = None

    @property
    def is_engine(self) -> bool:
        """True for tracks made with an engine preset."""
        return self.rpm is not None

    def order_amplitudes_db(self, ref: float = 1.0) -> np.ndarray:
        """Engine-order amplitudes in dB re ``ref`` (-inf where zero, NaN where unknown)."""
        if self.order_amplitudes is None:
            raise ValueError("this track has no engine orders (use an engine preset)")
        with np.errstate(divide="ignore"):
            return 20.0 * np.log10(self.order_amplitudes / ref)

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
        if self.is_engine:
            out.update(self._engine_summary())
        return out

    def _engine_summary(self) -> dict:
        v = self.voiced
        r = self.rpm[v]
        out = {"flagged_fraction": float(np.mean(self.uneven_flag[v])) if r.size else 0.0}
        if r.size:
            out.update(rpm_mean=float(np.mean(r)), rpm_min=float(np.min(r)),
                       rpm_max=float(np.max(r)))
            a = self.order_amplitudes[v]
            fin = np.isfinite(a)
            cnt = fin.sum(axis=0)
            mean_pow = np.where(fin, a * a, 0.0).sum(axis=0) / np.maximum(cnt, 1)
            ok = cnt > 0
            order = np.argsort(-np.where(ok, mean_pow, -1.0))[:3]
            out["strongest_orders"] = [float(self.order_numbers[j]) for j in order if ok[j]]
            u = self.uneven_db[v]
            if np.any(np.isfinite(u)):
                out["uneven_db_median"] = float(np.nanmedian(u))
        return out
