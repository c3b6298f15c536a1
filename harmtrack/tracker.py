"""The tracking pipeline: frames -> spectra -> candidates -> Viterbi -> NLS refinement.

Each stage is a pure function of arrays plus the resolved settings; this module
only wires them together.
"""

from __future__ import annotations

import dataclasses
import math
from functools import lru_cache
from typing import NamedTuple

import numpy as np

from . import nls, salience, smoothing, spectral
from .audio import as_mono, check_signal, resample
from .config import ResolvedConfig, TrackerConfig
from .errors import InputError
from .result import Track

__all__ = ["track_signal", "prepare_signal", "track_prepared", "Prepared", "run", "Analyzer",
           "estimate_frame", "search_frames", "refine_frames", "noise_var_of_peak",
           "EVIDENCE_OFFSET"]

#: Evidence (approximate log Bayes factor, nats) at which a voiced candidate and
#: the unvoiced state are equally likely before smoothing: zero, even odds.  In
#: frames of white noise alone the best candidate's evidence stays below about
#: -4 nats (99th percentile, default voice grid, measured), so the frequency
#: penalty of the MAP rule already pays for searching many candidates.
EVIDENCE_OFFSET = 0.0

#: Residual floor of the approximate fit, relative to the frame energy (-30 dB):
#: the model is never trusted to explain more than that.
RESIDUAL_FLOOR = 10 ** -3.0

#: Share of the energy a harmonic model explains that is nevertheless counted as
#: unexplained: the approximate fit's own error (window leakage, pitch movement
#: within the frame) grows with the signal, so at a high SNR a sub-harmonic comb
#: must not gain evidence by soaking up that error.
MISMATCH = 0.01

#: The prewhitening filter flattens the long-term noise floor plus the loud
#: frames' spectrum this many dB down.  Flattening even a faint floor helps: in a
#: clean or reverberant recording the floor is the room's and the voice's
#: long-term colour, and flattening it brings out the upper harmonics.
PREWHITEN_SNR_DB = 60.0

#: Length of the prewhitening filter (samples at the analysis rate).
WHITENING_TAPS = 129

#: Level of the noise every frame is assumed to hold at least, in dB below the
#: signal's peak: digital silence and filter leakage then count as noise, not as a
#: perfectly fitting harmonic source.  16-bit quantisation noise lies near -101 dB
#: re full scale (common practice: 6.02 dB per bit + 1.76 dB).
NOISE_FLOOR_DB = 90.0

#: Frames processed per block: small enough that the padded FFT buffers stay in cache.
BLOCK_FRAMES = 64


@dataclasses.dataclass(frozen=True)
class Analyzer:
    """Precomputed tables for one resolved configuration."""

    rc: ResolvedConfig
    window: np.ndarray
    grid_hz: np.ndarray
    log2_grid: np.ndarray
    tables: salience.HarmonicTables
    norm: float
    n_eff: float

    @property
    def kernel_tables(self) -> tuple:
        """The table arguments of the salience kernels, in their order."""
        t = self.tables
        return (t.sp_idx, t.sp_w, t.h_phase, t.h_shift, t.gend, salience.FINE_STEPS)

    @classmethod
    def build(cls, rc: ResolvedConfig) -> "Analyzer":
        return _analyzer_cached(rc)

    def candidates(self, y: np.ndarray, starts: np.ndarray, *, noise_var: float = 0.0):
        """Candidates of the frames of ``y`` starting at ``starts``.

        ``noise_var`` is a noise power per sample assumed present in every frame
        on top of what the frame holds (see :data:`NOISE_FLOOR_DB`).  See
        :func:`salience.pick_candidates` for the returned arrays.
        """
        P, R = spectral.windowed_spectra(y, starts, self.window, self.rc.nfft)
        R += noise_var * self.window.sum()
        pen_h = math.log(self.n_eff)
        return salience.pick_candidates(
            P, R, *self.kernel_tables, self.log2_grid, self.norm,
            self.n_eff, pen_h, 1.5 * pen_h, RESIDUAL_FLOOR, MISMATCH, self.rc.cfg.n_candidates,
        )


