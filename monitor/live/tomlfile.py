"""Reading a TOML file a user wrote (bench file, scan plan), with one-line errors."""

from __future__ import annotations

import tomllib
from pathlib import Path

from ..errors import ConfigError


def read_toml(path: Path, what: str, error: type[ConfigError] = ConfigError) -> tuple[str, dict]:
    """The text of ``path`` and its parsed table.

    Raises
    ------
    ConfigError (or ``error``, a subclass)
        The file is missing, unreadable, not UTF-8 or not valid TOML; the message names
        the file and says it is the ``what`` (``"bench file"``, ``"scan plan file"``).
    """
    source = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError as err:
        raise error(f"{source}: no such {what}") from err
    except (OSError, UnicodeDecodeError) as err:
        raise error(f"{source}: cannot read {what}: {err}") from err
    try:
        return text, tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise error(f"{source}: not valid TOML: {err}") from err
