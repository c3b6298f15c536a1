"""Frozen tracker settings, presets and their validation.

A :class:`TrackerConfig` holds every knob of the estimator.  Users rarely build
one by hand: :func:`make_config` starts from a named preset and applies keyword
overrides, checking each value against its documented range.  The sample-rate
dependent checks (frame length against ``fmin``, ``fmax`` against the analysis
band) happen in :meth:`TrackerConfig.resolve`, once the input's rate is known.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from dataclasses import dataclass

from .errors import HarmtrackError

__all__ = ["TrackerConfig", "ResolvedConfig", "PRESETS", "make_config"]


#: Default flag threshold of the uneven-firing index, dB: the non-firing (half)
#: order energy relative to the firing-order energy.  Measured on generated
#: engines at 5 dB SNR: cylinders that differ by about 1 dB (a normal spread,
#: common practice) give -16 to -21 dB (frame median); one dead cylinder raises
#: the index to about -10 log10(C - 1) dB (-4.8 dB for 4 cylinders, -8.5 dB for
#: 8); one cylinder at half strength (-6 dB) of a 4-cylinder engine to about -12 dB.
UNEVEN_THRESHOLD_DB = -12.0


@dataclass(frozen=True)
class TrackerConfig:
    """Settings of the harmonic-model tracker.

    Parameters
    ----------
    preset : str
        Name of the preset these settings started from (for provenance).
    fmin_hz, fmax_hz : float
        Search range of the fundamental, Hz.  ``0 < fmin_hz < fmax_hz``.
    hop_s : float
        Frame hop in seconds, 0.001 to 0.1.  Frame ``i`` is centred at ``i * hop_s``.
    frame_s : float or None
        Analysis frame length in seconds (0.01 to 1.0).  ``None`` picks
        ``max(0.03, 2.5 / fmin_hz)``: two and a half periods of the lowest f0.
    analysis_sr : int
        Input above this rate is resampled to it before analysis (4000 to 96000 Hz);
        input at or below it is analysed at its own rate.
    search_sr : int or None
        Rate of the candidate search (4000 to 96000 Hz): the harmonic-summation
        search runs on a copy decimated by the whole factor nearest to the
        analysis rate over this rate, the NLS refinement and the amplitudes on
        the full analysis band.  ``None``: the analysis rate.
    band_hz : float or None
        Highest frequency of a harmonic that enters the fit.  ``None`` means 95 %
        of the analysis Nyquist frequency.
    max_harmonics : int
        Largest model order considered, and the number of amplitude columns (1 to 100).
    grid_cents : float
        Spacing of the logarithmic f0 search grid in cents (1 to 50).
    n_candidates : int
        f0 candidates kept per frame for the smoother (2 to 20).
    smoothing : float
        Strength of the smoother's pitch-continuity prior, 0 to 20.  1 is tuned
        for speech; 0 leaves every frame to its own evidence.
    glide_oct_s : float
        Typical speed of f0 movement in octaves per second (0.05 to 20) that the
        continuity prior treats as cheap; faster changes cost more.
    voiced_prior : float
        Prior probability that a frame is voiced, in (0, 1), before its own
        evidence.  Its log-odds count once per frame length, as the frames'
        evidence does (overlapping frames share it).
    voiced_run_s : float
        Mean duration of voiced and of unvoiced stretches assumed by the smoother,
        seconds (0.005 to 10); it sets the voicing switch cost independent of the hop.
    prewhiten : bool
        Flatten the long-term noise spectrum before the fit, for coloured noise.
    cylinders : int or None
        Engine presets only: number of cylinders, 1 to 24 (evenly firing).
    strokes : int
        Engine presets only: 4 (4-stroke) or 2 (2-stroke).
    rpm_min, rpm_max : float or None
        Engine presets only: crankshaft speed range in rpm; it sets ``fmin_hz``
        and ``fmax_hz`` to the firing frequencies of these speeds (with a 5 %
        margin).  ``rpm_min < rpm_max``, both in 10 to 100000.
    max_order : int
        Engine presets only: highest engine order reported, 1 to 100.
    uneven_threshold_db : float
        Engine presets only: the uneven-firing flag is raised where the
        half-order energy relative to the firing-order energy exceeds this, dB
        (-40 to 0; see :data:`harmtrack.machinery.UNEVEN_THRESHOLD_DB`).
    """

    preset: str = "custom"
    fmin_hz: float = 50.0
    fmax_hz: float = 800.0
    hop_s: float = 0.01
    frame_s: float | None = None
    analysis_sr: int = 16000
    search_sr: int | None = None
    band_hz: float | None = None
    max_harmonics: int = 30
    grid_cents: float = 10.0
    n_candidates: int = 6
    smoothing: float = 1.0
    glide_oct_s: float = 0.5
    voiced_prior: float = 0.5
    voiced_run_s: float = 0.15
    prewhiten: bool = True
    cylinders: int | None = None
    strokes: int = 4
    rpm_min: float | None = None
    rpm_max: float | None = None
    max_order: int = 12
    uneven_threshold_db: float = UNEVEN_THRESHOLD_DB

    @property
    def is_engine(self) -> bool:
        """True for engine settings (``cylinders`` given)."""
        return self.cylinders is not None

    def __post_init__(self) -> None:
        if self.cylinders is not None:
            _check_int("cylinders", self.cylinders, 1, 24)
            object.__setattr__(self, "cylinders", int(self.cylinders))
        if isinstance(self.strokes, bool) or self.strokes not in (2, 4):
            raise HarmtrackError(f"strokes={self.strokes!r} must be 2 or 4 (the engine cycle)")
        object.__setattr__(self, "strokes", int(self.strokes))
        for name in ("rpm_min", "rpm_max"):
            if getattr(self, name) is not None:
                _check_range(name, getattr(self, name), 10.0, 100000.0)
        if self.rpm_min is not None and self.rpm_max is not None and not self.rpm_min < self.rpm_max:
            raise HarmtrackError(
                f"rpm_min={self.rpm_min:g} must be below rpm_max={self.rpm_max:g}")
        _check_int("max_order", self.max_order, 1, 100)
        object.__setattr__(self, "max_order", int(self.max_order))
        _check_range("uneven_threshold_db", self.uneven_threshold_db, -40.0, 0.0)
        for name in ("max_harmonics", "n_candidates", "analysis_sr"):
            _check_int(name, getattr(self, name), 1, 10**6)
            object.__setattr__(self, name, int(getattr(self, name)))
        object.__setattr__(self, "prewhiten", bool(self.prewhiten))
        _check_range("fmin_hz", self.fmin_hz, 1.0, 20000.0)
        _check_range("fmax_hz", self.fmax_hz, 1.0, 40000.0)
        if not self.fmin_hz < self.fmax_hz:
            raise HarmtrackError(
                f"fmin={self.fmin_hz:g} Hz must be below fmax={self.fmax_hz:g} Hz"
            )
        _check_range("hop_s", self.hop_s, 0.001, 0.1)
        if self.frame_s is not None:
            _check_range("frame_s", self.frame_s, 0.01, 1.0)
        _check_range("analysis_sr", self.analysis_sr, 4000, 96000)
        if self.search_sr is not None:
            _check_int("search_sr", self.search_sr, 4000, 96000)
            object.__setattr__(self, "search_sr", int(self.search_sr))
        if self.band_hz is not None:
            _check_range("band_hz", self.band_hz, 100.0, 48000.0)
        _check_int("max_harmonics", self.max_harmonics, 1, 100)
        _check_range("grid_cents", self.grid_cents, 1.0, 50.0)
        _check_int("n_candidates", self.n_candidates, 2, 20)
        _check_range("smoothing", self.smoothing, 0.0, 20.0)
        _check_range("glide_oct_s", self.glide_oct_s, 0.05, 20.0)
        _check_range("voiced_run_s", self.voiced_run_s, 0.005, 10.0)
        if not 0.0 < float(self.voiced_prior) < 1.0:
            raise HarmtrackError(f"voiced_prior={self.voiced_prior!r} must lie strictly between 0 and 1")

    @property
    def auto_frame_s(self) -> float:
        """Frame length used: ``frame_s`` or the automatic choice from ``fmin_hz``."""
        if self.frame_s is not None:
            return float(self.frame_s)
        return float(min(1.0, max(0.03, 2.5 / self.fmin_hz)))

    def as_dict(self) -> dict:
        """Plain dict of the settings (for provenance headers)."""
        d = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        d["frame_s"] = self.auto_frame_s
        return d

    def resolve(self, sr: float) -> "ResolvedConfig":
        """Fix the sample-rate dependent quantities for input at ``sr`` Hz.

        Raises
        ------
        HarmtrackError
            When the range cannot be analysed at this rate and frame length.
        """
        sr = float(sr)
        if not (1000.0 <= sr <= 400000.0):
            raise HarmtrackError(f"sample rate {sr:g} Hz is outside 1 kHz to 400 kHz")
        asr = float(self.analysis_sr) if sr > self.analysis_sr * 1.001 else sr
        nyq = asr / 2.0
        band = 0.95 * nyq if self.band_hz is None else min(float(self.band_hz), 0.95 * nyq)
        if self.fmax_hz >= band and self.is_engine:
            raise HarmtrackError(
                f"rpm_max={self.rpm_max:g} fires at {self.fmax_hz / 1.05:.0f} Hz, too high for the "
                f"analysed band of {band:.0f} Hz at {asr:g} Hz sampling; lower rpm_max"
            )
        if self.fmax_hz >= band:
            raise HarmtrackError(
                f"fmax={self.fmax_hz:g} Hz is not below the analysed band of {band:.0f} Hz "
                f"at {asr:g} Hz sampling; lower fmax or use audio with a higher sample rate"
            )
        frame_s = self.auto_frame_s
        if frame_s * self.fmin_hz < 1.5 and self.is_engine:
            raise HarmtrackError(
                f"rpm_min={self.rpm_min:g} fires at {self.fmin_hz / 0.95:.2f} Hz, which needs frames "
                f"of at least {1.5 / self.fmin_hz:.2f} s (the limit is 1 s); raise rpm_min"
            )
        if frame_s * self.fmin_hz < 1.5:
            raise HarmtrackError(
                f"fmin={self.fmin_hz:g} Hz needs frames of at least {1.5 / self.fmin_hz * 1000:.0f} ms; "
                f"raise fmin or set frame_s >= {1.5 / self.fmin_hz:.3f}"
            )
        return self._at_rate(sr, asr, band)

    def _at_rate(self, sr_in: float, rate: float, band: float) -> "ResolvedConfig":
        n = int(round(self.auto_frame_s * rate))
        n += n % 2  # even length keeps the frame centre between two samples
        return ResolvedConfig(cfg=self, sr_in=sr_in, sr=rate, frame_len=n, hop=self.hop_s * rate,
                              band_hz=band)


@dataclass(frozen=True)
class ResolvedConfig:
    """Settings fixed for one analysis sample rate (see :meth:`TrackerConfig.resolve`)."""

    cfg: TrackerConfig
    sr_in: float
    sr: float
    frame_len: int
    hop: float
    band_hz: float

    def at_rate(self, rate: float) -> "ResolvedConfig":
        """The same settings for analysis at another sample rate (band limited to it)."""
        return self.cfg._at_rate(self.sr_in, float(rate), min(self.band_hz, 0.475 * rate))

    def search(self) -> "ResolvedConfig":
        """Settings of the candidate search (see ``TrackerConfig.search_sr``)."""
        if self.cfg.search_sr is None:
            return self
        factor = self.search_factor
        rate = self.sr / factor
        # the search needs at least two harmonics of fmax inside its band
        if factor < 2 or 0.475 * rate <= 2.0 * self.cfg.fmax_hz:
            return self
        return self.at_rate(rate)

    @property
    def search_factor(self) -> int:
        """Whole decimation factor from the analysis rate to the search rate (1: none)."""
        if self.cfg.search_sr is None:
            return 1
        return max(1, int(round(self.sr / self.cfg.search_sr)))

    @property
    def nfft(self) -> int:
        """FFT size: the smallest 5-smooth (fast) length of at least twice the frame."""
        return _fast_length(2 * self.frame_len)


@functools.lru_cache(maxsize=256)
def _fast_length(n: int) -> int:
    """Smallest integer >= n whose only prime factors are 2, 3 and 5."""
    best = 1 << int(math.ceil(math.log2(n)))
    p5 = 1
    while p5 < best:
        p35 = p5
        while p35 < best:
            m = p35
            while m < n:
                m *= 2
            best = min(best, m)
            p35 *= 3
        p5 *= 5
    return best


PRESETS: dict[str, dict] = {
    # Speech: 50-800 Hz, 16 kHz analysis, ~50 ms frames.
    "voice": dict(fmin_hz=50.0, fmax_hz=800.0, analysis_sr=16000, search_sr=8000, max_harmonics=30,
                  smoothing=1.0, glide_oct_s=0.5, voiced_run_s=0.15, voiced_prior=0.986),
    # Singing: wider and higher range, vibrato and portamento move faster.
    "singing": dict(fmin_hz=60.0, fmax_hz=1600.0, analysis_sr=22050, max_harmonics=30,
                    smoothing=1.0, glide_oct_s=1.5, voiced_run_s=0.4),
    # Engines: the firing-frequency range follows from cylinders, strokes and the rpm
    # range; run-ups of thousands of rpm per second need a fast glide allowance.
    "engine": dict(strokes=4, rpm_min=500.0, rpm_max=6500.0, analysis_sr=16000, search_sr=8000,
                   max_harmonics=30, smoothing=1.0, glide_oct_s=3.0, voiced_run_s=1.0,
                   voiced_prior=0.7),
}

#: Margin of the firing-frequency search range beyond the rpm range (common practice:
#: a few per cent so that the range ends do not clip the track).
ENGINE_RANGE_MARGIN = 0.05


def make_config(preset: str = "voice", **overrides) -> TrackerConfig:
    """Settings of a named preset with keyword overrides (``None`` values are ignored).

    Raises
    ------
    HarmtrackError
        Unknown preset or option name, or a value outside its range.
    """
    if not isinstance(preset, str) or preset not in PRESETS:
        raise HarmtrackError(
            f"unknown preset {preset!r}; choose one of: {', '.join(sorted(PRESETS))}"
        )
    names = {f.name for f in dataclasses.fields(TrackerConfig)} - {"preset"}
    values = dict(PRESETS[preset])
    for key, val in overrides.items():
        if key not in names:
            raise HarmtrackError(f"unknown option {key!r}; known options: {', '.join(sorted(names))}")
        if val is not None:
            values[key] = val
    engine_keys = ("cylinders", "strokes", "rpm_min", "rpm_max", "max_order", "uneven_threshold_db")
    if preset != "engine":
        given = [k for k in engine_keys if overrides.get(k) is not None]
        if given:
            raise HarmtrackError(f"{given[0]} applies only to the engine preset (preset='engine')")
    if preset == "engine":
        for key in ("fmin_hz", "fmax_hz"):
            if overrides.get(key) is not None:
                raise HarmtrackError(
                    f"the engine preset sets the range from rpm: give rpm_min/rpm_max, not {key[:4]}")
        if values.get("cylinders") is None:
            raise HarmtrackError("the engine preset needs the number of cylinders (cylinders=N)")
        probe = TrackerConfig(preset=preset, **values)  # validates cylinders, strokes, rpm
        per_rpm = probe.cylinders / 60.0 / (probe.strokes // 2)
        lowest = probe.rpm_min * per_rpm
        if lowest * (1.0 - ENGINE_RANGE_MARGIN) * 1.0 < 1.5:  # frames are at most 1 s long
            raise HarmtrackError(
                f"rpm_min={probe.rpm_min:g} fires at {lowest:.3g} Hz, too slow to resolve with "
                f"frames of at most 1 s; raise rpm_min")
        values["fmin_hz"] = lowest * (1.0 - ENGINE_RANGE_MARGIN)
        values["fmax_hz"] = probe.rpm_max * per_rpm * (1.0 + ENGINE_RANGE_MARGIN)
    return TrackerConfig(preset=preset, **values)


def _check_range(name: str, value, lo: float, hi: float) -> None:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise HarmtrackError(f"{name}={value!r} is not a number") from None
    if not (math.isfinite(v) and lo <= v <= hi):
        raise HarmtrackError(f"{name}={value!r} is outside the allowed range {lo:g} to {hi:g}")


def _check_int(name: str, value, lo: int, hi: int) -> None:
    if isinstance(value, bool) or not isinstance(value, (int,)) and not (
        isinstance(value, float) and value.is_integer()
    ):
        raise HarmtrackError(f"{name}={value!r} must be a whole number from {lo} to {hi}")
    _check_range(name, value, lo, hi)
