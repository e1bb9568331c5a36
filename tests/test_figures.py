"""Figures: each chart builds for every carrier kind and for empty input, with units on its axes.

The readings are invented inside the tests (seeded generator); their derived columns come from
the engine's own air and ceiling functions, so the charts can be checked against hand-worked
ceilings.
"""

import math
import re

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import pytest

from engine import columns as col
from engine.air import (
    EPSILON_0,
    REFERENCE_PRESSURE_PA,
    REFERENCE_TEMPERATURE_K,
    absolute_humidity,
    dew_point,
    relative_air_density,
)
from engine.ceiling import machine_ceiling
from engine.figures import (
    FLAGGED_COLOUR,
    NO_READINGS,
    PALETTE,
    WEBGL_THRESHOLD,
    _style,
    carrier_drawing,
    charge_per_rev,
    current_vs_speed,
    efficiency_vs_humidity,
    efficiency_vs_speed,
    machine_colours,
    planner_curve,
    session_timeline,
)
from engine.machines import machine_from_table

MACHINE_TABLES = {
    "disc-a": {"carrier": "disc", "outer_diameter": "44 cm", "inner_diameter": "26 cm",
               "sector_fill": 0.5, "carriers": 2, "label": "Twin disc"},
    "belt-b": {"carrier": "belt", "width": "5 cm", "roller_diameter": "5 cm",
               "label": "Belt on a roller"},
    "cyl-c": {"carrier": "cylinder", "diameter": "12 cm", "active_length": "30 cm",
              "label": "Cylinder"},
    "custom-d": {"carrier": "custom", "area_per_rev": "410 cm^2", "carriers": 6,
                 "label": "Six-disc stack"},
}


def make_machines(tables=None):
    tables = MACHINE_TABLES if tables is None else tables
    return {key: machine_from_table({"id": key, **table}) for key, table in tables.items()}


def make_derived(machines, per_machine=40, seed=7, flagged_every=10, with_time=True):
    """Invented readings with derived columns, computed with the engine's own functions.

    Readings 3, 3 + flagged_every, ... of each machine carry a flag; none when it is 0.
    """
    rng = np.random.default_rng(seed)
    parts = []
    for machine in machines.values():
        speed = rng.uniform(2.0, 10.0, per_machine)
        pressure = rng.normal(98_000.0, 300.0, per_machine)
        temperature = rng.normal(294.0, 1.0, per_machine)
        rh = rng.uniform(0.30, 0.80, per_machine)
        # a belt without roller or loop length is read in m/s: no rotation rate
        linear = machine.carrier.area_per_rev_m2 is None
        ceiling = machine_ceiling(machine, speed, "linear" if linear else "rotation",
                                  pressure_pa=pressure,
                                  temperature_k=temperature).ceiling_current_a
        efficiency = 0.30 - 0.05 * (rh - 0.45) * 10 + rng.normal(0, 0.01, per_machine)
        current = efficiency * ceiling
        start = pd.Timestamp("2026-02-03T09:00:00+01:00")
        elapsed = np.arange(per_machine) * 15.0
        times = (start + pd.to_timedelta(elapsed, unit="s")) if with_time else pd.NaT
        flagged = (np.arange(per_machine) % flagged_every == 3) if flagged_every else False
        flags = np.where(flagged, "above_ceiling", "")
        parts.append(pd.DataFrame({
            col.ROW: np.arange(1, per_machine + 1), col.MACHINE: machine.id,
            col.SESSION: "morning", col.TIME: times, col.ELAPSED_S: elapsed,
            col.SPEED_REV_S: np.nan if linear else speed,
            col.BELT_SPEED_M_S: speed if linear else np.nan, col.CURRENT_A: current,
            col.RH: rh, col.TEMPERATURE_K: temperature, col.PRESSURE_PA: pressure,
            col.VOLTAGE_V: np.nan, col.NOTE: "", col.FLAGS: flags,
            col.CEILING_A: ceiling, col.EFFICIENCY: current / ceiling,
            col.EFFICIENCY_U: 0.02 * current / ceiling,
            col.CHARGE_PER_REV_C: np.nan if linear else current / speed,
            col.SURFACE_DENSITY_C_M2: np.nan,
            col.RELATIVE_AIR_DENSITY: relative_air_density(pressure, temperature),
            col.ABS_HUMIDITY_KG_M3: absolute_humidity(rh, temperature),
            col.DEW_POINT_K: dew_point(rh, temperature),
        }))
    frame = pd.concat(parts, ignore_index=True)
    return frame[list(col.READING_COLUMNS + col.DERIVED_COLUMNS)]


