"""Tests of augment/netlist.py: the SPICE netlist parser, its model and the writer.

Simulator checks run real ngspice through PySpice, one subprocess per netlist, since the
shared library keeps global state between circuits.
"""

from __future__ import annotations

import dataclasses
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given

from augment.errors import Location, NetlistError
from augment.netlist import (
    Directive,
    Element,
    Netlist,
    Subcircuit,
    evaluate,
    parse_netlist,
    parse_netlist_text,
    write_netlist,
)
from tests.strategies import netlist_texts, netlists_with_short_element, spice_numbers

CORPUS = Path(__file__).parent / "corpus"
CORPUS_NETLISTS = sorted(CORPUS.glob("*.cir"))

_SIMULATE = """
import json, sys
from PySpice.Spice.NgSpice.Shared import NgSpiceShared
NgSpiceShared.LIBRARY_PATH = "libngspice.so.0"
ng = NgSpiceShared.new_instance()
ng.load_circuit(sys.stdin.read())
ng.run()
plot = ng.plot(None, ng.last_plot)
out = {name: [[complex(v).real, complex(v).imag] for v in vector._data] for name, vector in plot.items()}
print(json.dumps(out))
"""


def simulate(*texts: str, cwd: Path = CORPUS) -> list[dict[str, np.ndarray]]:
    """Vectors of the last plot ngspice makes of each text; one subprocess each, run together."""
    runs = [subprocess.Popen([sys.executable, "-c", _SIMULATE], stdin=subprocess.PIPE,
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=cwd)
            for _ in texts]
    results = []
    for run, text in zip(runs, texts):
        stdout, stderr = run.communicate(text, timeout=60)
        assert run.returncode == 0, stderr
        vectors = json.loads(stdout.strip().splitlines()[-1])
        assert vectors, f"ngspice gave no vectors:\n{stderr}"
        results.append({name: np.array([complex(re, im) for re, im in data]) for name, data in vectors.items()})
    return results


def assert_same_results(expected: dict, actual: dict) -> None:
    """Every vector of ``expected`` is in ``actual`` and agrees to 1e-9 of its own scale."""
    for name, vector in expected.items():
        assert name in actual, name
        scale = float(np.max(np.abs(vector))) or 1.0
        np.testing.assert_allclose(actual[name], vector, rtol=1e-9, atol=1e-9 * scale, err_msg=name)


def canonical(netlist: Netlist) -> Netlist:
    """The same netlist with every top-level element marked changed (written canonically)."""
    return netlist.replace(changed={e.key: dataclasses.replace(e, raw=None) for e in netlist.elements})


FLAT = """RC ladder
* first stage
V1 in 0 DC 0 PULSE(0 1 0 1n 1n 5n 10n) ; drive
R1 in n1 1k
C1 n1 GND 10p $ load
L1 n1 n2 10n
+ ic=0
L2 n2 0 22n
K1 L1 L2 0.5
I1 0 n2 DC 1m
.tran 0.1n 20n
.end
"""


