"""Tests of augment/sidefile.py: loading, unit conversion and every loader rule of SPEC."""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest

from augment.errors import SideFileError
from augment.netlist import parse_netlist_text
from augment.sidefile import BUILTIN_INSTRUMENTS, Helix, load_sidefile, load_sidefile_text

# A bench scenario of our own: a source, a series resistor into net 'top', a load, an
# inductor from 'top' to 'out' and an RC on 'out'.
NETLIST_TEXT = """* bench scenario
V1 in 0 PULSE(0 1 0 1n 1n 1u 2u)
R1 in top 10
R2 top 0 50
L1 top out 1u
C1 out 0 10p
R3 out 0 1k
Q1 out top 0 qmod
.model qmod npn
.tran 1n 1u
.end
"""
NETLIST = parse_netlist_text(NETLIST_TEXT, "bench.cir", ".")

BASE = """\
units = "mm"
wire_radius = 0.25

[terminals]
R1 = [[0, 0, 0], [8, 0, 0]]
R2 = [[30, 60, 0], [38, 60, 0]]
"""

WIRE = """
[[wire]]
net = "top"
path = ["R1.2", [30, 0, 0], "R2.1"]
"""

PROBE = """
[[probe]]
name = "across_R2"
plus = "R2.1"
minus = "R2.2"
instrument = "passive-10x"
plus_lead = ["R2.1", [30, 70, 5], [30, 200, 5]]
minus_lead = ["R2.2", [32, 70, 5], [32, 200, 5]]
"""


def load(text: str):
    return load_sidefile_text(textwrap.dedent(text), "ring.toml", NETLIST)


def line_of(text: str, fragment: str, occurrence: int = 1) -> int:
    """1-based line of the ``occurrence``-th line of ``text`` that starts with ``fragment``
    (or, when none starts with it, that contains it)."""
    lines = list(enumerate(textwrap.dedent(text).splitlines(), start=1))
    hits = ([n for n, line in lines if line.lstrip().startswith(fragment)]
            or [n for n, line in lines if fragment in line])
    return hits[occurrence - 1]


def fails(text: str) -> SideFileError:
    with pytest.raises(SideFileError) as caught:
        load(text)
    return caught.value


