"""Scan plans: the order of the points, the CSV of points, the soft limits, the errors
naming file and key, the stored form, the [scan] table of a bench file and the dry run.

The point orders are checked against hand-listed expectations and against numpy
(np.arange, np.linspace, np.meshgrid); the dry run's travel against a hand computation
and against np.linalg.norm of np.diff.
"""

from __future__ import annotations

import json
import math
import pickle
from pathlib import Path

import numpy as np
import pytest

from tankside.monitor.errors import (
    ConfigError,
    OutsideLimitsError,
    PlanOutsideLimitsError,
    ScanPlanError,
)
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.scanplan import (
    DEFAULT_SPEED_MM_S,
    MAX_POINTS,
    Combine,
    PlanKind,
    ScanPlan,
    check_limits,
    load_plan,
    summarise_plan,
)

LIMITS = {"x": (-10.0, 10.0), "y": (-10.0, 10.0), "z": (0.0, 80.0)}
CAL_TEXT = Path(__file__).resolve().parents[1] / "simulators" / "data" / "demo-hydrophone.csv"


def axis(name, start, stop, step):
    return (f'[[axes]]\nname = "{name}"\nstart_mm = {start}\nstop_mm = {stop}\n'
            f"step_mm = {step}\n")


def plan_file(tmp_path, head, *axes_text, name="plan.toml"):
    path = tmp_path / name
    path.write_text(head + "".join(axes_text))
    return path


def load(tmp_path, head, *axes_text, limits=LIMITS):
    return load_plan(plan_file(tmp_path, head, *axes_text), limits=limits)


def positions(plan, axes=None):
    axes = axes or plan.moved_axes
    return [tuple(p.position_mm[a] for a in axes) for p in plan.points]


HEAD = 'settle_s = 0.25\ntraces = 4\n'


