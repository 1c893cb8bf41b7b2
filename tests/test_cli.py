"""Tests of augment/cli.py through click's CliRunner: every subcommand, streams, exit codes,
refused outputs and atomic writes (SPEC "Command line" and "Details that the tests rely on").
"""

from __future__ import annotations

import json
import re
import os
import stat
from pathlib import Path

import pytest
from click.testing import CliRunner

from augment.cli import main
from augment.errors import NetlistError

# A pulsed RC of our own: 50 ohm into 10 pF, the capacitor probed with a passive 10x probe.
# R9 hangs on the wired net 'out' without being placed, so every command warns about it.
NETLIST = """Pulsed RC of our own for the CLI tests
V1 in 0 PULSE(0 1 0 2n 2n 20n 50n)
R1 in out 50
C1 out 0 10p
R9 out 0 1meg
.tran 0.5n 60n
.end
"""
SIDEFILE = """units = "mm"
wire_radius = 0.2

[terminals]
R1 = [[0, 0, 0], [10, 0, 0]]
C1 = [[20, 0, 0], [20, -10, 0]]

[[wire]]
net = "out"
path = ["R1.2", "C1.1"]

[[probe]]
name = "cap"
plus = "C1.1"
minus = "C1.2"
instrument = "passive-10x"
plus_lead = ["C1.1", [30, 0, 0], [60, -4, 0]]
minus_lead = ["C1.2", [30, -10, 0], [60, -5, 0]]
"""
BAD_NETLIST = NETLIST.replace("R1 in out 50", "R1 in out 1.2.3k")
# Two voltage sources across the same nodes: ngspice finds no operating point.
FAILING_NETLIST = NETLIST.replace("R1 in out 50", "V2 in 0 DC 2\nR1 in out 50")
WARNING = "R9.1 is on wired net 'out' but not placed"


@pytest.fixture
def case(tmp_path):
    """The netlist and side-file above, written into their own folder."""
    folder = tmp_path / "inputs"
    folder.mkdir()
    (folder / "rc.cir").write_text(NETLIST)
    (folder / "rc.toml").write_text(SIDEFILE)
    return folder / "rc.cir", folder / "rc.toml"


@pytest.fixture
def umask_022():
    """Run the test under umask 022, the common default, and restore the caller's."""
    previous = os.umask(0o022)
    yield
    os.umask(previous)


def invoke(*args):
    return CliRunner().invoke(main, [str(a) for a in args], prog_name="augment")


def assert_clean_failure(result, code: int, where: str | None = None) -> None:
    """Exit ``code``, nothing on stdout, one error line (beside any warnings) naming ``where``, no traceback."""
    assert result.exit_code == code, result.output
    assert "Traceback" not in result.output
    assert result.stdout == ""
    errors = [line for line in result.stderr.splitlines() if not line.startswith("warning: ")]
    assert len(errors) == 1, result.stderr
    if where is not None:
        assert where in errors[0]


@pytest.fixture(scope="module")
def ran(tmp_path_factory):
    """One `augment run --json` of the case, shared by the tests that read its outputs."""
    folder = tmp_path_factory.mktemp("ran")
    (folder / "rc.cir").write_text(NETLIST)
    (folder / "rc.toml").write_text(SIDEFILE)
    result = invoke("run", folder / "rc.cir", "-g", folder / "rc.toml", "-o", folder / "report", "--json")
    return result, folder / "report"