class TestLoadSidefileText:
    def test_scenario_loads_in_metres(self):
        """A correct side-file loads, with every length converted from millimetres to metres."""
        side = load(BASE + WIRE + PROBE)
        assert side.terminals["R1"] == ((0.0, 0.0, 0.0), (0.008, 0.0, 0.0))
        assert side.wire_radius == pytest.approx(0.25e-3, rel=1e-15)
        assert side.wires[0].net == "top" and side.wires[0].number == 1
        assert side.wires[0].path[1].position == pytest.approx((0.030, 0.0, 0.0), rel=1e-15)
        assert side.wires[0].path[0].terminal == ("R1", 2)
        assert side.probes[0].instrument == BUILTIN_INSTRUMENTS["passive-10x"]

    @pytest.mark.parametrize(
        ("units", "metres"),
        [
            # NIST SP 811 (2008), appendix B.8: 1 in = 2.54 cm exactly.
            ("in", 0.0254),
            # NIST SP 811, B.8: 1 mil = 0.001 in = 2.54e-5 m exactly.
            ("mil", 2.54e-5),
            # SI prefixes (NIST SP 811, table 5): centi, milli, micro.
            ("cm", 1e-2),
            ("mm", 1e-3),
            ("um", 1e-6),
            ("m", 1.0),
        ],
    )
    def test_units_match_exact_definitions(self, units, metres):
        """A coordinate of 1 in each unit is the unit's exact length in metres."""
        side = load(f'units = "{units}"\nwire_radius = 0.001\n[terminals]\nR1 = [[0, 0, 0], [1, 0, 0]]\n')
        assert side.terminals["R1"][1][0] == pytest.approx(metres, rel=1e-15)
        assert side.wire_radius == pytest.approx(0.001 * metres, rel=1e-15)

    def test_unknown_units_rejected(self):
        """A unit outside m, cm, mm, um, in, mil is an error at the units key."""
        error = fails('units = "ft"\nwire_radius = 1\n')
        assert str(error).startswith("ring.toml:1:1: units = 'ft' is not a length unit")

    def test_toml_syntax_error_has_tomllib_position(self):
        """A TOML syntax error is reported at the line and column tomllib gives."""
        error = fails('units = "mm"\nwire_radius = 0.25\n[terminals\n')
        assert error.where.line == 3
        assert "TOML syntax" in error.message

    def test_unknown_top_level_key_rejected(self):
        """A misspelt top-level key is an error at its own line."""
        text = BASE.replace("wire_radius", "wire_radiu") + "wire_radius = 0.25\n"
        error = fails(text)
        assert str(error).startswith(f"ring.toml:{line_of(text, 'wire_radiu =')}:1: unknown key 'wire_radiu'")

    def test_unknown_wire_key_rejected(self):
        """A misspelt key inside a [[wire]] table is an error at that key's line."""
        text = BASE + WIRE + "raduis = 0.3\n"
        error = fails(text)
        assert error.where.line == line_of(text, "raduis")
        assert "unknown key 'raduis' in wire 1" in error.message

    def test_unknown_element_in_terminals(self):
        """Placing an element the netlist does not have names it and its line."""
        text = BASE + "R9 = [[0, 0, 5], [8, 0, 5]]\n"
        error = fails(text)
        assert error.where.line == line_of(text, "R9 =")
        assert "there is no element 'R9' in the netlist bench.cir" in error.message

    def test_element_at_the_top_of_an_include_says_so(self, tmp_path):
        """Placing an element written at the top level of an included file says where it is and why it cannot be placed."""
        (tmp_path / "parts.inc").write_text("* parts\nRINC a 0 1k\n")
        netlist = parse_netlist_text(NETLIST_TEXT.replace(".end", ".include parts.inc\n.end"), "bench.cir", tmp_path)
        text = BASE + "RINC = [[0, 0, 5], [8, 0, 5]]\n"
        with pytest.raises(SideFileError) as caught:
            load_sidefile_text(textwrap.dedent(text), "ring.toml", netlist)
        assert f"element 'RINC' is at the top level of the included file {tmp_path / 'parts.inc'}:2:1" in caught.value.message
        assert "move it into the netlist or into a subcircuit" in caught.value.message

    def test_element_lookup_is_case_insensitive(self):
        """An element placed as 'r1' is the netlist's R1."""
        side = load(BASE.replace("R1 =", "r1 ="))
        assert "R1" in side.terminals

    def test_terminal_count_must_match(self):
        """An element placed with the wrong number of points is an error."""
        text = BASE + "Q1 = [[0, 10, 0], [2, 10, 0]]\n"
        error = fails(text)
        assert error.where.line == line_of(text, "Q1 =")
        assert "Q1 has 3 terminal(s) in the netlist; give 3 point(s)" in error.message

    def test_multi_terminal_element_places(self):
        """A three-terminal element takes three points."""
        side = load(BASE + "Q1 = [[0, 10, 0], [2, 10, 0], [4, 10, 0]]\n")
        assert len(side.terminals["Q1"]) == 3

    def test_unknown_net(self):
        """A wire on a net the netlist does not have is an error at its net key."""
        text = BASE + WIRE.replace('net = "top"', 'net = "tpo"')
        error = fails(text)
        assert error.where.line == line_of(text, 'net = "tpo"')
        assert "there is no net 'tpo' in the netlist bench.cir" in error.message

    def test_net_names_are_case_insensitive(self):
        """A wire on net 'TOP' belongs to the netlist node 'top' and keeps its spelling in its id."""
        side = load(BASE + WIRE.replace('net = "top"', 'net = "TOP"'))
        assert side.wires[0].net == "top"
        assert side.wires[0].id == "wire:TOP:1"

    def test_terminal_number_must_exist(self):
        """A reference to terminal 3 of a two-terminal resistor is an error."""
        text = BASE + WIRE.replace('"R2.1"]', '"R2.3"]')
        error = fails(text)
        assert error.where.line == line_of(text, "R2.3")
        assert "names terminal 3 of R2, which has 2 terminal(s)" in error.message

    def test_reference_to_unplaced_element(self):
        """A reference to a terminal of an element with no [terminals] entry is an error."""
        text = BASE + WIRE.replace('"R2.1"]', '"R3.1"]').replace('net = "top"', 'net = "out"')
        error = fails(text)
        assert "R3 is not placed; give its terminals under [terminals]" in error.message

    def test_wire_end_off_every_terminal(self):
        """A wire ending where nothing of its net is says so with the file's coordinates."""
        text = BASE + WIRE + '\n[[wire]]\nnet = "top"\npath = [[30, 30, 0], [40, 60, 0]]\n'
        error = fails(text)
        assert str(error) == (
            f"ring.toml:{line_of(text, 'path', 2)}:1: wire 2 of net 'top' ends at (40, 60, 0) mm, "
            "which is no terminal of net 'top' and no point of its wires (the nearest terminal of the net "
            "is R2.1 at (30, 60, 0) mm, 10 mm away; ends must be within 0.025 mm)")

    def test_wire_end_on_another_wire_mid_segment(self):
        """A wire may end on another wire of its net in the middle of a segment."""
        side = load(BASE + WIRE + '\n[[wire]]\nnet = "top"\npath = [[30, 30, 0], [0, 30, 0], "R1.2"]\n')
        assert len(side.wires) == 2

    def test_wire_end_tolerance_is_a_tenth_of_the_radius(self):
        """Landing within 0.1 radius of a wire is on it; 0.2 radius off is not."""
        # SPEC, loader rules: "within a tolerance of a tenth of the wire radius".
        inside = BASE + WIRE + '\n[[wire]]\nnet = "top"\npath = [[30.02, 30, 0], "R1.2"]\n'
        assert len(load(inside).wires) == 2
        outside = BASE + WIRE + '\n[[wire]]\nnet = "top"\npath = [[30.05, 30, 0], "R1.2"]\n'
        assert "wire 2 of net 'top' starts at (30.05, 30, 0) mm" in fails(outside).message

    def test_wire_to_terminal_of_another_net_is_a_short(self):
        """A wire of net 'top' running to R2.2 (net '0') is a short."""
        text = BASE + WIRE.replace('"R2.1"]', '"R2.2"]')
        error = fails(text)
        assert error.where.line == line_of(text, "R2.2\"]")
        assert "wire 1 of net 'top' runs to R2.2, which is on net '0': a short the netlist does not have" \
            in error.message

    def test_wire_through_terminal_of_another_net_is_a_short(self):
        """A wire of net 'top' passing over R1.1 (net 'in') is a short."""
        text = BASE + '\n[[wire]]\nnet = "top"\npath = [[-10, 0, 0], "R1.2"]\n'
        error = fails(text)
        assert "wire 1 of net 'top' touches terminal R1.1 of net 'in' at (0, 0, 0) mm" in error.message

    def test_terminals_of_two_nets_at_one_point_are_a_short(self):
        """Two terminals of different nets placed at the same point are a short."""
        text = BASE + "R3 = [[38, 60, 0], [50, 60, 0]]\n"
        error = fails(text)
        assert error.where.line == line_of(text, "R3 =")
        assert "terminals R2.2 (net '0') and R3.1 (net 'out') are both at (38, 60, 0) mm" in error.message

    def test_terminals_of_one_net_may_coincide(self):
        """Two terminals of the same net at one point are a joint, not an error."""
        side = load(BASE + "R3 = [[50, 60, 0], [38, 60, 0]]\n")
        assert side.terminals["R3"][1] == side.terminals["R2"][1]

    def test_zero_length_segment(self):
        """Two equal consecutive points of a path are a zero-length segment."""
        text = BASE + WIRE.replace("[30, 0, 0], ", "[30, 0, 0], [30, 0, 0], ")
        error = fails(text)
        assert "the path of wire 1 of net 'top' has a zero-length segment: points 2 and 3 are both at " \
               "(30, 0, 0) mm" in error.message

    @pytest.mark.parametrize("radius", ["0", "-0.1"])
    def test_wire_radius_must_be_positive(self, radius):
        """A wire radius of zero or less is an error at the radius key."""
        text = BASE + WIRE + f"radius = {radius}\n"
        error = fails(text)
        assert error.where.line == line_of(text, "radius = " + radius)
        assert "radius of wire 1 of net 'top' must be greater than 0" in error.message

    def test_default_radius_must_be_positive(self):
        """wire_radius = 0 is an error."""
        error = fails(BASE.replace("wire_radius = 0.25", "wire_radius = 0"))
        assert str(error).startswith("ring.toml:2:1: wire_radius must be greater than 0")

    def test_wire_radius_overrides_default(self):
        """A wire's own radius replaces the file's default."""
        side = load(BASE + WIRE + "radius = 0.3\n")
        assert side.wires[0].radius == pytest.approx(0.3e-3, rel=1e-15)

    COIL = """
[[coil]]
element = "L1"
center = [-20, 30, 20]
axis = [0, 0, 2]
radius = 6
length = 40
turns = 12
"""

    def test_coil_loads_with_unit_axis_and_helix_terminals(self):
        """A coil's axis is normalised and an unplaced coil's terminals are its helix ends."""
        side = load(BASE + self.COIL)
        coil = side.coils[0]
        assert coil.helix.axis == (0.0, 0.0, 1.0)
        assert coil.helix.wire_radius == side.wire_radius
        start, end = side.terminals["L1"]
        # Helix from center - axis*length/2 (SPEC, "Details"): z = 20 - 20 = 0 mm, then 40 mm.
        assert start[2] == pytest.approx(0.0, abs=1e-15) and end[2] == pytest.approx(0.040, rel=1e-12)

    @pytest.mark.parametrize(
        ("old", "new", "wording"),
        [
            ("turns = 12", "turns = 0.5", "coil 1 must have at least 1 turn, not 0.5"),
            ("radius = 6", "radius = 0", "radius of coil 1 must be greater than 0"),
            ("length = 40", "length = -1", "length of coil 1 must be greater than 0"),
            ('element = "L1"', 'element = "R3"', "coil 1 realises R3, which is not an inductor"),
            ("axis = [0, 0, 2]", "axis = [0, 0, 0]", "axis of coil 1 is the zero vector"),
        ],
    )
    def test_coil_rules(self, old, new, wording):
        """Turns >= 1, radius and length > 0, an inductor element and a real axis are required."""
        text = BASE + self.COIL.replace(old, new)
        error = fails(text)
        assert error.where.line == line_of(text, new)
        assert wording in error.message

    def test_probe_lead_must_start_at_its_point(self):
        """A plus lead that does not start at the plus point is an error at plus_lead."""
        text = BASE + PROBE.replace('plus_lead = ["R2.1"', 'plus_lead = [[30, 61, 0]')
        error = fails(text)
        assert error.where.line == line_of(text, "plus_lead")
        assert "the plus lead of probe 'across_R2' starts at (30, 61, 0) mm, not at its plus point " \
               "(30, 60, 0) mm" in error.message

    def test_probe_leads_must_meet(self):
        """Leads whose ends are far apart at the instrument are an error."""
        text = BASE + PROBE.replace("[32, 200, 5]]", "[60, 200, 5]]")
        error = fails(text)
        assert error.where.line == line_of(text, "minus_lead")
        assert "the leads of probe 'across_R2' end 30 mm apart; they must meet at the instrument" \
            in error.message

    def test_probe_leads_that_part_at_their_ends_do_not_meet(self):
        """Ends farther apart (3 mm) than the leads just before them (2 mm) and than ten lead
        radii (2.5 mm) are an error."""
        text = BASE + PROBE.replace("[32, 200, 5]]", "[33, 200, 5]]")
        error = fails(text)
        assert "the leads of probe 'across_R2' end 3 mm apart; they must meet at the instrument (within 2.5 mm)" \
            in error.message

    def test_probe_leads_may_end_a_few_spacings_apart(self):
        """Lead ends as far apart as the leads run (2 mm here) are accepted."""
        side = load(BASE + PROBE)
        assert side.probes[0].plus_lead[-1].position == pytest.approx((0.030, 0.200, 0.005), rel=1e-15)

    def test_probe_points_must_differ(self):
        """A probe whose plus and minus are one point is an error at its minus key."""
        text = BASE + PROBE.replace('minus = "R2.2"', 'minus = [30, 60, 0]')
        error = fails(text)
        assert error.where.line == line_of(text, "minus =")
        assert "the plus and minus points of probe 'across_R2' are the same point" in error.message

    def test_unknown_instrument(self):
        """A probe naming an instrument that is neither built in nor defined is an error."""
        text = BASE + PROBE.replace("passive-10x", "pasive-10x")
        error = fails(text)
        assert error.where.line == line_of(text, "instrument =")
        assert "uses instrument 'pasive-10x', which is neither built in nor defined" in error.message

    def test_user_instrument_reads_spice_numbers(self):
        """[instrument.NAME] values are SPICE numbers: 1meg, 3p, 200meg."""
        text = BASE + PROBE.replace("passive-10x", "my_diff") + (
            '\n[instrument.my_diff]\nresistance = "1meg"\ncapacitance = "3p"\nbandwidth = "200meg"\n')
        instrument = load(text).probes[0].instrument
        assert (instrument.resistance, instrument.capacitance, instrument.bandwidth) == (1e6, 3e-12, 200e6)
        assert not instrument.differential

    def test_builtin_instrument_field_override(self):
        """[instrument.passive-10x] changes only the fields it gives."""
        text = BASE + PROBE + '\n[instrument.passive-10x]\ncapacitance = "15p"\n'
        instrument = load(text).probes[0].instrument
        assert instrument.capacitance == pytest.approx(15e-12, rel=1e-15)
        assert instrument.resistance == 10e6

    def test_builtin_instruments(self):
        """Built-ins carry SPEC's typical values."""
        # SPEC, "Built-in instruments" (typical values, common practice, no source).
        assert BUILTIN_INSTRUMENTS["ideal"].resistance == math.inf
        assert (BUILTIN_INSTRUMENTS["direct-1x"].resistance, BUILTIN_INSTRUMENTS["direct-1x"].capacitance) \
            == (1e6, 100e-12)
        differential = BUILTIN_INSTRUMENTS["differential"]
        assert differential.differential and differential.reference_resistance == 1e6
        assert differential.capacitance == 2e-12

    def test_bad_instrument_number(self):
        """A value that is not a SPICE number is an error at its key."""
        text = BASE + '\n[instrument.mine]\nresistance = "lots"\ncapacitance = "3p"\n'
        error = fails(text)
        assert error.where.line == line_of(text, "resistance")
        assert "resistance of instrument 'mine' = 'lots' is not a SPICE number" in error.message

    def test_new_instrument_needs_capacitance(self):
        """A user instrument without capacitance is an error at its table."""
        text = BASE + '\n[instrument.mine]\nresistance = "1meg"\n'
        error = fails(text)
        assert error.where.line == line_of(text, "[instrument.mine]")
        assert "instrument 'mine' needs capacitance" in error.message

    def test_analysis_kept_as_text(self):
        """[analysis] tran and ac are kept as written."""
        side = load(BASE + '\n[analysis]\ntran = "0.5n 4u"\n')
        assert dict(side.analysis) == {"tran": "0.5n 4u"}

    def test_unknown_analysis_key(self):
        """An analysis other than tran and ac is an error."""
        error = fails(BASE + '\n[analysis]\ntrans = "0.5n 4u"\n')
        assert "unknown key 'trans' in [analysis]" in error.message

    def test_options_default(self):
        """skin_effect is off and coils get 24 segments a turn unless the file says otherwise."""
        side = load(BASE)
        assert (side.skin_effect, side.coil_segments_per_turn) == (False, 24)
        side = load("skin_effect = true\ncoil_segments_per_turn = 8\n" + BASE)
        assert (side.skin_effect, side.coil_segments_per_turn) == (True, 8)

    def test_too_few_segments_per_turn(self):
        """Fewer than 8 segments a turn is an error."""
        error = fails("coil_segments_per_turn = 7\n" + BASE)
        assert str(error).startswith("ring.toml:1:1: coil_segments_per_turn must be a whole number of at least 8")

    TWISTED = """
[[probe]]
name = "tw"
plus = "R1.1"
minus = "R1.2"
instrument = "ideal"
leads = { route = [[4, 0, 0], [4, 0, 100]], spacing = 1.0, twist_pitch = 8 }
"""

    def test_twisted_pair_loads(self):
        """A twisted pair keeps route, spacing and pitch in metres."""
        pair = load(BASE + self.TWISTED).probes[0].twisted
        assert pair.spacing == pytest.approx(1e-3, rel=1e-15)
        assert pair.twist_pitch == pytest.approx(8e-3, rel=1e-15)
        assert pair.route[1] == pytest.approx((0.004, 0.0, 0.1), rel=1e-15)

    def test_twisted_route_must_start_midway(self):
        """A route that does not start between the plus and minus points is an error."""
        text = BASE + self.TWISTED.replace("[[4, 0, 0]", "[[5, 0, 0]")
        error = fails(text)
        assert error.where.line == line_of(text, "leads =")
        assert "it must start at (4, 0, 0) mm, midway between the plus and minus points" in error.message

    def test_twisted_spacing_must_clear_the_wires(self):
        """A spacing of less than two lead radii would make the leads overlap."""
        text = BASE + self.TWISTED.replace("spacing = 1.0", "spacing = 0.4")
        error = fails(text)
        assert error.where.column == line_of_column(text, "spacing")
        assert "less than two lead radii" in error.message

    def test_aggressor_needs_path_or_coil(self):
        """An aggressor with neither a path nor a coil is an error at its table."""
        text = BASE + '\n[[aggressor]]\nname = "bus"\ncurrent = "SIN(0 1 1meg)"\n'
        error = fails(text)
        assert error.where.line == line_of(text, "[[aggressor]]")
        assert "aggressor 'bus' needs either a path or a coil" in error.message

    def test_aggressor_coil(self):
        """An aggressor may be a coil, given as an inline table."""
        text = BASE + ('\n[[aggressor]]\nname = "bus"\ncurrent = "SIN(0 1 1meg)"\n'
                       "coil = { center = [0, 50, 0], axis = [1, 0, 0], radius = 5, length = 30, turns = 5 }\n")
        aggressor = load(text).aggressors[0]
        assert aggressor.path is None and aggressor.helix.turns == 5

    def test_aggressor_coil_unknown_key(self):
        """A misspelt key inside an inline coil table points at that key."""
        text = BASE + ('\n[[aggressor]]\nname = "bus"\ncurrent = "SIN(0 1 1meg)"\n'
                       "coil = { center = [0, 50, 0], axis = [1, 0, 0], radius = 5, length = 30, turn = 5 }\n")
        error = fails(text)
        assert error.where.line == line_of(text, "coil =")
        assert error.where.column == line_of_column(text, "turn =")


