"""Study sources: create them, keep their track record, calibrate their claim,
and feed the claimed or calibrated accuracy into a decision's model.

Every state change here is one function, one transaction and one audit event,
with the acting user as an argument. The maths is the core's
(:mod:`valuation.reliability`, :mod:`valuation.records_csv`); this module only
reads and writes the register.
"""

from __future__ import annotations

import copy
import hashlib
import io
import json
import re
import unicodedata
from typing import Any

from django.db import IntegrityError, transaction
from django.db.models import QuerySet
from django.utils import timezone

import valuation
from decisions.models import Decision, ModelVersion, RecordOrigin, Role, StudyRecord, StudySource
from decisions.services.access import require_role, visible_decisions, visible_teams
from decisions.services.audit import append_event
from decisions.services.decisions import save_version
from decisions.services.errors import ConflictError, InvalidInput, NotFoundError
from valuation.errors import ModelValidationError
from valuation.records_csv import MAX_BYTES, read_records_csv
from valuation.reliability import (
    DEFAULT_PRIOR_STRENGTH,
    DEFAULT_WINDOW,
    MAX_PRIOR_STRENGTH,
    MAX_ROLLING_CELLS,
    MAX_ROLLING_WINDOWS,
    Record,
    calibrate,
    least_step,
    parse_records,
    replace_non_finite,
    rolling,
    score_record,
    validate_likelihoods,
)

__all__ = [
    "ACCURACY_MODES",
    "MAX_PRIOR_STRENGTH",
    "add_record",
    "apply_source_to_study",
    "calibration",
    "claimed_vs_calibrated",
    "create_source",
    "get_source",
    "import_records",
    "records_of",
    "safe_upload_name",
    "visible_sources",
]

ACCURACY_MODES = ("claimed", "calibrated")
# MAX_PRIOR_STRENGTH (a claim worth more than a million studies is a typing mistake) is the
# core's, so the API and the command line refuse the same strengths.
_WRITERS = (Role.ANALYST.value,)
# Save a version: the same roles as the register's own save_version.
_AUTHORS = tuple(r.value for r in (Role.ANALYST, Role.FINANCIAL_REVIEW, Role.OPERATIONS,
                                  Role.BUDGET_HOLDER))


def _invalid(exc: ModelValidationError, prefix: str = "") -> InvalidInput:
    return InvalidInput(problems=[
        (f"{prefix}.{p.location}" if prefix and p.location else (p.location or prefix), p.message)
        for p in exc.problems
    ])


# ---- reading ------------------------------------------------------------------------------

def visible_sources(user) -> QuerySet[StudySource]:
    """Sources of the user's teams; another team's source is simply absent (404)."""
    return StudySource.objects.filter(team__in=visible_teams(user))


def get_source(user, source_id) -> StudySource:
    try:
        return visible_sources(user).select_related("team").get(pk=int(source_id))
    except (StudySource.DoesNotExist, ValueError, TypeError):
        raise NotFoundError("source: not found", location="source") from None


def records_of(source: StudySource) -> list[Record]:
    """The source's track record as the core's records, oldest first."""
    rows = source.records.order_by("date", "id").values_list("date", "signal", "state")
    return [Record(d, sig, st) for d, sig, st in rows]


