"""The lab bundle: a whole lab (or some of its imports) as one zip file, and back.

A bundle (:meth:`engine.store.Store.export_bundle`, :meth:`engine.store.Store.import_bundle`) is
a zip file with ``manifest.json``, ``machines.toml``, ``readings.csv`` and ``environment.csv`` in
the store's own SI columns; floats are written in their shortest exact form and read back bit
for bit. Reading a bundle (:class:`BundleReader`) checks the zip, its members' sizes, the
manifest and the machines file first, then streams the readings and the environment log in
chunks, each checked value by value, into the store's one transaction: memory stays flat, and a
damaged or hostile file is refused whole.
"""

from __future__ import annotations

import functools
import io
import json
import re
import zipfile
import zlib
import zoneinfo
from collections.abc import Iterator, Mapping, Sequence
from datetime import timezone

import numpy as np
import pandas as pd

from engine.columns import ENVIRONMENT_COLUMNS, READING_COLUMNS, ROW, TIME
from engine.errors import InputError
from engine.machines import MachineFile, dump_machines, parse_machines_text
from engine.readings.options import MAX_ROWS
from engine.store.base import IMPORT_ID
from engine.store.frames import _import_names, _now_text, _prepare, _Prepared, _restore_time
from engine.store.schema import _ENVIRONMENT_FLOATS, _NAT_NS, _READING_FLOATS, SCHEMA_VERSION

#: Format name and version written in a bundle's manifest.
BUNDLE_FORMAT = "ceiling-lab-bundle"
BUNDLE_VERSION = 1
#: Largest bundle accepted, compressed and uncompressed (all members together) [bytes].
MAX_BUNDLE_BYTES = 500 * 1024 * 1024
#: Most members a bundle's zip may list.
MAX_BUNDLE_MEMBERS = 8
#: Rows of a bundle CSV checked and written at a time.
BUNDLE_CHUNK_ROWS = 50_000
_MAX_MANIFEST_BYTES = 1024 * 1024
_MAX_LINE_BYTES = 1024 * 1024  # a bundle line is a reading: a few hundred bytes
_READ_BYTES = 1024 * 1024
_LARGEST_WHOLE = 2.0**53  # whole numbers above lose digits as floats
_TIME_DTYPE_TEXT = re.compile(r"datetime64\[(s|ms|us|ns)(?:, ([^\]]+))?\]")
_FIXED_OFFSET_TEXT = re.compile(r"(UTC)?[+-]\d\d:\d\d")
_NS_PER = {"s": 10**9, "ms": 10**6, "us": 10**3, "ns": 1}
_MAX_BUNDLE_TOML_BYTES = 4 * 1024 * 1024
_MANIFEST = "manifest.json"
_MACHINES_TOML = "machines.toml"
_READINGS_CSV = "readings.csv"
_ENVIRONMENT_CSV = "environment.csv"
_BUNDLE_MEMBERS = (_MANIFEST, _MACHINES_TOML, _READINGS_CSV, _ENVIRONMENT_CSV)


def write_bundle(machine_file: MachineFile, imports: pd.DataFrame, dtypes: Mapping[int, tuple],
                 readings: pd.DataFrame, environment: pd.DataFrame,
                 demo_machines: Sequence[str], demo_site: bool) -> bytes:
    """The bytes of a bundle.

    Parameters
    ----------
    machine_file : MachineFile
        The site and every machine.
    imports : pandas.DataFrame
        The imports included, as :meth:`engine.store.Store.imports` lists them.
    dtypes : mapping of int to (str, str)
        Import id -> time dtype of its readings and of its environment log.
    readings, environment : pandas.DataFrame
        The stored readings and environment rows of those imports, with ``import_id``.
    demo_machines : sequence of str
        Ids of the demonstration machines.
    demo_site : bool
        Whether the site is the demonstration lab's.

    Returns
    -------
    bytes
        A zip with ``manifest.json`` (format ``ceiling-lab-bundle``, version, counts and the
        imports), ``machines.toml``, ``readings.csv`` and ``environment.csv``.
    """
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
        "demo_machines": list(demo_machines),
        "demo_site": bool(demo_site),
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


_ZIP_ERRORS = (zipfile.BadZipFile, zlib.error, EOFError, NotImplementedError, OSError,
               RuntimeError, ValueError)


