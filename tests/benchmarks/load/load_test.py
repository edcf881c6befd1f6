"""Load benchmark: gunicorn with production settings on a scratch PostgreSQL database.

Not a test (nothing here runs under pytest). Loopback only, bounded in time and
in request count, stops by itself::

    /work/venv/bin/python tests/benchmarks/load/load_test.py --rate 8 --seconds 30

What it does:

1. drops and creates the scratch database ``register_load`` (never any other),
   migrates it, loads the invented demo and adds the load's own invented users,
   decisions and tokens;
2. starts gunicorn (``decisions.wsgi``, DEBUG off, production settings but plain
   HTTP on 127.0.0.1) with ``--workers`` sync workers;
3. the mixed workload, **open loop**: requests are scheduled at ``--rate`` per
   second whatever the server does, and each latency is measured from the
   *scheduled* time, so a stalled server cannot hide its queue (no coordinated
   omission). The mix: list decisions 30 %, view one 35 %, evaluate a 199-node
   tree 15 %, save a version (read the ETag, then POST with If-Match) 10 %, sign
   (read the ETag, then POST with the password, which the server hashes with
   Django's PBKDF2) 10 %;
4. the ceiling: ``GET /healthz`` (one ``SELECT 1``) in a closed loop with
   ``--ceiling-clients`` clients for ``--ceiling-seconds``;
5. afterwards: the audit chain verifies, and the rows reconcile with the 2xx
   answers (sign-offs, versions, audit events);
6. prints the figures and writes them to tests/benchmarks/LOAD_RESULTS.md.
"""

from __future__ import annotations

import argparse
import http.client
import json
import os
import platform
import queue
import random
import signal
import subprocess
import sys
import tempfile
import threading
import time
from collections import Counter, defaultdict
from pathlib import Path

ROOT = Path(__file__).resolve().parents[3]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "benchmarks"))
from scratch_db import admin_url, recreate  # noqa: E402 - after the path

SCRATCH = "register_load"
HOST, PORT = "127.0.0.1", 8765
# The heartbeat folder of the README's deployment command: gunicorn's documentation warns
# that on a disk-backed folder the heartbeat can stall a worker.
# (gunicorn makes its file there with mkstemp and unlinks it at once.)
_SHM = "/dev/shm"  # noqa: S108 - a folder gunicorn's mkstemp writes into, not a fixed file name
WORKER_TMP_DIR = ["--worker-tmp-dir", _SHM] if os.path.isdir(_SHM) else []
PASSWORD = "load test password 7"  # invented users of a scratch database
RESULTS = ROOT / "tests" / "benchmarks" / "LOAD_RESULTS.md"
MIX = [("list", 30), ("view", 35), ("evaluate", 15), ("save", 10), ("sign", 10)]
SIGNERS = 10


def _environment(db_url: str, data_dir: Path) -> dict:
    env = {k: v for k, v in os.environ.items() if k != "DJANGO_ALLOW_ASYNC_UNSAFE"}
    env.update({
        "DATABASE_URL": db_url, "DEBUG": "false", "SECURE_SSL": "false",
        "SECRET_KEY": "load-benchmark-only-" + "k" * 44, "ALLOWED_HOSTS": HOST,
        "DECISIONS_DATA_DIR": str(data_dir), "DB_CONN_MAX_AGE": "60", "LOG_LEVEL": "ERROR",
        # Fairness throttles are per client; the benchmark is one client. Lifted per
        # second, not per minute: DRF's throttle keeps one timestamp per request in its
        # window and copies the list through the cache on every request; a minute of a
        # benchmark's requests (~8,000 per worker) costs ~0.4 ms a request against
        # ~20 µs for the production rate's 120 (measured in-process with LocMemCache),
        # a cost no real client comes near.
        "API_EVALUATE_RATE": "1000000/s", "API_TOKEN_RATE": "1000000/s",
        "DJANGO_SETTINGS_MODULE": "decisions.settings",
    })
    return env


