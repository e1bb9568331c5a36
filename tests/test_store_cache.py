"""The derived cache: the same derived readings and findings as deriving everything at once.

The reference is the project's own evaluation of all stored readings at once
(``analysis.derive(store.readings(), ...)`` then ``analysis.findings``); the cache must give it
bit for bit (pandas.testing with ``check_exact``), and findings to 1e-9 relative.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from engine import analysis
from engine import columns as col
from engine.machines import parse_machines_text
from engine.store import IMPORT_ID, open_store
from engine.store.cache import DerivedCache
from tests.helpers.store_worker import make_readings
from tests.test_store import MACHINES_TEXT


def three_imports(store) -> None:
    """The machines and site of MACHINES_TEXT, and three imports: one in UTC, a second in a
    local time zone, a third with naive times, flagged readings and an unknown machine."""
    machine_file = parse_machines_text(MACHINES_TEXT)
    for machine in machine_file.machines:
        store.save_machine(machine)
    store.save_site(machine_file.site.spec)
    first = make_readings(3_000, seed=1)
    second = make_readings(2_000, seed=2)
    second[col.TIME] = second[col.TIME].dt.tz_convert("Europe/Berlin")
    third = make_readings(1_000, seed=3)
    third[col.TIME] = third[col.TIME].dt.tz_localize(None)
    third.loc[::10, col.MACHINE] = "not-described"
    third.loc[::7, col.FLAGS] = "user_flag"
    for number, frame in enumerate((first, second, third), 1):
        store.import_readings(frame, f"import {number}")


@pytest.fixture
def lab(tmp_path):
    with open_store(tmp_path / "lab.sqlite3") as store:
        three_imports(store)
        yield store


def everything_at_once(store):
    machine_file = store.machines()
    return analysis.derive(store.readings(), machine_file.by_id(), machine_file.site)


def derived_files(folder):
    """The derived files of a cache folder (not their group and sample companions)."""
    return [path for path in folder.glob("*.parquet")
            if not path.name.endswith((".groups.parquet", ".sample.parquet"))]


def assert_same_frame(cached, reference):
    cached = cached[list(reference.columns)].copy()
    # The cache reads text columns as categoricals (the same texts, stored once each).
    for name in cached.columns:
        if isinstance(cached[name].dtype, pd.CategoricalDtype):
            cached[name] = cached[name].astype(reference[name].dtype)
    pd.testing.assert_frame_equal(cached, reference, check_exact=True)


def assert_same_findings(got, expected):
    assert list(got.columns) == list(expected.columns)
    assert got[["machine", "session"]].equals(expected[["machine", "session"]])
    for name in expected.columns:
        for first, second in zip(got[name], expected[name], strict=True):
            if isinstance(second, float) and np.isfinite(second):
                assert first == pytest.approx(second, rel=1e-9, abs=0.0), name
            elif isinstance(second, tuple):
                assert first == pytest.approx(second, rel=1e-9, abs=0.0), name
            else:
                assert (first == second) or (first != first and second != second), name


def test_the_cache_gives_the_derived_readings_of_the_whole_store_bit_for_bit(lab):
    cached = DerivedCache(lab).read()
    reference = everything_at_once(lab)
    assert len(cached) == 6_000
    # Time zones mixed: the store's rule gives UTC, and so does the cache.
    assert str(cached[col.TIME].dtype) == "datetime64[ns, UTC]"
    assert_same_frame(cached, reference)


def test_an_import_writes_its_file_from_memory_the_same_as_one_built_from_the_store(tmp_path):
    """The file written at import (from the arrays in memory) must equal, bit for bit, the file
    refresh builds by reading the import back from SQLite (the store of record)."""
    import pyarrow.parquet as pq

    machine_file = parse_machines_text(MACHINES_TEXT)
    with open_store(tmp_path / "lab.sqlite3") as store:
        for machine in machine_file.machines:
            store.save_machine(machine)
        frame = make_readings(500, seed=4)
        # Values a round trip could change: a negative zero, infinities, missing numbers and
        # times, a session and note of non-ASCII text.
        frame.loc[0, col.CURRENT_A] = -0.0
        frame.loc[1, col.SPEED_REV_S] = np.inf
        frame.loc[2, col.RH] = np.nan
        frame.loc[3, col.TIME] = pd.NaT
        frame.loc[4, col.SESSION] = "Übung 3"
        store.import_readings(frame, "in memory")
        cache = DerivedCache(store)
        written = derived_files(cache.folder)
        assert len(written) == 1  # there before any refresh
        companions = [written[0].with_name(written[0].name.replace(".parquet", f".{kind}.parquet"))
                      for kind in ("groups", "sample")]
        at_import = [pq.read_table(path) for path in (written[0], *companions)]
        for path in (written[0], *companions):
            path.unlink()
        rebuilt = cache.refresh()[1]
        assert rebuilt.name == written[0].name
        from_store = [pq.read_table(path) for path in (written[0], *companions)]
    for first, second in zip(at_import, from_store, strict=True):
        assert first.equals(second)
    at_import = at_import[0]
    assert np.signbit(at_import.column(col.CURRENT_A).to_numpy()[0])


def test_the_cache_reads_only_the_columns_and_machines_asked_for(lab):
    columns = [col.MACHINE, col.SPEED_REV_S, col.EFFICIENCY]
    cached = DerivedCache(lab).read(columns=columns, machines=["stack"])
    reference = everything_at_once(lab)
    reference = reference.loc[reference[col.MACHINE] == "stack", [*columns, IMPORT_ID]]
    assert list(cached.columns) == [*columns, IMPORT_ID]
    assert_same_frame(cached, reference.reset_index(drop=True))


def test_a_changed_machine_or_site_rebuilds_the_files_and_a_deleted_import_loses_its_file(lab):
    cache = DerivedCache(lab)
    before = cache.refresh()
    assert sorted(path.name for path in derived_files(cache.folder)) == \
        sorted(path.name for path in before.values())
    assert len(list(cache.folder.glob("*.parquet"))) == 3 * len(before)  # with companions
    changed = parse_machines_text(MACHINES_TEXT.replace('width = "5 cm"', 'width = "7 cm"'))
    lab.save_machine(changed.by_id()["school-belt"])
    after = cache.refresh()
    assert set(after.values()).isdisjoint(before.values())
    assert_same_frame(cache.read(), everything_at_once(lab))
    lab.save_site({"pressure": "90 kPa"})
    assert_same_frame(cache.read(), everything_at_once(lab))
    lab.delete_import(2)
    remaining = cache.refresh()
    assert sorted(remaining) == [1, 3]
    assert len(list(cache.folder.glob("*.parquet"))) == 2 * 3
    assert_same_frame(cache.read(), everything_at_once(lab))


def test_findings_from_the_cache_equal_findings_from_all_readings_at_once(lab):
    machine_file = lab.machines()
    columns = analysis.FINDINGS_INPUT_COLUMNS
    cached = DerivedCache(lab).read(columns=columns)
    reference = everything_at_once(lab)
    for by_session in (False, True):
        assert_same_findings(
            analysis.findings(cached, machine_file, by_session=by_session),
            analysis.findings(reference, machine_file, by_session=by_session))


def test_an_empty_store_gives_an_empty_frame(tmp_path):
    with open_store(tmp_path / "empty.sqlite3") as store:
        frame = DerivedCache(store).read(columns=[col.MACHINE, col.EFFICIENCY])
    assert frame.empty
    assert list(frame.columns) == [col.MACHINE, col.EFFICIENCY, IMPORT_ID]


@pytest.mark.parametrize(("machines", "sessions"), [
    (["twin-disc", "school-belt", "stack", "not-described"], ["morning", "afternoon"]),
    (["school-belt", "not-described"], ["morning", "afternoon"]),
    (["stack", "not-described", "twin-disc"], ["afternoon"]),
    (["not-described"], ["morning"]),
])
def test_findings_of_whole_groups_are_the_findings_of_those_readings(lab, machines, sessions):
    machine_file = lab.machines()
    derived = DerivedCache(lab).read(columns=analysis.FINDINGS_INPUT_COLUMNS)
    # sessions first met in another order than the machines: afternoon first for one machine
    derived.loc[derived.index[:5], col.SESSION] = "afternoon"
    all_findings = analysis.findings(derived, machine_file, by_session=True)
    chosen = derived[col.MACHINE].isin(machines) & derived[col.SESSION].isin(sessions)
    expected = analysis.findings(derived[chosen], machine_file, by_session=True)
    got = analysis.findings_of_groups(all_findings, analysis.group_first_rows(derived),
                                      machine_file, machines, sessions)
    assert len(got) == len(expected) > 0
    assert list(got.dtypes) == list(expected.dtypes)
    assert_same_findings(got, expected)


def test_a_chart_sample_is_bounded_keeps_every_machine_and_the_order_of_readings(lab):
    from engine import figures

    derived = DerivedCache(lab).read()
    sample = figures.chart_sample(derived, max_points=400)
    assert len(sample) <= 400
    assert sample.index.is_monotonic_increasing
    # clean readings: 300 of the budget shared by the 4 machines, 75 each
    clean = sample[sample[col.FLAGS] == ""]
    for machine, count in derived.loc[derived[col.FLAGS] == "", col.MACHINE].value_counts().items():
        assert (clean[col.MACHINE] == machine).sum() == min(count, 75), machine
    flagged = (derived[col.FLAGS] != "").sum()
    assert (sample[col.FLAGS] != "").sum() == min(flagged, 100)
    assert figures.chart_sample(derived, max_points=len(derived)) is derived


def test_a_chart_sample_of_filtered_rows_draws_only_those(lab):
    from engine import figures

    derived = DerivedCache(lab).read()
    kept = (derived[col.MACHINE] != "stack").to_numpy()
    sample = figures.chart_sample(derived, max_points=400, rows=kept)
    assert len(sample) <= 400 and "stack" not in set(sample[col.MACHINE])
    small = figures.chart_sample(derived, max_points=400, rows=np.arange(len(derived)) < 50)
    assert small.equals(derived.iloc[:50])


def test_an_import_that_is_not_stored_leaves_no_derived_files(tmp_path, monkeypatch):
    """The files are written while SQLite writes the readings; an import that fails (here the
    insert itself) must not leave them behind, and one that is stored gets them named."""
    from engine.store import sqlite as sqlite_store

    machine_file = parse_machines_text(MACHINES_TEXT)
    with open_store(tmp_path / "lab.sqlite3") as store:
        for machine in machine_file.machines:
            store.save_machine(machine)

        def broken(*_arguments, **_keywords):
            raise OSError("disk full (a test)")

        with monkeypatch.context() as patch:
            patch.setattr(sqlite_store, "_insert_import", broken)
            with pytest.raises(OSError, match="disk full"):
                store.import_readings(make_readings(800, seed=5), "fails")
        folder = DerivedCache(store).folder
        assert not [path for path in folder.glob("*") if path.is_file()]
        store.import_readings(make_readings(800, seed=5), "stored")
        names = sorted(path.name for path in folder.glob("*"))
    assert len(names) == 3 and not any(name.startswith(".") for name in names)
