"""Tests for augment/synthesis.py: the augmented netlist and where its readings live."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from augment.compare import _across
from augment.netlist import parse_netlist_text
from augment.pipeline import build
from augment.synthesis import PIVOT_OPTION, SynthesisOptions

from conftest import EXAMPLES, SCENARIOS

DIVIDER = """divider with a fast edge
V1 in 0 PULSE(0 1 1n 0.5n 0.5n 20n 40n)
R1 in out 50
R2 out 0 50
.tran 0.05n 30n
.end
"""

DIVIDER_SIDEFILE = """
units = "mm"
wire_radius = 0.25

[terminals]
R1 = [[0, 0, 0], [10, 0, 0]]
R2 = [[20, 0, 0], [20, -10, 0]]

[[wire]]
net = "out"
path = ["R1.2", "R2.1"]

[[probe]]
name = "across_R2"
plus = "R2.1"
minus = "R2.2"
instrument = "passive-10x"
plus_lead = ["R2.1", [40, 0, 0], [60, -4.5, 0]]
minus_lead = ["R2.2", [40, -10, 0], [60, -5.5, 0]]
"""


def _added_block(text: str) -> list[str]:
    start = text.index("---- added from side-file")
    end = text.index("---- end of added lines")
    return [line for line in text[start:end].splitlines()[1:] if line and not line.startswith("*")]


def _reading(vectors, nodes: tuple[str, str]) -> np.ndarray:
    """V(node) - V(reference) of a ProbeNodes reading, read as the compare stage reads it."""
    return _across(vectors, nodes, len(vectors["time"]))


class TestSynthesize:
    def test_empty_sidefile_adds_nothing(self, write_case, simulator):
        """A side-file with no geometry adds no element and the results are identical."""
        netlist, sidefile = write_case(DIVIDER, 'units = "mm"\nwire_radius = 0.25\n')
        built = build(netlist, sidefile)
        assert (built.augmented.inductors, built.augmented.couplings) == (0, 0)
        assert _added_block(built.augmented.text) == []
        original = simulator.run(built.augmented.original_text).vectors
        augmented = simulator.run(built.augmented.text).vectors
        for node in ("in", "out", "time"):
            np.testing.assert_array_equal(original[node], augmented[node])

    def test_user_lines_stay_verbatim_except_rewired_terminals(self, write_case):
        """Untouched statements are written as the user wrote them."""
        netlist, sidefile = write_case(DIVIDER, DIVIDER_SIDEFILE)
        text = build(netlist, sidefile).augmented.text
        assert "V1 in 0 PULSE(0 1 1n 0.5n 0.5n 20n 40n)" in text.splitlines()
        assert text.splitlines()[0] == "divider with a fast edge"
        # R1's terminal 1 gets the body's inner node; its terminal 2 stays on net out
        assert re.search(r"^R1 R1_b out 50$", text, re.MULTILINE)

    def test_rewired_lines_keep_their_inline_comments(self, write_case):
        """A rewired element keeps its '$' and ';' comments, continuation lines' included."""
        commented = DIVIDER.replace("R1 in out 50", "R1 in out 50 $ series\n+ ; from the driver").replace(
            "R2 out 0 50", "R2 out 0 50 ; load")
        netlist, sidefile = write_case(commented, DIVIDER_SIDEFILE)
        text = build(netlist, sidefile).augmented.text
        assert re.search(r"^R1 R1_b out 50 \$ series ; from the driver$", text, re.MULTILINE)
        assert re.search(r"^R2 \S+ \S+ 50 ; load$", text, re.MULTILINE)

    def test_crlf_netlist_stays_crlf(self, write_case):
        """A netlist with CRLF line ends gets CRLF on every line, the added ones included."""
        netlist, sidefile = write_case(DIVIDER, DIVIDER_SIDEFILE)
        netlist.write_bytes(DIVIDER.replace("\n", "\r\n").encode())
        text = build(netlist, sidefile).augmented.text
        assert text.count("\n") == text.count("\r\n") > 10

    def test_every_added_line_names_its_conductor(self, write_case):
        """Each added element line carries the conductor id it realises."""
        netlist, sidefile = write_case(DIVIDER, DIVIDER_SIDEFILE)
        lines = _added_block(build(netlist, sidefile).augmented.text)
        assert lines
        ids = ("wire:", "body:", "coil:", "aggressor:", "probe:", "local:")
        for line in lines:
            assert "$" in line and any(i in line.split("$", 1)[1] for i in ids), line

    def test_added_names_never_collide_with_the_users(self, write_case):
        """Names the tool adds are unique even when the user already took the obvious ones."""
        crowded = DIVIDER.replace(".tran", "LX_B_R1 x 0 1n\nRX_I_across_R2 x 0 1\n.tran")
        netlist, sidefile = write_case(crowded, DIVIDER_SIDEFILE)
        text = build(netlist, sidefile).augmented.text
        parsed = parse_netlist_text(text, "augmented.cir")
        names = [e.key for e in parsed.elements]
        assert len(names) == len(set(names))
        assert "LX_B_R1 x 0 1n" in text.splitlines()

    def test_augmented_netlist_runs_for_every_scenario(self, simulator):
        """Every built-in scenario's augmented netlist simulates in ngspice."""
        for netlist, sidefile in (
            ("sensing_loop.cir", "sensing_loop.toml"),
            ("fast_edge.cir", "fast_edge_long.toml"),
            ("fast_edge.cir", "fast_edge_spring.toml"),
        ):
            built = build(SCENARIOS / netlist, SCENARIOS / sidefile)
            result = simulator.run(built.augmented.text)
            for probe in built.augmented.probes:
                assert np.all(np.isfinite(_reading(result.vectors, probe.probed)))

    def test_counts_match_the_lines_written(self, write_case):
        """`inductors` and `couplings` count the L and K lines the tool added."""
        netlist, sidefile = write_case(DIVIDER, DIVIDER_SIDEFILE)
        built = build(netlist, sidefile)
        lines = _added_block(built.augmented.text)
        # every inductor added, the EMF inductors of the probe models (LX_S_) among them
        inductors = [l for l in lines if l.startswith("LX_")]
        assert any(l.startswith("LX_S_") for l in inductors)
        couplings = [l for l in lines if l.startswith("KX_")]
        assert built.augmented.inductors == len(inductors)
        assert built.augmented.couplings == len(couplings)

    def test_coupling_coefficients_stay_below_one(self, write_case):
        """Every K line's coefficient is strictly inside (-1, 1)."""
        built = build(SCENARIOS / "sensing_loop.cir", SCENARIOS / "sensing_loop.toml")
        for line in _added_block(built.augmented.text):
            if line.startswith("KX_"):
                assert abs(float(line.split()[3])) < 1

    def test_kmin_zero_writes_no_zero_couplings(self, write_case):
        """--kmin 0 keeps every coupling but writes none of exactly 0 (perpendicular pieces)."""
        built = build(EXAMPLES / "half_bridge" / "switch_node.cir", EXAMPLES / "half_bridge" / "long_ground.toml",
                      SynthesisOptions(kmin=0.0))
        # the example's copper runs along x and y only: some pairs are exactly perpendicular
        assert np.any(built.inductance.henry == 0.0)
        values = [float(line.split()[3]) for line in _added_block(built.augmented.text) if line.startswith("KX_")]
        assert values and all(value != 0.0 for value in values)

    def test_kmin_drops_weak_couplings(self, write_case):
        """A higher --kmin writes fewer K lines, and only the weak ones go."""
        strict = build(SCENARIOS / "sensing_loop.cir", SCENARIOS / "sensing_loop.toml")
        loose = build(SCENARIOS / "sensing_loop.cir", SCENARIOS / "sensing_loop.toml", SynthesisOptions(kmin=0.05))
        assert loose.augmented.couplings < strict.augmented.couplings
        for line in _added_block(loose.augmented.text):
            if line.startswith("KX_"):
                assert abs(float(line.split()[3])) >= 0.05

    def test_full_coupling_adds_probe_loops_to_the_k_lines(self, write_case):
        """With coupling='full' the probe loop inductor appears in K lines."""
        netlist, sidefile = write_case(DIVIDER, DIVIDER_SIDEFILE)
        full = build(netlist, sidefile, SynthesisOptions(coupling="full")).augmented.text
        assert any(l.startswith("KX_") and "LX_P_across_R2" in l for l in _added_block(full))
        one_way = build(netlist, sidefile).augmented.text
        assert not any(l.startswith("KX_") and "LX_P_across_R2" in l for l in _added_block(one_way))


