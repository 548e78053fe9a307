"""The dashboard repaints only what changed, and what it shows is what a full repaint shows.

Fed by the deterministic FakeLiveSession (tests/fake_session.py). The half-cell plot
grid is checked against a plain per-cell rendering written here from its definition.
"""

from __future__ import annotations

import numpy as np
import pytest
from dashboard_pilot import painted_with, screen_text, sync
from fake_session import FakeLiveSession
from textual.app import App, ComposeResult
from textual.strip import Strip
from textual.widget import Widget

from tankside.monitor.dashboard.app import DashboardApp
from tankside.monitor.dashboard.panel import LinePanel, text_strips
from tankside.monitor.dashboard.plotgrid import PlotGrid

# -- the plot grid against a per-cell reference ------------------------------------------

def _reference_cells(cells_bottom_up: list[list[str | None]], background: list[str | None],
                     rows: int, cols: int) -> list[list[tuple[str, str | None, str | None]]]:
    """(character, foreground, background) per cell, from the half-cell definition."""
    steps = 2 * rows
    out = []
    for row in range(rows):
        upper, lower = cells_bottom_up[steps - 1 - 2 * row], cells_bottom_up[steps - 2 - 2 * row]
        line = []
        for c in range(cols):
            top, bot, bg = upper[c], lower[c], background[c]
            if top and bot and top == bot:
                line.append(("\u2588", top, bg))
            elif top and bot:
                line.append(("\u2580", top, bot))
            elif top:
                line.append(("\u2580", top, bg))
            elif bot:
                line.append(("\u2584", bot, bg))
            else:
                line.append((" ", None, bg))
        out.append(line)
    return out


def _cells_of(strip: Strip) -> list[tuple[str, str | None, str | None]]:
    cells = []
    for seg in strip:
        fg = seg.style.color.name if seg.style and seg.style.color else None
        bg = seg.style.bgcolor.name if seg.style and seg.style.bgcolor else None
        cells.extend((ch, fg, bg) for ch in seg.text)
    return cells


@pytest.mark.parametrize("seed", range(6))
def test_plot_grid_matches_per_cell_reference(seed):
    rng = np.random.default_rng(seed)
    rows, cols = int(rng.integers(1, 12)), int(rng.integers(1, 40))
    steps = 2 * rows
    colours = ["#112233", "#445566", "#778899"]
    grid = PlotGrid(rows, cols)
    ref = [[None] * cols for _ in range(steps)]
    background: list[str | None] = [None] * cols
    a, b = sorted(rng.integers(0, cols + 1, 2))
    grid.shade(range(a, b), "#203040")
    for c in range(a, b):
        background[c] = "#203040"
    for colour in colours:
        lo = rng.integers(-1, steps, cols)
        hi = rng.integers(-1, steps, cols)
        grid.spans(0, lo, hi, colour)
        for c in range(cols):
            if lo[c] >= 0 and hi[c] >= 0:
                for s in range(min(lo[c], hi[c]), max(lo[c], hi[c]) + 1):
                    ref[s][c] = colour
        step = int(rng.integers(0, steps))
        grid.hline(step, colour, range(0, cols))           # under what is drawn
        for c in range(cols):
            if ref[step][c] is None:
                ref[step][c] = colour
    strips = grid.to_strips()
    expected = _reference_cells(ref, background, rows, cols)
    assert [_cells_of(s) for s in strips] == expected
    # runs of one style are one segment
    for strip in strips:
        styles = [seg.style for seg in strip]
        assert all(x != y for x, y in zip(styles, styles[1:], strict=False))


def test_plot_grid_single_span_and_over_rule():
    grid = PlotGrid(2, 3)                  # 4 half-cell steps
    grid.span(1, 3, 0, "#ff0000")          # whole column, ends given in either order
    grid.hline(0, "#00ff00", range(0, 3), over=True)
    text = [s.text for s in grid.to_strips()]
    assert text == [" \u2588 ", "\u2584\u2580\u2584"]


# -- line-by-line repaint ------------------------------------------------------------------

class _Lines(LinePanel):
    DEFAULT_CSS = "_Lines { height: 6; border: round white; }"

    def __init__(self):
        super().__init__()
        self.lines = [f"line {i}" for i in range(4)]

    def build(self, rows: int, cols: int) -> list[Strip]:
        return text_strips([[(t, "#c0c0c0")] for t in self.lines], rows, cols)


class _LinesApp(App[None]):
    def compose(self) -> ComposeResult:
        self.panel = _Lines()
        yield self.panel


@sync
async def test_line_panel_repaints_only_changed_lines(monkeypatch):
    app = _LinesApp()
    async with app.run_test(size=(30, 8)) as pilot:
        await pilot.pause()
        panel = app.panel
        asked: list[tuple] = []              # the repaints that reach Textual
        original = Widget.refresh

        def recording(self, *regions, **kwargs):
            if self is panel:
                asked.append(regions)
            return original(self, *regions, **kwargs)

        monkeypatch.setattr(Widget, "refresh", recording)
        panel.invalidate()                                 # nothing changed
        assert asked == []
        panel.set_titles(title="same")
        asked.clear()
        panel.set_titles(title="same")                     # unchanged title: no repaint
        assert asked == []
        panel.lines[2] = "line two, changed"
        panel.lines[3] = "line three, changed"
        panel.invalidate()
        assert [[(r.y, r.height) for r in regions] for regions in asked] == [[(2, 2)]]
        asked.clear()
        panel.set_titles(subtitle="new subtitle")          # one border row, not the panel
        assert len(asked) == 1 and len(asked[0]) == 1 and asked[0][0].height == 1
        await pilot.pause()
        text = screen_text(app)
        assert "line three, changed" in text and "new subtitle" in text and "same" in text


@pytest.mark.parametrize("size", [(80, 24), (160, 48)])
@sync
async def test_repainted_screen_equals_a_fresh_full_paint(size):
    """After many partial repaints (some under a modal) the screen is what a fresh
    dashboard draws at once."""
    live = FakeLiveSession()
    live.start()
    live.advance(5)
    app = DashboardApp(live, first_run_notice=False)
    async with app.run_test(size=size) as pilot:
        await pilot.pause(0.15)
        for step in range(8):
            live.advance(3)
            if step == 2:
                live.add_alert("clipping", "warning", "samples at the upper rail")
            if step == 3:
                await pilot.press("m")                # a modal over the panels ...
            if step == 5:
                await pilot.press("escape", "a")      # ... gone again; acknowledge
            await pilot.pause(0.15)
        assert app.trace.seq == live.snapshot().seq
        repainted = await painted_with(pilot, app, "q quit")
        await pilot.press("q")

    fresh = FakeLiveSession()
    fresh.start()
    fresh.advance(5 + 3 * 3)                      # as at step 2 above
    fresh.add_alert("clipping", "warning", "samples at the upper rail")
    fresh.acknowledge(1)
    fresh.advance(5 * 3)
    app = DashboardApp(fresh, first_run_notice=False)
    async with app.run_test(size=size) as pilot:
        await pilot.pause(0.15)
        painted = await painted_with(pilot, app, "q quit")
        await pilot.press("q")
    assert repainted == painted
