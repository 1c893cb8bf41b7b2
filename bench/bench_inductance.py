"""Throughput, memory and accuracy-versus-cost of the inductance kernels.

Run ``python bench/bench_inductance.py``; ``run()`` returns one dict per measurement.
"""

from __future__ import annotations

import time
import tracemalloc

import numpy as np
from scipy import integrate

from augment.inductance import MU0, lumped_inductance, mutual_filaments


def _helix_segments(n: int):
    """n segments of a 48-segment-a-turn helix split into 10 conductors."""
    phi = np.linspace(0.0, 2 * np.pi * n / 48, n + 1)
    points = np.c_[0.01 * np.cos(phi), 0.01 * np.sin(phi), 0.5e-3 * phi / (2 * np.pi)]
    return points[:-1], points[1:], np.full(n, 1e-4), np.arange(n) * 10 // n, 10


def _numpy_reference(pairs: int) -> float:
    """Seconds for a plain numpy elementwise expression of similar arithmetic (4 log, 2 atan2, ~120 flops)."""
    rng = np.random.default_rng(0)
    chunk = 1 << 14
    x, y, z = (rng.uniform(0.1, 1.0, chunk) for _ in range(3))
    start = time.perf_counter()
    for _ in range(pairs // chunk):
        r = [np.sqrt(x * x + y * y + z * z) for _ in range(4)]
        acc = sum(np.log((q + x) / (q - 0.05 * x)) * y for q in r)
        acc += np.arctan2(x * y - z * r[0], y * z + x * r[1]) + np.arctan2(x * z - y * r[2], x * y + z * r[3])
        acc += (x * y - y * z) * (z * x - x * y) + (x - y) * (y - z) * (z - x)
    return time.perf_counter() - start


def _stats(values):
    return {"median": float(np.median(values)), "min": float(np.min(values)), "max": float(np.max(values))}


def run(sizes=(1000, 5000, 20000), repeats=5) -> list[dict]:
    """Measure lumping throughput and memory for each size, then closed form vs quadrature."""
    rows = []
    for n in sizes:
        geometry = _helix_segments(n)
        pairs = n * (n - 1) // 2
        times = []
        for _ in range(repeats if n <= 5000 else 1):
            start = time.perf_counter()
            lumped_inductance(*geometry)
            times.append(time.perf_counter() - start)
        tracemalloc.start()
        lumped_inductance(*geometry)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        reference = [_numpy_reference(min(pairs, 2_000_000)) / min(pairs, 2_000_000) * pairs for _ in range(3)]
        t = _stats(times)
        rows.append({
            "what": "lumped_inductance", "segments": n, "pairs": pairs, "seconds": t,
            "pairs_per_s": pairs / t["median"], "peak_memory_mb": peak / 2**20,
            "numpy_reference_s": float(np.median(reference)),
            "fraction_of_numpy_speed": float(np.median(reference)) / t["median"],
        })
    rows.append(_accuracy(repeats))
    return rows


def _accuracy(repeats: int) -> dict:
    """Closed form vs scipy.integrate.dblquad of Neumann's integral on the same 1,000 random pairs."""
    rng = np.random.default_rng(1)
    a0, a1, b0, b1 = rng.uniform(-1, 1, (4, 1000, 3))
    closed = []
    for _ in range(repeats):
        start = time.perf_counter()
        fast = mutual_filaments(a0, a1, b0, b1)
        closed.append(time.perf_counter() - start)
    start = time.perf_counter()
    slow = np.empty(1000)
    for k in range(1000):
        da, db = a1[k] - a0[k], b1[k] - b0[k]
        value, _ = integrate.dblquad(
            lambda t, s: 1.0 / np.linalg.norm(a0[k] + s * da - b0[k] - t * db), 0, 1, 0, 1, epsabs=0, epsrel=1e-10)
        slow[k] = MU0 / (4 * np.pi) * np.dot(da, db) * value
    quad_s = time.perf_counter() - start
    t = _stats(closed)
    relative = np.abs(fast - slow) / np.maximum(np.abs(slow), 1e-3 * np.abs(slow).max())
    return {"what": "closed form vs dblquad", "pairs": 1000, "closed_form_s": t, "dblquad_s": quad_s,
            "speed_ratio": quad_s / t["median"], "worst_relative_difference": float(relative.max())}


if __name__ == "__main__":
    for row in run():
        print(row)
