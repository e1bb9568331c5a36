"""Headers: which field each column holds and the unit its header carries, header and units rows."""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Iterable, Mapping, Sequence

from engine.errors import InputError
from engine.readings.options import (
    _IMPLIED_UNITS,
    _NUMERIC_FIELDS,
    _SYMBOLS,
    ALIASES,
    ENVIRONMENT_FIELDS,
    HEADER_SEARCH_ROWS,
    READING_FIELDS,
    _Column,
    _quoted,
)
from engine.readings.quantities import _unit_fits
from engine.units import one_line, unit_conversion


def _key(text: str) -> str:
    """Header text reduced for matching: case-folded, micro sign as 'u', no punctuation."""
    text = unicodedata.normalize("NFKC", str(text)).casefold()
    text = text.replace("μ", "u").replace("°", "deg")
    return re.sub(r"[^0-9a-z]+", "", text)


def _build_alias_index() -> dict[str, str]:
    index: dict[str, str] = {}
    for field_name, spellings in ALIASES.items():
        for spelling in spellings:
            key = _key(spelling)
            if index.setdefault(key, field_name) != field_name:
                raise RuntimeError(f"alias {spelling!r} names two fields")
    return index


_ALIAS_INDEX = _build_alias_index()

# --- Headers and units ------------------------------------------------------------------------
_BRACKET_UNIT = re.compile(r"^(.*?)\s*[\[(]\s*([^\[\]()]*?)\s*[\])]\s*$")
_PERCENT_UNIT = re.compile(r"^(.*?\S)\s*%$")
_LEADING_PERCENT = re.compile(r"^%\s*([A-Za-z].*)$")
_TRAILING_UNIT = re.compile(r"^(.*?\S)[\s_]+(\S+)$")


def split_header(header: object) -> tuple[str, str | None]:
    """Split a column header into its name and the unit it carries, if any.

    Parameters
    ----------
    header : str
        ``"speed [rpm]"``, ``"I (uA)"``, ``"RH%"`` or ``"machine"``.

    Returns
    -------
    tuple of (str, str or None)
        The name and the unit text (``None`` when the header has no bracketed unit or ``%``).
    """
    text = str(header).strip()
    match = _BRACKET_UNIT.match(text)
    if match and match.group(1):
        return match.group(1), (match.group(2) or None)
    match = _PERCENT_UNIT.match(text)
    if match:
        return match.group(1), "%"
    match = _LEADING_PERCENT.match(text)
    if match:
        return match.group(1), "%"
    return text, None


def _match_header(header: str, wanted: Iterable[str]) -> tuple[str, str | None] | None:
    """The field a header names and the unit it carries, or None."""
    name, unit = split_header(header)
    key = _key(name)
    if key in _SYMBOLS and unit is not None:
        for candidate in _SYMBOLS[key]:
            if candidate in wanted and candidate in _NUMERIC_FIELDS and _unit_fits(candidate, unit):
                return candidate, unit
    field_name = _ALIAS_INDEX.get(key)
    if field_name in wanted:
        return field_name, unit if unit is not None else _IMPLIED_UNITS.get(key)
    if unit is None:
        match = _TRAILING_UNIT.match(name)
        if match:
            field_name = _ALIAS_INDEX.get(_key(match.group(1)))
            if (field_name in wanted and field_name in _NUMERIC_FIELDS
                    and _unit_fits(field_name, match.group(2))):
                return field_name, match.group(2)
        if "/" in name and not name.startswith("/"):
            # The printed-table convention: quantity / unit (I/uA, n/rpm, t/s, T/°C).
            left, right = (part.strip() for part in name.split("/", 1))
            found = _match_header(f"{left} [{right}]", wanted) if left and right else None
            if found and found[1] is not None and _slash_unit_fits(found[0], found[1]):
                return found
    return None


def _slash_unit_fits(field_name: str, unit: str) -> bool:
    if field_name in _NUMERIC_FIELDS:
        return _unit_fits(field_name, unit)
    if field_name == "time":
        try:
            unit_conversion(unit, "duration", "time")
        except InputError:
            return False
        return True
    return False


