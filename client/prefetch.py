"""Point sets fetched ahead of whoever stores them: two fetch threads and a check thread.

```
fetch threads  GET /v1/points/{id}, each on its own kept-alive connection, every FETCHERS-th
               id in order ──► (bytes, digest)
check thread   takes them back in order; SHA-256 against the Content-Digest, strict decode
               ──► MirroredPointSet
caller         take(id) in the same order, stores it (mirror, archive)
```

Why: on the client, checking a body costs about four times what receiving it does (SHA-256
alone about 0.64 ms per MB on the benchmark machine against about 0.2 for the socket;
`tests/bench/bench_pull.py` prints both), and one request at a time leaves the rig idle
while the client checks and the client idle while the rig reads its store. Socket reads and
hashlib's SHA-256 both release the GIL: with the check on a thread of its own the next body
is on its way while the last is verified, and with two requests in flight the rig reads
and sends one body while the other is received. Nothing reaches the caller unverified or
undecoded.
"""

from __future__ import annotations

import contextlib
import queue
import threading
from typing import Any, Final, TypeVar

from taprig.schema import codec, objects, records

from .errors import ClientError
from .mirror import MAX_BODY, MirroredPointSet
from .remote import RigClient, verified

AHEAD: Final = 4  # items held between two stages, at most (each a body of a few MB)
FETCHERS: Final = 2  # requests in flight; a third was slower on the 2-core test machine
POLL_S: Final = 0.1  # how often a blocked stage looks at the stop flag, seconds

_T = TypeVar("_T")
Raw = tuple[int, bytes, str | None]  # point-set id, body as received, its Content-Digest


class Prefetch:
    """Fetches, verifies and decodes the wanted point sets in order, a few ahead of the caller,
    so the network, the checks and the caller's disk work at once.

    `take(id)` returns the next one, which must be `id`; a fetch or check error is raised
    there. Leaving the `with` block stops and joins every thread (a fetch in flight ends
    first, within the client's timeout).
    """

    def __init__(self, client: RigClient, ids: list[int], with_hits: bool = False) -> None:
        self._ids, self._wanted, self._with_hits = ids, set(ids), with_hits
        self._clients = [client.clone() for _ in range(FETCHERS)]
        self.timeout_s = client.timeout_s
        # One queue per fetch thread: the check thread takes id k from queue k % FETCHERS.
        self._raw: list[queue.Queue[Raw | BaseException]] = [
            queue.Queue(max(1, AHEAD // FETCHERS)) for _ in range(FETCHERS)
        ]
        self._ready: queue.Queue[MirroredPointSet | BaseException] = queue.Queue(AHEAD)
        self._stop = threading.Event()
        self._threads = (
            *(threading.Thread(target=self._fetch_all, args=(k,), name=f"pull-fetch-{k}",
                               daemon=True) for k in range(FETCHERS)),
            threading.Thread(target=self._check_all, name="pull-check", daemon=True),
        )  # fmt: skip

    def __contains__(self, point_set_id: int) -> bool:
        return point_set_id in self._wanted

    def __enter__(self) -> Prefetch:
        if self._ids:
            for thread in self._threads:
                thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        queues: list[queue.Queue[Any]] = [*self._raw, self._ready]
        for q in queues:  # make room, so that a blocked put sees the stop
            with contextlib.suppress(queue.Empty):
                while True:
                    q.get_nowait()
        for thread in self._threads:
            if thread.is_alive():
                thread.join(30)
        for client in self._clients:
            client.close()

    def take(self, point_set_id: int) -> MirroredPointSet:
        item = self._ready.get(timeout=self.timeout_s * 4)
        if isinstance(item, BaseException):
            raise item
        if item.summary.id != point_set_id:
            raise ClientError(f"pull out of order: expected {point_set_id}, got {item.summary.id}")
        return item

    def _put(self, q: queue.Queue[_T], item: _T) -> bool:
        """Put `item` on `q` unless told to stop first; whether it was put."""
        while not self._stop.is_set():
            try:
                q.put(item, timeout=POLL_S)
                return True
            except queue.Full:
                continue
        return False

    def _fetch_all(self, k: int) -> None:
        """Fetch ids k, k + FETCHERS, ... in order onto raw queue k."""
        client, out = self._clients[k], self._raw[k]
        for pid in self._ids[k::FETCHERS]:
            try:
                data, digest = client.point_set_raw(pid, self._with_hits)
                item: Raw | BaseException = (pid, data, digest)
            except Exception as exc:  # handed on to the caller, raised in take()
                item = exc
            if not self._put(out, item) or isinstance(item, BaseException):
                return

    def _check_all(self) -> None:
        for n in range(len(self._ids)):
            item: Raw | BaseException | None = None
            while item is None and not self._stop.is_set():
                with contextlib.suppress(queue.Empty):
                    item = self._raw[n % FETCHERS].get(timeout=POLL_S)
            if item is None:
                return
            try:
                out = item if isinstance(item, BaseException) else checked(*item)
            except Exception as exc:  # handed on to the caller, raised in take()
                out = exc
            if not self._put(self._ready, out) or isinstance(out, BaseException):
                return


def checked(point_set_id: int, data: bytes, digest: str | None) -> MirroredPointSet:
    """The body of point set `point_set_id` verified against its Content-Digest and decoded
    strictly (TransferError, ClientError), as a mirror or the archive stores it."""
    body = verified(point_set_id, data, digest)
    # Decoded once, strictly: a body that passes the checksum but not the schema is refused
    # here, before it reaches the mirror (about 0.13 ms per MB: msgpack and the checks).
    try:
        obj = codec.unpack(body.data, max_bytes=MAX_BODY)
        ps = objects.point_set_from_obj(obj)
    except records.SchemaError as exc:
        raise ClientError(f"point set {point_set_id} from the rig is not readable: {exc}") from None
    if ps.id != point_set_id:
        raise ClientError(f"asked for point set {point_set_id}, the rig sent {ps.id}")
    summary = records.WirePointSetSummary(
        ps.id, ps.test, ps.point, ps.version, ps.seq, ps.completed_utc, ps.n_averages
    )
    return MirroredPointSet(summary, body.digest, body.data, int(obj["schema"]))
