"""Parse stage: SPICE3 / ngspice netlists into frozen dataclasses, and back to text.

The grammar is ``grammar/spice.lark`` (LALR). Reading a file goes in three steps:

1. ``_split`` cuts the text into statements: the title, comment and blank lines, verbatim
   ``.control`` blocks, and code statements with their ``+`` continuation lines joined. Every
   piece keeps its original line and column, so an error points into the user's file.
2. The code statements, one per line, go through the LALR parser in one call; its inline
   transformer (``_Statements``) applies ngspice's node counts per element letter. Bare
   ``NAME WORD*`` element lines, the bulk of a big netlist, are matched with the grammar's
   own terminal patterns and handed to the same transformer method without the parser.
3. ``_Builder`` walks the statements in order and assembles subcircuits, ``.param`` values,
   includes and libraries into a ``Netlist``.

The writer gives untouched statements back verbatim and changed ones in canonical form, so
an unmodified netlist round-trips to text that ngspice simulates identically.
"""

from __future__ import annotations

import ast
import gc
import math
import operator
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from types import MappingProxyType

from augment.errors import Location, NetlistError
from augment.units import spice_number

# augment/grammar links to the top-level grammar/ folder, so wheels ship it too
GRAMMAR_DIR = Path(__file__).parent / "grammar"

GROUND_ALIASES = frozenset({"0", "gnd"})

ANALYSES = frozenset({"tran", "ac", "dc", "op", "noise"})

# Fixed node counts per element letter (ngspice User's Manual, chapters 3 to 8 and 12).
# E, G, Q and X are decided per line in _split_nodes; letters not listed are generic.
NODE_COUNTS = {
    "R": 2, "C": 2, "L": 2, "V": 2, "I": 2, "F": 2, "H": 2, "B": 2, "D": 2,
    "J": 3, "Z": 3, "M": 4, "S": 4, "W": 2, "T": 4, "O": 4, "K": 0,
}

# E and G with these keywords after the two output nodes have no controlling nodes.
_BEHAVIOURAL_KEYWORDS = frozenset({"poly", "value", "table", "laplace", "freq", "vol", "cur"})

_DEVICE_FLAGS = frozenset({"off", "area", "temp", "dtemp", "ic"})

_VALUE_KINDS = frozenset({"R", "C", "L"})

# Each nested include is a few Python frames deep; real netlists nest a handful of levels.
_MAX_INCLUDE_DEPTH = 64

_COMMENT_START = re.compile(r";|(?:^|(?<=[ \t]))\$")
_NUMBERISH = re.compile(r"^[+-]?(?:\d|\.\d)")


@dataclass(frozen=True, slots=True)
class Element:
    """One element line: its letter, nodes and the fields that follow them.

    ``nodes`` are lower-cased with the ground alias ``gnd`` written ``0``; ``value`` is the
    value field of R, L and C and the coupling of K; ``raw`` is the statement as written
    (continuation lines included), ``None`` once the element has been changed.
    """

    name: str
    kind: str
    nodes: tuple[str, ...]
    value: str | None
    fields: tuple[str, ...]
    location: Location
    raw: str | None = None
    comment: str = ""  # the statement's inline comments ("$ ..." or "; ..."), kept when it changes

    @property
    def key(self) -> str:
        """The element's case-insensitive name."""
        return self.name.lower()

    @property
    def written_name(self) -> str:
        """The name as ngspice must read it: hierarchical names keep their letter first."""
        if self.name[:1].upper() == self.kind:
            return self.name
        return f"{self.kind}.{self.name}"

    @property
    def params(self) -> Mapping[str, str]:
        """The ``name=value`` fields (instance parameters, ``ic=``, ``w=``), names lower-cased."""
        pairs = (f.partition("=") for f in self.fields if "=" in f)
        return MappingProxyType({key.strip().lower(): value.strip() for key, _, value in pairs})

    def canonical(self) -> str:
        """The element as one canonical line: name, nodes, fields, then its inline comments."""
        return " ".join((self.written_name, *self.nodes, *self.fields, *filter(None, [self.comment])))


@dataclass(frozen=True, slots=True)
class Directive:
    """A dot statement; ``kind`` is the lower-cased keyword without its dot.

    ``args`` is the rest of the statement (continuations joined); for ``control`` it is the
    whole block between ``.control`` and ``.endc``, verbatim.
    """

    kind: str
    args: str
    location: Location
    raw: str | None = None


@dataclass(frozen=True, slots=True)
class Comment:
    """A comment or blank line, or text after ``.end``; written back as it was."""

    text: str
    location: Location


@dataclass(frozen=True, slots=True)
class Subcircuit:
    """A ``.subckt`` definition: ports, default parameters and its own statements."""

    name: str
    ports: tuple[str, ...]
    params: Mapping[str, str]
    statements: tuple
    location: Location
    header: Directive
    footer: Directive | None

    @property
    def elements(self) -> tuple[Element, ...]:
        """Elements defined directly in this subcircuit, in order."""
        return tuple(s for s in self.statements if isinstance(s, Element))


