"""``python -m valuation reliability``: exit codes, the JSON document, messages without tracebacks."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from scipy import stats

from valuation.cli import main
from valuation.records_csv import read_records_csv
from valuation.reliability import score_record

ROOT = Path(__file__).resolve().parent.parent
CLAIMED = ROOT / "fixtures" / "tellurion_claimed.json"
RECORDS = ROOT / "fixtures" / "tellurion_records.csv"


def run_cli(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(["reliability", *map(str, argv)])
    out, err = capsys.readouterr()
    return code, out, err


def test_json_report_of_the_invented_demo_has_every_key(capsys):
    code, out, err = run_cli(capsys, RECORDS, "--claimed", CLAIMED, "--json")
    assert code == 0 and err == ""
    doc = json.loads(out)
    for key in ("states", "brier", "log_score", "hit_rate", "prior_strength", "records", "caution"):
        assert key in doc
    assert doc["records"] == 30 and doc["prior_strength"] == 10.0
    hot = doc["states"]["hot reservoir"]
    assert 0.0 <= hot["prob_below_claim"] <= 1.0
    for signal in ("favourable", "unfavourable"):
        cell = hot["signals"][signal]
        for key in ("claimed", "observed", "count", "posterior_mean", "interval_90"):
            assert key in cell
        assert len(cell["interval_90"]) == 2
    # scipy.stats.beta: 8 favourable and 5 unfavourable hot records on a Beta(8.5, 1.5) prior.
    assert hot["signals"]["favourable"]["count"] == 8
    assert hot["prob_below_claim"] == pytest.approx(stats.beta.cdf(0.85, 16.5, 6.5))
    assert hot["signals"]["favourable"]["interval_90"] == pytest.approx(
        list(stats.beta.ppf([0.05, 0.95], 16.5, 6.5))
    )
    # The invented record was made to fall short of the claim.
    assert hot["signals"]["favourable"]["posterior_mean"] < 0.85
    assert doc["states"]["cold reservoir"]["signals"]["unfavourable"]["posterior_mean"] < 0.80
    assert doc["prior_source"].startswith("uniform")


def test_json_scores_match_score_record_on_the_claim(capsys):
    code, out, _ = run_cli(capsys, RECORDS, "--claimed", CLAIMED, "--json")
    assert code == 0
    doc = json.loads(out)
    claimed = json.loads(CLAIMED.read_text())
    expected = score_record(claimed, None, read_records_csv(RECORDS))
    assert doc["brier"] == pytest.approx(expected["brier"])
    assert doc["log_score"] == pytest.approx(expected["log_score"])
    assert doc["hit_rate"] == pytest.approx(19 / 30)


def test_prior_strength_and_window_options_reach_the_figures(capsys):
    code, out, _ = run_cli(
        capsys, RECORDS, "--claimed", CLAIMED, "--prior-strength", "2", "--window", "10", "--json"
    )
    assert code == 0
    doc = json.loads(out)
    assert doc["prior_strength"] == 2.0
    # Beta(1.7 + 8, 0.3 + 5), scipy.
    fav = doc["states"]["hot reservoir"]["signals"]["favourable"]
    assert fav["posterior_mean"] == pytest.approx(9.7 / 15)
    windows = doc["rolling"]["windows"]
    assert len(windows) == 21 and all(w["records"] == 10 for w in windows)
    assert windows[-1]["end_date"] == "2026-09-23"


def test_text_report_is_an_aligned_table_with_the_caution(capsys):
    code, out, err = run_cli(capsys, RECORDS, "--claimed", CLAIMED, "--window", "10")
    assert code == 0 and err == ""
    lines = out.splitlines()
    header = next(i for i, line in enumerate(lines) if line.startswith("state "))
    table = lines[header : header + 6]
    assert table[1].startswith("-----")
    # Aligned: the "claimed" column ends at the same place on every row.
    end = table[0].index("claimed") + len("claimed")
    assert all(row[end - 5 : end] in {"0.850", "0.150", "0.200", "0.800"} for row in table[2:])
    assert "P(favourable | hot reservoir) below 0.85: 0.938" in out
    assert "Rolling windows of 10 records" in out
    assert "model outputs" in out and "professional judgment" in out


def test_a_bad_records_file_exits_2_with_line_numbered_messages(tmp_path, capsys):
    bad = tmp_path / "bad.csv"
    bad.write_text(
        "date,signal,state\n"
        "2021-01-01,favourable,hot reservoir\n"
        "2021-13-01,favourable,hot reservoir\n"
        "2021-01-03,favourable,tepid\n",
        encoding="utf-8",
    )
    code, out, err = run_cli(capsys, bad, "--claimed", CLAIMED, "--json")
    assert code == 2 and out == ""
    assert err.splitlines() == [
        f"error: {bad}: line 3: date: not a valid calendar date, got '2021-13-01' "
        "(month must be in 1..12)",
        f"error: {bad}: line 4: state: unknown state 'tepid' (known: hot reservoir, cold reservoir)",
    ]


def test_a_bad_claim_exits_2_naming_the_cell(tmp_path, capsys):
    claim = tmp_path / "claim.json"
    claim.write_text('{"hot reservoir": {"favourable": 0.9, "unfavourable": 0.15}}')
    code, _, err = run_cli(capsys, RECORDS, "--claimed", claim)
    assert code == 2
    assert err == (
        f"error: {claim}: claimed['hot reservoir']: probabilities must sum to 1 (within 1e-6), "
        "got 1.05\n"
    )


@pytest.mark.parametrize(
    ("content", "fragment"),
    [
        ('{"a": {"x": 0.5, "y": 0.5}, "a": {"x": 0.5, "y": 0.5}}', "key 'a' appears more than once"),
        ('{"a": {"x": NaN, "y": 0.5}}', "NaN is not a number JSON allows"),
        ('{"a": ', "line 1 column 7"),
    ],
)
def test_malformed_claim_files_exit_2(tmp_path, capsys, content, fragment):
    claim = tmp_path / "claim.json"
    claim.write_text(content)
    code, _, err = run_cli(capsys, RECORDS, "--claimed", claim)
    assert code == 2 and fragment in err and "Traceback" not in err


def test_missing_files_and_bad_options_exit_2(tmp_path, capsys):
    code, _, err = run_cli(capsys, tmp_path / "nope.csv", "--claimed", CLAIMED)
    assert code == 2 and "cannot read the file" in err
    code, _, err = run_cli(capsys, RECORDS, "--claimed", CLAIMED, "--prior-strength", "0")
    assert code == 2 and err.startswith("error: --prior-strength: must be a number greater than 0")
    code, _, err = run_cli(capsys, RECORDS, "--claimed", CLAIMED, "--window", "0")
    assert code == 2 and err.startswith("error: --window:")


def test_an_empty_records_file_exits_2(tmp_path, capsys):
    empty = tmp_path / "empty.csv"
    empty.write_text("")
    code, _, err = run_cli(capsys, empty, "--claimed", CLAIMED)
    assert code == 2
    assert err == f"error: {empty}: file: is empty: expected a header line with the columns date, signal, state\n"


def test_a_true_state_rated_impossible_gives_null_log_score_and_says_why(tmp_path, capsys):
    claim = tmp_path / "claim.json"
    claim.write_text('{"hot": {"yes": 1.0, "no": 0.0}, "cold": {"yes": 0.0, "no": 1.0}}')
    records = tmp_path / "r.csv"
    records.write_text("date,signal,state\n2021-01-01,yes,cold\n")
    code, out, _ = run_cli(capsys, records, "--claimed", claim, "--json")
    assert code == 0
    doc = json.loads(out)
    assert doc["log_score"] is None
    assert "log_score" in doc["non_finite"]["fields"]
    assert doc["floored_cells"] == [["hot", "no"], ["cold", "yes"]]


def test_the_module_entry_point_prints_no_traceback_on_bad_input(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("when,what\n1,2\n")
    result = subprocess.run(
        [sys.executable, "-m", "valuation", "reliability", str(bad), "--claimed", str(CLAIMED)],
        capture_output=True,
        text=True,
        cwd=ROOT,
    )
    assert result.returncode == 2
    assert "header: missing columns date, signal, state" in result.stderr
    assert "Traceback" not in result.stderr


def test_a_long_record_gets_a_step_that_keeps_the_rolling_report_small(tmp_path, capsys):
    rows = ["date,signal,state"] + [
        f"{2000 + i // 360}-{1 + (i // 30) % 12:02d}-{1 + i % 28:02d},favourable,hot reservoir,{i}"
        for i in range(6_000)
    ]
    path = tmp_path / "long.csv"
    path.write_text("date,signal,state,n\n" + "\n".join(rows[1:]) + "\n")
    code, out, err = run_cli(capsys, path, "--claimed", CLAIMED, "--window", "20", "--json")
    assert code == 0, err
    roll = json.loads(out)["rolling"]
    # 5,981 windows at step 1; the least step keeping to 5,000 is ceil(5,981 / 5,000) = 2.
    assert roll["step"] == 2 and len(roll["windows"]) == 2991
    code, _, err = run_cli(capsys, path, "--claimed", CLAIMED, "--window", "20", "--step", "1")
    assert code == 2
    assert err == (
        "error: --step: 5,981 windows of 20 records is more than 5,000; "
        "use a step of at least 2\n"
    )


def test_a_prior_file_is_used_for_the_scores(tmp_path, capsys):
    prior = tmp_path / "prior.json"
    prior.write_text('{"hot reservoir": 0.4, "cold reservoir": 0.6}')
    code, out, _ = run_cli(capsys, RECORDS, "--claimed", CLAIMED, "--prior", prior, "--json")
    assert code == 0
    doc = json.loads(out)
    claimed = json.loads(CLAIMED.read_text())
    expected = score_record(
        claimed, {"hot reservoir": 0.4, "cold reservoir": 0.6}, read_records_csv(RECORDS)
    )
    assert doc["prior_source"] == "given"
    assert doc["brier"] == pytest.approx(expected["brier"])
    prior.write_text('{"hot reservoir": 0.4, "cold reservoir": 0.7}')
    code, _, err = run_cli(capsys, RECORDS, "--claimed", CLAIMED, "--prior", prior)
    assert code == 2
    assert err == f"error: {prior}: prior: probabilities must sum to 1 (within 1e-6), got 1.1\n"


def test_help_describes_the_files():
    result = subprocess.run(
        [sys.executable, "-m", "valuation", "reliability", "--help"],
        capture_output=True,
        text=True,
        cwd=ROOT,
    )
    assert result.returncode == 0
    assert "CLAIMED.json" in result.stdout and "--prior-strength" in result.stdout


@pytest.mark.parametrize(
    ("strength", "shown"), [("1e20", "1e+20"), ("1e300", "1e+300"), ("1000000.5", "1000000.5")]
)
def test_prior_strength_is_capped_at_the_apis_limit(tmp_path, capsys, strength, shown):
    claim = tmp_path / "claim.json"
    claim.write_text('{"hot": {"good": 1.0, "poor": 0.0}, "cold": {"good": 0.2, "poor": 0.8}}')
    records = tmp_path / "r.csv"
    records.write_text("date,signal,state\n2024-01-01,poor,hot\n2024-01-02,good,cold\n")
    # The probe: 1e20 gave NaN intervals under a false note, 1e300 reversed intervals.
    code, out, err = run_cli(
        capsys, records, "--claimed", claim, "--prior-strength", strength, "--json"
    )
    assert code == 2 and out == ""
    assert err == (
        "error: --prior-strength: must be at most 1,000,000 past studies (a claim worth more "
        f"is a typing mistake), got {shown}\n"
    )
    code, out, err = run_cli(
        capsys, records, "--claimed", claim, "--prior-strength", "1000000", "--json"
    )
    assert code == 0, err
    doc = json.loads(out)
    low, high = doc["states"]["hot"]["signals"]["good"]["interval_90"]
    # scipy.stats.beta: hot's "good" marginal is Beta(1e6, 0.01 + 1) (claimed 0 floored).
    assert [low, high] == pytest.approx(list(stats.beta.ppf([0.05, 0.95], 1e6, 1.01)), rel=1e-9)
    assert low < high
    # The only figure that is not finite is the claim's log score, and the note says why.
    assert doc["log_score"] is None
    assert doc["non_finite"]["fields"] == ["log_score"]
    assert doc["non_finite"]["meaning"] == (
        "minus infinity: a state that came true had been given probability 0"
    )


def test_a_claim_with_a_signal_no_state_gives_exits_2(tmp_path, capsys):
    claim = tmp_path / "claim.json"
    claim.write_text('{"hot": {"good": 1, "poor": 0}, "cold": {"good": 1, "poor": 0}}')
    records = tmp_path / "r.csv"
    records.write_text("date,signal,state\n2024-01-01,good,hot\n")
    code, out, err = run_cli(capsys, records, "--claimed", claim, "--json")
    assert code == 2 and out == ""
    assert err == (
        f"error: {claim}: claimed: signal 'poor' has probability 0 in every state: no state "
        "could give it, and a record of it could not be scored; give it a probability above 0 "
        "in some state, or leave it out\n"
    )
