"""The scan map panel, its texts and the headless scan status.

Scan views are built by hand (tests/scan_samples.py: an invented Gaussian beam, values
invented). Positions on screen are read back from the drawn characters and colours,
not from the panel's own geometry, wherever the check allows it.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
from dashboard_pilot import painted_with, screen_text, sync
from fake_session import FakeLiveSession
from scan_samples import PEAK_PA, line_view, points_view, raster_view
from textual.app import App, ComposeResult

from tankside.monitor.dashboard.app import DashboardApp
from tankside.monitor.dashboard.scanmap import PARAMETERS, ScanMap, gridded
from tankside.monitor.dashboard.scanplot import (
    CURRENT_GLYPH,
    DB_FLOOR,
    FAILED_GLYPH,
    MAX_GLYPH,
    RAMP,
    PixelAxis,
    shown_values,
)
from tankside.monitor.dashboard.scantext import beam_text, mm_text
from tankside.monitor.dashboard.spectrum import SpectrumView
from tankside.monitor.dashboard.units import countdown
from tankside.monitor.headless import scan_status, status_line
from tankside.monitor.live.snapshot import ScanView, Snapshot
from tankside.monitor.record.scanpoints import plan_grid

XS = np.arange(-4.0, 4.5, 1.0)        # 9 columns, mm
YS = np.arange(-2.0, 2.5, 1.0)        # 5 rows, mm


class MapApp(App[None]):
    """The panel alone, borderless: its content is the whole terminal."""

    CSS = "ScanMap { height: 100%; width: 100%; }"

    def __init__(self, view):
        super().__init__()
        self.view = view

    def compose(self) -> ComposeResult:
        self.panel = ScanMap()
        yield self.panel

    def on_mount(self) -> None:
        self.panel.show(self.view)


def _cells(panel: ScanMap) -> list[list[tuple[str, str | None, str | None]]]:
    """(character, foreground, background) of every content cell."""
    size = panel.content_size
    out = []
    for y in range(size.height):
        row = []
        for seg in panel.render_line(y):
            fg = seg.style.color.name if seg.style and seg.style.color else None
            bg = seg.style.bgcolor.name if seg.style and seg.style.bgcolor else None
            row.extend((ch, fg, bg) for ch in seg.text)
        out.append(row)
    return out


def _find(cells, glyph: str) -> list[tuple[int, int]]:
    return [(r, c) for r, row in enumerate(cells) for c, cell in enumerate(row)
            if cell[0] == glyph]


def _heat_extent(cells) -> tuple[int, int, int, int]:
    """Rows r0..r1 and columns c0..c1 (inclusive) of the heat map: the first run of
    columns from the left holding ramp colours (the colour bar lies apart, right)."""
    ramp = set(RAMP)
    coloured = {(r, c) for r, row in enumerate(cells) for c, (_, fg, bg) in enumerate(row)
                if fg in ramp or bg in ramp}
    cols = sorted({c for _, c in coloured})
    c0 = cols[0]
    c1 = c0
    while c1 + 1 in cols:
        c1 += 1
    rows = sorted({r for r, c in coloured if c0 <= c <= c1})
    return rows[0], rows[-1], c0, c1


def _gaussian_grid(view) -> np.ndarray:
    """p_r on the (x, y) grid, from numpy's meshgrid of the same Gaussian (ij indexing)."""
    gx, gy = np.meshgrid(XS, YS, indexing="ij")
    return PEAK_PA * np.exp(-((gx - 1.0) ** 2 + (gy + 1.0) ** 2) / (2.0 * 2.0 ** 2))


async def _drawn(view, size=(60, 12)):
    app = MapApp(view)
    async with app.run_test(size=size) as pilot:
        await pilot.pause()
        return app.panel, _cells(app.panel), app.panel.text_lines()


# -- the heat map --------------------------------------------------------------------

