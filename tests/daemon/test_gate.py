"""The gate's admission rules (daemon/api/gate.py) on their own, without sockets: the share
per address, the cap, and which connection makes room for a newcomer. (The same rules over
real loopback connections: tests/faults/test_abuse.py.)"""

from __future__ import annotations

import asyncio

from taprig.daemon.api.gate import Gate, Guard, Limits


def _guard(gate: Gate, address: str) -> Guard:
    g = gate.guard(asyncio.Protocol)
    g.address = address
    return g


def test_share_per_address_and_the_cap() -> None:
    gate = Gate(Limits(total=5, per_address=3, header_s=1.0))
    a = [_guard(gate, "10.0.0.1") for _ in range(4)]
    assert [gate.admit(g) for g in a] == [True, True, True, False]  # its share is 3
    assert gate.open == 3 and gate.stats.refused == 1
    b = [_guard(gate, "10.0.0.2") for _ in range(3)]
    assert [gate.admit(g) for g in b] == [True, True, False]  # the cap of 5: 3 + 2, no room
    assert gate.stats.evicted == 0  # 10.0.0.1 holds 3, not more than 10.0.0.2 would (2 + 1)
    gate.leave(a[0])
    assert gate.open == 4 and gate.has_room("10.0.0.1")


def test_a_newcomer_takes_the_oldest_idle_place_of_the_address_holding_most() -> None:
    gate = Gate(Limits(total=4, per_address=4, header_s=1.0))
    a = [_guard(gate, "10.0.0.1") for _ in range(4)]
    assert all(gate.admit(g) for g in a)
    a[0].busy = 1  # handling a request: never evicted
    newcomer = _guard(gate, "10.0.0.9")
    assert gate.admit(newcomer)
    assert gate.stats.evicted == 1 and gate.open == 4
    assert not gate.has_room("10.0.0.1")  # its share is not reached, but the cap is
    gate.leave(a[1])  # the evicted one's connection_lost comes later: nothing counted twice
    assert gate.open == 4
    others = [_guard(gate, "10.0.0.9") for _ in range(2)]
    assert [gate.admit(g) for g in others] == [True, False]  # 3 vs 2 after: no more room
