"""The shape of the code, read from its source with `ast`: imports flow one way, every
third-party import is a declared dependency, modules and functions stay small.

Run as a script (``python tests/test_structure.py``) to list every module and function over
its limit and every import that breaks a rule.
"""

from __future__ import annotations

import ast
import functools
import sys
import tomllib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PARTS = ("firmware_protocol", "schema", "daemon", "client")
MODULE_LINES = 440  # "about 400 lines is the sign to split": 400 with 10 % slack
FUNCTION_LINES = 60

# Modules allowed past MODULE_LINES, each with its reason.
LONG_MODULES = {
    # One physical model with its closed-form checks; split, its formulas would be read apart
    # from the plate theory they come from.
    "firmware_protocol/simpiece/modal.py": "the simulated test piece's model",
}
# Runtime dependencies no installed module imports yet, each with its reason.
NOT_YET_IMPORTED = {}
# Extras whose own package may import them at module level: nothing outside it imports it.
EXTRA_HOMES = {"psycopg": "taprig.client.archive"}
# What each import name is installed as (import name → distribution).
DISTRIBUTIONS = {"serial": "pyserial", "PIL": "pillow"}

BASE = ["__init__", "errors", "records", "placement", "wirebody", "grid", "identity", "display",
        "notify", "owner", "txt", "redact", "room", "private", "resume", "logrepeat",
        "config.__init__", "config.setting", "config.table", "config.channels",
        "config.problems"]  # fmt: skip
API = ["__init__", "__main__", "routes", "errors", "bodies", "validate", "openapi", "once", "feed",
       "gate", "site", "service"]  # fmt: skip
STORE = ["__init__", "tables", "entries", "blobs", "rows", "reads", "writer"]
# The daemon's modules in the order data flows through them: a module may import only
# modules of a lower or equal rank (type-only imports under TYPE_CHECKING too).
DAEMON_RANKS: dict[str, int] = {
    **dict.fromkeys(BASE, 1),
    "capture.__init__": 2,
    "capture.link": 2,
    "capture.linkproc": 2,
    "capture.linkchild": 2,
    "capture.acquire": 3,
    "capture.hits": 4,
    "capture.spectra": 5,
    "capture.session": 6,
    **{f"store.{m}": 7 for m in STORE},
    "stages": 7,
    "rigstate": 7,
    "tally": 7,
    "eventtext": 8,
    "rig": 8,
    "running": 8,
    "auth": 9,
    "pairing": 9,
    "advertise": 9,
    "probe": 9,
    **{f"api.{m}": 10 for m in API},
    "page": 10,
    "supervise": 11,
    "lifespan": 11,
    "status": 11,
    "run": 12,
    "cli": 13,
    "__main__": 14,
}


@dataclass(frozen=True)
class Import:
    module: str  # the importing module, e.g. taprig.daemon.rig
    target: str  # what it imports, absolute, e.g. taprig.daemon.store or numpy
    line: int
    lazy: bool  # inside a function: runs only when called
    typing_only: bool  # under `if TYPE_CHECKING:`: never runs


@functools.cache
def modules() -> dict[str, Path]:
    """taprig module name → source file, for every installed module."""
    out = {}
    for part in PARTS:
        for path in sorted((ROOT / part).rglob("*.py")):
            rel = path.relative_to(ROOT).with_suffix("")
            out["taprig." + ".".join(rel.parts)] = path
    return out


def _package(module: str, path: Path) -> str:
    return module if path.name == "__init__.py" else module.rsplit(".", 1)[0]


def _absolute(node: ast.ImportFrom, package: str) -> str:
    if node.level == 0:
        return node.module or ""
    base = package.split(".")
    base = base[: len(base) - (node.level - 1)]
    return ".".join([*base, node.module] if node.module else base)


def _is_type_checking(node: ast.If) -> bool:
    test = node.test
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


def imports_of(module: str, path: Path) -> Iterator[Import]:
    package = _package(module, path)
    known = modules()

    def walk(node: ast.AST, lazy: bool, typing_only: bool) -> Iterator[Import]:
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.Import):
                for alias in child.names:
                    yield Import(module, alias.name, child.lineno, lazy, typing_only)
            elif isinstance(child, ast.ImportFrom):
                base = _absolute(child, package)
                for alias in child.names:  # `from . import x` may name a module
                    sub = f"{base}.{alias.name}"
                    target = sub if sub in known else base
                    yield Import(module, target, child.lineno, lazy, typing_only)
            elif isinstance(child, ast.FunctionDef | ast.AsyncFunctionDef | ast.Lambda):
                yield from walk(child, True, typing_only)
            elif isinstance(child, ast.If) and _is_type_checking(child):
                yield from walk(child, lazy, True)
            else:
                yield from walk(child, lazy, typing_only)

    yield from walk(ast.parse(path.read_text(encoding="utf-8")), False, False)


@functools.cache
def all_imports() -> list[Import]:
    return [imp for name, path in modules().items() for imp in imports_of(name, path)]


def _internal(target: str) -> str | None:
    """The taprig module `target` names (a module, or the package a name comes from)."""
    known = modules()
    while target.startswith("taprig."):
        if target in known:
            return target
        if target + ".__init__" in known:
            return target + ".__init__"
        target = target.rsplit(".", 1)[0]
    return None


def _part(module: str) -> str:
    return module.split(".")[1]


# ------------------------------------------------------------------------- imports


