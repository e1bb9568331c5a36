"""Times: ISO 8601, day-first or month-first dates, times of day, elapsed time, time zones."""

from __future__ import annotations

import datetime as dt
import re
import warnings
import zoneinfo
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.errors import InputError
from engine.readings.options import ReadOptions, _quoted, _Table
from engine.readings.quantities import _numbers, _scaled, _text, _to_float
from engine.units import one_line, unit_conversion

# --- Times ------------------------------------------------------------------------------------
_ISO_RE = (r"^\d{4}-\d{2}-\d{2}(?:[T ]\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?)?"
           r"\s*(?:Z|[+-]\d{2}(?::?\d{2})?)?$")
_TZ_RE = r"\d:\d{2}(?::\d{2}(?:\.\d+)?)?\s*(?:Z|[+-]\d{2}(?::?\d{2})?)$"
_DMY_RE = (r"^(\d{1,2})([./-])(\d{1,2})[./-](\d{4}|\d{2})"
           r"(?:[ T]+(\d{1,2}):(\d{2})(?::(\d{2})(?:[.,](\d{1,6}))?)?\s*([AaPp][Mm])?)?$")
_CLOCK_RE = r"^(\d{1,2}):(\d{2})(?::(\d{2})(?:[.,](\d{1,6}))?)?$"
_NUMBER_RE = r"^[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?$"
_SAMPLE_TIMES = 2000
_DATE_ORDER_FIX = ("If that is wrong, choose the order: --day-first or --month-first on the "
                   "command line, 'Dates such as 03/04/2026' on the Readings page")


@dataclass
class _Times:
    time: pd.Series
    elapsed_s: np.ndarray
    bad: np.ndarray
    label: str | None
    day_first: bool | None
    absolute: bool


def _time_hint(unit: str | None, source: str, header: str) -> tuple[str, object]:
    """Meaning of the unit in a time header: a duration, a time zone or a format hint."""
    if not unit:
        return "none", None
    folded = unit.strip().casefold()
    if re.search(r"(yy|dd|hh|mm)", folded):
        day, month = folded.find("dd"), folded.find("mm")
        year = folded.find("yy")
        if 0 <= day and 0 <= month and not 0 <= year < min(day, month):
            return "format", day < month
        return "format", None
    try:
        scale, _offset = unit_conversion(unit, "duration", "time")
        return "duration", scale
    except InputError:
        pass
    zone_name = {"utc": "UTC", "z": "UTC", "gmt": "UTC"}.get(folded, unit.strip())
    try:
        return "zone", zoneinfo.ZoneInfo(zone_name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError, TypeError):
        pass
    raise InputError(
        f"{source}: column '{header}' has the unit '{unit}', which is neither a duration "
        "(s, min, h: for elapsed time) nor a time zone (UTC, Europe/Paris). Correct the header"
    )


def _empty_times(length: int) -> pd.Series:
    return pd.Series(pd.NaT, index=range(length), dtype="datetime64[us]")


def _parse_iso(text: pd.Series, messages: list[str], source: str) -> tuple[pd.Series, np.ndarray]:
    bad = np.zeros(len(text), dtype=bool)
    quick = _iso_by_arrow(text)
    if quick is not None:
        return quick, bad
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            return pd.to_datetime(text, format="ISO8601", errors="coerce"), bad
        except ValueError:
            pass
        aware = text.str.contains(_TZ_RE, regex=True, na=False).to_numpy(dtype=bool)
        naive = text.notna().to_numpy(dtype=bool) & ~aware
        if aware.any() and naive.any():
            keep_aware = aware.sum() >= naive.sum()
            minority = naive if keep_aware else aware
            messages.append(
                f"{source}: {int(aware.sum())} times carry a time zone and {int(naive.sum())} "
                f"do not; the {int(minority.sum())} "
                + ("without" if keep_aware else "with")
                + " one are marked bad_time"
            )
            bad = minority
            text = text.where(~minority)
        try:
            return pd.to_datetime(text, format="ISO8601", errors="coerce"), bad
        except ValueError:
            messages.append(
                f"{source}: the times carry different UTC offsets (e.g. a daylight-saving "
                "change); they were converted to UTC"
            )
            return pd.to_datetime(text, format="ISO8601", errors="coerce", utc=True), bad


