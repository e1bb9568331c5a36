"""The embedded store: machines, the site, imports of readings and environment logs in SQLite.

One SQLite file holds the lab. Its path is the environment variable ``CEILING_LAB_DB`` or, when
that is not set, ``ceiling-lab.sqlite3`` in the user's data folder (see
:func:`default_store_path`). :func:`open_store` opens (and creates, or migrates) it::

    with open_store() as store:
        store.save_machine(machine)
        import_id = store.import_readings(frame, "Tuesday session", source="meter.csv")
        frame = store.readings(machines=["gallery-twin"])

Layout
------
``machines``
    One row per machine: id, label, carrier kind, the machine's TOML table text as the user
    wrote it (units kept), ``is_demo`` and ``updated_at``.
``site``
    The ``[site]`` keys as text (``pressure = "97.2 kPa"``) and ``is_demo``.
``imports``
    One row per import of a readings file: id, name, source file name, ``created_at`` (UTC,
    ISO 8601), ``is_demo``, the number of readings and environment rows, the machines and
    sessions it holds, and the pandas dtype of its time columns (naive or with a time zone, and
    the unit), so that the frame reads back as it went in.
``readings`` and ``environment``
    The columns of :data:`engine.columns.READING_COLUMNS` and
    :data:`engine.columns.ENVIRONMENT_COLUMNS`, SI units, each row tied to its import by a
    foreign key with ``ON DELETE CASCADE``. Times are int64 nanoseconds since 1970 (UTC for
    zone-aware times, wall clock for naive ones), NULL for NaT. Float columns carry no declared
    type, so SQLite keeps every double bit for bit (a REAL column would turn -0.0 into 0).
    NaN is stored as NULL and reads back as NaN. Text columns hold no missing values: a missing
    text (None, NaN) is stored and read back as "".

The schema version is ``PRAGMA user_version``. :data:`MIGRATIONS` lists the statements that
bring a store from each version to the next; opening a store of any earlier version applies the
missing ones in order, in one transaction.

Every write is one transaction (``BEGIN IMMEDIATE`` ... ``COMMIT``): an import is stored whole
or not at all, also when the program is killed half-way. A store that another program is
writing waits (``busy_timeout``) and retries with backoff for at most :data:`LOCK_WAIT_S`.

A lab bundle (:meth:`Store.export_bundle`, :meth:`Store.import_bundle`) is a zip file with
``manifest.json``, ``machines.toml``, ``readings.csv`` and ``environment.csv`` in the store's own
SI columns; floats are written in their shortest exact form and read back bit for bit.
"""

from __future__ import annotations

import contextlib
import io
import itertools
import json
import os
import sqlite3
import threading
import time
import tomllib
import zipfile
import zlib
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import TypeVar

import numpy as np
import pandas as pd
import platformdirs

from engine.columns import (
    BELT_SPEED_M_S,
    CURRENT_A,
    ELAPSED_S,
    ENVIRONMENT_COLUMNS,
    FLAGS,
    MACHINE,
    NOTE,
    PRESSURE_PA,
    READING_COLUMNS,
    RH,
    ROW,
    SESSION,
    SPEED_REV_S,
    TEMPERATURE_K,
    TIME,
    VOLTAGE_V,
)
from engine.errors import InputError
from engine.machines import (
    Machine,
    MachineFile,
    dump_machines,
    parse_machines_text,
    site_from_table,
)

#: Environment variable that names the store file.
STORE_ENV_VAR = "CEILING_LAB_DB"
#: File name of the store in the user's data folder.
STORE_FILE_NAME = "ceiling-lab.sqlite3"
#: Column of the frames returned by :meth:`Store.readings` and :meth:`Store.environment`.
IMPORT_ID = "import_id"

#: How long SQLite itself waits for another writer before it reports "database is locked" [s].
BUSY_TIMEOUT_S = 30.0
#: Longest total wait, retries included, before a write gives up on a locked store [s].
LOCK_WAIT_S = 120.0
#: Readings written per ``executemany`` call.
CHUNK_ROWS = 20_000
#: Longest import name or source name accepted.
MAX_NAME_LENGTH = 200

#: Format name and version written in a bundle's manifest.
BUNDLE_FORMAT = "ceiling-lab-bundle"
BUNDLE_VERSION = 1
#: Largest bundle accepted, compressed and uncompressed (all members together) [bytes].
MAX_BUNDLE_BYTES = 500 * 1024 * 1024
#: Most members a bundle's zip may list.
MAX_BUNDLE_MEMBERS = 8
_MAX_MANIFEST_BYTES = 1024 * 1024
_MAX_BUNDLE_TOML_BYTES = 4 * 1024 * 1024
_MANIFEST = "manifest.json"
_MACHINES_TOML = "machines.toml"
_READINGS_CSV = "readings.csv"
_ENVIRONMENT_CSV = "environment.csv"
_BUNDLE_MEMBERS = (_MANIFEST, _MACHINES_TOML, _READINGS_CSV, _ENVIRONMENT_CSV)

# --- Schema ------------------------------------------------------------------------------------
_TIME_NS = "time_ns"  # SQL column that holds TIME as int64 nanoseconds
_READING_FLOATS = (ELAPSED_S, SPEED_REV_S, BELT_SPEED_M_S, CURRENT_A, RH, TEMPERATURE_K,
                   PRESSURE_PA, VOLTAGE_V)
_ENVIRONMENT_FLOATS = (ELAPSED_S, RH, TEMPERATURE_K, PRESSURE_PA)
_TEXTS = (MACHINE, SESSION, NOTE, FLAGS)
_NAT_NS = np.iinfo(np.int64).min  # pandas' NaT as int64
_MAX_LISTED_VALUES = 500  # longer filter lists go to SQLite as one JSON array
_FETCH_ROWS = 10_000  # rows converted at a time when reading