def _setup(n_save: int, n_sign: int) -> dict:
    """Invented users, decisions and tokens; returns what the clients need."""
    import django
    from django.core.management import call_command

    django.setup()
    call_command("migrate", verbosity=0)
    call_command("load_demo", verbosity=0)
    from bench_inputs import alternating_tree
    from django.contrib.auth import get_user_model
    from rest_framework.authtoken.models import Token

    from decisions.services import decisions as svc
    from decisions.services import teams
    from decisions.services.locking import IF_MATCH_ANY

    users = get_user_model().objects
    staff = users.create_user("load-staff", password=PASSWORD, is_staff=True)
    team = teams.create_team(actor=staff, name="Load test cooperative (invented)")

    def member(name, role):
        user = users.create_user(name, password=PASSWORD, first_name=name)
        teams.add_member(actor=staff, team=team, user=user, role=role)
        return user

    analyst = member("load-analyst", "analyst")
    signers = [member(f"load-signer{i}", "financial review") for i in range(SIGNERS)]
    tree = alternating_tree(199, seed=7)
    tree["title"] = "Load test tree (invented)"
    saves, signs = [], []
    for i in range(n_save):
        d = svc.create_decision(actor=analyst, team=team, title=f"load draft {i}",
                                policy={"financial review": 1})
        svc.save_version(d.pk, actor=analyst, document=tree, if_match=IF_MATCH_ANY)
        saves.append(d.pk)
    for i in range(n_sign):
        d = svc.create_decision(actor=analyst, team=team, title=f"load sign {i}",
                                policy={"financial review": SIGNERS})
        svc.save_version(d.pk, actor=analyst, document=tree, if_match=IF_MATCH_ANY)
        svc.submit_version(d.pk, actor=analyst, if_match=IF_MATCH_ANY)
        signs.append(d.pk)
    tokens = {u.username: Token.objects.create(user=u).key for u in [analyst, *signers]}
    return {"tree": tree, "saves": saves, "signs": signs, "tokens": tokens,
            "analyst": analyst.username, "signers": [s.username for s in signers]}


def _counts() -> dict:
    from decisions.models import AuditEvent, ModelVersion, SignOff

    return {"signoffs": SignOff.objects.count(), "versions": ModelVersion.objects.count(),
            "events": AuditEvent.objects.count()}


def _request(method, path, token=None, body=None, headers=None, timeout=30, port=None):
    conn = http.client.HTTPConnection(HOST, port or PORT, timeout=timeout)
    h = {"Accept": "application/json", **(headers or {})}
    if token:
        h["Authorization"] = f"Token {token}"
    data = None
    if body is not None:
        data = json.dumps(body).encode()
        h["Content-Type"] = "application/json"
    try:
        conn.request(method, path, body=data, headers=h)
        response = conn.getresponse()
        payload = response.read()
        return response.status, response.getheader("ETag"), payload
    finally:
        conn.close()


class Workload:
    def __init__(self, world: dict, seed: int = 1):
        self.w = world
        self.rnd = random.Random(seed)
        self.lock = threading.Lock()
        pairs = [(d, s) for d in world["signs"] for s in world["signers"]]
        self.sign_pairs = iter(pairs)
        self.analyst_token = world["tokens"][world["analyst"]]
        self.n = 0

    def pick(self) -> str:
        with self.lock:
            return self.rnd.choices([m for m, _ in MIX], [w for _, w in MIX])[0]

    def run(self, op: str) -> list[int]:
        """Do one operation; return the status codes of its requests (the last is the op's)."""
        t, w = self.analyst_token, self.w
        if op == "list":
            return [_request("GET", "/api/decisions/", t)[0]]
        if op == "view":
            with self.lock:
                pk = self.rnd.choice(w["saves"] + w["signs"])
            return [_request("GET", f"/api/decisions/{pk}/", t)[0]]
        if op == "evaluate":
            return [_request("POST", "/api/evaluate/", t, {"document": w["tree"]})[0]]
        if op == "save":
            with self.lock:
                pk = self.rnd.choice(w["saves"])
                self.n += 1
                n = self.n
            codes = []
            for _ in range(3):  # a real client re-reads on 412 and resends
                status, etag, _ = _request("GET", f"/api/decisions/{pk}/", t)
                doc = dict(w["tree"], title=f"Load test tree (invented) save {n}")
                status, _, _ = _request("POST", f"/api/decisions/{pk}/versions/", t,
                                        {"document": doc, "change_note": "load"},
                                        {"If-Match": etag or ""})
                codes.append(status)
                if status != 412:
                    break
            return codes
        if op == "sign":
            with self.lock:
                pair = next(self.sign_pairs, None)
            if pair is None:
                return [_request("GET", "/api/decisions/", t)[0]]
            pk, signer = pair
            token = w["tokens"][signer]
            codes = []
            for _ in range(3):
                status, etag, _ = _request("GET", f"/api/decisions/{pk}/", token)
                status, _, _ = _request(
                    "POST", f"/api/decisions/{pk}/versions/1/signoffs/", token,
                    {"password": PASSWORD, "role": "financial review", "meaning": "approve"},
                    {"If-Match": etag or ""})
                codes.append(status)
                if status != 412:
                    break
            return codes
        raise ValueError(op)


