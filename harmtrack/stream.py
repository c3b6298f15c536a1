"""Streaming tracking: samples in blocks of any size, finished frames out after a fixed delay.

:class:`StreamTracker` runs the offline tracker's stages (``tracker``,
``spectral``, ``smoothing``, ``nls``) incrementally:

1. the input is resampled to the analysis rate as it arrives (the same
   resampler as offline, in its streaming form, whose output is identical);
2. after a warm-up of :data:`WARMUP_S` the prewhitening filter is designed
   from the noise floor of the stream so far
   (the offline estimator, on a reservoir of evenly spaced frames); it is
   designed again at :data:`UPDATE_S` and every :data:`REFRESH_S` after the last
   of those, each time from the latest :data:`HISTORY_S` at most;
3. the prewhitened signal and its decimated search copy are computed sample by
   sample as far as the input allows (zero-phase FIRs: a fixed look-ahead of
   half their lengths);
4. each frame's candidates go through a fixed-lag Viterbi decoder
   (:class:`harmtrack.smoothing.FixedLagDecoder`) and the decided frames are
   refined by the NLS fit, exactly as offline.

Everything depends only on the samples, never on how they were split into
blocks.  Memory is bounded by the look-ahead and the noise-floor history,
whatever the length of the stream.

Engine presets run the offline engine pipeline on overlapping segments of
:data:`ENGINE_SEGMENT_S` and keep the middle of each, so their delay is about
:data:`ENGINE_SEGMENT_S` (see :class:`StreamTracker`).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from . import smoothing, spectral
from .config import make_config
from .errors import HarmtrackError, InputError
from .result import Track
from .tracker import (
    PREWHITEN_SNR_DB,
    WHITENING_TAPS,
    Analyzer,
    _emissions,
    noise_var_of_peak,
    refine_frames,
    search_frames,
)

__all__ = ["StreamTracker", "concat_tracks", "LATENCY_BUDGET_S", "WARMUP_S"]

#: Default bound on the algorithmic delay, seconds: the smoother's look-ahead is
#: the largest whole number of frames that keeps the delay within it.
LATENCY_BUDGET_S = 0.15

#: Audio gathered before the first frames are analysed, seconds: the first
#: estimate of the noise floor needs a few frames.
WARMUP_S = 0.25

#: The prewhitening filter is designed again when the stream reaches these
#: lengths (seconds), as the noise-floor estimate settles ...
UPDATE_S = (0.5, 1.0, 2.0, 4.0, 8.0, 16.0, 32.0)

#: ... and every this many seconds after the last of them.
REFRESH_S = 30.0

#: The noise floor is estimated from at most this much of the latest audio (s).
HISTORY_S = 60.0

#: Frames the noise-floor reservoir holds before it thins to every other one.
RESERVOIR_FRAMES = 120

#: Engine presets: length of the segments the engine pipeline runs on (s), and
#: the margin dropped at each end of a segment (s).
ENGINE_SEGMENT_S = 3.0
ENGINE_MARGIN_S = 1.0

_EMPTY_I = np.zeros(0, dtype=np.int64)


class StreamTracker:
    """Track a stream of samples block by block.

    Parameters
    ----------
    sr : float
        Sample rate of the stream, Hz.
    preset : str
        As for :func:`harmtrack.track`.
    lag_s : float, optional
        Look-ahead of the smoother, seconds (rounded to whole frames, at least
        one).  Default: the most that keeps :attr:`latency_s` within
        :data:`LATENCY_BUDGET_S` (voice and singing presets).  More look-ahead
        agrees more often with the offline smoother, which sees the whole
        recording.
    **options
        Any option of :func:`harmtrack.track` (``fmin``, ``fmax``, ``hop_s``,
        ``cylinders``...).

    Notes
    -----
    :meth:`feed` returns a :class:`harmtrack.Track` of the frames it finished
    (possibly none); :meth:`flush` ends the stream and returns the rest.  Frame
    times count from the stream's first sample.  The frames of all calls
    together are those of :func:`harmtrack.track` on the whole stream, with two
    differences: the smoother decides each frame with :attr:`lag_frames` of
    look-ahead instead of the whole recording, and the prewhitening filter and
    noise level are estimated from the audio heard so far.  A stream is taken
    to be free of a constant offset (as sound-card input is); offline, the
    recording's mean is removed first.

    Examples
    --------
    >>> import numpy as np
    >>> from harmtrack.stream import StreamTracker
    >>> sr = 16000
    >>> t = np.arange(2 * sr) / sr
    >>> y = sum(0.3 / k * np.sin(2 * np.pi * 150 * k * t) for k in range(1, 8))
    >>> st = StreamTracker(sr, preset="voice")
    >>> parts = [st.feed(y[i:i + 1000]) for i in range(0, y.size, 1000)] + [st.flush()]
    >>> sum(len(p) for p in parts)
    200
    """

    def __init__(self, sr: float, preset: str = "voice", *, fmin=None, fmax=None,
                 hop_s: float = 0.01, lag_s: float | None = None, **options):
        cfg = make_config(preset, fmin_hz=fmin, fmax_hz=fmax, hop_s=hop_s, **options)
        try:
            sr = float(sr)
        except (TypeError, ValueError):
            raise HarmtrackError(f"sample rate {sr!r} is not a number") from None
        self.cfg = cfg
        self.sr = sr
        rc = cfg.resolve(sr)
        if lag_s is not None and not (math.isfinite(float(lag_s)) and 0.0 < float(lag_s) <= 10.0):
            raise HarmtrackError(f"lag_s={lag_s!r} is outside the allowed range (0, 10] s")
        self._n_in = 0
        self._ended = False
        self._frames_done = 0
        if cfg.is_engine:
            self._impl = _EngineStream(cfg, sr)
        else:
            self._impl = _HarmonicStream(cfg, sr, rc, lag_s)

    # -- public -------------------------------------------------------------------------

    @property
    def latency_s(self) -> float:
        """Algorithmic delay: a frame centred at ``t`` s is returned by the call that
        brings the input past ``t + latency_s`` (after the first :data:`WARMUP_S`)."""
        return self._impl.latency_s

    @property
    def lag_frames(self) -> int:
        """Look-ahead of the smoother, frames (engine presets: the segment margin)."""
        return self._impl.lag_frames

    @property
    def frames_done(self) -> int:
        """Frames returned so far."""
        return self._frames_done

    def feed(self, samples) -> Track:
        """Add samples (1-D, any length); returns the frames finished meanwhile."""
        if self._ended:
            raise HarmtrackError("the stream has ended (flush was called); start a new StreamTracker")
        y = np.asarray(samples, dtype=np.float64)
        if y.ndim != 1:
            raise InputError(f"stream: samples must be 1-D, got an array of shape {y.shape}")
        if y.size and not np.all(np.isfinite(y)):
            bad = int(np.argmax(~np.isfinite(y)))
            raise InputError(f"stream: non-finite sample (NaN or inf) at "
                             f"{(self._n_in + bad) / self.sr:.3f} s")
        self._n_in += y.size
        return self._count(self._impl.feed(y))

    def flush(self) -> Track:
        """End the stream; returns the frames not returned yet."""
        if self._ended:
            return self._count(self._impl.empty())
        self._ended = True
        if self._n_in == 0:
            return self._count(self._impl.empty())
        return self._count(self._impl.flush(self._n_in))

    def _count(self, tr: Track) -> Track:
        self._frames_done += len(tr)
        return tr


# ---------------------------------------------------------------------------
# voice, singing and custom presets
# ---------------------------------------------------------------------------


class _Resampler:
    """Input samples to the analysis rate, in pieces (identical to one pass)."""

    def __init__(self, sr_in: float, sr_out: float):
        self.active = sr_in != sr_out
        self.delay_s = 0.0
        if self.active:
            import soxr

            self._st = soxr.ResampleStream(sr_in, sr_out, 1, dtype="float64", quality="HQ")
            probe = soxr.ResampleStream(sr_in, sr_out, 1, dtype="float64", quality="HQ")
            n = int(round(sr_in))
            got = probe.resample_chunk(np.zeros(n)).size
            self.delay_s = max(0.0, (n / sr_in) - got / sr_out)

    def __call__(self, y: np.ndarray, last: bool = False) -> np.ndarray:
        if not self.active:
            return y
        return np.asarray(self._st.resample_chunk(y, last=last), dtype=np.float64)


class _Buffer:
    """The recent part of a signal: samples ``start .. end - 1``, in an array that
    grows by doubling and drops its head in place, so appending is amortised O(1)."""

    def __init__(self):
        self._arr = np.zeros(1024)
        self._lo = 0      # index in _arr of sample `start`
        self._n = 0       # samples held
        self.start = 0

    @property
    def end(self) -> int:
        return self.start + self._n

    @property
    def data(self) -> np.ndarray:
        return self._arr[self._lo:self._lo + self._n]

    def last(self, default: float = 0.0) -> float:
        return float(self._arr[self._lo + self._n - 1]) if self._n else default

    def append(self, x: np.ndarray) -> None:
        m = x.size
        if not m:
            return
        if self._lo + self._n + m > self._arr.size:
            cap = max(self._arr.size, 1024)
            while cap < 2 * (self._n + m):
                cap *= 2
            arr = np.zeros(cap)
            arr[:self._n] = self.data
            self._arr, self._lo = arr, 0
        self._arr[self._lo + self._n:self._lo + self._n + m] = x
        self._n += m

    def replace(self, x: np.ndarray) -> None:
        """Replace the samples held (same positions)."""
        self.data[:] = x

    def drop_before(self, n: int) -> None:
        """Forget the samples before ``n``."""
        k = min(max(0, n - self.start), self._n)
        self._lo += k
        self._n -= k
        self.start += k

    def span(self, lo: int, hi: int) -> np.ndarray:
        return self.data[lo - self.start:hi - self.start]


class _HarmonicStream:
    def __init__(self, cfg, sr_in: float, rc, lag_s):
        self.cfg, self.sr_in = cfg, sr_in
        self.res = _Resampler(sr_in, rc.sr)
        self.rc = rc
        self.rs = rc.search()
        self.factor = 1 if self.rs is rc else int(round(rc.sr / self.rs.sr))
        self.g = spectral.decimator_taps(self.factor)
        self.an = Analyzer.build(self.rs)
        self.K = cfg.n_candidates
        self.H = cfg.max_harmonics
        self.prewhiten = cfg.prewhiten
        self.d_h = WHITENING_TAPS // 2 if cfg.prewhiten else 0
        self.d_g = self.g.size // 2
        asr = rc.sr
        # the look-ahead a frame needs: half a search frame, the FIRs, the resampler
        half_frame = max(self.rs.frame_len / self.rs.sr, rc.frame_len / asr) / 2.0
        fixed = half_frame + (self.d_h + self.d_g) / asr + self.res.delay_s
        if lag_s is None:
            lag = int(math.floor((LATENCY_BUDGET_S - fixed) / cfg.hop_s + 1e-9))
        else:
            lag = int(round(float(lag_s) / cfg.hop_s))
        self.lag_frames = max(1, lag)
        self.latency_s = fixed + self.lag_frames * cfg.hop_s
        a, log_sw, log_stay = smoothing.transition_params(
            hop_s=cfg.hop_s, smoothing=cfg.smoothing, glide_oct_s=cfg.glide_oct_s,
            voiced_run_s=cfg.voiced_run_s)
        self.dec = smoothing.FixedLagDecoder(self.K, a, log_sw, log_stay, lag=self.lag_frames)
        # signals at the analysis rate (ya: as received;
        # yw: prewhitened) and at the search rate (ys)
        self.ya, self.yw, self.ys = _Buffer(), _Buffer(), _Buffer()
        self.peak = _Buffer()  # running maximum of |ya|, per sample
        self.n_a = 0           # analysis-rate samples received
        self.n_total = None    # analysis-rate length, once the stream has ended
        self.warm = False
        self.offset = 0.0
        # prewhitening filters: (first prewhitened sample, taps, gain response)
        self.h = np.ones(1)
        self.filters: list = []
        self.updates = [int(round(u * asr)) for u in UPDATE_S]
        self.next_refresh = None
        # noise-floor reservoir: spectra of frames at multiples of `stride` half-frames
        self.fl_len = rc.frame_len
        self.fl_hop = rc.frame_len // 2
        self.fl_window = spectral.analysis_window(self.fl_len)
        self.res_pos: list = []
        self.res_spec: list = []
        self.stride = 1
        self.max_stride = max(1, int(HISTORY_S * asr / RESERVOIR_FRAMES / self.fl_hop))
        self.next_fl = 0       # next floor frame (in half-frames) to consider
        # frames
        self.next_frame = 0    # next frame to analyse
        self.next_out = 0      # next frame to decide
        self.cand_lf = np.zeros((0, self.K))
        self.cand_order = np.zeros((0, self.K), dtype=np.int64)
        self.noise = np.zeros(0)
        self.n_frames_total = None
        self.pending: list = []
        self.pending_n = 0
        self._empty = None
        self.step_in = max(1, int(cfg.hop_s * sr_in))

    # -- entry points -------------------------------------------------------------------

    def feed(self, y: np.ndarray) -> Track:
        self.pending.append(y)
        self.pending_n += y.size
        if self.pending_n < self.step_in:  # less than a hop: nothing can finish
            return self.empty()
        x = np.concatenate(self.pending) if len(self.pending) > 1 else self.pending[0]
        self.pending, self.pending_n = [], 0
        return self._run(self.res(x))

    def flush(self, n_in: int) -> Track:
        x = np.concatenate(self.pending) if self.pending else np.zeros(0)
        self.pending, self.pending_n = [], 0
        xa = self.res(x, last=True)
        self.n_frames_total = spectral.frame_count(n_in, self.cfg.hop_s * self.sr_in)
        self.n_total = self.n_a + xa.size
        if self.n_total < self.rc.frame_len and self.next_frame == 0:
            raise InputError(
                f"stream: audio of {n_in / self.sr_in * 1000:.1f} ms is shorter than one analysis "
                f"frame ({self.rc.frame_len / self.rc.sr * 1000:.1f} ms)")
        return self._run(xa)

    def empty(self) -> Track:
        if self._empty is None:  # one shared, frameless result (tiny blocks return it often)
            self._empty = self._track(_EMPTY_I, np.zeros(0), np.zeros(0, dtype=bool),
                                      np.zeros(0), np.zeros((0, self.H)), _EMPTY_I, np.zeros(0))
        return self._empty

    # -- the stages ---------------------------------------------------------------------

    def _run(self, xa: np.ndarray) -> Track:
        # split the new samples where the prewhitening filter is designed again, so
        # that the result does not depend on how the stream was cut into blocks
        pos = 0
        while True:
            if not self.warm:
                cut = int(round(WARMUP_S * self.rc.sr))
            else:
                cut = self._next_update()
            if cut is None or self.n_a + (xa.size - pos) < cut:
                self._take(xa[pos:])
                break
            k = cut - self.n_a
            self._take(xa[pos:pos + k])
            pos += k
            if not self.warm:
                self._warm_up()
            else:
                self._whiten(cut - self.d_h)
                self._redesign(cut)
        if self.n_total is not None and not self.warm:
            self._warm_up()
        if self.warm:
            end = self.n_total if self.n_total is not None else self.n_a - self.d_h
            self._whiten(end)
            self._decimate()
            return self._frames()
        return self.empty()

    def _take(self, x: np.ndarray) -> None:
        if not x.size:
            return
        if self.warm:
            x = x - self.offset
        self.ya.append(x)
        self.peak.append(np.maximum(np.maximum.accumulate(np.abs(x)), self.peak.last()))
        self.n_a += x.size

    def _next_update(self):
        if not self.prewhiten:
            return None
        if self.updates:
            return self.updates[0]
        return self.next_refresh

    def _warm_up(self) -> None:
        n = self.ya.data.size
        if self.n_total is not None and n:
            # the whole stream is here (shorter than the warm-up): as offline
            self.offset = float(np.mean(self.ya.data))
            self.ya.replace(self.ya.data - self.offset)
            self.peak.replace(np.maximum.accumulate(np.abs(self.ya.data)))
        self.warm = True
        if self.prewhiten:
            self._redesign(self.n_a)
        else:
            self.filters.append((0, np.ones(1), np.ones(2)))
        self.updates = [u for u in self.updates if u > self.n_a]

    def _redesign(self, upto: int) -> None:
        """Design the prewhitening filter from the floor of the audio before ``upto``."""
        while self.updates and self.updates[0] <= upto:
            self.updates.pop(0)
        if not self.updates:
            self.next_refresh = upto + int(round(REFRESH_S * self.rc.sr))
        self._reservoir(upto)
        ps = np.array(self.res_spec) if self.res_spec else None
        if ps is None or ps.shape[0] == 0:
            h = np.zeros(WHITENING_TAPS)
            h[WHITENING_TAPS // 2] = 1.0
        else:
            floor, loud = spectral.floor_from_spectra(ps, self.rc.sr, nfft=self.fl_len)
            floor = floor + loud * 10.0 ** (-PREWHITEN_SNR_DB / 10.0)
            h = spectral.whitening_filter(floor, n_taps=WHITENING_TAPS)
        first = self.yw.end if self.filters else 0
        self.filters.append((first, h, np.abs(np.fft.rfft(h, 1024))))
        self.h = h

    def _reservoir(self, upto: int) -> None:
        """Add the spectra of the floor frames that end before ``upto``."""
        new = []
        while self.next_fl * self.fl_hop + self.fl_len <= upto:
            if self.next_fl % self.stride == 0:
                new.append(self.next_fl)
            self.next_fl += 1
        if new:
            starts = np.array(new, dtype=np.int64) * self.fl_hop
            ps, _ = spectral.windowed_spectra(self.ya.data, starts - self.ya.start, self.fl_window,
                                              self.fl_len, demean=False)
            self.res_pos.extend(new)
            self.res_spec.extend(list(ps))
        while len(self.res_pos) > RESERVOIR_FRAMES:
            if self.stride < self.max_stride:
                self.stride *= 2
                keep = [i for i, p in enumerate(self.res_pos) if p % self.stride == 0]
            else:
                keep = list(range(len(self.res_pos) - RESERVOIR_FRAMES, len(self.res_pos)))
            self.res_pos = [self.res_pos[i] for i in keep]
            self.res_spec = [self.res_spec[i] for i in keep]

    def _whiten(self, upto: int) -> None:
        lo = self.yw.end
        if upto <= lo:
            return
        out = spectral.fir_segment(self.ya.data, self.ya.start, self.n_total, self.h, lo, upto)
        self.yw.append(out)

    def _decimate(self) -> None:
        M = self.factor
        if M == 1:
            return
        lo = self.ys.end
        if self.n_total is not None:
            hi = -(-self.n_total // M)
        else:
            hi = max(lo, -(-(self.yw.end - self.d_g) // M))
        if hi <= lo:
            return
        out = spectral.fir_segment(self.yw.data, self.yw.start, self.n_total, self.g, lo * M,
                                   (hi - 1) * M + 1, M)
        self.ys.append(out)

    def _frames(self) -> Track:
        rc, rs = self.rc, self.rs
        ysb = self.yw if self.factor == 1 else self.ys
        # frames whose samples are all available
        if self.n_frames_total is not None:
            f_end = self.n_frames_total
        else:
            # frame ends grow with the index: count the leading frames that fit
            n_try = max(1, int(self.yw.end / rc.hop) + 2 - self.next_frame)
            idx = np.arange(self.next_frame, self.next_frame + n_try)
            fits = ((spectral.frame_starts(idx, rs.hop, rs.frame_len) + rs.frame_len <= ysb.end)
                    & (spectral.frame_starts(idx, rc.hop, rc.frame_len) + rc.frame_len
                       <= self.yw.end))
            f_end = self.next_frame + int(np.argmin(fits)) if not fits.all() else int(idx[-1]) + 1
        states, probs = [], []
        if f_end > self.next_frame:
            idx = np.arange(self.next_frame, f_end)
            ends = spectral.frame_starts(idx, rc.hop, rc.frame_len) + rc.frame_len
            pk = self.peak.data[np.clip(ends - 1 - self.peak.start, 0, self.peak.data.size - 1)]
            nv = noise_var_of_peak(pk)
            lf, ev, order = search_frames(ysb.data, rs, idx, nv, offset=ysb.start)
            em_v, em_u = _emissions(ev, rc)
            self.cand_lf = np.concatenate([self.cand_lf, lf])
            self.cand_order = np.concatenate([self.cand_order, order])
            self.noise = np.concatenate([self.noise, nv])
            self.next_frame = f_end
            s, p = self.dec.push(lf, em_v, em_u)
            states.append(s)
            probs.append(p)
        if self.n_frames_total is not None:
            s, p = self.dec.flush()
            states.append(s)
            probs.append(p)
        state = np.concatenate(states) if states else _EMPTY_I
        prob = np.concatenate(probs) if probs else np.zeros(0)
        tr = self._decide(state, prob)
        self._trim()
        return tr

    def _decide(self, state: np.ndarray, prob: np.ndarray) -> Track:
        n = state.size
        if n == 0:
            return self.empty()
        rc, rs = self.rc, self.rs
        i0 = self.next_out
        idx = np.arange(i0, i0 + n)
        lf, order0 = self.cand_lf[:n], self.cand_order[:n]
        nv = self.noise[:n]
        self.cand_lf, self.cand_order, self.noise = self.cand_lf[n:], self.cand_order[n:], self.noise[n:]
        self.next_out += n
        voiced = state < self.K
        f0_init = np.full(n, np.nan)
        order_init = np.zeros(n, dtype=np.int64)
        rows = np.nonzero(voiced)[0]
        f0_init[rows] = 2.0 ** lf[rows, state[rows]]
        order_init[rows] = order0[rows, state[rows]]
        f0 = np.full(n, np.nan)
        amps = np.full((n, self.H), np.nan)
        order = np.zeros(n, dtype=np.int64)
        hnr = np.full(n, np.nan)
        # each frame is fitted with the gain of the filter that prewhitened its centre
        centres = np.round(idx * rc.hop).astype(np.int64)
        firsts = np.array([f[0] for f in self.filters])
        which = np.searchsorted(firsts, centres, side="right") - 1
        ysb = self.yw if self.factor == 1 else self.ys
        for v in np.unique(which):
            sel = np.nonzero(which == v)[0]
            f, a, o, h = refine_frames(
                self.yw.data, self.ya.data, ysb.data, self.filters[max(0, v)][2], rc, rs,
                f0_init[sel], order_init[sel], nv[sel], idx=idx[sel], offset=self.ya.start,
                offset_s=ysb.start)
            f0[sel], amps[sel], order[sel], hnr[sel] = f, a, o, h
        return self._track(idx, f0, voiced, prob, amps, order, hnr)

    def _trim(self) -> None:
        rc, rs = self.rc, self.rs
        # the oldest sample still needed: the next frame to decide (refinement), the
        # prewhitening and decimation look-behind, the floor frames not yet taken
        first = spectral.frame_starts(np.array([self.next_out]), rc.hop, rc.frame_len)[0]
        keep = min(first, self.yw.end - self.d_h - 1, self.next_fl * self.fl_hop)
        if self.factor > 1:
            keep = min(keep, self.ys.end * self.factor - self.d_g - 1)
            fs = spectral.frame_starts(np.array([self.next_out]), rs.hop, rs.frame_len)[0]
            self.ys.drop_before(max(0, fs))
        keep = max(0, keep)
        # ya, yw and the peak stay aligned: the refinement reads ya and yw at the same offsets
        for b in (self.ya, self.yw, self.peak):
            b.drop_before(keep)
        while len(self.filters) > 1 and self.filters[1][0] <= keep:
            self.filters.pop(0)

    def _track(self, idx, f0, voiced, prob, amps, order, hnr) -> Track:
        return Track(times=idx * self.cfg.hop_s, f0_hz=f0, voiced=voiced,
                     voicing_prob=np.clip(prob, 0.0, 1.0), harmonic_amplitudes=amps,
                     model_order=order, hnr_db=hnr, sr=self.sr_in,
                     frame_s=self.rc.frame_len / self.rc.sr, settings=self.cfg.as_dict())


# ---------------------------------------------------------------------------
# engine presets
# ---------------------------------------------------------------------------


class _EngineStream:
    """The offline engine pipeline on overlapping segments; the middle of each is kept."""

    def __init__(self, cfg, sr_in: float):
        self.cfg, self.sr_in = cfg, sr_in
        self.hop = cfg.hop_s
        self.seg = int(round(ENGINE_SEGMENT_S / self.hop))      # frames per segment
        self.margin = int(round(ENGINE_MARGIN_S / self.hop))    # frames dropped at each inner end
        self.step = self.seg - 2 * self.margin                  # frames kept per segment
        self.lag_frames = self.margin
        self.latency_s = (self.seg - self.margin) * self.hop + cfg.auto_frame_s / 2.0
        self.buf = _Buffer()       # input samples
        self.next_out = 0          # next frame to return
        self.H = cfg.max_harmonics

    def feed(self, y: np.ndarray) -> Track:
        self.buf.append(y)
        parts = []
        while True:
            # the segment whose kept middle starts at next_out
            f_lo = max(0, self.next_out - self.margin)
            f_hi = f_lo + self.seg
            need = int(math.ceil((f_hi * self.hop + self.cfg.auto_frame_s / 2.0) * self.sr_in))
            if self.buf.end < need:
                break
            parts.append(self._segment(f_lo, f_hi, keep_hi=f_hi - self.margin))
        return _concat(parts) if parts else self.empty()

    def flush(self, n_in: int) -> Track:
        total = spectral.frame_count(n_in, self.hop * self.sr_in)
        parts = []
        while self.next_out < total:
            f_lo = max(0, min(self.next_out - self.margin, total - self.seg))
            parts.append(self._segment(f_lo, total, keep_hi=total, last=True))
        return _concat(parts) if parts else self.empty()

    def _segment(self, f_lo: int, f_hi: int, *, keep_hi: int, last: bool = False) -> Track:
        from .tracker import run

        s_lo = int(math.floor(f_lo * self.hop * self.sr_in))
        s_lo = max(s_lo, self.buf.start)
        s_hi = self.buf.end if last else int(math.ceil(
            (f_hi * self.hop + self.cfg.auto_frame_s / 2.0) * self.sr_in))
        y = self.buf.span(s_lo, s_hi)
        tr = run(y, self.sr_in, self.cfg, name="stream")
        # the segment's frame j lies at time s_lo / sr + j * hop
        shift = s_lo / self.sr_in
        t_abs = tr.times + shift
        idx = np.round(t_abs / self.hop).astype(np.int64)
        # (within a sample of the stream's frame grid when hop * sr is not whole)
        sel = (idx >= self.next_out) & (idx < keep_hi) \
            & (np.abs(t_abs - idx * self.hop) <= 1.0 / self.sr_in)
        out = _subset(tr, sel, times=idx[sel] * self.hop)
        if len(out):
            self.next_out = int(idx[sel][-1]) + 1
        else:
            self.next_out = keep_hi
        keep_from = int(math.floor(max(0, self.next_out - self.margin) * self.hop * self.sr_in))
        self.buf.drop_before(keep_from)
        return out

    def empty(self) -> Track:
        K = len(_engine_orders(self.cfg))
        return Track(times=np.zeros(0), f0_hz=np.zeros(0), voiced=np.zeros(0, dtype=bool),
                     voicing_prob=np.zeros(0), harmonic_amplitudes=np.zeros((0, self.H)),
                     model_order=_EMPTY_I, hnr_db=np.zeros(0), sr=self.sr_in,
                     frame_s=self.cfg.auto_frame_s, settings=self.cfg.as_dict(),
                     rpm=np.zeros(0), order_numbers=_engine_orders(self.cfg),
                     order_amplitudes=np.zeros((0, K)), uneven_db=np.zeros(0),
                     uneven_flag=np.zeros(0, dtype=bool))


def _engine_orders(cfg) -> np.ndarray:
    from .machinery import order_numbers

    return order_numbers(int(round(cfg.max_order * cfg.strokes / 2)), cfg.strokes)


def _subset(tr: Track, sel: np.ndarray, *, times: np.ndarray) -> Track:
    """The frames ``sel`` of ``tr``, at ``times``."""
    kw = {}
    for f in dataclasses.fields(Track):
        v = getattr(tr, f.name)
        if f.name == "times":
            v = times
        elif f.name not in ("order_numbers",) and isinstance(v, np.ndarray):
            v = v[sel]
        kw[f.name] = v
    return Track(**kw)


def _concat(parts: list) -> Track:
    """The frames of several tracks of the same stream, in order."""
    parts = [p for p in parts if len(p)] or parts[:1]
    if len(parts) == 1:
        return parts[0]
    first = parts[0]
    kw = {}
    for f in dataclasses.fields(Track):
        v = getattr(first, f.name)
        if isinstance(v, np.ndarray) and f.name != "order_numbers":
            v = np.concatenate([getattr(p, f.name) for p in parts])
        kw[f.name] = v
    return Track(**kw)


def concat_tracks(parts: list) -> Track:
    """Join the tracks a :class:`StreamTracker` returned into one."""
    return _concat(list(parts))

