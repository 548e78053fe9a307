"""A bordered panel drawn line by line, repainting only the lines that changed.

The dashboard redraws about ten times a second in the same process as the live
chain, so every line it repaints takes the interpreter away from acquisition and
conversion. A :class:`LinePanel` builds its content as one :class:`Strip` per line
(Textual's line API), compares the new lines with the ones on screen, and asks
Textual to repaint only those that differ; an unchanged title or subtitle costs
nothing, a changed one repaints only its border row.
"""

from __future__ import annotations

from collections.abc import Sequence

from rich.cells import cell_len
from rich.segment import Segment
from rich.style import Style
from textual.geometry import Region
from textual.strip import Strip
from textual.widget import Widget


class LinePanel(Widget):
    """A panel whose content is built by :meth:`build` as one strip per line.

    Subclasses implement :meth:`build` and call :meth:`invalidate` when their data
    change, and set their border texts with :meth:`set_titles`. The first build, and
    any build after a resize, happens on the next paint for the size the panel has then.
    """

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self._strips: list[Strip] | None = None
        self._built_for: tuple[int, int] | None = None
        self._titles: dict[str, str | None] = {}
        self._border_only = False

    def build(self, rows: int, cols: int) -> list[Strip]:  # pragma: no cover - abstract
        raise NotImplementedError

    # -- content ---------------------------------------------------------------------

    def invalidate(self) -> None:
        """Rebuild the content now and repaint the lines that changed."""
        size = self.content_size
        key = (size.height, size.width)
        old = self._strips
        if old is None or self._built_for != key or not size.area or not self.is_mounted:
            self._strips = None           # built on the next paint, repainted whole
            self.refresh()
            return
        new = self.build(size.height, size.width)
        changed = [y for y in range(max(len(new), len(old)))
                   if y >= len(new) or y >= len(old) or new[y] != old[y]]
        self._strips = new
        if changed:
            self.refresh(*(Region(0, start, size.width, stop - start)
                           for start, stop in _runs(changed)))

    def render_line(self, y: int) -> Strip:
        size = self.content_size
        key = (size.height, size.width)
        if self._strips is None or self._built_for != key:
            self._strips = self.build(size.height, size.width) if size.area else []
            self._built_for = key
        if 0 <= y < len(self._strips):
            return self._strips[y]
        return Strip.blank(size.width)

    def text_lines(self) -> list[str]:
        """The panel's content as plain text (for tests and logs)."""
        size = self.content_size
        return [self.render_line(y).text for y in range(size.height)]

    # -- border texts ----------------------------------------------------------------

    def set_titles(self, title: str | None = None, subtitle: str | None = None) -> None:
        """Set the border title and/or subtitle (markup); None leaves one as it is.

        Only a text that differs from the one shown is set, and it repaints only its
        border row, not the panel (setting ``border_title`` itself repaints it whole).
        """
        for name, text, top in (("border_title", title, True),
                                ("border_subtitle", subtitle, False)):
            if text is None or self._titles.get(name) == text:
                continue
            self._titles[name] = text
            if not self.is_mounted or self._strips is None:
                setattr(self, name, text)
                continue
            self._border_only = True
            try:
                setattr(self, name, text)
            finally:
                self._border_only = False
            self.refresh(self._border_row(top))

    def _border_row(self, top: bool) -> Region:
        # refresh() takes regions relative to the content; the border lies outside it
        offset = self.content_offset
        row = 0 if top else self.outer_size.height - 1
        return Region(-offset.x, row - offset.y, self.outer_size.width, 1)

    def refresh(self, *regions: Region, **kwargs) -> LinePanel:
        # the border-text setters ask for a whole repaint; set_titles repaints one row
        if self._border_only and not regions and not kwargs:
            return self
        return super().refresh(*regions, **kwargs)


def _runs(lines: list[int]) -> list[tuple[int, int]]:
    """Consecutive line numbers as [start, stop) runs: [1, 2, 3, 7] -> [(1, 4), (7, 8)]."""
    runs: list[tuple[int, int]] = []
    for y in lines:
        if runs and runs[-1][1] == y:
            runs[-1] = (runs[-1][0], y + 1)
        else:
            runs.append((y, y + 1))
    return runs


_STYLES: dict[tuple[Style | None, str | None], Style | None] = {}


def style_of(spec: str | None, base: Style | None = None) -> Style | None:
    """A style string ("bold #7fd88f") over a ``base`` style, parsed and combined once."""
    key = (base, spec)
    style = _STYLES.get(key)
    if style is None and key not in _STYLES:
        parsed = Style.parse(spec) if spec else None
        style = _STYLES[key] = (base + parsed if parsed else base) if base else parsed
    return style


def text_strip(pieces: Sequence[tuple[str, str | None]], cols: int,
               base: Style | None = None) -> Strip:
    """One line of (text, style string) pieces over ``base``, cut or padded to ``cols`` cells."""
    segments = [Segment(text, style_of(spec, base)) for text, spec in pieces if text]
    width = sum(cell_len(text) for text, _ in pieces)
    if width <= cols:                    # the usual case: pad, and make one Strip only
        if width < cols:
            segments.append(Segment(" " * (cols - width), _blank_style(base)))
        return Strip(segments, cols)
    return Strip(segments).adjust_cell_length(cols, _blank_style(base))


def text_strips(lines: Sequence[Sequence[tuple[str, str | None]]], rows: int, cols: int,
                base: Style | None = None) -> list[Strip]:
    """``rows`` strips: the first ``rows`` lines, then blank lines in ``base``."""
    strips = [text_strip(line, cols, base) for line in lines[:rows]]
    blank = _blank_style(base)
    return strips + [Strip.blank(cols, blank) for _ in range(rows - len(strips))]


_BLANKS: dict[Style, Style] = {}


def _blank_style(base: Style | None) -> Style | None:
    # empty cells carry only the background, as Textual pads rendered text
    if base is None or not base.bgcolor:
        return None
    blank = _BLANKS.get(base)
    if blank is None:
        blank = _BLANKS[base] = Style(bgcolor=base.bgcolor)
    return blank
