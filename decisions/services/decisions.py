"""State changes of a decision: create, edit, new version, submit, policy, strategy,
commit, close. Each is one transaction with one audit event; see the lifecycle in
``decisions.models.register``.
"""

from __future__ import annotations

import math
from typing import Any

from django.contrib.auth import get_user_model
from django.db import transaction
from django.utils import timezone

from decisions.models import (
    SIGNING_ROLES,
    ChosenStrategy,
    Decision,
    Meaning,
    ModelVersion,
    PolicyRequirement,
    Role,
    SignOffPolicy,
    Status,
    Team,
)
from decisions.services.access import require_role, role_of
from decisions.services.audit import append_event
from decisions.services.errors import ConflictError, InvalidInput, NotFoundError
from decisions.services.evaluation import prepare_document
from decisions.services.locking import lock_decision
from valuation.canonical import sha256_hex
from valuation.checks import control_character
from valuation.limits import AMOUNT_TOTAL_LIMIT

__all__ = [
    "MAX_SIGNERS_PER_ROLE",
    "clean_amount",
    "close_decision",
    "commit_decision",
    "create_decision",
    "record_strategy",
    "save_version",
    "set_policy",
    "submit_version",
    "update_decision",
]

MAX_SIGNERS_PER_ROLE = 10
_EDITORS = (Role.ANALYST,)
# Reviewers may save a corrected version too; they then cannot sign that version.
_AUTHORS = (Role.ANALYST, *SIGNING_ROLES)


def _touch(decision: Decision, now) -> None:
    decision.lock_version += 1
    decision.updated_at = now
    decision.save()


def _clean_policy(requirements: Any, location: str = "requirements") -> dict[str, int]:
    if not isinstance(requirements, dict):
        raise InvalidInput("must be an object mapping a signing role to a count", location=location)
    problems = []
    clean: dict[str, int] = {}
    for role, count in requirements.items():
        where = f"{location}.{role}"
        if role not in SIGNING_ROLES:
            allowed = ", ".join(repr(str(r)) for r in SIGNING_ROLES)
            problems.append((where, f"must be one of the signing roles {allowed}"))
        elif isinstance(count, bool) or not isinstance(count, int):
            problems.append((where, f"must be a whole number, got {count!r}"))
        elif not 1 <= count <= MAX_SIGNERS_PER_ROLE:
            problems.append((where, f"must be within [1, {MAX_SIGNERS_PER_ROLE}], got {count}"))
        else:
            clean[str(role)] = count
    if problems:
        raise InvalidInput(problems=problems)
    return clean


def _write_policy(decision: Decision, requirements: dict[str, int], now) -> SignOffPolicy:
    policy, _ = SignOffPolicy.objects.get_or_create(decision=decision, defaults={"updated_at": now})
    for old in list(policy.requirements.all()):
        old.delete()
    for role, count in sorted(requirements.items()):
        PolicyRequirement.objects.create(policy=policy, role=role, count=count)
    policy.updated_at = now
    policy.save()
    return policy


def _clean_title(title: str | None) -> str:
    """A decision's title: one line of at most 200 characters, no control characters
    (the title is drawn in SVG charts, where most of them are not even allowed)."""
    title = (title or "").strip()
    if not title:
        raise InvalidInput("must not be blank", location="title")
    if len(title) > 200:
        raise InvalidInput(f"must be at most 200 characters, got {len(title)}", location="title")
    bad = control_character(title)
    if bad:
        raise InvalidInput(bad, location="title")
    return title


def create_decision(*, actor, team: Team | int, title: str,
                    policy: dict[str, int] | None = None) -> Decision:
    """A new draft decision owned by ``actor`` (an analyst of ``team``)."""
    team_id = team.pk if isinstance(team, Team) else team
    require_role(actor, team_id, _EDITORS, "create a decision")
    title = _clean_title(title)
    requirements = _clean_policy(policy or {}, "policy")
    now = timezone.now()
    with transaction.atomic():
        decision = Decision.objects.create(
            title=title, team_id=team_id, owner=actor, status=Status.DRAFT,
            created_at=now, updated_at=now,
        )
        _write_policy(decision, requirements, now)
        append_event(actor=actor, action="decision.create", object_type="decision",
                     object_id=decision.pk,
                     payload={"title": title, "team_id": team_id, "owner": actor.get_username(),
                              "policy": requirements})
    return decision


