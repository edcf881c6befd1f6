"""The chain walked in slices by two forked processes reports what one walk reports.

Other processes only see committed rows in a database they can open, so these tests
commit their chain: on PostgreSQL the walk runs from the test; on SQLite the test's
in-memory database is copied to a file and ``manage.py verify_audit`` runs on it in a
child process, as an operator would run it. Slices of 3 events make a dozen-event chain span several slices.
"""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
from django.db import connection, connections

from decisions.models import AuditEvent
from decisions.services import audit_verify
from decisions.services import decisions as svc
from decisions.services.audit import verify_chain
from tests.dbutil import purge_register, triggers_off

ROOT = Path(__file__).resolve().parents[1]
PIDS_FILE_VARIABLE = "AUDIT_VERIFY_TEST_PIDS"


def _more_events(people):
    for title in ("Second heat source (invented)", "Third heat source (invented)"):
        svc.create_decision(actor=people.ana, team=people.team, title=title,
                            policy={"financial review": 1})


def _break_link(seq):
    with triggers_off(), connection.cursor() as cur:
        cur.execute("UPDATE decisions_auditevent SET prev_hash = %s WHERE seq = %s", ["c" * 64, seq])


_walk_here = audit_verify._walk_stored_slice


def _walk_noting_the_process(lo_hi, page_size):
    """Stands in for the slice walk; runs in the forked child and notes its process id."""
    with open(os.environ[PIDS_FILE_VARIABLE], "a", encoding="utf-8") as pids:
        pids.write(f"{os.getpid()}\n")
    return _walk_here(lo_hi, page_size)


@pytest.fixture
def committed_chain(people):
    _more_events(people)
    yield AuditEvent.objects.count()
    purge_register()  # the append-only tables, so the runner's flush can empty the rest


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_two_processes_walk_the_slices_on_postgresql(committed_chain, monkeypatch, tmp_path):
    pids = tmp_path / "pids"
    monkeypatch.setenv(PIDS_FILE_VARIABLE, str(pids))
    monkeypatch.setattr(audit_verify, "_walk_stored_slice", _walk_noting_the_process)
    whole = verify_chain()
    assert whole.ok and whole.count == committed_chain >= 10
    pids.write_text("")

    assert verify_chain(processes=2, slice_size=3).as_dict() == whole.as_dict()
    children = {int(pid) for pid in pids.read_text().split()}
    assert len(pids.read_text().split()) == -(-committed_chain // 3)  # one walk per slice
    assert children and os.getpid() not in children

    _break_link(7)  # the first event of the third slice
    broken = verify_chain(processes=2, slice_size=3)
    assert broken.first_break == "event #7: prev_hash does not match the hash of event #6"
    assert broken.as_dict() == verify_chain().as_dict()
    assert broken.count == 6


def test_no_process_is_forked_inside_a_transaction(draft, monkeypatch):
    # The test's transaction holds the chain; another process could not see it.
    def no_fork(*args, **kwargs):
        raise AssertionError("a process pool was started")

    monkeypatch.setattr(audit_verify.multiprocessing, "get_context", no_fork)
    # Only the open transaction may stop the fork here, not SQLite's in-memory database.
    monkeypatch.setattr(type(connections["default"]), "is_in_memory_db", lambda self: False,
                        raising=False)
    assert connection.in_atomic_block
    assert verify_chain(processes=2, slice_size=1).ok


def _run_verify_audit(database: Path, *options: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "DATABASE_URL": f"sqlite:///{database}", "DEBUG": "false",
           "DECISIONS_DATA_DIR": str(database.parent), "DJANGO_SETTINGS_MODULE": "decisions.settings"}
    return subprocess.run([sys.executable, str(ROOT / "manage.py"), "verify_audit", *options],
                          cwd=ROOT, env=env, capture_output=True, text=True, timeout=120, check=False)


def _copy_to_file(path: Path) -> Path:
    """The in-memory test database as an SQLite file (committed: a backup waits for an
    open write transaction to end)."""
    target = sqlite3.connect(path)
    try:
        connection.connection.backup(target)
    finally:
        target.close()
    return path


@pytest.mark.django_db(transaction=True)
def test_the_command_walks_slices_in_two_processes_on_sqlite(committed_chain, tmp_path):
    if connection.vendor != "sqlite":
        pytest.skip("the SQLite file path; PostgreSQL has its own test above")
    count = committed_chain
    head = AuditEvent.objects.get(seq=count).hash

    intact = _run_verify_audit(_copy_to_file(tmp_path / "intact.sqlite3"),
                               "--processes", "2", "--slice-size", "3")
    assert intact.returncode == 0, intact.stderr
    assert intact.stdout.strip() == f"Audit chain intact: {count} event(s), head #{count} {head}"

    _break_link(7)
    broken = _run_verify_audit(_copy_to_file(tmp_path / "broken.sqlite3"),
                               "--processes", "2", "--slice-size", "3")
    assert broken.returncode == 1
    assert broken.stderr.strip() == ("Audit chain BROKEN after 6 good event(s): "
                                     "event #7: prev_hash does not match the hash of event #6")
