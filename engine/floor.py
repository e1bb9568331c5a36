"""The floors the evaluation is measured against: the same work as bare numpy and pandas.

Kept apart from :mod:`engine.bench` so that the floor's process imports only numpy, pandas,
pyarrow and the machines parser (``python -m engine.floor MACHINES READINGS LOG OUT``), as lean
as the work allows; :mod:`engine.bench` times it against ``python -m engine evaluate``.
"""

from __future__ import annotations

import math
import sys
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from engine import columns as col
from engine.carriers import LINEAR, ROTATION, Belt
from engine.machines import MachineFile

#: Reading columns of the canonical layout and their units.
READINGS_HEADER = ("machine", "session", "time", "speed [rpm]", "current [uA]", "rh [%]",
                   "temperature [degC]", "pressure [hPa]", "note")
LOG_HEADER = ("time", "rh [%]", "temperature [degC]", "pressure [hPa]")


@dataclass(frozen=True)
class BenchFiles:
    """Paths of the files written for the command line."""

    machines: Path
    readings: Path
    environment: Path


def evaluate_floor(files: BenchFiles, output: Path) -> int:
    """What ``evaluate`` does, written straight in pandas and numpy: the floor it is measured by.

    The readings and the log read with pandas' pyarrow engine, times parsed as ISO 8601,
    ``merge_asof`` to the nearest log entry within 5 minutes filling the readings' empty air
    columns, the derived columns as the bare numpy expressions of :func:`numpy_floor`, and the
    CSV written with pyarrow. No validation, no flags text, no messages.

    Parameters
    ----------
    files : BenchFiles
        The machines file, the readings and the log (:func:`write_files`).
    output : Path
        CSV written.

    Returns
    -------
    int
        Readings written.
    """
    import pyarrow as pa
    from pyarrow import csv as arrow_csv

    from engine.machines import parse_machines_text

    machine_file = parse_machines_text(files.machines.read_text(encoding="utf-8"))
    readings = pd.read_csv(files.readings, engine="pyarrow")
    log = pd.read_csv(files.environment, engine="pyarrow")
    for frame in (readings, log):
        if not pd.api.types.is_datetime64_any_dtype(frame["time"]):
            frame["time"] = pd.to_datetime(frame["time"], format="ISO8601", utc=True)
    readings["_position"] = np.arange(len(readings))
    log = log.rename(columns={name: f"log {name}" for name in LOG_HEADER if name != "time"})
    merged = pd.merge_asof(readings.sort_values("time", kind="stable"), log.sort_values("time"),
                           on="time", direction="nearest", tolerance=pd.Timedelta(minutes=5))
    merged = merged.sort_values("_position", kind="stable")
    for name in ("rh [%]", "temperature [degC]", "pressure [hPa]"):
        merged[name] = merged[name].fillna(merged[f"log {name}"])
    ids = [machine.id for machine in machine_file.machines]
    codes = pd.Categorical(merged["machine"], categories=ids).codes
    inputs = {
        "codes": np.asarray(codes, dtype=np.intp),
        "speed_rev_s": merged["speed [rpm]"].to_numpy(dtype=float) / 60.0,
        "belt_speed_m_s": np.full(len(merged), np.nan),
        "current_a": merged["current [uA]"].to_numpy(dtype=float) * 1e-6,
        "rh": merged["rh [%]"].to_numpy(dtype=float) / 100.0,
        "temperature_k": merged["temperature [degC]"].to_numpy(dtype=float) + 273.15,
        "pressure_pa": merged["pressure [hPa]"].to_numpy(dtype=float) * 100.0,
    }
    derived = numpy_floor(inputs, floor_constants(machine_file), machine_file.site.pressure_pa,
                          machine_file.site.temperature_k)
    out = merged[list(READINGS_HEADER)].assign(**derived)
    table = pa.Table.from_pandas(out, preserve_index=False)
    arrow_csv.write_csv(table, output)
    return table.num_rows


# --- The numpy floor ----------------------------------------------------------------------------

