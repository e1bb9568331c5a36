"""Disc arrangements: the trade's units of the one-disc ceiling, in the model, the machines file
and the command line.

The unit rules are the trade's (common practice, no source); the stack rules for fixed
collectors and for sectored discs are derived by analogy (no source). The worked case of the
trade, used as a check value (common practice, no source): an annulus from 114.5 mm to 145 mm
radius at 3000 rpm with sigma 26.55 uC/m^2 gives one unit of about 33 uA, and the eight-disc
stack's 28 units about 924 uA.
"""

import json
import math

import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.constants import epsilon_0  # reference: scipy.constants (CODATA)

from engine.__main__ import main
from engine.arrangements import BY_ANALOGY, TRADE_RULE, delivery_sentence, stack_units, unit_rule
from engine.ceiling import ceiling_figures, machine_ceiling
from engine.errors import InputError
from engine.machines import dump_machines, machine_from_table, parse_machines_text
from tests.test_machines import EXAMPLE

# eps0 (scipy.constants) times 2.9986 MV/m gives the trade's 26.55 uC/m^2.
TRADE_FIELD = "2.9986 MV/m"  # sigma = eps0 * E = 26.55 uC/m^2, the worked case's density


@pytest.mark.parametrize(
    ("arrangement", "collectors", "discs", "units", "basis"),
    [
        # The trade's rules, common practice, no source:
        ("single-disc", "fixed", None, 1, TRADE_RULE),
        ("twin-disc", "fixed", None, 1, TRADE_RULE),
        ("twin-disc", "split", None, 2, TRADE_RULE),
        ("twin-disc-sectorless", "fixed", None, 2, TRADE_RULE),
        ("twin-disc-sectorless", "split", None, 4, TRADE_RULE),
        ("disc-stack", "split", 8, 28, TRADE_RULE),
        ("disc-stack", "split", 6, 20, TRADE_RULE),
        ("disc-stack", "split", 3, 8, TRADE_RULE),
        # By analogy, no source: fixed collectors give half of split ones.
        ("single-disc", "split", None, 2, BY_ANALOGY),
        ("disc-stack", "fixed", 8, 14, BY_ANALOGY),
    ],
)
def test_unit_rules_of_the_trade(arrangement, collectors, discs, units, basis):
    rule = unit_rule(arrangement, collectors, discs)
    assert rule.units == units
    assert rule.basis == basis


def test_stack_rule_in_words():
    rule = unit_rule("disc-stack", "split", 8)
    assert rule.rule == "2 outer discs x 2 + 6 inner discs x 4 = 28 units"
    assert rule.text.endswith("(common practice, no source)")
    sectored = unit_rule("disc-stack", "split", 8, sectored=True)  # by analogy, no source
    assert sectored.units == 14 and "by analogy" in sectored.text


@given(st.integers(min_value=3, max_value=1000))
def test_a_split_sectorless_stack_of_n_discs_has_4n_minus_4_units(discs):
    # Law: 2 outer discs x 2 + (n - 2) inner discs x 4 = 4n - 4 (common practice, no source).
    assert unit_rule("disc-stack", "split", discs).units == 4 * discs - 4
    assert stack_units(discs) == 4 * discs - 4


def _worked_case(**geometry):
    table = {"id": "stack-eight", "carrier": "disc", "arrangement": "disc-stack", "discs": 8,
             "collectors": "split", "breakdown_field": TRADE_FIELD, **geometry}
    return machine_from_table(table)


@pytest.mark.parametrize(
    ("geometry", "speed_rev_s"),
    [
        ({"outer_radius": "145 mm", "inner_radius": "114.5 mm"}, 50.0),
        ({"outer_diameter": "290 mm", "inner_diameter": "229 mm"}, 50.0),
        ({"outer_radius": f"{145 / 25.4!r} in", "inner_radius": f"{114.5 / 25.4!r} in"}, 50.0),
    ],
)
def test_worked_case_in_millimetres_inches_and_rev_per_second(geometry, speed_rev_s):
    machine = _worked_case(**geometry)
    figures = ceiling_figures(machine, speed_rev_s)
    assert figures["charge_density_limit_uC_m2"] == pytest.approx(26.55, rel=1e-3)
    # one unit about 33 uA, 28 units about 924 uA (the trade's worked case)
    assert figures["single_carrier_ceiling_uA"] == pytest.approx(33.0, rel=0.01)
    assert figures["units"] == 28
    assert figures["ceiling_current_uA"] == pytest.approx(924.0, rel=0.01)
    assert figures["ceiling_current_uA"] == pytest.approx(
        28 * figures["single_carrier_ceiling_uA"], rel=1e-12)
    # by hand: eps0 (scipy.constants) * E * pi (r_o^2 - r_i^2) * f
    one_unit = epsilon_0 * 2.9986e6 * math.pi * (0.145**2 - 0.1145**2) * 50.0
    assert figures["single_carrier_ceiling_uA"] == pytest.approx(one_unit * 1e6, rel=1e-6)


