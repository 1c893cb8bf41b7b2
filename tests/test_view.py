"""Tests of the geometry picture, augment/report.py draw_geometry (what `augment view` draws)."""

from __future__ import annotations

import struct
import textwrap
from pathlib import Path

import pytest

from augment.conductors import build_graph
from augment.netlist import parse_netlist, parse_netlist_text
from augment.report import draw_geometry
from augment.sidefile import load_sidefile, load_sidefile_text

SCENARIOS = Path(__file__).resolve().parent.parent / "augment" / "scenarios"

# A scenario of our own with every kind of conductor: wires, bodies, a coil, two aggressors
# (a line and a coil), a plain probe and a twisted-pair probe on a wire.
NETLIST = parse_netlist_text("""* view scenario
V1 in 0 PULSE(0 1 0 1n 1n 1u 2u)
R1 in n1 10
R2 n1 0 50
L1 n1 0 1u
.tran 1n 1u
.end
""", "view.cir", ".")

SIDEFILE = """\
units = "mm"
wire_radius = 0.25

[terminals]
R1 = [[0, 0, 0], [8, 0, 0]]
R2 = [[30, 60, 0], [38, 60, 0]]

[[wire]]
net = "n1"
path = ["R1.2", [30, 0, 0], "R2.1"]

[[wire]]
net = "n1"
path = [[30, 30, 0], [-14, 20, 0], "L1.1"]

[[coil]]
element = "L1"
center = [-20, 30, 20]
axis = [0, 0, 1]
radius = 6
length = 40
turns = 12

[[aggressor]]
name = "bus"
current = "PULSE(0 40 0 20n 20n 1u 2u)"
path = [[-50, -20, 0], [150, -20, 0]]

[[aggressor]]
name = "drive"
current = "SIN(0 1 1meg)"
coil = { center = [100, 100, 0], axis = [1, 0, 0], radius = 5, length = 30, turns = 5 }

[[probe]]
name = "across_R2"
plus = "R2.1"
minus = "R2.2"
instrument = "passive-10x"
plus_lead = ["R2.1", [30, 70, 5], [30, 200, 5]]
minus_lead = ["R2.2", [32, 70, 5], [32, 200, 5]]

[[probe]]
name = "tw"
plus = [30, 15, 0]
minus = "R1.1"
instrument = "ideal"
leads = { route = [[15, 7.5, 0], [15, 7.5, 50], [60, 7.5, 80]], spacing = 1.0, twist_pitch = 8 }
"""


def png_size(path: Path) -> tuple[int, int]:
    """Width and height from a PNG's IHDR chunk (PNG specification, ISO/IEC 15948, 11.2.2)."""
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    assert data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


class TestDrawGeometry:
    def test_writes_png_of_asked_size(self, tmp_path):
        """A scenario with every kind of conductor is drawn to a PNG of the asked size."""
        graph = build_graph(load_sidefile_text(SIDEFILE, "view.toml", NETLIST), NETLIST)
        out = draw_geometry(graph, NETLIST, tmp_path / "view.png", size_px=(800, 600))
        assert out == tmp_path / "view.png"
        assert png_size(out) == (800, 600)
        assert out.stat().st_size > 10_000
        assert [p.name for p in tmp_path.iterdir()] == ["view.png"]

    def test_default_size(self, tmp_path):
        """Without a size the picture is 1200 x 900 pixels."""
        graph = build_graph(load_sidefile_text(SIDEFILE, "view.toml", NETLIST), NETLIST)
        assert png_size(draw_geometry(graph, NETLIST, tmp_path / "a.png")) == (1200, 900)

    def test_empty_geometry(self, tmp_path):
        """A side-file that places nothing still gives a picture."""
        graph = build_graph(load_sidefile_text('units = "mm"\nwire_radius = 0.25\n', "e.toml", NETLIST), NETLIST)
        assert png_size(draw_geometry(graph, NETLIST, tmp_path / "e.png", size_px=(400, 300))) == (400, 300)

    def test_creates_missing_folder(self, tmp_path):
        """The output folder is created when it does not exist."""
        text = textwrap.dedent(SIDEFILE).split("[[wire]]")[0]
        graph = build_graph(load_sidefile_text(text, "t.toml", NETLIST), NETLIST)
        out = draw_geometry(graph, NETLIST, tmp_path / "deep" / "er" / "t.png", size_px=(300, 300))
        assert png_size(out) == (300, 300)

    @pytest.mark.parametrize("name", sorted(p.stem for p in SCENARIOS.glob("*.toml")))
    def test_built_in_scenarios(self, tmp_path, name):
        """Every built-in scenario's geometry is drawn."""
        # a side-file NAME.toml or NAME_SETUP.toml goes with the netlist NAME.cir
        cir = next(c for c in SCENARIOS.glob("*.cir") if name == c.stem or name.startswith(c.stem + "_"))
        netlist = parse_netlist(cir)
        graph = build_graph(load_sidefile(SCENARIOS / f"{name}.toml", netlist), netlist)
        assert png_size(draw_geometry(graph, netlist, tmp_path / f"{name}.png", size_px=(600, 450))) == (600, 450)


EXAMPLES = Path(__file__).resolve().parent.parent / "netlists"


class TestDrawExamples:
    @pytest.mark.parametrize("sidefile", sorted(p.relative_to(EXAMPLES).as_posix() for p in EXAMPLES.glob("*/*.toml")
                                                if p.name != "plan.toml"))
    def test_every_example_is_drawn(self, tmp_path, sidefile):
        """Every example side-file under netlists/ gives a picture (with its folder's netlist)."""
        folder = (EXAMPLES / sidefile).parent
        (cir,) = folder.glob("*.cir")
        netlist = parse_netlist(cir)
        graph = build_graph(load_sidefile(EXAMPLES / sidefile, netlist), netlist)
        out = draw_geometry(graph, netlist, tmp_path / "example.png", size_px=(500, 400))
        assert png_size(out) == (500, 400)