def _field_by_unit(header: str, wanted: Iterable[str]) -> list[str]:
    """The numeric fields whose unit a header of no known name carries (``CH1 (rpm)``)."""
    name, unit = split_header(header)
    if unit is None and "/" in name:
        name, _slash, unit = name.partition("/")
    if not unit or not name.strip():
        return []
    return [field_name for field_name in _NUMERIC_FIELDS
            if field_name in wanted and _unit_fits(field_name, unit.strip())]


def _columns_of(
    headers: Sequence[str],
    mapping: Mapping[str, str | None] | None,
    wanted: Sequence[str],
    source: str,
    notes: list[str] | None = None,
) -> dict[str, _Column]:
    columns: dict[str, _Column] = {}
    claimed: set[int] = set()
    for source_header, field_name in (mapping or {}).items():
        position = _find_header(headers, source_header)
        if position is None:
            shown = ", ".join(_quoted(header) for header in headers if header) or "none"
            raise InputError(
                f"{source}: the column mapping names the column '{source_header}', which the "
                f"file does not have; its columns are {shown}"
            )
        claimed.add(position)
        if not field_name:
            continue
        if field_name not in wanted:
            raise InputError(
                f"{source}: the column mapping maps '{source_header}' to '{field_name}', "
                f"which is not a field here; use one of {', '.join(wanted)}"
            )
        if field_name in columns:
            raise InputError(
                f"{source}: the column mapping maps two columns to '{field_name}'"
            )
        header_name, header_unit = split_header(headers[position])
        columns[field_name] = _Column(
            position, headers[position], header_unit or _IMPLIED_UNITS.get(_key(header_name)))
    for position, header in enumerate(headers):
        if position in claimed:
            continue
        match = _match_header(header, wanted)
        if match and match[0] not in columns:
            columns[match[0]] = _Column(position, header, match[1])
            claimed.add(position)
        elif match:
            claimed.add(position)
    # Headers of no known name (a logger's channels, CH1 (rpm)) are matched by their unit
    # when exactly one of them carries a unit of a field still missing.
    by_field: dict[str, list[int]] = {}
    for position, header in enumerate(headers):
        if position in claimed or not str(header).strip():
            continue
        for field_name in _field_by_unit(header, wanted):
            if field_name not in columns:
                by_field.setdefault(field_name, []).append(position)
    for field_name, positions in by_field.items():
        if len(positions) == 1 and all(
                positions[0] not in other for name, other in by_field.items()
                if name != field_name):
            position = positions[0]
            name, unit = split_header(headers[position])
            if unit is None:
                unit = name.partition("/")[2].strip()
            columns[field_name] = _Column(position, headers[position], unit)
            if notes is not None:
                notes.append(
                    f"{source}: column {_quoted(headers[position])} taken as the {field_name} "
                    f"by its unit ({one_line(unit)}); if that is wrong, say which column is "
                    f"which with --column {field_name}=HEADER ('column for {field_name}' on "
                    "the Readings page)")
        elif notes is not None:
            shown = " and ".join(_quoted(headers[position]) for position in positions[:4])
            notes.append(
                f"{source}: columns {shown} could each be the {field_name} (same kind of "
                f"unit); say which with --column {field_name}=HEADER (on the Readings page: "
                f"'column for {field_name}')")
    return columns


def _find_header(headers: Sequence[str], wanted: str) -> int | None:
    for position, header in enumerate(headers):
        if header == wanted:
            return position
    for position, header in enumerate(headers):
        if header.strip().casefold() == str(wanted).strip().casefold():
            return position
    key = _key(wanted)
    for position, header in enumerate(headers):
        if key and _key(header) == key:
            return position
    return None


