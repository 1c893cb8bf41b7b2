"""Tests of augment/batch.py: plan checking, limits, summary, JUnit, local and Dask execution.

The end-to-end tests run the real pipeline and real ngspice on small scenarios of our own.
"""

from __future__ import annotations

import csv
import signal
import subprocess
import sys
import textwrap
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
from click.testing import CliRunner

from augment.batch import Case, Limit, Plan, format_summary, junit_xml, load_plan, run_case, run_plan, summary_rows
from augment.cli import main
from augment.errors import Location, OptionError, PlanError

# Scenario of our own: a 1 V pulse into a 50 ohm / 50 ohm divider.
DIVIDER = """divider
V1 in 0 PULSE(0 1 1n 1n 1n 20n 40n)
R1 in out 50
R2 out 0 50
.tran 0.1n 30n
.end
"""

# Two voltage sources of different value in parallel: ngspice finds no solution.
SOURCE_LOOP = """source loop
V1 out 0 PULSE(0 1 1n 1n 1n 20n 40n)
V2 out 0 2
R2 out 0 50
.tran 0.1n 30n
.end
"""

# R2 placed 10 mm long, a 10x passive probe across it with 50 mm leads 1 mm apart.
ACROSS_R2 = """\
units = "mm"
wire_radius = 0.25

[terminals]
R2 = [[0, 0, 0], [0, 10, 0]]

[[probe]]
name = "across_R2"
plus = "R2.1"
minus = "R2.2"
instrument = "passive-10x"
plus_lead = ["R2.1", [-5, 0, 5], [-5, 50, 5]]
minus_lead = ["R2.2", [-6, 10, 5], [-6, 50, 5]]
"""

# The same probe with a long ground lead that encloses a wide loop.
WIDE_LOOP = ACROSS_R2.replace('[-6, 10, 5], [-6, 50, 5]', '[40, 10, 0], [40, 10, 45], [-6, 50, 5]')

# A side-file whose probe names a terminal R2 does not have.
BAD_SIDEFILE = ACROSS_R2.replace('minus = "R2.2"', 'minus = "R2.7"')

GOOD_PLAN = """\
[[case]]
name = "good"
netlist = "divider.cir"
sidefile = "across.toml"

[[case]]
name = "malformed"
netlist = "divider.cir"
sidefile = "bad.toml"

[[case]]
name = "no-solution"
netlist = "loop.cir"
sidefile = "across.toml"

[[case]]
name = "strict"
netlist = "divider.cir"
sidefile = "across.toml"
[case.limits]
max_abs_error = "1u"
probed_max = { min = 0.4, max = "1.5" }
"""

COMPARE_PLAN = """\
[limits]
ideal_max = { min = 0.49, max = 0.51 }

[[case]]
name = "setups"
netlist = "divider.cir"
sidefiles = ["across.toml", "wide.toml"]
"""


def _scenario(folder: Path, plan_text: str = GOOD_PLAN) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "divider.cir").write_text(DIVIDER)
    (folder / "loop.cir").write_text(SOURCE_LOOP)
    (folder / "across.toml").write_text(ACROSS_R2)
    (folder / "wide.toml").write_text(WIDE_LOOP)
    (folder / "bad.toml").write_text(BAD_SIDEFILE)
    plan = folder / "plan.toml"
    plan.write_text(plan_text)
    return plan


def _summary(out: Path) -> list[dict]:
    with open(out / "summary.csv", newline="", encoding="utf-8") as stream:
        return list(csv.DictReader(stream))


@pytest.fixture(scope="module")
def local_run(tmp_path_factory):
    """The good/malformed/failing/strict plan run once with two local workers."""
    folder = tmp_path_factory.mktemp("local")
    plan = _scenario(folder / "in")
    out = folder / "out"
    junit = folder / "junit.xml"
    code = run_plan(plan, out, jobs=2, scheduler=None, junit=junit)
    return {"plan": plan, "out": out, "junit": junit, "code": code, "rows": _summary(out)}


@pytest.fixture(scope="module")
def compare_run(tmp_path_factory):
    """The plan comparing two setups on one netlist, run once with two local workers."""
    folder = tmp_path_factory.mktemp("compare")
    plan = _scenario(folder / "in", COMPARE_PLAN)
    code = run_plan(plan, folder / "out", jobs=2, scheduler=None, junit=None)
    return {"out": folder / "out", "code": code, "rows": _summary(folder / "out")}


