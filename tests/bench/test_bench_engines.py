"""Benchmarks (pytest-benchmark).  Timing is off in the normal test run
(--benchmark-disable in pyproject.toml): each benchmark then runs once as a
plain test.  To measure, in one run so the ratio is fair:

    pytest tests/bench --benchmark-enable

The figures that matter are the medians and the float/fixed ratio of one
run; they time the estimator alone (scoring against truth is off).
"""

import pytest

from peerfix.runner import run_scenario
from peerfix.simulate import simulate


@pytest.fixture(scope="module")
def open_field():
    return simulate("open-field", 0)


def _run(scenario, engine):
    return run_scenario(scenario, engine, iterations=4, score=False)


@pytest.mark.parametrize("engine", ["float", "fixed"])
def test_bench_open_field_4_iterations(benchmark, open_field, engine):
    result = benchmark.pedantic(_run, args=(open_field, engine), rounds=7, iterations=1, warmup_rounds=1)
    assert len(result.epochs[0].iterations) == 4
    # Sanity, not speed: nearly every agent speaks (an agent whose heaviest mode
    # stays wider than the censoring spread is rightly kept off the air).
    assert result.epochs[0].iterations[-1].messages_sent >= 0.95 * len(open_field.agent_ids)
