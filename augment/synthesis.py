"""Synthesis: the augmented netlist, with series inductors, K couplings and probe models.

Takes the parsed netlist, the conductor graph and the lumped inductance matrix, and writes a
netlist that ngspice runs and a reviewer can read: every added line carries its conductor id,
the user's lines stay verbatim except the elements whose terminals were rewired.

How a probe reads (Romer, Am. J. Phys. 50(12), 1982): the instrument sees the potential
difference of its two points minus the EMF induced along its own leads,
``V_inst = V(plus) - V(minus) - L_p di_p/dt - sum_j M_pj dI_j/dt``. By default the probe is
coupled one way (PHYSICS.md): a high-impedance probe draws almost no current, so its leads do
not act back on the circuit. The probe loop's own self inductance stays a real inductor,
so the lead rings with the instrument's input capacitance, and the EMF is added across it
by current-controlled current sources: each carries (M_pj / L_p) I_j of a conductor's
sensed current around the inductor, which adds M_pj dI_j/dt to its voltage and nothing to
the circuit. Each source adds entries to the matrix but no unknown, which keeps ngspice fast.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from augment.conductors import ConductorGraph
from augment.errors import Location, NetlistError
from augment.inductance import InductanceMatrix, check_positive_definite, coupling_coefficients
from augment.netlist import Element, Netlist, write_netlist

# The EMF of a reading with no inductance of its own (ideal instrument, zero-area path) is
# made across an inductor of this value that carries only the EMF currents
# (M_pj / EMF_HENRY) I_j: gains of order one for nanohenry mutuals.
EMF_HENRY = 1e-9
CURRENT_CARRYING = ("wire", "body", "coil", "aggressor")
ANALYSIS_KINDS = ("tran", "ac", "dc", "op", "noise")


@dataclass(frozen=True, slots=True)
class SynthesisOptions:
    """Choices the user makes on the command line."""

    coupling: str = "one-way"  # or "full": probe loops K-coupled to everything
    kmin: float = 1e-6  # couplings below this |k| are dropped when the matrix stays definite
    analysis: str | None = None  # an analysis line that overrides netlist and side-file


@dataclass(frozen=True, slots=True)
class ProbeNodes:
    """Where one probe's readings live in the two simulations."""

    name: str
    plus_net: str  # original node of the plus point (for the ideal reading)
    minus_net: str
    # (node, reference node): the reading is V(node) - V(reference) in the augmented run
    probed: tuple[str, str]  # at the instrument input
    local: tuple[str, str]  # of the zero-area path
    instrument: object  # the side-file's Instrument
    conductor: str  # the probe loop's conductor id
    lead_length_m: float


@dataclass(frozen=True, slots=True)
class Augmented:
    """The augmented netlist and what later stages need to read its results."""

    text: str
    original_text: str  # the original netlist as simulated (same analysis, no .control)
    analysis: str
    probes: tuple[ProbeNodes, ...]
    current_vectors: Mapping[str, str]  # conductor id -> vector of its current (sense branch)
    probe_mutuals: Mapping[str, Mapping[str, float]]  # probe -> conductor id -> partial M (H)
    # probe -> conductor id -> mutual with the probe loop closed by the straight path between
    # its points (partial M of the leads minus that of the path): the loop's EMF per dI/dt
    loop_mutuals: Mapping[str, Mapping[str, float]]
    inductor_names: Mapping[str, str]  # conductor id -> the inductor that realises it
    inductors: int
    couplings: int
    notes: tuple[str, ...] = field(default_factory=tuple)


class _NameBook:
    """Hands out SPICE names that cannot collide with the user's or with each other."""

    def __init__(self, taken: Iterable[str]):
        self._taken = {name.lower() for name in taken}

    def claim(self, wanted: str) -> str:
        base = re.sub(r"[^A-Za-z0-9_]", "_", wanted)
        name, n = base, 1
        while name.lower() in self._taken:
            n += 1
            name = f"{base}_{n}"
        self._taken.add(name.lower())
        return name


def _value(x: float) -> str:
    return f"{x:.9g}"