class TestParseNetlistText:
    """parse_netlist_text: statements, elements and their nodes, errors with positions."""

    def test_flat_elements_in_order(self):
        """A flat netlist gives its elements in order with names, kinds, nodes and values."""
        netlist = parse_netlist_text(FLAT, "flat.cir")
        assert all(isinstance(e, Element) for e in netlist.elements)
        summary = [(e.name, e.kind, e.nodes, e.value) for e in netlist.elements]
        assert summary == [
            ("V1", "V", ("in", "0"), None),
            ("R1", "R", ("in", "n1"), "1k"),
            ("C1", "C", ("n1", "0"), "10p"),
            ("L1", "L", ("n1", "n2"), "10n"),
            ("L2", "L", ("n2", "0"), "22n"),
            ("K1", "K", (), "0.5"),
            ("I1", "I", ("0", "n2"), None),
        ]

    def test_title_is_first_line(self):
        """The first line is the title even when it looks like an element."""
        netlist = parse_netlist_text("R1 a b 1k\nR2 a 0 1k\n.end\n")
        assert netlist.title == "R1 a b 1k"
        assert [e.name for e in netlist.elements] == ["R2"]

    def test_source_fields_kept_readable(self):
        """A source keeps DC, its value and the PULSE call as fields."""
        netlist = parse_netlist_text(FLAT)
        assert netlist.element("V1").fields == ("DC", "0", "PULSE(0 1 0 1n 1n 5n 10n)")

    def test_calls_with_commas(self):
        """Commas between call arguments are kept; nested calls and groups stay one field."""
        netlist = parse_netlist_text("t\nV1 a 0 PULSE(0, 1, 2)\nB1 b 0 V = v(a,b) * (2 + 1)\n")
        assert netlist.element("V1").fields == ("PULSE(0, 1, 2)",)
        assert netlist.element("B1").fields == ("V=v(a, b)", "*(2 + 1)")

    def test_coupling_fields(self):
        """K has no nodes; its fields are the two inductors and the coupling factor."""
        element = parse_netlist_text(FLAT).element("k1")
        assert (element.nodes, element.fields, element.value) == ((), ("L1", "L2", "0.5"), "0.5")

    def test_continuation_joined_with_raw_kept(self):
        """A + line joins its statement; raw keeps both lines verbatim."""
        element = parse_netlist_text(FLAT).element("L1")
        assert element.fields == ("10n", "ic=0")
        assert element.raw == "L1 n1 n2 10n\n+ ic=0"

    def test_comment_lines_inside_continuation(self):
        """A * comment between a statement and its + line stays inside the statement's raw."""
        netlist = parse_netlist_text("t\nR1 a\n* between\n+ b 1k\n.end\n")
        assert netlist.element("R1").nodes == ("a", "b")
        assert netlist.element("R1").raw == "R1 a\n* between\n+ b 1k"

    def test_inline_comments_removed(self):
        """`;` anywhere and `$` after white space start a comment."""
        netlist = parse_netlist_text("t\nR1 a b 1k ; x y z\nR2 a b 2k $ x y\nR$3 a b 3k\n")
        assert [e.fields for e in netlist.elements] == [("1k",), ("2k",), ("3k",)]
        assert netlist.elements[2].name == "R$3"

    def test_crlf_and_tabs(self):
        """CRLF line ends and tabs separate fields like spaces and newlines."""
        netlist = parse_netlist_text("t\r\nR1\ta\tb\t1k\r\n+\tic=0\r\n.op\r\n.end\r\n")
        assert netlist.element("R1").fields == ("1k", "ic=0")
        assert netlist.analyses[0].kind == "op"

    def test_case_insensitive_names_and_ground(self):
        """Nodes are lower-cased, gnd is node 0 and keywords match in any case."""
        netlist = parse_netlist_text("t\nr1 IN Gnd 1K\n.TRAN 1n 2n\n.END\n")
        assert netlist.element("R1").nodes == ("in", "0")
        assert netlist.analyses[0].kind == "tran"
        assert netlist.statements[-1].kind == "end"

    def test_parameter_expressions_kept(self):
        """Brace and quote expressions stay as written; .param collects name -> expression."""
        text = "t\n.param r = 2k c={1p*4}\nR1 a 0 {r * 2}\nC1 a 0 'c/2'\n"
        netlist = parse_netlist_text(text)
        assert netlist.params == {"r": "2k", "c": "{1p*4}"}
        assert netlist.element("R1").value == "{r * 2}"
        assert netlist.element("C1").value == "'c/2'"

    @pytest.mark.parametrize(
        ("line", "nodes", "fields"),
        [
            ("D1 a k dmod", ("a", "k"), ("dmod",)),
            ("Q1 c b e qn", ("c", "b", "e"), ("qn",)),
            ("Q2 c b e s qn", ("c", "b", "e", "s"), ("qn",)),
            ("Q3 c b e qn 1.5", ("c", "b", "e"), ("qn", "1.5")),
            ("Q4 c b e qn off", ("c", "b", "e"), ("qn", "off")),
            ("J1 d g s nj", ("d", "g", "s"), ("nj",)),
            ("M1 d g s b nm w=1u l=2u", ("d", "g", "s", "b"), ("nm", "w=1u", "l=2u")),
            ("E1 o 0 i 0 2", ("o", "0", "i", "0"), ("2",)),
            ("E2 o 0 POLY(1) i 0 0 4", ("o", "0"), ("POLY(1)", "i", "0", "0", "4")),
            ("E3 o 0 VALUE={V(i)*2}", ("o", "0"), ("VALUE={V(i)*2}",)),
            ("G1 o 0 i 0 1m", ("o", "0", "i", "0"), ("1m",)),
            ("F1 o 0 Vs 3", ("o", "0"), ("Vs", "3")),
            ("H1 o 0 Vs 500", ("o", "0"), ("Vs", "500")),
            ("B1 o 0 V=V(i)*2", ("o", "0"), ("V=V(i)", "*2")),
            ("X1 a b amp params: gain=10", ("a", "b"), ("amp", "params:", "gain=10")),
            ("X2 a b amp g=2", ("a", "b"), ("amp", "g=2")),
            ("S1 a b c 0 sw", ("a", "b", "c", "0"), ("sw",)),
            ("T1 a 0 b 0 z0=50 td=1n", ("a", "0", "b", "0"), ("z0=50", "td=1n")),
            ("W1 a b Vc sw", ("a", "b"), ("Vc", "sw")),
            ("Y1 a b c ymod", ("a", "b", "c"), ("ymod",)),
        ],
    )
    def test_node_counts_per_letter(self, line, nodes, fields):
        """Each letter takes ngspice's number of nodes; the rest are fields."""
        # Node counts: ngspice User's Manual, the element chapters 3 to 8 (from memory).
        subckt = ".subckt amp in out params: gain=1 g=1\nR1 in out 1k\n.ends\n"
        element = parse_netlist_text(f"t\n{subckt}{line}\n").elements[0]
        assert (element.nodes, element.fields) == (nodes, fields)

    def test_control_block_verbatim(self):
        """A .control block is one directive holding its lines unparsed."""
        text = "t\nR1 a 0 1k\n.control\nrun\nlet x = v(a) * (2\n.endc\n.end\n"
        control = parse_netlist_text(text).statements[1]
        assert (control.kind, control.args) == ("control", "run\nlet x = v(a) * (2")

    def test_text_after_end_not_parsed(self):
        """Lines after .end are kept for the writer but never parsed."""
        netlist = parse_netlist_text("t\nR1 a 0 1k\n.end\nR2 (((\n")
        assert [e.name for e in netlist.elements] == ["R1"]

    def test_subcircuit_model(self):
        """A .subckt block becomes a Subcircuit with ports, default params and elements."""
        text = "t\n.subckt Div top OUT bot params: ra=1k rb=2k\nR1 top out {ra}\nR2 out bot {rb}\n.ends Div\n"
        sub = parse_netlist_text(text).subcircuits["div"]
        assert isinstance(sub, Subcircuit)
        assert (sub.name, sub.ports, dict(sub.params)) == ("Div", ("top", "out", "bot"), {"ra": "1k", "rb": "2k"})
        assert [e.name for e in sub.elements] == ["R1", "R2"]

    def test_model_directive_over_continuations(self):
        """A .model's parameter list may run over + lines; its args are joined."""
        text = "t\n.model d1 D (is=1e-14\n+ n=1.05)\n"
        model = parse_netlist_text(text).statements[0]
        assert isinstance(model, Directive)
        assert (model.kind, model.args) == ("model", "d1 D (is=1e-14 n=1.05)")

    def test_element_location(self):
        """An element's location is its name's line and column in the file."""
        netlist = parse_netlist_text("t\n\n   R1 a 0 1k\n", "loc.cir")
        assert netlist.element("R1").location == Location("loc.cir", 3, 4)

    @pytest.mark.parametrize(
        ("text", "message"),
        [
            ("t\n* c\n\n\nR3 a\n.end\n", "ring.cir:5:1: element R3 needs 2 nodes, found 1"),
            ("t\n  E1 a b c\n", "ring.cir:2:3: element E1 needs 4 nodes, found 3"),
            ("t\nR1 a b 1.2.3k\n", "ring.cir:2:8: bad number '1.2.3k' for element R1"),
            ("t\nR1 a\n+ b 1.2.3k\n", "ring.cir:3:5: bad number '1.2.3k' for element R1"),
            ("t\nV1 a 0 PULSE(0 1\n.end\n", "ring.cir:2:17: unbalanced parentheses: '(' not closed"),
            ("t\nV1 a 0 PULSE(0 1\n+ 2 3\n", "ring.cir:3:6: unbalanced parentheses: '(' not closed"),
            ("t\nV1 a 0 DC 1)\n", "ring.cir:2:12: unbalanced parentheses: ')' without '('"),
            ("t\nR1 a b {1+2\n", "ring.cir:2:8: unterminated '{' expression"),
            ("t\n.subckt foo a b\nR1 a b 1k\n.end\n", "ring.cir:2:1: unterminated .subckt foo: no .ends"),
            ("t\nR1 a 0 1k\nX1 a b nosuch\n", "ring.cir:3:1: unknown subcircuit 'nosuch' in X1"),
            ("t\n.ends\n", "ring.cir:2:1: .ends without a .subckt"),
            ("t\nK1 L1 0.5\n", "ring.cir:2:1: coupling K1 needs two inductor names and a coupling factor"),
            ("t\nR1 a b\n", "ring.cir:2:1: element R1 has no value"),
            ("t\n1abc x\n", "ring.cir:2:1: a statement must start with an element name or a dot keyword, not '1abc'"),
            ("t\n.control\nrun\n", "ring.cir:2:1: unterminated .control block: no .endc"),
            ("t\n.include missing.inc\n", "ring.cir:2:1: cannot read include file 'missing.inc': No such file or directory"),
        ],
    )
    def test_malformed_input_location(self, text, message, tmp_path):
        """Each malformed input raises NetlistError at the right file:line:column."""
        with pytest.raises(NetlistError) as caught:
            parse_netlist_text(text, "ring.cir", tmp_path)
        assert str(caught.value).replace(str(tmp_path) + "/", "") == message

    @given(netlists_with_short_element())
    def test_generated_error_location(self, case):
        """An element line short of a node is reported at its own line and column."""
        text, line, column = case
        with pytest.raises(NetlistError) as caught:
            parse_netlist_text(text, "gen.cir")
        assert caught.value.where == Location("gen.cir", line, column)
        assert "needs 2 nodes, found 1" in caught.value.message

    @given(netlist_texts())
    def test_fast_path_agrees_with_lalr_parser(self, text):
        """Statements taken around the parser come out as the LALR parser makes them."""
        from augment.netlist import _Code, _parse_code, _parse_with_lark, _split

        codes = [item for item in _split(text, "gen.cir", True)[1] if isinstance(item, _Code)]
        fast = _parse_code(codes)
        assert [tuple(map(str, r)) for r in fast] == [tuple(map(str, r)) for r in _parse_with_lark(codes)]

    @given(netlist_texts())
    def test_generated_netlists_round_trip(self, text):
        """A generated netlist writes back to its own text and parses back equal."""
        netlist = parse_netlist_text(text, "gen.cir")
        written = write_netlist(netlist)
        assert written == text
        assert parse_netlist_text(written, "gen.cir") == netlist

    @given(netlist_texts())
    def test_generated_netlists_canonical_round_trip(self, text):
        """Written canonically, every element parses back with the same nodes and fields."""
        netlist = parse_netlist_text(text, "gen.cir")
        again = parse_netlist_text(write_netlist(canonical(netlist)), "gen.cir")
        assert [(e.name, e.kind, e.nodes, e.value, e.fields) for e in again.elements] == [
            (e.name, e.kind, e.nodes, e.value, e.fields) for e in netlist.elements
        ]