class TestOrder:
    def test_line_hand_listed(self, tmp_path):
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", 0, 2, 0.5))
        assert plan.kind is PlanKind.LINE
        assert positions(plan) == [(0.0,), (0.5,), (1.0,), (1.5,), (2.0,)]
        assert [p.index for p in plan.points] == [0, 1, 2, 3, 4]
        assert all(p.settle_s == 0.25 and p.traces == 4 for p in plan.points)
        assert plan.combine is Combine.PARAMETERS and plan.notes == ()

    def test_line_downward_the_step_sign_follows_start_to_stop(self, tmp_path):
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("z", 50, 40, 2.5))
        assert positions(plan) == [(50.0,), (47.5,), (45.0,), (42.5,), (40.0,)]

    def test_step_not_dividing_the_span_ends_before_stop_and_says_so(self, tmp_path):
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", 0, 1, 0.3))
        assert positions(plan) == [(0.0,), (0.3,), (0.6,), (0.9,)]
        assert plan.notes == ("x: the step 0.3 mm does not divide 0 to 1 mm; the last "
                              "point is 0.9 mm",)
        assert "note: x: the step 0.3 mm" in summarise_plan(plan).text()

    def test_line_against_numpy(self, tmp_path):
        # np.linspace over a span the step divides (201 points), and np.arange where it
        # does not (the last point not beyond stop)
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", -10, 10, 0.1))
        np.testing.assert_allclose(np.ravel(positions(plan)), np.linspace(-10, 10, 201),
                                   rtol=0, atol=1e-9)
        assert plan.points[-1].position_mm["x"] == 10.0     # exactly: at the soft limit
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("y", -7.3, 9.1, 0.37))
        np.testing.assert_allclose(np.ravel(positions(plan)), np.arange(-7.3, 9.1, 0.37),
                                   rtol=0, atol=1e-6)

    def test_start_equal_to_stop_is_one_point(self, tmp_path):
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", 3, 3, 1))
        assert positions(plan) == [(3.0,)]

    def test_raster_hand_listed(self, tmp_path):
        plan = load(tmp_path, 'kind = "raster"\n' + HEAD, axis("x", 0, 2, 1),
                    axis("y", 5, 6, 1))
        assert plan.axes == ("x", "y")
        assert positions(plan) == [(0, 5), (1, 5), (2, 5), (0, 6), (1, 6), (2, 6)]

    def test_raster_serpentine_hand_listed(self, tmp_path):
        plan = load(tmp_path, 'kind = "raster"\nserpentine = true\n' + HEAD,
                    axis("y", 0, 2, 1), axis("x", 0, 2, 1))
        # y is the fast axis here: the first [[axes]] is the fast one
        assert positions(plan, ("y", "x")) == [(0, 0), (1, 0), (2, 0),
                                               (2, 1), (1, 1), (0, 1),
                                               (0, 2), (1, 2), (2, 2)]

    def test_raster_against_meshgrid(self, tmp_path):
        plan = load(tmp_path, 'kind = "raster"\n' + HEAD, axis("x", -5, 5, 0.25),
                    axis("y", 4, -4, 0.5))
        xs, ys = np.linspace(-5, 5, 41), np.linspace(4, -4, 17)
        gx, gy = np.meshgrid(xs, ys)        # rows: y; x changes along a row (fastest)
        expected = np.column_stack([gx.ravel(), gy.ravel()])
        np.testing.assert_allclose(positions(plan), expected, rtol=0, atol=1e-9)

    def test_raster_serpentine_against_meshgrid(self, tmp_path):
        plan = load(tmp_path, 'kind = "raster"\nserpentine = true\n' + HEAD,
                    axis("x", -5, 5, 0.25), axis("y", -4, 4, 0.5))
        gx, gy = np.meshgrid(np.linspace(-5, 5, 41), np.linspace(-4, 4, 17))
        gx[1::2] = gx[1::2, ::-1]           # every second row runs back
        expected = np.column_stack([gx.ravel(), gy.ravel()])
        np.testing.assert_allclose(positions(plan), expected, rtol=0, atol=1e-9)

    def test_volume_serpentine_hand_listed(self, tmp_path):
        plan = load(tmp_path, 'kind = "volume"\nserpentine = true\n' + HEAD,
                    axis("x", 0, 1, 1), axis("y", 0, 2, 1), axis("z", 10, 11, 1))
        row = [(0, 0), (1, 0), (1, 1), (0, 1), (0, 2), (1, 2)]
        # each level is the same serpentine raster
        assert positions(plan) == [(x, y, 10) for x, y in row] + [(x, y, 11) for x, y in row]

    def test_volume_against_meshgrid(self, tmp_path):
        for serpentine in (False, True):
            plan = load(tmp_path, f'kind = "volume"\nserpentine = {str(serpentine).lower()}\n'
                        + HEAD, axis("x", -2, 2, 0.5), axis("y", 3, -3, 1),
                        axis("z", 20, 30, 2))
            xs, ys, zs = np.linspace(-2, 2, 9), np.linspace(3, -3, 7), np.linspace(20, 30, 6)
            gz, gy, gx = np.meshgrid(zs, ys, xs, indexing="ij")   # x fastest, z slowest
            if serpentine:
                gx[:, 1::2] = gx[:, 1::2, ::-1]
            expected = np.column_stack([gx.ravel(), gy.ravel(), gz.ravel()])
            np.testing.assert_allclose(positions(plan, ("x", "y", "z")), expected, rtol=0,
                                       atol=1e-9)
            assert len(plan.points) == 9 * 7 * 6

    def test_fixed_axes_are_in_every_point(self, tmp_path):
        plan = load(tmp_path, 'kind = "line"\nfixed = { z = 40.0, y = -1 }\n' + HEAD,
                    axis("x", 0, 1, 1))
        assert [p.position_mm for p in plan.points] == [{"x": 0.0, "z": 40.0, "y": -1.0},
                                                        {"x": 1.0, "z": 40.0, "y": -1.0}]
        assert plan.moved_axes == ("x", "z", "y")

    def test_axes_not_named_are_left_out(self, tmp_path):
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("z", 0, 1, 1))
        assert all(set(p.position_mm) == {"z"} for p in plan.points)

    def test_mean_waveform_and_speed(self, tmp_path):
        plan = load(tmp_path, 'kind = "line"\ncombine = "mean-waveform"\nspeed_mm_s = 2.5\n'
                    + HEAD, axis("x", 0, 1, 1))
        assert plan.combine is Combine.MEAN_WAVEFORM and plan.speed_mm_s == 2.5


