"""Export one decision as a JSON bundle that can be verified elsewhere.

The bundle holds each version's canonical JSON text and hash, the results saved
with it, every sign-off with the hash it binds to, the chosen strategies and
the decision's audit events with the canonical payload text each hash covers
(recompute: SHA-256 of the canonical envelope, see decisions.services.audit).
"""

import json

from django.core.management.base import BaseCommand, CommandError

from decisions.models import AuditEvent, Decision


def bundle(decision: Decision) -> dict:
    versions = []
    for v in decision.versions.order_by("number"):
        versions.append({
            "number": v.number, "author": v.author.get_username(),
            "created_at": v.created_at.isoformat(), "change_note": v.change_note,
            "source_note": v.source_note, "canonical_json": v.canonical_json,
            "content_sha256": v.content_sha256, "results": v.results,
            "results_sha256": v.results_sha256,
            "signoffs": [{"signer": s.signer.get_username(),
                          "printed_name": s.signer_printed_name, "role": s.role,
                          "meaning": s.meaning, "reason": s.reason,
                          "signed_at": s.signed_at.isoformat(), "bound_sha256": s.bound_sha256,
                          "manifestation": s.manifestation()}
                         for s in v.signoffs.order_by("signed_at", "id")],
            "strategies": [{"plan": c.plan, "recommended": c.recommended,
                            "justification": c.justification, "value_given_up": c.value_given_up,
                            "chosen_by": c.chosen_by.get_username(),
                            "chosen_at": c.chosen_at.isoformat()}
                           for c in v.strategies.order_by("chosen_at", "id")],
        })
    events = AuditEvent.objects.filter(object_type="decision", object_id=str(decision.pk))
    return {
        "format": "decision-register-export/1",
        "note": "Figures are model outputs resting on stated assumptions.",
        "verification": {
            "version": "content_sha256 = SHA-256 of the UTF-8 bytes of canonical_json",
            "signoff": "bound_sha256 equals the content_sha256 of the version signed",
            "event": ("hash = SHA-256 of the canonical JSON (keys sorted, no spaces, UTF-8) "
                      "of {seq, created_at, actor_id, actor_username, action, object_type, "
                      "object_id, payload_sha256, prev_hash}, where payload_sha256 = SHA-256 "
                      "of payload_canonical; events of other objects sit between these, so "
                      "prev_hash links are checked on the whole chain (verify_audit)"),
        },
        "decision": {"id": decision.pk, "title": decision.title, "team": decision.team.name,
                     "owner": decision.owner.get_username(), "status": decision.status,
                     "policy": decision.policy.as_dict() if hasattr(decision, "policy") else {}},
        "versions": versions,
        "audit_events": [{"seq": e.seq, "created_at": e.created_at.isoformat(),
                          "actor_id": e.actor_id, "actor_username": e.actor_username,
                          "action": e.action, "object_type": e.object_type,
                          "object_id": e.object_id, "payload": e.payload,
                          "payload_canonical": e.payload_canonical, "prev_hash": e.prev_hash,
                          "hash": e.hash}
                         for e in events.order_by("seq").iterator()],
    }


class Command(BaseCommand):
    help = "Write a decision's versions, sign-offs, strategies and audit events as JSON."

    def add_arguments(self, parser):
        parser.add_argument("decision_id", type=int)
        parser.add_argument("-o", "--output", metavar="FILE", help="default: standard output")

    def handle(self, *args, decision_id, output=None, **options):
        decision = Decision.objects.filter(pk=decision_id).select_related("team", "owner").first()
        if decision is None:
            raise CommandError(f"decision_id: no decision {decision_id}")
        text = json.dumps(bundle(decision), indent=1, ensure_ascii=False) + "\n"
        if output:
            with open(output, "w", encoding="utf-8") as handle:
                handle.write(text)
            self.stdout.write(f"Decision {decision_id} exported to {output}")
        else:
            self.stdout.write(text, ending="")
