"""The conductor graph: every piece of copper, coil, field source and probe loop as polylines.

Each net's wires are joined at junctions (placed terminals, wire ends, and points where a wire
or a probe point lands mid-path, where the wire is split). Placed two-terminal elements get a
straight body; coils become discretised helices with straight leads to their terminals;
aggressors carry an imposed current; a probe is one loop from its plus point out along the
plus lead, across the instrument, and back along the minus lead. Conductor ids follow SPEC,
"Conductor names". Geometry checks that need the whole graph are made here: where probe points
land, and that no two conductors come closer than their radii allow unless joined there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any, Mapping

import numpy as np

from augment.errors import Location, SideFileError
from augment.sidefile import LANDING_TOLERANCE, Instrument, Point, ProbeSpec, SideFile, TwistedPair

# At least this many straight segments per twist of a twisted pair (numerics, PHYSICS.md:
# discretise only what is curved).
TWIST_SEGMENTS_PER_PITCH = 16
# Segment pairs checked for proximity per block (memory bound for the vectorised check).
_PROXIMITY_CHUNK = 256
# Near a joint the copper of two joined conductors overlaps by construction; closeness within
# this many times the sum of radii of a shared end point counts as "joined there".
_JOIN_REACH = 2.0


@dataclass(frozen=True, slots=True, eq=False)
class Conductor:
    """One conductor carrying one current along the polyline ``points`` (metres).

    Segment i joins ``points[i]`` to ``points[i + 1]``; the conductor's direction is from its
    first point to its last. ``start`` and ``end`` are junction ids (None for aggressors and
    probes); ``net`` is set for wires, ``element`` for bodies and coils.
    """

    id: str
    kind: str
    points: np.ndarray
    radius: float
    start: str | None
    end: str | None
    net: str | None
    element: str | None
    location: Location | None

    @property
    def length_m(self) -> float:
        """Total length along the polyline, in metres."""
        return float(np.sum(np.linalg.norm(np.diff(self.points, axis=0), axis=1)))

    @property
    def segments(self) -> tuple[np.ndarray, np.ndarray]:
        """Start and end points of every segment, two (n, 3) arrays."""
        return self.points[:-1], self.points[1:]


@dataclass(frozen=True, slots=True)
class Junction:
    """A point where conductors of one net meet; it becomes a node of the augmented netlist."""

    id: str
    net: str
    position: tuple[float, float, float]


@dataclass(frozen=True, slots=True, eq=False)
class ProbeSetup:
    """A probe as the later stages need it.

    ``conductor`` is the id of its loop conductor; ``plus`` and ``minus`` are the junctions it
    touches; ``local_points`` is the straight plus-to-minus path of a zero-area probe;
    ``plus_lead_end`` is the index, in the loop's points, of the plus lead's last point;
    ``closing_segment`` is the index of the segment across the instrument, which starts there
    (None when the lead ends coincide and it has zero length).
    """

    name: str
    conductor: str
    plus: str
    minus: str
    instrument: Instrument
    local_points: np.ndarray
    twisted: bool
    location: Location
    plus_lead_end: int
    closing_segment: int | None


@dataclass(frozen=True, slots=True)
class AggressorSource:
    """The imposed current (SPICE independent-source text, amperes) of an aggressor conductor."""

    name: str
    conductor: str
    current: str
    location: Location


@dataclass(frozen=True, slots=True, eq=False)
class ConductorGraph:
    """Every conductor and junction of a side-file, ready for inductance extraction.

    ``conductors`` lists current-carrying conductors first (wires, bodies, coils, aggressors),
    then probe loops. ``terminals`` maps (element, 1-based terminal) to a junction for every
    placed terminal and every unplaced terminal on a net that has junctions. ``net_root``
    gives, for every net with junctions, the junction that keeps the netlist's node name;
    ``ideal_joins`` pairs junctions that the netlist joins but no copper does; ``placed``
    holds the terminals whose position the side-file gives (the others are attached).
    """

    conductors: tuple[Conductor, ...]
    junctions: Mapping[str, Junction]
    terminals: Mapping[tuple[str, int], str]
    net_root: Mapping[str, str]
    ideal_joins: tuple[tuple[str, str], ...]
    probes: tuple[ProbeSetup, ...]
    aggressors: tuple[AggressorSource, ...]
    analysis: Mapping[str, str]
    skin_effect: bool
    coil_segments_per_turn: int
    warnings: tuple[str, ...]
    placed: frozenset[tuple[str, int]] = frozenset()

    def conductor(self, conductor_id: str) -> Conductor:
        """The conductor with this id; KeyError if there is none."""
        for conductor in self.conductors:
            if conductor.id == conductor_id:
                return conductor
        raise KeyError(conductor_id)


def build_graph(sidefile: SideFile, netlist: Any) -> ConductorGraph:
    """Build the conductor graph of a loaded side-file.

    Parameters
    ----------
    sidefile : SideFile
        The loaded side-file (lengths in metres).
    netlist : augment.netlist.Netlist
        The netlist it was loaded against.

    Returns
    -------
    ConductorGraph
        Conductors, junctions and probes; ``warnings`` holds what the caller should print.

    Raises
    ------
    SideFileError
        When a probe point lands on no terminal and no wire, or two conductors come closer than
        the sum of their radii without being joined there.
    """
    return _Builder(sidefile, netlist).build()


def _readonly(array: np.ndarray) -> np.ndarray:
    array = np.array(array, dtype=float)
    array.flags.writeable = False
    return array


class _Junctions:
    """Find-or-create junctions by net and position."""

    def __init__(self) -> None:
        self.by_id: dict[str, Junction] = {}
        self.by_net: dict[str, list[Junction]] = {}
        self.counts: dict[str, int] = {}

    def find(self, net: str, position: np.ndarray, tolerance: float) -> Junction | None:
        for junction in self.by_net.get(net, ()):
            if np.linalg.norm(np.asarray(junction.position) - position) <= tolerance:
                return junction
        return None

    def at(self, net: str, position: np.ndarray, tolerance: float, name: str | None = None) -> Junction:
        found = self.find(net, position, tolerance)
        if found is not None:
            return found
        if name is None:
            self.counts[net] = self.counts.get(net, 0) + 1
            name = f"{net}@{self.counts[net]}"
        junction = Junction(name, net, tuple(float(c) for c in position))
        self.by_id[name] = junction
        self.by_net.setdefault(net, []).append(junction)
        return junction


def _project(position: np.ndarray, points: np.ndarray) -> tuple[float, float]:
    """(distance, path parameter u = segment index + fraction) of the closest polyline point."""
    starts, ends = points[:-1], points[1:]
    direction = ends - starts
    squared = np.einsum("ij,ij->i", direction, direction)
    t = np.clip(np.einsum("ij,ij->i", position - starts, direction) / squared, 0.0, 1.0)
    distance = np.linalg.norm(starts + t[:, None] * direction - position, axis=1)
    best = int(np.argmin(distance))
    return float(distance[best]), best + float(t[best])


def _at_parameter(points: np.ndarray, u: float) -> np.ndarray:
    index = min(int(math.floor(u)), len(points) - 2)
    t = u - index
    return points[index] + t * (points[index + 1] - points[index])


def _cut(points: np.ndarray, cuts: list[float]) -> list[np.ndarray]:
    """Split a polyline at sorted path parameters strictly between its ends."""
    bounds = [0.0, *cuts, float(len(points) - 1)]
    pieces = []
    for a, b in zip(bounds[:-1], bounds[1:]):
        inner = [points[k] for k in range(len(points)) if a < k < b]
        pieces.append(np.array([_at_parameter(points, a), *inner, _at_parameter(points, b)]))
    return pieces


def twisted_leads(plus: np.ndarray, minus: np.ndarray, pair: TwistedPair) -> tuple[np.ndarray, np.ndarray]:
    """The two interleaved helical leads of a twisted pair along its route.

    Each lead winds at radius ``spacing/2`` about the route, one turn per ``twist_pitch`` of
    route length, right-handed about the route direction; the minus lead is half a turn (pi)
    behind the plus lead, so the two are always ``spacing`` apart centre to centre. The frame
    is carried from one route segment to the next by the rotation between their directions; at
    a corner each lead has one point, on the bisector of the offsets either side. The first
    offset is square to both the route and the line between the probe points, so the leads
    leave a part that lies between its terminals sideways rather than along its body. Each lead has at
    least ``TWIST_SEGMENTS_PER_PITCH`` segments per pitch.

    Returns
    -------
    (plus_lead, minus_lead) : two (n, 3) arrays from the route's start to its end.
    """
    route = np.asarray(pair.route, dtype=float)
    tangents = np.diff(route, axis=0)
    lengths = np.linalg.norm(tangents, axis=1)
    tangents /= lengths[:, None]
    across = np.asarray(plus, dtype=float) - np.asarray(minus, dtype=float)
    normal = np.cross(tangents[0], across)
    if np.linalg.norm(normal) < 1e-9 * np.linalg.norm(across):
        normal = np.cross(tangents[0], np.eye(3)[int(np.argmin(np.abs(tangents[0])))])
    normal /= np.linalg.norm(normal)
    plus_parts, minus_parts = [], []
    travelled = 0.0
    for k, (tangent, length) in enumerate(zip(tangents, lengths)):
        if k > 0:
            normal = _rotate_between(tangents[k - 1], tangent, normal)
        binormal = np.cross(tangent, normal)
        count = max(1, math.ceil(length / pair.twist_pitch * TWIST_SEGMENTS_PER_PITCH - 1e-9))
        s = np.linspace(0.0, length, count + 1)
        phase = 2.0 * math.pi * (travelled + s) / pair.twist_pitch
        offset = (pair.spacing / 2.0) * (np.cos(phase)[:, None] * normal + np.sin(phase)[:, None] * binormal)
        if k > 0:
            # Mitre the corner: one point per lead, on the bisector of the two offsets, keeps
            # the leads continuous and exactly ``spacing`` apart there.
            bisector = previous + offset[0]
            if np.linalg.norm(bisector) > 1e-9 * pair.spacing:
                corner = bisector * (pair.spacing / 2.0 / np.linalg.norm(bisector))
                plus_parts[-1][-1] = route[k] + corner
                minus_parts[-1][-1] = route[k] - corner
                offset, s = offset[1:], s[1:]
        centre = route[k] + s[:, None] * tangent
        plus_parts.append(centre + offset)
        minus_parts.append(centre - offset)
        previous = offset[-1]
        travelled += length
    return _dedupe(np.concatenate(plus_parts)), _dedupe(np.concatenate(minus_parts))


def _rotate_between(a: np.ndarray, b: np.ndarray, vector: np.ndarray) -> np.ndarray:
    """Rotate ``vector`` by the rotation that takes unit ``a`` to unit ``b`` (Rodrigues)."""
    axis = np.cross(a, b)
    sine = np.linalg.norm(axis)
    cosine = float(np.dot(a, b))
    if sine < 1e-12:
        return vector if cosine > 0 else -vector
    axis /= sine
    angle = math.atan2(sine, cosine)
    return (vector * math.cos(angle) + np.cross(axis, vector) * math.sin(angle)
            + axis * np.dot(axis, vector) * (1.0 - math.cos(angle)))


def _dedupe(points: np.ndarray) -> np.ndarray:
    """Drop every vertex that repeats the previous one exactly."""
    keep = np.ones(len(points), dtype=bool)
    keep[1:] = np.any(np.diff(points, axis=0) != 0.0, axis=1)
    return points[keep]


class _Builder:
    def __init__(self, sidefile: SideFile, netlist: Any):
        self.side = sidefile
        self.netlist = netlist
        self.junctions = _Junctions()
        self.terminals: dict[tuple[str, int], str] = {}
        self.warnings: list[str] = []
        self.terminal_tolerance = LANDING_TOLERANCE * sidefile.wire_radius
        self.coil_elements = {coil.element for coil in sidefile.coils}

    def build(self) -> ConductorGraph:
        self.place_terminals()
        placed = frozenset(self.terminals)
        probe_points = self.locate_probe_points()
        wires = self.wire_conductors(probe_points)
        probe_junctions = {key: self.junction_of(found) for key, found in probe_points.items()}
        current = (wires + self.body_conductors() + self.coil_conductors()
                   + self.aggressor_conductors())
        probe_conductors, probes = self.probe_conductors(probe_junctions)
        roots, joins = self.connect(wires)
        conductors = tuple(current + probe_conductors)
        _check_proximity(conductors, self.side)
        return ConductorGraph(
            conductors=conductors,
            junctions=MappingProxyType(dict(self.junctions.by_id)),
            terminals=MappingProxyType(dict(self.terminals)),
            net_root=MappingProxyType(roots),
            ideal_joins=tuple(joins),
            probes=tuple(probes),
            aggressors=tuple(
                AggressorSource(a.name, f"aggressor:{a.name}", a.current, a.location)
                for a in self.side.aggressors),
            analysis=self.side.analysis,
            skin_effect=self.side.skin_effect,
            coil_segments_per_turn=self.side.coil_segments_per_turn,
            warnings=tuple(self.warnings),
            placed=placed,
        )

    def place_terminals(self) -> None:
        for element in self.netlist.elements:
            for k, position in enumerate(self.side.terminals.get(element.name, ()), start=1):
                junction = self.junctions.at(element.nodes[k - 1], np.asarray(position),
                                             self.terminal_tolerance, f"{element.name}.{k}")
                self.terminals[(element.name, k)] = junction.id

    def locate_probe_points(self) -> dict[tuple[int, str], tuple]:
        """Where each probe point lands: ("junction", id) or ("wire", wire index, position)."""
        found = {}
        for number, probe in enumerate(self.side.probes):
            for side, point in (("plus", probe.plus), ("minus", probe.minus)):
                found[(number, side)] = self.land(probe, side, point)
        return found

    def land(self, probe: ProbeSpec, side: str, point: Point) -> tuple:
        if point.terminal is not None:
            return ("junction", self.terminals[point.terminal])
        position = np.asarray(point.position)
        for junctions in self.junctions.by_net.values():
            for junction in junctions:
                if np.linalg.norm(np.asarray(junction.position) - position) <= self.terminal_tolerance:
                    return ("junction", junction.id)
        for index, wire in enumerate(self.side.wires):
            points = np.array([p.position for p in wire.path])
            distance, _ = _project(position, points)
            if distance <= LANDING_TOLERANCE * max(wire.radius, probe.radius):
                return ("wire", index, position)
        raise SideFileError(probe.location, f"the {side} point of probe '{probe.name}' at "
                            f"{self.side.describe(position)} is on no terminal and no wire")

    def junction_of(self, found: tuple) -> str:
        if found[0] == "junction":
            return found[1]
        wire = self.side.wires[found[1]]
        return self.junctions.at(wire.net, found[2], LANDING_TOLERANCE * wire.radius).id

    def wire_conductors(self, probe_points: dict) -> list[Conductor]:
        """Wires split at every junction along their path, in file order."""
        paths = [np.array([p.position for p in wire.path]) for wire in self.side.wires]
        conductors = []
        for index, wire in enumerate(self.side.wires):
            tolerance = LANDING_TOLERANCE * wire.radius
            landing = [np.asarray(self.side.terminals[e][k - 1])
                       for (e, k), _ in self.terminals.items()
                       if self.netlist.element(e).nodes[k - 1] == wire.net]
            for other_index, other in enumerate(self.side.wires):
                if other_index != index and other.net == wire.net:
                    landing += [paths[other_index][0], paths[other_index][-1]]
            landing += [found[2] for found in probe_points.values() if found[0] == "wire" and found[1] == index]
            cuts = []
            for position in landing:
                distance, u = _project(position, paths[index])
                if distance <= tolerance and 0.0 < u < len(paths[index]) - 1:
                    vertex = round(u)
                    if np.linalg.norm(paths[index][vertex] - _at_parameter(paths[index], u)) <= tolerance:
                        u = float(vertex)
                    if 0.0 < u < len(paths[index]) - 1 and all(abs(u - c) > 1e-9 for c in cuts):
                        cuts.append(u)
            pieces = _cut(paths[index], sorted(cuts))
            base = wire.id
            for k, piece in enumerate(pieces, start=1):
                start = self.junctions.at(wire.net, piece[0], tolerance)
                end = self.junctions.at(wire.net, piece[-1], tolerance)
                piece[0], piece[-1] = start.position, end.position
                conductors.append(Conductor(
                    id=base if len(pieces) == 1 else f"{base}/{k}", kind="wire", points=_readonly(piece),
                    radius=wire.radius, start=start.id, end=end.id, net=wire.net, element=None,
                    location=wire.location))
        return conductors

    def body_conductors(self) -> list[Conductor]:
        bodies = []
        for element in self.netlist.elements:
            positions = self.side.terminals.get(element.name)
            if positions is None or len(positions) != 2 or element.name in self.coil_elements:
                continue
            location = self.side.terminal_locations[element.name]
            if positions[0] == positions[1]:
                raise SideFileError(location, f"both terminals of {element.name} are at "
                                    f"{self.side.describe(positions[0])}; its body would have zero length")
            bodies.append(Conductor(
                id=f"body:{element.name}", kind="body", points=_readonly(positions),
                radius=self.side.wire_radius, start=self.terminals[(element.name, 1)],
                end=self.terminals[(element.name, 2)], net=None, element=element.name, location=location))
        return bodies

    def coil_conductors(self) -> list[Conductor]:
        coils = []
        for coil in self.side.coils:
            helix = coil.helix.points(self.side.coil_segments_per_turn)
            first, last = (np.asarray(p) for p in self.side.terminals[coil.element])
            tolerance = LANDING_TOLERANCE * coil.helix.wire_radius
            points = [helix]
            if np.linalg.norm(helix[0] - first) <= tolerance:
                helix[0] = first
            else:
                points.insert(0, first[None, :])
            if np.linalg.norm(helix[-1] - last) <= tolerance:
                helix[-1] = last
            else:
                points.append(last[None, :])
            coils.append(Conductor(
                id=f"coil:{coil.element}", kind="coil", points=_readonly(np.concatenate(points)),
                radius=coil.helix.wire_radius, start=self.terminals[(coil.element, 1)],
                end=self.terminals[(coil.element, 2)], net=None, element=coil.element, location=coil.location))
        return coils

    def aggressor_conductors(self) -> list[Conductor]:
        conductors = []
        for aggressor in self.side.aggressors:
            if aggressor.helix is not None:
                points = aggressor.helix.points(self.side.coil_segments_per_turn)
                radius = aggressor.helix.wire_radius
            else:
                points = np.array(aggressor.path)
                radius = aggressor.radius
            conductors.append(Conductor(
                id=f"aggressor:{aggressor.name}", kind="aggressor", points=_readonly(points), radius=radius,
                start=None, end=None, net=None, element=None, location=aggressor.location))
        return conductors

    def probe_conductors(self, junctions: dict) -> tuple[list[Conductor], list[ProbeSetup]]:
        conductors, setups = [], []
        for number, probe in enumerate(self.side.probes):
            plus_id, minus_id = junctions[(number, "plus")], junctions[(number, "minus")]
            if plus_id == minus_id:
                raise SideFileError(probe.location, f"the plus and minus points of probe '{probe.name}' are "
                                    f"both on junction {plus_id}; the probe would read nothing")
            plus = np.asarray(self.junctions.by_id[plus_id].position)
            minus = np.asarray(self.junctions.by_id[minus_id].position)
            if probe.twisted is not None:
                plus_lead, minus_lead = twisted_leads(plus, minus, probe.twisted)
                plus_lead = np.vstack([plus, plus_lead])
                minus_lead = np.vstack([minus, minus_lead])
            else:
                plus_lead = np.array([plus] + [p.position for p in probe.plus_lead[1:]])
                minus_lead = np.array([minus] + [p.position for p in probe.minus_lead[1:]])
            plus_lead, minus_lead = _dedupe(plus_lead), _dedupe(minus_lead)
            closing = len(plus_lead) - 1
            if np.array_equal(plus_lead[-1], minus_lead[-1]):
                closing = None
                minus_lead = minus_lead[:-1]
            points = np.vstack([plus_lead, minus_lead[::-1]])
            conductor_id = f"probe:{probe.name}"
            conductors.append(Conductor(
                id=conductor_id, kind="probe", points=_readonly(points), radius=probe.radius, start=None,
                end=None, net=None, element=None, location=probe.location))
            setups.append(ProbeSetup(
                name=probe.name, conductor=conductor_id, plus=plus_id, minus=minus_id,
                instrument=probe.instrument, local_points=_readonly(np.vstack([plus, minus])),
                twisted=probe.twisted is not None, location=probe.location, plus_lead_end=len(plus_lead) - 1,
                closing_segment=closing))
        return conductors, setups

    def connect(self, wires: list[Conductor]) -> tuple[dict[str, str], list[tuple[str, str]]]:
        """Net roots, ideal joins between unconnected pieces, unplaced terminals attached."""
        parent = {junction_id: junction_id for junction_id in self.junctions.by_id}

        def find(item: str) -> str:
            while parent[item] != item:
                parent[item] = parent[parent[item]]
                item = parent[item]
            return item

        for wire in wires:
            parent[find(wire.start)] = find(wire.end)
        wired = {wire.net for wire in wires}
        roots: dict[str, str] = {}
        joins: list[tuple[str, str]] = []
        for net, junctions in self.junctions.by_net.items():
            placed = [self.terminals[t] for t in self.netlist.nets.get(net, ()) if t in self.terminals]
            first_wire = next((w.start for w in wires if w.net == net), None)
            root = placed[0] if placed else first_wire
            roots[net] = root
            pieces: dict[str, list[str]] = {}
            for junction in junctions:
                pieces.setdefault(find(junction.id), []).append(junction.id)
            if len(pieces) < 2:
                continue
            ordered = sorted(pieces.values(), key=lambda members: find(members[0]) != find(root))
            for members in ordered[1:]:
                joins.append((root, members[0]))
            if net in wired:
                names = "; ".join(self.describe_piece(members, wires) for members in ordered)
                self.warnings.append(f"net '{net}' is in {len(pieces)} unconnected pieces ({names}); they are "
                                     f"joined ideally, as in the netlist")
        for element in self.netlist.elements:
            if element.name in self.side.terminals:
                continue
            for k, node in enumerate(element.nodes, start=1):
                if node in roots:
                    self.terminals[(element.name, k)] = roots[node]
                    if node in wired:
                        self.warnings.append(f"{element.name}.{k} is on wired net '{node}' but not placed; it is "
                                             f"attached at {roots[node]}")
        return roots, joins

    def describe_piece(self, members: list[str], wires: list[Conductor]) -> str:
        member_set = set(members)
        terminals = [f"{e}.{k}" for (e, k), j in self.terminals.items() if j in member_set]
        names = [w.id for w in wires if w.start in member_set]
        return ", ".join(terminals + names) or ", ".join(members)


def _closest_distance(p1: np.ndarray, q1: np.ndarray, p2: np.ndarray, q2: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Closest distance between segment pairs [p1, q1] and [p2, q2], and the midpoints there.

    Vectorised form of the clamped closest-point algorithm for two segments (C. Ericson,
    "Real-Time Collision Detection", 2005, section 5.1.9).
    """
    d1, d2, r = q1 - p1, q2 - p2, p1 - p2
    a = np.einsum("ij,ij->i", d1, d1)
    e = np.einsum("ij,ij->i", d2, d2)
    f = np.einsum("ij,ij->i", d2, r)
    c = np.einsum("ij,ij->i", d1, r)
    b = np.einsum("ij,ij->i", d1, d2)
    denominator = a * e - b * b
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.where(denominator > 1e-12 * a * e, np.clip((b * f - c * e) / denominator, 0.0, 1.0), 0.0)
        t = (b * s + f) / e
        s = np.where(t < 0.0, np.clip(-c / a, 0.0, 1.0), np.where(t > 1.0, np.clip((b - c) / a, 0.0, 1.0), s))
    t = np.clip(t, 0.0, 1.0)
    c1 = p1 + s[:, None] * d1
    c2 = p2 + t[:, None] * d2
    return np.linalg.norm(c1 - c2, axis=1), (c1 + c2) / 2.0


