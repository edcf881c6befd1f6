"""Management commands: verify_audit, audit_checkpoint, export_decision, load_demo."""

import hashlib
import json

import pytest
from django.core.management import call_command
from django.db import connection

from decisions.models import Decision, Status
from decisions.services.audit import event_envelope
from tests.dbutil import triggers_off
from valuation.canonical import sha256_hex

pytestmark = pytest.mark.django_db


def test_verify_audit_reports_an_intact_chain(draft, capsys):
    call_command("verify_audit")
    assert "Audit chain intact:" in capsys.readouterr().out


def test_verify_audit_exits_non_zero_on_a_break(draft, capsys):
    with triggers_off(), connection.cursor() as cur:
        cur.execute("UPDATE decisions_auditevent SET actor_username = 'mallory' WHERE seq = 4")
    with pytest.raises(SystemExit) as exit_info:
        call_command("verify_audit")
    assert exit_info.value.code == 1
    assert "event #4: hash does not match" in capsys.readouterr().err


def test_checkpoint_catches_a_truncated_chain(draft, tmp_path, capsys):
    mark = tmp_path / "head.json"
    call_command("audit_checkpoint", "-o", str(mark))
    head = json.loads(mark.read_text())
    call_command("verify_audit", "--checkpoint", str(mark))
    with triggers_off(), connection.cursor() as cur:
        cur.execute("DELETE FROM decisions_auditevent WHERE seq = %s", [head["seq"]])
        cur.execute("UPDATE decisions_chainhead SET seq = seq - 1, hash = "
                    "(SELECT hash FROM decisions_auditevent WHERE seq = %s)", [head["seq"] - 1])
    with pytest.raises(SystemExit):
        call_command("verify_audit", "--checkpoint", str(mark))
    assert "(the chain was truncated)" in capsys.readouterr().err


def test_a_malformed_checkpoint_is_refused(db, tmp_path):
    bad = tmp_path / "bad.json"
    bad.write_text('{"seq": -1, "hash": "x"}')
    from django.core.management.base import CommandError

    with pytest.raises(CommandError, match=r"checkpoint.seq: must be a whole number >= 0"):
        call_command("verify_audit", "--checkpoint", str(bad))


@pytest.mark.parametrize(("option", "value"), [("--processes", "0"), ("--slice-size", "-5")])
def test_verify_audit_refuses_walk_settings_below_one(db, option, value):
    from django.core.management.base import CommandError

    with pytest.raises(CommandError, match=rf"^{option}: must be a whole number >= 1, got {value}$"):
        call_command("verify_audit", option, value)


def test_verify_audit_in_slices_reports_the_same_break(draft, capsys):
    with triggers_off(), connection.cursor() as cur:
        cur.execute("UPDATE decisions_auditevent SET actor_username = 'mallory' WHERE seq = 4")
    with pytest.raises(SystemExit):
        call_command("verify_audit", "--processes", "2", "--slice-size", "3")
    assert capsys.readouterr().err.strip() == ("Audit chain BROKEN after 3 good event(s): "
                                               "event #4: hash does not match its content "
                                               "(the event was altered)")


def test_export_bundle_verifies_elsewhere(submitted, tmp_path):
    out = tmp_path / "bundle.json"
    call_command("export_decision", str(submitted.pk), "-o", str(out))
    bundle = json.loads(out.read_text())
    version = bundle["versions"][0]
    # The version hash recomputes from the exported canonical text alone.
    assert hashlib.sha256(version["canonical_json"].encode()).hexdigest() == \
        version["content_sha256"]
    events = bundle["audit_events"]
    assert [e["action"] for e in events] == ["decision.create", "version.create",
                                             "decision.submit"]
    for event in events:  # each event's own hash recomputes from the bundle
        envelope = event_envelope(
            seq=event["seq"], created_at=event["created_at"], actor_id=event["actor_id"],
            actor_username=event["actor_username"], action=event["action"],
            object_type=event["object_type"], object_id=event["object_id"],
            payload_sha256=hashlib.sha256(event["payload_canonical"].encode()).hexdigest(),
            prev_hash=event["prev_hash"])
        assert sha256_hex(envelope) == event["hash"]


def test_load_demo_fills_every_status_and_keeps_a_sound_chain(db, capsys, settings):
    settings.PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]
    call_command("load_demo")
    out = capsys.readouterr().out
    assert "password for all: demo-pass-2026" in out and "omar" in out
    statuses = set(Decision.objects.values_list("status", flat=True))
    assert statuses == set(Status.values)
    rejected = Decision.objects.get(title="Shallow ground loop pilot (invented)")
    assert rejected.status == Status.DRAFT and rejected.versions.count() == 2
    call_command("verify_audit")
    call_command("load_demo", if_empty=True)
    assert "left as it is" in capsys.readouterr().out


def test_verify_audit_catches_version_content_changed_behind_the_signature(submitted, people,
                                                                         capsys, client_for):
    from decisions.services import signoff
    from decisions.services.locking import IF_MATCH_ANY
    from tests.personas import PASSWORD

    signoff.sign(submitted.pk, 1, actor=people.fred, password=PASSWORD, role="financial review",
                 meaning="approve", if_match=IF_MATCH_ANY)
    call_command("verify_audit")
    with triggers_off(), connection.cursor() as cur:
        cur.execute("UPDATE decisions_modelversion SET canonical_json = "
                    "replace(canonical_json, '9000000', '9900000')")
    with pytest.raises(SystemExit):
        call_command("verify_audit")
    err = capsys.readouterr().err
    assert f"decision {submitted.pk} version 1: content does not match its content_sha256" in err
    response = client_for(people.vic).get(f"/api/decisions/{submitted.pk}/versions/1/signoffs/")
    assert response.data[0]["binds_current_content"] is False
    assert client_for(people.sam).get("/api/audit/verify/").data["records_ok"] is False


def test_verify_audit_catches_a_signoff_moved_to_another_version(submitted, people, capsys):
    from decisions.models import ModelVersion, SignOff
    from decisions.services import decisions as svc
    from decisions.services import signoff
    from decisions.services.locking import IF_MATCH_ANY
    from tests.personas import PASSWORD, small_table

    s = signoff.sign(submitted.pk, 1, actor=people.fred, password=PASSWORD,
                     role="financial review", meaning="approve", if_match=IF_MATCH_ANY)
    svc.save_version(submitted.pk, actor=people.ana, document=small_table(title="v2"),
                     if_match=IF_MATCH_ANY)
    v2 = ModelVersion.objects.get(decision=submitted, number=2)
    with triggers_off(), connection.cursor() as cur:
        cur.execute("UPDATE decisions_signoff SET version_id = %s WHERE id = %s", [v2.pk, s.pk])
    assert SignOff.objects.get(pk=s.pk).version_id == v2.pk
    with pytest.raises(SystemExit):
        call_command("verify_audit")
    assert f"sign-off {s.pk} (Fred Finance): not bound" in capsys.readouterr().err
