"""Compare: each probe's ideal, local and probed readings on one base, and their error.

``ideal`` is V(plus net) - V(minus net) in the original netlist; ``local`` is what a zero-area
probe reads along the straight path between the two points in the augmented circuit;
``probed`` is the voltage at the instrument input with this lead geometry. The error is
probed - ideal; its ringing and the share of induced EMF from each conductor say where it
comes from.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from augment.errors import SimulatorError
from augment.synthesis import Augmented, ProbeNodes

RINGING_MIN_PERIODS = 3
RINGING_THRESHOLD = 0.05  # of the error's peak after the edge (SPEC)


@dataclass(frozen=True, slots=True)
class Contribution:
    """Induced EMF in a probe loop from one current-carrying conductor.

    The loop is the probe's leads closed by the straight path between its two points, so
    the contributions add up to what the leads pick up beyond a zero-area probe
    (probed - local, less the leads' own L di/dt and the instrument's response).
    """

    source: str  # conductor id
    mutual_h: float
    peak_v: float


@dataclass(frozen=True, slots=True)
class Reading:
    """One probe's three waveforms (complex for AC) and the figures derived from them."""

    probe: ProbeNodes
    ideal: np.ndarray
    local: np.ndarray
    probed: np.ndarray
    ringing_hz: float | None
    contributions: tuple[Contribution, ...]

    @property
    def error(self) -> np.ndarray:
        return self.probed - self.ideal


@dataclass(frozen=True, slots=True)
class Comparison:
    """All readings on their common base (time in s, or frequency in Hz)."""

    analysis: str
    base: np.ndarray
    readings: tuple[Reading, ...]


def _node_voltage(vectors: Mapping[str, np.ndarray], node: str, size: int, which: str) -> np.ndarray:
    if node == "0":
        return np.zeros(size)
    # ngspice names the vector of a node that starts with a digit v(NODE), others NODE
    for key in (node.lower(), f"v({node.lower()})"):
        if key in vectors:
            return np.asarray(vectors[key])
    raise SimulatorError(f"the {which} simulation has no vector for node '{node}'")


def _across(vectors: Mapping[str, np.ndarray], nodes: tuple[str, str], size: int) -> np.ndarray:
    """V(node) - V(reference) of a reading of the augmented run."""
    node, reference = nodes
    return _node_voltage(vectors, node, size, "augmented") - _node_voltage(vectors, reference, size, "augmented")


def _base(vectors: Mapping[str, np.ndarray], analysis: str) -> np.ndarray:
    key = "frequency" if analysis == "ac" else "time"
    base = np.asarray(vectors[key])
    return base.real if np.iscomplexobj(base) else base


