"""Analysis: derived columns, fits, uncertainty and session comparison.

Every data set here is invented inside the test from a known truth with a seeded generator;
the fits must recover that truth, and the closed-form statistics must agree with statsmodels,
scipy.stats and the uncertainties package on the same numbers.
"""

import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm
import statsmodels.formula.api as smf
from hypothesis import given
from hypothesis import strategies as st
from uncertainties import ufloat

from engine import analysis
from engine import columns as col
from engine.air import EPSILON_0, absolute_humidity, dew_point
from engine.analysis import (
    compare_sessions,
    derive,
    findings,
    fit_line,
    fit_linear_model,
    logistic_efficiency,
    welch_difference,
)
from engine.errors import InputError
from engine.machines import MachineFile, Site, machine_from_table
from engine.units import unit_conversion

SIGMA_REF = EPSILON_0 * 3.0e6  # 2.65625634384e-5 C/m^2 at 3 MV/m (design notes)

TABLES = {
    "twin": {"carrier": "disc", "outer_diameter": "46 cm", "inner_diameter": "30 cm",
             "sector_fill": 0.55, "carriers": 2},
    "belt": {"carrier": "belt", "width": "5 cm"},
    "roller-belt": {"carrier": "belt", "width": "5 cm", "roller_diameter": "4 cm"},
    "drum": {"carrier": "cylinder", "diameter": "20 cm", "active_length": "30 cm"},
    "odd": {"carrier": "custom", "area_per_rev": "0.12 m^2", "collection_factor": 2.0},
}


def make_machine(machine_id, **changes):
    return machine_from_table({"id": machine_id, **TABLES.get(machine_id, {}), **changes})


def machines_of(*ids, **changes):
    return {machine_id: make_machine(machine_id, **changes) for machine_id in ids}


def frame(machine, current, speed_rev_s=np.nan, belt_speed=np.nan, rh=0.45,
          temperature=293.15, pressure=101_300.0, session="", flags=""):
    """A readings frame in the columns of engine.columns, broadcast from the arguments."""
    current = np.atleast_1d(np.asarray(current, dtype=float))
    n = current.size

    def spread(value, dtype=float):
        return np.broadcast_to(np.asarray(value, dtype=dtype), (n,)).copy()

    return pd.DataFrame({
        col.ROW: np.arange(1, n + 1),
        col.MACHINE: spread(machine, object),
        col.SESSION: spread(session, object),
        col.TIME: pd.NaT,
        col.ELAPSED_S: np.arange(n, dtype=float),
        col.SPEED_REV_S: spread(speed_rev_s),
        col.BELT_SPEED_M_S: spread(belt_speed),
        col.CURRENT_A: current,
        col.RH: spread(rh),
        col.TEMPERATURE_K: spread(temperature),
        col.PRESSURE_PA: spread(pressure),
        col.VOLTAGE_V: np.nan,
        col.NOTE: "",
        col.FLAGS: spread(flags, object),
    })


def flag_lists(derived):
    return [set(filter(None, text.split(";"))) for text in derived[col.FLAGS]]


# --- hand-worked ceilings -------------------------------------------------------------------

def test_ceiling_hand_worked_for_each_carrier_kind():
    machines = machines_of("twin", "belt", "roller-belt", "drum", "odd")
    readings = pd.concat([
        frame("twin", 7e-6, speed_rev_s=5.0),
        frame("belt", 4e-6, belt_speed=6.0),
        frame("roller-belt", 1e-6, speed_rev_s=10.0),
        frame("drum", 5e-6, speed_rev_s=2.0),
        frame("odd", 8e-6, speed_rev_s=3.0, pressure=84_600.0, temperature=283.15),
    ], ignore_index=True)
    derived = derive(readings, machines)
    # sigma = 8.8541878128e-12 F/m * 3e6 V/m = 2.65625634e-5 C/m^2 (hand-worked).
    # disc: A = pi (0.23^2 - 0.15^2) * 0.55 = pi * 0.0304 * 0.55 = 0.0525274 m^2;
    #       I = 2.65626e-5 * 0.0525274 * 5 rev/s * 2 discs * k 1 = 13.9526 uA
    # belt: I = sigma * w * v = 2.65626e-5 * 0.05 m * 6 m/s = 7.96877 uA
    # roller belt: A = 0.05 * pi * 0.04 = 0.00628319 m^2; I = 2.65626e-5 * 0.00628319 * 10
    #       = 1.66898 uA
    # cylinder: A = 2 pi * 0.1 * 0.3 = 0.188496 m^2; I = 2.65626e-5 * 0.188496 * 2 = 10.0139 uA
    # custom at 84.6 kPa, 10 degC: delta = (84.6 / 101.3) * (293.15 / 283.15) = 0.864638;
    #       I = 2.65626e-5 * 0.864638 * 0.12 m^2 * 3 rev/s * k 2 = 16.5362 uA
    expected_ua = [13.9526, 7.96877, 1.66898, 10.0139, 16.5362]
    np.testing.assert_allclose(derived[col.CEILING_A] * 1e6, expected_ua, rtol=2e-5)
    np.testing.assert_allclose(derived[col.RELATIVE_AIR_DENSITY], [1, 1, 1, 1, 0.864638],
                               rtol=1e-6)
    np.testing.assert_allclose(derived[col.EFFICIENCY],
                               readings[col.CURRENT_A] / (np.array(expected_ua) * 1e-6),
                               rtol=2e-5)
    # charge per revolution I / f: 7e-6 / 5 = 1.4 uC (disc); the linear belt has no f.
    assert derived[col.CHARGE_PER_REV_C][0] == pytest.approx(1.4e-6)
    assert math.isnan(derived[col.CHARGE_PER_REV_C][1])
    # achieved density I / (A f N): disc 7e-6 / (0.0525274 * 5 * 2) = 13.3263 uC/m^2;
    # linear belt 4e-6 / (0.05 * 6) = 13.3333 uC/m^2
    assert derived[col.SURFACE_DENSITY_C_M2][0] == pytest.approx(13.3263e-6, rel=1e-5)
    assert derived[col.SURFACE_DENSITY_C_M2][1] == pytest.approx(4e-6 / 0.3)
    assert (derived[col.FLAGS] == "").all()


def test_belt_read_in_metres_per_second_gets_its_roller_speed():
    # f = v / (pi d) = 3 m/s / (pi * 0.04 m) = 23.8732 rev/s (hand-worked)
    derived = derive(frame("roller-belt", 2e-6, belt_speed=3.0), machines_of("roller-belt"))
    assert derived[col.SPEED_REV_S][0] == pytest.approx(3.0 / (math.pi * 0.04))
    # the ceiling is sigma * w * v either way: 2.65626e-5 * 0.05 * 3 = 3.98438 uA
    assert derived[col.CEILING_A][0] == pytest.approx(SIGMA_REF * 0.05 * 3.0)
    assert derived[col.CHARGE_PER_REV_C][0] == pytest.approx(2e-6 / (3.0 / (math.pi * 0.04)))


