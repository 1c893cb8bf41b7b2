"""End-to-end timings of every example: each pipeline stage, and augmented versus ideal.

The examples are found, not listed by hand, so a new one is measured without an edit here:

- the built-in scenarios of ``augment demo`` (``augment.demo.CASES``);
- in each folder of ``netlists/``, every case of every plan file (a TOML file with
  ``[[case]]``), then every other side-file (any other ``*.toml``) that no plan names,
  paired with the folder's only ``*.cir``. A side-file that cannot be paired that way (no
  ``.cir`` or several) is listed as skipped with the reason, never dropped silently.

Each example runs once untimed (the parser is compiled, ngspice loads the circuit's models),
then ``repeats`` times: ``augment.pipeline.build`` and ``simulate_and_compare`` on one
simulator worker started outside the timed region. Figures per run: the stage times of
``Built.timings_s`` (parse, geometry, extract, build, simulate_ideal, simulate_augmented,
compare), ngspice's own run time of both netlists (``SimResult.elapsed_s``, measured in the
worker around ngspice's ``run``) and their ratio, and the wall-time ratio of the two
simulate stages (which includes the pipe round trip and loading the circuit).

Run: ``.venv/bin/python bench/bench_e2e.py [--repeats 5]``
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tomllib
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from augment.batch import load_plan  # noqa: E402
from augment.demo import CASES, SCENARIOS  # noqa: E402
from augment.pipeline import build, simulate_and_compare  # noqa: E402
from augment.simulate import Simulator  # noqa: E402

TARGET_SIM_RATIO = 3.0
STAGES = ("parse", "geometry", "extract", "build", "simulate_ideal", "simulate_augmented", "compare")


@dataclass(frozen=True, slots=True)
class Example:
    """One netlist with one side-file, named for the table."""

    name: str
    netlist: Path
    sidefile: Path


def discover(netlists: Path = ROOT / "netlists") -> tuple[list[Example], list[str]]:
    """Every example by the rule of the module docstring; returns (examples, reasons for skips)."""
    examples = [Example(f"scenarios/{name}", SCENARIOS / netlist, SCENARIOS / sidefile)
                for name, netlist, sidefile, _ in CASES]
    skipped: list[str] = []
    for folder in sorted(p for p in netlists.iterdir() if p.is_dir()):
        plans, sidefiles = [], []
        for toml in sorted(folder.glob("*.toml")):
            with toml.open("rb") as handle:
                (plans if "case" in tomllib.load(handle) else sidefiles).append(toml)
        named: set[Path] = set()
        for plan in plans:
            for case in load_plan(plan).cases:
                examples.append(Example(f"{folder.name}/{plan.stem}:{case.name}", Path(case.netlist), Path(case.sidefile)))
                named.add(Path(case.sidefile).resolve())
        circuits = sorted(folder.glob("*.cir"))
        for sidefile in sidefiles:
            if sidefile.resolve() in named:
                continue
            if len(circuits) == 1:
                examples.append(Example(f"{folder.name}/{sidefile.stem}", circuits[0], sidefile))
            else:
                skipped.append(f"{_shown(sidefile)}: no plan names it and its folder has "
                               f"{len(circuits)} .cir files, so its netlist is unknown")
    return examples, skipped


def _measure_once(example: Example, simulator: Simulator) -> dict:
    built = build(example.netlist, example.sidefile)
    _, ideal, augmented = simulate_and_compare(built, simulator)
    figures = {stage: built.timings_s[stage] for stage in STAGES}
    figures["ngspice_ideal"] = ideal.elapsed_s
    figures["ngspice_augmented"] = augmented.elapsed_s
    figures["ratio_ngspice"] = augmented.elapsed_s / ideal.elapsed_s
    figures["ratio_wall"] = built.timings_s["simulate_augmented"] / built.timings_s["simulate_ideal"]
    figures["inductors"] = built.augmented.inductors
    figures["couplings"] = built.augmented.couplings
    return figures


def run(repeats: int = 5) -> list[dict]:
    """One row per example found by :func:`discover`, in order.

    A measured row has ``name``, ``netlist``, ``sidefile`` and ``runs`` (figure -> list of
    ``repeats`` values, seconds or counts); a skipped side-file gives a row with ``skipped``
    (the reason) and no ``runs``.
    """
    examples, skipped = discover()
    rows = []
    with Simulator() as simulator:
        for example in examples:
            _measure_once(example, simulator)
            measured = [_measure_once(example, simulator) for _ in range(repeats)]
            rows.append({"name": example.name, "netlist": _shown(example.netlist), "sidefile": _shown(example.sidefile),
                         "runs": {key: [m[key] for m in measured] for key in measured[0]}})
    rows += [{"name": reason.split(":")[0], "skipped": reason} for reason in skipped]
    return rows


def _shown(path: Path) -> str:
    return os.path.relpath(path, ROOT)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args(argv)
    rows = run(args.repeats)
    print(f"{'example':<40} {'L':>3} {'K':>3} " + " ".join(f"{s[:10]:>10}" for s in STAGES) + f" {'ngspice x':>9} {'wall x':>7}")
    ok = True
    for row in rows:
        if "skipped" in row:
            print(f"skipped: {row['skipped']}")
            continue
        med = {key: statistics.median(values) for key, values in row["runs"].items()}
        ok &= med["ratio_ngspice"] <= TARGET_SIM_RATIO
        print(f"{row['name']:<40} {med['inductors']:>3.0f} {med['couplings']:>3.0f} "
              + " ".join(f"{med[s]:>10.4f}" for s in STAGES) + f" {med['ratio_ngspice']:>9.2f} {med['ratio_wall']:>7.2f}")
    print(f"augmented/ideal ngspice time <= {TARGET_SIM_RATIO} for every example: {'met' if ok else 'MISSED'}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
