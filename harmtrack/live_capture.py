"""Audio input for ``harmtrack live`` through PortAudio (the ``sounddevice`` package).

Device listing and choice, the sample-rate choice and check, and
:class:`Capture`: a callback stream whose callback only copies each block
onto a queue, read by the main thread.  Device choice and the table of
devices are pure functions of the device list; PortAudio errors become
one-line :class:`harmtrack.HarmtrackError` messages naming the device.
"""

from __future__ import annotations

import collections
import contextlib
import io
import os
import queue
import sys
import tempfile
import threading
import time
from dataclasses import dataclass

from .errors import HarmtrackError

__all__ = [
    "InputDevice",
    "DeviceLost",
    "Capture",
    "load_sounddevice",
    "input_devices",
    "format_devices",
    "choose_device",
    "choose_rate",
    "check_rate",
    "native_stderr_captured",
    "PORTAUDIO_INSTALL_HINT",
]

PORTAUDIO_INSTALL_HINT = ("install the PortAudio system library (Debian/Ubuntu: "
                          "apt install libportaudio2)")

#: Seconds without a block from a running stream after which the device counts
#: as lost (at least; ten times the stream's input latency when that is longer).
STALL_S = 2.0

#: An overflow storm: this many input overflows within ``OVERFLOW_WINDOW_S``
#: seconds ends the capture as a lost device (single overflows only warn).
OVERFLOW_STORM = 20
OVERFLOW_WINDOW_S = 5.0

#: Seconds the capture waits for PortAudio to stop and close the stream.
CLOSE_WAIT_S = 3.0

#: Most audio, seconds, waiting between the callback and the tracker; blocks
#: beyond it are dropped and counted as overflows.
MAX_QUEUED_S = 120.0


class DeviceLost(Exception):
    """The input device stopped delivering audio while capturing (one-line message)."""


@dataclass(frozen=True)
class InputDevice:
    """One PortAudio input device.

    Attributes
    ----------
    index : int
        PortAudio device index.
    name : str
    host_api : str
        PortAudio host API (ALSA, CoreAudio, WASAPI...).
    channels : int
        Largest number of input channels.
    default_sr : float
        The device's default sample rate, Hz.
    is_default : bool
        PortAudio's default input device.
    """

    index: int
    name: str
    host_api: str
    channels: int
    default_sr: float
    is_default: bool = False


def load_sounddevice():
    """Import ``sounddevice``, turning a missing PortAudio into a one-line error.

    Raises
    ------
    HarmtrackError
        The PortAudio library cannot be loaded (``sounddevice`` raises
        ``OSError`` at import) or the ``sounddevice`` package is missing.
    """
    try:
        import sounddevice
    except OSError as exc:
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else "cannot be loaded"
        raise HarmtrackError(f"audio capture unavailable: {reason}; "
                             f"{PORTAUDIO_INSTALL_HINT}") from None
    except ImportError:
        raise HarmtrackError("audio capture unavailable: the Python package 'sounddevice' "
                             "is missing; pip install sounddevice") from None
    return sounddevice


def _portaudio_reason(exc) -> str:
    """PortAudio's own words from a ``sounddevice.PortAudioError`` (first argument)."""
    args = getattr(exc, "args", ())
    text = str(args[0]) if args else str(exc)
    return text.strip().splitlines()[0] if text.strip() else type(exc).__name__


def input_devices(sd) -> list[InputDevice]:
    """Every device with input channels, in PortAudio's order."""
    try:
        devices = sd.query_devices()
        apis = sd.query_hostapis()
    except sd.PortAudioError as exc:
        raise HarmtrackError(f"cannot list audio devices: {_portaudio_reason(exc)}") from None
    try:
        default = int(sd.query_devices(kind="input")["index"])
    except (sd.PortAudioError, KeyError, TypeError, ValueError):
        default = None
    out = []
    for d in devices:
        if int(d.get("max_input_channels", 0)) <= 0:
            continue
        api = d.get("hostapi")
        api_name = apis[api]["name"] if isinstance(api, int) and 0 <= api < len(apis) else "?"
        out.append(InputDevice(index=int(d["index"]), name=str(d["name"]), host_api=str(api_name),
                               channels=int(d["max_input_channels"]),
                               default_sr=float(d.get("default_samplerate") or 0.0),
                               is_default=int(d["index"]) == default))
    return out


NO_DEVICE_TEXT = ("no audio input device found (no sound card, microphone or sound server "
                  "that PortAudio can reach)")


def format_devices(devices: list[InputDevice]) -> str:
    """The device table printed by ``harmtrack devices`` (several lines).

    Raises
    ------
    HarmtrackError
        The list is empty.
    """
    if not devices:
        raise HarmtrackError(NO_DEVICE_TEXT)
    rows = [("", "index", "name", "host API", "inputs", "default rate")]
    for d in devices:
        rows.append(("*" if d.is_default else "", str(d.index), d.name, d.host_api,
                     str(d.channels), f"{d.default_sr:g} Hz"))
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    right = {1, 4}
    lines = []
    for r in rows:
        cells = [c.rjust(w) if i in right else c.ljust(w)
                 for i, (c, w) in enumerate(zip(r, widths))]
        lines.append("  ".join(cells).rstrip())
    if any(d.is_default for d in devices):
        lines.append("* default input")
    else:
        lines.append("no default input: choose one with --device")
    return "\n".join(lines)