def _inductor_name(conductor_id: str) -> str:
    kind, _, rest = conductor_id.partition(":")
    tag = {"wire": "", "body": "B_", "coil": "C_", "aggressor": "A_", "probe": "P_"}[kind]
    return "LX_" + tag + rest.replace(":", "_").replace("/", "_")


def choose_analysis(netlist: Netlist, graph: ConductorGraph, override: str | None) -> str:
    """The analysis line both simulations run: option, then side-file, then the netlist's own."""
    if override:
        line = override.strip()
        return line if line.startswith(".") else "." + line
    for kind in ("tran", "ac"):
        if kind in graph.analysis:
            return f".{kind} {graph.analysis[kind]}"
    for directive in netlist.analyses:
        if directive.kind in ("tran", "ac"):
            return f".{directive.kind} {directive.args}"
    raise NetlistError(
        Location(netlist.path, 1, 1),
        "no .tran or .ac analysis: add one to the netlist or an [analysis] table to the side-file",
    )


# Inductor rows carry L*2/h (thousands of ohms at the first, shortest time step) beside the
# +-1 of their node incidences; under Sparse's default relative pivot threshold (1e-3) those
# +-1 entries may not be pivots, and the forced choices fill the coupled block in (measured:
# 220 fill-ins instead of 164 in the ground_loop example, and a tenth of the run time). A
# lower threshold only widens the choice of pivots, and the solution stays the same to
# round-off (tests compare). It goes first so that a user's own .options pivrel, anywhere
# in the netlist or its includes, still wins: ngspice takes the last one.
PIVOT_OPTION = (
    "* added: lower relative pivot threshold, so the solver keeps the coupled inductors sparse",
    ".options pivrel=1e-5",
)


def _simulation_text(netlist: Netlist, analysis: str, added: list[str], options: Sequence[str] = ()) -> str:
    """The netlist as ngspice gets it: no .control block, our analysis on a common grid.

    ``options`` go right after the title line.
    """
    text = write_netlist(netlist.replace(added=added), keep_control=False, keep_analyses=False)
    lines = re.split(r"\r?\n", text.rstrip("\r\n"))  # not splitlines(): form feeds stay inside lines
    lines[1:1] = list(options)
    end = next((i for i in range(len(lines) - 1, 0, -1) if lines[i].strip().lower() == ".end"), len(lines))
    # no .options interp: ngspice's own time points keep every breakpoint and corner exact;
    # the compare stage brings the original run onto the augmented run's time base
    lines[end:end] = [".save all", analysis]
    return netlist.newline.join(lines) + netlist.newline  # CRLF netlists stay CRLF throughout


def _node_names(netlist: Netlist, graph: ConductorGraph, book: _NameBook) -> dict[str, str]:
    """One node per junction; the net's root keeps the user's node name; ideal joins merge."""
    parent = {jid: jid for jid in graph.junctions}

    def find(j: str) -> str:
        while parent[j] != j:
            parent[j] = parent[parent[j]]
            j = parent[j]
        return j

    roots = set(graph.net_root.values())
    for a, b in graph.ideal_joins:
        ra, rb = find(a), find(b)
        if ra != rb:
            # keep a net root as the representative so the user's name survives
            if rb in roots:
                ra, rb = rb, ra
            parent[rb] = ra
    names: dict[str, str] = {}
    root_of_net = {find(j): net for net, j in graph.net_root.items()}
    for jid in graph.junctions:
        rep = find(jid)
        if rep not in names:
            net = root_of_net.get(rep)
            names[rep] = net if net is not None else book.claim(f"{graph.junctions[rep].net}_j")
        names[jid] = names[rep]
    return names


