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
import time
import uuid
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from engine import analysis
from engine import columns as col
from engine.machines import MachineFile, dump_machines
from engine.store import summary as summaries
from engine.store.base import IMPORT_ID, Store

#: Version of the cache's file layout; a new one ignores (and removes) older files.
CACHE_FORMAT = 1
#: Rows per Parquet row group.
ROW_GROUP_ROWS = 1_000_000
#: Engine modules whose code decides the derived columns: their source is part of the key.
_DERIVE_MODULES = ("analysis", "air", "carriers", "ceiling", "machines", "arrangements",
                   "units", "columns", "store/summary")
# Text columns of few distinct values: read as pandas categoricals (a byte or two per reading
# instead of the text itself).
_TEXT_COLUMNS = (col.MACHINE, col.SESSION, col.FLAGS, col.NOTE)
_FILE_PATTERN = re.compile(r"^import-(\d+)-([0-9a-f]{16})(\.groups|\.sample)?\.parquet$")
#: Key of the group file's metadata that holds :data:`summary.SUMMARY_FORMAT`.
_FORMAT_KEY = b"ceiling_lab_summary_format"
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


def _unified_time(tables: list[pa.Table], column: str,
                  lab_types: Iterable[pa.DataType] = ()) -> list[pa.Table]:
    """Give every table's time column one type, by the rule of :meth:`Store.readings`.

    One type among the imports stays; otherwise zone-aware UTC when any import is zone-aware
    (naive times taken as UTC), else naive; in nanoseconds. ``lab_types`` are the time types of
    the lab's other imports, not read: a read of some imports gives the type that a read of
    all would (so that a day starts at the same hour whatever was read).
    """
    types = {table.schema.field(column).type for table in tables} | set(lab_types)
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
        table = table.set_column(index, column, values)
        # pandas' own note in the file names each column's zone as it was written, and
        # to_pandas would convert back to it: without it the Arrow type decides.
        metadata = {key: value for key, value in (table.schema.metadata or {}).items()
                    if key != b"pandas"}
        unified.append(table.replace_schema_metadata(metadata or None))
    return unified


@dataclass
class ImportFiles:
    """What the cache keeps of one import: its derived readings, its groups and its sample
    (:mod:`engine.store.summary`), as the Arrow tables its three files hold."""

    derived: pa.Table
    groups: pa.Table
    sample: pa.Table


def summary_tables(derived: pd.DataFrame, machine_file: MachineFile) -> tuple[pa.Table, pa.Table]:
    """The group table and the sample of one import's derived readings (Arrow tables)."""
    groups, positions = summaries.group_table(derived, machine_file.by_id())
    table = pa.Table.from_pandas(groups, preserve_index=False)
    table = table.replace_schema_metadata({**(table.schema.metadata or {}),
                                           _FORMAT_KEY: str(summaries.SUMMARY_FORMAT).encode()})
    return table, summaries.sample_table(derived, positions)


def import_files(readings: pd.DataFrame, machine_file: MachineFile) -> ImportFiles:
    """Everything the cache keeps of one import, from its readings.

    Parameters
    ----------
    readings : pandas.DataFrame
        Exactly what ``store.readings(import_ids=[import_id])`` returns, without ``import_id``.
    machine_file : MachineFile
        The store's machines and site.
    """
    derived = analysis.derive(readings, machine_file.by_id(), machine_file.site)
    groups, sample = summary_tables(derived, machine_file)
    return ImportFiles(pa.Table.from_pandas(derived, preserve_index=False), groups, sample)


#: Name of a file written before its import's id was known (see :func:`write_pending`).
_PENDING = ".pending-"
#: Age after which a pending file left by a program that stopped is removed [s].
_PENDING_KEPT_S = 24 * 3600


