"""Load line I = q_rev f + I_0 - V / R_leak: checked against statsmodels OLS and uncertainties."""

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from uncertainties import correlated_values

from engine import analysis
from engine import columns as col
from engine.analysis import fit_load_line, load_line_findings
from tests.voltage_data import CHARGE_PER_REV_C, LEAKAGE_OHM, OFFSET_A


def _rows(seed=3, count=40, speed_varies=True, noise=0.05e-6, curvature=0.0):
    rng = np.random.default_rng(seed)
    speed = rng.uniform(3.0, 5.0, count) if speed_varies else np.full(count, 4.0)
    voltage = rng.uniform(2e3, 20e3, count)
    current = (CHARGE_PER_REV_C * speed + OFFSET_A - voltage / LEAKAGE_OHM
               - curvature * (voltage / 20e3) ** 4 + rng.normal(0, noise, count))
    return current, voltage, speed


@pytest.mark.parametrize("speed_varies", [True, False])
def test_load_line_matches_statsmodels_ols_and_its_intervals(speed_varies):
    current, voltage, speed = _rows(speed_varies=speed_varies)
    fit = fit_load_line(current, voltage, speed)
    design = (np.column_stack([np.ones_like(current), speed, voltage]) if speed_varies
              else np.column_stack([np.ones_like(current), voltage]))
    reference = sm.OLS(current, design).fit()  # statsmodels OLS, the outside reference
    assert fit.coefficients["voltage"] == pytest.approx(reference.params[-1], rel=1e-9)
    assert fit.coefficients["intercept"] == pytest.approx(reference.params[0], rel=1e-9)
    median_speed = float(np.median(speed))
    assert fit.reference_speed_rev_s == pytest.approx(median_speed)

    # Short-circuit current: the fitted mean at (1, f_median, V = 0) and its 95 % interval.
    point = np.array([[1.0, median_speed, 0.0]] if speed_varies else [[1.0, 0.0]])
    prediction = reference.get_prediction(point).summary_frame(alpha=0.05)
    assert fit.short_circuit_current_a == pytest.approx(prediction["mean"].iloc[0], rel=1e-9)
    assert fit.short_circuit_current_ci[0] == pytest.approx(prediction["mean_ci_lower"].iloc[0],
                                                            rel=1e-9)
    assert fit.short_circuit_current_ci[1] == pytest.approx(prediction["mean_ci_upper"].iloc[0],
                                                            rel=1e-9)

    # Leakage resistance: -1 / slope, its interval the slope's statsmodels interval inverted.
    slope_low, slope_high = reference.conf_int(alpha=0.05)[-1]
    assert fit.leakage_resistance_ohm == pytest.approx(-1 / reference.params[-1], rel=1e-9)
    assert fit.leakage_resistance_ci[0] == pytest.approx(-1 / slope_low, rel=1e-9)
    assert fit.leakage_resistance_ci[1] == pytest.approx(-1 / slope_high, rel=1e-9)
    # The data were drawn with 40 GOhm: the interval holds it.
    assert fit.leakage_resistance_ci[0] < LEAKAGE_OHM < fit.leakage_resistance_ci[1]

    # Open-circuit voltage: at Fieller's limits theta, statsmodels' t test of
    # I_sc - theta * (-b_V) = 0 (contrast g + theta e_V) sits exactly at the critical t.
    critical = stats.t.ppf(0.975, reference.df_resid)
    for theta in fit.open_circuit_voltage_ci:
        contrast = point[0].copy()
        contrast[-1] = theta
        statistic = np.asarray(reference.t_test(contrast).tvalue).item()
        assert abs(statistic) == pytest.approx(critical, rel=1e-6)
    low, high = fit.open_circuit_voltage_ci
    assert low < fit.open_circuit_voltage_v < high
    assert fit.open_circuit_voltage_v == pytest.approx(
        fit.short_circuit_current_a * fit.leakage_resistance_ohm, rel=1e-12)

    # Largest output power I_sc^2 / (4 (-b_V)) with first-order propagation by the
    # uncertainties package on statsmodels' covariance.
    parameters = correlated_values(reference.params, reference.cov_params())
    short = sum(weight * value for weight, value in zip(point[0], parameters, strict=True))
    power = short**2 / (4 * -parameters[-1])
    assert fit.max_output_power_w == pytest.approx(power.nominal_value, rel=1e-9)
    half = fit.max_output_power_ci[1] - fit.max_output_power_w
    assert half == pytest.approx(critical * power.std_dev, rel=1e-6)


def test_largest_power_is_the_largest_v_times_i_along_the_line():
    current, voltage, speed = _rows()
    fit = fit_load_line(current, voltage, speed)
    along = np.linspace(0, fit.open_circuit_voltage_v, 100_001)
    line = fit.short_circuit_current_a + fit.voltage_slope_a_v * along
    assert fit.max_output_power_w == pytest.approx(float(np.max(along * line)), rel=1e-8)


