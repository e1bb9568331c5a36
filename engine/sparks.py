"""Sparks: breakdown voltage of air gaps, its inverse, and the energy a charged terminal stores.

Two models, each named with its source and held to its range:

- **uniform field** (plates, or spheres whose gap is small against their diameter): the
  empirical uniform-field relation for air of the high-voltage textbooks,
  U = 24.36 (p d) + 6.72 sqrt(p d) kV, p in bar at 20 degC, d in cm;
- **spheres** (terminal balls, one of them earthed): the field-utilisation method. The largest
  field on the live sphere is computed exactly by Kelvin's image charges; the gap breaks down
  when it reaches the larger of Peek's breakdown gradient for spheres and the uniform-field
  gradient of the same gap.

Outside both (a 20 cm spark between 2 cm balls) the functions raise
:class:`engine.errors.InputError` naming the ranges they cover: no number without its model.
Inputs and outputs are SI floats (metres, volts, V/m, farads, joules) and numpy arrays.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from engine.errors import InputError

# Uniform-field relation for air (see uniform_field_breakdown_voltage): kV, bar, cm.
_UNIFORM_LINEAR_KV = 24.36
_UNIFORM_ROOT_KV = 6.72
#: Pressure at 20 degC that has the reference density (101.3 kPa) [bar].
_REFERENCE_BAR = 1.013
#: Range of delta * d where the uniform-field relation is used [m] (0.1 mm to 10 cm at
#: reference air). From memory: the relation is fitted to measurements over about this range;
#: below it the gap nears the Paschen minimum, above it uniform fields are not realised.
UNIFORM_RANGE_M = (1e-4, 0.10)

# Peek's breakdown gradient at the surface of a sphere: E = 27.2 delta (1 + 0.54 / sqrt(delta r))
# kV/cm, r in cm (from memory: F. W. Peek, Dielectric Phenomena in High Voltage Engineering,
# 3rd ed., McGraw-Hill, 1929, chapter on spheres).
_PEEK_SPHERE_KV_CM = 27.2
_PEEK_SPHERE_ROOT_CM = 0.54
#: Sphere diameters the sphere method covers [m]: those of the standard sphere-gap tables
#: (IEC 60052:2002, 2 cm to 200 cm, from memory).
SPHERE_DIAMETER_RANGE_M = (0.02, 2.0)
#: Largest gap over sphere diameter for the sphere method [-] (the standard tables' range).
SPHERE_MAX_GAP_RATIO = 0.5
_IMAGE_TOLERANCE = 1e-12
_IMAGE_MAX_STEPS = 20_000

UNIFORM_MODEL = ("uniform-field relation for air, U = 24.36 (p d) + 6.72 sqrt(p d) kV with p "
                 "in bar at 20 degC and d in cm (Kuffel, Zaengl and Kuffel, High Voltage "
                 "Engineering: Fundamentals, 2nd ed., Newnes, 2000, section 5.8; coefficients "
                 "from memory), scaled with air density as the source's p d says")
SPHERE_MODEL = ("sphere gap, one sphere earthed, by the field-utilisation method: the largest "
                "field on the live sphere by Kelvin's image charges must reach the larger of "
                "Peek's sphere gradient 27.2 delta (1 + 0.54 / sqrt(delta r)) kV/cm (Peek, "
                "Dielectric Phenomena in High Voltage Engineering, 1929, from memory) and the "
                "uniform-field gradient of the same gap; checked against the standard "
                "sphere-gap table of IEC 60052 (from memory) within about 5 % up to gap = 0.3 D, "
                "about 10 % low at gap = 0.5 D")
ELECTRODES = ("uniform", "spheres")


@dataclass(frozen=True)
class SparkResult:
    """Breakdown of one gap (or arrays of gaps).

    Attributes
    ----------
    breakdown_voltage_v : numpy.ndarray
        Breakdown voltage [V] (d.c. or a.c. peak).
    gap_m : numpy.ndarray
        Gap [m].
    relative_density : numpy.ndarray
        Relative air density delta [-].
    model : str
        The model's name and published source.
    valid_range : str
        Where the model holds, in words.
    """

    breakdown_voltage_v: np.ndarray
    gap_m: np.ndarray
    relative_density: np.ndarray
    model: str
    valid_range: str

    @property
    def mean_field_v_m(self) -> np.ndarray:
        """Mean field in the gap at breakdown, U / d [V/m]."""
        return self.breakdown_voltage_v / self.gap_m


def _arrays(gap_m, relative_density) -> tuple[np.ndarray, np.ndarray]:
    gap_m, relative_density = np.broadcast_arrays(np.asarray(gap_m, dtype=float),
                                                  np.asarray(relative_density, dtype=float))
    if np.any(~np.isfinite(gap_m)) or np.any(gap_m <= 0):
        raise InputError("the gap must be a length above zero, e.g. '1 cm'")
    if np.any(~np.isfinite(relative_density)) or np.any(relative_density <= 0):
        raise InputError("the relative air density must be above zero")
    return gap_m, relative_density


def uniform_range_text() -> str:
    """The uniform-field relation's range, in words."""
    low, high = UNIFORM_RANGE_M
    return (f"uniform field: gap times relative air density from {low * 1e3:g} mm to "
            f"{high * 1e2:g} cm")


