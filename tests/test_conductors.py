"""Tests of augment/conductors.py: conductor ids, splitting, bodies, coils, probes, proximity."""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest
from hypothesis import given

from augment.conductors import TWIST_SEGMENTS_PER_PITCH, build_graph, twisted_leads
from augment.errors import SideFileError
from augment.netlist import parse_netlist_text
from augment.sidefile import TwistedPair, load_sidefile_text
from tests.strategies import twisted_pair_routes

# A ring scenario of our own: source into R1, net 'top' carrying R2 and a coil L1 to 'out'.
NETLIST = parse_netlist_text("""* ring scenario
V1 in 0 PULSE(0 1 0 1n 1n 1u 2u)
R1 in top 10
R2 top 0 50
L1 top out 1u
R3 out 0 1k
R4 top 0 1k
.tran 1n 1u
.end
""", "ring.cir", ".")

BASE = """\
units = "mm"
wire_radius = 0.25

[terminals]
R1 = [[0, 0, 0], [8, 0, 0]]
R2 = [[30, 60, 0], [38, 60, 0]]
"""

# Wire 1 runs R1.2 -> (30,0,0) -> R2.1; wire 2 leaves it mid-segment at (30, 30, 0) for R4.
WIRES = """R4 = [[60, 30, 0], [60, 40, 0]]

[[wire]]
net = "top"
path = ["R1.2", [30, 0, 0], "R2.1"]

[[wire]]
net = "top"
path = [[30, 30, 0], "R4.1"]
"""


def graph(text: str):
    side = load_sidefile_text(textwrap.dedent(text), "ring.toml", NETLIST)
    return build_graph(side, NETLIST)


def fails(text: str) -> SideFileError:
    with pytest.raises(SideFileError) as caught:
        graph(text)
    return caught.value


def line_of(text: str, fragment: str, occurrence: int = 1) -> int:
    hits = [n for n, line in enumerate(textwrap.dedent(text).splitlines(), start=1)
            if line.lstrip().startswith(fragment)]
    return hits[occurrence - 1]


