"""Arrangements of disc machines: how many units of the one-disc ceiling a machine can deliver.

The trade counts the output of disc machines in **units**: one unit is the ceiling of one
disc's charged annulus, ``sigma_limit * A_annulus * f``. What a machine can deliver is a number
of units set by how its discs, sectors and collectors are arranged, not simply by how many discs
it has. The rules below are the trade's (common practice, no published source):

=====================================================================  =========================
arrangement                                                            units
=====================================================================  =========================
one disc turning past a fixed inductor plate (``single-disc``)         1
twin-disc with sectors (``twin-disc``)                                 1 in total
the same with split collectors                                         2
sectorless twin-disc (``twin-disc-sectorless``)                        2
sectorless twin-disc with split collectors                             4
close stack of sectorless discs with split collectors (``disc-stack``) 2 per outer disc and
                                                                       4 per inner disc: 4n - 4
=====================================================================  =========================

A twin-disc machine with sectors counts 1 unit, not 2: its two sides never have equal
capacitance, so one disc delivers and the other acts as a moving inductor. Where the trade gives
no rule (one disc with split collectors, a stack with fixed collectors, a stack with sectors)
the count is derived by the same reasoning (split collectors double the units, sectors halve
them) and the rule says "by analogy, no source"; the user may give the units instead.

Add an arrangement by giving it a name in :data:`ARRANGEMENTS`, a plain description in
:data:`ARRANGEMENT_LABELS` and a branch in :func:`unit_rule`, then a reference test naming where
its rule comes from.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from engine.errors import InputError

#: Arrangement names, as written in a machines file and on the command line.
ARRANGEMENTS: tuple[str, ...] = ("single-disc", "twin-disc", "twin-disc-sectorless",
                                 "disc-stack")
#: Collector kinds: fixed collectors, or split collectors whose two halves are angled toward the
#: nearest neutraliser.
COLLECTORS: tuple[str, ...] = ("fixed", "split")

#: Each arrangement in plain words, for pages and messages.
ARRANGEMENT_LABELS: dict[str, str] = {
    "single-disc": "one disc turning past a fixed inductor plate",
    "twin-disc": "twin-disc: two counter-rotating discs with metal sectors",
    "twin-disc-sectorless": "sectorless twin-disc: two counter-rotating discs without sectors",
    "disc-stack": "close-spaced stack of counter-rotating discs",
}
#: Each collector kind in plain words.
COLLECTOR_LABELS: dict[str, str] = {
    "fixed": "fixed collectors",
    "split": "split collectors (each collector's two halves angled toward the nearest "
             "neutraliser)",
}

#: Fewest discs of a stack: two discs are a twin-disc machine.
MIN_STACK_DISCS = 3
#: Most discs of a stack.
MAX_STACK_DISCS = 1000
#: Largest number of units a user may give.
MAX_UNITS = 10_000.0

TRADE_RULE = "common practice, no source"
BY_ANALOGY = "by analogy, no source"
GIVEN = "the user's own count"
COUNTED = "no arrangement given"


@dataclass(frozen=True)
class UnitRule:
    """How many units of the one-disc ceiling a machine can deliver, and why.

    Attributes
    ----------
    units : float
        Expected units [-]: the machine's ceiling is ``units`` times the ceiling of one
        carrier's charged area.
    rule : str
        The rule in words, e.g. ``"2 outer discs x 2 + 6 inner discs x 4 = 28 units"``.
    basis : str
        Where the rule comes from: :data:`TRADE_RULE`, :data:`BY_ANALOGY`, :data:`GIVEN` or
        :data:`COUNTED`.
    """

    units: float
    rule: str
    basis: str

    @property
    def text(self) -> str:
        """The rule with its basis, e.g. ``"twin-disc with sectors = 1 unit (common ...)"``."""
        return f"{self.rule} ({self.basis})"


def _plural(count: float, word: str) -> str:
    shown = f"{count:g}"
    return f"{shown} {word}" if shown == "1" else f"{shown} {word}s"


def _check_choice(value: str, allowed: tuple[str, ...], what: str) -> None:
    if value not in allowed:
        raise InputError(f"{what} '{value}' is not known; use one of {', '.join(allowed)}")


def stack_units(discs, collectors: str = "split", sectored: bool = False):
    """Units of a close-spaced stack of ``discs`` counter-rotating discs.

    Parameters
    ----------
    discs : int or array_like
        Number n of discs in the stack (at least 3).
    collectors : {"split", "fixed"}
        The collectors.
    sectored : bool
        Whether the discs carry metal sectors.

    Returns
    -------
    float or numpy.ndarray
        Units [-]: with split collectors and sectorless discs, 2 per outer disc and 4 per inner
        disc, ``2 * 2 + 4 * (n - 2) = 4 n - 4``. Fixed collectors halve it and so do sectors
        (by analogy with the twin-disc rules, no source).

    Notes
    -----
    The rule for a sectorless stack with split collectors is the trade's (common practice, no
    source): an inner disc is shielded by its neighbours on both sides and delivers on both,
    an outer disc on one.
    """
    outer, inner = _per_disc_units(collectors, sectored)
    return 2 * outer + inner * (discs - 2)


def _per_disc_units(collectors: str, sectored: bool) -> tuple[float, float]:
    outer, inner = 2.0, 4.0
    if collectors == "fixed":
        outer, inner = outer / 2, inner / 2
    if sectored:
        outer, inner = outer / 2, inner / 2
    return outer, inner


def unit_rule(arrangement: str, collectors: str = "fixed", discs: int | None = None,
              sectored: bool = False) -> UnitRule:
    """Expected units of a disc machine from its arrangement.

    Parameters
    ----------
    arrangement : str
        One of :data:`ARRANGEMENTS`.
    collectors : {"fixed", "split"}
        The collectors; default fixed.
    discs : int, optional
        Number of discs, for ``disc-stack`` only (at least :data:`MIN_STACK_DISCS`).
    sectored : bool
        Whether the discs of a ``disc-stack`` carry metal sectors (a sector fill below 1).

    Returns
    -------
    UnitRule
        The units, the rule in words and its basis.

    Raises
    ------
    InputError
        For an unknown arrangement or collector kind, or a stack without enough discs.

    Notes
    -----
    Trade rules (common practice, no source): single disc 1; twin-disc with sectors 1, with
    split collectors 2; sectorless twin-disc 2, with split collectors 4; sectorless stack with
    split collectors 2 per outer and 4 per inner disc. Derived by analogy (split collectors
    double, sectors halve): a single disc with split collectors 2; a stack with fixed
    collectors or with sectors.
    """
    _check_choice(arrangement, ARRANGEMENTS, "arrangement")
    _check_choice(collectors, COLLECTORS, "collectors")
    split = collectors == "split"
    if arrangement == "single-disc":
        if split:
            return UnitRule(2.0, "one disc with split collectors = 2 units, since split "
                            "collectors double the units of twin-discs", BY_ANALOGY)
        return UnitRule(1.0, "one disc past a fixed inductor plate = 1 unit", TRADE_RULE)
    if arrangement == "twin-disc":
        if split:
            return UnitRule(2.0, "twin-disc with sectors and split collectors = 2 units",
                            TRADE_RULE)
        return UnitRule(1.0, "twin-disc with sectors = 1 unit in total (one disc delivers, the "
                        "other acts as a moving inductor)", TRADE_RULE)
    if arrangement == "twin-disc-sectorless":
        if split:
            return UnitRule(4.0, "sectorless twin-disc with split collectors = 4 units",
                            TRADE_RULE)
        return UnitRule(2.0, "sectorless twin-disc = 2 units", TRADE_RULE)
    # disc-stack
    if discs is None or isinstance(discs, bool) or not isinstance(discs, int) or not (
            MIN_STACK_DISCS <= discs <= MAX_STACK_DISCS):
        raise InputError(f"a disc stack needs discs = a whole number from {MIN_STACK_DISCS} to "
                         f"{MAX_STACK_DISCS}, got {discs!r}; two discs are a twin-disc machine")
    outer, inner = _per_disc_units(collectors, sectored)
    units = float(stack_units(discs, collectors, sectored))
    rule = (f"2 outer discs x {outer:g} + {_plural(discs - 2, 'inner disc')} x {inner:g} = "
            f"{_plural(units, 'unit')}")
    if split and not sectored:
        return UnitRule(units, rule, TRADE_RULE)
    why = []
    if not split:
        why.append("fixed collectors give half of what split ones give")
    if sectored:
        why.append("sectors halve the units")
    return UnitRule(units, f"{rule}; by the twin-disc rules, {' and '.join(why)}", BY_ANALOGY)


def given_units(units: float, arrangement_rule: UnitRule | None = None) -> UnitRule:
    """The units a user gave, with the arrangement's own count beside it when there is one.

    Parameters
    ----------
    units : float
        Units given [-], above 0 and at most :data:`MAX_UNITS`.
    arrangement_rule : UnitRule, optional
        What the machine's arrangement alone would give.

    Returns
    -------
    UnitRule
    """
    if isinstance(units, bool) or not isinstance(units, (int, float)) or not (
            math.isfinite(units) and 0 < units <= MAX_UNITS):
        raise InputError(f"units must be a number above 0 and at most {MAX_UNITS:g}, "
                         f"got {units!r}")
    rule = f"{_plural(float(units), 'unit')} as given"
    if arrangement_rule is not None:
        rule += f"; the arrangement alone would give {_plural(arrangement_rule.units, 'unit')}"
    return UnitRule(float(units), rule, GIVEN)


def counted_units(carriers: int, collection_factor: float) -> UnitRule:
    """Units of a machine described by carriers N and charge loads per revolution k: N x k.

    Parameters
    ----------
    carriers : int
        Carriers that deliver charge, N.
    collection_factor : float
        Charge loads per revolution of each, k.

    Returns
    -------
    UnitRule
    """
    units = carriers * collection_factor
    return UnitRule(float(units), f"{_plural(carriers, 'carrier')} x {collection_factor:g} "
                    f"charge load{'s' if collection_factor != 1 else ''} per revolution = "
                    f"{_plural(units, 'unit')}", COUNTED)


def delivery_sentence(observed_units: float, units: float, basis: str = TRADE_RULE) -> str:
    """The trade's way of saying what a machine delivers, e.g. "delivers 5.6 of the 28 units its
    arrangement allows".

    Parameters
    ----------
    observed_units : float
        Units observed from readings [-] (fitted charge per revolution over one unit's).
    units : float
        Units expected [-].
    basis : str
        The basis of the expected units (a :class:`UnitRule`'s ``basis``).

    Returns
    -------
    str
        A sentence without a subject; "" when either number is missing.
    """
    if not (math.isfinite(observed_units) and math.isfinite(units)):
        return ""
    allows = {GIVEN: "given for it", COUNTED: "its carriers allow"}.get(
        basis, "its arrangement allows")
    return f"delivers {observed_units:.2g} of the {_plural(units, 'unit')} {allows}"


def disc_roles(arrangement: str, collectors: str = "fixed", discs: int | None = None,
               sectored: bool = False) -> list[tuple[str, float | None]]:
    """What each disc of an arrangement does, for drawings: a role and its units.

    Parameters
    ----------
    arrangement, collectors, discs, sectored
        As for :func:`unit_rule`.

    Returns
    -------
    list of (str, float or None)
        One entry per disc, left to right, with the units it is counted for; None where the
        trade counts the machine as a whole (a sectored twin-disc: one disc delivers, the
        other acts as a moving inductor). The units add up to :func:`unit_rule`'s where every
        entry has a number.
    """
    rule = unit_rule(arrangement, collectors, discs, sectored)
    if arrangement == "single-disc":
        return [("disc", rule.units)]
    if arrangement == "twin-disc":
        return [("delivers", None), ("moving inductor", None)]
    if arrangement == "twin-disc-sectorless":
        return [("disc", rule.units / 2), ("disc", rule.units / 2)]
    outer, inner = _per_disc_units(collectors, sectored)
    count = int(discs)  # checked by unit_rule
    return [("outer disc", outer)] + [("inner disc", inner)] * (count - 2) + [("outer disc",
                                                                                outer)]
