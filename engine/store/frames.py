"""Frames to the arrays a store writes, and stored arrays back to frames.

Shared by every back end and by the lab bundle: checks and converts a frame of readings or an
environment log (:func:`_prepare`), names of imports, filters, and the time dtypes that make a
frame read back as it went in.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterable, Sequence
from datetime import UTC, datetime

import numpy as np
import pandas as pd

from engine.columns import MACHINE, READING_COLUMNS, ROW, SESSION, TIME
from engine.errors import InputError
from engine.store.schema import _NAT_NS

#: Longest import name or source name accepted.
MAX_NAME_LENGTH = 200
# pandas' own text dtype for text read back ("str" in pandas 3, object before).
_TEXT_DTYPE = pd.Series(["text"]).dtype


def _now_text() -> str:
    return datetime.now(UTC).isoformat(timespec="microseconds")


def _import_names(name: object, source: object) -> tuple[str, str]:
    source = "" if source is None else str(source).strip()
    name = "" if name is None else str(name).strip()
    name = name or source or "readings"
    for what, text in (("name", name), ("source", source)):
        if len(text) > MAX_NAME_LENGTH:
            raise InputError(f"import {text[:40]!r}...: the {what} is longer than "
                             f"{MAX_NAME_LENGTH} characters; give a shorter one")
    return name, source

class _Prepared:
    """A frame checked and converted to the arrays that are written (one per SQL column)."""

    def __init__(self, arrays: list[np.ndarray], time_ns: np.ndarray, time_dtype: str,
                 machines: str, sessions: str) -> None:
        self.arrays = arrays
        self.time_ns = time_ns
        self.time_dtype = time_dtype
        self.machines = machines
        self.sessions = sessions

    @property
    def rows(self) -> int:
        return len(self.time_ns)

    def chunks(self, import_id: int,
               chunk_rows: int) -> Iterable[Iterable[tuple[object, ...]]]:
        """Rows to insert, ``chunk_rows`` at a time, each led by ``import_id``."""
        missing_time = self.time_ns == _NAT_NS
        for start in range(0, self.rows, chunk_rows):
            stop = min(start + chunk_rows, self.rows)
            times = np.where(missing_time[start:stop], None, self.time_ns[start:stop])
            columns = [times.tolist() if array is self.time_ns else array[start:stop].tolist()
                       for array in self.arrays]
            yield zip(itertools.repeat(import_id, stop - start), *columns, strict=False)

    def frame(self, columns: Sequence[str], floats: Sequence[str]) -> pd.DataFrame:
        """The frame a store reads back from these arrays: ``Store.readings`` of the import
        without ``import_id`` (the derived cache derives it at import, without reading back).

        ``columns`` and ``floats`` are those given to :func:`_prepare`.
        """
        data: dict[str, object] = {}
        for column, values in zip(columns, self.arrays, strict=True):
            if column == TIME:
                data[column] = _restore_time(values, {self.time_dtype})
            elif column in floats or column == ROW:
                data[column] = np.array(values)  # a copy: never a view of the caller's frame
            else:
                data[column] = pd.Series(values, dtype=object).astype(_TEXT_DTYPE)
        return pd.DataFrame(data, columns=list(columns))


def _position_text(frame: pd.DataFrame, position: int, where: str) -> str:
    """Where a bad value is, for messages: the reading's number and its source row."""
    text = f"{where}: reading {position + 1}"
    if ROW in frame.columns:
        row = frame[ROW].iloc[position]
        if isinstance(row, (int, np.integer)) or (isinstance(row, float) and row == row):
            text += f" (row {int(row)} of the file)"
    return text


def _number_column(frame: pd.DataFrame, column: str, where: str) -> np.ndarray:
    series = frame[column]
    if series.dtype == np.float64:
        return series.to_numpy()
    if pd.api.types.is_bool_dtype(series.dtype):
        raise InputError(f"{where}: column '{column}' holds true/false values; it must hold "
                         "numbers")
    numbers = pd.to_numeric(series, errors="coerce")
    given = series.notna()
    if series.dtype == object or pd.api.types.is_string_dtype(series.dtype):
        given &= series.astype(str).str.strip() != ""
    bad = np.flatnonzero((given & numbers.isna()).to_numpy())
    if len(bad):
        position = int(bad[0])
        raise InputError(f"{_position_text(frame, position, where)}, column '{column}': "
                         f"{series.iloc[position]!r} is not a number; correct it in the file "
                         "and import it again")
    return numbers.to_numpy(dtype=np.float64, na_value=np.nan)


