"""The built-in scenario of `augment demo`: runs with no argument and says where its report is."""

from __future__ import annotations

from pathlib import Path

import click

SCENARIOS = Path(__file__).parent / "scenarios"
CASES = (  # (report folder, netlist, side-file, what it shows)
    ("sensing_loop", "sensing_loop.cir", "sensing_loop.toml",
     "a pulsed coil threads a loop of 10 and 90 ohm; probed from either side and twisted"),
    ("fast_edge_long", "fast_edge.cir", "fast_edge_long.toml",
     "a 1 ns edge into 1 k, probed with a 15 cm ground lead"),
    ("fast_edge_spring", "fast_edge.cir", "fast_edge_spring.toml",
     "the same edge, probed with a spring ground"),
)


def run_demo(out_dir: Path) -> list[dict]:
    """Run every built-in scenario into ``out_dir/NAME`` and print a table for each.

    A report replaces the files of the demo's own earlier run.
    """
    from augment.pipeline import SAFETY_NOTE, run
    from augment.report import format_probe_table

    documents = []
    for name, netlist, sidefile, what in CASES:
        click.echo(f"== {name}: {what}")
        document = run(SCENARIOS / netlist, SCENARIOS / sidefile, out_dir / name)
        for line in document["warnings"]:
            click.echo(f"warning: {line}", err=True)
        click.echo(format_probe_table(document))
        click.echo(f"report: {out_dir / name}/", err=True)
        documents.append(document)
    click.echo(f"\nThe demo's reports are in {out_dir}/ (result.json, readings.csv, one PNG per probe).", err=True)
    click.echo(f"Caution: {SAFETY_NOTE}", err=True)
    return documents
