"""Run every benchmark of bench/ and write one table, with each target beside its figure.

Writes ``bench/results/benchmarks.md`` and ``bench/results/benchmarks.csv`` (one row per
figure: median, min and max over the runs, the number of runs, the target and a ``pass`` or
``short`` mark) and prints the markdown. Ratios are taken within one run wherever both sides
are measured together (kernel against its numpy reference, dblquad against the closed
form, augmented against ideal simulation, two workers against one), because this machine
is shared and its speed drifts.

Benchmarks (``--only NAME``): ``netlist`` (parse + write), ``kernel`` (pair throughput and
memory), ``accuracy`` (closed form vs scipy.integrate), ``e2e`` (every example, stage by
stage), ``batch`` (16 cases, 1 and 2 workers). ``--quick`` is a smoke run with smaller sizes
and 3 runs each; its figures are not comparable with the targets, which it leaves unmarked.

The exit status is 0 when every benchmark ran, 1 when one failed (its error is in the
table); a target that is short is a measured result, not a failure.

Run: ``make bench`` or ``.venv/bin/python bench/run.py [--quick] [--only NAME ...]``
"""

from __future__ import annotations

import argparse
import csv
import io
import os
import platform
import statistics
import subprocess
import sys
import time
import traceback
from dataclasses import dataclass
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import bench_batch  # noqa: E402
import bench_e2e  # noqa: E402
import bench_inductance  # noqa: E402
import bench_netlist  # noqa: E402

RESULTS = HERE / "results"


@dataclass(frozen=True, slots=True)
class Settings:
    """Sizes and run counts of one invocation."""

    netlist_sizes: tuple[int, ...]
    kernel_sizes: tuple[int, ...]
    accuracy_pairs: int
    batch_cases: int
    repeats: int
    quick: bool


FULL = Settings((10_000, 100_000, 200_000), (1000, 5000, 20000), 1000, 16, 5, False)
QUICK = Settings((10_000, 20_000), (1000,), 100, 4, 3, True)


@dataclass(frozen=True, slots=True)
class Figure:
    """One line of the table: a measured quantity over its runs, with its target if any."""

    section: str
    item: str
    figure: str
    unit: str
    median: float | None
    low: float | None
    high: float | None
    runs: int
    target: str = ""
    passed: bool | None = None
    note: str = ""

    @property
    def mark(self) -> str:
        return "" if self.passed is None else ("pass" if self.passed else "short")


def _figure(section: str, item: str, figure: str, unit: str, values, target: str = "",
            passed: bool | None = None, note: str = "") -> Figure:
    """A figure from the value of every run."""
    values = list(values)
    return Figure(section, item, figure, unit, statistics.median(values), min(values), max(values), len(values),
                  target, passed, note)


def _check(value: float, bound: float, at_most: bool) -> bool:
    return value <= bound if at_most else value >= bound