class _BoundedStream(io.RawIOBase):
    """A member read in blocks: no line longer than ``max_line`` bytes, size as declared."""

    def __init__(self, member: io.BufferedIOBase, name: str, size: int, max_line: int) -> None:
        self._member = member
        self._name = name
        self._size = size
        self._max_line = max_line
        self._read = 0
        self._since_newline = 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:
        wanted = min(len(buffer), _READ_BYTES)
        try:
            block = self._member.read(wanted)
        except _ZIP_ERRORS as error:
            raise InputError(f"bundle: {self._name} is damaged ({error}); export the bundle "
                             "again") from None
        self._read += len(block)
        if self._read > self._size or (not block and self._read != self._size):
            raise InputError(f"bundle: {self._name} is damaged (its size does not match)")
        last = block.rfind(b"\n")
        self._since_newline = (len(block) - last - 1 if last >= 0
                               else self._since_newline + len(block))
        if self._since_newline > self._max_line:
            raise InputError(f"bundle: {self._name} has a line longer than {self._max_line} "
                             "bytes; the bundle is damaged")
        buffer[:len(block)] = block
        return len(block)


class BundleReader:
    """A bundle checked up to its readings: the zip, its members, the manifest, the machines.

    The readings and the environment log are not read here: :meth:`blocks` streams them in
    chunks of :data:`BUNDLE_CHUNK_ROWS` rows, each checked and converted, so that memory stays
    a small multiple of one chunk whatever the bundle holds. The store writes the chunks in one
    transaction, so a member found damaged half-way stores nothing.

    Attributes
    ----------
    machine_file : MachineFile
        The bundle's site and machines.
    demo_machines : set of str
        Ids of the machines the bundle marks as demonstration data.
    demo_site : bool
        Whether the bundle's site is the demonstration lab's.
    entries : list of dict
        The manifest's imports, checked (``id``, ``name``, ``source``, ``created_at``,
        ``is_demo``, ``rows``, ``environment_rows`` and the two time dtypes).
    """

    def __init__(self, data: bytes) -> None:
        if not isinstance(data, (bytes, bytearray, memoryview)):
            raise InputError("bundle: expected the bytes of a .zip file")
        if len(data) > MAX_BUNDLE_BYTES:
            raise InputError(f"bundle: the file is larger than {MAX_BUNDLE_BYTES // 2**20} MB")
        try:
            self._zip = zipfile.ZipFile(io.BytesIO(data))
        except _ZIP_ERRORS as error:
            raise InputError(f"bundle: not a readable zip file ({error}); choose a .zip "
                             "exported by Ceiling Lab") from None
        try:
            manifest_raw, toml_raw = self._check_zip()
        except BaseException:
            self._zip.close()
            raise
        try:
            manifest = _parse_manifest(manifest_raw)
            try:
                toml_text = toml_raw.decode("utf-8")
            except UnicodeDecodeError:
                raise InputError(f"bundle: {_MACHINES_TOML} is not UTF-8 text") from None
            self.machine_file = parse_machines_text(toml_text, f"bundle {_MACHINES_TOML}")
            if manifest["counts"].get("machines", len(self.machine_file.machines)) != \
                    len(self.machine_file.machines):
                raise InputError("bundle: the manifest's machine count does not match "
                                 "machines.toml")
        except BaseException:
            self._zip.close()
            raise
        self.demo_machines = set(manifest["demo_machines"])
        self.demo_site = manifest["demo_site"]
        self.entries = manifest["imports"]
        self._counts = manifest["counts"]

    def _check_zip(self) -> tuple[bytes, bytes]:
        try:
            infos = self._zip.infolist()
            if len(infos) > MAX_BUNDLE_MEMBERS:
                raise InputError(f"bundle: the zip holds {len(infos)} files; a lab bundle has "
                                 f"at most {MAX_BUNDLE_MEMBERS}")
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
            self._infos = {info.filename: info for info in infos}
            return (_member(self._zip, self._infos[_MANIFEST], _MAX_MANIFEST_BYTES),
                    _member(self._zip, self._infos[_MACHINES_TOML], _MAX_BUNDLE_TOML_BYTES))
        except InputError:
            raise
        except _ZIP_ERRORS as error:
            raise InputError(f"bundle: not a readable zip file ({error}); choose a .zip "
                             "exported by Ceiling Lab") from None

    def close(self) -> None:
        """Release the zip."""
        self._zip.close()

    def __enter__(self) -> BundleReader:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    def blocks(self, environment: bool = False) -> Iterator[tuple[dict, _Prepared]]:
        """The readings (or the environment log), chunk by chunk, per import.

        Yields
        ------
        (dict, _Prepared)
            The manifest's entry of the import and a chunk of its rows, checked and converted
            (:func:`engine.store.frames._prepare`), its ``time_dtype`` the manifest's. After
            the last chunk the rows counted per import are checked against the manifest.

        Raises
        ------
        InputError
            Naming the member, the row and the column of the first value that cannot be
            stored, or the import whose rows do not match the manifest (or pass
            :data:`engine.readings.MAX_ROWS`).
        """
        member = _ENVIRONMENT_CSV if environment else _READINGS_CSV
        columns = ENVIRONMENT_COLUMNS if environment else READING_COLUMNS
        floats = _ENVIRONMENT_FLOATS if environment else _READING_FLOATS
        dtype_key = "environment_time_dtype" if environment else "time_dtype"
        rows_key = "environment_rows" if environment else "rows"
        what = "environment rows" if environment else "readings"
        count_key = "environment" if environment else "readings"  # in the manifest's counts
        by_id = {entry["id"]: entry for entry in self.entries}
        seen = dict.fromkeys(by_id, 0)
        total = 0
        for text, first_row in self._csv_chunks(member, [IMPORT_ID, *columns]):
            frame = _parse_chunk(text, member, columns, floats, by_id, dtype_key, first_row)
            total += len(frame)
            if total > self._counts.get(count_key, total):
                raise InputError(f"bundle: {member} holds more rows than the manifest counts "
                                 f"({self._counts[count_key]}); the bundle is damaged")
            for import_id, block in frame.groupby(IMPORT_ID, sort=False):
                entry = by_id[import_id]
                seen[import_id] += len(block)
                where = f"bundle, import '{entry['name']}'"
                if seen[import_id] > entry[rows_key]:
                    raise InputError(f"{where}: {member} holds more {what} than the manifest "
                                     f"counts ({entry[rows_key]}); the bundle is damaged")
                block = block.drop(columns=IMPORT_ID).reset_index(drop=True)
                prepared = _prepare(block, columns, floats,
                                    f"{where}, environment" if environment else where)
                prepared.time_dtype = entry[dtype_key]
                yield entry, prepared
        counted = self._counts.get(count_key, total)
        if counted != total:
            raise InputError(f"bundle: the manifest counts {counted} {count_key} rows "
                             f"but the bundle holds {total}; the bundle is damaged")
        for import_id, entry in by_id.items():
            if seen[import_id] != entry[rows_key]:
                raise InputError(f"bundle, import '{entry['name']}': the manifest counts "
                                 f"{entry[rows_key]} {what} but the bundle holds "
                                 f"{seen[import_id]}; the bundle is damaged")

    def _csv_chunks(self, member: str,
                    expected: Sequence[str]) -> Iterator[tuple[pd.DataFrame, int]]:
        """The member's CSV as text frames of at most BUNDLE_CHUNK_ROWS rows."""
        info = self._infos.get(member)
        if info is None or info.file_size == 0:
            if member == _ENVIRONMENT_CSV:
                return
            raise InputError(f"bundle: {member} is empty")
        try:
            opened = self._zip.open(info)
        except _ZIP_ERRORS as error:
            raise InputError(f"bundle: {member} cannot be read ({error}); the bundle is "
                             "damaged") from None
        with opened, io.BufferedReader(_BoundedStream(opened, member, info.file_size,
                                                      _MAX_LINE_BYTES)) as stream:
            try:
                reader = pd.read_csv(stream, dtype=object, keep_default_na=False,
                                     na_filter=False, encoding="utf-8",
                                     chunksize=BUNDLE_CHUNK_ROWS)
                first_row = 1
                for text in reader:
                    if list(text.columns) != list(expected):
                        raise InputError(f"bundle: {member} must have the columns "
                                         f"{', '.join(expected)}")
                    yield text, first_row
                    first_row += len(text)
            except pd.errors.EmptyDataError:
                if member == _ENVIRONMENT_CSV:
                    return
                raise InputError(f"bundle: {member} is empty") from None
            except (ValueError, pd.errors.ParserError, UnicodeDecodeError) as error:
                if isinstance(error, InputError):
                    raise
                raise InputError(f"bundle: {member} is not a readable CSV file "
                                 f"({str(error)[:200]})") from None