@dataclass(frozen=True, slots=True)
class Netlist:
    """A parsed netlist: its statements in order plus the indexes the later stages need."""

    path: str
    title: str
    statements: tuple
    subcircuits: Mapping[str, Subcircuit]
    params: Mapping[str, str]
    title_raw: str | None = None
    models: frozenset[str] = frozenset()
    newline: str = "\n"
    # every file read through .include and .lib, nested ones too (resolved paths)
    included_files: tuple[Path, ...] = ()
    # lower-cased name -> location of the elements at the top level of those files
    included_elements: Mapping[str, Location] = field(default_factory=dict)
    _index: Mapping[str, Element] = field(default_factory=dict, init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "_index", {e.key: e for e in self.elements})

    @property
    def elements(self) -> tuple[Element, ...]:
        """Top-level elements, in netlist order."""
        return tuple(s for s in self.statements if isinstance(s, Element))

    def element(self, name: str) -> Element:
        """The element called ``name`` (any case); ``X1.R3`` resolves inside instance X1."""
        key = name.lower()
        found = self._index.get(key)
        if found is None and key[1:2] == ".":
            found = self._index.get(key[2:])
        if found is not None:
            return found
        if "." in key:
            instance = key.rsplit(".", 1)[0]
            for element in self._expand(self.element(instance)):
                if element.key == key:
                    return element
        raise KeyError(name)

    @property
    def nets(self) -> Mapping[str, tuple[tuple[str, int], ...]]:
        """Node -> ((element name, 1-based terminal index), ...) for top-level elements."""
        nets: dict[str, list[tuple[str, int]]] = {}
        for element in self.elements:
            for index, node in enumerate(element.nodes, start=1):
                nets.setdefault(node, []).append((element.name, index))
        return MappingProxyType({node: tuple(t) for node, t in nets.items()})

    @property
    def analyses(self) -> tuple[Directive, ...]:
        """The top-level ``.tran .ac .dc .op .noise`` directives."""
        return tuple(s for s in self.statements if isinstance(s, Directive) and s.kind in ANALYSES)

    @property
    def names(self) -> frozenset[str]:
        """Every lower-cased element and node name, top level and inside subcircuits."""
        names = set()
        blocks = [self.elements, *(sub.elements for sub in self.subcircuits.values())]
        for elements in blocks:
            for element in elements:
                names.add(element.key)
                names.update(element.nodes)
        return frozenset(names)

    def value_of(self, name: str) -> float | None:
        """Numeric value of an R, L or C element with ``.param`` expressions evaluated.

        Returns None for other elements or when the value is not a number (a model name).
        Inside a subcircuit instance the subcircuit's defaults and the instance's own
        parameters apply, as in ngspice.
        """
        element = self.element(name)
        if element.kind not in _VALUE_KINDS or element.value is None:
            return None
        scope = dict(self.params)
        if "." in element.key and element.key not in self._index:
            scope.update(self._instance_scope(element.key.rsplit(".", 1)[0]))
        try:
            return evaluate(element.value, scope)
        except ValueError:
            return None

    def replace(
        self,
        changed: Mapping[str, Element] = MappingProxyType({}),
        removed: Iterable[str] = (),
        added: Sequence[str] = (),
    ) -> Netlist:
        """A copy with elements changed (by key), removed (by key) and raw lines added.

        Added lines are parsed (so their elements can be looked up) and placed after the last
        top-level statement, before ``.end``.
        """
        changed = {k.lower(): v for k, v in changed.items()}
        removed = {k.lower() for k in removed}
        missing = (set(changed) | removed) - set(self._index)
        if missing:
            raise KeyError(", ".join(sorted(missing)))
        statements = []
        for statement in self.statements:
            if isinstance(statement, Element):
                if statement.key in removed:
                    continue
                statement = changed.get(statement.key, statement)
            statements.append(statement)
        if added:
            extra = _parse_text("\n".join(added), "<added>", Path("."), has_title=False, stack=())
            end = _end_position(statements)
            statements[end:end] = extra.statements
        return Netlist(self.path, self.title, tuple(statements), self.subcircuits, self.params,
                       self.title_raw, self.models, self.newline, self.included_files, self.included_elements)

    def flatten(self, instance: str) -> Netlist:
        """A copy with subcircuit instance ``instance`` expanded into top-level elements.

        The new elements are named ``X1.R3`` (written ``R.X1.R3``, ngspice's own flattened
        name), internal nodes become ``x1.node``; nested instances stay instances, named
        ``X1.X2``, and can be flattened in turn.
        """
        target = self.element(instance)
        if target.kind != "X":
            raise KeyError(f"{instance} is not a subcircuit instance")
        if target.key not in self._index:
            # A nested instance (Xf.X1): its parent is expanded first.
            return self.flatten(target.key.rsplit(".", 1)[0]).flatten(instance)
        note = f"* {target.name} flattened: {target.raw or target.canonical()}".replace("\n", " ")
        statements = []
        for statement in self.statements:
            if statement is target:
                statements.append(Comment(note, target.location))
                statements.extend(self._local_models(target))
                statements.extend(self._expand(target))
            else:
                statements.append(statement)
        return Netlist(self.path, self.title, tuple(statements), self.subcircuits, self.params,
                       self.title_raw, self.models, self.newline, self.included_files, self.included_elements)

    def _local_models(self, instance: Element) -> list[Directive]:
        """The subcircuit's own .model lines, renamed ``x1.name`` for the flattened elements."""
        sub = self.subcircuits[instance.fields[0].lower()]
        models = []
        for statement in sub.statements:
            if isinstance(statement, Directive) and statement.kind == "model":
                name, rest = (statement.args.split(None, 1) + [""])[:2]
                models.append(Directive("model", f"{instance.key}.{name.lower()} {rest}".rstrip(),
                                        statement.location, None))
        return models

    def _instance_scope(self, path: str) -> dict[str, str]:
        """Parameters seen inside instance ``path`` (``x1`` or ``x1.x2``) as expressions."""
        instance = self.element(path)
        sub = self.subcircuits[instance.fields[0].lower()]
        outer = dict(self.params)
        if "." in path and path not in self._index:
            outer.update(self._instance_scope(path.rsplit(".", 1)[0]))
        scope = dict(sub.params)
        for text in instance.fields[1:]:
            if "=" in text:
                key, _, expr = text.partition("=")
                scope[key.strip().lower()] = _number_text(expr.strip(), outer)
        for key, expr in list(scope.items()):
            scope[key] = _number_text(expr, {**outer, **scope})
        for statement in sub.statements:
            if isinstance(statement, Directive) and statement.kind == "param":
                for key, expr in _assignments(statement.args):
                    scope[key] = _number_text(expr, {**outer, **scope})
        return scope

    def _expand(self, instance: Element) -> list[Element]:
        """Elements of subcircuit instance ``instance`` with hierarchical names and nodes."""
        sub = self.subcircuits.get(instance.fields[0].lower())
        if sub is None:
            raise KeyError(instance.fields[0])
        prefix = instance.key
        mapping = dict(zip(sub.ports, instance.nodes))
        scope = {**self.params, **self._instance_scope(prefix)}
        local_models = {
            s.args.split(None, 1)[0].lower()
            for s in sub.statements if isinstance(s, Directive) and s.kind == "model" and s.args
        }

        shared = self.globals | {"0"}

        def node(name: str) -> str:
            if name in mapping:
                return mapping[name]
            if name in shared:
                return name
            return f"{prefix}.{name}"

        def written(inner: str) -> str:
            return Element(f"{instance.name}.{inner}", inner[:1].upper(), (), None, (), instance.location).written_name

        out = []
        for element in sub.elements:
            fields = element.fields
            value = element.value
            if element.kind in _VALUE_KINDS and value is not None and value[:1] in "{'":
                value = _number_text(value, scope)
                fields = (value, *fields[1:])
            elif element.kind == "K":
                fields = (written(fields[0]), written(fields[1]), *fields[2:])
            elif element.kind in "FH" and fields and not fields[0].lower().startswith("poly"):
                fields = (written(fields[0]), *fields[1:])
            elif element.kind == "X":
                # The parent's parameters will not exist once it is flattened: use numbers.
                fields = tuple(_assignment_number(f, scope) for f in fields)
            if local_models:
                fields = tuple(f"{prefix}.{f.lower()}" if f.lower() in local_models else f for f in fields)
            out.append(Element(
                f"{instance.name}.{element.name}", element.kind,
                tuple(node(n) for n in element.nodes), value, fields, element.location, None,
            ))
        return out

    @property
    def globals(self) -> frozenset[str]:
        """Nodes declared with ``.global``, lower-cased."""
        return frozenset(
            _node(n)
            for s in self.statements
            if isinstance(s, Directive) and s.kind == "global"
            for n in s.args.split()
        )


