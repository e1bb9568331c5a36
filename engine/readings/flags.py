"""Flags: what is wrong with a reading, kept as text codes of engine.columns.FLAG_CODES."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from engine.columns import (
    FLAG_CODES,
)
from engine.readings.options import PRESSURE_RANGE_PA, RH_RANGE, TEMPERATURE_RANGE_K

_FLAG_BITS = {code: 1 << position for position, code in enumerate(FLAG_CODES)}
# --- Flags ----------------------------------------------------------------------------------
def flags_from_masks(masks: Mapping[str, np.ndarray], length: int) -> pd.Series:
    """Flags text per row from one boolean mask per flag code.

    Parameters
    ----------
    masks : mapping of str to array of bool
        Flag code (a key of :data:`engine.columns.FLAG_CODES`) -> rows that carry it.
    length : int
        Number of rows.

    Returns
    -------
    pandas.Series of str
        Semicolon-joined codes in the order of ``FLAG_CODES``; ``""`` for a clean row.
    """
    bits = np.zeros(length, dtype=np.int64)
    for code, mask in masks.items():
        bits |= np.asarray(mask, dtype=bool).astype(np.int64) * _FLAG_BITS[code]
    return _bits_to_flags(bits)


def _bits_to_flags(bits: np.ndarray, index: pd.Index | None = None) -> pd.Series:
    # One string per distinct combination of flags, then a vectorised take.
    codes, combinations = pd.factorize(bits)
    texts = pd.Series(
        [";".join(code for code, bit in _FLAG_BITS.items() if value & bit)
         for value in combinations] or [""],
        dtype="str",
    )
    flags = texts.take(codes)
    flags.index = index if index is not None else pd.RangeIndex(len(flags))
    return flags


def _flags_to_bits(flags: pd.Series) -> np.ndarray:
    codes, texts = pd.factorize(flags.fillna("").astype(str))
    values = []
    for text in texts:
        value = 0
        for code in filter(None, text.split(";")):
            if code not in _FLAG_BITS:
                raise ValueError(f"unknown flag code {code!r}")
            value |= _FLAG_BITS[code]
        values.append(value)
    return np.asarray(values or [0], dtype=np.int64)[codes]


def add_flags(flags: pd.Series, masks: Mapping[str, np.ndarray]) -> pd.Series:
    """Add flag codes to an existing flags column, keeping the order of ``FLAG_CODES``.

    Parameters
    ----------
    flags : pandas.Series of str
        Existing flags (semicolon-joined codes, ``""`` when clean).
    masks : mapping of str to array of bool
        Flag code -> rows that get it.

    Returns
    -------
    pandas.Series of str
        The combined flags, with the index of ``flags``.
    """
    bits = _flags_to_bits(flags)
    for code, mask in masks.items():
        bits |= np.asarray(mask, dtype=bool).astype(np.int64) * _FLAG_BITS[code]
    return _bits_to_flags(bits, index=flags.index)


def _same_time(machine: pd.Series, key: pd.Series, *values: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray]:
    """Rows repeating an earlier row's machine, time and values; and its machine and time."""
    machine_codes, _machines = pd.factorize(machine)
    key_codes, key_values = pd.factorize(key)
    pair = pd.Series(machine_codes.astype(np.int64) * (len(key_values) + 1) + key_codes)
    present = key_codes >= 0
    same_time = pair.duplicated(keep="first").to_numpy() & present
    same_values = np.zeros(len(pair), dtype=bool)
    if values and same_time.any():
        # Only rows whose machine and time recur can repeat a row: compare their values.
        shared = np.flatnonzero(pair.duplicated(keep=False).to_numpy() & present)
        combined = pd.DataFrame({"pair": pair.to_numpy()[shared]})
        for position, column in enumerate(values):
            part = np.asarray(column, dtype=float)[shared]
            # NaN compares equal here: two empty speeds at one time are the same row twice.
            combined[f"value{position}"] = np.where(np.isnan(part), np.inf, part)
        same_values[shared] = combined.duplicated(keep="first").to_numpy()
    return same_values, same_time


def _range_masks(rh: np.ndarray, temperature_k: np.ndarray, pressure_pa: np.ndarray
                 ) -> dict[str, np.ndarray]:
    # A small slack keeps the bounds themselves (100 %, -40 degC) inside after float arithmetic.
    slack = 1e-9
    return {
        "rh_out_of_range": (rh < RH_RANGE[0] - slack) | (rh > RH_RANGE[1] + slack),
        "temperature_out_of_range": ((temperature_k < TEMPERATURE_RANGE_K[0] - 1e-6)
                                     | (temperature_k > TEMPERATURE_RANGE_K[1] + 1e-6)),
        "pressure_out_of_range": ((pressure_pa < PRESSURE_RANGE_PA[0] - 1e-6)
                                  | (pressure_pa > PRESSURE_RANGE_PA[1] + 1e-6)),
    }


def _row_list(mask: np.ndarray, lines: np.ndarray | None = None, most: int = 5) -> str:
    """The first rows of a mask as the file counts them (its lines or sheet rows)."""
    rows = np.flatnonzero(mask)
    numbers = (rows + 1) if lines is None or len(lines) != len(mask) else np.asarray(lines)[rows]
    shown = ", ".join(str(int(number)) for number in numbers[:most])
    return shown + (", ..." if len(rows) > most else "")


def _flag_summary(masks: Mapping[str, np.ndarray], length: int, source: str,
                  lines: np.ndarray | None = None, what: str = "line") -> list[str]:
    flagged = np.zeros(length, dtype=bool)
    for mask in masks.values():
        flagged |= mask
    if not flagged.any():
        return [f"{source}: {length} rows, none flagged"]
    parts = [
        f"{code} {int(mask.sum())} ({what}s {_row_list(mask, lines)})"
        for code, mask in ((code, masks[code]) for code in FLAG_CODES if code in masks)
        if mask.any()
    ]
    return [
        f"{source}: {int(flagged.sum())} of {length} rows flagged and left out of fits (they "
        f"are kept and shown): " + "; ".join(parts)
    ]