def update_decision(decision_id, *, actor, if_match: str | None, title: str | None = None,
                    owner_username: str | None = None) -> Decision:
    """Rename a decision or hand it to another analyst of the team."""
    changes: dict[str, Any] = {}
    with transaction.atomic():
        decision = lock_decision(decision_id, actor=actor, if_match=if_match, roles=_EDITORS,
                                 action="edit a decision")
        if decision.status == Status.CLOSED:
            raise ConflictError("decision: a closed decision cannot be edited", location="status")
        if title is not None:
            title = _clean_title(title)
            if title != decision.title:
                changes["title"] = [decision.title, title]
                decision.title = title
        if owner_username is not None:
            user = get_user_model().objects.filter(username=owner_username).first()
            if user is None or role_of(user, decision.team_id) != Role.ANALYST:
                raise InvalidInput("must be the username of an analyst of this team",
                                   location="owner")
            if user.pk != decision.owner_id:
                changes["owner"] = [decision.owner.get_username(), owner_username]
                decision.owner = user
        if not changes:
            return decision
        _touch(decision, timezone.now())
        append_event(actor=actor, action="decision.update", object_type="decision",
                     object_id=decision.pk, payload={"changes": changes})
    return decision


def save_version(decision_id, *, actor, document: Any, if_match: str | None,
                 change_note: str = "", source_note: str = "") -> ModelVersion:
    """Save a model as the decision's next numbered, immutable version.

    The document is validated and evaluated before the lock is taken (the core
    is pure and the slow part), so the transaction stays narrow. Saving while
    submitted sends the decision back to draft: the earlier version's sign-offs
    stay on record but no longer count.
    """
    canonical, results = prepare_document(document)
    with transaction.atomic():
        decision = lock_decision(decision_id, actor=actor, if_match=if_match, roles=_AUTHORS,
                                 action="save a version")
        if decision.status not in (Status.DRAFT, Status.SUBMITTED):
            raise ConflictError(
                f"decision: a new version can only be saved in draft or submitted, "
                f"not {decision.status}", location="status")
        previous = decision.current_version()
        now = timezone.now()
        version = ModelVersion.objects.create(
            decision=decision,
            number=(previous.number + 1) if previous else 1,
            canonical_json=canonical.decode("utf-8"),
            content_sha256=sha256_hex(document),
            results=results,
            results_sha256=sha256_hex(results),
            author=actor,
            created_at=now,
            change_note=change_note or "",
            source_note=source_note or "",
        )
        voided = previous.signoffs.count() if previous else 0
        status_before = decision.status
        decision.status = Status.DRAFT
        _touch(decision, now)
        append_event(actor=actor, action="version.create", object_type="decision",
                     object_id=decision.pk,
                     payload={"number": version.number, "content_sha256": version.content_sha256,
                              "results_sha256": version.results_sha256,
                              "change_note": version.change_note,
                              "status_before": status_before, "status_after": decision.status,
                              "voided_signoffs": voided})
    return version


def set_policy(decision_id, *, actor, if_match: str | None,
               requirements: dict[str, int]) -> SignOffPolicy:
    """Replace the sign-off policy (draft only, so nobody moves the bar mid-review).

    The team's analysts may change it, and staff through the admin site.
    """
    clean = _clean_policy(requirements)
    with transaction.atomic():
        decision = lock_decision(decision_id, actor=actor, if_match=if_match, roles=_EDITORS,
                                 action="change the sign-off policy", staff_ok=True)
        if decision.status != Status.DRAFT:
            raise ConflictError(
                f"decision: the sign-off policy can only change in draft, not {decision.status}",
                location="status")
        now = timezone.now()
        before = decision.policy.as_dict() if hasattr(decision, "policy") else {}
        policy = _write_policy(decision, clean, now)
        _touch(decision, now)
        append_event(actor=actor, action="policy.change", object_type="decision",
                     object_id=decision.pk, payload={"before": before, "after": clean})
    return policy


