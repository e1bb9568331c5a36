"""Write the invented demonstration scenario of Ceiling Lab into ``sample_data/``.

Run from the project root::

    python sample_data/make_demo.py

The scenario is invented: four machines in one town 240 m above sea level (a science centre's
twin-disc machine before and after restoration, a school's belt machine run by three student
groups, a builder's cylinder machine logged for a working day beside a humidity logger, and a
six-disc stack). Every reading is made from the model the tool itself uses: the ceiling current
of the reading (engine.ceiling.machine_ceiling with the reading's speed, pressure and
temperature) times an efficiency that falls a little with speed, mildly with humidity below
about 60 % RH and steeply above it (a logistic decline), plus meter noise. A few faulty rows are
planted on purpose (see :data:`PLANTED`) so that validation has something to show.

The output is deterministic: one seeded numpy generator, fixed formatting, "\\n" line ends.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

_PROJECT_ROOT = Path(__file__).resolve().parent.parent
if str(_PROJECT_ROOT) not in sys.path:  # run as a script from the project root
    sys.path.insert(0, str(_PROJECT_ROOT))

from engine.carriers import ROTATION  # noqa: E402
from engine.ceiling import machine_ceiling  # noqa: E402
from engine.machines import Machine, parse_machines_text  # noqa: E402

#: Seed of the one random generator; change it and every file changes.
SEED = 20260314
#: UTC offset of every time stamp (all sessions fall in the winter half of the year).
UTC_OFFSET = "+01:00"
#: The humidity logger's clock runs ahead of the meter's clock by this much [s].
LOGGER_CLOCK_AHEAD_S = 37

READINGS_HEADER = (
    "machine", "session", "time", "speed [rpm]", "current [uA]", "rh [%]",
    "temperature [degC]", "pressure [hPa]", "note",
)
ENVIRONMENT_HEADER = ("time", "rh [%]", "temperature [degC]", "pressure [hPa]")

MACHINES_FILE = "machines.toml"
TWIN_DISC_FILE = "readings_twin_disc.csv"
BELT_FILE = "readings_belt.csv"
CYLINDER_FILE = "readings_cylinder.csv"
ENVIRONMENT_FILE = "environment_cylinder.csv"
STACK_FILE = "readings_stack.csv"

MACHINES_TOML = """\
# Ceiling Lab demonstration machines: an invented scenario (see README.md beside this file).
# Sizes are what the owners measured; each tolerance is one standard uncertainty.

[site]
# All four machines are in one town, 240 m above sea level. A reading without a pressure
# takes the standard-atmosphere pressure at this altitude (about 984.7 hPa).
altitude = "240 m"

[[machine]]
id = "centre-twin-disc"
label = "Science centre twin-disc machine"
carrier = "disc"
# Two counter-rotating glass discs of 46 cm; the metal sectors reach from 26 cm to 44 cm
# diameter and cover about half of that annulus.
outer_diameter = "44 cm"
inner_diameter = "26 cm"
sector_fill = 0.5
# Sectored twin-disc with fixed collectors: 1 unit of the one-disc ceiling in total (one disc
# delivers, the other acts as a moving inductor).
arrangement = "twin-disc"
collectors = "fixed"
breakdown_field = "3.0 MV/m"
material = "glass discs, aluminium foil sectors"
notes = "Hand-cranked, belt drive 1:4. Restored in the centre's workshop: discs cleaned, \
sectors re-glued, brushes and combs renewed, Leyden jars re-lined."

[machine.tolerance]
outer_diameter = "1 mm"
inner_diameter = "1 mm"
sector_fill = 0.02
speed = "3 %"
current = "2 %"
breakdown_field = "10 %"

[[machine]]
id = "school-belt"
label = "School belt machine"
carrier = "belt"
# Speed is read with an optical tachometer on the lower roller.
width = "5 cm"
roller_diameter = "5 cm"
carriers = 1
collection_factor = 1.0
material = "rubber belt, acrylic upper roller, metal lower roller"
notes = "Motor driven with a speed control; 25 cm collecting sphere."

