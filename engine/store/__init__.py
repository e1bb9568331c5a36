"""The lab's store: machines, the site, imports of readings and environment logs, and the
derived cache.

One SQLite file holds the lab (the store of record). Its path is the environment variable
``CEILING_LAB_DB`` or, when that is not set, ``ceiling-lab.sqlite3`` in the user's data folder
(see :func:`default_store_path`). :func:`open_store` opens (and creates, or migrates) it::

    with open_store() as store:
        store.save_machine(machine)
        import_id = store.import_readings(frame, "Tuesday session", source="meter.csv")
        frame = store.readings(machines=["gallery-twin"])

The package's parts:

:mod:`engine.store.base`
    The contract every back end keeps (:class:`Store`) and where the lab's store is.
:mod:`engine.store.sqlite`
    The embedded store of record in SQLite (:class:`~engine.store.sqlite.SQLiteStore`), its
    transactions and locking.
:mod:`engine.store.schema`
    The SQLite schema and its migrations (:data:`MIGRATIONS`, :data:`SCHEMA_VERSION`).
:mod:`engine.store.frames`
    Frames checked and converted to stored arrays, and back.
:mod:`engine.store.bundle`
    The lab bundle: a lab as one zip file, and back.
:mod:`engine.store.cache`
    The derived cache: derived columns and sufficient statistics per import in Parquet files
    beside the store, rebuilt when a machine or the site changes.
"""

from engine.store.base import (
    IMPORT_ID,
    STORE_ENV_VAR,
    STORE_FILE_NAME,
    Store,
    default_store_path,
)
from engine.store.bundle import (
    BUNDLE_FORMAT,
    BUNDLE_VERSION,
    MAX_BUNDLE_BYTES,
    MAX_BUNDLE_MEMBERS,
)
from engine.store.frames import MAX_NAME_LENGTH
from engine.store.schema import (
    MIGRATIONS,
    SCHEMA_V1,
    SCHEMA_V2,
    SCHEMA_V3,
    SCHEMA_V4,
    SCHEMA_V5,
    SCHEMA_VERSION,
    schema_version,
)
from engine.store.sqlite import (
    BUSY_TIMEOUT_S,
    CHUNK_ROWS,
    LOCK_WAIT_S,
    SQLiteStore,
    open_store,
)

__all__ = [
    "BUNDLE_FORMAT", "BUNDLE_VERSION", "BUSY_TIMEOUT_S", "CHUNK_ROWS", "IMPORT_ID",
    "LOCK_WAIT_S", "MAX_BUNDLE_BYTES", "MAX_BUNDLE_MEMBERS", "MAX_NAME_LENGTH", "MIGRATIONS",
    "SCHEMA_V1", "SCHEMA_V2", "SCHEMA_V3", "SCHEMA_V4", "SCHEMA_V5",
    "SCHEMA_VERSION", "STORE_ENV_VAR",
    "STORE_FILE_NAME", "SQLiteStore", "Store", "default_store_path", "open_store",
    "schema_version",
]
