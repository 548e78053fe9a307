"""The layers of DESIGN.md, read from the source with ast (nothing is imported).

Inside the package imports are relative; this test resolves them to module names:

- ``monitor.acoustics`` (numerics) imports only the standard library, numpy, scipy,
  itself and ``monitor.errors``;
- ``monitor.record`` (the session file) imports acoustics, the shared modules and
  drivers' plain data, never ``monitor.live`` or the user-facing side;
- ``monitor.live`` (a running session) never imports the user-facing side;
- the user-facing side (cli, commands, dashboard, headless, progress) is imported by
  nothing below it;
- ``drivers`` imports nothing else of tankside; ``simulators`` imports nothing else
  of tankside, and in monitor only the CLI wiring of ``simulate`` and ``demo``
  reaches it;
- inside the package every tankside import is relative (so editors and type
  checkers can follow it), and no file uses a bare top-level name such as
  ``drivers``.
"""

from __future__ import annotations

import ast
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
FOLDERS = {"monitor": "tankside.monitor", "drivers": "tankside.drivers",
           "simulators": "tankside.simulators"}
SIMULATOR_WIRING = {"tankside.monitor.commands.simulate", "tankside.monitor.commands.demo"}
USER_FACING = ("tankside.monitor.cli", "tankside.monitor.commands",
               "tankside.monitor.dashboard", "tankside.monitor.headless",
               "tankside.monitor.progress", "tankside.monitor.caution")
SHARED = ("tankside.monitor.errors", "tankside.monitor.outcome", "tankside.monitor")
THIRD_PARTY_NUMERICS = {"numpy", "scipy"}


def _module_name(path: Path) -> str:
    rel = path.relative_to(ROOT).with_suffix("")
    parts = [FOLDERS[rel.parts[0]], *rel.parts[1:]]
    name = ".".join(parts)
    return name.removesuffix(".__init__")


def _package_of(path: Path) -> str:
    name = _module_name(path)
    return name if path.name == "__init__.py" else name.rsplit(".", 1)[0]


def _imports(path: Path) -> list[tuple[str, int]]:
    """(absolute module name, level as written) of every import in ``path``.

    ``from . import x`` yields the package itself and ``package.x`` (x may be a module).
    """
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    out: list[tuple[str, int]] = []
    package = _package_of(path)
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out.extend((alias.name, 0) for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level == 0:
                base = node.module or ""
            else:
                parts = package.split(".")
                base_parts = parts[:len(parts) - (node.level - 1)]
                base = ".".join(base_parts + ([node.module] if node.module else []))
            out.append((base, node.level))
            if node.module is None:
                out.extend((f"{base}.{alias.name}", node.level) for alias in node.names)
    return out


def _sources(folder: str) -> list[Path]:
    return sorted((ROOT / folder).rglob("*.py"))


def _within(name: str, prefixes: tuple[str, ...] | set[str]) -> bool:
    return any(name == p or name.startswith(p + ".") for p in prefixes)


ALL_SOURCES = [p for folder in FOLDERS for p in _sources(folder)]


def _tankside_imports(path: Path) -> set[str]:
    return {name for name, _ in _imports(path) if _within(name, ("tankside",))}


def test_every_layer_has_sources():
    for folder in ("monitor/acoustics", "monitor/record", "monitor/live", "monitor/commands",
                   "monitor/dashboard", "drivers", "simulators"):
        assert _sources(folder), folder


def test_resolver_sees_relative_imports():
    # The checks below are only as good as the resolver: a known import must show.
    names = _tankside_imports(ROOT / "monitor/live/session.py")
    assert "tankside.monitor.live.processing" in names
    assert "tankside.monitor.live.recorder" in names


@pytest.mark.parametrize("path", ALL_SOURCES, ids=lambda p: p.relative_to(ROOT).as_posix())
def test_package_imports_are_relative(path):
    absolute = {name for name, level in _imports(path)
                if level == 0 and _within(name, ("tankside",))}
    assert not absolute, f"{path.relative_to(ROOT)} imports {sorted(absolute)} absolutely"


@pytest.mark.parametrize("path", _sources("monitor/acoustics"), ids=lambda p: p.name)
def test_acoustics_imports_only_numerics(path):
    bad = set()
    for name, _ in _imports(path):
        top = name.split(".")[0]
        if top == "tankside":
            if not _within(name, ("tankside.monitor.acoustics", "tankside.monitor.errors")):
                bad.add(name)
        elif top not in sys.stdlib_module_names and top not in THIRD_PARTY_NUMERICS:
            bad.add(name)
    assert not bad, f"{path.relative_to(ROOT)} imports {sorted(bad)}"


@pytest.mark.parametrize("path", _sources("monitor/record"), ids=lambda p: p.name)
def test_record_imports_no_live_and_no_user_side(path):
    bad = {n for n in _tankside_imports(path)
           if _within(n, ("tankside.monitor.live", "tankside.simulators", *USER_FACING))}
    assert not bad, f"{path.relative_to(ROOT)} imports {sorted(bad)}"


@pytest.mark.parametrize("path", [p for p in ALL_SOURCES
                                  if not _within(_module_name(p), USER_FACING)],
                         ids=lambda p: p.relative_to(ROOT).as_posix())
def test_nothing_below_imports_the_user_side(path):
    bad = {n for n in _tankside_imports(path) if _within(n, USER_FACING)}
    assert not bad, f"{path.relative_to(ROOT)} imports {sorted(bad)}"


@pytest.mark.parametrize("path", _sources("drivers"), ids=lambda p: p.name)
def test_drivers_import_nothing_else_of_tankside(path):
    bad = {n for n in _tankside_imports(path) if not _within(n, ("tankside.drivers",))}
    assert not bad, f"{path.relative_to(ROOT)} imports {sorted(bad)}"


@pytest.mark.parametrize("path", _sources("simulators"), ids=lambda p: p.name)
def test_simulators_import_nothing_else_of_tankside(path):
    bad = {n for n in _tankside_imports(path) if not _within(n, ("tankside.simulators",))}
    assert not bad, f"{path.relative_to(ROOT)} imports {sorted(bad)}"


@pytest.mark.parametrize("path", _sources("monitor"), ids=lambda p: p.name)
def test_monitor_reaches_simulators_only_from_cli_wiring(path):
    if _module_name(path) in SIMULATOR_WIRING:
        return
    bad = {n for n in _tankside_imports(path) if _within(n, ("tankside.simulators",))}
    assert not bad, f"{path.relative_to(ROOT)} imports {sorted(bad)}"


def test_no_bare_top_level_package_names():
    # DESIGN.md: bare names such as `drivers` collide with other distributions.
    for folder in (*FOLDERS, "tests"):
        for path in _sources(folder):
            tree = ast.parse(path.read_text(encoding="utf-8"))
            bare = set()
            for node in ast.walk(tree):
                if isinstance(node, ast.Import):
                    bare |= {a.name.split(".")[0] for a in node.names}
                elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                    bare.add(node.module.split(".")[0])
            bare &= set(FOLDERS)
            assert not bare, f"{path.relative_to(ROOT)} imports bare {sorted(bare)}"