def test_site_fills_missing_air_conditions():
    machines = machines_of("drum")
    readings = frame("drum", 5e-6, speed_rev_s=2.0, pressure=np.nan, temperature=np.nan)
    # delta = (84.6 / 101.3) * (293.15 / 283.15) = 0.864638 (hand-worked)
    derived = derive(readings, machines, Site(84_600.0, 283.15))
    assert derived[col.RELATIVE_AIR_DENSITY][0] == pytest.approx(0.864638, rel=1e-6)
    # a machines file brings its own site when none is given
    machine_file = MachineFile(Site(84_600.0, 283.15), tuple(machines.values()))
    assert derive(readings, machine_file)[col.RELATIVE_AIR_DENSITY][0] == pytest.approx(
        0.864638, rel=1e-6)
    # no site at all: the IEC 60060-1 reference, delta = 1
    assert derive(readings, machines)[col.RELATIVE_AIR_DENSITY][0] == pytest.approx(1.0)


def test_humidity_columns_are_the_air_module_functions():
    readings = frame("drum", [5e-6, 5e-6], speed_rev_s=2.0, rh=[0.3, 0.8],
                     temperature=[288.15, 298.15])
    derived = derive(readings, machines_of("drum"))
    # reference: engine.air (itself checked against psychrolib in test_air.py)
    np.testing.assert_allclose(derived[col.ABS_HUMIDITY_KG_M3],
                               absolute_humidity([0.3, 0.8], [288.15, 298.15]))
    np.testing.assert_allclose(derived[col.DEW_POINT_K], dew_point([0.3, 0.8], [288.15, 298.15]))


# --- flags ------------------------------------------------------------------------------------

def test_unknown_machine_is_flagged_and_kept():
    readings = pd.concat([frame("drum", 5e-6, speed_rev_s=2.0),
                          frame("ghost", 5e-6, speed_rev_s=2.0)], ignore_index=True)
    derived = derive(readings, machines_of("drum"))
    assert flag_lists(derived) == [set(), {"unknown_machine"}]
    assert math.isnan(derived[col.CEILING_A][1]) and math.isnan(derived[col.EFFICIENCY][1])
    assert derived[col.RELATIVE_AIR_DENSITY][1] == pytest.approx(1.0)


def test_speed_kind_is_flagged_for_linear_disc_and_rotating_bare_belt():
    readings = pd.concat([frame("twin", 5e-6, belt_speed=4.0),
                          frame("belt", 5e-6, speed_rev_s=4.0),
                          frame("belt", 5e-6, belt_speed=4.0)], ignore_index=True)
    derived = derive(readings, machines_of("twin", "belt"))
    assert flag_lists(derived) == [{"speed_kind"}, {"speed_kind"}, set()]
    assert derived[col.CEILING_A][:2].isna().all()


def test_above_ceiling_is_flagged():
    # ceiling of the drum at 2 rev/s is 10.0139 uA (hand-worked above); 20 uA is above it
    derived = derive(frame("drum", [5e-6, 20e-6], speed_rev_s=2.0), machines_of("drum"))
    assert flag_lists(derived) == [set(), {"above_ceiling"}]
    assert derived[col.EFFICIENCY][1] == pytest.approx(20 / 10.0139, rel=1e-4)


def test_missing_value_added_only_to_clean_rows():
    readings = frame("drum", [np.nan, np.nan, 5e-6], speed_rev_s=[2.0, 2.0, np.nan],
                     flags=["", "not_a_number", ""])
    derived = derive(readings, machines_of("drum"))
    assert list(derived[col.FLAGS]) == ["missing_value", "not_a_number", "missing_value"]


def test_existing_flags_kept_and_own_flags_recomputed():
    readings = frame("drum", [20e-6, 5e-6], speed_rev_s=2.0,
                     flags=["no_environment", "rh_out_of_range;above_ceiling"])
    machines = machines_of("drum")
    derived = derive(readings, machines)
    assert list(derived[col.FLAGS]) == ["no_environment;above_ceiling", "rh_out_of_range"]
    # deriving again changes nothing
    again = derive(derived, machines)
    pd.testing.assert_frame_equal(again, derived)
    # a corrected (larger) drum clears the stale above_ceiling flag
    bigger = {"drum": make_machine("drum", active_length="90 cm")}
    assert list(derive(derived, bigger)[col.FLAGS]) == ["no_environment", "rh_out_of_range"]


def test_derive_refuses_unusable_tables():
    readings = frame("drum", 5e-6, speed_rev_s=2.0)
    with pytest.raises(InputError, match="current_a"):
        derive(readings.drop(columns=[col.CURRENT_A]), machines_of("drum"))
    with pytest.raises(InputError, match="speed"):
        derive(readings.drop(columns=[col.SPEED_REV_S, col.BELT_SPEED_M_S]),
               machines_of("drum"))
    with pytest.raises(InputError, match="'rh' must hold numbers"):
        derive(readings.assign(**{col.RH: "45 %"}), machines_of("drum"))


def test_derive_does_not_change_its_input():
    readings = frame("roller-belt", [1e-6, 9e-6], belt_speed=3.0)
    before = readings.copy()
    derive(readings, machines_of("roller-belt"))
    pd.testing.assert_frame_equal(readings, before)


# --- uncertainty against the uncertainties package ------------------------------------------

def _ufloat_efficiency(current, current_u, area, speed, speed_u, field_u, delta, carriers,
                       factor):
    # an exact value stays a float: uncertainties warns about a zero standard deviation
    field = ufloat(3.0e6, field_u) if field_u else 3.0e6
    current = ufloat(current, current_u) if current_u else current
    return current / (EPSILON_0 * field * delta * area
                      * ufloat(speed, speed_u) * carriers * factor)


