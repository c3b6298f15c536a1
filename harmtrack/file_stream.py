"""Long recordings: read in blocks and tracked by the streaming engine, in bounded memory.

A file whose decoded samples would take more than :data:`BLOCKS_ABOVE_BYTES`
is not loaded whole: :func:`iter_file_parts` reads it in blocks of
:data:`BLOCK_S` with soundfile, feeds a :class:`harmtrack.stream.StreamTracker`
(with :data:`FILE_LAG_S` of look-ahead: a file has no hurry) and hands each
finished part to the caller, who writes CSV rows as they come
(:class:`CsvLabelStream`), spools NPZ or JSON frames to disk
(:func:`write_labels_in_blocks`), or gathers them into arrays allocated once
(:func:`track_file_in_blocks`).  The input's SHA-256 is computed over its bytes
first, so that the provenance, which heads a CSV file, is complete.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
import tempfile
from pathlib import Path

import numpy as np

from .audio import AudioInfo
from .errors import HarmtrackError, InputError
from .result import Track

__all__ = ["BLOCKS_ABOVE_BYTES", "BLOCK_S", "FILE_LAG_S", "needs_blocks", "file_info",
           "iter_file_parts", "track_file_in_blocks", "write_csv_in_blocks",
           "write_labels_in_blocks", "CsvLabelStream"]

#: Files whose decoded float64 samples exceed this many bytes are read in blocks
#: (80 MB: about 10 minutes of mono audio at 16 kHz).
BLOCKS_ABOVE_BYTES = 80e6

#: Block length read at a time, seconds.
BLOCK_S = 1.0

#: Look-ahead of the smoother for files, seconds.
FILE_LAG_S = 1.0


def _sha256(path: str) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(1 << 22):
            h.update(chunk)
    return h.hexdigest()


def file_info(path) -> AudioInfo:
    """What the file's header says, and the SHA-256 of its bytes.

    Raises
    ------
    InputError
        Missing, unreadable, empty or undecodable file.
    """
    import soundfile as sf

    from .audio import check_audio_path

    path = check_audio_path(path)
    try:
        if os.path.getsize(path) == 0:
            raise InputError(f"{path}: empty file (0 bytes)")
        info = sf.info(path)
        digest = _sha256(path)
    except PermissionError:
        raise InputError(f"{path}: permission denied") from None
    except (sf.LibsndfileError, RuntimeError, TypeError) as exc:
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"{path}: not a readable audio file ({reason})") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror or exc}") from None
    if info.frames <= 0:
        raise InputError(f"{path}: contains no audio samples")
    if info.format == "WAV" and info.subtype.startswith("PCM"):
        from .audio import _check_wav_size

        with open(path, "rb") as fh:
            head = fh.read(1 << 20)
        _check_wav_size(path, head, info.frames, info.channels, info.subtype,
                        size=os.path.getsize(path))
    return AudioInfo(path=path, sr=float(info.samplerate), channels=int(info.channels),
                     frames=int(info.frames), format=info.format, subtype=info.subtype,
                     sha256=digest)


def needs_blocks(path) -> bool:
    """True when the file is long enough to be read in blocks (see :data:`BLOCKS_ABOVE_BYTES`).

    False for anything soundfile cannot open (the whole-file reader then reports it).
    """
    import soundfile as sf

    try:
        info = sf.info(os.fspath(path))
    except Exception:  # noqa: BLE001 - reported by the caller's normal path
        return False
    return info.frames * info.channels * 8.0 > BLOCKS_ABOVE_BYTES


def iter_file_parts(path, info: AudioInfo, cfg_options: dict):
    """The frames of a file, part by part, from a stream of blocks.

    ``cfg_options`` are :func:`harmtrack.track` keywords (preset included).

    Raises
    ------
    InputError
        A non-finite sample, or a file that ends before its header says.
    """
    import soundfile as sf

    from .stream import StreamTracker

    name = info.path
    st = StreamTracker(info.sr, lag_s=FILE_LAG_S, **cfg_options)
    block = max(1, int(BLOCK_S * info.sr))
    n = 0
    warned = False
    try:
        with sf.SoundFile(name) as f:
            while True:
                data = f.read(block, dtype="float64", always_2d=True)
                if data.shape[0] == 0:
                    break
                if data.shape[1] > 1:
                    if not warned:
                        from .errors import warn

                        warn(f"{name}: {data.shape[1]} channels mixed down to mono")
                        warned = True
                    x = data.mean(axis=1)
                else:
                    x = data[:, 0]
                if not np.all(np.isfinite(x)):
                    bad = n + int(np.argmax(~np.isfinite(x)))
                    raise InputError(f"{name}: non-finite sample (NaN or inf) at "
                                     f"{bad / info.sr:.3f} s")
                n += x.size
                yield st.feed(np.ascontiguousarray(x))
    except (sf.LibsndfileError, RuntimeError) as exc:
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"{name}: not a readable audio file ({reason})") from None
    if n < info.frames:
        raise InputError(f"{name}: truncated audio file ({n} of {info.frames} declared samples "
                         "readable)")
    yield st.flush()


def _stream_settings(cfg_options: dict, info: AudioInfo) -> dict:
    from .config import make_config

    opts = dict(cfg_options)
    preset = opts.pop("preset", "voice")
    cfg = make_config(preset, fmin_hz=opts.pop("fmin", None), fmax_hz=opts.pop("fmax", None),
                      **opts)
    settings = cfg.as_dict()
    settings["read_in_blocks"] = {"block_s": BLOCK_S, "lag_s": FILE_LAG_S}
    settings["input"] = info.as_dict()
    return settings


def track_file_in_blocks(path, cfg_options: dict) -> Track:
    """:func:`harmtrack.track_file` for a long file: the frames are gathered into
    arrays allocated once for the whole file (no copy of the audio is held)."""
    from . import spectral

    info = file_info(path)
    settings = _stream_settings(cfg_options, info)
    T = spectral.frame_count(info.frames, settings["hop_s"] * info.sr)
    out = None
    i = 0
    for part in iter_file_parts(path, info, cfg_options):
        if out is None:
            out = _allocate(part, T)
        k = len(part)
        for f in dataclasses.fields(Track):
            v = getattr(part, f.name)
            if isinstance(v, np.ndarray) and f.name != "order_numbers":
                out[f.name][i:i + k] = v
        i += k
    kw = {name: arr[:i] for name, arr in out.items()}
    first = part
    return Track(**kw, sr=first.sr, frame_s=first.frame_s, settings=settings,
                 order_numbers=first.order_numbers)


def _allocate(part: Track, T: int) -> dict:
    out = {}
    for f in dataclasses.fields(Track):
        v = getattr(part, f.name)
        if isinstance(v, np.ndarray) and f.name != "order_numbers":
            out[f.name] = np.empty((T,) + v.shape[1:], dtype=v.dtype)
    return out


class CsvLabelStream:
    """A CSV label file written part by part into a temporary file, put in place
    (renamed) only when complete; the bytes equal those of
    :func:`harmtrack.io.write_labels` for the same frames and provenance."""

    def __init__(self, path):
        from .io.atomic import AtomicFile

        self._file = AtomicFile(path, text=True)
        self.path = self._file.path
        self._head = False
        self.frames = 0

    def write(self, part: Track, provenance: dict) -> None:
        from .io import csv_format
        from .io.columns import track_table

        if not len(part):
            return
        table = track_table(part, validate=False)
        try:
            if not self._head:
                self._file.fh.write(csv_format.encode_head(table, provenance))
                self._head = True
            self._file.fh.write(csv_format.encode_rows(table))
        except OSError as exc:
            self.abort()
            raise HarmtrackError(f"{self.path}: cannot write: {exc.strerror or exc}") from None
        self.frames += len(part)

    def close(self) -> Path:
        return self._file.commit()

    def abort(self) -> None:
        self._file.abort()


#: Track fields gathered frame by frame (the rest are the same for every part).
_FRAME_FIELDS = ("times", "f0_hz", "voiced", "voicing_prob", "harmonic_amplitudes",
                 "model_order", "hnr_db", "rpm", "order_amplitudes", "uneven_db", "uneven_flag")


class _Spool:
    """The frames of a long track on disk, one raw file per field, next to the
    output (its folder), read back memory-mapped to encode NPZ or JSON labels
    without holding them in memory."""

    def __init__(self, dest: Path):
        self.dir = Path(tempfile.mkdtemp(dir=dest.parent, prefix=f".{dest.name}.",
                                         suffix=".spool.tmp"))
        self.files: dict = {}
        self.meta: dict = {}
        self.n = 0
        self.first = None

    def add(self, part: Track) -> None:
        if self.first is None:
            self.first = part
        for name in _FRAME_FIELDS:
            v = getattr(part, name)
            if v is None:
                continue
            v = np.ascontiguousarray(v)
            if name not in self.files:
                self.files[name] = open(self.dir / name, "wb")
                self.meta[name] = (v.dtype, v.shape[1:])
            self.files[name].write(v.tobytes())
        self.n += len(part)

    def track(self, settings: dict) -> Track:
        for fh in self.files.values():
            fh.close()
        kw = {}
        for name, (dtype, tail) in self.meta.items():
            shape = (self.n,) + tail
            if self.n and int(np.prod(shape)):
                kw[name] = np.memmap(self.dir / name, dtype=dtype, mode="r", shape=shape)
            else:
                kw[name] = np.zeros(shape, dtype=dtype)
        f = self.first
        return Track(**kw, sr=f.sr, frame_s=f.frame_s, settings=settings,
                     order_numbers=f.order_numbers)

    def remove(self) -> None:
        for fh in self.files.values():
            fh.close()
        for q in self.dir.iterdir():
            q.unlink()
        self.dir.rmdir()


def write_labels_in_blocks(path_in, path_out, cfg_options: dict, *, fmt: str
                           ) -> tuple[Track, Path]:
    """Track a long file and write its labels without holding them in memory.

    CSV rows are written as they are produced.  NPZ and JSON hold one column
    (or array) after another, so their frames are spooled to disk as they are
    produced and encoded at the end, from memory-mapped arrays.  Either way the
    output appears (by renaming) only when complete, and the bytes equal those
    of :func:`harmtrack.io.write_labels` for the same frames.

    Returns the track without its harmonic amplitudes (for a summary) and the
    written path.
    """
    if fmt == "csv":
        return write_csv_in_blocks(path_in, path_out, cfg_options)
    from .io import json_format, npz_format
    from .io.atomic import AtomicFile, check_destination
    from .io.columns import track_table
    from .io.provenance import make_provenance

    dest = check_destination(path_out)
    info = file_info(path_in)
    settings = _stream_settings(cfg_options, info)
    spool = _Spool(dest)
    try:
        for part in iter_file_parts(path_in, info, cfg_options):
            if len(part):
                spool.add(part)
        tr = spool.track(settings)
        table, prov = track_table(tr, validate=False), make_provenance(tr)
        out = AtomicFile(dest, text=fmt == "json", encoding="ascii")
        try:
            (npz_format if fmt == "npz" else json_format).write(out.fh, table, prov)
        except BaseException as exc:
            out.abort()
            if isinstance(exc, OSError):
                raise HarmtrackError(f"{dest}: cannot write: {exc.strerror or exc}") from None
            raise
        out.commit()
        # what the summary needs, in memory (the spool files go now)
        copies = {k: np.array(v) for k in _FRAME_FIELDS
                  if k != "harmonic_amplitudes" and (v := getattr(tr, k)) is not None}
        summary = dataclasses.replace(tr, harmonic_amplitudes=np.zeros((tr.times.size, 0)),
                                      **copies)
        del table, tr
    finally:
        spool.remove()
    return summary, dest


def write_csv_in_blocks(path_in, path_out, cfg_options: dict) -> tuple[Track, Path]:
    """Track a long file and write its CSV labels as they are produced.

    Returns the track without its harmonic amplitudes (for a summary: the
    amplitudes, the bulk of the labels, are never held whole in memory) and the
    written path.
    """
    from .io.provenance import make_provenance
    from .stream import concat_tracks

    info = file_info(path_in)
    settings = _stream_settings(cfg_options, info)
    sink = CsvLabelStream(path_out)
    prov = None
    kept = []
    try:
        for part in iter_file_parts(path_in, info, cfg_options):
            if not len(part):
                continue
            part = dataclasses.replace(part, settings=settings)
            if prov is None:
                prov = make_provenance(part)
            sink.write(part, prov)
            kept.append(dataclasses.replace(
                part, harmonic_amplitudes=part.harmonic_amplitudes[:, :0]))
    except BaseException:
        sink.abort()
        raise
    return concat_tracks(kept), sink.close()