def floor_constants(machine_file: MachineFile) -> dict[str, np.ndarray]:
    """Per-machine constants of :func:`numpy_floor`, one entry per machine in file order.

    Parameters
    ----------
    machine_file : MachineFile
        Machines whose speed tolerances, if any, are relative (percentages).

    Returns
    -------
    dict of str to numpy.ndarray
        ``area_per_rev_m2``, ``width_m``, ``length_per_rev_m`` (NaN where not defined),
        ``accepts_rotation``, ``accepts_linear`` (bool), ``carriers``, ``collection_factor``,
        ``reference_field_v_m``, ``current_relative``, ``current_absolute_a``,
        ``speed_relative``, ``field_relative``, ``area_relative_rotation``,
        ``area_relative_linear``.

    Raises
    ------
    ValueError
        For an absolute speed tolerance, which the floor does not handle.
    """
    rows: dict[str, list[float]] = {name: [] for name in (
        "area_per_rev_m2", "width_m", "length_per_rev_m", "accepts_rotation", "accepts_linear",
        "carriers", "collection_factor", "reference_field_v_m", "current_relative",
        "current_absolute_a", "speed_relative", "field_relative", "area_relative_rotation",
        "area_relative_linear")}
    for machine in machine_file.machines:
        carrier = machine.carrier
        tolerances = machine.tolerances
        belt = isinstance(carrier, Belt)
        area = carrier.area_per_rev_m2
        length = carrier.length_per_rev_m if belt else None
        speed = tolerances.get("speed")
        if speed is not None and not speed.relative:
            raise ValueError(f"{machine.id}: the floor handles relative speed tolerances only")
        current = tolerances.get("current")
        field = tolerances.get("breakdown_field")
        values = {
            "area_per_rev_m2": math.nan if area is None else area,
            "width_m": carrier.width_m if belt else math.nan,
            "length_per_rev_m": math.nan if length is None else length,
            "accepts_rotation": ROTATION in carrier.speed_kinds,
            "accepts_linear": LINEAR in carrier.speed_kinds,
            "carriers": machine.carriers,
            "collection_factor": machine.collection_factor,
            "reference_field_v_m": machine.reference_field_v_m,
            "current_relative": current.value if current and current.relative else 0.0,
            "current_absolute_a": current.value if current and not current.relative else 0.0,
            "speed_relative": speed.value if speed else 0.0,
            "field_relative": (field.absolute_for(machine.reference_field_v_m)
                               / machine.reference_field_v_m if field else 0.0),
            "area_relative_rotation": carrier.area_relative_uncertainty(tolerances, ROTATION),
            "area_relative_linear": (carrier.area_relative_uncertainty(tolerances, LINEAR)
                                     if belt else math.nan),
        }
        for name, value in values.items():
            rows[name].append(value)
    constants = {name: np.array(values, dtype=float) for name, values in rows.items()}
    for name in ("accepts_rotation", "accepts_linear"):
        constants[name] = constants[name].astype(bool)
    return constants


def floor_inputs(frame: pd.DataFrame, machine_codes: np.ndarray) -> dict[str, np.ndarray]:
    """Plain arrays of a (merged) readings frame for :func:`numpy_floor`.

    Parameters
    ----------
    frame : pandas.DataFrame
        Readings in SI units (:data:`engine.columns.READING_COLUMNS`).
    machine_codes : numpy.ndarray
        Index of each reading's machine in the machines file.

    Returns
    -------
    dict of str to numpy.ndarray
        ``codes``, ``speed_rev_s``, ``belt_speed_m_s``, ``current_a``, ``rh``,
        ``temperature_k``, ``pressure_pa``.
    """
    arrays = {name: frame[name].to_numpy(dtype=float) for name in (
        col.SPEED_REV_S, col.BELT_SPEED_M_S, col.CURRENT_A, col.RH, col.TEMPERATURE_K,
        col.PRESSURE_PA)}
    arrays["codes"] = np.asarray(machine_codes, dtype=np.intp)
    return arrays


