"""Benchmark of the evaluation on synthetic data: ``python -m engine.bench``.

::

    python -m engine.bench [--rows N] [--machines M] [--json] [--no-scaling] [--keep DIR]
    python -m engine.bench --dashboard [--rows N] [--imports K] [--json] [--keep DIR]

generates N synthetic readings of M machines of every carrier kind (disc, belt with a roller,
belt known only by its width and read in m/s, cylinder, custom) with an environment log, then
measures on the same data, in one run:

``derive_s``
    :func:`engine.analysis.derive` on the in-memory frame (after the log merge): every derived
    column of the evaluation and the flags.
``numpy_floor_s``
    :func:`numpy_floor`: the same quantities as bare numpy expressions on plain arrays, with no
    validation or bookkeeping; the floor this machine allows.
``per_row_s``
    :func:`per_row_evaluate`: what a straightforward script does, one pint calculation per
    reading from its text cells ("300.12 rpm"); timed on :data:`PER_ROW_SAMPLE` readings and
    scaled to N.
``evaluate_s``
    ``python -m engine evaluate MACHINES READINGS --environment LOG --output OUT.csv`` as a
    separate process, from its start to its exit (interpreter start and imports included).
``peak_rss_mb``
    Peak resident memory of that process [MiB], from the resource usage that ``os.wait4``
    returns for it (``ru_maxrss``, exact on Linux, where it is in KiB). Only that child counts:
    it is started by a small launcher process (:data:`_LAUNCHER`), because Linux keeps, as a
    new program's peak, the peak of the process it replaced, and the benchmark itself holds
    more than a gigabyte by then.
``floor_s``, ``floor_peak_rss_mb``
    :func:`engine.floor.evaluate_floor` (the same work straight in pandas and numpy: pyarrow
    reads, ``merge_asof`` within 5 minutes, bare numpy, a pyarrow CSV write) as a separate
    process, timed and measured like ``evaluate``; the two run in turns, best of two.
``summary_s``
    :func:`engine.analysis.findings` for all machines.
``import_s``
    :meth:`engine.store.Store.import_readings` of all readings and the log into a new SQLite
    store.

with ``evaluate_vs_floor`` = evaluate_s / floor_s, ``derive_vs_floor`` = derive_s /
numpy_floor_s, ``speedup_vs_per_row`` =
per_row_s / derive_s, and ``derive_s`` again at 10^4, 10^5 and 10^6 readings with the growth
exponent b of cost ~ N^b (least squares of log time on log N). Each in-process time is the
best of a few runs with the garbage collector off (the machine is shared: the minimum is the
least disturbed run); derive and the floor take turns, so that load from other programs falls
on both alike. The evaluate process's CPU time and the load average go to stderr beside its
wall time.

The synthetic readings file has the canonical layout (``machine,session,time,speed [rpm],
current [uA],rh [%],temperature [degC],pressure [hPa],note``), one reading per machine and
second, machines interleaved; every other machine has no air columns of its own, so the merge
with the log (one entry a minute over the whole span) fills them. The file has one speed
column in rpm, so it cannot carry the linear-only belt's speed in m/s: those readings are
written with their m/s number under ``speed [rpm]`` and the command line flags them
``speed_kind``, as it should. The in-memory frame holds them as linear speeds.

With ``--dashboard`` the dashboard benchmark runs instead (:mod:`engine.dashboard_bench`).

Progress goes to stderr, results to stdout: a table, or with ``--json`` one object with the
keys of :data:`RESULT_KEYS`. The targets (:data:`TARGETS`) are meant for N = 10^6 and M = 20 on
the project's two-core machine; they are measured here, never asserted by timed tests.
"""

from __future__ import annotations

import argparse
import gc
import json
import math
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import special

from engine import analysis
from engine import columns as col
from engine.carriers import LINEAR, ROTATION, Belt
from engine.ceiling import machine_ceiling
from engine.floor import (
    LOG_HEADER,
    READINGS_HEADER,
    BenchFiles,
    floor_constants,
    floor_inputs,
    numpy_floor,
)
from engine.machines import MachineFile, dump_machines, machine_from_table, site_from_table
from engine.readings import merge_environment
from engine.store import open_store
from engine.units import speed_unit_conversion, unit_conversion, ureg

DEFAULT_ROWS = 1_000_000
DEFAULT_MACHINES = 20
#: Sizes at which derive is timed again for the growth exponent.
SCALING_ROWS = (10_000, 100_000, 1_000_000)
#: Readings timed for the per-row (pint) evaluation; its time is scaled to N.
PER_ROW_SAMPLE = 2_000
#: Keys of the result, in order.
RESULT_KEYS = (
    "rows", "machines", "derive_s", "numpy_floor_s", "per_row_s", "evaluate_s", "floor_s",
    "summary_s", "import_s", "peak_rss_mb", "floor_peak_rss_mb", "derive_vs_floor",
    "evaluate_vs_floor", "speedup_vs_per_row", "scaling", "growth_exponent", "targets", "met",
)
#: Targets at N = 10^6, M = 20: key -> {"at_most": value} or {"at_least": value}.
TARGETS: dict[str, dict[str, float]] = {
    "derive_vs_floor": {"at_most": 3.0},
    "speedup_vs_per_row": {"at_least": 300.0},
    "evaluate_s": {"at_most": 6.0},
    "evaluate_vs_floor": {"at_most": 1.5},
    "peak_rss_mb": {"at_most": 1024.0},
    "summary_s": {"at_most": 1.0},
    "import_s": {"at_most": 10.0},
    "growth_exponent": {"at_most": 1.1},
}

