"""The live commands: ``harmtrack devices`` and ``harmtrack live``.

``harmtrack devices`` lists the audio input devices PortAudio sees.
``harmtrack live`` captures one of them, tracks it with
:class:`harmtrack.stream.StreamTracker` as the audio arrives, shows a status
line, writes frames and alarm events as JSON lines, and can save the captured
audio.  This module parses and checks the options and wires the parts
together: capture (:mod:`harmtrack.live_capture`), the loop
(:mod:`harmtrack.live_session`), outputs (:mod:`harmtrack.live_output`),
alarms (:mod:`harmtrack.live_alarms`) and the panel (:mod:`harmtrack.live_display`).
Heavy modules are imported inside the commands.

Exit status of ``live``: 0 when the duration is reached or Ctrl-C (or
SIGTERM) ends the capture, 2 for bad settings, devices or rates (one line,
before anything is written), 3 when the device stops delivering audio
mid-stream (what was captured until then is tracked, written and kept).
"""

from __future__ import annotations

import argparse
import contextlib
import math
import os
import signal
import sys
import threading
from dataclasses import dataclass

__all__ = ["add_commands", "cmd_devices", "cmd_live", "EXIT_DEVICE_LOST"]

EXIT_OK = 0
EXIT_USAGE = 2
#: Exit status when the input device is lost mid-stream.
EXIT_DEVICE_LOST = 3

#: Seconds of test tone tracked by a throw-away tracker before the capture
#: starts, so that loading the compiled kernels does not delay the first frames.
WARM_UP_S = 1.0


# ---------------------------------------------------------------------------
# argument parsing
# ---------------------------------------------------------------------------


def add_commands(sub, *, common: argparse.ArgumentParser,
                 analysis: argparse.ArgumentParser) -> None:
    """Add ``devices`` and ``live`` to the ``harmtrack`` subcommands.

    Parameters
    ----------
    sub : argparse._SubParsersAction
        The subcommand registry of :func:`harmtrack.cli.build_parser`.
    common : argparse.ArgumentParser
        Parent parser of the options every command takes (``--debug``).
    analysis : argparse.ArgumentParser
        Parent parser of the analysis options of ``track`` and ``batch``.
    """
    d = sub.add_parser(
        "devices", parents=[common], help="list the audio input devices",
        description="List the audio input devices (index, name, host API, input channels, "
                    "default sample rate); * marks the default input.",
    )
    d.set_defaults(func=cmd_devices)

    p = sub.add_parser(
        "live", parents=[common, analysis], help="track a microphone or other input live",
        description="Capture an audio input and track it as it arrives: a status line with "
                    "f0 and note (voices) or speed, firing frequency and the uneven-firing "
                    "flag (engines), confidence and input level; frames and alarm events "
                    "as JSON lines; optionally the captured audio. Ctrl-C stops.",
    )
    c = p.add_argument_group("capture")
    c.add_argument("--device", metavar="DEV",
                   help="input device: its index or (part of) its name, as 'harmtrack devices' "
                        "lists them (default: the system's default input)")
    c.add_argument("--rate", type=float, metavar="HZ",
                   help="sample rate to capture at (default: the preset's analysis rate, 16000 "
                        "Hz for voice and engine, 22050 Hz for singing, when the device takes "
                        "it, else the device's default rate)")
    c.add_argument("--duration", type=float, metavar="S",
                   help="stop after S seconds of audio (default: run until Ctrl-C)")
    o = p.add_argument_group("output")
    o.add_argument("--jsonl", metavar="FILE",
                   help="append every frame and alarm event as one JSON object per line to "
                        "FILE ('-': standard output)")
    o.add_argument("--save-audio", metavar="FILE.wav",
                   help="save the captured audio as a 32-bit float WAV file (finalised when "
                        "the capture ends)")
    o.add_argument("-q", "--quiet", action="store_true", help="no status line")
    a = p.add_argument_group("alarms (one line on stderr when raised and when cleared)")
    a.add_argument("--alarm-rpm-below", type=float, metavar="RPM",
                   help="engine speed below RPM (engine preset)")
    a.add_argument("--alarm-rpm-above", type=float, metavar="RPM",
                   help="engine speed above RPM (engine preset)")
    a.add_argument("--alarm-uneven", type=float, metavar="S",
                   help="uneven firing flagged for S seconds (engine preset)")
    a.add_argument("--alarm-lost", type=float, metavar="S",
                   help="signal lost: no voiced frame (engines: no engine heard) at or above "
                        "--alarm-min-level for S seconds")
    a.add_argument("--alarm-min-level", type=float, metavar="DBFS",
                   help="input level, dB re full scale, under which a frame counts as silence "
                        "for every alarm (default -60)")
    a.add_argument("--alarm-hold", type=float, metavar="S",
                   help="seconds a speed must stay out of band before its alarm is raised, and "
                        "any condition must stay false before its alarm is cleared (default 0.5)")
    p.set_defaults(func=cmd_live)


