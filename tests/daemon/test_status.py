"""`taprigd status` (daemon/status.py): reads the run file, the store and the disk, and asks a
running service over loopback; never changes anything."""

from __future__ import annotations

import asyncio
import subprocess
import sys
from pathlib import Path

from taprig.daemon import identity
from taprig.daemon.api.service import Service
from taprig.daemon.auth import Auth
from taprig.daemon.config import load_config
from taprig.daemon.lifespan import start_rig
from taprig.daemon.status import gather, render

from .test_rig import DAMPED, grid_of, wait_info


def test_no_run_file_and_no_store(tmp_path: Path) -> None:
    cfg = load_config(None, [f"store.data_dir={tmp_path}", "store.min_free_mb=1"])
    summary = gather(cfg)
    assert summary["running"] is False and summary["pid"] is None
    assert summary["problem"] == "taprigd is not running (no run file)"
    assert summary["store"] is None
    lines = render(summary)
    assert lines[0] == "taprigd     not running"
    assert f"store       none yet in {tmp_path}" in lines


def test_a_stale_run_file_names_the_dead_pid(tmp_path: Path) -> None:
    cfg = load_config(None, [f"store.data_dir={tmp_path}", "store.min_free_mb=1"])
    gone = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)  # fmt: skip
    pid = int(gone.stdout)  # that process has exited: the pid names nothing now
    (tmp_path / identity.RUN_FILE).write_text(
        f'{{"pid": {pid}, "bind": "127.0.0.1", "port": 9, "control_port": null}}\n'
    )
    summary = gather(cfg)
    assert summary["running"] is False
    assert summary["problem"] == f"taprigd is not running (stale run file of pid {pid})"


def test_a_running_service_is_asked_for_its_state(tmp_path: Path) -> None:
    """The run file written by the service (identity.write_run_file) leads `gather` to it; the
    state it reports is the rig's, and the store's figures are the store's."""
    cfg = load_config(None, [f"store.data_dir={tmp_path / 'data'}", "store.min_free_mb=1"])
    running = start_rig(cfg, model=DAMPED)
    try:
        wait_info(running)
        assert running.instrument is not None
        running.rig.create_test("deck", grid_of(running.instrument, ["A1", "A2"]))
        running.rig.select_test("deck")

        async def main() -> dict[str, object]:
            service = Service(running, Auth(cfg.store.data_dir))
            await service.async_start()
            try:
                identity.write_run_file(cfg.store.data_dir, "127.0.0.1", service.port, None)
                return await asyncio.to_thread(gather, cfg)  # it blocks on HTTP: off the loop
            finally:
                identity.remove_run_file(cfg.store.data_dir)
                await service.async_close()

        summary = asyncio.run(main())
    finally:
        running.close()
    assert summary["running"] is True and summary["problem"] is None
    state = summary["state"]
    assert isinstance(state, dict)
    assert state["session"]["test"] == "deck" and state["session"]["point"] == "A1"
    store = summary["store"]
    assert isinstance(store, dict) and store["tests"] == 1 and store["point_sets"] == 0
    lines = render(summary)
    assert lines[0].startswith("taprigd     running, pid ")
    n = cfg.capture.averages
    assert f"test        deck, point A1 (0/{n} averages), 0 points done, disarmed" in lines
    assert not (cfg.store.data_dir / identity.RUN_FILE).exists()
