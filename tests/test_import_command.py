"""``manage.py import_study_records``: all or nothing, line-numbered messages, exit code 2."""

from __future__ import annotations

import io

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError

from decisions.models import AuditEvent, StudyRecord
from tests.source_helpers import TELLURION_CSV, tellurion_source

pytestmark = pytest.mark.django_db

HEADER = "date,signal,state,note\n"
GOOD = "2024-01-05,favourable,hot reservoir,invented\n"


@pytest.fixture
def source(people):
    return tellurion_source(people, with_records=False)


def _run(*args):
    out = io.StringIO()
    call_command("import_study_records", *args, stdout=out)
    return out.getvalue()


def _refused(source, path, *extra) -> list[str]:
    events = AuditEvent.objects.count()
    with pytest.raises(CommandError) as err:
        _run(str(source.pk), str(path), "--as", "ana", *extra)
    assert err.value.returncode == 2
    assert StudyRecord.objects.count() == 0, "nothing may be imported from a bad file"
    assert AuditEvent.objects.count() == events
    return str(err.value).splitlines()


def test_a_good_file_is_imported_by_source_name(source):
    out = _run("Tellurion Surveys (invented)", str(TELLURION_CSV), "--as", "ana")
    assert out.splitlines()[0].startswith("Tellurion Surveys (invented): imported 30 records "
                                          "(2019-02-27 to 2026-09-23), file SHA-256 ")
    assert "hot reservoir: favourable 8, unfavourable 5" in out
    assert source.records.count() == 30


def test_a_dry_run_imports_nothing(source):
    out = _run(str(source.pk), str(TELLURION_CSV), "--as", "ana", "--dry-run")
    assert "would import 30 records" in out
    assert StudyRecord.objects.count() == 0


@pytest.mark.parametrize(("text", "messages"), [
    ("when,what,truth\n2024-01-01,favourable,hot reservoir\n",
     ["header: missing columns date, signal, state (found: when, what, truth; required: date, "
      "signal, state)"]),
    (HEADER + GOOD + "2024-01-06,glowing,hot reservoir,x\n2024-01-07,favourable,tepid,x\n",
     ["line 3: signal: unknown signal 'glowing' (known: favourable, unfavourable)",
      "line 4: state: unknown state 'tepid' (known: hot reservoir, cold reservoir)"]),
    (HEADER + "05/01/2024,favourable,hot reservoir,x\n2024-02-30,favourable,hot reservoir,x\n",
     ["line 2: date: must be a date in the form YYYY-MM-DD, got '05/01/2024'",
      "line 3: date: not a valid calendar date, got '2024-02-30' (day is out of range for month)"]),
    ("", ["file: is empty: expected a header line with the columns date, signal, state"]),
    (HEADER, ["file: has a header but no records"]),
    (HEADER + GOOD + GOOD,
     ["line 3: duplicate of line 2 (same date, signal, state and other columns)"]),
    (HEADER + "2024-01-05,favourable\n",
     ["line 2: expected 4 cells as in the header, got 2"]),
], ids=["wrong columns", "unknown signal and state", "bad dates", "empty file", "header only",
        "duplicate rows", "short row"])
def test_a_bad_file_is_refused_with_line_numbers_and_nothing_imported(source, tmp_path, text,
                                                                      messages):
    path = tmp_path / "records.csv"
    path.write_text(text, encoding="utf-8")
    lines = _refused(source, path)
    assert lines == [f"{path}: {m}" for m in messages] + ["nothing imported"]


def test_one_bad_row_among_good_ones_imports_none_of_them(source, tmp_path):
    rows = "".join(f"2023-01-{d:02d},favourable,hot reservoir,x\n" for d in range(1, 29))
    path = tmp_path / "records.csv"
    path.write_text(HEADER + rows + "2023-03-01,favourable,lukewarm,x\n", encoding="utf-8")
    assert _refused(source, path)[0].endswith("line 30: state: unknown state 'lukewarm' "
                                              "(known: hot reservoir, cold reservoir)")


def test_a_file_that_is_not_utf8_is_refused(source, tmp_path):
    path = tmp_path / "records.csv"
    # The bad byte: 23 bytes of header, then 39 before it on line 2.
    path.write_bytes((HEADER + "2024-01-05,favourable,hot reservoir,caf\xe9\n").encode("latin-1"))
    assert _refused(source, path)[0] == (f"{path}: line 2: not UTF-8 text (byte 62); save the "
                                         "file as UTF-8")


def test_a_50_mb_file_is_refused_from_its_size_and_nothing_imported(source, tmp_path):
    path = tmp_path / "big.csv"
    chunk = (GOOD * 20_000).encode("utf-8")  # about 0.9 MB of valid-looking rows
    with path.open("wb") as fh:
        fh.write(HEADER.encode("utf-8"))
        while fh.tell() < 50 * 1024 * 1024:
            fh.write(chunk)
    lines = _refused(source, path)
    assert lines[0].startswith(f"{path}: file: larger than 16,777,216 bytes (")
    assert "split the file and import it in parts" in lines[0]


def test_unknown_source_user_or_file_is_a_clear_error(source, people, tmp_path):
    with pytest.raises(CommandError) as err:
        _run("No such source", str(TELLURION_CSV), "--as", "ana")
    assert str(err.value) == ("SOURCE: no study source 'No such source' (id or exact name) among "
                              "the teams of ana")
    with pytest.raises(CommandError) as err:
        _run(str(source.pk), str(TELLURION_CSV), "--as", "omar")  # another team's source
    assert "no study source" in str(err.value)
    with pytest.raises(CommandError) as err:
        _run(str(source.pk), str(TELLURION_CSV), "--as", "nobody")
    assert str(err.value).startswith("--as: no active register user 'nobody'")
    with pytest.raises(CommandError) as err:
        _run(str(source.pk), str(tmp_path / "missing.csv"), "--as", "ana")
    assert str(err.value) == f"{tmp_path / 'missing.csv'}: cannot be read (No such file or directory)"
    with pytest.raises(CommandError) as err:
        _run(str(source.pk), str(TELLURION_CSV), "--as", "vic")  # a viewer may not import
    assert "needs the role 'analyst'" in str(err.value)
    assert StudyRecord.objects.count() == 0
