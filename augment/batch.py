"""Batch runs: every case of a plan through the pipeline, one summary, a verdict.

A plan (TOML) lists cases of a netlist and one or more side-files, with optional limits on
any per-probe figure of the result document. The plan is checked completely before
anything runs. Cases then run in local worker processes or on a Dask distributed cluster
through one plain task function, :func:`run_case`; a case that fails becomes an error row
and never stops the others. The outcome is ``summary.csv``, a table on stdout, each case's
report folder (``CASE/SIDESTEM`` for a case comparing several side-files, with a
``comparison.csv`` of their readings beside them), optionally a JUnit XML file, and an
exit code: 0 when every case ran within its limits, 1 when a limit broke or a case could
not run.
"""

from __future__ import annotations

import csv
import io
import math
import os
import re
import signal
import sys
import threading
import time
import tomllib
import xml.etree.ElementTree as ET
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

from augment.errors import AugmentError, Location, OptionError, PlanError
from augment.units import spice_number

# Per-probe figures of the result document that a limit may name; all in SI units.
FIGURES = (
    "ideal_min", "ideal_max", "ideal_pp",
    "local_min", "local_max", "local_pp",
    "probed_min", "probed_max", "probed_pp",
    "max_abs_error", "rms_error", "ringing_hz", "lead_length_m",
)
# Columns of summary.csv besides the figures, from report.summary_rows.
_DESCRIPTION = ("instrument", "top_source", "top_peak_v")
_TABLE_COLUMNS = ["case", "probe", "ideal_max", "probed_max", "max_abs_error", "rms_error", "ringing_hz", "status"]
_CASE_KEYS = {"name", "netlist", "sidefile", "sidefiles", "limits"}
_PLAN_KEYS = {"case", "limits"}
_SAFE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")
_TOML_POSITION = re.compile(r"\s*\(at line (\d+), column (\d+)\)$")
_HEADER = re.compile(r"^\s*\[")
_CASE_HEADER = re.compile(r"^\s*\[\[\s*case\s*\]\]")
_INTERRUPTED = 130
# How long to keep trying a scheduler that does not answer (Dask retries meanwhile).
_CONNECT_TIMEOUT_S = 10.0

# The Simulator of this worker, started by its first case and reused by the rest: the one
# piece of global state, the worker that owns ngspice. Per thread, because a Dask worker
# may run several tasks at once and a Simulator serves one caller at a time.
_OWN = threading.local()


@dataclass(frozen=True, slots=True)
class Limit:
    """Bounds on one per-probe figure; ``None`` leaves a side open."""

    key: str
    minimum: float | None
    maximum: float | None
    where: Location

    def broken_by(self, value: float | None) -> str | None:
        """Why ``value`` breaks this limit, or None when it keeps it."""
        if value is None or (isinstance(value, float) and math.isnan(value)):
            # A figure with no value (no ringing found) stays under any maximum.
            if self.minimum is None and self.key == "ringing_hz":
                return None
            return f"{self.key} has no value, limit {self._bounds()}"
        if self.maximum is not None and value > self.maximum:
            return f"{self.key} = {value:.6g} above its maximum {self.maximum:.6g}"
        if self.minimum is not None and value < self.minimum:
            return f"{self.key} = {value:.6g} below its minimum {self.minimum:.6g}"
        return None

    def _bounds(self) -> str:
        parts = [f"min {self.minimum:.6g}"] if self.minimum is not None else []
        parts += [f"max {self.maximum:.6g}"] if self.maximum is not None else []
        return ", ".join(parts)


@dataclass(frozen=True, slots=True)
class Case:
    """One netlist with one side-file, its limits and where the plan names it."""

    name: str
    netlist: Path
    sidefile: Path
    limits: tuple[Limit, ...]
    where: Location


@dataclass(frozen=True, slots=True)
class Plan:
    """A checked batch plan: its cases in file order, paths resolved."""

    path: Path
    cases: tuple[Case, ...]


