"""Live capture: ``harmtrack devices`` and ``harmtrack live``.

Three layers:

* pure parts (note names, levels, the status line, alarms, JSON lines, the
  device and rate choice) and the outputs, in-process;
* the capture loop and the whole ``live`` command in-process against a
  stand-in for the ``sounddevice`` module that plays blocks of generated audio
  through the real callback path (no audio hardware needed);
* end to end through a real capture device: a private PulseAudio daemon with a
  null sink, whose monitor is captured through ALSA's ``pulse`` device while
  ``paplay`` plays our generated voice into the sink.  These tests skip,
  saying why, when PulseAudio, PortAudio or the ALSA plugin are missing.

The live frames are compared with :func:`harmtrack.track` run offline on the
exact samples the live tracker saw (the saved audio), and with a
:class:`harmtrack.stream.StreamTracker` fed those samples in one piece.
"""

from __future__ import annotations

import errno
import json
import math
import os
import queue
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

import harmtrack
from harmtrack import cli, live, live_capture, live_output, synth
from harmtrack.errors import HarmtrackError
from harmtrack.io.columns import table_columns, track_table
from harmtrack.live_alarms import AlarmSettings, Alarms, check_alarm_settings
from harmtrack.live_capture import Capture, DeviceLost, InputDevice
from harmtrack.live_display import (NOTE_NAMES, StatusDisplay, level_dbfs, note_name,
                                    status_line)
from harmtrack.live_session import LiveSink, run_session

SR = 16000
HOP = 0.01


def _cents(a, b):
    with np.errstate(divide="ignore", invalid="ignore"):
        return 1200.0 * np.log2(np.asarray(a, dtype=float) / np.asarray(b, dtype=float))


def glide_voice(sr=SR, seconds=3.0):
    """Our synthetic voice gliding up an octave from 120 Hz and back (formants, breath)."""
    t, f0 = synth.f0_contour(seconds, kind="glide", f0_hz=120.0)
    return synth.voice(t, f0, sr, seed=1)


def pcm16(y):
    """``y`` as 16-bit PCM would carry it (the values a 16-bit capture device delivers)."""
    return np.round(np.clip(y, -1, 1) * 32767.0) / 32768.0


def read_jsonl(path):
    """(frame records, event records) of a JSON-lines log."""
    frames, events = [], []
    for line in Path(path).read_text().splitlines():
        rec = json.loads(line)
        (events if "event" in rec else frames).append(rec)
    return frames, events


def frame_arrays(frames):
    t = np.array([r["time_s"] for r in frames], dtype=float)
    v = np.array([bool(r["voiced"]) for r in frames])
    f = np.array([math.nan if r["f0_hz"] is None else r["f0_hz"] for r in frames], dtype=float)
    return t, v, f


def streamed(y, sr=SR, **options):
    """All frames of a StreamTracker fed ``y`` in one piece, then flushed."""
    from harmtrack.stream import StreamTracker

    st = StreamTracker(sr, **options)
    parts = [st.feed(y), st.flush()]
    records = []
    for p in parts:
        records += live_output.frame_records(p)
    return records


def agreement(frames, offline):
    """Share of the offline frames that the live frames agree with (both unvoiced, or
    both voiced within 10 cents), and the number of frames compared."""
    t, v, f = frame_arrays(frames)
    live_by_index = {int(round(x / HOP)): i for i, x in enumerate(t)}
    ok = n = 0
    for i, x in enumerate(offline.times):
        j = live_by_index.get(int(round(x / HOP)))
        if j is None:
            continue
        n += 1
        if not v[j] and not offline.voiced[i]:
            ok += 1
        elif v[j] and offline.voiced[i] and abs(_cents(f[j], offline.f0_hz[i])) < 10.0:
            ok += 1
    return ok / max(n, 1), n


# ---------------------------------------------------------------------------
# pure parts
# ---------------------------------------------------------------------------


# Twelve-tone equal temperament with A4 = 440 Hz = MIDI note 69 (ISO 16 standard
# pitch; MIDI numbering: middle C = note 60 = C4).
@pytest.mark.parametrize("midi", [33, 45, 57, 60, 61, 69, 70, 83, 96])
@pytest.mark.parametrize("cents", [-37, 0, 12, 49])
def test_note_name_follows_equal_temperament(midi, cents):
    f = 440.0 * 2.0 ** ((midi - 69 + cents / 100.0) / 12.0)
    expected = f"{NOTE_NAMES[midi % 12]}{midi // 12 - 1} {cents:+d}c"
    assert note_name(f) == expected


def test_note_name_hand_worked_and_missing():
    assert note_name(440.0) == "A4 +0c"
    assert note_name(261.6256) == "C4 +0c"       # middle C
    assert note_name(466.1638) == "A#4 +0c"
    for bad in (math.nan, 0.0, -5.0, None):
        assert note_name(bad) == "--"


def test_level_dbfs_against_rms_formula():
    n = SR
    t = np.arange(n) / SR
    # RMS of a sine of amplitude A is A / sqrt(2): 20 log10(A / sqrt(2)) dB re full scale.
    for amp in (1.0, 0.1, 0.003):
        y = amp * np.sin(2 * np.pi * 1000.0 * t)
        assert level_dbfs(y) == pytest.approx(20 * math.log10(amp / math.sqrt(2)), abs=0.01)
    square = np.where(np.sin(2 * np.pi * 100.0 * t) >= 0, 1.0, -1.0)
    assert level_dbfs(square) == pytest.approx(0.0, abs=1e-9)
    assert level_dbfs(np.zeros(100)) == -120.0
    assert level_dbfs(np.zeros(0)) == -120.0


def test_status_line_voice_and_engine():
    frame = {"time_s": 1.0, "f0_hz": 220.0, "voiced": 1, "voicing_prob": 0.93}
    line = status_line(frame, level_db=-20.0, elapsed_s=75.5, engine=False)
    assert "220.0 Hz" in line and "A3 +0c" in line and "conf 0.93" in line
    assert "-20.0 dBFS" in line and "1:15.5" in line and "ALARM" not in line
    quiet = status_line({**frame, "voiced": 0, "f0_hz": None}, level_db=-80.0, elapsed_s=0,
                        engine=False)
    assert "--" in quiet and "A3" not in quiet
    eng = {"time_s": 1.0, "f0_hz": 75.0, "voiced": 1, "voicing_prob": 0.99, "rpm": 1500.0,
           "uneven_flag": 1}
    line = status_line(eng, level_db=-10.0, elapsed_s=3, engine=True,
                       active_alarms=["uneven_firing"])
    assert "1500 rpm" in line and "firing   75.0 Hz" in line and "UNEVEN" in line
    assert line.endswith("ALARM uneven_firing")
    assert "even " in status_line({**eng, "uneven_flag": 0}, level_db=-10.0, elapsed_s=3,
                                  engine=True)
    assert status_line(None, level_db=-math.inf, elapsed_s=0, engine=True).count("--") >= 2


class _Clock:
    def __init__(self):
        self.t = 0.0

    def __call__(self):
        return self.t


class _Text:
    def __init__(self, tty):
        self.parts = []
        self._tty = tty

    def write(self, s):
        self.parts.append(s)

    def flush(self):
        pass

    def isatty(self):
        return self._tty

    @property
    def text(self):
        return "".join(self.parts)