def sphere_range_text() -> str:
    """The sphere method's range, in words."""
    low, high = SPHERE_DIAMETER_RANGE_M
    return (f"spheres: diameter {low * 1e2:g} cm to {high * 1e2:g} cm, gap up to "
            f"{SPHERE_MAX_GAP_RATIO:g} times the diameter, and gap times relative air density "
            f"at least {UNIFORM_RANGE_M[0] * 1e3:g} mm")


def _check_uniform_range(gap_m: np.ndarray, relative_density: np.ndarray) -> None:
    low, high = UNIFORM_RANGE_M
    scaled = gap_m * relative_density
    if np.any(scaled < low * (1 - 1e-9)) or np.any(scaled > high * (1 + 1e-9)):
        worst = float(scaled.flat[np.argmax(np.abs(np.log(scaled / math.sqrt(low * high))))])
        raise InputError(
            f"a gap of {worst * 1e3:.4g} mm (at reference air density) is outside the models: "
            f"{uniform_range_text()}; {sphere_range_text()}. Longer sparks between small balls "
            "depend on corona and polarity and no model here covers them")


def uniform_field_breakdown_voltage(gap_m, relative_density=1.0):
    """Breakdown voltage of air in a uniform field (plane electrodes).

    Parameters
    ----------
    gap_m : float or array_like
        Gap between the electrodes [m], above zero.
    relative_density : float or array_like, optional
        Relative air density delta [-] (see :func:`engine.air.relative_air_density`); 1 at
        101.3 kPa and 20 degC.

    Returns
    -------
    float or numpy.ndarray
        Breakdown voltage [V].

    Raises
    ------
    InputError
        For a gap that is not positive, or delta * d outside :data:`UNIFORM_RANGE_M`.

    Notes
    -----
    U = 24.36 (p d) + 6.72 sqrt(p d) kV with p [bar] at 20 degC and d [cm]. The relation
    depends on p d only (Paschen similarity), that is on the number of molecules across the
    gap; at another temperature the pressure that counts is the one at 20 degC with the same
    density, p = 1.013 bar * delta. About 4.6 kV at 1 mm and 31.4 kV at 1 cm in reference air.

    References
    ----------
    E. Kuffel, W. S. Zaengl and J. Kuffel, High Voltage Engineering: Fundamentals, 2nd ed.,
    Newnes, 2000, section 5.8 (Paschen's law), the empirical relation for air in uniform
    fields at 20 degC (coefficients from memory).
    """
    gap_m, relative_density = _arrays(gap_m, relative_density)
    _check_uniform_range(gap_m, relative_density)
    return _uniform_voltage(gap_m, relative_density)[()]


def _uniform_voltage(gap_m: np.ndarray, relative_density: np.ndarray) -> np.ndarray:
    pressure_gap = _REFERENCE_BAR * relative_density * gap_m * 100.0  # bar cm
    return (_UNIFORM_LINEAR_KV * pressure_gap + _UNIFORM_ROOT_KV * np.sqrt(pressure_gap)) * 1e3