UNCERTAINTY_CASES = [
    # machine id, table changes, reading (current A, speed, linear?), and the same model
    # written with ufloats: a function of (current, speed) giving eta as a ufloat.
    ("twin", {"tolerance": {"outer_diameter": "1 mm", "inner_diameter": "1 mm",
                            "sector_fill": 0.01, "speed": "2 %", "current": "3 %",
                            "breakdown_field": "5 %"}},
     (7e-6, 5.0, False),
     lambda i, f: _ufloat_efficiency(
         i, 0.03 * i, math.pi * ((ufloat(0.46, 0.001) / 2) ** 2 - (ufloat(0.30, 0.001) / 2) ** 2)
         * ufloat(0.55, 0.01), f, 0.02 * f, 0.05 * 3e6, 1.0, 2, 1.0)),
    ("roller-belt", {"tolerance": {"width": "1 mm", "roller_diameter": "2 %",
                                   "speed": "0.1 rev/s", "current": "0.2 uA"}},
     (1e-6, 10.0, False),
     lambda i, f: _ufloat_efficiency(
         i, 0.2e-6, ufloat(0.05, 0.001) * math.pi * ufloat(0.04, 0.0008), f, 0.1, 0.0, 1.0,
         1, 1.0)),
    ("roller-belt", {"tolerance": {"width": "1 mm", "roller_diameter": "2 %",
                                   "speed": "0.05 m/s", "current": "2 %"}},
     (2e-6, 3.0, True),
     lambda i, v: _ufloat_efficiency(i, 0.02 * i, ufloat(0.05, 0.001), v, 0.05, 0.0, 1.0, 1,
                                     1.0)),
    # a tolerance in rev/s on a belt read in m/s: u(v) = 0.1 rev/s * pi * 0.04 m
    ("roller-belt", {"tolerance": {"speed": "0.1 rev/s"}},
     (2e-6, 3.0, True),
     lambda i, v: _ufloat_efficiency(i, 0.0, 0.05, v, 0.1 * math.pi * 0.04, 0.0, 1.0, 1, 1.0)),
    ("belt", {"tolerance": {"width": "2 %", "speed": "1 %", "current": "0.1 uA",
                            "breakdown_field": "0.1 MV/m"}},
     (4e-6, 6.0, True),
     lambda i, v: _ufloat_efficiency(i, 0.1e-6, ufloat(0.05, 0.001), v, 0.06, 0.1e6, 1.0, 1,
                                     1.0)),
    ("drum", {"tolerance": {"diameter": "1 mm", "active_length": "1 %", "speed": "0.05 rev/s",
                            "current": "3 %"}},
     (5e-6, 2.0, False),
     lambda i, f: _ufloat_efficiency(
         i, 0.03 * i, 2 * math.pi * (ufloat(0.2, 0.001) / 2) * ufloat(0.3, 0.003), f, 0.05, 0.0,
         1.0, 1, 1.0)),
    ("odd", {"tolerance": {"area_per_rev": "3 %", "speed": "2 %", "current": "0.5 uA",
                           "breakdown_field": "4 %"}},
     (8e-6, 3.0, False),
     lambda i, f: _ufloat_efficiency(i, 0.5e-6, ufloat(0.12, 0.0036), f, 0.02 * f, 0.04 * 3e6,
                                     1.0, 1, 2.0)),
]


@pytest.mark.parametrize(("machine_id", "changes", "reading", "reference"), UNCERTAINTY_CASES)
def test_efficiency_uncertainty_matches_uncertainties_package(machine_id, changes, reading,
                                                              reference):
    current, speed, linear = reading
    machines = {machine_id: make_machine(machine_id, **changes)}
    readings = (frame(machine_id, current, belt_speed=speed) if linear
                else frame(machine_id, current, speed_rev_s=speed))
    derived = derive(readings, machines)
    expected = reference(current, speed)  # reference: uncertainties (linear propagation)
    assert derived[col.EFFICIENCY][0] == pytest.approx(expected.nominal_value, rel=1e-9)
    assert derived[col.EFFICIENCY_U][0] == pytest.approx(expected.std_dev, rel=1e-9)


def test_speed_tolerance_in_metres_per_second_for_a_disc_is_refused_at_the_file():
    # The machines file refuses it, so no reading ever gets an uncertainty it cannot have.
    with pytest.raises(InputError, match="must be a rotation rate"):
        make_machine("twin", tolerance={"speed": "0.05 m/s"})


def test_zero_current_with_absolute_tolerance_keeps_a_finite_uncertainty():
    machines = {"drum": make_machine("drum", tolerance={"current": "0.2 uA"})}
    derived = derive(frame("drum", 0.0, speed_rev_s=2.0), machines)
    # u(eta) = u(I) / I_c = 0.2 uA / 10.0139 uA = 0.019972 (hand-worked)
    assert derived[col.EFFICIENCY_U][0] == pytest.approx(0.2 / 10.0139, rel=1e-4)


# --- properties ---------------------------------------------------------------------------------

_PROPERTY_MACHINES = machines_of("twin", "belt", "roller-belt", "drum", "odd")
_optional_float = st.one_of(st.just(float("nan")), st.floats(0.01, 50.0))


@st.composite
def reading_frames(draw):
    n = draw(st.integers(0, 25))
    ids = st.sampled_from([*_PROPERTY_MACHINES, "ghost"])
    readings = pd.DataFrame({
        col.ROW: np.arange(1, n + 1),
        col.MACHINE: draw(st.lists(ids, min_size=n, max_size=n)),
        col.SESSION: draw(st.lists(st.sampled_from(["", "a", "b"]), min_size=n, max_size=n)),
        col.TIME: pd.NaT,
        col.ELAPSED_S: np.arange(n, dtype=float),
        col.SPEED_REV_S: draw(st.lists(_optional_float, min_size=n, max_size=n)),
        col.BELT_SPEED_M_S: draw(st.lists(_optional_float, min_size=n, max_size=n)),
        col.CURRENT_A: np.array(draw(st.lists(_optional_float, min_size=n, max_size=n))) * 1e-6,
        col.RH: draw(st.lists(st.floats(0.0, 1.0), min_size=n, max_size=n)),
        col.TEMPERATURE_K: 293.15,
        col.PRESSURE_PA: draw(st.lists(st.one_of(st.just(float("nan")),
                                                 st.floats(5e4, 1.1e5)),
                                       min_size=n, max_size=n)),
        col.VOLTAGE_V: np.nan,
        col.NOTE: "",
        col.FLAGS: draw(st.lists(st.sampled_from(["", "no_environment", "above_ceiling",
                                                  "bad_time;speed_kind"]),
                                 min_size=n, max_size=n)),
    })
    # labels that are neither sorted nor a range, and may repeat (a concat without
    # ignore_index): order must come from position
    if draw(st.booleans()):
        readings.index = draw(st.permutations(list(range(100, 100 + n))))
    else:
        readings.index = draw(st.lists(st.integers(0, 3), min_size=n, max_size=n))
    return readings


