"""Hypothesis strategies shared by the test files, one section per stage."""

from __future__ import annotations

from hypothesis import assume
from hypothesis import strategies as st

# ---------------------------------------------------------------------------------------
# Netlists (augment/netlist.py): small flat netlists written the many ways SPICE allows.

_SCALES = ["", "f", "p", "n", "u", "m", "k", "meg", "g", "t", "mil", "MEG", "K", "U", "N", "P"]
_UNITS = ["", "", "ohm", "F", "H", "s"]
_NODES = ["0", "gnd", "GND", "in", "out", "n1", "N2", "mid", "a_b", "x.y"]


@st.composite
def spice_numbers(draw) -> str:
    """A positive SPICE number: mantissa, optional exponent, scale factor and unit letters."""
    mantissa = draw(st.sampled_from(["1", "4.7", "10", "0.5", ".25", "220", "3."]))
    exponent = draw(st.sampled_from(["", "", "e3", "E-2", "e+1"]))
    scale = draw(st.sampled_from(_SCALES))
    unit = draw(st.sampled_from(_UNITS)) if scale else ""
    return f"{mantissa}{exponent}{scale}{unit}"


@st.composite
def _element_line(draw, index: int) -> str:
    kind = draw(st.sampled_from("RCLVI"))
    name = draw(st.sampled_from([kind, kind.lower()])) + str(index)
    a, b = draw(st.lists(st.sampled_from(_NODES), min_size=2, max_size=2))
    if kind in "VI":
        tail = draw(st.sampled_from([
            f"DC {draw(spice_numbers())}",
            f"PULSE(0 {draw(spice_numbers())} 0 1n 1n 5n 10n)",
            f"SIN(0 1 {draw(spice_numbers())})",
            f"DC 0 AC 1",
        ]))
    else:
        tail = draw(st.sampled_from([draw(spice_numbers()), "{rval}", "'rval*2'"]))
    sep = draw(st.sampled_from([" ", "  ", "\t"]))
    line = sep.join([name, a, b, tail])
    if draw(st.booleans()):
        # Break the line before its value, as a + continuation.
        head, _, last = line.rpartition(sep)
        line = f"{head}\n+ {last}"
    comment = draw(st.sampled_from(["", "", " ; note", " $ note"]))
    return line + comment


@st.composite
def netlist_texts(draw) -> str:
    """Text of a flat netlist: title, .param, elements, comments, an analysis and .end."""
    count = draw(st.integers(min_value=1, max_value=12))
    lines = [draw(st.sampled_from(["test circuit", "* starts like a comment", "Title: RC"]))]
    lines.append(".param rval=1k")
    for index in range(1, count + 1):
        if draw(st.integers(0, 4)) == 0:
            lines.append(draw(st.sampled_from(["* comment", "", "   ", "*"])))
        lines.append(draw(_element_line(index)))
    lines.append(draw(st.sampled_from([".tran 1n 10n", ".op", ".TRAN 0.1n 5n", ".ac dec 5 1k 1meg"])))
    lines.append(draw(st.sampled_from([".end", ".END"])))
    return "\n".join(lines) + "\n"


@st.composite
def netlists_with_short_element(draw) -> tuple[str, int, int]:
    """A generated netlist with one element line missing a node: (text, line, column)."""
    lines = draw(netlist_texts()).splitlines()
    # After the title and before .end, never between a statement and its + line.
    spots = [i for i in range(1, len(lines)) if not lines[i].lstrip().startswith("+")]
    spot = draw(st.sampled_from(spots))
    indent = draw(st.sampled_from(["", " ", "\t", "   "]))
    lines.insert(spot, f"{indent}{draw(st.sampled_from('RCL'))}999 n1")
    return "\n".join(lines) + "\n", spot + 1, len(indent) + 1


# ---------------------------------------------------------------------------------------
# Segments (augment/inductance.py): pairs of straight filaments in every relative position.

import numpy as _np  # noqa: E402


def _unit(v):
    return v / _np.linalg.norm(v)


_coordinate = st.floats(-1.0, 1.0, allow_nan=False, allow_infinity=False)
_point = st.tuples(_coordinate, _coordinate, _coordinate).map(_np.array)
_length = st.floats(0.2, 1.5)


