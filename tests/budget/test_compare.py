"""`peerfix budget --against`: a report held against an earlier release's report.

The differences and shares are checked against values worked out by hand on
small documents; the command is checked on the session's quick report (its
replay is cached) against itself and against an edited copy.
"""

from __future__ import annotations

import json

import pytest

from peerfix.errors import InputError

from .support import needs_cross, needs_unicorn, run_cli

pytestmark = needs_unicorn


def report(**figures) -> dict:
    """A minimal budget document: the required fields plus the given figures."""
    entries = figures.pop("entries", {"pfx_node_update": {"cycles_median": 1000, "cycles_max": 4000,
                                                          "stack_static_bytes": 700}})
    return {"config": "cortex-m4-O2", "target": "cortex-m4", "opt": "O2", "settings": "defaults", "quick": False,
            "build_key": "k", "entries": entries, "flash_bytes": 20_000, **figures}


def change(doc: dict, figure: str) -> dict:
    return next(c for c in doc["changes"] if c["figure"] == figure)


def test_changes_are_the_differences_worked_out_by_hand(tmp_path):
    from peerfix.budget.compare import compare_reports

    before = report(flash_bytes=20_000, stack_bytes=700, flash_functions={"a": 100, "b": 50, "gone": 8},
                    flash_data={"k_table": 672})
    now = report(flash_bytes=19_000, stack_bytes=721, flash_functions={"a": 130, "b": 50, "new": 12},
                 flash_data={"k_table": 32},
                 entries={"pfx_node_update": {"cycles_median": 1100, "cycles_max": 3000, "stack_static_bytes": 721},
                          "pfx_wire_size": {"cycles_median": 9, "cycles_max": 9, "stack_static_bytes": 0}})
    cmp = compare_reports(before, now, tmp_path / "old.json", max_growth_pct=2.5)
    flash = change(cmp, "flash_bytes")
    assert (flash["before"], flash["now"], flash["change"], flash["percent"]) == (20_000, 19_000, -1000, -5.0)
    stack = change(cmp, "stack_bytes")
    assert (stack["change"], stack["percent"], stack["grew_beyond"]) == (21, 3.0, True)  # 21 / 700 = 3 % > 2.5 %
    med = change(cmp, "pfx_node_update cycles_median")
    assert (med["change"], med["percent"], med["grew_beyond"]) == (100, 10.0, True)
    assert change(cmp, "pfx_node_update cycles_max")["grew_beyond"] is False  # shrank
    new_entry = change(cmp, "pfx_wire_size cycles_max")
    assert (new_entry["before"], new_entry["now"], new_entry["grew_beyond"]) == (None, 9, False)
    assert cmp["grew_beyond"] == ["stack_bytes", "pfx_node_update cycles_median", "pfx_node_update stack_static_bytes"]
    # functions and tables by the size of their change; one that appeared or went counts from 0
    assert [(f["symbol"], f["kind"], f["change"]) for f in cmp["symbols"]] == [
        ("k_table", "table", -640), ("a", "code", 30), ("new", "code", 12), ("gone", "code", -8)]


def test_growth_limit_is_strict_and_growth_from_nothing_exceeds_it(tmp_path):
    from peerfix.budget.compare import compare_reports

    at_limit = compare_reports(report(flash_bytes=1000), report(flash_bytes=1050), tmp_path / "o.json", 5.0)
    assert change(at_limit, "flash_bytes")["grew_beyond"] is False  # exactly 5 %: allowed
    above = compare_reports(report(flash_bytes=1000), report(flash_bytes=1051), tmp_path / "o.json", 5.0)
    assert change(above, "flash_bytes")["grew_beyond"] is True
    from_zero = compare_reports(report(ram_static_bytes=0), report(ram_static_bytes=4), tmp_path / "o.json", 50.0)
    assert change(from_zero, "ram_static_bytes")["grew_beyond"] is True
    assert change(from_zero, "ram_static_bytes")["percent"] is None
    unlimited = compare_reports(report(flash_bytes=1000), report(flash_bytes=9000), tmp_path / "o.json")
    assert unlimited["grew_beyond"] == []  # without a limit nothing is marked


