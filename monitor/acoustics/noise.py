"""Baseline, noise and the pulse gate of one voltage trace, measured on the trace itself.

A hydrophone trace is a pulse (the main arrival), perhaps later arrivals (echoes from the
tank, the mount, the hydrophone itself), and noise. What is measured here:

1. A first look: the median and robust sigma of the quieter end of the record
   (:func:`tankside.monitor.acoustics.presence.edge_noise`, the estimate the pulse-presence
   test uses).
2. Arrivals: the record is cut into blocks of half a cycle (of the voltage spectrum's peak
   frequency); a block whose RMS about the baseline exceeds ``threshold_sigma`` noise
   sigmas is part of an arrival, and arrivals closer than ``gap_cycles`` are one. The
   main arrival is the one holding the block of largest energy.
3. The quiet part: every block farther than ``gap_cycles`` from any arrival. Its mean is
   the baseline (the DC offset, removed before any method), its RMS about that mean is
   the noise level, and Hann-windowed segments of it, averaged (Welch's method), give the
   noise spectrum. When the quiet part is much quieter than the first look said, the
   arrivals are found again with the better figure (once).
4. The gate: the main arrival widened by ``margin_cycles`` on each side, or the explicit
   start and end. Everything the pulse parameters integrate lies in it.

Blocks of pure Gaussian noise exceed 2.5 sigma RMS with a probability below 1e-4 even
for blocks of four samples (chi-square with 4 degrees of freedom above 25), so noise
alone does not make arrivals; a signal counts from an envelope of about
``sqrt(2) * threshold_sigma`` sigma.

References
----------
P. D. Welch, "The use of fast Fourier transform for the estimation of power spectra: a
method based on time averaging over short, modified periodograms", IEEE Trans. Audio
Electroacoust. 15 (2), 70-73 (1967).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft

from .presence import DEFAULT_EDGE_FRACTION, edge_noise

#: Samples per edge at most for the first look (a robust sigma within about 7 %).
FIRST_LOOK_MAX_SAMPLES = 256
#: Noise is not taken below this fraction of the peak excursion (a noise-free synthetic
#: trace still gets a finite gate and finite weights: 200 dB below the peak).
NOISE_FLOOR_FRACTION = 1e-10
#: Welch segments averaged at most (8 Hann-windowed segments and a 5-bin smoothing: the
#: spectrum within about +/-25 % a bin, about 1 dB on the signal-to-noise spectrum).
MAX_NOISE_SEGMENTS = 8
#: Shortest Welch segment used; below it the noise is taken as white at its RMS.
MIN_NOISE_SEGMENT = 32

_EMPTY = np.zeros(0)
_EMPTY.setflags(write=False)


@dataclass(frozen=True, eq=False)
class NoiseEstimate:
    """Baseline and noise of one voltage trace (arrays read-only).

    Attributes
    ----------
    baseline_v : float
        Mean of the quiet part of the record (the DC offset), V.
    rms_v : float
        RMS of the quiet part about the baseline, V (the noise level; with the floors of
        :func:`measure_trace`).
    psd_freqs_hz : numpy.ndarray
        Frequencies of the noise spectrum, Hz (empty when ``segments`` is 0).
    psd_v2_per_hz : numpy.ndarray
        One-sided power spectral density of the noise, V^2/Hz, on ``psd_freqs_hz``.
    quiet_samples : int
        Samples in the quiet part (0: none was found; the first look's figures are used).
    segments : int
        Welch segments averaged for the spectrum; 0 means the quiet part was too short
        and the noise is taken as white at ``rms_v``.
    """

    baseline_v: float
    rms_v: float
    psd_freqs_hz: np.ndarray
    psd_v2_per_hz: np.ndarray
    quiet_samples: int
    segments: int

    def variance_density(self, freqs_hz: np.ndarray, dt_s: float) -> np.ndarray | float:
        """Noise variance per sample and unit of normalised bandwidth at ``freqs_hz``, V^2.

        ``S(f) = PSD(f) / (2 dt)``: white noise of RMS sigma has ``S = sigma^2``, and the
        expected ``|rfft(noise)|^2`` of ``m`` noise samples is ``m S(f)``. When the noise is
        taken as white (``segments`` 0) this is the one number ``rms_v ** 2``.
        """
        if self.segments == 0:
            return self.rms_v * self.rms_v
        return np.interp(freqs_hz, self.psd_freqs_hz, self.psd_v2_per_hz) * (0.5 / dt_s)

    def as_dict(self) -> dict:
        return {"baseline_v": self.baseline_v, "rms_v": self.rms_v,
                "quiet_samples": self.quiet_samples, "spectrum_segments": self.segments}


@dataclass(frozen=True)
class Arrival:
    """One arrival found in the record: sample range and its largest half-cycle RMS."""

    start: int
    stop: int
    peak_rms_v: float


@dataclass(frozen=True)
class Gate:
    """The stretch of the record the pulse parameters are taken over.

    Attributes
    ----------
    start, stop : int
        First sample and one past the last, indices into the record.
    dt_s : float
        Time step, s.
    automatic : bool
        Found from the trace (False: the explicit gate of the settings).
    at_record_edge : bool
        The main arrival (with its margin) reaches the start or the end of the record, so
        part of the pulse may be missing.
    left_out : tuple of Arrival
        Arrivals outside the gate (earlier or later than the main one).
    arrival_found : bool
        False when no block stood above the noise threshold (noise only, or a continuous
        wave with no quiet part to measure the noise on); the gate is then the strongest
        block with its margin.
    """

    start: int
    stop: int
    dt_s: float
    automatic: bool
    at_record_edge: bool
    left_out: tuple[Arrival, ...] = ()
    arrival_found: bool = True

    @property
    def start_s(self) -> float:
        """Time of the gate's first sample from the first sample of the record, s."""
        return self.start * self.dt_s

    @property
    def end_s(self) -> float:
        """Time of the gate's last sample from the first sample of the record, s."""
        return (self.stop - 1) * self.dt_s

    @property
    def samples(self) -> int:
        return self.stop - self.start

    def as_dict(self) -> dict:
        return {"start_s": self.start_s, "end_s": self.end_s, "automatic": self.automatic}


def explicit_gate(n: int, dt_s: float, start_s: float, end_s: float) -> tuple[int, int]:
    """Sample range ``[start, stop)`` of the samples with times in ``[start_s, end_s]``.

    Raises ValueError when no sample of an ``n``-sample record lies in it.
    """
    start = max(0, int(math.ceil(start_s / dt_s - 1e-9)))
    stop = min(n, int(math.floor(end_s / dt_s + 1e-9)) + 1)
    if stop - start < 2:
        raise ValueError(f"the gate {start_s:g}-{end_s:g} s holds fewer than two samples of "
                         f"a record of {n} samples at {dt_s:g} s")
    return start, stop


def measure_trace(voltage_v: np.ndarray, dt_s: float, period_s: float, *,
                  threshold_sigma: float, gap_cycles: float, margin_cycles: float,
                  segment_samples: int, gate_s: tuple[float, float] | None = None,
                  resolution_v: float = 0.0,
                  welch: WelchSetup | None = None) -> tuple[NoiseEstimate, Gate]:
    """Baseline, noise level and spectrum, arrivals and the pulse gate of one trace.

    Parameters
    ----------
    voltage_v : numpy.ndarray
        The trace, V (1-D, finite, at least 8 samples).
    dt_s : float
        Time step, s.
    period_s : float
        A cycle of the pulse, s (the voltage spectrum's peak frequency, inverted): the
        scale of blocks, gaps and margins.
    threshold_sigma, gap_cycles, margin_cycles : float
        See the module notes (``ConversionSettings.gate_*``).
    segment_samples : int
        Welch segment length, samples (shortened to fit the longest quiet stretch).
    gate_s : (float, float), optional
        Explicit gate, s from the first sample; arrivals are still found (for the noise
        and the arrivals left out).
    resolution_v : float
        Volts per digitiser code: the noise is not taken below ``resolution_v / sqrt(12)``.
    welch : WelchSetup, optional
        ``WelchSetup.make(segment_samples, dt_s)``, when the caller keeps one (else made
        here).

    Returns
    -------
    NoiseEstimate, Gate
    """
    v = voltage_v
    n = v.shape[0]
    b0, s0 = edge_noise(v, DEFAULT_EDGE_FRACTION, max_samples=FIRST_LOOK_MAX_SAMPLES)
    per = max(period_s / dt_s, 2.0)
    blk = int(min(max(2, round(0.5 * per)), max(2, n // 8)))
    nb = n // blk               # the last n % blk samples (under half a cycle) are not blocked
    body = v[:nb * blk].reshape(nb, blk)
    ones = np.ones(blk)
    sums = body @ ones            # a matrix-vector product sums rows fastest
    sq = (body * body) @ ones
    # mean square about the first-look baseline, per block
    energy = sq - (2.0 * b0) * sums
    energy *= 1.0 / blk
    energy += b0 * b0
    main = int(energy.argmax())
    peak = math.sqrt(max(float(energy[main]), 0.0))
    floor = max(resolution_v / math.sqrt(12.0), NOISE_FLOOR_FRACTION * peak)
    sigma = max(s0, floor)
    gap_blocks = max(1, int(math.ceil(gap_cycles * per / blk)))
    for _ in range(2):
        groups, runs = _arrivals(energy, (threshold_sigma * sigma) ** 2, gap_blocks)
        q_blocks = q_sum = q_sq = 0.0
        for r0, r1 in runs:
            q_blocks += r1 - r0
            q_sum += float(sums[r0:r1].sum())
            q_sq += float(sq[r0:r1].sum())
        q_count = int(q_blocks) * blk
        if q_count >= 2:
            baseline = q_sum / q_count
            rms = math.sqrt(max(q_sq / q_count - baseline * baseline, 0.0))
        else:
            baseline, rms = b0, s0
        rms = max(rms, floor)
        if not rms < 0.8 * sigma:
            break
        sigma = rms
    arrivals = []
    main_index = 0
    for i, (g0, g1) in enumerate(groups):
        if g0 <= main <= g1:
            main_index = i
        stop = n if g1 == nb - 1 else (g1 + 1) * blk
        arrivals.append(Arrival(g0 * blk, stop,
                                math.sqrt(max(float(energy[g0:g1 + 1].max()), 0.0))))
    margin = int(round(margin_cycles * per))
    found = bool(arrivals)
    if not found:          # nothing above the threshold: the strongest block alone
        arrivals = [Arrival(main * blk, min(n, (main + 1) * blk), peak)]
    a = arrivals[main_index]
    if gate_s is None:
        start, stop = max(0, a.start - margin), min(n, a.stop + margin)
        at_edge = a.start - margin < 0 or a.stop + margin > n
        automatic = True
    else:
        start, stop = explicit_gate(n, dt_s, *gate_s)
        at_edge = start == 0 or stop == n
        automatic = False
    left_out = tuple(x for x in arrivals if x.stop <= start or x.start >= stop)
    noise = _noise_spectrum(v, dt_s, baseline, rms, [(r0 * blk, r1 * blk) for r0, r1 in runs],
                            int(q_count), segment_samples, welch)
    return noise, Gate(start, stop, float(dt_s), automatic, bool(at_edge), left_out, found)


def _arrivals(energy: np.ndarray, threshold: float, gap_blocks: int):
    """Groups of hot blocks ``[(first, last), ...]`` and the quiet runs of blocks
    ``[(start, stop), ...]``: farther than ``gap_blocks`` from every hot block."""
    nb = energy.shape[0]
    # .nonzero()[0] of a 1-D array is np.flatnonzero without its ravel and wrapper
    idx = (energy > threshold).nonzero()[0]
    if idx.size == 0:
        return [], [(0, nb)]
    breaks = (idx[1:] - idx[:-1] > gap_blocks).nonzero()[0].tolist()
    ends = idx.tolist()
    groups = [(ends[a + 1 if a >= 0 else 0], ends[b])
              for a, b in zip([-1, *breaks], [*breaks, len(ends) - 1], strict=True)]
    runs, pos = [], 0
    for first, last in groups:
        if first - gap_blocks > pos:
            runs.append((pos, first - gap_blocks))
        pos = max(pos, last + gap_blocks + 1)
    if pos < nb:
        runs.append((pos, nb))
    return groups, runs


@dataclass(frozen=True, eq=False)
class WelchSetup:
    """What the noise spectrum of one segment length and time step needs (read-only).

    ``window`` is the Hann window scaled to unit energy, so the mean ``|rfft|^2`` of
    windowed white noise of RMS sigma is sigma^2 in every bin.
    """

    samples: int
    window: np.ndarray
    freqs_hz: np.ndarray

    @classmethod
    def make(cls, samples: int, dt_s: float) -> WelchSetup:
        w = np.hanning(samples + 2)[1:-1]
        w /= math.sqrt(float(np.dot(w, w)))
        f = np.arange(samples // 2 + 1) * (1.0 / (samples * dt_s))
        w.setflags(write=False)
        f.setflags(write=False)
        return cls(samples, w, f)


def _noise_spectrum(v: np.ndarray, dt_s: float, baseline: float, rms: float,
                    runs: list[tuple[int, int]], quiet_samples: int, segment_samples: int,
                    welch: WelchSetup | None) -> NoiseEstimate:
    white = NoiseEstimate(float(baseline), float(rms), _EMPTY, _EMPTY, quiet_samples, 0)
    if rms <= 0:
        return white
    longest = max((b - a for a, b in runs), default=0)
    seg = segment_samples
    if longest < seg:
        seg = 1 << (longest.bit_length() - 1) if longest > 0 else 0
    if seg < MIN_NOISE_SEGMENT:
        return white
    pieces, count = [], 0
    for a, b in runs:
        k = min((b - a) // seg, MAX_NOISE_SEGMENTS - count)
        if k > 0:
            pieces.append(v[a:a + k * seg].reshape(k, seg))
            count += k
        if count >= MAX_NOISE_SEGMENTS:
            break
    segs = pieces[0] - baseline if len(pieces) == 1 else np.concatenate(pieces) - baseline
    if welch is None or welch.samples != seg:
        welch = WelchSetup.make(seg, dt_s)
    segs *= welch.window
    spec = np.abs(scipy.fft.rfft(segs, axis=1, workers=1))
    spec *= spec
    power = spec.sum(axis=0)
    # 5-bin smoothing, the two end bins keep their own values; one-sided PSD, V^2/Hz
    psd = np.convolve(power, np.full(5, 2.0 * dt_s / (5.0 * count)), mode="same")
    psd[:2] = power[:2] * (2.0 * dt_s / count)
    psd[-2:] = power[-2:] * (2.0 * dt_s / count)
    psd.setflags(write=False)
    return NoiseEstimate(float(baseline), float(rms), welch.freqs_hz, psd, quiet_samples, count)