def points_plan(tmp_path, csv_text, extra="", limits=LIMITS):
    (tmp_path / "pts").mkdir(exist_ok=True)
    (tmp_path / "pts" / "list.csv").write_text(csv_text)
    return load(tmp_path, f'kind = "points"\nfile = "pts/list.csv"\n{extra}' + HEAD,
                limits=limits)


class TestPoints:
    def test_order_overrides_comments_and_fixed(self, tmp_path):
        text = ("\ufeffx, z ,traces,settle_s\n"
                "# the axis first\n"
                "0,30,,\n"
                "\n"
                "0,40,32,\n"
                "1.5,40,,1.5\n")
        plan = points_plan(tmp_path, text, 'fixed = { y = 2.0 }\n')
        assert plan.kind is PlanKind.POINTS and plan.axes == ("x", "z")
        assert [p.position_mm for p in plan.points] == [
            {"x": 0.0, "z": 30.0, "y": 2.0}, {"x": 0.0, "z": 40.0, "y": 2.0},
            {"x": 1.5, "z": 40.0, "y": 2.0}]
        assert [p.traces for p in plan.points] == [4, 32, 4]
        assert [p.settle_s for p in plan.points] == [0.25, 0.25, 1.5]
        assert plan.points_source == str(tmp_path / "pts" / "list.csv")
        assert plan.points_text == text.lstrip("\ufeff")

    @pytest.mark.parametrize("text, where, words", [
        ("x,y\n1,2\n3\n", "list.csv: line 3", "expected 2 cells (x, y), got 1"),
        ("x,y\n1,2\n3,abc\n", "list.csv: line 3, column y", "'abc' is not a number (mm)"),
        ("x,y\n1,\n", "list.csv: line 2, column y", "empty; expected a number (mm)"),
        ("x,y\n1,nan\n", "list.csv: line 2, column y", "'nan' is not a finite number"),
        ("x,traces\n1,2.5\n", "list.csv: line 2, column traces", "expected a whole number"),
        ("x,settle_s\n1,-1\n", "list.csv: line 2, column settle_s", "expected 0 to 600 s"),
        ("x,x\n1,2\n", "list.csv: line 1", "column x is given twice"),
        ("traces\n3\n", "list.csv: line 1", "the header names no axis column"),
        ("x y,z\n1,2\n", "list.csv: line 1, column 'x y'", "a plain word"),
        ("x,y\n", "list.csv: the points", "no points"),
        ("", "list.csv: the points", "no points"),
    ])
    def test_bad_csv_names_file_line_and_column(self, tmp_path, text, where, words):
        with pytest.raises(ScanPlanError) as info:
            points_plan(tmp_path, text)
        message = str(info.value)
        assert message.startswith(str(tmp_path / "pts" / "list.csv")[:-len("list.csv")])
        assert where in message and words in message

    def test_missing_csv_names_the_plan_key(self, tmp_path):
        with pytest.raises(ScanPlanError, match=r"plan\.toml: file: no such file .*nope\.csv"):
            load(tmp_path, 'kind = "points"\nfile = "nope.csv"\n' + HEAD)

    def test_axis_both_a_column_and_fixed(self, tmp_path):
        with pytest.raises(ScanPlanError, match=r"plan\.toml: fixed\.x: axis x is a column"):
            points_plan(tmp_path, "x\n1\n", "fixed = { x = 1.0 }\n")

    def test_column_not_an_axis_of_the_stage(self, tmp_path):
        with pytest.raises(PlanOutsideLimitsError, match=r"list\.csv, column q: the stage "
                           r"has no axis q \(the bench file's \[stage\.limits\] has x, y, z\)"):
            points_plan(tmp_path, "x,q\n1,2\n")

    def test_too_many_points(self, tmp_path):
        text = "x\n" + "0\n" * (MAX_POINTS + 1)
        with pytest.raises(ScanPlanError, match=rf"line {MAX_POINTS + 2}: more than "
                           rf"{MAX_POINTS} points"):
            points_plan(tmp_path, text)


