"""Charged area per revolution of each carrier kind, worked by hand, and validation."""

import math

import numpy as np
import pytest

from engine.carriers import Belt, Custom, Cylinder, Disc, carrier_from_spec
from engine.errors import InputError
from engine.units import Tolerance


def test_disc_annulus_with_sectors():
    # Hand-worked: r_out = 0.23 m, r_in = 0.15 m, fill 0.55
    # pi * (0.23^2 - 0.15^2) * 0.55 = pi * (0.0529 - 0.0225) * 0.55 = pi * 0.01672 = 0.052527 m^2
    disc = carrier_from_spec("disc", {"outer_diameter": "46 cm", "inner_diameter": "30 cm",
                                      "sector_fill": 0.55})
    assert disc.area_per_rev_m2 == pytest.approx(math.pi * 0.01672, rel=1e-12)


def test_full_disc_on_purpose_default_fill():
    # A sectorless disc of radius 0.2 m charged to its centre, said with an inner edge of 0:
    # pi * 0.04 = 0.125664 m^2
    disc = carrier_from_spec("disc", {"outer_radius": "20 cm", "inner_diameter": "0 cm"})
    assert disc.area_per_rev_m2 == pytest.approx(0.125664, rel=1e-5)


def test_belt_on_roller_and_loop_and_linear():
    # Roller: w * pi * d = 0.05 * pi * 0.05 = 0.0078540 m^2 per roller revolution
    roller = carrier_from_spec("belt", {"width": "5 cm", "roller_diameter": "5 cm"})
    assert roller.area_per_rev_m2 == pytest.approx(0.05 * math.pi * 0.05)
    # Loop: w * L = 0.05 * 1.2 = 0.06 m^2 per circulation
    loop = carrier_from_spec("belt", {"width": "5 cm", "loop_length": "1.2 m"})
    assert loop.area_per_rev_m2 == pytest.approx(0.06)
    # Linear speed: w * v = 0.05 m * 6 m/s = 0.3 m^2/s
    plain = carrier_from_spec("belt", {"width": "5 cm"})
    assert plain.area_per_rev_m2 is None
    assert plain.swept_area_per_s_m2(6.0, "linear") == pytest.approx(0.3)
    # The same belt on its roller at v / (pi d) rev/s sweeps the same area per second.
    speed_rev_s = 6.0 / (math.pi * 0.05)
    assert roller.swept_area_per_s_m2(speed_rev_s) == pytest.approx(0.3)
    with pytest.raises(InputError, match="linear speed"):
        plain.swept_area_per_s_m2(5.0, "rotation")


def test_cylinder_lateral_surface():
    # 2 * pi * r * L = 2 * pi * 0.1 * 0.4 = 0.251327 m^2
    cylinder = carrier_from_spec("cylinder", {"diameter": "20 cm", "active_length": "40 cm"})
    assert cylinder.area_per_rev_m2 == pytest.approx(0.251327, rel=1e-5)


def test_custom_area():
    assert carrier_from_spec("custom", {"area_per_rev": "1200 cm^2"}).area_per_rev_m2 == \
        pytest.approx(0.12)


def test_swept_area_is_vectorised():
    disc = Disc(0.2)
    speeds = np.linspace(0, 10, 1_000_001)
    swept = disc.swept_area_per_s_m2(speeds)
    assert swept.shape == speeds.shape
    assert swept[-1] == pytest.approx(disc.area_per_rev_m2 * 10)


@pytest.mark.parametrize(
    ("kind", "spec", "message"),
    [
        ("disc", {"outer_radius": "10 cm", "inner_radius": "15 cm"}, "must be larger than"),
        ("disc", {"outer_radius": "-10 cm", "inner_radius": "0 cm"}, "positive size"),
        ("disc", {"outer_radius": "10 cm", "inner_radius": "5 cm", "sector_fill": 1.5},
         "sector_fill must be above 0"),
        ("disc", {"outer_radius": "10 cm", "inner_radius": "5 cm", "sector_fill": 0},
         "sector_fill must be above 0"),
        ("disc", {"outer_radius": "10 cm"}, r"inner_diameter \(or inner_radius\) is missing"),
        ("disc", {"inner_radius": "10 cm"}, "outer_radius or outer_diameter is missing"),
        ("disc", {"outer_radius": "10 cm", "outer_diameter": "20 cm"}, "not both"),
        ("disc", {"outer_radius": "10 cm", "width": "3 cm"}, "'width' is not a disc key"),
        ("belt", {"roller_diameter": "5 cm"}, "width is missing"),
        ("belt", {"width": "5 cm", "roller_diameter": "5 cm", "loop_length": "1 m"}, "not both"),
        ("cylinder", {"radius": "10 cm"}, "active_length is missing"),
        ("cylinder", {"radius": "0 cm", "active_length": "1 m"}, "positive size"),
        ("custom", {}, "area_per_rev is missing"),
        ("wheel", {}, "carrier 'wheel' is not known"),
    ],
)
def test_validation_names_the_field(kind, spec, message):
    with pytest.raises(InputError, match=message):
        carrier_from_spec(kind, spec, "machine 'test'")


def test_area_uncertainty_first_order():
    # Disc r_o = 0.2 m with u(r_o) = 1 mm, no inner radius: u(A)/A = 2 u(r)/r = 0.01
    disc = Disc(0.2)
    assert disc.area_relative_uncertainty({"outer_radius": Tolerance(0.001, False)}) == \
        pytest.approx(0.01)
    # A diameter tolerance of 2 mm is a radius uncertainty of 1 mm: the same answer.
    assert disc.area_relative_uncertainty({"outer_diameter": Tolerance(0.002, False)}) == \
        pytest.approx(0.01)
    # Belt: 2 % on width and 1 % on roller diameter add in quadrature: sqrt(0.02^2 + 0.01^2)
    belt = Belt(0.05, roller_diameter_m=0.05)
    tolerances = {"width": Tolerance(0.02, True), "roller_diameter": Tolerance(0.01, True)}
    assert belt.area_relative_uncertainty(tolerances) == pytest.approx(math.hypot(0.02, 0.01))
    assert belt.area_relative_uncertainty(tolerances, "linear") == pytest.approx(0.02)
    cylinder = Cylinder(0.1, 0.4)
    assert cylinder.area_relative_uncertainty({"active_length": Tolerance(0.004, False)}) == \
        pytest.approx(0.01)
    assert Custom(0.12).area_relative_uncertainty({"area_per_rev": Tolerance(0.05, True)}) == \
        pytest.approx(0.05)
