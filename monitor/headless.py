"""Headless display of a live session: a status line every few seconds, and every alert.

Plain text on stdout, one line per item, so that it reads well in a log file or over
ssh. It reads :meth:`LiveSession.snapshot` like the dashboard does, and never waits
on the pipeline.
"""

from __future__ import annotations

import math
import sys
import time
from datetime import datetime
from typing import TextIO

from .dashboard.scantext import phase_text, point_number, position_mm, position_text
from .dashboard.units import countdown
from .live.snapshot import AlertView, Snapshot
from .live.views import stage_text, water_text
from .outcome import ExitStatus


def fmt_si(value: float | None, unit: str) -> str:
    """``1.23 MPa``-style text with an SI prefix (k, M, G; m, u below 1)."""
    if value is None or not math.isfinite(value):
        return f"- {unit}".strip()
    size = abs(value)
    for factor, prefix in ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"),
                           (1e-6, "u")):
        if size >= factor:
            return f"{value / factor:.3g} {prefix}{unit}".strip()
    return f"{value:.3g} {unit}".strip()


def status_line(snap: Snapshot, alert_count: int | None = None) -> str:
    """One line: seq, rate, source state, p_c/p_r/MI of the last trace, narrowband, counts,
    queue."""
    r = snap.result or {}
    if snap.narrowband_ok is None:
        nb = "narrowband -"
    else:
        dev = snap.narrowband_max_deviation_db
        dev_txt = f" {dev:.2g} dB" if math.isfinite(dev) else ""
        nb = f"narrowband {'ok' if snap.narrowband_ok else 'FAIL'}{dev_txt}"
    mi = r.get("mechanical_index", math.nan)
    mi_txt = f"{mi:.3g}" if isinstance(mi, int | float) and math.isfinite(mi) else "-"
    alerts = len(snap.alerts) if alert_count is None else alert_count
    return (f"[{snap.state}] seq {snap.seq} | {snap.traces_per_s:.1f} tr/s | "
            f"{source_text(snap)}"
            f"p_c {fmt_si(r.get('peak_compressional_pa', math.nan), 'Pa')} "
            f"p_r {fmt_si(r.get('peak_rarefactional_pa', math.nan), 'Pa')} MI {mi_txt} | "
            f"{snap.method or '-'} | {nb} | acquired {snap.acquired} converted "
            f"{snap.converted} stored {snap.stored} | queue {snap.queue_depth}/"
            f"{snap.queue_capacity} | range {fmt_si(snap.range_v, 'V')} | alerts {alerts}"
            f" | doubtful {snap.doubtful_traces}{_last_warnings(snap)}{bench_status(snap)}"
            f"{scan_status(snap)}")


#: Phases of a scan that are its normal course, not said on the status line.
_BUSY_PHASES = ("moving", "settling", "acquiring")


def scan_status(snap: Snapshot) -> str:
    """`` | pt 37/81 x 2.5 y -1 mm 44% 1:23 left`` while a scan runs ("" without one).

    The point being measured (1-based) and its target on the scanned axes, the share of
    the points completed, the time left when known, and the phase when it is not the
    scan's normal course (``paused: stage lost``, ``waiting: ...``, ``ended``).
    """
    view = snap.scan
    if view is None:
        return ""
    where = position_text(position_mm(view, view.current))
    share = f"{100.0 * view.completed / view.total:.0f}%" if view.total else "-"
    left = countdown(view.time_left_s)
    parts = [f"pt {point_number(view)}/{view.total}", f"{where} mm" if where else "", share,
             f"{left} left" if left else ""]
    if view.phase not in _BUSY_PHASES:
        parts.append(phase_text(view))
    return " | " + " ".join(p for p in parts if p)


def bench_status(snap: Snapshot) -> str:
    """`` | stage x 5.00 ... mm | water 21.30 C (2 s)`` for the serial instruments the
    bench has ("" when it has neither)."""
    view = snap.bench
    if view is None:
        return ""
    parts = [stage_text(view), water_text(view, degree="C")]
    return "".join(f" | {p}" for p in parts if p)


def _last_warnings(snap: Snapshot) -> str:
    codes = snap.last_warnings
    return f" (last: {', '.join(codes)})" if codes else ""


def source_text(snap: Snapshot) -> str:
    """``"SOURCE OFF / NO PULSE: output off (safe-off) | "``-style text, or "" when normal.

    Said when the generator output is known to be off or the latest trace holds no
    pulse: the figures that follow are then of noise, not of the field.
    """
    off = snap.drive_on is False
    no_pulse = snap.pulse_present is False
    if not (off or no_pulse):
        return "drive on | " if snap.drive_on else ""
    words = " / ".join(w for w, on in (("SOURCE OFF", off), ("NO PULSE", no_pulse)) if on)
    why = f": {snap.drive_detail}" if snap.drive_detail else ""
    return f"{words}{why} | "


def iso_time(time_s: float) -> str:
    """ISO 8601 local time with its UTC offset, to the second (``2026-12-02T06:41:09+00:00``).
    """
    if not math.isfinite(time_s):
        return "----------T--:--:--"
    return datetime.fromtimestamp(time_s).astimezone().isoformat(timespec="seconds")


def alert_line(alert: AlertView) -> str:
    stamp = iso_time(alert.time_s)
    seq = f" seq {alert.seq}" if alert.seq is not None else ""
    return (f"ALERT {stamp} {alert.severity.upper()} {alert.rule}{seq}: {alert.message} "
            f"[{', '.join(alert.actions)}]")


def run_headless(session, *, out: TextIO | None = None, status_every_s: float = 2.0,
                 poll_s: float = 0.1) -> int:
    """Print status and alerts until the session ends; returns its exit code.

    Ctrl-C asks the session to stop cleanly and keeps printing until it has.
    """
    out = sys.stdout if out is None else out
    seen: set[int] = set()
    alert_total = 0
    next_status = time.monotonic()

    def show(final: bool = False) -> None:
        nonlocal alert_total, next_status
        snap = session.snapshot()
        for alert in snap.alerts:
            if alert.alert_id not in seen:
                seen.add(alert.alert_id)
                alert_total += 1
                print(alert_line(alert), file=out, flush=True)
        if final or time.monotonic() >= next_status:
            next_status = time.monotonic() + status_every_s
            print(f"{iso_time(time.time())} {status_line(snap, alert_total)}", file=out,
                  flush=True)

    while True:
        try:
            if session.wait(poll_s):
                break
            show()
        except KeyboardInterrupt:
            print(f"{iso_time(time.time())} stopping (Ctrl-C) ...", file=out, flush=True)
            session.stop("interrupted (Ctrl-C)")
    show(final=True)
    print(end_summary(session), file=out, flush=True)
    return session.exit_code


def end_summary(session) -> str:
    """The one line every end of a session prints: time, status, reason, where the data are."""
    snap = session.snapshot()
    if session.exit_status == ExitStatus.STORE_ERROR:
        where = f"traces committed before the error are intact in {snap.session_path}"
    else:
        where = f"{snap.stored} traces in {snap.session_path}"
    status = session.exit_status or ExitStatus.COMPLETED
    reason = session.stop_reason if session.stop_reason not in ("", status) else ""
    return (f"{iso_time(time.time())} session stopped: {status}"
            f"{': ' + reason if reason else ''}; {where}")
