"""Sign-off rules: re-authentication, separation of duties, one per person, manifestation."""

import pytest
import time_machine

from decisions.models import AuditEvent, Decision
from decisions.services import decisions as svc
from decisions.services import signoff
from decisions.services.errors import (
    ConflictError,
    ForbiddenError,
    InvalidInput,
    ReauthenticationFailed,
)
from decisions.services.locking import IF_MATCH_ANY
from tests.personas import PASSWORD, small_table

pytestmark = pytest.mark.django_db


def _sign(decision, user, role, meaning="approve", password=PASSWORD, reason="", number=None):
    number = number or decision.current_version().number
    return signoff.sign(decision.pk, number, actor=user, password=password, role=role,
                        meaning=meaning, reason=reason, if_match=IF_MATCH_ANY)


def test_a_wrong_password_is_refused_and_the_attempt_stays_audited(submitted, people):
    with pytest.raises(ReauthenticationFailed):
        _sign(submitted, people.fred, "financial review", password="guess")
    event = AuditEvent.objects.order_by("-seq").first()
    assert (event.action, event.actor, event.payload["reason"]) == \
        ("signoff.refused", people.fred, "wrong password")
    assert not submitted.current_version().signoffs.exists()


def test_author_cannot_sign_own_version(submitted, people):
    # fred (a reviewer) saves a corrected version; he may not sign that one.
    svc.save_version(submitted.pk, actor=people.fred, document=small_table(title="fixed"),
                     if_match=IF_MATCH_ANY)
    svc.submit_version(submitted.pk, actor=people.ana, if_match=IF_MATCH_ANY)
    submitted.refresh_from_db()
    with pytest.raises(ForbiddenError, match="the author of a version cannot sign it"):
        _sign(submitted, people.fred, "financial review")
    assert AuditEvent.objects.order_by("-seq").first().action == "signoff.refused"


def test_one_signoff_per_person_per_version(people):
    decision = svc.create_decision(actor=people.ana, team=people.team, title="two of one role",
                                   policy={"financial review": 2})
    svc.save_version(decision.pk, actor=people.ana, document=small_table(),
                     if_match=IF_MATCH_ANY)
    svc.submit_version(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY)
    _sign(decision, people.fred, "financial review")
    with pytest.raises(ConflictError, match="you have already signed version 1"):
        _sign(decision, people.fred, "financial review")
    assert Decision.objects.get(pk=decision.pk).status == "submitted"


def test_approved_exactly_when_the_policy_is_met(submitted, people):
    _sign(submitted, people.fred, "financial review")
    assert Decision.objects.get(pk=submitted.pk).status == "submitted"
    _sign(submitted, people.olga, "operations")
    assert Decision.objects.get(pk=submitted.pk).status == "approved"


def test_a_role_not_in_the_policy_cannot_sign(submitted, people):
    with pytest.raises(ConflictError, match="does not ask for 'budget holder'"):
        _sign(submitted, people.bea, "budget holder")


def test_reject_needs_a_reason(submitted, people):
    with pytest.raises(InvalidInput) as info:
        _sign(submitted, people.fred, "financial review", meaning="reject")
    assert info.value.as_list() == [{"location": "reason", "message": "is required when rejecting"}]


def test_only_the_current_version_can_be_signed(submitted, people):
    svc.save_version(submitted.pk, actor=people.ana, document=small_table(title="v2"),
                     if_match=IF_MATCH_ANY)
    svc.submit_version(submitted.pk, actor=people.ana, if_match=IF_MATCH_ANY)
    with pytest.raises(ConflictError, match="superseded by version 2"):
        _sign(submitted, people.fred, "financial review", number=1)


def test_a_draft_cannot_be_signed(draft, people):
    with pytest.raises(ConflictError, match="only a submitted decision can be signed"):
        _sign(draft, people.fred, "financial review")


def test_signature_shows_printed_name_time_and_meaning_even_after_a_rename(submitted, people,
                                                                            client_for):
    with time_machine.travel("2026-03-04 05:06:07+00:00", tick=False):
        s = _sign(submitted, people.fred, "financial review")
    people.fred.first_name = "Frederick"
    people.fred.save()
    assert s.bound_sha256 == submitted.current_version().content_sha256
    response = client_for(people.vic).get(f"/api/decisions/{submitted.pk}/versions/1/signoffs/")
    row = response.data[0]
    assert row["manifestation"] == \
        "Fred Finance (financial review) — approve — 2026-03-04 05:06:07 UTC"
    assert row["binds_current_content"] is True
    decision_view = client_for(people.vic).get(f"/api/decisions/{submitted.pk}/").data
    assert decision_view["current_version"]["signoffs"][0]["manifestation"] == \
        row["manifestation"]
