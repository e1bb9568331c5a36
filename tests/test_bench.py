"""The benchmark: it runs at small sizes, reports every figure, and its comparisons are honest.

Timings are never asserted (the machines are shared and noisy); what is checked is that the
benchmark measures what it says: the numpy floor and the per-row script compute the same
numbers as the engine, and the files the command line reads hold the in-memory data.
"""

import json
import math
import tempfile

import numpy as np
import pandas as pd
import pytest

from engine import analysis, bench
from engine import columns as col
from engine.readings import read_environment, read_readings

FLOOR_COLUMNS = (
    col.CEILING_A, col.EFFICIENCY, col.EFFICIENCY_U, col.CHARGE_PER_REV_C,
    col.SURFACE_DENSITY_C_M2, col.RELATIVE_AIR_DENSITY, col.ABS_HUMIDITY_KG_M3,
    col.DEW_POINT_K, col.SPEED_REV_S,
)
TIMES = ("derive_s", "numpy_floor_s", "per_row_s", "evaluate_s", "floor_s", "summary_s",
         "import_s", "peak_rss_mb", "floor_peak_rss_mb", "derive_vs_floor", "evaluate_vs_floor",
         "speedup_vs_per_row")


@pytest.fixture(scope="module")
def sample():
    machine_file = bench.synthetic_machines(5)
    data = bench.synthetic_data(machine_file, 5_000, seed=3)
    merged = bench.merge_environment(data.readings, data.environment)
    return machine_file, data, merged


def test_json_run_at_small_size_has_every_key(capsys, tmp_path, monkeypatch):
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    status = bench.main(["--rows", "3000", "--machines", "5", "--no-scaling", "--json",
                         "--per-row-sample", "200"])
    captured = capsys.readouterr()
    assert status == 0
    result = json.loads(captured.out)
    assert tuple(result) == bench.RESULT_KEYS
    assert result["rows"] == 3000 and result["machines"] == 5
    for key in TIMES:
        assert math.isfinite(result[key]) and result[key] > 0, key
    # A Python process with numpy and pandas loaded holds more than 50 MiB (common practice,
    # no source); a figure below it would not be the child's peak.
    assert result["peak_rss_mb"] > 50
    assert result["derive_vs_floor"] == pytest.approx(result["derive_s"]
                                                      / result["numpy_floor_s"])
    assert result["speedup_vs_per_row"] == pytest.approx(result["per_row_s"]
                                                         / result["derive_s"])
    assert result["scaling"] == [] and result["growth_exponent"] is None
    assert result["targets"] == bench.TARGETS
    assert set(result["met"]) == set(bench.TARGETS)
    assert result["met"]["growth_exponent"] is None
    assert all(isinstance(result["met"][key], bool) for key in bench.TARGETS
               if key != "growth_exponent")
    assert "generating" in captured.err and "evaluate" in captured.err
    assert list(tmp_path.iterdir()) == []  # the temporary folder is removed


def test_table_run_with_scaling_on_tiny_sizes_keeps_the_files(capsys, tmp_path):
    kept = tmp_path / "kept"
    status = bench.main(["--rows", "2000", "--machines", "5", "--scaling-rows",
                         "1000,2000,4000", "--per-row-sample", "100", "--keep", str(kept)])
    out = capsys.readouterr().out
    assert status == 0
    for key in (*TIMES, "growth_exponent"):
        assert key in out, key
    assert "scaling of derive:" in out
    for size in (1000, 2000, 4000):
        assert f"{size} readings" in out
    exponent_line = next(line for line in out.splitlines() if line.startswith("growth_exponent"))
    assert math.isfinite(float(exponent_line.split()[1]))
    assert {path.name for path in kept.iterdir()} >= {"machines.toml", "readings.csv",
                                                     "environment.csv", "evaluated.csv"}


