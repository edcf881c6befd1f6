"""``python -m valuation evaluate``: the JSON contract, the text report, exit codes."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"


def run(*args, stdin=None):
    return subprocess.run([sys.executable, "-m", "valuation", *args], capture_output=True,
                          text=True, input=stdin, timeout=60)


def test_json_output_holds_the_documented_keys():
    done = run("evaluate", str(FIXTURES / "heating_payoff_table.json"), "--json")
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout)
    for key in ("expected_value", "policy", "without_information", "evpi", "studies"):
        assert key in result
    assert set(result["without_information"]) >= {"expected_value", "best_alternative"}
    study = result["studies"][0]
    for key in ("name", "evsi", "net_value", "efficiency", "signal_probabilities", "posteriors",
                "best_alternative_by_signal", "expected_value_with_study"):
        assert key in study
    # Invented demo (fixtures/heating_payoff_table.json), values worked by hand:
    # without information the shallow loop, 0.4 * 900,000 + 0.6 * 700,000 = 780,000.
    assert result["without_information"]["expected_value"] == pytest.approx(780_000)
    assert study["signal_probabilities"]["favourable"] == pytest.approx(0.46)


def test_risk_tolerance_adds_the_certainty_equivalent_and_prices_information_exactly():
    done = run("evaluate", str(FIXTURES / "heating_payoff_table.json"), "--json",
               "--risk-tolerance", "2000000")
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout)
    assert result["criterion"] == "exponential_utility"
    assert "certainty_equivalent" in result
    study = result["studies"][0]
    assert study["net_value"] == pytest.approx(study["evsi"] - study["cost"])


def test_text_report_states_the_plan_and_the_caution():
    done = run("evaluate", str(FIXTURES / "heating_tree.json"))
    assert done.returncode == 0, done.stderr
    assert "Recommended plan: At 'Heat source' choose 'Deep geothermal well'" in done.stdout
    assert "present value at 6% a year" in done.stdout
    assert "model outputs" in done.stdout


def test_invalid_model_exits_2_with_located_messages():
    bad = {"kind": "payoff_table", "states": [{"name": "a", "probability": 1.2}],
           "alternatives": [{"name": "x", "payoffs": {"a": 1}}]}
    done = run("evaluate", "-", stdin=json.dumps(bad))
    assert done.returncode == 2
    assert "error: states[0].probability: must be within [0, 1], got 1.2" in done.stderr
    assert "Traceback" not in done.stderr


@pytest.mark.parametrize(("content", "expected"), [
    ("{not json", "line 1 column 2"),
    ('{"kind": NaN}', "NaN is not a number JSON allows"),
    ("[" * 100000 + "]" * 100000, "error:"),
])
def test_unreadable_json_exits_2_without_a_traceback(tmp_path, content, expected):
    path = tmp_path / "bad.json"
    path.write_text(content)
    done = run("evaluate", str(path))
    assert done.returncode == 2
    assert expected in done.stderr
    assert "Traceback" not in done.stderr


def test_missing_file_exits_2():
    done = run("evaluate", "/nonexistent/model.json")
    assert done.returncode == 2
    assert "cannot read the file" in done.stderr


def test_negative_risk_tolerance_exits_2():
    done = run("evaluate", str(FIXTURES / "heating_tree.json"), "--risk-tolerance", "-1")
    assert done.returncode == 2
    assert "risk_tolerance: must be a positive finite number" in done.stderr


def test_a_model_whose_amounts_would_overflow_exits_2_and_prints_no_infinity():
    # 1.5e308 + 1.5e308 is beyond a double (IEEE 754, about 1.8e308): the expected value
    # was inf and --json failed with a traceback. The amounts' limit (project rule,
    # valuation.limits.AMOUNT_TOTAL_LIMIT) refuses the model with its location instead.
    doc = {"kind": "tree", "title": "t", "root": "d", "nodes": [
        {"id": "d", "kind": "decision", "branches": [
            {"label": "a", "to": "e", "cash_flow": 1.5e308}, {"label": "b", "to": "f"}]},
        {"id": "e", "kind": "end", "payoff": 1.5e308}, {"id": "f", "kind": "end", "payoff": 0}]}
    done = run("evaluate", "-", "--json", stdin=json.dumps(doc))
    assert done.returncode == 2
    assert done.stdout == ""
    assert done.stderr.startswith("error: nodes[0].branches[0].cash_flow: payoffs and cash flows "
                                  "(after discounting) must total less than 1e+300")
    assert "Traceback" not in done.stderr and "Infinity" not in done.stderr


def test_a_huge_risk_tolerance_recommends_what_the_expected_value_does():
    # Common practice (Howard 1988): exponential utility tends to the expected value as the
    # risk tolerance grows, so at R = 1e25 on the invented demo tree (amounts of about
    # 1e6) the plan is the risk-neutral one and its CE is its expected value.
    tree = str(FIXTURES / "heating_tree.json")
    neutral = run("evaluate", tree, "--json")
    averse = run("evaluate", tree, "--json", "--risk-tolerance", "1e25")
    assert neutral.returncode == 0, neutral.stderr
    assert averse.returncode == 0, averse.stderr
    assert "RuntimeWarning" not in averse.stderr
    expected, result = json.loads(neutral.stdout), json.loads(averse.stdout)
    assert result["policy"] == expected["policy"]
    assert result["without_information"]["best_alternative"] == \
        expected["without_information"]["best_alternative"]
    assert result["certainty_equivalent"] == pytest.approx(expected["expected_value"], rel=1e-9)
    assert result["evpi"] == pytest.approx(expected["evpi"], rel=1e-9)


def test_a_tiny_risk_tolerance_prints_no_numpy_warning():
    # An exponent overflowing to -inf is expected and handled (its exp is 0): no warning.
    for model in ("heating_tree.json", "heating_payoff_table.json"):
        done = run("evaluate", str(FIXTURES / model), "--json", "--risk-tolerance", "1e-320")
        assert done.returncode == 0, done.stderr
        assert "RuntimeWarning" not in done.stderr
        # The most risk-averse choice: the alternative with the best worst outcome.
        assert json.loads(done.stdout)["without_information"]["best_alternative"] == \
            "Shallow ground loop"