class TestLimits:
    def test_point_outside_is_refused_naming_it(self, tmp_path):
        rows = ["0,0"] * 37 + ["12.5,-3"] + ["0,0"]
        with pytest.raises(PlanOutsideLimitsError) as info:
            points_plan(tmp_path, "x,y\n" + "\n".join(rows) + "\n")
        assert "plan.toml: point 37 (x = 12.5 mm, y = -3 mm): x is outside the soft " \
               "limits -10 to 10 mm" in str(info.value)
        assert info.value.key == "point 37"
        # one type for both ways of handling it
        assert isinstance(info.value, ConfigError) and isinstance(info.value, OutsideLimitsError)

    def test_raster_point_outside_names_the_first_in_visiting_order(self, tmp_path):
        with pytest.raises(PlanOutsideLimitsError, match=r"point 3 \(x = 0 mm, y = 12 mm\): "
                           r"y is outside the soft limits -10 to 10 mm"):
            load(tmp_path, 'kind = "raster"\n' + HEAD, axis("x", 0, 2, 1),
                 axis("y", 9, 15, 3))

    def test_points_at_the_limits_are_accepted(self, tmp_path):
        plan = load(tmp_path, 'kind = "raster"\n' + HEAD, axis("x", -10, 10, 0.1),
                    axis("y", 10, -10, 2.5))
        assert len(plan.points) == 201 * 9

    def test_axis_without_limits(self, tmp_path):
        with pytest.raises(PlanOutsideLimitsError, match=r"plan\.toml: axes number 1 \(r\) "
                           r"name: the stage has no axis r"):
            load(tmp_path, 'kind = "line"\n' + HEAD, axis("r", 0, 1, 1))

    def test_fixed_axis_outside_or_unknown(self, tmp_path):
        with pytest.raises(PlanOutsideLimitsError, match=r"fixed\.z: z = 90 mm is outside "
                           r"the soft limits 0 to 80 mm"):
            load(tmp_path, 'kind = "line"\nfixed = { z = 90 }\n' + HEAD, axis("x", 0, 1, 1))
        with pytest.raises(PlanOutsideLimitsError, match=r"fixed\.w: the stage has no axis w"):
            load(tmp_path, 'kind = "line"\nfixed = { w = 1 }\n' + HEAD, axis("x", 0, 1, 1))

    def test_no_limits_no_plan(self, tmp_path):
        with pytest.raises(PlanOutsideLimitsError, match=r"needs the bench file's \[stage\]"):
            load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", 0, 1, 1), limits={})

    def test_check_again_against_other_limits(self, tmp_path):
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", 0, 4, 1))
        check_limits(plan, LIMITS)
        with pytest.raises(PlanOutsideLimitsError, match=r"point 4 \(x = 4 mm\): x is outside "
                           r"the soft limits -3 to 3\.5 mm"):
            check_limits(plan, {"x": (-3, 3.5)})


