"""The dashboard tells the truth about what it shows: no pulse, drive off, stale figures.

Fed by the deterministic FakeLiveSession (tests/fake_session.py); a snapshot is changed
by hand to the state under test, as the live session would publish it.
"""

from __future__ import annotations

import dataclasses
import re
import time

import numpy as np
from dashboard_pilot import screen_text, sync
from fake_session import FakeLiveSession

from tankside.monitor.dashboard.alerts import AlertList, wrap_pieces
from tankside.monitor.dashboard.app import DashboardApp
from tankside.monitor.dashboard.eventlog import EventLogScreen
from tankside.monitor.dashboard.spectrum import SpectrumView
from tankside.monitor.dashboard.units import wall_time
from tankside.monitor.dashboard.waveform import PressureTrace
from tankside.monitor.live.processing import figures_left_out
from tankside.monitor.live.snapshot import EventView
from tankside.monitor.live.views import event_text


def started_fake() -> FakeLiveSession:
    fake = FakeLiveSession()
    fake.start()
    fake.advance(20)
    return fake


def noise_snapshot(fake: FakeLiveSession, **fields):
    """The fake's snapshot turned into one of a trace of noise (invented, seeded)."""
    snap = fake._snap
    noise_v = np.random.default_rng(3).normal(scale=2e-3, size=snap.times_s.size)
    return dataclasses.replace(snap, seq=snap.seq + 1, voltage_v=noise_v,
                               pulse_present=False, **fields)


@sync
async def test_spectrum_gives_no_narrowband_verdict_without_a_pulse():
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.1)
        spectrum = app.query_one(SpectrumView)
        assert "PASS" in spectrum.verdict()       # the fake's pulse passes the check
        # a noise trace that converted, with the check's numbers of noise
        fake._snap = noise_snapshot(fake, narrowband_ok=True)
        await pilot.pause(0.3)
        text = screen_text(app)
        assert "PASS" not in text and "FAIL" not in text
        assert "no narrowband verdict: no pulse" in text
        fake._snap = noise_snapshot(fake, narrowband_ok=False, drive_on=False)
        await pilot.pause(0.3)
        assert spectrum.verdict() == "no narrowband verdict: drive off"


@sync
async def test_trace_panel_shows_noise_traces_and_says_why():
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.1)
        trace = app.query_one(PressureTrace)
        # drive off: the noise did not convert (no pressure), the volts still arrive
        fake._snap = noise_snapshot(fake, drive_on=False, pressure_pa=np.zeros(0),
                                    result={})
        await pilot.pause(0.3)
        text = screen_text(app)
        assert "waiting for" not in text
        assert "drive off: noise only" in text
        assert " mV" in "\n".join(trace.text_lines())
        assert "voltage trace" in text and f"drive off, noise only  #{fake._snap.seq}" in text
        # drive on, no pulse; the noise converted: drawn in pressure, no p_c/p_r marked
        fake._snap = noise_snapshot(fake, drive_on=True,
                                    pressure_pa=fake._snap.voltage_v / 50e-9)
        await pilot.pause(0.3)
        lines = "\n".join(trace.text_lines())
        assert "no pulse: noise only" in lines and "MPa" in lines
        assert "p_c" not in lines and "p_r" not in lines
        # the unconverted noise trace has no spectrum either, and the panel says why
        fake._snap = noise_snapshot(fake, drive_on=False, pressure_pa=np.zeros(0), result={},
                                    freqs_hz=np.zeros(0), spectrum_db=np.zeros(0))
        await pilot.pause(0.3)
        assert "drive off: no spectrum" in screen_text(app)


@sync
async def test_banner_and_figures_do_not_read_as_running_well_on_noise():
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.1)
        text = screen_text(app)
        assert "● running " in text and "STALE" not in text
        good_time_s = time.time() - 75.0
        cases = [
            (dict(drive_on=False, drive_detail="output off (safe-off)",
                  figures_left_out="drive off"), "running, safe-off"),
            (dict(drive_on=False, drive_detail="output off", figures_left_out="drive off"),
             "running, drive off"),
            (dict(drive_on=True, drive_detail="output on", figures_left_out="no pulse"),
             "running, no pulse"),
        ]
        for fields, banner in cases:
            fake._snap = noise_snapshot(fake, figures_time_s=good_time_s, **fields)
            await pilot.pause(0.3)
            text = screen_text(app)
            top = text.splitlines()[0]
            assert banner in top, top
            # the figures keep their last good values, marked stale with their age
            assert re.search(r"STALE, 1 min 1[5-7] s old", text), text
            assert f"latest {fields['figures_left_out']}" in text
        # a good trace again: figures current, banner plain
        fake.advance()
        await pilot.pause(0.3)
        text = screen_text(app)
        assert "STALE" not in text and "● running " in text


def test_processing_keeps_noise_out_of_the_figures_and_says_why():
    # what processing reports for each kind of trace (the rule of its module docstring)
    flat = {"peak_rarefactional_pa": 1e5}
    assert figures_left_out(flat, no_pulse=False, drive_off=False) == ""
    assert figures_left_out(flat, no_pulse=True, drive_off=False) == "no pulse"
    assert figures_left_out(flat, no_pulse=True, drive_off=True) == "drive off"
    assert figures_left_out(None, no_pulse=False, drive_off=False) == "not converted"


