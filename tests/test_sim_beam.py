"""The simulated scene's invented focused field (simulators/focused_field.py): its limits
against textbook diffraction results, its quadrature against scipy, and its truth figures
against the function itself."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.optimize import brentq, minimize_scalar
from scipy.signal import argrelmax
from scipy.special import j0, j1, jn_zeros

from tankside.simulators.focused_field import (
    MINUS_3DB,
    MINUS_6DB,
    FocusedSource,
    axial_maximum,
    beam_factor,
    beam_truth,
    field_amplitude,
)
from tankside.simulators.scene import Drive, Scene, SceneParameters, acoustic_pressure_pa
from tankside.simulators.scene import beam_factor as scene_beam_factor
from tankside.simulators.scene import beam_truth as scene_beam_truth

F_HZ = 3.5e6
SOURCE = SceneParameters().source
K = 2 * math.pi * F_HZ / SOURCE.sound_speed_m_per_s
A = SOURCE.radius_m
D = SOURCE.focal_distance_m
GAIN = K * A * A / (2 * D)
TRUTH = beam_truth(F_HZ, SOURCE)


def fresnel_by_quad(r_m: float, distance_m: float) -> float:
    """The Fresnel integral of a focused circular piston, integrated by scipy's adaptive
    quad: (k a^2 / z') |int_0^1 J0(v t) exp(i alpha t^2) t dt| (Kino 1987, ch. 3; Born and
    Wolf 1999, sec. 8.8; chapters recalled from memory)."""
    v = K * A * r_m / distance_m
    alpha = 0.5 * K * A * A * (1 / distance_m - 1 / D)
    opts = {"limit": 400, "epsabs": 1e-14, "epsrel": 1e-12}
    re = quad(lambda t: j0(v * t) * math.cos(alpha * t * t) * t, 0, 1, **opts)[0]
    im = quad(lambda t: j0(v * t) * math.sin(alpha * t * t) * t, 0, 1, **opts)[0]
    return K * A * A / distance_m * abs(complex(re, im))


def oneil_on_axis(distance_m: float) -> float:
    """On-axis amplitude of a focused piston over the face pressure, paraxial form of
    O'Neil (1949): (k a^2 / (2 z')) |sin w / w|, w = (k a^2 / 4)(1/z' - 1/d)."""
    w = 0.25 * K * A * A * (1 / distance_m - 1 / D)
    return K * A * A / (2 * distance_m) * (1.0 if w == 0 else abs(math.sin(w) / w))


class TestFieldAmplitude:
    @pytest.mark.parametrize("r_mm", [0.0, 0.4, 1.0, 2.5, 6.0, 15.0])
    @pytest.mark.parametrize("z_mm", [-35.0, -10.0, -1.0, 0.0, 4.0, 20.0, 60.0])
    def test_quadrature_against_scipy_quad(self, r_mm, z_mm):
        got = field_amplitude((r_mm * 1e-3, 0.0, z_mm * 1e-3), F_HZ, SOURCE)
        expected = fresnel_by_quad(r_mm * 1e-3, D + z_mm * 1e-3)
        assert got == pytest.approx(expected, rel=1e-9, abs=1e-11 * GAIN)

    def test_geometric_focal_plane_is_the_airy_pattern(self):
        # In the focal plane P = G 2 J1(v)/v, v = k a r / d: the Fraunhofer pattern of a
        # circular aperture (Born and Wolf 1999, sec. 8.5.2; Kino 1987), here with
        # scipy.special.j1.
        x = np.linspace(1e-6, 4e-3, 61)
        v = K * A * x / D
        got = [field_amplitude((xi, 0.0, 0.0), F_HZ, SOURCE) for xi in x]
        np.testing.assert_allclose(got, GAIN * np.abs(2 * j1(v) / v), rtol=1e-10, atol=1e-12)
        assert field_amplitude((0.0, 0.0, 0.0), F_HZ, SOURCE) == pytest.approx(GAIN, rel=1e-12)

    def test_on_axis_is_oneil_paraxial(self):
        # through the focal zone and the first axial side lobes on both sides
        for z in np.linspace(-30e-3, 60e-3, 91):
            got = field_amplitude((0.0, 0.0, z), F_HZ, SOURCE)
            assert got == pytest.approx(oneil_on_axis(D + z), rel=1e-10, abs=1e-12), z

    def test_nothing_at_or_behind_the_source(self):
        assert field_amplitude((0.0, 0.0, -D), F_HZ, SOURCE) == 0.0
        assert field_amplitude((1e-3, 0.0, -D - 0.01), F_HZ, SOURCE) == 0.0

    @pytest.mark.parametrize("bad", [0.0, -1e6, float("nan"), float("inf")])
    def test_rejects_a_bad_frequency(self, bad):
        with pytest.raises(ValueError, match="frequency"):
            field_amplitude((0.0, 0.0, 0.0), bad, SOURCE)

    def test_rejects_a_bad_source(self):
        with pytest.raises(ValueError, match="radius_m"):
            FocusedSource(radius_m=0.0)
        with pytest.raises(ValueError, match="stretch_y"):
            FocusedSource(stretch_y=float("nan"))


class TestBeamFactor:
    def test_symmetric_about_both_transverse_axes(self):
        rng = np.random.default_rng(12)
        for x, y, z in rng.uniform([-3e-3, -3e-3, -15e-3], [3e-3, 3e-3, 15e-3], (20, 3)):
            b = beam_factor((x, y, z), F_HZ, SOURCE)
            for sx, sy in ((-1, 1), (1, -1), (-1, -1)):
                assert beam_factor((sx * x, sy * y, z), F_HZ, SOURCE) == b

    def test_y_is_x_stretched_by_the_invented_factor(self):
        s = SOURCE.stretch_y
        for r, z in ((0.3e-3, 0.0), (1.1e-3, -4e-3), (2.0e-3, 7e-3)):
            assert beam_factor((0.0, s * r, z), F_HZ, SOURCE) == pytest.approx(
                beam_factor((r, 0.0, z), F_HZ, SOURCE), rel=1e-12)

    def test_maximum_one_at_the_truth_point(self):
        zf = TRUTH.focus_z_m
        assert beam_factor((0.0, 0.0, zf), F_HZ, SOURCE) == pytest.approx(1.0, abs=1e-12)
        for dz in (-1e-4, -1e-5, 1e-5, 1e-4):
            assert beam_factor((0.0, 0.0, zf + dz), F_HZ, SOURCE) < 1.0
        grid = [beam_factor((x, y, z), F_HZ, SOURCE)
                for x in np.linspace(-2e-3, 2e-3, 9) for y in np.linspace(-2e-3, 2e-3, 9)
                for z in np.linspace(-20e-3, 20e-3, 11)]
        assert max(grid) <= 1.0 + 1e-12

    def test_focus_nearer_the_source_than_the_geometric_focus(self):
        # The axial maximum of a focused piston lies between the source and its geometric
        # focus (O'Neil 1949; the focal shift, common practice). Found here from O'Neil's
        # closed form with scipy's bounded Brent, apart from the module's own search.
        found = minimize_scalar(lambda zz: -oneil_on_axis(zz), bounds=(0.8 * D, D),
                                method="bounded", options={"xatol": 1e-12})
        assert TRUTH.focus_z_m < 0
        assert TRUTH.focus_z_m == pytest.approx(found.x - D, abs=1e-8)
        z, peak = axial_maximum(F_HZ, SOURCE)
        assert z == TRUTH.focus_z_m and peak == pytest.approx(oneil_on_axis(D + z), rel=1e-10)

    def test_jinc_first_zero(self):
        # The first zero of 2 J1(v)/v is v = j_{1,1} = 3.8317 (scipy.special.jn_zeros;
        # Abramowitz and Stegun table 9.5, recalled from memory).
        j11 = float(jn_zeros(1, 1)[0])
        assert j11 == pytest.approx(3.8317, abs=1e-4)
        x0 = j11 * D / (K * A)
        assert beam_factor((x0, 0.0, 0.0), F_HZ, SOURCE) < 1e-12
        assert beam_factor((0.0, SOURCE.stretch_y * x0, 0.0), F_HZ, SOURCE) < 1e-12
        near = minimize_scalar(lambda x: beam_factor((x, 0.0, 0.0), F_HZ, SOURCE),
                               bounds=(0.8 * x0, 1.2 * x0), method="bounded",
                               options={"xatol": 1e-12})
        assert near.x == pytest.approx(x0, rel=1e-6)

    def test_focal_plane_side_lobe_against_the_textbook(self):
        # First side lobe of the Airy pattern: at v = j_{2,1} = 5.1356 (where
        # d/dv (J1(v)/v) = -J2(v)/v vanishes), 17.6 dB below the centre (intensity 0.0175
        # of the peak, Born and Wolf 1999, sec. 8.5.2; values recalled from memory).
        zeros = jn_zeros(1, 2) * D / (K * A)
        on_axis = beam_factor((0.0, 0.0, 0.0), F_HZ, SOURCE)
        lobe = minimize_scalar(lambda x: -beam_factor((x, 0.0, 0.0), F_HZ, SOURCE),
                               bounds=(zeros[0], zeros[1]), method="bounded",
                               options={"xatol": 1e-12})
        level_db = 20 * math.log10(-lobe.fun / on_axis)
        j21 = float(jn_zeros(2, 1)[0])
        assert lobe.x == pytest.approx(j21 * D / (K * A), rel=1e-5)
        assert level_db == pytest.approx(20 * math.log10(2 * abs(j1(j21)) / j21), abs=1e-6)
        assert level_db == pytest.approx(-17.57, abs=0.02)


class TestBeamTruth:
    def test_widths_are_where_the_beam_crosses_its_levels(self):
        zf = TRUTH.focus_z_m
        cases = ((0, TRUTH.width_x_3db_m, MINUS_3DB), (0, TRUTH.width_x_6db_m, MINUS_6DB),
                 (1, TRUTH.width_y_3db_m, MINUS_3DB), (1, TRUTH.width_y_6db_m, MINUS_6DB))
        for axis, width, level in cases:
            for sign in (-1, 1):
                point = [0.0, 0.0, zf]
                point[axis] = sign * width / 2
                assert beam_factor(tuple(point), F_HZ, SOURCE) == pytest.approx(level,
                                                                                rel=1e-9)
            # above the level all the way in (the main lobe is one piece)
            inside = np.linspace(0, width / 2, 50, endpoint=False)
            values = [beam_factor((r, 0.0, zf) if axis == 0 else (0.0, r, zf), F_HZ, SOURCE)
                      for r in inside]
            assert min(values) > level
        assert TRUTH.width_y_6db_m == pytest.approx(SOURCE.stretch_y * TRUTH.width_x_6db_m,
                                                    rel=1e-9)

    def test_width_near_the_airy_minus_6db_width(self):
        # The -6 dB full width of 2 J1(v)/v is 2 v6 d / (k a), v6 from scipy.special.j1
        # by brentq (Airy pattern, Born and Wolf 1999, sec. 8.5.2); the plane of the axial
        # maximum is a little off the geometric focal plane, so they agree to a few %.
        v6 = brentq(lambda v: 2 * j1(v) / v - MINUS_6DB, 0.5, 3.8)
        assert v6 == pytest.approx(2.215, abs=0.01)   # half amplitude near 2.215, from memory
        airy = 2 * v6 * D / (K * A)
        assert TRUTH.width_x_6db_m == pytest.approx(airy, rel=0.03)

    def test_zone_ends_are_at_minus_6db_on_the_axis(self):
        for z in (TRUTH.zone_near_z_m, TRUTH.zone_far_z_m):
            assert beam_factor((0.0, 0.0, z), F_HZ, SOURCE) == pytest.approx(MINUS_6DB,
                                                                            rel=1e-9)
        assert TRUTH.zone_near_z_m < TRUTH.focus_z_m < TRUTH.zone_far_z_m
        assert TRUTH.focal_zone_6db_m == pytest.approx(TRUTH.zone_far_z_m
                                                       - TRUTH.zone_near_z_m)

    def test_side_lobe_against_a_dense_grid(self):
        # the first local maximum of the beam factor across the focus depth, found on a
        # 0.5 um grid with scipy.signal.argrelmax, apart from the truth's own walk
        for axis, where, level in ((0, TRUTH.side_lobe_x_m, TRUTH.side_lobe_x_db),
                                   (1, TRUTH.side_lobe_y_m, TRUTH.side_lobe_y_db)):
            r = np.arange(0, 3e-3, 0.5e-6)
            g = np.array([beam_factor((ri, 0.0, TRUTH.focus_z_m) if axis == 0
                                      else (0.0, ri, TRUTH.focus_z_m), F_HZ, SOURCE)
                          for ri in r])
            first = argrelmax(g)[0][0]
            assert where == pytest.approx(r[first], abs=0.5e-6)
            assert level == pytest.approx(20 * math.log10(g[first]), abs=1e-4)
        # slightly filled in by the defocus of the focal shift: within 1 dB of the
        # focal-plane Airy value, -17.6 dB (Born and Wolf 1999, recalled from memory)
        assert -17.57 < TRUTH.side_lobe_x_db < -16.6

    def test_figures_suit_a_small_raster(self):
        # the invented scene is made for a raster of 9 x 9 points 0.5 mm apart: a -6 dB
        # width of 1-2 mm, a focal zone of 10-20 mm, first side lobes within 2 mm
        assert 1e-3 < TRUTH.width_x_6db_m < TRUTH.width_y_6db_m < 2e-3
        assert 10e-3 < TRUTH.focal_zone_6db_m < 20e-3
        assert TRUTH.side_lobe_x_m < TRUTH.side_lobe_y_m < 2e-3

    def test_scene_wrappers_use_the_scene_source(self):
        params = SceneParameters()
        assert scene_beam_truth(F_HZ, params) == TRUTH
        assert scene_beam_factor((1e-3, 0.5e-3, 2e-3), F_HZ, params) == beam_factor(
            (1e-3, 0.5e-3, 2e-3), F_HZ, SOURCE)
        other = beam_truth(2.0e6, SOURCE)
        assert other.width_x_6db_m > TRUTH.width_x_6db_m   # wider at a lower frequency


class TestSceneFollowsTheBeam:
    def test_low_drive_pressure_is_linear_in_the_beam_factor(self):
        # At low drive the Fubini distortion vanishes and the peak pressure scales with the
        # beam factor (the scene's amplitude is pressure_per_vpp * Vpp * beam factor).
        params = SceneParameters()
        drive = Drive(amplitude_vpp=0.01, burst_cycles=20)
        peaks = []
        points = [(0.0, 0.0, TRUTH.focus_z_m), (0.4e-3, 0.0, 0.0), (0.0, 1.0e-3, 3e-3)]
        for point in points:
            arrival = (params.focal_distance_m + point[2]) / params.sound_speed_m_per_s
            t = arrival + np.arange(0, 20 / F_HZ, 1 / (64 * F_HZ))
            peaks.append(np.abs(acoustic_pressure_pa(t, drive, point, params)).max())
        expected_peak = params.pressure_per_vpp_pa * 0.01
        assert peaks[0] == pytest.approx(expected_peak, rel=1e-4)
        for point, peak in zip(points[1:], peaks[1:], strict=True):
            assert peak / peaks[0] == pytest.approx(
                beam_factor(point, F_HZ, SOURCE), rel=1e-4)

    def test_scene_beam_factor_follows_position_and_frequency(self):
        scene = Scene()
        assert scene.beam_factor() == beam_factor((0.0, 0.0, 0.0), F_HZ, SOURCE)
        scene.set_position_m(0.0, 0.0, TRUTH.focus_z_m)
        assert scene.beam_factor() == pytest.approx(1.0, abs=1e-12)
        scene.set_position_m(TRUTH.width_x_6db_m / 2, 0.0, TRUTH.focus_z_m)
        assert scene.beam_factor() == pytest.approx(MINUS_6DB, rel=1e-9)
        scene.set_drive(frequency_hz=2.0e6)
        assert scene.beam_factor() > MINUS_6DB           # the beam is wider at 2 MHz