class TestPivotOption:
    """The relative pivot threshold the augmented netlist sets for ngspice's sparse solver."""

    def test_it_follows_the_title_when_inductors_are_added(self, write_case):
        netlist, sidefile = write_case(DIVIDER, DIVIDER_SIDEFILE)
        lines = build(netlist, sidefile).augmented.text.splitlines()
        assert tuple(lines[1:1 + len(PIVOT_OPTION)]) == PIVOT_OPTION

    def test_nothing_added_means_no_option(self, write_case):
        netlist, sidefile = write_case(DIVIDER, 'units = "mm"\nwire_radius = 0.25\n')
        assert PIVOT_OPTION[-1] not in build(netlist, sidefile).augmented.text

    def test_the_users_own_setting_comes_later_and_wins(self, write_case):
        """ngspice applies .options lines in order, so the user's pivrel, written after ours, holds."""
        netlist, sidefile = write_case(DIVIDER.replace(".tran", ".options pivrel=0.01\n.tran"), DIVIDER_SIDEFILE)
        lines = build(netlist, sidefile).augmented.text.splitlines()
        assert lines.index(PIVOT_OPTION[-1]) < lines.index(".options pivrel=0.01")

    @pytest.mark.parametrize("netlist, sidefile", [
        ("ground_loop/two_scopes.cir", "ground_loop/board.toml"),
        ("shunt/shunt.cir", "shunt/sense.toml"),
    ])
    def test_readings_do_not_depend_on_it(self, simulator, netlist, sidefile):
        """Pivot choice changes only round-off: Gaussian elimination with threshold pivoting
        is backward stable for these well-scaled systems (Golub and Van Loan, Matrix
        Computations, 3.4), so every reading agrees with the default threshold's to 1e-5 of
        its peak (ground_loop's DC loop of shield inductors leaves about 5e-6)."""
        built = build(EXAMPLES / netlist, EXAMPLES / sidefile)
        text = built.augmented.text
        default = "\n".join(line for line in text.splitlines() if line not in PIVOT_OPTION) + "\n"
        lowered = simulator.run(text).vectors
        plain = simulator.run(default).vectors
        # the step control sees round-off too, so time points may move by a hair
        np.testing.assert_allclose(lowered["time"], plain["time"], rtol=0, atol=1e-15)
        for probe in built.augmented.probes:
            for nodes in (probe.probed, probe.local):
                reading = _reading(plain, nodes)
                scale = np.max(np.abs(reading))
                assert scale > 0
                assert np.max(np.abs(_reading(lowered, nodes) - reading)) <= 1e-5 * scale


