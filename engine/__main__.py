"""Command line of Ceiling Lab: ``python -m engine SUBCOMMAND ...``.

Subcommands
-----------
ceiling    one ceiling from options given as quantity strings
machines   the machines of a machines file, with their ceilings at a speed
evaluate   every reading of a file with its derived columns (CSV, XLSX or JSON)
summary    the findings per machine (or machine and session)
spark      the breakdown voltage of an air gap, or the gap for a voltage
lab        the lab's store (a file or a PostgreSQL server): show, add, export, restore, copy

Bad input exits with status 2 and one line on stderr starting with ``error:``.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import math
import os
import re
import sys
from collections.abc import Sequence
from pathlib import Path

from engine import analysis, columns, report, sparks
from engine.air import REFERENCE_TEMPERATURE_K, relative_air_density, site_pressure
from engine.arrangements import ARRANGEMENTS, COLLECTORS, delivery_sentence
from engine.carriers import CARRIER_KINDS, ROTATION
from engine.ceiling import ceiling_figures
from engine.errors import CeilingLabError, InputError
from engine.machines import load_machines, machine_from_table
from engine.readings import (
    ReadOptions,
    check_log_clock,
    merge_environment,
    read_environment,
    read_readings,
)
from engine.units import one_line, parse_quantity, parse_speed, split_quantity

EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 1

# Geometry options of `ceiling`: option name -> machines-file key.
_GEOMETRY_OPTIONS = {
    "outer_radius": "outer radius of the charged zone (disc), e.g. '23 cm'",
    "outer_diameter": "outer diameter of the charged zone (disc), e.g. '46 cm'",
    "inner_radius": "inner radius of the charged zone (disc)",
    "inner_diameter": "inner diameter of the charged zone (disc)",
    "sector_fill": "fraction of the annulus that carries charge (disc), e.g. 0.55 or '55 %%'",
    "width": "belt width, e.g. '5 cm'",
    "roller_diameter": "diameter of the roller the speed is read on (belt)",
    "loop_length": "belt loop length, when the speed counts belt circulations",
    "radius": "cylinder radius",
    "diameter": "cylinder diameter",
    "active_length": "charged length of the cylinder",
    "area_per_rev": "charged area per revolution (custom), e.g. '0.12 m^2'",
}


class _Parser(argparse.ArgumentParser):
    """An argument parser whose errors are one `error:` line and exit status 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise InputError(message)