def _listing(devices: list[InputDevice]) -> str:
    shown = ", ".join(f"{d.index} {d.name!r}" for d in devices[:8])
    more = f" and {len(devices) - 8} more" if len(devices) > 8 else ""
    return f"inputs: {shown}{more}"


def choose_device(devices: list[InputDevice], spec: str | None) -> InputDevice:
    """The input device named by ``--device``.

    Parameters
    ----------
    devices : list of InputDevice
        The input devices (see :func:`input_devices`).
    spec : str or None
        None for the default input; a whole number for a device index;
        otherwise a name or part of one (case-insensitive), an exact name
        winning over partial matches.

    Raises
    ------
    HarmtrackError
        No input devices, no default, no match, or several matches.
    """
    if not devices:
        raise HarmtrackError(NO_DEVICE_TEXT)
    if spec is None:
        for d in devices:
            if d.is_default:
                return d
        raise HarmtrackError("no default audio input device; choose one with --device "
                             f"({_listing(devices)})")
    text = str(spec).strip()
    if text.lstrip("-").isdigit():
        index = int(text)
        for d in devices:
            if d.index == index:
                return d
        raise HarmtrackError(f"--device {text}: no input device with index {index} "
                             f"({_listing(devices)})")
    key = text.casefold()
    if not key:
        raise HarmtrackError("--device: give a device name or index")
    exact = [d for d in devices if d.name.casefold() == key]
    found = exact or [d for d in devices if key in d.name.casefold()]
    if not found:
        raise HarmtrackError(f"--device {text!r}: no input device matching it "
                             f"({_listing(devices)})")
    if len(found) > 1:
        names = ", ".join(f"{d.index} {d.name!r} ({d.host_api})" for d in found[:8])
        raise HarmtrackError(f"--device {text!r}: matches several input devices ({names}); "
                             "give the index or more of the name")
    return found[0]


def choose_rate(requested, preferred: int, device: InputDevice, supports) -> int:
    """The capture rate: the requested one, else ``preferred`` if the device takes it,
    else the device's default rate.

    Parameters
    ----------
    requested : int or None
        ``--rate``.
    preferred : int
        The preset's analysis rate (capturing at it spares a resampling).
    device : InputDevice
    supports : callable
        ``supports(rate) -> bool``: whether the device accepts a rate.

    Returns
    -------
    int
    """
    if requested is not None:
        return int(requested)
    if supports(int(preferred)):
        return int(preferred)
    return int(round(device.default_sr))


def check_rate(sd, device: InputDevice, rate: int) -> None:
    """Ask PortAudio whether ``device`` captures mono float samples at ``rate``.

    Raises
    ------
    HarmtrackError
        The rate (or the settings) are refused, with PortAudio's reason.
    """
    try:
        sd.check_input_settings(device=device.index, channels=1, dtype="float32",
                                samplerate=rate)
    except sd.PortAudioError as exc:
        raise HarmtrackError(f"device {device.name!r}: cannot capture at {rate} Hz "
                             f"({_portaudio_reason(exc)})") from None
    except ValueError as exc:
        raise HarmtrackError(f"device {device.name!r}: cannot capture at {rate} Hz "
                             f"({exc})") from None


def rate_supported(sd, device: InputDevice, rate: int) -> bool:
    """Whether :func:`check_rate` passes."""
    try:
        check_rate(sd, device, rate)
    except HarmtrackError:
        return False
    return True