class TestBuildGraph:
    def test_ids_and_split_at_junction(self):
        """A wire met mid-segment by another is split there into /1 and /2, in path order."""
        g = graph(BASE + WIRES)
        assert [c.id for c in g.conductors] == [
            "wire:top:1/1", "wire:top:1/2", "wire:top:2", "body:R1", "body:R2", "body:R4"]
        first, second = g.conductor("wire:top:1/1"), g.conductor("wire:top:1/2")
        assert first.end == second.start == g.conductor("wire:top:2").start
        assert g.junctions[first.end].position == pytest.approx((0.030, 0.030, 0.0), rel=1e-12)
        # Splitting keeps the path: 22 mm + 30 mm, then 30 mm.
        assert (first.length_m, second.length_m) == (pytest.approx(0.052), pytest.approx(0.030))
        assert first.start == "R1.2" and second.end == "R2.1"

    def test_split_at_vertex(self):
        """A wire ending on another wire's vertex splits it at that vertex."""
        text = BASE + WIRES.replace("[[30, 30, 0], ", "[[30, 0, 0], ")
        g = graph(text)
        first = g.conductor("wire:top:1/1")
        assert first.points.shape == (2, 3)
        assert first.points[-1] == pytest.approx((0.030, 0.0, 0.0))

    def test_points_are_read_only_metres(self):
        """Conductor points are metres and cannot be changed by a later stage."""
        body = graph(BASE).conductor("body:R1")
        assert body.points.tolist() == [[0.0, 0.0, 0.0], [0.008, 0.0, 0.0]]
        with pytest.raises(ValueError):
            body.points[0, 0] = 1.0

    def test_bodies_run_from_terminal_one_to_two(self):
        """A placed two-terminal element gets a body from terminal 1 to terminal 2."""
        body = graph(BASE).conductor("body:R2")
        assert (body.start, body.end, body.element, body.kind) == ("R2.1", "R2.2", "R2", "body")
        assert body.length_m == pytest.approx(0.008)

    def test_multi_terminal_elements_get_no_body(self):
        """A three-terminal part only gives junctions."""
        netlist = parse_netlist_text("* q\nQ1 c b 0 qm\nR1 c b 1k\n.model qm npn\n.end\n", "q.cir", ".")
        side = load_sidefile_text('units = "mm"\nwire_radius = 0.2\n[terminals]\nQ1 = [[0,0,0],[2,0,0],[4,0,0]]\n',
                                  "q.toml", netlist)
        g = build_graph(side, netlist)
        assert g.conductors == ()
        assert g.terminals[("Q1", 3)] == "Q1.3"

    COIL = """
[[coil]]
element = "L1"
center = [-20, 30, 20]
axis = [0, 0, 1]
radius = 6
length = 40
turns = 12
"""

    def test_coil_without_terminals_uses_helix_ends(self):
        """A coil with no [terminals] entry is its helix, 24 segments a turn, terminal 1 at the bottom."""
        g = graph(BASE + self.COIL)
        coil = g.conductor("coil:L1")
        assert len(coil.points) - 1 == 12 * 24
        assert (coil.start, coil.end) == ("L1.1", "L1.2")
        assert g.junctions["L1.1"].position[2] == pytest.approx(0.0, abs=1e-15)
        assert all(c.id != "body:L1" for c in g.conductors)

    def test_coil_leads_to_placed_terminals(self):
        """Straight leads join the helix ends to placed terminals that differ from them."""
        text = BASE + "L1 = [[-20, 30, -5], [-20, 30, 45]]\n" + self.COIL
        coil = graph(text).conductor("coil:L1")
        # Helix start: center - axis*length/2 + radius*u, u = x for a z axis: (-14, 30, 0) mm,
        # the radius scaled for an equal-area polygon of 24 sides
        scale = np.sqrt((2 * np.pi / 24) / np.sin(2 * np.pi / 24))
        assert coil.points[0] == pytest.approx((-0.020, 0.030, -0.005))
        assert coil.points[1] == pytest.approx((-0.020 + 0.006 * scale, 0.030, 0.0))
        assert coil.points[-1] == pytest.approx((-0.020, 0.030, 0.045))
        assert len(coil.points) - 1 == 12 * 24 + 2

    def test_coil_segments_per_turn_option(self):
        """coil_segments_per_turn sets the helix discretisation."""
        coil = graph("coil_segments_per_turn = 36\n" + BASE + self.COIL).conductor("coil:L1")
        assert len(coil.points) - 1 == 12 * 36

    def test_aggressors_have_no_junctions(self):
        """An aggressor carries its imposed current and touches no junction."""
        text = BASE + ('\n[[aggressor]]\nname = "bus"\ncurrent = "PULSE(0 40 0 20n 20n 1u 2u)"\n'
                       "path = [[-50, -20, 0], [150, -20, 0]]\n")
        g = graph(text)
        bus = g.conductor("aggressor:bus")
        assert (bus.start, bus.end, bus.kind) == (None, None, "aggressor")
        assert g.aggressors[0].current == "PULSE(0 40 0 20n 20n 1u 2u)"
        assert g.aggressors[0].conductor == "aggressor:bus"

    PROBE = """
[[probe]]
name = "across_R2"
plus = "R2.1"
minus = "R2.2"
instrument = "passive-10x"
plus_lead = ["R2.1", [30, 70, 5], [30, 200, 5]]
minus_lead = ["R2.2", [32, 70, 5], [32, 200, 5]]
"""

    def test_probe_loop_order(self):
        """The probe loop runs out along the plus lead, across the instrument, back along the minus lead."""
        g = graph(BASE + self.PROBE)
        loop = g.conductor("probe:across_R2")
        expected = np.array([[30, 60, 0], [30, 70, 5], [30, 200, 5], [32, 200, 5], [32, 70, 5], [38, 60, 0]]) * 1e-3
        assert np.allclose(loop.points, expected, rtol=1e-14, atol=0)
        setup = g.probes[0]
        assert (setup.plus, setup.minus, setup.plus_lead_end, setup.closing_segment) == ("R2.1", "R2.2", 2, 2)
        assert np.allclose(setup.local_points, expected[[0, -1]], rtol=1e-14, atol=0)
        assert g.conductors[-1] is loop

    def test_zero_length_closing_segment_dropped(self):
        """Leads ending at one point close without a zero-length segment."""
        text = BASE + self.PROBE.replace("[32, 200, 5]]", "[30, 200, 5]]")
        g = graph(text)
        loop = g.conductor("probe:across_R2")
        assert len(loop.points) == 5 and g.probes[0].closing_segment is None
        assert loop.points[g.probes[0].plus_lead_end] == pytest.approx((0.030, 0.200, 0.005))
        assert np.all(np.linalg.norm(np.diff(loop.points, axis=0), axis=1) > 0)

    def test_probe_point_on_a_wire_splits_it(self):
        """A probe point given as coordinates on a wire splits that wire there."""
        text = BASE + WIRES + self.PROBE.replace('plus = "R2.1"', "plus = [30, 45, 0]").replace(
            'plus_lead = ["R2.1"', "plus_lead = [[30, 45, 0]")
        g = graph(text)
        ids = [c.id for c in g.conductors if c.kind == "wire"]
        assert ids == ["wire:top:1/1", "wire:top:1/2", "wire:top:1/3", "wire:top:2"]
        assert g.junctions[g.probes[0].plus].position == pytest.approx((0.030, 0.045, 0.0))

    def test_probe_point_on_nothing(self):
        """A probe point on no terminal and no wire is an error at the probe."""
        text = BASE + self.PROBE.replace('plus = "R2.1"', "plus = [31, 45, 0]").replace(
            'plus_lead = ["R2.1"', "plus_lead = [[31, 45, 0]")
        error = fails(text)
        assert str(error) == (f"ring.toml:{line_of(text, '[[probe]]')}:1: the plus point of probe 'across_R2' "
                              "at (31, 45, 0) mm is on no terminal and no wire")

    def test_unplaced_terminal_attached_with_warning(self):
        """An unplaced element on a wired net is attached at the net's first placed terminal."""
        g = graph(BASE + WIRES)
        assert g.terminals[("L1", 1)] == "R1.2"
        assert "L1.1 is on wired net 'top' but not placed; it is attached at R1.2" in g.warnings
        assert g.net_root["top"] == "R1.2"

    def test_unwired_net_joined_without_warning(self):
        """Placed terminals of a net with no wires are joined ideally and silently."""
        g = graph(BASE)
        assert ("R1.2", "R2.1") in g.ideal_joins
        assert not any("'top'" in w for w in g.warnings)

    def test_disconnected_pieces_joined_with_warning(self):
        """A wired net in two pieces is joined ideally and the warning names both pieces."""
        text = BASE + 'R4 = [[60, 30, 0], [60, 40, 0]]\n[[wire]]\nnet = "top"\npath = ["R1.2", [8, 30, 0], "R4.1"]\n'
        g = graph(text)
        assert ("R1.2", "R2.1") in g.ideal_joins
        assert ("net 'top' is in 2 unconnected pieces (R1.2, R4.1, wire:top:1; R2.1); they are joined ideally, "
                "as in the netlist") in g.warnings

    def test_wires_of_two_nets_crossing_are_a_short(self):
        """A wire of net 'out' crossing a wire of net 'top' is a short."""
        text = BASE + "R3 = [[50, -10, 0], [50, -20, 0]]\nL1 = [[70, 50, 0], [50, 40, 0]]\n" + WIRES + (
            '\n[[wire]]\nnet = "out"\npath = ["R3.1", "L1.2"]\n')
        error = fails(text)
        assert error.where.line == line_of(text, "[[wire]]", 3)
        assert error.message == ("wire:top:2 (net 'top') touches wire:out:1 (net 'out') near (50, 30, 0) mm: "
                                 "a short the netlist does not have")

    def test_conductors_too_close(self):
        """An aggressor running 0.3 mm from a wire (radii 0.25 mm each) is too close."""
        text = BASE + WIRES + ('\n[[aggressor]]\nname = "bus"\ncurrent = "SIN(0 1 1meg)"\n'
                               "path = [[35, 30.3, 0], [55, 30.3, 0]]\n")
        error = fails(text)
        assert error.where.line == line_of(text, "[[aggressor]]")
        assert error.message.startswith("wire:top:2 and aggressor:bus come within 0.3 mm of each other")

    def test_conductors_just_clear(self):
        """An aggressor 0.6 mm from the wires (radii 0.25 mm each) is accepted."""
        text = BASE + WIRES + ('\n[[aggressor]]\nname = "bus"\ncurrent = "SIN(0 1 1meg)"\n'
                               "path = [[35, 30.6, 0], [55, 30.6, 0]]\n")
        assert graph(text).conductor("aggressor:bus").length_m == pytest.approx(0.02)

    def test_tight_coil_turns_are_not_checked(self):
        """A close-wound coil (pitch 0.4 mm, wire radius 0.25 mm) is not too close to itself."""
        text = BASE + self.COIL.replace("turns = 12", "turns = 100")
        assert len(graph(text).conductor("coil:L1").points) - 1 == 2400

    def test_probes_may_share_a_route(self):
        """Two probe set-ups along the same leads (alternatives, read one at a time) are accepted."""
        second = self.PROBE.replace('name = "across_R2"', 'name = "same_leads"').replace("passive-10x", "ideal")
        g = graph(BASE + self.PROBE + second)
        assert np.array_equal(g.conductor("probe:across_R2").points, g.conductor("probe:same_leads").points)

    def test_twisted_pair_probe(self):
        """A twisted-pair probe joins its points with short straight pieces and closes across its ends."""
        text = BASE + ('\n[[probe]]\nname = "tw"\nplus = "R1.1"\nminus = "R1.2"\ninstrument = "ideal"\n'
                       "leads = { route = [[4, 0, 0], [4, 0, 100]], spacing = 1.0, twist_pitch = 8 }\n")
        g = graph(text)
        loop, setup = g.conductor("probe:tw"), g.probes[0]
        assert setup.twisted
        assert loop.points[0] == pytest.approx((0.0, 0.0, 0.0)) and loop.points[-1] == pytest.approx((0.008, 0, 0))
        # Straight piece from R1.1 to the plus lead's start, half a spacing off the route and
        # square to R1's body: z x (R1.1 - R1.2) points along -y.
        assert loop.points[1] == pytest.approx((0.004, -0.0005, 0.0))
        closing = setup.closing_segment
        assert np.linalg.norm(loop.points[closing + 1] - loop.points[closing]) == pytest.approx(1e-3)


