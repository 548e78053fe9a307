"""Beam figures of a scan (monitor/acoustics/beam.py, scangrid.py) on analytic beams.

References used beside the checks:
- Gaussian profile exp(-x^2/w^2): closed-form level crossings (algebra).
- Linear interpolation error bound |f - L| <= h^2/8 max|f''| on the interval (the
  standard bound, any numerical-analysis text, e.g. Burden & Faires, "Numerical
  Analysis", the Lagrange interpolation error theorem; recalled from memory).
- Circular-piston far-field directivity 2 J1(v)/v (Kinsler, Frey et al., "Fundamentals
  of Acoustics", the baffled circular piston; recalled from memory), evaluated with
  scipy.special.j1 and its level crossings found with scipy.optimize.brentq.
- Derating and mechanical index: IEC 62359 (0.3 dB cm^-1 MHz^-1; MI = p_r,alpha /
  sqrt(f_awf) with p_r in MPa and f in MHz), worked by hand here.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.optimize
import scipy.special

from tankside.monitor.acoustics.beam import (
    BEAM_LEVELS_DB,
    DERATING_DEFINITION,
    MI_DEFINITION,
    WIDTH_DEFINITION,
    Quantity,
    axial_figures,
    beam_figures,
    beam_widths,
    derating_factor,
    maximum_position,
)
from tankside.monitor.acoustics.scangrid import ScanShape, coordinate_columns, grid_points
from tankside.monitor.errors import ConfigError, ScanDataError


def gaussian(x, w):
    return np.exp(-(x / w) ** 2)


def gaussian_crossing(w, ratio):
    """exp(-x^2/w^2) = ratio  ->  x = w sqrt(-ln ratio) (algebra)."""
    return w * math.sqrt(-math.log(ratio))


def interpolation_error(second_derivative, a, b, h):
    """h^2/8 max|f''| on [a, b] (Lagrange interpolation error bound), the maximum taken on
    a dense sampling of the interval with a 1 % margin."""
    t = np.linspace(a, b, 2001)
    return 1.01 * h * h / 8.0 * float(np.max(np.abs(second_derivative(t))))


def line(x, values):
    """A line scan along x at y = 0, z = 40 mm."""
    x = np.asarray(x, dtype=float)
    return beam_figures({"x": x, "y": np.zeros_like(x), "z": np.full_like(x, 40.0)},
                        values)


class TestGaussianWidths:
    # -6 dB of pressure: 20 log10 p = -6  ->  p = 10^(-6/20) = 0.50119  ->
    # x = w sqrt((6/20) ln 10) = 0.8311 w. (With the usual rounding -6.02 dB -> p = 0.5,
    # x = w sqrt(ln 2) = 0.8326 w; the levels here are the exact -3, -6, -12, -20 dB.)
    W = 2.0

    @staticmethod
    def second(t, w=W):
        return (4 * t ** 2 / w ** 4 - 2 / w ** 2) * np.exp(-(t / w) ** 2)

    @pytest.mark.parametrize("step", [W / 4, W])
    def test_widths_within_the_interpolation_error(self, step):
        w = self.W
        x = np.arange(-8 * w, 8 * w + step / 2, step)    # symmetric, samples the peak
        figures = line(x, gaussian(x, w))
        for level in BEAM_LEVELS_DB:
            ratio = 10 ** (level / 20)
            half = gaussian_crossing(w, ratio)
            a = step * math.floor(half / step)            # the bracketing points
            e = interpolation_error(self.second, a, a + step, step)
            # |L - f| <= e on the bracket, so f(x_L) lies in [ratio - e, ratio + e] and,
            # f decreasing there, x_L between the crossings of those two levels (at step w
            # and -20 dB, ratio - e < 0: the bound says nothing on that side)
            lo = gaussian_crossing(w, min(ratio + e, 1.0))
            hi = gaussian_crossing(w, ratio - e) if ratio > e else math.inf
            got = figures.width("x", level)
            assert got is not None and got.width_mm is not None, got
            assert 2 * lo <= got.width_mm <= 2 * hi
            assert got.minus_mm == pytest.approx(-got.plus_mm, abs=1e-12)
            assert got.reason is None

    def test_fine_step_is_close(self):
        # at w/4 the bound above is tight: the -6 dB width is within 1 % of 2 w sqrt(0.3 ln 10)
        w, step = self.W, self.W / 4
        x = np.arange(-8 * w, 8 * w + step / 2, step)
        got = line(x, gaussian(x, w)).width("x", -6.0)
        assert got is not None and got.width_mm is not None
        assert got.width_mm == pytest.approx(2 * w * math.sqrt(0.3 * math.log(10)), rel=0.01)

    def test_intensity_levels_are_10_log10(self):
        # a power quantity (PII ~ p^2) is at -6 dB (10 log10) where the pressure is at
        # -6 dB (20 log10): levels of power and root-power quantities (ISO 80000-3)
        w, step = self.W, self.W / 16
        x = np.arange(-6 * w, 6 * w + step / 2, step)
        p = gaussian(x, w)
        grid = grid_points({"x": x}, p ** 2)
        widths = beam_widths(grid, levels_db=(-6.0,), quantity=Quantity.INTENSITY)
        assert widths[0].width_mm == pytest.approx(
            2 * gaussian_crossing(w, 10 ** (-6 / 20)), rel=2e-3)


class TestJincSideLobe:
    # |2 J1(v)/v| has its first zero at v = 3.8317 and a first side lobe of 0.132
    # (-17.6 dB) at v = 5.136, above the -20 dB level 0.1: a search from the outside in
    # would take the side lobe's outer flank for the -20 dB crossing.
    SCALE = 2.0                   # v per mm
    STEP = 0.05

    def profile(self):
        x = np.arange(-6.0, 6.0 + self.STEP / 2, self.STEP)
        v = self.SCALE * x
        with np.errstate(invalid="ignore", divide="ignore"):
            p = np.where(v == 0, 1.0, np.abs(2 * scipy.special.j1(v) / v))
        return x, p

    @staticmethod
    def jinc(v):
        return 2 * scipy.special.j1(v) / v

    def crossing_v(self, ratio):
        first_zero = scipy.special.jn_zeros(1, 1)[0]
        return scipy.optimize.brentq(lambda v: self.jinc(v) - ratio, 1e-9, first_zero)

    def second(self, x):
        # d^2/dx^2 of 2 J1(sx)/(sx) by central differences of the scipy function (h 1e-4)
        d = 1e-4
        v = self.SCALE * np.asarray(x)
        return (self.jinc(v + self.SCALE * d) - 2 * self.jinc(v)
                + self.jinc(v - self.SCALE * d)) / d ** 2

    @pytest.mark.parametrize("level", [-6.0, -20.0])
    def test_main_lobe_crossing_against_brentq(self, level):
        x, p = self.profile()
        assert p[np.abs(x) > 2.2].max() > 10 ** (-20 / 20)     # the side lobe is there
        ratio = 10 ** (level / 20)
        half = self.crossing_v(ratio) / self.SCALE
        a = self.STEP * math.floor(half / self.STEP)
        e = interpolation_error(self.second, a, a + self.STEP, self.STEP)
        lo = self.crossing_v(ratio + e) / self.SCALE
        hi = self.crossing_v(ratio - e) / self.SCALE
        got = line(x, p).width("x", level)
        assert got is not None and got.width_mm is not None
        assert 2 * lo <= got.width_mm <= 2 * hi
        # inside the main lobe (first zero at 3.8317 / SCALE mm)
        assert got.width_mm < 2 * scipy.special.jn_zeros(1, 1)[0] / self.SCALE


class TestRasterMaximum:
    def test_shifted_maximum_recovered_by_the_parabola(self):
        step = 0.5
        xs = np.arange(-5.0, 5.0 + step / 2, step)
        ys = np.arange(-4.0, 4.0 + step / 2, step)
        X, Y = np.meshgrid(xs, ys, indexing="ij")
        x0, y0 = 0.37, -1.18                                  # off the grid
        V = np.exp(-((X - x0) ** 2 + (Y - y0) ** 2) / 1.5 ** 2)
        grid = grid_points({"x": X.ravel(), "y": Y.ravel(), "z": np.full(X.size, 30.0)},
                           V.ravel())
        assert grid.shape is ScanShape.RASTER and grid.axes == ("x", "y")
        assert grid.fixed_mm == {"z": 30.0}
        np.testing.assert_array_equal(grid.values, V)          # numpy meshgrid "ij" order
        m = maximum_position(grid)
        assert m.grid_mm == {"x": 0.5, "y": -1.0}
        # the grid point is a quarter step and more away; the vertex within 0.05 step
        assert abs(m.grid_mm["x"] - x0) > 0.2 * step and abs(m.grid_mm["y"] - y0) > 0.2 * step
        assert m.position_mm["x"] == pytest.approx(x0, abs=0.05 * step)
        assert m.position_mm["y"] == pytest.approx(y0, abs=0.05 * step)
        assert m.position_mm["z"] == 30.0 and m.refined == {"x": True, "y": True}

    def test_parabola_vertex_against_numpy_polyfit(self):
        # uneven spacing: the vertex of numpy.polyfit's quadratic through the three points
        x = np.array([0.0, 1.0, 2.5, 3.0, 5.0])
        y = np.array([0.1, 0.7, 1.0, 0.8, 0.2])
        m = maximum_position(grid_points({"x": x}, y))
        a, b, _ = np.polyfit(x[1:4], y[1:4], 2)
        assert m.position_mm["x"] == pytest.approx(-b / (2 * a), abs=1e-12)

    def test_volume(self):
        c = np.arange(3.0)
        X, Y, Z = np.meshgrid(c, c + 10, c + 20, indexing="ij")
        V = -((X - 1) ** 2 + (Y - 11) ** 2 + (Z - 21.2) ** 2)
        figures = beam_figures({"x": X.ravel(), "y": Y.ravel(), "z": Z.ravel()}, V.ravel())
        assert figures.grid.shape is ScanShape.VOLUME
        # an exact parabola: the vertex is exact (1, 11, 21.2)
        assert figures.maximum.position_mm == pytest.approx({"x": 1.0, "y": 11.0, "z": 21.2})
        # the maximum is negative: widths in dB cannot be had, and say so
        assert all(w.width_mm is None and "not positive" in (w.reason or "")
                   for w in figures.widths)


class TestPartialScans:
    W = 1.0
    STEP = 0.25

    def x(self):
        return np.arange(-4.0, 4.0 + self.STEP / 2, self.STEP)

    def test_hole_beyond_a_crossing_and_before_another(self):
        x = self.x()
        p = gaussian(x, self.W)
        p[x == 1.25] = np.nan         # beyond -6 dB (0.83), before -20 dB (1.517)
        figures = line(x, p)
        w6 = figures.width("x", -6.0)
        assert w6 is not None and w6.width_mm is not None
        w20 = figures.width("x", -20.0)
        assert w20 is not None and w20.width_mm is None and w20.minus_mm is not None
        assert w20.plus_mm is None
        assert w20.reason == ("no value yet at x = 1.250 mm on the +x side, before the "
                              "profile falls to -20 dB")

    def test_never_falls_to_minus_20_db(self):
        x = self.x()
        figures = line(x, gaussian(x, 3.0))      # -20 dB at 4.55 mm, beyond the scan
        w12 = figures.width("x", -12.0)
        assert w12 is not None and w12.width_mm is not None
        w20 = figures.width("x", -20.0)
        assert w20 is not None and w20.width_mm is None and w20.minus_mm is None
        assert w20.reason == ("profile does not fall to -20 dB within the scan on the -x "
                              "side; profile does not fall to -20 dB within the scan on "
                              "the +x side")

    def test_maximum_at_the_edge_is_not_refined_and_not_extrapolated(self):
        x = self.x()
        figures = line(x, gaussian(x - 4.0, self.W))
        assert figures.maximum.grid_mm == {"x": 4.0}
        assert figures.maximum.refined == {"x": False}
        w6 = figures.width("x", -6.0)
        assert w6 is not None and w6.width_mm is None and w6.plus_mm is None
        assert w6.minus_mm == pytest.approx(4.0 - gaussian_crossing(self.W, 10 ** -0.3),
                                            abs=0.01)

    def test_nothing_done(self):
        x = self.x()
        figures = line(x, np.full(x.size, np.nan))
        assert figures.maximum.index is None
        assert figures.maximum.reason == "no point has a value yet"
        assert len(figures.widths) == 4
        assert all(w.width_mm is None and w.reason == "no point has a value yet"
                   for w in figures.widths)
        json.dumps(figures.as_dict(), allow_nan=False)

    def test_points_arriving_one_by_one(self):
        # serpentine raster, recomputed after each point as the scan does
        xs = np.arange(-2.0, 2.01, 0.5)
        ys = np.arange(-2.0, 2.01, 0.5)
        order = [(i, j if i % 2 == 0 else len(ys) - 1 - j)
                 for i in range(len(xs)) for j in range(len(ys))]
        px = np.array([xs[i] for i, _ in order])
        py = np.array([ys[j] for _, j in order])
        truth = np.exp(-(px ** 2 + (py - 0.3) ** 2))
        values = np.full(truth.size, np.nan)
        seen = set()
        for n in range(truth.size + 1):
            figures = beam_figures({"x": px, "y": py}, values)
            d = figures.as_dict()
            json.dumps(d, allow_nan=False)
            assert d["cells_with_value"] == n and d["shape"] == "raster"
            seen.update(w.reason for w in figures.widths if w.reason)
            if n < truth.size:
                values[n] = truth[n]
        assert any("no value yet" in r for r in seen)
        full = beam_figures({"x": px, "y": py}, truth)
        assert figures.as_dict() == full.as_dict()
        assert full.maximum.position_mm["y"] == pytest.approx(0.3, abs=0.05)


class TestGridding:
    def test_one_count_of_jitter(self):
        # readings off by one count (0.001 mm) either way still fall on their grid lines
        rng = np.random.default_rng(7)
        xs, ys = np.arange(0.0, 3.01, 0.25), np.arange(-1.0, 1.01, 0.5)
        X, Y = np.meshgrid(xs, ys, indexing="ij")
        V = X + 10 * Y
        jx = X.ravel() + 0.001 * rng.integers(-1, 2, X.size)
        jy = Y.ravel() + 0.001 * rng.integers(-1, 2, X.size)
        jz = 50.0 + 0.001 * rng.integers(-1, 2, X.size)
        grid = grid_points({"x": jx, "y": jy, "z": jz}, V.ravel())
        assert grid.axes == ("x", "y")
        np.testing.assert_allclose(grid.coordinates_mm[0], xs, atol=0.001)
        np.testing.assert_allclose(grid.coordinates_mm[1], ys, atol=0.001)
        assert grid.fixed_mm["z"] == pytest.approx(50.0, abs=0.001)
        np.testing.assert_array_equal(grid.values, V)
        assert (grid.counts == 1).all()

    def test_cells_averaged_and_other_parameters_filled(self):
        grid = grid_points({"x": [0.0, 1.0, 1.0, 2.0]}, [1.0, 2.0, 4.0, np.nan])
        np.testing.assert_array_equal(grid.values, [1.0, 3.0, np.nan])
        np.testing.assert_array_equal(grid.counts, [1, 2, 0])
        np.testing.assert_array_equal(grid.fill([5.0, 6.0, np.nan, 7.0]), [5.0, 6.0, 7.0])

    def test_readings_not_on_a_grid(self):
        with pytest.raises(ScanDataError, match="spread over 0.0080 mm"):
            grid_points({"x": [0.0, 0.004, 0.008, 1.0]}, [1, 2, 3, 4])

    @pytest.mark.parametrize("coords, values, match", [
        ({"x": [0.0, 1.0], "y": [0.0]}, [1.0, 2.0], "axis y has 1 coordinates"),
        ({"x": [0.0, np.nan]}, [1.0, 2.0], r"point 1 has a value \(2\) but no position "
                                           r"\(x = nan\)"),
        ({"x": [0.0, "a"]}, [1.0, 2.0], "coordinates of axis x are not numbers"),
        ({"x": [0.0, 1.0]}, [1.0], "one number per point"),
        ({}, [], "at least one axis"),
        ({a: [0.0, 1.0] for a in "xyzw"}, [1.0, 2.0], "vary along 4 axes"),
    ])
    def test_malformed_points(self, coords, values, match):
        with pytest.raises(ScanDataError, match=match) as caught:
            grid_points(coords, values)
        assert isinstance(caught.value, ConfigError)

    def test_points_not_reached_without_position(self):
        # a point given by its reading, not known before it is reached, is left out
        columns = coordinate_columns([{"x": 0.0, "y": 5.0}, {"x": 1.0, "y": 5.0}, {},
                                      {"x": 3.0}])
        np.testing.assert_array_equal(columns["y"], [5.0, 5.0, np.nan, np.nan])
        grid = grid_points(columns, [1.0, 2.0, np.nan, np.nan])
        assert grid.axes == ("x",) and grid.fixed_mm == {"y": 5.0}
        np.testing.assert_array_equal(grid.values, [1.0, 2.0])
        np.testing.assert_array_equal(grid.placed, [True, True, False, False])
        with pytest.raises(ScanDataError, match="point 3 has a value"):
            grid.fill([1.0, 2.0, np.nan, 4.0])

    def test_single_point(self):
        figures = beam_figures({"x": [1.0], "y": [2.0]}, [0.5])
        assert figures.grid.shape is ScanShape.POINT and figures.widths == ()
        assert figures.maximum.position_mm == {"x": 1.0, "y": 2.0}

    def test_bad_level(self):
        with pytest.raises(ScanDataError, match="negative number of dB"):
            beam_figures({"x": [0.0, 1.0]}, [1.0, 0.5], levels_db=(6.0,))


class TestDerating:
    def test_hand_worked_factor(self):
        # IEC 62359, 0.3 dB cm^-1 MHz^-1: 3 MHz at 5 cm -> 0.3 * 3 * 5 = 4.5 dB ->
        # pressure factor 10^(-4.5/20) = 0.5957, PII factor 10^(-4.5/10) = 0.3548
        assert float(derating_factor(50.0, 3e6)) == pytest.approx(0.5957, abs=5e-5)
        assert float(derating_factor(50.0, 3e6)) ** 2 == pytest.approx(0.3548, abs=5e-5)

    # An axial PII profile exp(-(z - z0)^2 / s^2) derated by 10^(-a f z / 10) =
    # exp(-beta z), beta = ln(10) a f[MHz] / 100 per mm: completing the square, the product
    # peaks at z0 - beta s^2 / 2, toward the source (algebra).
    Z0, S, F = 60.0, 20.0, 3e6
    OFFSET = 12.0        # the axis origin is 12 mm from the source face
    STEP = 1.0

    def axial(self, db_per_cm_mhz=0.3):
        depth = np.arange(20.0, 100.0 + self.STEP / 2, self.STEP)
        z = depth - self.OFFSET                                   # stage coordinate
        pii = 50.0 * np.exp(-((depth - self.Z0) / self.S) ** 2)   # J m^-2 (invented)
        p_r = 2.0e6 * np.sqrt(pii / 50.0)                         # Pa (invented)
        coords = {"x": np.full(z.size, 0.4), "z": z}
        grid = grid_points(coords, p_r)
        return axial_figures(grid, pii, p_r, self.F, source_distance_mm=self.OFFSET,
                             db_per_cm_mhz=db_per_cm_mhz)

    def test_depth_of_maximum_moves_toward_the_source(self):
        beta = math.log(10) * 0.3 * (self.F * 1e-6) / 100.0
        expected = self.Z0 - beta * self.S ** 2 / 2                 # 55.86 mm
        derated = self.axial()
        plain = self.axial(db_per_cm_mhz=0.0)
        assert plain.depth_of_max_mm == pytest.approx(self.Z0, abs=0.02 * self.STEP)
        assert derated.depth_of_max_mm == pytest.approx(expected, abs=0.05 * self.STEP)
        assert derated.depth_of_max_mm < plain.depth_of_max_mm - 3 * self.STEP
        assert derated.refined and derated.through_mm == {"x": 0.4}
        np.testing.assert_allclose(derated.depth_mm, np.arange(20.0, 100.5, 1.0))

    def test_mechanical_index_at_that_depth(self):
        # hand computation at z = z0 - beta s^2 / 2: p_r(z) = 2 MPa exp(-(z-z0)^2/(2 s^2)),
        # derated by 10^(-0.3 * 3 * z[cm] / 20); MI = p_r,alpha[MPa] / sqrt(3) (IEC 62359,
        # C_MI = 1 MPa MHz^-1/2)
        beta = math.log(10) * 0.3 * 3.0 / 100.0
        z = self.Z0 - beta * self.S ** 2 / 2
        p_r = 2.0 * math.exp(-((z - self.Z0) / self.S) ** 2 / 2)        # MPa
        p_r_alpha = p_r * 10 ** (-0.3 * 3.0 * (z / 10) / 20)
        mi = p_r_alpha / math.sqrt(3.0)
        got = self.axial()
        # p_r,alpha is interpolated linearly between points 1 mm apart near its peak,
        # where its curvature is about 1/s^2 of itself: within h^2/(8 s^2) = 3.1e-4
        # (the interpolation bound); the depth's own error enters at second order
        rel = 1.1 * self.STEP ** 2 / (8 * self.S ** 2)
        assert got.mechanical_index == pytest.approx(mi, rel=rel)
        assert got.p_r_derated_pa_at_max == pytest.approx(p_r_alpha * 1e6, rel=rel)
        assert got.f_awf_hz_at_max == pytest.approx(3e6)
        assert got.reason is None

    def test_derated_pii_along_the_axis(self):
        got = self.axial()
        d = got.depth_mm
        expected = 50.0 * np.exp(-((d - self.Z0) / self.S) ** 2) * 10 ** (-0.3 * 3 * d / 100)
        np.testing.assert_allclose(got.pii_derated_j_per_m2, expected, rtol=1e-12)

    def test_through_beam_figures_with_holes_and_json(self):
        depth = np.arange(20.0, 100.5, 1.0)
        pii = 50.0 * np.exp(-((depth - self.Z0) / self.S) ** 2)
        p_r = 2.0e6 * np.sqrt(pii / 50.0)
        p_r[30:] = np.nan                      # done up to 49 mm from the face
        figures = beam_figures({"z": depth - self.OFFSET}, p_r, pii_j_per_m2=pii,
                               p_r_pa=p_r, f_awf_hz=np.full(depth.size, self.F),
                               source_distance_mm=self.OFFSET)
        assert figures.axial is not None
        # the largest derated PII so far is at the last done point: not refined
        assert figures.axial.depth_of_max_mm == 49.0 and not figures.axial.refined
        d = figures.as_dict()
        json.dumps(d, allow_nan=False)
        assert d["axial"]["pii_derated_j_per_m2"][30] is None
        assert d["axial"]["depth_of_max_mm"] == 49.0
        assert d["definitions"]["widths"] == WIDTH_DEFINITION
        assert d["definitions"]["derating"] == DERATING_DEFINITION
        assert d["definitions"]["mechanical_index"] == MI_DEFINITION

    def test_beam_axis_not_scanned(self):
        x = np.arange(-2.0, 2.01, 0.5)
        got = beam_figures({"x": x, "z": np.full(x.size, 30.0)}, gaussian(x, 1.0),
                           pii_j_per_m2=gaussian(x, 1.0), p_r_pa=gaussian(x, 1.0),
                           f_awf_hz=3e6, source_distance_mm=10.0).axial
        assert got is not None and got.mechanical_index is None
        assert got.reason == "the beam axis z is not scanned (it stays at 30.000 mm)"

    @pytest.mark.parametrize("kwargs, match", [
        ({"source_distance_mm": -5.0}, "behind the source face"),
        ({"source_distance_mm": 10.0, "beam_axis": "w"}, "beam axis 'w' is not an axis"),
        ({"source_distance_mm": 10.0, "f_awf_hz": 0.0}, "not a positive frequency"),
        ({"source_distance_mm": None}, "missing: source_distance_mm"),
    ])
    def test_malformed_axial_inputs(self, kwargs, match):
        z = np.arange(0.0, 4.0)
        args = {"pii_j_per_m2": z + 1, "p_r_pa": z + 1, "f_awf_hz": 3e6, **kwargs}
        with pytest.raises(ScanDataError, match=match):
            beam_figures({"z": z}, z + 1, **args)