class TestParseNetlist:
    """parse_netlist: files, includes and libraries relative to the including file."""

    def test_include_brings_subcircuits_and_params(self):
        """An .include file's subcircuits and .param values are visible to the netlist."""
        netlist = parse_netlist(CORPUS / "16_include.cir")
        assert "pi_net" in netlist.subcircuits
        assert netlist.params["rl_value"] == "4k"
        # 4k from 16_parts.inc, evaluated through the included .param.
        assert netlist.value_of("Rl") == 4000.0

    def test_lib_takes_only_its_section(self):
        """.lib FILE SECTION reads that section's models, not the other corners'."""
        netlist = parse_netlist(CORPUS / "17_lib.cir")
        assert "dx" in netlist.models

    def test_include_relative_to_including_file(self, tmp_path):
        """A nested include resolves against the directory of the file that names it."""
        (tmp_path / "sub").mkdir()
        (tmp_path / "top.cir").write_text("t\n.include sub/a.inc\nX1 n 0 leaf\n.end\n")
        (tmp_path / "sub" / "a.inc").write_text(".include b.inc\n")
        (tmp_path / "sub" / "b.inc").write_text(".subckt leaf p q\nR1 p q 1k\n.ends\n")
        assert "leaf" in parse_netlist(tmp_path / "top.cir").subcircuits

    def test_quoted_include_path(self, tmp_path):
        """A double-quoted include path may contain spaces."""
        (tmp_path / "my parts").mkdir()
        (tmp_path / "my parts" / "p.inc").write_text(".param rq=3k\n")
        (tmp_path / "top.cir").write_text('t\n.include "my parts/p.inc"\nR1 a 0 {rq}\n.end\n')
        assert parse_netlist(tmp_path / "top.cir").value_of("R1") == 3000.0

    def test_include_cycle_detected(self, tmp_path):
        """Files that include each other raise an error at the include that closes the loop."""
        (tmp_path / "top.cir").write_text("t\n.include a.inc\n.end\n")
        (tmp_path / "a.inc").write_text("* a\n.include b.inc\n")
        (tmp_path / "b.inc").write_text(".include a.inc\n")
        with pytest.raises(NetlistError, match=r"b\.inc:1:1: include cycle: top.cir -> a.inc -> b.inc -> a.inc"):
            parse_netlist(tmp_path / "top.cir")

    def test_error_inside_include_names_that_file(self, tmp_path):
        """An error in an included file is reported at its own line."""
        (tmp_path / "top.cir").write_text("t\n.include bad.inc\n.end\n")
        (tmp_path / "bad.inc").write_text("* bad\nC1 a\n")
        with pytest.raises(NetlistError, match=r"bad\.inc:2:1: element C1 needs 2 nodes, found 1"):
            parse_netlist(tmp_path / "top.cir")

    def test_included_files_and_their_elements_are_known(self, tmp_path):
        """Every file read through .include is listed, and its top-level elements by location."""
        (tmp_path / "top.cir").write_text("t\n.include a.inc\nR1 a 0 1k\n.end\n")
        (tmp_path / "a.inc").write_text("* a\n.include b.inc\nRINC a 0 2k\n")
        (tmp_path / "b.inc").write_text(".param x=1\n")
        netlist = parse_netlist(tmp_path / "top.cir")
        assert netlist.included_files == ((tmp_path / "a.inc").resolve(), (tmp_path / "b.inc").resolve())
        assert str(netlist.included_elements["rinc"]) == f"{tmp_path / 'a.inc'}:3:1"

    def test_element_defined_twice_is_an_error(self, tmp_path):
        """A second element of the same name (any case) is an error at its line, naming the first."""
        (tmp_path / "top.cir").write_text("t\nR1 a 0 1k\nC1 a 0 1p\nr1 a b 2k\n.end\n")
        with pytest.raises(NetlistError, match=r"top\.cir:4:1: element r1 is already defined at .*top\.cir:2:1"):
            parse_netlist(tmp_path / "top.cir")

    def test_same_name_in_two_subcircuits_is_fine(self, tmp_path):
        """Element names are local to their subcircuit, as in ngspice."""
        (tmp_path / "top.cir").write_text("t\n.subckt a p\nR1 p 0 1k\n.ends\n.subckt b p\nR1 p 0 2k\n.ends\nR1 n 0 3k\n.end\n")
        assert set(parse_netlist(tmp_path / "top.cir").subcircuits) == {"a", "b"}

    def test_missing_file(self, tmp_path):
        """A netlist file that does not exist is a NetlistError, not an OSError."""
        with pytest.raises(NetlistError, match="cannot read netlist"):
            parse_netlist(tmp_path / "none.cir")

    @pytest.mark.parametrize("path", CORPUS_NETLISTS, ids=lambda p: p.name)
    def test_corpus_writes_back_verbatim(self, path):
        """Every corpus netlist is written back byte for byte."""
        assert write_netlist(parse_netlist(path)).encode() == path.read_bytes()