_OFFSET = re.compile(r"([+-])(\d{2}):(\d{2})")


def _iso_by_arrow(text: pd.Series) -> pd.Series | None:
    """ISO 8601 times read by Arrow, as ``pandas.to_datetime(format="ISO8601")`` reads them;
    ``None`` unless every time is one Arrow reads and all carry one UTC offset (or none).

    Arrow's reading is the stricter (no single-digit fields, no more than six decimals of a
    second, no basic format such as ``20260302T0800``): where it reads a time at all, pandas
    reads the same instant. Anything else (a bad time, times with different offsets or
    with and without one) is left to pandas, which marks, converts and says.
    """
    import pyarrow as pa  # imported when times are read
    import pyarrow.compute as pc

    try:
        cells = pa.array(text, type=pa.string(), from_pandas=True)
    except (pa.ArrowInvalid, pa.ArrowTypeError):
        return None
    if cells.null_count == len(cells):
        return None
    endings = pc.unique(pc.utf8_slice_codeunits(cells, -6)).drop_null().to_pylist()
    offset = _OFFSET.fullmatch(endings[0]) if len(endings) == 1 else None
    zone = None
    if offset is not None:
        sign = -1 if offset.group(1) == "-" else 1
        zone = dt.timezone(dt.timedelta(minutes=sign * (int(offset.group(2)) * 60
                                                        + int(offset.group(3)))))
    elif pc.unique(pc.utf8_slice_codeunits(cells, -1)).drop_null().to_pylist() == ["Z"]:
        zone = dt.UTC
    try:
        instants = pc.cast(cells, pa.timestamp("us", tz="UTC") if zone is not None
                           else pa.timestamp("us"))
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None
    times = pd.Series(instants.to_numpy(zero_copy_only=False), index=text.index)
    if zone is not None:
        times = times.dt.tz_localize("UTC").dt.tz_convert(zone)
    return times


_DMY_PARTS = re.compile(
    r"^(?P<first>\d{1,2})(?P<sep>[./-])(?P<second>\d{1,2})[./-](?P<year>\d{4}|\d{2})"
    r"(?:(?P<join>[ T]+)(?P<hour>\d{1,2}):\d{2}(?P<seconds>:\d{2}(?P<fraction>[.,]\d{1,6})?)?"
    r"(?P<ampm>\s*[AaPp][Mm])?)?$")
_PADDED_DATE_RE = r"^\d{2}[./-]\d{2}[./-]\d{4}(?:[ T]\d{2}:\d{2}(?::\d{2}(?:\.\d{1,6})?)?)?$"
_FIRST_IS_DAY_RE = r"^(?:1[3-9]|2\d|3[01])[./-]\d{1,2}[./-]"
_SECOND_IS_DAY_RE = r"^\d{1,2}[./-](?:1[3-9]|2\d|3[01])[./-]"
#: Most leftover values tried against every date layout (the slow, general parser).
_LEFTOVER_LIMIT = 10_000


def _date_format(match: re.Match, day_first: bool) -> str:
    """The strptime layout of one numeric date, from its parts."""
    sep = match["sep"]
    layout = f"%d{sep}%m{sep}" if day_first else f"%m{sep}%d{sep}"
    layout += "%Y" if len(match["year"]) == 4 else "%y"
    if match["hour"] is None:
        return layout
    layout += (" " if " " in match["join"] else "T") + ("%I" if match["ampm"] else "%H") + ":%M"
    if match["seconds"]:
        layout += ":%S"
        if match["fraction"]:
            layout += match["fraction"][0] + "%f"
    if match["ampm"]:
        layout += (" " if match["ampm"][0].isspace() else "") + "%p"
    return layout


