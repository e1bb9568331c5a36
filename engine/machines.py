"""Machine descriptions and the machines file (TOML, a layout of our own).

A machines file holds an optional ``[site]`` table and one ``[[machine]]`` table per machine::

    [site]
    altitude = "350 m"            # or pressure = "97.2 kPa"; temperature = "20 degC"

    [[machine]]
    id = "gallery-twin"
    label = "Gallery twin-disc, restored"
    carrier = "disc"
    outer_diameter = "46 cm"
    inner_diameter = "30 cm"
    sector_fill = 0.55
    arrangement = "twin-disc"     # or carriers = 2 and collection_factor = 1.0 (N x k units)
    collectors = "fixed"
    breakdown_field = "3.0 MV/m"  # or air_gap = "2 mm": the field then follows the gap

    [machine.tolerance]
    outer_diameter = "1 mm"
    speed = "2 %"
    current = "3 %"

Tolerances are read as one standard uncertainty (1 sigma) of the value they belong to.

A disc machine names its ``arrangement`` (``single-disc``, ``twin-disc``,
``twin-disc-sectorless``, ``disc-stack`` with ``discs = N``) and its ``collectors`` (``fixed``
or ``split``), and gets the trade's units from :mod:`engine.arrangements`; or it gives
``units`` directly. Belt, cylinder and custom machines, and disc machines of earlier files with
neither, count ``carriers`` x ``collection_factor`` units.
"""

from __future__ import annotations

import json
import math
import re
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from engine.air import (
    REFERENCE_BREAKDOWN_FIELD_V_M,
    REFERENCE_TEMPERATURE_K,
    breakdown_field,
    gap_breakdown_field,
    site_pressure,
)
from engine.arrangements import (
    ARRANGEMENTS,
    COLLECTORS,
    UnitRule,
    counted_units,
    given_units,
    unit_rule,
)
from engine.carriers import CARRIER_KINDS, SPEC_KEYS, Carrier, carrier_from_spec
from engine.errors import InputError
from engine.units import (
    Tolerance,
    one_line,
    parse_quantity,
    parse_tolerance,
    speed_unit_conversion,
    split_quantity,
)

MACHINE_ID_PATTERN = re.compile(r"^[A-Za-z0-9_-]{1,64}$")
#: Largest machines file read [bytes].
MAX_MACHINES_FILE_BYTES = 2_000_000
#: Most machines in one file.
MAX_MACHINES = 1_000

_COMMON_KEYS = ("id", "label", "carrier", "carriers", "collection_factor", "breakdown_field",
                "material", "notes", "tolerance", "air_gap")
#: Keys that only a disc machine takes: how its discs and collectors are arranged.
_DISC_KEYS = ("arrangement", "collectors", "discs", "units")
_TOLERANCE_EXTRA_KINDS = {
    "speed": "rotation_rate",
    "current": "current",
    "breakdown_field": "electric_field",
}
_SITE_KEYS = ("altitude", "pressure", "temperature")
_MAX_TEXT = 500


