"""Label files: writing and reading frame-by-frame results with their provenance.

See :mod:`harmtrack.io.labels` for the formats and the column table.
"""

from __future__ import annotations

from .atomic import atomic_write_bytes, check_destination
from .columns import COLUMNS, column_names, column_units, columns_markdown
from .labels import (
                     FORMATS,
                     decode_labels,
                     encode_labels,
                     encode_table,
                     read_labels,
                     resolve_format,
                     write_labels,
)
from .provenance import make_provenance
from .reference import read_reference

__all__ = [
    "COLUMNS",
    "FORMATS",
    "atomic_write_bytes",
    "check_destination",
    "column_names",
    "column_units",
    "columns_markdown",
    "decode_labels",
    "encode_labels",
    "encode_table",
    "make_provenance",
    "read_labels",
    "read_reference",
    "resolve_format",
    "write_labels",
]
