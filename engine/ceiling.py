"""The ceiling current: the most an open-air carrier machine can deliver.

I_ceiling = sigma_limit * A_swept_per_s * units, with sigma_limit = eps0 * E_ref * delta and
units the machine's count of one-carrier ceilings: from the arrangement of a disc machine (see
:mod:`engine.arrangements`), or N * k for belts, cylinders and custom carriers.
Every function is vectorised over arrays of speed, pressure and temperature: one call serves a
million readings.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from engine.air import (
    REFERENCE_PRESSURE_PA,
    REFERENCE_TEMPERATURE_K,
    charge_density_limit,
    relative_air_density,
)
from engine.carriers import ROTATION
from engine.errors import InputError
from engine.machines import Machine


def ceiling_current(charge_density_limit_c_m2, swept_area_per_s_m2, units=1.0):
    """Ceiling current of a machine from its limit density, swept area and units.

    Parameters
    ----------
    charge_density_limit_c_m2 : float or array_like
        Surface charge density limit sigma_limit [C/m^2].
    swept_area_per_s_m2 : float or array_like
        Charged area one carrier sweeps past the collectors per second [m^2/s]
        (area per revolution times revolutions per second, or belt width times speed).
    units : float or array_like, optional
        Units of the one-carrier ceiling the machine can deliver [-]: from a disc machine's
        arrangement (see :mod:`engine.arrangements`), or carriers N times charge loads per
        revolution k.

    Returns
    -------
    float or numpy.ndarray
        Ceiling current [A], I = sigma_limit * A_s * units.
    """
    return (
        np.asarray(charge_density_limit_c_m2, dtype=float)
        * np.asarray(swept_area_per_s_m2, dtype=float)
        * np.asarray(units, dtype=float)
    )


@dataclass(frozen=True)
class CeilingResult:
    """Arrays (or scalars) from :func:`machine_ceiling`, all in SI units.

    Attributes
    ----------
    relative_air_density : numpy.ndarray
        delta [-].
    breakdown_field_v_m : numpy.ndarray
        E [V/m].
    charge_density_limit_c_m2 : numpy.ndarray
        sigma_limit [C/m^2].
    swept_area_per_s_m2 : numpy.ndarray
        Area one carrier sweeps per second [m^2/s].
    ceiling_current_a : numpy.ndarray
        Ceiling current of the machine [A].
    """

    relative_air_density: np.ndarray
    breakdown_field_v_m: np.ndarray
    charge_density_limit_c_m2: np.ndarray
    swept_area_per_s_m2: np.ndarray
    ceiling_current_a: np.ndarray


def machine_ceiling(machine: Machine, speed, speed_kind: str = ROTATION,
                    pressure_pa=REFERENCE_PRESSURE_PA,
                    temperature_k=REFERENCE_TEMPERATURE_K) -> CeilingResult:
    """Ceiling of one machine, vectorised over speed and air conditions.

    Parameters
    ----------
    machine : Machine
        The machine (carrier geometry, N, k, reference breakdown field).
    speed : float or array_like
        Speed [rev/s] for ``speed_kind="rotation"``, or belt surface speed [m/s] for
        ``"linear"``.
    speed_kind : {"rotation", "linear"}
        What ``speed`` is.
    pressure_pa : float or array_like, optional
        Air pressure [Pa]; default the IEC 60060-1 reference, 101.3 kPa.
    temperature_k : float or array_like, optional
        Air temperature [K]; default 293.15 K.

    Returns
    -------
    CeilingResult
        Arrays broadcast from the inputs.

    Raises
    ------
    InputError
        When the speed kind does not suit the carrier (a disc given m/s).
    """
    delta = relative_air_density(pressure_pa, temperature_k)
    field_v_m = machine.breakdown_field_at(delta)
    sigma = charge_density_limit(field_v_m)
    swept = machine.carrier.swept_area_per_s_m2(speed, speed_kind)
    current = ceiling_current(sigma, swept, machine.units)
    return CeilingResult(delta, field_v_m, sigma, swept, current)


def ceiling_figures(machine: Machine, speed: float, speed_kind: str = ROTATION,
                    pressure_pa: float = REFERENCE_PRESSURE_PA,
                    temperature_k: float = REFERENCE_TEMPERATURE_K) -> dict[str, object]:
    """One ceiling as a flat dict in display units, for the command line and the pages.

    Parameters
    ----------
    machine, speed, speed_kind, pressure_pa, temperature_k
        As for :func:`machine_ceiling`, scalars.

    Returns
    -------
    dict
        Keys ``ceiling_current_uA``, ``area_per_rev_m2`` (one carrier; None for a belt given a
        linear speed), ``swept_area_per_s_m2`` (one carrier), ``charge_density_limit_uC_m2``,
        ``relative_air_density``, ``speed_rev_s`` (None for a linear speed),
        ``linear_speed_m_s`` (None for a rotation rate), ``breakdown_field_MV_m``,
        ``pressure_kPa``, ``temperature_C``, ``carrier``, ``arrangement`` and ``collectors``
        (None without an arrangement), ``discs`` (a stack's, else None), ``carriers`` (discs of
        an arrangement), ``collection_factor`` (None where the units do not come from it),
        ``units``, ``units_rule`` (the rule in words with its basis) and
        ``single_carrier_ceiling_uA`` (one unit at these air conditions), with
        ``ceiling_current_uA = units * single_carrier_ceiling_uA``.
    """
    result = machine_ceiling(machine, speed, speed_kind, pressure_pa, temperature_k)
    rotation = speed_kind == ROTATION
    rule = machine.unit_rule
    single = float(ceiling_current(result.charge_density_limit_c_m2,
                                   result.swept_area_per_s_m2, 1.0))
    return {
        "carrier": machine.kind,
        "arrangement": machine.arrangement or None,
        "collectors": machine.collectors or None,
        "discs": machine.discs,
        "carriers": machine.carriers,
        "collection_factor": machine.collection_factor if machine.counts_carriers else None,
        "units": rule.units,
        "units_rule": rule.text,
        "single_carrier_ceiling_uA": single * 1e6,
        "area_per_rev_m2": machine.carrier.area_per_rev_m2 if rotation else None,
        "speed_rev_s": float(speed) if rotation else None,
        "linear_speed_m_s": None if rotation else float(speed),
        "swept_area_per_s_m2": float(result.swept_area_per_s_m2),
        "pressure_kPa": float(pressure_pa) / 1e3,
        "temperature_C": float(temperature_k) - 273.15,
        "relative_air_density": float(result.relative_air_density),
        "breakdown_field_MV_m": float(result.breakdown_field_v_m) / 1e6,
        "charge_density_limit_uC_m2": float(result.charge_density_limit_c_m2) * 1e6,
        "ceiling_current_uA": float(result.ceiling_current_a) * 1e6,
    }


def _limit_density(machine: Machine, pressure_pa, temperature_k):
    return charge_density_limit(
        machine.breakdown_field_at(relative_air_density(pressure_pa, temperature_k)))


def speed_for_current(machine: Machine, target_current_a: float, speed_kind: str = ROTATION,
                      pressure_pa: float = REFERENCE_PRESSURE_PA,
                      temperature_k: float = REFERENCE_TEMPERATURE_K, efficiency=1.0):
    """Speed at which the ceiling reaches a target current (the planner's inverse question).

    Parameters
    ----------
    machine : Machine
    target_current_a : float
        Target ceiling current [A], positive.
    speed_kind : {"rotation", "linear"}
        Whether to answer in rev/s or, for a belt, in m/s.
    pressure_pa, temperature_k : float
        Air conditions [Pa], [K].
    efficiency : float or array_like, optional
        The share of the ceiling the machine delivers [-]: 1 for the ceiling itself, or the
        machine's measured efficiency (e.g. its observed units over its units, and the ends
        of their interval) for the speed it would really need.

    Returns
    -------
    float or numpy.ndarray
        Speed [rev/s] or [m/s]: f = I / (eta * sigma_limit * A_rev * units), since the ceiling
        is linear in speed; NaN where the efficiency is not above zero.
    """
    if not target_current_a > 0:
        raise InputError("the target current must be positive")
    per_unit_speed = float(machine_ceiling(machine, 1.0, speed_kind, pressure_pa,
                                           temperature_k).ceiling_current_a)
    efficiency = np.asarray(efficiency, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        speed = np.where(efficiency > 0, target_current_a / (efficiency * per_unit_speed),
                         np.nan)
    return float(speed) if speed.ndim == 0 else speed


#: What the planner keeps as it is while it varies one size of each carrier kind.
SIZES_HELD = {
    "disc": "inner radius and sector fill as they are",
    "belt": "rollers or loop as they are",
    "cylinder": "radius as it is",
    "custom": "nothing else to hold",
}


def size_for_current(machine: Machine, target_current_a: float, speed: float,
                     speed_kind: str = ROTATION, pressure_pa: float = REFERENCE_PRESSURE_PA,
                     temperature_k: float = REFERENCE_TEMPERATURE_K) -> tuple[str, float]:
    """Size that makes the ceiling reach a target current at a given speed.

    Parameters
    ----------
    machine : Machine
        The machine whose other sizes are held (see :data:`SIZES_HELD`).
    target_current_a : float
        Target ceiling current [A].
    speed : float
        Speed [rev/s], or [m/s] for a belt with ``speed_kind="linear"``.
    speed_kind : {"rotation", "linear"}
    pressure_pa, temperature_k : float
        Air conditions [Pa], [K].

    Returns
    -------
    tuple of (str, float)
        What was varied, and its value [m] (or [m^2] for a custom carrier).

    Notes
    -----
    The swept area per second needed is A_s = I / (sigma_limit * units). A disc then needs
    r_out = sqrt(A_rev / (pi fill) + r_in^2) with A_rev = A_s / f; a belt needs w = A_s / v
    (v = f * length per revolution); a cylinder L = A_rev / (2 pi r); a custom carrier A_rev.
    """
    if not target_current_a > 0:
        raise InputError("the target current must be positive")
    if not speed > 0:
        raise InputError("the speed must be positive")
    sigma = float(_limit_density(machine, pressure_pa, temperature_k))
    swept_needed = target_current_a / (sigma * machine.units)
    carrier = machine.carrier
    if carrier.kind == "belt":
        if speed_kind == ROTATION:
            if carrier.length_per_rev_m is None:
                raise InputError("this belt needs a linear speed (m/s) for the planner")
            belt_speed = speed * carrier.length_per_rev_m
        else:
            belt_speed = speed
        return "width", swept_needed / belt_speed
    if speed_kind != ROTATION:
        raise InputError(f"a {carrier.kind} carrier's speed must be a rotation rate")
    area_per_rev = swept_needed / speed
    if carrier.kind == "disc":
        radius = math.sqrt(area_per_rev / (math.pi * carrier.sector_fill)
                           + carrier.inner_radius_m**2)
        return "outer radius", radius
    if carrier.kind == "cylinder":
        return "active length", area_per_rev / (2 * math.pi * carrier.radius_m)
    return "area per revolution", area_per_rev
