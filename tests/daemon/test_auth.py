"""Token authentication and pairing: the token file, Bearer checks, the failure limit, rotation,
the pairing URL, its QR code and log redaction.

Outside facts the checks rely on, cited from memory:

- RFC 6750 (2012) §2.1: ``Authorization: Bearer <b64token>``; RFC 9110 (2022) §11.1: the
  auth-scheme is case-insensitive.
- RFC 3986 (2005) §3.5: the fragment follows ``#`` and is not sent to the server (also
  RFC 9110 §7.1, the request target has no fragment); §3.2.2: IPv6 literals in brackets.
- ISO/IEC 18004:2015 (QR Code): version V is 17 + 4V modules a side (§5.3.1); byte-mode
  capacity at error correction level M for versions 1..10 is 14, 26, 42, 62, 84, 106, 122,
  152, 180, 213 characters (Table 7); the quiet zone is 4 modules wide (§9.1).
- POSIX open(2)/umask(2): the mode given to open is masked by the umask.
"""

from __future__ import annotations

import hmac
import logging
import os
import stat
from collections.abc import Iterator
from pathlib import Path
from urllib.parse import urlsplit

import numpy as np
import pytest
import segno

from taprig.daemon import auth as auth_mod
from taprig.daemon.auth import Auth, AuthError, AuthResult
from taprig.daemon.pairing import pair_command_output, pairing_url, qr_text

PEER = "192.0.2.10"  # RFC 5737 documentation addresses
OTHER = "192.0.2.77"
TOKEN_CHARS = set("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-_")


@pytest.fixture
def state(tmp_path: Path) -> Path:
    return tmp_path / "state"


def bearer(token: str) -> str:
    return f"Bearer {token}"


