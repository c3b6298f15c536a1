"""The label-file columns: names, units, formats, and the table <-> Track mapping.

A *table* is a dict of numpy arrays keyed by column name, plus
``"harmonic_amplitudes"`` (T, H).  Every writer takes a table and every reader
returns one, checked by :func:`check_table`.
"""

from __future__ import annotations

import re

import numpy as np

from ..errors import HarmtrackError

__all__ = [
    "COLUMNS",
    "BASE_COLUMNS",
    "CSV_FORMATS",
    "amp_name",
    "column_names",
    "column_units",
    "columns_markdown",
    "track_table",
    "table_track",
    "check_table",
    "ENGINE_COLUMNS",
    "order_name",
    "table_columns",
    "table_units",
    "column_format",
]

#: One row per column: (name, unit, meaning).  ``amp_h<k>`` stands for the
#: amplitude columns ``amp_h1`` .. ``amp_hH``.
COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("time_s", "s", "frame centre, seconds from the start of the input"),
    ("f0_hz", "Hz", "fundamental frequency; nan where unvoiced"),
    ("voiced", "0/1", "voicing decision: 1 voiced, 0 unvoiced"),
    ("voicing_prob", "probability", "posterior probability that the frame is voiced, 0 to 1"),
    ("model_order", "harmonics", "number of harmonics in the fitted model; 0 where unvoiced"),
    ("hnr_db", "dB", "harmonics-to-noise ratio under the fitted model; nan where unvoiced"),
    ("amp_h<k>", "linear amplitude, full scale = 1",
     "peak amplitude of harmonic k (at k * f0_hz) in input units; "
     "0 where absent, nan where unvoiced or above the analysed band"),
)

#: Columns of engine tracks, after the harmonic amplitudes: (name, unit, meaning).
#: ``order_<q>`` stands for ``order_0.5``, ``order_1``, ... (linear) and
#: ``order_<q>_db`` for the same in dB.
ENGINE_COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("rpm", "rpm", "crankshaft speed from the firing frequency f0_hz; nan where no engine"),
    ("uneven_db", "dB", "uneven-firing index: non-firing (half) order energy re firing orders"),
    ("uneven_flag", "0/1", "1 where uneven_db exceeds the threshold in a frame with an engine"),
    ("order_<q>", "linear amplitude, full scale = 1",
     "peak amplitude of engine order q (at q * rpm / 60 Hz); nan where no engine or above the band"),
    ("order_<q>_db", "dB re full scale", "the same in dB (-inf where measured as zero)"),
)
_ENGINE_FIXED = ("rpm", "uneven_db", "uneven_flag")
_ORDER_RE = re.compile(r"order_([0-9]+(?:\.5)?)(_db)?\Z")


def order_name(q: float, db: bool = False) -> str:
    """Column name of engine order ``q`` (``order_0.5``, ``order_2``...)."""
    text = f"{q:g}"
    return f"order_{text}_db" if db else f"order_{text}"


def column_format(name: str) -> str:
    """printf-style CSV format of a column."""
    if name.startswith("amp_h"):
        return CSV_FORMATS["amp"]
    if name.startswith("order_"):
        return "%.2f" if name.endswith("_db") else "%.6g"
    return CSV_FORMATS[name]


def _order_keys(table) -> list[float]:
    return sorted({float(m.group(1)) for m in map(_ORDER_RE.match, table) if m is not None})


def table_columns(table: dict) -> list[str]:
    """Column names of a checked table, in file order."""
    names = column_names(table["harmonic_amplitudes"].shape[1])
    if "rpm" in table:
        qs = _order_keys(table)
        names += list(_ENGINE_FIXED) + [order_name(q) for q in qs] + [order_name(q, True) for q in qs]
    return names


def table_units(table: dict) -> dict[str, str]:
    """``{column name: unit}`` of a checked table, in file order."""
    units = column_units(table["harmonic_amplitudes"].shape[1])
    eng = {name: unit for name, unit, _ in ENGINE_COLUMNS}
    for name in table_columns(table)[len(units):]:
        key = name
        if name.startswith("order_"):
            key = "order_<q>_db" if name.endswith("_db") else "order_<q>"
        units[name] = eng[key]
    return units


#: The fixed columns, in file order, before the amplitude columns.
BASE_COLUMNS: tuple[str, ...] = tuple(name for name, _, _ in COLUMNS[:-1])

#: printf-style format of each column in CSV files (NaN is written ``nan``).
CSV_FORMATS: dict[str, str] = {
    "time_s": "%.6f",
    "f0_hz": "%.4f",
    "voiced": "%d",
    "voicing_prob": "%.4f",
    "model_order": "%d",
    "hnr_db": "%.2f",
    "amp": "%.6g",
    "rpm": "%.2f",
    "uneven_db": "%.2f",
    "uneven_flag": "%d",
}

