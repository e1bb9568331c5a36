"""The store, on both back ends (an SQLite file and a database on a throwaway PostgreSQL
server, see tests/pg_cluster.py; fixtures ``store`` and ``lab_location``): round trips, one
transaction per import, cascades and bundles; for the SQLite file also its migrations, and what
happens when a writing program is killed or two programs write at once (the server's own are in
tests/test_store_postgres.py)."""

import io
import json
import math
import os
import signal
import sqlite3
import subprocess
import sys
import threading
import time
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import platformdirs
import pytest

import engine.store.bundle as bundle_module
import engine.store.sqlite as store_module
from engine.columns import (
    CURRENT_A,
    ELAPSED_S,
    ENVIRONMENT_COLUMNS,
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
)
from engine.errors import InputError
from engine.machines import dump_machines, parse_machines_text
from engine.store import (
    BUNDLE_FORMAT,
    IMPORT_ID,
    MIGRATIONS,
    SCHEMA_V1,
    SCHEMA_VERSION,
    default_store_path,
    open_store,
)
from tests.helpers.store_worker import make_readings

ROOT = Path(__file__).resolve().parents[1]

MACHINES_TEXT = """
[site]
pressure = "97.2 kPa"
temperature = "21 degC"

[[machine]]
id = "twin-disc"
label = "Twin-disc, restored"
carrier = "disc"
outer_diameter = "18 in"
inner_diameter = "30 cm"
sector_fill = 0.55
carriers = 2
breakdown_field = "3.0 MV/m"
material = "acrylic"

[machine.tolerance]
outer_diameter = "1 mm"
speed = "2 %"

[[machine]]
id = "school-belt"
carrier = "belt"
width = "5 cm"
roller_diameter = "2 in"

[[machine]]
id = "stack"
carrier = "cylinder"
diameter = "300 mm"
active_length = "40 cm"
"""


@pytest.fixture
def machine_file():
    return parse_machines_text(MACHINES_TEXT)


@pytest.fixture
def store(lab_location):
    with open_store(lab_location()) as opened:
        yield opened


@pytest.fixture
def sqlite_store(tmp_path):
    with open_store(tmp_path / "lab.sqlite3") as opened:
        yield opened


def environment_log(rows, seed, tz=None):
    rng = np.random.default_rng(seed)
    times = pd.Series(pd.date_range("2024-05-01 09:00", periods=rows, freq="1min", unit="ns",
                                    tz=tz))
    if rows > 2:
        times[2] = pd.NaT
    return pd.DataFrame({
        ROW: np.arange(1, rows + 1, dtype=np.int64),
        TIME: times,
        ELAPSED_S: np.arange(rows) * 60.0,
        RH: rng.uniform(0.3, 0.8, rows),
        TEMPERATURE_K: rng.uniform(290, 296, rows),
        PRESSURE_PA: np.full(rows, np.nan),
    })


def random_bit_floats(rows, seed):
    """Doubles from random bit patterns (every exponent and mantissa), NaN and inf kept out."""
    bits = np.random.default_rng(seed).integers(0, 2**63, rows, dtype=np.int64)
    values = bits.view(np.float64).copy()
    values[~np.isfinite(values)] = 1.5
    values[::7] *= -1
    return values


def stored_readings(store, **filters):
    return store.readings(**filters).drop(columns=IMPORT_ID)


def file_counts(path):
    connection = sqlite3.connect(path)
    try:
        return (connection.execute("PRAGMA integrity_check").fetchone()[0],
                dict(connection.execute(
                    "SELECT imports.name, COALESCE(SUM(reading_blocks.rows), 0) FROM imports "
                    "LEFT JOIN reading_blocks ON reading_blocks.import_id = imports.id "
                    "GROUP BY imports.id").fetchall()),
                connection.execute("SELECT COALESCE(SUM(rows), 0) FROM reading_blocks"
                                   ).fetchone()[0])
    finally:
        connection.close()


# --- where the store lives and how it is opened ---------------------------------------------------
def test_store_path_comes_from_the_environment_variable(tmp_path, monkeypatch):
    monkeypatch.setenv("CEILING_LAB_DB", str(tmp_path / "a" / "b" / "lab.sqlite3"))
    assert default_store_path() == tmp_path / "a" / "b" / "lab.sqlite3"
    with open_store() as store:  # creates the missing folders
        assert store.path == tmp_path / "a" / "b" / "lab.sqlite3"
    assert (tmp_path / "a" / "b" / "lab.sqlite3").is_file()


def test_store_path_defaults_to_the_user_data_folder(monkeypatch):
    monkeypatch.delenv("CEILING_LAB_DB", raising=False)
    path = default_store_path()
    assert path.parent == Path(platformdirs.user_data_dir("ceiling-lab"))
    assert path.name == "ceiling-lab.sqlite3"