def map_columns(
    headers: Sequence[str],
    mapping: Mapping[str, str | None] | None = None,
    fields: Sequence[str] = READING_FIELDS,
) -> dict[str, str]:
    """Which header each field comes from.

    Parameters
    ----------
    headers : sequence of str
        The file's column headers, in order.
    mapping : mapping of str to str, optional
        Source header -> field, taking precedence over :data:`ALIASES`.
    fields : sequence of str
        The fields looked for (default: those of a readings file).

    Returns
    -------
    dict of str to str
        Field -> header, for the fields found (the first matching header wins).

    Examples
    --------
    >>> map_columns(["Machine", "RPM", "I (uA)", "RH%", "Temp C"])
    {'machine': 'Machine', 'speed': 'RPM', 'current': 'I (uA)', 'rh': 'RH%', \
'temperature': 'Temp C'}
    """
    headers = [str(header) for header in headers]
    columns = _columns_of(headers, mapping, fields, "columns")
    return {name: column.header for name, column in sorted(
        columns.items(), key=lambda item: item[1].position)}


def _is_number(text: str) -> bool:
    return bool(re.fullmatch(r"\s*[+-]?(\d+([.,]\d*)?|[.,]\d+)([eE][+-]?\d+)?\s*", text))


def _strip_brackets(text: str) -> str:
    text = text.strip()
    if len(text) >= 2 and text[0] in "[(" and text[-1] in "])":
        return text[1:-1].strip()
    return text


def _units_row_cells(record: Sequence[str], columns: Mapping[str, _Column]) -> dict[str, str]:
    return {
        name: _strip_brackets(str(record[column.position]))
        for name, column in columns.items()
        if (name in _NUMERIC_FIELDS or name == "time") and column.position < len(record)
        and str(record[column.position]).strip()
    }


def _looks_like_units_row(record: Sequence[str], columns: Mapping[str, _Column]) -> bool:
    cells = _units_row_cells(record, columns)
    numeric = {name: unit for name, unit in cells.items() if name in _NUMERIC_FIELDS}
    if not numeric or any(_is_number(unit) for unit in cells.values()):
        return False
    return all(_unit_fits(name, unit) for name, unit in numeric.items())


def _find_header_row(
    records: list[list[str]], wanted: Sequence[str], mapping: Mapping[str, object] | None
) -> int:
    for index, record in enumerate(records[:HEADER_SEARCH_ROWS]):
        if not record:
            continue
        if mapping and all(_find_header(record, header) is not None for header in mapping):
            return index
        found = {match[0] for match in (_match_header(cell, wanted) for cell in record) if match}
        if len(found) >= 2:
            return index
        # A logger's channels (Time, CH1 (rpm), CH2 (uA)) are named by their units only.
        if len(found) + len(record) >= 3 and len(
                _columns_of([str(cell) for cell in record], None, wanted, "")) >= 2:
            return index
    for index, record in enumerate(records):
        if record:
            return index
    return 0


def _check_usable(
    source: str, headers: Sequence[str], columns: Mapping[str, _Column], wanted: Sequence[str],
    notes: Sequence[str] = (),
) -> None:
    if set(wanted) == set(ENVIRONMENT_FIELDS):
        needed_ok = ("time" in columns or "date" in columns) and any(
            name in columns for name in ("rh", "temperature", "pressure"))
        needed = "a time column and at least one of humidity, temperature, pressure"
    else:
        needed_ok = "speed" in columns and "current" in columns
        needed = "a speed column and a current column"
    if not needed_ok:
        shown = ", ".join(_quoted(header) for header in headers if str(header).strip())
        found = ", ".join(f"{name} <- {_quoted(column.header)}"
                          for name, column in columns.items())
        raise InputError(
            f"{source}: no usable columns: it needs {needed}. Its header is "
            f"{shown or '(empty)'}" + (f"; recognised: {found}" if found else "")
            + ". Rename the headers (e.g. 'speed [rpm]', 'current [uA]') or say which column "
            "is which with --column FIELD=HEADER (e.g. --column speed=CH1; 'column for "
            "speed' on the Readings page)"
            + "".join(f". {note.removeprefix(source + ': ')}" for note in notes
                      if "could each be" in note)
        )