def _positive_count(text: str, name: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise InputError(f"{name} must be a whole number, got '{text}'") from None
    if not 1 <= value <= 1000:
        raise InputError(f"{name} must be from 1 to 1000, got {value}")
    return value


def _positive_number(text: str, name: str) -> float:
    value = parse_quantity(text, "fraction", name)
    if not value > 0:
        raise InputError(f"{name} must be above 0, got '{text}'")
    return value


def _air_from_options(args: argparse.Namespace) -> tuple[float, float]:
    pressure = parse_quantity(args.pressure, "pressure", "--pressure") if args.pressure else None
    altitude = parse_quantity(args.altitude, "length", "--altitude") if args.altitude else None
    if pressure is not None and altitude is not None:
        raise InputError("give either --pressure or --altitude, not both")
    pressure_pa = site_pressure(pressure, altitude)
    temperature_k = (parse_quantity(args.temperature, "temperature", "--temperature")
                     if args.temperature else REFERENCE_TEMPERATURE_K)
    if not temperature_k > 0:
        raise InputError("--temperature must be above absolute zero")
    return pressure_pa, temperature_k


def _speed_from_option(text: str) -> tuple[float, str]:
    speed, kind = parse_speed(text, "--speed")
    if not speed >= 0:
        raise InputError(f"--speed must not be negative, got '{text}'")
    return speed, kind


def _format_summary(figures: dict[str, object], label: str) -> str:
    if figures["speed_rev_s"] is not None:
        speed = f"{figures['speed_rev_s']:.4g} rev/s ({figures['speed_rev_s'] * 60:.4g} rpm)"
    else:
        speed = f"{figures['linear_speed_m_s']:.4g} m/s belt speed"
    area = figures["area_per_rev_m2"]
    lines = [
        f"Ceiling of {label} at {speed}",
        "  charged area per revolution   "
        + (f"{area:.5g} m^2 (one carrier)" if area is not None else "n/a (linear belt speed)"),
        f"  swept area per second         {figures['swept_area_per_s_m2']:.5g} m^2/s "
        "(one carrier)",
        f"  air                           {figures['pressure_kPa']:.4g} kPa, "
        f"{figures['temperature_C']:.1f} degC, relative density "
        f"{figures['relative_air_density']:.3f}",
        f"  breakdown field               {figures['breakdown_field_MV_m']:.3g} MV/m, "
        f"charge density limit {figures['charge_density_limit_uC_m2']:.4g} uC/m^2",
        f"  one unit (one carrier)        {figures['single_carrier_ceiling_uA']:.4g} uA",
        f"  units                         {figures['units']:g}: {figures['units_rule']}",
        f"  ceiling current               {figures['ceiling_current_uA']:.4g} uA",
    ]
    return "\n".join(lines)


#: Machines-file keys that `ceiling` takes as options, besides the geometry.
_MACHINE_OPTIONS = ("carriers", "collection_factor", "arrangement", "collectors", "discs",
                    "units", "breakdown_field", "air_gap")


def _as_option_names(message: str) -> str:
    """A machines-file message in the command line's words: keys become --options."""
    message = message.replace("machine 'command-line': ", "")
    keys = sorted(list(_GEOMETRY_OPTIONS) + [key for key in _MACHINE_OPTIONS if key != "units"],
                  key=len, reverse=True)
    for key in keys:
        # ("the outer diameter (30 cm)" is plain words, not the cylinder's --diameter)
        message = re.sub(rf"(?<![\w-])(?<!outer )(?<!inner ){key}(?!\w)",
                         "--" + key.replace("_", "-"), message)
    # "units" is also a plain word: only where it stands for the key.
    message = re.sub(r"(?<![\w-])units(?= must| or | =)|(?<=give )units(?= or)", "--units",
                     message)
    message = re.sub(r"(--[\w-]+) = (\"?[\w.-]+\"?)", r"\1 \2", message)
    message = re.sub(r"is not a key of a (\w+) machine; its keys are", r"is not an option for a "
                     r"\1; its options are", message)
    return re.sub(r"is not a (\w+) key; \w+ keys are", r"is not an option for a \1; its "
                  r"options are", message)


def _whole_number(text: str, name: str) -> int:
    try:
        return int(text)
    except ValueError:
        raise InputError(f"{name} must be a whole number, got '{text}'") from None


def _command_ceiling(args: argparse.Namespace) -> int:
    table: dict[str, object] = {"id": "command-line", "carrier": args.carrier}
    table.update({key: getattr(args, key) for key in _GEOMETRY_OPTIONS
                  if getattr(args, key) is not None})
    if args.carriers is not None:
        table["carriers"] = _positive_count(args.carriers, "--carriers")
    if args.collection_factor is not None:
        table["collection_factor"] = _positive_number(args.collection_factor,
                                                      "--collection-factor")
    if args.units is not None:
        table["units"] = _positive_number(args.units, "--units")
    if args.discs is not None:
        table["discs"] = _whole_number(args.discs, "--discs")
    for key in ("arrangement", "collectors", "breakdown_field", "air_gap"):
        if getattr(args, key) is not None:
            table[key] = getattr(args, key)
    try:
        machine = machine_from_table(table)
    except InputError as error:
        # Name the options as typed on the command line, not the machines-file keys.
        raise InputError(_as_option_names(str(error))) from None
    speed, speed_kind = _speed_from_option(args.speed)
    pressure_pa, temperature_k = _air_from_options(args)
    figures = ceiling_figures(machine, speed, speed_kind, pressure_pa, temperature_k)
    if args.json:
        print(json.dumps(figures))
    else:
        print(_format_summary(figures, f"a {args.carrier} machine"))
        if machine.air_gap_m is not None:
            print(f"  (breakdown field of a {args.air_gap} air gap by the uniform-field "
                  "relation for air, not the flat 3 MV/m of centimetre gaps)")
    return 0


def _command_machines(args: argparse.Namespace) -> int:
    machine_file = load_machines(args.file)
    speed = _speed_from_option(args.speed) if args.speed else None
    rows = []
    for machine in machine_file.machines:
        row: dict[str, object] = {
            "id": machine.id,
            "label": machine.label,
            "carrier": machine.kind,
            "arrangement": machine.arrangement or None,
            "collectors": machine.collectors or None,
            "discs": machine.discs,
            "carriers": machine.carriers,
            "collection_factor": (machine.collection_factor if machine.counts_carriers
                                  else None),
            "units": machine.units,
            "units_rule": machine.unit_rule.text,
            "area_per_rev_m2": machine.carrier.area_per_rev_m2,
            "breakdown_field_MV_m": float(machine.breakdown_field_at(relative_air_density(
                machine_file.site.pressure_pa, machine_file.site.temperature_k))) / 1e6,
            "air_gap_mm": None if machine.air_gap_m is None else machine.air_gap_m * 1e3,
        }
        if speed is not None:
            if speed[1] not in machine.carrier.speed_kinds:
                wanted = "a linear speed (m/s)" if speed[1] == ROTATION else "a rotation rate"
                row.update(ceiling_current_uA=None,
                           note=f"this {machine.kind} carrier needs {wanted} for its ceiling")
            else:
                row.update(ceiling_figures(machine, speed[0], speed[1],
                                           machine_file.site.pressure_pa,
                                           machine_file.site.temperature_k))
        rows.append(row)
    if args.json:
        print(json.dumps(rows))
        return 0
    if not rows:
        print(f"{args.file}: no machines")
        return 0
    header = f"{'id':<24} {'carrier':<9} {'units':>6} {'area/rev [m^2]':>15}"
    if speed is not None:
        header += f" {'ceiling [uA]':>13}"
    print(header)
    for row, machine in zip(rows, machine_file.machines, strict=True):
        area = machine.carrier.area_per_rev_m2  # the machine's own, whatever the speed
        line = (f"{row['id']:<24} {row['carrier']:<9} {row['units']:>6g} "
                f"{(f'{area:.5g}' if area is not None else 'linear only'):>15}")
        if speed is not None:
            ceiling = row.get("ceiling_current_uA")
            line += f" {(f'{ceiling:.4g}' if ceiling is not None else '-'):>13}"
            if row.get("note"):
                line += f"  ({row['note']})"
        print(line)
    if speed is not None:
        site = machine_file.site
        print(f"at {args.speed}, {site.pressure_pa / 1e3:.4g} kPa, "
              f"{site.temperature_k - 273.15:.1f} degC")
    return 0


def _pairs(values: list[str] | None, option: str) -> dict[str, str]:
    pairs = {}
    for value in values or []:
        key, separator, text = value.partition("=")
        if not separator or not key.strip():
            raise InputError(f"{option} takes FIELD=VALUE, e.g. {option} speed=rpm; got '{value}'")
        pairs[key.strip()] = text.strip()
    return pairs


def _read_options(args: argparse.Namespace) -> ReadOptions:
    mapping = {header: field for field, header in _pairs(args.column, "--column").items()}
    return ReadOptions(
        separator=args.separator, decimal=args.decimal, encoding=args.encoding,
        mapping=mapping or None, units=_pairs(args.unit, "--unit") or None,
        machine=args.machine, session=args.session, day_first=args.day_first,
        sheet=_sheet_option(args.sheet),
    )


def _sheet_option(text: str | None) -> str | int | None:
    """A sheet name, or its number counted from 1 as a spreadsheet program shows them."""
    if text is None:
        return None
    if text.strip().isdigit() and int(text) >= 1:
        return int(text) - 1
    return text


def _print_notes(messages: list[str]) -> None:
    """The reader's decisions and notes, one ``note:`` line each on stderr (not stdout)."""
    for message in messages:
        print(f"note: {one_line(message)}", file=sys.stderr)


def _derived_from_files(args: argparse.Namespace):
    """Read the machines, the readings and the log, merge, derive: the frame and messages."""
    machine_file = load_machines(args.machines)
    result = read_readings(args.readings, _read_options(args))
    frame = result.frame
    messages = list(result.messages)
    if args.machine and result.mapping.get("machine"):
        keep = frame[columns.MACHINE] == args.machine
        if not keep.any():
            found = ", ".join(sorted(frame[columns.MACHINE].dropna().astype(str).unique())[:10])
            raise InputError(f"{args.readings}: no readings of machine '{args.machine}'; the "
                             f"file has readings of {found or 'no machine'}")
        messages.append(f"kept the {int(keep.sum())} readings of machine '{args.machine}'")
        frame = frame[keep]
    if args.environment:
        tolerance_s = parse_quantity(args.tolerance, "duration", "--tolerance")
        if not tolerance_s >= 0:
            raise InputError("--tolerance must not be negative")
        log = read_environment(args.environment, ReadOptions(day_first=args.day_first))
        messages.extend(log.messages)
        offset_s = 0.0
        if args.log_offset is not None:
            offset_s = parse_quantity(args.log_offset, "duration", "--log-offset")
            messages.append(f"{log.source}: its times moved by {offset_s / 3600:+g} h "
                            "(--log-offset) before matching")
        clock = check_log_clock(frame, log.frame, tolerance_s, log.source)
        if args.log_offset is None:
            messages.extend(clock.messages)
        frame = merge_environment(frame, log.frame, tolerance_s, offset_s)
    derived = analysis.derive(frame, machine_file.by_id(), machine_file.site)
    return machine_file, derived, messages


def _command_evaluate(args: argparse.Namespace) -> int:
    _machine_file, derived, messages = _derived_from_files(args)
    rows = len(derived)
    flagged = int((derived[columns.FLAGS] != "").sum())
    target = Path(args.output) if args.output else None
    suffix = target.suffix.lower() if target is not None else ""
    if target is not None and suffix not in {".csv", ".xlsx"}:
        raise InputError(f"--output must end in .csv or .xlsx, got '{target.name}'")
    # A CSV is written from the output columns straight away; only JSON and XLSX need the
    # output table as one frame (a million readings: a copy of every column saved).
    table = (report.output_frame(derived) if args.json or suffix == ".xlsx"
             else report.output_columns(derived))
    del derived
    if target is not None:
        try:
            if suffix == ".xlsx":
                target.write_bytes(report.to_xlsx_bytes(table))
            else:
                report.write_csv(table, target)
        except OSError as error:
            raise InputError(f"{target}: cannot be written ({error.strerror or error})") from None
        if not args.json:
            print(f"wrote {rows} readings ({flagged} flagged) to {target}")
    if args.json:
        print(table.to_json(orient="records", date_format="iso"))
    elif target is None:
        sys.stdout.flush()
        if hasattr(sys.stdout, "buffer"):
            report.write_csv(table, sys.stdout.buffer)
        else:  # a text-only stream (an embedding program's)
            sys.stdout.write(report.to_csv_bytes(table).decode("utf-8"))
    _print_notes(messages)
    return 0


def _json_ready(value: object) -> object:
    if isinstance(value, (tuple, list)):
        return [_json_ready(item) for item in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if hasattr(value, "item"):
        return _json_ready(value.item())
    return value


def _command_summary(args: argparse.Namespace) -> int:
    machine_file, derived, messages = _derived_from_files(args)
    # "45" means 45 %; "45 %" is read by the unit parser as the fraction 0.45.
    number, unit_text = split_quantity(args.reference_rh, "--reference-rh")
    reference_rh = (number if not unit_text.strip() else
                    parse_quantity(args.reference_rh, "fraction", "--reference-rh") * 100)
    if not 0 <= reference_rh <= 100:
        raise InputError("--reference-rh is a relative humidity in percent, 0 to 100")
    table = analysis.findings(derived, machine_file.by_id(), by_session=args.by_session,
                              reference_rh=reference_rh / 100)
    _print_notes(messages)
    records = [{key: _json_ready(value) for key, value in row.items()}
               for row in table.to_dict(orient="records")]
    _add_load_lines(records, analysis.load_line_findings(derived, by_session=args.by_session))
    if args.json:
        print(json.dumps(records))
        return 0
    if not records:
        print("no readings")
        return 0
    for record in records:
        print(_format_finding(record, reference_rh))
    return 0


#: Keys of the load line in every `summary` record (null where the readings carry no voltage).
LOAD_LINE_KEYS = ("short_circuit_current_uA", "short_circuit_current_ci_uA",
                  "leakage_resistance_GOhm", "leakage_resistance_ci_GOhm",
                  "open_circuit_voltage_kV", "open_circuit_voltage_ci_kV", "max_output_power_W",
                  "max_output_power_ci_W", "load_line_speed_rev_s", "load_line_curvature_p")


def _add_load_lines(records: list[dict], load_lines) -> None:
    """Put each group's load-line figures into its summary record; its notes into the notes."""
    by_group = {(row["machine"], row["session"]): row
                for row in load_lines.to_dict(orient="records")}
    for record in records:
        found = by_group.get((record["machine"], record.get("session")), {})
        for key in LOAD_LINE_KEYS:
            record[key] = _json_ready(found.get(key))
        note = found.get("load_line_notes")
        if note:
            record["notes"] = "; ".join(text for text in (record.get("notes"), note) if text)


def _number(value: object, pattern: str, unit: str = "", scale: float = 1.0) -> str:
    if value is None:
        return "n/a"
    return format(value * scale, pattern) + (f" {unit}" if unit else "")


def _format_finding(record: dict, reference_rh: float) -> str:
    title = record["machine"] + (f", session '{record['session']}'" if record.get("session")
                                 else "")
    interval = record.get("charge_per_rev_ci_nC")
    units_ci = record.get("observed_units_ci")
    rows = [
        ("readings used / flagged", f"{record['readings_used']} / {record['readings_flagged']}"),
        ("efficiency, median", _number(record.get("efficiency_median"), ".1f", "%", 100)),
        ("charge per revolution", _number(record.get("charge_per_rev_nC"), ".4g", "nC")
         + (f" (95 % CI {interval[0]:.4g} to {interval[1]:.4g})" if interval else "")),
        ("offset current", _number(record.get("offset_current_uA"), ".3g", "uA")
         + f", R^2 {_number(record.get('fit_r2'), '.3f')}"),
        ("units, expected", _number(record.get("units"), "g")
         + (f": {record['units_rule']}" if record.get("units_rule") else "")),
        ("units, observed", _number(record.get("observed_units"), ".3g")
         + (f" (95 % CI {units_ci[0]:.3g} to {units_ci[1]:.3g})" if units_ci else "")
         + (f": {delivered}" if (delivered := delivery_sentence(
             record.get("observed_units") or math.nan, record.get("units") or math.nan,
             record.get("units_basis") or "")) else "")),
        ("humidity slope", _number(record.get("humidity_slope_per_10pct"), "+.1f",
                                   "percentage points per +10 % RH", 100)),
        (f"efficiency at {reference_rh:g} % RH",
         _number(record.get("efficiency_at_reference_rh"), ".1f", "%", 100)
         + (f" (from the {record['humidity_model']})" if record.get("humidity_model") else "")),
    ]
    if record.get("short_circuit_current_uA") is not None:
        rows += [
            ("short-circuit current",
             _number(record.get("short_circuit_current_uA"), ".4g", "uA")
             + _interval_text(record, "short_circuit_current_ci_uA")),
            ("leakage resistance", _number(record.get("leakage_resistance_GOhm"), ".3g", "GOhm")
             + _interval_text(record, "leakage_resistance_ci_GOhm")),
            ("open-circuit voltage", _number(record.get("open_circuit_voltage_kV"), ".3g", "kV")
             + _interval_text(record, "open_circuit_voltage_ci_kV")),
            ("largest output power", _number(record.get("max_output_power_W"), ".3g", "W")
             + _interval_text(record, "max_output_power_ci_W")),
        ]
    if record.get("notes"):
        rows.append(("notes", record["notes"]))
    return "\n".join([title] + [f"  {name:<30} {value}" for name, value in rows])


def _command_spark(args: argparse.Namespace) -> int:
    if (args.gap is None) == (args.voltage is None):
        raise InputError("give either --gap (for its breakdown voltage) or --voltage (for the "
                         "gap that breaks down at it)")
    if args.electrodes == "spheres" and not args.sphere_diameter:
        raise InputError("--electrodes spheres needs --sphere-diameter, e.g. '5 cm'")
    if args.electrodes == "uniform" and args.sphere_diameter:
        raise InputError("--sphere-diameter is for --electrodes spheres; add it or leave the "
                         "diameter out")
    diameter = None
    if args.sphere_diameter:
        diameter = parse_quantity(args.sphere_diameter, "length", "--sphere-diameter")
        if not diameter > 0:
            raise InputError(f"--sphere-diameter must be above zero, got '{args.sphere_diameter}'")
    pressure_pa, temperature_k = _air_from_options(args)
    density = float(relative_air_density(pressure_pa, temperature_k))
    if args.voltage is not None:
        voltage = parse_quantity(args.voltage, "voltage", "--voltage")
        if not voltage > 0:
            raise InputError(f"--voltage must be above zero, got '{args.voltage}'")
        gap = sparks.gap_for_voltage(voltage, args.electrodes, diameter, density)
    else:
        gap = parse_quantity(args.gap, "length", "--gap")
        if not gap > 0:
            raise InputError(f"--gap must be a length above zero, got '{args.gap}'")
    result = sparks.spark_breakdown(gap, args.electrodes, diameter, density)
    figures = {
        "gap_mm": gap * 1e3,
        "electrodes": args.electrodes,
        "sphere_diameter_cm": None if diameter is None else diameter * 1e2,
        "breakdown_voltage_kV": float(result.breakdown_voltage_v) / 1e3,
        "breakdown_field_MV_m": float(result.mean_field_v_m) / 1e6,
        "relative_air_density": density,
        "pressure_kPa": pressure_pa / 1e3,
        "temperature_C": temperature_k - 273.15,
        "model": result.model,
        "valid_range": result.valid_range,
    }
    if args.json:
        print(json.dumps(figures))
        return 0
    asked = (f"Gap that breaks down at {args.voltage}" if args.voltage is not None
             else f"Breakdown of a {args.gap} gap")
    print("\n".join([
        f"{asked}, {args.electrodes}"
        + (f" of {args.sphere_diameter}" if diameter is not None else ""),
        f"  gap                   {figures['gap_mm']:.4g} mm",
        f"  breakdown voltage     {figures['breakdown_voltage_kV']:.3g} kV",
        f"  mean field in the gap {figures['breakdown_field_MV_m']:.3g} MV/m",
        f"  air                   {figures['pressure_kPa']:.4g} kPa, "
        f"{figures['temperature_C']:.1f} degC, relative density {density:.3f}",
        f"  model                 {result.model}",
        f"  valid for             {result.valid_range}",
    ]))
    return 0


def _interval_text(record: dict, key: str) -> str:
    interval = record.get(key)
    if not interval:
        return ""
    low, high = ("unbounded" if value is None else format(value, ".3g") for value in interval)
    return f" (95 % CI {low} to {high})"


def _add_reading_options(command: argparse.ArgumentParser) -> None:
    command.add_argument("machines", help="machines file (TOML)")
    command.add_argument("readings", help="readings file (CSV or XLSX)")
    command.add_argument("--environment", help="a separate humidity/temperature log")
    command.add_argument("--machine", help="machine id for a file with no machine column; "
                         "with one, keep only this machine's readings")
    command.add_argument("--session", help="session name for a file with no session column")
    command.add_argument("--tolerance", default="5 min",
                         help="how far in time a log entry may be from a reading (default 5 min)")
    command.add_argument("--separator", help="CSV separator (detected when not given)")
    command.add_argument("--decimal", choices=[".", ","], help="decimal mark (detected)")
    command.add_argument("--encoding", help="text encoding, e.g. utf-8 or latin-1 (detected)")
    dates = command.add_mutually_exclusive_group()
    dates.add_argument("--day-first", dest="day_first", action="store_true", default=None,
                       help="dates such as 03/04/2026 are day first")
    dates.add_argument("--month-first", dest="day_first", action="store_false",
                       help="dates such as 03/04/2026 are month first")
    command.add_argument("--column", action="append", metavar="FIELD=HEADER",
                         help="use the file's column HEADER for FIELD (repeatable)")
    command.add_argument("--unit", action="append", metavar="FIELD=UNIT",
                         help="unit of a column whose header has none, e.g. speed=rev/s")
    command.add_argument("--sheet", help="workbook sheet to read, by name or number from 1 "
                         "(found when not given)")
    command.add_argument("--log-offset", help="move the humidity log's times by this much "
                         "before matching, e.g. '+1 h' for a logger left on winter time")
    command.add_argument("--json", action="store_true", help="print JSON")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``python -m engine`` with all its subcommands."""
    parser = _Parser(prog="python -m engine",
                     description="Ceiling Lab: ceilings of electrostatic generators.")
    commands = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    ceiling = commands.add_parser("ceiling", help="one ceiling from geometry and speed")
    ceiling.add_argument("--carrier", required=True, choices=CARRIER_KINDS)
    for key, help_text in _GEOMETRY_OPTIONS.items():
        ceiling.add_argument("--" + key.replace("_", "-"), dest=key, help=help_text)
    ceiling.add_argument("--arrangement", choices=ARRANGEMENTS,
                         help="how a disc machine's discs are arranged; sets its units")
    ceiling.add_argument("--collectors", choices=COLLECTORS,
                         help="fixed (default) or split collectors, with --arrangement")
    ceiling.add_argument("--discs", help="number of discs of a disc-stack (at least 3)")
    ceiling.add_argument("--units", help="units of the one-carrier ceiling the machine "
                         "delivers, given directly")
    ceiling.add_argument("--carriers", help="number of carriers N that deliver charge "
                         "(belts, cylinders, custom; default 1)")
    ceiling.add_argument("--collection-factor",
                         help="charge loads per revolution per carrier k (default 1)")
    ceiling.add_argument("--speed", required=True,
                         help="rotation rate ('300 rpm', '5 rev/s') or belt speed ('6 m/s')")
    ceiling.add_argument("--pressure", help="air pressure, e.g. '97.2 kPa'")
    ceiling.add_argument("--temperature", help="air temperature, e.g. '20 degC' (default)")
    ceiling.add_argument("--altitude", help="site altitude, used when no pressure is given")
    ceiling.add_argument("--breakdown-field", help="breakdown field of air at the reference "
                         "atmosphere (default '3.0 MV/m')")
    ceiling.add_argument("--air-gap", help="distance from the carrier to the nearest conductor, "
                         "e.g. '2 mm': the breakdown field then follows the gap")
    ceiling.add_argument("--json", action="store_true", help="print one JSON object")
    ceiling.set_defaults(run=_command_ceiling)

    machines = commands.add_parser("machines", help="list the machines of a machines file")
    machines.add_argument("file", help="machines file (TOML)")
    machines.add_argument("--speed", help="speed for the ceilings, e.g. '300 rpm'")
    machines.add_argument("--json", action="store_true", help="print a JSON list")
    machines.set_defaults(run=_command_machines)

    evaluate = commands.add_parser("evaluate", help="every reading with its derived columns")
    _add_reading_options(evaluate)
    evaluate.add_argument("--output", help="write FILE.csv or FILE.xlsx instead of printing")
    evaluate.set_defaults(run=_command_evaluate)

    summary = commands.add_parser("summary", help="findings per machine")
    _add_reading_options(summary)
    summary.add_argument("--reference-rh", default="45",
                         help="relative humidity [%%] for the efficiency comparison (default 45)")
    summary.add_argument("--by-session", action="store_true", help="one finding per session")
    summary.set_defaults(run=_command_summary)

    spark = commands.add_parser("spark", help="breakdown voltage of an air gap (or the gap for "
                                "a voltage)")
    spark.add_argument("--gap", help="spark length, e.g. '1 cm' (not with --voltage)")
    spark.add_argument("--voltage", help="a voltage, e.g. '30 kV': prints the gap that breaks "
                       "down at it (the inverse)")
    spark.add_argument("--electrodes", choices=sparks.ELECTRODES, default="uniform",
                       help="'uniform' (plates, or balls much larger than the gap; default) or "
                       "'spheres' (two equal balls, one earthed)")
    spark.add_argument("--sphere-diameter", help="ball diameter for --electrodes spheres, "
                       "e.g. '5 cm'")
    spark.add_argument("--pressure", help="air pressure, e.g. '97.2 kPa' (default 101.3 kPa)")
    spark.add_argument("--altitude", help="site altitude, used when no pressure is given")
    spark.add_argument("--temperature", help="air temperature, e.g. '20 degC' (default)")
    spark.add_argument("--json", action="store_true", help="print one JSON object")
    spark.set_defaults(run=_command_spark)

    from engine.lab_command import add_lab_command  # the store only when it is used

    add_lab_command(commands)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status (0, or 2 for bad input)."""
    try:
        args = build_parser().parse_args(argv)
        return args.run(args)
    except CeilingLabError as error:
        print(f"error: {one_line(str(error))}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("error: interrupted", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:
        # The reader went away (``... | head``): end quietly, as command-line tools do.
        with contextlib.suppress(OSError):
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except Exception as error:  # noqa: BLE001 - the user sees one line, never a traceback
        print(f"error: internal problem ({type(error).__name__}: {error}); please report it",
              file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