def test_display_plain_output_is_one_line_per_second():
    clock, out = _Clock(), _Text(tty=False)
    d = StatusDisplay(out, clock=clock)
    for i in range(100):          # 10 s of updates, 10 a second
        clock.t = i * 0.1
        d.show(f"status {i}")
    lines = out.text.splitlines()
    assert "\r" not in out.text
    assert len(lines) == 10
    assert lines[0] == "status 0" and lines[1] == "status 10"


def test_display_terminal_redraws_in_place_and_clears_for_messages():
    clock, out, err = _Clock(), _Text(tty=True), _Text(tty=True)
    d = StatusDisplay(out, clock=clock)
    for i in range(10):           # 1 s of updates, 20 a second: drawn at 10 Hz
        clock.t = i * 0.05
        d.show(f"status {i}")
    assert out.text.count("\r") == 5 and "\n" not in out.text
    d.message("harmtrack: alarm x", err)
    assert out.text.endswith("\r\033[K") and err.text == "harmtrack: alarm x\n"
    clock.t += 0.01
    d.show("after")               # redrawn at once after a message
    assert out.text.endswith("\rafter\033[K")
    quiet = _Text(tty=True)
    StatusDisplay(quiet, enabled=False, clock=clock).show("x", force=True)
    assert quiet.text == ""


# --- alarms ---------------------------------------------------------------


def _engine_frames(rpm, *, flags=None, voiced=None, t0=0.0):
    n = len(rpm)
    flags = np.zeros(n, bool) if flags is None else flags
    voiced = np.isfinite(rpm) if voiced is None else voiced
    return [(t0 + i * HOP, bool(voiced[i]), float(rpm[i]), bool(flags[i])) for i in range(n)]


def _run_alarms(alarms, frames, level_db=0.0):
    events = []
    for t, v, r, fl in frames:
        lv = level_db(t) if callable(level_db) else level_db
        events += alarms.update(t, voiced=v, rpm=r, uneven_flag=fl, level_db=lv)
    return events


def test_rpm_band_alarm_raised_after_hold_and_cleared():
    hold = 0.5
    rpm = np.concatenate([np.full(100, 1000.0), np.full(200, 3500.0), np.full(100, 1000.0)])
    out_at, back_at = 100 * HOP, 300 * HOP          # first frame outside, first back inside
    alarms = Alarms(check_alarm_settings(engine=True, rpm_above=3000, rpm_below=500,
                                         hold_s=hold), engine=True)
    events = _run_alarms(alarms, _engine_frames(rpm))
    assert [(e.name, e.state) for e in events] == [("rpm_above", "raised"),
                                                   ("rpm_above", "cleared")]
    assert events[0].time_s == pytest.approx(out_at + hold)
    assert events[0].since_s == pytest.approx(out_at)
    assert events[1].time_s == pytest.approx(back_at + hold)
    assert "3500 rpm above 3000 rpm" in events[0].message
    assert alarms.active == [] and alarms.raised_count == 1
    rec = events[0].record()
    assert rec["event"] == "alarm" and rec["alarm"] == "rpm_above" and rec["state"] == "raised"


def test_rpm_glitch_shorter_than_hold_raises_nothing():
    rpm = np.full(300, 1000.0)
    rpm[100:140] = 400.0                            # 0.4 s below the band, hold 0.5 s
    alarms = Alarms(check_alarm_settings(engine=True, rpm_below=500, hold_s=0.5), engine=True)
    assert _run_alarms(alarms, _engine_frames(rpm)) == []
    rpm[100:160] = 400.0                            # 0.6 s: raised
    alarms = Alarms(check_alarm_settings(engine=True, rpm_below=500, hold_s=0.5), engine=True)
    events = _run_alarms(alarms, _engine_frames(rpm))
    assert [e.state for e in events] == ["raised", "cleared"]
    assert alarms.active == []


def test_frames_without_engine_leave_the_speed_alarm_as_it_was():
    rpm = np.full(400, 1000.0)
    rpm[100:400] = 4000.0
    rpm[150:300] = np.nan                           # engine not heard
    alarms = Alarms(check_alarm_settings(engine=True, rpm_above=3000, hold_s=0.3), engine=True)
    events = _run_alarms(alarms, _engine_frames(rpm))
    # out of band from 1.00 s; frames 1.50-2.99 s carry no speed; the first frame
    # with a speed again (3.00 s) is more than the hold past the start: raised there.
    assert len(events) == 1 and events[0].state == "raised"
    assert events[0].time_s == pytest.approx(1.0 + 0.3)


def test_frames_quieter_than_the_floor_are_no_evidence():
    rpm = np.full(300, 4000.0)                      # out of band throughout ...
    quiet_until = 2.0                               # ... but silent for the first 2 s
    alarms = Alarms(check_alarm_settings(engine=True, rpm_above=3000, uneven_s=0.5,
                                         min_level_db=-60, hold_s=0.3), engine=True)
    events = _run_alarms(alarms, _engine_frames(rpm, flags=np.ones(300, bool)),
                         level_db=lambda t: -95.0 if t < quiet_until else -20.0)
    assert sorted((e.name, e.time_s) for e in events) == [
        ("rpm_above", pytest.approx(quiet_until + 0.3)),
        ("uneven_firing", pytest.approx(quiet_until + 0.5))]


def test_uneven_firing_alarm_after_n_seconds():
    n_s = 1.5
    flags = np.zeros(500, bool)
    flags[100:300] = True                           # 2 s flagged
    flags[350:400] = True                           # 0.5 s flagged: too short
    alarms = Alarms(check_alarm_settings(engine=True, uneven_s=n_s, hold_s=0.2), engine=True)
    events = _run_alarms(alarms, _engine_frames(np.full(500, 2000.0), flags=flags))
    assert [(e.name, e.state) for e in events] == [("uneven_firing", "raised"),
                                                   ("uneven_firing", "cleared")]
    assert events[0].time_s == pytest.approx(1.0 + n_s)
    assert events[1].time_s == pytest.approx(3.0 + 0.2)


def test_signal_lost_by_voicing_and_by_level():
    n_s = 1.0
    voiced = np.ones(600, bool)
    voiced[100:300] = False                         # 2 s without a voiced frame
    frames = [(i * HOP, bool(voiced[i]), math.nan, False) for i in range(600)]
    alarms = Alarms(check_alarm_settings(engine=False, lost_s=n_s, hold_s=0.25), engine=False)
    events = _run_alarms(alarms, frames, level_db=-20.0)
    assert [(e.name, e.state) for e in events] == [("signal_lost", "raised"),
                                                   ("signal_lost", "cleared")]
    assert events[0].time_s == pytest.approx(1.0 + n_s)
    assert events[1].time_s == pytest.approx(3.0 + 0.25)
    # voiced throughout, but the level falls under the threshold from 4 s on
    frames = [(i * HOP, True, math.nan, False) for i in range(700)]
    alarms = Alarms(check_alarm_settings(engine=False, lost_s=n_s, min_level_db=-50,
                                         hold_s=0.25), engine=False)
    events = _run_alarms(alarms, frames, level_db=lambda t: -70.0 if t >= 4.0 else -30.0)
    assert len(events) == 1 and events[0].state == "raised"
    assert events[0].time_s == pytest.approx(4.0 + n_s)
    assert "-50 dBFS" in events[0].message


