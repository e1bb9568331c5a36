"""The embedded store of record: machines, the site, imports of readings and environment logs in
one SQLite file.

:func:`open_store` opens (and creates, or migrates) the file::

    with open_store() as store:
        store.save_machine(machine)
        import_id = store.import_readings(frame, "Tuesday session", source="meter.csv")
        frame = store.readings(machines=["gallery-twin"])

The schema and its migrations are in :mod:`engine.store.schema`; the frames' conversions in
:mod:`engine.store.frames`; the lab bundle in :mod:`engine.store.bundle`.

Every write is one transaction (``BEGIN IMMEDIATE`` ... ``COMMIT``): an import is stored whole
or not at all, also when the program is killed half-way. A store that another program is
writing waits (``busy_timeout``) and retries with backoff for at most :data:`LOCK_WAIT_S`.
"""

from __future__ import annotations

import contextlib
import json
import os
import sqlite3
import threading
import time
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import TypeVar

import numpy as np
import pandas as pd
import pyarrow as pa

from engine.columns import (
    MACHINE,
    READING_COLUMNS,
    ROW,
    SESSION,
    TIME,
)
from engine.errors import InputError
from engine.machines import (
    Machine,
    site_from_table,
)
from engine.store.base import (
    IMPORT_ID,
    STORE_ENV_VAR,
    Store,
    _Deriving,
    is_server_location,
    store_location,
)
from engine.store.blocks import column_values, decode_block, encode_block
from engine.store.bundle import BundleReader, _bundle_key, _bundle_machines
from engine.store.frames import (
    _IMPORT_COLUMNS,
    _TEXT_DTYPE,
    _machine_text,
    _now_text,
    _prepare_import,
    _Prepared,
    _restore_time,
)
from engine.store.schema import (
    _ENVIRONMENT_SQL,
    _NAT_NS,
    _READING_SQL,
    _TIME_NS,
    migrate,
    schema_version,
)

#: How long SQLite itself waits for another writer before it reports "database is locked" [s].
BUSY_TIMEOUT_S = 30.0
#: Longest total wait, retries included, before a write gives up on a locked store [s].
LOCK_WAIT_S = 120.0
#: Readings written per ``executemany`` call.
CHUNK_ROWS = 20_000
_MAX_LISTED_VALUES = 500  # longer filter lists go to SQLite as one JSON array
_FETCH_ROWS = 10_000  # rows converted at a time when reading

_Result = TypeVar("_Result")


def open_store(path: str | os.PathLike[str] | None = None) -> Store:
    """Open the lab's store, creating it (and its folders), and migrating an older one.

    Parameters
    ----------
    path : str or path-like, optional
        The SQLite file, or a PostgreSQL URL (``postgresql://ACCOUNT@HOST/DATABASE``, opened
        by :func:`engine.store.postgres.open_server_store`); default
        :func:`~engine.store.base.store_location` (``CEILING_LAB_DB``, else the file in the
        user's data folder).

    Returns
    -------
    Store
        Open; close it with :meth:`Store.close` or use it in a ``with`` block.

    Raises
    ------
    InputError
        When the folder cannot be created, the file is not a Ceiling Lab store, or it was
        written by a newer version.
    """
    location = path if path is not None else store_location()
    if is_server_location(location):
        from engine.store.postgres import open_server_store  # psycopg only when it is used

        return open_server_store(str(location))
    path = Path(location)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise InputError(f"{path.parent}: the store's folder cannot be created "
                         f"({error.strerror or error}); set {STORE_ENV_VAR} to a writable "
                         "file") from None
    try:
        connection = sqlite3.connect(path, timeout=BUSY_TIMEOUT_S, isolation_level=None,
                                     check_same_thread=False)
    except sqlite3.Error as error:
        raise (_fault(error, path) or
               InputError(f"{path}: the store cannot be opened ({error})")) from None
    try:
        _retry(lambda: _configure(connection), path)
        _retry(lambda: migrate(connection, path), path)
    except sqlite3.DatabaseError as error:
        connection.close()
        fault = _fault(error, path)
        if fault is not None and not _error_name(error).startswith("SQLITE_NOTADB"):
            raise fault from None
        raise InputError(f"{path}: cannot be opened as a Ceiling Lab store ({error}); choose "
                         f"another file with {STORE_ENV_VAR}") from None
    except BaseException:
        connection.close()
        raise
    return SQLiteStore(connection, path)