def line_of_column(text: str, fragment: str) -> int:
    """1-based column of ``fragment`` on the first line that has it."""
    line = textwrap.dedent(text).splitlines()[line_of(text, fragment) - 1]
    return line.index(fragment) + 1


class TestLoadSidefile:
    def test_reads_a_file(self, tmp_path):
        """A side-file on disk loads and errors name it by its path."""
        path = tmp_path / "bench.toml"
        path.write_text(BASE + WIRE, encoding="utf-8")
        assert load_sidefile(path, NETLIST).path == str(path)
        path.write_text(BASE + "bogus = 1\n", encoding="utf-8")
        with pytest.raises(SideFileError) as caught:
            load_sidefile(path, NETLIST)
        assert str(caught.value).startswith(f"{path}:{line_of(BASE + 'bogus = 1', 'bogus')}:1:")

    def test_missing_file(self, tmp_path):
        """A missing side-file is a SideFileError, not a traceback."""
        with pytest.raises(SideFileError, match="cannot read the side-file"):
            load_sidefile(tmp_path / "none.toml", NETLIST)


class TestHelix:
    def helix(self, turns: float = 5.0) -> Helix:
        return Helix(center=(0.0, 0.0, 0.0), axis=(0.0, 0.0, 1.0), radius=0.01, length=0.02, turns=turns,
                     wire_radius=1e-4)

    def test_pitch_and_turn_count(self):
        """The helix rises length/turns per turn and makes exactly ``turns`` turns."""
        points = self.helix().points(24)
        # SPEC, "Details": pitch = length/turns = 20 mm / 5 = 4 mm; 24 segments a turn.
        assert len(points) == 5 * 24 + 1
        assert np.allclose(points[24::24, 2] - points[:-24:24, 2], 0.004, rtol=1e-12)
        angle = np.unwrap(np.arctan2(points[:, 1], points[:, 0]))
        assert angle[-1] - angle[0] == pytest.approx(2 * math.pi * 5, rel=1e-12)

    def test_right_handed_about_axis(self):
        """Going along +axis the winding turns counter-clockwise seen from +axis (right hand)."""
        points = self.helix().points(24)
        turning = points[:-1, 0] * points[1:, 1] - points[:-1, 1] * points[1:, 0]
        assert np.all(turning > 0) and np.all(np.diff(points[:, 2]) > 0)

    def test_runs_from_center_minus_half_length(self):
        """The helix starts at center - axis*length/2 and ends at center + axis*length/2."""
        points = self.helix().points(24)
        assert points[0, 2] == pytest.approx(-0.01, rel=1e-15)
        assert points[-1, 2] == pytest.approx(0.01, rel=1e-15)
        # equal-area polygon: vertices on r * sqrt(step / sin(step)), step = 2 pi / 24
        step = 2 * np.pi / 24
        assert np.allclose(np.hypot(points[:, 0], points[:, 1]), 0.01 * np.sqrt(step / np.sin(step)), rtol=1e-12)

    def test_each_turn_encloses_the_round_windings_area(self):
        """A discretised turn's polygon has the area pi r^2 of the round turn."""
        points = self.helix().points(24)[:25]
        x, y = points[:, 0], points[:, 1]
        # shoelace formula for the area of the closed polygon of one turn
        area = 0.5 * abs(np.dot(x[:-1], y[1:]) - np.dot(x[1:], y[:-1]))
        assert area == pytest.approx(np.pi * 0.01**2, rel=1e-12)

    def test_fractional_turns(self):
        """A fractional turn count still gets at least the asked segments a turn."""
        points = self.helix(turns=1.5).points(24)
        assert len(points) - 1 == 36
