"""Issue 9, target 8: ``manage.py verify_audit`` over 1,000,000 events in under 10 s, memory flat.

The events are built with the audit service's own hashing (``event_envelope``,
``canonical_json``, ``sha256_hex`` of decisions/services/audit.py) and inserted in bulk
with raw ``executemany`` in one transaction into the benchmark's own throwaway SQLite
file (a fixture, not an application write path; the append-only triggers allow INSERT).
The chain grows 10^4 -> 10^5 -> 10^6 and at each size ``verify_audit`` runs as a
child process; its wall time, CPU time and peak resident memory (GNU time) show that
time grows linearly and memory stays flat (the chain is streamed, never loaded).
"""

import datetime as dt
import hashlib
import json
import os
import sqlite3
import subprocess

import pytest

from decisions.models import GENESIS_HASH
from decisions.services.audit import event_envelope
from tests.benchmarks.conftest import PYTHON, ROOT, check_target, run_process, write_section
from valuation.canonical import canonical_json, sha256_hex

pytestmark = pytest.mark.benchmark
COMMAND = "python -m pytest tests/benchmarks/test_bench_audit_verify.py -m benchmark -s"
SIZES = (10_000, 100_000, 1_000_000)
ACTIONS = ("decision.create", "decision.rename", "outcome.record", "team.member_add")
EPOCH = dt.datetime(2026, 1, 1, tzinfo=dt.UTC)