def _check_proximity(conductors: tuple[Conductor, ...], side: SideFile) -> None:
    """Raise when two conductors come closer than the sum of their radii without being joined.

    Segments that share an end point, neighbouring segments of one conductor (fewer than
    ``_JOIN_REACH`` sums of radii apart along it) and the turns of one helix (coil or
    aggressor coil) are not compared, nor are two probes: they are alternative set-ups, each
    read on its own, and may share a route. Closeness within ``_JOIN_REACH`` sums of radii of an end
    point the two conductors share is part of their joint, and so is a probe's first or last
    segment lying along a conductor that ends at the probe's point. Candidate pairs come from overlapping
    bounding boxes (grown by the radii), then the exact segment distance decides.
    """
    starts = np.concatenate([c.points[:-1] for c in conductors]) if conductors else np.zeros((0, 3))
    ends = np.concatenate([c.points[1:] for c in conductors]) if conductors else np.zeros((0, 3))
    counts = [len(c.points) - 1 for c in conductors]
    owner = np.repeat(np.arange(len(conductors)), counts)
    segment = np.concatenate([np.arange(n) for n in counts]) if conductors else np.zeros(0, int)
    radius = np.repeat([c.radius for c in conductors], counts)
    lengths = np.linalg.norm(ends - starts, axis=1)
    arc_end = np.concatenate([np.cumsum(lengths[owner == k]) for k in range(len(conductors))]) \
        if conductors else np.zeros(0)
    arc_start = arc_end - lengths
    wound = {f"aggressor:{a.name}" for a in side.aggressors if a.helix is not None}
    helical = np.array([c.kind == "coil" or c.id in wound for c in conductors], dtype=bool)
    probe = np.array([c.kind == "probe" for c in conductors], dtype=bool)
    low = np.minimum(starts, ends) - radius[:, None]
    high = np.maximum(starts, ends) + radius[:, None]
    total = len(starts)
    for first in range(0, total, _PROXIMITY_CHUNK):
        rows = np.arange(first, min(first + _PROXIMITY_CHUNK, total))
        overlap = np.arange(first, total)[None, :] > rows[:, None]
        for axis in range(3):
            overlap &= low[rows, None, axis] <= high[None, first:, axis]
            overlap &= low[None, first:, axis] <= high[rows, None, axis]
        i, j = np.nonzero(overlap)
        i, j = rows[i], j + first
        same = owner[i] == owner[j]
        gap = arc_start[j] - arc_end[i]
        near = (np.abs(segment[i] - segment[j]) <= 1) | (gap < _JOIN_REACH * (radius[i] + radius[j]))
        keep = ~(same & (near | helical[owner[i]])) & ~(~same & probe[owner[i]] & probe[owner[j]])
        i, j = i[keep], j[keep]
        tolerance = 1e-3 * np.minimum(radius[i], radius[j])
        shared = np.zeros(len(i), dtype=bool)
        for a in (starts, ends):
            for b in (starts, ends):
                shared |= np.linalg.norm(a[i] - b[j], axis=1) <= tolerance
        i, j = i[~shared], j[~shared]
        if len(i) == 0:
            continue
        distance, where = _closest_distance(starts[i], ends[i], starts[j], ends[j])
        allowed = radius[i] + radius[j]
        for k in np.nonzero(distance < allowed * (1.0 - 1e-9))[0]:
            a, b = conductors[owner[i[k]]], conductors[owner[j[k]]]
            if not (_joined_near(a, b, where[k], _JOIN_REACH * allowed[k])
                    or _probe_attachment(a, segment[i[k]], b, _JOIN_REACH * allowed[k])
                    or _probe_attachment(b, segment[j[k]], a, _JOIN_REACH * allowed[k])):
                _report_too_close(a, b, distance[k], allowed[k], where[k], side)


