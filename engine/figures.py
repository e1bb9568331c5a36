"""Figures: plotly charts shared by the Streamlit pages and the HTML report.

Every builder takes the frames that travel between engine modules, the readings with their
derived columns (:data:`engine.columns.READING_COLUMNS` + :data:`engine.columns.DERIVED_COLUMNS`,
SI units) and the findings per machine, and returns a :class:`plotly.graph_objects.Figure` in
display units (rpm, uA, nC, %, degC). Ceiling lines come from
:func:`engine.ceiling.machine_ceiling`; no physics is computed here.

Conventions shared by all charts:

- each machine keeps one colour (:func:`machine_colours`) on every chart;
- readings with flags are left out of the fits and drawn only with ``show_flagged=True``, in
  grey with x markers;
- a trace of more than :data:`WEBGL_THRESHOLD` points is drawn with WebGL (``Scattergl``);
- empty input gives a figure that says :data:`NO_READINGS` instead of raising;
- text from the user (labels, ids, sessions) is HTML-escaped before plotly sees it, because
  plotly reads a few HTML tags in its text.
"""

from __future__ import annotations

import html
import math
import weakref
from collections.abc import Iterable, Mapping, Sequence

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from engine import columns as col
from engine.air import REFERENCE_TEMPERATURE_K, pressure_for_relative_density
from engine.analysis import logistic_efficiency
from engine.carriers import Belt, Cylinder, Disc
from engine.ceiling import machine_ceiling
from engine.errors import InputError
from engine.machines import Machine
from engine.units import to_display

# colour-blind-safe qualitative palette
PALETTE: tuple[str, ...] = (
    # Yellow last: it is hard to see on a light background.
    "#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#000000", "#F0E442",
)
#: Colour of flagged readings.
FLAGGED_COLOUR = "#8C8C8C"
#: Traces with more points than this are drawn with WebGL.
WEBGL_THRESHOLD = 20_000
#: Most readings one trace draws; more are thinned to evenly spaced ones.
MAX_DRAWN_POINTS = 25_000
#: Most readings a whole chart is given by :func:`chart_sample` (all machines together).
MAX_CHART_POINTS = 40_000
#: Most readings of a session's charts (each reading carries several traces and its time).
MAX_SESSION_CHART_POINTS = 6_000
#: What an empty chart says.
NO_READINGS = "No readings to show"
#: Reference relative humidity of the humidity fit [%], unless told otherwise.
DEFAULT_REFERENCE_RH_PCT = 45.0

SPEED_AXIS = "Speed [rpm]"
CURRENT_AXIS = "Current [µA]"
EFFICIENCY_AXIS = "Efficiency [%]"
CHARGE_AXIS = "Charge per revolution [nC]"
RH_AXIS = "Relative humidity [%]"
TEMPERATURE_AXIS = "Temperature [°C]"
ELAPSED_AXIS = "Elapsed time [min]"

_NANO = 1e9  # coulomb to nanocoulomb (SI prefix)
_STRIP_POINTS_MAX = 2_000  # above this the charge chart shows the box only
_DISC_SECTORS_DRAWN = 12
_LINE_POINTS = 25


# --- small helpers ---------------------------------------------------------------------------

def machine_colours(machine_ids: Iterable[object]) -> dict[str, str]:
    """One colour per machine, stable for the sorted list of ids.

    Parameters
    ----------
    machine_ids : iterable of str
        Machine ids, in any order, repeats allowed.

    Returns
    -------
    dict of str to str
        Hex colour per id: the i-th id in sorted order takes ``PALETTE[i % 8]``, so the same
        set of machines has the same colours on every chart and every page.
    """
    ids = sorted({str(machine_id) for machine_id in machine_ids if not _missing(machine_id)})
    return {machine_id: PALETTE[number % len(PALETTE)] for number, machine_id in enumerate(ids)}


def _missing(value: object) -> bool:
    if value is None:
        return True
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _number(value: object) -> float:
    """A float from a findings cell; NaN for None, text or anything else."""
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return math.nan
    return number


def _interval(value: object) -> tuple[float, float]:
    """A (low, high) pair from a findings cell holding a 2-item list or tuple."""
    if isinstance(value, (list, tuple, np.ndarray)) and len(value) == 2:
        return _number(value[0]), _number(value[1])
    return math.nan, math.nan


def _escape(text: object) -> str:
    return html.escape(str(text), quote=False)


def _escape_array(values: np.ndarray) -> np.ndarray:
    """Text for hovers, escaped once per distinct value."""
    codes, uniques = pd.factorize(pd.Series(values).astype("str"))
    return np.array([_escape(text) for text in uniques] + [""], dtype=object)[codes]


def _escape_series(series: pd.Series) -> pd.Series:
    text = series.astype(object).where(series.notna(), "").astype(str)
    return (text.str.replace("&", "&amp;", regex=False)
            .str.replace("<", "&lt;", regex=False)
            .str.replace(">", "&gt;", regex=False))


def _floats(frame: pd.DataFrame, column: str) -> np.ndarray:
    """A column as floats; NaN where it is missing, empty or not a number."""
    if column not in frame:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def _coded_text(series: pd.Series) -> tuple[np.ndarray, list[str]]:
    """Codes and their texts for a text column (missing as ""), without a per-row loop.

    Factorising first keeps this fast for hundreds of thousands of rows of few distinct texts.
    """
    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    texts = ["" if pd.isna(value) else str(value) for value in uniques] + [""]
    return np.where(codes < 0, len(texts) - 1, codes), texts


def _flagged(frame: pd.DataFrame) -> np.ndarray:
    """True where a reading carries at least one flag."""
    if col.FLAGS not in frame:
        return np.zeros(len(frame), dtype=bool)
    codes, texts = _coded_text(frame[col.FLAGS])
    return np.array([bool(text.strip()) for text in texts], dtype=bool)[codes]


def _machine_column(frame: pd.DataFrame) -> np.ndarray:
    if col.MACHINE not in frame:
        return np.full(len(frame), "", dtype=object)
    codes, texts = _coded_text(frame[col.MACHINE])
    return np.array(texts, dtype=object)[codes]


def _machine_ids(frame: pd.DataFrame) -> list[str]:
    if col.MACHINE not in frame:
        return []
    _codes, texts = _coded_text(frame[col.MACHINE])
    return sorted({text for text in texts if text})


def _chart_basics(derived: pd.DataFrame, colours: Mapping[str, str] | None
                  ) -> tuple[list[str], dict[str, str], np.ndarray, np.ndarray]:
    """What every comparison chart starts from: machine ids, colours, flags, machine column."""
    ids = _machine_ids(derived)
    return ids, _colours_for(colours, ids), _flagged(derived), _machine_column(derived)


#: Marker shapes that tell one machine's sessions apart (its colour tells the machine).
_SESSION_SYMBOLS = ("circle", "square", "diamond", "triangle-up", "triangle-down", "cross",
                    "star", "hexagon")