@lru_cache(maxsize=16)
def _analyzer_cached(rc: ResolvedConfig) -> Analyzer:
    cfg = rc.cfg
    w = spectral.analysis_window(rc.frame_len, "hann")
    grid = salience.log_grid(cfg.fmin_hz, cfg.fmax_hz, cfg.grid_cents)
    tables = salience.harmonic_tables(
        grid, df=rc.sr / rc.nfft, band_hz=rc.band_hz, max_harmonics=cfg.max_harmonics
    )
    # the interpolation reads bins idx - 1 .. idx + 1 without bounds checks
    if tables.sp_idx.max() + 1 > rc.nfft // 2:
        raise AssertionError("harmonic tables reach past the spectrum")
    return Analyzer(rc=rc, window=w, grid_hz=grid, log2_grid=np.log2(grid), tables=tables,
                    norm=2.0 / w.sum(), n_eff=w.sum() ** 2 / np.sum(w**2))


#: The least peak assumed for :func:`noise_var_of_peak`: one step of 16-bit audio
#: (common practice), so that digital silence, before anything louder has been
#: heard, still counts as noise and never as a perfectly fitting harmonic source.
MIN_PEAK = 2.0 ** -15


#: Engines: the noise floor is read from frames of at least this many periods of
#: the lowest firing frequency.  An engine is a steady comb of lines that the
#: floor's low quantile over time keeps; with frames this long the lines are
#: narrow next to their spacing, and the quantile over frequency steps between them.
ENGINE_FLOOR_PERIODS = 10.0


def floor_frame_len(rc: ResolvedConfig) -> int:
    """Length of the frames the noise floor is estimated from (samples, even)."""
    n = rc.frame_len
    if rc.cfg.is_engine:
        n = max(n, int(round(ENGINE_FLOOR_PERIODS / rc.cfg.fmin_hz * rc.sr)))
        n += n % 2
    return n


def _regrid(spec: np.ndarray, size: int) -> np.ndarray:
    """A power spectrum on ``size`` bins over the same 0 to Nyquist band (linear
    interpolation; the floor is smooth, so nothing is lost)."""
    return np.interp(np.linspace(0.0, 1.0, size), np.linspace(0.0, 1.0, spec.size), spec)


def noise_var_of_peak(peak):
    """Noise power per sample at :data:`NOISE_FLOOR_DB` below a signal peak ``peak``
    (at least :data:`MIN_PEAK`)."""
    peak = np.maximum(np.asarray(peak, dtype=np.float64), MIN_PEAK)
    return (peak * 10.0 ** (-NOISE_FLOOR_DB / 20.0)) ** 2


def _noise_floor_var(y: np.ndarray) -> float:
    """Noise power per sample at :data:`NOISE_FLOOR_DB` below the peak of ``y``."""
    return float(noise_var_of_peak(np.max(np.abs(y))))


def search_frames(ys: np.ndarray, rs: ResolvedConfig, idx: np.ndarray, noise_var: np.ndarray,
                  *, offset: int = 0):
    """Candidates (log2 f, evidence, order; each (F, K)) of the frames ``idx``.

    ``ys`` holds the search-rate signal from its sample ``offset`` on;
    ``noise_var`` (F,) is the least noise power per sample of each frame.
    """
    an = Analyzer.build(rs)
    F, K = idx.shape[0], rs.cfg.n_candidates
    cand_lf = np.empty((F, K))
    cand_ev = np.empty((F, K))
    cand_order = np.empty((F, K), dtype=np.int64)
    for b0 in range(0, F, BLOCK_FRAMES):
        b1 = min(F, b0 + BLOCK_FRAMES)
        starts = spectral.frame_starts(idx[b0:b1], rs.hop, rs.frame_len) - offset
        lf, ev, order, _ = an.candidates(ys, starts, noise_var=noise_var[b0:b1])
        cand_lf[b0:b1] = lf
        cand_ev[b0:b1] = ev
        cand_order[b0:b1] = order
    return cand_lf, cand_ev, cand_order


