"""Sessions: every reading belongs to a named session, so that two imports never merge silently.

A file without a session column (or with empty session cells) gets a name at import: the one the
user gives, by default the dates the readings span or the import's name.
"""

from __future__ import annotations

import pandas as pd

from engine import columns as col
from engine.errors import InputError

#: Longest session name accepted.
MAX_SESSION_NAME = 120


def unnamed_readings(frame: pd.DataFrame) -> int:
    """How many readings have no session name (empty or missing)."""
    if col.SESSION not in frame:
        return len(frame)
    names = frame[col.SESSION]
    return int((names.isna() | (names.astype("str").str.strip() == "")).sum())


def default_session_name(frame: pd.DataFrame, fallback: str) -> str:
    """A name for the unnamed readings of a file: the day (or days) they span, else ``fallback``.

    Parameters
    ----------
    frame : pandas.DataFrame
        Readings (columns of :data:`engine.columns.READING_COLUMNS`).
    fallback : str
        The import's name, used when the readings carry no dates.

    Returns
    -------
    str
        ``"2026-03-14"``, ``"2026-03-14 to 2026-03-16"`` or ``fallback``.
    """
    times = pd.to_datetime(frame[col.TIME], errors="coerce") if col.TIME in frame else None
    if times is None or times.isna().all():
        return fallback
    first, last = times.min(), times.max()
    first_day, last_day = f"{first:%Y-%m-%d}", f"{last:%Y-%m-%d}"
    return first_day if first_day == last_day else f"{first_day} to {last_day}"


def name_sessions(frame: pd.DataFrame, session: str) -> pd.DataFrame:
    """The readings with ``session`` given to every reading that has no session name.

    Parameters
    ----------
    frame : pandas.DataFrame
        Readings.
    session : str
        The name, 1 to :data:`MAX_SESSION_NAME` characters.

    Returns
    -------
    pandas.DataFrame
        A copy; readings that had a session keep theirs.

    Raises
    ------
    InputError
        When the name is empty or too long.
    """
    name = str(session).strip()
    if not name:
        raise InputError("give the session a name, e.g. 'before restoration' or the date")
    if len(name) > MAX_SESSION_NAME:
        raise InputError(f"a session name is at most {MAX_SESSION_NAME} characters")
    out = frame.copy()
    if col.SESSION not in out:
        out[col.SESSION] = name
        return out
    names = out[col.SESSION]
    unnamed = names.isna() | (names.astype("str").str.strip() == "")
    out[col.SESSION] = names.where(~unnamed, name)
    return out
