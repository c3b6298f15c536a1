"""The capture loop of ``harmtrack live``, independent of where the audio comes from.

:func:`run_session` reads blocks from a *source* (an object with ``read(timeout)``,
``read_nowait()``, ``stop()`` and ``overflows``, such as
:class:`harmtrack.live_capture.Capture`), feeds them to a streaming tracker and
hands the samples and the finished frames to a :class:`LiveSink`: the saved
audio, the JSON-lines log, the alarms and the status panel.  At the end it
stops the source, feeds what was still queued, flushes the tracker and writes
the remaining frames, whatever ended the session.
"""

from __future__ import annotations

import collections
import math
import sys
import threading
from dataclasses import dataclass, field

from .live_alarms import Alarms
from .live_capture import DeviceLost
from .live_display import level_dbfs, status_line

__all__ = ["LiveSink", "SessionEnd", "OutputClosed", "run_session", "LEVEL_STEP_S"]

#: Length of the chunks whose RMS level the meter shows and the signal-lost
#: alarm reads, seconds.
LEVEL_STEP_S = 0.05

#: Seconds the loop waits for a block before it looks at the stop flag,
#: the device's health and the panel again.
POLL_S = 0.1

#: Seconds of level history kept to look up the level at a frame's time (the
#: frames arrive later than the samples by the tracker's delay).
LEVEL_HISTORY_S = 30.0


class OutputClosed(Exception):
    """The reader of standard output went away."""


@dataclass
class SessionEnd:
    """How a session ended.

    Attributes
    ----------
    reason : str
        ``duration``, ``interrupted``, ``device lost`` or ``output closed``.
    samples : int
        Samples captured and tracked.
    detail : str
        The device-loss message, else empty.
    """

    reason: str
    samples: int
    detail: str = ""


class _LevelHistory:
    """RMS levels of consecutive chunks of ``LEVEL_STEP_S`` seconds, by stream time."""

    def __init__(self, sr: float):
        self.sr = float(sr)
        self.step = max(1, int(round(LEVEL_STEP_S * sr)))
        self._pending = []
        self._pending_n = 0
        self._start = 0            # first sample of the pending chunk
        self.chunks = collections.deque()   # (start_s, end_s, level_db)
        self.latest_db = -math.inf

    def add(self, x) -> None:
        import numpy as np

        while x.size:
            take = min(self.step - self._pending_n, x.size)
            self._pending.append(x[:take])
            self._pending_n += take
            x = x[take:]
            if self._pending_n == self.step:
                chunk = np.concatenate(self._pending)
                db = level_dbfs(chunk)
                end = self._start + self.step
                self.chunks.append((self._start / self.sr, end / self.sr, db))
                self.latest_db = db
                self._start = end
                self._pending, self._pending_n = [], 0
        keep_from = self._start / self.sr - LEVEL_HISTORY_S
        while self.chunks and self.chunks[0][1] < keep_from:
            self.chunks.popleft()

    def at(self, t: float) -> float:
        """Level of the chunk holding time ``t`` (the latest chunk when ``t`` is past it)."""
        for start, end, db in reversed(self.chunks):
            if start <= t:
                return db
        return self.chunks[0][2] if self.chunks else -math.inf


@dataclass
class _Stats:
    frames: int = 0
    voiced: int = 0
    f0: list = field(default_factory=list)
    rpm: list = field(default_factory=list)
    flagged: int = 0


