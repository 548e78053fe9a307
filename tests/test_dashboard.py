"""The dashboard: its pure helpers, and every key driven through Textual's Pilot.

Fed by the deterministic FakeLiveSession (tests/fake_session.py); the real simulated
bench is covered in tests/test_dashboard_bench.py.
"""

from __future__ import annotations

import asyncio
import os
import sys
from pathlib import Path

import numpy as np
import pytest
from dashboard_pilot import screen_text, sync
from fake_session import FakeLiveSession

from tankside.monitor.caution import caution_points
from tankside.monitor.dashboard.alerts import AlertList
from tankside.monitor.dashboard.app import DashboardApp
from tankside.monitor.dashboard.caution import CautionScreen
from tankside.monitor.dashboard.figures import sparkline
from tankside.monitor.dashboard.marknote import MarkNoteScreen
from tankside.monitor.dashboard.plotgrid import column_extents
from tankside.monitor.dashboard.spectrum import SpectrumView, narrowband_window_hz
from tankside.monitor.dashboard.units import in_display_unit
from tankside.monitor.dashboard.waveform import PressureTrace, pulse_window

DATA = Path(__file__).parent / "data"
SIZES = [(80, 24), (160, 48)]


def started_fake(**kwargs) -> FakeLiveSession:
    fake = FakeLiveSession(**kwargs)
    fake.start()
    fake.advance(20)
    return fake


# -- pure helpers -------------------------------------------------------------------

class TestColumnExtents:
    @pytest.mark.parametrize("n,ncols", [(1000, 80), (1001, 77), (80, 80), (12345, 158)])
    def test_matches_numpy_array_split(self, n, ncols):
        # reference: numpy.array_split bins, numpy min/max per bin
        y = np.random.default_rng(n).normal(size=n)
        mins, maxs = column_extents(y, ncols)
        chunks = np.array_split(y, ncols)
        np.testing.assert_array_equal(mins, [c.min() for c in chunks])
        np.testing.assert_array_equal(maxs, [c.max() for c in chunks])

    def test_single_sample_spike_survives(self):
        y = np.zeros(10_000)
        y[4321] = 5.0
        y[8765] = -7.0
        mins, maxs = column_extents(y, 60)
        assert maxs.max() == 5.0 and mins.min() == -7.0
        assert np.count_nonzero(maxs == 5.0) == 1

    def test_fewer_samples_than_columns_repeats_samples(self):
        mins, maxs = column_extents(np.array([1.0, 2.0, 3.0]), 6)
        np.testing.assert_array_equal(mins, [1, 1, 2, 2, 3, 3])
        np.testing.assert_array_equal(maxs, mins)

    def test_nan_samples_ignored_and_empty_input(self):
        mins, maxs = column_extents(np.array([np.nan, 1.0, np.nan, np.nan]), 2)
        assert mins[0] == 1.0 and np.isnan(mins[1]) and np.isnan(maxs[1])
        assert np.isnan(column_extents(np.zeros(0), 3)[0]).all()
        with pytest.raises(ValueError):
            column_extents(np.ones(4), 0)


class TestPulseWindow:
    def test_pads_the_pulse_by_its_length_each_side(self):
        y = np.zeros(1000)
        y[400:450] = np.hanning(50)        # the Hann window reaches 0.1 inside 400..449
        start, stop = pulse_window(y, min_samples=10)
        above = np.flatnonzero(np.abs(y) >= 0.1)
        length = above[-1] + 1 - above[0]
        assert (start, stop) == (above[0] - length, above[-1] + 1 + length)

    def test_minimum_length_and_edges(self):
        y = np.zeros(100)
        y[2] = 1.0
        assert pulse_window(y, min_samples=20) == (0, 20)
        y = np.zeros(100)
        y[98] = -1.0
        assert pulse_window(y, min_samples=20) == (80, 100)
        assert pulse_window(np.zeros(50)) == (0, 50)
        assert pulse_window(np.zeros(0)) == (0, 0)


def test_sparkline_spans_lowest_to_highest_level():
    line = sparkline(np.array([0.0, 1.0, 2.0, 3.0]), 4)
    assert line == "▁▃▆█"
    assert sparkline(np.array([2.0, 2.0]), 5) == "▄▄"
    assert sparkline(np.zeros(0), 5) == ""


def test_display_units_are_si_conversions():
    # SI arithmetic: 1 J/m^2 = 1e3 mJ / 1e4 cm^2 = 0.1 mJ/cm^2; 1 W/m^2 = 1e-4 W/cm^2
    assert in_display_unit("pulse_intensity_integral_j_per_m2", 1.0) == pytest.approx(0.1)
    assert in_display_unit("pulse_average_intensity_w_per_m2", 1.0e4) == pytest.approx(1.0)
    assert in_display_unit("peak_rarefactional_pa", 2.5e6) == pytest.approx(2.5)


