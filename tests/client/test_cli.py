"""The `taprig` command line as a user runs it: real processes against a real rig service on
loopback (and, for discovery, real mDNS inside a network namespace the test makes)."""

from __future__ import annotations

import json
import os
import select
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import pytest

from taprig.client.mirror import Mirror
from taprig.client.rigs import Places

from .conftest import ServedRig, commit_synthetic
from .test_pull import assert_has_records, assert_mirror_is_rig, commit_with_records


def taprig(places: Places, *args: str, timeout: float = 60) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "TAPRIG_HOME": str(places.config.parent)}
    return subprocess.run([sys.executable, "-m", "taprig.client", *args], env=env,
                          capture_output=True, text=True, timeout=timeout)  # fmt: skip


def as_json(out: subprocess.CompletedProcess[str]) -> Any:
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout)


def test_pair_status_tests_pull(served: ServedRig, places: Places) -> None:
    commit_synthetic(served.running, "plate-a", 4)
    pairing = f"{served.url}/pair#token={served.token}"
    paired = as_json(taprig(places, "pair", pairing, "--json"))
    assert paired["id"] == served.rig_id
    assert (Path(paired["file"]).stat().st_mode & 0o777) == 0o600
    state = as_json(taprig(places, "status", "--json"))
    assert state["last_seq"] == served.running.store.last_seq()
    text = taprig(places, "status")
    assert text.returncode == 0 and "last seq" in text.stdout
    (test,) = as_json(taprig(places, "tests", "--json"))["tests"]
    assert (test["name"], test["point_sets_on_rig"], test["point_sets_mirrored"]) == (
        "plate-a", 4, 0)  # fmt: skip
    report = as_json(taprig(places, "pull", "--json"))
    assert report["point_sets"] == 4
    (test,) = as_json(taprig(places, "tests", "--json"))["tests"]
    assert test["point_sets_mirrored"] == 4
    with Mirror(Path(report["mirror"])) as m:
        assert_mirror_is_rig(m, served)


def test_pull_takes_raw_hits_only_with_the_option(served: ServedRig, places: Places) -> None:
    new_id, raw = commit_with_records(served, "plate-h")
    as_json(taprig(places, "pair", f"{served.url}/pair#token={served.token}", "--json"))
    report = as_json(taprig(places, "pull", "--raw-hits", "--json"))
    assert report["point_sets"] == 2
    with Mirror(Path(report["mirror"])) as m:
        assert_has_records(m, new_id, raw)


def test_export_and_check_work_offline_from_the_mirror(
    served: ServedRig, places: Places, tmp_path: Path
) -> None:
    """Once pulled, export and check need no rig: the service is closed before they run."""
    commit_synthetic(served.running, "plate-a", 3)
    as_json(taprig(places, "pair", f"{served.url}/pair#token={served.token}", "--json"))
    as_json(taprig(places, "pull", "--json"))
    served.service_stop()
    out = tmp_path / "plate.csv"
    made = as_json(taprig(places, "export", "plate-a", "--format", "csv", "--as", "mobility",
                          "--band", "100:400", "--out", str(out), "--json"))  # fmt: skip
    assert made == {"file": str(out), "points": 3, "responses": ["acc0", "acc1"],
                    "quantity": "mobility", "format": "csv", "coverage": "3 of 3 points",
                    "unmeasured": []}  # fmt: skip
    freqs = {float(line.split(",")[3]) for line in out.read_text().splitlines()
             if line[:1] == "P"}  # fmt: skip
    assert freqs and min(freqs) >= 100.0 and max(freqs) <= 400.0
    report = as_json(taprig(places, "check", "plate-a", "--json"))
    assert [p["point"] for p in report["point_checks"]] == ["P0", "P1", "P2"]
    text = taprig(places, "check", "plate-a")
    assert text.returncode == 0 and "quick-look check of test 'plate-a'" in text.stdout
    bad = taprig(places, "export", "plate-a", "--band", "400:100")
    assert bad.returncode == 2 and "--band '400:100'" in bad.stderr
    missing = taprig(places, "check", "no-such-test")
    assert missing.returncode == 3 and "no test 'no-such-test'" in missing.stderr


def test_errors_are_one_line_with_an_exit_code(served: ServedRig, places: Places) -> None:
    out = taprig(places, "status")
    assert out.returncode == 2 and out.stderr.startswith("taprig: no rig is paired")
    out = taprig(places, "pair", f"{served.url}/pair#token=wrong")
    assert out.returncode == 1 and "401" in out.stderr and "Traceback" not in out.stderr
    out = taprig(places, "pair", "ftp://somewhere/pair")
    assert out.returncode == 2 and "not a pairing address" in out.stderr