def make_findings(derived, reference_rh=0.45):
    """One findings row per machine from plain least squares on the clean readings."""
    rows = []
    clean = derived[derived[col.FLAGS] == ""]
    for machine_id, group in clean.groupby(col.MACHINE):
        if group[col.SPEED_REV_S].isna().all():
            continue
        slope, intercept = np.polyfit(group[col.SPEED_REV_S], group[col.CURRENT_A], 1)
        rh_slope, rh_intercept = np.polyfit(group[col.RH] * 10, group[col.EFFICIENCY], 1)
        rows.append({
            "machine": machine_id, "session": None, "carrier": "",
            "readings_used": len(group), "readings_flagged": 4,
            "efficiency_median": group[col.EFFICIENCY].median(),
            "efficiency_q25": group[col.EFFICIENCY].quantile(0.25),
            "efficiency_q75": group[col.EFFICIENCY].quantile(0.75),
            "charge_per_rev_nC": slope * 1e9,
            "charge_per_rev_ci_nC": (slope * 1e9 * 0.95, slope * 1e9 * 1.05),
            "offset_current_uA": intercept * 1e6, "fit_r2": 0.99,
            "observed_collection_factor": math.nan,
            "humidity_slope_per_10pct": rh_slope,
            "humidity_slope_per_10pct_ci": (rh_slope - 0.01, rh_slope + 0.01),
            "efficiency_at_reference_rh": rh_intercept + rh_slope * reference_rh * 10,
            "logistic_rh_half_pct": math.nan, "notes": "",
        })
    return pd.DataFrame(rows)


@pytest.fixture(scope="module")
def machines():
    return make_machines()


@pytest.fixture(scope="module")
def derived(machines):
    return make_derived(machines)


@pytest.fixture(scope="module")
def findings(derived):
    return make_findings(derived)


COMPARISON_BUILDERS = (current_vs_speed, efficiency_vs_speed, charge_per_rev,
                       efficiency_vs_humidity)


def annotation_texts(figure):
    """Texts written on the chart: its annotations, then the notes under its title."""
    texts = [annotation.text for annotation in figure.layout.annotations]
    title = figure.layout.title.text or ""
    if "<br><span" in title:
        texts.append(re.sub(r"<[^>]+>", " ", title.split("<br>", 1)[1]))
    return texts


def axis_titles(figure):
    """Titles of every visible axis that has data on it."""
    layout = figure.to_dict()["layout"]
    titles = []
    for name, axis in layout.items():
        if re.fullmatch(r"[xy]axis\d*", name) and axis.get("visible", True):
            text = axis.get("title", {}).get("text")
            if text:
                titles.append(text)
    return titles


def traces_named(figure, fragment):
    return [trace for trace in figure.data if trace.name and fragment in trace.name]


# --- colours ---------------------------------------------------------------------------------

def test_palette_has_eight_distinct_hex_colours():
    assert len(PALETTE) == 8 and len(set(PALETTE)) == 8
    assert all(re.fullmatch(r"#[0-9A-Fa-f]{6}", colour) for colour in PALETTE)
    assert FLAGGED_COLOUR not in PALETTE


def test_machine_colours_are_stable_for_the_sorted_ids():
    # the same set in any order, with repeats, gives the same colours: sorted order decides
    first = machine_colours(["b", "a", "c", "a"])
    second = machine_colours(["c", "a", "b"])
    assert first == second == {"a": PALETTE[0], "b": PALETTE[1], "c": PALETTE[2]}
    many = machine_colours([f"m{number:02d}" for number in range(10)])
    assert many["m08"] == PALETTE[0]  # cycles after eight


def test_each_machine_keeps_its_colour_on_every_chart(derived, findings, machines):
    colours = machine_colours(machines)
    for builder in COMPARISON_BUILDERS:
        figure = builder(derived, findings, machines, colours)
        for machine_id, machine in machines.items():
            trace = next(trace for trace in figure.data if trace.name == machine.label)
            assert trace.marker.color == colours[machine_id], (builder.__name__, machine_id)


# --- the comparison charts -------------------------------------------------------------------