@st.composite
def segment_pairs(draw):
    """Two filaments (a0, a1, b0, b1), kept at least 0.02 apart so Neumann's integral is smooth.

    Kinds: general skew, sharing an end point, near-parallel, near-collinear (tilts
    1e-4 to 1e-2 rad; see the Notes of mutual_filaments), exactly parallel with arbitrary offsets, perpendicular.
    """
    kind = draw(st.sampled_from(["skew", "shared", "near_parallel", "near_collinear", "parallel", "perpendicular"]))
    a0 = draw(_point)
    u = _unit(draw(_point.filter(lambda p: _np.linalg.norm(p) > 0.1)))
    other = draw(_point.filter(lambda p: _np.linalg.norm(_np.cross(p, u)) > 0.1))
    side = _unit(_np.cross(u, other))
    up = _np.cross(u, side)
    la, lb = draw(_length), draw(_length)
    a1 = a0 + la * u
    tilt = 10.0 ** draw(st.floats(-4.0, -2.0))
    angle = draw(st.floats(0.0, 2 * _np.pi))
    wobble = _np.cos(angle) * side + _np.sin(angle) * up
    shift = draw(st.floats(-1.0, 1.0)) * u
    if kind == "skew":
        b0 = draw(_point)
        v = _unit(draw(_point.filter(lambda p: _np.linalg.norm(_np.cross(p, u)) > 0.05)))
    elif kind == "shared":
        b0 = draw(st.sampled_from([a0, a1]))
        v = _unit(draw(_point.filter(lambda p: _np.linalg.norm(_np.cross(p, u)) > 0.05)))
    elif kind == "near_parallel":
        b0 = a0 + shift + draw(st.floats(0.02, 0.5)) * side
        v = _unit(u + tilt * wobble)
    elif kind == "near_collinear":
        b0 = a1 + draw(st.floats(0.02, 0.5)) * u
        v = _unit(u + tilt * wobble)
    elif kind == "parallel":
        b0 = a0 + shift + draw(st.floats(0.02, 0.5)) * side
        v = u
    else:
        b0 = a0 + shift + draw(st.floats(0.02, 0.5)) * side
        v = up
    v = v * draw(st.sampled_from([1.0, -1.0]))
    b1 = b0 + lb * v
    if draw(st.booleans()):
        a0, a1 = a1, a0
    return a0, a1, b0, b1


@st.composite
def segment_clouds(draw, max_segments: int = 12):
    """A few separate straight segments (end points in a 10 cm box) with radii and owners.

    Separate: no two are parallel (within 1e-6 rad) and closer than twice their radii, where
    two conductors would share one wire and the lumped matrix turns singular.
    """
    n = draw(st.integers(2, max_segments))
    starts = _np.array([draw(_point) for _ in range(n)]) * 0.05
    ends = starts + _np.array([draw(_point.filter(lambda p: _np.linalg.norm(p) > 0.2)) for _ in range(n)]) * 0.02
    radii = _np.full(n, 1e-4)
    i, j = _np.triu_indices(n, 1)
    u = (ends - starts) / _np.linalg.norm(ends - starts, axis=1)[:, None]
    sin = _np.linalg.norm(_np.cross(u[i], u[j]), axis=1)
    offset = starts[j] - starts[i]
    apart = _np.linalg.norm(offset - _np.sum(offset * u[i], axis=1)[:, None] * u[i], axis=1)
    assume(not _np.any((sin < 1e-6) & (apart < 2 * (radii[i] + radii[j]))))
    n_conductors = draw(st.integers(1, min(n, 4)))
    owner = _np.array([draw(st.integers(0, n_conductors - 1)) for _ in range(n)])
    owner[:n_conductors] = _np.arange(n_conductors)
    return starts, ends, radii, owner, n_conductors


# ---------------------------------------------------------------------------------------
# Geometry side-files and the conductor graph (augment/sidefile.py, augment/conductors.py).

from augment.sidefile import TwistedPair as _TwistedPair  # noqa: E402


