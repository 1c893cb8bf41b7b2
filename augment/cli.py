"""The `augment` command: reads options, calls one library function, maps errors to exit codes.

Exit codes: 0 success, 1 a regression limit broken, 2 bad input, 3 the simulator failed.
Results go to stdout; warnings, notes and progress go to stderr.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import click

from augment.errors import AugmentError, OptionError


class _Group(click.Group):
    """Turns the project's errors into one line and an exit code, never a traceback."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except AugmentError as error:
            if ctx.obj and ctx.obj.get("debug"):
                raise
            # the message starts with where: file:line:column, an option or a path
            click.echo(str(error), err=True)
            sys.exit(error.exit_code)
        except (click.exceptions.Exit, click.exceptions.Abort, click.ClickException):
            raise
        except KeyboardInterrupt:
            click.echo("interrupted", err=True)
            sys.exit(130)
        except Exception as error:  # a fault of ours: say so plainly, keep the trace for --debug
            if ctx.obj and ctx.obj.get("debug"):
                raise
            click.echo(f"error: internal error ({type(error).__name__}: {error}); rerun with --debug and report it", err=True)
            sys.exit(2)


# existence is checked by the loaders, whose errors carry file:line:column like any other bad input
_existing = click.Path(dir_okay=False)


def _synthesis_options(coupling: str, kmin: float, analysis: str | None):
    from augment.synthesis import SynthesisOptions

    return SynthesisOptions(coupling=coupling, kmin=kmin, analysis=analysis)


def _warn(warnings) -> None:
    for line in warnings:
        click.echo(f"warning: {line}", err=True)


_netlist_arg = click.argument("netlist", type=_existing)
_sidefile_opt = click.option("-g", "--geometry", "sidefile", required=True, type=_existing, help="The geometry side-file (TOML).")
_coupling_opt = click.option(
    "--coupling",
    type=click.Choice(["one-way", "full"]),
    default="one-way",
    show_default=True,
    help="Probe loops pick up EMF one way (no back action), or are K-coupled to everything.",
)
_kmin_opt = click.option(
    "--kmin", type=click.FloatRange(0, 1, max_open=True), default=1e-6, show_default=True,
    help="Drop couplings with |k| below this when the matrix stays positive definite.",
)
def _check_analysis(ctx, param, value):
    """--analysis takes a .tran or .ac line's text; checked here so a typo is bad input (exit 2)."""
    if value is None:
        return None
    from augment.sidefile import analysis_problem

    kind, _, rest = value.strip().lstrip(".").partition(" ")
    problem = analysis_problem(kind.lower(), rest.strip())
    if problem:
        raise click.BadParameter(problem)
    return value


_analysis_opt = click.option(
    "--analysis", default=None, callback=_check_analysis,
    help='Analysis to run instead of the netlist\'s, e.g. "tran 0.1n 2u" or "ac dec 20 1k 1g".',
)


@click.group(cls=_Group)
@click.option("--debug", is_flag=True, help="Show Python tracebacks for errors.")
@click.version_option(package_name="augment")
@click.pass_context
def main(ctx, debug):
    """Adds the probe's and the copper's coupled inductance to a SPICE netlist and shows
    what the scope will read: ideal, zero-area and probed, with the error and its sources."""
    ctx.ensure_object(dict)["debug"] = debug


@main.command()
@_netlist_arg
@_sidefile_opt
@click.option("-o", "--output", type=click.Path(dir_okay=False), help="Write here instead of stdout.")
@_coupling_opt
@_kmin_opt
@_analysis_opt
def build(netlist, sidefile, output, coupling, kmin, analysis):
    """Write the augmented netlist (stdout unless -o)."""
    from augment.pipeline import build as build_netlist
    from augment.report import write_text_atomic

    if output and Path(output).resolve() in {Path(netlist).resolve(), Path(sidefile).resolve()}:
        raise OptionError(output, "refusing to overwrite an input file; choose another -o")
    built = build_netlist(netlist, sidefile, _synthesis_options(coupling, kmin, analysis))
    if output:
        _refuse_included(output, built.netlist)
    _warn(built.warnings)
    if output:
        relative = _relative_include(built.netlist)
        if relative is not None and Path(output).resolve().parent != Path(netlist).resolve().parent:
            _warn([f"{relative.location}: .{relative.kind} paths stay relative to {Path(netlist).parent}/; "
                   f"run {output} from there or write it beside the netlist"])
        write_text_atomic(Path(output), built.augmented.text)
        click.echo(
            f"wrote {output}: {built.augmented.inductors} inductors, {built.augmented.couplings} couplings", err=True
        )
    else:
        click.echo(built.augmented.text, nl=False)