def test_current_vs_speed_markers_ceiling_and_fit(derived, findings, machines):
    figure = current_vs_speed(derived, findings, machines, machine_colours(machines))
    disc_rows = derived[(derived[col.MACHINE] == "disc-a") & (derived[col.FLAGS] == "")]
    markers = traces_named(figure, "Twin disc")[0]
    assert markers.mode == "markers" and len(markers.x) == len(disc_rows)
    # 300 rpm is 5 rev/s: the chart's speed axis is rpm (x 60), current in uA (x 1e6)
    assert np.allclose(np.sort(markers.x), np.sort(disc_rows[col.SPEED_REV_S] * 60))
    assert np.allclose(np.sort(markers.y), np.sort(disc_rows[col.CURRENT_A] * 1e6))

    ceiling = traces_named(figure, "Twin disc: ceiling")[0]
    assert ceiling.line.dash == "dash"
    assert ceiling.x[0] == pytest.approx(disc_rows[col.SPEED_REV_S].min() * 60)
    assert ceiling.x[-1] == pytest.approx(disc_rows[col.SPEED_REV_S].max() * 60)
    # hand-worked: A = pi (0.22^2 - 0.13^2) * 0.5 = 0.0494801 m^2, N = 2, k = 1;
    # I = eps0 * 3.0e6 V/m * delta * A * f * N with delta the median of the clean readings
    delta = np.median(disc_rows[col.RELATIVE_AIR_DENSITY])
    area = math.pi * (0.22**2 - 0.13**2) * 0.5
    speed_rev_s = np.asarray(ceiling.x) / 60
    expected_ua = EPSILON_0 * 3.0e6 * delta * area * speed_rev_s * 2 * 1e6
    assert np.allclose(ceiling.y, expected_ua, rtol=1e-9)

    fit = traces_named(figure, "Twin disc: fit")[0]
    row = findings.set_index("machine").loc["disc-a"]
    # I [uA] = q [nC] * 1e-3 * f [rev/s] + I0 [uA]
    expected_fit = row["charge_per_rev_nC"] * 1e-3 * np.asarray(fit.x) / 60 + row[
        "offset_current_uA"]
    assert np.allclose(fit.y, expected_fit)


def test_efficiency_vs_speed_in_percent_with_uncertainty(derived, findings, machines):
    figure = efficiency_vs_speed(derived, findings, machines, machine_colours(machines))
    clean = derived[(derived[col.MACHINE] == "cyl-c") & (derived[col.FLAGS] == "")]
    markers = traces_named(figure, "Cylinder")[0]
    assert np.allclose(np.sort(markers.y), np.sort(clean[col.EFFICIENCY] * 100))
    assert np.allclose(np.sort(markers.error_y.array), np.sort(clean[col.EFFICIENCY_U] * 100))
    # the fit curve over the ceiling stays near the invented 20-40 % efficiency
    fit = traces_named(figure, "Cylinder: fit")[0]
    assert 10 < np.mean(fit.y) < 50


def test_charge_per_rev_box_and_ceiling_per_revolution(derived, findings, machines):
    figure = charge_per_rev(derived, findings, machines, machine_colours(machines))
    clean = derived[(derived[col.MACHINE] == "custom-d") & (derived[col.FLAGS] == "")]
    box = next(trace for trace in figure.data
               if isinstance(trace, go.Box) and trace.name == "Six-disc stack")
    assert box.median[0] == pytest.approx(np.median(clean[col.CHARGE_PER_REV_C]) * 1e9)
    ceiling = traces_named(figure, "Six-disc stack: ceiling")[0]
    # hand-worked: q_ceiling = eps0 * 3.0e6 * delta * 0.0410 m^2 * 6 carriers, in nC
    delta = np.median(clean[col.RELATIVE_AIR_DENSITY])
    assert ceiling.y[0] == pytest.approx(EPSILON_0 * 3.0e6 * delta * 0.0410 * 6 * 1e9, rel=1e-9)
    fit = traces_named(figure, "Six-disc stack: fit")[0]
    q_nc = findings.set_index("machine").loc["custom-d", "charge_per_rev_nC"]
    assert fit.y[0] == pytest.approx(q_nc)
    assert fit.error_y.array[0] == pytest.approx(0.05 * q_nc)  # interval (0.95 q, 1.05 q)


def test_efficiency_vs_humidity_fit_line_hand_worked(derived, machines):
    findings = pd.DataFrame([{"machine": "belt-b", "session": None,
                              "efficiency_at_reference_rh": 0.30,
                              "humidity_slope_per_10pct": -0.05}])
    figure = efficiency_vs_humidity(derived, findings, machines, reference_rh_pct=45.0)
    line = traces_named(figure, "Belt on a roller: fit")[0]
    # hand-worked: eff(65 %) = 0.30 + (-0.05) * (65 - 45) / 10 = 0.20 -> 20 %
    at_65 = np.interp(65.0, line.x, line.y)
    assert at_65 == pytest.approx(20.0)
    clean = derived[(derived[col.MACHINE] == "belt-b") & (derived[col.FLAGS] == "")]
    assert line.x[0] == pytest.approx(clean[col.RH].min() * 100)
    assert line.x[-1] == pytest.approx(clean[col.RH].max() * 100)