def test_open_sets_the_connection_pragmas(sqlite_store):
    store = sqlite_store
    connection = store._connection
    assert connection.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert connection.execute("PRAGMA foreign_keys").fetchone()[0] == 1
    assert connection.execute("PRAGMA busy_timeout").fetchone()[0] == 30_000
    assert connection.execute("PRAGMA synchronous").fetchone()[0] == 1  # 1 is NORMAL
    assert store.schema_version == SCHEMA_VERSION == 6


def test_a_file_that_is_not_a_store_is_an_input_error(tmp_path):
    text_file = tmp_path / "notes.sqlite3"
    text_file.write_text("these are not the readings you are looking for\n" * 100)
    with pytest.raises(InputError, match="cannot be opened as a Ceiling Lab store"):
        open_store(text_file)
    other = tmp_path / "other.sqlite3"
    connection = sqlite3.connect(other)
    connection.execute("CREATE TABLE recipes (name TEXT)")
    connection.commit()
    connection.close()
    with pytest.raises(InputError, match="not a Ceiling Lab store"):
        open_store(other)


def test_a_store_from_a_newer_version_is_refused(tmp_path):
    path = tmp_path / "new.sqlite3"
    open_store(path).close()
    connection = sqlite3.connect(path)
    connection.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    connection.close()
    with pytest.raises(InputError, match="newer version"):
        open_store(path)


# --- machines and site ---------------------------------------------------------------------------
def test_machines_round_trip_with_their_units(lab_location, machine_file):
    path = lab_location()
    with open_store(path) as store:
        assert store.is_empty()
        for machine in machine_file.machines:
            store.save_machine(machine)
        store.save_site(dict(machine_file.site.spec))
        assert not store.is_empty()
    with open_store(path) as store:  # a new connection reads what the file holds
        restored = store.machines()
    assert restored == machine_file
    twin = restored.by_id()["twin-disc"]
    assert twin.spec["outer_diameter"] == "18 in"  # the user's unit, not 0.4572 m
    assert twin.tolerance_spec == {"outer_diameter": "1 mm", "speed": "2 %"}
    assert restored.site.spec == {"pressure": "97.2 kPa", "temperature": "21 degC"}
    assert restored.site.pressure_pa == pytest.approx(97_200.0)  # 97.2 kPa, hand-worked
    assert dump_machines(restored) == dump_machines(machine_file)


def test_saving_a_machine_again_replaces_it_in_place(store, machine_file):
    for machine in machine_file.machines:
        store.save_machine(machine)
    changed = parse_machines_text(MACHINES_TEXT.replace('width = "5 cm"', 'width = "6 cm"'))
    store.save_machine(changed.by_id()["school-belt"])
    machines = store.machines().machines
    assert [machine.id for machine in machines] == ["twin-disc", "school-belt", "stack"]
    assert machines[1].spec["width"] == "6 cm"
    assert store.delete_machine("school-belt") is True
    assert store.delete_machine("school-belt") is False
    assert [machine.id for machine in store.machines().machines] == ["twin-disc", "stack"]


def test_a_bad_site_is_refused_and_the_old_one_kept(store):
    store.save_site({"altitude": "350 m"})
    with pytest.raises(InputError, match="humidity"):
        store.save_site({"humidity": "40 %"})
    assert store.machines().site.spec == {"altitude": "350 m"}
    store.save_site({})
    assert store.machines().site.spec == {}


# --- readings round trip -------------------------------------------------------------------------
def test_readings_round_trip_exactly_with_nan_nat_and_time_zone(lab_location):
    path = lab_location()
    aware = make_readings(500, seed=3)
    aware[CURRENT_A] = random_bit_floats(500, seed=4)
    aware.loc[5, CURRENT_A] = -0.0
    aware.loc[6, CURRENT_A] = np.inf
    aware.loc[7, SPEED_REV_S] = np.nan
    assert aware[TIME].isna().any() and str(aware[TIME].dtype) == "datetime64[ns, UTC]"
    naive = make_readings(300, seed=5)
    naive[TIME] = naive[TIME].dt.tz_localize(None).dt.as_unit("us")
    with open_store(path) as store:
        aware_id = store.import_readings(aware, "aware", source="meter.csv")
        naive_id = store.import_readings(naive, "naive")
    with open_store(path) as store:
        back_aware = stored_readings(store, import_ids=[aware_id])
        back_naive = stored_readings(store, import_ids=naive_id)
        both = store.readings()
    pd.testing.assert_frame_equal(back_aware, aware, check_exact=True)
    pd.testing.assert_frame_equal(back_naive, naive, check_exact=True)
    assert np.signbit(back_aware.loc[5, CURRENT_A])  # -0.0 kept, not turned into 0.0
    # Imports of differing time dtypes read together: UTC, naive times taken as UTC.
    assert str(both[TIME].dtype) == "datetime64[ns, UTC]"
    assert list(both.columns) == [*READING_COLUMNS, IMPORT_ID]
    assert both[IMPORT_ID].tolist() == [aware_id] * 500 + [naive_id] * 300
    assert (both[TIME].iloc[500:].dt.tz_localize(None).to_numpy()
            == naive[TIME].to_numpy()).sum() == naive[TIME].notna().sum()


