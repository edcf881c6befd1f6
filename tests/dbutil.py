"""Test-only helper: play the attacker who owns the database and switches triggers off.

The application never does this; tests use it to tamper with the chain and
check that verification still catches what the triggers would have stopped.
"""

from contextlib import contextmanager

from django.db import connection

PROTECTED = ["decisions_auditevent", "decisions_modelversion", "decisions_signoff",
             "decisions_chosenstrategy"]
OUTCOME_TABLES = ["decisions_outcomeforecast", "decisions_studyrecord", "decisions_outcome"]


@contextmanager
def triggers_off(tables=PROTECTED):
    with connection.cursor() as cur:
        if connection.vendor == "sqlite":
            placeholders = ",".join("%s" for _ in tables)
            query = f"SELECT name, sql FROM sqlite_master WHERE type = 'trigger' AND tbl_name IN ({placeholders})"  # noqa: S608 - placeholders only
            cur.execute(query, list(tables))
            saved = cur.fetchall()
            for name, _sql in saved:
                cur.execute(f'DROP TRIGGER "{name}"')
        else:
            # Deferred foreign-key checks pending in the test's transaction
            # would block ALTER TABLE; run them now.
            cur.execute("SET CONSTRAINTS ALL IMMEDIATE")
            for table in tables:
                cur.execute(f"ALTER TABLE {table} DISABLE TRIGGER USER")
    try:
        yield
    finally:
        with connection.cursor() as cur:
            if connection.vendor == "sqlite":
                for _name, sql in saved:
                    cur.execute(sql)
            else:
                for table in tables:
                    cur.execute(f"ALTER TABLE {table} ENABLE ALWAYS TRIGGER {table}_no_change")
                    cur.execute(f"ALTER TABLE {table} ENABLE ALWAYS TRIGGER {table}_no_truncate")


def purge_register():
    """Empty the append-only tables after a transactional test (the runner's flush
    then finds them empty, which the TRUNCATE trigger lets through)."""
    # Outcomes and study records (append-only since migration 0003) go first: they
    # point at versions and decisions.
    with triggers_off([*OUTCOME_TABLES, *PROTECTED]), connection.cursor() as cur:
        for table in [*OUTCOME_TABLES, "decisions_signoff", "decisions_chosenstrategy",
                      "decisions_modelversion", "decisions_auditevent"]:
            cur.execute(f"DELETE FROM {table}")  # noqa: S608 - fixed table names