class TestWriteNetlist:
    """write_netlist: verbatim and canonical statements, ngspice results unchanged."""

    @pytest.mark.parametrize("path", CORPUS_NETLISTS, ids=lambda p: p.name)
    def test_corpus_simulates_identically(self, path):
        """Written verbatim and written canonically, each corpus netlist gives ngspice's original results."""
        netlist = parse_netlist(path)
        verbatim = write_netlist(netlist)
        # The verbatim text is the file itself (test_corpus_writes_back_verbatim), so one run of
        # the original stands for both; the canonical text is simulated on its own.
        assert verbatim.encode() == path.read_bytes()
        original, rewritten = simulate(verbatim, write_netlist(canonical(netlist)))
        assert_same_results(original, rewritten)

    def test_changed_element_written_canonically(self):
        """A changed element is written as name, nodes and fields on one line."""
        netlist = parse_netlist_text(FLAT)
        old = netlist.element("L1")
        new = dataclasses.replace(old, fields=("47n",), value="47n", raw=None)
        text = write_netlist(netlist.replace(changed={"l1": new}))
        assert "L1 n1 n2 47n\nL2" in text
        assert "+ ic=0" not in text

    def test_drop_control_and_analyses(self):
        """keep_control=False and keep_analyses=False leave the circuit without them."""
        text = "t\nR1 a 0 1k\n.control\nrun\n.endc\n.tran 1n 2n\n.AC dec 1 1 10\n.op\n.end\n"
        written = write_netlist(parse_netlist_text(text), keep_control=False, keep_analyses=False)
        assert written == "t\nR1 a 0 1k\n.end\n"

    def test_crlf_kept(self):
        """A CRLF netlist is written with CRLF line ends."""
        text = "t\r\nR1 a 0 1k\r\n.end\r\n"
        assert write_netlist(parse_netlist_text(text)) == text