def test_readings_in_another_time_zone_keep_it(store):
    frame = make_readings(50, seed=6)
    frame[TIME] = frame[TIME].dt.tz_convert("Europe/Paris")
    import_id = store.import_readings(frame, "paris")
    pd.testing.assert_frame_equal(stored_readings(store, import_ids=[import_id]), frame)


def test_missing_text_is_stored_as_empty_text(store):
    frame = make_readings(4, seed=7)
    frame[NOTE] = pd.Series(["a", None, np.nan, ""], dtype=object)
    store.import_readings(frame, "notes")
    assert stored_readings(store)[NOTE].tolist() == ["a", "", "", ""]


def test_columns_beyond_the_reading_columns_are_not_stored(store):
    frame = make_readings(6, seed=27)
    import_id = store.import_readings(frame.assign(ceiling_a=1e-5), "with a derived column")
    assert list(store.readings(import_ids=[import_id]).columns) == [*READING_COLUMNS, IMPORT_ID]


def test_readings_are_filtered_by_machine_session_and_import(store):
    first = make_readings(400, seed=8)
    second = make_readings(200, seed=9)
    first_id = store.import_readings(first, "first")
    second_id = store.import_readings(second, "second")
    everything = pd.concat([first, second], ignore_index=True)

    belt = stored_readings(store, machines=["school-belt"])
    expected = everything[everything[MACHINE] == "school-belt"].reset_index(drop=True)
    pd.testing.assert_frame_equal(belt, expected)

    chosen = store.readings(machines="stack", sessions=["morning"], import_ids=[second_id])
    mask = (second[MACHINE] == "stack") & (second[SESSION] == "morning")
    pd.testing.assert_frame_equal(chosen.drop(columns=IMPORT_ID),
                                  second[mask].reset_index(drop=True))
    assert set(chosen[IMPORT_ID]) == {second_id}
    assert len(store.readings(import_ids=[first_id, second_id])) == 600

    many = [f"session-{number}" for number in range(40_000)] + ["morning"]
    pd.testing.assert_frame_equal(
        stored_readings(store, sessions=many),
        everything[everything[SESSION] == "morning"].reset_index(drop=True))

    none = store.readings(machines=[])
    assert none.empty and list(none.columns) == [*READING_COLUMNS, IMPORT_ID]
    assert none[CURRENT_A].dtype == np.float64 and none[ROW].dtype == np.int64


def test_imports_and_counts_describe_the_store(store, machine_file):
    store.save_machine(machine_file.machines[0])
    frame = make_readings(120, seed=10)
    import_id = store.import_readings(frame, "Tuesday", source="tuesday.csv",
                                      environment=environment_log(10, seed=1))
    imports = store.imports()
    assert imports.columns.tolist()[:8] == ["id", "name", "source", "created_at", "is_demo",
                                            "rows", "machines", "sessions"]
    row = imports.iloc[0]
    assert (row["id"], row["name"], row["source"], row["rows"]) == (
        import_id, "Tuesday", "tuesday.csv", 120)
    assert row["machines"] == "school-belt, stack, twin-disc"
    assert row["sessions"] == "afternoon, morning"
    assert not row["is_demo"] and row["environment_rows"] == 10
    assert pd.Timestamp(row["created_at"]).tz is not None
    assert store.counts() == {"machines": 1, "imports": 1, "sessions": 2, "readings": 120}


def test_counts_take_sessions_shared_by_imports_once_and_names_with_commas_whole(store):
    # counts() reads the imports table only (session names kept per import): a session in two
    # imports counts once, a name with ", " in it is one session, deleting an import forgets
    # its sessions, and a bundle brings its sessions with it. Expected counts worked by hand.
    first = make_readings(40, seed=12)
    first[SESSION] = ["a, b"] * 20 + ["c"] * 20
    second = make_readings(30, seed=13)
    second[SESSION] = ["c"] * 10 + [""] * 20
    one = store.import_readings(first, "one")
    store.import_readings(second, "two")
    assert store.counts()["sessions"] == 3 and store.counts()["readings"] == 70
    bundle = store.export_bundle([one])
    store.delete_import(one)
    assert store.counts()["sessions"] == 2 and store.counts()["readings"] == 30
    store.import_bundle(bundle)
    assert store.counts()["sessions"] == 3 and store.counts()["readings"] == 70


def test_environment_log_round_trips(store):
    log = environment_log(30, seed=2, tz="UTC")
    import_id = store.import_readings(make_readings(10, seed=11), "with log", environment=log)
    back = store.environment(import_ids=[import_id])
    assert list(back.columns) == [*ENVIRONMENT_COLUMNS, IMPORT_ID]
    pd.testing.assert_frame_equal(back.drop(columns=IMPORT_ID), log, check_exact=True)