def parse_netlist(path: str | Path) -> Netlist:
    """Read and parse the netlist file at ``path``; includes resolve relative to it."""
    path = Path(path)
    text = _read(path, Location(str(path), 1, 1), "netlist")
    return _parse_text(text, str(path), path.parent, has_title=True, stack=(path.resolve(),))


def parse_netlist_text(text: str, filename: str = "<netlist>", base_dir: str | Path = ".") -> Netlist:
    """Parse netlist ``text``; ``filename`` names it in errors, includes resolve in ``base_dir``."""
    return _parse_text(text, filename, Path(base_dir), has_title=True, stack=())


def write_netlist(netlist: Netlist, *, keep_control: bool = True, keep_analyses: bool = True) -> str:
    """Netlist text: untouched statements verbatim, changed ones canonical.

    ``keep_control=False`` drops ``.control ... .endc`` blocks; ``keep_analyses=False`` drops
    the ``.tran .ac .dc .op .noise`` lines so that the caller can add its own.
    """
    lines = [netlist.title_raw if netlist.title_raw is not None else netlist.title]
    _write_statements(netlist.statements, lines, keep_control, keep_analyses)
    text = "\n".join(lines) + "\n"
    # Raw statements hold their continuation lines joined with "\n".
    return text if netlist.newline == "\n" else text.replace("\n", netlist.newline)


def evaluate(expression: str, params: Mapping[str, str]) -> float:
    """Value of a SPICE number or ``{expr}`` / ``'expr'`` with ``.param`` names resolved.

    Arithmetic ``+ - * / ** ^``, parentheses and the functions in ``_FUNCTIONS``; raises
    ValueError for anything else or for a name that is not a parameter.
    """
    return _evaluate(expression, {k.lower(): v for k, v in params.items()}, ())


# ---------------------------------------------------------------------------------------
# Reading: statements with their source positions


@dataclass(frozen=True, slots=True)
class _Code:
    """A code statement: joined text, and where each joined piece came from."""

    text: str
    pieces: tuple[tuple[int, int, int], ...]  # (offset in text, line, column) per piece
    raw: str
    filename: str

    def location(self, offset: int) -> Location:
        """Original file position of character ``offset`` of the joined text."""
        start, line, column = self.pieces[0]
        for piece in self.pieces:
            if piece[0] > offset:
                break
            start, line, column = piece
        return Location(self.filename, line, column + offset - start)