@pytest.mark.parametrize("kwargs,words", [
    (dict(engine=False, rpm_above=3000), "--alarm-rpm-above needs the engine preset"),
    (dict(engine=False, uneven_s=2), "--alarm-uneven needs the engine preset"),
    (dict(engine=True, rpm_below=3000, rpm_above=2000), "must be lower than"),
    (dict(engine=True, rpm_below=-1), "--alarm-rpm-below -1"),
    (dict(engine=True, rpm_above=math.nan), "--alarm-rpm-above nan"),
    (dict(engine=False, lost_s=-1), "--alarm-lost -1"),
    (dict(engine=False, lost_s=math.inf), "--alarm-lost inf"),
    (dict(engine=False, min_level_db=6), "--alarm-min-level 6"),
    (dict(engine=True, lost_s=1, min_level_db=-math.inf), "--alarm-min-level -inf"),
    (dict(engine=False, hold_s=1e5), "--alarm-hold 100000"),
])
def test_bad_alarm_settings(kwargs, words):
    with pytest.raises(HarmtrackError, match=None) as info:
        check_alarm_settings(**kwargs)
    msg = str(info.value)
    assert words in msg and "\n" not in msg


def test_no_alarm_settings_means_no_alarms():
    assert not check_alarm_settings(engine=True).any
    assert AlarmSettings(lost_s=1.0).any


# --- JSON lines and the saved audio -----------------------------------------


