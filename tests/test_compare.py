"""Tests for augment/compare.py: readings on one base, error figures, ringing, contributions."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest

from augment.compare import _band_analytic, compare, ringing_frequency, summary
from augment.sidefile import BUILTIN_INSTRUMENTS
from augment.synthesis import Augmented, ProbeNodes


def _step_with_ringing(f_hz: float, decay_s: float, t_end: float = 400e-9, dt: float = 0.1e-9):
    """A 1 V step at 20 ns and, after it, an error ringing at f_hz that decays with decay_s."""
    t = np.arange(0, t_end, dt)
    ideal = np.where(t >= 20e-9, 1.0, 0.0)
    after = np.clip(t - 20e-9, 0, None)
    error = np.where(t >= 20e-9, -np.cos(2 * np.pi * f_hz * after) * np.exp(-after / decay_s), 0.0)
    return t, ideal, error


class TestRingingFrequency:
    def test_damped_cosine_frequency(self):
        """A decaying cosine's frequency is found within 1 % (analytic waveform)."""
        t, ideal, error = _step_with_ringing(70e6, 60e-9)
        # the zero crossings of exp(-t/tau) cos(2 pi f t) are exactly those of the cosine
        assert ringing_frequency(t, ideal, error) == pytest.approx(70e6, rel=0.01)

    def test_too_few_periods_is_none(self):
        """Fewer than three periods above 5 % of the peak is no ringing (SPEC)."""
        # 5 % of the peak is reached after tau ln 20 = 3 tau; one period is 1/f = 14.3 ns
        t, ideal, error = _step_with_ringing(70e6, 10e-9)
        assert 3 * 10e-9 * 70e6 < 3  # fewer than three periods before it fades under 5 %
        assert ringing_frequency(t, ideal, error) is None

    def test_flat_error_is_none(self):
        """No error, no ringing."""
        t, ideal, _ = _step_with_ringing(70e6, 60e-9)
        assert ringing_frequency(t, ideal, np.zeros_like(t)) is None

    def test_pulse_without_ringing_is_none(self):
        """Rectangular error pulses, sampled at 0.1 ns, have no ringing: none, not a line near Nyquist."""
        t = np.arange(0, 400e-9, 0.1e-9)
        ideal = np.clip((t - 10e-9) / 3e-9, 0, 1)
        # M dI/dt of a field source's 10 ns current ramps up and down: flat pulses, no ringing
        error = np.where((t >= 50e-9) & (t < 60e-9), 1.0, 0.0) - np.where((t >= 160e-9) & (t < 170e-9), 1.0, 0.0)
        assert ringing_frequency(t, ideal, error) is None

    def test_later_smaller_edge_does_not_take_over(self):
        """The ringing after the largest edge is reported, not a weaker one after a later edge."""
        t, ideal, error = _step_with_ringing(50e6, 80e-9)
        # a second, smaller edge at 300 ns with ringing of another frequency after it
        late = t >= 300e-9
        ideal = ideal + np.where(late, 0.5, 0.0)
        error = np.where(late, 0.1 * np.sin(2 * np.pi * 200e6 * (t - 300e-9)), error)
        assert ringing_frequency(t, ideal, error) == pytest.approx(50e6, rel=0.01)

    @staticmethod
    def _pulse_train(half_period: float, f_hz: float, tau: float):
        """Square edges every ``half_period``, each re-exciting exp(-t/tau) cos(2 pi f t)."""
        t = np.arange(0, 400e-9, 0.05e-9)
        edges = np.arange(20e-9, t[-1], half_period)
        ideal, error = np.zeros_like(t), np.zeros_like(t)
        for n, edge in enumerate(edges):
            after = t - edge
            sign = 1 if n % 2 == 0 else -1
            ideal += sign * np.clip(after / 1e-9, 0, 1)
            error = np.where(after >= 0, sign * np.exp(-after / tau) * np.cos(2 * np.pi * f_hz * after), error)
        return t, ideal, error

    def test_edge_train_gives_the_ringing_not_a_harmonic(self):
        """Edges 120 ns apart, each ringing at 37 MHz and fading within the next, give 37 MHz
        within 2 %, not a harmonic of the edge rate."""
        # 5 % of the envelope is reached after 3 tau = 120 ns: 4.4 periods, cut by the next edge
        t, ideal, error = self._pulse_train(120e-9, 37e6, 40e-9)
        # the zero crossings of exp(-t/tau) cos(2 pi f t) are exactly those of the cosine
        assert ringing_frequency(t, ideal, error) == pytest.approx(37e6, rel=0.02)

    @pytest.mark.parametrize("seed", range(20))
    def test_random_damped_ringing(self, seed):
        """Damped cosines of random frequency, decay, phase, sampling and noise, within 2 %.

        The reference is the damped frequency f sqrt(1 - 1/(2 pi f tau)**2) of
        exp(-t/tau) cos(2 pi f t) (analytic). Decays last at least 2.5 periods, so
        more than three periods stay above 5 %.
        """
        rng = np.random.default_rng(seed)
        f_hz = rng.uniform(20e6, 400e6)
        tau = rng.uniform(2.5, 8) / f_hz
        dt = rng.uniform(0.04, 0.25) / f_hz  # four samples a period at the least, as the estimator asks
        t = np.arange(0, 20e-9 + rng.uniform(12, 40) / f_hz, dt)
        rise = rng.uniform(0.05, 0.5) / f_hz
        ideal = np.clip((t - 20e-9) / rise, 0, 1)
        after = np.clip(t - 20e-9, 0, None)
        error = np.where(t >= 20e-9, -np.exp(-after / tau) * np.cos(2 * np.pi * f_hz * after + rng.uniform(-0.5, 0.5)), 0)
        error += rng.normal(0, 1e-3, len(t))
        damped = f_hz * math.sqrt(1 - (1 / (2 * math.pi * f_hz * tau)) ** 2)
        assert ringing_frequency(t, ideal, error) == pytest.approx(damped, rel=0.02)


