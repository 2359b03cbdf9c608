"""Digests of record files that compare values, types and encoding, not the data contract's descriptions."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq


def record_sha256(path: Path) -> str:
    """The SHA-256 of a file's bytes; for Parquet, of the file written again without the column descriptions
    abm.tables adds as metadata (digests pinned before they existed still hold for the same values)."""
    if path.suffix != ".parquet":
        return hashlib.sha256(path.read_bytes()).hexdigest()
    table = pq.read_table(path)
    bare = pa.Table.from_arrays(table.columns, schema=pa.schema([f.remove_metadata() for f in table.schema]))
    sink = pa.BufferOutputStream()
    pq.write_table(bare, sink, compression="zstd")
    return hashlib.sha256(sink.getvalue().to_pybytes()).hexdigest()
