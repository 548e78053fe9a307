"""A character-cell plotting grid shared by the waveform and spectrum panels.

Each terminal cell is split into an upper and a lower half (``▀``, ``▄``, ``█``), so a
panel ``rows`` high has ``2 * rows`` vertical steps. Only block characters are used:
they render in any UTF-8 terminal, also over ssh, with no special fonts.
"""

from __future__ import annotations

import numpy as np
from rich.segment import Segment
from rich.style import Style
from textual.strip import Strip
from textual.widget import Widget

_UPPER, _LOWER, _FULL = "\u2580", "\u2584", "\u2588"


def column_extents(y: np.ndarray, ncols: int) -> tuple[np.ndarray, np.ndarray]:
    """Minimum and maximum of ``y`` in each of ``ncols`` consecutive column bins.

    Every sample belongs to exactly one column (bins as :func:`numpy.array_split`
    makes them), so a one-sample spike always shows in its column. With fewer
    samples than columns, each column takes the sample under it.

    Parameters
    ----------
    y : numpy.ndarray
        Samples (1-D), any unit; NaN samples are ignored.
    ncols : int
        Number of columns, >= 1.

    Returns
    -------
    mins, maxs : numpy.ndarray
        Float arrays of length ``ncols`` (NaN for a column with no finite sample).
    """
    if ncols < 1:
        raise ValueError(f"ncols must be >= 1, got {ncols}")
    y = np.asarray(y, dtype=np.float64).ravel()
    n = y.size
    if n == 0:
        nan = np.full(ncols, np.nan)
        return nan, nan.copy()
    if n < ncols:
        idx = (np.arange(ncols) * n) // ncols
        return y[idx].copy(), y[idx].copy()
    base, extra = divmod(n, ncols)
    sizes = np.full(ncols, base)
    sizes[:extra] += 1
    starts = np.concatenate(([0], np.cumsum(sizes)[:-1]))
    finite = np.isfinite(y)
    lo = np.where(finite, y, np.inf)
    hi = np.where(finite, y, -np.inf)
    mins = np.minimum.reduceat(lo, starts)
    maxs = np.maximum.reduceat(hi, starts)
    empty = ~np.isfinite(mins)
    mins[empty] = np.nan
    maxs[empty] = np.nan
    return mins, maxs


def to_steps(values: np.ndarray, lo: float, hi: float, nsteps: int) -> np.ndarray:
    """Map values onto integer half-row steps 0 (bottom) .. nsteps-1 (top); -1 where NaN."""
    values = np.asarray(values, dtype=np.float64)
    span = hi - lo if hi > lo else 1.0
    steps = np.floor((values - lo) / span * nsteps)
    steps = np.clip(steps, 0, nsteps - 1)
    return np.where(np.isfinite(values), steps, -1).astype(int)


class PlotGrid:
    """A rows x cols grid of half-cells, each holding a colour (or nothing).

    Later drawing wins. ``background`` holds a per-column cell background colour.
    """

    def __init__(self, rows: int, cols: int):
        self.rows = max(1, rows)
        self.cols = max(1, cols)
        self.steps = 2 * self.rows
        self._cells: list[list[str | None]] = [[None] * self.cols for _ in range(self.steps)]
        self._background: list[str | None] = [None] * self.cols
        self._labels: dict[tuple[int, int], tuple[str, str]] = {}

    def span(self, col: int, lo_step: int, hi_step: int, colour: str) -> None:
        """Fill half-cells lo_step..hi_step (inclusive) of a column."""
        if not 0 <= col < self.cols or lo_step < 0 or hi_step < 0:
            return
        lo, hi = sorted((lo_step, hi_step))
        for s in range(max(lo, 0), min(hi, self.steps - 1) + 1):
            self._cells[s][col] = colour

    def hline(self, step: int, colour: str, cols: range | None = None, *,
              over: bool = False) -> None:
        """A horizontal rule one half-cell thick, under what is drawn (or ``over`` it)."""
        if not 0 <= step < self.steps:
            return
        for c in cols if cols is not None else range(self.cols):
            if 0 <= c < self.cols and (over or self._cells[step][c] is None):
                self._cells[step][c] = colour

    def shade(self, cols: range, colour: str) -> None:
        for c in cols:
            if 0 <= c < self.cols:
                self._background[c] = colour

    def label(self, row: int, col: int, text: str, style: str) -> None:
        """Write text into cell row ``row`` (0 = top) from column ``col``."""
        for i, ch in enumerate(text):
            if 0 <= col + i < self.cols and 0 <= row < self.rows:
                self._labels[(row, col + i)] = (ch, style)

    def to_strips(self) -> list[Strip]:
        """One Strip per cell row, with runs of equal style merged into one segment."""
        strips = []
        for row in range(self.rows):
            upper = self._cells[self.steps - 1 - 2 * row]
            lower = self._cells[self.steps - 2 - 2 * row]
            segments: list[Segment] = []
            run: list[str] = []
            run_style = None
            for c in range(self.cols):
                bg = self._background[c]
                label = self._labels.get((row, c))
                if label is not None:
                    ch, style = label[0], _label_style(label[1], bg)
                else:
                    top, bot = upper[c], lower[c]
                    if top and bot and top == bot:
                        ch, style = _FULL, _style(top, bg)
                    elif top and bot:
                        ch, style = _UPPER, _style(top, bot)
                    elif top:
                        ch, style = _UPPER, _style(top, bg)
                    elif bot:
                        ch, style = _LOWER, _style(bot, bg)
                    else:
                        ch, style = " ", _style(None, bg)
                if style is not run_style and run:
                    segments.append(Segment("".join(run), run_style))
                    run = []
                run_style = style
                run.append(ch)
            if run:
                segments.append(Segment("".join(run), run_style))
            strips.append(Strip(segments, self.cols))
        return strips


_STYLES: dict = {}


def _style(fg: str | None, bg: str | None) -> Style:
    key = (fg, bg)
    style = _STYLES.get(key)
    if style is None:
        style = _STYLES[key] = Style(color=fg, bgcolor=bg)
    return style


def _label_style(spec: str, bg: str | None) -> Style:
    key = ("label", spec, bg)
    style = _STYLES.get(key)
    if style is None:
        style = Style.parse(spec) + Style(bgcolor=bg) if bg else Style.parse(spec)
        _STYLES[key] = style
    return style


def message_strips(text: str, rows: int, cols: int, colour: str) -> list[Strip]:
    """A one-line message (e.g. waiting for data) on an otherwise empty panel."""
    first = Strip([Segment(text[:cols], _style(colour, None))]).adjust_cell_length(cols)
    return [first] + [Strip.blank(cols) for _ in range(max(0, rows - 1))]


class GridPanel(Widget):
    """A panel drawn line by line from strips built once per change (Textual's line API).

    Subclasses implement :meth:`build` and call :meth:`invalidate` when their data change;
    the strips are rebuilt lazily on the next paint, for the size the panel has then.
    """

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self._strips: list[Strip] | None = None
        self._built_for: tuple[int, int] | None = None

    def build(self, rows: int, cols: int) -> list[Strip]:  # pragma: no cover - abstract
        raise NotImplementedError

    def invalidate(self) -> None:
        self._strips = None
        self.refresh()

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