def _bundle_key(entry: Mapping) -> tuple:
    """What tells an import of a bundle already in a lab: its name, source, time stored and
    number of readings (the same as the imports table's columns)."""
    return (entry["name"], entry["source"], entry["created_at"], int(entry["rows"]))


def _bundle_machines(bundle: BundleReader, stored: Mapping[str, tuple[str, bool]],
                     replace_machines: bool) -> list[tuple[object, str, bool]]:
    """The machines a bundle's import saves: (machine, its text, demo), in the bundle's order.

    ``stored`` maps each stored machine id to its text and demonstration status. A stored
    machine the bundle describes differently is replaced only with ``replace_machines``
    (otherwise an ``InputError`` names them); a bundle never changes the demonstration status
    of a stored machine.
    """
    texts = {machine.id: dump_machines([machine]) for machine in bundle.machine_file.machines}
    replaced = [machine_id for machine_id, text in texts.items()
                if machine_id in stored and stored[machine_id][0] != text]
    if replaced and not replace_machines:
        raise InputError(
            f"bundle: it would replace {len(replaced)} machine(s) already in the "
            f"lab and described differently: {', '.join(replaced[:20])}"
            f"{' ...' if len(replaced) > 20 else ''}; nothing was imported. "
            "Confirm the replacement to import it")
    return [(machine, texts[machine.id],
             stored[machine.id][1] if machine.id in stored
             else machine.id in bundle.demo_machines)
            for machine in bundle.machine_file.machines]


