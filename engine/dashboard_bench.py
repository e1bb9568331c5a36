"""Dashboard benchmark: a lab of many readings, the pages driven, findings checked for exactness.

Run as ``python -m engine.bench --dashboard --rows N [--imports K] [--json] [--keep DIR]``:

1. builds a store of N synthetic readings of M machines (:func:`engine.bench.synthetic_data`,
   merged with its environment log) in K imports; the first import is one session of one
   machine with ``min(10^6, N / K)`` readings (the Sessions page's long session), the other
   imports share the rest (``import_s``: all the imports into SQLite; ``cache_s``: building the
   derived cache of every import, :mod:`engine.store.cache`; ``summary_s``: making the lab's
   summary, :mod:`engine.store.summary`, which the first page that needs it after an import
   or a change of machines waits for, once per state of the store: the pages read it after);
2. runs the app in a separate process (``pages/_dashboard_bench.py``, Streamlit's AppTest):
   Compare's first draw after the start, a rerun after one machine is left out, a rerun after
   the humidity range is narrowed, the Sessions page on the long session, a warm Overview
   (``overview_s``), then every page; the size of every chart's JSON, and the app's memory
   after Overview, Compare and Sessions (``app_memory_dashboard_mb``), on the way through
   every page once Report has run (``app_memory_report_mb``) and after visiting every page
   (``app_memory_mb``);
3. checks that the findings (per machine, per machine and session and of a selection of whole
   groups through the lab's summary, :mod:`engine.store.summary`) and a two-session comparison
   computed through the cache equal those computed from all the readings at once
   (``analysis.derive(store.readings())``), to 1e-9 relative
   (``findings_max_relative_difference``, ``findings_exact``).

The engine does not import Streamlit: the app half runs as ``python -m pages._dashboard_bench``.
Targets (:data:`DASHBOARD_TARGETS`) are those of the project's two-core machine at N = 10^7;
they are reported, never asserted by timed tests.
"""

from __future__ import annotations

import gc
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile
import time
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from engine import analysis
from engine import columns as col
from engine.machines import MachineFile
from engine.readings import merge_environment
from engine.store import open_store
from engine.store.cache import DerivedCache

ROOT = Path(__file__).resolve().parents[1]
#: Imports the readings are saved in.
DEFAULT_IMPORTS = 10
#: Readings of the long session (at most; fewer when N / imports is smaller).
LONG_SESSION_ROWS = 1_000_000
#: Name of the long session.
LONG_SESSION = "long run"
#: Relative difference up to which findings count as equal.
EXACT_RELATIVE = 1e-9
#: Keys of the result, in order.
DASHBOARD_KEYS = (
    "rows", "machines", "imports", "long_session_rows", "import_s", "cache_s", "summary_s",
    "compare_first_s", "compare_rerun_s", "compare_rh_rerun_s", "sessions_s", "overview_s",
    "app_memory_dashboard_mb", "app_memory_report_mb", "app_memory_mb", "app_peak_memory_mb",
    "chart_bytes_max", "chart_bytes",
    "findings_max_relative_difference", "findings_exact", "targets", "met",
)
#: Targets at N = 10^7: key -> {"at_most": value}.
DASHBOARD_TARGETS: dict[str, dict[str, float]] = {
    "compare_rerun_s": {"at_most": 2.0},
    "compare_first_s": {"at_most": 8.0},
    "sessions_s": {"at_most": 2.0},
    "app_memory_mb": {"at_most": 1536.0},
    "chart_bytes_max": {"at_most": 2.0 * 1024 * 1024},
    "import_s": {"at_most": 40.0},
}


