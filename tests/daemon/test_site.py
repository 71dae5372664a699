"""The connection cap fitted to the open-file limit (daemon/api/site.py), in a child process
whose own RLIMIT_NOFILE the test lowers (a lowered hard limit cannot be raised again)."""

from __future__ import annotations

import subprocess
import sys

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
