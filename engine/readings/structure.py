"""File structure: which rows of a table are readings and which are not.

Loggers, meters and spreadsheets put other rows among the readings: empty lines and lines of
separators only, the header again where two logs were joined (sometimes with the columns in
another order, or a units row under it), and summary lines at the end (``Average``, ``Max``).
These rows are recognised here, skipped, and said; every other row is a reading and comes out.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.errors import InputError
from engine.readings.headers import (
    _columns_of,
    _looks_like_units_row,
    _match_header,
    _units_row_cells,
)
from engine.readings.options import _NUMERIC_FIELDS, ReadOptions, _Column

#: First cell of a summary line at the end of a file (case ignored), followed by nothing,
#: a space, a colon, '=' or a bracket.
SUMMARY_WORDS = (
    "average", "avg", "mean", "max", "maximum", "min", "minimum", "std", "stdev", "std dev",
    "std. dev.", "standard deviation", "sd", "sum", "total", "count", "median", "range",
)
_SUMMARY = re.compile(
    r"^(?:" + "|".join(re.escape(word).replace(r"\ ", r"\s*") for word in
                       sorted(SUMMARY_WORDS, key=len, reverse=True)) + r")(?=$|[\s:=(\[])",
    re.IGNORECASE)
#: Most rows at the end of a file examined as summary lines.
SUMMARY_TAIL = 20
#: Most rows examined as a repeated header (the rest are readings with text in them).
MOST_HEADER_CANDIDATES = 1_000
_NUMBER_START = r"^\s*[+\-\u2212]?[\d.,]"


@dataclass
class Layout:
    """The readings of a table after the rows that are not readings are taken out.

    Attributes
    ----------
    data : dict of str to pandas.Series
        Field -> cells of the readings, index 0..n-1.
    lines : numpy.ndarray of int
        The line (or sheet row) of each reading.
    decisions : list of str
        What was recognised and skipped.
    messages : list of str
        Other notes (empty lines skipped).
    """

    data: dict[str, pd.Series]
    lines: np.ndarray
    decisions: list[str]
    messages: list[str]


def _line_list(lines: np.ndarray, most: int = 5) -> str:
    shown = ", ".join(str(int(line)) for line in lines[:most])
    return shown + (", ..." if len(lines) > most else "")


def _cells(row: pd.Series) -> list[str]:
    return ["" if pd.isna(value) else str(value).strip() for value in row]


def _header_like(series: pd.Series, wanted: Sequence[str]) -> np.ndarray:
    """Cells of a column that read as a column header (``speed [rpm]``), not as a value."""
    if pd.api.types.is_numeric_dtype(series.dtype):
        return np.zeros(len(series), dtype=bool)
    codes, uniques = pd.factorize(series.astype("str"))
    if len(uniques) == 0:
        return np.zeros(len(series), dtype=bool)
    texts = pd.Series(uniques, dtype="str")
    possible = ~texts.str.match(_NUMBER_START).to_numpy(dtype=bool)
    like = np.zeros(len(uniques), dtype=bool)
    for position in np.flatnonzero(possible):
        like[position] = _match_header(str(texts.iloc[position]), wanted) is not None
    return np.where(codes >= 0, like[np.maximum(codes, 0)], False)


def layout(
    body: pd.DataFrame,
    lines: np.ndarray,
    columns: Mapping[str, _Column],
    unit_cells: Mapping[str, str],
    options: ReadOptions,
    wanted: Sequence[str],
    source: str,
    what: str = "line",
) -> Layout:
    """Take out empty rows, repeated headers and summary lines; follow a reordered header.

    Parameters
    ----------
    body : pandas.DataFrame
        The rows below the header (and its units row), columns labelled by position.
    lines : numpy.ndarray of int
        The line (or sheet row) of each row of ``body``.
    columns : mapping of str to _Column
        The fields of the header at the top.
    unit_cells : mapping of str to str
        The units row under the top header, field -> unit.
    options : ReadOptions
        The caller's options (its column mapping applies to every header).
    wanted : sequence of str
        The fields looked for.
    source : str
        The file's name, for messages.
    what : str
        How a row is named in messages: ``"line"`` (CSV) or ``"row"`` (a sheet).

    Returns
    -------
    Layout
        The readings' cells per field, their lines, and what was decided.
    """
    body = body.reset_index(drop=True)
    length = len(body)
    decisions: list[str] = []
    messages: list[str] = []
    blank = body.isna().all(axis=1).to_numpy(dtype=bool) if length else np.zeros(0, bool)

    header_rows = np.zeros(length, dtype=bool)
    units_rows = np.zeros(length, dtype=bool)
    segments: list[tuple[int, dict[str, _Column], dict[str, str]]] = [
        (0, dict(columns), dict(unit_cells))]
    candidates = np.zeros(length, dtype=bool)
    for field_name in ("speed", "current"):
        if field_name in columns and columns[field_name].position in body.columns:
            candidates |= _header_like(body[columns[field_name].position], wanted)
    top = {str(column.header).strip().casefold() for column in columns.values()}
    for index in np.flatnonzero(candidates)[:MOST_HEADER_CANDIDATES]:
        cells = _cells(body.iloc[index])
        found = {match[0] for match in (_match_header(cell, wanted) for cell in cells) if match}
        same = sum(1 for cell in cells if cell and cell.casefold() in top)
        if same < 2 and not ({"speed", "current"} <= found and len(found) >= 3):
            continue
        try:
            new_columns = _columns_of(cells, options.mapping, wanted, source)
        except InputError:
            new_columns = _columns_of(cells, None, wanted, source)
        header_rows[index] = True
        new_units: dict[str, str] = {}
        if index + 1 < length and _looks_like_units_row(_cells(body.iloc[index + 1]),
                                                        new_columns):
            units_rows[index + 1] = True
            new_units = _units_row_cells(_cells(body.iloc[index + 1]), new_columns)
        segments.append((index + 1 + int(units_rows[index + 1] if index + 1 < length else 0),
                         new_columns, new_units))
    if header_rows.any():
        moved = [
            start for start, seg_columns, _units in segments[1:]
            if {name: c.position for name, c in seg_columns.items()}
            != {name: c.position for name, c in columns.items()}]
        repeated = lines[header_rows]
        decisions.append(
            f"{source}: the header is repeated on {what} {_line_list(repeated)} (logs joined "
            "one after the other): not a reading"
            + ("; below it the columns come in another order, and each part is read by its "
               "own header" if moved else ""))

    reading = ~(blank | header_rows | units_rows)
    summary = np.zeros(length, dtype=bool)
    for index in np.flatnonzero(reading)[::-1][:SUMMARY_TAIL]:
        cells = [cell for cell in _cells(body.iloc[index]) if cell]
        if cells and _SUMMARY.match(cells[0]):
            summary[index] = True
        else:
            break
    if summary.any():
        words = sorted({_SUMMARY.match(cell).group(0) for cell in (
            next(c for c in _cells(body.iloc[i]) if c) for i in np.flatnonzero(summary))})
        decisions.append(
            f"{source}: {what} {_line_list(lines[summary])} at the end "
            + ("is a summary line (" if summary.sum() == 1 else "are summary lines (")
            + ", ".join(f"'{word}'" for word in words) + "), not readings: skipped")
    reading &= ~summary
    if blank.any():
        messages.append(
            f"{source}: skipped {int(blank.sum())} empty {what}(s) (blank or separators only): "
            f"{what} {_line_list(lines[blank])}")

    data = _gather(body, segments, columns, unit_cells)
    if reading.all():  # the usual clean file: no copy
        return Layout(data, np.asarray(lines), decisions, messages)
    keep = np.flatnonzero(reading)
    data = {name: series.iloc[keep].reset_index(drop=True) for name, series in data.items()}
    return Layout(data, np.asarray(lines)[keep], decisions, messages)


def _unit_of(column: _Column, unit_cells: Mapping[str, str], name: str) -> str | None:
    return column.unit or unit_cells.get(name)


def _gather(
    body: pd.DataFrame,
    segments: list[tuple[int, dict[str, _Column], dict[str, str]]],
    columns: Mapping[str, _Column],
    unit_cells: Mapping[str, str],
) -> dict[str, pd.Series]:
    """Cells per field, each part of the file read by the header above it."""
    def cells_at(position: int) -> pd.Series:
        if position in body.columns:
            return body[position]
        return pd.Series(np.nan, index=body.index, dtype=object)

    same = all(
        {n: (c.position, _unit_of(c, units, n)) for n, c in seg_columns.items() if n in columns}
        == {n: (c.position, _unit_of(c, unit_cells, n)) for n, c in columns.items()
            if n in seg_columns}
        and set(columns) <= set(seg_columns)
        for _start, seg_columns, units in segments[1:])
    if same:
        return {name: cells_at(column.position) for name, column in columns.items()}
    data: dict[str, pd.Series] = {}
    bounds = [start for start, _c, _u in segments] + [len(body)]
    for name, column in columns.items():
        pieces = []
        first_unit = _unit_of(column, unit_cells, name)
        for (start, seg_columns, units), end in zip(segments, bounds[1:], strict=True):
            part = body.iloc[start:end]
            if name not in seg_columns:
                pieces.append(pd.Series(np.nan, index=part.index, dtype=object))
                continue
            piece = cells_at(seg_columns[name].position).iloc[start:end]
            unit = _unit_of(seg_columns[name], units, name)
            if name in _NUMERIC_FIELDS and unit and unit != first_unit:
                # This part's header gives another unit: write it into its cells, which are
                # then converted each on its own like cells that carry a unit.
                text = piece.astype("str")
                piece = (text + " " + unit).where(piece.notna())
            pieces.append(piece.astype(object))
        # Rows above the first part (none) and header rows inside keep their place.
        data[name] = pd.concat(pieces).reindex(body.index)
    return data
