"""Issue 9, target 6: ``POST /api/evaluate/`` with a 199-node tree, p95 under 50 ms with 16
concurrent clients on gunicorn with 2 sync workers (loopback).

Server start-up reuses the load script's helpers (tests/benchmarks/load/load_test.py:
production-like environment with DEBUG off and the fairness throttles lifted, the
request helper, the wait-and-warm-up). The database is a throwaway SQLite file in the
test's temporary folder (migrated, one invented user and token made with ``manage.py
shell``). The clients are 16 threads in this process using ``http.client`` on
127.0.0.1 only, closed loop (each sends its next request when the last is answered),
bounded in time and count; the first seconds are a warm-up, excluded. Everything shares
the machine's 2 cores: the server, the clients and whatever else runs.
"""

import http.client
import json
import os
import socket
import subprocess
import time
from collections import Counter
from pathlib import Path

import pytest

from tests.benchmarks.bench_inputs import alternating_tree
from tests.benchmarks.conftest import PYTHON, ROOT, check_target, write_section
from tests.benchmarks.load import load_test as lt

pytestmark = pytest.mark.benchmark
COMMAND = "python -m pytest tests/benchmarks/test_bench_api.py -m benchmark -s"
CLIENTS, WORKERS, WARM_UP, SECONDS, MAX_REQUESTS = 16, 2, 5.0, 30.0, 50_000
FLOOR_SECONDS = 15.0
# Tree sizes for the growth table (one client); 10^5 nodes is beyond the default body limit.
GROWTH_SIZES = ((199, 40), (1_000, 20), (10_000, 7))

MAKE_TOKEN = """
from django.contrib.auth import get_user_model
from rest_framework.authtoken.models import Token
user = get_user_model().objects.create_user("bench-analyst", password="bench password 9")
print(Token.objects.create(user=user).key)
"""


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _post(token: str, body: bytes, path: str = "/api/evaluate/") -> int:
    # The body is encoded once, outside the loop: the client's own JSON encoding
    # would otherwise compete with the server for the same 2 cores.
    conn = http.client.HTTPConnection(lt.HOST, lt.PORT, timeout=30)
    try:
        conn.request("POST", path, body=body, headers={
            "Authorization": f"Token {token}", "Accept": "application/json",
            "Content-Type": "application/json"})
        response = conn.getresponse()
        response.read()
        return response.status
    finally:
        conn.close()


def _closed_loop(token: str, body: bytes, seconds: float) -> tuple[list[float], Counter, float]:
    return lt.run_closed_loop(lambda: _post(token, body), CLIENTS, seconds, MAX_REQUESTS)


def _cpu_seconds(pids: list[int]) -> float:
    """User + system CPU time of the server's processes (Linux /proc)."""
    total = 0
    for pid in pids:
        try:
            fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        total += int(fields[11]) + int(fields[12])
    return total / os.sysconf("SC_CLK_TCK")


def _worker_pids(master: int) -> list[int]:
    children = Path(f"/proc/{master}/task/{master}/children")
    return [master, *map(int, children.read_text().split())] if children.exists() else [master]


