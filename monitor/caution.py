"""The safety caution, worded once for every front end (dashboard, headless, demo).

Shown on the first session in a folder and acknowledged before anything is sent to an
instrument. The points defer to local rules and licensed practice; the README's
"Safety first" says the same at more length.
"""

from __future__ import annotations

import textwrap

POINTS = (
    "High-power ultrasound can heat and damage tissue. Keep hands out of the tank while "
    "the source is driven.",
    "Drive voltages from the power amplifier can be lethal. Switch the drive off before "
    "touching the transducer, cables or connectors.",
    "Cavitation and high peak pressures destroy hydrophones. Start at low drive, watch p_r "
    "and the clipping count, and respect the hydrophone's rated maximum.",
    "A positioning stage moves the hydrophone under program control and can drive it into "
    "the transducer or the tank wall. Set the soft limits ([stage.limits] in the bench "
    "file) to the travel that is clear, and keep hands clear while it moves.",
    "tankside never switches the generator output on by itself ({how_on}); it is switched "
    "off when the session ends. Alert actions such as safe-off are a convenience, never "
    "the only interlock.",
    "tankside does not replace calibrated compliance measurements, your local rules or "
    "licensed practice; follow them first.",
)


def caution_points(how_on: str) -> list[str]:
    """The points, with how this front end switches the drive on filled in."""
    return [p.format(how_on=how_on) for p in POINTS]


def caution_text(how_on: str, *, heading: str = "CAUTION", width: int = 78) -> str:
    """The caution as plain text: a heading line, then one wrapped bullet per point."""
    lines = [heading]
    for point in caution_points(how_on):
        lines += textwrap.wrap(point, width, initial_indent="* ", subsequent_indent="  ")
    return "\n".join(lines)