#: Version 1: machines, site, imports, readings and environment logs.
SCHEMA_V1: tuple[str, ...] = (
    """CREATE TABLE machines (
        id TEXT PRIMARY KEY NOT NULL,
        label TEXT NOT NULL,
        carrier TEXT NOT NULL,
        toml TEXT NOT NULL,
        updated_at TEXT NOT NULL
    )""",
    """CREATE TABLE site (
        key TEXT PRIMARY KEY NOT NULL,
        value TEXT NOT NULL
    )""",
    """CREATE TABLE imports (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        name TEXT NOT NULL,
        source TEXT NOT NULL DEFAULT '',
        created_at TEXT NOT NULL,
        rows INTEGER NOT NULL,
        machines TEXT NOT NULL DEFAULT '',
        sessions TEXT NOT NULL DEFAULT '',
        time_dtype TEXT NOT NULL DEFAULT 'datetime64[ns]',
        environment_rows INTEGER NOT NULL DEFAULT 0,
        environment_time_dtype TEXT NOT NULL DEFAULT 'datetime64[ns]'
    )""",
    """CREATE TABLE readings (
        import_id INTEGER NOT NULL REFERENCES imports(id) ON DELETE CASCADE,
        "row" INTEGER NOT NULL,
        machine TEXT NOT NULL,
        session TEXT NOT NULL,
        time_ns INTEGER,
        elapsed_s, speed_rev_s, belt_speed_m_s, current_a, rh, temperature_k, pressure_pa,
        voltage_v,
        note TEXT NOT NULL,
        flags TEXT NOT NULL
    )""",
    """CREATE TABLE environment (
        import_id INTEGER NOT NULL REFERENCES imports(id) ON DELETE CASCADE,
        "row" INTEGER NOT NULL,
        time_ns INTEGER,
        elapsed_s, rh, temperature_k, pressure_pa
    )""",
)

#: Version 2: demonstration flags (machines, imports, site), and indexes for filtering by
#: import, machine and session.
SCHEMA_V2: tuple[str, ...] = (
    "ALTER TABLE machines ADD COLUMN is_demo INTEGER NOT NULL DEFAULT 0",
    "ALTER TABLE imports ADD COLUMN is_demo INTEGER NOT NULL DEFAULT 0",
    "ALTER TABLE site ADD COLUMN is_demo INTEGER NOT NULL DEFAULT 0",
    "CREATE INDEX readings_by_import ON readings(import_id)",
    "CREATE INDEX readings_by_machine ON readings(machine, session)",
    "CREATE INDEX readings_by_session ON readings(session)",
    "CREATE INDEX environment_by_import ON environment(import_id)",
)

#: Version 3: settings that outlive a restart (e.g. that the user removed the demo).
SCHEMA_V3: tuple[str, ...] = (
    "CREATE TABLE settings (key TEXT PRIMARY KEY, value TEXT NOT NULL)",
)



def _disc_inner_edges(connection: sqlite3.Connection) -> None:
    """Version 4: a disc machine must state the inner edge of its charged zone. Discs stored
    without one were computed as full discs, so they get ``inner_diameter = "0 cm"``: the same
    machine, said explicitly."""
    rows = connection.execute("SELECT id, toml FROM machines WHERE carrier = 'disc'").fetchall()
    for machine_id, text in rows:
        document = tomllib.loads(text)
        tables = document.get("machine", [])
        if not tables or "inner_radius" in tables[0] or "inner_diameter" in tables[0]:
            continue
        head, separator, tail = text.partition("\n[machine.tolerance]")
        fixed = head.rstrip("\n") + '\ninner_diameter = "0 cm"\n' + separator + tail
        connection.execute("UPDATE machines SET toml = ? WHERE id = ?", (fixed, machine_id))


#: Version 4: disc machines state their inner edge (a Python step, see _disc_inner_edges).
SCHEMA_V4: tuple[object, ...] = (_disc_inner_edges,)

#: Statements (or Python steps taking the connection) that bring a store from version ``n`` to
#: ``n + 1`` are ``MIGRATIONS[n]``.
MIGRATIONS: tuple[tuple[object, ...], ...] = (SCHEMA_V1, SCHEMA_V2, SCHEMA_V3, SCHEMA_V4)
#: Version of a store written by this module.
SCHEMA_VERSION = len(MIGRATIONS)

_READING_SQL = tuple(_TIME_NS if column == TIME else column for column in READING_COLUMNS)
_ENVIRONMENT_SQL = tuple(_TIME_NS if column == TIME else column for column in ENVIRONMENT_COLUMNS)
# pandas' own text dtype for text read back ("str" in pandas 3, object before).
_TEXT_DTYPE = pd.Series(["text"]).dtype

_Result = TypeVar("_Result")


def default_store_path() -> Path:
    """Path of the store: ``$CEILING_LAB_DB``, else a file in the user's data folder.

    Returns
    -------
    Path
        ``CEILING_LAB_DB`` when it is set and not empty; otherwise
        ``platformdirs.user_data_dir("ceiling-lab") / "ceiling-lab.sqlite3"``. The folder is
        created by :func:`open_store`, not here.
    """
    named = os.environ.get(STORE_ENV_VAR, "").strip()
    if named:
        return Path(named).expanduser()
    return Path(platformdirs.user_data_dir("ceiling-lab")) / STORE_FILE_NAME


