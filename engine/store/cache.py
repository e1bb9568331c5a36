"""The derived cache: each import's readings with their derived columns, in Parquet files.

The store of record (:mod:`engine.store.sqlite`) keeps what was measured; this cache keeps what
:func:`engine.analysis.derive` makes of it, so that a page reads only the columns and rows it
needs instead of reading every reading from SQLite and deriving again on each visit.

One file per import, ``import-<id>-<key>.parquet`` in the store's :attr:`Store.cache_folder`.
The key is a digest of everything the derived columns depend on: the machines and the site (as
their machines-file text), the import (its id, creation time and number of readings) and the
source of the engine modules that derive reads. When a machine or the site changes the key
changes, so the files are rebuilt on the next :meth:`DerivedCache.refresh`; files of deleted
imports or of old keys are removed then. Files are written to a temporary name and renamed
(:func:`os.replace`), so a reader never sees half a file, also when two programs build the same
file at once.

:func:`engine.analysis.derive` works reading by reading, so the derived readings of the whole
store are exactly the derived readings of each import, one after the other: the cache changes
no value (``tests/test_store_cache.py`` checks it bit for bit).

Parquet (through pyarrow, already a requirement) was chosen over Arrow IPC files and DuckDB:
its files are column-wise and compressed (a third to a half of the raw size for these columns),
a reader takes only the columns it asks for, and pyarrow reads them on all cores; DuckDB would
add a dependency for filters and group sums that numpy does here in well under a second.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import re
import uuid
from collections.abc import Iterable, Sequence
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from engine import analysis
from engine import columns as col
from engine.machines import MachineFile, dump_machines
from engine.store.base import IMPORT_ID, Store

#: Version of the cache's file layout; a new one ignores (and removes) older files.
CACHE_FORMAT = 1
#: Rows per Parquet row group.
ROW_GROUP_ROWS = 1_000_000
#: Engine modules whose code decides the derived columns: their source is part of the key.
_DERIVE_MODULES = ("analysis", "air", "carriers", "ceiling", "machines", "arrangements",
                   "units", "columns")
# Text columns of few distinct values: read as pandas categoricals (a byte or two per reading
# instead of the text itself).
_TEXT_COLUMNS = (col.MACHINE, col.SESSION, col.FLAGS, col.NOTE)
_FILE_PATTERN = re.compile(r"^import-(\d+)-([0-9a-f]{16})\.parquet$")
_engine_digest: str | None = None


def _engine_source_digest() -> str:
    """Digest of the source of the engine modules that derive uses (once per process)."""
    global _engine_digest
    if _engine_digest is None:
        digest = hashlib.sha256(f"format {CACHE_FORMAT}".encode())
        folder = Path(analysis.__file__).parent
        for name in _DERIVE_MODULES:
            path = folder / f"{name}.py"
            digest.update(path.read_bytes() if path.is_file() else name.encode())
        _engine_digest = digest.hexdigest()
    return _engine_digest


def machines_key(machine_file: MachineFile) -> str:
    """Digest of the machines, the site and the engine's derive code (hex text)."""
    digest = hashlib.sha256(_engine_source_digest().encode())
    digest.update(dump_machines(machine_file).encode("utf-8"))
    return digest.hexdigest()


def _file_key(machines: str, import_id: int, created_at: str, rows: int) -> str:
    text = f"{machines}\n{import_id}\n{created_at}\n{rows}"
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def _write_atomically(table: pa.Table, path: Path) -> None:
    temporary = path.with_name(f".{path.name}.{os.getpid()}-{uuid.uuid4().hex[:8]}.tmp")
    try:
        pq.write_table(table, temporary, row_group_size=ROW_GROUP_ROWS, compression="snappy")
        os.replace(temporary, path)
    finally:
        with contextlib.suppress(FileNotFoundError):
            temporary.unlink()


def _unified_time(tables: list[pa.Table], column: str) -> list[pa.Table]:
    """Give every table's time column one type, by the rule of :meth:`Store.readings`.

    One type among the imports stays; otherwise zone-aware UTC when any import is zone-aware
    (naive times taken as UTC), else naive; in nanoseconds.
    """
    types = {table.schema.field(column).type for table in tables}
    if len(types) <= 1:
        return tables
    aware = any(getattr(kind, "tz", None) for kind in types)
    target = pa.timestamp("ns", tz="UTC" if aware else None)
    unified = []
    for table in tables:
        index = table.schema.get_field_index(column)
        values = table.column(index)
        if values.type != target:
            # Naive -> UTC keeps the wall-clock numbers, as the store does; units -> ns.
            values = values.cast(pa.timestamp(values.type.unit, tz=target.tz)).cast(target)
        unified.append(table.set_column(index, column, values))
    return unified


def derived_table(readings: pd.DataFrame, machine_file: MachineFile) -> pa.Table:
    """The derived readings of one import as the Arrow table its file holds.

    Parameters
    ----------
    readings : pandas.DataFrame
        Exactly what ``store.readings(import_ids=[import_id])`` returns, without ``import_id``.
    machine_file : MachineFile
        The store's machines and site.
    """
    derived = analysis.derive(readings, machine_file.by_id(), machine_file.site)
    return pa.Table.from_pandas(derived, preserve_index=False)


def _write_derived(readings: pd.DataFrame, path: Path, machine_file: MachineFile) -> None:
    _write_atomically(derived_table(readings, machine_file), path)