class TestHeatMap:
    # 60 x 12: 11 rows of map = 22 half-rows, 4 per grid row of 5 (whole character rows)
    @sync
    async def test_maximum_and_current_point_at_their_cells(self):
        done = 31                                     # the current point: index 31
        view = raster_view(XS, YS, done=done)
        panel, cells, _ = await _drawn(view)
        r0, r1, c0, c1 = _heat_extent(cells)
        nx, ny = XS.size, YS.size

        def cell_of(r: int, c: int) -> tuple[int, int]:
            return (c - c0) * nx // (c1 - c0 + 1), (r1 - r) * ny // (r1 - r0 + 1)

        expected = np.unravel_index(np.argmax(_gaussian_grid(view)), (nx, ny))
        ((mr, mc),) = _find(cells, MAX_GLYPH)
        assert cell_of(mr, mc) == tuple(int(k) for k in expected) == (5, 1)
        # the hottest colour of the ramp under the maximum's glyph
        assert cells[mr][mc][2] == RAMP[-1]
        ((cr, cc),) = _find(cells, CURRENT_GLYPH)
        assert cell_of(cr, cc) == (done % nx, done // nx)
        assert cells[cr][cc][2] is None               # being measured: no value yet
        # the panel's own geometry agrees with what is drawn
        assert panel.cell_at(mr, mc) == (5, 1)

    @sync
    async def test_serpentine_raster_on_the_plan_grid(self):
        # the grid as the scan's plan gives it (record.scanpoints.plan_grid), rows
        # alternating in direction; the field is the same invented Gaussian
        targets = [{"x": float(x), "y": float(y), "z": 40.0}
                   for j, y in enumerate(YS) for x in (XS if j % 2 == 0 else XS[::-1])]
        grid = plan_grid(targets)
        assert grid is not None and grid.axes == ("x", "y")
        t = np.array([[p["x"], p["y"], p["z"]] for p in targets])
        p_r = PEAK_PA * np.exp(-((t[:, 0] - 1.0) ** 2 + (t[:, 1] + 1.0) ** 2) / 8.0)
        view = ScanView(kind="raster", total=len(targets), completed=len(targets) - 1,
                        current=len(targets) - 1, phase="acquiring", targets_mm=t,
                        target_axes=("x", "y", "z"), grid_axes=grid.axes,
                        grid_coords_mm=grid.coords_mm, grid_index=grid.index,
                        values={"peak_rarefactional_pa": np.where(
                            np.arange(len(targets)) < len(targets) - 1, p_r, np.nan)},
                        failed=np.zeros(len(targets), dtype=bool))
        _, cells, _ = await _drawn(view)
        r0, r1, c0, c1 = _heat_extent(cells)

        def cell_of(r: int, c: int) -> tuple[int, int]:
            return (c - c0) * XS.size // (c1 - c0 + 1), (r1 - r) * YS.size // (r1 - r0 + 1)

        ((mr, mc),) = _find(cells, MAX_GLYPH)
        assert cell_of(mr, mc) == (5, 1)
        ((cr, cc),) = _find(cells, CURRENT_GLYPH)
        assert cell_of(cr, cc) == (XS.size - 1, YS.size - 1)   # the last row runs to +x

    @sync
    async def test_cells_not_done_are_blank(self):
        view = raster_view(XS, YS, done=18)           # rows y=-2 and y=-1 done
        _, cells, _ = await _drawn(view)
        r0, r1, c0, c1 = _heat_extent(cells)
        # the heat map's height is that of the rows done: 2 of 5 grid rows, 2 text rows each
        assert r1 - r0 + 1 == 4
        (cr, _), = _find(cells, CURRENT_GLYPH)
        ramp = set(RAMP)
        above = [cells[r][c] for r in range(0, cr) for c in range(c0, c1 + 1)]
        assert above and all(ch == " " and fg not in ramp and bg not in ramp
                             for ch, fg, bg in above)

    @sync
    async def test_before_the_first_point_only_the_current_one(self):
        view = raster_view(XS, YS, done=0, phase="waiting", why="drive off",
                           time_left_s=math.nan)
        panel, cells, lines = await _drawn(view)
        assert not _find(cells, MAX_GLYPH) and len(_find(cells, CURRENT_GLYPH)) == 1
        assert not {fg for row in cells for _, fg, _ in row} & set(RAMP)   # no colours yet
        assert "waiting: drive off" in str(panel.border_title)
        assert "point 1/45" in str(panel.border_title) and "left" not in str(
            panel.border_title)

    @sync
    async def test_failed_point_has_its_own_glyph(self):
        view = raster_view(XS, YS, done=30, failed=(12,))
        _, cells, _ = await _drawn(view)
        r0, r1, c0, c1 = _heat_extent(cells)
        ((fr, fc),) = _find(cells, FAILED_GLYPH)
        assert ((fc - c0) * XS.size // (c1 - c0 + 1), (r1 - fr) * YS.size // (r1 - r0 + 1)) \
            == (12 % XS.size, 12 // XS.size)

    @sync
    async def test_tick_labels_are_the_grid_coordinates_under_their_cells(self):
        xs, ys = np.arange(-10.0, 10.5, 2.5), np.array([-3.0, -1.5, 0.0, 1.5, 3.0])
        view = raster_view(xs, ys)
        _, cells, lines = await _drawn(view)
        r0, r1, c0, c1 = _heat_extent(cells)
        ticks = [(m.start(), m.group()) for m in re.finditer(r"-?\d+(\.\d+)?", lines[-1])]
        values = [float(t) for _, t in ticks]
        assert values[0] == xs[0] and values[-1] == xs[-1] and len(values) >= 5
        width = (c1 - c0 + 1) / xs.size
        for start, text in ticks:
            i = int(np.flatnonzero(np.isclose(xs, float(text)))[0])   # a grid coordinate
            centre = start + (len(text) - 1) // 2
            assert c0 + i * width <= centre < c0 + (i + 1) * width, text
        # y: the labels left of the map, each on a row of its cell
        found = {}
        for r in range(r0, r1 + 1):
            m = re.match(r"\s*(-?\d+(\.\d+)?)\s", lines[r][:c0] + " ")
            if m:
                found[r] = float(m.group(1))
        # the lowest and highest cells' labels, each on a row of its cell
        assert found[max(found)] == ys[0] and found[min(found)] == ys[-1]
        for r, y in found.items():
            j = (r1 - r) * ys.size // (r1 - r0 + 1)
            assert ys[j] == y
        assert "mm" in lines[-1] and re.search(r"\bx\b", lines[-1])

    @sync
    async def test_colour_scale_ends_and_units(self):
        # p_r 1.2e6 Pa is 1.2 MPa; I_pa 1.44e4 W/m^2 is 1.44 W/cm^2 (1 W/cm^2 = 1e4 W/m^2, SI)
        view = raster_view(XS, YS)
        app = MapApp(view)
        async with app.run_test(size=(60, 12)) as pilot:
            await pilot.pause()
            panel = app.panel
            labels = _bar_labels(panel.text_lines())
            assert float(labels[0]) == pytest.approx(1.2)
            assert labels[1] == "MPa" and labels[-1] == "0"
            assert "1.20 MPa" in str(panel.border_subtitle)
            while panel.parameter != "pulse_average_intensity_w_per_m2":
                panel.cycle_parameter()
            await pilot.pause()
            text = "\n".join(panel.text_lines())
            assert "1.44" in text and "W/cm²" in text
            assert "I_pa" in str(panel.border_title)

    @sync
    async def test_db_scale_puts_the_maximum_at_0_db(self):
        view = raster_view(XS, YS)
        app = MapApp(view)
        async with app.run_test(size=(60, 12)) as pilot:
            await pilot.pause()
            app.panel.set_db(True)
            await pilot.pause()
            labels = _bar_labels(app.panel.text_lines())
            assert labels == ["0", "dB", f"{DB_FLOOR:.0f}"]
            assert "(0.0 dB)" in str(app.panel.border_subtitle)
            assert " dB " in f" {app.panel.border_title} "
            cells = _cells(app.panel)
            ((mr, mc),) = _find(cells, MAX_GLYPH) or [(None, None)]
            assert cells[mr][mc][2] == RAMP[-1]

    @sync
    async def test_volume_shows_the_current_level(self):
        zs = np.array([30.0, 35.0, 40.0])
        view = raster_view(XS, YS, done=XS.size * YS.size + 20, zs=zs)   # 2 rows of z=35
        panel, cells, lines = await _drawn(view, size=(60, 14))
        assert lines[0].startswith("slice z 35 mm (2/3)")
        ((mr, mc),) = _find(cells, MAX_GLYPH)
        assert panel.cell_at(mr, mc) == (5, 1)        # the slice's own maximum
        assert "slice max" in str(panel.border_subtitle)

    def test_decimated_axis_keeps_the_largest_of_its_cells(self):
        # reference: the largest value of each bin, bins of numpy.floor(p * n / pixels)
        rng = np.random.default_rng(3)
        values = rng.normal(size=(203, 4))
        values[rng.random(values.shape) < 0.2] = np.nan
        axis = PixelAxis(203, 37)
        out = axis.reduce(values, 0)
        edges = (np.arange(38) * 203) // 37
        for p in range(37):
            block = values[edges[p]:edges[p + 1]]
            ref = np.where(np.isnan(block).all(axis=0), np.nan,
                           np.nanmax(np.where(np.isnan(block), -np.inf, block), axis=0))
            np.testing.assert_array_equal(out[p], ref)
        assert axis.pixel_of(202) == (36, 37) and axis.cell_of(0) == 0


def _bar_labels(lines: list[str]) -> list[str]:
    """The colour bar's labels, top to bottom (the panel's last few columns)."""
    texts = [re.sub("[▀▄█]", "", line[-8:]).strip() for line in lines[:-1]]
    return [t for t in texts if t]


# -- values and texts -----------------------------------------------------------------

class TestShownValues:
    def test_db_is_20_log10_for_pressure_and_10_log10_for_intensity(self):
        # definitions of the decibel for an amplitude and a power quantity (IEC 60027-3)
        v = np.array([1.0, 0.5, 0.1, np.nan, 0.0])
        p, scale = shown_values(v * 1e6, 1e-6, "MPa", db=True, power_like=False)
        np.testing.assert_allclose(p[:3], 20 * np.log10([1.0, 0.5, 0.1]))
        assert np.isnan(p[3]) and p[4] == DB_FLOOR and scale is not None
        assert (scale.lo, scale.hi, scale.unit) == (DB_FLOOR, 0.0, "dB")
        i, _ = shown_values(v ** 2, 1.0, "W/cm²", db=True, power_like=True)
        # intensity goes as pressure squared: the same field gives the same dB
        np.testing.assert_allclose(i[:3], p[:3])

    def test_linear_scale_from_zero_to_the_largest(self):
        shown, scale = shown_values(np.array([1.2e6, 0.3e6, np.nan]), 1e-6, "MPa",
                                    db=False, power_like=False)
        np.testing.assert_allclose(shown[:2], [1.2, 0.3])
        assert scale is not None and (scale.lo, scale.hi) == (0.0, pytest.approx(1.2))
        assert shown_values(np.full(3, np.nan), 1.0, "", db=False, power_like=False)[1] is None

    def test_mm_text_and_countdown(self):
        assert [mm_text(v) for v in (-10.0, 2.5, 0.25, -0.001, 12.125)] == [
            "-10", "2.5", "0.25", "0", "12.12"]
        assert countdown(83.0) == "1:23" and countdown(3725.0) == "1:02:05"
        assert countdown(math.nan) == "" and countdown(0.2) == "0:01"

    def test_beam_line_from_the_beam_figures(self):
        beam = {"scanned_axes": ["x", "y"],
                "maximum": {"position_mm": {"x": 1.02, "y": -0.98, "z": 40.0}},
                "widths": [{"axis": "x", "level_db": -6.0, "width_mm": 4.71},
                           {"axis": "y", "level_db": -6.0, "width_mm": 4.7},
                           {"axis": "x", "level_db": -3.0, "width_mm": 3.3},
                           {"axis": "y", "level_db": -6.0, "width_mm": None}],
                "axial": {"mechanical_index": 0.618, "depth_of_max_mm": 41.5}}
        assert beam_text(beam) == ("beam max at x 1.02 y -0.98 · -6 dB x 4.71 y 4.7 mm"
                                   " · MI 0.62 at 41.5 mm")
        assert beam_text({}) == "" and beam_text({"maximum": "?", "widths": 3}) == ""
        assert beam_text({"error": "ValueError: one point"}) == \
            "beam figures not had: ValueError: one point"

    def test_gridded_puts_each_value_in_its_cell(self):
        view = raster_view(XS, YS)
        np.testing.assert_allclose(gridded(view, view.values["peak_rarefactional_pa"]),
                                   _gaussian_grid(view))


# -- the line plot and the list --------------------------------------------------------

class TestLineAndList:
    @sync
    async def test_line_plot_of_one_axis(self):
        xs = np.arange(-10.0, 10.5, 1.0)
        view = line_view(xs, done=15, failed=(3,))
        panel, cells, lines = await _drawn(view, size=(64, 10))
        ((mr, mc),) = _find(cells, MAX_GLYPH)
        assert mr == 0                                # the largest value at the top
        ticks = {m.group(): m.start() for m in re.finditer(r"-?\d+", lines[-1])}
        assert ticks["2"] == mc                       # above the tick of x = 2 mm
        ((fr, fc),) = _find(cells, FAILED_GLYPH)
        assert fr == len(lines) - 2 and fc == panel.point_columns[3]
        ((cr, cc),) = _find(cells, CURRENT_GLYPH)
        assert cc == panel.point_columns[15] and cr == len(lines) - 2
        # nothing drawn over the points not done (right of the current point)
        assert all(ch == " " for row in lines[:-2] for ch in row[cc + 1:])
        assert lines[0].startswith("1.20") and "MPa" in "".join(lines)

    @sync
    async def test_points_with_no_grid_are_listed_newest_first(self):
        targets = np.array([[0.0, 0.0, 30.0], [1.0, 0.0, 30.0], [0.0, 2.0, 31.0],
                            [3.0, 1.0, 29.0], [-1.0, -1.0, 30.0]])
        view = points_view(targets, done=3)
        _, _, lines = await _drawn(view, size=(60, 8))
        assert "x mm" in lines[0] and "p_r MPa" in lines[0]
        assert lines[1].startswith(CURRENT_GLYPH) and "measuring" in lines[1]
        numbers = [int(re.match(r"^.\s*(\d+)", line).group(1)) for line in lines[1:5]]
        assert numbers == [4, 3, 2, 1]
        assert lines[4].startswith(MAX_GLYPH)         # the point at the origin is the peak


# -- in the dashboard ------------------------------------------------------------------

def _scan_fake(view) -> FakeLiveSession:
    fake = FakeLiveSession()
    fake.start()
    fake.scan = view
    fake.advance(5)
    return fake


@pytest.mark.parametrize("size", [(80, 24), (120, 40)])
@sync
async def test_dashboard_shows_the_map_in_the_spectrum_place(size):
    view = raster_view(XS, YS, done=20, failed=(4,), phase="paused", why="stage lost",
                       beam={"maximum": {"position_mm": {"x": 1.0, "y": -1.0}}})
    app = DashboardApp(_scan_fake(view), first_run_notice=False)
    async with app.run_test(size=size) as pilot:
        await pilot.pause(0.2)
        text = await painted_with(pilot, app, "q quit")
        lines = text.splitlines()
        assert len(lines) == size[1] and max(len(line) for line in lines) <= size[0]
        assert app.map_shown and app.scan_map.display and not app.spectrum.display
        assert "spectrum" not in text
        assert "pressure trace" in text and "alerts" in text and "running figures" in text
        assert MAX_GLYPH in text and CURRENT_GLYPH in text and FAILED_GLYPH in text
        assert "21/45" in text and "paused" in text
        assert "beam max at x 1 y -1" in text
        assert "q quit" in text


@sync
async def test_keys_switch_the_map_parameter_and_scale():
    app = DashboardApp(_scan_fake(raster_view(XS, YS, done=30)), first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.2)
        spectrum = app.query_one(SpectrumView)
        assert app.scan_map.parameter == PARAMETERS[0] and "p_r lin" in screen_text(app)
        await pilot.press("p")
        await pilot.pause()
        assert app.scan_map.parameter == "peak_compressional_pa"
        assert "p_c lin" in screen_text(app) and "1.56" in screen_text(app)   # 1.3 x 1.2 MPa
        await pilot.press("p", "p", "p", "p")
        await pilot.pause()
        assert app.scan_map.parameter == PARAMETERS[0]
        await pilot.press("l")
        await pilot.pause()
        assert app.scan_map.db and not spectrum.linear   # the spectrum is out of view
        assert "p_r dB" in screen_text(app)
        await pilot.press("l")
        assert not app.scan_map.db


@sync
async def test_without_a_scan_no_map_and_l_is_the_spectrum_scale():
    fake = FakeLiveSession()
    fake.start()
    fake.advance(5)
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.2)
        assert not app.map_shown and not app.scan_map.display
        await pilot.press("l", "p")
        await pilot.pause()
        assert app.spectrum.linear and app.scan_map.parameter == PARAMETERS[0]
        # the scan starts: the map comes in
        fake.scan = raster_view(XS, YS, done=3)
        fake.advance()
        await pilot.pause(0.3)
        assert app.map_shown and "spectrum" not in screen_text(app)


@sync
async def test_hold_freezes_the_map_and_a_scan_starting_under_a_dialog_shows_it():
    fake = FakeLiveSession()
    fake.start()
    fake.advance(5)
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.2)
        await pilot.press("e")                   # the event log on top
        await pilot.pause()
        fake.scan = raster_view(XS, YS, done=3)
        fake.advance()
        await pilot.pause(0.3)
        await pilot.press("escape")
        await pilot.pause()
        assert app.map_shown and "3/45" not in screen_text(app) and "4/45" in screen_text(app)
        await pilot.press("space")               # hold
        fake.scan = raster_view(XS, YS, done=10)
        fake.advance()
        await pilot.pause(0.3)
        assert "4/45" in screen_text(app) and "11/45" not in screen_text(app)
        await pilot.press("space")
        await pilot.pause(0.2)
        assert "11/45" in screen_text(app)


# -- headless -------------------------------------------------------------------------

def test_headless_line_gives_point_position_and_progress():
    view = raster_view(XS, YS, done=36, time_left_s=83.0)
    # point 37 of 9 x 5 (x fastest): x index 0, y index 4
    assert scan_status(Snapshot(scan=view)) == " | pt 37/45 x -4 y 2 mm 80% 1:23 left"
    paused = raster_view(XS, YS, done=36, phase="paused", why="stage lost",
                         time_left_s=math.nan)
    assert scan_status(Snapshot(scan=paused)).endswith("80% paused: stage lost")
    line = status_line(Snapshot(scan=view))
    assert line.endswith(" | pt 37/45 x -4 y 2 mm 80% 1:23 left")
    assert scan_status(Snapshot()) == "" and "pt " not in status_line(Snapshot())