# --- one transaction per import --------------------------------------------------------------
def test_a_chunk_that_fails_half_way_leaves_nothing(sqlite_store, monkeypatch):
    store = sqlite_store
    kept = store.import_readings(make_readings(50, seed=12), "kept")
    monkeypatch.setattr(store_module, "CHUNK_ROWS", 100)
    real_insert = store_module._insert_chunk
    calls = []

    def fail_on_the_fourth_chunk(connection, statement, rows):
        calls.append(1)
        if len(calls) == 4:
            raise OSError("disk unplugged")
        real_insert(connection, statement, rows)

    monkeypatch.setattr(store_module, "_insert_chunk", fail_on_the_fourth_chunk)
    with pytest.raises(OSError, match="disk unplugged"):
        store.import_readings(make_readings(1000, seed=13), "broken")
    assert len(calls) == 4  # three chunks were written before the failure
    assert store.imports()["id"].tolist() == [kept]
    assert store.counts()["readings"] == 50


def test_a_row_the_database_refuses_half_way_leaves_nothing(sqlite_store, monkeypatch):
    store = sqlite_store
    monkeypatch.setattr(store_module, "CHUNK_ROWS", 100)
    real_insert = store_module._insert_chunk
    calls = []

    def point_the_third_chunk_at_a_missing_import(connection, statement, rows):
        calls.append(1)
        if len(calls) == 3:
            rows = [(999_999, *row[1:]) for row in rows]
        real_insert(connection, statement, rows)

    monkeypatch.setattr(store_module, "_insert_chunk", point_the_third_chunk_at_a_missing_import)
    with pytest.raises(sqlite3.IntegrityError, match="FOREIGN KEY"):
        store.import_readings(make_readings(1000, seed=14), "refused")
    assert store.counts() == {"machines": 0, "imports": 0, "sessions": 0, "readings": 0}


def test_a_bad_value_in_the_middle_is_named_and_nothing_is_stored(store):
    frame = make_readings(1000, seed=15)
    frame[CURRENT_A] = frame[CURRENT_A].astype(object)
    frame.loc[612, CURRENT_A] = "12 uA?"
    with pytest.raises(InputError, match=r"meter.csv: reading 613 \(row 613 of the file\), column "
                                         r"'current_a': '12 uA\?' is not a number"):
        store.import_readings(frame, "bad", source="meter.csv")
    assert store.is_empty() and store.counts()["readings"] == 0


def test_frames_that_cannot_be_stored_are_input_errors(store):
    frame = make_readings(5, seed=16)
    with pytest.raises(InputError, match="flags are missing"):
        store.import_readings(frame.drop(columns="flags"), "no flags")
    with pytest.raises(InputError, match="no readings"):
        store.import_readings(frame.iloc[:0], "empty")
    text_times = frame.assign(time=["09:00"] * 5)
    with pytest.raises(InputError, match="dates and times"):
        store.import_readings(text_times, "text times")
    with pytest.raises(InputError, match="row"):
        store.import_readings(frame.assign(row=[1, 2, None, 4, 5]), "holes")
    assert store.is_empty()


def test_a_locked_store_is_waited_for_and_then_written(tmp_path, monkeypatch):
    path = tmp_path / "lab.sqlite3"
    store = open_store(path)
    store._connection.execute("PRAGMA busy_timeout = 50")  # let the retries do the waiting
    other = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
    other.execute("BEGIN IMMEDIATE")  # another program holds the write lock
    threading.Timer(0.6, lambda: other.execute("ROLLBACK")).start()
    started = time.monotonic()
    import_id = store.import_readings(make_readings(20, seed=17), "waited")
    assert time.monotonic() - started >= 0.5
    assert store.imports()["id"].tolist() == [import_id]

    other.execute("BEGIN IMMEDIATE")
    monkeypatch.setattr(store_module, "LOCK_WAIT_S", 0.3)
    with pytest.raises(InputError, match="busy"):
        store.import_readings(make_readings(20, seed=18), "gave up")
    other.execute("ROLLBACK")
    other.close()
    store.close()


