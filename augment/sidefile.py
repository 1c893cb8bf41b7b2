"""Load the geometry side-file (TOML) into frozen dataclasses, lengths in metres.

The side-file says where the netlist's parts and copper physically are (SPEC, "The side-file
(TOML)"). The loader checks everything it can from the file and the netlist alone: names,
terminal references, radii, coil parameters, zero-length segments, where wires end, shorts
through terminals, probe lead ends, instruments. Checks that need the whole conductor graph
(proximity of conductors, where a probe point lands) are made by
:func:`augment.conductors.build_graph`, which raises the same :class:`SideFileError`.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, replace
from pathlib import Path
from types import MappingProxyType
from typing import Any, Mapping

import numpy as np

from augment.errors import Location, NetlistError, SideFileError
from augment.units import LENGTH_UNITS, length_scale, spice_number

Position = tuple[float, float, float]

# Relative tolerance for "lands on": a tenth of the wire radius (SPEC, loader rules).
LANDING_TOLERANCE = 0.1

_TOP_KEYS = {
    "units", "wire_radius", "terminals", "wire", "coil", "aggressor", "probe", "instrument",
    "analysis", "skin_effect", "coil_segments_per_turn",
}
_WIRE_KEYS = {"net", "path", "radius"}
_HELIX_KEYS = {"center", "axis", "radius", "length", "turns", "wire_radius"}
_COIL_KEYS = _HELIX_KEYS | {"element"}
_AGGRESSOR_KEYS = {"name", "current", "path", "coil", "radius"}
_PROBE_KEYS = {"name", "plus", "minus", "instrument", "plus_lead", "minus_lead", "leads", "radius"}
_LEADS_KEYS = {"route", "spacing", "twist_pitch"}
_INSTRUMENT_KEYS = {"resistance", "capacitance", "bandwidth", "differential", "reference_resistance"}
_ANALYSIS_KEYS = {"tran", "ac"}
_MIN_SEGMENTS_PER_TURN = 8
# No coordinate or length beyond a kilometre: larger is a typo or a unit slip, and squares of
# such numbers overflow in the kernels (common practice, no source).
_MAX_EXTENT_M = 1e3
# No radius or length below a nanometre: a tiny number would underflow to 0 in metres.
_MIN_LENGTH_M = 1e-9
# Pair kernels cost the square of the segment count: 10k segments take seconds, 20k about a
# minute, and a typo of 1e9 turns would never finish (measured on this project's kernels).
_MAX_COIL_SEGMENTS = 20_000
# What each [analysis] line holds after its keyword: (names of the numbers, how many are required).
_ANALYSIS_FIELDS = {"tran": (("TSTEP", "TSTOP", "TSTART", "TMAX"), 2), "ac": (("points", "FSTART", "FSTOP"), 3)}
_DEFAULT_SEGMENTS_PER_TURN = 24
# The words of an ngspice independent source's value (ngspice manual, "Independent sources").
_SOURCE_WORDS = frozenset({"DC", "AC", "PULSE", "SIN", "EXP", "PWL", "SFFM", "AM", "TRNOISE", "TRRANDOM"})
# A transient asking for more output points than this is almost surely a scale-factor slip
# ("5x" is 5e6 in SPICE); it would run for hours (our limit, no source).
MAX_TIME_POINTS = 1e7
# How far apart the two lead ends may be at the instrument: ten lead radii, or the spacing of
# the leads just before their ends, whichever is larger; leads that meet come closer at their
# ends, they do not part (common practice, no source).
_CLOSE_RADII = 10.0


@dataclass(frozen=True, slots=True)
class Instrument:
    """Input model of a measuring instrument at the probe tip.

    ``resistance`` and ``capacitance`` sit directly across the two inputs (``math.inf`` is an
    open circuit). A differential instrument also has ``reference_resistance`` from each input
    to its own reference. ``bandwidth`` is a single-pole limit in Hz, or None.
    """

    name: str
    resistance: float
    capacitance: float
    bandwidth: float | None
    differential: bool
    reference_resistance: float | None


# Typical values, common practice (no source): see SPEC "Built-in instruments".
BUILTIN_INSTRUMENTS: Mapping[str, Instrument] = MappingProxyType({
    "ideal": Instrument("ideal", math.inf, 0.0, None, False, None),
    "direct-1x": Instrument("direct-1x", 1e6, 100e-12, None, False, None),
    "passive-10x": Instrument("passive-10x", 10e6, 12e-12, None, False, None),
    "differential": Instrument("differential", math.inf, 2e-12, None, True, 1e6),
})


@dataclass(frozen=True, slots=True)
class Point:
    """A point of the side-file in metres; ``terminal`` is set when it was written ``"R2.1"``."""

    position: Position
    terminal: tuple[str, int] | None = None


@dataclass(frozen=True, slots=True)
class Helix:
    """A helical winding: ``turns`` turns of pitch ``length/turns`` along the unit ``axis``.

    The helix runs from ``center - axis*length/2`` to ``center + axis*length/2``, wound
    right-handed about ``axis`` (SPEC, "Details that the tests rely on"); ``wire_radius`` is
    the radius of the wire it is wound from.
    """

    center: Position
    axis: Position
    radius: float
    length: float
    turns: float
    wire_radius: float

    def frame(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Right-handed unit vectors (u, v, axis); the winding starts in direction u."""
        w = np.asarray(self.axis, dtype=float)
        reference = np.eye(3)[int(np.argmin(np.abs(w)))]
        u = reference - np.dot(reference, w) * w
        u /= np.linalg.norm(u)
        return u, np.cross(w, u), w

    def points(self, segments_per_turn: int) -> np.ndarray:
        """Vertices of the discretised helix, ``ceil(turns*segments_per_turn)`` segments.

        The vertices sit on a circle slightly larger than ``radius`` so that each turn's
        polygon encloses the area of the round winding (equal-area polygon): the flux a turn
        links, and so its mutual with whatever it encircles, then matches the round coil.
        Inscribed in the circle itself, 24 segments a turn would lose 1.1 % of the area.
        """
        u, v, w = self.frame()
        count = max(1, math.ceil(self.turns * segments_per_turn - 1e-9))
        theta = np.linspace(0.0, 2.0 * math.pi * self.turns, count + 1)
        step = theta[1] - theta[0]
        # polygon area n/2 r^2 sin(step) per turn equals pi radius^2 (n = 2 pi / step)
        scale = math.sqrt(step / math.sin(step)) if 0 < step < math.pi else 1.0
        base = np.asarray(self.center) - w * self.length / 2.0
        rise = self.length * np.linspace(0.0, 1.0, count + 1)
        return (base + scale * self.radius * (np.cos(theta)[:, None] * u + np.sin(theta)[:, None] * v)
                + rise[:, None] * w)

    def ends(self, segments_per_turn: int) -> tuple[Position, Position]:
        """First and last point of the winding as discretised."""
        pts = self.points(segments_per_turn)
        return tuple(map(float, pts[0])), tuple(map(float, pts[-1]))