class TestNetlistElement:
    """Netlist.element: case-insensitive lookup, hierarchical names inside instances."""

    def test_case_insensitive(self):
        """r1, R1 and R1's key name the same element."""
        netlist = parse_netlist_text(FLAT)
        assert netlist.element("r1") is netlist.element("R1")

    def test_hierarchical_name(self):
        """X1.R2 is R2 of the subcircuit with X1's nodes on its ports and internal nodes prefixed."""
        netlist = parse_netlist(CORPUS / "15_nested_subckt.cir")
        assert netlist.element("Xf.X1").nodes == ("in", "xf.mid")
        assert netlist.element("xf.x2.r1").nodes == ("xf.mid", "out")
        inner = netlist.flatten("xf").element("Xf.X2")
        assert inner.nodes == ("xf.mid", "out")

    def test_missing(self):
        """An unknown name raises KeyError."""
        with pytest.raises(KeyError):
            parse_netlist_text(FLAT).element("R9")


class TestElementParams:
    """Element.params: the name=value fields of an element."""

    def test_instance_params(self):
        """An instance's parameters map lower-cased names to their expressions."""
        netlist = parse_netlist(CORPUS / "14_subckt_params.cir")
        assert netlist.element("X2").params == {"ra": "1k", "rb": "3k"}