def _growth(pids, token: str) -> list[tuple[int, int, float, float]]:
    """One client: (nodes, body bytes, median latency ms, server CPU ms) per tree size."""
    rows = []
    for nodes, repeats in GROWTH_SIZES:
        body = json.dumps({"document": alternating_tree(nodes, seed=7)}).encode()
        assert _post(token, body) == 200
        times = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            _post(token, body)
            times.append(time.perf_counter() - t0)
        rows.append((nodes, len(body), sorted(times)[len(times) // 2] * 1000,
                     _server_cpu_per_request(pids, token, body, n=repeats)))
    return rows


def _server_cpu_per_request(pids, token: str, body: bytes, n: int = 100) -> float:
    """Server CPU per request, one client, in ms: less moved by other work than wall time."""
    before = _cpu_seconds(pids)
    for _ in range(n):
        _post(token, body)
    return (_cpu_seconds(pids) - before) / n * 1000


def test_evaluate_endpoint_p95_with_16_clients(tmp_path, monkeypatch):
    # The load script's helpers talk to its module-level HOST/PORT: point them at a free port
    # (its own 8765 may be taken by someone's development server).
    monkeypatch.setattr(lt, "PORT", _free_port())
    env = lt._environment(f"sqlite:///{tmp_path / 'api.sqlite3'}", tmp_path)
    manage = [PYTHON, str(ROOT / "manage.py")]
    subprocess.run([*manage, "migrate", "--verbosity", "0"], cwd=ROOT, env=env, check=True)
    token = subprocess.run([*manage, "shell", "-c", MAKE_TOKEN], cwd=ROOT, env=env, check=True,
                           capture_output=True, text=True).stdout.strip().splitlines()[-1]
    tree = alternating_tree(199, seed=7)
    tree["title"] = "API benchmark tree (invented)"
    log = open(tmp_path / "gunicorn.log", "w")  # noqa: SIM115 - closed in finally
    proc = subprocess.Popen(
        [PYTHON, "-m", "gunicorn", "decisions.wsgi", "--bind", f"{lt.HOST}:{lt.PORT}",
         "--workers", str(WORKERS), "--timeout", "60", "--graceful-timeout", "5"],
        cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT)
    body = json.dumps({"document": tree}).encode()
    # The floor of the stack: the same endpoint, token and parser with a tiny document
    # that the view refuses at once (400), so no evaluation and a short answer.
    floor_body = json.dumps({"document": {"kind": "tree"}}).encode()
    try:
        lt._wait_until_up(proc)
        status, _, answer = lt._request("POST", "/api/evaluate/", token, {"document": tree})
        assert status == 200, answer[:300]
        pids = _worker_pids(proc.pid)
        # one client alone: the service time, without queueing
        single = []
        for _ in range(40):
            t0 = time.perf_counter()
            _post(token, body)
            single.append(time.perf_counter() - t0)
        cpu = _server_cpu_per_request(pids, token, body)
        floor_cpu = _server_cpu_per_request(pids, token, floor_body)
        growth = _growth(pids, token)
        _closed_loop(token, body, WARM_UP)  # warm-up with every client, excluded
        latencies, statuses, elapsed = _closed_loop(token, body, SECONDS)
        floor, floor_statuses, floor_elapsed = _closed_loop(token, floor_body, FLOOR_SECONDS)
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()
    p = lt._percentiles(latencies)
    one = lt._percentiles(single)
    low = lt._percentiles(floor)
    rate = len(latencies) / elapsed
    met = check_target(p["p95"] < 50, f"p95 {p['p95']:.0f} ms >= 50 ms")
    ok = statuses.get(200, 0)
    lines = [
        f"gunicorn {WORKERS} sync workers, DEBUG off, throttles lifted, throwaway SQLite file; "
        f"{CLIENTS} client threads (http.client, 127.0.0.1, a new connection per request), "
        f"closed loop for {SECONDS:.0f} s after a {WARM_UP:.0f} s warm-up; tree of 199 nodes "
        f"({len(body) / 1024:.0f} KiB of JSON, encoded once). Server, clients and other work share 2 cores "
        f"(load average {os.getloadavg()[0]:.1f}).",
        "",
        "| clients | requests | achieved rate | p50 | p95 | p99 | max | answers |",
        "|---:|---:|---:|---:|---:|---:|---:|---|",
        f"| 1 (sequential) | {one['n']} | — | {one['p50']:.1f} ms | {one['p95']:.1f} ms | "
        f"{one['p99']:.1f} ms | {one['max']:.1f} ms | 200 |",
        f"| {CLIENTS} | {p['n']:,} | {rate:.1f} req/s | {p['p50']:.1f} ms | **{p['p95']:.1f} ms** | "
        f"{p['p99']:.1f} ms | {p['max']:.1f} ms | {dict(statuses)} |",
        f"| {CLIENTS}, floor (tiny refused document) | {low['n']:,} | "
        f"{len(floor) / floor_elapsed:.1f} req/s | {low['p50']:.1f} ms | {low['p95']:.1f} ms | "
        f"{low['p99']:.1f} ms | {low['max']:.1f} ms | {dict(floor_statuses)} |",
        "",
        f"- CPU per request at full load, from the rate (2 cores / requests per second, "
        f"server and clients together): **{2000 / rate:.1f} ms** for the 199-node evaluation, "
        f"{2000 * floor_elapsed / max(len(floor), 1):.1f} ms for the floor (authentication, "
        f"parsing, a 400 answer). For the p95 to fall under 50 ms, 16 clients need about "
        f"{2 * 45 / CLIENTS:.1f} ms per request all told.",
        f"- Server CPU per request with one client (gunicorn processes, /proc, 100 requests): "
        f"{cpu:.1f} ms for the evaluation, {floor_cpu:.1f} ms for the floor (on this virtual "
        f"machine the one-client figure runs above the full-load one; the queue sees the latter).",
        "- Growth, one client (median latency; server CPU per request):",
        "",
        "| nodes | body | latency (median) | server CPU | CPU per node |",
        "|---:|---:|---:|---:|---:|",
        *[f"| {n:,} | {size / 1024:.0f} KiB | {lat:.1f} ms | {c:.1f} ms | {c / n * 1000:.1f} µs |"
          for n, size, lat, c in growth],
        "",
        f"- p95 with {CLIENTS} clients: **{p['p95']:.0f} ms** — target 50 ms: {met}. "
        f"{ok:,} of {p['n']:,} answers were 200.",
        f"- With {WORKERS} sync workers, {CLIENTS} clients queue about {CLIENTS / WORKERS:.0f} deep: the "
        f"latency is roughly {CLIENTS / WORKERS:.0f} x the service time (one client alone: p50 "
        f"{one['p50']:.1f} ms), and the rate is bounded by 2 cores / the CPU per request.",
        f"- The floor row is the same stack answering at once: its p95 ({low['p95']:.0f} ms) "
        f"is what 16 clients cost here before any evaluation; the 199-node tree adds "
        f"{p['p95'] - low['p95']:.0f} ms to the p95.",
    ]
    write_section("POST /api/evaluate/, 16 clients (target 6)", COMMAND, "\n".join(lines))