@dataclass(frozen=True)
class Machine:
    """One electrostatic machine: its carrier geometry and how its carriers deliver charge.

    Attributes
    ----------
    id : str
        Short identifier: letters, digits, '-' and '_'.
    label : str
        Human-readable name.
    carrier : Carrier
        Geometry of one carrier (see :mod:`engine.carriers`).
    carriers : int
        Number N of carriers that deliver charge (belts, cylinders, custom carriers, and disc
        machines described without an arrangement); for an arrangement, the number of discs.
    collection_factor : float
        Charge loads k delivered per revolution per carrier [-]; default 1. Not used when the
        machine has an arrangement or gives its units.
    reference_field_v_m : float
        Breakdown field of air at the reference atmosphere for this machine [V/m].
    tolerances : mapping of str to Tolerance
        One standard uncertainty per key: geometry keys, ``speed``, ``current``,
        ``breakdown_field``.
    material : str
        Carrier material in generic words (acrylic, glass, polyester film), optional.
    notes : str
        Free text, optional.
    spec : mapping
        The geometry keys as the user wrote them ("46 cm"), kept for writing the file back.
    air_gap_m : float or None
        Distance from the carrier to the nearest conductor at the inductors or neutralisers
        [m]; when given, the breakdown field follows the uniform-field relation at that gap
        and the air density (:func:`engine.air.gap_breakdown_field`) instead of
        ``reference_field_v_m``.
    air_gap_text : str
        ``air_gap`` as the user wrote it.
    """

    id: str
    label: str
    carrier: Carrier
    carriers: int = 1
    collection_factor: float = 1.0
    reference_field_v_m: float = REFERENCE_BREAKDOWN_FIELD_V_M
    tolerances: Mapping[str, Tolerance] = field(default_factory=dict)
    material: str = ""
    notes: str = ""
    spec: Mapping[str, object] = field(default_factory=dict)
    tolerance_spec: Mapping[str, str] = field(default_factory=dict)
    breakdown_field_text: str = ""
    arrangement: str = ""
    collectors: str = ""
    discs: int | None = None
    units_given: float | None = None
    air_gap_m: float | None = None
    air_gap_text: str = ""

    def breakdown_field_at(self, relative_density):
        """Breakdown field at the carrier [V/m] at relative air densities (array_like)."""
        return breakdown_field(relative_density, self.reference_field_v_m, self.air_gap_m)

    @property
    def kind(self) -> str:
        """Carrier kind: disc, belt, cylinder or custom."""
        return self.carrier.kind

    @property
    def unit_rule(self) -> UnitRule:
        """How many units of one carrier's ceiling the machine can deliver, and the rule.

        From the arrangement (disc machines), the units given, or carriers x collection factor.
        """
        arranged = None
        if self.arrangement:
            sectored = getattr(self.carrier, "sector_fill", 1.0) < 1.0
            arranged = unit_rule(self.arrangement, self.collectors or "fixed", self.discs,
                                 sectored)
        if self.units_given is not None:
            return given_units(self.units_given, arranged)
        if arranged is not None:
            return arranged
        return counted_units(self.carriers, self.collection_factor)

    @property
    def units(self) -> float:
        """Expected units [-]: the ceiling is units x the ceiling of one carrier's area."""
        return self.unit_rule.units

    @property
    def counts_carriers(self) -> bool:
        """Whether the units come from carriers N x collection factor k (no arrangement, no
        units given)."""
        return not self.arrangement and self.units_given is None

    def to_table(self) -> dict[str, object]:
        """The machine as a TOML table (plain dict), in the file's own keys and units."""
        table: dict[str, object] = {"id": self.id, "label": self.label, "carrier": self.kind}
        table.update(self.spec)
        if self.arrangement:
            table["arrangement"] = self.arrangement
            table["collectors"] = self.collectors or "fixed"
            if self.discs is not None:
                table["discs"] = self.discs
        if self.units_given is not None:
            table["units"] = self.units_given
        if self.counts_carriers:
            table["carriers"] = self.carriers
            table["collection_factor"] = self.collection_factor
        if self.breakdown_field_text:
            table["breakdown_field"] = self.breakdown_field_text
        if self.air_gap_text:
            table["air_gap"] = self.air_gap_text
        if self.material:
            table["material"] = self.material
        if self.notes:
            table["notes"] = self.notes
        if self.tolerance_spec:
            table["tolerance"] = dict(self.tolerance_spec)
        return table