def _inline_comments(raw: str) -> str:
    """The inline comments of a statement's lines, in order, on one line."""
    found = []
    for line in raw.split("\n"):
        match = _COMMENT_START.search(line) if ";" in line or "$" in line else None
        if match is not None and not line.lstrip().startswith("*"):
            found.append(line[match.start():].strip())
    return " ".join(found)


def _strip_comment(line: str) -> str:
    if ";" not in line and "$" not in line:
        return line
    match = _COMMENT_START.search(line)
    return line if match is None else line[:match.start()]


def _split(text: str, filename: str, has_title: bool):
    """Cut text into title, statements (``_Code``, ``Directive`` control blocks, ``Comment``)."""
    lines = text.split("\n")
    lines = [line[:-1] if line.endswith("\r") else line for line in lines]
    if lines and lines[-1] == "":
        lines.pop()
    title = None
    first = 0
    if has_title:
        title = lines[0] if lines else ""
        first = 1
    out: list = []
    pending: list = []  # comment lines that may sit inside a continued statement
    n = len(lines)
    i = first
    while i < n:
        line = lines[i]
        stripped = line.lstrip()
        lineno = i + 1
        if stripped.startswith("+"):
            if not (out and isinstance(out[-1], _Code)):
                raise NetlistError(Location(filename, lineno, len(line) - len(stripped) + 1),
                                   "continuation line '+' with no statement before it")
            code = out[-1]
            body = _strip_comment(line)
            after = len(line) - len(stripped) + 1
            column = after + 1 + len(body[after:]) - len(body[after:].lstrip())
            joined = code.text + " "
            raw = "\n".join([code.raw, *(c.text for c in pending), line])
            out[-1] = _Code(joined + body[column - 1:], (*code.pieces, (len(joined), lineno, column)), raw, filename)
            pending.clear()
            i += 1
            continue
        out.extend(pending)
        pending.clear()
        if not stripped or stripped.startswith("*"):
            (pending if out and isinstance(out[-1], _Code) else out).append(Comment(line, Location(filename, lineno, 1)))
            i += 1
            continue
        dot = stripped.startswith(".")
        if dot and _keyword(stripped) == ".control":
            j = i + 1
            while j < n and _keyword(lines[j].strip()) != ".endc":
                j += 1
            if j == n:
                raise NetlistError(Location(filename, lineno, 1), "unterminated .control block: no .endc")
            raw = "\n".join(lines[i:j + 1])
            out.append(Directive("control", "\n".join(lines[i + 1:j]), Location(filename, lineno, 1), raw))
            i = j + 1
            continue
        body = _strip_comment(line)
        if not body.strip():
            out.append(Comment(line, Location(filename, lineno, 1)))
            i += 1
            continue
        out.append(_Code(body, ((0, lineno, 1),), line, filename))
        if dot and _keyword(stripped) == ".end":
            out.extend(pending)
            pending.clear()
            out.extend(Comment(rest, Location(filename, k + 1, 1)) for k, rest in enumerate(lines[i + 1:], start=i + 1))
            break
        i += 1
    out.extend(pending)
    return title, out


def _keyword(stripped: str) -> str:
    return stripped.split(None, 1)[0].lower() if stripped else ""


# ---------------------------------------------------------------------------------------
# The grammar and its inline transformer


class _FieldError(Exception):
    """Raised inside the transformer; carries the token it is about (mapped to a Location)."""

    def __init__(self, token, message: str):
        super().__init__(message)
        self.token = token
        self.message = message


def _statements_transformer():
    from lark import Token, Transformer

    class _Statements(Transformer):
        """One method per statement rule; element lines get ngspice's node counts here."""

        def start(self, children):
            return children

        def element(self, children):
            name, *fields = children
            kind = name[0].upper()
            if name[1:2] == "." and len(name) > 2:
                # ngspice's flattened form R.X1.R3 is the element X1.R3 of kind R; a lark
                # token keeps its position, for errors about the element.
                name = Token.new_borrow_pos(name.type, name[2:], name) if isinstance(name, Token) else name[2:]
            nodes, rest = _split_nodes(name, kind, fields)
            value = None
            if kind in _VALUE_KINDS:
                value = _check_value(name, rest)
            elif kind == "K":
                if len(rest) < 3:
                    raise _FieldError(name, f"coupling {name} needs two inductor names and a coupling factor")
                value = str(rest[2])
                _check_coupling(name, rest[2])
            return ("element", name, kind, tuple(_node(n) for n in nodes), value, tuple(map(str, rest)))

        def subckt(self, children):
            return ("subckt", *children)

        def ends(self, children):
            return ("ends", *children)

        def param(self, children):
            return ("param", *children)

        def include(self, children):
            return ("include", *children)

        def lib(self, children):
            return ("lib", *children)

        def end(self, children):
            return ("end", *children)

        def directive(self, children):
            return ("directive", *children)

        def call(self, children):
            head, *args = children
            return Token.new_borrow_pos("CALL", f"{head}({_join_args(args)})", head)

        def group(self, children):
            return Token("GROUP", f"({_join_args(children)})")

        def assign(self, children):
            key, value = children
            return Token.new_borrow_pos("ASSIGN", f"{key}={value}", key)

    return _Statements()


@lru_cache(maxsize=1)
def _parser():
    """The LALR parser for ``grammar/spice.lark``, built once on first use."""
    from lark import Lark

    return Lark.open(
        "spice.lark", rel_to=str(GRAMMAR_DIR / "spice.lark"), parser="lalr",
        lexer="contextual", transformer=_statements_transformer(),
    )


