"""The ceiling current: the most an open-air carrier machine can deliver.

I_ceiling = sigma_limit * A_swept_per_s * N * k, with sigma_limit = eps0 * E_ref * delta.
Every function is vectorised over arrays of speed, pressure and temperature: one call serves a
million readings.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from engine.air import (
    REFERENCE_PRESSURE_PA,
    REFERENCE_TEMPERATURE_K,
    breakdown_field,
    charge_density_limit,
    relative_air_density,
)
from engine.carriers import ROTATION
from engine.machines import Machine


def ceiling_current(charge_density_limit_c_m2, swept_area_per_s_m2, carriers=1,
                    collection_factor=1.0):
    """Ceiling current of a machine from its limit density and swept area.

    Parameters
    ----------
    charge_density_limit_c_m2 : float or array_like
        Surface charge density limit sigma_limit [C/m^2].
    swept_area_per_s_m2 : float or array_like
        Charged area one carrier sweeps past the collectors per second [m^2/s]
        (area per revolution times revolutions per second, or belt width times speed).
    carriers : int or array_like, optional
        Number N of carriers delivering charge [-].
    collection_factor : float or array_like, optional
        Charge loads k per revolution per carrier [-].

    Returns
    -------
    float or numpy.ndarray
        Ceiling current [A], I = sigma_limit * A_s * N * k.
    """
    return (
        np.asarray(charge_density_limit_c_m2, dtype=float)
        * np.asarray(swept_area_per_s_m2, dtype=float)
        * np.asarray(carriers, dtype=float)
        * np.asarray(collection_factor, dtype=float)
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
    field_v_m = breakdown_field(delta, machine.reference_field_v_m)
    sigma = charge_density_limit(field_v_m)
    swept = machine.carrier.swept_area_per_s_m2(speed, speed_kind)
    current = ceiling_current(sigma, swept, machine.carriers, machine.collection_factor)
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
        ``pressure_kPa``, ``temperature_C``, ``carrier``, ``carriers``, ``collection_factor``.
    """
    result = machine_ceiling(machine, speed, speed_kind, pressure_pa, temperature_k)
    rotation = speed_kind == ROTATION
    return {
        "carrier": machine.kind,
        "carriers": machine.carriers,
        "collection_factor": machine.collection_factor,
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
