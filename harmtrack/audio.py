"""Audio input: reading files, mono mix-down, resampling and sanity checks."""

from __future__ import annotations

import hashlib
import io
import os
import re
import struct
from dataclasses import dataclass

import numpy as np

from .errors import InputError, warn

__all__ = ["AudioInfo", "load", "decode", "as_mono", "check_signal", "resample"]


@dataclass(frozen=True)
class AudioInfo:
    """What was read from an audio file."""

    path: str
    sr: float
    channels: int
    frames: int
    format: str
    subtype: str
    sha256: str

    def as_dict(self) -> dict:
        return dict(path=self.path, sr=self.sr, channels=self.channels, frames=self.frames,
                    format=self.format, subtype=self.subtype, sha256=self.sha256)


def load(path: str | os.PathLike) -> tuple[np.ndarray, float, AudioInfo]:
    """Read an audio file as float64 mono samples.

    Returns
    -------
    y : ndarray, shape (n,)
        Samples, full scale = 1.0; channels averaged (with a warning).
    sr : float
        Sample rate, Hz.
    info : AudioInfo

    Raises
    ------
    InputError
        Missing, unreadable, truncated or empty file, or non-finite samples.
    """
    path = check_audio_path(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except PermissionError:
        raise InputError(f"{path}: permission denied") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror or exc}") from None
    return decode(raw, name=path)


def check_audio_path(path) -> str:
    """``path`` as a string, once it names an existing file (else :class:`InputError`)."""
    path = os.fspath(path)
    if not os.path.exists(path):
        raise InputError(f"{path}: no such file")
    if os.path.isdir(path):
        raise InputError(f"{path}: is a folder, not an audio file")
    return path


def decode(raw: bytes, *, name: str, sha256: str | None = None
           ) -> tuple[np.ndarray, float, AudioInfo]:
    """:func:`load` for the bytes ``raw`` of an audio file called ``name``.

    ``sha256`` is the bytes' SHA-256 when the caller has it already.
    """
    import soundfile as sf

    if not raw:
        raise InputError(f"{name}: empty file (0 bytes)")
    plain = _plain_pcm16_wav(raw)
    if plain is not None:  # the common case, without the audio library's set-up
        data, sr = plain
        channels, fmt, subtype = data.shape[1], "WAV", "PCM_16"
    else:
        try:
            with sf.SoundFile(io.BytesIO(raw)) as f:
                sr = float(f.samplerate)
                declared = f.frames
                channels = f.channels
                fmt, subtype = f.format, f.subtype
                data = f.read(dtype="float64", always_2d=True)
        except (sf.LibsndfileError, RuntimeError, TypeError, ValueError) as exc:
            reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            raise InputError(f"{name}: not a readable audio file ({_plain(reason)})") from None
        if data.shape[0] < declared:
            raise InputError(f"{name}: truncated audio file ({data.shape[0]} of {declared} "
                             f"declared samples readable)")
        if fmt == "WAV" and subtype.startswith("PCM"):
            _check_wav_size(name, raw, declared, channels, subtype)
    if data.shape[0] == 0:
        raise InputError(f"{name}: contains no audio samples")
    digest = sha256 or hashlib.sha256(raw).hexdigest()
    info = AudioInfo(path=name, sr=sr, channels=channels, frames=int(data.shape[0]),
                     format=fmt, subtype=subtype, sha256=digest)
    y = as_mono(data.T, name=name)
    check_signal(y, sr, name=name)
    return y, sr, info


def _riff_chunks(raw: bytes, end: int):
    """``(id, body offset, size)`` of each chunk header of a RIFF file held in
    ``raw`` (or at least its headers), up to byte ``end``; chunks are padded to
    even sizes (Microsoft's RIFF layout)."""
    pos = 12
    while pos + 8 <= min(end, len(raw)):
        size = int.from_bytes(raw[pos + 4:pos + 8], "little")
        yield raw[pos:pos + 4], pos + 8, size
        pos += 8 + size + (size & 1)