def _join_args(args) -> str:
    text = " ".join(map(str, args))
    return text.replace(" , ", ", ")


def _node(name: str) -> str:
    lower = name.lower()
    return "0" if lower in GROUND_ALIASES else lower


def _is_plain(token) -> bool:
    return getattr(token, "type", "WORD") == "WORD"


def _split_nodes(name, kind: str, fields: list):
    """Nodes and remaining fields of an element line, by ngspice's rules for its letter."""
    if kind == "X":
        count = 0
        while count < len(fields) and _is_plain(fields[count]) and fields[count].lower() != "params:":
            count += 1
        if count < 1:
            raise _FieldError(name, f"subcircuit instance {name} needs a subcircuit name")
        count -= 1
    elif kind in "EG":
        head = fields[2] if len(fields) > 2 else None
        behavioural = head is not None and (
            not _is_plain(head) or head.lower() in _BEHAVIOURAL_KEYWORDS or head.lower().startswith("poly")
        )
        count = 2 if behavioural else 4
    elif kind == "Q":
        # Q c b e [s] model [area]: a fifth plain field that is not a number or a flag is the
        # model, so the fourth is the substrate node.
        fifth = fields[4] if len(fields) > 4 else None
        substrate = (
            fifth is not None and all(_is_plain(f) for f in fields[:5])
            and not _NUMBERISH.match(fifth) and fifth.lower() not in _DEVICE_FLAGS
        )
        count = 4 if substrate else 3
    elif kind in NODE_COUNTS:
        count = NODE_COUNTS[kind]
    else:
        count = 0
        while count < len(fields) - 1 and _is_plain(fields[count]):
            count += 1
    nodes = fields[:count]
    if len(nodes) < count or any(not _is_plain(n) for n in nodes):
        found = sum(1 for n in nodes if _is_plain(n))
        plural = "node" if count == 1 else "nodes"
        raise _FieldError(name, f"element {name} needs {count} {plural}, found {min(found, len(nodes))}")
    return nodes, fields[count:]


def _check_value(name, rest) -> str | None:
    """The value field of R, L or C; a bad number is reported at its own column."""
    if not rest:
        raise _FieldError(name, f"element {name} has no value")
    value = rest[0]
    if _is_plain(value) and _NUMBERISH.match(value):
        try:
            spice_number(value)
        except ValueError:
            raise _FieldError(value, f"bad number '{value}' for element {name}") from None
    return str(value)


def _check_coupling(name, factor) -> None:
    """A literal coupling factor must be a number with |k| < 1 (k = 1 makes the matrix singular)."""
    if not (_is_plain(factor) and _NUMBERISH.match(factor)):
        return
    try:
        k = spice_number(factor)
    except ValueError:
        raise _FieldError(factor, f"bad coupling factor '{factor}' for {name}") from None
    if not abs(k) < 1.0:
        raise _FieldError(factor, f"coupling factor of {name} is {factor}: |k| must be below 1 "
                                  f"(|k| = 1 is a perfect coupling, a singular inductance matrix)")


def _parse_code(codes: list[_Code]) -> list:
    """Parsed form of each code statement, in order; lark errors become NetlistErrors.

    A statement that is a bare ``element: NAME (WORD | EXPR | QUOTED)*`` line, tested with
    the grammar's own terminal patterns, is cut into those tokens with the same patterns and
    handed to the transformer's ``element`` method directly: the LALR parser would produce
    the same tokens, and going around it is what makes 100k-element netlists fast. Everything
    else goes through lark in one call; so does a fast-path line whose element is malformed,
    to get its exact column.
    """
    plain, tokens = _fast_path()
    transformer = _parser().options.transformer
    results: list = [None] * len(codes)
    slow: list[int] = []
    for index, code in enumerate(codes):
        text = code.text
        if plain(text):
            try:
                results[index] = transformer.element(tokens(text) if "{" in text or "'" in text else text.split())
                continue
            except _FieldError:
                pass
        slow.append(index)
    if slow:
        for index, result in zip(slow, _parse_with_lark([codes[i] for i in slow])):
            results[index] = result
    return results


@lru_cache(maxsize=1)
def _fast_path():
    """Full-match test for a bare element line, and its tokenizer, from the grammar's terminals."""
    from lark import Token

    parser = _parser()
    pattern = {name: parser.get_terminal(name).pattern.to_regexp() for name in ("NAME", "WORD", "EXPR", "QUOTED")}
    field_pattern = f"{pattern['WORD']}|{pattern['EXPR']}|{pattern['QUOTED']}"
    line = re.compile(rf"[ \t]*{pattern['NAME']}(?:[ \t]+(?:{field_pattern}))*[ \t]*")
    token = re.compile(f"(?P<WORD>{pattern['WORD']})|(?P<EXPR>{pattern['EXPR']})|(?P<QUOTED>{pattern['QUOTED']})")

    def tokens(text: str) -> list:
        found = []
        for match in token.finditer(text):
            kind = match.lastgroup
            found.append(match.group() if kind == "WORD" else Token(kind, match.group()))
        return found

    return line.fullmatch, tokens