def _rewired_elements(
    netlist: Netlist, graph: ConductorGraph, node_of: Mapping[str, str], book: _NameBook
) -> tuple[dict[str, Element], dict[str, str]]:
    """Elements whose placed terminals moved to their junction nodes; body inner nodes."""
    bodies = {c.element.lower(): c for c in graph.conductors if c.kind == "body"}
    terminals: dict[str, dict[int, str]] = {}
    for (element, index), jid in graph.terminals.items():
        terminals.setdefault(element.lower(), {})[index] = node_of[jid]
    changed: dict[str, Element] = {}
    body_inner: dict[str, str] = {}
    for key, moved in terminals.items():
        element = netlist.element(key)
        nodes = list(element.nodes)
        for index, node in moved.items():
            nodes[index - 1] = node
        if key in bodies:
            # the body inductor sits on terminal 1's side, from the junction to an inner node
            inner = book.claim(f"{element.name}_b")
            body_inner[key] = inner
            nodes[0] = inner
        if tuple(nodes) != element.nodes:
            changed[key] = replace(element, nodes=tuple(nodes), raw=None)
    return changed, body_inner


def _kept_couplings(
    ids: list[str], matrix: np.ndarray, kmin: float
) -> tuple[list[tuple[int, int, float]], bool]:
    """Pairs to couple; small ones are dropped only if the kept matrix stays definite."""
    k = coupling_coefficients(matrix)
    pairs = [(i, j, float(k[i, j])) for i in range(len(ids)) for j in range(i + 1, len(ids))]
    strong = [(i, j, kij) for i, j, kij in pairs if abs(kij) >= kmin and kij != 0.0]
    if len(strong) == len([p for p in pairs if p[2] != 0.0]):
        return strong, False
    kept = np.diag(np.diag(matrix)).astype(float)
    for i, j, _ in strong:
        kept[i, j] = kept[j, i] = matrix[i, j]
    try:
        np.linalg.cholesky(kept)
    except np.linalg.LinAlgError:
        return [p for p in pairs if p[2] != 0.0], True
    return strong, False


def synthesize(
    netlist: Netlist,
    graph: ConductorGraph,
    inductance: InductanceMatrix,
    options: SynthesisOptions = SynthesisOptions(),
    sidefile_name: str = "",
) -> Augmented:
    """Build the augmented netlist text and the map of where each reading lives.

    Parameters
    ----------
    netlist : the parsed original netlist
    graph : the conductor graph of the side-file
    inductance : lumped self and mutual inductances of every conductor (and zero-area paths)
    options : coupling mode, coupling threshold, analysis override
    sidefile_name : named in the header of the added lines
    """
    return _Synthesis(netlist, graph, inductance, options).run(sidefile_name)