class TestMalformed:
    @pytest.mark.parametrize("head, axes_text, key, words", [
        ('kind = "line"\nsettle_s = 0.2\ntraces = 4\n', [axis("x", 0, 1, 0)],
         "axes number 1 (x) step_mm", "0 mm: must be above 0"),
        ('kind = "line"\n' + HEAD, [axis("x", 0, 1, -0.5)],
         "axes number 1 (x) step_mm", "-0.5 mm: must be above 0"),
        ('kind = "line"\n' + HEAD, [axis("x", "nan", 1, 0.5)],
         "axes number 1 (x) start_mm", "expected a finite number, got nan"),
        ('kind = "line"\n' + HEAD, [axis("x", 0, "inf", 0.5)],
         "axes number 1 (x) stop_mm", "expected a finite number, got inf"),
        ('kind = "line"\n' + HEAD, [axis("x", '"0"', 1, 0.5)],
         "axes number 1 (x) start_mm", "expected a number, got '0'"),
        ('kind = "line"\nsettle_s = 0.2\ntraces = "8"\n', [axis("x", 0, 1, 1)],
         "traces", "expected a whole number, got '8'"),
        ('kind = "line"\nsettle_s = 0.2\ntraces = 0\n', [axis("x", 0, 1, 1)],
         "traces", "0 traces a point: expected 1 to 10000"),
        ('kind = "line"\nsettle_s = true\ntraces = 2\n', [axis("x", 0, 1, 1)],
         "settle_s", "expected a number, got True"),
        ('kind = "line"\nsettle_s = nan\ntraces = 2\n', [axis("x", 0, 1, 1)],
         "settle_s", "expected a finite number, got nan"),
        ('kind = "line"\ntraces = 2\n', [axis("x", 0, 1, 1)], "settle_s", "missing"),
        ('kind = "spiral"\n' + HEAD, [], "kind",
         "expected one of line, raster, volume, points, got 'spiral'"),
        ('kind = "line"\ncombine = "median"\n' + HEAD, [axis("x", 0, 1, 1)], "combine",
         "expected one of parameters, mean-waveform"),
        ('kind = "line"\nspeed_mm_s = 0\n' + HEAD, [axis("x", 0, 1, 1)], "speed_mm_s",
         "must be above 0 mm/s"),
        ('kind = "line"\nserpentine = true\n' + HEAD, [axis("x", 0, 1, 1)], "serpentine",
         "applies to a raster or a volume only"),
        ('kind = "line"\nserpentine = 1\n' + HEAD, [axis("x", 0, 1, 1)], "serpentine",
         "expected true or false"),
        ('kind = "line"\nspeed = 3\n' + HEAD, [axis("x", 0, 1, 1)], "speed",
         "unknown key (expected one of kind, settle_s"),
        ('kind = "raster"\n' + HEAD, [axis("x", 0, 1, 1)], "axes",
         "a raster takes 2 [[axes]] table(s), got 1"),
        ('kind = "volume"\n' + HEAD, [], "axes", "missing: a volume takes 3"),
        ('kind = "raster"\n' + HEAD, [axis("x", 0, 1, 1), axis("x", 0, 1, 1)],
         "axes number 2 name", "axis x is scanned twice"),
        ('kind = "line"\nfixed = { x = 1 }\n' + HEAD, [axis("x", 0, 1, 1)],
         "axes number 1 (x) name", "axis x is both scanned and fixed"),
        ('kind = "line"\nfixed = 3\n' + HEAD, [axis("x", 0, 1, 1)], "fixed",
         "expected a table of axis = position in mm"),
        ('kind = "line"\nfile = "a.csv"\n' + HEAD, [axis("x", 0, 1, 1)], "file",
         "a line plan takes [[axes]]"),
        ('kind = "points"\n' + HEAD, [], "file", "missing: the CSV of the points"),
        ('kind = "line"\n' + HEAD, ['[[axes]]\nname = "x"\nstart_mm = 0\nstop_mm = 1\n'],
         "axes number 1 step_mm", "missing"),
        ('kind = "line"\n' + HEAD, [axis("x", 0, 1, 1) + "speed = 2\n"],
         "axes number 1 speed", "unknown key (expected one of name, start_mm"),
        ('kind = "line"\n' + HEAD, [axis("x", -10, 10, 1e-9)], "axes number 1 (x) step_mm",
         f"is more than {MAX_POINTS} points"),
        ('kind = "volume"\n' + HEAD, [axis("x", -10, 10, 0.1), axis("y", -10, 10, 0.1),
                                      axis("z", 0, 80, 1)],
         "axes number 3 (z) step_mm", f"would have more than {MAX_POINTS} points"),
    ])
    def test_error_names_file_and_key(self, tmp_path, head, axes_text, key, words):
        with pytest.raises(ScanPlanError) as info:
            load(tmp_path, head, *axes_text)
        message = str(info.value)
        assert message.startswith(f"{tmp_path / 'plan.toml'}: {key}: "), message
        assert words in message, message
        assert info.value.key == key

    def test_bad_toml_and_missing_file(self, tmp_path):
        with pytest.raises(ScanPlanError, match=r"plan\.toml: not valid TOML"):
            load(tmp_path, 'kind = "line\n')
        with pytest.raises(ScanPlanError, match=r"absent\.toml: no such scan plan file"):
            load_plan(tmp_path / "absent.toml", limits=LIMITS)