COIL_NETLIST = """a driven coil with a user coupling
V1 a 0 PULSE(0 1 1n 1n 1n 50n 100n)
R1 a b 10
L1 b 0 1u
L2 c 0 1u
R2 c 0 10
K1 L1 L2 0.3
.tran 0.5n 50n
.end
"""

COIL_SIDEFILE = """
units = "mm"
wire_radius = 0.2

[[coil]]
element = "L1"
center = [0, 0, 20]
axis = [0, 0, 1]
radius = 5
length = 40
turns = 40
"""


class TestCoils:
    def test_coil_element_takes_the_computed_inductance(self, write_case):
        """A netlist inductor realised by [[coil]] gets the extracted value, with a warning."""
        netlist, sidefile = write_case(COIL_NETLIST, COIL_SIDEFILE)
        built = build(netlist, sidefile)
        computed = built.inductance.henry[built.inductance.index("coil:L1"), built.inductance.index("coil:L1")]
        # Wheeler 1928: L[uH] = a^2 N^2 / (9a + 10l), inches; a = 5 mm, l = 40 mm, N = 40
        a_in, l_in = 5 / 25.4, 40 / 25.4
        wheeler = a_in**2 * 40**2 / (9 * a_in + 10 * l_in) * 1e-6
        assert computed == pytest.approx(wheeler, rel=0.03)
        line = next(l for l in built.augmented.text.splitlines() if l.startswith("L1 "))
        assert float(line.split()[3]) == pytest.approx(computed, rel=1e-8)
        assert any("L1 is 1e-06 H in the netlist" in w for w in built.warnings)

    def test_user_k_line_on_a_coil_is_replaced(self, write_case):
        """A user's K line naming a realised coil is reported and left out."""
        netlist, sidefile = write_case(COIL_NETLIST, COIL_SIDEFILE)
        built = build(netlist, sidefile)
        assert not any(l.startswith("K1 ") for l in built.augmented.text.splitlines())
        assert any("K1 couples a coil" in w for w in built.warnings)


