"""Does a voltage trace hold a pulse, or only the digitiser's noise?

With the drive switched off (after a safe-off, or by hand) the digitiser still
triggers and sends traces, but they hold noise only. Converting noise gives an
acoustic working frequency anywhere in the spectrum and p_r of a few kPa, so the
rules that judge the pulse (drift, conversion, narrowband, range use) must know
that there is no pulse to judge. :func:`pulse_presence` decides that from the
trace alone.

The test: the largest excursion from the trace's median must reach ``factor``
times a robust estimate of the noise standard deviation. The noise is estimated
from the quieter of the first and last ``edge_fraction`` of the record (a pulse
usually sits somewhere in between, and one of the two edges is free of it even
when it does not), as ``1.4826 * MAD`` (median absolute deviation), which
estimates the standard deviation of Gaussian noise and is not moved by a pulse
occupying a minority of the samples.

The default factor of 8 leaves a wide margin above the largest excursion of pure
Gaussian noise in a record of 10^5 samples (about 4.4 to 5 sigma), and still calls
a pulse of 10 noise sigma present.

References
----------
.. [1] F. R. Hampel, "The influence curve and its role in robust estimation",
   J. Amer. Statist. Assoc. 69 (1974) 383-393: the median absolute deviation as a
   robust scale estimate.
.. [2] P. J. Rousseeuw and C. Croux, "Alternatives to the median absolute
   deviation", J. Amer. Statist. Assoc. 88 (1993) 1273-1283: the factor 1.4826
   (1 / Phi^-1(3/4)) that makes the MAD a consistent estimate of a Gaussian sigma.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MAD_TO_SIGMA = 1.4826           # 1 / Phi^-1(3/4), Gaussian consistency factor [2]
DEFAULT_FACTOR = 8.0
DEFAULT_EDGE_FRACTION = 0.1
MIN_EDGE_SAMPLES = 16           # below this an edge's MAD is too coarse: use the whole trace


@dataclass(frozen=True)
class PulsePresence:
    """The verdict on one trace, with the figures behind it.

    Attributes
    ----------
    present : bool
        A pulse stands out of the noise by at least ``factor``.
    peak_v : float
        Largest ``|v - median(v)|`` over the trace, V.
    noise_sigma_v : float
        Robust noise standard deviation, V (with the quantisation floor applied).
    threshold_v : float
        ``factor * noise_sigma_v``, V.
    peak_to_noise : float
        ``peak_v / noise_sigma_v`` (inf when the noise estimate is 0 and the peak
        is not; 0 for a constant trace).
    """

    present: bool
    peak_v: float
    noise_sigma_v: float
    threshold_v: float
    peak_to_noise: float


def robust_sigma(values) -> float:
    """``1.4826 * median(|x - median(x)|)``: a standard deviation robust to outliers.

    Parameters
    ----------
    values : array_like
        Samples (any unit; the result is in the same unit).

    Returns
    -------
    float
        The MAD-based estimate of the standard deviation of Gaussian noise [1]_ [2]_.
    """
    x = np.asarray(values, dtype=np.float64)
    if x.size == 0:
        raise ValueError("robust_sigma needs at least one sample")
    return float(MAD_TO_SIGMA * np.median(np.abs(x - np.median(x))))


def edge_noise(v: np.ndarray, edge_fraction: float = DEFAULT_EDGE_FRACTION,
               *, max_samples: int | None = None) -> tuple[float, float]:
    """Median and robust sigma of the quieter end of a record (V, or the trace's unit).

    The first and last ``edge_fraction`` of the record (each at least 16 samples, and at
    most ``max_samples`` when given, taken from the outer end) are each reduced to
    :func:`robust_sigma`; the edge with the smaller sigma gives both figures. A record too
    short for two such edges is estimated as a whole. This is the one noise estimate the
    pulse-presence test and the converter's first look at a trace share.

    Returns
    -------
    median, sigma : float
        ``median`` of the quieter edge and its ``1.4826 * MAD``.
    """
    edge = max(MIN_EDGE_SAMPLES, int(round(edge_fraction * v.size)))
    if max_samples is not None:
        edge = min(edge, max(MIN_EDGE_SAMPLES, max_samples))
    if 2 * edge > v.size:
        return float(np.median(v)), robust_sigma(v)
    # both edges as the rows of one array: per row the median and 1.4826 * MAD from the
    # middle order statistics (as numpy.median: the mean of the two middle values for an
    # even count). np.partition places exactly those values, as a full sort would, at a
    # fraction of its cost; the short edges partition faster than numpy.median dispatches.
    both = np.empty((2, edge))
    both[0] = v[:edge]
    both[1] = v[-edge:]
    med = _middle(np.partition(both, _middle_ranks(edge), axis=1), edge)
    both -= med[:, None]
    np.abs(both, out=both)
    both.partition(_middle_ranks(edge), axis=1)
    mad = _middle(both, edge)
    (m_head, m_tail), (s_head, s_tail) = med.tolist(), (MAD_TO_SIGMA * mad).tolist()
    return (m_head, s_head) if s_head <= s_tail else (m_tail, s_tail)


def _middle_ranks(count: int) -> tuple[int, ...]:
    """The ranks (0-based) a median of ``count`` values is taken from."""
    k = count // 2
    return (k,) if count % 2 else (k - 1, k)


def _middle(part: np.ndarray, count: int):
    """Median along the last axis of ``part``, partitioned at :func:`_middle_ranks`
    (``count`` values along it): the middle value, or the mean of the two middle ones
    computed as numpy.median does (their sum halved)."""
    k = count // 2
    if count % 2:
        return part[..., k]
    return (part[..., k - 1] + part[..., k]) * 0.5


def pulse_presence(voltage_v, *, factor: float = DEFAULT_FACTOR,
                   edge_fraction: float = DEFAULT_EDGE_FRACTION,
                   resolution_v: float = 0.0) -> PulsePresence:
    """Decide whether a voltage trace holds a pulse above its noise.

    Parameters
    ----------
    voltage_v : array_like
        The trace, V (1-D, at least one sample).
    factor : float, keyword-only
        How many noise standard deviations the largest excursion from the median
        must reach (inclusive). 0 calls every trace that is not constant present.
    edge_fraction : float, keyword-only
        Share of the record at each end used for the noise estimate, in (0, 0.5].
        Each edge takes at least 16 samples; a record too short for two such edges
        is estimated as a whole.
    resolution_v : float, keyword-only
        Volts per code of the digitiser. The noise estimate is not taken below the
        quantisation noise ``resolution_v / sqrt(12)``, so that a quiet record whose
        noise sits within one code (MAD of 0) does not make every code step a pulse.

    Returns
    -------
    PulsePresence

    Raises
    ------
    ValueError
        Empty or non-finite trace, or an option out of range.

    References
    ----------
    .. [1] Hampel (1974), see the module docstring.
    .. [2] Rousseeuw and Croux (1993), see the module docstring.
    """
    v = np.asarray(voltage_v, dtype=np.float64)
    if v.ndim != 1 or v.size == 0:
        raise ValueError(f"voltage_v must be a non-empty 1-D array, got shape {v.shape}")
    if not np.all(np.isfinite(v)):
        raise ValueError("voltage_v must be finite (NaN or infinity in the trace)")
    if not (np.isfinite(factor) and factor >= 0):
        raise ValueError(f"factor must be a finite number >= 0, got {factor!r}")
    if not (0.0 < edge_fraction <= 0.5):
        raise ValueError(f"edge_fraction must be in (0, 0.5], got {edge_fraction!r}")
    if not (np.isfinite(resolution_v) and resolution_v >= 0):
        raise ValueError(f"resolution_v must be a finite number >= 0 V, got {resolution_v!r}")
    # max |v - m| is the larger of max(v) - m and m - min(v), rounding included (rounding
    # is monotonic), without a trace-sized temporary
    med = float(_middle(np.partition(v, _middle_ranks(v.size)), v.size))
    peak_v = max(float(v.max()) - med, med - float(v.min()))
    sigma_v = max(edge_noise(v, edge_fraction)[1], resolution_v / np.sqrt(12.0))
    threshold_v = factor * sigma_v
    if sigma_v > 0:
        ratio = peak_v / sigma_v
    else:
        ratio = float("inf") if peak_v > 0 else 0.0
    present = bool(peak_v > 0 and peak_v >= threshold_v)
    return PulsePresence(present=present, peak_v=peak_v, noise_sigma_v=float(sigma_v),
                         threshold_v=float(threshold_v), peak_to_noise=float(ratio))
