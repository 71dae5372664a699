"""Pulls from a real rig service on loopback into real SQLite mirrors.

Bit-for-bit checks compare the mirror's bodies with the rig store's wire bodies and the decoded
arrays with the store's arrays (numpy `tobytes`); transfers are verified with SHA-256
(FIPS 180-4) against the rig's Content-Digest header (RFC 9530 §2).
"""

from __future__ import annotations

import dataclasses
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from taprig.client.errors import MirrorError, PairingError
from taprig.client.mirror import Mirror
from taprig.client.pull import pull
from taprig.client.remote import RigClient, RigError, TransferError
from taprig.client.rigs import Places, RigBook, parse_pairing_url
from taprig.schema import records

from .conftest import ServedRig, commit_synthetic, pair

ARRAYS = ("freq_hz", "h1", "h2", "coherence", "gff", "gxx", "gfx")


def assert_mirror_is_rig(mirror: Mirror, served: ServedRig) -> None:
    """Every point set of the rig is in the mirror, bit for bit, and nothing else is."""
    store = served.running.store
    ids = [s.id for s in store.list_point_sets()]
    assert [i for i, _ in mirror.digests()] == sorted(ids)
    for pid in ids:
        stored = store.get_wire_body(pid, records.SCHEMA_VERSION)
        assert stored is not None
        assert mirror.body(pid) == (stored[0], bytes(stored[1]))
        ps, ours = store.get_point_set(pid), mirror.point_set(pid)
        for name in ARRAYS:
            a, b = getattr(ps, name), getattr(ours, name)
            assert a.shape == b.shape and a.tobytes() == np.ascontiguousarray(b).tobytes(), name
        assert (ours.test, ours.point, ours.version) == (ps.test, ps.point, ps.version)
    assert {t.name for t in mirror.tests()} == {t.name for t in store.list_tests()}


def test_pull_is_bit_identical_and_incremental(served: ServedRig, tmp_path: Path) -> None:
    commit_synthetic(served.running, "plate-a", 12)
    with RigClient(served.url, served.token) as client, Mirror(tmp_path / "m.sqlite3") as mirror:
        first = pull(client, mirror)
        assert (first.tests, first.point_sets, first.already_here) == (1, 12, 0)
        assert_mirror_is_rig(mirror, served)
        again = pull(client, mirror)
        assert (again.tests, again.point_sets) == (0, 0)
        commit_synthetic(served.running, "plate-b", 3, seed=6)
        third = pull(client, mirror)
        assert (third.tests, third.point_sets) == (1, 3)
        assert mirror.cursor() == served.running.store.last_seq()
        assert_mirror_is_rig(mirror, served)
        data = mirror.load("plate-a")
        assert data.h1.shape == (12, 2, 4097) and data.points[0] == "P0"
        assert data.rejections[0] == {"double_hit": 1}
        assert data.exp_tau_s == 0.05 and data.rig_id == served.rig_id
        assert data.planned_averages == 3 and len(data.completed_utc) == 12


def test_python_api_reads_a_paired_rigs_mirror(served: ServedRig, places: Places) -> None:
    """The README's example: `from taprig.client import Mirror`, then Mirror.open_rig."""
    from taprig.client import Mirror as ApiMirror
    from taprig.client import RigClient as ApiClient

    commit_synthetic(served.running, "plate-a", 2)
    rig = pair(places, served)
    with ApiClient(rig.url, rig.token) as client, ApiMirror.open_rig("test-rig", places) as m:
        pull(client, m)
    with ApiMirror.open_rig(None, places) as mirror:
        data = mirror.load("plate-a")
    assert data.points == ("P0", "P1") and data.h1.shape == (2, 2, 4097)