_FLOAT_COLUMNS = ("time_s", "f0_hz", "voicing_prob", "hnr_db")
_AMP_RE = re.compile(r"amp_h([1-9][0-9]*)\Z")


def amp_name(k: int) -> str:
    """Column name of the amplitude of harmonic ``k`` (1-based)."""
    return f"amp_h{k}"


def column_names(n_harmonics: int) -> list[str]:
    """All column names, in file order, for ``n_harmonics`` amplitude columns."""
    return list(BASE_COLUMNS) + [amp_name(k) for k in range(1, n_harmonics + 1)]


def column_units(n_harmonics: int) -> dict[str, str]:
    """``{column name: unit}`` in file order."""
    units = {name: unit for name, unit, _ in COLUMNS[:-1]}
    amp_unit = COLUMNS[-1][1]
    units.update({amp_name(k): amp_unit for k in range(1, n_harmonics + 1)})
    return units


def columns_markdown() -> str:
    """The column table as Markdown (the text the documentation shows)."""
    lines = ["| column | unit | CSV format | meaning |", "|---|---|---|---|"]
    for name, unit, meaning in COLUMNS:
        if name == "amp_h<k>":
            shown, fmt = "`amp_h1` .. `amp_hH`", CSV_FORMATS["amp"]
        else:
            shown, fmt = f"`{name}`", CSV_FORMATS[name]
        lines.append(f"| {shown} | {unit} | `{fmt}` | {meaning} |")
    return "\n".join(lines)


def track_table(track, *, validate: bool = True) -> dict[str, np.ndarray]:
    """The columns of a :class:`harmtrack.Track` as a table.

    Parameters
    ----------
    track : Track
    validate : bool
        Check the table with :func:`check_table` (the writers' callers may skip
        it for a track the tracker has just made: the checks cost more than the
        encoding of a short file).

    Returns
    -------
    dict
        Column arrays (float64; ``voiced`` bool, ``model_order`` int64) and
        ``"harmonic_amplitudes"`` (T, H).
    """
    amps = np.asarray(track.harmonic_amplitudes, dtype=np.float64)
    table = {
        "time_s": np.asarray(track.times, dtype=np.float64),
        "f0_hz": np.asarray(track.f0_hz, dtype=np.float64),
        "voiced": np.asarray(track.voiced, dtype=bool),
        "voicing_prob": np.asarray(track.voicing_prob, dtype=np.float64),
        "model_order": np.asarray(track.model_order).astype(np.int64),
        "hnr_db": np.asarray(track.hnr_db, dtype=np.float64),
    }
    if amps.ndim != 2:
        raise HarmtrackError(f"harmonic_amplitudes must be 2-D, got shape {amps.shape}")
    for k in range(1, amps.shape[1] + 1):
        table[amp_name(k)] = amps[:, k - 1]
    table["harmonic_amplitudes"] = amps
    if getattr(track, "rpm", None) is not None:
        table["rpm"] = np.asarray(track.rpm, dtype=np.float64)
        table["uneven_db"] = np.asarray(track.uneven_db, dtype=np.float64)
        table["uneven_flag"] = np.asarray(track.uneven_flag, dtype=bool)
        oa = np.asarray(track.order_amplitudes, dtype=np.float64)
        with np.errstate(divide="ignore"):
            oa_db = 20.0 * np.log10(oa)
        for j, q in enumerate(np.asarray(track.order_numbers, dtype=np.float64)):
            table[order_name(q)] = oa[:, j]
            table[order_name(q, True)] = oa_db[:, j]
    return check_table(table, name="<track>") if validate else table


def table_track(columns: dict, provenance: dict):
    """A :class:`harmtrack.Track` from a checked table and its provenance (the
    inverse of :func:`track_table`, for drawing or re-writing read labels)."""
    from ..result import Track

    settings = dict(provenance.get("settings") or {})
    t = columns["time_s"]
    if "hop_s" not in settings and t.size > 1:
        settings["hop_s"] = float(np.median(np.diff(t)))
    engine = {}
    if "rpm" in columns:
        q = _order_keys(columns)
        engine = dict(rpm=columns["rpm"], uneven_db=columns["uneven_db"],
                      uneven_flag=np.asarray(columns["uneven_flag"], dtype=bool),
                      order_numbers=np.array(q),
                      order_amplitudes=np.column_stack([columns[order_name(v)] for v in q])
                      if q else np.zeros((t.size, 0)))
    return Track(times=t, f0_hz=columns["f0_hz"], voiced=columns["voiced"],
                 voicing_prob=columns["voicing_prob"],
                 harmonic_amplitudes=columns["harmonic_amplitudes"],
                 model_order=columns["model_order"], hnr_db=columns["hnr_db"],
                 sr=float(provenance.get("sr") or np.nan),
                 frame_s=float(provenance.get("frame_s") or np.nan), settings=settings, **engine)