def _netlist(settings: Settings) -> list[Figure]:
    rows = bench_netlist.run(settings.netlist_sizes, settings.repeats)
    figures = []
    by_size = {row["elements"]: row for row in rows}
    for row in rows:
        n, runs = row["elements"], row["repeats"]
        lines = len(bench_netlist.generate(n).splitlines())
        item = f"{n:,} elements ({lines:,} lines)"
        at_100k, at_200k = n == 100_000, n == 200_000
        # bench_netlist reports median, min and max of its runs, not every run.
        figures.append(Figure("parse + write", item, "time", "s", row["median_s"], row["min_s"], row["max_s"], runs,
                              f"<= {bench_netlist.TARGET_100K_S:g} s" if at_100k else "",
                              _check(row["median_s"], bench_netlist.TARGET_100K_S, True) if at_100k else None,
                              "after one warm-up run"))
        figures.append(Figure("parse + write", item, "throughput", "lines/s", lines / row["median_s"],
                              lines / row["max_s"], lines / row["min_s"], runs))
        half = by_size.get(n // 2)
        if half:
            ratio = row["median_s"] / half["median_s"]
            figures.append(Figure("parse + write", item, f"time ratio to {n // 2:,}", "x", ratio,
                                  row["min_s"] / half["max_s"], row["max_s"] / half["min_s"], runs,
                                  f"<= {bench_netlist.LINEARITY_LIMIT:g}" if at_200k else "",
                                  _check(ratio, bench_netlist.LINEARITY_LIMIT, True) if at_200k else None,
                                  "ratio of the medians; min and max pair the extreme runs"))
    return figures


def _kernel(settings: Settings) -> list[Figure]:
    figures = []
    for row in bench_inductance.throughput(settings.kernel_sizes, settings.repeats):
        n, runs = row["segments"], row["runs"]
        item = f"{n:,} segments ({row['pairs']:,} pairs)"
        at_5000, at_20000 = n == 5000, n == 20000
        pairs_s = statistics.median(runs["pairs_per_s"])
        figures += [
            _figure("pair kernel", item, "lumped_inductance time", "s", runs["kernel_s"],
                   f"<= {bench_inductance.TARGET_5000_S:g} s" if at_5000 else "",
                   _check(statistics.median(runs["kernel_s"]), bench_inductance.TARGET_5000_S, True) if at_5000 else None),
            _figure("pair kernel", item, "throughput", "pairs/s", runs["pairs_per_s"],
                   f">= {bench_inductance.TARGET_PAIRS_PER_S:.0e}" if at_5000 else "",
                   _check(pairs_s, bench_inductance.TARGET_PAIRS_PER_S, False) if at_5000 else None, "one core"),
            _figure("pair kernel", item, "peak resident memory", "MB", runs["peak_rss_mb"],
                   f"< {bench_inductance.MEMORY_LIMIT_MB:g} MB" if at_20000 else "",
                   statistics.median(runs["peak_rss_mb"]) < bench_inductance.MEMORY_LIMIT_MB if at_20000 else None,
                   "peak resident set (VmHWM) of the run's own process, interpreter and numpy included"),
            _figure("pair kernel", item, "numpy reference, same pair count", "s", runs["numpy_reference_s"],
                   note="plain elementwise expression, ~120 flops, 4 log, 2 atan2 per pair"),
            _figure("pair kernel", item, "fraction of numpy speed", "x", runs["fraction_of_numpy_speed"],
                   note="reference time / kernel time, same run"),
        ]
    return figures


def _accuracy(settings: Settings) -> list[Figure]:
    row = bench_inductance.accuracy(settings.repeats, settings.accuracy_pairs)
    item, runs = f"{row['pairs']:,} random pairs", row["runs"]
    return [
        _figure("accuracy vs cost", item, "closed form (mutual_filaments)", "s", runs["closed_form_s"]),
        _figure("accuracy vs cost", item, "scipy.integrate.dblquad of Neumann", "s", runs["dblquad_s"],
               note="epsrel 1e-10, one dblquad per pair"),
        _figure("accuracy vs cost", item, "speed ratio dblquad / closed form", "x", runs["speed_ratio"]),
        _figure("accuracy vs cost", item, "worst relative difference", "", runs["worst_relative_difference"],
               note="|diff| / max(|M_quad|, 1e-3 max|M_quad|)"),
    ]


def _e2e(settings: Settings) -> list[Figure]:
    figures = []
    for row in bench_e2e.run(settings.repeats):
        if "skipped" in row:
            figures.append(Figure("end to end", row["name"], "skipped", "", None, None, None, 0, note=row["skipped"]))
            continue
        runs, item = row["runs"], row["name"]
        figures.append(_figure("end to end", item, "inductors (L lines)", "count", runs["inductors"],
                               note=f"{row['netlist']} with {row['sidefile']}"))
        figures.append(_figure("end to end", item, "couplings (K lines)", "count", runs["couplings"]))
        for stage in bench_e2e.STAGES:
            figures.append(_figure("end to end", item, stage, "s", runs[stage]))
        ratio = statistics.median(runs["ratio_ngspice"])
        figures.append(_figure("end to end", item, "augmented/ideal, ngspice's own time", "x", runs["ratio_ngspice"],
                              f"<= {bench_e2e.TARGET_SIM_RATIO:g}", _check(ratio, bench_e2e.TARGET_SIM_RATIO, True),
                              f"SimResult.elapsed_s: ideal {statistics.median(runs['ngspice_ideal']):.4g} s, "
                              f"augmented {statistics.median(runs['ngspice_augmented']):.4g} s"))
        figures.append(_figure("end to end", item, "augmented/ideal, wall time", "x", runs["ratio_wall"],
                              note="simulate stages, pipe and circuit loading included; for information"))
    return figures


def _batch(settings: Settings) -> list[Figure]:
    one, two = bench_batch.run(settings.batch_cases, settings.repeats)
    item = f"{settings.batch_cases} cases"
    full = settings.batch_cases == 16
    ratio = statistics.median(two["ratio_per_run"])
    return [
        _figure("batch", item, "1 worker", "s", one["times_s"], note="wall time, worker start-up included"),
        _figure("batch", item, "2 workers", "s", two["times_s"]),
        _figure("batch", item, "2 workers / 1 worker", "x", two["ratio_per_run"],
               f"<= {bench_batch.TARGET_RATIO:g}" if full else "",
               _check(ratio, bench_batch.TARGET_RATIO, True) if full else None,
               f"run by run, alternating order; ratio of the medians {two['ratio_to_one_job']:.3f}; "
               f"load average at the end {two['load_average_1min']:.2f}"),
    ]


BENCHMARKS = {"netlist": _netlist, "kernel": _kernel, "accuracy": _accuracy, "e2e": _e2e, "batch": _batch}


def _number(value: float | None) -> str:
    if value is None:
        return ""
    if float(value).is_integer() and abs(value) < 1e6:
        return f"{value:.0f}"
    return f"{value:.4g}"


def _header(settings: Settings, started: float, load_start: tuple, elapsed_s: float) -> list[str]:
    import numpy
    import scipy

    commit = subprocess.run(["git", "-C", str(HERE.parent), "rev-parse", "--short", "HEAD"],
                            capture_output=True, text=True, check=False).stdout.strip() or "unknown"
    return [
        "# Benchmarks",
        "",
        f"{time.strftime('%Y-%m-%d %H:%M:%S', time.localtime(started))}, "
        f"{'QUICK smoke run (targets not marked where sizes differ)' if settings.quick else 'full run'}, "
        f"{elapsed_s:.0f} s in all; commit {commit} plus the working tree; {os.cpu_count()} cores; "
        f"load average at the start {load_start[0]:.2f} / {load_start[1]:.2f} / {load_start[2]:.2f}, "
        f"at the end {os.getloadavg()[0]:.2f}; Python {platform.python_version()}, numpy {numpy.__version__}, "
        f"scipy {scipy.__version__}.",
        "",
        "Each figure: median, min and max over its runs (n). Marks: `pass` when the median meets the "
        "target, `short` when it does not.",
        "",
    ]


_COLUMNS = ("section", "item", "figure", "unit", "median", "min", "max", "n", "target", "mark", "note")


def _cells(figure: Figure) -> list[str]:
    return [figure.section, figure.item, figure.figure, figure.unit, _number(figure.median), _number(figure.low),
            _number(figure.high), str(figure.runs), figure.target, figure.mark, figure.note]


def _overview(figures: list[Figure]) -> list[str]:
    """One line per example: counts, the median of every stage, both ratios with their range."""
    columns = ["inductors (L lines)", "couplings (K lines)", *bench_e2e.STAGES]
    ratio, wall = "augmented/ideal, ngspice's own time", "augmented/ideal, wall time"
    lines = ["| example | L | K | " + " | ".join(f"{stage} s" for stage in bench_e2e.STAGES)
             + " | aug/ideal ngspice [min, max] | target | mark | aug/ideal wall [min, max] |",
             "|---|" + "---:|" * (len(columns) + 1) + "---|---|---:|"]
    for item in dict.fromkeys(f.item for f in figures if f.section == "end to end"):
        mine = {f.figure: f for f in figures if f.section == "end to end" and f.item == item}
        if "skipped" in mine:
            lines.append(f"| {item} | skipped: {_escaped(mine['skipped'].note)} |")
            continue
        cells = [_number(mine[c].median) for c in columns]
        r, w = mine[ratio], mine[wall]
        cells += [f"{_number(r.median)} [{_number(r.low)}, {_number(r.high)}]", r.target, r.mark,
                  f"{_number(w.median)} [{_number(w.low)}, {_number(w.high)}]"]
        lines.append(f"| {item} | " + " | ".join(cells) + " |")
    return lines + [""]


def _escaped(text: str) -> str:
    return text.replace("|", "\\|")


def markdown(figures: list[Figure], header: list[str], errors: dict[str, str]) -> str:
    """The markdown document: header, the targets at a glance, then one table per section."""
    lines = list(header)
    targeted = [f for f in figures if f.mark]
    if targeted:
        lines += ["## Targets", "", "| item | figure | median | target | mark |", "|---|---|---:|---|---|"]
        lines += [f"| {f.section}: {f.item} | {f.figure} | {_number(f.median)} {f.unit} | {f.target} | {f.mark} |"
                  for f in targeted]
        lines.append("")
    for section in dict.fromkeys(f.section for f in figures):
        lines += [f"## {section}", ""]
        if section == "end to end":
            lines += ["Medians of the runs; the ratio compares ngspice's own run times (SimResult.elapsed_s) of "
                      "the augmented and the original netlist, the wall ratio the two simulate stages. Every "
                      "figure with its min and max follows.", ""]
            lines += _overview(figures)
        lines += ["| item | figure | unit | median | min | max | n | target | mark | note |",
                  "|---|---|---|---:|---:|---:|---:|---|---|---|"]
        lines += ["| " + " | ".join(_escaped(cell) for cell in _cells(f)[1:]) + " |" for f in figures if f.section == section]
        lines.append("")
    for name, message in errors.items():
        lines += [f"## {name}: FAILED", "", "```", message.rstrip(), "```", ""]
    return "\n".join(lines)


def csv_text(figures: list[Figure], errors: dict[str, str]) -> str:
    """The CSV table: one row per figure with raw numbers, then one row per failed benchmark."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(_COLUMNS)
    for f in figures:
        writer.writerow([f.section, f.item, f.figure, f.unit, *("" if v is None else repr(v) for v in (f.median, f.low, f.high)),
                         f.runs, f.target, f.mark, f.note])
    for name, message in errors.items():
        writer.writerow([name, "", "failed", "", "", "", "", 0, "", "", message.strip().splitlines()[-1]])
    return out.getvalue()


def _write(path: Path, text: str) -> None:
    # Written under a temporary name and moved, so a reader never sees half a table.
    temporary = path.with_suffix(path.suffix + ".tmp")
    temporary.write_text(text, encoding="utf-8")
    temporary.replace(path)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smoke run: smaller sizes, 3 runs each")
    parser.add_argument("--only", action="append", choices=sorted(BENCHMARKS), metavar="NAME",
                        help=f"run only this benchmark (repeatable): {', '.join(BENCHMARKS)}")
    args = parser.parse_args(argv)
    settings = QUICK if args.quick else FULL
    started, load_start = time.time(), os.getloadavg()
    figures: list[Figure] = []
    errors: dict[str, str] = {}
    for name in args.only or BENCHMARKS:
        print(f"== {name}", file=sys.stderr, flush=True)
        t0 = time.perf_counter()
        try:
            figures += BENCHMARKS[name](settings)
        except Exception:  # noqa: BLE001 - one broken benchmark must not hide the others' figures
            errors[name] = traceback.format_exc()
            print(errors[name], file=sys.stderr, flush=True)
        print(f"   {name}: {time.perf_counter() - t0:.1f} s", file=sys.stderr, flush=True)
    text = markdown(figures, _header(settings, started, load_start, time.time() - started), errors)
    RESULTS.mkdir(exist_ok=True)
    _write(RESULTS / "benchmarks.md", text)
    _write(RESULTS / "benchmarks.csv", csv_text(figures, errors))
    print(text)
    print(f"written: {RESULTS / 'benchmarks.md'} and {RESULTS / 'benchmarks.csv'}", file=sys.stderr)
    return 1 if errors else 0


if __name__ == "__main__":
    sys.exit(main())
