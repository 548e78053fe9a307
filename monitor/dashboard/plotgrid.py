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
    The half-cells are a numpy array of colour numbers (0 = nothing), so that whole
    columns are drawn and whole rows turned into strips in a few array operations:
    the dashboard redraws its plots about ten times a second beside the live chain.
    """

    def __init__(self, rows: int, cols: int):
        self.rows = max(1, rows)
        self.cols = max(1, cols)
        self.steps = 2 * self.rows
        self._colours: list[str | None] = [None]       # colour number -> colour
        self._numbers: dict[str, int] = {}
        # half-cell rows from the bottom (step 0) to the top (step steps-1)
        self._cells = np.zeros((self.steps, self.cols), dtype=np.int32)
        self._background = np.zeros(self.cols, dtype=np.int32)
        self._labels: dict[tuple[int, int], tuple[str, str]] = {}

    def _number(self, colour: str) -> int:
        n = self._numbers.get(colour)
        if n is None:
            n = self._numbers[colour] = len(self._colours)
            self._colours.append(colour)
        return n

    def _col_slice(self, cols: range | None) -> slice | None:
        if cols is None:
            return slice(0, self.cols)
        if cols.step != 1:
            raise ValueError("column ranges must be contiguous")
        lo, hi = max(cols.start, 0), min(cols.stop, self.cols)
        return slice(lo, hi) if hi > lo else None

    def span(self, col: int, lo_step: int, hi_step: int, colour: str) -> None:
        """Fill half-cells lo_step..hi_step (inclusive) of a column."""
        if not 0 <= col < self.cols or lo_step < 0 or hi_step < 0:
            return
        lo, hi = sorted((int(lo_step), int(hi_step)))
        self._cells[lo:min(hi, self.steps - 1) + 1, col] = self._number(colour)

    def spans(self, col0: int, lo_steps: np.ndarray, hi_steps: np.ndarray, colour: str) -> None:
        """:meth:`span` for consecutive columns from ``col0``, one per entry of the arrays.

        A column whose ``lo_steps`` or ``hi_steps`` entry is negative (no data) is skipped.
        """
        lo_steps = np.asarray(lo_steps, dtype=np.int64)
        hi_steps = np.asarray(hi_steps, dtype=np.int64)
        lo = np.minimum(lo_steps, hi_steps)
        hi = np.maximum(lo_steps, hi_steps)
        drawn = (lo_steps >= 0) & (hi_steps >= 0)
        c0, c1 = max(col0, 0), min(col0 + lo.size, self.cols)
        if c1 <= c0:
            return
        pick = slice(c0 - col0, c1 - col0)
        steps = np.arange(self.steps)[:, None]
        fill = drawn[pick] & (steps >= lo[pick]) & (steps <= hi[pick])
        block = self._cells[:, c0:c1]
        block[fill] = self._number(colour)

    def image(self, col0: int, step0: int, levels: np.ndarray, palette: tuple[str, ...]) -> None:
        """Paint a block of half-cells from colour numbers into ``palette``.

        ``levels[r, c]`` goes to half-cell step ``step0 + r`` (row 0 at the bottom) of
        column ``col0 + c``; a negative level paints nothing there. Parts outside the
        grid are cut off.
        """
        levels = np.asarray(levels, dtype=np.int64)
        if levels.ndim != 2 or not levels.size or not palette:
            return
        s0, s1 = max(step0, 0), min(step0 + levels.shape[0], self.steps)
        c0, c1 = max(col0, 0), min(col0 + levels.shape[1], self.cols)
        if s1 <= s0 or c1 <= c0:
            return
        block = levels[s0 - step0:s1 - step0, c0 - col0:c1 - col0]
        numbers = np.array([self._number(colour) for colour in palette], dtype=np.int32)
        drawn = (block >= 0) & (block < len(palette))
        target = self._cells[s0:s1, c0:c1]
        target[drawn] = numbers[block[drawn]]

    def hline(self, step: int, colour: str, cols: range | None = None, *,
              over: bool = False) -> None:
        """A horizontal rule one half-cell thick, under what is drawn (or ``over`` it)."""
        if not 0 <= step < self.steps:
            return
        where = self._col_slice(cols)
        if where is None:
            return
        row = self._cells[step, where]
        n = self._number(colour)
        if over:
            row[:] = n
        else:
            row[row == 0] = n

    def shade(self, cols: range, colour: str) -> None:
        where = self._col_slice(cols)
        if where is not None:
            self._background[where] = self._number(colour)

    def label(self, row: int, col: int, text: str, style: str) -> None:
        """Write text into cell row ``row`` (0 = top) from column ``col``."""
        for i, ch in enumerate(text):
            if 0 <= col + i < self.cols and 0 <= row < self.rows:
                self._labels[(row, col + i)] = (ch, style)

    def to_strips(self) -> list[Strip]:
        """One Strip per cell row, with runs of equal style merged into one segment."""
        rows, cols = self.rows, self.cols
        flipped = self._cells[::-1]                      # top half-cell row first
        upper, lower = flipped[0::2], flipped[1::2]      # (rows, cols) each
        bg = np.broadcast_to(self._background, (rows, cols))
        both = (upper > 0) & (lower > 0)
        # character: 0 blank, 1 upper half, 2 lower half, 3 full block
        kind = np.where(upper > 0, 1, np.where(lower > 0, 2, 0))
        kind[both & (upper == lower)] = 3
        fg = np.where(upper > 0, upper, lower)
        back = np.where(both & (upper != lower), lower, bg)
        # one integer per distinct style; labels take style numbers above all colour pairs
        ncol = len(self._colours)
        key = fg * ncol + back
        chars = np.array([" ", _UPPER, _LOWER, _FULL])[kind]
        label_styles: dict[tuple[str, int], int] = {}
        for (r, c), (ch, spec) in self._labels.items():
            number = label_styles.setdefault((spec, int(bg[r, c])),
                                             ncol * ncol + len(label_styles))
            chars[r, c] = ch
            key[r, c] = number
        styles: dict[int, Style] = {}
        for (spec, b), number in label_styles.items():
            styles[number] = _label_style(spec, self._colours[b])
        colours = self._colours
        texts = chars.view(f"<U{cols}").ravel().tolist()
        # where a run of one style starts: column 0 of every row, and each change of key
        starts = np.ones((rows, cols), dtype=bool)
        starts[:, 1:] = key[:, 1:] != key[:, :-1]
        run_row_index, run_col_index = np.nonzero(starts)
        run_key: list[int] = key[run_row_index, run_col_index].tolist()
        run_row: list[int] = run_row_index.tolist()
        run_col: list[int] = run_col_index.tolist()
        strips = []
        segments: list[Segment] = []
        for i, (r, c, k) in enumerate(zip(run_row, run_col, run_key, strict=True)):
            last = i + 1 == len(run_row) or run_row[i + 1] != r
            stop = cols if last else run_col[i + 1]
            style = styles.get(k)
            if style is None:
                style = styles[k] = _style(colours[k // ncol], colours[k % ncol])
            segments.append(Segment(texts[r][c:stop], style))
            if last:
                strips.append(Strip(segments, cols))
                segments = []
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