[machine.tolerance]
width = "0.5 mm"
roller_diameter = "0.2 mm"
speed = "1 %"
current = "2 %"
breakdown_field = "10 %"

[[machine]]
id = "workshop-cylinder"
label = "Builder's cylinder machine"
carrier = "cylinder"
diameter = "12 cm"
active_length = "30 cm"
carriers = 1
collection_factor = 1.0
material = "acrylic tube, cloth rubber"
notes = "Built in a builder's workshop; motor drive with three speed settings. \
A humidity logger stands beside it (environment_cylinder.csv)."

[machine.tolerance]
diameter = "0.5 mm"
active_length = "2 mm"
speed = "1 %"
current = "1.5 %"
breakdown_field = "10 %"

[[machine]]
id = "stack-six"
label = "Six-disc stack machine"
carrier = "disc"
# Six close-spaced counter-rotating sectorless discs of 34 cm with split collectors. The charged
# annulus, measured from the marks the brushes left on the discs, runs from 18 cm to 32 cm
# diameter. Two outer discs x 2 units + four inner discs x 4 units = 20 units.
outer_diameter = "32 cm"
inner_diameter = "18 cm"
arrangement = "disc-stack"
discs = 6
collectors = "split"
material = "polycarbonate discs, no sectors"
notes = "Six discs on two shafts, motor driven; kept in the science centre's store."

