"""Carriers: the charged area that a disc, belt, cylinder or custom carrier sweeps.

Each carrier kind is a small frozen dataclass holding SI floats. It gives the charged area per
revolution of one carrier and, vectorised over arrays of speed, the charged area swept per
second. :func:`carrier_from_spec` builds one from user text ("46 cm") with messages that name
the field; the machines file and the command line both go through it.

Add a carrier kind by writing its dataclass (``kind``, ``area_per_rev_m2``,
``swept_area_per_s_m2``, ``area_relative_uncertainty``) and its entry in :data:`SPEC_KEYS`
and :func:`carrier_from_spec`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from engine.errors import InputError
from engine.units import Tolerance, one_line, parse_quantity

#: Rotation rate: the speed is revolutions per second of the carrier (or of the roller).
ROTATION = "rotation"
#: Linear speed: the belt's surface speed in m/s.
LINEAR = "linear"


def _positive(value: float, field: str, where: str) -> None:
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"{where}: {field} must be a positive size, got {value:g} (SI units)")


@dataclass(frozen=True)
class Disc:
    """A rotating disc whose charged zone is an annulus, possibly partly covered by sectors.

    Attributes
    ----------
    outer_radius_m : float
        Outer radius of the charged zone [m].
    inner_radius_m : float
        Inner radius of the charged zone [m]; 0 for a full disc.
    sector_fill : float
        Fraction of the annulus that carries charge, in (0, 1]; 1 for a sectorless disc.
    """

    outer_radius_m: float
    inner_radius_m: float = 0.0
    sector_fill: float = 1.0
    kind: ClassVar[str] = "disc"
    where: str = "disc"

    def __post_init__(self) -> None:
        _positive(self.outer_radius_m, "outer radius", self.where)
        if not (math.isfinite(self.inner_radius_m) and self.inner_radius_m >= 0):
            raise InputError(f"{self.where}: inner radius must be zero or positive")
        if self.inner_radius_m >= self.outer_radius_m:
            raise InputError(
                f"{self.where}: the outer radius ({self.outer_radius_m:g} m) must be larger than "
                f"the inner radius ({self.inner_radius_m:g} m); check that they are not swapped"
            )
        if not (0 < self.sector_fill <= 1):
            raise InputError(
                f"{self.where}: sector_fill must be above 0 and at most 1 (a fraction of the "
                f"annulus), got {self.sector_fill:g}"
            )

    @property
    def area_per_rev_m2(self) -> float:
        """Charged area per revolution [m^2]: pi * (r_out^2 - r_in^2) * fill."""
        return math.pi * (self.outer_radius_m**2 - self.inner_radius_m**2) * self.sector_fill

    @property
    def speed_kinds(self) -> tuple[str, ...]:
        """Speed kinds this carrier accepts."""
        return (ROTATION,)

    def swept_area_per_s_m2(self, speed: np.ndarray, speed_kind: str = ROTATION) -> np.ndarray:
        """Charged area swept per second [m^2/s] at ``speed`` [rev/s]."""
        _require_rotation(self, speed_kind)
        return self.area_per_rev_m2 * np.asarray(speed, dtype=float)

    def area_relative_uncertainty(
        self, tolerances: Mapping[str, Tolerance], speed_kind: str = ROTATION
    ) -> float:
        """Relative standard uncertainty of the area per revolution [-].

        Notes
        -----
        First-order propagation of A = pi * fill * (r_o^2 - r_i^2):
        u(A)^2 = (2 pi fill r_o u(r_o))^2 + (2 pi fill r_i u(r_i))^2 + (A u(fill)/fill)^2.
        A diameter tolerance gives a radius uncertainty of half its absolute value.
        """
        u_outer = _radius_uncertainty(tolerances, "outer", self.outer_radius_m)
        u_inner = _radius_uncertainty(tolerances, "inner", self.inner_radius_m)
        u_fill = _tolerance_of(tolerances, "sector_fill", self.sector_fill)
        annulus = self.outer_radius_m**2 - self.inner_radius_m**2
        u_annulus = math.hypot(2 * self.outer_radius_m * u_outer, 2 * self.inner_radius_m * u_inner)
        return math.hypot(u_annulus / annulus, u_fill / self.sector_fill)


@dataclass(frozen=True)
class Belt:
    """A belt of insulating material running over rollers.

    Attributes
    ----------
    width_m : float
        Charged width of the belt [m].
    roller_diameter_m : float or None
        Diameter of the roller on which the speed is read [m]; one roller revolution moves
        pi * d of belt past the collector.
    loop_length_m : float or None
        Length of the belt loop [m], when the speed is counted in belt circulations.

    Notes
    -----
    With neither roller diameter nor loop length the speed must be a linear belt speed [m/s].
    """

    width_m: float
    roller_diameter_m: float | None = None
    loop_length_m: float | None = None
    kind: ClassVar[str] = "belt"
    where: str = "belt"

    def __post_init__(self) -> None:
        _positive(self.width_m, "width", self.where)
        if self.roller_diameter_m is not None and self.loop_length_m is not None:
            raise InputError(
                f"{self.where}: give roller_diameter (speed read on a roller) or loop_length "
                "(speed in belt circulations), not both"
            )
        if self.roller_diameter_m is not None:
            _positive(self.roller_diameter_m, "roller diameter", self.where)
        if self.loop_length_m is not None:
            _positive(self.loop_length_m, "loop length", self.where)

    @property
    def length_per_rev_m(self) -> float | None:
        """Belt length that passes per counted revolution [m], or None for linear speed only."""
        if self.roller_diameter_m is not None:
            return math.pi * self.roller_diameter_m
        return self.loop_length_m

    @property
    def area_per_rev_m2(self) -> float | None:
        """Charged area per counted revolution [m^2]: width * (pi * d_roller or loop length)."""
        length = self.length_per_rev_m
        return None if length is None else self.width_m * length

    @property
    def speed_kinds(self) -> tuple[str, ...]:
        """Speed kinds this belt accepts: always linear, rotation when a length is known."""
        return (ROTATION, LINEAR) if self.length_per_rev_m is not None else (LINEAR,)

    def swept_area_per_s_m2(self, speed: np.ndarray, speed_kind: str = ROTATION) -> np.ndarray:
        """Charged area swept per second [m^2/s]: w * v, or area per rev times rev/s."""
        speed = np.asarray(speed, dtype=float)
        if speed_kind == LINEAR:
            return self.width_m * speed
        area = self.area_per_rev_m2
        if area is None:
            raise InputError(
                f"{self.where}: this belt has no roller_diameter or loop_length, so its speed "
                "must be a linear speed such as '6 m/s'"
            )
        return area * speed

    def area_relative_uncertainty(
        self, tolerances: Mapping[str, Tolerance], speed_kind: str = ROTATION
    ) -> float:
        """Relative standard uncertainty of the swept area per unit speed [-].

        Notes
        -----
        A = w * L (rotation) or A = w * v (linear, speed handled separately), so
        (u(A)/A)^2 = (u(w)/w)^2 + (u(L)/L)^2 for rotation and (u(w)/w)^2 for linear speed.
        """
        relative_width = _tolerance_of(tolerances, "width", self.width_m) / self.width_m
        if speed_kind == LINEAR:
            return relative_width
        if self.roller_diameter_m is not None:
            relative_length = (
                _tolerance_of(tolerances, "roller_diameter", self.roller_diameter_m)
                / self.roller_diameter_m
            )
        elif self.loop_length_m is not None:
            relative_length = (
                _tolerance_of(tolerances, "loop_length", self.loop_length_m) / self.loop_length_m
            )
        else:
            relative_length = 0.0
        return math.hypot(relative_width, relative_length)


@dataclass(frozen=True)
class Cylinder:
    """A rotating insulating cylinder charged over its lateral surface.

    Attributes
    ----------
    radius_m : float
        Radius of the cylinder [m].
    active_length_m : float
        Axial length of the charged part [m].
    """

    radius_m: float
    active_length_m: float
    kind: ClassVar[str] = "cylinder"
    where: str = "cylinder"

    def __post_init__(self) -> None:
        _positive(self.radius_m, "radius", self.where)
        _positive(self.active_length_m, "active length", self.where)

    @property
    def area_per_rev_m2(self) -> float:
        """Charged area per revolution [m^2]: the lateral surface 2 * pi * r * L."""
        return 2 * math.pi * self.radius_m * self.active_length_m

    @property
    def speed_kinds(self) -> tuple[str, ...]:
        """Speed kinds this carrier accepts."""
        return (ROTATION,)

    def swept_area_per_s_m2(self, speed: np.ndarray, speed_kind: str = ROTATION) -> np.ndarray:
        """Charged area swept per second [m^2/s] at ``speed`` [rev/s]."""
        _require_rotation(self, speed_kind)
        return self.area_per_rev_m2 * np.asarray(speed, dtype=float)

    def area_relative_uncertainty(
        self, tolerances: Mapping[str, Tolerance], speed_kind: str = ROTATION
    ) -> float:
        """Relative standard uncertainty of the area per revolution [-].

        Notes
        -----
        (u(A)/A)^2 = (u(r)/r)^2 + (u(L)/L)^2 for A = 2 pi r L.
        """
        u_radius = _radius_uncertainty(tolerances, "", self.radius_m)
        u_length = _tolerance_of(tolerances, "active_length", self.active_length_m)
        return math.hypot(u_radius / self.radius_m, u_length / self.active_length_m)


@dataclass(frozen=True)
class Custom:
    """A carrier of any shape described by its charged area per revolution.

    Attributes
    ----------
    area_m2 : float
        Charged area per revolution [m^2].
    """

    area_m2: float
    kind: ClassVar[str] = "custom"
    where: str = "custom carrier"

    def __post_init__(self) -> None:
        _positive(self.area_m2, "area per revolution", self.where)

    @property
    def area_per_rev_m2(self) -> float:
        """Charged area per revolution [m^2], as given."""
        return self.area_m2

    @property
    def speed_kinds(self) -> tuple[str, ...]:
        """Speed kinds this carrier accepts."""
        return (ROTATION,)

    def swept_area_per_s_m2(self, speed: np.ndarray, speed_kind: str = ROTATION) -> np.ndarray:
        """Charged area swept per second [m^2/s] at ``speed`` [rev/s]."""
        _require_rotation(self, speed_kind)
        return self.area_per_rev_m2 * np.asarray(speed, dtype=float)

    def area_relative_uncertainty(
        self, tolerances: Mapping[str, Tolerance], speed_kind: str = ROTATION
    ) -> float:
        """Relative standard uncertainty of the given area [-]."""
        area = self.area_per_rev_m2
        return _tolerance_of(tolerances, "area_per_rev", area) / area


Carrier = Disc | Belt | Cylinder | Custom

#: Keys that describe the geometry of each carrier kind, with the quantity kind of each.
SPEC_KEYS: dict[str, dict[str, str]] = {
    "disc": {
        "outer_radius": "length",
        "outer_diameter": "length",
        "inner_radius": "length",
        "inner_diameter": "length",
        "sector_fill": "fraction",
    },
    "belt": {"width": "length", "roller_diameter": "length", "loop_length": "length"},
    "cylinder": {"radius": "length", "diameter": "length", "active_length": "length"},
    "custom": {"area_per_rev": "area"},
}

CARRIER_KINDS: tuple[str, ...] = tuple(SPEC_KEYS)


def _require_rotation(carrier: Carrier, speed_kind: str) -> None:
    if speed_kind != ROTATION:
        raise InputError(
            f"{carrier.where}: a {carrier.kind} carrier's speed must be a rotation rate such as "
            "'300 rpm'; linear speeds (m/s) are for belts"
        )


def _tolerance_of(tolerances: Mapping[str, Tolerance], key: str, nominal: float) -> float:
    tolerance = tolerances.get(key)
    return 0.0 if tolerance is None else tolerance.absolute_for(nominal)


def _radius_uncertainty(tolerances: Mapping[str, Tolerance], prefix: str, radius: float) -> float:
    stem = f"{prefix}_" if prefix else ""
    u_radius = _tolerance_of(tolerances, f"{stem}radius", radius)
    u_diameter = _tolerance_of(tolerances, f"{stem}diameter", 2 * radius) / 2
    return math.hypot(u_radius, u_diameter)


def _one_of(spec: Mapping[str, object], radius_key: str, diameter_key: str, where: str,
            required: bool) -> float | None:
    has_radius, has_diameter = radius_key in spec, diameter_key in spec
    if has_radius and has_diameter:
        raise InputError(f"{where}: give {radius_key} or {diameter_key}, not both")
    if has_radius:
        return parse_quantity(spec[radius_key], "length", f"{where}: {radius_key}")
    if has_diameter:
        return parse_quantity(spec[diameter_key], "length", f"{where}: {diameter_key}") / 2
    if required:
        raise InputError(f"{where}: {radius_key} or {diameter_key} is missing, e.g. '23 cm'")
    return None


def carrier_from_spec(kind: str, spec: Mapping[str, object], where: str = "") -> Carrier:
    """Build a carrier from user text, validating every field.

    Parameters
    ----------
    kind : str
        One of :data:`CARRIER_KINDS`: ``disc``, ``belt``, ``cylinder``, ``custom``.
    spec : mapping of str to str or number
        Geometry keys of that kind (see :data:`SPEC_KEYS`) with quantity strings, e.g.
        ``{"outer_diameter": "46 cm", "inner_diameter": "30 cm", "sector_fill": 0.55}``.
    where : str
        What is being described, for messages (``"machine 'gallery-twin'"``).

    Returns
    -------
    Carrier
        A validated :class:`Disc`, :class:`Belt`, :class:`Cylinder` or :class:`Custom`.

    Raises
    ------
    InputError
        For an unknown kind, an unknown or missing key, or a bad value; the message names it.
    """
    where = where or f"{kind} carrier"
    if kind not in SPEC_KEYS:
        raise InputError(
            f"{where}: carrier '{kind}' is not known; use one of {', '.join(CARRIER_KINDS)}"
        )
    allowed = SPEC_KEYS[kind]
    unknown = sorted(set(spec) - set(allowed))
    if unknown:
        raise InputError(
            f"{where}: '{unknown[0]}' is not a {kind} key; {kind} keys are "
            f"{', '.join(allowed)}"
        )
    if kind == "disc":
        outer = _one_of(spec, "outer_radius", "outer_diameter", where, required=True)
        inner = _one_of(spec, "inner_radius", "inner_diameter", where, required=False)
        if inner is not None and outer is not None and 0 < outer <= inner:
            outer_key = "outer_radius" if "outer_radius" in spec else "outer_diameter"
            inner_key = "inner_radius" if "inner_radius" in spec else "inner_diameter"
            raise InputError(
                f"{where}: the {outer_key.replace('_', ' ')} ({one_line(str(spec[outer_key]))})"
                f" must be larger than the {inner_key.replace('_', ' ')} "
                f"({one_line(str(spec[inner_key]))}); check that they are not swapped")
        if inner is None:
            raise InputError(
                f"{where}: inner_diameter (or inner_radius) is missing: the charged zone of a "
                "disc never reaches the hub, so give its inner edge (where the sectors or the "
                "charged zone begin), e.g. inner_diameter = \"26 cm\"; write "
                "inner_diameter = \"0 cm\" to mean a full disc on purpose")
        fill = (
            parse_quantity(spec["sector_fill"], "fraction", f"{where}: sector_fill")
            if "sector_fill" in spec
            else 1.0
        )
        return Disc(outer, inner, fill, where=where)  # type: ignore[arg-type]
    if kind == "belt":
        if "width" not in spec:
            raise InputError(f"{where}: width is missing, e.g. '5 cm'")
        width = parse_quantity(spec["width"], "length", f"{where}: width")
        roller = (
            parse_quantity(spec["roller_diameter"], "length", f"{where}: roller_diameter")
            if "roller_diameter" in spec
            else None
        )
        loop = (
            parse_quantity(spec["loop_length"], "length", f"{where}: loop_length")
            if "loop_length" in spec
            else None
        )
        return Belt(width, roller, loop, where=where)
    if kind == "cylinder":
        radius = _one_of(spec, "radius", "diameter", where, required=True)
        if "active_length" not in spec:
            raise InputError(f"{where}: active_length is missing, e.g. '30 cm'")
        length = parse_quantity(spec["active_length"], "length", f"{where}: active_length")
        return Cylinder(radius, length, where=where)  # type: ignore[arg-type]
    if "area_per_rev" not in spec:
        raise InputError(f"{where}: area_per_rev is missing, e.g. '0.12 m^2'")
    return Custom(parse_quantity(spec["area_per_rev"], "area", f"{where}: area_per_rev"),
                  where=where)