def test_flagged_readings_hidden_unless_asked(derived, findings, machines):
    flagged = int((derived[col.FLAGS] != "").sum())
    assert flagged > 0
    for builder in COMPARISON_BUILDERS:
        hidden = builder(derived, findings, machines)
        assert not traces_named(hidden, "flagged"), builder.__name__
        shown = builder(derived, findings, machines, show_flagged=True)
        grey = traces_named(shown, "flagged")[0]
        assert grey.marker.color == FLAGGED_COLOUR and grey.marker.symbol == "x"
        assert len(grey.y) == flagged, builder.__name__
        assert "above_ceiling" in grey.customdata[0][1]


def test_flagged_readings_are_left_out_of_the_ceiling_range(machines):
    # a flagged reading far outside the clean speed range must not stretch the lines
    derived = make_derived({"disc-a": machines["disc-a"]}, per_machine=12)
    derived.loc[0, col.SPEED_REV_S] = 100.0
    derived.loc[0, col.FLAGS] = "above_ceiling"
    figure = current_vs_speed(derived, None, machines)
    ceiling = traces_named(figure, "ceiling")[0]
    assert max(ceiling.x) < 100.0 * 60


@pytest.mark.parametrize("builder", COMPARISON_BUILDERS + (planner_curve,))
def test_webgl_above_twenty_thousand_points(builder, machines):
    one = {"disc-a": machines["disc-a"]}
    for points, expected in ((WEBGL_THRESHOLD, "scatter"), (WEBGL_THRESHOLD + 1, "scattergl")):
        if builder is planner_curve:
            figure = planner_curve(machines["disc-a"], np.linspace(1, 10, points))
            trace = figure.data[0]
        else:
            derived = make_derived(one, per_machine=points, flagged_every=0)
            figure = builder(derived, None, one)
            if builder is charge_per_rev:
                # the box carries only its statistics, whatever the number of readings
                assert figure.data[0].type == "box" and len(figure.data[0].q1) == 1
                assert all(len(trace.y) <= 2_000 for trace in figure.data if trace.y is not None)
                continue
            trace = figure.data[0]
        assert trace.type == expected and len(trace.y) == points, (builder.__name__, points)


def test_webgl_in_the_timeline(machines):
    one = {"cyl-c": machines["cyl-c"]}
    derived = make_derived(one, per_machine=WEBGL_THRESHOLD + 1, flagged_every=0)
    figure = session_timeline(derived, "cyl-c")
    assert {trace.type for trace in figure.data} == {"scattergl"}
    small = session_timeline(make_derived(one, per_machine=50), "cyl-c")
    assert "scattergl" not in {trace.type for trace in small.data}


# --- empty input and all carrier kinds -------------------------------------------------------

@pytest.mark.parametrize("builder", COMPARISON_BUILDERS)
def test_empty_input_says_no_readings(builder, machines):
    empty = pd.DataFrame(columns=list(col.READING_COLUMNS + col.DERIVED_COLUMNS))
    for frame in (empty, None):
        figure = builder(frame, None, machines)
        assert any(NO_READINGS in text for text in annotation_texts(figure))
    empty_findings = pd.DataFrame(columns=["machine", "session"])
    assert any(NO_READINGS in text
               for text in annotation_texts(builder(empty, empty_findings, {})))


@pytest.mark.parametrize("builder", COMPARISON_BUILDERS)
def test_only_flagged_readings_say_so(builder, machines):
    derived = make_derived(machines, per_machine=5)
    derived[col.FLAGS] = "negative"
    texts = annotation_texts(builder(derived, None, machines))
    assert any(NO_READINGS in text and "20 flagged" in text for text in texts)


def test_other_empty_inputs(machines):
    empty = pd.DataFrame(columns=list(col.READING_COLUMNS + col.DERIVED_COLUMNS))
    assert NO_READINGS in annotation_texts(session_timeline(empty, "disc-a"))[0]
    assert NO_READINGS in annotation_texts(session_timeline(None, "disc-a"))[0]
    derived = make_derived(machines, per_machine=5)
    assert NO_READINGS in annotation_texts(session_timeline(derived, "not-there"))[0]
    assert NO_READINGS in annotation_texts(planner_curve(machines["cyl-c"], []))[0]
    assert NO_READINGS in annotation_texts(planner_curve(machines["cyl-c"], [1.0], []))[0]