def test_zero_slope_gives_no_finite_open_circuit_voltage_and_says_so():
    rng = np.random.default_rng(5)
    voltage = np.linspace(2e3, 20e3, 20)
    for current in (np.full(20, 1e-6),  # exactly flat
                    1e-6 + 1e-13 * voltage + rng.normal(0, 1e-11, 20)):  # rising a little
        fit = fit_load_line(current, voltage)
        assert math.isnan(fit.open_circuit_voltage_v) and math.isnan(fit.leakage_resistance_ohm)
        assert math.isnan(fit.max_output_power_w)
        assert any("no finite open-circuit voltage" in note for note in fit.notes)
    # A slope whose interval reaches zero: finite estimates, unbounded upper limits.
    noisy = 1e-6 - voltage / 1e15 + rng.normal(0, 5e-8, 20)
    weak = fit_load_line(noisy, voltage)
    assert weak.voltage_slope_a_v < 0  # this seed's estimate falls, but not significantly
    assert weak.leakage_resistance_ci[1] == math.inf
    assert weak.open_circuit_voltage_ci == (-math.inf, math.inf)
    assert any("not significant" in note for note in weak.notes)


def test_voltages_that_span_too_little_give_a_note_not_numbers():
    voltage = np.linspace(19e3, 20e3, 10)
    fit = fit_load_line(np.linspace(1e-6, 0.9e-6, 10), voltage)
    assert math.isnan(fit.short_circuit_current_a)
    assert "span too little" in fit.notes[0]
    few = fit_load_line([1e-6, 0.8e-6], [1e3, 10e3])
    assert "needs at least" in few.notes[0]


def test_curvature_is_noticed():
    current, voltage, speed = _rows(count=60, noise=0.01e-6, curvature=0.3e-6)
    fit = fit_load_line(current, voltage, speed)
    assert fit.curvature_p < 0.05
    assert any("bends away from a straight line" in note for note in fit.notes)
    straight = fit_load_line(*_rows(count=60, noise=0.01e-6))
    assert not any("bends" in note for note in straight.notes)


def test_load_line_findings_per_machine_and_session():
    current, voltage, speed = _rows(count=30)
    frame = pd.DataFrame({
        col.MACHINE: ["m1"] * 30 + ["m2"] * 5,
        col.SESSION: ["a"] * 15 + ["b"] * 15 + [""] * 5,
        col.CURRENT_A: np.concatenate([current, np.full(5, 1e-6)]),
        col.VOLTAGE_V: np.concatenate([voltage, np.full(5, np.nan)]),
        col.SPEED_REV_S: np.concatenate([speed, np.full(5, 4.0)]),
        col.FLAGS: [""] * 29 + ["negative"] + [""] * 5,
    })
    table = load_line_findings(frame)
    assert list(table.columns) == list(analysis.LOAD_LINE_COLUMNS)
    assert list(zip(table["machine"], table["session"], strict=True)) == [
        ("m1", "a"), ("m1", "b"), ("m2", "")]
    first = table.iloc[0]
    direct = fit_load_line(current[:15], voltage[:15], speed[:15])
    assert first["short_circuit_current_uA"] == pytest.approx(direct.short_circuit_current_a * 1e6)
    assert first["open_circuit_voltage_kV"] == pytest.approx(direct.open_circuit_voltage_v / 1e3)
    assert table.iloc[1]["load_line_readings"] == 14  # the flagged reading is left out
    # no voltages: nothing, and no note
    assert math.isnan(table.iloc[2]["short_circuit_current_uA"])
    assert table.iloc[2]["short_circuit_current_ci_uA"] is None
    assert table.iloc[2]["load_line_notes"] == ""
    pooled = load_line_findings(frame, by_session=False)
    assert list(pooled["session"]) == [None, None]


def test_speed_and_voltage_moving_together_is_a_note_not_an_error():
    speed = np.linspace(3.0, 5.0, 12)
    voltage = speed * 4e3  # the terminals charge exactly in step with the speed
    fit = fit_load_line(1e-6 + 0 * speed, voltage, speed)
    assert math.isnan(fit.short_circuit_current_a)
    assert "move together" in fit.notes[0]


def test_linear_model_covariance_matches_statsmodels():
    current, voltage, speed = _rows()
    design = np.column_stack([np.ones_like(current), speed, voltage])
    model = analysis.fit_linear_model(design, current, ["1", "f", "V"])
    reference = sm.OLS(current, design).fit()  # statsmodels OLS covariance of the parameters
    np.testing.assert_allclose(model.covariance, reference.cov_params(), rtol=1e-8)
