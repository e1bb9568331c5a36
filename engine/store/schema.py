"""The store of record's SQLite schema, and the migrations that bring older stores up to date.

The schema version is ``PRAGMA user_version``. :data:`MIGRATIONS` lists the steps that bring a
store from each version to the next: SQL statements, or Python steps taking the connection
(version 4, :func:`_disc_inner_edges`). Opening a store of any earlier version applies the
missing ones in order, in one transaction (:func:`migrate`).

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
    sessions it holds (``sessions`` as text for people, ``session_names`` as a JSON array), and
    the pandas dtype of its time columns (naive or with a time zone, and the unit), so that the
    frame reads back as it went in.
``reading_blocks``
    The readings of each import in blocks of many readings (``import_id``, ``block`` number,
    ``rows``, ``data``: the columns of :data:`engine.columns.READING_COLUMNS` as an Arrow IPC
    stream, see :mod:`engine.store.blocks`), tied to the import by a foreign key with
    ``ON DELETE CASCADE``. Until version 5 the readings were rows of a ``readings`` table,
    with the columns and rules of ``environment`` below.
``environment``
    The columns of :data:`engine.columns.ENVIRONMENT_COLUMNS`, SI units, each row tied to its
    import by a foreign key with ``ON DELETE CASCADE``. Times are int64 nanoseconds since 1970
    (UTC for zone-aware times, wall clock for naive ones), NULL for NaT. Float columns carry
    no declared type, so SQLite keeps every double bit for bit (a REAL column would turn -0.0
    into 0). NaN is stored as NULL and reads back as NaN. Text columns hold no missing
    values: a missing text (None, NaN) is stored and read back as "".
``settings``
    Key and text value of settings that outlive a restart.
"""

from __future__ import annotations

import sqlite3
import tomllib
from pathlib import Path

import numpy as np

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
    SESSION,
    SPEED_REV_S,
    TEMPERATURE_K,
    TIME,
    VOLTAGE_V,
)
from engine.errors import InputError
from engine.store.base import STORE_ENV_VAR

# --- Schema ------------------------------------------------------------------------------------
_TIME_NS = "time_ns"  # SQL column that holds TIME as int64 nanoseconds
_READING_FLOATS = (ELAPSED_S, SPEED_REV_S, BELT_SPEED_M_S, CURRENT_A, RH, TEMPERATURE_K,
                   PRESSURE_PA, VOLTAGE_V)
_ENVIRONMENT_FLOATS = (ELAPSED_S, RH, TEMPERATURE_K, PRESSURE_PA)
_TEXTS = (MACHINE, SESSION, NOTE, FLAGS)
_NAT_NS = np.iinfo(np.int64).min  # pandas' NaT as int64

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

#: Version 5: the readings lose their indexes by machine and by session, and each import keeps
#: the names of its sessions. Keeping the two indexes was most of the time of saving an import
#: (10^6 readings: 10.8 s with them, 6.5 s without), and no page reads readings by machine or
#: session from SQLite any more (they read the derived cache); ``readings(machines=...)`` scans
#: the table about as fast (0.8 s at 10^6 either way). The index by import stays: it costs
#: little (imports append in id order) and keeps ``delete_import`` and the cache's rebuild of
#: one import from scanning every reading. ``imports.session_names`` (a JSON array of text) lets
#: :meth:`~engine.store.sqlite.SQLiteStore.counts` count the lab's sessions without reading the
#: readings (without the index that took 28 s at 10^7). Filled here once from the readings.
def _session_names(connection: sqlite3.Connection) -> None:
    """Version 5: ``imports.session_names``, gathered from the readings (added only when
    missing, as every step of version 5 may meet a store that already has it)."""
    columns = {row[1] for row in connection.execute("PRAGMA table_info(imports)")}
    if "session_names" not in columns:
        connection.execute("ALTER TABLE imports ADD COLUMN session_names TEXT NOT NULL "
                           "DEFAULT '[]'")
    if _has_table(connection, "readings"):  # else the readings are blocks: names kept
        connection.execute("UPDATE imports SET session_names = (SELECT json_group_array("
                           "DISTINCT session) FROM readings WHERE readings.import_id = "
                           "imports.id)")


