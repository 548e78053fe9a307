"""The import direction of DESIGN.md, read from the source with ast (no import needed).

monitor -> drivers -> pyvisa/pyserial; simulators import neither monitor nor drivers;
drivers import neither monitor nor simulators. The CLI wiring of the two commands that
start a simulated bench (simulate, demo) is the one place monitor/ may reach simulators.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SIMULATOR_WIRING = {"monitor/commands/simulate.py", "monitor/commands/demo.py"}


def _imported_modules(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module)
    return names


def _sources(folder: str) -> list[Path]:
    return sorted((ROOT / folder).rglob("*.py"))


def test_every_package_has_sources():
    for folder in ("monitor", "drivers", "simulators"):
        assert _sources(folder), folder


@pytest.mark.parametrize("path", _sources("drivers"), ids=lambda p: p.name)
def test_drivers_import_neither_monitor_nor_simulators(path):
    bad = {m for m in _imported_modules(path)
           if m.startswith(("tankside.monitor", "tankside.simulators"))}
    assert not bad, f"{path.relative_to(ROOT)} imports {sorted(bad)}"


@pytest.mark.parametrize("path", _sources("simulators"), ids=lambda p: p.name)
def test_simulators_import_neither_monitor_nor_drivers(path):
    bad = {m for m in _imported_modules(path)
           if m.startswith(("tankside.monitor", "tankside.drivers"))}
    assert not bad, f"{path.relative_to(ROOT)} imports {sorted(bad)}"


@pytest.mark.parametrize("path", _sources("monitor"), ids=lambda p: p.name)
def test_monitor_reaches_simulators_only_from_cli_wiring(path):
    rel = path.relative_to(ROOT).as_posix()
    if rel in SIMULATOR_WIRING:
        return
    bad = {m for m in _imported_modules(path) if m.startswith("tankside.simulators")}
    assert not bad, f"{rel} imports {sorted(bad)}"


def test_no_bare_top_level_package_names():
    # DESIGN.md: bare names such as `drivers` collide with other distributions.
    for folder in ("monitor", "drivers", "simulators", "tests"):
        for path in _sources(folder):
            bare = {m.split(".")[0] for m in _imported_modules(path)} & {
                "monitor", "drivers", "simulators"}
            assert not bare, f"{path.relative_to(ROOT)} imports bare {sorted(bare)}"