AGGRESSOR_SIDEFILE = """
units = "mm"
wire_radius = 0.25

[terminals]
R2 = [[20, 0, 0], [20, -10, 0]]

[[aggressor]]
name = "bus"
current = "PWL(0 0 10n 5)"
path = [[-50, 10, 0], [100, 10, 0]]

[[probe]]
name = "across_R2"
plus = "R2.1"
minus = "R2.2"
instrument = "ideal"
plus_lead = ["R2.1", [40, 0, 0], [60, -4.5, 0]]
minus_lead = ["R2.2", [40, -10, 0], [60, -5.5, 0]]
"""

# A pulsed LC filter with a coil, a bus carrying 30 A edges below it, and an ideal probe.
LC_FILTER = """LC filter bench with a bus below it
VS in 0 PULSE(0 12 10n 3n 3n 150n 400n)
RS in a 2
L1 a b 2u
RL b 0 22
CF b 0 470p
.tran 0.1n 400n
.end
"""

LC_FILTER_SIDEFILE = """
units = "mm"
wire_radius = 0.3

[terminals]
VS = [[0, 20, 0], [0, 0, 0]]
RS = [[0, 20, 0], [10, 20, 0]]
RL = [[50, 20, 0], [50, 0, 0]]
CF = [[60, 20, 0], [60, 0, 0]]

[[wire]]
net = "b"
path = ["RL.1", "CF.1"]

[[wire]]
net = "0"
path = ["VS.2", "RL.2"]

[[wire]]
net = "0"
path = ["RL.2", "CF.2"]

[[coil]]
element = "L1"
center = [30, 20, 0]
axis = [1, 0, 0]
radius = 4
length = 20
turns = 25

[[aggressor]]
name = "bus"
current = "PULSE(0 30 50n 10n 10n 100n 400n)"
path = [[-50, -15, 0], [150, -15, 0]]
radius = 1.5

[[probe]]
name = "open"
plus = "RL.1"
minus = "RL.2"
instrument = "ideal"
plus_lead = ["RL.1", [55, 20, 5], [55, 20, 120]]
minus_lead = ["RL.2", [50, -8, 0], [90, -8, 0], [90, -8, 100], [57, 20, 120]]
"""


class TestAggressors:
    def test_aggressor_is_an_imposed_current(self, write_case, simulator):
        """The aggressor's current source carries the side-file's waveform."""
        netlist, sidefile = write_case(DIVIDER, AGGRESSOR_SIDEFILE)
        built = build(netlist, sidefile)
        source = next(l for l in _added_block(built.augmented.text) if l.startswith("IX_A_bus"))
        assert "PWL(0 0 10n 5)" in source
        vectors = simulator.run(built.augmented.text).vectors
        current = vectors[built.augmented.current_vectors["aggressor:bus"]]
        t = vectors["time"]
        # PWL ramp: 5 A in 10 ns, then held
        assert np.interp(5e-9, t, current) == pytest.approx(2.5, rel=1e-2)

    def test_ideal_probe_reads_potential_minus_emf(self, write_case, simulator):
        """With an ideal instrument the reading is V(plus) - V(minus) - M dI/dt (Romer 1982)."""
        netlist, sidefile = write_case(DIVIDER, AGGRESSOR_SIDEFILE)
        built = build(netlist, sidefile)
        vectors = simulator.run(built.augmented.text).vectors
        probe = built.augmented.probes[0]
        mutual = built.augmented.probe_mutuals["across_R2"]["aggressor:bus"]
        t = vectors["time"]
        during = (t > 2e-9) & (t < 8e-9)
        assert (probe.plus_net, probe.minus_net) == ("out", "0")
        emf_free = _reading(vectors, probe.probed) - vectors["out"]
        # during the ramp dI/dt = 5 A / 10 ns; every other conductor is nearly still
        expected = -mutual * 5 / 10e-9
        assert not math.isclose(expected, 0)
        assert np.median(emf_free[during]) == pytest.approx(expected, rel=0.05)

    def test_ideal_probe_beside_a_pulsed_aggressor_does_not_ring(self, write_case, simulator):
        """An ideal instrument has no inductance and no capacitance, so nothing rings: the
        error is M dI/dt, flat pulses during the ramps (Faraday's law), and ringing_hz is none
        (it once read 4 GHz, a line near Nyquist made of the time steps' corners)."""
        from augment.pipeline import simulate_and_compare

        netlist, sidefile = write_case(LC_FILTER, LC_FILTER_SIDEFILE)
        comparison, _, _ = simulate_and_compare(build(netlist, sidefile), simulator)
        reading = comparison.readings[0]
        assert np.ptp((reading.probed - reading.ideal).real) > 0
        assert reading.ringing_hz is None

    def test_passive_probe_beside_a_pulsed_aggressor_rings_at_its_lc(self, write_case, simulator):
        """The same probe with a passive 10x instrument rings at 1/(2 pi sqrt(L C)) within 5 %,
        L the loop's self inductance and C the instrument's input capacitance (LC resonance)."""
        from augment.pipeline import simulate_and_compare

        netlist, sidefile = write_case(LC_FILTER, LC_FILTER_SIDEFILE.replace('"ideal"', '"passive-10x"'))
        built = build(netlist, sidefile)
        comparison, _, _ = simulate_and_compare(built, simulator)
        probe = built.augmented.probes[0]
        index = built.inductance.ids.index(probe.conductor)
        loop_henry = built.inductance.henry[index, index]
        expected = 1 / (2 * math.pi * math.sqrt(loop_henry * probe.instrument.capacitance))
        assert comparison.readings[0].ringing_hz == pytest.approx(expected, rel=0.05)