def _joined_near(a: Conductor, b: Conductor, where: np.ndarray, reach: float) -> bool:
    """Whether ``a`` and ``b`` share an end point within ``reach`` of ``where``."""
    for p in (a.points[0], a.points[-1]):
        for q in (b.points[0], b.points[-1]):
            if np.array_equal(p, q) and np.linalg.norm(where - p) <= reach:
                return True
    return False


def _probe_attachment(probe: Conductor, segment: int, other: Conductor, reach: float) -> bool:
    """Whether ``segment`` belongs to the piece by which ``probe`` clips onto ``other``.

    A probe's first and last segments run from the points it clips onto and may lie along
    the part clipped to (a twisted pair starts midway between its two points); the lead
    gets ``reach`` of length beyond that piece to clear the part.
    """
    if probe.kind != "probe" or probe is other:
        return False
    lengths = np.linalg.norm(np.diff(probe.points, axis=0), axis=1)
    from_plus = float(np.sum(lengths[:segment]))
    from_minus = float(np.sum(lengths[segment + 1:]))
    ends = (other.points[0], other.points[-1])
    return ((from_plus <= lengths[0] + reach and any(np.array_equal(probe.points[0], e) for e in ends))
            or (from_minus <= lengths[-1] + reach and any(np.array_equal(probe.points[-1], e) for e in ends)))


def _report_too_close(a: Conductor, b: Conductor, distance: float, allowed: float, where: np.ndarray,
                      side: SideFile) -> None:
    later = max((a, b), key=lambda c: (c.location.line, c.location.column) if c.location else (0, 0))
    place = side.describe(where)
    if a.kind == b.kind == "wire" and a.net != b.net:
        message = (f"{a.id} (net '{a.net}') touches {b.id} (net '{b.net}') near {place}: a short the "
                   f"netlist does not have")
    elif a is b:
        message = (f"{a.id} comes within {distance / side.scale:.3g} {side.units} of itself near {place}, "
                   f"closer than twice its radius ({allowed / side.scale:.3g} {side.units})")
    else:
        message = (f"{a.id} and {b.id} come within {distance / side.scale:.3g} {side.units} of each other "
                   f"near {place}, closer than their radii allow ({allowed / side.scale:.3g} {side.units}) "
                   f"without being joined there")
    raise SideFileError(later.location, message)