# --- schema versions -----------------------------------------------------------------------------
def build_version_1_store(path, machine_file):
    """A store as version 1 of this module wrote it, made with its own DDL."""
    connection = sqlite3.connect(path)
    for statement in SCHEMA_V1:
        connection.execute(statement)
    connection.execute("PRAGMA user_version = 1")
    for machine in machine_file.machines:
        connection.execute("INSERT INTO machines (id, label, carrier, toml, updated_at) "
                           "VALUES (?, ?, ?, ?, ?)",
                           (machine.id, machine.label, machine.kind, dump_machines([machine]),
                            "2024-01-01T00:00:00+00:00"))
    connection.execute("INSERT INTO site (key, value) VALUES ('altitude', '350 m')")
    connection.execute("INSERT INTO imports (name, source, created_at, rows, machines, "
                       "sessions, time_dtype) VALUES ('old', 'old.csv', "
                       "'2024-01-01T00:00:00+00:00', 2, 'twin-disc', 'a', 'datetime64[ns]')")
    # 2024-01-01 10:00 and 10:01 as nanoseconds since 1970, hand-worked:
    # 1704067200 s (2024-01-01 00:00 UTC) + 36000 s, and + 60 s more.
    for row, time_ns, current in ((1, 1_704_103_200 * 10**9, 1.25e-5), (2, None, None)):
        connection.execute(
            'INSERT INTO readings (import_id, "row", machine, session, time_ns, elapsed_s, '
            "speed_rev_s, belt_speed_m_s, current_a, rh, temperature_k, pressure_pa, "
            "voltage_v, note, flags) VALUES (1, ?, 'twin-disc', 'a', ?, 0.0, 5.0, NULL, ?, "
            "0.4, 293.15, 101300.0, NULL, '', '')", (row, time_ns, current))
    connection.commit()
    connection.close()


def test_a_version_1_store_is_migrated_and_keeps_its_data(tmp_path, machine_file):
    path = tmp_path / "old.sqlite3"
    build_version_1_store(path, machine_file)
    with open_store(path) as store:
        assert store.schema_version == SCHEMA_VERSION
        assert store.machines().machines == machine_file.machines
        assert store.machines().site.spec == {"altitude": "350 m"}
        assert not store.has_demo()
        readings = store.readings()
        indexes = {row[0] for row in store._connection.execute(
            "SELECT name FROM sqlite_master WHERE type = 'index' AND name NOT LIKE 'sqlite_%'")}
        store.save_machine(machine_file.machines[0], demo=True)  # the new column works
        assert store.has_demo()
    assert readings[TIME].tolist()[0] == pd.Timestamp("2024-01-01 10:00")
    assert pd.isna(readings[TIME].iloc[1]) and np.isnan(readings[CURRENT_A].iloc[1])
    assert readings[CURRENT_A].iloc[0] == 1.25e-5
    # Version 6 keeps the readings in blocks, found by import (engine.store.blocks).
    assert {"reading_blocks_by_import", "environment_by_import"} <= indexes
    assert not {"readings_by_machine", "readings_by_session"} & indexes  # dropped by version 5


def test_a_version_3_disc_without_an_inner_edge_is_migrated_as_the_full_disc_it_was(tmp_path):
    # Version 3 computed a disc without an inner edge as a full disc; version 4 asks for the
    # edge, so the migration writes inner_diameter = "0 cm" and the ceiling stays the same.
    path = tmp_path / "v3.sqlite3"
    open_store(path).close()
    old_text = ('[[machine]]\nid = "old-disc"\nlabel = "old-disc"\ncarrier = "disc"\n'
                'outer_diameter = "40 cm"\ncarriers = 2\ncollection_factor = 1.0\n\n'
                '[machine.tolerance]\nouter_diameter = "1 mm"\n')
    connection = sqlite3.connect(path)
    connection.execute("INSERT INTO machines (id, label, carrier, toml, updated_at) VALUES "
                       "('old-disc', 'old-disc', 'disc', ?, '2026-01-01T00:00:00+00:00')",
                       (old_text,))
    connection.execute("PRAGMA user_version = 3")
    connection.commit()
    connection.close()
    with open_store(path) as store:
        machine = store.machines().by_id()["old-disc"]
    assert machine.spec["inner_diameter"] == "0 cm"
    assert machine.carrier.area_per_rev_m2 == pytest.approx(math.pi * 0.2**2)  # pi r^2
    assert machine.units == 2 and machine.tolerance_spec == {"outer_diameter": "1 mm"}


def test_a_version_4_store_loses_two_readings_indexes_and_keeps_its_data(tmp_path,
                                                                      machine_file):
    # Version 5 drops the readings' indexes by machine and by session (they made saving slow
    # and nothing reads by them); the index by import, and every reading, stay.
    path = tmp_path / "v4.sqlite3"
    build_version_1_store(path, machine_file)
    connection = sqlite3.connect(path)
    for steps in MIGRATIONS[1:4]:
        for step in steps:
            if callable(step):
                step(connection)
            else:
                connection.execute(step)
    connection.execute("PRAGMA user_version = 4")
    connection.commit()
    before = {row[0] for row in connection.execute(
        "SELECT name FROM sqlite_master WHERE type = 'index' AND name NOT LIKE 'sqlite_%'")}
    connection.close()
    assert {"readings_by_machine", "readings_by_session"} <= before  # a true version 4 store
    with open_store(path) as store:
        assert store.schema_version == SCHEMA_VERSION
        after = {row[0] for row in store._connection.execute(
            "SELECT name FROM sqlite_master WHERE type = 'index' AND name NOT LIKE 'sqlite_%'")}
        readings = store.readings(machines=["twin-disc"])
        counts = store.counts()  # the sessions' names were gathered from the readings
        assert store.machines().machines == machine_file.machines
        assert store.delete_import(1) is True  # the cascade still finds the readings
        assert len(store.readings()) == 0
    assert after == (before - {"readings_by_machine", "readings_by_session",
                               "readings_by_import"}) | {"reading_blocks_by_import"}
    assert counts == {"machines": len(machine_file.machines), "imports": 1, "sessions": 1,
                      "readings": 2}
    # The two readings that build_version_1_store wrote, as it wrote them.
    assert readings[TIME].tolist()[0] == pd.Timestamp("2024-01-01 10:00")
    assert readings[CURRENT_A].tolist()[0] == 1.25e-5 and np.isnan(readings[CURRENT_A].iloc[1])


