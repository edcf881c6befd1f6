"""Test-only helper: play the attacker who owns the database and switches triggers off.

The application never does this; tests use it to tamper with the chain and
check that verification still catches what the triggers would have stopped.
"""

from contextlib import contextmanager

from django.db import connection

PROTECTED = ["decisions_auditevent", "decisions_modelversion", "decisions_signoff",
             "decisions_chosenstrategy"]


@contextmanager
def triggers_off():
    with connection.cursor() as cur:
        if connection.vendor == "sqlite":
            placeholders = ",".join("%s" for _ in PROTECTED)
            query = f"SELECT name, sql FROM sqlite_master WHERE type = 'trigger' AND tbl_name IN ({placeholders})"  # noqa: S608 - placeholders only
            cur.execute(query, PROTECTED)
            saved = cur.fetchall()
            for name, _sql in saved:
                cur.execute(f'DROP TRIGGER "{name}"')
        else:
            # Deferred foreign-key checks pending in the test's transaction
            # would block ALTER TABLE; run them now.
            cur.execute("SET CONSTRAINTS ALL IMMEDIATE")
            for table in PROTECTED:
                cur.execute(f"ALTER TABLE {table} DISABLE TRIGGER USER")
    try:
        yield
    finally:
        with connection.cursor() as cur:
            if connection.vendor == "sqlite":
                for _name, sql in saved:
                    cur.execute(sql)
            else:
                for table in PROTECTED:
                    cur.execute(f"ALTER TABLE {table} ENABLE ALWAYS TRIGGER {table}_no_change")
                    cur.execute(f"ALTER TABLE {table} ENABLE ALWAYS TRIGGER {table}_no_truncate")


def purge_register():
    """Empty the append-only tables after a transactional test (the runner's flush
    then finds them empty, which the TRUNCATE trigger lets through)."""
    with triggers_off(), connection.cursor() as cur:
        for table in ["decisions_signoff", "decisions_chosenstrategy", "decisions_modelversion",
                      "decisions_auditevent"]:
            cur.execute(f"DELETE FROM {table}")  # noqa: S608 - fixed table names
