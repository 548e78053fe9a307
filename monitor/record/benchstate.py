"""The bench state recorded with a trace (layout 3): stage position and water reading.

Plain data shared by the live session (which fills it), the store (which writes it to
``trace_positions`` and ``trace_water``) and the reader, export and replay (which read
it back). Files of layouts 1 and 2 have none: their traces read back with ``None``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .schema import WaterSource


@dataclass(frozen=True)
class TraceBench:
    """The bench as a trace was acquired.

    Attributes
    ----------
    positions_mm : dict
        Stage axis -> position, mm (empty: no stage, or its position unknown then).
    water_reading_c : float or None
        The thermometer's latest reading, degC (None: no thermometer, or no reading yet).
    water_reading_age_s : float or None
        Age of that reading at the trace's acquisition, s.
    water_source : WaterSource or None
        Which temperature the conversion used; None without a thermometer (the bench
        temperature, as in every session before layout 3).
    """

    positions_mm: dict[str, float] = field(default_factory=dict)
    water_reading_c: float | None = None
    water_reading_age_s: float | None = None
    water_source: WaterSource | None = None

    @property
    def empty(self) -> bool:
        """Nothing to record: no position and no thermometer."""
        return not self.positions_mm and self.water_source is None
