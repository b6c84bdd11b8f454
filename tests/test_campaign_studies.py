"""tools/run_studies.py: the join of the target's cycles per K, and the page of a study."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def studies():
    spec = importlib.util.spec_from_file_location("run_studies", ROOT / "tools" / "run_studies.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _budget(configs):
    return {"target": "cortex-m4", "opt": "O2", "clock_mhz": 64.0, "build_key": "abcdef0123456789",
            "entries": {"pfx_node_update": {"configs": configs}}}


def test_cycles_per_k_uses_the_largest_inbox_every_k_has(studies):
    configs = [
        {"K": 1, "neighbours": 8, "cycles_median": 100, "cycles_max": 150, "calls": 3},
        {"K": 1, "neighbours": 10, "cycles_median": 120, "cycles_max": 170, "calls": 2},
        {"K": 2, "neighbours": 10, "cycles_median": 220, "cycles_max": 260, "calls": 4},
        {"K": 2, "neighbours": 12, "cycles_median": 999, "cycles_max": 999, "calls": 20},  # K = 1 has no 12
    ]
    cycles, note = studies._cycles_per_k(_budget(configs))
    assert cycles == {1: (10, 120, 170, 2), 2: (10, 220, 260, 4)}
    assert "10 heard broadcasts" in note and "cortex-m4" in note


def test_cycles_per_k_says_when_there_is_nothing_to_join(studies):
    assert studies._cycles_per_k(None) == ({}, "no budget document: cycles not joined")
    assert studies._cycles_per_k(_budget([]))[1] == "the budget document has no per-K update figures"


def test_shipped_specs_all_have_a_section(studies):
    names = {p.stem for p in (ROOT / "campaigns").glob("*.toml")}
    assert names <= set(studies.SECTIONS), names - set(studies.SECTIONS)
