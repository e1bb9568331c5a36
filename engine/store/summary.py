"""Group summaries: what the dashboard needs of every reading, kept per import beside the cache.

The Overview, Compare, Sessions and Report pages start from the machine-session groups of the
lab: which machines and sessions there are, in which order they were run, how many readings and
flagged readings each holds, the humidity and time they span, the findings of each group, and a
bounded set of readings to draw. Computed from every reading on each start of the app, this was
most of a first draw at 10^7 readings (reading 12 columns of every reading from the cache and
fitting every group); kept per import, it is read in a fraction of a second and the app holds
no reading it does not draw.

Each import's derived file (:mod:`engine.store.cache`) gets two companions with the same key:

- ``import-<id>-<key>.groups.parquet``: one row per (machine, session) group of the import
  (:data:`GROUP_COLUMNS`), with the group's findings at :data:`engine.analysis.REFERENCE_RH`
  as JSON text (every float written by ``repr``, so read back bit for bit);
- ``import-<id>-<key>.sample.parquet``: at most :data:`SAMPLE_CLEAN` clean and
  :data:`SAMPLE_FLAGGED` flagged readings of each group, evenly spaced in stored order, with
  the columns of :data:`DASHBOARD_COLUMNS` (the charts draw from these).

Findings per machine and session use only the readings of their group
(:func:`engine.analysis.findings_of_groups`), so the findings of a group that lies in one
import are those of the import's readings alone. A group whose readings lie in several imports
(the same session name imported twice) is fitted again from its readings, read in stored order
from the cache, when the summaries are combined (:func:`combine`): the findings are always
those of all the readings at once.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from engine import analysis
from engine import columns as col
from engine.machines import Machine, MachineFile

#: Version of the companion files' layout (a file of another version is built again).
SUMMARY_FORMAT = 1
#: Clean readings of each group and import kept to draw (at most).
SAMPLE_CLEAN = 2_000
#: Flagged readings of each group and import kept to draw (at most).
SAMPLE_FLAGGED = 500
#: Columns of the derived readings that the dashboard's pages draw and filter on.
DASHBOARD_COLUMNS = (
    col.MACHINE, col.SESSION, col.TIME, col.FLAGS, col.SPEED_REV_S, col.BELT_SPEED_M_S,
    col.CURRENT_A, col.RH, col.EFFICIENCY, col.EFFICIENCY_U, col.CHARGE_PER_REV_C,
    col.RELATIVE_AIR_DENSITY,
)
#: Columns of a group table, one row per (machine, session) group.
GROUP_COLUMNS = ("machine", "session", "first", "readings", "flagged", "rh_min", "rh_max",
                 "time_min", "time_max", "findings")
_NAT = np.iinfo(np.int64).min  # pandas' integer for a missing time


def _texts(derived: pd.DataFrame, name: str) -> pd.Series:
    if name not in derived:
        return pd.Series("", index=derived.index, dtype=object)
    values = derived[name]
    if isinstance(values.dtype, pd.CategoricalDtype):
        values = values.astype(object)
    return values.fillna("").astype(str)


def _text_codes(derived: pd.DataFrame, name: str) -> tuple[np.ndarray, list[str]]:
    """Codes and texts of a text column, missing values as "" (a categorical's own codes: no
    text per reading)."""
    if name not in derived:
        return np.zeros(len(derived), dtype=np.int64), [""]
    values = derived[name]
    if isinstance(values.dtype, pd.CategoricalDtype):
        codes = values.cat.codes.to_numpy().astype(np.int64)
        texts = [str(text) for text in values.cat.categories]
    else:
        codes, uniques = pd.factorize(values, use_na_sentinel=True)
        codes = codes.astype(np.int64)
        texts = [str(text) for text in uniques]
    if (codes < 0).any():  # missing: the code of "" (one more text when there is none)
        if "" not in texts:
            texts.append("")
        codes = np.where(codes < 0, texts.index(""), codes)
    return codes, texts


def group_codes(derived: pd.DataFrame) -> tuple[np.ndarray, list[tuple[str, str]]]:
    """Number the (machine, session) groups of some readings.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with ``machine`` and ``session`` (missing values count as "").

    Returns
    -------
    codes : numpy.ndarray of int
        Each reading's group number, ``0 .. len(groups) - 1``.
    groups : list of (str, str)
        (machine, session) of each number, in order of each group's first reading.
    """
    machine_codes, machine_names = _text_codes(derived, col.MACHINE)
    session_codes, session_names = _text_codes(derived, col.SESSION)
    width = max(len(session_names), 1)
    combined = machine_codes * width + session_codes
    codes, numbers = pd.factorize(combined)  # in order of first appearance
    groups = [(machine_names[number // width], session_names[number % width])
              for number in numbers.tolist()]
    if len(set(groups)) < len(groups):  # a text twice among the categories: merge its codes
        unique = list(dict.fromkeys(groups))
        codes = np.array([unique.index(key) for key in groups], dtype=np.int64)[codes]
        groups = unique
    return codes.astype(np.int64), groups


def _evenly(rows: np.ndarray, count: int) -> np.ndarray:
    if rows.size <= count:
        return rows
    return rows[np.linspace(0, rows.size - 1, count).round().astype(np.int64)]


def _json_value(value: object) -> object:
    if isinstance(value, tuple):
        return [_json_value(item) for item in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def findings_text(row: Mapping[str, object]) -> str:
    """One findings row as JSON text (floats by ``repr``: read back bit for bit)."""
    return json.dumps({name: _json_value(row[name]) for name in analysis.FINDINGS_COLUMNS},
                      allow_nan=True)


def findings_row(text: str) -> dict[str, object]:
    """A findings row from :func:`findings_text`: intervals back as tuples."""
    row = json.loads(text)
    return {name: tuple(value) if isinstance(value, list) else value
            for name, value in row.items()}


def group_table(derived: pd.DataFrame, machines: Mapping[str, Machine] | MachineFile
                ) -> tuple[pd.DataFrame, np.ndarray]:
    """The groups of one import's derived readings, and the readings to draw.

    Parameters
    ----------
    derived : pandas.DataFrame
        Output of :func:`engine.analysis.derive` for one import's readings.
    machines : mapping of str to Machine, or MachineFile
        The machines given to ``derive``.

    Returns
    -------
    groups : pandas.DataFrame
        Columns :data:`GROUP_COLUMNS`, one row per group in order of its first reading:
        ``first`` (position of its first reading), ``readings``, ``flagged`` (readings with a
        flag), the smallest and largest finite relative humidity [-] and time among its
        readings (missing values left out; NaN or NaT when none), and ``findings``, the
        group's row of ``analysis.findings(derived, machines, by_session=True)`` as JSON text.
    sample : numpy.ndarray of int
        Positions of the readings kept to draw, in stored order: at most
        :data:`SAMPLE_CLEAN` clean and :data:`SAMPLE_FLAGGED` flagged readings of each group,
        evenly spaced in their order.
    """
    codes, groups = group_codes(derived)
    count = len(groups)
    clean = analysis._flag_free(derived)  # noqa: SLF001 - the findings' own rule
    order = np.argsort(codes, kind="stable")
    bounds = np.zeros(count + 1, dtype=np.int64)
    np.cumsum(np.bincount(codes, minlength=count), out=bounds[1:])
    rh = derived[col.RH].to_numpy(dtype=float) if col.RH in derived else np.full(
        len(derived), np.nan)
    times = derived[col.TIME] if col.TIME in derived else pd.Series(
        pd.NaT, index=derived.index, dtype="datetime64[ns]")
    stamps = times.array.asi8 if len(times) else np.empty(0, dtype=np.int64)
    rows_of = {}
    first, flagged, rh_min, rh_max, time_min, time_max, kept = [], [], [], [], [], [], []
    for number in range(count):
        rows = order[bounds[number]:bounds[number + 1]]  # in stored order (a stable sort)
        rows_of[groups[number]] = rows
        first.append(int(rows[0]))
        is_clean = clean[rows]
        flagged.append(int(rows.size - np.count_nonzero(is_clean)))
        humidity = rh[rows]
        humidity = humidity[np.isfinite(humidity)]  # a slider's ends: finite values only
        rh_min.append(float(humidity.min()) if humidity.size else math.nan)
        rh_max.append(float(humidity.max()) if humidity.size else math.nan)
        when = stamps[rows]
        when = when[when != _NAT]
        time_min.append(int(when.min()) if when.size else _NAT)
        time_max.append(int(when.max()) if when.size else _NAT)
        kept.append(_evenly(rows[is_clean], SAMPLE_CLEAN))
        kept.append(_evenly(rows[~is_clean], SAMPLE_FLAGGED))
    found = analysis.findings(derived, machines, by_session=True)
    texts = {(str(row["machine"]), str(row["session"] or "")): findings_text(row)
             for row in found.to_dict("records")}
    time_type = times.dtype
    table = pd.DataFrame({
        "machine": [machine for machine, _ in groups],
        "session": [session for _, session in groups],
        "first": np.array(first, dtype=np.int64),
        "readings": np.diff(bounds),
        "flagged": np.array(flagged, dtype=np.int64),
        "rh_min": np.array(rh_min, dtype=float),
        "rh_max": np.array(rh_max, dtype=float),
        "time_min": _times_like(np.array(time_min, dtype=np.int64), time_type),
        "time_max": _times_like(np.array(time_max, dtype=np.int64), time_type),
        "findings": [texts[group] for group in groups],
    }, columns=list(GROUP_COLUMNS))
    sample = np.sort(np.concatenate(kept)) if kept else np.empty(0, dtype=np.int64)
    return table, sample


def _times_like(stamps: np.ndarray, dtype) -> pd.Series:
    """Integers of :attr:`pandas.arrays.DatetimeArray.asi8` back as times of ``dtype``."""
    # A zone-aware dtype names its unit; a numpy one (naive times) keeps it in the dtype
    # itself (a CSV read gives microseconds).
    unit = dtype.unit if isinstance(dtype, pd.DatetimeTZDtype) else np.datetime_data(dtype)[0]
    values = pd.Series(stamps.view(f"datetime64[{unit}]"))
    zone = getattr(dtype, "tz", None)
    return values.dt.tz_localize("UTC").dt.tz_convert(zone) if zone is not None else values


@dataclass
class LabSummary:
    """The groups of a whole lab, their findings and the readings kept to draw.

    Made by :func:`lab_summary` from the tables of :func:`combine`.

    Attributes
    ----------
    groups : pandas.DataFrame
        One row per (machine, session) group, in order of its first reading in the store:
        ``machine``, ``session`` ("" for readings without one), ``first`` (position of its
        first reading among all the store's readings in stored order), ``readings``,
        ``flagged``, ``rh_min``, ``rh_max``, ``time_min``, ``time_max`` (over all its
        imports), ``imports`` (tuple of the import ids that hold its readings) and
        ``findings`` (JSON text, :func:`findings_text`).
    findings : pandas.DataFrame
        ``analysis.findings(all readings, machines, by_session=True)`` (reference humidity
        :data:`engine.analysis.REFERENCE_RH`), equal to it value for value.
    sample : pandas.DataFrame
        The readings kept to draw (:data:`DASHBOARD_COLUMNS` and ``import_id``), at most
        :data:`SAMPLE_CLEAN` clean and :data:`SAMPLE_FLAGGED` flagged readings of each group,
        in stored order.
    """

    groups: pd.DataFrame
    findings: pd.DataFrame
    sample: pd.DataFrame
    _by_session: pd.DataFrame = field(repr=False, default_factory=pd.DataFrame)

    @property
    def readings(self) -> int:
        """Readings in the lab."""
        return int(self.groups["readings"].sum()) if len(self.groups) else 0

    def machine_counts(self) -> pd.Series:
        """Readings of each machine id, in order of its first reading."""
        return self.groups.groupby("machine", sort=False)["readings"].sum()

    def selected(self, machine_ids: Sequence[str], sessions: Sequence[str]) -> np.ndarray:
        """Which groups belong to these machines and sessions (bool per row of ``groups``)."""
        return (self.groups["machine"].isin([str(key) for key in machine_ids])
                & self.groups["session"].isin([str(name) for name in sessions])).to_numpy()

    def sessions_in_run_order(self, machine_ids: Sequence[str]) -> list[str]:
        """The sessions of these machines, in the order they were run (earliest reading first;
        sessions without a time last, then in order of their first reading)."""
        groups = self.groups[self.groups["machine"].isin([str(key) for key in machine_ids])]
        earliest = groups.groupby("session", sort=False)["time_min"].min()
        return [str(name) for name in earliest.sort_values(kind="stable").index]

    def bounds(self, column: str) -> tuple[object, object]:
        """Smallest and largest relative humidity (``col.RH``) or time (``col.TIME``) of all
        the readings, missing values left out (NaN or NaT when none)."""
        low, high = ("rh_min", "rh_max") if column == col.RH else ("time_min", "time_max")
        if self.groups.empty:
            return (math.nan, math.nan) if column == col.RH else (pd.NaT, pd.NaT)
        return self.groups[low].min(), self.groups[high].max()

    def findings_of(self, machines: Mapping[str, Machine] | MachineFile,
                    machine_ids: Sequence[str], sessions: Sequence[str]) -> pd.DataFrame:
        """Findings of the whole groups of these machines and sessions
        (:func:`engine.analysis.findings_of_groups`): the same rows and values as the findings
        of their readings alone."""
        return analysis.findings_of_groups(
            self._by_session, self.groups[["machine", "session", "first"]], machines,
            list(machine_ids), list(sessions))


def _empty_findings() -> pd.DataFrame:
    return pd.DataFrame({name: pd.Series(dtype=object) for name in analysis.FINDINGS_COLUMNS})


def lab_summary(groups: pd.DataFrame, sample: pd.DataFrame,
                machines: Mapping[str, Machine] | MachineFile) -> LabSummary:
    """The :class:`LabSummary` of the group table and sample made by :func:`combine`."""
    if groups.empty:
        return LabSummary(groups, _empty_findings(), sample, _empty_findings())
    by_session = pd.DataFrame([findings_row(text) for text in groups["findings"]],
                              columns=list(analysis.FINDINGS_COLUMNS))
    summary = LabSummary(groups, _empty_findings(), sample, by_session)
    summary.findings = summary.findings_of(machines, list(dict.fromkeys(groups["machine"])),
                                           list(dict.fromkeys(groups["session"])))
    return summary


def _thinned_sample(sample: pd.DataFrame) -> pd.DataFrame:
    """At most :data:`SAMPLE_CLEAN` clean and :data:`SAMPLE_FLAGGED` flagged readings of each
    group, evenly spaced in stored order (each import kept as many of its own)."""
    if sample.empty:
        return sample.reset_index(drop=True)
    codes, groups = group_codes(sample)
    clean = analysis._flag_free(sample)  # noqa: SLF001 - the findings' own rule
    count = len(groups)
    order = np.argsort(codes * 2 + (~clean), kind="stable")  # by group, clean first
    bounds = np.searchsorted((codes * 2 + (~clean))[order], np.arange(2 * count + 1))
    kept = [_evenly(order[bounds[index]:bounds[index + 1]],
                    SAMPLE_FLAGGED if index % 2 else SAMPLE_CLEAN) for index in range(2 * count)]
    positions = np.sort(np.concatenate(kept))
    if positions.size == len(sample):
        return sample.reset_index(drop=True)
    return sample.iloc[positions].reset_index(drop=True)


def combine(parts: Sequence[tuple[int, pd.DataFrame]], sample: pd.DataFrame | None,
            machines: Mapping[str, Machine] | MachineFile,
            read_groups: Callable[[list[tuple[str, str]], list[int]], pd.DataFrame]
            ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The group table and sample of a lab from those of its imports.

    Parameters
    ----------
    parts : sequence of (int, pandas.DataFrame)
        Per import, in stored order: its id and its :func:`group_table` (times of one type for
        all imports).
    sample : pandas.DataFrame or None
        The readings kept to draw of every import (:func:`sample_table`), in stored order, with
        ``import_id``; None when there are no imports.
    machines : mapping of str to Machine, or MachineFile
        The machines the findings were made with.
    read_groups : callable
        ``read_groups(groups, import_ids)``: the derived readings (at least
        :data:`engine.analysis.FINDINGS_INPUT_COLUMNS`) of these imports' readings of these
        (machine, session) groups, in stored order; called once, and only when some group's
        readings lie in more than one import (those groups are fitted again from all their
        readings).

    Returns
    -------
    groups : pandas.DataFrame
        See :attr:`LabSummary.groups`.
    sample : pandas.DataFrame
        See :attr:`LabSummary.sample`.
    """
    tables, offset = [], 0
    for import_id, groups in parts:
        groups = groups.assign(first=groups["first"] + offset, import_id=import_id)
        offset += int(groups["readings"].sum())
        tables.append(groups)
    if not tables or sample is None:
        groups = pd.DataFrame({name: [] for name in (*GROUP_COLUMNS[:-1], "imports",
                                                     "findings")})
        return groups, pd.DataFrame(columns=[*DASHBOARD_COLUMNS, "import_id"])
    every = pd.concat(tables, ignore_index=True)
    grouped = every.groupby(["machine", "session"], sort=False)
    groups = grouped.agg(first=("first", "min"), readings=("readings", "sum"),
                         flagged=("flagged", "sum"), rh_min=("rh_min", "min"),
                         rh_max=("rh_max", "max"), time_min=("time_min", "min"),
                         time_max=("time_max", "max")).reset_index()
    groups["imports"] = grouped["import_id"].agg(tuple).to_numpy()
    groups["findings"] = grouped["findings"].last().to_numpy()
    groups = groups.sort_values("first", kind="stable").reset_index(drop=True)
    shared = (groups["imports"].map(len) > 1).to_numpy()
    if shared.any():
        keys = list(zip(groups["machine"][shared], groups["session"][shared], strict=True))
        import_ids = sorted({number for numbers in groups["imports"][shared]
                             for number in numbers})
        readings = read_groups(keys, import_ids)
        codes, found_groups = group_codes(readings)
        wanted_keys = set(keys)
        wanted = np.isin(codes, [number for number, key in enumerate(found_groups)
                                 if key in wanted_keys])
        if not wanted.all():
            readings = readings[wanted].reset_index(drop=True)
        again = {(str(row["machine"]), str(row["session"] or "")): findings_text(row)
                 for row in analysis.findings(readings, machines,
                                              by_session=True).to_dict("records")}
        del readings
        groups.loc[shared, "findings"] = [again[key] for key in keys]
    return groups, _thinned_sample(sample)


def humidity_condition(rh_range: tuple[float, float]) -> pc.Expression:
    """The readings a relative-humidity range keeps, as an Arrow expression for reading
    (:meth:`engine.store.cache.DerivedCache.read`): those whose humidity times 100 lies in
    ``rh_range`` [%], ends included, those without humidity, and beyond 0 or 100 % those past
    the range's end when it is at 0 or 100 (a slider stops there).

    The same readings as the pages' filter of a read frame (the same double products and
    comparisons, in Arrow instead of numpy).
    """
    low, high = float(rh_range[0]), float(rh_range[1])
    humidity = pc.field(col.RH)
    percent = pc.multiply(humidity, 100.0)
    kept = (humidity.is_null() | pc.is_nan(humidity)
            | ((percent >= low) & (percent <= high)))
    if high == 100:
        kept = kept | (percent > 100.0)
    if low == 0:
        kept = kept | (percent < 0.0)
    return kept


def sample_table(derived: pd.DataFrame, positions: np.ndarray) -> pa.Table:
    """The readings to draw as the Arrow table the sample file holds."""
    columns = [name for name in DASHBOARD_COLUMNS if name in derived]
    kept = derived[columns].iloc[positions]
    for name in (col.MACHINE, col.SESSION):  # missing as "", as the groups name them
        if name in kept and kept[name].isna().any():
            kept = kept.assign(**{name: _texts(kept, name).to_numpy()})
    return pa.Table.from_pandas(kept, preserve_index=False)