def calibration(source: StudySource, *, window: int = DEFAULT_WINDOW, interval: float = 0.90,
                prior: dict | None = None) -> dict[str, Any]:
    """Claimed vs observed accuracy: the core's calibration, scores and rolling trend.

    ``scores.claimed`` scores the record with the claimed likelihoods (how well
    the claim forecast what came true), ``scores.calibrated`` with the
    posterior means. ``prior`` is the prior over states for the scores (None:
    uniform, said in ``prior_source``).

    The trend's windows end every ``trend.step`` records: 1, or the least step
    that keeps within the core's rolling limits (``trend.step_note`` says so).
    The answer is JSON-safe: a figure that is not finite (the log score when a
    state that came true had been given probability 0) is None, and
    ``non_finite`` says which and why (:func:`valuation.reliability.replace_non_finite`).
    """
    records = records_of(source)
    step = least_step(len(records), window, len(source.states) * len(source.signals))
    try:
        cal = calibrate(source.claimed, records, prior_strength=source.prior_strength,
                        interval=interval)
        # The record list is its own endpoint: no per-record scores here.
        scores = {"claimed": score_record(source.claimed, prior, records, per_record=False),
                  "calibrated": score_record(cal["calibrated_likelihoods"], prior, records,
                                             per_record=False)}
        trend = rolling(source.claimed, records, window=window, step=step,
                        prior_strength=source.prior_strength, interval=interval, prior=prior)
    except ModelValidationError as exc:
        raise _invalid(exc) from None
    if step > 1:
        trend["step_note"] = (
            f"windows end every {step} records, the least step that keeps the trend within "
            f"{MAX_ROLLING_WINDOWS:,} windows and {MAX_ROLLING_CELLS:,} cells (windows x "
            f"states x signals; step 1 would make {len(records) - window + 1:,} windows)")
    out, note = replace_non_finite({"calibration": cal, "scores": scores, "trend": trend,
                                    "last_record": records[-1].date.isoformat() if records
                                    else None})
    if note:
        out["non_finite"] = note
    return out


# ---- sources and records ------------------------------------------------------------------

def _clean_prior_strength(value: Any) -> float:
    if value is None:
        return DEFAULT_PRIOR_STRENGTH
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise InvalidInput(f"must be a number, got {value!r}", location="prior_strength")
    value = float(value)
    if not 0 < value <= MAX_PRIOR_STRENGTH:
        # .10g: a value just over the limit must not print as the limit itself (1e+06).
        raise InvalidInput(f"must be within (0, {MAX_PRIOR_STRENGTH:,.0f}], got {value:.10g}",
                           location="prior_strength")
    return value


def create_source(*, actor, team, name: str, claimed: Any,
                  prior_strength: float | None = None) -> StudySource:
    """A new study source of ``team`` (an analyst's act).

    States and signals are read from the claimed table (``state -> signal ->
    P(signal | state)``), which the core validates: at most ``MAX_SOURCE_STATES``
    states and ``MAX_SIGNALS`` signals (valuation.limits), and every signal
    possible in some state. That last rule is why no record can later make the
    source unreadable: a record of a signal the claim gives probability 0 in
    every state could not be scored, so such a claim is refused here, once,
    instead of its records one by one.
    """
    team_id = getattr(team, "pk", team)
    require_role(actor, team_id, _WRITERS, "create a study source")
    name = (name or "").strip()
    problems = []
    if not name:
        problems.append(("name", "must not be blank"))
    elif len(name) > 200:
        problems.append(("name", f"must be at most 200 characters, got {len(name)}"))
    try:
        states, signals, _ = validate_likelihoods(claimed, name="claimed",
                                                  every_signal_possible=True)
    except ModelValidationError as exc:
        problems.extend((p.location, p.message) for p in exc.problems)
    try:
        strength = _clean_prior_strength(prior_strength)
    except InvalidInput as exc:
        problems.extend(exc.problems)
    if problems:
        raise InvalidInput(problems=problems)
    claimed = {s: {k: float(claimed[s][k]) for k in signals} for s in states}
    duplicate = ConflictError(f"a source named {name!r} exists already in this team",
                              location="name")
    try:
        with transaction.atomic():
            if StudySource.objects.filter(team_id=team_id, name=name).exists():
                raise duplicate
            source = StudySource.objects.create(
                team_id=team_id, name=name, states=states, signals=signals, claimed=claimed,
                prior_strength=strength, created_by=actor, created_at=timezone.now())
            append_event(actor=actor, action="source.create", object_type="study_source",
                         object_id=source.pk,
                         payload={"team_id": team_id, "name": name, "claimed": claimed,
                                  "prior_strength": strength})
    except IntegrityError:
        # Two analysts creating the same name at once: the unique constraint decides.
        raise duplicate from None
    return source


def _record_decision(actor, source: StudySource, decision) -> Decision | None:
    if decision in (None, ""):
        return None
    found = visible_decisions(actor).filter(pk=getattr(decision, "pk", decision),
                                            team_id=source.team_id).first()
    if found is None:
        raise InvalidInput("must be a decision of the source's team", location="decision")
    return found


