"""The store's contract: what every back end offers, and where the lab's store is.

:class:`Store` is the interface the pages, the command line and the derived cache use. The
embedded back end (:class:`engine.store.sqlite.SQLiteStore`, one SQLite file) implements it; a
shared server for a classroom can sit beside it behind the same methods. Frames go in and out in
the columns of :mod:`engine.columns` (SI units) with ``import_id``, whatever the back end.
"""

from __future__ import annotations

import abc
import contextlib
import os
import threading
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path

import pandas as pd
import platformdirs

from engine.errors import InputError
from engine.machines import Machine, MachineFile, dump_machines

#: Environment variable that names the store file.
STORE_ENV_VAR = "CEILING_LAB_DB"
#: File name of the store in the user's data folder.
STORE_FILE_NAME = "ceiling-lab.sqlite3"
#: Column of the frames returned by :meth:`Store.readings` and :meth:`Store.environment`.
IMPORT_ID = "import_id"


def is_server_location(location: object) -> bool:
    """Whether a store location is a PostgreSQL URL (``postgresql://...``), not a file path."""
    return isinstance(location, str) and location.strip().lower().startswith(
        ("postgresql://", "postgres://"))


def store_location() -> str | Path:
    """Where the lab's store is: ``$CEILING_LAB_DB`` (a file path, or a PostgreSQL URL kept as
    text), else the file in the user's data folder (:func:`default_store_path`)."""
    named = os.environ.get(STORE_ENV_VAR, "").strip()
    if is_server_location(named):
        return named
    return default_store_path()


def default_store_path() -> Path:
    """Path of the store: ``$CEILING_LAB_DB``, else a file in the user's data folder.

    Returns
    -------
    Path
        ``CEILING_LAB_DB`` when it is set to a file (not empty, not a server URL); otherwise
        ``platformdirs.user_data_dir("ceiling-lab") / "ceiling-lab.sqlite3"``. The folder is
        created by :func:`engine.store.open_store`, not here.
    """
    named = os.environ.get(STORE_ENV_VAR, "").strip()
    if named and not is_server_location(named):
        return Path(named).expanduser()
    return Path(platformdirs.user_data_dir("ceiling-lab")) / STORE_FILE_NAME