def numpy_floor(inputs: Mapping[str, np.ndarray], constants: Mapping[str, np.ndarray],
                site_pressure_pa: float, site_temperature_k: float) -> dict[str, np.ndarray]:
    """The derived quantities of :func:`engine.analysis.derive` as bare numpy expressions.

    No validation, no frame, no flags text: the floor of what the evaluation can cost.

    Parameters
    ----------
    inputs : mapping
        :func:`floor_inputs`: machine codes, speed [rev/s], belt speed [m/s], current [A],
        RH [-], temperature [K], pressure [Pa]; NaN where empty.
    constants : mapping
        :func:`floor_constants`.
    site_pressure_pa, site_temperature_k : float
        Air used where a reading has none [Pa], [K].

    Returns
    -------
    dict of str to numpy.ndarray
        ``ceiling_a`` [A], ``efficiency`` [-], ``efficiency_u`` [-], ``charge_per_rev_c`` [C],
        ``surface_density_c_m2`` [C/m^2], ``relative_air_density`` [-],
        ``abs_humidity_kg_m3`` [kg/m^3], ``dew_point_k`` [K], ``speed_rev_s`` [rev/s] (filled
        for a belt read in m/s with a known length per revolution), and the boolean masks
        ``missing_value``, ``speed_kind``, ``above_ceiling``.

    Notes
    -----
    delta = p / 101.3 kPa * 293.15 K / T (IEC 60060-1); I_c = eps0 E_ref delta A_s N k with
    eps0 = 8.8541878128e-12 F/m (CODATA 2018); u(eta)^2 = (u(I) / I_c)^2
    + eta^2 (u_rel(A)^2 + u_rel(f)^2 + u_rel(E)^2) (JCGM 100:2008, 5.1); e = RH * 610.94 Pa
    * exp(17.625 t / (t + 243.04)), t_d = 243.04 g / (17.625 - g) with
    g = ln(RH) + 17.625 t / (t + 243.04) (Alduchov and Eskridge, 1996); rho_v = e / (461.5 T).
    A zero speed or ceiling gives inf here where derive gives NaN.
    """
    codes = inputs["codes"]
    speed = inputs["speed_rev_s"]
    belt_speed = inputs["belt_speed_m_s"]
    current = inputs["current_a"]
    rh = inputs["rh"]
    with np.errstate(divide="ignore", invalid="ignore"):
        rotation = np.isfinite(speed)
        linear = ~rotation & np.isfinite(belt_speed)
        speed_kind = ((rotation & ~constants["accepts_rotation"][codes])
                      | (linear & ~constants["accepts_linear"][codes]))
        filled_speed = np.where(linear, belt_speed / constants["length_per_rev_m"][codes], speed)
        swept = np.where(linear, constants["width_m"][codes] * belt_speed,
                         constants["area_per_rev_m2"][codes] * speed)
        swept[speed_kind] = np.nan
        pressure = np.where(np.isnan(inputs["pressure_pa"]), site_pressure_pa,
                            inputs["pressure_pa"])
        temperature = np.where(np.isnan(inputs["temperature_k"]), site_temperature_k,
                               inputs["temperature_k"])
        delta = pressure / 101_300.0 * (293.15 / temperature)
        carriers = constants["carriers"][codes]
        ceiling = (8.8541878128e-12 * constants["reference_field_v_m"][codes] * delta * swept
                   * carriers * constants["collection_factor"][codes])
        efficiency = current / ceiling
        current_u = (constants["current_relative"][codes] * np.abs(current)
                     + constants["current_absolute_a"][codes])
        area_u = np.where(linear, constants["area_relative_linear"][codes],
                          constants["area_relative_rotation"][codes])
        relative_sum = (area_u**2 + constants["speed_relative"][codes] ** 2
                        + constants["field_relative"][codes] ** 2)
        efficiency_u = np.sqrt((current_u / ceiling) ** 2 + efficiency**2 * relative_sum)
        celsius = temperature - 273.15
        magnus = 17.625 * celsius / (celsius + 243.04)
        vapour_pa = rh * 610.94 * np.exp(magnus)
        gamma = np.log(rh) + magnus
        return {
            "ceiling_a": ceiling,
            "efficiency": efficiency,
            "efficiency_u": efficiency_u,
            "charge_per_rev_c": current / filled_speed,
            "surface_density_c_m2": current / (swept * carriers),
            "relative_air_density": delta,
            "abs_humidity_kg_m3": vapour_pa / (461.5 * temperature),
            "dew_point_k": 243.04 * gamma / (17.625 - gamma) + 273.15,
            "speed_rev_s": filled_speed,
            "missing_value": ~np.isfinite(current) | ~(rotation | linear),
            "speed_kind": speed_kind,
            "above_ceiling": efficiency > 1.0,
        }



def main(argv: Sequence[str] | None = None) -> int:
    """``python -m engine.floor MACHINES READINGS LOG OUT``: run :func:`evaluate_floor`."""
    machines, readings, environment, output = (Path(text) for text in
                                               (sys.argv[1:] if argv is None else argv))
    evaluate_floor(BenchFiles(machines, readings, environment), output)
    return 0


if __name__ == "__main__":
    sys.exit(main())
