"""Air: relative air density, breakdown field, charge density limit and humidity.

One function, one model, each vectorised over numpy arrays and each citing its source.
Inputs and outputs are SI floats: pascal, kelvin, metres, volts per metre, fractions for
relative humidity (0.45 for 45 %).
"""

from __future__ import annotations

import numpy as np

from engine.errors import InputError

#: Vacuum permittivity [F/m], CODATA 2018 recommended value.
EPSILON_0 = 8.8541878128e-12
#: Standard reference pressure of IEC 60060-1 [Pa].
REFERENCE_PRESSURE_PA = 101_300.0
#: Standard reference temperature of IEC 60060-1 [K] (20 degC).
REFERENCE_TEMPERATURE_K = 293.15
#: Breakdown field of air at the reference atmosphere, uniform field, centimetre gaps [V/m].
REFERENCE_BREAKDOWN_FIELD_V_M = 3.0e6
#: Specific gas constant of water vapour [J/(kg K)].
WATER_VAPOUR_GAS_CONSTANT = 461.5

# ICAO standard atmosphere (ICAO Doc 7488/3): sea-level values, lapse rate, gas constant.
_ICAO_SEA_LEVEL_PRESSURE_PA = 101_325.0
_ICAO_SEA_LEVEL_TEMPERATURE_K = 288.15
_ICAO_LAPSE_RATE_K_M = 0.0065
_ICAO_GAS_CONSTANT = 287.05287
_ICAO_GRAVITY = 9.80665
_ICAO_EARTH_RADIUS_M = 6_356_766.0
_ICAO_TROPOPAUSE_M = 11_000.0
_ALTITUDE_RANGE_M = (-5_000.0, 20_000.0)

# Magnus form with the coefficients of Alduchov and Eskridge (1996).
_MAGNUS_A_PA = 610.94
_MAGNUS_B = 17.625
_MAGNUS_C_DEGC = 243.04


def relative_air_density(pressure_pa, temperature_k):
    """Relative air density against the IEC 60060-1 standard reference atmosphere.

    Parameters
    ----------
    pressure_pa : float or array_like
        Absolute air pressure [Pa].
    temperature_k : float or array_like
        Air temperature [K].

    Returns
    -------
    float or numpy.ndarray
        Relative air density delta [-]; 1 at 101.3 kPa and 20 degC.

    Notes
    -----
    delta = (p / 101.3 kPa) * (293.15 K / T). The standard reference atmosphere of
    IEC 60060-1 is 20 degC, 101.3 kPa and 11 g/m^3 absolute humidity; this tool applies no
    humidity correction to the breakdown field (see :func:`breakdown_field`).

    References
    ----------
    IEC 60060-1:2010, High-voltage test techniques, Part 1, clause on atmospheric correction
    (standard reference atmosphere 20 degC, 101.3 kPa, 11 g/m^3).
    """
    pressure_pa = np.asarray(pressure_pa, dtype=float)
    temperature_k = np.asarray(temperature_k, dtype=float)
    return (pressure_pa / REFERENCE_PRESSURE_PA) * (REFERENCE_TEMPERATURE_K / temperature_k)


def pressure_for_relative_density(relative_density, temperature_k=REFERENCE_TEMPERATURE_K):
    """Pressure that gives a relative air density at a temperature (inverse of delta).

    Parameters
    ----------
    relative_density : float or array_like
        Relative air density delta [-].
    temperature_k : float or array_like, optional
        Air temperature [K]; default the IEC 60060-1 reference, 293.15 K.

    Returns
    -------
    float or numpy.ndarray
        Pressure [Pa], p = delta * 101.3 kPa * T / 293.15 K.
    """
    return (np.asarray(relative_density, dtype=float) * REFERENCE_PRESSURE_PA
            * np.asarray(temperature_k, dtype=float) / REFERENCE_TEMPERATURE_K)


