"""Ceiling of audited writes per second on PostgreSQL under contention (a benchmark, not a test).

Every state change appends to one hash chain, serialised by the row lock on the
chain head (decisions/services/audit.py). This measures how many audited
changes per second that allows: W writer threads, each with its own connection,
rename their *own* decision in a loop (so the only shared lock is the chain
head) for a fixed time. Each rename is one transaction: lock the decision row,
update it, append one audit event, move the head.

    DATABASE_URL=postgres://postgres@127.0.0.1:5432/postgres \\
        /work/venv/bin/python tests/benchmarks/bench_audit_writes.py [--seconds 5]

It creates (and drops afterwards) a scratch database ``register_bench``; it
never touches any other. Loopback only, bounded in time.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
from tests.benchmarks.scratch_db import admin_url, drop, recreate  # noqa: E402 - after the path

SCRATCH = "register_bench"


def run(seconds: float, writer_counts: list[int]) -> list[dict]:
    import django
    from django.core.management import call_command
    from django.db import connection

    django.setup()
    call_command("migrate", verbosity=0)
    from django.contrib.auth import get_user_model

    from decisions.models import AuditEvent
    from decisions.services import decisions as svc
    from decisions.services import teams
    from decisions.services.audit import verify_chain
    from decisions.services.locking import IF_MATCH_ANY

    users = get_user_model().objects
    staff = users.create_user("bench-staff", password="unused-0123456789", is_staff=True)
    team = teams.create_team(actor=staff, name="Benchmark team (invented)")
    analyst = users.create_user("bench-analyst", password="unused-0123456789")
    teams.add_member(actor=staff, team=team, user=analyst, role="analyst")
    rows = []
    for writers in writer_counts:
        decisions = [svc.create_decision(actor=analyst, team=team, title=f"bench {writers}-{i}")
                     for i in range(writers)]
        counts = [0] * writers
        stop = time.perf_counter() + seconds
        barrier = threading.Barrier(writers + 1)

        def writer(i, pk, barrier=barrier, stop=stop, counts=counts):
            barrier.wait()
            n = 0
            while time.perf_counter() < stop:
                svc.update_decision(pk, actor=analyst, if_match=IF_MATCH_ANY, title=f"r{i}-{n}")
                n += 1
            counts[i] = n
            connection.close()

        threads = [threading.Thread(target=writer, args=(i, d.pk))
                   for i, d in enumerate(decisions)]
        for t in threads:
            t.start()
        barrier.wait()
        started = time.perf_counter()
        for t in threads:
            t.join()
        elapsed = time.perf_counter() - started
        rows.append({"writers": writers, "events": sum(counts), "seconds": round(elapsed, 2),
                     "per_second": round(sum(counts) / elapsed, 1)})
        print(f"{writers:>3} writers: {sum(counts):>6} audited writes in {elapsed:.2f} s = "
              f"{sum(counts) / elapsed:,.0f}/s", flush=True)
    report = verify_chain()
    print(f"chain after the run: {report.count} events, ok={report.ok}")
    assert report.ok, report.problems
    assert AuditEvent.objects.count() == report.count
    connection.close()
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=5.0)
    parser.add_argument("--writers", default="1,2,4,8,16")
    args = parser.parse_args()
    admin = admin_url("this benchmark measures row locks")
    os.environ["DATABASE_URL"] = recreate(admin, SCRATCH)
    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "decisions.settings")
    os.environ.setdefault("SECRET_KEY", "benchmark-only-key-not-for-production-0123456789")
    os.environ["DECISIONS_DATA_DIR"] = tempfile.mkdtemp(prefix="register_bench_")
    try:
        run(args.seconds, [int(w) for w in args.writers.split(",")])
    finally:
        drop(admin, SCRATCH)


if __name__ == "__main__":
    main()