def _progress(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


def _import_frames(machine_file: MachineFile, rows: int, imports: int):
    """The imports' frames, made one at a time: (name, readings merged with the log, log)."""
    from engine.bench import synthetic_data

    long_rows = max(1, min(LONG_SESSION_ROWS, rows // max(imports, 1)))
    first = MachineFile(machine_file.site, machine_file.machines[:1])
    data = synthetic_data(first, long_rows, seed=1)
    frame = merge_environment(data.readings, data.environment)
    frame[col.SESSION] = pd.array([LONG_SESSION] * len(frame), dtype="str")
    yield "long session", frame, data.environment
    rest = rows - long_rows
    others = max(imports - 1, 1)
    for number in range(others):
        size = rest // others + (1 if number < rest % others else 0)
        if size <= 0:
            continue
        data = synthetic_data(machine_file, size, seed=number + 2)
        yield (f"import {number + 2}", merge_environment(data.readings, data.environment),
               data.environment)


def build_store(path: Path, machine_file: MachineFile, rows: int,
                imports: int) -> tuple[float, float, int]:
    """Save the machines and the readings; build the derived cache.

    Returns
    -------
    tuple of (float, float, float, int)
        Seconds spent in ``import_readings`` (all imports), seconds building the derived
        cache, seconds making the lab's summary (:meth:`DerivedCache.summary`, once per state
        of the store), and the long session's number of readings.
    """
    import_s = 0.0
    long_rows = 0
    with open_store(path) as store:
        for machine in machine_file.machines:
            store.save_machine(machine)
        store.save_site(machine_file.site.spec)
        for name, frame, environment in _import_frames(machine_file, rows, imports):
            long_rows = long_rows or len(frame)
            gc.collect()
            start = time.perf_counter()
            store.import_readings(frame, name, source=f"{name}.csv", environment=environment)
            import_s += time.perf_counter() - start
            _progress(f"  stored {name}: {len(frame):,} readings")
            del frame, environment
        start = time.perf_counter()
        DerivedCache(store).refresh()
        cache_s = time.perf_counter() - start
        start = time.perf_counter()
        DerivedCache(store).summary()
        summary_s = time.perf_counter() - start
    return import_s, cache_s, summary_s, long_rows


def drive_app(path: Path, machine: str) -> dict[str, object]:
    """Run the app half (a separate process) and return what it printed."""
    environment = {**os.environ, "CEILING_LAB_DB": str(path)}
    completed = subprocess.run(
        [sys.executable, "-m", "pages._dashboard_bench", str(path), machine, LONG_SESSION],
        cwd=ROOT, env=environment, capture_output=True, text=True, check=False)
    if completed.returncode != 0:
        raise RuntimeError(f"the app run failed:\n{completed.stderr[-4000:]}")
    return json.loads(completed.stdout.strip().splitlines()[-1])


def _relative_difference(first: object, second: object) -> float:
    """Largest relative difference of two findings values (0 when equal, inf when unlike)."""
    if isinstance(second, tuple) or isinstance(first, tuple):
        if not (isinstance(first, tuple) and isinstance(second, tuple)) or \
                len(first) != len(second):
            return math.inf
        return max((_relative_difference(a, b) for a, b in zip(first, second, strict=True)),
                   default=0.0)
    if isinstance(second, (float, int, np.floating, np.integer)) and \
            not isinstance(second, bool):
        if not isinstance(first, (float, int, np.floating, np.integer)):
            return math.inf
        a, b = float(first), float(second)
        if math.isnan(a) and math.isnan(b):
            return 0.0
        if a == b:
            return 0.0
        return abs(a - b) / max(abs(a), abs(b)) if math.isfinite(a - b) else math.inf
    both_missing = (first is None or first != first) and (second is None or second != second)
    return 0.0 if first == second or both_missing else math.inf


def frames_difference(got: pd.DataFrame, expected: pd.DataFrame) -> float:
    """Largest relative difference between two findings tables (inf if shaped unlike)."""
    if list(got.columns) != list(expected.columns) or len(got) != len(expected):
        return math.inf
    worst = 0.0
    for name in expected.columns:
        for first, second in zip(got[name].tolist(), expected[name].tolist(), strict=True):
            worst = max(worst, _relative_difference(first, second))
    return worst


def exactness(path: Path) -> float:
    """Largest relative difference between findings through the cache and from all at once."""
    with open_store(path) as store:
        machine_file = store.machines()
        cache = DerivedCache(store)
        cached = cache.read(columns=analysis.FINDINGS_INPUT_COLUMNS, machine_file=machine_file)
        # Per machine from the cache's readings; per machine and session, and of a selection
        # of whole groups, from the lab's summary (the pages' way).
        summary = cache.summary(machine_file)
        through_cache = {
            "machine": analysis.findings(cached, machine_file),
            "session": summary.findings,
        }
        machine_ids = sorted(cached[col.MACHINE].unique())[1::2]
        sessions = sorted(cached[col.SESSION].unique())[::2]
        through_cache["groups"] = summary.findings_of(machine_file, machine_ids, sessions)
        del cached
        gc.collect()
        everything = analysis.derive(store.readings(), machine_file.by_id(), machine_file.site)
    at_once = {
        "machine": analysis.findings(everything, machine_file),
        "session": analysis.findings(everything, machine_file, by_session=True),
    }
    chosen = everything[col.MACHINE].isin(machine_ids) & everything[col.SESSION].isin(sessions)
    at_once["groups"] = analysis.findings(everything[chosen], machine_file, by_session=True)
    worst = max(frames_difference(through_cache[key], at_once[key]) for key in at_once)
    # A two-session comparison (verdict, means, adjusted difference) through the cache.
    machine = machine_file.machines[1].id if len(machine_file.machines) > 1 else \
        machine_file.machines[0].id
    of_machine = everything[everything[col.MACHINE] == machine]
    session_names = list(dict.fromkeys(of_machine[col.SESSION].tolist()))
    del everything
    if len(session_names) >= 2:
        with open_store(path) as store:
            cached = DerivedCache(store).read(
                machines=[machine], sessions=[session_names[0], session_names[-1]])
        expected = analysis.compare_sessions(of_machine, machine, session_names[0],
                                             session_names[-1])
        got = analysis.compare_sessions(cached, machine, session_names[0], session_names[-1])
        for key, value in expected.items():
            worst = max(worst, _relative_difference(got.get(key), value) if not
                        isinstance(value, list) else (0.0 if got.get(key) == value else math.inf))
    return worst


def dashboard_targets_met(result: Mapping[str, object]) -> dict[str, bool | None]:
    """Whether each figure of :data:`DASHBOARD_TARGETS` is within its bound."""
    met: dict[str, bool | None] = {}
    for key, target in DASHBOARD_TARGETS.items():
        value = result.get(key)
        try:
            number = float(value)  # type: ignore[arg-type]
        except (TypeError, ValueError):
            met[key] = None
            continue
        met[key] = number <= target["at_most"] if math.isfinite(number) else None
    return met


def run_dashboard_benchmark(rows: int, machines: int = 20, imports: int = DEFAULT_IMPORTS,
                            keep: Path | None = None,
                            store: str | None = None) -> dict[str, object]:
    """Build the store, drive the pages, check the findings; return the figures by key.

    Parameters
    ----------
    rows : int
        Readings N in the store.
    machines : int
        Machines M.
    imports : int
        Imports K the readings are saved in.
    keep : Path, optional
        Folder that keeps the store and its cache; default a temporary folder, removed.
    store : str, optional
        A lab on a PostgreSQL server (``postgresql://...``, an empty database of its own)
        to use instead of an SQLite file; what the benchmark saved there is removed at the end.

    Returns
    -------
    dict
        The keys of :data:`DASHBOARD_KEYS`.
    """
    from engine.bench import synthetic_machines

    folder = Path(keep) if keep is not None else Path(tempfile.mkdtemp(prefix="dashboard-"))
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "dashboard.sqlite3" if store is None else store
    if store is not None:
        with open_store(store) as server:
            if not server.is_empty():
                raise SystemExit(f"--store: {server.location} is not empty; give the benchmark "
                                 "a lab of its own (it removes what it saved afterwards)")
    try:
        machine_file = synthetic_machines(machines)
        _progress(f"building a store of {rows:,} readings in {imports} imports...")
        import_s, cache_s, summary_s, long_rows = build_store(path, machine_file, rows, imports)
        _progress("driving the pages...")
        app = drive_app(path, machine_file.machines[0].id)
        _progress("checking the findings against all readings at once...")
        worst = exactness(path)
    finally:
        if keep is None:
            shutil.rmtree(folder, ignore_errors=True)
        if store is not None:
            _empty_the_lab(store)
    result: dict[str, object] = {
        "rows": rows, "machines": machines, "imports": imports, "long_session_rows": long_rows,
        "import_s": import_s, "cache_s": cache_s, "summary_s": summary_s, **app,
        "findings_max_relative_difference": worst,
        "findings_exact": bool(worst <= EXACT_RELATIVE),
        "targets": DASHBOARD_TARGETS,
    }
    result["met"] = dashboard_targets_met(result)
    return {key: result.get(key) for key in DASHBOARD_KEYS}


def _empty_the_lab(location: str) -> None:
    """Remove what the benchmark saved in a server lab (its imports, machines and site)."""
    with open_store(location) as server:
        for import_id in server.imports()["id"].tolist():
            server.delete_import(import_id)
        for machine in server.machines().machines:
            server.delete_machine(machine.id)
        server.save_site({})


def format_dashboard_table(result: Mapping[str, object]) -> str:
    """The figures as aligned text, each with its target and whether it is met."""
    lines = [f"{'figure':<36} {'value':>14}  target"]
    met = result.get("met") or {}
    for key in DASHBOARD_KEYS:
        if key in ("targets", "met", "chart_bytes"):
            continue
        value = result.get(key)
        target = DASHBOARD_TARGETS.get(key)
        shown = f"{value:,.3f}" if isinstance(value, float) else str(value)
        goal = ""
        if target:
            verdict = {True: "met", False: "NOT met", None: "not measured"}[met.get(key)]
            goal = f"at most {target['at_most']:,.6g} ({verdict})"
        elif key == "findings_max_relative_difference":
            goal = f"at most {EXACT_RELATIVE:g}"
        lines.append(f"{key:<36} {shown:>14}  {goal}")
    for name, size in sorted((result.get("chart_bytes") or {}).items()):
        lines.append(f"  chart {name:<29} {size:>14,}  at most 2 MiB")
    return "\n".join(lines)
