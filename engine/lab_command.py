"""The ``lab`` subcommand of the command line: the lab's store (``CEILING_LAB_DB``, a file or a
PostgreSQL server) from a terminal or a bench's script.

``python -m engine lab show``                   which lab is open, as whom, and what it holds
``python -m engine lab add READINGS [--environment LOG] [--name NAME] [--session S]``
                                                save a readings file (and its log) as one import
``python -m engine lab export FILE.zip``        the lab bundle
``python -m engine lab restore FILE.zip``       add a bundle's machines and imports to the lab
``python -m engine lab copy --to LOCATION``     the whole lab into another lab (file or server)

Every message names the lab by :attr:`Store.location` (a server's database and host, never a
password).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from engine import columns
from engine.errors import InputError
from engine.readings import (
    ReadOptions,
    check_log_clock,
    merge_environment,
    read_environment,
    read_readings,
)
from engine.store import open_store
from engine.units import parse_quantity


def add_lab_command(commands: argparse._SubParsersAction) -> None:
    """Add ``lab`` and its actions to the command line's subcommands."""
    lab = commands.add_parser("lab", help="the lab's store: show, add readings, export, "
                              "restore, copy (CEILING_LAB_DB: a file or postgresql://...)")
    actions = lab.add_subparsers(dest="action", required=True, parser_class=type(lab))

    show = actions.add_parser("show", help="which lab is open, as whom, and what it holds")
    show.add_argument("--json", action="store_true", help="print one JSON object")
    show.set_defaults(run=_show)

    add = actions.add_parser("add", help="save a readings file (and its humidity log) in the "
                             "lab as one import")
    add.add_argument("readings", help="readings file (CSV or XLSX)")
    add.add_argument("--environment", help="a separate humidity/temperature log")
    add.add_argument("--name", help="name of the import (default: the file's name)")
    add.add_argument("--machine", help="machine id for a file with no machine column")
    add.add_argument("--session", help="session name for a file with no session column")
    add.add_argument("--tolerance", default="5 min",
                     help="how far in time a log entry may be from a reading (default 5 min)")
    add.set_defaults(run=_add)

    export = actions.add_parser("export", help="write the lab bundle (a zip) to a file")
    export.add_argument("file", help="the bundle to write, e.g. lab-2026-12-02.zip")
    export.set_defaults(run=_export)

    restore = actions.add_parser("restore", help="add a lab bundle's machines and imports")
    restore.add_argument("file", help="a lab bundle (zip)")
    restore.add_argument("--replace-machines", action="store_true",
                         help="replace stored machines the bundle describes differently")
    restore.set_defaults(run=_restore)

    copy = actions.add_parser("copy", help="copy the whole lab into another lab")
    copy.add_argument("--to", required=True, dest="target",
                      help="the other lab: a file path or postgresql://ACCOUNT@HOST/DATABASE")
    copy.add_argument("--replace-machines", action="store_true",
                      help="replace machines there that are described differently")
    copy.set_defaults(run=_copy)


def _show(args: argparse.Namespace) -> int:
    with open_store() as store:
        counts = store.counts()
        figures = {
            "lab": store.location,
            "kind": "server" if hasattr(store, "account") else "file",
            "account": getattr(store, "account", ""),
            "schema_version": store.schema_version,
            **counts,
            "may_change": store.may("change"),
            "may_remove_imports": store.may("remove_imports"),
            "may_remove_machines": store.may("remove_machines"),
            "password_in_address": bool(getattr(store, "password_in_address", False)),
        }
    if args.json:
        print(json.dumps(figures))
        return 0
    who = f" as {figures['account']}" if figures["account"] else ""
    print(f"Lab: {figures['lab']}{who} (schema {figures['schema_version']})")
    print(", ".join(_count(counts[key], key[:-1]) for key in ("machines", "imports", "sessions",
                                                              "readings")))
    if figures["kind"] == "file":
        return 0
    rights = [name for name, allowed in (("add and change", figures["may_change"]),
                                         ("remove imports", figures["may_remove_imports"]),
                                         ("remove machines", figures["may_remove_machines"]))
              if allowed]
    print("This account may " + (", ".join(rights) if rights else "only look (read-only)"))
    if figures["password_in_address"]:
        print("warning: the password is written in CEILING_LAB_DB; put it in ~/.pgpass instead",
              file=sys.stderr)
    return 0


def _add(args: argparse.Namespace) -> int:
    result = read_readings(args.readings, ReadOptions(machine=args.machine,
                                                      session=args.session))
    frame = result.frame
    messages = list(result.messages)
    environment = None
    if args.environment:
        tolerance_s = parse_quantity(args.tolerance, "duration", "--tolerance")
        if not tolerance_s >= 0:
            raise InputError("--tolerance must not be negative")
        log = read_environment(args.environment)
        messages.extend(log.messages)
        messages.extend(check_log_clock(frame, log.frame, tolerance_s, log.source).messages)
        frame = merge_environment(frame, log.frame, tolerance_s)
        environment = log.frame
    source = Path(args.readings).name
    with open_store() as store:
        described = {machine.id for machine in store.machines().machines}
        unknown = sorted(set(frame[columns.MACHINE].dropna().astype(str)) - described)
        if unknown:
            messages.append(f"{source}: the lab describes no machine {', '.join(unknown[:10])}; "
                            "their readings are stored, and get ceilings once the machine is "
                            "described (Machines page)")
        import_id = store.import_readings(frame, args.name or source, source=source,
                                          environment=environment)
        where = store.location
    print(f"saved {len(frame):,} readings of {source} as import {import_id} in {where}")
    for message in messages:
        print(f"note: {message}", file=sys.stderr)
    return 0


def _export(args: argparse.Namespace) -> int:
    target = Path(args.file)
    with open_store() as store:
        data = store.export_bundle()
        where = store.location
    try:
        target.write_bytes(data)
    except OSError as error:
        raise InputError(f"{target}: cannot be written ({error.strerror or error})") from None
    print(f"wrote the lab bundle of {where} to {target} ({len(data):,} bytes)")
    return 0


def _read_bundle(path: str) -> bytes:
    try:
        return Path(path).read_bytes()
    except OSError as error:
        raise InputError(f"{path}: cannot be read ({error.strerror or error})") from None


def _restore(args: argparse.Namespace) -> int:
    data = _read_bundle(args.file)
    with open_store() as store:
        already = store.bundle_preview(data)["already"]
        new_ids = store.import_bundle(data, replace_machines=args.replace_machines)
        where = store.location
    print(f"added {_count(len(new_ids), 'import')} from {args.file} to {where}"
          + (f" ({_count(already, 'import')} of the bundle already there, not added again)"
             if already else ""))
    return 0


def _count(number: int, word: str) -> str:
    return f"{number:,} {word}{'' if number == 1 else 's'}"


def _copy(args: argparse.Namespace) -> int:
    with open_store() as source:
        data = source.export_bundle()
        origin = source.location
    with open_store(args.target) as target:
        preview = target.bundle_preview(data)
        new_ids = target.import_bundle(data, replace_machines=args.replace_machines)
        where = target.location
    machines = _count(len(preview["machines"]), "machine")
    print(f"copied {_count(len(new_ids), 'import')} and {machines} from {origin} to {where}"
          + (f" ({_count(preview['already'], 'import')} already there, not added again)"
             if preview["already"] else ""))
    return 0
