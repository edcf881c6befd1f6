"""Walk the audit chain and check every event: links, sequence numbers and hashes.

Two checks of an event's content, one answer:

- the reference check (``_reference_problem``) works on the values the ORM returns, or
  an export holds, and rebuilds the hashed envelope as ``append_event`` built it;
- the stored chain (``verify_audit`` walks a million events) is read with plain SQL in
  keyset pages, and each event is checked straight from its raw column values
  (``_stored_content_check``). Whatever does not pass there is judged again by the
  reference check on the values as the ORM would have read them, so a report (its
  wording, its event number, the count of good events before it) is the reference's.

A long chain can be cut into slices of consecutive sequence numbers, walked in forked
processes at once. A slice checks its own links; its first event cannot know its
predecessor, so ``_join`` checks that event against the previous slice's last one, in
chain order, before it takes the slice's own finding.
"""

from __future__ import annotations

import hashlib
import json
import multiprocessing
import os
from collections.abc import Callable, Iterable, Iterator
from contextlib import closing
from dataclasses import dataclass, field
from decimal import Decimal
from functools import partial
from itertools import chain
from json.encoder import encode_basestring
from typing import Any

from django.db import DEFAULT_DB_ALIAS, connections
from django.db.models.expressions import Col

from decisions.models import GENESIS_HASH, AuditEvent, ChainHead
from decisions.services.audit_envelope import ENVELOPE_FIELDS, envelope_text, event_envelope
from valuation.canonical import canonical_json
from valuation.errors import ValuationError

__all__ = ["ChainReport", "verify_chain", "verify_events", "DEFAULT_PROCESSES", "SLICE_SIZE"]

#: The fields a walk reads, in the order every row holds them.
WALK_FIELDS = ("seq", "created_at", "actor_id", "actor_username", "action", "object_type",
               "object_id", "payload", "payload_canonical", "prev_hash", "hash")
#: Events per slice (about a second of walking): a chain no longer than this is walked in
#: one process. Slices much longer would leave one process idle while the other finishes
#: the last one; much shorter ones would spend more on opening connections.
SLICE_SIZE = 50_000
#: Rows per keyset page: a few MB of rows at a time, whatever the chain's length.
PAGE_SIZE = 5_000
#: Integers from here on have no exact double; the canonical text writes an integral
#: float below it as an integer (valuation.canonical).
_SAFE_INTEGER = 2**53
#: Processes for ``verify_audit``: measured on two cores only (tests/benchmarks/RESULTS.md);
#: a larger machine may gain from more (``--processes``).
DEFAULT_PROCESSES = min(2, os.cpu_count() or 1)


@dataclass
class ChainReport:
    """Outcome of a walk along the chain."""

    count: int = 0
    head_seq: int = 0
    head_hash: str = GENESIS_HASH
    problems: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems

    @property
    def first_break(self) -> str | None:
        return self.problems[0] if self.problems else None

    def as_dict(self) -> dict[str, Any]:
        return {"ok": self.ok, "events": self.count, "head_seq": self.head_seq,
                "head_hash": self.head_hash, "first_break": self.first_break}


@dataclass
class SliceWalk:
    """What one slice of consecutive events showed, for ``_join`` to place in the chain."""

    #: ``(seq, prev_hash)`` of the slice's first event, which the slice cannot check
    #: itself; None when the slice holds no events.
    first: tuple[Any, Any] | None = None
    count: int = 0  # events that passed, in order, before ``problem``
    last_seq: Any = 0
    last_hash: str = GENESIS_HASH
    problem: str | None = None


def verify_events(events: Iterable[Any]) -> ChainReport:
    """Check links, sequence and hashes of events given in ascending ``seq`` order.

    Stops at the first broken link (later links cannot be trusted after it).
    ``events`` may be model instances or dicts with the same fields (an export).
    """
    def row(event):
        if isinstance(event, dict):
            return tuple(event.get(name) for name in WALK_FIELDS)
        return tuple(getattr(event, name) for name in WALK_FIELDS)

    return _join([_walk_slice((row(event) for event in events), _reference_row_problem)])