@st.composite
def twisted_pair_routes(draw):
    """Plus and minus points (metres) and a twisted pair whose route bends gently.

    The route starts midway between the points, as SPEC requires, and turns by at most 60
    degrees at each corner; spacing and pitch are of bench size (0.5-3 mm, 4-20 mm).
    """
    plus = _np.array([draw(st.floats(-0.02, 0.02)) for _ in range(3)])
    across = _np.array([draw(st.floats(0.002, 0.01)), draw(st.floats(-0.01, 0.01)), 0.0])
    minus = plus - across
    route = [(plus + minus) / 2.0]
    direction = _np.array([0.0, 0.0, 1.0])
    for _ in range(draw(st.integers(1, 4))):
        turn = draw(st.floats(0.0, _np.pi / 3))
        around = draw(st.floats(0.0, 2 * _np.pi))
        side = _np.cross(direction, [1.0, 0.0, 0.0] if abs(direction[0]) < 0.9 else [0.0, 1.0, 0.0])
        side /= _np.linalg.norm(side)
        side = _np.cos(around) * side + _np.sin(around) * _np.cross(direction, side)
        direction = _np.cos(turn) * direction + _np.sin(turn) * side
        direction /= _np.linalg.norm(direction)
        route.append(route[-1] + draw(st.floats(0.01, 0.1)) * direction)
    spacing = draw(st.floats(0.5e-3, 3e-3))
    pitch = draw(st.floats(4e-3, 20e-3))
    pair = _TwistedPair(tuple(tuple(map(float, p)) for p in route), spacing, pitch)
    return plus, minus, pair



# ---------------------------------------------------------------------------------------
# Mutations of valid inputs (tests/test_robustness.py): what a half-edited file looks like.

import re as _re  # noqa: E402

# Tokens a typo, a paste or a bad export puts into a netlist: numbers at and past the float
# range, broken numbers and expressions, structure keywords out of place, odd bytes.
_NETLIST_TOKENS = [
    "1e308", "1e309", "-1e308", "1e-320", "nan", "inf", "-inf", "0", "-0", "1.2.3k", "1meg", "1e",
    "{", "}", "(", ")", "'", '"', "=", "+", "*", ";", "$", ",", "{1/0}", "{nan}", "'1e400'",
    ".subckt", ".ends", ".end", ".control", ".endc", ".param x=", ".include", ".lib", ".tran",
    ".ac dec 0 0 0", ".tran 0 0", ".tran -1n 1n", "K1", "L1", "X1", "R1", "0", "gnd", "in", "out",
    "PULSE(", "SIN(0 1", "\x00", "\t", "\r", "\x0c", "\u00b5", "\u03a9", "\ufeff", "\udcff",
]
# Values that a side-file's numbers, strings and lists get replaced with.
_TOML_VALUES = [
    "nan", "inf", "-inf", "+inf", "1e308", "-1e308", "1e-308", "5e-324", "0", "-0.0", "-1",
    "0.5", "1e30", "true", '""', '"R1.9"', '"C1.0"', '"X.1"', '"R1.2"', '"nonsense"', "[]",
    "[0, 0]", "[0, 0, 0, 0]", '[1, "a", 2]', "[[0, 0, 0]]", "{}", "{ a = 1 }", '"1.2.3k"',
    '"PULSE(0 1"', '"inf"', '"-3p"', "9999999999999999999999",
]
_TOML_KEYS = [
    "units", "wire_radius", "net", "path", "radius", "name", "plus", "minus", "instrument",
    "plus_lead", "minus_lead", "leads", "turns", "element", "current", "coil", "tran", "ac",
    "resistance", "capacitance", "bandwidth", "route", "spacing", "twist_pitch", "bogus",
]
# Once a text is this long (a very long line was made), it gets no further edits.
_LONG_TEXT = 50_000
_CHARACTERS = st.one_of(
    st.sampled_from(list("\x00\t\r\n\x0b\x0c \"'[]{}()=,.+-*;$#\\\u00b5\ufeff")),
    st.characters(codec="utf-8"),
)


@st.composite
def _character_edit(draw, text: str) -> str:
    """Insert, delete or replace one character."""
    at = draw(st.integers(0, len(text)))
    how = draw(st.sampled_from(["insert", "delete", "replace"]))
    char = draw(_CHARACTERS)
    if how == "insert" or at == len(text):
        return text[:at] + char + text[at:]
    return text[:at] + ("" if how == "delete" else char) + text[at + 1:]


@st.composite
def _token_edit(draw, text: str, pool: list[str]) -> str:
    """Replace one whitespace-separated token by a token from ``pool``, or insert one."""
    spans = [m.span() for m in _re.finditer(r"[^\s]+", text)]
    if not spans:
        return text + draw(st.sampled_from(pool))
    start, end = draw(st.sampled_from(spans))
    token = draw(st.sampled_from(pool))
    if draw(st.booleans()):
        return text[:start] + token + text[end:]
    return text[:start] + token + " " + text[start:]