def _percentiles(values: list[float]) -> dict:
    if not values:
        return {"n": 0}
    v = sorted(values)

    def q(p):
        return v[min(len(v) - 1, round(p * (len(v) - 1)))]

    return {"n": len(v), "p50": q(0.50) * 1000, "p95": q(0.95) * 1000, "p99": q(0.99) * 1000,
            "max": v[-1] * 1000}


def open_loop(workload: Workload, rate: float, seconds: float, clients: int) -> dict:
    """Schedule ``rate`` operations a second for ``seconds``; latency from the scheduled time."""
    total = int(rate * seconds)
    jobs: queue.Queue = queue.Queue()
    latencies: dict[str, list[float]] = defaultdict(list)
    statuses: dict[str, Counter] = defaultdict(Counter)
    errors: Counter = Counter()
    done_lock = threading.Lock()
    start = time.perf_counter() + 0.2

    def worker():
        while True:
            item = jobs.get()
            if item is None:
                return
            due, op = item
            delay = due - time.perf_counter()
            if delay > 0:
                time.sleep(delay)
            try:
                codes = workload.run(op)
                kind = None
            except (OSError, http.client.HTTPException) as exc:
                codes, kind = [], type(exc).__name__
            finished = time.perf_counter()
            with done_lock:
                latencies[op].append(finished - due)
                for c in codes:
                    statuses[op][c] += 1
                if kind:
                    errors[kind] += 1

    threads = [threading.Thread(target=worker, daemon=True) for _ in range(clients)]
    for th in threads:
        th.start()
    for i in range(total):
        jobs.put((start + i / rate, workload.pick()))
    for _ in threads:
        jobs.put(None)
    deadline = start + seconds + 120  # bounded: never wait more than 2 min past the end
    for th in threads:
        th.join(timeout=max(0.1, deadline - time.perf_counter()))
    elapsed = max(time.perf_counter() - start, 1e-9)
    completed = sum(len(v) for v in latencies.values())
    return {"offered_rps": rate, "seconds": seconds, "scheduled": total, "completed": completed,
            "achieved_rps": completed / elapsed,
            "all": _percentiles([x for v in latencies.values() for x in v]),
            "by_op": {op: _percentiles(v) for op, v in sorted(latencies.items())},
            "statuses": {op: dict(c) for op, c in sorted(statuses.items())},
            "transport_errors": dict(errors)}


def run_closed_loop(send, clients: int, seconds: float, max_requests: int):
    """``clients`` threads each call ``send()`` (which returns a status) again as soon as
    it returns, for ``seconds`` or ``max_requests`` calls in all; returns the latencies,
    a count of statuses (or of transport error names) and the elapsed seconds."""
    latencies, statuses, lock = [], Counter(), threading.Lock()
    stop = time.perf_counter() + seconds

    def client():
        while time.perf_counter() < stop:
            with lock:
                if len(latencies) >= max_requests:
                    return
            t0 = time.perf_counter()
            try:
                status = send()
            except (OSError, http.client.HTTPException) as exc:
                status = type(exc).__name__
            with lock:
                latencies.append(time.perf_counter() - t0)
                statuses[status] += 1

    t0 = time.perf_counter()
    threads = [threading.Thread(target=client, daemon=True) for _ in range(clients)]
    for th in threads:
        th.start()
    for th in threads:
        th.join(timeout=seconds + 60)
    return latencies, statuses, time.perf_counter() - t0


def closed_loop(path: str, clients: int, seconds: float, max_requests: int = 200_000) -> dict:
    latencies, statuses, elapsed = run_closed_loop(lambda: _request("GET", path)[0], clients,
                                                   seconds, max_requests)
    return {"path": path, "clients": clients, "seconds": round(elapsed, 1),
            "achieved_rps": len(latencies) / elapsed, "latency": _percentiles(latencies),
            "statuses": {str(k): v for k, v in statuses.items()}}