def test_no_import_loop() -> None:
    """Module-level imports (those that run on import) form no cycle."""
    graph: dict[str, set[str]] = {m: set() for m in modules()}
    for imp in all_imports():
        target = _internal(imp.target)
        if target is not None and not (imp.typing_only or imp.lazy) and target != imp.module:
            graph[imp.module].add(target)
    loops = _cycles(graph)
    assert not loops, "import loops:\n" + "\n".join(" -> ".join(c) for c in loops)


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """One cycle per strongly connected component with more than one module (Tarjan 1972)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    out: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                out.append(sorted(component))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_parts_import_only_what_they_may() -> None:
    """schema imports neither daemon nor client; client never imports daemon (its demo
    strikes the simulated test piece through firmware_protocol's control client);
    firmware_protocol imports nothing of daemon, client or schema."""
    allowed = {
        "firmware_protocol": {"firmware_protocol"},
        "schema": {"schema"},
        "client": {"client", "schema", "firmware_protocol"},
        "daemon": {"daemon", "schema", "firmware_protocol"},
    }
    bad = []
    for imp in all_imports():
        target = _internal(imp.target)
        if target is not None and _part(target) not in allowed[_part(imp.module)]:
            bad.append(f"{imp.module}:{imp.line} imports {target}")
    assert not bad, "\n".join(bad)


def test_daemon_imports_never_run_back_up_the_pipeline() -> None:
    """Each daemon module imports only modules earlier in the flow (DAEMON_RANKS), type-only
    imports included: the capture stages never import the store, the rig or the service."""
    known = [m for m in modules() if _part(m) == "daemon"]
    unranked = [m for m in known if _daemon_name(m) not in DAEMON_RANKS]
    assert not unranked, f"give these a place in DAEMON_RANKS: {unranked}"
    bad = []
    for imp in all_imports():
        target = _internal(imp.target)
        if target is None or _part(imp.module) != "daemon":
            continue
        if _part(target) != "daemon":
            continue
        mine, theirs = DAEMON_RANKS[_daemon_name(imp.module)], DAEMON_RANKS[_daemon_name(target)]
        if theirs > mine:
            bad.append(f"{imp.module}:{imp.line} (rank {mine}) imports {target} (rank {theirs})")
    assert not bad, "\n".join(bad)


def _daemon_name(module: str) -> str:
    return module.removeprefix("taprig.daemon.")


# ------------------------------------------------------------------------- dependencies


def _declared() -> tuple[set[str], set[str]]:
    """(runtime dependencies, extras' dependencies), as distribution names."""
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]

    def name(spec: str) -> str:
        for stop in "<>=!~[; ":
            spec = spec.split(stop, 1)[0]
        return spec.lower()

    runtime = {name(s) for s in project["dependencies"]}
    extras = {name(s) for k, v in project["optional-dependencies"].items() if k != "test"
              for s in v}  # fmt: skip
    return runtime, extras


def _third_party(imp: Import) -> str | None:
    top = imp.target.split(".")[0]
    if top in ("taprig", "") or top in sys.stdlib_module_names:
        return None
    return DISTRIBUTIONS.get(top, top).lower()


def test_every_third_party_import_is_declared() -> None:
    """Runtime modules import only runtime dependencies at module level; an extra's package
    is imported only inside the function that needs it."""
    runtime, extras = _declared()
    bad = []
    for imp in all_imports():
        dist = _third_party(imp)
        if dist is None or imp.typing_only:
            continue
        if dist in runtime or (imp.lazy and dist in extras):
            continue
        home = EXTRA_HOMES.get(dist)
        if dist in extras and home is not None and imp.module.startswith(home + "."):
            continue
        where = "an extra, imported at module level" if dist in extras else "not declared"
        bad.append(f"{imp.module}:{imp.line} imports {imp.target}: {where}")
    assert not bad, "\n".join(bad)


def test_every_runtime_dependency_is_imported() -> None:
    """Runtime dependencies are exactly what the installed code imports."""
    runtime, _ = _declared()
    used = {d for imp in all_imports() if (d := _third_party(imp)) is not None}
    unused = runtime - used - set(NOT_YET_IMPORTED)
    assert not unused, f"declared but never imported: {sorted(unused)}"


# ------------------------------------------------------------------------- sizes


def long_modules() -> list[str]:
    out = []
    for path in modules().values():
        rel = str(path.relative_to(ROOT))
        lines = len(path.read_text(encoding="utf-8").splitlines())
        if lines > MODULE_LINES and rel not in LONG_MODULES:
            out.append(f"{rel}: {lines} lines")
    return out


def long_functions() -> list[str]:
    out = []
    for path in modules().values():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
                assert node.end_lineno is not None
                first = node.decorator_list[0].lineno if node.decorator_list else node.lineno
                n = node.end_lineno - first + 1 - _docstring_lines(node)
                if n > FUNCTION_LINES:
                    out.append(f"{path.relative_to(ROOT)}:{node.lineno} {node.name}: {n} lines")
    return out


def _docstring_lines(node: ast.FunctionDef | ast.AsyncFunctionDef) -> int:
    """The docstring's lines: equations and references are welcome, they are not code."""
    first = node.body[0]
    if (
        isinstance(first, ast.Expr)
        and isinstance(first.value, ast.Constant)
        and isinstance(first.value.value, str)
    ):
        assert first.end_lineno is not None
        return first.end_lineno - first.lineno + 1
    return 0


def test_no_module_over_the_limit() -> None:
    assert not long_modules(), "\n".join(long_modules())


def test_no_function_over_the_limit() -> None:
    assert not long_functions(), "\n".join(long_functions())


if __name__ == "__main__":
    for line in [*long_modules(), *long_functions()]:
        print(line)
    for check in (test_no_import_loop, test_parts_import_only_what_they_may,
                  test_daemon_imports_never_run_back_up_the_pipeline,
                  test_every_third_party_import_is_declared,
                  test_every_runtime_dependency_is_imported):  # fmt: skip
        try:
            check()
        except AssertionError as exc:
            print(f"{check.__name__}: {exc}")