def write_pending(folder: Path, files: ImportFiles) -> dict[str, Path]:
    """Write an import's three files under temporary names, while the store still writes its
    readings (the import's id, part of the files' names, is known only once it is stored);
    :meth:`DerivedCache.adopt` gives them their names after the commit.

    Returns
    -------
    dict of str to Path
        The file of each kind ("derived", "sample", "groups").
    """
    folder.mkdir(parents=True, exist_ok=True)
    token = f"{os.getpid()}-{uuid.uuid4().hex[:12]}"
    pending: dict[str, Path] = {}
    try:
        for kind, table in (("derived", files.derived), ("sample", files.sample),
                            ("groups", files.groups)):
            path = folder / f"{_PENDING}{token}.{kind}.parquet"
            pending[kind] = path
            pq.write_table(table, path, row_group_size=ROW_GROUP_ROWS, compression="snappy")
    except BaseException:
        discard_pending(pending)
        raise
    return pending


def discard_pending(pending: dict[str, Path]) -> None:
    """Remove files of :func:`write_pending` (an import that was not stored)."""
    for path in pending.values():
        with contextlib.suppress(FileNotFoundError):
            path.unlink()


def _companion(path: Path, kind: str) -> Path:
    """The group (``kind`` "groups") or sample ("sample") file of a derived file."""
    return path.with_name(f"{path.name[:-len('.parquet')]}.{kind}.parquet")


def _lab_key(files: dict[int, Path]) -> str:
    """Digest of the imports' file names (each holds the import and the machines' key)."""
    text = f"summary {summaries.SUMMARY_FORMAT}\n" + "\n".join(path.name
                                                               for path in files.values())
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def _read_lab(groups_path: Path, sample_path: Path) -> tuple[pd.DataFrame, pd.DataFrame] | None:
    """The lab's kept group table and sample, or None when they are not there (or unreadable,
    or of another format)."""
    try:
        groups = pq.read_table(groups_path)
        if (groups.schema.metadata or {}).get(_FORMAT_KEY) != \
                str(summaries.SUMMARY_FORMAT).encode():
            return None
        sample = pq.read_table(sample_path, read_dictionary=[
            name for name in _TEXT_COLUMNS if name in summaries.DASHBOARD_COLUMNS])
    except (OSError, pa.ArrowException):
        return None
    frame = groups.to_pandas()
    frame["imports"] = [tuple(int(number) for number in value) for value in frame["imports"]]
    return frame, sample.to_pandas()


def _holds_any(path: Path, machines: list[str] | None, sessions: list[str] | None) -> bool:
    """Whether an import's group file lists a group of these machines and sessions (None: any);
    True when it cannot tell."""
    try:
        groups = pq.read_table(_companion(path, "groups"), columns=["machine", "session"])
    except (OSError, pa.ArrowException):
        return True
    held = np.ones(groups.num_rows, dtype=bool)
    if machines is not None:
        held &= pc.is_in(groups.column("machine"), pa.array(machines, pa.string())).to_numpy(
            zero_copy_only=False)
    if sessions is not None:
        held &= pc.is_in(groups.column("session"), pa.array(sessions, pa.string())).to_numpy(
            zero_copy_only=False)
    return bool(held.any())