def test_narrowband_window():
    # IEC 62127-1 narrowband condition window: f_awf/2 .. min(40 MHz, 8 f_awf)
    assert narrowband_window_hz(2e6) == (1e6, 16e6)
    assert narrowband_window_hz(10e6) == (5e6, 40e6)


# -- the app, key by key ----------------------------------------------------------------

@sync
async def test_caution_shown_first_and_dismissed_with_enter():
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=True)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        assert isinstance(app.screen, CautionScreen)
        text = screen_text(app)
        assert "hydrophone" in text
        # the whole box fits 80 x 24: its top and bottom borders, every point's first
        # and last words, the bench file's section name as written, and the key line
        rows = text.splitlines()
        assert len(rows) == 24 and max(len(row) for row in rows) <= 80
        assert sum(1 for row in rows if "━━━━━━━━━━" in row) == 2
        flat = " ".join(row.strip(" ┃") for row in rows)
        for point in caution_points("press d and confirm with y when you are ready"):
            words = point.split()
            assert " ".join(words[:3]) in flat and " ".join(words[-3:]) in flat, point
        assert "([stage.limits] in the bench" in flat and "press Enter to continue" in flat
        await pilot.press("q")            # the caution takes no other key
        assert isinstance(app.screen, CautionScreen) and fake.stops == []
        await pilot.press("enter")
        assert not isinstance(app.screen, CautionScreen)


@pytest.mark.parametrize("size", SIZES)
@sync
async def test_hold_freezes_plots_but_not_alerts(size):
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False, refresh_hz=20)
    async with app.run_test(size=size) as pilot:
        await pilot.pause(0.15)
        trace = app.query_one(PressureTrace)
        assert trace.seq == 20
        await pilot.press("space")
        fake.advance(5)
        fake.add_alert("trigger", "warning", "no trigger for 3 s")
        await pilot.pause(0.2)
        assert trace.seq == 20 and app.held
        assert "HELD" in screen_text(app)
        assert "no trigger for 3 s" in screen_text(app)      # alerts keep updating
        await pilot.press("space")
        await pilot.pause(0.15)
        assert trace.seq == 25 and not app.held


@pytest.mark.parametrize("size", SIZES)
@sync
async def test_mark_records_note_and_escape_cancels(size):
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=size) as pilot:
        await pilot.press("m")
        assert isinstance(app.screen, MarkNoteScreen)
        await pilot.press(*"moved to focus")
        await pilot.press("enter")
        await pilot.pause()
        assert fake.marks == ["moved to focus"]
        await pilot.press("m", "x", "escape")
        await pilot.pause()
        assert fake.marks == ["moved to focus"]
        assert not isinstance(app.screen, MarkNoteScreen)


@pytest.mark.parametrize("size", SIZES)
@sync
async def test_alerts_appear_and_acknowledge_one_then_all(size):
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=size) as pilot:
        first = fake.add_alert("clipping", "warning", "12 samples at the rail",
                               ("record", "auto-range"))
        second = fake.add_alert("instrument", "critical",
                                "digitiser: connection lost (reconnecting)", ("record", "bell"))
        third = fake.add_alert("range", "info", "range under-used")
        await pilot.pause(0.2)
        text = screen_text(app)
        assert "connection lost" in text and "auto-range" in text
        assert "3 open" in text
        await pilot.press("a")
        await pilot.pause(0.1)
        assert fake.acknowledged == [third]
        assert "2 open" in screen_text(app)
        await pilot.press("A")
        await pilot.pause(0.1)
        assert sorted(fake.acknowledged) == sorted([first, second, third])
        alerts = app.query_one(AlertList)
        assert all(a.acknowledged for a in alerts.alerts)
        assert screen_text(app).count("✓") == 3
        await pilot.press("a")            # nothing open: nothing sent
        assert len(fake.acknowledged) == 3


@pytest.mark.parametrize("size", SIZES)
@sync
async def test_method_key_cycles_through_the_three_methods(size):
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=size) as pilot:
        # each switch takes a second press (one stray key never changes the method)
        await pilot.press("c")
        await pilot.pause(0.1)
        assert fake.methods == []
        await pilot.press("c", "c", "c", "c", "c")
        assert fake.methods == ["deconvolve", "narrowband", "auto"]
        await pilot.press("c", "c")
        await pilot.pause(0.1)
        assert "method deconvolve" in screen_text(app)


@sync
async def test_rejected_method_shows_as_notice_not_traceback(monkeypatch):
    fake = started_fake()

    def refuse(method):
        raise ValueError("conversion method cannot change while stopping")

    monkeypatch.setattr(fake, "set_method", refuse)
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("c", "c")
        await pilot.pause()
        assert app.method_requested == "auto"
        assert app.is_running