def add_record(*, actor, source: StudySource, date: Any, signal: Any, state: Any,
               note: str = "", decision=None) -> StudyRecord:
    """Enter one past study by hand."""
    require_role(actor, source.team_id, _WRITERS, "add a record to a study source")
    try:
        (record,) = parse_records([{"date": date, "signal": signal, "state": state}],
                                  source.states, source.signals)
    except ModelValidationError as exc:
        raise InvalidInput(problems=[(p.location.split(".", 1)[-1], p.message)
                                     for p in exc.problems]) from None
    linked = _record_decision(actor, source, decision)
    if record.date > timezone.localdate():
        raise InvalidInput(f"must not be in the future, got {record.date}", location="date")
    with transaction.atomic():
        row = StudyRecord.objects.create(
            source=source, date=record.date, signal=record.signal, state=record.state,
            decision=linked, note=(note or "").strip(), origin=RecordOrigin.MANUAL,
            created_by=actor, created_at=timezone.now())
        append_event(actor=actor, action="source.record", object_type="study_source",
                     object_id=source.pk,
                     payload={"record_id": row.pk, "date": record.date.isoformat(),
                              "signal": record.signal, "state": record.state,
                              "decision_id": linked.pk if linked else None, "origin": "manual"})
    return row


_UNSAFE_NAME = re.compile(r"[^A-Za-z0-9._ ()+-]")


def safe_upload_name(name: Any) -> str:
    """A client's file name reduced to a label for the audit trail; never used as a path."""
    text = unicodedata.normalize("NFKC", str(name or ""))
    text = text.replace("\\", "/").rsplit("/", 1)[-1]
    text = _UNSAFE_NAME.sub("_", text).strip(" .")
    return text[:100] or "upload.csv"


def import_records(*, actor, source: StudySource, file, dry_run: bool = False,
                   filename: str = "") -> dict[str, Any]:
    """Import a records CSV (column layout: :mod:`valuation.records_csv`), all or nothing.

    ``file`` is a binary file object; at most ``MAX_BYTES + 1`` bytes are read,
    so an oversized file is refused before it is parsed. Every bad line is
    reported by number and nothing is written. A file already imported into
    this source (same SHA-256) is refused. ``dry_run`` checks and counts only.
    """
    require_role(actor, source.team_id, _WRITERS, "import records into a study source")
    data = file.read(MAX_BYTES + 1)
    if isinstance(data, str):
        data = data.encode("utf-8")
    digest = hashlib.sha256(data).hexdigest()
    try:
        records = read_records_csv(io.BytesIO(data), known_states=source.states,
                                   known_signals=source.signals)
    except ModelValidationError as exc:
        raise _invalid(exc) from None
    today = timezone.localdate()
    future = [r for r in records if r.date > today]
    if future:
        raise InvalidInput(f"{len(future)} records are dated after today (first: "
                           f"{future[0].date}); a track record holds past studies only",
                           location="file")
    label = safe_upload_name(filename)
    counts: dict[str, dict[str, int]] = {s: dict.fromkeys(source.signals, 0)
                                         for s in source.states}
    for r in records:
        counts[r.state][r.signal] += 1
    summary = {"source": source.pk, "records": len(records), "sha256": digest, "file": label,
               "dry_run": bool(dry_run), "counts": counts,
               "first_date": min(r.date for r in records).isoformat(),
               "last_date": max(r.date for r in records).isoformat()}
    if dry_run:
        return summary
    now = timezone.now()
    with transaction.atomic():
        # The race: two uploads of the same file at once both pass the check below.
        # Locking the source row makes imports into one source take turns.
        StudySource.objects.select_for_update().filter(pk=source.pk).first()
        earlier = source.records.filter(import_sha256=digest).order_by("id").first()
        if earlier is not None:
            raise ConflictError(
                f"this file (SHA-256 {digest[:12]}…) was already imported into this source on "
                f"{earlier.created_at:%Y-%m-%d}; nothing imported", location="file")
        # One bulk insert in the same transaction as the import's one audit event, which
        # carries the count and the file's SHA-256 (the records can be re-derived from it).
        StudyRecord.objects.bulk_create(
            [StudyRecord(source=source, date=r.date, signal=r.signal, state=r.state,
                         origin=RecordOrigin.IMPORT, import_sha256=digest, created_by=actor,
                         created_at=now, note=f"imported from {label}") for r in records],
            batch_size=1000)
        append_event(actor=actor, action="source.import", object_type="study_source",
                     object_id=source.pk,
                     payload={"records": len(records), "sha256": digest, "file": label,
                              "counts": counts})
    return summary