@given(reading_frames())
def test_derive_never_drops_or_reorders_rows(readings):
    # law: no reading is lost or moved by derive, and flags it does not own survive
    derived = derive(readings, _PROPERTY_MACHINES)
    assert len(derived) == len(readings)
    assert list(derived.index) == list(readings.index)
    assert list(derived[col.ROW]) == list(readings[col.ROW])
    assert list(derived[col.MACHINE]) == list(readings[col.MACHINE])
    for before, after in zip(readings[col.FLAGS], derived[col.FLAGS], strict=True):
        kept = {code for code in before.split(";") if code} - set(analysis.DERIVE_FLAGS)
        assert kept <= set(after.split(";"))
    assert set(col.DERIVED_COLUMNS) <= set(derived.columns)


@given(st.lists(st.floats(0.0, 500.0), min_size=1, max_size=20),
       st.sampled_from(["uA", "mA", "nA", "A"]))
def test_efficiency_is_invariant_to_the_current_unit(currents_ua, unit):
    # law: the same current written in another unit gives the same efficiency
    scale_ua, _ = unit_conversion("uA", "current")
    scale_other, _ = unit_conversion(unit, "current")
    in_other_unit = np.array(currents_ua) * scale_ua / scale_other
    machines = machines_of("twin")
    first = derive(frame("twin", np.array(currents_ua) * scale_ua, speed_rev_s=5.0), machines)
    second = derive(frame("twin", in_other_unit * scale_other, speed_rev_s=5.0), machines)
    np.testing.assert_allclose(first[col.EFFICIENCY], second[col.EFFICIENCY], rtol=1e-12,
                               atol=1e-300)


@given(st.floats(0.01, 100.0), st.floats(0.1, 50.0),
       st.sampled_from(["twin", "belt", "roller-belt", "drum", "odd"]))
def test_efficiency_doubles_with_current_and_ceiling_doubles_with_speed(current_ua, speed,
                                                                         machine_id):
    # laws: eta is proportional to I; I_ceiling is proportional to the speed
    machines = machines_of(machine_id)
    kind = "belt_speed" if machine_id == "belt" else "speed_rev_s"
    base = derive(frame(machine_id, current_ua * 1e-6, **{kind: speed}), machines)
    double_current = derive(frame(machine_id, 2 * current_ua * 1e-6, **{kind: speed}),
                            machines)
    double_speed = derive(frame(machine_id, current_ua * 1e-6, **{kind: 2 * speed}), machines)
    assert double_current[col.EFFICIENCY][0] == pytest.approx(2 * base[col.EFFICIENCY][0],
                                                              rel=1e-12)
    assert double_speed[col.CEILING_A][0] == pytest.approx(2 * base[col.CEILING_A][0],
                                                           rel=1e-12)


# --- closed-form statistics against statsmodels and scipy -----------------------------------

def test_fit_line_matches_statsmodels_and_scipy():
    rng = np.random.default_rng(11)
    x = rng.uniform(2, 8, 40)
    y = 3.0 * x + 1.5 + rng.normal(0, 0.7, 40)
    fit = fit_line(x, y)
    reference = sm.OLS(y, sm.add_constant(x)).fit()  # reference: statsmodels OLS
    np.testing.assert_allclose([fit.intercept, fit.slope], reference.params, rtol=1e-10)
    np.testing.assert_allclose([fit.intercept_ci, fit.slope_ci], reference.conf_int(0.05),
                               rtol=1e-10)
    assert fit.r_squared == pytest.approx(reference.rsquared, rel=1e-10)
    line = scipy.stats.linregress(x, y)  # reference: scipy.stats.linregress
    assert fit.slope == pytest.approx(line.slope, rel=1e-10)
    assert fit.intercept == pytest.approx(line.intercept, rel=1e-10)
    assert fit.slope_se == pytest.approx(line.stderr, rel=1e-10)
    assert fit.intercept_se == pytest.approx(line.intercept_stderr, rel=1e-10)
    assert fit.r_squared == pytest.approx(line.rvalue**2, rel=1e-10)
    # the fitted mean at x = 5 and its interval, against statsmodels get_prediction
    value, interval = fit.mean_at(5.0)
    prediction = reference.get_prediction(np.array([[1.0, 5.0]])).summary_frame(alpha=0.05)
    assert value == pytest.approx(prediction["mean"][0], rel=1e-10)
    np.testing.assert_allclose(interval, prediction[["mean_ci_lower", "mean_ci_upper"]]
                               .to_numpy()[0], rtol=1e-10)


def test_fit_line_refuses_too_few_points_and_no_spread():
    with pytest.raises(InputError, match="at least 3"):
        fit_line([1.0, 2.0], [1.0, 2.0])
    with pytest.raises(InputError, match="differ"):
        fit_line([2.0, 2.0, 2.0], [1.0, 2.0, 3.0])


def test_fit_linear_model_matches_statsmodels():
    rng = np.random.default_rng(12)
    design = np.column_stack([np.ones(50), rng.random(50) < 0.5, rng.uniform(2, 8, 50),
                              rng.uniform(0.3, 0.8, 50)])
    y = design @ [0.3, 0.1, -0.02, -0.4] + rng.normal(0, 0.03, 50)
    model = fit_linear_model(design, y, ["intercept", "session", "speed", "humidity"])
    reference = sm.OLS(y, design).fit()  # reference: statsmodels OLS
    np.testing.assert_allclose(model.coefficients, reference.params, rtol=1e-9)
    np.testing.assert_allclose(model.standard_errors, reference.bse, rtol=1e-9)
    np.testing.assert_allclose(model.conf_int, reference.conf_int(0.05), rtol=1e-9)
    assert model.r_squared == pytest.approx(reference.rsquared, rel=1e-9)
    with pytest.raises(InputError, match="collinear"):
        fit_linear_model(np.column_stack([design, 2 * design[:, 2]]), y, list("abcde"))


def test_welch_difference_matches_scipy():
    rng = np.random.default_rng(13)
    a, b = rng.normal(0.30, 0.05, 12), rng.normal(0.42, 0.09, 30)
    difference, interval = welch_difference(a, b)
    reference = scipy.stats.ttest_ind(b, a, equal_var=False)  # reference: scipy.stats Welch
    assert difference == pytest.approx(b.mean() - a.mean())
    np.testing.assert_allclose(interval, reference.confidence_interval(0.95), rtol=1e-10)


# --- findings -------------------------------------------------------------------------------

def _speed_series(machine_id, machines, charge_per_rev, offset, noise, n, rng, **extra):
    """Currents I = q f + I_0 + noise at random speeds, and the frame that holds them."""
    speed = rng.uniform(2.0, 8.0, n)
    current = charge_per_rev * speed + offset + rng.normal(0, noise, n)
    return speed, current, frame(machine_id, current, speed_rev_s=speed, **extra)