def _plan_error(tmp_path: Path, plan_text: str) -> PlanError:
    plan = _scenario(tmp_path, textwrap.dedent(plan_text))
    with pytest.raises(PlanError) as caught:
        load_plan(plan)
    return caught.value


class TestLoadPlan:
    def test_cases_in_file_order_with_resolved_paths(self, tmp_path):
        """Cases come back in file order, paths relative to the plan's folder."""
        plan = load_plan(_scenario(tmp_path))
        assert [case.name for case in plan.cases] == ["good", "malformed", "no-solution", "strict"]
        assert plan.cases[2].netlist == tmp_path / "loop.cir"
        assert plan.cases[0].limits == ()

    def test_limit_values_take_spice_numbers_and_ranges(self, tmp_path):
        """'1u' is 1e-6 as a maximum; a {min, max} table gives both bounds ('600m' is 0.6)."""
        strict = load_plan(_scenario(tmp_path)).cases[3]
        limits = {limit.key: (limit.minimum, limit.maximum) for limit in strict.limits}
        # SPICE scale factors u = 1e-6, m = 1e-3 (ngspice manual, section 2.4).
        assert limits == {"max_abs_error": (None, pytest.approx(1e-6)), "probed_max": (0.4, 1.5)}

    def test_bare_number_on_a_minimum_is_a_floor(self, tmp_path):
        """probed_min = -5 bounds probed_min from below; probed_max = 5 from above."""
        text = GOOD_PLAN.replace('probed_max = { min = 0.4, max = "1.5" }', 'probed_min = -5\nprobed_max = 5')
        strict = load_plan(_scenario(tmp_path, text)).cases[3]
        limits = {limit.key: (limit.minimum, limit.maximum) for limit in strict.limits}
        assert limits["probed_min"] == (-5.0, None)
        assert limits["probed_max"] == (None, 5.0)

    def test_sidefiles_make_one_sub_case_each(self, tmp_path):
        """A case listing several side-files becomes NAME/SIDESTEM per side-file, sharing plan-wide limits."""
        plan = load_plan(_scenario(tmp_path, COMPARE_PLAN))
        assert [case.name for case in plan.cases] == ["setups/across", "setups/wide"]
        assert all(case.limits[0].key == "ideal_max" for case in plan.cases)

    def test_case_limit_overrides_plan_limit(self, tmp_path):
        """A key set in [case.limits] replaces the same key of [limits]."""
        text = COMPARE_PLAN + '[case.limits]\nideal_max = "2"\n'
        limit = load_plan(_scenario(tmp_path, text)).cases[0].limits[0]
        assert (limit.minimum, limit.maximum) == (None, 2.0)

    def test_missing_sidefile_names_its_line(self, tmp_path):
        """A side-file that does not exist is a PlanError at the sidefile line."""
        error = _plan_error(tmp_path, GOOD_PLAN.replace('"bad.toml"', '"nowhere.toml"'))
        assert str(error).startswith(f"{tmp_path / 'plan.toml'}:9:1: case 'malformed': no such file nowhere.toml")

    def test_missing_netlist_in_sidefiles_case(self, tmp_path):
        """A missing netlist of a sidefiles case is reported at its netlist line."""
        error = _plan_error(tmp_path, COMPARE_PLAN.replace("divider.cir", "gone.cir"))
        assert error.where == Location(str(tmp_path / "plan.toml"), 6, 1)

    def test_unknown_limit_key_names_line_and_column(self, tmp_path):
        """An unknown limit key is reported where it is written, column of the key."""
        error = _plan_error(tmp_path, GOOD_PLAN.replace("max_abs_error", "  max_abs_eror"))
        assert error.where == Location(str(tmp_path / "plan.toml"), 21, 3)
        assert "unknown limit key 'max_abs_eror'" in error.message

    def test_non_number_limit(self, tmp_path):
        """A limit value that is not a number is a PlanError at its line."""
        error = _plan_error(tmp_path, GOOD_PLAN.replace('"1u"', '"fast"'))
        assert error.where.line == 21
        assert "'fast' is not a number" in error.message

    def test_bool_limit_is_not_a_number(self, tmp_path):
        """true is not accepted as a limit value."""
        error = _plan_error(tmp_path, COMPARE_PLAN.replace("{ min = 0.49, max = 0.51 }", "true"))
        assert error.where.line == 2

    def test_duplicate_case_name(self, tmp_path):
        """A case name used twice is a PlanError at the second one, naming the first."""
        error = _plan_error(tmp_path, GOOD_PLAN.replace('"strict"', '"good"'))
        assert error.where.line == 17
        assert f"first at {tmp_path / 'plan.toml'}:2:1" in error.message

    def test_unknown_case_key(self, tmp_path):
        """A misspelt case key is reported, not ignored."""
        error = _plan_error(tmp_path, GOOD_PLAN.replace('sidefile = "across.toml"\n\n[[case]]\nname = "malformed"',
                                                        'sidefle = "across.toml"\n\n[[case]]\nname = "malformed"'))
        assert error.where.line == 4
        assert "unknown key 'sidefle'" in error.message

    def test_toml_syntax_error_position(self, tmp_path):
        """A TOML syntax error keeps tomllib's line and column in file:line:column form."""
        error = _plan_error(tmp_path, GOOD_PLAN.replace('name = "strict"', 'name = "strict'))
        assert error.where.line == 17
        assert "(at line" not in error.message

    def test_unsafe_case_name(self, tmp_path):
        """A case name that could escape the output folder is refused."""
        error = _plan_error(tmp_path, GOOD_PLAN.replace('"strict"', '"../up"'))
        assert error.where.line == 17

    def test_plan_without_cases(self, tmp_path):
        """A plan with no [[case]] is bad input."""
        error = _plan_error(tmp_path, '[limits]\nrms_error = 1\n')
        assert "no [[case]]" in error.message


