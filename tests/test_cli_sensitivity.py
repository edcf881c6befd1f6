"""``python -m valuation sensitivity``: modes, JSON and text output, exit codes, messages."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from valuation.cli import main
from valuation.parameters import RESCALING_NOTE
from valuation.report import CAUTION

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"
TABLE = str(FIXTURES / "heating_payoff_table.json")  # invented demo model
TREE = str(FIXTURES / "heating_tree.json")  # invented demo model


def cli(capsys, *args):
    code = main(["sensitivity", *args])
    out, err = capsys.readouterr()
    return code, out, err


def test_the_module_runs_as_a_command():
    done = subprocess.run([sys.executable, "-m", "valuation", "sensitivity", TABLE, "--list", "--json"],
                          capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    doc = json.loads(done.stdout)
    assert doc["mode"] == "list"
    assert doc["result"][0]["name"] == "states[0].probability"


def test_list_prints_an_aligned_table_of_inputs(capsys):
    code, out, _ = cli(capsys, TABLE, "--list")
    assert code == 0
    lines = out.splitlines()
    assert lines[0].split() == ["Input", "Kind", "Base", "Label"]
    row = next(line for line in lines if line.startswith("studies[0].cost"))
    assert row.split()[1:3] == ["cost", "220,000.00"]
    assert "Cost of Tellurion seismic survey" in row
    assert RESCALING_NOTE in out


def test_one_way_json_holds_the_sweep_and_the_break_even_values(capsys):
    code, out, _ = cli(capsys, TABLE, "--parameter", "states[0].probability", "--points", "11", "--json")
    assert code == 0
    result = json.loads(out)["result"]
    assert len(result["x"]) == 11
    assert [round(b["value"], 6) for b in result["break_even"]] == [0.296629, 0.742169]
    assert result["plan"][0] == "No study; Shallow ground loop"


def test_one_way_text_shows_points_plans_break_evens_and_the_caution(capsys):
    code, out, _ = cli(capsys, TABLE, "--parameter", "studies[0].cost", "--low", "0", "--high",
                       "600000", "--points", "7")
    assert code == 0
    assert "One-way sensitivity to Cost of Tellurion seismic survey (studies[0].cost)" in out
    assert "Expected value (EUR)" in out
    assert "Break-even values (the best plan changes):" in out
    assert CAUTION in out
    assert RESCALING_NOTE not in out  # a fee is not a probability


def test_a_hand_over_by_the_tie_rule_is_explained_in_the_text(capsys, tmp_path):
    # Invented check model: the later alternative is 2e-9 better in every state, which
    # counts only once the best value falls under 2 (tie tolerance 1e-9 x the best value).
    doc = {"kind": "payoff_table", "title": "tie check (invented)",
           "states": [{"name": "s1", "probability": 0.5}, {"name": "s2", "probability": 0.5}],
           "alternatives": [{"name": "First", "payoffs": {"s1": 0.0, "s2": 10.0}},
                            {"name": "Later", "payoffs": {"s1": 2e-9, "s2": 10.0 + 2e-9}}],
           "studies": []}
    path = tmp_path / "tie.json"
    path.write_text(json.dumps(doc))
    code, out, _ = cli(capsys, str(path), "--parameter", "states[0].probability", "--points", "5")
    assert code == 0
    line = next(x for x in out.splitlines() if x.startswith("  at "))
    assert line == ("  at 0.8: 'First' -> 'Later' (they do not cross here: both worth 2.00 to "
                    "within the tie tolerance, and the tie rule prefers the first in document "
                    "order)")


def test_an_exact_break_even_says_both_plans_are_worth_the_same(capsys):
    code, out, _ = cli(capsys, TABLE, "--parameter", "studies[0].cost", "--low", "0", "--high",
                       "600000", "--points", "7")
    assert code == 0
    lines = [x for x in out.splitlines() if x.startswith("  at ")]
    assert lines and all(x.endswith(")") and "(both worth " in x for x in lines)
    assert not any("tie" in x for x in lines)


def test_one_way_with_explicit_values_and_a_risk_tolerance(capsys):
    code, out, _ = cli(capsys, TREE, "--parameter", "nodes[1].branches[0].probability",
                       "--values", "0.2,0.6", "--risk-tolerance", "3000000", "--json")
    assert code == 0
    result = json.loads(out)["result"]
    assert result["x"] == [0.2, 0.6]
    assert result["criterion"] == "certainty_equivalent"
    assert len(result["certainty_equivalent"]) == 2


def test_tornado_text_is_sorted_by_swing_and_can_show_the_top_rows(capsys):
    code, out, _ = cli(capsys, TABLE, "--tornado", "--top", "3", "--json")
    assert code == 0
    rows = json.loads(out)["result"]
    assert len(rows) == 3
    assert [r["swing"] for r in rows] == sorted((r["swing"] for r in rows), reverse=True)
    code, out, _ = cli(capsys, TABLE, "--tornado", "--top", "3")
    assert code == 0
    assert "Swing" in out.splitlines()[2]
    assert rows[0]["label"] in out.splitlines()[4]


def test_two_way_prints_a_map_of_plans_with_a_legend(capsys):
    code, out, _ = cli(capsys, TABLE, "--two-way", "states[0].probability", "studies[0].cost",
                       "--x-values", "0.1,0.5,0.9", "--y-values", "0,500000")
    assert code == 0
    assert "Best plan by P(hot reservoir) (across) and Cost of Tellurion seismic survey (down)" in out
    assert "A = No study; Shallow ground loop" in out
    assert "500,000 |" in out


def test_two_way_defaults_to_eleven_points_per_axis(capsys):
    code, out, _ = cli(capsys, TABLE, "--two-way", "states[0].probability", "studies[0].cost", "--json")
    assert code == 0
    result = json.loads(out)["result"]
    assert len(result["x"]["values"]) == 11 and len(result["best"]) == 11


@pytest.mark.parametrize(("args", "message"), [
    ([TABLE, "--parameter", "states[9].probability"],
     "error: states[9].probability: not an input of this model (list_parameters names every input)"),
    ([TABLE, "--parameter", "states[0].probability", "--values", "0.2,abc"],
     "error: --values: must be numbers separated by commas, got '0.2,abc'"),
    ([TABLE, "--parameter", "states[0].probability", "--values", "0.5", "--points", "5"],
     "error: --values: give either explicit values or --low/--high/--points"),
    ([TABLE, "--parameter", "states[0].probability", "--high", "1.5"],
     "error: states[0].probability: must be within [0, 1], got 1.5"),
    ([TABLE, "--parameter", "states[0].probability", "--points", "0"],
     "error: points: must be a whole number within [2, 100000], got 0"),
    ([TABLE, "--two-way", "states[0].probability", "studies[0].cost", "--points", "0"],
     "error: points: must be a whole number within [2, 100000], got 0"),
    ([TABLE, "--tornado", "--top", "0"], "error: --top: must be 1 or more, got 0"),
    ([TABLE, "--tornado", "--low", "3"], "error: --low: only applies to a one-way sweep (--parameter)"),
    ([TABLE, "--tornado", "--swing", "0"], "error: swing: must be a positive number, got 0.0"),
    ([TABLE, "--tornado", "--risk-tolerance", "nan"],
     "error: risk_tolerance: must be a positive finite number, got nan"),
    ([TABLE, "--two-way", "states[0].probability", "states[1].probability"],
     "error: states[1].probability: same chance node or likelihood row as states[0].probability; "
     "setting one rescales the other, so they cannot vary independently"),
    ([str(FIXTURES / "missing.json"), "--list"],
     f"error: {FIXTURES / 'missing.json'}: cannot read the file (No such file or directory)"),
])
def test_bad_input_exits_2_with_one_clear_message(capsys, args, message):
    code, out, err = cli(capsys, *args)
    assert code == 2
    assert out == ""
    assert err.strip() == message
    assert "Traceback" not in err


def test_an_invalid_document_lists_every_problem(capsys, tmp_path):
    doc = json.loads(Path(TABLE).read_text())
    doc["states"][0]["probability"] = 1.2
    doc["studies"][0]["cost"] = -1
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(doc))
    code, out, err = cli(capsys, str(path), "--tornado")
    assert (code, out) == (2, "")
    lines = err.strip().splitlines()
    assert "error: states[0].probability: must be within [0, 1], got 1.2" in lines
    assert "error: studies[0].cost: must be zero or more, got -1" in lines


def test_a_mode_is_required(capsys):
    with pytest.raises(SystemExit) as info:
        main(["sensitivity", TABLE])
    assert info.value.code == 2
    assert "one of the arguments --list --parameter --tornado --two-way is required" in \
        capsys.readouterr().err