@sync
async def test_figures_show_what_they_left_out_and_since_when():
    fake = started_fake()
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause(0.1)
        since_s = time.time() - 30.0
        fake._snap = dataclasses.replace(
            fake._snap, seq=fake._snap.seq + 1, figures_since_s=since_s,
            figures_since_reason="method change",
            figures_left_out_counts={"clipped": 3, "doubtful": 2})
        await pilot.pause(0.3)
        text = screen_text(app)
        assert f"since {wall_time(since_s)}, method change" in text
        assert "left out 3 clipped, 2 doubtful" in text
        # the reset key asks first, then goes to the session
        await pilot.press("r")
        assert fake.resets == []
        await pilot.press("r")
        await pilot.pause(0.1)
        assert fake.resets == ["operator (dashboard)"]
    async with DashboardApp(fake, first_run_notice=False).run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.2)
        # 80 columns: the reason gives way, the time stays; the border is not overrun
        text = screen_text(pilot.app)
        assert f"running figures · since {wall_time(since_s)} ─" in text


def test_wrap_pieces_keeps_every_word_within_the_width():
    text = "Vertical range under-used: " + "the signal spans 12 % of the range " * 6 + "END"
    pieces = [("#12 ", "red"), (text, "blue"), (" x" * 3 + " " + "y" * 100, "")]
    for cols in (20, 37, 80):
        lines = wrap_pieces(pieces, cols, indent=6)
        assert all(sum(len(t) for t, _ in line) <= cols for line in lines)
        joined = "".join(t for line in lines for t, _ in line)
        # every character but the spaces broken at is kept, in order
        assert "".join(joined.split()) == "".join("".join(t for t, _ in pieces).split())
        assert all(line[0][0] == " " * 6 for line in lines[1:])


@sync
async def test_long_alert_text_is_wrapped_not_cut():
    fake = started_fake()
    message = ("digitiser: connection lost while reading the waveform block of trace 4711; "
               "reconnecting every 2 s, traces before it are stored, the last word is "
               "FINIS")
    for size in ((80, 24), (120, 40)):
        async with DashboardApp(fake, first_run_notice=False).run_test(size=size) as pilot:
            fake.add_alert("instrument", "critical", message, ("record", "bell"))
            await pilot.pause(0.3)
            text = screen_text(pilot.app)
            assert "FINIS" in text
            assert all(len(line) <= size[0] for line in text.splitlines())
            alerts = pilot.app.query_one(AlertList)
            shown = " ".join(alerts.text_lines())
            assert " ".join(message.split()) in " ".join(shown.split())
    # more alerts than the rows can wrap: each keeps its row, the cut one ends with …
    async with DashboardApp(fake, first_run_notice=False).run_test(size=(80, 24)) as pilot:
        fake.add_alert("range", "info", "range under-used")
        fake.add_alert("trigger", "warning", "no trigger for 5 s")
        await pilot.pause(0.3)
        lines = pilot.app.query_one(AlertList).text_lines()
        assert "no trigger" in lines[0] and "under-used" in lines[1]
        assert "connection lost" in lines[2] and lines[2].rstrip().endswith("…")


@sync
async def test_event_log_lists_events_and_alerts_and_closes_with_escape():
    fake = started_fake()
    long_message = "pressure above the limit " * 8 + "THE END"
    fake.add_alert("over_pressure", "critical", long_message, ("record", "safe-off"))
    t0 = time.time() - 100.0
    events = [EventView(t0 + i, kind, text, seq) for i, (kind, text, seq) in enumerate([
        ("drive-on", "by test operator", None), ("mark", "moved to focus", 3),
        ("method-change", "auto -> deconvolve", 5), ("range-change", "0.1 V -> 0.5 V", 9),
        ("drive-off", "by safe-off", 12)] + [("mark", f"note {n}", 20 + n) for n in range(40)])]
    fake._snap = dataclasses.replace(fake._snap, events=events)
    app = DashboardApp(fake, first_run_notice=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.1)
        await pilot.press("e")
        await pilot.pause(0.2)
        assert isinstance(app.screen, EventLogScreen)
        assert len(app.screen.lines) == 46
        text = screen_text(app)
        assert "note 39" in text          # opens at the newest
        assert all(len(line) <= 80 for line in text.splitlines())
        for _ in range(8):
            await pilot.press("pageup")
        await pilot.pause(0.2)
        text = screen_text(app)
        assert "moved to focus" in text and "auto -> deconvolve" in text
        assert "note 39" not in text
        # the alert is listed whole (wrapped), not cut at the box's edge
        lines = [line for _, line in app.screen.lines]
        assert any(long_message in line.plain for line in lines)
        await pilot.press("escape")
        await pilot.pause(0.1)
        assert not isinstance(app.screen, EventLogScreen)


def test_event_text_from_recorded_details():
    # the detail keys documented in record/schema.py EventKind
    assert event_text("method-change", {"from": "auto", "to": "narrowband"}) == \
        "auto -> narrowband"
    assert event_text("range-change", {"done": True, "from_v": 0.1, "to_v": 0.5}) == \
        "0.1 V -> 0.5 V"
    assert event_text("mark", {"note": ""}) == "(no note)"
    assert event_text("drive-off", {"output_on": False, "cause": "safe-off"}) == "by safe-off"