def _configure(connection: sqlite3.Connection) -> None:
    connection.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
    connection.execute("PRAGMA foreign_keys = ON")
    connection.execute("PRAGMA journal_mode = WAL")
    # In WAL mode NORMAL loses no committed transaction when a program dies, only on a power cut.
    connection.execute("PRAGMA synchronous = NORMAL")
    connection.execute("PRAGMA cache_size = -65536")  # 64 MiB: big imports touch many pages


def _is_locked(error: sqlite3.OperationalError) -> bool:
    text = str(error).lower()
    return "locked" in text or "busy" in text


def _error_name(error: sqlite3.Error) -> str:
    return getattr(error, "sqlite_errorname", "") or ""


def _fault(error: sqlite3.Error, path: Path) -> InputError | None:
    """The user's message for a fault of the file or the disk, or None for other errors."""
    name = _error_name(error)
    if name.startswith("SQLITE_FULL"):
        return InputError(f"{path}: the disk is full (or the store reached its size limit), "
                          "so this change was not stored; what was stored before is kept. "
                          "Free space on the disk and try again")
    if name.startswith("SQLITE_READONLY"):
        return InputError(f"{path}: the store file is read-only ({error}), so nothing can be "
                          "stored; check the file's permissions (you must be able to write "
                          f"it and its folder), or set {STORE_ENV_VAR} to a writable file")
    if name.startswith(("SQLITE_CORRUPT", "SQLITE_NOTADB")):
        return InputError(f"{path}: the store file is damaged ({error}); keep it aside, open "
                          f"a new store (set {STORE_ENV_VAR} to a new file) and restore the "
                          "lab from its latest lab bundle")
    if name.startswith("SQLITE_CANTOPEN") or name.startswith("SQLITE_PERM"):
        if not os.access(path.parent, os.W_OK):
            return InputError(f"{path.parent}: the store's folder is not writable, so the "
                              "store cannot be opened (it needs to write files beside the "
                              f"store); check the folder's permissions, or set "
                              f"{STORE_ENV_VAR} to a file in a writable folder")
        return InputError(f"{path}: the store file cannot be opened ({error}); check that "
                          f"it exists and that you may read and write it, or set "
                          f"{STORE_ENV_VAR} to another file")
    if name.startswith("SQLITE_IOERR"):
        return InputError(f"{path}: the store could not be read or written ({error}): the "
                          "disk may be full or failing. This change was not stored; what was "
                          "stored before is kept. Free space or check the drive and try again")
    return None


@contextlib.contextmanager
def _faults(path: Path) -> Iterator[None]:
    """Faults of the file or the disk as the engine's messages (see :func:`_fault`)."""
    try:
        yield
    except sqlite3.DatabaseError as error:
        fault = _fault(error, path)
        if fault is None:
            raise
        raise fault from None


def _retry(work: Callable[[], _Result], path: Path) -> _Result:
    """Run ``work``, again with backoff while the store is locked, for at most LOCK_WAIT_S."""
    deadline = time.monotonic() + LOCK_WAIT_S
    delay = 0.05
    while True:
        try:
            return work()
        except sqlite3.OperationalError as error:
            if not _is_locked(error):
                raise
            if time.monotonic() + delay > deadline:
                raise InputError(f"{path}: the store is busy: another program has been writing "
                                 f"to it for more than {LOCK_WAIT_S:.0f} s; close the other "
                                 "Ceiling Lab window or command and try again") from None
            time.sleep(delay)
            delay = min(2 * delay, 2.0)


