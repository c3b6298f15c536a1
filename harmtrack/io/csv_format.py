"""Label files as comma-separated text.

Layout::

    # harmtrack <version> f0 and harmonic-amplitude labels
    # provenance: <one-line JSON, sorted keys>
    # units: time_s s; f0_hz Hz (nan = unvoiced); ...
    time_s,f0_hz,voiced,voicing_prob,model_order,hnr_db,amp_h1,...,amp_hH
    0.000000,nan,0,0.0312,0,nan,nan,...

Numbers use fixed formats (:data:`harmtrack.io.columns.CSV_FORMATS`); NaN is
written ``nan``.  Lines end with ``\\n``; the text is UTF-8 (plain ASCII unless
the provenance holds other characters).
"""

from __future__ import annotations

import json

import numpy as np

from ..errors import HarmtrackError
from .columns import column_format, table_columns
from .provenance import dumps_compact

__all__ = ["encode", "encode_head", "encode_rows", "decode", "PROVENANCE_PREFIX"]

#: Start of the comment line that carries the provenance record.
PROVENANCE_PREFIX = "# provenance: "


def _units_line(n_harmonics: int, engine: bool = False) -> str:
    amps = f"amp_h1..amp_h{n_harmonics}" if n_harmonics > 1 else "amp_h1"
    parts = [
        "time_s s", "f0_hz Hz (nan = unvoiced)", "voiced 0/1", "voicing_prob probability",
        "model_order harmonics", "hnr_db dB (nan = unvoiced)",
    ]
    if n_harmonics:
        parts.append(f"{amps} linear amplitude, full scale = 1 "
                     "(0 = absent, nan = unvoiced or above the band)")
    if engine:
        parts += ["rpm rpm", "uneven_db dB", "uneven_flag 0/1",
                  "order_<q> linear amplitude of engine order q", "order_<q>_db dB re full scale"]
    return "# units: " + "; ".join(parts)


def encode(table: dict, provenance: dict) -> bytes:
    """CSV bytes of a checked table (see :func:`harmtrack.io.columns.check_table`)."""
    return (encode_head(table, provenance) + encode_rows(table)).encode("utf-8")


def encode_head(table: dict, provenance: dict) -> str:
    """The comment lines and the header row (what precedes the rows), as text."""
    n_h = table["harmonic_amplitudes"].shape[1]
    head = [
        f"# {provenance.get('tool', 'harmtrack')} {provenance.get('version', '')} "
        "f0 and harmonic-amplitude labels",
        PROVENANCE_PREFIX + dumps_compact(provenance),
        _units_line(n_h, engine="rpm" in table),
        ",".join(table_columns(table)),
    ]
    return "\n".join(head) + "\n"


def encode_rows(table: dict) -> str:
    """The rows of a table, one line each, as text (so a long file can be
    written part by part: the head, then the rows of each part)."""
    cells = []
    for name in table_columns(table):
        fmt = column_format(name)
        values = table[name]
        if fmt == "%d":
            values = values.astype(np.int64)
        cells.append([fmt % v for v in values.tolist()])
    return "".join(",".join(row) + "\n" for row in zip(*cells))


def decode(data: bytes, *, name: str) -> tuple[dict, dict]:
    """Columns (unchecked) and provenance of CSV label bytes.

    Raises
    ------
    HarmtrackError
        Not text, no header row, duplicate header names, ragged rows,
        non-numeric cells or an unreadable provenance line.
    """
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise HarmtrackError(f"{name}: not a CSV label file (not UTF-8 text)") from None
    lines = text.splitlines()
    provenance: dict = {}
    i = 0
    while i < len(lines) and lines[i].startswith("#"):
        if lines[i].startswith(PROVENANCE_PREFIX):
            provenance = _parse_provenance(lines[i][len(PROVENANCE_PREFIX):], name, i + 1)
        i += 1
    while i < len(lines) and not lines[i].strip():
        i += 1
    if i == len(lines):
        raise HarmtrackError(f"{name}: no header row (expected time_s,f0_hz,...)")
    header = [h.strip() for h in lines[i].split(",")]
    dup = sorted({h for h in header if header.count(h) > 1})
    if dup:
        raise HarmtrackError(f"{name}: duplicate column(s) {', '.join(dup)} in the header")
    header_line = i + 1
    body = []
    line_nos = []
    for j in range(i + 1, len(lines)):
        if not lines[j].strip():
            continue
        fields = lines[j].split(",")
        if len(fields) != len(header):
            raise HarmtrackError(
                f"{name}: line {j + 1} has {len(fields)} fields but the header on line "
                f"{header_line} has {len(header)} (ragged row)"
            )
        body.append(fields)
        line_nos.append(j + 1)
    values = _to_numbers(body, header, line_nos, name)
    columns = {h: values[:, c] for c, h in enumerate(header)}
    return columns, provenance


def _parse_provenance(text: str, name: str, line_no: int) -> dict:
    try:
        record = json.loads(text)
    except json.JSONDecodeError as exc:
        raise HarmtrackError(
            f"{name}: line {line_no}: provenance is not valid JSON ({exc.msg})"
        ) from None
    if not isinstance(record, dict):
        raise HarmtrackError(f"{name}: line {line_no}: provenance is not a JSON object")
    return record


def _to_numbers(body: list, header: list, line_nos: list, name: str) -> np.ndarray:
    if not body:
        return np.empty((0, len(header)))
    try:
        return np.array(body, dtype=np.float64)
    except ValueError:
        pass
    for fields, line_no in zip(body, line_nos):
        for col, cell in zip(header, fields):
            try:
                float(cell)
            except ValueError:
                raise HarmtrackError(
                    f"{name}: line {line_no}: {cell.strip()!r} in column {col} is not a number"
                ) from None
    raise HarmtrackError(f"{name}: cells that are not numbers")  # pragma: no cover