@st.composite
def _line_edit(draw, text: str) -> str:
    """Delete, duplicate, swap, truncate or blow up one line."""
    lines = text.split("\n")
    at = draw(st.integers(0, len(lines) - 1))
    how = draw(st.sampled_from(["delete", "duplicate", "swap", "truncate", "long", "repeat"]))
    if how == "delete":
        del lines[at]
    elif how == "duplicate":
        lines.insert(at, lines[at])
    elif how == "swap":
        other = draw(st.integers(0, len(lines) - 1))
        lines[at], lines[other] = lines[other], lines[at]
    elif how == "truncate":
        lines[at] = lines[at][:draw(st.integers(0, len(lines[at])))]
    elif how == "long":
        # A very long line: a pasted blob, or a value repeated by a runaway script.
        piece = draw(st.sampled_from(["x", "1", "[0, 0, 0], ", "+"]))
        lines[at] = lines[at] + " " + piece * (draw(st.sampled_from([1_000, 20_000, 100_000])) // len(piece))
    else:
        lines[at:at] = [lines[at]] * draw(st.integers(2, 50))
    return "\n".join(lines)


@st.composite
def mutated_netlists(draw, text: str) -> str:
    """``text`` (a valid netlist) after one to four edits of characters, tokens or lines."""
    for _ in range(draw(st.integers(1, 4))):
        if len(text) > _LONG_TEXT:
            break
        kind = draw(st.sampled_from(["character", "token", "token", "line"]))
        if kind == "character":
            text = draw(_character_edit(text))
        elif kind == "token":
            text = draw(_token_edit(text, _NETLIST_TOKENS))
        else:
            text = draw(_line_edit(text))
    return text


@st.composite
def _toml_value_edit(draw, text: str) -> str:
    """Replace one TOML value (a number, a string or a bracketed list) by an odd one."""
    spans = [m.span() for m in _re.finditer(r'-?\d+(?:\.\d+)?(?:e-?\d+)?|"[^"\n]*"|\[[^\[\]\n]*\]', text)]
    if not spans:
        return text
    start, end = draw(st.sampled_from(spans))
    return text[:start] + draw(st.sampled_from(_TOML_VALUES)) + text[end:]


@st.composite
def _toml_key_edit(draw, text: str) -> str:
    """Rename one key, or add a known key with an odd value to one table."""
    spans = [m.span(1) for m in _re.finditer(r"^\s*([A-Za-z_]+)\s*=", text, _re.MULTILINE)]
    if spans and draw(st.booleans()):
        start, end = draw(st.sampled_from(spans))
        return text[:start] + draw(st.sampled_from(_TOML_KEYS)) + text[end:]
    lines = text.split("\n")
    at = draw(st.integers(0, len(lines)))
    lines.insert(at, f"{draw(st.sampled_from(_TOML_KEYS))} = {draw(st.sampled_from(_TOML_VALUES))}")
    return "\n".join(lines)


@st.composite
def mutated_sidefiles(draw, text: str) -> str:
    """``text`` (a valid side-file) after one to four edits of values, keys, characters or lines."""
    for _ in range(draw(st.integers(1, 4))):
        if len(text) > _LONG_TEXT:
            break
        kind = draw(st.sampled_from(["value", "value", "key", "character", "line"]))
        if kind == "value":
            text = draw(_toml_value_edit(text))
        elif kind == "key":
            text = draw(_toml_key_edit(text))
        elif kind == "character":
            text = draw(_character_edit(text))
        else:
            text = draw(_line_edit(text))
    return text


@st.composite
def include_chains(draw) -> dict[str, str]:
    """Files of a netlist whose ``.include`` chain is 1 to 300 deep, maybe closing a cycle.

    ``"top.cir"`` includes ``inc0.inc``, which includes ``inc1.inc`` and so on; the last may
    hold an element, include an earlier file, or include a file that is not there.
    """
    depth = draw(st.integers(1, 300))
    end = draw(st.sampled_from(["element", "cycle", "missing"]))
    files = {"top.cir": "chain of includes\nR1 in 0 1k\n.include inc0.inc\n.tran 1n 10n\n.end\n"}
    for level in range(depth - 1):
        files[f"inc{level}.inc"] = f"* level {level}\n.include inc{level + 1}.inc\n"
    last = {
        "element": "RLAST in 0 1k\n",
        "cycle": f".include inc{draw(st.integers(0, depth - 1))}.inc\n",
        "missing": ".include not_there.inc\n",
    }[end]
    files[f"inc{depth - 1}.inc"] = f"* level {depth - 1}\n{last}"
    return files
