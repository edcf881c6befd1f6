-- Privileges of the application's database role (PostgreSQL).
--
-- Two roles: register_owner owns the database and the tables and runs
-- `manage.py migrate`; register_app is what gunicorn connects as. The app role
-- does not own any table, so it cannot ALTER TABLE ... DISABLE TRIGGER, and on
-- the append-only tables it has SELECT and INSERT only: UPDATE, DELETE and
-- TRUNCATE fail with "permission denied" before the refusing triggers are even
-- reached. Run this as register_owner after every `migrate` (new tables need
-- their grants): psql "$OWNER_DATABASE_URL" -v ON_ERROR_STOP=1 -f deploy/app_role_grants.sql
-- tests/test_db_app_role.py runs this very file against PostgreSQL.

GRANT USAGE ON SCHEMA public TO register_app;
REVOKE ALL ON ALL TABLES IN SCHEMA public FROM register_app;
GRANT SELECT, INSERT, UPDATE, DELETE ON ALL TABLES IN SCHEMA public TO register_app;
GRANT USAGE, SELECT ON ALL SEQUENCES IN SCHEMA public TO register_app;

-- The records: audit events, model versions, sign-offs, chosen strategies,
-- study records, outcomes and their forecasts are written once and never changed.
REVOKE UPDATE, DELETE, TRUNCATE ON
    decisions_auditevent, decisions_modelversion, decisions_signoff,
    decisions_chosenstrategy, decisions_studyrecord, decisions_outcome,
    decisions_outcomeforecast
FROM register_app;