# --- foreign keys, cascades and demonstration data -----------------------------------------------
def test_deleting_an_import_deletes_its_readings_and_log(store):
    gone = store.import_readings(make_readings(300, seed=19), "gone",
                                 environment=environment_log(20, seed=3))
    kept = store.import_readings(make_readings(100, seed=20), "kept",
                                 environment=environment_log(5, seed=4))
    assert store.delete_import(gone) is True
    assert store.delete_import(gone) is False
    assert set(store.readings()[IMPORT_ID]) == {kept} and len(store.readings()) == 100
    assert set(store.environment()[IMPORT_ID]) == {kept} and len(store.environment()) == 5
    if isinstance(store, store_module.SQLiteStore):
        with pytest.raises(sqlite3.IntegrityError, match="FOREIGN KEY"):
            store._connection.execute(
                "INSERT INTO reading_blocks (import_id, block, rows, data) "
                "VALUES (?, 0, 1, x'00')", (gone,))


def test_remove_demo_keeps_the_users_own_data(store, machine_file):
    twin, belt, stack = machine_file.machines
    store.save_machine(twin, demo=True)
    store.save_machine(belt, demo=True)
    store.save_machine(stack)
    store.save_site({"altitude": "350 m"}, demo=True)
    demo_import = store.import_readings(make_readings(40, seed=21), "demo", demo=True)
    own_import = store.import_readings(make_readings(30, seed=22), "own")
    assert store.has_demo()
    assert store.imports().set_index("id")["is_demo"].to_dict() == {demo_import: True,
                                                                    own_import: False}
    assert store.remove_demo() == {"machines": 2, "imports": 1, "readings": 40}
    assert not store.has_demo()
    assert [machine.id for machine in store.machines().machines] == ["stack"]
    assert store.machines().site.spec == {}  # the demonstration site went with it
    assert store.imports()["id"].tolist() == [own_import]
    assert store.counts()["readings"] == 30
    # A demo machine that the user saves as their own is no longer demonstration data.
    store.save_machine(twin, demo=True)
    store.save_machine(twin)
    store.save_site({"pressure": "99 kPa"})
    store.remove_demo()
    assert [machine.id for machine in store.machines().machines] == ["stack", "twin-disc"]
    assert store.machines().site.spec == {"pressure": "99 kPa"}


# --- lab bundles ---------------------------------------------------------------------------------
def filled_store(store, machine_file):
    store.save_machine(machine_file.machines[0], demo=True)
    for machine in machine_file.machines[1:]:
        store.save_machine(machine)
    store.save_site(dict(machine_file.site.spec), demo=True)
    aware = make_readings(700, seed=23)
    aware[CURRENT_A] = random_bit_floats(700, seed=24)
    aware[SPEED_REV_S] = random_bit_floats(700, seed=25)
    aware.loc[3, NOTE] = 'comma, "quote"\nand a new line'
    aware.loc[4, MACHINE] = "NA"  # text that a CSV reader might take for a missing value
    naive = make_readings(200, seed=26)
    naive[TIME] = naive[TIME].dt.tz_localize(None).dt.as_unit("us")
    first = store.import_readings(aware, "aware", source="meter.csv",
                                  environment=environment_log(40, seed=5, tz="UTC"))
    second = store.import_readings(naive, "naive", demo=True)
    return first, second, aware, naive


