"""The database itself refuses to change or remove audit events, versions and sign-offs."""

import pytest
from django.db import DatabaseError, connection, transaction

from decisions.models import AuditEvent, ModelVersion, SignOff
from decisions.services import signoff
from decisions.services.locking import IF_MATCH_ANY
from tests.personas import PASSWORD

pytestmark = pytest.mark.django_db


def _settle():
    # Deferred foreign-key checks pending in the test's transaction would make
    # PostgreSQL refuse TRUNCATE for that reason instead of the trigger's.
    if connection.vendor == "postgresql":
        with connection.cursor() as cur:
            cur.execute("SET CONSTRAINTS ALL IMMEDIATE")


def _refused(sql, params=()):
    _settle()
    with pytest.raises(DatabaseError, match="append-only"), transaction.atomic(), \
            connection.cursor() as cur:
        cur.execute(sql, params)


@pytest.mark.parametrize("table", ["decisions_auditevent", "decisions_modelversion"])
def test_raw_update_and_delete_are_refused(draft, table):
    _refused(f"UPDATE {table} SET created_at = created_at")  # noqa: S608 - fixed table names
    _refused(f"DELETE FROM {table}")  # noqa: S608


def test_raw_update_of_a_signoff_is_refused(submitted, people):
    signoff.sign(submitted.pk, 1, actor=people.fred, password=PASSWORD, role="financial review",
                 meaning="approve", if_match=IF_MATCH_ANY)
    _refused("UPDATE decisions_signoff SET meaning = 'reject'")
    _refused("DELETE FROM decisions_signoff")


def test_orm_save_update_and_delete_are_refused(draft):
    event = AuditEvent.objects.order_by("-seq").first()
    event.action = "forged"
    with pytest.raises(DatabaseError), transaction.atomic():
        event.save()
    with pytest.raises(DatabaseError), transaction.atomic():
        AuditEvent.objects.filter(pk=event.pk).update(action="forged")
    with pytest.raises(DatabaseError), transaction.atomic():
        ModelVersion.objects.filter(decision=draft).delete()
    assert AuditEvent.objects.get(pk=event.pk).action != "forged"
    assert ModelVersion.objects.filter(decision=draft).count() == 1


def test_a_refused_signoff_delete_leaves_the_row(submitted, people):
    s = signoff.sign(submitted.pk, 1, actor=people.fred, password=PASSWORD,
                     role="financial review", meaning="approve", if_match=IF_MATCH_ANY)
    with pytest.raises(DatabaseError), transaction.atomic():
        SignOff.objects.filter(pk=s.pk).delete()
    assert SignOff.objects.filter(pk=s.pk).exists()


@pytest.mark.postgres
def test_truncate_is_refused_on_postgresql(draft):
    _refused("TRUNCATE decisions_auditevent CASCADE")
    _refused("TRUNCATE decisions_modelversion CASCADE")


@pytest.mark.postgres
def test_triggers_fire_even_under_replica_replication_role(draft):
    _settle()
    with transaction.atomic(), connection.cursor() as cur:
        cur.execute("SET LOCAL session_replication_role = replica")
        with pytest.raises(DatabaseError, match="append-only"), transaction.atomic():
            cur.execute("UPDATE decisions_auditevent SET action = 'forged'")
        with pytest.raises(DatabaseError, match="append-only"), transaction.atomic():
            cur.execute("DELETE FROM decisions_modelversion")
        with pytest.raises(DatabaseError, match="append-only"), transaction.atomic():
            cur.execute("TRUNCATE decisions_auditevent CASCADE")
