"""The README's newcomer path, run as a user who is not root: the demo, and the no-hardware
`taprigd run` line without any configuration (so the store goes to the XDG state folder).

When the suite runs as root, each command runs as `nobody` (setpriv) in a folder of its own
under /tmp, with a HOME there. That user cannot read the interpreter the suite runs on when
it lives under /root, so a small virtual environment on the system's python3 is made for it
whose only content is a path file adding this installation's packages (no download), and
`taprig`/`taprigd` launchers that call the same entry points as the installed scripts.
The daemon is kept on loopback with mDNS off (tests talk only to loopback); otherwise the
README's lines run as written.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import subprocess
import sys
import sysconfig
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
NOBODY = 65534
ISOLATED = ["--set", "service.bind=127.0.0.1", "--set", "service.port=0",
            "--set", "service.advertise=false"]  # fmt: skip


def readme_line(pattern: str) -> list[str]:
    """The README's command matching `pattern`, split into words (comments dropped)."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    found = re.search(pattern, text, re.M)
    assert found, f"the README no longer shows {pattern!r}"
    return found.group(0).split("#")[0].split()


class User:
    """Runs commands as a non-root user with HOME in its own folder."""

    def __init__(self, folder: Path) -> None:
        self.folder = folder
        self.home = folder / "home"
        self.home.mkdir()
        self.as_root = os.geteuid() == 0
        self.bin = Path(sys.executable).parent
        if self.as_root:
            self.bin = self._environment()
            subprocess.run(["chown", "-R", f"{NOBODY}:{NOBODY}", str(folder)], check=True)

    def _environment(self) -> Path:
        """A venv on the system python3 that sees this installation's packages."""
        python = shutil.which("python3", path="/usr/bin:/bin")
        assert python, "the system has no python3"
        env = self.folder / "venv"
        subprocess.run([python, "-m", "venv", "--without-pip", str(env)], check=True)
        ours = sysconfig.get_paths()["purelib"]
        (site,) = env.glob("lib/python3*/site-packages")
        (site / "taprig-suite.pth").write_text(f"import site; site.addsitedir({ours!r})\n")
        for name, module in (("taprig", "taprig.client.cli"), ("taprigd", "taprig.daemon.cli")):
            script = env / "bin" / name
            script.write_text(f"#!{env}/bin/python\nfrom {module} import main\nmain()\n")
            script.chmod(0o755)
        return env / "bin"

    def argv(self, words: list[str]) -> list[str]:
        cmd = [str(self.bin / words[0]), *words[1:]]
        if self.as_root:
            cmd = ["setpriv", f"--reuid={NOBODY}", f"--regid={NOBODY}", "--clear-groups", *cmd]
        return cmd

    def env(self) -> dict[str, str]:
        keep = {k: v for k, v in os.environ.items() if k in ("PATH", "LANG", "LC_ALL", "TZ")}
        return {**keep, "HOME": str(self.home), "PATH": f"{self.bin}:{keep.get('PATH', '')}"}

    def run(self, words: list[str], timeout: float) -> subprocess.CompletedProcess[str]:
        return subprocess.run(self.argv(words), cwd=self.folder, env=self.env(), text=True,
                              capture_output=True, timeout=timeout)  # fmt: skip


@pytest.fixture
def user() -> Iterator[User]:
    # Directly under /tmp: pytest keeps its own temporary root at 0700, closed to `nobody`.
    folder = Path(tempfile.mkdtemp(prefix="taprig-newcomer-"))
    folder.chmod(0o755)
    try:
        yield User(folder)
    finally:
        shutil.rmtree(folder, ignore_errors=True)


@pytest.mark.slow
def test_the_demo_as_a_newcomer_runs_it(user: User) -> None:
    words = readme_line(r"taprig demo --out \S+")
    done = user.run(words, timeout=300)
    out = user.folder / words[-1]
    log = out / "taprigd.log"
    lines = log.read_text().splitlines() if log.exists() else ["(no log)"]
    rig_said = "\n".join([ln for ln in lines if "aiohttp.access" not in ln][-40:])
    assert done.returncode == 0, done.stdout + done.stderr + rig_said
    assert (out / "check.txt").exists() and (out / "modes.npz").exists()
    assert "faster than real time" in done.stdout and "true f  fitted f" in done.stdout
    ignored = (ROOT / ".gitignore").read_text(encoding="utf-8").split()
    assert f"{words[-1]}/" in ignored  # the demo's folder never lands in a commit


def test_taprigd_without_hardware_or_config_uses_the_xdg_state_folder(user: User) -> None:
    words = readme_line(r"taprigd run --set device.url=simulated .*$")
    state = user.home / ".local" / "state" / "taprig"
    proc = subprocess.Popen(user.argv([*words, *ISOLATED]), cwd=user.folder, env=user.env(),
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                            text=True)  # fmt: skip
    try:
        deadline = time.monotonic() + 60.0
        while not (state / "run.json").exists():
            assert proc.poll() is None, proc.communicate()[1]
            assert time.monotonic() < deadline, "taprigd never wrote its run file"
            time.sleep(0.05)
        record = json.loads((state / "run.json").read_text())
        assert record["pid"] == proc.pid or proc.poll() is None
    finally:
        proc.send_signal(signal.SIGTERM)
        _, err = proc.communicate(timeout=30)
    assert proc.returncode == 0, err
    assert "Traceback" not in err
    assert (state / "token").exists() and not (state / "run.json").exists()


def test_an_unwritable_data_dir_is_one_clear_line(user: User) -> None:
    locked = user.folder / "locked"
    locked.mkdir()
    if user.as_root:
        os.chown(locked, 0, 0)  # root's, 0755: closed to `nobody`
    else:
        locked.chmod(0o555)  # this user's own, but read-only
    store = locked / "store"
    done = user.run(["taprigd", "run", "--set", "device.url=simulated",
                     "--set", f"store.data_dir={store}", *ISOLATED], timeout=60)  # fmt: skip
    assert done.returncode == 3, done.stderr
    assert "Traceback" not in done.stderr
    (line,) = done.stderr.strip().splitlines()
    assert line.startswith(f"taprigd: store.data_dir = {locked / 'store'}: cannot be made")
    assert "Permission denied" in line and "set store.data_dir" in line