# ---- feeding a source into a model --------------------------------------------------------

def _document(version: ModelVersion) -> dict:
    return json.loads(version.canonical_json)


def _likelihoods(source: StudySource, mode: str, state_order, signal_order) -> tuple[dict, int]:
    records = records_of(source)
    if mode == "claimed":
        table = source.claimed
    else:
        table = calibrate(source.claimed, records,
                          prior_strength=source.prior_strength)["calibrated_likelihoods"]
    return ({s: {k: float(table[s][k]) for k in signal_order} for s in state_order},
            len(records))


def _match_source(doc: dict, study: dict, source: StudySource, location: str) -> None:
    model_states = [s["name"] for s in doc.get("states", [])]
    problems = []
    if sorted(model_states) != sorted(source.states):
        problems.append((location, f"the source speaks of the states {', '.join(source.states)}; "
                                   f"the model has {', '.join(model_states)}"))
    if sorted(study.get("signals", [])) != sorted(source.signals):
        problems.append((location, f"the source's signals are {', '.join(source.signals)}; the "
                                   f"study '{study.get('name')}' has "
                                   f"{', '.join(study.get('signals', []))}"))
    if problems:
        raise InvalidInput(problems=problems)


def _find_study(doc: dict, study_name: str, version: ModelVersion) -> dict:
    if doc.get("kind") != "payoff_table":
        raise InvalidInput(f"version {version.number} is a {doc.get('kind')}; studies with "
                           "likelihoods belong to payoff tables", location="study")
    for study in doc.get("studies") or []:
        if study.get("name") == study_name:
            return study
    names = ", ".join(repr(s.get("name")) for s in doc.get("studies") or []) or "none"
    raise InvalidInput(f"no study named {study_name!r} in version {version.number} "
                       f"(studies: {names})", location="study")


def apply_source_to_study(*, actor, decision, study_name: str, source, mode: str = "claimed",
                          if_match: str | None) -> ModelVersion:
    """Save a new version whose study takes its likelihoods from ``source``.

    The numbers are frozen into the version (later records do not change it)
    and the study's ``source`` field says which: id, name, ``accuracy``
    (claimed or calibrated), prior strength, number of records and ``as_of``.
    The register's ``save_version`` does the locking, the role check and the
    one audit event (``version.create``, its change note naming the source).
    """
    if mode not in ACCURACY_MODES:
        raise InvalidInput(f"must be 'claimed' or 'calibrated', got {mode!r}", location="mode")
    decision_id = getattr(decision, "pk", decision)
    found = visible_decisions(actor).filter(pk=decision_id).first()
    if found is None:
        raise NotFoundError("decision: not found")
    require_role(actor, found.team_id, _AUTHORS, "save a version")
    if not isinstance(source, StudySource):
        source = get_source(actor, source)
    if source.team_id != found.team_id:
        raise NotFoundError("source: not found", location="source")
    version = found.current_version()
    if version is None:
        raise ConflictError("decision: save a model version first", location="versions")
    doc = _document(version)
    study = _find_study(doc, study_name, version)
    _match_source(doc, study, source, "source")
    states = [s["name"] for s in doc["states"]]
    likelihoods, n_records = _likelihoods(source, mode, states, study["signals"])
    new_doc = copy.deepcopy(doc)
    target = next(s for s in new_doc["studies"] if s.get("name") == study_name)
    target["likelihoods"] = likelihoods
    as_of = timezone.now().replace(microsecond=0).isoformat()
    target["source"] = {"id": source.pk, "name": source.name, "accuracy": mode,
                        "prior_strength": source.prior_strength, "records": n_records,
                        "as_of": as_of}
    note = (f"Study '{study_name}' takes the {mode} accuracy of the source '{source.name}' "
            f"({n_records} records, prior strength {source.prior_strength:g}, as of {as_of}).")
    return save_version(found.pk, actor=actor, document=new_doc, if_match=if_match,
                        change_note=note, source_note=f"Study source #{source.pk}: {source.name}")