def verify_chain(*, checkpoint: dict | None = None, processes: int = 1,
                 slice_size: int = SLICE_SIZE, page_size: int = PAGE_SIZE) -> ChainReport:
    """Walk the stored chain (streamed, never loaded whole) and check its head.

    ``checkpoint`` is ``{"seq": n, "hash": h}`` written earlier by
    ``audit_checkpoint``: the event with that sequence number must still exist
    with that hash, which catches truncation and a wholesale rewrite that the
    links alone cannot. A chain longer than ``slice_size`` events is walked in
    slices, by ``processes`` forked processes when another process can read the
    database (not inside a transaction, not an in-memory SQLite database; the
    forks close this process's connections first, so keep ``processes=1`` inside
    a request); the report is the same either way.
    """
    for name, value in (("processes", processes), ("slice_size", slice_size),
                        ("page_size", page_size)):
        if type(value) is not int or value < 1:
            raise ValueError(f"{name}: must be a whole number >= 1, got {value!r}")
    # Slices are cut by the number of rows, never by a stored sequence number: a single
    # tampered number (10**18, or text on SQLite) would otherwise make millions of empty
    # slices. The last slice is open above, so a row numbered beyond the count is read.
    bounds = _slice_bounds(AuditEvent.objects.count(), slice_size)
    with closing(_slice_walks(bounds, processes, page_size)) as walks:
        report = _join(walks)
    if report.ok:
        _check_head(report)
    if checkpoint is not None and report.ok:
        _check_checkpoint(report, checkpoint)
    return report


def _check_head(report: ChainReport) -> None:
    head = ChainHead.objects.filter(pk=1).first()
    if head is None:
        report.problems.append("chain head: the head row is missing")
    elif (head.seq, head.hash) != (report.head_seq, report.head_hash):
        report.problems.append(
            f"chain head: records #{head.seq} {head.hash[:12]}… but the last event is "
            f"#{report.head_seq} {report.head_hash[:12]}… (events were removed or added)"
        )


def _check_checkpoint(report: ChainReport, checkpoint: dict) -> None:
    seq, expected = checkpoint["seq"], checkpoint["hash"]
    stored = AuditEvent.objects.filter(seq=seq).values_list("hash", flat=True).first()
    if seq > 0 and stored is None:
        report.problems.append(f"checkpoint: event #{seq} is missing (the chain was truncated)")
    elif seq > 0 and stored != expected:
        report.problems.append(
            f"checkpoint: event #{seq} has hash {stored[:12]}…, the checkpoint recorded "
            f"{expected[:12]}… (the chain was rewritten)"
        )


# --- walking and joining slices ------------------------------------------------------


def _out_of_sequence(seq, expected_seq) -> str:
    return (f"event #{seq}: expected sequence number {expected_seq} "
            f"(an event is missing or out of order)")


def _broken_link(seq, before) -> str:
    return f"event #{seq}: prev_hash does not match the hash of event #{before}"


def _walk_slice(rows: Iterable[tuple], content_problem: Callable[[tuple], str | None]) -> SliceWalk:
    """Walk rows (``WALK_FIELDS`` order, ascending ``seq``) up to the first problem: later
    links cannot be trusted after it. The first row's sequence number and link are left to
    ``_join``; its content is checked here like every other row's."""
    walk = SliceWalk()
    rows = iter(rows)
    first = next(rows, None)
    if first is None:
        return walk
    seq = first[0]
    walk.first = (seq, first[9])
    if not isinstance(seq, int | float):
        # Only a tampered row or a damaged export holds this. ``_join`` reports it as out
        # of sequence (it never equals the number expected); nothing after it can be placed.
        walk.problem = f"event #{seq}: sequence number is not a number"
        return walk
    walk.problem = problem = content_problem(first)
    if problem:
        return walk
    count, expected_seq, prev_hash = 1, seq + 1, first[10]
    for row in rows:  # the loop every event of a million-event chain goes through
        seq = row[0]
        if seq != expected_seq:
            problem = _out_of_sequence(seq, expected_seq)
        elif row[9] != prev_hash:
            problem = _broken_link(seq, expected_seq - 1)
        else:
            problem = content_problem(row)
        if problem:
            break
        count += 1
        expected_seq, prev_hash = seq + 1, row[10]
    walk.count, walk.problem = count, problem
    walk.last_seq, walk.last_hash = expected_seq - 1, prev_hash
    return walk