def uniform_field_breakdown_field(gap_m, relative_density=1.0, check_range: bool = True):
    """Mean breakdown field of air over a uniform-field gap, U / d.

    Parameters
    ----------
    gap_m : float or array_like
        Gap [m].
    relative_density : float or array_like, optional
        Relative air density delta [-].
    check_range : bool, optional
        Raise for delta * d outside :data:`UNIFORM_RANGE_M` (default). ``False`` serves
        readings: a carrier gap checked at reference density when the machine was read may
        then meet air a little outside the range, which must not stop a whole import.

    Returns
    -------
    float or numpy.ndarray
        Breakdown field [V/m]: about 4.6 MV/m at 1 mm, 3.1 MV/m at 1 cm in reference air.

    See Also
    --------
    uniform_field_breakdown_voltage : the relation and its source.
    """
    gap_m, relative_density = _arrays(gap_m, relative_density)
    if check_range:
        _check_uniform_range(gap_m, relative_density)
    return (_uniform_voltage(gap_m, relative_density) / gap_m)[()]


def sphere_field_factor(gap_m, sphere_diameter_m):
    """Field non-uniformity of a sphere gap: largest field over mean field, E_max d / U.

    Parameters
    ----------
    gap_m : float or array_like
        Gap between the spheres [m].
    sphere_diameter_m : float or array_like
        Diameter of each of the two equal spheres [m].

    Returns
    -------
    float or numpy.ndarray
        f = E_max / (U / d) >= 1 [-], the inverse of the field-utilisation factor; 1.068 at
        gap = 0.1 D, 1.517 at gap = 0.5 D.

    Notes
    -----
    One sphere at U, the other earthed (the arrangement of the standard sphere-gap tables).
    Kelvin's method of images: a charge 4 pi eps0 r U at the centre of the live sphere, then
    alternately its image in the earthed sphere (q' = -q r / a at r^2 / a from its centre, a
    the distance of q from that centre) and the image of that in the live sphere, until the
    terms fall below 1e-12 of the sum. E_max is the field of all charges at the point of the
    live sphere facing the other.

    References
    ----------
    J. C. Maxwell, A Treatise on Electricity and Magnetism, 3rd ed., 1891, vol. 1, chapter XI
    (the method of electrical images; two spheres).
    """
    gap_m, diameter = np.broadcast_arrays(np.asarray(gap_m, dtype=float),
                                          np.asarray(sphere_diameter_m, dtype=float))
    radius = diameter / 2.0
    centres = gap_m + diameter
    # Units where U = 1 and 1 / (4 pi eps0) = 1: a charge is its potential times distance.
    charge_live = radius.copy()
    position_live = np.zeros_like(radius)
    field = charge_live / radius**2
    for _step in range(_IMAGE_MAX_STEPS):
        distance = centres - position_live
        charge_earthed = -charge_live * radius / distance
        position_earthed = centres - radius**2 / distance
        charge_live = -charge_earthed * radius / position_earthed
        position_live = radius**2 / position_earthed
        step = (-charge_earthed / (position_earthed - radius) ** 2
                + charge_live / (radius - position_live) ** 2)
        field = field + step
        if np.all(np.abs(step) <= _IMAGE_TOLERANCE * np.abs(field)):
            break
    return (field * gap_m)[()]


def peek_sphere_gradient(sphere_diameter_m, relative_density=1.0):
    """Peek's breakdown gradient at the surface of a sphere.

    Parameters
    ----------
    sphere_diameter_m : float or array_like
        Sphere diameter [m].
    relative_density : float or array_like, optional
        Relative air density delta [-].

    Returns
    -------
    float or numpy.ndarray
        Gradient [V/m], E = 27.2 delta (1 + 0.54 / sqrt(delta r)) kV/cm with r in cm.

    References
    ----------
    F. W. Peek, Dielectric Phenomena in High Voltage Engineering, 3rd ed., McGraw-Hill, 1929
    (spheres; coefficients from memory).
    """
    radius_cm = np.asarray(sphere_diameter_m, dtype=float) * 50.0
    delta = np.asarray(relative_density, dtype=float)
    return (_PEEK_SPHERE_KV_CM * delta * (1 + _PEEK_SPHERE_ROOT_CM / np.sqrt(delta * radius_cm))
            * 1e5)