# ---------------------------------------------------------------------------
# settings
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class LiveSettings:
    """The checked options of ``harmtrack live``."""

    options: dict          # StreamTracker keywords, preset included
    engine: bool
    preferred_sr: int      # the preset's analysis rate
    rate: int | None
    duration_s: float | None
    jsonl: str | None
    save_audio: str | None
    alarms: object         # live_alarms.AlarmSettings


def live_settings(args) -> LiveSettings:
    """Check every option of ``harmtrack live`` before any device is touched.

    Raises
    ------
    HarmtrackError
        A bad analysis setting, rate, duration, output path or alarm setting.
    """
    from .cli import _track_options
    from .config import make_config
    from .errors import HarmtrackError
    from .io.atomic import check_destination
    from .live_alarms import check_alarm_settings

    options = {k: v for k, v in _track_options(args).items() if v is not None}
    rest = dict(options)
    preset = rest.pop("preset")
    cfg = make_config(preset, fmin_hz=rest.pop("fmin", None), fmax_hz=rest.pop("fmax", None),
                      **rest)
    engine = preset == "engine"
    rate = args.rate
    if rate is not None:
        if not (math.isfinite(rate) and rate > 0 and rate == int(rate)):
            raise HarmtrackError(f"--rate {rate:g}: give a whole number of Hz above 0")
        rate = int(rate)
    duration = args.duration
    if duration is not None and not (math.isfinite(duration) and 0 < duration <= 1e7):
        raise HarmtrackError(f"--duration {duration:g}: give seconds above 0")
    if args.jsonl is not None and args.jsonl != "-":
        check_destination(args.jsonl)
    if args.save_audio is not None:
        if not args.save_audio.lower().endswith(".wav"):
            raise HarmtrackError(f"--save-audio {args.save_audio}: give a file name ending "
                                 "in .wav")
        check_destination(args.save_audio)
        if args.jsonl not in (None, "-") and (
                os.path.abspath(args.jsonl) == os.path.abspath(args.save_audio)):
            raise HarmtrackError(f"--save-audio {args.save_audio}: same file as --jsonl")
    alarms = check_alarm_settings(
        engine=engine, rpm_below=args.alarm_rpm_below, rpm_above=args.alarm_rpm_above,
        uneven_s=args.alarm_uneven, lost_s=args.alarm_lost,
        min_level_db=args.alarm_min_level, hold_s=args.alarm_hold)
    return LiveSettings(options=options, engine=engine, preferred_sr=int(cfg.analysis_sr),
                        rate=rate, duration_s=duration, jsonl=args.jsonl,
                        save_audio=args.save_audio, alarms=alarms)


# ---------------------------------------------------------------------------
# commands
# ---------------------------------------------------------------------------


def _debug(args) -> bool:
    return bool(getattr(args, "debug", False))


def cmd_devices(args) -> int:
    """``harmtrack devices``: the table of input devices."""
    from .live_capture import (format_devices, input_devices, load_sounddevice,
                               native_stderr_captured)

    with native_stderr_captured(not _debug(args)):
        sd = load_sounddevice()
        devices = input_devices(sd)
    print(format_devices(devices))
    return EXIT_OK