@dataclass(frozen=True, slots=True)
class WireSpec:
    """One ``[[wire]]``: the ``number``-th wire of ``net`` in file order, from 1."""

    net: str  # the netlist node, lower case as ngspice has it ("gnd" is "0")
    number: int
    path: tuple[Point, ...]
    radius: float
    location: Location
    label: str  # the net as the side-file spells it, for the conductor id

    @property
    def id(self) -> str:
        return f"wire:{self.label}:{self.number}"


@dataclass(frozen=True, slots=True)
class CoilSpec:
    """One ``[[coil]]`` realising the netlist inductor ``element``."""

    element: str
    helix: Helix
    location: Location


@dataclass(frozen=True, slots=True)
class AggressorSpec:
    """A field source outside the netlist: a polyline ``path`` or a ``helix``, current imposed."""

    name: str
    current: str
    path: tuple[Position, ...] | None
    helix: Helix | None
    radius: float
    location: Location


@dataclass(frozen=True, slots=True)
class TwistedPair:
    """Twisted-pair leads: ``route`` from the midpoint of the probe points, centre-to-centre
    ``spacing``, one full twist every ``twist_pitch`` along the route."""

    route: tuple[Position, ...]
    spacing: float
    twist_pitch: float


@dataclass(frozen=True, slots=True)
class ProbeSpec:
    """One ``[[probe]]``: its points, instrument and either two leads or a twisted pair."""

    name: str
    plus: Point
    minus: Point
    instrument: Instrument
    plus_lead: tuple[Point, ...]
    minus_lead: tuple[Point, ...]
    twisted: TwistedPair | None
    radius: float
    location: Location


@dataclass(frozen=True, slots=True)
class SideFile:
    """A loaded and checked side-file; every length is in metres.

    ``terminals`` maps an element name (as the netlist spells it) to its terminal positions
    in netlist order; it includes coil elements whose terminals are their helix ends.
    """

    path: str
    units: str
    scale: float
    wire_radius: float
    terminals: Mapping[str, tuple[Position, ...]]
    terminal_locations: Mapping[str, Location]
    wires: tuple[WireSpec, ...]
    coils: tuple[CoilSpec, ...]
    aggressors: tuple[AggressorSpec, ...]
    probes: tuple[ProbeSpec, ...]
    instruments: Mapping[str, Instrument]
    analysis: Mapping[str, str]
    skin_effect: bool
    coil_segments_per_turn: int

    def describe(self, position: Any) -> str:
        """A position in the file's own units, e.g. ``(40, 60, 0) mm``."""
        return _describe(position, self.scale, self.units)


def _describe(position: Any, scale: float, units: str) -> str:
    values = ", ".join(f"{float(c) / scale:.6g}" for c in position)
    return f"({values}) {units}"


class _SourceIndex:
    """Finds the line and column of a table or key in the TOML source text.

    tomllib keeps no positions, so the text is scanned once: table headers (with the
    occurrence number of each ``[[array]]`` table) and the key lines inside them. Lines inside
    a multi-line array or inline table are skipped so that ``[0, 0, 0]`` is not a header.
    """

    _HEADER = re.compile(r"^(\s*)(\[\[?)\s*([^\[\]]+?)\s*\]\]?")
    _KEY = re.compile(r"""^(\s*)("[^"]*"|'[^']*'|[A-Za-z0-9_.\- ]+?)\s*=""")

    def __init__(self, text: str, filename: str):
        self.filename = filename
        self.headers: dict[tuple[tuple[str, ...], int | None], Location] = {}
        self.keys: dict[tuple[tuple[str, ...], int | None, str], tuple[Location, str]] = {}
        counts: dict[tuple[str, ...], int] = {}
        table: tuple[str, ...] = ()
        index: int | None = None
        depth = 0
        for number, line in enumerate(text.splitlines(), start=1):
            if depth == 0:
                header = self._HEADER.match(line)
                key = self._KEY.match(line)
                if header and not key:
                    table = tuple(_unquote(part) for part in header.group(3).split("."))
                    if header.group(2) == "[[":
                        index = counts.get(table, 0)
                        counts[table] = index + 1
                    else:
                        index = None
                    self.headers[(table, index)] = Location(filename, number, len(header.group(1)) + 1)
                elif key:
                    name = _unquote(key.group(2).strip())
                    where = Location(filename, number, len(key.group(1)) + 1)
                    self.keys.setdefault((table, index, name), (where, line))
            depth = max(0, depth + _bracket_balance(line))

    def where(self, table: tuple[str, ...] = (), index: int | None = None,
              key: str | None = None, subkey: str | None = None) -> Location:
        """Location of ``key`` (and ``subkey`` of an inline table on its line) in a table."""
        if key is not None and (table, index, key) in self.keys:
            where, line = self.keys[(table, index, key)]
            if subkey is not None:
                found = re.search(rf"\b{re.escape(subkey)}\s*=", line)
                if found:
                    return Location(where.file, where.line, found.start() + 1)
            return where
        if (table, index) in self.headers:
            return self.headers[(table, index)]
        return Location(self.filename, 1, 1)