def _join(walks: Iterable[SliceWalk]) -> ChainReport:
    """Place slices end to end, in chain order, and report the chain's first problem.

    A slice's first event must carry the next sequence number and link to the previous
    slice's last event; those two checks come before anything the slice found itself,
    because a walk in one piece would have made them first.
    """
    report = ChainReport()
    expected_seq, prev_hash = 1, GENESIS_HASH
    for walk in walks:
        if walk.first is None:
            continue
        seq, first_prev = walk.first
        if seq != expected_seq:
            problem = _out_of_sequence(seq, expected_seq)
        elif first_prev != prev_hash:
            problem = _broken_link(seq, expected_seq - 1)
        else:
            problem = walk.problem
            report.count += walk.count
            if walk.count:
                expected_seq, prev_hash = walk.last_seq + 1, walk.last_hash
        if problem:
            report.problems.append(problem)
            break
    # the last good event (sequence numbers were checked to run 1, 2, 3...)
    report.head_seq, report.head_hash = expected_seq - 1, prev_hash
    return report


def _slice_bounds(top: int, slice_size: int) -> list[tuple[int | None, int | None]]:
    """``(lo, hi]`` ranges of ``slice_size`` sequence numbers covering ``1..top``. The first
    is open below and the last open above, so a row numbered outside ``1..top`` is read."""
    cuts = list(range(slice_size, top, slice_size))
    return list(zip([None, *cuts], [*cuts, None], strict=True))


def _slice_walks(bounds: list[tuple[int | None, int | None]], processes: int,
                 page_size: int) -> Iterator[SliceWalk]:
    """Each slice's walk, in chain order: in forked processes when there are several
    slices and another process can read the database, else one after another here."""
    if processes > 1 and len(bounds) > 1 and _other_processes_can_read():
        # A forked child must never talk on this process's database socket (nor close
        # it): close the connections here, so each child opens its own and this process
        # reopens on its next query.
        connections.close_all()
        context = multiprocessing.get_context("fork")
        with context.Pool(min(processes, len(bounds))) as pool:
            # Leaving early (the caller found a problem) terminates the pool.
            yield from pool.imap(partial(_walk_stored_slice_in_child, page_size=page_size),
                                 bounds)
        return
    for lo_hi in bounds:
        yield _walk_stored_slice(lo_hi, page_size)


def _other_processes_can_read() -> bool:
    connection = connections[DEFAULT_DB_ALIAS]
    return ("fork" in multiprocessing.get_all_start_methods()
            # rows of an open transaction are invisible to other connections
            and not connection.in_atomic_block
            # an in-memory SQLite database lives in this process only
            and not (connection.vendor == "sqlite" and connection.is_in_memory_db()))


def _walk_stored_slice(lo_hi: tuple[int | None, int | None], page_size: int) -> SliceWalk:
    connection = connections[DEFAULT_DB_ALIAS]
    rows = chain.from_iterable(_stored_pages(connection, *lo_hi, page_size))
    return _walk_slice(rows, _stored_content_check(connection))


def _walk_stored_slice_in_child(lo_hi: tuple[int | None, int | None], page_size: int) -> SliceWalk:
    """Pool task, in a forked child: on the child's own connection, closed when done."""
    try:
        return _walk_stored_slice(lo_hi, page_size)
    finally:
        connections.close_all()


# --- reading the stored chain ---------------------------------------------------------