def test_two_mirrors_of_one_rig_are_identical(served: ServedRig, tmp_path: Path) -> None:
    commit_synthetic(served.running, "plate-a", 6)
    paths = [tmp_path / "ws1.sqlite3", tmp_path / "ws2.sqlite3"]
    with RigClient(served.url, served.token) as client:
        with Mirror(paths[0]) as m:
            pull(client, m, test="plate-a")  # one workstation pulls one test first
        commit_synthetic(served.running, "plate-b", 4, seed=9)
        for path in paths:
            with Mirror(path) as m:
                pull(client, m)
    with Mirror(paths[0]) as a, Mirror(paths[1]) as b:
        assert a.digests() == b.digests() and len(a.digests()) == 10
        assert all(a.body(i) == b.body(i) for i, _ in a.digests())
        assert_mirror_is_rig(a, served)


def test_pull_of_one_test_leaves_the_rest_for_later(served: ServedRig, tmp_path: Path) -> None:
    commit_synthetic(served.running, "plate-a", 3)
    commit_synthetic(served.running, "plate-b", 2, seed=3)
    with RigClient(served.url, served.token) as client, Mirror(tmp_path / "m.sqlite3") as m:
        only = pull(client, m, test="plate-b")
        assert only.point_sets == 2 and m.counts() == {"plate-b": 2}
        assert m.cursor() == 0
        rest = pull(client, m)
        assert (rest.point_sets, rest.already_here) == (3, 2)
        assert_mirror_is_rig(m, served)
        with pytest.raises(RigError) as err:
            pull(client, m, test="no-such-test")
        assert err.value.status == 404