def ringing_frequency(base: np.ndarray, ideal: np.ndarray, error: np.ndarray) -> float | None:
    """Frequency of the strongest oscillation in ``error`` after its largest edge.

    The window runs from the steepest point of the error (an edge of the ideal waveform, or
    the pickup of a field source) to the end of the run, resampled on a uniform grid. The
    strongest line of the spectrum of its derivative whose period fits three times in the
    window is taken, the error is band-passed around that line (zero-phase, so crossings
    stay in place) and its crossings are counted over the stretch where the oscillation's
    envelope is above 5 % of its peak (SPEC). Fewer than three periods there, an
    oscillation under 1 % of the error's own peak (numerical noise), or a line with fewer
    than four samples a period mean no ringing: None.
    The frequency is the number of half-periods over the time they span.
    """
    if len(base) < 16:
        return None
    window = _after_largest_edge(base, ideal, error)
    if window is None:
        return None
    t_raw, x_raw = base[window], error[window]
    if len(t_raw) < 16 or t_raw[-1] <= t_raw[0] or np.ptp(x_raw) == 0:
        return None
    steps = np.diff(t_raw)
    dt = float(np.median(steps[steps > 0]))
    count = int(min(max(len(t_raw), (t_raw[-1] - t_raw[0]) / dt), 2**18))
    t = np.linspace(t_raw[0], t_raw[-1], count)
    x = np.interp(t, t_raw, x_raw)
    x -= np.polyval(np.polyfit(t - t[0], x, 1), t - t[0])  # the edge's own slope is no ringing
    dt = t[1] - t[0]
    spectrum = np.abs(np.fft.rfft(x * np.hanning(len(x))))
    frequencies = np.fft.rfftfreq(len(x), dt)
    usable = frequencies >= RINGING_MIN_PERIODS / (t[-1] - t[0])
    if not np.any(usable[1:]):
        return None
    # weighted by frequency (the spectrum of dx/dt): a ringing line stands out of the broad
    # low-frequency hump that the edge itself leaves in the window
    peak_f = frequencies[usable][np.argmax((spectrum * frequencies)[usable])]
    if peak_f > 0.25 / dt:
        return None  # under four samples a period: the corners of the time steps, not a ringing
    low, high = 0.7 * peak_f, min(1.3 * peak_f, 0.99 * 0.5 / dt)
    if not 0 < low < high:
        return None
    analytic = _band_analytic(x, dt, low, high)
    ring, envelope = analytic.real, np.abs(analytic)
    if envelope.max() < 0.01 * np.max(np.abs(x_raw)):
        return None
    # the stretch around the envelope's peak where it stays above 5 % of that peak
    top = int(np.argmax(envelope))
    above = envelope >= RINGING_THRESHOLD * envelope[top]
    first = top - int(np.argmin(above[top::-1])) + 1 if not above[: top + 1].all() else 0
    last = top + int(np.argmin(above[top:])) if not above[top:].all() else len(above)
    y, ty = ring[first:last], t[first:last]
    k = np.nonzero(np.signbit(y[1:]) != np.signbit(y[:-1]))[0]
    if len(k) < 2 * RINGING_MIN_PERIODS + 1:
        return None
    instants = ty[k] - y[k] * (ty[k + 1] - ty[k]) / (y[k + 1] - y[k])
    span = instants[-1] - instants[0]
    return float((len(instants) - 1) / (2 * span)) if span > 0 else None


def _band_analytic(x: np.ndarray, dt: float, low: float, high: float) -> np.ndarray:
    """The analytic signal of ``x`` band-passed between ``low`` and ``high`` (Hz), zero phase.

    Done in one pass in the frequency domain: the gain is 1 / (1 + D**4), with
    D = (f**2 - f0**2) / (f B), f0 = sqrt(low high) and B = high - low. That is the squared
    magnitude of a second-order Butterworth band-pass, so the same as running that filter
    forwards and backwards. The negative frequencies are dropped and the positive ones
    doubled, which gives the analytic signal (Marple, IEEE Trans. Signal Processing 47,
    1999; the method of ``scipy.signal.hilbert``, which the tests check it against).
    Zero padding to twice the length keeps the circular wrap-around out of the window.
    numpy's FFT serves here because importing ``scipy.signal`` costs about 0.8 s. That is
    most of the start-up of a run or of a batch worker.
    """
    size = 2 * len(x)
    f = np.fft.fftfreq(size, dt)
    centre_sq, width = low * high, high - low
    positive = f > 0
    detune = (f[positive] ** 2 - centre_sq) / (f[positive] * width)
    gain = np.zeros(size)
    gain[positive] = 2.0 / (1.0 + detune**4)
    return np.fft.ifft(np.fft.fft(x, size) * gain)[: len(x)]