ALL_KINDS = {
    **MACHINE_TABLES,
    "disc-full": {"carrier": "disc", "outer_radius": "15 cm", "inner_radius": "0 cm",
                  "label": "Sectorless disc"},
    "belt-loop": {"carrier": "belt", "width": "4 cm", "loop_length": "120 cm"},
    "belt-linear": {"carrier": "belt", "width": "5 cm", "label": "Belt in m/s"},
}


def test_every_figure_builds_for_every_carrier_kind():
    machines = make_machines(ALL_KINDS)
    rotating = {key: machine for key, machine in machines.items() if key != "belt-linear"}
    derived = make_derived(machines, per_machine=20)
    findings = make_findings(derived)
    for builder in COMPARISON_BUILDERS:
        figure = builder(derived, findings, machines)
        assert len(figure.data) >= len(rotating), builder.__name__
        figure.to_json()  # plotly can serialise what was built
    for machine_id, machine in machines.items():
        assert carrier_drawing(machine).data, machine_id
        planner_curve(machine, np.linspace(1, 10, 5), (1.0, 0.83)).to_json()
        timeline = session_timeline(derived, machine_id)
        timeline.to_json()
        # a belt read in m/s has no speed panel: five traces instead of six
        assert len(timeline.data) >= (6 if machine_id in rotating else 5), machine_id


def test_a_belt_known_only_in_metres_per_second_is_named_not_dropped():
    machines = make_machines({"belt-linear": ALL_KINDS["belt-linear"], "cyl-c":
                              MACHINE_TABLES["cyl-c"]})
    derived = make_derived(machines, per_machine=10)
    assert derived.loc[derived[col.MACHINE] == "belt-linear", col.SPEED_REV_S].isna().all()
    for builder in (current_vs_speed, efficiency_vs_speed, charge_per_rev):
        figure = builder(derived, None, machines)
        assert any("Belt in m/s" in text for text in annotation_texts(figure)), builder.__name__
    # the efficiency still exists, so the humidity chart shows the belt
    humidity = efficiency_vs_humidity(derived, None, machines)
    assert traces_named(humidity, "Belt in m/s")
    planner = planner_curve(machines["belt-linear"], [1.0, 2.0])
    assert "linear speed" in annotation_texts(planner)[0]


def test_machine_without_description_still_drawn_and_named(derived):
    figure = current_vs_speed(derived, None, {})
    assert traces_named(figure, "disc-a")  # the id stands in for the label
    assert any("No ceiling drawn" in text for text in annotation_texts(figure))


def test_axis_titles_carry_units(derived, findings, machines):
    figures = [builder(derived, findings, machines) for builder in COMPARISON_BUILDERS]
    figures.append(session_timeline(derived, "disc-a", label="Twin disc"))
    figures += [carrier_drawing(machine) for machine in make_machines(ALL_KINDS).values()]
    figures.append(planner_curve(machines["disc-a"], np.linspace(1, 10, 5)))
    for figure in figures:
        titles = axis_titles(figure)
        # A machine axis names its categories on the ticks and needs no unit or title.
        category_axes = sum(1 for name, axis in figure.to_dict()["layout"].items()
                            if re.fullmatch(r"[xy]axis\d*", name) and axis.get("ticktext"))
        assert len(titles) + category_axes >= 2, figure.layout.title.text
        for title in titles:
            assert re.search(r"\[[^\]]+\]", title), title


def test_hover_shows_machine_label_and_values(derived, findings, machines):
    figure = current_vs_speed(derived, findings, machines, show_flagged=True)
    markers = traces_named(figure, "Twin disc")[0]
    # plotly shows the trace name (the label) beside the values of the hover template
    assert markers.name == "Twin disc"
    assert "rpm" in markers.hovertemplate and "µA" in markers.hovertemplate
    assert "<extra>" not in markers.hovertemplate
    flagged = traces_named(figure, "flagged")[0]
    assert {row[0] for row in flagged.customdata} <= {m.label for m in machines.values()}
    assert "%{customdata[0]}" in flagged.hovertemplate


