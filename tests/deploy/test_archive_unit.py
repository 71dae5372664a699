"""deploy/taprig-archive.service checked by systemd itself (`systemd-analyze verify` and its
`security` exposure score) in a temporary root, and the example configuration read by the
archive's own loader. Needs root and systemd-analyze, as tests/deploy/test_install.py."""

from __future__ import annotations

import re
import shutil
import sys
from pathlib import Path

from taprig.client.archive.config import load
from taprig.client.archive.db import ArchiveError

from .test_install import DEPLOY, EXPOSURE_CEILING, analyze, need_root


def test_archive_unit_verifies_and_is_locked_down(tmp_path: Path) -> None:
    need_root()
    root = tmp_path / "server"
    shutil.copytree("/usr/lib/systemd/system", root / "usr/lib/systemd/system", symlinks=True)
    units = root / "etc/systemd/system"
    units.mkdir(parents=True)
    shutil.copy2(DEPLOY / "taprig-archive.service", units)
    (root / "opt/taprig/bin").mkdir(parents=True)
    shutil.copy2(Path(sys.executable).parent / "taprig", root / "opt/taprig/bin/taprig")
    verify = analyze(root, "verify", "taprig-archive.service")
    assert verify.returncode == 0 and verify.stderr == "" and verify.stdout == "", verify
    security = analyze(root, "security", "taprig-archive.service")
    score = re.search(r"Overall exposure level for taprig-archive\.service: ([\d.]+)",
                      security.stdout)  # fmt: skip
    assert score is not None, security
    assert float(score.group(1)) <= EXPOSURE_CEILING, security.stdout


def test_example_configuration_loads_and_must_be_0600(tmp_path: Path) -> None:
    token = tmp_path / "rig.token"
    token.write_text("t0ken\n")
    token.chmod(0o600)
    text = (DEPLOY / "taprig-archive.example.toml").read_text()
    cfg_path = tmp_path / "archive.toml"
    cfg_path.write_text(text.replace("/etc/taprig/rig-hall-2.token", str(token)))
    cfg_path.chmod(0o600)
    cfg = load(cfg_path, {})
    assert [r.label for r in cfg.rigs] == ["rig-hall-1", "rig-hall-2"]
    assert cfg.rigs[1].token == "t0ken" and (cfg.wait_s, cfg.busy_retry_s) == (25.0, 10.0)
    assert "change-me" not in repr(cfg) and "t0ken" not in repr(cfg)
    cfg_path.chmod(0o640)
    try:
        load(cfg_path, {})
    except ArchiveError as exc:
        assert "chmod 600" in str(exc)
    else:
        raise AssertionError("a configuration readable by others was accepted")
