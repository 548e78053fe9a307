"""Scan views for the map panel's tests, built by hand (values invented).

The field is an invented Gaussian beam: p_r = 1.2 MPa at (x0, y0), falling as
exp(-r^2 / (2 w^2)); the other parameters follow it (p_c a little higher, PII and
I_pa as its square, MI as p_r in MPa over sqrt(2.5 MHz)). Nothing here is measured.
"""

from __future__ import annotations

import numpy as np

from tankside.monitor.live.snapshot import ScanView

PEAK_PA = 1.2e6


def _fields(p_r: np.ndarray) -> dict[str, np.ndarray]:
    return {
        "peak_rarefactional_pa": p_r,
        "peak_compressional_pa": 1.3 * p_r,
        "pulse_intensity_integral_j_per_m2": 0.02 * (p_r / 1e6) ** 2,
        "pulse_average_intensity_w_per_m2": 1.0e4 * (p_r / 1e6) ** 2,
        "mechanical_index": p_r / 1e6 / np.sqrt(2.5),
    }


def raster_view(xs: np.ndarray, ys: np.ndarray, *, done: int | None = None,
                centre_mm: tuple[float, float] = (1.0, -1.0), width_mm: float = 2.0,
                failed: tuple[int, ...] = (), zs: np.ndarray | None = None,
                phase: str = "acquiring", why: str = "", time_left_s: float = 83.0,
                beam: dict | None = None) -> ScanView:
    """A raster (x fast, serpentine off) over ``xs`` by ``ys`` (and ``zs`` levels, a
    volume), with the first ``done`` points measured (all when None); the next one is
    the current point (None when all are done)."""
    axes = ("x", "y") if zs is None else ("x", "y", "z")
    levels = [xs, ys] if zs is None else [xs, ys, zs]
    # plan order: x fastest, then y, then z (numpy meshgrid, ij indexing, reversed)
    mesh = np.meshgrid(*levels[::-1], indexing="ij")
    targets = np.stack([m.ravel() for m in mesh[::-1]], axis=1)
    index_mesh = np.meshgrid(*[np.arange(c.size) for c in levels[::-1]], indexing="ij")
    grid_index = np.stack([m.ravel() for m in index_mesh[::-1]], axis=1)
    total = targets.shape[0]
    r2 = (targets[:, 0] - centre_mm[0]) ** 2 + (targets[:, 1] - centre_mm[1]) ** 2
    p_r = PEAK_PA * np.exp(-r2 / (2.0 * width_mm ** 2))
    if zs is not None:
        p_r = p_r * np.exp(-((targets[:, 2] - zs.mean()) / 10.0) ** 2)
    n_done = total if done is None else done
    bad = np.zeros(total, dtype=bool)
    bad[list(failed)] = True
    values = {}
    for name, v in _fields(p_r).items():
        v = v.copy()
        v[n_done:] = np.nan
        v[bad] = np.nan
        values[name] = v
    return ScanView(
        kind="raster" if zs is None else "volume", total=total, completed=n_done,
        current=n_done if n_done < total else None, phase=phase, why=why,
        targets_mm=targets, target_axes=axes, grid_axes=axes,
        grid_coords_mm=tuple(np.asarray(c, dtype=float) for c in levels),
        grid_index=grid_index, values=values, failed=bad, time_left_s=time_left_s,
        beam=beam or {})


def line_view(xs: np.ndarray, *, done: int | None = None, centre_mm: float = 2.0,
              width_mm: float = 3.0, failed: tuple[int, ...] = ()) -> ScanView:
    """A line along x over ``xs``, the first ``done`` points measured."""
    total = xs.size
    targets = np.stack([xs, np.full(total, 5.0)], axis=1)        # y fixed at 5 mm
    p_r = PEAK_PA * np.exp(-((xs - centre_mm) ** 2) / (2.0 * width_mm ** 2))
    n_done = total if done is None else done
    bad = np.zeros(total, dtype=bool)
    bad[list(failed)] = True
    values = {}
    for name, v in _fields(p_r).items():
        v = v.copy()
        v[n_done:] = np.nan
        v[bad] = np.nan
        values[name] = v
    return ScanView(
        kind="line", total=total, completed=n_done,
        current=n_done if n_done < total else None, phase="acquiring",
        targets_mm=targets, target_axes=("x", "y"), grid_axes=("x",),
        grid_coords_mm=(np.asarray(xs, dtype=float),),
        grid_index=np.arange(total)[:, None], values=values, failed=bad,
        time_left_s=42.0)


def points_view(targets_mm: np.ndarray, *, done: int) -> ScanView:
    """A list of scattered points (no grid), the first ``done`` measured."""
    total = targets_mm.shape[0]
    r2 = np.sum(targets_mm ** 2, axis=1)
    p_r = PEAK_PA * np.exp(-r2 / 50.0)
    values = {}
    for name, v in _fields(p_r).items():
        v = v.copy()
        v[done:] = np.nan
        values[name] = v
    return ScanView(
        kind="points", total=total, completed=done, current=done if done < total else None,
        phase="settling", targets_mm=targets_mm, target_axes=("x", "y", "z"),
        grid_axes=(), grid_coords_mm=(), grid_index=np.zeros((total, 0), dtype=int),
        values=values, failed=np.zeros(total, dtype=bool), time_left_s=3725.0)
