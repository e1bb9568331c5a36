"""The Arrow reading of plain CSV files gives what the C parser gives, or leaves the file to it.

:func:`engine.readings.formats._arrow_read_csv` is a faster way to the same raw table. Every
file here is read twice, once as it comes and once with the Arrow path switched off, and the
two results must be equal: the same frame, cell for cell, the same messages, decisions and
file format, or the same refusal. The law checked: how a file is parsed never changes what
the reader finds in it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from engine.errors import InputError
from engine.readings import ReadOptions, formats, read_environment, read_readings

DATA = Path(__file__).parent / "data" / "readings"


def _result(reader, source, options, name):
    try:
        result = reader(source, options, name=name)
    except InputError as error:
        return ("refused", str(error))
    return result


def _both(monkeypatch, reader, source, options=None, name="file.csv"):
    taken = []
    arrow = formats._arrow_read_csv

    def spy(*args, **kwargs):
        frame = arrow(*args, **kwargs)
        taken.append(frame is not None)
        return frame

    monkeypatch.setattr(formats, "_arrow_read_csv", spy)
    fast = _result(reader, source, options, name)
    monkeypatch.setattr(formats, "_arrow_read_csv", lambda *args, **kwargs: None)
    slow = _result(reader, source, options, name)
    monkeypatch.setattr(formats, "_arrow_read_csv", arrow)
    return fast, slow, any(taken)


def _assert_same(fast, slow):
    if isinstance(slow, tuple) or isinstance(fast, tuple):
        assert fast == slow
        return
    pd.testing.assert_frame_equal(fast.frame, slow.frame, check_exact=True)
    assert fast.messages == slow.messages
    assert fast.decisions == slow.decisions
    assert fast.format == slow.format
    assert fast.mapping == slow.mapping
    assert fast.units == slow.units
    np.testing.assert_array_equal(fast.lines, slow.lines)


@pytest.mark.parametrize("path", sorted(DATA.glob("*.csv")), ids=lambda path: path.name)
def test_every_sample_file_reads_the_same_either_way(monkeypatch, path):
    reader = read_environment if "environment" in path.name or path.name.startswith(
        "log_") else read_readings
    options = ReadOptions(machine="m1")
    fast, slow, _taken = _both(monkeypatch, reader, path, options, path.name)
    _assert_same(fast, slow)


def test_a_plain_file_is_read_by_arrow(monkeypatch):
    fast, slow, taken = _both(monkeypatch, read_readings, DATA / "canonical.csv")
    assert taken
    _assert_same(fast, slow)


HEADER = b"machine,session,time,speed [rpm],current [uA],rh [%],note\n"
CASES = {
    "plain": HEADER + b"d1,s,2026-03-02T08:00:00+01:00,300,5.5,40,ok\n"
             b"d1,s,2026-03-02T08:00:01+01:00,301,5.25,41,\n",
    "quoted numbers": HEADER + b'd1,s,2026-03-02T08:00:00,"300","5.5",40,x\n',
    "spaces around numbers": HEADER + b"d1,s,2026-03-02T08:00:00, 300 ,5.5,40,x\n"
                             b"d1,s,2026-03-02T08:00:01,301,5.5,40,x\n",
    "nan and inf cells": HEADER + b"d1,s,2026-03-02T08:00:00,nan,inf,40,x\n"
                         b"d1,s,2026-03-02T08:00:01,301,-Infinity,NaN,x\n",
    "truth values": HEADER + b"d1,s,2026-03-02T08:00:00,300,5,True,x\n"
                    b"d1,s,2026-03-02T08:00:01,300,5,False,x\n",
    "text among numbers": HEADER + b"d1,s,2026-03-02T08:00:00,300,OVL,40,x\n"
                          b"d1,s,2026-03-02T08:00:01,300,12.5 uA,40,x\n",
    "numbers as labels": HEADER + b"007,1,2026-03-02T08:00:00,300,5,40,1.5\n"
                         b"008,2,2026-03-02T08:00:01,300,5,40,2\n",
    "empty columns": HEADER + b"d1,,2026-03-02T08:00:00,300,5,,\n"
                     b"d1,,2026-03-02T08:00:01,300,5,,\n",
    "blank line": HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x\n\n"
                  b"d1,s,2026-03-02T08:00:01,300,5,40,x\n",
    "blank lines at the end": HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x\n\n\n",
    "header only": HEADER,
    "header and blank lines": HEADER + b"\n\n",
    "no line feed at the end": HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x",
    "line ends of both kinds": HEADER.replace(b"\n", b"\r\n")
                               + b"d1,s,2026-03-02T08:00:00,300,5,40,x\r\n"
                               b"d1,s,2026-03-02T08:00:01,300,5,40,x\n",
    "carriage returns only": HEADER.replace(b"\n", b"\r")
                             + b"d1,s,2026-03-02T08:00:00,300,5,40,x\r",
    "quoted carriage return": HEADER + b'd1,s,2026-03-02T08:00:00,300,5,40,"a\rb"\n',
    "separators only": HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x\n,,,,,,\n"
                       b"d1,s,2026-03-02T08:00:01,300,5,40,x\n",
    "short row": HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x\nd1,s,2026-03-02T08:00:01,300\n",
    "long row": HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x,extra\n",
    "quoted line break": HEADER + b'd1,s,2026-03-02T08:00:00,300,5,40,"two\nlines"\n'
                         b"d1,s,2026-03-02T08:00:01,300,5,40,x\n",
    "quote never closed": HEADER + b'd1,s,2026-03-02T08:00:00,300,5,40,"open\n'
                          b"d1,s,2026-03-02T08:00:01,300,5,40,x\n",
    "formula text": HEADER + b"=cmd,s,2026-03-02T08:00:00,300,5,40,@sum\n",
    "repeated header": HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x\n" + HEADER
                       + b"d1,s,2026-03-02T08:00:01,300,5,40,x\n",
    "summary line": HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x\nAverage,,,300,5,40,\n",
    "notes above the header": b"logger 7\nexported 2026-03-02\n" + HEADER
                              + b"d1,s,2026-03-02T08:00:00,300,5,40,x\n",
    "quote above the header": b'"logger, 7"\n' + HEADER
                              + b"d1,s,2026-03-02T08:00:00,300,5,40,x\n",
    "byte-order mark": b"\xef\xbb\xbf" + HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x\n",
    "latin-1 further down": HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x\n" * 400
                            + b"d1,s,2026-03-02T08:00:01,300,5,40,caf\xe9\n",
    "semicolons and decimal commas": b"machine;time;speed [rpm];current [uA]\n"
                                     b"d1;2026-03-02 08:00:00;300,5;5,25\n",
    "tabs": b"machine\ttime\tspeed [rpm]\tcurrent [uA]\nd1\t2026-03-02 08:00:00\t300.5\t5.25\n",
    "elapsed seconds": b"machine,time [s],speed [rpm],current [uA]\nd1,0,300,5\nd1,1.5,300,5\n",
    "huge and tiny numbers": HEADER + b"d1,s,2026-03-02T08:00:00,1e308,4.9e-324,1e400,x\n",
    "long integers": HEADER + b"d1,s,2026-03-02T08:00:00,123456789012345678901234,5,40,x\n",
    "mixed offsets": HEADER + b"d1,s,2026-03-02T08:00:00+01:00,300,5,40,x\n"
                     b"d1,s,2026-03-30T08:00:00+02:00,300,5,40,x\n",
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_awkward_files_read_the_same_either_way(monkeypatch, name):
    fast, slow, _taken = _both(monkeypatch, read_readings, CASES[name])
    _assert_same(fast, slow)


def test_too_many_rows_is_refused_either_way(monkeypatch):
    data = HEADER + b"d1,s,2026-03-02T08:00:00,300,5,40,x\n" * 50
    fast, slow, _taken = _both(monkeypatch, read_readings, data, ReadOptions(max_rows=20))
    assert isinstance(fast, tuple) and "more than 20 data rows" in fast[1]
    _assert_same(fast, slow)


def test_a_log_reads_the_same_either_way(monkeypatch):
    data = (b"time,rh [%],temperature [degC],pressure [hPa]\n"
            b"2026-03-02T07:59:00+01:00,55.2,21.68,985.0\n"
            b"2026-03-02T08:00:00+01:00,n/a,21.7,985\n")
    fast, slow, taken = _both(monkeypatch, read_environment, data)
    assert taken
    _assert_same(fast, slow)


TIMES = {
    "one offset": ["2026-03-02T08:00:00+01:00", None, "2026-03-02T08:00:01.25+01:00"],
    "negative half-hour offset": ["2026-03-02T08:00:00-05:30", "2026-03-02T09:00-05:30"],
    "zero offset": ["2026-03-02T08:00:00+00:00"],
    "Z": ["2026-03-02T08:00:00Z", "2026-03-02T08:00:01.5Z"],
    "naive": ["2026-03-02 08:00:00", "2026-03-02T08:00", "2026-03-02"],
    "two offsets": ["2026-03-29T01:00:00+01:00", "2026-03-29T03:00:00+02:00"],
    "with and without an offset": ["2026-03-02T08:00:00+01:00", "2026-03-02T08:00:00",
                                   "2026-03-02T09:00:00+01:00"],
    "Z and an offset": ["2026-03-02T08:00:00Z", "2026-03-02T08:00:00+00:00"],
    "impossible date": ["2026-02-30T08:00:00+01:00", "2026-03-02T08:00:00+01:00"],
    "leap second": ["2026-03-02T08:00:60+01:00"],
    "single digits": ["2026-3-2T8:00:00+01:00", "2026-03-02T08:00:00+01:00"],
    "nanoseconds": ["2026-03-02T08:00:00.123456789+01:00"],
    "compact offset": ["2026-03-02T08:00:00+0100", "2026-03-02T08:00:01+0100"],
    "hour-only offset": ["2026-03-02T08:00:00+01"],
    "space before the offset": ["2026-03-02 08:00:00 +01:00"],
    "before 1677": ["1600-01-01T00:00:00+01:00"],
}


@pytest.mark.parametrize("name", sorted(TIMES))
def test_iso_times_read_by_arrow_equal_pandas(monkeypatch, name):
    # Reference: pandas.to_datetime(format="ISO8601"), the reader's way before Arrow's.
    from engine.readings import times as times_module

    text = pd.Series(TIMES[name], dtype="str")
    fast = times_module._parse_iso(text, fast_messages := [], "t.csv")
    monkeypatch.setattr(times_module, "_iso_by_arrow", lambda text: None)
    slow = times_module._parse_iso(text, slow_messages := [], "t.csv")
    pd.testing.assert_series_equal(fast[0], slow[0], check_exact=True)
    assert fast[0].dtype == slow[0].dtype
    np.testing.assert_array_equal(fast[1], slow[1])
    assert fast_messages == slow_messages


def test_arrow_reads_the_usual_times():
    from engine.readings import times as times_module

    text = pd.Series(["2026-03-02T08:00:00+01:00", "2026-03-02T08:00:01+01:00"], dtype="str")
    assert times_module._iso_by_arrow(text) is not None
