"""The pipeline end to end, as plain functions the CLI and the batch runner call.

parse netlist -> load side-file -> conductor graph -> inductance -> synthesis ->
simulate (original and augmented) -> compare. Writing the report is the caller's step.
"""

from __future__ import annotations

import re
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from augment.conductors import ConductorGraph, build_graph
from augment.inductance import InductanceMatrix, extract
from augment.netlist import Netlist, parse_netlist
from augment.sidefile import load_sidefile
from augment.synthesis import Augmented, SynthesisOptions, synthesize

SAFETY_NOTE = (
    "Probing powered circuits can hurt you and damage equipment: mains and high voltage call "
    "for rated differential probes or isolation, never a floated scope ground; follow your "
    "local electrical codes and licensed practice."
)


@dataclass(frozen=True, slots=True)
class Built:
    """What the stages before the simulator produced for one netlist and side-file."""

    netlist: Netlist
    graph: ConductorGraph
    inductance: InductanceMatrix
    augmented: Augmented
    warnings: tuple[str, ...]
    timings_s: dict = field(default_factory=dict)


def build(netlist_path: str | Path, sidefile_path: str | Path, options: SynthesisOptions = SynthesisOptions()) -> Built:
    """Parse, load, extract and synthesize; raises the project's errors on bad input."""
    timings: dict[str, float] = {}
    t0 = time.perf_counter()
    netlist = parse_netlist(netlist_path)
    timings["parse"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    netlist, graph = place(netlist, sidefile_path)
    timings["geometry"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    inductance = extract(graph)
    timings["extract"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    augmented = synthesize(netlist, graph, inductance, options, sidefile_name=Path(sidefile_path).name)
    timings["build"] = time.perf_counter() - t0
    return Built(netlist, graph, inductance, augmented, (*graph.warnings, *augmented.notes), timings)


def place(netlist: Netlist, sidefile_path: str | Path) -> tuple[Netlist, ConductorGraph]:
    """Load the side-file against ``netlist`` and build the conductor graph.

    Elements placed inside subcircuit instances (X1.R3) need those instances expanded: the
    netlist returned has them flattened.
    """
    sidefile = load_sidefile(sidefile_path, netlist)
    instances = _instances_to_flatten(sidefile)
    if instances:
        for instance in instances:
            netlist = netlist.flatten(instance)
        sidefile = load_sidefile(sidefile_path, netlist)
    return netlist, build_graph(sidefile, netlist)


def _instances_to_flatten(sidefile) -> list[str]:
    """Top-level X instances that hold an element the side-file places or realises."""
    names = [*sidefile.terminals, *(coil.element for coil in sidefile.coils)]
    return sorted({name.split(".")[0] for name in names if "." in name})


def simulate_and_compare(built: Built, simulator):
    """Run the original and the augmented netlist on one simulator and compare them."""
    from augment.compare import compare

    name = Path(built.netlist.path).name
    # relative .include and .lib paths resolve from the netlist's own folder
    folder = Path(built.netlist.path).resolve().parent
    t0 = time.perf_counter()
    ideal = simulator.run(built.augmented.original_text, name=name, directory=folder)
    built.timings_s["simulate_ideal"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    augmented = simulator.run(built.augmented.text, name=f"{name} (augmented)", directory=folder)
    built.timings_s["simulate_augmented"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    comparison = compare(built.augmented, ideal.vectors, augmented.vectors)
    built.timings_s["compare"] = time.perf_counter() - t0
    return comparison, ideal, augmented


def result_document(built: Built, comparison, sidefile_path: str | Path, elapsed_s: float,
                    simulator_notes: tuple[str, ...] = ()) -> dict:
    """The result document of SPEC (`augment run --json`); ``simulator_notes`` join its warnings."""
    from augment.compare import summary

    probes = []
    for reading in comparison.readings:
        row = summary(comparison, reading)
        instrument = reading.probe.instrument
        row["instrument"] = {
            "name": instrument.name,
            "resistance": _finite_or_none(instrument.resistance),
            "capacitance": instrument.capacitance,
            "bandwidth": instrument.bandwidth,
            # beyond SPEC's keys: a differential input's resistance from each side to its reference
            "reference_resistance": instrument.reference_resistance if instrument.differential else None,
        }
        top = row["contributions"][0] if row["contributions"] else {"source": "", "peak_v": 0.0}
        row["top_source"], row["top_peak_v"] = top["source"], top["peak_v"]  # as summary.csv has them
        row["conductor"] = reading.probe.conductor
        row["lead_length_m"] = reading.probe.lead_length_m
        row["paths"] = {
            "ideal": f"V({reading.probe.plus_net}) - V({reading.probe.minus_net}) in the original netlist",
            "local": f"straight path from the plus to the minus point (local:{reading.probe.name}, zero area)",
            "probed": f"along the leads of {reading.probe.conductor} through the instrument",
        }
        probes.append(row)
    return {
        "netlist": str(built.netlist.path),
        "sidefile": str(sidefile_path),
        "analysis": comparison.analysis,
        "probes": probes,
        "inductors": built.augmented.inductors,
        "couplings": built.augmented.couplings,
        "elapsed_s": elapsed_s,
        "timings_s": dict(built.timings_s),
        "coil_segments_per_turn": built.graph.coil_segments_per_turn,
        "warnings": [*built.warnings, *simulator_notes, *_silent_ac(comparison)],
        "caution": SAFETY_NOTE,
    }


def _silent_ac(comparison) -> list[str]:
    """A warning when an AC analysis shows nothing: the netlist has no source with an AC value."""
    if comparison.analysis != "ac" or any(np.any(reading.ideal != 0) for reading in comparison.readings):
        return []
    return ["every AC reading is zero: give a source of the netlist an AC value (V1 in 0 DC 0 AC 1)"]


_WARNING_WORD = re.compile(r"^warning:\s*", re.IGNORECASE)


def _simulator_notes(ideal, augmented) -> tuple[str, ...]:
    """What ngspice said about each run, labelled with the run (its own "Warning:" dropped)."""
    return tuple(f"ngspice, {run}: {_WARNING_WORD.sub('', message)}"
                 for run, result in (("original", ideal), ("augmented", augmented)) for message in result.messages)


def _finite_or_none(value: float) -> float | None:
    return value if value != float("inf") else None


def run(
    netlist_path: str | Path,
    sidefile_path: str | Path,
    out_dir: str | Path | None,
    options: SynthesisOptions = SynthesisOptions(),
    *,
    timeout_s: float = 300.0,
    simulator=None,
) -> dict:
    """Build, simulate, compare and (when ``out_dir`` is given) write the report folder.

    Returns the result document. ``simulator`` lets a batch worker reuse its own ngspice
    worker process; otherwise one is started for this run.
    """
    from augment.report import write_report
    from augment.simulate import Simulator

    start = time.perf_counter()
    inputs = [Path(netlist_path), Path(sidefile_path)]
    if out_dir is not None:
        check_output_folder(Path(out_dir), inputs)
    built = build(netlist_path, sidefile_path, options)
    if simulator is None:
        with Simulator(timeout_s=timeout_s) as own:
            comparison, ideal, augmented = simulate_and_compare(built, own)
    else:
        comparison, ideal, augmented = simulate_and_compare(built, simulator)
    document = result_document(built, comparison, sidefile_path, time.perf_counter() - start,
                               _simulator_notes(ideal, augmented))
    if out_dir is not None:
        write_report(Path(out_dir), built, comparison, document, protected=[*inputs, *built.netlist.included_files])
    return document


def check_output_folder(out_dir: Path, inputs: list[Path]) -> None:
    """Refuse an output folder that is an input or another file, before any work is done."""
    from augment.errors import OptionError

    if out_dir.exists() and not out_dir.is_dir():
        named = next((path for path in inputs if path.resolve() == out_dir.resolve()), None)
        what = f"is the input {named}" if named is not None else "exists and is not a folder"
        raise OptionError(str(out_dir), f"{what}; choose another -o")
