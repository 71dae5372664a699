"""Advertising a rig by mDNS/DNS-SD and finding it, on real multicast in a private namespace.

The LAN cases run in a network namespace of their own (``ip netns add``) whose only link
is its loopback, with multicast switched on and 224.0.0.0/4 routed to it; rigs and the
workstation are separate processes in it (tests/daemon/mdns_peer.py) speaking JSON lines,
each with an address of its own on that loopback, so nothing leaves the namespace. They
need root; without root they are skipped, unless CI=true, where a namespace that cannot
be made is a failure.

Outside references (the RFC sections are quoted from memory; python-zeroconf's constants
agree on the TTLs):
- RFC 6763 (Cheshire & Krochmal, "DNS-Based Service Discovery", 2013): §6.1 TXT data is
  a sequence of strings, each one length octet then that many bytes; §6.2 keep the whole
  record to 200 bytes or less; §6.4 keys are at most 9 characters.
- RFC 3629 (Yergeau, "UTF-8", 2003) §3: U+00E9 is two bytes.
- RFC 6762 (Cheshire & Krochmal, "Multicast DNS", 2013) §10.1: a goodbye is a record
  with TTL 0; §10 the TTLs python-zeroconf uses, 120 s for host records and 4500 s for
  the others, so a rig gone from a browser in a few seconds was withdrawn by goodbye,
  not by expiry.
- python-zeroconf's TXT parser (`ServiceInfo.decoded_properties`) decodes our records,
  independently of our encoder.
"""

from __future__ import annotations

import asyncio
import json
import os
import secrets
import select
import shutil
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import IO, Any

import pytest
from zeroconf import ServiceInfo

from taprig.daemon.advertise import Advertiser
from taprig.daemon.identity import new_rig_id
from taprig.daemon.txt import encode_txt, rig_txt
from taprig.schema import API_VERSION, SERVICE_TYPE

PEER = Path(__file__).with_name("mdns_peer.py")
IP = shutil.which("ip", path=os.pathsep.join([os.environ.get("PATH", ""), "/usr/sbin", "/sbin"]))
# Each peer process is a "host" with an address of its own on the namespace's loopback.
# Peers sharing one address would also share its port 5353, and the kernel would hand a
# unicast reply (RFC 6762 §5.4, the "QU" probes of §8.1) to any one of them.
HOSTS = ("127.0.0.2", "127.0.0.3", "127.0.0.4")
LO = ["127.0.0.1"]


def _decoded(txt: bytes) -> dict[str, str | None]:
    return ServiceInfo(SERVICE_TYPE, f"x.{SERVICE_TYPE}", properties=txt).decoded_properties


# -- limits, in this process -------------------------------------------------------------


def test_txt_key_of_ten_characters_is_refused_by_name() -> None:
    """RFC 6763 §6.4: nine characters pass, ten raise ValueError naming the key."""
    assert _decoded(encode_txt({"ninechars": "1"})) == {"ninechars": "1"}
    with pytest.raises(ValueError, match=r"'tenletters'.*10 characters"):
        encode_txt({"api": "1", "tenletters": "1"})
    with pytest.raises(ValueError, match="'a=b'"):
        encode_txt({"a=b": "1"})
    with pytest.raises(ValueError, match="'ID' appears twice"):
        encode_txt({"id": "1", "ID": "2"})


def test_txt_record_over_200_bytes_is_refused_naming_the_largest_entry() -> None:
    """RFC 6763 §6.1: each entry costs 1 + len("k=v"); two of 100 bytes make exactly 200.

    §6.2 allows 200 bytes; one byte more raises ValueError naming the larger entry.
    """
    at_limit = {"a": "x" * 97, "b": "y" * 97}  # (1 + 1 + 1 + 97) * 2 = 200 bytes
    txt = encode_txt(at_limit)
    assert len(txt) == 200
    assert _decoded(txt) == at_limit
    with pytest.raises(ValueError, match=r"201 bytes.*largest entry is 'b' \(101 bytes\)"):
        encode_txt({"a": "x" * 97, "b": "y" * 98})


def test_rig_txt_carries_the_schema_keys_and_cuts_a_long_test_name() -> None:
    """RFC 3629 §3: "a" + 31 × "é" is 63 bytes; a 32nd "é" would end at byte 65 > 64.

    The longest record, by RFC 6763 §6.1 costs: "api=1" 1 + 5, "id=" + 36 1 + 39,
    "run=1" 1 + 5, "test=" + 64 bytes 1 + 69: 122 bytes, within §6.2's 200.
    """
    rig_id = new_rig_id()
    txt = rig_txt(rig_id, running=True, test="a" + "é" * 40)
    fields = _decoded(txt)
    assert fields == {"api": str(API_VERSION), "id": rig_id, "run": "1", "test": "a" + "é" * 31}
    assert len(rig_txt("a" * 36, running=True, test="t" * 500)) == 122
    assert _decoded(rig_txt(rig_id, running=False, test=None)) == {
        "api": str(API_VERSION),
        "id": rig_id,
        "run": "0",
    }


