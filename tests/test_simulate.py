"""Tests for augment/simulate.py, run through the real ngspice shared library."""

import signal
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from augment.errors import SimulatorError
from augment.simulate import SimResult, Simulator, simulate

RC_OHM = 1e3
RC_FARAD = 1e-6
TAU_S = RC_OHM * RC_FARAD

# Scenario of our own: a 1 V step (1 ns edges) into R = 1 kOhm, C = 1 uF.
RC_STEP = f"""rc step
v1 in 0 pulse(0 1 0 1n 1n 1 2)
r1 in out {RC_OHM:g}
c1 out 0 {RC_FARAD:g}
.options interp
.tran 10u 5m 0 1u
.end
"""

# The same step without interpolation: ngspice's own time points.
RC_STEP_RAW = RC_STEP.replace(".options interp\n", "")

RC_LOWPASS_AC = f"""rc low-pass
v1 in 0 dc 0 ac 1
r1 in out {RC_OHM:g}
c1 out 0 {RC_FARAD:g}
.ac dec 20 1 100k
.end
"""

DIVIDER_OP = """divider
v1 top 0 2
r1 top mid 3k
r2 mid 0 1k
.op
.end
"""

# Two parallel voltage sources of different value have no solution.
VOLTAGE_LOOP = """loop
v1 in 0 1
v2 in 0 2
r1 in 0 1k
.tran 1u 1m
.end
"""

# A 1 MHz sine forced to 1 ns steps for 10 s: billions of points, never finishes.
ENDLESS_TRAN = """endless
v1 in 0 sin(0 1 1meg)
r1 in 0 1k
.tran 1n 10 0 1n
.end
"""


@pytest.fixture(scope="module")
def simulator():
    with Simulator(timeout_s=60) as shared:
        yield shared


