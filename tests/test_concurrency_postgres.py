"""Races on real PostgreSQL: concurrent signers and concurrent chain appends.

SQLite ignores row locks, so these run only on PostgreSQL (with real
transactions and one connection per thread).
"""

import threading

import pytest
from django.db import connection

from decisions.models import AuditEvent, Decision, SignOff
from decisions.services import decisions as svc
from decisions.services import signoff
from decisions.services.audit import verify_chain
from decisions.services.errors import DomainError
from decisions.services.locking import IF_MATCH_ANY
from tests.dbutil import purge_register
from tests.personas import PASSWORD, small_table

pytestmark = [pytest.mark.postgres, pytest.mark.django_db(transaction=True)]


def _run_together(jobs):
    """Start every job at once (a barrier), each on its own connection; collect outcomes."""
    barrier, outcomes = threading.Barrier(len(jobs)), []

    def run(job):
        barrier.wait()
        try:
            outcomes.append(("ok", job()))
        except DomainError as exc:
            outcomes.append((exc.status, str(exc)))
        finally:
            connection.close()

    threads = [threading.Thread(target=run, args=(job,)) for job in jobs]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    return outcomes


def test_concurrent_duplicate_signoffs_count_each_person_once(people):
    try:
        decision = svc.create_decision(
            actor=people.ana, team=people.team, title="race to sign",
            policy={"financial review": 1, "operations": 1, "budget holder": 1})
        svc.save_version(decision.pk, actor=people.ana, document=small_table(),
                         if_match=IF_MATCH_ANY)
        svc.submit_version(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY)
        signers = [(people.fred, "financial review"), (people.olga, "operations"),
                   (people.bea, "budget holder")]
        jobs = [
            (lambda user=user, role=role: signoff.sign(
                decision.pk, 1, actor=user, password=PASSWORD, role=role, meaning="approve",
                if_match=IF_MATCH_ANY).pk)
            for user, role in signers for _ in range(4)
        ]
        outcomes = _run_together(jobs)
        assert sorted(str(kind) for kind, _ in outcomes) == ["409"] * 9 + ["ok"] * 3
        assert SignOff.objects.filter(version__decision=decision).count() == 3
        assert Decision.objects.get(pk=decision.pk).status == "approved"
        assert AuditEvent.objects.filter(action="signoff.approve").count() == 3
        assert verify_chain().ok
    finally:
        purge_register()


def test_concurrent_writers_never_fork_the_chain(people):
    try:
        decisions = [svc.create_decision(actor=people.ana, team=people.team, title=f"d{i}")
                     for i in range(8)]
        before = AuditEvent.objects.count()

        def rename(pk):
            def job():
                for n in range(5):
                    svc.update_decision(pk, actor=people.ana, if_match=IF_MATCH_ANY,
                                        title=f"renamed {pk}-{n}")
            return job

        outcomes = _run_together([rename(d.pk) for d in decisions])
        assert [kind for kind, _ in outcomes] == ["ok"] * 8
        seqs = list(AuditEvent.objects.order_by("seq").values_list("seq", flat=True))
        assert len(seqs) == before + 40
        assert seqs == list(range(1, len(seqs) + 1))  # contiguous, no gap, no fork
        assert verify_chain().ok
    finally:
        purge_register()
