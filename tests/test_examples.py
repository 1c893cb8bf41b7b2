"""Every example under netlists/ runs through the CLI, and its numbers make physical sense.

Each example is run once per module (batch plans with two workers, single runs with
``augment run --json``) and the tests read the figures and waveforms it wrote. Expected
values come from Faraday's law with the inductances that ``augment extract`` reports, from
the LC resonance of the probe loop, and from Ohm's law on the schematic.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from augment.cli import main

EXAMPLES = Path(__file__).resolve().parent.parent / "netlists"
SENSING = EXAMPLES / "sensing_loop"
HALF_BRIDGE = EXAMPLES / "half_bridge"
SHUNT = EXAMPLES / "shunt"
GROUND_LOOP = EXAMPLES / "ground_loop"
# passive-10x input capacitance (SPEC, built-in instruments: typical value, common practice)
PASSIVE_10X_F = 12e-12


def _invoke(*args: str):
    result = CliRunner().invoke(main, [str(a) for a in args])
    assert "Traceback" not in result.output
    return result


def _extract(netlist: Path, sidefile: Path) -> dict:
    result = _invoke("extract", netlist, "-g", sidefile, "--json")
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def _henry(document: dict, conductor: str) -> float:
    return next(c["henry"] for c in document["conductors"] if c["id"] == conductor)


def _mutual(document: dict, a: str, b: str) -> float:
    for c in document["couplings"]:
        if {c["a"], c["b"]} == {a, b}:
            return c["mutual_h"]
    return 0.0


def _readings(folder: Path) -> dict[str, np.ndarray]:
    with open(folder / "readings.csv", newline="") as handle:
        rows = list(csv.reader(handle))
    columns = np.array(rows[1:], dtype=float).T
    return dict(zip(rows[0], columns))


def _summary(folder: Path) -> list[dict]:
    with open(folder / "summary.csv", newline="") as handle:
        return list(csv.DictReader(handle))


def _window(readings: dict, column: str, start: float, stop: float) -> np.ndarray:
    t = readings["time"]
    return readings[column][(t >= start) & (t <= stop)]


def _dominant_hz(readings: dict, column: str, start: float, stop: float) -> float:
    """Frequency of the strongest spectral line of a waveform in a window (mean removed)."""
    t = readings["time"]
    keep = (t >= start) & (t <= stop)
    x = readings[column][keep] - readings[column][keep].mean()
    step = float(np.median(np.diff(t[keep])))
    padded = 16 * len(x)
    spectrum = np.abs(np.fft.rfft(x * np.hanning(len(x)), padded))
    return float(np.fft.rfftfreq(padded, step)[np.argmax(spectrum[1:]) + 1])


def _lc_hz(henry: float, farad: float) -> float:
    return 1.0 / (2.0 * math.pi * math.sqrt(henry * farad))


@pytest.fixture(scope="module")
def sensing(tmp_path_factory):
    """The sensing-loop plan, run once: (exit code, batch folder)."""
    out = tmp_path_factory.mktemp("sensing") / "batch"
    result = _invoke("batch", SENSING / "plan.toml", "-o", out, "--jobs", "2")
    return result, out


@pytest.fixture(scope="module")
def half_bridge(tmp_path_factory):
    """The half-bridge plan, run once: (exit code, batch folder)."""
    out = tmp_path_factory.mktemp("half_bridge") / "batch"
    result = _invoke("batch", HALF_BRIDGE / "plan.toml", "-o", out, "--jobs", "2")
    return result, out


def _run(tmp_path_factory, netlist: Path, sidefile: Path):
    out = tmp_path_factory.mktemp(netlist.stem) / "report"
    result = _invoke("run", netlist, "-g", sidefile, "-o", out, "--json")
    return result, out


@pytest.fixture(scope="module")
def shunt(tmp_path_factory):
    """The shunt example, run once: (CLI result, report folder)."""
    return _run(tmp_path_factory, SHUNT / "shunt.cir", SHUNT / "sense.toml")


@pytest.fixture(scope="module")
def ground_loop(tmp_path_factory):
    """The ground-loop example, run once: (CLI result, report folder)."""
    return _run(tmp_path_factory, GROUND_LOOP / "two_scopes.cir", GROUND_LOOP / "board.toml")


class TestSensingLoop:
    """netlists/sensing_loop: a ring of 10 and 33 ohm around a pulsed solenoid."""

    def _ring_emf(self) -> float:
        """Ring EMF while the drive ramps: M_ring * V_drive / L_coil (Faraday's law)."""
        doc = _extract(SENSING / "ring.cir", SENSING / "ring-left.toml")
        # the ring's loop, RA.1 -> RB.1 -> RB.2 -> RA.2 -> RA.1, against each conductor's own
        # direction (wires from first to last point, bodies from terminal 1 to 2)
        signs = {"wire:top:1": 1, "body:RB": 1, "wire:ret:1/1": -1, "wire:ret:1/2": -1, "body:RA": -1}
        mutual = sum(s * _mutual(doc, c, "coil:LDRIVE") for c, s in signs.items())
        # the coil current ramps at V/L while the 0.5 ohm drive resistor drops little
        return abs(mutual) * 48.0 / _henry(doc, "coil:LDRIVE")

    def test_plan_passes(self, sensing):
        """The plan exits 0 and every probe keeps its limits."""
        result, out = sensing
        assert result.exit_code == 0, result.output
        assert {row["status"] for row in _summary(out)} == {"ok"}

    def test_schematic_says_zero(self, sensing):
        """The ring has no source, so the ideal reading is zero everywhere."""
        _, out = sensing
        for row in _summary(out):
            assert float(row["ideal_min"]) == 0.0 and float(row["ideal_max"]) == 0.0

    def test_left_reads_ra_share_of_the_ring_emf(self, sensing):
        """The zero-area reading across RA is the ring EMF times RA / (RA + RB), within 5 %."""
        _, out = sensing
        readings = _readings(out / "ring-left")
        plateau = abs(_window(readings, "left_open:local", 120e-9, 220e-9).mean())
        # series ring: I = EMF / (RA + RB), reading I * RA (Romer 1982)
        assert plateau == pytest.approx(self._ring_emf() * 10 / 43, rel=0.05)

    def test_sides_differ_by_the_ring_emf(self, sensing):
        """Routed round the solenoid, the same points read the opposite sign; the two readings differ by about the ring's EMF."""
        _, out = sensing
        left = _window(_readings(out / "ring-left"), "left_open:probed", 120e-9, 220e-9).mean()
        right = _window(_readings(out / "ring-right"), "right_routed:probed", 120e-9, 220e-9).mean()
        assert np.sign(left) == -np.sign(right)
        # Romer 1982: the two paths differ by the EMF of the flux between them; the probe loop
        # lies 4 mm inside the ring, so within 10 % of the ring's own EMF
        assert abs(right - left) == pytest.approx(self._ring_emf(), rel=0.10)

    def test_twisted_pair_picks_up_less(self, sensing):
        """The twisted pair's reading stays closer to the zero-area reading than the open leads'."""
        _, out = sensing
        readings = _readings(out / "ring-left")
        open_pickup = np.max(np.abs(readings["left_open:probed"] - readings["left_open:local"]))
        twisted_pickup = np.max(np.abs(readings["left_twisted:probed"] - readings["left_twisted:local"]))
        assert twisted_pickup < 0.5 * open_pickup

    def test_routed_leads_ring_at_lc_resonance(self, sensing):
        """The long routed probe loop rings with the probe's 12 pF at 1/(2 pi sqrt(L C)), within 5 %."""
        _, out = sensing
        readings = _readings(out / "ring-right")
        readings["pickup"] = readings["right_routed:probed"] - readings["right_routed:local"]
        loop = _henry(_extract(SENSING / "ring.cir", SENSING / "ring-right.toml"), "probe:right_routed")
        # analytic LC resonance of the probe loop with the instrument's input capacitance
        expected = _lc_hz(loop, PASSIVE_10X_F)
        assert _dominant_hz(readings, "pickup", 40e-9, 220e-9) == pytest.approx(expected, rel=0.05)


class TestHalfBridge:
    """netlists/half_bridge: a 48 V switching node with three probe setups."""

    def test_plan_breaks_only_the_long_ground_lead(self, half_bridge):
        """The plan exits 1 by design: the long ground lead breaks its limits, the others keep them."""
        result, out = half_bridge
        assert result.exit_code == 1, result.output
        status = {row["case"]: row["status"] for row in _summary(out)}
        assert status == {"long-ground": "limit", "spring": "ok", "differential": "ok"}

    def test_schematic_plateau_is_the_divider(self, half_bridge):
        """The ideal plateau is 48 V * RLOAD / (RLOAD + RON)."""
        _, out = half_bridge
        for row in _summary(out):
            # Ohm's law on the schematic: 48 * 4 / 4.05
            assert float(row["ideal_max"]) == pytest.approx(48 * 4 / 4.05, rel=1e-4)

    def test_long_ground_rings_at_lc_resonance(self, half_bridge):
        """The reported ringing is 1/(2 pi sqrt(L C)) of the extracted ground-lead loop and 12 pF, within 5 %."""
        _, out = half_bridge
        row = next(r for r in _summary(out) if r["case"] == "long-ground")
        loop = _henry(_extract(HALF_BRIDGE / "switch_node.cir", HALF_BRIDGE / "long_ground.toml"),
                      "probe:long_ground")
        # analytic LC resonance
        assert float(row["ringing_hz"]) == pytest.approx(_lc_hz(loop, PASSIVE_10X_F), rel=0.05)

    def test_lead_is_about_a_nanohenry_per_millimetre(self):
        """The long ground lead's loop is within a factor of two of 1 nH per mm (common practice, no source)."""
        doc = _extract(HALF_BRIDGE / "switch_node.cir", HALF_BRIDGE / "long_ground.toml")
        probe = next(c for c in doc["conductors"] if c["id"] == "probe:long_ground")
        # rule of thumb, common practice, no source: about 1 nH per mm of lead
        assert 0.5e-6 < probe["henry"] / probe["length_m"] < 2e-6

    def test_overshoot_shrinks_with_the_probe_loop(self, half_bridge):
        """Long ground overshoots most; spring and differential stay within 2 V of the plateau."""
        _, out = half_bridge
        rows = {row["case"]: row for row in _summary(out)}
        overshoot = {case: float(row["probed_max"]) - float(row["ideal_max"]) for case, row in rows.items()}
        assert overshoot["long-ground"] > 10.0
        assert overshoot["spring"] < 2.0 and overshoot["differential"] < 2.0

    def test_local_reading_shows_the_power_loop(self, half_bridge):
        """Even the zero-area reading lags the schematic's edge: the power loop's own inductance."""
        _, out = half_bridge
        readings = _readings(out / "spring")
        # 2 ns after the 4 ns edge ends the schematic is at its plateau; with about 25 nH and
        # 4 ohm (L/R about 6 ns) the load current is still well below it
        at = np.argmin(np.abs(readings["time"] - 26e-9))
        assert readings["spring:ideal"][at] == pytest.approx(48 * 4 / 4.05, rel=1e-3)
        assert readings["spring:local"][at] < 0.8 * readings["spring:ideal"][at]


class TestShunt:
    """netlists/shunt: a 10 mohm shunt in a 20 A pulsed loop."""

    def test_runs(self, shunt):
        """`augment run --json` exits 0 and reports both probes."""
        result, _ = shunt
        assert result.exit_code == 0, result.output
        names = [p["name"] for p in json.loads(result.stdout)["probes"]]
        assert names == ["kelvin_twisted", "open_leads"]

    def test_signal_is_the_shunt_drop(self, shunt):
        """The schematic reads 12 V / 0.61 ohm * 10 mohm, and the zero-area reading reaches it within 10 %."""
        _, out = shunt
        readings = _readings(out)
        # Ohm's law on the schematic
        expected = 12 / 0.61 * 0.01
        assert readings["open_leads:ideal"].max() == pytest.approx(expected, rel=1e-3)
        assert readings["open_leads:local"].max() == pytest.approx(expected, rel=0.10)

    def test_open_leads_pickup_exceeds_the_signal(self, shunt):
        """The open lead loop picks up more than the 0.2 V signal; the twisted pair less than the open leads."""
        _, out = shunt
        readings = _readings(out)
        pickup = {p: np.max(np.abs(readings[f"{p}:probed"] - readings[f"{p}:local"]))
                  for p in ("kelvin_twisted", "open_leads")}
        assert pickup["open_leads"] > readings["open_leads:ideal"].max()
        assert pickup["kelvin_twisted"] < 0.5 * pickup["open_leads"]


class TestGroundLoop:
    """netlists/ground_loop: two channels whose grounds meet at the scope chassis."""

    def test_runs(self, ground_loop):
        """`augment run --json` exits 0 and reports both channels."""
        result, _ = ground_loop
        assert result.exit_code == 0, result.output
        assert len(json.loads(result.stdout)["probes"]) == 2

    def test_schematic_is_flat_during_the_common_mode_pulse(self, ground_loop):
        """The ideal reading is the logic level 3.3 V * 100 / 122 throughout the common-mode pulse."""
        _, out = ground_loop
        readings = _readings(out)
        # Ohm's law on the schematic: one ground node, so the common-mode source drives nothing
        level = _window(readings, "load_end:ideal", 60e-9, 150e-9)
        assert level == pytest.approx(np.full_like(level, 3.3 * 100 / 122), rel=1e-4)

    def test_load_end_shifts_during_the_common_mode_pulse(self, ground_loop):
        """The common-mode current in the ground copper shifts the load-end reading by tens of millivolts, more than the driver end's."""
        _, out = ground_loop
        readings = _readings(out)
        shift = {}
        for probe in ("driver_end", "load_end"):
            before = _window(readings, f"{probe}:local", 65e-9, 80e-9).mean()
            during = _window(readings, f"{probe}:local", 100e-9, 140e-9).mean()
            shift[probe] = during - before
        assert shift["load_end"] < -0.05
        assert abs(shift["driver_end"]) < abs(shift["load_end"])