@pytest.mark.parametrize(
    ("kwargs", "named"),
    [
        ({"rig_id": "Rig_1"}, "rig id 'Rig_1'"),
        ({"rig_id": "a" * 37}, "rig id"),
        ({"name": "x" * 60}, "rig name"),
        ({"name": "bad\nname"}, "control character"),
        ({"port": 0}, "port 0"),
        ({"interfaces": ["eth0"]}, "interface address 'eth0'"),
        ({"addresses": []}, "addresses is empty"),
        ({"interfaces": "127.0.0.1"}, "not one string"),
    ],
)
def test_bad_arguments_raise_value_error_naming_them(kwargs: dict[str, Any], named: str) -> None:
    args: dict[str, Any] = {"name": "bench", "rig_id": "a1", "port": 8123, **kwargs}
    with pytest.raises(ValueError, match=named):
        Advertiser(**args)


def test_blocking_api_refuses_an_event_loop_and_order_is_checked() -> None:
    ad = Advertiser("bench", "a1", 8123, interfaces=LO)

    async def inside() -> None:
        ad.start()

    with pytest.raises(RuntimeError, match="async_start"):
        asyncio.run(inside())
    with pytest.raises(RuntimeError, match="not started"):
        ad.update(running=True)
    ad.close()
    ad.close()  # idempotent
    with pytest.raises(RuntimeError, match="closed"):
        ad.start()


# -- the namespace and its processes -----------------------------------------------------


def _ip(*args: str) -> None:
    assert IP is not None
    subprocess.run([IP, *args], check=True, capture_output=True, text=True, timeout=10)


@pytest.fixture(scope="module")
def netns() -> Iterator[str]:
    """A fresh network namespace: loopback up, multicast on and routed to it, HOSTS added."""
    # CI runs as root and must not skip these: with CI set, no namespace is a failure.
    in_ci = os.environ.get("CI", "").lower() not in ("", "0", "false")
    if os.geteuid() != 0 and not in_ci:
        pytest.skip("needs root to create a network namespace (set CI=true to require it)")
    if IP is None:
        pytest.fail("the ip command (iproute2) is not installed")
    name = f"taprig-test-{secrets.token_hex(4)}"
    try:
        _ip("netns", "add", name)
    except subprocess.CalledProcessError as exc:
        pytest.fail(f"cannot create network namespace {name} with {IP}: {exc.stderr.strip()}")
    try:
        _ip("-n", name, "link", "set", "lo", "up")
        _ip("-n", name, "link", "set", "lo", "multicast", "on")
        _ip("-n", name, "route", "add", "224.0.0.0/4", "dev", "lo")
        for host in HOSTS:
            _ip("-n", name, "addr", "add", f"{host}/8", "dev", "lo")
        yield name
    finally:
        _ip("netns", "del", name)


class PeerProcess:
    """One mdns_peer.py process in the namespace, serving mDNS on `addr` (its "host")."""

    def __init__(self, ns: str, addr: str, log_path: Path) -> None:
        assert IP is not None
        self.addr = addr
        self.log_path = log_path
        self._log: IO[bytes] = log_path.open("wb")
        self.proc = subprocess.Popen(
            [IP, "netns", "exec", ns, sys.executable, str(PEER)],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=self._log,
        )
        self._buf = b""

    @property
    def here(self) -> list[str]:
        """This peer's interfaces argument."""
        return [self.addr]

    def ask(self, op: str, **fields: Any) -> dict[str, Any]:
        """Send one request and return its reply; fails the test on an error or no reply."""
        assert self.proc.stdin is not None and self.proc.stdout is not None
        self.proc.stdin.write(json.dumps({"op": op, **fields}).encode() + b"\n")
        self.proc.stdin.flush()
        fd = self.proc.stdout.fileno()
        # The peer bounds its own waits by the request's timeout_s; this bounds the rest.
        within_s = fields.get("timeout_s", 0.0) + 15.0
        deadline = time.monotonic() + within_s
        while b"\n" not in self._buf:
            left = deadline - time.monotonic()
            assert left > 0, f"no reply to {op} within {within_s} s\n{self.log_tail()}"
            if select.select([fd], [], [], left)[0]:
                chunk = os.read(fd, 1 << 16)
                assert chunk, f"peer exited during {op}\n{self.log_tail()}"
                self._buf += chunk
        line, self._buf = self._buf.split(b"\n", 1)
        reply: dict[str, Any] = json.loads(line)
        assert reply.pop("ok"), f"{op} failed: {reply['error']}\n{self.log_tail()}"
        return reply

    def log_tail(self) -> str:
        self._log.flush()
        return "peer stderr:\n" + self.log_path.read_text(errors="replace")[-3000:]

    def close(self) -> None:
        assert self.proc.stdin is not None and self.proc.stdout is not None
        self.proc.stdin.close()  # end of input: the peer withdraws its rigs and exits
        try:
            self.proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait(timeout=5)
        self.proc.stdout.close()
        self._log.close()


