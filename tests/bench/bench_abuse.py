"""The service under abuse: a paired client's answer times and the log's growth while a
neighbour holds idle connections (taprigd as a real process on loopback, default settings).

1. A neighbour on 127.0.0.1 keeps trying to hold N idle connections (N = 0, 500, 2,000),
   reopening each one the rig refuses or times out (up to 250 new ones between two rounds of
   the paired client); a paired client on 127.0.0.2, on one kept-alive connection, asks
   /v1/state, /v1/tests, /v1/changes and /v1/info in turn. Median, 99th percentile and
   slowest answer per N, beside the goal (every answer within 1 s) and the same client's
   figures with no neighbour (the ceiling).
2. The daemon's log while the 2,000-connection attack runs for `log_s` seconds, without
   the paired client's own access lines: bytes per minute, beside a ceiling of 4 kB/min
   ("a few kB per minute", issue 14). Connections the neighbour opened per minute are
   printed beside it, to show how hard it pushed.

Run: python tests/bench/bench_abuse.py [--seconds 10] [--log-s 70]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

from table import Figure, Row, pick
from table import show as show_rows

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: the fault helpers

from faults.attack import Neighbour, PairedClient, raise_open_file_limit
from faults.process import Taprigd

GOAL_ANSWER_MS = 1000.0
CEILING_LOG_B_PER_MIN = 4096.0
PATHS = ("/v1/state", "/v1/tests", "/v1/changes?since=0", "/v1/info")


def _attack_bytes(log: str) -> int:
    return sum(len(line) + 1 for line in log.splitlines() if "127.0.0.2" not in line)


def _under(daemon: Taprigd, idle: int, seconds: float) -> tuple[list[float], Neighbour | None]:
    """The paired client's answer times (s) while a neighbour holds `idle` connections."""
    client = PairedClient(daemon.port, daemon.token)
    neighbour = Neighbour(daemon.port, idle) if idle else None
    try:
        end = time.monotonic() + seconds
        while time.monotonic() < end:
            if neighbour is not None:
                neighbour.top_up(at_most=250)
            for path in PATHS:
                status, _ = client.ask(path)
                assert status == 200, (path, status)
        return client.latencies, neighbour
    finally:
        client.close()
        if neighbour is not None:
            neighbour.close()


def run(seconds: float = 10.0, log_s: float = 70.0) -> list[Row]:
    most = raise_open_file_limit()
    rows: list[Row] = []
    with tempfile.TemporaryDirectory() as tmp:
        daemon = Taprigd(Path(tmp) / "rig").start().wait_ready()
        try:
            for idle in sorted({0, min(500, most), most}):
                times, _ = _under(daemon, idle, seconds)
                ms = sorted(t * 1e3 for t in times)
                p99 = ms[min(len(ms) - 1, int(0.99 * len(ms)))]
                note = f"goal every answer <= {GOAL_ANSWER_MS:g} ms; {len(ms)} answers"
                rows += [
                    (f"paired answer, {idle} idle conns: median", statistics.median(ms), "ms", ""),
                    (f"paired answer, {idle} idle conns: p99", p99, "ms", ""),
                    (f"paired answer, {idle} idle conns: slowest", ms[-1], "ms", note),
                ]
            before = _attack_bytes(daemon.log())
            t0 = time.monotonic()
            _, neighbour = _under(daemon, most, log_s)
            minutes = (time.monotonic() - t0) / 60
            grown = _attack_bytes(daemon.log()) - before
            assert neighbour is not None
            rows += [
                (f"log growth under {most} idle conns", grown / minutes, "B/min",
                 f"ceiling {CEILING_LOG_B_PER_MIN:g} B/min; {grown} B in {minutes * 60:.0f} s"),
                ("neighbour's connections opened", neighbour.opened / minutes, "/min",
                 f"{neighbour.closed_by_rig} refused or timed out by the rig"),
            ]  # fmt: skip
        finally:
            daemon.stop()
    return rows


def show(rows: list[Row]) -> None:
    show_rows(rows)


def headline(rows: list[Row]) -> list[Figure]:
    idle = max(int(name.split(", ")[1].split()[0]) for name, *_ in rows if ", " in name)
    calm = pick(rows, "paired answer, 0 idle conns: slowest")
    return [
        Figure(f"paired answer, {idle} idle conns, slowest", pick(
            rows, f"paired answer, {idle} idle conns: slowest"), "ms", "<=", GOAL_ANSWER_MS,
            calm, "slowest answer with no neighbour"),
        Figure("log growth under attack", pick(rows, "log growth under"), "B/min", "<=",
               CEILING_LOG_B_PER_MIN, float("nan"), ""),
    ]  # fmt: skip


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=10.0)
    parser.add_argument("--log-s", type=float, default=70.0)
    args = parser.parse_args()
    result = run(args.seconds, args.log_s)
    show(result)
    for figure in headline(result):
        print(figure)
