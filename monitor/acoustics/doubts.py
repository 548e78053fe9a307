"""Warnings a conversion result carries when one of its numbers is doubtful.

Every :class:`tankside.monitor.acoustics.converter.TraceResult` has ``warnings``: a tuple
of :class:`ResultWarning` (``code`` from :class:`WarningCode`, and a sentence with the
figures behind it), empty when all is well. The codes are a closed set, declared here
once; their JSON form is ``{"code": ..., "message": ...}``.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum


class WarningCode(StrEnum):
    """Why a result may be doubtful."""

    #: ``snr_db`` below the ``low_snr_db`` setting (default 20 dB).
    LOW_SNR = "low_snr"
    #: More than ``beyond_calibration_share`` of the pulse's above-noise voltage energy
    #: lies outside the calibrated band, where the sensitivity is unknown.
    ENERGY_BEYOND_CALIBRATION = "energy_beyond_calibration"
    #: The calibration has no phase; the minimum-phase estimate depends on what is
    #: assumed below the calibrated band (the message gives the spread of p_r).
    PHASE_ESTIMATED = "phase_estimated"
    #: No derating depth was given: the mechanical index is the underated water value.
    MI_NOT_DERATED = "mi_not_derated"
    #: The pulse gate touches the start or the end of the record.
    PULSE_AT_RECORD_EDGE = "pulse_at_record_edge"
    #: Other arrivals (echoes, pick-up) were found outside the gate and left out.
    GATED_OUT_ARRIVALS = "gated_out_arrivals"
    #: The zero-crossing f_awf could not be had (too few half cycles); the spectrum
    #: method was used instead.
    AWF_SPECTRUM_FALLBACK = "awf_spectrum_fallback"
    #: The quiet part of the record was too short for a noise spectrum; the noise was
    #: taken as white at its measured level.
    NOISE_TAKEN_WHITE = "noise_taken_white"


@dataclass(frozen=True)
class ResultWarning:
    """One warning on one result."""

    code: WarningCode
    message: str

    def as_dict(self) -> dict[str, str]:
        return {"code": str(self.code), "message": self.message}
