"""The command dialects the simulated digitiser speaks, as tables (declarative, pure).

Each dialect is a list of rows ``header pattern -> write handler, query handler``; the
handlers are named here and defined by the device model
(:meth:`tankside.simulators.digitiser.SimulatedDigitiser.handlers`), so a dialect is
only words. A dialect also says what its range setting means (``range_kind``: the span
peak to peak, the peak, or volts per division over ``range_divisions``) and the identity
the model gives in it. All three are invented, written from this file alone and not from
any profile, so a mistake in a profile cannot be matched by the same mistake here.

- ``simdig`` (the default): the model's own words (``ACQuire:``, ``CHANnel#:``,
  ``WAVeform:``, described by ``simulators/profiles/sim-digitiser.toml``), and beside them
  the ``SENSe:``/``FETCh:`` words of the ``sense-fetch`` dialect.
- ``sense-fetch``: SCPI-1999 style ``SENSe:``/``FETCh:`` words alone, with SCPI's
  ``INITiate``, ``ABORt`` and ``TRIGger:SOURce``; ranges in +/- peak volts, a time step
  that can only be read.
- ``channel-waveform``: words addressed per input port (``PORT#:``), a settable rate
  (``CAPTure:RATE``), ranges in volts per division (eight across the span), and blocks of
  either 16-bit codes (``WAVE:KIND WORD``, the power-on format) or 32-bit floats counting
  screen divisions (``WAVE:KIND GRID``), in either byte order (``WAVE:ORDer``).

Handler names: a bare name is a write (``"points"``), the same name with ``?`` its query.
"""

from __future__ import annotations

from dataclasses import dataclass

RANGE_KINDS = ("span", "peak", "per_division")


@dataclass(frozen=True)
class Row:
    """One header: its SCPI pattern and the names of its write and query handlers."""

    header: str
    write: str | None = None
    query: str | None = None


@dataclass(frozen=True)
class Dialect:
    """A command dialect of the simulated digitiser.

    Attributes
    ----------
    name : str
    rows : tuple of Row
        The headers it answers (IEEE 488.2 common commands and ``SYSTem:ERRor?`` always).
    identity : str
        The ``*IDN?`` reply.
    range_kind : {"span", "peak", "per_division"}
        What a range value in this dialect means.
    range_divisions : int
        Divisions across the span (``per_division``; also the unit of ``GRID`` samples).
    """

    name: str
    rows: tuple[Row, ...]
    identity: str
    range_kind: str = "span"
    range_divisions: int = 10


# SCPI-1999's own INITiate and TRIGger:SOURce, spoken by both the model's words and the
# SENSe:/FETCh: dialect.
_SCPI_ARM_ROWS = (
    Row("INITiate[:IMMediate]", "arm"),
    Row("ABORt", "abort"),
    Row("TRIGger:SOURce", "trigger_source", "trigger_source?"),
)

_SIMDIG_ROWS = _SCPI_ARM_ROWS + (
    Row("ACQuire:POINts", "points", "points?"),
    Row("ACQuire:SRATe", "rate", "rate?"),
    Row("ACQuire:AVERage", "averages", "averages?"),
    Row("ACQuire:DONE", query="done?"),
    Row("CHANnel#:RANGe", "range", "range?"),
    Row("CHANnel#:OFFSet", "offset", "offset?"),
    Row("CHANnel#:COUPling", "coupling", "coupling?"),
    Row("CHANnel#:IMPedance", "impedance", "impedance?"),
    Row("TRIGger:LEVel", "trigger_level", "trigger_level?"),
    Row("TRIGger:SLOPe", "slope", "slope?"),
    Row("TRIGger:DELay", "delay", "delay?"),
    Row("WAVeform:SOURce", "wave_source", "wave_source?"),
    Row("WAVeform:FORMat", "format", "format?"),
    Row("WAVeform:BORDer", "border", "border?"),
    Row("WAVeform:DATA", query="fetch?"),
    Row("WAVeform:XINCrement", query="time_step?"),
    Row("WAVeform:XORigin", query="delay?"),
    Row("WAVeform:YINCrement", query="source_volts_per_code?"),
    Row("WAVeform:YOFFset", query="source_offset?"),
    Row("WAVeform:CMIN", query="code_min?"),
    Row("WAVeform:CMAX", query="code_max?"),
)

_SENSE_FETCH_ROWS = (
    Row("SENSe:SWEep:POINts", "points", "points?"),
    Row("SENSe:SWEep:TINTerval", query="time_step?"),
    Row("SENSe:SWEep:OFFSet:TIME", query="delay?"),
    Row("SENSe#:VOLTage:RANGe", "range", "range?"),
    Row("SENSe#:VOLTage:OFFSet", "offset", "offset?"),
    Row("SENSe#:VOLTage:RESolution", query="volts_per_code?"),
    Row("FORMat:BORDer", "sense_border", "sense_border?"),
    Row("FORMat[:DATA]", "sense_format"),
    Row("FETCh#:WAVeform", query="sense_fetch?"),
)

_CHANNEL_WAVEFORM_ROWS = (
    Row("CAPTure:LENGth", "points", "points?"),
    Row("CAPTure:RATE", "rate", "rate?"),
    Row("CAPTure:STEP", query="time_step?"),
    Row("CAPTure:STARt", "arm"),
    Row("CAPTure:READy", query="done?"),
    Row("CAPTure:HALT", "abort"),
    Row("CUE:FROM", "cue_from", "cue_from?"),
    Row("CUE:LEVel", "trigger_level", "trigger_level?"),
    Row("CUE:DELay", "delay", "delay?"),
    Row("PORT#:GRID", "range", "range?"),
    Row("PORT#:SHIFt", "offset", "offset?"),
    Row("PORT#:LOAD", "impedance", "impedance?"),
    Row("PORT#:UNIT", query="volts_per_code?"),
    Row("PORT#:WAVE", query="port_fetch?"),
    Row("WAVE:KIND", "wave_kind", "wave_kind?"),
    Row("WAVE:ORDer", "wave_order", "wave_order?"),
)

DIALECTS: dict[str, Dialect] = {
    "simdig": Dialect("simdig", _SIMDIG_ROWS + _SENSE_FETCH_ROWS,
                      identity="TANKSIDE,SIMDIG-2,0001,1.0"),
    "sense-fetch": Dialect("sense-fetch", _SCPI_ARM_ROWS + _SENSE_FETCH_ROWS,
                           identity="TANKSIDE,SIMDIG-2SF,0001,1.0", range_kind="peak"),
    "channel-waveform": Dialect("channel-waveform", _CHANNEL_WAVEFORM_ROWS,
                                identity="TANKSIDE,SIMDIG-2CW,0001,1.0",
                                range_kind="per_division", range_divisions=8),
}
DEFAULT_DIALECT = "simdig"


def dialect_named(name: str) -> Dialect:
    """The dialect called ``name``; ValueError naming the known ones otherwise."""
    if name not in DIALECTS:
        raise ValueError(f"no simulated digitiser dialect {name!r} "
                         f"(known: {', '.join(DIALECTS)})")
    return DIALECTS[name]
