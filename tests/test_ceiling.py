"""The ceiling current: hand-worked values and the laws it must obey."""

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from engine.air import EPSILON_0, pressure_from_altitude
from engine.ceiling import ceiling_current, ceiling_figures, machine_ceiling
from engine.errors import InputError
from engine.machines import machine_from_table

TWIN_DISC = {"id": "twin", "carrier": "disc", "outer_diameter": "46 cm",
             "inner_diameter": "30 cm", "sector_fill": 0.55, "carriers": 2}


def machine(**changes):
    return machine_from_table({**TWIN_DISC, **changes})


def test_twin_disc_hand_worked():
    # sigma = 8.8541878128e-12 * 3e6 = 26.5626 uC/m^2; A = 0.052527 m^2 (see test_carriers);
    # I = 26.5626e-6 * 0.052527 * 5 rev/s * 2 discs * k 1 = 13.952 uA
    figures = ceiling_figures(machine(), 5.0)
    assert figures["ceiling_current_uA"] == pytest.approx(26.5626e-6 * 0.0525274 * 5 * 2 * 1e6,
                                                          rel=1e-5)
    assert figures["charge_density_limit_uC_m2"] == pytest.approx(EPSILON_0 * 3e6 * 1e6)
    assert figures["relative_air_density"] == pytest.approx(1.0)


def test_belt_linear_speed_hand_worked():
    # I = sigma * w * v = 26.5626e-6 * 0.05 * 6 = 7.9688 uA
    belt = machine_from_table({"id": "belt", "carrier": "belt", "width": "5 cm"})
    figures = ceiling_figures(belt, 6.0, "linear")
    assert figures["ceiling_current_uA"] == pytest.approx(7.9688, rel=1e-4)
    assert figures["area_per_rev_m2"] is None and figures["speed_rev_s"] is None


def test_cylinder_at_altitude_hand_worked():
    # 1500 m: p = 84 559.7 Pa (ICAO), delta = 84559.7 / 101300 = 0.834745 at 20 degC;
    # I = 26.5626e-6 * 0.834745 * (2 pi 0.2286 * 0.4) * 2 rev/s = 25.478 uA
    cylinder = machine_from_table({"id": "cyl", "carrier": "cylinder", "diameter": "18 in",
                                   "active_length": "40 cm"})
    figures = ceiling_figures(cylinder, 2.0, pressure_pa=pressure_from_altitude(1500.0))
    area = 2 * math.pi * 0.2286 * 0.4
    assert figures["ceiling_current_uA"] == pytest.approx(26.5626 * 0.834745 * area * 2, rel=1e-5)


def test_custom_with_collection_factor():
    # k = 2: I = 26.5626e-6 * 0.12 * 3 * 1 * 2 = 19.125 uA
    custom = machine_from_table({"id": "c", "carrier": "custom", "area_per_rev": "0.12 m^2",
                                 "collection_factor": 2})
    assert ceiling_figures(custom, 3.0)["ceiling_current_uA"] == pytest.approx(19.125, rel=1e-4)


def test_one_call_for_a_million_readings():
    count = 1_000_000
    rng = np.random.default_rng(1)
    result = machine_ceiling(machine(), rng.uniform(1, 10, count),
                             pressure_pa=rng.uniform(85e3, 103e3, count),
                             temperature_k=rng.uniform(283, 303, count))
    assert result.ceiling_current_a.shape == (count,)
    assert np.all(result.ceiling_current_a > 0)


def test_wrong_speed_kind_for_a_disc():
    with pytest.raises(InputError, match="rotation rate"):
        machine_ceiling(machine(), 6.0, "linear")


speeds = st.floats(0.01, 100.0)


@given(speeds, st.floats(1.01, 10.0))
def test_ceiling_is_linear_in_speed(speed, factor):
    low = machine_ceiling(machine(), speed).ceiling_current_a
    high = machine_ceiling(machine(), speed * factor).ceiling_current_a
    assert high == pytest.approx(low * factor, rel=1e-12)