def _frame(columns: Sequence[str], floats: Sequence[str], gathered: list[np.ndarray],
           dtypes: dict[int, str]) -> pd.DataFrame:
    """The frame of a table's columns read back: import ids first in ``gathered``, then one
    array per column (times as int64 nanoseconds, numbers, texts as objects)."""
    import_ids = gathered[0]
    data: dict[str, object] = {}
    for column, values in zip(columns, gathered[1:], strict=True):
        if column == TIME:
            present = {dtypes.get(import_id, "datetime64[ns]")
                       for import_id in np.unique(import_ids).tolist()}
            data[column] = _restore_time(values, present)
        elif column in floats or column == ROW:
            data[column] = values  # NULL (None) became NaN in the float conversion
        else:
            data[column] = pd.Series(values, dtype=object).astype(_TEXT_DTYPE)
    data[IMPORT_ID] = import_ids
    return pd.DataFrame(data, columns=[*columns, IMPORT_ID])


_ENVIRONMENT_NAMES = ", ".join(f'"{column}"' for column in ("import_id", *_ENVIRONMENT_SQL))
_ENVIRONMENT_INSERT = (f"INSERT INTO environment ({_ENVIRONMENT_NAMES}) "
                       f"VALUES ({', '.join('?' * (len(_ENVIRONMENT_SQL) + 1))})")
_BLOCK_INSERT = "INSERT INTO reading_blocks (import_id, block, rows, data) VALUES (?, ?, ?, ?)"


def _insert_chunk(connection: sqlite3.Connection, statement: str,
                  rows: Iterable[tuple[object, ...]]) -> None:
    """Write one chunk of rows (a seam for tests that make a chunk fail)."""
    connection.executemany(statement, rows)



