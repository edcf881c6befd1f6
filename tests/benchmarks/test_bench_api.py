"""Issue 9, target 6: ``POST /api/evaluate/`` with a 199-node tree, p95 under 50 ms with 16
concurrent clients on gunicorn with 2 sync workers (loopback).

Server start-up reuses the load script's helpers (tests/benchmarks/load/load_test.py:
production-like environment with DEBUG off and the fairness throttles lifted, the
request helper, the wait-and-warm-up). The database is a throwaway SQLite file in the
test's temporary folder (migrated, one invented user and token made with ``manage.py
shell``). The 16 clients are wrk's connections when Debian's ``wrk`` is installed (the
figure the target is judged on), and 16 threads in this process using ``http.client``
for comparison (and as the judged figure when wrk is missing); 127.0.0.1 only, closed
loop (each sends its next request when the last is answered), bounded in time; the first
seconds are a warm-up, excluded. Everything shares the machine's 2 cores: the server,
the clients and whatever else runs. wrk runs in rounds, in turn on this server and on a
second one started with ``GC_FREEZE=false`` (decisions/serving.py off), so that both meet
the same moods of the machine; the judged p95 is that of this server's median round.
"""

import http.client
import json
import os
import shutil
import socket
import subprocess
import time
from collections import Counter
from contextlib import contextmanager
from pathlib import Path

import pytest

from tests.benchmarks.bench_inputs import alternating_tree
from tests.benchmarks.conftest import PYTHON, ROOT, check_target, write_section
from tests.benchmarks.load import load_test as lt

pytestmark = pytest.mark.benchmark
COMMAND = "python -m pytest tests/benchmarks/test_bench_api.py -m benchmark -s"
CLIENTS, WORKERS, WARM_UP, MAX_REQUESTS = 16, 2, 5.0, 50_000
# wrk rounds on each server in turn; the judged p95 is the median round's.
ROUNDS, ROUND_SECONDS = 3, 10.0
FLOOR_SECONDS = THREADS_SECONDS = 15.0
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


# wrk (Debian's package) drives the 16 connections from C: its own CPU per request is a
# small fraction of the Python threads', and a finished response is timed at once, not
# after waiting for the interpreter lock, so the latency is the server's.
_WRK_SCRIPT = """
wrk.method = "POST"
local f = assert(io.open({body!r}, "rb")); wrk.body = f:read("*a"); f:close()
wrk.headers["Content-Type"] = "application/json"
wrk.headers["Accept"] = "application/json"
wrk.headers["Authorization"] = "Token {token}"
wrk.headers["Connection"] = "close"
done = function(summary, latency, requests)
  local e = summary.errors
  io.write(string.format("RESULT %d %d %d %d %d %d %d", summary.requests, summary.duration,
    e.connect, e.read, e.write, e.status, e.timeout))
  for _, p in ipairs({{50, 95, 99}}) do io.write(string.format(" %d", latency:percentile(p))) end
  io.write(string.format(" %d\\n", latency.max))
end
"""


def _wrk(token: str, body: bytes, seconds: float, folder: Path, port: int | None = None) -> dict | None:
    """16 connections from wrk for ``seconds``; None when wrk is not installed."""
    if shutil.which("wrk") is None:
        return None
    body_path, script = folder / f"wrk-body-{len(body)}.json", folder / "wrk.lua"
    body_path.write_bytes(body)
    script.write_text(_WRK_SCRIPT.format(body=str(body_path), token=token))
    url = f"http://{lt.HOST}:{port or lt.PORT}/api/evaluate/"
    run = subprocess.run(["wrk", "-t2", f"-c{CLIENTS}", f"-d{seconds:.0f}s", "--timeout", "30s",
                          "-s", str(script), url], capture_output=True, text=True, check=True)
    lines = [line for line in run.stdout.splitlines() if line.startswith("RESULT")]
    assert lines, f"wrk printed no RESULT line (a Lua error?): {run.stdout[-500:]} {run.stderr[-500:]}"
    fields = lines[0].split()
    n, duration, connect, read, write, status, timeout, p50, p95, p99, top = map(int, fields[1:])
    return {"n": n, "rate": n / (duration / 1e6), "p50": p50 / 1000, "p95": p95 / 1000,
            # wrk counts answers of 400 and above as status errors (3xx would pass unseen;
            # the endpoint answers 200 or 4xx, and one checked request precedes the run).
            "p99": p99 / 1000, "max": top / 1000, "status_errors": status,
            "transport_errors": connect + read + write + timeout}