def _check_sphere_range(gap_m: np.ndarray, diameter: np.ndarray,
                        relative_density: np.ndarray) -> None:
    low, high = SPHERE_DIAMETER_RANGE_M
    if np.any(~np.isfinite(diameter)) or np.any(diameter <= 0):
        raise InputError("the sphere diameter must be a length above zero, e.g. '5 cm'")
    if np.any(diameter < low * (1 - 1e-9)) or np.any(diameter > high * (1 + 1e-9)):
        raise InputError(f"a sphere diameter of {float(diameter.flat[0]) * 1e2:.4g} cm is "
                         f"outside the sphere method ({sphere_range_text()})")
    ratio = gap_m / diameter
    if np.any(ratio > SPHERE_MAX_GAP_RATIO * (1 + 1e-9)):
        worst = int(np.argmax(ratio))
        raise InputError(
            f"a gap of {float(gap_m.flat[worst]) * 1e2:.4g} cm between spheres of "
            f"{float(diameter.flat[worst]) * 1e2:.4g} cm is outside the models: "
            f"{sphere_range_text()}; {uniform_range_text()}. A spark this long between such "
            "small balls depends on corona and polarity and no model here covers it")
    if np.any(gap_m * relative_density < UNIFORM_RANGE_M[0] * (1 - 1e-9)):
        raise InputError(f"the gap is too short for the models ({sphere_range_text()})")


def sphere_gap_breakdown_voltage(gap_m, sphere_diameter_m, relative_density=1.0):
    """Breakdown voltage of a gap between two equal spheres, one of them earthed.

    Parameters
    ----------
    gap_m : float or array_like
        Gap between the sphere surfaces [m].
    sphere_diameter_m : float or array_like
        Diameter of each sphere [m], 2 cm to 200 cm.
    relative_density : float or array_like, optional
        Relative air density delta [-].

    Returns
    -------
    float or numpy.ndarray
        Breakdown voltage [V].

    Raises
    ------
    InputError
        Outside the method's range: diameter 2 cm to 2 m, gap up to half the diameter.

    Notes
    -----
    U = E_crit d / f, with f from :func:`sphere_field_factor` and
    E_crit = max(Peek's sphere gradient, uniform-field gradient U_uniform(d) / d): for short
    gaps the gap, for longer ones the sphere's curvature limits the ionisation path, and the
    tighter limit sets the field needed. Against the standard sphere-gap table (IEC 60052, one
    sphere earthed, values from memory) this is within about 5 % up to gap = 0.3 D and about
    10 % low at gap = 0.5 D, so it errs on the side of a lower voltage.

    References
    ----------
    IEC 60052:2002, Voltage measurement by means of standard air gaps (the table and its
    range, from memory); F. W. Peek, Dielectric Phenomena in High Voltage Engineering, 1929;
    the image method of :func:`sphere_field_factor`.
    """
    gap_m, relative_density = _arrays(gap_m, relative_density)
    gap_m, relative_density, diameter = np.broadcast_arrays(
        gap_m, relative_density, np.asarray(sphere_diameter_m, dtype=float))
    _check_sphere_range(gap_m, diameter, relative_density)
    return _sphere_voltage(gap_m, diameter, relative_density)[()]


def _sphere_voltage(gap_m: np.ndarray, diameter: np.ndarray,
                    relative_density: np.ndarray) -> np.ndarray:
    critical = np.maximum(peek_sphere_gradient(diameter, relative_density),
                          _uniform_voltage(gap_m, relative_density) / gap_m)
    return critical * gap_m / sphere_field_factor(gap_m, diameter)