class TestMain:
    """The `augment` group: help, version, usage errors, --debug."""

    def test_help_lists_every_subcommand(self):
        """--help exits 0 and names build, run, extract, view, batch and demo."""
        result = invoke("--help")
        assert result.exit_code == 0
        for command in ("build", "run", "extract", "view", "batch", "demo"):
            assert command in result.stdout

    def test_version(self):
        """--version exits 0 and prints the program's name and version."""
        result = invoke("--version")
        assert result.exit_code == 0
        assert result.stdout.startswith("augment, version ")

    def test_unknown_option_is_a_usage_error(self, case):
        """An unknown option is bad input: exit 2, usage on stderr, no traceback."""
        result = invoke("build", case[0], "-g", case[1], "--bogus")
        assert result.exit_code == 2
        assert "No such option" in result.stderr
        assert "Traceback" not in result.output

    def test_missing_input_file_is_a_usage_error(self, case, tmp_path):
        """A netlist that does not exist is bad input (exit 2) named in the message."""
        result = invoke("build", tmp_path / "nothere.cir", "-g", case[1])
        assert result.exit_code == 2
        assert "nothere.cir" in result.stderr

    def test_debug_lets_the_exception_through(self, case):
        """With --debug a bad netlist raises the NetlistError itself, for its traceback."""
        case[0].write_text(BAD_NETLIST)
        result = invoke("--debug", "build", case[0], "-g", case[1])
        assert isinstance(result.exception, NetlistError)
        assert result.exit_code != 0


class TestBuild:
    """`augment build`: the augmented netlist on stdout or into -o."""

    def test_stdout(self, case):
        """Without -o the augmented netlist goes to stdout, the warning to stderr, exit 0."""
        result = invoke("build", case[0], "-g", case[1])
        assert result.exit_code == 0, result.output
        assert result.stdout.startswith("Pulsed RC of our own for the CLI tests")
        assert "LX_out_1" in result.stdout
        assert WARNING in result.stderr and WARNING not in result.stdout

    def test_output_file(self, case, tmp_path):
        """With -o the netlist is written there, stdout stays empty, stderr says where."""
        out = tmp_path / "aug.cir"
        result = invoke("build", case[0], "-g", case[1], "-o", out)
        assert result.exit_code == 0, result.output
        assert result.stdout == ""
        assert "LX_out_1" in out.read_text()
        assert str(out) in result.stderr

    def test_output_written_atomically(self, case, tmp_path):
        """-o replaces the old file by a rename: a hard link to the old file keeps the old bytes, no temporaries remain."""
        out, link = tmp_path / "aug.cir", tmp_path / "old-link.cir"
        out.write_text("old contents\n")
        os.link(out, link)
        result = invoke("build", case[0], "-g", case[1], "-o", out)
        assert result.exit_code == 0, result.output
        assert link.read_text() == "old contents\n"
        assert "LX_out_1" in out.read_text()
        assert sorted(p.name for p in tmp_path.iterdir()) == ["aug.cir", "inputs", "old-link.cir"]

    def test_output_mode_follows_umask(self, case, tmp_path, umask_022):
        """The written netlist gets an ordinary file's mode under the user's umask (0644 for 022), as a plain write would."""
        out = tmp_path / "aug.cir"
        result = invoke("build", case[0], "-g", case[1], "-o", out)
        assert result.exit_code == 0, result.output
        assert stat.S_IMODE(out.stat().st_mode) == 0o644

    @pytest.mark.parametrize("which", [0, 1], ids=["netlist", "sidefile"])
    def test_output_equal_to_an_input_refused(self, case, which):
        """-o naming the netlist or the side-file is refused (exit 2) and that file keeps its bytes."""
        target = case[which]
        before = target.read_bytes()
        result = invoke("build", case[0], "-g", case[1], "-o", target)
        assert_clean_failure(result, 2, "refusing to overwrite an input file")
        assert target.read_bytes() == before

    def test_output_onto_an_included_file_refused(self, case):
        """-o naming a file the netlist includes is refused (exit 2) and that file keeps its bytes."""
        case[0].write_text(NETLIST.replace("C1 out 0 10p", "C1 out 0 {cload}\n.include load.inc"))
        included = case[0].parent / "load.inc"
        included.write_text(".param cload=10p\n")
        result = invoke("build", case[0], "-g", case[1], "-o", included)
        assert_clean_failure(result, 2, "refusing to overwrite a file the netlist includes")
        assert included.read_text() == ".param cload=10p\n"

    def test_output_into_a_pipe_is_written_through(self, case, tmp_path):
        """-o naming a FIFO writes the netlist into it and leaves it a FIFO (a rename would replace it)."""
        import threading

        fifo = tmp_path / "pipe"
        os.mkfifo(fifo)
        received = []
        reader = threading.Thread(target=lambda: received.append(fifo.read_text()), daemon=True)
        reader.start()
        result = invoke("build", case[0], "-g", case[1], "-o", fifo)
        reader.join(timeout=30)
        assert result.exit_code == 0, result.output
        assert stat.S_ISFIFO(fifo.stat().st_mode)
        assert "LX_out_1" in received[0]

    def test_relative_include_elsewhere_warns(self, case, tmp_path):
        """-o in another folder than the netlist's, with a relative .include, says where to run it."""
        case[0].write_text(NETLIST.replace("C1 out 0 10p", "C1 out 0 {cload}\n.include load.inc"))
        (case[0].parent / "load.inc").write_text(".param cload=10p\n")
        result = invoke("build", case[0], "-g", case[1], "-o", tmp_path / "aug.cir")
        assert result.exit_code == 0, result.output
        assert f"{case[0]}:5:1: .include paths stay relative to {case[0].parent}/" in result.stderr
        beside = invoke("build", case[0], "-g", case[1], "-o", case[0].parent / "aug.cir")
        assert "stay relative" not in beside.stderr

    def test_ac_start_above_stop_is_bad_input(self, case):
        """--analysis with FSTART above FSTOP is refused as bad input (exit 2), not left to ngspice."""
        result = invoke("build", case[0], "-g", case[1], "--analysis", "ac dec 10 1g 1k")
        assert result.exit_code == 2
        assert "FSTART is above FSTOP" in result.output and "Traceback" not in result.output

    def test_bad_netlist_leaves_existing_output(self, case, tmp_path):
        """A bad netlist exits 2 at its file:line:column and does not touch an existing -o file."""
        case[0].write_text(BAD_NETLIST)
        out = tmp_path / "aug.cir"
        out.write_text("previous build\n")
        result = invoke("build", case[0], "-g", case[1], "-o", out)
        assert_clean_failure(result, 2, f"{case[0]}:3:11: bad number '1.2.3k'")
        assert out.read_text() == "previous build\n"


