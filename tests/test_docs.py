"""The documentation cannot rot: its command lines parse, its side-files and plan load.

Every ``augment ...`` line in a code block of README.md and docs/*.md is parsed by the
current click command (unknown options, bad values and missing input files fail), and the
quick ones (view, extract, build) are run for real on a copy of the examples. Every side-file
snippet of docs/sidefile.md loads against the reference netlist printed on that page, and
the plan snippet of the user guide loads as a batch plan.
"""

from __future__ import annotations

import re
import shlex
import shutil
from pathlib import Path

import click
import pytest
from click.testing import CliRunner

from augment.batch import load_plan
from augment.cli import main
from augment.conductors import build_graph
from augment.netlist import parse_netlist_text
from augment.sidefile import load_sidefile_text

ROOT = Path(__file__).resolve().parent.parent
DOCS = sorted((ROOT / "docs").glob("*.md"))
PAGES = [ROOT / "README.md", *DOCS]
_FENCE = re.compile(r"^```(\w*)\s*$")


def _blocks(path: Path) -> list[tuple[str, str]]:
    """(language, text) of every fenced block, and ("", text) of every indented block."""
    blocks, lines = [], path.read_text(encoding="utf-8").splitlines()
    fence, body, indented = None, [], []
    for line in lines + [""]:
        found = _FENCE.match(line)
        if fence is not None:
            if found and not found.group(1):
                blocks.append((fence, "\n".join(body) + "\n"))
                fence, body = None, []
            else:
                body.append(line)
            continue
        if found:
            fence = found.group(1)
            continue
        if line.startswith("    ") and line.strip():
            indented.append(line[4:])
        else:
            if indented:
                blocks.append(("", "\n".join(indented) + "\n"))
            indented = [] if not line.strip() or not line.startswith("    ") else indented
    return blocks


def _command_lines() -> list[tuple[str, str]]:
    """(page, command line) of every ``augment ...`` line in a code block."""
    found = []
    for page in PAGES:
        for language, text in _blocks(page):
            if language not in ("", "sh", "bash", "console"):
                continue
            for line in text.splitlines():
                line = line.split(" #")[0].strip()
                if line.startswith("augment ") or line == "augment":
                    found.append((page.name, line))
    return found


COMMANDS = _command_lines()


def _parse(line: str) -> click.Context:
    """Parse a command line with the current options, as click would before running it."""
    words = shlex.split(line)[1:]
    # group options (--debug) come before the subcommand's name
    leading = words[: next((i for i, w in enumerate(words) if not w.startswith("-")), len(words))]
    group = main.make_context("augment", [*leading, "demo"])
    name, *rest = words[len(leading):]
    command = main.get_command(group, name)
    if command is None:
        raise click.UsageError(f"no such command {name!r}")
    return command.make_context(name, rest, parent=group)


@pytest.fixture
def in_examples_copy(tmp_path, monkeypatch):
    """Work in a copy of the repository's netlists/ so that commands write only there."""
    shutil.copytree(ROOT / "netlists", tmp_path / "netlists")
    monkeypatch.chdir(tmp_path)
    return tmp_path


class TestCommandLines:
    """Every ``augment`` line in README.md and docs/ parses with the CLI's current options."""

    def test_pages_have_commands(self):
        """The README and the user guide both show command lines (the extraction works)."""
        pages = {page for page, _ in COMMANDS}
        assert {"README.md", "user-guide.md"} <= pages

    @pytest.mark.parametrize(("page", "line"), COMMANDS, ids=[f"{p}:{l[:60]}" for p, l in COMMANDS])
    def test_line_parses(self, page, line, monkeypatch):
        """The line names a real subcommand, real options and existing input files."""
        monkeypatch.chdir(ROOT)
        context = _parse(line)
        assert context.command.name in main.commands

    def test_checker_rejects_an_unknown_option(self, monkeypatch):
        """A line with an option the CLI does not have is caught (the checker has teeth)."""
        monkeypatch.chdir(ROOT)
        with pytest.raises(click.UsageError):
            _parse("augment extract netlists/shunt/shunt.cir -g netlists/shunt/sense.toml --bogus")

    @pytest.mark.parametrize(
        ("page", "line"),
        [(p, l) for p, l in COMMANDS if l.split()[1] in ("view", "extract", "build")],
        ids=[f"{p}:{l[:60]}" for p, l in COMMANDS if l.split()[1] in ("view", "extract", "build")],
    )
    def test_quick_line_runs(self, page, line, in_examples_copy):
        """The geometry and netlist commands shown in the docs run and exit 0."""
        result = CliRunner().invoke(main, shlex.split(line)[1:])
        assert result.exit_code == 0, result.output
        assert "Traceback" not in result.output


class TestSidefileSnippets:
    """Every side-file snippet of docs/sidefile.md loads against the page's reference netlist."""

    PAGE = ROOT / "docs" / "sidefile.md"

    def _netlist(self):
        spice = [text for language, text in _blocks(self.PAGE) if language == "spice"]
        assert len(spice) == 1
        return parse_netlist_text(spice[0], "reference.cir", ROOT)

    def _snippets(self) -> list[str]:
        return [text for language, text in _blocks(self.PAGE) if language == "toml"]

    def test_there_is_an_example_per_section(self):
        """The reference gives an example for the top level and each table (8 in all)."""
        assert len(self._snippets()) >= 8

    def test_every_snippet_loads_and_builds(self):
        """Each snippet passes the loader's rules and the conductor graph's geometry checks."""
        netlist = self._netlist()
        for number, text in enumerate(self._snippets(), start=1):
            sidefile = load_sidefile_text(text, f"sidefile.md snippet {number}", netlist)
            build_graph(sidefile, netlist)

    def test_every_table_key_is_documented(self):
        """Every key the loader accepts appears in the reference's tables."""
        from augment import sidefile

        page = self.PAGE.read_text(encoding="utf-8")
        keys = set().union(sidefile._TOP_KEYS, sidefile._WIRE_KEYS, sidefile._COIL_KEYS,
                           sidefile._AGGRESSOR_KEYS, sidefile._PROBE_KEYS, sidefile._LEADS_KEYS,
                           sidefile._INSTRUMENT_KEYS, sidefile._ANALYSIS_KEYS)
        missing = {key for key in keys if f"`{key}`" not in page and f"[{key}" not in page
                   and f"[[{key}" not in page}
        assert not missing


class TestPlanSnippet:
    """The batch plan shown in the user guide loads next to the half-bridge example."""

    def test_plan_snippet_loads(self, in_examples_copy):
        """The snippet is a valid plan when placed in netlists/half_bridge/."""
        plans = [text for language, text in _blocks(ROOT / "docs" / "user-guide.md") if language == "toml"]
        assert len(plans) == 1
        path = in_examples_copy / "netlists" / "half_bridge" / "snippet.toml"
        path.write_text(plans[0])
        plan = load_plan(path)
        assert [case.name for case in plan.cases] == ["long-ground"]


class TestLinks:
    """The README and the docs link to pages that exist."""

    @pytest.mark.parametrize("page", PAGES, ids=[p.name for p in PAGES])
    def test_relative_links_resolve(self, page):
        """Every relative Markdown link points at an existing file."""
        text = page.read_text(encoding="utf-8")
        for target in re.findall(r"\]\(([^)#\s]+)(?:#[^)]*)?\)", text):
            if "://" in target:
                continue
            assert (page.parent / target).exists(), f"{page.name} links to missing {target}"