class TestLimitBrokenBy:
    WHERE = Location("plan.toml", 1)

    def test_maximum(self):
        """A value above the maximum breaks it, one equal to it keeps it."""
        limit = Limit("max_abs_error", None, 0.05, self.WHERE)
        assert limit.broken_by(0.05) is None
        assert limit.broken_by(0.06) == "max_abs_error = 0.06 above its maximum 0.05"

    def test_minimum(self):
        """A value below the minimum breaks it."""
        assert Limit("probed_max", 0.4, None, self.WHERE).broken_by(0.3) == "probed_max = 0.3 below its minimum 0.4"

    def test_no_ringing_keeps_a_ringing_maximum(self):
        """ringing_hz = None (no ringing found) is under any maximum but breaks a minimum."""
        assert Limit("ringing_hz", None, 1e8, self.WHERE).broken_by(None) is None
        assert "has no value" in Limit("ringing_hz", 1e6, None, self.WHERE).broken_by(None)


def _case(limits=()) -> Case:
    return Case("c1", Path("a.cir"), Path("a.toml"), tuple(limits), Location("plan.toml", 1))


def _row(status="ok", probes=(), message="", exit_code=0) -> dict:
    return {"case": "c1", "netlist": "a.cir", "sidefile": "a.toml", "status": status, "exit_code": exit_code,
            "message": message, "elapsed_s": 0.5, "warnings": [], "probes": list(probes)}


class TestSummaryRows:
    def test_one_row_per_probe_with_verdicts(self):
        """Each probe gets a row; a broken limit sets status 'limit' and names value and limit."""
        limit = Limit("max_abs_error", None, 0.1, Location("plan.toml", 3))
        rows = summary_rows(_case([limit]), _row(probes=[{"probe": "p1", "max_abs_error": 0.05},
                                                        {"probe": "p2", "max_abs_error": 0.2}]))
        assert [(r["probe"], r["status"], r["limit:max_abs_error"]) for r in rows] == [
            ("p1", "ok", "ok"), ("p2", "limit", "broken")]
        assert rows[1]["message"] == "p2: max_abs_error = 0.2 above its maximum 0.1"

    def test_error_case_gives_one_row(self):
        """A case that could not run is one row with an empty probe, its message and exit code."""
        rows = summary_rows(_case(), _row("error", message="x.cir:1:1: bad", exit_code=2))
        assert rows == [{"case": "c1", "netlist": "a.cir", "sidefile": "a.toml", "probe": "", "status": "error",
                         "exit_code": 2, "message": "x.cir:1:1: bad"}]