def test_a_corrupted_body_is_refused_and_nothing_is_stored(
    served: ServedRig, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A body whose bytes do not match the Content-Digest never reaches the mirror."""
    commit_synthetic(served.running, "plate-a", 2)
    real = RigClient.request

    def flip(self: RigClient, method: str, path: str, **kw: object):  # type: ignore[no-untyped-def]
        status, headers, data = real(self, method, path, **kw)  # type: ignore[arg-type]
        if path.startswith("/v1/points/2"):
            data = data[:-1] + bytes([data[-1] ^ 1])
        return status, headers, data

    monkeypatch.setattr(RigClient, "request", flip)
    with RigClient(served.url, served.token) as client, Mirror(tmp_path / "m.sqlite3") as m:
        with pytest.raises(TransferError, match="checksum"):
            pull(client, m)
        assert m.counts() == {} and m.cursor() == 0  # the batch holding it was rolled back
        monkeypatch.setattr(RigClient, "request", real)
        pull(client, m)
        assert_mirror_is_rig(m, served)


def test_a_mirror_refuses_another_rig(served: ServedRig, tmp_path: Path) -> None:
    commit_synthetic(served.running, "plate-a", 1)
    with Mirror(tmp_path / "m.sqlite3") as m:
        m.bind("someotherrig", "x", "http://127.0.0.1:1")
        with RigClient(served.url, served.token) as client, pytest.raises(MirrorError):
            pull(client, m)
        assert m.counts() == {}


def test_wrong_token_and_no_rig_give_clear_errors(served: ServedRig, tmp_path: Path) -> None:
    with RigClient(served.url, "not-the-token") as client, pytest.raises(RigError) as err:
        client.state()
    assert err.value.status == 401
    from taprig.client.remote import RigUnreachable

    with (
        RigClient("http://127.0.0.1:9", None, timeout_s=2) as nobody,
        pytest.raises(RigUnreachable, match="no answer"),
    ):
        nobody.info()


def test_pairing_file_is_private(served: ServedRig, places: Places) -> None:
    pair(places, served)
    assert (places.rigs_file.stat().st_mode & 0o777) == 0o600
    book = RigBook(places)
    assert book.find(None).rig_id == served.rig_id
    assert book.find("test-rig").url == served.url
    with pytest.raises(PairingError, match="no paired rig"):
        book.find("elsewhere")
    assert parse_pairing_url("http://10.0.0.7:8470/pair#token=abc") == (
        "http://10.0.0.7:8470",
        "abc",
    )
    with pytest.raises(PairingError, match="no token"):
        parse_pairing_url("http://10.0.0.7:8470/pair")


def _cli(places: Places, *args: str, **kw: object) -> subprocess.Popen[bytes]:
    env = {**os.environ, "TAPRIG_HOME": str(places.config.parent)}
    return subprocess.Popen([sys.executable, "-m", "taprig.client", *args], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)  # fmt: skip


def _mirrored(path: Path) -> int:
    if not path.exists():
        return 0
    try:
        with sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=5) as db:
            return int(db.execute("SELECT count(*) FROM point_sets").fetchone()[0])
    except sqlite3.OperationalError:  # the tables are not made yet
        return 0


@pytest.mark.slow
def test_pull_killed_midway_resumes_with_nothing_lost_or_twice(
    served: ServedRig, places: Places
) -> None:
    """`taprig pull` killed with SIGKILL part-way, then run again, ends equal to the rig."""
    commit_synthetic(served.running, "plate-a", 120)
    rig = pair(places, served)
    path = places.mirror_path(rig.rig_id)
    proc = _cli(places, "pull", "--json")
    deadline = time.monotonic() + 60
    while _mirrored(path) == 0:
        assert proc.poll() is None, proc.communicate()
        assert time.monotonic() < deadline, "the pull never stored anything"
        time.sleep(0.002)
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=30)
    part = _mirrored(path)
    assert 0 < part < 120, f"killed too late to prove anything: {part} of 120 were in"
    with sqlite3.connect(path) as db:
        assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    again = _cli(places, "pull", "--json")
    out, err = again.communicate(timeout=120)
    assert again.returncode == 0, err.decode()
    report = json.loads(out)
    assert report["point_sets"] == 120 - part
    with Mirror(path) as m:
        assert_mirror_is_rig(m, served)


def commit_with_records(served: ServedRig, test: str) -> tuple[int, list[np.ndarray]]:
    """A test of one point measured twice, the second time with its hits' raw records
    (float32, 3 × 256 each); (the second point set's id, its records)."""
    store = served.running.store
    commit_synthetic(served.running, test, 1)
    plain = store.get_point_set(store.list_point_sets(test)[0].id)
    rng = np.random.default_rng(3)
    raw = [rng.standard_normal((3, 256)).astype(np.float32) for _ in plain.hits]
    hits = tuple(
        dataclasses.replace(h, data=r, scale=np.ones(3))
        for h, r in zip(plain.hits, raw, strict=True)
    )
    store.commit_point_set(dataclasses.replace(plain, version=0, seq=0, hits=hits))
    return store.list_point_sets(test)[-1].id, raw


def assert_has_records(mirror: Mirror, point_set_id: int, raw: list[np.ndarray]) -> None:
    got = mirror.point_set(point_set_id).hits
    assert [None if h.data is None else h.data.tobytes() for h in got] == [
        r.tobytes() for r in raw]  # fmt: skip


def test_raw_hits_come_only_when_asked(served: ServedRig, tmp_path: Path) -> None:
    """By default a pull takes the body the rig stored at commit (hits without records);
    with_hits=True takes every hit's record as well, bit for bit as stored (float32)."""
    store = served.running.store
    new_id, raw = commit_with_records(served, "plate-h")
    with RigClient(served.url, served.token) as client:
        with Mirror(tmp_path / "bare.sqlite3") as bare:
            pull(client, bare)
            assert [h.data for h in bare.point_set(new_id).hits] == [None, None]
            assert bare.body(new_id) == store.get_wire_body(new_id, records.SCHEMA_VERSION)
            bare_bytes = len(bare.body(new_id)[1])
        with Mirror(tmp_path / "full.sqlite3") as full:
            pull(client, full, with_hits=True)
            assert_has_records(full, new_id, raw)
            assert len(full.body(new_id)[1]) >= bare_bytes + sum(r.nbytes for r in raw)