def open_store(path: str | os.PathLike[str] | None = None) -> Store:
    """Open the store file, creating it and its folders, and migrating an older one.

    Parameters
    ----------
    path : str or path-like, optional
        The SQLite file; default :func:`default_store_path`.

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
    path = Path(path) if path is not None else default_store_path()
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
        raise InputError(f"{path}: the store cannot be opened ({error})") from None
    try:
        _retry(lambda: _configure(connection), path)
        _retry(lambda: _migrate(connection, path), path)
    except sqlite3.DatabaseError as error:
        connection.close()
        raise InputError(f"{path}: cannot be opened as a Ceiling Lab store ({error}); choose "
                         f"another file with {STORE_ENV_VAR}") from None
    except BaseException:
        connection.close()
        raise
    return Store(connection, path)


def _configure(connection: sqlite3.Connection) -> None:
    connection.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
    connection.execute("PRAGMA foreign_keys = ON")
    connection.execute("PRAGMA journal_mode = WAL")
    # In WAL mode NORMAL loses no committed transaction when a program dies, only on a power cut.
    connection.execute("PRAGMA synchronous = NORMAL")
    connection.execute("PRAGMA cache_size = -65536")  # 64 MiB: big imports touch many pages


def schema_version(connection: sqlite3.Connection) -> int:
    """Schema version of an open SQLite connection (``PRAGMA user_version``)."""
    return int(connection.execute("PRAGMA user_version").fetchone()[0])


def _migrate(connection: sqlite3.Connection, path: Path) -> None:
    if schema_version(connection) == SCHEMA_VERSION:
        return
    connection.execute("BEGIN IMMEDIATE")
    try:
        version = schema_version(connection)  # again: another program may have migrated it
        if version > SCHEMA_VERSION:
            raise InputError(f"{path}: this store was written by a newer version of Ceiling Lab "
                             f"(schema {version}, this one knows {SCHEMA_VERSION}); update "
                             "Ceiling Lab to open it")
        if version == 0 and connection.execute(
            "SELECT COUNT(*) FROM sqlite_master WHERE name NOT LIKE 'sqlite_%'"
        ).fetchone()[0]:
            raise InputError(f"{path}: this SQLite file is not a Ceiling Lab store; choose "
                             f"another file with {STORE_ENV_VAR}")
        for statements in MIGRATIONS[version:]:
            for statement in statements:
                if callable(statement):
                    statement(connection)
                else:
                    connection.execute(statement)
        connection.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
        connection.execute("COMMIT")
    except BaseException:
        if connection.in_transaction:
            connection.execute("ROLLBACK")
        raise


def _is_locked(error: sqlite3.OperationalError) -> bool:
    text = str(error).lower()
    return "locked" in text or "busy" in text


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


def _insert_chunk(connection: sqlite3.Connection, statement: str,
                  rows: Iterable[tuple[object, ...]]) -> None:
    """Write one chunk of rows (a seam for tests that make a chunk fail)."""
    connection.executemany(statement, rows)


def _now_text() -> str:
    return datetime.now(UTC).isoformat(timespec="microseconds")


class Store:
    """An open store: a SQLite connection and the operations on it.

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

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

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

        with self._lock:
            return _retry(attempt, self._path)

    @contextlib.contextmanager
    def _snapshot(self) -> Iterator[None]:
        """Hold one read transaction, so that several queries see the same state of the file."""
        with self._lock:
            if self._connection.in_transaction:
                yield
                return
            self._connection.execute("BEGIN")
            try:
                yield
            finally:
                self._connection.execute("COMMIT")

    def _query(self, statement: str, parameters: Sequence[object] = ()) -> list[tuple]:
        with self._lock:
            return _retry(lambda: self._connection.execute(statement, parameters).fetchall(),
                          self._path)

    # --- machines and site ---------------------------------------------------------------------
    def save_machine(self, machine: Machine, demo: bool = False) -> None:
        """Store a machine, replacing one of the same id (which keeps its place in the list).

        Parameters
        ----------
        machine : Machine
            Stored as its TOML table, so the units the user wrote are kept.
        demo : bool
            Whether it belongs to the demonstration data (see :meth:`remove_demo`).
        """
        text = dump_machines([machine])
        restored = parse_machines_text(text, f"machine '{machine.id}'").machines
        if len(restored) != 1 or restored[0].id != machine.id:
            raise InputError(f"machine '{machine.id}': it cannot be written as a machines file")
        self._write(lambda connection: _save_machine(connection, machine, text, demo))

    def delete_machine(self, machine_id: str) -> bool:
        """Remove a machine; its readings stay. Returns whether it was in the store."""
        return self._write(lambda connection: connection.execute(
            "DELETE FROM machines WHERE id = ?", (machine_id,)).rowcount > 0)

    def machines(self) -> MachineFile:
        """The site and the machines, in the order they were first saved."""
        with self._snapshot():
            site_rows = self._query("SELECT key, value FROM site ORDER BY rowid")
            machine_rows = self._query("SELECT id, toml FROM machines ORDER BY rowid")
        site = site_from_table(dict(site_rows), f"{self._path}, site")
        machines = tuple(parse_machines_text(text, f"{self._path}, machine '{machine_id}'")
                         .machines[0] for machine_id, text in machine_rows)
        return MachineFile(site, machines)

    def save_site(self, site_spec: Mapping[str, str], demo: bool = False) -> None:
        """Replace the site by the ``[site]`` keys given as the user wrote them.

        Parameters
        ----------
        site_spec : mapping of str to str
            ``altitude`` or ``pressure``, and ``temperature``, e.g. ``{"pressure": "97 kPa"}``;
            empty for the reference atmosphere.
        demo : bool
            Whether it is the demonstration lab's site (removed by :meth:`remove_demo`).

        Raises
        ------
        InputError
            For unknown keys or values that are not quantities of the right kind.
        """
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
        """Store a frame of readings (and its environment log) as one import, in one transaction.

        Parameters
        ----------
        frame : pandas.DataFrame
            Columns :data:`~engine.columns.READING_COLUMNS` (SI units); other columns are not
            stored. At least one reading.
        name : str
            Name of the import shown to the user; default the source, else "readings".
        source : str
            Name of the file the readings came from.
        environment : pandas.DataFrame, optional
            Columns :data:`~engine.columns.ENVIRONMENT_COLUMNS`: the humidity log.
        demo : bool
            Whether it belongs to the demonstration data.

        Returns
        -------
        int
            Id of the new import.

        Raises
        ------
        InputError
            When a column is missing or a value cannot be stored (naming the reading, its row
            and the column). Nothing is stored then.
        """
        name, source = _import_names(name, source)
        where = source or name  # messages name the file the user knows
        prepared = _prepare(frame, READING_COLUMNS, _READING_FLOATS, where)
        prepared_environment = (None if environment is None else
                                _prepare(environment, ENVIRONMENT_COLUMNS, _ENVIRONMENT_FLOATS,
                                         f"{where}, environment log"))
        meta = {"name": name, "source": source, "created_at": _now_text(), "is_demo": demo}
        return self._write(lambda connection: _insert_import(connection, prepared,
                                                             prepared_environment, meta))

    def readings(self, machines: Iterable[str] | str | None = None,
                 sessions: Iterable[str] | str | None = None,
                 import_ids: Iterable[int] | int | None = None) -> pd.DataFrame:
        """Stored readings, in the order they were imported, filtered if asked.

        Parameters
        ----------
        machines, sessions : iterable of str, optional
            Keep readings of these machine ids / session names; None keeps all.
        import_ids : iterable of int, optional
            Keep readings of these imports; None keeps all.

        Returns
        -------
        pandas.DataFrame
            Columns :data:`~engine.columns.READING_COLUMNS` and ``import_id``, with the dtypes
            the frames had when imported. When imports of differing time dtypes are read
            together, time is zone-aware UTC if any of them was zone-aware (naive times taken
            as UTC), else naive, in nanoseconds.
        """
        filters = [(MACHINE, _texts(machines)), (SESSION, _texts(sessions)),
                   (IMPORT_ID, _ids(import_ids))]
        return self._read_table("readings", READING_COLUMNS, _READING_FLOATS, filters,
                                "time_dtype")

    def environment(self, import_ids: Iterable[int] | int | None = None) -> pd.DataFrame:
        """Stored environment logs, columns ENVIRONMENT_COLUMNS and ``import_id``."""
        return self._read_table("environment", ENVIRONMENT_COLUMNS, _ENVIRONMENT_FLOATS,
                                [(IMPORT_ID, _ids(import_ids))], "environment_time_dtype")

    def _read_table(self, table: str, columns: Sequence[str], floats: Sequence[str],
                    filters: Sequence[tuple[str, list | None]],
                    dtype_column: str) -> pd.DataFrame:
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

    def imports(self) -> pd.DataFrame:
        """The imports, oldest first.

        Returns
        -------
        pandas.DataFrame
            Columns ``id``, ``name``, ``source``, ``created_at`` (UTC, ISO 8601 text),
            ``is_demo`` (bool), ``rows`` (number of readings), ``machines`` and ``sessions``
            (their names, joined by ", "), ``environment_rows``.
        """
        columns = ["id", "name", "source", "created_at", "is_demo", "rows", "machines",
                   "sessions", "environment_rows"]
        rows = self._query(f"SELECT {', '.join(columns)} FROM imports ORDER BY id")
        frame = pd.DataFrame(rows, columns=columns)
        for column in ("id", "rows", "environment_rows"):
            frame[column] = frame[column].astype(np.int64)
        frame["is_demo"] = frame["is_demo"].astype(bool)
        for column in ("name", "source", "created_at", "machines", "sessions"):
            frame[column] = frame[column].astype(object).astype(_TEXT_DTYPE)
        return frame

    def delete_import(self, import_id: int) -> bool:
        """Remove an import with its readings and environment log. Returns whether it existed."""
        return self._write(lambda connection: connection.execute(
            "DELETE FROM imports WHERE id = ?", (int(import_id),)).rowcount > 0)

    # --- demonstration data and counts ---------------------------------------------------------
    def remove_demo(self) -> dict[str, int]:
        """Remove the demonstration machines, imports (with their readings) and site.

        Returns
        -------
        dict of str to int
            How many ``machines``, ``imports`` and ``readings`` were removed.
        """

        def work(connection: sqlite3.Connection) -> dict[str, int]:
            readings = connection.execute(
                "SELECT COUNT(*) FROM readings WHERE import_id IN "
                "(SELECT id FROM imports WHERE is_demo = 1)").fetchone()[0]
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
        machines, imports, sessions, readings = self._query(
            "SELECT (SELECT COUNT(*) FROM machines), (SELECT COUNT(*) FROM imports), "
            "(SELECT COUNT(DISTINCT session) FROM readings), (SELECT COUNT(*) FROM readings)")[0]
        return {"machines": machines, "imports": imports, "sessions": sessions,
                "readings": readings}

    def is_empty(self) -> bool:
        """Whether the store holds no machine and no import (the site does not count)."""
        return not self._query("SELECT EXISTS (SELECT 1 FROM machines) "
                               "OR EXISTS (SELECT 1 FROM imports)")[0][0]

    # --- lab bundle ----------------------------------------------------------------------------
    def export_bundle(self, import_ids: Iterable[int] | int | None = None) -> bytes:
        """The lab as a bundle: a zip of machines, readings and environment logs.

        Parameters
        ----------
        import_ids : iterable of int, optional
            Imports to include; None includes all. The site and all machines are always
            included.

        Returns
        -------
        bytes
            A zip with ``manifest.json`` (format ``ceiling-lab-bundle``, version, counts and the
            imports), ``machines.toml``, ``readings.csv`` and ``environment.csv``.

        Raises
        ------
        InputError
            When an asked import is not in the store.
        """
        wanted = _ids(import_ids)
        with self._snapshot():  # the members agree with each other
            imports = self.imports()
            machine_file = self.machines()
            demo_machines = [row[0] for row in self._query(
                "SELECT id FROM machines WHERE is_demo = 1 ORDER BY rowid")]
            demo_site = bool(self._query(
                "SELECT EXISTS (SELECT 1 FROM site WHERE is_demo = 1)")[0][0])
            dtypes = {row[0]: row[1:] for row in self._query(
                "SELECT id, time_dtype, environment_time_dtype FROM imports")}
            if wanted is not None:
                missing = sorted(set(wanted) - set(imports["id"].tolist()))
                if missing:
                    raise InputError(f"import {missing[0]} is not in the store; choose "
                                     "from the imports listed")
                imports = imports[imports["id"].isin(wanted)]
            readings = self.readings(import_ids=imports["id"].tolist())
            environment = self.environment(import_ids=imports["id"].tolist())
        entries = []
        for row in imports.itertuples(index=False):  # one per import, not per reading
            entries.append({
                "id": int(row.id), "name": row.name, "source": row.source,
                "created_at": row.created_at, "is_demo": bool(row.is_demo),
                "rows": int(row.rows), "environment_rows": int(row.environment_rows),
                "time_dtype": dtypes[row.id][0], "environment_time_dtype": dtypes[row.id][1],
            })
        manifest = {
            "format": BUNDLE_FORMAT,
            "version": BUNDLE_VERSION,
            "schema_version": SCHEMA_VERSION,
            "created_at": _now_text(),
            "counts": {"machines": len(machine_file.machines), "imports": len(entries),
                       "readings": len(readings), "environment": len(environment)},
            "demo_machines": demo_machines,
            "demo_site": demo_site,
            "imports": entries,
        }
        buffer = io.BytesIO()
        # Level 1: most of the size gain of deflate at a fraction of its time on large labs.
        with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_DEFLATED,
                             compresslevel=1) as bundle:
            bundle.writestr(_MANIFEST, json.dumps(manifest, indent=2, ensure_ascii=False))
            bundle.writestr(_MACHINES_TOML, dump_machines(machine_file))
            bundle.writestr(_READINGS_CSV, _bundle_csv(readings, READING_COLUMNS, entries,
                                                       "time_dtype"))
            bundle.writestr(_ENVIRONMENT_CSV, _bundle_csv(environment, ENVIRONMENT_COLUMNS,
                                                          entries, "environment_time_dtype"))
        return buffer.getvalue()

    def import_bundle(self, data: bytes) -> list[int]:
        """Add a bundle's machines and imports to the store, in one transaction.

        Machines of the bundle replace stored machines of the same id; the bundle's site is
        taken only when the store has none. Every import of the bundle becomes a new import.

        Parameters
        ----------
        data : bytes
            A bundle made by :meth:`export_bundle`.

        Returns
        -------
        list of int
            Ids of the new imports, in the bundle's order.

        Raises
        ------
        InputError
            When the data is not a bundle, is too large, or any member is damaged. Nothing is
            stored then.
        """
        machine_file, demo_machines, demo_site, imports = _read_bundle(data)
        texts = {machine.id: dump_machines([machine]) for machine in machine_file.machines}

        def work(connection: sqlite3.Connection) -> list[int]:
            for machine in machine_file.machines:
                _save_machine(connection, machine, texts[machine.id],
                              machine.id in demo_machines)
            has_site = connection.execute("SELECT EXISTS (SELECT 1 FROM site)").fetchone()[0]
            if machine_file.site.spec and not has_site:
                connection.executemany(
                    "INSERT INTO site (key, value, is_demo) VALUES (?, ?, ?)",
                    [(key, value, int(demo_site)) for key, value in machine_file.site.spec.items()])
            return [_insert_import(connection, prepared, prepared_environment, meta)
                    for meta, prepared, prepared_environment in imports]

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


