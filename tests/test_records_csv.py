"""Reading a study source's record from CSV (valuation.records_csv): all or nothing, every bad
line named by its number; and the CSV-injection defence for exports (OWASP, common practice)."""

from __future__ import annotations

import datetime as dt
import io
from pathlib import Path

import pytest

from valuation.errors import ModelValidationError
from valuation.records_csv import (
    MAX_BYTES,
    MAX_ROWS,
    neutralise_csv_cell,
    parse_records_csv,
    read_records_csv,
)
from valuation.reliability import Record

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"
STATES = ["hot", "warm", "cold"]
SIGNALS = ["good", "poor"]


def read(text: str, **kwargs):
    kwargs.setdefault("known_states", STATES)
    kwargs.setdefault("known_signals", SIGNALS)
    return parse_records_csv(text, **kwargs)


def messages(text: str, **kwargs) -> list[str]:
    with pytest.raises(ModelValidationError) as excinfo:
        read(text, **kwargs)
    return [str(p) for p in excinfo.value.problems]


def test_a_good_file_gives_records_in_file_order():
    text = "date,signal,state\n2021-03-04,good,hot\n2020-01-02,poor,cold\n"
    assert read(text) == [
        Record(dt.date(2021, 3, 4), "good", "hot"),
        Record(dt.date(2020, 1, 2), "poor", "cold"),
    ]


def test_header_is_case_insensitive_trimmed_and_other_columns_are_ignored():
    text = "\ufeff Note , STATE ,Date,Signal\r\nfirst,warm , 2022-12-31 ,good\r\n\r\n  \nx,hot,2023-01-01,poor\r\n"
    assert read(text) == [
        Record(dt.date(2022, 12, 31), "good", "warm"),
        Record(dt.date(2023, 1, 1), "poor", "hot"),
    ]


def test_without_known_names_any_non_empty_name_is_accepted():
    recs = parse_records_csv("date,signal,state\n2021-01-01,yes,tepid\n")
    assert recs == [Record(dt.date(2021, 1, 1), "yes", "tepid")]


def test_every_bad_line_is_reported_with_its_number_and_nothing_is_returned():
    text = (
        "date,signal,state,note\n"  # line 1
        "2021-01-01,good,hot,a\n"  # 2 fine
        "2021-01-02,good,tepid,b\n"  # 3 unknown state
        "\n"  # 4 blank, skipped
        "2021/01/05,good,hot,c\n"  # 5 bad date form
        "2021-02-30,poor,cold,d\n"  # 6 impossible date
        "2021-01-07,great,warm,e\n"  # 7 unknown signal
        "2021-01-01,good,hot,a\n"  # 8 duplicate of 2
        "2021-01-09,good\n"  # 9 too few cells
        "2021-01-10,,cold,f\n"  # 10 empty signal
        "2021-01-11,poor,cold,g\n"  # 11 fine
    )
    assert messages(text) == [
        "line 3: state: unknown state 'tepid' (known: hot, warm, cold)",
        "line 5: date: must be a date in the form YYYY-MM-DD, got '2021/01/05'",
        "line 6: date: not a valid calendar date, got '2021-02-30' (day is out of range for month)",
        "line 7: signal: unknown signal 'great' (known: good, poor)",
        "line 8: duplicate of line 2 (same date, signal, state and other columns)",
        "line 9: expected 4 cells as in the header, got 2",
        "line 10: signal: is empty",
    ]


def test_rows_differing_only_in_another_column_are_not_duplicates():
    text = "date,signal,state,note\n2021-01-01,good,hot,a\n2021-01-01,good,hot,b\n"
    assert len(read(text)) == 2


def test_line_numbers_count_physical_lines_across_a_quoted_multi_line_cell():
    text = 'date,signal,state,note\n2021-01-01,good,hot,"two\nlines"\n2021-01-02,good,tepid,x\n'
    assert messages(text) == ["line 4: state: unknown state 'tepid' (known: hot, warm, cold)"]


def test_wrong_case_of_a_known_name_gets_a_hint():
    [message] = messages("date,signal,state\n2021-01-01,good,Hot\n")
    assert message == (
        "line 2: state: unknown state 'Hot' (known: hot, warm, cold; names are case-sensitive)"
    )


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("", "file: is empty: expected a header line with the columns date, signal, state"),
        ("\n \n\n", "file: is empty: expected a header line with the columns date, signal, state"),
        (
            "date,signal,outcome\n2021-01-01,good,hot\n",
            "header: missing column state (found: date, signal, outcome; required: date, signal, state)",
        ),
        (
            "when;what;truth\n",
            "header: missing columns date, signal, state (found: when;what;truth; "
            "required: date, signal, state)",
        ),
        ("date,signal,state,Date\n2021-01-01,good,hot,x\n", "header: column 'date' appears more than once"),
        ("date,signal,state\n\n", "file: has a header but no records"),
    ],
)
def test_empty_files_and_wrong_columns_are_reported(text, expected):
    assert messages(text) == [expected]