def test_a_bundle_reimports_to_identical_readings(lab_location, store, machine_file):
    first, second, aware, naive = filled_store(store, machine_file)
    data = store.export_bundle()
    with zipfile.ZipFile(io.BytesIO(data)) as bundle:
        manifest = json.loads(bundle.read("manifest.json"))
        assert sorted(bundle.namelist()) == ["environment.csv", "machines.toml",
                                             "manifest.json", "readings.csv"]
    assert manifest["format"] == BUNDLE_FORMAT and manifest["version"] == 1
    assert manifest["counts"] == {"machines": 3, "imports": 2, "readings": 900,
                                  "environment": 40}

    with open_store(lab_location()) as other:
        new_ids = other.import_bundle(data)
        assert len(new_ids) == 2
        for old_id, new_id in zip((first, second), new_ids, strict=True):
            pd.testing.assert_frame_equal(stored_readings(other, import_ids=[new_id]),
                                          stored_readings(store, import_ids=[old_id]),
                                          check_exact=True)
        pd.testing.assert_frame_equal(stored_readings(other, import_ids=[new_ids[0]]), aware,
                                      check_exact=True)
        pd.testing.assert_frame_equal(
            other.environment().drop(columns=IMPORT_ID),
            store.environment().drop(columns=IMPORT_ID), check_exact=True)
        assert other.machines() == store.machines()
        theirs, ours = other.imports(), store.imports()
        for column in ("name", "source", "created_at", "is_demo", "rows", "machines",
                       "sessions"):
            assert theirs[column].tolist() == ours[column].tolist()
        other.remove_demo()  # demonstration flags travel with the bundle
        assert [machine.id for machine in other.machines().machines] == ["school-belt", "stack"]
        assert other.machines().site.spec == {}
        assert other.imports()["name"].tolist() == ["aware"]


def test_a_bundle_of_chosen_imports_back_after_removal_and_never_twice(store, machine_file):
    first, second, aware, naive = filled_store(store, machine_file)
    data = store.export_bundle(import_ids=[second])
    assert store.bundle_preview(data)["already"] == 1
    assert store.import_bundle(data) == []  # in the lab already: nothing added twice
    assert store.counts()["imports"] == 2
    store.delete_import(second)
    assert store.bundle_preview(data)["already"] == 0
    (again,) = store.import_bundle(data)  # the removed import comes back
    pd.testing.assert_frame_equal(stored_readings(store, import_ids=[again]), naive,
                                  check_exact=True)
    whole = store.export_bundle()
    assert store.import_bundle(whole) == [] and store.counts()["imports"] == 2
    with pytest.raises(InputError, match="not in the store"):
        store.export_bundle(import_ids=[12345])


def zip_of(members):
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_DEFLATED) as bundle:
        for name, content in members.items():
            bundle.writestr(name, content)
    return buffer.getvalue()


def bundle_members(store, machine_file):
    filled_store(store, machine_file)
    with zipfile.ZipFile(io.BytesIO(store.export_bundle())) as bundle:
        return {name: bundle.read(name) for name in bundle.namelist()}


@pytest.mark.parametrize(("change", "message"), [
    (lambda members: {"../readings.csv" if name == "readings.csv" else name: content
                      for name, content in members.items()}, "not a file of a lab bundle"),
    (lambda members: {**members, "/etc/cron.d/job": b"x"}, "not a file of a lab bundle"),
    (lambda members: {**members, "data/readings.csv": b"x"}, "not a file of a lab bundle"),
    (lambda members: {**members, **{f"extra{n}.csv": b"" for n in range(10)}}, "holds 14 files"),
    (lambda members: {name: content for name, content in members.items()
                      if name != "readings.csv"}, "readings.csv is missing"),
    (lambda members: {**members, "manifest.json": b"{not json"}, "not valid JSON"),
    (lambda members: {**members, "manifest.json": json.dumps(
        {**json.loads(members["manifest.json"]), "format": "something-else"})},
     "does not describe a lab bundle"),
    (lambda members: {**members, "manifest.json": json.dumps(
        {**json.loads(members["manifest.json"]), "version": 99})}, "newer version"),
    (lambda members: {**members, "readings.csv": members["readings.csv"].replace(
        b"\n1,", b"\n7,", 1)}, "import 7, which the manifest does not list"),
    (lambda members: {**members, "readings.csv": b"\n".join(
        members["readings.csv"].split(b"\n")[:-10]) + b"\n"}, "manifest counts 900 readings"),
    (lambda members: {**members, "readings.csv": members["readings.csv"].replace(
        b"e-05,", b"e-05x,", 1)}, "is not a number"),
    (lambda members: {**members, "machines.toml": b"[[machine]]\nid = 3\n"}, "machines.toml"),
])
def test_damaged_bundles_are_refused_and_store_nothing(lab_location, store, machine_file,
                                                      change, message):
    data = zip_of(change(bundle_members(store, machine_file)))
    with open_store(lab_location()) as other:
        with pytest.raises(InputError, match=message):
            other.import_bundle(data)
        assert other.is_empty() and other.counts()["readings"] == 0


def test_data_that_is_not_a_zip_is_refused(store):
    with pytest.raises(InputError, match="not a readable zip"):
        store.import_bundle(b"row,machine\n1,twin-disc\n")
    with pytest.raises(InputError, match="bytes"):
        store.import_bundle("a file name")


def test_a_zip_bomb_is_refused_before_anything_is_unpacked(store, machine_file, monkeypatch):
    members = bundle_members(store, machine_file)
    monkeypatch.setattr(bundle_module, "MAX_BUNDLE_BYTES", 2_000_000)
    data = zip_of({**members, "environment.csv": b"0" * 3_000_000})  # packs to a few kB
    assert len(data) < 200_000

    def no_unpacking(*args, **kwargs):
        raise AssertionError("a member was opened before the sizes were checked")

    monkeypatch.setattr(zipfile.ZipFile, "open", no_unpacking)
    with pytest.raises(InputError, match="unpack to more than"):
        store.import_bundle(data)


