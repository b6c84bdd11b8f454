"""Campaign specs (peerfix.campaign.spec) and their grid (peerfix.campaign.grid).

Bad specs must fail before anything runs, naming the file, the line and the key.
"""

from __future__ import annotations

import textwrap

import pytest

from peerfix import runner
from peerfix.campaign import expand, load_spec, parse_spec
from peerfix.errors import InputError

GOOD = textwrap.dedent(
    """\
    name = "blocked"
    description = "blocked paths"
    seeds = { first = 10, count = 3 }
    engines = ["float", "fixed"]

    [scenario]
    preset = "open-field"
    blocked_bias_mean_m = 1

    [estimator]
    K = 3
    iterations = 5

    [channel]
    packet_loss = 0.1

    [grid.scenario]
    blocked_probability = [0.0, 0.2]

    [grid.estimator]
    robust = [false, true]
    schedule = ["slot", "broadcast"]

    [[plot]]
    x = "blocked_probability"
    y = "error_p90_m"
    series = ["robust"]
    """
)


def test_good_spec_parses_with_types_and_aliases():
    spec = parse_spec(GOOD, "good.toml")
    assert spec.name == "blocked"
    assert spec.seeds == (10, 11, 12)
    assert spec.engines == ("float", "fixed")
    assert spec.fixed["scenario"] == {"preset": "open-field", "blocked_bias_mean_m": 1.0}
    assert isinstance(spec.fixed["scenario"]["blocked_bias_mean_m"], float)  # TOML int taken as a float setting
    assert spec.fixed["estimator"] == {"max_components": 3, "iterations": 5}  # K is max_components
    assert spec.swept == ["blocked_probability", "robust", "schedule"]
    assert spec.plots[0].series == ("robust",)
    assert spec.cell_count() == 2 * 2 * 2 * 2 * 3


def test_grid_expansion_is_the_full_product_with_distinct_keys():
    spec = parse_spec(GOOD, "good.toml")
    cells = expand(spec)
    assert len(cells) == spec.cell_count() == 48
    assert len({c.key for c in cells}) == 48
    combos = {(dict(c.scenario)["blocked_probability"], dict(c.estimator)["robust"], c.schedule, c.engine, c.seed) for c in cells}
    assert len(combos) == 48
    c = cells[0]
    assert c.iterations == 5 and c.packet_loss == 0.1 and c.params().max_components == 3
    assert dict(c.scenario)["blocked_bias_mean_m"] == 1.0
    row = c.settings_row()
    for col in ("campaign", "key", "preset", "seed", "engine", "K", "robust", "iterations", "schedule",
                "channel_packet_loss", "blocked_probability", "blocked_bias_mean_m"):
        assert col in row


def test_key_depends_on_resolved_settings_not_on_spelling():
    a = expand(parse_spec('name = "a"\n[estimator]\nK = 4\n', "a.toml"))
    b = expand(parse_spec('name = "b"\n[estimator]\nmax_components = 4\n', "b.toml"))
    c = expand(parse_spec('name = "c"\n', "c.toml"))  # K = 4 is the default
    d = expand(parse_spec('name = "d"\n[estimator]\nK = 5\n', "d.toml"))
    assert a[0].key == b[0].key == c[0].key
    assert d[0].key != a[0].key


def test_engines_are_read_from_runner_at_run_time(monkeypatch):
    text = 'name = "x"\nengines = ["grid"]\n'
    with pytest.raises(InputError, match="unknown engine 'grid'"):
        parse_spec(text, "x.toml")
    monkeypatch.setattr(runner, "ENGINES", (*runner.ENGINES, "grid"))
    assert parse_spec(text, "x.toml").engines == ("grid",)