def _wait_until_up(proc, timeout=120.0, port=None):
    # Each worker imports the URL map (numpy, scipy, reportlab...) as it starts
    # (decisions/serving.py; on its first request with GC_FREEZE=false): several
    # seconds per worker on a small machine, so wait generously and warm every
    # worker before measuring.
    end, last = time.time() + timeout, "nothing"
    while time.time() < end:
        if proc.poll() is not None:
            sys.exit(f"gunicorn exited with {proc.returncode}")
        try:
            status, _, body = _request("GET", "/healthz", timeout=30, port=port)
            if status == 200:
                for _ in range(20):  # warm-up, excluded from the results
                    _request("GET", "/api/schema/", timeout=60, port=port)
                return
            last = f"{status} {body[:200]!r}"
        except OSError as exc:
            last = repr(exc)
        time.sleep(0.3)
    sys.exit(f"gunicorn did not answer /healthz with 200 within {timeout:.0f} s (last: {last})")



def _versions() -> dict:
    import django
    import psycopg
    import rest_framework

    return {"python": platform.python_version(), "django": django.get_version(),
            "drf": rest_framework.VERSION, "psycopg": psycopg.__version__,
            "gunicorn": subprocess.run([sys.executable, "-m", "gunicorn", "--version"],
                                       capture_output=True, text=True).stdout.strip(),
            "cpu": next((line.split(":", 1)[1].strip() for line in
                         Path("/proc/cpuinfo").read_text().splitlines()
                         if line.startswith("model name")), platform.processor()),
            "cores": os.cpu_count()}