def test_findings_recover_charge_per_revolution_and_offset():
    rng = np.random.default_rng(21)
    machines = machines_of("twin")
    # truth: eta 0.3 at k 1 -> q = 0.3 * sigma * A * N = 0.3 * 2.65626e-5 * 0.0525274 * 2
    #        = 0.837148 uC per revolution; offset 0.4 uA
    area = math.pi * (0.23**2 - 0.15**2) * 0.55
    q_true = 0.3 * SIGMA_REF * area * 2
    speed, current, readings = _speed_series("twin", machines, q_true, 0.4e-6, 0.2e-6, 200,
                                             rng, rh=rng.uniform(0.3, 0.6, 200))
    row = findings(derive(readings, machines), machines).iloc[0]
    low, high = row["charge_per_rev_ci_nC"]
    assert low < q_true * 1e9 < high
    low, high = row["offset_current_ci_uA"]
    assert low < 0.4 < high
    reference = sm.OLS(current, sm.add_constant(speed)).fit()  # reference: statsmodels OLS
    assert row["charge_per_rev_nC"] == pytest.approx(reference.params[1] * 1e9, rel=1e-9)
    np.testing.assert_allclose(row["charge_per_rev_ci_nC"], reference.conf_int(0.05)[1] * 1e9,
                               rtol=1e-9)
    np.testing.assert_allclose(row["offset_current_ci_uA"],
                               reference.conf_int(0.05)[0] * 1e6, rtol=1e-9)
    assert row["fit_r2"] == pytest.approx(reference.rsquared, rel=1e-9)
    # observed units = q / (sigma A) = 0.3 * 2 = 0.6 of the machine's 2 units (N x k = 2 x 1),
    # within its interval
    low, high = row["observed_units_ci"]
    assert low < 0.6 < high
    assert row["observed_units"] == pytest.approx(0.6, rel=0.02)
    assert row["units"] == 2 and "2 carriers" in row["units_rule"]
    assert row["readings_used"] == 200 and row["readings_flagged"] == 0
    assert row["carrier"] == "disc" and row["session"] is None
    low_eta, median_eta, high_eta = (row["efficiency_q25"], row["efficiency_median"],
                                     row["efficiency_q75"])
    assert low_eta < median_eta < high_eta


def test_observed_units_use_the_air_density_of_the_readings():
    rng = np.random.default_rng(22)
    # a machine declared with k = 2 that runs at 80 % of its ceiling at 84.6 kPa, 20 degC:
    # q = 0.8 * 2 * sigma * delta * A, delta = 84.6 / 101.3 = 0.835143; observed units 1.6
    machines = machines_of("drum", collection_factor=2.0)
    delta = 84_600.0 / 101_300.0
    q_true = 1.6 * SIGMA_REF * delta * 2 * math.pi * 0.1 * 0.3
    _speed, _current, readings = _speed_series("drum", machines, q_true, 0.0, 0.05e-6, 100, rng,
                                               pressure=84_600.0)
    row = findings(derive(readings, machines), machines).iloc[0]
    low, high = row["observed_units_ci"]
    assert low < 1.6 < high
    assert row["charge_density_limit_uC_m2"] == pytest.approx(SIGMA_REF * delta * 1e6)
    assert row["efficiency_median"] == pytest.approx(0.8, rel=0.02)


def test_belt_known_only_in_metres_per_second_is_fitted_per_metre():
    rng = np.random.default_rng(23)
    machines = machines_of("belt")
    # I = q_m v + I_0 with q_m = 0.5 * sigma * w = 0.5 * 2.65626e-5 * 0.05 = 0.664064 uC/m
    speed = rng.uniform(2.0, 10.0, 80)
    current = 0.5 * SIGMA_REF * 0.05 * speed + rng.normal(0, 0.05e-6, 80)
    row = findings(derive(frame("belt", current, belt_speed=speed), machines),
                   machines).iloc[0]
    assert math.isnan(row["charge_per_rev_nC"]) and row["speed_fit_on"] == "m/s"
    line = scipy.stats.linregress(speed, current)  # reference: scipy.stats.linregress
    assert row["charge_per_metre_nC"] == pytest.approx(line.slope * 1e9, rel=1e-9)
    # observed units = slope / (sigma w)
    assert row["observed_units"] == pytest.approx(line.slope / (SIGMA_REF * 0.05), rel=1e-9)
    low, high = row["observed_units_ci"]
    assert low < 0.5 < high


def _humidity_frame(machine_id, efficiency, rh, rng):
    speed = rng.uniform(2.0, 8.0, rh.size)
    ceiling = derive(frame(machine_id, np.ones(rh.size), speed_rev_s=speed),
                     machines_of(machine_id))[col.CEILING_A].to_numpy()
    return frame(machine_id, efficiency * ceiling, speed_rev_s=speed, rh=rh)


def test_findings_recover_a_linear_humidity_slope():
    rng = np.random.default_rng(24)
    rh = rng.uniform(0.30, 0.60, 150)
    # truth: eta = 0.40 - 0.6 (RH - 0.45): -0.06 per +10 percentage points, 0.40 at 45 %
    efficiency = 0.40 - 0.6 * (rh - 0.45) + rng.normal(0, 0.01, 150)
    machines = machines_of("drum")
    row = findings(derive(_humidity_frame("drum", efficiency, rh, rng), machines),
                   machines).iloc[0]
    low, high = row["humidity_slope_per_10pct_ci"]
    assert low < -0.06 < high
    low, high = row["efficiency_at_reference_rh_ci"]
    assert low < 0.40 < high
    reference = sm.OLS(efficiency, sm.add_constant(rh)).fit()  # reference: statsmodels OLS
    assert row["humidity_slope_per_10pct"] == pytest.approx(reference.params[1] * 0.1,
                                                            rel=1e-6)
    assert "logistic decline not fitted" in row["notes"]


def test_findings_recover_a_logistic_humidity_drop():
    rng = np.random.default_rng(25)
    rh = rng.uniform(0.30, 0.90, 400)
    # truth: eta = 0.55 / (1 + exp((RH - 0.68) / 0.04))
    efficiency = logistic_efficiency(rh, 0.55, 0.68, 0.04) + rng.normal(0, 0.01, 400)
    machines = machines_of("twin")
    row = findings(derive(_humidity_frame("twin", efficiency, rh, rng), machines),
                   machines).iloc[0]
    low, high = row["logistic_rh_half_ci_pct"]
    assert low < 68.0 < high and row["logistic_rh_half_pct"] == pytest.approx(68.0, abs=0.5)
    low, high = row["logistic_dry_efficiency_ci"]
    assert low < 0.55 < high
    assert row["logistic_width_pct"] == pytest.approx(4.0, rel=0.15)
    # The efficiency at the reference humidity comes from the curve that was fitted, not from
    # the straight line: at 70 % RH the truth is 0.55 / (1 + exp(0.5)) = 0.2085.
    wet = findings(derive(_humidity_frame("twin", efficiency, rh, rng), machines), machines,
                   reference_rh=0.70).iloc[0]
    assert wet["humidity_model"] == "logistic decline"
    assert wet["efficiency_at_reference_rh"] == pytest.approx(
        logistic_efficiency(0.70, wet["logistic_dry_efficiency"],
                            wet["logistic_rh_half_pct"] / 100, wet["logistic_width_pct"] / 100))
    low, high = wet["efficiency_at_reference_rh_ci"]
    assert low < 0.55 / (1 + math.exp(0.5)) < high
    line = np.polyfit(rh, efficiency, 1)  # the straight line misses the knee
    assert abs(np.polyval(line, 0.70) - 0.2085) > 3 * (high - low)