def _stored_pages(connection, lo: int | None, hi: int | None,
                  page_size: int) -> Iterator[list[tuple]]:
    """Pages of raw rows with ``lo < seq <= hi`` (None: open), in ``seq`` order, each row in
    ``WALK_FIELDS`` order.

    Keyset pages (``seq > last ... LIMIT``) keep memory flat on every backend without a
    server-side cursor or a long transaction; each page is one range scan of the unique
    index on ``seq``.
    """
    quote = connection.ops.quote_name
    columns = [quote(AuditEvent._meta.get_field(name).column) for name in WALK_FIELDS]
    if connection.vendor == "sqlite":
        # Read the stored text: the bare column would go through the datetime converter
        # Django registers with sqlite3, a parse per event that the check does not need.
        columns[1] = f"CAST({columns[1]} AS TEXT)"
    seq = columns[0]
    select = f"SELECT {', '.join(columns)} FROM {quote(AuditEvent._meta.db_table)}"  # noqa: S608 - names from the model, quoted; values are parameters
    last = lo
    while True:
        where, params = [], []
        if last is not None:
            where.append(f"{seq} > %s")
            params.append(last)
        if hi is not None:
            where.append(f"{seq} <= %s")
            params.append(hi)
        sql = f"{select}{' WHERE ' if where else ''}{' AND '.join(where)} ORDER BY {seq} LIMIT %s"
        with connection.cursor() as cursor:
            cursor.execute(sql, [*params, page_size])
            page = cursor.fetchall()
        yield page
        if len(page) < page_size:
            return
        last = page[-1][0]


def _stored_content_check(connection) -> Callable[[tuple], str | None]:
    """The content check of a raw row: the hashed text built straight from column values.

    Per event: two JSON decodes (the queryable copy and the canonical text), the envelope
    written out with json's own string escaper, two SHA-256. SQLite returns
    ``created_at`` as the text Django stored (``str()`` of the UTC time, no offset),
    PostgreSQL as an aware datetime in UTC; either way the text built here is the
    ``isoformat()`` that ``append_event`` hashed. A row that does not pass — altered, or
    stored in a form this shortcut does not expect (another database time zone, a value
    of an odd type) — goes to the reference check, whose answer stands.

    A pass is the reference's pass too: the text built hashes to the stored hash only if
    it is the writer's text, so every field read back is what the writer wrote (the time
    at most with "T" for the space between date and time, which Django reads as the same
    instant).
    """
    orm_values = _orm_reading(connection)
    # The decoder's own scanner (what raw_decode calls, without its wrapper): it returns
    # the value and where it ended, or raises StopIteration or JSONDecodeError.
    scan = json.JSONDecoder().scan_once
    sha256, q = hashlib.sha256, encode_basestring

    def problem(row: tuple) -> str | None:
        (seq, created_at, actor_id, actor_username, action, object_type, object_id, payload,
         canonical, prev_hash, digest) = row
        try:
            if type(seq) is not int or not (actor_id is None or type(actor_id) is int):
                raise TypeError  # what envelope_text would refuse: the reference decides
            copy, copy_end = scan(payload, 0)
            hashed, hashed_end = scan(canonical, 0)
            # The scanner stops after one value: the ends show that nothing follows it,
            # which is what json.loads (the reference) insists on.
            # ``==`` counts True as 1, so a body that may hold a boolean is compared type
            # for type; the others need only ``==`` (exact between ints and floats).
            maybe_bool = "true" in canonical or "false" in canonical or "true" in payload \
                or "false" in payload
            same = _same_json(hashed, copy) if maybe_bool else copy == hashed
            if copy_end == len(payload) and hashed_end == len(canonical) and same:
                stamp = (created_at.replace(" ", "T", 1) + "+00:00" if type(created_at) is str
                         else created_at.isoformat())
                text = (f'{{"action":{q(action)},"actor_id":{"null" if actor_id is None else actor_id},'
                        f'"actor_username":{q(actor_username)},"created_at":"{stamp}",'
                        f'"object_id":{q(object_id)},"object_type":{q(object_type)},'
                        f'"payload_sha256":"{sha256(canonical.encode("utf-8")).hexdigest()}",'
                        f'"prev_hash":{q(prev_hash)},"seq":{seq}}}')
                if sha256(text.encode("utf-8")).hexdigest() == digest:
                    return None
        except (AttributeError, StopIteration, TypeError, ValueError):
            pass  # not JSON, or a value of a type or form the shortcut does not handle
        try:
            values = orm_values(row)
        except (AttributeError, TypeError, ValueError):  # e.g. a time that is not a time
            return f"event #{seq}: hash does not match its content (the event was altered)"
        return _reference_row_problem(values)

    return problem


