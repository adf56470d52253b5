"""The committed OpenQASM 3 programs of the demo are current (regenerate with `make circuits`)."""

import re
from pathlib import Path

import openqasm3
import pytest

from dnpqc.compile.processor import processor_for_spec
from dnpqc.io.scenario import load_scenario
from dnpqc.pipeline.export import compile_text

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "src" / "dnpqc" / "scenarios" / "demo.toml"
PROCESSORS = re.search(r"CIRCUIT_PROCESSORS := (.+)", (ROOT / "Makefile").read_text()).group(1)


@pytest.mark.slow
@pytest.mark.parametrize("preset", PROCESSORS.split())
def test_committed_program_is_current(preset):
    path = ROOT / "circuits" / f"demo-{preset}.qasm"
    assert path.exists(), f"{path.name} missing: run `make circuits`"
    fresh = compile_text(load_scenario(DEMO), processor_for_spec(preset))
    assert path.read_text() == fresh, f"{path.name} is stale: run `make circuits`"


@pytest.mark.slow
def test_committed_program_parses_with_reference_parser():
    # the reference parser takes ~12 s per MB, so one committed file is parsed here; every
    # native gate set is parsed on small programs in test_qasm.py
    openqasm3.parse((ROOT / "circuits" / "demo-ion-chain-12.qasm").read_text())