class DerivedCache:
    """The derived readings of a store, kept per import in Parquet files.

    Parameters
    ----------
    store : Store
        Any back end; its machines, site, imports and readings are read through the
        :class:`~engine.store.base.Store` interface.
    folder : path-like, optional
        Where the files go; default :attr:`Store.cache_folder` (beside the SQLite file).
    """

    def __init__(self, store: Store, folder: str | os.PathLike[str] | None = None) -> None:
        self._store = store
        self._folder = Path(folder) if folder is not None else store.cache_folder

    @property
    def folder(self) -> Path:
        """The cache's folder."""
        return self._folder

    def refresh(self, machine_file: MachineFile | None = None) -> dict[int, Path]:
        """Build the files that are missing for the store as it is now; remove stale ones.

        Parameters
        ----------
        machine_file : MachineFile, optional
            The store's machines and site, when the caller has just read them.

        Returns
        -------
        dict of int to Path
            File of each import, in import order.
        """
        machine_file = machine_file if machine_file is not None else self._store.machines()
        key = machines_key(machine_file)
        imports = self._store.imports()
        self._folder.mkdir(parents=True, exist_ok=True)
        wanted: dict[int, Path] = {}
        for import_id, created_at, rows in zip(imports["id"].tolist(),
                                               imports["created_at"].tolist(),
                                               imports["rows"].tolist(), strict=True):
            name = f"import-{import_id}-{_file_key(key, import_id, created_at, rows)}.parquet"
            wanted[import_id] = self._folder / name
        for import_id, path in wanted.items():
            if not path.is_file():
                self._build(import_id, path, machine_file)
        keep = {path.name for path in wanted.values()}
        for path in self._folder.iterdir():
            if _FILE_PATTERN.match(path.name) and path.name not in keep:
                with contextlib.suppress(FileNotFoundError):
                    path.unlink()
        return wanted

    def _build(self, import_id: int, path: Path, machine_file: MachineFile) -> None:
        readings = self._store.readings(import_ids=[import_id]).drop(columns=IMPORT_ID)
        _write_derived(readings, path, machine_file)

    def add_import(self, import_id: int, created_at: str, readings: pd.DataFrame,
                   machine_file: MachineFile) -> Path:
        """Write the file of an import just stored, from its readings in memory.

        The store calls this right after an import, so that the file is not built later by
        reading the readings back (most of the cost of :meth:`refresh`).

        Parameters
        ----------
        import_id : int
            The import's id.
        created_at : str
            Its ``created_at`` as the store keeps it.
        readings : pandas.DataFrame
            Exactly what ``store.readings(import_ids=[import_id])`` returns, without
            ``import_id`` (the store builds it from the arrays it wrote).
        machine_file : MachineFile
            The store's machines and site now.

        Returns
        -------
        Path
            The file written (the one :meth:`refresh` looks for).
        """
        return self.add_table(import_id, created_at, derived_table(readings, machine_file),
                              machine_file)

    def add_table(self, import_id: int, created_at: str, table: pa.Table,
                  machine_file: MachineFile) -> Path:
        """Write the file of an import just stored from its :func:`derived_table` (which the
        store derives while SQLite writes the readings); see :meth:`add_import`.

        Returns
        -------
        Path
            The file written (the one :meth:`refresh` looks for).
        """
        key = machines_key(machine_file)
        rows = table.num_rows
        name = f"import-{import_id}-{_file_key(key, import_id, created_at, rows)}.parquet"
        self._folder.mkdir(parents=True, exist_ok=True)
        path = self._folder / name
        _write_atomically(table, path)
        return path

    def read(self, columns: Sequence[str] | None = None,
             machines: Iterable[str] | None = None,
             import_ids: Iterable[int] | None = None,
             machine_file: MachineFile | None = None) -> pd.DataFrame:
        """Derived readings, only the columns and machines asked for.

        Parameters
        ----------
        columns : sequence of str, optional
            Columns to read (``import_id`` is always there); None reads every column.
        machines : iterable of str, optional
            Keep only these machines' readings; None keeps all.
        import_ids : iterable of int, optional
            Keep only these imports; None keeps all.
        machine_file : MachineFile, optional
            The store's machines and site, when the caller has just read them.

        Returns
        -------
        pandas.DataFrame
            The rows and values of ``analysis.derive(store.readings(), machines, site)`` (in
            the same order, with a fresh RangeIndex), restricted as asked.
        """
        files = self.refresh(machine_file)
        if import_ids is not None:
            chosen = {int(value) for value in import_ids}
            files = {key: path for key, path in files.items() if key in chosen}
        wanted = None if columns is None else [name for name in dict.fromkeys(columns)
                                               if name != IMPORT_ID]
        filters = None
        if machines is not None:
            filters = [(col.MACHINE, "in", [str(name) for name in machines])]
        tables = []
        for import_id, path in files.items():
            table = pq.read_table(path, columns=wanted, filters=filters,
                                  read_dictionary=[name for name in _TEXT_COLUMNS
                                                   if wanted is None or name in wanted])
            tables.append(table.append_column(
                IMPORT_ID, pa.array(np.full(table.num_rows, import_id, dtype=np.int64))))
        if not tables:
            return self._empty(wanted)
        if col.TIME in tables[0].column_names:
            tables = _unified_time(tables, col.TIME)
        table = pa.concat_tables(tables)
        del tables
        frame = table.to_pandas(self_destruct=True)  # each column freed once converted
        del table
        # Arrow's allocator keeps what it freed for reuse: at 10^7 readings that was 1 GB of
        # the process's memory, held for good.
        pa.default_memory_pool().release_unused()
        return frame

    def _empty(self, columns: list[str] | None) -> pd.DataFrame:
        empty = analysis.derive(self._store.readings(import_ids=[]), {})
        if columns is not None:
            empty = empty[[name for name in columns if name in empty.columns] + [IMPORT_ID]]
        return empty.reset_index(drop=True)