def submit_version(decision_id, *, actor, if_match: str | None) -> Decision:
    """Send the current version for sign-off: draft -> submitted."""
    with transaction.atomic():
        decision = lock_decision(decision_id, actor=actor, if_match=if_match, roles=_EDITORS,
                                 action="submit")
        if decision.status != Status.DRAFT:
            raise ConflictError(f"decision: only a draft can be submitted, not {decision.status}",
                                location="status")
        version = decision.current_version()
        if version is None:
            raise ConflictError("decision: save a model version before submitting",
                                location="versions")
        if version.signoffs.filter(meaning=Meaning.REJECT).exists():
            raise ConflictError(
                f"decision: version {version.number} was rejected; save a new version "
                f"before submitting again", location="versions")
        policy = decision.policy.as_dict() if hasattr(decision, "policy") else {}
        if not policy:
            raise ConflictError("decision: the sign-off policy names no role; set one first",
                                location="policy")
        decision.status = Status.SUBMITTED
        _touch(decision, timezone.now())
        append_event(actor=actor, action="decision.submit", object_type="decision",
                     object_id=decision.pk,
                     payload={"version": version.number, "content_sha256": version.content_sha256,
                              "policy": policy})
    return decision


def clean_amount(value: Any, location: str, meaning: str) -> float:
    """A finite number less than ``AMOUNT_TOTAL_LIMIT`` in absolute value, as a float.

    The core holds a model's amounts to that limit; amounts entered beside a model
    (an outcome's realised value, the value given up by a plan of the team's own)
    are held to it too, so that the sums, differences and chart axes built from
    them stay within a double. An integer beyond a double's range counts as not finite.
    """
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise InvalidInput(f"must be a finite number ({meaning}), got {value!r}",
                           location=location)
    try:
        number = float(value)
    except OverflowError:
        number = math.inf
    if not math.isfinite(number):
        shown = value if isinstance(value, float) else "an integer beyond 1.8e308"
        raise InvalidInput(f"must be a finite number ({meaning}), got {shown}",
                           location=location)
    if abs(number) >= AMOUNT_TOTAL_LIMIT:
        raise InvalidInput(f"must be less than {AMOUNT_TOTAL_LIMIT:g} in absolute value, so "
                           f"that totals and differences stay within a double, got {number:g}",
                           location=location)
    return number


def _value_given_up(results: dict, alternative: str) -> float | None:
    """Expected value forgone by picking ``alternative`` instead of the recommended plan."""
    for alt in results.get("alternatives") or []:
        if alt.get("name") == alternative:
            best, chosen = float(results["expected_value"]), float(alt["expected_value"])
            gap = best - chosen if results.get("objective", "max") == "max" else chosen - best
            return max(gap, 0.0)
    return None


def _entered_given_up(value: Any, problems: list) -> float | None:
    """The value given up as the client entered it; None, with the problem added, if bad."""
    try:
        number = clean_amount(value, "value_given_up", "expected value given up")
    except InvalidInput as exc:
        problems.extend(exc.problems)
        return None
    if number < 0:
        problems.append(("value_given_up", f"must be a finite number >= 0, got {number}"))
        return None
    return number