def test_logistic_efficiency_hand_worked():
    # at RH_half the efficiency is half the dry value; one width above, 1 / (1 + e) = 0.268941
    assert logistic_efficiency(0.68, 0.6, 0.68, 0.04) == pytest.approx(0.3)
    assert logistic_efficiency(0.72, 1.0, 0.68, 0.04) == pytest.approx(1 / (1 + math.e))


def test_failed_logistic_fit_is_reported_not_raised(monkeypatch):
    rng = np.random.default_rng(26)
    rh = rng.uniform(0.30, 0.90, 100)
    efficiency = logistic_efficiency(rh, 0.55, 0.68, 0.04)

    def failing_fit(*args, **kwargs):
        raise RuntimeError("Optimal parameters not found")

    import scipy.optimize

    monkeypatch.setattr(scipy.optimize, "curve_fit", failing_fit)
    machines = machines_of("twin")
    row = findings(derive(_humidity_frame("twin", efficiency, rh, rng), machines),
                   machines).iloc[0]
    assert "logistic fit failed" in row["notes"]
    assert math.isnan(row["logistic_rh_half_pct"]) and row["logistic_rh_half_ci_pct"] is None
    assert math.isfinite(row["humidity_slope_per_10pct"])


def test_findings_say_why_a_fit_was_not_possible():
    machines = machines_of("twin", "drum", "odd")
    readings = pd.concat([
        frame("twin", [5e-6, 6e-6], speed_rev_s=[4.0, 5.0]),
        frame("drum", [5e-6, 5.1e-6, 4.9e-6, 5e-6], speed_rev_s=3.0,
              rh=[0.40, 0.41, 0.42, 0.43]),
        frame("odd", [5e-6, 6e-6, 7e-6], speed_rev_s=[2.0, 2.5, 3.0], rh=[0.44, 0.45, 0.46]),
        frame("ghost", [5e-6, 6e-6, 7e-6], speed_rev_s=[2.0, 2.5, 3.0]),
    ], ignore_index=True)
    table = findings(derive(readings, machines), machines).set_index("machine")
    assert "fewer than 3 usable readings" in table.loc["twin", "notes"]
    assert "no spread in speed" in table.loc["drum", "notes"]
    assert math.isnan(table.loc["drum", "charge_per_rev_nC"])
    assert "RH spans less than 5 percentage points" in table.loc["drum", "notes"]
    assert "RH spans less than 5 percentage points" in table.loc["odd", "notes"]
    assert math.isfinite(table.loc["odd", "charge_per_rev_nC"])
    assert table.loc["odd", "humidity_slope_per_10pct_ci"] is None
    assert "not in the machines list" in table.loc["ghost", "notes"]
    assert table.loc["ghost", "readings_flagged"] == 3
    assert list(table.index) == ["twin", "drum", "odd", "ghost"]


def test_findings_by_session_and_flagged_readings_left_out():
    rng = np.random.default_rng(27)
    machines = machines_of("drum")
    q = 0.3 * SIGMA_REF * 2 * math.pi * 0.1 * 0.3
    _s, _c, before = _speed_series("drum", machines, q, 0.0, 0.02e-6, 30, rng, session="before")
    _s, _c, after = _speed_series("drum", machines, 2 * q, 0.0, 0.02e-6, 40, rng,
                                  session="after")
    after.loc[after.index[:5], col.FLAGS] = "no_environment"
    derived = derive(pd.concat([before, after], ignore_index=True), machines)
    table = findings(derived, machines, by_session=True)
    assert list(table["session"]) == ["before", "after"]
    assert list(table["readings_total"]) == [30, 40]
    assert list(table["readings_used"]) == [30, 35]
    assert list(table["readings_flagged"]) == [0, 5]
    np.testing.assert_allclose(table["observed_units"], [0.3, 0.6], rtol=0.03)
    whole = findings(derived, machines)
    assert len(whole) == 1 and whole["readings_used"][0] == 65


def test_findings_of_nothing_is_an_empty_table():
    machines = machines_of("drum")
    empty = derive(frame("drum", []), machines)
    table = findings(empty, machines)
    assert table.empty and list(table.columns) == list(analysis.FINDINGS_COLUMNS)
    with pytest.raises(InputError, match="derive first"):
        findings(frame("drum", [1e-6]), machines)


# --- compare_sessions -----------------------------------------------------------------------

def _two_sessions(rng, difference=0.18, n_a=60, n_b=80):
    """Session 'after' runs faster and drier than 'before'; efficiency falls with both."""
    speed = np.concatenate([rng.uniform(2, 5, n_a), rng.uniform(4, 8, n_b)])
    rh = np.concatenate([rng.uniform(0.5, 0.7, n_a), rng.uniform(0.35, 0.55, n_b)])
    is_after = np.r_[np.zeros(n_a), np.ones(n_b)]
    efficiency = (0.30 + difference * is_after - 0.02 * (speed - 5) - 0.5 * (rh - 0.45)
                  + rng.normal(0, 0.03, n_a + n_b))
    sessions = np.where(is_after == 1, "after", "before")
    ceiling = derive(frame("twin", np.ones(speed.size), speed_rev_s=speed),
                     machines_of("twin"))[col.CEILING_A].to_numpy()
    return frame("twin", efficiency * ceiling, speed_rev_s=speed, rh=rh, session=sessions)