@given(st.floats(min_value=0.1, max_value=500.0), st.floats(min_value=0.1, max_value=100.0))
def test_the_ceiling_is_linear_in_the_units(units, speed):
    # Law: the ceiling is units x the one-carrier ceiling.
    base = {"id": "m", "carrier": "disc", "outer_diameter": "46 cm", "inner_diameter": "30 cm"}
    one = machine_from_table({**base, "units": 1.0})
    many = machine_from_table({**base, "units": units})
    assert float(machine_ceiling(many, speed).ceiling_current_a) == pytest.approx(
        units * float(machine_ceiling(one, speed).ceiling_current_a), rel=1e-12)


def test_a_machines_file_of_the_previous_version_loads_unchanged():
    old = parse_machines_text(EXAMPLE)
    twin = old.by_id()["gallery-twin"]
    assert twin.arrangement == "" and twin.units == 2  # carriers 2 x collection factor 1
    assert "no arrangement given" in twin.unit_rule.text
    again = parse_machines_text(dump_machines(old))
    assert again.machines == old.machines


def test_an_arrangement_round_trips_through_the_file():
    text = """
[[machine]]
id = "stack"
carrier = "disc"
outer_diameter = "29 cm"
inner_diameter = "22.9 cm"
arrangement = "disc-stack"
discs = 8
collectors = "split"
"""
    machine = parse_machines_text(text).machines[0]
    assert machine.units == 28
    again = parse_machines_text(dump_machines([machine])).machines[0]
    assert again == machine


BASE = 'id = "m"\ncarrier = "disc"\nouter_diameter = "46 cm"\ninner_diameter = "30 cm"\n'


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        ('discs = 4\n', "'discs' goes with arrangement = \"disc-stack\""),
        ('arrangement = "twin-disc"\ncarriers = 2\n', "give arrangement or carriers, not both"),
        ('arrangement = "twin-disc"\ncollection_factor = 1.0\n',
         "give arrangement or collection_factor"),
        ('arrangement = "disc-stack"\ndiscs = 2\n', "a pair is a twin-disc machine"),
        ('arrangement = "disc-stack"\n', "a disc-stack needs 'discs'"),
        ('arrangement = "twin-disc"\ndiscs = 4\n', "'discs' goes with"),
        ('arrangement = "sideways"\n', "arrangement 'sideways' is not known"),
        ('collectors = "split"\n', "collectors goes with an arrangement"),
        ('arrangement = "twin-disc"\ncollectors = "angled"\n', "collectors 'angled' is not known"),
        ('units = 3\ncarriers = 2\n', "give units or carriers, not both"),
        ('units = 0\n', "units must be a number above 0"),
        ('arrangement = "twin-disc-sectorless"\nsector_fill = 0.5\n', "has no sectors"),
    ],
)
def test_contradictions_name_the_machine_the_key_and_the_fix(extra, message):
    with pytest.raises(InputError) as caught:
        parse_machines_text("[[machine]]\n" + BASE + extra, "lab.toml")
    text = str(caught.value)
    assert text.startswith("lab.toml: machine 'm': ")
    assert message in text


def test_an_arrangement_on_a_belt_is_refused():
    with pytest.raises(InputError, match="'arrangement' is for disc machines"):
        machine_from_table({"id": "b", "carrier": "belt", "width": "5 cm",
                            "arrangement": "twin-disc"})


def test_a_disc_without_an_inner_edge_gets_the_one_line_fix():
    with pytest.raises(InputError, match='write inner_diameter = "0 cm" to mean a full disc'):
        machine_from_table({"id": "d", "carrier": "disc", "outer_diameter": "46 cm"})


def test_units_given_with_an_arrangement_say_both():
    machine = machine_from_table({"id": "s", "carrier": "disc", "outer_diameter": "30 cm",
                                  "inner_diameter": "20 cm", "arrangement": "disc-stack",
                                  "discs": 5, "collectors": "fixed", "units": 9})
    assert machine.units == 9
    assert "the arrangement alone would give 8 units" in machine.unit_rule.text


