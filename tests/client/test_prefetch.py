"""Prefetch (client/prefetch.py): point sets fetched on one thread and checked on another, in
order, from a real rig service on loopback.

Bodies are compared byte for byte with the rig store's wire bodies; checksums are SHA-256
(FIPS 180-4) in Content-Digest syntax (RFC 9530 §2), made here with hashlib.
"""

from __future__ import annotations

import threading

import pytest

from taprig.client.errors import ClientError
from taprig.client.prefetch import AHEAD, FETCHERS, Prefetch, checked
from taprig.client.remote import RigClient, RigError, TransferError
from taprig.schema import codec, http, records

from .conftest import ServedRig, commit_synthetic

STAGES = ("pull-fetch-0", "pull-fetch-1", "pull-check")


def stages_alive() -> list[str]:
    return [t.name for t in threading.enumerate() if t.name in STAGES]


def test_point_sets_come_in_order_verified_and_decoded(served: ServedRig) -> None:
    """Each item is the rig's stored body and digest, with the summary the rig lists."""
    commit_synthetic(served.running, "plate-a", 6)
    store = served.running.store
    summaries = store.list_point_sets()
    ids = [s.id for s in summaries]
    with RigClient(served.url, served.token) as client, Prefetch(client, ids) as bodies:
        got = [bodies.take(pid) for pid in ids]
    for item, summary in zip(got, summaries, strict=True):
        stored = store.get_wire_body(summary.id, records.SCHEMA_VERSION)
        assert stored is not None
        assert (item.digest, item.body) == (stored[0], bytes(stored[1]))
        assert item.summary == summary
        assert item.schema == records.SCHEMA_VERSION
    assert stages_alive() == []


def test_leaving_early_stops_every_thread(served: ServedRig) -> None:
    """Taking two of 24 and leaving: every thread ends, though they were blocked ahead. The
    check thread has taken at most 2 + AHEAD + 1 bodies before the caller takes more, and a
    fetch thread holds at most its queue's and one more beyond those: with a larger share
    each, all still run when the caller leaves."""
    commit_synthetic(served.running, "plate-a", 24)
    ids = [s.id for s in served.running.store.list_point_sets()]
    assert len(ids) // FETCHERS > (2 + AHEAD + 1) + AHEAD // FETCHERS + 1
    with RigClient(served.url, served.token) as client:
        with Prefetch(client, ids) as bodies:
            assert [bodies.take(pid).summary.id for pid in ids[:2]] == ids[:2]
            assert set(stages_alive()) == set(STAGES)
        assert stages_alive() == []


def test_an_unknown_id_is_raised_in_its_turn(served: ServedRig) -> None:
    """The point sets before an id the rig does not have arrive; that id raises the rig's
    404 when its turn comes, and every thread ends."""
    commit_synthetic(served.running, "plate-a", 3)
    ids = [s.id for s in served.running.store.list_point_sets()]
    missing = max(ids) + 1000
    with RigClient(served.url, served.token) as client:
        with Prefetch(client, [*ids[:2], missing, ids[2]]) as bodies:
            assert [bodies.take(pid).summary.id for pid in ids[:2]] == ids[:2]
            with pytest.raises(RigError) as caught:
                bodies.take(missing)
            assert caught.value.status == 404
        assert stages_alive() == []


def test_checked_refuses_what_is_not_the_rigs_point_set() -> None:
    """A body that fails its checksum, one sent without one, and one that passes it but is
    no point set are each refused with a sentence saying which."""
    body = codec.pack({"schema": records.SCHEMA_VERSION, "id": 7})
    digest = http.content_digest(body)
    with pytest.raises(TransferError, match="do not match the rig's checksum"):
        checked(7, body + b"\x00", digest)
    with pytest.raises(TransferError, match="none sent"):
        checked(7, body, None)
    with pytest.raises(ClientError, match="point set 7 from the rig is not readable"):
        checked(7, body, digest)


def test_checked_refuses_another_point_set(served: ServedRig) -> None:
    """The rig's own body of point set A, offered as point set B, is refused."""
    commit_synthetic(served.running, "plate-a", 2)
    first, second = (s.id for s in served.running.store.list_point_sets())
    stored = served.running.store.get_wire_body(first, records.SCHEMA_VERSION)
    assert stored is not None
    assert checked(first, bytes(stored[1]), stored[0]).summary.id == first
    with pytest.raises(ClientError, match=f"asked for point set {second}, the rig sent {first}"):
        checked(second, bytes(stored[1]), stored[0])