def load_plan(path: str | Path) -> Plan:
    """Read and check a batch plan; nothing runs.

    Raises
    ------
    PlanError
        For a TOML syntax error, an unknown key, a missing netlist or side-file, an unknown
        limit key, a limit value that is not a number, or a repeated case name; the message
        starts with the plan's ``file:line:column``.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as error:
        raise PlanError(Location(str(path), 1), f"cannot read the plan: {error}") from None
    try:
        document = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        message = str(error)
        found = _TOML_POSITION.search(message)
        where = Location(str(path), int(found[1]), int(found[2])) if found else Location(str(path), 1)
        raise PlanError(where, _TOML_POSITION.sub("", message)) from None
    locate = _Locator(str(path), text)
    for key in document:
        if key not in _PLAN_KEYS:
            raise PlanError(locate(None, key), f"unknown key '{key}' (a plan holds [[case]] and [limits])")
    entries = document.get("case", [])
    if not isinstance(entries, list) or not entries:
        raise PlanError(Location(str(path), 1), "the plan has no [[case]]")
    shared = _limits(document.get("limits", {}), locate, None)
    cases: list[Case] = []
    seen: dict[str, Location] = {}
    for index, entry in enumerate(entries):
        for case in _cases(entry, index, path.parent, shared, locate):
            if case.name in seen:
                raise PlanError(case.where, f"case name '{case.name}' is used twice (first at {seen[case.name]})")
            seen[case.name] = case.where
            cases.append(case)
    return Plan(path, tuple(cases))


def run_case(name: str, netlist: str, sidefile: str, out_dir: str | None, timeout_s: float = 300.0) -> dict:
    """Run one case on this process's simulator and return its row; never raises.

    This is the task sent to local workers and to Dask workers alike: plain arguments in,
    a plain dict out. An error becomes a row with ``status = "error"``, the message and
    the exit code the single run would have had.

    Returns
    -------
    dict
        ``case``, ``netlist``, ``sidefile``, ``status`` (``"ok"`` or ``"error"``),
        ``exit_code``, ``message``, ``elapsed_s``, ``warnings`` and ``probes``: one dict
        per probe with ``probe``, the numeric figures of the result document (``FIGURES``),
        the instrument's name and the largest contribution (``top_source``, ``top_peak_v``).
    """
    from augment.pipeline import run
    from augment.report import summary_rows as probe_rows

    row = {"case": name, "netlist": netlist, "sidefile": sidefile, "status": "ok", "exit_code": 0,
           "message": "", "elapsed_s": 0.0, "warnings": [], "probes": []}
    started = time.perf_counter()
    try:
        simulator = getattr(_OWN, "simulator", None)
        if simulator is None:
            from augment.simulate import Simulator

            simulator = _OWN.simulator = Simulator(timeout_s=timeout_s)
        simulator.timeout_s = timeout_s
        document = run(netlist, sidefile, out_dir, timeout_s=timeout_s, simulator=simulator)
    except AugmentError as error:
        row.update(status="error", exit_code=error.exit_code, message=str(error))
    except Exception as error:  # noqa: BLE001 - a fault of ours must not stop the other cases
        row.update(status="error", exit_code=2, message=f"internal error ({type(error).__name__}: {error})")
    else:
        row["warnings"] = list(document.get("warnings", []))
        row["probes"] = [_figures(probe, flat) for probe, flat in zip(document["probes"], probe_rows(document))]
    row["elapsed_s"] = time.perf_counter() - started
    return row


def run_plan(plan: Path, out_dir: Path | None, *, jobs: int | None, scheduler: str | None,
             junit: Path | None, timeout_s: float = 300.0) -> int:
    """Run every case of a plan and write the summary; returns the exit code.

    Parameters
    ----------
    plan : Path
        The plan file (TOML); paths in it are relative to its folder.
    out_dir : Path or None
        Folder for ``summary.csv`` and one report folder per case (default
        ``PLANSTEM-batch`` in the current folder). Into an existing folder the files of
        this batch go beside what is there, replacing those of an earlier run.
    jobs : int or None
        Local worker processes (default: the number of cores); ignored with ``scheduler``.
    scheduler : str or None
        Address of a Dask distributed scheduler to run the cases on instead.
    junit : Path or None
        Where to write a JUnit XML file, one test case per plan case.
    timeout_s : float
        Longest wait for one simulation.

    Returns
    -------
    int
        0 when every case ran within its limits, 1 when a limit broke or a case could not
        run, 130 when interrupted (the finished cases are still summarised).

    Raises
    ------
    PlanError
        When the plan is malformed (see :func:`load_plan`).
    OptionError
        When the output folder is unusable or the scheduler cannot be reached.
    """
    from augment.report import plot_setup_comparison, write_text_atomic

    checked = load_plan(plan)
    out = Path(out_dir) if out_dir is not None else Path(f"{Path(plan).stem}-batch")
    _check_out_dir(out, checked, junit)
    # absolute: a Dask worker runs in a folder of its own
    tasks = [(case.name, str(case.netlist.resolve()), str(case.sidefile.resolve()), str((out / case.name).resolve()),
              timeout_s) for case in checked.cases]
    finished: dict[str, dict] = {}
    interrupted = False
    by_name = {case.name: case for case in checked.cases}
    runner = _dask_rows(tasks, scheduler) if scheduler else _local_rows(tasks, jobs)
    out.mkdir(parents=True, exist_ok=True)
    try:
        for row in _with_progress(runner, len(tasks), lambda row: _verdict(by_name[row["case"]], row)):
            finished[row["case"]] = row
    except KeyboardInterrupt:
        interrupted = True
    finally:
        # Cancels the cases not yet started and waits for the running ones.
        runner.close()
    rows = [row for case in checked.cases if case.name in finished
            for row in summary_rows(case, finished[case.name])]
    write_text_atomic(out / "summary.csv", _csv_text(rows, checked))
    for group, members in _setups(rows).items():
        write_text_atomic(out / group / "comparison.csv", _csv_text(members, checked, first="setup"))
        setups = dict.fromkeys(m["setup"] for m in members if m["status"] != "error")
        readings = [(setup, out / group / setup / "readings.csv") for setup in setups]
        readings = [(setup, path) for setup, path in readings if path.exists()]
        if readings:
            plot_setup_comparison(readings, out / group / "comparison.png", title=group)
    if junit is not None:
        write_text_atomic(junit, junit_xml(checked, finished))
    print(format_summary(rows), flush=True)
    for row in rows:
        if row["status"] != "ok":
            print(f"{row['case']}: {row['message']}", flush=True)
    broken = {row["case"] for row in rows if row["status"] == "limit"}
    errored = {row["case"] for row in rows if row["status"] == "error"}
    print(f"{len(finished)} of {len(tasks)} cases ran: {len(finished) - len(broken | errored)} ok, "
          f"{len(broken)} broke a limit, {len(errored)} could not run; summary in {out / 'summary.csv'}",
          file=sys.stderr, flush=True)
    if interrupted:
        print(f"interrupted: {len(tasks) - len(finished)} case(s) did not run", file=sys.stderr, flush=True)
        return _INTERRUPTED
    return 1 if broken or errored else 0


def summary_rows(case: Case, row: dict) -> list[dict]:
    """One summary row per probe of a finished case, with its limit verdicts and status.

    A case that could not run, or has no probes, gives one row with an empty ``probe``.
    Each limit gets a column ``limit:KEY`` holding ``ok`` or ``broken``; the message names
    every broken limit with its value.
    """
    base = {"case": case.name, "netlist": str(case.netlist), "sidefile": str(case.sidefile)}
    if row["status"] == "error" or not row["probes"]:
        return [{**base, "probe": "", "status": row["status"], "exit_code": row["exit_code"],
                 "message": row["message"]}]
    out = []
    for probe in row["probes"]:
        verdicts = {limit.key: limit.broken_by(probe.get(limit.key)) for limit in case.limits}
        reasons = [f"{probe['probe']}: {why}" for why in verdicts.values() if why]
        out.append({
            **base,
            **probe,
            **{f"limit:{key}": "broken" if why else "ok" for key, why in verdicts.items()},
            "status": "limit" if reasons else "ok",
            "exit_code": 1 if reasons else 0,
            "message": "; ".join(reasons),
        })
    return out


def format_summary(rows: list[dict]) -> str:
    """The terminal table: case, probe, the main figures in engineering notation, status."""
    from augment.report import format_table

    return format_table(rows, _TABLE_COLUMNS)


def junit_xml(plan: Plan, finished: dict[str, dict]) -> str:
    """JUnit XML text: one ``testcase`` per plan case.

    A broken limit is a ``failure`` naming the key, the value and the limit; a case that
    could not run is an ``error`` with its message; a case that never ran (interrupted)
    is ``skipped``.
    """
    suite = ET.Element("testsuite", name=plan.path.stem)
    counts = {"tests": 0, "failures": 0, "errors": 0, "skipped": 0}
    total_s = 0.0
    for case in plan.cases:
        row = finished.get(case.name)
        counts["tests"] += 1
        element = ET.SubElement(suite, "testcase", classname=f"batch.{plan.path.stem}", name=case.name,
                                time=f"{row['elapsed_s']:.3f}" if row else "0")
        if row is None:
            counts["skipped"] += 1
            ET.SubElement(element, "skipped", message="interrupted before this case ran")
            continue
        total_s += row["elapsed_s"]
        if row["status"] == "error":
            counts["errors"] += 1
            ET.SubElement(element, "error", message=row["message"], type=f"exit {row['exit_code']}").text = row["message"]
            continue
        reasons = [r["message"] for r in summary_rows(case, row) if r["status"] == "limit"]
        if reasons:
            counts["failures"] += 1
            text = "; ".join(reasons)
            ET.SubElement(element, "failure", message=text, type="limit").text = text
    suite.attrib.update({key: str(value) for key, value in counts.items()}, time=f"{total_s:.3f}")
    root = ET.Element("testsuites")
    root.append(suite)
    ET.indent(root)
    return ET.tostring(root, encoding="unicode", xml_declaration=True) + "\n"


def _figures(probe: dict, flat: dict) -> dict:
    figures = {"probe": probe["name"], **{key: flat.get(key) for key in _DESCRIPTION}}
    for key in FIGURES:
        value = probe.get(key)
        figures[key] = float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else None
    return figures


def _cases(entry: object, index: int, base: Path, shared: dict[str, Limit], locate: _Locator) -> Iterator[Case]:
    header = locate.case_header(index)
    if not isinstance(entry, dict):
        raise PlanError(header, "a [[case]] must be a table")
    for key in entry:
        if key not in _CASE_KEYS:
            raise PlanError(locate(index, key), f"unknown key '{key}' in a case (known: {', '.join(sorted(_CASE_KEYS))})")
    name = entry.get("name")
    if not isinstance(name, str) or not _SAFE_NAME.match(name):
        where = locate(index, "name") if "name" in entry else header
        raise PlanError(where, "a case needs a name of letters, digits, '.', '_' or '-' (it names its report folder)")
    if "sidefile" in entry and "sidefiles" in entry:
        raise PlanError(locate(index, "sidefiles"), f"case '{name}' gives both sidefile and sidefiles")
    netlist = _existing(entry, "netlist", index, base, locate, name)
    limits = {**shared, **_limits(entry.get("limits", {}), locate, index)}
    where = locate(index, "name")
    if "sidefiles" in entry:
        listed = entry["sidefiles"]
        if not isinstance(listed, list) or not listed or not all(isinstance(item, str) for item in listed):
            raise PlanError(locate(index, "sidefiles"), "sidefiles must be a non-empty list of paths")
        for item in listed:
            sidefile = _resolve(item, base, locate(index, "sidefiles", item), name)
            yield Case(f"{name}/{sidefile.stem}", netlist, sidefile, tuple(limits.values()), where)
    else:
        yield Case(name, netlist, _existing(entry, "sidefile", index, base, locate, name), tuple(limits.values()), where)


def _existing(entry: dict, key: str, index: int, base: Path, locate: _Locator, name: str) -> Path:
    value = entry.get(key)
    if not isinstance(value, str):
        where = locate(index, key) if key in entry else locate.case_header(index)
        raise PlanError(where, f"case '{name}' needs {key} = \"PATH\" (relative to the plan)")
    return _resolve(value, base, locate(index, key), name)


def _resolve(value: str, base: Path, where: Location, name: str) -> Path:
    path = base / value
    if not path.is_file():
        raise PlanError(where, f"case '{name}': no such file {value} (looked for {path})")
    return path


def _limits(table: object, locate: _Locator, index: int | None) -> dict[str, Limit]:
    if not isinstance(table, dict):
        raise PlanError(locate(index, "limits"), "limits must be a table of KEY = VALUE")
    limits = {}
    for key, value in table.items():
        where = locate(index, key, table="limits")
        if key not in FIGURES:
            raise PlanError(where, f"unknown limit key '{key}' (known: {', '.join(FIGURES)})")
        if isinstance(value, dict):
            extra = set(value) - {"min", "max"}
            if extra or not value:
                raise PlanError(where, f"limit '{key}' takes a number or a table {{min = ..., max = ...}}")
            minimum = _number(value["min"], key, where) if "min" in value else None
            maximum = _number(value["max"], key, where) if "max" in value else None
        elif key.endswith("_min"):
            # a bare number bounds the figure the way its name reads: a minimum from below
            minimum, maximum = _number(value, key, where), None
        else:
            minimum, maximum = None, _number(value, key, where)
        limits[key] = Limit(key, minimum, maximum, where)
    return limits


def _number(value: object, key: str, where: Location) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise PlanError(where, f"limit '{key}' must be a number or a SPICE number such as \"50m\"")
    if isinstance(value, str):
        try:
            return spice_number(value)
        except ValueError as error:
            raise PlanError(where, f"limit '{key}': {error}") from None
    if not math.isfinite(value):
        raise PlanError(where, f"limit '{key}' must be finite")
    return float(value)


class _Locator:
    """Finds the line and column of a key in the plan's text (tomllib gives none)."""

    def __init__(self, file: str, text: str):
        self.file = file
        self.lines = text.splitlines()
        self.case_starts = [i for i, line in enumerate(self.lines) if _CASE_HEADER.match(line)]

    def case_header(self, index: int) -> Location:
        if index < len(self.case_starts):
            return Location(self.file, self.case_starts[index] + 1, 1)
        return Location(self.file, 1)

    def __call__(self, index: int | None, key: str, value: str | None = None, *, table: str | None = None) -> Location:
        """Where ``key`` (or, given ``value``, that string) is set, in case ``index`` or at top level."""
        first, last = self._region(index, table)
        if value is not None:
            needle = re.compile(re.escape(f'"{value}"') + "|" + re.escape(f"'{value}'"))
        else:
            needle = re.compile(r"(?:^|[\s{,])([\"']?)" + re.escape(key) + r"\1\s*=")
        for number in range(first, last):
            found = needle.search(self.lines[number])
            if found:
                column = found.start() + 1 if value is not None else found.start(1) + 1
                return Location(self.file, number + 1, column)
        return self.case_header(index) if index is not None else Location(self.file, 1)

    def _region(self, index: int | None, table: str | None) -> tuple[int, int]:
        if index is None:
            first, last = 0, self.case_starts[0] if self.case_starts else len(self.lines)
            if table:
                header = re.compile(r"^\s*\[\s*" + table + r"\s*\]")
                first = next((i for i, line in enumerate(self.lines) if header.match(line)), 0)
                last = next((i for i in range(first + 1, len(self.lines)) if _HEADER.match(self.lines[i])),
                            len(self.lines))
            return first, last
        if index >= len(self.case_starts):
            return 0, len(self.lines)
        first = self.case_starts[index]
        last = self.case_starts[index + 1] if index + 1 < len(self.case_starts) else len(self.lines)
        if table:
            header = re.compile(r"^\s*\[\s*case\s*\.\s*" + table + r"\s*\]")
            inner = next((i for i in range(first, last) if header.match(self.lines[i])), None)
            if inner is not None:
                return inner, last
        return first, last


