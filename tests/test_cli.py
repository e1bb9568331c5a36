"""The command line: right ceilings for every carrier kind in any units, clear errors."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

from engine.__main__ import main
from tests.test_machines import EXAMPLE

ROOT = Path(__file__).resolve().parents[1]
DISC = ["ceiling", "--carrier", "disc", "--outer-radius", "20 cm", "--inner-radius", "5 cm"]


def run(capsys, *argv):
    status = main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def run_json(capsys, *argv):
    status, out, err = run(capsys, *argv, "--json")
    assert status == 0, err
    return json.loads(out)


def test_disc_in_centimetres_and_inches_agree(capsys):
    metric = run_json(capsys, "ceiling", "--carrier", "disc", "--outer-diameter", "45.72 cm",
                      "--inner-diameter", "30.48 cm", "--carriers", "2", "--speed", "300 rpm")
    imperial = run_json(capsys, "ceiling", "--carrier", "disc", "--outer-radius", "9 in",
                        "--inner-radius", "6 in", "--carriers", "2", "--speed", "5 rev/s")
    assert metric["ceiling_current_uA"] == pytest.approx(imperial["ceiling_current_uA"])
    # Hand-worked: pi (0.2286^2 - 0.1524^2) = 0.091207 m^2; I = 26.5626e-6 * 0.091207 * 5 * 2
    assert metric["ceiling_current_uA"] == pytest.approx(24.227, rel=1e-4)
    assert metric["area_per_rev_m2"] == pytest.approx(0.091207, rel=1e-4)
    assert metric["speed_rev_s"] == pytest.approx(5.0)
    assert metric["relative_air_density"] == pytest.approx(1.0)


def test_belt_three_ways(capsys):
    # v = pi * 0.05 m * 2 rev/s = 0.314159 m/s; I = 26.5626e-6 * 0.05 * 0.314159 = 0.41724 uA
    roller = run_json(capsys, "ceiling", "--carrier", "belt", "--width", "5 cm",
                      "--roller-diameter", "5 cm", "--speed", "120 rpm")
    linear = run_json(capsys, "ceiling", "--carrier", "belt", "--width", "50 mm",
                      "--speed", "0.3141592653589793 m/s")
    assert roller["ceiling_current_uA"] == pytest.approx(0.41724, rel=1e-4)
    assert linear["ceiling_current_uA"] == pytest.approx(roller["ceiling_current_uA"])
    assert linear["area_per_rev_m2"] is None and linear["speed_rev_s"] is None
    assert linear["swept_area_per_s_m2"] == pytest.approx(roller["swept_area_per_s_m2"])
    loop = run_json(capsys, "ceiling", "--carrier", "belt", "--width", "5 cm",
                    "--loop-length", "120 cm", "--speed", "1 Hz")
    # 0.05 * 1.2 = 0.06 m^2 per circulation; I = 26.5626e-6 * 0.06 * 1 = 1.5938 uA
    assert loop["ceiling_current_uA"] == pytest.approx(1.5938, rel=1e-4)


def test_cylinder_and_custom_at_altitude_and_pressure(capsys):
    cylinder = run_json(capsys, "ceiling", "--carrier", "cylinder", "--radius", "10 cm",
                        "--active-length", "0.4 m", "--speed", "3 rev/s", "--altitude", "1500 m")
    # delta = 84 559.7 / 101 300 = 0.834745; I = 26.5626 * 0.834745 * 0.251327 * 3 = 16.718 uA
    assert cylinder["relative_air_density"] == pytest.approx(0.834745, rel=1e-5)
    assert cylinder["ceiling_current_uA"] == pytest.approx(16.718, rel=1e-4)
    custom = run_json(capsys, "ceiling", "--carrier", "custom", "--area-per-rev", "0.12 m^2",
                      "--speed", "3 rev/s", "--pressure", "84.6 kPa", "--temperature", "30 degC",
                      "--collection-factor", "2", "--breakdown-field", "3.2 MV/m")
    # delta = (84.6 / 101.3) * (293.15 / 303.15) = 0.807598; sigma = eps0 * 3.2e6 * delta
    # = 22.882 uC/m^2; I = 22.882e-6 * 0.12 * 3 * 2 = 16.475 uA
    assert custom["relative_air_density"] == pytest.approx(0.807598, rel=1e-5)
    assert custom["ceiling_current_uA"] == pytest.approx(16.475, rel=1e-4)


def test_plain_output_is_a_short_summary(capsys):
    status, out, _ = run(capsys, "ceiling", "--carrier", "disc", "--outer-radius", "20 cm",
                         "--inner-radius", "10 cm", "--speed", "300 rpm")
    assert status == 0
    assert "ceiling current" in out and "uA" in out and "300 rpm" in out
    assert len(out.splitlines()) < 12


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["ceiling", "--carrier", "disc", "--outer-radius", "20 kg", "--speed", "300 rpm"],
         "needs a length"),
        (["ceiling", "--carrier", "disc", "--speed", "300 rpm"],
         "--outer-radius or --outer-diameter is missing"),
        (["ceiling", "--carrier", "disc", "--outer-radius", "20 cm"], "--speed"),
        (["ceiling", "--carrier", "wheel", "--speed", "3 Hz"], "invalid choice"),
        ([*DISC, "--speed", "6 m/s"],
         "rotation rate"),
        ([*DISC, "--speed", "-5 rpm"],
         "must not be negative"),
        ([*DISC, "--speed", "5 rpm",
          "--pressure", "90 kPa", "--altitude", "300 m"], "not both"),
        ([*DISC, "--speed", "5 rpm",
          "--temperature", "-300 degC"], "above absolute zero"),
        ([*DISC, "--speed", "5 rpm",
          "--altitude", "40 km"], "altitude must be between"),
        ([*DISC, "--speed", "5 rpm",
          "--carriers", "two"], "whole number"),
        ([*DISC, "--speed", "5 rpm",
          "--collection-factor", "0"], "above 0"),
        ([*DISC, "--speed", "5 rpm",
          "--breakdown-field", "3 kV"], "electric field"),
        (["ceiling", "--carrier", "disc", "--outer-radius", "20 cm", "--width", "3 cm",
          "--speed", "5 rpm"], "'--width' is not an option for a disc"),
        (["ceiling", "--carrier", "belt", "--width", "5 cm", "--speed", "300 rpm"],
         "linear speed"),
        (["ceiling", "--carrier", "disc", "--outer-radius", "10**10**10 m", "--speed", "5 rpm"],
         "power where a unit belongs"),
        (["machines", "/nonexistent/machines.toml"], "cannot be read"),
        (["nonsense"], "invalid choice"),
        ([], "required"),
    ],
)
def test_bad_input_is_one_error_line_and_status_2(capsys, argv, message):
    status, out, err = run(capsys, *argv)
    assert status == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error:")
    assert message in lines[0]


def test_machines_listing(capsys, tmp_path):
    path = tmp_path / "machines.toml"
    path.write_text(EXAMPLE, encoding="utf-8")
    rows = run_json(capsys, "machines", str(path), "--speed", "300 rpm")
    assert [row["id"] for row in rows] == ["gallery-twin", "school-belt", "workshop-cylinder",
                                           "sketch"]
    # ICAO pressure at 350 m (97 190.66 Pa, ambiance) gives delta = 0.959434 at 20 degC.
    twin = rows[0]
    assert twin["relative_air_density"] == pytest.approx(97_190.66 / 101_300, rel=1e-6)
    assert twin["ceiling_current_uA"] == pytest.approx(13.9516 * 97_190.66 / 101_300, rel=1e-4)
    status, out, _ = run(capsys, "machines", str(path), "--speed", "300 rpm")
    assert status == 0 and "gallery-twin" in out and "ceiling [uA]" in out
    without_speed = run_json(capsys, "machines", str(path))
    assert "ceiling_current_uA" not in without_speed[0]
    linear = run_json(capsys, "machines", str(path), "--speed", "6 m/s")
    assert linear[1]["ceiling_current_uA"] is not None  # the belt takes a linear speed
    assert linear[0]["ceiling_current_uA"] is None and "rotation rate" in linear[0]["note"]


def test_machines_file_error_is_one_line(capsys, tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(EXAMPLE.replace('carriers = 2', 'carriers = -2'), encoding="utf-8")
    status, _, err = run(capsys, "machines", str(path))
    assert status == 2 and err.startswith("error:") and "gallery-twin" in err


def test_module_runs_as_a_program_without_traceback():
    done = subprocess.run(
        [sys.executable, "-m", "engine", "ceiling", "--carrier", "disc", "--outer-radius",
         "20 cm", "--speed", "nonsense"], cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert done.returncode == 2
    assert done.stderr.startswith("error:") and "Traceback" not in done.stderr
    done = subprocess.run(
        [sys.executable, "-m", "engine", "ceiling", "--carrier", "disc", "--outer-radius",
         "20 cm", "--inner-radius", "0 cm", "--speed", "300 rpm", "--json"], cwd=ROOT,
        capture_output=True, text=True, timeout=60)
    assert done.returncode == 0
    assert json.loads(done.stdout)["ceiling_current_uA"] > 0


# --- evaluate and summary on the demonstration files ----------------------------------------

SAMPLE = ROOT / "sample_data"
MACHINES = str(SAMPLE / "machines.toml")
CYLINDER = str(SAMPLE / "readings_cylinder.csv")
CYLINDER_LOG = str(SAMPLE / "environment_cylinder.csv")
TWIN = str(SAMPLE / "readings_twin_disc.csv")
OUTPUT_HEADER = ["machine", "time", "speed_rev_s", "current_uA", "ceiling_uA", "efficiency",
                 "efficiency_u", "charge_per_rev_nC", "rh_pct", "abs_humidity_g_m3",
                 "dew_point_C", "relative_air_density", "flags"]


def test_evaluate_writes_every_reading_in_input_order(capsys):
    import csv
    import io

    status, out, err = run(capsys, "evaluate", MACHINES, CYLINDER, "--environment",
                           CYLINDER_LOG)
    assert status == 0, err
    rows = list(csv.DictReader(io.StringIO(out)))
    assert list(rows[0])[:13] == OUTPUT_HEADER
    assert {"session", "note"} <= set(rows[0])
    source = list(csv.DictReader(open(CYLINDER, encoding="utf-8")))
    assert len(rows) == len(source)  # nothing lost
    assert [row["time"] for row in rows] == [row["time"] for row in source]  # order kept
    # The cylinder file has no humidity of its own: the log supplies it.
    assert sum(1 for row in rows if row["rh_pct"]) > 0.95 * len(rows)
    flagged = [row for row in rows if row["flags"]]
    assert 0 < len(flagged) < 20
    # The reader flags a negative speed only; a negative current (the sample's 'spark to the
    # meter lead', far beyond the meter's tolerance) is kept as read and flagged by analysis.
    negative = [row for row in rows if row["current_uA"] and float(row["current_uA"]) < 0]
    assert negative and all("negative" in row["flags"] for row in negative)
    assert any("duplicate_time" in row["flags"] for row in rows)  # row 611 repeats row 610
    clean = [row for row in rows if not row["flags"] and float(row["current_uA"]) >= 0]
    efficiency = [float(row["efficiency"]) for row in clean]
    assert all(0 < value < 1 for value in efficiency)
    # current / ceiling is the efficiency (definition in the design notes)
    first = clean[0]
    assert float(first["current_uA"]) / float(first["ceiling_uA"]) == pytest.approx(
        float(first["efficiency"]), rel=1e-6)


def test_a_log_out_of_reach_is_a_flag_not_a_guess(capsys):
    rows = run_json(capsys, "evaluate", MACHINES, CYLINDER)
    assert all(row["rh_pct"] is None for row in rows)  # no log given: humidity unknown
    # The logger writes once a minute, its clock 37 s ahead: within 1 s few readings match.
    rows = run_json(capsys, "evaluate", MACHINES, CYLINDER, "--environment", CYLINDER_LOG,
                    "--tolerance", "1 s")
    unmatched = [row for row in rows if "no_environment" in row["flags"]]
    assert len(unmatched) > 0.9 * len(rows)
    assert all(row["rh_pct"] is None for row in unmatched)


def test_evaluate_json_and_files(capsys, tmp_path):
    rows = run_json(capsys, "evaluate", MACHINES, TWIN)
    assert set(OUTPUT_HEADER) <= set(rows[0])
    assert isinstance(rows[0]["efficiency"], float)
    for suffix in (".csv", ".xlsx"):
        target = tmp_path / f"out{suffix}"
        status, out, err = run(capsys, "evaluate", MACHINES, TWIN, "--output", str(target))
        assert status == 0, err
        assert target.stat().st_size > 1000
        assert f"to {target}" in out
    import openpyxl

    sheet = openpyxl.load_workbook(tmp_path / "out.xlsx", read_only=True).active
    header = [cell.value for cell in next(sheet.iter_rows(max_row=1))]
    assert header[:13] == OUTPUT_HEADER


def test_evaluate_takes_the_machine_from_the_caller(capsys, tmp_path):
    machines = tmp_path / "one.toml"
    machines.write_text('[[machine]]\nid = "bench-disc"\ncarrier = "disc"\n'
                        'outer_radius = "20 cm"\ninner_radius = "0 cm"\n', encoding="utf-8")
    data = str(ROOT / "tests" / "data" / "readings" / "no_machine.csv")
    rows = run_json(capsys, "evaluate", str(machines), data, "--machine", "bench-disc")
    assert {row["machine"] for row in rows} == {"bench-disc"}
    # 12 500 nA at 5 rev/s on a 0.2 m disc: ceiling = 26.5626e-6 * pi * 0.04 * 5 = 16.690 uA
    assert rows[0]["ceiling_uA"] == pytest.approx(16.690, rel=1e-4)
    assert rows[0]["current_uA"] == pytest.approx(12.5)


def test_summary_json_has_the_agreed_keys(capsys):
    records = run_json(capsys, "summary", MACHINES, TWIN, "--by-session")
    keys = {"machine", "readings_used", "readings_flagged", "efficiency_median",
            "charge_per_rev_nC", "charge_per_rev_ci_nC", "offset_current_uA", "fit_r2",
            "units", "observed_units", "observed_units_ci", "humidity_slope_per_10pct",
            "efficiency_at_reference_rh"}
    assert all("observed_collection_factor" not in record for record in records)
    assert all(keys <= set(record) for record in records)
    by_session = {record["session"]: record for record in records}
    before, after = by_session["before restoration"], by_session["after restoration"]
    assert after["efficiency_median"] > before["efficiency_median"]
    low, high = before["charge_per_rev_ci_nC"]
    assert low < before["charge_per_rev_nC"] < high
    status, out, _ = run(capsys, "summary", MACHINES, TWIN)
    assert status == 0 and "charge per revolution" in out and "nC" in out
    # "45" and "45 %" are the same reference humidity.
    plain = run_json(capsys, "summary", MACHINES, TWIN, "--reference-rh", "45")
    with_unit = run_json(capsys, "summary", MACHINES, TWIN, "--reference-rh", "45 %")
    assert plain == with_unit


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["evaluate", MACHINES, "/nonexistent.csv"], "nonexistent.csv"),
        (["evaluate", MACHINES, TWIN, "--output", "out.txt"], ".csv or .xlsx"),
        (["evaluate", MACHINES, TWIN, "--environment", CYLINDER_LOG, "--tolerance", "5 kg"],
         "duration"),
        (["evaluate", MACHINES, TWIN, "--unit", "speed"], "FIELD=VALUE"),
        (["evaluate", MACHINES, TWIN, "--output", "/nonexistent-dir/out.csv"],
         "cannot be written"),
        (["summary", MACHINES, TWIN, "--reference-rh", "150"], "0 to 100"),
        (["summary", str(ROOT / "README.md"), TWIN], "TOML"),
        (["evaluate", MACHINES, TWIN, "--machine", "nope"], "no readings of machine 'nope'"),
    ],
)
def test_evaluate_and_summary_bad_input(capsys, argv, message):
    status, out, err = run(capsys, *argv)
    assert status == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error:") and message in lines[0]


# --- spark, --air-gap, and the voltage side of evaluate and summary ----------------------------

def test_spark_uniform_gap_names_its_model(capsys):
    figures = run_json(capsys, "spark", "--gap", "1 cm")
    # U = 24.36 * 1.013 + 6.72 * sqrt(1.013) = 31.44 kV (Kuffel, Zaengl and Kuffel, 2000,
    # section 5.8, coefficients from memory; "about 31 kV for 1 cm")
    assert figures["breakdown_voltage_kV"] == pytest.approx(31.44, rel=1e-3)
    assert figures["breakdown_field_MV_m"] == pytest.approx(3.144, rel=1e-3)
    assert figures["relative_air_density"] == pytest.approx(1.0)
    assert "Kuffel" in figures["model"] and "10 cm" in figures["valid_range"]
    status, out, _ = run(capsys, "spark", "--gap", "10 mm")
    assert status == 0 and "31.4 kV" in out and "model" in out


def test_spark_options_air_and_spheres(capsys):
    thin = run_json(capsys, "spark", "--gap", "1 cm", "--altitude", "1500 m")
    # ICAO pressure at 1500 m, 84 559.7 Pa (ambiance): delta 0.834745 at 20 degC
    assert thin["relative_air_density"] == pytest.approx(0.834745, rel=1e-5)
    assert thin["breakdown_voltage_kV"] < 31.44
    hot = run_json(capsys, "spark", "--gap", "1 cm", "--pressure", "101.3 kPa",
                   "--temperature", "40 degC")
    assert hot["relative_air_density"] == pytest.approx(293.15 / 313.15)
    balls = run_json(capsys, "spark", "--gap", "5 mm", "--electrodes", "spheres",
                     "--sphere-diameter", "2 cm")
    # IEC 60052 table, 2 cm spheres, 0.5 cm gap: 17.4 kV (from memory)
    assert balls["breakdown_voltage_kV"] == pytest.approx(17.4, rel=0.05)
    assert "Peek" in balls["model"] and balls["sphere_diameter_cm"] == pytest.approx(2.0)


def test_spark_inverse_gives_the_gap_for_a_voltage(capsys):
    figures = run_json(capsys, "spark", "--voltage", "31.44 kV")
    assert figures["gap_mm"] == pytest.approx(10.0, rel=1e-3)
    assert figures["breakdown_voltage_kV"] == pytest.approx(31.44, rel=1e-6)
    balls = run_json(capsys, "spark", "--voltage", "17.4 kV", "--electrodes", "spheres",
                     "--sphere-diameter", "20 mm")
    assert balls["gap_mm"] == pytest.approx(5.0, rel=0.05)


def test_spark_help_works(capsys):
    with pytest.raises(SystemExit) as done:
        main(["spark", "--help"])
    assert done.value.code == 0
    assert "--sphere-diameter" in capsys.readouterr().out


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["spark", "--gap", "-1 cm"], "above zero"),
        (["spark", "--gap", "0 mm"], "above zero"),
        (["spark", "--gap", "20 cm", "--electrodes", "spheres", "--sphere-diameter", "2 cm"],
         "outside the models"),
        (["spark", "--gap", "50 cm"], "outside the models"),
        (["spark", "--gap", "1 cm", "--electrodes", "spheres"], "needs --sphere-diameter"),
        (["spark", "--gap", "1 cm", "--sphere-diameter", "5 cm"], "is for --electrodes spheres"),
        (["spark", "--gap", "1 cm", "--electrodes", "spheres", "--sphere-diameter", "0 cm"],
         "above zero"),
        (["spark", "--gap", "1 kg"], "length"),
        (["spark"], "either --gap"),
        (["spark", "--gap", "1 cm", "--voltage", "30 kV"], "either --gap"),
        (["spark", "--voltage", "5 MV"], "outside what the model covers"),
        (["spark", "--voltage", "-3 kV"], "above zero"),
        (["spark", "--gap", "1 cm", "--pressure", "90 kPa", "--altitude", "300 m"], "not both"),
        (["spark", "--gap", "1 cm", "--electrodes", "points"], "invalid choice"),
        ([*DISC, "--speed", "5 rpm", "--air-gap", "1 mm", "--breakdown-field", "3 MV/m"],
         "choose one"),
        ([*DISC, "--speed", "5 rpm", "--air-gap", "-1 mm"], "above zero"),
        ([*DISC, "--speed", "5 rpm", "--air-gap", "1 m"], "outside"),
    ],
)
def test_spark_and_air_gap_bad_input(capsys, argv, message):
    test_bad_input_is_one_error_line_and_status_2(capsys, argv, message)


def test_ceiling_with_an_air_gap_has_the_higher_field(capsys):
    flat = run_json(capsys, *DISC, "--speed", "300 rpm")
    gap = run_json(capsys, *DISC, "--speed", "300 rpm", "--air-gap", "1 mm")
    assert flat["breakdown_field_MV_m"] == pytest.approx(3.0)
    # 4.607 MV/m over 1 mm (uniform-field relation, hand-evaluated above)
    assert gap["breakdown_field_MV_m"] == pytest.approx(4.607, rel=1e-3)
    assert gap["ceiling_current_uA"] == pytest.approx(flat["ceiling_current_uA"] * 4.607 / 3.0,
                                                      rel=1e-3)


def test_machines_json_has_the_breakdown_field_in_every_case(capsys, tmp_path):
    path = tmp_path / "machines.toml"
    path.write_text(EXAMPLE.replace('breakdown_field = "3.0 MV/m"', 'air_gap = "1 mm"'),
                    encoding="utf-8")
    for argv in ([str(path)], [str(path), "--speed", "300 rpm"]):
        rows = run_json(capsys, "machines", *argv)
        assert all(row["breakdown_field_MV_m"] > 0 for row in rows)
        # at 350 m (delta 0.959434) the 1 mm gap holds less than 4.607 MV/m, more than 3
        assert 3.0 < rows[0]["breakdown_field_MV_m"] < 4.607
        assert rows[0]["air_gap_mm"] == pytest.approx(1.0)
        assert rows[1]["breakdown_field_MV_m"] == pytest.approx(3.0 * 97_190.66 / 101_300,
                                                                rel=1e-5)


def test_evaluate_and_summary_carry_the_voltage_side(capsys, tmp_path):
    from tests.voltage_data import LEAKAGE_OHM, write_voltage_readings

    readings = write_voltage_readings(tmp_path / "charged.csv")
    rows = run_json(capsys, "evaluate", MACHINES, readings)
    assert rows[0]["voltage_kV"] > 0
    assert rows[0]["output_power_W"] == pytest.approx(
        rows[0]["voltage_kV"] * 1e3 * rows[0]["current_uA"] * 1e-6)
    plain = run_json(capsys, "evaluate", MACHINES, TWIN)
    assert plain[0]["voltage_kV"] is None and plain[0]["output_power_W"] is None
    records = run_json(capsys, "summary", MACHINES, readings, "--by-session")
    record = records[0]
    low, high = record["leakage_resistance_ci_GOhm"]
    assert low < LEAKAGE_OHM / 1e9 < high
    for key in ("short_circuit_current_uA", "open_circuit_voltage_kV", "max_output_power_W"):
        assert record[key] > 0
        low, high = record[key.replace("_uA", "_ci_uA").replace("_kV", "_ci_kV")
                           .replace("_W", "_ci_W")]
        assert low < record[key] < high
    status, out, _ = run(capsys, "summary", MACHINES, readings)
    assert status == 0 and "open-circuit voltage" in out and "GOhm" in out
    without = run_json(capsys, "summary", MACHINES, TWIN)
    assert without[0]["open_circuit_voltage_kV"] is None
    assert "short_circuit_current_ci_uA" in without[0]