def _wrk_with_cpu(pids, token: str, body: bytes, seconds: float, folder: Path,
                  port: int | None = None) -> dict | None:
    before = _cpu_seconds(pids)
    result = _wrk(token, body, seconds, folder, port)
    if result is not None:
        result["server_cpu_ms"] = (_cpu_seconds(pids) - before) / max(result["n"], 1) * 1000
    return result


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


def _row(label: str, r: dict | None, answers: str, bold: bool = False) -> str:
    if r is None:
        return f"| {label} | wrk is not installed (apt-get install wrk) | | | | | | |"
    p95 = f"**{r['p95']:.1f} ms**" if bold else f"{r['p95']:.1f} ms"
    cpu = f"{r['server_cpu_ms']:.1f} ms" if "server_cpu_ms" in r else "—"
    return (f"| {label} | {r['n']:,} | {r['rate']:.1f} req/s | {r['p50']:.1f} ms | {p95} | "
            f"{r['p99']:.1f} ms | {r['max']:.1f} ms | {cpu} | {answers} |")


def _wrk_answers(r: dict | None) -> str:
    if r is None:
        return ""
    return "no 4xx/5xx, no transport errors" if not r["status_errors"] + r["transport_errors"] \
        else f"{r['status_errors']:,} 4xx/5xx, {r['transport_errors']:,} transport errors"


def _heartbeat_folder() -> str:
    return lt.WORKER_TMP_DIR[-1] if lt.WORKER_TMP_DIR else "the default temporary folder"


