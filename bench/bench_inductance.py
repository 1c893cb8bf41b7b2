"""Throughput, memory and accuracy-versus-cost of the inductance kernels.

Throughput: ``lumped_inductance`` on a helix of ``n`` segments split into 10 conductors
(``n (n - 1) / 2`` segment pairs). Every run is a fresh interpreter, so its peak resident
memory (VmHWM, the interpreter and numpy included) belongs to that run alone and no
run inherits another's caches or heap. In the same process, after the kernel, the in-run
reference times a plain numpy elementwise expression of similar arithmetic per pair
(4 sqrt, 4 log, 2 atan2, about 120 flops) over ``min(pairs, 2,000,000)`` pairs and scales
it to the same pair count; ``fraction_of_numpy_speed`` is reference time / kernel time of
that run.

Accuracy versus cost: ``mutual_filaments`` (closed form) against
``scipy.integrate.dblquad`` of Neumann's integral on the same random pairs; the speed ratio
is taken run by run, and the worst relative difference is over pairs, each difference
divided by ``max(|M_quad|, 1e-3 max |M_quad|)`` so that nearly perpendicular pairs (M close
to zero) do not dominate.

Run: ``.venv/bin/python bench/bench_inductance.py [--sizes 1000 5000 20000] [--repeats 5]``
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from scipy import integrate

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from augment.inductance import MU0, lumped_inductance, mutual_filaments  # noqa: E402

TARGET_PAIRS_PER_S = 5e6
TARGET_5000_S = 3.0
MEMORY_LIMIT_MB = 1000.0
_REFERENCE_MAX_PAIRS = 2_000_000


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
    for _ in range(max(1, pairs // chunk)):
        r = [np.sqrt(x * x + y * y + z * z) for _ in range(4)]
        acc = sum(np.log((q + x) / (q - 0.05 * x)) * y for q in r)
        acc += np.arctan2(x * y - z * r[0], y * z + x * r[1]) + np.arctan2(x * z - y * r[2], x * y + z * r[3])
        acc += (x * y - y * z) * (z * x - x * y) + (x - y) * (y - z) * (z - x)
    return (time.perf_counter() - start) / (max(1, pairs // chunk) * chunk) * pairs


def _one_run(n: int) -> dict:
    """The body of one throughput run; called in a fresh interpreter by :func:`run`."""
    lumped_inductance(*_helix_segments(48))  # first-call costs stay out of the timing
    geometry = _helix_segments(n)
    pairs = n * (n - 1) // 2
    start = time.perf_counter()
    lumped_inductance(*geometry)
    kernel_s = time.perf_counter() - start
    peak_mb = _peak_resident_bytes() / 1e6
    reference_s = _numpy_reference(min(pairs, _REFERENCE_MAX_PAIRS)) * pairs / min(pairs, _REFERENCE_MAX_PAIRS)
    return {"kernel_s": kernel_s, "peak_rss_mb": peak_mb, "numpy_reference_s": reference_s}


def _peak_resident_bytes() -> int:
    """This process's peak resident set (VmHWM).

    Not ``ru_maxrss``: Linux keeps that across ``execve``, so a child started by a big
    parent reports the parent's size.
    """
    with open("/proc/self/status", encoding="ascii") as status:
        for line in status:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
    raise RuntimeError("no VmHWM in /proc/self/status")


def run(sizes=(1000, 5000, 20000), repeats: int = 5, accuracy_pairs: int = 1000) -> list[dict]:
    """The rows of :func:`throughput`, then the row of :func:`accuracy`."""
    return [*throughput(sizes, repeats), accuracy(repeats, accuracy_pairs)]


def throughput(sizes=(1000, 5000, 20000), repeats: int = 5) -> list[dict]:
    """One row per size: ``what``, ``segments``, ``pairs`` and ``runs`` with lists of
    ``kernel_s``, ``pairs_per_s``, ``peak_rss_mb``, ``numpy_reference_s`` and
    ``fraction_of_numpy_speed``, one value per run."""
    rows = []
    for n in sizes:
        measured = [_run_in_child(n) for _ in range(repeats)]
        pairs = n * (n - 1) // 2
        runs = {key: [m[key] for m in measured] for key in measured[0]}
        runs["pairs_per_s"] = [pairs / t for t in runs["kernel_s"]]
        runs["fraction_of_numpy_speed"] = [r / t for r, t in zip(runs["numpy_reference_s"], runs["kernel_s"])]
        rows.append({"what": "lumped_inductance", "segments": n, "pairs": pairs, "runs": runs})
    return rows


def _run_in_child(n: int) -> dict:
    done = subprocess.run([sys.executable, __file__, "--child", str(n)], capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise RuntimeError(f"the {n}-segment run failed:\n{done.stderr}")
    return json.loads(done.stdout)


def _random_pairs(count: int):
    rng = np.random.default_rng(1)
    return rng.uniform(-1, 1, (4, 1000, 3))[:, :count]


def _neumann_dblquad(a0, a1, b0, b1) -> np.ndarray:
    """Neumann's integral of each pair by ``scipy.integrate.dblquad`` (relative 1e-10)."""
    values = np.empty(len(a0))
    for k in range(len(a0)):
        da, db = a1[k] - a0[k], b1[k] - b0[k]
        integral, _ = integrate.dblquad(
            lambda t, s: 1.0 / np.linalg.norm(a0[k] + s * da - b0[k] - t * db), 0, 1, 0, 1, epsabs=0, epsrel=1e-10)
        values[k] = MU0 / (4 * np.pi) * np.dot(da, db) * integral
    return values


def accuracy(repeats: int = 5, pairs: int = 1000) -> dict:
    """Closed form vs dblquad on the same random pairs (the first ``pairs`` of 1,000 seeded ones).

    Returns ``what``, ``pairs`` and ``runs`` with lists of ``closed_form_s``, ``dblquad_s``,
    ``speed_ratio`` (dblquad / closed form) and ``worst_relative_difference``, one per run.
    """
    a0, a1, b0, b1 = _random_pairs(pairs)
    closed_s, quad_s, worst = [], [], []
    for _ in range(repeats):
        start = time.perf_counter()
        fast = mutual_filaments(a0, a1, b0, b1)
        closed_s.append(time.perf_counter() - start)
        start = time.perf_counter()
        slow = _neumann_dblquad(a0, a1, b0, b1)
        quad_s.append(time.perf_counter() - start)
        relative = np.abs(fast - slow) / np.maximum(np.abs(slow), 1e-3 * np.abs(slow).max())
        worst.append(float(relative.max()))
    return {"what": "closed form vs dblquad", "pairs": pairs,
            "runs": {"closed_form_s": closed_s, "dblquad_s": quad_s,
                     "speed_ratio": [q / c for q, c in zip(quad_s, closed_s)], "worst_relative_difference": worst}}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[1000, 5000, 20000])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--child", type=int, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(_one_run(args.child)))
        return 0
    for row in run(args.sizes, args.repeats):
        med = {key: statistics.median(values) for key, values in row["runs"].items()}
        print(row["what"], {k: v for k, v in row.items() if k != "runs"}, med)
    return 0


if __name__ == "__main__":
    sys.exit(main())