class TestSimulatorRun:
    def test_rc_step_matches_exponential(self, simulator):
        """The capacitor voltage of an RC step follows 1 - exp(-t/RC) within 0.1 %."""
        result = simulator.run(RC_STEP, "rc.cir")
        time_s = result.vectors["time"]
        # First-order RC charging, any circuits textbook: v(t) = 1 - exp(-t/RC).
        expected = 1 - np.exp(-time_s / TAU_S)
        np.testing.assert_allclose(result.vectors["out"], expected, rtol=0, atol=1e-3)
        assert result.analysis == "tran"

    def test_interp_puts_time_on_tstep_grid(self, simulator):
        """With .options interp the time vector is exactly k * TSTEP, 0 to TSTOP."""
        time_s = simulator.run(RC_STEP, "rc.cir").vectors["time"]
        # .tran 10u 5m: 501 points 10 us apart, by the definition of TSTEP.
        np.testing.assert_allclose(time_s, np.arange(501) * 10e-6, rtol=1e-12, atol=1e-15)

    def test_ac_lowpass_matches_transfer_function(self, simulator):
        """An RC low-pass has |H| = 1/sqrt(1+(wRC)^2) and phase -atan(wRC)."""
        result = simulator.run(RC_LOWPASS_AC, "lowpass.cir")
        omega = 2 * np.pi * result.vectors["frequency"]
        response = result.vectors["out"]
        # H(jw) = 1 / (1 + jwRC), first-order low-pass.
        np.testing.assert_allclose(np.abs(response), 1 / np.sqrt(1 + (omega * TAU_S) ** 2), rtol=1e-9)
        np.testing.assert_allclose(np.angle(response), -np.arctan(omega * TAU_S), rtol=1e-9)
        assert result.analysis == "ac"
        assert result.vectors["frequency"].dtype == np.float64

    def test_operating_point_of_divider(self, simulator):
        """An operating point gives the divider voltage and the source current."""
        result = simulator.run(DIVIDER_OP, "divider.cir")
        # Voltage divider: 2 V * 1k / (3k + 1k); current 2 V / 4k, flowing out of v1's + node.
        assert result.vectors["mid"][0] == pytest.approx(0.5, rel=1e-12)
        assert result.vectors["v1#branch"][0] == pytest.approx(-0.5e-3, rel=1e-12)
        assert result.analysis == "op"

    def test_vectors_are_read_only(self, simulator):
        """Neither the mapping nor the arrays it holds can be changed."""
        result = simulator.run(DIVIDER_OP, "divider.cir")
        with pytest.raises(ValueError):
            result.vectors["mid"][0] = 0.0
        with pytest.raises(TypeError):
            result.vectors["mid"] = np.zeros(1)

    def test_names_are_lower_case(self, simulator):
        """Node and branch names come back lower-cased whatever the netlist's case."""
        result = simulator.run(DIVIDER_OP.upper(), "DIVIDER.CIR")
        assert set(result.vectors) == {"top", "mid", "v1#branch"}

    def test_two_circuits_give_independent_results(self, simulator):
        """A second circuit in the same worker sees nothing of the first, and back again."""
        first = simulator.run(RC_STEP, "rc.cir")
        second = simulator.run(DIVIDER_OP, "divider.cir")
        again = simulator.run(RC_STEP, "rc.cir")
        assert set(second.vectors) == {"top", "mid", "v1#branch"}
        assert set(again.vectors) == set(first.vectors)
        np.testing.assert_array_equal(again.vectors["out"], first.vectors["out"])

    def test_failed_load_does_not_rerun_previous_circuit(self, simulator):
        """After a good run, a netlist that fails to load is an error, not the old result."""
        simulator.run(DIVIDER_OP, "divider.cir")
        broken = DIVIDER_OP.replace("r2 mid 0 1k", "x1 mid 0 nosuch")
        with pytest.raises(SimulatorError, match="unknown subckt"):
            simulator.run(broken, "broken.cir")

    def test_interp_does_not_leak_into_next_circuit(self, simulator):
        """A circuit without interp after one with it gets ngspice's own time points."""
        simulator.run(RC_STEP, "rc.cir")
        after = simulator.run(RC_STEP_RAW, "raw.cir").vectors["time"]
        # The reference is the same netlist in a worker that has never seen interp.
        fresh = simulate(RC_STEP_RAW, "raw.cir").vectors["time"]
        np.testing.assert_array_equal(after, fresh)
        assert len(fresh) != 501

    def test_unknown_subcircuit_quotes_ngspice(self, simulator):
        """A netlist ngspice rejects raises SimulatorError with ngspice's own words."""
        broken = DIVIDER_OP.replace("r2 mid 0 1k", "xfoo mid 0 nosuch")
        with pytest.raises(SimulatorError) as caught:
            simulator.run(broken, "ring_aug.cir")
        assert str(caught.value) == 'ngspice failed on ring_aug.cir: "Error: unknown subckt: xfoo mid 0 nosuch"'
        assert caught.value.exit_code == 3

    def test_bad_value_quotes_line(self, simulator):
        """A value ngspice cannot read is reported with the line ngspice names."""
        broken = DIVIDER_OP.replace("r2 mid 0 1k", "c2 mid 0 zz")
        with pytest.raises(SimulatorError, match=r'"Error on line 4 .*c2 mid 0 zz unknown parameter \(zz\)"'):
            simulator.run(broken, "bad_value.cir")

    def test_missing_analysis_is_an_error(self, simulator):
        """A netlist with no analysis line fails instead of returning an empty plot."""
        with pytest.raises(SimulatorError, match="No job .* run simulation not started"):
            simulator.run(DIVIDER_OP.replace(".op\n", ""), "no_analysis.cir")

    def test_timestep_too_small_gives_hint(self, simulator):
        """A circuit with no solution quotes 'timestep too small', the node and what to try."""
        with pytest.raises(SimulatorError) as caught:
            simulator.run(VOLTAGE_LOOP, "loop.cir")
        message = str(caught.value)
        assert "Timestep too small" in message
        assert "singular matrix at node(s) v1#branch" in message
        assert "reltol" in message and "floating nodes" in message

    def test_coupling_above_one_is_an_error(self, simulator):
        """ngspice's complaint about an indefinite inductive system is an error, not a result."""
        netlist = textwrap.dedent("""\
            coupled
            v1 in 0 pulse(0 1 0 1n 1n 1u 2u)
            l1 in a 1u
            l2 a 0 1u
            r1 a 0 1
            k1 l1 l2 1.5
            .tran 1n 1u
            .end
            """)
        with pytest.raises(SimulatorError, match=r"is not positive definite \|k1\| > 1.*every \|k\| < 1"):
            simulator.run(netlist, "coupled.cir")

    def test_unrecoverable_error_replaces_worker(self, simulator):
        """After ngspice says it cannot recover, the error is quoted and the next run works."""
        broken = DIVIDER_OP.replace(".op\n", ".subckt half a b\nr1 a b 1\n.op\n")
        with pytest.raises(SimulatorError, match="Mismatch of .subckt ... .ends.*cannot recover"):
            simulator.run(broken, "unclosed.cir")
        # Voltage divider: 2 V * 1k / (3k + 1k).
        assert simulator.run(DIVIDER_OP, "divider.cir").vectors["mid"][0] == pytest.approx(0.5)

    def test_missing_end_is_supplied(self, simulator):
        """A netlist without a .end line still runs (ngspice alone would load nothing)."""
        result = simulator.run(DIVIDER_OP.replace(".end\n", ""), "no_end.cir")
        # Voltage divider: 2 V * 1k / (3k + 1k).
        assert result.vectors["mid"][0] == pytest.approx(0.5, rel=1e-12)

    def test_warning_of_successful_run_is_kept(self, simulator):
        """ngspice's singular-matrix warning for a floating node reaches the messages."""
        netlist = DIVIDER_OP.replace("r2 mid 0 1k", "r2 mid 0 1k\nc1 mid float 1n")
        result = simulator.run(netlist, "floating.cir")
        assert "Warning: singular matrix: check node float" in result.messages
        # The floating capacitor carries no DC current, so the divider is unchanged; the
        # tolerance allows for the conductances ngspice's gmin stepping leaves (~1e-9).
        assert result.vectors["mid"][0] == pytest.approx(0.5, rel=1e-6)

    def test_control_block_is_stripped(self, simulator):
        """A .control block is removed before loading (it would fail here) and a message says so."""
        netlist = DIVIDER_OP.replace(".end\n", ".control\nlet bad = no_such_vector\n.endc\n.end\n")
        result = simulator.run(netlist, "with_control.cir")
        assert result.vectors["mid"][0] == pytest.approx(0.5, rel=1e-12)
        assert any(".control" in message for message in result.messages)

    def test_elapsed_is_measured(self, simulator):
        """The run time is ngspice's own, positive and shorter than the whole call."""
        result = simulator.run(RC_STEP, "rc.cir")
        assert isinstance(result, SimResult)
        assert 0 < result.elapsed_s < 60

    def test_timeout_stops_worker_and_next_run_works(self):
        """A run past the timeout is reported and the next run gets a fresh worker."""
        with Simulator(timeout_s=1.0) as short:
            with pytest.raises(SimulatorError, match="timed out after 1 s while simulating endless.cir"):
                short.run(ENDLESS_TRAN, "endless.cir")
            # Voltage divider: 2 V * 1k / (3k + 1k).
            assert short.run(DIVIDER_OP, "divider.cir").vectors["mid"][0] == pytest.approx(0.5)

    def test_crash_is_reported_and_next_run_works(self):
        """A worker that dies of SIGSEGV (standing in for a library abort) is reported, then replaced."""
        with Simulator(timeout_s=30) as fragile:
            fragile.run(DIVIDER_OP, "divider.cir")
            with pytest.raises(SimulatorError, match=r"ngspice crashed \(signal 11\) while simulating ring.cir"):
                fragile._simulate_library_abort(signal.SIGSEGV, "ring.cir")
            # Voltage divider: 2 V * 1k / (3k + 1k).
            assert fragile.run(DIVIDER_OP, "divider.cir").vectors["mid"][0] == pytest.approx(0.5)


