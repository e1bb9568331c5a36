"""Blocks of readings: how the embedded store keeps its readings, many to a row of SQLite.

Since schema version 6 the SQLite store keeps an import's readings in blocks of up to
:data:`engine.store.sqlite.CHUNK_ROWS` readings, each one row of ``reading_blocks`` holding the
block's columns as an Arrow IPC stream (compressed with zstd). Written one value at a time,
10^6 readings of 15 columns took SQLite about 4 s of Python's binding and stepping per import
(most of what was left of saving ten million readings, against a target of 40 s); written as
blocks, SQLite stores a few blobs per import and the readings are read back column by column.
SQLite stays the store of record: blocks are written and removed in the same transactions as
their import, and tied to it by a foreign key.

A block holds the columns of :data:`engine.store.schema._READING_SQL`, each as the store writes
it (:class:`engine.store.frames._Prepared`): ``row`` int64, the times as int64 nanoseconds
(pandas' NaT value for a missing time), the floats as float64 bit for bit (-0.0, infinities
and NaN kept), the texts as UTF-8 (dictionary-encoded: a machine id or a session name is
written once per block).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from engine.columns import FLAGS, MACHINE, SESSION

#: Text columns of few distinct values, dictionary-encoded in a block.
_DICTIONARY_COLUMNS = (MACHINE, SESSION, FLAGS)
_OPTIONS = pa.ipc.IpcWriteOptions(compression="zstd")


def encode_block(names: Sequence[str], arrays: Sequence[np.ndarray], start: int,
                 stop: int) -> bytes:
    """One block of readings as the bytes ``reading_blocks.data`` holds.

    Parameters
    ----------
    names : sequence of str
        The SQL column names, in order.
    arrays : sequence of numpy.ndarray
        One array per column (numbers, or Python text objects), as the store writes them.
    start, stop : int
        The readings of the block, ``arrays[k][start:stop]``.
    """
    columns = []
    for name, values in zip(names, arrays, strict=True):
        part = values[start:stop]
        if part.dtype == object:
            column = pa.array(part, type=pa.string())
            if name in _DICTIONARY_COLUMNS:
                column = column.dictionary_encode()
        else:
            column = pa.array(part)
        columns.append(column)
    batch = pa.RecordBatch.from_arrays(columns, names=list(names))
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, batch.schema, options=_OPTIONS) as writer:
        writer.write_batch(batch)
    return sink.getvalue().to_pybytes()


def decode_block(data: bytes, names: Sequence[str] | None = None,
                 keep: Sequence[tuple[str, list[str]]] = ()) -> pa.Table:
    """The readings of a block, as an Arrow table.

    Parameters
    ----------
    data : bytes
        ``reading_blocks.data``.
    names : sequence of str, optional
        Columns to keep, in this order; None keeps all.
    keep : sequence of (str, list of str)
        Keep only the readings whose text column holds one of the values (e.g. machine ids).
    """
    table = pa.ipc.open_stream(pa.py_buffer(data)).read_all()
    for name, values in keep:
        table = table.filter(pc.is_in(table.column(name).cast(pa.string()),
                                      value_set=pa.array(values, type=pa.string())))
    if names is not None:
        table = table.select(list(names))
    return table


def column_values(table: pa.Table, name: str) -> np.ndarray:
    """A column of decoded blocks as the numpy array the store's SQL read gives: numbers as
    they are, texts as Python text objects."""
    column = table.column(name)
    if pa.types.is_dictionary(column.type) or pa.types.is_string(column.type) or \
            pa.types.is_large_string(column.type):
        return column.cast(pa.string()).to_numpy(zero_copy_only=False).astype(object)
    return column.to_numpy()
