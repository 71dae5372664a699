"""`taprigd status`: how the rig on this board is, for an operator at a shell.

Reads only: the configuration, the run file the service writes while it listens, the store
(opened read-only) and the free disk; if the service runs, it also asks it for its state
over loopback with the rig's token. Never changes anything.
"""

from __future__ import annotations

import dataclasses
import json
import os
import shutil
import urllib.error
import urllib.request
from pathlib import Path
from typing import Any

from .auth import TOKEN_FILE
from .config import Config
from .errors import StoreError
from .eventtext import count
from .identity import read_run_file
from .store import peek_stats

ASK_TIMEOUT_S = 3.0


def gather(cfg: Config) -> dict[str, Any]:
    """Everything `taprigd status` shows, as plain data (the --json output).

    "running" is true only when the run file names a live process and its service answered.
    """
    data_dir = cfg.store.data_dir
    out: dict[str, Any] = {"data_dir": str(data_dir), "running": False, "pid": None,
                           "service": None, "state": None, "problem": None}  # fmt: skip
    run = read_run_file(data_dir)
    if run is None:
        out["problem"] = "taprigd is not running (no run file)"
    elif not _alive(int(run["pid"])):
        out["problem"] = f"taprigd is not running (stale run file of pid {run['pid']})"
    else:
        out["pid"] = run["pid"]
        out["service"] = f"http://{_loopback(str(run['bind']))}:{run['port']}/v1"
        try:
            out["state"] = _ask(out["service"] + "/state", data_dir / TOKEN_FILE)
            out["running"] = True
        except (OSError, ValueError) as exc:
            out["problem"] = f"taprigd (pid {run['pid']}) does not answer: {exc}"
    try:
        stats = peek_stats(data_dir)
        out["store"] = None if stats is None else dataclasses.asdict(stats)
    except StoreError as exc:
        out["store"] = {"error": str(exc)}
    try:
        out["free_mb"] = round(shutil.disk_usage(data_dir).free / 1e6, 1)
    except OSError:
        out["free_mb"] = None
    out["min_free_mb"] = cfg.store.min_free_mb
    return out


def render(status: dict[str, Any]) -> list[str]:
    """The lines `taprigd status` prints."""
    running = f"running, pid {status['pid']}" if status["running"] else "not running"
    lines = [f"taprigd     {running}"]
    if status["problem"]:
        lines.append(f"problem     {status['problem']}")
    state = status["state"]
    if state is not None:
        s = state["session"]
        link = s["link"]
        lines += [
            f"service     {status['service']}",
            f"device      {s['device']}: {s['state']}"
            + (f", {s['rate_hz']:g} Hz" if s["rate_hz"] else ""),
            f"link errors CRC {link['crc_errors']}, resyncs {link['resyncs']}, samples lost "
            f"{link['samples_lost']}, malformed lines {link['malformed_lines']}, "
            f"reconnects {link['reconnects']}, reads dropped {link.get('dropped_reads', 0)}",
            "test        " + _test_line(s),
        ]
    store = status.get("store")
    if store is None:
        lines.append(f"store       none yet in {status['data_dir']}")
    elif "error" in store:
        lines.append(f"store       {store['error']}")
    else:
        mb = (store["db_bytes"] + store["wal_bytes"]) / 1e6
        lines.append(
            f"store       {store['path']}: {mb:.1f} MB, {count(store['tests'], 'test')}, "
            f"{count(store['point_sets'], 'point set')}, last change {store['last_seq']}"
        )
    free = status["free_mb"]
    if free is not None:
        low = " (too little to arm)" if free < status["min_free_mb"] else ""
        lines.append(f"free disk   {free:.0f} MB, {status['min_free_mb']} MB needed to arm{low}")
    return lines


def _test_line(s: dict[str, Any]) -> str:
    if s["test"] is None:
        return "none selected"
    armed = "armed" if s["armed"] else "disarmed"
    if s.get("disk", {}).get("waiting_for_room"):
        armed = "paused, waiting for disk room"
    return (f"{s['test']}, point {s['point']} ({s['averages']}/{s['required']} averages), "
            f"{count(len(s['done']), 'point')} done, {armed}")  # fmt: skip


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # it runs, as another user
    return True


def _loopback(bind: str) -> str:
    """Where to reach a service bound to `bind` from this board."""
    if bind in ("0.0.0.0", ""):
        return "127.0.0.1"
    if bind == "::":
        return "[::1]"
    return f"[{bind}]" if ":" in bind else bind


def _ask(url: str, token_file: Path) -> Any:
    request = urllib.request.Request(url)
    request.add_header("Authorization", f"Bearer {token_file.read_text(encoding='ascii').strip()}")
    try:
        with urllib.request.urlopen(request, timeout=ASK_TIMEOUT_S) as resp:
            return json.loads(resp.read())
    except urllib.error.HTTPError as exc:
        raise OSError(f"HTTP {exc.code} from {url}") from None