def _emissions(cand_ev: np.ndarray, rc: ResolvedConfig) -> tuple[np.ndarray, np.ndarray]:
    """Voiced and unvoiced emission log-potentials from the candidates' evidence.

    Overlapping frames share their samples, so each frame's evidence, and the
    prior odds, count for ``hop / frame`` of an independent observation: the
    prior stands for one frame length of audio, whatever the hop, and can
    never outweigh a frame length of evidence that a stretch holds only noise.
    """
    cfg = rc.cfg
    weight = min(1.0, cfg.hop_s / cfg.auto_frame_s)
    prior = math.log(cfg.voiced_prior / (1.0 - cfg.voiced_prior))
    ev = weight * (cand_ev - EVIDENCE_OFFSET + prior)
    unv = np.zeros(cand_ev.shape[0])
    return ev, unv


def run(y, sr: float, cfg: TrackerConfig, *, name: str = "<array>") -> Track:
    """The whole analysis the settings ask for: :func:`track_engine` for engines."""
    if cfg.is_engine:
        from .engine_track import track_engine

        return track_engine(y, sr, cfg, name=name)
    return track_signal(y, sr, cfg, name=name)


class Prepared(NamedTuple):
    """Samples checked and brought to the analysis rate (see :func:`prepare_signal`)."""

    sr: float            # rate of the input, Hz
    n_frames: int        # frames of the track
    rc: ResolvedConfig   # settings at the analysis rate
    ya: np.ndarray       # the samples at ``rc.sr``, constant offset removed


def track_signal(y, sr: float, cfg: TrackerConfig, *, name: str = "<array>") -> Track:
    """Track f0, voicing and harmonic amplitudes of samples ``y`` at ``sr`` Hz.

    See :func:`harmtrack.track` for the public interface.
    """
    return track_prepared(prepare_signal(y, sr, cfg, name=name))


def prepare_signal(y, sr: float, cfg: TrackerConfig, *, name: str = "<array>") -> Prepared:
    """Check the samples and settings, resample to the analysis rate, remove the offset.

    Raises
    ------
    InputError, HarmtrackError
        Unusable samples or settings (see :func:`harmtrack.track`).
    """
    y = as_mono(y, name=name)
    try:
        sr = float(sr)
    except (TypeError, ValueError):
        raise InputError(f"{name}: sample rate {sr!r} is not a number") from None
    rc = cfg.resolve(sr)
    check_signal(y, sr, name=name)
    n_frames = spectral.frame_count(y.size, cfg.hop_s * sr)
    ya = y
    if rc.sr != sr:
        ya, asr = resample(y, sr, rc.sr)
        if asr != rc.sr:
            rc = dataclasses.replace(rc, sr=asr, hop=cfg.hop_s * asr)
    if ya.size < rc.frame_len:
        raise InputError(
            f"{name}: audio of {y.size / sr * 1000:.1f} ms is shorter than one analysis frame "
            f"({rc.frame_len / rc.sr * 1000:.1f} ms); use a longer recording or a smaller frame_s"
        )
    # A constant offset would turn into a step where the frames run past the ends
    # of the recording (zeros outside): remove it.  Local offsets are fitted.
    return Prepared(sr=sr, n_frames=n_frames, rc=rc, ya=ya - np.mean(ya))


