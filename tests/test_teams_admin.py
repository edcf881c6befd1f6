"""Team administration: staff only, every change audited, also through the admin site."""

import pytest
import time_machine

from decisions.models import AuditEvent, Membership
from decisions.services import decisions as svc
from decisions.services import teams
from decisions.services.errors import ConflictError, ForbiddenError

pytestmark = pytest.mark.django_db


def test_only_staff_change_memberships(people):
    with pytest.raises(ForbiddenError, match="only staff administer teams"):
        teams.add_member(actor=people.ana, team=people.team, user=people.omar, role="viewer")


def test_membership_changes_are_audited(people):
    membership = Membership.objects.get(user=people.vic)
    teams.change_role(actor=people.sam, membership=membership, role="operations")
    teams.remove_member(actor=people.sam, membership=membership)
    actions = list(AuditEvent.objects.order_by("-seq").values_list("action", "payload")[:2])
    assert actions == [("membership.remove", {"user": "vic", "role": "operations"}),
                       ("membership.change", {"user": "vic", "before": "viewer",
                                              "after": "operations"})]


def test_a_member_is_added_once(people):
    with pytest.raises(ConflictError, match="ana is already a member"):
        teams.add_member(actor=people.sam, team=people.team, user=people.ana, role="viewer")


def test_admin_lists_read_only_records_and_audits_policy_edits(people, draft, client):
    people.sam.is_superuser = True
    people.sam.save()
    client.force_login(people.sam)
    for url in ["/admin/decisions/auditevent/", "/admin/decisions/modelversion/",
                "/admin/decisions/team/", "/admin/decisions/membership/",
                "/admin/decisions/signoffpolicy/"]:
        assert client.get(url).status_code == 200, url
    assert client.get("/admin/decisions/auditevent/add/").status_code == 403
    policy = draft.policy
    response = client.post(f"/admin/decisions/signoffpolicy/{policy.pk}/change/",
                           {"financial_review": 2, "operations": 0, "budget_holder": 1})
    assert response.status_code == 302
    policy.refresh_from_db()
    assert policy.as_dict() == {"budget holder": 1, "financial review": 2}
    event = AuditEvent.objects.order_by("-seq").first()
    assert (event.action, event.actor_username) == ("policy.change", "sam")


def test_date_filters_use_the_creation_day(people, client_for):
    with time_machine.travel("2026-01-10 12:00:00+00:00", tick=False):
        svc.create_decision(actor=people.ana, team=people.team, title="January")
    with time_machine.travel("2026-03-10 12:00:00+00:00", tick=False):
        svc.create_decision(actor=people.ana, team=people.team, title="March")
    client = client_for(people.vic)
    after = client.get("/api/decisions/?created_after=2026-02-01").data["results"]
    before = client.get("/api/decisions/?created_before=2026-01-10").data["results"]
    assert [d["title"] for d in after] == ["March"]
    assert [d["title"] for d in before] == ["January"]


def test_staff_manage_members_through_the_api(people, client_for):
    staff = client_for(people.sam)
    url = f"/api/teams/{people.other_team.pk}/members/"
    r = staff.post(url, {"username": "vic", "role": "viewer"}, format="json")
    assert r.status_code == 201 and r.data == {"username": "vic", "name": "Vic Viewer",
                                               "role": "viewer"}
    r = staff.patch(f"{url}vic/", {"role": "operations"}, format="json")
    assert r.status_code == 200 and r.data["role"] == "operations"
    assert staff.delete(f"{url}vic/").status_code == 204
    assert [a for a, in AuditEvent.objects.order_by("-seq").values_list("action")[:3]] == \
        ["membership.remove", "membership.change", "membership.add"]


def test_members_are_not_managed_by_other_users(people, client_for):
    body = {"username": "omar", "role": "viewer"}
    r = client_for(people.ana).post(f"/api/teams/{people.team.pk}/members/", body,
                                    format="json")
    assert r.status_code == 403
    r = client_for(people.omar).post(f"/api/teams/{people.team.pk}/members/", body,
                                     format="json")
    assert r.status_code == 404
    r = client_for(people.sam).patch(f"/api/teams/{people.team.pk}/members/nobody/",
                                     {"role": "viewer"}, format="json")
    assert r.status_code == 404
    assert r.data["errors"] == [{"location": "username",
                                 "message": "nobody is not a member of this team"}]
