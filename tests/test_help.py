"""Every command's --help renders: help texts are read as Rich markup, where a bracketed
word such as ``[/DIR]`` is a tag, and an unmatched one made `taprigd run --help` a traceback."""

from __future__ import annotations

from typing import Any

import pytest
import typer
from typer.main import get_command
from typer.testing import CliRunner

from taprig.client.cli import app as client_app
from taprig.daemon.cli import app as daemon_app


def _paths(group: Any, prefix: tuple[str, ...] = ()) -> list[tuple[str, ...]]:
    paths = [prefix]
    if hasattr(group, "commands"):  # a group of commands (typer's own click)
        for name, command in group.commands.items():
            paths += _paths(command, (*prefix, name))
    return paths


CASES = [(app, path) for app in (daemon_app, client_app) for path in _paths(get_command(app))]


@pytest.mark.parametrize(("app", "path"), CASES, ids=[" ".join(p) or "(root)" for _, p in CASES])
def test_help_renders(app: typer.Typer, path: tuple[str, ...]) -> None:
    result = CliRunner().invoke(app, [*path, "--help"], env={"COLUMNS": "120"})
    assert result.exit_code == 0, result.output + repr(result.exception)
    assert "Usage" in result.output and "Traceback" not in result.output