HIERARCHICAL = """divider whose lower half is a subcircuit
.subckt half a b
R3 a b 100
.ends
V1 in 0 PULSE(0 1 1n 1n 1n 20n 40n)
R1 in mid 100
X1 mid 0 half
.tran 0.1n 30n
.end
"""

HIERARCHICAL_SIDEFILE = """
units = "mm"
wire_radius = 0.2

[terminals]
"X1.R3" = [[0, 0, 0], [0, 10, 0]]

[[probe]]
name = "across"
plus = "X1.R3.1"
minus = "X1.R3.2"
instrument = "ideal"
plus_lead = ["X1.R3.1", [30, 0, 0], [50, 4.5, 0]]
minus_lead = ["X1.R3.2", [30, 10, 0], [50, 5.5, 0]]
"""


class TestHierarchy:
    def test_element_inside_an_instance_is_placed(self, write_case, simulator):
        """Placing X1.R3 flattens just X1; the zero-area reading is the divider's half."""
        netlist, sidefile = write_case(HIERARCHICAL, HIERARCHICAL_SIDEFILE)
        built = build(netlist, sidefile)
        assert "body:X1.R3" in built.inductance.ids
        assert any(line.startswith("R.X1.R3 ") for line in built.augmented.text.splitlines())
        vectors = simulator.run(built.augmented.text).vectors
        t = vectors["time"]
        # the divider settles at half the 1 V step: the zero-area reading is I R3 = 0.5 V
        local = _reading(vectors, built.augmented.probes[0].local)
        assert np.interp(15e-9, t, local) == pytest.approx(0.5, rel=1e-3)


class TestVoltageSourceBody:
    def test_source_senses_its_own_body_current(self, write_case, simulator):
        """A placed V source's body has no 0 V sense; its current is the source's, in the direction of R1's."""
        placed = DIVIDER_SIDEFILE.replace("[terminals]\n", "[terminals]\nV1 = [[0, 0, 0], [0, -10, 0]]\n")
        netlist, sidefile = write_case(DIVIDER, placed)
        built = build(netlist, sidefile)
        lines = _added_block(built.augmented.text)
        assert not any(line.startswith("VX_S_B_V1") for line in lines)
        assert built.augmented.current_vectors["body:V1"] == "v1#branch"
        vectors = simulator.run(built.augmented.text).vectors
        body = vectors["v1#branch"]
        resistor = vectors[built.augmented.current_vectors["body:R1"]]
        # Kirchhoff's current law: the source's branch current, from terminal 1 through it, is
        # minus the current leaving terminal 1 into R1
        np.testing.assert_allclose(body, -resistor, atol=1e-9 * np.max(np.abs(resistor)))
        # Ohm's law on the plateau, averaged over the lead's remaining ring: 1 V over 50 + 50 ohm
        plateau = (vectors["time"] > 10e-9) & (vectors["time"] < 20e-9)
        assert np.mean(resistor[plateau]) == pytest.approx(1 / 100, rel=1e-2)