def test_numpy_floor_computes_what_derive_computes(sample):
    machine_file, data, merged = sample
    frame = merged.copy()
    # Bad readings, so that the flag masks are put to the test too.
    current = frame[col.CURRENT_A].to_numpy(copy=True)
    speed = frame[col.SPEED_REV_S].to_numpy(copy=True)
    current[[7, 300]] = np.nan                      # missing_value
    current[[11, 402]] *= 50                        # above_ceiling
    linear_belt = np.flatnonzero(data.machine_codes == 2)[:3]
    speed[linear_belt] = 1.5                        # a rotation rate for a belt without roller
    frame[col.CURRENT_A] = current
    frame[col.SPEED_REV_S] = speed
    derived = analysis.derive(frame, machine_file)
    site = machine_file.site
    floor = bench.numpy_floor(bench.floor_inputs(frame, data.machine_codes),
                              bench.floor_constants(machine_file), site.pressure_pa,
                              site.temperature_k)
    for name in FLOOR_COLUMNS:
        np.testing.assert_allclose(floor[name], derived[name].to_numpy(dtype=float),
                                   rtol=1e-12, equal_nan=True, err_msg=name)
    flags = derived[col.FLAGS]
    for code in ("missing_value", "speed_kind", "above_ceiling"):
        has_code = flags.str.split(";").apply(lambda codes, code=code: code in codes)
        np.testing.assert_array_equal(floor[code], has_code.to_numpy(dtype=bool), err_msg=code)
        assert floor[code].sum() >= 2, code
    assert np.isfinite(floor[col.EFFICIENCY_U]).sum() > 4_900


def test_floor_ceiling_of_the_first_disc_is_hand_worked():
    machine_file = bench.synthetic_machines(1)
    inputs = {"codes": np.array([0]), "speed_rev_s": np.array([1.5]),
              "belt_speed_m_s": np.array([np.nan]), "current_a": np.array([1e-6]),
              "rh": np.array([0.5]), "temperature_k": np.array([293.15]),
              "pressure_pa": np.array([98_500.0])}
    floor = bench.numpy_floor(inputs, bench.floor_constants(machine_file), 101_300.0, 293.15)
    # Hand-worked: disc 40 cm / 24 cm, fill 0.5, 2 discs: A = pi (0.2^2 - 0.12^2) 0.5
    # = 0.0402124 m^2; delta = 98 500 / 101 300 = 0.972359; sigma = 8.8541878128e-12 * 3e6
    # * 0.972359 = 2.582836e-5 C/m^2; I = 2.582836e-5 * 0.0402124 * 1.5 * 2 = 3.11587e-6 A.
    assert floor[col.CEILING_A][0] == pytest.approx(3.11587e-6, rel=1e-5)
    assert floor[col.CHARGE_PER_REV_C][0] == pytest.approx(1e-6 / 1.5)


def test_per_row_script_computes_what_derive_computes(sample):
    machine_file, data, merged = sample
    derived = analysis.derive(merged, machine_file)
    positions = np.arange(0, 5_000, 37)  # every machine, the linear belt included
    assert set(data.machine_codes[positions]) == set(range(5))
    ceilings, efficiencies = bench.per_row_evaluate(bench.per_row_cells(merged, positions),
                                                    machine_file)
    # The cells carry 10 significant digits, so agreement is to about 1e-9.
    np.testing.assert_allclose(ceilings, derived[col.CEILING_A].to_numpy()[positions],
                               rtol=1e-8)
    np.testing.assert_allclose(efficiencies, derived[col.EFFICIENCY].to_numpy()[positions],
                               rtol=1e-8)


def test_files_hold_the_in_memory_data(tmp_path):
    machine_file = bench.synthetic_machines(5)
    data = bench.synthetic_data(machine_file, 2_000, seed=5)
    files = bench.write_files(data, tmp_path)
    assert files.readings.read_text(encoding="utf-8").splitlines()[0] == ",".join(
        bench.READINGS_HEADER)
    read = read_readings(files.readings).frame
    log = read_environment(files.environment).frame
    expected = data.readings
    assert (read[col.MACHINE] == expected[col.MACHINE]).all()
    assert (read[col.SESSION] == expected[col.SESSION]).all()
    assert (read[col.TIME] == expected[col.TIME]).all()
    rotation = data.machine_codes != 2  # the linear belt's m/s cannot sit under speed [rpm]
    for name in (col.CURRENT_A, col.RH, col.TEMPERATURE_K, col.PRESSURE_PA, col.ELAPSED_S):
        np.testing.assert_allclose(read[name], expected[name], rtol=1e-12, equal_nan=True,
                                   err_msg=name)
    np.testing.assert_allclose(read[col.SPEED_REV_S][rotation],
                               expected[col.SPEED_REV_S][rotation], rtol=1e-12)
    # Every other machine leaves its air empty, for the log to fill.
    assert np.isnan(expected[col.RH].to_numpy()[data.machine_codes % 2 == 1]).all()
    assert not np.isnan(expected[col.RH].to_numpy()[data.machine_codes % 2 == 0]).any()
    for name in (col.RH, col.TEMPERATURE_K, col.PRESSURE_PA):
        np.testing.assert_allclose(log[name], data.environment[name], rtol=1e-12, err_msg=name)
    assert (log[col.TIME] == data.environment[col.TIME]).all()
    # The log covers the readings, one entry a minute.
    steps = np.diff(data.environment[col.ELAPSED_S].to_numpy())
    assert (steps == 60).all()
    assert data.environment[col.TIME].iloc[0] < expected[col.TIME].iloc[0]
    assert data.environment[col.TIME].iloc[-1] > expected[col.TIME].iloc[-1]
    merged = bench.merge_environment(read, log)
    assert not merged[col.FLAGS].str.contains("no_environment").any()


