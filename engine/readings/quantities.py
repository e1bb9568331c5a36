"""Numbers and units in cells: number notation per column, units per cell, conversion to SI."""

from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.errors import InputError
from engine.readings.options import (
    _FIELD_KIND,
    DEFAULT_UNITS,
    ReadOptions,
    _quoted,
    _Table,
)
from engine.units import is_unit, one_line, speed_unit_conversion, unit_conversion

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


# --- Number notation and units in cells ---------------------------------------------------
#: Characters that group thousands besides the point and the comma: spaces of every width
#: (the no-break space and the narrow no-break space of typeset numbers) and the apostrophe.
_GROUP_SPACES = "\u00a0\u202f\u2009\u2007 "
_CELL = re.compile(
    r"^\s*(?P<number>[+\-\u2212]?(?:\d[\d\u00a0\u202f\u2009\u2007 '.,]*\d|\d|[.,]\d+)"
    r"(?:[eE][+\-\u2212]?\d{1,3})?)\s*"
    r"(?P<unit>(?:1\s*/\s*)?[A-Za-z\u00b0%\u00b5\u03bc\u2103\u2109\u03a9\[(][^\d]*?)?\s*$")
_EXPONENT = r"[eE][+-]?\d{1,3}$"


@dataclass
class ParsedNumbers:
    """Numbers read from the cells of one column, before conversion to SI.

    Attributes
    ----------
    values : numpy.ndarray of float
        The number of each cell in the unit the cell (or else the column) gives; NaN where
        empty or not a number.
    not_number : numpy.ndarray of bool
        Cells holding text that is not a number (``n/a``, ``-``, ``NaN``, ``12,x``).
    unit : numpy.ndarray of object
        The unit written in each cell, ``""`` where the cell has none.
    decimal : str or None
        The decimal mark decided for the column's text cells, ``None`` when none had text.
    thousands : str or None
        The thousands separator seen, ``None`` when none.
    ambiguous : bool
        Whether some cells (``1,056``) could be read either way and the file's mark decided.
    """

    values: np.ndarray
    not_number: np.ndarray
    unit: np.ndarray
    decimal: str | None = None
    thousands: str | None = None
    ambiguous: bool = False