def _date_formats(sample: Iterable[str], day_first: bool) -> list[str]:
    counts: dict[str, int] = {}
    for value in sample:
        match = _DMY_PARTS.match(value)
        if match:
            layout = _date_format(match, day_first)
            counts[layout] = counts.get(layout, 0) + 1
    return sorted(counts, key=lambda layout: -counts[layout])


def _all_date_formats(day_first: bool) -> list[str]:
    layouts = []
    for sep in "./-":
        for year in ("%Y", "%y"):
            date = (f"%d{sep}%m{sep}" if day_first else f"%m{sep}%d{sep}") + year
            for clock in ("", " %H:%M", " %H:%M:%S", " %H:%M:%S.%f", " %I:%M %p",
                          " %I:%M:%S %p", "T%H:%M", "T%H:%M:%S"):
                layouts.append(date + clock)
    return layouts


def _order_from_sequence(text: pd.Series) -> bool | None:
    """Day first (True) or month first (False) when the sequence of dates decides, else None.

    The file's distinct dates (three or more) in their order are read both ways. A log
    runs forward and steps by days: an order in which the dates go backwards, or which
    spreads them over ten times the span of the other order, is not the file's.
    """
    parts = text.str.extract(r"^(\d{1,2})[./-](\d{1,2})[./-](\d{4}|\d{2})\b")
    parts = parts.dropna().drop_duplicates()
    if len(parts) < 3:  # two dates are too few to show a pattern
        return None
    first, second = parts[0].astype(int), parts[1].astype(int)
    year = parts[2].astype(int)
    year = year.where(year >= 100, year + 2000)
    day_first = pd.to_datetime(
        pd.DataFrame({"year": year, "month": second, "day": first}), errors="coerce")
    month_first = pd.to_datetime(
        pd.DataFrame({"year": year, "month": first, "day": second}), errors="coerce")
    if day_first.isna().any() or month_first.isna().any():
        return None
    forward = (day_first.is_monotonic_increasing, month_first.is_monotonic_increasing)
    if forward == (True, False):
        return True
    if forward == (False, True):
        return False
    span_day = (day_first.max() - day_first.min()) / pd.Timedelta(days=1)
    span_month = (month_first.max() - month_first.min()) / pd.Timedelta(days=1)
    if span_day * 10 <= span_month:
        return True
    if span_month * 10 <= span_day:
        return False
    return None