def _parse_with_lark(codes: list[_Code]) -> list:
    from lark.exceptions import UnexpectedEOF, UnexpectedInput

    source = "\n".join(c.text for c in codes) + "\n"
    try:
        return _parser().parse(source)
    except _FieldError as error:
        # The inline transformer runs inside the parser, so its exceptions arrive unwrapped
        # (no VisitError, which only Transformer.transform raises).
        raise NetlistError(_token_location(codes, error.token), error.message) from None
    except UnexpectedInput as error:
        line = getattr(error, "line", 0)
        column = getattr(error, "column", 0)
        if isinstance(error, UnexpectedEOF) or line < 1:
            line, column = len(codes), len(codes[-1].text) + 1
        code = codes[line - 1]
        raise NetlistError(code.location(column - 1), _describe(error, code, column)) from None


def _describe(error, code: _Code, column: int) -> str:
    """A designer's wording of a lark syntax error."""
    from lark.exceptions import UnexpectedCharacters, UnexpectedToken

    char = code.text[column - 1] if 0 < column <= len(code.text) else ""
    if isinstance(error, UnexpectedCharacters):
        if char == "{":
            return "unterminated '{' expression"
        if char == "'":
            return "unterminated quoted expression"
        if char == '"':
            return "unterminated string"
        if column == len(code.text) - len(code.text.lstrip()) + 1:
            return f"a statement must start with an element name or a dot keyword, not {_shown(char)}"
        return f"unexpected {_shown(char)}"
    if isinstance(error, UnexpectedToken):
        token = error.token
        if column == len(code.text) - len(code.text.lstrip()) + 1:
            return f"a statement must start with an element name or a dot keyword, not {_shown(str(token))}"
        if token.type == "RPAR":
            return "unbalanced parentheses: ')' without '('"
        if token.type in ("_NL", "$END") and "RPAR" in error.expected:
            return "unbalanced parentheses: '(' not closed"
        if token.type == "EQUAL":
            return "'=' without a parameter name before it"
        if token.type in ("_NL", "$END"):
            return "the statement ends too early"
        return f"unexpected {_shown(str(token))}"
    return "syntax error"


def _shown(text: str) -> str:
    """``text`` quoted for a one-line message; control characters are escaped."""
    return f"'{text}'" if text.isprintable() else repr(text)


def _token_location(codes: list[_Code], token) -> Location:
    code = codes[token.line - 1]
    return code.location(token.column - 1)


# ---------------------------------------------------------------------------------------
# Assembling the netlist


def _parse_text(text: str, filename: str, base_dir: Path, *, has_title: bool, stack: tuple,
                section: str | None = None) -> Netlist:
    # A big netlist makes hundreds of thousands of small objects and no reference cycles:
    # the cyclic collector would rescan them all repeatedly (super-linear time), so it
    # pauses while the netlist is built and resumes as it was.
    collecting = gc.isenabled()
    gc.disable()
    try:
        return _build(text, filename, base_dir, has_title, stack, section)
    finally:
        if collecting:
            gc.enable()


def _build(text: str, filename: str, base_dir: Path, has_title: bool, stack: tuple,
           section: str | None) -> Netlist:
    if has_title and not text.strip():
        raise NetlistError(Location(filename, 1, 1), "the netlist is empty: a title line, elements and an analysis are expected")
    nul = text.find("\x00")
    if nul >= 0:
        raise NetlistError(_offset_location(text, nul, filename), "NUL byte in the netlist: is this a binary file?")
    title, items = _split(text, filename, has_title)
    codes = [item for item in items if isinstance(item, _Code)]
    parsed = iter(_parse_code(codes))
    builder = _Builder(filename, base_dir, stack, section, top_level=has_title)
    for item in items:
        if isinstance(item, _Code):
            builder.add_code(item, next(parsed))
        else:
            builder.add(item)
    newline = "\r\n" if "\r\n" in text[:text.find("\n") + 1] else "\n"
    return builder.finish(title or "", newline)