def _check_out_dir(out: Path, plan: Plan, junit: Path | None) -> None:
    from augment.pipeline import check_output_folder

    inputs = [plan.path, *(p for case in plan.cases for p in (case.netlist, case.sidefile))]
    resolved = {p.resolve() for p in inputs}
    if (out / "summary.csv").exists() or (junit is not None and junit.exists()):
        # only a file that is already there can be an include; parsing costs time otherwise
        resolved |= {p for case in plan.cases for p in _included_files(case.netlist)}
    if junit is not None and junit.resolve() in resolved:
        raise OptionError(str(junit), "refusing to overwrite an input file; choose another --junit")
    check_output_folder(out, inputs)
    for written in (out / "summary.csv", *(out / case.name for case in plan.cases)):
        if written.resolve() in resolved:
            raise OptionError(str(out), f"the batch would replace the input {written}; choose another -o")


def _included_files(netlist: Path) -> tuple[Path, ...]:
    """The files a case's netlist includes; none when it does not parse (its case will say why)."""
    from augment.netlist import parse_netlist

    try:
        return parse_netlist(netlist).included_files
    except AugmentError:
        return ()


def _local_rows(tasks: list[tuple], jobs: int | None) -> Iterator[dict]:
    from concurrent.futures import ProcessPoolExecutor, as_completed
    from multiprocessing import get_context

    workers = max(1, min(jobs or os.cpu_count() or 1, len(tasks)))
    # forkserver: workers must not inherit this process's threads (progress bar, Dask
    # client); the server imports the pipeline once and every worker starts with it.
    context = get_context("forkserver")
    context.set_forkserver_preload(["augment.batch", "augment.pipeline", "augment.report"])
    executor = ProcessPoolExecutor(max_workers=workers, mp_context=context, initializer=_leave_interrupt)
    try:
        futures = {executor.submit(run_case, *task): task for task in tasks}
        for future in as_completed(futures):
            yield _row_of(future, futures[future])
    finally:
        executor.shutdown(wait=True, cancel_futures=True)


