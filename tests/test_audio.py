"""Decoding audio files: samples, rate and format as the reference audio library
(soundfile, over libsndfile) reads them."""

from __future__ import annotations

import io
import struct

import numpy as np
import pytest
import soundfile as sf

from harmtrack import audio
from harmtrack.errors import InputError


def _reference(raw: bytes):
    with sf.SoundFile(io.BytesIO(raw)) as f:
        data = f.read(dtype="float64", always_2d=True)
        return data, float(f.samplerate), f.format, f.subtype


def _wav_bytes(y, sr, subtype):
    buf = io.BytesIO()
    sf.write(buf, y, sr, subtype=subtype, format="WAV")
    return buf.getvalue()


def _chunk(cid: bytes, data: bytes) -> bytes:
    # RIFF chunks (Microsoft's RIFF/WAVE layout): id, little-endian size, data
    # padded to an even length
    return cid + len(data).to_bytes(4, "little") + data + (b"\0" if len(data) % 2 else b"")


@pytest.mark.filterwarnings("ignore:.*mixed down to mono")
@pytest.mark.parametrize("channels", [1, 2, 3])
@pytest.mark.parametrize("subtype", ["PCM_16", "PCM_24", "PCM_32", "FLOAT", "DOUBLE", "PCM_U8"])
def test_wav_samples_equal_the_audio_library(channels, subtype):
    # reference: soundfile (libsndfile) reading the same bytes
    rng = np.random.default_rng(channels)
    y = rng.uniform(-1.0, 1.0, (2001, channels)) * 0.9
    raw = _wav_bytes(y, 22050, subtype)
    ref, sr, fmt, sub = _reference(raw)
    got, got_sr, info = audio.decode(raw, name="x.wav")
    np.testing.assert_array_equal(got, ref.mean(axis=1) if channels > 1 else ref[:, 0])
    assert got_sr == sr == 22050.0
    assert (info.format, info.subtype, info.channels, info.frames) == (fmt, sub, channels, 2001)


def test_wav_with_other_chunks_and_odd_sizes():
    # a LIST chunk before the format chunk, an odd-sized chunk (padded) before
    # the data, a trailing chunk after it: the data chunk is found all the same
    x = (np.random.default_rng(0).uniform(-1, 1, 999) * 30000).astype("<i2")
    fmt = _chunk(b"fmt ", struct.pack("<HHIIHH", 1, 1, 8000, 16000, 2, 16))
    body = b"WAVE" + b"".join([_chunk(b"LIST", b"abc"), fmt, _chunk(b"junk", b"x" * 7),
                               _chunk(b"data", x.tobytes()), _chunk(b"LIST", b"trailer")])
    raw = b"RIFF" + len(body).to_bytes(4, "little") + body
    ref, ref_sr, _, _ = _reference(raw)
    got, got_sr, info = audio.decode(raw, name="x.wav")
    np.testing.assert_array_equal(got, ref[:, 0])
    np.testing.assert_array_equal(got, x / 32768.0)  # 16-bit full scale (common practice)
    assert got_sr == ref_sr == 8000.0 and info.frames == 999


def test_truncated_wav_is_an_error_naming_the_file():
    raw = _wav_bytes(np.zeros(4000), 16000, "PCM_16")
    with pytest.raises(InputError, match=r"^cut\.wav: truncated audio file"):
        audio.decode(raw[: len(raw) // 2], name="cut.wav")