def machines_replaced(stored: MachineFile, bundled: MachineFile) -> list[str]:
    """Ids of stored machines that a bundle's machine of the same id would change.

    A machine written the same way in both (the same TOML table) is not counted: importing it
    changes nothing.
    """
    ours = {machine.id: dump_machines([machine]) for machine in stored.machines}
    return [machine.id for machine in bundled.machines
            if machine.id in ours and ours[machine.id] != dump_machines([machine])]


@functools.cache
def _zone_names() -> frozenset[str]:
    return frozenset(zoneinfo.available_timezones())


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
        if not 0 <= entry["id"] < _LARGEST_WHOLE:
            raise InputError(f"{where}, key 'id': {str(entry['id'])[:40]} is not an import id "
                             "the store can hold (0 to 2**53); the bundle is damaged")
        if entry["rows"] < 1:
            raise InputError(f"{where}, key 'rows': an import holds at least one reading; the "
                             "bundle is damaged")
        for key in ("rows", "environment_rows"):
            if not 0 <= entry[key] <= MAX_ROWS:
                raise InputError(f"{where} ('{entry['name'][:40]}'), key '{key}': "
                                 f"{str(entry[key])[:40]} rows, more than the {MAX_ROWS:,} an "
                                 "import may hold; split the lab into smaller bundles")
        if entry["id"] in seen:
            raise InputError(f"{where}: import id {entry['id']} is listed twice")
        seen.add(entry["id"])
        for key in ("time_dtype", "environment_time_dtype"):
            # The zone is checked as text first: pandas would open a file that it names.
            named = _TIME_DTYPE_TEXT.fullmatch(entry[key])
            zone_text = named and named.group(2)
            if zone_text and zone_text not in _zone_names() and \
                    not _FIXED_OFFSET_TEXT.fullmatch(zone_text):
                raise InputError(f"{where}: '{key}' {entry[key][:80]!r} does not name a known "
                                 "time zone (such as Europe/Paris or UTC); the bundle is "
                                 "damaged")
            try:
                dtype = pd.api.types.pandas_dtype(entry[key]) if named else None
            except (TypeError, ValueError):
                dtype = None
            if dtype is None or not pd.api.types.is_datetime64_any_dtype(dtype):
                raise InputError(f"{where}: '{key}' {entry[key][:80]!r} is not a time dtype")
            zone = getattr(dtype, "tz", None)
            if zone is not None and not isinstance(zone, timezone) \
                    and str(zone) not in _zone_names():
                raise InputError(f"{where}: '{key}' {entry[key][:80]!r} does not name a known "
                                 "time zone (such as Europe/Paris or UTC); the bundle is "
                                 "damaged")
        try:
            name, source = _import_names(entry["name"], entry["source"])
        except InputError as error:
            raise InputError(f"{where}: {error}; the bundle is damaged") from None
        checked.append({**entry, "name": name, "source": source})
    manifest["counts"] = counts
    manifest["demo_machines"] = demo
    demo_site = manifest.get("demo_site", False)
    if not isinstance(demo_site, bool):
        raise InputError(f"bundle: {_MANIFEST}: demo_site must be true or false")
    manifest["demo_site"] = demo_site
    manifest["imports"] = checked
    return manifest


