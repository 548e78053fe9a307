"""The stage's position and the water temperature on the headless status line and in the
dashboard's bench panel."""

from __future__ import annotations

from tankside.monitor.dashboard.status import BenchStatus
from tankside.monitor.headless import status_line
from tankside.monitor.live.snapshot import BenchView, InstrumentView, Snapshot

VIEW = BenchView(has_stage=True, stage_connected=True,
                 position_mm={"x": 5.0, "y": -2.0, "z": 40.0}, has_thermometer=True,
                 thermometer_connected=True, reading_c=21.3, reading_age_s=2.2, max_age_s=30.0,
                 water_temperature_c=21.3, water_source="thermometer")
INSTRUMENTS = [InstrumentView("digitiser", "TCPIP0::127.0.0.1::5025::SOCKET",
                              "INVENTED,DIG,0,1", True),
               InstrumentView("generator", "TCPIP0::127.0.0.1::5026::SOCKET",
                              "INVENTED,GEN,0,1", True, "output off")]


def text(lines) -> list[str]:
    return ["".join(piece for piece, _ in line).rstrip() for line in lines]


def panel(snap: Snapshot, cols: int, rows: int) -> list[str]:
    status = BenchStatus()
    status.show(snap)
    return text(status.lines(cols, rows))


def test_status_line_says_position_and_temperature():
    line = status_line(Snapshot(state="running", bench=VIEW))
    assert line.endswith(" | stage x 5.00 y -2.00 z 40.00 mm | water 21.30 C (2 s)")


def test_status_line_says_lost_and_the_fallback():
    view = BenchView(has_stage=True, stage_connected=False, has_thermometer=True,
                     thermometer_connected=False, reading_c=21.3, reading_age_s=45.0,
                     water_temperature_c=20.0, water_source="bench")
    line = status_line(Snapshot(bench=view))
    assert line.endswith(" | stage LOST | water 21.30 C (45 s) LOST, using the bench 20C")


def test_status_line_after_the_end_says_closed_not_lost():
    # the session closed both at its end: the last status line must not cry LOST
    view = BenchView(has_stage=True, stage_connected=False, stage_ended=True,
                     has_thermometer=True, thermometer_connected=False,
                     thermometer_ended=True, reading_c=21.3, reading_age_s=1.0,
                     water_temperature_c=21.3, water_source="thermometer")
    line = status_line(Snapshot(state="stopped", bench=view))
    assert line.endswith(" | stage closed | water 21.30 C (1 s) closed")
    assert "LOST" not in line


def test_status_line_without_serial_instruments_is_as_before():
    assert "stage" not in status_line(Snapshot()) and "water" not in status_line(Snapshot())


def test_bench_panel_line_wide_and_narrow():
    snap = Snapshot(instruments=INSTRUMENTS, bench=VIEW, session_path="s/session-1.db")
    wide = panel(snap, 62, 8)
    assert wide[2] == "stage x 5.00 y -2.00 z 40.00 mm  water 21.30 °C (2 s)"
    assert wide[-1] == "session-1.db"
    narrow = panel(snap, 30, 7)
    assert narrow[2] == "x5.0 y-2.0 z40.0  21.30°C 2s"
    assert len(narrow) == 7 and "session-1.db" not in narrow   # no room: the name goes
    assert narrow[-1].startswith("queue ")


def test_bench_panel_without_serial_instruments_is_as_before():
    snap = Snapshot(instruments=INSTRUMENTS, session_path="s/session-1.db")
    shown = panel(snap, 30, 7)
    assert len(shown) == 7 and shown[-1] == "session-1.db"
    assert shown[2].startswith("rate ")         # right after the two instruments