def test_user_text_is_escaped_for_plotly(machines):
    tables = {"x": {**MACHINE_TABLES["cyl-c"], "label": "<b>bold</b> & co"}}
    tricky = make_machines(tables)
    derived = make_derived(tricky, per_machine=10)
    figure = current_vs_speed(derived, None, tricky)
    names = {trace.name for trace in figure.data}
    assert "&lt;b&gt;bold&lt;/b&gt; &amp; co" in names
    assert not any("<b>" in name for name in names)
    assert "&lt;b&gt;" in carrier_drawing(tricky["x"]).layout.title.text


# --- one machine -----------------------------------------------------------------------------

def test_session_timeline_panels_and_clock_time(derived):
    figure = session_timeline(derived, "disc-a", label="Twin disc")
    rows = derived[derived[col.MACHINE] == "disc-a"]
    titles = axis_titles(figure)
    for expected in ("Current [µA]", "Speed [rpm]", "RH [%]", "Temperature [°C]",
                     "Efficiency [%]"):
        assert expected in titles
    assert any(title.startswith("Time [") and "UTC+01:00" in title for title in titles)
    current = next(trace for trace in figure.data if trace.name == "measured current")
    assert pd.Timestamp(current.x[0]) == pd.Timestamp("2026-02-03T09:00:00")  # wall clock
    assert "Twin disc" in current.hovertemplate
    flagged = traces_named(figure, "flagged")
    assert flagged and all(trace.marker.symbol == "x" for trace in flagged)
    assert len(flagged[0].y) == int((rows[col.FLAGS] != "").sum())
    assert flagged[0].customdata[0][0] == "Twin disc"
    temperature = next(trace for trace in figure.data if trace.name == "temperature")
    # 294.0 K is 20.85 degC (hand-worked: 294.0 - 273.15)
    assert np.allclose(sorted(temperature.y),
                       sorted(rows.loc[rows[col.FLAGS] == "", col.TEMPERATURE_K] - 273.15))


def test_session_timeline_uses_elapsed_time_without_clock(machines):
    derived = make_derived({"cyl-c": machines["cyl-c"]}, per_machine=8, with_time=False)
    figure = session_timeline(derived, "cyl-c", show_flagged=False)
    assert "Elapsed time [min]" in axis_titles(figure)
    speed = next(trace for trace in figure.data if trace.name == "speed")
    # readings every 15 s: 0, 0.25, 0.5 ... min, reading 3 (0.75 min) flagged and hidden
    assert list(speed.x) == [0.0, 0.25, 0.5, 1.0, 1.25, 1.5, 1.75]
    assert not traces_named(figure, "flagged")


def test_session_timeline_sorts_by_time_and_notes_missing_times(machines):
    derived = make_derived({"cyl-c": machines["cyl-c"]}, per_machine=6, flagged_every=0)
    derived = derived.iloc[::-1].reset_index(drop=True)
    derived.loc[0, col.ELAPSED_S] = np.nan
    derived[col.TIME] = pd.NaT
    figure = session_timeline(derived, "cyl-c")
    speed = next(trace for trace in figure.data if trace.name == "speed")
    assert list(speed.x) == sorted(speed.x) and len(speed.x) == 5
    assert any("1 readings have no time" in text for text in annotation_texts(figure))


# --- the carrier drawing and the planner -----------------------------------------------------

def shaded(figure):
    return next(trace for trace in figure.data if trace.fill == "toself")


def finite(values):
    return np.array([value for value in values if value is not None], dtype=float)


def test_disc_drawing_to_scale(machines):
    figure = carrier_drawing(machines["disc-a"])
    zone = shaded(figure)
    radius = np.hypot(finite(zone.x), finite(zone.y))
    # 44 cm and 26 cm diameters: the charged zone lies between 13 and 22 cm from the centre
    assert radius.max() == pytest.approx(22.0) and radius.min() == pytest.approx(13.0)
    assert figure.layout.yaxis.scaleanchor == "x" and figure.layout.yaxis.scaleratio == 1
    # twelve sectors, each closed and separated by a gap
    assert sum(value is None for value in zone.x) == 12
    texts = " ".join(annotation_texts(figure))
    # hand-worked: pi (22^2 - 13^2) * 0.5 = 494.8 cm^2
    assert "494.8 cm²" in texts and "2 discs" in texts


def test_full_disc_drawing_is_an_annulus():
    machine = make_machines({"d": {"carrier": "disc", "outer_radius": "15 cm",
                                   "inner_radius": "5 cm"}})["d"]
    zone = shaded(carrier_drawing(machine))
    radius = np.hypot(finite(zone.x), finite(zone.y))
    assert set(np.round(radius, 9)) == {5.0, 15.0}