class TestBandAnalytic:
    def test_matches_scipy_filtfilt_and_hilbert(self):
        """The one-pass band-pass and analytic signal match scipy.signal (reference library).

        The reference is butter(2, band) run by sosfiltfilt, then hilbert. It is compared
        away from the ends, where the two handle the edges differently, and well below
        Nyquist, where the bilinear transform's warping is small.
        """
        from scipy import signal

        dt, n = 1e-10, 4000
        t = np.arange(n) * dt
        rng = np.random.default_rng(3)
        x = np.sin(2 * np.pi * 100e6 * t) + 0.5 * np.sin(2 * np.pi * 30e6 * t) + 0.1 * rng.normal(size=n)
        low, high = 70e6, 130e6
        nyquist = 0.5 / dt
        sos = signal.butter(2, [low / nyquist, high / nyquist], btype="bandpass", output="sos")
        reference = signal.hilbert(signal.sosfiltfilt(sos, x))
        ours = _band_analytic(x, dt, low, high)
        inner = slice(n // 5, -n // 5)
        scale = np.max(np.abs(reference[inner]))
        assert np.max(np.abs(ours[inner] - reference[inner])) < 0.01 * scale
        # the 100 MHz tone passes with unit gain, the 30 MHz one is stopped
        assert np.abs(ours[inner]).mean() == pytest.approx(1.0, rel=0.02)


def _augmented(probe: ProbeNodes, mutual: float) -> Augmented:
    return Augmented(
        text="", original_text="", analysis="tran", probes=(probe,),
        current_vectors={"wire:n1:1": "lx_w#branch"}, probe_mutuals={probe.name: {"wire:n1:1": mutual}},
        loop_mutuals={probe.name: {"wire:n1:1": mutual}},
        inductor_names={}, inductors=0, couplings=0,
    )


PROBE = ProbeNodes(
    name="p", plus_net="a", minus_net="0", probed=("r_p_probed", "0"), local=("r_p_local", "0"),
    instrument=BUILTIN_INSTRUMENTS["ideal"], conductor="probe:p", lead_length_m=0.1,
)


class TestCompare:
    def test_readings_and_error_figures(self):
        """ideal is V(plus) - V(minus) of the original; error figures are of probed - ideal."""
        t = np.linspace(0, 1e-6, 1001)
        ideal = np.sin(2 * np.pi * 1e6 * t)
        probed = ideal + 0.1
        original = {"time": t, "a": ideal}
        augmented = {
            "time": t, "r_p_probed": probed, "r_p_local": ideal,
            # a 2 A/us ramp in wire:n1:1
            "lx_w#branch": 2.0 * t / 1e-6,
        }
        comparison = compare(_augmented(PROBE, 5e-9), original, augmented)
        (reading,) = comparison.readings
        np.testing.assert_array_equal(reading.ideal, ideal)
        row = summary(comparison, reading)
        assert row["max_abs_error"] == pytest.approx(0.1)
        assert row["rms_error"] == pytest.approx(0.1)
        assert row["ideal_max"] == pytest.approx(1.0, abs=1e-5)
        # contribution: M dI/dt = 5 nH * 2 A/us = 10 mV
        (c,) = row["contributions"]
        assert c == {"source": "wire:n1:1", "mutual_h": 5e-9, "peak_v": pytest.approx(0.01)}

    def test_ideal_is_interpolated_onto_the_augmented_base(self):
        """A different original time base is brought onto the augmented one."""
        t = np.linspace(0, 1e-6, 101)
        coarse = np.linspace(0, 1e-6, 11)
        original = {"time": coarse, "a": coarse * 1e6}
        augmented = {"time": t, "r_p_probed": t * 1e6, "r_p_local": t * 1e6, "lx_w#branch": np.zeros_like(t)}
        (reading,) = compare(_augmented(PROBE, 0.0), original, augmented).readings
        np.testing.assert_allclose(reading.ideal, t * 1e6, atol=1e-12)

    def test_ac_figures_use_magnitudes(self):
        """For AC the spans are of |V| and the error is the complex difference's magnitude."""
        f = np.logspace(3, 6, 31)
        ideal = 1 / (1 + 1j * f / 1e5)
        probed = ideal * 1.1
        original = {"frequency": f, "a": ideal}
        augmented = {"frequency": f, "r_p_probed": probed, "r_p_local": ideal, "lx_w#branch": np.zeros(31, complex)}
        ac = replace(_augmented(PROBE, 0.0), analysis="ac")
        comparison = compare(ac, original, augmented)
        row = summary(comparison, comparison.readings[0])
        assert row["probed_max"] == pytest.approx(1.1 * abs(ideal).max())
        assert row["max_abs_error"] == pytest.approx(0.1 * abs(ideal).max())
        assert math.isfinite(row["rms_error"])