def pressure_from_altitude(altitude_m):
    """Air pressure at a geometric altitude by the ICAO standard atmosphere.

    Parameters
    ----------
    altitude_m : float or array_like
        Geometric altitude above mean sea level [m], from -5 000 m to 20 000 m.

    Returns
    -------
    float or numpy.ndarray
        Standard-atmosphere pressure [Pa].

    Raises
    ------
    InputError
        For an altitude outside -5 000 m to 20 000 m.

    Notes
    -----
    The geometric altitude h is first made geopotential, H = r0 h / (r0 + h) with
    r0 = 6 356 766 m. Below the tropopause (H <= 11 km)
    p = p0 (1 - L H / T0) ^ (g0 / (R L)) with p0 = 101 325 Pa, T0 = 288.15 K,
    L = 0.0065 K/m, R = 287.05287 J/(kg K), g0 = 9.80665 m/s^2; above it, up to 20 km, the
    layer is isothermal at 216.65 K and p falls exponentially.

    References
    ----------
    ICAO, Manual of the ICAO Standard Atmosphere, Doc 7488/3, 3rd edition, 1993.
    """
    altitude_m = np.asarray(altitude_m, dtype=float)
    low, high = _ALTITUDE_RANGE_M
    if np.any(~np.isfinite(altitude_m)) or np.any((altitude_m < low) | (altitude_m > high)):
        raise InputError(
            f"altitude must be between {low:g} m and {high:g} m (the standard atmosphere used "
            "here covers that range)"
        )
    geopotential = _ICAO_EARTH_RADIUS_M * altitude_m / (_ICAO_EARTH_RADIUS_M + altitude_m)
    exponent = _ICAO_GRAVITY / (_ICAO_GAS_CONSTANT * _ICAO_LAPSE_RATE_K_M)
    tropopause_temperature = (
        _ICAO_SEA_LEVEL_TEMPERATURE_K - _ICAO_LAPSE_RATE_K_M * _ICAO_TROPOPAUSE_M
    )
    tropopause_pressure = _ICAO_SEA_LEVEL_PRESSURE_PA * (
        tropopause_temperature / _ICAO_SEA_LEVEL_TEMPERATURE_K
    ) ** exponent
    below = _ICAO_SEA_LEVEL_PRESSURE_PA * (
        1 - _ICAO_LAPSE_RATE_K_M * np.minimum(geopotential, _ICAO_TROPOPAUSE_M)
        / _ICAO_SEA_LEVEL_TEMPERATURE_K
    ) ** exponent
    above = tropopause_pressure * np.exp(
        -_ICAO_GRAVITY * (geopotential - _ICAO_TROPOPAUSE_M)
        / (_ICAO_GAS_CONSTANT * tropopause_temperature)
    )
    return np.where(geopotential <= _ICAO_TROPOPAUSE_M, below, above)[()]


