"""Run netlist text in ngspice's shared library, inside a worker process that owns it.

The shared library keeps global state and can abort the process that loaded it, so this
module never loads it in the caller's process. A :class:`Simulator` starts one worker,
a fresh interpreter (``python -m augment.simulate``) that talks to it over two pipes in
pickled frames, so no process that already holds ngspice is ever forked and daemonic
callers (Dask workers, ``multiprocessing.Pool`` workers) can own a simulator too. It
reuses that worker's single ngspice instance across runs and clears the previous circuit
and plots before each one. A crash or a hang kills only the worker; the next run starts a
fresh one. PySpice is imported in the worker only, which keeps ``import augment.simulate``
cheap.

ngspice 39 keeps one setting across circuits that ``remcirc`` and ``destroy all`` do not
clear (measured here): once a circuit has used ``.options interp``, later circuits in the
same process are interpolated too. The worker notices and the run is repeated in a fresh
worker.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import tempfile
import time
import types
from collections.abc import Mapping
from dataclasses import dataclass
from multiprocessing.connection import Connection
from pathlib import Path

import numpy as np

from augment.errors import SimulatorError

# Debian ships only the versioned name; PySpice would look for libngspice.so.
_LIBRARY_PATH = "libngspice.so.0"
_STARTUP_TIMEOUT_S = 60.0
_QUIT_TIMEOUT_S = 5.0

_CONTROL_START = re.compile(r"^\s*\.control\b", re.IGNORECASE)
_CONTROL_END = re.compile(r"^\s*\.endc\b", re.IGNORECASE)
_END = re.compile(r"^\s*\.end\s*$", re.IGNORECASE | re.MULTILINE)

# Lines where ngspice says a load or a run went wrong; a block of its words starts here.
_ERROR_START = re.compile(
    r"^(error|doanalyses:|the inductive system)|simulation\(s\) aborted|simulation not started",
    re.IGNORECASE,
)
# Progress and start-up chatter that tells the user nothing.
_NOISE = re.compile(
    r"^(note:|trying gmin|supplies reduced|warning: (further gmin|dynamic gmin|true gmin"
    r"|last gmin|source stepping|interpolated raw file data))",
    re.IGNORECASE,
)
# ngspice's own words for "this instance is broken now"; the worker is replaced.
_UNRECOVERABLE = re.compile(r"cannot recover", re.IGNORECASE)
_CONVERGENCE = re.compile(
    r"timestep too small|singular matrix|gmin|no convergence|iteration limit|convergence",
    re.IGNORECASE,
)
_SINGULAR_NODE = re.compile(r"singular matrix:\s*check node (\S+)", re.IGNORECASE)
_INDEFINITE_HINT = (
    "coupled inductors need a positive definite inductance matrix: every |k| < 1, and "
    "small couplings dropped from a set can break it"
)
_CONVERGENCE_HINT = (
    "try a smaller time step (TSTEP or TMAX of .tran), loosen the tolerances "
    "(.options reltol=1e-2 or a larger gmin), and check for floating nodes and for "
    "loops made only of voltage sources and inductors"
)


@dataclass(frozen=True, slots=True)
class SimResult:
    """What one ngspice run produced.

    Attributes
    ----------
    analysis : str
        The plot type: ``"tran"``, ``"ac"``, ``"dc"``, ``"op"``, ...
    vectors : Mapping[str, numpy.ndarray]
        Read-only arrays by lower-cased ngspice vector name (``"time"`` or
        ``"frequency"``, node names such as ``"out"``, branch currents such as
        ``"v1#branch"``). AC vectors are complex except ``"frequency"``, which is real.
    elapsed_s : float
        ngspice's own run time, measured in the worker around the ``run`` command.
    messages : tuple of str
        ngspice's warnings worth keeping, and notes of what this module changed.
    """

    analysis: str
    vectors: Mapping[str, np.ndarray]
    elapsed_s: float
    messages: tuple[str, ...]


class Simulator:
    """A worker process with one ngspice instance, reused across runs.

    Use as a context manager, or call :meth:`close`. Not safe to share between threads.

    Parameters
    ----------
    timeout_s : float
        Longest wait for one run, counted from the moment the worker has the netlist
        (starting a worker has its own allowance of 60 s).
    """

    def __init__(self, timeout_s: float = 300.0):
        self.timeout_s = timeout_s
        self._process = None
        self._requests = None
        self._replies = None
        self._log_path = None

    def __enter__(self) -> Simulator:
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()

    def run(self, netlist_text: str, name: str = "<netlist>", directory: str | os.PathLike | None = None) -> SimResult:
        """Simulate a netlist and return its vectors.

        Parameters
        ----------
        netlist_text : str
            A complete netlist: title line first, an analysis line (``.tran``, ``.ac``,
            ``.dc``, ``.op``) inside. ``.control ... .endc`` blocks are removed first.
        name : str
            What the netlist is called in messages, usually its file name.
        directory : path, optional
            Where ngspice runs, so that relative ``.include`` and ``.lib`` paths resolve as
            they do for the netlist's own file (default: this process's working folder).

        Returns
        -------
        SimResult
            The last plot ngspice made.

        Raises
        ------
        SimulatorError
            When ngspice reports an error (its words quoted), produces no data, crashes,
            or takes longer than ``timeout_s``.
        """
        text, notes = _strip_control_blocks(netlist_text)
        # ngspice takes a deck without .end as unfinished and loads nothing.
        if not _END.search(text):
            text += ".end\n"
        where = os.path.abspath(directory) if directory is not None else os.getcwd()
        reply = self._request(("run", text, where), name)
        if reply[0] == "stale":
            self._stop()
            reply = self._request(("run", text, where), name)
        if reply[0] == "fail":
            _, quoted, warnings, recoverable = reply
            if not recoverable:
                self._stop()
            raise SimulatorError(_failure_message(name, quoted, warnings))
        _, plot_name, vectors, elapsed_s, messages = reply
        for array in vectors.values():
            array.flags.writeable = False
        return SimResult(
            analysis=plot_name.rstrip("0123456789"),
            vectors=types.MappingProxyType(vectors),
            elapsed_s=elapsed_s,
            messages=tuple(notes) + tuple(messages),
        )

    def close(self) -> None:
        """Stop the worker; a later :meth:`run` starts a new one."""
        if self._process is not None and self._process.poll() is None:
            try:
                self._requests.send(("quit",))
                self._process.wait(_QUIT_TIMEOUT_S)
            except (OSError, subprocess.TimeoutExpired):
                pass
        self._stop()

    def _simulate_library_abort(self, signum: int, name: str = "<netlist>") -> None:
        """Make the worker die of ``signum`` while a request is pending (tests only).

        This stands in for the shared library aborting or segfaulting mid-run, which no
        known input of ngspice 39 does on demand.
        """
        self._request(("raise_signal", signum), name)

    def _request(self, message: tuple, name: str) -> tuple:
        if self._process is None or self._process.poll() is not None:
            self._start()
        try:
            self._requests.send(message)
            if self._replies.poll(self.timeout_s):
                return self._replies.recv()
        except (EOFError, OSError):
            pass
        else:
            self._stop()
            raise SimulatorError(
                f"ngspice timed out after {self.timeout_s:g} s while simulating {name}; "
                "the worker was stopped"
            )
        raise SimulatorError(self._death_message(name))

    def _start(self) -> None:
        self._stop()
        log_fd, self._log_path = tempfile.mkstemp(prefix="augment-ngspice-", suffix=".log")
        from_parent, to_worker = os.pipe()
        from_worker, to_parent = os.pipe()
        # The worker must find this package even when it is not installed.
        package_root = str(Path(__file__).resolve().parent.parent)
        python_path = os.pathsep.join(filter(None, [package_root, os.environ.get("PYTHONPATH")]))
        try:
            self._process = subprocess.Popen(
                [sys.executable, "-m", "augment.simulate", str(from_parent), str(to_parent)],
                stdin=subprocess.DEVNULL,
                stdout=log_fd,
                stderr=log_fd,
                pass_fds=(from_parent, to_parent),
                env={**os.environ, "PYTHONPATH": python_path},
                close_fds=True,
            )
        except OSError as error:
            for fd in (to_worker, from_worker):
                os.close(fd)
            self._stop()
            raise SimulatorError(f"cannot start the ngspice worker process: {error}") from None
        finally:
            for fd in (log_fd, from_parent, to_parent):
                os.close(fd)
        self._requests = Connection(to_worker, readable=False)
        self._replies = Connection(from_worker, writable=False)
        try:
            ready = self._replies.poll(_STARTUP_TIMEOUT_S)
            reply = self._replies.recv() if ready else None
        except (EOFError, OSError):
            raise SimulatorError(self._death_message("(worker start-up)")) from None
        if reply is None:
            self._stop()
            raise SimulatorError(
                f"the ngspice worker did not start within {_STARTUP_TIMEOUT_S:g} s"
            )
        if reply[0] == "fail":
            self._stop()
            raise SimulatorError(
                f"cannot start ngspice ({_LIBRARY_PATH}): {reply[1]}; "
                "on Debian install the package libngspice0"
            )

    def _stop(self) -> None:
        if self._process is not None:
            if self._process.poll() is None:
                self._process.kill()
            self._process.wait()
            self._process = None
        for connection in (self._requests, self._replies):
            if connection is not None:
                connection.close()
        self._requests = self._replies = None
        if self._log_path is not None:
            os.unlink(self._log_path)
            self._log_path = None

    def _death_message(self, name: str) -> str:
        try:
            code = self._process.wait(_QUIT_TIMEOUT_S)
        except subprocess.TimeoutExpired:
            code = None
        with open(self._log_path, encoding="utf-8", errors="replace") as log:
            tail = [line.strip() for line in log if line.strip()][-3:]
        self._stop()
        if code is not None and code < 0:
            what = f"ngspice crashed (signal {-code}) while simulating {name}"
        else:
            what = f"ngspice exited (status {code}) while simulating {name}"
        said = f'; its last output: "{" ".join(tail)}"' if tail else ""
        return f"{what}{said}; the worker was stopped and the next run starts a fresh one"


def simulate(netlist_text: str, name: str = "<netlist>", timeout_s: float = 300.0) -> SimResult:
    """Simulate one netlist in a worker of its own; see :meth:`Simulator.run`."""
    with Simulator(timeout_s) as simulator:
        return simulator.run(netlist_text, name)


def _strip_control_blocks(text: str) -> tuple[str, list[str]]:
    kept = []
    removed = 0
    inside = False
    for line in text.splitlines():
        if not inside and _CONTROL_START.match(line):
            inside = True
            removed += 1
        elif inside:
            inside = not _CONTROL_END.match(line)
        else:
            kept.append(line)
    notes = []
    if removed:
        notes.append(
            f"removed {removed} .control ... .endc block(s): the analysis comes from the "
            "netlist's own analysis lines"
        )
    return "\n".join(kept) + "\n", notes


def _error_block(lines: list[str]) -> str:
    """ngspice's words from its first error line on, warnings and repeats left out.

    ngspice spreads one statement over several lines ("Error on line 4 ...:", the line,
    the reason); those are joined with spaces, separate statements with "; ".
    """
    start = next((i for i, line in enumerate(lines) if _ERROR_START.search(line)), None)
    if start is None:
        return ""
    # "Warning: No job ... defined:" introduces the line that says nothing ran.
    if start > 0 and lines[start - 1].endswith(":"):
        start -= 1
    first, *rest = dict.fromkeys(lines[start:])
    quoted = first
    for line in rest:
        if _NOISE.match(line) or line.lower().startswith("warning"):
            continue
        new_statement = _ERROR_START.search(line) and not quoted.endswith(":")
        quoted += ("; " if new_statement else " ") + line
    return quoted


def _without_incomplete_coupling_notes(lines: list[str]) -> list[str]:
    """Drop ngspice's note that a coupled set lacks some K lines, unless it is indefinite.

    ngspice says "The Inductive System consisting of <names> has an incomplete set of K
    couplings, (missing ones are implicitly 0)" over several lines whenever two coupled
    inductors have no K line between them: exactly perpendicular pieces have none, and
    --kmin leaves the weakest out on purpose. Nothing there for the user to act on, so it
    goes; "... is not positive definite" stays an error.
    """
    kept, block = [], None
    for line in lines:
        if block is None and line.lower().startswith("the inductive system"):
            block = [line]
            continue
        if block is not None:
            block.append(line)
            said = line.lower()
            if "incomplete set of k couplings" in said and "not positive definite" not in said:
                block = None
            elif "positive definite" in said:
                kept.extend(block)
                block = None
            continue
        kept.append(line)
    return kept + (block or [])


def _failure_message(name: str, quoted: str, warnings: list[str]) -> str:
    message = f'ngspice failed on {name}: "{quoted}"'
    nodes = dict.fromkeys(_SINGULAR_NODE.findall(" ".join(warnings)))
    if nodes:
        message += f'; it warned of a singular matrix at node(s) {", ".join(nodes)}'
    if "not positive definite" in quoted:
        message += f"; {_INDEFINITE_HINT}"
    elif nodes or _CONVERGENCE.search(quoted):
        message += f"; {_CONVERGENCE_HINT}"
    return message


def _worth_keeping(lines: list[str]) -> list[str]:
    return [line for line in dict.fromkeys(lines) if not _NOISE.match(line)]


class _Worker:
    """The ngspice instance of one worker process and what it has said."""

    def __init__(self):
        import logging

        # PySpice logs ngspice's stderr and its own version complaint; none is for the user.
        logging.disable(logging.CRITICAL)
        from PySpice.Spice.NgSpice.Shared import NgSpiceShared, ffi

        lines = self.lines = []

        class _CapturingNgSpice(NgSpiceShared):
            def send_char(self, message, ngspice_id):
                stream, _, content = message.partition(" ")
                # Lines ending in "\r" are progress counters; ngspice pads with runs of spaces.
                if stream in ("stdout", "stderr") and not content.endswith("\r"):
                    lines.append((stream, " ".join(content.split())))
                return 0

        _CapturingNgSpice.LIBRARY_PATH = _LIBRARY_PATH
        self._ffi = ffi
        self._ngspice = _CapturingNgSpice.new_instance()
        self._library = self._ngspice._ngspice_shared
        self._interp_latched = False

    def command(self, command: str) -> None:
        self._library.ngSpice_Command(command.encode("ascii"))

    def take_lines(self) -> list[tuple[str, str]]:
        taken = list(self.lines)
        self.lines.clear()
        return taken

    def load(self, text: str) -> None:
        # As PySpice's load_circuit: no blank lines inside, one empty line last (ngspice 33+).
        lines = [line for line in text.splitlines() if line.strip()] + [""]
        keepalive = [self._ffi.new("char[]", line.encode("utf-8")) for line in lines]
        array = self._ffi.new("char *[]", keepalive + [self._ffi.NULL])
        self._library.ngSpice_Circ(array)

    def requests_interp(self) -> bool:
        self.command("set")
        return any(content == "+ interp" for _, content in self.take_lines())

    def run(self, text: str) -> tuple:
        self.command("remcirc")
        self.command("destroy all")
        self.take_lines()
        self.load(text)
        loaded = self.take_lines()
        load_errors = _error_block([content for stream, content in loaded if stream == "stderr"])
        if load_errors:
            return ("fail", load_errors, [], _UNRECOVERABLE.search(load_errors) is None)
        requests_interp = self.requests_interp()
        if self._interp_latched and not requests_interp:
            return ("stale",)
        self._interp_latched = self._interp_latched or requests_interp
        started = time.perf_counter()
        self.command("run")
        elapsed_s = time.perf_counter() - started
        ran = loaded + self.take_lines()
        said = [content for stream, content in ran if stream == "stderr"]
        said += [c for s, c in ran if s == "stdout" and c.lower().startswith("warning")]
        said = _without_incomplete_coupling_notes(said)
        errors = _error_block(said)
        plots = [plot for plot in self._ngspice.plot_names if plot != "const"]
        if errors:
            return ("fail", errors, said, _UNRECOVERABLE.search(errors) is None)
        if not plots:
            return ("fail", "; ".join(_worth_keeping(said)) or "no analysis ran", said, True)
        plot_name = self._ngspice.last_plot
        vectors = {}
        for vector_name, vector in self._ngspice.plot(None, plot_name).items():
            data = vector._data
            # ngspice stores the AC sweep variable as complex with zero imaginary part.
            if vector_name.lower() == "frequency":
                data = data.real.copy()
            vectors[vector_name.lower()] = data
        if not vectors or any(data.size == 0 for data in vectors.values()):
            return ("fail", f"{plot_name} has no data points", said, True)
        messages = _worth_keeping(said)
        if len(plots) > 1:
            others = ", ".join(plot for plot in plots if plot != plot_name)
            messages.append(f"kept the last analysis ({plot_name}); also ran: {others}")
        return ("ok", plot_name, vectors, elapsed_s, messages)


def _worker_main(requests: Connection, replies: Connection) -> None:
    """Serve requests from the parent until told to quit (runs in the worker process).

    The parent has pointed file descriptors 1 and 2 at a log file: ngspice and PySpice
    write straight to them, which keeps that off the user's terminal but on disk, so a
    crash report can quote it. Requests and replies travel on their own pipes.
    """
    try:
        worker = _Worker()
    except Exception as error:  # noqa: BLE001 - any start-up failure is reported, not raised
        replies.send(("fail", f"{type(error).__name__}: {error}", [], False))
        os._exit(1)
    replies.send(("ready",))
    while True:
        try:
            request = requests.recv()
        except EOFError:
            # The parent went away without saying quit.
            break
        if request[0] == "quit":
            break
        if request[0] == "raise_signal":
            os.kill(os.getpid(), request[1])
            continue
        try:
            os.chdir(request[2])
            reply = worker.run(request[1])
        except Exception as error:  # noqa: BLE001 - reported to the parent as a failure
            reply = ("fail", f"{type(error).__name__}: {error}", [], False)
        replies.send(reply)
    replies.close()
    # Skip interpreter teardown: unloading ngspice at exit gains nothing and can hang.
    os._exit(0)


if __name__ == "__main__":
    _worker_main(Connection(int(sys.argv[1]), writable=False), Connection(int(sys.argv[2]), readable=False))