def parse_numbers(series: pd.Series, decimal_hint: str = ".") -> ParsedNumbers:
    """Numbers and units of a column's cells, the decimal mark decided from the column.

    Parameters
    ----------
    series : pandas.Series
        Cells as read: numbers, text (``"1 056,5"``, ``"12.3 uA"``, ``"1,2E-05"``) or both.
    decimal_hint : str
        The decimal mark of the file, used when the column's cells do not decide it.

    Returns
    -------
    ParsedNumbers
        One number and one unit text per cell.

    Notes
    -----
    A cell with both marks takes the last one as its decimal mark (``1,056.5``, ``1.056,5``);
    a mark followed by other than three digits, or a mark repeated (``1.056.123``), is
    evidence too. The column takes the mark most of its cells show; cells written the other
    way then fail the grouping rule (three digits between separators) and are not numbers.
    Work is done once per distinct cell text, then spread back to the rows.
    """
    length = len(series)
    values = np.full(length, np.nan)
    not_number = np.zeros(length, dtype=bool)
    unit = np.full(length, "", dtype=object)
    if pd.api.types.is_bool_dtype(series.dtype):
        return ParsedNumbers(values, series.to_numpy(dtype=bool, na_value=False), unit)
    if pd.api.types.is_numeric_dtype(series.dtype):
        values = series.to_numpy(dtype=float, na_value=np.nan)
        return _finite_only(ParsedNumbers(values, not_number, unit))
    lengths = None
    if series.dtype == object:
        inferred = pd.api.types.infer_dtype(series, skipna=True)
        if inferred in ("floating", "integer", "mixed-integer-float", "decimal", "empty"):
            values = _to_float(series)
            return _finite_only(ParsedNumbers(values, not_number, unit))
        if inferred != "string":
            lengths = series.map(lambda value: len(value) if isinstance(value, str) else None)
    if lengths is not None:
        # Mixed cells (a workbook): real numbers as they are, text through the notation rules.
        is_text = lengths.notna().to_numpy(dtype=bool)
        others = series.where(~is_text)
        numeric = _to_float(others)
        not_number |= others.notna().to_numpy(dtype=bool) & np.isnan(numeric)
        values = np.array(numeric, dtype=float)
        text = series.where(is_text).astype("str")
    else:
        text = series.astype("str")
    codes, uniques = pd.factorize(text)
    if len(uniques) == 0:
        return _finite_only(ParsedNumbers(values, not_number, unit))
    cells = pd.Series(uniques, dtype="str").str.strip()
    blank = (cells == "").to_numpy(dtype=bool)
    parts = cells.str.extract(_CELL)
    matched = parts["number"].notna().to_numpy(dtype=bool)
    number = parts["number"].fillna("").str.replace("\u2212", "-", regex=False)
    # Spaces inside a number group its thousands, three digits each ('1 056,5'), or it is text.
    spaced = number.str.contains(f"[{_GROUP_SPACES}]", regex=True).to_numpy(dtype=bool)
    spaced_ok = number.str.fullmatch(
        rf"[+-]?\d{{1,3}}(?:[{_GROUP_SPACES}]\d{{3}})+(?:[.,]\d*)?(?:[eE][+-]?\d{{1,3}})?"
    ).to_numpy(dtype=bool)
    matched = matched & (~spaced | spaced_ok)
    number = number.str.replace(f"[{_GROUP_SPACES}]", "", regex=True)
    exponent = number.str.extract(f"({_EXPONENT})", expand=False).fillna("")
    mantissa = number.str.replace(_EXPONENT, "", regex=True)
    # Only cells that are numbers (bare, or with a unit this tool knows) are evidence of the
    # decimal mark: '1,5x' is text, and must not turn '1.625' into 1625.
    unit_texts = parts["unit"].fillna("").str.strip()
    known = {text: text == "" or is_unit(text) for text in unit_texts.unique()}
    evidence = matched & unit_texts.map(known).to_numpy(dtype=bool)
    decimal, thousands, ambiguous = _decide_decimal(mantissa[evidence], decimal_hint)
    group = "," if decimal == "." else "."
    grouped = mantissa.str.fullmatch(
        rf"[+-]?\d{{1,3}}(?:[{re.escape(group)}']\d{{3}})+(?:{re.escape(decimal)}\d*)?")
    plain = mantissa.str.fullmatch(
        rf"[+-]?(?:\d+(?:{re.escape(decimal)}\d*)?|{re.escape(decimal)}\d+)")
    usable = matched & (grouped | plain).to_numpy(dtype=bool)
    clean = mantissa.str.replace(f"[{re.escape(group)}']", "", regex=True)
    clean = clean.str.replace(decimal, ".", regex=False) + exponent
    unique_values = pd.to_numeric(clean.where(usable), errors="coerce").to_numpy(
        dtype=float, na_value=np.nan)
    unique_bad = ~blank & np.isnan(unique_values)
    unique_units = parts["unit"].fillna("").str.strip().to_numpy(dtype=object)
    present = codes >= 0
    taken = codes[present]
    values[present] = unique_values[taken]
    not_number[present] = unique_bad[taken]
    unit[present] = unique_units[taken]
    if thousands is None and bool(grouped.to_numpy(dtype=bool)[usable].any()):
        thousands = group
    return _finite_only(ParsedNumbers(values, not_number, unit, decimal, thousands, ambiguous))


def _to_float(series: pd.Series) -> np.ndarray:
    """Floats of cells that are numbers already; an integer too large for a float is inf."""
    try:
        converted = pd.to_numeric(series, errors="coerce")
    except (OverflowError, TypeError, ValueError):
        converted = pd.to_numeric(series.astype("str").where(series.notna()), errors="coerce")
    return np.array(converted.to_numpy(dtype=float, na_value=np.nan), dtype=float)