def test_watch_pulls_each_point_set_as_it_lands(served: ServedRig, places: Places) -> None:
    commit_synthetic(served.running, "plate-a", 2)
    as_json(taprig(places, "pair", f"{served.url}/pair#token={served.token}", "--json"))
    # PYTHONFAULTHANDLER: a watch that does not stop is made to print where it hangs (SIGABRT).
    env = {**os.environ, "TAPRIG_HOME": str(places.config.parent), "PYTHONFAULTHANDLER": "1"}
    proc = subprocess.Popen([sys.executable, "-m", "taprig.client", "watch", "--json"], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)  # fmt: skip
    assert proc.stdout is not None
    seen: list[dict[str, Any]] = []
    buf = b""

    def read_until(count: int) -> None:
        nonlocal buf
        deadline = time.monotonic() + 30
        while len(seen) < count:
            left = deadline - time.monotonic()
            assert left > 0 and proc.poll() is None, f"watch saw {seen}"
            assert proc.stdout is not None
            if select.select([proc.stdout], [], [], left)[0]:
                buf += os.read(proc.stdout.fileno(), 65536)
                *lines, buf = buf.split(b"\n")
                seen.extend(json.loads(line) for line in lines if line.strip())

    try:
        read_until(2)
        commit_synthetic(served.running, "plate-b", 3, seed=2)  # lands while watch waits
        read_until(5)
    finally:
        proc.send_signal(signal.SIGTERM)
        # Seen once on a loaded machine: still in a change-feed long-poll 20 s after SIGTERM
        # (the served rig slow to answer); 60 s separates that from a watch that never stops.
        try:
            _, err = proc.communicate(timeout=60)
        except subprocess.TimeoutExpired:
            proc.send_signal(signal.SIGABRT)
            _, err = proc.communicate(timeout=20)
            pytest.fail(f"watch did not stop on SIGTERM within 60 s; it was at:\n{err.decode()}")
    assert proc.returncode == 0, err.decode()
    assert [(r["test"], r["point"]) for r in seen] == [
        ("plate-a", "P0"), ("plate-a", "P1"), ("plate-b", "P0"), ("plate-b", "P1"),
        ("plate-b", "P2")]  # fmt: skip


# -- discovery on a real (namespaced) LAN ---------------------------------------------------

from tests.daemon.test_advertise import HOSTS, IP, netns  # noqa: E402, F401


@pytest.mark.slow
def test_discover_lists_a_rig_announcing_itself(netns: str, tmp_path: Path) -> None:  # noqa: F811
    """`taprigd run` and `taprig discover` in one namespace: the rig is listed with its port
    and its running test (mDNS, RFC 6762; DNS-SD, RFC 6763)."""
    assert IP is not None
    host = HOSTS[0]
    log = (tmp_path / "taprigd.log").open("wb")
    rig = subprocess.Popen(
        [IP, "netns", "exec", netns, sys.executable, "-m", "taprig.daemon", "run",
         "--set", f"store.data_dir={tmp_path / 'rig'}", "--set", "store.min_free_mb=1",
         "--set", "rig.name=press-shop", "--set", f"service.bind={host}",
         "--set", "service.port=8472", "--set", f"service.announce_on={host}",
         "--test", "hood-3"],
        stdout=subprocess.DEVNULL, stderr=log,
    )  # fmt: skip
    try:
        deadline = time.monotonic() + 40
        while True:
            out = subprocess.run(
                [IP, "netns", "exec", netns, sys.executable, "-m", "taprig.client", "discover",
                 "--json", "--timeout", "2", "--interface", HOSTS[1]],
                capture_output=True, text=True, timeout=60,
            )  # fmt: skip
            assert out.returncode == 0, out.stderr
            rigs = json.loads(out.stdout)["rigs"]
            if any(r["name"] == "press-shop" and r["running"] for r in rigs):
                break
            assert time.monotonic() < deadline, f"not found: {rigs}"
        (found,) = [r for r in rigs if r["name"] == "press-shop"]
        assert found["port"] == 8472 and found["test"] == "hood-3" and host in found["addresses"]
        rig_id = (tmp_path / "rig" / "rig-id").read_text().strip()
        assert found["id"] == rig_id
    finally:
        rig.terminate()
        code = rig.wait(timeout=15)
        log.close()
    assert code == 0, (tmp_path / "taprigd.log").read_text()