def test_frame_records_use_the_label_columns():
    y = pcm16(glide_voice(seconds=1.0))
    tr = harmtrack.track(np.concatenate([np.zeros(SR // 4), y]), SR)
    records = live_output.frame_records(tr)
    table = track_table(tr)
    assert len(records) == len(tr)
    assert list(records[0]) == table_columns(table)
    back = [json.loads(line) for line in live_output.encode_lines(records).decode().splitlines()]
    for name in table_columns(table):
        col = np.array([math.nan if r[name] is None else r[name] for r in back], dtype=float)
        assert np.array_equal(col, np.asarray(table[name], dtype=float), equal_nan=True), name
    assert {r["voiced"] for r in back} == {0, 1}
    assert any(r["f0_hz"] is None for r in back) and any(r["f0_hz"] for r in back)


def test_frame_records_of_an_engine_track():
    n = 3
    tr = harmtrack.Track(
        times=np.arange(n) * HOP, f0_hz=np.array([50.0, np.nan, 52.0]),
        voiced=np.array([True, False, True]), voicing_prob=np.array([0.9, 0.1, 0.8]),
        harmonic_amplitudes=np.array([[0.1, 0.0], [np.nan, np.nan], [0.2, 0.01]]),
        model_order=np.array([2, 0, 2]), hnr_db=np.array([20.0, np.nan, 18.0]), sr=SR,
        frame_s=0.05, settings={"hop_s": HOP}, rpm=np.array([1500.0, np.nan, 1560.0]),
        order_numbers=np.array([0.5, 1.0]),
        order_amplitudes=np.array([[0.0, 0.3], [np.nan, np.nan], [0.01, 0.2]]),
        uneven_db=np.array([-20.0, np.nan, -5.0]), uneven_flag=np.array([False, False, True]))
    recs = live_output.frame_records(tr)
    assert list(recs[0]) == table_columns(track_table(tr))
    assert list(recs[0])[-8:] == ["amp_h2", "rpm", "uneven_db", "uneven_flag", "order_0.5",
                                  "order_1", "order_0.5_db", "order_1_db"]
    assert recs[0]["order_0.5_db"] is None          # -inf dB (zero amplitude) is null
    assert recs[2]["order_0.5_db"] == pytest.approx(-40.0)
    assert recs[2]["uneven_flag"] == 1 and recs[1]["rpm"] is None
    live_output.encode_lines(recs)                  # strict JSON: no NaN or Infinity


def test_jsonl_appends_whole_lines(tmp_path):
    path = tmp_path / "log.jsonl"
    path.write_bytes(b'{"event":"start"}\n{"time_s":0.5,"f0')   # an earlier writer cut off
    log = live_output.JsonLinesLog(os.fspath(path))
    log.write([{"time_s": 1.0, "x": 1}, {"event": "alarm", "time_s": 1.0}])
    log.write([])
    log.write([{"time_s": 1.01, "x": None}])
    log.close()
    lines = path.read_text().splitlines()
    assert lines[1] == '{"time_s":0.5,"f0'
    assert [json.loads(x) for x in lines[2:]] == [{"time_s": 1.0, "x": 1},
                                                 {"event": "alarm", "time_s": 1.0},
                                                 {"time_s": 1.01, "x": None}]
    assert path.read_bytes().endswith(b"\n") and log.lines == 3


def test_jsonl_failed_write_leaves_only_whole_lines(tmp_path, monkeypatch):
    path = tmp_path / "log.jsonl"
    log = live_output.JsonLinesLog(os.fspath(path))
    log.write([{"time_s": 0.0}])
    size = path.stat().st_size
    real_write = os.write

    def half_then_full(fd, data):
        real_write(fd, bytes(data[: len(data) // 2]))
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(os, "write", half_then_full)
    with pytest.raises(HarmtrackError, match="log.jsonl: cannot write: No space left"):
        log.write([{"time_s": 0.01, "f0_hz": 100.0}, {"time_s": 0.02, "f0_hz": 101.0}])
    monkeypatch.setattr(os, "write", real_write)
    assert path.stat().st_size == size
    log.close()
    assert [json.loads(x) for x in path.read_text().splitlines()] == [{"time_s": 0.0}]


def test_wav_recorder_finalises_or_leaves_nothing(tmp_path):
    rng = np.random.default_rng(0)
    blocks = [rng.uniform(-1, 1, n).astype(np.float32) for n in (0, 1, 137, 1000, 3)]
    dest = tmp_path / "cap.wav"
    rec = live_output.WavRecorder(dest, SR)
    for b in blocks:
        rec.write(b)
    assert not dest.exists() and rec.tmp.exists()
    assert rec.close() == dest
    y, sr = sf.read(dest, dtype="float32")
    assert sr == SR and np.array_equal(y, np.concatenate(blocks))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cap.wav"]
    rec = live_output.WavRecorder(tmp_path / "gone.wav", SR)
    rec.write(blocks[2])
    rec.discard()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cap.wav"]


# --- devices and rates ------------------------------------------------------


DEVICES = [
    InputDevice(0, "HDA Intel PCH: ALC257 Analog (hw:0,0)", "ALSA", 2, 44100.0),
    InputDevice(3, "USB Audio Device: Mic (hw:2,0)", "ALSA", 1, 48000.0),
    InputDevice(5, "pulse", "ALSA", 32, 44100.0),
    InputDevice(6, "default", "ALSA", 32, 44100.0, is_default=True),
    InputDevice(9, "pulse monitor", "ALSA", 2, 44100.0),
]


def test_choose_device_by_default_index_and_name():
    assert live_capture.choose_device(DEVICES, None).index == 6
    assert live_capture.choose_device(DEVICES, "3").index == 3
    assert live_capture.choose_device(DEVICES, " usb ").index == 3     # part, any case
    assert live_capture.choose_device(DEVICES, "PULSE").index == 5     # exact name wins
    assert live_capture.choose_device(DEVICES, "monitor").index == 9


@pytest.mark.parametrize("spec,words", [
    ("42", "--device 42: no input device with index 42"),
    ("-1", "--device -1: no input device with index -1"),
    ("nosuch", "--device 'nosuch': no input device matching it"),
    ("hw:", "matches several input devices"),
])
def test_choose_device_errors(spec, words):
    with pytest.raises(HarmtrackError) as info:
        live_capture.choose_device(DEVICES, spec)
    assert words in str(info.value) and "\n" not in str(info.value)
    assert "5 'pulse'" in str(info.value) or "several" in str(info.value)


def test_no_devices_and_no_default():
    for spec in (None, "pulse", "0"):
        with pytest.raises(HarmtrackError, match="no audio input device found"):
            live_capture.choose_device([], spec)
    with pytest.raises(HarmtrackError, match="no default audio input device"):
        live_capture.choose_device(DEVICES[:2], None)
    with pytest.raises(HarmtrackError, match="no audio input device found"):
        live_capture.format_devices([])


def test_device_table_marks_the_default():
    text = live_capture.format_devices(DEVICES)
    lines = text.splitlines()
    assert lines[0].split() == ["index", "name", "host", "API", "inputs", "default", "rate"]
    marked = [x for x in lines[1:-1] if x.startswith("*")]
    assert len(marked) == 1 and " default " in marked[0] and "44100 Hz" in marked[0]
    assert lines[-1] == "* default input"
    assert len(lines) == len(DEVICES) + 2
    assert "no default input" in live_capture.format_devices(DEVICES[:2])


def test_choose_rate():
    dev = DEVICES[1]                                 # default 48 kHz
    assert live_capture.choose_rate(None, 16000, dev, lambda r: True) == 16000
    assert live_capture.choose_rate(None, 16000, dev, lambda r: r == 48000) == 48000
    assert live_capture.choose_rate(8000, 16000, dev, lambda r: False) == 8000


class _RaisingFinder:
    """An import hook that makes ``import sounddevice`` fail as it does without PortAudio."""

    def __init__(self, exc):
        self.exc = exc

    def find_spec(self, name, path=None, target=None):
        if name == "sounddevice":
            raise self.exc
        return None


@pytest.mark.parametrize("exc,words", [
    (OSError("PortAudio library not found"), "apt install libportaudio2"),
    (ImportError("No module named 'sounddevice'"), "pip install sounddevice"),
])
def test_missing_portaudio_is_one_line(monkeypatch, capsys, exc, words):
    monkeypatch.delitem(sys.modules, "sounddevice", raising=False)
    monkeypatch.setattr(sys, "meta_path", [_RaisingFinder(exc), *sys.meta_path])
    with pytest.raises(HarmtrackError) as info:
        live_capture.load_sounddevice()
    assert words in str(info.value)
    for argv in (["devices"], ["live", "--duration", "1"]):
        code = cli.main(argv)
        err = capsys.readouterr().err
        assert code == 2
        assert err.count("\n") == 1 and err.startswith("harmtrack: error: audio capture "
                                                       "unavailable") and words in err


def test_help_stays_light():
    code = ("import sys; from harmtrack import cli; cli.build_parser(); "
            "print(sorted(m for m in ('sounddevice', 'harmtrack.stream', 'numba', "
            "'harmtrack.live_capture', 'soundfile') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


# ---------------------------------------------------------------------------
# the loop and the command against a stand-in for sounddevice
# ---------------------------------------------------------------------------


class FakePortAudioError(Exception):
    pass


class _Status:
    def __init__(self, overflow):
        self.input_overflow = overflow


class FakeStream:
    """Plays blocks of a signal through the callback from a thread, like PortAudio."""

    def __init__(self, owner, *, samplerate, device, channels, dtype, latency, callback,
                 finished_callback):
        if samplerate not in owner.rates:
            raise FakePortAudioError("Error opening InputStream: Invalid sample rate", -9997)
        self.owner, self.callback, self.finished = owner, callback, finished_callback
        self.latency = 0.02
        self.active = False
        self._halt = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def start(self):
        self.active = True
        self._thread.start()

    def _run(self):
        o = self.owner
        y = o.signal.astype(np.float32)
        pos = k = 0
        while pos < y.size and not self._halt.is_set():
            n = int(o.sizes[k % len(o.sizes)])
            block = y[pos:pos + n]
            self.callback(block.reshape(-1, 1), block.size, None,
                          _Status(o.overflow_every and k % o.overflow_every == 0))
            pos, k = pos + n, k + 1
            if o.pace_s:
                time.sleep(o.pace_s)
        if self._halt.is_set():
            return
        if o.at_end == "finish":          # the device went away: PortAudio ends the stream
            self.active = False
            self.finished()
        elif o.at_end == "stall":         # the device stops delivering, the stream stays open
            pass
        else:                             # keeps delivering silence until stopped
            while not self._halt.is_set():
                z = np.zeros((160, 1), np.float32)
                self.callback(z, 160, None, _Status(False))
                time.sleep(0.002)

    def stop(self):
        self._halt.set()
        if self._thread.is_alive():
            self._thread.join(5)
        self.active = False

    def abort(self):  # sounddevice's abort: stop without draining
        self.stop()

    def close(self):
        self.stop()


class FakeSoundDevice:
    """The parts of ``sounddevice`` that harmtrack uses, over one generated signal."""

    PortAudioError = FakePortAudioError

    def __init__(self, signal, *, rates=(SR,), sizes=(137, 139), at_end="silence",
                 overflow_every=0, pace_s=0.0, devices=None):
        self.signal = np.asarray(signal)
        self.rates = set(rates)
        self.sizes = sizes
        self.at_end = at_end
        self.overflow_every = overflow_every
        self.pace_s = pace_s
        self.devices = devices if devices is not None else [
            {"name": "fake mic", "index": 0, "hostapi": 0, "max_input_channels": 1,
             "max_output_channels": 0, "default_samplerate": 48000.0},
            {"name": "fake speaker", "index": 1, "hostapi": 0, "max_input_channels": 0,
             "max_output_channels": 2, "default_samplerate": 48000.0},
        ]
        self.streams = []

    def query_devices(self, device=None, kind=None):
        if kind == "input":
            if not any(d["max_input_channels"] for d in self.devices):
                raise FakePortAudioError("Error querying device -1")
            return next(d for d in self.devices if d["max_input_channels"])
        return list(self.devices)

    def query_hostapis(self):
        return ({"name": "FakeAPI"},)

    def check_input_settings(self, device=None, channels=None, dtype=None, samplerate=None):
        if samplerate not in self.rates:
            raise FakePortAudioError("Invalid sample rate", -9997)

    def InputStream(self, **kw):  # noqa: N802 - the sounddevice name
        s = FakeStream(self, **kw)
        self.streams.append(s)
        return s


def _capture(fake):
    dev = live_capture.input_devices(fake)[0]
    return Capture(fake, dev, SR)


def test_capture_delivers_every_block_in_order():
    y = pcm16(glide_voice(seconds=0.5))
    fake = FakeSoundDevice(y, at_end="stall")
    cap = _capture(fake)
    cap.start()
    got = []
    with pytest.raises(DeviceLost, match="no audio from the device"):
        cap.stall_s = 0.3
        while True:
            b = cap.read(0.05)
            if b is not None:
                got.append(b)
    cap.stop()
    assert np.array_equal(np.concatenate(got), y.astype(np.float32))
    assert cap.overflows == 0


def test_capture_reports_a_stream_ended_by_the_device():
    fake = FakeSoundDevice(np.zeros(4000), at_end="finish")
    cap = _capture(fake)
    cap.start()
    n = 0
    with pytest.raises(DeviceLost, match="the device ended the stream"):
        while True:
            b = cap.read(0.05)
            n += 0 if b is None else b.size
    assert n == 4000                      # every block queued before the end was read first
    cap.stop()


def test_capture_overflow_storm_counts_as_lost():
    fake = FakeSoundDevice(np.zeros(20000), overflow_every=1)
    cap = _capture(fake)
    cap.start()
    with pytest.raises(DeviceLost, match=f"{live_capture.OVERFLOW_STORM} input overflows"):
        while True:
            cap.read(0.05)
    cap.stop()
    assert cap.overflows == live_capture.OVERFLOW_STORM


def test_capture_refused_rate_is_one_line():
    fake = FakeSoundDevice(np.zeros(10), rates=(48000,))
    dev = live_capture.input_devices(fake)[0]
    with pytest.raises(HarmtrackError) as info:
        live_capture.check_rate(fake, dev, 1)
    assert str(info.value) == "device 'fake mic': cannot capture at 1 Hz (Invalid sample rate)"
    with pytest.raises(HarmtrackError, match="cannot start capture .Error opening InputStream"):
        Capture(fake, dev, SR).start()


class ListSource:
    """A capture source over a list of blocks, read a few at a time like a queue.

    ``lose_after``: the device is lost once that many blocks were given;
    ``keep_on_stop``: blocks still queued when the session stops the source;
    ``stop_after``: sets ``stop_event`` when that many blocks were given.
    """

    def __init__(self, blocks, *, lose_after=None, keep_on_stop=2, stop_event=None,
                 stop_after=None, overflow_at=(), burst=4):
        self.blocks = list(blocks)
        self.lose_after = lose_after
        self.keep_on_stop = keep_on_stop
        self.stop_event, self.stop_after = stop_event, stop_after
        self.overflow_at = set(overflow_at)
        self.burst = burst
        self._since_wait = 0
        self.given = 0
        self.given_at_stop = None
        self.overflows = 0
        self.stopped = False

    def _lost(self):
        return self.lose_after is not None and self.given >= self.lose_after and not self.stopped

    def _next(self):
        if not self.blocks:
            return None
        if self.given in self.overflow_at:
            self.overflows += 1
        self.given += 1
        if self.stop_event is not None and self.given == self.stop_after:
            self.stop_event.set()
        return self.blocks.pop(0)

    def read(self, timeout):
        self._since_wait = 0
        if self._lost():
            raise DeviceLost("test: device unplugged")
        if not self.blocks:
            raise DeviceLost("test: out of blocks")
        return self._next()

    def read_nowait(self):
        if self._lost() or (not self.stopped and self._since_wait >= self.burst):
            return None
        self._since_wait += 1
        return self._next()

    def stop(self):
        self.stopped = True
        self.given_at_stop = self.given
        self.blocks = self.blocks[:self.keep_on_stop]


def _blocks(y, seed=0):
    rng = np.random.default_rng(seed)
    out, i = [], 0
    while i < y.size:
        n = int(rng.integers(1, 2500))
        out.append(y[i:i + n].astype(np.float32))
        i += n
    return out


def _sink(tmp_path, *, engine=False, alarms=None, jsonl="log.jsonl", wav="cap.wav"):
    log = live_output.JsonLinesLog(os.fspath(tmp_path / jsonl)) if jsonl else None
    rec = live_output.WavRecorder(tmp_path / wav, SR) if wav else None
    err = _Text(tty=False)
    sink = LiveSink(sr=SR, engine=engine, log=log, recorder=rec, alarms=alarms, display=None,
                    alarm_stream=err)
    return sink, log, rec, err


@pytest.fixture(scope="module")
def voice_signal():
    y = np.concatenate([np.zeros(SR // 2), glide_voice(), np.zeros(SR)])
    return pcm16(y + 1e-4 * np.random.default_rng(3).standard_normal(y.size))


def test_session_tracks_exactly_what_it_saved(tmp_path, voice_signal):
    from harmtrack.stream import StreamTracker

    y = voice_signal
    duration = 4.0                                  # shorter than the signal: cut exactly
    src = ListSource(_blocks(y))
    sink, log, rec, _ = _sink(tmp_path)
    end = run_session(src, StreamTracker(SR), sink, duration_s=duration)
    log.close()
    rec.close()
    n = int(duration * SR)
    assert end.reason == "duration" and end.samples == n and src.stopped
    cap, sr = sf.read(tmp_path / "cap.wav")
    assert sr == SR and np.array_equal(cap, y[:n].astype(np.float32))
    frames, events = read_jsonl(tmp_path / "log.jsonl")
    assert events == []
    assert frames == streamed(cap)                 # the very frames, in order, none lost
    ok, compared = agreement(frames, harmtrack.track(cap, SR))
    assert compared == len(frames) == len(harmtrack.track(cap, SR))
    assert ok >= 0.99
    t, v, f = frame_arrays(frames)
    assert np.all(np.diff(t) > 0) and t[-1] == pytest.approx(duration, abs=HOP)


def test_session_device_lost_keeps_and_flushes_what_came(tmp_path, voice_signal):
    from harmtrack.stream import StreamTracker

    blocks = _blocks(voice_signal, seed=1)
    src = ListSource(blocks, lose_after=len(blocks) // 2, keep_on_stop=3)
    sink, log, rec, _ = _sink(tmp_path)
    end = run_session(src, StreamTracker(SR), sink)
    log.close()
    rec.close()
    delivered = sum(b.size for b in blocks[:len(blocks) // 2 + 3])
    assert end.reason == "device lost" and end.detail == "test: device unplugged"
    assert end.samples == delivered
    cap, _ = sf.read(tmp_path / "cap.wav")
    assert cap.size == delivered
    frames, _ = read_jsonl(tmp_path / "log.jsonl")
    assert frames == streamed(cap)
    assert frames[-1]["time_s"] == pytest.approx(delivered / SR, abs=HOP)


def test_session_stops_cleanly_when_asked(tmp_path, voice_signal):
    from harmtrack.stream import StreamTracker

    stop = threading.Event()
    blocks = _blocks(voice_signal, seed=2)
    src = ListSource(blocks, stop_event=stop, stop_after=len(blocks) // 3)
    sink, log, rec, _ = _sink(tmp_path)
    end = run_session(src, StreamTracker(SR), sink, stop=stop)
    log.close()
    rec.close()
    assert end.reason == "interrupted"
    assert len(blocks) // 3 <= src.given_at_stop < len(blocks) // 3 + src.burst
    cap, _ = sf.read(tmp_path / "cap.wav")
    # everything given before the stop, and what was still queued then, is tracked
    assert cap.size == end.samples == sum(b.size for b in blocks[:src.given_at_stop + 2])
    frames, _ = read_jsonl(tmp_path / "log.jsonl")
    assert frames == streamed(cap)


def test_session_alarm_events_and_overflow_warning(tmp_path, voice_signal):
    from harmtrack.stream import StreamTracker

    # voice, then 2.5 s of near silence (-80 dBFS noise)
    quiet = 1e-4 * np.random.default_rng(4).standard_normal(int(2.5 * SR))
    y = np.concatenate([pcm16(glide_voice()), quiet])
    alarms = Alarms(check_alarm_settings(engine=False, lost_s=1.0, hold_s=0.2), engine=False)
    src = ListSource(_blocks(y, seed=3), overflow_at=(5,))
    sink, log, rec, err = _sink(tmp_path, alarms=alarms, wav=None)
    end = run_session(src, StreamTracker(SR), sink)
    log.close()
    assert end.reason == "device lost" and end.detail == "test: out of blocks"
    frames, events = read_jsonl(tmp_path / "log.jsonl")
    t, v, f = frame_arrays(frames)
    # the alarm comes 1 s after the last voiced frame (or after the last frame loud
    # enough), at a frame time, and its line follows that frame in the log
    last_voiced = t[v][-1]
    (ev,) = events
    assert ev["alarm"] == "signal_lost" and ev["state"] == "raised"
    assert last_voiced < ev["time_s"] <= last_voiced + 1.0 + HOP + 1e-9
    assert ev["time_s"] >= 3.0 + 1.0 - 0.3          # the voice lasts 3 s
    lines = (tmp_path / "log.jsonl").read_text().splitlines()
    pos = next(i for i, x in enumerate(lines) if '"event"' in x)
    assert json.loads(lines[pos - 1])["time_s"] == ev["time_s"]
    text = err.text.splitlines()
    assert text[0].startswith("harmtrack: warning: input overflow, samples lost (1 so far")
    assert text[1] == "harmtrack: alarm " + ev["message"]
    assert sink.summary()["alarms_active"] == ["signal_lost"]


def test_session_ends_when_the_log_reader_goes_away(voice_signal):
    from harmtrack.stream import StreamTracker

    class ClosedPipe:
        def __init__(self):
            self.calls = 0

        def write(self, records):
            self.calls += 1
            if self.calls == 3:
                raise BrokenPipeError(32, "Broken pipe")

    log = ClosedPipe()
    sink = LiveSink(sr=SR, engine=False, log=log, alarm_stream=_Text(tty=False))
    src = ListSource(_blocks(voice_signal, seed=5), burst=0)
    end = run_session(src, StreamTracker(SR), sink)
    assert end.reason == "output closed" and src.stopped
    assert 0 < end.samples < voice_signal.size


def _run_cli(argv, capsys):
    code = cli.main([os.fspath(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def fake_sd(monkeypatch):
    """Install a FakeSoundDevice as what ``load_sounddevice`` returns."""
    holder = {}

    def install(fake):
        holder["fake"] = fake
        monkeypatch.setattr(live_capture, "load_sounddevice", lambda: fake)
        return fake

    return install


def test_live_command_end_to_end_with_stand_in_device(tmp_path, capsys, fake_sd, voice_signal):
    fake_sd(FakeSoundDevice(voice_signal, rates=(SR, 48000)))
    log, wav = tmp_path / "live.jsonl", tmp_path / "cap.wav"
    code, out, err = _run_cli(["live", "--duration", "3.5", "--jsonl", log, "--save-audio", wav],
                              capsys)
    assert code == 0, err
    assert err == ""
    lines = out.splitlines()
    assert lines[0].startswith("live: 'fake mic' (FakeAPI) at 16000 Hz, mono, voice preset; "
                               "algorithmic delay ")
    assert lines[-1].startswith("captured 3.50 s from 'fake mic' at 16000 Hz: 350 frames")
    assert "ended: duration" in lines[-1] and f"audio in {wav}" in lines[-1]
    assert "\r" not in out                       # not a terminal: plain status lines
    frames, events = read_jsonl(log)
    assert [e["event"] for e in events] == ["start", "stop"]
    start, stop = events
    from harmtrack.stream import StreamTracker
    assert start["sample_rate"] == SR and start["latency_s"] == StreamTracker(SR).latency_s
    assert stop["reason"] == "duration" and stop["samples"] == int(3.5 * SR)
    assert stop["frames"] == len(frames)
    cap, _ = sf.read(wav)
    assert np.array_equal(cap, voice_signal[:cap.size].astype(np.float32))
    assert frames == streamed(cap)
    # appending a second session to the same log keeps both, each whole
    code, out, err = _run_cli(["live", "--duration", "0.5", "--jsonl", log, "-q"], capsys)
    assert code == 0
    frames2, events2 = read_jsonl(log)
    assert [e["event"] for e in events2] == ["start", "stop", "start", "stop"]
    assert len(frames2) == len(frames) + 50


def test_live_command_device_lost_exit_3(tmp_path, capsys, fake_sd, voice_signal):
    fake_sd(FakeSoundDevice(voice_signal[:2 * SR], at_end="finish"))
    log, wav = tmp_path / "live.jsonl", tmp_path / "cap.wav"
    code, out, err = _run_cli(["live", "--jsonl", log, "--save-audio", wav, "-q"], capsys)
    assert code == live.EXIT_DEVICE_LOST
    assert err.count("\n") == 1
    assert err.startswith("harmtrack: error: device 'fake mic': capture stopped: the device "
                          "ended the stream; the 2.00 s captured before were tracked and kept")
    cap, _ = sf.read(wav)
    assert cap.size == 2 * SR
    frames, events = read_jsonl(log)
    assert events[-1]["event"] == "stop" and events[-1]["reason"] == "device lost"
    assert frames == streamed(cap)
    assert "ended: device lost" in out.splitlines()[-1]


def test_live_command_jsonl_to_stdout(capsys, fake_sd, voice_signal):
    fake_sd(FakeSoundDevice(voice_signal))
    code, out, err = _run_cli(["live", "--duration", "1", "--jsonl", "-"], capsys)
    assert code == 0
    records = [json.loads(x) for x in out.splitlines()]       # stdout holds JSON only
    assert records[0]["event"] == "start" and records[-1]["event"] == "stop"
    assert len(records) == 100 + 2
    assert err.splitlines()[0].startswith("live: ") and "captured 1.00 s" in err


@pytest.mark.parametrize("argv,words", [
    (["--alarm-rpm-above", "3000"], "--alarm-rpm-above needs the engine preset"),
    (["--preset", "engine", "--cylinders", "4", "--alarm-rpm-below", "3000",
      "--alarm-rpm-above", "2000"], "must be lower than"),
    (["--alarm-lost", "-2"], "--alarm-lost -2"),
    (["--alarm-min-level", "3"], "--alarm-min-level 3.0: give dBFS from -150 to 0"),
    (["--rate", "16000.5"], "--rate 16000.5: give a whole number"),
    (["--duration", "0"], "--duration 0: give seconds above 0"),
    (["--save-audio", "x.mp3"], "--save-audio x.mp3: give a file name ending in .wav"),
    (["--jsonl", "/nonexistent-dir/x.jsonl"], "/nonexistent-dir/x.jsonl: cannot write"),
    (["--preset", "engine"], "cylinders"),
    (["--fmin", "-3"], "fmin"),
])
def test_live_bad_settings_fail_before_touching_devices(capsys, monkeypatch, argv, words):
    def no_device():
        raise AssertionError("the device was touched")

    monkeypatch.setattr(live_capture, "load_sounddevice", no_device)
    code, out, err = _run_cli(["live", *argv], capsys)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith("harmtrack: error: ") and words in err


def test_live_device_errors_with_stand_in(tmp_path, capsys, fake_sd):
    fake_sd(FakeSoundDevice(np.zeros(10), rates=(48000,)))
    for argv, words in ((["--device", "nosuch"], "--device 'nosuch': no input device matching"),
                        (["--device", "7"], "--device 7: no input device with index 7"),
                        (["--rate", "1"], "cannot capture at 1 Hz (Invalid sample rate)")):
        wav = tmp_path / "never.wav"
        code, out, err = _run_cli(["live", *argv, "--save-audio", wav], capsys)
        assert code == 2 and err.count("\n") == 1 and words in err
        assert not wav.exists() and list(tmp_path.iterdir()) == []
    fake_sd(FakeSoundDevice(np.zeros(10), devices=[]))
    for cmd in (["devices"], ["live"]):
        code, out, err = _run_cli(cmd, capsys)
        assert code == 2 and err == ("harmtrack: error: no audio input device found (no sound "
                                     "card, microphone or sound server that PortAudio can "
                                     "reach)\n")


def test_devices_command_with_stand_in(capsys, fake_sd):
    fake_sd(FakeSoundDevice(np.zeros(10)))
    code, out, err = _run_cli(["devices"], capsys)
    assert code == 0 and err == ""
    lines = out.splitlines()
    assert lines[1].startswith("*") and "fake mic" in lines[1] and "FakeAPI" in lines[1]
    assert "48000 Hz" in lines[1] and "speaker" not in out     # inputs only


def test_live_default_rate_prefers_the_analysis_rate(tmp_path, capsys, fake_sd, voice_signal):
    fake_sd(FakeSoundDevice(voice_signal, rates=(48000,)))
    fake = live_capture.load_sounddevice()
    code, out, err = _run_cli(["live", "--duration", "0.2", "-q"], capsys)
    assert code == 0 and "at 48000 Hz" in out.splitlines()[0]   # 16 kHz refused: device default
    fake.rates = {16000, 48000}
    code, out, err = _run_cli(["live", "--duration", "0.2", "-q"], capsys)
    assert code == 0 and "at 16000 Hz" in out.splitlines()[0]


# ---------------------------------------------------------------------------
# end to end through PulseAudio
# ---------------------------------------------------------------------------


def _no_device_env(base: Path) -> dict:
    """Environment for processes that must see only our private PulseAudio (or none)."""
    env = {k: v for k, v in os.environ.items()
           if not k.startswith("PULSE_") and k not in ("XDG_RUNTIME_DIR", "XDG_CONFIG_HOME")}
    run = base / "run"
    run.mkdir(mode=0o700, exist_ok=True)
    os.chmod(run, 0o700)
    (base / "config").mkdir(exist_ok=True)
    client = base / "client.conf"
    client.write_text("autospawn = no\n")
    env.update(XDG_RUNTIME_DIR=os.fspath(run), XDG_CONFIG_HOME=os.fspath(base / "config"),
               PULSE_CLIENTCONFIG=os.fspath(client), PYTHONUNBUFFERED="1")
    return env


class PulseDaemon:
    """A private PulseAudio daemon with a mono null sink ``vsink`` at 16 kHz."""

    def __init__(self):
        self.base = Path(tempfile.mkdtemp(prefix="ht-pa-"))
        self.env = _no_device_env(self.base)
        self.running = False

    def _run(self, *cmd, timeout=10):
        return subprocess.run(list(cmd), env=self.env, capture_output=True, text=True,
                              timeout=timeout)

    def start(self) -> str | None:
        """Start it; returns None, or why it could not be had."""
        missing = [p for p in ("pulseaudio", "pactl", "paplay") if shutil.which(p) is None]
        if missing:
            return f"PulseAudio tools missing: {', '.join(missing)} (apt install pulseaudio " \
                   "pulseaudio-utils)"
        log = self.base / "pulse.log"
        r = self._run("pulseaudio", "--daemonize=yes", "-n", "--exit-idle-time=-1",
                      f"--log-target=file:{log}",
                      "-L", "module-native-protocol-unix auth-anonymous=1",
                      "-L", f"module-null-sink sink_name=vsink rate={SR} channels=1 norewinds=1",
                      timeout=30)
        if r.returncode != 0:
            tail = log.read_text().strip().splitlines()[-1:] if log.exists() else []
            return f"PulseAudio daemon did not start: {(r.stderr.strip() or ' '.join(tail))[:200]}"
        self.running = True
        deadline = time.monotonic() + 15
        while self._run("pactl", "info").returncode != 0:
            if time.monotonic() > deadline:
                return "PulseAudio daemon started but does not answer pactl"
            time.sleep(0.1)
        for cmd in (("pactl", "set-default-sink", "vsink"),
                    ("pactl", "set-default-source", "vsink.monitor")):
            r = self._run(*cmd)
            if r.returncode != 0:
                return f"{' '.join(cmd)} failed: {r.stderr.strip()[:200]}"
        return None

    def kill(self):
        if self.running:
            self._run("pulseaudio", "--kill")
            deadline = time.monotonic() + 10
            while self._run("pactl", "info").returncode == 0 and time.monotonic() < deadline:
                time.sleep(0.1)
            self.running = False

    def close(self):
        self.kill()
        shutil.rmtree(self.base, ignore_errors=True)

    def play(self, wav, timeout=60):
        return self._run("paplay", "--device=vsink", os.fspath(wav), timeout=timeout)


def _harmtrack(env, *args, timeout=120):
    return subprocess.run([sys.executable, "-m", "harmtrack", *map(str, args)], env=env,
                          capture_output=True, text=True, timeout=timeout)


def _pulse_or_skip() -> PulseDaemon:
    probe = subprocess.run([sys.executable, "-c", "import sounddevice"], capture_output=True,
                           text=True)
    if probe.returncode != 0:
        lines = probe.stderr.strip().splitlines()
        pytest.skip(f"sounddevice cannot be imported: {lines[-1] if lines else '?'}")
    daemon = PulseDaemon()
    why = daemon.start()
    if why is not None:
        daemon.close()
        pytest.skip(why)
    r = _harmtrack(daemon.env, "devices")
    if r.returncode != 0 or not any(" pulse " in x + " " for x in r.stdout.splitlines()):
        daemon.close()
        pytest.skip("PortAudio does not see ALSA's 'pulse' device (apt install "
                    f"libasound2-plugins): {(r.stdout + r.stderr).strip()[:200]}")
    return daemon


@pytest.fixture(scope="module")
def pulse():
    """A private PulseAudio daemon for this module's device tests; stopped afterwards."""
    daemon = _pulse_or_skip()
    try:
        yield daemon
    finally:
        daemon.close()


class LiveProcess:
    """``harmtrack live`` as a subprocess, with its standard output read by a thread."""

    def __init__(self, env, *args):
        self.proc = subprocess.Popen([sys.executable, "-m", "harmtrack", "live",
                                      *map(str, args)], env=env, stdout=subprocess.PIPE,
                                     stderr=subprocess.PIPE, text=True)
        self.lines: queue.Queue = queue.Queue()
        self.out: list[str] = []
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    def _read(self):
        for line in self.proc.stdout:
            self.out.append(line)
            self.lines.put(line)

    def wait_started(self, timeout=180):
        """Wait for the line saying the capture runs."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            try:
                line = self.lines.get(timeout=0.5)
            except queue.Empty:
                if self.proc.poll() is not None:
                    break
                continue
            if line.startswith("live: "):
                return line
        self.proc.kill()
        raise AssertionError(f"live did not start: {''.join(self.out)} {self.proc.stderr.read()}")

    def finish(self, timeout=120):
        """Exit code, standard output and standard error once it ends."""
        try:
            code = self.proc.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            raise
        self._reader.join(10)
        return code, "".join(self.out), self.proc.stderr.read()


#: Seconds between the capture starting and the playback starting: the capture
#: must run before anything is played (a null sink's monitor keeps no past).
PLAY_AFTER_S = 0.5


def _aligned(captured, played):
    """Offset of ``played`` inside ``captured`` (by cross-correlation)."""
    from scipy.signal import correlate

    c = correlate(captured, played, mode="valid", method="fft")
    return int(np.argmax(c))


def test_device_list_shows_pulse(pulse):
    r = _harmtrack(pulse.env, "devices")
    assert r.returncode == 0 and r.stderr == ""
    rows = r.stdout.splitlines()
    assert rows[-1] == "* default input"
    assert sum(x.startswith("*") for x in rows[1:-1]) == 1
    assert any("pulse" in x and "ALSA" in x for x in rows)


def test_live_capture_matches_offline_tracking(pulse, tmp_path):
    y = pcm16(glide_voice(seconds=4.0))
    played = tmp_path / "voice.wav"
    synth.write_wav(played, y, SR)
    log, cap_wav = tmp_path / "live.jsonl", tmp_path / "cap.wav"
    duration = 7.0
    proc = LiveProcess(pulse.env, "--device", "pulse", "--rate", SR, "--jsonl", log,
                       "--save-audio", cap_wav, "--duration", duration)
    start = proc.wait_started()
    assert "algorithmic delay" in start
    time.sleep(PLAY_AFTER_S)
    r = pulse.play(played)
    assert r.returncode == 0, r.stderr
    code, out, err = proc.finish()
    assert code == 0, err
    assert err == "" and "\r" not in out
    assert f"captured {duration:.2f} s from 'pulse'" in out.splitlines()[-1]

    # the captured audio is the played file, bit for bit, after the delay
    cap, sr = sf.read(cap_wav)
    ref, _ = sf.read(played)
    assert sr == SR and cap.size == int(duration * SR)
    k = _aligned(cap, ref)
    assert k > 0 and k + ref.size <= cap.size, "playback not wholly inside the capture"
    assert np.array_equal(cap[k:k + ref.size], ref)
    assert not np.any(cap[:k]) and not np.any(cap[k + ref.size:])

    # the JSON frames are those of the streaming tracker on exactly those samples,
    # and agree with the offline tracker on at least 99 % of the frames
    frames, events = read_jsonl(log)
    assert [e["event"] for e in events] == ["start", "stop"]
    assert events[1]["samples"] == cap.size and events[1]["frames"] == len(frames)
    assert frames == streamed(cap)
    offline = harmtrack.track(cap, SR)
    ok, compared = agreement(frames, offline)
    print(f"live vs offline: {compared} frames compared, {100 * ok:.2f} % agree "
          f"(playback {k / SR:.3f} s into the capture)")
    assert compared == len(offline) == len(frames)
    assert ok >= 0.99


def test_ctrl_c_ends_cleanly(pulse, tmp_path):
    tone = tmp_path / "tone.wav"
    synth.write_wav(tone, pcm16(glide_voice(seconds=1.5)), SR)
    log, cap_wav = tmp_path / "live.jsonl", tmp_path / "cap.wav"
    proc = LiveProcess(pulse.env, "--device", "pulse", "--jsonl", log, "--save-audio", cap_wav)
    proc.wait_started()
    time.sleep(PLAY_AFTER_S)
    assert pulse.play(tone).returncode == 0
    proc.proc.send_signal(signal.SIGINT)
    code, out, err = proc.finish()
    assert code == 0, err
    assert err == ""
    summary = out.splitlines()[-1]
    assert summary.startswith("captured ") and "ended: interrupted" in summary
    cap, _ = sf.read(cap_wav)
    frames, events = read_jsonl(log)
    assert events[-1]["reason"] == "interrupted" and events[-1]["samples"] == cap.size
    # what was captured before the interrupt is the start of the played file
    ref, _ = sf.read(tone)
    k = int(np.flatnonzero(cap)[0]) - int(np.flatnonzero(ref)[0])
    n = min(ref.size, cap.size - k)
    assert k > 0 and n > SR // 2
    assert np.array_equal(cap[k:k + n], ref[:n])
    assert frames == streamed(cap)


def test_device_lost_mid_stream(tmp_path):
    daemon = _pulse_or_skip()
    try:
        log, cap_wav = tmp_path / "live.jsonl", tmp_path / "cap.wav"
        proc = LiveProcess(daemon.env, "--device", "pulse", "--jsonl", log, "--save-audio",
                           cap_wav, "-q")
        proc.wait_started()
        time.sleep(1.0)
        daemon.kill()
        code, out, err = proc.finish(timeout=60)
    finally:
        daemon.close()
    assert code == live.EXIT_DEVICE_LOST
    assert err.count("\n") == 1, err           # PortAudio's own complaints are kept off stderr
    assert err.startswith("harmtrack: error: device 'pulse': capture stopped: ")
    cap, _ = sf.read(cap_wav)
    frames, events = read_jsonl(log)
    assert events[-1]["reason"] == "device lost" and events[-1]["samples"] == cap.size
    assert cap.size > 0.5 * SR
    assert frames == streamed(cap)
    assert "ended: device lost" in out.splitlines()[-1]


@pytest.mark.parametrize("args,words", [
    (["--device", "nosuchdevice"], "--device 'nosuchdevice': no input device matching it"),
    (["--device", "42"], "--device 42: no input device with index 42"),
    (["--device", "pulse", "--rate", "10000000"],
     "device 'pulse': cannot capture at 10000000 Hz (Invalid sample rate)"),
])
def test_device_and_rate_errors(pulse, tmp_path, args, words):
    wav = tmp_path / "never.wav"
    r = _harmtrack(pulse.env, "live", *args, "--save-audio", wav, "--duration", 1)
    assert r.returncode == 2 and r.stdout == ""
    assert r.stderr.count("\n") == 1 and r.stderr.startswith("harmtrack: error: ")
    assert words in r.stderr
    assert list(tmp_path.iterdir()) == []


def test_no_device_at_all(tmp_path):
    probe = subprocess.run([sys.executable, "-c", "import sounddevice"], capture_output=True)
    if probe.returncode != 0:
        pytest.skip("sounddevice cannot be imported (PortAudio missing)")
    env = _no_device_env(tmp_path)                # no daemon behind this runtime folder
    r = _harmtrack(env, "devices")
    if r.returncode == 0:
        pytest.skip(f"this machine has audio inputs of its own: {r.stdout.strip()[:200]}")
    expected = ("harmtrack: error: no audio input device found (no sound card, microphone or "
                "sound server that PortAudio can reach)\n")
    assert r.returncode == 2 and r.stderr == expected
    r = _harmtrack(env, "live", "--duration", 1, "--jsonl", tmp_path / "x.jsonl")
    assert r.returncode == 2 and r.stderr == expected
    assert not (tmp_path / "x.jsonl").exists()
