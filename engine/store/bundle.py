"""The lab bundle: a whole lab (or some of its imports) as one zip file, and back.

A bundle (:meth:`engine.store.Store.export_bundle`, :meth:`engine.store.Store.import_bundle`) is
a zip file with ``manifest.json``, ``machines.toml``, ``readings.csv`` and ``environment.csv`` in
the store's own SI columns; floats are written in their shortest exact form and read back bit
for bit. Reading a bundle checks every member in memory before anything is stored (sizes,
members, the manifest, each value), so a damaged or hostile file is refused whole.
"""

from __future__ import annotations

import io
import json
import zipfile
import zlib
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from engine.columns import ENVIRONMENT_COLUMNS, READING_COLUMNS, ROW, TIME
from engine.errors import InputError
from engine.machines import MachineFile, dump_machines, parse_machines_text
from engine.store.base import IMPORT_ID
from engine.store.frames import _import_names, _now_text, _prepare, _restore_time
from engine.store.schema import _ENVIRONMENT_FLOATS, _NAT_NS, _READING_FLOATS, SCHEMA_VERSION

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


def read_bundle(data: bytes) -> tuple[MachineFile, set[str], bool, list[tuple]]:
    """Check and parse a bundle entirely in memory; nothing touches the disk.

    Returns
    -------
    tuple
        The machines file, the ids of its demonstration machines, whether its site is the
        demonstration lab's, and per import ``(meta, readings, environment)`` ready to insert
        (prepared by :func:`engine.store.frames._prepare`).

    Raises
    ------
    InputError
        When the data is not a bundle, is too large, or any member is damaged.
    """
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