class TestImport:
    """import augment.netlist: quick, with the parser built on first use."""

    def test_import_does_not_load_lark(self):
        """Importing the module loads neither lark nor the grammar."""
        code = "import sys, augment.netlist; print('lark' in sys.modules)"
        done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                              cwd=Path(__file__).parent.parent)
        assert done.stdout.strip() == "False"


class TestNetlistNets:
    """Netlist.nets: node to terminals of the top-level elements."""

    def test_nets_of_flat_netlist(self):
        """Each node lists (element, terminal) pairs in netlist order; gnd joins node 0."""
        nets = parse_netlist_text(FLAT).nets
        assert nets["n1"] == (("R1", 2), ("C1", 1), ("L1", 1))
        assert nets["0"] == (("V1", 2), ("C1", 2), ("L2", 2), ("I1", 1))
        assert "gnd" not in nets


class TestNetlistNames:
    """Netlist.names: every element and node name in use."""

    def test_names_include_subcircuit_contents(self):
        """Names cover top-level and subcircuit elements and nodes, lower-cased."""
        names = parse_netlist(CORPUS / "14_subckt_params.cir").names
        assert {"v1", "x1", "x2", "in", "m", "n", "r1", "r2", "top", "out", "bot"} <= names


class TestNetlistAnalyses:
    """Netlist.analyses: the top-level analysis directives."""

    def test_analyses(self):
        """.tran .ac .dc .op and .noise are analyses; .options is not."""
        text = "t\n.options reltol=1e-4\n.tran 1n 2n\n.ac dec 1 1 10\n.dc V1 0 1 1\n.op\n.noise v(a) V1 dec 1 1 10\n"
        assert [d.kind for d in parse_netlist_text(text).analyses] == ["tran", "ac", "dc", "op", "noise"]