class SQLiteStore(Store):
    """The embedded store of record: one SQLite file, a connection and the operations on it.

    Use :func:`open_store` to make one. A store can be used from several threads (each call
    holds a lock); several programs may open the same file at once.
    """

    def __init__(self, connection: sqlite3.Connection, path: Path) -> None:
        self._connection = connection
        self._path = path
        self._lock = threading.RLock()

    # --- life cycle ----------------------------------------------------------------------------
    @property
    def path(self) -> Path:
        """The store's file."""
        return self._path

    @property
    def schema_version(self) -> int:
        """Schema version of the open store (equal to :data:`SCHEMA_VERSION`)."""
        with self._lock:
            return schema_version(self._connection)

    def close(self) -> None:
        """Close the connection; the store cannot be used afterwards."""
        with self._lock:
            self._connection.close()

    @property
    def cache_folder(self) -> Path:
        """The derived cache's folder, beside the file: ``<file>.derived``."""
        return self._path.with_name(self._path.name + ".derived")

    def __repr__(self) -> str:
        return f"Store({str(self._path)!r})"

    def _write(self, work: Callable[[sqlite3.Connection], _Result]) -> _Result:
        """Run ``work`` in one write transaction; all of it is stored or none."""
        connection = self._connection

        def attempt() -> _Result:
            connection.execute("BEGIN IMMEDIATE")
            try:
                result = work(connection)
                connection.execute("COMMIT")
            except BaseException:
                if connection.in_transaction:
                    connection.execute("ROLLBACK")
                raise
            return result

        with self._lock, _faults(self._path):
            return _retry(attempt, self._path)

    @contextlib.contextmanager
    def _snapshot(self) -> Iterator[None]:
        """Hold one read transaction, so that several queries see the same state of the file."""
        with self._lock, _faults(self._path):
            if self._connection.in_transaction:
                yield
                return
            self._connection.execute("BEGIN")
            try:
                yield
            finally:
                self._connection.execute("COMMIT")

    def _query(self, statement: str, parameters: Sequence[object] = ()) -> list[tuple]:
        with self._lock, _faults(self._path):
            return _retry(lambda: self._connection.execute(statement, parameters).fetchall(),
                          self._path)

    # --- machines and site ---------------------------------------------------------------------
    def save_machine(self, machine: Machine, demo: bool = False) -> None:
        """See :meth:`engine.store.base.Store.save_machine`."""
        text = _machine_text(machine)
        self._write(lambda connection: _save_machine(connection, machine, text, demo))

    def delete_machine(self, machine_id: str) -> bool:
        """Remove a machine; its readings stay. Returns whether it was in the store."""
        return self._write(lambda connection: connection.execute(
            "DELETE FROM machines WHERE id = ?", (machine_id,)).rowcount > 0)

    def _machine_rows(self) -> tuple[list[tuple], list[tuple]]:
        return (self._query("SELECT key, value FROM site ORDER BY rowid"),
                self._query("SELECT id, toml FROM machines ORDER BY rowid"))

    def save_site(self, site_spec: Mapping[str, str], demo: bool = False) -> None:
        """See :meth:`engine.store.base.Store.save_site`."""
        spec = {str(key): str(value) for key, value in site_spec.items()}
        site_from_table(spec, "site")  # validates

        def work(connection: sqlite3.Connection) -> None:
            connection.execute("DELETE FROM site")
            connection.executemany("INSERT INTO site (key, value, is_demo) VALUES (?, ?, ?)",
                                   [(key, value, int(bool(demo))) for key, value in spec.items()])

        self._write(work)

    # --- imports -------------------------------------------------------------------------------
    def import_readings(self, frame: pd.DataFrame, name: str, source: str = "",
                        environment: pd.DataFrame | None = None, demo: bool = False) -> int:
        """See :meth:`engine.store.base.Store.import_readings`."""
        prepared, prepared_environment, meta, where = _prepare_import(
            frame, name, source, environment, demo)
        deriving = _Deriving(prepared, self)  # alongside SQLite's writing
        try:
            import_id = self._write(lambda connection: _insert_import(
                connection, prepared, prepared_environment, meta))
        except BaseException:
            deriving.discard()  # not stored: neither are its derived files
            raise
        deriving.join()
        self._derive_import(import_id, deriving, str(meta["created_at"]))
        return import_id

    def _read_table(self, table: str, columns: Sequence[str], floats: Sequence[str],
                    filters: Sequence[tuple[str, list | None]],
                    dtype_column: str) -> pd.DataFrame:
        if table == "readings":
            return self._read_blocks(columns, floats, filters, dtype_column)
        sql_columns = [_TIME_NS if column == TIME else column for column in columns]
        selected = [f"IFNULL({_TIME_NS}, ?)" if column == _TIME_NS else f'"{column}"'
                    for column in sql_columns]
        parameters: list[object] = [int(_NAT_NS)]
        conditions = []
        for column, values in filters:
            if values is None:
                continue
            if len(values) > _MAX_LISTED_VALUES:  # past SQLite's limit on parameters
                conditions.append(f'"{column}" IN (SELECT value FROM json_each(?))')
                parameters.append(json.dumps(values))
            else:
                conditions.append(f'"{column}" IN ({", ".join("?" * len(values))})')
                parameters.extend(values)
        statement = f"SELECT import_id, {', '.join(selected)} FROM {table}"
        if conditions:
            statement += " WHERE " + " AND ".join(conditions)
        statement += " ORDER BY rowid"
        kinds = ["id"] + ["int" if column in (ROW, TIME) else "float" if column in floats
                          else "text" for column in columns]
        pieces: list[list[np.ndarray]] = []
        with self._snapshot():
            cursor = _retry(lambda: self._connection.execute(statement, parameters), self._path)
            # Block by block: a 2-D object array (built in C), then one conversion per column,
            # so that only one block of Python objects is alive at a time.
            while batch := cursor.fetchmany(_FETCH_ROWS):
                block = np.array(batch, dtype=object)
                pieces.append([block[:, number].copy() if kind == "text" else
                               block[:, number].astype(np.float64 if kind == "float"
                                                       else np.int64)
                               for number, kind in enumerate(kinds)])
            dtypes = dict(self._query(f"SELECT id, {dtype_column} FROM imports"))
        empty = {"id": np.int64, "int": np.int64, "float": np.float64, "text": object}
        gathered = [np.concatenate([piece[number] for piece in pieces]) if pieces
                    else np.empty(0, dtype=empty[kind]) for number, kind in enumerate(kinds)]
        return _frame(columns, floats, gathered, dtypes)

    def _read_blocks(self, columns: Sequence[str], floats: Sequence[str],
                     filters: Sequence[tuple[str, list | None]],
                     dtype_column: str) -> pd.DataFrame:
        """The readings, from their blocks (see :meth:`_read_table`)."""
        sql_columns = [_TIME_NS if column == TIME else column for column in columns]
        import_ids = dict(filters).get(IMPORT_ID)
        keep = [(column, [str(value) for value in values]) for column, values in filters
                if column != IMPORT_ID and values is not None]
        statement = "SELECT import_id, data FROM reading_blocks"
        parameters: list[object] = []
        if import_ids is not None:
            statement += " WHERE import_id IN (SELECT value FROM json_each(?))"
            parameters.append(json.dumps([int(value) for value in import_ids]))
        statement += " ORDER BY import_id, block"
        tables, ids = [], []
        with self._snapshot():
            cursor = _retry(lambda: self._connection.execute(statement, parameters), self._path)
            while batch := cursor.fetchmany(16):
                for import_id, data in batch:
                    decoded = decode_block(data, sql_columns, keep)
                    tables.append(decoded)
                    ids.append(np.full(decoded.num_rows, import_id, dtype=np.int64))
            dtypes = dict(self._query(f"SELECT id, {dtype_column} FROM imports"))
        empty = pa.table({column: pa.array([], type=pa.int64() if column in ("row", _TIME_NS)
                                           else pa.float64() if column in floats
                                           else pa.string()) for column in sql_columns})
        table = pa.concat_tables(tables, promote_options="permissive") if tables else empty
        del tables
        gathered = [np.concatenate(ids) if ids else np.empty(0, dtype=np.int64)]
        gathered += [column_values(table, column) for column in sql_columns]
        return _frame(columns, floats, gathered, dtypes)

    def _import_rows(self) -> tuple[list[str], list[tuple]]:
        columns = list(_IMPORT_COLUMNS)
        return columns, self._query(f"SELECT {', '.join(columns)} FROM imports ORDER BY id")

    def delete_import(self, import_id: int) -> bool:
        """Remove an import with its readings and environment log. Returns whether it existed."""
        return self._write(lambda connection: connection.execute(
            "DELETE FROM imports WHERE id = ?", (int(import_id),)).rowcount > 0)

    # --- demonstration data and counts ---------------------------------------------------------
    def remove_demo(self) -> dict[str, int]:
        """See :meth:`engine.store.base.Store.remove_demo`."""

        def work(connection: sqlite3.Connection) -> dict[str, int]:
            readings = connection.execute(
                "SELECT COALESCE(SUM(rows), 0) FROM imports WHERE is_demo = 1").fetchone()[0]
            imports = connection.execute("DELETE FROM imports WHERE is_demo = 1").rowcount
            machines = connection.execute("DELETE FROM machines WHERE is_demo = 1").rowcount
            connection.execute("DELETE FROM site WHERE is_demo = 1")
            return {"machines": machines, "imports": imports, "readings": readings}

        return self._write(work)

    def setting(self, key: str, default: str | None = None) -> str | None:
        """A stored setting, or ``default`` when it was never saved."""
        rows = self._query("SELECT value FROM settings WHERE key = ?", (key,))
        return rows[0][0] if rows else default

    def save_setting(self, key: str, value: str) -> None:
        """Store a setting (text), replacing any earlier value of the same key."""
        self._write(lambda connection: connection.execute(
            "INSERT INTO settings (key, value) VALUES (?, ?) "
            "ON CONFLICT(key) DO UPDATE SET value = excluded.value", (key, value)))

    def has_demo(self) -> bool:
        """Whether any demonstration machine or import is stored (a demo site alone is not)."""
        return bool(self._query(
            "SELECT EXISTS (SELECT 1 FROM machines WHERE is_demo = 1) "
            "OR EXISTS (SELECT 1 FROM imports WHERE is_demo = 1)")[0][0])

    def counts(self) -> dict[str, int]:
        """Numbers of machines, imports, sessions (distinct session names) and readings."""
        # From the imports table alone (each import keeps its number of readings and its
        # sessions' names): a count over the readings took tens of seconds at 10^7.
        machines, imports, sessions, readings = self._query(
            "SELECT (SELECT COUNT(*) FROM machines), (SELECT COUNT(*) FROM imports), "
            "(SELECT COUNT(DISTINCT names.value) FROM imports, "
            "json_each(imports.session_names) AS names), "
            "(SELECT COALESCE(SUM(rows), 0) FROM imports)")[0]
        return {"machines": machines, "imports": imports, "sessions": sessions,
                "readings": readings}

    def is_empty(self) -> bool:
        """Whether the store holds no machine and no import (the site does not count)."""
        return not self._query("SELECT EXISTS (SELECT 1 FROM machines) "
                               "OR EXISTS (SELECT 1 FROM imports)")[0][0]

    # --- lab bundle ----------------------------------------------------------------------------
    def _demo_marks(self) -> tuple[list[str], bool]:
        machines = [row[0] for row in self._query(
            "SELECT id FROM machines WHERE is_demo = 1 ORDER BY rowid")]
        site = bool(self._query("SELECT EXISTS (SELECT 1 FROM site WHERE is_demo = 1)")[0][0])
        return machines, site

    def _time_dtypes(self) -> dict[int, tuple[str, str]]:
        return {row[0]: row[1:] for row in self._query(
            "SELECT id, time_dtype, environment_time_dtype FROM imports")}

    def _stored_machine_texts(self) -> dict[str, str]:
        return dict(self._query("SELECT id, toml FROM machines"))

    def import_bundle(self, data: bytes, replace_machines: bool = False) -> list[int]:
        """See :meth:`engine.store.base.Store.import_bundle`."""
        with BundleReader(data) as bundle:
            machine_file = bundle.machine_file

            def work(connection: sqlite3.Connection) -> list[int]:
                stored = {row[0]: (row[1], bool(row[2])) for row in connection.execute(
                    "SELECT id, toml, is_demo FROM machines").fetchall()}
                for machine, text, demo in _bundle_machines(bundle, stored, replace_machines):
                    _save_machine(connection, machine, text, demo)
                has_site = connection.execute(
                    "SELECT EXISTS (SELECT 1 FROM site)").fetchone()[0]
                if machine_file.site.spec and not has_site:
                    connection.executemany(
                        "INSERT INTO site (key, value, is_demo) VALUES (?, ?, ?)",
                        [(key, value, int(bundle.demo_site))
                         for key, value in machine_file.site.spec.items()])
                present = {tuple(row) for row in connection.execute(
                    "SELECT name, source, created_at, rows FROM imports").fetchall()}
                return _insert_bundle(connection, bundle, present)

            return self._write(work)