def test_a_symbol_table_only_one_report_has_is_not_compared(tmp_path):
    from peerfix.budget.compare import compare_reports

    older = report(flash_functions={"f": 10})  # written before the report listed tables
    cmp = compare_reports(older, report(flash_functions={"f": 10}, flash_data={"k": 64}), tmp_path / "o.json")
    assert cmp["symbols"] == []  # not "every table is new"
    assert any(n.startswith("flash_data is missing from the earlier report") for n in cmp["notes"])


def test_only_like_is_compared_with_like(tmp_path):
    from peerfix.budget.compare import compare_reports

    path = tmp_path / "old.json"
    with pytest.raises(InputError) as err:
        compare_reports(report(config="cortex-m0plus-O2"), report(), path)
    assert err.value.field == "config" and err.value.path == str(path) and "cortex-m0plus-O2" in str(err.value)
    with pytest.raises(InputError) as err:
        compare_reports(report(settings="robust preset"), report(), path)
    assert err.value.field == "settings"
    with pytest.raises(InputError) as err:
        compare_reports(report(quick=True), report(), path, max_growth_pct=5)
    assert err.value.field == "quick"
    notes = compare_reports(report(quick=True), report(), path)["notes"]
    assert any("different samples" in n for n in notes)


def test_a_bad_earlier_report_names_file_line_and_field(tmp_path):
    from peerfix.budget.compare import load_report

    missing = tmp_path / "none.json"
    with pytest.raises(InputError, match="no such file"):
        load_report(missing)
    broken = tmp_path / "broken.json"
    broken.write_text('{\n  "config": "cortex-m4-O2",\n  "flash_bytes": ,\n}\n')
    with pytest.raises(InputError) as err:
        load_report(broken)
    assert err.value.line == 3 and "not JSON" in str(err.value)
    lacking = tmp_path / "lacking.json"
    lacking.write_text(json.dumps({k: v for k, v in report().items() if k != "entries"}))
    with pytest.raises(InputError) as err:
        load_report(lacking)
    assert err.value.field == "entries"
    wrong = tmp_path / "wrong.json"
    wrong.write_text(json.dumps(report(stack_bytes="716 B"), indent=1))
    with pytest.raises(InputError) as err:
        load_report(wrong)
    text = wrong.read_text().splitlines()
    assert err.value.field == "stack_bytes" and '"stack_bytes"' in text[err.value.line - 1]


@needs_cross
def test_command_against_itself_and_against_a_smaller_release(tmp_path):
    status, stdout = run_cli(["budget", "--quick", "--json", "--out", str(tmp_path)])
    assert status == 0
    doc = json.loads(stdout)
    earlier = tmp_path / "budget.json"
    status, stdout = run_cli(["budget", "--quick", "--against", str(earlier), "--max-growth", "0"])
    assert status == 0  # the same core and calls: every figure unchanged
    assert f"## Against {earlier}" in stdout and "No function or table changed size." in stdout
    smaller = json.loads(earlier.read_text())
    smaller["flash_bytes"] = int(doc["flash_bytes"] * 0.9)  # as if the earlier release were 10 % smaller
    name, size = next(iter(doc["flash_functions"].items()))
    smaller["flash_functions"][name] = size - 40
    old = tmp_path / "smaller.json"
    old.write_text(json.dumps(smaller))
    status, stdout = run_cli(["budget", "--quick", "--json", "--against", str(old), "--max-growth", "5"])
    assert status == 1
    against = json.loads(stdout)["against"]
    assert against["grew_beyond"] == ["flash_bytes"]
    assert against["symbols"] == [{"symbol": name, "kind": "code", "before": size - 40, "now": size, "change": 40}]
    status, _ = run_cli(["budget", "--quick", "--against", str(old)])
    assert status == 0  # without --max-growth the change is listed, not failed