def test_delivery_is_said_the_trade_s_way():
    assert delivery_sentence(5.6, 28) == "delivers 5.6 of the 28 units its arrangement allows"
    assert delivery_sentence(float("nan"), 28) == ""


# --- command line ---------------------------------------------------------------------------

def _run(capsys, *argv):
    status = main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_the_worked_case_from_the_command_line(capsys):
    status, out, err = _run(capsys, "ceiling", "--carrier", "disc", "--outer-radius", "145 mm",
                            "--inner-radius", "114.5 mm", "--arrangement", "disc-stack",
                            "--discs", "8", "--collectors", "split", "--speed", "3000 rpm",
                            "--breakdown-field", TRADE_FIELD, "--json")
    assert status == 0, err
    figures = json.loads(out)
    assert figures["units"] == 28
    assert figures["units_rule"].startswith("2 outer discs x 2 + 6 inner discs x 4 = 28 units")
    assert figures["ceiling_current_uA"] == pytest.approx(924.0, rel=0.01)
    assert figures["single_carrier_ceiling_uA"] == pytest.approx(33.0, rel=0.01)
    for key in ("carrier", "carriers", "collection_factor", "area_per_rev_m2", "speed_rev_s",
                "swept_area_per_s_m2", "relative_air_density", "breakdown_field_MV_m",
                "charge_density_limit_uC_m2"):
        assert key in figures
    status, out, _ = _run(capsys, "ceiling", "--carrier", "disc", "--outer-radius", "145 mm",
                          "--inner-radius", "114.5 mm", "--arrangement", "disc-stack",
                          "--discs", "8", "--collectors", "split", "--speed", "3000 rpm")
    assert "28: 2 outer discs x 2 + 6 inner discs x 4 = 28 units" in out


def test_the_worked_case_from_a_machines_file(capsys, tmp_path):
    path = tmp_path / "stack.toml"
    path.write_text('[[machine]]\nid = "stack-eight"\ncarrier = "disc"\n'
                    'outer_radius = "145 mm"\ninner_radius = "114.5 mm"\n'
                    'arrangement = "disc-stack"\ndiscs = 8\ncollectors = "split"\n'
                    f'breakdown_field = "{TRADE_FIELD}"\n', encoding="utf-8")
    status, out, err = _run(capsys, "machines", str(path), "--speed", "3000 rpm", "--json")
    assert status == 0, err
    row = json.loads(out)[0]
    assert row["units"] == 28 and row["arrangement"] == "disc-stack" and row["discs"] == 8
    assert row["ceiling_current_uA"] == pytest.approx(924.0, rel=0.01)
    assert row["single_carrier_ceiling_uA"] == pytest.approx(33.0, rel=0.01)


@pytest.mark.parametrize(
    ("options", "message"),
    [
        (["--arrangement", "twin-disc", "--carriers", "2"], "give --arrangement or --carriers"),
        (["--discs", "4"], "'--discs' goes with --arrangement \"disc-stack\""),
        (["--arrangement", "disc-stack", "--discs", "2"], "a pair is a twin-disc machine"),
        (["--arrangement", "disc-stack"], "a disc-stack needs '--discs'"),
        (["--arrangement", "disc-stack", "--discs", "many"], "--discs must be a whole number"),
        (["--collectors", "split"], "--collectors goes with an --arrangement"),
        (["--units", "3", "--carriers", "2"], "give --units or --carriers"),
        (["--units", "0"], "--units must be above 0"),
        (["--arrangement", "sideways"], "invalid choice"),
    ],
)
def test_command_line_contradictions(capsys, options, message):
    status, out, err = _run(capsys, "ceiling", "--carrier", "disc", "--outer-diameter", "46 cm",
                            "--inner-diameter", "30 cm", "--speed", "300 rpm", *options)
    assert status == 2 and out == ""
    assert err.startswith("error:") and message in err, err


def test_an_arrangement_for_a_belt_on_the_command_line(capsys):
    status, _out, err = _run(capsys, "ceiling", "--carrier", "belt", "--width", "5 cm",
                             "--speed", "6 m/s", "--arrangement", "twin-disc")
    assert status == 2 and "'--arrangement' is for disc machines" in err


@pytest.mark.parametrize("command", [[], ["ceiling"], ["machines"], ["evaluate"], ["summary"]])
def test_help_works_for_every_command(capsys, command):
    with pytest.raises(SystemExit) as done:
        main([*command, "--help"])
    assert done.value.code == 0
    out = capsys.readouterr().out
    assert out.startswith("usage: python -m engine")
    if command == ["ceiling"]:
        assert "--arrangement" in out and "--units" in out and "55 %" in out
