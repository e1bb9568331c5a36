"""Numbers and units in cells: number notation per column, units per cell, conversion to SI."""

from __future__ import annotations

import unicodedata

import numpy as np
import pandas as pd

from engine.errors import InputError
from engine.readings.options import (
    _FIELD_KIND,
    DEFAULT_UNITS,
    NUMERIC_NA_TEXTS,
    ReadOptions,
    _quoted,
    _Table,
)
from engine.units import one_line, speed_unit_conversion, unit_conversion

_TEMPERATURE_UNITS = {
    "c": "degC", "degc": "degC", "degreec": "degC", "degreesc": "degC", "celsius": "degC",
    "f": "degF", "degf": "degF", "degreef": "degF", "degreesf": "degF", "fahrenheit": "degF",
    "k": "K", "kelvin": "K",
}
_SPEED_UNITS = {"u/min": "rpm", "r/min": "rpm", "rev/min": "rpm", "rps": "rev/s", "r/s": "rev/s"}


def _clean_unit(field_name: str, unit: str) -> str:
    text = unit.strip()
    folded = unicodedata.normalize("NFKC", text).casefold().replace(" ", "").replace("°", "deg")
    folded = folded.replace("℃", "degc").replace("℉", "degf")
    if field_name == "temperature":
        return _TEMPERATURE_UNITS.get(folded, text)
    if field_name == "rh":
        if folded in {"%", "%rh", "percent", "pct"}:
            return "%"
        if folded in {"", "-", "1", "fraction"}:
            return ""
    if field_name == "speed":
        return _SPEED_UNITS.get(folded, text)
    return text


def _conversion(field_name: str, unit: str, label: str) -> tuple[float, float, str | None]:
    """Scale, offset and (for speed) the speed kind for a column's unit."""
    unit = _clean_unit(field_name, unit)
    if field_name == "speed":
        scale, speed_kind = speed_unit_conversion(unit, label)
        return scale, 0.0, speed_kind
    if field_name == "rh" and unit == "":
        return 1.0, 0.0, None
    scale, offset = unit_conversion(unit, _FIELD_KIND[field_name], label)
    return scale, offset, None


def _unit_fits(field_name: str, unit: str) -> bool:
    try:
        _conversion(field_name, unit, field_name)
    except InputError:
        return False
    return True


# --- Cell conversion ---------------------------------------------------------------------------
def _numbers(series: pd.Series, decimal: str) -> tuple[np.ndarray, np.ndarray]:
    """Float values of a column and the mask of cells whose text is not a number."""
    if pd.api.types.is_numeric_dtype(series.dtype) and not pd.api.types.is_bool_dtype(
            series.dtype):
        values = series.to_numpy(dtype=float, na_value=np.nan)
        not_number = np.zeros(len(values), dtype=bool)
    else:
        text = series.astype("str").str.strip()
        present = text.notna() & ~text.isin(NUMERIC_NA_TEXTS)
        if decimal == ",":
            text = text.str.replace(",", ".", regex=False)
        values = pd.to_numeric(text.where(present), errors="coerce").to_numpy(
            dtype=float, na_value=np.nan)
        not_number = present.to_numpy(dtype=bool) & np.isnan(values)
    infinite = np.isinf(values)
    if infinite.any():
        values = np.where(infinite, np.nan, values)
        not_number = not_number | infinite
    return values, not_number


def _text(series: pd.Series | None, length: int, fill: str = "", strip: bool = True
          ) -> pd.Series:
    if series is None or not series.notna().any():
        return pd.Series([fill], dtype="str").take(np.zeros(length, dtype=np.intp)).reset_index(
            drop=True)
    text = series.astype("str")
    if strip:
        text = text.str.strip()
    blank = text.isna() | (text == "")
    if blank.any():
        text = text.where(~blank, fill)
    return text.reset_index(drop=True).astype("str")


def _resolve_unit(
    field_name: str, table: _Table, options: ReadOptions, source: str
) -> tuple[str, str]:
    """The unit text of a column and where it came from."""
    column = table.columns[field_name]
    if column.unit:
        return column.unit, "header"
    if field_name in table.unit_cells:
        return table.unit_cells[field_name], "units row"
    caller = (options.units or {}).get(field_name)
    if caller is not None:
        return caller, "caller"
    return DEFAULT_UNITS[field_name], "default"


def _column_si(
    field_name: str, table: _Table, options: ReadOptions, source: str, decimal: str,
    units_used: dict[str, str], messages: list[str],
) -> tuple[np.ndarray, np.ndarray, str | None]:
    """SI values, not-a-number mask and (for speed) the speed kind of one numeric column."""
    column = table.columns[field_name]
    unit, origin = _resolve_unit(field_name, table, options, source)
    where = "in the units row of" if origin == "units row" else "in"
    try:
        scale, offset, speed_kind = _conversion(field_name, unit, field_name)
    except InputError as error:
        if origin == "caller":
            raise InputError(f"{source}: the unit given for {field_name}: {error}") from None
        raise InputError(
            f"{source}: column {_quoted(column.header)} has the unit '{one_line(unit)}' {where} "
            f"the file, which does not fit: {error}. Correct the header, e.g. "
            f"'{field_name} [{DEFAULT_UNITS[field_name]}]'"
        ) from None
    if origin == "default":
        messages.append(
            f"{source}: column {_quoted(column.header)} gives no unit; read as {unit} (the "
            f"default). Write the unit in the header, e.g. '{field_name} [{unit}]', if it is "
            "another"
        )
    values, not_number = _numbers(table.data[field_name].reset_index(drop=True), decimal)
    finite = values[np.isfinite(values)]
    if (origin == "default" and field_name == "rh" and finite.size
            and finite.min() >= 0 and finite.max() <= 1.0):
        # Every humidity between 0 and 1 with no unit: a logger writing fractions, not
        # percentages below 1 %. Read as a fraction and say so.
        unit, scale, offset = "", 1.0, 0.0
        messages.pop()  # the "read as % (the default)" note just above no longer holds
        messages.append(f"{source}: column {_quoted(column.header)} holds values from 0 to 1 "
                        "only: read as a fraction (0.45 = 45 %). Write 'rh [%]' in the header "
                        "if these really are percentages")
    units_used[field_name] = unit
    si_values, overflow = _scaled(values, scale, offset)
    return si_values, not_number | overflow, speed_kind


def _scaled(values: np.ndarray, scale: float, offset: float = 0.0
            ) -> tuple[np.ndarray, np.ndarray]:
    """Values times scale plus offset, and where that overflowed (1e308 kPa): left empty."""
    with np.errstate(over="ignore", invalid="ignore"):
        scaled = values * scale + offset
    overflow = np.isinf(scaled)
    if overflow.any():
        scaled = np.where(overflow, np.nan, scaled)
    return scaled, overflow


