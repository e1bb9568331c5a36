"""Quantity strings at the edge: one pint registry, parsing, and conversion to SI floats.

Everything a user types ("46 cm", "300 rpm", "84.6 kPa", "20 degC") is parsed here, once, into
a plain float in SI units. Inner code never sees pint objects.

Rotation rates are revolutions per second inside the engine. pint counts a revolution as
2*pi radians and treats the radian as dimensionless, so ``Quantity(300, "rpm").to("Hz")`` gives
31.4 Hz, not 5 Hz. :func:`rotation_rate_factor` therefore converts explicitly: a rate whose unit
holds an angle (rpm, rev/s, rad/s, deg/s) is converted angle to revolutions; a rate with no
angle (Hz, 1/s, 1/min) counts revolutions directly.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import pint

from engine.errors import InputError

#: Longest quantity string accepted; longer input is refused before any parsing.
MAX_QUANTITY_LENGTH = 64

def _make_registry() -> pint.UnitRegistry:
    # pint can keep its parsed definitions in the user's cache folder (ten times quicker to
    # start); where that folder cannot be written, build the registry from scratch.
    try:
        return pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=":auto:")
    except Exception:  # noqa: BLE001 - any cache problem: fall back to the plain registry
        return pint.UnitRegistry(autoconvert_offset_to_baseunit=True)


ureg = _make_registry()
ureg.define("@alias turn = rev")


@dataclass(frozen=True)
class Kind:
    """A physical kind of quantity that a field expects.

    Attributes
    ----------
    description : str
        How a message names it ("a length").
    si_unit : str
        The SI unit that the engine stores.
    example : str
        An example for messages.
    """

    description: str
    si_unit: str
    example: str


KINDS: dict[str, Kind] = {
    "length": Kind("a length", "m", "46 cm"),
    "area": Kind("an area", "m**2", "0.12 m^2"),
    "pressure": Kind("a pressure", "Pa", "97.2 kPa"),
    "temperature": Kind("a temperature", "K", "20 degC"),
    "electric_field": Kind("an electric field", "V/m", "3 MV/m"),
    "current": Kind("a current", "A", "12 uA"),
    "voltage": Kind("a voltage", "V", "80 kV"),
    "capacitance": Kind("a capacitance", "F", "200 pF"),
    "linear_speed": Kind("a linear speed", "m/s", "6 m/s"),
    "duration": Kind("a duration", "s", "5 min"),
    "fraction": Kind("a plain number or a percentage", "", "2 %"),
    "rotation_rate": Kind("a rotation rate", "rev/s", "300 rpm"),
}

_NUMBER = re.compile(r"\s*([+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d{1,3})?)\s*(.*?)\s*$")
_UNIT_ALLOWED = re.compile(r"^[A-Za-z_µμΩ°%/*^ ().0-9-]*$")
# An exponent is a power sign followed by one small integer; anything else numeric in a unit
# (towers such as "**10**10") is refused before pint sees it.
_EXPONENT = re.compile(r"(\*\*|\^)\s*\(?\s*-?[1-4]\s*\)?")
_REPLACEMENTS = (
    ("°C", "degC"),
    ("℃", "degC"),
    ("°F", "degF"),
    ("℉", "degF"),
    ("°", "degree"),
    ("%", "percent"),
    ("Ω", "ohm"),
    ("μ", "u"),
    ("µ", "u"),
)


_CONTROL_ESCAPES = {code: f"\\x{code:02x}" for code in range(32)} | {
    9: "\\t", 10: "\\n", 13: "\\r"}


def one_line(text: object) -> str:
    """User text for a message: control characters written as escapes, so it stays one line.

    Parameters
    ----------
    text : object
        What the user wrote, e.g. a header or a quantity string.

    Returns
    -------
    str
        The text with tab, line feed, carriage return and other control characters written
        as ``\\t``, ``\\n``, ``\\r``, ``\\x07``.
    """
    return str(text).translate(_CONTROL_ESCAPES)


def _normalise_unit_text(unit_text: str) -> str:
    text = unit_text.strip()
    for old, new in _REPLACEMENTS:
        text = text.replace(old, new)
    return text


@lru_cache(maxsize=512)
def _parse_units(unit_text: str, field: str) -> pint.Unit:
    """Parse a unit expression, refusing anything that is not a plain unit expression."""
    if not _UNIT_ALLOWED.match(unit_text):
        raise InputError(f"{field}: '{unit_text}' is not a unit this tool knows")
    # "1/min" is a reciprocal, not a number: the leading 1 may stay.
    stripped = re.sub(r"(?<![\w.])1\s*/", "/", _EXPONENT.sub("", unit_text))
    if re.search(r"\d", stripped) or "**" in stripped or "^" in stripped:
        raise InputError(
            f"{field}: '{unit_text}' has a number or a power where a unit belongs; "
            "write a unit such as 'cm', 'm^2' or 'rpm'"
        )
    text = _normalise_unit_text(unit_text)
    # pint's expression parser fails on malformed text in many ways (a TokenError for "m)",
    # an AssertionError for "m/" or "()"): every failure here means "not a unit".
    try:
        return ureg.parse_units(text)
    except Exception:  # noqa: BLE001
        pass
    try:
        return ureg.parse_units(text, case_sensitive=False)
    except Exception:  # noqa: BLE001
        raise InputError(f"{field}: '{unit_text}' is not a unit this tool knows") from None


def is_unit(unit_text: str) -> bool:
    """Whether a text is a unit this tool knows, of any kind (``"mA"``, ``"rpm"``, ``"kg"``).

    Parameters
    ----------
    unit_text : str
        The text, e.g. the unit written after a number in a cell.

    Returns
    -------
    bool
        ``True`` for a unit expression the registry parses, ``False`` for other text.
    """
    try:
        _parse_units(unit_text.strip(), "unit")
    except InputError:
        return False
    return True


def _check_text(text: object, field: str) -> str:
    if not isinstance(text, str):
        raise InputError(f"{field}: expected a quantity with a unit, e.g. '46 cm', got {text!r}")
    if len(text) > MAX_QUANTITY_LENGTH:
        raise InputError(
            f"{field}: the value is {len(text)} characters long; "
            f"at most {MAX_QUANTITY_LENGTH} are accepted"
        )
    return text


def split_quantity(text: str, field: str) -> tuple[float, str]:
    """Split a quantity string into its number and its unit text.

    Parameters
    ----------
    text : str
        For example ``"46 cm"``, ``"21,5 degC"`` (a decimal comma is accepted) or ``"0.3"``.
    field : str
        Name of the field, for messages.

    Returns
    -------
    tuple of (float, str)
        The number and the unit text (empty when there is none).

    Raises
    ------
    InputError
        When the text is too long, has no leading number, or the number is not finite.
    """
    text = _check_text(text, field)
    match = _NUMBER.fullmatch(text)
    if not match:
        raise InputError(
            f"{field}: '{one_line(text)}' is not a quantity; write a number then a unit, "
            "e.g. '46 cm'"
        )
    number_text, unit_text = match.groups()
    number = float(number_text.replace(",", "."))
    if not math.isfinite(number):
        raise InputError(f"{field}: the number in '{text}' is too large")
    return number, unit_text


def _units_of_kind(unit_text: str, kind: str, field: str) -> pint.Unit:
    units = _parse_units(unit_text, field)
    wanted = KINDS[kind]
    if kind == "rotation_rate":
        ok = ureg.Quantity(1.0, units).dimensionality == ureg.Quantity(1.0, "1/s").dimensionality
    elif kind == "fraction":
        ok = ureg.Quantity(1.0, units).dimensionless
    else:
        ok = ureg.Quantity(1.0, units).dimensionality == ureg.Quantity(
            1.0, wanted.si_unit
        ).dimensionality
    if not ok or not _plain_factors(units, kind):
        raise InputError(
            f"{field} needs {wanted.description}, e.g. '{wanted.example}', got '{unit_text}'"
        )
    return units


def _plain_factors(units: pint.Unit, kind: str) -> bool:
    """Whether a unit holds no dimensionless factor that makes no sense for ``kind``.

    pint's radian, steradian, percent and count are dimensionless, so it takes ``rad*m`` for a
    length and ``%/s``, ``sr/s`` or ``rpm*rad`` for a rotation rate. Here a rotation rate may
    hold one angle to the first power (rpm, rev/s, rad/s, deg/s), a fraction may be a plain
    ratio (%, ppm), and nothing else holds either.
    """
    angle = 0
    for name, power in ureg.Quantity(1.0, units).unit_items():
        base = dict(ureg.Quantity(1.0, name).to_base_units().unit_items())
        angle_power = base.pop("radian", 0)
        if angle_power and (power != 1 or kind != "rotation_rate"):
            return False
        angle += angle_power * power
        ratio = "count" in base or (not base and not angle_power)
        if ratio and kind != "fraction":
            return False
    return angle <= 1


@lru_cache(maxsize=512)
def unit_conversion(unit_text: str, kind: str, field: str = "value") -> tuple[float, float]:
    """Scale and offset that take numbers in ``unit_text`` to the SI unit of ``kind``.

    ``si = number * scale + offset``; the offset is non-zero only for temperature scales such
    as degC and degF. Use it to convert whole columns of readings at once.

    Parameters
    ----------
    unit_text : str
        A unit expression, e.g. ``"rpm"``, ``"uA"``, ``"degF"``, ``"hPa"``. For ``kind`` equal
        to ``"fraction"`` an empty unit means a plain number.
    kind : str
        A key of :data:`KINDS`.
    field : str
        Name of the field, for messages.

    Returns
    -------
    tuple of (float, float)
        Scale and offset.

    Raises
    ------
    InputError
        When the unit is unknown or of the wrong kind.
    """
    if kind not in KINDS:
        raise ValueError(f"unknown kind {kind!r}")
    if unit_text.strip() == "":
        if kind == "fraction":
            return 1.0, 0.0
        wanted = KINDS[kind]
        raise InputError(
            f"{field} needs {wanted.description} with a unit, e.g. '{wanted.example}'"
        )
    units = _units_of_kind(unit_text, kind, field)
    if kind == "rotation_rate":
        return rotation_rate_factor(units), 0.0
    target = KINDS[kind].si_unit or "dimensionless"
    zero = ureg.Quantity(0.0, units).to(target).magnitude
    one = ureg.Quantity(1.0, units).to(target).magnitude
    return float(one - zero), float(zero)


def rotation_rate_factor(units: pint.Unit) -> float:
    """Factor that takes a rotation rate in ``units`` to revolutions per second.

    Parameters
    ----------
    units : pint.Unit
        A unit of dimension 1/time, with or without an angle (rpm, rev/s, rad/s, Hz, 1/min).

    Returns
    -------
    float
        Revolutions per second for one of ``units``.

    Notes
    -----
    pint's radian is dimensionless, so ``rpm`` and ``Hz`` are interconvertible in pint with a
    factor 2*pi in between. Here a unit holding an angle is converted angle-to-revolution, and
    a unit without one counts revolutions (1 Hz = 1 rev/s).
    """
    base = ureg.Quantity(1.0, units).to_base_units()
    if any(name == "radian" for name, _ in base.unit_items()):
        return float(ureg.Quantity(1.0, units).to("turn / second").magnitude)
    return float(ureg.Quantity(1.0, units).to("1 / second").magnitude)


def parse_quantity(text: object, kind: str, field: str) -> float:
    """Parse a quantity string into a float in the SI unit of ``kind``.

    Parameters
    ----------
    text : str
        The user's text, e.g. ``"46 cm"``, ``"18 in"``, ``"300 rpm"``, ``"84.6 kPa"``,
        ``"20 degC"``, ``"3 MV/m"``, ``"2 %"``. For ``kind="fraction"`` a plain number (str,
        int or float) is accepted too.
    kind : str
        A key of :data:`KINDS`: ``length`` [m], ``area`` [m^2], ``pressure`` [Pa],
        ``temperature`` [K], ``electric_field`` [V/m], ``current`` [A], ``voltage`` [V],
        ``linear_speed`` [m/s], ``duration`` [s], ``fraction`` [-], ``rotation_rate`` [rev/s].
    field : str
        Name of the field, used in messages ("outer radius").

    Returns
    -------
    float
        The value in SI units (revolutions per second for rotation rates).

    Raises
    ------
    InputError
        For text that is too long, has no number, has an unknown unit or a unit of another kind.

    Examples
    --------
    >>> parse_quantity("300 rpm", "rotation_rate", "speed")
    5.0
    >>> round(parse_quantity("18 in", "length", "outer diameter"), 4)
    0.4572
    """
    if kind == "fraction" and isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
        if not math.isfinite(value):
            raise InputError(f"{field}: {text!r} is not a finite number")
        return value
    number, unit_text = split_quantity(text, field)  # type: ignore[arg-type]
    try:
        scale, offset = unit_conversion(unit_text, kind, field)
    except InputError as error:
        # Show the whole value the user typed, not only its unit.
        message = str(error)
        tail = f"got '{unit_text}'"
        if message.endswith(tail):
            message = message[: -len(tail)] + f"got '{one_line(str(text).strip())}'"
        raise InputError(message) from None
    return _finite(number * scale + offset, text, field)


def _finite(value: float, text: object, field: str) -> float:
    """The value, or an InputError when the conversion to SI overflowed ("1e308 km")."""
    if not math.isfinite(value):
        raise InputError(f"{field}: the number in '{text}' is too large")
    return value


def parse_speed(text: object, field: str = "speed") -> tuple[float, str]:
    """Parse a speed that is either a rotation rate or a linear (belt) speed.

    Parameters
    ----------
    text : str
        ``"300 rpm"``, ``"5 rev/s"``, ``"5 Hz"`` (rotation) or ``"6 m/s"`` (linear).
    field : str
        Name of the field, for messages.

    Returns
    -------
    tuple of (float, str)
        The value and its kind: (rev/s, ``"rotation"``) or (m/s, ``"linear"``).
    """
    number, unit_text = split_quantity(text, field)  # type: ignore[arg-type]
    scale, speed_kind = speed_unit_conversion(unit_text, field)
    return _finite(number * scale, text, field), speed_kind


@lru_cache(maxsize=256)
def speed_unit_conversion(unit_text: str, field: str = "speed") -> tuple[float, str]:
    """Scale for a speed unit and whether it is a rotation rate or a linear speed.

    Parameters
    ----------
    unit_text : str
        ``"rpm"``, ``"rev/s"``, ``"Hz"``, ``"m/s"``, ``"ft/min"``...
    field : str
        Name of the field, for messages.

    Returns
    -------
    tuple of (float, str)
        Scale to rev/s with ``"rotation"``, or to m/s with ``"linear"``.
    """
    if unit_text.strip() == "":
        raise InputError(f"{field} needs a unit, e.g. '300 rpm' or '6 m/s'")
    units = _parse_units(unit_text, field)
    dims = ureg.Quantity(1.0, units).dimensionality
    if dims == ureg.Quantity(1.0, "1/s").dimensionality and _plain_factors(units,
                                                                          "rotation_rate"):
        return rotation_rate_factor(units), "rotation"
    if dims == ureg.Quantity(1.0, "m/s").dimensionality and _plain_factors(units,
                                                                          "linear_speed"):
        return float(ureg.Quantity(1.0, units).to("m/s").magnitude), "linear"
    raise InputError(
        f"{field} needs a rotation rate (e.g. '300 rpm') or a linear speed (e.g. '6 m/s'), "
        f"got '{unit_text}'"
    )


@dataclass(frozen=True)
class Tolerance:
    """A tolerance that is either relative (a fraction of the value) or absolute (SI units)."""

    value: float
    relative: bool

    def absolute_for(self, nominal: float) -> float:
        """Absolute tolerance for a nominal value [same unit as the nominal value]."""
        return abs(nominal) * self.value if self.relative else self.value


def parse_tolerance(text: object, kind: str, field: str) -> Tolerance:
    """Parse a tolerance: a percentage (relative) or a quantity of ``kind`` (absolute).

    Parameters
    ----------
    text : str
        ``"2 %"`` (relative) or ``"1 mm"`` (absolute, for a length).
    kind : str
        The kind of the toleranced value (see :data:`KINDS`).
    field : str
        Name of the field, for messages.

    Returns
    -------
    Tolerance
        A non-negative tolerance.
    """
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        raise InputError(f"{field}: give the tolerance with a unit, e.g. '2 %' or '1 mm'")
    number, unit_text = split_quantity(text, field)  # type: ignore[arg-type]
    if number < 0:
        raise InputError(f"{field}: a tolerance cannot be negative, got '{text}'")
    if unit_text.strip() in {"%", "percent"}:
        return Tolerance(number / 100.0, relative=True)
    if kind == "rotation_rate":
        scale, _speed_kind = speed_unit_conversion(unit_text, field)
        return Tolerance(_finite(number * scale, text, field), relative=False)
    scale, _offset = unit_conversion(unit_text, kind, field)
    # A temperature tolerance is a difference: the offset does not apply.
    return Tolerance(_finite(number * scale, text, field), relative=False)


def to_display(value_si: float, kind: str, unit: str) -> float:
    """Convert an SI float of ``kind`` into ``unit`` for display.

    Parameters
    ----------
    value_si : float
        Value in the SI unit of ``kind`` (rev/s for rotation rates).
    kind : str
        A key of :data:`KINDS`.
    unit : str
        The display unit, e.g. ``"cm"``, ``"rpm"``, ``"kPa"``, ``"degC"``.

    Returns
    -------
    float
        The value in ``unit``.
    """
    scale, offset = unit_conversion(unit, kind, "display unit")
    # An absurd flagged value may overflow in the display unit: it shows as infinite.
    with np.errstate(over="ignore", invalid="ignore"):
        return (value_si - offset) / scale