class Store(abc.ABC):
    """An open store of a lab: machines, the site, imports of readings and environment logs.

    Every write is one transaction: all of it is stored or none. A store can be used from
    several threads. Use :func:`engine.store.open_store` to get one; close it with
    :meth:`close` or use it in a ``with`` block.
    """

    # --- life cycle ----------------------------------------------------------------------------
    @property
    @abc.abstractmethod
    def path(self) -> Path:
        """Where the store is (its file, for the embedded store)."""

    @property
    def location(self) -> str:
        """Where the lab is, for people: the file, or the database and server (never a
        password)."""
        return str(self.path)

    def may(self, action: str) -> bool:  # noqa: ARG002 - one user owns an embedded store
        """Whether the account may do ``action``: ``"change"`` (add or change machines, imports
        and settings), ``"change_site"`` (the lab's air), ``"remove_machines"`` or
        ``"remove_imports"``. Always true for the embedded store; a shared server's accounts may
        have fewer rights."""
        return True

    @property
    @abc.abstractmethod
    def schema_version(self) -> int:
        """Schema version of the open store."""

    @property
    def cache_folder(self) -> Path:
        """Folder of the derived cache (:mod:`engine.store.cache`) of this store."""
        return Path(platformdirs.user_cache_dir("ceiling-lab")) / "derived"

    @abc.abstractmethod
    def close(self) -> None:
        """Close the store; it cannot be used afterwards."""

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    # --- machines and site ---------------------------------------------------------------------
    @abc.abstractmethod
    def save_machine(self, machine: Machine, demo: bool = False) -> None:
        """Store a machine, replacing one of the same id (which keeps its place in the list).

        Parameters
        ----------
        machine : Machine
            Stored as its TOML table, so the units the user wrote are kept.
        demo : bool
            Whether it belongs to the demonstration data (see :meth:`remove_demo`).
        """

    @abc.abstractmethod
    def delete_machine(self, machine_id: str) -> bool:
        """Remove a machine; its readings stay. Returns whether it was in the store."""

    def machines(self) -> MachineFile:
        """The site and the machines, in the order they were first saved."""
        from engine.machines import parse_machines_text, site_from_table

        with self._snapshot():
            site_rows, machine_rows = self._machine_rows()
        site = site_from_table(dict(site_rows), f"{self.location}, site")
        machines = tuple(parse_machines_text(text, f"{self.location}, machine '{machine_id}'")
                         .machines[0] for machine_id, text in machine_rows)
        return MachineFile(site, machines)

    @abc.abstractmethod
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

    # --- imports -------------------------------------------------------------------------------
    @abc.abstractmethod
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

        from engine.columns import MACHINE, READING_COLUMNS, SESSION
        from engine.store.frames import _ids, _texts
        from engine.store.schema import _READING_FLOATS

        filters = [(MACHINE, _texts(machines)), (SESSION, _texts(sessions)),
                   (IMPORT_ID, _ids(import_ids))]
        return self._read_table("readings", READING_COLUMNS, _READING_FLOATS, filters,
                                "time_dtype")

    def environment(self, import_ids: Iterable[int] | int | None = None) -> pd.DataFrame:
        """Stored environment logs, columns ENVIRONMENT_COLUMNS and ``import_id``."""
        from engine.columns import ENVIRONMENT_COLUMNS
        from engine.store.frames import _ids
        from engine.store.schema import _ENVIRONMENT_FLOATS

        return self._read_table("environment", ENVIRONMENT_COLUMNS, _ENVIRONMENT_FLOATS,
                                [(IMPORT_ID, _ids(import_ids))], "environment_time_dtype")

    def imports(self) -> pd.DataFrame:
        """The imports, oldest first.

        Returns
        -------
        pandas.DataFrame
            Columns ``id``, ``name``, ``source``, ``created_at`` (UTC, ISO 8601 text),
            ``is_demo`` (bool), ``rows`` (number of readings), ``machines`` and ``sessions``
            (their names, joined by ", "), ``environment_rows``.
        """
        from engine.store.frames import _imports_frame

        return _imports_frame(*reversed(self._import_rows()))

    @abc.abstractmethod
    def delete_import(self, import_id: int) -> bool:
        """Remove an import with its readings and environment log. Returns whether it existed."""

    # --- demonstration data, settings and counts -----------------------------------------------
    @abc.abstractmethod
    def remove_demo(self) -> dict[str, int]:
        """Remove the demonstration machines, imports (with their readings) and site.

        Returns
        -------
        dict of str to int
            How many ``machines``, ``imports`` and ``readings`` were removed.
        """

    @abc.abstractmethod
    def setting(self, key: str, default: str | None = None) -> str | None:
        """A stored setting, or ``default`` when it was never saved."""

    @abc.abstractmethod
    def save_setting(self, key: str, value: str) -> None:
        """Store a setting (text), replacing any earlier value of the same key."""

    @abc.abstractmethod
    def has_demo(self) -> bool:
        """Whether any demonstration machine or import is stored (a demo site alone is not)."""

    @abc.abstractmethod
    def counts(self) -> dict[str, int]:
        """Numbers of machines, imports, sessions (distinct session names) and readings."""

    @abc.abstractmethod
    def is_empty(self) -> bool:
        """Whether the store holds no machine and no import (the site does not count)."""

    # --- lab bundle ----------------------------------------------------------------------------
    def export_bundle(self, import_ids: Iterable[int] | int | None = None) -> bytes:
        """The lab as a bundle (:mod:`engine.store.bundle`): a zip of machines, readings and
        environment logs.

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
        from engine.store.bundle import write_bundle
        from engine.store.frames import _ids

        wanted = _ids(import_ids)
        with self._snapshot():  # the members agree with each other
            imports = self.imports()
            machine_file = self.machines()
            demo_machines, demo_site = self._demo_marks()
            dtypes = self._time_dtypes()
            if wanted is not None:
                missing = sorted(set(wanted) - set(imports["id"].tolist()))
                if missing:
                    raise InputError(f"import {missing[0]} is not in the store; choose "
                                     "from the imports listed")
                imports = imports[imports["id"].isin(wanted)]
            readings = self.readings(import_ids=imports["id"].tolist())
            environment = self.environment(import_ids=imports["id"].tolist())
        return write_bundle(machine_file, imports, dtypes, readings, environment,
                            demo_machines, demo_site)

    def bundle_preview(self, data: bytes) -> dict[str, object]:
        """What importing a bundle would do, read from its manifest and machines file.

        Parameters
        ----------
        data : bytes
            A bundle made by :meth:`export_bundle`.

        Returns
        -------
        dict
            ``machines`` (the bundle's machine ids), ``replaced`` (ids of stored machines the
            bundle describes differently, which :meth:`import_bundle` would replace),
            ``imports`` and ``readings`` (as its manifest counts them), ``already`` (imports of
            the bundle the lab holds already, which :meth:`import_bundle` skips).

        Raises
        ------
        InputError
            When the data is not a bundle or its manifest or machines file is damaged.
        """
        from engine.store.bundle import BundleReader

        with BundleReader(data) as bundle:
            texts = {machine.id: dump_machines([machine])
                     for machine in bundle.machine_file.machines}
            stored = self._stored_machine_texts()
            imports = self.imports()
            present = set(zip(imports["name"], imports["source"], imports["created_at"],
                              imports["rows"].astype(int), strict=True))
            from engine.store.bundle import _bundle_key

            return {"machines": list(texts),
                    "already": sum(_bundle_key(entry) in present for entry in bundle.entries),
                    "replaced": [machine_id for machine_id, text in texts.items()
                                 if machine_id in stored and stored[machine_id] != text],
                    "imports": len(bundle.entries),
                    "readings": sum(entry["rows"] for entry in bundle.entries)}

    @abc.abstractmethod
    def import_bundle(self, data: bytes, replace_machines: bool = False) -> list[int]:
        """Add a bundle's machines and imports to the store, in one transaction.

        A machine of the bundle that is stored already, described differently, is replaced
        only when ``replace_machines`` is true; otherwise nothing is imported and the error
        names them (:meth:`bundle_preview` lists them beforehand). A stored machine keeps its
        demonstration status whatever the bundle says; the bundle's site is taken only when
        the store has none. Every import of the bundle becomes a new import, except those the
        lab holds already (same name, file, time stored and number of readings): restoring a
        bundle twice, or copying a lab again, adds nothing twice. The readings are
        read and written in chunks (memory stays flat); an import holds at most
        :data:`engine.readings.MAX_ROWS` readings.

        Parameters
        ----------
        data : bytes
            A bundle made by :meth:`export_bundle`.
        replace_machines : bool
            Whether stored machines described differently in the bundle may be replaced.

        Returns
        -------
        list of int
            Ids of the new imports, in the bundle's order (those skipped left out).

        Raises
        ------
        InputError
            When the data is not a bundle, is too large, any member is damaged, or it would
            replace machines without ``replace_machines``. Nothing is stored then.
        """

    # --- what every back end provides for the methods above ------------------------------------
    @abc.abstractmethod
    def _snapshot(self) -> contextlib.AbstractContextManager[None]:
        """A context in which several reads see one state of the store."""

    @abc.abstractmethod
    def _demo_marks(self) -> tuple[list[str], bool]:
        """Ids of the demonstration machines (in order) and whether the site is the demo's."""

    @abc.abstractmethod
    def _time_dtypes(self) -> dict[int, tuple[str, str]]:
        """Import id -> time dtype of its readings and of its environment log."""

    @abc.abstractmethod
    def _read_table(self, table: str, columns: Sequence[str], floats: Sequence[str],
                    filters: Sequence[tuple[str, list | None]],
                    dtype_column: str) -> pd.DataFrame:
        """Rows of ``readings`` or ``environment`` in stored order, ``columns`` and
        ``import_id``, filtered by ``(column, values or None)``; time in the dtype the imports'
        ``dtype_column`` names (see :meth:`readings`)."""

    @abc.abstractmethod
    def _import_rows(self) -> tuple[list[str], list[tuple]]:
        """The column names and rows of the imports table, oldest first (the columns of
        :meth:`imports`, and any the back end adds)."""

    @abc.abstractmethod
    def _machine_rows(self) -> tuple[list[tuple], list[tuple]]:
        """The site's (key, value) rows and the machines' (id, text) rows, each in the order
        first saved."""

    @abc.abstractmethod
    def _stored_machine_texts(self) -> dict[str, str]:
        """Machine id -> its stored machines-file text."""

    def _derive_import(self, import_id: int, deriving: _Deriving, created_at: str) -> None:
        """Give the derived cache the files of an import just stored, made alongside the
        writing (reading 10^6 readings back costs several times the deriving).

        Best effort: the import is committed whatever happens here, and when the files are not
        there :meth:`DerivedCache.refresh` builds them from the store on the next read.
        """
        if deriving.machine_file is None or (deriving.files is None and not deriving.pending):
            return
        from engine.store.cache import DerivedCache

        try:
            cache = DerivedCache(self)
            if deriving.pending:
                cache.adopt(import_id, created_at, deriving.rows, deriving.pending,
                            deriving.machine_file)
            else:
                cache.add_files(import_id, created_at, deriving.files, deriving.machine_file)
        except Exception:  # noqa: BLE001 - derived files only; refresh builds them again
            deriving.discard()