def _plain_pcm16_wav(raw: bytes) -> tuple[np.ndarray, float] | None:
    """Samples (frames, channels) and rate of a whole, plain 16-bit PCM WAV file;
    None for anything else (other encodings, extensible headers, a short data
    chunk...), which the audio library then reads.

    The RIFF WAVE layout (a ``fmt `` chunk with format tag 1, then the ``data``
    chunk) is Microsoft's published one; samples are scaled by 1/32768, as the
    audio library scales them.
    """
    if len(raw) < 44 or raw[:4] != b"RIFF" or raw[8:12] != b"WAVE":
        return None
    fmt = None
    for cid, body, size in _riff_chunks(raw, len(raw)):
        if cid == b"fmt ":
            if size < 16 or body + 16 > len(raw):
                return None
            tag, channels, rate, _, align, bits = struct.unpack_from("<HHIIHH", raw, body)
            if tag != 1 or bits != 16 or channels < 1 or rate < 1 or align != 2 * channels:
                return None
            fmt = (channels, rate)
        elif cid == b"data":
            if fmt is None or body + size > len(raw):
                return None
            channels, rate = fmt
            frames = size // (2 * channels)
            data = np.frombuffer(raw, dtype="<i2", count=frames * channels, offset=body)
            return (data.reshape(frames, channels) / 32768.0), float(rate)
    return None


def _plain(reason: str) -> str:
    """A soundfile error message without the memory address of the buffer it read."""
    return re.sub(r"<_io\.BytesIO object at 0x[0-9a-f]+>", "the file", reason)


def _check_wav_size(name: str, raw: bytes, declared: int, channels: int, subtype: str,
                    size: int | None = None) -> None:
    """Detect a WAV whose data chunk is shorter than its header says.

    ``raw`` holds the file's bytes, or at least its chunk headers up to the data
    chunk's, when ``size`` gives the file's length.
    """
    width = {"PCM_U8": 1, "PCM_S8": 1, "PCM_16": 2, "PCM_24": 3, "PCM_32": 4}.get(subtype)
    if width is None or raw[:4] != b"RIFF" or raw[8:12] != b"WAVE":
        return
    size = len(raw) if size is None else size
    for cid, body, clen in _riff_chunks(raw, size):
        if cid == b"data":
            avail = size - body
            if clen != 0xFFFFFFFF and avail < clen:
                have = avail // (width * channels)
                raise InputError(
                    f"{name}: truncated audio file (data chunk holds {have} of "
                    f"{clen // (width * channels)} declared samples)"
                )
            return


def as_mono(y, *, name: str = "<array>") -> np.ndarray:
    """1-D float64 samples; a (channels, samples) array is averaged with a warning."""
    try:
        y = np.asarray(y, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"{name}: samples are not numbers") from None
    if y.ndim == 2:
        if y.shape[0] > 64:
            raise InputError(
                f"{name}: 2-D input must be (channels, samples); got shape {y.shape}"
            )
        if y.shape[0] > 1:
            warn(f"{name}: {y.shape[0]} channels mixed down to mono")
        y = y.mean(axis=0)
    elif y.ndim != 1:
        raise InputError(f"{name}: expected 1-D samples, got an array of shape {y.shape}")
    return np.ascontiguousarray(y)


def check_signal(y: np.ndarray, sr: float, *, name: str = "<array>") -> None:
    """Reject empty or non-finite input; warn about clipping."""
    if y.size == 0:
        raise InputError(f"{name}: contains no audio samples")
    bad = ~np.isfinite(y)
    if bad.any():
        first = int(np.argmax(bad))
        raise InputError(
            f"{name}: {int(bad.sum())} non-finite samples (NaN or inf), the first at "
            f"{first / sr:.3f} s"
        )
    peak = float(np.max(np.abs(y)))
    if peak >= 0.99:
        at_peak = np.abs(y) >= peak * 0.999
        # clipping shows as runs of samples stuck at the peak
        runs = np.count_nonzero(at_peak[1:] & at_peak[:-1])
        if runs >= max(3, 1e-4 * y.size):
            warn(f"{name}: audio looks clipped ({runs} consecutive samples at full scale); "
                 "f0 stays usable, harmonic amplitudes are distorted")


def resample(y: np.ndarray, sr_in: float, sr_out: float) -> tuple[np.ndarray, float]:
    """Band-limited resampling from ``sr_in`` to ``sr_out`` Hz (soxr, high quality).

    Returns the samples and the output rate.
    """
    if sr_in == sr_out:
        return y, float(sr_in)
    import soxr

    out = soxr.resample(np.ascontiguousarray(y, dtype=np.float64), sr_in, sr_out, quality="HQ")
    return np.asarray(out, dtype=np.float64), float(sr_out)