class TestNetlistValueOf:
    """Netlist.value_of: numeric values of R, L and C with parameters evaluated."""

    # ngspice User's Manual (version 39), section 2.3, table of scale factors (from memory):
    # T = 1e12, G = 1e9, Meg = 1e6, K = 1e3, mil = 25.4e-6, m = 1e-3, u = 1e-6, n = 1e-9,
    # p = 1e-12, f = 1e-15; letters after the scale factor are ignored.
    SCALE_TABLE = [
        ("2T", 2e12), ("2G", 2e9), ("2Meg", 2e6), ("2K", 2e3), ("2mil", 2 * 25.4e-6),
        ("2m", 2e-3), ("2u", 2e-6), ("2n", 2e-9), ("2p", 2e-12), ("2f", 2e-15),
        ("2MEG", 2e6), ("2M", 2e-3), ("2kohm", 2e3), ("2uF", 2e-6), ("2e3", 2e3), ("2.5E-1k", 250.0),
    ]

    @pytest.mark.parametrize(("text", "value"), SCALE_TABLE)
    def test_scale_factors_match_manual_table(self, text, value):
        """Scale factors follow the ngspice manual's table, case-insensitively; meg is not m."""
        netlist = parse_netlist_text(f"t\nR1 a 0 {text}\n")
        assert netlist.value_of("R1") == pytest.approx(value, rel=1e-15)

    def test_scale_factors_agree_with_ngspice(self):
        """ngspice reads every value of the table as value_of does (1 V across each resistor)."""
        lines = ["scale factors"]
        for index, (text, _) in enumerate(self.SCALE_TABLE):
            lines += [f"V{index} n{index} 0 DC 1", f"R{index} n{index} 0 {text}"]
        netlist = parse_netlist_text("\n".join([*lines, ".op", ".end"]) + "\n")
        (vectors,) = simulate(write_netlist(netlist))
        for index in range(len(self.SCALE_TABLE)):
            # Ohm's law: the source current is -1 V / R.
            current = vectors[f"v{index}#branch"][0].real
            assert -1.0 / current == pytest.approx(netlist.value_of(f"R{index}"), rel=1e-9)

    def test_params_evaluated(self):
        """Brace and quote expressions use .param values, including params defined by params."""
        netlist = parse_netlist(CORPUS / "07_params.cir")
        # rsrc = rload / 4 = 2k / 4; 'rload*2+1k' = 5k; cval = 1p*10.
        assert netlist.value_of("R1") == pytest.approx(500.0)
        assert netlist.value_of("R3") == pytest.approx(5000.0)
        assert netlist.value_of("C1") == pytest.approx(1e-11)

    def test_instance_parameters(self):
        """Inside an instance, its own parameters override the subcircuit's defaults."""
        netlist = parse_netlist(CORPUS / "14_subckt_params.cir")
        # X1 sets ra=2k and keeps rb=1k; X2 sets ra=1k rb=3k.
        assert [netlist.value_of(n) for n in ("X1.R1", "X1.R2", "X2.R1", "X2.R2")] == [2000.0, 1000.0, 1000.0, 3000.0]

    def test_not_a_number(self):
        """A source has no value; an R with an unknown parameter gives None."""
        netlist = parse_netlist_text("t\nV1 a 0 DC 1\nR1 a 0 {nope}\n")
        assert netlist.value_of("V1") is None
        assert netlist.value_of("R1") is None


class TestNetlistReplace:
    """Netlist.replace: change, remove and add statements."""

    def test_remove_and_add_before_end(self):
        """Removed elements vanish; added lines go after the last statement, before .end."""
        netlist = parse_netlist_text(FLAT).replace(removed=["k1"], added=["LX1 n2 n3 1n", "K9 L1 L2 0.1"])
        text = write_netlist(netlist)
        assert "K1 " not in text
        assert text.endswith(".tran 0.1n 20n\nLX1 n2 n3 1n\nK9 L1 L2 0.1\n.end\n")
        assert netlist.element("LX1").nodes == ("n2", "n3")

    def test_unknown_key(self):
        """Changing or removing an element that does not exist is a KeyError."""
        with pytest.raises(KeyError):
            parse_netlist_text(FLAT).replace(removed=["r99"])