def record_strategy(decision_id, *, actor, if_match: str | None, recommended: bool,
                    alternative: str = "", plan_text: str = "", justification: str = "",
                    value_given_up: float | None = None) -> ChosenStrategy:
    """Record the plan on an approved decision's current version.

    ``recommended=True`` records the policy the valuation recommends. Otherwise
    the team's own plan needs a justification and the expected value given up;
    when ``alternative`` names one of the model's alternatives, that value is
    computed from the results saved with the version, not taken from the client.
    """
    with transaction.atomic():
        decision = lock_decision(decision_id, actor=actor, if_match=if_match, roles=_EDITORS,
                                 action="record the chosen strategy")
        if decision.status != Status.APPROVED:
            raise ConflictError(
                f"decision: a strategy is recorded on an approved decision, not {decision.status}",
                location="status")
        version = decision.current_version()
        results = version.results
        if recommended:
            plan = {"source": "recommended", "policy": results.get("policy")}
            justification, given_up = (justification or "").strip(), 0.0
        else:
            problems = []
            alternative, plan_text = (alternative or "").strip(), (plan_text or "").strip()
            justification = (justification or "").strip()
            if not alternative and not plan_text:
                problems.append(("plan_text", "must describe the plan (or name an alternative) "
                                              "when the recommended plan is not taken"))
            if not justification:
                problems.append(("justification", "is required when the recommended plan is "
                                                  "not taken"))
            given_up = _value_given_up(results, alternative) if alternative else None
            if alternative and given_up is None and value_given_up is None:
                problems.append(("alternative", f"{alternative!r} is not an alternative of "
                                                f"version {version.number}; give value_given_up"))
            if given_up is None:
                if value_given_up is None:
                    if not problems:
                        problems.append(("value_given_up", "is required for a plan that is not "
                                                           "one of the model's alternatives"))
                else:
                    given_up = _entered_given_up(value_given_up, problems)
            if problems:
                raise InvalidInput(problems=problems)
            plan = {"source": "team", "alternative": alternative or None, "text": plan_text}
        now = timezone.now()
        strategy = ChosenStrategy.objects.create(
            version=version, plan=plan, recommended=recommended, justification=justification,
            value_given_up=given_up, chosen_by=actor, chosen_at=now,
        )
        _touch(decision, now)
        append_event(actor=actor, action="strategy.record", object_type="decision",
                     object_id=decision.pk,
                     payload={"version": version.number, "recommended": recommended,
                              "plan": plan, "justification": justification,
                              "value_given_up": given_up})
    return strategy


def commit_decision(decision_id, *, actor, if_match: str | None) -> Decision:
    """approved -> committed; needs a strategy recorded on the current version."""
    with transaction.atomic():
        decision = lock_decision(decision_id, actor=actor, if_match=if_match, roles=_EDITORS,
                                 action="commit")
        if decision.status != Status.APPROVED:
            raise ConflictError(f"decision: only an approved decision can be committed, "
                                f"not {decision.status}", location="status")
        version = decision.current_version()
        strategy = version.strategies.order_by("-chosen_at", "-id").first()
        if strategy is None:
            raise ConflictError("decision: record the chosen strategy before committing",
                                location="strategy")
        decision.status = Status.COMMITTED
        _touch(decision, timezone.now())
        append_event(actor=actor, action="decision.commit", object_type="decision",
                     object_id=decision.pk,
                     payload={"version": version.number, "strategy_id": strategy.pk,
                              "content_sha256": version.content_sha256})
    return decision


def close_decision(decision_id, *, actor, if_match: str | None, note: str = "") -> Decision:
    """committed -> closed."""
    with transaction.atomic():
        decision = lock_decision(decision_id, actor=actor, if_match=if_match, roles=_EDITORS,
                                 action="close")
        if decision.status != Status.COMMITTED:
            raise ConflictError(f"decision: only a committed decision can be closed, "
                                f"not {decision.status}", location="status")
        decision.status = Status.CLOSED
        _touch(decision, timezone.now())
        append_event(actor=actor, action="decision.close", object_type="decision",
                     object_id=decision.pk, payload={"note": (note or "").strip()})
    return decision


def get_version(decision: Decision, number) -> ModelVersion:
    try:
        return decision.versions.get(number=int(number))
    except (ModelVersion.DoesNotExist, ValueError, TypeError):
        raise NotFoundError(f"version {number}: not found", location="number") from None