def _markdown(args, env_info, mix, ceiling, reconcile, chain) -> str:
    ms = "{:.0f}".format
    lines = [
        "# Load benchmark results", "",
        "Measured by `tests/benchmarks/load/load_test.py` (not part of the test run). "
        "Everything on one machine: gunicorn, PostgreSQL and the load generator share "
        f"{env_info['cores']} cores ({env_info['cpu']}), so the figures are a floor for a "
        "deployment with a separate database host.", "",
        "Command:", "",
        f"    /work/venv/bin/python tests/benchmarks/load/load_test.py --rate {args.rate} "
        f"--seconds {args.seconds} --workers {args.workers} --clients {args.clients}", "",
        f"Versions: Python {env_info['python']}, Django {env_info['django']}, DRF "
        f"{env_info['drf']}, psycopg {env_info['psycopg']}, {env_info['gunicorn']}; "
        f"gunicorn sync workers: {args.workers}; `DB_CONN_MAX_AGE=60`; DEBUG off.", "",
        "## Mixed workload (open loop, latency from the scheduled send time)", "",
        f"Offered {mix['offered_rps']:.1f} operations/s for {mix['seconds']:.0f} s "
        f"({mix['scheduled']} scheduled); achieved {mix['achieved_rps']:.2f}/s "
        f"({mix['completed']} completed). Mix: "
        + ", ".join(f"{m} {w} %" for m, w in MIX) + ". Save and sign are two requests "
        "each (read the ETag, then write) and are timed as one operation.", "",
        "| operation | n | p50 ms | p95 ms | p99 ms | max ms | answers |",
        "|---|---|---|---|---|---|---|",
    ]
    for op, p in mix["by_op"].items():
        answers = ", ".join(f"{k}×{v}" for k, v in sorted(mix["statuses"].get(op, {}).items()))
        lines.append(f"| {op} | {p['n']} | {ms(p['p50'])} | {ms(p['p95'])} | {ms(p['p99'])} | "
                     f"{ms(p['max'])} | {answers} |")
    a = mix["all"]
    lines += [f"| **all** | {a['n']} | {ms(a['p50'])} | {ms(a['p95'])} | {ms(a['p99'])} | "
              f"{ms(a['max'])} | transport errors: {mix['transport_errors'] or 'none'} |", ""]
    c = ceiling["latency"]
    lines += [
        "## Ceiling: a trivial endpoint on the same server", "",
        f"`GET {ceiling['path']}` (one `SELECT 1`), closed loop, {ceiling['clients']} clients "
        f"for {ceiling['seconds']} s: **{ceiling['achieved_rps']:.0f} requests/s**, p50 "
        f"{ms(c['p50'])} ms, p95 {ms(c['p95'])} ms, p99 {ms(c['p99'])} ms, max {ms(c['max'])} ms; "
        f"answers {ceiling['statuses']}.", "",
        "## After the run", "",
        f"- Audit chain: {chain['events']} events, verifies: **{chain['ok']}**"
        f"{'' if chain['ok'] else ' — ' + str(chain['first_break'])}; signed records "
        f"consistent with the chain: **{chain['records_ok']}**.",
        f"- Sign-offs: {reconcile['signoffs']} new rows, {reconcile['sign_201']} answers 201.",
        f"- Versions: {reconcile['versions']} new rows, {reconcile['save_201']} answers 201.",
        f"- Audit events: {reconcile['events']} new, {reconcile['expected_events']} expected "
        "(one per 201 above, plus one per refused signing).",
        f"- Reconciled: **{reconcile['ok']}**.", "",
        "Figures are measurements of this machine on this day, not guarantees.", "",
    ]
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description="Load benchmark (loopback, bounded).")
    parser.add_argument("--rate", type=float, default=8.0, help="offered operations/s")
    parser.add_argument("--seconds", type=float, default=30.0)
    parser.add_argument("--clients", type=int, default=32, help="client threads (open loop)")
    parser.add_argument("--workers", type=int, default=4, help="gunicorn sync workers")
    parser.add_argument("--ceiling-clients", type=int, default=8)
    parser.add_argument("--ceiling-seconds", type=float, default=10.0)
    parser.add_argument("--no-write", action="store_true", help="do not write LOAD_RESULTS.md")
    args = parser.parse_args()
    if args.rate * args.seconds > 20_000 or args.seconds > 600:
        sys.exit("bounded: at most 20,000 operations and 600 s")

    admin = admin_url()
    data_dir = Path(tempfile.mkdtemp(prefix="register_load_"))
    db_url = recreate(admin, SCRATCH)
    env = _environment(db_url, data_dir)
    os.environ.update(env)
    sign_ops = int(args.rate * args.seconds * 0.10 * 1.5) + 10
    print("setting up the scratch database…", flush=True)
    world = _setup(n_save=20, n_sign=sign_ops // SIGNERS + 1)
    before = _counts()
    from django.db import connection

    connection.close()
    log = open(data_dir / "gunicorn.log", "w")  # noqa: SIM115 - closed in finally
    proc = subprocess.Popen(
        [sys.executable, "-m", "gunicorn", "decisions.wsgi", "--bind", f"{HOST}:{PORT}",
         "--workers", str(args.workers), "--timeout", "60", "--graceful-timeout", "5",
         *WORKER_TMP_DIR],
        cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT)
    try:
        _wait_until_up(proc)
        print(f"mixed workload: {args.rate}/s for {args.seconds} s…", flush=True)
        mix = open_loop(Workload(world), args.rate, args.seconds, args.clients)
        print(f"ceiling: GET /healthz, {args.ceiling_clients} clients…", flush=True)
        ceiling = closed_loop("/healthz", args.ceiling_clients, args.ceiling_seconds)
    finally:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()

    from decisions.models import AuditEvent
    from decisions.services.audit import verify_chain, verify_records

    after = _counts()
    report = verify_chain()
    problems = verify_records()
    refused = AuditEvent.objects.filter(action="signoff.refused").count()
    sign_201 = mix["statuses"].get("sign", {}).get(201, 0)
    save_201 = mix["statuses"].get("save", {}).get(201, 0)
    reconcile = {"signoffs": after["signoffs"] - before["signoffs"], "sign_201": sign_201,
                 "versions": after["versions"] - before["versions"], "save_201": save_201,
                 "events": after["events"] - before["events"],
                 "expected_events": sign_201 + save_201 + refused}
    reconcile["ok"] = (reconcile["signoffs"] == sign_201 and reconcile["versions"] == save_201
                       and reconcile["events"] == reconcile["expected_events"])
    chain = {"ok": report.ok, "events": report.count, "first_break": report.first_break,
             "records_ok": not problems}
    text = _markdown(args, _versions(), mix, ceiling, reconcile, chain)
    print(text)
    if not args.no_write:
        RESULTS.write_text(text, encoding="utf-8")
        print(f"written to {RESULTS.relative_to(ROOT)}")
    connection.close()
    if not (report.ok and not problems and reconcile["ok"]):
        sys.exit(1)


if __name__ == "__main__":
    main()