class TestFormatSummary:
    def test_table_has_header_and_engineering_values(self):
        """The table shows each row's case, probe, figures with units and status."""
        rows = summary_rows(_case(), _row(probes=[{"probe": "p1", "ideal_max": 0.5, "probed_max": 0.61,
                                                   "max_abs_error": 0.12, "rms_error": 0.01, "ringing_hz": 2.5e8}]))
        text = format_summary(rows)
        header, line = text.splitlines()
        assert header.split() == ["case", "probe", "ideal_max", "probed_max", "max_abs_error", "rms_error",
                                  "ringing_hz", "status"]
        assert "610 mV" in line and "250 MHz" in line and line.split()[-1] == "ok"


class TestJunitXml:
    def test_failure_error_and_pass(self):
        """Limit breaks are failures, cases that could not run are errors, unfinished ones skipped."""
        limit = Limit("rms_error", None, 1e-3, Location("plan.toml", 3))
        cases = tuple(Case(name, Path("a.cir"), Path("a.toml"), (limit,), Location("plan.toml", 1))
                      for name in ("pass", "broke", "broken-input", "unrun"))
        finished = {
            "pass": {**_row(probes=[{"probe": "p", "rms_error": 1e-4}]), "case": "pass"},
            "broke": {**_row(probes=[{"probe": "p", "rms_error": 2e-3}]), "case": "broke"},
            "broken-input": {**_row("error", message="a.toml:4:1: no such terminal", exit_code=2),
                             "case": "broken-input"},
        }
        suite = ET.fromstring(junit_xml(Plan(Path("nightly.toml"), cases), finished)).find("testsuite")
        assert {key: suite.get(key) for key in ("name", "tests", "failures", "errors", "skipped")} == {
            "name": "nightly", "tests": "4", "failures": "1", "errors": "1", "skipped": "1"}
        by_name = {case.get("name"): case for case in suite.findall("testcase")}
        assert list(by_name["pass"]) == []
        assert by_name["broke"].find("failure").get("message") == "p: rms_error = 0.002 above its maximum 0.001"
        assert by_name["broken-input"].find("error").get("message") == "a.toml:4:1: no such terminal"
        assert by_name["unrun"].find("skipped") is not None


class TestRunCase:
    def test_malformed_sidefile_is_an_error_row(self, tmp_path):
        """A side-file naming a missing terminal gives an error row with exit code 2, not an exception."""
        _scenario(tmp_path)
        row = run_case("bad", str(tmp_path / "divider.cir"), str(tmp_path / "bad.toml"), None)
        assert (row["status"], row["exit_code"], row["probes"]) == ("error", 2, [])
        assert row["message"].startswith(str(tmp_path / "bad.toml"))

    def test_good_case_reports_divider_voltage(self, tmp_path):
        """The ideal reading across R2 peaks at half the 1 V pulse."""
        _scenario(tmp_path)
        row = run_case("good", str(tmp_path / "divider.cir"), str(tmp_path / "across.toml"), str(tmp_path / "out"))
        assert row["status"] == "ok", row["message"]
        # Voltage divider: 1 V * 50 / (50 + 50).
        assert row["probes"][0]["ideal_max"] == pytest.approx(0.5, rel=1e-6)
        assert (tmp_path / "out" / "result.json").is_file()


