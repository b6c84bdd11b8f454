"""Benchmarks (pytest-benchmark).  Timing is off in the normal test run
(--benchmark-disable in pyproject.toml): each benchmark then runs once as a
plain test.  To measure: pytest tests/bench --benchmark-enable
"""

import pytest

from peerfix.runner import run_scenario
from peerfix.simulate import simulate


@pytest.fixture(scope="module")
def open_field():
    return simulate("open-field", 0)


def test_bench_open_field_float_slot_4_iterations(benchmark, open_field):
    result = benchmark.pedantic(run_scenario, args=(open_field, "float"), kwargs={"iterations": 4}, rounds=5, iterations=1)
    assert len(result.epochs[0].iterations) == 4
    assert result.metrics[0]["iterations"][-1]["fraction_within_1m"] > 0.9
