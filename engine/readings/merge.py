"""Environment merge: the air of a humidity log put onto readings by nearest time."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.columns import (
    ELAPSED_S,
    ENVIRONMENT_COLUMNS,
    FLAGS,
    PRESSURE_PA,
    READING_COLUMNS,
    RH,
    TEMPERATURE_K,
    TIME,
)
from engine.errors import InputError
from engine.readings.flags import _range_masks, add_flags
from engine.readings.options import DEFAULT_TOLERANCE_S


# --- Environment merge -------------------------------------------------------------------------
def merge_environment(
    readings: pd.DataFrame, environment: pd.DataFrame, tolerance_s: float = DEFAULT_TOLERANCE_S,
    log_offset_s: float = 0.0,
) -> pd.DataFrame:
    """Put the air of an environment log onto readings, by nearest time within a tolerance.

    Parameters
    ----------
    readings : pandas.DataFrame
        Readings with :data:`engine.columns.READING_COLUMNS`.
    environment : pandas.DataFrame
        A log with :data:`engine.columns.ENVIRONMENT_COLUMNS`.
    tolerance_s : float
        Largest time between a reading and the log entry used for it [s]; default 300.
    log_offset_s : float
        Added to the log's times before matching [s]: ``3600`` for a log whose clock is an
        hour behind the readings' (see :func:`check_log_clock`, which finds it). Default 0.

    Returns
    -------
    pandas.DataFrame
        A copy of ``readings`` in its own order and index, with ``rh``, ``temperature_k`` and
        ``pressure_pa`` filled from the nearest log entry where the reading has no value of its
        own (a reading's own values are kept). Flags added: ``no_environment`` where a reading
        has no humidity of its own and none from the log in reach; ``rh_out_of_range``,
        ``temperature_out_of_range``, ``pressure_out_of_range`` where a filled value is
        outside its range.

    Raises
    ------
    InputError
        When the tolerance is not a non-negative number, or the two clocks cannot be compared:
        clock times against elapsed seconds, or times with a time zone against times without.

    Notes
    -----
    Clock times merge on ``time`` (as instants: two logs with different UTC offsets compare
    correctly); files of elapsed seconds merge on ``elapsed_s``, both counted from their own
    zero. The nearest entry is taken as a whole: an entry without pressure leaves the
    pressure empty even if an entry a little further has one.
    """
    try:
        tolerance = float(tolerance_s)
    except (TypeError, ValueError):
        raise InputError(f"time tolerance {tolerance_s!r} is not a number of seconds") from None
    if not math.isfinite(tolerance) or tolerance < 0:
        raise InputError(f"time tolerance must be zero or more seconds, got {tolerance_s!r}")
    missing = [c for c in READING_COLUMNS if c not in readings.columns]
    missing_log = [c for c in ENVIRONMENT_COLUMNS if c not in environment.columns]
    if missing or missing_log:
        raise InputError(
            "cannot merge: missing columns "
            + ", ".join([*(f"readings.{c}" for c in missing),
                         *(f"log.{c}" for c in missing_log)]))
    try:
        offset = float(log_offset_s)
    except (TypeError, ValueError):
        raise InputError(f"log offset {log_offset_s!r} is not a number of seconds") from None
    if not math.isfinite(offset):
        raise InputError(f"log offset must be a finite number of seconds, got {log_offset_s!r}")
    reading_key, log_key = _merge_keys(readings, environment)
    log_key = log_key + offset
    length = len(readings)
    result = readings.copy()
    log_values = {column: np.full(length, np.nan) for column in (RH, TEMPERATURE_K, PRESSURE_PA)}
    left_ok = ~np.isnan(reading_key)
    right_ok = ~np.isnan(log_key)
    if left_ok.any() and right_ok.any():
        left = pd.DataFrame({"__key": reading_key[left_ok],
                             "__position": np.flatnonzero(left_ok)})
        left = left.sort_values("__key", kind="stable")
        right = pd.DataFrame({
            "__key": log_key[right_ok],
            **{column: environment[column].to_numpy(dtype=float, na_value=np.nan)[right_ok]
               for column in log_values},
        }).sort_values("__key", kind="stable")
        merged = pd.merge_asof(left, right, on="__key", direction="nearest",
                               tolerance=tolerance)
        positions = merged["__position"].to_numpy()
        for column in log_values:
            log_values[column][positions] = merged[column].to_numpy(dtype=float)
    masks: dict[str, np.ndarray] = {}
    filled: dict[str, np.ndarray] = {}
    own_rh_missing = np.isnan(result[RH].to_numpy(dtype=float, na_value=np.nan))
    for column, log_column in log_values.items():
        own = result[column].to_numpy(dtype=float, na_value=np.nan)
        fill = np.isnan(own) & ~np.isnan(log_column)
        filled[column] = fill
        result[column] = np.where(fill, log_column, own)
    final_rh = result[RH].to_numpy(dtype=float)
    matched = ~np.isnan(log_values[RH]) | ~np.isnan(log_values[TEMPERATURE_K]) | ~np.isnan(
        log_values[PRESSURE_PA])
    # A log that reaches no reading at all is said once (check_log_clock), not on every row.
    masks["no_environment"] = own_rh_missing & np.isnan(final_rh) & bool(matched.any())
    ranges = _range_masks(final_rh, result[TEMPERATURE_K].to_numpy(dtype=float),
                          result[PRESSURE_PA].to_numpy(dtype=float))
    masks["rh_out_of_range"] = ranges["rh_out_of_range"] & filled[RH]
    masks["temperature_out_of_range"] = ranges["temperature_out_of_range"] & filled[TEMPERATURE_K]
    masks["pressure_out_of_range"] = ranges["pressure_out_of_range"] & filled[PRESSURE_PA]
    result[FLAGS] = add_flags(result[FLAGS], masks)
    return result


def _merge_keys(readings: pd.DataFrame, environment: pd.DataFrame
                ) -> tuple[np.ndarray, np.ndarray]:
    """Comparable float keys [s] for readings and log: clock instants or elapsed seconds."""
    reading_time = pd.to_datetime(readings[TIME], errors="coerce")
    log_time = pd.to_datetime(environment[TIME], errors="coerce")
    readings_clock = bool(reading_time.notna().any())
    log_clock = bool(log_time.notna().any())
    readings_elapsed = bool(readings[ELAPSED_S].notna().any())
    log_elapsed = bool(environment[ELAPSED_S].notna().any())
    if readings_clock and log_clock:
        reading_zone, log_zone = reading_time.dt.tz, log_time.dt.tz
        if (reading_zone is None) != (log_zone is None):
            with_zone = "readings" if reading_zone is not None else "log"
            without = "log" if reading_zone is not None else "readings"
            raise InputError(
                f"cannot match the log to the readings: the times in the {with_zone} carry a "
                f"time zone and the times in the {without} do not. Give both files times with a "
                "UTC offset (e.g. 2024-03-01T14:05:00+01:00) or both without, or name the "
                "zone in the time header (e.g. 'time [UTC]')")
        return _seconds_since_epoch(reading_time), _seconds_since_epoch(log_time)
    if readings_clock and not log_clock and log_elapsed:
        raise InputError(
            "cannot match the log to the readings: the readings have clock times and the log "
            "has only elapsed seconds; give the log clock times (or the readings elapsed "
            "seconds from the same start)")
    if log_clock and not readings_clock and readings_elapsed:
        raise InputError(
            "cannot match the log to the readings: the log has clock times and the readings "
            "have only elapsed seconds; give the readings clock times (or the log elapsed "
            "seconds from the same start)")
    length, log_length = len(readings), len(environment)
    if readings_elapsed and log_elapsed:
        return (readings[ELAPSED_S].to_numpy(dtype=float, na_value=np.nan),
                environment[ELAPSED_S].to_numpy(dtype=float, na_value=np.nan))
    return np.full(length, np.nan), np.full(log_length, np.nan)


def _seconds_since_epoch(times: pd.Series) -> np.ndarray:
    epoch = pd.Timestamp("1970-01-01", tz="UTC" if times.dt.tz is not None else None)
    return ((times - epoch) / pd.Timedelta(seconds=1)).to_numpy(dtype=float, na_value=np.nan)


#: Whole-hour clock offsets tried between a log and the readings [h].
LOG_OFFSETS_H = tuple(range(-12, 13))


@dataclass
class LogClock:
    """How a log's clock lines up with the readings'.

    Attributes
    ----------
    matched : int
        Readings with a log entry within the tolerance, as the clocks stand.
    suggested_offset_s : float or None
        A whole number of hours [s] to add to the log's times that matches clearly more
        readings (a logger left on winter time), or ``None``.
    matched_with_offset : int
        Readings matched with the suggested offset.
    messages : list of str
        What the user should know: the offset to give, or that the log does not overlap.
    """

    matched: int
    suggested_offset_s: float | None
    matched_with_offset: int
    messages: list[str]


def check_log_clock(
    readings: pd.DataFrame, environment: pd.DataFrame,
    tolerance_s: float = DEFAULT_TOLERANCE_S, source: str = "the log",
) -> LogClock:
    """Whether a log's clock is off from the readings' by whole hours, or misses them.

    Parameters
    ----------
    readings : pandas.DataFrame
        Readings with :data:`engine.columns.READING_COLUMNS`.
    environment : pandas.DataFrame
        A log with :data:`engine.columns.ENVIRONMENT_COLUMNS`.
    tolerance_s : float
        The merge's tolerance [s].
    source : str
        The log's name, for messages.

    Returns
    -------
    LogClock
        The readings matched now and with the best whole-hour offset, and the messages.
        Nothing is applied: the caller offers the offset (``--log-offset``, the Readings
        page) and passes it to :func:`merge_environment`.

    Notes
    -----
    For each whole-hour offset from -12 h to +12 h the readings with a log entry within the
    tolerance are counted (a sorted search per offset, once per distinct reading time). An
    offset is suggested when it matches at least 90 % of the readings and more than the
    clocks as they stand.
    """
    reading_key, log_key = _merge_keys(readings, environment)
    reading_key = reading_key[~np.isnan(reading_key)]
    log_key = np.sort(log_key[~np.isnan(log_key)])
    if reading_key.size == 0 or log_key.size == 0:
        return LogClock(0, None, 0, [])
    tolerance = float(tolerance_s)
    # Readings share their instants (several machines a second): each distinct time is
    # searched once and counted as often as it occurs.
    instants, occurrences = np.unique(reading_key, return_counts=True)

    def matched(offset_s: float) -> int:
        shifted = log_key + offset_s
        position = np.clip(np.searchsorted(shifted, instants), 1, len(shifted) - 1)
        if len(shifted) == 1:
            nearest = np.abs(instants - shifted[0])
        else:
            nearest = np.minimum(np.abs(instants - shifted[position - 1]),
                                 np.abs(instants - shifted[position]))
        return int(occurrences[nearest <= tolerance].sum())

    # Whole-hour clock errors belong to clocks; elapsed seconds from each file's own start
    # are only checked for overlap.
    clocks = bool(pd.to_datetime(readings[TIME], errors="coerce").notna().any())
    counts = {hours: matched(hours * 3600.0) for hours in (LOG_OFFSETS_H if clocks else (0,))}
    now = counts[0]
    best = max(LOG_OFFSETS_H, key=lambda hours: (counts[hours], -abs(hours)))
    messages: list[str] = []
    suggested = None
    if best != 0 and counts[best] > now and counts[best] >= 0.9 * reading_key.size:
        suggested = best * 3600.0
        behind = "behind" if best > 0 else "ahead of"
        messages.append(
            f"{source}: its clock seems {abs(best)} hour(s) {behind} the readings' (daylight "
            f"saving?): as the clocks stand {now} of {reading_key.size} readings find a log "
            f"entry, with {best:+d} h {counts[best]}. Not applied: to use it, give "
            f"--log-offset '{best:+d} h' on the command line, or choose it on the Readings page")
    if now == 0:
        messages.append(
            f"{source}: the log does not overlap the readings (log "
            f"{_span(environment, log_key)}, readings {_span(readings, reading_key)}): no "
            "reading gets its air from it" + ("" if suggested is not None else
                                               "; check that it is the log of this session"))
    return LogClock(now, suggested, counts[best] if suggested is not None else now, messages)


def _span(frame: pd.DataFrame, keys: np.ndarray) -> str:
    """First and last time of a frame's keys, as the user wrote them (clock or elapsed)."""
    times = pd.to_datetime(frame[TIME], errors="coerce").dropna()
    if not times.empty:
        return f"{times.min():%Y-%m-%d %H:%M} to {times.max():%Y-%m-%d %H:%M}"
    return f"{np.nanmin(keys):g} s to {np.nanmax(keys):g} s"
