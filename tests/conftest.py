"""Shared fixtures and the Hypothesis profiles (derandomised in CI)."""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from hypothesis import HealthCheck, settings

settings.register_profile("ci", derandomize=True, deadline=None, print_blob=True,
                          suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("dev", deadline=None)
settings.load_profile("ci" if os.environ.get("CI") else os.environ.get("HYPOTHESIS_PROFILE", "dev"))

ROOT = Path(__file__).resolve().parent.parent
SCENARIOS = ROOT / "augment" / "scenarios"
EXAMPLES = ROOT / "netlists"


@pytest.fixture(scope="session")
def simulator():
    """One ngspice worker for the whole session (each run clears the previous circuit)."""
    from augment.simulate import Simulator

    with Simulator(timeout_s=120) as sim:
        yield sim


@pytest.fixture
def write_case(tmp_path):
    """Write a netlist and a side-file of a test's own into tmp_path; return their paths."""

    def write(netlist: str, sidefile: str, stem: str = "case") -> tuple[Path, Path]:
        cir, toml = tmp_path / f"{stem}.cir", tmp_path / f"{stem}.toml"
        cir.write_text(netlist)
        toml.write_text(sidefile)
        return cir, toml

    return write