def test_a_member_larger_than_it_claims_is_refused(store, machine_file):
    members = bundle_members(store, machine_file)
    data = bytearray(zip_of(members))
    with zipfile.ZipFile(io.BytesIO(bytes(data))) as bundle:
        info = bundle.getinfo("manifest.json")
    # Lower the size that the central directory declares for manifest.json by one byte.
    central = data.rfind(b"PK\x01\x02", 0, data.rfind(b"manifest.json"))
    size_at = central + 24
    assert int.from_bytes(data[size_at:size_at + 4], "little") == info.file_size
    data[size_at:size_at + 4] = (info.file_size - 1).to_bytes(4, "little")
    with pytest.raises(InputError):
        store.import_bundle(bytes(data))


# --- programs that die, programs that write at the same time -------------------------------------
def run_worker(*arguments):
    return subprocess.Popen([sys.executable, "-m", "tests.helpers.store_worker", *arguments],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "PYTHONPATH": str(ROOT)})


def read_until(process, prefix, timeout_s=30.0):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        line = process.stdout.readline()
        if not line:
            raise AssertionError(f"worker ended before {prefix!r}: {process.stderr.read()}")
        if line.startswith(prefix):
            return line.strip()
    raise AssertionError(f"no {prefix!r} from the worker in {timeout_s} s")


@pytest.mark.parametrize(("kill_after", "extra_delay_s"), [
    ("READY", 0.0),     # as the transaction begins
    ("CHUNK 2", 0.0),   # with 40 000 rows written, uncommitted
    ("CHUNK 8", 0.03),  # with about 170 000 rows written, uncommitted
])
def test_a_killed_import_leaves_the_store_whole(tmp_path, kill_after, extra_delay_s):
    path = tmp_path / "lab.sqlite3"
    worker = run_worker(str(path), "interrupted", "1000", "300000")
    try:
        first_id = int(read_until(worker, "FIRST").split()[1])
        read_until(worker, kill_after)
        time.sleep(extra_delay_s)
        os.kill(worker.pid, signal.SIGKILL)
        rest, _ = worker.communicate(timeout=30)
    finally:
        if worker.poll() is None:
            worker.kill()
    assert worker.returncode == -signal.SIGKILL
    assert "DONE" not in rest  # killed before the commit, so nothing of it may remain

    integrity, rows_by_import, readings = file_counts(path)
    assert integrity == "ok"
    assert rows_by_import == {"first": 1000} and readings == 1000
    with open_store(path) as store:
        pd.testing.assert_frame_equal(stored_readings(store, import_ids=[first_id]),
                                      make_readings(1000, 1), check_exact=True)
        store.import_readings(make_readings(10, 3), "after")  # the store takes writes again
        assert store.counts()["readings"] == 1010


def test_two_programs_importing_at_once_both_complete(tmp_path):
    path = tmp_path / "lab.sqlite3"  # new: both programs also race to create the schema
    go_file = tmp_path / "go"
    workers = [run_worker(str(path), "import", name, str(rows), str(seed), str(go_file))
               for name, rows, seed in (("left", 120_000, 31), ("right", 80_000, 32))]
    try:
        for worker in workers:
            read_until(worker, "OPEN")
        go_file.touch()
        outputs = [worker.communicate(timeout=60) for worker in workers]
    finally:
        for worker in workers:
            if worker.poll() is None:
                worker.kill()
    for worker, (out, err) in zip(workers, outputs, strict=True):
        assert worker.returncode == 0, err
        assert "DONE" in out
    integrity, rows_by_import, readings = file_counts(path)
    assert integrity == "ok"
    assert rows_by_import == {"left": 120_000, "right": 80_000} and readings == 200_000
    with open_store(path) as store:
        ids = store.imports().set_index("name")["id"]
        pd.testing.assert_frame_equal(stored_readings(store, import_ids=[ids["right"]]),
                                      make_readings(80_000, 32), check_exact=True)


def test_a_version_2_store_gains_settings_and_keeps_its_data(tmp_path, machine_file):
    from engine.store import SCHEMA_V2

    path = tmp_path / "v2.sqlite3"
    build_version_1_store(path, machine_file)
    connection = sqlite3.connect(path)
    for statement in SCHEMA_V2:
        connection.execute(statement)
    connection.execute("PRAGMA user_version = 2")
    connection.commit()
    connection.close()
    with open_store(path) as store:
        assert store.schema_version == SCHEMA_VERSION
        assert store.machines().machines == machine_file.machines
        assert store.setting("demo") is None
        store.save_setting("demo", "removed")
        store.save_setting("demo", "removed again")
    with open_store(path) as store:
        assert store.setting("demo") == "removed again"