class Capture:
    """A running mono input stream whose blocks the main thread reads from a queue.

    Parameters
    ----------
    sd : module
        ``sounddevice``.
    device : InputDevice
    sr : int
        Sample rate, Hz.
    clock : callable
        Monotonic clock, seconds.
    """

    def __init__(self, sd, device: InputDevice, sr: int, *, clock=time.monotonic):
        self._sd = sd
        self.device = device
        self.sr = int(sr)
        self._clock = clock
        self._q: queue.Queue = queue.Queue()
        self._queued = 0
        self._max_queued = int(MAX_QUEUED_S * self.sr)
        self._finished = threading.Event()
        self._stopping = False
        self._last = clock()
        self._storm: collections.deque = collections.deque()
        self.overflows = 0
        self.stream = None
        self.latency_s = 0.0
        self.stall_s = STALL_S

    def _callback(self, indata, frames, time_info, status):
        # PortAudio's thread: copy and queue, nothing else.  ``_queued`` is a rough
        # count (two threads update it without a lock): it only guards memory.
        overflow = bool(status.input_overflow)
        if self._queued > self._max_queued:
            self._q.put_nowait((None, True))
            return
        self._queued += frames
        self._q.put_nowait((indata[:, 0].copy(), overflow))

    def start(self) -> None:
        """Open and start the stream.

        Raises
        ------
        HarmtrackError
            PortAudio refuses to open or start it.
        """
        sd = self._sd
        try:
            self.stream = sd.InputStream(samplerate=self.sr, device=self.device.index, channels=1,
                                         dtype="float32", latency="high", callback=self._callback,
                                         finished_callback=self._finished.set)
            self.latency_s = float(self.stream.latency)
            self.stall_s = max(STALL_S, 10.0 * self.latency_s)
            self._last = self._clock()
            self.stream.start()
        except sd.PortAudioError as exc:
            self._close_quietly()
            raise HarmtrackError(f"device {self.device.name!r}: cannot start capture "
                                 f"({_portaudio_reason(exc)})") from None

    def _take(self, item):
        block, overflow = item
        self._last = self._clock()
        if overflow:
            self._overflow()
        if block is None:
            return block
        self._queued -= block.shape[0]
        return block

    def _overflow(self) -> None:
        now = self._clock()
        self.overflows += 1
        self._storm.append(now)
        while self._storm and now - self._storm[0] > OVERFLOW_WINDOW_S:
            self._storm.popleft()
        if len(self._storm) >= OVERFLOW_STORM and not self._stopping:
            raise DeviceLost(f"{len(self._storm)} input overflows within {OVERFLOW_WINDOW_S:g} s "
                             "(samples lost; the device or this machine cannot keep up)")

    def read(self, timeout: float):
        """The next block (1-D float32), or None when none came within ``timeout`` seconds.

        Raises
        ------
        DeviceLost
            The stream ended without :meth:`stop`, no audio came for
            :attr:`stall_s` seconds, or input overflows came in a storm.
        """
        try:
            item = self._q.get(timeout=timeout)
        except queue.Empty:
            self._check_alive()
            return None
        return self._take(item)

    def read_nowait(self):
        """The next queued block, or None when the queue is empty."""
        try:
            item = self._q.get_nowait()
        except queue.Empty:
            return None
        return self._take(item)

    def _check_alive(self) -> None:
        if self._stopping:
            return
        if self._finished.is_set():
            raise DeviceLost("the device ended the stream")
        try:
            active = bool(self.stream.active)
        except self._sd.PortAudioError as exc:
            raise DeviceLost(_portaudio_reason(exc)) from None
        if not active:
            raise DeviceLost("the stream stopped")
        idle = self._clock() - self._last
        if idle > self.stall_s:
            raise DeviceLost(f"no audio from the device for {idle:.1f} s")

    def stop(self) -> None:
        """Stop and close the stream; blocks already queued stay readable."""
        self._stopping = True
        self._close_quietly()

    def _close_quietly(self) -> None:
        """Abort and close the stream, waiting at most :data:`CLOSE_WAIT_S`.

        A lost device can leave PortAudio's stop or close waiting for a read that
        never returns; they run on a thread of their own, which is abandoned
        (the process can still end) when they do not return in time.
        """
        stream, self.stream = self.stream, None
        if stream is None:
            return

        def close():
            for method in (stream.abort, stream.close):
                try:
                    method()
                except Exception:  # noqa: BLE001 - a lost device may fail to stop
                    pass

        t = threading.Thread(target=close, name="harmtrack-capture-close", daemon=True)
        t.start()
        t.join(CLOSE_WAIT_S)


@contextlib.contextmanager
def native_stderr_captured(enabled: bool = True):
    """Send what native libraries print on file descriptor 2 to a temporary file.

    PortAudio and ALSA print diagnostics straight to the process's standard
    error (several lines for one lost device), which would break the
    one-line error reports.  Inside the block, descriptor 2 points to a
    temporary file, while Python's ``sys.stderr`` keeps writing to the
    original destination.  Yields the temporary file (binary, readable after
    the block) or None when nothing was redirected.
    """
    if not enabled:
        yield None
        return
    try:
        sys.stderr.flush()
    except (AttributeError, OSError, ValueError):
        pass
    try:
        saved = os.dup(2)
    except OSError:
        yield None
        return
    log = tempfile.TemporaryFile()
    os.dup2(log.fileno(), 2)
    original = sys.stderr
    replacement = None
    try:
        if original is not None and original.fileno() == 2:
            replacement = io.TextIOWrapper(os.fdopen(os.dup(saved), "wb"),
                                           encoding=getattr(original, "encoding", None) or "utf-8",
                                           errors="backslashreplace", line_buffering=True,
                                           write_through=True)
            sys.stderr = replacement
    except (AttributeError, OSError, ValueError, io.UnsupportedOperation):
        replacement = None
    try:
        yield log
    finally:
        if replacement is not None:
            try:
                replacement.flush()
            finally:
                sys.stderr = original
                replacement.close()
        os.dup2(saved, 2)
        os.close(saved)
        log.seek(0)