def _import_names(name: object, source: object) -> tuple[str, str]:
    source = "" if source is None else str(source).strip()
    name = "" if name is None else str(name).strip()
    name = name or source or "readings"
    for what, text in (("name", name), ("source", source)):
        if len(text) > MAX_NAME_LENGTH:
            raise InputError(f"import {text[:40]!r}...: the {what} is longer than "
                             f"{MAX_NAME_LENGTH} characters; give a shorter one")
    return name, source


class _Prepared:
    """A frame checked and converted to the arrays that are written (one per SQL column)."""

    def __init__(self, arrays: list[np.ndarray], time_ns: np.ndarray, time_dtype: str,
                 machines: str, sessions: str) -> None:
        self.arrays = arrays
        self.time_ns = time_ns
        self.time_dtype = time_dtype
        self.machines = machines
        self.sessions = sessions

    @property
    def rows(self) -> int:
        return len(self.time_ns)

    def chunks(self, import_id: int) -> Iterable[Iterable[tuple[object, ...]]]:
        missing_time = self.time_ns == _NAT_NS
        for start in range(0, self.rows, CHUNK_ROWS):
            stop = min(start + CHUNK_ROWS, self.rows)
            times = np.where(missing_time[start:stop], None, self.time_ns[start:stop])
            columns = [times.tolist() if array is self.time_ns else array[start:stop].tolist()
                       for array in self.arrays]
            yield zip(itertools.repeat(import_id, stop - start), *columns, strict=False)