def _leave_interrupt() -> None:
    """Ignore Ctrl-C in a local worker (and its ngspice): the parent cancels and keeps the rows."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _dask_rows(tasks: list[tuple], scheduler: str) -> Iterator[dict]:
    """Connect now, so that a bad address fails before anything is written; run as iterated."""
    try:
        from distributed import Client
    except ImportError:
        raise OptionError("--scheduler", "Dask is not installed; install the package's 'cluster' extra") from None
    try:
        client = Client(scheduler, timeout=_CONNECT_TIMEOUT_S)
    except Exception as error:  # noqa: BLE001 - a server that is not a Dask scheduler may answer anything
        raise OptionError("--scheduler", f"cannot reach the Dask scheduler at {scheduler}: "
                          f"{type(error).__name__}: {error}") from None
    return _dask_results(client, tasks)


def _dask_results(client, tasks: list[tuple]) -> Iterator[dict]:
    from distributed import as_completed

    try:
        # pure=False: a fresh key per submission, so a case run twice (or by two batches on
        # one cluster) is two runs, never a shared or cached result.
        futures = {client.submit(run_case, *task, pure=False): task for task in tasks}
        for future in as_completed(futures):
            yield _row_of(future, futures[future])
    finally:
        client.close()


def _row_of(future, task: tuple) -> dict:
    """The row a finished future holds; a lost worker (killed, out of memory) is an error row."""
    try:
        return future.result()
    except Exception as error:  # noqa: BLE001 - the task itself never raises; its process died
        name, netlist, sidefile = task[:3]
        return {"case": name, "netlist": netlist, "sidefile": sidefile, "status": "error", "exit_code": 3,
                "message": f"the worker running this case was lost ({type(error).__name__}: {error})",
                "elapsed_s": 0.0, "warnings": [], "probes": []}


def _verdict(case: Case, row: dict) -> str:
    """The case's status in one word: error, limit or ok."""
    statuses = {summary["status"] for summary in summary_rows(case, row)}
    return next(status for status in ("error", "limit", "ok") if status in statuses)