Start = Callable[[str], PeerProcess]


@pytest.fixture
def peer(netns: str, tmp_path: Path) -> Iterator[Start]:
    """Start peers by role, each on the next of HOSTS; all are stopped after the test."""
    started: list[PeerProcess] = []

    def start(role: str) -> PeerProcess:
        p = PeerProcess(netns, HOSTS[len(started)], tmp_path / f"{role}.log")
        started.append(p)
        return p

    yield start
    for p in started:
        p.close()
    assert all(p.proc.returncode == 0 for p in started), [p.log_tail() for p in started]


def _unique(stem: str) -> str:
    # Names differ between cases so no record cached from an earlier case can match.
    return f"{stem}-{secrets.token_hex(2)}"


# -- on the (namespaced) LAN ---------------------------------------------------------------


@pytest.mark.slow
def test_discover_finds_name_port_and_txt(peer: Start) -> None:
    rig, station = peer("rig"), peer("station")
    name = _unique("bench")
    won = rig.ask(
        "advertise", name=name, id="a1b2c3", port=8123, interfaces=rig.here, blocking=True
    )
    assert won == {"name": name, "addresses": [rig.addr]}
    found = station.ask("discover", interfaces=station.here, timeout_s=1.5)["rigs"]
    assert found == [
        {
            "name": name,
            "addresses": [rig.addr],
            "port": 8123,
            "api": API_VERSION,
            "rig_id": "a1b2c3",
            "running": False,
            "test": None,
        }
    ]


@pytest.mark.slow
def test_txt_update_reaches_a_running_browser(peer: Start) -> None:
    rig, station = peer("rig"), peer("station")
    station.ask("browse", interfaces=station.here)
    name = _unique("bench")
    assert rig.ask("advertise", name=name, id="d4", port=8124, interfaces=rig.here)["name"] == name
    station.ask("wait", present=[{"name": name, "running": False, "test": None}], timeout_s=5)
    t0 = time.monotonic()
    rig.ask("update", name=name, running=True, test="bracket-3")
    station.ask("wait", present=[{"name": name, "running": True, "test": "bracket-3"}], timeout_s=5)
    print(f"update seen {time.monotonic() - t0:.2f} s after the call")


@pytest.mark.slow
def test_name_clash_renames_the_second_rig_and_both_are_found(peer: Start) -> None:
    first, second, station = peer("first"), peer("second"), peer("station")
    name = _unique("bench")
    assert first.ask("advertise", name=name, id="e5", port=8125, interfaces=first.here) == {
        "name": name,
        "addresses": [first.addr],
    }
    t0 = time.monotonic()
    renamed = second.ask(
        "advertise", name=name, id="f6", port=8126, interfaces=second.here, blocking=True
    )
    print(f"renamed rig started in {time.monotonic() - t0:.2f} s")
    assert renamed == {"name": f"{name}-2", "addresses": [second.addr]}
    station.ask("browse", interfaces=station.here)
    station.ask(
        "wait",
        present=[
            {"name": name, "rig_id": "e5", "addresses": [first.addr]},
            {"name": f"{name}-2", "rig_id": "f6", "addresses": [second.addr]},
        ],
        timeout_s=5,
    )
    levels = [level for level, msg in second.ask("logs")["records"] if "is taken" in msg]
    assert levels == ["WARNING"]


@pytest.mark.slow
def test_close_withdraws_the_rig_by_goodbye(peer: Start) -> None:
    rig, station = peer("rig"), peer("station")
    station.ask("browse", interfaces=station.here)
    name = rig.ask("advertise", name=_unique("bench"), id="a7", port=8127, interfaces=rig.here)[
        "name"
    ]
    station.ask("wait", present=[{"name": name}], timeout_s=5)
    t0 = time.monotonic()
    rig.ask("close", name=name)  # the rig's process stays up: only the goodbye can tell
    station.ask("wait", absent=[name], timeout_s=5)
    print(f"removal seen {time.monotonic() - t0:.2f} s after close was called")
    assert station.ask("discover", interfaces=station.here, timeout_s=1.0)["rigs"] == []


