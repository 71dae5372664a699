"""Packaging and project hygiene: one `taprig` namespace, both console scripts, honest CI."""

from __future__ import annotations

import re
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "-q", "--no-deps", "-w", str(out), str(ROOT)],
        check=True,
        capture_output=True,
        timeout=300,
    )
    (found,) = out.glob("taprig-*.whl")
    return found


def test_wheel_installs_only_under_taprig(wheel: Path) -> None:
    names = zipfile.ZipFile(wheel).namelist()
    tops = {n.split("/")[0] for n in names}
    assert {t for t in tops if not t.endswith(".dist-info")} == {"taprig"}
    for part in ("daemon", "client", "client/modal", "schema", "firmware_protocol",
                 "firmware_protocol/simpiece"):  # fmt: skip
        assert f"taprig/{part}/__init__.py" in names
    assert "taprig/firmware_protocol/PROTOCOL.md" in names
    assert not any("/c/" in n or n.endswith(".c") for n in names)


def test_wheel_carries_the_phone_page(wheel: Path) -> None:
    from taprig.daemon.page import FILES

    names = set(zipfile.ZipFile(wheel).namelist())
    assert {f"taprig/daemon/web/{n}" for n in FILES} <= names


def test_wheel_declares_both_console_scripts(wheel: Path) -> None:
    z = zipfile.ZipFile(wheel)
    (ep,) = [n for n in z.namelist() if n.endswith("entry_points.txt")]
    text = z.read(ep).decode()
    assert "taprigd = taprig.daemon.cli:main" in text
    assert "taprig = taprig.client.cli:main" in text


@pytest.mark.parametrize("module", ["taprig.daemon", "taprig.client"])
def test_help_is_useful(module: str) -> None:
    out = subprocess.run(
        [sys.executable, "-m", module, "--help"], capture_output=True, text=True, timeout=60
    )
    assert out.returncode == 0, out.stderr
    assert "Usage" in out.stdout
    assert ("probe" in out.stdout) if module.endswith("daemon") else ("demo" in out.stdout)


def _readme_test_command() -> str:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```sh\n(.*?)\n```", readme, re.S)
    (cmd,) = [b for b in blocks if "pytest" in b]
    return cmd.strip()


def test_ci_runs_exactly_the_readme_test_command() -> None:
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    m = re.search(r"# README-TEST-BEGIN\n\( (.*) \) \|\| exit 1\n# README-TEST-END", ci)
    assert m, ".ci/run lost its README test block"
    assert m.group(1) == _readme_test_command()


def test_readme_has_exactly_two_setup_commands() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    setup = readme.split("## Set up on a fresh machine", 1)[1].split("\n## ", 1)[0]
    assert len(re.findall(r"```sh\n", setup)) == 2


@pytest.mark.parametrize(
    ("part", "forbidden"),
    [("client", ("taprig.daemon",)), ("schema", ("taprig.daemon", "taprig.client")),
     ("firmware_protocol", ("taprig.daemon", "taprig.client", "taprig.schema"))],
)  # fmt: skip
def test_parts_keep_their_boundaries(part: str, forbidden: tuple[str, ...]) -> None:
    """The client never imports daemon code; the contract and the device link import neither."""
    pattern = re.compile(r"^\s*(?:from|import)\s+(taprig\.\w+)", re.M)
    for path in (ROOT / part).rglob("*.py"):
        for module in pattern.findall(path.read_text(encoding="utf-8")):
            assert not module.startswith(forbidden), f"{path} imports {module}"


def test_wheel_carries_the_archive_migrations_and_schema(wheel: Path) -> None:
    names = set(zipfile.ZipFile(wheel).namelist())
    sql = {n for n in names if n.startswith("taprig/client/archive/migrations/")}
    assert "taprig/client/archive/migrations/0001_archive.sql" in sql
    assert "taprig/client/archive/SCHEMA.md" in names


def test_psycopg_is_imported_by_the_archive_only() -> None:
    """The archive's driver is an extra: nothing else imports it, and the CLI starts without."""
    pattern = re.compile(r"^\s*(?:from|import)\s+psycopg", re.M)
    for part in ("daemon", "client", "schema", "firmware_protocol"):
        for path in (ROOT / part).rglob("*.py"):
            if pattern.search(path.read_text(encoding="utf-8")):
                assert path.is_relative_to(ROOT / "client" / "archive"), path
    code = "import sys, taprig.client.cli; assert 'psycopg' not in sys.modules"
    subprocess.run([sys.executable, "-c", code], check=True, timeout=60)