def _parse_numeric_dates(
    text: pd.Series, day_first: bool | None, messages: list[str], source: str
) -> tuple[pd.Series, bool, str]:
    present = text.notna()
    if day_first is None:
        first_is_day = bool(text.str.contains(_FIRST_IS_DAY_RE, regex=True, na=False).any())
        second_is_day = bool(text.str.contains(_SECOND_IS_DAY_RE, regex=True, na=False).any())
        if first_is_day and not second_is_day:
            day_first = True
            messages.append(f"{source}: dates read day first (some have a first number above 12)")
        elif second_is_day and not first_is_day:
            day_first = False
            messages.append(
                f"{source}: dates read month first (some have a second number above 12)")
        elif first_is_day:
            day_first = True
            messages.append(
                f"{source}: some dates have the day first and others the month first; read "
                f"day first, the others are bad_time. {_DATE_ORDER_FIX}")
        else:
            example = one_line(text[present].iloc[0])[:40]  # a cell quoted in a message
            by_sequence = _order_from_sequence(text)
            if by_sequence is not None:
                day_first = by_sequence
                other = "month" if day_first else "day"
                messages.append(
                    f"{source}: dates such as '{example}' have no day above 12, but read "
                    f"{other} first they would jump by {'months' if day_first else 'days'} "
                    f"where read {'day' if day_first else 'month'} first they step by "
                    f"{'days' if day_first else 'months'}: read "
                    f"{'day' if day_first else 'month'} first. {_DATE_ORDER_FIX}")
            else:
                day_first = True
                messages.append(
                    f"{source}: dates such as '{example}' are ambiguous (no day above 12 in "
                    f"the whole column); read day first (day/month/year). {_DATE_ORDER_FIX}")
    else:
        messages.append(
            f"{source}: dates read {'day' if day_first else 'month'} first, as asked")
    times = pd.Series(pd.NaT, index=text.index, dtype="datetime64[us]")
    # Fast path for zero-padded dates (the usual logger layout): reorder into ISO 8601.
    padded = text.str.match(_PADDED_DATE_RE, na=False).to_numpy(dtype=bool)
    if padded.any():
        part = text[padded]
        day, month = (part.str.slice(0, 2), part.str.slice(3, 5))
        if not day_first:
            day, month = month, day
        iso = part.str.slice(6, 10) + "-" + month + "-" + day + part.str.slice(10)
        times[padded] = pd.to_datetime(iso, format="ISO8601", errors="coerce")
    remaining = present.to_numpy(dtype=bool) & times.isna().to_numpy(dtype=bool)
    layouts = _date_formats(text[remaining].head(_SAMPLE_TIMES), day_first)
    for stage in (layouts, _all_date_formats(day_first)):
        for layout in stage:
            if not remaining.any():
                break
            if stage is not layouts and remaining.sum() > _LEFTOVER_LIMIT:
                break
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                parsed = pd.to_datetime(text[remaining], format=layout, errors="coerce")
            times[remaining] = parsed
            remaining = remaining & times.isna().to_numpy(dtype=bool)
    label = "day/month/year" if day_first else "month/day/year"
    return times, day_first, label


def _parse_clock(text: pd.Series) -> np.ndarray:
    """Seconds since midnight of times of day such as '14:05' or '14:05:30.5'."""
    clock = text.str.match(r"^\d{1,2}:\d{2}(?::\d{2}(?:\.\d{1,6})?)?$", na=False)
    midnight = pd.Timestamp("2000-01-01")
    times = pd.to_datetime("2000-01-01 " + text.where(clock), format="ISO8601",
                           errors="coerce")
    return ((times - midnight) / pd.Timedelta(seconds=1)).to_numpy(dtype=float,
                                                                   na_value=np.nan)


def _classify(sample: pd.Series) -> str:
    counts = {
        "iso": int(sample.str.match(_ISO_RE).sum()),
        "numeric_date": int(sample.str.match(_DMY_RE).sum()),
        "clock": int(sample.str.match(_CLOCK_RE).sum()),
        "number": int(sample.str.match(_NUMBER_RE).sum()),
    }
    best = max(counts, key=lambda kind: counts[kind])
    return best if counts[best] > 0 else "other"


def _parse_times(
    raw: pd.Series | None, raw_date: pd.Series | None, table: _Table, options: ReadOptions,
    decimal: str, source: str, units_used: dict[str, str], messages: list[str],
) -> _Times:
    """Times of the rows; every note on how they were read is also a decision."""
    before = len(messages)
    times = _read_times(raw, raw_date, table, options, decimal, source, units_used, messages)
    table.decisions.extend(messages[before:])
    return times