def _after_largest_edge(base: np.ndarray, ideal: np.ndarray, error: np.ndarray) -> slice | None:
    """Samples from the error's largest edge to the end of the run.

    The largest edge is the error's steepest point, moved past the rest of an ideal edge it
    sits on. Later, smaller edges stay in the window: they re-excite the same lead ringing,
    and cutting there would hide ringing that outlasts them.
    """
    error_slope = np.abs(np.gradient(error, base))
    if not np.any(error_slope > 0):
        return None
    start = int(np.argmax(error_slope))
    ideal_slope = np.abs(np.gradient(ideal, base))
    if np.any(ideal_slope > 0):
        steep = ideal_slope > 0.1 * ideal_slope.max()
        while start < len(base) - 1 and steep[start]:
            start += 1
    return slice(start, len(base))


def compare(augmented: Augmented, ideal_vectors: Mapping, augmented_vectors: Mapping) -> Comparison:
    """Put every probe's readings on one base and derive its error figures."""
    analysis = augmented.analysis
    base = _base(augmented_vectors, analysis)
    ideal_base = _base(ideal_vectors, analysis)
    size = len(base)
    readings = []
    derivative = {
        cid: _derivative(base, _node_voltage(augmented_vectors, vector, size, "augmented"), analysis)
        for cid, vector in augmented.current_vectors.items()
    }
    for probe in augmented.probes:
        ideal = _node_voltage(ideal_vectors, probe.plus_net, len(ideal_base), "original") - _node_voltage(
            ideal_vectors, probe.minus_net, len(ideal_base), "original"
        )
        if len(ideal_base) != size or not np.allclose(ideal_base, base, rtol=1e-9, atol=0):
            # each run has its own time points: the schematic's reading is interpolated
            ideal = np.interp(base, ideal_base, ideal.real) + (
                1j * np.interp(base, ideal_base, ideal.imag) if np.iscomplexobj(ideal) else 0
            )
        local = _across(augmented_vectors, probe.local, size)
        probed = _across(augmented_vectors, probe.probed, size)
        contributions = sorted(
            (
                Contribution(cid, m, float(np.max(np.abs(m * derivative[cid]))) if size else 0.0)
                for cid, m in augmented.loop_mutuals[probe.name].items()
                if m != 0.0 and cid in derivative
            ),
            key=lambda c: -c.peak_v,
        )
        ringing = None
        if analysis == "tran":
            ringing = ringing_frequency(base, ideal, probed - ideal)
        readings.append(Reading(probe, ideal, local, probed, ringing, tuple(contributions)))
    return Comparison(analysis, base, tuple(readings))


def _derivative(base: np.ndarray, current: np.ndarray, analysis: str) -> np.ndarray:
    """dI/dt of a conductor's current: j omega I in AC, finite differences on the time grid."""
    if analysis == "ac":
        return 2j * np.pi * base * current
    return np.gradient(current, base) if len(base) > 1 else np.zeros_like(current)


def _rms(base: np.ndarray, values: np.ndarray) -> float:
    magnitude = np.abs(values) ** 2
    if len(base) < 2 or base[-1] == base[0]:
        return float(np.sqrt(magnitude.mean())) if len(values) else 0.0
    return float(np.sqrt(np.trapezoid(magnitude, base) / (base[-1] - base[0])))


def summary(comparison: Comparison, reading: Reading) -> dict:
    """The figures of one probe, keyed as in the result document (SPEC)."""

    def span(values: np.ndarray) -> tuple[float, float]:
        v = np.abs(values) if np.iscomplexobj(values) else values
        return (float(v.min()), float(v.max())) if len(v) else (math.nan, math.nan)

    row: dict = {"name": reading.probe.name}
    for label in ("ideal", "local", "probed"):
        lo, hi = span(getattr(reading, label))
        row[f"{label}_min"], row[f"{label}_max"], row[f"{label}_pp"] = lo, hi, hi - lo
    error = reading.error
    row["max_abs_error"] = float(np.max(np.abs(error))) if len(error) else 0.0
    row["rms_error"] = _rms(comparison.base, error)
    row["ringing_hz"] = reading.ringing_hz
    row["contributions"] = [
        {"source": c.source, "mutual_h": c.mutual_h, "peak_v": c.peak_v} for c in reading.contributions
    ]
    return row