def track_prepared(p: Prepared) -> Track:
    """The tracking pipeline on samples from :func:`prepare_signal`."""
    rc, ya, n_frames, sr = p.rc, p.ya, p.n_frames, p.sr
    cfg = rc.cfg
    yw = ya
    ys = None
    gain = np.ones(2)
    # The candidate search may run on a decimated copy (TrackerConfig.search_sr).
    rs = rc.search()
    factor = 1 if rs is rc else int(round(rc.sr / rs.sr))
    if cfg.prewhiten:
        # no zero-padding: the floor is smoothed over hundreds of hertz anyway
        n_floor = floor_frame_len(rc)
        floor, loud = spectral.noise_floor_psd(ya, rc.sr, frame_len=n_floor, nfft=n_floor)
        if n_floor != rc.frame_len:  # back on the frames' frequency grid
            floor = _regrid(floor, rc.frame_len // 2 + 1)
            loud = _regrid(loud, rc.frame_len // 2 + 1)
        # The loud frames' spectrum, far down, keeps the floor finite where the
        # recording holds nothing (digital silence, a band-limited channel).
        floor = floor + loud * 10.0 ** (-PREWHITEN_SNR_DB / 10.0)
        h = spectral.whitening_filter(floor, n_taps=WHITENING_TAPS)
        if factor == 2:  # one pass gives both (the usual voice and engine settings)
            yw, ys = spectral.whiten_and_decimate(ya, h)
        else:
            yw = spectral.prewhiten(ya, h)
        gain = np.abs(np.fft.rfft(h, 1024))
    if ys is None:
        ys = yw if rs is rc else spectral.decimate(yw, factor)
    noise_var = np.full(n_frames, _noise_floor_var(ya))
    cand_lf, cand_ev, cand_order = search_frames(ys, rs, np.arange(n_frames), noise_var)
    em_v, em_u = _emissions(cand_ev, rc)
    K = cand_lf.shape[1]
    a, log_sw, log_stay = smoothing.transition_params(
        hop_s=cfg.hop_s, smoothing=cfg.smoothing, glide_oct_s=cfg.glide_oct_s,
        voiced_run_s=cfg.voiced_run_s,
    )
    path = smoothing.viterbi(cand_lf, em_v, em_u, a, log_sw, log_stay)
    prob = smoothing.voicing_posterior(cand_lf, em_v, em_u, a, log_sw, log_stay)
    voiced = path < K
    f0_init = np.full(n_frames, np.nan)
    order_init = np.zeros(n_frames, dtype=np.int64)
    rows = np.nonzero(voiced)[0]
    f0_init[rows] = 2.0 ** cand_lf[rows, path[rows]]
    order_init[rows] = cand_order[rows, path[rows]]
    f0, amps, order, hnr = refine_frames(yw, ya, ys, gain, rc, rs, f0_init, order_init,
                                         noise_var)
    times = np.arange(n_frames) * cfg.hop_s
    return Track(
        times=times, f0_hz=f0, voiced=voiced, voicing_prob=np.clip(prob, 0.0, 1.0),
        harmonic_amplitudes=amps, model_order=order, hnr_db=hnr, sr=sr,
        frame_s=rc.frame_len / rc.sr, settings=cfg.as_dict(),
    )


def refine_frames(yw: np.ndarray, ya: np.ndarray, ys: np.ndarray, gain: np.ndarray,
                  rc: ResolvedConfig, rs: ResolvedConfig, f0_init: np.ndarray,
                  order_init: np.ndarray, noise_var: np.ndarray, *, idx: np.ndarray | None = None,
                  offset: int = 0, offset_s: int = 0):
    """NLS refinement and amplitudes at the frames where ``f0_init`` is finite.

    ``yw`` is the signal fitted (prewhitened), ``ya`` the signal before
    prewhitening, ``ys`` the prewhitened signal at the search rate of ``rs``
    (f0 is refined on it), ``gain`` the prewhitening filter's magnitude response
    on [0, pi] rad/sample, ``order_init`` the model order the search stage found
    for each start, ``noise_var`` the least noise power per sample of each frame.
    The frames are ``idx`` (default ``0 .. T - 1``); ``yw`` and ``ya`` hold the
    signal from sample ``offset`` on, ``ys`` from ``offset_s`` on.

    Returns
    -------
    f0 : (T,) refined f0 in Hz (NaN where ``f0_init`` is NaN)
    amps : (T, H) harmonic amplitudes (see :class:`Track`)
    order : (T,) selected model order
    hnr : (T,) harmonics-to-noise ratio, dB
    """
    cfg = rc.cfg
    T = f0_init.shape[0]
    H = cfg.max_harmonics
    f0 = np.full(T, np.nan)
    amps = np.full((T, H), np.nan)
    order = np.zeros(T, dtype=np.int64)
    hnr = np.full(T, np.nan)
    rows = np.nonzero(np.isfinite(f0_init))[0]
    if rows.size == 0:
        return f0, amps, order, hnr
    idx = np.arange(T) if idx is None else np.asarray(idx)
    pen_h = math.log(rc.frame_len)
    for b0 in range(0, rows.size, BLOCK_FRAMES):
        r = rows[b0:b0 + BLOCK_FRAMES]
        starts = spectral.frame_starts(idx[r], rc.hop, rc.frame_len) - offset
        ra = spectral.frame_energies(ya, starts, rc.frame_len)
        fw = spectral.frames(yw, starts, rc.frame_len)
        fs = fw if rs is rc else spectral.frames(
            ys, spectral.frame_starts(idx[r], rs.hop, rs.frame_len) - offset_s, rs.frame_len)
        w, L, h, a = nls.analyse_frames(
            fw, fs, rc.sr / rs.sr, ra, gain, 2.0 * np.pi * f0_init[r] / rc.sr, order_init[r],
            rc.band_hz / rc.sr * 2.0 * np.pi, H, pen_h, 1.5 * pen_h, noise_var[r])
        # the refinement may step past the ends of the search grid: f0 stays in range
        f0[r] = np.clip(w * rc.sr / (2.0 * np.pi), cfg.fmin_hz, cfg.fmax_hz)
        order[r] = L
        hnr[r] = h
        amps[r] = a
    return f0, amps, order, hnr


def estimate_frame(x, sr: float, *, fmin_hz: float, fmax_hz: float, max_harmonics: int = 30,
                   grid_cents: float = 10.0):
    """f0, model order and harmonic amplitudes of one stationary frame.

    The frame estimator of the tracker without the smoother: harmonic-summation
    candidates on the grid, the strongest refined by exact NLS with MAP order
    selection.  Useful on its own for stationary segments and for checking the
    estimator against the Cramér-Rao bound.

    Parameters
    ----------
    x : ndarray, shape (N,)
        The frame (no window is applied for the NLS fit).
    sr : float
        Sample rate, Hz.
    fmin_hz, fmax_hz : float
        Search range.

    Returns
    -------
    f0_hz : float
        NaN when no harmonic model beats noise alone.
    order : int
    amplitudes : ndarray, shape (max_harmonics,)
    """
    x = np.ascontiguousarray(x, dtype=np.float64)
    n = x.size
    cfg = TrackerConfig(fmin_hz=fmin_hz, fmax_hz=fmax_hz, frame_s=n / sr, analysis_sr=int(min(96000, max(4000, sr))),
                        max_harmonics=max_harmonics, grid_cents=grid_cents, prewhiten=False)
    rc = dataclasses.replace(cfg.resolve(sr), frame_len=n, sr=float(sr))
    an = Analyzer.build(rc)
    lf, ev, order, best = an.candidates(x, np.zeros(1, dtype=np.int64))
    amps = np.zeros(max_harmonics)
    if not np.isfinite(best[0]):
        return float("nan"), 0, amps
    f = 2.0 ** lf[0, 0]
    lmax = max(1, int(min(max_harmonics, rc.band_hz // f)))
    pen_h = math.log(n)
    w, L, _ = nls.analyse_frame(x, x, 1.0, float(np.sum((x - x.mean()) ** 2)), np.ones(2),
                                2.0 * np.pi * f / sr, int(order[0, 0]), lmax, lmax, pen_h,
                                1.5 * pen_h, _noise_floor_var(x), amps)
    return w * sr / (2.0 * np.pi), int(L), amps