# --- writing -------------------------------------------------------------------------------------
def _save_machine(connection: sqlite3.Connection, machine: Machine, text: str,
                  demo: bool) -> None:
    connection.execute(
        "INSERT INTO machines (id, label, carrier, toml, is_demo, updated_at) "
        "VALUES (?, ?, ?, ?, ?, ?) ON CONFLICT (id) DO UPDATE SET label = excluded.label, "
        "carrier = excluded.carrier, toml = excluded.toml, is_demo = excluded.is_demo, "
        "updated_at = excluded.updated_at",
        (machine.id, machine.label, machine.kind, text, int(bool(demo)), _now_text()))



def _session_names(sessions: Iterable[str]) -> str:
    """The distinct session names as the JSON array ``imports.session_names`` keeps."""
    distinct = (pd.unique(sessions).tolist() if isinstance(sessions, np.ndarray)
                else set(sessions))
    return json.dumps(sorted(distinct), ensure_ascii=False)


def _insert_import(connection: sqlite3.Connection, readings: _Prepared,
                   environment: _Prepared | None, meta: Mapping[str, object]) -> int:
    """Insert one import inside the caller's transaction; returns its id."""
    session_names = _session_names(readings.arrays[READING_COLUMNS.index(SESSION)])
    cursor = connection.execute(
        "INSERT INTO imports (name, source, created_at, is_demo, rows, machines, sessions, "
        "session_names, time_dtype, environment_rows, environment_time_dtype) "
        "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (meta["name"], meta["source"], meta["created_at"], int(bool(meta["is_demo"])),
         readings.rows, readings.machines, readings.sessions, session_names,
         readings.time_dtype, 0 if environment is None else environment.rows,
         "datetime64[ns]" if environment is None else environment.time_dtype))
    import_id = int(cursor.lastrowid)
    _insert_blocks(connection, import_id, readings, 0)
    if environment is not None:
        for rows in environment.chunks(import_id, CHUNK_ROWS):
            _insert_chunk(connection, _ENVIRONMENT_INSERT, rows)
    return import_id


