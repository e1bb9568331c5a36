"""Drive the dashboard through Streamlit's AppTest and time it: the app half of the dashboard
benchmark (``python -m engine.bench --dashboard``), run by it as a separate process so that the
memory measured is the app's alone.

::

    python -m pages._dashboard_bench STORE MACHINE SESSION

with ``STORE`` the store file, and ``MACHINE`` / ``SESSION`` the long session that the Sessions
page shows. Prints one JSON object (keys of :data:`KEYS`) on stdout.
"""

from __future__ import annotations

import json
import os
import resource
import sys
import time
from pathlib import Path

from streamlit.testing.v1 import AppTest

ROOT = Path(__file__).resolve().parents[1]
PAGES = ("pages/overview.py", "pages/machines.py", "pages/readings.py", "pages/compare.py",
         "pages/sessions.py", "pages/planner.py", "pages/report.py", "pages/safety.py")
#: Keys of the printed object.
KEYS = ("compare_first_s", "compare_rerun_s", "compare_rh_rerun_s", "sessions_s", "overview_s",
        "chart_bytes_max", "chart_bytes", "app_memory_dashboard_mb", "app_memory_report_mb",
        "app_memory_mb", "app_peak_memory_mb")
#: Longest a page may run in AppTest before it counts as hung [s].
PAGE_TIMEOUT_S = 1800


def _resident_mb() -> float:
    """Resident memory of this process now [MiB] (Linux /proc; NaN elsewhere)."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024
    except OSError:
        pass
    return float("nan")


def _timed(step) -> float:
    start = time.perf_counter()
    step()
    return time.perf_counter() - start


def _check(app: AppTest, where: str) -> None:
    if app.exception:
        raise RuntimeError(f"{where}: {[item.value for item in app.exception]}")


def _chart_sizes(app: AppTest, page: str) -> dict[str, int]:
    """Bytes of each chart's JSON as the browser gets it, by widget key."""
    sizes = {}
    for number, element in enumerate(app.get("plotly_chart")):
        proto = element.proto
        sizes[f"{page}:{proto.id[-12:] or number}"] = len(proto.spec.encode("utf-8"))
    return sizes


def drive(machine: str, session: str) -> dict[str, object]:
    """Run the pages in the order a user would, timing the figures of the benchmark."""
    app = AppTest.from_file(str(ROOT / "app.py"), default_timeout=PAGE_TIMEOUT_S)
    app.session_state["demo-declined"] = True

    def first_compare() -> None:
        app.run()
        app.switch_page("pages/compare.py")
        app.run()

    result: dict[str, object] = {"compare_first_s": _timed(first_compare)}
    _check(app, "compare, first draw")
    sizes = _chart_sizes(app, "compare")
    machines = app.multiselect(key="compare-machines")
    everything = list(machines.value)
    result["compare_rerun_s"] = _timed(lambda: machines.set_value(everything[1:]).run())
    _check(app, "compare, a machine left out")
    sizes.update(_chart_sizes(app, "compare-filtered"))
    app.multiselect(key="compare-machines").set_value(everything).run()
    humidity = app.slider(key="compare-rh")
    low, high = humidity.value
    result["compare_rh_rerun_s"] = _timed(
        lambda: humidity.set_value((min(low + 10, high), high)).run())
    _check(app, "compare, humidity narrowed")
    app.slider(key="compare-rh").set_value((low, high)).run()

    app.switch_page("pages/sessions.py")
    app.run()
    _check(app, "sessions")

    def long_session() -> None:
        app.selectbox(key="sessions-machine").set_value(machine).run()
        app.selectbox(key="sessions-session").set_value(session).run()

    result["sessions_s"] = _timed(long_session)
    _check(app, "sessions, the long session")
    sizes.update(_chart_sizes(app, "sessions"))

    def overview() -> None:
        app.switch_page("pages/overview.py")
        app.run()

    result["overview_s"] = _timed(overview)  # warm: the app started on it
    _check(app, "overview")
    result["app_memory_dashboard_mb"] = _resident_mb()  # Overview, Compare, Sessions seen
    for page in PAGES:
        app.switch_page(page)
        app.run()
        _check(app, page)
        if page == "pages/report.py":
            result["app_memory_report_mb"] = _resident_mb()
    result["chart_bytes"] = sizes
    result["chart_bytes_max"] = max(sizes.values(), default=0)
    result["app_memory_mb"] = _resident_mb()
    result["app_peak_memory_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return result


def main(argv: list[str]) -> int:
    store, machine, session = argv
    os.environ["CEILING_LAB_DB"] = store
    print(json.dumps(drive(machine, session)))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