def mode_of(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


@pytest.fixture
def umask() -> Iterator[None]:
    old = os.umask(0o022)
    os.umask(old)
    yield
    os.umask(old)


# ---------------------------------------------------------------- the token file


@pytest.mark.parametrize("mask", [0o000, 0o022, 0o077, 0o277])
def test_token_file_is_made_0600_whatever_the_umask(state: Path, umask: None, mask: int) -> None:
    """0o277 would leave 0400 after masking (POSIX umask); the file must still be 0600."""
    os.umask(mask)
    a = Auth(state)
    assert mode_of(a.path) == 0o600
    text = a.path.read_text()
    assert text == a.token + "\n"
    assert len(a.token) == 43 and set(a.token) <= TOKEN_CHARS  # 32 bytes in URL-safe base64


def test_token_persists_across_instances(state: Path) -> None:
    first = Auth(state).token
    second = Auth(state)
    assert second.token == first
    assert second.check(bearer(first), PEER, now=0.0) is AuthResult.OK


def test_two_rigs_get_different_tokens(tmp_path: Path) -> None:
    assert Auth(tmp_path / "a").token != Auth(tmp_path / "b").token


@pytest.mark.parametrize("mode", [0o640, 0o604, 0o660, 0o644, 0o601, 0o610])
def test_group_or_other_access_is_refused_not_mended(state: Path, mode: int) -> None:
    token = Auth(state).token
    path = state / "token"
    path.chmod(mode)
    with pytest.raises(AuthError, match="pair --rotate"):
        Auth(state)
    assert mode_of(path) == mode  # left as found for the operator to judge
    path.chmod(0o600)
    assert Auth(state).token == token


@pytest.mark.parametrize("mode", [0o400, 0o700])
def test_owner_only_modes_are_accepted(state: Path, mode: int) -> None:
    token = Auth(state).token
    (state / "token").chmod(mode)
    assert Auth(state).token == token


def test_rotation_from_pair_mends_an_unsafe_file(state: Path) -> None:
    old = Auth(state).token
    (state / "token").chmod(0o644)
    out = pair_command_output(state, "rig.local", 8750, rotate=True)
    assert mode_of(state / "token") == 0o600
    new = Auth(state).token
    assert new != old and new in out


def test_symlinked_token_file_is_refused(state: Path, tmp_path: Path) -> None:
    real = tmp_path / "elsewhere"
    Auth(real)
    state.mkdir()
    (state / "token").symlink_to(real / "token")
    with pytest.raises(AuthError, match="symbolic link"):
        Auth(state)


def test_token_file_of_another_owner_is_refused(state: Path) -> None:
    if os.geteuid() != 0:
        pytest.skip("changing a file's owner needs root")
    Auth(state)
    os.chown(state / "token", 4321, -1)
    with pytest.raises(AuthError, match="uid 4321"):
        Auth(state)


def test_empty_token_file_from_an_interrupted_start_is_replaced(state: Path) -> None:
    state.mkdir()
    fd = os.open(state / "token", os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    os.close(fd)
    a = Auth(state)
    assert len(a.token) == 43 and mode_of(a.path) == 0o600


@pytest.mark.parametrize("content", [b"short\n", b"not a token at all, spaces\n", b"\xff" * 40])
def test_garbage_in_the_token_file_is_refused(state: Path, content: bytes) -> None:
    state.mkdir()
    fd = os.open(state / "token", os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    os.write(fd, content)
    os.close(fd)
    with pytest.raises(AuthError, match="does not hold a token"):
        Auth(state)


def test_new_state_dir_is_private(state: Path, umask: None) -> None:
    os.umask(0o022)
    Auth(state)
    assert mode_of(state) == 0o700


# ---------------------------------------------------------------- checking


def test_right_token_passes(state: Path) -> None:
    a = Auth(state)
    result = a.check(bearer(a.token), PEER, now=0.0)
    assert result is AuthResult.OK and result and result.http_status == 200


@pytest.mark.parametrize(
    ("header", "expected"),
    [
        (None, AuthResult.MISSING),
        ("", AuthResult.MISSING),
        ("Bearer", AuthResult.MALFORMED),
        ("Bearer ", AuthResult.MALFORMED),
        ("Basic dXNlcjpwYXNz", AuthResult.MALFORMED),
        ("Token abc", AuthResult.MALFORMED),
        ("Bearer two words", AuthResult.MALFORMED),
        ("Bearer tökén", AuthResult.MALFORMED),
        ("Bearer\u00a0abc", AuthResult.MALFORMED),  # a no-break space is not SP
        ("Bearer AAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAA", AuthResult.WRONG),
        ("Bearer abc.def~ghi/+==", AuthResult.WRONG),  # well-formed b64token, wrong
    ],
)
def test_bad_headers(state: Path, header: str | None, expected: AuthResult) -> None:
    result = Auth(state).check(header, PEER, now=0.0)
    assert result is expected
    assert not result and result.http_status == 401


@pytest.mark.parametrize("form", ["bearer {}", "BEARER {}", "Bearer   {}", "  Bearer {}\t"])
def test_scheme_is_case_insensitive_and_spacing_lenient(state: Path, form: str) -> None:
    a = Auth(state)
    assert a.check(form.format(a.token), PEER, now=0.0) is AuthResult.OK


def test_token_prefix_or_extension_is_wrong(state: Path) -> None:
    a = Auth(state)
    for guess in (a.token[:-1], a.token + "A", a.token.swapcase()):
        assert a.check(bearer(guess), PEER, now=0.0) is AuthResult.WRONG


def test_comparison_uses_compare_digest(state: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    a = Auth(state)
    calls: list[tuple[bytes, bytes]] = []
    real = hmac.compare_digest

    def spy(x: bytes, y: bytes) -> bool:
        calls.append((x, y))
        return real(x, y)

    monkeypatch.setattr(hmac, "compare_digest", spy)
    assert a.check(bearer(a.token), PEER, now=0.0) is AuthResult.OK
    assert a.check(bearer("x" * 43), PEER, now=0.0) is AuthResult.WRONG
    assert calls == [(a.token.encode(), a.token.encode()), (b"x" * 43, a.token.encode())]


# ---------------------------------------------------------------- the failure limit


def test_five_failures_lock_the_peer_out_for_the_window(state: Path) -> None:
    a = Auth(state)
    good = bearer(a.token)
    for i in range(4):
        assert a.check(bearer("nope"), PEER, now=10.0 + i) is AuthResult.WRONG
    assert a.check(good, PEER, now=14.0) is AuthResult.OK  # 4 failures: still let in
    assert a.check("Basic x", PEER, now=14.5) is AuthResult.MALFORMED  # the 5th failure
    locked = a.check(bearer("nope"), PEER, now=15.0)
    assert locked is AuthResult.LOCKED and locked.http_status == 429
    assert a.check(None, PEER, now=15.0) is AuthResult.LOCKED
    assert a.retry_after(PEER, now=15.0) == pytest.approx(59.5)
    assert a.check(bearer("nope"), PEER, now=74.49) is AuthResult.LOCKED
    assert a.check(bearer("nope"), OTHER, now=15.0) is AuthResult.WRONG  # others unaffected
    assert a.check(bearer("nope"), PEER, now=74.5) is AuthResult.WRONG  # 60 s after the 5th
    assert a.retry_after(PEER, now=74.5) == 0.0


def test_the_right_token_is_never_locked_out(state: Path) -> None:
    """Several users behind one NAT address: one client's wrong token must not shut out
    another's right one (the lockout refuses only what is not the token)."""
    a = Auth(state)
    good = bearer(a.token)
    for i in range(5):
        a.check(bearer("nope"), PEER, now=float(i))
    assert a.check(bearer("nope"), PEER, now=5.0) is AuthResult.LOCKED
    for t in (5.0, 30.0, 60.0):
        assert a.check(good, PEER, now=t) is AuthResult.OK
    assert a.check(bearer("nope"), PEER, now=60.5) is AuthResult.LOCKED  # still locked
    assert a.check(bearer("nope"), PEER, now=64.5) is AuthResult.WRONG  # 60 s after the 5th
    assert a.retry_after(PEER, now=74.5) == 0.0


def test_after_a_lockout_the_count_starts_again(state: Path) -> None:
    a = Auth(state)
    for i in range(5):
        a.check(bearer("nope"), PEER, now=float(i))
    assert a.check(bearer(a.token), PEER, now=70.0) is AuthResult.OK
    for i in range(4):
        assert a.check(bearer("nope"), PEER, now=71.0 + i) is AuthResult.WRONG
    assert a.check(bearer(a.token), PEER, now=75.0) is AuthResult.OK


def test_attempts_during_a_lockout_do_not_extend_it(state: Path) -> None:
    a = Auth(state)
    for i in range(5):
        a.check(bearer("nope"), PEER, now=float(i))
    for t in np.arange(5.0, 64.0, 1.0):
        assert a.check(bearer("nope"), PEER, now=float(t)) is AuthResult.LOCKED
    assert a.check(bearer(a.token), PEER, now=64.0) is AuthResult.OK


def test_failures_spread_beyond_the_window_do_not_lock(state: Path) -> None:
    """A sliding window: failures at 0, 15, 30, 45, 60 s; the one at 0 s has left the window
    (60 s) when the fifth comes."""
    a = Auth(state)
    for t in (0.0, 15.0, 30.0, 45.0, 60.0):
        assert a.check(bearer("nope"), PEER, now=t) is AuthResult.WRONG
    assert a.check(bearer(a.token), PEER, now=61.0) is AuthResult.OK
    assert a.check(bearer("nope"), PEER, now=62.0) is AuthResult.WRONG  # 5th within 60 s
    assert a.check(bearer("nope"), PEER, now=63.0) is AuthResult.LOCKED


def test_missing_header_and_successes_do_not_count(state: Path) -> None:
    a = Auth(state)
    for i in range(20):
        assert a.check(None, PEER, now=float(i)) is AuthResult.MISSING
        assert a.check(bearer(a.token), PEER, now=float(i)) is AuthResult.OK


def test_one_address_in_two_spellings_is_one_peer(state: Path) -> None:
    a = Auth(state)
    spellings = [
        "192.0.2.10",
        "::ffff:192.0.2.10",
        "::FFFF:192.0.2.10",
        "192.0.2.10",
        "::ffff:c000:20a",
    ]
    for i, peer in enumerate(spellings):
        a.check(bearer("nope"), peer, now=float(i))
    assert a.check(bearer("nope"), "192.0.2.10", now=6.0) is AuthResult.LOCKED
    for i, peer in enumerate(
        ["2001:db8::1", "2001:DB8:0::1", "2001:db8::1", "2001:db8::1", "2001:0db8::1"]
    ):
        a.check(bearer("nope"), peer, now=float(i))
    assert a.check(bearer("nope"), "2001:db8:0:0::1", now=6.0) is AuthResult.LOCKED


def test_the_peer_table_is_bounded(state: Path) -> None:
    a = Auth(state, max_peers=50)
    for i in range(500):
        a.check(bearer("nope"), f"198.51.100.{i % 250}:{i}", now=float(i) / 1000)
    assert len(a._peers) <= 50


class FakeTime:
    """Stands in for the `time` module inside taprig.daemon.auth only."""

    def __init__(self, clock: list[float]) -> None:
        self.clock = clock

    def monotonic(self) -> float:
        return self.clock[0]

    def time(self) -> float:
        return 0.0  # a wall clock stuck at 1970: would unlock at once if it were used


def test_uses_the_monotonic_clock(state: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Without `now`, time comes from time.monotonic (a wall-clock step must not matter)."""
    a = Auth(state)
    clock = [1000.0]
    monkeypatch.setattr(auth_mod, "time", FakeTime(clock))
    for _ in range(5):
        a.check(bearer("nope"), PEER)
    assert a.check(bearer("nope"), PEER) is AuthResult.LOCKED
    assert a.retry_after(PEER) == pytest.approx(60.0)
    clock[0] += 60.0
    assert a.check(bearer("nope"), PEER) is AuthResult.WRONG


# ---------------------------------------------------------------- rotation


def test_rotation_replaces_the_token_at_once(state: Path) -> None:
    a = Auth(state)
    old = a.token
    new = a.rotate()
    assert new != old and len(new) == 43 and a.token == new
    assert a.check(bearer(old), PEER, now=0.0) is AuthResult.WRONG
    assert a.check(bearer(new), PEER, now=0.0) is AuthResult.OK
    assert mode_of(a.path) == 0o600
    assert sorted(p.name for p in state.iterdir()) == ["token"]  # no temporary file left
    assert Auth(state).token == new


def test_rotation_by_another_process_takes_effect_at_the_next_check(state: Path) -> None:
    """`taprigd pair --rotate` runs in its own process while the daemon's Auth lives on."""
    daemon = Auth(state)
    old = daemon.token
    pair_command_output(state, "rig.local", 8750, rotate=True)
    new = Auth(state).token
    assert daemon.check(bearer(old), PEER, now=0.0) is AuthResult.WRONG
    assert daemon.check(bearer(new), PEER, now=0.0) is AuthResult.OK


def test_token_file_gone_or_unsafe_while_running_refuses_everything(
    state: Path, caplog: pytest.LogCaptureFixture
) -> None:
    a = Auth(state)
    token = a.token
    a.path.chmod(0o644)
    with caplog.at_level(logging.ERROR, logger="taprig.daemon.auth"):
        for t in range(10):  # not counted as failures, logged once
            result = a.check(bearer(token), PEER, now=float(t))
            assert result is AuthResult.UNAVAILABLE and result.http_status == 503
    assert len([r for r in caplog.records if r.levelno == logging.ERROR]) == 1
    a.path.chmod(0o600)
    assert a.check(bearer(token), PEER, now=11.0) is AuthResult.OK
    a.path.unlink()
    assert a.check(bearer(token), PEER, now=12.0) is AuthResult.UNAVAILABLE
    with pytest.raises(AuthError):
        pairing_url(a.token, "rig.local", 8750)


# ---------------------------------------------------------------- pairing


def test_pairing_url_carries_the_token_only_in_the_fragment(state: Path) -> None:
    a = Auth(state)
    url = pairing_url(a.token, "taprig-7f3a.local", 8750)
    assert url == f"http://taprig-7f3a.local:8750/pair#token={a.token}"
    parts = urlsplit(url)
    assert (parts.scheme, parts.hostname, parts.port, parts.path, parts.query) == (
        "http", "taprig-7f3a.local", 8750, "/pair", "")  # fmt: skip
    assert parts.fragment == f"token={a.token}"
    sent = url.split("#", 1)[0]  # what a client puts on the wire
    assert a.token not in sent


@pytest.mark.parametrize(
    ("host", "netloc"),
    [
        ("192.168.4.20", "192.168.4.20:8750"),
        ("fd00::12", "[fd00::12]:8750"),
        ("[fd00::12]", "[fd00::12]:8750"),
        ("FD00:0::12", "[fd00::12]:8750"),
        ("fe80::1%eth0", "[fe80::1%25eth0]:8750"),  # RFC 6874 zone in a URL
        ("rig-bench", "rig-bench:8750"),
    ],
)
def test_pairing_url_hosts(state: Path, host: str, netloc: str) -> None:
    url = pairing_url(Auth(state).token, host, 8750)
    assert urlsplit(url).netloc == netloc


@pytest.mark.parametrize(
    "host", ["", "0.0.0.0", "::", "a b", "rig/x", "x#y", "user@rig", "[rig]", "-bad"]
)
def test_pairing_url_refuses_useless_hosts(state: Path, host: str) -> None:
    with pytest.raises(ValueError):
        pairing_url(Auth(state).token, host, 8750)


@pytest.mark.parametrize("port", [0, 65536, -1, True])
def test_pairing_url_refuses_bad_ports(state: Path, port: int) -> None:
    with pytest.raises(ValueError):
        pairing_url(Auth(state).token, "rig.local", port)


BYTE_M_CAPACITY = [14, 26, 42, 62, 84, 106, 122, 152, 180, 213]  # ISO/IEC 18004 Table 7


def expected_version(n_chars: int) -> int:
    return next(v for v, cap in enumerate(BYTE_M_CAPACITY, 1) if n_chars <= cap)


def decode_half_blocks(text: str, invert: bool) -> np.ndarray:
    """Dark modules (True) of a `qr_text` drawing, rows doubled back out of the half blocks."""
    top = {" ": False, "▄": False, "▀": True, "█": True}
    bottom = {" ": False, "▄": True, "▀": False, "█": True}
    lines = text.split("\n")
    rows = []
    for line in lines:
        rows.append([top[c] for c in line])
        rows.append([bottom[c] for c in line])
    ink = np.array(rows, dtype=bool)
    return ink if invert else ~ink


@pytest.mark.parametrize("host_len", [17, 18, 39, 40])
@pytest.mark.parametrize("invert", [False, True])
def test_qr_code_of_the_pairing_url(state: Path, host_len: int, invert: bool) -> None:
    """The URL is 67 characters + the host (port 8750, 43-character token), so hosts of 17/18
    and 39/40 characters sit on the level-M byte capacities of versions 5/6 (84) and 7/8
    (106); size 17 + 4V; the drawing shows every module and a 4-module light quiet zone."""
    url = pairing_url(Auth(state).token, "r" * host_len, 8750)
    assert len(url) == 67 + host_len
    qr = segno.make_qr(url, error="m", boost_error=False)
    v = expected_version(len(url))
    assert (qr.version, qr.error, qr.mode) == (v, "M", "byte")
    side = 17 + 4 * v
    assert qr.symbol_size(border=0) == (side, side)

    text = qr_text(url, invert=invert)
    lines = text.split("\n")
    assert len(lines) == (side + 8 + 1) // 2 and {len(line) for line in lines} == {side + 8}
    drawn = decode_half_blocks(text, invert)
    symbol = np.array([list(row) for row in qr.matrix], dtype=bool)
    assert np.array_equal(drawn[4 : 4 + side, 4 : 4 + side], symbol)
    quiet = drawn.copy()
    quiet[4 : 4 + side, 4 : 4 + side] = False
    assert not quiet.any()  # quiet zone and the padding row are light


def test_pair_command_output(state: Path) -> None:
    out = pair_command_output(state, "192.168.4.20", 8750, rotate=False)
    old = Auth(state).token
    url = f"http://192.168.4.20:8750/pair#token={old}"
    assert url in out and qr_text(url) in out
    assert "pair again" not in out
    again = pair_command_output(state, "192.168.4.20", 8750, rotate=False)
    assert again == out  # without rotate the token stays
    rotated = pair_command_output(state, "192.168.4.20", 8750, rotate=True)
    assert old not in rotated and "pair again" in rotated
    assert Auth(state).token in rotated


# ---------------------------------------------------------------- redaction


def test_redact_removes_the_token_and_token_like_strings(state: Path) -> None:
    a = Auth(state)
    t = a.token
    other = "Q" * 43
    digest = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    lines = {
        f"GET /x Authorization: Bearer {t}": "GET /x Authorization: Bearer <redacted>",
        "authorization: bearer abc.def-1==": "authorization: bearer <redacted>",
        f"url http://h:1/pair#token={t}": "url http://h:1/pair#token=<redacted>",
        "token: shortsecret": "token: <redacted>",
        f"glued{t}glued": "glued<redacted>glued",
        f"stray {other} here": "stray <redacted> here",
        f"sha256 {digest}": f"sha256 {digest}",  # a digest is not a secret
        "nothing to hide": "nothing to hide",
    }
    for line, want in lines.items():
        assert a.redact(line) == want
        assert t not in a.redact(line)


def test_redacting_log_filter(state: Path, caplog: pytest.LogCaptureFixture) -> None:
    a = Auth(state)
    logger = logging.getLogger("taprig.test.redact")
    f = a.log_filter()
    logger.addFilter(f)
    try:
        with caplog.at_level(logging.INFO, logger="taprig.test.redact"):
            logger.info("client sent %s from %s", bearer(a.token), PEER)
    finally:
        logger.removeFilter(f)
    (record,) = caplog.records
    assert a.token not in record.getMessage()
    assert record.getMessage() == f"client sent Bearer <redacted> from {PEER}"
