"""The status panel of ``harmtrack live``: note names, level meter, one status line.

The formatting functions are pure; :class:`StatusDisplay` decides when and how
a line reaches the terminal: redrawn in place about ten times a second on a
terminal, one plain line per second when the output is a file or a pipe.
"""

from __future__ import annotations

import math
import time

__all__ = [
    "NOTE_NAMES",
    "LEVEL_FLOOR_DB",
    "note_name",
    "level_dbfs",
    "level_meter",
    "status_line",
    "StatusDisplay",
]

#: Pitch classes from C, with sharps (twelve-tone equal temperament).
NOTE_NAMES = ("C", "C#", "D", "D#", "E", "F", "F#", "G", "G#", "A", "A#", "B")

#: Level reported for digital silence, dB re full scale.
LEVEL_FLOOR_DB = -120.0

#: Range of the level meter's bar, dBFS: from the floor of a quiet room's
#: microphone noise to full scale.
METER_RANGE_DB = (-60.0, 0.0)

#: Seconds between two redraws on a terminal, and between two plain lines elsewhere.
TTY_REFRESH_S = 0.1
PLAIN_REFRESH_S = 1.0


def note_name(f_hz: float) -> str:
    """Nearest equal-tempered note and the offset from it, e.g. ``"A4 +3c"``.

    Parameters
    ----------
    f_hz : float
        Frequency in Hz; NaN, zero or negative give ``"--"``.

    Returns
    -------
    str
        Note name with its octave (A4 = 440 Hz, middle C = C4) and the
        deviation in cents, signed, from -50 to +50.
    """
    from .result import hz_to_midi

    if not (isinstance(f_hz, (int, float)) and math.isfinite(f_hz) and f_hz > 0):
        return "--"
    midi = float(hz_to_midi(f_hz))
    nearest = int(round(midi))
    cents = int(round(100.0 * (midi - nearest)))
    octave = nearest // 12 - 1
    return f"{NOTE_NAMES[nearest % 12]}{octave} {cents:+d}c"


def level_dbfs(samples) -> float:
    """RMS level of a block in dB re full scale (a full-scale square wave is 0 dBFS).

    Parameters
    ----------
    samples : array_like
        Samples in input units (full scale = 1).

    Returns
    -------
    float
        ``20 log10(rms)``, at least :data:`LEVEL_FLOOR_DB`; the floor for an
        empty block.
    """
    import numpy as np

    x = np.asarray(samples, dtype=np.float64)
    if x.size == 0:
        return LEVEL_FLOOR_DB
    ms = float(np.mean(x * x))
    if not ms > 0.0:
        return LEVEL_FLOOR_DB
    return max(LEVEL_FLOOR_DB, 10.0 * math.log10(ms))


def level_meter(db: float, width: int = 20) -> str:
    """A bar of ``width`` cells filled in proportion to ``db`` within :data:`METER_RANGE_DB`."""
    lo, hi = METER_RANGE_DB
    frac = 0.0 if not math.isfinite(db) else min(1.0, max(0.0, (db - lo) / (hi - lo)))
    filled = int(round(frac * width))
    return "#" * filled + "-" * (width - filled)


def _clock(seconds: float) -> str:
    m, s = divmod(max(0.0, seconds), 60.0)
    return f"{int(m):d}:{s:04.1f}"


def _fin(x) -> bool:
    return x is not None and isinstance(x, (int, float)) and math.isfinite(x)


def status_line(frame: dict | None, *, level_db: float, elapsed_s: float, engine: bool,
                active_alarms=()) -> str:
    """One status line for the terminal.

    Parameters
    ----------
    frame : dict or None
        The latest tracked frame as a JSON-lines record (``time_s``, ``f0_hz``,
        ``voiced``, ``voicing_prob`` and, for engines, ``rpm`` and
        ``uneven_flag``); None before the first frame.
    level_db : float
        Input level of the latest samples, dBFS.
    elapsed_s : float
        Seconds of audio captured so far.
    engine : bool
        Show speed, firing frequency and the uneven-firing flag instead of f0
        and note.
    active_alarms : iterable of str
        Names of the alarms currently raised.

    Returns
    -------
    str
    """
    frame = frame or {}
    voiced = bool(frame.get("voiced"))
    f0 = frame.get("f0_hz")
    if engine:
        rpm = frame.get("rpm")
        if voiced and _fin(rpm) and _fin(f0):
            flag = "UNEVEN" if frame.get("uneven_flag") else "even"
            what = f"{rpm:6.0f} rpm  firing {f0:6.1f} Hz  {flag:<6}"
        else:
            what = f"{'--':>6} rpm  firing {'--':>6} Hz  {'':<6}"
    else:
        if voiced and _fin(f0):
            what = f"f0 {f0:6.1f} Hz  {note_name(f0):<9}"
        else:
            what = f"f0 {'--':>6} Hz  {'':<9}"
    prob = frame.get("voicing_prob")
    conf = f"conf {prob:4.2f}" if _fin(prob) else "conf  -- "
    level = max(level_db, -99.9) if math.isfinite(level_db) else -99.9
    line = f"{_clock(elapsed_s)}  {what}  {conf}  level {level:5.1f} dBFS [{level_meter(level_db)}]"
    alarms = list(active_alarms)
    if alarms:
        line += "  ALARM " + ",".join(alarms)
    return line


class StatusDisplay:
    """Draws the status line: in place on a terminal, one line a second elsewhere.

    Parameters
    ----------
    stream : file
        Text stream for the status line.
    enabled : bool
        False draws nothing (``--quiet``).
    tty : bool, optional
        Whether ``stream`` is a terminal; asked from the stream when omitted.
    clock : callable
        Monotonic clock in seconds (injectable for tests).
    """

    def __init__(self, stream, *, enabled: bool = True, tty: bool | None = None,
                 clock=time.monotonic):
        self.stream = stream
        self.enabled = enabled
        if tty is None:
            try:
                tty = bool(stream.isatty())
            except (AttributeError, ValueError, OSError):
                tty = False
        self.tty = tty
        self.interval = TTY_REFRESH_S if tty else PLAIN_REFRESH_S
        self._clock = clock
        self._last = -math.inf
        self._drawn = False

    def due(self) -> bool:
        """Whether :meth:`show` would draw now."""
        return self.enabled and self._clock() - self._last >= self.interval

    def show(self, line: str, *, force: bool = False) -> None:
        """Draw ``line`` if the refresh interval has passed (or ``force``)."""
        if not self.enabled or not (force or self.due()):
            return
        self._last = self._clock()
        if self.tty:
            self.stream.write("\r" + line + "\033[K")
            self._drawn = True
        else:
            self.stream.write(line + "\n")
        self.stream.flush()

    def clear(self) -> None:
        """Remove the status line from a terminal (before other text is printed)."""
        if self._drawn:
            self.stream.write("\r\033[K")
            self.stream.flush()
            self._drawn = False

    def message(self, text: str, stream) -> None:
        """Print one line on ``stream`` without mixing it into the status line."""
        self.clear()
        stream.write(text + "\n")
        stream.flush()
        self._last = -math.inf  # redraw at the next update