class TestStored:
    def test_round_trip_through_strict_json(self, tmp_path):
        for plan in (
            load(tmp_path, 'kind = "volume"\nserpentine = true\nspeed_mm_s = 4\n' + HEAD,
                 axis("x", -1, 1, 0.3), axis("y", 2, -2, 1), axis("z", 20, 24, 2)),
            points_plan(tmp_path, "x,traces,settle_s\n1,,\n2,9,0.5\n-1.25,,\n",
                        'fixed = { z = 12.5 }\ncombine = "mean-waveform"\n'),
        ):
            text = json.dumps(plan.as_dict(), allow_nan=False)
            again = ScanPlan.from_dict(json.loads(text))
            assert again == plan
            assert [(p.index, p.position_mm, p.settle_s, p.traces) for p in again.points] \
                == [(p.index, p.position_mm, p.settle_s, p.traces) for p in plan.points]
            assert again.moved_axes == plan.moved_axes

    def test_round_trip_keeps_points_if_the_csv_changes(self, tmp_path):
        plan = points_plan(tmp_path, "x\n1\n2\n")
        stored = json.loads(json.dumps(plan.as_dict()))
        (tmp_path / "pts" / "list.csv").write_text("x\n5\n")
        assert positions(ScanPlan.from_dict(stored)) == [(1.0,), (2.0,)]

    @pytest.mark.parametrize("change", [
        lambda d: d.update(format=99),
        lambda d: d.update(kind="spiral"),
        lambda d: d.pop("points"),
        lambda d: d["points"][1].append(3.0),
        lambda d: d["points"][0].__setitem__(0, "a"),
        lambda d: d.update(point_traces=[1]),
        lambda d: d.update(settle_s=None),
        lambda d: d.update(traces=2.0),
        lambda d: d["points"].__setitem__(1, [True]),
    ])
    def test_damaged_stored_plan(self, tmp_path, change):
        data = load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", 0, 2, 1)).as_dict()
        change(data)
        with pytest.raises(ScanPlanError, match="stored scan plan"):
            ScanPlan.from_dict(data)


BENCH = """
[digitiser]
resource = "TCPIP0::127.0.0.1::5025::SOCKET"
profile = "dig.toml"

[calibration]
file = "cal.csv"

[stage]
profile = "stage.toml"
port = "/dev/pts/5"
[stage.limits]
x = [-20.0, 20.0]
z = [0.0, 80.0]
"""

SCAN = """
[scan]
kind = "raster"
settle_s = 0.5
traces = 3
serpentine = true
[[scan.axes]]
name = "x"
start_mm = -1.0
stop_mm = 1.0
step_mm = 1.0
[[scan.axes]]
name = "z"
start_mm = 30.0
stop_mm = 31.0
step_mm = 1.0
"""


def bench_file(tmp_path, text):
    for name in ("dig.toml", "stage.toml"):
        (tmp_path / name).write_text("# placeholder\n")
    (tmp_path / "cal.csv").write_text(CAL_TEXT.read_text())
    path = tmp_path / "bench.toml"
    path.write_text(text)
    return path