@contextlib.contextmanager
def _stop_on_signals(stop: threading.Event):
    """Ctrl-C and SIGTERM set ``stop``; a second Ctrl-C interrupts at once."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        if stop.is_set() and signum == signal.SIGINT:
            raise KeyboardInterrupt
        stop.set()

    old = {s: signal.signal(s, handler) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)


def _warm_up(tracker_cls, sr: int, options: dict) -> None:
    """Track a second of a harmonic tone with a throw-away tracker (loads the kernels)."""
    import warnings

    import numpy as np

    from .errors import HarmtrackError

    t = np.arange(int(WARM_UP_S * sr)) / sr
    y = sum(0.1 / k * np.sin(2 * np.pi * 150.0 * k * t) for k in range(1, 6))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            warm = tracker_cls(sr, **options)
            half = y.size // 2
            warm.feed(y[:half])
            warm.feed(y[half:])
            warm.flush()
        except HarmtrackError:
            pass  # only a speed-up: the real tracker reports its own problems


def cmd_live(args) -> int:
    """``harmtrack live``: capture, track, show, log, alarm."""
    from .live_capture import native_stderr_captured

    settings = live_settings(args)
    with native_stderr_captured(not _debug(args)):
        return _run_live(args, settings)


def _start_record(device, rate: int, tracker, capture, settings: LiveSettings) -> dict:
    import datetime

    from ._version import __version__

    return {
        "event": "start", "time_s": 0.0, "tool": "harmtrack", "version": __version__,
        "started_utc": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        "device": device.name, "device_index": device.index, "host_api": device.host_api,
        "sample_rate": rate, "latency_s": float(tracker.latency_s),
        "input_latency_s": float(capture.latency_s), "settings": dict(settings.options),
    }


def _summary_line(sink, end, device, rate: int, outputs: list[str]) -> str:
    s = sink.summary()
    share = 100.0 * s["voiced_frames"] / s["frames"] if s["frames"] else 0.0
    label = "engine heard" if sink.engine else "voiced"
    parts = [f"captured {s['seconds']:.2f} s from {device.name!r} at {rate} Hz: "
             f"{s['frames']} frames, {share:.1f} % {label}"]
    if sink.engine and "rpm_mean" in s:
        parts.append(f"rpm mean {s['rpm_mean']:.0f} (range {s['rpm_min']:.0f} to "
                     f"{s['rpm_max']:.0f}), {100.0 * s['flagged_fraction']:.1f} % flagged uneven")
    elif "f0_median_hz" in s:
        parts.append(f"f0 median {s['f0_median_hz']:.1f} Hz (range {s['f0_min_hz']:.1f} to "
                     f"{s['f0_max_hz']:.1f} Hz)")
    if "alarms_raised" in s:
        active = s["alarms_active"]
        parts.append(f"alarms raised {s['alarms_raised']}"
                     + (f", still active: {', '.join(active)}" if active else ""))
    parts.append(f"ended: {end.reason}")
    parts.extend(outputs)
    return "; ".join(parts)


def _run_live(args, settings: LiveSettings) -> int:
    from . import live_capture as cap
    from .live_alarms import Alarms
    from .live_display import StatusDisplay
    from .live_output import JsonLinesLog, WavRecorder
    from .live_session import LiveSink, OutputClosed, run_session
    from .stream import StreamTracker

    sd = cap.load_sounddevice()
    device = cap.choose_device(cap.input_devices(sd), args.device)
    rate = cap.choose_rate(settings.rate, settings.preferred_sr, device,
                           lambda r: cap.rate_supported(sd, device, r))
    cap.check_rate(sd, device, rate)
    tracker = StreamTracker(rate, **settings.options)
    _warm_up(StreamTracker, rate, settings.options)

    info = sys.stderr if settings.jsonl == "-" else sys.stdout
    recorder = WavRecorder(settings.save_audio, rate) if settings.save_audio else None
    log = JsonLinesLog(settings.jsonl) if settings.jsonl else None
    alarms = Alarms(settings.alarms, engine=settings.engine) if settings.alarms.any else None
    display = StatusDisplay(info, enabled=not args.quiet)
    sink = LiveSink(sr=rate, engine=settings.engine, log=log, recorder=recorder, alarms=alarms,
                    display=display, alarm_stream=sys.stderr)
    capture = cap.Capture(sd, device, rate)
    stop = threading.Event()
    try:
        with _stop_on_signals(stop):
            capture.start()
            print(f"live: {device.name!r} ({device.host_api}) at {rate} Hz, mono, "
                  f"{settings.options['preset']} preset; algorithmic delay "
                  f"{tracker.latency_s:.3f} s (plus {1000.0 * capture.latency_s:.0f} ms input "
                  "buffer); Ctrl-C stops", file=info, flush=True)
            with contextlib.suppress(OutputClosed):  # the session then ends at once
                sink.write([_start_record(device, rate, tracker, capture, settings)])
            end = run_session(capture, tracker, sink, duration_s=settings.duration_s, stop=stop)
            stats = sink.summary()
            with contextlib.suppress(OutputClosed):
                sink.write([{
                    "event": "stop", "time_s": end.samples / rate, "reason": end.reason,
                    "detail": end.detail, "samples": end.samples, "frames": stats["frames"],
                    "overflows": capture.overflows,
                    "alarms_active": alarms.active if alarms is not None else [],
                }])
            outputs = []
            if log is not None:
                log.close()
                outputs.append(f"frames in {'stdout' if log.to_stdout else settings.jsonl}")
            if recorder is not None:
                path = recorder.close()
                recorder = None
                outputs.append(f"audio in {path}")
    except BaseException:
        capture.stop()
        if recorder is not None:
            recorder.discard()
        if log is not None:
            log.close()
        raise
    try:
        print(_summary_line(sink, end, device, rate, outputs), file=info, flush=True)
    except BrokenPipeError:
        pass
    if end.reason == "device lost":
        print(f"harmtrack: error: device {device.name!r}: capture stopped: {end.detail}; "
              f"the {end.samples / rate:.2f} s captured before were tracked and kept",
              file=sys.stderr, flush=True)
        return EXIT_DEVICE_LOST
    return EXIT_OK

