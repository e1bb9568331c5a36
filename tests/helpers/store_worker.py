"""A separate process that writes to a store, for the store's kill and concurrency tests.

Run from the repository root as ``python -m tests.helpers.store_worker LOCATION MODE ...``
(LOCATION: a store file or a PostgreSQL URL):

``import NAME ROWS SEED GO_FILE``
    Open the store, print ``OPEN``, wait until GO_FILE exists, import ROWS generated readings
    under NAME, print ``DONE <import id>``.
``interrupted FIRST_ROWS BIG_ROWS``
    Import FIRST_ROWS readings as "first" (seed 1) and print ``FIRST <import id>``; build
    BIG_ROWS readings, print ``READY`` just before importing them as "interrupted", then
    ``CHUNK <k>`` after each chunk is written, and ``DONE`` when the import has committed. The
    test kills this process with SIGKILL somewhere between ``READY`` and ``DONE``.

Every line is flushed at once, so the parent sees it when it is printed.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

from engine.columns import (
    BELT_SPEED_M_S,
    CURRENT_A,
    ELAPSED_S,
    FLAGS,
    MACHINE,
    NOTE,
    PRESSURE_PA,
    RH,
    ROW,
    SESSION,
    SPEED_REV_S,
    TEMPERATURE_K,
    TIME,
    VOLTAGE_V,
)


def make_readings(rows: int, seed: int) -> pd.DataFrame:
    """Invented readings in the store's columns: three machines, two sessions, some gaps."""
    rng = np.random.default_rng(seed)
    times = pd.Series(pd.date_range("2024-05-01 09:00", periods=rows, freq="250ms", unit="ns",
                                    tz="UTC"))
    times[rng.random(rows) < 0.01] = pd.NaT
    current = rng.normal(12e-6, 1e-6, rows)
    current[rng.random(rows) < 0.01] = np.nan
    return pd.DataFrame({
        ROW: np.arange(1, rows + 1, dtype=np.int64),
        MACHINE: pd.Series(np.array(["twin-disc", "school-belt", "stack"])[
            rng.integers(0, 3, rows)]),
        SESSION: pd.Series(np.array(["morning", "afternoon"])[rng.integers(0, 2, rows)]),
        TIME: times,
        ELAPSED_S: np.arange(rows) * 0.25,
        SPEED_REV_S: rng.uniform(1, 8, rows),
        BELT_SPEED_M_S: np.full(rows, np.nan),
        CURRENT_A: current,
        RH: rng.uniform(0.3, 0.7, rows),
        TEMPERATURE_K: rng.uniform(290, 296, rows),
        PRESSURE_PA: rng.uniform(97_000, 102_000, rows),
        VOLTAGE_V: rng.uniform(0, 9e4, rows),
        NOTE: pd.Series(np.array(["", "sparks"])[rng.integers(0, 2, rows)]),
        FLAGS: "",
    })


def say(text: str) -> None:
    print(text, flush=True)


def _tell_each_block(say_block) -> None:
    """Make both back ends say ``CHUNK <k>`` after each chunk (SQLite) or block (PostgreSQL)
    of rows is written."""
    import engine.store.postgres as server_module
    import engine.store.sqlite as store_module

    real_insert = store_module._insert_chunk

    def insert_and_tell(connection, statement, rows):
        real_insert(connection, statement, rows)
        say_block()

    real_copy = server_module._copy

    def copy_and_tell(connection, table, columns, blocks):
        def told():
            for block in blocks:
                yield block
                say_block()
        real_copy(connection, table, columns, told())

    store_module._insert_chunk = insert_and_tell
    server_module._copy = copy_and_tell


def main(argv: list[str]) -> int:
    import engine.store.sqlite as store_module

    path, mode = argv[0], argv[1]  # a file, or a PostgreSQL URL
    if mode == "import":
        name, rows, seed, go_file = argv[2], int(argv[3]), int(argv[4]), Path(argv[5])
        frame = make_readings(rows, seed)
        with store_module.open_store(path) as store:
            say("OPEN")
            deadline = time.monotonic() + 60
            while not go_file.exists() and time.monotonic() < deadline:
                time.sleep(0.005)
            import_id = store.import_readings(frame, name, source=f"{name}.csv")
            say(f"DONE {import_id}")
        return 0
    if mode == "interrupted":
        first_rows, big_rows = int(argv[2]), int(argv[3])
        store = store_module.open_store(path)
        say(f"FIRST {store.import_readings(make_readings(first_rows, 1), 'first')}")
        big = make_readings(big_rows, 2)
        written = 0

        def tell() -> None:
            nonlocal written
            written += 1
            say(f"CHUNK {written}")

        _tell_each_block(tell)
        say("READY")
        store.import_readings(big, "interrupted")
        say("DONE")
        return 0
    raise SystemExit(f"unknown mode {mode!r}")


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