class TestSimulatorClose:
    def test_close_then_run_starts_again(self):
        """close() stops the worker; a later run() starts a new one and works."""
        sim = Simulator(timeout_s=30)
        sim.run(DIVIDER_OP, "divider.cir")
        sim.close()
        sim.close()
        assert sim._process is None
        # Voltage divider: 2 V * 1k / (3k + 1k).
        assert sim.run(DIVIDER_OP, "divider.cir").vectors["mid"][0] == pytest.approx(0.5)
        sim.close()


class TestSimulate:
    def test_one_shot_run(self):
        """simulate() runs one netlist in a worker of its own and returns its vectors."""
        result = simulate(DIVIDER_OP, "divider.cir", timeout_s=30)
        # Voltage divider: 2 V * 1k / (3k + 1k).
        assert result.vectors["mid"][0] == pytest.approx(0.5, rel=1e-12)

    def test_parent_stays_clean_and_quiet(self):
        """The caller's process never imports PySpice, and ngspice prints nothing to its terminal."""
        script = textwrap.dedent(f"""\
            import sys
            from augment.simulate import simulate
            if __name__ == "__main__":
                result = simulate({DIVIDER_OP!r}, "divider.cir", timeout_s=30)
                # Voltage divider: 2 V * 1k / (3k + 1k), exact in binary floating point.
                sys.exit(0 if "PySpice" not in sys.modules and result.vectors["mid"][0] == 0.5 else 1)
            """)
        done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=60)
        assert done.returncode == 0
        assert done.stdout == "" and done.stderr == ""

    def test_import_does_not_load_pyspice(self):
        """Importing the module stays cheap: PySpice is left for the worker."""
        done = subprocess.run(
            [sys.executable, "-c", "import sys, augment.simulate; print('PySpice' in sys.modules)"],
            capture_output=True, text=True, timeout=60,
        )
        assert done.stdout.strip() == "False"