class TestTwistedLeads:
    PAIR = TwistedPair(route=((0.0, 0.0, 0.0), (0.0, 0.0, 0.1)), spacing=1e-3, twist_pitch=8e-3)

    def test_spacing_kept(self):
        """Every pair of corresponding points is exactly one spacing apart, centre to centre."""
        plus, minus = twisted_leads(np.array([0.004, 0, 0]), np.array([-0.004, 0, 0]), self.PAIR)
        assert np.allclose(np.linalg.norm(plus - minus, axis=1), 1e-3, rtol=1e-12)

    def test_pitch_and_handedness_from_points(self):
        """The leads turn once per twist_pitch of route, right-handed about the route."""
        plus, minus = twisted_leads(np.array([0.004, 0, 0]), np.array([-0.004, 0, 0]), self.PAIR)
        angle = np.unwrap(np.arctan2(plus[:, 1], plus[:, 0]))
        slope = np.polyfit(plus[:, 2], angle, 1)[0]
        # 2 pi per 8 mm of route; positive: counter-clockwise seen from +z while rising (right hand).
        assert slope == pytest.approx(2 * math.pi / 8e-3, rel=1e-9)
        assert np.allclose(np.hypot(minus[:, 0], minus[:, 1]), 0.5e-3, rtol=1e-12)
        # First offset square to the route (z) and to minus -> plus (x): z x x = y.
        assert angle[0] == pytest.approx(math.pi / 2, rel=1e-12)

    def test_segments_per_pitch(self):
        """There are at least 16 segments per pitch (100 mm / 8 mm = 12.5 pitches)."""
        plus, _ = twisted_leads(np.array([0.004, 0, 0]), np.array([-0.004, 0, 0]), self.PAIR)
        assert len(plus) - 1 >= math.ceil(12.5 * TWIST_SEGMENTS_PER_PITCH)

    @given(twisted_pair_routes())
    def test_spacing_kept_around_corners(self, case):
        """Along bent routes the leads stay one spacing apart and end at the route's end."""
        plus_point, minus_point, pair = case
        plus, minus = twisted_leads(plus_point, minus_point, pair)
        assert plus.shape == minus.shape
        assert np.allclose(np.linalg.norm(plus - minus, axis=1), pair.spacing, rtol=1e-9)
        assert np.allclose((plus[-1] + minus[-1]) / 2, pair.route[-1], rtol=0, atol=1e-12)