[machine.tolerance]
outer_diameter = "2 mm"
inner_diameter = "3 mm"
speed = "1 %"
current = "2 %"
breakdown_field = "10 %"
"""


@dataclass(frozen=True)
class OutputModel:
    """How a machine's efficiency (measured / ceiling current) depends on speed and humidity.

    efficiency = base * (1 - speed_slope * (f / reference_speed - 1))
                      * (1 - dry_slope * (RH - 45 %))
                      * (floor + (1 - floor) / (1 + exp((RH - rh_half) / rh_width)))

    Attributes
    ----------
    base : float
        Efficiency at the reference speed and 45 % RH, before the logistic term [-].
    reference_speed_rev_s : float
        Speed at which the speed term is 1 [rev/s].
    speed_slope : float
        Fractional fall of efficiency per unit of f / reference_speed [-].
    dry_slope_per_percent : float
        Mild linear fall per % RH [1/%].
    rh_half_percent : float
        RH at which the logistic term is half way down [%].
    rh_width_percent : float
        Width of the logistic decline [%].
    floor : float
        Fraction of the output left in very damp air [-].
    noise : float
        Relative standard deviation of the meter noise [-].
    """

    base: float
    reference_speed_rev_s: float
    speed_slope: float = 0.08
    dry_slope_per_percent: float = 0.004
    rh_half_percent: float = 67.0
    rh_width_percent: float = 4.0
    floor: float = 0.1
    noise: float = 0.02


def efficiency(model: OutputModel, rh_percent: np.ndarray, speed_rev_s: np.ndarray) -> np.ndarray:
    """Efficiency of a machine at a humidity and speed (see :class:`OutputModel`).

    Parameters
    ----------
    model : OutputModel
    rh_percent : array_like
        Relative humidity [%].
    speed_rev_s : array_like
        Speed [rev/s].

    Returns
    -------
    numpy.ndarray
        Efficiency [-].
    """
    rh_percent = np.asarray(rh_percent, dtype=float)
    speed_rev_s = np.asarray(speed_rev_s, dtype=float)
    speed_term = 1 - model.speed_slope * (speed_rev_s / model.reference_speed_rev_s - 1)
    mild_term = 1 - model.dry_slope_per_percent * (rh_percent - 45.0)
    logistic = model.floor + (1 - model.floor) / (
        1 + np.exp((rh_percent - model.rh_half_percent) / model.rh_width_percent)
    )
    return model.base * speed_term * mild_term * logistic


@dataclass(frozen=True)
class Session:
    """One session of manual or motor-driven readings at a series of speed steps.

    Attributes
    ----------
    name : str
        Session name as written in the file.
    start : str
        Local start time, ISO 8601 without offset.
    speeds_rpm : tuple of float
        Target speed of each step [rpm], in order.
    readings_per_step : int
    interval_s : float
        Time between readings within a step [s].
    pause_s : float
        Extra time between steps [s].
    speed_spread : float
        Relative standard deviation of the speed about the target (hand or motor) [-].
    rh_percent : tuple of float
        RH at the start and at the end of the session [%].
    temperature_c : tuple of float
        Temperature at the start and at the end [degC].
    pressure_hpa : tuple of float
        Pressure at the start and at the end [hPa].
    model : OutputModel
    """

    name: str
    start: str
    speeds_rpm: tuple[float, ...]
    readings_per_step: int
    interval_s: float
    pause_s: float
    speed_spread: float
    rh_percent: tuple[float, float]
    temperature_c: tuple[float, float]
    pressure_hpa: tuple[float, float]
    model: OutputModel


#: Faulty rows planted on purpose: file -> list of (data row, 1-based without header, what).
PLANTED: dict[str, list[tuple[int, str]]] = {
    TWIN_DISC_FILE: [
        (37, "empty current (note 'meter reading missed')"),
        (74, "row 73 written twice: the same time and the same values"),
        (188, "current 'OVL' (meter overload at 600 rpm)"),
    ],
    BELT_FILE: [
        (12, "current 'n/a'"),
        (93, "RH 104 % (hygrometer misread)"),
        (107, "speed written in rev/s in the rpm column: a unit mistake that puts the reading "
              "far above its ceiling (note 'tachometer mode button pressed')"),
        (203, "negative current (note 'meter leads swapped')"),
    ],
    CYLINDER_FILE: [
        (300, "empty current (note 'meter battery changed')"),
        (611, "row 610 written twice: the same time and the same values"),
        (902, "negative current (note 'spark to the meter lead')"),
    ],
    ENVIRONMENT_FILE: [
        (133, "empty temperature"),
        (470, "RH 103.8 % (condensation on the sensor)"),
    ],
    STACK_FILE: [
        (18, "machine id 'stack-sx', a typing slip: not in the machines file"),
        (66, "speed 0 rpm with a small current (note 'drive belt slipped off')"),
        (158, "current 'n/a'"),
    ],
}

#: Ordinary notes: file -> {data row: note}.
NOTES: dict[str, dict[int, str]] = {
    TWIN_DISC_FILE: {1: "first run after years in store", 61: "jar reconnected",
                     121: "sectors cleaned", 122: "brushes adjusted"},
    BELT_FILE: {1: "group A: belt wiped with a dry cloth", 81: "group B",
                161: "group C: rainy day, windows closed"},
    CYLINDER_FILE: {1: "logger started beside the machine", 433: "workshop door opened",
                    577: "lunch break over; rubber re-seated", 1009: "rain outside"},
    STACK_FILE: {1: "sectors cleaned", 101: "afternoon: visitors in the room",
                 141: "jar reconnected"},
}


def _format(values: np.ndarray, decimals: int) -> np.ndarray:
    text = np.char.mod(f"%.{decimals}f", np.asarray(values, dtype=float))
    return np.where(text == f"-{0:.{decimals}f}", f"{0:.{decimals}f}", text)


def _times_text(times: np.ndarray) -> np.ndarray:
    return np.char.add(np.datetime_as_string(times, unit="s"), UTC_OFFSET)


def _session_readings(rng: np.random.Generator, machine: Machine, session: Session
                      ) -> dict[str, np.ndarray]:
    """Readings of one session as arrays: times, speeds, air, currents (display units)."""
    steps = len(session.speeds_rpm)
    count = steps * session.readings_per_step
    step_index = np.repeat(np.arange(steps), session.readings_per_step)
    within = np.tile(np.arange(session.readings_per_step), steps)
    step_s = session.readings_per_step * session.interval_s + session.pause_s
    # Readings taken by hand: each a second or two early or late (intervals are 10 s or more).
    jitter_s = np.round(rng.uniform(-2.0, 2.0, count))
    jitter_s[0] = 0.0  # the first reading at the session's start
    offsets_s = step_index * step_s + within * session.interval_s + jitter_s
    times = np.datetime64(session.start, "s") + offsets_s.astype("timedelta64[s]")
    progress = offsets_s / offsets_s[-1]

    target_rpm = np.asarray(session.speeds_rpm, dtype=float)[step_index]
    speed_rpm = np.round(target_rpm * (1 + session.speed_spread * rng.standard_normal(count)), 1)
    rh = np.round(np.interp(progress, [0, 1], session.rh_percent)
                  + 0.4 * rng.standard_normal(count), 1)
    temperature_c = np.round(np.interp(progress, [0, 1], session.temperature_c)
                             + 0.1 * rng.standard_normal(count), 1)
    pressure_hpa = np.round(np.interp(progress, [0, 1], session.pressure_hpa)
                            + 0.1 * rng.standard_normal(count), 1)

    speed_rev_s = speed_rpm / 60.0
    ceiling_a = machine_ceiling(machine, speed_rev_s, ROTATION, pressure_hpa * 100.0,
                                temperature_c + 273.15).ceiling_current_a
    noise = 1 + session.model.noise * rng.standard_normal(count)
    current_ua = efficiency(session.model, rh, speed_rev_s) * ceiling_a * 1e6 * noise
    return {
        "session": np.full(count, session.name),
        "time": _times_text(times),
        "speed [rpm]": _format(speed_rpm, 1),
        "current [uA]": _format(current_ua, 3),
        "rh [%]": _format(rh, 1),
        "temperature [degC]": _format(temperature_c, 1),
        "pressure [hPa]": _format(pressure_hpa, 1),
    }


def _readings_frame(machine: Machine, parts: list[dict[str, np.ndarray]]) -> pd.DataFrame:
    frame = pd.DataFrame({column: np.concatenate([part[column] for part in parts])
                          for column in parts[0]}, dtype=object)
    frame.insert(0, "machine", machine.id)
    frame["note"] = ""
    return frame[list(READINGS_HEADER)]


def _set(frame: pd.DataFrame, row: int, column: str, value: str) -> None:
    frame.loc[row - 1, column] = value


def _add_notes(frame: pd.DataFrame, file_name: str) -> None:
    for row, note in NOTES.get(file_name, {}).items():
        _set(frame, row, "note", note)


def _twin_disc(rng: np.random.Generator, machine: Machine) -> pd.DataFrame:
    up = tuple(float(rpm) for rpm in range(60, 601, 60))
    sweep = up + up[::-1]
    before = Session("before restoration", "2025-11-08T10:00:00", sweep, 6, 10.0, 30.0, 0.03,
                     (48.0, 53.0), (18.6, 19.4), (982.4, 980.9),
                     OutputModel(base=0.21, reference_speed_rev_s=5.0, noise=0.03))
    after = Session("after restoration", "2026-03-14T10:00:00", sweep, 7, 10.0, 30.0, 0.02,
                    (44.0, 49.5), (20.8, 21.6), (987.9, 988.6),
                    OutputModel(base=0.38, reference_speed_rev_s=5.0, noise=0.015))
    frame = _readings_frame(machine, [_session_readings(rng, machine, before),
                                      _session_readings(rng, machine, after)])
    _add_notes(frame, TWIN_DISC_FILE)
    _set(frame, 37, "current [uA]", "")
    _set(frame, 37, "note", "meter reading missed")
    for column in ("time", "speed [rpm]", "current [uA]"):
        _set(frame, 74, column, frame.loc[72, column])
    _set(frame, 188, "current [uA]", "OVL")
    return frame


def _belt(rng: np.random.Generator, machine: Machine) -> pd.DataFrame:
    speeds = (600.0, 1200.0, 1800.0, 2400.0)
    model = OutputModel(base=0.27, reference_speed_rev_s=25.0, speed_slope=0.06)
    groups = [
        Session("group A", "2026-02-03T09:10:00", speeds, 20, 15.0, 45.0, 0.015,
                (37.0, 40.0), (20.5, 21.5), (991.2, 991.0), model),
        Session("group B", "2026-02-10T11:05:00", speeds, 20, 15.0, 45.0, 0.015,
                (53.0, 58.0), (21.0, 22.4), (979.5, 978.8), model),
        Session("group C", "2026-02-17T13:40:00", speeds, 20, 15.0, 45.0, 0.015,
                (70.0, 73.0), (19.2, 19.8), (972.3, 971.6), model),
    ]
    frame = _readings_frame(machine, [_session_readings(rng, machine, group)
                                      for group in groups])
    _add_notes(frame, BELT_FILE)
    _set(frame, 12, "current [uA]", "n/a")
    _set(frame, 93, "rh [%]", "104.0")
    speed_rpm = float(frame.loc[106, "speed [rpm]"])
    _set(frame, 107, "speed [rpm]", f"{speed_rpm / 60:.1f}")
    _set(frame, 107, "note", "tachometer mode button pressed")
    current = float(frame.loc[202, "current [uA]"])
    _set(frame, 203, "current [uA]", f"{-current:.3f}")
    _set(frame, 203, "note", "meter leads swapped")
    return frame


def _cylinder_environment(elapsed_s: np.ndarray, day_s: float, wander: np.ndarray
                          ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """True RH [%], temperature [degC] and pressure [hPa] in the workshop at meter time."""
    progress = np.clip(elapsed_s / day_s, 0.0, 1.0)
    rh = 35.0 + 45.0 * progress**1.4 + wander
    temperature_c = 17.4 + 3.2 * np.sin(np.pi * progress * 0.8)
    pressure_hpa = 986.3 - 7.5 * progress
    return rh, temperature_c, pressure_hpa


def _cylinder(rng: np.random.Generator, machine: Machine) -> tuple[pd.DataFrame, pd.DataFrame]:
    start = np.datetime64("2026-03-21T09:00:00", "s")
    day_s = 8 * 3600.0
    interval_s = 25.0
    elapsed_s = np.arange(0.0, day_s, interval_s)
    count = elapsed_s.size

    # A slow random wander of the humidity (a smoothed random walk), on a one-second grid
    # shared by the meter and the logger.
    grid_s = np.arange(-1200.0, day_s + 1200.0, 1.0)
    walk = np.cumsum(rng.standard_normal(grid_s.size)) * 0.02
    kernel = np.ones(600) / 600
    wander = np.convolve(walk - walk.mean(), kernel, mode="same")
    wander_at = np.interp(elapsed_s, grid_s, wander)
    rh, temperature_c, pressure_hpa = _cylinder_environment(elapsed_s, day_s, wander_at)

    setting_rpm = np.array([180.0, 240.0, 300.0])[(elapsed_s // 600).astype(int) % 3]
    speed_rpm = np.round(setting_rpm * (1 + 0.012 * rng.standard_normal(count)), 1)
    speed_rev_s = speed_rpm / 60.0
    ceiling_a = machine_ceiling(machine, speed_rev_s, ROTATION, pressure_hpa * 100.0,
                                temperature_c + 273.15).ceiling_current_a
    model = OutputModel(base=0.30, reference_speed_rev_s=4.0, rh_half_percent=66.0,
                        rh_width_percent=3.5, floor=0.08, noise=0.02)
    current_ua = (efficiency(model, rh, speed_rev_s) * ceiling_a * 1e6
                  * (1 + model.noise * rng.standard_normal(count)))
    empty = np.full(count, "", dtype=object)
    readings = pd.DataFrame({
        "machine": machine.id,
        "session": "workshop day",
        "time": _times_text(start + elapsed_s.astype("timedelta64[s]")),
        "speed [rpm]": _format(speed_rpm, 1),
        "current [uA]": _format(current_ua, 3),
        "rh [%]": empty,
        "temperature [degC]": empty,
        "pressure [hPa]": empty,
        "note": empty,
    }, dtype=object)
    _add_notes(readings, CYLINDER_FILE)
    _set(readings, 300, "current [uA]", "")
    _set(readings, 300, "note", "meter battery changed")
    for column in ("time", "speed [rpm]", "current [uA]"):
        _set(readings, 611, column, readings.loc[609, column])
    current = float(readings.loc[901, "current [uA]"])
    _set(readings, 902, "current [uA]", f"{-current:.3f}")
    _set(readings, 902, "note", "spark to the meter lead")

    # The logger writes once a minute on its own clock, from 08:55 to 17:05 logger time.
    logger_start = np.datetime64("2026-03-21T08:55:00", "s")
    logger_elapsed_s = np.arange(0.0, 8 * 3600.0 + 601.0, 60.0)
    logger_times = logger_start + logger_elapsed_s.astype("timedelta64[s]")
    meter_elapsed_s = ((logger_times - start).astype(float) - LOGGER_CLOCK_AHEAD_S)
    log_rh, log_temperature, log_pressure = _cylinder_environment(
        meter_elapsed_s, day_s, np.interp(meter_elapsed_s, grid_s, wander))
    rows = logger_times.size
    environment = pd.DataFrame({
        "time": _times_text(logger_times),
        "rh [%]": _format(np.minimum(log_rh + 0.3 * rng.standard_normal(rows), 99.9), 1),
        "temperature [degC]": _format(log_temperature + 0.1 * rng.standard_normal(rows), 1),
        "pressure [hPa]": _format(log_pressure + 0.1 * rng.standard_normal(rows), 1),
    }, dtype=object)
    _set(environment, 133, "temperature [degC]", "")
    _set(environment, 470, "rh [%]", "103.8")
    return readings, environment


def _stack(rng: np.random.Generator, machine: Machine) -> pd.DataFrame:
    up = (100.0, 200.0, 300.0, 400.0, 500.0)
    sweep = up + up[::-1]
    model = OutputModel(base=0.24, reference_speed_rev_s=5.0, rh_half_percent=68.0)
    morning = Session("open day morning", "2026-02-28T10:15:00", sweep, 10, 12.0, 40.0, 0.012,
                      (45.0, 49.0), (19.8, 20.6), (984.1, 983.6), model)
    afternoon = Session("open day afternoon", "2026-02-28T14:30:00", sweep, 10, 12.0, 40.0,
                        0.012, (55.0, 64.0), (21.9, 23.1), (982.2, 981.7), model)
    frame = _readings_frame(machine, [_session_readings(rng, machine, morning),
                                      _session_readings(rng, machine, afternoon)])
    _add_notes(frame, STACK_FILE)
    _set(frame, 18, "machine", "stack-sx")
    _set(frame, 66, "speed [rpm]", "0.0")
    _set(frame, 66, "current [uA]", "0.004")
    _set(frame, 66, "note", "drive belt slipped off")
    _set(frame, 158, "current [uA]", "n/a")
    return frame


def demo_frames() -> dict[str, pd.DataFrame]:
    """All CSV files of the scenario as frames of text cells, keyed by file name."""
    machines = parse_machines_text(MACHINES_TOML, MACHINES_FILE).by_id()
    rng = np.random.default_rng(SEED)
    frames = {
        TWIN_DISC_FILE: _twin_disc(rng, machines["centre-twin-disc"]),
        BELT_FILE: _belt(rng, machines["school-belt"]),
    }
    frames[CYLINDER_FILE], frames[ENVIRONMENT_FILE] = _cylinder(
        rng, machines["workshop-cylinder"])
    frames[STACK_FILE] = _stack(rng, machines["stack-six"])
    return frames


def write_demo(folder: str | Path) -> list[Path]:
    """Write the machines file and every readings and environment file into ``folder``.

    Parameters
    ----------
    folder : str or Path
        Target folder; created if missing. Existing files of the same names are replaced.

    Returns
    -------
    list of Path
        The files written, machines file first.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    machines_path = folder / MACHINES_FILE
    machines_path.write_bytes(MACHINES_TOML.encode("utf-8"))
    written = [machines_path]
    for name, frame in demo_frames().items():
        path = folder / name
        text = frame.to_csv(index=False, lineterminator="\n")
        path.write_bytes(text.encode("utf-8"))
        written.append(path)
    return written


def main() -> int:
    """Write the scenario next to this script and list the files."""
    for path in write_demo(Path(__file__).resolve().parent):
        rows = len(path.read_text(encoding="utf-8").splitlines()) - 1
        extra = f", {rows} data rows" if path.suffix == ".csv" else ""
        print(f"{path.name}: {path.stat().st_size} bytes{extra}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