def _insert_blocks(connection: sqlite3.Connection, import_id: int, readings: _Prepared,
                   first_block: int) -> int:
    """Write readings as blocks of at most :data:`CHUNK_ROWS` (:mod:`engine.store.blocks`),
    numbered from ``first_block``; returns the next block's number."""
    arrays = [readings.time_ns if column == _TIME_NS else array
              for column, array in zip(_READING_SQL, readings.arrays, strict=True)]
    block = first_block
    for start in range(0, readings.rows, CHUNK_ROWS):
        stop = min(start + CHUNK_ROWS, readings.rows)
        _insert_chunk(connection, _BLOCK_INSERT,
                      [(import_id, block, stop - start,
                        encode_block(_READING_SQL, arrays, start, stop))])
        block += 1
    return block



def _insert_bundle(connection: sqlite3.Connection, bundle: BundleReader,
                   present: set[tuple]) -> list[int]:
    """Insert a bundle's imports inside the caller's transaction, chunk by chunk. Imports
    already in the lab (``present``: name, source, time stored and readings) are skipped."""
    new_ids: dict[int, int] = {}
    for entry in bundle.entries:
        if _bundle_key(entry) in present:
            continue
        has_environment = entry["environment_rows"] > 0
        cursor = connection.execute(
            "INSERT INTO imports (name, source, created_at, is_demo, rows, machines, sessions, "
            "time_dtype, environment_rows, environment_time_dtype) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (entry["name"], entry["source"], entry["created_at"], int(entry["is_demo"]),
             entry["rows"], "", "", entry["time_dtype"], entry["environment_rows"],
             entry["environment_time_dtype"] if has_environment else "datetime64[ns]"))
        new_ids[entry["id"]] = int(cursor.lastrowid)
    machines: dict[int, set[str]] = {import_id: set() for import_id in new_ids.values()}
    sessions: dict[int, set[str]] = {import_id: set() for import_id in new_ids.values()}
    machine_at, session_at = READING_COLUMNS.index(MACHINE), READING_COLUMNS.index(SESSION)
    next_block: dict[int, int] = dict.fromkeys(new_ids.values(), 0)
    for environment in (False, True):
        for entry, prepared in bundle.blocks(environment=environment):
            if entry["id"] not in new_ids:
                continue
            import_id = new_ids[entry["id"]]
            if environment:
                for rows in prepared.chunks(import_id, CHUNK_ROWS):
                    _insert_chunk(connection, _ENVIRONMENT_INSERT, rows)
                continue
            next_block[import_id] = _insert_blocks(connection, import_id, prepared,
                                                   next_block[import_id])
            machines[import_id].update(pd.unique(prepared.arrays[machine_at]).tolist())
            sessions[import_id].update(pd.unique(prepared.arrays[session_at]).tolist())
    connection.executemany("UPDATE imports SET machines = ?, sessions = ?, session_names = ? "
                           "WHERE id = ?",
                           [(", ".join(sorted(machines[import_id])),
                             ", ".join(sorted(sessions[import_id])),
                             _session_names(sessions[import_id]), import_id)
                            for import_id in new_ids.values()])
    return list(new_ids.values())
