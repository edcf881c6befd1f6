"""Benchmark helpers: medians of repeated runs, child-process timing and peak memory, RESULTS.md.

Run with ``python -m pytest tests/benchmarks -m benchmark -s`` (the ``-m`` given on
the command line replaces the ``-m 'not slow and not benchmark'`` of pyproject's
addopts). Each benchmark replaces its own section of ``RESULTS.md``; other sections
stay as they were. ``BENCH_STRICT=1`` turns a missed target into a failure (by
default a miss is printed and recorded, because the shared machine is noisy).
"""

from __future__ import annotations

import datetime as dt
import math
import os
import platform
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest

RESULTS = Path(__file__).with_name("RESULTS.md")
PYTHON = sys.executable
ROOT = Path(__file__).resolve().parents[2]
TIME = "/usr/bin/time" if Path("/usr/bin/time").exists() else shutil.which("gtime")


def median_time(fn, runs: int) -> tuple[float, float]:
    """Median wall and CPU seconds of ``fn()`` over ``runs`` calls."""
    walls, cpus = [], []
    for _ in range(runs):
        c0, w0 = time.process_time(), time.perf_counter()
        fn()
        walls.append(time.perf_counter() - w0)
        cpus.append(time.process_time() - c0)
    return statistics.median(walls), statistics.median(cpus)


def run_process(argv: list[str], stdout=subprocess.DEVNULL) -> tuple[float, float, int]:
    """Wall seconds, CPU seconds (user + system) and peak resident memory (KiB) of a child.

    Peak memory comes from GNU ``/usr/bin/time`` when present: a child forked straight
    from pytest would count pytest's own pages in its ``ru_maxrss`` until it execs.
    """
    with tempfile.NamedTemporaryFile("r", suffix=".time") as report:
        wrapped = ([TIME, "-f", "%U %S %M", "-o", report.name, *argv] if TIME else argv)
        w0 = time.perf_counter()
        proc = subprocess.Popen(wrapped, stdout=stdout, stderr=subprocess.PIPE, cwd=ROOT)
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - w0
        err = proc.stderr.read().decode() if proc.stderr else ""
        proc.stderr.close()
        assert os.waitstatus_to_exitcode(status) == 0, err
        if TIME:
            user, system, peak = report.read().split()[-3:]
            return wall, float(user) + float(system), int(peak)
    return wall, usage.ru_utime + usage.ru_stime, usage.ru_maxrss


def median_process(argv: list[str], runs: int) -> tuple[float, float, int]:
    rows = [run_process(argv) for _ in range(runs)]
    return (statistics.median(r[0] for r in rows), statistics.median(r[1] for r in rows),
            max(r[2] for r in rows))


def json_load_argv(path: Path) -> list[str]:
    return [PYTHON, "-c", "import json, sys; json.load(open(sys.argv[1], 'rb'))", str(path)]


def strict() -> bool:
    return os.environ.get("BENCH_STRICT") == "1"


def check_target(ok: bool, text: str) -> str:
    """'met' or 'NOT MET'; fails the benchmark in strict mode."""
    if not ok and strict():
        pytest.fail(f"target not met: {text}")
    return "met" if ok else "NOT MET"


def machine_pace_ms() -> float:
    """Best of 5 of a fixed pure-Python loop (``sum(range(10**6))``), in ms.

    The machine is a shared virtual one whose speed drifts: the same loop has taken
    from 19 to 30 ms within one hour here. Printed beside each section's figures, it
    says how fast the machine was when they were taken, so runs can be compared.
    """
    best = math.inf
    for _ in range(5):
        t0 = time.perf_counter()
        sum(range(10**6))
        best = min(best, time.perf_counter() - t0)
    return best * 1000


def write_section(name: str, command: str, body: str) -> None:
    """Replace (or append) the section ``name`` of RESULTS.md."""
    load = os.getloadavg()[0]
    header = (f"<!-- section: {name} -->\n## {name}\n\n"
              f"Measured {dt.datetime.now(dt.UTC):%Y-%m-%d %H:%M} UTC on {os.cpu_count()} cores, "
              f"Python {platform.python_version()}, numpy {np.__version__}, load average "
              f"{load:.1f} at the end of the run; machine pace (`sum(range(10**6))`, best of "
              f"5) {machine_pace_ms():.1f} ms at the end of the run.\n\n"
              f"Command: `{command}`\n\n")
    section = header + body.rstrip() + f"\n<!-- end: {name} -->\n"
    text = RESULTS.read_text() if RESULTS.exists() else _PREAMBLE
    pattern = re.compile(rf"<!-- section: {re.escape(name)} -->.*?<!-- end: {re.escape(name)} -->\n",
                         re.S)
    text = pattern.sub(lambda _: section, text) if pattern.search(text) else text + "\n" + section
    RESULTS.write_text(text)
    print("\n" + section)


_PREAMBLE = """# Valuation core benchmarks

Figures written by the benchmarks in this folder (each section names the command
that produced it). Times are medians of repeated runs; "wall" is elapsed time,
"CPU" is user + system time of the process, which moves less than wall time on a
shared machine. Ratios compare figures measured in the same run.
"""


@pytest.fixture(scope="session")
def bench_dir(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("bench")