def check_table(columns: dict, *, name: str) -> dict[str, np.ndarray]:
    """Validate and normalise a table read from a file or built from a track.

    Parameters
    ----------
    columns : dict
        Column name -> 1-D array.  ``"harmonic_amplitudes"`` is optional: it is
        built from the ``amp_h<k>`` columns and, when given, must agree with them.
    name : str
        File name used in error messages.

    Returns
    -------
    dict
        Arrays with the column dtypes, plus ``"harmonic_amplitudes"``.

    Raises
    ------
    HarmtrackError
        Missing, unexpected or non-consecutive columns, columns of different
        lengths, non-finite or non-increasing times, voicing not 0/1, or
        non-integer model orders.
    """
    given = dict(columns)
    matrix = given.pop("harmonic_amplitudes", None)
    missing = [c for c in BASE_COLUMNS if c not in given]
    if missing:
        raise HarmtrackError(f"{name}: missing column(s) {', '.join(missing)}")
    amp_ks = []
    engine = {}
    for key in list(given):
        if key in _ENGINE_FIXED or _ORDER_RE.match(key):
            engine[key] = given.pop(key)
    for key in given:
        if key in BASE_COLUMNS:
            continue
        m = _AMP_RE.match(key)
        if m is None:
            raise HarmtrackError(f"{name}: unexpected column {key!r}")
        amp_ks.append(int(m.group(1)))
    n_h = len(amp_ks)
    if sorted(amp_ks) != list(range(1, n_h + 1)):
        raise HarmtrackError(
            f"{name}: amplitude columns must be amp_h1 .. amp_h{n_h} without gaps"
        )
    names = column_names(n_h)
    out: dict[str, np.ndarray] = {}
    n_rows = None
    for key in names:
        try:
            arr = np.asarray(given[key], dtype=np.float64)
        except (TypeError, ValueError):
            raise HarmtrackError(f"{name}: column {key} holds non-numbers") from None
        if arr.ndim != 1:
            raise HarmtrackError(f"{name}: column {key} is not 1-D (shape {arr.shape})")
        if n_rows is None:
            n_rows = arr.shape[0]
        elif arr.shape[0] != n_rows:
            raise HarmtrackError(
                f"{name}: column {key} has {arr.shape[0]} rows, column time_s has {n_rows}"
            )
        out[key] = arr
    t = out["time_s"]
    if not np.all(np.isfinite(t)):
        raise HarmtrackError(f"{name}: time_s holds non-finite values")
    if t.size > 1 and not np.all(np.diff(t) > 0):
        row = int(np.argmin(np.diff(t) > 0)) + 1
        raise HarmtrackError(
            f"{name}: times are not increasing (row {row + 1}: {t[row]:g} s after {t[row - 1]:g} s)"
        )
    v = out["voiced"]
    if not np.all((v == 0) | (v == 1)):
        raise HarmtrackError(f"{name}: column voiced must hold only 0 and 1")
    out["voiced"] = v.astype(bool)
    mo = out["model_order"]
    if not np.all(np.isfinite(mo) & (mo >= 0) & (mo == np.round(mo))):
        raise HarmtrackError(f"{name}: column model_order must hold whole numbers >= 0")
    out["model_order"] = mo.astype(np.int64)
    amps = np.empty((n_rows, n_h), dtype=np.float64)
    for k in range(1, n_h + 1):
        amps[:, k - 1] = out[amp_name(k)]
    if matrix is not None:
        matrix = np.asarray(matrix, dtype=np.float64)
        if matrix.shape != amps.shape or not np.array_equal(matrix, amps, equal_nan=True):
            raise HarmtrackError(
                f"{name}: harmonic_amplitudes (shape {matrix.shape}) does not match the "
                f"amp_h columns (shape {amps.shape})"
            )
    out["harmonic_amplitudes"] = amps
    if engine:
        _check_engine(engine, out, n_rows, name)
    return out


def _check_engine(engine: dict, out: dict, n_rows: int, name: str) -> None:
    """Validate the engine columns of a table into ``out``."""
    missing = [c for c in _ENGINE_FIXED if c not in engine]
    if missing:
        raise HarmtrackError(f"{name}: engine column(s) {', '.join(missing)} missing")
    qs = _order_keys(engine)
    for q in qs:
        for db in (False, True):
            if order_name(q, db) not in engine:
                raise HarmtrackError(f"{name}: column {order_name(q, db)} missing")
    for key, arr in engine.items():
        try:
            arr = np.asarray(arr, dtype=np.float64)
        except (TypeError, ValueError):
            raise HarmtrackError(f"{name}: column {key} holds non-numbers") from None
        if arr.ndim != 1 or arr.shape[0] != n_rows:
            raise HarmtrackError(
                f"{name}: column {key} has shape {arr.shape}, expected ({n_rows},)")
        out[key] = arr
    f = out["uneven_flag"]
    if not np.all((f == 0) | (f == 1)):
        raise HarmtrackError(f"{name}: column uneven_flag must hold only 0 and 1")
    out["uneven_flag"] = f.astype(bool)
