"""The one module that touches private parts of Textual.

Written against Textual 8.2 (checked with 8.2.8). Textual shows the painted screen
publicly only as an SVG screenshot; the tests need it as text, painted from the lines
each widget has on screen now, to check that repainting only the changed lines
(:class:`~tankside.monitor.dashboard.panel.LinePanel`) leaves the same screen as a
fresh full paint. What is used, and nothing else:

``Screen._compositor.render_update(full=True)``
    The compositor of a screen, asked for a full update: a Rich renderable of the
    whole screen as it is painted.

``tests/test_textual_internals.py`` fails, naming the attribute and the installed
version, when Textual no longer has it; pyproject.toml caps Textual below the next
major release for that reason.
"""

from __future__ import annotations

import inspect
from importlib import metadata
from typing import Any

from rich.console import RenderableType
from textual.screen import Screen


def installed_version() -> str:
    """The installed Textual's version, or "not installed"."""
    try:
        return metadata.version("textual")
    except metadata.PackageNotFoundError:
        return "not installed"


def painted_screen(screen: Screen[Any]) -> RenderableType:
    """The whole of ``screen`` as it is painted now, as a Rich renderable."""
    update = screen._compositor.render_update(full=True)
    if update is None:  # pragma: no cover - a full update always has something to draw
        raise RuntimeError("Textual's compositor gave no full update")
    return update


def missing(screen: Screen[Any]) -> list[str]:
    """What of the above a mounted ``screen`` lacks: one line per attribute, naming it
    and what was found instead; empty when all is there. For the test that guards this
    module, not for use at run time."""
    compositor = getattr(screen, "_compositor", None)
    if compositor is None:
        return [f"{type(screen).__name__}._compositor: not found"]
    render_update = getattr(compositor, "render_update", None)
    kind = type(compositor).__name__
    if not callable(render_update):
        return [f"{kind}.render_update: not found"]
    if "full" not in inspect.signature(render_update).parameters:
        return [f"{kind}.render_update: no 'full' parameter "
                f"(signature {inspect.signature(render_update)})"]
    return []
