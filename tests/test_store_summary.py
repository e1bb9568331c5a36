"""The lab's summary (engine.store.summary): what the dashboard reads instead of every reading.

The reference is the project's own evaluation of all stored readings at once
(``analysis.derive(store.readings(), ...)``, then ``analysis.findings`` and pandas group
operations): the summary must give the same findings (to 1e-9 relative; in practice bit for
bit), the same counts and bounds, and only real readings to draw.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from engine import analysis
from engine import columns as col
from engine.store import open_store
from engine.store import summary as summaries
from engine.store.cache import DerivedCache
from tests.helpers.store_worker import make_readings
from tests.test_store_cache import (
    assert_same_findings,
    derived_files,
    everything_at_once,
    three_imports,
)


@pytest.fixture
def lab(tmp_path):
    """Four imports: the three of the cache's tests, which share their sessions ('morning',
    'afternoon'), and a fourth with sessions of its own, readings without a session and naive
    times in microseconds."""
    with open_store(tmp_path / "lab.sqlite3") as store:
        three_imports(store)
        fourth = make_readings(6_000, seed=4)
        # Naive times in microseconds, as a CSV read gives them.
        fourth[col.TIME] = fourth[col.TIME].dt.tz_localize(None).astype("datetime64[us]")
        fourth[col.SESSION] = np.where(np.arange(6_000) < 4_500, "evening", None)
        fourth.loc[::9, col.FLAGS] = "user_flag"
        store.import_readings(fourth, "import 4")
        yield store


def test_the_summary_findings_equal_the_findings_of_all_readings_at_once(lab):
    summary = DerivedCache(lab).summary()
    reference = everything_at_once(lab)
    expected = analysis.findings(reference, lab.machines(), by_session=True)
    assert_same_findings(summary.findings, expected)
    # Groups in several imports were fitted again from all their readings: bit for bit.
    assert summary.groups["imports"].map(len).max() == 3
    pd.testing.assert_frame_equal(summary.findings, expected)


def test_the_findings_of_a_selection_of_whole_groups_equal_those_of_its_readings(lab):
    summary = DerivedCache(lab).summary()
    reference = everything_at_once(lab)
    sessions = reference[col.SESSION].fillna("")
    for machine_ids, chosen in ((["stack", "not-described"], ["afternoon", ""]),
                                (["twin-disc", "school-belt"], ["morning", "evening"])):
        kept = reference[reference[col.MACHINE].isin(machine_ids) & sessions.isin(chosen)]
        expected = analysis.findings(kept, lab.machines(), by_session=True)
        assert_same_findings(summary.findings_of(lab.machines(), machine_ids, chosen), expected)


def test_group_counts_bounds_and_run_order_equal_those_of_the_readings(lab):
    summary = DerivedCache(lab).summary()
    reference = everything_at_once(lab)
    reference["session_name"] = reference[col.SESSION].fillna("")
    grouped = reference.groupby([col.MACHINE, "session_name"], sort=False)
    counts = grouped.size()
    flagged = grouped[col.FLAGS].agg(lambda flags: int((flags.fillna("") != "").sum()))
    for row in summary.groups.itertuples():
        assert row.readings == counts[(row.machine, row.session)]
        assert row.flagged == flagged[(row.machine, row.session)]
        rows = reference[(reference[col.MACHINE] == row.machine)
                         & (reference["session_name"] == row.session)]
        assert row.first == rows.index[0]
        assert row.rh_min == rows[col.RH].min() and row.rh_max == rows[col.RH].max()
        assert row.time_min == rows[col.TIME].min() and row.time_max == rows[col.TIME].max()
    assert summary.readings == len(reference)
    assert summary.bounds(col.RH) == (reference[col.RH].min(), reference[col.RH].max())
    assert summary.bounds(col.TIME) == (reference[col.TIME].min(), reference[col.TIME].max())
    # Run order: sessions by their earliest reading among the chosen machines.
    for machine_ids in (["stack"], ["twin-disc", "school-belt", "not-described"]):
        kept = reference[reference[col.MACHINE].isin(machine_ids)]
        earliest = kept.groupby("session_name", sort=False)[col.TIME].min()
        assert summary.sessions_in_run_order(machine_ids) == \
            list(earliest.sort_values(kind="stable").index)


def test_the_readings_kept_to_draw_are_real_readings_bounded_per_group(lab, monkeypatch):
    monkeypatch.setattr(summaries, "SAMPLE_CLEAN", 300)
    monkeypatch.setattr(summaries, "SAMPLE_FLAGGED", 40)
    cache = DerivedCache(lab)
    for path in cache.folder.glob("*.parquet"):  # made again with the smaller bounds
        path.unlink()
    summary = cache.summary()
    reference = everything_at_once(lab)
    sample = summary.sample
    codes, groups = summaries.group_codes(sample)
    clean = analysis._flag_free(sample)  # noqa: SLF001
    for number, _group in enumerate(groups):
        assert np.count_nonzero(clean & (codes == number)) <= 300
        assert np.count_nonzero(~clean & (codes == number)) <= 40
    # A group of fewer readings than the bound keeps all of them.
    small = summary.groups[summary.groups["readings"] < 300].iloc[0]
    in_sample = (sample[col.MACHINE] == small["machine"]) & \
        (sample[col.SESSION] == small["session"])
    assert in_sample.sum() == small["readings"]
    # Every reading drawn is a stored reading: its values are those of a row of the store.
    keys = [col.MACHINE, col.TIME, col.CURRENT_A, col.EFFICIENCY]
    drawn = sample[keys].astype({col.MACHINE: str})
    stored = reference[keys].astype({col.MACHINE: str})
    found = drawn.merge(stored.drop_duplicates(), on=keys, how="left", indicator=True)
    assert (found["_merge"] == "both").all()
    assert str(sample[col.TIME].dtype) == "datetime64[ns, UTC]"


def test_the_summary_is_kept_per_state_of_the_store_and_made_again_after_a_change(lab,
                                                                                  monkeypatch):
    cache = DerivedCache(lab)
    first = cache.summary()
    kept = sorted(path.name for path in cache.folder.glob("lab-*.parquet"))
    assert len(kept) == 2

    def refused(*_arguments, **_keywords):
        raise AssertionError("the kept summary should have been read")

    monkeypatch.setattr(summaries, "combine", refused)
    again = DerivedCache(lab).summary()
    pd.testing.assert_frame_equal(again.findings, first.findings)
    pd.testing.assert_frame_equal(again.groups, first.groups)
    monkeypatch.undo()
    lab.delete_import(4)
    after = cache.summary()
    assert "evening" not in set(after.groups["session"])
    assert sorted(path.name for path in cache.folder.glob("lab-*.parquet")) != kept
    assert len(list(cache.folder.glob("lab-*.parquet"))) == 2
    expected = analysis.findings(everything_at_once(lab), lab.machines(), by_session=True)
    assert_same_findings(after.findings, expected)


def test_a_cache_without_group_files_gets_them_from_its_derived_files(lab):
    cache = DerivedCache(lab)
    before = cache.summary()
    for path in cache.folder.glob("*.parquet"):
        if path.name.endswith((".groups.parquet", ".sample.parquet")):
            path.unlink()
    derived = {path.name: path.stat().st_mtime_ns for path in derived_files(cache.folder)}
    after = cache.summary()
    assert {path.name: path.stat().st_mtime_ns
            for path in derived_files(cache.folder)} == derived  # not derived again
    pd.testing.assert_frame_equal(after.findings, before.findings)


def test_reading_some_sessions_reads_their_readings_only_and_in_stored_order(lab):
    reference = everything_at_once(lab)
    sessions = reference[col.SESSION].fillna("")
    for machine_ids, chosen in ((["stack"], ["evening", ""]), (["twin-disc"], ["morning"])):
        got = DerivedCache(lab).read(columns=[col.MACHINE, col.SESSION, col.CURRENT_A],
                                     machines=machine_ids, sessions=chosen)
        expected = reference[reference[col.MACHINE].isin(machine_ids) & sessions.isin(chosen)]
        assert len(got) == len(expected) > 0
        np.testing.assert_array_equal(got[col.CURRENT_A].to_numpy(),
                                      expected[col.CURRENT_A].to_numpy())


def test_an_empty_lab_has_an_empty_summary(tmp_path):
    with open_store(tmp_path / "empty.sqlite3") as store:
        summary = DerivedCache(store).summary()
    assert summary.readings == 0
    assert summary.findings.empty and summary.groups.empty
    assert summary.sessions_in_run_order(["any"]) == []


@pytest.mark.parametrize("rh_range", [(0, 100), (35, 45), (0, 40), (60, 100), (50, 50)])
def test_a_humidity_range_read_from_the_files_keeps_what_the_page_filter_keeps(lab, rh_range):
    """The Compare page's humidity filter, applied as the cache's files are read, keeps the
    same readings as the filter written out in numpy on all readings (NaN kept; the slider's
    ends at 0 and 100 % keep the readings beyond them)."""
    cache = DerivedCache(lab)
    # Edge values in a fifth import: exactly at the ends, just past them, missing, beyond 100 %.
    edges = make_readings(12, seed=9)
    edges[col.RH] = [0.35, 0.45, 0.3499999999, 0.4500000001, np.nan, 1.02, -0.01, 0.0, 1.0,
                     0.5, 0.355, 0.6]
    lab.import_readings(edges, "edges")
    everything = cache.read(columns=[col.MACHINE, col.RH, col.CURRENT_A])
    percent = everything[col.RH].to_numpy() * 100
    low, high = rh_range
    with np.errstate(invalid="ignore"):
        expected = (np.isnan(percent) | ((percent >= low) & (percent <= high))
                    | ((high == 100) & (percent > 100)) | ((low == 0) & (percent < 0)))
    got = cache.read(columns=[col.MACHINE, col.RH, col.CURRENT_A],
                     rows=summaries.humidity_condition(rh_range))
    np.testing.assert_array_equal(got[col.CURRENT_A].to_numpy(),
                                  everything[col.CURRENT_A].to_numpy()[expected])


def test_a_read_of_some_imports_gives_the_times_a_read_of_all_would(lab):
    """Only the third import holds the undescribed machine, and its times are naive; the lab
    mixes zones, so every read gives zone-aware UTC times, whatever imports it opens (a day
    starts at the same hour for the findings as for the charts)."""
    cache = DerivedCache(lab)
    some = cache.read(columns=[col.MACHINE, col.TIME], machines=["not-described"])
    every = cache.read(columns=[col.MACHINE, col.TIME])
    assert str(some[col.TIME].dtype) == str(every[col.TIME].dtype) == "datetime64[ns, UTC]"
    expected = every[every[col.MACHINE] == "not-described"][col.TIME].reset_index(drop=True)
    pd.testing.assert_series_equal(some[col.TIME], expected)


def test_the_humidity_bounds_are_finite_when_a_reading_holds_an_infinite_humidity(tmp_path):
    """A slider cannot reach infinity: the bounds leave out infinite humidities (the reading
    stays, and a slider at 100 % keeps it)."""
    with open_store(tmp_path / "lab.sqlite3") as store:
        three_imports(store)
        odd = make_readings(50, seed=11)
        odd.loc[3, col.RH] = np.inf
        odd.loc[4, col.RH] = -np.inf
        store.import_readings(odd, "odd")
        summary = DerivedCache(store).summary()
        reference = everything_at_once(store)
    finite = reference[col.RH][np.isfinite(reference[col.RH])]
    assert summary.bounds(col.RH) == (finite.min(), finite.max())
    assert summary.readings == len(reference)