@pytest.mark.parametrize("size", SIZES)
@sync
async def test_scale_key_toggles_db_and_linear(size):
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=size) as pilot:
        await pilot.pause(0.1)
        spectrum = app.query_one(SpectrumView)
        assert not spectrum.linear and "spectrum · dB" in screen_text(app)
        await pilot.press("l")
        await pilot.pause()
        assert spectrum.linear and "spectrum · linear" in screen_text(app)
        await pilot.press("l")
        assert not spectrum.linear


@sync
async def test_zoom_key_switches_pulse_and_whole_record():
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.1)
        assert app.trace.zoomed and "pulse" in str(app.trace.border_subtitle)
        await pilot.press("z")
        await pilot.pause()
        assert not app.trace.zoomed
        assert "record 0.00–8.00 µs" in screen_text(app)   # 2000 samples at 4 ns


@sync
async def test_save_writes_screenshot_and_trace_csvs(tmp_path):
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False, capture_dir=tmp_path / "snaps")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.1)
        await pilot.press("s")
        await pilot.pause()
        snap = app.shown
    names = sorted(p.name for p in (tmp_path / "snaps").iterdir())
    assert len(names) == 3 and [n for n in names if n.endswith(".svg")]
    assert {p.name for p in app.saved} == set(names)
    volt = next((tmp_path / "snaps").glob("*-voltage.csv"))
    assert volt.read_text().splitlines()[0] == "time_s,voltage_v"
    data = np.loadtxt(volt, delimiter=",", skiprows=1)
    np.testing.assert_allclose(data[:, 0], snap.times_s, rtol=1e-8)
    np.testing.assert_allclose(data[:, 1], snap.voltage_v, rtol=1e-8, atol=1e-18)
    pres = np.loadtxt(next((tmp_path / "snaps").glob("*-pressure.csv")), delimiter=",",
                      skiprows=1)
    np.testing.assert_allclose(pres[:, 1], snap.pressure_pa, rtol=1e-8)
    svg = next((tmp_path / "snaps").glob("*.svg")).read_text()
    assert svg.startswith("<svg") and "running" in svg


@pytest.mark.parametrize("size", SIZES)
@sync
async def test_q_stops_the_session_and_leaves(size):
    fake = started_fake(auto_advance=True)
    app = DashboardApp(fake, first_run_notice=False)
    before = sys.getswitchinterval()
    async with app.run_test(size=size) as pilot:
        await pilot.pause(0.1)
        assert sys.getswitchinterval() <= 0.001      # the display yields the GIL sooner
        await pilot.press("q")                       # one press only asks
        await pilot.pause(0.1)
        assert app.is_running and fake.stops == []
        await pilot.press("q")
        await pilot.pause()
        assert not app.is_running
    assert fake.stops == ["operator"] and not fake.running
    assert sys.getswitchinterval() == before


@sync
async def test_stopped_session_says_why():
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        fake.stop("rule pressure-limit: safe-off")
        await pilot.pause(0.2)
        assert "stopped: rule pressure-limit" in screen_text(app)


@sync
async def test_empty_snapshot_draws_without_data():
    fake = FakeLiveSession()          # not started: an empty Snapshot, as at start-up
    fake._snap = type(fake._snap)()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.1)
        text = screen_text(app)
        assert "waiting for the first trace" in text
        assert "no alerts" in text


def test_run_dashboard_stops_session_and_returns_exit_code(monkeypatch):
    from tankside.monitor.dashboard import app as app_module

    fake = started_fake()
    fake.exit_code = 3
    monkeypatch.setattr(app_module.DashboardApp, "run", lambda self: None)
    assert app_module.run_dashboard(fake, first_run_notice=False) == 3
    assert fake.stops == ["operator"]


@pytest.mark.parametrize("size", SIZES)
@sync
async def test_layout_matches_stored_screen(size):
    """The whole screen with deterministic data, against a reviewed text capture.

    Regenerate after a deliberate layout change with TANKSIDE_UPDATE_SCREENS=1.
    """
    fake = started_fake()
    fake.add_alert("clipping", "warning", "12 samples at the upper rail", ("record", "auto-range"))
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=size) as pilot:
        for _ in range(40):           # the footer fills in a moment after mount
            await pilot.pause(0.05)
            text = screen_text(app)
            if "q quit" in text:
                break
    stored = DATA / f"dashboard_{size[0]}x{size[1]}.txt"
    if os.environ.get("TANKSIDE_UPDATE_SCREENS"):
        stored.write_text(text, encoding="utf-8")
    assert text == stored.read_text(encoding="utf-8")
    lines = text.splitlines()
    assert len(lines) == size[1] and max(len(line) for line in lines) <= size[0]


# -- the app on the real live session and the simulated bench (loopback) ---------------

