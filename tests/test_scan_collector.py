"""The scan's record and its per-trace judge, without instruments: which trace counts
towards a point, how a point's traces are combined (against numpy), a point recorded
once and read back cell for cell, and a file reopened to go on with a scan.
"""

from __future__ import annotations

import sqlite3
import threading
from dataclasses import dataclass

import numpy as np
import pytest
from session_samples import make_raw

from tankside.monitor.errors import SessionFileError, StoreError
from tankside.monitor.live.scan import ScanCollector
from tankside.monitor.record.reader import SessionReader
from tankside.monitor.record.scanpoints import Combined, PointRecord, combine_results
from tankside.monitor.record.schema import SCAN_DDL, PointStatus
from tankside.monitor.record.store import SessionStore


@dataclass(frozen=True)
class Point:
    index: int
    position_mm: dict
    settle_s: float = 0.0
    traces: int = 3


@dataclass(frozen=True)
class Plan:
    kind: str = "line"
    points: tuple = (Point(0, {"x": 0.0}), Point(1, {"x": 0.5}))
    speed_mm_s: float | None = None
    combine: str = "parameters"


def flat(p_r: float) -> dict:
    return {"peak_rarefactional_pa": p_r, "peak_compressional_pa": 2 * p_r}


AT_0 = {"x": 0.0, "y": 0.0}


def test_only_traces_at_rest_on_target_drive_on_unclipped_and_converted_count():
    c = ScanCollector(Plan())
    assert c.on_trace(0, flat(1.0), {}, AT_0) == (None, None)     # no point open yet
    c.open_point(0, {"x": 0.0}, from_seq=2, needed=3, resumed=False)
    assert c.on_trace(1, flat(1.0), {}, AT_0) == (None, None)     # before from_seq
    judged = [
        c.on_trace(2, flat(1.0), {"clipped": True}, AT_0),
        c.on_trace(3, flat(1.0), {"drive_off": True}, AT_0),
        c.on_trace(4, flat(1.0), {"stage_moving": True}, AT_0),
        c.on_trace(5, flat(1.0), {}, {"x": 0.02, "y": 0.0}),       # 20 um off: refused
        c.on_trace(6, flat(1.0), {}, {}),
        c.on_trace(7, None, {}, AT_0),
    ]
    assert [j[0] for j in judged] == [
        (0, False, "clipped"), (0, False, "drive off"), (0, False, "stage moving"),
        (0, False, "off target"), (0, False, "no stage position"), (0, False, "not converted")]
    assert all(j[1] is None for j in judged)
    # a trace with no pulse that did not convert counts: nothing above the noise there
    assert c.on_trace(8, None, {"no_pulse": True}, AT_0) == ((0, True, ""), None)
    assert c.on_trace(9, flat(1.0), {}, {"x": 0.005, "y": 0.0})[0] == (0, True, "")
    entry, rec = c.on_trace(10, flat(3.0), {}, AT_0)
    assert entry == (0, True, "") and rec is not None
    assert rec.status == PointStatus.DONE and (rec.counted, rec.rejected) == (3, 6)
    assert (rec.first_seq, rec.last_seq) == (8, 10)
    # mean and sample spread of the two converted traces (numpy, ddof = 1)
    assert rec.results["peak_rarefactional_pa"].mean == pytest.approx(np.mean([1.0, 3.0]))
    assert rec.results["peak_rarefactional_pa"].spread == pytest.approx(
        np.std([1.0, 3.0], ddof=1))
    assert rec.position_mm["x"] == pytest.approx(np.mean([0.0, 0.005, 0.0]))
    assert "no pulse above the noise" in rec.note
    assert c.on_trace(11, flat(1.0), {}, AT_0) == (None, None)    # the point is complete
    view = c.view()
    assert view.completed == 1 and view.values["peak_rarefactional_pa"][0] == 2.0
    assert np.isnan(view.values["peak_rarefactional_pa"][1]) and not view.failed.any()


def test_a_point_whose_traces_keep_being_refused_fails_and_is_never_mapped():
    c = ScanCollector(Plan(), max_rejected=4)
    c.open_point(1, {"x": 0.5}, from_seq=0, needed=3, resumed=True)
    out = [c.on_trace(s, flat(1.0), {"clipped": True}, {"x": 0.5}) for s in range(4)]
    rec = out[-1][1]
    assert [o[1] for o in out[:3]] == [None] * 3 and rec is not None
    assert rec.status == PointStatus.FAILED and not rec.valid and rec.resumed
    assert "4 traces refused, the last: clipped" in rec.note
    view = c.view()
    assert view.failed.tolist() == [False, True]
    assert np.isnan(view.values["peak_rarefactional_pa"]).all()


def test_waiting_for_a_point_wakes_when_the_processing_thread_completes_it():
    c = ScanCollector(Plan(points=(Point(0, {"x": 0.0}, traces=1),)))
    c.open_point(0, {"x": 0.0}, from_seq=0, needed=1, resumed=False)
    assert not c.wait_point(0.01)
    threading.Timer(0.05, c.on_trace, (0, flat(1.0), {}, AT_0)).start()
    assert c.wait_point(5.0)