#: Start of the synthetic readings (local time with its UTC offset).
START_TIME = "2026-03-02T08:00:00"
UTC_OFFSET = "+01:00"
#: Interval of the environment log [s].
LOG_INTERVAL_S = 60

# Carrier kinds in the order machines are made; the second belt has no roller (m/s only).
_KIND_CYCLE = ("disc", "belt-roller", "belt-linear", "cylinder", "custom")
# Typical speed of each kind: rpm, or m/s for the linear belt.
_BASE_SPEED = {"disc": 90.0, "belt-roller": 600.0, "belt-linear": 2.0, "cylinder": 180.0,
               "custom": 100.0}
# Decimals written to the files (what a meter or logger shows).
_DECIMALS = {"rpm": 2, "m/s": 3, "uA": 4, "rh": 1, "degC": 2, "hPa": 1}

def _progress(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


# --- Synthetic machines and readings ---------------------------------------------------------

def synthetic_machines(count: int) -> MachineFile:
    """Machines of every carrier kind, cycling disc, roller belt, linear belt, cylinder, custom.

    Parameters
    ----------
    count : int
        Number of machines, at least 1.

    Returns
    -------
    MachineFile
        Site at 240 m; each machine with geometry, speed, current and breakdown-field
        tolerances (the linear belt's current tolerance is absolute, the others relative).
    """
    if count < 1:
        raise ValueError("at least one machine is needed")
    machines = []
    for index in range(count):
        kind = _KIND_CYCLE[index % len(_KIND_CYCLE)]
        size = index // len(_KIND_CYCLE)  # later machines of a kind are a little larger
        table: dict[str, object] = {"id": f"bench-{index + 1:02d}-{kind}",
                                    "label": f"Benchmark {kind} machine {index + 1}"}
        tolerance: dict[str, object] = {"speed": "1 %", "current": "2 %",
                                        "breakdown_field": "10 %"}
        if kind == "disc":
            table.update(carrier="disc", outer_diameter=f"{40 + 2 * size} cm",
                         inner_diameter="24 cm", sector_fill=0.5, carriers=2)
            tolerance.update(outer_diameter="1 mm", inner_diameter="1 mm", sector_fill=0.02)
        elif kind == "belt-roller":
            table.update(carrier="belt", width=f"{5 + size} cm", roller_diameter="5 cm")
            tolerance.update(width="0.5 mm", roller_diameter="0.2 mm")
        elif kind == "belt-linear":
            table.update(carrier="belt", width=f"{30 + 5 * size} mm")
            tolerance.update(width="0.5 mm", current="0.01 uA")
        elif kind == "cylinder":
            table.update(carrier="cylinder", diameter=f"{12 + size} cm", active_length="30 cm")
            tolerance.update(diameter="0.5 mm", active_length="2 mm")
        else:
            table.update(carrier="custom", area_per_rev=f"{410 + 20 * size} cm^2", carriers=6)
            tolerance.update(area_per_rev="4 %")
        table["tolerance"] = tolerance
        machines.append(machine_from_table(table, f"benchmark machine {index + 1}"))
    return MachineFile(site_from_table({"altitude": "240 m"}), tuple(machines))


@dataclass(frozen=True)
class SyntheticData:
    """Synthetic readings and their environment log, in memory.

    Attributes
    ----------
    machine_file : MachineFile
        The machines.
    readings : pandas.DataFrame
        Columns :data:`engine.columns.READING_COLUMNS` (SI units) as the readings import gives
        them, before the log merge: air columns empty for every other machine.
    environment : pandas.DataFrame
        Columns :data:`engine.columns.ENVIRONMENT_COLUMNS` (SI units), one entry a minute.
    machine_codes : numpy.ndarray
        Index of each reading's machine in ``machine_file.machines``.
    readings_text : dict of str to numpy.ndarray
        The readings file's columns (header -> values), numbers as shown (NaN for blank).
    log_text : dict of str to numpy.ndarray
        The log file's columns.
    """

    machine_file: MachineFile
    readings: pd.DataFrame
    environment: pd.DataFrame
    machine_codes: np.ndarray
    readings_text: dict[str, np.ndarray]
    log_text: dict[str, np.ndarray]


def _air_at(seconds: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Invented room air over a day: RH [%], temperature [degC], pressure [hPa]."""
    rh_pct = 55.0 + 20.0 * np.sin(2 * np.pi * seconds / 18_000.0)
    temperature_c = 20.0 + 2.0 * np.sin(2 * np.pi * seconds / 86_400.0 + 1.0)
    pressure_hpa = 985.0 + 3.0 * np.sin(2 * np.pi * seconds / 108_000.0)
    return rh_pct, temperature_c, pressure_hpa


def _local_times(seconds: np.ndarray) -> tuple[pd.Series, np.ndarray]:
    """Times at whole seconds from the start: zone-aware values and their ISO texts."""
    local = np.datetime64(START_TIME, "s") + seconds.astype("timedelta64[s]")
    text = np.char.add(np.datetime_as_string(local, unit="s"), UTC_OFFSET).astype(object)
    zone = pd.Timestamp(START_TIME + UTC_OFFSET).tz
    stamps = pd.Series(pd.DatetimeIndex(local.astype("datetime64[us]")).tz_localize(zone))
    return stamps, text


def synthetic_data(machine_file: MachineFile, rows: int, seed: int = 0) -> SyntheticData:
    """Readings of all machines, one per machine and second, and a log of the room air.

    Parameters
    ----------
    machine_file : MachineFile
        The machines (e.g. :func:`synthetic_machines`).
    rows : int
        Number of readings, at least 1.
    seed : int, optional
        Seed of the random generator.

    Returns
    -------
    SyntheticData

    Notes
    -----
    Row i is of machine i mod M at second i div M. Speeds swing by +-25 % around a typical
    value of the kind; the efficiency follows a logistic decline with humidity (dry value 0.25
    to 0.6, half at about 62 % RH) with 3 % scatter; sessions change every hour. Machines of
    even index carry their own air readings (the log's air plus a little scatter); the others
    leave the air columns empty for the merge. Numbers are rounded as a meter would show them,
    and the SI frame is made from the rounded numbers with the engine's own unit factors.
    """
    if rows < 1:
        raise ValueError("at least one reading is needed")
    rng = np.random.default_rng(seed)
    machines = machine_file.machines
    count = len(machines)
    codes = np.arange(rows, dtype=np.intp) % count
    second = np.arange(rows, dtype=np.int64) // count
    kinds = np.array([_KIND_CYCLE[index % len(_KIND_CYCLE)] for index in range(count)])
    linear = kinds[codes] == "belt-linear"

    rh_pct, temperature_c, pressure_hpa = _air_at(second.astype(float))
    base = np.array([_BASE_SPEED[kind] for kind in kinds])
    phase = np.arange(count) * 0.7
    swing = 1.0 + 0.25 * np.sin(2 * np.pi * second / 1_020.0 + phase[codes])
    speed_shown = base[codes] * swing * (1.0 + 0.005 * rng.standard_normal(rows))
    speed_shown = np.where(linear, np.round(speed_shown, _DECIMALS["m/s"]),
                           np.round(speed_shown, _DECIMALS["rpm"]))

    rpm_scale, _kind = speed_unit_conversion("rpm")
    metre_scale, _kind = speed_unit_conversion("m/s")
    pressure_pa = pressure_hpa * 100.0
    temperature_k = temperature_c + 273.15
    ceiling = np.empty(rows)
    for index, machine in enumerate(machines):  # one vectorised call per machine
        mine = codes == index
        kind = LINEAR if kinds[index] == "belt-linear" else ROTATION
        scale = metre_scale if kind == LINEAR else rpm_scale
        ceiling[mine] = machine_ceiling(machine, speed_shown[mine] * scale, kind,
                                        pressure_pa[mine], temperature_k[mine]).ceiling_current_a
    dry = 0.25 + 0.35 * ((np.arange(count) * 0.37) % 1.0)
    efficiency = dry[codes] * special.expit(-(rh_pct / 100.0 - 0.62) / 0.05)
    efficiency *= 1.0 + 0.03 * rng.standard_normal(rows)
    current_shown = np.round(efficiency * ceiling * 1e6, _DECIMALS["uA"])

    own_air = codes % 2 == 0
    blank = np.full(rows, np.nan)
    rh_shown = np.where(own_air, np.round(rh_pct + 0.5 * rng.standard_normal(rows),
                                          _DECIMALS["rh"]), blank)
    temperature_shown = np.where(own_air, np.round(temperature_c, _DECIMALS["degC"]), blank)
    pressure_shown = np.where(own_air, np.round(pressure_hpa, _DECIMALS["hPa"]), blank)

    seconds_used = int(second[-1]) + 1
    stamps, stamp_text = _local_times(np.arange(seconds_used, dtype=np.int64))
    session_names = np.array([f"run {hour + 1}" for hour in range(seconds_used // 3600 + 1)],
                             dtype=object)
    machine_ids = np.array([machine.id for machine in machines], dtype=object)
    notes = np.full(rows, "", dtype=object)
    notes[:count] = "benchmark start"

    current_scale, _offset = unit_conversion("uA", "current")
    rh_scale, _offset = unit_conversion("%", "fraction")
    kelvin_scale, kelvin_offset = unit_conversion("degC", "temperature")
    pascal_scale, _offset = unit_conversion("hPa", "pressure")
    readings = pd.DataFrame({
        col.ROW: np.arange(1, rows + 1, dtype=np.int64),
        col.MACHINE: pd.array(machine_ids[codes], dtype="str"),
        col.SESSION: pd.array(session_names[second // 3600], dtype="str"),
        col.TIME: stamps.take(second).reset_index(drop=True),
        col.ELAPSED_S: second.astype(float),
        col.SPEED_REV_S: np.where(linear, np.nan, speed_shown * rpm_scale),
        col.BELT_SPEED_M_S: np.where(linear, speed_shown * metre_scale, np.nan),
        col.CURRENT_A: current_shown * current_scale,
        col.RH: rh_shown * rh_scale,
        col.TEMPERATURE_K: temperature_shown * kelvin_scale + kelvin_offset,
        col.PRESSURE_PA: pressure_shown * pascal_scale,
        col.VOLTAGE_V: np.full(rows, np.nan),
        col.NOTE: pd.array(notes, dtype="str"),
        col.FLAGS: pd.array(np.full(rows, "", dtype=object), dtype="str"),
    }, columns=list(col.READING_COLUMNS))

    # The log starts a minute early and ends a minute late, so every reading has an entry near.
    log_seconds = np.arange(-LOG_INTERVAL_S, seconds_used + 2 * LOG_INTERVAL_S, LOG_INTERVAL_S,
                            dtype=np.int64)
    log_rh, log_temperature, log_pressure = _air_at(log_seconds.astype(float))
    log_rh = np.round(log_rh + 0.3 * rng.standard_normal(log_seconds.size), _DECIMALS["rh"])
    log_temperature = np.round(log_temperature, _DECIMALS["degC"])
    log_pressure = np.round(log_pressure, _DECIMALS["hPa"])
    log_stamps, log_stamp_text = _local_times(log_seconds)
    environment = pd.DataFrame({
        col.ROW: np.arange(1, log_seconds.size + 1, dtype=np.int64),
        col.TIME: log_stamps,
        col.ELAPSED_S: (log_seconds - log_seconds[0]).astype(float),
        col.RH: log_rh * rh_scale,
        col.TEMPERATURE_K: log_temperature * kelvin_scale + kelvin_offset,
        col.PRESSURE_PA: log_pressure * pascal_scale,
    }, columns=list(col.ENVIRONMENT_COLUMNS))

    readings_text = dict(zip(READINGS_HEADER, (
        machine_ids[codes], session_names[second // 3600], stamp_text[second], speed_shown,
        current_shown, rh_shown, temperature_shown, pressure_shown, notes), strict=True))
    log_text = dict(zip(LOG_HEADER, (log_stamp_text, log_rh, log_temperature, log_pressure),
                        strict=True))
    return SyntheticData(machine_file, readings, environment, codes, readings_text, log_text)


def write_files(data: SyntheticData, folder: Path) -> BenchFiles:
    """Write the machines file, the readings CSV and the log CSV into ``folder``.

    Parameters
    ----------
    data : SyntheticData
    folder : Path
        Created if missing.

    Returns
    -------
    BenchFiles
        ``machines.toml``, ``readings.csv`` and ``environment.csv`` in the canonical layouts.
    """
    folder.mkdir(parents=True, exist_ok=True)
    files = BenchFiles(folder / "machines.toml", folder / "readings.csv",
                       folder / "environment.csv")
    files.machines.write_text(dump_machines(data.machine_file), encoding="utf-8")
    # Rounded floats print in their shortest form ("123.45"); NaN prints as an empty cell.
    pd.DataFrame(data.readings_text).to_csv(files.readings, index=False, na_rep="",
                                            lineterminator="\n")
    pd.DataFrame(data.log_text).to_csv(files.environment, index=False, na_rep="",
                                       lineterminator="\n")
    return files


# --- The per-row script ---------------------------------------------------------------------

def per_row_cells(frame: pd.DataFrame, positions: np.ndarray) -> list[tuple[str, ...]]:
    """Text cells of some readings as a script reading a file would see them.

    Parameters
    ----------
    frame : pandas.DataFrame
        Merged readings (SI units).
    positions : numpy.ndarray
        Positions of the readings wanted.

    Returns
    -------
    list of tuple of str
        Per reading: machine id, speed ("90.12 rpm" or "2.013 m/s"), current ("1.234 uA"),
        pressure ("985.2 hPa"; "" when none), temperature ("20.5 degC"; "" when none).
    """
    part = frame.iloc[positions]
    machine = part[col.MACHINE].to_numpy(dtype=object)
    speed = part[col.SPEED_REV_S].to_numpy(dtype=float) * 60.0
    belt_speed = part[col.BELT_SPEED_M_S].to_numpy(dtype=float)
    current = part[col.CURRENT_A].to_numpy(dtype=float) * 1e6
    pressure = part[col.PRESSURE_PA].to_numpy(dtype=float) / 100.0
    temperature = part[col.TEMPERATURE_K].to_numpy(dtype=float) - 273.15
    cells = []
    for index in range(len(part)):  # a benchmark of the per-row way: the loop is the point
        speed_text = (f"{belt_speed[index]:.10g} m/s" if np.isnan(speed[index])
                      else f"{speed[index]:.10g} rpm")
        cells.append((
            str(machine[index]), speed_text, f"{current[index]:.10g} uA",
            "" if np.isnan(pressure[index]) else f"{pressure[index]:.10g} hPa",
            "" if np.isnan(temperature[index]) else f"{temperature[index]:.10g} degC",
        ))
    return cells


def per_row_evaluate(cells: Sequence[tuple[str, ...]], machine_file: MachineFile
                     ) -> tuple[np.ndarray, np.ndarray]:
    """Ceiling and efficiency of each reading, one pint calculation per reading.

    This is the straightforward script the engine is measured against, not engine code.

    Parameters
    ----------
    cells : sequence of tuple of str
        :func:`per_row_cells`.
    machine_file : MachineFile

    Returns
    -------
    tuple of numpy.ndarray
        Ceiling current [A] and efficiency [-] per reading.
    """
    quantity = ureg.Quantity
    geometry = {}
    for machine in machine_file.machines:
        area = machine.carrier.area_per_rev_m2
        width = machine.carrier.width_m if isinstance(machine.carrier, Belt) else None
        geometry[machine.id] = (
            None if area is None else quantity(area, "m**2"),
            None if width is None else quantity(width, "m"),
            machine.carriers * machine.collection_factor,
            quantity(machine.reference_field_v_m, "V/m"),
        )
    vacuum_permittivity = quantity(8.8541878128e-12, "F/m")
    reference_pressure = quantity(101.3, "kPa")
    reference_temperature = quantity(293.15, "K")
    site_pressure = quantity(machine_file.site.pressure_pa, "Pa")
    site_temperature = quantity(machine_file.site.temperature_k, "K")
    ceilings = np.empty(len(cells))
    efficiencies = np.empty(len(cells))
    for index, (machine_id, speed_text, current_text, pressure_text,
                temperature_text) in enumerate(cells):
        area, width, count, field = geometry[machine_id]
        speed = quantity(speed_text)
        if speed.check("[length] / [time]"):
            swept = width * speed
        else:
            # pint's revolution is 2 pi radians: count turns, not radians
            swept = area * quantity(speed.to("turn / second").magnitude, "1/s")
        pressure = quantity(pressure_text) if pressure_text else site_pressure
        temperature = quantity(temperature_text).to("K") if temperature_text else site_temperature
        delta = (pressure / reference_pressure) * (reference_temperature / temperature)
        ceiling = (vacuum_permittivity * field * delta * swept * count).to("A")
        ceilings[index] = ceiling.magnitude
        efficiencies[index] = (quantity(current_text) / ceiling).to("dimensionless").magnitude
    return ceilings, efficiencies


# --- Timing -----------------------------------------------------------------------------------

def _best_times(works: Mapping[str, Callable[[], object]], least_runs: int = 3,
                most_runs: int = 9, budget_s: float = 5.0
                ) -> tuple[dict[str, float], dict[str, object]]:
    """Shortest wall time of each of a few works [s] and the result of each one's last run.

    The works take turns, so that a spell of load from other programs on the shared machine
    falls on all of them alike. Each runs at least ``least_runs`` times, then more while the
    total stays within ``budget_s``. The garbage collector is off while a work runs, as in
    :mod:`timeit`.
    """
    best = dict.fromkeys(works, math.inf)
    results: dict[str, object] = dict.fromkeys(works)
    total = 0.0
    runs = 0
    while runs < least_runs or (runs < most_runs and total + sum(best.values()) <= budget_s):
        for name, work in works.items():
            results[name] = None  # free the previous result before the next run
            gc.collect()
            gc.disable()
            try:
                start = time.perf_counter()
                results[name] = work()
                elapsed = time.perf_counter() - start
            finally:
                gc.enable()
            best[name] = min(best[name], elapsed)
            total += elapsed
        runs += 1
    return best, results


def growth_exponent(rows: Sequence[float], seconds: Sequence[float]) -> float:
    """Exponent b of cost ~ N^b: least-squares slope of log(time) on log(N).

    Parameters
    ----------
    rows : sequence of float
        Sizes N, at least two distinct ones.
    seconds : sequence of float
        Times [s], positive.

    Returns
    -------
    float
        b [-].
    """
    log_rows = np.log(np.asarray(rows, dtype=float))
    log_seconds = np.log(np.asarray(seconds, dtype=float))
    centred = log_rows - log_rows.mean()
    return float(np.dot(centred, log_seconds - log_seconds.mean()) / np.dot(centred, centred))


def _merged(data: SyntheticData) -> pd.DataFrame:
    return merge_environment(data.readings, data.environment)


def _time_derive_and_floor(frame: pd.DataFrame, machine_codes: np.ndarray,
                           machine_file: MachineFile) -> tuple[float, float, pd.DataFrame]:
    """Best times of derive and of the numpy floor on the same readings, and derive's frame."""
    inputs = floor_inputs(frame, machine_codes)
    constants = floor_constants(machine_file)
    site = machine_file.site
    times, results = _best_times({
        "derive": lambda: analysis.derive(frame, machine_file),
        "floor": lambda: numpy_floor(inputs, constants, site.pressure_pa, site.temperature_k),
    }, least_runs=5)
    return times["derive"], times["floor"], results["derive"]  # type: ignore[return-value]


def _time_derive(frame: pd.DataFrame, machine_file: MachineFile) -> float:
    times, _results = _best_times({"derive": lambda: analysis.derive(frame, machine_file)})
    return times["derive"]


def _time_per_row(merged: pd.DataFrame, machine_file: MachineFile, sample: int) -> float:
    """Time of the per-row script on ``sample`` readings drawn at random, scaled to all."""
    rows = len(merged)
    positions = np.sort(np.random.default_rng(1).choice(rows, size=sample, replace=False))
    cells = per_row_cells(merged, positions)
    gc.collect()
    start = time.perf_counter()
    per_row_evaluate(cells, machine_file)
    return (time.perf_counter() - start) / sample * rows


def _time_summary(derived: pd.DataFrame, machine_file: MachineFile) -> float:
    times, _results = _best_times({"summary": lambda: analysis.findings(derived, machine_file)},
                                  least_runs=2, most_runs=3)
    return times["summary"]


#: Runs a command as its own child and writes the child's exit status, wall time [s], CPU time
#: [s] and peak resident memory [KiB] as JSON to the file named first. A process started
#: straight from the benchmark would report the benchmark's own peak (Linux carries the
#: high-water mark of the memory image an ``exec`` replaces); the launcher is small, so its
#: child's figure is the child's own.
_LAUNCHER = """
import json, os, subprocess, sys, time
start = time.perf_counter()
child = subprocess.Popen(sys.argv[2:])
_pid, status, usage = os.wait4(child.pid, 0)
elapsed = time.perf_counter() - start
with open(sys.argv[1], "w", encoding="utf-8") as out:
    json.dump({"status": os.waitstatus_to_exitcode(status), "elapsed_s": elapsed,
               "cpu_s": usage.ru_utime + usage.ru_stime, "peak_kib": usage.ru_maxrss}, out)
"""


def _run_child(command: Sequence[str], folder: Path, name: str) -> tuple[float, float]:
    """Wall time [s] and peak resident memory [MiB] of a separate process (via the launcher)."""
    root = Path(__file__).resolve().parents[1]
    environment = dict(os.environ)
    environment["PYTHONPATH"] = os.pathsep.join(
        [str(root)] + ([environment["PYTHONPATH"]] if environment.get("PYTHONPATH") else []))
    figures_path = folder / f"{name}.figures.json"
    figures_path.unlink(missing_ok=True)
    with open(folder / f"{name}.out", "wb") as out, open(folder / f"{name}.err", "wb") as err:
        process = subprocess.Popen([sys.executable, "-c", _LAUNCHER, str(figures_path),
                                    *command], cwd=root, env=environment, stdout=out,
                                   stderr=err, start_new_session=True)
        try:
            process.wait()
        except BaseException:  # interrupted: end the launcher and its child, then pass it on
            os.killpg(process.pid, signal.SIGKILL)
            process.wait()
            raise
    if process.returncode != 0 or not figures_path.exists():
        message = (folder / f"{name}.err").read_text(encoding="utf-8", errors="replace")
        raise RuntimeError(f"{name}: the launcher failed with status {process.returncode}: "
                           f"{message}")
    figures = json.loads(figures_path.read_text(encoding="utf-8"))
    elapsed = float(figures["elapsed_s"])
    # CPU time beside wall time tells the process's own cost from waiting for a shared core.
    _progress(f"{name}: {elapsed:.3g} s wall, {figures['cpu_s']:.3g} s CPU, "
              f"{figures['peak_kib'] / 1024.0:.0f} MiB peak, "
              f"load average {os.getloadavg()[0]:.2f}")
    if figures["status"] != 0:
        message = (folder / f"{name}.err").read_text(encoding="utf-8", errors="replace")
        raise RuntimeError(f"{name} failed with status {figures['status']}: {message}")
    return elapsed, figures["peak_kib"] / 1024.0


def _count_lines(path: Path) -> int:
    with open(path, "rb") as written:
        return sum(block.count(b"\n") for block in iter(lambda: written.read(1 << 20), b""))


def _run_evaluate(files: BenchFiles, folder: Path, rows: int) -> tuple[float, float]:
    """Wall time [s] and peak resident memory [MiB] of the command-line evaluate."""
    output = folder / "evaluated.csv"
    elapsed, peak = _run_child(
        [sys.executable, "-m", "engine", "evaluate", str(files.machines), str(files.readings),
         "--environment", str(files.environment), "--output", str(output)], folder, "evaluate")
    lines = _count_lines(output)
    if lines != rows + 1:
        raise RuntimeError(f"evaluate wrote {lines - 1} readings, expected {rows}")
    return elapsed, peak


def _run_floor(files: BenchFiles, folder: Path, rows: int) -> tuple[float, float]:
    """Wall time [s] and peak memory [MiB] of :func:`evaluate_floor` as a separate process
    (interpreter start and imports included, as for evaluate)."""
    output = folder / "floor.csv"
    elapsed, peak = _run_child(
        [sys.executable, "-m", "engine.floor", str(files.machines),
         str(files.readings), str(files.environment), str(output)], folder, "floor")
    lines = _count_lines(output)
    if lines != rows + 1:
        raise RuntimeError(f"the floor wrote {lines - 1} readings, expected {rows}")
    return elapsed, peak


def _time_import(merged: pd.DataFrame, data: SyntheticData, folder: Path) -> float:
    with open_store(folder / "bench.sqlite3") as store:
        for machine in data.machine_file.machines:
            store.save_machine(machine)
        gc.collect()
        start = time.perf_counter()
        store.import_readings(merged, "benchmark", source="readings.csv",
                              environment=data.environment)
        return time.perf_counter() - start


def _ratio(numerator: float, denominator: float) -> float:
    return numerator / denominator if denominator > 0 else math.inf


def targets_met(result: Mapping[str, object]) -> dict[str, bool | None]:
    """Whether each figure of :data:`TARGETS` is within its bound (None where not measured).

    Parameters
    ----------
    result : mapping
        Figures by key, as in :func:`run_benchmark`.

    Returns
    -------
    dict of str to bool or None
    """
    met: dict[str, bool | None] = {}
    for key, target in TARGETS.items():
        value = result.get(key)
        if value is None or not math.isfinite(float(value)):  # type: ignore[arg-type]
            met[key] = None
        elif "at_most" in target:
            met[key] = float(value) <= target["at_most"]  # type: ignore[arg-type]
        else:
            met[key] = float(value) >= target["at_least"]  # type: ignore[arg-type]
    return met


def run_benchmark(rows: int = DEFAULT_ROWS, machines: int = DEFAULT_MACHINES,
                  scaling_rows: Sequence[int] = SCALING_ROWS, keep: Path | None = None,
                  per_row_sample: int = PER_ROW_SAMPLE) -> dict[str, object]:
    """Generate the synthetic data and measure everything on it.

    Parameters
    ----------
    rows : int
        Readings N.
    machines : int
        Machines M.
    scaling_rows : sequence of int
        Sizes for the growth exponent (empty: no scaling); at least two for an exponent.
    keep : Path, optional
        Folder for the generated files, kept; default a temporary folder, removed afterwards.
    per_row_sample : int
        Readings timed with the per-row script.

    Returns
    -------
    dict
        Keys :data:`RESULT_KEYS`. ``scaling`` is a list of ``{"rows", "derive_s"}``;
        ``growth_exponent`` is None without scaling; ``met`` maps each key of
        :data:`TARGETS` to whether it was met (None where not measured).
    """
    if rows < 1 or machines < 1:
        raise ValueError("rows and machines must be at least 1")
    folder = Path(keep) if keep is not None else Path(tempfile.mkdtemp(prefix="ceiling-bench-"))
    try:
        _progress(f"generating {rows} readings of {machines} machines (load average "
                  f"{os.getloadavg()[0]:.2f})...")
        machine_file = synthetic_machines(machines)
        data = synthetic_data(machine_file, rows)
        files = write_files(data, folder)
        merged = _merged(data)

        _progress("derive and the numpy floor, in turns...")
        derive_s, floor_s, derived = _time_derive_and_floor(merged, data.machine_codes,
                                                            machine_file)
        sample = min(per_row_sample, rows)
        _progress(f"per-row (pint) on {sample} readings...")
        per_row_s = _time_per_row(merged, machine_file, sample)
        _progress("summary...")
        summary_s = _time_summary(derived, machine_file)
        derived = None
        _progress("import into the store...")
        import_s = _time_import(merged, data, folder)
        merged = data = None
        gc.collect()
        _progress("evaluate and its floor (separate processes, in turns, best of two)...")
        evaluate_s = floor_s_process = math.inf
        peak_rss_mb = floor_peak_rss_mb = 0.0
        for _round in range(2):
            seconds, peak = _run_evaluate(files, folder, rows)
            evaluate_s, peak_rss_mb = min(evaluate_s, seconds), max(peak_rss_mb, peak)
            seconds, peak = _run_floor(files, folder, rows)
            floor_s_process = min(floor_s_process, seconds)
            floor_peak_rss_mb = max(floor_peak_rss_mb, peak)

        scaling = []
        for size in scaling_rows:
            if size == rows:
                scaling.append({"rows": int(size), "derive_s": derive_s})
                continue
            _progress(f"scaling: derive at {size} readings...")
            frame = _merged(synthetic_data(machine_file, int(size)))
            seconds = _time_derive(frame, machine_file)
            frame = None
            scaling.append({"rows": int(size), "derive_s": seconds})
        exponent = (growth_exponent([item["rows"] for item in scaling],
                                    [item["derive_s"] for item in scaling])
                    if len({item["rows"] for item in scaling}) >= 2 else None)
    finally:
        if keep is None:
            shutil.rmtree(folder, ignore_errors=True)

    result: dict[str, object] = {
        "rows": rows,
        "machines": machines,
        "derive_s": derive_s,
        "numpy_floor_s": floor_s,
        "per_row_s": per_row_s,
        "evaluate_s": evaluate_s,
        "floor_s": floor_s_process,
        "summary_s": summary_s,
        "import_s": import_s,
        "peak_rss_mb": peak_rss_mb,
        "floor_peak_rss_mb": floor_peak_rss_mb,
        "derive_vs_floor": _ratio(derive_s, floor_s),
        "evaluate_vs_floor": _ratio(evaluate_s, floor_s_process),
        "speedup_vs_per_row": _ratio(per_row_s, derive_s),
        "scaling": scaling,
        "growth_exponent": exponent,
        "targets": TARGETS,
    }
    result["met"] = targets_met(result)
    return {key: result[key] for key in RESULT_KEYS}


# --- Output ---------------------------------------------------------------------------------

_UNITS = {"derive_s": "s", "numpy_floor_s": "s", "per_row_s": "s", "evaluate_s": "s",
          "floor_s": "s", "floor_peak_rss_mb": "MiB", "evaluate_vs_floor": "x",
          "summary_s": "s", "import_s": "s", "peak_rss_mb": "MiB", "derive_vs_floor": "x",
          "speedup_vs_per_row": "x", "growth_exponent": ""}


def format_table(result: Mapping[str, object]) -> str:
    """The result as a plain-text table: figure, value, target and whether it is met."""
    met = result["met"]
    lines = [f"benchmark: {result['rows']} readings, {result['machines']} machines",
             f"{'figure':<20} {'value':>12}  {'target':<10} met"]
    for key in _UNITS:
        value = result[key]
        shown = "-" if value is None else f"{value:.4g} {_UNITS[key]}".rstrip()
        target = TARGETS.get(key)
        target_text = ""
        if target:
            (bound, limit), = target.items()
            target_text = ("<= " if bound == "at_most" else ">= ") + f"{limit:g}"
        verdict = "" if key not in met else {True: "yes", False: "NO", None: "-"}[met[key]]
        lines.append(f"{key:<20} {shown:>12}  {target_text:<10} {verdict}")
    if result["scaling"]:
        lines.append("scaling of derive:")
        lines += [f"  {item['rows']:>10} readings  {item['derive_s']:.4g} s"
                  for item in result["scaling"]]
    return "\n".join(lines)


def _rows_list(text: str) -> list[int]:
    try:
        sizes = [int(part) for part in text.split(",") if part.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a list of whole numbers") from None
    if not sizes or min(sizes) < 1:
        raise argparse.ArgumentTypeError("sizes must be whole numbers of at least 1")
    return sizes


def _positive(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError("must be at least 1")
    return value


def _finite(value: object) -> object:
    """The value with every non-finite float replaced by None, for strict JSON."""
    if isinstance(value, dict):
        return {key: _finite(item) for key, item in value.items()}
    if isinstance(value, (list, tuple)):
        return [_finite(item) for item in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``python -m engine.bench``."""
    parser = argparse.ArgumentParser(
        prog="python -m engine.bench",
        description="Benchmark of the evaluation on synthetic readings of every carrier kind.")
    parser.add_argument("--rows", type=_positive, default=DEFAULT_ROWS,
                        help=f"readings N (default {DEFAULT_ROWS})")
    parser.add_argument("--machines", type=_positive, default=DEFAULT_MACHINES,
                        help=f"machines M (default {DEFAULT_MACHINES})")
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--scaling", action=argparse.BooleanOptionalAction, default=True,
                        help="also time derive at 10^4, 10^5 and 10^6 readings (default on)")
    parser.add_argument("--scaling-rows", type=_rows_list, default=None, help=argparse.SUPPRESS)
    parser.add_argument("--per-row-sample", type=_positive, default=PER_ROW_SAMPLE,
                        help=argparse.SUPPRESS)
    parser.add_argument("--keep", type=Path, help="keep the generated files (and the evaluate "
                        "output and the store) in this folder; default a temporary folder")
    parser.add_argument("--dashboard", action="store_true",
                        help="benchmark the dashboard instead: a store of N readings, the "
                             "Compare and Sessions pages driven, findings checked for "
                             "exactness (see engine.dashboard_bench)")
    parser.add_argument("--store", metavar="postgresql://...",
                        help="a lab on a PostgreSQL server (an empty database of its own): "
                             "benchmark saving into it against an SQLite file (see "
                             "engine.store_bench), or with --dashboard, the dashboard on it")
    parser.add_argument("--imports", type=_positive, default=None,
                        help="with --dashboard: imports the readings are saved in "
                             "(default 10)")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the benchmark; print the table or the JSON object; return 0."""
    args = build_parser().parse_args(argv)
    if args.store and not args.dashboard:
        from engine import store_bench

        result = store_bench.run_store_benchmark(args.store, args.rows, args.machines)
        print(json.dumps(_finite(result)) if args.json
              else store_bench.format_store_table(result))
        return 0
    if args.dashboard:
        from engine import dashboard_bench

        result = dashboard_bench.run_dashboard_benchmark(
            args.rows, args.machines, args.imports or dashboard_bench.DEFAULT_IMPORTS, args.keep,
            store=args.store)
        print(json.dumps(_finite(result)) if args.json
              else dashboard_bench.format_dashboard_table(result))
        return 0
    scaling_rows = (args.scaling_rows or list(SCALING_ROWS)) if args.scaling else []
    result = run_benchmark(args.rows, args.machines, scaling_rows, args.keep,
                           args.per_row_sample)
    if args.json:
        print(json.dumps(_finite(result)))
    else:
        print(format_table(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