def _decide_decimal(mantissa: pd.Series, hint: str) -> tuple[str, str | None, bool]:
    """The decimal mark a column's number texts show, the thousands mark, and ambiguity."""
    if mantissa.empty:
        return hint, None, False
    commas = mantissa.str.count(",")
    points = mantissa.str.count(r"\.")
    both = (commas > 0) & (points > 0)
    comma_last = both & (mantissa.str.rfind(",") > mantissa.str.rfind("."))
    three_after = r"[+-]?\d{1,3}(?:[.,']\d{3})+"
    grouping_like = mantissa.str.fullmatch(three_after)
    only_comma = (commas > 0) & (points == 0)
    only_point = (points > 0) & (commas == 0)
    comma_votes = int(comma_last.sum() + (only_comma & (commas == 1) & ~grouping_like).sum()
                      + (only_point & (points > 1)).sum())
    point_votes = int((both & ~comma_last).sum() + (only_point & (points == 1)
                                                     & ~grouping_like).sum()
                      + (only_comma & (commas > 1)).sum())
    if comma_votes > point_votes:
        decimal = ","
    elif point_votes > comma_votes:
        decimal = "."
    else:
        decimal = hint
    ambiguous = comma_votes == point_votes and bool(
        (grouping_like & ((commas == 1) ^ (points == 1))).any())
    thousands = None
    if bool((both | (commas > 1) | (points > 1)).any()):
        thousands = "," if decimal == "." else "."
    return decimal, thousands, ambiguous


def _finite_only(parsed: ParsedNumbers) -> ParsedNumbers:
    infinite = np.isinf(parsed.values)
    if infinite.any():
        parsed.values = np.where(infinite, np.nan, parsed.values)
        parsed.not_number = parsed.not_number | infinite
    return parsed