def _position_text(frame: pd.DataFrame, position: int, where: str) -> str:
    """Where a bad value is, for messages: the reading's number and its source row."""
    text = f"{where}: reading {position + 1}"
    if ROW in frame.columns:
        row = frame[ROW].iloc[position]
        if isinstance(row, (int, np.integer)) or (isinstance(row, float) and row == row):
            text += f" (row {int(row)} of the file)"
    return text


def _number_column(frame: pd.DataFrame, column: str, where: str) -> np.ndarray:
    series = frame[column]
    if series.dtype == np.float64:
        return series.to_numpy()
    if pd.api.types.is_bool_dtype(series.dtype):
        raise InputError(f"{where}: column '{column}' holds true/false values; it must hold "
                         "numbers")
    numbers = pd.to_numeric(series, errors="coerce")
    given = series.notna()
    if series.dtype == object or pd.api.types.is_string_dtype(series.dtype):
        given &= series.astype(str).str.strip() != ""
    bad = np.flatnonzero((given & numbers.isna()).to_numpy())
    if len(bad):
        position = int(bad[0])
        raise InputError(f"{_position_text(frame, position, where)}, column '{column}': "
                         f"{series.iloc[position]!r} is not a number; correct it in the file "
                         "and import it again")
    return numbers.to_numpy(dtype=np.float64, na_value=np.nan)