@pytest.mark.slow
def test_flapping_interface_is_followed_and_warned_about_once(netns: str, peer: Start) -> None:
    """A veth pair inside the namespace stands in for a link that drops and comes back.

    Each check waits for the rig to have noticed, then asks a browser with an empty cache:
    a browser that heard the old address within the last second keeps it through the
    update's cache flush (RFC 6762 §10.2), for its TTL.
    """
    _ip("-n", netns, "link", "add", "v0", "type", "veth", "peer", "name", "v1")
    try:
        _ip("-n", netns, "link", "set", "v1", "up")
        _ip("-n", netns, "link", "set", "v0", "up")
        _ip("-n", netns, "addr", "add", "10.77.0.1/24", "dev", "v0")
        rig, station = peer("rig"), peer("station")
        won = rig.ask(
            "advertise",
            name=_unique("bench"),
            id="b8",
            port=8128,
            interfaces=[rig.addr, "10.77.0.1"],
            watch_s=0.1,
        )
        both = ["10.77.0.1", rig.addr]
        assert won["addresses"] == both
        for _ in range(2):
            _ip("-n", netns, "addr", "del", "10.77.0.1/24", "dev", "v0")
            rig.ask("advertising", name=won["name"], addresses=[rig.addr], timeout_s=5)
            station.ask(
                "fresh_wait",
                interfaces=station.here,
                present=[{"name": won["name"], "addresses": [rig.addr]}],
                timeout_s=5,
            )
            _ip("-n", netns, "addr", "add", "10.77.0.1/24", "dev", "v0")
            rig.ask("advertising", name=won["name"], addresses=both, timeout_s=5)
            station.ask(
                "fresh_wait",
                interfaces=station.here,
                present=[{"name": won["name"], "addresses": both}],
                timeout_s=5,
            )
        about_v0 = [lvl for lvl, msg in rig.ask("logs")["records"] if "interface v0" in msg]
        assert about_v0 == ["WARNING"] + ["DEBUG"] * 3, about_v0
    finally:
        _ip("-n", netns, "link", "del", "v0")


@pytest.mark.slow
def test_taprigd_announces_itself_and_its_running_test(
    netns: str, peer: Start, tmp_path: Path
) -> None:
    """`taprigd run` in the namespace: found by name with its port, and TXT run=1 with the
    test's name once it has armed (the state follows the rig, RFC 6763 §6 TXT)."""
    assert IP is not None
    station = peer("station")
    station.ask("browse", interfaces=station.here)
    name = _unique("shop")
    host = HOSTS[-1]
    log = (tmp_path / "taprigd.log").open("wb")
    proc = subprocess.Popen(
        [IP, "netns", "exec", netns, sys.executable, "-m", "taprig.daemon", "run",
         "--set", f"store.data_dir={tmp_path / 'rig'}", "--set", "store.min_free_mb=1",
         "--set", f"rig.name={name}", "--set", f"service.bind={host}",
         "--set", "service.port=8471", "--set", f"service.announce_on={host}",
         "--test", "panel-7"],
        stdout=subprocess.DEVNULL, stderr=log,
    )  # fmt: skip
    try:
        want = {"name": name, "port": 8471, "running": True, "test": "panel-7"}
        station.ask("wait", present=[want], timeout_s=20)
        # The operator disarms over HTTP (from inside the namespace): the TXT follows.
        token = (tmp_path / "rig" / "token").read_text().strip()
        disarm = (
            "import json, urllib.request as u; r = u.Request("
            f"'http://{host}:8471/v1/session/disarm', method='POST', "
            "data=json.dumps({'request_id': 'netns-disarm-1'}).encode(), headers={"
            f"'Authorization': 'Bearer {token}', 'Content-Type': 'application/json'}}); "
            "print(u.urlopen(r, timeout=10).status)"
        )
        out = subprocess.run([IP, "netns", "exec", netns, sys.executable, "-c", disarm],
                             capture_output=True, text=True, timeout=30)  # fmt: skip
        assert out.stdout.strip() == "200", out.stderr
        station.ask("wait", present=[{**want, "running": False}], timeout_s=10)
    finally:
        proc.terminate()
        code = proc.wait(timeout=15)
        log.close()
    assert code == 0, (tmp_path / "taprigd.log").read_text()
    station.ask("wait", absent=[name], timeout_s=5)  # goodbye on shutdown