def _summary_current(path: Path) -> bool:
    """Whether a derived file's group and sample files are there, of this format."""
    groups, sample = _companion(path, "groups"), _companion(path, "sample")
    if not (groups.is_file() and sample.is_file()):
        return False
    try:
        metadata = pq.read_schema(groups).metadata or {}
    except (OSError, pa.ArrowException):
        return False
    return metadata.get(_FORMAT_KEY) == str(summaries.SUMMARY_FORMAT).encode()


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
            elif not _summary_current(path):
                self._build_summary(path, machine_file)
        keep = {path.name for path in wanted.values()}
        keep |= {_companion(path, kind).name for path in wanted.values()
                 for kind in ("groups", "sample")}
        for path in self._folder.iterdir():
            stale = _FILE_PATTERN.match(path.name) and path.name not in keep
            if path.name.startswith(_PENDING):  # left by a program that stopped half-way
                with contextlib.suppress(OSError):
                    stale = time.time() - path.stat().st_mtime > _PENDING_KEPT_S
            if stale:
                with contextlib.suppress(FileNotFoundError):
                    path.unlink()
        return wanted

    def _build(self, import_id: int, path: Path, machine_file: MachineFile) -> None:
        readings = self._store.readings(import_ids=[import_id]).drop(columns=IMPORT_ID)
        self._write(path, import_files(readings, machine_file))

    def _build_summary(self, path: Path, machine_file: MachineFile) -> None:
        """Write the group and sample files of a derived file that lacks them."""
        derived = pq.read_table(path).to_pandas()
        groups, sample = summary_tables(derived, machine_file)
        _write_atomically(sample, _companion(path, "sample"))
        _write_atomically(groups, _companion(path, "groups"))

    @staticmethod
    def _write(path: Path, files: ImportFiles) -> None:
        # The derived file first and the group file last: a reader that finds the group file
        # finds the other two (refresh builds what is missing).
        _write_atomically(files.derived, path)
        _write_atomically(files.sample, _companion(path, "sample"))
        _write_atomically(files.groups, _companion(path, "groups"))

    def _path(self, import_id: int, created_at: str, rows: int,
              machine_file: MachineFile) -> Path:
        key = machines_key(machine_file)
        name = f"import-{import_id}-{_file_key(key, import_id, created_at, rows)}.parquet"
        return self._folder / name

    def add_import(self, import_id: int, created_at: str, readings: pd.DataFrame,
                   machine_file: MachineFile) -> Path:
        """Write the files of an import just stored, from its readings in memory.

        The store calls this right after an import, so that the files are not built later by
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
            The derived file written (the one :meth:`refresh` looks for).
        """
        return self.add_files(import_id, created_at, import_files(readings, machine_file),
                              machine_file)

    def add_files(self, import_id: int, created_at: str, files: ImportFiles,
                  machine_file: MachineFile) -> Path:
        """Write the files of an import just stored from its :func:`import_files` (which the
        store makes while it writes the readings); see :meth:`add_import`.

        Returns
        -------
        Path
            The derived file written (the one :meth:`refresh` looks for).
        """
        path = self._path(import_id, created_at, files.derived.num_rows, machine_file)
        self._folder.mkdir(parents=True, exist_ok=True)
        self._write(path, files)
        return path

    def adopt(self, import_id: int, created_at: str, rows: int, pending: dict[str, Path],
              machine_file: MachineFile) -> Path:
        """Give the files of :func:`write_pending` the names of the import just stored.

        Returns
        -------
        Path
            The derived file (the one :meth:`refresh` looks for).
        """
        path = self._path(import_id, created_at, rows, machine_file)
        os.replace(pending["derived"], path)
        os.replace(pending["sample"], _companion(path, "sample"))
        os.replace(pending["groups"], _companion(path, "groups"))  # last: see _write
        return path

    def summary(self, machine_file: MachineFile | None = None) -> summaries.LabSummary:
        """The lab's groups, their findings and the readings kept to draw
        (:class:`engine.store.summary.LabSummary`).

        Kept in two files per state of the store (``lab-<key>.groups.parquet`` and
        ``lab-<key>.sample.parquet``, the key a digest of the imports' file names): the first
        call after an import or a change of machines makes them from the imports' group and
        sample files (fitting again the groups whose readings lie in several imports), later
        calls, also from other processes, read them.

        Parameters
        ----------
        machine_file : MachineFile, optional
            The store's machines and site, when the caller has just read them.
        """
        machine_file = machine_file if machine_file is not None else self._store.machines()
        files = self.refresh(machine_file)
        key = _lab_key(files)
        groups_path = self._folder / f"lab-{key}.groups.parquet"
        sample_path = self._folder / f"lab-{key}.sample.parquet"
        kept = _read_lab(groups_path, sample_path)
        if kept is None:
            kept = self._make_lab(files, machine_file)
            groups_table = pa.Table.from_pandas(
                kept[0].assign(imports=[list(value) for value in kept[0]["imports"]]),
                preserve_index=False)
            groups_table = groups_table.replace_schema_metadata(
                {**(groups_table.schema.metadata or {}),
                 _FORMAT_KEY: str(summaries.SUMMARY_FORMAT).encode()})
            with contextlib.suppress(OSError):  # a read-only folder: made again next time
                _write_atomically(pa.Table.from_pandas(kept[1], preserve_index=False),
                                  sample_path)
                _write_atomically(groups_table, groups_path)
            for path in self._folder.glob("lab-*.parquet"):
                if path not in (groups_path, sample_path):
                    with contextlib.suppress(OSError):  # gone already, or a read-only folder
                        path.unlink()
        return summaries.lab_summary(kept[0], kept[1], machine_file.by_id())

    def _make_lab(self, files: dict[int, Path], machine_file: MachineFile
                  ) -> tuple[pd.DataFrame, pd.DataFrame]:
        groups = [pq.read_table(_companion(path, "groups")) for path in files.values()]
        samples = [pq.read_table(_companion(path, "sample"), read_dictionary=[
            name for name in _TEXT_COLUMNS if name in summaries.DASHBOARD_COLUMNS])
            for path in files.values()]
        if groups:
            groups = _unified_time(_unified_time(groups, "time_min"), "time_max")
        samples = [table.append_column(IMPORT_ID, pa.array(
            np.full(table.num_rows, import_id, dtype=np.int64)))
            for import_id, table in zip(files, samples, strict=True)]
        if samples and col.TIME in samples[0].column_names:
            samples = _unified_time(samples, col.TIME)
        # One Arrow table made into one frame: the same column types as the kept file gives.
        sample = (pa.concat_tables(samples, promote_options="permissive").to_pandas()
                  if samples else None)
        parts = [(import_id, table.to_pandas()) for import_id, table
                 in zip(files, groups, strict=True)]

        def read_groups(keys: list[tuple[str, str]], import_ids: list[int]) -> pd.DataFrame:
            return self.read(columns=analysis.FINDINGS_INPUT_COLUMNS,
                             machines=sorted({machine for machine, _ in keys}),
                             sessions=sorted({session for _, session in keys}),
                             import_ids=import_ids, machine_file=machine_file)

        return summaries.combine(parts, sample, machine_file.by_id(), read_groups)

    def read(self, columns: Sequence[str] | None = None,
             machines: Iterable[str] | None = None,
             import_ids: Iterable[int] | None = None,
             machine_file: MachineFile | None = None,
             sessions: Iterable[str] | None = None,
             rows: pc.Expression | None = None) -> pd.DataFrame:
        """Derived readings, only the columns, machines and sessions asked for.

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
        sessions : iterable of str, optional
            Keep only the readings of these sessions ("" for readings without one); None keeps
            all. An import that holds none of the machines' readings in these sessions (its
            group file tells) is not opened.
        rows : pyarrow.compute.Expression, optional
            Keep only the readings for which it is true (e.g.
            :func:`engine.store.summary.humidity_condition`), applied as each file is read.

        Returns
        -------
        pandas.DataFrame
            The rows and values of ``analysis.derive(store.readings(), machines, site)`` (in
            the same order, with a fresh RangeIndex), restricted as asked.
        """
        files = self.refresh(machine_file)
        every_file = list(files.values())
        if import_ids is not None:
            chosen = {int(value) for value in import_ids}
            files = {key: path for key, path in files.items() if key in chosen}
        wanted = None if columns is None else [name for name in dict.fromkeys(columns)
                                               if name != IMPORT_ID]
        condition = None
        machine_names = None if machines is None else [str(name) for name in machines]
        session_names = None if sessions is None else [str(name) for name in sessions]
        if machine_names is not None:
            condition = pc.field(col.MACHINE).isin(machine_names)
        if session_names is not None:
            in_sessions = pc.field(col.SESSION).isin(session_names)
            if "" in session_names:  # readings without a session
                in_sessions = in_sessions | pc.field(col.SESSION).is_null()
            condition = in_sessions if condition is None else condition & in_sessions
        if condition is not None:
            files = {key: path for key, path in files.items()
                     if _holds_any(path, machine_names, session_names)}
        if rows is not None:
            condition = rows if condition is None else condition & rows
        tables = []
        for import_id, path in files.items():
            table = pq.read_table(path, columns=wanted, filters=condition,
                                  read_dictionary=[name for name in _TEXT_COLUMNS
                                                   if wanted is None or name in wanted])
            tables.append(table.append_column(
                IMPORT_ID, pa.array(np.full(table.num_rows, import_id, dtype=np.int64))))
        if not tables:
            return self._empty(wanted)
        if col.TIME in tables[0].column_names:
            lab_types = [] if len(tables) == len(every_file) else [
                pq.read_schema(path).field(col.TIME).type for path in every_file]
            tables = _unified_time(tables, col.TIME, lab_types)
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
