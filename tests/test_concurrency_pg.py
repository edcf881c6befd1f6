"""Many writers at once on real PostgreSQL, through the API, each thread on its own connection.

T1.6, T1.7, T3.1 and T3.2 of the reliability notes: 8 approvers signing one
version, 8 analysts saving versions of one decision, 8 imports into one study
source. Afterwards: exactly the rows that should exist, version numbers without
gaps or duplicates, one audit event per change with the right actor, and a chain
that verifies and has not forked (no two events share a predecessor).

Clients behave like real ones: on 412 they read the decision again and resend
with the new ETag (bounded); 409 is a final answer. Any 5xx fails the test. The
design needs no retry on serialization failures: every write runs at READ
COMMITTED under a row lock (decision or source row, then the chain head), always
taken in that order, so writers queue instead of failing.
"""

import threading
from collections import Counter

import pytest
from django.contrib.auth import get_user_model
from django.core.files.uploadedfile import SimpleUploadedFile
from django.db import connection
from django.db.models import Count
from rest_framework.test import APIClient

from decisions.models import AuditEvent, Decision, ModelVersion, SignOff, StudyRecord
from decisions.services import decisions as svc
from decisions.services import sources, teams
from decisions.services.audit import verify_chain, verify_records
from decisions.services.locking import IF_MATCH_ANY
from tests.dbutil import purge_register
from tests.personas import PASSWORD, small_table

pytestmark = [pytest.mark.postgres, pytest.mark.django_db(transaction=True)]

WRITERS = 8
MAX_TRIES = 40
CLAIM = {"hot": {"good": 0.9, "poor": 0.1}, "cold": {"good": 0.2, "poor": 0.8}}


@pytest.fixture
def clean_register():
    yield
    # Study records are append-only too (migration 0003); empty them the same way.
    with connection.cursor() as cur:
        cur.execute("ALTER TABLE decisions_studyrecord DISABLE TRIGGER USER")
        cur.execute("DELETE FROM decisions_studyrecord")
        for suffix in ("no_change", "no_truncate"):
            cur.execute(f"ALTER TABLE decisions_studyrecord ENABLE ALWAYS TRIGGER "
                        f"decisions_studyrecord_{suffix}")
    purge_register()


def _members(people, role, n, prefix):
    users = []
    for i in range(n):
        user = get_user_model().objects.create_user(f"{prefix}{i}", password=PASSWORD,
                                                    first_name=prefix.title(), last_name=str(i))
        teams.add_member(actor=people.sam, team=people.team, user=user, role=role)
        users.append(user)
    return users


def _together(jobs):
    """Run every job at once (behind a barrier), each in its own thread and connection."""
    barrier, results, lock = threading.Barrier(len(jobs)), [], threading.Lock()

    def run(job):
        try:
            barrier.wait()
            outcome = job()
        except Exception as exc:  # reported, never swallowed: the test fails on it
            outcome = ("exception", repr(exc))
        finally:
            connection.close()
        with lock:
            results.append(outcome)

    threads = [threading.Thread(target=run, args=(job,)) for job in jobs]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=60)
    return results


def _client(user):
    client = APIClient()
    client.force_authenticate(user)
    return client


def _retrying(client, decision_pk, send):
    """Read the ETag, send; on 412 read again and resend. Returns (final status, 412s seen)."""
    stale = 0
    for _ in range(MAX_TRIES):
        etag = client.get(f"/api/decisions/{decision_pk}/")["ETag"]
        response = send(etag)
        if response.status_code != 412:
            return response.status_code, stale
        stale += 1
    return 412, stale


def _assert_chain_sound():
    seqs = list(AuditEvent.objects.order_by("seq").values_list("seq", flat=True))
    assert seqs == list(range(1, len(seqs) + 1))  # no gap, no duplicate
    shared = AuditEvent.objects.values("prev_hash").annotate(n=Count("id")).filter(n__gt=1)
    assert list(shared) == []  # no fork: no two events share a predecessor
    report = verify_chain()
    assert report.ok, report.problems
    assert verify_records() == []


def test_eight_approvers_signing_one_version_give_exactly_the_policys_signoffs(
        people, clean_register):
    fin = _members(people, "financial review", 4, "fin")
    ops = _members(people, "operations", 4, "ops")
    decision = svc.create_decision(actor=people.ana, team=people.team, title="eight signers",
                                   policy={"financial review": 4, "operations": 3})
    svc.save_version(decision.pk, actor=people.ana, document=small_table(), if_match=IF_MATCH_ANY)
    svc.submit_version(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY)

    def signer(user, role):
        client = _client(user)
        return _retrying(client, decision.pk, lambda etag: client.post(
            f"/api/decisions/{decision.pk}/versions/1/signoffs/",
            {"password": PASSWORD, "role": role, "meaning": "approve"}, format="json",
            HTTP_IF_MATCH=etag))

    results = _together([lambda u=u: signer(u, "financial review") for u in fin]
                        + [lambda u=u: signer(u, "operations") for u in ops])
    finals = Counter(r[0] for r in results)
    assert finals == {201: 7, 409: 1}, results  # one operations signer finds the quota met
    rows = SignOff.objects.filter(version__decision=decision)
    assert rows.count() == 7
    assert Counter(rows.values_list("role", flat=True)) == {"financial review": 4, "operations": 3}
    assert rows.values("signer").distinct().count() == 7
    assert Decision.objects.get(pk=decision.pk).status == "approved"
    events = AuditEvent.objects.filter(action="signoff.approve", object_id=str(decision.pk))
    assert events.count() == 7
    # Attribution (T1.7): each event names the user whose sign-off it records.
    for event in events:
        row = rows.get(pk=event.payload["signoff_id"])
        assert (event.actor_id, event.actor_username) == (row.signer_id, row.signer.username)
    _assert_chain_sound()