class LiveSink:
    """Where the samples and frames of a session go.

    Parameters
    ----------
    sr : float
        Sample rate, Hz.
    engine : bool
        Engine preset (speed, firing frequency, uneven firing).
    log : JsonLinesLog or None
        The JSON-lines log.
    recorder : WavRecorder or None
        The saved audio.
    alarms : Alarms or None
    display : StatusDisplay or None
    alarm_stream : file
        Where alarm and warning lines go (standard error).
    """

    def __init__(self, *, sr: float, engine: bool, log=None, recorder=None,
                 alarms: Alarms | None = None, display=None, alarm_stream=None):
        self.sr = float(sr)
        self.engine = engine
        self.log = log
        self.recorder = recorder
        self.alarms = alarms
        self.display = display
        self.alarm_stream = alarm_stream if alarm_stream is not None else sys.stderr
        self.levels = _LevelHistory(sr)
        self.samples = 0
        self.last_frame: dict | None = None
        self.stats = _Stats()
        self.warned_overflows = 0

    # -- samples ------------------------------------------------------------
    def audio(self, x) -> None:
        """Samples captured (before they are tracked)."""
        if self.recorder is not None:
            self.recorder.write(x)
        self.levels.add(x)
        self.samples += x.size

    # -- frames -------------------------------------------------------------
    def frames(self, track) -> None:
        """Frames finished by the tracker: log, alarms, statistics."""
        from .live_output import frame_records

        records = frame_records(track)
        if not records:
            return
        out = []
        for rec in records:
            out.append(rec)
            self._count(rec)
            if self.alarms is not None:
                for ev in self.alarms.update(
                        rec["time_s"], voiced=bool(rec["voiced"]),
                        rpm=_num(rec.get("rpm")), uneven_flag=bool(rec.get("uneven_flag", 0)),
                        level_db=self.levels.at(rec["time_s"])):
                    out.append(ev.record())
                    self.say(f"harmtrack: alarm {ev.message}")
        self.last_frame = records[-1]
        self.write(out)

    def _count(self, rec: dict) -> None:
        s = self.stats
        s.frames += 1
        if rec["voiced"]:
            s.voiced += 1
            if rec["f0_hz"] is not None:
                s.f0.append(rec["f0_hz"])
            if self.engine and rec.get("rpm") is not None:
                s.rpm.append(rec["rpm"])
                s.flagged += int(bool(rec.get("uneven_flag")))

    def write(self, records) -> None:
        """Records to the JSON-lines log, if any."""
        if self.log is None:
            return
        try:
            self.log.write(records)
        except BrokenPipeError:
            raise OutputClosed() from None

    # -- people -------------------------------------------------------------
    def say(self, line: str) -> None:
        """One line on the alarm stream, clear of the status panel."""
        if self.display is not None:
            self.display.message(line, self.alarm_stream)
        else:
            print(line, file=self.alarm_stream, flush=True)

    def refresh(self, *, force: bool = False) -> None:
        """Redraw the status panel when due."""
        d = self.display
        if d is None or not (force or d.due()):
            return
        active = self.alarms.active if self.alarms is not None else ()
        d.show(status_line(self.last_frame, level_db=self.levels.latest_db,
                           elapsed_s=self.samples / self.sr, engine=self.engine,
                           active_alarms=active), force=force)

    def overflows(self, count: int) -> None:
        """Warn (once per 10 new overflows at most) that input samples were lost."""
        if count > self.warned_overflows and (self.warned_overflows == 0
                                              or count >= self.warned_overflows + 10):
            self.say(f"harmtrack: warning: input overflow, samples lost ({count} so far, "
                     f"at {self.samples / self.sr:.2f} s)")
            self.warned_overflows = count

    def close_display(self) -> None:
        if self.display is not None:
            self.display.clear()

    def summary(self) -> dict:
        """Counts and statistics of the frames seen so far."""
        import numpy as np

        s = self.stats
        out = {"frames": s.frames, "voiced_frames": s.voiced,
               "seconds": self.samples / self.sr}
        if s.f0:
            f = np.asarray(s.f0)
            out.update(f0_median_hz=float(np.median(f)), f0_min_hz=float(f.min()),
                       f0_max_hz=float(f.max()))
        if s.rpm:
            r = np.asarray(s.rpm)
            out.update(rpm_mean=float(r.mean()), rpm_min=float(r.min()), rpm_max=float(r.max()),
                       flagged_fraction=s.flagged / len(s.rpm))
        if self.alarms is not None:
            out.update(alarms_raised=self.alarms.raised_count, alarms_active=self.alarms.active)
        return out


def _num(v) -> float:
    return math.nan if v is None else float(v)


def run_session(source, tracker, sink: LiveSink, *, duration_s: float | None = None,
                stop: threading.Event | None = None) -> SessionEnd:
    """Capture until the duration is reached, ``stop`` is set or the device is lost.

    Parameters
    ----------
    source : object
        ``read(timeout)`` -> 1-D float block or None, ``read_nowait()``,
        ``stop()``, ``overflows`` (count); ``read`` raises
        :class:`harmtrack.live_capture.DeviceLost` when the device is gone.
    tracker : harmtrack.stream.StreamTracker
    sink : LiveSink
    duration_s : float, optional
        Stop after exactly ``round(duration_s * sr)`` samples.
    stop : threading.Event, optional
        Set (by the Ctrl-C handler) to end the session.

    Returns
    -------
    SessionEnd
        Everything captured has been tracked, flushed and handed to ``sink``.
    """
    import numpy as np

    stop = stop or threading.Event()
    limit = None if duration_s is None else int(round(duration_s * sink.sr))
    end: SessionEnd | None = None

    def take(blocks) -> bool:
        """Track the blocks; True when the duration is reached."""
        blocks = [b for b in blocks if b is not None and b.size]
        if not blocks:
            return False
        x = np.concatenate(blocks) if len(blocks) > 1 else blocks[0]
        if limit is not None:
            x = x[:max(0, limit - sink.samples)]
        if x.size:
            sink.audio(x)
            sink.frames(tracker.feed(x.astype(np.float64)))
        return limit is not None and sink.samples >= limit

    try:
        while end is None:
            if stop.is_set():
                end = SessionEnd("interrupted", sink.samples)
                break
            block = source.read(POLL_S)
            if block is not None:
                blocks = [block]
                while (more := source.read_nowait()) is not None:
                    blocks.append(more)
                if take(blocks):
                    end = SessionEnd("duration", sink.samples)
            sink.overflows(source.overflows)
            sink.refresh()
    except DeviceLost as exc:
        end = SessionEnd("device lost", sink.samples, str(exc))
    except OutputClosed:
        end = SessionEnd("output closed", sink.samples)
    finally:
        source.stop()
    try:
        if end.reason in ("interrupted", "device lost"):
            # What the device delivered before it stopped is tracked too.
            rest = []
            while True:
                try:
                    b = source.read_nowait()
                except DeviceLost:
                    continue
                if b is None:
                    break
                rest.append(b)
            take(rest)
        sink.frames(tracker.flush())
    except OutputClosed:
        end = SessionEnd("output closed", sink.samples)
    end.samples = sink.samples
    sink.close_display()
    return end
