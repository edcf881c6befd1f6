"""The database itself refuses to change or remove audit events, versions,
sign-offs and chosen strategies.

PostgreSQL: a BEFORE UPDATE OR DELETE row trigger and a BEFORE TRUNCATE
statement trigger per table, marked ENABLE ALWAYS so they also fire under
``session_replication_role = replica``. A TRUNCATE of an *empty* table is let
through: it removes nothing, and the test runner's flush between transactional
tests relies on it. SQLite: BEFORE UPDATE/DELETE triggers with RAISE(ABORT)
(SQLite has no TRUNCATE; its truncate optimisation is off when a DELETE trigger
exists).

Owners and superusers can still drop these triggers; the hash chain and an
external checkpoint (``audit_checkpoint``) catch what they would then do.
"""

from django.db import migrations

TABLES = [
    "decisions_auditevent",
    "decisions_modelversion",
    "decisions_signoff",
    "decisions_chosenstrategy",
]

PG_FUNCTIONS = """
CREATE OR REPLACE FUNCTION decisions_refuse_change() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
  RAISE EXCEPTION '% is append-only: % refused', TG_TABLE_NAME, TG_OP
    USING ERRCODE = 'insufficient_privilege';
END $$;
CREATE OR REPLACE FUNCTION decisions_refuse_truncate() RETURNS trigger LANGUAGE plpgsql AS $$
DECLARE has_rows boolean;
BEGIN
  EXECUTE format('SELECT EXISTS (SELECT 1 FROM %I.%I)', TG_TABLE_SCHEMA, TG_TABLE_NAME)
    INTO has_rows;
  IF has_rows THEN
    RAISE EXCEPTION '% is append-only: TRUNCATE refused', TG_TABLE_NAME
      USING ERRCODE = 'insufficient_privilege';
  END IF;
  RETURN NULL;
END $$;
"""


def _pg_forward() -> str:
    parts = [PG_FUNCTIONS]
    for table in TABLES:
        parts.append(
            f"CREATE TRIGGER {table}_no_change BEFORE UPDATE OR DELETE ON {table} "
            f"FOR EACH ROW EXECUTE FUNCTION decisions_refuse_change();\n"
            f"CREATE TRIGGER {table}_no_truncate BEFORE TRUNCATE ON {table} "
            f"FOR EACH STATEMENT EXECUTE FUNCTION decisions_refuse_truncate();\n"
            f"ALTER TABLE {table} ENABLE ALWAYS TRIGGER {table}_no_change;\n"
            f"ALTER TABLE {table} ENABLE ALWAYS TRIGGER {table}_no_truncate;\n"
        )
    return "".join(parts)


def _pg_reverse() -> str:
    parts = [
        f"DROP TRIGGER IF EXISTS {t}_no_change ON {t};\n"
        f"DROP TRIGGER IF EXISTS {t}_no_truncate ON {t};\n"
        for t in TABLES
    ]
    parts.append("DROP FUNCTION IF EXISTS decisions_refuse_change();\n")
    parts.append("DROP FUNCTION IF EXISTS decisions_refuse_truncate();\n")
    return "".join(parts)


def _sqlite_forward() -> list[str]:
    statements = []
    for table in TABLES:
        for op in ("UPDATE", "DELETE"):
            statements.append(
                f"CREATE TRIGGER {table}_no_{op.lower()} BEFORE {op} ON {table} "
                f"BEGIN SELECT RAISE(ABORT, '{table} is append-only: {op} refused'); END;"
            )
    return statements


def _sqlite_reverse() -> list[str]:
    return [
        f"DROP TRIGGER IF EXISTS {table}_no_{op};"
        for table in TABLES
        for op in ("update", "delete")
    ]


def install(apps, schema_editor):
    vendor = schema_editor.connection.vendor
    if vendor == "postgresql":
        schema_editor.execute(_pg_forward(), params=None)
    elif vendor == "sqlite":
        for statement in _sqlite_forward():
            schema_editor.execute(statement)
    else:  # pragma: no cover - only the two supported databases
        raise RuntimeError(f"append-only triggers: no recipe for database {vendor!r}")


def uninstall(apps, schema_editor):
    vendor = schema_editor.connection.vendor
    if vendor == "postgresql":
        schema_editor.execute(_pg_reverse(), params=None)
    elif vendor == "sqlite":
        for statement in _sqlite_reverse():
            schema_editor.execute(statement)


def create_chain_head(apps, schema_editor):
    ChainHead = apps.get_model("decisions", "ChainHead")
    ChainHead.objects.get_or_create(id=1, defaults={"seq": 0, "hash": "0" * 64})


class Migration(migrations.Migration):
    dependencies = [("decisions", "0001_initial")]

    operations = [
        # RunPython with per-vendor SQL: one committed migration, a recipe per database.
        migrations.RunPython(install, uninstall),
        migrations.RunPython(create_chain_head, migrations.RunPython.noop),
    ]
