"""End-to-end runs of `augment.pipeline` against analytic circuit results (real ngspice)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from augment.compare import compare
from augment.inductance import MU0
from augment.pipeline import build, result_document, run, simulate_and_compare
from augment.synthesis import SynthesisOptions


def _readings(netlist, sidefile, simulator, options=SynthesisOptions()):
    built = build(netlist, sidefile, options)
    comparison, _, _ = simulate_and_compare(built, simulator)
    return built, {r.probe.name: r for r in comparison.readings}, comparison


def _grover_parallel(l1: float, l2: float, offset: float, d: float) -> float:
    """Mutual inductance of parallel filaments on lines ``d`` apart, same direction.

    Filament 1 spans [0, l1], filament 2 spans [offset, offset + l2] along the common direction.
    Grover 1946, ch. 2 (parallel filaments of unequal lengths): M = mu0/(4 pi) [F(s+m) -
    F(s+m-l) - F(s) + F(s-l)], F(x) = x asinh(x/d) - sqrt(x^2 + d^2).
    """

    def f(x):
        if d == 0:  # collinear: the d -> 0 limit, whose ln(1/d) terms cancel in the sum
            return abs(x) * math.log(abs(x)) - abs(x) if x else 0.0
        return x * math.asinh(x / d) - math.hypot(x, d)

    return MU0 / (4 * math.pi) * (f(offset + l2) - f(offset + l2 - l1) - f(offset) + f(offset - l1))


def _rectangle_sides(x0, y0, x1, y1, clockwise: bool):
    """The four sides of an axis-aligned rectangle as (start, end) pairs, in loop order."""
    corners = [(x0, y0), (x1, y0), (x1, y1), (x0, y1)]
    if clockwise:
        corners = corners[::-1]
    return [(corners[i], corners[(i + 1) % 4]) for i in range(4)]


def _loop_mutual(loop_a, loop_b) -> float:
    """Mutual inductance of two coplanar rectangular filament loops from Grover's parallel form.

    Perpendicular sides contribute nothing (Neumann's integrand has dl_a . dl_b = 0).
    """
    total = 0.0
    for (pa, qa) in loop_a:
        for (pb, qb) in loop_b:
            da, db = np.subtract(qa, pa), np.subtract(qb, pb)
            if abs(np.dot(da, db)) < 1e-15:
                continue
            axis = 0 if abs(da[0]) > 0 else 1
            sign = np.sign(da[axis]) * np.sign(db[axis])
            # put both filaments in the direction of a
            a0, a1 = sorted((pa[axis], qa[axis]))
            b0, b1 = sorted((pb[axis], qb[axis]))
            d = abs(pa[1 - axis] - pb[1 - axis])
            total += sign * _grover_parallel(a1 - a0, b1 - b0, b0 - a0, d)
    return total


# A drive loop (V1 ramp through R1) and, beside it in the same plane, a passive ring of R2 and
# R3. Every side is parallel to x or y, so the loop-to-loop mutual is a sum of Grover's
# parallel-filament terms. Dimensions in mm; the thin-wire radius is small next to them.
COUPLED_LOOPS_NETLIST = """coupled loops: a ramp-driven RL loop beside a resistive ring
V1 a 0 PWL(0 0 2u 2)
R1 a 0 10
R2 p q 100
R3 p q 900
RG q 0 1g
.tran 2n 2u
.end
"""

COUPLED_LOOPS_SIDEFILE = """
units = "mm"
wire_radius = 0.1

[terminals]
V1 = [[0, 15, 0], [0, 5, 0]]
R1 = [[40, 20, 0], [60, 20, 0]]
R2 = [[0, 50, 0], [0, 40, 0]]
R3 = [[100, 50, 0], [100, 40, 0]]

[[wire]]
net = "a"
path = ["V1.1", [0, 20, 0], "R1.1"]

[[wire]]
net = "0"
path = ["R1.2", [100, 20, 0], [100, 0, 0], [0, 0, 0], "V1.2"]

[[wire]]
net = "p"
path = ["R2.1", [0, 60, 0], [100, 60, 0], "R3.1"]

[[wire]]
net = "q"
path = ["R2.2", [0, 30, 0], [100, 30, 0], "R3.2"]

[[probe]]
name = "across_R2"
plus = "R2.1"
minus = "R2.2"
instrument = "ideal"
plus_lead = ["R2.1", [-30, 50, 0], [-60, 45.5, 0]]
minus_lead = ["R2.2", [-30, 40, 0], [-60, 44.5, 0]]

[[probe]]
name = "across_R3"
plus = "R3.1"
minus = "R3.2"
instrument = "ideal"
plus_lead = ["R3.1", [130, 50, 0], [160, 45.5, 0]]
minus_lead = ["R3.2", [130, 40, 0], [160, 44.5, 0]]
"""


class TestCoupledLoops:
    def test_grover_parallel_matches_neumann_quadrature(self):
        """The test's own Grover reference agrees with scipy.integrate of Neumann's integral."""
        # Neumann's formula, M = mu0/(4 pi) double-integral dx dx' / R, by scipy.integrate.dblquad
        l1, l2, s, d = 0.1, 0.06, 0.02, 0.03
        value, _ = integrate.dblquad(lambda x2, x1: 1 / math.hypot(x1 - x2, d), 0, l1, s, s + l2)
        assert _grover_parallel(l1, l2, s, d) == pytest.approx(MU0 / (4 * math.pi) * value, rel=1e-9)

    def test_induced_voltage_is_mutual_times_didt(self, write_case, simulator):
        """The ring's EMF equals M dI/dt of the drive loop, M from Grover, within 1 %."""
        built, readings, comparison = _readings(*write_case(COUPLED_LOOPS_NETLIST, COUPLED_LOOPS_SIDEFILE), simulator)
        # drive loop a -> V1 ... in the direction of the drive current: out of V1.1 (node a),
        # through R1 and back to V1.2; V1 drives current out of its + node through the circuit
        drive = _rectangle_sides(0, 0, 100, 20, clockwise=True)
        ring = _rectangle_sides(0, 30, 100, 60, clockwise=True)
        mutual = _loop_mutual(drive, ring) * 1e-3  # Grover's form scales with length: mm -> m
        # analytic RL ramp response: dI/dt -> slope / R1 once t >> L/R (tens of ns here)
        didt = (2 / 2e-6) / 10
        t = comparison.base
        late = (t > 1.0e-6) & (t < 1.9e-6)
        emf = readings["across_R2"].local[late] - readings["across_R3"].local[late]
        # the ring current circulates through R2 and back through R3: the two readings, both
        # taken p -> q, differ by the ring's EMF (Romer 1982)
        assert np.abs(emf).mean() == pytest.approx(abs(mutual) * didt, rel=0.01)

    def test_each_side_reads_current_times_its_resistance(self, write_case, simulator):
        """Readings on either side of the ring are I R2 and -I R3 (Romer, Am. J. Phys. 50, 1982)."""
        built, readings, comparison = _readings(*write_case(COUPLED_LOOPS_NETLIST, COUPLED_LOOPS_SIDEFILE), simulator)
        t = comparison.base
        late = (t > 1.0e-6) & (t < 1.9e-6)
        left = readings["across_R2"].local[late].mean()
        right = readings["across_R3"].local[late].mean()
        # same current, opposite direction through the two resistors: V2 / V3 = -R2 / R3
        assert left / right == pytest.approx(-100 / 900, rel=0.02)
        # the schematic alone says zero: the ring has no source
        assert np.max(np.abs(readings["across_R2"].ideal)) == 0.0


# A long solenoid threads a ring of 10 and 90 ohm; outside a long solenoid the field is nearly
# zero, so probe leads routed outward enclose (almost) no changing flux.
SOLENOID_RING_NETLIST = """ring of two resistors around a long solenoid
R1 top 0 10
R2 top 0 90
.tran 0.5n 200n
.end
"""

SOLENOID_RING_SIDEFILE = """
units = "mm"
wire_radius = 0.2

[terminals]
R1 = [[-30, 5, 0], [-30, -5, 0]]
R2 = [[30, 5, 0], [30, -5, 0]]

[[wire]]
net = "top"
path = ["R1.1", [-30, 20, 0], [30, 20, 0], "R2.1"]

[[wire]]
net = "0"
path = ["R1.2", [-30, -20, 0], [30, -20, 0], "R2.2"]

[[aggressor]]
name = "solenoid"
current = "PULSE(0 1 10n 100n 100n 1u 2u)"
coil = { center = [0, 0, 0], axis = [0, 0, 1], radius = 5, length = 400, turns = 200 }

[[probe]]
name = "left"
plus = "R1.1"
minus = "R1.2"
instrument = "ideal"
plus_lead = ["R1.1", [-60, 5, 0], [-100, 0.5, 0]]
minus_lead = ["R1.2", [-60, -5, 0], [-100, -0.5, 0]]

[[probe]]
name = "right"
plus = "R2.1"
minus = "R2.2"
instrument = "ideal"
plus_lead = ["R2.1", [60, 5, 0], [100, 0.5, 0]]
minus_lead = ["R2.2", [60, -5, 0], [100, -0.5, 0]]
"""


class TestRomerRing:
    def test_leads_enclosing_no_flux_read_the_local_voltage(self, write_case, simulator):
        """Leads routed away from a long solenoid read what a zero-area probe reads, within 2 %."""
        _, readings, comparison = _readings(*write_case(SOLENOID_RING_NETLIST, SOLENOID_RING_SIDEFILE), simulator)
        t = comparison.base
        # while the solenoid current ramps steadily the ring current is constant, so the only
        # changing flux is the solenoid's, which stays inside it; at the ramp's corners the
        # ring current itself changes and its own field links the lead loop (a real reading)
        ramp = (t > 40e-9) & (t < 105e-9)
        for name in ("left", "right"):
            r = readings[name]
            peak = np.max(np.abs(r.local[ramp]))
            assert np.max(np.abs(r.probed - r.local)[ramp]) < 0.02 * peak

    def test_two_sides_differ_by_the_solenoid_emf(self, write_case, simulator):
        """V_left - V_right is the EMF mu0 N pi a^2 / l dI/dt of the solenoid (Griffiths; Romer 1982)."""
        _, readings, comparison = _readings(*write_case(SOLENOID_RING_NETLIST, SOLENOID_RING_SIDEFILE), simulator)
        t = comparison.base
        ramp = (t > 50e-9) & (t < 105e-9)
        # ring around a long solenoid: M = mu0 N pi a^2 / l (PHYSICS.md; any textbook)
        mutual = MU0 * 200 * math.pi * 0.005**2 / 0.4
        didt = 1 / 100e-9
        difference = (readings["left"].local - readings["right"].local)[ramp]
        assert np.abs(difference).mean() == pytest.approx(mutual * didt, rel=0.02)
        # one current, opposite directions: each side reads I R on its side
        ratio = readings["left"].local[ramp].mean() / readings["right"].local[ramp].mean()
        assert ratio == pytest.approx(-10 / 90, rel=0.02)


FAST_EDGE_NETLIST = """stiff fast edge into a 1 k load
V1 src 0 PULSE(0 1 5n 0.5n 0.5n 1u 2u)
RS src out 1
RL out 0 1k
.tran 0.02n 150n
.end
"""

LONG_GROUND_SIDEFILE = """
units = "mm"
wire_radius = 0.25

[terminals]
RL = [[0, 0, 0], [0, 10, 0]]

[[probe]]
name = "long_ground"
plus = "RL.1"
minus = "RL.2"
instrument = "passive-10x"
plus_lead = ["RL.1", [0, 0, 120]]
minus_lead = ["RL.2", [50, 10, 0], [50, 10, 110], [0, 1, 120]]
"""


class TestLeadRinging:
    def test_long_ground_lead_rings_at_lc_resonance(self, write_case, simulator):
        """A 10x probe on a long ground lead rings at 1/(2 pi sqrt(L C)) within 5 %."""
        built, readings, _ = _readings(*write_case(FAST_EDGE_NETLIST, LONG_GROUND_SIDEFILE), simulator)
        loop = built.inductance.henry[built.inductance.index("probe:long_ground")]
        inductance = loop[built.inductance.index("probe:long_ground")]
        capacitance = 12e-12  # passive-10x input model (SPEC: typical value, common practice)
        # analytic LC resonance, L the extracted probe-loop inductance
        expected = 1 / (2 * math.pi * math.sqrt(inductance * capacitance))
        assert readings["long_ground"].ringing_hz == pytest.approx(expected, rel=0.05)

    def test_lead_inductance_is_about_a_nanohenry_per_mm(self, write_case):
        """The extracted probe loop is near 1 nH per mm of lead (common practice, no source)."""
        netlist, sidefile = write_case(FAST_EDGE_NETLIST, LONG_GROUND_SIDEFILE)
        built = build(netlist, sidefile)
        i = built.inductance.index("probe:long_ground")
        per_mm = built.inductance.henry[i, i] / (built.inductance.lengths_m[i] * 1e3)
        assert 0.5e-9 < per_mm < 1.5e-9


def _pickup_sidefile(leads: str) -> str:
    return f"""
units = "mm"
wire_radius = 0.1

[terminals]
R1 = [[0, 0, 0], [0, 2, 0]]

[[aggressor]]
name = "bus"
current = "PULSE(0 10 5n 20n 20n 1u 2u)"
path = [[-50, 20, 0], [250, 20, 0]]
radius = 1

[[probe]]
name = "pair"
plus = "R1.1"
minus = "R1.2"
instrument = "ideal"
{leads}
"""


PICKUP_NETLIST = """probe leads beside a bus carrying a fast current
R1 s 0 100
.tran 0.5n 60n
.end
"""


class TestTwistedPair:
    def test_twisting_cuts_pickup_tenfold(self, write_case, simulator):
        """A twisted pair picks up at least 10 times less than the same leads untwisted (common practice, no source)."""
        parallel = _pickup_sidefile(
            'plus_lead = ["R1.1", [2, 0.5, 0], [150, 0.5, 0]]\nminus_lead = ["R1.2", [2, 1.5, 0], [150, 1.5, 0]]'
        )
        twisted = _pickup_sidefile("leads = { route = [[0, 1, 0], [150, 1, 0]], spacing = 1.0, twist_pitch = 10 }")
        _, flat, _ = _readings(*write_case(PICKUP_NETLIST, parallel, "flat"), simulator)
        _, twist, _ = _readings(*write_case(PICKUP_NETLIST, twisted, "twist"), simulator)
        flat_pickup = np.max(np.abs(flat["pair"].probed - flat["pair"].local))
        twisted_pickup = np.max(np.abs(twist["pair"].probed - twist["pair"].local))
        assert flat_pickup > 0
        assert twisted_pickup < flat_pickup / 10


class TestCouplingModes:
    def test_one_way_and_full_coupling_agree_for_high_impedance_probe(self, write_case, simulator):
        """One-way and full K coupling agree within 0.5 % for a high-impedance probe (PHYSICS.md)."""
        # a fine time step: the lead ringing at ~150 MHz must be resolved for both to converge
        fine = SOLENOID_RING_NETLIST.replace(".tran 0.5n 200n", ".tran 0.05n 200n")
        # an active probe's input (10 Mohm || 1 pF; typical values, common practice, no source)
        active = SOLENOID_RING_SIDEFILE.replace('"ideal"', '"active"') + (
            '\n[instrument.active]\nresistance = "10meg"\ncapacitance = "1p"\n'
        )
        case = write_case(fine, active)
        _, one_way, one_way_run = _readings(*case, simulator, SynthesisOptions(coupling="one-way"))
        _, full, full_run = _readings(*case, simulator, SynthesisOptions(coupling="full"))
        # the scale is the ring's EMF (left - right); what one-way leaves out is the probe
        # current's own EMF back into the ring, which shows most on the 10 ohm side
        emf = np.max(np.abs(full["left"].probed - full["right"].probed))
        for name in ("left", "right"):
            # each run has its own time points: compare on the one-way run's
            coupled = np.interp(one_way_run.base, full_run.base, full[name].probed)
            assert np.max(np.abs(one_way[name].probed - coupled)) < 0.005 * emf


RESULT_KEYS = {"netlist", "sidefile", "analysis", "probes", "inductors", "couplings", "elapsed_s"}
PROBE_KEYS = {
    "name", "ideal_min", "ideal_max", "local_min", "local_max", "probed_min", "probed_max",
    "max_abs_error", "rms_error", "ringing_hz", "contributions", "instrument",
}


class TestResultDocument:
    def test_document_has_every_key_of_the_contract(self, write_case, tmp_path):
        """`run` returns SPEC's result document and writes the report folder."""
        netlist, sidefile = write_case(FAST_EDGE_NETLIST, LONG_GROUND_SIDEFILE)
        document = run(netlist, sidefile, tmp_path / "report")
        assert RESULT_KEYS <= set(document)
        assert document["analysis"] == "tran"
        (probe,) = document["probes"]
        assert PROBE_KEYS <= set(probe)
        assert set(probe["instrument"]) >= {"name", "resistance", "capacitance", "bandwidth"}
        for c in probe["contributions"]:
            assert set(c) == {"source", "mutual_h", "peak_v"}
        # beyond SPEC: the largest contribution, as summary.csv gives it
        assert (probe["top_source"], probe["top_peak_v"]) == (probe["contributions"][0]["source"],
                                                              probe["contributions"][0]["peak_v"])
        files = {p.name for p in (tmp_path / "report").iterdir()}
        assert {"readings.csv", "summary.csv", "result.json", "long_ground.png"} <= files
        header = (tmp_path / "report" / "readings.csv").read_text().splitlines()[0].split(",")
        assert header == ["time", "long_ground:ideal", "long_ground:local", "long_ground:probed"]

    def test_differential_instrument_fields(self, write_case):
        """The built-in differential instrument shows SPEC's values: 2 pF across, 1 Mohm each side to its reference."""
        differential = LONG_GROUND_SIDEFILE.replace('"passive-10x"', '"differential"')
        document = run(*write_case(FAST_EDGE_NETLIST, differential), None)
        (probe,) = document["probes"]
        # SPEC, "Built-in instruments" (typical values, common practice)
        assert probe["instrument"]["capacitance"] == pytest.approx(2e-12)
        assert probe["instrument"]["reference_resistance"] == pytest.approx(1e6)

    def test_max_abs_error_compares_probed_with_ideal(self, write_case, simulator):
        """max_abs_error and rms_error are taken of probed - ideal."""
        netlist, sidefile = write_case(FAST_EDGE_NETLIST, LONG_GROUND_SIDEFILE)
        built = build(netlist, sidefile)
        comparison, _, _ = simulate_and_compare(built, simulator)
        document = result_document(built, comparison, sidefile, 0.0)
        r = comparison.readings[0]
        error = r.probed - r.ideal
        assert document["probes"][0]["max_abs_error"] == pytest.approx(np.max(np.abs(error)))
        # rms over a uniform grid (.options interp): trapezoid rule against the plain mean
        assert document["probes"][0]["rms_error"] == pytest.approx(np.sqrt(np.mean(error**2)), rel=0.01)


class TestAcAnalysis:
    def test_probe_resonance_in_frequency(self, write_case, simulator):
        """In .ac the long-lead probe's |V| peaks at 1/(2 pi sqrt(L C)) and reads true at low f."""
        netlist = FAST_EDGE_NETLIST.replace("PULSE(0 1 5n 0.5n 0.5n 1u 2u)", "DC 0 AC 1").replace(
            ".tran 0.02n 150n", ".ac dec 400 1meg 1g"
        )
        built, readings, comparison = _readings(*write_case(netlist, LONG_GROUND_SIDEFILE), simulator)
        assert comparison.analysis == "ac"
        r = readings["long_ground"]
        f = comparison.base
        i = built.inductance.index("probe:long_ground")
        # analytic series LC: resonance at 1/(2 pi sqrt(L C)), C the 10x probe's 12 pF
        expected = 1 / (2 * math.pi * math.sqrt(built.inductance.henry[i, i] * 12e-12))
        assert f[np.argmax(np.abs(r.probed))] == pytest.approx(expected, rel=0.05)
        # far below resonance the probe reads the node: |probed| = |ideal| within 1 %
        assert abs(r.probed[0]) == pytest.approx(abs(r.ideal[0]), rel=0.01)


class TestLocalReading:
    def test_zero_area_reading_across_a_body_ignores_lead_radius(self, write_case, simulator):
        """Across a resistor the zero-area reading is I R, whatever radius the probe leads have."""
        thin_leads = LONG_GROUND_SIDEFILE.replace('instrument = "passive-10x"', 'instrument = "ideal"\nradius = 0.05')
        netlist, sidefile = write_case(FAST_EDGE_NETLIST, thin_leads)
        built = build(netlist, sidefile)
        comparison, _, augmented = simulate_and_compare(built, simulator)
        (reading,) = comparison.readings
        # Ohm's law on the load: the current through RL's body times 1 kohm
        current = np.asarray(augmented.vectors[built.augmented.current_vectors["body:RL"]])
        np.testing.assert_allclose(reading.local, current * 1e3, atol=1e-6 * np.max(np.abs(reading.local)))


class TestNumberedNodes:
    def test_nodes_named_by_numbers_are_read(self, write_case, simulator):
        """Nodes 1, 2, 0 (SPICE's oldest habit) give readings; ngspice names their vectors v(1), v(2)."""
        numbered = FAST_EDGE_NETLIST.replace(" src ", " 1 ").replace(" src", " 1").replace(" out", " 2")
        assert "RL 2 0 1k" in numbered
        netlist, sidefile = write_case(numbered, LONG_GROUND_SIDEFILE)
        _, readings, _ = _readings(netlist, sidefile, simulator)
        reading = readings["long_ground"]
        # Ohm's law on the divider: 1 V * 1000 / 1001 once the edge has settled
        assert np.max(reading.ideal) == pytest.approx(1000 / 1001, rel=1e-4)
        assert np.max(np.abs(reading.local)) == pytest.approx(1000 / 1001, rel=0.05)


class TestWarnings:
    def test_ac_without_ac_source_says_so(self, write_case):
        """An AC run of a netlist with no AC source warns that every reading is zero."""
        netlist, sidefile = write_case(FAST_EDGE_NETLIST, LONG_GROUND_SIDEFILE)
        document = run(netlist, sidefile, None, SynthesisOptions(analysis="ac dec 10 1k 100meg"))
        assert any("every AC reading is zero" in w for w in document["warnings"])
        assert all(probe["ideal_max"] == 0 for probe in document["probes"])

    def test_ngspice_warnings_reach_the_document(self, write_case):
        """ngspice's own warning about the original netlist (a loop of inductors at DC) is kept, labelled."""
        looped = FAST_EDGE_NETLIST.replace("RL out 0 1k\n", "RL out 0 1k\nL1 out x 1u\nL2 out x 1u\nR3 x 0 1k\n")
        document = run(*write_case(looped, LONG_GROUND_SIDEFILE), None)
        assert any(w.startswith("ngspice, original: ") and "singular matrix" in w for w in document["warnings"])