def _parse_chunk(text: pd.DataFrame, member: str, columns: Sequence[str],
                 floats: Sequence[str], entries: Mapping[int, Mapping], dtype_key: str,
                 first_row: int) -> pd.DataFrame:
    """A chunk of a bundle CSV (all text) as a frame with the store's dtypes.

    Floats are parsed exactly; whole numbers must fit in the store (below 2**53); times must
    lie in the years the store holds. Messages name the member, the row (counted from 1
    after the header) and the column.
    """
    expected = [IMPORT_ID, *columns]
    frame: dict[str, object] = {}
    for column in expected:
        values = text[column].to_numpy(dtype=object)
        if column in (IMPORT_ID, ROW):
            frame[column] = _whole_numbers(values, member, column, first_row)
        elif column in floats:
            frame[column] = _exact_floats(values, member, column, first_row)
        else:  # time, parsed below, and text, kept as Python strings for the insert
            frame[column] = values
    result = pd.DataFrame(frame, columns=expected)
    ids = result[IMPORT_ID].to_numpy()
    unknown = np.setdiff1d(np.unique(ids), np.fromiter(entries, dtype=np.int64,
                                                       count=len(entries)))
    if len(unknown):
        position = int(np.flatnonzero(ids == unknown[0])[0])
        raise InputError(f"bundle: {member}, row {first_row + position}, column "
                         f"'{IMPORT_ID}': rows belong to import {int(unknown[0])}, which the "
                         "manifest does not list; the bundle is damaged")
    # Times: each import's rows parsed with its own dtype, as int64 ns.
    nanoseconds = np.full(len(result), _NAT_NS, dtype=np.int64)
    strings_all = result[TIME].to_numpy(dtype=object)
    for import_id in pd.unique(ids).tolist():  # one pass per import in the chunk
        entry = entries[import_id]
        mask = ids == import_id
        strings = pd.Series(strings_all[mask], dtype=object)
        dtype = pd.api.types.pandas_dtype(entry[dtype_key])
        aware = isinstance(dtype, pd.DatetimeTZDtype)
        given = (strings != "").to_numpy()
        try:
            parsed = pd.DatetimeIndex(pd.to_datetime(strings.where(given, None),
                                                     format="ISO8601", utc=aware,
                                                     errors="coerce"))
        except (ValueError, TypeError, OverflowError, pd.errors.OutOfBoundsDatetime):
            parsed = None
        if parsed is None:
            missing = ~given
            bad = np.flatnonzero(given)  # cannot tell which: name the first given time
        else:
            # In the parsed unit (seconds to nanoseconds), before any conversion can overflow.
            per_ns = _NS_PER[parsed.unit]
            ticks = np.asarray(parsed.asi8, dtype=np.int64)
            missing = np.asarray(parsed.isna())
            outside = ~missing & ((ticks < _NAT_NS // per_ns + 1)
                                  | (ticks > np.iinfo(np.int64).max // per_ns))
            bad = np.flatnonzero((given & missing) | outside)
        if len(bad):
            position = int(np.flatnonzero(mask)[bad[0]])
            raise InputError(f"bundle: {member}, row {first_row + position}, column '{TIME}': "
                             f"{strings.iloc[int(bad[0])][:40]!r} is not a time in the years "
                             "1677 to 2262 that the store can hold; the bundle is damaged")
        nanoseconds[mask] = np.where(missing, _NAT_NS, ticks * per_ns)
    result[TIME] = pd.DatetimeIndex(nanoseconds.view("M8[ns]"))
    return result


def _whole_numbers(values: np.ndarray, member: str, column: str, first_row: int) -> np.ndarray:
    """Whole numbers that the store keeps exactly (|n| < 2**53), as int64."""
    numbers = pd.to_numeric(pd.Series(values, dtype=object), errors="coerce")
    floats = np.asarray(numbers, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        whole = (np.isfinite(floats) & (floats == np.round(floats))
                 & (np.abs(floats) < _LARGEST_WHOLE))
    bad = np.flatnonzero(~whole)
    if len(bad):
        raise InputError(f"bundle: {member}, row {first_row + int(bad[0])}, column "
                         f"'{column}': {str(values[bad[0]])[:40]!r} is not a whole number the "
                         f"store can hold (below 2**53); the bundle is damaged")
    return floats.astype(np.int64)


def _exact_floats(values: np.ndarray, member: str, column: str,
                  first_row: int = 1) -> np.ndarray:
    """Parse decimal text to float64 exactly (Python's float), "" as NaN."""
    cleaned = np.where(values == "", "nan", values)
    try:
        return cleaned.astype(np.float64)
    except ValueError:
        numbers = pd.to_numeric(pd.Series(cleaned, dtype=object), errors="coerce")
        bad = np.flatnonzero(numbers.isna().to_numpy() & (cleaned != "nan"))
        line = f"row {first_row + int(bad[0])}, " if len(bad) else ""
        value = f"{str(cleaned[bad[0]])[:40]!r} " if len(bad) else "a value "
        raise InputError(f"bundle: {member}, {line}column '{column}': {value}is not a "
                         "number; the bundle is damaged") from None