def _has_table(connection: sqlite3.Connection, name: str) -> bool:
    return bool(connection.execute("SELECT COUNT(*) FROM sqlite_master WHERE type = 'table' "
                                   "AND name = ?", (name,)).fetchone()[0])


SCHEMA_V5: tuple[object, ...] = (
    _session_names,
    "DROP INDEX IF EXISTS readings_by_machine",
    "DROP INDEX IF EXISTS readings_by_session",
)

_READING_SQL = tuple(_TIME_NS if column == TIME else column for column in READING_COLUMNS)
_ENVIRONMENT_SQL = tuple(_TIME_NS if column == TIME else column for column in ENVIRONMENT_COLUMNS)
#: Readings moved into blocks at a time by the step to version 6.
_MOVED_ROWS = 200_000


def _readings_to_blocks(connection: sqlite3.Connection) -> None:
    """Version 6: move every import's readings from ``readings`` (one row a reading) into
    ``reading_blocks`` (:mod:`engine.store.blocks`), in stored order, and drop the old table.
    A one-time wait on opening a large store (about a minute per 10^7 readings)."""
    from engine.store.blocks import encode_block

    if not _has_table(connection, "readings"):  # already blocks (the step met a newer store)
        return
    connection.execute("""CREATE TABLE reading_blocks (
        import_id INTEGER NOT NULL REFERENCES imports(id) ON DELETE CASCADE,
        block INTEGER NOT NULL,
        rows INTEGER NOT NULL,
        data BLOB NOT NULL
    )""")
    connection.execute("CREATE UNIQUE INDEX reading_blocks_by_import "
                       "ON reading_blocks(import_id, block)")
    kinds = ["int" if column in ("row", _TIME_NS) else "float" if column in _READING_FLOATS
             else "text" for column in _READING_SQL]
    selected = ", ".join(f'IFNULL("{column}", {_NAT_NS})' if column == _TIME_NS
                         else f'"{column}"' for column in _READING_SQL)
    import_ids = [row[0] for row in connection.execute("SELECT id FROM imports ORDER BY id")]
    for import_id in import_ids:
        cursor = connection.execute(f"SELECT {selected} FROM readings WHERE import_id = ? "
                                    "ORDER BY rowid", (import_id,))
        block = 0
        while batch := cursor.fetchmany(_MOVED_ROWS):
            values = np.array(batch, dtype=object)
            arrays = [values[:, number].astype(np.float64) if kind == "float" else
                      values[:, number].astype(np.int64) if kind == "int" else
                      np.array(["" if text is None else str(text) for text in values[:, number]],
                               dtype=object)
                      for number, kind in enumerate(kinds)]
            connection.execute("INSERT INTO reading_blocks (import_id, block, rows, data) "
                               "VALUES (?, ?, ?, ?)",
                               (import_id, block, len(batch),
                                encode_block(_READING_SQL, arrays, 0, len(batch))))
            block += 1
    connection.execute("DROP TABLE readings")


#: Version 6: readings kept in blocks of many readings (see :mod:`engine.store.blocks`).
SCHEMA_V6: tuple[object, ...] = (_readings_to_blocks,)

#: Statements (or Python steps taking the connection) that bring a store from version ``n`` to
#: ``n + 1`` are ``MIGRATIONS[n]``.
MIGRATIONS: tuple[tuple[object, ...], ...] = (SCHEMA_V1, SCHEMA_V2, SCHEMA_V3, SCHEMA_V4,
                                              SCHEMA_V5, SCHEMA_V6)
#: Version of a store written by this module.
SCHEMA_VERSION = len(MIGRATIONS)

def schema_version(connection: sqlite3.Connection) -> int:
    """Schema version of an open SQLite connection (``PRAGMA user_version``)."""
    return int(connection.execute("PRAGMA user_version").fetchone()[0])



def migrate(connection: sqlite3.Connection, path: Path) -> None:
    """Bring an open store to :data:`SCHEMA_VERSION` in one transaction (or refuse it)."""
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