def test_belt_cylinder_and_custom_drawings_to_scale(machines):
    belt = shaded(carrier_drawing(machines["belt-b"]))
    assert np.ptp(finite(belt.x)) == pytest.approx(5.0)  # 5 cm wide
    loop = make_machines({"l": ALL_KINDS["belt-loop"]})["l"]
    loop_zone = shaded(carrier_drawing(loop))
    # loop 120 cm, rollers drawn at 120/8 = 15 cm: span (120 - 15 pi) / 2 = 36.438 cm
    assert np.ptp(finite(loop_zone.y)) == pytest.approx((120 - 15 * math.pi) / 2)
    cylinder = shaded(carrier_drawing(machines["cyl-c"]))
    assert np.ptp(finite(cylinder.x)) == pytest.approx(30.0)  # active length
    assert np.ptp(finite(cylinder.y)) == pytest.approx(12.0)  # diameter
    square = shaded(carrier_drawing(machines["custom-d"]))
    # side = sqrt(410 cm^2) = 20.248 cm
    assert np.ptp(finite(square.x)) == pytest.approx(math.sqrt(410))
    assert np.ptp(finite(square.y)) == pytest.approx(math.sqrt(410))


def test_planner_curve_doubles_with_speed_and_scales_with_density(machines):
    figure = planner_curve(machines["cyl-c"], [2.0, 4.0], densities=(1.0, 0.83))
    sea, high = figure.data
    # law: the ceiling doubles when the speed doubles and scales with relative air density
    assert sea.y[1] == pytest.approx(2 * sea.y[0])
    assert np.allclose(np.asarray(high.y), 0.83 * np.asarray(sea.y))
    # hand-worked: eps0 * 3.0e6 * (2 pi 0.06 * 0.30) * 2 rev/s = 6.0085 uA at 120 rpm
    assert sea.x[0] == pytest.approx(120.0)
    assert sea.y[0] == pytest.approx(EPSILON_0 * 3.0e6 * 2 * math.pi * 0.06 * 0.30 * 2 * 1e6)
    one = planner_curve(machines["cyl-c"], [2.0, 4.0], densities=0.83)
    assert np.allclose(one.data[0].y, high.y)
    reference = machine_ceiling(machines["cyl-c"], 2.0, pressure_pa=REFERENCE_PRESSURE_PA,
                                temperature_k=REFERENCE_TEMPERATURE_K).ceiling_current_a
    assert sea.y[0] == pytest.approx(float(reference) * 1e6)


def test_a_very_large_trace_is_thinned_evenly_but_keeps_its_ends():
    from engine.figures import MAX_DRAWN_POINTS, _scatter

    points = 100_000
    x = np.arange(points, dtype=float)
    trace = _scatter(points, x=x, y=2 * x, mode="markers",
                     error_y={"type": "data", "array": x / 10})
    assert isinstance(trace, go.Scattergl)
    assert len(trace.x) == len(trace.y) == len(trace.error_y.array) == MAX_DRAWN_POINTS
    assert trace.x[0] == 0 and trace.x[-1] == points - 1
    np.testing.assert_allclose(trace.y, 2 * np.asarray(trace.x))  # x and y stay paired
    small = _scatter(100, x=x[:100], y=x[:100])
    assert len(small.x) == 100


# --- load line ----------------------------------------------------------------------------------

def test_load_line_chart_draws_readings_line_ceiling_and_power():
    from engine.analysis import load_line_findings
    from engine.figures import load_line_chart

    rng = np.random.default_rng(11)
    voltage = rng.uniform(2e3, 20e3, 25)
    speed = np.full(25, 4.0)
    current = 0.7e-6 - voltage / 40e9 + rng.normal(0, 0.02e-6, 25)
    frame = pd.DataFrame({col.MACHINE: "m", col.SESSION: "s", col.CURRENT_A: current,
                          col.VOLTAGE_V: voltage, col.SPEED_REV_S: speed, col.FLAGS: "",
                          col.RELATIVE_AIR_DENSITY: 1.0})
    frame.loc[0, col.FLAGS] = "negative"
    machine = machine_from_table({"id": "m", "carrier": "disc", "outer_diameter": "40 cm",
                                "inner_diameter": "0 cm"})
    line = load_line_findings(frame).iloc[0].to_dict()
    figure = load_line_chart(frame, "m", line, machine, "s")
    names = [trace.name for trace in figure.data]
    assert names[:2] == ["readings", "flagged readings"]
    assert "fitted load line" in names and "output power" in names
    assert any(name.startswith("ceiling at 240 rpm") for name in names)
    fitted = next(trace for trace in figure.data if trace.name == "fitted load line")
    # the line runs from zero to the open-circuit voltage, where the current is zero
    assert fitted.x[-1] == pytest.approx(line["open_circuit_voltage_kV"])
    assert fitted.y[-1] == pytest.approx(0.0, abs=1e-9)
    power = next(trace for trace in figure.data if trace.name == "output power")
    assert max(power.y) == pytest.approx(line["max_output_power_W"], rel=1e-3)
    ceiling = next(trace for trace in figure.data if trace.name.startswith("ceiling"))
    expected = float(machine_ceiling(machine, 4.0).ceiling_current_a) * 1e6
    assert ceiling.y[0] == pytest.approx(expected)
    assert figure.layout.xaxis.title.text == "Terminal voltage [kV]"


