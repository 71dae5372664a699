"""Start-up time of `taprigd run` until the rig is announced on the LAN, beside the
interpreter and imports alone.

The daemon runs in a network namespace made for the benchmark (loopback only, multicast
on and routed to it, so its real mDNS announcement leaves nothing), with the simulated
instrument and the example configuration's defaults otherwise. The clock runs from the
process start to the READY=1 it sends on its notify socket, which it sends only once the
HTTP service listens and the announcement's name has been probed and claimed (RFC 6762
§8: three probes 250 ms apart, then the announcement). Goal: under 3 s.

The ceiling is the same interpreter, in the same namespace, importing the modules
`taprigd run` imports and exiting: no daemon can be ready sooner.

Needs root (ip netns). Run: python tests/bench/bench_startup.py [--runs 5]
"""

from __future__ import annotations

import argparse
import os
import secrets
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from bench_capture import IMPORTS
from table import Figure, Row, show

GOAL_S = 3.0
HOST = "127.0.0.2"  # the rig's address on the namespace's loopback
IP = shutil.which("ip", path=os.pathsep.join([os.environ.get("PATH", ""), "/usr/sbin", "/sbin"]))


def _ip(*args: str) -> None:
    assert IP is not None
    subprocess.run([IP, *args], check=True, capture_output=True, text=True, timeout=10)


def make_namespace() -> str:
    name = f"taprig-bench-{secrets.token_hex(4)}"
    _ip("netns", "add", name)
    _ip("-n", name, "link", "set", "lo", "up")
    _ip("-n", name, "link", "set", "lo", "multicast", "on")
    _ip("-n", name, "route", "add", "224.0.0.0/4", "dev", "lo")
    _ip("-n", name, "addr", "add", f"{HOST}/8", "dev", "lo")
    return name


def time_to_ready(ns: str, tmp: Path, k: int) -> float:
    """Seconds from starting `taprigd run` (announce on) to its READY=1."""
    assert IP is not None
    path = tmp / f"notify-{k}.sock"
    with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as manager:
        manager.bind(str(path))
        manager.settimeout(30.0)
        env = {**os.environ, "NOTIFY_SOCKET": str(path)}
        argv = [IP, "netns", "exec", ns, sys.executable, "-m", "taprig.daemon", "run",
                "--set", f"store.data_dir={tmp / f'rig-{k}'}", "--set", f"rig.name=bench-{k}",
                "--set", f"service.bind={HOST}", "--set", "service.port=0",
                "--set", f"service.announce_on={HOST}"]  # fmt: skip
        t0 = time.perf_counter()
        proc = subprocess.Popen(argv, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        try:
            while b"READY=1" not in manager.recv(4096).split(b"\n"):
                pass
            ready = time.perf_counter() - t0
        finally:
            proc.terminate()
            _, err = proc.communicate(timeout=20)
        if proc.returncode != 0:
            raise RuntimeError(f"taprigd exited {proc.returncode}:\n{err.decode()}")
    return ready


def time_to_import(ns: str) -> float:
    assert IP is not None
    t0 = time.perf_counter()
    subprocess.run([IP, "netns", "exec", ns, sys.executable, "-c", IMPORTS], check=True)
    return time.perf_counter() - t0


def run(runs: int = 5) -> list[Row]:
    if os.geteuid() != 0 or IP is None:
        print("start-up benchmark skipped: needs root and iproute2 for a network namespace")
        return []
    ns = make_namespace()
    try:
        with tempfile.TemporaryDirectory(prefix="taprig-bench-") as tmp:
            ready = [time_to_ready(ns, Path(tmp), k) for k in range(runs)]
        imports = [time_to_import(ns) for _ in range(runs)]
    finally:
        _ip("netns", "del", ns)
    return [
        ("start-up to announced (READY=1), median", statistics.median(ready), "s",
         f"goal < {GOAL_S:g} s; {runs} starts, slowest {max(ready):.2f} s"),
        ("ceiling: interpreter + imports alone", statistics.median(imports), "s",
         "same modules, same namespace"),
    ]  # fmt: skip


def headline(rows: list[Row]) -> list[Figure]:
    if not rows:
        return []
    return [Figure("start-up until announced", rows[0][1], "s", "<=", GOAL_S, rows[1][1],
                   "interpreter + imports")]  # fmt: skip


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5)
    show(run(parser.parse_args().runs), decimals=2)