def _median_round(rounds: list[dict | None]) -> dict | None:
    """The round whose p95 is the median of the rounds' (None when wrk is missing)."""
    if any(r is None for r in rounds):
        return None
    return sorted(rounds, key=lambda r: r["p95"])[len(rounds) // 2]


def _freeze_summary(rounds: list[dict], unfrozen_rounds: list[dict]) -> str:
    def med(rs, key):
        return sorted(r[key] for r in rs)[len(rs) // 2]
    return (f"- Start-up objects frozen (decisions/serving.py) against not (GC_FREEZE=false), "
            f"median of the rounds: p95 {med(rounds, 'p95'):.1f} against "
            f"{med(unfrozen_rounds, 'p95'):.1f} ms, p99 {med(rounds, 'p99'):.1f} against "
            f"{med(unfrozen_rounds, 'p99'):.1f} ms, max {med(rounds, 'max'):.1f} against "
            f"{med(unfrozen_rounds, 'max'):.1f} ms, {med(rounds, 'rate'):.0f} against "
            f"{med(unfrozen_rounds, 'rate'):.0f} req/s, server CPU "
            f"{med(rounds, 'server_cpu_ms'):.2f} against {med(unfrozen_rounds, 'server_cpu_ms'):.2f}"
            f" ms a request.")


def _round_rows(label: str, rounds: list[dict | None], judged: bool) -> list[str]:
    middle = _median_round(rounds)
    return [_row(f"{label}, round {i} of {len(rounds)}"
                 f"{' (median p95)' if r is not None and r is middle else ''}",
                 r, _wrk_answers(r), bold=judged and r is not None and r is middle)
            for i, r in enumerate(rounds, 1)]


def _report(body, one, cpu, floor_cpu, growth, rounds, floor_wrk, threads, threads_floor,
            unfrozen_rounds):
    (t, t_statuses), (tf, tf_statuses) = threads, threads_floor
    by_wrk = _median_round(rounds)
    main = by_wrk or t
    lines = [
        f"gunicorn {WORKERS} sync workers (start-up objects frozen out of garbage collection, "
        f"the default: decisions/serving.py; heartbeat file in {_heartbeat_folder()}, as in the "
        f"README's deployment command; bodies read and result documents written with orjson: "
        f"decisions/api/parsers.py, renderers.py), DEBUG off, throttles lifted (per second), "
        f"throwaway "
        f"SQLite file; tree of 199 nodes ({len(body) / 1024:.0f} KiB of JSON, encoded once); "
        f"{CLIENTS} clients in a closed loop, a new connection per request, 127.0.0.1 only: "
        f"wrk (2 threads, {ROUNDS} rounds of {ROUND_SECONDS:.0f} s, in turn with a second "
        f"server whose workers do not freeze) and, for comparison, {CLIENTS} Python threads "
        f"(http.client, {THREADS_SECONDS:.0f} s), after a {WARM_UP:.0f} s warm-up. Server, "
        f"clients and other work share 2 cores (load average {os.getloadavg()[0]:.1f}).",
        "",
        "| clients | requests | achieved rate | p50 | p95 | p99 | max | server CPU / request "
        "| answers |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---|",
        f"| 1 (sequential) | {one['n']} | — | {one['p50']:.1f} ms | {one['p95']:.1f} ms | "
        f"{one['p99']:.1f} ms | {one['max']:.1f} ms | {cpu:.1f} ms | 200 |",
        *_round_rows(f"{CLIENTS}, wrk", rounds, judged=True),
        *_round_rows(f"{CLIENTS}, wrk, start-up objects not frozen (GC_FREEZE=false)",
                     unfrozen_rounds, judged=False),
        _row(f"{CLIENTS}, wrk, floor (tiny refused document)", floor_wrk,
             f"{floor_wrk['status_errors']:,} 4xx/5xx (400 expected), "
             f"{floor_wrk['transport_errors']} transport errors" if floor_wrk else ""),
        _row(f"{CLIENTS}, Python threads", t, str(dict(t_statuses))),
        _row(f"{CLIENTS}, Python threads, floor", tf, str(dict(tf_statuses))),
        "",
        f"- Server CPU per request is the gunicorn processes' user + system time (/proc) over "
        f"the run divided by the requests answered; one client alone: {cpu:.1f} ms for the "
        f"evaluation, {floor_cpu:.1f} ms for the floor (authentication, parsing, a 400 answer).",
        f"- At {main['rate']:.0f} req/s, the 2 cores give {2000 / main['rate']:.1f} ms per request "
        f"all told (server, clients, the rest of the machine). With {WORKERS} sync workers, "
        f"{CLIENTS} clients queue about {CLIENTS // WORKERS} deep, so the latency is about "
        f"{CLIENTS} / rate: a p95 under 50 ms needs roughly {CLIENTS / 0.040:.0f} req/s, "
        f"about {2000 * 0.040 / CLIENTS:.1f} ms per request all told.",
        "- The Python threads cost their own CPU on the same cores and time a response only "
        "once they get the interpreter lock back; wrk's figures are the server's.",
        "- Growth, one client (median latency; server CPU per request):",
        "",
        "| nodes | body | latency (median) | server CPU | CPU per node |",
        "|---:|---:|---:|---:|---:|",
        *[f"| {n:,} | {size / 1024:.0f} KiB | {lat:.1f} ms | {c:.1f} ms | {c / n * 1000:.1f} µs |"
          for n, size, lat, c in growth],
        "",
    ]
    return lines


@contextmanager
def _gunicorn(env: dict, log_path: Path, port: int):
    """gunicorn with the benchmark's settings on ``port``, up and answering; its process ids."""
    log = open(log_path, "a")  # noqa: SIM115 - closed in finally
    proc = subprocess.Popen(
        [PYTHON, "-m", "gunicorn", "decisions.wsgi", "--bind", f"{lt.HOST}:{port}",
         "--workers", str(WORKERS), "--timeout", "60", "--graceful-timeout", "5",
         *lt.WORKER_TMP_DIR],
        cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT)
    try:
        lt._wait_until_up(proc, port=port)
        yield _worker_pids(proc.pid)
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()


def test_evaluate_endpoint_p95_with_16_clients(tmp_path, monkeypatch):
    # The load script's helpers talk to its module-level HOST/PORT: point them at a free port
    # (its own 8765 may be taken by someone's development server).
    monkeypatch.setattr(lt, "PORT", _free_port())
    env = lt._environment(f"sqlite:///{tmp_path / 'api.sqlite3'}", tmp_path)
    env.pop("GC_FREEZE", None)  # the default a deployment gets (decisions/serving.py)
    manage = [PYTHON, str(ROOT / "manage.py")]
    subprocess.run([*manage, "migrate", "--verbosity", "0"], cwd=ROOT, env=env, check=True)
    token = subprocess.run([*manage, "shell", "-c", MAKE_TOKEN], cwd=ROOT, env=env, check=True,
                           capture_output=True, text=True).stdout.strip().splitlines()[-1]
    tree = alternating_tree(199, seed=7)
    tree["title"] = "API benchmark tree (invented)"
    body = json.dumps({"document": tree}).encode()
    # The floor of the stack: the same endpoint, token and parser with a tiny document
    # that the view refuses at once (400), so no evaluation and a short answer.
    floor_body = json.dumps({"document": {"kind": "tree"}}).encode()
    unfrozen_env, unfrozen_port = {**env, "GC_FREEZE": "false"}, _free_port()
    while unfrozen_port == lt.PORT:  # two draws of a free port may coincide
        unfrozen_port = _free_port()
    with _gunicorn(env, tmp_path / "gunicorn.log", lt.PORT) as pids, \
            _gunicorn(unfrozen_env, tmp_path / "gunicorn-unfrozen.log", unfrozen_port) as u_pids:
        status, _, answer = lt._request("POST", "/api/evaluate/", token, {"document": tree})
        assert status == 200, answer[:300]
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
        _wrk(token, body, WARM_UP, tmp_path, unfrozen_port)  # the same for the other server
        # Rounds in turn on the two servers (the second's workers leave their start-up
        # objects to the garbage collector: GC_FREEZE=false), so that both meet the same
        # moods of a shared machine: what decisions/serving.py is worth, in one run.
        rounds, unfrozen_rounds = [], []
        for _ in range(ROUNDS):
            rounds.append(_wrk_with_cpu(pids, token, body, ROUND_SECONDS, tmp_path))
            unfrozen_rounds.append(_wrk_with_cpu(u_pids, token, body, ROUND_SECONDS, tmp_path,
                                                 unfrozen_port))
        floor_wrk = _wrk_with_cpu(pids, token, floor_body, FLOOR_SECONDS, tmp_path)
        latencies, statuses, elapsed = _closed_loop(token, body, THREADS_SECONDS)
        floor, floor_statuses, floor_elapsed = _closed_loop(token, floor_body, FLOOR_SECONDS)
    by_wrk = _median_round(rounds)
    threads = lt._percentiles(latencies)
    threads["rate"] = len(latencies) / elapsed
    threads_floor = lt._percentiles(floor)
    threads_floor["rate"] = len(floor) / floor_elapsed
    main = by_wrk or threads
    assert (all(r["status_errors"] + r["transport_errors"] == 0 for r in rounds + unfrozen_rounds)
            if by_wrk else statuses == Counter({200: len(latencies)})), (rounds, statuses)
    met = check_target(main["p95"] < 50, f"p95 {main['p95']:.0f} ms >= 50 ms")
    lines = _report(body, lt._percentiles(single), cpu, floor_cpu, growth, rounds, floor_wrk,
                    (threads, statuses), (threads_floor, floor_statuses), unfrozen_rounds)
    if by_wrk:
        lines.append(_freeze_summary(rounds, unfrozen_rounds))
    lines.append(f"- p95 with {CLIENTS} clients ({'wrk, median round' if by_wrk else 'Python threads'}): "
                 f"**{main['p95']:.1f} ms** — target 50 ms: {met}.")
    write_section("POST /api/evaluate/, 16 clients (target 6)", COMMAND, "\n".join(lines))