class _Builder:
    """Walks parsed statements in order; nests subcircuits, collects params and includes."""

    def __init__(self, filename: str, base_dir: Path, stack: tuple, section: str | None, top_level: bool):
        self.top_level = top_level
        self.filename = filename
        self.base_dir = base_dir
        self.stack = stack
        self.section = section
        self.in_section = section is None
        self.top: list = []
        self.open: list[tuple[Directive, str, tuple, dict, list]] = []
        self.subcircuits: dict[str, Subcircuit] = {}
        self.params: dict[str, str] = {}
        self.models: set[str] = set()
        self.instances: list[Element] = []
        self.included_files: list[Path] = []
        self.included_elements: dict[str, Location] = {}
        self.defined: list[dict[str, Location]] = [{}]  # element names of the top level, then of each open .subckt

    def add(self, statement) -> None:
        (self.open[-1][4] if self.open else self.top).append(statement)

    def add_code(self, code: _Code, parsed: tuple) -> None:
        tag = parsed[0]
        keyword = parsed[1]
        where = code.location(len(code.text) - len(code.text.lstrip()))
        if tag == "element":
            _, name, kind, nodes, value, fields = parsed
            element = Element(str(name), kind, nodes, value, fields, where, code.raw, _inline_comments(code.raw))
            if self.in_section:
                first = self.defined[-1].setdefault(element.key, where)
                if first is not where:
                    # ngspice stops at the second one ("device already exists")
                    raise NetlistError(where, f"element {element.name} is already defined at {first}")
            if kind == "X":
                self.instances.append(element)
            self.add(element)
            return
        kind = str(keyword).lower()[1:]
        if tag == "include":
            kind = "include"
        args = code.text[keyword.column - 1 + len(keyword):].strip()
        directive = Directive(kind, args, where, code.raw)
        fields = parsed[2:]
        if tag == "lib" and len(fields) == 1:
            # `.lib NAME` alone opens a section of a library file; `.endl` closes it.
            if self.section is not None:
                self.in_section = str(fields[0]).lower() == self.section
            self.add(directive)
            return
        if kind == "endl":
            if self.section is not None:
                self.in_section = False
            self.add(directive)
            return
        if not self.in_section:
            self.add(directive)
            return
        if tag == "subckt":
            self._open_subckt(directive, fields)
        elif tag == "ends":
            self._close_subckt(directive, fields)
        elif tag == "param":
            target = self.open[-1][3] if self.open else self.params
            self.add(directive)
            if not self.open:
                for key, expr in _assignments(args):
                    target[key] = expr
        elif tag in ("include", "lib"):
            self.add(directive)
            self._include(directive, fields, tag)
        else:
            if kind == "model" and fields:
                self.models.add(str(fields[0]).lower())
            self.add(directive)

    def _open_subckt(self, directive: Directive, fields) -> None:
        if not fields:
            raise NetlistError(directive.location, ".subckt needs a name")
        name = str(fields[0])
        ports = []
        params: dict[str, str] = {}
        for token in fields[1:]:
            if getattr(token, "type", "") == "ASSIGN":
                key, _, expr = str(token).partition("=")
                params[key.lower()] = expr
            elif str(token).lower() != "params:":
                ports.append(_node(token))
        self.open.append((directive, name, tuple(ports), params, []))
        self.defined.append({})

    def _close_subckt(self, directive: Directive, fields) -> None:
        if not self.open:
            raise NetlistError(directive.location, ".ends without a .subckt")
        header, name, ports, params, statements = self.open.pop()
        self.defined.pop()
        if fields and str(fields[0]).lower() != name.lower():
            raise NetlistError(directive.location, f".ends {fields[0]} closes .subckt {name}")
        sub = Subcircuit(name, ports, MappingProxyType(params), tuple(statements), header.location, header, directive)
        self.subcircuits[name.lower()] = sub
        self.add(sub)

    def _include(self, directive: Directive, fields, tag: str) -> None:
        if not fields:
            raise NetlistError(directive.location, f".{tag} needs a file name")
        path = self.base_dir / str(fields[0]).strip("\"'")
        section = str(fields[1]).lower() if tag == "lib" and len(fields) > 1 else None
        resolved = path.resolve()
        if len(self.stack) > _MAX_INCLUDE_DEPTH:
            raise NetlistError(directive.location, f"includes nested more than {_MAX_INCLUDE_DEPTH} deep "
                               f"(from {self.stack[0].name})")
        if resolved in self.stack:
            chain = " -> ".join(p.name for p in (*self.stack, resolved))
            raise NetlistError(directive.location, f"include cycle: {chain}")
        text = _read(path, directive.location, "include file")
        included = _parse_text(text, str(path), path.parent, has_title=False,
                               stack=(*self.stack, resolved), section=section)
        self.subcircuits.update(included.subcircuits)
        for key, expr in included.params.items():
            self.params.setdefault(key, expr)
        self.models.update(included.models)
        self.included_files += [resolved, *included.included_files]
        self.included_elements.update({e.key: e.location for e in included.elements})
        self.included_elements.update(included.included_elements)

    def finish(self, title: str, newline: str) -> Netlist:
        if self.open:
            header = self.open[-1][0]
            raise NetlistError(header.location, f"unterminated .subckt {self.open[-1][1]}: no .ends")
        # An included file may use subcircuits that the including netlist defines.
        checked = self.instances if self.top_level else ()
        for instance in checked:
            if instance.fields[0].lower() not in self.subcircuits:
                where = Location(instance.location.file, instance.location.line, instance.location.column)
                raise NetlistError(where, f"unknown subcircuit '{instance.fields[0]}' in {instance.name}")
        for element in self.top if self.top_level else ():
            if isinstance(element, Element) and element.kind == "K" and element.value[:1] in "{'":
                try:
                    k = _evaluate(element.value, self.params, ())
                except ValueError:
                    continue  # ngspice will say what is wrong with the expression
                if not abs(k) < 1.0:
                    raise NetlistError(element.location, f"coupling factor of {element.name} is "
                                       f"{element.value} = {k:g}: |k| must be below 1")
        title_text = title.strip()
        return Netlist(self.filename, title_text, tuple(self.top), MappingProxyType(self.subcircuits),
                       MappingProxyType(self.params), title if title else None, frozenset(self.models),
                       newline, tuple(dict.fromkeys(self.included_files)),
                       MappingProxyType(self.included_elements))


def _read(path: Path, where: Location, what: str) -> str:
    try:
        # Bytes, so that CRLF line ends survive for the writer.
        data = path.read_bytes()
    except OSError as error:
        raise NetlistError(where, f"cannot read {what} '{path}': {error.strerror or error}") from None
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as error:
        # ngspice would read the bytes some other way; say where, rather than guess an encoding.
        before = data[:error.start].decode("utf-8")
        raise NetlistError(_offset_location(before, len(before), str(path)),
                           f"byte 0x{data[error.start]:02x} is not UTF-8 text; save the {what} as UTF-8") from None