def _events(start: int, stop: int, prev_hash: str):
    """Rows ``start..stop-1`` (1-based seq) linked from ``prev_hash``, hashed as append_event does."""
    for seq in range(start, stop):
        # A microsecond part that is never zero keeps isoformat() and SQLite's text alike.
        created = EPOCH + dt.timedelta(seconds=seq, microseconds=1 + seq % 999_999)
        action = ACTIONS[seq % len(ACTIONS)]
        payload = {"decision_id": seq // 7, "title": f"invented benchmark decision {seq // 7}",
                   "note": "invented"}
        canonical = canonical_json(payload)
        envelope = event_envelope(
            seq=seq, created_at=created.isoformat(), actor_id=None,
            actor_username="bench-analyst", action=action, object_type="decision",
            object_id=str(seq // 7), payload_sha256=hashlib.sha256(canonical).hexdigest(), prev_hash=prev_hash)
        digest = sha256_hex(envelope)
        text = canonical.decode()
        yield (seq, created.replace(tzinfo=None).isoformat(sep=" "), None, "bench-analyst", action,
               "decision", str(seq // 7), text, text, prev_hash, digest)
        prev_hash = digest


def _append(db: str, start: int, stop: int, prev_hash: str) -> str:
    con = sqlite3.connect(db)
    try:
        with con:  # one transaction
            con.executemany(
                "INSERT INTO decisions_auditevent (seq, created_at, actor_id, actor_username, action, "
                "object_type, object_id, payload, payload_canonical, prev_hash, hash) "
                "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", _events(start, stop, prev_hash))
            head_seq, head_hash = con.execute(
                "SELECT seq, hash FROM decisions_auditevent ORDER BY seq DESC LIMIT 1").fetchone()
            con.execute("UPDATE decisions_chainhead SET seq = ?, hash = ? WHERE id = 1",
                        (head_seq, head_hash))
        return head_hash
    finally:
        con.close()


# Same run, same database: the walk over model instances (how verify_chain read the chain
# before it read plain tuples) against verify_chain as it is.
COMPARE = """
import json, time
from decisions.models import AuditEvent
from decisions.services.audit import verify_chain, verify_events
t0 = time.process_time()
a = verify_events(AuditEvent.objects.order_by("seq").iterator(chunk_size=2000))
t1 = time.process_time()
b = verify_chain()
t2 = time.process_time()
assert a.ok and b.ok and a.count == b.count, (a.as_dict(), b.as_dict())
print(json.dumps({"instances": t1 - t0, "tuples": t2 - t1, "events": b.count}))
"""


def test_verify_audit_over_a_million_events(tmp_path):
    db = str(tmp_path / "audit.sqlite3")
    env = {"DATABASE_URL": f"sqlite:///{db}", "DEBUG": "false", "DECISIONS_DATA_DIR": str(tmp_path),
           "SECRET_KEY": "bench-only-" + "s" * 50, "LOG_LEVEL": "ERROR",
           "DJANGO_SETTINGS_MODULE": "decisions.settings"}
    prefix = ["env", *(f"{k}={v}" for k, v in env.items()), PYTHON, str(ROOT / "manage.py")]
    subprocess.run([*prefix, "migrate", "--verbosity", "0"], check=True, cwd=ROOT)
    start_up = run_process([*prefix, "verify_audit"])  # empty chain: Django start-up only
    rows, done, head = [], 0, GENESIS_HASH
    for n in SIZES:
        head = _append(db, done + 1, n + 1, head)
        done = n
        runs = [run_process([*prefix, "verify_audit"]) for _ in range(3 if n < 1_000_000 else 2)]
        wall = sorted(r[0] for r in runs)[len(runs) // 2]
        cpu = sorted(r[1] for r in runs)[len(runs) // 2]
        peak = max(r[2] for r in runs)
        rows.append((n, wall, cpu, peak, os.path.getsize(db)))
        if n == 100_000:
            out = subprocess.run([*prefix, "shell", "-c", COMPARE], check=True, cwd=ROOT,
                                 capture_output=True, text=True).stdout
            compare = json.loads(out.strip().splitlines()[-1])
    n, wall, cpu, peak, _ = rows[-1]
    met_time = check_target(wall < 10, f"verify_audit of 10^6 events {wall:.1f} s >= 10 s")
    flat = rows[-1][3] < 1.5 * rows[0][3]
    met_mem = check_target(flat, f"peak memory grew from {rows[0][3]} to {rows[-1][3]} KiB")
    net = [(n, w - start_up[0]) for n, w, *_ in rows]
    lines = [
        "Throwaway SQLite file; events hashed with the audit service's own functions, inserted "
        "with raw `executemany` in one transaction (fixture only). `manage.py verify_audit` run "
        "as a child process (median of 3 runs, 2 at 10^6; peak RSS from GNU time).",
        "",
        "| events | wall (median) | CPU | peak RSS | wall net of start-up, per event | database file |",
        "|---:|---:|---:|---:|---:|---:|",
        *(f"| {n:,} | {w:.2f} s | {c:.2f} s | {p / 1024:.0f} MiB | {(w - start_up[0]) / n * 1e6:.1f} µs | "
          f"{size / 2**20:.0f} MiB |" for n, w, c, p, size in rows),
        "",
        f"- Start-up (`verify_audit` on an empty chain): {start_up[0]:.2f} s wall, {start_up[1]:.2f} s CPU, "
        f"{start_up[2] / 1024:.0f} MiB.",
        f"- 1,000,000 events: **{wall:.1f} s** wall ({cpu:.1f} s CPU) — target 10 s: {met_time}; "
        f"peak RSS **{peak / 1024:.0f} MiB** against {rows[0][3] / 1024:.0f} MiB at 10^4 — flat: {met_mem}.",
        f"- In one process at 10^5 events (CPU): reading model instances (as `verify_chain` did "
        f"before this change) {compare['instances']:.2f} s, plain tuples as now "
        f"{compare['tuples']:.2f} s: **{compare['instances'] / compare['tuples']:.1f} times faster** "
        "(both with the new envelope encoding, so this is the reading's share only).",
        f"- Growth: time per event (net of start-up) at 10^6 is {net[2][1] / 1e6 / (net[1][1] / 1e5):.2f} "
        "times that at 10^5 (1.0 = linear).",
    ]
    write_section("verify_audit over a million events (target 8)", COMMAND, "\n".join(lines))