def _numbers(series: pd.Series, decimal: str) -> tuple[np.ndarray, np.ndarray]:
    """Float values of a column and the mask of cells whose text is not a number."""
    parsed = parse_numbers(series.reset_index(drop=True), decimal)
    with_unit = parsed.unit != ""
    if with_unit.any():
        parsed.values = np.where(with_unit, np.nan, parsed.values)
        parsed.not_number = parsed.not_number | with_unit
    return parsed.values, parsed.not_number


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
    units_used: dict[str, str], messages: list[str], decisions: list[str] | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, str | None]:
    """SI values of one numeric column, its masks and (for speed) the speed kind.

    Returns
    -------
    tuple
        SI values [SI unit of the field], not-a-number mask, unit-mismatch mask (a cell's
        own unit that does not fit the field, or a speed of the other kind), and for speed
        ``"rotation"`` or ``"linear"``.
    """
    decisions = messages if decisions is None else decisions
    column = table.columns[field_name]
    label = _quoted(column.header)
    parsed = parse_numbers(table.data[field_name].reset_index(drop=True), decimal)
    with_unit = parsed.unit != ""
    cells_carry_units = bool(with_unit.any())
    all_cells_carry = cells_carry_units and not bool(
        (~with_unit & ~np.isnan(parsed.values)).any())
    unit, origin = _resolve_unit(field_name, table, options, source)
    where = "in the units row of" if origin == "units row" else "in"
    try:
        scale, offset, speed_kind = _conversion(field_name, unit, field_name)
    except InputError as error:
        if origin == "caller":
            raise InputError(f"{source}: the unit given for {field_name}: {error}") from None
        raise InputError(
            f"{source}: column {label} has the unit '{one_line(unit)}' {where} "
            f"the file, which does not fit: {error}. Correct the header, e.g. "
            f"'{field_name} [{DEFAULT_UNITS[field_name]}]'"
        ) from None
    if origin == "default" and not all_cells_carry:
        messages.append(
            f"{source}: column {label} gives no unit; read as {unit} (the "
            f"default). Write the unit in the header, e.g. '{field_name} [{unit}]', if it is "
            "another"
        )
    values = parsed.values
    finite = values[np.isfinite(values) & ~with_unit]
    if (origin == "default" and field_name == "rh" and not cells_carry_units and finite.size
            and finite.min() >= 0 and finite.max() <= 1.0):
        # Every humidity between 0 and 1 with no unit: a logger writing fractions, not
        # percentages below 1 %. Read as a fraction and say so.
        unit, scale, offset = "", 1.0, 0.0
        messages.pop()  # the "read as % (the default)" note just above no longer holds
        messages.append(f"{source}: column {label} holds values from 0 to 1 "
                        "only: read as a fraction (0.45 = 45 %). Write 'rh [%]' in the header "
                        "if these really are percentages")
    if parsed.decimal is not None and (parsed.decimal != decimal or parsed.thousands
                                       or parsed.ambiguous):
        decisions.append(
            f"{source}: column {label}: numbers read with a decimal "
            f"{'comma' if parsed.decimal == ',' else 'point'}"
            + (f" and '{_MARK_NAMES[parsed.thousands]}' between thousands" if parsed.thousands
               else "")
            + (" (some such as 1,056 could be read either way; the file's mark decided)"
               if parsed.ambiguous else ""))
    # One scale and offset for the column, or (where cells carry units) one per cell.
    scales: float | np.ndarray = scale
    offsets: float | np.ndarray = offset
    mismatch = np.zeros(len(values), dtype=bool)
    if cells_carry_units:
        scales = np.full(len(values), scale)
        offsets = np.full(len(values), offset)
        cell_units, codes = np.unique(parsed.unit[with_unit].astype(str), return_inverse=True)
        unit_scale = np.full(len(cell_units), np.nan)
        unit_offset = np.zeros(len(cell_units))
        unit_kind: list[str | None] = []
        for position, cell_unit in enumerate(cell_units):
            try:
                unit_scale[position], unit_offset[position], kind = _conversion(
                    field_name, cell_unit, field_name)
            except InputError:
                kind = "unfit"
            unit_kind.append(kind)
        # Text after a number that is no unit at all ('12 abc') is text, not a number.
        no_unit = np.asarray([kind == "unfit" and not is_unit(_clean_unit(field_name, cell_unit))
                              for cell_unit, kind in zip(cell_units, unit_kind, strict=True)],
                             dtype=bool)[codes]
        kinds = np.asarray(unit_kind, dtype=object)[codes]
        if field_name == "speed" and all_cells_carry:
            fitting = kinds[kinds != "unfit"]
            if fitting.size:
                kept, counts = np.unique(fitting.astype(str), return_counts=True)
                speed_kind = str(kept[np.argmax(counts)])
        wrong = (kinds == "unfit") | ((kinds != speed_kind) if field_name == "speed" else False)
        positions = np.flatnonzero(with_unit)
        mismatch[positions] = wrong & ~no_unit
        parsed.not_number[positions] |= no_unit
        scales[positions] = np.where(wrong, np.nan, unit_scale[codes])
        offsets[positions] = np.where(wrong, 0.0, unit_offset[codes])
        fitting_units = [cell_unit for cell_unit, kind in zip(cell_units, unit_kind, strict=True)
                         if kind != "unfit" and (field_name != "speed" or kind == speed_kind)]
        decisions.append(
            f"{source}: column {label}: the unit is written in the cells ("
            + ", ".join(fitting_units[:6]) + (", ..." if len(fitting_units) > 6 else "")
            + "); each cell converted on its own"
            + (f"; {int(mismatch.sum())} cell(s) with a unit that does not fit "
               f"{field_name} flagged unit_mismatch" if mismatch.any() else ""))
        if all_cells_carry and fitting_units:
            unit = fitting_units[0] if len(fitting_units) == 1 else ", ".join(fitting_units[:6])
    units_used[field_name] = unit
    with np.errstate(over="ignore", invalid="ignore"):
        si_values = values * scales + offsets
    overflow = np.isinf(si_values)
    if overflow.any():
        si_values = np.where(overflow, np.nan, si_values)
    return si_values, parsed.not_number | overflow, mismatch, speed_kind


_MARK_NAMES = {",": ",", ".": ".", " ": "space"}


def _scaled(values: np.ndarray, scale: float, offset: float = 0.0
            ) -> tuple[np.ndarray, np.ndarray]:
    """Values times scale plus offset, and where that overflowed (1e308 kPa): left empty."""
    with np.errstate(over="ignore", invalid="ignore"):
        scaled = values * scale + offset
    overflow = np.isinf(scaled)
    if overflow.any():
        scaled = np.where(overflow, np.nan, scaled)
    return scaled, overflow


