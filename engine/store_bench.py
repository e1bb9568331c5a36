"""The store benchmark: saving and reading back the same readings in an SQLite file and in a lab
on a PostgreSQL server, in the same run (``python -m engine.bench --store postgresql://...``).

The server lab must be empty (give the benchmark a database of its own): the benchmark saves the
synthetic machines and one import of N readings with its humidity log, times saving and reading
back, checks that every reading comes back bit for bit, and removes its import and machines
again. The target: saving into PostgreSQL takes at most twice the SQLite time.
"""

from __future__ import annotations

import gc
import tempfile
import time
from pathlib import Path

import pandas as pd

from engine.store import IMPORT_ID, open_store
from engine.store.base import Store

#: Bound of ``server_import_vs_sqlite`` (the issue's target).
SERVER_IMPORT_TARGET = 2.0


def _save_and_read(store: Store, merged: pd.DataFrame, environment: pd.DataFrame,
                   machine_file) -> tuple[float, float, pd.DataFrame]:
    for machine in machine_file.machines:
        store.save_machine(machine)
    gc.collect()
    start = time.perf_counter()
    import_id = store.import_readings(merged, "store benchmark", source="readings.csv",
                                      environment=environment)
    saved_s = time.perf_counter() - start
    start = time.perf_counter()
    back = store.readings(import_ids=[import_id])
    read_s = time.perf_counter() - start
    return saved_s, read_s, back.drop(columns=IMPORT_ID)


def _equal(first: pd.DataFrame, second: pd.DataFrame) -> bool:
    try:
        pd.testing.assert_frame_equal(first, second, check_exact=True)
    except AssertionError:
        return False
    return True


def run_store_benchmark(location: str, rows: int, machines: int) -> dict[str, object]:
    """Save ``rows`` synthetic readings into a temporary SQLite file and into ``location``.

    Returns
    -------
    dict
        ``sqlite_import_s``, ``server_import_s``, ``server_import_vs_sqlite`` (target at most
        2), ``sqlite_read_s``, ``server_read_s``, ``exact`` (every reading read back equal,
        both stores), ``server`` (the lab, never its password) and ``rows``.
    """
    from engine.bench import _merged, synthetic_data, synthetic_machines

    machine_file = synthetic_machines(machines)
    data = synthetic_data(machine_file, rows)
    merged = _merged(data)
    result: dict[str, object] = {"rows": rows}
    with tempfile.TemporaryDirectory(prefix="ceiling-lab-store-bench-") as folder, \
            open_store(Path(folder) / "bench.sqlite3") as sqlite_store:
        sqlite_s, sqlite_read_s, sqlite_back = _save_and_read(
            sqlite_store, merged, data.environment, machine_file)
    with open_store(location) as server:
        if not server.is_empty():
            raise SystemExit(f"--store: {server.location} is not empty; give the benchmark a "
                             "lab of its own (it removes what it saved afterwards)")
        result["server"] = server.location
        try:
            server_s, server_read_s, server_back = _save_and_read(
                server, merged, data.environment, machine_file)
        finally:
            for import_id in server.imports()["id"].tolist():
                server.delete_import(import_id)
            for machine in machine_file.machines:
                server.delete_machine(machine.id)
    result.update({
        "sqlite_import_s": sqlite_s, "server_import_s": server_s,
        "server_import_vs_sqlite": server_s / sqlite_s if sqlite_s > 0 else float("inf"),
        "sqlite_read_s": sqlite_read_s, "server_read_s": server_read_s,
        "exact": _equal(server_back, sqlite_back),
    })
    return result


def format_store_table(result: dict[str, object]) -> str:
    """The store benchmark's figures as a text table, with the target."""
    lines = [f"Store benchmark: {result['rows']:,} readings, SQLite file against "
             f"{result['server']}", ""]
    for key, text in (("sqlite_import_s", "saving into SQLite [s]"),
                      ("server_import_s", "saving into PostgreSQL [s]"),
                      ("server_import_vs_sqlite", "PostgreSQL / SQLite (target at most "
                                                  f"{SERVER_IMPORT_TARGET:g})"),
                      ("sqlite_read_s", "reading back from SQLite [s]"),
                      ("server_read_s", "reading back from PostgreSQL [s]")):
        lines.append(f"{text:<48} {float(result[key]):8.2f}")
    same = "yes" if result["exact"] else "NO"
    lines.append(f"{'every reading read back as from SQLite':<48} {same:>8}")
    return "\n".join(lines)