def _figures(doc: dict, study_name: str, likelihoods: dict) -> dict[str, Any]:
    trial = copy.deepcopy(doc)
    for s in trial["studies"]:
        if s.get("name") == study_name:
            s["likelihoods"] = likelihoods
    results = valuation.evaluate(trial)
    study = next(s for s in results["studies"] if s["name"] == study_name)
    steps = results["policy"]["steps"]
    first = steps[0]["choice"] if steps else None
    buys = first == study_name
    return {"evsi": study["evsi"], "net_value": study["net_value"], "cost": study["cost"],
            "pays_for_itself": study["net_value"] > 0, "recommended_first_step": first,
            "buys_study": buys, "expected_value": results["expected_value"],
            "policy": results["policy"]["text"], "likelihoods": likelihoods}


def claimed_vs_calibrated(version: ModelVersion) -> dict[str, Any]:
    """For each sourced study of ``version``: EVSI and net value with the source's
    claimed and with its calibrated accuracy (from today's record), and whether
    the calibrated figures flip the recommendation.

    ``flips`` is true when the two disagree on whether the study pays for
    itself or on the first step of the recommended policy (commission this
    study, another one, or none).
    """
    doc = _document(version)
    out: dict[str, Any] = {"decision": version.decision_id, "version": version.number,
                           "currency": doc.get("currency"), "studies": []}
    if doc.get("kind") != "payoff_table":
        return out
    ids = [s["source"]["id"] for s in doc.get("studies") or []
           if isinstance(s.get("source"), dict) and isinstance(s["source"].get("id"), int)]
    sources = {s.pk: s for s in StudySource.objects.filter(pk__in=ids,
                                                             team_id=version.decision.team_id)}
    states = [s["name"] for s in doc["states"]]
    any_flip = False
    for study in doc.get("studies") or []:
        info = study.get("source") if isinstance(study.get("source"), dict) else None
        entry: dict[str, Any] = {"study": study["name"], "source": info}
        source = sources.get(info.get("id")) if info else None
        if source is None:
            entry["note"] = ("no study source is linked to this study" if info is None else
                             "the linked source is not one of this team's sources")
            out["studies"].append(entry)
            continue
        try:
            _match_source(doc, study, source, "source")
            claimed, n = _likelihoods(source, "claimed", states, study["signals"])
            calibrated, _ = _likelihoods(source, "calibrated", states, study["signals"])
            entry["claimed"] = _figures(doc, study["name"], claimed)
            entry["calibrated"] = _figures(doc, study["name"], calibrated)
        except (InvalidInput, ModelValidationError) as exc:
            entry["note"] = f"cannot compare: {exc}"
            out["studies"].append(entry)
            continue
        a, b = entry["claimed"], entry["calibrated"]
        flips = (a["pays_for_itself"] != b["pays_for_itself"]
                 or a["recommended_first_step"] != b["recommended_first_step"])
        any_flip |= flips
        entry.update({"records": n, "prior_strength": source.prior_strength,
                      "frozen_accuracy": info.get("accuracy"), "flips": flips,
                      "message": _flip_message(study["name"], a, b, doc.get("currency", ""))})
        out["studies"].append(entry)
    out["flips"] = any_flip
    return out


def _flip_message(name: str, a: dict, b: dict, currency: str) -> str:
    def money(x: float) -> str:
        return f"{x:,.0f} {currency}".strip()

    head = (f"Study '{name}': net value {money(a['net_value'])} with the claimed accuracy, "
            f"{money(b['net_value'])} with the calibrated accuracy.")
    if a["pays_for_itself"] and not b["pays_for_itself"]:
        return head + " With the calibrated accuracy the study no longer pays for itself."
    if b["pays_for_itself"] and not a["pays_for_itself"]:
        return head + " With the calibrated accuracy the study pays for itself."
    if a["recommended_first_step"] != b["recommended_first_step"]:
        return head + (f" The recommended first step changes from "
                       f"'{a['recommended_first_step']}' to '{b['recommended_first_step']}'.")
    return head + " The recommendation does not change."