def _orm_reading(connection) -> Callable[[tuple], tuple]:
    """Turn a raw row into what ``values_list(*WALK_FIELDS)`` returns for it: the backend's
    converters, then the field's, each as ``(value, expression, connection)``, in the
    order Django's SQL compiler applies them."""
    table = AuditEvent._meta.db_table
    steps = []
    for position, name in enumerate(WALK_FIELDS):
        column = Col(table, AuditEvent._meta.get_field(name))
        converters = connection.ops.get_db_converters(column) + column.get_db_converters(connection)
        if converters:
            steps.append((position, column, converters))

    def read(row: tuple) -> tuple:
        values = list(row)
        for position, column, converters in steps:
            for convert in converters:
                values[position] = convert(values[position], column, connection)
        return tuple(values)

    return read


def _reference_row_problem(row: tuple) -> str | None:
    return _reference_problem(*row)


def _reference_problem(seq, created_at, actor_id, actor_username, action, object_type, object_id,
                       payload, canonical, prev_hash, digest) -> str | None:
    """The content check on ORM values or an export: the queryable copy equals the
    canonical text, and the hash covers the envelope that ``append_event`` hashed."""
    where = f"event #{seq}"
    try:
        hashed = json.loads(canonical)
    except (TypeError, ValueError):
        same = False  # canonical text that is not JSON: no copy can equal it
    else:
        same = _same_json(hashed, payload)
    if not same:
        return f"{where}: payload differs from the canonical text that was hashed"
    try:
        fields = (seq, created_at if isinstance(created_at, str) else created_at.isoformat(),
                  actor_id, actor_username, action, object_type, object_id,
                  hashlib.sha256(canonical.encode("utf-8")).hexdigest(), prev_hash)
        text = envelope_text(*fields)
        # an export with odd types: the full canonical form decides
        encoded = (canonical_json(event_envelope(**dict(zip(ENVELOPE_FIELDS, fields, strict=True))))
                   if text is None else text.encode("utf-8"))
        intact = hashlib.sha256(encoded).hexdigest() == digest
    except (AttributeError, TypeError, ValueError, ValuationError):
        intact = False  # a stored value that no writer produces
    if not intact:
        return f"{where}: hash does not match its content (the event was altered)"
    return None


def _same_json(hashed: Any, copy: Any) -> bool:
    """The queryable copy holds what the canonical text holds, type for type.

    Two differences are the storage's, not a change: the canonical text writes an
    integral float below 2**53 as an integer (``1.0`` -> ``1``) while the copy keeps the
    float; and PostgreSQL's jsonb keeps a number's exact decimal value, so the float
    1e300 reads back as the 301-digit integer. Anything else must match exactly: a
    boolean is never a number, an integer beyond 2**53 never a nearby float.
    """
    if type(hashed) is dict:
        return (type(copy) is dict and hashed.keys() == copy.keys()
                and all(_same_json(hashed[key], copy[key]) for key in hashed))
    if type(hashed) is list:
        return (type(copy) is list and len(hashed) == len(copy)
                and all(map(_same_json, hashed, copy)))
    kinds = (type(hashed), type(copy))
    if kinds == (int, float):
        return copy == hashed and abs(hashed) < _SAFE_INTEGER
    if kinds == (float, int):
        return Decimal(repr(hashed)) == copy
    return kinds[0] is kinds[1] and hashed == copy