class TestNetlistFlatten:
    """Netlist.flatten: one instance expanded into top-level elements."""

    def test_flattened_names_and_nodes(self):
        """X1's elements become X1.R1, X1.R2 with ports mapped and values evaluated."""
        flat = parse_netlist(CORPUS / "14_subckt_params.cir").flatten("x1")
        element = flat.element("X1.R1")
        assert (element.kind, element.nodes, flat.value_of("x1.r1")) == ("R", ("in", "m"), 2000.0)
        assert "R.X1.R1 in m 2000.0" in write_netlist(flat)

    @pytest.mark.parametrize("name, instances", [
        ("14_subckt_params.cir", ["X1"]),
        ("15_nested_subckt.cir", ["Xf", "Xf.X1"]),
        ("18_global_options.cir", ["X1"]),
        ("16_include.cir", ["X1"]),
        ("25_local_model.cir", ["X1"]),
        ("26_subckt_coupling.cir", ["X1"]),
    ])
    def test_flattened_simulates_identically(self, name, instances):
        """Flattening instances leaves every ngspice vector unchanged."""
        netlist = parse_netlist(CORPUS / name)
        for instance in instances:
            netlist = netlist.flatten(instance)
        original, flattened = simulate((CORPUS / name).read_text(), write_netlist(netlist))
        assert_same_results(original, flattened)

    def test_references_renamed(self):
        """K's inductors and F's controlling source are renamed to the flattened elements."""
        flat = parse_netlist(CORPUS / "26_subckt_coupling.cir").flatten("X1")
        assert flat.element("X1.K1").fields == ("L.X1.L1", "L.X1.L2", "0.9")
        assert flat.element("X1.F1").fields == ("V.X1.Vsense", "2")
        # ratio=9 from the instance: L2 = 9 * 1u.
        assert flat.value_of("X1.L2") == pytest.approx(9e-6)

    def test_nested_instance_flattens_parent_first(self):
        """Flattening Xf.X1 expands Xf too, so Xf.X1's elements become top-level."""
        flat = parse_netlist(CORPUS / "15_nested_subckt.cir").flatten("Xf.X1")
        assert [e.name for e in flat.elements] == ["V1", "Xf.X1.R1", "Xf.X1.C1", "Xf.X2"]

    def test_flattened_netlist_parses_back(self):
        """A written flattened netlist parses back with the same hierarchical elements."""
        flat = parse_netlist(CORPUS / "26_subckt_coupling.cir").flatten("X1")
        again = parse_netlist_text(write_netlist(flat), base_dir=CORPUS)
        assert [(e.name, e.kind, e.nodes, e.fields) for e in again.elements] == [
            (e.name, e.kind, e.nodes, e.fields) for e in flat.elements
        ]
        assert again.element("R.X1.Rl") is again.element("x1.rl")

    def test_not_an_instance(self):
        """Flattening an element that is not an X instance is a KeyError."""
        with pytest.raises(KeyError):
            parse_netlist_text(FLAT).flatten("R1")


class TestEvaluate:
    """evaluate: SPICE numbers and parameter expressions."""

    def test_arithmetic(self):
        """Operators, ^ as power, functions and nested params evaluate as in ngspice."""
        # Plain arithmetic: 2k * 3 + 2^3 - sqrt(16) = 6004.
        assert evaluate("{a*3 + 2^3 - sqrt(16)}", {"a": "{b*2}", "b": "1k"}) == 6004.0

    def test_self_reference(self):
        """A parameter defined in terms of itself is an error, not a recursion crash."""
        with pytest.raises(ValueError, match="itself"):
            evaluate("{a}", {"a": "{a+1}"})

    @given(spice_numbers())
    def test_number_matches_units(self, text):
        """A generated number evaluates to the same value spice_number gives it."""
        from augment.units import spice_number

        assert math.isclose(evaluate(text, {}), spice_number(text), rel_tol=1e-15)