def spark_breakdown(gap_m, electrodes: str = "uniform", sphere_diameter_m=None,
                    relative_density=1.0) -> SparkResult:
    """Breakdown voltage of a gap with its model named and its range stated.

    Parameters
    ----------
    gap_m : float or array_like
        Gap [m].
    electrodes : {"uniform", "spheres"}
        Plane (uniform-field) electrodes, or two equal spheres.
    sphere_diameter_m : float, optional
        Sphere diameter [m]; required for ``"spheres"``.
    relative_density : float or array_like, optional
        Relative air density delta [-].

    Returns
    -------
    SparkResult

    Raises
    ------
    InputError
        For an unknown electrode kind, a missing sphere diameter, or a gap outside the models.
    """
    if electrodes not in ELECTRODES:
        raise InputError(f"electrodes must be one of {', '.join(ELECTRODES)}, got {electrodes!r}")
    gap, delta = _arrays(gap_m, relative_density)
    if electrodes == "uniform":
        if sphere_diameter_m is not None:
            raise InputError("a sphere diameter is for spheres; choose electrodes 'spheres' or "
                             "leave the diameter out")
        voltage = uniform_field_breakdown_voltage(gap, delta)
        return SparkResult(np.asarray(voltage), gap, delta, UNIFORM_MODEL, uniform_range_text())
    if sphere_diameter_m is None:
        raise InputError("spheres need their diameter, e.g. a sphere diameter of '5 cm'")
    voltage = sphere_gap_breakdown_voltage(gap, sphere_diameter_m, delta)
    return SparkResult(np.asarray(voltage), gap, delta, SPHERE_MODEL, sphere_range_text())


def gap_for_voltage(voltage_v: float, electrodes: str = "uniform",
                    sphere_diameter_m: float | None = None,
                    relative_density: float = 1.0) -> float:
    """The gap that breaks down at a voltage (the inverse of :func:`spark_breakdown`).

    Parameters
    ----------
    voltage_v : float
        Voltage [V], above zero.
    electrodes, sphere_diameter_m, relative_density
        As for :func:`spark_breakdown`.

    Returns
    -------
    float
        Gap [m], found by Brent's method (scipy.optimize.brentq) on the model's valid range of
        gaps, where the breakdown voltage rises with the gap.

    Raises
    ------
    InputError
        When the voltage is not positive or lies beyond what the model covers.
    """
    from scipy.optimize import brentq  # imported when first needed

    if not (math.isfinite(voltage_v) and voltage_v > 0):
        raise InputError("the voltage must be above zero, e.g. '30 kV'")
    if not (math.isfinite(relative_density) and relative_density > 0):
        raise InputError("the relative air density must be above zero")
    low = UNIFORM_RANGE_M[0] / relative_density
    high = UNIFORM_RANGE_M[1] / relative_density
    if electrodes == "spheres":
        if sphere_diameter_m is None:
            raise InputError("spheres need their diameter, e.g. a sphere diameter of '5 cm'")
        spark_breakdown(low, electrodes, sphere_diameter_m, relative_density)  # checks range
        high = SPHERE_MAX_GAP_RATIO * sphere_diameter_m

    def voltage_at(gap: float) -> float:
        return float(spark_breakdown(gap, electrodes, sphere_diameter_m,
                                     relative_density).breakdown_voltage_v)

    lowest, highest = voltage_at(low), voltage_at(high)
    if not lowest <= voltage_v <= highest:
        raise InputError(
            f"{voltage_v / 1e3:.4g} kV is outside what the model covers for these electrodes "
            f"and air ({lowest / 1e3:.3g} kV to {highest / 1e3:.4g} kV; "
            + (sphere_range_text() if electrodes == "spheres" else uniform_range_text()) + ")")
    return float(brentq(lambda gap: voltage_at(gap) - voltage_v, low, high, xtol=1e-12,
                        rtol=1e-10))


# --- stored energy ---------------------------------------------------------------------------

@dataclass(frozen=True)
class EnergyThreshold:
    """A level of stored energy (or charge) that safety practice names, with its source."""

    energy_j: float | None
    charge_c: float | None
    meaning: str
    source: str
    #: Voltages [V] the threshold applies to (low exclusive, high inclusive).
    voltage_range_v: tuple[float, float] = (0.0, math.inf)