def test_bad_quoting_is_reported_with_its_line_and_reading_stops():
    text = 'date,signal,state\n2021-01-01,good,hot\n2021-01-02,"good"x,hot\n'
    [message] = messages(text)
    assert message.startswith("line 3: unreadable CSV")


def test_a_file_over_the_row_limit_is_refused(tmp_path):
    path = tmp_path / "many.csv"
    rows = ["date,signal,state"] + [f"2021-01-01,good,hot,{i}" for i in range(12)]
    path.write_text("date,signal,state,n\n" + "\n".join(rows[1:]) + "\n", encoding="utf-8")
    with pytest.raises(ModelValidationError) as excinfo:
        read_records_csv(path, max_rows=10)
    assert [str(p) for p in excinfo.value.problems] == [
        "file: more than 10 records; split the file and import it in parts"
    ]
    assert MAX_ROWS == 200_000


def test_a_50_mb_file_is_refused_before_it_is_parsed(tmp_path, monkeypatch):
    path = tmp_path / "huge.csv"
    with open(path, "wb") as fh:
        fh.write(b"date,signal,state,note\n2021-01-01,good,hot,x\n")
        fh.truncate(50 * 1024 * 1024)  # sparse: 50 MB on paper, fast to make

    def must_not_parse(*args, **kwargs):
        raise AssertionError("an oversize file must be refused before parsing")

    monkeypatch.setattr("valuation.records_csv.parse_records_csv", must_not_parse)
    with pytest.raises(ModelValidationError) as excinfo:
        read_records_csv(path, known_states=STATES, known_signals=SIGNALS)
    [problem] = excinfo.value.problems
    assert problem.location == "file"
    assert problem.message == (
        f"larger than {MAX_BYTES:,} bytes (52,428,800 bytes); at most 200,000 records per file, "
        "split the file and import it in parts"
    )


def test_a_file_object_over_the_byte_limit_is_refused_after_reading_only_the_limit():
    data = io.BytesIO(b"date,signal,state\n" + b"2021-01-01,good,hot\n" * 100)
    with pytest.raises(ModelValidationError) as excinfo:
        read_records_csv(data, max_bytes=200)
    assert excinfo.value.problems[0].message.startswith("larger than 200 bytes")
    assert data.tell() == 201


def test_a_file_that_is_not_utf8_is_refused_with_its_line(tmp_path):
    path = tmp_path / "latin1.csv"
    path.write_bytes("date,signal,state\n2021-01-01,good,hot\n2021-01-02,gööd,hot\n".encode("latin-1"))
    with pytest.raises(ModelValidationError) as excinfo:
        read_records_csv(path)
    [problem] = excinfo.value.problems
    assert problem.location == "line 3"
    assert "not UTF-8" in problem.message


def test_reading_from_a_path_gives_the_same_records_as_parsing_the_text(tmp_path):
    text = "date,signal,state\n2021-03-04,good,hot\n"
    path = tmp_path / "ok.csv"
    path.write_text(text, encoding="utf-8")
    assert read_records_csv(str(path), known_states=STATES) == read(text)


def test_the_list_of_problems_is_capped_and_says_how_many_more():
    text = "date,signal,state\n" + "".join(f"2021-01-01,good,tepid{i}\n" for i in range(250))
    problems = messages(text)
    assert len(problems) == 201
    assert problems[0].startswith("line 2: state: unknown state 'tepid0'")
    assert problems[-1] == "file: 50 more problems not listed"


def test_the_invented_demo_record_reads_cleanly():
    recs = read_records_csv(
        FIXTURES / "tellurion_records.csv",
        known_states=["hot reservoir", "cold reservoir"],
        known_signals=["favourable", "unfavourable"],
    )
    assert len(recs) == 30
    assert min(r.date for r in recs).year >= 2019 and max(r.date for r in recs).year <= 2026


# --- CSV injection defence (OWASP "CSV Injection"; common practice) ------------------------


@pytest.mark.parametrize(
    ("cell", "expected"),
    [
        ("=1+1", "'=1+1"),
        ("+1", "'+1"),
        ("-2+3", "'-2+3"),
        ("@SUM(A1)", "'@SUM(A1)"),
        ("\tx", "'\tx"),
        ("\rx", "'\rx"),
        ("favourable", "favourable"),
        ("a=b", "a=b"),
        ("", ""),
        (None, ""),
        (-0.5, "-0.5"),
        (3, "3"),
        (True, "True"),
    ],
)
def test_neutralise_csv_cell_quotes_formula_starts(cell, expected):
    assert neutralise_csv_cell(cell) == expected
