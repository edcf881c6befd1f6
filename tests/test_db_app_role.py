"""The documented app role (decisions/deploy/app_role_grants.sql) can run the register and cannot
change or remove a record, even with the triggers out of the way (PostgreSQL).

Layer 1 of "append-only in the database" in the reliability notes: privileges.
The role here is a NOLOGIN stand-in, entered with SET LOCAL ROLE inside the
test's transaction, so nothing outlives the test but the role's name.
"""

from pathlib import Path

import pytest
from django.db import DatabaseError, connection, transaction

from decisions.models import AuditEvent, ModelVersion
from decisions.services import decisions as svc
from decisions.services.audit import verify_chain
from tests.personas import small_table

pytestmark = [pytest.mark.postgres, pytest.mark.django_db]

GRANTS = Path(__file__).resolve().parent.parent / "decisions" / "deploy" / "app_role_grants.sql"
ROLE = "register_app_test"
RECORD_TABLES = ["decisions_auditevent", "decisions_modelversion", "decisions_signoff",
                 "decisions_chosenstrategy", "decisions_studyrecord", "decisions_outcome",
                 "decisions_outcomeforecast"]


@pytest.fixture
def app_role(draft):
    with connection.cursor() as cur:
        cur.execute("SET CONSTRAINTS ALL IMMEDIATE")
        cur.execute(f"DO $$ BEGIN IF NOT EXISTS (SELECT FROM pg_roles WHERE rolname = '{ROLE}') "
                    f"THEN CREATE ROLE {ROLE} NOLOGIN; END IF; END $$")
        cur.execute(GRANTS.read_text().replace("register_app", ROLE))
    return ROLE


def _as_app(sql):
    with transaction.atomic(), connection.cursor() as cur:
        cur.execute(f"SET LOCAL ROLE {ROLE}")
        cur.execute(sql)


def test_the_grants_file_names_every_append_only_table():
    text = GRANTS.read_text()
    assert all(table in text for table in RECORD_TABLES)


@pytest.mark.parametrize("table", RECORD_TABLES)
@pytest.mark.parametrize("statement", ["UPDATE {t} SET id = id", "DELETE FROM {t}",
                                       "TRUNCATE {t} CASCADE"])
def test_the_app_role_is_refused_by_privilege(app_role, table, statement):
    with pytest.raises(DatabaseError, match="permission denied"):
        _as_app(statement.format(t=table))


def test_the_app_role_cannot_switch_the_triggers_off(app_role):
    with pytest.raises(DatabaseError, match="must be owner"):
        _as_app("ALTER TABLE decisions_auditevent DISABLE TRIGGER USER")
    with pytest.raises(DatabaseError, match="permission denied"):
        _as_app("SET session_replication_role = replica")


def test_the_app_role_can_do_the_registers_work(app_role, draft, people):
    before = AuditEvent.objects.count()
    with transaction.atomic(), connection.cursor() as cur:
        cur.execute(f"SET LOCAL ROLE {ROLE}")
        svc.save_version(draft.pk, actor=people.ana, document=small_table(title="as app"),
                         if_match=draft.etag)
        svc.submit_version(draft.pk, actor=people.ana,
                           if_match=type(draft).objects.get(pk=draft.pk).etag)
        cur.execute("SELECT current_user")
        assert cur.fetchone()[0] == ROLE
    assert AuditEvent.objects.count() == before + 2
    assert ModelVersion.objects.filter(decision=draft).count() == 2
    assert verify_chain().ok
