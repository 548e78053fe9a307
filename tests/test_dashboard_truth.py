"""The dashboard tells the truth about what it shows: no pulse, drive off, stale figures.

Fed by the deterministic FakeLiveSession (tests/fake_session.py); a snapshot is changed
by hand to the state under test, as the live session would publish it.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from dashboard_pilot import screen_text, sync
from fake_session import FakeLiveSession

from tankside.monitor.dashboard.app import DashboardApp
from tankside.monitor.dashboard.spectrum import SpectrumView


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
        assert "no pulse: narrowband not judged" in text
        fake._snap = noise_snapshot(fake, narrowband_ok=False, drive_on=False)
        await pilot.pause(0.3)
        assert spectrum.verdict() == "drive off, no pulse: narrowband not judged"