class _Synthesis:
    """The added lines of one augmented netlist, written stage by stage into ``lines``."""

    def __init__(self, netlist: Netlist, graph: ConductorGraph, inductance: InductanceMatrix,
                 options: SynthesisOptions):
        self.netlist, self.graph, self.options = netlist, graph, options
        self.henry = inductance.henry
        self.inductance = inductance
        self.index = {cid: i for i, cid in enumerate(inductance.ids)}
        self.conductors = {c.id: c for c in graph.conductors}
        self.carrying = [c for c in graph.conductors if c.kind in CURRENT_CARRYING]
        self.book = _NameBook(netlist.names)
        self.node_of = _node_names(netlist, graph, self.book)
        self.changed, self.body_inner = _rewired_elements(netlist, graph, self.node_of, self.book)
        self.lines: list[str] = []
        self.notes: list[str] = []
        self.inductor_of: dict[str, str] = {}  # conductor id -> inductor name
        self.sense_of: dict[str, str] = {}  # conductor id -> its 0 V current sense
        self.probe_inductors: dict[str, str] = {}  # probe name -> loop inductor
        self.local_of: dict[tuple[str, str], tuple[str, str]] = {}  # (plus, minus) -> (probe, reading node)
        self.inductors = 0
        self.couplings = 0

    def run(self, sidefile_name: str) -> Augmented:
        analysis = choose_analysis(self.netlist, self.graph, self.options.analysis)
        removed = self.user_couplings_of_coils()
        probe_count = sum(c.kind == "probe" for c in self.graph.conductors)
        self.lines += [
            "*",
            f"* ---- added from side-file {sidefile_name or '(unnamed)'} ----",
            f"* {len(self.carrying)} current-carrying conductors, {probe_count} probe loops;",
            "* ids in the comments are the conductor ids of 'augment extract'.",
        ]
        for c in self.carrying:
            self.series_inductor(c)
        self.claim_probe_inductors()
        self.mutual_couplings()
        probes, probe_mutuals, loop_mutuals = [], {}, {}
        for setup in self.graph.probes:
            leads, path = self.mutuals_of(setup)
            probes.append(self.probe(setup, leads, path))
            probe_mutuals[setup.name] = leads
            loop_mutuals[setup.name] = {cid: leads[cid] - path[cid] for cid in leads}
        self.lines.append(
            f"* ---- end of added lines: {self.inductors} inductors, {self.couplings} couplings ----"
        )
        augmented = self.netlist.replace(changed=self.changed, removed=removed)
        return Augmented(
            text=_simulation_text(augmented, analysis, self.lines, PIVOT_OPTION if self.inductors else ()),
            original_text=_simulation_text(self.netlist, analysis, []),
            analysis=analysis.split()[0].lstrip(".").lower(),
            probes=tuple(probes),
            current_vectors={cid: f"{sense.lower()}#branch" for cid, sense in self.sense_of.items()},
            probe_mutuals=probe_mutuals,
            loop_mutuals=loop_mutuals,
            inductor_names={
                **self.inductor_of,
                **{f"probe:{name}": inductor for name, inductor in self.probe_inductors.items()},
            },
            inductors=self.inductors,
            couplings=self.couplings,
            notes=(*self.control_block_notes(), *self.notes),
        )

    def control_block_notes(self) -> list[str]:
        return [
            f"{statement.location}: .control block left out of the augmented netlist and both simulations; "
            "the tool issues the analysis itself"
            for statement in self.netlist.statements
            if getattr(statement, "kind", None) == "control"
        ]

    def user_couplings_of_coils(self) -> list[str]:
        """Keys of the user's K lines that name a coil the side-file realises (replaced)."""
        coils = {c.element.lower() for c in self.graph.conductors if c.kind == "coil"}
        removed = []
        for element in self.netlist.elements:
            if element.kind == "K" and any(f.lower() in coils for f in element.fields[:2]):
                removed.append(element.key)
                self.notes.append(
                    f"{element.location}: {element.name} couples a coil the side-file realises; "
                    "replaced by the computed couplings"
                )
        return removed

    def series_inductor(self, c) -> None:
        """One inductor for a current-carrying conductor, with a 0 V source sensing its current.

        The body of a voltage source needs none: the source carries the body's current, from
        terminal 1 into it, which is the direction of ngspice's branch current.
        """
        book, henry_self = self.book, self.henry[self.index[c.id], self.index[c.id]]
        self.inductors += 1
        if c.kind == "coil":
            self.coil_element(c, henry_self)
            return
        name = book.claim(_inductor_name(c.id))
        sense = None
        if c.kind == "wire":
            start, end = self.node_of[c.start], self.node_of[c.end]
        elif c.kind == "body":
            start, end = self.node_of[c.start], self.body_inner[c.element.lower()]
            element = self.netlist.element(c.element)
            sense = element.name if element.kind == "V" else None
        else:  # aggressor: an imposed current through its own inductor
            aggressor = next(a for a in self.graph.aggressors if a.conductor == c.id)
            start, end = book.claim(f"agg_{aggressor.name}"), "0"
            self.lines.append(
                f"{book.claim('IX_A_' + aggressor.name)} 0 {start} {aggressor.current} $ {c.id} imposed current"
            )
        if sense is None:
            sense, mid = book.claim("VX_S" + name[2:]), book.claim(name + "_s")
            self.lines.append(f"{sense} {start} {mid} 0 $ {c.id} current sense")
            start = mid
        self.lines.append(f"{name} {start} {end} {_value(henry_self)} $ {c.id} partial L, {c.length_m * 1e3:.4g} mm")
        self.inductor_of[c.id], self.sense_of[c.id] = name, sense

    def coil_element(self, c, henry_self: float) -> None:
        """The netlist inductor a [[coil]] realises takes the computed value."""
        element = self.netlist.element(c.element)
        base = self.changed.get(element.key, element)
        sense_node = self.book.claim(f"{element.name}_s")
        sense = self.book.claim(f"VX_S_{element.name}")
        self.changed[element.key] = replace(
            base, nodes=(sense_node, *base.nodes[1:]), value=_value(henry_self), fields=(_value(henry_self),), raw=None
        )
        self.lines.append(f"{sense} {base.nodes[0]} {sense_node} 0 $ {c.id} current sense")
        self.inductor_of[c.id], self.sense_of[c.id] = element.name, sense
        stated = self.netlist.value_of(element.name)
        if stated and abs(henry_self - stated) > 0.1 * stated:
            self.notes.append(
                f"{element.location}: {element.name} is {stated:.4g} H in the netlist but its "
                f"[[coil]] geometry gives {henry_self:.4g} H; the computed value is used"
            )

    def claim_probe_inductors(self) -> None:
        for setup in self.graph.probes:
            if math.isinf(setup.instrument.resistance) and setup.instrument.capacitance == 0:
                continue  # an ideal instrument draws no current: its own inductance does nothing
            self.probe_inductors[setup.name] = self.book.claim(_inductor_name(setup.conductor))

    def mutual_couplings(self) -> None:
        """K lines among current-carrying conductors (and probe loops when coupled fully)."""
        coupled = [c.id for c in self.carrying]
        if self.options.coupling == "full":
            coupled += [f"probe:{name}" for name in self.probe_inductors]
        if len(coupled) < 2:
            return
        rows = [self.index[cid] for cid in coupled]
        sub = np.asarray(self.henry, dtype=float)[np.ix_(rows, rows)]
        check_positive_definite(sub, coupled)
        kept, forced = _kept_couplings(coupled, sub, self.options.kmin)
        if forced:
            self.notes.append(
                f"couplings below |k| = {self.options.kmin:g} kept: dropping them would leave the "
                "inductance matrix indefinite, which ngspice refuses"
            )
        if kept:
            self.lines.append("* mutual couplings (coefficient of coupling from the lumped partial inductances)")
        names = {**self.inductor_of, **{f"probe:{n}": i for n, i in self.probe_inductors.items()}}
        for n, (i, j, kij) in enumerate(kept, start=1):
            a, b = coupled[i], coupled[j]
            self.lines.append(f"{self.book.claim(f'KX_{n}')} {names[a]} {names[b]} {kij:.9g} $ {a} ~ {b}")
        self.couplings = len(kept)

    def emf_across(self, inductor: str, start: str, end: str, henry: float, mutuals: Mapping[str, float],
                   cid: str) -> None:
        """Current sources across ``inductor`` (``start`` to ``end``) adding sum_j M_j dI_j/dt.

        Each source takes (M_j / henry) I_j from ``end`` back to ``start``, so the inductor
        carries that current too: V(start) - V(end) = henry di/dt + sum_j M_j dI_j/dt, where
        i is what the rest of the circuit sends through the pair. The source currents close
        inside the pair, so nothing else sees them: the coupling stays one way.
        """
        for j, m in mutuals.items():
            if m != 0.0:
                self.lines.append(
                    f"{self.book.claim(f'FX_{inductor[3:]}')} {end} {start} {self.sense_of[j]} "
                    f"{_value(m / henry)} $ {cid} <- {j}"
                )

    def emf_reading(self, label: str, plus: str, mutuals: Mapping[str, float], cid: str) -> str:
        """A node at V(plus) - sum_j M_j dI_j/dt that draws no current; ``plus`` when every M is 0.

        The node hangs on an EMF_HENRY inductor from ``plus`` and nothing else, so the
        inductor carries only the currents of :meth:`emf_across`.
        """
        if not any(m != 0.0 for m in mutuals.values()):
            return plus
        node = self.book.claim(f"r_{label}")
        inductor = self.book.claim(f"LX_S_{label}")
        self.lines.append(f"{inductor} {plus} {node} {_value(EMF_HENRY)} $ {cid} carries only the EMF currents")
        self.inductors += 1
        self.emf_across(inductor, plus, node, EMF_HENRY, mutuals, cid)
        return node

    def mutuals_of(self, setup) -> tuple[dict[str, float], dict[str, float]]:
        """Partial mutuals of a probe's leads, and of its straight zero-area path, with each
        current-carrying conductor."""
        leads = self.henry[self.index[setup.conductor]]
        path = self.inductance.reference_mutual[self.inductance.reference_ids.index(f"local:{setup.name}")]
        return (
            {c.id: float(leads[self.index[c.id]]) for c in self.carrying},
            {c.id: float(path[self.index[c.id]]) for c in self.carrying},
        )

    def probe(self, setup, mutuals: Mapping[str, float], local_mutuals: Mapping[str, float]) -> ProbeNodes:
        """Zero-area reference, lead loop, EMF and instrument model of one probe."""
        book, c, instrument = self.book, self.conductors[setup.conductor], setup.instrument
        plus, minus = self.node_of[setup.plus], self.node_of[setup.minus]
        p = self.index[c.id]
        name = setup.name
        self.lines.append(f"* probe {name} ({c.id}): instrument {instrument.name}, {c.length_m * 1e3:.4g} mm of lead")
        # probes on the same two points share one zero-area reading: the straight path is the same
        points = (setup.plus, setup.minus)
        if points in self.local_of:
            first, node = self.local_of[points]
            self.lines.append(f"* local:{name} is local:{first}, the same straight path")
        else:
            node = self.emf_reading(f"{name}_local", plus, local_mutuals, f"local:{name}")
            self.local_of[points] = (name, node)
        local = (node, minus)
        if name not in self.probe_inductors:
            # ideal instrument: an open circuit, read as node voltages
            tip = self.emf_reading(f"{name}_leads", plus, mutuals, c.id)
        else:
            tip = book.claim(f"p_{name}")
            inductor = self.probe_inductors[name]
            self.lines.append(f"{inductor} {plus} {tip} {_value(self.henry[p, p])} $ {c.id} loop self inductance")
            self.inductors += 1
            if self.options.coupling != "full":  # with full coupling the K lines carry the EMF
                self.emf_across(inductor, plus, tip, self.henry[p, p], mutuals, c.id)
            self.lines.extend(_instrument_lines(name, instrument, tip, minus, book, c.id))
        probed = (tip, minus)
        if instrument.bandwidth:
            # single-pole limit of the instrument, after the tip, buffered so it loads nothing
            across, probed_node = book.claim(f"x_{name}_tip"), book.claim(f"r_{name}_probed")
            cap = 1.0 / (2 * math.pi * 1e3 * instrument.bandwidth)
            self.lines.append(f"{book.claim('EX_W_' + name)} {across} 0 {tip} {minus} 1 $ {c.id} reading at the tip")
            self.lines.append(f"{book.claim('RX_W_' + name)} {across} {probed_node} 1k $ {c.id} bandwidth {instrument.bandwidth:g} Hz")
            self.lines.append(f"{book.claim('CX_W_' + name)} {probed_node} 0 {_value(cap)} $ {c.id}")
            probed = (probed_node, "0")
        return ProbeNodes(
            name=name,
            plus_net=self.graph.junctions[setup.plus].net,
            minus_net=self.graph.junctions[setup.minus].net,
            probed=probed,
            local=local,
            instrument=instrument,
            conductor=c.id,
            lead_length_m=c.length_m,
        )


def _instrument_lines(name: str, instrument, tip: str, minus: str, book: _NameBook, cid: str) -> list[str]:
    """Input model of the instrument between its tip node and the minus lead's end."""
    lines = []
    if math.isfinite(instrument.resistance):
        lines.append(f"{book.claim('RX_I_' + name)} {tip} {minus} {_value(instrument.resistance)} $ {cid} input resistance")
    if instrument.capacitance:
        lines.append(f"{book.claim('CX_I_' + name)} {tip} {minus} {_value(instrument.capacitance)} $ {cid} input capacitance")
    if instrument.differential and instrument.reference_resistance:
        for side, node in (("P", tip), ("M", minus)):
            if node != "0":
                lines.append(
                    f"{book.claim(f'RX_{side}_{name}')} {node} 0 {_value(instrument.reference_resistance)} "
                    f"$ {cid} input to instrument reference"
                )
    return lines