def _refuse_included(output: str, netlist) -> None:
    """-o may not name a file the netlist reads through .include or .lib."""
    if Path(output).resolve() in netlist.included_files:
        raise OptionError(output, "refusing to overwrite a file the netlist includes; choose another -o")


def _relative_include(netlist):
    """The first top-level .include or .lib whose file path is relative, or None."""
    for statement in netlist.statements:
        fields = statement.args.split() if getattr(statement, "kind", None) in ("include", "lib") else []
        # `.lib NAME` alone opens a library section: no file
        if fields and (statement.kind == "include" or len(fields) > 1):
            if not Path(fields[0].strip("\"'")).is_absolute():
                return statement
    return None


@main.command()
@_netlist_arg
@_sidefile_opt
@click.option("-o", "--output", "out_dir", type=click.Path(file_okay=False), help="Report folder (default STEM-report: the netlist's name without its suffix).")
@click.option("--json", "as_json", is_flag=True, help="Print the result document on stdout.")
@click.option("--timeout", type=click.FloatRange(min=1), default=300.0, show_default=True, help="Seconds per simulation.")
@_coupling_opt
@_kmin_opt
@_analysis_opt
def run(netlist, sidefile, out_dir, as_json, timeout, coupling, kmin, analysis):
    """Simulate ideal and augmented, compare, and write the report folder."""
    from augment.pipeline import run as run_pipeline
    from augment.report import format_probe_table

    out = Path(out_dir) if out_dir else Path(f"{Path(netlist).stem}-report")
    document = run_pipeline(
        netlist, sidefile, out, _synthesis_options(coupling, kmin, analysis), timeout_s=timeout
    )
    _warn(document["warnings"])
    if as_json:
        click.echo(json.dumps(document, indent=2))
    else:
        click.echo(format_probe_table(document))
    click.echo(f"report: {out}/  ({document['inductors']} inductors, {document['couplings']} couplings)", err=True)


@main.command()
@_netlist_arg
@_sidefile_opt
@click.option("--json", "as_json", is_flag=True, help="Print the matrix as JSON on stdout.")
def extract(netlist, sidefile, as_json):
    """Print the lumped inductance matrix and the coupling coefficients."""
    from augment.pipeline import build as build_netlist
    from augment.report import extraction_document, format_extraction

    built = build_netlist(netlist, sidefile)
    _warn(built.warnings)
    document = extraction_document(built)
    click.echo(json.dumps(document, indent=2) if as_json else format_extraction(document))


@main.command()
@_netlist_arg
@_sidefile_opt
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False), help="PNG file to write.")
def view(netlist, sidefile, output):
    """Draw the geometry: parts, copper, field sources and probe leads, labelled."""
    from augment.netlist import parse_netlist
    from augment.pipeline import place
    from augment.report import draw_geometry

    if Path(output).resolve() in {Path(netlist).resolve(), Path(sidefile).resolve()}:
        raise OptionError(output, "refusing to overwrite an input file; choose another -o")
    parsed, graph = place(parse_netlist(netlist), sidefile)
    _refuse_included(output, parsed)
    _warn(graph.warnings)
    draw_geometry(graph, parsed, Path(output))
    click.echo(f"wrote {output}", err=True)


@main.command()
@click.argument("plan", type=_existing)
@click.option("-o", "--output", "out_dir", type=click.Path(file_okay=False), help="Folder for the case reports.")
@click.option("--jobs", type=click.IntRange(min=1), default=None, help="Local worker processes (default: cores).")
@click.option("--scheduler", default=None, help="Address of a Dask distributed scheduler to run the cases on.")
@click.option("--junit", type=click.Path(dir_okay=False), default=None, help="Write a JUnit XML file, one test case per plan case.")
@click.option("--timeout", type=click.FloatRange(min=1), default=300.0, show_default=True, help="Seconds per simulation.")
def batch(plan, out_dir, jobs, scheduler, junit, timeout):
    """Run every case of a plan; one summary table; exit 1 when a limit is broken."""
    from augment.batch import run_plan

    code = run_plan(Path(plan), Path(out_dir) if out_dir else None, jobs=jobs, scheduler=scheduler,
                    junit=Path(junit) if junit else None, timeout_s=timeout)
    sys.exit(code)


@main.command()
@click.option("-o", "--output", "out_dir", type=click.Path(file_okay=False), default="augment-demo", show_default=True)
def demo(out_dir):
    """Run the built-in scenario and say where its report is (replaces the demo's own folders)."""
    from augment.demo import run_demo

    run_demo(Path(out_dir))