def _row_column(frame: pd.DataFrame, where: str) -> np.ndarray:
    series = frame[ROW]
    if pd.api.types.is_integer_dtype(series.dtype) and series.notna().all():
        return series.to_numpy(dtype=np.int64)
    numbers = pd.to_numeric(series, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    whole = np.isfinite(numbers) & (numbers == np.round(numbers)) & (np.abs(numbers) < 2**53)
    bad = np.flatnonzero(~whole)
    if len(bad):
        raise InputError(f"{where}: reading {int(bad[0]) + 1}, column '{ROW}': "
                         f"{series.iloc[int(bad[0])]!r} is not a whole row number")
    return numbers.astype(np.int64)


def _time_column(series: pd.Series, where: str) -> tuple[np.ndarray, str]:
    """Times as int64 ns (NaT as the int64 minimum) and the dtype text that restores them."""
    if not pd.api.types.is_datetime64_any_dtype(series.dtype):
        if series.isna().all():
            series = pd.Series(pd.NaT, index=series.index, dtype="datetime64[ns]")
        else:
            raise InputError(f"{where}: column '{TIME}' must hold dates and times "
                             f"(got {series.dtype}); read the file with the readings import")
    dtype = series.dtype
    dtype_text = str(dtype)
    try:
        restorable = pd.api.types.pandas_dtype(dtype_text) == dtype
    except (TypeError, ValueError):
        restorable = False
    index = pd.DatetimeIndex(series)
    if not restorable:  # a time zone without a name: keep the instants, in UTC
        index = index.tz_convert("UTC")
        dtype_text = str(index.dtype)
    try:
        nanoseconds = index.as_unit("ns").asi8
    except (OverflowError, ValueError, pd.errors.OutOfBoundsDatetime):
        raise InputError(f"{where}: column '{TIME}' holds a date outside the years 1677 to "
                         "2262; correct the dates in the file") from None
    return np.asarray(nanoseconds, dtype=np.int64), dtype_text


def _distinct_text(array: np.ndarray) -> str:
    return ", ".join(sorted(pd.unique(array).tolist()))


def _prepare(frame: pd.DataFrame, columns: Sequence[str], floats: Sequence[str],
             where: str) -> _Prepared:
    if not isinstance(frame, pd.DataFrame):
        raise InputError(f"{where}: readings must be a table (DataFrame), got "
                         f"{type(frame).__name__}")
    missing = [column for column in columns if column not in frame.columns]
    if missing:
        raise InputError(f"{where}: the column(s) {', '.join(missing)} are missing; the "
                         f"store needs {', '.join(columns)}")
    if frame.columns.duplicated().any():
        raise InputError(f"{where}: a column name is used twice")
    if columns is READING_COLUMNS and len(frame) == 0:
        raise InputError(f"{where}: there are no readings to import")
    arrays: list[np.ndarray] = []
    time_ns = np.empty(0, dtype=np.int64)
    time_dtype = "datetime64[ns]"
    texts: dict[str, np.ndarray] = {}
    for column in columns:
        if column == ROW:
            arrays.append(_row_column(frame, where))
        elif column == TIME:
            time_ns, time_dtype = _time_column(frame[column], where)
            arrays.append(time_ns)
        elif column in floats:
            arrays.append(_number_column(frame, column, where))
        else:
            series = frame[column]
            text = series.astype(object).where(series.notna(), "")
            if pd.api.types.infer_dtype(text, skipna=False) not in ("string", "empty"):
                text = text.astype(str).astype(object)  # numbers or other objects as text
            texts[column] = text.to_numpy(dtype=object)
            arrays.append(texts[column])
    machines = _distinct_text(texts[MACHINE]) if MACHINE in texts else ""
    sessions = _distinct_text(texts[SESSION]) if SESSION in texts else ""
    return _Prepared(arrays, time_ns, time_dtype, machines, sessions)


def _insert_import(connection: sqlite3.Connection, readings: _Prepared,
                   environment: _Prepared | None, meta: Mapping[str, object]) -> int:
    """Insert one import inside the caller's transaction; returns its id."""
    cursor = connection.execute(
        "INSERT INTO imports (name, source, created_at, is_demo, rows, machines, sessions, "
        "time_dtype, environment_rows, environment_time_dtype) "
        "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (meta["name"], meta["source"], meta["created_at"], int(bool(meta["is_demo"])),
         readings.rows, readings.machines, readings.sessions, readings.time_dtype,
         0 if environment is None else environment.rows,
         "datetime64[ns]" if environment is None else environment.time_dtype))
    import_id = int(cursor.lastrowid)
    for table, sql_columns, prepared in (("readings", _READING_SQL, readings),
                                         ("environment", _ENVIRONMENT_SQL, environment)):
        if prepared is None:
            continue
        names = ", ".join(f'"{column}"' for column in ("import_id", *sql_columns))
        marks = ", ".join("?" * (len(sql_columns) + 1))
        statement = f"INSERT INTO {table} ({names}) VALUES ({marks})"
        for rows in prepared.chunks(import_id):
            _insert_chunk(connection, statement, rows)
    return import_id


# --- reading -------------------------------------------------------------------------------------
def _texts(values: Iterable[str] | str | None) -> list[str] | None:
    if values is None:
        return None
    if isinstance(values, str):
        return [values]
    return list(dict.fromkeys(str(value) for value in values))


def _ids(values: Iterable[int] | int | None) -> list[int] | None:
    if values is None:
        return None
    if isinstance(values, (int, np.integer)):
        return [int(values)]
    try:
        return list(dict.fromkeys(int(value) for value in values))
    except (TypeError, ValueError):
        raise InputError("import ids must be whole numbers") from None


def _time_dtype_for(dtype_texts: set[str]) -> pd.api.extensions.ExtensionDtype | np.dtype:
    """The dtype of a time column that gathers imports of the given time dtypes."""
    dtypes = [pd.api.types.pandas_dtype(text) for text in sorted(dtype_texts)]
    if len(dtypes) == 1:
        return dtypes[0]
    if not dtypes:
        return np.dtype("datetime64[ns]")
    if any(isinstance(dtype, pd.DatetimeTZDtype) for dtype in dtypes):
        return pd.DatetimeTZDtype("ns", "UTC")
    return np.dtype("datetime64[ns]")


def _restore_time(nanoseconds: np.ndarray, dtype_texts: set[str]) -> pd.DatetimeIndex:
    dtype = _time_dtype_for(dtype_texts)
    index = pd.DatetimeIndex(nanoseconds.view("M8[ns]"))
    if isinstance(dtype, pd.DatetimeTZDtype):
        return index.tz_localize("UTC").tz_convert(dtype.tz).as_unit(dtype.unit)
    return index.as_unit(np.datetime_data(dtype)[0])


# --- bundles -------------------------------------------------------------------------------------
def _bundle_csv(frame: pd.DataFrame, columns: Sequence[str], entries: Sequence[Mapping],
                dtype_key: str) -> str:
    """CSV text of a stored frame: import_id first, times in each import's own time zone."""
    buffer = io.StringIO()
    header = True
    ordered = [IMPORT_ID, *columns]
    for entry in entries:  # one block per import, so each keeps its time zone
        block = frame[frame[IMPORT_ID] == entry["id"]]
        if block.empty:
            continue
        block = block[ordered].copy()
        # The stored nanoseconds, whatever dtype the gathered frame gave them, in the
        # import's own dtype (its time zone and unit).
        nanoseconds = np.asarray(pd.DatetimeIndex(block[TIME]).as_unit("ns").asi8)
        block[TIME] = _restore_time(nanoseconds, {entry[dtype_key]})
        block.to_csv(buffer, index=False, header=header, lineterminator="\n", na_rep="")
        header = False
    if header:
        buffer.write(",".join(ordered) + "\n")
    return buffer.getvalue()


def _member(bundle: zipfile.ZipFile, info: zipfile.ZipInfo, limit: int) -> bytes:
    if info.file_size > limit:
        raise InputError(f"bundle: {info.filename} is larger than {limit} bytes")
    with bundle.open(info) as member:
        raw = member.read(info.file_size + 1)
    if len(raw) != info.file_size:
        raise InputError(f"bundle: {info.filename} is damaged (its size does not match)")
    return raw


