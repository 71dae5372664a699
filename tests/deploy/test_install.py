"""deploy/: the install script run into a temporary root, the systemd unit checked by
systemd itself (`systemd-analyze verify`, and its `security` exposure score), the
installed daemon started with the installed configuration, then uninstall and purge.

The temporary root gets what a Debian image brings: /etc/passwd, group, shadow, gshadow and
login.defs (copied from this Debian machine, so the dialout group exists) and systemd's unit
tree (/usr/lib/systemd/system, which `verify --root` resolves targets in). Needs root
(useradd --root chroots); CI runs as root and must not skip.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
DEPLOY = REPO / "deploy"
EXPOSURE_CEILING = 3.0  # systemd-analyze security: 0 (locked down) .. 10 (unprotected)


def need_root() -> None:
    if os.geteuid() != 0 or shutil.which("systemd-analyze") is None:
        if os.environ.get("CI") == "true":
            pytest.fail("CI must run these as root with systemd installed (.ci/run does)")
        pytest.skip("needs root and systemd-analyze (set CI=true to require them)")


def sh(*argv: str | Path, ok: bool = True) -> subprocess.CompletedProcess[str]:
    out = subprocess.run([str(a) for a in argv], capture_output=True, text=True, timeout=600)
    if ok:
        assert out.returncode == 0, f"{argv}\n{out.stdout}\n{out.stderr}"
    return out


def passwd_entry(root: Path, name: str) -> list[str] | None:
    for line in (root / "etc/passwd").read_text().splitlines():
        fields = line.split(":")
        if fields[0] == name:
            return fields
    return None


def analyze(root: Path, verb: str, *args: str) -> subprocess.CompletedProcess[str]:
    extra = ["--offline=true"] if verb == "security" else []
    return sh("systemd-analyze", verb, *extra, f"--root={root}", *args, ok=False)


@pytest.mark.slow
def test_install_verify_run_uninstall(tmp_path: Path) -> None:
    need_root()
    root = tmp_path / "board"
    (root / "etc").mkdir(parents=True)
    for name in ("passwd", "group", "shadow", "gshadow", "login.defs"):
        shutil.copy2(Path("/etc") / name, root / "etc" / name)
    shutil.copytree("/usr/lib/systemd/system", root / "usr/lib/systemd/system", symlinks=True)

    sh(DEPLOY / "install.sh", "--root", root, "--python", sys.executable)

    user = passwd_entry(root, "taprig")
    assert user is not None and user[5:] == ["/var/lib/taprig", "/usr/sbin/nologin"]
    uid, gid = int(user[2]), int(user[3])
    assert uid < 1000  # a system account
    groups = (root / "etc/group").read_text().splitlines()
    dialout = next(x for x in groups if x.startswith("dialout:"))
    assert "taprig" in dialout.split(":")[3].split(",")
    state = (root / "var/lib/taprig").stat()
    assert (state.st_uid, state.st_gid, state.st_mode & 0o777) == (uid, gid, 0o700)
    config = root / "etc/taprig/taprigd.toml"
    assert config.read_text() == (DEPLOY / "taprigd.example.toml").read_text()
    assert (config.stat().st_gid, config.stat().st_mode & 0o777) == (gid, 0o640)
    unit = root / "etc/systemd/system/taprigd.service"
    assert unit.read_text() == (DEPLOY / "taprigd.service").read_text()
    wants = root / "etc/systemd/system/multi-user.target.wants/taprigd.service"
    assert os.readlink(wants) == "/etc/systemd/system/taprigd.service"
    assert (root / "etc/udev/rules.d/70-taprig-device.rules").exists()

    # systemd reads the unit without a complaint, and a typo would not pass unseen.
    verify = analyze(root, "verify", "taprigd.service")
    assert verify.returncode == 0 and verify.stderr == "" and verify.stdout == "", verify
    broken = root / "etc/systemd/system/taprigd-typo.service"
    broken.write_text(unit.read_text().replace("ProtectSystem=", "ProtectSystm="))
    assert "Unknown key 'ProtectSystm'" in analyze(root, "verify", broken.name).stderr
    broken.unlink()
    security = analyze(root, "security", "taprigd.service")
    score = re.search(r"Overall exposure level for taprigd\.service: ([\d.]+)", security.stdout)
    assert score is not None, security
    assert float(score.group(1)) <= EXPOSURE_CEILING, security.stdout

    # The installed daemon starts with the installed configuration (state moved into the
    # temporary root, the service on loopback) and stops on its own.
    taprigd = root / "opt/taprig/bin/taprigd"
    run = sh(taprigd, "run", "-c", config, "--set", f"store.data_dir={root}/var/lib/taprig",
             "--set", "service.bind=127.0.0.1", "--set", "service.port=0",
             "--set", "service.advertise=false", "--duration", "1", ok=False)  # fmt: skip
    assert run.returncode == 0, run.stderr
    status = sh(taprigd, "status", "-c", config, "--set", f"store.data_dir={root}/var/lib/taprig",
                ok=False)  # fmt: skip
    assert status.returncode == 1 and "not running (no run file)" in status.stdout

    # Again: an upgrade keeps the operator's configuration.
    config.write_text(config.read_text() + "\n# edited on the board\n")
    sh(DEPLOY / "install.sh", "--root", root, "--python", sys.executable)
    assert config.read_text().endswith("# edited on the board\n")

    sh(DEPLOY / "uninstall.sh", "--root", root)
    assert not unit.exists() and not os.path.lexists(wants)
    assert not (root / "opt/taprig").exists()
    assert config.exists() and (root / "var/lib/taprig/taprig.sqlite3").exists()
    assert passwd_entry(root, "taprig") is not None
    sh(DEPLOY / "uninstall.sh", "--root", root, "--purge")
    assert not (root / "etc/taprig").exists() and not (root / "var/lib/taprig").exists()
    assert passwd_entry(root, "taprig") is None


def test_unit_open_file_limit_carries_the_connection_cap() -> None:
    """LimitNOFILE leaves room for the default connection cap and the daemon's own files
    (daemon/api/site.py: one descriptor per connection plus FD_RESERVE)."""
    from taprig.daemon.api.site import FD_RESERVE
    from taprig.daemon.config.table import SETTINGS

    unit = (DEPLOY / "taprigd.service").read_text()
    limit = re.search(r"^LimitNOFILE=(\d+)$", unit, re.MULTILINE)
    assert limit is not None, "no LimitNOFILE in the unit"
    cap = next(s.default for s in SETTINGS if s.name == "service.max_connections")
    assert isinstance(cap, int) and int(limit.group(1)) >= cap + FD_RESERVE
    assert re.search(r"^StateDirectoryMode=0700$", unit, re.MULTILINE)