def test_eight_analysts_with_one_etag_make_one_version_then_all_land_after_rereading(
        people, clean_register):
    analysts = _members(people, "analyst", WRITERS, "analyst")
    decision = svc.create_decision(actor=people.ana, team=people.team, title="eight authors")
    svc.save_version(decision.pk, actor=people.ana, document=small_table(), if_match=IF_MATCH_ANY)
    decision.refresh_from_db()
    stale_etag = decision.etag

    def save_once(user, i):
        r = _client(user).post(f"/api/decisions/{decision.pk}/versions/",
                               {"document": small_table(title=f"once {i}")}, format="json",
                               HTTP_IF_MATCH=stale_etag)
        return r.status_code, 0

    results = _together([lambda u=u, i=i: save_once(u, i) for i, u in enumerate(analysts)])
    assert sorted(r[0] for r in results) == [201] + [412] * (WRITERS - 1)  # no lost update
    assert ModelVersion.objects.filter(decision=decision).count() == 2

    def save_until_done(user, i):
        client = _client(user)
        return _retrying(client, decision.pk, lambda etag: client.post(
            f"/api/decisions/{decision.pk}/versions/",
            {"document": small_table(title=f"retry {i}")}, format="json", HTTP_IF_MATCH=etag))

    results = _together([lambda u=u, i=i: save_until_done(u, i) for i, u in enumerate(analysts)])
    assert [r[0] for r in results] == [201] * WRITERS, results
    versions = ModelVersion.objects.filter(decision=decision).order_by("number")
    assert list(versions.values_list("number", flat=True)) == list(range(1, WRITERS + 3))
    titles = [v.canonical_json for v in versions[2:]]
    assert len(set(titles)) == WRITERS  # every retried writer's own document, none overwritten
    events = AuditEvent.objects.filter(action="version.create", object_id=str(decision.pk))
    assert sorted(e.payload["number"] for e in events) == list(range(1, WRITERS + 3))
    for event in events:
        assert event.actor_id == versions.get(number=event.payload["number"]).author_id
    _assert_chain_sound()


def _csv(rows: int, day0: int) -> bytes:
    lines = ["date,signal,state"]
    for k in range(rows):
        month, day = 1 + (day0 + k) // 28 % 12, 1 + (day0 + k) % 28
        lines.append(f"20{10 + (day0 + k) // 336 % 10}-{month:02d}-{day:02d},"
                     f"{'good' if k % 3 else 'poor'},{'hot' if k % 2 else 'cold'}")
    return ("\n".join(lines) + "\n").encode()


def test_eight_imports_into_one_source_land_once_each(people, clean_register):
    analysts = _members(people, "analyst", WRITERS, "importer")
    source = sources.create_source(actor=people.ana, team=people.team, name="Survey (invented)",
                                   claimed=CLAIM)

    def upload(user, data, name):
        r = _client(user).post(f"/api/sources/{source.pk}/import/",
                               {"file": SimpleUploadedFile(name, data, "text/csv")},
                               format="multipart")
        return r.status_code, r.json()

    files = [_csv(5 + i, 40 * i) for i in range(WRITERS)]
    results = _together([lambda u=u, f=f, i=i: upload(u, f, f"batch-{i}.csv")
                         for i, (u, f) in enumerate(zip(analysts, files, strict=True))])
    assert [r[0] for r in results] == [201] * WRITERS, results
    expected = sum(5 + i for i in range(WRITERS))
    assert StudyRecord.objects.filter(source=source).count() == expected
    # The same file sent by eight people at once is imported exactly once.
    same = _csv(6, 900)
    results = _together([lambda u=u: upload(u, same, "same.csv") for u in analysts])
    codes = sorted(r[0] for r in results)
    assert codes == [201] + [409] * (WRITERS - 1), results
    assert StudyRecord.objects.filter(source=source).count() == expected + 6
    events = AuditEvent.objects.filter(action="source.import", object_id=str(source.pk))
    assert events.count() == WRITERS + 1
    assert sum(e.payload["records"] for e in events) == expected + 6
    _assert_chain_sound()
