"""The connection cap fitted to the open-file limit (daemon/api/site.py), in a child process
whose own RLIMIT_NOFILE the test lowers (a lowered hard limit cannot be raised again)."""

from __future__ import annotations

import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

CHILD = """
import logging, resource, sys
from taprig.daemon.api.gate import Limits
from taprig.daemon.api.site import FD_RESERVE, fit_to_open_files
logging.basicConfig(level=logging.INFO, stream=sys.stdout, format="%(message)s")
soft, hard = {soft}, {hard}
resource.setrlimit(resource.RLIMIT_NOFILE, (soft, hard))
got = fit_to_open_files(Limits(total=512, per_address=32, header_s=3.0))
print("RESULT", got.total, got.per_address, got.header_s,
      resource.getrlimit(resource.RLIMIT_NOFILE)[0], FD_RESERVE)
"""


def _child(soft: int, hard: int) -> tuple[list[str], str]:
    out = subprocess.run([sys.executable, "-c", CHILD.format(soft=soft, hard=hard)],
                         capture_output=True, text=True, timeout=60, check=True).stdout  # fmt: skip
    result = next(line for line in out.splitlines() if line.startswith("RESULT"))
    return result.split()[1:], out


def test_soft_limit_is_raised_when_the_hard_one_allows() -> None:
    (total, per, header, soft, reserve), out = _child(256, 4096)
    assert (int(total), int(per), float(header)) == (512, 32, 3.0)
    assert int(soft) == 512 + int(reserve)
    assert "connections: at most 512, 32 per address" in out


def test_cap_is_lowered_to_fit_a_low_hard_limit_with_one_clear_line() -> None:
    (total, per, _, soft, reserve), out = _child(200, 200)
    assert int(soft) == 200 and int(total) == 200 - int(reserve)
    assert int(per) == min(32, int(total))
    assert "raise LimitNOFILE" in out and out.count("LimitNOFILE") == 1


SERVER = """
import asyncio, logging, resource, sys
from aiohttp import web
from taprig.daemon.api.gate import Gate, Limits
from taprig.daemon.api.site import GatedSite
from taprig.daemon.logrepeat import RepeatFilter

handler = logging.StreamHandler(sys.stderr)
handler.addFilter(RepeatFilter(loggers=("taprig.daemon.api.gate",)))
logging.basicConfig(level=logging.INFO, handlers=[handler])
resource.setrlimit(resource.RLIMIT_NOFILE, (64, 64))

async def hello(request):
    return web.Response(text="ok")

async def main():
    app = web.Application()
    app.router.add_get("/", hello)
    runner = web.AppRunner(app)
    await runner.setup()
    gate = Gate(Limits(total=1000, per_address=1000, header_s=60.0))  # more than 64 files
    await GatedSite(runner, gate, "127.0.0.1", 0).start()
    print(runner.addresses[0][1], flush=True)
    await asyncio.get_running_loop().run_in_executor(None, sys.stdin.readline)
    await runner.cleanup()

asyncio.run(main())
"""


def test_out_of_files_at_accept_pauses_with_one_line_and_recovers(tmp_path: Path) -> None:
    """A server process limited to 64 open files meets 150 connections: accept fails with
    EMFILE; it logs one line (not a traceback per attempt), and once the connections go it
    serves again."""
    log = tmp_path / "server.log"
    with log.open("w") as err:
        child = subprocess.Popen([sys.executable, "-c", SERVER], stdin=subprocess.PIPE,
                                 stdout=subprocess.PIPE, stderr=err, text=True)  # fmt: skip
    try:
        assert child.stdout is not None and child.stdin is not None
        port = int(child.stdout.readline())
        held = [socket.create_connection(("127.0.0.1", port), timeout=5) for _ in range(150)]
        deadline = time.monotonic() + 30
        while "out of file descriptors" not in log.read_text():
            assert time.monotonic() < deadline, log.read_text()
            time.sleep(0.05)
        for s in held:
            s.close()
        while True:  # served again once descriptors are free
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/", timeout=5) as r:
                    assert r.read() == b"ok"
                break
            except OSError:
                assert time.monotonic() < deadline + 30, log.read_text()
                time.sleep(0.05)
        child.stdin.write("\n")
        child.stdin.flush()
        assert child.wait(timeout=30) == 0
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
        for pipe in (child.stdin, child.stdout):
            if pipe is not None:
                pipe.close()
    text = log.read_text()
    assert text.count("out of file descriptors") == 1, text
    assert "EMFILE" in text and "Traceback" not in text, text
