"""One exception hierarchy for the whole pipeline; the CLI maps it to exit codes."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class Location:
    """A place in a user's file: 1-based line and column."""

    file: str
    line: int
    column: int = 1

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.column}"


class AugmentError(Exception):
    """Root of every error the tool reports to its user (exit 2 unless a subclass says)."""

    exit_code = 2


class InputError(AugmentError):
    """Raised for bad user input; formats itself as ``file:line:column: message``."""

    def __init__(self, where: Location | str, message: str):
        self.where = where
        self.message = message
        super().__init__(f"{where}: {message}")


class NetlistError(InputError):
    """Raised when a SPICE netlist cannot be read or does not make sense."""


class SideFileError(InputError):
    """Raised when a geometry side-file is malformed or contradicts its netlist."""


class PlanError(InputError):
    """Raised when a batch plan is malformed or names missing files."""


class OptionError(InputError):
    """Raised for a bad command-line option value (e.g. an output that is an input)."""


class GeometryError(AugmentError):
    """Raised when the geometry is physically inconsistent (e.g. an indefinite inductance matrix)."""


class SimulatorError(AugmentError):
    """Raised when ngspice fails, crashes or times out; quotes ngspice's own words."""

    exit_code = 3