THREE_INDUCTORS = """three coupled inductors
V1 a 0 PULSE(0 1 0 1n 1n 10n 20n)
R1 a b 10
L1 b 0 10n
L2 c 0 10n
R2 c 0 10
L3 d 0 10n
R3 d 0 10
{couplings}
.tran 0.1n 20n
.end
"""


class TestCouplingNotes:
    def test_missing_k_line_is_neither_a_failure_nor_a_warning(self, simulator):
        """Three coupled inductors with one K line missing simulate, and ngspice's note that
        the set is incomplete is dropped: the tool leaves such lines out on purpose."""
        # L1-L2 and L2-L3 coupled, L1-L3 not: ngspice takes the missing coefficient as 0
        result = simulator.run(THREE_INDUCTORS.format(couplings="K1 L1 L2 0.5\nK2 L2 L3 0.1"))
        assert result.vectors["time"].size > 10
        assert not any("incomplete" in m.lower() or "inductive system" in m.lower() for m in result.messages)

    def test_indefinite_coupling_is_a_failure(self, simulator):
        """A coupled set that is not positive definite is refused with a hint."""
        # k12 = k23 = 0.9 and k13 = -0.9 make the 3x3 inductance matrix indefinite
        text = THREE_INDUCTORS.format(couplings="K1 L1 L2 0.9\nK2 L2 L3 0.9\nK3 L1 L3 -0.9")
        with pytest.raises(SimulatorError, match="positive definite"):
            simulator.run(text)