class _Deriving:
    """The derived files of an import's readings, made in a thread while the store writes them.

    Both halves take about as long at 10^6 readings, and both leave Python's lock for much of
    their work (SQLite while it writes its pages, a server while it takes the rows; numpy,
    pandas and Arrow in their loops), so on two cores an import takes about the longer of the
    two instead of their sum. The thread derives the readings, makes the group and sample
    tables (:class:`engine.store.cache.ImportFiles`) and writes the three files under
    temporary names (:attr:`pending`); once the import is stored they get their names
    (:meth:`Store._derive_import`), or are removed (:meth:`discard`) when it is not. Where
    writing failed, :attr:`files` keeps the tables to write after the commit; both are empty
    when deriving failed (the cache's refresh builds the files later).
    """

    def __init__(self, prepared: object, store: Store) -> None:
        self.machine_file: MachineFile | None = None
        self.files = None
        self.pending: dict[str, Path] = {}
        self.rows = 0
        self._prepared = prepared
        self._folder = store.cache_folder
        try:
            self.machine_file = store.machines()
        except Exception:  # noqa: BLE001 - the import goes on; refresh builds the files later
            self._thread = None
            return
        self._thread = threading.Thread(target=self._run, name="derive-import", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        try:
            from engine.columns import READING_COLUMNS
            from engine.store.cache import import_files  # the cache imports the physics
            from engine.store.schema import _READING_FLOATS

            self.files = import_files(self._prepared.frame(READING_COLUMNS, _READING_FLOATS),
                                      self.machine_file)
            self.rows = self.files.derived.num_rows
        except Exception:  # noqa: BLE001 - derived files only; refresh builds them again
            self.files = None
            return
        try:
            from engine.store.cache import write_pending

            self.pending = write_pending(self._folder, self.files)
            self.files = None  # written: the tables need not stay in memory
        except Exception:  # noqa: BLE001 - written after the commit instead
            self.pending = {}

    def join(self) -> None:
        if self._thread is not None:
            self._thread.join()

    def discard(self) -> None:
        """Remove the files written for an import that was not stored."""
        self.join()
        if self.pending:
            from engine.store.cache import discard_pending

            discard_pending(self.pending)
            self.pending = {}
