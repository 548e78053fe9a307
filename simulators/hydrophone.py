"""The invented demo hydrophone: a needle-like response of our own, and its calibration file.

INVENTED FOR THE DEMO. No real hydrophone is described here. The model is an analog
filter: a flat end-of-cable sensitivity ``M0`` shaped by a first-order high-pass (the
low-frequency roll-off of a small needle element with its preamplifier) and a damped
second-order resonance (the element's thickness resonance, here placed near 30 MHz).
With the time convention ``e^{j w t}`` and ``s = j w``::

    M(f) = M0 * (s / w_hp) / (1 + s / w_hp) * 1 / (1 + s / (Q w_r) + (s / w_r)^2)

This is causal, so its phase falls with frequency (0 to about -180 degrees over the band).
The same function feeds the simulated scene (pressure -> volts) and the shipped
calibration file, so a correct deconvolution in tankside.monitor recovers the scene's
pressure; the two sides are written independently.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

DATA_DIR = Path(__file__).resolve().parent / "data"
DEMO_CALIBRATION_PATH = DATA_DIR / "demo-hydrophone.csv"

# The calibrated band of the invented certificate.
CAL_LOW_HZ = 0.5e6
CAL_HIGH_HZ = 40.0e6
CAL_STEP_HZ = 0.5e6

CSV_HEADER = "frequency_hz,sensitivity_db_re_1v_per_upa,phase_deg"
CSV_HEADER_V_PER_PA = "frequency_hz,sensitivity_v_per_pa,phase_deg"


@dataclass(frozen=True)
class HydrophoneModel:
    """Parameters of the invented hydrophone (end-of-cable, into the digitiser's 1 MOhm input).

    Attributes
    ----------
    sensitivity_v_per_pa : float
        Mid-band sensitivity M0, V/Pa. The default 2.0e-7 V/Pa is about -254 dB re 1 V/uPa,
        a plausible figure for a needle hydrophone with a built-in preamplifier.
    highpass_hz : float
        Corner of the first-order low-frequency roll-off, Hz.
    resonance_hz : float
        Natural frequency of the element resonance, Hz.
    quality : float
        Quality factor of the resonance (1.2 gives about +2.5 dB of peaking).
    output_impedance_ohm : float
        Output resistance of the built-in preamplifier, ohm (see :meth:`load_factor`).
    name : str
        Name printed in the calibration file.
    """

    sensitivity_v_per_pa: float = 2.0e-7
    highpass_hz: float = 0.2e6
    resonance_hz: float = 30.0e6
    quality: float = 1.2
    output_impedance_ohm: float = 50.0
    name: str = "tankside demo needle hydrophone DN-1 (invented)"

    def load_factor(self, input_impedance_ohm: float) -> float:
        """Voltage into ``input_impedance_ohm`` relative to the calibrated 1 MOhm load.

        The preamplifier drives the cable through ``output_impedance_ohm`` (a resistive
        divider; cable and input capacitance left out), so a 50 ohm input about halves it.
        """
        r = self.output_impedance_ohm
        calibrated = 1.0e6 / (1.0e6 + r)
        return (input_impedance_ohm / (input_impedance_ohm + r)) / calibrated

    def response(self, frequency_hz: np.ndarray) -> np.ndarray:
        """Complex sensitivity M(f), V/Pa, time convention e^{j w t}.

        Parameters
        ----------
        frequency_hz : array_like
            Frequencies, Hz (0 and negative values are allowed; M(0) = 0, M(-f) = conj M(f)).

        Returns
        -------
        numpy.ndarray of complex
        """
        f = np.asarray(frequency_hz, dtype=float)
        s = 2j * np.pi * f
        w_hp = 2 * np.pi * self.highpass_hz
        w_r = 2 * np.pi * self.resonance_hz
        highpass = (s / w_hp) / (1 + s / w_hp)
        resonance = 1.0 / (1 + s / (self.quality * w_r) + (s / w_r) ** 2)
        return self.sensitivity_v_per_pa * highpass * resonance

    def sensitivity_db_re_1v_per_upa(self, frequency_hz: np.ndarray) -> np.ndarray:
        """|M(f)| in dB re 1 V/uPa (1 uPa = 1e-6 Pa, so 20 log10(|M| V/Pa * 1e-6))."""
        return 20.0 * np.log10(np.abs(self.response(frequency_hz)) * 1e-6)

    def phase_deg(self, frequency_hz: np.ndarray) -> np.ndarray:
        """Phase of M(f), degrees, unwrapped along ascending frequency (e^{j w t})."""
        return np.degrees(np.unwrap(np.angle(self.response(frequency_hz))))


def calibration_frequencies_hz() -> np.ndarray:
    """The frequencies of the shipped calibration: 0.5 MHz to 40 MHz in 0.5 MHz steps."""
    count = int(round((CAL_HIGH_HZ - CAL_LOW_HZ) / CAL_STEP_HZ)) + 1
    return CAL_LOW_HZ + CAL_STEP_HZ * np.arange(count)


def calibration_csv_text(model: HydrophoneModel | None = None,
                         frequency_hz: np.ndarray | None = None, *,
                         magnitude: str = "db") -> str:
    """The calibration CSV text for ``model`` (``#`` comment lines, a header, one row per
    frequency).

    ``magnitude="db"`` writes dB re 1 V/uPa with 4 decimals (the shipped file);
    ``magnitude="v_per_pa"`` writes V/Pa with 6 significant digits. Phase in degrees, 3 decimals.
    """
    if magnitude not in ("db", "v_per_pa"):
        raise ValueError("magnitude must be 'db' or 'v_per_pa'")
    model = model or HydrophoneModel()
    f = calibration_frequencies_hz() if frequency_hz is None else np.asarray(frequency_hz, float)
    if magnitude == "db":
        header = CSV_HEADER
        values = [f"{x:.4f}" for x in model.sensitivity_db_re_1v_per_upa(f)]
    else:
        header = CSV_HEADER_V_PER_PA
        values = [f"{x:.6g}" for x in np.abs(model.response(f))]
    phase = model.phase_deg(f)
    lines = [
        "# INVENTED DATA FOR THE TANKSIDE DEMO - not a real hydrophone, not a real certificate.",
        f"# hydrophone: {model.name}",
        "# quantity: end-of-cable open-circuit sensitivity as seen by a 1 MOhm digitiser input;",
        "#   no further electrical-loading correction applies to the simulated bench.",
        "# phase convention: e^{j w t} (phase falls with frequency for a causal response)",
        f"# calibrated band: {CAL_LOW_HZ / 1e6:g} MHz to {CAL_HIGH_HZ / 1e6:g} MHz",
        header,
    ]
    for fi, vi, pi in zip(f, values, phase, strict=True):
        lines.append(f"{fi:.0f},{vi},{pi:.3f}")
    return "\n".join(lines) + "\n"


def write_calibration_csv(path: str | Path, model: HydrophoneModel | None = None, *,
                          magnitude: str = "db") -> Path:
    """Write the invented calibration CSV for ``model`` to ``path``; return the path."""
    path = Path(path)
    path.write_text(calibration_csv_text(model, magnitude=magnitude), encoding="utf-8")
    return path


if __name__ == "__main__":  # regenerate the shipped file
    print(write_calibration_csv(DEMO_CALIBRATION_PATH))