def _read_bundle(data: bytes) -> tuple[MachineFile, set[str], bool, list[tuple]]:
    """Check and parse a bundle entirely in memory; nothing touches the disk."""
    if not isinstance(data, (bytes, bytearray, memoryview)):
        raise InputError("bundle: expected the bytes of a .zip file")
    if len(data) > MAX_BUNDLE_BYTES:
        raise InputError(f"bundle: the file is larger than {MAX_BUNDLE_BYTES // 2**20} MB")
    try:
        with zipfile.ZipFile(io.BytesIO(bytes(data))) as bundle:
            infos = bundle.infolist()
            if len(infos) > MAX_BUNDLE_MEMBERS:
                raise InputError(f"bundle: the zip holds {len(infos)} files; a lab bundle has "
                                 f"at most {len(_BUNDLE_MEMBERS)}")
            names = [info.filename for info in infos]
            strange = [name for name in names if name not in _BUNDLE_MEMBERS]
            if strange:
                raise InputError(f"bundle: {strange[0]!r} is not a file of a lab bundle (it "
                                 f"holds only {', '.join(_BUNDLE_MEMBERS)}); is this a bundle "
                                 "exported by Ceiling Lab?")
            if len(set(names)) != len(names):
                raise InputError("bundle: a file is in the zip twice; the bundle is damaged")
            for name in (_MANIFEST, _MACHINES_TOML, _READINGS_CSV):
                if name not in names:
                    raise InputError(f"bundle: {name} is missing; is this a bundle exported "
                                     "by Ceiling Lab?")
            if sum(info.file_size for info in infos) > MAX_BUNDLE_BYTES:
                raise InputError(f"bundle: its files unpack to more than "
                                 f"{MAX_BUNDLE_BYTES // 2**20} MB")
            if any(info.flag_bits & 0x1 for info in infos):
                raise InputError("bundle: the zip is encrypted; export the bundle again "
                                 "without a password")
            by_name = {info.filename: info for info in infos}
            manifest_raw = _member(bundle, by_name[_MANIFEST], _MAX_MANIFEST_BYTES)
            toml_raw = _member(bundle, by_name[_MACHINES_TOML], _MAX_BUNDLE_TOML_BYTES)
            readings_raw = _member(bundle, by_name[_READINGS_CSV], MAX_BUNDLE_BYTES)
            environment_raw = (_member(bundle, by_name[_ENVIRONMENT_CSV], MAX_BUNDLE_BYTES)
                               if _ENVIRONMENT_CSV in by_name else b"")
    except (zipfile.BadZipFile, zlib.error, EOFError, NotImplementedError, OSError,
            RuntimeError, ValueError) as error:
        if isinstance(error, InputError):
            raise
        raise InputError(f"bundle: not a readable zip file ({error}); choose a .zip "
                         "exported by Ceiling Lab") from None

    manifest = _parse_manifest(manifest_raw)
    try:
        toml_text = toml_raw.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"bundle: {_MACHINES_TOML} is not UTF-8 text") from None
    machine_file = parse_machines_text(toml_text, f"bundle {_MACHINES_TOML}")
    demo_machines = set(manifest["demo_machines"])
    entries = manifest["imports"]
    readings = _parse_bundle_csv(readings_raw, _READINGS_CSV, READING_COLUMNS, _READING_FLOATS,
                                 entries, "time_dtype")
    environment = _parse_bundle_csv(environment_raw, _ENVIRONMENT_CSV, ENVIRONMENT_COLUMNS,
                                    _ENVIRONMENT_FLOATS, entries, "environment_time_dtype")
    counts = manifest["counts"]
    for what, frame in (("readings", readings), ("environment", environment)):
        if counts.get(what, len(frame)) != len(frame):
            raise InputError(f"bundle: the manifest counts {counts[what]} {what} rows but the "
                             f"bundle holds {len(frame)}; the bundle is damaged")
    if counts.get("machines", len(machine_file.machines)) != len(machine_file.machines):
        raise InputError("bundle: the manifest's machine count does not match machines.toml")

    imports = []
    readings_by_import = dict(list(readings.groupby(IMPORT_ID, sort=False)))
    environment_by_import = dict(list(environment.groupby(IMPORT_ID, sort=False)))
    known = {entry["id"] for entry in entries}
    unknown = sorted((set(readings_by_import) | set(environment_by_import)) - known)
    if unknown:
        raise InputError(f"bundle: rows belong to import {unknown[0]}, which the manifest does "
                         "not list; the bundle is damaged")
    for entry in entries:
        where = f"bundle, import '{entry['name']}'"
        block = readings_by_import.get(entry["id"])
        if block is None or len(block) != entry["rows"]:
            raise InputError(f"{where}: the manifest counts {entry['rows']} readings but the "
                             f"bundle holds {0 if block is None else len(block)}")
        block = block.drop(columns=IMPORT_ID).reset_index(drop=True)
        prepared = _prepare(block, READING_COLUMNS, _READING_FLOATS, where)
        prepared.time_dtype = entry["time_dtype"]
        environment_block = environment_by_import.get(entry["id"])
        prepared_environment = None
        if environment_block is not None:
            environment_block = environment_block.drop(columns=IMPORT_ID).reset_index(drop=True)
            prepared_environment = _prepare(environment_block, ENVIRONMENT_COLUMNS,
                                            _ENVIRONMENT_FLOATS, f"{where}, environment")
            prepared_environment.time_dtype = entry["environment_time_dtype"]
        if (0 if environment_block is None else len(environment_block)) != \
                entry["environment_rows"]:
            raise InputError(f"{where}: the manifest's environment count does not match the "
                             "bundle; the bundle is damaged")
        meta = {"name": entry["name"], "source": entry["source"],
                "created_at": entry["created_at"], "is_demo": entry["is_demo"]}
        imports.append((meta, prepared, prepared_environment))
    return machine_file, demo_machines, manifest["demo_site"], imports