def test_machines_cover_every_carrier_kind():
    machine_file = bench.synthetic_machines(5)
    kinds = [machine.kind for machine in machine_file.machines]
    assert sorted(set(kinds)) == ["belt", "custom", "cylinder", "disc"]
    belts = [machine for machine in machine_file.machines if machine.kind == "belt"]
    assert [belt.carrier.speed_kinds for belt in belts] == [("rotation", "linear"),
                                                            ("linear",)]


def test_growth_exponent_is_the_log_log_slope():
    # Hand-worked: time x10 for size x10 is b = 1; time x4 for size x2 is b = 2.
    assert bench.growth_exponent([1e4, 1e5, 1e6], [0.01, 0.1, 1.0]) == pytest.approx(1.0)
    assert bench.growth_exponent([1, 2, 4], [1, 4, 16]) == pytest.approx(2.0)
    # Least squares through three points off a line: log2 sizes 0, 1, 2, log2 times 0, 2, 2
    # give slope sum(dx dy) / sum(dx^2) = (-1 * -4/3 + 1 * 2/3) / 2 = 1.
    assert bench.growth_exponent([1, 2, 4], [1, 4, 4]) == pytest.approx(1.0)


def test_targets_are_judged_by_their_bound():
    result = {"derive_vs_floor": 3.0, "speedup_vs_per_row": 299.0, "evaluate_s": 6.5,
              "peak_rss_mb": 800.0, "summary_s": 0.2, "import_s": 12.0,
              "growth_exponent": None}
    assert bench.targets_met(result) == {
        "derive_vs_floor": True, "speedup_vs_per_row": False, "evaluate_s": False,
        "peak_rss_mb": True, "summary_s": True, "import_s": False, "growth_exponent": None,
        "evaluate_vs_floor": None,
    }


def test_dashboard_run_at_small_size_prints_every_figure_and_finds_the_findings_exact(capsys):
    from engine import dashboard_bench

    assert bench.main(["--dashboard", "--rows", "6000", "--machines", "5", "--imports", "3",
                       "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert list(result) == list(dashboard_bench.DASHBOARD_KEYS)
    assert result["rows"] == 6000
    assert result["findings_exact"] is True
    assert result["findings_max_relative_difference"] == 0.0
    for key in dashboard_bench.DASHBOARD_TARGETS:
        assert isinstance(result[key], (int, float)) and result[key] >= 0, key
    # the Compare page's four charts, twice, and the Sessions page's timeline at least
    assert len(result["chart_bytes"]) >= 9
    table = dashboard_bench.format_dashboard_table(result)
    for key in dashboard_bench.DASHBOARD_KEYS:
        if key not in ("targets", "met", "chart_bytes"):
            assert key in table, key


def test_findings_that_differ_are_seen_by_the_exactness_check():
    from engine import dashboard_bench

    frame = pd.DataFrame({"machine": ["a"], "slope": [1.0], "interval": [(0.5, 1.5)]})
    same = frame.copy()
    assert dashboard_bench.frames_difference(same, frame) == 0.0
    nudged = frame.copy()
    nudged.loc[0, "slope"] = 1.0 + 1e-8
    assert dashboard_bench.frames_difference(nudged, frame) > dashboard_bench.EXACT_RELATIVE
    widened = frame.copy()
    widened.at[0, "interval"] = (0.5, 1.6)
    assert dashboard_bench.frames_difference(widened, frame) > dashboard_bench.EXACT_RELATIVE