@dataclass(frozen=True)
class Site:
    """Where the machines run, when no readings give the air conditions.

    Attributes
    ----------
    pressure_pa : float
        Air pressure [Pa]: measured, from the altitude, or the reference 101.3 kPa.
    temperature_k : float
        Air temperature [K], default 293.15 K.
    spec : mapping
        The keys as the user wrote them.
    """

    pressure_pa: float = 101_300.0
    temperature_k: float = REFERENCE_TEMPERATURE_K
    spec: Mapping[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class MachineFile:
    """The content of a machines file: the site and the machines, in file order."""

    site: Site
    machines: tuple[Machine, ...]

    def by_id(self) -> dict[str, Machine]:
        """Machines keyed by id."""
        return {machine.id: machine for machine in self.machines}


def _text_field(table: Mapping[str, object], key: str, where: str) -> str:
    value = table.get(key, "")
    if not isinstance(value, str):
        raise InputError(f"{where}: {key} must be text in quotes")
    if len(value) > _MAX_TEXT:
        raise InputError(f"{where}: {key} is longer than {_MAX_TEXT} characters")
    return value


def machine_from_table(table: Mapping[str, object], where: str = "machine") -> Machine:
    """Build and validate one machine from a TOML table (or any mapping of the same keys).

    Parameters
    ----------
    table : mapping
        Keys ``id``, ``carrier``, the geometry keys of that carrier, and optionally
        ``label``, ``carriers``, ``collection_factor``, ``breakdown_field``, ``material``,
        ``notes`` and a ``tolerance`` table.
    where : str
        Where the table comes from, for messages (``"machines.toml, machine 2"``).

    Returns
    -------
    Machine

    Raises
    ------
    InputError
        Naming the machine id, the key and the fix.
    """
    if not isinstance(table, Mapping):
        raise InputError(f"{where}: a machine must be a table of keys")
    machine_id = table.get("id")
    if machine_id is None:
        raise InputError(f"{where}: the key 'id' is missing, e.g. id = \"gallery-twin\"")
    if not isinstance(machine_id, str) or not MACHINE_ID_PATTERN.match(machine_id):
        raise InputError(
            f"{where}: id {machine_id!r} must be 1 to 64 letters, digits, '-' or '_'"
        )
    where = f"machine '{machine_id}'"
    kind = table.get("carrier")
    if kind is not None and not isinstance(kind, str):
        raise InputError(f"{where}: carrier must be text in quotes, one of "
                         f"{', '.join(CARRIER_KINDS)}")
    if kind is None:
        raise InputError(f"{where}: the key 'carrier' is missing; use one of "
                         f"{', '.join(CARRIER_KINDS)}")
    if kind not in SPEC_KEYS:
        raise InputError(
            f"{where}: carrier {kind!r} is not known; use one of {', '.join(CARRIER_KINDS)}"
        )
    geometry_keys = SPEC_KEYS[kind]  # type: ignore[index]
    disc_keys = _DISC_KEYS if kind == "disc" else ()
    unknown = sorted(set(table) - set(_COMMON_KEYS) - set(geometry_keys) - set(disc_keys))
    if unknown:
        if unknown[0] in _DISC_KEYS:
            raise InputError(
                f"{where}: '{unknown[0]}' is for disc machines; a {kind} machine counts its "
                "carriers and collection_factor (its units are carriers x collection_factor)")
        raise InputError(
            f"{where}: '{one_line(unknown[0])}' is not a key of a {kind} machine; its keys are "
            f"{', '.join(list(_COMMON_KEYS) + list(geometry_keys) + list(disc_keys))}"
        )
    spec = {key: table[key] for key in geometry_keys if key in table}
    carrier = carrier_from_spec(kind, spec, where)  # type: ignore[arg-type]
    arrangement, collectors, discs, units_given = _disc_arrangement(table, carrier, where)

    carriers = table.get("carriers", 1)
    if isinstance(carriers, bool) or not isinstance(carriers, int) or not 1 <= carriers <= 1000:
        raise InputError(f"{where}: carriers must be a whole number from 1 to 1000, "
                         f"got {carriers!r}")
    factor = table.get("collection_factor", 1.0)
    if isinstance(factor, bool) or not isinstance(factor, (int, float)) or not (
        math.isfinite(factor) and 0 < factor <= 100
    ):
        raise InputError(f"{where}: collection_factor must be a number above 0 (default 1), "
                         f"got {factor!r}")
    if arrangement:
        carriers = {"single-disc": 1, "disc-stack": discs}.get(arrangement, 2)
    field_text = table.get("breakdown_field", "")
    if not isinstance(field_text, str):
        raise InputError(f"{where}: breakdown_field needs a unit in quotes, e.g. \"3.0 MV/m\"")
    reference_field = REFERENCE_BREAKDOWN_FIELD_V_M
    if field_text:
        reference_field = parse_quantity(field_text, "electric_field", f"{where}: breakdown_field")
        if not reference_field > 0:
            raise InputError(f"{where}: breakdown_field must be positive")
    air_gap_text, air_gap = _air_gap(table, where)
    if air_gap is not None and field_text:
        raise InputError(f"{where}: give either breakdown_field or air_gap, not both; choose "
                         "one (with air_gap the breakdown field follows the gap)")

    tolerance_table = table.get("tolerance", {})
    if not isinstance(tolerance_table, Mapping):
        raise InputError(f"{where}: tolerance must be a table, [machine.tolerance]")
    tolerances: dict[str, Tolerance] = {}
    for key, text in tolerance_table.items():
        kind_of_key = geometry_keys.get(key) or _TOLERANCE_EXTRA_KINDS.get(key)
        if kind_of_key is None:
            raise InputError(
                f"{where}: tolerance '{one_line(key)}' is not known; tolerances can be given "
                f"for {', '.join(list(geometry_keys) + list(_TOLERANCE_EXTRA_KINDS))}"
            )
        if key in geometry_keys and key not in spec:
            raise InputError(f"{where}: tolerance '{one_line(key)}' is given but {key} is not")
        if kind_of_key == "fraction":
            if isinstance(text, (int, float)) and not isinstance(text, bool):
                if not math.isfinite(float(text)):
                    raise InputError(f"{where}: tolerance {key} must be a finite number")
                tolerances[key] = Tolerance(abs(float(text)), relative=False)
                continue
        tolerances[key] = parse_tolerance(text, kind_of_key, f"{where}: tolerance {key}")
        if key == "speed" and not tolerances[key].relative:
            _check_speed_tolerance_kind(carrier, str(text), where)
    return Machine(
        id=machine_id,
        label=_text_field(table, "label", where) or machine_id,
        carrier=carrier,
        carriers=carriers,
        collection_factor=float(factor),
        reference_field_v_m=reference_field,
        tolerances=tolerances,
        material=_text_field(table, "material", where),
        notes=_text_field(table, "notes", where),
        spec=spec,
        tolerance_spec={key: tolerance_table[key] for key in tolerance_table},
        breakdown_field_text=field_text if isinstance(field_text, str) else "",
        arrangement=arrangement,
        collectors=collectors,
        discs=discs,
        units_given=units_given,
        air_gap_m=air_gap,
        air_gap_text=air_gap_text,
    )


def _disc_arrangement(table: Mapping[str, object], carrier: Carrier, where: str
                      ) -> tuple[str, str, int | None, float | None]:
    """Read and check ``arrangement``, ``collectors``, ``discs`` and ``units`` of a disc machine.

    Returns the arrangement ("" when none), the collectors ("" when no arrangement), the
    number of discs of a stack (None otherwise) and the units given (None when not given).
    """
    arrangement = table.get("arrangement", "")
    if not isinstance(arrangement, str) or (arrangement and arrangement not in ARRANGEMENTS):
        raise InputError(f"{where}: arrangement {arrangement!r} is not known; use one of "
                         f"{', '.join(ARRANGEMENTS)}, or give units = N yourself")
    counted = [key for key in ("carriers", "collection_factor") if key in table]
    if arrangement and counted:
        raise InputError(
            f"{where}: give arrangement or {counted[0]}, not both: the arrangement sets the "
            f"units of a disc machine; remove {' and '.join(counted)}")
    collectors = table.get("collectors", "fixed" if arrangement else "")
    if "collectors" in table:
        if not arrangement:
            raise InputError(f"{where}: collectors goes with an arrangement; add arrangement = "
                             f"one of {', '.join(ARRANGEMENTS)}, or remove collectors")
        if collectors not in COLLECTORS:
            raise InputError(f"{where}: collectors {collectors!r} is not known; use "
                             f"{' or '.join(COLLECTORS)}")
    discs = table.get("discs")
    if discs is not None and arrangement != "disc-stack":
        raise InputError(f"{where}: 'discs' goes with arrangement = \"disc-stack\" only; remove "
                         "it, or set arrangement = \"disc-stack\"")
    if arrangement == "disc-stack":
        if discs is None:
            raise InputError(f"{where}: a disc-stack needs 'discs', how many it has, e.g. "
                             "discs = 8")
        if isinstance(discs, bool) or not isinstance(discs, int) or not 3 <= discs <= 1000:
            hint = ("; a pair is a twin-disc machine: use arrangement = \"twin-disc\" or "
                    "\"twin-disc-sectorless\"" if discs == 2 else "")
            raise InputError(f"{where}: discs must be a whole number from 3 to 1000 for a "
                             f"disc-stack, got {discs!r}{hint}")
    if arrangement == "twin-disc-sectorless" and getattr(carrier, "sector_fill", 1.0) < 1.0:
        raise InputError(f"{where}: a sectorless twin-disc has no sectors, but sector_fill is "
                         f"{carrier.sector_fill:g}; remove sector_fill, or use arrangement = "
                         "\"twin-disc\" for a twin-disc with sectors")
    units_given = None
    if "units" in table:
        if counted:
            raise InputError(f"{where}: give units or {counted[0]}, not both; the units count "
                             "what the whole machine delivers")
        try:
            units_given = given_units(table["units"]).units  # type: ignore[arg-type]
        except InputError as error:
            raise InputError(f"{where}: {error}") from None
    return arrangement, str(collectors) if arrangement else "", discs, units_given


def _air_gap(table: Mapping[str, object], where: str) -> tuple[str, float | None]:
    """The ``air_gap`` key: its text and its length [m], checked against the relation's range."""
    text = table.get("air_gap", "")
    if not isinstance(text, str):
        raise InputError(f"{where}: air_gap needs a unit in quotes, e.g. \"2 mm\"")
    if not text:
        return "", None
    gap = parse_quantity(text, "length", f"{where}: air_gap")
    if not gap > 0:
        raise InputError(f"{where}: air_gap must be a length above zero, e.g. \"2 mm\"")
    try:
        gap_breakdown_field(gap)
    except InputError as error:
        raise InputError(f"{where}: air_gap: {error}") from None
    return text, gap


def _check_speed_tolerance_kind(carrier: Carrier, text: str, where: str) -> None:
    """An absolute speed tolerance must be in the kind of speed the machine is read in."""
    _number, unit_text = split_quantity(text, f"{where}: tolerance speed")
    _scale, speed_kind = speed_unit_conversion(unit_text, f"{where}: tolerance speed")
    if speed_kind not in carrier.speed_kinds:
        wanted = "a rotation rate such as '3 rpm'" if speed_kind == "linear" else \
            "a belt speed such as '0.05 m/s'"
        raise InputError(f"{where}: tolerance speed '{text}' must be {wanted}, or a "
                         "percentage such as '2 %'")


def site_from_table(table: Mapping[str, object], where: str = "site") -> Site:
    """Build the site from a ``[site]`` table: altitude or pressure, and temperature.

    Parameters
    ----------
    table : mapping
        Optional keys ``altitude``, ``pressure`` (not both) and ``temperature``.
    where : str
        For messages.

    Returns
    -------
    Site
    """
    if not isinstance(table, Mapping):
        raise InputError(f"{where}: [site] must be a table")
    unknown = sorted(set(table) - set(_SITE_KEYS))
    if unknown:
        raise InputError(f"{where}: '{one_line(unknown[0])}' is not a site key; use "
                         f"{', '.join(_SITE_KEYS)}")
    altitude = (parse_quantity(table["altitude"], "length", f"{where}: altitude")
                if "altitude" in table else None)
    pressure = (parse_quantity(table["pressure"], "pressure", f"{where}: pressure")
                if "pressure" in table else None)
    try:
        pressure_pa = site_pressure(pressure, altitude)
    except InputError as error:
        raise InputError(f"{where}: {error}") from None
    temperature = (parse_quantity(table["temperature"], "temperature", f"{where}: temperature")
                   if "temperature" in table else REFERENCE_TEMPERATURE_K)
    # The ranges of the readings' own air checks: anything outside is a typing mistake here.
    if not 50e3 <= pressure_pa <= 110e3:
        raise InputError(f"{where}: a site pressure of {pressure_pa / 1e3:.4g} kPa is outside "
                         "50 to 110 kPa; check the unit (e.g. \"97.2 kPa\" or \"972 hPa\")")
    if not 233.15 <= temperature <= 333.15:
        raise InputError(f"{where}: a site temperature of {temperature - 273.15:.4g} degC is "
                         "outside -40 to 60 degC; check the unit (e.g. \"20 degC\")")
    return Site(pressure_pa, temperature, {key: str(table[key]) for key in table})


def parse_machines_text(text: str, source: str = "machines file") -> MachineFile:
    """Read a machines file from its text.

    Parameters
    ----------
    text : str
        TOML text in the layout of this module.
    source : str
        Name of the file, for messages.

    Returns
    -------
    MachineFile

    Raises
    ------
    InputError
        For invalid TOML, unknown or missing keys, bad values and duplicate ids, naming the
        file, the machine id and the key.
    """
    if len(text) > MAX_MACHINES_FILE_BYTES:
        raise InputError(f"{source}: the file is larger than {MAX_MACHINES_FILE_BYTES} bytes")
    try:
        document = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise InputError(f"{source}: not a valid TOML file ({error})") from None
    except RecursionError:
        raise InputError(f"{source}: the file nests tables too deeply") from None
    unknown = sorted(set(document) - {"site", "machine"})
    if unknown:
        raise InputError(f"{source}: '{one_line(unknown[0])}' is not a section of a machines "
                         "file; use [site] and [[machine]]")
    site = site_from_table(document.get("site", {}), f"{source}, [site]")
    tables = document.get("machine", [])
    if not isinstance(tables, list):
        raise InputError(f"{source}: machines are written as [[machine]] tables")
    if len(tables) > MAX_MACHINES:
        raise InputError(f"{source}: more than {MAX_MACHINES} machines")
    machines = []
    seen: set[str] = set()
    for number, table in enumerate(tables, 1):
        try:
            machine = machine_from_table(table, f"machine {number}")
        except InputError as error:
            raise InputError(f"{source}: {error}") from None
        if machine.id in seen:
            raise InputError(f"{source}: machine id '{machine.id}' is used twice; "
                             "give each machine its own id")
        seen.add(machine.id)
        machines.append(machine)
    return MachineFile(site, tuple(machines))


def load_machines(path: str | Path) -> MachineFile:
    """Read a machines file from disk (see :func:`parse_machines_text`)."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as error:
        raise InputError(f"{path}: cannot be read ({error.strerror or error})") from None
    if len(raw) > MAX_MACHINES_FILE_BYTES:
        raise InputError(f"{path}: the file is larger than {MAX_MACHINES_FILE_BYTES} bytes")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(f"{path}: a machines file must be UTF-8 text") from None
    return parse_machines_text(text, str(path))


def _toml_value(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    # JSON string escapes are valid TOML basic-string escapes.
    return json.dumps(str(value), ensure_ascii=False)


def dump_machines(machine_file: MachineFile | Sequence[Machine]) -> str:
    """Write machines (and the site) as TOML text that :func:`parse_machines_text` reads back.

    Parameters
    ----------
    machine_file : MachineFile or sequence of Machine

    Returns
    -------
    str
        TOML text.
    """
    if isinstance(machine_file, MachineFile):
        site_spec, machines = machine_file.site.spec, machine_file.machines
    else:
        site_spec, machines = {}, tuple(machine_file)
    lines = ["# Ceiling Lab machines file"]
    if site_spec:
        lines += ["", "[site]"] + [f"{key} = {_toml_value(value)}"
                                   for key, value in site_spec.items()]
    for machine in machines:
        table = machine.to_table()
        tolerance = table.pop("tolerance", None)
        lines += ["", "[[machine]]"]
        lines += [f"{key} = {_toml_value(value)}" for key, value in table.items()]
        if tolerance:
            lines += ["", "[machine.tolerance]"]
            lines += [f"{key} = {_toml_value(value)}" for key, value in tolerance.items()]
    return "\n".join(lines) + "\n"