def test_load_line_chart_without_voltages_says_so():
    from engine.figures import load_line_chart

    frame = pd.DataFrame({col.MACHINE: ["m"], col.CURRENT_A: [1e-6], col.VOLTAGE_V: [np.nan],
                          col.FLAGS: [""]})
    figure = load_line_chart(frame, "m")
    assert "No readings with a terminal voltage" in figure.layout.annotations[0].text
    assert NO_READINGS in load_line_chart(None, "m").layout.annotations[0].text


def test_a_machine_s_sessions_get_their_own_marker_shapes():
    from engine.figures import current_vs_speed

    machines = {"m": machine_from_table({"id": "m", "carrier": "disc", "outer_diameter": "40 cm",
                                         "inner_diameter": "20 cm"})}
    frame = pd.DataFrame({col.MACHINE: "m", col.SESSION: ["lesson 1"] * 3 + ["lesson 2"] * 3,
                          col.SPEED_REV_S: [2.0, 4.0, 6.0] * 2,
                          col.CURRENT_A: [1e-6, 2e-6, 3e-6, 1.5e-6, 2.5e-6, 3.5e-6],
                          col.FLAGS: "", col.RELATIVE_AIR_DENSITY: 1.0,
                          col.EFFICIENCY: 0.3, col.RH: 0.4})
    figure = current_vs_speed(frame, None, machines)
    readings = [trace for trace in figure.data if trace.name == "m"][0]
    assert list(readings.marker.symbol) == ["circle"] * 3 + ["square"] * 3
    assert list(readings.customdata) == ["lesson 1"] * 3 + ["lesson 2"] * 3


def test_an_axis_of_one_value_up_to_rounding_gets_a_readable_range():
    """Values equal to 1e-14 (an efficiency that does not change with speed) would give the
    browser an axis 1e-14 wide with no tick labels: the axis spans the value +- 10 %."""
    steady = go.Figure(go.Scatter(x=[1, 2, 3], y=[36.45703236348271, 36.457032363482725,
                                                     36.45703236348272]))
    _style(steady, "t", "x", "y")
    low, high = steady.layout.yaxis.range
    assert low == pytest.approx(36.457 - 3.6457, rel=1e-4)  # hand-worked: 10 % of the value
    assert high == pytest.approx(36.457 + 3.6457, rel=1e-4)
    varying = go.Figure(go.Scatter(x=[1, 2, 3], y=[30.0, 36.5, 41.0]))
    _style(varying, "t", "x", "y")
    assert varying.layout.yaxis.range is None  # left to the browser


def test_shapes_given_reading_by_reading_are_checked_once_each_and_drawn_the_same():
    # _add_readings checks each distinct marker shape once instead of plotly's check of every
    # element; the figure must be the one plotly's own checked path gives, and a shape plotly
    # does not know must still be refused (plotly's symbol list, plotly.graph_objects docs).
    from engine.figures import _add_readings, _scatter

    shapes = np.array(["circle", "square", "circle", "triangle-up"], dtype=object)
    trace = {"x": np.arange(4.0), "y": np.arange(4.0) ** 2, "mode": "markers", "name": "m",
             "marker": {"color": "#0072B2", "size": 6, "symbol": shapes}}
    checked = go.Figure()
    checked.add_trace(_scatter(4, **trace))
    quick = go.Figure()
    _add_readings(quick, 4, **trace)
    assert quick.to_json() == checked.to_json()
    assert list(quick.data[0].marker.symbol) == list(shapes)
    wrong = {**trace, "marker": {"symbol": np.array(["circle", "no-such-shape"] * 2,
                                                     dtype=object)}}
    with pytest.raises(ValueError, match="no-such-shape"):
        _add_readings(go.Figure(), 4, **wrong)
