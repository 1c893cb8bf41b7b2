"""Benchmark of the netlist parser and writer on generated flat netlists.

Generates an RC/RL ladder with sources of ``n`` elements, then times
``write_netlist(parse_netlist_text(text))``: median of ``repeats`` runs with min and max, and
the ratio of the largest size's median to the one half its size (linearity).

Run: ``.venv/bin/python bench/bench_netlist.py [--sizes 10000 100000 200000] [--repeats 5]``
"""

from __future__ import annotations

import argparse
import gc
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from augment.netlist import parse_netlist_text, write_netlist  # noqa: E402

TARGET_100K_S = 4.0
LINEARITY_LIMIT = 2.2


def generate(n: int) -> str:
    """A flat netlist of ``n`` elements: a ladder of R, L and C with a few sources and K."""
    lines = [f"generated ladder of {n} elements", "* benchmark netlist", ".param rbase=1k"]
    lines.append("V1 n0 0 DC 0 PULSE(0 1 0 1n 1n 5n 10n)")
    count = 1
    stage = 0
    while count < n:
        kind = count % 4
        if kind == 0 and count % 100 == 0:
            # One statement in a hundred takes the full LALR parse (an expression value).
            lines.append(f"R{count} n{stage} n{stage + 1} {{rbase*{1 + stage % 7}}}")
            stage += 1
        elif kind == 0:
            lines.append(f"R{count} n{stage} n{stage + 1} {1 + stage % 97}k")
            stage += 1
        elif kind == 1:
            lines.append(f"C{count} n{stage} 0 {10 + stage % 13}p")
        elif kind == 2:
            lines.append(f"L{count} n{stage} n{stage + 1} 1n")
            stage += 1
        else:
            lines.append(f"K{count} L{count - 1} L{count - 5 if count > 5 else count - 1} 0.1" if count > 6 else f"R{count} n{stage} 0 1meg")
        count += 1
    lines += [".tran 0.1n 20n", ".end"]
    return "\n".join(lines) + "\n"


def _time_once(text: str) -> float:
    # Garbage left by the previous run is collected outside the timed region.
    gc.collect()
    start = time.perf_counter()
    write_netlist(parse_netlist_text(text, "bench.cir"))
    return time.perf_counter() - start


def run(sizes=(10_000, 100_000, 200_000), repeats: int = 5) -> list[dict]:
    """Time parse+write for each size; one row per size with median, min, max in seconds."""
    rows = []
    for n in sizes:
        text = generate(n)
        _time_once(text)  # builds the cached parser and warms up
        times = [_time_once(text) for _ in range(repeats)]
        rows.append({"elements": n, "median_s": statistics.median(times), "min_s": min(times),
                     "max_s": max(times), "repeats": repeats, "bytes": len(text)})
    by_size = {row["elements"]: row for row in rows}
    for row in rows:
        half = by_size.get(row["elements"] // 2)
        row["ratio_to_half"] = row["median_s"] / half["median_s"] if half else None
    return rows


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000, 200_000])
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args(argv)
    rows = run(args.sizes, args.repeats)
    print(f"{'elements':>9} {'median s':>9} {'min s':>8} {'max s':>8} {'ratio':>6}")
    for row in rows:
        ratio = f"{row['ratio_to_half']:.2f}" if row["ratio_to_half"] else "-"
        print(f"{row['elements']:>9} {row['median_s']:>9.3f} {row['min_s']:>8.3f} {row['max_s']:>8.3f} {ratio:>6}")
    by_size = {row["elements"]: row for row in rows}
    ok = True
    if 100_000 in by_size:
        ok &= by_size[100_000]["median_s"] <= TARGET_100K_S
        print(f"100k target <= {TARGET_100K_S} s: {'met' if by_size[100_000]['median_s'] <= TARGET_100K_S else 'MISSED'}")
    if 200_000 in by_size and by_size[200_000]["ratio_to_half"]:
        ok &= by_size[200_000]["ratio_to_half"] <= LINEARITY_LIMIT
        print(f"200k/100k <= {LINEARITY_LIMIT}: {'met' if by_size[200_000]['ratio_to_half'] <= LINEARITY_LIMIT else 'MISSED'}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