#: Thresholds for capacitor discharges, lowest first.
ENERGY_THRESHOLDS: tuple[EnergyThreshold, ...] = (
    EnergyThreshold(None, 45e-6, "stored charge above which a touchable part counts as "
                    "hazardous, up to 15 kV",
                    "IEC 61010-1, safety requirements for laboratory equipment, hazardous live "
                    "limits for capacitance (from memory)", (0.0, 15e3)),
    EnergyThreshold(0.35, None, "stored energy above which a touchable part counts as "
                    "hazardous, above 15 kV",
                    "IEC 61010-1, safety requirements for laboratory equipment, hazardous live "
                    "limits for capacitance (from memory)", (15e3, math.inf)),
    EnergyThreshold(1.0, None, "a painful shock that makes people jerk back and fall or drop "
                    "things", "common practice, no source"),
    EnergyThreshold(10.0, None, "a discharge that can injure seriously or kill: treat the set-up "
                    "as dangerous", "common practice, no source"),
)

DISCHARGE_ADVICE = ("Before touching a terminal, a jar or anything connected to them, discharge "
                    "it with an earthed discharge rod on an insulated handle, and leave the rod "
                    "in place while you work.")


def stored_energy(capacitance_f, voltage_v):
    """Energy stored in a capacitance at a voltage.

    Parameters
    ----------
    capacitance_f : float or array_like
        Capacitance [F] (terminal, jars), not negative.
    voltage_v : float or array_like
        Voltage across it [V].

    Returns
    -------
    float or numpy.ndarray
        Energy W = C V^2 / 2 [J].

    Raises
    ------
    InputError
        For a negative or non-finite capacitance or a non-finite voltage.
    """
    capacitance = np.asarray(capacitance_f, dtype=float)
    voltage = np.asarray(voltage_v, dtype=float)
    if np.any(~np.isfinite(capacitance)) or np.any(capacitance < 0):
        raise InputError("the capacitance must be zero or more, e.g. '200 pF'")
    if np.any(~np.isfinite(voltage)):
        raise InputError("the voltage must be a number, e.g. '30 kV'")
    return (0.5 * capacitance * voltage**2)[()]


def thresholds_reached(capacitance_f: float, voltage_v: float) -> list[EnergyThreshold]:
    """The thresholds of :data:`ENERGY_THRESHOLDS` that a charged capacitance reaches.

    Parameters
    ----------
    capacitance_f : float
        Capacitance [F].
    voltage_v : float
        Voltage [V].

    Returns
    -------
    list of EnergyThreshold
        Those whose energy (or charge, Q = C V) the capacitance reaches; the charge limit of
        IEC 61010-1 applies up to 15 kV and its energy limit above.
    """
    energy = float(stored_energy(capacitance_f, voltage_v))
    charge = float(capacitance_f) * abs(float(voltage_v))
    magnitude = abs(float(voltage_v))
    reached = []
    for threshold in ENERGY_THRESHOLDS:
        low, high = threshold.voltage_range_v
        if not low < magnitude <= high:
            continue
        if (threshold.charge_c is not None and charge > threshold.charge_c) or (
                threshold.energy_j is not None and energy > threshold.energy_j):
            reached.append(threshold)
    return reached


def threshold_text(threshold: EnergyThreshold) -> str:
    """A threshold's level in words, e.g. '0.35 J (above 15 kV)'."""
    level = (f"{threshold.charge_c * 1e6:g} µC" if threshold.charge_c is not None
             else f"{threshold.energy_j:g} J")
    low, high = threshold.voltage_range_v
    if math.isfinite(high):
        return f"{level} (up to {high / 1e3:g} kV)"
    if low > 0:
        return f"{level} (above {low / 1e3:g} kV)"
    return level


def threshold_table() -> list[dict[str, str]]:
    """The thresholds of :data:`ENERGY_THRESHOLDS` as rows for a table (level, meaning, source)."""
    return [{"level": threshold_text(item), "meaning": item.meaning, "source": item.source}
            for item in ENERGY_THRESHOLDS]