def _parse_manifest(raw: bytes) -> dict:
    try:
        manifest = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        raise InputError(f"bundle: {_MANIFEST} is not valid JSON; the bundle is damaged") from None
    if not isinstance(manifest, dict) or manifest.get("format") != BUNDLE_FORMAT:
        raise InputError(f"bundle: {_MANIFEST} does not describe a lab bundle (format "
                         f"{BUNDLE_FORMAT!r} expected)")
    version = manifest.get("version")
    if not isinstance(version, int) or isinstance(version, bool) or version < 1:
        raise InputError(f"bundle: {_MANIFEST} has no valid version")
    if version > BUNDLE_VERSION:
        raise InputError(f"bundle: made by a newer version of Ceiling Lab (bundle version "
                         f"{version}); update Ceiling Lab to import it")
    counts = manifest.get("counts", {})
    if not isinstance(counts, dict) or not all(
        isinstance(value, int) and not isinstance(value, bool) and value >= 0
        for value in counts.values()
    ):
        raise InputError(f"bundle: {_MANIFEST} has invalid counts")
    demo = manifest.get("demo_machines", [])
    if not isinstance(demo, list) or not all(isinstance(item, str) for item in demo):
        raise InputError(f"bundle: {_MANIFEST} has an invalid list of demonstration machines")
    entries = manifest.get("imports")
    if not isinstance(entries, list):
        raise InputError(f"bundle: {_MANIFEST} does not list the imports")
    checked = []
    seen: set[int] = set()
    for number, entry in enumerate(entries, 1):
        where = f"bundle: {_MANIFEST}, import {number}"
        if not isinstance(entry, dict):
            raise InputError(f"{where} is not a table")
        for key, kind in (("id", int), ("rows", int), ("environment_rows", int), ("name", str),
                          ("source", str), ("created_at", str), ("is_demo", bool),
                          ("time_dtype", str), ("environment_time_dtype", str)):
            value = entry.get(key)
            if not isinstance(value, kind) or (kind is int and isinstance(value, bool)):
                raise InputError(f"{where}: '{key}' is missing or not {kind.__name__}")
        if entry["id"] in seen:
            raise InputError(f"{where}: import id {entry['id']} is listed twice")
        seen.add(entry["id"])
        for key in ("time_dtype", "environment_time_dtype"):
            try:
                dtype = pd.api.types.pandas_dtype(entry[key])
            except (TypeError, ValueError):
                dtype = None
            if dtype is None or not pd.api.types.is_datetime64_any_dtype(dtype):
                raise InputError(f"{where}: '{key}' {entry[key]!r} is not a time dtype")
        name, source = _import_names(entry["name"], entry["source"])
        checked.append({**entry, "name": name, "source": source})
    manifest["counts"] = counts
    manifest["demo_machines"] = demo
    demo_site = manifest.get("demo_site", False)
    if not isinstance(demo_site, bool):
        raise InputError(f"bundle: {_MANIFEST}: demo_site must be true or false")
    manifest["demo_site"] = demo_site
    manifest["imports"] = checked
    return manifest


def _parse_bundle_csv(raw: bytes, member: str, columns: Sequence[str], floats: Sequence[str],
                      entries: Sequence[Mapping], dtype_key: str) -> pd.DataFrame:
    """A bundle CSV as a frame with the store's dtypes; floats parsed exactly."""
    expected = [IMPORT_ID, *columns]
    if not raw.strip():
        if member == _ENVIRONMENT_CSV:
            return pd.DataFrame({column: [] for column in expected})
        raise InputError(f"bundle: {member} is empty")
    try:
        text = pd.read_csv(io.BytesIO(raw), dtype=object, keep_default_na=False,
                           na_filter=False, encoding="utf-8")
    except (ValueError, pd.errors.ParserError, UnicodeDecodeError) as error:
        raise InputError(f"bundle: {member} is not a readable CSV file ({error})") from None
    if list(text.columns) != expected:
        raise InputError(f"bundle: {member} must have the columns {', '.join(expected)}")
    frame: dict[str, object] = {}
    for column in expected:
        values = text[column].to_numpy(dtype=object)
        if column in (IMPORT_ID, ROW):
            numbers = pd.to_numeric(text[column], errors="coerce")
            bad = np.flatnonzero(numbers.isna().to_numpy() |
                                 (numbers != np.round(numbers)).to_numpy())
            if len(bad):
                raise InputError(f"bundle: {member}, line {int(bad[0]) + 2}, column "
                                 f"'{column}': {values[bad[0]]!r} is not a whole number")
            frame[column] = numbers.to_numpy().astype(np.int64)
        elif column in floats:
            frame[column] = _exact_floats(values, member, column)
        else:  # time, parsed below, and text, kept as Python strings for the insert
            frame[column] = values
    result = pd.DataFrame(frame, columns=expected)
    # Times: each import's block parsed with its own dtype, as int64 ns.
    nanoseconds = np.full(len(result), _NAT_NS, dtype=np.int64)
    for entry in entries:
        mask = (result[IMPORT_ID] == entry["id"]).to_numpy()
        if not mask.any():
            continue
        strings = pd.Series(result[TIME].to_numpy()[mask], dtype=object)
        dtype = pd.api.types.pandas_dtype(entry[dtype_key])
        aware = isinstance(dtype, pd.DatetimeTZDtype)
        try:
            parsed = pd.to_datetime(strings.where(strings != "", None), format="ISO8601",
                                    utc=aware)
        except (ValueError, TypeError, OverflowError):
            raise InputError(f"bundle: {member}, import '{entry['name']}': a time could not be "
                             "read; the bundle is damaged") from None
        nanoseconds[mask] = pd.DatetimeIndex(parsed).as_unit("ns").asi8
    times = pd.DatetimeIndex(nanoseconds.view("M8[ns]"))
    result[TIME] = times
    return result


def _exact_floats(values: np.ndarray, member: str, column: str) -> np.ndarray:
    """Parse decimal text to float64 exactly (Python's float), "" as NaN."""
    cleaned = np.where(values == "", "nan", values)
    try:
        return cleaned.astype(np.float64)
    except ValueError:
        numbers = pd.to_numeric(pd.Series(cleaned, dtype=object), errors="coerce")
        bad = np.flatnonzero(numbers.isna().to_numpy() & (cleaned != "nan"))
        line = f"line {int(bad[0]) + 2}, " if len(bad) else ""
        value = f"{cleaned[bad[0]]!r} " if len(bad) else "a value "
        raise InputError(f"bundle: {member}, {line}column '{column}': {value}is not a "
                         "number; the bundle is damaged") from None