class TestBenchScanTable:
    def test_scan_table_is_parsed_and_checked(self, tmp_path):
        config = load_bench(bench_file(tmp_path, BENCH + SCAN))
        plan = config.scan
        assert plan is not None and plan.kind is PlanKind.RASTER
        assert positions(plan) == [(-1, 30), (0, 30), (1, 30), (1, 31), (0, 31), (-1, 31)]
        assert plan.source == f"{tmp_path / 'bench.toml'} [scan]"
        assert json.loads(plan.text)["kind"] == "raster"
        assert config.tables["scan"]["traces"] == 3
        json.dumps(config.tables, allow_nan=False)
        assert pickle.loads(pickle.dumps(config)) == config     # crosses to the child

    def test_without_scan_nothing_changes(self, tmp_path):
        config = load_bench(bench_file(tmp_path, BENCH))
        assert config.scan is None and "scan" not in config.tables

    def test_points_file_beside_the_bench(self, tmp_path):
        (tmp_path / "here.csv").write_text("x,z\n1,30\n")
        config = load_bench(bench_file(tmp_path, BENCH + '[scan]\nkind = "points"\n'
                                       'file = "here.csv"\nsettle_s = 0\ntraces = 1\n'))
        assert config.scan is not None
        assert positions(config.scan) == [(1.0, 30.0)]
        assert config.tables["scan"]["file"] == str(tmp_path / "here.csv")

    def test_errors_name_the_bench_and_the_scan_key(self, tmp_path):
        bad = SCAN.replace("step_mm = 1.0\n[[scan.axes]]", "step_mm = 0\n[[scan.axes]]")
        with pytest.raises(ScanPlanError, match=r"bench\.toml: \[scan\] axes number 1 \(x\) "
                           r"step_mm: 0 mm: must be above 0"):
            load_bench(bench_file(tmp_path, BENCH + bad))
        outside = SCAN.replace("stop_mm = 31.0", "stop_mm = 90.0")
        # z = 81 mm is row 51, odd: it runs back, so x = 1 mm comes first (3 * 51 = 153)
        with pytest.raises(PlanOutsideLimitsError, match=r"bench\.toml: point 153 \(x = 1 mm, "
                           r"z = 81 mm\): z is outside the soft limits 0 to 80 mm"):
            load_bench(bench_file(tmp_path, BENCH + outside))
        with pytest.raises(ScanPlanError, match=r"bench\.toml: \[scan\] kind: missing"):
            load_bench(bench_file(tmp_path, BENCH + "[scan]\ntraces = 2\n"))
        with pytest.raises(ScanPlanError, match=r"bench\.toml: \[scan\]: must be a table"):
            load_bench(bench_file(tmp_path, "scan = 3\n" + BENCH))

    def test_scan_without_a_stage_is_refused(self, tmp_path):
        no_stage = BENCH.split("[stage]")[0]
        with pytest.raises(PlanOutsideLimitsError, match=r"needs the bench file's \[stage\]"):
            load_bench(bench_file(tmp_path, no_stage + SCAN))


