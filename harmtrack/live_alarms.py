"""Alarms of ``harmtrack live``: speed out of band, uneven firing, signal lost.

Pure state machines on the tracked frames.  Every alarm follows a condition
evaluated per frame at the frame's time: it is *raised* once the condition has
held for its raise time and *cleared* once it has been false for the hold
time.  Frames without the evidence a condition needs (no engine heard, for the
speed and firing alarms) leave it as it was.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import HarmtrackError

__all__ = ["AlarmSettings", "AlarmEvent", "Alarms", "check_alarm_settings",
           "DEFAULT_MIN_LEVEL_DB", "DEFAULT_HOLD_S"]

#: Input level under which a frame counts as silence for every alarm, dBFS: a
#: quiet room through a typical microphone and preamplifier sits around -70 to
#: -60 dBFS RMS, speech and engines well above.
DEFAULT_MIN_LEVEL_DB = -60.0

#: Seconds a speed must stay outside its band before the alarm is raised, and
#: seconds every condition must stay false before its alarm is cleared: longer
#: than a few frames' glitches, short against an operator's reaction.
DEFAULT_HOLD_S = 0.5

#: Longest raise or hold time accepted, seconds.
MAX_ALARM_S = 3600.0


@dataclass(frozen=True)
class AlarmSettings:
    """What to watch.

    Parameters
    ----------
    rpm_below, rpm_above : float or None
        Raise an alarm while the speed is below / above this many rpm (engine preset).
    uneven_s : float or None
        Raise an alarm when uneven firing is flagged for this many seconds (engine preset).
    lost_s : float or None
        Raise an alarm when no voiced frame (no engine heard, for engines) at
        or above ``min_level_db`` has come for this many seconds.
    min_level_db : float
        Input level, dBFS, under which a frame counts as silence: lost for the
        signal-lost alarm, no evidence for the speed and firing alarms.
    hold_s : float
        Seconds a speed must stay out of band before its alarm is raised, and
        seconds any condition must stay false before its alarm is cleared.
    """

    rpm_below: float | None = None
    rpm_above: float | None = None
    uneven_s: float | None = None
    lost_s: float | None = None
    min_level_db: float = DEFAULT_MIN_LEVEL_DB
    hold_s: float = DEFAULT_HOLD_S

    @property
    def any(self) -> bool:
        return any(v is not None for v in (self.rpm_below, self.rpm_above, self.uneven_s,
                                           self.lost_s))


def _seconds(option: str, value) -> float | None:
    if value is None:
        return None
    if not (isinstance(value, (int, float)) and math.isfinite(value)
            and 0.0 <= value <= MAX_ALARM_S):
        raise HarmtrackError(f"{option} {value}: give seconds from 0 to {MAX_ALARM_S:g}")
    return float(value)


def check_alarm_settings(*, engine: bool, rpm_below=None, rpm_above=None, uneven_s=None,
                         lost_s=None, min_level_db=None, hold_s=None) -> AlarmSettings:
    """Validated :class:`AlarmSettings` from the command-line values.

    Parameters
    ----------
    engine : bool
        Whether the engine preset is used (speed and firing alarms need it).
    rpm_below, rpm_above : float, optional
        Speed band limits, rpm.
    uneven_s, lost_s, hold_s : float, optional
        Seconds, 0 to 3600.
    min_level_db : float, optional
        dBFS, -150 to 0.

    Raises
    ------
    HarmtrackError
        A value out of range, an empty band, or a speed or firing alarm without
        the engine preset.
    """
    for option, value in (("--alarm-rpm-below", rpm_below), ("--alarm-rpm-above", rpm_above)):
        if value is None:
            continue
        if not (isinstance(value, (int, float)) and math.isfinite(value) and 0 < value <= 1e6):
            raise HarmtrackError(f"{option} {value}: give a speed in rpm above 0")
        if not engine:
            raise HarmtrackError(f"{option} needs the engine preset (--preset engine)")
    if rpm_below is not None and rpm_above is not None and not rpm_below < rpm_above:
        raise HarmtrackError(
            f"--alarm-rpm-below {rpm_below:g} must be lower than --alarm-rpm-above {rpm_above:g}")
    uneven = _seconds("--alarm-uneven", uneven_s)
    if uneven is not None and not engine:
        raise HarmtrackError("--alarm-uneven needs the engine preset (--preset engine)")
    lost = _seconds("--alarm-lost", lost_s)
    hold = _seconds("--alarm-hold", hold_s)
    level = DEFAULT_MIN_LEVEL_DB
    if min_level_db is not None:
        if not (isinstance(min_level_db, (int, float)) and math.isfinite(min_level_db)
                and -150.0 <= min_level_db <= 0.0):
            raise HarmtrackError(f"--alarm-min-level {min_level_db}: give dBFS from -150 to 0")
        level = float(min_level_db)
    return AlarmSettings(
        rpm_below=None if rpm_below is None else float(rpm_below),
        rpm_above=None if rpm_above is None else float(rpm_above),
        uneven_s=uneven, lost_s=lost, min_level_db=level,
        hold_s=DEFAULT_HOLD_S if hold is None else hold,
    )


@dataclass(frozen=True)
class AlarmEvent:
    """An alarm raised or cleared.

    Attributes
    ----------
    name : str
        ``rpm_below``, ``rpm_above``, ``uneven_firing`` or ``signal_lost``.
    state : str
        ``raised`` or ``cleared``.
    time_s : float
        Stream time of the frame that decided it, seconds from the first sample.
    since_s : float
        Stream time at which the condition began (raised) or ended (cleared).
    message : str
        One line for people.
    """

    name: str
    state: str
    time_s: float
    since_s: float
    message: str

    def record(self) -> dict:
        """The JSON-lines event record."""
        return {"event": "alarm", "alarm": self.name, "state": self.state,
                "time_s": self.time_s, "since_s": self.since_s, "message": self.message}


class _Latch:
    """A condition debounced in stream time.

    Raised once it has been true for ``raise_s`` seconds, cleared once it has
    been false for ``clear_s`` seconds.
    """

    def __init__(self, raise_s: float, clear_s: float):
        self.raise_s = raise_s
        self.clear_s = clear_s
        self.raised = False
        self._cond = False
        self._start = -math.inf

    def update(self, t: float, cond: bool | None) -> str | None:
        """Feed the condition at time ``t``; returns ``"raised"``, ``"cleared"`` or None."""
        if cond is None:
            return None
        if cond != self._cond or self._start == -math.inf:
            self._cond = cond
            self._start = t
        if not self.raised and self._cond and t - self._start >= self.raise_s - 1e-9:
            self.raised = True
            return "raised"
        if self.raised and not self._cond and t - self._start >= self.clear_s - 1e-9:
            self.raised = False
            return "cleared"
        return None

    @property
    def since(self) -> float:
        return self._start


class Alarms:
    """Evaluates the configured alarms frame by frame.

    Parameters
    ----------
    settings : AlarmSettings
    engine : bool
        Engine preset: a frame "has signal" when an engine is heard.
    """

    def __init__(self, settings: AlarmSettings, *, engine: bool):
        self.settings = settings
        self.engine = engine
        s = settings
        self._latches: dict[str, _Latch] = {}
        if s.rpm_below is not None:
            self._latches["rpm_below"] = _Latch(s.hold_s, s.hold_s)
        if s.rpm_above is not None:
            self._latches["rpm_above"] = _Latch(s.hold_s, s.hold_s)
        if s.uneven_s is not None:
            self._latches["uneven_firing"] = _Latch(s.uneven_s, s.hold_s)
        if s.lost_s is not None:
            self._latches["signal_lost"] = _Latch(s.lost_s, s.hold_s)
        self.raised_count = 0

    @property
    def active(self) -> list[str]:
        """Names of the alarms raised now."""
        return [name for name, latch in self._latches.items() if latch.raised]

    def update(self, t: float, *, voiced: bool, rpm: float = math.nan,
               uneven_flag: bool = False, level_db: float = math.inf) -> list[AlarmEvent]:
        """Feed one frame.

        Parameters
        ----------
        t : float
            Frame time, seconds of the stream; frames come in increasing time.
        voiced : bool
            Voiced (voices) or engine heard (engines).
        rpm : float
            Speed of the frame (NaN where no engine).
        uneven_flag : bool
            The frame's uneven-firing flag.
        level_db : float
            Input level around the frame, dBFS.

        Returns
        -------
        list of AlarmEvent
            The alarms raised or cleared by this frame.
        """
        s = self.settings
        heard = (bool(voiced) and (not self.engine or math.isfinite(rpm))
                 and level_db >= s.min_level_db)
        conditions = {
            "rpm_below": (rpm < s.rpm_below) if heard and s.rpm_below is not None else None,
            "rpm_above": (rpm > s.rpm_above) if heard and s.rpm_above is not None else None,
            "uneven_firing": bool(uneven_flag) if heard else None,
            "signal_lost": not heard,
        }
        events = []
        for name, latch in self._latches.items():
            change = latch.update(t, conditions[name])
            if change is None:
                continue
            if change == "raised":
                self.raised_count += 1
            events.append(AlarmEvent(name, change, t, latch.since,
                                     self._message(name, change, t, latch.since, rpm)))
        return events

    def _message(self, name: str, state: str, t: float, since: float, rpm: float) -> str:
        s = self.settings
        if state == "cleared":
            if name == "rpm_below":
                what = f"speed back at or above {s.rpm_below:g} rpm"
            elif name == "rpm_above":
                what = f"speed back at or below {s.rpm_above:g} rpm"
            elif name == "uneven_firing":
                what = "firing even again"
            else:
                what = "signal back"
            return f"{name} cleared: {what} since {since:.2f} s"
        if name == "rpm_below":
            what = f"speed {rpm:.0f} rpm below {s.rpm_below:g} rpm"
        elif name == "rpm_above":
            what = f"speed {rpm:.0f} rpm above {s.rpm_above:g} rpm"
        elif name == "uneven_firing":
            what = "uneven firing flagged"
        else:
            signal = "engine heard" if self.engine else "voiced frame"
            what = f"no {signal} at or above {s.min_level_db:g} dBFS"
        return f"{name} raised: {what} since {since:.2f} s (at {t:.2f} s)"
