"""Run mypy over the package as `tankside.monitor`, `tankside.drivers`, `tankside.simulators`.

setuptools maps the three folders onto the `tankside` namespace with `package-dir`, an
import hook that mypy cannot run. This script builds build/typecheck/tankside/ out of
symbolic links to the three folders (the `mypy_path` of pyproject.toml's [tool.mypy]),
runs mypy on the package there with the settings of [tool.mypy], and prints file names
as they are in the repository (`monitor/cli.py`, not the link's path). The exit status
is mypy's. Run from anywhere: `python tests/typecheck.py [extra mypy options]`.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TREE = ROOT / "build" / "typecheck"
FOLDERS = ("monitor", "drivers", "simulators")


def build_tree() -> Path:
    """Make TREE/tankside/<folder> a link to ROOT/<folder> for each folder; return it."""
    package = TREE / "tankside"
    package.mkdir(parents=True, exist_ok=True)
    for name in FOLDERS:
        link = package / name
        target = ROOT / name
        if link.is_symlink() and Path(os.readlink(link)) == target:
            continue
        if link.is_symlink() or link.exists():
            link.unlink()
        link.symlink_to(target, target_is_directory=True)
    return package


def main(argv: list[str]) -> int:
    build_tree()
    # Relative paths in the output, so they read as the repository's own files.
    result = subprocess.run(
        [sys.executable, "-m", "mypy", *argv],
        cwd=ROOT,
        capture_output=True,
        text=True,
        check=False,
    )
    prefix = str(TREE.relative_to(ROOT) / "tankside") + os.sep
    sys.stdout.write(result.stdout.replace(prefix, ""))
    sys.stderr.write(result.stderr.replace(prefix, ""))
    return result.returncode


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
