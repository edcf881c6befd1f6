"""The action check (the first of two): the user's role in the object's team.

The second check is the queryset: every lookup goes through
``decisions.services.access.visible_decisions``, so another team's decision is
simply not found (404). The services check roles again, since the web pages
call them too.
"""

from rest_framework.permissions import SAFE_METHODS, BasePermission

from decisions.models import SIGNING_ROLES, Role
from decisions.services.access import role_of

EDIT_ROLES = (Role.ANALYST,)

#: view action -> roles allowed to perform it (reads are open to every member).
ACTION_ROLES = {
    "partial_update": EDIT_ROLES,
    "submit": EDIT_ROLES,
    "commit": EDIT_ROLES,
    "close": EDIT_ROLES,
    "strategy": EDIT_ROLES,
    "policy": EDIT_ROLES,
    "versions": (*EDIT_ROLES, *SIGNING_ROLES),
    "signoffs": SIGNING_ROLES,
}


class TeamRolePermission(BasePermission):
    message = "your role in this team does not allow this action"

    def has_object_permission(self, request, view, obj):
        if request.method in SAFE_METHODS:
            return True
        roles = ACTION_ROLES.get(getattr(view, "action", None))
        if roles is None:
            return True
        role = role_of(request.user, obj.team_id)
        if role in roles:
            return True
        self.message = (f"{view.action}: needs the role "
                        f"{' or '.join(repr(str(r)) for r in roles)} in this team; you are {role!r}")
        return False