# (spec text, fragment of the message: "file:line: field 'key'")
BAD = {
    "not toml": ('name = "x"\nseeds = = 3\nengines = ["float"]\n', "bad.toml:2"),
    "no name": ("seeds = 3\n", "field 'name'"),
    "unknown top key": ('name = "x"\nseed = 3\n', "bad.toml:2: field 'seed'"),
    "bad seeds": ('name = "x"\nseeds = 0\n', "bad.toml:2: field 'seeds'"),
    "repeated seed": ('name = "x"\nseeds = [1, 1]\n', "field 'seeds'"),
    "unknown engine": ('name = "x"\nengines = ["floaty"]\n', "bad.toml:2: field 'engines'"),
    "unknown preset": ('name = "x"\n[scenario]\npreset = "moon"\n', "bad.toml:3: field 'scenario.preset'"),
    "unknown scenario key": ('name = "x"\n[scenario]\nagentz = 3\n', "bad.toml:3: field 'scenario.agentz'"),
    "wrong type": ('name = "x"\n[scenario]\nagents = "many"\n', "bad.toml:3: field 'scenario.agents'"),
    "bool for a number": ('name = "x"\n[estimator]\nK = true\n', "bad.toml:3: field 'estimator.K'"),
    "unknown estimator key": ('name = "x"\n[estimator]\n\nrobustness = true\n', "bad.toml:4: field 'estimator.robustness'"),
    "bad schedule": ('name = "x"\n[estimator]\nschedule = "round"\n', "field 'estimator.schedule'"),
    "zero iterations": ('name = "x"\n[estimator]\niterations = 0\n', "bad.toml:3: field 'estimator.iterations'"),
    "loss above 1": ('name = "x"\n[channel]\npacket_loss = 1.5\n', "bad.toml:3: field 'channel.packet_loss'"),
    "grid not a list": ('name = "x"\n[grid.estimator]\nrobust = true\n', "bad.toml:3: field 'grid.estimator.robust'"),
    "grid empty": ('name = "x"\n[grid.scenario]\nagents = []\n', "bad.toml:3: field 'grid.scenario.agents'"),
    "grid bad value": ('name = "x"\n[grid.scenario]\nagents = [10, "x"]\n', "bad.toml:3: field 'grid.scenario.agents'"),
    "grid unknown table": ('name = "x"\n[grid.radio]\nloss = [1]\n', "bad.toml:2: field 'grid.radio'"),
    "fixed and swept": ('name = "x"\n[estimator]\nK = 2\n[grid.estimator]\nK = [1, 2]\n', "bad.toml:5: field 'grid.estimator.K'"),
    "invalid settings": ('name = "x"\n[grid.scenario]\nblocked_probability = [0.1, 2.0]\n',
                         "bad.toml:3: field 'grid.scenario.blocked_probability'"),
    "invalid fixed settings": ('name = "x"\n[scenario]\nagents = 0\n', "bad.toml:2: field 'scenario'"),
    "plot x not swept": ('name = "x"\n[grid.estimator]\nK = [1, 2]\n[plot]\nx = "agents"\ny = "rmse_m"\n',
                         "bad.toml:5: field 'plot.x'"),
    "plot y unknown": ('name = "x"\n[grid.estimator]\nK = [1, 2]\n[plot]\nx = "K"\ny = "speed"\n', "bad.toml:6: field 'plot.y'"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_spec_names_file_line_and_key(case):
    text, where = BAD[case]
    with pytest.raises(InputError) as err:
        parse_spec(text, "bad.toml")
    assert where in str(err.value), str(err.value)


def test_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="cannot read"):
        load_spec(tmp_path / "nope.toml")


def test_shipped_campaigns_parse():
    from pathlib import Path

    folder = Path(__file__).resolve().parents[1] / "campaigns"
    specs = sorted(folder.glob("*.toml"))
    assert specs, "campaigns/*.toml missing"
    for path in specs:
        spec = load_spec(path)
        assert spec.cell_count() >= 1
        assert spec.plots, f"{path.name}: a shipped study names its figure"


def test_array_settings_take_integers_as_coordinates():
    a = expand(parse_spec('name = "a"\n[scenario]\nbounds_m = [0, 0, 30, 30]\n', "a.toml"))[0]
    b = expand(parse_spec('name = "b"\n[scenario]\nbounds_m = [0.0, 0.0, 30.0, 30.0]\n', "b.toml"))[0]
    assert dict(a.scenario)["bounds_m"] == (0.0, 0.0, 30.0, 30.0)
    assert a.key == b.key