def _offset_location(text: str, offset: int, filename: str) -> Location:
    """1-based line and column of character ``offset`` of ``text``."""
    line_start = text.rfind("\n", 0, offset) + 1
    return Location(filename, text.count("\n", 0, offset) + 1, offset - line_start + 1)


def _assignments(args: str) -> list[tuple[str, str]]:
    """``name=value`` pairs of a .param line; values may be {expr} or contain spaces in braces."""
    pairs = []
    # Names start only where a word starts: retrying inside a long word is quadratic.
    for match in re.finditer(r"(?<!\w)([A-Za-z_]\w*)\s*=\s*(\{[^}]*\}|'[^']*'|[^\s]+)", args):
        pairs.append((match.group(1).lower(), match.group(2)))
    return pairs


def _end_position(statements: list) -> int:
    for index in range(len(statements) - 1, -1, -1):
        statement = statements[index]
        if isinstance(statement, Directive) and statement.kind == "end":
            return index
    return len(statements) - len(_trailing_comments(statements))


def _trailing_comments(statements: list) -> list:
    trailing = []
    for statement in reversed(statements):
        if not isinstance(statement, Comment):
            break
        trailing.append(statement)
    return trailing


# ---------------------------------------------------------------------------------------
# Writing


def _write_statements(statements, lines: list[str], keep_control: bool, keep_analyses: bool) -> None:
    for statement in statements:
        if isinstance(statement, Element):
            lines.append(statement.raw if statement.raw is not None else statement.canonical())
        elif isinstance(statement, Comment):
            lines.append(statement.text)
        elif isinstance(statement, Subcircuit):
            lines.append(statement.header.raw or f".subckt {statement.name} {' '.join(statement.ports)}")
            _write_statements(statement.statements, lines, keep_control, keep_analyses)
            if statement.footer is not None:
                lines.append(statement.footer.raw or f".ends {statement.name}")
        elif isinstance(statement, Directive):
            if statement.kind == "control" and not keep_control:
                continue
            if statement.kind in ANALYSES and not keep_analyses:
                continue
            lines.append(statement.raw if statement.raw is not None else f".{statement.kind} {statement.args}".rstrip())


# ---------------------------------------------------------------------------------------
# Parameter expressions

_FUNCTIONS = {
    "sqrt": math.sqrt, "exp": math.exp, "log": math.log, "ln": math.log, "log10": math.log10,
    "abs": abs, "min": min, "max": max, "pow": math.pow, "pwr": math.pow,
    "sin": math.sin, "cos": math.cos, "tan": math.tan, "atan": math.atan,
}
_CONSTANTS = {"pi": math.pi}
_BINARY = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul,
           ast.Div: operator.truediv, ast.Pow: operator.pow}
_TOKEN = re.compile(r"(?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?[A-Za-z]*)|(?P<name>[A-Za-z_]\w*)|(?P<op>\*\*|[-+*/^(),])|(?P<space>\s+)|(?P<bad>.)")


def _assignment_number(text: str, params: Mapping[str, str]) -> str:
    """``name=expr`` with its expression evaluated where possible; other fields unchanged."""
    key, sep, expr = text.partition("=")
    return f"{key}={_number_text(expr, params)}" if sep else text


def _number_text(expression: str, params: Mapping[str, str]) -> str:
    """``expression`` evaluated to a number written as text, or unchanged if it cannot be."""
    try:
        return repr(_evaluate(expression, {k.lower(): v for k, v in params.items()}, ()))
    except ValueError:
        return expression


def _evaluate(expression: str, params: Mapping[str, str], active: tuple) -> float:
    text = expression.strip()
    if text[:1] in "{'" and text[-1:] in "}'":
        text = text[1:-1]
    pieces = []
    for match in _TOKEN.finditer(text):
        kind = match.lastgroup
        token = match.group()
        if kind == "num":
            pieces.append(repr(spice_number(token)))
        elif kind == "name":
            lower = token.lower()
            if lower in _FUNCTIONS:
                pieces.append(lower)
            elif lower in _CONSTANTS:
                pieces.append(repr(_CONSTANTS[lower]))
            elif lower in params:
                if lower in active:
                    raise ValueError(f"parameter {token} is defined in terms of itself")
                pieces.append(repr(_evaluate(params[lower], params, (*active, lower))))
            else:
                raise ValueError(f"unknown parameter '{token}'")
        elif kind == "op":
            pieces.append("**" if token == "^" else token)
        elif kind == "bad":
            raise ValueError(f"'{token}' in expression '{expression}'")
    try:
        tree = ast.parse(" ".join(pieces), mode="eval")
        return float(_eval_node(tree.body))
    except SyntaxError:
        raise ValueError(f"'{expression}' is not an expression") from None
    except (RecursionError, MemoryError):
        # Thousands of nested operators or parentheses: Python's parser gives up.
        raise ValueError(f"expression nested too deeply ({len(expression)} characters)") from None


def _eval_node(node):
    if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)):
        return node.value
    if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
        try:
            return _BINARY[type(node.op)](_eval_node(node.left), _eval_node(node.right))
        except (ZeroDivisionError, OverflowError) as error:
            raise ValueError(str(error)) from None
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        value = _eval_node(node.operand)
        return -value if isinstance(node.op, ast.USub) else value
    if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id in _FUNCTIONS:
        try:
            return _FUNCTIONS[node.func.id](*(_eval_node(a) for a in node.args))
        except (TypeError, ValueError, OverflowError) as error:
            raise ValueError(str(error)) from None
    raise ValueError("unsupported expression")
