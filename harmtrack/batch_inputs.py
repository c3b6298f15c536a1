"""Finding the recordings of a batch: a folder (recursive) or a manifest of paths.

Every input gets a *relative name*: its path inside the input folder (or, for a
manifest, inside the manifest's folder).  Outputs are written under that name
inside the output folder, so an entry can never write outside it: names that
would leave (``..``, absolute paths, other drives) are mapped into a folder of
their own, ``_outside/``, by a hash of the path.
"""

from __future__ import annotations

import csv
import hashlib
import io
import os
from dataclasses import dataclass
from pathlib import Path, PurePosixPath

from .errors import HarmtrackError

__all__ = ["AUDIO_EXTENSIONS", "Entry", "find_inputs", "safe_output_base"]

#: Audio file extensions a folder scan picks up (any case).
AUDIO_EXTENSIONS = (".wav", ".flac", ".ogg", ".oga", ".mp3", ".aiff", ".aif", ".aifc")

#: Extensions read as manifests.
_MANIFEST_EXTENSIONS = (".csv", ".txt", ".lst", ".list")

#: Column of a CSV manifest that holds the paths (else its first column).
_PATH_COLUMNS = ("path", "file", "filename", "audio", "audio_path")


@dataclass(frozen=True)
class Entry:
    """One recording of a batch."""

    path: str        # where to read it (absolute)
    name: str        # relative name, POSIX separators: the label files' name without extension


def _rel_name(path: Path, root: Path) -> str:
    """``path`` relative to ``root`` in POSIX form, or a name under ``_outside/``."""
    try:
        rel = PurePosixPath(path.relative_to(root).as_posix())
        if rel.parts and ".." not in rel.parts:
            return str(rel)
    except ValueError:
        pass
    digest = hashlib.sha256(os.fspath(path).encode("utf-8", "surrogateescape")).hexdigest()[:12]
    return f"_outside/{digest}_{path.name}"


def _scan_folder(root: Path) -> list[Entry]:
    """Audio files under ``root``, following links but never the same folder twice."""
    seen: set[tuple[int, int]] = set()
    out: list[Entry] = []
    for folder, dirs, files in os.walk(root, followlinks=True):
        st = os.stat(folder)
        key = (st.st_dev, st.st_ino)
        if key in seen:  # a link back to a folder already walked: a loop
            dirs[:] = []
            continue
        seen.add(key)
        dirs.sort()
        for f in sorted(files):
            if os.path.splitext(f)[1].lower() in AUDIO_EXTENSIONS:
                p = Path(folder) / f
                rel = p.relative_to(root).as_posix()
                out.append(Entry(path=os.path.abspath(p), name=rel))
    return out


def _read_manifest(path: Path) -> list[str]:
    """The path column of a CSV manifest or the lines of a text list."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise HarmtrackError(f"{path}: cannot read the manifest ({exc})") from None
    if path.suffix.lower() == ".csv":
        rows = [r for r in csv.reader(io.StringIO(text)) if r and not r[0].startswith("#")]
        if not rows:
            return []
        head = [c.strip().lower() for c in rows[0]]
        col = next((head.index(c) for c in _PATH_COLUMNS if c in head), None)
        if col is None:
            first = rows[0][0].strip()
            if os.path.splitext(first)[1].lower() not in AUDIO_EXTENSIONS and len(rows) > 1:
                raise HarmtrackError(
                    f"{path}: no path column (name one of {', '.join(_PATH_COLUMNS)})")
            return [r[0].strip() for r in rows if r[0].strip()]
        return [r[col].strip() for r in rows[1:] if len(r) > col and r[col].strip()]
    lines = (ln.strip() for ln in text.splitlines())
    return [ln for ln in lines if ln and not ln.startswith("#")]


def find_inputs(source: str | os.PathLike) -> list[Entry]:
    """The recordings named by ``source``: a folder (recursive) or a manifest file.

    Folder scans take the files whose extension is in :data:`AUDIO_EXTENSIONS`
    (any case), in sorted order, following symbolic links without looping.  A
    manifest (``.csv`` with a ``path`` column, or a text list, one path per line,
    ``#`` comments) is taken in its own order; relative entries are relative to
    the manifest's folder; duplicates are dropped.

    Raises
    ------
    HarmtrackError
        ``source`` missing, or neither a folder nor a manifest.
    """
    src = Path(source)
    if src.is_dir():
        return _scan_folder(src.resolve())
    if not src.exists():
        raise HarmtrackError(f"{src}: no such file or folder")
    if src.suffix.lower() not in _MANIFEST_EXTENSIONS:
        raise HarmtrackError(
            f"{src}: give a folder or a manifest ({', '.join(_MANIFEST_EXTENSIONS)})")
    root = src.resolve().parent
    out: list[Entry] = []
    names: set[str] = set()
    for item in _read_manifest(src):
        p = Path(item)
        p = p if p.is_absolute() else root / p
        p = Path(os.path.normpath(p))
        name = _rel_name(p, root)
        if name in names:
            continue
        names.add(name)
        out.append(Entry(path=os.fspath(p), name=name))
    return out


def safe_output_base(outdir: Path, name: str) -> Path:
    """``outdir / name``, checked to lie inside ``outdir``."""
    rel = PurePosixPath(name)
    if rel.is_absolute() or ".." in rel.parts or not rel.parts:
        raise HarmtrackError(f"{name}: not a relative name inside the output folder")
    base = outdir.joinpath(*rel.parts)
    if os.path.commonpath([os.path.abspath(base), os.path.abspath(outdir)]) != \
            os.path.abspath(outdir):
        raise HarmtrackError(f"{name}: would be written outside {outdir}")
    return base