def breakdown_field(relative_density, reference_field_v_m=REFERENCE_BREAKDOWN_FIELD_V_M,
                    air_gap_m=None):
    """Breakdown field of air at a relative air density: flat, or from an air gap.

    Parameters
    ----------
    relative_density : float or array_like
        Relative air density delta [-] (see :func:`relative_air_density`).
    reference_field_v_m : float or array_like, optional
        Breakdown field at the reference atmosphere [V/m]; default 3.0 MV/m, the handbook
        value for air in uniform fields over centimetre gaps.
    air_gap_m : float or array_like, optional
        Distance from the carrier to the nearest conductor [m]. Where it is given (finite),
        the field is :func:`gap_breakdown_field` at that gap and density and
        ``reference_field_v_m`` is not used; NaN or None keeps the flat field.

    Returns
    -------
    float or numpy.ndarray
        Breakdown field [V/m]: E = E_ref * delta, or the uniform-field breakdown field of the
        air gap.

    Notes
    -----
    The linear scaling with relative air density is the air-density correction of
    IEC 60060-1 with exponent 1 (k1 = delta^m, m = 1), good at the pressures met at ground
    level. (Paschen's law is a law in p * d, pressure times gap: it is not what is applied
    here.) Water vapour hardly changes the breakdown of air and raises it slightly (the
    humidity correction factor k2 of IEC 60060-1 grows with absolute humidity; from memory),
    so no humidity correction is applied. 3 MV/m is a uniform-field value for centimetre gaps;
    over millimetre gaps air holds more (about 4.6 MV/m at 1 mm by the empirical
    uniform-field relation of the high-voltage textbooks), so a machine may give its own
    reference field.

    References
    ----------
    IEC 60060-1:2010, High-voltage test techniques, Part 1: General definitions and test
    requirements, clause on atmospheric correction factors.
    """
    flat = np.asarray(reference_field_v_m, dtype=float) * np.asarray(relative_density,
                                                                     dtype=float)
    if air_gap_m is None:
        return flat
    gap = np.asarray(air_gap_m, dtype=float)
    has_gap = np.isfinite(gap)
    if not has_gap.any():
        return flat
    gap, delta, flat, has_gap = np.broadcast_arrays(
        gap, np.asarray(relative_density, dtype=float), flat, has_gap)
    from_gap = np.full(gap.shape, np.nan)
    usable = has_gap & np.isfinite(delta) & (delta > 0)
    if usable.any():
        from_gap[usable] = gap_breakdown_field(gap[usable], delta[usable], check_range=False)
    return np.where(has_gap, from_gap, flat)[()]


def gap_breakdown_field(gap_m, relative_density=1.0, check_range: bool = True):
    """Uniform-field breakdown field of air across a gap at an air density.

    Parameters
    ----------
    gap_m : float or array_like
        Gap [m], from 0.1 mm to 10 cm at reference air density.
    relative_density : float or array_like, optional
        Relative air density delta [-].
    check_range : bool, optional
        Raise outside the relation's range (default); ``False`` for readings, whose air may
        take a checked gap a little outside it.

    Returns
    -------
    float or numpy.ndarray
        Mean breakdown field U / d [V/m]: about 4.6 MV/m at 1 mm and 3.1 MV/m at 1 cm in
        reference air (20 degC, 101.3 kPa).

    Raises
    ------
    InputError
        Outside the relation's range.

    Notes
    -----
    The empirical uniform-field relation for air, U = 24.36 (p d) + 6.72 sqrt(p d) kV with p in
    bar at 20 degC and d in cm; see :func:`engine.sparks.uniform_field_breakdown_voltage` for
    its source and its scaling with density.
    """
    from engine.sparks import uniform_field_breakdown_field  # sparks builds on this module

    return uniform_field_breakdown_field(gap_m, relative_density, check_range)


def charge_density_limit(breakdown_field_v_m):
    """Largest surface charge density an open-air carrier can hold.

    Parameters
    ----------
    breakdown_field_v_m : float or array_like
        Breakdown field of the air at the carrier [V/m].

    Returns
    -------
    float or numpy.ndarray
        Surface charge density limit sigma [C/m^2], sigma = eps0 * E (field on one side of
        a charged sheet facing a conductor, by Gauss's law). About 26.6 uC/m^2 at 3 MV/m.
    """
    return EPSILON_0 * np.asarray(breakdown_field_v_m, dtype=float)


def saturation_vapour_pressure(temperature_k):
    """Saturation vapour pressure of water over a plane water surface.

    Parameters
    ----------
    temperature_k : float or array_like
        Air temperature [K].

    Returns
    -------
    float or numpy.ndarray
        Saturation vapour pressure e_s [Pa].

    Notes
    -----
    Magnus form e_s = 610.94 Pa * exp(17.625 t / (t + 243.04)), t in degC; within 0.4 % of
    reference tables from -40 degC to 50 degC. Below 0 degC this is the pressure over
    supercooled water, not over ice: the meteorological convention for relative humidity
    (World Meteorological Organization, Guide to Instruments and Methods of Observation,
    WMO-No. 8, annex on humidity formulae).

    References
    ----------
    Alduchov, O. A., and R. E. Eskridge, 1996: Improved Magnus form approximation of
    saturation vapor pressure. J. Appl. Meteor., 35, 601-609.
    """
    celsius = np.asarray(temperature_k, dtype=float) - 273.15
    return _MAGNUS_A_PA * np.exp(_MAGNUS_B * celsius / (celsius + _MAGNUS_C_DEGC))