def _read_times(
    raw: pd.Series | None, raw_date: pd.Series | None, table: _Table, options: ReadOptions,
    decimal: str, source: str, units_used: dict[str, str], messages: list[str],
) -> _Times:
    length = table.rows
    nothing = np.zeros(length, dtype=bool)
    if raw is None and raw_date is None:
        messages.append(
            f"{source}: no time column: the readings have no times and cannot be matched "
            "with an environment log")
        return _Times(_empty_times(length), np.full(length, np.nan), nothing, None, None, False)
    time_field = "time" if raw is not None else "date"
    column = table.columns[time_field]
    unit = column.unit or (options.units or {}).get("time")
    if not unit and table.unit_cells.get(time_field):
        try:
            _time_hint(table.unit_cells[time_field], source, column.header)
            unit = table.unit_cells[time_field]
        except InputError:
            messages.append(
                f"{source}: the units row gives {_quoted(table.unit_cells[time_field])} for the "
                "time; not a duration, a time zone or a date layout, so it was not used")
    kind, hint = _time_hint(unit, source, column.header)
    rollover = False
    day_first = options.day_first
    if kind == "format" and day_first is None:
        day_first = hint  # type: ignore[assignment]
    if raw is not None and table.format.get("file_type") == "xlsx" and kind != "duration":
        raw = _day_fractions_as_clock(raw, source, messages)
    if raw is not None and raw_date is not None:
        date_text = _text(raw_date, length).str.replace(r"[ T]00:00:00$", "", regex=True)
        time_text = _text(raw, length)
        joined = (date_text + " " + time_text).str.strip()
        raw = joined.where(joined != "")
        messages.append(
            f"{source}: date and time joined from the columns "
            f"{_quoted(table.columns['date'].header)} and {_quoted(column.header)}")
    series = (raw if raw is not None else raw_date).reset_index(drop=True)
    if not series.notna().any():
        messages.append(
            f"{source}: the time column {_quoted(column.header)} is empty: the readings have "
            "no times and cannot be matched with an environment log")
        return _Times(_empty_times(length), np.full(length, np.nan), nothing, None, None, False)
    if pd.api.types.is_datetime64_any_dtype(series.dtype):
        times = series
        bad = nothing
        label = "spreadsheet date-time"
        return _finish_times(times, bad, label, None, kind, hint, source, messages)
    numeric = pd.api.types.is_numeric_dtype(series.dtype) and not pd.api.types.is_bool_dtype(
        series.dtype)
    if numeric:
        text = series
        family = "number"
    else:
        text = _text(series, length, fill="")
        text = text.where(text != "")
        present = text.notna().to_numpy(dtype=bool)
        family = "number" if kind == "duration" else _classify(
            text[present].head(_SAMPLE_TIMES))
    if family == "number":
        scale = hint if kind == "duration" else 1.0
        values, not_number = _numbers(text, decimal)
        units_used["time"] = unit if kind == "duration" else "s"
        messages.append(
            f"{source}: column {_quoted(column.header)} holds numbers: read as elapsed time in "
            f"{units_used['time']}")
        elapsed, overflow = _scaled(values, float(scale))  # type: ignore[arg-type]
        return _Times(_empty_times(length), elapsed, not_number | overflow, "elapsed seconds",
                      None, False)
    if family == "clock" and raw_date is None:
        found = _preamble_date(table)
        if found is not None:
            date_text, line = found
            messages.append(
                f"{source}: the rows give only a time of day; joined with the date "
                f"'{date_text}' from line {line} above the header (times that go back past "
                "midnight are on the next day)")
            joined = (date_text + " " + text).where(present)
            family = _classify(joined[present].head(_SAMPLE_TIMES))
            text = joined
            if family in ("iso", "numeric_date"):
                rollover = True
    if family == "clock":
        elapsed = _parse_clock(text)
        messages.append(
            f"{source}: the times have no date: read as seconds since midnight (a session that "
            "passes midnight needs dates)")
        bad = present & np.isnan(elapsed)
        return _Times(_empty_times(length), elapsed, bad, "time of day", None, False)
    if family == "iso":
        times, bad_zone = _parse_iso(text, messages, source)
        label, used_day_first = "ISO 8601", None
    elif family == "numeric_date":
        times, used_day_first, label = _parse_numeric_dates(text, day_first, messages, source)
        bad_zone = nothing
    else:
        number_like = text.str.match(_NUMBER_RE, na=False)
        candidates = text.where(~number_like)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                times = pd.to_datetime(candidates, format="mixed", dayfirst=bool(day_first),
                                       errors="coerce")
            except (ValueError, TypeError):
                times = pd.to_datetime(candidates, format="mixed", dayfirst=bool(day_first),
                                       errors="coerce", utc=True)
        label, used_day_first, bad_zone = "free form", day_first, nothing
        messages.append(
            f"{source}: the times are in no common format; each was read on its own. "
            "ISO 8601 (2024-03-01 14:05:00) is safer")
    bad = (present & times.isna().to_numpy(dtype=bool)) | bad_zone
    if rollover:
        times = _past_midnight(pd.Series(times).reset_index(drop=True))
    return _finish_times(times, bad, label, used_day_first, kind, hint, source, messages)


