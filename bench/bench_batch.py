"""Benchmark of `augment batch` with one and with two local workers.

Writes a plan of ``cases`` small cases (a scenario of our own: a fast step into a resistive
load, two 10x probes across it with short and with long ground leads, each case with its
own load value), runs it with ``jobs=1`` and ``jobs=2``, each run in a fresh
``augment batch`` process (start-up included), and reports the median, min and max wall
time of ``repeats`` runs each and the ratio of the two medians. On a two-core machine the
target is a median ratio of at most 0.6. Other work on the machine skews the medians, so
the ratio of the two minimum times and the load average are reported too.

Run: ``.venv/bin/python bench/bench_batch.py [--cases 16] [--repeats 5]``
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

_ROOT = Path(__file__).resolve().parent.parent

TARGET_RATIO = 0.6

# A 5 V step from a 50 ohm source into a load, each case with its own load resistor.
_NETLIST = """divider {index}
V1 in 0 PULSE(0 5 5n 1n 1n 200n 400n)
R1 in out 50
R2 out 0 {r2}
.tran 0.05n 120n
.end
"""

# Two 10x probes across the load: short leads side by side, and a ground lead looped wide.
_SIDEFILE = """units = "mm"
wire_radius = 0.25

[terminals]
R2 = [[0, 0, 0], [0, 10, 0]]

[[probe]]
name = "short_ground"
plus = "R2.1"
minus = "R2.2"
instrument = "passive-10x"
plus_lead = ["R2.1", [-5, 0, 5], [-5, 50, 5]]
minus_lead = ["R2.2", [-6, 10, 5], [-6, 50, 5]]

[[probe]]
name = "long_ground"
plus = "R2.1"
minus = "R2.2"
instrument = "passive-10x"
plus_lead = ["R2.1", [0, 0, 150]]
minus_lead = ["R2.2", [60, 10, 0], [60, 10, 130], [0, 1, 150]]
"""


def write_plan(folder: Path, cases: int) -> Path:
    """A plan of ``cases`` divider cases in ``folder``; returns the plan's path."""
    (folder / "across.toml").write_text(_SIDEFILE)
    entries = []
    for index in range(cases):
        (folder / f"divider{index}.cir").write_text(_NETLIST.format(index=index, r2=1000 + 10 * index))
        entries.append(f'[[case]]\nname = "d{index}"\nnetlist = "divider{index}.cir"\nsidefile = "across.toml"\n')
    plan = folder / "plan.toml"
    plan.write_text("\n".join(entries))
    return plan


def _time_once(plan: Path, out: Path, jobs: int) -> float:
    # A fresh `augment batch` process each time, as a user runs it: interpreter, imports
    # and worker start-up included.
    command = [sys.executable, "-c", "from augment.cli import main; main()",
               "batch", str(plan), "-o", str(out), "--jobs", str(jobs)]
    start = time.perf_counter()
    done = subprocess.run(command, capture_output=True, text=True, env={**os.environ, "PYTHONPATH": str(_ROOT)})
    elapsed = time.perf_counter() - start
    if done.returncode != 0:
        raise RuntimeError(f"the benchmark plan failed (exit {done.returncode}):\n{done.stderr}")
    return elapsed


def run(cases: int = 16, repeats: int = 5) -> list[dict]:
    """Time the plan with 1 and 2 workers, alternating; one row per worker count.

    Each row has ``jobs``, ``cases``, ``median_s``, ``min_s``, ``max_s``, ``repeats`` and
    ``times_s`` (every run); the two-worker row adds ``ratio_per_run`` (its time over the
    one-worker time of the same repeat), ``ratio_to_one_job`` (of the medians),
    ``target_met`` and ``load_average_1min``.
    """
    rows = []
    with tempfile.TemporaryDirectory(prefix="augment-bench-batch-") as scratch:
        folder = Path(scratch)
        plan = write_plan(folder, cases)
        times: dict[int, list[float]] = {1: [], 2: []}
        for repeat in range(repeats):
            # Alternate the order so that drift of the machine hits both alike.
            for jobs in ((1, 2) if repeat % 2 == 0 else (2, 1)):
                times[jobs].append(_time_once(plan, folder / f"out-{jobs}-{repeat}", jobs))
        for jobs, measured in times.items():
            rows.append({"jobs": jobs, "cases": cases, "median_s": statistics.median(measured),
                         "min_s": min(measured), "max_s": max(measured), "repeats": repeats,
                         "times_s": measured})
    for row in rows:
        row["ratio_to_one_job"] = row["median_s"] / rows[0]["median_s"]
        row["min_ratio_to_one_job"] = row["min_s"] / rows[0]["min_s"]
    rows[1]["ratio_per_run"] = [two / one for two, one in zip(times[2], times[1])]
    rows[1]["target_met"] = rows[1]["ratio_to_one_job"] <= TARGET_RATIO
    rows[1]["load_average_1min"] = os.getloadavg()[0]
    return rows


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=16)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args(argv)
    rows = run(args.cases, args.repeats)
    print(f"{'jobs':>4} {'cases':>5} {'median s':>9} {'min s':>8} {'max s':>8} {'ratio':>6} {'min ratio':>9}")
    for row in rows:
        print(f"{row['jobs']:>4} {row['cases']:>5} {row['median_s']:>9.3f} {row['min_s']:>8.3f} "
              f"{row['max_s']:>8.3f} {row['ratio_to_one_job']:>6.2f} {row['min_ratio_to_one_job']:>9.2f}")
    met = rows[1]["target_met"]
    print(f"jobs 2 / jobs 1 <= {TARGET_RATIO}: {'met' if met else 'MISSED'} "
          f"(load average at the end {rows[1]['load_average_1min']:.2f})")
    return 0 if met else 1


if __name__ == "__main__":
    sys.exit(main())