class TestRunPlan:
    def test_rows_and_statuses(self, local_run):
        """Good, malformed, failing and limit-breaking cases get ok, error, error and limit rows."""
        statuses = [(row["case"], row["probe"], row["status"], row["exit_code"]) for row in local_run["rows"]]
        assert statuses == [("good", "across_R2", "ok", "0"), ("malformed", "", "error", "2"),
                            ("no-solution", "", "error", "3"), ("strict", "across_R2", "limit", "1")]

    def test_exit_code_is_one(self, local_run):
        """A broken limit or a case that could not run makes the batch exit 1."""
        assert local_run["code"] == 1

    def test_messages_name_the_cause(self, local_run):
        """The malformed case names its side-file, the failing one quotes ngspice, the strict one its limit."""
        rows = {row["case"]: row for row in local_run["rows"]}
        assert rows["malformed"]["message"].startswith(str(local_run["plan"].parent / "bad.toml") + ":")
        assert "ngspice" in rows["no-solution"]["message"]
        assert rows["strict"]["message"].startswith("across_R2: max_abs_error = ")
        assert rows["strict"]["limit:max_abs_error"] == "broken"
        assert rows["strict"]["limit:probed_max"] == "ok"

    def test_figures_match_the_divider(self, local_run):
        """The good case's ideal reading spans 0 V to the divider's 0.5 V."""
        good = local_run["rows"][0]
        # Voltage divider: 1 V * 50 / (50 + 50); the pulse starts at 0 V.
        assert float(good["ideal_max"]) == pytest.approx(0.5, rel=1e-6)
        assert float(good["ideal_min"]) == pytest.approx(0.0, abs=1e-9)

    def test_reports_in_case_folders(self, local_run):
        """Each case that ran has its full report in its own folder."""
        assert (local_run["out"] / "good" / "result.json").is_file()
        assert (local_run["out"] / "strict" / "result.json").is_file()

    def test_junit_content(self, local_run):
        """The JUnit file has one testcase per case: a failure for strict, errors for the two that could not run."""
        suite = ET.parse(local_run["junit"]).getroot().find("testsuite")
        outcome = {case.get("name"): [child.tag for child in case] for case in suite.findall("testcase")}
        assert outcome == {"good": [], "malformed": ["error"], "no-solution": ["error"], "strict": ["failure"]}
        assert "max_abs_error" in suite.find("testcase[@name='strict']/failure").get("message")

    def test_same_numbers_with_one_job(self, local_run, tmp_path):
        """One worker gives the same summary.csv, byte for byte, as two."""
        code = run_plan(local_run["plan"], tmp_path / "one", jobs=1, scheduler=None, junit=None)
        assert code == 1
        assert (tmp_path / "one" / "summary.csv").read_text() == (local_run["out"] / "summary.csv").read_text()

    def test_same_numbers_on_dask(self, local_run, tmp_path, monkeypatch):
        """A Dask LocalCluster with two worker processes gives the same summary as local workers,
        with the plan named by a path relative to a folder the workers do not run in."""
        distributed = pytest.importorskip("distributed")
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1", processes=True,
                                      dashboard_address=None) as cluster:
            monkeypatch.chdir(local_run["plan"].parent)
            code = run_plan(Path(local_run["plan"].name), tmp_path / "dask", jobs=None,
                            scheduler=cluster.scheduler_address, junit=None)
        assert code == 1
        # the paths are written as the plan was named (here relative), and messages quote them
        paths = {"netlist", "sidefile", "message"}
        dask_rows = [{k: v for k, v in row.items() if k not in paths} for row in _summary(tmp_path / "dask")]
        assert dask_rows == [{k: v for k, v in row.items() if k not in paths} for row in local_run["rows"]]
        assert all(not Path(row["netlist"]).is_absolute() for row in _summary(tmp_path / "dask"))

    def test_compare_setups_all_pass(self, compare_run):
        """Two setups on one netlist within a plan-wide limit exit 0 with a row each."""
        assert compare_run["code"] == 0
        assert [(row["case"], row["status"]) for row in compare_run["rows"]] == [
            ("setups/across", "ok"), ("setups/wide", "ok")]
        assert (compare_run["out"] / "setups" / "wide" / "result.json").is_file()

    def test_comparison_table_of_setups(self, compare_run):
        """A case with several side-files gets comparison.csv: one row per setup and probe, as in the summary."""
        with open(compare_run["out"] / "setups" / "comparison.csv", newline="", encoding="utf-8") as stream:
            comparison = list(csv.DictReader(stream))
        summary = compare_run["rows"]
        assert [row["setup"] for row in comparison] == ["across", "wide"]
        assert [row["probed_max"] for row in comparison] == [row["probed_max"] for row in summary]
        # The wide ground loop encloses more flux than leads side by side (Faraday's law).
        assert float(comparison[1]["max_abs_error"]) > float(comparison[0]["max_abs_error"])

    def test_comparison_picture_of_setups(self, compare_run):
        """A case with several side-files gets one PNG with the probed readings overlaid."""
        picture = compare_run["out"] / "setups" / "comparison.png"
        assert picture.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"

    def test_second_batch_into_the_same_folder(self, tmp_path):
        """A batch run again into its folder replaces its files and keeps the user's own."""
        plan = _scenario(tmp_path / "in")
        (tmp_path / "out").mkdir()
        (tmp_path / "out" / "keep.txt").write_text("mine")
        for _ in range(2):
            assert run_plan(plan, tmp_path / "out", jobs=1, scheduler=None, junit=None) in (0, 1)
        assert (tmp_path / "out" / "keep.txt").read_text() == "mine"
        assert (tmp_path / "out" / "summary.csv").exists()

    def test_refuses_to_replace_an_input(self, tmp_path):
        """A case folder that would land on an input file is refused before anything runs."""
        plan = _scenario(tmp_path)
        (tmp_path / "plan.toml").write_text(plan.read_text().replace('name = "good"', 'name = "divider.cir"'))
        with pytest.raises(OptionError, match="would replace the input"):
            run_plan(tmp_path / "plan.toml", tmp_path, jobs=1, scheduler=None, junit=None)

    def test_interrupt_keeps_finished_rows(self, tmp_path):
        """SIGINT after the first case stops the batch with exit 130 and a summary of what finished."""
        cases = "".join(f'[[case]]\nname = "c{i}"\nnetlist = "divider.cir"\nsidefile = "across.toml"\n'
                        for i in range(8))
        plan = _scenario(tmp_path / "in", cases)
        script = (f"from pathlib import Path\nfrom augment.batch import run_plan\nimport sys\n"
                  f"if __name__ == '__main__':\n"
                  f"    sys.exit(run_plan(Path({str(plan)!r}), Path({str(tmp_path / 'out')!r}), jobs=1,"
                  f" scheduler=None, junit=None))\n")
        process = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                   text=True)
        first = process.stderr.readline()
        process.send_signal(signal.SIGINT)
        _, rest = process.communicate(timeout=60)
        assert first.startswith("[1/8] c0: ok"), first + rest
        assert process.returncode == 130, rest
        rows = _summary(tmp_path / "out")
        assert 1 <= len(rows) < 8
        assert "Traceback" not in rest