def _session_marks(frame: pd.DataFrame, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A marker shape per reading, one shape per session of the rows (in order of first
    appearance), and the session names for the hover."""
    if col.SESSION not in frame:
        return np.full(int(rows.sum()), _SESSION_SYMBOLS[0]), np.full(int(rows.sum()), "")
    column = frame[col.SESSION]
    if isinstance(column.dtype, pd.CategoricalDtype):
        # The names as text once per category, not once per reading of the whole frame (this
        # runs for every machine of every chart).
        texts = np.array([str(name) for name in column.cat.categories] + [""], dtype=object)
        category = column.cat.codes.to_numpy()[rows]
        names = texts[np.where(category < 0, len(texts) - 1, category)]
        codes, uniques = pd.factorize(names)
    else:
        names = column.to_numpy()[rows]
        codes, uniques = pd.factorize(pd.Series(names).fillna("").astype("str"))
    shapes = np.array(_SESSION_SYMBOLS, dtype=object)[codes % len(_SESSION_SYMBOLS)]
    return shapes, np.asarray(uniques, dtype=object)[codes]


def _clean_machines(ids: Sequence[str], machine_column: np.ndarray, flagged: np.ndarray,
                    machines: Mapping[str, Machine], colours: Mapping[str, str]):
    """Each machine with clean readings: its id, their rows, its (escaped) label and colour."""
    for machine_id in ids:
        rows = (machine_column == machine_id) & ~flagged
        if rows.any():
            yield machine_id, rows, _escape(_label(machines, machine_id)), colours[machine_id]


def _label(machines: Mapping[str, Machine], machine_id: str) -> str:
    machine = machines.get(machine_id)
    return machine.label if machine is not None and machine.label else machine_id


def _colours_for(colours: Mapping[str, str] | None, machine_ids: Sequence[str]) -> dict[str, str]:
    chosen = machine_colours(machine_ids)
    if colours:
        chosen.update({str(key): value for key, value in colours.items()})
    return chosen


def _thinned(points: int, value: object, keep: np.ndarray) -> object:
    if isinstance(value, dict):
        return {key: _thinned(points, item, keep) for key, item in value.items()}
    if isinstance(value, (np.ndarray, pd.Series, list, tuple)) and len(value) == points:
        return np.asarray(value)[keep]
    return value


def _thin_trace(points: int, trace: dict[str, object]) -> dict[str, object]:
    """The trace's per-reading values, thinned to evenly spaced readings above
    :data:`MAX_DRAWN_POINTS` (in their order, so a day's course keeps its shape)."""
    if points > MAX_DRAWN_POINTS:
        keep = np.linspace(0, points - 1, MAX_DRAWN_POINTS).round().astype(np.int64)
        return {key: _thinned(points, value, keep) for key, value in trace.items()}
    return trace


def _scatter(points: int, **trace: object) -> go.Scatter | go.Scattergl:
    """A scatter trace, WebGL when it holds more than :data:`WEBGL_THRESHOLD` points.

    Above :data:`MAX_DRAWN_POINTS` the trace keeps evenly spaced readings only (in their order,
    so a day's course keeps its shape): the browser stays smooth, and the fits, computed
    elsewhere, still use every reading.
    """
    trace = _thin_trace(points, trace)
    if points > WEBGL_THRESHOLD:
        return go.Scattergl(**trace)
    return go.Scatter(**trace)


def _flush(figure: go.Figure, traces: list[dict[str, object]]) -> None:
    """Add traces gathered as dicts in one call, and empty the list: plotly checks a trace
    object twice (when made and when added) and a dict once."""
    if traces:
        figure.add_traces(traces)
        traces.clear()


def _add_readings(figure: go.Figure, points: int, **trace: object) -> None:
    """``figure.add_trace(_scatter(points, **trace))`` for readings whose marker shape is given
    reading by reading (``marker["symbol"]`` an array).

    plotly checks such an array element by element in Python, twice (when the trace is made
    and when it is added): 2 to 4 s for the four Compare charts of 40 000 readings, most of
    their time. Here each distinct shape is checked once (an unknown shape still raises
    plotly's ValueError), and the array is then set as it is. The figure is the same.
    """
    trace = _thin_trace(points, trace)
    marker = trace.get("marker")
    symbols = marker.get("symbol") if isinstance(marker, dict) else None
    if not isinstance(symbols, np.ndarray):
        figure.add_trace(_scatter(points, **trace))
        return
    distinct = pd.unique(symbols.astype(object))
    go.scatter.Marker(symbol=list(distinct))  # the check: raises on a shape plotly does not know
    first = {**marker, "symbol": distinct[0] if len(distinct) else None}
    figure.add_trace(_scatter(points, **{**trace, "marker": first}))
    added = figure.data[-1].marker
    added._validate = False  # noqa: SLF001 - plotly's own switch for values already checked
    try:
        added.symbol = np.array(symbols, dtype=object)
    finally:
        added._validate = True  # noqa: SLF001


def chart_sample(derived: pd.DataFrame, max_points: int = MAX_CHART_POINTS,
                 rows: np.ndarray | None = None) -> pd.DataFrame:
    """At most about ``max_points`` readings to draw, spread evenly over each machine's readings.

    A chart built from millions of readings is slow to build and heavy to send: the scatter
    charts are drawn from this sample, while findings, fits and intervals come from all the
    readings. Each machine's clean readings get an equal share (a machine with fewer keeps all
    of them), evenly spaced in their order so that a session's course keeps its shape; flagged
    readings get a quarter of the budget the same way.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with ``machine`` (and ``flags``).
    max_points : int
        Budget of readings [-]; the result may exceed it by at most one reading per machine.
    rows : numpy.ndarray of bool, optional
        Readings to sample from (e.g. those a filter keeps); None: all. The filtered frame is
        never copied whole.

    Returns
    -------
    pandas.DataFrame
        ``derived`` itself when all of it is asked for and within the budget, else a subset
        of its rows in their order (a copy, and a small one).
    """
    if rows is not None and bool(rows.all()):
        rows = None
    if rows is None and len(derived) <= max_points:
        return derived
    if rows is not None and np.count_nonzero(rows) <= max_points:
        return derived.iloc[np.flatnonzero(rows)]
    flagged = _flagged(derived)
    if col.MACHINE in derived:
        machine_codes, uniques = pd.factorize(derived[col.MACHINE], use_na_sentinel=False)
    else:
        machine_codes, uniques = np.zeros(len(derived), dtype=np.intp), [""]
    clean_share = max(1, (max_points - max_points // 4) // max(len(uniques), 1))
    kept = []
    # One stable sort groups the rows of each machine, in their order.
    codes = np.where(flagged, -1, machine_codes)
    if rows is not None:
        codes = np.where(rows, codes, len(uniques))  # left out: a group of their own, not drawn
    if len(uniques) < np.iinfo(np.int16).max:
        codes = codes.astype(np.int16)  # numpy sorts small integers stably by radix: O(N)
    order = np.argsort(codes, kind="stable")
    bounds = np.searchsorted(codes[order], np.arange(-1, len(uniques) + 1))
    for number in range(len(uniques) + 1):  # the flagged first, then machine by machine
        rows = order[bounds[number]:bounds[number + 1]]
        share = max_points // 4 if number == 0 else clean_share
        if rows.size > share:
            rows = rows[np.linspace(0, rows.size - 1, share).round().astype(np.int64)]
        kept.append(rows)
    positions = np.sort(np.concatenate(kept))
    return derived.iloc[positions]


def _empty_figure(title: str = "", message: str = NO_READINGS) -> go.Figure:
    figure = go.Figure()
    figure.add_annotation(text=message, x=0.5, y=0.5, xref="paper", yref="paper",
                          showarrow=False, font={"size": 16})
    figure.update_layout(title=title, template="plotly_white")
    figure.update_xaxes(visible=False)
    figure.update_yaxes(visible=False)
    return figure


def _nothing_drawn(title: str, hidden_flagged: int) -> go.Figure:
    if hidden_flagged:
        return _empty_figure(title, f"{NO_READINGS} ({hidden_flagged} flagged readings hidden; "
                                    "show flagged readings to see them)")
    return _empty_figure(title)


def _add_notes(figure: go.Figure, notes: Sequence[str]) -> None:
    """Short notes under the chart: what is not drawn and why."""
    if not notes:
        return
    # Under the title, where neither the axis title nor the legend (under the plot) can collide.
    title = figure.layout.title.text or ""
    lines = "<br>".join(notes)
    figure.update_layout(
        title_text=f"{title}<br><span style='font-size:11px;color:#555555'>{lines}</span>",
        margin={"t": 70 + 16 * len(notes)})


def _style(figure: go.Figure, title: str, x_title: str, y_title: str) -> None:
    # The legend goes under the plot so that the plot keeps the width of its column, and
    # it names machines only: line styles are explained once, by two grey key entries.
    line_kinds: dict[str, tuple[str, str]] = {}
    for trace in figure.data:
        name = str(trace.name or "")
        for suffix, kind in ((": ceiling", "ceiling"), (": fit", "fitted line")):
            if name.endswith(suffix):
                trace.showlegend = False
                line = getattr(trace, "line", None)
                mode = getattr(trace, "mode", "") or ""
                marker = getattr(trace, "marker", None)
                symbol = (marker.symbol if marker is not None else None) or "circle"
                dash = (line.dash if line else None) or "solid"
                # One key per look: a solid and a dotted fit line, or a fitted value drawn as a
                # marker, each get the key that looks like them.
                if kind == "fitted line" and mode == "markers":
                    kind = "fitted charge per revolution (95 % interval)"
                elif kind == "fitted line" and dash != "solid":
                    kind = "fitted line, one session"
                line_kinds.setdefault(kind, (dash, mode, symbol))
    for kind, (dash, mode, symbol) in line_kinds.items():
        # The key looks like the traces it stands for (a line, or the same marker).
        figure.add_trace(go.Scatter(x=[None], y=[None], name=kind, hoverinfo="skip",
                                    mode="markers" if mode == "markers" else "lines",
                                    line={"color": "#555555", "dash": dash},
                                    marker={"color": "#555555", "symbol": symbol, "size": 10,
                                            "line": {"width": 2, "color": "#555555"}},
                                    legendgroup=f"key-{kind}"))
    figure.update_layout(title=title, template="plotly_white", hovermode="closest",
                         height=500, margin={"l": 60, "r": 20, "t": 60, "b": 40},
                         legend={"title": {"text": ""}, "orientation": "h", "x": 0,
                                 "xanchor": "left", "y": -0.22, "yanchor": "top"})
    figure.update_xaxes(title_text=x_title)
    figure.update_yaxes(title_text=y_title)
    _steady_values_axis(figure)


def _steady_values_axis(figure: go.Figure) -> None:
    """Give the y axis a readable range when every value is the same up to rounding (e.g. an
    efficiency that does not change with speed): the browser's automatic range would span
    1e-14 and show no tick labels. The range is the value +- 10 % (at least +- 1)."""
    values = []
    for trace in figure.data:
        y = getattr(trace, "y", None)
        if y is None or getattr(trace, "yaxis", None) not in (None, "y"):
            continue
        array = np.asarray(y)
        if array.dtype.kind in "fiu":  # numbers already (most traces): no conversion
            values.append(array.astype(float, copy=False).ravel())
            continue
        numbers = pd.to_numeric(pd.Series(np.asarray(y, dtype=object)), errors="coerce")
        values.append(numbers.to_numpy(dtype=float))
    if not values:
        return
    finite = np.concatenate(values)
    finite = finite[np.isfinite(finite)]
    if finite.size < 2:
        return
    low, high = float(finite.min()), float(finite.max())
    if high - low > 1e-9 * max(1.0, abs(high)):
        return
    pad = max(abs(high) * 0.1, 1.0)
    figure.update_yaxes(range=[low - pad, high + pad])


def _wrap(text: str, width: int = 14) -> str:
    """Break a tick label into lines of about ``width`` characters (plotly's <br>)."""
    lines, current = [], ""
    for word in text.split(" "):
        if current and len(current) + 1 + len(word) > width:
            lines.append(current)
            current = word
        else:
            current = f"{current} {word}".strip()
    return "<br>".join(lines + [current])


def _finite_range(values: np.ndarray) -> tuple[float, float] | None:
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return None
    return float(finite.min()), float(finite.max())


def _median_density(frame: pd.DataFrame) -> float:
    """Median relative air density of some readings; 1 (the reference) when none is known."""
    density = _floats(frame, col.RELATIVE_AIR_DENSITY)
    density = density[np.isfinite(density) & (density > 0)]
    return float(np.median(density)) if density.size else 1.0


def _ceiling_at_density(machine: Machine, speed_rev_s, relative_density: float):
    """Ceiling current [A] at a relative air density, or None where rpm does not apply.

    ``machine_ceiling`` takes pressure and temperature; at the reference temperature a pressure
    of delta * 101.3 kPa is relative air density delta (IEC 60060-1 definition).
    """
    try:
        result = machine_ceiling(machine, speed_rev_s,
                                 pressure_pa=pressure_for_relative_density(relative_density),
                                 temperature_k=REFERENCE_TEMPERATURE_K)
    except InputError:
        # a belt known only by its linear speed has no ceiling per revolution
        return None
    return np.asarray(result.ceiling_current_a, dtype=float)


# The findings table last grouped by machine (charts ask once per machine, four charts a run).
_grouped_findings: list = [None, {}]


def _findings_rows(findings: pd.DataFrame | None, machine_id: str) -> list[dict[str, object]]:
    if findings is None or len(findings) == 0 or "machine" not in findings:
        return []
    held = _grouped_findings[0]() if _grouped_findings[0] is not None else None
    if held is not findings:
        machine = findings["machine"].astype(object).where(findings["machine"].notna(), "")
        grouped: dict[str, list[dict[str, object]]] = {}
        for key, row in zip(machine.astype(str), findings.to_dict("records"), strict=True):
            grouped.setdefault(key, []).append(row)
        _grouped_findings[:] = [weakref.ref(findings), grouped]
    return [dict(row) for row in _grouped_findings[1].get(machine_id, [])]


def _session_of(row: Mapping[str, object]) -> str:
    session = row.get("session")
    return "" if _missing(session) else str(session)


def _session_rows(frame: pd.DataFrame, session: str) -> np.ndarray:
    """Rows of ``frame`` in ``session``; all rows when no session is asked for."""
    if not session or col.SESSION not in frame:
        return np.ones(len(frame), dtype=bool)
    column = frame[col.SESSION]
    if isinstance(column.dtype, pd.CategoricalDtype) or (
            pd.api.types.is_string_dtype(column.dtype) and column.dtype != object):
        # text or categorical: compared without a Python string per reading
        return (column == session).to_numpy(dtype=bool, na_value=False)
    sessions = column.astype(object).where(column.notna(), "")
    return (sessions.astype(str) == session).to_numpy(dtype=bool)


def _fit_name(label: str, session: str) -> str:
    return f"{label}, {session}: fit" if session else f"{label}: fit"


def _session_ranges(frame: pd.DataFrame, rows: np.ndarray, values: np.ndarray
                    ) -> dict[str, tuple[float, float]]:
    """Smallest and largest finite value of each session among ``rows`` (one pass per machine
    instead of one mask over the whole frame per session)."""
    if col.SESSION not in frame:
        return {}
    _shapes, names = _session_marks(frame, rows)
    kept = values[rows]
    finite = np.isfinite(kept)
    if not finite.any():
        return {}
    spans = pd.Series(kept[finite]).groupby(names[finite], sort=False).agg(["min", "max"])
    return {str(name): (float(low), float(high))
            for name, low, high in zip(spans.index, spans["min"], spans["max"], strict=True)}


class _FitLines:
    """Fitted lines of one chart gathered per machine, line style and hover layout, each kind
    drawn as one trace with gaps between its lines: plotly builds and checks a few traces
    instead of one per machine and session (hundreds in a lab of many sessions). The figures
    of each line go to the hover as numbers (``customdata``, sent packed) and its session as a
    short text, so the chart stays small."""

    def __init__(self, hover_tail: str) -> None:
        self._hover_tail = hover_tail
        self._pieces: dict[tuple[str, str, str], list[tuple[np.ndarray, np.ndarray, str,
                                                            tuple[float, ...]]]] = {}
        self._looks: dict[tuple[str, str, str], tuple[str, str]] = {}

    def add(self, machine_id: str, label: str, colour: str, session: str, x: np.ndarray,
            y: np.ndarray, hover: str, numbers: Sequence[float] = ()) -> None:
        """One fitted line. ``hover`` (plotly hover text) may show ``numbers`` as
        ``%{customdata[i]}``; lines of one machine with the same ``hover`` share a trace."""
        dash = "dot" if session else "solid"
        key = (machine_id, dash, hover)
        self._looks[key] = (label, colour)
        self._pieces.setdefault(key, []).append((np.asarray(x, dtype=float),
                                                 np.asarray(y, dtype=float), _escape(session),
                                                 tuple(float(value) for value in numbers)))

    def traces(self) -> list[dict[str, object]]:
        """The traces, as dicts for ``figure.add_traces``."""
        traces = []
        for (machine_id, dash, hover), pieces in self._pieces.items():
            label, colour = self._looks[(machine_id, dash, hover)]
            gap = np.array([np.nan])
            x = np.concatenate([part for piece in pieces for part in (piece[0], gap)][:-1])
            y = np.concatenate([part for piece in pieces for part in (piece[1], gap)][:-1])
            sizes = [piece[0].size + 1 for piece in pieces]
            text = np.repeat(np.array([piece[2] for piece in pieces], dtype=object), sizes)[:-1]
            trace = dict(type="scatter", x=x, y=y, mode="lines", name=f"{label}: fit",
                         legendgroup=machine_id, line={"color": colour, "dash": dash, "width": 2},
                         hovertemplate=hover + self._hover_tail
                         + ("<extra>%{text}</extra>" if dash == "dot" else "<extra></extra>"))
            if dash == "dot":
                trace["text"] = text
            if pieces[0][3]:
                trace["customdata"] = np.repeat(np.array([piece[3] for piece in pieces]),
                                                sizes, axis=0)[:-1]
            traces.append(trace)
        return traces


def _flagged_trace(frame: pd.DataFrame, x: np.ndarray, y: np.ndarray,
                   machines: Mapping[str, Machine], x_text: str, y_text: str,
                   showlegend: bool = True, label: str | None = None) -> go.Scatter | go.Scattergl:
    """Grey x markers for flagged readings, with machine label and flags in the hover.

    ``label`` (already escaped) stands for every reading's machine when they are all of one.
    """
    ids = pd.Series(_machine_column(frame), dtype=object)
    if label is None:
        labels = _escape_series(ids.map({key: _label(machines, key) for key in ids.unique()}))
    else:
        labels = pd.Series([label] * len(ids), dtype=object)
    flags = _escape_series(frame[col.FLAGS]) if col.FLAGS in frame else pd.Series([""] * len(ids))
    lines = "<br>".join(["%{customdata[0]}", *(text for text in (x_text, y_text) if text),
                         "flags: %{customdata[1]}"])
    return _scatter(
        len(frame), x=x, y=y, mode="markers", name="flagged readings",
        legendgroup="flagged", showlegend=showlegend,
        marker={"color": FLAGGED_COLOUR, "symbol": "x", "size": 7},
        customdata=np.column_stack([labels.to_numpy(), flags.to_numpy()]),
        hovertemplate=lines + "<extra>flagged</extra>",
    )


def _rpm(speed_rev_s):
    return to_display(speed_rev_s, "rotation_rate", "rpm")


def _micro_amp(current_a):
    return to_display(current_a, "current", "uA")


def _percent(fraction):
    return to_display(fraction, "fraction", "%")


def _not_drawn_notes(machines: Mapping[str, Machine], no_speed: list[str],
                     no_description: list[str]) -> list[str]:
    notes = []
    if no_speed:
        notes.append("Not on this chart (no speed in rpm; a belt known only by its speed in "
                     "m/s needs roller_diameter or loop_length): "
                     + ", ".join(_escape(_label(machines, key)) for key in no_speed))
    if no_description:
        notes.append("No ceiling drawn (machine not in the machines list): "
                     + ", ".join(_escape(key) for key in no_description))
    return notes


# --- comparison charts -----------------------------------------------------------------------

def current_vs_speed(derived: pd.DataFrame | None, findings: pd.DataFrame | None = None,
                     machines: Mapping[str, Machine] | None = None,
                     colours: Mapping[str, str] | None = None,
                     show_flagged: bool = False) -> go.Figure:
    """Measured current against speed, with each machine's ceiling and fitted line.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with derived columns (SI units).
    findings : pandas.DataFrame, optional
        One row per machine (or machine and session) with ``charge_per_rev_nC`` [nC] and
        ``offset_current_uA`` [uA] of the fit I = q f + I0.
    machines : mapping of str to Machine, optional
        Machine descriptions by id, for labels and ceiling lines.
    colours : mapping of str to str, optional
        Colour per machine id; default :func:`machine_colours`.
    show_flagged : bool
        Draw flagged readings too (grey x markers).

    Returns
    -------
    plotly.graph_objects.Figure
        Current [uA] against speed [rpm]. The ceiling line is dashed, drawn over the
        machine's speed range at the median relative air density of its clean readings.
    """
    title = "Measured current and ceiling against speed"
    if derived is None or len(derived) == 0:
        return _empty_figure(title)
    machines = machines or {}
    ids, colours, flagged, machine_column = _chart_basics(derived, colours)
    speed_rev_s = _floats(derived, col.SPEED_REV_S)
    speed_rpm = _rpm(speed_rev_s)
    current_ua = _micro_amp(_floats(derived, col.CURRENT_A))
    figure = go.Figure()
    lines: list[dict[str, object]] = []  # added in batches (see charge_per_rev)
    fits = _FitLines("<br>Speed %{x:.0f} rpm<br>Current %{y:.3g} µA")
    no_speed, no_description = [], []
    for machine_id, rows, label, colour in _clean_machines(ids, machine_column, flagged,
                                                           machines, colours):
        speed_range = _finite_range(speed_rev_s[rows])
        if speed_range is None:
            no_speed.append(machine_id)
            continue
        shapes, session_names = _session_marks(derived, rows)
        _flush(figure, lines)
        _add_readings(
            figure,
            int(rows.sum()), x=speed_rpm[rows], y=current_ua[rows], mode="markers", name=label,
            legendgroup=machine_id,
            marker={"color": colour, "size": 6, "opacity": 0.75, "symbol": shapes},
            customdata=_escape_array(session_names),
            hovertemplate="Session %{customdata}<br>Speed %{x:.0f} rpm<br>Current %{y:.3g} µA",
        )
        machine = machines.get(machine_id)
        line_rev_s = np.linspace(*speed_range, _LINE_POINTS)
        if machine is None:
            no_description.append(machine_id)
        else:
            density = _median_density(derived[rows])
            ceiling = _ceiling_at_density(machine, line_rev_s, density)
            if ceiling is not None:
                lines.append(dict(type="scatter",
                    x=_rpm(line_rev_s), y=_micro_amp(ceiling), mode="lines",
                    name=f"{label}: ceiling", legendgroup=machine_id,
                    line={"color": colour, "dash": "dash"},
                    hovertemplate=(f"Ceiling at relative air density {density:.3f}"
                                   "<br>Speed %{x:.0f} rpm<br>Ceiling %{y:.3g} µA"),
                ))
        ranges = _session_ranges(derived, rows, speed_rev_s)
        for row in _findings_rows(findings, machine_id):
            charge_nc = _number(row.get("charge_per_rev_nC"))
            offset_ua = _number(row.get("offset_current_uA"))
            if not math.isfinite(charge_nc):
                continue
            offset_ua = offset_ua if math.isfinite(offset_ua) else 0.0
            session = _session_of(row)
            fit_range = ranges.get(session, speed_range) if session else speed_range
            fit_rev_s = np.linspace(*fit_range, _LINE_POINTS)
            fitted_ua = _micro_amp(charge_nc / _NANO * fit_rev_s) + offset_ua
            fits.add(machine_id, label, colour, session, _rpm(fit_rev_s), fitted_ua,
                     "Fit I = q f + I0: q = %{customdata[0]:,.4~g} nC, "
                     "I0 = %{customdata[1]:,.3~g} µA", (charge_nc, offset_ua))
    lines.extend(fits.traces())
    _flush(figure, lines)
    shown_flagged = flagged & np.isfinite(speed_rev_s)
    if show_flagged and shown_flagged.any():
        figure.add_trace(_flagged_trace(
            derived[shown_flagged], speed_rpm[shown_flagged], current_ua[shown_flagged],
            machines, "Speed %{x:.0f} rpm", "Current %{y:.3g} µA"))
    if not figure.data:
        return _nothing_drawn(title, 0 if show_flagged else int(flagged.sum()))
    _style(figure, title, SPEED_AXIS, CURRENT_AXIS)
    _add_notes(figure, _not_drawn_notes(machines, no_speed, no_description))
    return figure


def efficiency_vs_speed(derived: pd.DataFrame | None, findings: pd.DataFrame | None = None,
                        machines: Mapping[str, Machine] | None = None,
                        colours: Mapping[str, str] | None = None,
                        show_flagged: bool = False) -> go.Figure:
    """Efficiency (measured over ceiling current) against speed, per machine.

    Parameters
    ----------
    derived, findings, machines, colours, show_flagged
        As for :func:`current_vs_speed`.

    Returns
    -------
    plotly.graph_objects.Figure
        Efficiency [%] against speed [rpm], with error bars of one standard uncertainty, a
        100 % line (the ceiling) and, where a speed fit exists, the efficiency that the fit
        I = q f + I0 gives against the ceiling at the machine's median air density.
    """
    title = "Efficiency against speed"
    if derived is None or len(derived) == 0:
        return _empty_figure(title)
    machines = machines or {}
    ids, colours, flagged, machine_column = _chart_basics(derived, colours)
    speed_rev_s = _floats(derived, col.SPEED_REV_S)
    speed_rpm = _rpm(speed_rev_s)
    efficiency_pct = _percent(_floats(derived, col.EFFICIENCY))
    uncertainty_pct = _percent(_floats(derived, col.EFFICIENCY_U))
    figure = go.Figure()
    lines: list[dict[str, object]] = []  # added in batches (see charge_per_rev)
    fits = _FitLines("<br>Speed %{x:.0f} rpm<br>Efficiency %{y:.1f} %")
    no_speed, no_description = [], []
    for machine_id, rows, label, colour in _clean_machines(ids, machine_column, flagged,
                                                           machines, colours):
        speed_range = _finite_range(speed_rev_s[rows])
        if speed_range is None:
            no_speed.append(machine_id)
            continue
        error = uncertainty_pct[rows]
        shapes, session_names = _session_marks(derived, rows)
        _flush(figure, lines)
        _add_readings(
            figure,
            int(rows.sum()), x=speed_rpm[rows], y=efficiency_pct[rows], mode="markers",
            name=label, legendgroup=machine_id, customdata=_escape_array(session_names),
            marker={"color": colour, "size": 6, "opacity": 0.75, "symbol": shapes},
            error_y={"type": "data", "array": np.nan_to_num(error, nan=0.0),
                     "visible": bool(np.isfinite(error).any()), "thickness": 1, "width": 0},
            hovertemplate="Session %{customdata}<br>Speed %{x:.0f} rpm<br>"
                          "Efficiency %{y:.1f} % ± %{error_y.array:.1f}",
        )
        machine = machines.get(machine_id)
        if machine is None:
            no_description.append(machine_id)
            continue
        density = _median_density(derived[rows])
        ranges = _session_ranges(derived, rows, speed_rev_s)
        for row in _findings_rows(findings, machine_id):
            charge_nc = _number(row.get("charge_per_rev_nC"))
            offset_ua = _number(row.get("offset_current_uA"))
            if not math.isfinite(charge_nc):
                continue
            offset_ua = offset_ua if math.isfinite(offset_ua) else 0.0
            session = _session_of(row)
            fit_range = ranges.get(session, speed_range) if session else speed_range
            fit_rev_s = np.linspace(*fit_range, _LINE_POINTS)
            ceiling = _ceiling_at_density(machine, fit_rev_s, density)
            if ceiling is None or not np.all(ceiling > 0):
                continue
            fitted_ua = _micro_amp(charge_nc / _NANO * fit_rev_s) + offset_ua
            fits.add(machine_id, label, colour, session, _rpm(fit_rev_s),
                     100.0 * fitted_ua / _micro_amp(ceiling),
                     "Speed fit over ceiling at relative air density %{customdata[0]:.3f}",
                     (density,))
    lines.extend(fits.traces())
    _flush(figure, lines)
    shown_flagged = flagged & np.isfinite(speed_rev_s)
    if show_flagged and shown_flagged.any():
        figure.add_trace(_flagged_trace(
            derived[shown_flagged], speed_rpm[shown_flagged], efficiency_pct[shown_flagged],
            machines, "Speed %{x:.0f} rpm", "Efficiency %{y:.1f} %"))
    if not figure.data:
        return _nothing_drawn(title, 0 if show_flagged else int(flagged.sum()))
    figure.add_hline(y=100.0, line={"color": "#666666", "dash": "dash", "width": 1},
                     annotation_text="ceiling (100 %)", annotation_position="top left")
    _style(figure, title, SPEED_AXIS, EFFICIENCY_AXIS)
    _add_notes(figure, _not_drawn_notes(machines, no_speed, no_description))
    return figure


def _box_statistics(values: np.ndarray) -> dict[str, list[float]]:
    """Quartiles and whisker ends (most extreme points within 1.5 IQR; common practice)."""
    q1, median, q3 = np.percentile(values, [25, 50, 75])
    spread = 1.5 * (q3 - q1)
    inside = values[(values >= q1 - spread) & (values <= q3 + spread)]
    return {"q1": [q1], "median": [median], "q3": [q3],
            "lowerfence": [inside.min()], "upperfence": [inside.max()]}


def charge_per_rev(derived: pd.DataFrame | None, findings: pd.DataFrame | None = None,
                   machines: Mapping[str, Machine] | None = None,
                   colours: Mapping[str, str] | None = None,
                   show_flagged: bool = False) -> go.Figure:
    """Measured charge per revolution of each machine against its ceiling per revolution.

    Parameters
    ----------
    derived, findings, machines, colours, show_flagged
        As for :func:`current_vs_speed`; findings give ``charge_per_rev_nC`` and
        ``charge_per_rev_ci_nC`` (95 % interval) of the speed fit.

    Returns
    -------
    plotly.graph_objects.Figure
        Charge per revolution [nC]: a box of the clean readings per machine (quartiles,
        whiskers to the furthest reading within 1.5 interquartile ranges), the readings
        themselves when there are at most 2 000, the fitted q with its interval (diamond),
        and the ceiling per revolution at the median air density (wide bar marker).
    """
    title = "Charge per revolution against the ceiling per revolution"
    if derived is None or len(derived) == 0:
        return _empty_figure(title)
    machines = machines or {}
    ids, colours, flagged, machine_column = _chart_basics(derived, colours)
    charge_nc = _floats(derived, col.CHARGE_PER_REV_C) * _NANO
    figure = go.Figure()
    # Traces gathered as dicts and added in one call (plotly checks a trace object twice, when
    # made and when added, and a dict once), and one trace per machine for each kind of mark
    # (its sessions' boxes, readings, fitted values and ceilings): a lab of hundreds of
    # machine-session groups makes a few dozen traces instead of a thousand.
    boxes_and_marks: list[dict[str, object]] = []
    position_of: dict[str, int] = {}
    tick_text: list[str] = []
    no_speed, no_description = [], []
    jitter = np.random.default_rng(0)  # fixed seed: the same data draw the same chart
    for machine_id in ids:
        machine_rows = machine_column == machine_id
        rows_all = machine_rows & ~flagged & np.isfinite(charge_nc)
        if not (machine_rows & ~flagged).any():
            continue
        if not rows_all.any():
            no_speed.append(machine_id)
            continue
        label, colour = _escape(_label(machines, machine_id)), colours[machine_id]
        machine = machines.get(machine_id)
        if machine is None:
            no_description.append(machine_id)
        # One box per session (before and after a restoration never share a box), in the
        # order the sessions were run.
        _shapes, session_of_row = _session_marks(derived, rows_all)
        values_all = charge_nc[rows_all]
        density_all = _floats(derived, col.RELATIVE_AIR_DENSITY)[rows_all]
        sessions = list(dict.fromkeys(session_of_row))
        box: dict[str, list[float]] = {name: [] for name in
                                       ("x", "q1", "median", "q3", "lowerfence", "upperfence")}
        strip_x, strip_y = [], []
        fitted: dict[str, list] = {name: [] for name in ("x", "y", "plus", "minus", "text")}
        has_intervals = []
        ceilings: dict[str, list] = {"x": [], "y": [], "text": []}
        rows_of_machine = _findings_rows(findings, machine_id)
        for session in sessions:
            in_session = session_of_row == session
            position = len(tick_text)
            position_of.setdefault(machine_id, position)
            # A machine of several sessions is named by its sessions (its colour and the
            # legend name the machine); a machine of one session by its name.
            tick_text.append(_escape(session) if len(sessions) > 1 and session else label)
            values = values_all[in_session]
            box["x"].append(position)
            for name, value in _box_statistics(values).items():
                box[name].extend(value)
            if values.size <= _STRIP_POINTS_MAX:
                strip_x.append(position + jitter.uniform(-0.18, 0.18, values.size))
                strip_y.append(values)
            for row in rows_of_machine:
                if len(sessions) > 1 and _session_of(row) not in ("", session):
                    continue
                value = _number(row.get("charge_per_rev_nC"))
                if not math.isfinite(value):
                    continue
                low, high = _interval(row.get("charge_per_rev_ci_nC"))
                has_interval = math.isfinite(low) and math.isfinite(high)
                has_intervals.append(has_interval)
                fitted["x"].append(position + 0.3)
                fitted["y"].append(value)
                fitted["plus"].append(high - value if has_interval else 0.0)
                fitted["minus"].append(value - low if has_interval else 0.0)
                session_name = _escape(_session_of(row))
                fitted["text"].append(
                    (f"{session_name}: " if session_name else "")
                    + f"Fitted q = {value:,.4g} nC"
                    + (f" (95 % CI {low:,.4g} to {high:,.4g} nC)" if has_interval else ""))
            if machine is None:
                continue
            density = density_all[in_session]
            density = density[np.isfinite(density) & (density > 0)]
            density = float(np.median(density)) if density.size else 1.0
            ceiling = _ceiling_at_density(machine, 1.0, density)  # the current at 1 rev/s
            if ceiling is None:
                continue
            ceilings["x"].append(position)
            ceilings["y"].append(float(ceiling) * _NANO)
            ceilings["text"].append(
                f"Ceiling per revolution at relative air density {density:.3f}"
                f"<br>{float(ceiling) * _NANO:,.4g} nC: {machine.units:g} unit"
                f"{'s' if machine.units != 1 else ''}<br>{_escape(machine.unit_rule.rule)}")
        boxes_and_marks.append(dict(type="box",
            **box, name=label, legendgroup=machine_id, marker={"color": colour},
            line={"color": colour}, boxpoints=False, hoverinfo="y+name"))
        if strip_x:
            boxes_and_marks.append(dict(type="scatter",
                x=np.concatenate(strip_x), y=np.concatenate(strip_y), mode="markers",
                name=f"{label}: readings", legendgroup=machine_id, showlegend=False,
                marker={"color": colour, "size": 4, "opacity": 0.45},
                hovertemplate="Charge per revolution %{y:,.4~g} nC"))
        if fitted["x"]:
            boxes_and_marks.append(dict(type="scatter",
                x=fitted["x"], y=fitted["y"], text=fitted["text"], mode="markers",
                name=f"{label}: fit", legendgroup=machine_id,
                marker={"color": colour, "symbol": "diamond", "size": 10,
                        "line": {"color": "#000000", "width": 1}},
                error_y={"type": "data", "symmetric": False, "array": fitted["plus"],
                         "arrayminus": fitted["minus"], "visible": any(has_intervals)},
                hovertemplate="%{text}<extra></extra>"))
        if ceilings["x"]:
            boxes_and_marks.append(dict(type="scatter",
                x=ceilings["x"], y=ceilings["y"], text=ceilings["text"], mode="markers",
                name=f"{label}: ceiling", legendgroup=machine_id,
                marker={"color": colour, "symbol": "line-ew-open", "size": 44,
                        "line": {"color": colour, "width": 3}},
                hovertemplate="%{text}<extra></extra>"))
    figure.add_traces(boxes_and_marks)
    shown_flagged = flagged & np.isfinite(charge_nc)
    if show_flagged and shown_flagged.any():
        # machines with only flagged readings get their own place on the axis
        for machine_id in sorted(set(machine_column[shown_flagged]) - set(position_of)):
            position_of[machine_id] = len(tick_text)
            tick_text.append(_escape(_label(machines, machine_id)))
        positions = pd.Series(machine_column[shown_flagged]).map(position_of)
        figure.add_trace(_flagged_trace(
            derived[shown_flagged], positions.to_numpy(dtype=float), charge_nc[shown_flagged],
            machines, "", "Charge per revolution %{y:.3g} nC"))
    if not figure.data:
        return _nothing_drawn(title, 0 if show_flagged else int(flagged.sum()))
    _style(figure, title, "Machine", CHARGE_AXIS)
    # Many machines: names slanted and wrapped wider, so that they never overlap.
    crowded = len(tick_text) > 4
    figure.update_xaxes(tickmode="array", tickvals=list(range(len(tick_text))),
                        ticktext=[text if crowded else _wrap(text) for text in tick_text],
                        title_text="", tickangle=-30 if crowded else 0, automargin=True,
                        ticklabeloverflow="allow",  # a long first name is not hidden
                        tickfont={"size": 11 if crowded else 12})
    figure.update_yaxes(rangemode="tozero")  # a charge per revolution is never negative
    if crowded:  # the slanted names need the room under the axis that the legend takes
        figure.update_layout(height=560, legend={"y": -0.42})
    _add_notes(figure, _not_drawn_notes(machines, no_speed, no_description))
    return figure


def efficiency_vs_humidity(derived: pd.DataFrame | None, findings: pd.DataFrame | None = None,
                           machines: Mapping[str, Machine] | None = None,
                           colours: Mapping[str, str] | None = None,
                           show_flagged: bool = False,
                           reference_rh_pct: float = DEFAULT_REFERENCE_RH_PCT) -> go.Figure:
    """Efficiency against relative humidity, with each machine's humidity fit: the logistic
    decline where one was fitted, else the straight line.

    Parameters
    ----------
    derived, findings, machines, colours, show_flagged
        As for :func:`current_vs_speed`; findings give ``efficiency_at_reference_rh``
        (fraction) and ``humidity_slope_per_10pct`` (fraction per +10 % RH).
    reference_rh_pct : float
        Relative humidity at which ``efficiency_at_reference_rh`` was evaluated [%].

    Returns
    -------
    plotly.graph_objects.Figure
        Efficiency [%] against relative humidity [%]. The fit line is
        eff(rh) = eff_ref + slope * (rh - rh_ref) / 10, drawn over the machine's RH range.
    """
    title = "Efficiency against relative humidity"
    if derived is None or len(derived) == 0:
        return _empty_figure(title)
    machines = machines or {}
    ids, colours, flagged, machine_column = _chart_basics(derived, colours)
    rh_pct = _percent(_floats(derived, col.RH))
    efficiency_pct = _percent(_floats(derived, col.EFFICIENCY))
    figure = go.Figure()
    lines: list[dict[str, object]] = []  # added in batches (see charge_per_rev)
    fits = _FitLines("<br>RH %{x:.1f} %<br>Efficiency %{y:.1f} %")
    no_humidity = []
    for machine_id, rows, label, colour in _clean_machines(ids, machine_column, flagged,
                                                           machines, colours):
        rh_range = _finite_range(rh_pct[rows])
        if rh_range is None:
            no_humidity.append(label)
            continue
        shapes, session_names = _session_marks(derived, rows)
        _flush(figure, lines)
        _add_readings(
            figure,
            int(rows.sum()), x=rh_pct[rows], y=efficiency_pct[rows], mode="markers",
            name=label, legendgroup=machine_id, customdata=_escape_array(session_names),
            marker={"color": colour, "size": 6, "opacity": 0.75, "symbol": shapes},
            hovertemplate="Session %{customdata}<br>RH %{x:.1f} %<br>Efficiency %{y:.1f} %",
        )
        ranges = _session_ranges(derived, rows, rh_pct)
        for row in _findings_rows(findings, machine_id):
            at_reference = _number(row.get("efficiency_at_reference_rh"))
            slope = _number(row.get("humidity_slope_per_10pct"))
            if not (math.isfinite(at_reference) and math.isfinite(slope)):
                continue
            session = _session_of(row)
            fit_range = ranges.get(session, rh_range) if session else rh_range
            if row.get("humidity_model") == "logistic decline":
                # The curve that was fitted, and that gave the efficiency at the reference RH.
                line_rh = np.linspace(*fit_range, _LINE_POINTS * 2)
                dry = _number(row.get("logistic_dry_efficiency"))
                half = _number(row.get("logistic_rh_half_pct"))
                width = _number(row.get("logistic_width_pct"))
                line_efficiency = _percent(logistic_efficiency(line_rh / 100, dry, half / 100,
                                                               width / 100))
                what = ("Logistic decline: half the dry %{customdata[0]:.1f} % at "
                        "%{customdata[1]:.0f} % RH")
                numbers = (_percent(dry), half)
            else:
                line_rh = np.linspace(*fit_range, _LINE_POINTS)  # a straight line
                line_efficiency = _percent(at_reference
                                           + slope * (line_rh - reference_rh_pct) / 10)
                what = "Humidity fit: %{customdata[0]:+.1f} percentage points per +10 % RH"
                numbers = (_percent(slope), math.nan)
            fits.add(machine_id, label, colour, session, line_rh, line_efficiency,
                     what + f", %{{customdata[2]:.1f}} % at {reference_rh_pct:g} % RH",
                     (*numbers, _percent(at_reference)))
    lines.extend(fits.traces())
    _flush(figure, lines)
    shown_flagged = flagged & np.isfinite(rh_pct)
    if show_flagged and shown_flagged.any():
        figure.add_trace(_flagged_trace(
            derived[shown_flagged], rh_pct[shown_flagged], efficiency_pct[shown_flagged],
            machines, "RH %{x:.1f} %", "Efficiency %{y:.1f} %"))
    if not figure.data:
        return _nothing_drawn(title, 0 if show_flagged else int(flagged.sum()))
    _style(figure, title, RH_AXIS, EFFICIENCY_AXIS)
    if no_humidity:
        _add_notes(figure, ["Not on this chart (no humidity recorded): " + ", ".join(no_humidity)])
    return figure


# --- one machine -----------------------------------------------------------------------------

def _time_axis(frame: pd.DataFrame) -> tuple[pd.Series | np.ndarray, str, np.ndarray, bool]:
    """x values for a timeline: clock time when every reading has one, else elapsed minutes.

    Returns the values, the axis title, a mask of readings that have an x value and whether
    the axis is clock time.
    """
    times = frame[col.TIME] if col.TIME in frame else pd.Series(pd.NaT, index=frame.index)
    if not pd.api.types.is_datetime64_any_dtype(times):
        times = pd.to_datetime(times, errors="coerce", utc=True)
    has_time = times.notna().to_numpy(dtype=bool)
    elapsed_min = to_display(_floats(frame, col.ELAPSED_S), "duration", "min")
    has_elapsed = np.isfinite(elapsed_min)
    if has_time.all() or has_time.sum() > has_elapsed.sum():
        zone = getattr(times.dt, "tz", None)
        if zone is not None:
            # plotly draws wall-clock time; keep the readings' own clock and name its zone
            return (times.dt.tz_localize(None), f"Time [clock time, {zone}]", has_time, True)
        return times, "Time [clock time]", has_time, True
    return elapsed_min, ELAPSED_AXIS, has_elapsed, False


def session_timeline(derived: pd.DataFrame | None, machine_id: str,
                     colours: Mapping[str, str] | None = None, show_flagged: bool = True,
                     label: str | None = None, session: str | None = None) -> go.Figure:
    """One machine's readings over time, on a shared time axis.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with derived columns (SI units).
    machine_id : str
        The machine to show.
    colours : mapping of str to str, optional
        Colour per machine id.
    show_flagged : bool
        Mark flagged readings with grey x symbols (default True: a timeline is where one
        looks for them).
    label : str, optional
        Machine label for titles and hover; default the id.
    session : str, optional
        Show only this session.

    Returns
    -------
    plotly.graph_objects.Figure
        Four rows: current and ceiling [uA]; speed [rpm]; relative humidity [%] with
        temperature [degC] on a second axis; efficiency [%]. The x axis is clock time when
        every reading has one, else the elapsed time [min].
    """
    label = _escape(label or machine_id)
    title = f"Session timeline: {label}" + (f", {_escape(session)}" if session else "")
    if derived is None or len(derived) == 0:
        return _empty_figure(title)
    rows = (_machine_column(derived) == str(machine_id)) & _session_rows(derived, session or "")
    frame = derived[rows]
    if len(frame) == 0:
        return _empty_figure(title)
    x_values, x_title, has_x, is_time = _time_axis(frame)
    order = np.argsort(np.asarray(x_values, dtype="datetime64[ns]" if is_time else float),
                       kind="stable")
    frame = frame.iloc[order]
    x_values = (x_values.iloc[order] if isinstance(x_values, pd.Series)
                else np.asarray(x_values)[order])
    has_x = has_x[order]
    flagged = _flagged(frame)
    clean, marked = has_x & ~flagged, has_x & flagged
    if not clean.any() and not (show_flagged and marked.any()):
        return _nothing_drawn(title, 0 if show_flagged else int(marked.sum()))
    colour = _colours_for(colours, [str(machine_id)])[str(machine_id)]
    x_clean = x_values[clean]
    x_marked = x_values[marked]
    x_hover = "%{x}" if is_time else "%{x:.1f} min"
    figure = make_subplots(rows=4, cols=1, shared_xaxes=True, vertical_spacing=0.04,
                           specs=[[{}], [{}], [{"secondary_y": True}], [{}]])
    current_ua = _micro_amp(_floats(frame, col.CURRENT_A))
    ceiling_ua = _micro_amp(_floats(frame, col.CEILING_A))
    speed_rpm = _rpm(_floats(frame, col.SPEED_REV_S))
    rh_pct = _percent(_floats(frame, col.RH))
    temperature_c = to_display(_floats(frame, col.TEMPERATURE_K), "temperature", "degC")
    efficiency_pct = _percent(_floats(frame, col.EFFICIENCY))
    points = int(clean.sum())
    mode = "lines+markers" if points <= WEBGL_THRESHOLD else "markers"
    # Each quantity its own colour; the machine's colour is the current's.
    speed_colour, efficiency_colour = (
        colour_pair if colour not in (colour_pair := ("#E69F00", "#009E73"))
        else ("#555555", "#000000"))
    panels = (
        (1, False, current_ua, "measured current", colour, "solid", "Current %{y:.3g} µA"),
        (1, False, ceiling_ua, "ceiling", "#555555", "dash", "Ceiling %{y:.3g} µA"),
        (2, False, speed_rpm, "speed", speed_colour, "solid", "Speed %{y:.0f} rpm"),
        (3, False, rh_pct, "relative humidity", PALETTE[4], "solid", "RH %{y:.1f} %"),
        (3, True, temperature_c, "temperature", PALETTE[5], "dot", "Temperature %{y:.1f} °C"),
        (4, False, efficiency_pct, "efficiency", efficiency_colour, "solid",
         "Efficiency %{y:.1f} %"),
    )
    for row, secondary, values, name, trace_colour, dash, y_hover in panels:
        shown = values[clean]
        if not np.isfinite(shown).any():
            continue
        trace_mode = "lines" if name == "ceiling" else mode
        figure.add_trace(_scatter(
            points, x=x_clean, y=shown, mode=trace_mode, name=name,
            line={"color": trace_colour, "dash": dash, "width": 1.5},
            marker={"color": trace_colour, "size": 4},
            hovertemplate=f"{label}<br>{x_hover}<br>{y_hover}<extra>{name}</extra>",
        ), row=row, col=1, secondary_y=secondary)
    if show_flagged and marked.any():
        first = True
        for row, values, y_hover in ((1, current_ua, "Current %{y:.3g} µA"),
                                     (2, speed_rpm, "Speed %{y:.0f} rpm"),
                                     (4, efficiency_pct, "Efficiency %{y:.1f} %")):
            if not np.isfinite(values[marked]).any():
                continue
            figure.add_trace(_flagged_trace(
                frame[marked], x_marked, values[marked], {}, x_hover, y_hover,
                showlegend=first, label=label), row=row, col=1)
            first = False
    figure.update_layout(title=title, template="plotly_white", height=820, hovermode="closest")
    figure.update_yaxes(title_text=CURRENT_AXIS, row=1, col=1)
    figure.update_yaxes(title_text=SPEED_AXIS, row=2, col=1)
    figure.update_yaxes(title_text="RH [%]", row=3, col=1, secondary_y=False)
    figure.update_yaxes(title_text=TEMPERATURE_AXIS, row=3, col=1, secondary_y=True,
                        tickformat=".1f")
    figure.update_yaxes(title_text=EFFICIENCY_AXIS, row=4, col=1)
    figure.update_xaxes(title_text=x_title, row=4, col=1)
    missing = int((~has_x).sum())
    if missing:
        _add_notes(figure, [f"{missing} readings have no time and are not shown"])
    return figure


def _circle(radius: float, start: float = 0.0, stop: float = 2 * math.pi,
            points: int = 121) -> tuple[np.ndarray, np.ndarray]:
    angle = np.linspace(start, stop, points)
    return radius * np.cos(angle), radius * np.sin(angle)


def _rectangle(x0: float, x1: float, y0: float, y1: float) -> tuple[list[float], list[float]]:
    return [x0, x1, x1, x0, x0], [y0, y0, y1, y1, y0]


def _cm(length_m: float) -> float:
    return float(to_display(length_m, "length", "cm"))


def carrier_drawing(machine: Machine) -> go.Figure:
    """A small to-scale drawing of one carrier with its charged zone shaded.

    Parameters
    ----------
    machine : Machine
        The machine whose carrier is drawn.

    Returns
    -------
    plotly.graph_objects.Figure
        Axes in cm with equal aspect. Disc: the annulus between the inner and outer radius,
        or sectors covering the sector fill of it (drawn as 12 equal sectors; the real number
        and shape are not in the description). Belt: a front view of the belt over two
        rollers, its width to scale. Cylinder: a side view with the active length shaded.
        Custom: a square of the charged area per revolution.
    """
    carrier = machine.carrier
    label = _escape(machine.label or machine.id)
    colour, zone = "#333333", "rgba(0, 114, 178, 0.45)"
    figure = go.Figure()
    notes: list[str] = []
    outline = {"color": colour, "width": 1.5}

    def shade(x, y, name, hover):
        figure.add_trace(go.Scatter(x=x, y=y, mode="lines", fill="toself", fillcolor=zone,
                                    line={"width": 0.5, "color": zone}, name=name,
                                    hoverinfo="text", text=hover, hoveron="fills"))

    def draw(x, y, name, hover, dash="solid"):
        figure.add_trace(go.Scatter(x=x, y=y, mode="lines", line={**outline, "dash": dash},
                                    name=name, hoverinfo="text", text=hover))

    if isinstance(carrier, Disc):
        outer, inner = _cm(carrier.outer_radius_m), _cm(carrier.inner_radius_m)
        fill = carrier.sector_fill
        sizes = (f"{label}<br>charged zone: radius {inner:.3g} to {outer:.3g} cm, "
                 f"sector fill {fill:.2g}")
        if fill >= 1:
            outer_x, outer_y = _circle(outer)
            inner_x, inner_y = _circle(inner, 2 * math.pi, 0.0)  # opposite winding: a hole
            shade(np.r_[outer_x, inner_x], np.r_[outer_y, inner_y], "charged zone", sizes)
        else:
            pitch = 2 * math.pi / _DISC_SECTORS_DRAWN
            xs, ys = [], []
            for number in range(_DISC_SECTORS_DRAWN):
                start = number * pitch
                arc_x, arc_y = _circle(outer, start, start + fill * pitch, 15)
                back_x, back_y = _circle(inner, start + fill * pitch, start, 15)
                xs += [*arc_x, *back_x, arc_x[0], None]
                ys += [*arc_y, *back_y, arc_y[0], None]
            shade(xs, ys, "charged sectors", sizes)
            notes.append(f"Sectors drawn as {_DISC_SECTORS_DRAWN} equal pieces covering "
                         f"{fill:.0%} of the annulus")
        draw(*_circle(outer), "outer radius", f"outer radius {outer:.3g} cm")
        if inner > 0:
            draw(*_circle(inner), "inner radius", f"inner radius {inner:.3g} cm")
        x_title, y_title = "Across the disc [cm]", "Across the disc [cm]"
    elif isinstance(carrier, Belt):
        width = _cm(carrier.width_m)
        diameter = (_cm(carrier.roller_diameter_m) if carrier.roller_diameter_m is not None
                    else None)
        loop = _cm(carrier.loop_length_m) if carrier.loop_length_m is not None else None
        if diameter is None:
            diameter = loop / 8 if loop is not None else width
            notes.append("Roller size not given: rollers drawn for illustration")
        if loop is not None and loop > math.pi * diameter:
            span = (loop - math.pi * diameter) / 2
        else:
            span = max(4 * diameter, 3 * width)
            notes.append("Distance between the rollers not given: drawn for illustration")
        shade(*_rectangle(-width / 2, width / 2, 0.0, span), "charged belt",
              f"{label}<br>belt width {width:.3g} cm")
        roller = 0.6 * width  # half the roller length: rollers a little longer than the belt
        for centre, name in ((0.0, "lower roller"), (span, "upper roller")):
            draw(*_rectangle(-roller, roller, centre - diameter / 2, centre + diameter / 2),
                 name, f"{name}: diameter {diameter:.3g} cm")
        notes.append("Front view: the belt between two rollers")
        x_title, y_title = "Across the belt [cm]", "Along the belt [cm]"
    elif isinstance(carrier, Cylinder):
        radius, length = _cm(carrier.radius_m), _cm(carrier.active_length_m)
        body = 0.6 * length
        shade(*_rectangle(-length / 2, length / 2, -radius, radius), "active length",
              f"{label}<br>active length {length:.3g} cm, radius {radius:.3g} cm")
        draw(*_rectangle(-body, body, -radius, radius), "cylinder", f"radius {radius:.3g} cm")
        draw([-body - 0.15 * length, body + 0.15 * length], [0.0, 0.0], "axis", "axis",
             dash="dashdot")
        notes.append("Side view; the cylinder's full length is not in the description")
        x_title, y_title = "Along the axis [cm]", "Across the cylinder [cm]"
    else:
        side = math.sqrt(float(to_display(carrier.area_per_rev_m2, "area", "cm^2")))
        shade(*_rectangle(-side / 2, side / 2, -side / 2, side / 2), "charged area",
              f"{label}<br>square of side {side:.3g} cm")
        notes.append("Shown as a square of the charged area per revolution")
        x_title, y_title = "Size [cm]", "Size [cm]"
    area = carrier.area_per_rev_m2
    counted = "discs" if isinstance(carrier, Disc) else "carriers"
    if area is not None:
        notes.insert(0, f"Charged area per revolution of one carrier: "
                        f"{float(to_display(area, 'area', 'cm^2')):.4g} cm²"
                        + (f"; {machine.carriers} {counted}" if machine.carriers > 1 else ""))
    figure.update_layout(title=f"{label}: {machine.kind}, to scale", template="plotly_white",
                         showlegend=False, hovermode="closest")
    figure.update_xaxes(title_text=x_title, zeroline=False)
    figure.update_yaxes(title_text=y_title, zeroline=False, scaleanchor="x", scaleratio=1)
    _add_notes(figure, notes)
    return figure


def planner_curve(machine: Machine, speeds_rev_s,
                  densities: Iterable[float] | float = (1.0,)) -> go.Figure:
    """Ceiling current against speed for one machine at one or more relative air densities.

    Parameters
    ----------
    machine : Machine
        The machine.
    speeds_rev_s : array_like
        Speeds [rev/s].
    densities : float or iterable of float
        Relative air densities delta [-] (1 at 101.3 kPa and 20 degC); values that are not
        positive numbers are left out.

    Returns
    -------
    plotly.graph_objects.Figure
        Ceiling [uA] against speed [rpm], one line per density.
    """
    label = _escape(machine.label or machine.id)
    title = f"Ceiling of {label} against speed"
    speeds = np.asarray(speeds_rev_s, dtype=float).ravel()
    speeds = np.sort(speeds[np.isfinite(speeds) & (speeds >= 0)])
    values = densities if np.isscalar(densities) else list(densities)
    chosen = [float(value) for value in np.atleast_1d(np.asarray(values, dtype=float))]
    chosen = [value for value in chosen if math.isfinite(value) and value > 0]
    if speeds.size == 0 or not chosen:
        return _empty_figure(title)
    figure = go.Figure()
    for number, density in enumerate(chosen):
        ceiling = _ceiling_at_density(machine, speeds, density)
        if ceiling is None:
            return _empty_figure(title, "This belt's speed is a linear speed (m/s): give "
                                        "roller_diameter or loop_length for a curve in rpm")
        figure.add_trace(_scatter(
            speeds.size, x=_rpm(speeds), y=_micro_amp(ceiling), mode="lines",
            name=f"relative air density {density:.3g}",
            line={"color": PALETTE[number % len(PALETTE)]},
            hovertemplate=(f"{label}<br>relative air density {density:.3g}"
                           "<br>Speed %{x:.0f} rpm<br>Ceiling %{y:.3g} µA<extra></extra>"),
        ))
    _style(figure, title, SPEED_AXIS, "Ceiling current [µA]")
    figure.update_layout(legend={"title": {"text": "Air"}})
    return figure


#: Most discs drawn one by one in an arrangement diagram; a larger stack is drawn shortened.
_DIAGRAM_DISCS_MAX = 12


def arrangement_diagram(machine: Machine) -> go.Figure:
    """A side view of a disc machine's discs with the units each one counts for.

    Parameters
    ----------
    machine : Machine
        A disc machine with an arrangement; other machines get a diagram of their N carriers
        (or a note where the units were given).

    Returns
    -------
    plotly.graph_objects.Figure
        Discs seen edge on, left to right, each labelled with its role and units; collectors
        drawn above them (straight for fixed collectors, angled halves for split ones); the
        rule in words below. Not to scale.
    """
    from engine.arrangements import ARRANGEMENT_LABELS, disc_roles

    rule = machine.unit_rule
    figure = go.Figure()
    if machine.arrangement:
        sectored = getattr(machine.carrier, "sector_fill", 1.0) < 1.0
        roles = disc_roles(machine.arrangement, machine.collectors or "fixed", machine.discs,
                           sectored)
        title = ARRANGEMENT_LABELS[machine.arrangement].split(":")[0]
    elif machine.units_given is not None:
        roles = []
        title = "units given"
    else:
        roles = [("carrier", machine.collection_factor)] * min(machine.carriers,
                                                               _DIAGRAM_DISCS_MAX)
        title = f"{machine.carriers} carrier{'s' if machine.carriers > 1 else ''}"
    shortened = len(roles) > _DIAGRAM_DISCS_MAX
    if shortened:
        roles = roles[:_DIAGRAM_DISCS_MAX - 2] + roles[-2:]
    split = machine.collectors == "split"
    for position, (role, units) in enumerate(roles):
        moving_inductor = role == "moving inductor"
        colour = "#8C8C8C" if moving_inductor else PALETTE[0]
        figure.add_shape(type="rect", x0=position - 0.08, x1=position + 0.08, y0=-1.0, y1=1.0,
                         fillcolor=colour, line={"color": "#333333", "width": 1})
        words = role if units is None else f"{role}<br>{units:g} unit{'s' if units != 1 else ''}"
        figure.add_annotation(x=position, y=-1.25, text=words, showarrow=False,
                              font={"size": 11}, yanchor="top")
        if moving_inductor:
            continue
        if position == 0 or (roles[0][0] == "moving inductor" and position == 1):
            figure.add_annotation(x=position + 0.3, y=1.45, text="collector", showarrow=False,
                                  font={"size": 10, "color": "#D55E00"}, xanchor="left")
        if split:  # two halves angled toward the nearest neutraliser
            for side in (-1, 1):
                figure.add_shape(type="line", x0=position, y0=1.15, x1=position + 0.25 * side,
                                 y1=1.45, line={"color": "#D55E00", "width": 2})
        else:
            figure.add_shape(type="line", x0=position, y0=1.15, x1=position, y1=1.45,
                             line={"color": "#D55E00", "width": 2})
    if machine.arrangement == "single-disc":
        figure.add_shape(type="rect", x0=0.45, x1=0.55, y0=-0.9, y1=0.9,
                         fillcolor="#E69F00", line={"color": "#333333", "width": 1})
        figure.add_annotation(x=0.5, y=-1.25, text="fixed inductor<br>plate", showarrow=False,
                              font={"size": 11}, yanchor="top")
    if shortened:
        figure.add_annotation(x=_DIAGRAM_DISCS_MAX - 2.5, y=0, text="…", showarrow=False,
                              font={"size": 20})
    width = max(len(roles), 2)
    figure.add_annotation(x=(width - 1) / 2, y=-2.1, showarrow=False, yanchor="top",
                          text=_wrap(_escape(f"{rule.rule} ({rule.basis})"), 70),
                          font={"size": 12})
    figure.update_layout(title=f"{_escape(title)}: {rule.units:g} unit"
                               f"{'s' if rule.units != 1 else ''}, seen edge on (not to scale)",
                         template="plotly_white", showlegend=False, height=300,
                         margin={"l": 10, "r": 10, "t": 40, "b": 10})
    figure.update_xaxes(visible=False, range=[-0.8, width - 0.2])
    figure.update_yaxes(visible=False, range=[-2.6, 1.7])
    return figure


# --- the voltage side ------------------------------------------------------------------------

VOLTAGE_AXIS = "Terminal voltage [kV]"
POWER_AXIS = "Output power [W]"


def load_line_chart(derived: pd.DataFrame | None, machine_id: str,
                    load_line: Mapping[str, object] | None = None,
                    machine: Machine | None = None, session: str | None = None,
                    colours: Mapping[str, str] | None = None,
                    label: str | None = None) -> go.Figure:
    """Current against terminal voltage for one machine (and session), with its load line.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with derived columns (SI units), ``voltage_v`` among them.
    machine_id : str
        The machine to show.
    load_line : mapping, optional
        One row of :func:`engine.analysis.load_line_findings` (display units): the fitted line
        I = I_sc - V / R_leak is drawn from zero to the open-circuit voltage (or to the largest
        measured voltage when the line does not reach zero current).
    machine : Machine, optional
        For the ceiling at the load line's median speed, drawn dashed.
    session : str, optional
        Show only this session.
    colours : mapping of str to str, optional
        Colour per machine id.
    label : str, optional
        Machine label; default the id.

    Returns
    -------
    plotly.graph_objects.Figure
        Current [uA] against terminal voltage [kV]; the output power V I [W] along the line on
        a second axis. Flagged readings are grey x markers.
    """
    label = _escape(label or machine_id)
    title = f"Load line: {label}" + (f", {_escape(session)}" if session else "")
    if derived is None or len(derived) == 0:
        return _empty_figure(title)
    rows = (_machine_column(derived) == str(machine_id)) & _session_rows(derived, session or "")
    frame = derived[rows]
    voltage_kv = to_display(_floats(frame, col.VOLTAGE_V), "voltage", "kV")
    current_ua = _micro_amp(_floats(frame, col.CURRENT_A))
    with_voltage = np.isfinite(voltage_kv) & np.isfinite(current_ua)
    if not with_voltage.any():
        return _empty_figure(title, "No readings with a terminal voltage")
    flagged = _flagged(frame)
    clean, marked = with_voltage & ~flagged, with_voltage & flagged
    colour = _colours_for(colours, [str(machine_id)])[str(machine_id)]
    figure = make_subplots(specs=[[{"secondary_y": True}]])
    figure.add_trace(_scatter(
        int(clean.sum()), x=voltage_kv[clean], y=current_ua[clean], mode="markers",
        name="readings", marker={"color": colour, "size": 6, "opacity": 0.8},
        hovertemplate="Voltage %{x:.3g} kV<br>Current %{y:.3g} µA<extra></extra>"),
        secondary_y=False)
    if marked.any():
        figure.add_trace(_flagged_trace(frame[marked], voltage_kv[marked], current_ua[marked],
                                        {}, "Voltage %{x:.3g} kV", "Current %{y:.3g} µA",
                                        label=label), secondary_y=False)
    notes: list[str] = []
    line = dict(load_line or {})
    short_ua = _number(line.get("short_circuit_current_uA"))
    resistance = _number(line.get("leakage_resistance_GOhm"))
    open_kv = _number(line.get("open_circuit_voltage_kV"))
    top_kv = float(np.nanmax(voltage_kv[with_voltage]))
    if math.isfinite(short_ua):
        end_kv = open_kv if math.isfinite(open_kv) and open_kv > 0 else top_kv
        line_kv = np.linspace(0.0, end_kv, 101)
        # I [uA] = I_sc [uA] - V [kV] / R [GOhm]
        line_ua = short_ua - (line_kv / resistance if math.isfinite(resistance) else 0.0)
        figure.add_trace(go.Scatter(
            x=line_kv, y=line_ua, mode="lines", name="fitted load line",
            line={"color": colour, "width": 2},
            hovertemplate=(f"Fit: I_sc = {short_ua:.3g} µA, R_leak = {resistance:.3g} GΩ"
                           "<br>Voltage %{x:.3g} kV<br>Current %{y:.3g} µA<extra></extra>")),
            secondary_y=False)
        figure.add_trace(go.Scatter(
            x=line_kv, y=line_kv * 1e3 * line_ua * 1e-6, mode="lines", name="output power",
            line={"color": PALETTE[3], "dash": "dot", "width": 1.5},
            hovertemplate="Voltage %{x:.3g} kV<br>Power %{y:.3g} W<extra></extra>"),
            secondary_y=True)
        if math.isfinite(open_kv) and open_kv > 0:
            notes.append(f"Open-circuit voltage {open_kv:.3g} kV, short-circuit current "
                         f"{short_ua:.3g} µA, leakage {resistance:.3g} GΩ")
    if line.get("load_line_notes"):
        notes.extend(_escape(text) for text in str(line["load_line_notes"]).split("; "))
    speed = _number(line.get("load_line_speed_rev_s"))
    if machine is not None and math.isfinite(speed):
        ceiling = _ceiling_at_density(machine, speed, _median_density(frame[with_voltage]))
        if ceiling is not None:
            ceiling_ua = float(_micro_amp(ceiling))
            end = max(top_kv, open_kv if math.isfinite(open_kv) else 0.0)
            figure.add_trace(go.Scatter(
                x=[0.0, end], y=[ceiling_ua, ceiling_ua], mode="lines",
                name=f"ceiling at {float(_rpm(speed)):.0f} rpm",
                line={"color": colour, "dash": "dash"},
                hovertemplate="Ceiling %{y:.3g} µA<extra></extra>"), secondary_y=False)
    figure.update_layout(title=title, template="plotly_white", hovermode="closest", height=500,
                         legend={"orientation": "h", "x": 0, "y": -0.22, "yanchor": "top"})
    figure.update_xaxes(title_text=VOLTAGE_AXIS, rangemode="tozero")
    figure.update_yaxes(title_text=CURRENT_AXIS, rangemode="tozero", secondary_y=False)
    figure.update_yaxes(title_text=POWER_AXIS, rangemode="tozero", secondary_y=True,
                        showgrid=False, tickformat=".2~g")
    _add_notes(figure, notes)
    return figure


def sessions_compared(derived: pd.DataFrame | None, machine_id: str, session_a: str,
                      session_b: str, comparison: Mapping[str, object] | None = None,
                      label: str | None = None) -> go.Figure:
    """Efficiency against speed for two sessions of one machine, as a before/after chart.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with derived columns (SI units).
    machine_id : str
        The machine.
    session_a, session_b : str
        The earlier ("before") and the later ("after") session.
    comparison : mapping, optional
        The result of :func:`engine.analysis.compare_sessions` for these sessions: its adjusted
        (else plain) difference and 95 % interval are written on the chart.
    label : str, optional
        Machine label; default the id.

    Returns
    -------
    plotly.graph_objects.Figure
        Clean readings of each session as points (before in grey-blue, after in orange), and
        the median efficiency of each speed step as a line, against speed [rpm].
    """
    label = _escape(label or machine_id)
    title = f"{label}: '{_escape(session_a)}' and '{_escape(session_b)}'"
    if derived is None or len(derived) == 0:
        return _empty_figure(title)
    figure = go.Figure()
    clean = ~_flagged(derived)
    machine_rows = _machine_column(derived) == str(machine_id)
    speed_rpm = _rpm(_floats(derived, col.SPEED_REV_S))
    efficiency_pct = _percent(_floats(derived, col.EFFICIENCY))
    for session, colour, name in ((session_a, "#56B4E9", "before"),
                                  (session_b, "#D55E00", "after")):
        rows = machine_rows & clean & _session_rows(derived, session) \
            & np.isfinite(speed_rpm) & np.isfinite(efficiency_pct)
        if not rows.any():
            continue
        shown = _escape(session) or name
        figure.add_trace(_scatter(
            int(rows.sum()), x=speed_rpm[rows], y=efficiency_pct[rows], mode="markers",
            name=shown, legendgroup=name, marker={"color": colour, "size": 6, "opacity": 0.55},
            hovertemplate=f"{shown}<br>Speed %{{x:.0f}} rpm<br>Efficiency %{{y:.1f}} %"
                          "<extra></extra>"))
        # The median of each speed step (speeds rounded to 2 % steps of the largest one).
        step = max(float(np.nanmax(speed_rpm[rows])) * 0.02, 1e-9)
        steps = pd.DataFrame({"speed": np.round(speed_rpm[rows] / step) * step,
                              "efficiency": efficiency_pct[rows]})
        medians = steps.groupby("speed")["efficiency"].median()
        figure.add_trace(go.Scatter(
            x=medians.index.to_numpy(), y=medians.to_numpy(), mode="lines",
            name=f"{shown}, median per speed step", legendgroup=name,
            line={"color": colour, "width": 3},
            hovertemplate=f"{shown}, median<br>Speed %{{x:.0f}} rpm<br>Efficiency %{{y:.1f}} %"
                          "<extra></extra>"))
    if not figure.data:
        return _empty_figure(title, "No clean readings of these sessions")
    _style(figure, title, SPEED_AXIS, EFFICIENCY_AXIS)
    if comparison:
        adjusted = _number(comparison.get("adjusted_difference"))
        interval = comparison.get("adjusted_difference_ci")
        terms = list(comparison.get("adjusted_for") or [])
        if not (math.isfinite(adjusted) and interval is not None):
            adjusted = _number(comparison.get("raw_difference"))
            interval = comparison.get("raw_difference_ci")
            terms = []
        if math.isfinite(adjusted) and interval is not None:
            half = (interval[1] - interval[0]) / 2
            condition = f" at the same {' and '.join(terms)}" if terms else ""
            _add_notes(figure, [f"After minus before{condition}: {adjusted * 100:+.1f} ± "
                                f"{half * 100:.1f} percentage points (95 % interval)"])
    return figure