def _unquote(text: str) -> str:
    text = text.strip()
    if len(text) >= 2 and text[0] == text[-1] and text[0] in "\"'":
        return text[1:-1]
    return text


def _bracket_balance(line: str) -> int:
    """Net count of opening minus closing brackets outside strings and comments."""
    balance = 0
    quote = ""
    escaped = False
    for char in line:
        if quote:
            if escaped:
                escaped = False
            elif char == "\\" and quote == '"':
                escaped = True
            elif char == quote:
                quote = ""
        elif char in "\"'":
            quote = char
        elif char == "#":
            break
        elif char in "[{":
            balance += 1
        elif char in "]}":
            balance -= 1
    return balance


def analysis_problem(kind: str, value: str) -> str | None:
    """What is wrong with the fields of a .tran or .ac line, or None when nothing is.

    ``tran = "TSTEP TSTOP [TSTART [TMAX]] [uic]"``, ``ac = "dec|oct|lin POINTS FSTART FSTOP"``.
    Used for the side-file's [analysis] table and for the command line's --analysis.
    """
    if kind not in _ANALYSIS_FIELDS:
        return f"{kind} {value!r}: only tran and ac analyses can be compared"
    names, required = _ANALYSIS_FIELDS[kind]
    fields = value.split()
    example = 'tran = "0.5n 4u"' if kind == "tran" else 'ac = "dec 20 1k 100meg"'
    if kind == "tran" and fields and fields[-1].lower() == "uic":
        fields = fields[:-1]
    if kind == "ac":
        if not fields or fields[0].lower() not in {"dec", "oct", "lin"}:
            return f"ac = {value!r} must start with dec, oct or lin, e.g. {example}"
        fields = fields[1:]
    if not required <= len(fields) <= len(names):
        optional = f" (and optionally {' '.join(names[required:])})" if len(names) > required else ""
        return f"{kind} = {value!r} needs {' '.join(names[:required])}{optional}, e.g. {example}"
    numbers = {}
    for name, field in zip(names, fields):
        try:
            numbers[name] = spice_number(field)
        except ValueError:
            return f"{kind}: {name} = {field!r} is not a SPICE number, e.g. {example}"
        if numbers[name] < 0 or (numbers[name] == 0 and name != "TSTART"):
            return f"{kind}: {name} = {field!r} must be greater than 0"
    if kind == "ac" and numbers["FSTART"] > numbers["FSTOP"]:
        return f"ac = {value!r}: FSTART is above FSTOP, e.g. {example}"
    if kind == "tran" and numbers.get("TSTART", 0) >= numbers["TSTOP"]:
        return f"tran = {value!r}: TSTART must be below TSTOP, e.g. {example}"
    if kind == "tran" and numbers["TSTOP"] / numbers["TSTEP"] > MAX_TIME_POINTS:
        return (f"tran = {value!r} asks for {numbers['TSTOP'] / numbers['TSTEP']:.3g} time points "
                f"(more than {MAX_TIME_POINTS:g}): check the scale factors of TSTEP and TSTOP")
    return None


def load_sidefile(path: str | Path, netlist: Any) -> SideFile:
    """Read and check a side-file against its parsed netlist.

    Parameters
    ----------
    path : str or Path
        The TOML side-file.
    netlist : augment.netlist.Netlist
        The parsed netlist it describes.

    Returns
    -------
    SideFile
        All lengths in metres, terminal references resolved to positions.

    Raises
    ------
    SideFileError
        ``file:line:column: message`` for a syntax error or anything the file gets wrong.
    """
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise SideFileError(Location(str(path), 1, 1), f"cannot read the side-file: {exc.strerror or exc}") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        before = data[:exc.start].decode("utf-8")
        line_start = before.rfind("\n") + 1
        where = Location(str(path), before.count("\n") + 1, len(before) - line_start + 1)
        raise SideFileError(where, f"byte 0x{data[exc.start]:02x} is not UTF-8 text; TOML files are UTF-8") from None
    return load_sidefile_text(text, str(path), netlist)


def load_sidefile_text(text: str, filename: str, netlist: Any) -> SideFile:
    """Like :func:`load_sidefile`, from the text of a side-file named ``filename``."""
    try:
        document = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        where = _toml_error_location(str(exc), filename)
        raise SideFileError(where, f"TOML syntax: {_toml_message(str(exc))}") from None
    return _Loader(document, _SourceIndex(text, filename), netlist).load()


_TOML_POSITION = re.compile(r"\(at line (\d+), column (\d+)\)")


def _toml_error_location(message: str, filename: str) -> Location:
    found = _TOML_POSITION.search(message)
    if found:
        return Location(filename, int(found.group(1)), int(found.group(2)))
    return Location(filename, 1, 1)


def _toml_message(message: str) -> str:
    return _TOML_POSITION.sub("", message).strip()