class TestBatchCommand:
    def test_plan_error_exit_two_with_location(self, tmp_path):
        """`augment batch` on a plan with an unknown limit key exits 2 with file:line:column and no traceback."""
        plan = _scenario(tmp_path / "in", GOOD_PLAN.replace("probed_max", "probed_peak"))
        result = CliRunner().invoke(main, ["batch", str(plan), "-o", str(tmp_path / "out")])
        assert result.exit_code == 2
        assert f"{plan}:22:1: unknown limit key 'probed_peak'" in result.output
        assert "Traceback" not in result.output
        assert not (tmp_path / "out").exists()

    def test_compare_plan_exit_zero_with_table(self, tmp_path):
        """`augment batch` runs a passing plan, prints the table and writes summary and JUnit."""
        plan = _scenario(tmp_path / "in", COMPARE_PLAN)
        junit = tmp_path / "junit.xml"
        result = CliRunner().invoke(main, ["batch", str(plan), "-o", str(tmp_path / "out"), "--jobs", "2",
                                           "--junit", str(junit)])
        assert result.exit_code == 0, result.output
        assert "setups/across" in result.stdout and "setups/wide" in result.stdout
        assert len(ET.parse(junit).getroot().find("testsuite").findall("testcase")) == 2

    def test_unreachable_scheduler_exits_two(self, tmp_path, monkeypatch):
        """A scheduler address nothing listens on is bad input (exit 2), reported in one line."""
        monkeypatch.setattr("augment.batch._CONNECT_TIMEOUT_S", 1.0)
        plan = _scenario(tmp_path / "in", COMPARE_PLAN)
        # Port 9 (discard) on loopback: nothing listens there on this machine.
        result = CliRunner().invoke(main, ["batch", str(plan), "-o", str(tmp_path / "out"),
                                           "--scheduler", "tcp://127.0.0.1:9"])
        assert result.exit_code == 2
        assert "cannot reach the Dask scheduler" in result.output
        assert not (tmp_path / "out").exists()  # nothing written for a batch that never started