def _row_column(frame: pd.DataFrame, where: str) -> np.ndarray:
    series = frame[ROW]
    if pd.api.types.is_integer_dtype(series.dtype) and series.notna().all():
        return series.to_numpy(dtype=np.int64)
    numbers = pd.to_numeric(series, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    whole = np.isfinite(numbers) & (numbers == np.round(numbers)) & (np.abs(numbers) < 2**53)
    bad = np.flatnonzero(~whole)
    if len(bad):
        raise InputError(f"{where}: reading {int(bad[0]) + 1}, column '{ROW}': "
                         f"{series.iloc[int(bad[0])]!r} is not a whole row number")
    return numbers.astype(np.int64)


def _time_column(series: pd.Series, where: str) -> tuple[np.ndarray, str]:
    """Times as int64 ns (NaT as the int64 minimum) and the dtype text that restores them."""
    if not pd.api.types.is_datetime64_any_dtype(series.dtype):
        if series.isna().all():
            series = pd.Series(pd.NaT, index=series.index, dtype="datetime64[ns]")
        else:
            raise InputError(f"{where}: column '{TIME}' must hold dates and times "
                             f"(got {series.dtype}); read the file with the readings import")
    dtype = series.dtype
    dtype_text = str(dtype)
    try:
        restorable = pd.api.types.pandas_dtype(dtype_text) == dtype
    except (TypeError, ValueError):
        restorable = False
    index = pd.DatetimeIndex(series)
    if not restorable:  # a time zone without a name: keep the instants, in UTC
        index = index.tz_convert("UTC")
        dtype_text = str(index.dtype)
    try:
        nanoseconds = index.as_unit("ns").asi8
    except (OverflowError, ValueError, pd.errors.OutOfBoundsDatetime):
        raise InputError(f"{where}: column '{TIME}' holds a date outside the years 1677 to "
                         "2262; correct the dates in the file") from None
    return np.asarray(nanoseconds, dtype=np.int64), dtype_text


def _distinct_text(array: np.ndarray) -> str:
    return ", ".join(sorted(pd.unique(array).tolist()))


def _prepare(frame: pd.DataFrame, columns: Sequence[str], floats: Sequence[str],
             where: str) -> _Prepared:
    if not isinstance(frame, pd.DataFrame):
        raise InputError(f"{where}: readings must be a table (DataFrame), got "
                         f"{type(frame).__name__}")
    missing = [column for column in columns if column not in frame.columns]
    if missing:
        raise InputError(f"{where}: the column(s) {', '.join(missing)} are missing; the "
                         f"store needs {', '.join(columns)}")
    if frame.columns.duplicated().any():
        raise InputError(f"{where}: a column name is used twice")
    if columns is READING_COLUMNS and len(frame) == 0:
        raise InputError(f"{where}: there are no readings to import")
    arrays: list[np.ndarray] = []
    time_ns = np.empty(0, dtype=np.int64)
    time_dtype = "datetime64[ns]"
    texts: dict[str, np.ndarray] = {}
    for column in columns:
        if column == ROW:
            arrays.append(_row_column(frame, where))
        elif column == TIME:
            time_ns, time_dtype = _time_column(frame[column], where)
            arrays.append(time_ns)
        elif column in floats:
            arrays.append(_number_column(frame, column, where))
        else:
            series = frame[column]
            text = series.astype(object).where(series.notna(), "")
            if pd.api.types.infer_dtype(text, skipna=False) not in ("string", "empty"):
                text = text.astype(str).astype(object)  # numbers or other objects as text
            texts[column] = text.to_numpy(dtype=object)
            arrays.append(texts[column])
    machines = _distinct_text(texts[MACHINE]) if MACHINE in texts else ""
    sessions = _distinct_text(texts[SESSION]) if SESSION in texts else ""
    return _Prepared(arrays, time_ns, time_dtype, machines, sessions)


def _texts(values: Iterable[str] | str | None) -> list[str] | None:
    if values is None:
        return None
    if isinstance(values, str):
        return [values]
    return list(dict.fromkeys(str(value) for value in values))


def _ids(values: Iterable[int] | int | None) -> list[int] | None:
    if values is None:
        return None
    if isinstance(values, (int, np.integer)):
        return [int(values)]
    try:
        return list(dict.fromkeys(int(value) for value in values))
    except (TypeError, ValueError):
        raise InputError("import ids must be whole numbers") from None


def _time_dtype_for(dtype_texts: set[str]) -> pd.api.extensions.ExtensionDtype | np.dtype:
    """The dtype of a time column that gathers imports of the given time dtypes."""
    dtypes = [pd.api.types.pandas_dtype(text) for text in sorted(dtype_texts)]
    if len(dtypes) == 1:
        return dtypes[0]
    if not dtypes:
        return np.dtype("datetime64[ns]")
    if any(isinstance(dtype, pd.DatetimeTZDtype) for dtype in dtypes):
        return pd.DatetimeTZDtype("ns", "UTC")
    return np.dtype("datetime64[ns]")


def _restore_time(nanoseconds: np.ndarray, dtype_texts: set[str]) -> pd.DatetimeIndex:
    dtype = _time_dtype_for(dtype_texts)
    index = pd.DatetimeIndex(nanoseconds.view("M8[ns]"))
    if isinstance(dtype, pd.DatetimeTZDtype):
        return index.tz_localize("UTC").tz_convert(dtype.tz).as_unit(dtype.unit)
    return index.as_unit(np.datetime_data(dtype)[0])



def _machine_text(machine) -> str:
    """A machine as the machines-file text a store keeps, checked to read back as itself."""
    from engine.machines import dump_machines, parse_machines_text

    text = dump_machines([machine])
    restored = parse_machines_text(text, f"machine '{machine.id}'").machines
    if len(restored) != 1 or restored[0].id != machine.id:
        raise InputError(f"machine '{machine.id}': it cannot be written as a machines file")
    return text


def _prepare_import(frame: pd.DataFrame, name: object, source: object,
                    environment: pd.DataFrame | None, demo: bool
                    ) -> tuple[_Prepared, _Prepared | None, dict[str, object], str]:
    """An import checked and converted before any write: the readings, the environment log,
    the import's row (name, source, time stored, demo) and the name its messages use."""
    from engine.columns import ENVIRONMENT_COLUMNS
    from engine.store.schema import _ENVIRONMENT_FLOATS, _READING_FLOATS

    name, source = _import_names(name, source)
    where = source or name  # messages name the file the user knows
    prepared = _prepare(frame, READING_COLUMNS, _READING_FLOATS, where)
    prepared_environment = (None if environment is None else
                            _prepare(environment, ENVIRONMENT_COLUMNS, _ENVIRONMENT_FLOATS,
                                     f"{where}, environment log"))
    meta = {"name": name, "source": source, "created_at": _now_text(), "is_demo": demo}
    return prepared, prepared_environment, meta, where


#: Columns of :meth:`Store.imports` and their kinds.
_IMPORT_COLUMNS = {"id": "int", "name": "text", "source": "text", "created_at": "text",
                   "is_demo": "bool", "rows": "int", "machines": "text", "sessions": "text",
                   "environment_rows": "int"}


def _imports_frame(rows: Sequence[Sequence[object]], columns: Sequence[str]) -> pd.DataFrame:
    """The frame of :meth:`Store.imports` from a store's rows of ``columns`` (other columns
    than :data:`_IMPORT_COLUMNS` are text)."""
    frame = pd.DataFrame(rows, columns=list(columns))
    for column in columns:
        kind = _IMPORT_COLUMNS.get(column, "text")
        frame[column] = (frame[column].astype(np.int64) if kind == "int" else
                         frame[column].astype(bool) if kind == "bool" else
                         frame[column].astype(object).astype(_TEXT_DTYPE))
    return frame