class TestDryRun:
    def test_travel_and_time_by_hand(self, tmp_path):
        plan = load(tmp_path, 'kind = "raster"\nspeed_mm_s = 2.0\nsettle_s = 0.5\n'
                    'traces = 10\nfixed = { z = 40 }\n', axis("x", 0, 3, 3), axis("y", 0, 4, 4))
        # points (0,0) (3,0) (0,4) (3,4), from the start (0, 0, 30): moves of
        # |dz| 10, then 3, 5 (the 3-4-5 triangle), 3 mm
        summary = summarise_plan(plan, start_mm={"x": 0.0, "y": 0.0, "z": 30.0, "w": 7.0},
                                 trace_rate_hz=25.0)
        assert summary.travel_mm == {"x": 9.0, "y": 4.0, "z": 10.0}
        assert summary.travel_total_mm == pytest.approx(10 + 3 + 5 + 3, abs=1e-12)
        assert summary.move_s == pytest.approx(21 / 2.0)
        assert summary.settle_s == pytest.approx(4 * 0.5)
        assert summary.acquire_s == pytest.approx(4 * 10 / 25.0)
        assert summary.total_s == pytest.approx(10.5 + 2.0 + 1.6)
        assert summary.speed_from_plan and summary.start_mm == {"x": 0.0, "y": 0.0, "z": 30.0}
        text = summary.text()
        assert "4 points" in text and "an estimate" in text and "21.0 mm in all" in text
        assert "x 9.0 mm, y 4.0 mm, z 10.0 mm" in text and "at 25 traces/s" in text

    def test_travel_against_numpy(self, tmp_path):
        plan = load(tmp_path, 'kind = "raster"\nserpentine = true\n' + HEAD,
                    axis("x", -5, 5, 0.25), axis("y", -4, 4, 0.5))
        start = np.array([[2.0, -9.0]])
        path = np.vstack([start, np.array(positions(plan, ("x", "y")))])
        steps = np.diff(path, axis=0)
        summary = summarise_plan(plan, start_mm={"x": 2.0, "y": -9.0})
        # numpy: the sum of the Euclidean lengths of successive differences
        assert summary.travel_total_mm == pytest.approx(np.linalg.norm(steps, axis=1).sum(),
                                                        rel=1e-12)
        np.testing.assert_allclose([summary.travel_mm["x"], summary.travel_mm["y"]],
                                   np.abs(steps).sum(axis=0), rtol=1e-12)
        assert not summary.speed_from_plan and summary.speed_mm_s == DEFAULT_SPEED_MM_S
        assert summary.move_s == pytest.approx(summary.travel_total_mm / DEFAULT_SPEED_MM_S)
        assert summary.acquire_s == pytest.approx(len(plan.points) * 4 / 20.0)
        assert "a default; the plan gives no speed_mm_s" in summary.text()

    def test_without_start_counts_from_the_first_point(self, tmp_path):
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", 1, 3, 1))
        summary = summarise_plan(plan)
        assert summary.travel_total_mm == 2.0 and summary.travel_mm == {"x": 2.0}

    def test_point_listing_short_and_long(self, tmp_path):
        short = summarise_plan(load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", 0, 3, 1)))
        assert [p.index for p in short.shown] == [0, 1, 2, 3]
        assert "not shown" not in short.text()
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", 0, 9.9, 0.1))
        long = summarise_plan(plan, show=3)
        assert [p.index for p in long.shown] == [0, 1, 2, 97, 98, 99]
        lines = long.lines()
        assert "points (the first and last 3 of 100):" in lines
        assert any(line.strip() == "...  (94 points not shown)" for line in lines)
        assert any(line.split() == ["99", "9.900"] for line in lines)

    def test_overrides_are_listed(self, tmp_path):
        plan = points_plan(tmp_path, "x,traces\n1,\n2,9\n")
        summary = summarise_plan(plan)
        assert summary.acquire_s == pytest.approx((4 + 9) / 20.0)
        assert any(line.split() == ["1", "2.000", "0.25", "9"] for line in summary.lines())

    @pytest.mark.parametrize("options", [{"trace_rate_hz": 0.0},
                                         {"default_speed_mm_s": math.nan},
                                         {"start_mm": {"x": math.inf}}])
    def test_bad_rate_or_speed(self, tmp_path, options):
        plan = load(tmp_path, 'kind = "line"\n' + HEAD, axis("x", 0, 1, 1))
        with pytest.raises(ScanPlanError, match="dry run"):
            summarise_plan(plan, **options)


def _literal_blocks(doc: str) -> list[str]:
    """The indented blocks after the lines ending in ``::`` of a docstring."""
    blocks, lines = [], doc.splitlines()
    for i, line in enumerate(lines):
        if line.rstrip().endswith("::"):
            block = []
            for later in lines[i + 2:]:
                if later and not later.startswith("    "):
                    break
                block.append(later[4:])
            blocks.append("\n".join(block).strip() + "\n")
    return blocks


class TestExamples:
    def test_the_readme_example_parses(self, tmp_path):
        readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
        section = readme.split("### Scan plans (TOML)", 1)[1]
        block = section.split("```toml\n", 1)[1].split("```", 1)[0]
        plan = load_plan(plan_file(tmp_path, block), limits=LIMITS)
        assert plan.kind is PlanKind.RASTER and plan.serpentine
        assert len(plan.points) == 25 * 25 and plan.fixed_mm == {"z": 40.0}

    def test_the_docstring_examples_parse(self, tmp_path):
        import tankside.monitor.live.scanplan as module

        raster, points, csv_text = _literal_blocks(module.__doc__ or "")[:3]
        plan = load_plan(plan_file(tmp_path, raster), limits=LIMITS)
        assert len(plan.points) == 25 * 25 and plan.speed_mm_s == 5.0
        (tmp_path / "points.csv").write_text(csv_text)
        plan = load_plan(plan_file(tmp_path, points, name="points.toml"), limits=LIMITS)
        assert [p.traces for p in plan.points] == [16, 32, 16]
        assert plan.points[2].position_mm == {"x": 1.5, "y": 0.0, "z": 40.0}

    def test_the_bench_docstring_example_parses(self, tmp_path):
        import tankside.monitor.live.benchfile as module

        doc = module.__doc__ or ""
        block = _literal_blocks(doc)[0].split("[scan]", 1)[1].split("\n\n", 1)[0]
        config = load_bench(bench_file(tmp_path, BENCH + "[scan]" + block))
        assert config.scan is not None
        assert positions(config.scan) == [(float(z),) for z in range(20, 61)]