def _with_progress(rows: Iterator[dict], total: int, verdict: Callable[[dict], str]) -> Iterator[dict]:
    """Pass the rows on, with a progress bar on a terminal and one plain line per case otherwise.

    A row is shown once the caller has it (after the yield): an interrupt that follows the
    line cannot lose a case the line reported.
    """
    if sys.stderr.isatty():
        from tqdm import tqdm

        with tqdm(total=total, unit="case", file=sys.stderr) as bar:
            for row in rows:
                yield row
                bar.set_postfix_str(f"{row['case']}: {verdict(row)}", refresh=False)
                bar.update()
        return
    for done, row in enumerate(rows, 1):
        yield row
        print(f"[{done}/{total}] {row['case']}: {verdict(row)} ({row['elapsed_s']:.1f} s)", file=sys.stderr, flush=True)


def _setups(rows: list[dict]) -> dict[str, list[dict]]:
    """Rows of the cases that compare several side-files on one netlist, by case, each with its setup."""
    groups: dict[str, list[dict]] = {}
    for row in rows:
        group, _, setup = row["case"].rpartition("/")
        if group:
            groups.setdefault(group, []).append({**row, "setup": setup})
    return groups


def _csv_text(rows: list[dict], plan: Plan, first: str = "case") -> str:
    limit_columns = list(dict.fromkeys(f"limit:{limit.key}" for case in plan.cases for limit in case.limits))
    columns = [first, "netlist", "sidefile", "probe", "instrument", *FIGURES, "top_source", "top_peak_v",
               *limit_columns, "status", "exit_code", "message"]
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=columns, extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({key: "" if row.get(key) is None else row.get(key) for key in columns})
    return buffer.getvalue()