def test_compare_sessions_matches_statsmodels_and_scipy():
    rng = np.random.default_rng(31)
    machines = machines_of("twin")
    derived = derive(_two_sessions(rng), machines)
    result = compare_sessions(derived, "twin", "before", "after")
    data = pd.DataFrame({"efficiency": derived[col.EFFICIENCY], "speed": derived[col.SPEED_REV_S],
                         "rh": derived[col.RH], "session": derived[col.SESSION]})
    # reference: statsmodels OLS with a categorical session term, 'before' the baseline
    model = smf.ols("efficiency ~ C(session, Treatment('before')) + speed + rh", data).fit()
    term = "C(session, Treatment('before'))[T.after]"
    assert result["adjusted_difference"] == pytest.approx(model.params[term], rel=1e-9)
    np.testing.assert_allclose(result["adjusted_difference_ci"],
                               model.conf_int(0.05).loc[term], rtol=1e-9)
    low, high = result["adjusted_difference_ci"]
    assert low < 0.18 < high
    # reference: scipy.stats.ttest_ind, Welch
    a = data.loc[data.session == "before", "efficiency"]
    b = data.loc[data.session == "after", "efficiency"]
    welch = scipy.stats.ttest_ind(b, a, equal_var=False)
    np.testing.assert_allclose(result["raw_difference_ci"], welch.confidence_interval(0.95),
                               rtol=1e-10)
    assert (result["n_a"], result["n_b"]) == (60, 80)
    assert result["adjusted_for"] == ["speed", "humidity"]
    half = (high - low) / 2 * 100
    shown, shown_half = analysis._round_pair(result["adjusted_difference"] * 100, half)
    assert result["verdict"] == (
        f"The 'after' session delivers {shown} ± {shown_half} percentage points more efficiency "
        "than 'before' at the same speed and humidity (± is the 95 % interval).")


def test_compare_sessions_says_less_and_no_clear_difference():
    rng = np.random.default_rng(32)
    machines = machines_of("twin")
    worse = compare_sessions(derive(_two_sessions(rng, difference=-0.15), machines), "twin",
                             "before", "after")
    assert "points less efficiency than 'before'" in worse["verdict"]
    same = compare_sessions(derive(_two_sessions(rng, difference=0.0), machines), "twin",
                            "before", "after")
    low, high = same["adjusted_difference_ci"]
    assert low < 0 < high
    assert same["verdict"].startswith("No clear difference between 'after' and 'before'")


def test_compare_sessions_drops_a_term_without_spread():
    rng = np.random.default_rng(33)
    machines = machines_of("drum")
    speed = rng.uniform(2, 8, 40)
    current = 2e-6 * speed * np.r_[np.ones(20), 1.2 * np.ones(20)] + rng.normal(0, 1e-7, 40)
    readings = frame("drum", current, speed_rev_s=speed, rh=0.5,
                     session=np.r_[["a"] * 20, ["b"] * 20])
    result = compare_sessions(derive(readings, machines), "drum", "a", "b")
    assert result["adjusted_for"] == ["speed"]
    assert any("humidity has no spread" in note for note in result["notes"])
    assert "at the same speed (" in result["verdict"]
    # each session at one speed of its own: speed cannot be told from session
    fixed = frame("drum", current, speed_rev_s=np.r_[[3.0] * 20, [6.0] * 20],
                  rh=rng.uniform(0.3, 0.6, 40), session=np.r_[["a"] * 20, ["b"] * 20])
    result = compare_sessions(derive(fixed, machines), "drum", "a", "b")
    assert result["adjusted_for"] == ["humidity"]
    assert any("speed is fixed by the session" in note for note in result["notes"])


def test_compare_sessions_refuses_what_it_cannot_compare():
    rng = np.random.default_rng(34)
    machines = machines_of("twin")
    derived = derive(_two_sessions(rng, n_a=5, n_b=5), machines)
    with pytest.raises(InputError, match="machine 'drum' has no readings"):
        compare_sessions(derived, "drum", "before", "after")
    with pytest.raises(InputError, match="no readings in session 'later'"):
        compare_sessions(derived, "twin", "before", "later")
    with pytest.raises(InputError, match="two different sessions"):
        compare_sessions(derived, "twin", "before", "before")
    derived.loc[derived.index[1:5], col.FLAGS] = "no_environment"
    with pytest.raises(InputError, match="at least 2 per session"):
        compare_sessions(derived, "twin", "before", "after")


# --- many machines at once (speed is measured by the benchmark, not here) --------------------

def test_twenty_machines_of_every_kind_in_one_frame():
    rng = np.random.default_rng(41)
    kinds = ["twin", "belt", "roller-belt", "drum", "odd"]
    machines = {f"{kind}-{number}": make_machine(kind, id=f"{kind}-{number}",
                                                 tolerance={"speed": "2 %"})
                for number in range(4) for kind in kinds}
    ids = np.array(list(machines))
    n = 100_000
    machine = ids[rng.integers(0, ids.size, n)]
    linear = np.char.startswith(machine.astype(str), "belt-")
    speed = rng.uniform(2, 8, n)
    rh = rng.uniform(0.3, 0.9, n)
    readings = frame("x", np.ones(n), rh=rh, session=np.where(rng.random(n) < 0.5, "a", "b"))
    readings[col.MACHINE] = machine
    readings[col.SPEED_REV_S] = np.where(linear, np.nan, speed)
    readings[col.BELT_SPEED_M_S] = np.where(linear, speed, np.nan)
    ceiling = derive(readings, machines)[col.CEILING_A].to_numpy()
    efficiency = logistic_efficiency(rh, 0.5, 0.7, 0.04) + rng.normal(0, 0.01, n)
    readings[col.CURRENT_A] = efficiency * ceiling

    derived = derive(readings, machines)
    table = findings(derived, machines)
    assert len(derived) == n and len(table) == 20
    # Every machine's logistic decline is recovered: the truth is rh_half = 0.70.
    assert table["logistic_rh_half_pct"].notna().all()
    np.testing.assert_allclose(table["logistic_rh_half_pct"], 70.0, atol=1.0)


def _compare_two_sessions(rng, rh, first_count, efficiency_of_rh, noise, names):
    """Two sessions of one machine whose efficiency depends on humidity only (truth: no
    session effect): the first ``first_count`` readings in session ``names[0]``."""
    machines = {"twin": make_machine("twin")}
    efficiency = efficiency_of_rh(rh) + rng.normal(0, noise, rh.size)
    speed = rng.uniform(2, 8, rh.size)
    sessions = np.where(np.arange(rh.size) < first_count, names[0], names[1])
    readings = frame("twin", np.ones(rh.size), speed_rev_s=speed, rh=rh, session=sessions)
    ceiling = derive(readings, machines)[col.CEILING_A].to_numpy()
    readings[col.CURRENT_A] = efficiency * ceiling
    return compare_sessions(derive(readings, machines), "twin", *names)


