"""Air density and humidity against outside references."""

import ambiance
import numpy as np
import psychrolib
import pytest
import scipy.constants

from engine.air import (
    EPSILON_0,
    REFERENCE_BREAKDOWN_FIELD_V_M,
    absolute_humidity,
    breakdown_field,
    charge_density_limit,
    dew_point,
    pressure_from_altitude,
    relative_air_density,
    saturation_vapour_pressure,
    site_pressure,
    vapour_pressure,
)
from engine.errors import InputError

psychrolib.SetUnitSystem(psychrolib.SI)


def test_epsilon_0_matches_codata():
    # scipy.constants carries the current CODATA value; 2018 and 2022 agree to 1e-9.
    assert EPSILON_0 == pytest.approx(scipy.constants.epsilon_0, rel=1e-9)


def test_open_air_charge_density_limit():
    # About 26.5 uC/m^2 for open air (common practice, no source); eps0 * 3 MV/m exactly.
    sigma = charge_density_limit(REFERENCE_BREAKDOWN_FIELD_V_M)
    assert sigma == pytest.approx(scipy.constants.epsilon_0 * 3.0e6, rel=1e-9)
    assert 26.0e-6 < sigma < 27.0e-6


def test_relative_air_density_hand_worked():
    assert relative_air_density(101_300.0, 293.15) == pytest.approx(1.0)
    # 84.6 kPa at 20 degC: 84.6 / 101.3 = 0.83514...
    assert relative_air_density(84_600.0, 293.15) == pytest.approx(84.6 / 101.3)
    # 101.3 kPa at 30 degC: 293.15 / 303.15 = 0.96701...
    assert relative_air_density(101_300.0, 303.15) == pytest.approx(293.15 / 303.15)


@pytest.mark.parametrize("altitude_m", [-400.0, 0.0, 350.0, 1500.0, 3000.0, 8000.0, 11_000.0,
                                        15_000.0, 20_000.0])
def test_standard_atmosphere_pressure_matches_ambiance(altitude_m):
    # ambiance implements the ICAO / ISO 2533 standard atmosphere (geometric altitude).
    expected = ambiance.Atmosphere(altitude_m).pressure[0]
    assert pressure_from_altitude(altitude_m) == pytest.approx(expected, rel=1e-5)


def test_museum_at_1500_m_has_a_ceiling_17_percent_lower():
    # Design note: at 1500 m, delta is about 0.83.
    delta = relative_air_density(pressure_from_altitude(1500.0), 293.15)
    assert delta == pytest.approx(0.835, abs=0.002)
    assert breakdown_field(delta) == pytest.approx(3.0e6 * delta)


def test_altitude_outside_the_model_is_refused():
    with pytest.raises(InputError, match="altitude must be between"):
        pressure_from_altitude(30_000.0)
    with pytest.raises(InputError):
        pressure_from_altitude(np.nan)


def test_site_pressure_choices():
    assert site_pressure() == 101_300.0
    assert site_pressure(pressure_pa=97_200.0) == 97_200.0
    assert site_pressure(altitude_m=0.0) == pytest.approx(101_325.0)  # ICAO sea level
    with pytest.raises(InputError, match="not both"):
        site_pressure(97_200.0, 350.0)
    with pytest.raises(InputError, match="positive"):
        site_pressure(-1.0)


def test_magnus_form_hand_worked_at_20_degc():
    # 610.94 Pa * exp(17.625 * 20 / (20 + 243.04)) = 610.94 * exp(1.34010) = 2333.44 Pa
    assert saturation_vapour_pressure(293.15) == pytest.approx(2333.44, abs=0.05)


@pytest.mark.parametrize("celsius", [0.0, 5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0, 40.0])
def test_saturation_vapour_pressure_against_psychrolib(celsius):
    # psychrolib follows ASHRAE Handbook Fundamentals (Hyland and Wexler); the Magnus form of
    # Alduchov and Eskridge is within 0.4 % of it over this range.
    expected = psychrolib.GetSatVapPres(celsius)
    assert saturation_vapour_pressure(celsius + 273.15) == pytest.approx(expected, rel=4e-3)


# Dew points above 0 degC only: below it psychrolib gives the frost point (over ice), while the
# Magnus form used here is over water.
@pytest.mark.parametrize(("celsius", "rh"), [(5.0, 0.7), (5.0, 0.95), (15.0, 0.45), (15.0, 0.9),
                                             (20.0, 0.3), (20.0, 0.6), (30.0, 0.2), (30.0, 0.8)])
def test_dew_point_against_psychrolib(celsius, rh):
    expected = psychrolib.GetTDewPointFromRelHum(celsius, rh)
    assert dew_point(rh, celsius + 273.15) - 273.15 == pytest.approx(expected, abs=0.1)


@pytest.mark.parametrize("celsius", [10.0, 20.0, 30.0])
@pytest.mark.parametrize("rh", [0.3, 0.6, 0.9])
def test_absolute_humidity_against_psychrolib(celsius, rh):
    # Vapour density from psychrolib's humidity ratio W and moist-air density: rho * W / (1 + W).
    pressure = 101_325.0
    ratio = psychrolib.GetHumRatioFromRelHum(celsius, rh, pressure)
    density = psychrolib.GetMoistAirDensity(celsius, ratio, pressure)
    expected = density * ratio / (1 + ratio)
    assert absolute_humidity(rh, celsius + 273.15) == pytest.approx(expected, rel=6e-3)


def test_humidity_functions_are_vectorised_and_consistent():
    rh = np.array([0.0, 0.5, 1.0])
    temperature = np.array([293.15, 293.15, 283.15])
    assert vapour_pressure(rh, temperature).shape == (3,)
    dew = dew_point(rh, temperature)
    assert np.isnan(dew[0])  # no dew point in perfectly dry air
    assert dew[2] == pytest.approx(283.15)  # saturated air: dew point equals temperature
    assert absolute_humidity(rh, temperature)[0] == 0.0


def test_pressure_for_a_relative_density_inverts_delta():
    from engine.air import pressure_for_relative_density

    # delta 0.83 at 30 degC: p = 0.83 * 101.3 kPa * 303.15 / 293.15 = 86.95 kPa (hand-worked)
    pressure = pressure_for_relative_density(0.83, 303.15)
    assert pressure == pytest.approx(0.83 * 101_300 * 303.15 / 293.15)
    assert relative_air_density(pressure, 303.15) == pytest.approx(0.83)
