"""A character-cell plotting grid shared by the waveform and spectrum panels.

Each terminal cell is split into an upper and a lower half (``▀``, ``▄``, ``█``), so a
panel ``rows`` high has ``2 * rows`` vertical steps. Only block characters are used:
they render in any UTF-8 terminal, also over ssh, with no special fonts.
"""

from __future__ import annotations

import numpy as np
from rich.style import Style
from rich.text import Text

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

    def to_text(self) -> Text:
        out = Text(no_wrap=True, overflow="crop")
        for row in range(self.rows):
            upper = self._cells[self.steps - 1 - 2 * row]
            lower = self._cells[self.steps - 2 - 2 * row]
            for c in range(self.cols):
                bg = self._background[c]
                if (row, c) in self._labels:
                    ch, style = self._labels[(row, c)]
                    out.append(ch, Style.parse(style) + Style(bgcolor=bg) if bg else style)
                    continue
                top, bot = upper[c], lower[c]
                if top and bot and top == bot:
                    out.append(_FULL, Style(color=top, bgcolor=bg))
                elif top and bot:
                    out.append(_UPPER, Style(color=top, bgcolor=bot))
                elif top:
                    out.append(_UPPER, Style(color=top, bgcolor=bg))
                elif bot:
                    out.append(_LOWER, Style(color=bot, bgcolor=bg))
                else:
                    out.append(" ", Style(bgcolor=bg))
            if row < self.rows - 1:
                out.append("\n")
        return out