def _past_midnight(times: pd.Series) -> pd.Series:
    """Times of day joined with one date: a step back of more than 12 h is the next day."""
    steps = times.diff().fillna(pd.Timedelta(0))
    backwards = (steps < -pd.Timedelta(hours=12)).to_numpy(dtype=np.int64)
    days = np.cumsum(backwards)
    if not days.any():
        return times
    return times + pd.to_timedelta(days, unit="D")


_PREAMBLE_DATE = re.compile(
    r"(?<!\d)(\d{4}-\d{2}-\d{2}|\d{1,2}[./-]\d{1,2}[./-](?:\d{4}|\d{2}))(?![\d:])")


def _preamble_date(table: _Table) -> tuple[str, int] | None:
    """The first date written in the lines above the header, and its line."""
    for offset, record in enumerate(table.preamble):
        for cell in record:
            found = _PREAMBLE_DATE.search(str(cell))
            if found:
                return found.group(1), table.preamble_first_line + offset
    return None


def _day_fractions_as_clock(raw: pd.Series, source: str, messages: list[str]) -> pd.Series:
    """Spreadsheet times stored as fractions of a day (0.4375 = 10:30) as clock text."""
    if pd.api.types.is_datetime64_any_dtype(raw.dtype):
        return raw
    values = _to_float(raw)
    numbers = np.isfinite(values)
    if not numbers.any() or values[numbers].min() < 0 or values[numbers].max() >= 1:
        return raw
    seconds = np.round(np.where(numbers, values, 0.0) * 86_400.0, 6)
    clock = pd.Series(pd.Timestamp("2000-01-01") + pd.to_timedelta(seconds, unit="s"))
    others = raw.reset_index(drop=True).astype("str").where(raw.reset_index(drop=True).notna())
    text = clock.dt.strftime("%H:%M:%S.%f").where(numbers, others)
    messages.append(
        f"{source}: the times are spreadsheet fractions of a day (0.5 = 12:00): read as "
        "times of day")
    return text.set_axis(raw.index)


def _finish_times(
    times: pd.Series, bad: np.ndarray, label: str, day_first: bool | None, kind: str,
    hint: object, source: str, messages: list[str],
) -> _Times:
    times = pd.Series(times).reset_index(drop=True)
    if not pd.api.types.is_datetime64_any_dtype(times.dtype):
        times = pd.to_datetime(times, errors="coerce")
    times = times.dt.as_unit("us")
    if kind == "zone":
        if times.dt.tz is None:
            before = times.isna().to_numpy(dtype=bool)
            times = times.dt.tz_localize(hint, ambiguous="NaT", nonexistent="NaT")
            lost = times.isna().to_numpy(dtype=bool) & ~before
            bad = bad | lost
            messages.append(f"{source}: times read in the time zone {hint}")
            if lost.any():
                messages.append(
                    f"{source}: {int(lost.sum())} times fall in a daylight-saving change of "
                    f"{hint} (they do not exist or happen twice) and are marked bad_time")
        else:
            messages.append(
                f"{source}: the times carry their own UTC offset; the zone in the header "
                "was not used")
    valid = times.notna()
    if valid.any():
        elapsed = (times - times[valid].min()).dt.total_seconds().to_numpy(
            dtype=float, na_value=np.nan)
    else:
        elapsed = np.full(len(times), np.nan)
    return _Times(times, elapsed, np.asarray(bad, dtype=bool), label, day_first, True)