def test_a_difference_explained_by_humidity_is_said_so():
    # Measured on a dry and a damp day whose humidity ranges do not overlap.
    rng = np.random.default_rng(7)
    rh = np.concatenate([rng.uniform(0.35, 0.45, 60), rng.uniform(0.62, 0.75, 60)])
    result = _compare_two_sessions(rng, rh, 60, lambda rh: 0.6 - 0.5 * rh, 0.01,
                                   ("dry day", "damp day"))
    assert result["raw_difference"] < -0.05  # the damp day looks worse
    assert result["verdict"].startswith("No clear difference")
    # The adjustment extrapolates, and the verdict says that the data cannot tell the machine
    # from the air.
    assert result["disjoint_conditions"] == ["humidity"]
    assert "cannot tell the machine from the conditions" in result["verdict"]
    assert "humidity ranges do not overlap" in result["verdict"]


def test_a_difference_explained_by_overlapping_humidity_is_said_so():
    # As above, but the two days share a range of humidity: the adjustment interpolates.
    rng = np.random.default_rng(8)
    rh = np.concatenate([rng.uniform(0.30, 0.55, 80), rng.uniform(0.45, 0.75, 80)])
    result = _compare_two_sessions(rng, rh, 80, lambda rh: 0.6 - 0.5 * rh, 0.01,
                                   ("dry day", "damp day"))
    assert result["disjoint_conditions"] == []
    assert result["verdict"].startswith("No clear difference")
    assert "comes from the sessions' different speed or humidity" in result["verdict"]


def test_a_wide_adjusted_interval_that_holds_the_raw_difference_cannot_tell():
    # Each session sits at its own humidity but for one reading at 50 %, so the ranges touch
    # and session and humidity move almost in step: the adjusted interval is wide and holds
    # zero and the plain difference alike, so the verdict must not blame the air.
    rng = np.random.default_rng(3)
    rh = np.concatenate([rng.uniform(0.449, 0.451, 14), [0.50], rng.uniform(0.549, 0.551, 14),
                         [0.50]])
    result = _compare_two_sessions(rng, rh, 15, lambda rh: 0.40 - 0.6 * (rh - 0.5), 0.015,
                                   ("before", "after"))
    low, high = result["adjusted_difference_ci"]
    raw_low, raw_high = result["raw_difference_ci"]
    assert result["disjoint_conditions"] == []
    assert not raw_low <= 0 <= raw_high  # the plain difference is clear
    assert low <= 0 <= high and low <= result["raw_difference"] <= high
    assert "cannot tell whether it comes from the machine" in result["verdict"]


def test_readings_above_the_ceiling_are_left_out_and_counted_once():
    # Truth: the machine delivers 1.1 times its ceiling; the file says 2 units. Those readings
    # are flagged above_ceiling, left out of the fits, and counted as flagged, never as used.
    rng = np.random.default_rng(11)
    machines = {"twin": make_machine("twin")}
    speed = rng.uniform(2, 8, 60)
    readings = frame("twin", np.ones(60), speed_rev_s=speed)
    ceiling = derive(readings, machines)[col.CEILING_A].to_numpy()
    readings[col.CURRENT_A] = ceiling * np.where(np.arange(60) < 50, 1.1, 0.5) * (
        1 + rng.normal(0, 0.01, 60))
    derived = derive(readings, machines)
    assert (derived[col.FLAGS] == "above_ceiling").sum() == 50  # shown to the user
    row = findings(derived, machines).iloc[0]
    assert row["readings_used"] == 10 and row["readings_flagged"] == 50
    assert row["readings_used"] + row["readings_flagged"] == row["readings_total"]
    assert row["observed_units"] == pytest.approx(2 * 0.5, rel=0.02)


def test_readings_within_their_uncertainty_of_the_ceiling_stay_in():
    # The rule 'within uncertainty of the ceiling': with a 5 % current tolerance (one standard
    # uncertainty), an efficiency of 1.04 is within 2 sigma of 100 % and kept; 1.3 is not.
    rng = np.random.default_rng(12)
    machines = {"twin": make_machine("twin", tolerance={"current": "5 %"})}
    speed = rng.uniform(2, 8, 40)
    readings = frame("twin", np.ones(40), speed_rev_s=speed)
    ceiling = derive(readings, machines)[col.CEILING_A].to_numpy()
    readings[col.CURRENT_A] = ceiling * np.where(np.arange(40) < 30, 1.04, 1.3)
    derived = derive(readings, machines)
    assert list(derived[col.FLAGS][:30].unique()) == [""]
    assert list(derived[col.FLAGS][30:].unique()) == ["above_ceiling"]
    row = findings(derived, machines).iloc[0]
    assert row["readings_used"] == 30 and row["readings_flagged"] == 10
    assert "within uncertainty of the ceiling" in row["notes"]


def test_small_negative_currents_within_the_meter_tolerance_are_readings_near_zero():
    # A wet session: the meter (tolerance 0.05 uA, one standard uncertainty) reads a little
    # below zero. Within 2 sigma of zero the reading stays; clearly negative ones are flagged.
    machines = {"drum": make_machine("drum", tolerance={"current": "0.05 uA"})}
    current = np.array([-0.02e-6, -0.08e-6, -0.5e-6, 0.3e-6])
    derived = derive(frame("drum", current, speed_rev_s=5.0), machines)
    assert list(derived[col.FLAGS]) == ["", "", "negative", ""]
    # Without a tolerance, any negative current is flagged.
    derived = derive(frame("drum", current, speed_rev_s=5.0), machines_of("drum"))
    assert list(derived[col.FLAGS]) == ["negative", "negative", "negative", ""]
    # A negative speed is always flagged.
    derived = derive(frame("drum", [1e-6], speed_rev_s=-5.0), machines)
    assert derived[col.FLAGS][0] == "negative"


def test_t_critical_is_scipy_s_student_t_quantile_bit_for_bit():
    # t_critical skips scipy.stats.t.ppf's argument handling; the values must stay those of
    # scipy.stats.t.ppf (the reference), also for arrays, and for impossible degrees of freedom
    # (NaN) and confidences (1 gives infinity). 12.706 at 1 degree of freedom, 95 %: the
    # Student t table (NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.6.7.2).
    from scipy import stats

    from engine.analysis import t_critical

    assert round(float(t_critical(1)), 3) == 12.706
    degrees = np.array([1, 2, 3.5, 10, 58, 1_000, 2.5e6, 1e9])
    for confidence in (0.95, 0.9, 0.99):
        assert np.array_equal(t_critical(degrees, confidence),
                              stats.t.ppf(0.5 + confidence / 2, degrees))
        assert t_critical(7, confidence) == stats.t.ppf(0.5 + confidence / 2, 7)
    assert np.isnan(t_critical(np.array([0.0, 3.0]))[0])
    assert t_critical(5, 1.0) == math.inf