def vapour_pressure(relative_humidity, temperature_k):
    """Partial pressure of water vapour from relative humidity.

    Parameters
    ----------
    relative_humidity : float or array_like
        Relative humidity as a fraction [-] (0.45 for 45 %).
    temperature_k : float or array_like
        Air temperature [K].

    Returns
    -------
    float or numpy.ndarray
        Vapour pressure e = RH * e_s(T) [Pa].
    """
    return np.asarray(relative_humidity, dtype=float) * saturation_vapour_pressure(temperature_k)


def dew_point(relative_humidity, temperature_k):
    """Dew point by inverting the Magnus form of :func:`saturation_vapour_pressure`.

    Parameters
    ----------
    relative_humidity : float or array_like
        Relative humidity as a fraction [-], above 0.
    temperature_k : float or array_like
        Air temperature [K].

    Returns
    -------
    float or numpy.ndarray
        Dew point [K]; NaN where the relative humidity is zero or negative.

    Notes
    -----
    gamma = ln(RH) + b t / (c + t); t_d = c gamma / (b - gamma), t in degC, with
    b = 17.625 and c = 243.04 degC (Alduchov and Eskridge, 1996).
    """
    relative_humidity = np.asarray(relative_humidity, dtype=float)
    celsius = np.asarray(temperature_k, dtype=float) - 273.15
    with np.errstate(divide="ignore", invalid="ignore"):
        gamma = np.log(np.where(relative_humidity > 0, relative_humidity, np.nan)) + (
            _MAGNUS_B * celsius / (_MAGNUS_C_DEGC + celsius)
        )
        return _MAGNUS_C_DEGC * gamma / (_MAGNUS_B - gamma) + 273.15


def absolute_humidity(relative_humidity, temperature_k):
    """Mass of water vapour per volume of air.

    Parameters
    ----------
    relative_humidity : float or array_like
        Relative humidity as a fraction [-].
    temperature_k : float or array_like
        Air temperature [K].

    Returns
    -------
    float or numpy.ndarray
        Absolute humidity rho_v = e / (R_v T) [kg/m^3], with R_v = 461.5 J/(kg K).
    """
    temperature_k = np.asarray(temperature_k, dtype=float)
    return vapour_pressure(relative_humidity, temperature_k) / (
        WATER_VAPOUR_GAS_CONSTANT * temperature_k
    )


def site_pressure(pressure_pa: float | None = None, altitude_m: float | None = None) -> float:
    """Pressure to use at a site: the measured one, else the standard atmosphere at altitude.

    Parameters
    ----------
    pressure_pa : float, optional
        Measured absolute pressure [Pa].
    altitude_m : float, optional
        Site altitude [m], used when no pressure is given.

    Returns
    -------
    float
        Pressure [Pa]; the IEC 60060-1 reference pressure when neither is given.

    Raises
    ------
    InputError
        When both are given, or the pressure is not positive.
    """
    if pressure_pa is not None and altitude_m is not None:
        raise InputError("give either a pressure or an altitude, not both")
    if pressure_pa is not None:
        if not (np.isfinite(pressure_pa) and pressure_pa > 0):
            raise InputError(f"pressure must be positive, got {pressure_pa:g} Pa")
        return float(pressure_pa)
    if altitude_m is not None:
        return float(pressure_from_altitude(altitude_m))
    return REFERENCE_PRESSURE_PA