def test_combine_results_leaves_out_missing_values_per_parameter():
    out = combine_results([{"peak_rarefactional_pa": 1.0, "mechanical_index": float("nan")},
                           {"peak_rarefactional_pa": 2.0, "mechanical_index": 0.5},
                           {"peak_rarefactional_pa": 4.0, "method": "deconvolve"}])
    assert out["peak_rarefactional_pa"] == Combined(
        float(np.mean([1, 2, 4])), float(np.std([1, 2, 4], ddof=1)), 3)
    assert out["mechanical_index"] == Combined(0.5, 0.0, 1)
    assert "peak_compressional_pa" not in out


def _point(index: int, **kw) -> PointRecord:
    base = dict(index=index, status=PointStatus.DONE, time_s=1.8e9 + index,
                target_mm={"x": 0.25 * index}, position_mm={"x": 0.25 * index + 1e-4},
                counted=3, rejected=1, first_seq=3 * index, last_seq=3 * index + 2,
                results={"peak_rarefactional_pa": Combined(1.5e5, 2e3, 3)}, note="")
    base.update(kw)
    return PointRecord(**base)


def test_a_point_is_recorded_once_and_reads_back_as_written(tmp_path):
    path = tmp_path / "s.db"
    store = SessionStore.create(path, {"scan_plan": {"kind": "line"}})
    store.add_trace(make_raw(0, n=256), None, point=(0, True, ""))
    store.add_trace(make_raw(1, n=256), None, point=(0, False, "clipped"))
    store.add_trace(make_raw(2, n=256), None)           # between points: no row
    first = _point(0, waveform={"peak_rarefactional_pa": 1.49e5})
    store.add_scan_point(first)
    with pytest.raises(StoreError, match="scan point 0"):
        store.add_scan_point(_point(0))
    store.close("completed", "done", {"traces": 3})
    with SessionReader(path) as reader:
        assert reader.scan_points() == [first]
        assert reader.trace_points() == {0: (0, True, ""), 1: (0, False, "clipped")}
        assert reader.scan_plan == {"kind": "line"}


def test_a_file_reopened_for_a_resume_loses_its_stop_record_and_goes_on(tmp_path):
    path = tmp_path / "s.db"
    store = SessionStore.create(path, {"scan_plan": {"kind": "line"}})
    store.add_trace(make_raw(0, n=256), None, point=(0, True, ""))
    store.add_scan_point(_point(0))
    store.close("operator", "stopped", {"traces": 1})
    store, previous = SessionStore.reopen(path)
    assert previous is not None and previous["reason"] == "stopped"
    with SessionReader(path) as reader:
        assert reader.stop is None          # until the resumed session ends
    store.add_trace(make_raw(1, n=256), None, point=(1, True, ""))
    store.add_scan_point(_point(1, resumed=True))
    store.close("completed", "scan complete", {"traces": 2})
    with SessionReader(path) as reader:
        assert [p.index for p in reader.scan_points()] == [0, 1]
        assert reader.scan_points()[1].resumed and reader.seqs() == [0, 1]
        assert reader.stop["reason"] == "scan complete"
        assert reader.integrity_check() == "ok"


def test_a_layout_3_file_has_no_scan_and_cannot_be_resumed(tmp_path):
    path = tmp_path / "old.db"
    SessionStore.create(path, {}).close("completed", "done", {})
    with sqlite3.connect(path) as conn:
        for ddl in SCAN_DDL:
            conn.execute(f"DROP TABLE {ddl.split('CREATE TABLE ', 1)[1].split(' ', 1)[0]}")
        conn.execute("UPDATE session_start SET layout_version = 3")
    with SessionReader(path) as reader:
        assert reader.scan_points() == [] and reader.trace_points() == {}
        assert reader.scan_plan is None
    with pytest.raises(SessionFileError, match="layout 3"):
        SessionStore.reopen(path)


def test_a_scan_view_crosses_to_the_dashboard_process_only_when_it_changed():
    """The child sends a scan's per-point arrays once per version; the parent keeps the
    view it has while the version stands (a 100,000-point plan is megabytes a view)."""
    import multiprocessing

    from tankside.monitor.live.child import _answer_snapshots, _with_scan
    from tankside.monitor.live.snapshot import Snapshot

    c = ScanCollector(Plan())
    first = c.view()
    assert c.view() is first                     # nothing changed: the same object
    c.set_phase("moving", current=0)
    second = c.view()
    assert second.version > first.version

    class Session:
        running = True
        views = [first, first, second]
        exit_code, exit_status, stop_reason, message_for_operator, method = 0, "", "", "", ""

        def snapshot(self):
            view = self.views.pop(0)
            if not self.views:
                self.running = False
            return Snapshot(scan=view)

    parent, child = multiprocessing.Pipe()
    held = None
    # the answering loop in a thread, asked three times as the dashboard asks
    thread = threading.Thread(target=_answer_snapshots, args=(Session(), child), daemon=True)
    thread.start()
    answers = []
    for _ in range(3):
        parent.send(None)
        answers.append(parent.recv())
    thread.join(5)
    sent = [a[0].scan for a in answers]
    assert sent[0] is not None and sent[1] is None and sent[2] is not None
    assert answers[1][2] == first.version        # "the one you hold"
    for snap, _, payload in answers:
        held = _with_scan(snap, held, payload)
        assert held.scan is not None
    assert held.scan.version == second.version