class TestRun:
    """`augment run`: simulate, compare, write the report folder; --json on stdout."""

    def test_json_on_stdout_only(self, ran):
        """--json prints exactly one JSON document on stdout with SPEC's keys."""
        result, _ = ran
        assert result.exit_code == 0, result.output
        document = json.loads(result.stdout)
        assert {"netlist", "sidefile", "analysis", "probes", "inductors", "couplings", "elapsed_s"} <= set(document)
        assert [probe["name"] for probe in document["probes"]] == ["cap"]

    def test_warnings_on_stderr(self, ran):
        """The warning about R9 and the report note go to stderr, not into the JSON."""
        result, report = ran
        assert WARNING in result.stderr
        assert f"report: {report}/" in result.stderr
        assert WARNING not in result.stdout.replace(json.dumps(WARNING)[1:-1], "")

    def test_report_folder(self, ran):
        """The report folder holds the augmented netlist, readings, summary, result and a plot per probe."""
        _, report = ran
        names = {p.name for p in report.iterdir()}
        assert {"readings.csv", "summary.csv", "result.json", "cap.png", "rc.augmented.cir"} <= names
        assert not any(name.startswith(".") for name in names)
        assert (report / "cap.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"

    def test_report_folder_mode_follows_umask(self, case, tmp_path, umask_022):
        """The report folder gets an ordinary folder's mode under the user's umask (0755 for 022), as mkdir would."""
        report = tmp_path / "report"
        result = invoke("run", case[0], "-g", case[1], "-o", report)
        assert result.exit_code == 0, result.output
        assert stat.S_IMODE(report.stat().st_mode) == 0o755

    def test_hung_simulation_times_out_exit_3(self, case, tmp_path):
        """A simulation that runs past --timeout is stopped and reported as a simulator failure (exit 3)."""
        # A million time points of 1 ps: far more than one second of ngspice's work.
        case[0].write_text(NETLIST.replace(".tran 0.5n 60n", ".tran 0.001n 1m 0 0.001n"))
        result = invoke("run", case[0], "-g", case[1], "-o", tmp_path / "report", "--timeout", "1")
        assert_clean_failure(result, 3, "timed out")
        assert not (tmp_path / "report").exists()

    def test_table_without_json(self, case, tmp_path):
        """Without --json stdout holds the probe table (not JSON), exit 0."""
        result = invoke("run", case[0], "-g", case[1], "-o", tmp_path / "report")
        assert result.exit_code == 0, result.output
        assert "cap" in result.stdout
        with pytest.raises(json.JSONDecodeError):
            json.loads(result.stdout)

    def test_second_run_replaces_the_first_report(self, case, tmp_path):
        """Running again into the same folder replaces the report's files and keeps the user's own."""
        report = tmp_path / "report"
        report.mkdir()
        (report / "notes.txt").write_text("mine\n")
        first = invoke("run", case[0], "-g", case[1], "-o", report)
        assert first.exit_code == 0, first.output
        (report / "result.json").write_text("{}")
        second = invoke("run", case[0], "-g", case[1], "-o", report, "--json")
        assert second.exit_code == 0, second.output
        assert json.loads((report / "result.json").read_text()) == json.loads(second.stdout)
        assert (report / "notes.txt").read_text() == "mine\n"
        assert not any(p.name.startswith(".") for p in report.iterdir())
        assert sorted(p.name for p in tmp_path.iterdir()) == ["inputs", "report"]

    def test_report_into_the_folder_of_the_inputs(self, case):
        """-o the folder holding the inputs puts the report beside them; the inputs keep their bytes."""
        folder = case[0].parent
        before = {p.name: p.read_bytes() for p in folder.iterdir()}
        result = invoke("run", case[0], "-g", case[1], "-o", folder)
        assert result.exit_code == 0, result.output
        assert {name: (folder / name).read_bytes() for name in before} == before
        assert (folder / "result.json").exists() and (folder / "rc.augmented.cir").exists()

    def test_report_file_that_would_replace_an_input_is_refused(self, case):
        """A side-file named like a report file (summary.csv) stops the move: exit 2, inputs and folder unchanged."""
        folder = case[0].parent
        renamed = folder / "summary.csv"
        case[1].rename(renamed)
        before = {p.name: p.read_bytes() for p in folder.iterdir()}
        result = invoke("run", case[0], "-g", renamed, "-o", folder)
        assert_clean_failure(result, 2, "would replace the input")
        assert {p.name: p.read_bytes() for p in folder.iterdir()} == before

    def test_report_file_that_would_replace_an_included_file_is_refused(self, case):
        """An included file named like a report file (result.json) stops the move: exit 2, it keeps its bytes."""
        folder = case[0].parent
        case[0].write_text(NETLIST.replace("C1 out 0 10p", "C1 out 0 {cload}\n.include result.json"))
        (folder / "result.json").write_text(".param cload=10p\n")
        result = invoke("run", case[0], "-g", case[1], "-o", folder)
        assert_clean_failure(result, 2, "would replace the input")
        assert (folder / "result.json").read_text() == ".param cload=10p\n"

    def test_simulator_failure_exits_3(self, case, tmp_path):
        """A netlist ngspice cannot solve exits 3 with ngspice's words quoted and what to try; no report."""
        case[0].write_text(FAILING_NETLIST)
        report = tmp_path / "report"
        result = invoke("run", case[0], "-g", case[1], "-o", report, "--json")
        assert_clean_failure(result, 3, "ngspice failed on rc.cir")
        assert '"' in result.stderr and "try" in result.stderr
        assert not report.exists()

    def test_bad_timeout_is_a_usage_error(self, case, tmp_path):
        """--timeout below one second is refused by the option itself (exit 2)."""
        result = invoke("run", case[0], "-g", case[1], "-o", tmp_path / "r", "--timeout", "0.5")
        assert result.exit_code == 2
        assert "Traceback" not in result.output

    def test_relative_include_resolves_from_netlist_folder(self, case, tmp_path):
        """A netlist with `.include load.inc` next to it runs from any working directory, as ngspice would run it from its own."""
        case[0].write_text(NETLIST.replace("C1 out 0 10p", "C1 out 0 {cload}\n.include load.inc"))
        (case[0].parent / "load.inc").write_text(".param cload=10p\n")
        cwd = Path.cwd()
        os.chdir(tmp_path)
        try:
            result = invoke("run", case[0], "-g", case[1], "-o", tmp_path / "report", "--json")
        finally:
            os.chdir(cwd)
        assert result.exit_code == 0, result.output


class TestExtract:
    """`augment extract`: the lumped matrix as a table or JSON."""

    def test_table(self, case):
        """The table names every conductor and its self inductance."""
        result = invoke("extract", case[0], "-g", case[1])
        assert result.exit_code == 0, result.output
        for conductor in ("wire:out:1", "body:R1", "body:C1", "probe:cap"):
            assert conductor in result.stdout

    def test_table_holds_the_matrix_in_henries(self, case):
        """The text output has the lumped matrix in H: its diagonal row by row is each conductor's self inductance."""
        from augment.units import engineering

        document = json.loads(invoke("extract", case[0], "-g", case[1], "--json").stdout)
        text = invoke("extract", case[0], "-g", case[1]).stdout
        assert "lumped inductance matrix (H):" in text and "coupling coefficients k:" in text
        block = text.split("lumped inductance matrix (H):\n")[1].split("\n\n")[0].splitlines()[1:]
        for index, (row, conductor) in enumerate(zip(block, document["conductors"])):
            assert row.startswith(f"[{index + 1}] {conductor['id']}")
            cells = re.split(r"\s{2,}", row.strip())[1:]  # the table pads its columns with spaces
            assert cells[index] == engineering(conductor["henry"], "H")

    def test_json(self, case):
        """--json prints only JSON: conductors with SPEC's keys and couplings with |k| < 1."""
        result = invoke("extract", case[0], "-g", case[1], "--json")
        assert result.exit_code == 0, result.output
        document = json.loads(result.stdout)
        ids = {c["id"] for c in document["conductors"]}
        assert ids == {"wire:out:1", "body:R1", "body:C1", "probe:cap"}
        for conductor in document["conductors"]:
            assert {"id", "inductor", "henry", "segments", "length_m"} <= set(conductor)
            assert conductor["henry"] > 0
        assert all(abs(pair["k"]) < 1 for pair in document["couplings"])
        assert WARNING in result.stderr

    def test_bad_sidefile(self, case):
        """A side-file naming an unknown net exits 2 at that key's line."""
        case[1].write_text(SIDEFILE.replace('net = "out"', 'net = "otu"'))
        result = invoke("extract", case[0], "-g", case[1], "--json")
        assert_clean_failure(result, 2, f"{case[1]}:9:1:")


class TestView:
    """`augment view`: the geometry drawn into a PNG."""

    def test_png_written_atomically(self, case, tmp_path):
        """-o replaces an old picture by a rename: a hard link to the old file keeps the old bytes."""
        out, link = tmp_path / "geometry.png", tmp_path / "old-link.png"
        out.write_bytes(b"old picture")
        os.link(out, link)
        result = invoke("view", case[0], "-g", case[1], "-o", out)
        assert result.exit_code == 0, result.output
        assert link.read_bytes() == b"old picture"
        assert sorted(p.name for p in tmp_path.iterdir()) == ["geometry.png", "inputs", "old-link.png"]

    def test_png(self, case, tmp_path):
        """-o gets a PNG file; stdout stays empty; stderr says where."""
        out = tmp_path / "geometry.png"
        result = invoke("view", case[0], "-g", case[1], "-o", out)
        assert result.exit_code == 0, result.output
        assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert result.stdout == ""
        assert str(out) in result.stderr

    def test_probe_on_an_element_inside_an_instance(self, case, tmp_path):
        """A probe at a terminal of X1.RA (inside a subcircuit instance) is drawn, as build accepts it."""
        case[0].write_text(NETLIST.replace("R9 out 0 1meg", ".subckt PAD p n\nRA p n 1meg\n.ends PAD\nX1 out 0 PAD"))
        case[1].write_text(SIDEFILE.replace('C1 = [[20, 0, 0], [20, -10, 0]]', 'C1 = [[20, 0, 0], [20, -10, 0]]\n"X1.RA" = [[100, 0, 0], [100, -10, 0]]')
                           + '\n[[probe]]\nname = "pad"\nplus = "X1.RA.1"\nminus = "X1.RA.2"\ninstrument = "passive-10x"\n'
                           'plus_lead = ["X1.RA.1", [110, 0, 20]]\nminus_lead = ["X1.RA.2", [110, -1, 20]]\n')
        assert invoke("build", case[0], "-g", case[1]).exit_code == 0
        result = invoke("view", case[0], "-g", case[1], "-o", tmp_path / "g.png")
        assert result.exit_code == 0, result.output
        assert (tmp_path / "g.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"

    def test_output_equal_to_sidefile_refused(self, case):
        """-o naming the side-file is refused (exit 2) and the side-file keeps its bytes."""
        before = case[1].read_bytes()
        result = invoke("view", case[0], "-g", case[1], "-o", case[1])
        assert_clean_failure(result, 2, "refusing to overwrite an input file")
        assert case[1].read_bytes() == before


class TestBatch:
    """`augment batch`: a plan of cases, exit 1 when a limit breaks, exit 2 for a bad plan."""

    @pytest.fixture
    def plan(self, case):
        def write(limit: str) -> Path:
            path = case[0].parent / "plan.toml"
            path.write_text(f'[[case]]\nname = "rc"\nnetlist = "rc.cir"\nsidefile = "rc.toml"\n'
                            f'[case.limits]\nmax_abs_error = "{limit}"\n')
            return path
        return write

    def test_limits_kept(self, plan, tmp_path):
        """A case within its limit: exit 0, one summary table row, summary.csv written."""
        result = invoke("batch", plan("10"), "-o", tmp_path / "out", "--jobs", "1")
        assert result.exit_code == 0, result.output
        assert "rc" in result.stdout
        assert (tmp_path / "out" / "summary.csv").is_file()

    def test_limit_broken_exits_1(self, plan, tmp_path):
        """A case past its limit: exit 1, a result and not an error."""
        # The probed reading overshoots by about 0.49 V (see TestRun); 1 mV is far below that.
        result = invoke("batch", plan("1m"), "-o", tmp_path / "out", "--jobs", "1")
        assert result.exit_code == 1, result.output
        assert "Traceback" not in result.output

    def test_bad_limit_exits_2(self, plan, tmp_path):
        """A limit that is not a number is bad input: exit 2 at the plan's line."""
        path = plan("lots")
        result = invoke("batch", path, "-o", tmp_path / "out", "--jobs", "1")
        assert_clean_failure(result, 2, f"{path}:6:1:")


class TestDemo:
    """`augment demo`: the built-in scenario into a folder of the user's choice."""

    def test_demo(self, tmp_path):
        """The demo exits 0, writes one report per scenario and says where they are."""
        result = invoke("demo", "-o", tmp_path / "demo")
        assert result.exit_code == 0, result.output
        reports = sorted(p.name for p in (tmp_path / "demo").iterdir())
        assert reports == ["fast_edge_long", "fast_edge_spring", "sensing_loop"]
        assert all((tmp_path / "demo" / name / "result.json").is_file() for name in reports)
        assert str(tmp_path / "demo") in result.stderr