@given(speeds, st.integers(1, 50), st.floats(0.1, 4.0))
def test_ceiling_is_linear_in_carriers_and_collection_factor(speed, carriers, factor):
    single = machine_ceiling(machine(carriers=1, collection_factor=1.0), speed).ceiling_current_a
    scaled = machine_ceiling(machine(carriers=carriers, collection_factor=factor),
                             speed).ceiling_current_a
    assert scaled == pytest.approx(single * carriers * factor, rel=1e-12)


@given(st.floats(5.0, 100.0), st.floats(0.0, 0.9), speeds)
def test_inches_and_centimetres_give_the_same_ceiling(outer_cm, inner_share, speed):
    inner_cm = outer_cm * inner_share
    metric = machine(outer_diameter=f"{outer_cm!r} cm", inner_diameter=f"{inner_cm!r} cm")
    imperial = machine(outer_diameter=f"{outer_cm / 2.54!r} in",
                       inner_diameter=f"{inner_cm / 2.54!r} in")
    assert machine_ceiling(imperial, speed).ceiling_current_a == pytest.approx(
        machine_ceiling(metric, speed).ceiling_current_a, rel=1e-9)


@given(st.floats(1.0, 3000.0))
def test_rpm_and_rev_per_second_agree(rpm):
    from engine.units import parse_quantity

    in_rpm = parse_quantity(f"{rpm!r} rpm", "rotation_rate", "speed")
    in_rev_s = parse_quantity(f"{rpm / 60!r} rev/s", "rotation_rate", "speed")
    assert machine_ceiling(machine(), in_rpm).ceiling_current_a == pytest.approx(
        machine_ceiling(machine(), in_rev_s).ceiling_current_a, rel=1e-12)


def test_ceiling_current_broadcasts():
    values = ceiling_current(np.array([1e-5, 2e-5]), 0.5, units=np.array([1, 2]))
    np.testing.assert_allclose(values, [5e-6, 2e-5])


def test_planner_inverse_questions_give_back_the_target():
    from engine.ceiling import size_for_current, speed_for_current

    twin = machine()
    # The ceiling is 13.952 uA at 5 rev/s (hand-worked above), so 27.9 uA needs 10 rev/s.
    assert speed_for_current(twin, 27.904e-6) == pytest.approx(10.0, rel=1e-4)
    what, radius = size_for_current(twin, 13.952e-6 * 4, 5.0)
    assert what == "outer radius"
    # Four times the annulus: pi fill (r^2 - 0.15^2) = 4 * 0.052527 -> r = 0.39426 m
    assert radius == pytest.approx(math.sqrt(4 * 0.0304 + 0.15**2), rel=1e-4)
    bigger_table = {**TWIN_DISC, "outer_radius": f"{radius!r} m"}
    del bigger_table["outer_diameter"]
    bigger = machine_from_table(bigger_table)
    assert machine_ceiling(bigger, 5.0).ceiling_current_a == pytest.approx(13.952e-6 * 4,
                                                                         rel=1e-4)
    belt = machine_from_table({"id": "b", "carrier": "belt", "width": "5 cm",
                               "roller_diameter": "5 cm"})
    what, width = size_for_current(belt, 2 * 0.41724e-6, 2.0)
    assert what == "width" and width == pytest.approx(0.10, rel=1e-4)
    cylinder = machine_from_table({"id": "c", "carrier": "cylinder", "radius": "10 cm",
                                   "active_length": "40 cm"})
    what, length = size_for_current(cylinder, 2 * 20.04e-6, 3.0)
    assert what == "active length" and length == pytest.approx(0.8, rel=1e-3)
    with pytest.raises(InputError, match="positive"):
        speed_for_current(twin, 0.0)


def test_the_speed_at_a_measured_efficiency_is_the_ceiling_speed_over_it():
    from engine.ceiling import speed_for_current

    twin = machine()
    # Law: the ceiling is linear in speed, so a machine at efficiency eta needs 1/eta times
    # the speed at which its ceiling reaches the target.
    at_ceiling = speed_for_current(twin, 27.904e-6)
    at_quarter, at_half, never = speed_for_current(twin, 27.904e-6, efficiency=[0.25, 0.5, 0])
    assert at_quarter == pytest.approx(4 * at_ceiling)
    assert at_half == pytest.approx(2 * at_ceiling)
    assert np.isnan(never)