class _Loader:
    """One pass over a parsed TOML document; ``fail`` raises with the key's location."""

    def __init__(self, document: dict, index: _SourceIndex, netlist: Any):
        self.doc = document
        self.index = index
        self.netlist = netlist
        self.file = index.filename
        self.name = Path(index.filename).name

    def fail(self, message: str, table: tuple[str, ...] = (), index: int | None = None,
             key: str | None = None, subkey: str | None = None) -> None:
        raise SideFileError(self.index.where(table, index, key, subkey), message)

    def load(self) -> SideFile:
        self.check_keys(self.doc, _TOP_KEYS, "the side-file", ())
        self.units, self.scale = self.read_units()
        self.wire_radius = self.length(self.doc.get("wire_radius"), "wire_radius", (), None, required=True)
        self.skin_effect = self.boolean(self.doc.get("skin_effect", False), "skin_effect", (), None)
        self.segments_per_turn = self.read_segments_per_turn()
        self.instruments = self.read_instruments()
        self.analysis = self.read_analysis()
        self.terminals, self.terminal_locations = self.read_terminals()
        coils = self.read_coils()
        self.wires = self.read_wires()
        self.check_terminal_shorts()
        self.check_wire_ends()
        aggressors = self.read_aggressors()
        probes = self.read_probes()
        return SideFile(
            path=self.file, units=self.units, scale=self.scale, wire_radius=self.wire_radius,
            terminals=MappingProxyType(self.terminals),
            terminal_locations=MappingProxyType(self.terminal_locations),
            wires=self.wires, coils=coils, aggressors=aggressors, probes=probes,
            instruments=MappingProxyType(self.instruments), analysis=MappingProxyType(self.analysis),
            skin_effect=self.skin_effect, coil_segments_per_turn=self.segments_per_turn,
        )

    # --- generic values -------------------------------------------------------------------

    def check_keys(self, table: Any, allowed: set[str], what: str, path: tuple[str, ...],
                   index: int | None = None, key: str | None = None) -> None:
        if not isinstance(table, dict):
            self.fail(f"{what} must be a table", path, index, key)
        for name in table:
            if name not in allowed:
                known = ", ".join(sorted(allowed))
                if key is None:
                    self.fail(f"unknown key '{name}' in {what} (known keys: {known})", path, index, name)
                self.fail(f"unknown key '{name}' in {what} (known keys: {known})", path, index, key, name)

    def read_units(self) -> tuple[str, float]:
        units = self.doc.get("units")
        known = ", ".join(LENGTH_UNITS)
        if units is None:
            self.fail(f"give the length units, e.g. units = \"mm\" (one of {known})")
        if not isinstance(units, str) or units not in LENGTH_UNITS:
            self.fail(f"units = {units!r} is not a length unit; use one of {known}", key="units")
        return units, length_scale(units)

    def number(self, value: Any, what: str, table: tuple[str, ...], index: int | None,
               key: str, subkey: str | None = None) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(f"{what} must be a number, not {value!r}", table, index, key, subkey)
        if not math.isfinite(value):
            self.fail(f"{what} must be finite, not {value!r}", table, index, key, subkey)
        return float(value)

    def length(self, value: Any, what: str, table: tuple[str, ...], index: int | None,
               key: str | None = None, subkey: str | None = None, required: bool = False,
               default: float | None = None) -> float:
        """A positive length in the file's units, returned in metres."""
        key = key or what.split()[-1]
        if value is None:
            if required or default is None:
                self.fail(f"{what} is missing; give it in {self.units}", table, index, key if subkey else None)
            return default
        number = self.number(value, what, table, index, key, subkey)
        if number <= 0:
            self.fail(f"{what} must be greater than 0, not {value:g} {self.units}", table, index, key, subkey)
        if not _MIN_LENGTH_M <= number * self.scale <= _MAX_EXTENT_M:
            self.fail(f"{what} is {value:g} {self.units}, outside {_MIN_LENGTH_M:g} m to {_MAX_EXTENT_M:g} m: "
                      f"check the number and the units", table, index, key, subkey)
        return number * self.scale

    def boolean(self, value: Any, what: str, table: tuple[str, ...], index: int | None) -> bool:
        if not isinstance(value, bool):
            self.fail(f"{what} must be true or false, not {value!r}", table, index, what)
        return value

    def spice(self, value: Any, what: str, table: tuple[str, ...], key: str) -> float:
        """A SPICE number such as ``"1meg"`` or a TOML number; ``"inf"`` is an open circuit."""
        if isinstance(value, str) and value.strip().lower() in {"inf", "infinite"}:
            return math.inf
        if isinstance(value, str):
            try:
                return spice_number(value)
            except ValueError:
                self.fail(f"{what} = {value!r} is not a SPICE number such as \"1meg\" or \"3p\"", table, None, key)
        return self.number(value, what, table, None, key)

    def read_segments_per_turn(self) -> int:
        value = self.doc.get("coil_segments_per_turn", _DEFAULT_SEGMENTS_PER_TURN)
        if isinstance(value, bool) or not isinstance(value, int) or value < _MIN_SEGMENTS_PER_TURN:
            self.fail(f"coil_segments_per_turn must be a whole number of at least {_MIN_SEGMENTS_PER_TURN}, "
                      f"not {value!r}", key="coil_segments_per_turn")
        return value

    def coordinates(self, value: Any, what: str, table: tuple[str, ...], index: int | None,
                    key: str, subkey: str | None = None) -> Position:
        if (not isinstance(value, list) or len(value) != 3
                or any(isinstance(c, bool) or not isinstance(c, (int, float)) for c in value)):
            self.fail(f"{what} must be a point [x, y, z] in {self.units}, not {value!r}", table, index, key, subkey)
        if not all(math.isfinite(c) for c in value):
            self.fail(f"{what} has a coordinate that is not finite: {value!r}", table, index, key, subkey)
        if any(abs(c) * self.scale > _MAX_EXTENT_M for c in value):
            self.fail(f"{what} is {value!r} {self.units}, more than {_MAX_EXTENT_M:g} m from the origin: check "
                      f"the numbers and the units", table, index, key, subkey)
        return tuple(float(c) * self.scale for c in value)

    def point(self, value: Any, what: str, table: tuple[str, ...], index: int | None, key: str) -> Point:
        """A coordinate triple or a terminal reference such as ``"R2.1"``."""
        if isinstance(value, str):
            element, terminal = self.terminal_reference(value, what, table, index, key)
            positions = self.terminals.get(element)
            if positions is None:
                self.fail(f"{what} is {value!r}, but {element} is not placed; give its terminals under "
                          f"[terminals]", table, index, key)
            return Point(positions[terminal - 1], (element, terminal))
        return Point(self.coordinates(value, what, table, index, key))

    def terminal_reference(self, text: str, what: str, table: tuple[str, ...], index: int | None,
                           key: str) -> tuple[str, int]:
        found = re.fullmatch(r"\s*(.+)\.(\d+)\s*", text)
        if not found:
            self.fail(f"{what} {text!r} is neither a point [x, y, z] nor a terminal such as \"R2.1\"",
                      table, index, key)
        element = self.element(found.group(1), what, table, index, key)
        terminal = int(found.group(2))
        if not 1 <= terminal <= len(element.nodes):
            self.fail(f"{what} {text!r} names terminal {terminal} of {element.name}, which has "
                      f"{len(element.nodes)} terminal(s)", table, index, key)
        return element.name, terminal

    def element(self, name: str, what: str, table: tuple[str, ...], index: int | None, key: str | None) -> Any:
        try:
            return self.netlist.element(name)
        except KeyError:
            hidden = self.netlist.included_elements.get(name.lower())
            if hidden is not None:
                self.fail(f"{what}: element '{name}' is at the top level of the included file {hidden}, "
                          "where it cannot be placed; move it into the netlist or into a subcircuit",
                          table, index, key)
            self.fail(f"{what}: there is no element '{name}' in the netlist {Path(str(self.netlist.path)).name}",
                      table, index, key)

    def polyline(self, value: Any, what: str, table: tuple[str, ...], index: int | None, key: str,
                 minimum: int = 2) -> tuple[Point, ...]:
        if not isinstance(value, list) or len(value) < minimum:
            self.fail(f"{what} must be a list of at least {minimum} points, not {value!r}", table, index, key)
        points = tuple(self.point(item, f"point {k + 1} of {what}", table, index, key)
                       for k, item in enumerate(value))
        for k in range(len(points) - 1):
            if points[k].position == points[k + 1].position:
                self.fail(f"{what} has a zero-length segment: points {k + 1} and {k + 2} are both at "
                          f"{self.describe(points[k].position)}", table, index, key)
        return points

    def describe(self, position: Any) -> str:
        return _describe(position, self.scale, self.units)

    # --- tables ---------------------------------------------------------------------------

    def read_instruments(self) -> dict[str, Instrument]:
        instruments = dict(BUILTIN_INSTRUMENTS)
        section = self.doc.get("instrument", {})
        if not isinstance(section, dict):
            self.fail("[instrument] must hold tables such as [instrument.my_probe]", key="instrument")
        for name, fields in section.items():
            table = ("instrument", name)
            self.check_keys(fields, _INSTRUMENT_KEYS, f"[instrument.{name}]", table)
            base = instruments.get(name)
            if base is None:
                for needed in ("resistance", "capacitance"):
                    if needed not in fields:
                        self.fail(f"instrument '{name}' needs {needed} (a SPICE number such as "
                                  f"\"1meg\" or \"3p\")", table)
                base = Instrument(name, math.inf, 0.0, None, False, None)
            values = {}
            for key in ("resistance", "capacitance", "bandwidth", "reference_resistance"):
                if key in fields:
                    number = self.spice(fields[key], f"{key} of instrument '{name}'", table, key)
                    if number < 0 or (number == 0 and key != "capacitance"):
                        self.fail(f"{key} of instrument '{name}' must be greater than 0", table, None, key)
                    values[key] = number
            if "differential" in fields:
                values["differential"] = self.boolean(fields["differential"], "differential", table, None)
            instrument = replace(base, **values)
            if instrument.differential and instrument.reference_resistance is None:
                self.fail(f"differential instrument '{name}' needs reference_resistance (each input to "
                          f"the reference)", table)
            instruments[name] = instrument
        return instruments

    def read_analysis(self) -> dict[str, str]:
        section = self.doc.get("analysis", {})
        self.check_keys(section, _ANALYSIS_KEYS, "[analysis]", ("analysis",))
        for key, value in section.items():
            if not isinstance(value, str) or not value.strip():
                self.fail(f"analysis {key} must be the text of its SPICE line, e.g. tran = \"0.5n 4u\"",
                          ("analysis",), None, key)
            self.check_analysis(key, value)
        return {key: value.strip() for key, value in section.items()}

    def check_analysis(self, key: str, value: str) -> None:
        problem = analysis_problem(key, value)
        if problem:
            self.fail(f"analysis {problem}", ("analysis",), None, key)

    def read_terminals(self) -> tuple[dict[str, tuple[Position, ...]], dict[str, Location]]:
        section = self.doc.get("terminals", {})
        if not isinstance(section, dict):
            self.fail("[terminals] must be a table of element = [[x, y, z], ...]", key="terminals")
        terminals: dict[str, tuple[Position, ...]] = {}
        locations: dict[str, Location] = {}
        table = ("terminals",)
        for name, value in section.items():
            element = self.element(name, "[terminals]", table, None, name)
            if element.name in terminals:
                self.fail(f"{element.name} is placed twice under [terminals]", table, None, name)
            count = len(element.nodes)
            if not isinstance(value, list) or len(value) != count:
                self.fail(f"{element.name} has {count} terminal(s) in the netlist; give {count} point(s) "
                          f"[x, y, z] in netlist order", table, None, name)
            terminals[element.name] = tuple(
                self.coordinates(item, f"terminal {k + 1} of {element.name}", table, None, name)
                for k, item in enumerate(value))
            locations[element.name] = self.index.where(table, None, name)
        return terminals, locations

    def read_coils(self) -> tuple[CoilSpec, ...]:
        coils = []
        entries = self.array("coil")
        for number, entry in enumerate(entries):
            table = ("coil",)
            self.check_keys(entry, _COIL_KEYS, f"coil {number + 1}", table, number)
            if "element" not in entry or not isinstance(entry["element"], str):
                self.fail(f"coil {number + 1} needs element = \"L...\", the netlist inductor it realises",
                          table, number)
            element = self.element(entry["element"], f"coil {number + 1}", table, number, "element")
            if element.kind != "L":
                self.fail(f"coil {number + 1} realises {element.name}, which is not an inductor", table,
                          number, "element")
            if any(coil.element == element.name for coil in coils):
                self.fail(f"{element.name} is realised by two coils", table, number, "element")
            helix = self.helix(entry, f"coil {number + 1}", table, number, None)
            coils.append(CoilSpec(element.name, helix, self.index.where(table, number)))
            if element.name not in self.terminals:
                self.terminals[element.name] = helix.ends(self.segments_per_turn)
                self.terminal_locations[element.name] = self.index.where(table, number)
        return tuple(coils)

    def helix(self, entry: dict, what: str, table: tuple[str, ...], index: int | None,
              key: str | None) -> Helix:
        """Helix keys, at ``table`` directly or inside the inline table ``key``."""
        def where_key(name: str) -> tuple[str, str | None]:
            return (key, name) if key else (name, None)

        for needed in ("center", "axis", "radius", "length", "turns"):
            if needed not in entry:
                self.fail(f"{what} needs {needed}", table, index, key)
        center = self.coordinates(entry["center"], f"center of {what}", table, index, *where_key("center"))
        axis = np.asarray(self.coordinates(entry["axis"], f"axis of {what}", table, index, *where_key("axis")))
        if not np.any(axis):
            self.fail(f"axis of {what} is the zero vector; give its direction", table, index, *where_key("axis"))
        radius = self.length(entry["radius"], f"radius of {what}", table, index, *where_key("radius"))
        length = self.length(entry["length"], f"length of {what}", table, index, *where_key("length"))
        turns = self.number(entry["turns"], f"turns of {what}", table, index, *where_key("turns"))
        if turns < 1:
            self.fail(f"{what} must have at least 1 turn, not {turns:g}", table, index, *where_key("turns"))
        if turns * self.segments_per_turn > _MAX_COIL_SEGMENTS:
            self.fail(f"{what} has {turns:g} turns of {self.segments_per_turn} segments, more than the "
                      f"{_MAX_COIL_SEGMENTS} segments extraction handles in reasonable time; lower "
                      f"coil_segments_per_turn (at least {_MIN_SEGMENTS_PER_TURN}) or model fewer turns",
                      table, index, *where_key("turns"))
        wire_radius = self.length(entry.get("wire_radius"), f"wire_radius of {what}", table, index,
                                  *where_key("wire_radius"), default=self.wire_radius)
        direction = axis / np.linalg.norm(axis)
        return Helix(center, tuple(map(float, direction)), radius, length, turns, wire_radius)

    def array(self, name: str) -> list:
        entries = self.doc.get(name, [])
        if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
            self.fail(f"write each {name} as its own [[{name}]] table", key=name)
        return entries

    def read_wires(self) -> tuple[WireSpec, ...]:
        wires = []
        counts: dict[str, int] = {}
        for number, entry in enumerate(self.array("wire")):
            table = ("wire",)
            self.check_keys(entry, _WIRE_KEYS, f"wire {number + 1}", table, number)
            net = entry.get("net")
            if not isinstance(net, str):
                self.fail(f"wire {number + 1} needs net = \"...\", the netlist node it belongs to", table, number)
            node = net.strip().lower()
            node = "0" if node == "gnd" else node
            if node not in self.netlist.nets:
                self.fail(f"wire {number + 1}: there is no net '{net}' in the netlist "
                          f"{Path(str(self.netlist.path)).name}", table, number, "net")
            counts[node] = counts.get(node, 0) + 1
            what = f"wire {counts[node]} of net '{node}'"
            radius = self.length(entry.get("radius"), f"radius of {what}", table, number, "radius",
                                 default=self.wire_radius)
            if "path" not in entry:
                self.fail(f"{what} needs a path of at least 2 points", table, number)
            path = self.polyline(entry["path"], f"the path of {what}", table, number, "path")
            for point in path:
                if point.terminal is not None:
                    terminal_node = self.node_of(point.terminal)
                    if terminal_node != node:
                        self.fail(f"{what} runs to {point.terminal[0]}.{point.terminal[1]}, which is on net "
                                  f"'{terminal_node}': a short the netlist does not have", table, number, "path")
            wires.append(WireSpec(node, counts[node], path, radius, self.index.where(table, number), net.strip()))
        return tuple(wires)

    def node_of(self, terminal: tuple[str, int]) -> str:
        return self.netlist.element(terminal[0]).nodes[terminal[1] - 1]

    def placed_terminals(self) -> list[tuple[str, int, str, np.ndarray]]:
        """(element, terminal, node, position) of every placed terminal, in netlist order."""
        placed = []
        for element in self.netlist.elements:
            for k, position in enumerate(self.terminals.get(element.name, ()), start=1):
                placed.append((element.name, k, element.nodes[k - 1], np.asarray(position)))
        return placed

    def check_terminal_shorts(self) -> None:
        """Terminals of two nets at one place, or a wire running through another net's terminal."""
        placed = self.placed_terminals()
        tolerance = LANDING_TOLERANCE * self.wire_radius
        for a in range(len(placed)):
            for b in range(a + 1, len(placed)):
                name_a, k_a, node_a, pos_a = placed[a]
                name_b, k_b, node_b, pos_b = placed[b]
                if node_a != node_b and np.linalg.norm(pos_a - pos_b) <= tolerance:
                    self.fail(f"terminals {name_a}.{k_a} (net '{node_a}') and {name_b}.{k_b} (net '{node_b}') "
                              f"are both at {self.describe(pos_a)}: a short the netlist does not have",
                              ("terminals",), None, name_b)
        for number, wire in enumerate(self.wires):
            starts, ends = _polyline_segments(wire.path)
            for name, k, node, position in placed:
                if node == wire.net:
                    continue
                if _distance_to_polyline(position, starts, ends) <= wire.radius:
                    self.fail(f"wire {wire.number} of net '{wire.net}' touches terminal {name}.{k} of net "
                              f"'{node}' at {self.describe(position)}: a short the netlist does not have",
                              ("wire",), number, "path")

    def check_wire_ends(self) -> None:
        """Each wire end lands on a terminal of its net or on another wire of its net."""
        placed = self.placed_terminals()
        for number, wire in enumerate(self.wires):
            tolerance = LANDING_TOLERANCE * wire.radius
            others = [other for other in self.wires if other.net == wire.net and other is not wire]
            for end, point in (("starts", wire.path[0]), ("ends", wire.path[-1])):
                if point.terminal is not None:
                    continue
                position = np.asarray(point.position)
                on_terminal = any(node == wire.net and np.linalg.norm(position - pos) <= tolerance
                                  for _, _, node, pos in placed)
                on_wire = any(_distance_to_polyline(position, *_polyline_segments(other.path)) <= tolerance
                              for other in others)
                if not (on_terminal or on_wire):
                    same_net = [(np.linalg.norm(position - np.asarray(pos)), f"{name}.{k}", pos)
                                for name, k, node, pos in placed if node == wire.net]
                    hint = ""
                    if same_net:
                        gap, label, pos = min(same_net, key=lambda item: item[0])
                        hint = (f" (the nearest terminal of the net is {label} at {self.describe(pos)}, "
                                f"{gap / self.scale:.4g} {self.units} away; ends must be within "
                                f"{tolerance / self.scale:.4g} {self.units})")
                    self.fail(f"wire {wire.number} of net '{wire.net}' {end} at {self.describe(position)}, "
                              f"which is no terminal of net '{wire.net}' and no point of its wires{hint}",
                              ("wire",), number, "path")

    def unique_name(self, entry: dict, kind: str, number: int, taken) -> str:
        """The ``name`` of the number-th [[kind]] table: letters, digits, _ and -, and unique."""
        name = entry.get("name")
        if not isinstance(name, str) or not re.fullmatch(r"[A-Za-z0-9_\-]+", name):
            self.fail(f"{kind} {number + 1} needs name = \"...\" (letters, digits, _ and -)", (kind,), number)
        if name in set(taken):
            self.fail(f"two {kind}s are named '{name}'", (kind,), number, "name")
        return name

    def read_aggressors(self) -> tuple[AggressorSpec, ...]:
        aggressors = []
        for number, entry in enumerate(self.array("aggressor")):
            table = ("aggressor",)
            self.check_keys(entry, _AGGRESSOR_KEYS, f"aggressor {number + 1}", table, number)
            name = self.unique_name(entry, "aggressor", number, (a.name for a in aggressors))
            what = f"aggressor '{name}'"
            current = entry.get("current")
            if not isinstance(current, str) or not current.strip():
                self.fail(f"{what} needs current = \"...\" in SPICE independent-source syntax, e.g. "
                          f"\"PULSE(0 1 0 1n 1n 1u 2u)\"", table, number)
            self.check_current(current, what, table, number)
            radius = self.length(entry.get("radius"), f"radius of {what}", table, number, "radius",
                                 default=self.wire_radius)
            if ("path" in entry) == ("coil" in entry):
                self.fail(f"{what} needs either a path or a coil = {{ ... }}", table, number)
            path = helix = None
            if "path" in entry:
                points = self.polyline(entry["path"], f"the path of {what}", table, number, "path")
                if any(p.terminal is not None for p in points):
                    self.fail(f"the path of {what} must be coordinates; it is not part of the netlist",
                              table, number, "path")
                path = tuple(p.position for p in points)
            else:
                self.check_keys(entry["coil"], _HELIX_KEYS, f"the coil of {what}", table, number, "coil")
                helix = self.helix(entry["coil"], f"the coil of {what}", table, number, "coil")
            aggressors.append(AggressorSpec(name, current.strip(), path, helix, radius,
                                            self.index.where(table, number)))
        return tuple(aggressors)

    def check_current(self, current: str, what: str, table: tuple[str, ...], number: int) -> None:
        """The current is the value of an independent source line; it must parse as one."""
        from augment.netlist import parse_netlist_text

        if "\n" in current or "\r" in current:
            self.fail(f"the current of {what} must be on one line", table, number, "current")
        try:
            parse_netlist_text(f"aggressor\nIAGGRESSOR a 0 {current}\n", self.file)
        except NetlistError as error:  # located in the one-line text above, so only its words
            self.fail(f"the current of {what} is not a SPICE source value ({error.message}): {current!r}",
                      table, number, "current")
        # ngspice takes any word here and fails only when it simulates: name the known ones
        for word in re.findall(r"(?<![\w.])([A-Za-z]\w*)\s*\(", current) + re.findall(r"^\s*([A-Za-z]\w*)\b", current):
            if word.upper() not in _SOURCE_WORDS:
                self.fail(f"the current of {what} uses '{word}', which is no SPICE source function "
                          f"({', '.join(sorted(_SOURCE_WORDS))}): {current!r}", table, number, "current")

    def read_probes(self) -> tuple[ProbeSpec, ...]:
        probes = []
        for number, entry in enumerate(self.array("probe")):
            table = ("probe",)
            self.check_keys(entry, _PROBE_KEYS, f"probe {number + 1}", table, number)
            name = self.unique_name(entry, "probe", number, (p.name for p in probes))
            what = f"probe '{name}'"
            for needed in ("plus", "minus", "instrument"):
                if needed not in entry:
                    self.fail(f"{what} needs {needed}", table, number)
            plus = self.point(entry["plus"], f"the plus point of {what}", table, number, "plus")
            minus = self.point(entry["minus"], f"the minus point of {what}", table, number, "minus")
            if plus.position == minus.position:
                self.fail(f"the plus and minus points of {what} are the same point", table, number, "minus")
            instrument_name = entry["instrument"]
            if not isinstance(instrument_name, str) or instrument_name not in self.instruments:
                known = ", ".join(sorted(self.instruments))
                self.fail(f"{what} uses instrument {instrument_name!r}, which is neither built in nor "
                          f"defined under [instrument.NAME] (known: {known})", table, number, "instrument")
            radius = self.length(entry.get("radius"), f"radius of the leads of {what}", table, number,
                                 "radius", default=self.wire_radius)
            twisted = None
            plus_lead = minus_lead = ()
            if "leads" in entry:
                if "plus_lead" in entry or "minus_lead" in entry:
                    self.fail(f"{what} has both leads = {{...}} and plus_lead/minus_lead; give one",
                              table, number, "leads")
                twisted = self.twisted_pair(entry["leads"], what, plus, minus, radius, number)
            else:
                for needed in ("plus_lead", "minus_lead"):
                    if needed not in entry:
                        self.fail(f"{what} needs plus_lead and minus_lead, or leads = {{ route, spacing, "
                                  f"twist_pitch }}", table, number)
                plus_lead = self.lead(entry["plus_lead"], "plus", plus, what, radius, number)
                minus_lead = self.lead(entry["minus_lead"], "minus", minus, what, radius, number)
                self.check_leads_meet(plus_lead, minus_lead, what, radius, number)
            probes.append(ProbeSpec(name, plus, minus, self.instruments[instrument_name], plus_lead, minus_lead,
                                    twisted, radius, self.index.where(table, number)))
        return tuple(probes)

    def lead(self, value: Any, side: str, start: Point, what: str, radius: float, number: int) -> tuple[Point, ...]:
        key = f"{side}_lead"
        lead = self.polyline(value, f"the {side} lead of {what}", ("probe",), number, key, minimum=1)
        gap = np.linalg.norm(np.subtract(lead[0].position, start.position))
        if gap > LANDING_TOLERANCE * radius:
            self.fail(f"the {side} lead of {what} starts at {self.describe(lead[0].position)}, not at its "
                      f"{side} point {self.describe(start.position)}", ("probe",), number, key)
        return lead

    def check_leads_meet(self, plus_lead: tuple[Point, ...], minus_lead: tuple[Point, ...], what: str,
                         radius: float, number: int) -> None:
        gap = np.linalg.norm(np.subtract(plus_lead[-1].position, minus_lead[-1].position))
        limit = _CLOSE_RADII * radius
        if len(plus_lead) > 1 and len(minus_lead) > 1:
            before = np.linalg.norm(np.subtract(plus_lead[-2].position, minus_lead[-2].position))
            limit = max(limit, before)
        if gap > limit:
            self.fail(f"the leads of {what} end {gap / self.scale:.6g} {self.units} apart; they must meet at "
                      f"the instrument (within {limit / self.scale:.6g} {self.units})", ("probe",), number,
                      "minus_lead")

    def twisted_pair(self, value: Any, what: str, plus: Point, minus: Point, radius: float,
                     number: int) -> TwistedPair:
        table = ("probe",)
        self.check_keys(value, _LEADS_KEYS, f"the leads of {what}", table, number, "leads")
        for needed in ("route", "spacing", "twist_pitch"):
            if needed not in value:
                self.fail(f"the twisted leads of {what} need {needed}", table, number, "leads")
        route = value["route"]
        if not isinstance(route, list) or len(route) < 2:
            self.fail(f"the route of {what} must be a list of at least 2 points", table, number, "leads", "route")
        points = tuple(self.coordinates(p, f"point {k + 1} of the route of {what}", table, number, "leads", "route")
                       for k, p in enumerate(route))
        for k in range(len(points) - 1):
            if points[k] == points[k + 1]:
                self.fail(f"the route of {what} has a zero-length segment: points {k + 1} and {k + 2} are "
                          f"both at {self.describe(points[k])}", table, number, "leads", "route")
        spacing = self.length(value["spacing"], f"spacing of the leads of {what}", table, number, "leads",
                              "spacing")
        pitch = self.length(value["twist_pitch"], f"twist_pitch of the leads of {what}", table, number,
                            "leads", "twist_pitch")
        middle = (np.asarray(plus.position) + np.asarray(minus.position)) / 2.0
        if np.linalg.norm(np.asarray(points[0]) - middle) > LANDING_TOLERANCE * radius:
            self.fail(f"the route of {what} starts at {self.describe(points[0])}; it must start at "
                      f"{self.describe(middle)}, midway between the plus and minus points", table, number,
                      "leads", "route")
        if spacing <= 2.0 * radius:
            self.fail(f"spacing of the leads of {what} is {spacing / self.scale:g} {self.units}, less than "
                      f"two lead radii: the leads would overlap", table, number, "leads", "spacing")
        return TwistedPair(points, spacing, pitch)


def _polyline_segments(points: tuple[Point, ...]) -> tuple[np.ndarray, np.ndarray]:
    array = np.array([p.position for p in points], dtype=float)
    return array[:-1], array[1:]


def _distance_to_polyline(position: np.ndarray, starts: np.ndarray, ends: np.ndarray) -> float:
    """Shortest distance from a point to a polyline given as segment start and end arrays."""
    direction = ends - starts
    squared = np.einsum("ij,ij->i", direction, direction)
    t = np.clip(np.einsum("ij,ij->i", position - starts, direction) / squared, 0.0, 1.0)
    nearest = starts + t[:, None] * direction
    return float(np.min(np.linalg.norm(nearest - position, axis=1)))