@pytest.fixture
def quick_keys(monkeypatch):
    """Pilot waits for the process to go idle after each key, up to 1 s; with the live
    bench's threads busy it never does, so every key would cost the full second."""
    async def settle(min_sleep: float = 0.0, max_sleep: float = 1.0) -> None:
        await asyncio.sleep(0.02)

    import textual.app
    import textual.pilot

    monkeypatch.setattr(textual.app, "wait_for_idle", settle)
    monkeypatch.setattr(textual.pilot, "wait_for_idle", settle)


@pytest.fixture
def live(tmp_path, quick_keys):
    from tankside.monitor.live.benchfile import load_bench
    from tankside.monitor.live.session import LiveSession
    from tankside.simulators.bench import SimulatedBench

    with SimulatedBench(seed=5, trigger_period_s=0.02) as bench:
        path = bench.write_bench_file(tmp_path / "bench.toml",
                                      session_folder=str(tmp_path / "sessions"))
        session = LiveSession.from_bench(load_bench(path, {}), drive_on_at_start="test operator")
        session.start()
        try:
            yield bench, session
        finally:
            if session.running:
                session.stop("test teardown")
            session.wait(20)


async def _until(pilot, condition, timeout_s: float = 10.0) -> None:
    for _ in range(int(timeout_s / 0.05)):
        if condition():
            return
        await asyncio.sleep(0.05)
    raise AssertionError("condition not reached in time")


@sync
async def test_live_bench_keys_reach_the_session_and_its_file(live, tmp_path):
    from tankside.monitor.record.store import SessionReader

    bench, session = live
    app = DashboardApp(session, first_run_notice=False, capture_dir=tmp_path / "snaps")
    async with app.run_test(size=(80, 24)) as pilot:
        await _until(pilot, lambda: app.shown is not None and app.shown.pressure_pa.size > 0)
        assert "SIMDIG" in screen_text(app)
        # hold: the trace stays while the session goes on acquiring
        await pilot.press("space")
        held_seq = app.trace.seq
        await _until(pilot, lambda: session.snapshot().seq >= held_seq + 5)
        assert app.trace.seq == held_seq
        await pilot.press("space")
        await _until(pilot, lambda: app.trace.seq > held_seq)
        await pilot.press("m", *"at focus", "enter")
        await pilot.press("c", "c")             # auto -> deconvolve, confirmed
        await _until(pilot, lambda: app.latest.method == "deconvolve")
        await pilot.press("l", "s")
        await pilot.pause(0.1)
        # an instrument failure shows as an alert on screen, not as a traceback
        bench.faults.drop_connection()
        await _until(pilot, lambda: any(a.rule == "instrument-fault" for a in app.latest.alerts))
        assert "instrument-fault" in screen_text(app)
        await pilot.pause(0.1)
        pending = {a.alert_id for a in app.latest.alerts if not a.acknowledged}
        await pilot.press("A")
        await _until(pilot, lambda: all(a.acknowledged for a in app.latest.alerts
                                        if a.alert_id in pending))
        await pilot.press("q", "q")
        await pilot.pause()
        assert not app.is_running
    assert session.wait(20) and session.exit_code == 0
    assert app.spectrum.linear
    volt = next((tmp_path / "snaps").glob("*-voltage.csv"))
    assert volt.read_text().splitlines()[0] == "time_s,voltage_v"
    with SessionReader(session.session_path) as reader:
        events = reader.events()
        assert [e["detail"]["note"] for e in events if e["kind"] == "mark"] == ["at focus"]
        assert any(e["kind"] == "method-change" and e["detail"]["to"] == "deconvolve"
                   for e in events)
        recorded = [a for a in reader.alerts() if a["rule"] == "instrument-fault"]
        assert recorded and all(a["acknowledged_time_s"] is not None for a in recorded)
        assert reader.stop["exit_status"] == "operator"


@sync
async def test_live_bench_layout_at_160x48(live):
    bench, session = live
    app = DashboardApp(session, first_run_notice=False)
    async with app.run_test(size=(160, 48)) as pilot:
        await _until(pilot, lambda: app.shown is not None and app.shown.pressure_pa.size > 0
                     and app.latest.traces_per_s > 0)
        await pilot.pause(0.1)
        text = screen_text(app)
        assert "narrowband PASS" in text or "narrowband FAIL" in text
        assert "TANKSIDE,SIMDIG" in text          # full identity when wide
        assert "session-" in text and ".db" in text
        await pilot.press("q", "q")
    assert session.wait(20)


@sync
async def test_figures_panel_flags_a_doubtful_last_trace():
    import dataclasses

    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.1)
        assert "doubtful" not in screen_text(app)
        fake._snap = dataclasses.replace(fake._snap, seq=fake._snap.seq + 1,
                                         last_warnings=("low_snr",), doubtful_traces=1)
        await pilot.pause(0.3)
        assert "last doubtful: low_snr" in screen_text(app)
