"""The package's shape holds: no import cycles (counting imports inside
functions too), argparse and rich only in slipless/cli, every error class in
the SliplessError tree."""

from __future__ import annotations

import ast
import importlib
import inspect
import pkgutil
from pathlib import Path

import slipless
from slipless.errors import SliplessError

PKG = Path(slipless.__file__).parent


def _modules() -> dict[str, Path]:
    out = {}
    for p in PKG.rglob("*.py"):
        parts = p.relative_to(PKG.parent).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        out[name] = p
    return out


def _imports(path: Path, known: dict[str, Path]) -> set[str]:
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            found.add(node.module)
            found.update(f"{node.module}.{a.name}" for a in node.names)
        elif isinstance(node, ast.Import):
            found.update(a.name for a in node.names)
    return {m for m in found if m in known}


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    out: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        for w in graph[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_no_import_cycles() -> None:
    mods = _modules()
    graph = {m: _imports(p, mods) - {m} for m, p in mods.items()}
    assert _cycles(graph) == []
    # the test sees a cycle when there is one
    assert _cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": set()}) == [["a", "b", "c"]]


def test_argparse_and_rich_only_in_cli() -> None:
    mods = _modules()
    users = set()
    for name, path in mods.items():
        for node in ast.walk(ast.parse(path.read_text())):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import)
                     else [node.module or ""] if isinstance(node, ast.ImportFrom) else [])
            if any(n.split(".")[0] in ("argparse", "rich") for n in names):
                users.add(name)
    assert users and all(u.startswith("slipless.cli") for u in users), sorted(users)


def test_every_error_class_is_a_slipless_error() -> None:
    outside = []
    for info in pkgutil.walk_packages(slipless.__path__, "slipless."):
        if (info.name.startswith(("slipless.sim", "slipless.firmware", "slipless.protocol"))
                or info.name == "slipless.__main__"):
            continue  # the simulation and the board's own code are not the laptop's API
        module = importlib.import_module(info.name)
        for _, cls in inspect.getmembers(module, inspect.isclass):
            if (issubclass(cls, BaseException) and cls.__module__.startswith("slipless")
                    and not issubclass(cls, SliplessError)):
                outside.append(f"{cls.__module__}.{cls.__qualname__}")
    assert outside == []


def test_every_package_folder_goes_into_the_wheel() -> None:
    """A folder of the package missing from pyproject's list would be missing from
    the wheel (the checkout's tests would still pass)."""
    import tomllib

    root = Path(__file__).resolve().parents[2]
    listed = set(tomllib.loads((root / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    base = root / "host" / "slipless"
    found = {"slipless" + ("." + ".".join(p.parent.relative_to(base).parts) if p.parent != base else "")
             for p in base.rglob("__init__.py")}
    assert found <= listed, sorted(found - listed)
